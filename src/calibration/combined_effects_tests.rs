//! The combined-effects row of the real-instrument tests: exact synthetic records that carry
//! several of a real instrument's effects at once (the photodiode's filter, frequency-dependent
//! drag, a white noise floor, 1/f drift and a line off the Fourier grid), in volts and in
//! nanometres, calibrated with the settings that declare them; the consensus must meet the
//! issue's bar on every record and every estimate in it must be unbiased with honest errors.

use super::synthetic_records::{KAPPA_PN_PER_NM, one_axis, truth};
use super::*;
use crate::recording::PositionUnit;
use crate::simulate::{FlickerDrift, InstrumentAxis, Sinusoid, generator};
use crate::spectrum::{DetectorFilter, aliased_lorentzian_one_sided};
use std::f64::consts::PI;

const FS: f64 = 100_000.0;
const BETA_NM_PER_V: f64 = 300.0;

/// The photodiode's filter of the row: f3dB 8 kHz, alpha 0.3 (the silicon photodiode's form,
/// g(f) = alpha^2 + (1 - alpha^2) / (1 + (f / f3dB)^2), Berg-Sorensen & Flyvbjerg, Rev. Sci.
/// Instrum. 75, 594 (2004); shared PHYSICS.md section 3).
const FILTER: DetectorFilter = DetectorFilter {
    f3db_hz: 8_000.0,
    alpha: 0.3,
};

/// The line of the row: 137.3 Hz (off the grid of 1/T = 0.19 Hz), 20 nm peak.
const LINE_HZ: f64 = 137.3;
const LINE_NM: f64 = 20.0;

/// The reference trap (1 um polystyrene bead, water at 25 C, kappa 0.05 pN/nm), in nm, with
/// every effect of the row: the filter; frequency-dependent drag of the bead (Stokes 1851 in the
/// form of Berg-Sorensen & Flyvbjerg 2004, the frequency scales the calibration takes from the
/// same conditions); white noise of 1 % of the bead's variance; 1/f drift whose density equals
/// the thermal plateau at 10 Hz (the drift row's strength), flat below 1 / duration of a record
/// of `n_samples`; and the
/// line. Its spectrum is the sum of the terms' aliased spectra (`InstrumentAxis::one_sided_psd`,
/// shared PHYSICS.md section 12).
fn combined_axis(conditions: &RunConditions, n_samples: usize) -> InstrumentAxis {
    let (fc, d) = truth();
    let variance_nm2 = d / (2.0 * PI * fc);
    let phys = physics(conditions).expect("valid conditions");
    let mut axis = InstrumentAxis::new(fc, variance_nm2);
    axis.detector_filter = Some(FILTER);
    axis.hydrodynamics = Some(spectral::hydro_terms(conditions, &phys));
    axis.noise_floor_rms = (0.01 * variance_nm2).sqrt();
    axis.flicker = Some(FlickerDrift {
        density_at_1_hz: aliased_lorentzian_one_sided(10.0, fc, d, FS) * 10.0,
        low_cut_hz: FS / n_samples as f64,
    });
    axis.lines = vec![Sinusoid {
        frequency_hz: LINE_HZ,
        amplitude: LINE_NM,
        phase_rad: 0.7,
    }];
    axis
}

/// z-scores (estimate - truth) / se of one estimator over the records.
#[derive(Default)]
struct Tally {
    z: Vec<f64>,
}

impl Tally {
    fn push(&mut self, e: Estimate, truth: f64) {
        self.z.push((e.value - truth) / e.se);
    }

    /// Mean and sample standard deviation of z.
    fn mean_sd(&self) -> (f64, f64) {
        let n = self.z.len() as f64;
        let mean = self.z.iter().sum::<f64>() / n;
        let var = self.z.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0);
        (mean, var.sqrt())
    }
}

/// What the row's records gave.
struct RowOutcome {
    /// The estimates that entered the consensus (weight above zero, not left out), by method.
    in_consensus: [Tally; 3],
    consensus: Tally,
    /// Largest |consensus / truth - 1| over the records, and the largest reported relative se.
    worst_relative_error: f64,
    largest_relative_se: f64,
    beta: Tally,
    /// Records whose consensus missed the bar (3 % of the truth or 2.5 reported se,
    /// whichever is larger).
    off_bar: usize,
    /// Records whose spectral model took both the 1/f term and the floor.
    drift_and_floor: usize,
}

