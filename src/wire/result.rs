//! The result message: an evaluation encoded as JSON (schema [`RESULT_SCHEMA`]), with
//! its quality, reasons, inputs, uncertainty budget, per-reaction figures and drift.

use serde::Serialize;
use serde::ser::SerializeMap;

use super::{finite, finite_opt};
use crate::config::ReactorSettings;
use crate::monitor::Evaluation;
use crate::thermo::species::SpeciesDb;
use crate::timefmt::format_rfc3339;

/// Version of the result payload; bump on any incompatible change.
pub(crate) const RESULT_SCHEMA: &str = "eqwatch.result/1";

/// Mole fractions (or φ) by species name, as a JSON object; `null` when there are none.
struct BySpecies<'a>(&'a [String], &'a [f64]);

impl Serialize for BySpecies<'_> {
    fn serialize<S: serde::Serializer>(&self, ser: S) -> Result<S::Ok, S::Error> {
        if self.0.len() != self.1.len() {
            return ser.serialize_none();
        }
        let mut m = ser.serialize_map(Some(self.0.len()))?;
        for (n, v) in self.0.iter().zip(self.1) {
            m.serialize_entry(n, &finite(*v))?;
        }
        m.end()
    }
}

#[derive(Serialize)]
struct ReasonOut<'a> {
    code: &'static str,
    severity: &'static str,
    message: &'a str,
}

#[derive(Serialize)]
struct InputOut<'a> {
    tag: &'a str,
    value: Option<f64>,
    unit: &'static str,
    age_s: Option<f64>,
    used: bool,
}

/// Each input's share of the approach's ± (K), by input name.
#[derive(Serialize)]
struct BudgetOut {
    composition: Option<f64>,
    steam_ratio: Option<f64>,
    pressure: Option<f64>,
    temperature: Option<f64>,
}

impl From<&crate::approach::UncertaintyBudget> for BudgetOut {
    fn from(b: &crate::approach::UncertaintyBudget) -> Self {
        Self {
            composition: finite(b.composition_k),
            steam_ratio: finite(b.steam_ratio_k),
            pressure: finite(b.pressure_k),
            temperature: finite(b.temperature_k),
        }
    }
}

#[derive(Serialize)]
struct ReactionOut<'a> {
    reaction: &'a str,
    k_source: &'static str,
    ln_k: Option<f64>,
    ln_q: Option<f64>,
    q_over_k: Option<f64>,
    direction: &'static str,
    affinity_j_per_mol: Option<f64>,
    delta_h_j_per_mol: Option<f64>,
    endothermic: bool,
    equilibrium_temperature_k: Option<f64>,
    approach_k: Option<f64>,
    approach_uncertainty_k: Option<f64>,
    uncertainty_budget_k: Option<BudgetOut>,
    flags: Vec<&'static str>,
}

/// The figure a screen shows first: the approach, or (where the approach is not
/// meaningful) the key component's measured slip on the analyser's basis.
#[derive(Serialize)]
struct HeadlineOut {
    figure: &'static str,
    value: Option<f64>,
    unit: &'static str,
    text: String,
}

/// The bed temperature rise check (methanator breakthrough).
#[derive(Serialize)]
struct BedRiseOut {
    inlet_temperature_k: Option<f64>,
    rise_k: Option<f64>,
    expected_rise_k: Option<f64>,
    excess_rise_k: Option<f64>,
    rise_per_mol_pct_co_k: Option<f64>,
    rise_per_mol_pct_co2_k: Option<f64>,
    implied_inlet_co_equivalent_mol_pct: Option<f64>,
}

impl From<&crate::bedrise::BedRise> for BedRiseOut {
    fn from(b: &crate::bedrise::BedRise) -> Self {
        Self {
            inlet_temperature_k: finite(b.inlet_k),
            rise_k: finite(b.rise_k),
            expected_rise_k: finite_opt(b.expected_k),
            excess_rise_k: finite_opt(b.excess_k()),
            rise_per_mol_pct_co_k: finite(b.per_percent.co_k),
            rise_per_mol_pct_co2_k: finite(b.per_percent.co2_k),
            implied_inlet_co_equivalent_mol_pct: finite(b.implied_co_equivalent_mol_pct),
        }
    }
}

