//! Detection of narrow spectral peaks (mains pickup, mechanical resonances) that a thermal
//! spectrum cannot contain.

use super::Periodogram;
use statrs::distribution::{ContinuousCDF, Gamma};
use statrs::function::gamma::{digamma, gamma_lr, gamma_ur, ln_gamma};
use std::sync::{Arc, Mutex, MutexGuard, PoisonError};

/// A run of periodogram bins with far more power than the smooth thermal background allows.
#[derive(Clone, Debug, PartialEq)]
pub struct NarrowPeak {
    /// Frequency of the strongest bin, Hz.
    pub frequency_hz: f64,
    /// First and last bin of the run (inclusive).
    pub first_bin: usize,
    pub last_bin: usize,
    /// Ratio of the strongest bin to the local background (dimensionless).
    pub peak_ratio: f64,
    /// Power above the background summed over the run, signal-units^2 (the mean square of the
    /// interfering signal, one-sided PSD times bin width).
    pub excess_power: f64,
    /// The nearest mains frequency (50 or 60 Hz) of which this is a harmonic, if it lies within
    /// one resolution step (or 0.5 Hz) of one, with the harmonic number.
    pub mains: Option<(f64, u32)>,
}

/// Finds narrow peaks in an averaged periodogram.
///
/// The background B_k is a running median over windows whose width grows with frequency (at
/// least 31 bins, about 10 % of the frequency), divided by the median c of the Gamma(n, n)
/// distribution (shape n, rate n, mean 1) that an average of n exponential ordinates follows,
/// so the background estimates the local mean and ignores the peaks themselves
/// (exponential/Gamma statistics of periodogram ordinates: Berg-Sorensen & Flyvbjerg 2004,
/// sec. IV). A bin is flagged when P_k > t B_k, and adjacent flagged bins form one peak.
///
/// The threshold t accounts for the scatter of the median itself, which the plain Gamma
/// quantile ignores (that made about three times the designed rate of false peaks with
/// 31-bin windows): under the null hypothesis the window holds the bin under test and m - 1
/// other independent ordinates, and when the bin under test exceeds the median, the median is
/// the j-th order statistic of the others (j = m/2 + 1, the upper median), whose distribution
/// is exact (`exceedance_probability`). t solves P(P_k > t B_k) = `false_alarms` / n_bins
/// for each window length, so the expected number of falsely flagged bins of a thermal
/// spectrum is at most `false_alarms` and, by the union bound, so is the probability that a
/// thermal spectrum shows any peak. Neighbouring bins share windows and the sparse grid of
/// medians is interpolated, both of which make the actual rate a little lower (see
/// `running_background`).
///
/// The thresholds depend only on the number of bins and segments and on `false_alarms`; they are
/// solved once per such key and process (see `STORED_THRESHOLDS`).
pub fn find_narrow_peaks(periodogram: &Periodogram, false_alarms: f64) -> Vec<NarrowPeak> {
    narrow_peaks(periodogram, false_alarms, ThresholdSource::Shared)
}

/// Where `narrow_peaks` takes its thresholds from.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum ThresholdSource {
    /// From the process-wide store when an earlier call solved them, else solved and stored.
    Shared,
    /// Solved afresh and not stored (the reference the tests compare the store with).
    #[cfg(test)]
    Fresh,
}

