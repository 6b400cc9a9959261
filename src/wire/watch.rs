//! Wire formats of the watch: drift figures on the result, alert and alarm events,
//! the retained alarm states, operator commands and their outcome messages.
//!
//! Shapes (all JSON objects; times RFC 3339 UTC):
//! - event (`<prefix>/<reactor>/alert` or `/alarm`, QoS 1, not retained):
//!   `{"schema":"eqwatch.event/1","id","reactor","class","alarm","event","at","state",
//!   "mode","priority","value","limit","unit","description",...}`
//! - states (`<prefix>/<reactor>/alarms`, retained): `{"schema":"eqwatch.alarms/1",
//!   "reactor","at","alarms":[{"alarm","class","state","mode","condition",...}]}`
//! - command (`<prefix>/<reactor>/command`): `{"command":"acknowledge|shelve|unshelve|
//!   out-of-service|return-to-service|reset-latch|re-baseline","alarm":"approach-high",
//!   "user":"...","client_id":"...","duration":"2 h","reason":"...","request_id":"..."}`
//! - outcome (`<prefix>/<reactor>/command/outcome`, QoS 1, not retained):
//!   `{"schema":"eqwatch.outcome/1","reactor","request_id","command","alarm","user",
//!   "client_id","accepted","outcome","message","at"}`

use serde::Serialize;
use serde_json::Value;

use super::{finite, finite_opt};
use crate::monitor::alarm::{Direction, Event, EventKind, Mode, Priority};
use crate::monitor::watch::{
    Action, DriftFigures, Exclusion, Forecast, PlantWatch, ReactorWatch, WatchEvent,
};
use crate::timefmt::format_rfc3339;

pub(crate) const EVENT_SCHEMA: &str = "eqwatch.event/1";
pub(crate) const STATES_SCHEMA: &str = "eqwatch.alarms/1";
pub(crate) const OUTCOME_SCHEMA: &str = "eqwatch.outcome/1";

#[derive(Serialize)]
pub(crate) struct EndOfRunOut {
    state: &'static str,
    limit_k: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    date: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    earliest: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    latest: Option<String>,
}

#[derive(Serialize)]
pub(crate) struct StepOut {
    /// Estimated change point, when the CUSUM found it, and the levels either side (K).
    since: String,
    detected: String,
    from_k: Option<f64>,
    to_k: Option<f64>,
}

#[derive(Serialize)]
pub(crate) struct DriftOut {
    included: bool,
    #[serde(skip_serializing_if = "Option::is_none")]
    excluded_because: Option<&'static str>,
    baseline: &'static str,
    baseline_k: Option<f64>,
    baseline_sigma_k: Option<f64>,
    run_start: Option<String>,
    ewma_k: Option<f64>,
    ewma_upper_k: Option<f64>,
    ewma_lower_k: Option<f64>,
    ewma_signal: bool,
    /// Upper (S⁺) and lower (S⁻) CUSUM statistics, K; decision interval h, K.
    cusum_k: Option<f64>,
    cusum_lower_k: Option<f64>,
    cusum_h_k: Option<f64>,
    cusum_reference_k: Option<f64>,
    cusum_signal: bool,
    step_min_k: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    step: Option<StepOut>,
    standing_step_k: Option<f64>,
    trend_since: Option<String>,
    trend_method: Option<&'static str>,
    trend_k_per_day: Option<f64>,
    trend_interval_k_per_day: Option<[Option<f64>; 2]>,
    trend_points: usize,
    trend_fitted_k: Option<f64>,
    trend_band_k: Option<f64>,
    end_of_run: EndOfRunOut,
    /// The approach normalised for operating conditions, where configured: the
    /// statistics above then run on `normalised_k`.
    #[serde(skip_serializing_if = "Option::is_none")]
    normalised: Option<NormalisedOut>,
}

