//! Unit tests of the spectrum module: conventions, the exact aliased spectrum, and the
//! statistical behaviour of the maximum-likelihood fit on exact simulations.

// Reference formulas stay written as in their sources, not rearranged into fused multiply-adds.
#![allow(clippy::suboptimal_flops)]

use super::*;
use crate::simulate::{generator, ou_series};
use std::f64::consts::PI;

fn ideal_model(sample_rate_hz: f64) -> SpectrumModel {
    SpectrumModel {
        sample_rate_hz,
        aliasing: true,
        filter: FilterSetting::None,
        hydro: None,
        exposure_s: None,
        noise_floor: false,
    }
}

#[track_caller]
fn check_close(actual: f64, expected: f64, rel_tol: f64) {
    let rel = ((actual - expected) / expected).abs();
    assert!(
        rel <= rel_tol,
        "actual {actual:e}, expected {expected:e}, relative error {rel:e} > {rel_tol:e}"
    );
}

/// Direct alias sum of the one-sided Lorentzian D/(pi^2 (fc^2 + f^2)) over n = -M..M, plus the
/// analytic tail sum_{|n|>M} D/(pi^2 n^2 fs^2) ~ 2D/(pi^2 fs^2 M) to first order, an obviously
/// correct (slow) reference for the closed form.
fn brute_force_alias_sum(f: f64, fc: f64, d: f64, fs: f64) -> f64 {
    let m = 200_000i64;
    let mut sum = 0.0;
    for n in -m..=m {
        let g = f + n as f64 * fs;
        sum += d / (PI * PI * (fc * fc + g * g));
    }
    sum + 2.0 * d / (PI * PI * fs * fs * m as f64)
}

#[test]
fn aliased_lorentzian_equals_direct_alias_sum() {
    // Exact analytical identity (Berg-Sorensen & Flyvbjerg, Rev. Sci. Instrum. 75, 594 (2004)):
    // the closed form equals the sum over all alias images of the Lorentzian.
    for &(fc, fs, f) in &[
        (100.0, 10_000.0, 10.0),
        (500.0, 20_000.0, 3_000.0),
        (2_500.0, 10_000.0, 4_990.0),
        (5_000.0, 20_000.0, 9_999.0),
        (50.0, 100_000.0, 49_000.0),
    ] {
        let d = 3.7e-13;
        check_close(
            aliased_lorentzian_one_sided(f, fc, d, fs),
            brute_force_alias_sum(f, fc, d, fs),
            1e-8,
        );
    }
}

#[test]
fn aliased_lorentzian_at_nyquist_exceeds_plain_by_pi_squared_over_four_for_low_fc() {
    // For fc << fs, S_al(f_Nyq) / S_Lorentz(f_Nyq) -> pi^2/4 (sum over odd images of
    // 1/(2n+1)^2 = pi^2/8, both signs): an exact limit.
    let (fc, fs, d) = (1.0, 100_000.0, 1.0);
    let f = fs / 2.0;
    let plain = d / (PI * PI * (fc * fc + f * f));
    check_close(
        aliased_lorentzian_one_sided(f, fc, d, fs) / plain,
        PI * PI / 4.0,
        1e-6,
    );
}

#[test]
fn aliased_lorentzian_integrates_to_the_variance() {
    // Parseval for the sampled process: the one-sided spectrum integrated over 0..f_Nyq equals
    // sigma^2 = D / (2 pi fc) exactly (the AR(1) variance).
    let (fc, fs, d) = (800.0, 10_000.0, 2.0);
    let n = 200_000;
    let df = fs / 2.0 / n as f64;
    let integral: f64 = (0..n)
        .map(|i| aliased_lorentzian_one_sided((i as f64 + 0.5) * df, fc, d, fs) * df)
        .sum();
    check_close(integral, d / (2.0 * PI * fc), 1e-8);
}

#[test]
fn numeric_alias_sum_with_unit_filter_matches_closed_form() {
    // A filter with alpha = 1 is no filter, so the numerically summed aliases (with their tail
    // estimate) must reproduce the closed form; this pins the tail handling.
    let fs = 50_000.0;
    let model = SpectrumModel {
        filter: FilterSetting::Fixed(DetectorFilter {
            f3db_hz: 8_000.0,
            alpha: 1.0,
        }),
        ..ideal_model(fs)
    };
    let theta = model.initial_theta(1_200.0, 5.0);
    for f in [10.0, 1_000.0, 12_000.0, 24_900.0] {
        check_close(
            model.one_sided_psd(f, &theta),
            aliased_lorentzian_one_sided(f, 1_200.0, 5.0, fs),
            1e-12,
        );
    }
}

#[test]
fn filtered_alias_sum_matches_brute_force_filtered_sum() {
    // sum_n g(f + n fs) S(f + n fs) summed directly to |n| = 200000 (slow reference) against
    // the model's 24 images plus tail estimate.
    let fs = 50_000.0;
    let filter = DetectorFilter {
        f3db_hz: 7_000.0,
        alpha: 0.4,
    };
    let model = SpectrumModel {
        filter: FilterSetting::Fixed(filter),
        ..ideal_model(fs)
    };
    let (fc, d) = (1_500.0, 1.0);
    let theta = model.initial_theta(fc, d);
    for f in [100.0, 5_000.0, 20_000.0, 24_990.0] {
        let m = 200_000i64;
        let mut reference = 0.0;
        for n in -m..=m {
            let g = f + n as f64 * fs;
            reference += filter.gain(g.abs()) * d / (PI * PI * (fc * fc + g * g));
        }
        reference += filter.alpha.powi(2) * 2.0 * d / (PI * PI * fs * fs * m as f64);
        check_close(model.one_sided_psd(f, &theta), reference, 1e-5);
    }
}

#[test]
fn hydro_model_tends_to_the_lorentzian_when_its_frequencies_are_huge() {
    let fs = 50_000.0;
    let model = SpectrumModel {
        hydro: Some(HydroTerms {
            f_nu_hz: 1e30,
            f_m_hz: 1e30,
        }),
        ..ideal_model(fs)
    };
    let theta = model.initial_theta(900.0, 1.0);
    for f in [20.0, 900.0, 20_000.0] {
        check_close(
            model.one_sided_psd(f, &theta),
            aliased_lorentzian_one_sided(f, 900.0, 1.0, fs),
            1e-9,
        );
    }
}

