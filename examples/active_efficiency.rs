//! Statistical efficiency of active calibration (a sample stage driven sinusoidally during the
//! recording; Tolic-Norrelykke et al., Rev. Sci. Instrum. 77, 103101 (2006)): over many exact
//! driven records, the bias and spread of beta, the measured drag and the active stiffness,
//! the spread against the reported standard error, and the coverage of the reported
//! one-standard-error intervals.
//!
//! The spike's own bound: the regression coefficients of a sinusoid of known frequency in
//! stationary Gaussian noise of one-sided density S each have variance S / T, and the least
//! squares estimate attains it (it is the maximum-likelihood estimate for a known noise
//! spectrum; Priestley, Spectral Analysis and Time Series (1981), sec. 6.1, from memory), so the
//! spike's power W has the bound 2 W S / T (PHYSICS.md section 9, one-sided). It is printed
//! beside the observed spread of W. beta, the drag and kappa also carry the spectral fit's fc
//! and D; their spread is set against the se the calibration reports.
//!
//! The records are exact AR(1) realisations (`simulate::simulate_axes_from`) plus the bead's
//! exact steady-state response to the stage. Run:
//! `cargo run --release --example active_efficiency -- [--seeds 400]`. One JSON object per
//! estimate goes to stdout.

// The arithmetic is written as the formulas read; fused multiply-adds would obscure them.
#![allow(clippy::suboptimal_flops)]

use anyhow::{Result, anyhow};
use std::f64::consts::PI;
use trapwise::calibration::{self, AnalysisOptions, Drive, RunConditions, response_power};
use trapwise::recording::{AxisTrace, PositionUnit, Recording};
use trapwise::simulate::{Disturbances, OuAxis, Sinusoid, Start, add_lines, simulate_axes_from};

const FS: f64 = 50_000.0;
const N: usize = 1 << 17;
const BETA_NM_PER_V: f64 = 300.0;
const KAPPA_PN_PER_NM: f64 = 0.05;
const DRIVE_HZ: f64 = 32.3;
const AMPLITUDE_NM: f64 = 150.0;

fn seeds_from_args() -> Result<u64> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    match args.as_slice() {
        [] => Ok(400),
        [flag, n] if flag == "--seeds" => n.parse().map_err(|e| anyhow!("--seeds {n}: {e}")),
        _ => Err(anyhow!("usage: active_efficiency [--seeds N]")),
    }
}

/// Bias / sd, spread / mean reported se, and one-se coverage.
fn summary(name: &str, values: &[f64], ses: &[f64], truth: f64, extra: &str) {
    let n = values.len() as f64;
    let mean = values.iter().sum::<f64>() / n;
    let sd = (values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    let mean_se = ses.iter().sum::<f64>() / n;
    let covered = values
        .iter()
        .zip(ses)
        .filter(|(v, s)| (*v - truth).abs() <= **s)
        .count() as f64
        / n;
    println!(
        "{{\"estimate\":\"{name}\",\"seeds\":{},\"truth\":{truth},\"mean\":{mean},\"bias_over_sd\":{},\"spread_over_reported_se\":{},\"coverage\":{covered}{extra}}}",
        values.len(),
        (mean - truth) / sd,
        sd / mean_se
    );
}

fn main() -> Result<()> {
    let seeds = seeds_from_args()?;
    let conditions = RunConditions::new(1.0e-6, 25.0);
    let physics = calibration::physics(&conditions)?;
    let gamma = physics.stokes_drag_kg_per_s.value;
    let fc = KAPPA_PN_PER_NM * 1e-3 / (2.0 * PI * gamma);
    let variance_nm2 = physics.thermal_energy_j / (KAPPA_PN_PER_NM * 1e-3) * 1e18;
    let options = AnalysisOptions {
        drive: Some(Drive {
            frequency_hz: DRIVE_HZ,
            amplitude_m: AMPLITUDE_NM * 1e-9,
            amplitude_se_m: 0.0,
            axis: None,
            drag_to: Vec::new(),
        }),
        ..AnalysisOptions::default()
    };
    let recorded_nm = AMPLITUDE_NM * response_power(DRIVE_HZ, fc, None).sqrt();
    let w_truth_v2 = (recorded_nm / BETA_NM_PER_V).powi(2) / 2.0;
    let (mut beta, mut drag, mut kappa, mut w) = (
        (Vec::new(), Vec::new()),
        (Vec::new(), Vec::new()),
        (Vec::new(), Vec::new()),
        (Vec::new(), Vec::new()),
    );
    for seed in 0..seeds {
        let mut x = simulate_axes_from(
            &[OuAxis {
                name: "x".into(),
                corner_frequency_hz: fc,
                variance: variance_nm2,
            }],
            Start::Stationary,
            FS,
            N,
            20_000 + seed,
            &Disturbances::default(),
        )
        .remove(0);
        add_lines(
            &mut x,
            FS,
            &[Sinusoid {
                frequency_hz: DRIVE_HZ,
                amplitude: recorded_nm,
                phase_rad: 0.3,
            }],
        );
        let recording = Recording {
            sample_rate_hz: FS,
            unit: PositionUnit::Volt,
            axes: vec![AxisTrace {
                name: "x".into(),
                samples: x.into_iter().map(|v| v / BETA_NM_PER_V).collect(),
            }],
        };
        let cal = calibration::calibrate(&recording, &conditions, &options)?;
        let act = cal.axes[0]
            .active
            .as_ref()
            .ok_or_else(|| anyhow!("seed {seed}: no active result"))?;
        beta.0.push(act.metres_per_unit.value * 1e9);
        beta.1.push(act.metres_per_unit.se * 1e9);
        drag.0.push(act.drag_kg_per_s.value);
        drag.1.push(act.drag_kg_per_s.se);
        let k = act
            .stiffness_pn_per_nm
            .ok_or_else(|| anyhow!("seed {seed}: no active stiffness"))?;
        kappa.0.push(k.value);
        kappa.1.push(k.se);
        w.0.push(act.spike_power.value);
        w.1.push(act.spike_power.se);
    }
    // The spike's bound, 2 W S / T + (S / T)^2, with the true thermal density at f_d in V^2/Hz
    // (the aliased Lorentzian; at 32 Hz the aliases add under 1e-6 of it).
    let d_v2 = physics.thermal_energy_j / gamma * 1e18 / BETA_NM_PER_V.powi(2);
    let s_v2 = d_v2 / (PI * PI * (fc * fc + DRIVE_HZ * DRIVE_HZ));
    let sigma2 = s_v2 / (N as f64 / FS);
    let bound = (2.0 * w_truth_v2).mul_add(sigma2, sigma2 * sigma2).sqrt();
    summary("beta_nm_per_v", &beta.0, &beta.1, BETA_NM_PER_V, "");
    summary("drag_kg_per_s", &drag.0, &drag.1, gamma, "");
    summary("kappa_pn_per_nm", &kappa.0, &kappa.1, KAPPA_PN_PER_NM, "");
    let n = w.0.len() as f64;
    let mean = w.0.iter().sum::<f64>() / n;
    let sd = (w.0.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    summary(
        "spike_power_v2",
        &w.0,
        &w.1,
        w_truth_v2,
        &format!(",\"spread_over_bound\":{}", sd / bound),
    );
    Ok(())
}
