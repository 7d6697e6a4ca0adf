//! `trapwise simulate` with the instrument terms, end to end: each mode writes a file whose
//! periodogram has, on average, the spectrum the truth file declares (built here from outside
//! formulas and the spectrum module's own model, not from the simulator's code), lines are
//! where the truth says, a fixed start is the first sample, impossible flag values are refused
//! with a clear message (pinned by a snapshot), and the demo recordings are reproduced byte for
//! byte.
//!
//! Statistics: every periodogram check compares, per block of bins, the mean over bins of
//! P_k / E_k, where P_k is the periodogram averaged over W untapered windows and E_k the
//! declared spectrum. Each P_k / E_k is Gamma(W) / W (Berg-Sorensen & Flyvbjerg 2004; ordinates
//! independent to O(1/L)), so the block mean of n = bins x W ordinates has mean 1 and standard
//! error 1/sqrt(n) exactly. A block passes when |mean - 1| < Z / sqrt(n) + leakage, with Z = 5
//! and a leakage allowance stated per mode (the expectation of an untapered periodogram differs
//! from the spectrum by O(tau / T_window)). The file makes 55 such checks; at 5 standard errors
//! a Gamma mean of at least 4,000 ordinates (skewness below 0.03) exceeds the bound with
//! probability below 2e-6, so a correct simulator fails this file in fewer than 1 in 5,000
//! seeds (Bonferroni).

use crate::support::check_snapshot;
use std::f64::consts::PI;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use trapwise::ingest::{self, IngestOptions};
use trapwise::recording::PositionUnit;
use trapwise::spectrum::{
    self, DetectorFilter, FilterSetting, HydroTerms, SpectrumModel, aliased_lorentzian_one_sided,
};

const Z: f64 = 5.0;

/// A one-sided spectrum, unit^2 / Hz, as a function of the frequency in Hz.
type Spectrum = Box<dyn Fn(f64) -> f64>;

fn run(args: &[&str], dir: &Path) -> Output {
    Command::new(env!("CARGO_BIN_EXE_trapwise"))
        .args(args)
        .current_dir(dir)
        .output()
        .expect("the binary runs")
}

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

/// Runs `simulate -o name args` and returns the path of the recording.
fn simulate(dir: &Path, name: &str, args: &[&str]) -> PathBuf {
    let mut all = vec!["simulate", "-o", name];
    all.extend_from_slice(args);
    let out = run(&all, dir);
    assert!(
        out.status.success(),
        "simulate {args:?} failed: {}",
        text(&out.stderr)
    );
    dir.join(name)
}

fn truth(path: &Path) -> serde_json::Value {
    let mut p = path.as_os_str().to_owned();
    p.push(".truth.json");
    serde_json::from_slice(&std::fs::read(PathBuf::from(p)).expect("truth file")).expect("JSON")
}

fn number(v: &serde_json::Value, key: &str) -> f64 {
    v[key]
        .as_f64()
        .unwrap_or_else(|| panic!("`{key}` is not a number in {v}"))
}

/// The samples of every axis of a simulated .npy file.
fn samples(path: &Path, sample_rate_hz: f64, unit: PositionUnit) -> Vec<Vec<f64>> {
    let bytes = std::fs::read(path).expect("recording");
    let options = IngestOptions {
        sample_rate_hz: Some(sample_rate_hz),
        unit: Some(unit),
        ..IngestOptions::default()
    };
    let name = path.to_string_lossy();
    let recording = ingest::parse(&name, &bytes, &options).expect("readable recording");
    recording.axes.into_iter().map(|a| a.samples).collect()
}

