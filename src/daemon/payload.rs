//! Wire formats: decoding input messages (bare numbers, JSON with JSON Pointers,
//! multi-component analyser messages) into core readings, and encoding evaluations
//! as result JSON. The core never sees JSON; these shapes are this module's alone.

use serde::Serialize;
use serde::ser::SerializeMap;
use serde_json::Value;
use thiserror::Error;

use crate::composition::Basis;
use crate::config::{CompositionSource, ReactorSettings, ScalarDecoder, ScalarUnit};
use crate::monitor::{AnalysisReading, Evaluation, ScalarReading, SourceQuality};
use crate::thermo::species::SpeciesDb;
use crate::timefmt::{format_rfc3339, parse_rfc3339};
use crate::units::{CompositionUnit, PressureUnit, TemperatureUnit};

/// Version of the result payload; bump on any incompatible change.
pub const RESULT_SCHEMA: &str = "eqwatch.result/1";

/// Why a message could not be decoded. `reason()` is the metrics label.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum DecodeError {
    #[error("payload is not UTF-8 text")]
    NotText,
    #[error("payload `{0}` is not a number")]
    NotANumber(String),
    #[error("payload is not JSON: {0}")]
    NotJson(String),
    #[error("JSON Pointer {0} finds nothing in the message")]
    Missing(String),
    #[error("JSON Pointer {0} does not point at a number")]
    NotNumeric(String),
    #[error("value at {0} is not finite")]
    NotFinite(String),
    #[error("timestamp `{0}` is neither RFC 3339 nor epoch milliseconds")]
    BadTimestamp(String),
    #[error("unit `{0}` is unknown or of the wrong kind for this input")]
    BadUnit(String),
    #[error("quality `{0}` is not good, uncertain or bad")]
    BadQuality(String),
    #[error("basis `{0}` is not wet or dry")]
    BadBasis(String),
    #[error("{0}")]
    NotPhysical(String),
}

impl DecodeError {
    pub const REASONS: [&'static str; 11] = [
        "not_text",
        "not_a_number",
        "not_json",
        "missing_field",
        "not_numeric",
        "not_finite",
        "bad_timestamp",
        "bad_unit",
        "bad_quality",
        "bad_basis",
        "not_physical",
    ];

    pub fn reason_index(&self) -> usize {
        match self {
            Self::NotText => 0,
            Self::NotANumber(_) => 1,
            Self::NotJson(_) => 2,
            Self::Missing(_) => 3,
            Self::NotNumeric(_) => 4,
            Self::NotFinite(_) => 5,
            Self::BadTimestamp(_) => 6,
            Self::BadUnit(_) => 7,
            Self::BadQuality(_) => 8,
            Self::BadBasis(_) => 9,
            Self::NotPhysical(_) => 10,
        }
    }

    pub fn reason(&self) -> &'static str {
        Self::REASONS[self.reason_index()]
    }
}

fn text(payload: &[u8]) -> Result<&str, DecodeError> {
    std::str::from_utf8(payload)
        .map(str::trim)
        .map_err(|_| DecodeError::NotText)
}

fn json(payload: &[u8]) -> Result<Value, DecodeError> {
    serde_json::from_str(text(payload)?).map_err(|e| DecodeError::NotJson(e.to_string()))
}

/// A timestamp field: RFC 3339 text, or epoch milliseconds (values below 1e11 are taken
/// as epoch seconds).
pub fn timestamp(v: &Value) -> Result<i64, DecodeError> {
    match v {
        Value::String(s) => parse_rfc3339(s)
            .or_else(|| s.trim().parse::<f64>().ok().and_then(epoch_number))
            .ok_or_else(|| DecodeError::BadTimestamp(s.clone())),
        Value::Number(n) => n
            .as_f64()
            .and_then(epoch_number)
            .ok_or_else(|| DecodeError::BadTimestamp(n.to_string())),
        other => Err(DecodeError::BadTimestamp(other.to_string())),
    }
}