/// The bed temperature profile (multipoint bed thermocouples), with the front's trend.
#[derive(Serialize)]
struct BedProfileOut<'a> {
    /// Whether a profile could be formed; `why` when it could not.
    available: bool,
    #[serde(skip_serializing_if = "Option::is_none")]
    why: Option<&'a str>,
    thermocouples_used: usize,
    thermocouples_configured: usize,
    inlet_temperature_k: Option<f64>,
    outlet_temperature_k: Option<f64>,
    rise_k: Option<f64>,
    wabt_k: Option<f64>,
    wabt_convention: &'static str,
    /// The front: depth of `front_fraction` of the rise (m, and of the catalyst depth).
    front_fraction: f64,
    front_interpolation: &'static str,
    front_depth_m: Option<f64>,
    front_fraction_of_bed: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    no_front_because: Option<&'static str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    hot_spot: Option<HotSpotOut<'a>>,
    bed_depth_m: f64,
    end_of_life_depth_m: f64,
    front_trend: FrontTrendOut,
}

#[derive(Serialize)]
struct HotSpotOut<'a> {
    tag: &'a str,
    depth_m: f64,
    temperature_k: Option<f64>,
    above_outlet_k: Option<f64>,
}

/// The front's movement from daily means, and when it reaches the end-of-life depth.
#[derive(Serialize)]
struct FrontTrendOut {
    /// `collecting` (fewer daily figures than a trend needs), `not-moving`, `forecast`,
    /// or `reached` (this sample's front at or past the end-of-life depth).
    state: &'static str,
    days: usize,
    rate_m_per_day: Option<f64>,
    rate_interval_m_per_day: Option<[f64; 2]>,
    #[serde(skip_serializing_if = "Option::is_none")]
    end_of_life: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    earliest: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    latest: Option<String>,
}

fn bed_profile_out<'a>(
    spec: &'a crate::monitor::spec::BedProfileSpec,
    found: &'a Result<crate::bedprofile::BedProfile, String>,
    drift: Option<&crate::monitor::watch::DriftFigures>,
) -> BedProfileOut<'a> {
    use crate::monitor::drift::EndOfRun;
    let g = &spec.geometry;
    let profile = found.as_ref().ok();
    let front = profile.and_then(|p| p.front.ok());
    let day_ms = |d: f64| format_rfc3339((d * crate::units::DAY_MS as f64) as i64);
    let forecast = drift.and_then(|d| d.front);
    // The front already at or past the end-of-life depth is that, whatever the trend.
    let reached = front.is_some_and(|f| f.depth_m >= g.end_of_life_depth_m);
    let end_of_life = forecast.map(|f| f.end_of_life);
    let dates = match end_of_life {
        Some(EndOfRun::At {
            day,
            earliest,
            latest,
        }) => Some((day, earliest, latest)),
        _ => None,
    };
    let state = match end_of_life {
        _ if reached => "reached",
        None => "collecting",
        Some(EndOfRun::NotRising) => "not-moving",
        Some(EndOfRun::At { .. }) => "forecast",
    };
    let front_trend = FrontTrendOut {
        state,
        days: drift.map_or(0, |d| d.front_days),
        rate_m_per_day: forecast.and_then(|f| finite(f.rate_m_per_day)),
        rate_interval_m_per_day: forecast.map(|f| [f.rate_interval.0, f.rate_interval.1]),
        end_of_life: dates.map(|d| day_ms(d.0)),
        earliest: dates.map(|d| day_ms(d.1)),
        latest: dates.and_then(|d| d.2.map(day_ms)),
    };
    BedProfileOut {
        available: profile.is_some(),
        why: found.as_ref().err().map(String::as_str),
        thermocouples_used: profile.map_or(0, |p| p.points_used),
        thermocouples_configured: spec.thermocouples.len(),
        inlet_temperature_k: profile.and_then(|p| finite(p.inlet_k)),
        outlet_temperature_k: profile.and_then(|p| finite(p.outlet_k)),
        rise_k: profile.and_then(|p| finite(p.rise_k)),
        wabt_k: profile.and_then(|p| finite(p.wabt_k)),
        wabt_convention: g.wabt.label(),
        front_fraction: g.front_fraction,
        front_interpolation: g.interpolation.label(),
        front_depth_m: front.and_then(|f| finite(f.depth_m)),
        front_fraction_of_bed: front.and_then(|f| finite(f.fraction_of_bed)),
        no_front_because: profile.and_then(|p| p.front.err()).map(|n| n.as_str()),
        hot_spot: profile.and_then(|p| {
            let h = p.hot_spot?;
            Some(HotSpotOut {
                tag: spec.thermocouples.get(h.index)?.0.tag.as_str(),
                depth_m: h.depth_m,
                temperature_k: finite(h.t_k),
                above_outlet_k: finite(h.t_k - p.outlet_k),
            })
        }),
        bed_depth_m: g.depth_m,
        end_of_life_depth_m: g.end_of_life_depth_m,
        front_trend,
    }
}

