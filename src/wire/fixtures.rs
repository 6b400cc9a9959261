//! Test fixtures shared by the message tests of this folder (compiled for tests only).

use crate::composition::Basis;
use crate::monitor::{AnalysisReading, Evaluation, Input, Outcome, ReactorMonitor};
use crate::monitor::{ScalarReading, SourceQuality};

pub(crate) const AT_MS: i64 = 1_796_083_200_000; // 2026-12-01T00:00:00Z, invented for the test

/// Demo lts1 (config/demo-plant.toml, invented) with the docs/domain.md §8 LTS gas
/// at 220 °C and 29 bar gauge (invented), evaluated without drift figures.
pub(crate) fn lts1(quality: SourceQuality) -> (crate::config::Settings, Evaluation) {
    let s = crate::config::from_str(
        include_str!("../../config/demo-plant.toml"),
        std::path::Path::new("."),
    )
    .unwrap();
    let i = s.reactors.iter().position(|r| r.spec.id == "lts1").unwrap();
    let r = &s.reactors[i].spec;
    let mut m = ReactorMonitor::new(r);
    let sc = |v| ScalarReading {
        ts_ms: AT_MS,
        value: v,
        quality: SourceQuality::Good,
    };
    for t in 0..r.temperatures.len() {
        m.accept(r, &s.species, Input::Temperature(t, sc(493.15)), AT_MS);
    }
    m.accept(r, &s.species, Input::Pressure(sc(30.01325)), AT_MS);
    m.accept(r, &s.species, Input::SteamRatio(sc(0.36312)), AT_MS);
    let lag = i64::try_from(r.composition.lag.as_millis()).unwrap();
    let v = [61.0536, 18.98637, 0.28697, 19.38096, 0.2921, 0.0];
    let a = AnalysisReading {
        ts_ms: AT_MS + lag,
        values: v.iter().map(|x| Some(x / 100.0)).collect(),
        basis: Some(Basis::Dry),
        quality,
    };
    let Outcome::Evaluated(e) = m.accept(r, &s.species, Input::Analysis(a), AT_MS + lag) else {
        panic!("no evaluation");
    };
    (s, *e)
}

/// [`lts1`] with a headline of each kind: an approach (good), none (bad), and the key
/// component's slip where the approach is not meaningful.
pub(crate) fn lts1_each_headline() -> Vec<(crate::config::Settings, Evaluation)> {
    let (s, mut slip) = lts1(SourceQuality::Good);
    slip.approach_not_meaningful = true;
    vec![
        lts1(SourceQuality::Good),
        lts1(SourceQuality::Bad),
        (s, slip),
    ]
}