#[test]
fn periodogram_of_a_sine_puts_its_mean_square_in_one_bin() {
    // Exact: a sine of amplitude A at a Fourier frequency has mean square A^2/2, all of it in
    // that bin of the one-sided periodogram (PSD times resolution).
    let (fs, n, k0, amp) = (1_000.0, 1_024usize, 37usize, 3.0);
    let x: Vec<f64> = (0..n)
        .map(|j| amp * (2.0 * PI * k0 as f64 * j as f64 / n as f64).sin())
        .collect();
    let pg = periodogram(&x, fs, 1).expect("long enough");
    check_close(pg.psd[k0] * pg.resolution_hz(), amp * amp / 2.0, 1e-12);
    let elsewhere: f64 = pg
        .psd
        .iter()
        .enumerate()
        .filter(|(k, _)| *k != k0)
        .map(|(_, p)| p)
        .sum();
    assert!(elsewhere < 1e-20, "leakage {elsewhere:e}");
}

#[test]
fn periodogram_satisfies_parseval() {
    // Exact: sum of the one-sided PSD times the resolution equals the mean square of the
    // mean-removed samples (Parseval's theorem for the DFT).
    let mut rng = generator(7);
    let x = ou_series(300.0, 2.0, 10_000.0, 4_000, &mut rng);
    let pg = periodogram(&x, 10_000.0, 1).expect("long enough");
    let mean = x.iter().sum::<f64>() / x.len() as f64;
    let n_used = pg.segment_len;
    let mean_used = x[..n_used].iter().sum::<f64>() / n_used as f64;
    let ms: f64 = x[..n_used].iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n_used as f64;
    // Removing the whole-record mean leaves the segment's own mean offset in the DC bin.
    let dc_offset = (mean_used - mean).powi(2);
    let total: f64 = pg.psd.iter().sum::<f64>() * pg.resolution_hz();
    check_close(total, ms, 1e-10);
    assert!(pg.psd[0] * pg.resolution_hz() <= dc_offset + 1e-12 * ms);
}

#[test]
fn fast_length_picks_the_largest_five_smooth_length() {
    for (n, expected) in [
        (1_000, 1_000),
        (1_021, 1_000),
        (4_194_304, 4_194_304),
        (97, 96),
        (17, 16),
    ] {
        assert_eq!(fast_length_at_most(n), expected, "n = {n}");
    }
}

#[test]
fn blocks_cover_the_range_and_respect_the_minimum_size() {
    let pg = Periodogram {
        sample_rate_hz: 1_000.0,
        segment_len: 2_000,
        n_windows: 3,
        psd: (0..=1_000).map(|k| k as f64).collect(),
        first_differenced_bin: usize::MAX,
    };
    let excluded = [100usize, 101];
    let blocks = block_periodogram(&pg, 10.0, 400.0, &excluded, 16, 30);
    assert!(blocks.iter().all(|b| b.n_bins >= 14), "{blocks:?}");
    let total: usize = blocks.iter().map(|b| b.n_bins).sum();
    // Bins 20..=800 (f = k / 2 Hz) minus the two excluded ones.
    assert_eq!(total, 800 - 20 + 1 - 2);
    assert!(blocks.iter().all(|b| b.n_averaged == 3 * b.n_bins));
    // The block mean of psd = k is the mean bin index of its bins.
    for b in &blocks {
        check_close(b.psd, b.frequency_hz * 2.0, 1e-12);
    }
}

struct FitStats {
    mean_fc: f64,
    sd_fc: f64,
    mean_se_fc: f64,
    mean_d: f64,
    sd_d: f64,
    mean_se_d: f64,
}

fn repeated_fits(fc: f64, fs: f64, n: usize, seeds: u64, plain: bool) -> FitStats {
    let d = 1.0; // signal units^2/s; the variance is D/(2 pi fc)
    let variance = d / (2.0 * PI * fc);
    let mut fcs = Vec::new();
    let mut ses = Vec::new();
    let mut ds = Vec::new();
    let mut dses = Vec::new();
    for seed in 0..seeds {
        let mut rng = generator(1_000 + seed);
        let x = ou_series(fc, variance, fs, n, &mut rng);
        let pg = periodogram(&x, fs, 1).expect("long enough");
        let mut options = SpectrumFitOptions::new(ideal_model(fs));
        options.range.f_max_hz = Some(0.98 * fs / 2.0);
        let fit = fit_spectrum(&pg, &options, None).expect("fit");
        if plain {
            let wls = plain_lorentzian_wls(&fit.blocks).expect("wls");
            fcs.push(wls.corner_frequency_hz);
            ses.push(wls.corner_frequency_se_hz);
            ds.push(wls.diffusion);
            dses.push(wls.diffusion_se);
        } else {
            fcs.push(fit.corner_frequency_hz);
            ses.push(fit.corner_frequency_se_hz);
            ds.push(fit.diffusion);
            dses.push(fit.diffusion_se);
        }
    }
    let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
    let sd = |v: &[f64]| {
        let m = mean(v);
        (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() as f64 - 1.0)).sqrt()
    };
    FitStats {
        mean_fc: mean(&fcs),
        sd_fc: sd(&fcs),
        mean_se_fc: mean(&ses),
        mean_d: mean(&ds),
        sd_d: sd(&ds),
        mean_se_d: mean(&dses),
    }
}

#[track_caller]
fn check_unbiased_and_honest(stats: &FitStats, fc: f64, d: f64, seeds: u64) {
    let sem_fc = stats.sd_fc / (seeds as f64).sqrt();
    assert!(
        (stats.mean_fc - fc).abs() < 3.0 * sem_fc,
        "fc biased: mean {} truth {fc} sem {sem_fc}",
        stats.mean_fc
    );
    let sem_d = stats.sd_d / (seeds as f64).sqrt();
    assert!(
        (stats.mean_d - d).abs() < 3.0 * sem_d,
        "D biased: mean {} truth {d} sem {sem_d}",
        stats.mean_d
    );
    let ratio_fc = stats.mean_se_fc / stats.sd_fc;
    let ratio_d = stats.mean_se_d / stats.sd_d;
    assert!(
        (0.75..1.25).contains(&ratio_fc),
        "fc SE / spread = {ratio_fc}"
    );
    assert!((0.75..1.25).contains(&ratio_d), "D SE / spread = {ratio_d}");
}

