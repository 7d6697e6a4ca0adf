//! Tests of active calibration (Tolic-Norrelykke et al., Rev. Sci. Instrum. 77, 103101 (2006);
//! shared PHYSICS.md section 9) on exact driven records: the exact Ornstein-Uhlenbeck process
//! (AR(1) recursion, or random-phase synthesis of the aliased spectrum with frequency-dependent
//! drag, Berg-Sorensen & Flyvbjerg, Rev. Sci. Instrum. 75, 594 (2004)) plus the bead's exact
//! steady-state response to the stage.

// The arithmetic is written as the formulas read; fused multiply-adds would obscure them.
#![allow(clippy::suboptimal_flops)]

use super::synthetic_records::{KAPPA_PN_PER_NM, one_axis, truth};
use super::*;
use crate::recording::{AxisTrace, PositionUnit};
use crate::simulate::{
    Disturbances, InstrumentAxis, OuAxis, Sinusoid, Start, add_lines, simulate_axes_from,
    simulate_instrument_axes,
};
use std::f64::consts::PI;

const FS: f64 = 50_000.0;
const N: usize = 1 << 17;
const BETA_NM_PER_V: f64 = 300.0;

/// A record of the reference trap (1 um bead, 0.05 pN/nm, 25 C) with a drive of `amplitude_nm`
/// at `drive_hz`, in nm, with the drag multiplied by `drag_factor` (a wall), exact AR(1).
fn driven_nm(seed: u64, drive_hz: f64, amplitude_nm: f64, drag_factor: f64) -> (Vec<f64>, f64) {
    let (fc0, d0) = truth();
    let fc = fc0 / drag_factor;
    let variance = d0 / (2.0 * PI * fc0);
    let axis = OuAxis {
        name: "x".into(),
        corner_frequency_hz: fc,
        variance,
    };
    let mut x = simulate_axes_from(
        &[axis],
        Start::Stationary,
        FS,
        N,
        seed,
        &Disturbances::default(),
    )
    .remove(0);
    let recorded = amplitude_nm * response_power(drive_hz, fc, None).sqrt();
    add_lines(
        &mut x,
        FS,
        &[Sinusoid {
            frequency_hz: drive_hz,
            amplitude: recorded,
            phase_rad: 0.3,
        }],
    );
    (x, fc)
}

fn volts(x: Vec<f64>) -> Recording {
    Recording {
        unit: PositionUnit::Volt,
        ..one_axis(x.into_iter().map(|v| v / BETA_NM_PER_V).collect(), FS)
    }
}

fn drive(drive_hz: f64, amplitude_nm: f64) -> AnalysisOptions {
    AnalysisOptions {
        drive: Some(Drive {
            frequency_hz: drive_hz,
            amplitude_m: amplitude_nm * 1e-9,
            amplitude_se_m: 0.0,
            axis: None,
            drag_to: Vec::new(),
        }),
        ..AnalysisOptions::default()
    }
}

/// The driven axis of a volt record of seed `seed` (drive at `drive_hz`, `amplitude_nm`; drag
/// times `drag_factor`), calibrated with the drive and the bead diameter `diameter_m` given.
fn driven_volt_axis(
    seed: u64,
    (drive_hz, amplitude_nm): (f64, f64),
    drag_factor: f64,
    diameter_m: f64,
) -> AxisCalibration {
    let (x, _) = driven_nm(seed, drive_hz, amplitude_nm, drag_factor);
    calibrate(
        &volts(x),
        &RunConditions::new(diameter_m, 25.0),
        &drive(drive_hz, amplitude_nm),
    )
    .expect("calibrates")
    .axes
    .remove(0)
}

