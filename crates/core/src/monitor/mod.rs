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
pub mod reason;
pub mod spec;
pub mod watch;

use std::collections::BTreeMap;

use buffer::{Lookup, Point, ScalarBuffer};
use reason::Findings;
pub use reason::{Reason, ReasonCode};
use spec::{InputSpec, ReactorSpec, ReconcileSpec, SteamRatioSpec};

use crate::approach::{Approach, Flags, GasState, Scratch};
use crate::composition::{Basis, Component, CompositionError, WaterSource, WetComposition, to_wet};
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
    /// Bed thermocouple number `.0` of the reactor's bed profile.
    BedTemperature(usize, ScalarReading),
    /// Flow meter number `.0` of the reactor's flows (kmol/h).
    Flow(usize, ScalarReading),
    /// The inlet analysis (reconciliation).
    InletAnalysis(AnalysisReading),
}

impl Input {
    /// The reading's own timestamp (for an analysis: its report time).
    pub fn ts_ms(&self) -> i64 {
        match self {
            Input::Temperature(_, r)
            | Input::Pressure(r)
            | Input::SteamRatio(r)
            | Input::Component(_, r)
            | Input::BedTemperature(_, r)
            | Input::Flow(_, r) => r.ts_ms,
            Input::Analysis(a) | Input::InletAnalysis(a) => a.ts_ms,
        }
    }
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
    /// The bed temperature profile where configured: the profile, or why there is none
    /// (the bed inlet or outlet thermocouple missing at the sample time). Bed
    /// thermocouples never change the result's quality: they are not in the approach.
    pub bed_profile: Option<Result<crate::bedprofile::BedProfile, String>>,
    /// Each configured flow at the sample time, kmol/h (None: stale, bad or implausible).
    pub flows: Vec<Option<f64>>,
    /// The normalisation's context inputs at the sample time, in the configured order
    /// (None where the input has no usable value).
    pub context: Vec<Option<f64>>,
    /// The reconciliation where configured: its figures, or why there are none.
    pub reconciliation: Option<Result<Reconciled, String>>,
}

/// A reconciliation of one evaluation.
#[derive(Debug, Clone, PartialEq)]
pub struct Reconciled {
    pub rec: crate::reconcile::Reconciliation,
    /// The inlet analysis used: its sample time.
    pub inlet_sample_ts_ms: i64,
    /// Per reaction, the temperature approach of the reconciled outlet gas (K).
    pub approach_k: Vec<Option<f64>>,
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
    /// A reading stamped outside the clock window ([`spec::ClockWindow`]): refused
    /// before it can touch any ordering state. `ahead_ms` is negative when behind.
    OffClock { ahead_ms: i64 },
}

/// Repeats of an identical analysis that mark the analyser as stuck (3 identical
/// analyses in a row) [common practice: a live GC never repeats every digit].
const STUCK_REPEATS: u32 = 2;

/// The state of one reactor.
#[derive(Debug, Clone)]
pub struct ReactorMonitor {
    temperatures: Vec<ScalarBuffer>,
    bed: Vec<ScalarBuffer>,
    flows: Vec<ScalarBuffer>,
    /// Recent inlet analyses (reconciliation), oldest first.
    inlet: std::collections::VecDeque<AnalysisReading>,
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
/// Inlet analyses kept for the reconciliation (an hour of 5-minute analyses and more).
const INLET_ANALYSES: usize = 16;

use crate::units::duration_ms as ms;

impl ReactorMonitor {
    pub fn new(settings: &ReactorSpec) -> Self {
        Self {
            temperatures: settings
                .temperatures
                .iter()
                .map(|_| ScalarBuffer::new(BUFFER))
                .collect(),
            bed: settings
                .bed_profile
                .iter()
                .flat_map(|b| &b.thermocouples)
                .map(|_| ScalarBuffer::new(BUFFER))
                .collect(),
            flows: settings
                .flows
                .iter()
                .map(|_| ScalarBuffer::new(BUFFER))
                .collect(),
            inlet: std::collections::VecDeque::new(),
            pressure: ScalarBuffer::new(BUFFER),
            steam: ScalarBuffer::new(BUFFER),
            partial: BTreeMap::new(),
            last_analysis_ts: None,
            last_values: Vec::new(),
            repeats: 0,
            scratch: settings.model.scratch(),
        }
    }