#[derive(Serialize)]
pub(crate) struct NormalisedOut {
    /// `learning`, `ready` or `unavailable`.
    state: &'static str,
    samples: u64,
    min_samples: u64,
    #[serde(skip_serializing_if = "Option::is_none")]
    unavailable_because: Option<String>,
    /// This sample: the approach the regression expects at its conditions, the
    /// measured minus that, the figure the statistics take (residual + reference), the
    /// 95 % prediction half width and the leverage.
    predicted_k: Option<f64>,
    residual_k: Option<f64>,
    normalised_k: Option<f64>,
    prediction_half_width_k: Option<f64>,
    leverage: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    refused: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    fit: Option<FitOut>,
}

/// The start-of-run regression (OLS on the context inputs).
#[derive(Serialize)]
pub(crate) struct FitOut {
    method: &'static str,
    n: u64,
    intercept_k: Option<f64>,
    /// Per input: name, unit, coefficient (K per unit) ± standard error, learned range.
    coefficients: Vec<CoefficientOut>,
    r_squared: Option<f64>,
    adjusted_r_squared: Option<f64>,
    residual_sd_k: Option<f64>,
    condition_number: Option<f64>,
    reference_approach_k: Option<f64>,
}

#[derive(Serialize)]
pub(crate) struct CoefficientOut {
    input: String,
    unit: String,
    k_per_unit: Option<f64>,
    std_error: Option<f64>,
    learned_min: Option<f64>,
    learned_max: Option<f64>,
}

fn normalised_out(n: &crate::monitor::watch::NormalisedFigures) -> NormalisedOut {
    let sample = n.sample.as_ref();
    NormalisedOut {
        state: n.state,
        samples: n.samples,
        min_samples: n.min_samples,
        unavailable_because: n.unavailable_because.clone(),
        predicted_k: sample.and_then(|x| finite(x.predicted)),
        residual_k: sample.and_then(|x| finite(x.residual)),
        normalised_k: sample.and_then(|x| finite(x.normalised)),
        prediction_half_width_k: sample.and_then(|x| finite(x.half_width_95)),
        leverage: sample.and_then(|x| finite(x.leverage)),
        refused: n.refused.clone(),
        fit: n.fit.as_ref().map(|f| FitOut {
            method: "least-squares",
            n: f.n,
            intercept_k: finite(f.intercept.value),
            coefficients: f
                .coefficients
                .iter()
                .zip(&f.ranges)
                .map(|(c, r)| CoefficientOut {
                    input: c.name.clone(),
                    unit: r.unit.clone(),
                    k_per_unit: finite(c.value),
                    std_error: finite(c.std_error),
                    learned_min: finite(r.min),
                    learned_max: finite(r.max),
                })
                .collect(),
            r_squared: finite_opt(f.r_squared),
            adjusted_r_squared: finite_opt(f.adjusted_r_squared),
            residual_sd_k: finite(f.residual_sd),
            condition_number: finite(f.condition_number),
            reference_approach_k: finite(f.reference_approach),
        }),
    }
}

