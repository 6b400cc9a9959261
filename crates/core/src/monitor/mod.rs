//! Per-reactor monitoring state: alignment of thermocouples, pressure and steam ratio to
//! each analysis, quality checks, and the evaluation of the approach with the core.
//!
//! Pure: no I/O, no clock (the caller passes `now_ms`), no runtime. Bad data is data:
//! every analysis that is accepted gives an [`Evaluation`] with a quality and reasons;
//! missing values are `None`, never a zero or a default. Duplicates and out-of-order
//! analyses are refused with an [`Outcome`] the caller counts.

pub mod alarm;
pub mod buffer;
pub mod drift;
pub mod spec;
pub mod watch;

use std::collections::BTreeMap;

use buffer::{Lookup, Point, ScalarBuffer};
use spec::{InputSpec, ReactorSpec, SteamRatioSpec};

use crate::approach::{Approach, Flags, GasState, Scratch};
use crate::composition::{Basis, Component, CompositionError, WaterSource, to_wet};
use crate::thermo::species::SpeciesDb;
use crate::units::CompositionUnit;

/// Quality an instrument or gateway attached to a reading.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum SourceQuality {
    Good,
    Uncertain,
    Bad,
}

impl SourceQuality {
    pub fn worst(self, other: Self) -> Self {
        self.max(other)
    }
    pub fn parse(s: &str) -> Option<Self> {
        match s.trim().to_ascii_lowercase().as_str() {
            "good" | "ok" | "192" => Some(Self::Good),
            "uncertain" | "suspect" | "64" => Some(Self::Uncertain),
            "bad" | "0" => Some(Self::Bad),
            _ => None,
        }
    }
}

/// Quality of a published result.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Quality {
    Good,
    Uncertain,
    Bad,
}

impl Quality {
    pub fn as_str(self) -> &'static str {
        match self {
            Self::Good => "good",
            Self::Uncertain => "uncertain",
            Self::Bad => "bad",
        }
    }
}

/// Why a result is not good: a stable code and a message for the engineer.
#[derive(Debug, Clone, PartialEq)]
pub struct Reason {
    pub code: &'static str,
    pub severity: Quality,
    pub message: String,
}

/// A scalar reading in fixed units (K, bar absolute, or a ratio).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ScalarReading {
    pub ts_ms: i64,
    pub value: f64,
    pub quality: SourceQuality,
}

/// A whole analysis: one value per configured component (mole fraction), `None` where
/// the message lacked it.
#[derive(Debug, Clone, PartialEq)]
pub struct AnalysisReading {
    pub ts_ms: i64,
    pub values: Vec<Option<f64>>,
    /// The basis the message states, if it states one.
    pub basis: Option<Basis>,
    pub quality: SourceQuality,
}

/// A decoded input for one reactor.
#[derive(Debug, Clone, PartialEq)]
pub enum Input {
    /// Thermocouple number `.0` of the reactor's list.
    Temperature(usize, ScalarReading),
    Pressure(ScalarReading),
    SteamRatio(ScalarReading),
    Analysis(AnalysisReading),
    /// One component (index into the configured components) of a per-component analyser.
    Component(usize, ScalarReading),
}

/// An input as used in an evaluation.
#[derive(Debug, Clone, PartialEq)]
pub struct InputUse {
    pub tag: String,
    pub value: Option<f64>,
    pub unit: &'static str,
    pub age_ms: Option<i64>,
    pub used: bool,
}

/// One evaluated analysis.
#[derive(Debug, Clone, PartialEq)]
pub struct Evaluation {
    /// The analysis timestamp as reported, and the time the gas was sampled
    /// (reported minus the configured lag), to which T and P were aligned.
    pub analysis_ts_ms: i64,
    pub sample_ts_ms: i64,
    pub quality: Quality,
    pub reasons: Vec<Reason>,
    pub temperature_k: Option<f64>,
    pub temperature_spread_k: Option<f64>,
    pub pressure_bar: Option<f64>,
    pub steam_ratio: Option<f64>,
    pub inputs: Vec<InputUse>,
    /// Wet mole fractions in the model's species order (empty when the analysis was refused).
    pub mole_fractions: Vec<f64>,
    pub fugacity_coefficients: Vec<f64>,
    pub compressibility_factor: Option<f64>,
    /// One per configured reaction (empty when T, P or the analysis were unusable).
    pub reactions: Vec<Approach>,
    pub equilibrium_mole_fractions: Vec<f64>,
    pub key_measured: Option<f64>,
    pub key_equilibrium: Option<f64>,
    /// The measured key component on the analyser's basis (what its ppm alarm compares).
    pub key_measured_on_basis: Option<f64>,
    /// The temperature approach was withdrawn for at least one reaction because the
    /// equilibrium amount is below the analyser's detection limit: the key component's
    /// measured slip is the headline figure.
    pub approach_not_meaningful: bool,
    /// The bed temperature rise check, where configured and the inlet was measured.
    pub bed_rise: Option<crate::bedrise::BedRise>,
}

