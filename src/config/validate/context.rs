//! `[[reactors.<id>.flow]]` (flow meters: which stream, unit, uncertainty) and
//! `[reactors.<id>.normalise]` (the context inputs of the normalised approach).

use crate::config::error::Problems;
use crate::config::raw::{RawFlow, RawNormalise, RawReactor};
use crate::config::settings::{ScalarSettings, ScalarSource};
use crate::config::validate::inputs::{ScalarKind, scalar};
use crate::monitor::spec::{FlowSpec, FlowStream};
use crate::monitor::watch::{BaselineSpec, ContextInput, NormaliseSpec, WatchSettings};
use crate::units::split_quantity;

/// Default standard deviation of a flow meter, fraction of reading [common practice:
/// orifice and vortex meters in gas service are good to 1–3 % of reading].
const FLOW_SIGMA_REL: f64 = 0.02;

/// A percentage such as `"1.5 %"` as a fraction, above 0 and at most `max` (fraction).
fn percent(problems: &mut Problems, path: &str, text: &str, max: f64) -> Option<f64> {
    match split_quantity("percentage", text) {
        Ok((v, u)) if u.trim() == "%" && v > 0.0 && v / 100.0 <= max => Some(v / 100.0),
        _ => {
            problems.add(
                path,
                format!(
                    "\"{text}\" is not a percentage above 0 and at most {} %; write e.g. \"2 %\"",
                    100.0 * max
                ),
            );
            None
        }
    }
}

/// The reactor's flow meters, and where their readings arrive.
pub(crate) fn flows(
    problems: &mut Problems,
    path: &str,
    raw: &[RawFlow],
) -> (Vec<FlowSpec>, Vec<ScalarSource>) {
    let mut specs = Vec::new();
    let mut sources = Vec::new();
    for (i, f) in raw.iter().enumerate() {
        let fpath = format!("{path}.flow[{i}]");
        let settings: ScalarSettings = scalar(problems, &fpath, f.into(), ScalarKind::Flow);
        let stream = match f.stream.as_deref().map(str::trim) {
            Some("inlet") => Some(FlowStream::InletDry),
            Some("outlet") => Some(FlowStream::OutletDry),
            Some("steam") => Some(FlowStream::InletSteam),
            other => {
                problems.add(
                    format!("{fpath}.stream"),
                    match other {
                        None => "missing; which stream the meter measures: \"inlet\" (dry gas in), \"outlet\" (dry gas out) or \"steam\" (steam in)".to_string(),
                        Some(o) => format!("\"{o}\" is not a stream: inlet, outlet or steam"),
                    },
                );
                None
            }
        };
        if let Some(s) = stream
            && specs.iter().any(|x: &FlowSpec| x.stream == s)
        {
            problems.add(
                format!("{fpath}.stream"),
                format!(
                    "a second \"{}\" meter: give one meter per stream",
                    s.as_str()
                ),
            );
        }
        let sigma_rel = match &f.uncertainty {
            None => Some(FLOW_SIGMA_REL),
            Some(t) => percent(problems, &format!("{fpath}.uncertainty"), t, 0.5),
        };
        let (input, source) = settings.split();
        if let (Some(stream), Some(sigma_rel)) = (stream, sigma_rel) {
            specs.push(FlowSpec {
                input,
                stream,
                sigma_rel,
            });
            sources.push(source);
        }
    }
    (specs, sources)
}

/// Default relative standard deviation of an analysed fraction [common practice: a
/// process GC repeats to about 0.5–1 % of reading on its main components] ...
const ANALYSER_SIGMA_REL: f64 = 0.01;
/// ... and its floor, mole fraction (0.02 mol%) for the minor components.
const ANALYSER_SIGMA_FLOOR: f64 = 2e-4;