impl From<&DriftFigures> for DriftOut {
    fn from(f: &DriftFigures) -> Self {
        let t = f.trend.as_ref();
        let (state, date, earliest, latest) = match f.forecast {
            Forecast::NoLimit => ("no-limit", None, None, None),
            Forecast::NoTrend => ("no-trend", None, None, None),
            Forecast::NotRising => ("not-rising", None, None, None),
            Forecast::Reached => ("reached", None, None, None),
            Forecast::At {
                at_ms,
                earliest_ms,
                latest_ms,
            } => (
                "forecast",
                Some(format_rfc3339(at_ms)),
                Some(format_rfc3339(earliest_ms)),
                latest_ms.map(format_rfc3339),
            ),
        };
        Self {
            included: f.excluded.is_none(),
            excluded_because: f.excluded.map(Exclusion::as_str),
            baseline: match f.baseline {
                None => "learning",
                Some(b) if b.given => "given",
                Some(_) => "learned",
            },
            baseline_k: f.baseline.and_then(|b| finite(b.approach_k)),
            baseline_sigma_k: f.baseline.and_then(|b| finite(b.sigma_k)),
            run_start: f.baseline.map(|b| format_rfc3339(b.since_ms)),
            ewma_k: f.ewma.and_then(|e| finite(e.z)),
            ewma_upper_k: f.ewma.and_then(|e| finite(e.upper)),
            ewma_lower_k: f.ewma.and_then(|e| finite(e.lower)),
            ewma_signal: f.ewma.is_some_and(|e| e.signal),
            cusum_k: finite_opt(f.cusum_k),
            cusum_lower_k: finite_opt(f.cusum_lower_k),
            cusum_h_k: finite_opt(f.cusum_h_k),
            cusum_reference_k: finite_opt(f.cusum_reference_k),
            cusum_signal: f.cusum_signal,
            step_min_k: finite_opt(f.step_min_k),
            step: f.step.map(|st| StepOut {
                since: format_rfc3339(st.shift.since_ms),
                detected: format_rfc3339(st.detected_ms),
                from_k: finite(st.shift.from_k),
                to_k: finite(st.shift.to_k),
            }),
            standing_step_k: finite_opt(f.standing_step_k),
            trend_since: f
                .step
                .map(|st| st.shift.since_ms)
                .or(f.baseline.map(|b| b.since_ms))
                .map(format_rfc3339),
            trend_method: t.map(|t| t.method.as_str()),
            trend_k_per_day: t.and_then(|t| finite(t.slope_k_per_day)),
            trend_interval_k_per_day: t.map(|t| {
                [
                    finite(t.slope_interval_k_per_day.0),
                    finite(t.slope_interval_k_per_day.1),
                ]
            }),
            trend_points: t.map_or(0, |t| t.points),
            trend_fitted_k: t.and_then(|t| finite(t.fitted_k)),
            trend_band_k: t.and_then(|t| finite(t.band_k)),
            end_of_run: EndOfRunOut {
                state,
                limit_k: finite_opt(f.limit_k),
                date,
                earliest,
                latest,
            },
            normalised: f.normalised.as_ref().map(normalised_out),
        }
    }
}

/// On the wire a priority is its number, 1 (highest) to 4.
fn priority(p: Priority) -> u8 {
    p.number()
}

/// The event's name on the wire (`raised`, `cleared`, `out-of-service`, ...).
pub(crate) fn event_name(k: &EventKind) -> &'static str {
    match k {
        EventKind::Raised => "raised",
        EventKind::Cleared => "cleared",
        EventKind::Acknowledged { .. } => "acknowledged",
        EventKind::Realarmed => "re-alarmed",
        EventKind::LatchReset { .. } => "latch-reset",
        EventKind::Shelved { .. } => "shelved",
        EventKind::Unshelved { .. } => "unshelved",
        EventKind::Suppressed { .. } => "suppressed",
        EventKind::Unsuppressed => "unsuppressed",
        EventKind::OutOfService { .. } => "out-of-service",
        EventKind::ReturnedToService { .. } => "returned-to-service",
    }
}

#[derive(Serialize)]
struct EventOut<'a> {
    schema: &'static str,
    id: String,
    reactor: &'a str,
    class: &'static str,
    alarm: &'a str,
    event: &'static str,
    at: String,
    state: &'static str,
    mode: &'static str,
    priority: u8,
    value: Option<f64>,
    limit: Option<f64>,
    direction: &'static str,
    unit: &'a str,
    description: &'a str,
    #[serde(skip_serializing_if = "Option::is_none")]
    by: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    reason: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    until: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    auto: Option<bool>,
}