pub(super) fn narrow_peaks(
    periodogram: &Periodogram,
    false_alarms: f64,
    source: ThresholdSource,
) -> Vec<NarrowPeak> {
    let psd = &periodogram.psd;
    let n_bins = psd.len();
    if n_bins < 64 {
        return Vec::new();
    }
    let n = periodogram.n_windows as f64;
    let Ok(gamma) = Gamma::new(n, n) else {
        return Vec::new();
    };
    let median_factor = gamma.inverse_cdf(0.5);
    let tail = (false_alarms / n_bins as f64).clamp(1e-300, 0.5);
    let background = running_background(psd, median_factor);
    let key = (n_bins, periodogram.n_windows, false_alarms.to_bits());
    let stored = match source {
        ThresholdSource::Shared => stored_thresholds(key),
        #[cfg(test)]
        ThresholdSource::Fresh => None,
    };
    let mut thresholds = RatioThresholds::new(n, median_factor, tail);
    if let Some(solved) = &stored {
        thresholds.solved.extend_from_slice(solved);
    }
    // Window lengths change only where the median grid's segments meet, so the threshold of the
    // previous bin is reused until its length changes.
    let mut previous: Option<(usize, f64)> = None;
    let limit: Vec<f64> = background
        .level
        .iter()
        .zip(&background.window_len)
        .map(|(&level, &len)| {
            let t = match previous {
                Some((l, t)) if l == len => t,
                _ => thresholds.ratio_threshold(len),
            };
            previous = Some((len, t));
            t * level
        })
        .collect();
    if source == ThresholdSource::Shared && stored.is_none() {
        store_thresholds(key, thresholds.solved);
    }
    let background = background.level;
    let df = periodogram.resolution_hz();
    let mut peaks = Vec::new();
    let mut k = 1;
    while k + 1 < n_bins {
        if psd[k] <= limit[k] {
            k += 1;
            continue;
        }
        let first = k;
        let mut last = k;
        while last + 2 < n_bins && psd[last + 1] > limit[last + 1] {
            last += 1;
        }
        let mut best = first;
        let mut excess = 0.0;
        for j in first..=last {
            if psd[j] / background[j] > psd[best] / background[best] {
                best = j;
            }
            excess += (psd[j] - background[j]).max(0.0) * df;
        }
        let frequency_hz = best as f64 * df;
        peaks.push(NarrowPeak {
            frequency_hz,
            first_bin: first,
            last_bin: last,
            peak_ratio: psd[best] / background[best],
            excess_power: excess,
            mains: mains_harmonic(frequency_hz, df),
        });
        k = last + 1;
    }
    peaks
}

/// The thresholds a fresh solve gives for this periodogram, in the order solved (for tests of
/// the store).
#[cfg(test)]
pub(super) fn solved_thresholds(periodogram: &Periodogram, false_alarms: f64) -> Vec<(usize, f64)> {
    let n_bins = periodogram.psd.len();
    let n = periodogram.n_windows as f64;
    let median_factor = Gamma::new(n, n).map_or(f64::NAN, |g| g.inverse_cdf(0.5));
    let tail = (false_alarms / n_bins as f64).clamp(1e-300, 0.5);
    let background = running_background(&periodogram.psd, median_factor);
    let mut thresholds = RatioThresholds::new(n, median_factor, tail);
    for &len in &background.window_len {
        thresholds.ratio_threshold(len);
    }
    thresholds.solved
}

/// The mains frequency and harmonic number that `f_hz` matches within max(0.5 Hz, 1.5 bins),
/// checking harmonics up to the 40th of 50 and 60 Hz (mains frequencies by IEC 60038).
fn mains_harmonic(f_hz: f64, df: f64) -> Option<(f64, u32)> {
    let tol = (1.5 * df).max(0.5);
    [50.0, 60.0].into_iter().find_map(|mains: f64| {
        let h = (f_hz / mains).round();
        ((1.0..=40.0).contains(&h) && h.mul_add(-mains, f_hz).abs() <= tol)
            .then_some((mains, h as u32))
    })
}

/// The smooth background of a periodogram: a running median divided by the median factor, and
/// for every bin the smallest window length among the medians it is interpolated from.
struct Background {
    /// Estimated local mean of the ordinates, same unit as the PSD.
    level: Vec<f64>,
    /// Number of ordinates (the bin itself included) of the smallest window behind `level`.
    window_len: Vec<usize>,
}

