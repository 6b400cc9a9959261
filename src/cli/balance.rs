//! `eqwatch balance`: the element balance of a reactor's inlet and outlet streams, and their
//! reconciliation (weighted least squares over the balances, global and measurement tests,
//! the suspect instrument) with [`crate::reconcile`].
//!
//! Each stream is a dry gas flow (kmol/h), its dry analysis (mole fractions of every dry
//! species) and a water/steam flow (kmol/h); each of these is measured or unmeasured, and
//! the water may be absent. The streams come as a JSON document (`--input`, the text is
//! read by `main`) or as command-line text (`--inlet-dry "CO=0.121,..." --inlet-flow 1000
//! --inlet-water 500`, the same for the outlet). The JSON shape:
//!
//! ```json
//! { "inlet":  { "dry_flow_kmol_h": 1087.4, "water_kmol_h": 2912.6, "flow_tag": "FI-101",
//!               "dry_mole_fractions": { "CH4": 0.8929, "H2": 0.0714, "N2": 0.0179, "CO2": 0.0179 } },
//!   "outlet": { "dry_flow_kmol_h": "unmeasured", "water_kmol_h": "unmeasured", "analyser_tag": "AI-201",
//!               "dry_mole_fractions": { "CH4": 0.1085, "CO": 0.1001, "CO2": 0.0970, "H2": 0.6884,
//!                                       "N2": "unmeasured" } },
//!   "sigma_flow_pct": 1, "sigma_fraction_pct": 1, "sigma_fraction_floor": 0.0002,
//!   "significance": 0.05 }
//! ```
//!
//! A quantity is a number (measured, σ from the defaults), `"unmeasured"`, or an object
//! `{ "value": 1000, "sigma": 5, "tag": "FI-101" }` (`value` left out: unmeasured, with an
//! optional `guess`). A stream may name its instruments (`flow_tag`, `water_tag`,
//! `analyser_tag`); the default tags are `inlet dry flow`, `inlet water`, `inlet CO`, ...
//! Water left out (or `null`) means a stream with no water.
//!
//! With neither dry flow measured it does not reconcile (the balances would fix only the
//! ratio of the flows); where the core refuses, it still prints the element balances the
//! measurements allow and says why.
//!
//! Rules: turns text into core calls and the answer into JSON (keys with units) or a
//! table; no numerics of its own beyond sums and ratios for display; no file access.

use serde_json::{Map, Value, json};

use super::{CliError, finite, opt};
use crate::composition::parse_components;
use crate::reconcile::{
    ElementClosure, Options, Quantity, Reading, Reconciliation, Stream, StreamValues,
    element_balance, reconcile,
};
use crate::thermo::reaction::unknown_hint;
use crate::thermo::species::{SpeciesDb, element_index};
use crate::units::CompositionUnit;

/// Default σ of a flow meter, % of reading (common practice for a repeatability figure).
const SIGMA_FLOW_PCT: f64 = 1.0;
/// Default σ of an analysed fraction, % of reading, and its floor (mole fraction): the
/// defaults of a reactor's `[reconcile]` section (README).
const SIGMA_FRACTION_PCT: f64 = 1.0;
const SIGMA_FRACTION_FLOOR: f64 = 0.0002;
const SIGNIFICANCE: f64 = 0.05;

/// One stream as command-line text.
#[derive(Debug, Clone, Default)]
pub struct StreamText {
    /// `CO=0.121,CO2=0.081,...` (fractions unless a value carries a unit; `X=?` by difference).
    pub dry: Option<String>,
    /// kmol/h, or `unmeasured`.
    pub flow: Option<String>,
    /// kmol/h, `unmeasured`, or left out (no water).
    pub water: Option<String>,
}

/// What `eqwatch balance` was given.
#[derive(Debug, Clone, Default)]
pub struct BalanceInput {
    /// The text of `--input` and the name to quote in messages.
    pub json: Option<(String, String)>,
    pub inlet: StreamText,
    pub outlet: StreamText,
    pub sigma_flow_pct: Option<f64>,
    pub sigma_fraction_pct: Option<f64>,
    pub sigma_fraction_floor: Option<f64>,
    pub significance: Option<String>,
}

// ---------------------------------------------------------------------------------------
// The problem as read

/// A reading before the default σ is applied.
#[derive(Debug, Clone, PartialEq)]
enum Val {
    Measured { value: f64, sigma: Option<f64> },
    Unmeasured { guess: Option<f64> },
}

#[derive(Debug, Clone, PartialEq)]
struct Item {
    tag: String,
    val: Val,
}

#[derive(Debug, Clone, PartialEq)]
struct StreamSpec {
    flow: Item,
    dry: Vec<(usize, Item)>,
    water: Option<Item>,
}

#[derive(Debug, Clone, Copy, PartialEq)]
struct Sigmas {
    flow_pct: f64,
    fraction_pct: f64,
    fraction_floor: f64,
}

#[derive(Debug, Clone, PartialEq)]
struct Problem {
    inlet: StreamSpec,
    outlet: StreamSpec,
    sigmas: Sigmas,
    significance: f64,
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Side {
    Inlet,
    Outlet,
}

impl Side {
    fn name(self) -> &'static str {
        match self {
            Side::Inlet => "inlet",
            Side::Outlet => "outlet",
        }
    }
}

fn bad(msg: impl Into<String>) -> CliError {
    CliError::Input(msg.into())
}

fn check_flow(x: f64, what: &str) -> Result<f64, CliError> {
    if x.is_finite() && x >= 0.0 {
        Ok(x)
    } else {
        Err(bad(format!("{what}: {x} kmol/h must be zero or more")))
    }
}

fn check_fraction(x: f64, what: &str) -> Result<f64, CliError> {
    if x.is_finite() && (0.0..=1.0).contains(&x) {
        Ok(x)
    } else {
        Err(bad(format!(
            "{what}: {x} is not a mole fraction between 0 and 1"
        )))
    }
}

fn check_sigma(x: f64, what: &str) -> Result<f64, CliError> {
    if x.is_finite() && x > 0.0 {
        Ok(x)
    } else {
        Err(bad(format!(
            "{what}: standard deviation {x} must be above zero"
        )))
    }
}

/// `0.05`, `5 %` or `5%` -> 0.05, strictly between 0 and 1.
fn parse_significance(text: &str) -> Result<f64, CliError> {
    let t = text.trim();
    let (num, scale) = match t.strip_suffix('%') {
        Some(n) => (n.trim(), 0.01),
        None => (t, 1.0),
    };
    let a = num.parse::<f64>().map(|x| x * scale).map_err(|_| {
        bad(format!(
            "significance `{text}`: give a probability such as 0.05 or \"5 %\""
        ))
    })?;
    if a > 0.0 && a < 1.0 {
        Ok(a)
    } else {
        Err(bad(format!(
            "significance `{text}` must lie strictly between 0 and 1 (e.g. 0.05 or \"5 %\")"
        )))
    }
}

fn species_index(db: &SpeciesDb, name: &str, what: &str) -> Result<usize, CliError> {
    db.index_of(name).ok_or_else(|| {
        bad(format!(
            "{what}: unknown species `{name}`{}",
            unknown_hint(db, name)
        ))
    })
}

// ---- JSON input ------------------------------------------------------------------------

fn refuse_unknown_keys(
    m: &Map<String, Value>,
    allowed: &[&str],
    path: &str,
) -> Result<(), CliError> {
    if let Some(k) = m.keys().find(|k| !allowed.contains(&k.as_str())) {
        return Err(bad(format!(
            "{path}: unknown key `{k}`; expected one of {}",
            allowed.join(", ")
        )));
    }
    Ok(())
}

fn number(v: &Value, path: &str) -> Result<f64, CliError> {
    v.as_f64()
        .ok_or_else(|| bad(format!("{path}: expected a number, found {v}")))
}