/// The spectrum the truth's model of one axis declares, from outside formulas: the aliased
/// Lorentzian (Berg-Sorensen & Flyvbjerg 2004), or with a filter or frequency-dependent drag the
/// spectrum module's model, or with an exposure the blurred form of Wong & Halvorsen (Opt.
/// Express 14, 12517 (2006)) written out here; plus the white floor 2 rms^2 / fs and the 1/f
/// drift A / max(f, f_low).
fn declared_spectrum(model: &serde_json::Value, sample_rate_hz: f64) -> Spectrum {
    let fs = sample_rate_hz;
    let fc = number(model, "corner_frequency_hz");
    let d = number(model, "diffusion_unit2_per_s");
    let variance = number(model, "variance_unit2");
    let filter = model["detector_filter"]
        .is_object()
        .then(|| DetectorFilter {
            f3db_hz: number(&model["detector_filter"], "f3db_hz"),
            alpha: number(&model["detector_filter"], "alpha"),
        });
    let hydro = model["hydrodynamics"].is_object().then(|| HydroTerms {
        f_nu_hz: number(&model["hydrodynamics"], "f_nu_hz"),
        f_m_hz: number(&model["hydrodynamics"], "f_m_hz"),
    });
    let exposure = model["exposure_time_s"].as_f64();
    let floor = 2.0 * number(model, "noise_floor_rms").powi(2) / fs;
    let drift_density = number(model, "drift_1f_density_at_1_hz");
    let drift_cut = model["drift_1f_low_cut_hz"].as_f64().unwrap_or(1.0);
    let spectrum_model = SpectrumModel {
        sample_rate_hz: fs,
        aliasing: true,
        filter: filter.map_or(FilterSetting::None, FilterSetting::Fixed),
        hydro,
        exposure_s: None,
        noise_floor: false,
    };
    Box::new(move |f: f64| {
        let thermal = match exposure {
            Some(w) => wong_halvorsen_one_sided(f, fc, variance, fs, w),
            None if filter.is_some() || hydro.is_some() => {
                spectrum_model.one_sided_psd(f, &[fc.ln(), d.ln()])
            }
            None => aliased_lorentzian_one_sided(f, fc, d, fs),
        };
        thermal + floor + drift_density / f.max(drift_cut)
    })
}

/// Wong & Halvorsen (2006), one-sided: 2 sigma^2 dt {S(a) + 4 (tau/W)^2 (cosh(W/tau) - 1)
/// (c cos theta - c^2) / (1 + c^2 - 2 c cos theta)}, S(a) = 2/a - 2 (1 - e^-a) / a^2, a = W/tau,
/// c = exp(-dt/tau), theta = 2 pi f dt (shared/PHYSICS.md section 2).
fn wong_halvorsen_one_sided(f: f64, fc: f64, variance: f64, fs: f64, w: f64) -> f64 {
    let dt = 1.0 / fs;
    let tau = 1.0 / (2.0 * PI * fc);
    let a = w / tau;
    let c = (-dt / tau).exp();
    let cos = (2.0 * PI * f * dt).cos();
    let s = 2.0 / a - 2.0 * (1.0 - (-a).exp()) / (a * a);
    let lag = 4.0 / (a * a) * (a.cosh() - 1.0);
    2.0 * variance * dt * (s + lag * (c * cos - c * c) / (1.0 + c * c - 2.0 * c * cos))
}

/// Block means of P_k / E_k over `blocks` equal blocks of bins in `first_bin..last_bin`, with
/// the number of ordinates in each.
fn block_ratios(
    x: &[f64],
    sample_rate_hz: f64,
    windows: usize,
    expected: &impl Fn(f64) -> f64,
    first_bin: usize,
    last_bin: usize,
    blocks: usize,
) -> Vec<(usize, f64, f64)> {
    let p = spectrum::periodogram(x, sample_rate_hz, windows).expect("periodogram");
    // Never the Nyquist bin, whose ordinate is not doubled and has another distribution.
    let last_bin = last_bin.min(p.psd.len() - 2);
    let width = (last_bin - first_bin) / blocks;
    (0..blocks)
        .map(|b| {
            let bins = (first_bin + b * width)..(first_bin + (b + 1) * width);
            let count = bins.len() as f64;
            let mean = bins
                .clone()
                .map(|k| p.psd[k] / expected(p.frequency_hz(k)))
                .sum::<f64>()
                / count;
            (bins.start, mean, count * p.n_windows as f64)
        })
        .collect()
}

/// Asserts that every block agrees with `expected` within Z standard errors plus `leakage`.
#[track_caller]
fn check_blocks(what: &str, ratios: &[(usize, f64, f64)], leakage: f64) {
    for &(start, mean, ordinates) in ratios {
        let tolerance = Z / ordinates.sqrt() + leakage;
        assert!(
            (mean - 1.0).abs() < tolerance,
            "{what}: block from bin {start}: mean ratio {mean} (tolerance {tolerance}, {ordinates} ordinates)"
        );
    }
}

/// Whether some block rejects a model (used to show a check can fail: the spectrum without the
/// mode's term must be rejected).
fn some_block_rejects(ratios: &[(usize, f64, f64)], leakage: f64) -> bool {
    ratios
        .iter()
        .any(|&(_, mean, n)| (mean - 1.0).abs() > Z / n.sqrt() + leakage)
}

