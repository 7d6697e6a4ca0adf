//! The Allan deviation of a record: the overlapping Allan variance of block averages at
//! octave-spaced averaging times, the curve a stationary Gaussian model of the record predicts,
//! and the band the overlapping estimator scatters in around it, from which the averaging time
//! where drift takes over is read. A diagnostic of the record, not a stiffness estimate.
//!
//! Definition (Allan, Proc. IEEE 54, 221 (1966); the overlapping estimator as in W. J. Riley,
//! Handbook of Frequency Stability Analysis, NIST Special Publication 1065 (2008)): with block
//! sums B_i = x_i + ... + x_(i+m-1) of m samples (tau = m dt) and the differences
//! d_i = (B_(i+m) - B_i) / m, i = 0..n-1, n = N - 2m + 1,
//! AV(tau) = (1 / 2n) sum_i d_i^2 and the deviation is its square root.
//!
//! The model's side works from its autocovariance C(k) at whole lags, given as a slice (lags
//! beyond it are zero): for a stationary process with block-sum covariance
//! V(l) = Cov(B_i, B_(i+l)) = sum_(|r|<m) (m - |r|) C(l + r),
//! E(AV(tau)) = (V(0) - V(m)) / m^2 (derived here: E d_i^2 = 2 (V(0) - V(m)) / m^2), and the
//! autocovariance of the differences is R_D(k) = (2 V(k) - V(k + m) - V(k - m)) / m^2. For a
//! Gaussian process the estimator's variance is
//! Var(AV) = (1 / 2 n^2) sum_(|k|<n) (n - |k|) R_D(k)^2 (Isserlis: Cov(d_i^2, d_j^2) =
//! 2 R_D(i - j)^2), and the band is that of a chi-square with the equivalent degrees of freedom
//! edf = 2 E(AV)^2 / Var(AV) (Satterthwaite's approximation, the chi-square confidence interval
//! of Riley 2008 with the degrees of freedom computed for this spectrum instead of taken from
//! the power-law noise tables, which the trapped bead's motion does not follow).
//!
//! The double sums V(l) are second differences of the twice-summed autocovariance, so every
//! averaging time costs O(1) for the expected value and O(512 + correlation length) for the
//! band after one O(lags) pass; the measured curve costs O(N) per averaging time through the prefix
//! sums of the record.

#[cfg(test)]
mod tests;

use statrs::distribution::{ChiSquared, ContinuousCDF};

/// The band's probabilities: the central 99.8 % of the estimator's distribution. The drift
/// rule (see [`drift_onset`]) reads its upper edge: on clean exact Ornstein-Uhlenbeck records
/// the tests measured 0.68 % of records declaring an onset (1.35 % with the edge at the
/// 99.75 % quantile), under the 1 % asked for (a choice, no source).
pub const BAND_PROBABILITIES: (f64, f64) = (0.001, 0.999);

/// Relative size of |C(k)| / C(0) below which the model's autocovariance counts as decayed for
/// the band's sum: beyond lag 2m plus that correlation length the difference series sees only
/// the smooth remainder of C, whose fourth difference over m samples is smaller still, and the
/// rest of the sum over R_D(k)^2 is left out (a choice: far below the band's own
/// approximation).
const CORRELATION_CUTOFF: f64 = 1e-6;

/// The Allan deviation of one record.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct AllanCurve {
    /// Averaging times tau = m / f_s, s, for m = 1, 2, 4, ... while 3m <= N.
    pub tau_s: Vec<f64>,
    /// Samples per block, m, at each averaging time.
    pub block_samples: Vec<usize>,
    /// Measured overlapping Allan deviation, signal unit.
    pub deviation: Vec<f64>,
    /// What the model predicts, when a model was given.
    pub expected: Option<ExpectedAllan>,
}

/// The model's Allan deviation with the band of the overlapping estimator around it.
#[derive(Clone, Debug, PartialEq)]
pub struct ExpectedAllan {
    /// sqrt(E(AV)), signal unit.
    pub deviation: Vec<f64>,
    /// The band's lower and upper edges (`BAND_PROBABILITIES` quantiles of the estimated
    /// deviation), signal unit.
    pub low: Vec<f64>,
    pub high: Vec<f64>,
    /// Equivalent degrees of freedom of the estimator at each averaging time.
    pub degrees_of_freedom: Vec<f64>,
    /// The shortest averaging time (s) from which the measured deviation stays above the band
    /// to the longest one measured; `None` when the last one is inside or below it.
    pub drift_onset_s: Option<f64>,
}