#[test]
fn mle_recovers_fc_and_d_without_bias_well_below_nyquist() {
    // Exact simulations (AR(1), Norrelykke & Flyvbjerg 2011) with fc/fs = 0.025.
    let seeds = 60;
    let stats = repeated_fits(500.0, 20_000.0, 1 << 16, seeds, false);
    check_unbiased_and_honest(&stats, 500.0, 1.0, seeds);
}

#[test]
fn mle_recovers_fc_and_d_without_bias_at_a_quarter_of_the_sample_rate() {
    let seeds = 60;
    let stats = repeated_fits(5_000.0, 20_000.0, 1 << 16, seeds, false);
    check_unbiased_and_honest(&stats, 5_000.0, 1.0, seeds);
}

#[test]
fn plain_lorentzian_is_biased_at_a_quarter_of_the_sample_rate() {
    // What ignoring aliasing costs (Berg-Sorensen & Flyvbjerg 2004): fitting the plain
    // Lorentzian to the same data overestimates fc by tens of per cent, far outside its spread.
    let seeds = 20;
    let stats = repeated_fits(5_000.0, 20_000.0, 1 << 16, seeds, true);
    let sem = stats.sd_fc / (seeds as f64).sqrt();
    assert!(
        stats.mean_fc > 5_000.0 * 1.2 && (stats.mean_fc - 5_000.0) > 20.0 * sem,
        "plain Lorentzian mean fc {} (sem {sem})",
        stats.mean_fc
    );
}

#[test]
fn fitted_detector_filter_is_recovered() {
    // Synthetic filtered spectrum: draw periodogram ordinates as exponential variables around
    // the exact filtered, aliased expectation (their distribution for a Gaussian process, BSF
    // 2004 sec. IV), then fit with the filter free.
    use rand_distr::{Distribution, Exp1};
    let fs = 50_000.0;
    let truth = DetectorFilter {
        f3db_hz: 6_000.0,
        alpha: 0.45,
    };
    let model = SpectrumModel {
        filter: FilterSetting::Fixed(truth),
        ..ideal_model(fs)
    };
    let theta = model.initial_theta(1_500.0, 1.0);
    let segment_len = 1 << 18;
    let mut rng = generator(99);
    let psd: Vec<f64> = (0..=segment_len / 2)
        .map(|k| {
            let f = k as f64 * fs / segment_len as f64;
            let e: f64 = Exp1.sample(&mut rng);
            model.one_sided_psd(f, &theta) * e
        })
        .collect();
    let pg = Periodogram {
        sample_rate_hz: fs,
        segment_len,
        n_windows: 1,
        psd,
        first_differenced_bin: usize::MAX,
    };
    let fit_model = SpectrumModel {
        filter: FilterSetting::Fitted(DetectorFilter {
            f3db_hz: 10_000.0,
            alpha: 0.3,
        }),
        ..ideal_model(fs)
    };
    let fit = fit_spectrum(&pg, &SpectrumFitOptions::new(fit_model), None).expect("fit");
    let filter = fit.fitted_filter.expect("filter fitted");
    let z = |est: f64, se: f64, truth: f64| ((est - truth) / se).abs();
    assert!(
        z(fit.corner_frequency_hz, fit.corner_frequency_se_hz, 1_500.0) < 4.0,
        "{fit:?}"
    );
    assert!(
        z(filter.f3db_hz, filter.f3db_se_hz, 6_000.0) < 4.0,
        "{filter:?}"
    );
    assert!(z(filter.alpha, filter.alpha_se, 0.45) < 4.0, "{filter:?}");
    assert!(fit.p_value > 1e-4, "p = {}", fit.p_value);
}

#[test]
fn goodness_of_fit_p_values_are_not_extreme_for_ideal_data() {
    // Under the true model the chi-square p-value is roughly uniform; over 20 seeds none should
    // fall below 1e-3 (expected 0.02 such cases).
    for seed in 0..20 {
        let mut rng = generator(50 + seed);
        let x = ou_series(800.0, 1.0, 20_000.0, 1 << 16, &mut rng);
        let pg = periodogram(&x, 20_000.0, 1).expect("long enough");
        let fit =
            fit_spectrum(&pg, &SpectrumFitOptions::new(ideal_model(20_000.0)), None).expect("fit");
        assert!(fit.p_value > 1e-3, "seed {seed}: p = {}", fit.p_value);
    }
}

#[test]
fn narrow_peaks_find_mains_hum_and_nothing_in_clean_data() {
    let fs = 20_000.0;
    let n = 1 << 17;
    for seed in 0..5 {
        let mut rng = generator(300 + seed);
        let clean = ou_series(600.0, 1.0, fs, n, &mut rng);
        let pg = periodogram(&clean, fs, 1).expect("long enough");
        let peaks = find_narrow_peaks(&pg, 0.01);
        assert!(peaks.is_empty(), "seed {seed}: {peaks:?}");
    }
    let mut rng = generator(400);
    let mut x = ou_series(600.0, 1.0, fs, n, &mut rng);
    for (j, v) in x.iter_mut().enumerate() {
        let t = j as f64 / fs;
        *v += 0.3 * (2.0 * PI * 50.0 * t).sin() + 0.2 * (2.0 * PI * 150.0 * t).sin();
    }
    let pg = periodogram(&x, fs, 1).expect("long enough");
    let peaks = find_narrow_peaks(&pg, 0.01);
    let mains: Vec<_> = peaks.iter().filter_map(|p| p.mains).collect();
    assert!(mains.contains(&(50.0, 1)), "{peaks:?}");
    assert!(mains.contains(&(50.0, 3)), "{peaks:?}");
}

