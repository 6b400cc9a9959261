//! The flat view of a result: one level of numbers with their units in the names, a
//! few string tags and one timestamp, for time-series collectors. It goes out as the
//! metrics message (`<prefix>/<reactor>/metrics`, when `metrics_topic = true`), and its
//! fields are the columns of `eqwatch replay --format csv`.
//!
//! Every figure here is also in the result message ([`super::result`]); [`FIELDS`] says
//! where (a JSON Pointer into the result), so replay can read the same figures back from
//! the results and a test can check the two agree. A figure that is missing or not
//! finite is left out of the message (never a zero, never a `null`).
//!
//! Pure: no I/O, no clock.

use std::fmt::Write as _;

use super::finite;
use crate::config::ReactorSettings;
use crate::monitor::watch::DriftFigures;
use crate::monitor::{Evaluation, Quality};

/// How a figure is written in the replay CSV (the metrics message keeps every digit).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Precision {
    /// This many digits after the decimal point.
    Decimals(usize),
    /// This many significant digits (mole fractions span decades).
    Significant(usize),
}

/// Whether a figure is left out of a bad result.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum When {
    Always,
    /// Only from a usable (good or uncertain) analysis, like the result's headline approach.
    Usable,
}

/// One figure of the flat view: its name, where the result message has it, and how
/// the CSV writes it.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Field {
    pub name: &'static str,
    /// JSON Pointer into the result; per-reaction fields start at `/reactions/<i>`.
    pub pointer: &'static str,
    pub when: When,
    pub precision: Precision,
}

const fn field(name: &'static str, pointer: &'static str, precision: Precision) -> Field {
    Field {
        name,
        pointer,
        when: When::Always,
        precision,
    }
}

use Precision::{Decimals as D, Significant as S};

/// The headline (first reaction) approach and its inputs.
pub(crate) const FIELDS: &[Field] = &[
    Field {
        when: When::Usable,
        ..field("approach_k", "/approach_k", D(3))
    },
    Field {
        when: When::Usable,
        ..field("approach_uncertainty_k", "/approach_uncertainty_k", D(3))
    },
    field(
        "equilibrium_temperature_k",
        "/equilibrium_temperature_k",
        D(3),
    ),
    field("q_over_k", "/q_over_k", S(6)),
    field("ln_q", "/ln_q", D(5)),
    field("ln_k", "/ln_k", D(5)),
    field("affinity_j_per_mol", "/affinity_j_per_mol", D(1)),
    field("temperature_k", "/temperature_k", D(2)),
    field("pressure_bar_abs", "/pressure_bar", D(4)),
    field("steam_ratio", "/steam_ratio", D(5)),
    field(
        "key_measured_mole_fraction",
        "/key_measured_mole_fraction",
        S(6),
    ),
    field(
        "key_equilibrium_mole_fraction",
        "/key_equilibrium_mole_fraction",
        S(6),
    ),
    field("baseline_k", "/drift/baseline_k", D(3)),
    field("ewma_k", "/drift/ewma_k", D(3)),
    field("cusum_k", "/drift/cusum_k", D(3)),
    field("trend_k_per_day", "/drift/trend_k_per_day", D(5)),
];

/// The bed profile's figures (reactors with `[reactors.<id>.bed_profile]` only).
pub(crate) const BED_FIELDS: &[Field] = &[
    field("bed_rise_k", "/bed_profile/rise_k", D(2)),
    field("wabt_k", "/bed_profile/wabt_k", D(2)),
    field("front_depth_m", "/bed_profile/front_depth_m", D(4)),
    field(
        "front_rate_m_per_day",
        "/bed_profile/front_trend/rate_m_per_day",
        S(4),
    ),
];

/// The normalised approach's figures (reactors with `[reactors.<id>.normalise]`).
pub(crate) const NORMALISED_FIELDS: &[Field] = &[
    field(
        "normalised_approach_k",
        "/drift/normalised/normalised_k",
        D(3),
    ),
    field(
        "predicted_approach_k",
        "/drift/normalised/predicted_k",
        D(3),
    ),
];