/// Block sizes m = 1, 2, 4, ... with 3m <= `n_samples` (averaging times up to a third of the
/// record).
pub fn octave_block_sizes(n_samples: usize) -> Vec<usize> {
    std::iter::successors(Some(1usize), |m| m.checked_mul(2))
        .take_while(|m| m.saturating_mul(3) <= n_samples)
        .collect()
}

/// The overlapping Allan variance of `samples` for blocks of each size in `block_sizes`,
/// signal-unit^2 (NaN for a block size with 2m > N).
///
/// Computed from the prefix sums of the record less its mean (the mean cancels from every
/// difference; taking it out first keeps the prefix sums small and the differences accurate):
/// m d_i = P(i + 2m) - 2 P(i + m) + P(i). Four running sums let the compiler vectorise; plain
/// products, not `mul_add`, which without a hardware fused multiply-add is a library call per
/// term and made this loop several times slower.
#[allow(clippy::suboptimal_flops)]
pub fn overlapping_allan_variances(samples: &[f64], block_sizes: &[usize]) -> Vec<f64> {
    let n = samples.len();
    let mean = samples.iter().sum::<f64>() / n.max(1) as f64;
    let mut prefix = Vec::with_capacity(n + 1);
    let mut running = 0.0;
    prefix.push(0.0);
    for &x in samples {
        running += x - mean;
        prefix.push(running);
    }
    block_sizes
        .iter()
        .map(|&m| {
            if m == 0 || 2 * m > n {
                return f64::NAN;
            }
            let terms = n - 2 * m + 1;
            let lower = &prefix[..terms];
            let middle = &prefix[m..m + terms];
            let upper = &prefix[2 * m..2 * m + terms];
            let mut sums = [0.0f64; 4];
            let mut chunks = lower
                .chunks_exact(4)
                .zip(middle.chunks_exact(4))
                .zip(upper.chunks_exact(4));
            for ((a, b), c) in chunks.by_ref() {
                for j in 0..4 {
                    let d = a[j] + c[j] - 2.0 * b[j];
                    sums[j] += d * d;
                }
            }
            let done = terms - terms % 4;
            let mut tail = 0.0;
            for i in done..terms {
                let d = lower[i] + upper[i] - 2.0 * middle[i];
                tail += d * d;
            }
            let total = (sums[0] + sums[1]) + (sums[2] + sums[3]) + tail;
            let mf = m as f64;
            total / (2.0 * mf * mf * terms as f64)
        })
        .collect()
}

/// The autocovariance of a model summed twice, for the block covariances V(l): with c(t) =
/// C(|t|), g(t) = sum of c over [0, t) and h(t) = sum of g over [0, t) for t >= 0,
/// sum_(a,b < m) c(l + a - b) = h(l + m + 1) - 2 h(l + 1) + h(l - m + 1). For negative t the
/// same sums run the other way, and by the symmetry of c, h(-t) = h(t + 2) - h(2) - t C(0)
/// (derived here). Beyond the slice c is zero, so g is constant there and h linear. The sums
/// start at lag zero, so they stay small where the short averaging times need them.
struct LagSums {
    /// h(t) for t = 0..=len + 2.
    h: Vec<f64>,
    /// g beyond the slice, for the linear continuation of h.
    g_end: f64,
    c0: f64,
}

impl LagSums {
    fn new(autocovariance: &[f64]) -> Self {
        let mut h = Vec::with_capacity(autocovariance.len() + 3);
        let mut g = 0.0;
        let mut running = 0.0;
        h.push(0.0);
        for t in 0..autocovariance.len() + 2 {
            running += g;
            h.push(running);
            g += autocovariance.get(t).copied().unwrap_or(0.0);
        }
        Self {
            h,
            g_end: g,
            c0: autocovariance.first().copied().unwrap_or(0.0),
        }
    }

    fn h(&self, t: i64) -> f64 {
        if t < 0 {
            let s = t.unsigned_abs();
            return (s as f64).mul_add(
                -self.c0,
                self.h_non_negative(s + 2) - self.h_non_negative(2),
            );
        }
        self.h_non_negative(t.unsigned_abs())
    }

