//! False-alarm rate of the narrow-peak search on exact thermal (Ornstein-Uhlenbeck) records.
//!
//! For each seed it simulates one pure thermal record with `simulate::ou_series`, takes the
//! periodogram and runs `spectrum::find_narrow_peaks`; it prints the fraction of spectra with
//! any flagged bin, the mean number of flagged bins per spectrum (whose expectation is the
//! design `false_alarms` when the per-bin threshold is exact) and where the flagged bins lie.
//!
//! Run: `cargo run --release --example peak_false_alarms -- LOG2_N FC_OVER_FS N_WINDOWS SEEDS
//! FALSE_ALARMS`, e.g. `-- 14 0.01 1 400 0.01`.

use trapwise::simulate::{generator, ou_series};
use trapwise::spectrum::{find_narrow_peaks, periodogram};

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let arg = |i: usize, default: &str| args.get(i).cloned().unwrap_or_else(|| default.into());
    let log2_n: u32 = arg(0, "14").parse().expect("LOG2_N");
    let fc_over_fs: f64 = arg(1, "0.01").parse().expect("FC_OVER_FS");
    let n_windows: usize = arg(2, "1").parse().expect("N_WINDOWS");
    let n_seeds: u64 = arg(3, "400").parse().expect("SEEDS");
    let false_alarms: f64 = arg(4, "0.01").parse().expect("FALSE_ALARMS");
    let fs = 20_000.0;
    let n = 1usize << log2_n;
    let mut any = 0usize;
    let mut flagged_bins = 0usize;
    // Flagged bins by position: first 32 bins, then tenths of the spectrum.
    let mut low = 0usize;
    let mut tenths = [0usize; 10];
    for seed in 0..n_seeds {
        let mut rng = generator(seed);
        let x = ou_series(fc_over_fs * fs, 1.0, fs, n, &mut rng);
        let pg = periodogram(&x, fs, n_windows).expect("long enough");
        let peaks = find_narrow_peaks(&pg, false_alarms);
        if !peaks.is_empty() {
            any += 1;
        }
        let n_bins = pg.psd.len();
        for p in &peaks {
            for k in p.first_bin..=p.last_bin {
                flagged_bins += 1;
                if k < 32 {
                    low += 1;
                } else {
                    tenths[(10 * k / n_bins).min(9)] += 1;
                }
            }
        }
    }
    println!(
        "N=2^{log2_n} fc/fs={fc_over_fs} n_windows={n_windows} seeds={n_seeds} \
         false_alarms={false_alarms}: spectra with a peak {any}/{n_seeds} ({:.2} %), \
         flagged bins per spectrum {:.4}; bins<32: {low}, by tenth: {tenths:?}",
        100.0 * any as f64 / n_seeds as f64,
        flagged_bins as f64 / n_seeds as f64
    );
}