/// A quantity: a number, `"unmeasured"`, or `{value, sigma, tag}` / `{guess, tag}`.
fn json_item(v: &Value, path: &str, default_tag: String, fraction: bool) -> Result<Item, CliError> {
    let check = |x: f64, p: &str| {
        if fraction {
            check_fraction(x, p)
        } else {
            check_flow(x, p)
        }
    };
    match v {
        Value::Number(_) => Ok(Item {
            tag: default_tag,
            val: Val::Measured {
                value: check(number(v, path)?, path)?,
                sigma: None,
            },
        }),
        Value::String(s) if s.trim().eq_ignore_ascii_case("unmeasured") => Ok(Item {
            tag: default_tag,
            val: Val::Unmeasured { guess: None },
        }),
        Value::Object(m) => {
            refuse_unknown_keys(m, &["value", "sigma", "tag", "guess"], path)?;
            let tag = match m.get("tag") {
                None => default_tag,
                Some(Value::String(t)) if !t.trim().is_empty() => t.trim().to_string(),
                Some(other) => {
                    return Err(bad(format!(
                        "{path}.tag: expected a non-empty instrument tag, found {other}"
                    )));
                }
            };
            let sigma = match m.get("sigma") {
                None => None,
                Some(s) => Some(check_sigma(number(s, &format!("{path}.sigma"))?, path)?),
            };
            let val = match m.get("value") {
                Some(x) => {
                    if m.contains_key("guess") {
                        return Err(bad(format!(
                            "{path}: `guess` is for an unmeasured quantity; give `value` or `guess`, not both"
                        )));
                    }
                    Val::Measured {
                        value: check(number(x, &format!("{path}.value"))?, path)?,
                        sigma,
                    }
                }
                None => {
                    if sigma.is_some() {
                        return Err(bad(format!(
                            "{path}: `sigma` without `value`; give the measured value, or leave both out for an unmeasured quantity"
                        )));
                    }
                    let guess = match m.get("guess") {
                        Some(g) => Some(check(number(g, &format!("{path}.guess"))?, path)?),
                        None => None,
                    };
                    Val::Unmeasured { guess }
                }
            };
            Ok(Item { tag, val })
        }
        other => Err(bad(format!(
            "{path}: expected a number, \"unmeasured\" or {{\"value\": .., \"sigma\": .., \"tag\": ..}}, found {other}"
        ))),
    }
}

fn json_tag(
    m: &Map<String, Value>,
    key: &str,
    path: &str,
    default: String,
) -> Result<String, CliError> {
    match m.get(key) {
        None => Ok(default),
        Some(Value::String(t)) if !t.trim().is_empty() => Ok(t.trim().to_string()),
        Some(other) => Err(bad(format!(
            "{path}.{key}: expected a non-empty instrument tag, found {other}"
        ))),
    }
}

fn json_stream(db: &SpeciesDb, v: Option<&Value>, side: Side) -> Result<StreamSpec, CliError> {
    let s = side.name();
    let m = match v {
        Some(Value::Object(m)) => m,
        Some(other) => return Err(bad(format!("{s}: expected an object, found {other}"))),
        None => {
            return Err(bad(format!(
                "`{s}` is missing: give {{\"dry_flow_kmol_h\": .., \"dry_mole_fractions\": {{..}}, \"water_kmol_h\": ..}}"
            )));
        }
    };
    refuse_unknown_keys(
        m,
        &[
            "dry_flow_kmol_h",
            "water_kmol_h",
            "dry_mole_fractions",
            "flow_tag",
            "water_tag",
            "analyser_tag",
        ],
        s,
    )?;
    let flow_tag = json_tag(m, "flow_tag", s, format!("{s} dry flow"))?;
    let water_tag = json_tag(m, "water_tag", s, format!("{s} water"))?;
    let analyser = json_tag(m, "analyser_tag", s, s.to_string())?;
    let flow = match m.get("dry_flow_kmol_h") {
        Some(v) => json_item(v, &format!("{s}.dry_flow_kmol_h"), flow_tag, false)?,
        None => {
            return Err(bad(format!(
                "{s}.dry_flow_kmol_h is missing: give the dry gas flow in kmol/h, or \"unmeasured\""
            )));
        }
    };
    let water = match m.get("water_kmol_h") {
        None | Some(Value::Null) => None,
        Some(v) => Some(json_item(
            v,
            &format!("{s}.water_kmol_h"),
            water_tag,
            false,
        )?),
    };
    let Some(Value::Object(fr)) = m.get("dry_mole_fractions") else {
        return Err(bad(format!(
            "{s}.dry_mole_fractions: give every dry species' mole fraction, e.g. {{\"CO\": 0.121, \"H2\": 0.55}}"
        )));
    };
    let mut dry = Vec::with_capacity(fr.len());
    for (name, v) in fr {
        let path = format!("{s}.dry_mole_fractions.{name}");
        let i = species_index(db, name, &format!("{s}.dry_mole_fractions"))?;
        let name = &db.get(i).name;
        if name == "H2O" {
            return Err(bad(format!(
                "{path}: water is not part of a dry analysis; give it as {s}.water_kmol_h"
            )));
        }
        dry.push((i, json_item(v, &path, format!("{analyser} {name}"), true)?));
    }
    Ok(StreamSpec { flow, dry, water })
}

fn json_problem(db: &SpeciesDb, text: &str, name: &str) -> Result<Problem, CliError> {
    let doc: Value =
        serde_json::from_str(text).map_err(|e| bad(format!("{name}: not valid JSON: {e}")))?;
    let Value::Object(m) = doc else {
        return Err(bad(format!(
            "{name}: expected one JSON object with `inlet` and `outlet`"
        )));
    };
    refuse_unknown_keys(
        &m,
        &[
            "inlet",
            "outlet",
            "sigma_flow_pct",
            "sigma_fraction_pct",
            "sigma_fraction_floor",
            "significance",
        ],
        name,
    )?;
    let inlet = json_stream(db, m.get("inlet"), Side::Inlet)?;
    let outlet = json_stream(db, m.get("outlet"), Side::Outlet)?;
    let pick = |k: &str, default: f64| -> Result<f64, CliError> {
        m.get(k).map_or(Ok(default), |v| number(v, k))
    };
    let sigmas = Sigmas {
        flow_pct: pick("sigma_flow_pct", SIGMA_FLOW_PCT)?,
        fraction_pct: pick("sigma_fraction_pct", SIGMA_FRACTION_PCT)?,
        fraction_floor: pick("sigma_fraction_floor", SIGMA_FRACTION_FLOOR)?,
    };
    let significance = match m.get("significance") {
        None => SIGNIFICANCE,
        Some(Value::String(s)) => parse_significance(s)?,
        Some(v) => parse_significance(&number(v, "significance")?.to_string())?,
    };
    Ok(Problem {
        inlet,
        outlet,
        sigmas,
        significance,
    })
}

// ---- command-line input ----------------------------------------------------------------

fn text_flow(text: &str, what: &str, tag: String) -> Result<Item, CliError> {
    let t = text.trim();
    if t.eq_ignore_ascii_case("unmeasured") || t == "?" {
        return Ok(Item {
            tag,
            val: Val::Unmeasured { guess: None },
        });
    }
    let t = t.strip_suffix("kmol/h").map_or(t, str::trim);
    let x = t.parse::<f64>().map_err(|_| {
        bad(format!(
            "{what} `{text}`: give a flow in kmol/h (e.g. 1000) or \"unmeasured\""
        ))
    })?;
    Ok(Item {
        tag,
        val: Val::Measured {
            value: check_flow(x, what)?,
            sigma: None,
        },
    })
}

