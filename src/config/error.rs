//! Problems found in a configuration, each with its key path (`reactors.lts1.composition.unit`)
//! and, where known, its line and column; collected, never the first one only.

use std::fmt;

use thiserror::Error;

use crate::units::UnitError;

/// One thing wrong with a configuration: the key path to fix and what is expected.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ConfigProblem {
    /// Dotted key path (`reactors.lts1.composition.unit`, `species_files[0]`), or
    /// `(file)` for a problem with the file as a whole (unreadable, TOML syntax).
    pub path: String,
    pub message: String,
}

impl fmt::Display for ConfigProblem {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}: {}", self.path, self.message)
    }
}

/// Every problem found in a configuration, in the order found (never empty).
#[derive(Debug, Clone, PartialEq, Eq, Error)]
#[error("{}", one_per_line(.problems))]
pub struct ConfigErrors {
    pub problems: Vec<ConfigProblem>,
}

fn one_per_line(problems: &[ConfigProblem]) -> String {
    problems
        .iter()
        .map(ToString::to_string)
        .collect::<Vec<_>>()
        .join("\n")
}

impl ConfigErrors {
    pub(crate) fn one(path: impl Into<String>, message: impl Into<String>) -> Self {
        Self {
            problems: vec![ConfigProblem {
                path: path.into(),
                message: message.into(),
            }],
        }
    }
}

/// Collects problems; an identical problem found twice is kept once.
#[derive(Debug, Default)]
pub(crate) struct Problems(pub(crate) Vec<ConfigProblem>);

impl Problems {
    pub(crate) fn add(&mut self, path: impl Into<String>, message: impl Into<String>) {
        let problem = ConfigProblem {
            path: path.into(),
            message: message.into(),
        };
        if !self.0.contains(&problem) {
            self.0.push(problem);
        }
    }

    pub(crate) fn len(&self) -> usize {
        self.0.len()
    }

    pub(crate) fn is_empty(&self) -> bool {
        self.0.is_empty()
    }

    pub(crate) fn into_errors(self) -> ConfigErrors {
        ConfigErrors { problems: self.0 }
    }
}

/// `prefix.key`, quoting a key that is not a bare TOML key.
pub(crate) fn key_path(prefix: &str, key: &str) -> String {
    let bare = !key.is_empty()
        && key
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_');
    let key = if bare {
        key.to_string()
    } else {
        format!("\"{}\"", key.replace('\\', "\\\\").replace('"', "\\\""))
    };
    if prefix.is_empty() {
        key
    } else {
        format!("{prefix}.{key}")
    }
}

pub(crate) fn is_name_char(c: char) -> bool {
    c.is_ascii_alphanumeric() || c == '-' || c == '_'
}

/// A unit problem without the unit module's own "what:" prefix (the key path says it).
pub(crate) fn unit_message(e: &UnitError) -> String {
    match e {
        UnitError::UnknownUnit { unit, expected, .. } => {
            format!("unknown unit \"{unit}\"; expected one of {expected}")
        }
        UnitError::Ambiguous { unit, hint, .. } => {
            format!("unit \"{unit}\" is ambiguous; {hint}")
        }
        UnitError::NoUnit { expected, .. } => format!("no unit given; expected one of {expected}"),
        other => other.to_string(),
    }
}

#[cfg(test)]
mod tests {
    //! Check values: see `test_support` (the demo plant's own data, else invented).

    use crate::config::test_support::broken;

    #[test]
    fn display_lists_every_problem_on_its_own_line() {
        let e = broken("dry-without-steam-ratio.toml");
        let text = e.to_string();
        assert_eq!(text.lines().count(), e.problems.len());
        assert!(
            text.lines()
                .any(|l| l.starts_with("reactors.hts1.steam_ratio: missing"))
        );
    }
}