/// What happened to an input.
#[derive(Debug, Clone, PartialEq)]
pub enum Outcome {
    /// Buffered; nothing to publish yet.
    Stored,
    /// An analysis was evaluated.
    Evaluated(Box<Evaluation>),
    /// An analysis with the timestamp of one already evaluated (redelivery): ignored.
    Duplicate,
    /// An analysis older than the last evaluated one: refused so that the retained
    /// result never goes back in time.
    OutOfOrder { last_ts_ms: i64 },
    /// A scalar too old to be used.
    TooOld,
}

/// Repeats of an identical analysis that mark the analyser as stuck (3 identical
/// analyses in a row) [common practice: a live GC never repeats every digit].
const STUCK_REPEATS: u32 = 2;

/// The state of one reactor.
#[derive(Debug, Clone)]
pub struct ReactorMonitor {
    temperatures: Vec<ScalarBuffer>,
    pressure: ScalarBuffer,
    steam: ScalarBuffer,
    /// Per-component assembly: sample timestamp -> values.
    partial: BTreeMap<i64, (Vec<Option<f64>>, SourceQuality)>,
    last_analysis_ts: Option<i64>,
    last_values: Vec<Option<f64>>,
    repeats: u32,
    scratch: Scratch,
}

const BUFFER: usize = 256;

use crate::units::duration_ms as ms;

impl ReactorMonitor {
    pub fn new(settings: &ReactorSpec) -> Self {
        Self {
            temperatures: settings
                .temperatures
                .iter()
                .map(|_| ScalarBuffer::new(BUFFER))
                .collect(),
            pressure: ScalarBuffer::new(BUFFER),
            steam: ScalarBuffer::new(BUFFER),
            partial: BTreeMap::new(),
            last_analysis_ts: None,
            last_values: Vec::new(),
            repeats: 0,
            scratch: settings.model.scratch(),
        }
    }

    /// Takes one input. Analyses (whole, or completed from components) are evaluated.
    pub fn accept(
        &mut self,
        s: &ReactorSpec,
        db: &SpeciesDb,
        input: Input,
        now_ms: i64,
    ) -> Outcome {
        match input {
            Input::Temperature(i, r) => match self.temperatures.get_mut(i) {
                Some(b) => store(b, r),
                None => Outcome::TooOld,
            },
            Input::Pressure(r) => store(&mut self.pressure, r),
            Input::SteamRatio(r) => store(&mut self.steam, r),
            Input::Analysis(a) => self.analysis(s, db, a, now_ms),
            Input::Component(c, r) => {
                let n = s.composition.components.len();
                if c >= n {
                    return Outcome::TooOld;
                }
                let entry = self
                    .partial
                    .entry(r.ts_ms)
                    .or_insert_with(|| (vec![None; n], SourceQuality::Good));
                entry.0[c] = Some(r.value);
                entry.1 = entry.1.worst(r.quality);
                if entry.0.iter().all(Option::is_some) {
                    let Some((values, quality)) = self.partial.remove(&r.ts_ms) else {
                        return Outcome::Stored;
                    };
                    // Older partial analyses can no longer complete in order.
                    self.partial.retain(|ts, _| *ts > r.ts_ms);
                    let a = AnalysisReading {
                        ts_ms: r.ts_ms,
                        values,
                        basis: None,
                        quality,
                    };
                    return self.analysis(s, db, a, now_ms);
                }
                // Keep the assembly small: at most 8 open analyses.
                while self.partial.len() > 8 {
                    self.partial.pop_first();
                }
                Outcome::Stored
            }
        }
    }

