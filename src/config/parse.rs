//! TOML text to [`RawConfig`](crate::config::raw::RawConfig), serde errors turned into problems
//! with key paths and line numbers.

use std::ops::Range;

use toml::Spanned;
use toml::de::{DeTable, DeValue};

use crate::config::error::{ConfigErrors, key_path};
use crate::config::raw::RawConfig;

/// Line and column (1-based, columns in characters) of a byte offset.
fn line_column(text: &str, offset: usize) -> (usize, usize) {
    let offset = offset.min(text.len());
    let before = text.get(..offset).unwrap_or(text);
    let line = before.matches('\n').count() + 1;
    let line_start = before.rfind('\n').map_or(0, |i| i + 1);
    let column = before.get(line_start..).map_or(0, |s| s.chars().count()) + 1;
    (line, column)
}

/// Serde's type names in words a plant engineer reads.
fn tidy_serde_message(message: &str) -> String {
    message
        .replace("expected i64", "expected a whole number")
        .replace("expected u64", "expected a whole number")
        .replace("expected f64", "expected a number")
        .replace("expected a sequence", "expected an array")
        .replace("expected a map", "expected a table")
        .replace("expected a boolean", "expected true or false (no quotes)")
        .replace('\n', "; ")
}

pub(crate) fn parse_raw(text: &str) -> Result<RawConfig, ConfigErrors> {
    let tree = DeTable::parse(text).map_err(|e| {
        let at = e.span().map_or(String::new(), |s| {
            let (line, column) = line_column(text, s.start);
            format!("line {line}, column {column}: ")
        });
        ConfigErrors::one(
            "(file)",
            format!("TOML syntax: {at}{}", tidy_serde_message(e.message())),
        )
    })?;
    toml::from_str::<RawConfig>(text).map_err(|e| {
        let message = tidy_serde_message(e.message());
        let span = e.span().unwrap_or(0..0);
        let mut path = if span.is_empty() {
            String::new()
        } else {
            locate(tree.get_ref(), &span).unwrap_or_default()
        };
        // "missing field `x`": point at the missing key itself.
        let message = match message
            .strip_prefix("missing field `")
            .and_then(|m| m.strip_suffix('`'))
        {
            Some(field) => {
                path = key_path(&path, field);
                "missing; this key is required".to_string()
            }
            None if span.is_empty() => message,
            None if message.contains("map, expected an array") => format!(
                "{message}; several tables are written [[...]] with double brackets (line {})",
                line_column(text, span.start).0
            ),
            None => format!("{message} (line {})", line_column(text, span.start).0),
        };
        if path.is_empty() {
            path = "(file)".to_string();
        }
        ConfigErrors::one(path, message)
    })
}

/// The key path of the smallest key or value whose span holds `target`.
fn locate(table: &DeTable, target: &Range<usize>) -> Option<String> {
    let mut best = None;
    walk_table(table, "", target, &mut best);
    best.map(|(_, path)| path)
}

fn consider(
    span: Range<usize>,
    path: &str,
    target: &Range<usize>,
    best: &mut Option<(usize, String)>,
) {
    if span.start <= target.start && target.end <= span.end {
        let len = span.end - span.start;
        // `<=`: a deeper node with the same span (an array element) wins.
        if best.as_ref().is_none_or(|(l, _)| len <= *l) {
            *best = Some((len, path.to_string()));
        }
    }
}

fn walk_table(
    table: &DeTable,
    prefix: &str,
    target: &Range<usize>,
    best: &mut Option<(usize, String)>,
) {
    for (k, v) in table.iter() {
        let path = key_path(prefix, k.get_ref());
        consider(k.span(), &path, target, best);
        walk_value(v, &path, target, best);
    }
}

fn walk_value(
    value: &Spanned<DeValue>,
    path: &str,
    target: &Range<usize>,
    best: &mut Option<(usize, String)>,
) {
    consider(value.span(), path, target, best);
    match value.get_ref() {
        DeValue::Table(t) => walk_table(t, path, target, best),
        DeValue::Array(a) => {
            for (i, item) in a.iter().enumerate() {
                walk_value(item, &format!("{path}[{i}]"), target, best);
            }
        }
        _ => {}
    }
}

// ---------------------------------------------------------------------------
// Validation

#[cfg(test)]
mod tests {
    //! Check values: see `test_support` (the demo plant's own data, else invented).

    use crate::config::test_support::{REACTOR, assert_problems, broken, refused, with_broker};

    #[test]
    fn broken_syntax_gives_line_and_column() {
        assert_problems(
            "syntax.toml",
            &broken("syntax.toml"),
            &[("(file)", "TOML syntax: line 5, column 7: ")],
        );
    }

    #[test]
    fn unknown_and_missing_keys_name_their_path() {
        assert_problems(
            "unknown-key.toml",
            &broken("unknown-key.toml"),
            &[(
                "reactors.lts1.temperature[1].max_aeg",
                "unknown field `max_aeg`, expected one of",
            )],
        );
        // Invented config for the test: [broker] without url.
        let e = refused(&with_broker("client_id = \"eqwatch-baw1\""));
        assert_problems(
            "no url",
            &e,
            &[("broker.url", "missing; this key is required")],
        );
        // Invented config for the test: a misspelt key in an inline table.
        let text = REACTOR.replace(
            "[reactors.hts1.composition]",
            "uncertainty = { temprature = \"2 K\" }\n\n[reactors.hts1.composition]",
        );
        let e = refused(&format!(
            "site = \"baw1\"\n[broker]\nurl = \"mqtt://127.0.0.1\"\n{text}"
        ));
        assert_problems(
            "inline",
            &e,
            &[(
                "reactors.hts1.uncertainty.temprature",
                "unknown field `temprature`",
            )],
        );
        // Invented config for the test: a number where text belongs.
        let e = refused(&with_broker(
            "url = \"mqtt://127.0.0.1\"\ninflight = \"many\"",
        ));
        assert_problems(
            "type",
            &e,
            &[("broker.inflight", "expected a whole number (line 5)")],
        );
    }
}
