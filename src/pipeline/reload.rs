//! A configuration reload (SIGHUP) applied to a running engine: what may change live,
//! and what each reactor keeps.
//!
//! - Needs a restart (the reload is refused, the running configuration kept): `site`,
//!   `shard`, the topic prefix, `[broker]`, `[journal]`, `[http]`, and the set or order
//!   of reactors (the counters of `/metrics` are laid out per reactor at start-up).
//! - A reactor whose settings are unchanged keeps everything: its readings in hand
//!   (alignment), its run (baseline, EWMA, CUSUM, aggregates) and its alerts' and
//!   alarms' states and modes (acknowledged, shelved with its expiry, out of service).
//! - A reactor whose settings changed gets a new monitor. Its run is carried over when
//!   what defines its approach is unchanged (reactions and K sources, equation of state,
//!   reactor model, equilibrium system, key component) and so are its drift settings;
//!   otherwise a new run starts (an old baseline would be compared with a different
//!   figure). Each alert or alarm whose own configuration is unchanged keeps its state
//!   and mode; a changed one starts normal and in service. Readings in hand are not
//!   carried: the next analysis waits for fresh temperature and pressure readings as
//!   at start-up.
//! - Everything else (command permissions, plausibility ranges, input topics, decoders)
//!   takes effect at once; the caller subscribes to new input topics and unsubscribes
//!   from old ones.
//!
//! Settings are compared through their `Debug` text: every settings type is plain data
//! (no hash maps), and `f64`'s `Debug` round-trips, so equal text is equal settings.

use std::sync::Arc;

use super::Append;
use super::engine::Engine;
use super::lane::Lane;
use super::route::routes;
use crate::config::{ReactorSettings, Settings};

/// What a reload changed.
#[derive(Debug, Default, PartialEq)]
pub(crate) struct Reloaded {
    /// Reactors whose settings are unchanged (nothing reset).
    pub unchanged: Vec<String>,
    /// Reactors whose settings changed (a new monitor).
    pub changed: Vec<String>,
    /// Of the changed reactors, those whose run was carried over.
    pub runs_kept: Vec<String>,
    /// Of the changed reactors, those whose run starts again, with why.
    pub runs_reset: Vec<(String, String)>,
    /// Alerts and alarms of changed reactors whose states were carried over
    /// (`reactor/alarm`).
    pub alarms_kept: Vec<String>,
    /// Topics to subscribe to now, and to unsubscribe from.
    pub subscribe: Vec<String>,
    pub unsubscribe: Vec<String>,
}

/// Settings compared by their `Debug` text (see the module text).
fn same<T: std::fmt::Debug + ?Sized>(a: &T, b: &T) -> bool {
    format!("{a:?}") == format!("{b:?}")
}

/// Why `new` cannot replace `old` without a restart (empty: it can).
pub(crate) fn restart_needed(old: &Settings, new: &Settings) -> Vec<String> {
    let mut why = Vec::new();
    if old.site != new.site {
        why.push(format!("site (\"{}\" → \"{}\")", old.site, new.site));
    }
    if old.shard != new.shard {
        why.push("shard".to_string());
    }
    if old.topic_prefix != new.topic_prefix {
        why.push(format!(
            "topic_prefix (\"{}\" → \"{}\")",
            old.topic_prefix, new.topic_prefix
        ));
    }
    // Never echo these sections: [broker] holds the password.
    if !same(&old.broker, &new.broker) {
        why.push("[broker]".to_string());
    }
    if !same(&old.journal, &new.journal) {
        why.push("[journal]".to_string());
    }
    if old.http_listen != new.http_listen {
        why.push("[http] listen".to_string());
    }
    if old.http_users != new.http_users {
        why.push("[http.users]".to_string());
    }
    if old.sparkplug != new.sparkplug {
        why.push("[sparkplug]".to_string());
    }
    let spb = |s: &Settings| -> Vec<String> {
        let mut v: Vec<String> = routes(s)
            .into_keys()
            .filter(|k| k.starts_with(crate::config::SpbRef::PREFIX))
            .collect();
        v.sort();
        v
    };
    if spb(old) != spb(new) {
        why.push("inputs on Sparkplug metrics (spb:)".to_string());
    }
    let ids =
        |s: &Settings| -> Vec<String> { s.reactors.iter().map(|r| r.spec.id.clone()).collect() };
    let (a, b) = (ids(old), ids(new));
    if a != b {
        let added: Vec<&str> = b
            .iter()
            .filter(|i| !a.contains(i))
            .map(String::as_str)
            .collect();
        let removed: Vec<&str> = a
            .iter()
            .filter(|i| !b.contains(i))
            .map(String::as_str)
            .collect();
        why.push(if added.is_empty() && removed.is_empty() {
            "the order of the reactors".to_string()
        } else {
            format!(
                "the set of reactors (added: {}; removed: {})",
                list(&added),
                list(&removed)
            )
        });
    }
    why
}

