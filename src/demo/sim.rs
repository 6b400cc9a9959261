//! The demo plant: an invented ammonia works ("Brackwater Ammonia Works", train 1,
//! tags `BAW1-...`, topics `baw1/...`) whose instruments publish MQTT-style readings
//! for the one-command demo. Every number here is invented for the demo; none is
//! taken from, or meant to resemble, a real plant.
//!
//! Physics: each reactor's outlet is the equilibrium gas of a fixed feed at a
//! prescribed equilibrium temperature per reaction, T_eq = T − approach for an
//! endothermic reaction (the reformer's methane reaction) and T + approach for an
//! exothermic one (shift, methanation, ammonia synthesis). The gas is found with the
//! crate's own [`EquilibriumSystem`]: each reaction is given a constant K equal to its
//! real K (from its configured source) at its own T_eq, and the system is solved at the
//! measured temperature and pressure, so fugacity coefficients are those the monitor
//! itself uses. Read back by [`crate::approach::ReactorModel`], a noise-free analysis
//! therefore shows the prescribed approach to within the reporting resolution. Where a
//! reactor's steam ratio is a fixed number in the demo configuration, the feed water is
//! chosen (bisection, once, when the plant is built) so that the outlet gas has that
//! steam-to-dry-gas ratio.
//!
//! Instruments publish on their own periods: analysers every GC cycle (5 min), stamped
//! with their sample time and published one minute later; thermocouples and pressure
//! transmitters every 10 s; flow-ratio computations every 30 s. Noise is
//! counter-based (a hash of seed, instrument and sample number), so the readings do
//! not depend on how often [`Plant::step`] is called. Analyser messages are retained.
//!
//! Injected faults (times in simulated seconds from the start; see [`SCENARIO`]):
//! sulphur poisoning of the reformer (methane approach 8 K → 25 K over 5 min from
//! 30 min, configurable), the HTS analyser stuck from 20 to 35 min, the second LTS
//! thermocouple silent after 15 min, and the LTS approach creeping up 0.2 K per hour.
//!
//! Year history: [`write_history`] writes one invented year of the same plant as CSV
//! (one row per minute; the scenario in [`YEAR_SCENARIO`]) for `eqwatch replay`. It
//! reuses the physics above at each minute's temperature and pressure, with its own
//! scenario and counter-based noise; the live demo's scenario is untouched.
//!
//! Pure: no clock; the caller passes simulated time (the history writes to a caller's
//! `Write`).

use crate::composition::Basis;
use crate::equilibrium::{EosKind, EquilibriumSystem};
use crate::thermo::ksource::{KModel, KSourceId, StandardPressure, UserPolynomial};
use crate::thermo::reaction::{Reaction, parse_reaction};
use crate::thermo::species::SpeciesDb;
use crate::units::STANDARD_ATMOSPHERE_BAR;

/// One message for the broker.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SimMessage {
    pub topic: String,
    pub payload: String,
    pub retain: bool,
}

/// Something the demo's console may announce: a fault or process change, with its
/// simulated time.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ScenarioEvent {
    /// Simulated seconds from the start.
    pub at_s: f64,
    /// Reactor id (`ref1`, `hts1`, ...).
    pub reactor: &'static str,
    pub description: &'static str,
}

/// The default scenario in words, for the demo's console.
pub const SCENARIO: &str = "\
Brackwater Ammonia Works, train 1 (invented demo plant, simulated data)
  t = 15 min  lts1: thermocouple TI-305B stops reporting (stale input)
  t = 20 min  hts1: analyser AI-201 sticks and repeats its last analysis
  t = 30 min  ref1: sulphur poisoning; methane approach rises from 8 K to 25 K over 5 min
  t = 35 min  hts1: analyser AI-201 recovers
  t = 40 min  mth1: CO breakthrough; outlet CO from ~2 ppm to ~9 ppm for 15 min (alarm at 5 ppm)
  all along   lts1: catalyst ageing, approach +0.2 K per hour from 10 K";

/// Analyser cycle, s.
pub const GC_CYCLE_S: f64 = 300.0;
/// Sample-to-report delay of every analyser, s.
pub const ANALYSER_DELAY_S: f64 = 60.0;
/// Default start of the reformer's sulphur poisoning, s.
pub const DEFAULT_SULPHUR_STEP_S: f64 = 1800.0;
/// Time for the reformer's approach to reach its poisoned value, s.
pub const SULPHUR_RAMP_S: f64 = 300.0;
/// The HTS analyser repeats its last analysis for samples taken in this window, s.
pub const HTS_STUCK_WINDOW_S: (f64, f64) = (1200.0, 2100.0);
/// TI-305B publishes nothing sampled after this, s.
pub const LTS_TI_B_SILENT_AFTER_S: f64 = 900.0;

/// The methanator's CO breakthrough in the live demo (CO removal upset upstream), s.
pub const MTH_BREAKTHROUGH_S: (f64, f64) = (2400.0, 3300.0);
/// The year history's methanator breakthrough: day 150 from 10:00, 6 h.
const YEAR_MTH_BREAKTHROUGH_S: (f64, f64) =
    (150.0 * 86_400.0 + 36_000.0, 150.0 * 86_400.0 + 57_600.0);

/// Methanator outlet CO and CO2 as dry mole fractions: a kinetic slip of a few ppm, far
/// above the equilibrium slip (~1e-7 ppm at 600 K), as real methanators show; during a
/// breakthrough window the CO slip climbs to about 9 ppm (ramps of 5 min either side).
/// `wobble` in [−1, 1] moves it by ±0.3 ppm. Invented for the demo.
fn methanator_slip(t_s: f64, window: (f64, f64), wobble: f64) -> (f64, f64) {
    let extra = 7.2 * breakthrough(t_s, window);
    (
        (1.8 + 0.3 * wobble + extra) * 1e-6,
        (0.9 + 0.2 * wobble) * 1e-6,
    )
}

/// 0 outside the window, 1 inside it, with 5-minute ramps.
fn breakthrough(t_s: f64, window: (f64, f64)) -> f64 {
    let up = smoothstep((t_s - window.0) / 300.0);
    let down = 1.0 - smoothstep((t_s - window.1) / 300.0);
    up.min(down)
}

/// The methanator bed's rise with its design inlet (0.18 mol % CO, 0.05 mol % CO2, as in
/// the demo configuration; about 73 and 60 K per mol %), K. Invented for the demo.
pub const MTH_DESIGN_RISE_K: f64 = 16.1;
/// Extra rise during a breakthrough (inlet CO up by about 0.32 mol %), K.
const MTH_BREAKTHROUGH_RISE_K: f64 = 23.0;

