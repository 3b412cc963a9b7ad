//! Connections: accepting them, the limits each one lives under, and closing them at shutdown.
//!
//! `axum::serve` leaves hyper without a timer, so a client could hold a connection open for
//! ever by sending its request a byte at a time or by never reading the answer. [`serve`]
//! accepts connections itself and gives each one three bounds, all tied to the request time
//! limit (`limits.request_timeout_secs`):
//!
//! - **the request head** (request line and headers) must arrive within the limit of the
//!   moment the connection starts waiting for it, which also closes idle keep-alive
//!   connections after the limit (hyper's header read timeout);
//! - **the head's size** is bounded ([`MAX_HEAD_BYTES`]; hyper answers 431 past it) and the
//!   URI's length is checked by the router ([`MAX_URI_BYTES`], 414);
//! - **writing** the answer may not stall for longer than the limit: a client that stops
//!   reading sees its connection closed ([`Deadlined`]).
//!
//! None of these holds a place of the [`crate::state::WorkGate`]: a request's work ends (and
//! frees its place) before its answer is written, and a request whose head has not arrived
//! has not reached a handler.
//!
//! At shutdown [`serve`] stops accepting, lets every connection finish the request it is
//! answering (hyper's graceful shutdown closes idle ones at once) and returns when all are
//! closed.

use std::future::Future;
use std::io;
use std::pin::Pin;
use std::sync::Arc;
use std::sync::atomic::Ordering;
use std::task::{Context, Poll};
use std::time::Duration;

use axum::Router;
use hyper_util::rt::{TokioIo, TokioTimer};
use hyper_util::service::TowerToHyperService;
use tokio::io::{AsyncRead, AsyncWrite, ReadBuf};
use tokio::net::{TcpListener, TcpStream};
use tokio::time::Sleep;

use crate::metrics::Metrics;

/// Longest request head (request line and headers) read, bytes; past it hyper answers 431.
pub const MAX_HEAD_BYTES: usize = 16 * 1024;

/// Longest URI (path and query) answered, bytes; past it the router answers 414.
pub const MAX_URI_BYTES: usize = 8 * 1024;

/// Most header fields in one request; past it hyper answers 431.
pub const MAX_HEADERS: usize = 64;

/// A TCP stream whose writes may not stall for longer than `limit`: when the peer stops
/// reading and the socket's buffers are full, the pending write fails with `TimedOut` once
/// `limit` has passed without progress, and hyper closes the connection.
pub struct Deadlined {
    inner: TcpStream,
    limit: Duration,
    stalled: Option<Pin<Box<Sleep>>>,
}

impl Deadlined {
    /// Wraps `inner`.
    pub fn new(inner: TcpStream, limit: Duration) -> Self {
        Deadlined { inner, limit, stalled: None }
    }

    /// Called when a write could not proceed: starts the stall clock, or fails once it has
    /// run out. Polling the clock registers the waker, so the task wakes at the deadline even
    /// if the socket never becomes writable.
    fn check_stall(&mut self, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        let limit = self.limit;
        let sleep = self.stalled.get_or_insert_with(|| Box::pin(tokio::time::sleep(limit)));
        match sleep.as_mut().poll(cx) {
            Poll::Ready(()) => Poll::Ready(Err(io::Error::new(
                io::ErrorKind::TimedOut,
                "the client read nothing of the answer within the request time limit",
            ))),
            Poll::Pending => Poll::Pending,
        }
    }

    fn progress<T>(&mut self, cx: &mut Context<'_>, r: Poll<io::Result<T>>) -> Poll<io::Result<T>> {
        match r {
            Poll::Pending => match self.check_stall(cx) {
                Poll::Ready(Err(e)) => Poll::Ready(Err(e)),
                _ => Poll::Pending,
            },
            ready => {
                self.stalled = None;
                ready
            }
        }
    }
}

impl AsyncRead for Deadlined {
    fn poll_read(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &mut ReadBuf<'_>,
    ) -> Poll<io::Result<()>> {
        Pin::new(&mut self.inner).poll_read(cx, buf)
    }
}