/// `CO=0.121,CO2=8.1mol%,CH4=?` (fractions by default; `?` by difference).
fn text_dry(
    db: &SpeciesDb,
    text: &str,
    what: &str,
    side: Side,
) -> Result<Vec<(usize, Item)>, CliError> {
    let mut out = Vec::new();
    for part in text
        .split([',', ';'])
        .map(str::trim)
        .filter(|s| !s.is_empty())
    {
        let (name, val) = match part.split_once(['=', ':']) {
            Some((n, v)) if v.trim() == "?" => {
                (n.trim().to_string(), Val::Unmeasured { guess: None })
            }
            _ => {
                let c = parse_components(part, CompositionUnit::Fraction)
                    .map_err(|e| bad(format!("{what}: {e}")))?;
                let Some(c) = c.into_iter().next() else {
                    continue;
                };
                let y = c.value * c.unit.fraction_per_unit();
                let value = check_fraction(y, &format!("{what} {}", c.species))?;
                (c.species, Val::Measured { value, sigma: None })
            }
        };
        let i = species_index(db, &name, what)?;
        let name = &db.get(i).name;
        if name == "H2O" {
            return Err(bad(format!(
                "{what}: water is not part of a dry analysis; give it with --{}-water",
                side.name()
            )));
        }
        out.push((
            i,
            Item {
                tag: format!("{} {name}", side.name()),
                val,
            },
        ));
    }
    if out.is_empty() {
        return Err(bad(format!(
            "{what}: give every dry species' mole fraction, e.g. \"CO=0.121,CO2=0.081,H2=0.55,CH4=0.003,N2=0.245\""
        )));
    }
    Ok(out)
}

fn text_stream(db: &SpeciesDb, t: &StreamText, side: Side) -> Result<StreamSpec, CliError> {
    let s = side.name();
    let dry = t.dry.as_deref().ok_or_else(|| {
        bad(format!(
            "--{s}-dry is missing: give the {s} dry analysis, e.g. \"CH4=0.95,CO2=0.01,H2=0.02,N2=0.02\" (or use --input FILE.json)"
        ))
    })?;
    let flow = t.flow.as_deref().ok_or_else(|| {
        bad(format!(
            "--{s}-flow is missing: give the {s} dry gas flow in kmol/h, or \"unmeasured\""
        ))
    })?;
    Ok(StreamSpec {
        flow: text_flow(flow, &format!("--{s}-flow"), format!("{s} dry flow"))?,
        dry: text_dry(db, dry, &format!("--{s}-dry"), side)?,
        water: match &t.water {
            Some(w) => Some(text_flow(w, &format!("--{s}-water"), format!("{s} water"))?),
            None => None,
        },
    })
}

fn any_stream_text(t: &StreamText) -> bool {
    t.dry.is_some() || t.flow.is_some() || t.water.is_some()
}

/// The problem from `--input` or from the stream options; σ options override the file.
fn problem(db: &SpeciesDb, inp: &BalanceInput) -> Result<Problem, CliError> {
    let mut p = match &inp.json {
        Some((text, name)) => {
            if any_stream_text(&inp.inlet) || any_stream_text(&inp.outlet) {
                return Err(bad(
                    "give the streams either in --input or with --inlet-*/--outlet-*, not both",
                ));
            }
            json_problem(db, text, name)?
        }
        None => Problem {
            inlet: text_stream(db, &inp.inlet, Side::Inlet)?,
            outlet: text_stream(db, &inp.outlet, Side::Outlet)?,
            sigmas: Sigmas {
                flow_pct: SIGMA_FLOW_PCT,
                fraction_pct: SIGMA_FRACTION_PCT,
                fraction_floor: SIGMA_FRACTION_FLOOR,
            },
            significance: SIGNIFICANCE,
        },
    };
    if let Some(x) = inp.sigma_flow_pct {
        p.sigmas.flow_pct = x;
    }
    if let Some(x) = inp.sigma_fraction_pct {
        p.sigmas.fraction_pct = x;
    }
    if let Some(x) = inp.sigma_fraction_floor {
        p.sigmas.fraction_floor = x;
    }
    if let Some(s) = &inp.significance {
        p.significance = parse_significance(s)?;
    }
    check_problem(db, &p)?;
    Ok(p)
}

fn check_problem(db: &SpeciesDb, p: &Problem) -> Result<(), CliError> {
    let s = &p.sigmas;
    if !(s.flow_pct.is_finite() && s.flow_pct > 0.0) {
        return Err(bad(format!(
            "sigma_flow_pct {} must be above zero (one σ of a flow meter, % of reading)",
            s.flow_pct
        )));
    }
    if !(s.fraction_pct.is_finite() && s.fraction_pct >= 0.0) {
        return Err(bad(format!(
            "sigma_fraction_pct {} must be zero or more (one σ of an analysed fraction, % of reading)",
            s.fraction_pct
        )));
    }
    if !(s.fraction_floor.is_finite() && s.fraction_floor > 0.0) {
        return Err(bad(format!(
            "sigma_fraction_floor {} must be above zero (the smallest σ of an analysed fraction, as a mole fraction)",
            s.fraction_floor
        )));
    }
    let mut tags: Vec<&str> = Vec::new();
    for (side, st) in [(Side::Inlet, &p.inlet), (Side::Outlet, &p.outlet)] {
        let n = side.name();
        let mut seen: Vec<usize> = Vec::new();
        for (i, _) in &st.dry {
            if seen.contains(i) {
                return Err(bad(format!(
                    "{n} dry analysis: {} is listed twice",
                    db.get(*i).name
                )));
            }
            seen.push(*i);
        }
        let by_difference = st
            .dry
            .iter()
            .filter(|(_, q)| matches!(q.val, Val::Unmeasured { .. }))
            .count();
        let measured_sum: f64 = st
            .dry
            .iter()
            .filter_map(|(_, q)| match q.val {
                Val::Measured { value, .. } => Some(value),
                Val::Unmeasured { .. } => None,
            })
            .sum();
        // A coarse guard against mol% and against a missing species (common practice);
        // smaller sum errors are the reconciliation's to weigh and test.
        if by_difference == 0 && !(0.5..=1.5).contains(&measured_sum) {
            return Err(bad(format!(
                "{n} dry analysis sums to {measured_sum:.4}: give mole fractions of every dry species (they sum to about 1; 100 would be mol%)"
            )));
        }
        if measured_sum > 1.5 {
            return Err(bad(format!(
                "{n} dry analysis: the measured fractions sum to {measured_sum:.4}, above 1: give mole fractions, not mol%"
            )));
        }
        let items = std::iter::once(&st.flow)
            .chain(st.water.as_ref())
            .chain(st.dry.iter().map(|(_, q)| q));
        for q in items {
            if tags.contains(&q.tag.as_str()) {
                return Err(bad(format!(
                    "instrument tag `{}` is used twice; give every quantity its own tag",
                    q.tag
                )));
            }
            tags.push(&q.tag);
        }
    }
    Ok(())
}

// ---------------------------------------------------------------------------------------
// To the core and back

/// What each core quantity is, in the core's order (flow, water, analysis; per stream).
struct Meta {
    side: Side,
    /// `dry_flow_kmol_h`, `water_kmol_h` or `dry_mole_fraction`.
    quantity: &'static str,
    species: Option<String>,
    input_sigma: Option<f64>,
}

fn to_reading(val: &Val, sigma_default: f64) -> Reading {
    match *val {
        Val::Measured { value, sigma } => Reading::Measured {
            value,
            sigma: sigma.unwrap_or(sigma_default),
        },
        Val::Unmeasured { guess } => Reading::Unmeasured { guess },
    }
}

fn sigma_of(r: &Reading) -> Option<f64> {
    match r {
        Reading::Measured { sigma, .. } => Some(*sigma),
        Reading::Unmeasured { .. } => None,
    }
}

/// The flow σ: % of reading, and never below 1e-6 kmol/h (a zero flow still has a σ).
fn flow_sigma(s: &Sigmas, value: f64) -> f64 {
    (s.flow_pct / 100.0 * value).max(1e-6)
}