fn epoch_number(x: f64) -> Option<i64> {
    if !x.is_finite() || x < 0.0 {
        return None;
    }
    let ms = if x < 1e11 { x * 1000.0 } else { x };
    (ms < 1e15).then_some(ms as i64)
}

fn quality(v: Option<&Value>) -> Result<SourceQuality, DecodeError> {
    match v {
        None | Some(Value::Null) => Ok(SourceQuality::Good),
        Some(Value::String(s)) => {
            SourceQuality::parse(s).ok_or_else(|| DecodeError::BadQuality(s.clone()))
        }
        Some(Value::Number(n)) => SourceQuality::parse(&n.to_string())
            .ok_or_else(|| DecodeError::BadQuality(n.to_string())),
        Some(o) => Err(DecodeError::BadQuality(o.to_string())),
    }
}

fn number_at(doc: &Value, pointer: &str) -> Result<f64, DecodeError> {
    let v = doc
        .pointer(pointer)
        .ok_or_else(|| DecodeError::Missing(pointer.to_string()))?;
    let x = match v {
        Value::Number(n) => n
            .as_f64()
            .ok_or_else(|| DecodeError::NotNumeric(pointer.to_string()))?,
        Value::String(s) => s
            .trim()
            .parse::<f64>()
            .map_err(|_| DecodeError::NotNumeric(pointer.to_string()))?,
        _ => return Err(DecodeError::NotNumeric(pointer.to_string())),
    };
    if !x.is_finite() {
        return Err(DecodeError::NotFinite(pointer.to_string()));
    }
    Ok(x)
}

/// Converts a value in `unit` (the configured one, or the message's own) to fixed units.
pub(crate) fn convert(
    value: f64,
    unit: &ScalarUnit,
    unit_text: Option<&str>,
    atmosphere_bar: f64,
) -> Result<f64, DecodeError> {
    let bad = |u: &str| DecodeError::BadUnit(u.to_string());
    match unit {
        ScalarUnit::Temperature(cfg) => {
            let u = match unit_text {
                Some(t) => TemperatureUnit::parse(t).map_err(|_| bad(t))?,
                None => *cfg,
            };
            u.to_kelvin(value)
                .map_err(|e| DecodeError::NotPhysical(e.to_string()))
        }
        ScalarUnit::Pressure(cfg) => {
            let u = match unit_text {
                Some(t) => PressureUnit::parse(t).map_err(|_| bad(t))?,
                None => *cfg,
            };
            u.to_bar_absolute(value, atmosphere_bar)
                .map_err(|e| DecodeError::NotPhysical(e.to_string()))
        }
        ScalarUnit::Ratio => {
            if let Some(t) = unit_text {
                let n = t.trim().to_ascii_lowercase();
                if !matches!(n.as_str(), "" | "mol/mol" | "ratio" | "-" | "1") {
                    return Err(bad(t));
                }
            }
            if value < 0.0 {
                return Err(DecodeError::NotPhysical(format!(
                    "ratio {value} is negative"
                )));
            }
            Ok(value)
        }
    }
}

/// A scalar message before unit conversion.
struct RawScalar {
    value: f64,
    ts_ms: i64,
    quality: SourceQuality,
    /// The message's own unit, if it carries one.
    unit: Option<String>,
}

/// Reads value, timestamp, quality and unit from a bare number or a JSON message.
fn read_scalar(
    payload: &[u8],
    decoder: &ScalarDecoder,
    arrival_ms: i64,
) -> Result<RawScalar, DecodeError> {
    let raw = match decoder {
        ScalarDecoder::Number => {
            let t = text(payload)?;
            let v: f64 = t
                .parse()
                .map_err(|_| DecodeError::NotANumber(t.chars().take(40).collect()))?;
            RawScalar {
                value: v,
                ts_ms: arrival_ms,
                quality: SourceQuality::Good,
                unit: None,
            }
        }
        ScalarDecoder::Json {
            value_pointer,
            ts_pointer,
            quality_pointer,
            unit_pointer,
        } => {
            let doc = json(payload)?;
            let value = number_at(&doc, value_pointer)?;
            let ts_ms = match ts_pointer.as_deref().and_then(|p| doc.pointer(p)) {
                Some(t) => timestamp(t)?,
                None => arrival_ms,
            };
            let quality = quality(quality_pointer.as_deref().and_then(|p| doc.pointer(p)))?;
            let unit = match unit_pointer.as_deref().and_then(|p| doc.pointer(p)) {
                Some(Value::String(s)) => Some(s.clone()),
                Some(Value::Null) | None => None,
                Some(o) => return Err(DecodeError::BadUnit(o.to_string())),
            };
            RawScalar {
                value,
                ts_ms,
                quality,
                unit,
            }
        }
    };
    if !raw.value.is_finite() {
        return Err(DecodeError::NotFinite("(value)".into()));
    }
    Ok(raw)
}

