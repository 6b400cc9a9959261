//! A small Chrome DevTools Protocol client, enough for a test to use the live page the way
//! a person does: headless Chromium started with `--remote-debugging-pipe`, where the
//! browser reads commands on its file descriptor 3 and writes answers and events on 4,
//! each message JSON ended by a NUL byte (Chromium's `--remote-debugging-pipe` switch;
//! the protocol's domains Target, Page, Runtime and Input as documented at
//! chromedevtools.github.io/devtools-protocol, tip-of-tree, read 2026-12). A shell
//! `exec` puts the child's stdin and stdout on 3 and 4, so no unsafe code is needed.
//!
//! Clicks and typing go through `Input.dispatchMouseEvent` and `Input.insertText`: the
//! page's own buttons and forms run their own handlers, as they would for a mouse.

use std::io::{Read, Write};
use std::path::Path;
use std::process::{Child, ChildStdin, Command, Stdio};
use std::sync::mpsc;
use std::time::{Duration, Instant};

use serde_json::{Value, json};

/// How long one protocol command may take to be answered.
const ANSWER_WITHIN: Duration = Duration::from_secs(20);

pub struct Browser {
    child: Child,
    to: ChildStdin,
    from: mpsc::Receiver<Value>,
    next_id: u64,
    session: String,
    _profile: tempfile::TempDir,
}

