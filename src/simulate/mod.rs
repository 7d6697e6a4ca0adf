//! Exact simulation of a trapped bead's thermal motion, for demos, tests and self-checks.
//!
//! An Ornstein-Uhlenbeck process sampled at interval dt is exactly the AR(1) recursion
//! x_{j+1} = c x_j + sigma sqrt(1 - c^2) xi_j with c = exp(-2 pi fc dt) and xi_j standard
//! normal, started from the stationary distribution x_0 ~ N(0, sigma^2) (Norrelykke &
//! Flyvbjerg, Phys. Rev. E 83, 041103 (2011), treat the general oscillator exactly; this is its
//! overdamped limit). It has no discretisation error at any dt, so recordings made here have a
//! known truth to compare a calibration against. The same recursion from a fixed start gives the
//! relaxation of beads released from one point ([`Start::Fixed`]).
//!
//! Real instruments filter, drag fluid along, blur, add noise, drift and lines: `instrument.rs`
//! describes such a recording per axis ([`InstrumentAxis`]) and makes exact records of it by
//! random-phase synthesis from its aliased spectrum (`synthesis.rs`, closed forms and image sums
//! in `spectra.rs`); `blur.rs` simulates camera exposure in the time domain as an independent
//! check.

mod blur;
mod instrument;
mod spectra;
mod synthesis;
#[cfg(test)]
mod tests;

pub use blur::blurred_ou_series;
pub use instrument::{
    FlickerDrift, InstrumentAxis, RecordPlan, SimulateError, Sinusoid, add_lines,
    simulate_instrument_axes, thermal_autocovariance,
};
pub use spectra::{blurred_aliased_lorentzian_one_sided, exposure_variance_factor};
pub use synthesis::{SynthesisGrid, gaussian_record};

use rand::SeedableRng;
use rand_distr::{Distribution, StandardNormal};
use rand_xoshiro::Xoshiro256PlusPlus;
use std::f64::consts::PI;

/// Truth for one simulated axis.
#[derive(Clone, Debug, PartialEq)]
pub struct OuAxis {
    /// Axis name (`x`, `y`, `z`).
    pub name: String,
    /// Corner frequency fc = kappa / (2 pi gamma), Hz.
    pub corner_frequency_hz: f64,
    /// Stationary variance sigma^2 = kB T / kappa, in the squared output unit.
    pub variance: f64,
}

/// Disturbances added on top of the thermal motion, in the output unit, to exercise the
/// data-quality findings. All default to zero.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Disturbances {
    /// Amplitude of a sinusoidal pickup, and its frequency in Hz (for instance 50 Hz mains).
    pub hum_amplitude: f64,
    pub hum_frequency_hz: f64,
    /// Linear drift, output unit per second.
    pub drift_per_s: f64,
    /// Standard deviation of white detection noise.
    pub white_noise: f64,
}

/// A named seedable generator, so a seed gives the same stream across library versions.
pub fn generator(seed: u64) -> Xoshiro256PlusPlus {
    Xoshiro256PlusPlus::seed_from_u64(seed)
}

/// Where an AR(1) record starts.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Start {
    /// Drawn from the stationary distribution N(0, sigma^2): a bead that has been in the trap
    /// for a long time (one standard normal drawn first).
    Stationary,
    /// A fixed position, in the output unit: a bead released from there at t = 0 (no draw).
    /// Its mean relaxes as x0 exp(-t / tau) and its variance grows as
    /// sigma^2 (1 - exp(-2 t / tau)) (exact for the Ornstein-Uhlenbeck process).
    Fixed(f64),
}

/// One exact AR(1) realisation of `n_samples` samples from a stationary start (see the module
/// docs).
pub fn ou_series<R: rand::Rng + ?Sized>(
    corner_frequency_hz: f64,
    variance: f64,
    sample_rate_hz: f64,
    n_samples: usize,
    rng: &mut R,
) -> Vec<f64> {
    ou_series_from(
        Start::Stationary,
        corner_frequency_hz,
        variance,
        sample_rate_hz,
        n_samples,
        rng,
    )
}

/// One exact AR(1) realisation of `n_samples` samples from `start`; the first sample is the
/// start itself (t = 0).
pub fn ou_series_from<R: rand::Rng + ?Sized>(
    start: Start,
    corner_frequency_hz: f64,
    variance: f64,
    sample_rate_hz: f64,
    n_samples: usize,
    rng: &mut R,
) -> Vec<f64> {
    let c = (-2.0 * PI * corner_frequency_hz / sample_rate_hz).exp();
    let sigma = variance.sqrt();
    let kick = sigma * c.mul_add(-c, 1.0).sqrt();
    let mut out = Vec::with_capacity(n_samples);
    let mut x = match start {
        Start::Stationary => {
            let z0: f64 = StandardNormal.sample(rng);
            sigma * z0
        }
        Start::Fixed(x0) => x0,
    };
    for _ in 0..n_samples {
        out.push(x);
        let xi: f64 = StandardNormal.sample(rng);
        x = c.mul_add(x, kick * xi);
    }
    out
}

/// Simulates every axis (independent processes from one seeded stream, stationary starts) and
/// adds the disturbances. Returns one sample vector per axis.
pub fn simulate_axes(
    axes: &[OuAxis],
    sample_rate_hz: f64,
    n_samples: usize,
    seed: u64,
    disturbances: &Disturbances,
) -> Vec<Vec<f64>> {
    simulate_axes_from(
        axes,
        Start::Stationary,
        sample_rate_hz,
        n_samples,
        seed,
        disturbances,
    )
}

/// [`simulate_axes`] with every axis starting at `start`.
pub fn simulate_axes_from(
    axes: &[OuAxis],
    start: Start,
    sample_rate_hz: f64,
    n_samples: usize,
    seed: u64,
    disturbances: &Disturbances,
) -> Vec<Vec<f64>> {
    let mut rng = generator(seed);
    axes.iter()
        .map(|axis| {
            let mut x = ou_series_from(
                start,
                axis.corner_frequency_hz,
                axis.variance,
                sample_rate_hz,
                n_samples,
                &mut rng,
            );
            add_disturbances(&mut x, sample_rate_hz, disturbances, &mut rng);
            x
        })
        .collect()
}

fn add_disturbances<R: rand::Rng + ?Sized>(
    x: &mut [f64],
    sample_rate_hz: f64,
    d: &Disturbances,
    rng: &mut R,
) {
    if d.hum_amplitude == 0.0 && d.drift_per_s == 0.0 && d.white_noise == 0.0 {
        return;
    }
    let w = 2.0 * PI * d.hum_frequency_hz / sample_rate_hz;
    for (j, v) in x.iter_mut().enumerate() {
        let t = j as f64 / sample_rate_hz;
        let noise: f64 = StandardNormal.sample(rng);
        *v += d.white_noise.mul_add(
            noise,
            d.hum_amplitude
                .mul_add((w * j as f64).sin(), d.drift_per_s * t),
        );
    }
}
