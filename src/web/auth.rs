//! Who is logged in to the live page: password checks (PBKDF2-HMAC-SHA256 through
//! `ring`), sessions in memory with an idle and an absolute expiry and a cap, login
//! throttling per user name, the CSRF token check, and what each user may do. The time
//! is always passed in; the only outside call is the system's random source.

use std::collections::HashMap;
use std::num::NonZeroU32;

use ring::rand::SecureRandom;

use crate::config::password::{HttpUser, PasswordHash, Permission};
use crate::units::{MINUTE_MS, SECOND_MS};

/// Iterations `eqwatch hash-password` uses (OWASP's 2023 figure for PBKDF2-HMAC-SHA256).
pub const DEFAULT_ITERATIONS: u32 = 600_000;
/// Sessions at most; a login beyond them is refused until one ends or expires.
pub const MAX_SESSIONS: usize = 64;
/// A session ends after this long without a request ...
pub const IDLE_MS: i64 = 30 * MINUTE_MS;
/// ... and this long after the login whatever happens (a shift).
pub const ABSOLUTE_MS: i64 = 12 * 60 * MINUTE_MS;
/// Failed logins for one user name before it is locked out for a while.
pub const FREE_FAILURES: u32 = 5;
/// The first lock-out; each further failure doubles it up to [`LOCK_MAX_MS`].
pub const LOCK_MS: i64 = 30 * SECOND_MS;
pub const LOCK_MAX_MS: i64 = 15 * MINUTE_MS;

#[derive(Debug, thiserror::Error, PartialEq, Eq)]
pub enum AuthError {
    #[error("the system random source failed; no session token could be made")]
    Random,
    #[error("too many sessions ({MAX_SESSIONS}); log out elsewhere or wait for one to expire")]
    TooManySessions,
    #[error("too many failed logins for this user; try again in {0} s")]
    Throttled(i64),
    #[error("user name or password wrong")]
    Wrong,
}

/// Derives a stored hash for `password` with a fresh random salt (`eqwatch hash-password`).
pub fn hash_password(password: &[u8], iterations: u32) -> Result<PasswordHash, AuthError> {
    let mut salt = vec![0u8; 16];
    ring::rand::SystemRandom::new()
        .fill(&mut salt)
        .map_err(|_| AuthError::Random)?;
    Ok(derive(password, &salt, iterations))
}

/// PBKDF2-HMAC-SHA256 of `password` with `salt`, 32 bytes.
pub fn derive(password: &[u8], salt: &[u8], iterations: u32) -> PasswordHash {
    let n = NonZeroU32::new(iterations).unwrap_or(NonZeroU32::MIN);
    let mut hash = vec![0u8; 32];
    ring::pbkdf2::derive(
        ring::pbkdf2::PBKDF2_HMAC_SHA256,
        n,
        salt,
        password,
        &mut hash,
    );
    PasswordHash {
        iterations: n.get(),
        salt: salt.to_vec(),
        hash,
    }
}

/// Whether `password` matches the stored hash (compared in constant time by `ring`).
/// Costs the hash's iterations: call it off the async runtime.
pub fn verify(stored: &PasswordHash, password: &[u8]) -> bool {
    let Some(n) = NonZeroU32::new(stored.iterations) else {
        return false;
    };
    ring::pbkdf2::verify(
        ring::pbkdf2::PBKDF2_HMAC_SHA256,
        n,
        &stored.salt,
        password,
        &stored.hash,
    )
    .is_ok()
}

/// 32 random bytes as 64 hex digits (a session token or a CSRF token).
pub fn random_token() -> Result<String, AuthError> {
    let mut b = [0u8; 32];
    ring::rand::SystemRandom::new()
        .fill(&mut b)
        .map_err(|_| AuthError::Random)?;
    Ok(b.iter().map(|x| format!("{x:02x}")).collect())
}

/// Equal bytes, in time that depends only on the lengths.
pub fn same_bytes(a: &[u8], b: &[u8]) -> bool {
    a.len() == b.len() && a.iter().zip(b).fold(0u8, |acc, (x, y)| acc | (x ^ y)) == 0
}

/// Whether `user` may send `command` (a command name as the MQTT command carries it).
pub fn may(user: &HttpUser, command: &str) -> bool {
    let needs = match command {
        "acknowledge" => Permission::Acknowledge,
        "shelve" | "unshelve" => Permission::Shelve,
        _ => return false,
    };
    user.may.contains(&needs)
}

