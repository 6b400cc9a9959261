//! Reading an HTTP/1.1 request head (method, path, query, the few headers the page
//! uses) within fixed limits, and the page's JSON bodies: a login and a command, which
//! becomes the same message the `<prefix>/<reactor>/command` topic carries.

use serde_json::{Value, json};

/// Request head at most (request line and headers).
pub const MAX_HEAD: usize = 8 * 1024;
/// Request body at most (a login or a command is far smaller).
pub const MAX_BODY: usize = 4 * 1024;
/// The session cookie's name.
pub const COOKIE: &str = "eqwatch_session";
/// The header the page sends its CSRF token in.
pub const CSRF_HEADER: &str = "x-eqwatch-csrf";

#[derive(Debug, thiserror::Error, PartialEq, Eq)]
pub enum RequestError {
    #[error("malformed request line")]
    RequestLine,
    #[error("malformed header line")]
    Header,
    #[error("content-length is not a number")]
    Length,
    #[error("request body over {MAX_BODY} bytes")]
    TooLarge,
}

/// A request head.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Head {
    pub method: String,
    pub path: String,
    pub query: String,
    /// Header names in lower case.
    headers: Vec<(String, String)>,
    pub content_length: usize,
}

impl Head {
    /// Reads the head (without the blank line that ends it).
    pub fn parse(text: &str) -> Result<Self, RequestError> {
        let mut lines = text.split("\r\n");
        let mut first = lines.next().unwrap_or("").split(' ');
        let (Some(method), Some(target), Some(version)) =
            (first.next(), first.next(), first.next())
        else {
            return Err(RequestError::RequestLine);
        };
        if !version.starts_with("HTTP/1.") || method.is_empty() || !target.starts_with('/') {
            return Err(RequestError::RequestLine);
        }
        let (path, query) = target.split_once('?').unwrap_or((target, ""));
        let mut headers = Vec::new();
        for line in lines.filter(|l| !l.is_empty()) {
            let (k, v) = line.split_once(':').ok_or(RequestError::Header)?;
            headers.push((k.trim().to_ascii_lowercase(), v.trim().to_string()));
        }
        let content_length = match headers.iter().find(|(k, _)| k == "content-length") {
            None => 0,
            Some((_, v)) => v.parse().map_err(|_| RequestError::Length)?,
        };
        if content_length > MAX_BODY {
            return Err(RequestError::TooLarge);
        }
        Ok(Self {
            method: method.to_string(),
            path: path.to_string(),
            query: query.to_string(),
            headers,
            content_length,
        })
    }

    pub fn header(&self, name: &str) -> Option<&str> {
        self.headers
            .iter()
            .find(|(k, _)| k == name)
            .map(|(_, v)| v.as_str())
    }

    /// A cookie's value.
    pub fn cookie(&self, name: &str) -> Option<&str> {
        self.headers
            .iter()
            .filter(|(k, _)| k == "cookie")
            .flat_map(|(_, v)| v.split(';'))
            .filter_map(|c| c.trim().split_once('='))
            .find(|(k, _)| *k == name)
            .map(|(_, v)| v)
    }

    /// A query parameter (no percent-decoding: the page sends plain words).
    pub fn param(&self, name: &str) -> Option<&str> {
        self.query
            .split('&')
            .filter_map(|p| p.split_once('='))
            .find(|(k, _)| *k == name)
            .map(|(_, v)| v)
    }

    /// A JSON body (a cross-site form cannot send one without the browser asking first).
    pub fn is_json(&self) -> bool {
        self.header("content-type").is_some_and(|c| {
            c.split(';')
                .next()
                .is_some_and(|t| t.trim() == "application/json")
        })
    }
}

/// A login body: `{"user": "...", "password": "..."}`.
pub fn read_login(body: &[u8]) -> Result<(String, String), String> {
    let v: Value = serde_json::from_slice(body).map_err(|e| format!("not JSON: {e}"))?;
    let text = |k: &str| v.get(k).and_then(Value::as_str).map(str::to_string);
    match (text("user"), text("password")) {
        (Some(u), Some(p)) if !u.is_empty() && u.len() <= 64 && p.len() <= 1024 => Ok((u, p)),
        _ => Err("a login is {\"user\": \"...\", \"password\": \"...\"}".into()),
    }
}

/// A command from the page, checked.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PageCommand {
    pub reactor: String,
    pub command: String,
    pub alarm: String,
    pub duration: Option<String>,
    pub reason: Option<String>,
}

