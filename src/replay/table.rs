//! `eqwatch replay --format csv`: one CSV per reactor for a spreadsheet, one row per
//! result. The columns are the flat figures of [`crate::wire::metrics`] (the names of
//! the metrics message, units in the names) between the sample time and quality at the
//! front and the drift exclusion, end-of-run date and reason codes at the back. Each row
//! is read from the result message itself (by the JSON Pointers of the flat view), so
//! the CSV says what the JSON lines say, at a fixed precision per column.
//!
//! Cells: RFC 3339 UTC times, empty for a missing figure, reason codes joined with `;`,
//! quoted per RFC 4180 where a cell holds a comma, a quote or a line break. Lines end
//! in CRLF (RFC 4180 §2).

use std::fmt::Write as _;

use serde_json::Value;

use crate::config::{ReactorSettings, Settings};
use crate::wire::metrics::{Field, Precision, When, columns};

/// The text columns before and after the figures.
const FRONT: [&str; 2] = ["sample_ts", "quality"];
const BACK: [&str; 3] = ["excluded_because", "end_of_run_date", "reasons"];

/// One reactor's CSV: the topic of its results and its figure columns.
#[derive(Debug)]
pub(super) struct Table {
    pub(super) reactor: String,
    pub(super) result_topic: String,
    columns: Vec<(String, String, Field)>,
}

impl Table {
    pub(super) fn new(settings: &Settings, r: &ReactorSettings) -> Self {
        Self {
            reactor: r.spec.id.clone(),
            result_topic: format!("{}/{}/result", settings.topic_prefix, r.spec.id),
            columns: columns(r),
        }
    }

    /// The header line (CRLF at the end).
    pub(super) fn header(&self) -> String {
        let names: Vec<&str> = FRONT
            .iter()
            .copied()
            .chain(self.columns.iter().map(|(n, _, _)| n.as_str()))
            .chain(BACK.iter().copied())
            .collect();
        format!("{}\r\n", names.join(","))
    }

    /// The row of one result payload, appended to `out`; an error when the payload is
    /// not a result object (a bug, never the plant's data).
    pub(super) fn row(&self, payload: &str, out: &mut Vec<u8>) -> Result<(), String> {
        let v: Value = serde_json::from_str(payload)
            .map_err(|e| format!("a result for {} is not JSON: {e}", self.result_topic))?;
        let text = |p: &str| v.pointer(p).and_then(Value::as_str).unwrap_or("");
        let sample_ts = text("/sample_ts");
        if sample_ts.is_empty() {
            return Err(format!(
                "a result for {} has no sample_ts",
                self.result_topic
            ));
        }
        let quality = text("/quality");
        let mut line = String::with_capacity(256);
        cell(&mut line, sample_ts);
        line.push(',');
        cell(&mut line, quality);
        for (_, pointer, f) in &self.columns {
            line.push(',');
            let x = v.pointer(pointer).and_then(Value::as_f64);
            if let Some(x) = x.filter(|x| x.is_finite())
                && (f.when == When::Always || quality != "bad")
            {
                number(&mut line, x, f.precision);
            }
        }
        line.push(',');
        cell(&mut line, text("/drift/excluded_because"));
        line.push(',');
        cell(&mut line, text("/drift/end_of_run/date"));
        line.push(',');
        let codes: Vec<&str> = v
            .get("reasons")
            .and_then(Value::as_array)
            .map(|a| a.iter().filter_map(|r| r["code"].as_str()).collect())
            .unwrap_or_default();
        cell(&mut line, &codes.join(";"));
        line.push_str("\r\n");
        out.extend_from_slice(line.as_bytes());
        Ok(())
    }
}

/// One text cell: as it is, or quoted (quotes doubled) when it holds a comma, a quote
/// or a line break (RFC 4180 §2.6, §2.7).
fn cell(line: &mut String, text: &str) {
    if text.contains([',', '"', '\r', '\n']) {
        line.push('"');
        line.push_str(&text.replace('"', "\"\""));
        line.push('"');
    } else {
        line.push_str(text);
    }
}

