//! Connections before any request is trusted: a cap on how many are open
//! at once, and deadlines, so idle or trickling clients cannot exhaust the
//! server's file descriptors and starve a real request.
//!
//! - At most `Limits::max_connections` are open; the next waits in the
//!   kernel's queue until one closes, instead of being accepted into a
//!   process that has run out of descriptors.
//! - A new connection must deliver its first request's headers within
//!   `Limits::header_timeout` of being accepted (a slow, trickling sender
//!   does not extend it).
//! - After that, a connection with no bytes read or written for
//!   `Limits::idle_timeout` is closed (an idle keep-alive connection; long
//!   enough for any answer, which writes as it goes when streamed).
//!
//! invariant: every accepted connection holds one permit until it closes,
//! and every read past a deadline fails, which makes hyper close it.

use std::future::Future;
use std::io;
use std::pin::Pin;
use std::sync::Arc;
use std::task::{Context, Poll, ready};
use std::time::Duration;
use tokio::io::{AsyncRead, AsyncWrite, ReadBuf};
use tokio::net::{TcpListener, TcpStream};
use tokio::sync::{OwnedSemaphorePermit, Semaphore};
use tokio::time::{Instant, Sleep};

/// A listener that caps open connections and puts deadlines on them.
pub struct Guarded {
    inner: TcpListener,
    permits: Arc<Semaphore>,
    header_timeout: Duration,
    idle_timeout: Duration,
}

impl Guarded {
    pub fn new(inner: TcpListener, limits: &super::Limits) -> Guarded {
        Guarded {
            inner,
            permits: Arc::new(Semaphore::new(limits.max_connections.max(1))),
            header_timeout: limits.header_timeout,
            idle_timeout: limits.idle_timeout,
        }
    }
}

impl axum::serve::Listener for Guarded {
    type Io = GuardedIo;
    type Addr = std::net::SocketAddr;

    async fn accept(&mut self) -> (GuardedIo, std::net::SocketAddr) {
        let permit = self
            .permits
            .clone()
            .acquire_owned()
            .await
            .expect("the semaphore is never closed");
        let (stream, addr) = axum::serve::Listener::accept(&mut self.inner).await;
        let _ = stream.set_nodelay(true);
        let io = GuardedIo {
            stream,
            _permit: permit,
            deadline: Box::pin(tokio::time::sleep(self.header_timeout)),
            headers_seen: false,
            tail: [0; 3],
            idle: self.idle_timeout,
        };
        (io, addr)
    }

    fn local_addr(&self) -> io::Result<std::net::SocketAddr> {
        self.inner.local_addr()
    }
}

/// One connection: the stream, its permit and its deadline.
pub struct GuardedIo {
    stream: TcpStream,
    _permit: OwnedSemaphorePermit,
    deadline: Pin<Box<Sleep>>,
    /// Whether the first request's headers (up to a blank line) have come.
    headers_seen: bool,
    /// The last bytes read, to find a "\r\n\r\n" split across reads.
    tail: [u8; 3],
    idle: Duration,
}

impl GuardedIo {
    fn active(&mut self) {
        if self.headers_seen {
            self.deadline.as_mut().reset(Instant::now() + self.idle);
        }
    }

    fn scan(&mut self, bytes: &[u8]) {
        if self.headers_seen {
            return;
        }
        let mut joined = Vec::with_capacity(3 + bytes.len());
        joined.extend_from_slice(&self.tail);
        joined.extend_from_slice(bytes);
        if joined.windows(4).any(|w| w == b"\r\n\r\n") {
            self.headers_seen = true;
        }
        let n = joined.len();
        self.tail.copy_from_slice(&joined[n.saturating_sub(3)..]);
    }
}

impl AsyncRead for GuardedIo {
    fn poll_read(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &mut ReadBuf<'_>,
    ) -> Poll<io::Result<()>> {
        let before = buf.filled().len();
        match Pin::new(&mut self.stream).poll_read(cx, buf) {
            Poll::Ready(Ok(())) => {
                let new = &buf.filled()[before..];
                if !new.is_empty() {
                    self.scan(new);
                    self.active();
                }
                Poll::Ready(Ok(()))
            }
            Poll::Ready(Err(e)) => Poll::Ready(Err(e)),
            Poll::Pending => {
                ready!(self.deadline.as_mut().poll(cx));
                Poll::Ready(Err(io::Error::new(
                    io::ErrorKind::TimedOut,
                    if self.headers_seen {
                        "connection idle too long"
                    } else {
                        "request headers too slow"
                    },
                )))
            }
        }
    }
}

impl AsyncWrite for GuardedIo {
    fn poll_write(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &[u8],
    ) -> Poll<io::Result<usize>> {
        let r = Pin::new(&mut self.stream).poll_write(cx, buf);
        if matches!(r, Poll::Ready(Ok(n)) if n > 0) {
            self.active();
        }
        r
    }

    fn poll_flush(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        Pin::new(&mut self.stream).poll_flush(cx)
    }

    fn poll_shutdown(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        Pin::new(&mut self.stream).poll_shutdown(cx)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_blank_line_is_found_across_reads() {
        let rt = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()
            .unwrap();
        rt.block_on(async {
            let l = TcpListener::bind("127.0.0.1:0").await.unwrap();
            let addr = l.local_addr().unwrap();
            let _c = TcpStream::connect(addr).await.unwrap();
            let (s, _) = l.accept().await.unwrap();
            let sem = Arc::new(Semaphore::new(1));
            let mut io = GuardedIo {
                stream: s,
                _permit: sem.acquire_owned().await.unwrap(),
                deadline: Box::pin(tokio::time::sleep(Duration::from_secs(1))),
                headers_seen: false,
                tail: [0; 3],
                idle: Duration::from_secs(1),
            };
            io.scan(b"GET / HTTP/1.1\r\nHost: x\r");
            assert!(!io.headers_seen);
            io.scan(b"\n\r");
            assert!(!io.headers_seen);
            io.scan(b"\nbody");
            assert!(io.headers_seen);
        });
    }
}
