//! One line of the input read as JSON, keeping only the parts of a record the report
//! reads. A result message is some 3.8 KB of JSON (inputs, mole fractions, uncertainty
//! budgets, per-reaction figures) of which the report uses a few dozen bytes; building
//! all of it as a `serde_json::Value` tree, every number parsed and every key and string
//! allocated, was nearly all of the report's time on a year of results. Here the same
//! parser reads the whole line (so a broken line is refused as before, with the same
//! message), but what the report does not read is skipped (`IgnoredAny`: no number is
//! converted, nothing allocated) and what it does read comes out as the same `Value` the
//! full tree would hold at those places, so the aggregation reads it unchanged.
//!
//! What is kept is one table ([`RECORD`]); a key added to the aggregation must be added
//! there (the test below checks the table against a full parse of a result and an event).
//!
//! The JSON skipped is checked as serde_json's own `IgnoredAny` checks it: its syntax,
//! strings' escapes, nesting. Not checked there, as a full parse would: the range of a
//! number (`1e999`) and the pairing of `\u` surrogates; no line eqwatch writes has either.

use serde::de::{self, DeserializeSeed, Deserializer, IgnoredAny, MapAccess, SeqAccess, Visitor};
use serde_json::{Map, Value};

/// What of a value to keep: all of it, or only these keys (of an object, or of each
/// object in an array; a value of another type is kept as it is).
#[derive(Debug, Clone, Copy)]
pub(super) enum Keep {
    All,
    Keys(&'static [(&'static str, Keep)]),
}

use Keep::{All, Keys};

/// Of a result: `drift`.
const DRIFT: &[(&str, Keep)] = &[
    ("normalised", Keys(&[("normalised_k", All)])),
    ("trend_k_per_day", All),
    ("trend_interval_k_per_day", All),
    ("end_of_run", All),
];

/// Of a result: `bed_profile`.
const BED: &[(&str, Keep)] = &[
    ("rise_k", All),
    ("wabt_k", All),
    ("front_depth_m", All),
    ("end_of_life_depth_m", All),
    ("front_trend", All),
];

/// Of a result: `reconciliation`.
const RECONCILIATION: &[(&str, Keep)] = &[
    (
        "global_test",
        Keys(&[("passed", All), ("statistic", All), ("critical", All)]),
    ),
    ("suspect", All),
];

/// The payload: a result's keys and an event's (`aggregate.rs` reads no others).
const PAYLOAD: &[(&str, Keep)] = &[
    ("schema", All),
    // Result.
    ("reactor", All),
    ("sample_ts", All),
    ("quality", All),
    ("reasons", Keys(&[("code", All)])),
    (
        "headline",
        Keys(&[("figure", All), ("unit", All), ("value", All)]),
    ),
    ("approach_k", All),
    ("drift", Keys(DRIFT)),
    ("bed_profile", Keys(BED)),
    ("reconciliation", Keys(RECONCILIATION)),
    // Event.
    ("at", All),
    ("class", All),
    ("alarm", All),
    ("event", All),
    ("state", All),
    ("value", All),
    ("limit", All),
    ("unit", All),
    ("id", All),
    ("by", All),
    ("reason", All),
];

/// A line: the record's topic and its payload.
pub(super) const RECORD: Keep = Keys(&[("topic", All), ("payload", Keys(PAYLOAD))]);

/// The line as JSON, only what `keep` names kept (see the module docs).
pub(super) fn parse(line: &str, keep: Keep) -> Result<Value, serde_json::Error> {
    let mut de = serde_json::Deserializer::from_str(line);
    let v = keep.deserialize(&mut de)?;
    de.end()?;
    Ok(v)
}

impl<'de> DeserializeSeed<'de> for Keep {
    type Value = Value;

    fn deserialize<D: Deserializer<'de>>(self, d: D) -> Result<Value, D::Error> {
        match self {
            All => serde::Deserialize::deserialize(d),
            Keys(keys) => d.deserialize_any(Pruned(keys)),
        }
    }
}

/// Builds a value as `serde_json::Value`'s own visitor does, objects with `0`'s keys only.
struct Pruned(&'static [(&'static str, Keep)]);

impl<'de> Visitor<'de> for Pruned {
    type Value = Value;

    fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
        f.write_str("any valid JSON value")
    }

    fn visit_bool<E>(self, v: bool) -> Result<Value, E> {
        Ok(Value::Bool(v))
    }

    fn visit_i64<E>(self, v: i64) -> Result<Value, E> {
        Ok(Value::from(v))
    }

    fn visit_u64<E>(self, v: u64) -> Result<Value, E> {
        Ok(Value::from(v))
    }

    fn visit_f64<E>(self, v: f64) -> Result<Value, E> {
        Ok(serde_json::Number::from_f64(v).map_or(Value::Null, Value::Number))
    }

    fn visit_str<E: de::Error>(self, v: &str) -> Result<Value, E> {
        Ok(Value::String(v.to_string()))
    }

    fn visit_string<E>(self, v: String) -> Result<Value, E> {
        Ok(Value::String(v))
    }

    fn visit_unit<E>(self) -> Result<Value, E> {
        Ok(Value::Null)
    }

    fn visit_none<E>(self) -> Result<Value, E> {
        Ok(Value::Null)
    }

    fn visit_some<D: Deserializer<'de>>(self, d: D) -> Result<Value, D::Error> {
        Keys(self.0).deserialize(d)
    }

    fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<Value, A::Error> {
        let mut v = Vec::new();
        while let Some(x) = seq.next_element_seed(Keys(self.0))? {
            v.push(x);
        }
        Ok(Value::Array(v))
    }

    fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<Value, A::Error> {
        let mut m = Map::new();
        while let Some(wanted) = map.next_key_seed(Key(self.0))? {
            match wanted {
                Some((name, keep)) => {
                    // A repeated key: the last one stands, as in a full parse.
                    let v = map.next_value_seed(keep)?;
                    m.insert(name.to_string(), v);
                }
                None => {
                    map.next_value::<IgnoredAny>()?;
                }
            }
        }
        Ok(Value::Object(m))
    }
}

/// An object's key: which of the kept keys it is, or `None`.
struct Key(&'static [(&'static str, Keep)]);

impl<'de> DeserializeSeed<'de> for Key {
    type Value = Option<(&'static str, Keep)>;

    fn deserialize<D: Deserializer<'de>>(self, d: D) -> Result<Self::Value, D::Error> {
        d.deserialize_str(self)
    }
}

impl<'de> Visitor<'de> for Key {
    type Value = Option<(&'static str, Keep)>;

    fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
        f.write_str("an object key")
    }