fn core_stream(
    db: &SpeciesDb,
    st: &StreamSpec,
    s: &Sigmas,
    side: Side,
    meta: &mut Vec<Meta>,
) -> Stream {
    let flow_default = |v: &Val| match v {
        Val::Measured { value, .. } => flow_sigma(s, *value),
        Val::Unmeasured { .. } => 0.0,
    };
    let q = |item: &Item, sd: f64| Quantity {
        tag: item.tag.clone(),
        reading: to_reading(&item.val, sd),
    };
    let dry_flow = q(&st.flow, flow_default(&st.flow.val));
    meta.push(Meta {
        side,
        quantity: "dry_flow_kmol_h",
        species: None,
        input_sigma: sigma_of(&dry_flow.reading),
    });
    let water = st.water.as_ref().map(|w| q(w, flow_default(&w.val)));
    if let Some(w) = &water {
        meta.push(Meta {
            side,
            quantity: "water_kmol_h",
            species: None,
            input_sigma: sigma_of(&w.reading),
        });
    }
    let dry = st
        .dry
        .iter()
        .map(|(i, item)| {
            let sd = match item.val {
                Val::Measured { value, .. } => {
                    (s.fraction_pct / 100.0 * value).max(s.fraction_floor)
                }
                Val::Unmeasured { .. } => 0.0,
            };
            let quantity = q(item, sd);
            meta.push(Meta {
                side,
                quantity: "dry_mole_fraction",
                species: Some(db.get(*i).name.clone()),
                input_sigma: sigma_of(&quantity.reading),
            });
            (*i, quantity)
        })
        .collect();
    Stream {
        dry_flow,
        dry,
        water,
    }
}

/// The raw values of a stream; an unmeasured flow is `None`, one by-difference fraction is
/// 1 − Σ of the others (more than one: `None`).
struct Raw {
    flow: Option<f64>,
    water: Option<f64>,
    dry: Option<Vec<(usize, f64)>>,
}

fn raw_values(st: &Stream) -> Raw {
    let value = |q: &Quantity| match q.reading {
        Reading::Measured { value, .. } => Some(value),
        Reading::Unmeasured { .. } => None,
    };
    let known: f64 = st.dry.iter().filter_map(|(_, q)| value(q)).sum();
    let missing = st.dry.iter().filter(|(_, q)| value(q).is_none()).count();
    let dry = (missing <= 1).then(|| {
        st.dry
            .iter()
            .map(|(i, q)| (*i, value(q).unwrap_or((1.0 - known).max(0.0))))
            .collect()
    });
    let water = match &st.water {
        None => Some(0.0),
        Some(w) => value(w),
    };
    Raw {
        flow: value(&st.dry_flow),
        water,
        dry,
    }
}

/// Elements of the measurements alone; an element that needs an unmeasured quantity has no
/// figure, and `depends_on_unmeasured` names what is missing.
fn raw_balance(db: &SpeciesDb, inlet: &Stream, outlet: &Stream) -> Result<Value, CliError> {
    let Raw {
        flow: fi,
        water: wi,
        dry: di,
    } = raw_values(inlet);
    let Raw {
        flow: fo,
        water: wo,
        dry: d_o,
    } = raw_values(outlet);
    // Placeholders (1) keep every element in the list; their figures are blanked below.
    let placeholder = |s: &Stream, d: &Option<Vec<(usize, f64)>>| -> Vec<(usize, f64)> {
        d.clone()
            .unwrap_or_else(|| s.dry.iter().map(|(i, _)| (*i, 1.0)).collect())
    };
    let values = |f: Option<f64>, w: Option<f64>, d: Vec<(usize, f64)>| StreamValues {
        dry_flow: f.unwrap_or(1.0),
        water: w.unwrap_or(1.0),
        dry: d,
    };
    let vin = values(fi, wi, placeholder(inlet, &di));
    let vout = values(fo, wo, placeholder(outlet, &d_o));
    let closures =
        element_balance(db, &vin, &vout).map_err(|e| CliError::Internal(e.to_string()))?;
    let h_or_o = |el: &str| el == "H" || el == "O";
    let mut rows = Vec::new();
    for c in &closures {
        let mut missing: Vec<String> = Vec::new();
        for (side, st, f, w, d) in [
            (Side::Inlet, inlet, fi, wi, &di),
            (Side::Outlet, outlet, fo, wo, &d_o),
        ] {
            if f.is_none() {
                missing.push(st.dry_flow.tag.clone());
            }
            if w.is_none() && h_or_o(c.element) {
                missing.extend(st.water.as_ref().map(|q| q.tag.clone()));
            }
            if d.is_none() {
                missing.push(format!(
                    "the {} analysis (more than one fraction unmeasured)",
                    side.name()
                ));
            }
        }
        if missing.is_empty() {
            rows.push(closure_json(c));
        } else {
            rows.push(json!({
                "element": c.element,
                "in_kmol_h": Value::Null,
                "out_kmol_h": Value::Null,
                "closure": Value::Null,
                "imbalance_pct": Value::Null,
                "depends_on_unmeasured": missing,
            }));
        }
    }
    Ok(Value::Array(rows))
}

fn closure_json(c: &ElementClosure) -> Value {
    json!({
        "element": c.element,
        "in_kmol_h": finite(c.in_kmol_h),
        "out_kmol_h": finite(c.out_kmol_h),
        "closure": finite(c.closure),
        "imbalance_pct": finite(c.imbalance_pct),
    })
}

/// Steam per mole of carbon in the hydrocarbons (species of C and H only) of a dry gas.
fn steam_to_carbon(db: &SpeciesDb, v: &StreamValues) -> Option<f64> {
    let (c, h) = (element_index("C")?, element_index("H")?);
    let carbon: f64 = v
        .dry
        .iter()
        .filter(|(i, _)| {
            let sp = db.get(*i);
            sp.atoms(c) > 0.0
                && sp
                    .elements
                    .iter()
                    .all(|&(e, n)| n == 0.0 || e == c || e == h)
        })
        .map(|(i, y)| db.get(*i).atoms(c) * y)
        .sum::<f64>()
        * v.dry_flow;
    (carbon > 0.0 && v.water > 0.0).then(|| v.water / carbon)
}

fn steam_ratios(
    db: &SpeciesDb,
    inlet: &Stream,
    outlet: &Stream,
    rec: Option<&Reconciliation>,
) -> Value {
    let mut m = Map::new();
    let raw = |st: &Stream| -> Option<StreamValues> {
        let r = raw_values(st);
        Some(StreamValues {
            dry_flow: r.flow?,
            water: r.water?,
            dry: r.dry?,
        })
    };
    for (side, st, reconciled) in [
        (Side::Inlet, inlet, rec.map(|r| &r.inlet)),
        (Side::Outlet, outlet, rec.map(|r| &r.outlet)),
    ] {
        if st.water.is_none() {
            continue;
        }
        let s = side.name();
        let measured = raw(st);
        m.insert(
            format!("{s}_steam_to_dry_gas_measured"),
            opt(measured.as_ref().and_then(StreamValues::steam_to_dry)),
        );
        m.insert(
            format!("{s}_steam_to_dry_gas_reconciled"),
            opt(reconciled.and_then(StreamValues::steam_to_dry)),
        );
        if side == Side::Inlet {
            let sc_m = measured.as_ref().and_then(|v| steam_to_carbon(db, v));
            let sc_r = reconciled.and_then(|v| steam_to_carbon(db, v));
            if sc_m.is_some() || sc_r.is_some() {
                m.insert("inlet_steam_to_carbon_measured".into(), opt(sc_m));
                m.insert("inlet_steam_to_carbon_reconciled".into(), opt(sc_r));
            }
        }
    }
    Value::Object(m)
}

