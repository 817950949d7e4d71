//! Answers to requests that cannot be read as HTTP/1.1, as problem
//! documents.
//!
//! hyper reads the request head, and when it cannot (a garbled request
//! line or header, a head over `server.max_header_bytes`, a target too
//! long) it writes a bare answer itself, a status line and
//! `content-length: 0`, before any of the service's code sees a request,
//! then closes the connection. hyper offers no hook for that answer, so the
//! connection's stream is wrapped: a response head hyper writes with one of
//! those statuses and an empty body is replaced by the same status with a
//! problem document, `connection: close`. The service itself never answers
//! those statuses with an empty body (every error it makes is a problem
//! document), so nothing else is touched.

use std::{
    io,
    pin::Pin,
    task::{Context, Poll, ready},
};

use axum::http::StatusCode;
use tokio::io::{AsyncRead, AsyncWrite, ReadBuf};

use super::error::Problem;

/// A connection's stream whose automatic parse-error answers become
/// problem documents.
pub struct ProblemAnswers<S> {
    inner: S,
    /// A replacement answer not yet written in full.
    pending: Vec<u8>,
    written: usize,
    max_header_bytes: usize,
}

impl<S> ProblemAnswers<S> {
    pub fn new(inner: S, max_header_bytes: usize) -> Self {
        Self {
            inner,
            pending: Vec::new(),
            written: 0,
            max_header_bytes,
        }
    }
}

/// The statuses hyper answers by itself for a head it cannot read.
fn automatic(buf: &[u8]) -> Option<StatusCode> {
    // The status line first, so a body write costs a 13-byte compare.
    let status = match buf.get(..13)? {
        b"HTTP/1.1 400 " => StatusCode::BAD_REQUEST,
        b"HTTP/1.1 414 " => StatusCode::URI_TOO_LONG,
        b"HTTP/1.1 431 " => StatusCode::REQUEST_HEADER_FIELDS_TOO_LARGE,
        _ => return None,
    };
    // hyper's automatic head is a status line, `content-length` and `date`.
    let head = &buf[..buf.len().min(1024)];
    let end = head.windows(4).position(|w| w == b"\r\n\r\n")?;
    let head = std::str::from_utf8(&head[..end + 4]).ok()?;
    head.to_ascii_lowercase()
        .contains("\r\ncontent-length: 0\r\n")
        .then_some(status)
}

/// The problem document for `status`, as a whole HTTP/1.1 response.
fn replacement(status: StatusCode, max_header_bytes: usize) -> Vec<u8> {
    let problem = match status {
        StatusCode::REQUEST_HEADER_FIELDS_TOO_LARGE => {
            Problem::new(status, "header-too-large", "Request header too large").detail(format!(
                "The request line and headers together are over the server's limit \
             (server.max_header_bytes = {max_header_bytes} bytes)."
            ))
        }
        StatusCode::URI_TOO_LONG => Problem::new(status, "uri-too-long", "Request target too long")
            .detail("The request target (path and query) is longer than the server reads."),
        _ => Problem::new(status, "bad-request", "Bad request").detail(
            "The request line or a header could not be read as HTTP/1.1 (RFC 9112); \
             the connection is closed.",
        ),
    };
    problem.to_closing_http1("")
}

impl<S: AsyncWrite + Unpin> ProblemAnswers<S> {
    /// Writes what is left of a replacement answer.
    fn drain(&mut self, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        while self.written < self.pending.len() {
            let n =
                ready!(Pin::new(&mut self.inner).poll_write(cx, &self.pending[self.written..]))?;
            if n == 0 {
                return Poll::Ready(Err(io::ErrorKind::WriteZero.into()));
            }
            self.written += n;
        }
        Poll::Ready(Ok(()))
    }

    /// Takes `buf` as a replacement when it is an automatic answer.
    fn replaces(&mut self, buf: &[u8]) -> bool {
        match automatic(buf) {
            Some(status) => {
                tracing::info!(status = status.as_u16(), "unreadable request answered");
                self.pending = replacement(status, self.max_header_bytes);
                self.written = 0;
                true
            }
            None => false,
        }
    }
}

