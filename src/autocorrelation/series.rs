//! The model's autocovariance at every lag of a long range, as one slice: what the Allan
//! deviation's expected curve and band need (see `allan`). It reuses the lag series of the
//! autocorrelation fit (`model::SeriesEvaluator`): closed-form exponentials, the numerical
//! hydrodynamic remainder, and beyond it the remainder's long-time tail.

use super::model::{LagSeries, SeriesEvaluator, TimeDomainModel};

/// Lags evaluated exactly by the hydrodynamic quadrature before the evaluator's grid takes over
/// (the remainder is smooth beyond a few lags; its interpolation error is of order 1e-5 of the
/// remainder, itself a few per cent of the variance, see `model`).
const EXACT_LAGS: usize = 64;

/// Below this fraction of |C(0)| a model without a power-law tail has decayed, and its slice
/// ends (the lags beyond count as zero).
const NEGLIGIBLE: f64 = 1e-18;

impl TimeDomainModel {
    /// The model's autocovariance C(k) at lags k = 0, 1, ... up to `n_lags` - 1, signal-unit^2,
    /// for corner frequency `corner_frequency_hz` and diffusion `diffusion`: lag 0 is the
    /// detector's variance, the other lags [`Self::autocovariance_at`]'s values computed as the
    /// autocorrelation fit computes them (exponentials in closed form; the hydrodynamic
    /// remainder by quadrature on the first lags, interpolated beyond, and past about 30
    /// relaxation times its u^(-3/2) (1 + 3 tau/u) tail, whose coefficient is derived at
    /// `model::HydroTail`). Without frequency-dependent drag the slice ends where every term is
    /// below 1e-18 |C(0)|, so it may be shorter than asked.
    ///
    /// Empty for an invalid model or non-positive parameters.
    pub fn autocovariance_series(
        &self,
        corner_frequency_hz: f64,
        diffusion: f64,
        n_lags: usize,
    ) -> Vec<f64> {
        let usable = self.validate().is_ok()
            && corner_frequency_hz > 0.0
            && diffusion > 0.0
            && corner_frequency_hz.is_finite()
            && diffusion.is_finite()
            && n_lags > 0;
        if !usable {
            return Vec::new();
        }
        let exact = EXACT_LAGS.min(n_lags);
        let mut evaluator = SeriesEvaluator::new(self, exact, corner_frequency_hz);
        let series = evaluator.series(corner_frequency_hz, diffusion);
        lags_of(&series, n_lags)
    }
}

/// The series written out lag by lag.
fn lags_of(series: &LagSeries, n_lags: usize) -> Vec<f64> {
    let scale = NEGLIGIBLE * series.lag0.abs();
    let mut out = Vec::with_capacity(n_lags.min(1 << 16));
    out.push(series.lag0);
    // Once every exponential has fallen below 1e-30 |C(0)| (they only decay) they are no longer
    // evaluated: a hydrodynamic tail runs on for many lags.
    let mut exponentials_alive = true;
    for u in 1..n_lags {
        let exponential: f64 = if exponentials_alive {
            series
                .terms
                .iter()
                .map(|&(b, ln_q)| b * (ln_q * (u - 1) as f64).exp())
                .sum()
        } else {
            0.0
        };
        // Once dead they stay dead: not evaluated again (a hydrodynamic tail runs on for
        // hundreds of thousands of lags).
        exponentials_alive = exponentials_alive
            && series
                .terms
                .iter()
                .any(|&(b, ln_q)| (b * (ln_q * (u - 1) as f64).exp()).abs() >= 1e-12 * scale);
        let rest = match (series.remainder.get(u - 1), series.tail) {
            (Some(r), _) => *r,
            (None, Some(tail)) => {
                let x = u as f64;
                tail.coefficient / (x * x.sqrt()) * (1.0 + 3.0 * tail.tau_lags / x)
            }
            (None, None) => {
                if exponential.abs() < scale {
                    break;
                }
                0.0
            }
        };
        out.push(exponential + rest);
    }
    out
}