/// Running median over growing windows, scaled to estimate the local mean.
///
/// The median is taken on a sparse grid of centres (window half-width max(15, c / 20) bins,
/// centres a quarter of a window apart) and interpolated geometrically between them, which is
/// accurate for a smooth background and keeps the cost near O(n log w) (common practice).
/// Every bin lies inside the windows of both centres it is interpolated from, as the threshold
/// of `find_narrow_peaks` assumes. The interpolated log-background is a convex combination of
/// two log-medians, each distributed like one window's median; because the exceedance
/// probability is convex in the log-background over the range that matters, the combination
/// flags no more often than the smaller of the two windows alone (Jensen's inequality), so
/// using that window's threshold is safe.
fn running_background(psd: &[f64], median_factor: f64) -> Background {
    let n = psd.len();
    let mut centres = Vec::new();
    let mut values = Vec::new();
    let mut lens = Vec::new();
    let mut c = 1usize;
    let mut buf = Vec::new();
    while c < n {
        let half = (c / 20).max(15);
        let lo = c.saturating_sub(half).max(1);
        let hi = (c + half + 1).min(n);
        buf.clear();
        buf.extend_from_slice(&psd[lo..hi]);
        let mid = buf.len() / 2;
        let (_, m, _) = buf.select_nth_unstable_by(mid, f64::total_cmp);
        centres.push(c);
        values.push(*m / median_factor);
        lens.push(hi - lo);
        c += (half / 2).max(1);
    }
    let mut level = Vec::with_capacity(n);
    let mut window_len = Vec::with_capacity(n);
    // Bin 0 (DC) lies before the first centre and takes its value.
    level.push(values[0]);
    window_len.push(lens[0]);
    for seg in 0..centres.len() {
        let end = centres.get(seg + 1).copied().unwrap_or(n);
        let len = lens[seg].min(lens.get(seg + 1).copied().unwrap_or(usize::MAX));
        // Geometric interpolation by repeated multiplication with the per-bin ratio, which
        // avoids one powf per bin; the rounding error stays near 1e-13 over a segment.
        let step = match values.get(seg + 1) {
            Some(&next) => (next / values[seg]).powf(1.0 / (end - centres[seg]) as f64),
            None => 1.0,
        };
        let mut value = values[seg];
        for _ in centres[seg]..end {
            level.push(value);
            window_len.push(len);
            value *= step;
        }
    }
    Background { level, window_len }
}

/// Key of the shared threshold store: number of bins, number of averaged segments, and the bits
/// of the false-alarm level. The sequence of window lengths `running_background` uses depends on
/// the number of bins alone, and the per-bin tail and the Gamma shape on these three, so the
/// thresholds solved for a key, in the order solved, are a function of the key.
pub(super) type ThresholdKey = (usize, usize, u64);

/// Most threshold sets kept; each holds a few dozen (length, threshold) pairs.
pub(super) const MAX_STORED_THRESHOLD_SETS: usize = 32;

/// Threshold sets solved by earlier calls, most recently used last. Solving them (root finding
/// over the order-statistic distribution, by quadrature for averaged spectra) costs about as
/// much as the rest of the peak search, and a service sees the same few record lengths over and
/// over (common practice: memoisation). Each call stores the whole set it solved, in the order
/// it solved them, so a later call with the same key uses exactly the thresholds a fresh solve
/// would give, bit for bit (each solve starts from the previous solution, so the set is stored
/// whole rather than merged). The lock is held only to look up or store, never while solving.
static STORED_THRESHOLDS: Mutex<StoredSets> = Mutex::new(Vec::new());

/// One solved set: (rounded window length, ratio threshold) pairs in the order solved.
type ThresholdSet = Arc<[(usize, f64)]>;
type StoredSets = Vec<(ThresholdKey, ThresholdSet)>;

pub(super) fn lock_thresholds() -> MutexGuard<'static, StoredSets> {
    // Every change is a single push, removal or move, so a poisoned lock is taken over.
    STORED_THRESHOLDS
        .lock()
        .unwrap_or_else(PoisonError::into_inner)
}

/// The thresholds an earlier call solved for `key`, marked as just used.
pub(super) fn stored_thresholds(key: ThresholdKey) -> Option<ThresholdSet> {
    let mut sets = lock_thresholds();
    let idx = sets.iter().position(|(k, _)| *k == key)?;
    let entry = sets.remove(idx);
    let solved = Arc::clone(&entry.1);
    sets.push(entry);
    Some(solved)
}