#[test]
fn narrow_peak_false_alarm_rate_matches_the_design_on_thermal_spectra() {
    // Pure thermal records (exact AR(1) simulation) contain no peak, so every flagged bin is a
    // false alarm. With a per-bin tail of false_alarms / n_bins from the exact distribution of
    // the ratio, the expected number of flagged bins per spectrum is at most false_alarms
    // (slightly less: shared windows and the interpolated background), and by the union bound
    // so is the fraction of spectra with any peak.
    // Upper check at the design value 0.01 over 1000 spectra: Binomial(1000, 0.01) exceeds 22
    // with probability 2.7e-4 (sum of binomial terms, computed with Python's math.comb),
    // while the plain Gamma quantile gave about 3 %, i.e. 30.
    // Two-sided check at false_alarms = 1, where about 1000 flagged bins are expected in 1000
    // spectra (Poisson standard deviation about 3 %): the mean per spectrum must lie within
    // [0.85, 1.12], which a threshold that is too loose (the old one gave 1.14 to 1.42) or too
    // strict fails.
    let fs = 20_000.0;
    let n_seeds = 1000;
    for (fc_over_fs, n_windows) in [(0.01, 1), (0.25, 1), (0.01, 4)] {
        let mut spectra_with_peaks = 0;
        let mut flagged_bins = 0;
        for seed in 0..n_seeds {
            let mut rng = generator(10_000 + seed);
            let x = ou_series(fc_over_fs * fs, 1.0, fs, 1 << 14, &mut rng);
            let pg = periodogram(&x, fs, n_windows).expect("long enough");
            if !find_narrow_peaks(&pg, 0.01).is_empty() {
                spectra_with_peaks += 1;
            }
            flagged_bins += find_narrow_peaks(&pg, 1.0)
                .iter()
                .map(|p| p.last_bin - p.first_bin + 1)
                .sum::<usize>();
        }
        let per_spectrum = flagged_bins as f64 / n_seeds as f64;
        assert!(
            spectra_with_peaks <= 22,
            "fc/fs {fc_over_fs}, {n_windows} windows: {spectra_with_peaks} of {n_seeds}"
        );
        assert!(
            (0.85..=1.12).contains(&per_spectrum),
            "fc/fs {fc_over_fs}, {n_windows} windows: {per_spectrum} flagged bins per spectrum"
        );
    }
}

#[test]
fn narrow_peaks_with_stored_thresholds_equal_those_with_thresholds_solved_afresh() {
    // A thermal record with a 50 Hz line, on one and on four segments: every call after the
    // first takes its thresholds from the process-wide store, and must flag exactly the bins,
    // with exactly the ratios, that thresholds solved afresh give. The stored set itself must
    // equal, bit for bit and in order, the one a fresh solve produces.
    let fs = 20_000.0;
    for n_windows in [1, 4] {
        let mut rng = generator(500 + n_windows as u64);
        let mut x = ou_series(600.0, 1.0, fs, 1 << 15, &mut rng);
        for (j, v) in x.iter_mut().enumerate() {
            *v += 0.3 * (2.0 * PI * 50.0 * j as f64 / fs).sin();
        }
        let pg = periodogram(&x, fs, n_windows).expect("long enough");
        let fresh = peaks::narrow_peaks(&pg, 0.01, peaks::ThresholdSource::Fresh);
        assert!(
            fresh.iter().any(|p| p.mains == Some((50.0, 1))),
            "{n_windows} windows: {fresh:?}"
        );
        for call in 0..3 {
            let shared = peaks::narrow_peaks(&pg, 0.01, peaks::ThresholdSource::Shared);
            assert_eq!(shared, fresh, "{n_windows} windows, call {call}");
        }
        let key = (pg.psd.len(), pg.n_windows, 0.01f64.to_bits());
        let stored = peaks::stored_thresholds(key).expect("stored by the shared calls");
        let solved_afresh = peaks::solved_thresholds(&pg, 0.01);
        assert!(!solved_afresh.is_empty());
        assert_eq!(stored.len(), solved_afresh.len(), "{n_windows} windows");
        for (a, b) in stored.iter().zip(&solved_afresh) {
            assert_eq!(a.0, b.0, "{n_windows} windows: lengths");
            assert_eq!(
                a.1.to_bits(),
                b.1.to_bits(),
                "{n_windows} windows, length {}",
                a.0
            );
        }
    }
}

#[test]
fn the_threshold_store_keeps_a_bounded_number_of_sets_and_drops_the_least_recently_used() {
    // Keys with bin counts no periodogram here has, so other tests' sets are only evicted
    // (which costs them a fresh solve, never a different result).
    let key = |i: usize| (usize::MAX - i, 1, 0.5f64.to_bits());
    let extra = peaks::MAX_STORED_THRESHOLD_SETS + 8;
    for i in 0..extra {
        peaks::store_thresholds(key(i), vec![(i, i as f64)]);
        // Key 0 stays in use throughout, so it must survive.
        assert!(
            peaks::stored_thresholds(key(0)).is_some(),
            "after storing key {i}"
        );
    }
    assert!(peaks::lock_thresholds().len() <= peaks::MAX_STORED_THRESHOLD_SETS);
    assert_eq!(
        peaks::stored_thresholds(key(0)).as_deref(),
        Some(&[(0, 0.0)][..])
    );
    assert!(
        peaks::stored_thresholds(key(1)).is_none(),
        "the oldest unused set is dropped"
    );
    let last = extra - 1;
    assert_eq!(
        peaks::stored_thresholds(key(last)).as_deref(),
        Some(&[(last, last as f64)][..])
    );
}

#[track_caller]
fn check_exponential_exceedance(window_len: usize, s: f64) {
    // Renyi (1953) representation of exponential order statistics (David & Nagaraja, Order
    // Statistics, 3rd ed. 2003, sec. 2.5): the j-th smallest of m' Exp(1) draws is
    // sum_{i=1}^{j} E_i / (m' - i + 1), so for an independent X ~ Exp(1)
    // P(X > s Y_(j)) = E[exp(-s Y_(j))] = prod_{i=1}^{j} (m' - i + 1) / (m' - i + 1 + s).
    let others = window_len - 1;
    let rank = window_len / 2 + 1;
    let exact: f64 = (1..=rank)
        .map(|i| {
            let r = (others - i + 1) as f64;
            (r / (r + s)).ln()
        })
        .sum();
    let (closed, slope) = peaks::ln_exceedance_exponential(others, rank, s.ln());
    let (quadrature, quadrature_slope) =
        peaks::ln_exceedance_quadrature(1.0, std::f64::consts::LN_2, others, rank, s.ln());
    assert!((closed - exact).abs() < 1e-9, "{closed} vs {exact}");
    assert!((quadrature - exact).abs() < 1e-6, "{quadrature} vs {exact}");
    // d ln p / d ln s = -s sum_i 1 / (m' - i + 1 + s) from the same product.
    let exact_slope: f64 = -(1..=rank)
        .map(|i| s / ((others - i + 1) as f64 + s))
        .sum::<f64>();
    assert!(
        (slope - exact_slope).abs() < 1e-8,
        "{slope} vs {exact_slope}"
    );
    assert!(
        (quadrature_slope - exact_slope).abs() < 1e-5,
        "{quadrature_slope} vs {exact_slope}"
    );
}

