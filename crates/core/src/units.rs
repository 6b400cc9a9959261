//! Plant units: temperatures, absolute and gauge pressures, and composition units.
//!
//! Everything is converted once, at the edge, to the fixed units the core works in:
//! kelvin, bar absolute and mole fraction. Nothing here reads a clock or a file.
//! Ambiguous pressure units (`psi`, `kg/cm2`) are refused: gauge/absolute confusion
//! is one of the commonest causes of a wrong approach figure (docs/domain.md §5).

use thiserror::Error;

/// Standard atmosphere in bar, used to turn gauge pressures into absolute ones
/// (ISO 2533; 101 325 Pa by definition).
pub const STANDARD_ATMOSPHERE_BAR: f64 = 1.01325;

// ---------------------------------------------------------------------------
// Time: every timestamp and age in eqwatch is integer milliseconds since the Unix
// epoch (UTC); these are the one set of constants for it.

/// Milliseconds in a second, minute, hour and day (a day is 86,400 s: UTC, no leap seconds).
pub const SECOND_MS: i64 = 1_000;
pub const MINUTE_MS: i64 = 60 * SECOND_MS;
pub const HOUR_MS: i64 = 60 * MINUTE_MS;
pub const DAY_MS: i64 = 24 * HOUR_MS;

/// A duration as whole milliseconds, saturating at `i64::MAX` (a configured age of
/// centuries means "never stale", not a wrap to a negative age).
pub fn duration_ms(d: std::time::Duration) -> i64 {
    i64::try_from(d.as_millis()).unwrap_or(i64::MAX)
}

/// Problems with a quantity written by a user or sent by an instrument.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum UnitError {
    #[error("{what} `{text}` is not a number followed by a unit")]
    NotANumber { what: &'static str, text: String },
    #[error("{what} `{text}` has no unit; write it with one of: {expected}")]
    NoUnit {
        what: &'static str,
        text: String,
        expected: &'static str,
    },
    #[error("{what}: unknown unit `{unit}`; expected one of: {expected}")]
    UnknownUnit {
        what: &'static str,
        unit: String,
        expected: &'static str,
    },
    #[error("{what}: unit `{unit}` is ambiguous ({hint})")]
    Ambiguous {
        what: &'static str,
        unit: String,
        hint: &'static str,
    },
    #[error("{what} {value} is not physical ({reason})")]
    NotPhysical {
        what: &'static str,
        value: f64,
        reason: &'static str,
    },
}

const TEMPERATURE_UNITS: &str = "K, degC, °C, C, degF, °F, F, degR";
const PRESSURE_UNITS: &str =
    "bar, bara, barg, mbar, mbarg, Pa, kPa, kPag, MPa, MPag, psia, psig, atm, kg/cm2a, kg/cm2g";
const COMPOSITION_UNITS: &str = "fraction, mol%, vol%, %, ppm, ppmv, ppb";

/// Splits `"700 K"`, `"700K"`, `"-5.5 degC"` into the number and the trimmed unit text.
/// The number is the longest prefix that parses as a float.
pub fn split_quantity<'a>(what: &'static str, text: &'a str) -> Result<(f64, &'a str), UnitError> {
    let t = text.trim();
    let mut best: Option<(f64, usize)> = None;
    for (end, _) in t
        .char_indices()
        .skip(1)
        .chain(std::iter::once((t.len(), ' ')))
    {
        if let Ok(v) = t[..end].trim_end().parse::<f64>() {
            best = Some((v, end));
        }
    }
    match best {
        Some((v, end)) if v.is_finite() => Ok((v, t[end..].trim())),
        _ => Err(UnitError::NotANumber {
            what,
            text: text.to_string(),
        }),
    }
}

fn norm_unit(unit: &str) -> String {
    unit.chars()
        .filter(|c| !c.is_whitespace())
        .map(|c| match c {
            '²' => '2',
            '³' => '3',
            '(' | ')' => '\u{0}',
            _ => c,
        })
        .filter(|c| *c != '\u{0}')
        .collect::<String>()
        .to_ascii_lowercase()
}

/// Temperature units accepted on tags and on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TemperatureUnit {
    Kelvin,
    Celsius,
    Fahrenheit,
    Rankine,
}