/// Decodes a scalar input (temperature, pressure, steam ratio) to fixed units.
pub fn decode_scalar(
    payload: &[u8],
    decoder: &ScalarDecoder,
    unit: &ScalarUnit,
    atmosphere_bar: f64,
    arrival_ms: i64,
) -> Result<ScalarReading, DecodeError> {
    let raw = read_scalar(payload, decoder, arrival_ms)?;
    Ok(ScalarReading {
        ts_ms: raw.ts_ms,
        value: convert(raw.value, unit, raw.unit.as_deref(), atmosphere_bar)?,
        quality: raw.quality,
    })
}

/// Decodes one component of a per-component analyser: a mole fraction. Negative values
/// are kept: the monitor reports them as bad data on the result.
pub fn decode_component(
    payload: &[u8],
    decoder: &ScalarDecoder,
    default_unit: CompositionUnit,
    arrival_ms: i64,
) -> Result<ScalarReading, DecodeError> {
    let raw = read_scalar(payload, decoder, arrival_ms)?;
    let unit = match raw.unit.as_deref() {
        Some(u) => CompositionUnit::parse(u).map_err(|_| DecodeError::BadUnit(u.to_string()))?,
        None => default_unit,
    };
    Ok(ScalarReading {
        ts_ms: raw.ts_ms,
        value: raw.value * unit.fraction_per_unit(),
        quality: raw.quality,
    })
}

/// Decodes a multi-component analyser message into mole fractions per configured component.
pub fn decode_analysis(
    payload: &[u8],
    reactor: &ReactorSettings,
    arrival_ms: i64,
) -> Result<AnalysisReading, DecodeError> {
    let c = &reactor.spec.composition;
    let CompositionSource::Analyser {
        values_pointer,
        ts_pointer,
        unit_pointer,
        basis_pointer,
        quality_pointer,
        ..
    } = &reactor.wiring.composition
    else {
        return Err(DecodeError::Missing("(analyser source)".into()));
    };
    let doc = json(payload)?;
    let values = doc
        .pointer(values_pointer)
        .and_then(Value::as_object)
        .ok_or_else(|| DecodeError::Missing(values_pointer.clone()))?;
    let unit = match unit_pointer.as_deref().and_then(|p| doc.pointer(p)) {
        Some(Value::String(s)) => {
            CompositionUnit::parse(s).map_err(|_| DecodeError::BadUnit(s.clone()))?
        }
        _ => c.unit,
    };
    let basis = match basis_pointer.as_deref().and_then(|p| doc.pointer(p)) {
        Some(Value::String(s)) => {
            Some(Basis::parse(s).ok_or_else(|| DecodeError::BadBasis(s.clone()))?)
        }
        _ => None,
    };
    let ts = match ts_pointer.as_deref().and_then(|p| doc.pointer(p)) {
        Some(t) => timestamp(t)?,
        None => arrival_ms,
    };
    let q = quality(quality_pointer.as_deref().and_then(|p| doc.pointer(p)))?;
    let mut out = Vec::with_capacity(c.components.len());
    for name in &c.components {
        let v = values
            .iter()
            .find(|(k, _)| k.eq_ignore_ascii_case(name))
            .map(|(_, v)| v);
        out.push(match v {
            None | Some(Value::Null) => None,
            // A non-number is kept as NaN so the monitor names the component as bad.
            Some(Value::Number(n)) => Some(
                n.as_f64()
                    .map_or(f64::NAN, |x| x * unit.fraction_per_unit()),
            ),
            Some(Value::String(s)) => Some(
                s.trim()
                    .parse::<f64>()
                    .map_or(f64::NAN, |x| x * unit.fraction_per_unit()),
            ),
            Some(_) => Some(f64::NAN),
        });
    }
    Ok(AnalysisReading {
        ts_ms: ts,
        values: out,
        basis,
        quality: q,
    })
}