#[test]
fn peak_threshold_tail_matches_the_renyi_product_for_exponential_ordinates() {
    check_exponential_exceedance(16, 5.0);
    check_exponential_exceedance(31, 19.6);
    check_exponential_exceedance(31, 40.0);
    check_exponential_exceedance(100, 25.0);
    check_exponential_exceedance(820, 20.0);
}

#[test]
fn peak_threshold_tail_matches_monte_carlo_for_averaged_ordinates() {
    // Independent check of the quadrature for Gamma(4, 4) ordinates (4 averaged segments):
    // draw a window of 31 ordinates, take its median as the code does (the bin under test
    // included), and count how often the test ordinate exceeds s times the median.
    use rand_distr::{Distribution, Gamma as GammaDist};
    let n = 4.0;
    let window_len = 31;
    let median = statrs::distribution::ContinuousCDF::inverse_cdf(
        &statrs::distribution::Gamma::new(n, n).expect("valid"),
        0.5,
    );
    let s: f64 = 3.6;
    let (ln_p, _) = peaks::ln_exceedance_quadrature(n, median, window_len - 1, 16, s.ln());
    let p = ln_p.exp();
    assert!((2e-4..5e-3).contains(&p), "p = {p}");
    let gamma = GammaDist::new(n, 1.0 / n).expect("valid");
    let mut rng = generator(77);
    let n_draws = 400_000;
    let mut hits = 0usize;
    let mut window = vec![0.0; window_len];
    for _ in 0..n_draws {
        for v in &mut window {
            *v = gamma.sample(&mut rng);
        }
        let x = window[0];
        let (_, m, _) = window.select_nth_unstable_by(window_len / 2, f64::total_cmp);
        if x > s * *m {
            hits += 1;
        }
    }
    // Binomial count: expected n_draws p, standard deviation sqrt(n_draws p); allow 4.5 of them.
    let expected = n_draws as f64 * p;
    assert!(
        (hits as f64 - expected).abs() < 4.5 * expected.sqrt(),
        "hits {hits}, expected {expected}"
    );
}

/// Reads a two-column CSV fixture (header line, then `frequency_hz,psd` rows).
fn read_pairs(text: &str) -> Vec<(f64, f64)> {
    text.lines()
        .skip(1)
        .filter(|l| !l.trim().is_empty())
        .map(|l| {
            let (a, b) = l.split_once(',').expect("two columns");
            (a.parse().expect("number"), b.parse().expect("number"))
        })
        .collect()
}

fn fixture_signal() -> Vec<f64> {
    include_str!("../../tests/data/spectrum/signal.csv")
        .lines()
        .skip(1)
        .map(|l| l.trim().parse().expect("number"))
        .collect()
}

#[track_caller]
fn check_against_scipy(pg: &Periodogram, expected: &[(f64, f64)]) {
    assert_eq!(pg.psd.len(), expected.len());
    // Bin 0 differs by design: trapwise removes the record mean, scipy (detrend=False) does not.
    for (k, (f, p)) in expected.iter().enumerate().skip(1) {
        check_close(pg.frequency_hz(k), *f, 1e-12);
        check_close(pg.psd[k], *p, 1e-9);
    }
}

#[test]
fn periodogram_matches_scipy_one_sided_density() {
    // Fixture: scipy.signal.periodogram(x, fs=10000, window='boxcar', detrend=False,
    // scaling='density'), written by tests/data/spectrum/make_periodogram_fixture.py
    // (numpy 2.4.6, scipy 1.17.1).
    let x = fixture_signal();
    let pg = periodogram(&x, 10_000.0, 1).expect("long enough");
    check_against_scipy(
        &pg,
        &read_pairs(include_str!("../../tests/data/spectrum/periodogram.csv")),
    );
}

#[test]
fn segment_average_matches_scipy_welch_with_boxcar_segments() {
    // Fixture: scipy.signal.welch(x, fs=10000, window='boxcar', nperseg=1024, noverlap=0,
    // detrend=False), from the same script.
    let x = fixture_signal();
    let pg = periodogram(&x, 10_000.0, 4).expect("long enough");
    assert_eq!(pg.segment_len, 1024);
    check_against_scipy(
        &pg,
        &read_pairs(include_str!("../../tests/data/spectrum/welch_4seg.csv")),
    );
}

#[test]
fn aliased_lorentzian_matches_numpy_direct_alias_sums() {
    // Fixture: two-sided alias sums of D/(2 pi^2 (fc^2 + f^2)) computed with math.fsum over
    // |n| <= 200000 plus closed-form tails, by tests/data/spectrum/make_aliased_fixture.py.
    // Our one-sided value is twice the two-sided density.
    let text = include_str!("../../tests/data/spectrum/aliased_lorentzian.csv");
    let mut n = 0;
    for line in text.lines().skip(1).filter(|l| !l.trim().is_empty()) {
        let v: Vec<f64> = line
            .split(',')
            .map(|c| c.parse().expect("number"))
            .collect();
        let (fc, fs, f, d, two_sided) = (v[0], v[1], v[2], v[3], v[4]);
        check_close(
            aliased_lorentzian_one_sided(f, fc, d, fs),
            2.0 * two_sided,
            1e-12,
        );
        n += 1;
    }
    assert!(n >= 20, "fixture rows: {n}");
}

/// The interleaved-phasor harmonic sums against direct sums of y_j cos(w j) etc. with `sin_cos`
/// at every sample (the obviously correct reference), on seeded random input whose length is
/// not a multiple of the lane count or of the resynchronisation interval.
#[track_caller]
fn check_harmonic_sums(n: usize, w: f64) {
    use rand_distr::{Distribution, StandardNormal};
    let mut rng = generator(n as u64);
    let y: Vec<f64> = (0..n).map(|_| StandardNormal.sample(&mut rng)).collect();
    let mut direct = [0.0f64; 5];
    for (j, &v) in y.iter().enumerate() {
        let (s, c) = (w * j as f64).sin_cos();
        direct[0] += v * c;
        direct[1] += v * s;
        direct[2] += c * c;
        direct[3] += s * s;
        direct[4] += c * s;
    }
    let fast = super::lines::harmonic_sums(&y, w);
    for (k, (f, d)) in fast.iter().zip(&direct).enumerate() {
        // Sums of n terms of size <= |y|: rounding of order 1e-12 sqrt(n) is expected.
        assert!(
            (f - d).abs() < 1e-9 * (n as f64).sqrt(),
            "sum {k}: {f} vs {d} (n {n}, w {w})"
        );
    }
}