/// Puts the methanator's kinetic CO/CO2 slip into `y` (reported components' truth, in
/// `reported` order), scaled to the dry gas of the other components.
fn apply_methanator_slip(
    reported: &[(usize, &'static str, ReportedUnit)],
    y: &mut [f64],
    slip: (f64, f64),
) {
    let other: f64 = reported
        .iter()
        .zip(y.iter())
        .filter(|((_, n, _), _)| *n != "CO" && *n != "CO2")
        .map(|(_, v)| *v)
        .sum();
    for ((_, name, _), v) in reported.iter().zip(y.iter_mut()) {
        match *name {
            "CO" => *v = slip.0 * other,
            "CO2" => *v = slip.1 * other,
            _ => {}
        }
    }
}

const TI_NOISE_K: f64 = 0.5;
const PI_NOISE_BAR: f64 = 0.02;
const RATIO_NOISE_REL: f64 = 0.002;
const ANALYSER_NOISE_REL: f64 = 0.002;

/// How a reaction's prescribed approach moves with time.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Profile {
    Constant(f64),
    /// From `before` to `after` along a smooth ramp starting at the sulphur step.
    SulphurStep {
        before: f64,
        after: f64,
    },
    /// Catalyst ageing: `start` plus `per_hour` K per simulated hour.
    Creep {
        start: f64,
        per_hour: f64,
    },
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum ReportedUnit {
    Percent,
    Ppm,
}

impl ReportedUnit {
    fn label(self) -> &'static str {
        match self {
            ReportedUnit::Percent => "mol%",
            ReportedUnit::Ppm => "ppm",
        }
    }
    fn per_fraction(self) -> f64 {
        match self {
            ReportedUnit::Percent => 1e2,
            ReportedUnit::Ppm => 1e6,
        }
    }
}

/// A simulated reactor: its gas, its reactions and how it is run.
#[derive(Debug, Clone)]
struct Reactor {
    id: &'static str,
    /// The reactions with their real K(T).
    reactions: Vec<(Reaction, KModel)>,
    profiles: Vec<Profile>,
    /// Per reaction: endothermic (T_eq = T − approach) or exothermic (T + approach).
    endothermic: Vec<bool>,
    /// Database indices of the gas species.
    species: Vec<usize>,
    /// Feed moles in `species` order (water calibrated in `Plant::new`).
    feed: Vec<f64>,
    water: Option<usize>,
    eos: EosKind,
    t_k: f64,
    p_barg: f64,
    basis: Basis,
    /// Reported components: (position in `species`, name, unit).
    reported: Vec<(usize, &'static str, ReportedUnit)>,
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Kind {
    Temperature,
    /// A bed inlet thermocouple (the methanator's bed-rise check).
    InletTemperature,
    /// lts1's bed thermocouple number `.0` of [`LTS_BED`].
    BedTemperature(usize),
    /// lts1's flow meter number `.0` of [`LTS_FLOWS`] (kmol/h, JSON).
    Flow(usize),
    /// lts1's inlet analyser (one JSON message, dry mol %).
    InletAnalyser,
    Pressure,
    /// Steam-to-dry-gas ratio as a bare number.
    RatioBare,
    /// Steam-to-dry-gas ratio as JSON.
    RatioJson,
    /// One JSON message with every component.
    Analyser,
    /// One topic per component (`<topic>/<species>`), same ts.
    AnalyserPerComponent,
}

#[derive(Debug, Clone)]
struct Instrument {
    topic: String,
    kind: Kind,
    reactor: usize,
    period_s: f64,
    delay_s: f64,
    silent_after_s: Option<f64>,
    stuck_window_s: Option<(f64, f64)>,
    /// Index of the next sample.
    next: u64,
}

/// The simulated plant. See the module docs.
#[derive(Debug, Clone)]
pub struct Plant {
    db: SpeciesDb,
    seed: u64,
    start_epoch_ms: i64,
    noise: bool,
    sulphur_step_s: Option<f64>,
    reactors: Vec<Reactor>,
    instruments: Vec<Instrument>,
}

/// A computed outlet gas: mole fractions in the reactor's `species` order.
#[derive(Debug, Clone)]
struct Outlet {
    y: Vec<f64>,
}

impl Outlet {
    fn steam_ratio(&self, water: Option<usize>) -> f64 {
        match water {
            Some(w) => {
                let yw = self.y[w];
                if yw < 1.0 { yw / (1.0 - yw) } else { f64::NAN }
            }
            None => 0.0,
        }
    }
}

fn splitmix64(x: u64) -> u64 {
    let mut z = x.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

fn smoothstep(x: f64) -> f64 {
    let x = x.clamp(0.0, 1.0);
    x * x * (3.0 - 2.0 * x)
}

/// `x` with `decimals` places, as a JSON number (`null` if not finite).
fn fixed(x: f64, decimals: usize) -> String {
    if x.is_finite() {
        format!("{x:.decimals$}")
    } else {
        "null".into()
    }
}

/// `x` with four significant digits, as a JSON number.
fn significant(x: f64) -> String {
    if x.is_finite() {
        format!("{x:.3e}")
    } else {
        "null".into()
    }
}

/// One sample of one instrument: which, when drawn (s) and when stamped (epoch ms).
struct Sample {
    inst: usize,
    k: u64,
    t_s: f64,
    ts_ms: i64,
}

fn message(topic: String, payload: String, retain: bool) -> SimMessage {
    SimMessage {
        topic,
        payload,
        retain,
    }
}

impl Plant {
    /// The plant at simulated time 0, with readings stamped `start_epoch_ms + t·1000`.
    pub fn new(seed: u64, start_epoch_ms: i64) -> Self {
        let db = SpeciesDb::builtin();
        let mut reactors = Vec::new();
        for spec in &REACTORS {
            // The specs are fixed text checked by the tests; a reactor that cannot be
            // built is left out rather than stopping the demo.
            if let Some(r) = spec.build(&db) {
                reactors.push(r);
            }
        }
        let mut plant = Self {
            db,
            seed,
            start_epoch_ms,
            noise: true,
            sulphur_step_s: Some(DEFAULT_SULPHUR_STEP_S),
            reactors,
            instruments: Vec::new(),
        };
        for spec in &REACTORS {
            let ri = plant.reactors.iter().position(|r| r.id == spec.id);
            if let (Some(target), Some(ri)) = (spec.target_steam_ratio, ri) {
                plant.calibrate_water(ri, target);
            }
        }
        plant.instruments = plant.build_instruments();
        plant
    }

    /// With noise (the default) or noise-free readings.
    pub fn with_noise(mut self, noise: bool) -> Self {
        self.noise = noise;
        self
    }

    /// When the reformer's sulphur poisoning starts (simulated s), or `None` for never.
    pub fn with_sulphur_step(mut self, at_s: Option<f64>) -> Self {
        self.sulphur_step_s = at_s.filter(|t| t.is_finite());
        self
    }

    /// The injected faults and process changes of this plant, in time order.
    pub fn scenario(&self) -> Vec<ScenarioEvent> {
        let mut v = vec![
            ScenarioEvent {
                at_s: LTS_TI_B_SILENT_AFTER_S,
                reactor: "lts1",
                description: "thermocouple TI-305B stops reporting",
            },
            ScenarioEvent {
                at_s: HTS_STUCK_WINDOW_S.0,
                reactor: "hts1",
                description: "analyser AI-201 sticks: it repeats its last analysis",
            },
            ScenarioEvent {
                at_s: HTS_STUCK_WINDOW_S.1,
                reactor: "hts1",
                description: "analyser AI-201 recovers",
            },
        ];
        v.push(ScenarioEvent {
            at_s: MTH_BREAKTHROUGH_S.0,
            reactor: "mth1",
            description: "CO breakthrough from upstream: outlet CO climbs from ~2 ppm to ~9 ppm for 15 min",
        });
        if let Some(t) = self.sulphur_step_s {
            v.push(ScenarioEvent {
                at_s: t,
                reactor: "ref1",
                description: "sulphur poisoning: methane approach rises from 8 K to 25 K over 5 min",
            });
        }
        v.sort_by(|a, b| a.at_s.total_cmp(&b.at_s));
        v
    }

    /// Scenario events with `from_s < at_s <= to_s`.
    pub fn events_between(&self, from_s: f64, to_s: f64) -> Vec<ScenarioEvent> {
        self.scenario()
            .into_iter()
            .filter(|e| e.at_s > from_s && e.at_s <= to_s)
            .collect()
    }

    /// The approach (K) the simulator prescribes for reaction `reaction` of reactor
    /// `reactor_id` at `sim_time_s` (the truth the monitor should find).
    pub fn prescribed_approach_k(
        &self,
        reactor_id: &str,
        reaction: usize,
        sim_time_s: f64,
    ) -> Option<f64> {
        let r = self.reactors.iter().find(|r| r.id == reactor_id)?;
        let p = r.profiles.get(reaction)?;
        Some(self.approach(*p, sim_time_s))
    }

    /// Every message due since the previous call, up to and including `sim_time_s`
    /// (the first call reports everything from time 0). Ordered by publish time.
    pub fn step(&mut self, sim_time_s: f64) -> Vec<SimMessage> {
        if !sim_time_s.is_finite() {
            return Vec::new();
        }
        let mut due: Vec<(f64, usize, u64)> = Vec::new();
        for (i, inst) in self.instruments.iter_mut().enumerate() {
            loop {
                let sample_s = inst.next as f64 * inst.period_s;
                let publish_s = sample_s + inst.delay_s;
                if publish_s > sim_time_s {
                    break;
                }
                due.push((publish_s, i, inst.next));
                inst.next += 1;
            }
        }
        due.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
        let mut out = Vec::new();
        for (_, i, k) in due {
            self.render(i, k, &mut out);
        }
        out
    }

    fn approach(&self, p: Profile, t_s: f64) -> f64 {
        match p {
            Profile::Constant(a) => a,
            Profile::SulphurStep { before, after } => match self.sulphur_step_s {
                Some(at) => before + (after - before) * smoothstep((t_s - at) / SULPHUR_RAMP_S),
                None => before,
            },
            Profile::Creep { start, per_hour } => start + per_hour * t_s.max(0.0) / 3600.0,
        }
    }

    fn pressure_bar_abs(r: &Reactor) -> f64 {
        r.p_barg + STANDARD_ATMOSPHERE_BAR
    }

    /// The outlet gas of reactor `ri` at `t_s` for its feed.
    fn outlet(&self, ri: usize, t_s: f64) -> Option<Outlet> {
        let r = &self.reactors[ri];
        let eq_temps: Vec<f64> = r
            .profiles
            .iter()
            .zip(&r.endothermic)
            .map(|(p, &endo)| {
                let a = self.approach(*p, t_s);
                if endo { r.t_k - a } else { r.t_k + a }
            })
            .collect();
        self.solve_outlet(r, &r.feed, &eq_temps, r.t_k, Self::pressure_bar_abs(r))
    }

    /// The equilibrium gas of `feed` at `t_k`, `p_bar` (absolute) when each reaction's
    /// K is its real K at its own equilibrium temperature `eq_temps[i]`.
    fn solve_outlet(
        &self,
        r: &Reactor,
        feed: &[f64],
        eq_temps: &[f64],
        t_k: f64,
        p_bar: f64,
    ) -> Option<Outlet> {
        // Each reaction gets a constant K: its real K at its own equilibrium temperature.
        let mut fixed_k = Vec::with_capacity(r.reactions.len());
        for ((rx, k), &t_eq) in r.reactions.iter().zip(eq_temps) {
            let poly = UserPolynomial {
                reaction: rx.text.clone(),
                a: 0.0,
                b: 0.0,
                c: k.ln_k(t_eq),
                d: 0.0,
                e: 0.0,
                f: 0.0,
                standard: StandardPressure::Bar,
                t_min_k: 1.0,
                t_max_k: 10_000.0,
            };
            let km = KModel::from_user_polynomial(&poly, rx, &self.db).ok()?;
            fixed_k.push((rx.clone(), km));
        }
        let sys =
            EquilibriumSystem::from_reactions(&self.db, &fixed_k, &r.species, r.eos, None).ok()?;
        // The system orders species reactive first; map the feed across.
        let order: Vec<usize> = sys
            .species()
            .iter()
            .map(|s| r.species.iter().position(|x| x == s))
            .collect::<Option<Vec<_>>>()?;
        let moles_in: Vec<f64> = order.iter().map(|&i| feed[i]).collect();
        let res = sys.solve(&self.db, t_k, p_bar, &moles_in);
        if !res.converged {
            return None;
        }
        let mut y = vec![0.0; r.species.len()];
        for (k, &i) in order.iter().enumerate() {
            y[i] = res.mole_fractions[k];
        }
        Some(Outlet { y })
    }

    /// Sets the feed water of reactor `ri` so that its outlet at time 0 has the
    /// steam-to-dry-gas ratio `target` (bisection on the feed water).
    fn calibrate_water(&mut self, ri: usize, target: f64) {
        let Some(w) = self.reactors[ri].water else {
            return;
        };
        let r = self.reactors[ri].clone();
        let eq_temps: Vec<f64> = r
            .profiles
            .iter()
            .zip(&r.endothermic)
            .map(|(p, &endo)| {
                let a = self.approach(*p, 0.0);
                if endo { r.t_k - a } else { r.t_k + a }
            })
            .collect();
        let ratio_for = |water: f64| -> Option<f64> {
            let mut feed = r.feed.clone();
            feed[w] = water;
            self.solve_outlet(&r, &feed, &eq_temps, r.t_k, Self::pressure_bar_abs(&r))
                .map(|o| o.steam_ratio(Some(w)))
        };
        let dry: f64 = r
            .feed
            .iter()
            .enumerate()
            .filter(|(i, _)| *i != w)
            .map(|(_, x)| x)
            .sum();
        let (mut lo, mut hi) = (0.0, 4.0 * dry);
        for _ in 0..80 {
            let mid = 0.5 * (lo + hi);
            match ratio_for(mid) {
                Some(s) if s.is_finite() => {
                    if s < target {
                        lo = mid;
                    } else {
                        hi = mid;
                    }
                }
                _ => return,
            }
        }
        self.reactors[ri].feed[w] = 0.5 * (lo + hi);
    }

    fn build_instruments(&self) -> Vec<Instrument> {
        let mut v = Vec::new();
        let mut add = |topic: &str, kind: Kind, reactor: &str, period_s: f64| {
            if let Some(ri) = self.reactors.iter().position(|r| r.id == reactor) {
                let delay_s = match kind {
                    Kind::Analyser | Kind::AnalyserPerComponent | Kind::InletAnalyser => {
                        ANALYSER_DELAY_S
                    }
                    _ => 0.0,
                };
                v.push(Instrument {
                    topic: topic.to_string(),
                    kind,
                    reactor: ri,
                    period_s,
                    delay_s,
                    silent_after_s: None,
                    stuck_window_s: None,
                    next: 0,
                });
            }
        };
        add("baw1/ref1/AI-101", Kind::Analyser, "ref1", GC_CYCLE_S);
        add("baw1/ref1/TI-105A", Kind::Temperature, "ref1", 10.0);
        add("baw1/ref1/TI-105B", Kind::Temperature, "ref1", 10.0);
        add("baw1/ref1/PI-102", Kind::Pressure, "ref1", 10.0);
        add("baw1/ref1/FY-110", Kind::RatioBare, "ref1", 30.0);
        add("baw1/hts1/AI-201", Kind::Analyser, "hts1", GC_CYCLE_S);
        add("baw1/hts1/TI-205", Kind::Temperature, "hts1", 10.0);
        add("baw1/hts1/PI-202", Kind::Pressure, "hts1", 10.0);
        add("baw1/lts1/AI-301", Kind::Analyser, "lts1", GC_CYCLE_S);
        add("baw1/lts1/TI-305A", Kind::Temperature, "lts1", 10.0);
        add("baw1/lts1/TI-305B", Kind::Temperature, "lts1", 10.0);
        for (j, (tag, _)) in LTS_BED.iter().enumerate() {
            let topic = format!("baw1/lts1/{}", tag.trim_start_matches("BAW1-"));
            add(&topic, Kind::BedTemperature(j), "lts1", 10.0);
        }
        add("baw1/lts1/AI-300", Kind::InletAnalyser, "lts1", GC_CYCLE_S);
        for (j, tag) in LTS_FLOWS.iter().enumerate() {
            let topic = format!("baw1/lts1/{}", tag.trim_start_matches("BAW1-"));
            add(&topic, Kind::Flow(j), "lts1", 10.0);
        }
        add("baw1/lts1/PI-302", Kind::Pressure, "lts1", 10.0);
        add("baw1/lts1/FY-310", Kind::RatioJson, "lts1", 30.0);
        add(
            "baw1/mth1/AI-401",
            Kind::AnalyserPerComponent,
            "mth1",
            GC_CYCLE_S,
        );
        add("baw1/mth1/TI-405", Kind::Temperature, "mth1", 10.0);
        add("baw1/mth1/TI-401", Kind::InletTemperature, "mth1", 10.0);
        add("baw1/mth1/PI-402", Kind::Pressure, "mth1", 10.0);
        add("baw1/amc1/AI-501", Kind::Analyser, "amc1", GC_CYCLE_S);
        add("baw1/amc1/TI-505", Kind::Temperature, "amc1", 10.0);
        add("baw1/amc1/PI-502", Kind::Pressure, "amc1", 10.0);
        for inst in &mut v {
            if inst.topic == "baw1/hts1/AI-201" {
                inst.stuck_window_s = Some(HTS_STUCK_WINDOW_S);
            }
            if inst.topic == "baw1/lts1/TI-305B" {
                inst.silent_after_s = Some(LTS_TI_B_SILENT_AFTER_S);
            }
        }
        v
    }

    /// Uniform noise in [−1, 1) for (instrument, sample, channel); 0 when noise is off.
    fn noise(&self, inst: usize, sample: u64, channel: u64) -> f64 {
        if !self.noise {
            return 0.0;
        }
        let h = splitmix64(
            self.seed
                ^ splitmix64(((inst as u64) << 40) ^ splitmix64(sample ^ splitmix64(channel))),
        );
        (h >> 11) as f64 / (1u64 << 53) as f64 * 2.0 - 1.0
    }

    fn epoch_ms(&self, t_s: f64) -> i64 {
        self.start_epoch_ms + (t_s * 1000.0).round() as i64
    }

    /// Appends the messages of sample `k` of instrument `i`.
    fn render(&self, i: usize, k: u64, out: &mut Vec<SimMessage>) {
        let inst = &self.instruments[i];
        let sample_s = k as f64 * inst.period_s;
        if inst.silent_after_s.is_some_and(|t| sample_s > t) {
            return;
        }
        // Analysers stamp a result when they report it, `delay_s` after the sample was
        // drawn (the daemon subtracts the configured lag to get back to the sample time).
        let sample = Sample {
            inst: i,
            k,
            t_s: sample_s,
            ts_ms: self.epoch_ms(sample_s + inst.delay_s),
        };
        match inst.kind {
            Kind::Temperature | Kind::InletTemperature | Kind::BedTemperature(_) => {
                self.render_temperature(&sample, out)
            }
            Kind::Pressure => self.render_pressure(&sample, out),
            Kind::Flow(j) => self.render_flow(&sample, j, out),
            Kind::InletAnalyser => self.render_inlet_analysis(&sample, out),
            Kind::RatioBare | Kind::RatioJson => self.render_ratio(&sample, out),
            Kind::Analyser | Kind::AnalyserPerComponent => self.render_analyser(&sample, out),
        }
    }

    fn render_temperature(&self, sample: &Sample, out: &mut Vec<SimMessage>) {
        let inst = &self.instruments[sample.inst];
        let r = &self.reactors[inst.reactor];
        let ts = sample.ts_ms;
        // The methanator's outlet follows its bed rise; its inlet sits below it.
        let rise = if r.id == "mth1" {
            MTH_BREAKTHROUGH_RISE_K * breakthrough(sample.t_s, MTH_BREAKTHROUGH_S)
        } else {
            0.0
        };
        let base = match inst.kind {
            Kind::InletTemperature => r.t_k - MTH_DESIGN_RISE_K,
            // The front moves down the bed at the demo's compressed pace.
            Kind::BedTemperature(j) => {
                let dead = LTS_DEAD_LAYER_M + LTS_DEMO_DEAD_LAYER_M_PER_H * sample.t_s / 3600.0;
                let depth = LTS_BED.get(j).map_or(0.0, |b| b.1);
                r.t_k - LTS_BED_RISE_K * (1.0 - lts_bed_fraction(depth, dead))
            }
            _ => r.t_k + rise,
        };
        let t_c = base - 273.15 + TI_NOISE_K * self.noise(sample.inst, sample.k, 0);
        out.push(message(
            inst.topic.clone(),
            format!(
                "{{\"ts\":{ts},\"value\":{},\"unit\":\"degC\",\"quality\":\"good\"}}",
                fixed(t_c, 2)
            ),
            false,
        ));
    }

    /// lts1's flows at a load swinging ±3 % over 20 simulated minutes (the live demo's
    /// approach does not follow it: its normalisation learns a flat response).
    fn render_flow(&self, sample: &Sample, j: usize, out: &mut Vec<SimMessage>) {
        let inst = &self.instruments[sample.inst];
        let r = &self.reactors[inst.reactor];
        let Some(o) = self.outlet(inst.reactor, sample.t_s) else {
            return;
        };
        let load = 1.0 + 0.03 * (std::f64::consts::TAU * sample.t_s / 1200.0).sin();
        let Some(f) = lts_flows(r, &o, load).get(j).copied() else {
            return;
        };
        let v = f * (1.0 + FLOW_NOISE_REL * self.noise(sample.inst, sample.k, 0));
        let ts = sample.ts_ms;
        out.push(message(
            inst.topic.clone(),
            format!(
                "{{\"ts\":{ts},\"value\":{},\"unit\":\"kmol/h\",\"quality\":\"good\"}}",
                fixed(v, 1)
            ),
            false,
        ));
    }

    /// lts1's inlet analysis (its feed, with analyser noise; no drift in the live demo).
    fn render_inlet_analysis(&self, sample: &Sample, out: &mut Vec<SimMessage>) {
        let inst = &self.instruments[sample.inst];
        let r = &self.reactors[inst.reactor];
        let values = lts_inlet_analysis(r, -1.0, |c| self.noise(sample.inst, sample.k, c as u64));
        let body: Vec<String> = LTS_INLET_COMPONENTS
            .iter()
            .zip(&values)
            .map(|(name, v)| format!("\"{name}\":{}", fixed(*v, 4)))
            .collect();
        out.push(message(
            inst.topic.clone(),
            format!(
                "{{\"ts\":{},\"values\":{{{}}},\"unit\":\"mol%\",\"basis\":\"dry\",\"quality\":\"good\"}}",
                sample.ts_ms,
                body.join(",")
            ),
            true,
        ));
    }

    fn render_pressure(&self, sample: &Sample, out: &mut Vec<SimMessage>) {
        let inst = &self.instruments[sample.inst];
        let r = &self.reactors[inst.reactor];
        let ts = sample.ts_ms;
        let p = r.p_barg + PI_NOISE_BAR * self.noise(sample.inst, sample.k, 0);
        out.push(message(
            inst.topic.clone(),
            format!(
                "{{\"ts\":{ts},\"value\":{},\"unit\":\"barg\",\"quality\":\"good\"}}",
                fixed(p, 3)
            ),
            false,
        ));
    }

    /// The steam-to-dry-gas ratio, bare or as JSON.
    fn render_ratio(&self, sample: &Sample, out: &mut Vec<SimMessage>) {
        let inst = &self.instruments[sample.inst];
        let r = &self.reactors[inst.reactor];
        let ts = sample.ts_ms;
        let Some(o) = self.outlet(inst.reactor, sample.t_s) else {
            return;
        };
        let ratio =
            o.steam_ratio(r.water) * (1.0 + RATIO_NOISE_REL * self.noise(sample.inst, sample.k, 0));
        let payload = if inst.kind == Kind::RatioBare {
            fixed(ratio, 5)
        } else {
            format!(
                "{{\"ts\":{ts},\"value\":{},\"quality\":\"good\"}}",
                fixed(ratio, 5)
            )
        };
        out.push(message(inst.topic.clone(), payload, false));
    }

    /// One analysis, as one message or one per component.
    fn render_analyser(&self, sample: &Sample, out: &mut Vec<SimMessage>) {
        let inst = &self.instruments[sample.inst];
        let r = &self.reactors[inst.reactor];
        let ts = sample.ts_ms;
        // A stuck analyser repeats the last analysis before its window.
        let (kk, t_analysis) = match inst.stuck_window_s {
            Some((a, b)) if sample.t_s >= a && sample.t_s < b => {
                let last = ((a / inst.period_s).ceil() as u64).saturating_sub(1);
                (last, last as f64 * inst.period_s)
            }
            _ => (sample.k, sample.t_s),
        };
        let Some(values) = self.analysis(sample.inst, kk, t_analysis) else {
            return;
        };
        if inst.kind == Kind::Analyser {
            let body: Vec<String> = r
                .reported
                .iter()
                .zip(&values)
                .map(|((_, name, _), v)| format!("\"{name}\":{v}"))
                .collect();
            out.push(message(
                inst.topic.clone(),
                format!(
                    "{{\"ts\":{ts},\"values\":{{{}}},\"unit\":\"mol%\",\"basis\":\"{}\",\"quality\":\"good\"}}",
                    body.join(","),
                    r.basis.as_str()
                ),
                true,
            ));
        } else {
            for ((_, name, unit), v) in r.reported.iter().zip(&values) {
                out.push(message(
                    format!("{}/{name}", inst.topic),
                    format!(
                        "{{\"ts\":{ts},\"value\":{v},\"unit\":\"{}\"}}",
                        unit.label()
                    ),
                    true,
                ));
            }
        }
    }

    /// The formatted values of analysis `k` (sampled at `t_s`) of analyser `i`.
    fn analysis(&self, i: usize, k: u64, t_s: f64) -> Option<Vec<String>> {
        let inst = &self.instruments[i];
        let r = &self.reactors[inst.reactor];
        let o = self.outlet(inst.reactor, t_s)?;
        let mut truth: Vec<f64> = r.reported.iter().map(|(pos, _, _)| o.y[*pos]).collect();
        if r.id == "mth1" {
            let slip = methanator_slip(t_s, MTH_BREAKTHROUGH_S, self.noise(i, k, 99));
            apply_methanator_slip(&r.reported, &mut truth, slip);
        }
        // Basis: dry drops the water and renormalises; noise is relative per component.
        let raw: Vec<f64> = truth
            .iter()
            .enumerate()
            .map(|(c, y)| y * (1.0 + ANALYSER_NOISE_REL * self.noise(i, k, c as u64)))
            .collect();
        let sum: f64 = raw.iter().sum();
        if !(sum > 0.0 && sum.is_finite()) {
            return None;
        }
        Some(
            r.reported
                .iter()
                .zip(&raw)
                .map(|((_, _, unit), y)| {
                    let v = y / sum * unit.per_fraction();
                    match unit {
                        ReportedUnit::Percent => fixed(v, 4),
                        ReportedUnit::Ppm => significant(v),
                    }
                })
                .collect(),
        )
    }
}

/// Fixed description of one reactor, turned into a [`Reactor`] by [`DemoReactor::build`].
struct DemoReactor {
    id: &'static str,
    reactions: &'static [(&'static str, KSourceId)],
    profiles: &'static [Profile],
    feed: &'static [(&'static str, f64)],
    eos: EosKind,
    t_c: f64,
    p_barg: f64,
    basis: Basis,
    target_steam_ratio: Option<f64>,
    reported: &'static [(&'static str, ReportedUnit)],
}

