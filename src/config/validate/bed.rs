//! `[reactors.<id>.bed_profile]`: the bed, its multipoint thermocouples (the scalar input
//! keys plus a depth and, for a weighted WABT, a weight) and the front settings.

use crate::bedprofile::{BedGeometry, WabtMethod};
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
