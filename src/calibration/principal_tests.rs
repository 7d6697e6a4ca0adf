//! Tests of the coupled-axes numerics against exact facts: rotations of known covariances, and
//! the null distribution of the correlation and the spread of the angle on exact AR(1) records
//! of the Ornstein-Uhlenbeck process (Norrelykke & Flyvbjerg, Phys. Rev. E 83, 041103 (2011),
//! overdamped limit; shared/PHYSICS.md section 2).

use super::principal::*;
use super::{RunConditions, physics};
use crate::simulate::{generator, ou_series};
use std::f64::consts::PI;

const FS: f64 = 100_000.0;

/// (fc Hz, variance nm^2) of a 1 um bead in water at 25 C in a trap of `kappa_pn_per_nm`
/// (fc = kappa / (2 pi gamma), variance kB T / kappa: equipartition).
pub(super) fn ou_truth(kappa_pn_per_nm: f64) -> (f64, f64) {
    let phys = physics(&RunConditions::new(1.0e-6, 25.0)).expect("valid conditions");
    let kappa = kappa_pn_per_nm * 1e-3;
    let fc = kappa / (2.0 * PI * phys.stokes_drag_kg_per_s.value);
    (fc, phys.thermal_energy_j / kappa * 1e18)
}

/// Two independent exact OU records along the trap's principal axes (kappa 0.06 and 0.03
/// pN/nm), expressed along detector axes turned by `-angle_rad` from them (the principal axes
/// are at +angle_rad from the detector's x towards y): an exact rotation of Gaussian vectors.
pub(super) fn turned_pair(
    angle_rad: f64,
    n: usize,
    fs: f64,
    rng: &mut rand_xoshiro::Xoshiro256PlusPlus,
) -> (Vec<f64>, Vec<f64>) {
    let (fc1, var1) = ou_truth(0.06);
    let (fc2, var2) = ou_truth(0.03);
    let p1 = ou_series(fc1, var1, fs, n, rng);
    let p2 = ou_series(fc2, var2, fs, n, rng);
    // x = p1 cos - p2 sin, y = p1 sin + p2 cos: the inverse of `rotate` by angle_rad.
    rotate(&p1, &p2, -angle_rad)
}

#[test]
fn the_diagonalising_angle_recovers_a_known_rotation_of_a_covariance() {
    // C = R(t) diag(l1, l2) R(t)^T has eigenvectors at t and t + 90 degrees (exact); the angle
    // of at most 45 degrees is t when |t| <= 45, else t -+ 90.
    for (deg, l1, l2) in [
        (20.0, 2.0, 1.0),
        (-30.0, 1.0, 3.0),
        (44.0, 5.0, 1.0),
        (70.0, 2.0, 1.0),
    ] {
        let t: f64 = f64::to_radians(deg);
        let (s, c) = t.sin_cos();
        let a = (l1 * c).mul_add(c, l2 * s * s);
        let b = (l1 * s).mul_add(s, l2 * c * c);
        let cxy = (l1 - l2) * s * c;
        let expected = if deg > 45.0 { deg - 90.0 } else { deg };
        let got = diagonalising_angle(a, b, cxy).to_degrees();
        assert!((got - expected).abs() < 1e-12, "{deg}: {got} vs {expected}");
    }
}

#[test]
fn rotating_by_an_angle_and_back_returns_the_samples() {
    // u = x cos + y sin, v = -x sin + y cos (a rotation: exact inverse by -angle).
    let x = [1.0, 0.0, 3.0, -2.0];
    let y = [0.0, 1.0, 4.0, 0.5];
    let (u, v) = rotate(&x, &y, 0.3);
    assert!((u[0] - 0.3f64.cos()).abs() < 1e-15 && (v[0] + 0.3f64.sin()).abs() < 1e-15);
    assert!((u[2].hypot(v[2]) - 5.0).abs() < 1e-14);
    let (x2, y2) = rotate(&u, &v, -0.3);
    for i in 0..4 {
        assert!((x2[i] - x[i]).abs() < 1e-14 && (y2[i] - y[i]).abs() < 1e-14);
    }
}

