//! Power spectrum method: one-sided periodogram, blocking, the exact spectrum of a sampled
//! Ornstein-Uhlenbeck process (with optional detector-filter and hydrodynamic terms), and its
//! maximum-likelihood fit.
//!
//! Convention throughout: the one-sided power spectral density S(f) in signal-units^2/Hz, whose
//! integral over 0..f_Nyquist is the variance. For the ideal, continuously observed bead
//! S(f) = D / (pi^2 (fc^2 + f^2)) (Berg-Sorensen & Flyvbjerg, Rev. Sci. Instrum. 75, 594 (2004),
//! write the two-sided form D / (2 pi^2 (fc^2 + f^2)); ours is twice that). D is the diffusion
//! coefficient in signal-units^2/s.
//!
//! The FFT is unnormalised, X_k = sum_j x_j exp(-2 pi i j k / L), and a segment of L samples at
//! sampling interval dt gives S_k = 2 dt |X_k|^2 / L for 0 < k < L/2 (DC and Nyquist bins are
//! not doubled). Frequencies are in ascending order, f_k = k / (L dt).

#[cfg(test)]
mod blur_tests;
mod fit;
mod floor;
#[cfg(test)]
mod floor_tests;
mod lines;
mod model;
mod peaks;
#[cfg(test)]
mod tests;

pub(crate) use fit::fit_spectrum_from_theta;
pub use fit::{
    FitRange, FlickerTerm, MIN_PARAMETER_RCOND, PlainLorentzianFit, SpectrumFit, SpectrumFitError,
    SpectrumFitOptions, fit_spectrum, likelihood_gain, likelihood_gain_from, plain_lorentzian_wls,
    score_statistic,
};
pub use floor::{
    NOISE_FLOOR_CRITICAL_LR, NOISE_FLOOR_FALSE_INCLUSION, NoiseFloorLevel, NoiseFloorMode,
    NoiseFloorTest, boundary_mixture_p_value, fit_spectrum_with_floor,
};
pub use lines::{SpectralLine, fit_line, line_at, subtract_lines};
pub use model::{
    DetectorFilter, FilterSetting, HydroTerms, SpectrumModel, aliased_lorentzian_one_sided,
};
pub(crate) use model::{ImageTable, Params};
pub use peaks::{NarrowPeak, find_narrow_peaks};

/// An averaged one-sided periodogram.
#[derive(Clone, Debug)]
pub struct Periodogram {
    /// Sampling rate of the recording, Hz.
    pub sample_rate_hz: f64,
    /// Samples per segment (L); the frequency resolution is sample_rate_hz / L.
    pub segment_len: usize,
    /// Number of non-overlapping segments averaged (each ordinate is a mean of this many
    /// independent exponential variables).
    pub n_windows: usize,
    /// One-sided PSD for bins k = 0..=L/2, signal-units^2/Hz.
    pub psd: Vec<f64>,
    /// Bins from this one up hold recoloured first differences (`switched_periodogram`), the
    /// ones below plain segments; the finite-segment term of the expectation differs. Equal to
    /// `psd.len()` for a plain periodogram.
    pub first_differenced_bin: usize,
}

impl Periodogram {
    /// Frequency resolution in Hz (1 / segment duration).
    pub fn resolution_hz(&self) -> f64 {
        self.sample_rate_hz / self.segment_len as f64
    }

    /// Frequency of bin `k` in Hz.
    pub fn frequency_hz(&self, k: usize) -> f64 {
        k as f64 * self.resolution_hz()
    }
}

/// The largest length not above `n` whose prime factors are 2, 3 and 5, so that the FFT runs on
/// its fast mixed-radix path (common practice). At most a few per cent of samples are dropped.
pub fn fast_length_at_most(n: usize) -> usize {
    let mut best = 1usize;
    let mut p2 = 1usize;
    while p2 <= n {
        let mut p3 = p2;
        while p3 <= n {
            let mut p5 = p3;
            while p5 <= n {
                best = best.max(p5);
                p5 *= 5;
            }
            p3 *= 3;
        }
        p2 *= 2;
    }
    best
}