/// The reconciliation's figures (reactors with `[reactors.<id>.reconcile]`).
pub(crate) const RECONCILED_FIELDS: &[Field] = &[
    field(
        "reconciled_approach_k",
        "/reconciliation/approach_k/0",
        D(3),
    ),
    field(
        "global_test_statistic",
        "/reconciliation/global_test/statistic",
        S(4),
    ),
    field(
        "global_test_critical",
        "/reconciliation/global_test/critical",
        S(4),
    ),
];

/// Per reaction, where a reactor has several: the name gets `_<i>` (the reaction's
/// index in the result's `reactions`, 0 = the headline one); the pointer is under
/// `/reactions/<i>`.
pub(crate) const REACTION_FIELDS: &[Field] = &[
    Field {
        when: When::Usable,
        ..field("approach_k", "/approach_k", D(3))
    },
    Field {
        when: When::Usable,
        ..field("approach_uncertainty_k", "/approach_uncertainty_k", D(3))
    },
    field(
        "equilibrium_temperature_k",
        "/equilibrium_temperature_k",
        D(3),
    ),
    field("q_over_k", "/q_over_k", S(6)),
    field("ln_q", "/ln_q", D(5)),
    field("ln_k", "/ln_k", D(5)),
    field("affinity_j_per_mol", "/affinity_j_per_mol", D(1)),
];

/// The flat fields of reactor `r` in order, with the pointer into its result message
/// (per-reaction pointers filled in).
pub(crate) fn columns(r: &ReactorSettings) -> Vec<(String, String, Field)> {
    let mut v: Vec<(String, String, Field)> = FIELDS
        .iter()
        .chain(if r.spec.bed_profile.is_some() {
            BED_FIELDS
        } else {
            &[]
        })
        .chain(if r.spec.watch.drift.normalise.is_some() {
            NORMALISED_FIELDS
        } else {
            &[]
        })
        .chain(if r.spec.reconcile.is_some() {
            RECONCILED_FIELDS
        } else {
            &[]
        })
        .map(|f| (f.name.to_string(), f.pointer.to_string(), *f))
        .collect();
    let n = r.spec.model.reactions().len();
    if n > 1 {
        for i in 0..n {
            for f in REACTION_FIELDS {
                v.push((
                    format!("{}_{i}", f.name),
                    format!("/reactions/{i}{}", f.pointer),
                    *f,
                ));
            }
        }
    }
    v
}

/// The figures of one evaluation in the order of [`columns`] (`None`: missing, not
/// finite, or an approach on a bad result).
pub(crate) fn values(
    r: &ReactorSettings,
    e: &Evaluation,
    drift: Option<&DriftFigures>,
) -> Vec<Option<f64>> {
    let usable = e.quality != Quality::Bad;
    let reaction = |a: Option<&crate::approach::Approach>| {
        [
            a.filter(|_| usable).and_then(|a| a.approach_k),
            a.filter(|_| usable).and_then(|a| a.approach_uncertainty_k),
            a.and_then(|a| a.equilibrium_temperature_k),
            a.map(|a| a.q_over_k),
            a.map(|a| a.ln_q),
            a.map(|a| a.ln_k),
            a.map(|a| a.affinity_j_per_mol),
        ]
    };
    let mut v: Vec<Option<f64>> = Vec::with_capacity(32);
    v.extend(reaction(e.reactions.first()));
    v.extend([
        e.temperature_k,
        e.pressure_bar,
        e.steam_ratio,
        e.key_measured,
        e.key_equilibrium,
        drift.and_then(|d| d.baseline).map(|b| b.approach_k),
        drift.and_then(|d| d.ewma).map(|x| x.z),
        drift.and_then(|d| d.cusum_k),
        drift
            .and_then(|d| d.trend.as_ref())
            .map(|t| t.slope_k_per_day),
    ]);
    if r.spec.bed_profile.is_some() {
        let p = e.bed_profile.as_ref().and_then(|p| p.as_ref().ok());
        v.extend([
            p.map(|p| p.rise_k),
            p.map(|p| p.wabt_k),
            p.and_then(|p| p.front.ok()).map(|f| f.depth_m),
            drift.and_then(|d| d.front).map(|f| f.rate_m_per_day),
        ]);
    }
    if r.spec.watch.drift.normalise.is_some() {
        let n = drift
            .and_then(|d| d.normalised.as_ref())
            .and_then(|n| n.sample);
        v.extend([n.map(|n| n.normalised), n.map(|n| n.predicted)]);
    }
    if r.spec.reconcile.is_some() {
        let rec = e.reconciliation.as_ref().and_then(|r| r.as_ref().ok());
        let g = rec.and_then(|r| r.rec.global);
        v.extend([
            rec.and_then(|r| r.approach_k.first().copied().flatten())
                .filter(|_| usable),
            g.map(|g| g.statistic),
            g.map(|g| g.critical),
        ]);
    }
    let n = r.spec.model.reactions().len();
    if n > 1 {
        for i in 0..n {
            v.extend(reaction(e.reactions.get(i)));
        }
    }
    v.iter_mut().for_each(|x| *x = x.and_then(finite));
    v
}

