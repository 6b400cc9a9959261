//! A minimal HTTP/1.1 endpoint for `/metrics` (Prometheus text), `/healthz` (the
//! process runs) and `/readyz` (connected to the broker, the input subscriptions
//! acknowledged and the journal writable), and
//! the live page (`/`, `/api/...`, `page.rs`). One request per connection, head and
//! body within fixed sizes and one time limit; bound to loopback by default.

use std::net::SocketAddr;
use std::sync::Arc;
use std::sync::atomic::Ordering::Relaxed;
use std::time::Duration;

use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::net::{TcpListener, TcpStream};
use tokio::sync::Semaphore;
use tokio_util::sync::CancellationToken;
use tracing::warn;

use super::page::Web;
use crate::pipeline::metrics::Metrics;
use crate::web::request::{self, Head};

/// Binds the listener (errors here are configuration errors) and serves until cancelled.
pub async fn bind(addr: SocketAddr) -> std::io::Result<TcpListener> {
    TcpListener::bind(addr).await
}

/// Connections served at once at most; more wait in the kernel's backlog (holding no
/// descriptor of ours), so a flood of clients cannot starve the broker link.
const MAX_CONNECTIONS: usize = 32;
/// Time a client has to send its request (head and body), in all; the answer has as long.
const REQUEST_TIME: Duration = Duration::from_secs(5);

pub async fn serve(
    listener: TcpListener,
    metrics: Arc<Metrics>,
    web: Option<Arc<Web>>,
    cancel: CancellationToken,
) {
    let permits = Arc::new(Semaphore::new(MAX_CONNECTIONS));
    let mut backoff = Duration::from_millis(50);
    let mut accept_errors = 0u64;
    loop {
        let permit = tokio::select! {
            _ = cancel.cancelled() => return,
            p = permits.clone().acquire_owned() => match p {
                Ok(p) => p,
                Err(_) => return,
            },
        };
        let accepted = tokio::select! {
            _ = cancel.cancelled() => return,
            a = listener.accept() => a,
        };
        let mut stream = match accepted {
            Ok((stream, _)) => {
                backoff = Duration::from_millis(50);
                stream
            }
            Err(e) => {
                // Out of descriptors, or the network: wait instead of spinning.
                accept_errors += 1;
                if accept_errors == 1 || accept_errors.is_multiple_of(100) {
                    warn!(error = %e, errors = accept_errors, retry_in_ms = backoff.as_millis() as u64, "http accept failed");
                }
                drop(permit);
                tokio::select! {
                    _ = cancel.cancelled() => return,
                    _ = tokio::time::sleep(backoff) => {}
                }
                backoff = (backoff * 2).min(Duration::from_secs(1));
                continue;
            }
        };
        let metrics = metrics.clone();
        let web = web.clone();
        tokio::spawn(async move {
            let _permit = permit;
            let resp = match tokio::time::timeout(REQUEST_TIME, read_request(&mut stream)).await {
                Ok(Ok((head, body))) => respond(&head, &body, &metrics, web.as_deref()).await,
                Ok(Err(e)) => text(e.status(), &format!("{e}\n")),
                Err(_) => text(408, "request not received in time\n"),
            };
            let write = async {
                let _ = stream.write_all(resp.as_bytes()).await;
                let _ = stream.shutdown().await;
            };
            let _ = tokio::time::timeout(REQUEST_TIME, write).await;
        });
    }
}

/// Why a request could not be read.
#[derive(Debug, thiserror::Error)]
enum ReadError {
    #[error("request head over {} bytes or incomplete", request::MAX_HEAD)]
    Head,
    #[error("{0}")]
    Request(#[from] request::RequestError),
    #[error("connection closed before the body arrived")]
    Body,
}

impl ReadError {
    fn status(&self) -> u16 {
        match self {
            ReadError::Request(request::RequestError::TooLarge) => 413,
            ReadError::Head => 431,
            _ => 400,
        }
    }
}

/// Reads the head (up to a blank line, at most `MAX_HEAD`), then the body the head
/// announces (at most `MAX_BODY`), however they are split.
async fn read_request(stream: &mut TcpStream) -> Result<(Head, Vec<u8>), ReadError> {
    let mut buf = vec![0u8; request::MAX_HEAD + request::MAX_BODY];
    let mut n = 0;
    let end = loop {
        if let Some(i) = buf[..n].windows(4).position(|w| w == b"\r\n\r\n") {
            break i;
        }
        if n >= request::MAX_HEAD {
            return Err(ReadError::Head);
        }
        match stream.read(&mut buf[n..request::MAX_HEAD]).await {
            Ok(0) | Err(_) => return Err(ReadError::Head),
            Ok(k) => n += k,
        }
    };
    let head = Head::parse(&String::from_utf8_lossy(&buf[..end]))?;
    let body_start = end + 4;
    let want = body_start + head.content_length;
    while n < want {
        match stream.read(&mut buf[n..want]).await {
            Ok(0) | Err(_) => return Err(ReadError::Body),
            Ok(k) => n += k,
        }
    }
    buf.truncate(want);
    Ok((head, buf.split_off(body_start)))
}

fn reason(status: u16) -> &'static str {
    match status {
        200 => "OK",
        202 => "Accepted",
        400 => "Bad Request",
        401 => "Unauthorized",
        403 => "Forbidden",
        404 => "Not Found",
        405 => "Method Not Allowed",
        408 => "Request Timeout",
        413 => "Content Too Large",
        415 => "Unsupported Media Type",
        429 => "Too Many Requests",
        431 => "Request Header Fields Too Large",
        503 => "Service Unavailable",
        _ => "Internal Server Error",
    }
}

