//! `[http.users.<name>]`: the live page's users, their stored password hashes and what
//! each may do. Only the format lives here (`pbkdf2-sha256$<iterations>$<salt>$<hash>`,
//! standard base64 with padding); deriving and comparing hashes is the web module's.

use crate::config::error::Problems;
use crate::config::raw::RawHttp;
use crate::config::settings::CommandSettings;

/// The scheme name at the front of a stored hash.
pub const SCHEME: &str = "pbkdf2-sha256";
/// Fewest PBKDF2 iterations a stored hash may name (a guard against a hand-made hash;
/// `eqwatch hash-password` uses far more).
pub const MIN_ITERATIONS: u32 = 1000;

/// A command a live-page user may send.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Permission {
    /// `acknowledge`.
    Acknowledge,
    /// `shelve` and `unshelve`.
    Shelve,
}

impl Permission {
    pub const ALL: [Permission; 2] = [Permission::Acknowledge, Permission::Shelve];

    pub fn as_str(self) -> &'static str {
        match self {
            Permission::Acknowledge => "acknowledge",
            Permission::Shelve => "shelve",
        }
    }

    fn parse(s: &str) -> Option<Self> {
        Self::ALL.into_iter().find(|p| p.as_str() == s)
    }
}

/// A stored PBKDF2-HMAC-SHA256 password hash.
#[derive(Clone, PartialEq, Eq)]
pub struct PasswordHash {
    pub iterations: u32,
    pub salt: Vec<u8>,
    pub hash: Vec<u8>,
}

impl std::fmt::Debug for PasswordHash {
    // Never print the hash itself (it would help an offline guess).
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "PasswordHash({SCHEME}, {} iterations)", self.iterations)
    }
}

impl PasswordHash {
    /// Reads `pbkdf2-sha256$<iterations>$<salt b64>$<hash b64>`; the error says what to fix.
    pub fn parse(text: &str) -> Result<Self, String> {
        let parts: Vec<&str> = text.trim().split('$').collect();
        let [scheme, iterations, salt, hash] = parts[..] else {
            return Err(format!(
                "expected \"{SCHEME}$<iterations>$<salt>$<hash>\" as printed by `eqwatch hash-password`"
            ));
        };
        if scheme != SCHEME {
            return Err(format!(
                "scheme \"{scheme}\" is not supported; expected \"{SCHEME}\" (make one with `eqwatch hash-password`)"
            ));
        }
        let iterations: u32 = iterations
            .parse()
            .map_err(|_| format!("iterations \"{iterations}\" is not a whole number"))?;
        if iterations < MIN_ITERATIONS {
            return Err(format!(
                "{iterations} iterations are too few (at least {MIN_ITERATIONS}); make the hash with `eqwatch hash-password`"
            ));
        }
        let salt = base64_decode(salt).ok_or("the salt is not base64")?;
        let hash = base64_decode(hash).ok_or("the hash is not base64")?;
        if salt.len() < 8 {
            return Err("the salt is shorter than 8 bytes".into());
        }
        if hash.len() != 32 {
            return Err(format!(
                "the hash has {} bytes; PBKDF2-HMAC-SHA256 gives 32",
                hash.len()
            ));
        }
        Ok(Self {
            iterations,
            salt,
            hash,
        })
    }

    /// The stored form, as `parse` reads it.
    pub fn format(&self) -> String {
        format!(
            "{SCHEME}${}${}${}",
            self.iterations,
            base64_encode(&self.salt),
            base64_encode(&self.hash)
        )
    }
}

/// A live-page user.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct HttpUser {
    pub name: String,
    pub hash: PasswordHash,
    pub may: Vec<Permission>,
}