/// Mole fractions (or φ) by species name, as a JSON object; `null` when there are none.
struct BySpecies<'a>(&'a [String], &'a [f64]);

impl Serialize for BySpecies<'_> {
    fn serialize<S: serde::Serializer>(&self, ser: S) -> Result<S::Ok, S::Error> {
        if self.0.len() != self.1.len() {
            return ser.serialize_none();
        }
        let mut m = ser.serialize_map(Some(self.0.len()))?;
        for (n, v) in self.0.iter().zip(self.1) {
            m.serialize_entry(n, &finite(*v))?;
        }
        m.end()
    }
}

/// Non-finite numbers go out as `null` (JSON has no NaN), never as a made-up value.
pub(crate) fn finite(x: f64) -> Option<f64> {
    x.is_finite().then_some(x)
}

pub(crate) fn finite_opt(x: Option<f64>) -> Option<f64> {
    x.and_then(finite)
}

#[derive(Serialize)]
struct ReasonOut<'a> {
    code: &'static str,
    severity: &'static str,
    message: &'a str,
}

#[derive(Serialize)]
struct InputOut<'a> {
    tag: &'a str,
    value: Option<f64>,
    unit: &'static str,
    age_s: Option<f64>,
    used: bool,
}

/// Each input's share of the approach's ± (K), by input name.
#[derive(Serialize)]
struct BudgetOut {
    composition: Option<f64>,
    steam_ratio: Option<f64>,
    pressure: Option<f64>,
    temperature: Option<f64>,
}

impl From<&crate::approach::UncertaintyBudget> for BudgetOut {
    fn from(b: &crate::approach::UncertaintyBudget) -> Self {
        Self {
            composition: finite(b.composition_k),
            steam_ratio: finite(b.steam_ratio_k),
            pressure: finite(b.pressure_k),
            temperature: finite(b.temperature_k),
        }
    }
}

#[derive(Serialize)]
struct ReactionOut<'a> {
    reaction: &'a str,
    k_source: &'static str,
    ln_k: Option<f64>,
    ln_q: Option<f64>,
    q_over_k: Option<f64>,
    direction: &'static str,
    affinity_j_per_mol: Option<f64>,
    delta_h_j_per_mol: Option<f64>,
    endothermic: bool,
    equilibrium_temperature_k: Option<f64>,
    approach_k: Option<f64>,
    approach_uncertainty_k: Option<f64>,
    uncertainty_budget_k: Option<BudgetOut>,
    flags: Vec<&'static str>,
}

/// The figure a screen shows first: the approach, or (where the approach is not
/// meaningful) the key component's measured slip on the analyser's basis.
#[derive(Serialize)]
struct HeadlineOut {
    figure: &'static str,
    value: Option<f64>,
    unit: &'static str,
    text: String,
}

/// The bed temperature rise check (methanator breakthrough).
#[derive(Serialize)]
struct BedRiseOut {
    inlet_temperature_k: Option<f64>,
    rise_k: Option<f64>,
    expected_rise_k: Option<f64>,
    excess_rise_k: Option<f64>,
    rise_per_mol_pct_co_k: Option<f64>,
    rise_per_mol_pct_co2_k: Option<f64>,
    implied_inlet_co_equivalent_mol_pct: Option<f64>,
}

