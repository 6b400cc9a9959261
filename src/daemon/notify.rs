//! The service manager's notification protocol (systemd's `sd_notify`, see
//! `sd_notify(3)`): newline-separated `KEY=value` lines in one datagram to the Unix
//! socket named by `$NOTIFY_SOCKET` (a path, or an abstract name when it starts with
//! `@`). Written here rather than taken from a crate: it is one `sendto` and a few
//! environment variables.
//!
//! What eqwatch says: `READY=1` once the configuration is validated, the journal opened
//! and recovered and the metrics port bound; `STATUS=` a line on what it is doing;
//! `WATCHDOG=1` at half the `$WATCHDOG_USEC` interval, only while the evaluator's
//! once-a-second tick keeps coming (a hung evaluator is restarted by the manager);
//! `RELOADING=1` ... `READY=1` around a configuration reload (SIGHUP); `STOPPING=1` at
//! shutdown. Without `$NOTIFY_SOCKET` (not started by systemd) every call is a no-op.

use std::os::unix::net::UnixDatagram;
use std::time::Duration;

/// A connection to the service manager's notification socket, when there is one.
pub struct Notifier {
    socket: Option<(UnixDatagram, Target)>,
    watchdog: Option<Duration>,
}

enum Target {
    Path(std::path::PathBuf),
    #[cfg(any(target_os = "linux", target_os = "android"))]
    Abstract(std::os::unix::net::SocketAddr),
}

impl Notifier {
    /// From the process environment (`NOTIFY_SOCKET`, `WATCHDOG_USEC`, `WATCHDOG_PID`).
    pub fn from_env() -> Self {
        Self::new(
            std::env::var_os("NOTIFY_SOCKET").as_deref(),
            std::env::var("WATCHDOG_USEC").ok().as_deref(),
            std::env::var("WATCHDOG_PID").ok().as_deref(),
            std::process::id(),
        )
    }

    /// From the given values (tests); `pid` is this process's id.
    pub fn new(
        socket: Option<&std::ffi::OsStr>,
        watchdog_usec: Option<&str>,
        watchdog_pid: Option<&str>,
        pid: u32,
    ) -> Self {
        let target = socket.and_then(target);
        let socket = target.and_then(|t| {
            let s = UnixDatagram::unbound().ok()?;
            // A full socket buffer must never block the daemon: the line is dropped.
            s.set_nonblocking(true).ok()?;
            Some((s, t))
        });
        // WATCHDOG_PID, when set, names the process meant (sd_watchdog_enabled(3)).
        let ours = watchdog_pid.is_none_or(|p| p.trim().parse::<u32>().ok() == Some(pid));
        let watchdog = watchdog_usec
            .and_then(|u| u.trim().parse::<u64>().ok())
            .filter(|&u| u > 0 && ours)
            .map(Duration::from_micros);
        Self { socket, watchdog }
    }

    /// Whether a service manager listens.
    pub fn enabled(&self) -> bool {
        self.socket.is_some()
    }

    /// The watchdog interval the manager asked for, if any (ping at half of it).
    pub fn watchdog(&self) -> Option<Duration> {
        self.watchdog.filter(|_| self.enabled())
    }

    /// Sends `lines` (`KEY=value`, newline-separated); false when it could not be sent.
    pub fn send(&self, lines: &str) -> bool {
        let Some((s, t)) = &self.socket else {
            return false;
        };
        let bytes = lines.as_bytes();
        let sent = match t {
            Target::Path(p) => s.send_to(bytes, p),
            #[cfg(any(target_os = "linux", target_os = "android"))]
            Target::Abstract(a) => s.send_to_addr(bytes, a),
        };
        sent.is_ok_and(|n| n == bytes.len())
    }

    /// `READY=1` with a status line.
    pub fn ready(&self, status: &str) -> bool {
        self.send(&format!("READY=1\nSTATUS={}", one_line(status)))
    }

    /// A status line only.
    pub fn status(&self, status: &str) -> bool {
        self.send(&format!("STATUS={}", one_line(status)))
    }

    /// `RELOADING=1`. (`MONOTONIC_USEC=`, which `Type=notify-reload` wants, is left
    /// out: std does not expose CLOCK_MONOTONIC; the shipped unit uses `Type=notify`
    /// with `ExecReload=`, for which it is optional.)
    pub fn reloading(&self) -> bool {
        self.send("RELOADING=1\nSTATUS=reloading the configuration")
    }