/// The event JSON. Its id is stable across redelivery and unique across restarts:
/// `<reactor>/<alarm>#<seq>@<epoch ms>`.
pub(crate) fn encode_event(reactor: &str, w: &ReactorWatch, e: &WatchEvent) -> String {
    let x = &w.watched[e.index];
    let cfg = x.alarm.config();
    let (by, reason, until, auto) = match &e.event.kind {
        EventKind::Acknowledged { by }
        | EventKind::LatchReset { by }
        | EventKind::ReturnedToService { by } => (Some(by.as_str()), None, None, None),
        EventKind::Shelved {
            by,
            reason,
            until_ms,
        } => (
            Some(by.as_str()),
            Some(reason.as_str()),
            Some(format_rfc3339(*until_ms)),
            None,
        ),
        EventKind::Unshelved { auto, by } => (by.as_deref(), None, None, Some(*auto)),
        EventKind::Suppressed { reason } => (None, Some(reason.as_str()), None, None),
        EventKind::OutOfService { by, reason } => {
            (Some(by.as_str()), Some(reason.as_str()), None, None)
        }
        _ => (None, None, None, None),
    };
    let out = EventOut {
        schema: EVENT_SCHEMA,
        id: format!("{reactor}/{}@{}", e.event.id, e.event.at_ms),
        reactor,
        class: e.class.as_str(),
        alarm: &cfg.id,
        event: event_name(&e.event.kind),
        at: format_rfc3339(e.event.at_ms),
        state: x.alarm.state().as_str(),
        mode: x.alarm.mode().as_str(),
        priority: priority(cfg.priority),
        value: finite_opt(x.value).filter(|v| v.abs() < 1e12),
        limit: finite(cfg.limit),
        direction: match cfg.direction {
            Direction::High => "high",
            Direction::Low => "low",
        },
        unit: x.unit,
        description: &x.description,
        by,
        reason,
        until,
        auto,
    };
    serde_json::to_string(&out).unwrap_or_else(|_| "{}".into())
}

/// The plant-wide flood alert event (`<prefix>/alert`).
pub(crate) fn encode_flood_event(w: &PlantWatch, e: &Event) -> String {
    serde_json::json!({
        "schema": EVENT_SCHEMA,
        "id": format!("plant/{}@{}", e.id, e.at_ms),
        "class": "alert",
        "alarm": "flood",
        "event": event_name(&e.kind),
        "at": format_rfc3339(e.at_ms),
        "state": w.flood.state().as_str(),
        "value": w.rate(),
        "limit": 10,
        "unit": "alarms per 10 min",
        "description": "alarm flood: more than 10 operator alarms in 10 minutes (EEMUA 191 / ISA-18.2 performance figure)",
    })
    .to_string()
}

/// The plant-wide retained state (`<prefix>/alarms`).
pub(crate) fn encode_plant_states(w: &PlantWatch, at_ms: i64) -> String {
    serde_json::json!({
        "schema": STATES_SCHEMA,
        "at": format_rfc3339(at_ms),
        "alarms_last_10min": w.rate(),
        "flood": w.flood.state().as_str(),
        "floods": w.floods,
    })
    .to_string()
}

#[derive(Serialize)]
struct StateOut<'a> {
    alarm: &'a str,
    class: &'static str,
    state: &'static str,
    mode: &'static str,
    condition: bool,
    annunciating: bool,
    priority: u8,
    value: Option<f64>,
    limit: Option<f64>,
    unit: &'a str,
    description: &'a str,
    #[serde(skip_serializing_if = "Option::is_none")]
    shelved_until: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    by: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    reason: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    last_raised: Option<String>,
}

#[derive(Serialize)]
struct StatesOut<'a> {
    schema: &'static str,
    reactor: &'a str,
    at: String,
    offline: bool,
    alarms: Vec<StateOut<'a>>,
}

