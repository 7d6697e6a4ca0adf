//! The idle limit of a request body: `IdleBody` wraps the body's stream of chunks and ends it
//! with an error when the client sends nothing for the limit.
//!
//! It sits under everything that reads the body (the raw-body upload, the multipart parser with
//! its text fields, its file part and the gaps between parts), so a client that stalls anywhere
//! in the body gets the same 408. The clock runs only while the reader waits for the client:
//! time the server spends writing a chunk to disk does not count against the client.
//! `BodyWatch` tells the handler afterwards that the error it got was the stall, and at which
//! byte offset of the body.

use axum::body::Bytes;
use futures_util::Stream;
use std::pin::Pin;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::task::{Context, Poll};
use std::time::Duration;

/// What happened to a watched body: bytes received and whether it stalled.
#[derive(Debug, Default)]
pub(crate) struct BodyWatch {
    received_bytes: AtomicU64,
    stalled: AtomicBool,
}

impl BodyWatch {
    /// Bytes of the body received so far.
    pub(crate) fn received_bytes(&self) -> u64 {
        self.received_bytes.load(Ordering::SeqCst)
    }

    /// Whether the body ended because the client sent nothing for the idle limit.
    pub(crate) fn stalled(&self) -> bool {
        self.stalled.load(Ordering::SeqCst)
    }
}

/// The error that ends a stalled body.
#[derive(Debug, thiserror::Error)]
#[error("the client sent nothing for {idle_s} s")]
pub(crate) struct IdleTimeout {
    idle_s: u64,
}

/// A body stream with an idle limit (see the module documentation).
pub(crate) struct IdleBody<S> {
    inner: S,
    idle: Duration,
    wait: Option<Pin<Box<tokio::time::Sleep>>>,
    watch: Arc<BodyWatch>,
    ended: bool,
}

impl<S> IdleBody<S> {
    /// Wraps `inner`, reporting to `watch`.
    pub(crate) fn new(inner: S, idle: Duration, watch: Arc<BodyWatch>) -> Self {
        IdleBody {
            inner,
            idle,
            wait: None,
            watch,
            ended: false,
        }
    }
}

impl<S, E> Stream for IdleBody<S>
where
    S: Stream<Item = Result<Bytes, E>> + Unpin,
    E: Into<axum::BoxError>,
{
    type Item = Result<Bytes, axum::BoxError>;

    fn poll_next(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<Option<Self::Item>> {
        let this = &mut *self;
        if this.ended {
            return Poll::Ready(None);
        }
        match Pin::new(&mut this.inner).poll_next(cx) {
            Poll::Ready(item) => {
                // The next wait starts when the reader asks again, not now.
                this.wait = None;
                if let Some(Ok(chunk)) = &item {
                    this.watch
                        .received_bytes
                        .fetch_add(chunk.len() as u64, Ordering::SeqCst);
                }
                Poll::Ready(item.map(|r| r.map_err(Into::into)))
            }
            Poll::Pending => {
                let idle = this.idle;
                let wait = this
                    .wait
                    .get_or_insert_with(|| Box::pin(tokio::time::sleep(idle)));
                if wait.as_mut().poll(cx).is_pending() {
                    return Poll::Pending;
                }
                this.ended = true;
                this.watch.stalled.store(true, Ordering::SeqCst);
                Poll::Ready(Some(Err(IdleTimeout {
                    idle_s: idle.as_secs(),
                }
                .into())))
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use futures_util::StreamExt;

    fn chunk(text: &'static str) -> Result<Bytes, std::io::Error> {
        Ok(Bytes::from_static(text.as_bytes()))
    }

    #[tokio::test(start_paused = true)]
    async fn a_body_that_pauses_past_the_limit_ends_with_the_stall_and_its_offset() {
        let watch = Arc::new(BodyWatch::default());
        // Two chunks, then a client that never sends again.
        let inner = futures_util::stream::iter([chunk("abc"), chunk("de")])
            .chain(futures_util::stream::pending());
        let mut body = IdleBody::new(inner, Duration::from_secs(5), Arc::clone(&watch));
        assert_eq!(body.next().await.map(Result::ok), Some(Some("abc".into())));
        assert_eq!(body.next().await.map(Result::ok), Some(Some("de".into())));
        let started = tokio::time::Instant::now();
        let end = body.next().await;
        assert!(matches!(end, Some(Err(_))), "{end:?}");
        assert_eq!(started.elapsed(), Duration::from_secs(5));
        assert!(watch.stalled());
        assert_eq!(watch.received_bytes(), 5);
        assert!(body.next().await.is_none());
    }

    #[tokio::test(start_paused = true)]
    async fn time_the_reader_spends_between_chunks_does_not_count() {
        let watch = Arc::new(BodyWatch::default());
        let inner = futures_util::stream::iter([chunk("a"), chunk("b")]);
        let mut body = IdleBody::new(inner, Duration::from_secs(5), Arc::clone(&watch));
        assert!(body.next().await.is_some());
        // The server is busy for longer than the limit (writing to disk, say).
        tokio::time::sleep(Duration::from_secs(60)).await;
        assert_eq!(body.next().await.map(Result::ok), Some(Some("b".into())));
        assert!(body.next().await.is_none());
        assert!(!watch.stalled());
        assert_eq!(watch.received_bytes(), 2);
    }
}