#[test]
fn harmonic_sums_match_direct_trigonometric_sums() {
    check_harmonic_sums(1, 0.3);
    check_harmonic_sums(7, 0.3);
    check_harmonic_sums(1023, 2.0 * PI * 50.0 / 10_000.0);
    check_harmonic_sums(1027, 2.0 * PI * 0.2371);
    check_harmonic_sums(100_003, 2.0 * PI * 8294.1 / 50_000.0);
    check_harmonic_sums(262_147, 2.0 * PI * 0.4999);
}

#[test]
fn subtracting_a_line_matches_direct_subtraction_with_sin_cos_at_every_sample() {
    // Reference: y_j - (a cos(w j) + b sin(w j)) with `sin_cos` at every sample (the obviously
    // correct form), for lengths that are not multiples of the lane count or of the
    // resynchronisation interval, and two lines at once.
    use rand_distr::{Distribution, StandardNormal};
    let fs = 50_000.0;
    let lines = [
        SpectralLine {
            frequency_hz: 8294.1,
            amplitude: 0.0,
            cos_coefficient: 0.7,
            sin_coefficient: -1.3,
        },
        SpectralLine {
            frequency_hz: 49.97,
            amplitude: 0.0,
            cos_coefficient: -2.0,
            sin_coefficient: 0.25,
        },
    ];
    // sum over lines of w (|a| + |b|), rad per sample times signal units.
    let phase_weight: f64 = lines
        .iter()
        .map(|l| {
            2.0 * PI * l.frequency_hz / fs * (l.cos_coefficient.abs() + l.sin_coefficient.abs())
        })
        .sum();
    for n in [1usize, 3, 1023, 1029, 100_003] {
        let mut rng = generator(n as u64 + 9);
        let y: Vec<f64> = (0..n).map(|_| StandardNormal.sample(&mut rng)).collect();
        let mut fast = y.clone();
        subtract_lines(&mut fast, fs, &lines);
        for (j, (&f, &orig)) in fast.iter().zip(&y).enumerate() {
            let mut direct = orig;
            for line in &lines {
                let w = 2.0 * PI * line.frequency_hz / fs;
                let (s, c) = (w * j as f64).sin_cos();
                direct -= line.cos_coefficient * c + line.sin_coefficient * s;
            }
            // Both forms inherit the rounding of the phase w j (half an ulp of w j, times the
            // coefficients): that, plus 1e-13 for the rotations, is the tolerance.
            let tol = 1e-13 + 4.0 * f64::EPSILON * phase_weight * j as f64;
            assert!(
                (f - direct).abs() <= tol,
                "n {n}, sample {j}: {f} vs {direct}"
            );
        }
    }
}

#[test]
fn a_sinusoid_off_the_frequency_grid_is_found_and_removed() {
    // Exact: a pure sinusoid is removed to rounding by the least-squares fit at its frequency,
    // even between Fourier frequencies; on top of OU noise its amplitude and frequency are
    // recovered within a small fraction of the record's resolution.
    let (fs, n) = (10_000.0, 20_000usize);
    let (f_true, amp) = (50.037, 2.0);
    let mut rng = generator(77);
    let noise = ou_series(400.0, 1.0, fs, n, &mut rng);
    let mut y: Vec<f64> = noise
        .iter()
        .enumerate()
        .map(|(j, e)| e + amp * (2.0 * PI * f_true * j as f64 / fs + 0.3).sin())
        .collect();
    let mean = y.iter().sum::<f64>() / n as f64;
    y.iter_mut().for_each(|v| *v -= mean);
    let line = fit_line(&y, fs, 50.0, 0.5);
    assert!(
        (line.frequency_hz - f_true).abs() < 0.05 * fs / n as f64,
        "{line:?}"
    );
    assert!((line.amplitude - amp).abs() < 0.05, "{line:?}");
    let mut pure: Vec<f64> = (0..n)
        .map(|j| amp * (2.0 * PI * f_true * j as f64 / fs + 0.3).sin())
        .collect();
    let pure_line = fit_line(&pure, fs, 50.0, 0.5);
    subtract_lines(&mut pure, fs, &[pure_line]);
    let residual = pure.iter().map(|v| v * v).sum::<f64>() / n as f64;
    assert!(residual < 1e-12 * amp * amp, "residual power {residual:e}");
}

#[test]
fn hydrodynamic_model_removes_the_bias_a_lorentzian_fit_suffers() {
    // Periodogram ordinates drawn as exponential variables around the exact aliased spectrum
    // with frequency-dependent drag (Berg-Sorensen & Flyvbjerg 2004) for a 2 um bead in water
    // (f_nu ~ 284 kHz, f_m ~ 412 kHz at 25 C). Fitting with the hydrodynamic terms recovers fc;
    // a constant-drag fit over the same range underestimates it by several per cent (the size
    // of the effect BSF 2004 describe for micrometre beads at kHz).
    use rand_distr::{Distribution, Exp1};
    let fs = 100_000.0;
    let hydro = HydroTerms {
        f_nu_hz: 284e3,
        f_m_hz: 412e3,
    };
    let truth = SpectrumModel {
        hydro: Some(hydro),
        ..ideal_model(fs)
    };
    let (fc, d) = (2_000.0, 1.0);
    let theta = truth.initial_theta(fc, d);
    let segment_len = 1 << 20;
    let mut rng = generator(123);
    let psd: Vec<f64> = (0..=segment_len / 2)
        .map(|k| {
            let e: f64 = Exp1.sample(&mut rng);
            truth.one_sided_psd(k as f64 * fs / segment_len as f64, &theta) * e
        })
        .collect();
    let pg = Periodogram {
        sample_rate_hz: fs,
        segment_len,
        n_windows: 1,
        psd,
        first_differenced_bin: usize::MAX,
    };
    let mut with = SpectrumFitOptions::new(truth);
    with.range.f_max_hz = Some(20_000.0);
    let fit = fit_spectrum(&pg, &with, None).expect("fit");
    let z = (fit.corner_frequency_hz - fc) / fit.corner_frequency_se_hz;
    assert!(
        z.abs() < 4.0,
        "hydrodynamic fit: {} ± {}",
        fit.corner_frequency_hz,
        fit.corner_frequency_se_hz
    );
    let mut without = SpectrumFitOptions::new(ideal_model(fs));
    without.range.f_max_hz = Some(20_000.0);
    let plain = fit_spectrum(&pg, &without, None).expect("fit");
    assert!(
        plain.corner_frequency_hz < fc * 0.97,
        "constant-drag fit: {}",
        plain.corner_frequency_hz
    );
}

