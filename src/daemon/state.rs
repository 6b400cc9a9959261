//! The watch state file: what each reactor's run has learned (baseline, EWMA, CUSUM,
//! aggregates) saved beside the journal, so a daemon restart does not throw away weeks
//! of baseline and trend, and alert and alarm states and modes (shelved with its expiry,
//! out of service, acknowledged) so a restart neither re-raises nor unshelves anything.
//! Suppression by design is not kept: the next data decide it again.
//!
//! Shape: `{"schema":"eqwatch.state/1","saved_at":...,"reactors":{"<id>":{"settings":
//! "<drift settings as text>","run_start_ms":...,"learn":[n,mean,m2],"baseline":{...},
//! "ewma":[z,n],"cusum":{"reference_k","upper":[s,n,sum,since_ms],"lower":[...]},"step":
//! [since_ms,from_k,to_k,samples,detected_ms],"step_reference_k",
//! "bucket":[start_ms,n,sum],"aggregates":[[day,K],...],"front_daily":[[epoch day,m],...],
//! "normalisation":{"learning"|"ready":<regression statistics>}|{"unavailable":why}}}}`.
//! A reactor whose drift settings changed since the save starts a new run.

use serde_json::{Value, json};

use crate::monitor::alarm::{AlarmSnapshot, Mode, State};
use crate::monitor::drift::{CusumSide, CusumState, Shift};
use crate::monitor::watch::{Baseline, DriftSnapshot, NormState, Step};
use crate::pipeline::Engine;

fn state_name(s: State) -> &'static str {
    match s {
        State::Normal => "normal",
        State::Unacknowledged => "unacknowledged",
        State::Acknowledged => "acknowledged",
        State::ReturnedUnacknowledged => "returned-unacknowledged",
        State::Latched => "latched",
    }
}

fn state_from(s: &str) -> Option<State> {
    Some(match s {
        "normal" => State::Normal,
        "unacknowledged" => State::Unacknowledged,
        "acknowledged" => State::Acknowledged,
        "returned-unacknowledged" => State::ReturnedUnacknowledged,
        "latched" => State::Latched,
        _ => return None,
    })
}

fn alarm_json(a: &AlarmSnapshot, config: &str) -> Value {
    let mode = match &a.mode {
        Mode::Active | Mode::SuppressedByDesign { .. } => json!({"mode": "active"}),
        Mode::Shelved {
            until_ms,
            by,
            reason,
        } => json!({"mode": "shelved", "until_ms": until_ms, "by": by, "reason": reason}),
        Mode::OutOfService { by, reason } => {
            json!({"mode": "out-of-service", "by": by, "reason": reason})
        }
    };
    json!({
        "config": config,
        "state": state_name(a.state),
        "mode": mode,
        "raw": a.raw,
        "condition": a.condition,
        "acknowledged_ms": a.acknowledged_ms,
        "last_annunciated_ms": a.last_annunciated_ms,
        "latest_ms": a.latest_ms,
        "seq": a.seq,
    })
}

fn alarm_from(v: &Value) -> Option<(String, AlarmSnapshot)> {
    let m = v.get("mode")?;
    let text = |k: &str| m.get(k).and_then(Value::as_str).map(str::to_string);
    let mode = match m.get("mode")?.as_str()? {
        "active" => Mode::Active,
        "shelved" => Mode::Shelved {
            until_ms: m.get("until_ms")?.as_i64()?,
            by: text("by")?,
            reason: text("reason")?,
        },
        "out-of-service" => Mode::OutOfService {
            by: text("by")?,
            reason: text("reason")?,
        },
        _ => return None,
    };
    Some((
        v.get("config")?.as_str()?.to_string(),
        AlarmSnapshot {
            state: state_from(v.get("state")?.as_str()?)?,
            mode,
            raw: v.get("raw")?.as_bool()?,
            condition: v.get("condition")?.as_bool()?,
            acknowledged_ms: v.get("acknowledged_ms").and_then(Value::as_i64),
            last_annunciated_ms: v.get("last_annunciated_ms").and_then(Value::as_i64),
            latest_ms: v.get("latest_ms")?.as_i64()?,
            seq: v.get("seq")?.as_u64()?,
        },
    ))
}

pub const STATE_SCHEMA: &str = "eqwatch.state/1";
pub const STATE_FILE: &str = "watch-state.json";