/// A finite number at the column's precision; `-0` is written `0`.
fn number(line: &mut String, x: f64, p: Precision) {
    let decimals = match p {
        Precision::Decimals(d) => d,
        Precision::Significant(n) => {
            let mag = if x == 0.0 {
                0
            } else {
                x.abs().log10().floor() as i32
            };
            if !(-6..9).contains(&mag) {
                // Very small or large: scientific, which spreadsheets read too.
                let _ = write!(line, "{:.*e}", n.saturating_sub(1), x);
                return;
            }
            (n as i32 - 1 - mag).max(0) as usize
        }
    };
    let start = line.len();
    let _ = write!(line, "{x:.decimals$}");
    let written = &line[start..];
    if written.starts_with('-') && written[1..].bytes().all(|b| b == b'0' || b == b'.') {
        line.remove(start);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn demo() -> Settings {
        crate::config::from_str(
            include_str!("../../config/demo-plant.toml"),
            std::path::Path::new("."),
        )
        .unwrap()
    }

    fn table(s: &Settings, id: &str) -> Table {
        Table::new(s, s.reactors.iter().find(|r| r.spec.id == id).unwrap())
    }

    #[test]
    fn the_header_has_units_in_its_names() {
        let s = demo();
        // Demo hts1: one reaction, no bed profile (config/demo-plant.toml).
        assert_eq!(
            table(&s, "hts1").header(),
            "sample_ts,quality,approach_k,approach_uncertainty_k,equilibrium_temperature_k,\
             q_over_k,ln_q,ln_k,affinity_j_per_mol,temperature_k,pressure_bar_abs,steam_ratio,\
             key_measured_mole_fraction,key_equilibrium_mole_fraction,baseline_k,ewma_k,cusum_k,\
             trend_k_per_day,excluded_because,end_of_run_date,reasons\r\n"
        );
        // Demo lts1 has a bed profile, the normalised approach and the reconciliation;
        // demo ref1 two reactions.
        assert!(table(&s, "lts1").header().contains(
            ",trend_k_per_day,bed_rise_k,wabt_k,front_depth_m,front_rate_m_per_day,\
             normalised_approach_k,predicted_approach_k,reconciled_approach_k,\
             global_test_statistic,global_test_critical,excluded_because,"
        ));
        let ref1 = table(&s, "ref1").header();
        assert!(ref1.contains(",approach_k_0,") && ref1.contains(",affinity_j_per_mol_1,"));
    }

    #[test]
    fn a_row_has_fixed_precision_empty_cells_and_joined_reasons() {
        let s = demo();
        let t = table(&s, "hts1");
        // An invented result payload with the fields a row reads; the rest are absent.
        let payload = r#"{"sample_ts":"2026-12-01T00:00:00Z","quality":"uncertain",
            "approach_k":12.34567,"approach_uncertainty_k":null,"q_over_k":0.000123456789,
            "ln_q":-1.5,"ln_k":-0.0000001,"temperature_k":703.15,"pressure_bar":31.01326,
            "key_measured_mole_fraction":3.2e-9,
            "drift":{"excluded_because":"transient","end_of_run":{"date":"2027-03-01T00:00:00Z"}},
            "reasons":[{"code":"transient"},{"code":"stale_temperature"}]}"#;
        let mut out = Vec::new();
        t.row(payload, &mut out).unwrap();
        let line = String::from_utf8(out).unwrap();
        // Expected cells derived from the payload above at each column's precision;
        // -0.0000001 at 5 decimals is written 0.00000, without the sign.
        assert_eq!(
            line,
            "2026-12-01T00:00:00Z,uncertain,12.346,,,0.000123457,-1.50000,0.00000,,703.15,\
             31.0133,,3.20000e-9,,,,,,transient,2027-03-01T00:00:00Z,transient;stale_temperature\r\n"
        );
        assert_eq!(
            line.split(',').count(),
            t.header().split(',').count(),
            "as many cells as columns"
        );
    }

    #[test]
    fn a_bad_row_has_no_approach_even_where_the_payload_has_one() {
        let s = demo();
        let t = table(&s, "ref1");
        // Invented: a bad result whose first reaction still carries an approach.
        let payload = r#"{"sample_ts":"2026-12-01T00:00:00Z","quality":"bad",
            "reactions":[{"approach_k":5.0,"ln_q":1.0}],"reasons":[{"code":"analyser_stuck"}]}"#;
        let mut out = Vec::new();
        t.row(payload, &mut out).unwrap();
        let line = String::from_utf8(out).unwrap();
        let header = t.header();
        let names: Vec<&str> = header.trim_end().split(',').collect();
        let cells: Vec<&str> = line.trim_end().split(',').collect();
        let at = |n: &str| cells[names.iter().position(|x| *x == n).unwrap()];
        assert_eq!(at("approach_k_0"), "");
        assert_eq!(at("ln_q_0"), "1.00000");
        assert_eq!(at("reasons"), "analyser_stuck");
    }

    #[test]
    fn cells_are_quoted_per_rfc_4180_where_needed() {
        let mut s = String::new();
        for t in ["plain", "a,b", "say \"hi\"", "two\nlines", ""] {
            cell(&mut s, t);
            s.push('|');
        }
        // Invented cells; expected per RFC 4180 §2.6-2.7.
        assert_eq!(s, "plain|\"a,b\"|\"say \"\"hi\"\"\"|\"two\nlines\"||");
    }

    #[test]
    fn a_payload_that_is_not_a_result_is_an_error_naming_the_topic() {
        let s = demo();
        let t = table(&s, "hts1");
        let mut out = Vec::new();
        let e = t.row("not json", &mut out).unwrap_err();
        assert!(e.contains("eqwatch/baw1/hts1/result"), "{e}");
        let e = t.row("{}", &mut out).unwrap_err();
        assert!(e.contains("no sample_ts"), "{e}");
        assert!(out.is_empty());
    }
}