/// One-sided periodogram averaged over `n_windows` non-overlapping, untapered segments.
///
/// The segment length is the largest fast FFT length not above `samples.len() / n_windows`;
/// the mean of the whole record is removed first (it only affects the DC bin, but keeps the
/// arithmetic accurate for detector signals with a large offset). No taper is applied: a
/// taper would correlate neighbouring bins. Returns `None` when a segment would be shorter
/// than 16 samples. The calibration fits `switched_periodogram` instead, whose leakage is
/// far smaller for the steep spectra of trapped beads.
pub fn periodogram(samples: &[f64], sample_rate_hz: f64, n_windows: usize) -> Option<Periodogram> {
    let n_windows = n_windows.max(1);
    let segment_len = fast_length_at_most(samples.len() / n_windows);
    if segment_len < 16 {
        return None;
    }
    let mean = samples.iter().sum::<f64>() / samples.len() as f64;
    let psd = averaged_power(sample_rate_hz, segment_len, n_windows, |w, input| {
        let segment = &samples[w * segment_len..(w + 1) * segment_len];
        for (dst, &src) in input.iter_mut().zip(segment) {
            *dst = src - mean;
        }
    })?;
    Some(Periodogram {
        sample_rate_hz,
        segment_len,
        n_windows,
        first_differenced_bin: psd.len(),
        psd,
    })
}

/// One-sided periodogram averaged over `n_windows` non-overlapping, untapered segments: of the
/// samples below `switch_hz`, and from there up of the record's first differences,
/// recoloured (each ordinate divided by the differencing filter's exact gain 4 sin^2(pi k / L),
/// so its expectation is the samples' own spectrum).
///
/// Why: an untapered segment leaks through the jump between its two ends, coherently across
/// bins. For the samples of a trapped bead that leaked part is a fixed fraction res / (2 pi fc)
/// of the Lorentzian above fc, which matters where a photodiode filter makes the true spectrum
/// small: there the fit's standard errors came out several times too small. For first
/// differences, the classical prewhitening against leakage (D. B. Percival & A. T. Walden,
/// Spectral Analysis for Physical Applications (1993), chapter 6, recalled from memory,
/// unverified), the leaked fraction is about fc res / (2 pi f^2): large at low frequencies,
/// negligible above fc. So each frequency takes the estimate with the smaller leakage, the two
/// being about equal near fc (derived here from the finite-segment terms of
/// `SpectrumModel::leakage_params`, which the fit includes for both kinds of bin). Differencing
/// is a linear filter on the sampled sequence, so its gain is exact; no taper is applied, so a
/// sinusoid on the Fourier grid stays in its bin and the ordinates stay exponential with the
/// model as their mean.
///
/// Segment w holds samples w L ..= w L + L (their L differences, or the first L samples less
/// the record's mean), so the segments tile the record without overlap; L is the largest fast
/// FFT length not above `(samples.len() - 1) / n_windows`. Returns `None` when a segment would
/// be shorter than 16 samples.
pub fn switched_periodogram(
    samples: &[f64],
    sample_rate_hz: f64,
    n_windows: usize,
    switch_hz: f64,
) -> Option<Periodogram> {
    let n_windows = n_windows.max(1);
    let segment_len = fast_length_at_most(samples.len().saturating_sub(1) / n_windows);
    if segment_len < 16 {
        return None;
    }
    let mean = samples.iter().sum::<f64>() / samples.len() as f64;
    let mut psd = averaged_power(sample_rate_hz, segment_len, n_windows, |w, input| {
        let segment = &samples[w * segment_len..(w + 1) * segment_len];
        for (dst, &src) in input.iter_mut().zip(segment) {
            *dst = src - mean;
        }
    })?;
    let differenced = averaged_power(sample_rate_hz, segment_len, n_windows, |w, input| {
        let segment = &samples[w * segment_len..=(w + 1) * segment_len];
        for (dst, pair) in input.iter_mut().zip(segment.windows(2)) {
            *dst = pair[1] - pair[0];
        }
    })?;
    let resolution_hz = sample_rate_hz / segment_len as f64;
    let first = ((switch_hz / resolution_hz).ceil().max(1.0) as usize).min(psd.len());
    for (k, (p, dp)) in psd.iter_mut().zip(&differenced).enumerate().skip(first) {
        let half_angle = (std::f64::consts::PI * k as f64 / segment_len as f64).sin();
        *p = dp / (4.0 * half_angle * half_angle);
    }
    Some(Periodogram {
        sample_rate_hz,
        segment_len,
        n_windows,
        psd,
        first_differenced_bin: first,
    })
}