impl AsyncWrite for Deadlined {
    fn poll_write(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &[u8],
    ) -> Poll<io::Result<usize>> {
        let r = Pin::new(&mut self.inner).poll_write(cx, buf);
        self.progress(cx, r)
    }

    fn poll_write_vectored(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        bufs: &[io::IoSlice<'_>],
    ) -> Poll<io::Result<usize>> {
        let r = Pin::new(&mut self.inner).poll_write_vectored(cx, bufs);
        self.progress(cx, r)
    }

    fn is_write_vectored(&self) -> bool {
        self.inner.is_write_vectored()
    }

    fn poll_flush(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        let r = Pin::new(&mut self.inner).poll_flush(cx);
        self.progress(cx, r)
    }

    fn poll_shutdown(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        let r = Pin::new(&mut self.inner).poll_shutdown(cx);
        self.progress(cx, r)
    }
}

/// Whether a connection ended because its client was too slow (head not sent in time, or
/// answer not read in time).
fn timed_out(e: &hyper::Error) -> bool {
    if e.is_timeout() {
        return true;
    }
    let mut source = std::error::Error::source(e);
    while let Some(s) = source {
        if s.downcast_ref::<io::Error>().is_some_and(|io| io.kind() == io::ErrorKind::TimedOut) {
            return true;
        }
        source = s.source();
    }
    false
}

/// Counts a connection while it is open.
struct Open(Arc<Metrics>);

impl Open {
    fn new(metrics: Arc<Metrics>) -> Open {
        Metrics::add(&metrics.connections_open, 1);
        Open(metrics)
    }
}

impl Drop for Open {
    fn drop(&mut self) {
        self.0.connections_open.fetch_sub(1, Ordering::Relaxed);
    }
}

/// Serves `router` on `listener` over HTTP/1.1 until `shutdown` completes, each connection
/// under the bounds of this module with `limit` as the time limit; then finishes the requests
/// in flight and returns once every connection is closed.
pub async fn serve(
    listener: TcpListener,
    router: Router,
    metrics: Arc<Metrics>,
    limit: Duration,
    shutdown: impl Future<Output = ()> + Send + 'static,
) -> io::Result<()> {
    let (stop_tx, stop_rx) = tokio::sync::watch::channel(false);
    let mut shutdown = std::pin::pin!(shutdown);
    let mut connections = tokio::task::JoinSet::new();
    loop {
        let stream = tokio::select! {
            accepted = listener.accept() => match accepted {
                Ok((stream, _)) => stream,
                Err(e) => {
                    // Out of file descriptors, or a connection reset before it was accepted:
                    // wait a little rather than spin, and keep serving.
                    tracing::warn!(error = %e, "accepting a connection failed");
                    tokio::time::sleep(Duration::from_millis(100)).await;
                    continue;
                }
            },
            () = &mut shutdown => break,
        };
        let _ = stream.set_nodelay(true);
        let service = TowerToHyperService::new(router.clone());
        let mut stop = stop_rx.clone();
        let open = Open::new(Arc::clone(&metrics));
        connections.spawn(async move {
            let _open = open;
            let io = TokioIo::new(Deadlined::new(stream, limit));
            let mut builder = hyper::server::conn::http1::Builder::new();
            builder
                .timer(TokioTimer::new())
                .header_read_timeout(limit)
                .max_buf_size(MAX_HEAD_BYTES.max(8192))
                .max_header_size(MAX_HEAD_BYTES)
                .max_headers(MAX_HEADERS);
            let conn = builder.serve_connection(io, service);
            let mut conn = std::pin::pin!(conn);
            let result = tokio::select! {
                result = conn.as_mut() => result,
                _ = stop.changed() => {
                    conn.as_mut().graceful_shutdown();
                    conn.await
                }
            };
            if let Err(e) = result {
                if timed_out(&e) {
                    Metrics::add(&_open.0.connections_timed_out, 1);
                    tracing::debug!(error = %e, "closed a connection whose client was too slow");
                } else {
                    tracing::debug!(error = %e, "a connection ended with an error");
                }
            }
        });
        // Reap finished connections so that the set holds only open ones.
        while connections.try_join_next().is_some() {}
    }
    drop(listener);
    let _ = stop_tx.send(true);
    while connections.join_next().await.is_some() {}
    Ok(())
}