impl TemperatureUnit {
    pub fn parse(unit: &str) -> Result<Self, UnitError> {
        let u = norm_unit(unit);
        Ok(match u.as_str() {
            "k" | "kelvin" => Self::Kelvin,
            "degc" | "°c" | "c" | "celsius" | "degreesc" | "deg.c" => Self::Celsius,
            "degf" | "°f" | "f" | "fahrenheit" | "degreesf" | "deg.f" => Self::Fahrenheit,
            "degr" | "°r" | "rankine" => Self::Rankine,
            "" => {
                return Err(UnitError::NoUnit {
                    what: "temperature",
                    text: unit.to_string(),
                    expected: TEMPERATURE_UNITS,
                });
            }
            _ => {
                return Err(UnitError::UnknownUnit {
                    what: "temperature",
                    unit: unit.to_string(),
                    expected: TEMPERATURE_UNITS,
                });
            }
        })
    }

    /// Converts a value in this unit to kelvin, refusing values at or below absolute zero.
    pub fn to_kelvin(self, value: f64) -> Result<f64, UnitError> {
        let k = match self {
            Self::Kelvin => value,
            Self::Celsius => value + 273.15,
            Self::Fahrenheit => (value - 32.0) * 5.0 / 9.0 + 273.15,
            Self::Rankine => value * 5.0 / 9.0,
        };
        if !k.is_finite() || k <= 0.0 {
            return Err(UnitError::NotPhysical {
                what: "temperature",
                value,
                reason: "at or below absolute zero",
            });
        }
        Ok(k)
    }
}

/// Parses `"700 K"`, `"426.85 degC"`, `"800°F"` to kelvin. A bare number is refused.
pub fn parse_temperature(text: &str) -> Result<f64, UnitError> {
    let (v, unit) = split_quantity("temperature", text)?;
    if unit.is_empty() {
        return Err(UnitError::NoUnit {
            what: "temperature",
            text: text.to_string(),
            expected: TEMPERATURE_UNITS,
        });
    }
    TemperatureUnit::parse(unit)?.to_kelvin(v)
}

/// Pressure units, with their reference (absolute or gauge).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PressureUnit {
    /// Multiply the value by this to get bar.
    pub bar_per_unit: f64,
    /// Gauge units need the atmosphere added.
    pub gauge: bool,
}

impl PressureUnit {
    pub fn parse(unit: &str) -> Result<Self, UnitError> {
        let u = norm_unit(unit);
        let (bar_per_unit, gauge) = match u.as_str() {
            "bar" | "bara" | "barabs" | "bar.a" => (1.0, false),
            "barg" | "bar.g" => (1.0, true),
            "mbar" | "mbara" => (1e-3, false),
            "mbarg" => (1e-3, true),
            "pa" | "paa" => (1e-5, false),
            "pag" => (1e-5, true),
            "kpa" | "kpaa" => (1e-2, false),
            "kpag" => (1e-2, true),
            "mpa" | "mpaa" => (10.0, false),
            "mpag" => (10.0, true),
            "psia" => (PSI_BAR, false),
            "psig" => (PSI_BAR, true),
            "atm" | "atma" => (STANDARD_ATMOSPHERE_BAR, false),
            "kg/cm2a" | "kgf/cm2a" | "ata" => (KGF_CM2_BAR, false),
            "kg/cm2g" | "kgf/cm2g" | "atü" | "atu" => (KGF_CM2_BAR, true),
            "psi" => {
                return Err(UnitError::Ambiguous {
                    what: "pressure",
                    unit: unit.to_string(),
                    hint: "write psia for absolute or psig for gauge",
                });
            }
            "kg/cm2" | "kgf/cm2" => {
                return Err(UnitError::Ambiguous {
                    what: "pressure",
                    unit: unit.to_string(),
                    hint: "write kg/cm2a for absolute or kg/cm2g for gauge",
                });
            }
            "" => {
                return Err(UnitError::NoUnit {
                    what: "pressure",
                    text: unit.to_string(),
                    expected: PRESSURE_UNITS,
                });
            }
            _ => {
                return Err(UnitError::UnknownUnit {
                    what: "pressure",
                    unit: unit.to_string(),
                    expected: PRESSURE_UNITS,
                });
            }
        };
        Ok(Self {
            bar_per_unit,
            gauge,
        })
    }