    fn analysis(
        &mut self,
        s: &ReactorSpec,
        db: &SpeciesDb,
        a: AnalysisReading,
        now_ms: i64,
    ) -> Outcome {
        if let Some(last) = self.last_analysis_ts {
            if a.ts_ms == last {
                return Outcome::Duplicate;
            }
            if a.ts_ms < last {
                return Outcome::OutOfOrder { last_ts_ms: last };
            }
        }
        self.last_analysis_ts = Some(a.ts_ms);
        if a.values == self.last_values {
            self.repeats += 1;
        } else {
            self.repeats = 0;
            self.last_values.clone_from(&a.values);
        }
        Outcome::Evaluated(Box::new(self.evaluate(s, db, &a, now_ms)))
    }

    fn evaluate(
        &mut self,
        s: &ReactorSpec,
        db: &SpeciesDb,
        a: &AnalysisReading,
        now_ms: i64,
    ) -> Evaluation {
        let lag = ms(s.composition.lag);
        let t_sample = a.ts_ms - lag;
        let mut reasons: Vec<Reason> = Vec::new();
        let mut push = |code: &'static str, severity: Quality, message: String| {
            reasons.push(Reason {
                code,
                severity,
                message,
            })
        };
        let mut inputs = Vec::new();

        // Source quality and freshness of the analysis itself.
        match a.quality {
            SourceQuality::Good => {}
            SourceQuality::Uncertain => push(
                "source_uncertain",
                Quality::Uncertain,
                format!("{} reports uncertain quality", s.composition.tag),
            ),
            SourceQuality::Bad => push(
                "source_bad",
                Quality::Bad,
                format!("{} reports bad quality", s.composition.tag),
            ),
        }
        let age = now_ms - a.ts_ms;
        if age > ms(s.composition.max_age) {
            push(
                "stale_analysis",
                Quality::Uncertain,
                format!(
                    "{} analysis is {} s old on arrival (max age {} s)",
                    s.composition.tag,
                    age / 1000,
                    s.composition.max_age.as_secs()
                ),
            );
        }
        if self.repeats >= STUCK_REPEATS {
            push(
                "analyser_stuck",
                Quality::Bad,
                format!(
                    "{} has repeated identical values {} times: analyser stuck?",
                    s.composition.tag,
                    self.repeats + 1
                ),
            );
        }
        if let Some(b) = a.basis {
            if b != s.composition.basis {
                push(
                    "basis_mismatch",
                    Quality::Bad,
                    format!(
                        "{} says basis {} but the reactor is configured {}",
                        s.composition.tag,
                        b.as_str(),
                        s.composition.basis.as_str()
                    ),
                );
            }
        }