/// One logged-in browser.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Session {
    pub user: String,
    /// Sent back by the page in `X-Eqwatch-Csrf` on every state-changing request.
    pub csrf: String,
    pub created_ms: i64,
    pub last_ms: i64,
}

impl Session {
    fn expired(&self, now_ms: i64) -> bool {
        now_ms - self.last_ms >= IDLE_MS || now_ms - self.created_ms >= ABSOLUTE_MS
    }

    /// When the session ends if nothing more happens.
    pub fn expires_ms(&self) -> i64 {
        (self.last_ms + IDLE_MS).min(self.created_ms + ABSOLUTE_MS)
    }
}

/// The sessions, keyed by their cookie token.
#[derive(Debug, Default)]
pub struct Sessions {
    map: HashMap<String, Session>,
}

impl Sessions {
    /// Starts a session for `user` under `token` with `csrf`; refused when full.
    pub fn create(
        &mut self,
        token: String,
        user: &str,
        csrf: String,
        now_ms: i64,
    ) -> Result<&Session, AuthError> {
        self.map.retain(|_, s| !s.expired(now_ms));
        if self.map.len() >= MAX_SESSIONS {
            return Err(AuthError::TooManySessions);
        }
        let s = Session {
            user: user.to_string(),
            csrf,
            created_ms: now_ms,
            last_ms: now_ms,
        };
        Ok(self.map.entry(token).insert_entry(s).into_mut())
    }

    /// The live session under `token`, touched; an expired one is removed.
    pub fn get(&mut self, token: &str, now_ms: i64) -> Option<&Session> {
        if self.map.get(token)?.expired(now_ms) {
            self.map.remove(token);
            return None;
        }
        let s = self.map.get_mut(token)?;
        s.last_ms = now_ms;
        Some(s)
    }

    pub fn remove(&mut self, token: &str) -> bool {
        self.map.remove(token).is_some()
    }

    pub fn len(&self) -> usize {
        self.map.len()
    }

    pub fn is_empty(&self) -> bool {
        self.map.is_empty()
    }
}

/// Failed logins per user name (the configured users, and one entry shared by every
/// unknown name, so the table stays bounded).
#[derive(Debug, Default)]
pub struct Throttle {
    map: HashMap<String, (u32, i64)>,
}