impl<S: AsyncRead + Unpin> AsyncRead for ProblemAnswers<S> {
    fn poll_read(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &mut ReadBuf<'_>,
    ) -> Poll<io::Result<()>> {
        Pin::new(&mut self.inner).poll_read(cx, buf)
    }
}

impl<S: AsyncWrite + Unpin> AsyncWrite for ProblemAnswers<S> {
    fn poll_write(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &[u8],
    ) -> Poll<io::Result<usize>> {
        ready!(self.drain(cx))?;
        if self.replaces(buf) {
            // Accepted whole; written by the drains that follow.
            let _ = self.drain(cx)?;
            return Poll::Ready(Ok(buf.len()));
        }
        Pin::new(&mut self.inner).poll_write(cx, buf)
    }

    fn poll_write_vectored(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        bufs: &[io::IoSlice<'_>],
    ) -> Poll<io::Result<usize>> {
        ready!(self.drain(cx))?;
        // hyper encodes a head into one buffer, so the first slice holds
        // all of it.
        if let Some(first) = bufs.iter().find(|b| !b.is_empty())
            && self.replaces(first)
        {
            let _ = self.drain(cx)?;
            return Poll::Ready(Ok(bufs.iter().map(|b| b.len()).sum()));
        }
        Pin::new(&mut self.inner).poll_write_vectored(cx, bufs)
    }

    fn is_write_vectored(&self) -> bool {
        self.inner.is_write_vectored()
    }

    fn poll_flush(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        ready!(self.drain(cx))?;
        Pin::new(&mut self.inner).poll_flush(cx)
    }

    fn poll_shutdown(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        ready!(self.drain(cx))?;
        Pin::new(&mut self.inner).poll_shutdown(cx)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn only_empty_answers_with_parse_error_statuses_are_replaced() {
        let bare =
            b"HTTP/1.1 431 Request Header Fields Too Large\r\ncontent-length: 0\r\ndate: x\r\n\r\n";
        assert_eq!(
            automatic(bare),
            Some(StatusCode::REQUEST_HEADER_FIELDS_TOO_LARGE)
        );
        assert_eq!(
            automatic(b"HTTP/1.1 400 Bad Request\r\ncontent-length: 0\r\n\r\n"),
            Some(StatusCode::BAD_REQUEST)
        );
        // The service's own 400s carry a problem body.
        let ours = b"HTTP/1.1 400 Bad Request\r\ncontent-type: application/problem+json\r\ncontent-length: 120\r\n\r\n{";
        assert_eq!(automatic(ours), None);
        assert_eq!(
            automatic(b"HTTP/1.1 200 OK\r\ncontent-length: 0\r\n\r\n"),
            None
        );
        // A body chunk is not a head.
        assert_eq!(automatic(b"{\"status\":\"ok\"}"), None);
        assert_eq!(
            automatic(b"HTTP/1.1 400 Bad Request\r\ncontent-length: 0\r\n"),
            None
        );
    }

    #[test]
    fn the_replacement_is_a_whole_problem_response() {
        let r = String::from_utf8(replacement(
            StatusCode::REQUEST_HEADER_FIELDS_TOO_LARGE,
            16384,
        ))
        .expect("text");
        let (head, body) = r.split_once("\r\n\r\n").expect("a head");
        assert!(head.starts_with("HTTP/1.1 431 Request Header Fields Too Large\r\n"));
        assert!(head.contains("content-type: application/problem+json"));
        assert!(head.contains(&format!("content-length: {}", body.len())));
        let p: serde_json::Value = serde_json::from_str(body).expect("json");
        assert_eq!(p["status"], 431);
        assert_eq!(p["type"], "/problems/header-too-large");
        assert!(p["detail"].as_str().is_some_and(|d| d.contains("16384")));
    }
}
