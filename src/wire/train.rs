//! The train summary (`<prefix>/train/<id>`, retained, schema `eqwatch.train/1`): the
//! latest figures of each unit of a train (or bed of a converter) side by side, the worst
//! quality, the units whose balances fail, and the unit that limits the train: the
//! earliest end of run or bed end of life forecast among them.

use serde::Serialize;

use super::finite;
use crate::config::{ReactorSettings, TrainSettings};
use crate::monitor::drift::EndOfRun;
use crate::monitor::watch::{DriftFigures, Forecast};
use crate::monitor::{Evaluation, Quality};
use crate::timefmt::format_rfc3339;

pub(crate) const TRAIN_SCHEMA: &str = "eqwatch.train/1";

/// One unit's latest figures, as a train summary shows them.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Member {
    /// Index into the configured reactors.
    pub r: usize,
    pub id: String,
    pub sample_ts_ms: i64,
    pub quality: Quality,
    /// The approach of the first reaction (none on a bad result or where the result says
    /// no approach is meaningful), the normalised one where configured.
    pub approach_k: Option<f64>,
    pub normalised_k: Option<f64>,
    /// The key component's measured slip where the approach is not meaningful (ppm).
    pub slip_ppm: Option<f64>,
    pub trend_k_per_day: Option<f64>,
    pub end_of_run_ms: Option<i64>,
    pub front_depth_m: Option<f64>,
    pub front_end_of_life_ms: Option<i64>,
    /// The reconciliation's global test passed, where there is one.
    pub balances_pass: Option<bool>,
    pub suspect: Option<String>,
}

impl Member {
    pub(crate) fn of(r: usize, rs: &ReactorSettings, e: &Evaluation, fig: &DriftFigures) -> Self {
        let usable = e.quality != Quality::Bad;
        let approach_k = e
            .reactions
            .first()
            .and_then(|a| a.approach_k)
            .filter(|_| usable && !e.approach_not_meaningful)
            .and_then(finite);
        let rec = e.reconciliation.as_ref().and_then(|r| r.as_ref().ok());
        Self {
            r,
            id: rs.spec.id.clone(),
            sample_ts_ms: e.sample_ts_ms,
            quality: e.quality,
            approach_k,
            normalised_k: fig
                .normalised
                .as_ref()
                .and_then(|n| n.sample)
                .map(|n| n.normalised)
                .filter(|_| usable)
                .and_then(finite),
            slip_ppm: e
                .key_measured_on_basis
                .filter(|_| usable && e.approach_not_meaningful)
                .map(|y| y * 1e6)
                .and_then(finite),
            trend_k_per_day: fig.trend.map(|t| t.slope_k_per_day).and_then(finite),
            end_of_run_ms: match fig.forecast {
                Forecast::At { at_ms, .. } => Some(at_ms),
                Forecast::Reached => Some(e.sample_ts_ms),
                _ => None,
            },
            front_depth_m: match &e.bed_profile {
                Some(Ok(p)) => p.front.ok().map(|f| f.depth_m).and_then(finite),
                _ => None,
            },
            front_end_of_life_ms: fig.front.and_then(|f| match f.end_of_life {
                EndOfRun::At { day, .. } => {
                    let ms = day * crate::units::DAY_MS as f64;
                    ms.is_finite().then_some(ms as i64)
                }
                EndOfRun::NotRising => None,
            }),
            balances_pass: rec.and_then(|r| r.rec.global).map(|g| g.passed),
            suspect: rec.and_then(|r| r.rec.suspect.clone()),
        }
    }
}

/// A train's state: the latest figures of each unit.
#[derive(Debug, Clone)]
pub(crate) struct Train {
    pub topic: String,
    id: String,
    name: String,
    site: String,
    members: Vec<usize>,
    latest: Vec<Option<Member>>,
}

#[derive(Serialize)]
struct TrainOut<'a> {
    schema: &'static str,
    site: &'a str,
    train: &'a str,
    name: &'a str,
    /// The latest sample time among the units.
    at: Option<String>,
    /// The worst quality among the units' latest results (`no-result` while a unit has
    /// none yet).
    quality: &'static str,
    members: Vec<MemberOut<'a>>,
    /// The unit whose end of run (approach) or bed end of life comes first.
    #[serde(skip_serializing_if = "Option::is_none")]
    limiting: Option<LimitingOut<'a>>,
    balances_failing: Vec<&'a str>,
    advisory: &'static str,
}

#[derive(Serialize)]
struct MemberOut<'a> {
    reactor: &'a str,
    sample_ts: Option<String>,
    quality: &'static str,
    approach_k: Option<f64>,
    normalised_approach_k: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    slip_ppm: Option<f64>,
    trend_k_per_day: Option<f64>,
    end_of_run: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    front_depth_m: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    bed_end_of_life: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    balances: Option<&'static str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    suspect: Option<&'a str>,
}

#[derive(Serialize)]
struct LimitingOut<'a> {
    reactor: &'a str,
    /// `end-of-run` (the approach's forecast) or `bed-end-of-life` (the front's).
    by: &'static str,
    date: String,
}

impl Train {
    pub(crate) fn new(t: &TrainSettings, site: &str, prefix: &str) -> Self {
        Self {
            topic: format!("{prefix}/train/{}", t.id),
            id: t.id.clone(),
            name: t.name.clone(),
            site: site.to_string(),
            members: t.members.clone(),
            latest: vec![None; t.members.len()],
        }
    }