fn list(v: &[&str]) -> String {
    if v.is_empty() {
        "none".into()
    } else {
        v.join(", ")
    }
}

/// Why reactor `new`'s run cannot continue `old`'s (`None`: it can).
fn run_reset_reason(old: &ReactorSettings, new: &ReactorSettings) -> Option<String> {
    let (o, n) = (&old.spec, &new.spec);
    let mut what = Vec::new();
    if !same(&o.reactions, &n.reactions) {
        what.push("reactions");
    }
    if !same(&o.eos, &n.eos) {
        what.push("equation of state");
    }
    if !same(&o.model, &n.model) {
        what.push("reactor model");
    }
    if !same(&o.equilibrium, &n.equilibrium) {
        what.push("equilibrium system");
    }
    if o.key_component != n.key_component {
        what.push("key component");
    }
    if !same(&o.watch.drift, &n.watch.drift) {
        what.push("drift settings");
    }
    (!what.is_empty()).then(|| format!("its {} changed", what.join(", ")))
}

impl Engine {
    /// Applies `new` (validated settings) in place; see the module text for what is
    /// kept. Refused, with nothing changed, when a restart is needed. Records for the
    /// retained alarm states of changed reactors go to `out`.
    pub(crate) fn reload(
        &mut self,
        new: Arc<Settings>,
        now_ms: i64,
        out: &mut Vec<Append>,
    ) -> Result<Reloaded, Vec<String>> {
        let why = restart_needed(&self.settings, &new);
        if !why.is_empty() {
            return Err(why);
        }
        let before = self.subscriptions();
        let mut report = Reloaded::default();
        // Build every new lane first: a refusal leaves the engine as it was.
        let mut fresh: Vec<Option<Lane>> = Vec::with_capacity(self.lanes.len());
        for (r, lane) in self.lanes.iter().enumerate() {
            let (o, n) = (&self.settings.reactors[r], &new.reactors[r]);
            if same(o, n) {
                fresh.push(None);
                continue;
            }
            let mut l =
                Lane::new(r, Arc::clone(&new), Arc::clone(&self.metrics)).map_err(|e| vec![e])?;
            let id = n.spec.id.clone();
            match run_reset_reason(o, n) {
                None => {
                    if l.watch
                        .restore_drift(&n.spec.watch.drift, &lane.watch.drift_snapshot())
                    {
                        report.runs_kept.push(id.clone());
                    } else {
                        report
                            .runs_reset
                            .push((id.clone(), "its run could not be carried over".into()));
                    }
                }
                Some(reason) => report.runs_reset.push((id.clone(), reason)),
            }
            for (aid, config, snap) in lane.watch.alarm_snapshots() {
                if l.watch.restore_alarm(&aid, &config, &snap) {
                    report.alarms_kept.push(format!("{id}/{aid}"));
                }
            }
            report.changed.push(id);
            fresh.push(Some(l));
        }
        for (lane, f) in self.lanes.iter_mut().zip(fresh) {
            match f {
                None => {
                    lane.settings = Arc::clone(&new);
                    report.unchanged.push(lane.id().to_string());
                }
                Some(mut l) => {
                    l.trace = lane.trace.take();
                    *lane = l;
                    if !lane.watch.watched.is_empty() {
                        out.push(lane.states(now_ms));
                    }
                }
            }
        }
        self.routes = routes(&new);
        self.settings = new;
        let after = self.subscriptions();
        report.subscribe = after
            .iter()
            .filter(|t| !before.contains(t))
            .cloned()
            .collect();
        report.unsubscribe = before
            .iter()
            .filter(|t| !after.contains(t))
            .cloned()
            .collect();
        Ok(report)
    }
}

