//! A TCP forwarder that can be switched off, for the demo's broker drop-outs.
//!
//! Clients connect to the proxy on 127.0.0.1; each connection is forwarded to the
//! upstream address. [`DropoutProxy::set_up`]`(false)` closes every forwarded
//! connection at once and, until the proxy is set up again, accepts new connections
//! only to close them: to a client it looks like a broker that went away and refuses
//! to talk. Dropping the proxy stops it and closes its connections.

use std::io;
use std::net::{Ipv4Addr, SocketAddr};

use tokio::io::copy_bidirectional;
use tokio::net::{TcpListener, TcpStream};
use tokio::sync::watch;
use tokio::task::JoinHandle;
use tracing::{debug, warn};

/// A running drop-out proxy (see the module docs). Needs a tokio runtime.
#[derive(Debug)]
pub struct DropoutProxy {
    port: u16,
    upstream: SocketAddr,
    state: watch::Sender<State>,
    accept: JoinHandle<()>,
}

/// Up or down, and how many times it has gone down: a connection made before a
/// drop-out is cut even if the proxy is up again before the connection's task looks.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
struct State {
    up: bool,
    cuts: u64,
}

impl DropoutProxy {
    /// Listens on 127.0.0.1:`listen_port` (0: any free port) and forwards to `upstream`.
    /// Starts up.
    pub async fn start(listen_port: u16, upstream: SocketAddr) -> io::Result<DropoutProxy> {
        let listener = TcpListener::bind((Ipv4Addr::LOCALHOST, listen_port)).await?;
        let port = listener.local_addr()?.port();
        let (state, rx) = watch::channel(State { up: true, cuts: 0 });
        let accept = tokio::spawn(accept_loop(listener, upstream, rx));
        debug!(port, %upstream, "drop-out proxy listening");
        Ok(DropoutProxy {
            port,
            upstream,
            state,
            accept,
        })
    }

    /// The port clients connect to on 127.0.0.1.
    pub fn port(&self) -> u16 {
        self.port
    }

    pub fn upstream(&self) -> SocketAddr {
        self.upstream
    }

    /// Up: forward. Down: close every connection now and refuse new ones.
    pub fn set_up(&self, up: bool) {
        let changed = self.state.send_if_modified(|s| {
            if s.up == up {
                return false;
            }
            s.up = up;
            if !up {
                s.cuts += 1;
            }
            true
        });
        if changed {
            debug!(port = self.port, up, "drop-out proxy switched");
        }
    }

    pub fn is_up(&self) -> bool {
        self.state.borrow().up
    }
}

impl Drop for DropoutProxy {
    fn drop(&mut self) {
        // Stops accepting; the connections end when they see the sender gone.
        self.accept.abort();
    }
}

async fn accept_loop(listener: TcpListener, upstream: SocketAddr, state: watch::Receiver<State>) {
    loop {
        match listener.accept().await {
            Ok((client, peer)) => {
                let now = *state.borrow();
                if now.up {
                    tokio::spawn(forward(client, peer, upstream, state.clone(), now.cuts));
                } else {
                    debug!(%peer, "drop-out proxy is down: connection closed");
                    drop(client);
                }
            }
            Err(e) => {
                // Out of descriptors and the like: wait a little rather than spin.
                warn!(error = %e, "drop-out proxy: accept failed");
                tokio::time::sleep(std::time::Duration::from_millis(50)).await;
            }
        }
    }
}

/// Resolves when the proxy has gone down since `cuts`, or was dropped.
async fn gone_down(state: &mut watch::Receiver<State>, cuts: u64) {
    // An error means the proxy was dropped: treat it as down.
    let _ = state.wait_for(|s| !s.up || s.cuts != cuts).await;
}

async fn forward(
    mut client: TcpStream,
    peer: SocketAddr,
    upstream: SocketAddr,
    mut state: watch::Receiver<State>,
    cuts: u64,
) {
    let mut server = tokio::select! {
        r = TcpStream::connect(upstream) => match r {
            Ok(s) => s,
            Err(e) => {
                debug!(%peer, %upstream, error = %e, "drop-out proxy: upstream refused");
                return;
            }
        },
        _ = gone_down(&mut state, cuts) => return,
    };
    let _ = client.set_nodelay(true);
    let _ = server.set_nodelay(true);
    tokio::select! {
        r = copy_bidirectional(&mut client, &mut server) => {
            if let Err(e) = r {
                debug!(%peer, error = %e, "drop-out proxy: connection ended");
            }
        }
        _ = gone_down(&mut state, cuts) => {
            debug!(%peer, "drop-out proxy: connection cut");
        }
    }
    // Both streams close as they drop here.
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::time::Duration;
    use tokio::io::{AsyncReadExt, AsyncWriteExt};

    /// An upstream that echoes what it reads.
    async fn echo_server() -> SocketAddr {
        let l = TcpListener::bind((Ipv4Addr::LOCALHOST, 0))
            .await
            .expect("bind");
        let addr = l.local_addr().expect("addr");
        tokio::spawn(async move {
            while let Ok((mut s, _)) = l.accept().await {
                tokio::spawn(async move {
                    let mut buf = [0u8; 1024];
                    loop {
                        match s.read(&mut buf).await {
                            Ok(0) | Err(_) => return,
                            Ok(n) => {
                                if s.write_all(&buf[..n]).await.is_err() {
                                    return;
                                }
                            }
                        }
                    }
                });
            }
        });
        addr
    }

    async fn echo_roundtrip(s: &mut TcpStream, msg: &[u8]) {
        s.write_all(msg).await.expect("write");
        let mut got = vec![0u8; msg.len()];
        s.read_exact(&mut got).await.expect("read");
        assert_eq!(got, msg);
    }

    /// True when the peer has closed (EOF or reset) within a second.
    async fn closed(s: &mut TcpStream) -> bool {
        let mut buf = [0u8; 16];
        matches!(
            tokio::time::timeout(Duration::from_secs(1), s.read(&mut buf)).await,
            Ok(Ok(0)) | Ok(Err(_))
        )
    }

    #[tokio::test]
    async fn forwards_cuts_refuses_and_recovers() {
        let upstream = echo_server().await;
        let proxy = DropoutProxy::start(0, upstream).await.expect("proxy");
        assert_ne!(proxy.port(), 0);
        assert!(proxy.is_up());
        let at = (Ipv4Addr::LOCALHOST, proxy.port());
        let mut a = TcpStream::connect(at).await.expect("connect");
        echo_roundtrip(&mut a, b"hello").await;
        let mut b = TcpStream::connect(at).await.expect("connect");
        echo_roundtrip(&mut b, b"second").await;

        proxy.set_up(false);
        assert!(!proxy.is_up());
        assert!(closed(&mut a).await, "a still open");
        assert!(closed(&mut b).await, "b still open");
        // While down a new connection is accepted and closed at once.
        let mut c = TcpStream::connect(at).await.expect("connect");
        let _ = c.write_all(b"anyone?").await;
        assert!(closed(&mut c).await, "c was served while down");

        proxy.set_up(true);
        let mut d = TcpStream::connect(at).await.expect("connect");
        echo_roundtrip(&mut d, b"back again").await;

        // A drop-out shorter than the connection task's notice still cuts it.
        proxy.set_up(false);
        proxy.set_up(true);
        assert!(closed(&mut d).await, "d survived a short drop-out");
        let mut e = TcpStream::connect(at).await.expect("connect");
        echo_roundtrip(&mut e, b"once more").await;

        drop(proxy);
        assert!(closed(&mut e).await, "e survived the proxy");
    }
}