impl RowOutcome {
    /// Prints the row's figures (the test's numbers come from these lines).
    fn print(&self, label: &str) {
        for (name, t) in ["psd", "acf", "equipartition"]
            .iter()
            .zip(&self.in_consensus)
        {
            if t.z.len() > 1 {
                let (m, s) = t.mean_sd();
                eprintln!(
                    "{label} {name} in the consensus on {} records: mean z {m:+.3}, sd z {s:.3}",
                    t.z.len()
                );
            }
        }
        let (m, s) = self.consensus.mean_sd();
        eprintln!(
            "{label} consensus: mean z {m:+.3}, sd z {s:.3}, largest |error| {:.2} %, largest se {:.2} %, off the bar {}, drift term and floor in the model {} of {}",
            100.0 * self.worst_relative_error,
            100.0 * self.largest_relative_se,
            self.off_bar,
            self.drift_and_floor,
            self.consensus.z.len()
        );
        if self.beta.z.len() > 1 {
            let (m, s) = self.beta.mean_sd();
            eprintln!("{label} beta: mean z {m:+.3}, sd z {s:.3}");
        }
    }
}

/// Calibrates `records` exact records of the combined axis in `unit` (volts through
/// `BETA_NM_PER_V`) with the matching settings (filter declared fixed, drag on, the floor and
/// the drift by their automatic tests).
fn run_row(unit: PositionUnit, n_samples: usize, seed: u64, records: usize) -> RowOutcome {
    let conditions = RunConditions::new(1.0e-6, 25.0);
    let plan = combined_axis(&conditions, n_samples)
        .plan(FS, n_samples)
        .expect("valid axis");
    let options = AnalysisOptions {
        hydrodynamics: true,
        filter: FilterSetting::Fixed(FILTER),
        ..AnalysisOptions::default()
    };
    let scale = match unit {
        PositionUnit::Nanometre => 1.0,
        PositionUnit::Volt => 1.0 / BETA_NM_PER_V,
    };
    let mut rng = generator(seed);
    let mut out = RowOutcome {
        in_consensus: Default::default(),
        consensus: Tally::default(),
        worst_relative_error: 0.0,
        largest_relative_se: 0.0,
        beta: Tally::default(),
        off_bar: 0,
        drift_and_floor: 0,
    };
    for record in 0..records {
        let x: Vec<f64> = plan.record(&mut rng).iter().map(|v| v * scale).collect();
        let mut rec = one_axis(x, FS);
        rec.unit = unit;
        let cal = calibrate(&rec, &conditions, &options).expect("calibrates");
        let a = &cal.axes[0];
        assert!(
            a.lines_removed
                .iter()
                .any(|l| (l.frequency_hz - LINE_HZ).abs() < 0.05),
            "record {record}: line not removed, {:?}",
            a.lines_removed
        );
        let s = &a.stiffness_pn_per_nm;
        let c = s.consensus;
        let off = (c.value - KAPPA_PN_PER_NM).abs();
        if !(off <= 0.03 * KAPPA_PN_PER_NM || off <= 2.5 * c.se) {
            eprintln!("record {record}: consensus {c:?} off the bar");
            out.off_bar += 1;
        }
        out.drift_and_floor += usize::from(
            a.spectrum.as_ref().is_some_and(|f| f.flicker.is_some())
                && a.noise_floor.is_some_and(|n| n.test.included),
        );
        out.worst_relative_error = out.worst_relative_error.max(off / KAPPA_PN_PER_NM);
        out.largest_relative_se = out.largest_relative_se.max(c.se / c.value);
        out.consensus.push(c, KAPPA_PN_PER_NM);
        let methods = [s.psd, s.acf, s.equipartition];
        for (i, e) in methods.iter().enumerate() {
            if let Some(e) = e {
                if s.excluded[i].is_none() && s.consensus_weights[i] > 0.0 {
                    out.in_consensus[i].push(*e, KAPPA_PN_PER_NM);
                }
            }
        }
        if let Some(b) = a.sensitivity_nm_per_v {
            out.beta.push(b, BETA_NM_PER_V);
        }
    }
    out
}