#[cfg(test)]
mod tests {
    //! Reloads of the invented demo plant (config/demo-plant.toml), edited as an
    //! engineer would; values are invented for the test.

    use std::sync::Arc;

    use super::*;
    use crate::pipeline::RawInput;
    use crate::pipeline::metrics::Metrics;

    const T0_MS: i64 = 1_796_083_200_000; // 2026-12-01T00:00:00Z
    const DEMO: &str = include_str!("../../config/demo-plant.toml");

    fn settings(text: &str) -> Arc<Settings> {
        let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("config");
        Arc::new(crate::config::from_str(text, &dir).expect("configuration is valid"))
    }

    fn engine(text: &str) -> Engine {
        let s = settings(text);
        let ids: Vec<String> = s.reactors.iter().map(|r| r.spec.id.clone()).collect();
        Engine::new(s, Arc::new(Metrics::new(&ids))).expect("engine")
    }

    fn send(e: &mut Engine, topic: &str, payload: String, at_ms: i64) -> Vec<Append> {
        let raw = RawInput {
            topic: topic.into(),
            payload: payload.into_bytes(),
            arrival_ms: at_ms,
        };
        let mut out = Vec::new();
        e.message(&raw, at_ms, &mut out);
        out
    }

    /// An invented dry HTS analysis (sums to 100 mol%; `i` moves it a little so that it
    /// is not taken for a stuck analyser).
    fn analysis(t: i64, i: i64) -> String {
        let h2 = 56.0 + 0.01 * i as f64;
        let n2 = 24.0 - 0.01 * i as f64;
        format!(
            r#"{{"ts":{t},"values":{{"H2":{h2:.2},"N2":{n2:.2},"CO":3.5,"CO2":16.0,"CH4":0.3,"Ar":0.2}},"unit":"mol%"}}"#
        )
    }

