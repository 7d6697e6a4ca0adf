//! The Allan stage of an axis calibration: the overlapping Allan deviation of the record the
//! time-domain methods see, against the curve and band of the axis's one fitted spectral model
//! (see `crate::allan`). A diagnostic beside the stiffness estimates, never one of them.

use crate::allan::{self, AllanCurve};
use crate::autocorrelation::TimeDomainModel;
use crate::spectrum::SpectrumFit;

/// The Allan deviation of `samples` (signal unit) and, when the spectral fit exists, what its
/// model predicts.
///
/// The expected curve is that of the bead's motion as the detector sees it: the fitted model's
/// autocovariance (filter, frequency-dependent drag and camera exposure as the fit had them,
/// [`TimeDomainModel::autocovariance_series`]) plus the fitted white noise floor, whose one-sided
/// level P_n is a variance P_n f_s / 2 at lag 0 (shared PHYSICS.md section 12). A fitted 1/f
/// drift term is left out on purpose: drift is what the curve is there to show. Lags up to
/// twice the longest block enter the expected values exactly; the band's sums see no further.
pub(crate) fn allan_stage(
    samples: &[f64],
    sample_rate_hz: f64,
    fit: Option<&SpectrumFit>,
) -> AllanCurve {
    let longest_block = allan::octave_block_sizes(samples.len())
        .last()
        .copied()
        .unwrap_or(0);
    let autocovariance = fit.map(|fit| {
        let params = fit.model.decode(&fit.theta);
        let model = TimeDomainModel {
            sample_rate_hz,
            filter: params.filter,
            hydro: fit.model.hydro,
            exposure_s: fit.model.exposure_s,
        };
        let mut lags = model.autocovariance_series(params.fc, params.d, 2 * longest_block + 1);
        if let Some(c0) = lags.first_mut() {
            *c0 += params.noise_floor * sample_rate_hz / 2.0;
        }
        lags
    });
    allan::allan_curve(samples, sample_rate_hz, autocovariance.as_deref())
}