/// The state of every reactor as JSON text.
pub fn encode(engine: &Engine, now_ms: i64) -> String {
    let mut reactors = serde_json::Map::new();
    let alarms = engine.alarm_snapshots();
    for ((id, settings, s), (_, al)) in engine.drift_snapshots().into_iter().zip(alarms) {
        let alarms: serde_json::Map<String, Value> = al
            .iter()
            .map(|(aid, cfg, a)| (aid.clone(), alarm_json(a, cfg)))
            .collect();
        reactors.insert(
            id,
            json!({
                "settings": settings,
                "run_start_ms": s.run_start_ms,
                "learn": [s.learn_n, s.learn_mean, s.learn_m2],
                "baseline": s.baseline.map(|b| json!({
                    "approach_k": b.approach_k,
                    "sigma_k": b.sigma_k,
                    "given": b.given,
                    "since_ms": b.since_ms,
                })),
                "ewma": s.ewma.map(|(z, n)| json!([z, n])),
                "cusum": s.cusum.map(|c| json!({
                    "reference_k": c.reference_k,
                    "upper": side_json(&c.upper),
                    "lower": side_json(&c.lower),
                })),
                "step": s.step.map(|st| json!([
                    st.shift.since_ms, st.shift.from_k, st.shift.to_k, st.shift.samples, st.detected_ms
                ])),
                "step_reference_k": s.step_reference_k,
                "bucket": s.bucket.map(|(a, n, sum)| json!([a, n, sum])),
                "aggregates": s.aggregates.iter().map(|(d, v)| json!([d, v])).collect::<Vec<_>>(),
                "front_daily": s.front_daily.iter().map(|(d, v)| json!([d, v])).collect::<Vec<_>>(),
                "normalisation": s.norm.as_ref().map(norm_json),
                "alarms": alarms,
            }),
        );
    }
    json!({
        "schema": STATE_SCHEMA,
        "saved_at": crate::timefmt::format_rfc3339(now_ms),
        "reactors": reactors,
    })
    .to_string()
}

fn side_json(s: &CusumSide) -> Value {
    json!([s.s, s.n, s.sum, s.since_ms])
}

fn side_from(v: &Value) -> Option<CusumSide> {
    let a = v.as_array()?;
    Some(CusumSide {
        s: a.first()?.as_f64()?,
        n: u32::try_from(a.get(1)?.as_u64()?).ok()?,
        sum: a.get(2)?.as_f64()?,
        since_ms: a.get(3)?.as_i64()?,
    })
}

fn snapshot(v: &Value) -> Option<DriftSnapshot> {
    let f = |x: &Value| x.as_f64();
    let learn = v.get("learn")?.as_array()?;
    let baseline = match v.get("baseline") {
        None | Some(Value::Null) => None,
        Some(b) => Some(Baseline {
            approach_k: f(b.get("approach_k")?)?,
            sigma_k: f(b.get("sigma_k")?)?,
            given: b.get("given")?.as_bool()?,
            since_ms: b.get("since_ms")?.as_i64()?,
        }),
    };
    let pair = |x: Option<&Value>| -> Option<Option<Vec<Value>>> {
        match x {
            None | Some(Value::Null) => Some(None),
            Some(Value::Array(a)) => Some(Some(a.clone())),
            Some(_) => None,
        }
    };
    let ewma = match pair(v.get("ewma"))? {
        None => None,
        Some(a) => Some((f(a.first()?)?, u32::try_from(a.get(1)?.as_u64()?).ok()?)),
    };
    let bucket = match pair(v.get("bucket"))? {
        None => None,
        Some(a) => Some((
            a.first()?.as_i64()?,
            usize::try_from(a.get(1)?.as_u64()?).ok()?,
            f(a.get(2)?)?,
        )),
    };
    let cusum = match v.get("cusum") {
        None | Some(Value::Null) => None,
        Some(c) => Some(CusumState {
            reference_k: f(c.get("reference_k")?)?,
            upper: side_from(c.get("upper")?)?,
            lower: side_from(c.get("lower")?)?,
        }),
    };
    let step = match pair(v.get("step"))? {
        None => None,
        Some(a) => Some(Step {
            shift: Shift {
                since_ms: a.first()?.as_i64()?,
                from_k: f(a.get(1)?)?,
                to_k: f(a.get(2)?)?,
                samples: u32::try_from(a.get(3)?.as_u64()?).ok()?,
            },
            detected_ms: a.get(4)?.as_i64()?,
        }),
    };
    let mut aggregates = Vec::new();
    for a in v.get("aggregates")?.as_array()? {
        let a = a.as_array()?;
        aggregates.push((f(a.first()?)?, f(a.get(1)?)?));
    }
    Some(DriftSnapshot {
        run_start_ms: v.get("run_start_ms").and_then(Value::as_i64),
        learn_n: usize::try_from(learn.first()?.as_u64()?).ok()?,
        learn_mean: f(learn.get(1)?)?,
        learn_m2: f(learn.get(2)?)?,
        baseline,
        ewma,
        cusum,
        step,
        step_reference_k: v.get("step_reference_k").and_then(Value::as_f64),
        bucket,
        aggregates,
        front_daily: v
            .get("front_daily")
            .and_then(Value::as_array)
            .map(|days| {
                days.iter()
                    .filter_map(|d| Some((d.get(0)?.as_i64()?, d.get(1)?.as_f64()?)))
                    .collect()
            })
            .unwrap_or_default(),
        norm: v.get("normalisation").and_then(norm_from),
    })
}