fn estimates_json(rec: &Reconciliation, meta: &[Meta]) -> Result<Value, CliError> {
    if rec.estimates.len() != meta.len() {
        return Err(CliError::Internal(format!(
            "{} estimates for {} quantities",
            rec.estimates.len(),
            meta.len()
        )));
    }
    let mut out = Vec::with_capacity(meta.len());
    for (e, m) in rec.estimates.iter().zip(meta) {
        let mut o = Map::new();
        o.insert("tag".into(), json!(e.tag));
        o.insert("stream".into(), json!(m.side.name()));
        o.insert("quantity".into(), json!(m.quantity));
        if let Some(s) = &m.species {
            o.insert("species".into(), json!(s));
        }
        o.insert("measured".into(), opt(e.measured));
        o.insert("measurement_sigma".into(), opt(m.input_sigma));
        o.insert("reconciled".into(), finite(e.reconciled));
        o.insert("reconciled_sigma".into(), finite(e.sigma));
        if let Some(t) = e.test {
            o.insert("adjustment".into(), finite(t.adjustment));
            o.insert("adjustment_sigma".into(), finite(t.adjustment_sigma));
            o.insert("z".into(), finite(t.z));
            o.insert("critical".into(), finite(t.critical));
            o.insert("failed".into(), json!(t.failed));
        } else if let Some(x) = e.measured {
            // A measurement no balance checks: it keeps its value.
            o.insert("adjustment".into(), finite(x - e.reconciled));
            o.insert("tested".into(), json!(false));
        }
        out.push(Value::Object(o));
    }
    Ok(Value::Array(out))
}

fn dry_sums(inlet: &Stream, outlet: &Stream) -> Value {
    let sum = |st: &Stream| -> Option<f64> {
        let mut total = 0.0;
        for (_, q) in &st.dry {
            match q.reading {
                Reading::Measured { value, .. } => total += value,
                Reading::Unmeasured { .. } => return None,
            }
        }
        Some(total)
    };
    json!({ "inlet": opt(sum(inlet)), "outlet": opt(sum(outlet)) })
}

/// `eqwatch balance`.
pub fn balance(db: &SpeciesDb, inp: &BalanceInput) -> Result<Value, CliError> {
    let p = problem(db, inp)?;
    let mut meta = Vec::new();
    let inlet = core_stream(db, &p.inlet, &p.sigmas, Side::Inlet, &mut meta);
    let outlet = core_stream(db, &p.outlet, &p.sigmas, Side::Outlet, &mut meta);
    let options = Options {
        alpha: p.significance,
        ..Options::default()
    };
    let mut out = Map::new();
    out.insert("significance".into(), json!(p.significance));
    out.insert(
        "sigma_defaults".into(),
        json!({
            "flow_pct": p.sigmas.flow_pct,
            "fraction_pct": p.sigmas.fraction_pct,
            "fraction_floor": p.sigmas.fraction_floor,
        }),
    );
    out.insert("dry_fraction_sums".into(), dry_sums(&inlet, &outlet));
    // With neither dry flow measured the balances are (up to the water) homogeneous in the
    // flows: zero flows satisfy them exactly, and the core converges there. Refused here.
    let measured_flow =
        |st: &Stream| matches!(st.dry_flow.reading, Reading::Measured { value, .. } if value > 0.0);
    let reconciled = if measured_flow(&inlet) || measured_flow(&outlet) {
        reconcile(db, &inlet, &outlet, &options).map_err(Refusal::Core)
    } else {
        Err(Refusal::NoDryFlow)
    };
    match reconciled {
        Ok(rec) => {
            out.insert("reconciled".into(), json!(true));
            out.insert(
                "elements_measured".into(),
                Value::Array(rec.closure_before.iter().map(closure_json).collect()),
            );
            out.insert(
                "elements_reconciled".into(),
                Value::Array(rec.closure_after.iter().map(closure_json).collect()),
            );
            out.insert(
                "global_test".into(),
                match rec.global {
                    Some(g) => json!({
                        "statistic": finite(g.statistic),
                        "dof": g.dof,
                        "critical": finite(g.critical),
                        "passed": g.passed,
                    }),
                    None => Value::Null,
                },
            );
            if rec.global.is_none() {
                out.insert(
                    "why_no_global_test".into(),
                    json!("no redundancy: every balance is needed to determine the unmeasured quantities, so nothing is left to test; measure one more quantity"),
                );
            }
            out.insert("suspect".into(), json!(rec.suspect));
            out.insert("suspect_equivalents".into(), json!(rec.suspect_equivalents));
            out.insert("estimates".into(), estimates_json(&rec, &meta)?);
            // The least squares have no bounds: next to a gross error a small reading can
            // be reconciled below zero. Named, not clipped.
            out.insert("reconciled_below_zero".into(), json!(rec.below_zero()));
            out.insert(
                "steam_ratios".into(),
                steam_ratios(db, &inlet, &outlet, Some(&rec)),
            );
            out.insert("iterations".into(), json!(rec.iterations));
            out.insert("residual_norm".into(), finite(rec.residual_norm));
        }
        Err(Refusal::NoDryFlow) => {
            let why = format!(
                "neither {} nor {} is measured (above zero): the balances then fix only the ratio of the flows, and zero flows balance trivially; measure one of them",
                inlet.dry_flow.tag, outlet.dry_flow.tag
            );
            fallback(db, &mut out, &inlet, &outlet, why)?;
        }
        Err(Refusal::Core(e)) => {
            use crate::reconcile::ReconcileError as R;
            let why = match &e {
                R::NonPhysical { .. } | R::InvalidOption(_) => return Err(bad(e.to_string())),
                R::UnknownSpecies { .. } => return Err(CliError::Internal(e.to_string())),
                R::Undeterminable { tags } => {
                    let water_tag = |st: &Stream| st.water.as_ref().map(|q| q.tag.clone());
                    let both_waters = [water_tag(&inlet), water_tag(&outlet)]
                        .iter()
                        .all(|t| t.as_ref().is_some_and(|t| tags.contains(t)));
                    let hint = if both_waters {
                        " (across a reactor the balances see only water in minus water out, so one water flow must be measured)"
                    } else {
                        ""
                    };
                    format!("{e}; measure one of them{hint}")
                }
                R::Singular(_) | R::NoConvergence { .. } => format!(
                    "{e}; the readings may be far from any balanced state: check the flows for zeros and each analysis for a missing species"
                ),
            };
            fallback(db, &mut out, &inlet, &outlet, why)?;
        }
    }
    Ok(Value::Object(out))
}

/// Why there is no reconciliation: the core's refusal, or one made here.
enum Refusal {
    Core(crate::reconcile::ReconcileError),
    NoDryFlow,
}

/// Without a reconciliation: the balances the measurements allow, and why.
fn fallback(
    db: &SpeciesDb,
    out: &mut Map<String, Value>,
    inlet: &Stream,
    outlet: &Stream,
    why: String,
) -> Result<(), CliError> {
    out.insert("reconciled".into(), json!(false));
    out.insert("why_not_reconciled".into(), json!(why));
    out.insert("elements_measured".into(), raw_balance(db, inlet, outlet)?);
    out.insert("steam_ratios".into(), steam_ratios(db, inlet, outlet, None));
    Ok(())
}

// ---------------------------------------------------------------------------------------
// The table

fn num(v: &Value, decimals: usize) -> String {
    match v.as_f64() {
        Some(x) if x != 0.0 && (x.abs() < 1e-3 || x.abs() >= 1e7) => format!("{x:.3e}"),
        Some(x) => format!("{x:.decimals$}"),
        None => "-".into(),
    }
}

