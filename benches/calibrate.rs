//! Speed of one calibration against the FFT floor: parse and calibrate one axis of 2^22 f32
//! samples end to end, next to one real-input FFT of the same length (plan included, as a fresh
//! process pays it too) in the same run; and, at 2^20 samples, the calibration of one axis under
//! the default model (frequency-dependent drag on) against the plain model it replaced as the
//! default, in the same run (the target: at most 1.5 times), and the Allan stage alone beside
//! each. Run with
//! `cargo bench --bench calibrate`.

use criterion::{Criterion, criterion_group, criterion_main};
use std::hint::black_box;
use trapwise::ingest::{self, Format, IngestOptions};
use trapwise::recording::{AxisTrace, PositionUnit, Recording};
use trapwise::settings::Settings;
use trapwise::simulate::{Disturbances, OuAxis, simulate_axes};

const N: usize = 1 << 22;
const FS: f64 = 50_000.0;

fn recording_bytes() -> Vec<u8> {
    let axes = [OuAxis {
        name: "x".into(),
        corner_frequency_hz: 950.0,
        variance: 1e-4,
    }];
    let samples = simulate_axes(&axes, FS, N, 1, &Disturbances::default()).remove(0);
    let rec = Recording {
        sample_rate_hz: FS,
        unit: PositionUnit::Volt,
        axes: vec![AxisTrace {
            name: "x".into(),
            samples,
        }],
    };
    ingest::encode(&rec, Format::RawF32, None).expect("encodes")
}

fn settings() -> Settings {
    let mut s = Settings::default();
    for (k, v) in [
        ("bead_diameter_um", "1"),
        ("temperature_c", "25"),
        ("sample_rate_hz", "50000"),
        ("units", "V"),
    ] {
        s.apply(k, v).expect("valid setting");
    }
    s
}

fn bench(c: &mut Criterion) {
    let bytes = recording_bytes();
    let settings = settings();
    let mut group = c.benchmark_group("one axis, 2^22 f32 samples");
    group.sample_size(10);
    group.bench_function("real FFT with plan (floor)", |b| {
        b.iter(|| {
            let mut planner = realfft::RealFftPlanner::<f64>::new();
            let fft = planner.plan_fft_forward(N);
            let mut input = fft.make_input_vec();
            input
                .iter_mut()
                .enumerate()
                .for_each(|(i, v)| *v = (i % 7) as f64);
            let mut output = fft.make_output_vec();
            fft.process(&mut input, &mut output)
                .expect("sizes from the plan");
            black_box(output[1])
        })
    });
    group.bench_function("parse raw f32", |b| {
        let options = IngestOptions {
            sample_rate_hz: Some(FS),
            unit: Some(PositionUnit::Volt),
            format: Some(Format::RawF32),
            ..IngestOptions::default()
        };
        b.iter(|| black_box(ingest::parse("x.f32", &bytes, &options).expect("parses")))
    });
    group.bench_function("parse and calibrate (pipeline)", |b| {
        b.iter(|| {
            black_box(
                trapwise::pipeline::run("x.f32", &bytes, &settings, false).expect("calibrates"),
            )
        })
    });
    group.finish();
}

/// One axis of 2^20 samples calibrated with the drag modelled (the run settings' default) and
/// without it, from the same recording in the same run; and the Allan stage alone under each,
/// to set its cost against the whole calibration.
fn bench_default_model(c: &mut Criterion) {
    use trapwise::calibration::{AnalysisOptions, RunConditions, calibrate};
    let n = 1 << 20;
    let axes = [OuAxis {
        name: "x".into(),
        corner_frequency_hz: 950.0,
        variance: 1e-4,
    }];
    let samples = simulate_axes(&axes, FS, n, 1, &Disturbances::default()).remove(0);
    let recording = Recording {
        sample_rate_hz: FS,
        unit: PositionUnit::Volt,
        axes: vec![AxisTrace {
            name: "x".into(),
            samples,
        }],
    };
    let conditions = RunConditions::new(1e-6, 25.0);
    let mut group = c.benchmark_group("one axis, 2^20 samples, calibrate");
    group.sample_size(10);
    // The same trap recorded as a 1 um polystyrene bead in water really moves: the exact
    // synthesis of the aliased spectrum with frequency-dependent drag (Berg-Sorensen &
    // Flyvbjerg, Rev. Sci. Instrum. 75, 594 (2004); shared PHYSICS.md section 12). Plain
    // Ornstein-Uhlenbeck data have no drag, so under the default model they are a misfit (its
    // checks then refit the spectrum); this record is what the default model is for.
    let physics = trapwise::calibration::physics(&conditions).expect("valid conditions");
    let h = trapwise::drag::hydrodynamic_frequencies(
        physics.viscosity_pa_s,
        physics.fluid_density_kg_per_m3,
        1050.0,
        0.5e-6,
    );
    let mut axis = trapwise::simulate::InstrumentAxis::new(950.0, 1e-4);
    axis.hydrodynamics = Some(trapwise::spectrum::HydroTerms {
        f_nu_hz: h.f_nu_hz,
        f_m_hz: h.f_m_hz,
    });
    let mut rng = trapwise::simulate::generator(1);
    let drag_samples = axis.plan(FS, n).expect("valid axis").record(&mut rng);
    let drag_recording = Recording {
        axes: vec![AxisTrace {
            name: "x".into(),
            samples: drag_samples,
        }],
        ..recording.clone()
    };
    for (name, hydrodynamics) in [
        ("drag record, plain model", false),
        ("drag record, default model (drag on)", true),
    ] {
        let options = AnalysisOptions {
            hydrodynamics,
            ..AnalysisOptions::default()
        };
        group.bench_function(name, |b| {
            b.iter(|| {
                black_box(calibrate(&drag_recording, &conditions, &options).expect("calibrates"))
            })
        });
    }
    for (name, hydrodynamics) in [("plain model", false), ("default model (drag on)", true)] {
        let options = AnalysisOptions {
            hydrodynamics,
            ..AnalysisOptions::default()
        };
        group.bench_function(name, |b| {
            b.iter(|| black_box(calibrate(&recording, &conditions, &options).expect("calibrates")))
        });
        // The Allan stage alone (it is part of the calibration above): the fitted model's
        // autocovariance, the measured curve and the band, on the same samples.
        let fit = calibrate(&recording, &conditions, &options)
            .expect("calibrates")
            .axes
            .remove(0)
            .spectrum
            .expect("the spectral fit");
        let model = trapwise::autocorrelation::TimeDomainModel {
            sample_rate_hz: FS,
            filter: None,
            hydro: fit.model.hydro,
            exposure_s: None,
        };
        let samples = &recording.axes[0].samples;
        group.bench_function(format!("Allan stage alone, {name}"), |b| {
            b.iter(|| {
                let longest = trapwise::allan::octave_block_sizes(samples.len())
                    .last()
                    .copied()
                    .unwrap_or(0);
                let lags = model.autocovariance_series(
                    fit.corner_frequency_hz,
                    fit.diffusion,
                    2 * longest + 1,
                );
                black_box(trapwise::allan::allan_curve(samples, FS, Some(&lags)))
            })
        });
    }
    group.finish();
}

criterion_group!(benches, bench, bench_default_model);
criterion_main!(benches);
