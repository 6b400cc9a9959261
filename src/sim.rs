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
//! Pure: no I/O, no clock; the caller passes simulated time.

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
enum Unit {
    Percent,
    Ppm,
}

impl Unit {
    fn label(self) -> &'static str {
        match self {
            Unit::Percent => "mol%",
            Unit::Ppm => "ppm",
        }
    }
    fn per_fraction(self) -> f64 {
        match self {
            Unit::Percent => 1e2,
            Unit::Ppm => 1e6,
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
    reported: Vec<(usize, &'static str, Unit)>,
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Kind {
    Temperature,
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

impl Plant {
    /// The plant at simulated time 0, with readings stamped `start_epoch_ms + t·1000`.
    pub fn new(seed: u64, start_epoch_ms: i64) -> Self {
        let db = SpeciesDb::builtin();
        let mut reactors = Vec::new();
        // Feeds are per 100 mol of dry gas (water separately); all invented.
        let specs: [ReactorSpec; 5] = [
            ReactorSpec {
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
                    ("CH4", Unit::Percent),
                    ("CO", Unit::Percent),
                    ("CO2", Unit::Percent),
                    ("H2", Unit::Percent),
                ],
            },
            ReactorSpec {
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
                    ("H2", Unit::Percent),
                    ("N2", Unit::Percent),
                    ("CO", Unit::Percent),
                    ("CO2", Unit::Percent),
                    ("CH4", Unit::Percent),
                    ("Ar", Unit::Percent),
                ],
            },
            ReactorSpec {
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
                    ("H2", Unit::Percent),
                    ("N2", Unit::Percent),
                    ("CO", Unit::Percent),
                    ("CO2", Unit::Percent),
                    ("CH4", Unit::Percent),
                    ("Ar", Unit::Percent),
                ],
            },
            ReactorSpec {
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
                    ("H2", Unit::Percent),
                    ("N2", Unit::Percent),
                    ("CH4", Unit::Percent),
                    ("Ar", Unit::Percent),
                    ("CO", Unit::Ppm),
                    ("CO2", Unit::Ppm),
                ],
            },
            ReactorSpec {
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
                    ("H2", Unit::Percent),
                    ("N2", Unit::Percent),
                    ("NH3", Unit::Percent),
                    ("Ar", Unit::Percent),
                    ("CH4", Unit::Percent),
                ],
            },
        ];
        for spec in &specs {
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
        for spec in &specs {
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
        self.solve_outlet(r, &r.feed, &eq_temps)
    }

    fn solve_outlet(&self, r: &Reactor, feed: &[f64], eq_temps: &[f64]) -> Option<Outlet> {
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
        let res = sys.solve(&self.db, r.t_k, Self::pressure_bar_abs(r), &moles_in);
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
            self.solve_outlet(&r, &feed, &eq_temps)
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
                    Kind::Analyser | Kind::AnalyserPerComponent => ANALYSER_DELAY_S,
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
        add("baw1/lts1/PI-302", Kind::Pressure, "lts1", 10.0);
        add("baw1/lts1/FY-310", Kind::RatioJson, "lts1", 30.0);
        add(
            "baw1/mth1/AI-401",
            Kind::AnalyserPerComponent,
            "mth1",
            GC_CYCLE_S,
        );
        add("baw1/mth1/TI-405", Kind::Temperature, "mth1", 10.0);
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
        let r = &self.reactors[inst.reactor];
        // Analysers stamp a result when they report it, `delay_s` after the sample was
        // drawn (the daemon subtracts the configured lag to get back to the sample time).
        let ts = self.epoch_ms(sample_s + inst.delay_s);
        let msg = |topic: String, payload: String, retain: bool| SimMessage {
            topic,
            payload,
            retain,
        };
        match inst.kind {
            Kind::Temperature => {
                let t_c = r.t_k - 273.15 + TI_NOISE_K * self.noise(i, k, 0);
                out.push(msg(
                    inst.topic.clone(),
                    format!(
                        "{{\"ts\":{ts},\"value\":{},\"unit\":\"degC\",\"quality\":\"good\"}}",
                        fixed(t_c, 2)
                    ),
                    false,
                ));
            }
            Kind::Pressure => {
                let p = r.p_barg + PI_NOISE_BAR * self.noise(i, k, 0);
                out.push(msg(
                    inst.topic.clone(),
                    format!(
                        "{{\"ts\":{ts},\"value\":{},\"unit\":\"barg\",\"quality\":\"good\"}}",
                        fixed(p, 3)
                    ),
                    false,
                ));
            }
            Kind::RatioBare | Kind::RatioJson => {
                let Some(o) = self.outlet(inst.reactor, sample_s) else {
                    return;
                };
                let s = o.steam_ratio(r.water) * (1.0 + RATIO_NOISE_REL * self.noise(i, k, 0));
                let payload = if inst.kind == Kind::RatioBare {
                    fixed(s, 5)
                } else {
                    format!(
                        "{{\"ts\":{ts},\"value\":{},\"quality\":\"good\"}}",
                        fixed(s, 5)
                    )
                };
                out.push(msg(inst.topic.clone(), payload, false));
            }
            Kind::Analyser | Kind::AnalyserPerComponent => {
                // A stuck analyser repeats the last analysis before its window.
                let (kk, t_analysis) = match inst.stuck_window_s {
                    Some((a, b)) if sample_s >= a && sample_s < b => {
                        let last = ((a / inst.period_s).ceil() as u64).saturating_sub(1);
                        (last, last as f64 * inst.period_s)
                    }
                    _ => (k, sample_s),
                };
                let Some(values) = self.analysis(i, kk, t_analysis) else {
                    return;
                };
                if inst.kind == Kind::Analyser {
                    let body: Vec<String> = r
                        .reported
                        .iter()
                        .zip(&values)
                        .map(|((_, name, _), v)| format!("\"{name}\":{v}"))
                        .collect();
                    out.push(msg(
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
                        out.push(msg(
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
        }
    }

    /// The formatted values of analysis `k` (sampled at `t_s`) of analyser `i`.
    fn analysis(&self, i: usize, k: u64, t_s: f64) -> Option<Vec<String>> {
        let inst = &self.instruments[i];
        let r = &self.reactors[inst.reactor];
        let o = self.outlet(inst.reactor, t_s)?;
        // Basis: dry drops the water and renormalises; noise is relative per component.
        let raw: Vec<f64> = r
            .reported
            .iter()
            .enumerate()
            .map(|(c, (pos, _, _))| {
                o.y[*pos] * (1.0 + ANALYSER_NOISE_REL * self.noise(i, k, c as u64))
            })
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
                        Unit::Percent => fixed(v, 4),
                        Unit::Ppm => significant(v),
                    }
                })
                .collect(),
        )
    }
}

/// Fixed description of one reactor, turned into a [`Reactor`] by [`ReactorSpec::build`].
struct ReactorSpec {
    id: &'static str,
    reactions: &'static [(&'static str, KSourceId)],
    profiles: &'static [Profile],
    feed: &'static [(&'static str, f64)],
    eos: EosKind,
    t_c: f64,
    p_barg: f64,
    basis: Basis,
    target_steam_ratio: Option<f64>,
    reported: &'static [(&'static str, Unit)],
}