/// The filtered model's closed form (two exponential components, each an exact aliased
/// Lorentzian) equals the direct alias sum sum_n g(f + n fs) S(f + n fs) of the photodiode
/// filter g (Berg-Sorensen, Oddershede, Florin & Flyvbjerg, J. Appl. Phys. 93, 3167 (2003),
/// recalled from memory, unverified) times the one-sided Lorentzian: 200,000 images, with the
/// tail beyond them added as alpha^2 times the Lorentzian tail 2 D / (pi^2 fs^2 M) (there g is
/// alpha^2 to within (f3 / (M fs))^2).
#[test]
fn filtered_spectrum_in_closed_form_equals_the_direct_alias_sum() {
    let fs = 100_000.0;
    let (fc, d): (f64, f64) = (950.0, 4.9e5);
    for (f3, alpha) in [(6_000.0, 0.15), (3_000.0, 0.4), (20_000.0, 0.1)] {
        let filter = DetectorFilter { f3db_hz: f3, alpha };
        let model = SpectrumModel {
            sample_rate_hz: fs,
            aliasing: true,
            filter: FilterSetting::Fixed(filter),
            hydro: None,
            exposure_s: None,
            noise_floor: false,
        };
        let theta = [fc.ln(), d.ln()];
        let m = 200_000i64;
        for f in [10.0, 500.0, 4_000.0, 30_000.0, 49_999.0] {
            let mut direct = 0.0;
            for n in -m..=m {
                let g = f + n as f64 * fs;
                direct += filter.gain(g) * d / (PI * PI * (fc * fc + g * g));
            }
            direct += alpha * alpha * 2.0 * d / (PI * PI * fs * fs * m as f64);
            check_close(model.one_sided_psd(f, &theta), direct, 1e-7);
        }
    }
}

/// The leakage term makes the model the exact expectation of a finite segment's periodogram,
/// plain or of recoloured first differences: E[P_k] = 2 dt sum_{|m| < L} (1 - |m|/L) C(m dt)
/// cos(2 pi k m / L), with, for differences, C_y(m) = 2 C(m) - C(m + 1) - C(m - 1) in place of
/// C and the result divided by 4 sin^2(pi k / L) (the double sum of the autocovariance, an
/// exact identity), with C the plain exponential or the filtered two-exponential
/// autocovariance written out here from its partial fractions (shared PHYSICS.md section 12).
#[test]
fn expected_periodogram_of_short_segments_equals_the_autocovariance_double_sum() {
    let fs = 100_000.0;
    let (fc, d): (f64, f64) = (950.0, 4.9e5);
    let dt = 1.0 / fs;
    let l = 256usize;
    let cases = [
        None,
        Some(DetectorFilter {
            f3db_hz: 3_000.0,
            alpha: 0.2,
        }),
    ];
    for (filter, differenced) in cases.iter().flat_map(|f| [(*f, false), (*f, true)]) {
        let model = SpectrumModel {
            sample_rate_hz: fs,
            aliasing: true,
            filter: filter.map_or(FilterSetting::None, FilterSetting::Fixed),
            hydro: None,
            exposure_s: None,
            noise_floor: false,
        };
        let p = model.decode(&[fc.ln(), d.ln()]);
        let acov = |m: i64| {
            let t = m.unsigned_abs() as f64 * dt;
            let lorentz = |f: f64| d / (2.0 * PI * f) * (-2.0 * PI * f * t).exp();
            match filter {
                None => lorentz(fc),
                Some(g) => {
                    let (f3, a2) = (g.f3db_hz, g.alpha * g.alpha);
                    a2 * lorentz(fc)
                        + (1.0 - a2) * f3 * f3 / (f3 * f3 - fc * fc) * (lorentz(fc) - lorentz(f3))
                }
            }
        };
        let seen = |m: i64| {
            if differenced {
                2.0 * acov(m) - acov(m + 1) - acov(m - 1)
            } else {
                acov(m)
            }
        };
        for k in [1usize, 3, 10, 40, 127] {
            let f = k as f64 * fs / l as f64;
            let mut direct = seen(0);
            for m in 1..l as i64 {
                let w = 1.0 - m as f64 / l as f64;
                direct += 2.0 * w * seen(m) * (2.0 * PI * (k as i64 * m) as f64 / l as f64).cos();
            }
            direct *= 2.0 * dt;
            if differenced {
                let half = (PI * k as f64 / l as f64).sin();
                direct /= 4.0 * half * half;
            }
            let segments = model::Segments {
                len: l,
                differenced_from_hz: if differenced { 0.0 } else { f64::INFINITY },
            };
            check_close(
                model.expected_periodogram(f, &p, Some(segments)),
                direct,
                1e-9,
            );
        }
    }
}

/// A noise-free periodogram: the exact aliased Lorentzian (Berg-Sorensen & Flyvbjerg, Rev. Sci.
/// Instrum. 75, 594 (2004)) plus `flicker_at_1_hz / f`, on segments long enough (2^22 samples)
/// that the finite-segment term is below 1e-5 of the spectrum.
fn exact_periodogram_with_flicker(fc: f64, d: f64, fs: f64, flicker_at_1_hz: f64) -> Periodogram {
    let segment_len = 1usize << 22;
    let df = fs / segment_len as f64;
    let psd = (0..=segment_len / 2)
        .map(|k| {
            let f = k as f64 * df;
            let drift = if k == 0 { 0.0 } else { flicker_at_1_hz / f };
            aliased_lorentzian_one_sided(f, fc, d, fs) + drift
        })
        .collect();
    Periodogram {
        sample_rate_hz: fs,
        segment_len,
        n_windows: 1,
        psd,
        first_differenced_bin: usize::MAX,
    }
}