/// The declared spectrum of axis `axis` of a simulated file and, to show the check has power,
/// the same model with one term removed by `strip`.
fn declared_and_stripped(
    path: &Path,
    axis: usize,
    strip: fn(&mut serde_json::Value),
) -> (serde_json::Value, Spectrum, Spectrum) {
    let t = truth(path);
    let fs = number(&t, "sample_rate_hz");
    let model = t["axes"][axis]["model"].clone();
    assert!(model.is_object(), "truth has no model: {t}");
    let mut stripped = model.clone();
    strip(&mut stripped);
    (
        t,
        declared_spectrum(&model, fs),
        declared_spectrum(&stripped, fs),
    )
}

#[test]
fn photodiode_filter_recordings_have_the_filtered_aliased_spectrum() {
    // 1 um bead, kappa 0.1 pN/nm (fc 1.9 kHz), f3dB 5 kHz, alpha 0.4, 100 kHz for 4 s; 6
    // windows of 65,610 samples. Leakage: tau / T_window = 1.3e-4, times 1 / alpha^2 where the
    // filter has lowered the spectrum, and the spectrum module's own image-sum approximation:
    // 2e-3 allowed. 16 blocks of 2,047 bins (12,282 ordinates, se 0.9 %).
    let dir = tempfile::tempdir().expect("temp dir");
    let path = simulate(
        dir.path(),
        "filter.npy",
        &[
            "--stiffness",
            "0.1",
            "--sample-rate",
            "100000",
            "--duration",
            "4",
            "--seed",
            "41",
            "--detector-filter",
            "5000:0.4",
        ],
    );
    let (t, declared, unfiltered) = declared_and_stripped(&path, 0, |m| {
        m["detector_filter"] = serde_json::Value::Null;
    });
    assert_eq!(t["axes"][0]["model"]["synthesis"], "spectral");
    let x = &samples(&path, 100_000.0, PositionUnit::Nanometre)[0];
    let ratios = block_ratios(x, 100_000.0, 6, &declared, 1, 32_768, 16);
    check_blocks("filter", &ratios, 2e-3);
    let wrong = block_ratios(x, 100_000.0, 6, &unfiltered, 1, 32_768, 16);
    assert!(
        some_block_rejects(&wrong, 2e-3),
        "the unfiltered model passes too"
    );
}

#[test]
fn hydrodynamic_recordings_have_the_frequency_dependent_drag_spectrum() {
    // 3 um polystyrene bead in water at 25 C, kappa 0.1 pN/nm (fc 0.64 kHz), 100 kHz for 4 s;
    // the drag's frequency dependence changes the spectrum by tens of per cent above 10 kHz.
    // The spectrum module's model differs from the exact image sum by below 2e-4 for this bead
    // (measured in the simulator's unit tests); leakage tau / T_window = 4e-4; 1e-3 allowed.
    let dir = tempfile::tempdir().expect("temp dir");
    let path = simulate(
        dir.path(),
        "hydro.npy",
        &[
            "--stiffness",
            "0.1",
            "--bead-diameter",
            "3",
            "--sample-rate",
            "100000",
            "--duration",
            "4",
            "--seed",
            "42",
            "--hydrodynamics",
        ],
    );
    let (t, declared, stokes_only) = declared_and_stripped(&path, 0, |m| {
        m["hydrodynamics"] = serde_json::Value::Null;
    });
    let hydro = &t["axes"][0]["model"]["hydrodynamics"];
    assert_eq!(number(hydro, "bead_density_kg_per_m3"), 1050.0);
    // Water at 25 C (Tanaka et al. 2001: 997.047 kg/m^3).
    assert!((number(hydro, "fluid_density_kg_per_m3") - 997.047).abs() < 1e-3);
    let x = &samples(&path, 100_000.0, PositionUnit::Nanometre)[0];
    let ratios = block_ratios(x, 100_000.0, 6, &declared, 1, 32_768, 16);
    check_blocks("hydrodynamics", &ratios, 1e-3);
    let wrong = block_ratios(x, 100_000.0, 6, &stokes_only, 1, 32_768, 16);
    assert!(some_block_rejects(&wrong, 1e-3), "Stokes drag passes too");
}