/// The normalisation's state: the learner's sufficient statistics, or the fitted model
/// (saved as its learner and fitted again when read), or why it is unavailable.
fn norm_json(n: &NormState) -> Value {
    match n {
        NormState::Learning(l) => json!({ "learning": serde_json::to_value(l).ok() }),
        NormState::Ready(m) => json!({ "ready": serde_json::to_value(m.as_ref()).ok() }),
        NormState::Unavailable(why) => json!({ "unavailable": why }),
    }
}

fn norm_from(v: &Value) -> Option<NormState> {
    if let Some(l) = v.get("learning") {
        return serde_json::from_value(l.clone())
            .ok()
            .map(NormState::Learning);
    }
    if let Some(m) = v.get("ready") {
        return serde_json::from_value(m.clone())
            .ok()
            .map(|m| NormState::Ready(Box::new(m)));
    }
    v.get("unavailable")
        .and_then(Value::as_str)
        .map(|s| NormState::Unavailable(s.to_string()))
}

/// What became of each reactor when a state file was applied.
#[derive(Debug, Default, PartialEq, Eq)]
pub struct Restored {
    pub restored: Vec<String>,
    /// `<reactor>/<alarm>` whose state was taken back.
    pub alarms: Vec<String>,
    /// (reactor, why it starts a new run)
    pub skipped: Vec<(String, String)>,
}

/// Applies a saved state; reactors not in the file start a new run.
pub fn apply(engine: &mut Engine, text: &str) -> Result<Restored, String> {
    let v: Value = serde_json::from_str(text).map_err(|e| format!("not JSON: {e}"))?;
    if v.get("schema").and_then(Value::as_str) != Some(STATE_SCHEMA) {
        return Err(format!("schema is not {STATE_SCHEMA}"));
    }
    let reactors = v
        .get("reactors")
        .and_then(Value::as_object)
        .ok_or("no \"reactors\" object")?;
    let mut out = Restored::default();
    for (id, settings, _) in engine.drift_snapshots() {
        let Some(saved) = reactors.get(&id) else {
            continue;
        };
        // The run first (an alert's limit can be learned with the baseline), then the
        // alerts and alarms, each one whose configuration is unchanged.
        if saved.get("settings").and_then(Value::as_str) != Some(settings.as_str()) {
            out.skipped.push((
                id.clone(),
                "its drift settings changed since the save".into(),
            ));
        } else {
            match snapshot(saved) {
                Some(s) if engine.restore_drift(&id, &s) => out.restored.push(id.clone()),
                _ => out
                    .skipped
                    .push((id.clone(), "its saved state is damaged".into())),
            }
        }
        if let Some(al) = saved.get("alarms").and_then(Value::as_object) {
            for (aid, v) in al {
                if let Some((cfg, snap)) = alarm_from(v)
                    && engine.restore_alarm(&id, aid, &cfg, &snap)
                {
                    out.alarms.push(format!("{id}/{aid}"));
                }
            }
        }
    }
    Ok(out)
}
