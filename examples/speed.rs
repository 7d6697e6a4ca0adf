//! Speed of parsing and calibration against the FFT floor, for one to three axes and record
//! lengths from 2^16 to 2^24 samples, all measured in one process so that the ratios compare
//! like with like on a shared machine.
//!
//! For every (axes, N) it times, as medians over repeated runs: parsing the same recording
//! from CSV, NumPy `.npy` and raw f32 bytes (MB/s of input), `calibration::calibrate` on the
//! parsed recording, the whole `pipeline::run` on the f32 bytes, and one real-input FFT of
//! length N in f64 (realfft), both with a cached plan (the floor proper) and with a fresh plan
//! (what a one-shot process pays). The ratio calibration / FFT is the figure the benchmark
//! targets (at most about five FFTs per axis). One JSON object per line goes to stdout.
//!
//! Run: `cargo run --release --example speed -- [--quick] [--min-log2 16] [--max-log2 24]`.

use anyhow::{Context, Result, anyhow};
use std::hint::black_box;
use std::time::Instant;
use trapwise::calibration;
use trapwise::ingest::{self, Format, IngestOptions};
use trapwise::recording::{AxisTrace, PositionUnit, Recording};
use trapwise::settings::Settings;
use trapwise::simulate::{Disturbances, OuAxis, simulate_axes};

/// Sampling rate of the benchmark recordings, Hz.
const SAMPLE_RATE_HZ: f64 = 50_000.0;
/// Corner frequency and variance of a 1 um polystyrene bead in water at 25 C in a trap of
/// 0.05 pN/nm (the truth `trapwise simulate` writes for its defaults).
const CORNER_FREQUENCY_HZ: f64 = 948.676;
const VARIANCE_NM2: f64 = 82.328;

/// Median of the wall times (s) of `reps` calls of `f`.
fn median_time<T>(reps: usize, mut f: impl FnMut() -> Result<T>) -> Result<f64> {
    let mut times = Vec::with_capacity(reps);
    for _ in 0..reps {
        let start = Instant::now();
        black_box(f()?);
        times.push(start.elapsed().as_secs_f64());
    }
    times.sort_by(f64::total_cmp);
    times
        .get(times.len() / 2)
        .copied()
        .ok_or_else(|| anyhow!("no repetitions"))
}

fn recording(n_axes: usize, n_samples: usize, seed: u64) -> Recording {
    let names = ["x", "y", "z"];
    let axes: Vec<OuAxis> = names
        .iter()
        .take(n_axes)
        .map(|n| OuAxis {
            name: (*n).to_string(),
            corner_frequency_hz: CORNER_FREQUENCY_HZ,
            variance: VARIANCE_NM2,
        })
        .collect();
    let samples = simulate_axes(
        &axes,
        SAMPLE_RATE_HZ,
        n_samples,
        seed,
        &Disturbances::default(),
    );
    Recording {
        sample_rate_hz: SAMPLE_RATE_HZ,
        unit: PositionUnit::Nanometre,
        axes: axes
            .iter()
            .zip(samples)
            .map(|(a, s)| AxisTrace {
                name: a.name.clone(),
                samples: s,
            })
            .collect(),
    }
}

fn settings(n_axes: usize) -> Result<Settings> {
    let mut s = Settings::default();
    let channels = n_axes.to_string();
    for (k, v) in [
        ("bead_diameter_um", "1"),
        ("temperature_c", "25"),
        ("sample_rate_hz", "50000"),
        ("units", "nm"),
        ("channels", channels.as_str()),
        // Only the z axis would be axial; the benchmark axes are all lateral.
        ("axial_axes", "none"),
    ] {
        s.apply(k, v).map_err(|e| anyhow!("setting {k}: {e}"))?;
    }
    Ok(s)
}

/// Median time of one real-input f64 FFT of length `n`: with a plan made once beforehand, and
/// with a fresh planner each time.
fn fft_floor(n: usize, reps: usize) -> Result<(f64, f64)> {
    let mut planner = realfft::RealFftPlanner::<f64>::new();
    let fft = planner.plan_fft_forward(n);
    let mut input = fft.make_input_vec();
    let mut output = fft.make_output_vec();
    let mut scratch = fft.make_scratch_vec();
    let fill = |input: &mut [f64]| {
        for (i, v) in input.iter_mut().enumerate() {
            *v = (i % 7) as f64;
        }
    };
    let planned = median_time(reps, || {
        fill(&mut input);
        fft.process_with_scratch(&mut input, &mut output, &mut scratch)
            .map_err(|e| anyhow!("fft: {e}"))?;
        Ok(output.get(1).copied())
    })?;
    let with_plan = median_time(reps, || {
        let mut planner = realfft::RealFftPlanner::<f64>::new();
        let fft = planner.plan_fft_forward(n);
        let mut input = fft.make_input_vec();
        fill(&mut input);
        let mut output = fft.make_output_vec();
        fft.process(&mut input, &mut output)
            .map_err(|e| anyhow!("fft: {e}"))?;
        Ok(output.get(1).copied())
    })?;
    Ok((planned, with_plan))
}