/// The demo plant's reactors. Feeds are per 100 mol of dry gas (water separately);
/// all invented.
const REACTORS: [DemoReactor; 5] = [
    DemoReactor {
        id: "ref1",
        reactions: &[
            ("CH4 + H2O = CO + 3 H2", KSourceId::XuFroment1989),
            ("CO + H2O = CO2 + H2", KSourceId::XuFroment1989),
        ],
        profiles: &[
            Profile::SulphurStep {
                before: 8.0,
                after: 25.0,
            },
            Profile::Constant(2.0),
        ],
        feed: &[
            ("CH4", 1.0),
            ("H2O", 3.0),
            ("CO", 0.0),
            ("CO2", 0.0),
            ("H2", 0.0),
        ],
        eos: EosKind::Ideal,
        t_c: 797.0,
        p_barg: 30.0,
        basis: Basis::Dry,
        target_steam_ratio: None,
        reported: &[
            ("CH4", ReportedUnit::Percent),
            ("CO", ReportedUnit::Percent),
            ("CO2", ReportedUnit::Percent),
            ("H2", ReportedUnit::Percent),
        ],
    },
    DemoReactor {
        id: "hts1",
        reactions: &[("CO + H2O = CO2 + H2", KSourceId::XuFroment1989)],
        profiles: &[Profile::Constant(8.0)],
        feed: &[
            ("H2", 56.0),
            ("N2", 22.8),
            ("CO", 13.0),
            ("CO2", 7.6),
            ("CH4", 0.3),
            ("Ar", 0.3),
            ("H2O", 60.0),
        ],
        eos: EosKind::Ideal,
        t_c: 415.0,
        p_barg: 29.0,
        basis: Basis::Dry,
        target_steam_ratio: Some(0.48),
        reported: &[
            ("H2", ReportedUnit::Percent),
            ("N2", ReportedUnit::Percent),
            ("CO", ReportedUnit::Percent),
            ("CO2", ReportedUnit::Percent),
            ("CH4", ReportedUnit::Percent),
            ("Ar", ReportedUnit::Percent),
        ],
    },
    DemoReactor {
        id: "lts1",
        reactions: &[("CO + H2O = CO2 + H2", KSourceId::Moe1962)],
        profiles: &[Profile::Creep {
            start: 10.0,
            per_hour: 0.2,
        }],
        feed: &[
            ("H2", 59.8),
            ("N2", 20.6),
            ("CO", 3.2),
            ("CO2", 15.8),
            ("CH4", 0.3),
            ("Ar", 0.3),
            ("H2O", 40.0),
        ],
        eos: EosKind::Ideal,
        t_c: 207.0,
        p_barg: 28.0,
        basis: Basis::Dry,
        target_steam_ratio: Some(0.36),
        reported: &[
            ("H2", ReportedUnit::Percent),
            ("N2", ReportedUnit::Percent),
            ("CO", ReportedUnit::Percent),
            ("CO2", ReportedUnit::Percent),
            ("CH4", ReportedUnit::Percent),
            ("Ar", ReportedUnit::Percent),
        ],
    },
    DemoReactor {
        id: "mth1",
        reactions: &[
            ("CO + 3 H2 = CH4 + H2O", KSourceId::SpeciesData),
            ("CO2 + 4 H2 = CH4 + 2 H2O", KSourceId::SpeciesData),
        ],
        profiles: &[Profile::Constant(10.0), Profile::Constant(10.0)],
        feed: &[
            ("H2", 74.2),
            ("N2", 24.72),
            ("CO", 0.18),
            ("CO2", 0.05),
            ("CH4", 0.53),
            ("Ar", 0.32),
            ("H2O", 0.15),
        ],
        eos: EosKind::Ideal,
        t_c: 327.0,
        p_barg: 27.0,
        basis: Basis::Dry,
        target_steam_ratio: Some(0.004),
        reported: &[
            ("H2", ReportedUnit::Percent),
            ("N2", ReportedUnit::Percent),
            ("CH4", ReportedUnit::Percent),
            ("Ar", ReportedUnit::Percent),
            ("CO", ReportedUnit::Ppm),
            ("CO2", ReportedUnit::Ppm),
        ],
    },
    DemoReactor {
        id: "amc1",
        reactions: &[("N2 + 3 H2 = 2 NH3", KSourceId::SpeciesData)],
        profiles: &[Profile::Constant(15.0)],
        feed: &[
            ("H2", 65.0),
            ("N2", 21.7),
            ("NH3", 3.5),
            ("Ar", 4.0),
            ("CH4", 5.8),
        ],
        eos: EosKind::PengRobinson,
        t_c: 427.0,
        p_barg: 150.0,
        basis: Basis::Wet,
        target_steam_ratio: None,
        reported: &[
            ("H2", ReportedUnit::Percent),
            ("N2", ReportedUnit::Percent),
            ("NH3", ReportedUnit::Percent),
            ("Ar", ReportedUnit::Percent),
            ("CH4", ReportedUnit::Percent),
        ],
    },
];

impl DemoReactor {
    fn build(&self, db: &SpeciesDb) -> Option<Reactor> {
        let mut reactions = Vec::new();
        let mut endothermic = Vec::new();
        let t_k = self.t_c + 273.15;
        for (eq, src) in self.reactions {
            let rx = parse_reaction(eq, db).ok()?;
            let k = KModel::from_correlation(*src, &rx, db).ok()?;
            endothermic.push(k.d_ln_k_dt(t_k) > 0.0);
            reactions.push((rx, k));
        }
        let species: Vec<usize> = self
            .feed
            .iter()
            .map(|(n, _)| db.index_of(n))
            .collect::<Option<Vec<_>>>()?;
        let feed = self.feed.iter().map(|(_, x)| *x).collect();
        let water = self.feed.iter().position(|(n, _)| *n == "H2O");
        let reported = self
            .reported
            .iter()
            .map(|(n, u)| {
                self.feed
                    .iter()
                    .position(|(f, _)| f == n)
                    .map(|p| (p, *n, *u))
            })
            .collect::<Option<Vec<_>>>()?;
        Some(Reactor {
            id: self.id,
            reactions,
            profiles: self.profiles.to_vec(),
            endothermic,
            species,
            feed,
            water,
            eos: self.eos,
            t_k,
            p_barg: self.p_barg,
            basis: self.basis,
            reported,
        })
    }
}

// ---------------------------------------------------------------------------
// One invented year of plant history, written as CSV for `eqwatch replay`.
//
// Everything below is a pure function of (options, row time): a row does not depend on
// the rows before it, so a short run is a prefix of a long one with the same start and
// seed, rows can be computed in parallel, and the same arguments give the same bytes.

/// The year scenario of [`write_history`] in words (also written into the CSV header).
pub const YEAR_SCENARIO: &str = "\
Brackwater Ammonia Works, train 1: one invented year of plant history (simulated data)
Days count from the start (day 0 is the first day); times of day are UTC.
  all year       lts1: catalyst deactivation; approach 8 K at the start, rising slightly faster
                 than linearly to about 17.5 K at day 365 (a 20 K end-of-run limit about 80 days later)
  all year       hts1 ~8 K, mth1 ~10 K, amc1 ~15 K, ref1 shift ~2 K: seasonal and daily wander
                 within +/-0.5 K (half that on ref1 and lts1); outlet temperatures swing +/-1.5 K
                 daily (warmest 15:00) and +/-1 K over the seasons
  all year       lts1: the reaction front (90 % of the 22 K bed rise, bed thermocouples TI-306A-E
                 at 0, 0.8, 1.6, 2.4, 3.2 m) moves down the bed as the top layer dies: a dead layer
                 of 0.30 m at day 0 growing 0.0027 m/day: the front from 1.68 m at day 0 to the
                 2.9 m end of life about day 455
  every 7 days   lts1: analyser AI-301 calibrates for 30 min from day 3 09:00 (then day 10, 17, ...):
                 the calibration gas is written, with quality bad
  day 60         hts1: analyser AI-201 stuck 10:00-18:00, repeating its 09:55 analysis (quality good)
  day 120 08:00  ref1: sulphur poisoning; methane approach 8 K -> 25 K over 6 h, 3 days at 25 K,
                 then recovery over about 2 weeks to 10 K (partial permanent damage)
  all year       mth1: kinetic CO slip ~1.8 ppm dry (CO2 ~0.9 ppm), far above equilibrium
  day 150 10:00  mth1: CO breakthrough, outlet CO ~9 ppm for 6 h
  day 200        ref1: analyser AI-101 out of service all day (empty cells)
  day 240-270    lts1: inlet analyser AI-300 CO reads high, a calibration drift growing to +10 % of
                 reading by day 270, when it is recalibrated (the outlet analysis is right)
  day 249-252    lts1: thermocouple TI-305B failed from day 249 14:00 to day 252 14:00 (empty cells)
  day 300 06:00  plant trip, 3-day shutdown: no analyses and no steam ratios; temperatures fall
                 towards 40 degC and pressures towards 0 barg; restart day 303 06:00, back on line
                 (analyses resume) at 18:00
  scattered      a few single analyses per analyser with one component missing (empty cell)";

const HOUR_S: f64 = 3600.0;
/// One day, s.
pub const DAY_S: f64 = 86_400.0;
/// Rows of the history are this far apart, s.
pub const HISTORY_ROW_S: i64 = 60;
/// Default start of the history: 2026-01-01T00:00:00Z, s since the epoch.
pub const DEFAULT_HISTORY_START_S: i64 = 1_767_225_600;
/// Default length of the history, days.
pub const DEFAULT_HISTORY_DAYS: u32 = 365;
/// Default noise seed of the history.
pub const DEFAULT_HISTORY_SEED: u64 = 20_260_101;

/// lts1 approach at the start of the year, K.
pub const LTS_START_OF_RUN_K: f64 = 8.0;
/// lts1 approach (before wander) at day 365, K.
pub const LTS_DAY_365_K: f64 = 17.5;
/// Share of the lts1 rise over the year that comes from the quadratic term.
const LTS_ACCELERATION_SHARE: f64 = 0.2;

/// ref1: start of the sulphur poisoning, s from the start (day 120 08:00).
pub const REF_SULPHUR_AT_S: f64 = 120.0 * DAY_S + 8.0 * HOUR_S;
/// ref1: time for the methane approach to reach its poisoned value, s.
pub const REF_SULPHUR_RISE_S: f64 = 6.0 * HOUR_S;
/// ref1: time at the poisoned value before recovery starts, s.
pub const REF_SULPHUR_PLATEAU_S: f64 = 3.0 * DAY_S;
/// ref1: time constant of the recovery, s (about 2 weeks to within 0.3 K).
pub const REF_RECOVERY_TAU_S: f64 = 3.5 * DAY_S;
/// ref1 methane approach before, at the peak of, and long after the poisoning, K.
pub const REF_CLEAN_K: f64 = 8.0;
pub const REF_POISONED_K: f64 = 25.0;
pub const REF_RECOVERED_K: f64 = 10.0;