#[test]
fn the_critical_value_is_the_normal_quantile() {
    // Two-sided standard normal quantiles (any statistics handbook): 2.5758 at 1 %, 3.2905 at
    // 0.1 %.
    assert!((critical_z(0.01) - 2.575_829).abs() < 1e-5);
    assert!((critical_z(0.001) - 3.290_527).abs() < 1e-5);
    assert!(is_significant(3.3) && !is_significant(3.2));
}

#[test]
fn uncoupled_axes_raise_the_alarm_at_the_stated_rate() {
    // Null: two independent exact AR(1) records (fc of kappa 0.06 and 0.03 pN/nm, 1 um bead,
    // water 25 C, 100 kHz, 2^14 samples), seeds from generator(11) in sequence, 5000 pairs.
    // - z should be standard normal: the sd of a sample sd of 5000 is 0.010, so |sd - 1| < 0.045
    //   is a 4.5 sd margin (and allows the ~1 % the estimated se adds).
    // - |z| > 2.576 (1 %): binomial(5000, 0.01), mean 50; outside [26, 76] has probability
    //   below 1e-3 (computed from the binomial).
    // - |z| > 3.29 (0.1 %, the finding's rate): mean 5; 15 or more has probability 2e-4.
    // - the reported se against Bartlett's closed form for two AR(1) series,
    //   sum_k (ab)^|k| = (1 + ab)/(1 - ab) (a geometric series): the mean ratio over 5000 pairs
    //   within 1 % (each ratio scatters by about 2 %, so the mean by 0.03 %; the 1 % is for the
    //   O(tau / N) edge terms).
    let (fc1, var1) = ou_truth(0.06);
    let (fc2, var2) = ou_truth(0.03);
    let n = 1 << 14;
    let a = (-2.0 * PI * fc1 / FS).exp();
    let b = (-2.0 * PI * fc2 / FS).exp();
    let se_closed = ((1.0 + a * b) / (1.0 - a * b) / n as f64).sqrt();
    let mut rng = generator(11);
    let pairs = 5000;
    let (mut sum, mut sum2, mut ratio_sum) = (0.0, 0.0, 0.0);
    let (mut at_1pc, mut at_01pc) = (0, 0);
    for _ in 0..pairs {
        let x = ou_series(fc1, var1, FS, n, &mut rng);
        let y = ou_series(fc2, var2, FS, n, &mut rng);
        let c = correlation(&x, &y, &axis_autocovariance(&x), &axis_autocovariance(&y))
            .expect("usable");
        sum += c.z;
        sum2 += c.z * c.z;
        ratio_sum += c.coefficient.se / se_closed;
        if c.z.abs() > critical_z(0.01) {
            at_1pc += 1;
        }
        if is_significant(c.z) {
            at_01pc += 1;
        }
    }
    let m = sum / f64::from(pairs);
    let sd = (sum2 / f64::from(pairs) - m * m).sqrt();
    let ratio = ratio_sum / f64::from(pairs);
    println!(
        "null z: mean {m:.4} sd {sd:.4}; |z|>2.576: {at_1pc}/{pairs}; |z|>3.29: {at_01pc}/{pairs}; se/closed form {ratio:.4}"
    );
    assert!(m.abs() < 0.064, "mean z {m}");
    assert!((sd - 1.0).abs() < 0.045, "sd of z {sd}");
    assert!((26..=76).contains(&at_1pc), "{at_1pc} alarms at 1 %");
    assert!(at_01pc <= 14, "{at_01pc} alarms at 0.1 %");
    assert!((ratio - 1.0).abs() < 0.01, "se / closed form {ratio}");
}

