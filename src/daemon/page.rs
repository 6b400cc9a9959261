//! The live page's shell: the tap on the evaluator's records, the thread that keeps the
//! page's snapshot ([`crate::web::live::Live`]) behind a mutex, and the page's
//! requests (`/`, `/api/...`). Locks are held only to read or update the snapshot or
//! the sessions, never across an await; password checks run on the blocking pool, one
//! at a time. Commands go to the evaluator's input queue as the command topic's
//! message, so they take the MQTT commands' path (allow list, watch, outcome, journal).

use std::collections::{HashMap, VecDeque};
use std::sync::atomic::{AtomicU64, Ordering::Relaxed};
use std::sync::{Arc, Mutex, MutexGuard};
use std::time::Duration;

use serde_json::{Value, json};
use tokio::sync::{Semaphore, mpsc, watch};
use tracing::{info, warn};

use super::{Clock, RawInput};
use crate::config::Settings;
use crate::web::live::{Live, PeekedResult, peek_result};
use crate::web::request::{self, COOKIE, CSRF_HEADER, Head};
use crate::web::{Auth, auth};

/// Trend points waiting for the page's thread at most; beyond it the oldest are dropped
/// (counted) rather than slow the evaluator or hold memory.
const TAP_POINTS: usize = 16_384;
/// Command outcomes waiting at most (they come one per command).
const TAP_OUTCOMES: usize = 64;
/// How long the page's thread, once woken, lets records gather before it takes them.
const GATHER: Duration = Duration::from_millis(50);
/// How long a command request waits for its outcome before answering "sent".
const OUTCOME_WAIT: Duration = Duration::from_secs(5);

/// What the evaluator has left for the page's thread since it last looked: every result's
/// trend point (read here, a narrow read with no tree), and only the latest text of each
/// retained topic (a reactor's result, its alarm states) — so a flood leaves at most one
/// result text per reactor and a bounded list of points waiting, never a queue of 3 KB
/// copies of every message.
#[derive(Default)]
struct Pending {
    points: VecDeque<(String, PeekedResult)>,
    latest: HashMap<String, String>,
    outcomes: Vec<(String, String)>,
}

/// The evaluator's side: leaves the records the page shows, never waits.
pub struct Tap {
    pending: Arc<Mutex<Pending>>,
    /// Wakes the page's thread (one token is enough; a full channel means it is awake).
    wake: std::sync::mpsc::SyncSender<()>,
    dropped: Arc<AtomicU64>,
}

impl Tap {
    pub fn offer(&self, batch: &[crate::pipeline::Append]) {
        let mut any = false;
        let was_empty;
        {
            let mut p = lock(&self.pending);
            was_empty = p.is_empty();
            for a in batch.iter().filter(|a| wanted(&a.topic)) {
                if a.topic.ends_with("/result") {
                    // The pipeline gives each result's point beside its text.
                    let Some(peeked) = a
                        .point
                        .map(PeekedResult::from)
                        .or_else(|| peek_result(&a.payload))
                    else {
                        continue;
                    };
                    if p.points.len() == TAP_POINTS {
                        p.points.pop_front();
                        self.dropped.fetch_add(1, Relaxed);
                    }
                    p.points.push_back((a.topic.clone(), peeked));
                    p.keep_latest(&a.topic, &a.payload);
                } else if a.topic.ends_with("/alarms") {
                    p.keep_latest(&a.topic, &a.payload);
                } else if p.outcomes.len() < TAP_OUTCOMES {
                    p.outcomes.push((a.topic.clone(), a.payload.clone()));
                } else {
                    self.dropped.fetch_add(1, Relaxed);
                }
                any = true;
            }
        }
        // Only when the page's thread had taken everything: otherwise a wake-up is on its
        // way (or the thread is gathering) and it takes this too. So a flood wakes the
        // thread at most once per GATHER, not once per evaluator batch.
        if any && was_empty {
            // Full: the thread has a wake-up coming.
            let _ = self.wake.try_send(());
        }
    }
}

impl Pending {
    fn is_empty(&self) -> bool {
        self.points.is_empty() && self.latest.is_empty() && self.outcomes.is_empty()
    }

    /// The latest text of a retained topic, in the room of the one it replaces.
    fn keep_latest(&mut self, topic: &str, text: &str) {
        match self.latest.get_mut(topic) {
            Some(slot) => {
                slot.clear();
                slot.push_str(text);
            }
            None => {
                self.latest.insert(topic.to_string(), text.to_string());
            }
        }
    }
}

fn wanted(topic: &str) -> bool {
    topic.ends_with("/result") || topic.ends_with("/alarms") || topic.ends_with("/command/outcome")
}