/// Current states of every alert and alarm of a reactor (retained).
pub(crate) fn encode_states(reactor: &str, w: &ReactorWatch, at_ms: i64) -> String {
    let alarms = w
        .watched
        .iter()
        .map(|x| {
            let cfg = x.alarm.config();
            let (until, by, reason) = match x.alarm.mode() {
                Mode::Active => (None, None, None),
                Mode::Shelved {
                    until_ms,
                    by,
                    reason,
                } => (
                    Some(format_rfc3339(*until_ms)),
                    Some(by.as_str()),
                    Some(reason.as_str()),
                ),
                Mode::SuppressedByDesign { reason } => (None, None, Some(reason.as_str())),
                Mode::OutOfService { by, reason } => {
                    (None, Some(by.as_str()), Some(reason.as_str()))
                }
            };
            StateOut {
                alarm: &cfg.id,
                class: x.class.as_str(),
                state: x.alarm.state().as_str(),
                mode: x.alarm.mode().as_str(),
                condition: x.alarm.condition(),
                annunciating: x.alarm.annunciating(),
                priority: priority(cfg.priority),
                value: finite_opt(x.value).filter(|v| v.abs() < 1e12),
                limit: finite(cfg.limit),
                unit: x.unit,
                description: &x.description,
                shelved_until: until,
                by,
                reason,
                last_raised: x.alarm.last_annunciated_ms().map(format_rfc3339),
            }
        })
        .collect();
    let out = StatesOut {
        schema: STATES_SCHEMA,
        reactor,
        at: format_rfc3339(at_ms),
        offline: w.offline(),
        alarms,
    };
    serde_json::to_string(&out).unwrap_or_else(|_| "{}".into())
}

/// Who sent a command, as far as the message could be read (a refusal names them).
#[derive(Debug, Clone, Default, PartialEq)]
pub(crate) struct Sender {
    pub request_id: Option<String>,
    pub user: Option<String>,
    pub client_id: Option<String>,
}

impl Sender {
    /// The name an accepted command is carried out by: the user, else the client id.
    pub(crate) fn name(&self) -> &str {
        self.user
            .as_deref()
            .or(self.client_id.as_deref())
            .unwrap_or_default()
    }
}

/// A decoded command.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Command {
    pub action: Action,
    pub alarm: Option<String>,
    pub sender: Sender,
}

/// A command that could not be read: what to fix, and whoever sent it.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct CommandProblem {
    pub message: String,
    pub sender: Sender,
}

/// Reads a command message; the error says what to fix.
pub(crate) fn decode_command(payload: &[u8]) -> Result<Command, CommandProblem> {
    let unread = |message: String| CommandProblem {
        message,
        sender: Sender::default(),
    };
    let v: Value = match serde_json::from_slice(payload) {
        Ok(v @ Value::Object(_)) => v,
        Ok(_) => return Err(unread("a command is a JSON object".into())),
        Err(e) => return Err(unread(format!("not JSON: {e}"))),
    };
    let text = |k: &str| {
        v.get(k)
            .and_then(Value::as_str)
            .map(|s| s.trim().to_string())
    };
    let sender = Sender {
        request_id: text("request_id"),
        user: text("user").filter(|s| !s.is_empty()),
        client_id: text("client_id").filter(|s| !s.is_empty()),
    };
    let fail = |message: String| {
        Err(CommandProblem {
            message,
            sender: sender.clone(),
        })
    };
    let reason = text("reason").unwrap_or_default();
    let action = match text("command").as_deref() {
        Some("acknowledge" | "ack") => Action::Acknowledge,
        Some("shelve") => {
            let Some(d) = text("duration") else {
                return fail("shelve needs \"duration\", e.g. \"2 h\"".into());
            };
            let ms = match crate::config::parse_duration(&d) {
                Ok(d) => i64::try_from(d.as_millis()).unwrap_or(i64::MAX),
                Err(e) => return fail(format!("duration: {e}")),
            };
            Action::Shelve {
                duration_ms: ms,
                reason,
            }
        }
        Some("unshelve") => Action::Unshelve,
        Some("out-of-service") => Action::OutOfService { reason },
        Some("return-to-service") => Action::ReturnToService,
        Some("reset-latch") => Action::ResetLatch,
        Some("re-baseline") => Action::Rebaseline { reason },
        Some(o) => {
            return fail(format!(
                "unknown command \"{o}\"; expected acknowledge, shelve, unshelve, out-of-service, return-to-service, reset-latch or re-baseline"
            ));
        }
        None => return fail("missing \"command\"".into()),
    };
    Ok(Command {
        action,
        alarm: text("alarm").filter(|s| !s.is_empty()),
        sender,
    })
}

