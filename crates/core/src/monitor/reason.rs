//! Why an evaluation is not simply good: one [`ReasonCode`] per kind of finding (stable
//! on the wire, listed in the README), with a severity and a message for the engineer.

use std::fmt;

use super::Quality;

macro_rules! reason_codes {
    ($($variant:ident => $text:literal,)+) => {
        /// The kinds of finding an evaluation can carry. The text (`as_str`) is what the
        /// result message and the logs show; it never changes for a variant.
        #[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
        pub enum ReasonCode {
            $($variant,)+
        }

        impl ReasonCode {
            /// Every code, in declaration order.
            pub const ALL: &'static [ReasonCode] = &[$(ReasonCode::$variant,)+];

            /// The code as published (`snake_case`).
            pub fn as_str(self) -> &'static str {
                match self {
                    $(ReasonCode::$variant => $text,)+
                }
            }
        }
    };
}

reason_codes! {
    SourceUncertain => "source_uncertain",
    SourceBad => "source_bad",
    StaleAnalysis => "stale_analysis",
    AnalyserStuck => "analyser_stuck",
    BasisMismatch => "basis_mismatch",
    StaleTemperature => "stale_temperature",
    ImplausibleValue => "implausible_value",
    ThermocouplesDisagree => "thermocouples_disagree",
    NoTemperature => "no_temperature",
    Transient => "transient",
    StalePressure => "stale_pressure",
    StaleSteamRatio => "stale_steam_ratio",
    MissingComponent => "missing_component",
    BadValue => "bad_value",
    NegativeValue => "negative_value",
    BelowDetectionLimit => "below_detection_limit",
    CompositionNormalised => "composition_normalised",
    SumOutsideTolerance => "sum_outside_tolerance",
    EosProblem => "eos_problem",
    ZeroComponent => "zero_component",
    TemperatureOutsideDataRange => "temperature_outside_data_range",
    BeyondEquilibrium => "beyond_equilibrium",
    AtEquilibriumWithinUncertainty => "at_equilibrium_within_uncertainty",
    EnthalpySignChange => "enthalpy_sign_change",
    NoEquilibriumTemperature => "no_equilibrium_temperature",
    EquilibriumNotConverged => "equilibrium_not_converged",
    ApproachNotMeaningful => "approach_not_meaningful",
}

impl fmt::Display for ReasonCode {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// Why a result is not good: a stable code and a message for the engineer.
#[derive(Debug, Clone, PartialEq)]
pub struct Reason {
    pub code: ReasonCode,
    pub severity: Quality,
    pub message: String,
}

/// The findings of one evaluation, in the order they were made.
#[derive(Debug, Default)]
pub(crate) struct Findings(Vec<Reason>);

impl Findings {
    pub(crate) fn push(&mut self, code: ReasonCode, severity: Quality, message: String) {
        self.0.push(Reason {
            code,
            severity,
            message,
        });
    }

    /// The worst severity found (good when nothing was).
    pub(crate) fn worst(&self) -> Quality {
        self.0
            .iter()
            .map(|r| r.severity)
            .max()
            .unwrap_or(Quality::Good)
    }

    pub(crate) fn into_vec(self) -> Vec<Reason> {
        self.0
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn codes_are_unique_snake_case() {
        let mut seen = std::collections::HashSet::new();
        for c in ReasonCode::ALL {
            let s = c.as_str();
            assert!(seen.insert(s), "{s} twice");
            assert!(
                s.chars().all(|ch| ch.is_ascii_lowercase() || ch == '_'),
                "{s}"
            );
        }
    }

    #[test]
    fn findings_report_the_worst_severity() {
        let mut f = Findings::default();
        assert_eq!(f.worst(), Quality::Good);
        f.push(ReasonCode::Transient, Quality::Uncertain, String::new());
        f.push(
            ReasonCode::BelowDetectionLimit,
            Quality::Good,
            String::new(),
        );
        assert_eq!(f.worst(), Quality::Uncertain);
        assert_eq!(f.into_vec()[0].code, ReasonCode::Transient);
    }
}