/// `eqwatch balance` as text (the default; `--json` prints the object).
pub fn balance_table(v: &Value) -> String {
    let mut t = String::new();
    let rows = |key: &str| v[key].as_array().cloned().unwrap_or_default();
    let measured = rows("elements_measured");
    let reconciled = rows("elements_reconciled");
    t.push_str("Element balance, kmol/h of atoms (measured");
    if !reconciled.is_empty() {
        t.push_str("; unmeasured quantities at their reconciled values");
    }
    t.push_str(")\n");
    t.push_str(&format!(
        "  {:<4} {:>14} {:>14} {:>12} {:>12}",
        "el.", "in", "out", "closure", "imbalance %"
    ));
    if !reconciled.is_empty() {
        t.push_str(&format!("   {:>12} {:>12}", "reconciled", "imbalance %"));
    }
    t.push('\n');
    for m in &measured {
        let el = m["element"].as_str().unwrap_or("?");
        t.push_str(&format!(
            "  {:<4} {:>14} {:>14} {:>12} {:>12}",
            el,
            num(&m["in_kmol_h"], 4),
            num(&m["out_kmol_h"], 4),
            num(&m["closure"], 6),
            num(&m["imbalance_pct"], 4)
        ));
        if let Some(r) = reconciled.iter().find(|r| r["element"] == m["element"]) {
            t.push_str(&format!(
                "   {:>12} {:>12}",
                num(&r["closure"], 6),
                num(&r["imbalance_pct"], 4)
            ));
        }
        if let Some(d) = m["depends_on_unmeasured"].as_array() {
            let names: Vec<&str> = d.iter().filter_map(Value::as_str).collect();
            t.push_str(&format!("   (needs {})", names.join(", ")));
        }
        t.push('\n');
    }
    // In per cent, rounded so that 0.07 prints as 7, not 7.000000000000001.
    let sig = (v["significance"].as_f64().unwrap_or(f64::NAN) * 1e8).round() / 1e6;
    if v["reconciled"] == json!(false) {
        t.push_str(&format!(
            "\nNot reconciled: {}\n",
            v["why_not_reconciled"].as_str().unwrap_or("")
        ));
    } else {
        let g = &v["global_test"];
        if g.is_null() {
            t.push_str(&format!(
                "\nGlobal test: none ({})\n",
                v["why_no_global_test"].as_str().unwrap_or("")
            ));
        } else {
            t.push_str(&format!(
                "\nGlobal test: statistic {} on {} degrees of freedom, critical {} at {sig} %: {}\n",
                num(&g["statistic"], 4),
                g["dof"],
                num(&g["critical"], 4),
                if g["passed"] == json!(true) {
                    "passed"
                } else {
                    "FAILED (a gross error)"
                }
            ));
        }
        match v["suspect"].as_str() {
            Some(s) => {
                let eq: Vec<&str> = v["suspect_equivalents"]
                    .as_array()
                    .map(|a| a.iter().filter_map(Value::as_str).collect())
                    .unwrap_or_default();
                t.push_str(&format!("Suspect: {s}"));
                if !eq.is_empty() {
                    t.push_str(&format!(
                        " (the balances cannot tell it from: {})",
                        eq.join(", ")
                    ));
                }
                t.push('\n');
            }
            None => t.push_str("Suspect: none\n"),
        }
        t.push_str(&format!(
            "\n  {:<26} {:>13} {:>13} {:>11} {:>11} {:>7} {:>7}\n",
            "quantity", "measured", "reconciled", "± σ", "adjustment", "z", "crit."
        ));
        for e in v["estimates"].as_array().into_iter().flatten() {
            let d = if e["quantity"] == json!("dry_mole_fraction") {
                6
            } else {
                3
            };
            let flag = if e["failed"] == json!(true) { " *" } else { "" };
            t.push_str(&format!(
                "  {:<26} {:>13} {:>13} {:>11} {:>11} {:>7} {:>7}{flag}\n",
                e["tag"].as_str().unwrap_or(""),
                if e["measured"].is_null() {
                    "unmeasured".into()
                } else {
                    num(&e["measured"], d)
                },
                num(&e["reconciled"], d),
                num(&e["reconciled_sigma"], d),
                num(&e["adjustment"], d),
                num(&e["z"], 2),
                num(&e["critical"], 2),
            ));
        }
        t.push_str("  (flows kmol/h, analyses dry mole fractions; z -: no balance checks it; * failed measurement test)\n");
        let negative: Vec<&str> = v["reconciled_below_zero"]
            .as_array()
            .map(|a| a.iter().filter_map(Value::as_str).collect())
            .unwrap_or_default();
        if !negative.is_empty() {
            t.push_str(&format!(
                "  reconciled below zero: {} (the reconciliation has no bounds; with a gross error present these figures are not physical)\n",
                negative.join(", ")
            ));
        }
    }
    let ratios: Vec<(&String, &Value)> = v["steam_ratios"]
        .as_object()
        .map(|m| m.iter().filter(|(_, x)| !x.is_null()).collect())
        .unwrap_or_default();
    if !ratios.is_empty() {
        t.push_str("\nSteam ratios (mol H2O per mol dry gas; per mol hydrocarbon carbon)\n");
        for (k, x) in ratios {
            t.push_str(&format!("  {k:<36} {}\n", num(x, 5)));
        }
    }
    t
}

#[cfg(test)]
mod tests {
    use super::*;

    fn db() -> SpeciesDb {
        SpeciesDb::builtin()
    }

    fn err(r: Result<Value, CliError>) -> String {
        match r {
            Ok(v) => panic!("expected an input error, got {v}"),
            Err(e) => {
                assert_eq!(e.exit_code(), 1, "{e}");
                e.to_string()
            }
        }
    }

    fn from_json(text: &str) -> Result<Value, CliError> {
        let inp = BalanceInput {
            json: Some((text.to_string(), "case.json".into())),
            ..BalanceInput::default()
        };
        balance(&db(), &inp)
    }

    /// An invented LTS: inlet 1000 kmol/h dry (CO 3 %, CO2 15 %, H2 60 %, N2 21.5 %,
    /// CH4 0.5 %) with 400 kmol/h steam; 25 kmol/h of CO shifted (CO + H2O = CO2 + H2,
    /// a stoichiometry fact): dry out 1025 kmol/h (CO 5, CO2 175, H2 625, N2 215.0, CH4 5
    /// kmol/h), water out 375 kmol/h. Both balances close exactly by construction.
    /// `co2_factor` scales the outlet CO2 reading (a wrong analyser).
    fn lts(water_in: Value, water_out: Value, co2_factor: f64, sigma_flow_pct: f64) -> String {
        let d = 1025.0;
        json!({
            "sigma_flow_pct": sigma_flow_pct,
            "inlet": {"dry_flow_kmol_h": 1000, "water_kmol_h": water_in,
                      "dry_mole_fractions": {"CO": 0.03, "CO2": 0.15, "H2": 0.60, "N2": 0.215, "CH4": 0.005}},
            "outlet": {"dry_flow_kmol_h": d, "water_kmol_h": water_out, "analyser_tag": "AI-201",
                       "dry_mole_fractions": {"CO": 5.0 / d, "CO2": co2_factor * 175.0 / d,
                          "H2": 625.0 / d, "N2": 215.0 / d, "CH4": 5.0 / d}}
        })
        .to_string()
    }

    fn lts_consistent() -> String {
        lts(json!(400), json!("unmeasured"), 1.0, 1.0)
    }

    #[test]
    fn a_consistent_shift_closes_and_recovers_the_outlet_water() {
        // Expected figures from the construction above (the `lts` construction): every closure 1, the
        // water out 375 kmol/h, inlet S/D 0.4 and S/C 400/5 = 80, outlet S/D 375/1025.
        let v = from_json(&lts_consistent()).expect("balance");
        assert_eq!(v["reconciled"], json!(true), "{v}");
        for el in v["elements_reconciled"].as_array().expect("elements") {
            let c = el["closure"].as_f64().expect("closure");
            assert!((c - 1.0).abs() < 1e-9, "{el}");
        }
        let water = v["estimates"]
            .as_array()
            .expect("estimates")
            .iter()
            .find(|e| e["tag"] == json!("outlet water"))
            .expect("outlet water");
        assert!(water["measured"].is_null());
        let w = water["reconciled"].as_f64().expect("water");
        assert!((w - 375.0).abs() < 1e-6, "{w}");
        let sr = &v["steam_ratios"];
        let near = |k: &str, want: f64| {
            let x = sr[k].as_f64().unwrap_or(f64::NAN);
            assert!((x - want).abs() < 1e-9 * want, "{k} {x} vs {want}");
        };
        near("inlet_steam_to_dry_gas_measured", 0.4);
        near("inlet_steam_to_carbon_measured", 80.0);
        near("outlet_steam_to_dry_gas_reconciled", 375.0 / 1025.0);
        assert!(sr["outlet_steam_to_dry_gas_measured"].is_null());
        // The analyser tag names the outlet fractions.
        assert!(v["estimates"].to_string().contains("AI-201 CO2"));
        let g = v["global_test"]["statistic"].as_f64().expect("γ");
        assert!(g < 1e-12, "{g}");
        let text = balance_table(&v);
        assert!(
            text.contains("Global test") && text.contains("outlet water"),
            "{text}"
        );
    }

