//! An MQTT broker inside the process, for the one-command demo (feature `demo-broker`).
//!
//! rumqttd 0.20 is configured in code (no configuration file): one MQTT 3.1.1 listener
//! on 127.0.0.1, no TLS, no authentication, no console, no metrics or Prometheus
//! endpoint. It is meant for the demo on one machine, never for a plant network.
//!
//! rumqttd has no shutdown call: [`Broker::start`](rumqttd::Broker::start) blocks for
//! the life of its listener, so it runs on a background thread that lives until the
//! process exits. Dropping [`EmbeddedBroker`] does not stop it.

use std::net::{Ipv4Addr, SocketAddr, SocketAddrV4, TcpListener, TcpStream};
use std::thread::JoinHandle;
use std::time::{Duration, Instant};

use rumqttd::{Config, ConnectionSettings, RouterConfig, ServerSettings};

/// Largest MQTT payload the embedded broker accepts.
pub const MAX_PAYLOAD_BYTES: usize = 256 * 1024;
/// Most client connections at once.
pub const MAX_CONNECTIONS: usize = 100;
/// How long [`start_embedded_broker`] waits for the listener.
pub const START_TIMEOUT: Duration = Duration::from_secs(5);

/// Why the embedded broker did not start.
#[derive(Debug, thiserror::Error)]
pub enum BrokerError {
    #[error("embedded broker: 127.0.0.1:{port} is not free ({source}); choose another port")]
    PortInUse { port: u16, source: std::io::Error },
    #[error("embedded broker: could not start its thread: {0}")]
    Thread(std::io::Error),
    #[error("embedded broker on 127.0.0.1:{port} stopped while starting; see the log")]
    Stopped { port: u16 },
    #[error(
        "embedded broker on 127.0.0.1:{port} did not accept connections within {} s",
        START_TIMEOUT.as_secs()
    )]
    Timeout { port: u16 },
}

/// A running embedded broker. It keeps running after this value is dropped (see the
/// module docs).
#[derive(Debug)]
pub struct EmbeddedBroker {
    addr: SocketAddr,
    thread: JoinHandle<()>,
}

impl EmbeddedBroker {
    /// Where clients connect (always 127.0.0.1).
    pub fn addr(&self) -> SocketAddr {
        self.addr
    }

    pub fn port(&self) -> u16 {
        self.addr.port()
    }

    /// False once the broker's thread has ended (its listener failed).
    pub fn is_running(&self) -> bool {
        !self.thread.is_finished()
    }
}

/// A TCP port on 127.0.0.1 that was free a moment ago (0 if none could be had).
/// Another process may take it before it is used; callers should be ready for
/// [`BrokerError::PortInUse`].
pub fn free_port() -> u16 {
    TcpListener::bind((Ipv4Addr::LOCALHOST, 0))
        .and_then(|l| l.local_addr())
        .map_or(0, |a| a.port())
}

fn config(addr: SocketAddr) -> Config {
    let connections = ConnectionSettings {
        connection_timeout_ms: 10_000,
        max_payload_size: MAX_PAYLOAD_BYTES,
        max_inflight_count: 100,
        auth: None,
        external_auth: None,
        dynamic_filters: true,
    };
    let server = ServerSettings {
        name: "eqwatch-demo-v4".to_string(),
        listen: addr,
        tls: None,
        next_connection_delay_ms: 1,
        connections,
    };
    Config {
        id: 0,
        router: RouterConfig {
            max_connections: MAX_CONNECTIONS,
            max_outgoing_packet_count: 200,
            // Each segment must hold the largest packet; memory grows only with use.
            max_segment_size: 4 * MAX_PAYLOAD_BYTES,
            max_segment_count: 8,
            custom_segment: None,
            initialized_filters: None,
            shared_subscriptions_strategy: Default::default(),
        },
        v4: Some([("1".to_string(), server)].into_iter().collect()),
        v5: None,
        ws: None,
        cluster: None,
        console: None,
        bridge: None,
        prometheus: None,
        metrics: None,
    }
}