#[test]
fn noise_floor_in_volts_adds_a_white_floor_and_is_the_noise_flag_in_other_units() {
    // Volt output (500 nm/V), kappa 0.1 pN/nm, 20 kHz for 10 s: a floor of 5 mV rms (density
    // 2.5e-9 V^2/Hz) is comparable with the thermal spectrum above 5 kHz. No instrument term
    // needs the spectral synthesis, so this is the exact AR(1) path with white noise added in
    // the time domain. 8 windows of 25,000 samples, leakage 1e-3 allowed; 8 blocks of 1,536
    // bins (12,288 ordinates).
    let dir = tempfile::tempdir().expect("temp dir");
    let common = [
        "--stiffness",
        "0.1",
        "--units",
        "V",
        "--sample-rate",
        "20000",
        "--duration",
        "10",
        "--seed",
        "43",
    ];
    let path = simulate(
        dir.path(),
        "floor.npy",
        &[&common[..], &["--noise-floor", "0.005"]].concat(),
    );
    let (t, declared, quiet) = declared_and_stripped(&path, 0, |m| {
        m["noise_floor_rms"] = serde_json::json!(0.0);
    });
    assert_eq!(t["axes"][0]["model"]["synthesis"], "ar1");
    assert_eq!(t["axes"][0]["model"]["unit"], "V");
    let x = &samples(&path, 20_000.0, PositionUnit::Volt)[0];
    let ratios = block_ratios(x, 20_000.0, 8, &declared, 1, 12_289, 8);
    check_blocks("noise floor", &ratios, 1e-3);
    let wrong = block_ratios(x, 20_000.0, 8, &quiet, 1, 12_289, 8);
    assert!(
        some_block_rejects(&wrong, 1e-3),
        "the noiseless model passes too"
    );
    // --noise in nm is the same noise: 5 mV x 500 nm/V = 2.5 nm gives the same bytes.
    let same = simulate(
        dir.path(),
        "noise.npy",
        &[&common[..], &["--noise", "2.5"]].concat(),
    );
    assert_eq!(
        std::fs::read(&path).expect("file"),
        std::fs::read(&same).expect("file")
    );
}

#[test]
fn flicker_drift_recordings_have_the_one_over_f_spectrum_above_its_leaky_lowest_bins() {
    // 1 um bead, kappa 0.05 pN/nm, 5 kHz for 20 s, 1/f density 5 nm^2/Hz at 1 Hz (it dominates
    // the thermal plateau of 0.05 nm^2/Hz below about 100 Hz). The untapered periodogram leaks
    // the large low-frequency power of 1/f into higher bins: the exact expectation of the
    // synthesised process (its circular autocovariance through the Bartlett-weighted transform)
    // exceeds the spectrum by about 0.45 / k at bin k, 0.7 % at bin 64 (computed for these
    // settings), so the bins from 64 up are compared with a leakage allowance of 1 %.
    // 8 windows of 12,500 samples; 8 blocks of 504 bins (4,032 ordinates, se 1.6 %), then the
    // band as a whole (32,256 ordinates).
    let dir = tempfile::tempdir().expect("temp dir");
    let path = simulate(
        dir.path(),
        "flicker.npy",
        &[
            "--sample-rate",
            "5000",
            "--duration",
            "20",
            "--seed",
            "44",
            "--drift-1f",
            "5",
        ],
    );
    let (t, declared, steady) = declared_and_stripped(&path, 0, |m| {
        m["drift_1f_density_at_1_hz"] = serde_json::json!(0.0);
    });
    assert_eq!(number(&t["axes"][0]["model"], "drift_1f_low_cut_hz"), 0.05);
    let x = &samples(&path, 5_000.0, PositionUnit::Nanometre)[0];
    let ratios = block_ratios(x, 5_000.0, 8, &declared, 64, 4_096, 8);
    check_blocks("1/f drift", &ratios, 0.01);
    let band = block_ratios(x, 5_000.0, 8, &declared, 64, 4_096, 1);
    check_blocks("1/f drift, whole band", &band, 0.01);
    let wrong = block_ratios(x, 5_000.0, 8, &steady, 64, 4_096, 8);
    assert!(
        some_block_rejects(&wrong, 0.01),
        "the drift-free model passes too"
    );
}

