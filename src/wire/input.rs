//! Input messages: bare numbers, JSON with JSON Pointers and multi-component analyser
//! messages decoded into the core's readings (values in K, bar absolute and mole
//! fraction, times in epoch ms). The core never sees JSON; these shapes are this
//! file's alone.

use serde_json::Value;
use thiserror::Error;

use crate::composition::Basis;
use crate::config::{CompositionSource, ReactorSettings, ScalarDecoder, ScalarUnit};
use crate::monitor::{AnalysisReading, ScalarReading, SourceQuality};
use crate::timefmt::parse_rfc3339;
use crate::units::{CompositionUnit, PressureUnit, TemperatureUnit};

/// Text from a message as it goes into an error or a log line: at most
/// [`ECHO_CHARS`] characters, then how long it really was, so a hostile 200 KB unit
/// string costs a short line.
pub(crate) fn echo(text: &str) -> String {
    match text.char_indices().nth(ECHO_CHARS) {
        None => text.to_string(),
        Some((cut, _)) => format!("{}… ({} bytes)", &text[..cut], text.len()),
    }
}

/// Characters of input text echoed in messages.
pub(crate) const ECHO_CHARS: usize = 64;

/// Why a message could not be decoded. `reason()` is the metrics label.
#[derive(Debug, Clone, PartialEq, Error)]
pub(crate) enum DecodeError {
    #[error("payload is not UTF-8 text")]
    NotText,
    #[error("payload `{}` is not a number", echo(.0))]
    NotANumber(String),
    #[error("payload is not JSON: {}", echo(.0))]
    NotJson(String),
    #[error("JSON Pointer {} finds nothing in the message", echo(.0))]
    Missing(String),
    #[error("JSON Pointer {} does not point at a number", echo(.0))]
    NotNumeric(String),
    #[error("value at {} is not finite", echo(.0))]
    NotFinite(String),
    #[error("timestamp `{}` is neither RFC 3339 nor epoch milliseconds", echo(.0))]
    BadTimestamp(String),
    #[error("unit `{}` is unknown or of the wrong kind for this input", echo(.0))]
    BadUnit(String),
    #[error("quality `{}` is not good, uncertain or bad", echo(.0))]
    BadQuality(String),
    #[error("basis `{}` is not wet or dry", echo(.0))]
    BadBasis(String),
    #[error("{}", echo(.0))]
    NotPhysical(String),
}

impl DecodeError {
    pub(crate) const REASONS: [&'static str; 11] = [
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

    pub(crate) fn reason_index(&self) -> usize {
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

    pub(crate) fn reason(&self) -> &'static str {
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
pub(crate) fn timestamp(v: &Value) -> Result<i64, DecodeError> {
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
        ScalarUnit::Flow(cfg) => {
            let u = match unit_text {
                Some(t) => crate::units::FlowUnit::parse(t).map_err(|_| bad(t))?,
                None => *cfg,
            };
            u.to_kmol_h(value)
                .map_err(|e| DecodeError::NotPhysical(e.to_string()))
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
pub(crate) fn decode_scalar(
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
pub(crate) fn decode_component(
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
pub(crate) fn decode_analysis(
    payload: &[u8],
    reactor: &ReactorSettings,
    arrival_ms: i64,
) -> Result<AnalysisReading, DecodeError> {
    decode_analysis_of(
        payload,
        &reactor.spec.composition,
        &reactor.wiring.composition,
        arrival_ms,
    )
}

/// The inlet analysis of a reconciliation (the same message shape as the outlet's).
pub(crate) fn decode_inlet_analysis(
    payload: &[u8],
    reactor: &ReactorSettings,
    arrival_ms: i64,
) -> Result<AnalysisReading, DecodeError> {
    match (&reactor.spec.reconcile, &reactor.wiring.inlet_composition) {
        (Some(rs), Some(source)) => decode_analysis_of(payload, &rs.inlet, source, arrival_ms),
        _ => Err(DecodeError::Missing("(inlet analyser source)".into())),
    }
}

fn decode_analysis_of(
    payload: &[u8],
    c: &crate::monitor::spec::AnalysisSpec,
    source: &CompositionSource,
    arrival_ms: i64,
) -> Result<AnalysisReading, DecodeError> {
    let CompositionSource::Analyser {
        values_pointer,
        ts_pointer,
        unit_pointer,
        basis_pointer,
        quality_pointer,
        ..
    } = source
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
    fn echoed_input_is_cut_short() {
        // Issue 10 §1, reproduced first: a 200 KB unit string gave a 200 KB log line.
        let long = "x".repeat(200_000);
        let e = DecodeError::BadUnit(long.clone());
        let text = e.to_string();
        assert!(text.len() < 200, "{} bytes", text.len());
        assert!(text.contains("(200000 bytes)"), "{text}");
        assert_eq!(echo("degC"), "degC");
        // Multi-byte text is cut on a character boundary.
        let degrees = "°".repeat(100);
        assert!(echo(&degrees).starts_with(&"°".repeat(ECHO_CHARS)));
    }
}
