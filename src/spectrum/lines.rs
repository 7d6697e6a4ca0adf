//! Removal of narrow spectral lines (mains pickup, resonances) from a record by harmonic
//! regression, so that the autocorrelation and equipartition methods see only thermal motion.
//!
//! A sinusoid a cos(w j) + b sin(w j) is fitted by least squares at the frequency that maximises
//! the record's periodogram near a detected peak, and subtracted. This is the classical
//! regression treatment of deterministic lines in a stationary background (Priestley, Spectral
//! Analysis and Time Series (1981), sec. 6.1 (citation from memory, unverified)); removing a line
//! also removes a fraction of about 2/N of the background variance, which is negligible.

use std::f64::consts::PI;

/// A fitted sinusoid.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SpectralLine {
    /// Frequency, Hz.
    pub frequency_hz: f64,
    /// Amplitude sqrt(a^2 + b^2), signal units.
    pub amplitude: f64,
    /// Cosine and sine coefficients, signal units.
    pub cos_coefficient: f64,
    pub sin_coefficient: f64,
}

/// Number of interleaved phasors in `harmonic_sums`.
const LANES: usize = 4;
/// Samples between exact recomputations of the phasors (a multiple of `LANES`).
const RESYNC: usize = 1024;

/// sum_j y_j cos(w j), sum_j y_j sin(w j), and the three sums of cos^2, sin^2, cos sin.
///
/// The phasor exp(i w j) advances by rotation and is recomputed exactly every 1024 samples, so
/// rounding cannot accumulate. Four interleaved phasors (samples j = 4 i + r, each rotated by
/// 4 w) break the dependency chain of a single rotation, which otherwise bounds the speed of
/// this loop; the sums agree with the single-phasor ones to rounding (common practice).
///
/// Plain multiply-adds on purpose: without the `fma` target feature (the default x86-64
/// target) `f64::mul_add` is a call into the runtime's fma routine, several times slower than
/// a multiply and an add and a barrier to vectorisation in this, the hottest loop of line
/// removal.
#[allow(clippy::suboptimal_flops)]
pub(super) fn harmonic_sums(y: &[f64], w: f64) -> [f64; 5] {
    let mut acc = [[0.0f64; LANES]; 5];
    let (step_sin, step_cos) = (LANES as f64 * w).sin_cos();
    for (block_idx, block) in y.chunks(RESYNC).enumerate() {
        let base = block_idx * RESYNC;
        let mut c = [0.0f64; LANES];
        let mut s = [0.0f64; LANES];
        for lane in 0..LANES {
            (s[lane], c[lane]) = (w * (base + lane) as f64).sin_cos();
        }
        let mut quads = block.chunks_exact(LANES);
        for quad in &mut quads {
            for lane in 0..LANES {
                let v = quad[lane];
                let (cl, sl) = (c[lane], s[lane]);
                acc[0][lane] += v * cl;
                acc[1][lane] += v * sl;
                acc[2][lane] += cl * cl;
                acc[3][lane] += sl * sl;
                acc[4][lane] += cl * sl;
                c[lane] = cl * step_cos - sl * step_sin;
                s[lane] = sl * step_cos + cl * step_sin;
            }
        }
        // A tail shorter than LANES (only in the last block) continues lane by lane.
        for (lane, &v) in quads.remainder().iter().enumerate() {
            let (cl, sl) = (c[lane], s[lane]);
            acc[0][lane] += v * cl;
            acc[1][lane] += v * sl;
            acc[2][lane] += cl * cl;
            acc[3][lane] += sl * sl;
            acc[4][lane] += cl * sl;
        }
    }
    acc.map(|lanes| lanes.iter().sum())
}

/// Least-squares amplitude of a sinusoid at angular frequency `w` (rad per sample), and the
/// power it explains.
fn fit_at(y: &[f64], w: f64) -> (f64, f64, f64) {
    let [sc, ss, cc, s2, cs] = harmonic_sums(y, w);
    let det = cc.mul_add(s2, -(cs * cs));
    if !(det.abs() > 0.0) {
        return (0.0, 0.0, 0.0);
    }
    let a = sc.mul_add(s2, -(ss * cs)) / det;
    let b = ss.mul_add(cc, -(sc * cs)) / det;
    (a, b, a.mul_add(sc, b * ss))
}

/// Fits the line nearest `f0_hz` within +-`half_width_hz`: the explained power is scanned on a
/// grid four times finer than the record's own resolution 1/T, then refined by golden-section
/// search around the best grid point. `y` must have its mean removed.
pub fn fit_line(y: &[f64], sample_rate_hz: f64, f0_hz: f64, half_width_hz: f64) -> SpectralLine {
    let n = y.len() as f64;
    let to_w = |f: f64| 2.0 * PI * f / sample_rate_hz;
    let step = sample_rate_hz / n / 4.0;
    let n_grid = ((2.0 * half_width_hz / step).ceil() as usize).clamp(1, 400);
    let lo = f0_hz - half_width_hz;
    let grid_step = 2.0 * half_width_hz / n_grid as f64;
    let mut best_f = f0_hz;
    let mut best_p = f64::NEG_INFINITY;
    for i in 0..=n_grid {
        let f = (i as f64).mul_add(grid_step, lo);
        if f <= 0.0 || f >= sample_rate_hz / 2.0 {
            continue;
        }
        let (_, _, p) = fit_at(y, to_w(f));
        if p > best_p {
            best_p = p;
            best_f = f;
        }
    }
    // Golden-section refinement (maximisation) on [best - grid_step, best + grid_step].
    let golden = (5.0f64.sqrt() - 1.0) / 2.0;
    let (mut a, mut b) = (best_f - grid_step, best_f + grid_step);
    let power = |f: f64| fit_at(y, to_w(f)).2;
    let mut x1 = b - golden * (b - a);
    let mut x2 = a + golden * (b - a);
    let (mut p1, mut p2) = (power(x1), power(x2));
    for _ in 0..30 {
        if p1 > p2 {
            b = x2;
            x2 = x1;
            p2 = p1;
            x1 = b - golden * (b - a);
            p1 = power(x1);
        } else {
            a = x1;
            x1 = x2;
            p1 = p2;
            x2 = a + golden * (b - a);
            p2 = power(x2);
        }
    }
    let f = if p1.max(p2) >= best_p {
        0.5 * (a + b)
    } else {
        best_f
    };
    let (ca, sb, _) = fit_at(y, to_w(f));
    SpectralLine {
        frequency_hz: f,
        amplitude: ca.hypot(sb),
        cos_coefficient: ca,
        sin_coefficient: sb,
    }
}

/// Subtracts fitted lines from `y` in place.
pub fn subtract_lines(y: &mut [f64], sample_rate_hz: f64, lines: &[SpectralLine]) {
    for line in lines {
        let w = 2.0 * PI * line.frequency_hz / sample_rate_hz;
        for (j, v) in y.iter_mut().enumerate() {
            let (s, c) = (w * j as f64).sin_cos();
            *v -= line.cos_coefficient.mul_add(c, line.sin_coefficient * s);
        }
    }
}