impl From<&crate::bedrise::BedRise> for BedRiseOut {
    fn from(b: &crate::bedrise::BedRise) -> Self {
        Self {
            inlet_temperature_k: finite(b.inlet_k),
            rise_k: finite(b.rise_k),
            expected_rise_k: finite_opt(b.expected_k),
            excess_rise_k: finite_opt(b.excess_k()),
            rise_per_mol_pct_co_k: finite(b.per_percent.co_k),
            rise_per_mol_pct_co2_k: finite(b.per_percent.co2_k),
            implied_inlet_co_equivalent_mol_pct: finite(b.implied_co_equivalent_mol_pct),
        }
    }
}

/// The advisory notice every result and status message carries.
pub const ADVISORY_SHORT: &str = "advisory only: not a safety function; the plant's alarm and safety systems, local codes and licensed engineering practice govern";

/// The key component's wet mole fraction on the analyser's basis.
fn key_on_basis(r: &ReactorSettings, wet: &[f64], y: Option<f64>) -> Option<f64> {
    let water = r
        .spec
        .model
        .names()
        .iter()
        .position(|n| n == "H2O")
        .and_then(|i| wet.get(i).copied());
    y.map(|y| crate::monitor::on_basis(y, water, r.spec.composition.basis))
}

fn headline(
    r: &ReactorSettings,
    e: &Evaluation,
    key: &str,
    approach: Option<(f64, Option<f64>)>,
    key_basis: Option<f64>,
    dl: Option<f64>,
) -> HeadlineOut {
    use crate::units::fmt_num;
    if e.quality == crate::monitor::Quality::Bad {
        return HeadlineOut {
            figure: "none",
            value: None,
            unit: "",
            text: "no figure: the result is bad (see reasons)".into(),
        };
    }
    if e.approach_not_meaningful {
        let (value, unit) = match key_basis {
            Some(y) if y < 1e-3 => (Some(y * 1e6), "ppm"),
            Some(y) => (Some(y * 100.0), "mol%"),
            None => (None, ""),
        };
        let basis = r.spec.composition.basis.as_str();
        let dl_text = dl.map_or(String::new(), |d| {
            format!(", detection limit {}", crate::monitor::fmt_fraction(d))
        });
        return HeadlineOut {
            figure: "key-measured",
            value: value.and_then(finite),
            unit,
            text: match value {
                Some(v) => format!(
                    "{key} slip {} {unit} {basis}{dl_text}; approach not meaningful (equilibrium below detection)",
                    fmt_num(v, 3)
                ),
                None => format!("{key} slip not measured"),
            },
        };
    }
    match approach {
        Some((a, u)) => HeadlineOut {
            figure: "approach",
            value: finite(a),
            unit: "K",
            text: format!(
                "approach {}{} K ({})",
                fmt_num(a, 3),
                u.map_or(String::new(), |u| format!(" ± {}", fmt_num(u, 2))),
                if a >= 0.0 {
                    "short of equilibrium"
                } else {
                    "past equilibrium"
                }
            ),
        },
        None => HeadlineOut {
            figure: "none",
            value: None,
            unit: "",
            text: "no approach (see reasons)".into(),
        },
    }
}

/// The result payload, serialised straight from borrowed data.
#[derive(Serialize)]
struct ResultOut<'a> {
    schema: &'static str,
    reactor: &'a str,
    name: &'a str,
    analysis_ts: String,
    sample_ts: String,
    evaluated_at: String,
    quality: &'static str,
    reasons: Vec<ReasonOut<'a>>,
    k_source: Option<&'static str>,
    eos: &'static str,
    ln_k: Option<f64>,
    ln_q: Option<f64>,
    q_over_k: Option<f64>,
    direction: Option<&'static str>,
    affinity_j_per_mol: Option<f64>,
    equilibrium_temperature_k: Option<f64>,
    approach_k: Option<f64>,
    approach_uncertainty_k: Option<f64>,
    uncertainty_budget_k: Option<BudgetOut>,
    reactions: Vec<ReactionOut<'a>>,
    temperature_k: Option<f64>,
    temperature_spread_k: Option<f64>,
    pressure_bar: Option<f64>,
    steam_ratio: Option<f64>,
    inputs: Vec<InputOut<'a>>,
    basis: &'static str,
    key_component: &'a str,
    key_measured_mole_fraction: Option<f64>,
    key_equilibrium_mole_fraction: Option<f64>,
    /// The key component on the analyser's basis (dry if it analyses dry), with the
    /// analyser's detection limit for it.
    key_measured_on_basis_mole_fraction: Option<f64>,
    key_equilibrium_on_basis_mole_fraction: Option<f64>,
    key_detection_limit_mole_fraction: Option<f64>,
    headline: HeadlineOut,
    #[serde(skip_serializing_if = "Option::is_none")]
    bed_rise: Option<BedRiseOut>,
    advisory: &'static str,
    mole_fractions: BySpecies<'a>,
    equilibrium_mole_fractions: BySpecies<'a>,
    fugacity_coefficients: BySpecies<'a>,
    compressibility_factor: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    drift: Option<super::watch_payload::DriftOut>,
}