/// The inlet analyser and the reconciliation settings.
pub(crate) fn reconcile(
    problems: &mut Problems,
    db: &crate::thermo::species::SpeciesDb,
    path: &str,
    reactor: &RawReactor,
    outlet_basis: Option<crate::composition::Basis>,
    watch: &mut WatchSettings,
) -> Option<(
    crate::monitor::spec::ReconcileSpec,
    crate::config::CompositionSource,
)> {
    use crate::composition::Basis;
    let rpath = format!("{path}.reconcile");
    let ipath = format!("{path}.inlet_composition");
    let (raw, inlet) = match (&reactor.reconcile, &reactor.inlet_composition) {
        (None, None) => return None,
        (Some(_), None) => {
            problems.add(
                rpath,
                format!("needs the inlet analyser: a [{ipath}] table"),
            );
            return None;
        }
        (None, Some(_)) => {
            problems.add(
                ipath,
                format!("is only read for a [{rpath}]; add that table"),
            );
            return None;
        }
        (Some(r), Some(i)) => (r, i),
    };
    let start = problems.len();
    if outlet_basis != Some(Basis::Dry) {
        problems.add(
            format!("{path}.composition.basis"),
            "the reconciliation balances dry analyses with separate water flows: the outlet analysis must be dry",
        );
    }
    if inlet.topics.is_some() {
        problems.add(
            format!("{ipath}.topics"),
            "the inlet analyser must send one message per analysis (topic, not topics)",
        );
    }
    let basis = match inlet.basis.as_deref().map(str::trim) {
        None | Some("dry") => Basis::Dry,
        Some(other) => {
            problems.add(
                format!("{ipath}.basis"),
                format!("\"{other}\": the inlet analysis must be dry"),
            );
            Basis::Dry
        }
    };
    let analysis =
        crate::config::validate::inputs::composition(problems, db, &ipath, inlet, Some(basis));
    if !reactor
        .flow
        .iter()
        .any(|f| matches!(f.stream.as_deref().map(str::trim), Some("inlet" | "outlet")))
    {
        problems.add(
            rpath.clone(),
            "needs a dry gas flow meter: a [[flow]] with stream = \"inlet\" or \"outlet\"",
        );
    }
    if !reactor
        .flow
        .iter()
        .any(|f| f.stream.as_deref().map(str::trim) == Some("steam"))
    {
        problems.add(
            rpath.clone(),
            "needs the steam flow in (a [[flow]] with stream = \"steam\"): the balances see only the difference of the water in and out, and the water out is not measured",
        );
    }
    let sigma_rel = match &raw.analyser_uncertainty {
        None => Some(ANALYSER_SIGMA_REL),
        Some(t) => percent(problems, &format!("{rpath}.analyser_uncertainty"), t, 0.5),
    };
    let floor = match &raw.analyser_floor {
        None => Some(ANALYSER_SIGMA_FLOOR),
        Some(t) => match crate::config::validate::inputs::composition_amount("analyser floor", t) {
            Ok(f) if f > 0.0 && f < 0.05 => Some(f),
            Ok(_) => {
                problems.add(
                    format!("{rpath}.analyser_floor"),
                    format!("\"{t}\" must be above 0 and below 5 mol%"),
                );
                None
            }
            Err(m) => {
                problems.add(format!("{rpath}.analyser_floor"), m);
                None
            }
        },
    };
    let alpha = match &raw.significance {
        None => Some(0.05),
        Some(t) => percent(problems, &format!("{rpath}.significance"), t, 0.2),
    };
    match raw.alert_after {
        None => watch.alerts.gross_error_samples = Some(3),
        Some(0) => watch.alerts.gross_error_samples = None,
        Some(n) if (1..=100).contains(&n) => watch.alerts.gross_error_samples = Some(n as u32),
        Some(n) => problems.add(
            format!("{rpath}.alert_after"),
            format!("{n}: give 1 to 100 results in a row, or 0 for no alert"),
        ),
    }
    let (Some((inlet, source, _)), Some(sigma_rel), Some(floor), Some(alpha)) =
        (analysis, sigma_rel, floor, alpha)
    else {
        return None;
    };
    if problems.len() > start {
        return None;
    }
    Some((
        crate::monitor::spec::ReconcileSpec {
            inlet,
            analyser_sigma_rel: sigma_rel,
            analyser_sigma_floor: floor,
            options: crate::reconcile::Options {
                alpha,
                ..crate::reconcile::Options::default()
            },
        },
        source,
    ))
}

/// What the context inputs are read from, for the message when one is missing.
fn source_of(c: ContextInput) -> &'static str {
    match c {
        ContextInput::Throughput => "a [[flow]] with stream = \"inlet\" or \"outlet\"",
        ContextInput::SteamRatio => "a measured [steam_ratio] (a fixed one does not vary)",
        ContextInput::InletTemperature => {
            "a [bed_profile] (its first thermocouple) or a [bed_rise] inlet thermocouple"
        }
        ContextInput::Pressure => "the [pressure]",
    }
}