    #[test]
    fn both_waters_unmeasured_still_prints_the_carbon_and_nitrogen_balances() {
        let text = lts(json!("unmeasured"), json!("unmeasured"), 1.0, 1.0);
        let v = from_json(&text).expect("balance");
        assert_eq!(v["reconciled"], json!(false));
        let why = v["why_not_reconciled"].as_str().expect("why");
        assert!(
            why.contains("inlet water") && why.contains("outlet water"),
            "{why}"
        );
        assert!(why.contains("one water flow must be measured"), "{why}");
        let els = v["elements_measured"].as_array().expect("elements");
        let get = |e: &str| els.iter().find(|x| x["element"] == json!(e)).expect(e);
        // C and N need no water: they close (construction of `lts`).
        assert!((get("C")["closure"].as_f64().expect("C") - 1.0).abs() < 1e-12);
        assert!((get("N")["closure"].as_f64().expect("N") - 1.0).abs() < 1e-12);
        assert!(get("H")["closure"].is_null());
        assert!(
            get("O")["depends_on_unmeasured"]
                .to_string()
                .contains("outlet water")
        );
        let t = balance_table(&v);
        assert!(t.contains("Not reconciled") && t.contains("needs"), "{t}");
    }

    #[test]
    fn command_line_streams_with_units_and_a_fraction_by_difference() {
        // The same LTS as the JSON case, the outlet N2 left for the difference and the
        // inlet given in mol%.
        let inp = BalanceInput {
            inlet: StreamText {
                dry: Some("CO=3%,CO2=15%,H2=60%,N2=21.5%,CH4=0.5%".into()),
                flow: Some("1000".into()),
                water: Some("400 kmol/h".into()),
            },
            outlet: StreamText {
                dry: Some(
                    "CO=0.004878048780487805,CO2=0.17073170731707318,H2=0.6097560975609756,N2=?,CH4=0.004878048780487805"
                        .into(),
                ),
                flow: Some("1025".into()),
                water: Some("unmeasured".into()),
            },
            significance: Some("7 %".into()),
            ..BalanceInput::default()
        };
        let v = balance(&db(), &inp).expect("balance");
        assert_eq!(v["significance"], json!(0.07));
        assert!(balance_table(&v).contains("at 7 %:"));
        let n2 = v["estimates"]
            .as_array()
            .expect("estimates")
            .iter()
            .find(|e| e["tag"] == json!("outlet N2"))
            .expect("N2");
        let y = n2["reconciled"].as_f64().expect("N2");
        assert!((y - 0.2097560975609756).abs() < 1e-9, "{y}");
    }

    #[test]
    fn a_wrong_outlet_analysis_fails_the_global_test_and_is_named() {
        // The LTS outlet CO2 reading 20 % high (0.1707 -> 0.2049), both waters measured,
        // flows at 0.5 %.
        let text = lts(json!(400), json!(375), 1.2, 0.5);
        let v = from_json(&text).expect("balance");
        assert_eq!(v["global_test"]["passed"], json!(false), "{v}");
        let named = v["suspect"] == json!("AI-201 CO2")
            || v["suspect_equivalents"].to_string().contains("AI-201 CO2");
        assert!(
            named,
            "suspect {} / {}",
            v["suspect"], v["suspect_equivalents"]
        );
        let t = balance_table(&v);
        assert!(
            t.contains("FAILED") && t.contains("Suspect: AI-201 CO2"),
            "{t}"
        );
    }