#[test]
fn camera_exposure_recordings_have_the_blurred_aliased_spectrum() {
    // A camera at 2 kHz exposing 0.4 ms of each 0.5 ms frame, 1 um bead, kappa 0.01 pN/nm
    // (fc 190 Hz), 60 s: blur lowers the spectrum near Nyquist by about 40 %. Leakage
    // tau / T_window = 1e-4; 1e-3 allowed. 8 windows of 15,000 samples; 5 blocks of 1,500 bins
    // (12,000 ordinates).
    let dir = tempfile::tempdir().expect("temp dir");
    let path = simulate(
        dir.path(),
        "camera.npy",
        &[
            "--stiffness",
            "0.01",
            "--sample-rate",
            "2000",
            "--duration",
            "60",
            "--seed",
            "45",
            "--exposure-time-s",
            "0.0004",
        ],
    );
    let (_, declared, sharp) = declared_and_stripped(&path, 0, |m| {
        m["exposure_time_s"] = serde_json::Value::Null;
    });
    let x = &samples(&path, 2_000.0, PositionUnit::Nanometre)[0];
    let ratios = block_ratios(x, 2_000.0, 8, &declared, 1, 7_501, 5);
    check_blocks("exposure", &ratios, 1e-3);
    let wrong = block_ratios(x, 2_000.0, 8, &sharp, 1, 7_501, 5);
    assert!(
        some_block_rejects(&wrong, 1e-3),
        "the unblurred model passes too"
    );
}

#[test]
fn lines_on_and_off_the_fourier_grid_are_where_and_as_large_as_declared() {
    // Lines at 120 Hz (a whole number of cycles in the record) and 1234.5678 Hz (not), and the
    // 50 Hz pickup, recovered by the calibration's own harmonic regression
    // (spectrum::fit_line). Against thermal noise of one-sided density S over a record of T
    // seconds the fitted amplitude has standard error sqrt(S / T) (least squares of a sinusoid
    // in noise; here 0.07 to 0.12 nm for amplitudes of 2 to 4 nm) and the frequency
    // sqrt(6 S) / (2 pi A T^(3/2)) (the Cramer-Rao bound for a sinusoid in white noise, Rife &
    // Boorstyn, IEEE Trans. Inf. Theory 20, 591 (1974), recalled from memory, unverified; here
    // 3e-3 to 6e-3 Hz); both are checked to Z of them.
    let dir = tempfile::tempdir().expect("temp dir");
    let fs = 20_000.0;
    let path = simulate(
        dir.path(),
        "lines.npy",
        &[
            "--sample-rate",
            "20000",
            "--duration",
            "4",
            "--seed",
            "46",
            "--line",
            "120:2",
            "--line",
            "1234.5678:3",
            "--hum-amplitude",
            "4",
        ],
    );
    let t = truth(&path);
    let model = &t["axes"][0]["model"];
    let lines = model["lines"].as_array().expect("lines");
    assert_eq!(lines.len(), 3, "{model}");
    let thermal = declared_spectrum(model, fs);
    let x = &samples(&path, fs, PositionUnit::Nanometre)[0];
    for (frequency_hz, amplitude) in [(50.0, 4.0), (120.0, 2.0), (1234.5678, 3.0)] {
        assert!(
            lines
                .iter()
                .any(|l| number(l, "frequency_hz") == frequency_hz
                    && number(l, "amplitude") == amplitude),
            "truth lacks the line at {frequency_hz} Hz"
        );
        let fit = spectrum::fit_line(x, fs, frequency_hz, 2.0);
        let density = thermal(frequency_hz);
        let se = (density / 4.0).sqrt();
        let se_frequency = (6.0 * density).sqrt() / (2.0 * PI * amplitude * 4f64.powf(1.5));
        assert!(
            (fit.amplitude - amplitude).abs() < Z * se,
            "{frequency_hz} Hz: amplitude {} against {amplitude} (se {se})",
            fit.amplitude
        );
        assert!(
            (fit.frequency_hz - frequency_hz).abs() < Z * se_frequency,
            "frequency {} against {frequency_hz} (se {se_frequency})",
            fit.frequency_hz
        );
    }
}

#[test]
fn a_fixed_start_is_the_first_sample_and_the_truth_says_so() {
    let dir = tempfile::tempdir().expect("temp dir");
    let path = simulate(
        dir.path(),
        "release.csv",
        &[
            "--start-nm",
            "-150",
            "--stiffness",
            "0.05,0.02",
            "--sample-rate",
            "20000",
            "--duration",
            "0.1",
        ],
    );
    let t = truth(&path);
    assert_eq!(number(&t, "start_nm"), -150.0);
    for axis in t["axes"].as_array().expect("axes") {
        assert_eq!(axis["model"]["synthesis"], "ar1");
        assert_eq!(number(&axis["model"], "start"), -150.0);
    }
    let xy = samples(&path, 20_000.0, PositionUnit::Nanometre);
    assert_eq!(xy.len(), 2);
    for x in &xy {
        assert_eq!(x[0], -150.0);
    }
}

