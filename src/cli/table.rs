//! Any JSON answer as a plain-text table (the default output of the calculator
//! commands and `check`).

use serde_json::Value;

/// A readable two-column view of a JSON result.
pub fn table(v: &Value) -> String {
    let mut out = String::new();
    if let Value::Object(m) = v {
        if let Some(Value::Array(list)) = m.get("species") {
            out.push_str(&format!(
                "{:<10} {:<10} {:>8} {:>8} {:>4}  {}\n",
                "species", "elements", "T min K", "T max K", "PR", "source"
            ));
            for s in list {
                out.push_str(&format!(
                    "{:<10} {:<10} {:>8.0} {:>8.0} {:>4}  {}\n",
                    s["name"].as_str().unwrap_or(""),
                    s["elements"].as_str().unwrap_or(""),
                    s["t_min_k"].as_f64().unwrap_or(f64::NAN),
                    s["t_max_k"].as_f64().unwrap_or(f64::NAN),
                    if s["critical_constants"].is_null() {
                        "-"
                    } else {
                        "yes"
                    },
                    s["source"].as_str().unwrap_or("")
                ));
            }
            return out;
        }
        let width = m.keys().map(|k| k.len()).max().unwrap_or(0);
        for (k, val) in m {
            let text = match val {
                Value::Number(n) => {
                    let x = n.as_f64().unwrap_or(f64::NAN);
                    if x != 0.0 && (x.abs() < 1e-3 || x.abs() >= 1e7) {
                        format!("{x:.6e}")
                    } else {
                        format!("{x:.6}")
                    }
                }
                Value::String(s) => s.clone(),
                Value::Null => "-".into(),
                Value::Object(o) => o
                    .iter()
                    .map(|(a, b)| match b.as_f64() {
                        Some(x) if x != 0.0 && x.abs() < 1e-3 => format!("{a}={x:.4e}"),
                        Some(x) => format!("{a}={x:.6}"),
                        None => format!("{a}={b}"),
                    })
                    .collect::<Vec<_>>()
                    .join("  "),
                Value::Array(a) if a.is_empty() => "(none)".into(),
                other => other.to_string(),
            };
            out.push_str(&format!("{k:<width$}  {text}\n"));
        }
    }
    out
}