/// Mean, standard deviation and one-se coverage of z-scores.
fn z_stats(z: &[f64]) -> (f64, f64, f64) {
    let n = z.len() as f64;
    let mean = z.iter().sum::<f64>() / n;
    let sd = (z.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    let covered = z.iter().filter(|v| v.abs() <= 1.0).count() as f64 / n;
    (mean, sd, covered)
}

#[test]
fn the_plain_response_is_the_published_form_and_the_drag_form_tends_to_it() {
    // |X / X_s|^2 = 1 / (1 + fc^2 / fd^2) (Tolic-Norrelykke et al. 2006, eq. for W_th).
    for (fd, fc) in [(32.0, 950.0), (100.0, 100.0), (2000.0, 300.0)] {
        let expected = 1.0 / (1.0 + (fc / fd) * (fc / fd));
        assert!((response_power(fd, fc, None) - expected).abs() < 1e-15);
        // With f_nu and f_m far above the drive the drag form reduces to it.
        let far = spectrum::HydroTerms {
            f_nu_hz: 1e14,
            f_m_hz: 1e14,
        };
        let rel = response_power(fd, fc, Some(far)) / expected - 1.0;
        assert!(rel.abs() < 1e-5, "{rel}");
    }
}

/// The steady-state |X / X_s|^2 of a sphere in a trap in a uniformly oscillating fluid, by
/// integrating its equation of motion in time (Maxey & Riley, Phys. Fluids 26, 883 (1983):
/// Stokes drag and the Basset history force on the relative velocity, added mass on the
/// relative acceleration, the fluid's pressure gradient on the displaced mass), with implicit
/// Euler for the velocity and the L1 scheme for the Caputo half-derivative of the Basset term
/// (Oldham & Spanier, The Fractional Calculus (1974), from memory), Richardson-extrapolated in
/// the step. Everything divided by gamma0.
fn response_by_time_stepping(
    fd: f64,
    fc: f64,
    f_nu: f64,
    f_m: f64,
    steps_per_period: usize,
) -> f64 {
    let periods = 40;
    let w = 2.0 * PI * fd;
    let dt = 1.0 / fd / steps_per_period as f64;
    let n = periods * steps_per_period;
    let c_basset = 1.0 / (PI * f_nu).sqrt();
    // Gamma(3/2) = sqrt(pi) / 2.
    let g = dt.powf(-0.5) / (PI.sqrt() / 2.0);
    let inertia = 1.0 / (2.0 * PI * f_m * dt);
    let k = 2.0 * PI * fc;
    let a_coef = inertia + k * dt + 1.0 + c_basset * g;
    let mut rel = vec![0.0f64; n + 1]; // w = v - du/dt, the relative velocity
    let (mut x, mut v) = (0.0, 0.0);
    let mut xs = Vec::with_capacity(n);
    let b = |j: usize| ((j + 1) as f64).sqrt() - (j as f64).sqrt();
    rel[0] = -w; // the stage starts at u = sin(w t): du/dt(0) = w
    for step in 1..=n {
        let t = step as f64 * dt;
        let du = w * (w * t).cos();
        let ddu = -w * w * (w * t).sin();
        let mut hist = 0.0;
        for j in 1..step {
            hist += b(j) * (rel[step - j] - rel[step - j - 1]);
        }
        let rhs = inertia * v - k * x + du + c_basset * g * (du + rel[step - 1])
            - c_basset * g * hist
            + ddu / (3.0 * PI * f_nu);
        v = rhs / a_coef;
        x += dt * v;
        rel[step] = v - du;
        xs.push(x);
    }
    // Harmonic regression over the last 10 whole periods.
    let tail = &xs[n - 10 * steps_per_period..];
    let offset = n - tail.len() + 1;
    let (mut c, mut s) = (0.0, 0.0);
    for (i, xv) in tail.iter().enumerate() {
        let t = (offset + i) as f64 * dt;
        c += xv * (w * t).cos();
        s += xv * (w * t).sin();
    }
    let m = tail.len() as f64;
    (2.0 * c / m).powi(2) + (2.0 * s / m).powi(2)
}

#[test]
fn the_response_to_a_moving_fluid_matches_a_time_domain_solution_with_the_history_force() {
    // Exaggerated drag terms (f / f_nu = 0.04 and a low f_m) so that the frequency dependence
    // changes |R|^2 by tens of per cent and the check discriminates.
    let (fd, fc, f_nu, f_m) = (80.0, 100.0, 2_000.0, 3_000.0);
    let hydro = spectrum::HydroTerms {
        f_nu_hz: f_nu,
        f_m_hz: f_m,
    };
    let coarse = response_by_time_stepping(fd, fc, f_nu, f_m, 200);
    let fine = response_by_time_stepping(fd, fc, f_nu, f_m, 400);
    let extrapolated = 2.0 * fine - coarse;
    let formula = response_power(fd, fc, Some(hydro));
    let rel = extrapolated / formula - 1.0;
    // The step's error after extrapolation, estimated from the two runs, is about |fine -
    // coarse| / formula / 4 (first order); the tolerance 5e-3 is well above it and ten times
    // below what leaving out the pressure-gradient term or the drag's frequency dependence
    // changes, checked below.
    assert!(
        rel.abs() < 5e-3,
        "time stepping {extrapolated}, formula {formula}, {rel:+e}"
    );
    let plain = response_power(fd, fc, None);
    assert!(
        (plain / formula - 1.0).abs() > 0.05,
        "plain {plain} formula {formula}"
    );
}

#[test]
fn active_beta_drag_and_stiffness_are_unbiased_with_honest_errors_on_driven_volt_records() {
    // 400 exact driven records off the Fourier grid (32.3 Hz, T = 2.62 s). Under a correct
    // estimator with honest errors the z-scores have mean 0 (sd of the mean 0.05), sd 1 (sd of
    // the sd about 0.035) and one-se coverage 0.683 (sd 0.023): the bounds below, |mean| < 0.25,
    // sd within 0.85-1.17, coverage within 0.60-0.77, are each 4 or more of those sds away, so a
    // correct calibration fails this test far less than once in a thousand runs.
    let (fd, amplitude) = (32.3, 150.0);
    let phys = physics(&RunConditions::new(1.0e-6, 25.0)).expect("physics");
    let gamma = phys.stokes_drag_kg_per_s.value;
    let mut z = [Vec::new(), Vec::new(), Vec::new()];
    for seed in 0..400 {
        let axis = &driven_volt_axis(9000 + seed, (fd, amplitude), 1.0, 1.0e-6);
        let act = axis.active.as_ref().expect("active result");
        assert_eq!(axis.drag_source, DragSource::Measured);
        let beta = act.metres_per_unit;
        z[0].push((beta.value * 1e9 - BETA_NM_PER_V) / (beta.se * 1e9));
        z[1].push((act.drag_kg_per_s.value - gamma) / act.drag_kg_per_s.se);
        let k = act.stiffness_pn_per_nm.expect("stiffness");
        z[2].push((k.value - KAPPA_PN_PER_NM) / k.se);
        // The axis's sensitivity is the active one.
        let s = axis.sensitivity_nm_per_v.expect("beta");
        assert!((s.value - beta.value * 1e9).abs() < 1e-9 * s.value);
    }
    for (name, z) in ["beta", "drag", "stiffness"].iter().zip(&z) {
        let (mean, sd, covered) = z_stats(z);
        assert!(mean.abs() < 0.25, "{name}: mean z {mean}");
        assert!((0.85..1.17).contains(&sd), "{name}: sd of z {sd}");
        assert!(
            (0.60..0.77).contains(&covered),
            "{name}: coverage {covered}"
        );
    }
}

#[test]
fn with_a_wrong_diameter_active_stiffness_and_beta_stay_right_and_the_drag_ratio_shows_it() {
    // The bead is 1.0 um; the user says 1.25 um. The assumed drag is then 1.25 times too
    // large, so the drag ratio is 1 / 1.25 = 0.8 (Stokes' law, linear in the radius); the
    // measured drag, beta and kappa do not depend on the diameter. 60 records at A = 400 nm:
    // the ratio's error (about 3.5 %, mostly from fc and D of a 2.6 s record) makes the 20 %
    // error a mismatch of 5 or more sd on every record. Means over 60 records have sd about
    // 0.45 % (ratio) and 0.5 % (kappa, beta); the bounds are 2 %.
    let (fd, amplitude) = (32.3, 400.0);
    let mut ratio = 0.0;
    let mut kappa = 0.0;
    let mut beta = 0.0;
    let records = 60;
    for seed in 0..records {
        let axis = &driven_volt_axis(500 + seed, (fd, amplitude), 1.0, 1.25e-6);
        let act = axis.active.as_ref().expect("active");
        ratio += act.drag_ratio.value / records as f64;
        kappa += act.stiffness_pn_per_nm.expect("kappa").value / records as f64;
        beta += act.metres_per_unit.value * 1e9 / records as f64;
        let mismatch = axis
            .findings
            .iter()
            .find(|f| f.code == "drag-mismatch")
            .expect("drag-mismatch");
        assert!(
            mismatch.message.contains("diameter"),
            "{}",
            mismatch.message
        );
        // The consensus rests on the measured drag too.
        let c = axis.stiffness_pn_per_nm.consensus;
        assert!((c.value - KAPPA_PN_PER_NM).abs() < 4.0 * c.se, "{c:?}");
    }
    assert!((ratio / 0.8 - 1.0).abs() < 0.02, "ratio {ratio}");
    assert!(
        (kappa / KAPPA_PN_PER_NM - 1.0).abs() < 0.02,
        "kappa {kappa}"
    );
    assert!((beta / BETA_NM_PER_V - 1.0).abs() < 0.02, "beta {beta}");
}

#[test]
fn near_a_wall_the_drag_ratio_is_faxens_factor_and_the_finding_gives_the_height() {
    // A 1 um bead with its centre 1.5 um and 3 um above the surface: Faxen's lateral factor
    // (Faxen 1923, in Happel & Brenner) is about 1.23 and 1.10. Records made with that drag,
    // calibrated as if in bulk: the drag ratio must match the factor within its standard error
    // (on the mean of 40 records, within 4 se of the mean); `drag-mismatch` must name a height
    // on every record at 1.5 um, and the height for the mean ratio must lie within 10 % (1.5
    // um) or 20 % (3 um) of the truth: the wall factor changes slowly with the height, so the
    // mean ratio's 0.55 % error moves the height by about 2.5 % at 1.5 um and 5.5 % at 3 um,
    // and the bounds are four of those away. At 3 um a single record's ratio is only about
    // three of its standard errors from 1, so the finding is not required there.
    let (fd, amplitude) = (32.3, 400.0);
    for (h, height_bound) in [(1.5e-6, 0.1), (3.0e-6, 0.2)] {
        let factor = drag::faxen_lateral_factor(0.5e-6, h).expect("factor");
        let records = 40;
        let (mut ratio, mut se2) = (0.0, 0.0);
        for seed in 0..records {
            let axis = &driven_volt_axis(700 + seed, (fd, amplitude), factor, 1.0e-6);
            let act = axis.active.as_ref().expect("active");
            ratio += act.drag_ratio.value / records as f64;
            se2 += act.drag_ratio.se.powi(2) / (records * records) as f64;
            let mismatch = axis.findings.iter().find(|f| f.code == "drag-mismatch");
            if h < 2e-6 {
                let message = &mismatch.expect("drag-mismatch").message;
                let height_um: f64 = message
                    .split("centre ")
                    .nth(1)
                    .and_then(|rest| rest.split(' ').next())
                    .and_then(|v| v.parse().ok())
                    .unwrap_or_else(|| panic!("no height in: {message}"));
                assert!(height_um > 0.5, "{message}");
            }
        }
        assert!(
            (ratio - factor).abs() < 4.0 * se2.sqrt(),
            "h {h}: ratio {ratio} against Faxen {factor} (se of the mean {})",
            se2.sqrt()
        );
        let height = crate::findings::height_for(drag::AxisOrientation::Lateral, 0.5e-6, ratio)
            .expect("a height");
        assert!(
            (height / h - 1.0).abs() < height_bound,
            "height {height} for ratio {ratio}, truth {h}"
        );
    }
}

#[test]
fn nanometre_records_give_a_scale_factor_of_one() {
    // The same ratio on nm data checks the nm calibration: 1 expected. 100 records; the mean of
    // the scale factor has sd about 0.3 %; the bound is 1.5 %.
    let (fd, amplitude) = (47.7, 200.0);
    let mut scale = 0.0;
    for seed in 0..100 {
        let (x, _) = driven_nm(300 + seed, fd, amplitude, 1.0);
        let cal = calibrate(
            &one_axis(x, FS),
            &RunConditions::new(1.0e-6, 25.0),
            &drive(fd, amplitude),
        )
        .expect("calibrates");
        let act = cal.axes[0].active.as_ref().expect("active");
        scale += act.metres_per_unit.value / 1e-9 / 100.0;
    }
    assert!((scale - 1.0).abs() < 0.015, "scale factor {scale}");
}

#[test]
fn the_passive_methods_see_the_same_record_with_and_without_the_drive() {
    // The spike is subtracted before every passive method: on the same thermal record, the
    // acf and equipartition estimates with the drive (and its settings) equal those without it
    // to a small fraction of their standard errors, and the spectral fit's fc too.
    for seed in 0..10 {
        let (with, _) = driven_nm(40 + seed, 32.3, 300.0, 1.0);
        let (without, _) = driven_nm(40 + seed, 32.3, 0.0, 1.0);
        let conditions = RunConditions::new(1.0e-6, 25.0);
        let a = calibrate(&one_axis(with, FS), &conditions, &drive(32.3, 300.0)).expect("driven");
        let b = calibrate(
            &one_axis(without, FS),
            &conditions,
            &AnalysisOptions::default(),
        )
        .expect("passive");
        let (a, b) = (&a.axes[0], &b.axes[0]);
        let fc = (
            a.corner_frequency_hz.unwrap(),
            b.corner_frequency_hz.unwrap(),
        );
        assert!((fc.0.value - fc.1.value).abs() < 0.2 * fc.1.se, "{fc:?}");
        let tau = (a.relaxation_time_s.unwrap(), b.relaxation_time_s.unwrap());
        assert!(
            (tau.0.value - tau.1.value).abs() < 0.2 * tau.1.se,
            "{tau:?}"
        );
        let eq = (
            a.stiffness_pn_per_nm.equipartition.unwrap(),
            b.stiffness_pn_per_nm.equipartition.unwrap(),
        );
        assert!((eq.0.value - eq.1.value).abs() < 0.2 * eq.1.se, "{eq:?}");
    }
}

#[test]
fn with_frequency_dependent_drag_the_active_calibration_stays_unbiased() {
    // A 3 um bead (where the drag's frequency dependence changes the spike by a few per cent):
    // exact random-phase synthesis of the aliased spectrum with Berg-Sorensen & Flyvbjerg's
    // frequency-dependent drag, plus the exact steady-state response (`response_power` with the
    // same drag). 40 records; the means of beta and kappa have sd about 0.5 %; the bounds are
    // 1.5 %, below what the plain response would be off by here (checked below).
    let conditions = RunConditions::new(3.0e-6, 25.0);
    let phys = physics(&conditions).expect("physics");
    let gamma = phys.stokes_drag_kg_per_s.value;
    let fc = KAPPA_PN_PER_NM * 1e-3 / (2.0 * PI * gamma);
    let d_nm2 = phys.thermal_energy_j / gamma * 1e18;
    let hydro = spectral::hydro_terms(&conditions, &phys);
    let (fd, amplitude) = (150.0, 200.0);
    let recorded = amplitude * response_power(fd, fc, Some(hydro)).sqrt();
    let axis = InstrumentAxis {
        hydrodynamics: Some(hydro),
        lines: vec![Sinusoid {
            frequency_hz: fd,
            amplitude: recorded / BETA_NM_PER_V,
            phase_rad: 1.0,
        }],
        ..InstrumentAxis::new(fc, d_nm2 / (2.0 * PI * fc) / BETA_NM_PER_V.powi(2))
    };
    let options = AnalysisOptions {
        hydrodynamics: true,
        ..drive(fd, amplitude)
    };
    let records = 40;
    let (mut beta, mut kappa) = (0.0, 0.0);
    for seed in 0..records {
        let x = simulate_instrument_axes(std::slice::from_ref(&axis), FS, N, 60 + seed)
            .expect("synthesis")
            .remove(0);
        let recording = Recording {
            sample_rate_hz: FS,
            unit: PositionUnit::Volt,
            axes: vec![AxisTrace {
                name: "x".into(),
                samples: x,
            }],
        };
        let cal = calibrate(&recording, &conditions, &options).expect("calibrates");
        let act = cal.axes[0].active.as_ref().expect("active");
        beta += act.metres_per_unit.value * 1e9 / records as f64;
        kappa += act.stiffness_pn_per_nm.expect("kappa").value / records as f64;
    }
    assert!((beta / BETA_NM_PER_V - 1.0).abs() < 0.015, "beta {beta}");
    assert!(
        (kappa / KAPPA_PN_PER_NM - 1.0).abs() < 0.015,
        "kappa {kappa}"
    );
    let plain_off = response_power(fd, fc, Some(hydro)) / response_power(fd, fc, None) - 1.0;
    assert!(
        plain_off.abs() > 0.015,
        "the drag changes the response by {plain_off}"
    );
}

#[test]
fn a_lateral_axis_can_take_the_drag_measured_on_the_driven_one() {
    let (x, _) = driven_nm(11, 32.3, 300.0, 1.0);
    let (y, _) = driven_nm(12, 32.3, 0.0, 1.0);
    let recording = Recording {
        sample_rate_hz: FS,
        unit: PositionUnit::Nanometre,
        axes: vec![
            AxisTrace {
                name: "x".into(),
                samples: x,
            },
            AxisTrace {
                name: "y".into(),
                samples: y,
            },
        ],
    };
    let mut options = drive(32.3, 300.0);
    if let Some(d) = options.drive.as_mut() {
        d.drag_to = vec!["y".into()];
    }
    let cal = calibrate(&recording, &RunConditions::new(1.0e-6, 25.0), &options).expect("cal");
    let measured = cal.axes[0].active.as_ref().expect("active").drag_kg_per_s;
    assert_eq!(cal.axes[1].drag_source, DragSource::Measured);
    assert!(cal.axes[1].active.is_none());
    assert_eq!(cal.axes[1].drag_kg_per_s, measured);
    // Its psd stiffness carries the measured drag's error.
    let k = cal.axes[1].stiffness_pn_per_nm.psd.expect("psd");
    assert!(k.relative_se() >= measured.relative_se());
}

#[test]
fn a_drive_that_does_not_fit_the_recording_is_refused_with_the_setting_named() {
    let (x, _) = driven_nm(1, 32.3, 100.0, 1.0);
    let conditions = RunConditions::new(1.0e-6, 25.0);
    let recording = one_axis(x, FS);
    let cases = [
        (drive(30_000.0, 100.0), "drive_frequency_hz"),
        (
            AnalysisOptions {
                drive: Some(Drive {
                    axis: Some("q".into()),
                    ..drive(32.3, 100.0).drive.unwrap()
                }),
                ..AnalysisOptions::default()
            },
            "drive_axis",
        ),
        (
            AnalysisOptions {
                drive: Some(Drive {
                    drag_to: vec!["x".into()],
                    ..drive(32.3, 100.0).drive.unwrap()
                }),
                ..AnalysisOptions::default()
            },
            "drive_drag_to",
        ),
    ];
    for (options, named) in cases {
        match calibrate(&recording, &conditions, &options) {
            Err(CalibrationError::InvalidDrive { field, .. }) => assert_eq!(field, named),
            other => panic!("{named}: {:?}", other.map(|_| ())),
        }
    }
}

#[test]
fn a_declared_photodiode_filter_scales_the_spike_as_it_scales_the_thermal_motion() {
    // The photodiode's filter (Berg-Sorensen et al., J. Appl. Phys. 93, 3167 (2003); PHYSICS.md
    // section 3), f3dB 6 kHz, alpha 0.3, attenuates a 4 kHz drive's power to g = 0.72, and the
    // spike is compared with W_th g. Exact synthesis of the filtered aliased spectrum plus the
    // filtered drive; 30 records: the means of beta and kappa have sd about 0.3 %; the bounds
    // are 1.5 %, well inside the 15 % (beta) that leaving g out would cost.
    let filter = spectrum::DetectorFilter {
        f3db_hz: 6_000.0,
        alpha: 0.3,
    };
    let (fc, d_nm2) = truth();
    let (fd, amplitude) = (4_000.0, 30.0);
    let g = filter.gain(fd);
    let recorded = amplitude * (response_power(fd, fc, None) * g).sqrt();
    let axis = InstrumentAxis {
        detector_filter: Some(filter),
        lines: vec![Sinusoid {
            frequency_hz: fd,
            amplitude: recorded / BETA_NM_PER_V,
            phase_rad: 0.2,
        }],
        ..InstrumentAxis::new(fc, d_nm2 / (2.0 * PI * fc) / BETA_NM_PER_V.powi(2))
    };
    let options = AnalysisOptions {
        filter: spectrum::FilterSetting::Fixed(filter),
        ..drive(fd, amplitude)
    };
    let records = 30;
    let (mut beta, mut kappa) = (0.0, 0.0);
    for seed in 0..records {
        let x = simulate_instrument_axes(std::slice::from_ref(&axis), FS, N, 900 + seed)
            .expect("synthesis")
            .remove(0);
        let cal = calibrate(&volts_raw(x), &RunConditions::new(1.0e-6, 25.0), &options)
            .expect("calibrates");
        let act = cal.axes[0].active.as_ref().expect("active");
        beta += act.metres_per_unit.value * 1e9 / records as f64;
        kappa += act.stiffness_pn_per_nm.expect("kappa").value / records as f64;
    }
    assert!(
        (beta / BETA_NM_PER_V - 1.0).abs() < 0.015,
        "beta {beta} (g = {g})"
    );
    assert!(
        (kappa / KAPPA_PN_PER_NM - 1.0).abs() < 0.015,
        "kappa {kappa}"
    );
    assert!(g < 0.75, "the filter's gain at the drive {g}");
}

/// A one-axis volt recording of samples already in volts.
fn volts_raw(x: Vec<f64>) -> Recording {
    Recording {
        unit: PositionUnit::Volt,
        ..one_axis(x, FS)
    }
}