/// Everything the page's requests need.
pub struct Web {
    live: Arc<Mutex<Live>>,
    updates: watch::Receiver<u64>,
    dropped: Arc<AtomicU64>,
    auth: Mutex<Auth>,
    /// Password checks at once (each costs the hash's iterations of CPU).
    logins: Semaphore,
    /// Weak: the page must not keep the evaluator's input open at shutdown.
    commands: mpsc::WeakSender<RawInput>,
    prefix: String,
    clock: Clock,
    next_request: AtomicU64,
}

fn lock<T>(m: &Mutex<T>) -> MutexGuard<'_, T> {
    m.lock().unwrap_or_else(|e| e.into_inner())
}

/// Starts the page's thread; returns the evaluator's tap and the page's state.
pub fn start(
    settings: &Settings,
    commands: mpsc::Sender<RawInput>,
    clock: Clock,
) -> std::io::Result<(Tap, Arc<Web>)> {
    let reactors: Vec<(String, String)> = settings
        .reactors
        .iter()
        .map(|r| (r.spec.id.clone(), r.spec.name.clone()))
        .collect();
    let live = Arc::new(Mutex::new(Live::new(
        &settings.site,
        &settings.topic_prefix,
        &reactors,
    )));
    let pending = Arc::new(Mutex::new(Pending::default()));
    let (wake, woken) = std::sync::mpsc::sync_channel::<()>(1);
    let (version, updates) = watch::channel(0u64);
    let (l, c, from) = (live.clone(), clock.clone(), pending.clone());
    std::thread::Builder::new()
        .name("eqwatch-page".into())
        .spawn(move || {
            // Ends when the tap is dropped (the evaluator has stopped).
            while woken.recv().is_ok() {
                // What comes in the next moment is taken with this (one wake-up for
                // many evaluator batches); the page polls every few seconds.
                std::thread::sleep(GATHER);
                let batch = std::mem::take(&mut *lock(&from));
                {
                    let mut live = lock(&l);
                    let now = c();
                    for (topic, peeked) in batch.points {
                        live.record_result(&topic, peeked, now);
                    }
                    for (topic, text) in batch.latest {
                        live.record_text(&topic, text);
                    }
                    for (topic, text) in &batch.outcomes {
                        live.record(topic, text, now);
                    }
                }
                version.send_modify(|v| *v += 1);
            }
        })?;
    let dropped = Arc::new(AtomicU64::new(0));
    let users = settings.http_users.clone();
    if !users.is_empty() {
        info!(users = %users.iter().map(|u| u.name.as_str()).collect::<Vec<_>>().join(","), "live page: logins for commands enabled");
    }
    let web = Web {
        live,
        updates,
        dropped: dropped.clone(),
        auth: Mutex::new(Auth::new(users)),
        logins: Semaphore::new(1),
        commands: commands.downgrade(),
        prefix: settings.topic_prefix.clone(),
        clock,
        next_request: AtomicU64::new(1),
    };
    let tap = Tap {
        pending,
        wake,
        dropped,
    };
    Ok((tap, Arc::new(web)))
}

/// A response: status, content type, body, extra header lines.
pub struct Reply {
    pub status: u16,
    pub ctype: &'static str,
    pub body: String,
    pub headers: Vec<String>,
}

fn reply(status: u16, body: Value) -> Reply {
    Reply {
        status,
        ctype: "application/json",
        body: body.to_string(),
        headers: Vec::new(),
    }
}

fn error(status: u16, message: impl std::fmt::Display) -> Reply {
    reply(status, json!({ "error": message.to_string() }))
}

impl Web {
    /// The page's routes; `None` when the path is not the page's.
    pub async fn handle(&self, head: &Head, body: &[u8]) -> Option<Reply> {
        let now = (self.clock)();
        let token = head.cookie(COOKIE);
        let r = match (head.method.as_str(), head.path.as_str()) {
            ("GET", "/") => Reply {
                status: 200,
                ctype: "text/html; charset=utf-8",
                body: crate::web::PAGE.to_string(),
                headers: Vec::new(),
            },
            ("GET", "/api/plant") => Reply {
                status: 200,
                ctype: "application/json",
                body: lock(&self.live).plant_json(now, self.dropped.load(Relaxed)),
                headers: Vec::new(),
            },
            ("GET", p) if p.starts_with("/api/trend/") => {
                let id = &p["/api/trend/".len()..];
                let period = head.param("period").unwrap_or("8h");
                match lock(&self.live).trend_json(id, period) {
                    Some(body) => Reply {
                        status: 200,
                        ctype: "application/json",
                        body,
                        headers: Vec::new(),
                    },
                    None => error(404, "unknown reactor or period (1h, 8h, 24h, 7d)"),
                }
            }
            ("GET", "/api/session") => match lock(&self.auth).session(token, now) {
                Some((s, u)) => reply(200, session_json(&s, &u)),
                None => error(401, "not logged in"),
            },
            ("POST", "/api/login") => self.login(head, body, now).await,
            ("POST", "/api/logout") => {
                let mut a = lock(&self.auth);
                match a.authorize(token, head.header(CSRF_HEADER), None, now) {
                    Err(e) => error(e.status(), e),
                    Ok(user) => {
                        a.logout(token);
                        info!(user = %user, "live page: logged out");
                        let mut r = reply(200, json!({ "user": null }));
                        r.headers.push(format!(
                            "Set-Cookie: {COOKIE}=; HttpOnly; SameSite=Strict; Path=/; Max-Age=0"
                        ));
                        r
                    }
                }
            }
            ("POST", "/api/command") => self.command(head, body, now).await,
            _ => return None,
        };
        Some(r)
    }