    fn h_non_negative(&self, t: u64) -> f64 {
        let last = self.h.len() - 1;
        match usize::try_from(t) {
            Ok(t) if t <= last => self.h[t],
            _ => ((t - last as u64) as f64).mul_add(self.g_end, self.h[last]),
        }
    }

    /// V(l) for blocks of m samples: the sum of the m^2 covariances between the samples of two
    /// blocks l samples apart, signal-unit^2.
    fn block_covariance(&self, l: i64, m: i64) -> f64 {
        let l = l.abs();
        2.0f64.mul_add(-self.h(l + 1), self.h(l + m + 1)) + self.h(l - m + 1)
    }
}

/// The Allan variance a stationary model with autocovariance `autocovariance` (C(k) at lags
/// k = 0, 1, ...; zero beyond the slice) predicts for blocks of `m` samples, signal-unit^2:
/// (V(0) - V(m)) / m^2.
pub fn expected_allan_variance(autocovariance: &[f64], m: usize) -> f64 {
    expected_from(&LagSums::new(autocovariance), m)
}

fn expected_from(sums: &LagSums, m: usize) -> f64 {
    let mi = m as i64;
    let mf = m as f64;
    (sums.block_covariance(0, mi) - sums.block_covariance(mi, mi)) / (mf * mf)
}

/// Variance of the overlapping estimator for blocks of `m` samples of a record of `n_samples`
/// from a stationary Gaussian process with this autocovariance, signal-unit^4, with the sum over
/// R_D(k)^2 taken to lag 2m plus `correlation_lags` (see [`CORRELATION_CUTOFF`]).
fn estimator_variance(sums: &LagSums, m: usize, n_samples: usize, correlation_lags: usize) -> f64 {
    let n = n_samples + 1 - 2 * m;
    let mi = m as i64;
    let mf = m as f64;
    let r_d = |k: i64| {
        2.0f64.mul_add(
            sums.block_covariance(k, mi),
            -sums.block_covariance(k + mi, mi) - sums.block_covariance(k - mi, mi),
        ) / (mf * mf)
    };
    let last = (n - 1).min(2 * m + correlation_lags);
    let nf = n as f64;
    let r0 = r_d(0);
    let mut total = nf * r0 * r0;
    // Away from its kinks at 0, m and 2m, R_D varies on the scale of m, so there blocks of
    // m / 256 lags are counted by their middle lag (the midpoint rule; within 1e-4 of the full
    // sum in the tests) and the band costs O(512 + K) per averaging time instead of O(2m + K).
    // Odd, so that a block has a middle lag.
    let stride = (m / 256).max(1) | 1;
    // Near the kinks R_D turns over the correlation length: summed lag by lag there.
    let margin = correlation_lags + 16;
    let kinks = [0, m, 2 * m];
    let mut k = 1;
    while k <= last {
        let near = kinks.iter().any(|&c| k + margin >= c && k <= c + margin);
        let next_kink = kinks
            .iter()
            .map(|&c| c.saturating_sub(margin))
            .filter(|&start| start > k)
            .min()
            .unwrap_or(usize::MAX);
        let width = if near {
            1
        } else {
            let room = stride.min(last + 1 - k).min(next_kink - k);
            if room % 2 == 0 { room - 1 } else { room }
        };
        let middle = k + (width - 1) / 2;
        let r = r_d(middle as i64);
        total = (2.0 * width as f64 * (nf - middle as f64) * r).mul_add(r, total);
        k += width;
    }
    total / (2.0 * nf * nf)
}

/// The last lag whose |C| exceeds `CORRELATION_CUTOFF` C(0).
fn correlation_length(autocovariance: &[f64]) -> usize {
    let scale = autocovariance.first().map_or(0.0, |c| c.abs());
    autocovariance
        .iter()
        .rposition(|c| c.abs() > CORRELATION_CUTOFF * scale)
        .unwrap_or(0)
}

