//! Speed of the autocorrelation models and of the general fit: the hydrodynamic model at 64
//! lags (quadrature rules built afresh, as `TimeDomainModel::autocovariance_at` does), and whole
//! fits of a 2^16-sample record with the plain, filtered and hydrodynamic models next to
//! `fit_exponential` on the same autocovariance. Run with `cargo bench --bench acf_models`.

use criterion::{Criterion, criterion_group, criterion_main};
use std::f64::consts::PI;
use std::hint::black_box;
use trapwise::autocorrelation::{
    AcfFitOptions, TimeDomainModel, autocovariance, fit_autocovariance_model, fit_exponential,
};
use trapwise::simulate::{gaussian_record, generator};
use trapwise::spectrum::{DetectorFilter, FilterSetting, HydroTerms, SpectrumModel};

const FS: f64 = 100_000.0;
const FC: f64 = 1000.0;
const N: usize = 1 << 16;

/// f_nu and f_m of a 3 um polystyrene bead in water at 25 C.
const HYDRO: HydroTerms = HydroTerms {
    f_nu_hz: 126_285.0,
    f_m_hz: 182_950.0,
};

const FILTER: DetectorFilter = DetectorFilter {
    f3db_hz: 6000.0,
    alpha: 0.15,
};

/// The autocovariance of one record synthesised from the aliased spectrum of `spectrum`.
fn acov_of(spectrum: &SpectrumModel) -> Vec<f64> {
    let theta = [FC.ln(), (2.0 * PI * FC).ln()];
    let mut rng = generator(1);
    let x = gaussian_record(|f| spectrum.one_sided_psd(f, &theta), FS, N, &mut rng);
    autocovariance(&x, 128)
}

fn bench(c: &mut Criterion) {
    let plain = TimeDomainModel::plain(FS);
    let filtered = TimeDomainModel {
        filter: Some(FILTER),
        ..plain
    };
    let hydro = TimeDomainModel {
        hydro: Some(HYDRO),
        ..plain
    };
    let spectrum = |filter, hydro| SpectrumModel {
        sample_rate_hz: FS,
        aliasing: true,
        filter,
        hydro,
        exposure_s: None,
        noise_floor: false,
    };
    let acov_plain = acov_of(&spectrum(FilterSetting::None, None));
    let acov_filtered = acov_of(&spectrum(FilterSetting::Fixed(FILTER), None));
    let acov_hydro = acov_of(&spectrum(FilterSetting::None, Some(HYDRO)));
    let options = AcfFitOptions::default();
    let d = 2.0 * PI * FC;

    let mut group = c.benchmark_group("autocorrelation models");
    group.sample_size(10);
    group.bench_function("hydrodynamic model, 64 lags, rules built each call", |b| {
        b.iter(|| {
            (1..=64)
                .map(|lag| hydro.autocovariance_at(black_box(lag), FC, d))
                .sum::<f64>()
        });
    });
    group.bench_function("fit_exponential, plain record", |b| {
        b.iter(|| fit_exponential(black_box(&acov_plain), FS, N, &options));
    });
    let fits = [
        ("plain", &plain, &acov_plain),
        ("filtered", &filtered, &acov_filtered),
        ("hydrodynamic", &hydro, &acov_hydro),
    ];
    for (name, model, acov) in fits {
        group.bench_function(format!("fit_autocovariance_model, {name}"), |b| {
            b.iter(|| {
                fit_autocovariance_model(black_box(acov), N, model, &options, 1.1 * FC, 0.9 * d)
            });
        });
    }
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