    async fn login(&self, head: &Head, body: &[u8], now: i64) -> Reply {
        if !head.is_json() {
            return error(415, "send the login as application/json");
        }
        let (user, password) = match request::read_login(body) {
            Ok(x) => x,
            Err(e) => return error(400, e),
        };
        let stored = match lock(&self.auth).begin_login(&user, now) {
            Ok(s) => s,
            Err(e) => return error(429, e),
        };
        let Ok(_permit) = self.logins.acquire().await else {
            return error(503, "shutting down");
        };
        let ok = tokio::task::spawn_blocking(move || auth::verify(&stored, password.as_bytes()))
            .await
            .unwrap_or(false);
        let tokens = auth::random_token().and_then(|t| Ok((t, auth::random_token()?)));
        let (token, csrf) = match tokens {
            Ok(t) => t,
            Err(e) => return error(500, e),
        };
        let now = (self.clock)();
        let mut a = lock(&self.auth);
        match a.finish_login(&user, ok, token.clone(), csrf, now) {
            Err(e) => {
                warn!(user = %user, error = %e, "live page: login refused");
                let status = match e {
                    auth::AuthError::Wrong => 401,
                    auth::AuthError::Throttled(_) => 429,
                    _ => 503,
                };
                error(status, e)
            }
            Ok(_) => {
                info!(user = %user, "live page: logged in");
                let body = a
                    .session(Some(&token), now)
                    .map_or(Value::Null, |(s, u)| session_json(&s, &u));
                let mut r = reply(200, body);
                r.headers.push(format!(
                    "Set-Cookie: {COOKIE}={token}; HttpOnly; SameSite=Strict; Path=/; Max-Age={}",
                    auth::ABSOLUTE_MS / 1000
                ));
                r
            }
        }
    }

    async fn command(&self, head: &Head, body: &[u8], now: i64) -> Reply {
        // Who first: without a session nothing else is looked at.
        let token = head.cookie(COOKIE);
        let csrf = head.header(CSRF_HEADER);
        if let Err(e) = lock(&self.auth).authorize(token, csrf, None, now) {
            return error(e.status(), e);
        }
        if !head.is_json() {
            return error(415, "send the command as application/json");
        }
        let c = match request::read_command(body) {
            Ok(c) => c,
            Err(e) => return error(400, e),
        };
        let user = match lock(&self.auth).authorize(token, csrf, Some(&c.command), now) {
            Ok(u) => u,
            Err(e) => return error(e.status(), e),
        };
        if !lock(&self.live).has_reactor(&c.reactor) {
            return error(404, format!("no reactor \"{}\"", c.reactor));
        }
        let n = self.next_request.fetch_add(1, Relaxed);
        let request_id = format!("page-{now}-{n}");
        let raw = RawInput {
            topic: format!("{}/{}/command", self.prefix, c.reactor),
            payload: request::command_payload(&c, &user, &request_id).into_bytes(),
            arrival_ms: now,
        };
        let mut updates = self.updates.clone();
        let Some(commands) = self.commands.upgrade() else {
            return error(503, "the evaluator has stopped");
        };
        if commands.send(raw).await.is_err() {
            return error(503, "the evaluator has stopped");
        }
        drop(commands);
        info!(user = %user, reactor = %c.reactor, command = %c.command, alarm = %c.alarm, request_id = %request_id, "live page: command handed to the evaluator");
        let wait = async {
            loop {
                if let Some(o) = lock(&self.live).outcome(&request_id) {
                    return o.clone();
                }
                if updates.changed().await.is_err() {
                    return Value::Null;
                }
            }
        };
        match tokio::time::timeout(OUTCOME_WAIT, wait).await {
            Ok(o) if !o.is_null() => reply(200, o),
            _ => reply(
                202,
                json!({ "request_id": request_id, "message": "sent; its outcome is not in yet (see the alarm states)" }),
            ),
        }
    }
}