        // Temperature: average of the fresh thermocouples at the sample time (the bed
        // inlet thermocouple of a bed-rise check apart).
        let mut t_values = Vec::new();
        let inlet_index = s.bed_rise.as_ref().map(|b| b.inlet);
        let mut inlet_k = None;
        for (i, ts) in s.temperatures.iter().enumerate() {
            let look = self.temperatures[i].at(t_sample, ms(ts.max_age));
            let (value, age_ms, used) = match look {
                Lookup::Value {
                    value,
                    quality,
                    age_ms,
                } => {
                    if quality == SourceQuality::Bad {
                        push(
                            "source_bad",
                            Quality::Uncertain,
                            format!("{} reports bad quality; left out", ts.tag),
                        );
                        (Some(value), Some(age_ms), false)
                    } else {
                        if quality == SourceQuality::Uncertain {
                            push(
                                "source_uncertain",
                                Quality::Uncertain,
                                format!("{} reports uncertain quality", ts.tag),
                            );
                        }
                        if inlet_index == Some(i) {
                            inlet_k = Some(value);
                        } else {
                            t_values.push(value);
                        }
                        (Some(value), Some(age_ms), true)
                    }
                }
                Lookup::Stale { nearest_ts_ms } => {
                    push(
                        "stale_temperature",
                        Quality::Uncertain,
                        format!(
                            "{}: no reading within {} s of the sample time (nearest {} s away); left out",
                            ts.tag,
                            ts.max_age.as_secs(),
                            (nearest_ts_ms - t_sample).abs() / 1000
                        ),
                    );
                    (None, None, false)
                }
                Lookup::Empty => {
                    push(
                        "stale_temperature",
                        Quality::Uncertain,
                        format!("{}: no reading yet; left out", ts.tag),
                    );
                    (None, None, false)
                }
            };
            inputs.push(InputUse {
                tag: ts.tag.clone(),
                value,
                unit: "K",
                age_ms,
                used,
            });
        }
        let temperature_k = if t_values.is_empty() {
            push(
                "no_temperature",
                Quality::Bad,
                "no usable outlet temperature at the sample time".into(),
            );
            None
        } else {
            Some(t_values.iter().sum::<f64>() / t_values.len() as f64)
        };
        let temperature_spread_k = (t_values.len() > 1).then(|| {
            t_values.iter().fold(f64::NEG_INFINITY, |m, v| m.max(*v))
                - t_values.iter().fold(f64::INFINITY, |m, v| m.min(*v))
        });
        // Transient: the temperature moved faster than the threshold over the lag window.
        if lag > 0 && !s.temperatures.is_empty() {
            let earlier: Vec<f64> = self
                .temperatures
                .iter()
                .zip(&s.temperatures)
                .enumerate()
                .filter(|(i, _)| inlet_index != Some(*i))
                .filter_map(|(_, (b, ts))| match b.at(t_sample - lag, ms(ts.max_age)) {
                    Lookup::Value { value, .. } => Some(value),
                    _ => None,
                })
                .collect();
            if let (Some(now_t), false) = (temperature_k, earlier.is_empty()) {
                let then_t = earlier.iter().sum::<f64>() / earlier.len() as f64;
                let rate = (now_t - then_t).abs() / (lag as f64 / 60_000.0);
                if rate > s.transient_k_per_min {
                    push(
                        "transient",
                        Quality::Uncertain,
                        format!(
                            "temperature moved {rate:.1} K/min over the analyser lag (limit {} K/min): the gas analysed was not at this temperature; the result is left out of the trend",
                            crate::units::fmt_num(s.transient_k_per_min, 3)
                        ),
                    );
                }
            }
        }

        // Pressure, and the steam ratio of a dry analysis, at the sample time.
        let pressure_bar = aligned(
            &self.pressure,
            &s.pressure,
            t_sample,
            "bar",
            "stale_pressure",
            &mut push,
            &mut inputs,
        );
        let steam_ratio = match &s.steam_ratio {
            None => None,
            Some(SteamRatioSpec::Fixed(v)) => Some(*v),
            Some(SteamRatioSpec::Measured(ss)) => aligned(
                &self.steam,
                ss,
                t_sample,
                "mol/mol",
                "stale_steam_ratio",
                &mut push,
                &mut inputs,
            ),
        };

