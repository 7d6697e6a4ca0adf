//! Admission of calibrations: at most `max_concurrent` run at once on the blocking thread pool,
//! at most `queue` more wait, and the rest are turned away at once (503 with Retry-After)
//! instead of piling up recordings in memory.

use std::sync::Arc;
use std::sync::atomic::{AtomicUsize, Ordering};
use tokio::sync::{OwnedSemaphorePermit, Semaphore};

/// The gate in front of the calibration thread pool.
#[derive(Debug)]
pub struct Admission {
    slots: Arc<Semaphore>,
    max_concurrent: usize,
    capacity: usize,
    admitted: AtomicUsize,
}

/// A place in the queue or a running slot; dropping it gives the place back.
#[derive(Debug)]
pub struct Place {
    admission: Arc<Admission>,
}

impl Admission {
    /// A gate with `max_concurrent` running slots and `queue` waiting places.
    pub fn new(max_concurrent: usize, queue: usize) -> Arc<Self> {
        Arc::new(Admission {
            slots: Arc::new(Semaphore::new(max_concurrent)),
            max_concurrent,
            capacity: max_concurrent + queue,
            admitted: AtomicUsize::new(0),
        })
    }

    /// Running plus waiting calibrations allowed.
    pub fn capacity(&self) -> usize {
        self.capacity
    }

    /// Whether every slot and queue place is taken now (a request arriving would get 503).
    pub fn is_full(&self) -> bool {
        self.admitted.load(Ordering::SeqCst) >= self.capacity
    }

    /// Calibrations admitted and waiting for a slot.
    pub fn queue_depth(&self) -> usize {
        let running = self
            .max_concurrent
            .saturating_sub(self.slots.available_permits());
        self.admitted.load(Ordering::SeqCst).saturating_sub(running)
    }

    fn report(&self) {
        metrics::gauge!("trapwise_calibration_queue_depth").set(self.queue_depth() as f64);
        metrics::gauge!("trapwise_calibrations_admitted")
            .set(self.admitted.load(Ordering::SeqCst) as f64);
    }

    /// Takes a place, or `None` when every slot and queue place is taken.
    pub fn try_enter(self: &Arc<Self>) -> Option<Place> {
        let taken = self
            .admitted
            .fetch_update(Ordering::SeqCst, Ordering::SeqCst, |n| {
                (n < self.capacity).then_some(n + 1)
            })
            .is_ok();
        self.report();
        taken.then(|| Place {
            admission: Arc::clone(self),
        })
    }
}

impl Place {
    /// Waits for a running slot; the permit must live as long as the calibration runs.
    pub async fn slot(&self) -> Option<OwnedSemaphorePermit> {
        let permit = Arc::clone(&self.admission.slots).acquire_owned().await.ok();
        self.admission.report();
        permit
    }
}

impl Drop for Place {
    fn drop(&mut self) {
        self.admission.admitted.fetch_sub(1, Ordering::SeqCst);
        self.admission.report();
    }
}

#[cfg(test)]
#[path = "admission_tests.rs"]
mod tests;