impl ReactorSpec {
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
        assert_eq!(topics.len(), 24, "{topics:?}");
        for t in [
            "baw1/ref1/TI-105B",
            "baw1/lts1/FY-310",
            "baw1/mth1/AI-401/CO2",
            "baw1/amc1/PI-502",
        ] {
            assert!(topics.contains(t), "{t}");
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
        for (_, m) in msgs.iter().filter(|(_, m)| m.topic.contains("/AI-")) {
            if !m.topic.contains(reactor) {
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
        for (reactor, t) in [
            ("hts1", 600.0),
            ("lts1", 900.0),
            ("mth1", 300.0),
            ("amc1", 0.0),
        ] {
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
        assert_eq!(s.len(), 4);
        assert!(s.windows(2).all(|w| w[0].at_s <= w[1].at_s));
        assert_eq!(p.events_between(1700.0, 1800.0)[0].reactor, "ref1");
        let q = Plant::new(0, START).with_sulphur_step(None);
        assert_eq!(q.scenario().len(), 3);
        assert_eq!(q.prescribed_approach_k("ref1", 0, 1e5), Some(8.0));
        assert!(
            p.prescribed_approach_k("lts1", 0, 3600.0)
                .is_some_and(|a| (a - 10.2).abs() < 1e-12)
        );
    }
}