#[test]
fn plain_recordings_keep_their_truth_without_a_model() {
    // Without instrument terms the truth is what it always was (the demo truth files depend on
    // it): no `model`, no `start_nm`.
    let dir = tempfile::tempdir().expect("temp dir");
    let path = simulate(dir.path(), "plain.csv", &["--duration", "0.1"]);
    let t = truth(&path);
    assert!(t.get("start_nm").is_none(), "{t}");
    assert!(t["axes"][0].get("model").is_none(), "{t}");
}

#[test]
fn impossible_instrument_terms_are_refused_with_a_clear_message() {
    let dir = tempfile::tempdir().expect("temp dir");
    let cases: [(&[&str], &[&str]); 13] = [
        (
            &["--sample-rate", "20000", "--exposure-time-s", "0.001"],
            &["--exposure-time-s", "frame interval", "0.00005"],
        ),
        (
            &["--exposure-time-s", "0"],
            &["--exposure-time-s", "positive"],
        ),
        (
            &["--detector-filter", "5000:1.5"],
            &["--detector-filter", "alpha 1.5", "(0, 1]"],
        ),
        (
            &["--detector-filter", "5000:0"],
            &["--detector-filter", "alpha 0"],
        ),
        (&["--detector-filter", "5000"], &["F3DB:ALPHA", "`5000`"]),
        (&["--detector-filter", "-5:0.3"], &["f3db_hz -5"]),
        (
            &["--sample-rate", "20000", "--line", "10001:1"],
            &["--line", "Nyquist", "10000"],
        ),
        (&["--line", "fifty"], &["HZ:AMPLITUDE", "`fifty`"]),
        (
            &["--start-nm", "10", "--hydrodynamics"],
            &["--start-nm", "AR(1)", "--hydrodynamics"],
        ),
        (
            &["--hydrodynamics", "--height", "3"],
            &["--hydrodynamics", "wall", "--height"],
        ),
        (
            &["--noise", "1", "--noise-floor", "1"],
            &["same white noise"],
        ),
        (&["--drift-1f", "-1"], &["--drift-1f", "-1"]),
        (&["--temperature", "120"], &["120", "0 to 99"]),
    ];
    let mut snapshot = String::new();
    for (args, fragments) in cases {
        let mut all = vec!["simulate", "-o", "bad.npy", "--duration", "0.1"];
        all.extend_from_slice(args);
        let out = run(&all, dir.path());
        let err = text(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{args:?}: {err}");
        assert!(err.starts_with("error: "), "{args:?}: {err}");
        for f in fragments {
            assert!(err.contains(f), "{args:?}: message lacks `{f}`: {err}");
        }
        assert!(
            !dir.path().join("bad.npy").exists(),
            "{args:?} wrote a file"
        );
        snapshot.push_str(&format!("{} ->\n{}\n", args.join(" "), err.trim_end()));
    }
    check_snapshot("simulate_errors.txt", &snapshot);
}

#[test]
fn demo_recordings_are_reproduced_byte_for_byte() {
    // The same commands as demo-data/make-demo.sh: the simulator's streams must not change the
    // published demo files (the AR(1) path for the first three and the driven fifth, the
    // spectral synthesis for the fourth).
    let demo = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data");
    let script = std::fs::read_to_string(demo.join("make-demo.sh")).expect("make-demo.sh");
    let dir = tempfile::tempdir().expect("temp dir");
    let mut checked = 0;
    for command in script.split("\"${tw[@]}\" ").skip(1) {
        let line = command.replace("\\\n", " ");
        let line = line.lines().next().unwrap_or("");
        let args: Vec<&str> = line.split_whitespace().collect();
        let out = run(&args, dir.path());
        assert!(out.status.success(), "{line}: {}", text(&out.stderr));
        let file = args[2];
        for name in [file.to_string(), format!("{file}.truth.json")] {
            assert!(
                std::fs::read(dir.path().join(&name)).expect("made")
                    == std::fs::read(demo.join(&name)).expect("published"),
                "{name} differs from demo-data/{name}"
            );
        }
        checked += 1;
    }
    assert_eq!(checked, 5, "demo commands found in make-demo.sh");
}