#[test]
fn with_every_effect_at_once_the_consensus_meets_the_bar_on_every_record() {
    // The combined row on records of 2^20 samples (10.5 s at 100 kHz): 4 records in
    // volts (beta 300 nm/V, seed 601) and 4 in nm (seed 602), each consensus within 3 % of the
    // truth or 2.5 of its reported se. The spectra synthesised: the aliased filtered Lorentzian
    // with frequency-dependent drag (Berg-Sorensen & Flyvbjerg, Rev. Sci. Instrum. 75, 594
    // (2004)), plus a white floor, 1/f drift and an off-grid line (see `combined_axis`).
    // The reported se of the consensus here is about 0.7 % (measured: 1.0 % at 2^19 samples,
    // 0.51 % at 2^21), so 3 % is about 4.2 se: a correct estimator misses it with probability
    // about 3e-5 per record, 2e-4 for the 8 records.
    for (unit, seed) in [(PositionUnit::Volt, 601), (PositionUnit::Nanometre, 602)] {
        let row = run_row(unit, 1 << 20, seed, 4);
        row.print(&format!("{unit:?}, 2^20 samples"));
        assert_eq!(row.off_bar, 0, "{unit:?}: a consensus off the bar");
    }
}

#[test]
fn with_every_effect_at_once_the_estimates_in_the_consensus_are_unbiased_with_honest_errors() {
    // The combined row on records of 2^17 samples (1.3 s at 100 kHz), 150 in volts (seed 611)
    // and 150 in nm (seed 612); spectra as in the test above (Berg-Sorensen & Flyvbjerg 2004).
    // Before the fix in `drift::test_beside_floor` every record failed: the 1/f term was refused
    // because the floor was not yet in the model, and the consensus came out about 20 % high in
    // volts (psd +14 %, beta -9 %).
    // Bounds, for each estimate that entered the consensus on at least 100 records, for the
    // consensus and for beta (volts):
    // - every record's consensus within 5 reported se (a correct estimator fails that with
    //   probability 6e-7 per record, 2e-4 over the 300);
    // - mean z within 4 / sqrt(n) (4 sd of the mean of n unit z, 6e-5 per check);
    // - sd of z in [0.75, 1.3] (the sd of 150 z has relative sd 5.8 %: 4.3 sd below, 5.2 above);
    // - at most 9 records of 150 off the bar (3 % or 2.5 se; an unbiased consensus with
    //   honest errors misses 2.5 se in 1.2 % of records, fewer with the 3 % arm: at most 1.9
    //   expected, Poisson tail of 10 or more 2e-5).
    for (unit, seed) in [(PositionUnit::Volt, 611), (PositionUnit::Nanometre, 612)] {
        let row = run_row(unit, 1 << 17, seed, 150);
        let label = format!("{unit:?}, 2^17 samples");
        row.print(&label);
        let mut checked = vec![("consensus", &row.consensus)];
        for (name, t) in ["psd", "acf", "equipartition"]
            .into_iter()
            .zip(&row.in_consensus)
        {
            if t.z.len() >= 100 {
                checked.push((name, t));
            }
        }
        if unit == PositionUnit::Volt {
            checked.push(("beta", &row.beta));
        }
        for (name, t) in checked {
            let n = t.z.len() as f64;
            let (mean, sd) = t.mean_sd();
            assert!(mean.abs() < 4.0 / n.sqrt(), "{label}: {name} mean z {mean}");
            assert!((0.75..1.3).contains(&sd), "{label}: {name} sd z {sd}");
        }
        let max_z = row.consensus.z.iter().fold(0.0f64, |m, z| m.max(z.abs()));
        assert!(max_z < 5.0, "{label}: a consensus {max_z} se off");
        assert!(
            row.off_bar <= 9,
            "{label}: {} records off the bar",
            row.off_bar
        );
    }
}