/// hts1: analyser AI-201 repeats its last analysis for samples in this window, s.
pub const HTS_STUCK_YEAR_S: (f64, f64) =
    (60.0 * DAY_S + 10.0 * HOUR_S, 60.0 * DAY_S + 18.0 * HOUR_S);
/// lts1: analyser AI-301 calibrations start here, s from the start (day 3 09:00) ...
pub const LTS_CALIBRATION_FIRST_S: f64 = 3.0 * DAY_S + 9.0 * HOUR_S;
/// ... and repeat this often, s ...
pub const LTS_CALIBRATION_EVERY_S: f64 = 7.0 * DAY_S;
/// ... each lasting this long, s.
pub const LTS_CALIBRATION_S: f64 = 1800.0;
/// lts1 calibration gas, mol% (invented certificate values).
const LTS_CALIBRATION_GAS: [(&str, f64); 6] = [
    ("H2", 60.0),
    ("N2", 20.0),
    ("CO", 1.0),
    ("CO2", 18.0),
    ("CH4", 0.5),
    ("Ar", 0.5),
];
/// ref1: analyser AI-101 out of service for samples in this window, s.
pub const REF_ANALYSER_OUT_S: (f64, f64) = (200.0 * DAY_S, 201.0 * DAY_S);
/// lts1: thermocouple TI-305B failed (no readings) in this window, s.
pub const LTS_TI_B_FAILED_S: (f64, f64) =
    (249.0 * DAY_S + 14.0 * HOUR_S, 252.0 * DAY_S + 14.0 * HOUR_S);
/// Plant trip (start of the shutdown), s from the start (day 300 06:00).
pub const TRIP_S: f64 = 300.0 * DAY_S + 6.0 * HOUR_S;
/// Restart after the shutdown, s (day 303 06:00).
pub const RESTART_S: f64 = 303.0 * DAY_S + 6.0 * HOUR_S;
/// Back on line after the restart ramp, s (day 303 18:00); analyses resume.
pub const ON_LINE_S: f64 = 303.0 * DAY_S + 18.0 * HOUR_S;
/// Where temperatures head during the shutdown, degC.
pub const AMBIENT_C: f64 = 40.0;
const COOLING_TAU_S: f64 = 10.0 * HOUR_S;
const DEPRESSURING_TAU_S: f64 = 2.0 * HOUR_S;
/// Analyses per analyser and per 365-day year that lack one component (their places in
/// each year are drawn from the seed).
pub const MISSING_COMPONENT_PER_YEAR: u64 = 5;
const ANALYSES_PER_YEAR: u64 = (365.0 * DAY_S / GC_CYCLE_S) as u64;

/// What the plant is doing at a time of the year scenario.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PlantPhase {
    Running,
    /// Tripped: cooling and depressuring, no flow.
    Down,
    /// Heating and pressuring back up; no analyses or steam ratios yet.
    Restarting,
}

/// The plant's phase at `t_s` (s from the start of the history).
pub fn plant_phase(t_s: f64) -> PlantPhase {
    if (TRIP_S..RESTART_S).contains(&t_s) {
        PlantPhase::Down
    } else if (RESTART_S..ON_LINE_S).contains(&t_s) {
        PlantPhase::Restarting
    } else {
        PlantPhase::Running
    }
}

/// Whether the lts1 analyser is calibrating at sample time `t_s`.
pub fn lts_calibrating(t_s: f64) -> bool {
    let x = t_s - LTS_CALIBRATION_FIRST_S;
    x >= 0.0 && x.rem_euclid(LTS_CALIBRATION_EVERY_S) < LTS_CALIBRATION_S
}

/// Per-reactor phase of the slow wanders (so reactors do not move in step) and the
/// scale of the approach wander.
fn wander_params(reactor_id: &str) -> Option<(f64, f64)> {
    Some(match reactor_id {
        "ref1" => (0.3, 0.5),
        "hts1" => (1.1, 1.0),
        "lts1" => (2.0, 0.5),
        "mth1" => (2.9, 1.0),
        "amc1" => (4.2, 1.0),
        _ => return None,
    })
}

/// Slow approach wander, within ±0.5 K: seasonal, daily and a 9.3-day swing.
fn approach_wander_k(phase: f64, t_s: f64) -> f64 {
    use std::f64::consts::TAU;
    let d = t_s / DAY_S;
    0.2 * (TAU * d / 365.25 + phase).sin()
        + 0.15 * (TAU * d + 2.0 * phase).sin()
        + 0.15 * (TAU * d / 9.3 + 3.0 * phase).sin()
}

/// lts1 deactivation (no wander): `LTS_START_OF_RUN_K` at 0 rising to `LTS_DAY_365_K`
/// at day 365 along a slightly accelerating quadratic.
fn lts_deactivation_k(t_s: f64) -> f64 {
    let x = t_s.max(0.0) / (365.0 * DAY_S);
    LTS_START_OF_RUN_K
        + (LTS_DAY_365_K - LTS_START_OF_RUN_K)
            * ((1.0 - LTS_ACCELERATION_SHARE) * x + LTS_ACCELERATION_SHARE * x * x)
}

/// ref1 methane approach (no wander) through the sulphur event.
fn ref_methane_k(t_s: f64) -> f64 {
    let since = t_s - REF_SULPHUR_AT_S;
    if since < 0.0 {
        REF_CLEAN_K
    } else if since < REF_SULPHUR_RISE_S + REF_SULPHUR_PLATEAU_S {
        REF_CLEAN_K + (REF_POISONED_K - REF_CLEAN_K) * smoothstep(since / REF_SULPHUR_RISE_S)
    } else {
        let rec = since - REF_SULPHUR_RISE_S - REF_SULPHUR_PLATEAU_S;
        REF_RECOVERED_K + (REF_POISONED_K - REF_RECOVERED_K) * (-rec / REF_RECOVERY_TAU_S).exp()
    }
}

/// The approach (K) the year scenario prescribes for reaction `reaction` of reactor
/// `reactor_id` at `t_s` s from the start of the history (the truth a replay should find
/// while the plant runs). `None` for an unknown reactor or reaction.
pub fn year_approach_k(reactor_id: &str, reaction: usize, t_s: f64) -> Option<f64> {
    let (phase, scale) = wander_params(reactor_id)?;
    let base = match (reactor_id, reaction) {
        ("ref1", 0) => ref_methane_k(t_s),
        ("ref1", 1) => 2.0,
        ("hts1", 0) => 8.0,
        ("lts1", 0) => lts_deactivation_k(t_s) + LTS_APPROACH_K_PER_LOAD * (lts_load(t_s) - 1.0),
        ("mth1", 0 | 1) => 10.0,
        ("amc1", 0) => 15.0,
        _ => return None,
    };
    Some(base + scale * approach_wander_k(phase, t_s))
}

/// Fraction of the way from the shutdown value back to the running value (1 while running).
fn shutdown_factor(t_s: f64, tau_s: f64) -> f64 {
    match plant_phase(t_s) {
        PlantPhase::Running => 1.0,
        PlantPhase::Down => (-(t_s - TRIP_S) / tau_s).exp(),
        PlantPhase::Restarting => {
            let low = (-(RESTART_S - TRIP_S) / tau_s).exp();
            low + (1.0 - low) * smoothstep((t_s - RESTART_S) / (ON_LINE_S - RESTART_S))
        }
    }
}

/// Options of [`write_history`].
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct HistoryOptions {
    /// First row's time, whole seconds since the epoch (UTC).
    pub start_epoch_s: i64,
    pub days: u32,
    /// Writes only days `first_day..first_day + days` of the scenario (day 0 is at
    /// `start_epoch_s`): a few weeks around chosen events, for tests.
    pub first_day: u32,
    pub seed: u64,
    /// Instrument noise on (the default) or off.
    pub noise: bool,
    /// Worker threads (0: as many as the machine offers, at most 8). The output does not
    /// depend on it.
    pub threads: usize,
}

impl Default for HistoryOptions {
    fn default() -> Self {
        Self {
            start_epoch_s: DEFAULT_HISTORY_START_S,
            days: DEFAULT_HISTORY_DAYS,
            first_day: 0,
            seed: DEFAULT_HISTORY_SEED,
            noise: true,
            threads: 0,
        }
    }
}

/// What [`write_history`] wrote.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct HistoryStats {
    /// Data rows (one per minute).
    pub rows: u64,
    /// Analyses written (all analysers; calibration-gas analyses included).
    pub analyses: u64,
    /// Non-empty value cells (thermocouples, pressures, steam ratios, components).
    pub values: u64,
    /// Bytes written, comments and header included.
    pub bytes: u64,
}

impl HistoryStats {
    fn add(&mut self, o: &HistoryStats) {
        self.rows += o.rows;
        self.analyses += o.analyses;
        self.values += o.values;
        self.bytes += o.bytes;
    }
}

/// Tags of one reactor's inputs in config/demo-plant.toml.
struct HistoryTags {
    reactor: &'static str,
    /// Multipoint bed thermocouples (tag, depth below the top of the catalyst, m).
    bed: &'static [(&'static str, f64)],
    /// Flow meters: dry gas in, dry gas out, steam in (kmol/h).
    flows: &'static [&'static str],
    /// The inlet analyser (dry, [`LTS_INLET_COMPONENTS`]), where there is one.
    inlet_analyser: Option<&'static str>,
    temperatures: &'static [&'static str],
    pressure: &'static str,
    /// Measured steam ratio, if the configuration has one.
    steam_ratio: Option<&'static str>,
    analyser: &'static str,
    /// Noise stream of the reactor's instruments.
    stream: u64,
}

const HISTORY_TAGS: [HistoryTags; 5] = [
    HistoryTags {
        reactor: "ref1",
        bed: &[],
        flows: &[],
        inlet_analyser: None,
        temperatures: &["BAW1-TI-105A", "BAW1-TI-105B"],
        pressure: "BAW1-PI-102",
        steam_ratio: Some("BAW1-FY-110"),
        analyser: "BAW1-AI-101",
        stream: 1,
    },
    HistoryTags {
        reactor: "hts1",
        bed: &[],
        flows: &[],
        inlet_analyser: None,
        temperatures: &["BAW1-TI-205"],
        pressure: "BAW1-PI-202",
        steam_ratio: None,
        analyser: "BAW1-AI-201",
        stream: 2,
    },
    HistoryTags {
        reactor: "lts1",
        bed: &LTS_BED,
        flows: &LTS_FLOWS,
        inlet_analyser: Some(LTS_INLET_ANALYSER),
        temperatures: &["BAW1-TI-305A", "BAW1-TI-305B"],
        pressure: "BAW1-PI-302",
        steam_ratio: Some("BAW1-FY-310"),
        analyser: "BAW1-AI-301",
        stream: 3,
    },
    HistoryTags {
        reactor: "mth1",
        bed: &[],
        flows: &[],
        inlet_analyser: None,
        temperatures: &["BAW1-TI-405", "BAW1-TI-401"],
        pressure: "BAW1-PI-402",
        steam_ratio: None,
        analyser: "BAW1-AI-401",
        stream: 4,
    },
    HistoryTags {
        reactor: "amc1",
        bed: &[],
        flows: &[],
        inlet_analyser: None,
        temperatures: &["BAW1-TI-505"],
        pressure: "BAW1-PI-502",
        steam_ratio: None,
        analyser: "BAW1-AI-501",
        stream: 5,
    },
];

/// lts1's five bed thermocouples, inlet (top of the catalyst) to outlet; 3.2 m of catalyst.
pub const LTS_BED: [(&str, f64); 5] = [
    ("BAW1-TI-306A", 0.0),
    ("BAW1-TI-306B", 0.8),
    ("BAW1-TI-306C", 1.6),
    ("BAW1-TI-306D", 2.4),
    ("BAW1-TI-306E", 3.2),
];
/// lts1: the bed's temperature rise when running, K (invented; a few K per mol % of CO
/// shifted, as low-temperature shift beds show [common practice]).
pub const LTS_BED_RISE_K: f64 = 22.0;
/// lts1: the dead layer at the top of the bed at day 0 (m) and how fast it grows (m/day):
/// the reaction front (90 % of the rise, dead layer + λ ln 10) starts near 1.68 m and
/// reaches the configured 2.9 m end of life about day 455.
pub const LTS_DEAD_LAYER_M: f64 = 0.30;
pub const LTS_DEAD_LAYER_M_PER_DAY: f64 = 0.00268;
/// The live demo's compressed pace of the same, m per simulated hour.
const LTS_DEMO_DEAD_LAYER_M_PER_H: f64 = 0.03;
/// lts1's inlet analyser and its components (dry, in the feed's order).
pub const LTS_INLET_ANALYSER: &str = "BAW1-AI-300";
pub const LTS_INLET_COMPONENTS: [&str; 6] = ["H2", "N2", "CO", "CO2", "CH4", "Ar"];
/// lts1: the inlet analyser's CO reads high by a calibration drift growing linearly to
/// 10 % of reading from day 240 to day 270, when it is recalibrated (invented).
pub const LTS_INLET_CO_DRIFT_S: (f64, f64) = (240.0 * DAY_S, 270.0 * DAY_S);
pub const LTS_INLET_CO_DRIFT_REL: f64 = 0.10;

/// The relative error of the inlet CO reading at `t_s` (the calibration drift).
pub fn lts_inlet_co_drift(t_s: f64) -> f64 {
    let (a, b) = LTS_INLET_CO_DRIFT_S;
    if t_s >= a && t_s < b {
        LTS_INLET_CO_DRIFT_REL * (t_s - a) / (b - a)
    } else {
        0.0
    }
}

/// lts1's inlet analysis (dry mol %, [`LTS_INLET_COMPONENTS`] order) from its feed, with
/// relative noise from `noise(c)` for component `c` and the CO drift at `t_s`. The
/// analyser reports its calibrated readings without normalising them, so a drifting
/// component also moves the total.
fn lts_inlet_analysis(r: &Reactor, t_s: f64, noise: impl Fn(usize) -> f64) -> Vec<f64> {
    let raw: Vec<f64> = (0..LTS_INLET_COMPONENTS.len())
        .map(|c| {
            let drift = if LTS_INLET_COMPONENTS[c] == "CO" {
                lts_inlet_co_drift(t_s)
            } else {
                0.0
            };
            r.feed.get(c).copied().unwrap_or(0.0)
                * (1.0 + drift)
                * (1.0 + ANALYSER_NOISE_REL * noise(c))
        })
        .collect();
    let dry: f64 = (0..LTS_INLET_COMPONENTS.len())
        .map(|c| r.feed.get(c).copied().unwrap_or(0.0))
        .sum();
    raw.iter().map(|y| 100.0 * y / dry).collect()
}

/// lts1's flow meters: dry gas in, dry gas out, steam in (kmol/h).
pub const LTS_FLOWS: [&str; 3] = ["BAW1-FI-301", "BAW1-FI-302", "BAW1-FI-303"];
/// lts1: dry gas in at full rate, kmol/h (invented).
pub const LTS_DESIGN_DRY_KMOL_H: f64 = 2400.0;
/// lts1: how the approach follows the load: K per unit of load (invented: a higher space
/// velocity leaves the gas further from equilibrium).
pub const LTS_APPROACH_K_PER_LOAD: f64 = 8.0;
/// Flow meter noise, fraction of reading (uniform ±).
const FLOW_NOISE_REL: f64 = 0.004;