/// The result JSON for one evaluation (published retained on `<prefix>/<reactor>/result`).
pub fn encode_result(
    r: &ReactorSettings,
    db: &SpeciesDb,
    e: &Evaluation,
    evaluated_at_ms: i64,
    drift: Option<&crate::monitor::watch::DriftFigures>,
) -> String {
    let names = r.spec.model.names();
    let reactions = r
        .spec
        .model
        .reactions()
        .iter()
        .zip(&e.reactions)
        .zip(&r.spec.reaction_labels)
        .map(|((t, a), label)| ReactionOut {
            reaction: label,
            k_source: t.k.id().as_str(),
            ln_k: finite(a.ln_k),
            ln_q: finite(a.ln_q),
            q_over_k: finite(a.q_over_k),
            direction: a.direction.as_str(),
            affinity_j_per_mol: finite(a.affinity_j_per_mol),
            delta_h_j_per_mol: finite(a.delta_h_j_per_mol),
            endothermic: a.endothermic,
            equilibrium_temperature_k: finite_opt(a.equilibrium_temperature_k),
            approach_k: finite_opt(a.approach_k),
            approach_uncertainty_k: finite_opt(a.approach_uncertainty_k),
            uncertainty_budget_k: a.uncertainty_budget_k.as_ref().map(BudgetOut::from),
            flags: a.flags.names().collect(),
        })
        .collect();
    let first = e.reactions.first();
    // A figure is published only from a usable analysis: bad results carry no approach.
    let usable = first.filter(|_| e.quality != crate::monitor::Quality::Bad);
    let key_name = &db.get(r.spec.key_component).name;
    let key_index = r
        .spec
        .composition
        .components
        .iter()
        .position(|c| c == key_name);
    let key_dl = key_index.and_then(|i| {
        r.spec
            .composition
            .detection_limits
            .get(i)
            .copied()
            .flatten()
    });
    let key_basis = e.key_measured_on_basis;
    let approach =
        usable.and_then(|a| finite_opt(a.approach_k).map(|x| (x, a.approach_uncertainty_k)));
    let out = ResultOut {
        schema: RESULT_SCHEMA,
        reactor: &r.spec.id,
        name: &r.spec.name,
        analysis_ts: format_rfc3339(e.analysis_ts_ms),
        sample_ts: format_rfc3339(e.sample_ts_ms),
        evaluated_at: format_rfc3339(evaluated_at_ms),
        quality: e.quality.as_str(),
        reasons: e
            .reasons
            .iter()
            .map(|x| ReasonOut {
                code: x.code,
                severity: x.severity.as_str(),
                message: &x.message,
            })
            .collect(),
        k_source: r.spec.model.reactions().first().map(|t| t.k.id().as_str()),
        eos: r.spec.eos.as_str(),
        ln_k: first.and_then(|a| finite(a.ln_k)),
        ln_q: first.and_then(|a| finite(a.ln_q)),
        q_over_k: first.and_then(|a| finite(a.q_over_k)),
        direction: first.map(|a| a.direction.as_str()),
        affinity_j_per_mol: first.and_then(|a| finite(a.affinity_j_per_mol)),
        equilibrium_temperature_k: first.and_then(|a| finite_opt(a.equilibrium_temperature_k)),
        approach_k: usable.and_then(|a| finite_opt(a.approach_k)),
        approach_uncertainty_k: usable.and_then(|a| finite_opt(a.approach_uncertainty_k)),
        uncertainty_budget_k: usable
            .and_then(|a| a.uncertainty_budget_k.as_ref())
            .map(BudgetOut::from),
        reactions,
        temperature_k: finite_opt(e.temperature_k),
        temperature_spread_k: finite_opt(e.temperature_spread_k),
        pressure_bar: finite_opt(e.pressure_bar),
        steam_ratio: finite_opt(e.steam_ratio),
        inputs: e
            .inputs
            .iter()
            .map(|i| InputOut {
                tag: &i.tag,
                value: finite_opt(i.value),
                unit: i.unit,
                age_s: i.age_ms.map(|a| a as f64 / 1000.0),
                used: i.used,
            })
            .collect(),
        basis: r.spec.composition.basis.as_str(),
        key_component: key_name,
        key_measured_mole_fraction: finite_opt(e.key_measured),
        key_equilibrium_mole_fraction: finite_opt(e.key_equilibrium),
        key_measured_on_basis_mole_fraction: finite_opt(key_basis),
        key_equilibrium_on_basis_mole_fraction: finite_opt(key_on_basis(
            r,
            &e.equilibrium_mole_fractions,
            e.key_equilibrium,
        )),
        key_detection_limit_mole_fraction: key_dl,
        headline: headline(r, e, key_name, approach, key_basis, key_dl),
        bed_rise: e.bed_rise.as_ref().map(BedRiseOut::from),
        advisory: ADVISORY_SHORT,
        mole_fractions: BySpecies(names, &e.mole_fractions),
        equilibrium_mole_fractions: BySpecies(names, &e.equilibrium_mole_fractions),
        fugacity_coefficients: BySpecies(names, &e.fugacity_coefficients),
        compressibility_factor: finite_opt(e.compressibility_factor),
        drift: drift.map(super::watch_payload::DriftOut::from),
    };
    // Serialising plain data to a String cannot fail; an empty object would be a bug.
    serde_json::to_string(&out).unwrap_or_else(|_| "{}".to_string())
}