    #[test]
    fn input_errors_say_what_to_fix() {
        for (text, want) in [
            ("[1]", "expected one JSON object"),
            ("{", "not valid JSON"),
            (r#"{"inlet": {}}"#, "inlet.dry_flow_kmol_h is missing"),
            (
                r#"{"inlet": {"dry_flow_kmol_h": 1, "dry_mole_fractions": {"XY": 1}}, "outlet": {}}"#,
                "unknown species `XY`",
            ),
            (
                r#"{"inlet": {"dry_flow_kmol_h": -5, "dry_mole_fractions": {"CO": 1}}}"#,
                "inlet.dry_flow_kmol_h: -5 kmol/h must be zero or more",
            ),
            (
                r#"{"inlet": {"dry_flow_kmol_h": 1, "dry_mole_fractions": {"CO": 1.2}}}"#,
                "not a mole fraction between 0 and 1",
            ),
            (
                r#"{"inlet": {"dry_flow_kmol_h": 1, "steam": 3, "dry_mole_fractions": {"CO": 1}}}"#,
                "unknown key `steam`",
            ),
            (
                r#"{"inlet": {"dry_flow_kmol_h": 1, "dry_mole_fractions": {"H2O": 1}}}"#,
                "give it as inlet.water_kmol_h",
            ),
            (
                r#"{"inlet": {"dry_flow_kmol_h": {"value": 1, "sigma": 0}, "dry_mole_fractions": {"CO": 1}}}"#,
                "must be above zero",
            ),
            (
                r#"{"inlet": {"dry_flow_kmol_h": {"sigma": 2}, "dry_mole_fractions": {"CO": 1}}}"#,
                "`sigma` without `value`",
            ),
            (
                r#"{"inlet": {"dry_flow_kmol_h": 1, "dry_mole_fractions": {"CO": 1}}}"#,
                "`outlet` is missing",
            ),
            (
                r#"{"inlet": {"dry_flow_kmol_h": 1, "dry_mole_fractions": {"CO": 1}},
                   "outlet": {"dry_flow_kmol_h": 1, "dry_mole_fractions": {"CO": 1}},
                   "significance": "120 %"}"#,
                "strictly between 0 and 1",
            ),
            (
                r#"{"inlet": {"dry_flow_kmol_h": 1, "dry_mole_fractions": {"CO": 60, "H2": 40}},
                   "outlet": {"dry_flow_kmol_h": 1, "dry_mole_fractions": {"CO": 1}}}"#,
                "not a mole fraction",
            ),
            (
                r#"{"inlet": {"dry_flow_kmol_h": 1, "dry_mole_fractions": {"CO": 0.2, "H2": 0.1}},
                   "outlet": {"dry_flow_kmol_h": 1, "dry_mole_fractions": {"CO": 1}}}"#,
                "sums to 0.3000: give mole fractions of every dry species",
            ),
            (
                r#"{"inlet": {"dry_flow_kmol_h": 1, "flow_tag": "FI-1", "dry_mole_fractions": {"CO": 1}},
                   "outlet": {"dry_flow_kmol_h": 1, "flow_tag": "FI-1", "dry_mole_fractions": {"CO": 1}}}"#,
                "tag `FI-1` is used twice",
            ),
            (
                r#"{"inlet": {"dry_flow_kmol_h": 1, "dry_mole_fractions": {"CO": 1}},
                   "outlet": {"dry_flow_kmol_h": 1, "dry_mole_fractions": {"CO": 1}},
                   "sigma_flow_pct": 0}"#,
                "sigma_flow_pct 0 must be above zero",
            ),
        ] {
            let e = err(from_json(text));
            assert!(e.contains(want), "{text}\n -> {e}\n wanted: {want}");
        }
    }

    #[test]
    fn no_redundancy_determines_the_unknowns_and_says_why_there_is_no_test() {
        // The `lts` construction with six unknowns for six constraints (C, H, O, N and the
        // two sums): inlet N2 by difference; outlet flow, water, CO, CO2 and H2 unmeasured.
        // Hand count: the inlet sum gives N2 in, the N balance the outlet flow, C and the
        // outlet sum CO + CO2 and H2, O splits CO from CO2, H gives the water: redundancy 0.
        let d = 1025.0;
        let text = json!({
            "inlet": {"dry_flow_kmol_h": 1000, "water_kmol_h": 400,
                      "dry_mole_fractions": {"CO": 0.03, "CO2": 0.15, "H2": 0.60, "N2": "unmeasured", "CH4": 0.005}},
            "outlet": {"dry_flow_kmol_h": "unmeasured", "water_kmol_h": "unmeasured",
                       "dry_mole_fractions": {"CO": "unmeasured", "CO2": {"guess": 0.2},
                          "H2": "unmeasured", "N2": 215.0 / d, "CH4": 5.0 / d}}
        })
        .to_string();
        let v = from_json(&text).expect("balance");
        assert_eq!(v["reconciled"], json!(true), "{v}");
        assert!(v["global_test"].is_null());
        assert!(
            v["why_no_global_test"]
                .as_str()
                .expect("why")
                .contains("no redundancy")
        );
        let est = v["estimates"].as_array().expect("estimates");
        let value = |tag: &str| {
            est.iter()
                .find(|e| e["tag"] == json!(tag))
                .and_then(|e| e["reconciled"].as_f64())
                .unwrap_or(f64::NAN)
        };
        for (tag, want) in [
            ("inlet N2", 0.215),
            ("outlet dry flow", d),
            ("outlet water", 375.0),
            ("outlet CO", 5.0 / d),
            ("outlet CO2", 175.0 / d),
            ("outlet H2", 625.0 / d),
        ] {
            let x = value(tag);
            assert!((x - want).abs() < 1e-8 * want, "{tag}: {x} vs {want}");
        }
        assert!(balance_table(&v).contains("Global test: none (no redundancy"));
    }

    #[test]
    fn no_dry_flow_measured_is_refused_with_the_reason() {
        // Without water and with both dry flows unmeasured, only F_out/F_in is fixed; the
        // core alone converges to F_in = F_out = 0 (2e-15 kmol/h, reported upstream).
        let text = lts(Value::Null, Value::Null, 1.0, 1.0)
            .replace(
                "\"dry_flow_kmol_h\":1000",
                "\"dry_flow_kmol_h\":\"unmeasured\"",
            )
            .replace(
                "\"dry_flow_kmol_h\":1025.0",
                "\"dry_flow_kmol_h\":\"unmeasured\"",
            );
        assert_eq!(text.matches("unmeasured").count(), 2, "{text}");
        let v = from_json(&text).expect("balance");
        assert_eq!(v["reconciled"], json!(false), "{v}");
        let why = v["why_not_reconciled"].as_str().expect("why");
        assert!(
            why.contains("neither inlet dry flow nor outlet dry flow is measured"),
            "{why}"
        );
        assert!(v["elements_measured"][0]["closure"].is_null());
    }

    #[test]
    fn command_line_errors_say_what_to_fix() {
        let base = BalanceInput {
            inlet: StreamText {
                dry: Some("CO=1".into()),
                flow: Some("10".into()),
                water: None,
            },
            outlet: StreamText {
                dry: Some("CO=1".into()),
                flow: Some("10".into()),
                water: None,
            },
            ..BalanceInput::default()
        };
        let with = |f: &dyn Fn(&mut BalanceInput)| {
            let mut b = base.clone();
            f(&mut b);
            err(balance(&db(), &b))
        };
        assert!(with(&|b| b.inlet.dry = None).contains("--inlet-dry is missing"));
        assert!(with(&|b| b.outlet.flow = None).contains("--outlet-flow is missing"));
        assert!(with(&|b| b.inlet.flow = Some("ten".into())).contains("give a flow in kmol/h"));
        assert!(with(&|b| b.outlet.dry = Some("CO=abc".into())).contains("--outlet-dry"));
        assert!(with(&|b| b.outlet.dry = Some("XY=1".into())).contains("unknown species `XY`"));
        assert!(with(&|b| b.inlet.dry = Some("CO=0.5,co=0.5".into())).contains("listed twice"));
        assert!(with(&|b| b.outlet.dry = Some("h2o=0.1,CO=0.9".into())).contains("--outlet-water"));
        assert!(with(&|b| b.json = Some(("{}".into(), "f.json".into()))).contains("not both"));
        assert!(with(&|b| b.significance = Some("often".into())).contains("such as 0.05"));
        // The same stream on both sides with no water closes: a valid balance.
        let v = balance(&db(), &base).expect("balance");
        assert_eq!(v["elements_measured"][0]["closure"], json!(1.0));
    }

    #[test]
    fn a_reading_reconciled_below_zero_is_named() {
        // Invented methanator: 1000 kmol/h dry (CO 0.3 %, CH4 0.7 %, H2 74 %, N2 25 %) and
        // 1 kmol/h water; CO + 3 H2 = CH4 + H2O (stoichiometry) takes all 3 kmol/h CO: dry
        // out 991 kmol/h (CH4 10, H2 731, N2 250 kmol/h, CO 1e-12), water out 4 kmol/h. The
        // outlet CH4 read 20 % high pulls the unbounded CO estimate below zero (measured:
        // −2.7e-5, a property of unbounded least squares, Narasimhan & Jordache ch. 5).
        let d = 991.0;
        let text = json!({
            "inlet": {"dry_flow_kmol_h": 1000, "water_kmol_h": 1.0,
                      "dry_mole_fractions": {"CO": 0.003, "CH4": 0.007, "H2": 0.74, "N2": 0.25}},
            "outlet": {"dry_flow_kmol_h": d, "water_kmol_h": 4.0,
                       "dry_mole_fractions": {"CO": 1e-12, "CH4": 1.2 * 10.0 / d,
                          "H2": 731.0 / d, "N2": 250.0 / d}}
        })
        .to_string();
        let v = from_json(&text).expect("balance");
        assert_eq!(v["suspect"], json!("outlet CH4"), "{v}");
        assert_eq!(v["reconciled_below_zero"], json!(["outlet CO"]));
        let t = balance_table(&v);
        assert!(t.contains("reconciled below zero: outlet CO"), "{t}");
        assert!(t.contains("at 5 %"), "{t}");
        // The same plant without the error has nothing below zero.
        let fine = text.replace(&format!("{}", 1.2 * 10.0 / d), &format!("{}", 10.0 / d));
        let v = from_json(&fine).expect("balance");
        assert_eq!(v["reconciled_below_zero"], json!([]), "{v}");
    }

    #[test]
    fn a_quantity_object_carries_its_own_sigma_and_tag() {
        // The `lts` construction with the inlet meter as an object; an absolute σ for every
        // fraction through pct 0 and the floor.
        let text = lts(json!(400), json!("unmeasured"), 1.0, 1.0)
            .replace(
                "\"dry_flow_kmol_h\":1000",
                "\"dry_flow_kmol_h\":{\"value\":1000,\"sigma\":5,\"tag\":\"FI-101\"}",
            )
            .replacen(
                '{',
                "{\"sigma_fraction_pct\":0,\"sigma_fraction_floor\":0.001,",
                1,
            );
        let v = from_json(&text).expect("balance");
        let est = v["estimates"].as_array().expect("estimates");
        let fi = est
            .iter()
            .find(|e| e["tag"] == json!("FI-101"))
            .expect("FI-101");
        assert_eq!(fi["measurement_sigma"], json!(5.0));
        assert_eq!(fi["stream"], json!("inlet"));
        let co = est
            .iter()
            .find(|e| e["tag"] == json!("inlet CO"))
            .expect("CO");
        assert_eq!(co["measurement_sigma"], json!(0.001));
        assert_eq!(co["species"], json!("CO"));
    }

    #[test]
    fn significance_accepts_a_fraction_or_a_percentage() {
        assert_eq!(parse_significance("0.05").ok(), Some(0.05));
        assert_eq!(parse_significance("5 %").ok(), Some(0.05));
        assert_eq!(parse_significance("1%").ok(), Some(0.01));
        assert!(parse_significance("0").is_err());
        assert!(parse_significance("1").is_err());
    }
}
