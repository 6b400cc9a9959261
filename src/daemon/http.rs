//! A minimal HTTP/1.1 endpoint for `/metrics` (Prometheus text), `/healthz` (the
//! process runs) and `/readyz` (connected to the broker and the journal writable).
//! One request per connection, GET only; bound to loopback by default.

use std::net::SocketAddr;
use std::sync::Arc;
use std::sync::atomic::Ordering::Relaxed;
use std::time::Duration;

use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::net::TcpListener;
use tokio_util::sync::CancellationToken;

use crate::pipeline::metrics::Metrics;

/// Binds the listener (errors here are configuration errors) and serves until cancelled.
pub async fn bind(addr: SocketAddr) -> std::io::Result<TcpListener> {
    TcpListener::bind(addr).await
}

pub async fn serve(listener: TcpListener, metrics: Arc<Metrics>, cancel: CancellationToken) {
    loop {
        let accepted = tokio::select! {
            _ = cancel.cancelled() => return,
            a = listener.accept() => a,
        };
        let Ok((mut stream, _)) = accepted else {
            continue;
        };
        let metrics = metrics.clone();
        tokio::spawn(async move {
            // Read the request head (up to a blank line or 4 KiB), however it is split.
            let mut buf = [0u8; 4096];
            let mut n = 0;
            while n < buf.len() && !buf[..n].windows(4).any(|w| w == b"\r\n\r\n") {
                match tokio::time::timeout(Duration::from_secs(5), stream.read(&mut buf[n..])).await
                {
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
                ("GET", "/readyz") => {
                    if metrics.ready.load(Relaxed)
                        && metrics.connected.load(Relaxed)
                        && metrics.input_connected.load(Relaxed)
                    {
                        ("200 OK", "text/plain", "ready\n".to_string())
                    } else {
                        (
                            "503 Service Unavailable",
                            "text/plain",
                            "not ready: broker not connected\n".to_string(),
                        )
                    }
                }
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
            let _ = stream.write_all(resp.as_bytes()).await;
            let _ = stream.shutdown().await;
        });
    }
}