    /// Invented HTS readings every 10 minutes for `n` analyses (near equilibrium).
    fn feed_hts(e: &mut Engine, n: i64) -> usize {
        let mut results = 0;
        for i in 0..n {
            let t = T0_MS + i * 600_000;
            send(
                e,
                "baw1/hts1/TI-205",
                format!(r#"{{"ts":{t},"value":430,"unit":"degC"}}"#),
                t,
            );
            send(
                e,
                "baw1/hts1/PI-202",
                format!(r#"{{"ts":{t},"value":30,"unit":"barg"}}"#),
                t,
            );
            let out = send(e, "baw1/hts1/AI-201", analysis(t, i), t + 60_000);
            results += out.iter().filter(|r| r.topic.ends_with("/result")).count();
        }
        results
    }

    fn drift_of(e: &Engine, id: &str) -> String {
        e.drift_snapshots()
            .into_iter()
            .find(|(i, _, _)| i == id)
            .map(|(_, _, s)| format!("{s:?}"))
            .expect("reactor")
    }

    #[test]
    fn the_same_file_changes_nothing() {
        let mut e = engine(DEMO);
        feed_hts(&mut e, 5);
        let before = drift_of(&e, "hts1");
        let mut out = Vec::new();
        let r = e.reload(settings(DEMO), T0_MS, &mut out).expect("reload");
        assert!(r.changed.is_empty(), "{r:?}");
        assert_eq!(r.unchanged.len(), e.drift_snapshots().len());
        assert!(r.subscribe.is_empty() && r.unsubscribe.is_empty());
        assert!(out.is_empty());
        assert_eq!(drift_of(&e, "hts1"), before);
        // Readings in hand are kept: an analysis one minute after the last readings
        // gives a result without fresh temperature and pressure.
        let t = T0_MS + 4 * 600_000 + 60_000;
        let out = send(&mut e, "baw1/hts1/AI-201", analysis(t, 50), t + 60_000);
        let result = out
            .iter()
            .find(|r| r.topic.ends_with("/result"))
            .expect("a result from the readings in hand");
        let v: serde_json::Value = serde_json::from_str(&result.payload).expect("JSON");
        assert_ne!(v["quality"], "bad", "{v}");
        assert!(v["approach_k"].is_number(), "{v}");
        assert_eq!(v["inputs"][0]["used"], true, "{v}");
    }

    #[test]
    fn switching_the_metrics_topic_on_takes_effect_at_once_and_keeps_every_reactor() {
        let mut e = engine(DEMO);
        feed_hts(&mut e, 2);
        let before = drift_of(&e, "hts1");
        // The demo file's commented default, switched on (config/demo-plant.toml).
        let edited = DEMO.replacen("# metrics_topic = false", "metrics_topic = true", 1);
        assert_ne!(edited, DEMO);
        let mut out = Vec::new();
        let r = e
            .reload(settings(&edited), T0_MS, &mut out)
            .expect("reload");
        assert!(
            r.changed.is_empty(),
            "no reactor's own settings changed: {r:?}"
        );
        assert_eq!(drift_of(&e, "hts1"), before);
        let t = T0_MS + 600_000 + 60_000;
        let out = send(&mut e, "baw1/hts1/AI-201", analysis(t, 60), t + 60_000);
        let topics: Vec<&str> = out.iter().map(|a| a.topic.as_str()).collect();
        assert!(
            topics
                .windows(2)
                .any(|w| w == ["eqwatch/baw1/hts1/result", "eqwatch/baw1/hts1/metrics"]),
            "{topics:?}"
        );
    }

    #[test]
    fn a_changed_topic_moves_the_subscription_and_keeps_the_run() {
        let mut e = engine(DEMO);
        assert_eq!(feed_hts(&mut e, 6), 6);
        let before = drift_of(&e, "hts1");
        let edited = DEMO.replacen("baw1/hts1/TI-205", "baw1/hts1/TI-205B", 1);
        assert_ne!(edited, DEMO, "the demo file names baw1/hts1/TI-205");
        let mut out = Vec::new();
        let r = e
            .reload(settings(&edited), T0_MS, &mut out)
            .expect("reload");
        assert_eq!(r.changed, vec!["hts1".to_string()]);
        assert_eq!(r.runs_kept, vec!["hts1".to_string()]);
        assert_eq!(r.subscribe, vec!["baw1/hts1/TI-205B".to_string()]);
        assert_eq!(r.unsubscribe, vec!["baw1/hts1/TI-205".to_string()]);
        assert_eq!(drift_of(&e, "hts1"), before);
        // The old topic is no longer routed; the new one is.
        let m = Arc::clone(&e.metrics);
        let unrouted = m.unrouted.load(std::sync::atomic::Ordering::Relaxed);
        send(&mut e, "baw1/hts1/TI-205", "430".into(), T0_MS);
        assert_eq!(
            m.unrouted.load(std::sync::atomic::Ordering::Relaxed),
            unrouted + 1
        );
    }

    #[test]
    fn a_changed_drift_setting_restarts_that_run_only() {
        let mut e = engine(DEMO);
        feed_hts(&mut e, 6);
        let lts_before = drift_of(&e, "lts1");
        // The demo's HTS section has its own [reactors.hts1.drift]; add a key to it.
        let edited = DEMO.replacen(
            "[reactors.hts1.drift]",
            "[reactors.hts1.drift]\newma_lambda = 0.3",
            1,
        );
        assert_ne!(edited, DEMO, "the demo file has [reactors.hts1.drift]");
        let mut out = Vec::new();
        let r = e
            .reload(settings(&edited), T0_MS, &mut out)
            .expect("reload");
        assert_eq!(r.changed, vec!["hts1".to_string()]);
        assert!(r.runs_kept.is_empty());
        assert_eq!(r.runs_reset.len(), 1);
        assert!(r.runs_reset[0].1.contains("drift settings"), "{r:?}");
        assert_eq!(drift_of(&e, "lts1"), lts_before);
    }

    #[test]
    fn broker_journal_and_reactor_set_need_a_restart_and_nothing_changes() {
        let mut e = engine(DEMO);
        feed_hts(&mut e, 3);
        let before = drift_of(&e, "hts1");
        let edited = DEMO
            .replacen("mqtt://127.0.0.1:1883", "mqtt://127.0.0.1:1884", 1)
            .replacen("dir = \"var/journal\"", "dir = \"var/journal2\"", 1);
        let mut out = Vec::new();
        let why = e
            .reload(settings(&edited), T0_MS, &mut out)
            .expect_err("refused");
        assert_eq!(why, vec!["[broker]".to_string(), "[journal]".to_string()]);
        assert_eq!(drift_of(&e, "hts1"), before);
        assert!(out.is_empty());
    }

    #[test]
    fn a_shelved_alarm_stays_shelved_when_its_reactor_changes_elsewhere() {
        let mut e = engine(DEMO);
        let cmd = r#"{"command":"shelve","alarm":"approach-high","user":"op-demo","duration":"8 h","reason":"analyser work"}"#;
        let out = send(&mut e, "eqwatch/baw1/lts1/command", cmd.into(), T0_MS);
        assert!(
            out.iter().any(|a| a.payload.contains("\"accepted\":true")),
            "{out:?}"
        );
        let shelved = |e: &Engine| {
            e.alarm_snapshots()
                .into_iter()
                .find(|(id, _)| id == "lts1")
                .and_then(|(_, al)| al.into_iter().find(|(a, _, _)| a == "approach-high"))
                .map(|(_, _, snap)| format!("{:?}", snap.mode))
                .expect("lts1 has approach-high")
        };
        let before = shelved(&e);
        assert!(before.contains("Shelved"), "{before}");
        // An engineer widens a thermocouple's age limit: the LTS gets a new monitor.
        let edited = DEMO.replacen(
            "tag = \"BAW1-TI-305A\"\ntopic = \"baw1/lts1/TI-305A\"\nunit = \"degC\"\nmax_age = \"2 min\"",
            "tag = \"BAW1-TI-305A\"\ntopic = \"baw1/lts1/TI-305A\"\nunit = \"degC\"\nmax_age = \"3 min\"",
            1,
        );
        assert_ne!(edited, DEMO);
        let mut out = Vec::new();
        let r = e
            .reload(settings(&edited), T0_MS, &mut out)
            .expect("reload");
        assert_eq!(r.changed, vec!["lts1".to_string()]);
        assert_eq!(r.runs_kept, vec!["lts1".to_string()]);
        assert!(
            r.alarms_kept.contains(&"lts1/approach-high".to_string()),
            "{r:?}"
        );
        assert_eq!(shelved(&e), before);
        // The retained alarm states of the changed reactor are published again.
        assert!(
            out.iter()
                .any(|a| a.topic == "eqwatch/baw1/lts1/alarms" && a.retain),
            "{out:?}"
        );
    }
}