    /// Absolute pressure in bar; `atmosphere_bar` is added to gauge readings.
    pub fn to_bar_absolute(self, value: f64, atmosphere_bar: f64) -> Result<f64, UnitError> {
        let mut p = value * self.bar_per_unit;
        if self.gauge {
            p += atmosphere_bar;
        }
        if !p.is_finite() || p <= 0.0 {
            return Err(UnitError::NotPhysical {
                what: "pressure",
                value,
                reason: "absolute pressure must be above zero",
            });
        }
        Ok(p)
    }
}

/// 1 psi in bar: 6894.757 Pa (NIST SP 811, appendix B).
const PSI_BAR: f64 = 0.068_947_572_93;
/// 1 kgf/cm² in bar: 98 066.5 Pa (NIST SP 811, appendix B).
const KGF_CM2_BAR: f64 = 0.980_665;

/// Parses `"150 bar"`, `"30 barg"`, `"435 psig"` to bar absolute, gauge readings
/// referred to the standard atmosphere. A bare number is refused.
pub fn parse_pressure(text: &str) -> Result<f64, UnitError> {
    parse_pressure_with_atmosphere(text, STANDARD_ATMOSPHERE_BAR)
}

/// As [`parse_pressure`], with the site's atmospheric pressure for gauge readings.
pub fn parse_pressure_with_atmosphere(text: &str, atmosphere_bar: f64) -> Result<f64, UnitError> {
    let (v, unit) = split_quantity("pressure", text)?;
    if unit.is_empty() {
        return Err(UnitError::NoUnit {
            what: "pressure",
            text: text.to_string(),
            expected: "bara or barg (or another unit that says absolute or gauge)",
        });
    }
    PressureUnit::parse(unit)?.to_bar_absolute(v, atmosphere_bar)
}

/// The unit a scalar input is configured in (a message's own `unit` field, where
/// present, must agree in kind and overrides it).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum ScalarUnit {
    Temperature(TemperatureUnit),
    Pressure(PressureUnit),
    /// Dimensionless (mol H2O per mol dry gas).
    Ratio,
    /// A molar flow (kmol/h internally).
    Flow(FlowUnit),
}

/// Molar flow units, converted to kmol/h.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlowUnit {
    /// Multiply the value by this to get kmol/h.
    pub kmol_h_per_unit: f64,
    /// The unit as it is written back to a user.
    pub label: &'static str,
}

/// Molar volume of an ideal gas at 273.15 K and 101.325 kPa, m³/kmol (CODATA 2018:
/// 22.413 969 54 L/mol); the "normal" cubic metre of DIN 1343.
pub const NORMAL_M3_PER_KMOL: f64 = 22.413_969_54;

const FLOW_UNITS: &str = "kmol/h, mol/s, kmol/s, Nm3/h (0 °C, 1 atm)";

impl FlowUnit {
    pub fn parse(unit: &str) -> Result<Self, UnitError> {
        let u = norm_unit(unit);
        let (kmol_h_per_unit, label) = match u.as_str() {
            "kmol/h" | "kmol/hr" => (1.0, "kmol/h"),
            "mol/s" => (3.6, "mol/s"),
            "kmol/s" => (3600.0, "kmol/s"),
            "mol/h" => (1e-3, "mol/h"),
            "nm3/h" | "nm3/hr" | "nm^3/h" => (1.0 / NORMAL_M3_PER_KMOL, "Nm3/h"),
            "sm3/h" | "scm/h" | "m3/h" => {
                return Err(UnitError::Ambiguous {
                    what: "flow",
                    unit: unit.to_string(),
                    hint: "standard conditions differ between standards and m3/h has none: give kmol/h, or Nm3/h (0 °C, 1 atm)",
                });
            }
            _ => {
                return Err(UnitError::UnknownUnit {
                    what: "flow",
                    unit: unit.to_string(),
                    expected: FLOW_UNITS,
                });
            }
        };
        Ok(Self {
            kmol_h_per_unit,
            label,
        })
    }

    /// The value in kmol/h; negative flows are not physical.
    /// kmol/h itself.
    pub const KMOL_H: Self = Self {
        kmol_h_per_unit: 1.0,
        label: "kmol/h",
    };

    pub fn to_kmol_h(self, value: f64) -> Result<f64, UnitError> {
        if !value.is_finite() || value < 0.0 {
            return Err(UnitError::NotPhysical {
                what: "flow",
                value,
                reason: "a flow is zero or more",
            });
        }
        Ok(value * self.kmol_h_per_unit)
    }
}

