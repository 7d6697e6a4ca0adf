//! A process-wide cache of real-input FFT plans, so that a calibration does not pay for planning
//! (twiddle factors and the choice of algorithm, about as much work as one transform) on every
//! periodogram and autocovariance.
//!
//! Plans are made by realfft's `RealFftPlanner`, which chooses the same algorithm for the same
//! length every time, so a cached plan gives bit-for-bit the transform a fresh one would.
//! The lock is held only to look a plan up or to store one: planning a missing length and every
//! transform run outside it, on the caller's own buffers, so concurrent calibrations (the service
//! runs several in threads) never wait on each other while they transform.
//! The cache is bounded: it keeps at most `MAX_PLANS` plans whose lengths sum to at most
//! `MAX_TOTAL_LEN`, dropping the least recently used first, and never stores a plan longer than
//! `MAX_CACHED_LEN`, because a long-running service sees many record lengths and a plan holds
//! about 12 bytes per sample of twiddle factors. Dropping a plan from the cache never
//! invalidates it for a caller that still holds its `Arc`.
//! The module does no IO: plain lengths in, plans out.

use realfft::{ComplexToReal, RealFftPlanner, RealToComplex};
use std::sync::{Arc, Mutex, PoisonError};

/// Most plans kept (a calibration uses three lengths; the service runs a few at once).
const MAX_PLANS: usize = 16;
/// Largest sum of the lengths of the plans kept, samples (about 50 MB of twiddle factors).
const MAX_TOTAL_LEN: usize = 1 << 22;
/// Longest plan kept, samples; longer ones are planned afresh (planning is then a small part of
/// the work of the transforms it serves).
const MAX_CACHED_LEN: usize = 1 << 21;

/// A cached plan of either direction.
#[derive(Clone)]
enum Plan {
    Forward(Arc<dyn RealToComplex<f64>>),
    Inverse(Arc<dyn ComplexToReal<f64>>),
}

impl Plan {
    fn is_forward(&self) -> bool {
        matches!(self, Plan::Forward(_))
    }
}

struct Entry {
    len: usize,
    plan: Plan,
    /// Value of the cache's clock when the plan was last handed out.
    last_used: u64,
}

struct Cache {
    entries: Vec<Entry>,
    /// Counts look-ups, for least-recently-used eviction.
    clock: u64,
}

static CACHE: Mutex<Cache> = Mutex::new(Cache {
    entries: Vec::new(),
    clock: 0,
});

/// Locks the cache. A panic while it was held cannot leave it inconsistent (every change is a
/// single push, removal or counter update), so a poisoned lock is simply taken over.
fn lock() -> std::sync::MutexGuard<'static, Cache> {
    CACHE.lock().unwrap_or_else(PoisonError::into_inner)
}

/// The cached plan of this length and direction, if any, marked as just used.
fn look_up(len: usize, forward: bool) -> Option<Plan> {
    let mut cache = lock();
    cache.clock += 1;
    let now = cache.clock;
    let entry = cache
        .entries
        .iter_mut()
        .find(|e| e.len == len && e.plan.is_forward() == forward)?;
    entry.last_used = now;
    Some(entry.plan.clone())
}

/// Stores a freshly made plan (unless another thread stored one of the same length and direction
/// meanwhile) and evicts the least recently used plans beyond the bounds.
fn store(len: usize, plan: &Plan) {
    if len > MAX_CACHED_LEN {
        return;
    }
    let mut cache = lock();
    let forward = plan.is_forward();
    if cache
        .entries
        .iter()
        .any(|e| e.len == len && e.plan.is_forward() == forward)
    {
        return;
    }
    cache.clock += 1;
    let now = cache.clock;
    cache.entries.push(Entry {
        len,
        plan: plan.clone(),
        last_used: now,
    });
    loop {
        let total: usize = cache.entries.iter().map(|e| e.len).sum();
        if cache.entries.len() <= MAX_PLANS && total <= MAX_TOTAL_LEN {
            break;
        }
        let Some(oldest) = cache
            .entries
            .iter()
            .enumerate()
            .min_by_key(|(_, e)| e.last_used)
            .map(|(idx, _)| idx)
        else {
            break;
        };
        cache.entries.swap_remove(oldest);
    }
}

/// Plan of the unnormalised forward real-input FFT of length `len`,
/// X_k = sum_j x_j exp(-2 pi i j k / len) for k = 0..=len/2.
pub(crate) fn forward(len: usize) -> Arc<dyn RealToComplex<f64>> {
    if let Some(Plan::Forward(plan)) = look_up(len, true) {
        return plan;
    }
    let plan = RealFftPlanner::<f64>::new().plan_fft_forward(len);
    store(len, &Plan::Forward(Arc::clone(&plan)));
    plan
}

/// Plan of the unnormalised inverse of [`forward`] (the result is `len` times the input signal).
pub(crate) fn inverse(len: usize) -> Arc<dyn ComplexToReal<f64>> {
    if let Some(Plan::Inverse(plan)) = look_up(len, false) {
        return plan;
    }
    let plan = RealFftPlanner::<f64>::new().plan_fft_inverse(len);
    store(len, &Plan::Inverse(Arc::clone(&plan)));
    plan
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Direct DFT, the definition the plans implement.
    fn direct_dft(x: &[f64]) -> Vec<(f64, f64)> {
        let n = x.len();
        (0..=n / 2)
            .map(|k| {
                x.iter().enumerate().fold((0.0, 0.0), |(re, im), (j, &v)| {
                    let phase = -2.0 * std::f64::consts::PI * (j * k) as f64 / n as f64;
                    (v.mul_add(phase.cos(), re), v.mul_add(phase.sin(), im))
                })
            })
            .collect()
    }

    #[test]
    fn cached_plans_are_reused_and_match_the_direct_dft() {
        // Outside truth: the DFT definition, summed directly (accurate to ~1e-13 for n = 60).
        let n = 60;
        let x: Vec<f64> = (0..n).map(|j| ((j * 7 % 13) as f64) - 6.0).collect();
        let first = forward(n);
        let second = forward(n);
        assert!(
            Arc::ptr_eq(&first, &second),
            "the second look-up plans again"
        );
        let mut input = x.clone();
        let mut output = first.make_output_vec();
        first
            .process(&mut input, &mut output)
            .expect("lengths from the plan");
        for (k, (z, (re, im))) in output.iter().zip(direct_dft(&x)).enumerate() {
            assert!(
                (z.re - re).abs() < 1e-10 && (z.im - im).abs() < 1e-10,
                "bin {k}: {z} vs {re} + {im}i"
            );
        }
        // The inverse of the same length returns len times the signal.
        let back = inverse(n);
        assert!(Arc::ptr_eq(&back, &inverse(n)));
        let mut restored = back.make_output_vec();
        back.process(&mut output, &mut restored)
            .expect("lengths from the plan");
        for (j, (r, v)) in restored.iter().zip(&x).enumerate() {
            assert!((r / n as f64 - v).abs() < 1e-12, "sample {j}: {r} vs {v}");
        }
    }

    #[test]
    fn the_cache_stays_within_its_bounds() {
        for len in 1..=(2 * MAX_PLANS) {
            let _ = forward(2 * len);
        }
        let _ = forward(MAX_CACHED_LEN + 2);
        let cache = lock();
        let total: usize = cache.entries.iter().map(|e| e.len).sum();
        assert!(cache.entries.len() <= MAX_PLANS, "{}", cache.entries.len());
        assert!(total <= MAX_TOTAL_LEN, "{total}");
        assert!(cache.entries.iter().all(|e| e.len <= MAX_CACHED_LEN));
    }
}