/// The inlet/outlet reconciliation: element closures, the gross error tests, the
/// reconciled outlet gas and its approach.
#[derive(Serialize)]
struct ReconciliationOut<'a> {
    available: bool,
    #[serde(skip_serializing_if = "Option::is_none")]
    why: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    inlet_sample_ts: Option<String>,
    /// Per element: in and out (kmol/h of atoms), imbalance % before and after.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    elements: Vec<ElementOut>,
    #[serde(skip_serializing_if = "Option::is_none")]
    global_test: Option<GlobalTestOut>,
    /// The instrument most likely at fault (largest measurement test above its
    /// critical value), with the ones a balance cannot tell from it.
    #[serde(skip_serializing_if = "Option::is_none")]
    suspect: Option<&'a str>,
    #[serde(skip_serializing_if = "Vec::is_empty")]
    suspect_equivalents: Vec<&'a str>,
    #[serde(skip_serializing_if = "Vec::is_empty")]
    measurements: Vec<MeasurementOut<'a>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    outlet_dry_mole_fractions: Option<Vec<(String, f64)>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    steam_ratio_out: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    steam_ratio_in: Option<f64>,
    /// Per reaction, the approach of the reconciled outlet gas at the measured T and P.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    approach_k: Vec<Option<f64>>,
    /// Quantities the (unbounded) least squares took below zero: no gas to compute an
    /// approach with, so `approach_k` is null; usually beside a gross error.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    reconciled_below_zero: Vec<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    iterations: Option<u32>,
}

#[derive(Serialize)]
struct ElementOut {
    element: &'static str,
    in_kmol_h: Option<f64>,
    out_kmol_h: Option<f64>,
    imbalance_pct_measured: Option<f64>,
    imbalance_pct_reconciled: Option<f64>,
}

#[derive(Serialize)]
struct GlobalTestOut {
    statistic: Option<f64>,
    dof: usize,
    critical: Option<f64>,
    passed: bool,
}

#[derive(Serialize)]
struct MeasurementOut<'a> {
    tag: &'a str,
    measured: Option<f64>,
    reconciled: Option<f64>,
    /// The measurement test: |adjustment| / its standard deviation, against the
    /// Šidák-corrected critical value.
    #[serde(skip_serializing_if = "Option::is_none")]
    z: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    critical: Option<f64>,
    #[serde(skip_serializing_if = "std::ops::Not::not")]
    failed: bool,
}