    /// Takes a unit's latest figures; whether the unit is in this train.
    pub(crate) fn update(&mut self, m: &Member) -> bool {
        match self.members.iter().position(|&r| r == m.r) {
            Some(i) => {
                self.latest[i] = Some(m.clone());
                true
            }
            None => false,
        }
    }

    pub(crate) fn encode(&self) -> String {
        let present: Vec<&Member> = self.latest.iter().flatten().collect();
        let quality = if present.len() < self.members.len() {
            "no-result"
        } else if present.iter().any(|m| m.quality == Quality::Bad) {
            "bad"
        } else if present.iter().any(|m| m.quality == Quality::Uncertain) {
            "uncertain"
        } else {
            "good"
        };
        let mut limiting: Option<(i64, &str, &'static str)> = None;
        for m in &present {
            for (at, by) in [
                (m.end_of_run_ms, "end-of-run"),
                (m.front_end_of_life_ms, "bed-end-of-life"),
            ] {
                if let Some(at) = at
                    && limiting.is_none_or(|(l, _, _)| at < l)
                {
                    limiting = Some((at, m.id.as_str(), by));
                }
            }
        }
        let out = TrainOut {
            schema: TRAIN_SCHEMA,
            site: &self.site,
            train: &self.id,
            name: &self.name,
            at: present
                .iter()
                .map(|m| m.sample_ts_ms)
                .max()
                .map(format_rfc3339),
            quality,
            members: present
                .iter()
                .map(|m| MemberOut {
                    reactor: &m.id,
                    sample_ts: Some(format_rfc3339(m.sample_ts_ms)),
                    quality: m.quality.as_str(),
                    approach_k: m.approach_k,
                    normalised_approach_k: m.normalised_k,
                    slip_ppm: m.slip_ppm,
                    trend_k_per_day: m.trend_k_per_day,
                    end_of_run: m.end_of_run_ms.map(format_rfc3339),
                    front_depth_m: m.front_depth_m,
                    bed_end_of_life: m.front_end_of_life_ms.map(format_rfc3339),
                    balances: m.balances_pass.map(|p| if p { "pass" } else { "fail" }),
                    suspect: m.suspect.as_deref(),
                })
                .collect(),
            limiting: limiting.map(|(at, reactor, by)| LimitingOut {
                reactor,
                by,
                date: format_rfc3339(at),
            }),
            balances_failing: present
                .iter()
                .filter(|m| m.balances_pass == Some(false))
                .map(|m| m.id.as_str())
                .collect(),
            advisory: super::result::ADVISORY_SHORT,
        };
        // Serialising plain data to a String cannot fail; an empty object would be a bug.
        serde_json::to_string(&out).unwrap_or_else(|_| "{}".to_string())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn member(r: usize, id: &str, q: Quality, eor_ms: Option<i64>, eol_ms: Option<i64>) -> Member {
        // Invented figures for the test.
        Member {
            r,
            id: id.into(),
            sample_ts_ms: 1_796_083_200_000 + r as i64,
            quality: q,
            approach_k: Some(10.0 + r as f64),
            normalised_k: None,
            slip_ppm: None,
            trend_k_per_day: Some(0.02),
            end_of_run_ms: eor_ms,
            front_depth_m: None,
            front_end_of_life_ms: eol_ms,
            balances_pass: Some(r != 1),
            suspect: (r == 1).then(|| "AI-300 CO".to_string()),
        }
    }

    fn train() -> Train {
        Train::new(
            &TrainSettings {
                id: "shift".into(),
                name: "Shift train".into(),
                members: vec![0, 1],
            },
            "baw1",
            "eqwatch/baw1",
        )
    }

    #[test]
    fn a_train_waits_for_every_unit_then_shows_the_worst_quality_and_the_limiting_unit() {
        let mut t = train();
        assert_eq!(t.topic, "eqwatch/baw1/train/shift");
        assert!(!t.update(&member(7, "other", Quality::Good, None, None)));
        assert!(t.update(&member(
            0,
            "hts1",
            Quality::Good,
            Some(2_000_000_000_000),
            None
        )));
        let v: serde_json::Value = serde_json::from_str(&t.encode()).unwrap();
        assert_eq!(v["quality"], "no-result");
        assert_eq!(v["members"].as_array().unwrap().len(), 1);
        // The second unit: uncertain, its balances failing, its bed's end of life first.
        assert!(t.update(&member(
            1,
            "lts1",
            Quality::Uncertain,
            Some(2_100_000_000_000),
            Some(1_900_000_000_000)
        )));
        let v: serde_json::Value = serde_json::from_str(&t.encode()).unwrap();
        assert_eq!(v["schema"], TRAIN_SCHEMA);
        assert_eq!(v["quality"], "uncertain");
        assert_eq!(v["limiting"]["reactor"], "lts1");
        assert_eq!(v["limiting"]["by"], "bed-end-of-life");
        assert_eq!(v["balances_failing"], serde_json::json!(["lts1"]));
        assert_eq!(v["members"][1]["suspect"], "AI-300 CO");
        assert_eq!(v["members"][0]["balances"], "pass");
        assert!(
            v["advisory"]
                .as_str()
                .unwrap()
                .contains("not a safety function")
        );
    }
}