/// Units of one analyser component.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CompositionUnit {
    Fraction,
    Percent,
    Ppm,
    Ppb,
}

impl CompositionUnit {
    pub fn parse(unit: &str) -> Result<Self, UnitError> {
        let u = norm_unit(unit);
        Ok(match u.as_str() {
            "fraction" | "frac" | "mol/mol" | "molfraction" | "-" => Self::Fraction,
            "mol%" | "%" | "vol%" | "v%" | "mole%" | "%mol" | "%vol" => Self::Percent,
            "ppm" | "ppmv" | "ppmmol" | "vppm" | "molppm" => Self::Ppm,
            "ppb" | "ppbv" => Self::Ppb,
            _ => {
                return Err(UnitError::UnknownUnit {
                    what: "composition",
                    unit: unit.to_string(),
                    expected: COMPOSITION_UNITS,
                });
            }
        })
    }

    /// Mole fraction per unit.
    pub fn fraction_per_unit(self) -> f64 {
        match self {
            Self::Fraction => 1.0,
            Self::Percent => 1e-2,
            Self::Ppm => 1e-6,
            Self::Ppb => 1e-9,
        }
    }

    pub fn label(self) -> &'static str {
        match self {
            Self::Fraction => "fraction",
            Self::Percent => "mol%",
            Self::Ppm => "ppm",
            Self::Ppb => "ppb",
        }
    }
}

/// A number for a person: at most `sig` significant digits, trailing zeros dropped, no
/// exponent between 1e-4 and 1e9 (`0.20833333333333334` with 3 → `0.208`, `5.0` → `5`).
pub fn fmt_num(v: f64, sig: u32) -> String {
    if !v.is_finite() {
        return if v.is_nan() {
            "—".into()
        } else if v > 0.0 {
            "∞".into()
        } else {
            "−∞".into()
        };
    }
    if v == 0.0 {
        return "0".into();
    }
    let mag = v.abs().log10().floor() as i32;
    if !(-4..9).contains(&mag) {
        return format!("{:.*e}", sig.saturating_sub(1) as usize, v);
    }
    let decimals = (sig as i32 - 1 - mag).max(0) as usize;
    let mut t = format!("{v:.decimals$}");
    if t.contains('.') {
        while t.ends_with('0') {
            t.pop();
        }
        if t.ends_with('.') {
            t.pop();
        }
    }
    if t == "-0" { "0".into() } else { t }
}

#[cfg(test)]
mod flow_tests {
    use super::*;