/// What became of a command.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Verdict {
    /// Carried out.
    Accepted,
    /// Read and allowed, but the alarm's state does not allow it.
    Refused,
    /// The user or client is not in the allow list.
    NotAllowed,
    /// The message could not be read as a command.
    Invalid,
}

impl Verdict {
    /// Every verdict, in the order of the metrics' counters.
    pub const ALL: [Verdict; 4] = [
        Verdict::Accepted,
        Verdict::Refused,
        Verdict::NotAllowed,
        Verdict::Invalid,
    ];

    /// The word on the wire and the metrics label.
    pub fn as_str(self) -> &'static str {
        match self {
            Verdict::Accepted => "accepted",
            Verdict::Refused => "refused",
            Verdict::NotAllowed => "not-allowed",
            Verdict::Invalid => "invalid",
        }
    }

    /// Position in [`Verdict::ALL`] (the metrics' counter).
    pub fn index(self) -> usize {
        self as usize
    }
}

/// One command's answer, as published on `<prefix>/<reactor>/command/outcome`.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Outcome<'a> {
    pub reactor: &'a str,
    pub sender: &'a Sender,
    /// The command's name, when it could be read.
    pub command: Option<&'a str>,
    pub alarm: Option<&'a str>,
    pub verdict: Verdict,
    /// What was done, or what to fix.
    pub message: &'a str,
    pub at_ms: i64,
}

#[derive(Serialize)]
struct OutcomeOut<'a> {
    schema: &'static str,
    reactor: &'a str,
    request_id: Option<&'a str>,
    command: Option<&'a str>,
    alarm: Option<&'a str>,
    user: Option<&'a str>,
    client_id: Option<&'a str>,
    accepted: bool,
    outcome: &'static str,
    message: &'a str,
    at: String,
}

/// The outcome message (schema [`OUTCOME_SCHEMA`]).
pub(crate) fn encode_outcome(o: &Outcome<'_>) -> String {
    let out = OutcomeOut {
        schema: OUTCOME_SCHEMA,
        reactor: o.reactor,
        request_id: o.sender.request_id.as_deref(),
        command: o.command,
        alarm: o.alarm,
        user: o.sender.user.as_deref(),
        client_id: o.sender.client_id.as_deref(),
        accepted: o.verdict == Verdict::Accepted,
        outcome: o.verdict.as_str(),
        message: o.message,
        at: format_rfc3339(o.at_ms),
    };
    serde_json::to_string(&out).unwrap_or_else(|_| "{}".into())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn commands_decode_or_say_what_to_fix() {
        // Invented command messages.
        let c = decode_command(
            br#"{"command":"shelve","alarm":"approach-high","user":"op1","duration":"2 h","reason":"analyser work","request_id":"r1"}"#,
        )
        .unwrap();
        assert_eq!(
            c.action,
            Action::Shelve {
                duration_ms: 7_200_000,
                reason: "analyser work".into()
            }
        );
        assert_eq!(c.sender.request_id.as_deref(), Some("r1"));
        assert_eq!(c.sender.name(), "op1");
        for (bad, says) in [
            (
                &br#"{"command":"shelve","alarm":"a","user":"u"}"#[..],
                "duration",
            ),
            (br#"{"command":"explode"}"#, "unknown command"),
            (br#"[1]"#, "JSON object"),
            (br#"nope"#, "not JSON"),
            (br#"{"alarm":"a"}"#, "missing \"command\""),
        ] {
            let e = decode_command(bad).unwrap_err();
            assert!(e.message.contains(says), "{}", e.message);
        }
    }
}
