//! Exact synthesis of a stationary Gaussian record with any given one-sided power spectrum.
//!
//! A stationary Gaussian process sampled at interval dt is fixed by its (aliased) one-sided
//! spectrum S_a(f) on [0, fs/2]. Draw the Fourier coefficients of a period of M >= 4 N samples
//! as independent complex Gaussians with E|X_k|^2 = M S_a(f_k) / (2 dt) at f_k = k fs / M (real
//! at k = 0 and k = M/2, with that variance there), transform back and keep the first N samples.
//! The result is exactly Gaussian with the circular autocovariance of period M, which equals the
//! stationary autocovariance of S_a up to the wrap-around of lags near M; with M >= 4 N the
//! first N samples see lags below M/4 only (random-phase synthesis; the construction is the one
//! of shared/PHYSICS.md section 12, and is the discrete form of Rice's representation of
//! Gaussian noise, S. O. Rice, Bell Syst. Tech. J. 23, 282 (1944), recalled from memory,
//! unverified).
//!
//! This is what lets the tests check every method on the spectra real instruments produce
//! (filtered, hydrodynamic, blurred, with a noise floor or drift) with a known truth, not only on
//! the plain Ornstein-Uhlenbeck process.

use rand_distr::{Distribution, StandardNormal};
use realfft::num_complex::Complex;

/// Smallest ratio of the synthesis period to the record length.
const PERIOD_FACTOR: usize = 4;

/// The spectrum of one synthesis, sampled once on the Fourier grid of its period, so that many
/// records of the same spectrum cost one inverse FFT each (the statistical tests draw thousands).
///
/// It holds sqrt(E|X_k|^2) = sqrt(M S_a(f_k) / (2 dt)) for k = 0..=M/2 (see the module docs).
#[derive(Clone, Debug)]
pub struct SynthesisGrid {
    sample_rate_hz: f64,
    n_samples: usize,
    period: usize,
    /// Root of the expected power of each Fourier coefficient, signal-unit (unnormalised FFT).
    coefficient_rms: Vec<f64>,
}

impl SynthesisGrid {
    /// Samples `one_sided_psd(f_hz)` (signal-unit^2 / Hz, already aliased onto [0, fs/2]) at
    /// f_k = k fs / M, k = 0..=M/2, for records of `n_samples` samples at `sample_rate_hz`; M is
    /// the smallest power of two not below 4 `n_samples` (at least 4). Negative or NaN values of
    /// the spectrum count as zero.
    pub fn new(
        one_sided_psd: impl Fn(f64) -> f64,
        sample_rate_hz: f64,
        n_samples: usize,
    ) -> SynthesisGrid {
        let period = (PERIOD_FACTOR * n_samples).next_power_of_two().max(4);
        let dt = 1.0 / sample_rate_hz;
        let m = period as f64;
        let coefficient_rms = (0..=period / 2)
            .map(|k| {
                let f = k as f64 * sample_rate_hz / m;
                (m * one_sided_psd(f) / (2.0 * dt)).max(0.0).sqrt()
            })
            .collect();
        SynthesisGrid {
            sample_rate_hz,
            n_samples,
            period,
            coefficient_rms,
        }
    }

    /// Sampling rate of the records, Hz.
    pub fn sample_rate_hz(&self) -> f64 {
        self.sample_rate_hz
    }

    /// Samples per record.
    pub fn n_samples(&self) -> usize {
        self.n_samples
    }

    /// The synthesis period M in samples (a power of two, at least 4 `n_samples`): the records'
    /// autocovariance is the stationary one plus its images at lags shifted by multiples of M.
    pub fn period(&self) -> usize {
        self.period
    }

    /// One record: draws the coefficients (one standard normal for the real ones at k = 0 and
    /// M/2, two for the others, in order of k), transforms back and keeps the first
    /// `n_samples` samples.
    pub fn record<R: rand::Rng + ?Sized>(&self, rng: &mut R) -> Vec<f64> {
        if self.n_samples == 0 {
            return Vec::new();
        }
        let half = self.period / 2;
        let mut spectrum: Vec<Complex<f64>> = self
            .coefficient_rms
            .iter()
            .enumerate()
            .map(|(k, &rms)| {
                if k == 0 || k == half {
                    // Real coefficients: the whole variance in the real part.
                    let z: f64 = StandardNormal.sample(rng);
                    Complex::new(rms * z, 0.0)
                } else {
                    let sd = rms * std::f64::consts::FRAC_1_SQRT_2;
                    let re: f64 = StandardNormal.sample(rng);
                    let im: f64 = StandardNormal.sample(rng);
                    Complex::new(sd * re, sd * im)
                }
            })
            .collect();
        let plan = crate::fft::inverse(self.period);
        let mut out = vec![0.0; self.period];
        // The coefficients at DC and Nyquist are real by construction, so the transform cannot
        // fail.
        if plan.process(&mut spectrum, &mut out).is_err() {
            return vec![0.0; self.n_samples];
        }
        out.truncate(self.n_samples);
        let m = self.period as f64;
        for v in &mut out {
            *v /= m;
        }
        out
    }
}