/// Adds the journal sequence number and the late mark at the front of a payload object.
pub fn with_delivery(payload: &str, seq: u64, late: bool) -> String {
    let body = payload.trim();
    let rest = body.strip_prefix('{').unwrap_or(body);
    let sep = if rest.trim_start().starts_with('}') {
        ""
    } else {
        ","
    };
    format!("{{\"seq\":{seq},\"late\":{late}{sep}{rest}")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn scalars() {
        // Invented messages; conversions per NIST SP 811 (0 degC = 273.15 K; 1 atm = 1.01325 bar).
        let json_dec = ScalarDecoder::Json {
            value_pointer: "/value".into(),
            ts_pointer: Some("/ts".into()),
            quality_pointer: Some("/quality".into()),
            unit_pointer: Some("/unit".into()),
        };
        let t = ScalarUnit::Temperature(TemperatureUnit::Celsius);
        let r = decode_scalar(
            br#"{"ts":"2026-12-01T00:00:00Z","value":220.0,"unit":"degC","quality":"good"}"#,
            &json_dec,
            &t,
            1.01325,
            5,
        )
        .unwrap();
        assert_eq!(r.ts_ms, 1_796_083_200_000);
        assert!((r.value - 493.15).abs() < 1e-12);
        let r = decode_scalar(br#"{"value":"500","unit":"K"}"#, &json_dec, &t, 1.01325, 7).unwrap();
        assert_eq!((r.ts_ms, r.value), (7, 500.0));
        let p = ScalarUnit::Pressure(PressureUnit::parse("barg").unwrap());
        let r = decode_scalar(b"29", &ScalarDecoder::Number, &p, 1.01325, 9).unwrap();
        assert!((r.value - 30.01325).abs() < 1e-12);
        for (bad, reason) in [
            (&b"{\"value\":\"x\"}"[..], "not_numeric"),
            (b"{\"ts\":\"yesterday\",\"value\":1}", "bad_timestamp"),
            (b"{\"value\":1,\"unit\":\"barg\"}", "bad_unit"),
            (b"{\"value\":1,\"quality\":\"meh\"}", "bad_quality"),
            (b"not json", "not_json"),
            (b"{\"other\":1}", "missing_field"),
            (b"{\"value\":-300,\"unit\":\"degC\"}", "not_physical"),
        ] {
            let e = decode_scalar(bad, &json_dec, &t, 1.01325, 0).unwrap_err();
            assert_eq!(e.reason(), reason, "{e}");
        }
        assert_eq!(
            decode_scalar(b"NaN", &ScalarDecoder::Number, &p, 1.01325, 0)
                .unwrap_err()
                .reason(),
            "not_finite"
        );
        assert_eq!(
            decode_scalar(b"abc", &ScalarDecoder::Number, &p, 1.01325, 0)
                .unwrap_err()
                .reason(),
            "not_a_number"
        );
    }

    #[test]
    fn delivery_prefix() {
        assert_eq!(
            with_delivery("{\"a\":1}", 7, false),
            "{\"seq\":7,\"late\":false,\"a\":1}"
        );
        assert_eq!(with_delivery("{}", 8, true), "{\"seq\":8,\"late\":true}");
        let v: Value = serde_json::from_str(&with_delivery("{ \"a\" : [1] }", 9, true)).unwrap();
        assert_eq!(v["seq"], 9);
    }

    #[test]
    fn result_carries_the_uncertainty_budget() {
        // Demo lts1 (config/demo-plant.toml, invented) with the DOMAIN §8 LTS gas at
        // 220 °C: the shares by input add up in quadrature to approach_uncertainty_k.
        use crate::monitor::{Input, Outcome, ReactorMonitor};
        let s = crate::config::from_str(
            include_str!("../../config/demo-plant.toml"),
            std::path::Path::new("."),
        )
        .unwrap();
        let rs = s.reactors.iter().find(|r| r.spec.id == "lts1").unwrap();
        let r = &rs.spec;
        let mut m = ReactorMonitor::new(r);
        let at = 1_796_083_200_000;
        let sc = |v| ScalarReading {
            ts_ms: at,
            value: v,
            quality: SourceQuality::Good,
        };
        for i in 0..r.temperatures.len() {
            m.accept(r, &s.species, Input::Temperature(i, sc(493.15)), at);
        }
        m.accept(r, &s.species, Input::Pressure(sc(30.01325)), at);
        m.accept(r, &s.species, Input::SteamRatio(sc(0.36312)), at);
        let lag = i64::try_from(r.composition.lag.as_millis()).unwrap();
        let v = [61.0536, 18.98637, 0.28697, 19.38096, 0.2921, 0.0];
        let a = AnalysisReading {
            ts_ms: at + lag,
            values: v.iter().map(|x| Some(x / 100.0)).collect(),
            basis: Some(Basis::Dry),
            quality: SourceQuality::Good,
        };
        let Outcome::Evaluated(e) = m.accept(r, &s.species, Input::Analysis(a), at + lag) else {
            panic!("no evaluation");
        };
        let out: Value =
            serde_json::from_str(&encode_result(rs, &s.species, &e, at, None)).unwrap();
        let u = out["approach_uncertainty_k"].as_f64().unwrap();
        for b in [
            &out["uncertainty_budget_k"],
            &out["reactions"][0]["uncertainty_budget_k"],
        ] {
            let sq: f64 = ["composition", "steam_ratio", "pressure", "temperature"]
                .iter()
                .map(|k| b[*k].as_f64().unwrap().powi(2))
                .sum();
            assert!((sq - u * u).abs() < 1e-9, "{b} vs {u}");
            assert_eq!(b["temperature"], 2.0, "demo lts1 thermocouple ±2 K");
        }
    }
}