impl Browser {
    /// A headless Chromium with one blank tab of `width` x `height` CSS pixels.
    pub fn launch(bin: &Path, width: u32, height: u32) -> Self {
        let profile = tempfile::tempdir().unwrap();
        let mut child = Command::new("sh")
            .arg("-c")
            .arg(r#"exec "$0" "$@" 3<&0 4>&1 </dev/null >/dev/null"#)
            .arg(bin)
            .args([
                "--headless",
                "--no-sandbox",
                "--disable-gpu",
                "--no-first-run",
                "--disable-extensions",
                "--remote-debugging-pipe",
                &format!("--window-size={width},{height}"),
            ])
            .arg(format!("--user-data-dir={}", profile.path().display()))
            .arg("about:blank")
            .stdin(Stdio::piped())
            .stdout(Stdio::piped())
            .stderr(Stdio::null())
            .spawn()
            .expect("chromium starts");
        let to = child.stdin.take().expect("the browser's command pipe");
        let mut out = child.stdout.take().expect("the browser's answer pipe");
        let (tx, from) = mpsc::channel();
        std::thread::spawn(move || {
            let mut pending = Vec::new();
            let mut chunk = [0u8; 64 * 1024];
            loop {
                let n = match out.read(&mut chunk) {
                    Ok(0) | Err(_) => return,
                    Ok(n) => n,
                };
                pending.extend_from_slice(&chunk[..n]);
                while let Some(end) = pending.iter().position(|b| *b == 0) {
                    let msg: Vec<u8> = pending.drain(..=end).collect();
                    if let Ok(v) = serde_json::from_slice::<Value>(&msg[..end])
                        && tx.send(v).is_err()
                    {
                        return;
                    }
                }
            }
        });
        let mut b = Self {
            child,
            to,
            from,
            next_id: 1,
            session: String::new(),
            _profile: profile,
        };
        let target = b.call("Target.createTarget", json!({ "url": "about:blank" }));
        let target_id = target["targetId"].as_str().expect("a tab").to_string();
        let attached = b.call(
            "Target.attachToTarget",
            json!({ "targetId": target_id, "flatten": true }),
        );
        b.session = attached["sessionId"]
            .as_str()
            .expect("a session with the tab")
            .to_string();
        b.call(
            "Emulation.setDeviceMetricsOverride",
            json!({ "width": width, "height": height, "deviceScaleFactor": 1, "mobile": false }),
        );
        b.call("Page.enable", json!({}));
        b
    }

    /// One protocol command (to the tab once attached); its `result`.
    pub fn call(&mut self, method: &str, params: Value) -> Value {
        let id = self.next_id;
        self.next_id += 1;
        let mut msg = json!({ "id": id, "method": method, "params": params });
        if !self.session.is_empty() {
            msg["sessionId"] = Value::String(self.session.clone());
        }
        let mut bytes = msg.to_string().into_bytes();
        bytes.push(0);
        self.to.write_all(&bytes).expect("write to the browser");
        self.to.flush().expect("write to the browser");
        let until = Instant::now() + ANSWER_WITHIN;
        loop {
            let left = until.saturating_duration_since(Instant::now());
            let v = self
                .from
                .recv_timeout(left)
                .unwrap_or_else(|_| panic!("no answer from the browser to {method}"));
            // Events (no id) and answers to other sessions are not waited for.
            if v["id"].as_u64() == Some(id) {
                assert!(v.get("error").is_none(), "{method}: {v}");
                return v["result"].clone();
            }
        }
    }

    pub fn goto(&mut self, url: &str) {
        self.call("Page.navigate", json!({ "url": url }));
    }

    /// The value of a JavaScript expression in the page (promises awaited).
    pub fn eval(&mut self, expr: &str) -> Value {
        let r = self.call(
            "Runtime.evaluate",
            json!({ "expression": expr, "returnByValue": true, "awaitPromise": true }),
        );
        assert!(r.get("exceptionDetails").is_none(), "{expr}: {r}");
        r["result"]["value"].clone()
    }

    /// Waits until `expr` is true in the page.
    pub fn wait(&mut self, expr: &str, within: Duration) -> bool {
        let until = Instant::now() + within;
        while Instant::now() < until {
            if self.eval(expr) == Value::Bool(true) {
                return true;
            }
            std::thread::sleep(Duration::from_millis(100));
        }
        false
    }

    /// Whether an element matches `selector`.
    pub fn has(&mut self, selector: &str) -> bool {
        let q = serde_json::to_string(selector).unwrap();
        self.eval(&format!("document.querySelector({q}) !== null")) == Value::Bool(true)
    }

    /// The text a reader sees in the element (`innerText`), or "" without one.
    pub fn text(&mut self, selector: &str) -> String {
        let q = serde_json::to_string(selector).unwrap();
        self.eval(&format!(
            "(document.querySelector({q}) || {{innerText: ''}}).innerText"
        ))
        .as_str()
        .unwrap_or("")
        .to_string()
    }

    /// A left click in the middle of the element, as a mouse makes it.
    pub fn click(&mut self, selector: &str) {
        let q = serde_json::to_string(selector).unwrap();
        let at = self.eval(&format!(
            "(() => {{ const e = document.querySelector({q}); if (!e) return null; \
             e.scrollIntoView({{block: 'center'}}); const r = e.getBoundingClientRect(); \
             return [r.x + r.width / 2, r.y + r.height / 2]; }})()"
        ));
        let (Some(x), Some(y)) = (at[0].as_f64(), at[1].as_f64()) else {
            panic!("nothing to click at {selector}");
        };
        for kind in ["mouseMoved", "mousePressed", "mouseReleased"] {
            self.call(
                "Input.dispatchMouseEvent",
                json!({ "type": kind, "x": x, "y": y, "button": "left", "clickCount": 1 }),
            );
        }
    }

    /// Clicks the field, selects what it holds (as a person does before typing over it)
    /// and types `text`.
    pub fn type_into(&mut self, selector: &str, text: &str) {
        self.click(selector);
        self.eval("document.activeElement.select && document.activeElement.select()");
        self.call("Input.insertText", json!({ "text": text }));
    }

    /// A PNG of the tab as it is now.
    pub fn screenshot(&mut self, path: &Path) {
        let r = self.call("Page.captureScreenshot", json!({ "format": "png" }));
        let png = base64_decode(r["data"].as_str().expect("screenshot data"));
        assert!(png.starts_with(b"\x89PNG"), "not a PNG");
        std::fs::write(path, png).expect("write the screenshot");
    }
}

impl Drop for Browser {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

/// Standard base64 (RFC 4648 §4) to bytes; the screenshot's encoding.
fn base64_decode(s: &str) -> Vec<u8> {
    let val = |c: u8| match c {
        b'A'..=b'Z' => Some(c - b'A'),
        b'a'..=b'z' => Some(c - b'a' + 26),
        b'0'..=b'9' => Some(c - b'0' + 52),
        b'+' => Some(62),
        b'/' => Some(63),
        _ => None,
    };
    let mut out = Vec::with_capacity(s.len() / 4 * 3);
    let (mut acc, mut bits) = (0u32, 0u32);
    for v in s.bytes().filter_map(val) {
        acc = (acc << 6) | u32::from(v);
        bits += 6;
        if bits >= 8 {
            bits -= 8;
            out.push((acc >> bits) as u8);
            acc &= (1 << bits) - 1;
        }
    }
    out
}

#[test]
fn base64_decodes_the_rfc_4648_examples() {
    // RFC 4648 §10 test vectors.
    for (enc, dec) in [
        ("", ""),
        ("Zg==", "f"),
        ("Zm8=", "fo"),
        ("Zm9v", "foo"),
        ("Zm9vYg==", "foob"),
        ("Zm9vYmE=", "fooba"),
        ("Zm9vYmFy", "foobar"),
    ] {
        assert_eq!(base64_decode(enc), dec.as_bytes());
    }
}