impl Throttle {
    fn key<'a>(users: &[HttpUser], name: &'a str) -> &'a str {
        if users.iter().any(|u| u.name == name) {
            name
        } else {
            ""
        }
    }

    /// Seconds until `name` may try again; `None` when it may now.
    pub fn wait_s(&self, users: &[HttpUser], name: &str, now_ms: i64) -> Option<i64> {
        let (_, until) = self.map.get(Self::key(users, name))?;
        (*until > now_ms).then(|| (until - now_ms + 999) / 1000)
    }

    pub fn failed(&mut self, users: &[HttpUser], name: &str, now_ms: i64) {
        let e = self
            .map
            .entry(Self::key(users, name).to_string())
            .or_insert((0, 0));
        e.0 += 1;
        if e.0 >= FREE_FAILURES {
            let doublings = (e.0 - FREE_FAILURES).min(10);
            e.1 = now_ms + (LOCK_MS << doublings).min(LOCK_MAX_MS);
        }
    }

    pub fn succeeded(&mut self, users: &[HttpUser], name: &str) {
        self.map.remove(Self::key(users, name));
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn hex(b: &[u8]) -> String {
        b.iter().map(|x| format!("{x:02x}")).collect()
    }

    /// Python 3.11 hashlib: `hashlib.pbkdf2_hmac("sha256", b"password", b"salt", 1, 32)`
    /// and the same with 4096 iterations.
    #[test]
    fn pbkdf2_sha256_matches_python_hashlib() {
        let one = derive(b"password", b"salt", 1);
        assert_eq!(
            hex(&one.hash),
            "120fb6cffcf8b32c43e7225256c4f837a86548c92ccc35480805987cb70be17b"
        );
        let many = derive(b"password", b"salt", 4096);
        assert_eq!(
            hex(&many.hash),
            "c5e478d59288c841aa530db6845c4c8d962893a001ce4e11a4963873aa98134a"
        );
        assert!(verify(&many, b"password"));
        assert!(!verify(&many, b"Password"));
        assert!(!verify(&many, b""));
    }

    /// Python 3.11 hashlib: `hashlib.pbkdf2_hmac("sha256", b"op-demo-pass",
    /// b"eqwatch-demo-salt", 1000, 32)`, stored as `eqwatch hash-password` prints it.
    #[test]
    fn a_stored_hash_from_python_verifies() {
        let stored = PasswordHash::parse(
            "pbkdf2-sha256$1000$ZXF3YXRjaC1kZW1vLXNhbHQ=$0LtlutJQBJaSKWo242z0OAu+SjoKhrbndLvk80J69fY=",
        )
        .expect("hash");
        assert!(verify(&stored, b"op-demo-pass"));
        assert!(!verify(&stored, b"op-demo-pas"));
    }

    #[test]
    fn hash_password_makes_a_fresh_salt_that_verifies() {
        let a = hash_password(b"pw", 1000).unwrap();
        let b = hash_password(b"pw", 1000).unwrap();
        assert_ne!(a.salt, b.salt);
        assert!(verify(&PasswordHash::parse(&a.format()).unwrap(), b"pw"));
        assert_eq!(random_token().unwrap().len(), 64);
        assert_ne!(random_token().unwrap(), random_token().unwrap());
    }

    fn user(name: &str, may: &[Permission]) -> HttpUser {
        HttpUser {
            name: name.into(),
            hash: derive(b"x", b"saltsalt", 1),
            may: may.to_vec(),
        }
    }

    #[test]
    fn permissions_cover_only_the_page_commands() {
        let op = user("op", &[Permission::Acknowledge]);
        let eng = user("eng", &Permission::ALL);
        assert!(may(&op, "acknowledge"));
        assert!(!may(&op, "shelve") && !may(&op, "unshelve"));
        assert!(may(&eng, "shelve") && may(&eng, "unshelve"));
        assert!(!may(&eng, "out-of-service"), "not a page command");
        assert!(!may(&user("viewer", &[]), "acknowledge"));
    }

    #[test]
    fn sessions_expire_when_idle_and_after_a_shift_and_are_capped() {
        let t0 = 1_000_000;
        let mut s = Sessions::default();
        s.create("a".into(), "op", "c".into(), t0).unwrap();
        // Touched within the idle time: still there.
        assert!(s.get("a", t0 + IDLE_MS - 1).is_some());
        assert!(s.get("a", t0 + 2 * IDLE_MS - 2).is_some());
        // Idle too long: gone, and stays gone.
        assert!(s.get("a", t0 + 3 * IDLE_MS).is_none());
        assert_eq!(s.len(), 0);
        // Kept busy, it still ends after ABSOLUTE_MS.
        s.create("b".into(), "op", "c".into(), t0).unwrap();
        let mut t = t0;
        while t < t0 + ABSOLUTE_MS - MINUTE_MS {
            t += 10 * MINUTE_MS;
            assert!(s.get("b", t.min(t0 + ABSOLUTE_MS - 1)).is_some());
        }
        assert!(s.get("b", t0 + ABSOLUTE_MS).is_none());
        assert!(s.get("nope", t0).is_none());
        for i in 0..MAX_SESSIONS {
            s.create(format!("t{i}"), "op", "c".into(), t0).unwrap();
        }
        assert_eq!(
            s.create("one-more".into(), "op", "c".into(), t0),
            Err(AuthError::TooManySessions)
        );
        // Once the others expire there is room again.
        assert!(
            s.create("later".into(), "op", "c".into(), t0 + IDLE_MS)
                .is_ok()
        );
        assert!(s.remove("later"));
    }

    #[test]
    fn failed_logins_lock_a_user_out_for_a_growing_time() {
        let users = [user("op", &[])];
        let mut th = Throttle::default();
        let t = 5_000_000;
        for _ in 0..FREE_FAILURES - 1 {
            th.failed(&users, "op", t);
            assert_eq!(th.wait_s(&users, "op", t), None);
        }
        th.failed(&users, "op", t);
        assert_eq!(th.wait_s(&users, "op", t), Some(LOCK_MS / 1000));
        th.failed(&users, "op", t);
        assert_eq!(th.wait_s(&users, "op", t), Some(2 * LOCK_MS / 1000));
        assert_eq!(th.wait_s(&users, "op", t + 2 * LOCK_MS), None);
        // Unknown names share one entry; a known user is not locked by them.
        for i in 0..FREE_FAILURES {
            th.failed(&users, &format!("guess{i}"), t);
        }
        assert!(th.wait_s(&users, "anyone", t).is_some());
        th.succeeded(&users, "op");
        assert_eq!(th.wait_s(&users, "op", t), None);
        assert!(same_bytes(b"abc", b"abc") && !same_bytes(b"abc", b"abd"));
        assert!(!same_bytes(b"abc", b"ab"));
    }
}