fn reconciliation_out<'a>(
    db: &SpeciesDb,
    found: &'a Result<crate::monitor::Reconciled, String>,
) -> ReconciliationOut<'a> {
    let Ok(r) = found else {
        return ReconciliationOut {
            available: false,
            why: found.as_ref().err().map(String::as_str),
            inlet_sample_ts: None,
            elements: Vec::new(),
            global_test: None,
            suspect: None,
            suspect_equivalents: Vec::new(),
            measurements: Vec::new(),
            outlet_dry_mole_fractions: None,
            steam_ratio_out: None,
            steam_ratio_in: None,
            approach_k: Vec::new(),
            reconciled_below_zero: Vec::new(),
            iterations: None,
        };
    };
    let rec = &r.rec;
    let elements = rec
        .closure_after
        .iter()
        .map(|after| {
            let before = rec
                .closure_before
                .iter()
                .find(|b| b.element == after.element);
            ElementOut {
                element: after.element,
                in_kmol_h: finite(after.in_kmol_h),
                out_kmol_h: finite(after.out_kmol_h),
                imbalance_pct_measured: before.and_then(|b| finite(b.imbalance_pct)),
                imbalance_pct_reconciled: finite(after.imbalance_pct),
            }
        })
        .collect();
    ReconciliationOut {
        available: true,
        why: None,
        inlet_sample_ts: Some(format_rfc3339(r.inlet_sample_ts_ms)),
        elements,
        global_test: rec.global.map(|g| GlobalTestOut {
            statistic: finite(g.statistic),
            dof: g.dof,
            critical: finite(g.critical),
            passed: g.passed,
        }),
        suspect: rec.suspect.as_deref(),
        suspect_equivalents: rec.suspect_equivalents.iter().map(String::as_str).collect(),
        measurements: rec
            .estimates
            .iter()
            .map(|e| MeasurementOut {
                tag: &e.tag,
                measured: finite_opt(e.measured),
                reconciled: finite(e.reconciled),
                z: e.test.and_then(|t| finite(t.z)),
                critical: e.test.and_then(|t| finite(t.critical)),
                failed: e.test.is_some_and(|t| t.failed),
            })
            .collect(),
        outlet_dry_mole_fractions: Some(
            rec.outlet_dry_fractions()
                .iter()
                .map(|(i, y)| (db.get(*i).name.clone(), *y))
                .collect(),
        ),
        steam_ratio_out: finite_opt(rec.outlet_steam_to_dry()),
        steam_ratio_in: finite_opt(rec.inlet_steam_to_dry()),
        approach_k: r.approach_k.iter().map(|a| finite_opt(*a)).collect(),
        reconciled_below_zero: rec.below_zero(),
        iterations: Some(rec.iterations),
    }
}

/// The advisory notice every result and status message carries.
pub(crate) const ADVISORY_SHORT: &str = "advisory only: not a safety function; the plant's alarm and safety systems, local codes and licensed engineering practice govern";

/// The key component's wet mole fraction on the analyser's basis.
fn key_on_basis(r: &ReactorSettings, wet: &[f64], y: Option<f64>) -> Option<f64> {
    let water = r
        .spec
        .model
        .names()
        .iter()
        .position(|n| n == "H2O")
        .and_then(|i| wet.get(i).copied());
    y.map(|y| crate::monitor::on_basis(y, water, r.spec.composition.basis))
}