/// The one-sided averaged power 2 dt |X_k|^2 / (L n) of the segments `fill` writes (DC and
/// Nyquist not doubled), k = 0..=L/2.
fn averaged_power(
    sample_rate_hz: f64,
    segment_len: usize,
    n_windows: usize,
    mut fill: impl FnMut(usize, &mut [f64]),
) -> Option<Vec<f64>> {
    let fft = crate::fft::forward(segment_len);
    let mut input = fft.make_input_vec();
    let mut output = fft.make_output_vec();
    let mut scratch = fft.make_scratch_vec();
    let n_bins = segment_len / 2 + 1;
    let mut psd = vec![0.0; n_bins];
    for w in 0..n_windows {
        fill(w, &mut input);
        // The lengths come from the plan itself, so the transform cannot fail.
        if fft
            .process_with_scratch(&mut input, &mut output, &mut scratch)
            .is_err()
        {
            return None;
        }
        for (acc, x) in psd.iter_mut().zip(&output) {
            *acc += x.norm_sqr();
        }
    }
    let dt = 1.0 / sample_rate_hz;
    let scale = 2.0 * dt / (segment_len as f64 * n_windows as f64);
    for (k, p) in psd.iter_mut().enumerate() {
        let edge = k == 0 || (segment_len % 2 == 0 && k == n_bins - 1);
        *p *= if edge { scale / 2.0 } else { scale };
    }
    Some(psd)
}

/// A block of neighbouring periodogram bins, averaged (Berg-Sorensen & Flyvbjerg 2004, sec. IV:
/// "blocking"). The block mean of n_averaged independent exponential ordinates is Gamma
/// distributed with mean S and standard deviation S / sqrt(n_averaged).
#[derive(Clone, Debug, PartialEq)]
pub struct Block {
    /// Mean frequency of the bins used, Hz.
    pub frequency_hz: f64,
    /// Lower and upper edge of the frequency interval the block covers, Hz (bin centre -/+ half
    /// a resolution step).
    pub lower_hz: f64,
    pub upper_hz: f64,
    /// Mean one-sided PSD of the bins used, signal-units^2/Hz.
    pub psd: f64,
    /// Number of periodogram bins used (excluded bins are skipped).
    pub n_bins: usize,
    /// Number of independent exponential ordinates averaged: n_bins * n_windows.
    pub n_averaged: usize,
}

/// Groups bins `k` with `f_min <= f_k <= f_max` into blocks whose widths grow geometrically,
/// so that each holds at least `min_bins` bins and there are about `target_blocks` blocks.
/// Bins listed in `excluded` (sorted or not) are left out of the averages.
///
/// Geometric blocks keep the relative resolution constant on a log-frequency axis, which suits a
/// Lorentzian; the minimum count keeps each block mean close to Gaussian for the chi-square
/// test (common practice).
pub fn block_periodogram(
    periodogram: &Periodogram,
    f_min_hz: f64,
    f_max_hz: f64,
    excluded: &[usize],
    min_bins: usize,
    target_blocks: usize,
) -> Vec<Block> {
    let df = periodogram.resolution_hz();
    let last_bin = periodogram.psd.len().saturating_sub(2); // never the Nyquist bin
    let k_lo = ((f_min_hz / df).ceil() as usize).max(1);
    let k_hi = ((f_max_hz / df).floor() as usize).min(last_bin);
    if k_hi < k_lo {
        return Vec::new();
    }
    let mut skip = excluded.to_vec();
    skip.sort_unstable();
    let min_bins = min_bins.max(1);
    let ratio = ((k_hi as f64 + 1.0) / k_lo as f64).powf(1.0 / target_blocks.max(1) as f64);
    let mut blocks = Vec::new();
    let mut start = k_lo;
    while start <= k_hi {
        let geometric_end = ((start as f64) * ratio).ceil() as usize;
        let mut end = geometric_end.max(start + min_bins).min(k_hi + 1);
        // Fold a short remainder into the last block rather than leave a thin one.
        if k_hi + 1 - end < min_bins {
            end = k_hi + 1;
        }
        let mut sum_f = 0.0;
        let mut sum_p = 0.0;
        let mut n = 0usize;
        for k in start..end {
            if skip.binary_search(&k).is_ok() {
                continue;
            }
            sum_f += k as f64 * df;
            sum_p += periodogram.psd[k];
            n += 1;
        }
        if n > 0 {
            blocks.push(Block {
                frequency_hz: sum_f / n as f64,
                lower_hz: (start as f64 - 0.5) * df,
                upper_hz: (end as f64 - 0.5) * df,
                psd: sum_p / n as f64,
                n_bins: n,
                n_averaged: n * periodogram.n_windows,
            });
        }
        start = end;
    }
    blocks
}