/// lts1's load (1 = full rate) at `t_s` of the year: a ±6 % swing over 6.7 days (gas
/// supply and demand), a rate cut to about 94 % on days 45–52 (within the swing seen in
/// the first two weeks) and a deep one to about 78 % on days 200–214 (far outside it).
pub fn lts_load(t_s: f64) -> f64 {
    use std::f64::consts::TAU;
    let d = t_s / DAY_S;
    let cut = if (45.0..52.0).contains(&d) {
        -0.06
    } else if (200.0..214.0).contains(&d) {
        -0.22
    } else {
        0.0
    };
    1.0 + 0.06 * (TAU * d / 6.7).sin() + cut
}

/// lts1: length scale of the active zone's conversion profile, m.
const LTS_ACTIVE_ZONE_M: f64 = 0.6;

/// lts1's flows at `load` for the outlet gas `o`: dry gas in, dry gas out, steam in
/// (kmol/h). The shift keeps the total moles, so the outlet's dry gas is the feed's
/// total less the outlet water.
fn lts_flows(r: &Reactor, o: &Outlet, load: f64) -> [f64; 3] {
    let water = r.water.map_or(0.0, |w| r.feed[w]);
    let total: f64 = r.feed.iter().sum();
    let dry_in = total - water;
    let scale = LTS_DESIGN_DRY_KMOL_H * load / dry_in;
    let y_water = r.water.and_then(|w| o.y.get(w).copied()).unwrap_or(0.0);
    [
        dry_in * scale,
        total * (1.0 - y_water) * scale,
        water * scale,
    ]
}

/// Fraction of the bed's rise reached at `depth_m` when the top `dead_m` of the catalyst
/// is spent: 0 in the dead layer, then 1 − exp(−(d − dead)/λ) (first-order conversion in
/// an adiabatic plug-flow bed [common practice]); its 90 % depth is dead + λ ln 10.
pub fn lts_bed_fraction(depth_m: f64, dead_m: f64) -> f64 {
    let x = (depth_m - dead_m).max(0.0);
    1.0 - (-x / LTS_ACTIVE_ZONE_M).exp()
}

// Noise channels of one reactor (combined with its `stream`).
const CH_TEMPERATURE: u64 = 0; // + thermocouple number
const CH_BED: u64 = 56; // + bed thermocouple number
const CH_FLOW: u64 = 64; // + flow meter number
const CH_INLET: u64 = 72; // + inlet analyser component number
const CH_PRESSURE: u64 = 8;
const CH_STEAM_RATIO: u64 = 9;
const CH_ANALYSER: u64 = 16; // + component number
const CH_MISSING: u64 = 48;
const CH_MISSING_WHICH: u64 = 49;

/// The generator of the year history: the demo plant's reactors with the year scenario.
#[derive(Debug, Clone)]
pub struct History {
    plant: Plant,
    opts: HistoryOptions,
    /// Plant reactor index of each `HISTORY_TAGS` entry.
    reactor_index: Vec<usize>,
}

/// Appends `x` with `digits` significant digits, in plain decimal notation.
fn push_significant(out: &mut String, x: f64, digits: i32) {
    use std::fmt::Write as _;
    if !x.is_finite() {
        return;
    }
    if x == 0.0 {
        out.push('0');
        return;
    }
    let magnitude = x.abs().log10().floor() as i32;
    let decimals = digits - 1 - magnitude;
    if decimals >= 0 {
        let decimals = decimals as usize;
        let _ = write!(out, "{x:.decimals$}");
    } else {
        // Large numbers: round away the digits beyond `digits` (1234.5 -> 1230).
        let unit = 10f64.powi(-decimals);
        let _ = write!(out, "{:.0}", (x / unit).round() * unit);
    }
}

fn push_fixed(out: &mut String, x: f64, decimals: usize) {
    use std::fmt::Write as _;
    if x.is_finite() {
        let _ = write!(out, "{x:.decimals$}");
    }
}

/// Appends `2026-01-01T00:05:00Z` for whole seconds since the epoch.
fn push_rfc3339_seconds(out: &mut String, secs: i64) {
    use std::fmt::Write as _;
    let (y, m, d) = crate::timefmt::civil_from_days(secs.div_euclid(86_400));
    let sod = secs.rem_euclid(86_400);
    let _ = write!(
        out,
        "{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}Z",
        sod / 3600,
        (sod % 3600) / 60,
        sod % 60
    );
}

impl History {
    /// The generator for `opts`; `None` if a demo reactor cannot be built (the reactor
    /// specifications are fixed text, checked by the tests).
    pub fn new(opts: &HistoryOptions) -> Option<Self> {
        let plant = Plant::new(opts.seed, opts.start_epoch_s.saturating_mul(1000));
        let reactor_index = HISTORY_TAGS
            .iter()
            .map(|t| plant.reactors.iter().position(|r| r.id == t.reactor))
            .collect::<Option<Vec<_>>>()?;
        Some(Self {
            plant,
            opts: opts.clone(),
            reactor_index,
        })
    }

    /// Number of data rows.
    pub fn rows(&self) -> u64 {
        u64::from(self.opts.days) * (DAY_S as u64) / HISTORY_ROW_S as u64
    }

    /// The column names of the header line, `time` first.
    pub fn columns(&self) -> Vec<String> {
        let mut v = vec!["time".to_string()];
        for (tags, &ri) in HISTORY_TAGS.iter().zip(&self.reactor_index) {
            v.extend(tags.temperatures.iter().map(|t| t.to_string()));
            v.extend(tags.bed.iter().map(|t| t.0.to_string()));
            v.extend(tags.flows.iter().map(|t| t.to_string()));
            v.push(tags.pressure.to_string());
            if let Some(fy) = tags.steam_ratio {
                v.push(fy.to_string());
            }
            for (_, name, unit) in &self.plant.reactors[ri].reported {
                match unit {
                    ReportedUnit::Percent => v.push(format!("{}.{name}", tags.analyser)),
                    ReportedUnit::Ppm => v.push(format!("{}.{name} [ppm]", tags.analyser)),
                }
            }
            v.push(format!("{}.quality", tags.analyser));
            if let Some(a) = tags.inlet_analyser {
                v.extend(LTS_INLET_COMPONENTS.iter().map(|c| format!("{a}.{c}")));
                v.push(format!("{a}.quality"));
            }
        }
        v
    }

    /// The comment lines and the header line, each ending in `\n`.
    pub fn preamble(&self) -> String {
        let mut s = String::new();
        s.push_str(
            "# Brackwater Ammonia Works, train 1 (BAW1): plant history for `eqwatch replay`\n",
        );
        s.push_str("# invented demo data, made by the eqwatch demo plant simulator (src/demo/sim.rs); no real plant\n");
        s.push_str("# start ");
        push_rfc3339_seconds(&mut s, self.opts.start_epoch_s);
        s.push_str(&format!(
            ", {} days from day {}, one row per minute, seed {}, noise {}\n",
            self.opts.days,
            self.opts.first_day,
            self.opts.seed,
            if self.opts.noise { "on" } else { "off" }
        ));
        for line in [
            "time: when a value was reported (UTC). Thermocouples, pressures and steam ratios: every",
            "  minute, sampled at the row time. Analysers: sampled every 5 min and reported 60 s later,",
            "  so the analysis sampled at 00:00 is on the 00:01 row.",
            "units: as configured for each tag in config/demo-plant.toml (degC, barg, bare ratio, mol%);",
            "  a [unit] after a column name overrides it.",
            "quality: <analyser>.quality is empty when good and bad while AI-301 calibrates (the",
            "  calibration gas analysis is written). An empty cell: no reading at that time.",
            "scenario:",
        ] {
            s.push_str("# ");
            s.push_str(line);
            s.push('\n');
        }
        for line in YEAR_SCENARIO.lines() {
            s.push_str("#   ");
            s.push_str(line);
            s.push('\n');
        }
        s.push_str(&self.columns().join(","));
        s.push('\n');
        s
    }

    /// Uniform noise in [−1, 1) for (stream, channel, index); 0 when noise is off.
    fn noise(&self, stream: u64, channel: u64, index: u64) -> f64 {
        if !self.opts.noise {
            return 0.0;
        }
        self.uniform(stream, channel, index) * 2.0 - 1.0
    }

    /// Uniform in [0, 1) for (stream, channel, index), noise on or off.
    fn uniform(&self, stream: u64, channel: u64, index: u64) -> f64 {
        let h = splitmix64(
            self.opts.seed ^ splitmix64((stream << 40) ^ splitmix64(index ^ splitmix64(channel))),
        );
        (h >> 11) as f64 / (1u64 << 53) as f64
    }

    /// True outlet temperature of reactor `ri` at `t_s`, K.
    fn temperature_k(&self, ri: usize, phase: f64, t_s: f64) -> f64 {
        use std::f64::consts::TAU;
        let d = t_s / DAY_S;
        let running_c =
            self.plant.reactors[ri].t_k - 273.15 - 1.0 * (TAU * (d - 15.0) / 365.25).cos()
                + 1.5 * (TAU * (d - 15.0 / 24.0)).cos()
                + 0.4 * (TAU * d / 4.7 + phase).sin();
        AMBIENT_C + (running_c - AMBIENT_C) * shutdown_factor(t_s, COOLING_TAU_S) + 273.15
    }

    /// True outlet pressure of reactor `ri` at `t_s`, barg.
    fn pressure_barg(&self, ri: usize, phase: f64, t_s: f64) -> f64 {
        use std::f64::consts::TAU;
        let d = t_s / DAY_S;
        let running = self.plant.reactors[ri].p_barg
            + 0.05 * (TAU * (d - 15.0 / 24.0)).cos()
            + 0.05 * (TAU * d / 3.1 + phase).sin();
        running * shutdown_factor(t_s, DEPRESSURING_TAU_S)
    }

    /// The outlet gas of reactor `ri` (tags `k`) at `t_s` while running.
    fn outlet_at(&self, k: usize, t_s: f64) -> Option<Outlet> {
        let ri = self.reactor_index[k];
        let r = &self.plant.reactors[ri];
        let (phase, _) = wander_params(r.id)?;
        let t_k = self.temperature_k(ri, phase, t_s);
        let p_bar = self.pressure_barg(ri, phase, t_s) + STANDARD_ATMOSPHERE_BAR;
        let mut eq_temps = Vec::with_capacity(r.profiles.len());
        for (i, &endo) in r.endothermic.iter().enumerate() {
            let a = year_approach_k(r.id, i, t_s)?;
            eq_temps.push(if endo { t_k - a } else { t_k + a });
        }
        self.plant.solve_outlet(r, &r.feed, &eq_temps, t_k, p_bar)
    }

    /// Analysis number `n` (sampled at `n`·GC cycle) of reactor `k` as values in its
    /// reported unit, `None` where a component is missing; `None` overall if the gas
    /// could not be computed.
    fn analysis(&self, k: usize, n: u64) -> Option<Vec<Option<f64>>> {
        let tags = &HISTORY_TAGS[k];
        let r = &self.plant.reactors[self.reactor_index[k]];
        let t_s = n as f64 * GC_CYCLE_S;
        let truth: Vec<f64> = if tags.reactor == "lts1" && lts_calibrating(t_s) {
            r.reported
                .iter()
                .map(|(_, name, _)| {
                    LTS_CALIBRATION_GAS
                        .iter()
                        .find(|(g, _)| g == name)
                        .map_or(0.0, |(_, x)| *x)
                })
                .collect()
        } else {
            let o = self.outlet_at(k, t_s)?;
            let mut y: Vec<f64> = r.reported.iter().map(|(pos, _, _)| o.y[*pos]).collect();
            if tags.reactor == "mth1" {
                let wobble = self.noise(tags.stream, CH_ANALYSER + 99, n);
                apply_methanator_slip(
                    &r.reported,
                    &mut y,
                    methanator_slip(t_s, YEAR_MTH_BREAKTHROUGH_S, wobble),
                );
            }
            y
        };
        let raw: Vec<f64> = truth
            .iter()
            .enumerate()
            .map(|(c, y)| {
                y * (1.0 + ANALYSER_NOISE_REL * self.noise(tags.stream, CH_ANALYSER + c as u64, n))
            })
            .collect();
        let sum: f64 = raw.iter().sum();
        if !(sum > 0.0 && sum.is_finite()) {
            return None;
        }
        let missing = self.missing_component(k, n);
        Some(
            r.reported
                .iter()
                .zip(&raw)
                .enumerate()
                .map(|(c, ((_, _, unit), y))| {
                    (missing != Some(c)).then(|| y / sum * unit.per_fraction())
                })
                .collect(),
        )
    }

    /// The component (position in the report) missing from analysis `n` of reactor `k`:
    /// `MISSING_COMPONENT_PER_YEAR` seed-chosen analyses in each 365-day year.
    fn missing_component(&self, k: usize, n: u64) -> Option<usize> {
        let stream = HISTORY_TAGS[k].stream;
        let n_components = self.plant.reactors[self.reactor_index[k]].reported.len();
        let in_year = n % ANALYSES_PER_YEAR;
        (0..MISSING_COMPONENT_PER_YEAR).find_map(|j| {
            let at = (self.uniform(stream, CH_MISSING, j) * ANALYSES_PER_YEAR as f64) as u64;
            (at == in_year)
                .then(|| (self.uniform(stream, CH_MISSING_WHICH, j) * n_components as f64) as usize)
        })
    }