/// The `BAND_PROBABILITIES` quantiles of the estimated Allan variance, as multiples of its
/// expectation, for `edf` equivalent degrees of freedom (chi-square_edf / edf).
fn band_factors(edf: f64) -> (f64, f64) {
    match ChiSquared::new(edf) {
        Ok(chi) => (
            chi.inverse_cdf(BAND_PROBABILITIES.0) / edf,
            chi.inverse_cdf(BAND_PROBABILITIES.1) / edf,
        ),
        Err(_) => (f64::NAN, f64::NAN),
    }
}

/// The drift onset: the shortest averaging time of the last run of points above the band's
/// upper edge, when every point after that run lies above the expected curve; `None` when no
/// point is above the band or one after the last such point comes back to the expected curve
/// or below.
///
/// Why not "above the band at every point from there on": the last points rest on a few
/// overlapping differences (about 4 equivalent degrees of freedom at a third of the record), so
/// their upper edge lies at 4 times the expected variance, and drift that carries two thirds of
/// the variance there would never be declared. Leaving the band and staying above the
/// expectation after it is a test of the band's level at the point of exit, while the points
/// beyond it only have to confirm the direction (a choice, no source; the tests measure the
/// false-alarm rate on clean records: see [`BAND_PROBABILITIES`]). The onset is the start of the
/// last run above the band rather than the first point outside it, because at the shortest
/// averaging times the band is narrow (thousands of degrees of freedom) and a small misfit of
/// the spectral model can put an isolated point there outside it.
pub fn drift_onset(
    tau_s: &[f64],
    deviation: &[f64],
    high: &[f64],
    expected: &[f64],
) -> Option<f64> {
    let n = tau_s
        .len()
        .min(deviation.len())
        .min(high.len())
        .min(expected.len());
    let last_out = (0..n).rev().find(|&i| deviation[i] > high[i])?;
    if !(last_out + 1..n).all(|i| deviation[i] > expected[i]) {
        return None;
    }
    let mut first = last_out;
    while first > 0 && deviation[first - 1] > high[first - 1] {
        first -= 1;
    }
    Some(tau_s[first])
}

/// The model's Allan deviation and band at the block sizes `block_sizes`, for a record of
/// `n_samples`, and the drift onset read against `measured` (deviations, signal unit).
pub fn expected_allan(
    autocovariance: &[f64],
    block_sizes: &[usize],
    n_samples: usize,
    tau_s: &[f64],
    measured: &[f64],
) -> ExpectedAllan {
    let sums = LagSums::new(autocovariance);
    let correlation_lags = correlation_length(autocovariance);
    let mut deviation = Vec::with_capacity(block_sizes.len());
    let mut low = Vec::with_capacity(block_sizes.len());
    let mut high = Vec::with_capacity(block_sizes.len());
    let mut degrees_of_freedom = Vec::with_capacity(block_sizes.len());
    for &m in block_sizes {
        let variance = expected_from(&sums, m);
        let spread = estimator_variance(&sums, m, n_samples, correlation_lags);
        let edf = 2.0 * variance * variance / spread;
        let (lo, hi) = band_factors(edf);
        deviation.push(variance.sqrt());
        low.push((variance * lo).sqrt());
        high.push((variance * hi).sqrt());
        degrees_of_freedom.push(edf);
    }
    let drift_onset_s = drift_onset(tau_s, measured, &high, &deviation);
    ExpectedAllan {
        deviation,
        low,
        high,
        degrees_of_freedom,
        drift_onset_s,
    }
}

/// The Allan deviation of `samples` taken at `sample_rate_hz`, with the model's curve and band
/// when its autocovariance is given (C(k) at lags 0, 1, ...; zero beyond the slice).
pub fn allan_curve(
    samples: &[f64],
    sample_rate_hz: f64,
    autocovariance: Option<&[f64]>,
) -> AllanCurve {
    let block_samples = octave_block_sizes(samples.len());
    let tau_s: Vec<f64> = block_samples
        .iter()
        .map(|&m| m as f64 / sample_rate_hz)
        .collect();
    let deviation: Vec<f64> = overlapping_allan_variances(samples, &block_samples)
        .into_iter()
        .map(f64::sqrt)
        .collect();
    let expected = autocovariance
        .filter(|c| c.first().is_some_and(|c0| *c0 > 0.0 && c0.is_finite()))
        .map(|c| expected_allan(c, &block_samples, samples.len(), &tau_s, &deviation));
    AllanCurve {
        tau_s,
        block_samples,
        deviation,
        expected,
    }
}