    #[test]
    fn flow_units_convert_to_kmol_per_hour() {
        // 1 mol/s = 3.6 kmol/h (definition); 22 413.969 54 Nm3/h = 1000 kmol/h (CODATA
        // 2018 molar volume at 273.15 K, 101.325 kPa).
        let c = |u: &str, v: f64| FlowUnit::parse(u).unwrap().to_kmol_h(v).unwrap();
        assert_eq!(c("kmol/h", 12.5), 12.5);
        assert!((c("mol/s", 10.0) - 36.0).abs() < 1e-12);
        assert!((c("Nm3/h", 22_413.969_54) - 1000.0).abs() < 1e-9);
        assert!((c("Nm³/h", 22_413.969_54) - 1000.0).abs() < 1e-9);
        assert!(matches!(
            FlowUnit::parse("Sm3/h"),
            Err(UnitError::Ambiguous { .. })
        ));
        assert!(matches!(
            FlowUnit::parse("t/h"),
            Err(UnitError::UnknownUnit { .. })
        ));
        assert!(FlowUnit::parse("kmol/h").unwrap().to_kmol_h(-1.0).is_err());
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn close(a: f64, b: f64, tol: f64) -> bool {
        (a - b).abs() <= tol
    }

    #[test]
    fn temperatures() {
        // Conversion definitions: ITS-90 / NIST SP 811 (0 degC = 273.15 K, 1 degF = 5/9 K).
        let check = |text: &str, k: f64| {
            let got = parse_temperature(text).unwrap();
            assert!(close(got, k, 1e-9), "{text}: {got} vs {k}");
        };
        check("700 K", 700.0);
        check("700K", 700.0);
        check("426.85 degC", 700.0);
        check("220 °C", 493.15);
        check("32 degF", 273.15);
        check("800°F", 699.816_666_666_666_7);
        check("  1.0e3 K ", 1000.0);
        check("540 degR", 300.0);
    }

    #[test]
    fn temperatures_refused() {
        assert!(matches!(
            parse_temperature("700"),
            Err(UnitError::NoUnit { .. })
        ));
        assert!(matches!(
            parse_temperature("700 Q"),
            Err(UnitError::UnknownUnit { .. })
        ));
        assert!(matches!(
            parse_temperature("-300 degC"),
            Err(UnitError::NotPhysical { .. })
        ));
        assert!(matches!(
            parse_temperature("hot"),
            Err(UnitError::NotANumber { .. })
        ));
        assert!(matches!(
            parse_temperature("NaN K"),
            Err(UnitError::NotANumber { .. })
        ));
    }

    #[test]
    fn pressures() {
        // 1 atm = 1.01325 bar, 1 psi = 6894.757 Pa, 1 kgf/cm2 = 98066.5 Pa (NIST SP 811).
        let check = |text: &str, bar: f64| {
            let got = parse_pressure(text).unwrap();
            assert!(close(got, bar, 1e-8), "{text}: {got} vs {bar}");
        };
        check("150 bar", 150.0);
        check("150 bara", 150.0);
        check("30 barg", 31.01325);
        check("3 MPa", 30.0);
        check("3 MPag", 31.01325);
        check("101.325 kPa", 1.01325);
        check("20 kPag", 1.21325);
        check("1 atm", 1.01325);
        check("14.695948775 psia", 1.01325);
        check("0 psig", 1.01325);
        check("10 kg/cm2g", 9.80665 + 1.01325);
        check("10 kg/cm²a", 9.80665);
        check("200 bar(a)", 200.0);
    }

    #[test]
    fn pressures_refused() {
        assert!(matches!(
            parse_pressure("30"),
            Err(UnitError::NoUnit { .. })
        ));
        assert!(matches!(
            parse_pressure("30 psi"),
            Err(UnitError::Ambiguous { .. })
        ));
        assert!(matches!(
            parse_pressure("3 kg/cm2"),
            Err(UnitError::Ambiguous { .. })
        ));
        assert!(matches!(
            parse_pressure("-2 bar"),
            Err(UnitError::NotPhysical { .. })
        ));
        assert!(matches!(
            parse_pressure("3 furlongs"),
            Err(UnitError::UnknownUnit { .. })
        ));
        // A vacuum gauge reading below -1 atm is impossible.
        assert!(matches!(
            parse_pressure("-1.5 barg"),
            Err(UnitError::NotPhysical { .. })
        ));
    }

    #[test]
    fn composition_units() {
        assert_eq!(
            CompositionUnit::parse("mol%").unwrap(),
            CompositionUnit::Percent
        );
        assert_eq!(
            CompositionUnit::parse("mol %").unwrap(),
            CompositionUnit::Percent
        );
        assert_eq!(
            CompositionUnit::parse("ppm(v)").unwrap(),
            CompositionUnit::Ppm
        );
        assert_eq!(
            CompositionUnit::parse("fraction").unwrap(),
            CompositionUnit::Fraction
        );
        assert!(CompositionUnit::parse("mol-%").is_err());
        assert_eq!(CompositionUnit::Ppm.fraction_per_unit(), 1e-6);
    }

    #[test]
    fn numbers_for_people() {
        // Formatting rules of this project [common practice for displayed figures].
        for (v, sig, want) in [
            (0.20833333333333334, 3, "0.208"),
            (5.0, 3, "5"),
            (20.0, 3, "20"),
            (19.44, 3, "19.4"),
            (1234.5678, 3, "1235"),
            (-2.75, 2, "-2.8"),
            (0.000012, 2, "1.2e-5"),
            (0.0, 3, "0"),
            (-0.0001, 1, "-0.0001"),
        ] {
            assert_eq!(fmt_num(v, sig), want, "{v} to {sig}");
        }
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(512))]
        /// Any unit or quantity text: a value or an error, never a panic.
        #[test]
        fn any_unit_text_never_panics(text in "\\PC{0,40}", n in proptest::prelude::any::<f64>()) {
            let _ = parse_temperature(&text);
            let _ = parse_pressure(&text);
            let _ = parse_pressure_with_atmosphere(&text, 1.01325);
            let _ = parse_temperature(&format!("{n} {text}"));
            let _ = parse_pressure(&format!("{n} {text}"));
        }
    }
}