        // The analysis: every component present, finite and not negative.
        let mut comps = Vec::with_capacity(a.values.len());
        for (name, v) in s.composition.components.iter().zip(&a.values) {
            match v {
                None => push(
                    "missing_component",
                    Quality::Bad,
                    format!(
                        "{} is missing from the {} analysis",
                        name, s.composition.tag
                    ),
                ),
                Some(x) if !x.is_finite() => push(
                    "bad_value",
                    Quality::Bad,
                    format!(
                        "{name} is not a number in the {} analysis",
                        s.composition.tag
                    ),
                ),
                Some(x) if *x < 0.0 => push(
                    "negative_value",
                    Quality::Bad,
                    format!(
                        "{name} = {x} is negative in the {} analysis",
                        s.composition.tag
                    ),
                ),
                Some(x) => {
                    let limit = s
                        .composition
                        .detection_limits
                        .get(comps.len())
                        .copied()
                        .flatten();
                    let value = match limit {
                        // Below the detection limit: taken at the limit (so Q stays finite)
                        // and said so [common practice for reporting non-detects].
                        Some(dl) if *x < dl => {
                            push(
                                "below_detection_limit",
                                Quality::Good,
                                format!(
                                    "{name} {} is below the {} detection limit of {}; taken at the limit",
                                    fmt_fraction(*x),
                                    s.composition.tag,
                                    fmt_fraction(dl)
                                ),
                            );
                            dl
                        }
                        _ => *x,
                    };
                    comps.push(Component {
                        species: name.clone(),
                        value,
                        unit: CompositionUnit::Fraction,
                    })
                }
            }
        }
        let mut eval = Evaluation {
            analysis_ts_ms: a.ts_ms,
            sample_ts_ms: t_sample,
            quality: Quality::Good,
            reasons: Vec::new(),
            temperature_k,
            temperature_spread_k,
            pressure_bar,
            steam_ratio,
            inputs,
            mole_fractions: Vec::new(),
            fugacity_coefficients: Vec::new(),
            compressibility_factor: None,
            reactions: Vec::new(),
            equilibrium_mole_fractions: Vec::new(),
            key_measured: None,
            key_equilibrium: None,
            key_measured_on_basis: None,
            approach_not_meaningful: false,
            bed_rise: None,
        };
        let complete = comps.len() == s.composition.components.len();
        let wet = if complete {
            let water = match s.composition.basis {
                Basis::Dry => steam_ratio.map(WaterSource::SteamRatio),
                Basis::Wet => None,
            };
            if s.composition.basis == Basis::Dry && water.is_none() {
                None
            } else {
                match to_wet(
                    db,
                    &comps,
                    s.composition.basis,
                    water,
                    s.composition.sum_tolerance,
                ) {
                    Ok(w) => {
                        if (w.analysed_sum - 1.0).abs() > 1e-9 {
                            push(
                                "composition_normalised",
                                Quality::Good,
                                format!(
                                    "{} summed to {:.3} mol%; normalised",
                                    s.composition.tag,
                                    w.analysed_sum * 100.0
                                ),
                            );
                        }
                        Some(w)
                    }
                    Err(CompositionError::Sum {
                        sum_percent,
                        tolerance_percent,
                        ..
                    }) => {
                        push(
                            "sum_outside_tolerance",
                            Quality::Bad,
                            format!(
                                "{} sums to {sum_percent:.3} mol%, outside 100 ± {tolerance_percent} mol%",
                                s.composition.tag
                            ),
                        );
                        None
                    }
                    Err(e) => {
                        push(
                            "bad_value",
                            Quality::Bad,
                            format!("{}: {e}", s.composition.tag),
                        );
                        None
                    }
                }
            }
        } else {
            None
        };