/// A command body: `{"reactor", "command": "acknowledge|shelve|unshelve", "alarm",
/// "duration" and "reason" (shelve)}`; the error says what to fix.
pub fn read_command(body: &[u8]) -> Result<PageCommand, String> {
    let v: Value = serde_json::from_slice(body).map_err(|e| format!("not JSON: {e}"))?;
    let text = |k: &str| {
        v.get(k)
            .and_then(Value::as_str)
            .map(|s| s.trim().to_string())
            .filter(|s| !s.is_empty())
    };
    let reactor = text("reactor").ok_or("missing \"reactor\"")?;
    let alarm = text("alarm").ok_or("missing \"alarm\"")?;
    let command = text("command").ok_or("missing \"command\"")?;
    if !["acknowledge", "shelve", "unshelve"].contains(&command.as_str()) {
        return Err(format!(
            "\"{command}\" cannot be sent from the page; expected acknowledge, shelve or unshelve"
        ));
    }
    let (duration, reason) = (text("duration"), text("reason"));
    if command == "shelve" {
        let Some(d) = &duration else {
            return Err("shelve needs \"duration\", e.g. \"2 h\"".into());
        };
        crate::config::parse_duration(d).map_err(|e| format!("duration: {e}"))?;
        if reason.is_none() {
            return Err("shelve needs a \"reason\"".into());
        }
    }
    if reason.as_ref().is_some_and(|r| r.len() > 200) {
        return Err("the reason is over 200 characters".into());
    }
    Ok(PageCommand {
        reactor,
        command,
        alarm,
        duration,
        reason,
    })
}

/// The message the command topic carries, sent by `user`.
pub fn command_payload(c: &PageCommand, user: &str, request_id: &str) -> String {
    let mut v = json!({
        "command": c.command,
        "alarm": c.alarm,
        "user": user,
        "request_id": request_id,
    });
    if let Some(d) = &c.duration {
        v["duration"] = json!(d);
    }
    if let Some(r) = &c.reason {
        v["reason"] = json!(r);
    }
    v.to_string()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_head_gives_path_query_cookie_and_headers() {
        let h = Head::parse(
            "POST /api/trend/lts1?period=8h&x=1 HTTP/1.1\r\nHost: a\r\nCookie: a=b; eqwatch_session=tok\r\nContent-Type: application/json; charset=utf-8\r\nX-Eqwatch-Csrf: c1\r\nContent-Length: 12",
        )
        .unwrap();
        assert_eq!(
            (h.method.as_str(), h.path.as_str()),
            ("POST", "/api/trend/lts1")
        );
        assert_eq!(h.param("period"), Some("8h"));
        assert_eq!(h.cookie(COOKIE), Some("tok"));
        assert_eq!(h.header(CSRF_HEADER), Some("c1"));
        assert!(h.is_json());
        assert_eq!(h.content_length, 12);
        assert_eq!(Head::parse("GET / HTTP/1.1").unwrap().cookie(COOKIE), None);
        assert_eq!(Head::parse("nonsense"), Err(RequestError::RequestLine));
        assert_eq!(
            Head::parse("POST / HTTP/1.1\r\nContent-Length: 99999"),
            Err(RequestError::TooLarge)
        );
        assert_eq!(
            Head::parse("GET / HTTP/1.1\r\nbad"),
            Err(RequestError::Header)
        );
    }

    #[test]
    fn a_page_command_becomes_the_command_topic_message() {
        let c = read_command(
            br#"{"reactor":"lts1","command":"shelve","alarm":"approach-high","duration":"2 h","reason":"analyser work"}"#,
        )
        .unwrap();
        let v: Value = serde_json::from_str(&command_payload(&c, "op1", "w1")).unwrap();
        assert_eq!(
            v,
            json!({"command":"shelve","alarm":"approach-high","user":"op1","request_id":"w1","duration":"2 h","reason":"analyser work"})
        );
        // The pipeline reads it as the same command an MQTT client would send.
        let cmd = crate::wire::watch::decode_command(v.to_string().as_bytes()).unwrap();
        assert_eq!(cmd.sender.user.as_deref(), Some("op1"));
        assert_eq!(cmd.alarm.as_deref(), Some("approach-high"));
        let e = |b: &str| read_command(b.as_bytes()).unwrap_err();
        assert!(
            e(r#"{"reactor":"lts1","command":"re-baseline","alarm":"a"}"#)
                .contains("cannot be sent")
        );
        assert!(
            e(r#"{"reactor":"lts1","command":"shelve","alarm":"a","reason":"r"}"#)
                .contains("duration")
        );
        assert!(
            e(r#"{"reactor":"lts1","command":"shelve","alarm":"a","duration":"2 h"}"#)
                .contains("reason")
        );
        assert!(e(r#"{"reactor":"lts1","command":"shelve","alarm":"a","duration":"soon","reason":"r"}"#).contains("duration"));
        assert!(e(r#"{"command":"acknowledge","alarm":"a"}"#).contains("reactor"));
        assert_eq!(
            read_login(br#"{"user":"op1","password":"p"}"#),
            Ok(("op1".into(), "p".into()))
        );
        assert!(read_login(b"{}").is_err());
    }
}