fn full(status: u16, ctype: &str, body: &str, extra: &[String]) -> String {
    let mut head = format!(
        "HTTP/1.1 {status} {}\r\nContent-Type: {ctype}\r\nContent-Length: {}\r\nConnection: close\r\nCache-Control: no-store\r\nX-Content-Type-Options: nosniff\r\n",
        reason(status),
        body.len()
    );
    if ctype.starts_with("text/html") {
        // Inline script and style only; nothing from elsewhere; never framed.
        head.push_str("Content-Security-Policy: default-src 'none'; script-src 'unsafe-inline'; style-src 'unsafe-inline'; connect-src 'self'; img-src 'self' data:; form-action 'none'; frame-ancestors 'none'; base-uri 'none'\r\nX-Frame-Options: DENY\r\nReferrer-Policy: no-referrer\r\n");
    }
    for h in extra {
        head.push_str(h);
        head.push_str("\r\n");
    }
    head.push_str("\r\n");
    head.push_str(body);
    head
}

fn text(status: u16, body: &str) -> String {
    full(status, "text/plain", body, &[])
}

async fn respond(head: &Head, body: &[u8], metrics: &Metrics, web: Option<&Web>) -> String {
    match (head.method.as_str(), head.path.as_str()) {
        ("GET", "/metrics") => full(200, "text/plain; version=0.0.4", &metrics.render(), &[]),
        ("GET", "/healthz") => text(200, "ok\n"),
        ("GET", "/readyz") => match not_ready(metrics) {
            None => text(200, "ready\n"),
            Some(why) => text(503, &format!("not ready: {why}\n")),
        },
        _ => match web {
            Some(w) => match w.handle(head, body).await {
                Some(r) => full(r.status, r.ctype, &r.body, &r.headers),
                None if head.method == "GET" || head.method == "POST" => text(404, "not found\n"),
                None => text(405, "GET or POST only\n"),
            },
            None if head.method == "GET" => text(404, "not found\n"),
            None => text(405, "GET only\n"),
        },
    }
}

/// Why the daemon is not ready, if it is not: starting, a broker connection down, or
/// results held in memory because the journal cannot be written.
fn not_ready(metrics: &Metrics) -> Option<String> {
    let held = metrics.journal_held.load(Relaxed);
    if !metrics.ready.load(Relaxed) {
        Some("starting".into())
    } else if held > 0 {
        Some(format!(
            "journal cannot be written ({held} results held in memory); check free space and permissions of the journal folder"
        ))
    } else if !(metrics.connected.load(Relaxed) && metrics.input_connected.load(Relaxed)) {
        Some("broker not connected".into())
    } else if !metrics.input_subscribed.load(Relaxed) {
        Some("input subscriptions not yet acknowledged by the broker".into())
    } else {
        None
    }
}

#[cfg(test)]
mod tests {
    use std::sync::atomic::Ordering::Relaxed;

    use super::not_ready;
    use crate::pipeline::metrics::Metrics;

    #[test]
    fn ready_only_once_both_connections_are_up_and_the_inputs_subscribed() {
        let m = Metrics::new(&["r1".to_string()]);
        assert_eq!(not_ready(&m).as_deref(), Some("starting"));
        m.ready.store(true, Relaxed);
        assert_eq!(not_ready(&m).as_deref(), Some("broker not connected"));
        m.connected.store(true, Relaxed);
        m.input_connected.store(true, Relaxed);
        // Connected, but an input published now could reach the broker before the
        // daemon's SUBSCRIBE and be lost: not ready yet.
        assert_eq!(
            not_ready(&m).as_deref(),
            Some("input subscriptions not yet acknowledged by the broker")
        );
        m.input_subscribed.store(true, Relaxed);
        assert_eq!(not_ready(&m), None);
        m.journal_held.store(3, Relaxed);
        assert!(not_ready(&m).is_some_and(|w| w.starts_with("journal cannot be written")));
    }
}