/// Starts the broker on 127.0.0.1:`port` and returns once it accepts TCP connections
/// (up to [`START_TIMEOUT`]).
pub fn start_embedded_broker(port: u16) -> Result<EmbeddedBroker, BrokerError> {
    let addr = SocketAddr::V4(SocketAddrV4::new(Ipv4Addr::LOCALHOST, port));
    // rumqttd only logs a listener that cannot bind, so find out here first.
    drop(TcpListener::bind(addr).map_err(|source| BrokerError::PortInUse { port, source })?);
    let cfg = config(addr);
    let thread = std::thread::Builder::new()
        .name("eqwatch-demo-broker".to_string())
        .spawn(move || {
            let mut broker = rumqttd::Broker::new(cfg);
            if let Err(e) = broker.start() {
                tracing::error!(error = %e, "embedded broker stopped");
            }
        })
        .map_err(BrokerError::Thread)?;
    let deadline = Instant::now() + START_TIMEOUT;
    loop {
        if thread.is_finished() {
            return Err(BrokerError::Stopped { port });
        }
        if TcpStream::connect_timeout(&addr, Duration::from_millis(200)).is_ok() {
            // A listener that failed ends the thread at once; give it a moment to show.
            std::thread::sleep(Duration::from_millis(20));
            if thread.is_finished() {
                return Err(BrokerError::Stopped { port });
            }
            tracing::info!(%addr, "embedded demo broker listening (MQTT 3.1.1, no TLS, no auth)");
            return Ok(EmbeddedBroker { addr, thread });
        }
        if Instant::now() >= deadline {
            return Err(BrokerError::Timeout { port });
        }
        std::thread::sleep(Duration::from_millis(25));
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rumqttc::{AsyncClient, Event, EventLoop, MqttOptions, Packet, QoS};

    fn client(id: &str, port: u16) -> (AsyncClient, EventLoop) {
        let mut o = MqttOptions::new(id, "127.0.0.1", port);
        o.set_keep_alive(Duration::from_secs(5));
        o.set_max_packet_size(2 * MAX_PAYLOAD_BYTES, 2 * MAX_PAYLOAD_BYTES);
        AsyncClient::new(o, 16)
    }

    /// Polls until a publish on `topic` arrives; returns (payload, retain).
    async fn next_publish(ev: &mut EventLoop, topic: &str) -> (Vec<u8>, bool) {
        loop {
            match ev.poll().await {
                Ok(Event::Incoming(Packet::Publish(p))) if p.topic == topic => {
                    return (p.payload.to_vec(), p.retain);
                }
                Ok(_) => {}
                Err(e) => panic!("connection error: {e}"),
            }
        }
    }

    /// Polls until the broker acknowledges the subscription.
    async fn wait_suback(ev: &mut EventLoop) {
        loop {
            match ev.poll().await {
                Ok(Event::Incoming(Packet::SubAck(_))) => return,
                Ok(_) => {}
                Err(e) => panic!("connection error: {e}"),
            }
        }
    }

    #[tokio::test]
    async fn publishes_and_retains() {
        let port = free_port();
        let broker = start_embedded_broker(port).expect("broker");
        assert!(broker.is_running());
        assert_eq!(broker.port(), port);
        let topic = "baw1/test/AI-999";
        let big = "x".repeat(100 * 1024);
        let payload = format!("{{\"ts\":1,\"pad\":\"{big}\"}}");
        let run = async {
            let (c1, mut e1) = client("eqwatch-test-1", port);
            c1.subscribe(topic, QoS::AtLeastOnce)
                .await
                .expect("subscribe");
            wait_suback(&mut e1).await;
            c1.publish(topic, QoS::AtLeastOnce, true, payload.clone())
                .await
                .expect("publish");
            let (got, _) = next_publish(&mut e1, topic).await;
            assert_eq!(got, payload.as_bytes());
            // A later subscriber receives the retained copy.
            let (c2, mut e2) = client("eqwatch-test-2", port);
            c2.subscribe(topic, QoS::AtLeastOnce)
                .await
                .expect("subscribe");
            let (got, retain) = next_publish(&mut e2, topic).await;
            assert_eq!(got, payload.as_bytes());
            assert!(retain);
        };
        tokio::time::timeout(Duration::from_secs(20), run)
            .await
            .expect("timed out");
        // The port is now taken: a second broker there is refused.
        assert!(matches!(
            start_embedded_broker(port),
            Err(BrokerError::PortInUse { .. })
        ));
    }
}