    /// Appends data row `m` (time = start + m minutes) and a newline; returns what it wrote.
    pub fn push_row(&self, m: u64, out: &mut String) -> HistoryStats {
        let before = out.len();
        let mut st = HistoryStats {
            rows: 1,
            ..HistoryStats::default()
        };
        let row_s = m as i64 * HISTORY_ROW_S;
        let t_s = row_s as f64;
        push_rfc3339_seconds(out, self.opts.start_epoch_s + row_s);
        let running = plant_phase(t_s) == PlantPhase::Running;
        // The analysis reported on this row, if any: sampled one analyser delay earlier.
        let delay = ANALYSER_DELAY_S as i64;
        let cycle = GC_CYCLE_S as i64;
        let sample = (row_s >= delay && (row_s - delay) % cycle == 0)
            .then(|| ((row_s - delay) / cycle) as u64);
        for (k, tags) in HISTORY_TAGS.iter().enumerate() {
            let ri = self.reactor_index[k];
            let r = &self.plant.reactors[ri];
            let phase = wander_params(r.id).map_or(0.0, |p| p.0);
            let t_k = self.temperature_k(ri, phase, t_s);
            for (j, _) in tags.temperatures.iter().enumerate() {
                out.push(',');
                let failed = tags.reactor == "lts1"
                    && j == 1
                    && t_s >= LTS_TI_B_FAILED_S.0
                    && t_s < LTS_TI_B_FAILED_S.1;
                // The methanator's second thermocouple is its bed inlet, the design rise
                // below the outlet; a breakthrough lifts the outlet.
                let below = match (tags.reactor, j) {
                    ("mth1", 1) => MTH_DESIGN_RISE_K,
                    ("mth1", _) => {
                        -MTH_BREAKTHROUGH_RISE_K * breakthrough(t_s, YEAR_MTH_BREAKTHROUGH_S)
                    }
                    _ => 0.0,
                };
                if !failed {
                    let x = t_k - below - 273.15
                        + TI_NOISE_K * self.noise(tags.stream, CH_TEMPERATURE + j as u64, m);
                    push_fixed(out, x, 2);
                    st.values += 1;
                }
            }
            // The bed: the outlet temperature less the part of the rise not yet reached;
            // the rise fades with the flow in a shutdown.
            let dead = LTS_DEAD_LAYER_M + LTS_DEAD_LAYER_M_PER_DAY * t_s / DAY_S;
            let rise = LTS_BED_RISE_K * shutdown_factor(t_s, COOLING_TAU_S);
            for (j, (_, depth)) in tags.bed.iter().enumerate() {
                out.push(',');
                let x = t_k - rise * (1.0 - lts_bed_fraction(*depth, dead)) - 273.15
                    + TI_NOISE_K * self.noise(tags.stream, CH_BED + j as u64, m);
                push_fixed(out, x, 2);
                st.values += 1;
            }
            // Flows: nothing while the plant is down or restarting.
            let flows = if running && !tags.flows.is_empty() {
                self.outlet_at(k, t_s)
                    .map(|o| lts_flows(r, &o, lts_load(t_s)))
            } else {
                None
            };
            for (j, _) in tags.flows.iter().enumerate() {
                out.push(',');
                if let Some(f) = flows.as_ref().and_then(|f| f.get(j)) {
                    let x =
                        f * (1.0 + FLOW_NOISE_REL * self.noise(tags.stream, CH_FLOW + j as u64, m));
                    push_fixed(out, x, 1);
                    st.values += 1;
                }
            }
            out.push(',');
            let p = self.pressure_barg(ri, phase, t_s)
                + PI_NOISE_BAR * self.noise(tags.stream, CH_PRESSURE, m);
            push_fixed(out, p, 3);
            st.values += 1;
            if tags.steam_ratio.is_some() {
                out.push(',');
                // No flow, no ratio: nothing while the plant is down or restarting.
                if let Some(o) = running.then(|| self.outlet_at(k, t_s)).flatten() {
                    let s = o.steam_ratio(r.water)
                        * (1.0 + RATIO_NOISE_REL * self.noise(tags.stream, CH_STEAM_RATIO, m));
                    push_fixed(out, s, 4);
                    st.values += 1;
                }
            }
            let values = sample.and_then(|n| self.reported_analysis(k, n));
            let calibrating = tags.reactor == "lts1"
                && sample.is_some_and(|n| lts_calibrating(n as f64 * GC_CYCLE_S));
            for (c, (_, _, unit)) in r.reported.iter().enumerate() {
                out.push(',');
                if let Some(Some(v)) = values.as_ref().and_then(|v| v.get(c)) {
                    match unit {
                        ReportedUnit::Percent => push_significant(out, *v, 4),
                        ReportedUnit::Ppm => push_significant(out, *v, 3),
                    }
                    st.values += 1;
                }
            }
            out.push(',');
            if values.is_some() {
                st.analyses += 1;
                if calibrating {
                    out.push_str("bad");
                }
            }
            if tags.inlet_analyser.is_some() {
                // The inlet analysis of the same sample, when the plant runs.
                let inlet = sample
                    .filter(|n| plant_phase(*n as f64 * GC_CYCLE_S) == PlantPhase::Running)
                    .map(|n| {
                        lts_inlet_analysis(r, n as f64 * GC_CYCLE_S, |c| {
                            self.noise(tags.stream, CH_INLET + c as u64, n)
                        })
                    });
                for c in 0..LTS_INLET_COMPONENTS.len() {
                    out.push(',');
                    if let Some(v) = inlet.as_ref().and_then(|v| v.get(c)) {
                        push_significant(out, *v, 4);
                        st.values += 1;
                    }
                }
                out.push(',');
                if inlet.is_some() {
                    st.analyses += 1;
                }
            }
        }
        out.push('\n');
        st.bytes = (out.len() - before) as u64;
        st
    }

    /// The analysis reactor `k`'s analyser reports for sample `n`, with the scenario's
    /// analyser faults applied; `None` when it reports nothing.
    fn reported_analysis(&self, k: usize, n: u64) -> Option<Vec<Option<f64>>> {
        let t_s = n as f64 * GC_CYCLE_S;
        if plant_phase(t_s) != PlantPhase::Running {
            return None;
        }
        match HISTORY_TAGS[k].reactor {
            "ref1" if t_s >= REF_ANALYSER_OUT_S.0 && t_s < REF_ANALYSER_OUT_S.1 => None,
            "hts1" if t_s >= HTS_STUCK_YEAR_S.0 && t_s < HTS_STUCK_YEAR_S.1 => {
                // Stuck: the last analysis before the window, exactly.
                let last = ((HTS_STUCK_YEAR_S.0 / GC_CYCLE_S).ceil() as u64).saturating_sub(1);
                self.analysis(k, last)
            }
            _ => self.analysis(k, n),
        }
    }
}

/// Writes the year history for `opts` to `out` (comments, header, one row per minute).
pub fn write_history(
    opts: &HistoryOptions,
    out: &mut impl std::io::Write,
) -> std::io::Result<HistoryStats> {
    write_history_with_progress(opts, out, &mut |_, _| {})
}

/// [`write_history`], calling `progress(rows_done, rows_total)` after each batch of rows.
pub fn write_history_with_progress(
    opts: &HistoryOptions,
    out: &mut impl std::io::Write,
    progress: &mut dyn FnMut(u64, u64),
) -> std::io::Result<HistoryStats> {
    let history = History::new(opts)
        .ok_or_else(|| std::io::Error::other("a demo plant reactor could not be built"))?;
    let mut stats = HistoryStats::default();
    let preamble = history.preamble();
    out.write_all(preamble.as_bytes())?;
    stats.bytes += preamble.len() as u64;
    let first = u64::from(opts.first_day) * (DAY_S as u64) / HISTORY_ROW_S as u64;
    let total = first + history.rows();
    let threads = match opts.threads {
        0 => std::thread::available_parallelism()
            .map_or(1, |n| n.get())
            .min(8),
        n => n,
    };
    // Each worker makes one chunk of rows per round; chunks are written in order.
    const CHUNK_ROWS: u64 = 720;
    let mut next = first;
    while next < total {
        let ranges: Vec<(u64, u64)> = (0..threads as u64)
            .map(|i| {
                let a = (next + i * CHUNK_ROWS).min(total);
                (a, (a + CHUNK_ROWS).min(total))
            })
            .filter(|(a, b)| a < b)
            .collect();
        let h = &history;
        let chunks: Vec<(String, HistoryStats)> = if ranges.len() == 1 {
            ranges.iter().map(|&(a, b)| h.rows_text(a, b)).collect()
        } else {
            std::thread::scope(|s| {
                let handles: Vec<_> = ranges
                    .iter()
                    .map(|&(a, b)| s.spawn(move || h.rows_text(a, b)))
                    .collect();
                handles
                    .into_iter()
                    .map(|j| {
                        j.join()
                            .map_err(|_| std::io::Error::other("a history worker panicked"))
                    })
                    .collect::<std::io::Result<Vec<_>>>()
            })?
        };
        for (text, st) in &chunks {
            out.write_all(text.as_bytes())?;
            stats.add(st);
        }
        next = ranges.last().map_or(total, |r| r.1);
        progress(next - first, total - first);
    }
    out.flush()?;
    Ok(stats)
}