#[test]
fn the_flicker_term_recovers_fc_d_and_the_drift_from_the_exact_spectrum() {
    // Expected spectrum = aliased Lorentzian + A / f, exactly; the fit with the 1/f term must
    // return fc, D and A to 1e-3 (the block means use 3-point quadrature and the continuous
    // mean of 1/f over each block, both far more accurate than that over blocks of >= 32 bins),
    // and without drift A must be zero to 1e-3 of the plateau at 10 Hz times 10 Hz.
    let (fc, d, fs) = (950.0, 4.9e5, 100_000.0);
    let plateau_at_10 = aliased_lorentzian_one_sided(10.0, fc, d, fs);
    for a in [10.0 * plateau_at_10, 0.0] {
        let pg = exact_periodogram_with_flicker(fc, d, fs, a);
        let options = SpectrumFitOptions {
            flicker: true,
            ..SpectrumFitOptions::new(ideal_model(fs))
        };
        let fit = fit_spectrum(&pg, &options, None).expect("fits");
        let term = fit.flicker.expect("the term is fitted");
        check_close(fit.corner_frequency_hz, fc, 1e-3);
        check_close(fit.diffusion, d, 1e-3);
        assert!(
            (term.density_at_1_hz - a).abs() < 1e-3 * 10.0 * plateau_at_10,
            "A {} against {a}",
            term.density_at_1_hz
        );
        assert!(term.density_at_1_hz_se > 0.0);
        assert_eq!(
            fit.theta.len(),
            2,
            "theta keeps the model's parameters only"
        );
        assert_eq!(fit.covariance.len(), 2);
        // The model seen by the findings includes the term.
        check_close(
            fit.model_psd_at(20.0),
            fit.thermal_psd_at(20.0) + term.density_at_1_hz / 20.0,
            1e-12,
        );
    }
}

/// Models that sum their alias images numerically with the drag of a 1 um polystyrene bead in
/// water at 25 C (f_nu and f_m from `drag::hydrodynamic_frequencies` with viscosity 0.89 mPa s,
/// water 997 kg/m^3 and polystyrene 1050 kg/m^3, values from memory; any positive scales would
/// do for this test), alone and with each term the image tables fold in: a fixed filter, a
/// camera's exposure, the white floor.
fn drag_models(fs: f64) -> Vec<SpectrumModel> {
    let h = crate::drag::hydrodynamic_frequencies(0.89e-3, 997.0, 1050.0, 0.5e-6);
    let hydro = Some(HydroTerms {
        f_nu_hz: h.f_nu_hz,
        f_m_hz: h.f_m_hz,
    });
    let drag = SpectrumModel {
        hydro,
        ..ideal_model(fs)
    };
    vec![
        drag,
        SpectrumModel {
            filter: FilterSetting::Fixed(DetectorFilter {
                f3db_hz: 7_000.0,
                alpha: 0.4,
            }),
            ..drag
        },
        SpectrumModel {
            exposure_s: Some(0.6 / fs),
            ..drag
        },
        SpectrumModel {
            noise_floor: true,
            ..drag
        },
        SpectrumModel {
            filter: FilterSetting::Fitted(DetectorFilter {
                f3db_hz: 7_000.0,
                alpha: 0.4,
            }),
            ..drag
        },
    ]
}

#[test]
fn tabled_image_sums_equal_the_image_sums_term_by_term() {
    // The fit and the covariance integral evaluate the drag model's image sum from tables built
    // once per frequency (`SpectrumModel::image_table`); the images are the ones the model
    // computes afresh otherwise, summed by the same code, so the two agree bit for bit over
    // the whole band (0 to f_Nyquist), for corner frequencies from far below to a quarter of
    // the sample rate (the covariance integral's central differences rely on it).
    let fs = 50_000.0;
    for model in drag_models(fs) {
        assert!(model.tables_images(), "{model:?}");
        for fc in [30.0, 950.0, 12_500.0] {
            let mut theta = model.initial_theta(fc, 0.6);
            if let Some(i) = model.noise_floor_index() {
                theta[i] = 1e-9f64.ln();
            }
            let p = model.decode(&theta);
            for i in 0..=256 {
                let f = fs / 2.0 * i as f64 / 256.0;
                let table = model.image_table(f).expect("tabled");
                assert_eq!(
                    model.signal_psd_tabled(&table, &p) + p.noise_floor,
                    model.psd_params(f, &p),
                    "{model:?} fc {fc} f {f}"
                );
            }
            // Block means with the finite-segment term, plain and differenced segments.
            let segments = Some(model::Segments {
                len: 4096,
                differenced_from_hz: 2_000.0,
            });
            for (lower, upper) in [(10.0, 40.0), (1_000.0, 3_000.0), (19_000.0, 20_000.0)] {
                let block = model.prepare_block(lower, upper, segments);
                assert_eq!(
                    model.prepared_block_mean(&block, &p, segments),
                    model.block_mean(lower, upper, &p, segments),
                    "{model:?} fc {fc} block {lower}-{upper}"
                );
            }
        }
    }
}

#[test]
fn only_models_that_sum_images_are_tabled() {
    // The closed form needs no table; a fitted filter is tabled without its gain, which the
    // sum applies per image with theta (`tabled_image_sums_equal_the_image_sums_term_by_term`
    // checks it bit for bit).
    let fs = 50_000.0;
    let drag = drag_models(fs)[0];
    assert!(ideal_model(fs).image_table(100.0).is_none());
    let fitted = SpectrumModel {
        filter: FilterSetting::Fitted(DetectorFilter {
            f3db_hz: 7_000.0,
            alpha: 0.4,
        }),
        ..drag
    };
    assert!(fitted.image_table(100.0).is_some());
    let fitted = SpectrumModel {
        hydro: None,
        ..fitted
    };
    assert!(fitted.image_table(100.0).is_none());
    assert!(
        SpectrumModel {
            aliasing: false,
            ..drag
        }
        .image_table(100.0)
        .is_none()
    );
    // An untabled model's prepared block mean is its block mean, bit for bit.
    let p = fitted.decode(&fitted.initial_theta(950.0, 0.6));
    let block = fitted.prepare_block(1_000.0, 3_000.0, None);
    assert_eq!(
        fitted.prepared_block_mean(&block, &p, None),
        fitted.block_mean(1_000.0, 3_000.0, &p, None)
    );
}
