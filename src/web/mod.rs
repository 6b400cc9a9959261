//! The live page for a control-room browser, and its pure parts: the page itself (one
//! HTML file with inline CSS and JS, no outside assets), what it shows ([`live`]),
//! logins and sessions ([`auth`]), reading HTTP requests and page commands
//! ([`request`]). The daemon's HTTP endpoint (`daemon/http.rs`) serves it; it owns the
//! sockets, the tasks and the locks.
//!
//! Rules of this folder (checked by `tests/architecture.rs`): no tokio, no network or
//! file I/O, no clock (times are passed in). It may use the configuration (users), the
//! wire module (the advisory notice) and the core's time helpers; `ring` for PBKDF2 and
//! the system random source.

pub mod auth;
pub mod live;
pub mod request;

/// The page (about 20 KB), served at `/`.
pub const PAGE: &str = include_str!("page.html");

use crate::config::password::HttpUser;
use auth::{AuthError, Session, Sessions, Throttle};

/// Why a state-changing request is not carried out, with its HTTP status.
#[derive(Debug, thiserror::Error, PartialEq, Eq)]
pub enum Denied {
    #[error("log in first (no session, or it expired)")]
    NoSession,
    #[error("the page's CSRF token is missing or wrong; reload the page")]
    Csrf,
    #[error("user {user:?} may not {command} (http.users.{user}.may)")]
    NotPermitted { user: String, command: String },
}

impl Denied {
    pub fn status(&self) -> u16 {
        match self {
            Denied::NoSession | Denied::Csrf => 401,
            Denied::NotPermitted { .. } => 403,
        }
    }
}

/// Users, sessions and login throttling.
#[derive(Debug)]
pub struct Auth {
    users: Vec<HttpUser>,
    sessions: Sessions,
    throttle: Throttle,
    /// Checked for an unknown user name, so a wrong name costs what a wrong password does.
    decoy: crate::config::password::PasswordHash,
}

impl Auth {
    pub fn new(users: Vec<HttpUser>) -> Self {
        let iterations = users
            .iter()
            .map(|u| u.hash.iterations)
            .max()
            .unwrap_or(crate::config::password::MIN_ITERATIONS);
        Self {
            decoy: auth::derive(b"decoy", b"eqwatch-decoy-salt", iterations),
            users,
            sessions: Sessions::default(),
            throttle: Throttle::default(),
        }
    }

    /// The stored hash to check a login against (a decoy for an unknown name), or how
    /// long the name is locked out.
    pub fn begin_login(
        &self,
        name: &str,
        now_ms: i64,
    ) -> Result<crate::config::password::PasswordHash, AuthError> {
        if let Some(s) = self.throttle.wait_s(&self.users, name, now_ms) {
            return Err(AuthError::Throttled(s));
        }
        Ok(self
            .users
            .iter()
            .find(|u| u.name == name)
            .map_or_else(|| self.decoy.clone(), |u| u.hash.clone()))
    }

    /// After the password check: a session under `token`, or why not.
    pub fn finish_login(
        &mut self,
        name: &str,
        password_ok: bool,
        token: String,
        csrf: String,
        now_ms: i64,
    ) -> Result<Session, AuthError> {
        let known = self.users.iter().any(|u| u.name == name);
        if !(password_ok && known) {
            self.throttle.failed(&self.users, name, now_ms);
            return Err(AuthError::Wrong);
        }
        self.throttle.succeeded(&self.users, name);
        self.sessions.create(token, name, csrf, now_ms).cloned()
    }

    /// The session under the cookie's token, with its user.
    pub fn session(&mut self, token: Option<&str>, now_ms: i64) -> Option<(Session, HttpUser)> {
        let s = self.sessions.get(token?, now_ms)?.clone();
        let u = self.users.iter().find(|u| u.name == s.user)?.clone();
        Some((s, u))
    }