/// Validates `[http.users]`. A user who may send commands must also be on
/// `[commands] allowed_users`: the page's commands take the MQTT command path, which
/// checks that list too.
pub(crate) fn users(
    problems: &mut Problems,
    raw: Option<&RawHttp>,
    commands: &CommandSettings,
) -> Vec<HttpUser> {
    let Some(raw) = raw else { return Vec::new() };
    let mut out = Vec::new();
    for (name, u) in &raw.users {
        let path = format!("http.users.{name}");
        if name.is_empty()
            || name.len() > 64
            || !name
                .chars()
                .all(|c| c.is_ascii_alphanumeric() || "-_.".contains(c))
        {
            problems.add(
                &path,
                "a user name is 1 to 64 letters, digits, '-', '_' or '.'",
            );
            continue;
        }
        let hash = match PasswordHash::parse(&u.password_hash) {
            Ok(h) => Some(h),
            Err(e) => {
                problems.add(format!("{path}.password_hash"), e);
                None
            }
        };
        let mut may = Vec::new();
        for (i, m) in u.may.iter().enumerate() {
            match Permission::parse(m.trim()) {
                Some(p) if !may.contains(&p) => may.push(p),
                Some(_) => {}
                None => problems.add(
                    format!("{path}.may[{i}]"),
                    format!("\"{m}\" is not a page command; expected \"acknowledge\" or \"shelve\" (shelve and unshelve)"),
                ),
            }
        }
        if !may.is_empty() && !commands.allowed_users.iter().any(|a| a == name) {
            problems.add(
                format!("{path}.may"),
                format!("\"{name}\" may send commands from the page but is not in [commands] allowed_users; add it there too (the page's commands take the same path as MQTT commands)"),
            );
        }
        if let Some(hash) = hash {
            out.push(HttpUser {
                name: name.clone(),
                hash,
                may,
            });
        }
    }
    out
}

const ALPHABET: &[u8; 64] = b"ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";

/// Standard base64 with padding (RFC 4648 §4).
pub fn base64_encode(bytes: &[u8]) -> String {
    let mut out = String::with_capacity(bytes.len().div_ceil(3) * 4);
    for chunk in bytes.chunks(3) {
        let b = [
            chunk[0],
            chunk.get(1).copied().unwrap_or(0),
            chunk.get(2).copied().unwrap_or(0),
        ];
        let n = (u32::from(b[0]) << 16) | (u32::from(b[1]) << 8) | u32::from(b[2]);
        for i in 0..4 {
            if i <= chunk.len() {
                out.push(char::from(ALPHABET[((n >> (18 - 6 * i)) & 63) as usize]));
            } else {
                out.push('=');
            }
        }
    }
    out
}

/// Reads standard base64 with or without padding; `None` on any other character.
pub fn base64_decode(text: &str) -> Option<Vec<u8>> {
    let body = text.trim_end_matches('=');
    if text.len() - body.len() > 2 || body.len() % 4 == 1 {
        return None;
    }
    let mut out = Vec::with_capacity(body.len() * 3 / 4);
    let mut acc = 0u32;
    let mut bits = 0;
    for c in body.bytes() {
        let v = ALPHABET.iter().position(|&a| a == c)? as u32;
        acc = (acc << 6) | v;
        bits += 6;
        if bits >= 8 {
            bits -= 8;
            out.push((acc >> bits) as u8);
            acc &= (1 << bits) - 1;
        }
    }
    Some(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn base64_matches_the_rfc_4648_test_vectors() {
        // RFC 4648 §10.
        for (plain, coded) in [
            ("", ""),
            ("f", "Zg=="),
            ("fo", "Zm8="),
            ("foo", "Zm9v"),
            ("foob", "Zm9vYg=="),
            ("fooba", "Zm9vYmE="),
            ("foobar", "Zm9vYmFy"),
        ] {
            assert_eq!(base64_encode(plain.as_bytes()), coded);
            assert_eq!(base64_decode(coded).as_deref(), Some(plain.as_bytes()));
        }
        assert_eq!(base64_decode("Zm9v!"), None);
        assert_eq!(base64_decode("Z"), None);
    }

    #[test]
    fn a_stored_hash_round_trips_and_bad_ones_say_what_to_fix() {
        let h = PasswordHash {
            iterations: 600_000,
            salt: b"0123456789abcdef".to_vec(),
            hash: vec![7; 32],
        };
        assert_eq!(PasswordHash::parse(&h.format()), Ok(h.clone()));
        assert!(!format!("{h:?}").contains("Bw"), "Debug hides the hash");
        let e = |t: &str| PasswordHash::parse(t).unwrap_err();
        assert!(e("secret").contains("hash-password"));
        assert!(e("md5$1$a$b").contains("not supported"));
        assert!(e("pbkdf2-sha256$10$MDEyMzQ1Njc=$AAAA").contains("too few"));
        assert!(e("pbkdf2-sha256$5000$MDEyMzQ1Njc=$AAAA").contains("32"));
    }
}