fn headline(
    r: &ReactorSettings,
    e: &Evaluation,
    key: &str,
    approach: Option<(f64, Option<f64>)>,
    key_basis: Option<f64>,
    dl: Option<f64>,
) -> HeadlineOut {
    use crate::units::fmt_num;
    if e.quality == crate::monitor::Quality::Bad {
        return HeadlineOut {
            figure: "none",
            value: None,
            unit: "",
            text: "no figure: the result is bad (see reasons)".into(),
        };
    }
    if e.approach_not_meaningful {
        let (value, unit) = match key_basis {
            Some(y) if y < 1e-3 => (Some(y * 1e6), "ppm"),
            Some(y) => (Some(y * 100.0), "mol%"),
            None => (None, ""),
        };
        let basis = r.spec.composition.basis.as_str();
        let dl_text = dl.map_or(String::new(), |d| {
            format!(", detection limit {}", crate::monitor::fmt_fraction(d))
        });
        return HeadlineOut {
            figure: "key-measured",
            value: value.and_then(finite),
            unit,
            text: match value {
                Some(v) => format!(
                    "{key} slip {} {unit} {basis}{dl_text}; approach not meaningful (equilibrium below detection)",
                    fmt_num(v, 3)
                ),
                None => format!("{key} slip not measured"),
            },
        };
    }
    match approach {
        Some((a, u)) => HeadlineOut {
            figure: "approach",
            value: finite(a),
            unit: "K",
            text: format!(
                "approach {}{} K ({})",
                fmt_num(a, 3),
                u.map_or(String::new(), |u| format!(" ± {}", fmt_num(u, 2))),
                if a >= 0.0 {
                    "short of equilibrium"
                } else {
                    "past equilibrium"
                }
            ),
        },
        None => HeadlineOut {
            figure: "none",
            value: None,
            unit: "",
            text: "no approach (see reasons)".into(),
        },
    }
}

/// The result payload, serialised straight from borrowed data.
#[derive(Serialize)]
struct ResultOut<'a> {
    schema: &'static str,
    reactor: &'a str,
    name: &'a str,
    analysis_ts: String,
    sample_ts: String,
    evaluated_at: String,
    quality: &'static str,
    reasons: Vec<ReasonOut<'a>>,
    k_source: Option<&'static str>,
    eos: &'static str,
    ln_k: Option<f64>,
    ln_q: Option<f64>,
    q_over_k: Option<f64>,
    direction: Option<&'static str>,
    affinity_j_per_mol: Option<f64>,
    equilibrium_temperature_k: Option<f64>,
    approach_k: Option<f64>,
    approach_uncertainty_k: Option<f64>,
    uncertainty_budget_k: Option<BudgetOut>,
    reactions: Vec<ReactionOut<'a>>,
    temperature_k: Option<f64>,
    temperature_spread_k: Option<f64>,
    pressure_bar: Option<f64>,
    steam_ratio: Option<f64>,
    inputs: Vec<InputOut<'a>>,
    basis: &'static str,
    key_component: &'a str,
    key_measured_mole_fraction: Option<f64>,
    key_equilibrium_mole_fraction: Option<f64>,
    /// The key component on the analyser's basis (dry if it analyses dry), with the
    /// analyser's detection limit for it.
    key_measured_on_basis_mole_fraction: Option<f64>,
    key_equilibrium_on_basis_mole_fraction: Option<f64>,
    key_detection_limit_mole_fraction: Option<f64>,
    headline: HeadlineOut,
    #[serde(skip_serializing_if = "Option::is_none")]
    bed_rise: Option<BedRiseOut>,
    #[serde(skip_serializing_if = "Option::is_none")]
    bed_profile: Option<BedProfileOut<'a>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    reconciliation: Option<ReconciliationOut<'a>>,
    advisory: &'static str,
    mole_fractions: BySpecies<'a>,
    equilibrium_mole_fractions: BySpecies<'a>,
    fugacity_coefficients: BySpecies<'a>,
    compressibility_factor: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    drift: Option<super::watch::DriftOut>,
}

/// A result's headline as typed figures, for the shell's own readers of results (the
/// live page's trend), so that they need not read the JSON back: the same figure, unit
/// and value as the result's `headline`, and its top-level `approach_uncertainty_k`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct HeadlinePoint {
    pub analysis_ts_ms: i64,
    /// `approach`, `key-measured` or `none`, as in the result.
    pub figure: &'static str,
    pub unit: &'static str,
    pub value: Option<f64>,
    pub approach_uncertainty_k: Option<f64>,
}