impl History {
    /// Rows `a..b` as text, with what they hold.
    fn rows_text(&self, a: u64, b: u64) -> (String, HistoryStats) {
        let mut s = String::with_capacity(((b - a) * 256) as usize);
        let mut st = HistoryStats::default();
        for m in a..b {
            st.add(&self.push_row(m, &mut s));
        }
        (s, st)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::approach::{GasState, ReactorModel, Uncertainty};
    use crate::composition::{Component, WaterSource, to_wet};
    use crate::units::CompositionUnit;
    use serde_json::Value;

    const START: i64 = 1_767_225_600_000;

    fn run(plant: &mut Plant, until_s: f64, dt_s: f64) -> Vec<(f64, SimMessage)> {
        let mut out = Vec::new();
        let mut t = 0.0;
        while t <= until_s {
            for m in plant.step(t) {
                out.push((t, m));
            }
            t += dt_s;
        }
        out
    }

    fn json(m: &SimMessage) -> Value {
        match serde_json::from_str(&m.payload) {
            Ok(v) => v,
            Err(e) => panic!("{}: {} is not JSON: {e}", m.topic, m.payload),
        }
    }

    fn ts_of(v: &Value) -> i64 {
        v["ts"].as_i64().expect("ts")
    }

    /// (sample time s, species, value, unit) of every analysis of a combined analyser.
    fn analyses(msgs: &[(f64, SimMessage)], topic: &str) -> Vec<(f64, Vec<(String, f64)>)> {
        msgs.iter()
            .filter(|(_, m)| m.topic == topic)
            .map(|(_, m)| {
                let v = json(m);
                let values = v["values"]
                    .as_object()
                    .expect("values")
                    .iter()
                    .map(|(k, x)| (k.clone(), x.as_f64().expect("number")))
                    .collect();
                // Analysers stamp their report time; the sample was drawn the delay earlier.
                (
                    (ts_of(&v) - START) as f64 / 1000.0 - ANALYSER_DELAY_S,
                    values,
                )
            })
            .collect()
    }

    /// The scalar reading of `topic` sampled at `t_s`.
    fn scalar_at(msgs: &[(f64, SimMessage)], topic: &str, t_s: f64) -> f64 {
        let ts = START + (t_s * 1000.0) as i64;
        for (_, m) in msgs.iter().filter(|(_, m)| m.topic == topic) {
            let v = json(m);
            if ts_of(&v) == ts {
                return v["value"].as_f64().expect("value");
            }
        }
        panic!("no {topic} at {t_s}");
    }

    #[test]
    fn payloads_are_json_where_promised_and_published_on_time() {
        let mut p = Plant::new(7, START);
        let msgs = run(&mut p, 3600.0, 7.0);
        let mut topics = std::collections::BTreeSet::new();
        for (t, m) in &msgs {
            topics.insert(m.topic.clone());
            if m.topic == "baw1/ref1/FY-110" {
                let x: f64 = m.payload.parse().expect("bare number");
                assert!((0.5..0.8).contains(&x), "{x}");
                continue;
            }
            let v = json(m);
            let ts = ts_of(&v);
            let delay = if m.topic.contains("/AI-") {
                ANALYSER_DELAY_S
            } else {
                0.0
            };
            let sample_s = (ts - START) as f64 / 1000.0 - delay;
            // Published in the first step at or after sample + delay.
            assert!(
                *t >= sample_s + delay && *t < sample_s + delay + 7.0,
                "{}",
                m.topic
            );
            assert_eq!(m.retain, m.topic.contains("/AI-"), "{}", m.topic);
            if m.topic.contains("/TI-") {
                assert_eq!(v["unit"], "degC");
                assert_eq!(v["quality"], "good");
                assert!(v["value"].as_f64().is_some());
            }
            if m.topic.contains("/PI-") {
                assert_eq!(v["unit"], "barg");
                assert!(v["value"].as_f64().is_some());
            }
            if m.topic.contains("/AI-") && !m.topic.contains("mth1") {
                assert_eq!(v["unit"], "mol%");
                assert_eq!(v["quality"], "good");
                let basis = if m.topic.contains("amc1") {
                    "wet"
                } else {
                    "dry"
                };
                assert_eq!(v["basis"], basis);
            }
        }
        // 25 plus lts1's five bed thermocouples, three flow meters and inlet analyser.
        assert_eq!(topics.len(), 34, "{topics:?}");
        for t in [
            "baw1/ref1/TI-105B",
            "baw1/lts1/TI-306C",
            "baw1/lts1/FY-310",
            "baw1/mth1/AI-401/CO2",
            "baw1/amc1/PI-502",
        ] {
            assert!(topics.contains(t), "{t}");
        }
    }

    #[test]
    fn methanator_reads_a_few_ppm_co_and_breaks_through() {
        // Invented demo figures: ~1.8 ppm CO normally (1-3 ppm, a 0.5 ppm analyser sees it),
        // about 9 ppm during the breakthrough window, above the demo's 5 ppm alarm.
        let mut p = Plant::new(7, START);
        let msgs = run(&mut p, 3600.0, 10.0);
        let co: Vec<(f64, f64)> = msgs
            .iter()
            .filter(|(_, m)| m.topic == "baw1/mth1/AI-401/CO")
            .map(|(_, m)| {
                let v = json(m);
                (
                    (ts_of(&v) - START) as f64 / 1000.0 - ANALYSER_DELAY_S,
                    v["value"].as_f64().expect("number"),
                )
            })
            .collect();
        assert!(co.len() > 8, "{co:?}");
        for (t, ppm) in &co {
            if *t < MTH_BREAKTHROUGH_S.0 {
                assert!((1.0..3.0).contains(ppm), "t = {t} s: {ppm} ppm");
            } else if *t > MTH_BREAKTHROUGH_S.0 + 600.0 && *t < MTH_BREAKTHROUGH_S.1 {
                assert!(*ppm > 8.0 && *ppm < 10.5, "t = {t} s: {ppm} ppm");
            }
        }
    }

    #[test]
    fn compositions_sum_to_100() {
        let mut p = Plant::new(3, START);
        let msgs = run(&mut p, 7200.0, 60.0);
        for topic in [
            "baw1/ref1/AI-101",
            "baw1/hts1/AI-201",
            "baw1/lts1/AI-301",
            "baw1/amc1/AI-501",
        ] {
            let a = analyses(&msgs, topic);
            assert_eq!(a.len(), 24, "{topic}");
            for (t, values) in a {
                let sum: f64 = values.iter().map(|(_, x)| x).sum();
                assert!((sum - 100.0).abs() <= 0.01, "{topic} at {t}: {sum}");
            }
        }
        // The methanator's per-component topics: mol% plus ppm/10^4, grouped by ts.
        let mut by_ts: std::collections::BTreeMap<i64, (f64, usize)> = Default::default();
        for (_, m) in msgs
            .iter()
            .filter(|(_, m)| m.topic.starts_with("baw1/mth1/AI-401/"))
        {
            let v = json(m);
            let x = v["value"].as_f64().expect("value");
            let pct = match v["unit"].as_str() {
                Some("mol%") => x,
                Some("ppm") => x * 1e-4,
                u => panic!("unit {u:?}"),
            };
            let e = by_ts.entry(ts_of(&v)).or_default();
            e.0 += pct;
            e.1 += 1;
        }
        assert_eq!(by_ts.len(), 24);
        for (ts, (sum, n)) in by_ts {
            assert_eq!(n, 6, "{ts}");
            assert!((sum - 100.0).abs() <= 0.01, "{ts}: {sum}");
        }
    }

    #[test]
    fn hts_analyser_sticks_then_recovers() {
        let mut p = Plant::new(11, START);
        let msgs = run(&mut p, 3000.0, 10.0);
        let a = analyses(&msgs, "baw1/hts1/AI-201");
        let at = |t: f64| {
            a.iter()
                .find(|(s, _)| *s == t)
                .map(|(_, v)| v.clone())
                .expect("analysis")
        };
        // Samples at 20, 25 and 30 min repeat the 15 min analysis exactly; ts advances.
        for t in [1200.0, 1500.0, 1800.0] {
            assert_eq!(at(t), at(900.0), "{t}");
        }
        assert_ne!(at(600.0), at(900.0));
        assert_ne!(at(2100.0), at(900.0));
        assert_ne!(at(2400.0), at(2100.0));
        let times: Vec<f64> = a.iter().map(|(t, _)| *t).collect();
        assert!(times.windows(2).all(|w| w[1] - w[0] == GC_CYCLE_S));
    }

    #[test]
    fn second_lts_thermocouple_goes_silent() {
        let mut p = Plant::new(5, START);
        let msgs = run(&mut p, 1800.0, 10.0);
        let last = |topic: &str| {
            msgs.iter()
                .filter(|(_, m)| m.topic == topic)
                .map(|(_, m)| ts_of(&json(m)))
                .max()
                .expect("messages")
        };
        assert_eq!(last("baw1/lts1/TI-305B"), START + 900_000);
        assert_eq!(last("baw1/lts1/TI-305A"), START + 1_800_000);
    }

    #[test]
    fn readings_do_not_depend_on_the_step_size() {
        let a: Vec<SimMessage> = run(&mut Plant::new(9, START), 1000.0, 1.0)
            .into_iter()
            .map(|(_, m)| m)
            .collect();
        let b = Plant::new(9, START).step(1000.0);
        assert_eq!(a, b);
        let c = Plant::new(10, START).step(1000.0);
        assert_ne!(b, c);
    }

    /// Approach per reaction computed by the core from the published readings.
    fn computed_approaches(
        plant: &Plant,
        msgs: &[(f64, SimMessage)],
        reactor: &str,
        t_s: f64,
    ) -> Vec<f64> {
        let db = SpeciesDb::builtin();
        let r = plant
            .reactors
            .iter()
            .find(|r| r.id == reactor)
            .expect("reactor");
        let ts = START + (t_s * 1000.0) as i64;
        let mut comps: Vec<Component> = Vec::new();
        // The outlet analysers (lts1's inlet analyser AI-300 is not the outlet gas).
        for (_, m) in msgs.iter().filter(|(_, m)| m.topic.contains("/AI-")) {
            if !m.topic.contains(reactor) || m.topic.ends_with("/AI-300") {
                continue;
            }
            let v = json(m);
            if ts_of(&v) - (ANALYSER_DELAY_S * 1000.0) as i64 != ts {
                continue;
            }
            if let Some(values) = v["values"].as_object() {
                for (k, x) in values {
                    comps.push(Component {
                        species: k.clone(),
                        value: x.as_f64().expect("number"),
                        unit: CompositionUnit::Percent,
                    });
                }
            } else {
                let name = m.topic.rsplit('/').next().expect("species");
                let unit =
                    CompositionUnit::parse(v["unit"].as_str().expect("unit")).expect("known unit");
                comps.push(Component {
                    species: name.to_string(),
                    value: v["value"].as_f64().expect("value"),
                    unit,
                });
            }
        }
        assert!(!comps.is_empty(), "no analysis of {reactor} at {t_s}");
        let (ti, pi, fy): (&[&str], &str, Option<&str>) = match reactor {
            "ref1" => (
                &["baw1/ref1/TI-105A", "baw1/ref1/TI-105B"],
                "baw1/ref1/PI-102",
                Some("baw1/ref1/FY-110"),
            ),
            "hts1" => (&["baw1/hts1/TI-205"], "baw1/hts1/PI-202", None),
            "lts1" => (
                &["baw1/lts1/TI-305A"],
                "baw1/lts1/PI-302",
                Some("baw1/lts1/FY-310"),
            ),
            "mth1" => (&["baw1/mth1/TI-405"], "baw1/mth1/PI-402", None),
            _ => (&["baw1/amc1/TI-505"], "baw1/amc1/PI-502", None),
        };
        let t_k =
            ti.iter().map(|t| scalar_at(msgs, t, t_s)).sum::<f64>() / ti.len() as f64 + 273.15;
        let p = scalar_at(msgs, pi, t_s) + STANDARD_ATMOSPHERE_BAR;
        let water = match (r.basis, fy, reactor) {
            (Basis::Wet, _, _) => None,
            (_, Some("baw1/ref1/FY-110"), _) => {
                // Bare number, published every 30 s at its sample time.
                let x = msgs
                    .iter()
                    .find(|(t, m)| m.topic == "baw1/ref1/FY-110" && *t >= t_s)
                    .and_then(|(_, m)| m.payload.parse::<f64>().ok())
                    .expect("FY-110");
                Some(WaterSource::SteamRatio(x))
            }
            (_, Some(topic), _) => Some(WaterSource::SteamRatio(scalar_at(msgs, topic, t_s))),
            (_, None, "hts1") => Some(WaterSource::SteamRatio(0.48)),
            (_, None, _) => Some(WaterSource::SteamRatio(0.004)),
        };
        let w = to_wet(&db, &comps, r.basis, water, 0.02).expect("composition");
        let model =
            ReactorModel::new(&db, r.reactions.clone(), &w.species, r.eos, None).expect("model");
        let state = GasState {
            temperature_k: t_k,
            pressure_bar: p,
            y: &w.y,
            steam_ratio: w.steam_ratio.zip(w.added_water),
        };
        let mut s = model.scratch();
        model.fugacity(&state, &mut s);
        (0..r.reactions.len())
            .map(|i| {
                model
                    .evaluate(i, &state, &s, &Uncertainty::default())
                    .approach_k
                    .expect("approach")
            })
            .collect()
    }

    #[test]
    fn reformer_approach_is_recovered_and_rises_after_the_sulphur_step() {
        let mut p = Plant::new(1, START).with_noise(false);
        let msgs = run(&mut p, 3700.0, 10.0);
        for k in 0..=11 {
            let t = k as f64 * GC_CYCLE_S;
            let a = computed_approaches(&p, &msgs, "ref1", t);
            let want = p.prescribed_approach_k("ref1", 0, t).expect("prescribed");
            assert!((a[0] - want).abs() < 0.5, "{t}: {} vs {want}", a[0]);
            if t < DEFAULT_SULPHUR_STEP_S {
                assert!((a[0] - 8.0).abs() < 0.5, "{t}: {}", a[0]);
            }
            if t >= DEFAULT_SULPHUR_STEP_S + SULPHUR_RAMP_S {
                assert!(a[0] > 20.0, "{t}: {}", a[0]);
            }
            // The shift at the reformer outlet stays close to equilibrium.
            assert!((a[1] - 2.0).abs() < 0.5, "{t}: shift {}", a[1]);
        }
    }

    #[test]
    fn every_reactor_shows_its_prescribed_approach_without_noise() {
        let mut p = Plant::new(2, START).with_noise(false);
        let msgs = run(&mut p, 1000.0, 10.0);
        // (mth1 reads a kinetic slip, not an equilibrium gas: see the test below.)
        for (reactor, t) in [("hts1", 600.0), ("lts1", 900.0), ("amc1", 0.0)] {
            let a = computed_approaches(&p, &msgs, reactor, t);
            for (i, got) in a.iter().enumerate() {
                let want = p.prescribed_approach_k(reactor, i, t).expect("prescribed");
                assert!((got - want).abs() < 0.05, "{reactor}[{i}]: {got} vs {want}");
            }
        }
    }

    #[test]
    fn scenario_lists_the_faults_in_order() {
        let p = Plant::new(0, START);
        let s = p.scenario();
        assert_eq!(s.len(), 5);
        assert!(s.windows(2).all(|w| w[0].at_s <= w[1].at_s));
        assert_eq!(p.events_between(1700.0, 1800.0)[0].reactor, "ref1");
        assert_eq!(p.events_between(2300.0, 2400.0)[0].reactor, "mth1");
        let q = Plant::new(0, START).with_sulphur_step(None);
        assert_eq!(q.scenario().len(), 4);
        assert_eq!(q.prescribed_approach_k("ref1", 0, 1e5), Some(8.0));
        assert!(
            p.prescribed_approach_k("lts1", 0, 3600.0)
                .is_some_and(|a| (a - 10.2).abs() < 1e-12)
        );
    }

    // ---- The year history (CSV for `eqwatch replay`) ----

    /// Start of the default history (2026-01-01T00:00:00Z; `date -u -d 2026-01-01 +%s`).
    const YEAR_START_S: i64 = 1_767_225_600;

    fn history(noise: bool) -> History {
        History::new(&HistoryOptions {
            noise,
            ..HistoryOptions::default()
        })
        .expect("the demo reactors build")
    }

    /// Row `m` of `h` split into cells, with the header's column names.
    fn row_cells(h: &History, m: u64) -> Vec<String> {
        let mut s = String::new();
        h.push_row(m, &mut s);
        assert!(s.ends_with('\n'));
        s.trim_end().split(',').map(str::to_string).collect()
    }

    fn minute_of(t_s: f64) -> u64 {
        (t_s / HISTORY_ROW_S as f64) as u64
    }

    fn col(h: &History, name: &str) -> usize {
        h.columns()
            .iter()
            .position(|c| c == name)
            .unwrap_or_else(|| panic!("no column {name}"))
    }

    #[test]
    fn year_lts_approach_rises_from_8_k_to_about_17_5_k_and_accelerates() {
        // Invented demo scenario: 8 K at the start, about 17.5 K at day 365.
        let a0 = year_approach_k("lts1", 0, 0.0).expect("lts1");
        let a365 = year_approach_k("lts1", 0, 365.0 * DAY_S).expect("lts1");
        assert!((a0 - 8.0).abs() <= 0.3, "{a0}");
        assert!((17.0..=18.0).contains(&a365), "{a365}");
        // The trend without wander: rising, slightly faster at the end than at the start.
        let slope = |d: f64| lts_deactivation_k((d + 1.0) * DAY_S) - lts_deactivation_k(d * DAY_S);
        assert!(slope(364.0) > 1.2 * slope(0.0));
        assert!((1..=365).all(|d| slope(d as f64) > 0.0));
        // Extrapolated at the end-of-year slope, a 20 K end-of-run limit falls within
        // the following months (invented demo scenario: about 80 days).
        let days_to_20 = (20.0 - lts_deactivation_k(365.0 * DAY_S)) / slope(364.0);
        assert!((30.0..=150.0).contains(&days_to_20), "{days_to_20}");
        // Unknown reactors and reactions have no prescribed approach.
        assert_eq!(year_approach_k("lts1", 1, 0.0), None);
        assert_eq!(year_approach_k("xyz", 0, 0.0), None);
    }

    #[test]
    fn year_reformer_sulphur_event_rises_holds_and_recovers_partly() {
        // Invented demo scenario: day 120 08:00, 8 K -> 25 K over 6 h, 3 days at 25 K,
        // recovery over about 2 weeks to 10 K.
        let a = |t: f64| year_approach_k("ref1", 0, t).expect("ref1");
        let at = REF_SULPHUR_AT_S;
        let wander = 0.25; // half of ±0.5 K on ref1 (invented demo scenario)
        assert!((a(at - 3600.0) - 8.0).abs() <= wander, "{}", a(at - 3600.0));
        assert!((a(at) - 8.0).abs() <= wander);
        let mid = a(at + 3.0 * 3600.0);
        assert!(mid > 14.0 && mid < 19.0, "{mid}");
        for t in [6.0 * 3600.0, DAY_S, 3.0 * DAY_S] {
            assert!((a(at + t) - 25.0).abs() <= wander, "{t}: {}", a(at + t));
        }
        let recovery_start = at + REF_SULPHUR_RISE_S + REF_SULPHUR_PLATEAU_S;
        let after_2_weeks = a(recovery_start + 14.0 * DAY_S);
        assert!((after_2_weeks - 10.3).abs() <= 0.4, "{after_2_weeks}");
        // Partial permanent damage: it settles near 10 K, never back to 8 K.
        for d in [200.0, 300.0, 364.0] {
            let x = a(d * DAY_S);
            assert!((x - 10.0).abs() <= wander + 0.01, "day {d}: {x}");
        }
        // The shift at the reformer outlet stays near 2 K.
        assert!((year_approach_k("ref1", 1, at + DAY_S).expect("shift") - 2.0).abs() <= 0.25);
    }

    #[test]
    fn year_constant_reactors_wander_within_half_a_kelvin() {
        // Invented demo scenario: hts1 ~8 K, mth1 ~10 K (both reactions), amc1 ~15 K.
        for (id, reaction, centre) in [
            ("hts1", 0, 8.0),
            ("mth1", 0, 10.0),
            ("mth1", 1, 10.0),
            ("amc1", 0, 15.0),
        ] {
            let mut lo = f64::INFINITY;
            let mut hi = f64::NEG_INFINITY;
            for h in 0..(365 * 24) {
                let x = year_approach_k(id, reaction, f64::from(h) * 3600.0).expect("reactor");
                lo = lo.min(x);
                hi = hi.max(x);
            }
            assert!(lo >= centre - 0.5 && hi <= centre + 0.5, "{id}: {lo}..{hi}");
            assert!(hi - lo > 0.3, "{id} should wander: {lo}..{hi}");
        }
    }

    #[test]
    fn calibration_windows_and_plant_phases() {
        // Invented demo scenario: AI-301 calibrates 30 min every 7 days from day 3 09:00.
        let d3 = 3.0 * DAY_S + 9.0 * 3600.0;
        assert!(!lts_calibrating(d3 - 60.0));
        assert!(lts_calibrating(d3));
        assert!(lts_calibrating(d3 + 1799.0));
        assert!(!lts_calibrating(d3 + 1800.0));
        assert!(lts_calibrating(d3 + 7.0 * DAY_S + 900.0));
        assert!(!lts_calibrating(d3 + DAY_S + 900.0));
        assert!(lts_calibrating(d3 + 51.0 * 7.0 * DAY_S));
        assert!(!lts_calibrating(0.0));
        // Invented demo scenario: trip day 300 06:00, restart day 303 06:00, on line 18:00.
        assert_eq!(
            plant_phase(300.0 * DAY_S + 5.0 * 3600.0),
            PlantPhase::Running
        );
        assert_eq!(plant_phase(300.0 * DAY_S + 6.0 * 3600.0), PlantPhase::Down);
        assert_eq!(plant_phase(303.0 * DAY_S + 5.0 * 3600.0), PlantPhase::Down);
        assert_eq!(
            plant_phase(303.0 * DAY_S + 6.0 * 3600.0),
            PlantPhase::Restarting
        );
        assert_eq!(
            plant_phase(303.0 * DAY_S + 18.0 * 3600.0),
            PlantPhase::Running
        );
    }

    #[test]
    fn history_header_matches_the_demo_configuration() {
        let text = include_str!("../../config/demo-plant.toml");
        let cfg: toml::Table = toml::from_str(text).expect("config/demo-plant.toml parses");
        let reactors = cfg["reactors"].as_table().expect("[reactors]");
        // Expected columns from the configuration, in the generator's reactor order.
        let mut want = vec!["time".to_string()];
        let mut units: Vec<(String, String)> = Vec::new();
        for id in ["ref1", "hts1", "lts1", "mth1", "amc1"] {
            let r = reactors[id].as_table().expect("reactor");
            for t in r["temperature"].as_array().expect("temperatures") {
                want.push(t["tag"].as_str().expect("tag").to_string());
                units.push((
                    want[want.len() - 1].clone(),
                    t["unit"].as_str().expect("unit").to_string(),
                ));
            }
            let bed = r.get("bed_profile").and_then(|b| b.get("thermocouple"));
            for t in bed.and_then(|t| t.as_array()).into_iter().flatten() {
                want.push(t["tag"].as_str().expect("tag").to_string());
                units.push((
                    want[want.len() - 1].clone(),
                    t["unit"].as_str().expect("unit").to_string(),
                ));
            }
            // Flow meters, written in kmol/h as configured.
            for f in r
                .get("flow")
                .and_then(|f| f.as_array())
                .into_iter()
                .flatten()
            {
                want.push(f["tag"].as_str().expect("tag").to_string());
                assert_eq!(f["unit"].as_str(), Some("kmol/h"));
            }
            want.push(r["pressure"]["tag"].as_str().expect("tag").to_string());
            units.push((
                want[want.len() - 1].clone(),
                r["pressure"]["unit"].as_str().expect("unit").to_string(),
            ));
            if let Some(tag) = r
                .get("steam_ratio")
                .and_then(|s| s.get("tag"))
                .and_then(|t| t.as_str())
            {
                want.push(tag.to_string());
            }
            let comp = r["composition"].as_table().expect("composition");
            let tag = comp["tag"].as_str().expect("tag");
            // The configured unit (mol% by default) applies unless the header overrides it.
            let unit = comp.get("unit").and_then(|u| u.as_str()).unwrap_or("mol%");
            assert_eq!(unit, "mol%", "{id}");
            for s in comp["components"].as_array().expect("components") {
                let s = s.as_str().expect("species");
                let ppm = id == "mth1" && (s == "CO" || s == "CO2");
                want.push(if ppm {
                    format!("{tag}.{s} [ppm]")
                } else {
                    format!("{tag}.{s}")
                });
            }
            want.push(format!("{tag}.quality"));
            if let Some(inlet) = r.get("inlet_composition").and_then(|c| c.as_table()) {
                let tag = inlet["tag"].as_str().expect("tag");
                for s in inlet["components"].as_array().expect("components") {
                    want.push(format!("{tag}.{}", s.as_str().expect("species")));
                }
                want.push(format!("{tag}.quality"));
            }
        }
        let h = history(true);
        assert_eq!(h.columns(), want);
        // Scalar tags are written in their configured units.
        for (tag, unit) in units {
            let expect = if tag.contains("-PI-") { "barg" } else { "degC" };
            assert_eq!(unit, expect, "{tag}");
        }
        let pre = h.preamble();
        let lines: Vec<&str> = pre.lines().collect();
        assert!(lines[..lines.len() - 1].iter().all(|l| l.starts_with('#')));
        assert_eq!(lines[lines.len() - 1], want.join(","));
        assert!(pre.contains("invented demo data"));
        assert!(pre.contains("seed 20260101"));
    }

    #[test]
    fn history_is_deterministic_and_analyses_come_every_5_min_one_minute_late() {
        let opts = |seed: u64, threads: usize| HistoryOptions {
            days: 1,
            seed,
            threads,
            ..HistoryOptions::default()
        };
        let mut a = Vec::new();
        let mut b = Vec::new();
        let mut c = Vec::new();
        let st = write_history(&opts(42, 1), &mut a).expect("write");
        write_history(&opts(42, 2), &mut b).expect("write");
        write_history(&opts(43, 1), &mut c).expect("write");
        assert_eq!(a, b, "same arguments, any thread count: the same bytes");
        assert_ne!(a, c, "another seed: other noise");
        assert_eq!(st.bytes, a.len() as u64);
        // Invented demo scenario: one row per minute, 288 analyses a day per analyser
        // (five outlet analysers and lts1's inlet one).
        assert_eq!(st.rows, 1440);
        assert_eq!(st.analyses, 6 * 288);
        let text = std::str::from_utf8(&a).expect("UTF-8");
        let mut lines = text.lines().filter(|l| !l.starts_with('#'));
        let header: Vec<&str> = lines.next().expect("header").split(',').collect();
        let analyser_cols: Vec<usize> = header
            .iter()
            .enumerate()
            .filter(|(_, c)| c.starts_with("BAW1-AI-") && !c.ends_with(".quality"))
            .map(|(i, _)| i)
            .collect();
        // ref1, hts1, lts1, mth1, amc1 and lts1's inlet analyser.
        assert_eq!(analyser_cols.len(), 4 + 6 + 6 + 6 + 5 + 6);
        let mut rows = 0;
        for (m, line) in lines.enumerate() {
            let cells: Vec<&str> = line.split(',').collect();
            assert_eq!(cells.len(), header.len(), "row {m}");
            let secs = crate::timefmt::parse_rfc3339(cells[0]).expect("time") / 1000;
            assert_eq!(secs, YEAR_START_S + 60 * m as i64, "row {m}: {}", cells[0]);
            assert!(
                cells[0].ends_with('Z') && cells[0].len() == 20,
                "{}",
                cells[0]
            );
            // Analyses are sampled at whole 5 minutes and reported 60 s later.
            let analysis_row = m % 5 == 1;
            let filled = analyser_cols
                .iter()
                .filter(|&&i| !cells[i].is_empty())
                .count();
            if analysis_row {
                assert_eq!(filled, analyser_cols.len(), "row {m}");
            } else {
                assert_eq!(filled, 0, "row {m}");
            }
            // Thermocouples, pressures, measured steam ratios and flows every minute.
            for (i, name) in header.iter().enumerate() {
                if name.contains("-TI-")
                    || name.contains("-PI-")
                    || name.contains("-FY-")
                    || name.contains("-FI-")
                {
                    assert!(
                        cells[i].parse::<f64>().is_ok(),
                        "row {m} {name}: {:?}",
                        cells[i]
                    );
                }
            }
            rows += 1;
        }
        assert_eq!(rows, 1440);
        // A row depends only on its time: one day is the start of two.
        let mut two = Vec::new();
        write_history(
            &HistoryOptions {
                days: 2,
                ..opts(42, 2)
            },
            &mut two,
        )
        .expect("write");
        let data = |t: &[u8]| -> Vec<String> {
            String::from_utf8_lossy(t)
                .lines()
                .filter(|l| !l.starts_with('#'))
                .map(str::to_string)
                .collect()
        };
        assert_eq!(data(&two)[..1441], data(&a)[..]);
    }

    #[test]
    fn history_analyses_read_back_as_the_prescribed_approach() {
        // Noise off: the only error left is the CSV's number formatting.
        let h = history(false);
        let db = SpeciesDb::builtin();
        let header = h.columns();
        // (reactor, sample time): the year's start, mid-event, late in the year, a warm
        // afternoon and a cool night (temperatures away from the nominal ones).
        let times = [
            0.0,
            REF_SULPHUR_AT_S + DAY_S,
            REF_SULPHUR_AT_S + 3.0 * 3600.0,
            200.0 * DAY_S + 15.0 * 3600.0,
            364.0 * DAY_S + 3.0 * 3600.0,
        ];
        for t_s in times {
            for (k, tags) in HISTORY_TAGS.iter().enumerate() {
                let r = &h.plant.reactors[h.reactor_index[k]];
                let sample_row = row_cells(&h, minute_of(t_s));
                let report_row = row_cells(&h, minute_of(t_s) + 1);
                if tags.reactor == "ref1"
                    && t_s >= REF_ANALYSER_OUT_S.0
                    && t_s < REF_ANALYSER_OUT_S.1
                {
                    continue;
                }
                // The methanator reads a kinetic slip, not an equilibrium gas.
                if tags.reactor == "mth1" {
                    continue;
                }
                let mut comps = Vec::new();
                for (_, name, unit) in &r.reported {
                    let c = match unit {
                        ReportedUnit::Percent => format!("{}.{name}", tags.analyser),
                        ReportedUnit::Ppm => format!("{}.{name} [ppm]", tags.analyser),
                    };
                    let i = col(&h, &c);
                    comps.push(Component {
                        species: name.to_string(),
                        value: report_row[i].parse().expect("analysis value"),
                        unit: match unit {
                            ReportedUnit::Percent => CompositionUnit::Percent,
                            ReportedUnit::Ppm => CompositionUnit::parse("ppm").expect("ppm"),
                        },
                    });
                }
                let cell =
                    |name: &str| -> f64 { sample_row[col(&h, name)].parse().expect("scalar") };
                let t_k = tags.temperatures.iter().map(|t| cell(t)).sum::<f64>()
                    / tags.temperatures.len() as f64
                    + 273.15;
                let p = cell(tags.pressure) + STANDARD_ATMOSPHERE_BAR;
                // Measured ratio where configured, else the configuration's fixed value.
                let water = match (r.basis, tags.steam_ratio, tags.reactor) {
                    (Basis::Wet, _, _) => None,
                    (_, Some(fy), _) => Some(WaterSource::SteamRatio(cell(fy))),
                    (_, None, "hts1") => Some(WaterSource::SteamRatio(0.48)),
                    (_, None, _) => Some(WaterSource::SteamRatio(0.004)),
                };
                let w = to_wet(&db, &comps, r.basis, water, 0.02).expect("composition");
                let model = ReactorModel::new(&db, r.reactions.clone(), &w.species, r.eos, None)
                    .expect("model");
                let state = GasState {
                    temperature_k: t_k,
                    pressure_bar: p,
                    y: &w.y,
                    steam_ratio: w.steam_ratio.zip(w.added_water),
                };
                let mut s = model.scratch();
                model.fugacity(&state, &mut s);
                for i in 0..r.reactions.len() {
                    let got = model
                        .evaluate(i, &state, &s, &Uncertainty::default())
                        .approach_k
                        .expect("approach");
                    let want = year_approach_k(tags.reactor, i, t_s).expect("prescribed");
                    // Formatting (2 decimals, 4 or 3 significant digits) and, on hts1 and
                    // mth1, the configuration's fixed steam ratio: within 0.25 K.
                    assert!(
                        (got - want).abs() < 0.25,
                        "{} [{i}] at {t_s}: {got} vs {want}",
                        tags.reactor
                    );
                }
            }
        }
        assert_eq!(header[0], "time");
    }

    #[test]
    fn history_events_show_in_the_rows() {
        let h = history(true);
        let hour = 3600.0;
        // hts1 stuck on day 60 10:00-18:00: every analysis repeats the 09:55 one exactly.
        let ai201: Vec<usize> = (0..6).map(|c| col(&h, "BAW1-AI-201.H2") + c).collect();
        let analysis = |t_s: f64, cols: &[usize]| -> Vec<String> {
            let row = row_cells(&h, minute_of(t_s) + 1);
            cols.iter().map(|&i| row[i].clone()).collect()
        };
        let before = analysis(60.0 * DAY_S + 9.0 * hour + 55.0 * 60.0, &ai201);
        for t in [10.0 * hour, 14.0 * hour, 17.0 * hour + 55.0 * 60.0] {
            assert_eq!(analysis(60.0 * DAY_S + t, &ai201), before, "{t}");
        }
        assert_ne!(analysis(60.0 * DAY_S + 18.0 * hour, &ai201), before);
        assert_ne!(
            analysis(60.0 * DAY_S + 9.0 * hour + 50.0 * 60.0, &ai201),
            before
        );
        // lts1 calibration: quality bad, the calibration gas written (CO 1 mol%).
        let q301 = col(&h, "BAW1-AI-301.quality");
        let row = row_cells(&h, minute_of(LTS_CALIBRATION_FIRST_S) + 1);
        assert_eq!(row[q301], "bad");
        let co: f64 = row[col(&h, "BAW1-AI-301.CO")].parse().expect("CO");
        assert!((co - 1.0).abs() < 0.01, "{co}");
        assert_eq!(
            row_cells(&h, minute_of(LTS_CALIBRATION_FIRST_S - 300.0) + 1)[q301],
            ""
        );
        assert_eq!(
            row_cells(&h, minute_of(LTS_CALIBRATION_FIRST_S + 1800.0) + 1)[q301],
            ""
        );
        // ref1 analyser out all of day 200; TI-305B failed around day 250.
        let ch4 = col(&h, "BAW1-AI-101.CH4");
        assert_eq!(
            row_cells(&h, minute_of(200.0 * DAY_S + 12.0 * hour) + 1)[ch4],
            ""
        );
        assert_ne!(row_cells(&h, minute_of(201.0 * DAY_S) + 1)[ch4], "");
        let tib = col(&h, "BAW1-TI-305B");
        assert_eq!(row_cells(&h, minute_of(250.0 * DAY_S))[tib], "");
        assert_ne!(row_cells(&h, minute_of(250.0 * DAY_S))[tib - 1], "");
        assert_ne!(row_cells(&h, minute_of(253.0 * DAY_S))[tib], "");
        // Shutdown: near ambient and 0 barg just before the restart, no analyses, no ratios.
        let down = row_cells(&h, minute_of(RESTART_S - 3600.0));
        let down_analysis = row_cells(&h, minute_of(RESTART_S - 3600.0) + 1);
        for tag in [
            "BAW1-TI-105A",
            "BAW1-TI-205",
            "BAW1-TI-305A",
            "BAW1-TI-405",
            "BAW1-TI-505",
        ] {
            let x: f64 = down[col(&h, tag)].parse().expect("temperature");
            assert!((x - AMBIENT_C).abs() < 3.0, "{tag}: {x}");
        }
        for tag in ["BAW1-PI-102", "BAW1-PI-502"] {
            let x: f64 = down[col(&h, tag)].parse().expect("pressure");
            assert!(x.abs() < 0.1, "{tag}: {x}");
        }
        assert_eq!(down[col(&h, "BAW1-FY-110")], "");
        assert!(down_analysis[col(&h, "BAW1-AI-501.NH3")].is_empty());
        // Back on line: analyses again.
        assert!(!row_cells(&h, minute_of(ON_LINE_S) + 1)[col(&h, "BAW1-AI-501.NH3")].is_empty());
    }

    #[test]
    fn history_numbers_are_formatted_as_promised() {
        let mut s = String::new();
        push_significant(&mut s, 60.1234, 4);
        s.push(' ');
        push_significant(&mut s, 0.201349, 4);
        s.push(' ');
        push_significant(&mut s, 1234.5, 3);
        s.push(' ');
        push_significant(&mut s, 9.1749e-8, 3);
        s.push(' ');
        push_fixed(&mut s, f64::NAN, 2);
        push_rfc3339_seconds(&mut s, YEAR_START_S + 300);
        assert_eq!(s, "60.12 0.2013 1230 0.0000000917 2026-01-01T00:05:00Z");
    }
}