/// One record of `n_samples` samples of a zero-mean stationary Gaussian process whose one-sided
/// power spectral density (signal-unit^2 / Hz, already aliased onto [0, fs/2]) is
/// `one_sided_psd(f_hz)`, sampled at `sample_rate_hz`.
///
/// The FFT is unnormalised (X_k = sum_j x_j exp(-2 pi i j k / M)), so E|X_k|^2 = M S_a / (2 dt)
/// for 0 < k < M/2 and the inverse transform is divided by M. For many records of one spectrum,
/// build a [`SynthesisGrid`] once and call [`SynthesisGrid::record`].
pub fn gaussian_record<R: rand::Rng + ?Sized>(
    one_sided_psd: impl Fn(f64) -> f64,
    sample_rate_hz: f64,
    n_samples: usize,
    rng: &mut R,
) -> Vec<f64> {
    if n_samples == 0 {
        return Vec::new();
    }
    SynthesisGrid::new(one_sided_psd, sample_rate_hz, n_samples).record(rng)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::simulate::generator;
    use crate::spectrum::aliased_lorentzian_one_sided;
    use std::f64::consts::PI;

    /// The synthesised plain OU record has the exact AR(1) autocovariance sigma^2 c^k
    /// (Berg-Sorensen & Flyvbjerg 2004 aliased Lorentzian as the input spectrum; the
    /// autocovariance of sampled OU is sigma^2 exp(-k dt / tau), exact analytic result).
    /// Ensemble of 400 records of 4096 samples: the sample autocovariance at each lag (with the
    /// known zero mean) has a standard error below 0.5 % of sigma^2 for these parameters, so a
    /// tolerance of 2 % of sigma^2 is over four standard errors.
    #[test]
    fn synthesised_ou_record_has_the_exact_ar1_autocovariance() {
        let fs = 10_000.0;
        let fc = 200.0;
        let variance = 4.0;
        let d = variance * 2.0 * PI * fc;
        let n = 4096;
        let c = (-2.0 * PI * fc / fs).exp();
        let lags = [0usize, 1, 5, 20, 60];
        let mut sums = [0.0; 5];
        let mut rng = generator(11);
        let records = 400;
        for _ in 0..records {
            let x = gaussian_record(
                |f| aliased_lorentzian_one_sided(f, fc, d, fs),
                fs,
                n,
                &mut rng,
            );
            for (s, &lag) in sums.iter_mut().zip(&lags) {
                *s += x.iter().zip(&x[lag..]).map(|(a, b)| a * b).sum::<f64>() / (n - lag) as f64;
            }
        }
        for (s, &lag) in sums.iter().zip(&lags) {
            let measured = s / f64::from(records);
            let exact = variance * c.powi(lag as i32);
            assert!(
                (measured - exact).abs() < 0.02 * variance,
                "lag {lag}: {measured} against {exact}"
            );
        }
    }

    /// White noise of one-sided density S0 has variance S0 fs / 2 (Parseval), exactly.
    #[test]
    fn white_spectrum_gives_white_noise_of_the_parseval_variance() {
        let fs = 1000.0;
        let s0 = 0.02;
        let mut rng = generator(5);
        let x = gaussian_record(|_| s0, fs, 1 << 16, &mut rng);
        let var = x.iter().map(|v| v * v).sum::<f64>() / x.len() as f64;
        let expected = s0 * fs / 2.0;
        // Relative se of a variance of 65,536 independent Gaussians: sqrt(2/N) = 0.55 %.
        assert!(
            (var / expected - 1.0).abs() < 0.03,
            "{var} against {expected}"
        );
        let lag1 = x.iter().zip(&x[1..]).map(|(a, b)| a * b).sum::<f64>() / x.len() as f64;
        assert!(lag1.abs() < 0.03 * expected, "lag-1 covariance {lag1}");
    }
}