#[test]
fn the_principal_angle_of_a_turned_trap_is_unbiased_with_an_honest_error() {
    // A trap with kappa 0.06 and 0.03 pN/nm along axes turned 20 degrees from the detector
    // (exact AR(1) records, rotated exactly), 100 kHz, 2^16 samples, 1000 seeds from
    // generator(21). The reported se is about 1.4 degrees.
    // - every record: |angle - 20| < 5 se (a normal passes 1000 times with probability 0.9994);
    // - mean of (angle - 20)/se: sd 0.032 over 1000, so |mean| < 0.13 is 4 sd;
    // - observed sd / mean se within 0.1 of 1 (the sample sd scatters by 2.2 %; the margin
    //   allows the first-order se).
    let truth = 20f64.to_radians();
    let n = 1 << 16;
    let mut rng = generator(21);
    let seeds = 1000;
    let (mut zsum, mut dsum, mut d2sum, mut se_sum) = (0.0, 0.0, 0.0, 0.0);
    let mut worst: f64 = 0.0;
    for _ in 0..seeds {
        let (x, y) = turned_pair(truth, n, FS, &mut rng);
        let p = principal_angle(&x, &y).expect("usable");
        let d = p.angle_rad.value - truth;
        let z = d / p.angle_rad.se;
        worst = worst.max(z.abs());
        zsum += z;
        dsum += d;
        d2sum += d * d;
        se_sum += p.angle_rad.se;
        // The stiff axis (smaller variance) is the one nearest x here.
        assert!(p.variances[0] < p.variances[1], "{:?}", p.variances);
    }
    let k = f64::from(seeds);
    let mean_z = zsum / k;
    let bias_deg = (dsum / k).to_degrees();
    let sd = (dsum / k).mul_add(-(dsum / k), d2sum / k).sqrt();
    let se = se_sum / k;
    println!(
        "angle: bias {bias_deg:.4} deg, sd {:.4} deg, mean se {:.4} deg, sd/se {:.4}, mean z {mean_z:.4}, worst |z| {worst:.2}",
        sd.to_degrees(),
        se.to_degrees(),
        sd / se
    );
    assert!(worst < 5.0, "worst |z| {worst}");
    assert!(mean_z.abs() < 0.13, "mean z {mean_z}");
    assert!((sd / se - 1.0).abs() < 0.1, "sd/se {}", sd / se);
}

#[test]
fn unusable_pairs_give_no_coupling() {
    let x: Vec<f64> = (0..100).map(|i| f64::from(i).sin()).collect();
    let flat = vec![1.0; 100];
    let short = vec![0.5; 10];
    let ax = axis_autocovariance(&x);
    assert!(correlation(&x, &flat, &ax, &axis_autocovariance(&flat)).is_none());
    assert!(correlation(&x, &short, &ax, &axis_autocovariance(&short)).is_none());
    let mut bad = x.clone();
    bad[5] = f64::NAN;
    assert!(principal_angle(&x, &bad).is_none());
}

#[test]
fn on_long_records_the_null_se_from_the_first_part_matches_the_closed_form() {
    // 2^20 samples (longer than VARIANCE_RECORD = 2^17), independent exact AR(1) axes of kappa
    // 0.06 and 0.03 pN/nm, seed 13: the se from the first 2^17 samples' autocovariances, divided
    // by the whole length, against Bartlett's closed form for two AR(1) series,
    // sqrt((1 + ab) / ((1 - ab) N)). The sum scatters by about 1.5 %, the se by 0.8 %: within
    // 5 % is over 6 sd.
    let (fc1, var1) = ou_truth(0.06);
    let (fc2, var2) = ou_truth(0.03);
    let n = 1 << 20;
    let a = (-2.0 * PI * fc1 / FS).exp();
    let b = (-2.0 * PI * fc2 / FS).exp();
    let se_closed = ((1.0 + a * b) / (1.0 - a * b) / n as f64).sqrt();
    let mut rng = generator(13);
    let x = ou_series(fc1, var1, FS, n, &mut rng);
    let y = ou_series(fc2, var2, FS, n, &mut rng);
    let c =
        correlation(&x, &y, &axis_autocovariance(&x), &axis_autocovariance(&y)).expect("usable");
    let ratio = c.coefficient.se / se_closed;
    println!("long record: se / closed form {ratio:.4}, z {:.2}", c.z);
    assert!((ratio - 1.0).abs() < 0.05, "{ratio}");
}
