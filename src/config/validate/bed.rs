//! `[reactors.<id>.bed_profile]`: the bed, its multipoint thermocouples (the scalar input
//! keys plus a depth and, for a weighted WABT, a weight) and the front settings.

use crate::bedprofile::{BedGeometry, FrontInterpolation, WabtMethod};
use crate::config::error::{Problems, key_path};
use crate::config::raw::RawBedProfile;
use crate::config::settings::{ScalarSettings, ScalarSource};
use crate::config::validate::inputs::{ScalarKind, scalar};
use crate::monitor::spec::{BedProfileSpec, InputSpec};
use crate::units::split_quantity;

/// Default fraction of the rise that marks the front [common practice for
/// low-temperature shift profiles: the depth of 90 % of the rise].
const FRONT_FRACTION: f64 = 0.9;
/// Default smallest rise that places a front, K [common practice: a few times the
/// 1–2 K to which bed thermocouples agree].
const MIN_RISE_K: f64 = 5.0;
/// Default end-of-life front depth as a fraction of the catalyst depth [common practice:
/// the front near the bottom of the bed leaves too little catalyst below it to reach
/// equilibrium; set it from the unit's own history].
const END_OF_LIFE_FRACTION: f64 = 0.9;

/// A length in metres: `m`, `cm`, `mm`, `ft` (0.3048 m) or `in` (0.0254 m) (NIST SP 811,
/// appendix B: the international foot and inch are exact).
pub(crate) fn metres(problems: &mut Problems, path: &str, text: &str) -> Option<f64> {
    let parsed = split_quantity("length", text).ok().and_then(|(v, u)| {
        let per = match u.trim() {
            "m" => 1.0,
            "cm" => 0.01,
            "mm" => 0.001,
            "ft" => 0.3048,
            "in" => 0.0254,
            _ => return None,
        };
        Some(v * per)
    });
    match parsed {
        Some(v) if v.is_finite() && (0.0..=100.0).contains(&v) => Some(v),
        Some(v) => {
            problems.add(
                path,
                format!("\"{text}\" ({v} m) is outside 0–100 m, deeper than any catalyst bed"),
            );
            None
        }
        None => {
            problems.add(
                path,
                format!("\"{text}\" is not a length; write e.g. \"3.2 m\" (m, cm, mm, ft or in)"),
            );
            None
        }
    }
}

/// The bed profile, and where each thermocouple's readings arrive.
pub(crate) fn bed_profile(
    problems: &mut Problems,
    path: &str,
    raw: &RawBedProfile,
) -> Option<(BedProfileSpec, Vec<ScalarSource>)> {
    let start = problems.len();
    let depth_m = metres(problems, &format!("{path}.depth"), &raw.depth);
    let front_fraction = raw.front_fraction.unwrap_or(FRONT_FRACTION);
    let min_rise_k = match &raw.min_rise {
        None => Some(MIN_RISE_K),
        Some(t) => crate::config::validate::watch::kelvin(problems, &format!("{path}.min_rise"), t),
    };
    let end_of_life = raw
        .end_of_life_depth
        .as_ref()
        .map(|t| metres(problems, &format!("{path}.end_of_life_depth"), t));
    let mut thermocouples = Vec::new();
    let mut sources = Vec::new();
    let mut weights = Vec::new();
    for (i, tc) in raw.thermocouple.iter().enumerate() {
        let tpath = format!("{path}.thermocouple[{i}]");
        let settings: ScalarSettings = scalar(problems, &tpath, tc.into(), ScalarKind::Temperature);
        let depth = match &tc.depth {
            Some(d) => metres(problems, &format!("{tpath}.depth"), d),
            None => {
                problems.add(
                    format!("{tpath}.depth"),
                    "missing; give the thermocouple's depth below the top of the catalyst, e.g. \"0.8 m\"",
                );
                None
            }
        };
        weights.push(tc.weight);
        let (spec, source): (InputSpec, ScalarSource) = settings.split();
        thermocouples.push((spec, depth.unwrap_or(f64::NAN)));
        sources.push(source);
    }
    let wabt = wabt(problems, path, raw.wabt.as_deref(), &weights);
    let interpolation = match raw.front_interpolation.as_deref().map(str::trim) {
        None | Some("linear") => FrontInterpolation::Linear,
        Some("log-remaining") => FrontInterpolation::LogRemaining,
        Some(other) => {
            problems.add(
                format!("{path}.front_interpolation"),
                format!("\"{other}\" is not a front interpolation: linear or log-remaining"),
            );
            FrontInterpolation::Linear
        }
    };
    let (Some(depth_m), Some(min_rise_k), Some(wabt)) = (depth_m, min_rise_k, wabt) else {
        return None;
    };
    let geometry = BedGeometry {
        depth_m,
        front_fraction,
        min_rise_k,
        wabt,
        end_of_life_depth_m: end_of_life
            .flatten()
            .unwrap_or(END_OF_LIFE_FRACTION * depth_m),
        interpolation,
    };
    if problems.len() > start {
        return None;
    }
    let depths: Vec<f64> = thermocouples.iter().map(|t| t.1).collect();
    if let Err(e) = geometry.validate(&depths) {
        problems.add(
            path.to_string(),
            format!("{e}; list the thermocouples from the bed inlet (top) to the outlet"),
        );
        return None;
    }
    Some((
        BedProfileSpec {
            geometry,
            thermocouples,
        },
        sources,
    ))
}