fn main() -> Result<()> {
    let args: Vec<String> = std::env::args().collect();
    let quick = args.iter().any(|a| a == "--quick");
    let max_log2: u32 = match args.iter().position(|a| a == "--max-log2") {
        Some(i) => args
            .get(i + 1)
            .context("--max-log2 needs a value")?
            .parse()
            .context("--max-log2 must be an integer")?,
        None if quick => 20,
        None => 24,
    };
    let min_log2: u32 = match args.iter().position(|a| a == "--min-log2") {
        Some(i) => args
            .get(i + 1)
            .context("--min-log2 needs a value")?
            .parse()
            .context("--min-log2 must be an integer")?,
        None => 16,
    };
    // One axis over every length; two and three axes at 2^20 and 2^22 (quick: 2^18).
    let mut cases: Vec<(usize, u32)> = (min_log2..=max_log2).step_by(2).map(|l| (1, l)).collect();
    let multi: &[u32] = if quick { &[18] } else { &[20, 22] };
    for &l in multi
        .iter()
        .filter(|&&l| (min_log2..=max_log2).contains(&l))
    {
        cases.push((2, l));
        cases.push((3, l));
    }
    for (n_axes, log2) in cases {
        let n = 1usize << log2;
        // More repetitions for short records; at least three for a median.
        let reps = ((1usize << 24) / n).clamp(3, if quick { 5 } else { 11 });
        let rec = recording(n_axes, n, 7);
        let settings = settings(n_axes)?;
        let (ingest_opts, conditions, analysis) =
            settings.resolve().map_err(|e| anyhow!("settings: {e}"))?;
        let samples_bytes_f64 = (n * n_axes * 8) as f64;

        let mut parse = serde_json::Map::new();
        for (format, name) in [
            (Format::Csv, "x.csv"),
            (Format::Npy, "x.npy"),
            (Format::RawF32, "x.f32"),
        ] {
            let bytes = ingest::encode(&rec, format, None).map_err(|e| anyhow!("encode: {e}"))?;
            let opts = IngestOptions {
                format: Some(format),
                ..ingest_opts.clone()
            };
            let t = median_time(reps, || {
                ingest::parse(name, &bytes, &opts).map_err(|e| anyhow!("parse {name}: {e}"))
            })?;
            parse.insert(
                format.name().to_string(),
                serde_json::json!({
                    "median_s": t,
                    "bytes": bytes.len(),
                    "mb_per_s": bytes.len() as f64 / t / 1e6,
                }),
            );
        }

        let calibrate_s = median_time(reps, || {
            calibration::calibrate(&rec, &conditions, &analysis)
                .map_err(|e| anyhow!("calibrate: {e}"))
        })?;
        let f32_bytes =
            ingest::encode(&rec, Format::RawF32, None).map_err(|e| anyhow!("encode: {e}"))?;
        let pipeline_s = median_time(reps, || {
            trapwise::pipeline::run("x.f32", &f32_bytes, &settings, false)
                .map_err(|e| anyhow!("pipeline: {e}"))
        })?;
        // The pipeline on CSV bytes, and the SHA-256 of those bytes that every report carries
        // (it is a pass over the whole file, so it belongs to the end-to-end cost).
        let csv_bytes =
            ingest::encode(&rec, Format::Csv, None).map_err(|e| anyhow!("encode: {e}"))?;
        let pipeline_csv_s = median_time(reps, || {
            trapwise::pipeline::run("x.csv", &csv_bytes, &settings, false)
                .map_err(|e| anyhow!("pipeline: {e}"))
        })?;
        let sha256_s = median_time(reps, || Ok(trapwise::report::sha256_hex(&csv_bytes)))?;
        let (fft_planned_s, fft_with_plan_s) = fft_floor(n, reps)?;
        let per_axis = calibrate_s / n_axes as f64;
        let line = serde_json::json!({
            "axes": n_axes,
            "log2_n": log2,
            "n_samples": n,
            "repetitions": reps,
            "samples_f64_bytes": samples_bytes_f64,
            "parse": parse,
            "calibrate_median_s": calibrate_s,
            "calibrate_per_axis_s": per_axis,
            "pipeline_f32_median_s": pipeline_s,
            "pipeline_csv_median_s": pipeline_csv_s,
            "sha256_csv_mb_per_s": csv_bytes.len() as f64 / sha256_s / 1e6,
            "fft_planned_median_s": fft_planned_s,
            "fft_with_plan_median_s": fft_with_plan_s,
            "ratio_calibrate_per_axis_to_fft_planned": per_axis / fft_planned_s,
            "ratio_calibrate_per_axis_to_fft_with_plan": per_axis / fft_with_plan_s,
        });
        println!("{line}");
    }
    Ok(())
}