/// Stores the thresholds solved for `key` (unless another call stored them meanwhile), dropping
/// the least recently used set beyond `MAX_STORED_THRESHOLD_SETS`.
pub(super) fn store_thresholds(key: ThresholdKey, solved: Vec<(usize, f64)>) {
    let mut sets = lock_thresholds();
    if sets.iter().any(|(k, _)| *k == key) {
        return;
    }
    sets.push((key, solved.into()));
    if sets.len() > MAX_STORED_THRESHOLD_SETS {
        sets.remove(0);
    }
}

/// Ratio thresholds t(m) for window lengths m, solved on demand and kept for the rest of one
/// call of `find_narrow_peaks` (and, through `store_thresholds`, for later calls).
///
/// Lengths above 40 are rounded down to a geometric grid (steps of 1/8), so at most a few
/// dozen thresholds are solved for; a shorter window has a higher threshold, so rounding down
/// is the safe side.
struct RatioThresholds {
    /// Shape n of the Gamma(n, n) ordinates (the number of averaged segments).
    shape: f64,
    /// Median c of Gamma(n, n).
    median_factor: f64,
    /// Per-bin false-alarm probability.
    tail: f64,
    /// Solved (rounded length, threshold) pairs, in the order solved.
    solved: Vec<(usize, f64)>,
    /// The last starting guess for ln s, the previous solution.
    ln_s_guess: f64,
}

impl RatioThresholds {
    fn new(shape: f64, median_factor: f64, tail: f64) -> Self {
        let plain = Gamma::new(shape, shape).map_or(10.0, |g| g.inverse_cdf(1.0 - tail));
        Self {
            shape,
            median_factor,
            tail,
            solved: Vec::new(),
            ln_s_guess: (plain / median_factor).ln(),
        }
    }

    /// Threshold t on P_k / B_k for a background from a window of `window_len` ordinates.
    fn ratio_threshold(&mut self, window_len: usize) -> f64 {
        let len = rounded_window_len(window_len);
        if let Some(&(_, t)) = self.solved.iter().rev().find(|(l, _)| *l == len) {
            return t;
        }
        let ln_s = solve_ln_threshold(
            ln_exceedance(self.shape, self.median_factor, len, self.ln_s_guess),
            self.tail.ln(),
            self.ln_s_guess,
        );
        self.ln_s_guess = ln_s;
        let t = self.median_factor * ln_s.exp();
        self.solved.push((len, t));
        t
    }
}

/// Rounds a window length down to 2..=40 exactly or to the grid 40, 45, 50, 56, ... (each step
/// an eighth of the previous value, rounded down).
fn rounded_window_len(window_len: usize) -> usize {
    if window_len <= 40 {
        return window_len.max(2);
    }
    let mut rep = 40;
    loop {
        let next = rep + rep / 8;
        if next > window_len {
            return rep;
        }
        rep = next;
    }
}

/// Solves ln p(ln s) = `ln_tail` for ln s by Newton's method on ln s, safeguarded by bisection
/// inside a bracket. `ln_p` returns ln p and its derivative d ln p / d ln s (negative: a higher
/// threshold flags less often).
fn solve_ln_threshold(mut ln_p: impl FnMut(f64) -> (f64, f64), ln_tail: f64, guess: f64) -> f64 {
    let mut x = guess;
    let (mut lo, mut hi) = (f64::NEG_INFINITY, f64::INFINITY);
    for _ in 0..200 {
        let (value, slope) = ln_p(x);
        let g = value - ln_tail;
        if g > 0.0 {
            lo = x;
        } else {
            hi = x;
        }
        let newton = x - g / slope;
        let next = if newton.is_finite() && newton > lo && newton < hi {
            newton
        } else if lo.is_finite() && hi.is_finite() {
            0.5 * (lo + hi)
        } else if g > 0.0 {
            x + 1.0
        } else {
            x - 1.0
        };
        if (next - x).abs() < 1e-10 {
            return next;
        }
        x = next;
    }
    x
}