fn session_json(s: &auth::Session, u: &crate::config::password::HttpUser) -> Value {
    json!({
        "user": u.name,
        "may": u.may.iter().map(|p| p.as_str()).collect::<Vec<_>>(),
        "csrf": s.csrf,
        "expires": s.expires_ms(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::pipeline::Append;

    fn append(topic: &str, payload: &str) -> Append {
        Append {
            topic: topic.into(),
            retain: true,
            point: None,
            payload: payload.into(),
        }
    }

    fn result(ts: &str, value: f64) -> String {
        // The fields a trend point reads, in an otherwise invented result.
        format!(
            r#"{{"schema":"eqwatch.result/1","reactor":"lts1","analysis_ts":"{ts}","headline":{{"figure":"approach","value":{value},"unit":"K"}},"approach_k":{value},"approach_uncertainty_k":1.5,"reactions":[{{"ln_k":4.2}}]}}"#
        )
    }

    /// A tap with no page thread behind it, and the thread's wake-up channel.
    fn tap() -> (Tap, std::sync::mpsc::Receiver<()>) {
        let (wake, woken) = std::sync::mpsc::sync_channel(1);
        let tap = Tap {
            pending: Arc::new(Mutex::new(Pending::default())),
            wake,
            dropped: Arc::new(AtomicU64::new(0)),
        };
        (tap, woken)
    }

    #[test]
    fn the_tap_wakes_the_page_only_once_it_has_taken_everything() {
        let (tap, woken) = tap();
        let t = "eqwatch/baw1/lts1/result";
        tap.offer(&[append(t, &result("2026-12-01T00:00:00Z", 10.0))]);
        assert!(
            woken.try_recv().is_ok(),
            "the first record wakes the thread"
        );
        // The thread is awake and gathering: what comes now needs no wake-up of its own.
        tap.offer(&[append(t, &result("2026-12-01T00:01:00Z", 11.0))]);
        assert!(
            woken.try_recv().is_err(),
            "no second wake-up while it gathers"
        );
        let taken = std::mem::take(&mut *lock(&tap.pending));
        assert_eq!(taken.points.len(), 2, "both points are taken in one go");
        // Having taken everything, it is woken by the next record again.
        tap.offer(&[append(t, &result("2026-12-01T00:02:00Z", 12.0))]);
        assert!(
            woken.try_recv().is_ok(),
            "woken again once it had taken everything"
        );
        // Records the page does not show wake nothing.
        let _ = std::mem::take(&mut *lock(&tap.pending));
        tap.offer(&[append("eqwatch/baw1/lts1/metrics", "{}")]);
        assert!(woken.try_recv().is_err());
    }

    #[test]
    fn the_tap_leaves_every_point_but_only_the_latest_text_of_each_topic() {
        let (tap, woken) = tap();
        let t = "eqwatch/baw1/lts1/result";
        let u = "eqwatch/baw1/hts1/result";
        let batch = [
            append(t, &result("2026-12-01T00:00:00Z", 10.0)),
            append(u, &result("2026-12-01T00:00:00Z", 8.0)),
            append("eqwatch/baw1/lts1/alarms", r#"{"alarms":[]}"#),
            append(t, &result("2026-12-01T00:01:00Z", 11.0)),
            append("eqwatch/baw1/lts1/metrics", "{}"),
            append(t, "not json"),
        ];
        tap.offer(&batch);
        tap.offer(&batch[3..4]);
        // One wake-up for both offers.
        assert!(woken.try_recv().is_ok());
        assert!(woken.try_recv().is_err());
        let p = std::mem::take(&mut *lock(&tap.pending));
        assert_eq!(p.points.len(), 4, "every readable result's point");
        assert_eq!(p.latest.len(), 3, "{:?}", p.latest.keys());
        assert!(p.latest[t].contains("\"value\":11"));
        assert!(p.outcomes.is_empty());
        // The page then shows the latest figures and the points of lts1.
        let mut live = Live::new(
            "baw1",
            "eqwatch/baw1",
            &[("lts1".into(), "LTS".into()), ("hts1".into(), "HTS".into())],
        );
        for (topic, peeked) in p.points {
            live.record_result(&topic, peeked, 0);
        }
        for (topic, text) in p.latest {
            live.record_text(&topic, text);
        }
        let plant: Value = serde_json::from_str(&live.plant_json(0, 0)).expect("json");
        assert_eq!(plant["reactors"][0]["result"]["approach_k"], 11.0);
        assert_eq!(plant["reactors"][0]["alarms"], serde_json::json!([]));
        let trend: Value =
            serde_json::from_str(&live.trend_json("lts1", "1h").expect("trend")).expect("json");
        // The repeated 00:01 point is out of order and kept once.
        assert_eq!(trend["points"].as_array().map(Vec::len), Some(2), "{trend}");
    }
}
