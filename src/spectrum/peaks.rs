//! Detection of narrow spectral peaks (mains pickup, mechanical resonances) that a thermal
//! spectrum cannot contain.

use super::Periodogram;
use statrs::distribution::{ContinuousCDF, Gamma};

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
/// The background is a running median over windows whose width grows with frequency (at least
/// 31 bins, about 10 % of the frequency), divided by the median of the Gamma(n, 1/n)
/// distribution that an average of n exponential ordinates follows, so the background estimates
/// the mean and ignores the peaks themselves. A bin is flagged when its ratio to the background
/// exceeds the quantile at which fewer than `false_alarms` bins of the whole spectrum would be
/// flagged by chance (exponential/Gamma statistics of periodogram ordinates: Berg-Sorensen &
/// Flyvbjerg 2004, sec. IV). Adjacent flagged bins form one peak.
pub fn find_narrow_peaks(periodogram: &Periodogram, false_alarms: f64) -> Vec<NarrowPeak> {
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
    let threshold = gamma.inverse_cdf(1.0 - tail);
    let background = running_background(psd, median_factor);
    let df = periodogram.resolution_hz();
    let mut peaks = Vec::new();
    let mut k = 1;
    while k + 1 < n_bins {
        if psd[k] <= threshold * background[k] {
            k += 1;
            continue;
        }
        let first = k;
        let mut last = k;
        while last + 2 < n_bins && psd[last + 1] > threshold * background[last + 1] {
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

/// Running median over growing windows, scaled to estimate the local mean.
fn running_background(psd: &[f64], median_factor: f64) -> Vec<f64> {
    let n = psd.len();
    let mut out = vec![0.0; n];
    // Evaluate the median on a sparse grid of centres and interpolate between them, which is
    // accurate for a smooth background and keeps the cost near O(n log w).
    let mut centres = Vec::new();
    let mut values = Vec::new();
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
        c += (half / 2).max(1);
    }
    let mut seg = 0;
    for (k, slot) in out.iter_mut().enumerate() {
        while seg + 1 < centres.len() && centres[seg + 1] <= k {
            seg += 1;
        }
        *slot = if seg + 1 < centres.len() && k >= centres[seg] {
            let (c0, c1) = (centres[seg] as f64, centres[seg + 1] as f64);
            let t = (k as f64 - c0) / (c1 - c0);
            values[seg] * (values[seg + 1] / values[seg]).powf(t)
        } else {
            values[seg]
        };
    }
    out
}