    pub fn watchdog_ping(&self) -> bool {
        self.send("WATCHDOG=1")
    }

    pub fn stopping(&self) -> bool {
        self.send("STOPPING=1\nSTATUS=stopping: flushing results to the broker")
    }
}

/// A status value is one line (a newline would start another key).
fn one_line(s: &str) -> String {
    s.replace(['\n', '\r'], " ")
}

fn target(v: &std::ffi::OsStr) -> Option<Target> {
    use std::os::unix::ffi::OsStrExt;
    let b = v.as_bytes();
    match b.first()? {
        b'/' => Some(Target::Path(std::path::PathBuf::from(v))),
        #[cfg(any(target_os = "linux", target_os = "android"))]
        b'@' => {
            use std::os::linux::net::SocketAddrExt;
            std::os::unix::net::SocketAddr::from_abstract_name(&b[1..])
                .ok()
                .map(Target::Abstract)
        }
        _ => None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pair() -> (tempfile::TempDir, UnixDatagram, Notifier) {
        let dir = tempfile::tempdir().expect("temp dir");
        let path = dir.path().join("notify.sock");
        let rx = UnixDatagram::bind(&path).expect("bind");
        rx.set_read_timeout(Some(Duration::from_secs(2))).ok();
        let n = Notifier::new(Some(path.as_os_str()), Some("4000000"), None, 42);
        (dir, rx, n)
    }

    fn recv(rx: &UnixDatagram) -> String {
        let mut buf = [0u8; 512];
        let n = rx.recv(&mut buf).expect("a datagram");
        String::from_utf8_lossy(&buf[..n]).into_owned()
    }

    #[test]
    fn ready_and_status_reach_the_socket_as_key_value_lines() {
        // sd_notify(3): "READY=1", "STATUS=...", newline-separated in one datagram.
        let (_d, rx, n) = pair();
        assert!(n.enabled());
        assert!(n.ready("running\n9 reactors"));
        assert_eq!(recv(&rx), "READY=1\nSTATUS=running 9 reactors");
        assert!(n.watchdog_ping());
        assert_eq!(recv(&rx), "WATCHDOG=1");
        assert!(n.reloading());
        assert!(recv(&rx).starts_with("RELOADING=1\n"));
    }

    #[test]
    fn watchdog_interval_only_for_this_process() {
        // sd_watchdog_enabled(3): WATCHDOG_USEC in microseconds; WATCHDOG_PID, if set,
        // must be our pid.
        let (_d, _rx, n) = pair();
        assert_eq!(n.watchdog(), Some(Duration::from_secs(4)));
        let p = std::ffi::OsStr::new("/nonexistent/sock");
        let other = Notifier::new(Some(p), Some("4000000"), Some("41"), 42);
        assert_eq!(other.watchdog(), None);
        let ours = Notifier::new(Some(p), Some("4000000"), Some("42"), 42);
        assert_eq!(ours.watchdog(), Some(Duration::from_secs(4)));
        let zero = Notifier::new(Some(p), Some("0"), None, 42);
        assert_eq!(zero.watchdog(), None);
    }

    #[test]
    fn no_socket_means_no_op() {
        let n = Notifier::new(None, Some("4000000"), None, 1);
        assert!(!n.enabled());
        assert!(!n.ready("x"));
        assert_eq!(n.watchdog(), None);
        // A relative path is not a notification socket (sd_notify(3) takes absolute
        // paths and abstract names only).
        assert!(!Notifier::new(Some(std::ffi::OsStr::new("rel/sock")), None, None, 1).enabled());
    }

    #[cfg(target_os = "linux")]
    #[test]
    fn abstract_socket_names_start_with_at() {
        use std::os::linux::net::SocketAddrExt;
        let name = format!("eqwatch-test-{}", std::process::id());
        let addr = std::os::unix::net::SocketAddr::from_abstract_name(name.as_bytes())
            .expect("abstract name");
        let rx = UnixDatagram::bind_addr(&addr).expect("bind abstract");
        rx.set_read_timeout(Some(Duration::from_secs(2))).ok();
        let n = Notifier::new(
            Some(std::ffi::OsStr::new(&format!("@{name}"))),
            None,
            None,
            1,
        );
        assert!(n.status("hello"));
        assert_eq!(recv(&rx), "STATUS=hello");
    }
}