/// The normalised approach's settings, put into the watch's drift settings.
pub(crate) fn normalise(
    problems: &mut Problems,
    path: &str,
    reactor: &RawReactor,
    raw: &RawNormalise,
    watch: &mut WatchSettings,
) {
    let start = problems.len();
    let ipath = format!("{path}.inputs");
    let mut inputs = Vec::new();
    for name in &raw.inputs {
        let c = match name.trim() {
            "throughput" => ContextInput::Throughput,
            "steam_ratio" => ContextInput::SteamRatio,
            "inlet_temperature" => ContextInput::InletTemperature,
            "pressure" => ContextInput::Pressure,
            other => {
                problems.add(
                    ipath.clone(),
                    format!("\"{other}\" is not a context input: throughput, steam_ratio, inlet_temperature or pressure"),
                );
                continue;
            }
        };
        let available = match c {
            ContextInput::Throughput => reactor
                .flow
                .iter()
                .any(|f| matches!(f.stream.as_deref().map(str::trim), Some("inlet" | "outlet"))),
            ContextInput::SteamRatio => reactor
                .steam_ratio
                .as_ref()
                .is_some_and(|s| s.topic.is_some()),
            ContextInput::InletTemperature => {
                reactor.bed_profile.is_some() || reactor.bed_rise.is_some()
            }
            ContextInput::Pressure => true,
        };
        if !available {
            problems.add(
                ipath.clone(),
                format!("\"{}\" needs {}", c.name(), source_of(c)),
            );
        }
        if inputs.contains(&c) {
            problems.add(ipath.clone(), format!("\"{}\" is listed twice", c.name()));
        }
        inputs.push(c);
    }
    if inputs.is_empty() || inputs.len() > crate::normalise::MAX_INPUTS {
        problems.add(
            ipath,
            format!(
                "give 1 to {} context inputs, e.g. [\"throughput\", \"steam_ratio\"]",
                crate::normalise::MAX_INPUTS
            ),
        );
    }
    if matches!(watch.drift.baseline, BaselineSpec::Given { .. }) {
        problems.add(
            path.to_string(),
            "learns over the start-of-run baseline window: needs [drift] baseline = \"learn\"",
        );
    }
    let mut config = crate::normalise::Config::new(
        inputs
            .iter()
            .map(|c| crate::normalise::Input::new(c.name(), c.unit()))
            .collect(),
    );
    if let Some(n) = raw.min_samples {
        let least = inputs.len() as i64 + 10;
        if n < least {
            problems.add(
                format!("{path}.min_samples"),
                format!("{n} is too few: at least {least} (the inputs + 10)"),
            );
        } else {
            config.min_samples = n as u64;
        }
    }
    if let Some(m) = &raw.margin
        && let Some(v) = percent(problems, &format!("{path}.margin"), m, 1.0)
    {
        config.margin = v;
    }
    if problems.len() == start {
        watch.drift.normalise = Some(NormaliseSpec { inputs, config });
    }
}

#[cfg(test)]
mod tests {
    //! Check values: the invented test reactor of `test_support` (fixed steam ratio, no
    //! flows) with tables added.

    use crate::config::test_support::{assert_problems, check, refused, with_broker};
    use crate::monitor::spec::FlowStream;
    use crate::monitor::watch::ContextInput;

    #[test]
    fn flows_and_the_normalisation_are_read() {
        let text = format!(
            r#"{}
[[reactors.hts1.flow]]
tag = "FI-201"
stream = "inlet"
topic = "baw1/hts1/FI-201"
unit = "Nm3/h"
uncertainty = "1 %"
max_age = "2 min"

[reactors.hts1.normalise]
inputs = ["throughput", "pressure"]
min_samples = 50
"#,
            with_broker("url = \"mqtt://127.0.0.1\"")
        );
        let s = check(&text).expect("valid");
        let r = &s.reactors[0];
        assert_eq!(r.spec.flows.len(), 1);
        assert_eq!(r.spec.flows[0].stream, FlowStream::InletDry);
        assert_eq!(r.spec.flows[0].sigma_rel, 0.01);
        assert_eq!(r.wiring.flows[0].topic, "baw1/hts1/FI-201");
        let n = r.spec.watch.drift.normalise.as_ref().expect("normalise");
        assert_eq!(
            n.inputs,
            vec![ContextInput::Throughput, ContextInput::Pressure]
        );
        assert_eq!(n.config.min_samples, 50);
        assert_eq!(n.config.margin, 0.1);
    }

    #[test]
    fn a_context_input_the_reactor_does_not_measure_is_refused_with_what_it_needs() {
        let text = format!(
            r#"{}
[[reactors.hts1.flow]]
stream = "inlet"
topic = "baw1/hts1/FI-201"
unit = "Sm3/h"
max_age = "2 min"

[[reactors.hts1.flow]]
stream = "sideways"
topic = "baw1/hts1/FI-202"
unit = "kmol/h"
max_age = "2 min"

[reactors.hts1.normalise]
inputs = ["steam_ratio", "inlet_temperature", "load"]
min_samples = 5
"#,
            with_broker("url = \"mqtt://127.0.0.1\"")
        );
        assert_problems(
            "normalise without sources",
            &refused(&text),
            &[
                ("reactors.hts1.flow[0].unit", "ambiguous"),
                (
                    "reactors.hts1.flow[1].stream",
                    "\"sideways\" is not a stream",
                ),
                (
                    "reactors.hts1.normalise.inputs",
                    "\"steam_ratio\" needs a measured [steam_ratio]",
                ),
                (
                    "reactors.hts1.normalise.inputs",
                    "\"inlet_temperature\" needs a [bed_profile]",
                ),
                (
                    "reactors.hts1.normalise.inputs",
                    "\"load\" is not a context input",
                ),
                ("reactors.hts1.normalise.min_samples", "at least 12"),
            ],
        );
    }
}
