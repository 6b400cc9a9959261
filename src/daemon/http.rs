//! A minimal HTTP/1.1 endpoint for `/metrics` (Prometheus text), `/healthz` (the
//! process runs) and `/readyz` (connected to the broker and the journal writable).
//! One request per connection, GET only; bound to loopback by default.

use std::net::SocketAddr;
use std::sync::Arc;
use std::sync::atomic::Ordering::Relaxed;
use std::time::Duration;

use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::net::TcpListener;
use tokio::sync::Semaphore;
use tokio_util::sync::CancellationToken;
use tracing::warn;

use crate::pipeline::metrics::Metrics;

/// Binds the listener (errors here are configuration errors) and serves until cancelled.
pub async fn bind(addr: SocketAddr) -> std::io::Result<TcpListener> {
    TcpListener::bind(addr).await
}

/// Connections served at once at most; more wait in the kernel's backlog (holding no
/// descriptor of ours), so a flood of clients cannot starve the broker link.
const MAX_CONNECTIONS: usize = 32;
/// Time a client has to send its request head, in all.
const REQUEST_TIME: Duration = Duration::from_secs(5);

pub async fn serve(listener: TcpListener, metrics: Arc<Metrics>, cancel: CancellationToken) {
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
        tokio::spawn(async move {
            // Read the request head (up to a blank line or 4 KiB), however it is split.
            let _permit = permit;
            let mut buf = [0u8; 4096];
            let mut n = 0;
            let deadline = tokio::time::Instant::now() + REQUEST_TIME;
            while n < buf.len() && !buf[..n].windows(4).any(|w| w == b"\r\n\r\n") {
                match tokio::time::timeout_at(deadline, stream.read(&mut buf[n..])).await {
                    Ok(Ok(0)) | Ok(Err(_)) | Err(_) => break,
                    Ok(Ok(k)) => n += k,
                }
            }
            let head = String::from_utf8_lossy(&buf[..n]);
            let mut parts = head.split_whitespace();
            let (method, path) = (parts.next().unwrap_or(""), parts.next().unwrap_or(""));
            let (status, ctype, body) = match (method, path) {
                ("GET", "/metrics") => ("200 OK", "text/plain; version=0.0.4", metrics.render()),
                ("GET", "/healthz") => ("200 OK", "text/plain", "ok\n".to_string()),
                ("GET", "/readyz") => match not_ready(&metrics) {
                    None => ("200 OK", "text/plain", "ready\n".to_string()),
                    Some(why) => (
                        "503 Service Unavailable",
                        "text/plain",
                        format!("not ready: {why}\n"),
                    ),
                },
                ("GET", _) => ("404 Not Found", "text/plain", "not found\n".to_string()),
                _ => (
                    "405 Method Not Allowed",
                    "text/plain",
                    "GET only\n".to_string(),
                ),
            };
            let resp = format!(
                "HTTP/1.1 {status}\r\nContent-Type: {ctype}\r\nContent-Length: {}\r\nConnection: close\r\n\r\n{body}",
                body.len()
            );
            let write = async {
                let _ = stream.write_all(resp.as_bytes()).await;
                let _ = stream.shutdown().await;
            };
            let _ = tokio::time::timeout(REQUEST_TIME, write).await;
        });
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
    } else {
        None
    }
}