/// The result JSON for one evaluation (published retained on `<prefix>/<reactor>/result`).
#[cfg(test)]
pub(crate) fn encode_result(
    r: &ReactorSettings,
    db: &SpeciesDb,
    e: &Evaluation,
    evaluated_at_ms: i64,
    drift: Option<&crate::monitor::watch::DriftFigures>,
) -> String {
    encode_result_and_point(r, db, e, evaluated_at_ms, drift).0
}

/// The result JSON for one evaluation with its headline as typed figures (what the text's `analysis_ts`,
/// `headline` and `approach_uncertainty_k` say).
pub(crate) fn encode_result_and_point(
    r: &ReactorSettings,
    db: &SpeciesDb,
    e: &Evaluation,
    evaluated_at_ms: i64,
    drift: Option<&crate::monitor::watch::DriftFigures>,
) -> (String, HeadlinePoint) {
    let names = r.spec.model.names();
    // A figure is published only from a usable analysis: bad results carry no approach
    // (K, Q and the affinity stay, for the record of what the analyser said).
    let good = e.quality != crate::monitor::Quality::Bad;
    let reactions = r
        .spec
        .model
        .reactions()
        .iter()
        .zip(&e.reactions)
        .zip(&r.spec.reaction_labels)
        .map(|((t, a), label)| ReactionOut {
            reaction: label,
            k_source: t.k.id().as_str(),
            ln_k: finite(a.ln_k),
            ln_q: finite(a.ln_q),
            q_over_k: finite(a.q_over_k),
            direction: a.direction.as_str(),
            affinity_j_per_mol: finite(a.affinity_j_per_mol),
            delta_h_j_per_mol: finite(a.delta_h_j_per_mol),
            endothermic: a.endothermic,
            equilibrium_temperature_k: finite_opt(a.equilibrium_temperature_k),
            approach_k: finite_opt(a.approach_k).filter(|_| good),
            approach_uncertainty_k: finite_opt(a.approach_uncertainty_k).filter(|_| good),
            uncertainty_budget_k: a
                .uncertainty_budget_k
                .as_ref()
                .filter(|_| good)
                .map(BudgetOut::from),
            flags: a.flags.names().collect(),
        })
        .collect();
    let first = e.reactions.first();
    let usable = first.filter(|_| good);
    let key_name = &db.get(r.spec.key_component).name;
    let key_index = r
        .spec
        .composition
        .components
        .iter()
        .position(|c| c == key_name);
    let key_dl = key_index.and_then(|i| {
        r.spec
            .composition
            .detection_limits
            .get(i)
            .copied()
            .flatten()
    });
    let key_basis = e.key_measured_on_basis;
    let approach =
        usable.and_then(|a| finite_opt(a.approach_k).map(|x| (x, a.approach_uncertainty_k)));
    let out = ResultOut {
        schema: RESULT_SCHEMA,
        reactor: &r.spec.id,
        name: &r.spec.name,
        analysis_ts: format_rfc3339(e.analysis_ts_ms),
        sample_ts: format_rfc3339(e.sample_ts_ms),
        evaluated_at: format_rfc3339(evaluated_at_ms),
        quality: e.quality.as_str(),
        reasons: e
            .reasons
            .iter()
            .map(|x| ReasonOut {
                code: x.code.as_str(),
                severity: x.severity.as_str(),
                message: &x.message,
            })
            .collect(),
        k_source: r.spec.model.reactions().first().map(|t| t.k.id().as_str()),
        eos: r.spec.eos.as_str(),
        ln_k: first.and_then(|a| finite(a.ln_k)),
        ln_q: first.and_then(|a| finite(a.ln_q)),
        q_over_k: first.and_then(|a| finite(a.q_over_k)),
        direction: first.map(|a| a.direction.as_str()),
        affinity_j_per_mol: first.and_then(|a| finite(a.affinity_j_per_mol)),
        equilibrium_temperature_k: first.and_then(|a| finite_opt(a.equilibrium_temperature_k)),
        approach_k: usable.and_then(|a| finite_opt(a.approach_k)),
        approach_uncertainty_k: usable.and_then(|a| finite_opt(a.approach_uncertainty_k)),
        uncertainty_budget_k: usable
            .and_then(|a| a.uncertainty_budget_k.as_ref())
            .map(BudgetOut::from),
        reactions,
        temperature_k: finite_opt(e.temperature_k),
        temperature_spread_k: finite_opt(e.temperature_spread_k),
        pressure_bar: finite_opt(e.pressure_bar),
        steam_ratio: finite_opt(e.steam_ratio),
        inputs: e
            .inputs
            .iter()
            .map(|i| InputOut {
                tag: &i.tag,
                value: finite_opt(i.value),
                unit: i.unit,
                age_s: i.age_ms.map(|a| a as f64 / 1000.0),
                used: i.used,
            })
            .collect(),
        basis: r.spec.composition.basis.as_str(),
        key_component: key_name,
        key_measured_mole_fraction: finite_opt(e.key_measured),
        key_equilibrium_mole_fraction: finite_opt(e.key_equilibrium),
        key_measured_on_basis_mole_fraction: finite_opt(key_basis),
        key_equilibrium_on_basis_mole_fraction: finite_opt(key_on_basis(
            r,
            &e.equilibrium_mole_fractions,
            e.key_equilibrium,
        )),
        key_detection_limit_mole_fraction: key_dl,
        headline: headline(r, e, key_name, approach, key_basis, key_dl),
        bed_rise: e.bed_rise.as_ref().map(BedRiseOut::from),
        bed_profile: match (&r.spec.bed_profile, &e.bed_profile) {
            (Some(spec), Some(found)) => Some(bed_profile_out(spec, found, drift)),
            _ => None,
        },
        reconciliation: e.reconciliation.as_ref().map(|r| reconciliation_out(db, r)),
        advisory: ADVISORY_SHORT,
        mole_fractions: BySpecies(names, &e.mole_fractions),
        equilibrium_mole_fractions: BySpecies(names, &e.equilibrium_mole_fractions),
        fugacity_coefficients: BySpecies(names, &e.fugacity_coefficients),
        compressibility_factor: finite_opt(e.compressibility_factor),
        drift: drift.map(super::watch::DriftOut::from),
    };
    let point = HeadlinePoint {
        analysis_ts_ms: e.analysis_ts_ms,
        figure: out.headline.figure,
        unit: out.headline.unit,
        value: out.headline.value,
        approach_uncertainty_k: out.approach_uncertainty_k,
    };
    (to_exact_string(&out), point)
}