        if let (Some(w), Some(t), Some(p)) = (&wet, temperature_k, pressure_bar) {
            let model = &s.model;
            let state = GasState {
                temperature_k: t,
                pressure_bar: p,
                y: &w.y,
                steam_ratio: w.steam_ratio.zip(w.added_water),
            };
            let eos_flags = model.fugacity(&state, &mut self.scratch);
            if eos_flags.has(Flags::EOS_FAILED) {
                push(
                    "eos_problem",
                    Quality::Uncertain,
                    "Peng-Robinson failed at this state; ideal gas used".into(),
                );
            }
            if eos_flags.has(Flags::EOS_MULTIPLE_ROOTS) {
                push(
                    "eos_problem",
                    Quality::Uncertain,
                    "Peng-Robinson has two roots: a liquid may be present".into(),
                );
            }
            for (i, term) in model.reactions().iter().enumerate() {
                let ap = model.evaluate(i, &state, &self.scratch, &s.uncertainty);
                let label = term.reaction.canonical();
                if ap.flags.has(Flags::ZERO_COMPONENT) {
                    push(
                        "zero_component",
                        Quality::Bad,
                        format!(
                            "{label}: a species is zero, Q is 0 or infinite; report values below detection at the detection limit"
                        ),
                    );
                }
                if ap.flags.has(Flags::TEMPERATURE_OUTSIDE_DATA) {
                    push(
                        "temperature_outside_data_range",
                        Quality::Uncertain,
                        format!(
                            "{label}: {t:.1} K is outside the {} range",
                            term.k.id().as_str()
                        ),
                    );
                }
                if ap.flags.has(Flags::BEYOND_EQUILIBRIUM) {
                    let by = match (ap.approach_k, ap.approach_uncertainty_k) {
                        (Some(a), Some(u)) if u > 0.0 => format!("approach {a:.2} ± {u:.2} K"),
                        (Some(a), _) => format!("approach {a:.2} K, no uncertainty configured"),
                        (None, _) => format!("Q/K = {:.4}", ap.q_over_k),
                    };
                    push(
                        "beyond_equilibrium",
                        Quality::Uncertain,
                        format!(
                            "{label}: Q is beyond K ({by}); check the analyser, thermocouple, pressure basis or steam ratio"
                        ),
                    );
                }
                if ap.flags.has(Flags::AT_EQUILIBRIUM_WITHIN_UNCERTAINTY) {
                    // Informational: a negative approach inside its own ± is no data problem.
                    push(
                        "at_equilibrium_within_uncertainty",
                        Quality::Good,
                        format!(
                            "{label}: Q is past K by less than the uncertainty (approach {:.2} ± {:.2} K): at equilibrium as far as the measurements tell",
                            ap.approach_k.unwrap_or(f64::NAN),
                            ap.approach_uncertainty_k.unwrap_or(f64::NAN)
                        ),
                    );
                }
                if ap.flags.has(Flags::ENTHALPY_SIGN_CHANGE) {
                    push(
                        "enthalpy_sign_change",
                        Quality::Uncertain,
                        format!(
                            "{label}: ΔH° changes sign between {t:.1} K and the equilibrium temperature; no temperature approach"
                        ),
                    );
                }
                if ap.flags.has(Flags::NO_EQUILIBRIUM_TEMPERATURE) {
                    push(
                        "no_equilibrium_temperature",
                        Quality::Uncertain,
                        format!("{label}: no temperature in range has K = Q"),
                    );
                }
                eval.reactions.push(ap);
            }
            eval.fugacity_coefficients = self.scratch.ln_phi.iter().map(|x| x.exp()).collect();
            eval.compressibility_factor = Some(self.scratch.z);
            // Equilibrium at the measured T and P, same element inventory.
            let eq = s
                .equilibrium
                .solve(db, t, p, &reorder(&s.equilibrium, model.species(), &w.y));
            if eq.converged {
                let key_eq = s
                    .equilibrium
                    .species()
                    .iter()
                    .position(|x| *x == s.key_component);
                eval.key_equilibrium = key_eq.map(|i| eq.mole_fractions[i]);
                eval.equilibrium_mole_fractions = model
                    .species()
                    .iter()
                    .map(|sp| {
                        s.equilibrium
                            .species()
                            .iter()
                            .position(|x| x == sp)
                            .map_or(f64::NAN, |i| eq.mole_fractions[i])
                    })
                    .collect();
            } else {
                push(
                    "equilibrium_not_converged",
                    Quality::Uncertain,
                    format!("equilibrium composition not found: {}", eq.reason),
                );
            }
            eval.key_measured = model
                .species()
                .iter()
                .position(|x| *x == s.key_component)
                .map(|i| w.y[i]);
            let water = model
                .names()
                .iter()
                .position(|n| n == "H2O")
                .map(|i| w.y[i]);
            eval.key_measured_on_basis = eval
                .key_measured
                .map(|y| on_basis(y, water, s.composition.basis));
            eval.mole_fractions.clone_from(&w.y);
            not_meaningful_below_detection(s, &mut eval, &mut push);
            if let (Some(b), Some(t_in)) = (&s.bed_rise, inlet_k) {
                let gas = model.species().iter().copied().zip(w.y.iter().copied());
                eval.bed_rise = crate::bedrise::rise_per_mol_percent(db, gas, 0.5 * (t_in + t))
                    .map(|r| crate::bedrise::BedRise::new(t_in, t, r, b.inlet_co_co2));
            }
        }
        eval.quality = reasons
            .iter()
            .map(|r| r.severity)
            .max()
            .unwrap_or(Quality::Good);
        if eval.reactions.is_empty() {
            eval.quality = Quality::Bad;
        }
        eval.reasons = reasons;
        eval
    }
}

/// A mole fraction for a message: ppm below 0.1 mol%, else mol%.
pub fn fmt_fraction(y: f64) -> String {
    if y.abs() < 1e-3 {
        format!("{} ppm", crate::units::fmt_num(y * 1e6, 3))
    } else {
        format!("{} mol%", crate::units::fmt_num(y * 100.0, 4))
    }
}

/// A mole fraction of the wet gas on the analyser's basis (dry: water taken out).
pub fn on_basis(y: f64, water: Option<f64>, basis: Basis) -> f64 {
    match (basis, water) {
        (Basis::Dry, Some(w)) if w < 1.0 => y / (1.0 - w),
        _ => y,
    }
}