    fn visit_str<E: de::Error>(self, v: &str) -> Result<Self::Value, E> {
        Ok(self.0.iter().find(|(k, _)| *k == v).copied())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The full tree with only the kept parts, built from a full parse: what [`parse`]
    /// must give.
    fn prune(v: &Value, keep: Keep) -> Value {
        match (keep, v) {
            (All, v) => v.clone(),
            (Keys(keys), Value::Object(m)) => Value::Object(
                m.iter()
                    .filter_map(|(k, x)| {
                        keys.iter()
                            .find(|(name, _)| name == k)
                            .map(|(_, keep)| (k.clone(), prune(x, *keep)))
                    })
                    .collect(),
            ),
            (Keys(_), Value::Array(a)) => Value::Array(a.iter().map(|x| prune(x, keep)).collect()),
            (Keys(_), v) => v.clone(),
        }
    }

    /// Every path of `v` that the table keeps: a key the aggregation reads but the table
    /// left out would be missing here.
    fn paths(v: &Value, at: String, out: &mut Vec<String>) {
        match v {
            Value::Object(m) => {
                for (k, x) in m {
                    paths(x, format!("{at}/{k}"), out);
                }
            }
            Value::Array(a) => {
                for (i, x) in a.iter().enumerate() {
                    paths(x, format!("{at}/{i}"), out);
                }
            }
            _ => out.push(at),
        }
    }

    const RESULT: &str = r#"{"topic":"eqwatch/baw1/lts1/result","retain":true,"payload":{"schema":"eqwatch.result/1","reactor":"lts1","name":"LTS \"A\"","sample_ts":"2026-01-01T00:00:00.000Z","quality":"uncertain","reasons":[{"code":"composition_normalised","severity":"good","message":"m"},"odd",{"code":"approach_not_meaningful"}],"approach_k":-1.5e-3,"inputs":[{"tag":"TI","value":1068.39,"unit":"K"}],"mole_fractions":{"CH4":0.0757},"headline":{"figure":"approach","value":8.15,"unit":"K","text":"approach 8.15 K"},"drift":{"baseline_k":7.0,"trend_k_per_day":0.01,"trend_interval_k_per_day":[0.005,0.015],"normalised":{"normalised_k":1.25,"fit":{"r2":0.9}},"end_of_run":{"state":"forecast","limit_k":20.0,"date":"2026-09-12T00:00:00.000Z"}},"bed_profile":{"available":true,"rise_k":20,"wabt_k":470.5,"front_depth_m":1.5,"end_of_life_depth_m":2.9,"points":[1,2,3],"front_trend":{"state":"collecting","days":3}},"reconciliation":{"available":true,"suspect":"AI-300 <CO>","residuals":[0.1],"global_test":{"statistic":20.0,"critical":12.6,"passed":false,"dof":3}},"at":null,"value":18446744073709551615,"unit":"K","reason":"caf\u00e9"}}"#;
    const EVENT: &str = r#"{"topic":"eqwatch/baw1/lts1/alert","retain":false,"payload":{"schema":"eqwatch.event/1","id":"lts1/x#1@5","reactor":"lts1","class":"alarm","alarm":"approach-high","event":"shelved","at":"2026-09-02T06:00:00.000Z","state":"acknowledged","value":12.0,"limit":10,"unit":"K","by":"op1","reason":"analyser work","extra":{"deep":[[{}]]}}}"#;

    #[test]
    fn the_kept_parts_equal_those_of_a_full_parse() {
        for line in [
            RESULT,
            EVENT,
            "[1, {\"topic\": 2}]",
            "\"text\"",
            "17",
            "null",
        ] {
            let full: Value = serde_json::from_str(line).expect("test line is JSON");
            assert_eq!(
                parse(line, RECORD).expect("parses"),
                prune(&full, RECORD),
                "{line}"
            );
        }
        // A repeated key: the last one stands, as in `serde_json::Value`.
        let twice = r#"{"topic":"a","topic":"b","payload":{"schema":1,"schema":"s"}}"#;
        let full: Value = serde_json::from_str(twice).unwrap();
        assert_eq!(parse(twice, RECORD).unwrap(), full);
    }

    #[test]
    fn every_field_the_aggregation_reads_is_kept() {
        let mut kept = Vec::new();
        paths(&parse(RESULT, RECORD).unwrap(), String::new(), &mut kept);
        for p in [
            "/topic",
            "/payload/schema",
            "/payload/reactor",
            "/payload/sample_ts",
            "/payload/quality",
            "/payload/reasons/0/code",
            "/payload/reasons/2/code",
            "/payload/headline/figure",
            "/payload/headline/unit",
            "/payload/headline/value",
            "/payload/approach_k",
            "/payload/drift/normalised/normalised_k",
            "/payload/drift/trend_k_per_day",
            "/payload/drift/trend_interval_k_per_day/1",
            "/payload/drift/end_of_run/date",
            "/payload/bed_profile/rise_k",
            "/payload/bed_profile/wabt_k",
            "/payload/bed_profile/front_depth_m",
            "/payload/bed_profile/end_of_life_depth_m",
            "/payload/bed_profile/front_trend/days",
            "/payload/reconciliation/suspect",
            "/payload/reconciliation/global_test/statistic",
            "/payload/reconciliation/global_test/critical",
            "/payload/reconciliation/global_test/passed",
        ] {
            assert!(kept.iter().any(|k| k == p), "{p} not kept: {kept:?}");
        }
        assert!(
            !kept
                .iter()
                .any(|k| k.contains("mole_fractions") || k.contains("inputs"))
        );
        let mut kept = Vec::new();
        paths(&parse(EVENT, RECORD).unwrap(), String::new(), &mut kept);
        for k in [
            "id", "reactor", "class", "alarm", "event", "at", "state", "value", "limit", "unit",
            "by", "reason",
        ] {
            assert!(kept.contains(&format!("/payload/{k}")), "{k} not kept");
        }
    }

    #[test]
    fn a_broken_line_is_refused_with_the_same_message() {
        for line in [
            "{broken",
            "{\"topic\":\"t\",\"payload\":{\"inputs\":[1,2,}}",
            "{\"topic\":\"t\"} trailing",
            "{\"topic\":\"t\",\"payload\":{\"x\":\"bad \\q escape\"}}",
            "",
            "{\"topic\":\"t\",\"payload\":{\"x\":tru}}",
        ] {
            let full = serde_json::from_str::<Value>(line).map_err(|e| e.to_string());
            let ours = parse(line, RECORD).map_err(|e| e.to_string());
            assert!(full.is_err(), "{line}");
            assert_eq!(ours.map(|_| ()), full.map(|_| ()), "{line}");
        }
    }
}