thread_local! {
    /// Where results are written before their exact-size copy: it grows to the largest
    /// result once and stays, so a result costs one allocation of its own size instead
    /// of a string doubled a dozen times (with up to half of it empty while in flight).
    static SCRATCH: std::cell::RefCell<Vec<u8>> = const { std::cell::RefCell::new(Vec::new()) };
}

/// Compact JSON in a string of exactly its length.
fn to_exact_string<T: Serialize>(value: &T) -> String {
    SCRATCH.with_borrow_mut(|buf| {
        buf.clear();
        // Serialising plain data cannot fail; an empty object would be a bug.
        if serde_json::to_writer(&mut *buf, value).is_err() {
            return "{}".to_string();
        }
        String::from_utf8(buf.to_vec()).unwrap_or_else(|_| "{}".to_string())
    })
}

/// Adds the journal sequence number and the late mark at the front of a payload object.
#[cfg_attr(not(feature = "daemon"), allow(dead_code))]
pub(crate) fn with_delivery(payload: &str, seq: u64, late: bool) -> String {
    let (head, rest) = delivery_parts(payload, seq, late);
    head + rest
}

/// [`with_delivery`] as its two pieces, so that a writer can put them side by side
/// without copying the payload: the new head (`{"seq":..,"late":..,`) and the rest of
/// the payload after its opening brace.
#[cfg_attr(not(feature = "daemon"), allow(dead_code))]
pub(crate) fn delivery_parts(payload: &str, seq: u64, late: bool) -> (String, &str) {
    let body = payload.trim();
    let rest = body.strip_prefix('{').unwrap_or(body);
    let sep = if rest.trim_start().starts_with('}') {
        ""
    } else {
        ","
    };
    (format!("{{\"seq\":{seq},\"late\":{late}{sep}"), rest)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::monitor::SourceQuality;
    use crate::wire::fixtures::{AT_MS, lts1};
    use serde_json::Value;

    #[test]
    fn a_result_takes_exactly_its_own_length_in_memory() {
        // Up to 256 results wait in memory for the broker: none may carry empty room.
        let (s, e) = lts1(SourceQuality::Good);
        let rs = s.reactors.iter().find(|r| r.spec.id == "lts1").unwrap();
        for _ in 0..3 {
            let (text, _) = encode_result_and_point(rs, &s.species, &e, AT_MS, None);
            assert!(text.len() > 1000, "a whole result");
            assert_eq!(text.capacity(), text.len());
            let _: Value = serde_json::from_str(&text).expect("JSON");
        }
    }

    #[test]
    fn delivery_prefix() {
        assert_eq!(
            with_delivery("{\"a\":1}", 7, false),
            "{\"seq\":7,\"late\":false,\"a\":1}"
        );
        assert_eq!(with_delivery("{}", 8, true), "{\"seq\":8,\"late\":true}");
        let v: Value = serde_json::from_str(&with_delivery("{ \"a\" : [1] }", 9, true)).unwrap();
        assert_eq!(v["seq"], 9);
    }

    fn lts1_result(quality: SourceQuality) -> Value {
        let (s, e) = lts1(quality);
        let rs = s.reactors.iter().find(|r| r.spec.id == "lts1").unwrap();
        serde_json::from_str(&encode_result(rs, &s.species, &e, AT_MS, None)).unwrap()
    }

    #[test]
    fn a_bad_result_carries_no_approach_for_any_reaction() {
        // A bad analysis (e.g. the analyser on calibration gas) gives K and Q figures for
        // the record, but no approach anywhere: neither the headline nor per reaction.
        let out = lts1_result(SourceQuality::Bad);
        assert_eq!(out["quality"], "bad");
        assert!(out["approach_k"].is_null(), "{}", out["approach_k"]);
        let r0 = &out["reactions"][0];
        for key in [
            "approach_k",
            "approach_uncertainty_k",
            "uncertainty_budget_k",
        ] {
            assert!(r0[key].is_null(), "reactions[0].{key} = {}", r0[key]);
        }
        assert!(r0["ln_k"].is_number(), "K stays for the record");
        // The same gas with a good analysis has them (docs/domain.md §8 gas, fixture).
        let good = lts1_result(SourceQuality::Good);
        assert!(good["reactions"][0]["approach_k"].is_number());
    }

    #[test]
    fn result_carries_the_uncertainty_budget() {
        // Demo lts1 (config/demo-plant.toml, invented) with the docs/domain.md §8 LTS gas at
        // 220 °C: the shares by input add up in quadrature to approach_uncertainty_k.
        let out = lts1_result(SourceQuality::Good);
        let u = out["approach_uncertainty_k"].as_f64().unwrap();
        for b in [
            &out["uncertainty_budget_k"],
            &out["reactions"][0]["uncertainty_budget_k"],
        ] {
            let sq: f64 = ["composition", "steam_ratio", "pressure", "temperature"]
                .iter()
                .map(|k| b[*k].as_f64().unwrap().powi(2))
                .sum();
            assert!((sq - u * u).abs() < 1e-9, "{b} vs {u}");
            assert_eq!(b["temperature"], 2.0, "demo lts1 thermocouple ±2 K");
        }
    }
}