/// ln P(X > s M) and d/d(ln s) of it as a function of ln s, where X is one Gamma(n, n)
/// ordinate and M the upper median of a window of `window_len` ordinates that contains X (see
/// `MedianQuadrature`). The median factor is the median c of Gamma(n, n); the ratio threshold
/// is t = c s. For n > 1 the quadrature nodes are placed for `ln_s_guess`.
fn ln_exceedance(
    shape: f64,
    median_factor: f64,
    window_len: usize,
    ln_s_guess: f64,
) -> impl Fn(f64) -> (f64, f64) {
    let others = window_len - 1;
    let rank = window_len / 2 + 1;
    let quadrature = (shape != 1.0)
        .then(|| MedianQuadrature::new(shape, median_factor, others, rank, ln_s_guess));
    move |ln_s| match &quadrature {
        Some(q) => q.ln_exceedance(ln_s),
        None => ln_exceedance_exponential(others, rank, ln_s),
    }
}

/// Exact exceedance probability for exponential ordinates (n = 1).
///
/// With X ~ Exp(1) independent of Y_(j), the j-th smallest of `others` = m' iid Exp(1) draws,
/// P(X > s Y_(j)) = E[exp(-s Y_(j))]. Since U = F(Y_(j)) ~ Beta(j, m' - j + 1) (David &
/// Nagaraja, Order Statistics, 3rd ed. 2003, sec. 2.1) and exp(-s Y) = (1 - U)^s, this is
/// B(j, m' - j + 1 + s) / B(j, m' - j + 1), the same as the Renyi (1953) product
/// prod_{i=1}^{j} (m' - i + 1) / (m' - i + 1 + s). Returns ln p and d ln p / d ln s.
pub(super) fn ln_exceedance_exponential(others: usize, rank: usize, ln_s: f64) -> (f64, f64) {
    let s = ln_s.exp();
    let a = (others - rank + 1) as f64;
    let b = (others + 1) as f64;
    let ln_p = ln_gamma(a + s) - ln_gamma(b + s) + ln_gamma(b) - ln_gamma(a);
    let slope = s * (digamma(a + s) - digamma(b + s));
    (ln_p, slope)
}

/// ln P(X > s Y_(j)) and its derivative in ln s for Gamma(n, n) ordinates, by quadrature
/// (see `MedianQuadrature`), with the nodes placed for this s.
#[cfg(test)]
pub(super) fn ln_exceedance_quadrature(
    shape: f64,
    median_factor: f64,
    others: usize,
    rank: usize,
    ln_s: f64,
) -> (f64, f64) {
    MedianQuadrature::new(shape, median_factor, others, rank, ln_s).ln_exceedance(ln_s)
}

/// Quadrature nodes for p(s) = P(X > s Y_(j)) with Gamma(n, n) ordinates.
///
/// X has CDF F and density f (shape n, rate n); Y_(j), the j-th smallest of `others` = m'
/// independent copies, has density f(y) F(y)^(j-1) (1 - F(y))^(m'-j) / B(j, m' - j + 1)
/// (David & Nagaraja, Order Statistics, 3rd ed. 2003, sec. 2.1). So
/// p(s) = int f_Y(y) (1 - F(s y)) dy and dp/ds = -int f_Y(y) y f(s y) dy. The integrals run
/// over w = ln y with the trapezoidal rule, which converges geometrically for a smooth
/// integrand that decays at both ends, at a step of a third of the standard deviation of
/// ln Y_(j) (asymptotically sqrt(1/(4 m')) / (f(c) c), David & Nagaraja sec. 10.3). The nodes
/// run from the median outward until the integrand for the s they were placed for falls below
/// e^-60 of its largest value, which leaves a wide margin for the nearby s that Newton's
/// method visits.
struct MedianQuadrature {
    shape: f64,
    /// ln y at the nodes.
    ln_y: Vec<f64>,
    /// ln(f_Y(y) y h) at the nodes (the order-statistic density, the Jacobian and the step).
    base: Vec<f64>,
}