    /// A state-changing request: a live session, its CSRF token in the header, and
    /// (for a command) the user's permission. Returns the user's name.
    pub fn authorize(
        &mut self,
        token: Option<&str>,
        csrf: Option<&str>,
        command: Option<&str>,
        now_ms: i64,
    ) -> Result<String, Denied> {
        let (s, u) = self.session(token, now_ms).ok_or(Denied::NoSession)?;
        if !csrf.is_some_and(|c| auth::same_bytes(c.as_bytes(), s.csrf.as_bytes())) {
            return Err(Denied::Csrf);
        }
        if let Some(c) = command
            && !auth::may(&u, c)
        {
            return Err(Denied::NotPermitted {
                user: u.name,
                command: c.to_string(),
            });
        }
        Ok(u.name)
    }

    pub fn logout(&mut self, token: Option<&str>) -> bool {
        token.is_some_and(|t| self.sessions.remove(t))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::config::password::Permission;

    const T0_MS: i64 = 1_796_083_200_000;

    fn auth() -> Auth {
        let user = |name: &str, pw: &[u8], may: &[Permission]| HttpUser {
            name: name.into(),
            hash: auth::derive(pw, b"test-salt", 1000),
            may: may.to_vec(),
        };
        Auth::new(vec![
            user("op1", b"op1-pass", &[Permission::Acknowledge]),
            user("viewer", b"viewer-pass", &[]),
        ])
    }

    fn login(a: &mut Auth, name: &str, pw: &[u8], token: &str) -> Result<Session, AuthError> {
        let stored = a.begin_login(name, T0_MS)?;
        let ok = auth::verify(&stored, pw);
        a.finish_login(name, ok, token.into(), format!("csrf-{token}"), T0_MS)
    }

    #[test]
    fn a_command_needs_a_session_its_csrf_token_and_the_permission() {
        let mut a = auth();
        assert_eq!(
            a.authorize(None, None, Some("acknowledge"), T0_MS),
            Err(Denied::NoSession)
        );
        assert_eq!(login(&mut a, "op1", b"wrong", "t0"), Err(AuthError::Wrong));
        assert_eq!(
            login(&mut a, "nobody", b"op1-pass", "t0"),
            Err(AuthError::Wrong)
        );
        let s = login(&mut a, "op1", b"op1-pass", "t1").unwrap();
        assert_eq!(s.user, "op1");
        let csrf = Some("csrf-t1");
        assert_eq!(
            a.authorize(Some("t1"), None, Some("acknowledge"), T0_MS),
            Err(Denied::Csrf)
        );
        assert_eq!(
            a.authorize(Some("t1"), Some("csrf-t2"), Some("acknowledge"), T0_MS),
            Err(Denied::Csrf)
        );
        assert_eq!(
            a.authorize(Some("t1"), csrf, Some("acknowledge"), T0_MS),
            Ok("op1".into())
        );
        let e = a
            .authorize(Some("t1"), csrf, Some("shelve"), T0_MS)
            .unwrap_err();
        assert_eq!(e.status(), 403);
        assert!(e.to_string().contains("http.users.op1.may"), "{e}");
        login(&mut a, "viewer", b"viewer-pass", "t2").unwrap();
        assert_eq!(
            a.authorize(Some("t2"), Some("csrf-t2"), Some("acknowledge"), T0_MS)
                .unwrap_err()
                .status(),
            403
        );
        assert!(a.logout(Some("t1")));
        assert_eq!(
            a.authorize(Some("t1"), csrf, Some("acknowledge"), T0_MS),
            Err(Denied::NoSession)
        );
        // A session past its idle time is gone.
        assert!(a.session(Some("t2"), T0_MS + auth::IDLE_MS).is_none());
    }

    #[test]
    fn repeated_wrong_passwords_lock_the_name_out() {
        let mut a = auth();
        for _ in 0..auth::FREE_FAILURES {
            assert_eq!(login(&mut a, "op1", b"guess", "t"), Err(AuthError::Wrong));
        }
        assert!(matches!(
            login(&mut a, "op1", b"op1-pass", "t"),
            Err(AuthError::Throttled(_))
        ));
    }

    #[test]
    fn the_page_is_small_self_contained_and_carries_the_advisory() {
        assert!(PAGE.len() < 40 * 1024, "{} bytes", PAGE.len());
        for outside in ["src=\"http", "href=\"http", "@import", "url(http"] {
            assert!(
                !PAGE.contains(outside),
                "page loads an outside asset: {outside}"
            );
        }
        assert!(PAGE.contains("not a safety function"));
    }
}