/// The WABT convention; `weight` keys only with `weighted`, and then on every thermocouple.
fn wabt(
    problems: &mut Problems,
    path: &str,
    text: Option<&str>,
    weights: &[Option<f64>],
) -> Option<WabtMethod> {
    let key = format!("{path}.wabt");
    let method = match text.map(str::trim) {
        None | Some("inlet-outlet") => WabtMethod::InletOutlet,
        Some("depth-average") => WabtMethod::DepthAverage,
        Some("weighted") => {
            let mut w = Vec::with_capacity(weights.len());
            for (i, x) in weights.iter().enumerate() {
                match x {
                    Some(v) if v.is_finite() && *v >= 0.0 => w.push(*v),
                    _ => problems.add(
                        key_path(&format!("{path}.thermocouple[{i}]"), "weight"),
                        "wabt = \"weighted\" needs a non-negative weight on every thermocouple (the catalyst mass or volume it stands for)",
                    ),
                }
            }
            WabtMethod::Weighted(w)
        }
        Some(other) => {
            problems.add(
                key,
                format!(
                    "\"{other}\" is not a WABT convention: inlet-outlet, depth-average or weighted"
                ),
            );
            return None;
        }
    };
    if !matches!(method, WabtMethod::Weighted(_)) {
        for (i, x) in weights.iter().enumerate() {
            if x.is_some() {
                problems.add(
                    format!("{path}.thermocouple[{i}].weight"),
                    "only with wabt = \"weighted\"",
                );
            }
        }
    }
    Some(method)
}

#[cfg(test)]
mod tests {
    //! Check values: the invented test reactor of `test_support` with a bed added.

    use crate::bedprofile::{FrontInterpolation, WabtMethod};
    use crate::config::test_support::{assert_problems, check, refused, with_broker};

    fn bed(extra: &str, points: &[(&str, &str)]) -> String {
        let mut t = format!(
            "{}\n[reactors.hts1.bed_profile]\ndepth = \"10 ft\"\n{extra}\n",
            with_broker("url = \"mqtt://127.0.0.1\"")
        );
        for (i, (depth, more)) in points.iter().enumerate() {
            t.push_str(&format!(
                "\n[[reactors.hts1.bed_profile.thermocouple]]\ntag = \"TI-20{i}\"\ntopic = \"baw1/hts1/TI-20{i}\"\nunit = \"degC\"\nmax_age = \"2 min\"\ndepth = \"{depth}\"\n{more}\n"
            ));
        }
        t
    }

    #[test]
    fn a_bed_profile_is_read_in_metres_with_its_defaults() {
        let s = check(&bed("", &[("0 m", ""), ("150 cm", ""), ("3048 mm", "")])).expect("valid");
        let b = s.reactors[0].spec.bed_profile.as_ref().expect("bed");
        // 10 ft = 3.048 m (NIST SP 811: 1 ft = 0.3048 m exactly).
        assert!((b.geometry.depth_m - 3.048).abs() < 1e-12);
        assert_eq!(b.geometry.front_fraction, 0.9);
        assert_eq!(b.geometry.wabt, WabtMethod::InletOutlet);
        assert_eq!(b.geometry.interpolation, FrontInterpolation::Linear);
        assert!((b.geometry.end_of_life_depth_m - 0.9 * 3.048).abs() < 1e-12);
        assert_eq!(b.thermocouples[1].1, 1.5);
        assert_eq!(s.reactors[0].wiring.bed.len(), 3);
        // The end-of-life depth reaches the front trend of the watch.
        let eol = s.reactors[0].spec.watch.drift.front_end_of_life_m;
        assert_eq!(eol, Some(b.geometry.end_of_life_depth_m));
    }

    #[test]
    fn thermocouples_out_of_order_and_weights_without_weighting_are_refused() {
        assert_problems(
            "bed order",
            &refused(&bed("", &[("0 m", ""), ("2 m", ""), ("1 m", "")])),
            &[("reactors.hts1.bed_profile", "number 3 is at 1 m")],
        );
        assert_problems(
            "bed keys",
            &refused(&bed(
                "wabt = \"mean\"\nfront_interpolation = \"cubic\"",
                &[("0 m", "weight = 2.0"), ("two metres", "")],
            )),
            &[
                (
                    "reactors.hts1.bed_profile.wabt",
                    "\"mean\" is not a WABT convention",
                ),
                (
                    "reactors.hts1.bed_profile.front_interpolation",
                    "\"cubic\" is not a front interpolation",
                ),
                (
                    "reactors.hts1.bed_profile.thermocouple[1].depth",
                    "is not a length",
                ),
            ],
        );
        assert_problems(
            "weighted",
            &refused(&bed(
                "wabt = \"weighted\"",
                &[("0 m", "weight = 1.0"), ("3 m", "")],
            )),
            &[(
                "reactors.hts1.bed_profile.thermocouple[1].weight",
                "needs a non-negative weight",
            )],
        );
    }
}