impl MedianQuadrature {
    fn new(shape: f64, median_factor: f64, others: usize, rank: usize, ln_s: f64) -> Self {
        let n = shape;
        let ln_beta = ln_gamma(rank as f64) + ln_gamma((others - rank + 1) as f64)
            - ln_gamma((others + 1) as f64);
        let j1 = (rank - 1) as f64;
        let k1 = (others - rank) as f64;
        let centre = median_factor.ln();
        let density_at_median = gamma_ln_pdf(n, median_factor).exp();
        let sd = (0.25 / others as f64).sqrt() / (density_at_median * median_factor);
        let h = sd / 3.0;
        let mut ln_y = Vec::new();
        let mut base = Vec::new();
        let mut integrand = Vec::new();
        let mut best = f64::NEG_INFINITY;
        for direction in [-1.0, 1.0] {
            let first = if direction < 0.0 { 0 } else { 1 };
            let start = integrand.len();
            for i in first..100_000 {
                let w = (direction * i as f64).mul_add(h, centre);
                let y = w.exp();
                let (ln_cdf, ln_sf) = ln_gamma_cdf_sf(n, n * y);
                let b = j1.mul_add(ln_cdf, k1 * ln_sf) + gamma_ln_pdf(n, y) + w - ln_beta + h.ln();
                let v = b + ln_gamma_cdf_sf(n, n * y * ln_s.exp()).1;
                best = best.max(v);
                ln_y.push(w);
                base.push(b);
                integrand.push(v);
                // Past the peak (the integrand is unimodal in w) and far below it.
                let falling = integrand.len() > start + 4 && v < integrand[start];
                if falling && (v < best - 60.0 || v == f64::NEG_INFINITY) {
                    break;
                }
            }
        }
        Self { shape, ln_y, base }
    }

    /// ln p(s) and d ln p / d ln s.
    fn ln_exceedance(&self, ln_s: f64) -> (f64, f64) {
        let n = self.shape;
        let mut p_terms = Vec::with_capacity(self.base.len());
        let mut d_terms = Vec::with_capacity(self.base.len());
        for (&w, &b) in self.ln_y.iter().zip(&self.base) {
            let sy = (w + ln_s).exp();
            p_terms.push(b + ln_gamma_cdf_sf(n, n * sy).1);
            d_terms.push(b + sy.ln() + gamma_ln_pdf(n, sy));
        }
        let ln_p = log_sum_exp(&p_terms);
        (ln_p, -(log_sum_exp(&d_terms) - ln_p).exp())
    }
}

/// ln f(x) of the Gamma(n, n) density n^n x^(n-1) e^(-n x) / Gamma(n), x > 0.
fn gamma_ln_pdf(n: f64, x: f64) -> f64 {
    (n - 1.0).mul_add(x.ln(), n.mul_add(n.ln() - x, -ln_gamma(n)))
}

/// ln F(x) and ln(1 - F(x)) of the Gamma(a, 1) distribution, each from the regularised
/// incomplete gamma function that is accurate there (the smaller of the two).
fn ln_gamma_cdf_sf(a: f64, x: f64) -> (f64, f64) {
    if x <= 0.0 {
        return (f64::NEG_INFINITY, 0.0);
    }
    if x < a {
        let lower = gamma_lr(a, x);
        (lower.ln(), (-lower).ln_1p())
    } else {
        let upper = ln_gamma_sf_upper(a, x);
        ((-upper.exp()).ln_1p(), upper)
    }
}

/// ln(1 - F(x)) of Gamma(a, 1) for x >= a. For an integer shape (the number of averaged
/// segments) it is the finite Poisson sum e^-x sum_{k<a} x^k / k!, summed backward from its
/// largest term k = a - 1 so that no term is lost; otherwise the regularised incomplete gamma
/// function.
fn ln_gamma_sf_upper(a: f64, x: f64) -> f64 {
    if a.fract() != 0.0 || a > 1000.0 {
        return gamma_ur(a, x).ln();
    }
    let mut term = 1.0;
    let mut sum = 1.0;
    let mut k = a - 1.0;
    while k >= 1.0 {
        term *= k / x;
        sum += term;
        k -= 1.0;
    }
    (a - 1.0).mul_add(x.ln(), -x) - ln_gamma(a) + sum.ln()
}

/// ln sum_i exp(v_i), safe against overflow and underflow.
fn log_sum_exp(values: &[f64]) -> f64 {
    let max = values.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if max == f64::NEG_INFINITY {
        return max;
    }
    max + values.iter().map(|v| (v - max).exp()).sum::<f64>().ln()
}