/// Kinetically limited units: where the equilibrium amount of an analysed component of a
/// reaction is below the analyser's detection limit, no measurement can tell how close
/// the gas is to equilibrium, so that reaction's temperature approach is withdrawn (null
/// with a reason) and the key component's measured slip is the headline figure
/// [common practice at methanators: DOMAIN §10].
fn not_meaningful_below_detection(
    s: &ReactorSpec,
    eval: &mut Evaluation,
    push: &mut impl FnMut(&'static str, Quality, String),
) {
    if s.composition.detection_limits.iter().all(Option::is_none)
        || eval.equilibrium_mole_fractions.is_empty()
    {
        return;
    }
    let names = s.model.names();
    let basis = s.composition.basis;
    let water_eq = names
        .iter()
        .position(|n| n == "H2O")
        .and_then(|i| eval.equilibrium_mole_fractions.get(i).copied());
    for (r, term) in s.model.reactions().iter().enumerate() {
        let below = s
            .composition
            .components
            .iter()
            .zip(&s.composition.detection_limits)
            .filter_map(|(c, dl)| dl.map(|dl| (c, dl)))
            .find_map(|(c, dl)| {
                let i = names.iter().position(|n| n == c)?;
                let eq = on_basis(*eval.equilibrium_mole_fractions.get(i)?, water_eq, basis);
                (term.nu().get(i).is_some_and(|nu| *nu != 0.0) && eq.is_finite() && eq < dl)
                    .then_some((c, eq, dl))
            });
        let Some((c, eq, dl)) = below else {
            continue;
        };
        let Some(ap) = eval.reactions.get_mut(r) else {
            continue;
        };
        if ap.approach_k.is_none() {
            continue;
        }
        ap.approach_k = None;
        ap.approach_uncertainty_k = None;
        ap.equilibrium_temperature_k = None;
        eval.approach_not_meaningful = true;
        push(
            "approach_not_meaningful",
            Quality::Good,
            format!(
                "{}: equilibrium {c} is {} ({} basis), below the {} detection limit of {}, so no analysis can show the approach; watch the measured {c} slip against its limit instead",
                term.reaction.canonical(),
                fmt_fraction(eq),
                basis.as_str(),
                s.composition.tag,
                fmt_fraction(dl)
            ),
        );
    }
}

/// One required scalar input at the sample time: its value, or `None` with a bad reason
/// (stale, missing, or reported bad); the use is recorded either way.
fn aligned(
    buffer: &ScalarBuffer,
    input: &InputSpec,
    t_sample: i64,
    unit: &'static str,
    stale_code: &'static str,
    push: &mut impl FnMut(&'static str, Quality, String),
    inputs: &mut Vec<InputUse>,
) -> Option<f64> {
    match buffer.at(t_sample, ms(input.max_age)) {
        Lookup::Value {
            value,
            quality,
            age_ms,
        } => {
            let used = quality != SourceQuality::Bad;
            if !used {
                push(
                    "source_bad",
                    Quality::Bad,
                    format!("{} reports bad quality", input.tag),
                );
            }
            inputs.push(InputUse {
                tag: input.tag.clone(),
                value: Some(value),
                unit,
                age_ms: Some(age_ms),
                used,
            });
            used.then_some(value)
        }
        other => {
            let what = match other {
                Lookup::Stale { nearest_ts_ms } => format!(
                    "the nearest reading is {} s from the sample time, over its max age of {} s",
                    (nearest_ts_ms - t_sample).abs() / 1000,
                    input.max_age.as_secs()
                ),
                _ => "no reading has arrived yet".to_string(),
            };
            push(
                stale_code,
                Quality::Bad,
                format!(
                    "{}: {what}; check the transmitter and its topic {}",
                    input.tag, input.origin
                ),
            );
            inputs.push(InputUse {
                tag: input.tag.clone(),
                value: None,
                unit,
                age_ms: None,
                used: false,
            });
            None
        }
    }
}

/// Moles in the equilibrium system's order from mole fractions in the model's order.
fn reorder(
    sys: &crate::equilibrium::EquilibriumSystem,
    model_species: &[usize],
    y: &[f64],
) -> Vec<f64> {
    sys.species()
        .iter()
        .map(|s| {
            model_species
                .iter()
                .position(|m| m == s)
                .map_or(0.0, |i| y[i])
        })
        .collect()
}

fn store(b: &mut ScalarBuffer, r: ScalarReading) -> Outcome {
    if b.insert(Point {
        ts_ms: r.ts_ms,
        value: r.value,
        quality: r.quality,
    }) {
        Outcome::Stored
    } else {
        Outcome::TooOld
    }
}