    /// Takes one input received at `now_ms`. Analyses (whole, or completed from
    /// components) are evaluated; a reading stamped outside the clock window is refused.
    pub fn accept(
        &mut self,
        s: &ReactorSpec,
        db: &SpeciesDb,
        input: Input,
        now_ms: i64,
    ) -> Outcome {
        if let Some(ahead_ms) = s.clock.outside(input.ts_ms(), now_ms) {
            return Outcome::OffClock { ahead_ms };
        }
        match input {
            Input::Temperature(i, r) => match self.temperatures.get_mut(i) {
                Some(b) => store(b, r),
                None => Outcome::TooOld,
            },
            Input::BedTemperature(i, r) => match self.bed.get_mut(i) {
                Some(b) => store(b, r),
                None => Outcome::TooOld,
            },
            Input::Flow(i, r) => match self.flows.get_mut(i) {
                Some(b) => store(b, r),
                None => Outcome::TooOld,
            },
            Input::InletAnalysis(a) => {
                if s.reconcile.is_none() {
                    return Outcome::TooOld;
                }
                if self.inlet.back().is_some_and(|l| l.ts_ms >= a.ts_ms) {
                    return Outcome::OutOfOrder {
                        last_ts_ms: self.inlet.back().map_or(0, |l| l.ts_ms),
                    };
                }
                self.inlet.push_back(a);
                while self.inlet.len() > INLET_ANALYSES {
                    self.inlet.pop_front();
                }
                Outcome::Stored
            }
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

    /// The evaluation of one analysis, phase by phase: the analysis itself (source
    /// quality, age, stuck analyser, basis), the thermocouples and the transient check,
    /// pressure and steam ratio at the sample time, the components, the wet gas, then
    /// per reaction the approach, the equilibrium composition and the key component.
    fn evaluate(
        &mut self,
        spec: &ReactorSpec,
        db: &SpeciesDb,
        a: &AnalysisReading,
        now_ms: i64,
    ) -> Evaluation {
        let lag = ms(spec.composition.lag);
        let t_sample = a.ts_ms - lag;
        let mut case = Case {
            spec,
            db,
            found: Findings::default(),
            inputs: Vec::new(),
        };
        self.check_analysis(&mut case, a, now_ms);
        let temperatures = self.temperatures(&mut case, t_sample);
        self.check_transient(&mut case, t_sample, lag, temperatures.mean_k);
        let bed_profile = self.bed_profile(&mut case, t_sample);
        let flows = self.flows(&mut case, t_sample);
        let (pressure_bar, steam_ratio) = self.pressure_and_steam(&mut case, t_sample);
        let comps = components(&mut case, a);
        let wet = wet_gas(&mut case, &comps, steam_ratio);
        let mut eval = Evaluation {
            analysis_ts_ms: a.ts_ms,
            sample_ts_ms: t_sample,
            quality: Quality::Good,
            reasons: Vec::new(),
            temperature_k: temperatures.mean_k,
            temperature_spread_k: temperatures.spread_k,
            pressure_bar,
            steam_ratio,
            inputs: std::mem::take(&mut case.inputs),
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
            bed_profile,
            flows,
            context: Vec::new(),
            reconciliation: None,
        };
        if let (Some(w), Some(t), Some(p)) = (&wet, temperatures.mean_k, pressure_bar) {
            let state = GasState {
                temperature_k: t,
                pressure_bar: p,
                y: &w.y,
                steam_ratio: w.steam_ratio.zip(w.added_water),
            };
            self.reactions(&mut case, &state, &mut eval);
            equilibrium_figures(&mut case, &state, &mut eval);
            key_figures(&mut case, w, temperatures.inlet_k, t, &mut eval);
        }
        eval.context = context(spec, &eval, temperatures.inlet_k);
        if let Some(rs) = &spec.reconcile {
            let outlet_bad = a.quality == SourceQuality::Bad || case.found.worst() == Quality::Bad;
            let outlet = ReconcileOutlet {
                comps: &comps,
                t_sample,
                temperature_k: temperatures.mean_k,
                pressure_bar,
            };
            // A bad outlet analysis (a calibration gas, a missing component) is not balanced.
            eval.reconciliation = Some(if outlet_bad {
                Err(format!("the {} analysis is bad", spec.composition.tag))
            } else {
                self.reconcile(spec, rs, db, &eval, &outlet)
            });
        }
        eval.quality = case.found.worst();
        if eval.reactions.is_empty() {
            eval.quality = Quality::Bad;
        }
        eval.reasons = case.found.into_vec();
        eval
    }

    /// The analysis itself: its source quality, its age on arrival, a stuck analyser,
    /// the basis it says against the configured one.
    fn check_analysis(&self, case: &mut Case<'_>, a: &AnalysisReading, now_ms: i64) {
        let spec = case.spec;
        // Source quality and freshness of the analysis itself.
        match a.quality {
            SourceQuality::Good => {}
            SourceQuality::Uncertain => case.found.push(
                ReasonCode::SourceUncertain,
                Quality::Uncertain,
                format!("{} reports uncertain quality", spec.composition.tag),
            ),
            SourceQuality::Bad => case.found.push(
                ReasonCode::SourceBad,
                Quality::Bad,
                format!("{} reports bad quality", spec.composition.tag),
            ),
        }
        let age = now_ms - a.ts_ms;
        if age > ms(spec.composition.max_age) {
            case.found.push(
                ReasonCode::StaleAnalysis,
                Quality::Uncertain,
                format!(
                    "{} analysis is {} s old on arrival (max age {} s)",
                    spec.composition.tag,
                    age / 1000,
                    spec.composition.max_age.as_secs()
                ),
            );
        }
        if self.repeats >= STUCK_REPEATS {
            case.found.push(
                ReasonCode::AnalyserStuck,
                Quality::Bad,
                format!(
                    "{} has repeated identical values {} times: analyser stuck?",
                    spec.composition.tag,
                    self.repeats + 1
                ),
            );
        }
        if let Some(b) = a.basis {
            if b != spec.composition.basis {
                case.found.push(
                    ReasonCode::BasisMismatch,
                    Quality::Bad,
                    format!(
                        "{} says basis {} but the reactor is configured {}",
                        spec.composition.tag,
                        b.as_str(),
                        spec.composition.basis.as_str()
                    ),
                );
            }
        }
    }

    /// Temperature: the average of the fresh thermocouples at the sample time (the bed
    /// inlet thermocouple of a bed-rise check apart), their spread, and the inlet.
    fn temperatures(&self, case: &mut Case<'_>, t_sample: i64) -> Temperatures {
        let spec = case.spec;
        let mut t_values = Vec::new();
        let inlet_index = spec.bed_rise.as_ref().map(|b| b.inlet);
        let mut inlet_k = None;
        for (i, ts) in spec.temperatures.iter().enumerate() {
            let look = self.temperatures[i].at(t_sample, ms(ts.max_age));
            let (value, age_ms, used) = match look {
                Lookup::Value {
                    value,
                    quality,
                    age_ms,
                } => {
                    if quality == SourceQuality::Bad {
                        case.found.push(
                            ReasonCode::SourceBad,
                            Quality::Uncertain,
                            format!("{} reports bad quality; left out", ts.tag),
                        );
                        (Some(value), Some(age_ms), false)
                    } else {
                        if quality == SourceQuality::Uncertain {
                            case.found.push(
                                ReasonCode::SourceUncertain,
                                Quality::Uncertain,
                                format!("{} reports uncertain quality", ts.tag),
                            );
                        }
                        if !ts.plausible.contains(value) {
                            case.found.push(
                                ReasonCode::ImplausibleValue,
                                Quality::Uncertain,
                                implausible(ts, value, "K"),
                            );
                            (Some(value), Some(age_ms), false)
                        } else {
                            if inlet_index == Some(i) {
                                inlet_k = Some(value);
                            } else {
                                t_values.push((i, value));
                            }
                            (Some(value), Some(age_ms), true)
                        }
                    }
                }
                Lookup::Stale { nearest_ts_ms } => {
                    case.found.push(
                    ReasonCode::StaleTemperature,
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
                    case.found.push(
                        ReasonCode::StaleTemperature,
                        Quality::Uncertain,
                        format!("{}: no reading yet; left out", ts.tag),
                    );
                    (None, None, false)
                }
            };
            case.inputs.push(InputUse {
                tag: ts.tag.clone(),
                value,
                unit: "K",
                age_ms,
                used,
            });
        }
        if let Some(out) = disagreeing(&t_values, spec.max_spread_k) {
            let (i, value) = t_values.remove(out);
            let tag = &spec.temperatures[i].tag;
            case.found.push(
                ReasonCode::ThermocouplesDisagree,
                Quality::Uncertain,
                format!(
                    "{tag} reads {value:.1} K, more than {} K from the median of its partners; left out (check the thermocouple)",
                    crate::units::fmt_num(spec.max_spread_k, 3)
                ),
            );
            if let Some(u) = case.inputs.iter_mut().find(|u| u.tag == *tag) {
                u.used = false;
            }
        } else if t_values.len() == 2 && (t_values[0].1 - t_values[1].1).abs() > spec.max_spread_k {
            case.found.push(
                ReasonCode::ThermocouplesDisagree,
                Quality::Uncertain,
                format!(
                    "{} and {} differ by {:.1} K (limit {} K); with two, neither can be ruled out: check both",
                    spec.temperatures[t_values[0].0].tag,
                    spec.temperatures[t_values[1].0].tag,
                    (t_values[0].1 - t_values[1].1).abs(),
                    crate::units::fmt_num(spec.max_spread_k, 3)
                ),
            );
        }
        let t_values: Vec<f64> = t_values.into_iter().map(|(_, v)| v).collect();
        let temperature_k = if t_values.is_empty() {
            case.found.push(
                ReasonCode::NoTemperature,
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
        Temperatures {
            mean_k: temperature_k,
            spread_k: temperature_spread_k,
            inlet_k,
        }
    }

    /// The bed profile from the bed thermocouples fresh at the sample time (bad,
    /// implausible and stale ones left out; they are listed among the inputs as unused).
    fn bed_profile(
        &self,
        case: &mut Case<'_>,
        t_sample: i64,
    ) -> Option<Result<crate::bedprofile::BedProfile, String>> {
        let bp = case.spec.bed_profile.as_ref()?;
        let mut points = Vec::with_capacity(bp.thermocouples.len());
        for (i, ((tc, depth_m), buffer)) in bp.thermocouples.iter().zip(&self.bed).enumerate() {
            if let Some(t_k) = side_input(case, tc, buffer, t_sample, "K") {
                points.push(crate::bedprofile::BedPoint {
                    index: i,
                    depth_m: *depth_m,
                    t_k,
                });
            }
        }
        let n = bp.thermocouples.len();
        Some(bp.geometry.profile(&points, n).ok_or_else(|| {
            let tag = |i: usize| bp.thermocouples.get(i).map_or("?", |t| t.0.tag.as_str());
            format!(
                "no profile: the bed inlet ({}) and outlet ({}) thermocouples must both be usable at the sample time",
                tag(0),
                tag(n.saturating_sub(1))
            )
        }))
    }

    /// Each flow meter at the sample time (bad, implausible and stale readings left out;
    /// flows never change the result's quality).
    fn flows(&self, case: &mut Case<'_>, t_sample: i64) -> Vec<Option<f64>> {
        let spec = case.spec;
        spec.flows
            .iter()
            .zip(&self.flows)
            .map(|(f, buffer)| side_input(case, &f.input, buffer, t_sample, "kmol/h"))
            .collect()
    }

    /// The inlet analysis nearest the sample time (its own sample time: report time
    /// minus its lag) within its maximum age.
    fn inlet_at(&self, rs: &ReconcileSpec, t_sample: i64) -> Option<&AnalysisReading> {
        let lag = ms(rs.inlet.lag);
        self.inlet
            .iter()
            .filter(|a| a.quality != SourceQuality::Bad)
            .filter(|a| (a.ts_ms - lag - t_sample).abs() <= ms(rs.inlet.max_age))
            .min_by_key(|a| (a.ts_ms - lag - t_sample).abs())
    }

    /// The inlet/outlet reconciliation of this evaluation and the approach of the
    /// reconciled outlet gas; or why there is none.
    fn reconcile(
        &mut self,
        spec: &ReactorSpec,
        rs: &ReconcileSpec,
        db: &SpeciesDb,
        eval: &Evaluation,
        out: &ReconcileOutlet<'_>,
    ) -> Result<Reconciled, String> {
        use crate::monitor::spec::FlowStream;
        use crate::reconcile::{Quantity, Stream};
        let inlet = self.inlet_at(rs, out.t_sample).ok_or_else(|| {
            format!(
                "no {} analysis within {} s of the sample time",
                rs.inlet.tag,
                rs.inlet.max_age.as_secs()
            )
        })?;
        let inlet_sample_ts_ms = inlet.ts_ms - ms(rs.inlet.lag);
        let sigma = |y: f64| (rs.analyser_sigma_rel * y).max(rs.analyser_sigma_floor);
        let mut dry_in = Vec::with_capacity(rs.inlet.components.len());
        for (name, v) in rs.inlet.components.iter().zip(&inlet.values) {
            let (Some(i), Some(y)) = (db.index_of(name), *v) else {
                return Err(format!(
                    "{name} is missing from the {} analysis",
                    rs.inlet.tag
                ));
            };
            dry_in.push((
                i,
                Quantity::measured(format!("{} {name}", rs.inlet.tag), y, sigma(y)),
            ));
        }
        if out.comps.len() != spec.composition.components.len() {
            return Err(format!(
                "the {} analysis is incomplete",
                spec.composition.tag
            ));
        }
        let mut dry_out = Vec::with_capacity(out.comps.len());
        for c in out.comps {
            let i = db
                .index_of(&c.species)
                .ok_or_else(|| format!("{} is not in the species data", c.species))?;
            let tag = format!("{} {}", spec.composition.tag, c.species);
            dry_out.push((i, Quantity::measured(tag, c.value, sigma(c.value))));
        }
        let meter = |stream: FlowStream, unmeasured: &str| {
            spec.flows
                .iter()
                .zip(&eval.flows)
                .find(|(f, _)| f.stream == stream)
                .and_then(|(f, v)| {
                    v.map(|x| {
                        Quantity::measured(f.input.tag.clone(), x, (f.sigma_rel * x).max(1e-6))
                    })
                })
                .unwrap_or_else(|| Quantity::unmeasured(unmeasured))
        };
        let inlet_stream = Stream {
            dry_flow: meter(FlowStream::InletDry, "dry gas in"),
            dry: dry_in,
            water: Some(meter(FlowStream::InletSteam, "steam in")),
        };
        let outlet_stream = Stream {
            dry_flow: meter(FlowStream::OutletDry, "dry gas out"),
            dry: dry_out,
            water: Some(Quantity::unmeasured("water out")),
        };
        let rec = crate::reconcile::reconcile(db, &inlet_stream, &outlet_stream, &rs.options)
            .map_err(|e| e.to_string())?;
        let approach_k = self.reconciled_approach(spec, &rec, out);
        Ok(Reconciled {
            rec,
            inlet_sample_ts_ms,
            approach_k,
        })
    }

    /// The approach of the reconciled outlet gas at the measured T and P (model order:
    /// the analysed components, then the water).
    fn reconciled_approach(
        &mut self,
        spec: &ReactorSpec,
        rec: &crate::reconcile::Reconciliation,
        out: &ReconcileOutlet<'_>,
    ) -> Vec<Option<f64>> {
        let model = &spec.model;
        let (Some(t), Some(p), Some(sd)) = (
            out.temperature_k,
            out.pressure_bar,
            rec.outlet_steam_to_dry(),
        ) else {
            return vec![None; model.reactions().len()];
        };
        // A quantity reconciled below zero (the least squares are unbounded; it happens
        // beside a gross error) is no gas to compute with.
        if !rec.below_zero().is_empty() || sd < 0.0 {
            return vec![None; model.reactions().len()];
        }
        let mut y: Vec<f64> = model
            .species()
            .iter()
            .map(|i| {
                rec.outlet_dry_fractions()
                    .iter()
                    .find(|(j, _)| j == i)
                    .map_or(0.0, |(_, v)| *v / (1.0 + sd))
            })
            .collect();
        let water = model.names().iter().position(|n| n == "H2O");
        if let Some(w) = water {
            y[w] = sd / (1.0 + sd);
        }
        let state = GasState {
            temperature_k: t,
            pressure_bar: p,
            y: &y,
            steam_ratio: water.map(|w| (sd, w)),
        };
        model.fugacity(&state, &mut self.scratch);
        (0..model.reactions().len())
            .map(|r| {
                model
                    .evaluate(r, &state, &self.scratch, &spec.uncertainty)
                    .approach_k
            })
            .collect()
    }

    /// Transient: the temperature moved faster than the threshold over the lag window.
    fn check_transient(
        &self,
        case: &mut Case<'_>,
        t_sample: i64,
        lag: i64,
        temperature_k: Option<f64>,
    ) {
        let spec = case.spec;
        let inlet_index = spec.bed_rise.as_ref().map(|b| b.inlet);
        if lag > 0 && !spec.temperatures.is_empty() {
            let earlier: Vec<f64> = self
                .temperatures
                .iter()
                .zip(&spec.temperatures)
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
                if rate > spec.transient_k_per_min {
                    case.found.push(
                    ReasonCode::Transient,
                    Quality::Uncertain,
                    format!(
                        "temperature moved {rate:.1} K/min over the analyser lag (limit {} K/min): the gas analysed was not at this temperature; the result is left out of the trend",
                        crate::units::fmt_num(spec.transient_k_per_min, 3)
                    ),
                );
                }
            }
        }
    }

    /// Pressure, and the steam ratio of a dry analysis, at the sample time.
    fn pressure_and_steam(&self, case: &mut Case<'_>, t_sample: i64) -> (Option<f64>, Option<f64>) {
        let spec = case.spec;
        let pressure_bar = case.aligned(
            &self.pressure,
            &spec.pressure,
            t_sample,
            "bar",
            ReasonCode::StalePressure,
        );
        let steam_ratio = match &spec.steam_ratio {
            None => None,
            Some(SteamRatioSpec::Fixed(v)) => Some(*v),
            Some(SteamRatioSpec::Measured(ss)) => case.aligned(
                &self.steam,
                ss,
                t_sample,
                "mol/mol",
                ReasonCode::StaleSteamRatio,
            ),
        };
        (pressure_bar, steam_ratio)
    }

    /// Fugacity coefficients at this state, then the approach of every reaction with
    /// what its flags say.
    fn reactions(&mut self, case: &mut Case<'_>, state: &GasState<'_>, eval: &mut Evaluation) {
        let spec = case.spec;
        let t = state.temperature_k;
        let model = &spec.model;
        let eos_flags = model.fugacity(state, &mut self.scratch);
        if eos_flags.has(Flags::EOS_FAILED) {
            case.found.push(
                ReasonCode::EosProblem,
                Quality::Uncertain,
                "Peng-Robinson failed at this state; ideal gas used".into(),
            );
        }
        if eos_flags.has(Flags::EOS_MULTIPLE_ROOTS) {
            case.found.push(
                ReasonCode::EosProblem,
                Quality::Uncertain,
                "Peng-Robinson has two roots: a liquid may be present".into(),
            );
        }
        for (i, term) in model.reactions().iter().enumerate() {
            let ap = model.evaluate(i, state, &self.scratch, &spec.uncertainty);
            let label = term.label();
            if ap.flags.has(Flags::ZERO_COMPONENT) {
                case.found.push(
                ReasonCode::ZeroComponent,
                Quality::Bad,
                format!(
                    "{label}: a species is zero, Q is 0 or infinite; report values below detection at the detection limit"
                ),
            );
            }
            if ap.flags.has(Flags::TEMPERATURE_OUTSIDE_DATA) {
                case.found.push(
                    ReasonCode::TemperatureOutsideDataRange,
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
                case.found.push(
                ReasonCode::BeyondEquilibrium,
                Quality::Uncertain,
                format!(
                    "{label}: Q is beyond K ({by}); check the analyser, thermocouple, pressure basis or steam ratio"
                ),
            );
            }
            if ap.flags.has(Flags::AT_EQUILIBRIUM_WITHIN_UNCERTAINTY) {
                // Informational: a negative approach inside its own ± is no data problem.
                case.found.push(
                ReasonCode::AtEquilibriumWithinUncertainty,
                Quality::Good,
                format!(
                    "{label}: Q is past K by less than the uncertainty (approach {:.2} ± {:.2} K): at equilibrium as far as the measurements tell",
                    ap.approach_k.unwrap_or(f64::NAN),
                    ap.approach_uncertainty_k.unwrap_or(f64::NAN)
                ),
            );
            }
            if ap.flags.has(Flags::ENTHALPY_SIGN_CHANGE) {
                case.found.push(
                ReasonCode::EnthalpySignChange,
                Quality::Uncertain,
                format!(
                    "{label}: ΔH° changes sign between {t:.1} K and the equilibrium temperature; no temperature approach"
                ),
            );
            }
            if ap.flags.has(Flags::NO_EQUILIBRIUM_TEMPERATURE) {
                case.found.push(
                    ReasonCode::NoEquilibriumTemperature,
                    Quality::Uncertain,
                    format!("{label}: no temperature in range has K = Q"),
                );
            }
            eval.reactions.push(ap);
        }
        eval.fugacity_coefficients = self.scratch.ln_phi.iter().map(|x| x.exp()).collect();
        eval.compressibility_factor = Some(self.scratch.z);
    }
}

/// One analysis being evaluated: what it is checked against, and what was found and
/// used so far.
struct Case<'a> {
    spec: &'a ReactorSpec,
    db: &'a SpeciesDb,
    found: Findings,
    inputs: Vec<InputUse>,
}

impl Case<'_> {
    /// One required scalar input at the sample time: its value, or `None` with a bad reason
    /// (stale, missing, or reported bad); the use is recorded either way.
    fn aligned(
        &mut self,
        buffer: &ScalarBuffer,
        input: &InputSpec,
        t_sample: i64,
        unit: &'static str,
        stale_code: ReasonCode,
    ) -> Option<f64> {
        match buffer.at(t_sample, ms(input.max_age)) {
            Lookup::Value {
                value,
                quality,
                age_ms,
            } => {
                let plausible = input.plausible.contains(value);
                let used = quality != SourceQuality::Bad && plausible;
                if quality == SourceQuality::Bad {
                    self.found.push(
                        ReasonCode::SourceBad,
                        Quality::Bad,
                        format!("{} reports bad quality", input.tag),
                    );
                } else if !plausible {
                    self.found.push(
                        ReasonCode::ImplausibleValue,
                        Quality::Bad,
                        implausible(input, value, unit),
                    );
                }
                self.inputs.push(InputUse {
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
                self.found.push(
                    stale_code,
                    Quality::Bad,
                    format!(
                        "{}: {what}; check the transmitter and its topic {}",
                        input.tag, input.origin
                    ),
                );
                self.inputs.push(InputUse {
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
}

/// The message for a reading outside its plausible range.
fn implausible(input: &InputSpec, value: f64, unit: &str) -> String {
    let range = input.plausible;
    format!(
        "{}: {} {unit} is outside the plausible {}–{} {unit}; left out (check the transmitter, its range and its configured unit)",
        input.tag,
        crate::units::fmt_num(value, 4),
        crate::units::fmt_num(range.min, 4),
        crate::units::fmt_num(range.max, 4)
    )
}

/// With three or more thermocouples: the position (in `values`) of the one furthest
/// from the median, when it is more than `limit` from it.
fn disagreeing(values: &[(usize, f64)], limit: f64) -> Option<usize> {
    if values.len() < 3 {
        return None;
    }
    let mut sorted: Vec<f64> = values.iter().map(|(_, v)| *v).collect();
    sorted.sort_by(f64::total_cmp);
    let n = sorted.len();
    let median = if n % 2 == 1 {
        sorted[n / 2]
    } else {
        0.5 * (sorted[n / 2 - 1] + sorted[n / 2])
    };
    let (at, far) = values
        .iter()
        .enumerate()
        .map(|(k, (_, v))| (k, (v - median).abs()))
        .max_by(|a, b| a.1.total_cmp(&b.1))?;
    (far > limit).then_some(at)
}

/// The thermocouples at the sample time.
struct Temperatures {
    /// Average of the usable outlet thermocouples.
    mean_k: Option<f64>,
    /// Highest minus lowest of them (two or more).
    spread_k: Option<f64>,
    /// The bed inlet of a bed-rise check.
    inlet_k: Option<f64>,
}

/// The analysis: every component present, finite and not negative (below a detection
/// limit: taken at the limit).
fn components(case: &mut Case<'_>, a: &AnalysisReading) -> Vec<Component> {
    let spec = case.spec;
    // The analysis: every component present, finite and not negative.
    let mut comps = Vec::with_capacity(a.values.len());
    for (name, v) in spec.composition.components.iter().zip(&a.values) {
        match v {
            None => case.found.push(
                ReasonCode::MissingComponent,
                Quality::Bad,
                format!(
                    "{} is missing from the {} analysis",
                    name, spec.composition.tag
                ),
            ),
            Some(x) if !x.is_finite() => case.found.push(
                ReasonCode::BadValue,
                Quality::Bad,
                format!(
                    "{name} is not a number in the {} analysis",
                    spec.composition.tag
                ),
            ),
            Some(x) if *x < 0.0 => case.found.push(
                ReasonCode::NegativeValue,
                Quality::Bad,
                format!(
                    "{name} = {x} is negative in the {} analysis",
                    spec.composition.tag
                ),
            ),
            Some(x) => {
                let limit = spec
                    .composition
                    .detection_limits
                    .get(comps.len())
                    .copied()
                    .flatten();
                let value = match limit {
                    // Below the detection limit: taken at the limit (so Q stays finite)
                    // and said so [common practice for reporting non-detects].
                    Some(dl) if *x < dl => {
                        case.found.push(
                            ReasonCode::BelowDetectionLimit,
                            Quality::Good,
                            format!(
                                "{name} {} is below the {} detection limit of {}; taken at the limit",
                                fmt_fraction(*x),
                                spec.composition.tag,
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
    comps
}

/// The wet gas of a complete analysis (a dry one with its steam ratio), normalised
/// inside the sum tolerance; `None` with a reason otherwise.
fn wet_gas(
    case: &mut Case<'_>,
    comps: &[Component],
    steam_ratio: Option<f64>,
) -> Option<WetComposition> {
    let (spec, db) = (case.spec, case.db);
    let complete = comps.len() == spec.composition.components.len();
    if complete {
        let water = match spec.composition.basis {
            Basis::Dry => steam_ratio.map(WaterSource::SteamRatio),
            Basis::Wet => None,
        };
        if spec.composition.basis == Basis::Dry && water.is_none() {
            None
        } else {
            match to_wet(
                db,
                comps,
                spec.composition.basis,
                water,
                spec.composition.sum_tolerance,
            ) {
                Ok(w) => {
                    if (w.analysed_sum - 1.0).abs() > 1e-9 {
                        case.found.push(
                            ReasonCode::CompositionNormalised,
                            Quality::Good,
                            format!(
                                "{} summed to {:.3} mol%; normalised",
                                spec.composition.tag,
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
                    case.found.push(
                        ReasonCode::SumOutsideTolerance,
                        Quality::Bad,
                        format!(
                            "{} sums to {sum_percent:.3} mol%, outside 100 ± {tolerance_percent} mol%",
                            spec.composition.tag
                        ),
                    );
                    None
                }
                Err(e) => {
                    case.found.push(
                        ReasonCode::BadValue,
                        Quality::Bad,
                        format!("{}: {e}", spec.composition.tag),
                    );
                    None
                }
            }
        }
    } else {
        None
    }
}

/// The equilibrium composition at the measured T and P with the same element inventory,
/// and the key component's equilibrium fraction.
fn equilibrium_figures(case: &mut Case<'_>, state: &GasState<'_>, eval: &mut Evaluation) {
    let (spec, db) = (case.spec, case.db);
    let model = &spec.model;
    let (t, p) = (state.temperature_k, state.pressure_bar);
    let eq = spec.equilibrium.solve(
        db,
        t,
        p,
        &reorder(&spec.equilibrium, model.species(), state.y),
    );
    if eq.converged {
        let key_eq = spec
            .equilibrium
            .species()
            .iter()
            .position(|x| *x == spec.key_component);
        eval.key_equilibrium = key_eq.map(|i| eq.mole_fractions[i]);
        eval.equilibrium_mole_fractions = model
            .species()
            .iter()
            .map(|sp| {
                spec.equilibrium
                    .species()
                    .iter()
                    .position(|x| x == sp)
                    .map_or(f64::NAN, |i| eq.mole_fractions[i])
            })
            .collect();
    } else {
        case.found.push(
            ReasonCode::EquilibriumNotConverged,
            Quality::Uncertain,
            format!("equilibrium composition not found: {}", eq.reason),
        );
    }
}

/// The key component measured (and on the analyser's basis), the wet mole fractions,
/// approaches withdrawn below detection, and the methanator bed rise.
fn key_figures(
    case: &mut Case<'_>,
    w: &WetComposition,
    inlet_k: Option<f64>,
    t: f64,
    eval: &mut Evaluation,
) {
    let (spec, db) = (case.spec, case.db);
    let model = &spec.model;
    eval.key_measured = model
        .species()
        .iter()
        .position(|x| *x == spec.key_component)
        .map(|i| w.y[i]);
    let water = model
        .names()
        .iter()
        .position(|n| n == "H2O")
        .map(|i| w.y[i]);
    eval.key_measured_on_basis = eval
        .key_measured
        .map(|y| on_basis(y, water, spec.composition.basis));
    eval.mole_fractions.clone_from(&w.y);
    not_meaningful_below_detection(spec, eval, &mut case.found);
    if let (Some(b), Some(t_in)) = (&spec.bed_rise, inlet_k) {
        let gas = model.species().iter().copied().zip(w.y.iter().copied());
        eval.bed_rise = crate::bedrise::rise_per_mol_percent(db, gas, 0.5 * (t_in + t))
            .map(|r| crate::bedrise::BedRise::new(t_in, t, r, b.inlet_co_co2));
    }
}

/// A reading that does not enter the approach (a bed thermocouple, a flow meter) at the
/// sample time: listed among the inputs, and its value when fresh, not bad and plausible.
/// It never changes the result's quality.
fn side_input(
    case: &mut Case<'_>,
    spec: &InputSpec,
    buffer: &ScalarBuffer,
    t_sample: i64,
    unit: &'static str,
) -> Option<f64> {
    let (value, age_ms, used) = match buffer.at(t_sample, ms(spec.max_age)) {
        Lookup::Value {
            value,
            quality,
            age_ms,
        } => {
            let used = quality != SourceQuality::Bad && spec.plausible.contains(value);
            (Some(value), Some(age_ms), used)
        }
        Lookup::Stale { .. } | Lookup::Empty => (None, None, false),
    };
    case.inputs.push(InputUse {
        tag: spec.tag.clone(),
        value,
        unit,
        age_ms,
        used,
    });
    value.filter(|_| used)
}

/// What the reconciliation takes from the outlet side of an evaluation.
struct ReconcileOutlet<'a> {
    comps: &'a [Component],
    t_sample: i64,
    temperature_k: Option<f64>,
    pressure_bar: Option<f64>,
}

/// The normalisation's context inputs, in the configured order.
fn context(spec: &ReactorSpec, eval: &Evaluation, inlet_k: Option<f64>) -> Vec<Option<f64>> {
    use crate::monitor::spec::FlowStream;
    use crate::monitor::watch::ContextInput;
    let Some(n) = &spec.watch.drift.normalise else {
        return Vec::new();
    };
    let flow = |stream: FlowStream| {
        spec.flows
            .iter()
            .zip(&eval.flows)
            .find(|(f, _)| f.stream == stream)
            .and_then(|(_, v)| *v)
    };
    let bed_inlet = match &eval.bed_profile {
        Some(Ok(p)) => Some(p.inlet_k),
        _ => None,
    };
    n.inputs
        .iter()
        .map(|c| match c {
            ContextInput::Throughput => {
                if spec.flows.iter().any(|f| f.stream == FlowStream::InletDry) {
                    flow(FlowStream::InletDry)
                } else {
                    flow(FlowStream::OutletDry)
                }
            }
            ContextInput::SteamRatio => eval.steam_ratio,
            ContextInput::InletTemperature => bed_inlet.or(inlet_k),
            ContextInput::Pressure => eval.pressure_bar,
        })
        .collect()
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
/// [common practice at methanators: docs/domain.md §10].
fn not_meaningful_below_detection(s: &ReactorSpec, eval: &mut Evaluation, found: &mut Findings) {
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
        found.push(
            ReasonCode::ApproachNotMeaningful,
            Quality::Good,
            format!(
                "{}: equilibrium {c} is {} ({} basis), below the {} detection limit of {}, so no analysis can show the approach; watch the measured {c} slip against its limit instead",
                term.label(),
                fmt_fraction(eq),
                basis.as_str(),
                s.composition.tag,
                fmt_fraction(dl)
            ),
        );
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