/// Appends `"name":` and a JSON string (escaped by serde_json).
fn push_str(out: &mut String, name: &str, value: &str) {
    let text = serde_json::to_string(value).unwrap_or_else(|_| "\"\"".into());
    let _ = write!(out, "\"{name}\":{text},");
}

/// The metrics message of one evaluation (published on `<prefix>/<reactor>/metrics`,
/// QoS 1, not retained): the tags `site`, `reactor`, `quality`, `k_source`, the sample
/// time `ts` in epoch milliseconds, then every finite figure of [`columns`].
pub(crate) fn encode_metrics(
    site: &str,
    r: &ReactorSettings,
    e: &Evaluation,
    drift: Option<&DriftFigures>,
) -> String {
    let mut out = String::with_capacity(640);
    out.push('{');
    push_str(&mut out, "site", site);
    push_str(&mut out, "reactor", &r.spec.id);
    push_str(&mut out, "quality", e.quality.as_str());
    if let Some(k) = r.spec.model.reactions().first() {
        push_str(&mut out, "k_source", k.k.id().as_str());
    }
    let _ = write!(out, "\"ts\":{}", e.sample_ts_ms);
    for ((name, _, _), x) in columns(r).iter().zip(values(r, e, drift)) {
        if let Some(x) = x {
            // Finite, so serde_json writes a number (the shortest that reads back the same).
            let num = serde_json::to_string(&x).unwrap_or_else(|_| "0".into());
            let _ = write!(out, ",\"{name}\":{num}");
        }
    }
    out.push('}');
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::monitor::SourceQuality;
    use serde_json::Value;

    use crate::wire::fixtures::{AT_MS, lts1};

    fn metrics_of(s: &crate::config::Settings, e: &Evaluation) -> Value {
        let rs = s.reactors.iter().find(|r| r.spec.id == "lts1").unwrap();
        serde_json::from_str(&encode_metrics(&s.site, rs, e, None)).expect("metrics are JSON")
    }

    #[test]
    fn the_metrics_message_has_tags_one_timestamp_and_the_figures_of_the_result() {
        let (s, e) = lts1(SourceQuality::Good);
        let rs = s.reactors.iter().find(|r| r.spec.id == "lts1").unwrap();
        let m = metrics_of(&s, &e);
        let obj = m.as_object().unwrap();
        // Tags: the demo plant's site and reactor, the K source of lts1's one
        // reaction (config/demo-plant.toml).
        assert_eq!(m["site"], "baw1");
        assert_eq!(m["reactor"], "lts1");
        assert_eq!(m["k_source"], "moe-1962");
        assert!(matches!(m["quality"].as_str(), Some("good" | "uncertain")));
        // The sample time: the analysis time minus the lag, i.e. AT_MS (above).
        assert_eq!(m["ts"], AT_MS);
        // Derived from the inputs above: 220 °C = 493.15 K; 29 barg + 1.01325 = 30.01325
        // bar abs; the steam ratio as given.
        assert_eq!(m["temperature_k"], 493.15);
        assert_eq!(m["pressure_bar_abs"], 30.01325);
        assert_eq!(m["steam_ratio"], 0.36312);
        // The exact names, in order: tags, ts, then the figures this evaluation has
        // (no drift figures were given, so none of those; lts1 has a bed profile but
        // no bed thermocouple readings here, so none of its figures either).
        let names: Vec<&str> = obj.keys().map(String::as_str).collect();
        let mut sorted = vec![
            "site",
            "reactor",
            "quality",
            "k_source",
            "ts",
            "approach_k",
            "approach_uncertainty_k",
            "equilibrium_temperature_k",
            "q_over_k",
            "ln_q",
            "ln_k",
            "affinity_j_per_mol",
            "temperature_k",
            "pressure_bar_abs",
            "steam_ratio",
            "key_measured_mole_fraction",
            "key_equilibrium_mole_fraction",
        ];
        sorted.sort_unstable();
        let mut got = names.clone();
        got.sort_unstable();
        assert_eq!(got, sorted, "{m}");
        // Every figure is a finite number, and equals the result's figure at its
        // pointer (derived from the result of the same evaluation).
        let result: Value = serde_json::from_str(&crate::wire::result::encode_result(
            rs, &s.species, &e, AT_MS, None,
        ))
        .unwrap();
        for (name, pointer, _) in columns(rs) {
            match m.get(&name) {
                Some(v) => {
                    let x = v.as_f64().unwrap();
                    assert!(x.is_finite());
                    assert_eq!(Some(v), result.pointer(&pointer), "{name}");
                }
                None => assert!(
                    result.pointer(&pointer).is_none_or(Value::is_null),
                    "{name} left out but the result has it"
                ),
            }
        }
        // Sanity on the approach itself: lts1's docs/domain.md §8 gas is short of
        // equilibrium by a few kelvin (positive, below the 20 K end-of-run limit).
        let a = m["approach_k"].as_f64().unwrap();
        assert!(a > 0.0 && a < 20.0, "{a}");
    }

    #[test]
    fn a_bad_result_leaves_the_approach_out_and_writes_no_nulls() {
        let (s, e) = lts1(SourceQuality::Bad);
        assert_eq!(e.quality, Quality::Bad, "a bad analysis makes a bad result");
        let m = metrics_of(&s, &e);
        assert_eq!(m["quality"], "bad");
        assert!(m.get("approach_k").is_none(), "{m}");
        assert!(m.get("approach_uncertainty_k").is_none(), "{m}");
        for (k, v) in m.as_object().unwrap() {
            assert!(!v.is_null(), "{k} is null");
        }
    }

    #[test]
    fn several_reactions_get_suffixed_fields_and_a_bed_profile_its_four() {
        let s = crate::config::from_str(
            include_str!("../../config/demo-plant.toml"),
            std::path::Path::new("."),
        )
        .unwrap();
        let names = |id: &str| -> Vec<String> {
            let rs = s.reactors.iter().find(|r| r.spec.id == id).unwrap();
            columns(rs).into_iter().map(|(n, _, _)| n).collect()
        };
        // Demo ref1 has two reactions, lts1 one and a bed profile (config/demo-plant.toml).
        let ref1 = names("ref1");
        assert!(ref1.contains(&"approach_k_0".to_string()), "{ref1:?}");
        assert!(ref1.contains(&"ln_q_1".to_string()), "{ref1:?}");
        assert!(!ref1.contains(&"wabt_k".to_string()));
        let lts1 = names("lts1");
        for n in [
            "bed_rise_k",
            "wabt_k",
            "front_depth_m",
            "front_rate_m_per_day",
        ] {
            assert!(lts1.contains(&n.to_string()), "{n}");
        }
        assert!(!lts1.iter().any(|n| n.ends_with("_0")));
        // Every name is unique and carries no character a collector would quote.
        for list in [&ref1, &lts1] {
            let mut u = list.clone();
            u.sort();
            u.dedup();
            assert_eq!(u.len(), list.len());
            assert!(
                list.iter()
                    .flat_map(|n| n.chars())
                    .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '_')
            );
        }
    }
}
