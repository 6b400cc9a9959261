//! The per-reactor monitor (eqwatch-core's `monitor`) on the demo plant's reactors,
//! built from `config/demo-plant.toml` by the application's configuration (the core
//! cannot read the configuration, so these tests live on this side).

use eqwatch::composition::Basis;
use eqwatch::config::{Settings, from_str};
use eqwatch::monitor::spec::ReactorSpec;
use eqwatch::monitor::*;
use eqwatch::units::duration_ms as ms;

/// The demo plant's configuration (invented plant) as the test reactor set.
fn settings() -> Settings {
    from_str(
        include_str!("../../config/demo-plant.toml"),
        std::path::Path::new("."),
    )
    .expect("demo config")
}

fn reactor<'a>(s: &'a Settings, id: &str) -> &'a ReactorSpec {
    &s.reactors
        .iter()
        .find(|r| r.spec.id == id)
        .expect("reactor")
        .spec
}

const T0: i64 = 1_796_083_200_000;
const MIN: i64 = 60_000;

fn scalar(ts: i64, v: f64) -> ScalarReading {
    ScalarReading {
        ts_ms: ts,
        value: v,
        quality: SourceQuality::Good,
    }
}

/// The LTS gas of docs/domain.md §8 in the demo's lts1 component order (H2, N2, CO, CO2, CH4, Ar).
fn lts_analysis(ts: i64) -> AnalysisReading {
    let v = [61.0536, 18.98637, 0.28697, 19.38096, 0.2921, 0.0];
    AnalysisReading {
        ts_ms: ts,
        values: v.iter().map(|x| Some(x / 100.0)).collect(),
        basis: Some(Basis::Dry),
        quality: SourceQuality::Good,
    }
}

fn feed_lts(m: &mut ReactorMonitor, s: &Settings, at: i64, t_k: f64) {
    let r = reactor(s, "lts1");
    for i in 0..r.temperatures.len() {
        m.accept(r, &s.species, Input::Temperature(i, scalar(at, t_k)), at);
    }
    m.accept(r, &s.species, Input::Pressure(scalar(at, 30.01325)), at);
    m.accept(r, &s.species, Input::SteamRatio(scalar(at, 0.36312)), at);
}

fn evaluated(o: Outcome) -> Evaluation {
    match o {
        Outcome::Evaluated(e) => *e,
        other => panic!("expected an evaluation, got {other:?}"),
    }
}

fn codes(e: &Evaluation) -> Vec<&'static str> {
    e.reasons.iter().map(|r| r.code.as_str()).collect()
}

#[test]
fn aligned_good_analysis_matches_the_worked_example() {
    // docs/domain.md §8 [derived]: with Moe's K at 220 °C the LTS approach is 12.00 K.
    // Ar = 0 here, which is allowed (inert, not in the reaction).
    let s = settings();
    let r = reactor(&s, "lts1");
    let mut m = ReactorMonitor::new(r);
    let sample = T0 + 10 * MIN;
    feed_lts(&mut m, &s, sample, 493.15);
    let lag = ms(r.composition.lag);
    let e = evaluated(m.accept(
        r,
        &s.species,
        Input::Analysis(lts_analysis(sample + lag)),
        sample + lag,
    ));
    assert_eq!(e.quality, Quality::Good, "{:?}", e.reasons);
    assert_eq!(e.sample_ts_ms, sample);
    assert!((e.reactions[0].approach_k.unwrap() - 12.00).abs() < 0.01);
    assert!(e.key_measured.is_some() && e.key_equilibrium.is_some());
    // The same analysis again is a redelivery; an older one is refused.
    assert_eq!(
        m.accept(
            r,
            &s.species,
            Input::Analysis(lts_analysis(sample + lag)),
            sample + lag
        ),
        Outcome::Duplicate
    );
    assert!(matches!(
        m.accept(r, &s.species, Input::Analysis(lts_analysis(sample)), sample),
        Outcome::OutOfOrder { .. }
    ));
}

#[test]
fn negative_approach_within_its_uncertainty_keeps_the_result_good() {
    // docs/domain.md §8 [derived]: this gas is at equilibrium (Moe K) at 505.15 K. Read at
    // 508 K the approach is −2.85 K against a ± of about 4 K (demo lts1: ±2 K, ±0.2
    // bar, ±2 %, ±5 %): informational, still good. At 520 K (−14.85 K) it is beyond.
    let s = settings();
    let r = reactor(&s, "lts1");
    let lag = ms(r.composition.lag);
    let mut m = ReactorMonitor::new(r);
    let mut run = |at: i64, t_k: f64| {
        feed_lts(&mut m, &s, at, t_k);
        evaluated(m.accept(
            r,
            &s.species,
            Input::Analysis(lts_analysis(at + lag)),
            at + lag,
        ))
    };
    let e = run(T0 + 10 * MIN, 508.0);
    assert_eq!(e.quality, Quality::Good, "{:?}", e.reasons);
    assert_eq!(codes(&e), vec!["at_equilibrium_within_uncertainty"]);
    assert!(e.reactions[0].approach_k.unwrap() < 0.0);
    let e = run(T0 + 20 * MIN, 520.0);
    assert_eq!(e.quality, Quality::Uncertain, "{:?}", e.reasons);
    assert_eq!(codes(&e), vec!["beyond_equilibrium"]);
}

#[test]
fn stale_and_missing_inputs_are_reasons_not_defaults() {
    let s = settings();
    let r = reactor(&s, "lts1");
    let mut m = ReactorMonitor::new(r);
    // Nothing but the analysis: no temperature, pressure or steam ratio.
    let e = evaluated(m.accept(r, &s.species, Input::Analysis(lts_analysis(T0)), T0));
    assert_eq!(e.quality, Quality::Bad);
    assert!(e.reactions.is_empty() && e.temperature_k.is_none() && e.pressure_bar.is_none());
    for c in ["no_temperature", "stale_pressure", "stale_steam_ratio"] {
        assert!(codes(&e).contains(&c), "{c}: {:?}", codes(&e));
    }
    // One thermocouple silent: left out, uncertain; the other carries the figure.
    let later = T0 + 60 * MIN;
    m.accept(
        r,
        &s.species,
        Input::Temperature(0, scalar(later, 493.15)),
        later,
    );
    m.accept(r, &s.species, Input::Pressure(scalar(later, 30.0)), later);
    m.accept(
        r,
        &s.species,
        Input::SteamRatio(scalar(later, 0.36312)),
        later,
    );
    let lag = ms(r.composition.lag);
    let e = evaluated(m.accept(
        r,
        &s.species,
        Input::Analysis(lts_analysis(later + lag)),
        later + lag,
    ));
    assert_eq!(e.quality, Quality::Uncertain, "{:?}", e.reasons);
    assert_eq!(codes(&e), vec!["stale_temperature"]);
    assert!(e.reactions[0].approach_k.is_some());
}

#[test]
fn bad_values_transients_and_stuck_analysers() {
    let s = settings();
    let r = reactor(&s, "lts1");
    let lag = ms(r.composition.lag);
    let mut m = ReactorMonitor::new(r);
    let mut at = T0;
    let mut next = |m: &mut ReactorMonitor, a: AnalysisReading, t_k: f64| {
        at += 5 * MIN;
        feed_lts(m, &s, at, t_k);
        let mut a = a;
        a.ts_ms = at + lag;
        evaluated(m.accept(r, &s.species, Input::Analysis(a), at + lag))
    };
    let mut nan = lts_analysis(0);
    nan.values[1] = Some(f64::NAN);
    assert!(codes(&next(&mut m, nan, 493.15)).contains(&"bad_value"));
    let mut neg = lts_analysis(0);
    neg.values[2] = Some(-0.001);
    assert!(codes(&next(&mut m, neg, 493.15)).contains(&"negative_value"));
    let mut short = lts_analysis(0);
    short.values[0] = Some(0.50);
    assert!(codes(&next(&mut m, short, 493.15)).contains(&"sum_outside_tolerance"));
    let mut missing = lts_analysis(0);
    missing.values[3] = None;
    assert!(codes(&next(&mut m, missing, 493.15)).contains(&"missing_component"));
    let mut wet = lts_analysis(0);
    wet.basis = Some(Basis::Wet);
    assert!(codes(&next(&mut m, wet, 493.15)).contains(&"basis_mismatch"));
    // Three identical analyses in a row: the analyser is stuck.
    let a = next(&mut m, lts_analysis(0), 493.15);
    assert_eq!(a.quality, Quality::Good, "{:?}", a.reasons);
    next(&mut m, lts_analysis(0), 493.15);
    let e = next(&mut m, lts_analysis(0), 493.15);
    assert!(codes(&e).contains(&"analyser_stuck"), "{:?}", codes(&e));
    assert_eq!(e.quality, Quality::Bad);
}

#[test]
fn transient_temperature_is_flagged() {
    let s = settings();
    let r = reactor(&s, "lts1");
    let lag = ms(r.composition.lag);
    let mut m = ReactorMonitor::new(r);
    let sample = T0 + 30 * MIN;
    // 10 K over one analyser lag (60 s): 10 K/min, above the 2 K/min threshold.
    feed_lts(&mut m, &s, sample - lag, 483.15);
    feed_lts(&mut m, &s, sample, 493.15);
    let e = evaluated(m.accept(
        r,
        &s.species,
        Input::Analysis(lts_analysis(sample + lag)),
        sample + lag,
    ));
    assert!(codes(&e).contains(&"transient"), "{:?}", codes(&e));
    assert_eq!(e.quality, Quality::Uncertain);
}

#[test]
fn per_component_analysis_assembles_by_timestamp() {
    // The demo methanator reports each component on its own topic (invented values).
    let s = settings();
    let r = reactor(&s, "mth1");
    assert!(r.per_component());
    let mut m = ReactorMonitor::new(r);
    let at = T0 + 10 * MIN;
    for i in 0..r.temperatures.len() {
        m.accept(r, &s.species, Input::Temperature(i, scalar(at, 600.0)), at);
    }
    m.accept(r, &s.species, Input::Pressure(scalar(at, 28.0)), at);
    let lag = ms(r.composition.lag);
    let names = r.composition.components.clone();
    let value = |n: &str| match n {
        "H2" => 0.744,
        "N2" => 0.245,
        "CH4" => 0.0075,
        "Ar" => 0.0035,
        "CO" => 2e-6,
        "CO2" => 1e-6,
        other => panic!("unexpected component {other}"),
    };
    let mut last = Outcome::Stored;
    for (i, n) in names.iter().enumerate() {
        assert_eq!(
            last,
            Outcome::Stored,
            "complete before every component arrived"
        );
        last = m.accept(
            r,
            &s.species,
            Input::Component(i, scalar(at + lag, value(n))),
            at + lag,
        );
    }
    let e = evaluated(last);
    assert!(!e.reactions.is_empty(), "{:?}", e.reasons);
    assert!(e.reactions.iter().all(|a| a.ln_q.is_finite()));
}

/// The demo methanator (invented gas) with `co` and `co2` mole fractions, the outlet
/// at 600 K and the bed inlet thermocouple at `inlet_k`.
fn methanator_at(co: f64, co2: f64, inlet_k: f64) -> Evaluation {
    let s = settings();
    let r = reactor(&s, "mth1");
    let inlet = r.bed_rise.as_ref().map(|b| b.inlet);
    let mut m = ReactorMonitor::new(r);
    let at = T0 + 10 * MIN;
    for i in 0..r.temperatures.len() {
        let t = if Some(i) == inlet { inlet_k } else { 600.0 };
        m.accept(r, &s.species, Input::Temperature(i, scalar(at, t)), at);
    }
    m.accept(r, &s.species, Input::Pressure(scalar(at, 28.0)), at);
    let lag = ms(r.composition.lag);
    let mut last = Outcome::Stored;
    for (i, n) in r.composition.components.iter().enumerate() {
        let v = match n.as_str() {
            "H2" => 0.744,
            "N2" => 0.245,
            "CH4" => 0.0075,
            "Ar" => 0.0035,
            "CO" => co,
            "CO2" => co2,
            other => panic!("unexpected component {other}"),
        };
        last = m.accept(
            r,
            &s.species,
            Input::Component(i, scalar(at + lag, v)),
            at + lag,
        );
    }
    evaluated(last)
}

fn methanator(co: f64, co2: f64) -> Evaluation {
    methanator_at(co, co2, 584.0)
}

#[test]
fn no_temperature_approach_where_equilibrium_is_below_detection() {
    // 1.6 ppm CO at 600 K and 28 bar: the equilibrium CO is ~1e-7 ppm, far below the
    // demo analyser's 0.5 ppm detection limit (demo-plant.toml), so the approach
    // (which would read ~380 K) is withdrawn for both reactions, the result stays good
    // and says why [common practice at methanators, docs/domain.md §10].
    let e = methanator(1.6e-6, 0.8e-6);
    assert_eq!(e.quality, Quality::Good, "{:?}", e.reasons);
    assert!(e.approach_not_meaningful);
    assert!(
        e.reactions
            .iter()
            .all(|a| a.approach_k.is_none() && a.ln_q.is_finite())
    );
    let why: Vec<&Reason> = e
        .reasons
        .iter()
        .filter(|r| r.code == ReasonCode::ApproachNotMeaningful)
        .collect();
    assert_eq!(why.len(), 2, "{:?}", e.reasons);
    assert!(
        why[0].message.contains("detection limit of 0.5 ppm"),
        "{}",
        why[0].message
    );
    let key_eq = e.key_equilibrium.unwrap();
    assert!(key_eq < 1e-9, "equilibrium CO {key_eq}");
    assert!((e.key_measured.unwrap() - 1.6e-6).abs() < 0.1e-6);
    // A reading below the limit is taken at the limit and said so.
    let e = methanator(0.2e-6, 0.8e-6);
    assert!(
        e.reasons
            .iter()
            .any(|r| r.code == ReasonCode::BelowDetectionLimit && r.message.contains("0.2 ppm")),
        "{:?}",
        e.reasons
    );
    assert!((e.key_measured.unwrap() - 0.5e-6).abs() < 0.05e-6);
    assert_eq!(e.quality, Quality::Good);
}

#[test]
fn methanator_bed_rise_against_its_inlet() {
    // The demo methanator with its inlet thermocouple 40 K below the outlet (invented):
    // the design inlet (0.18 % CO, 0.05 % CO2 in demo-plant.toml) explains about 16 K.
    let s = settings();
    let r = reactor(&s, "mth1");
    let b = r.bed_rise.as_ref().expect("bed rise configured");
    assert_eq!(r.temperatures[b.inlet].tag, "BAW1-TI-401");
    let e = methanator_at(2e-6, 2e-6, 560.0);
    // The inlet is not averaged into the outlet temperature.
    assert_eq!(e.temperature_k, Some(600.0));
    let br = e.bed_rise.expect("bed rise");
    assert_eq!(br.rise_k, 40.0);
    let expected = 0.18 * br.per_percent.co_k + 0.05 * br.per_percent.co2_k;
    assert!((br.expected_k.unwrap() - expected).abs() < 1e-9);
    assert!((expected - 16.1).abs() < 0.6, "expected rise {expected} K");
    assert!(br.excess_k().unwrap() > 23.0);
}

/// The docs/domain.md §8 LTS analysis sampled at `sample`, reported one lag later, evaluated.
fn analyse_lts(m: &mut ReactorMonitor, s: &Settings, r: &ReactorSpec, sample: i64) -> Evaluation {
    let at = sample + ms(r.composition.lag);
    evaluated(m.accept(r, &s.species, Input::Analysis(lts_analysis(at)), at))
}

// Issue 10 §1: one reading stamped far from the clock must never take a reactor out of
// service. 9999-12-31T23:59:59Z = 253,402,300,799,000 ms (RFC 3339; epoch arithmetic).
const YEAR_9999_MS: i64 = 253_402_300_799_000;

#[test]
fn a_far_future_analysis_is_refused_and_later_analyses_still_evaluate() {
    let s = settings();
    let r = reactor(&s, "lts1");
    let mut m = ReactorMonitor::new(r);
    let lag = ms(r.composition.lag);
    let sample = T0 + 10 * MIN;
    feed_lts(&mut m, &s, sample, 493.15);
    let refused = m.accept(
        r,
        &s.species,
        Input::Analysis(lts_analysis(YEAR_9999_MS)),
        sample + lag,
    );
    assert!(matches!(refused, Outcome::OffClock { .. }), "{refused:?}");
    let e = analyse_lts(&mut m, &s, r, sample);
    assert_eq!(e.quality, Quality::Good, "{:?}", e.reasons);
}

#[test]
fn far_future_scalars_do_not_poison_the_buffers() {
    let s = settings();
    let r = reactor(&s, "lts1");
    let mut m = ReactorMonitor::new(r);
    let sample = T0 + 10 * MIN;
    // 256 thermocouple readings, a pressure and a steam ratio from the year 9999.
    for k in 0..256 {
        let o = m.accept(
            r,
            &s.species,
            Input::Temperature(0, scalar(YEAR_9999_MS + k, 1e6)),
            sample,
        );
        assert!(matches!(o, Outcome::OffClock { .. }), "{o:?}");
    }
    m.accept(
        r,
        &s.species,
        Input::Pressure(scalar(YEAR_9999_MS, 1e6)),
        sample,
    );
    m.accept(
        r,
        &s.species,
        Input::SteamRatio(scalar(YEAR_9999_MS, 50.0)),
        sample,
    );
    feed_lts(&mut m, &s, sample, 493.15);
    let e = analyse_lts(&mut m, &s, r, sample);
    assert_eq!(e.quality, Quality::Good, "{:?}", e.reasons);
    // docs/domain.md §8 [derived]: 12.00 K at 220 °C with Moe's K.
    assert!((e.reactions[0].approach_k.unwrap() - 12.00).abs() < 0.01);
}

#[test]
fn far_future_components_do_not_stop_a_per_component_analyser() {
    let s = settings();
    let r = reactor(&s, "mth1");
    let mut m = ReactorMonitor::new(r);
    let at = T0 + 10 * MIN;
    for i in 0..r.temperatures.len() {
        m.accept(r, &s.species, Input::Temperature(i, scalar(at, 600.0)), at);
    }
    m.accept(r, &s.species, Input::Pressure(scalar(at, 28.0)), at);
    let lag = ms(r.composition.lag);
    // Eight partial analyses stamped 9999 (one component each).
    for k in 0..8 {
        let o = m.accept(
            r,
            &s.species,
            Input::Component(0, scalar(YEAR_9999_MS + k, 0.7)),
            at + lag,
        );
        assert!(matches!(o, Outcome::OffClock { .. }), "{o:?}");
    }
    // Invented methanator outlet, as in per_component_analysis_assembles_by_timestamp.
    let values = [0.744, 0.245, 0.0075, 0.0035, 2e-6, 1e-6];
    let names = ["H2", "N2", "CH4", "Ar", "CO", "CO2"];
    let mut last = Outcome::Stored;
    for (i, n) in r.composition.components.iter().enumerate() {
        let v = names
            .iter()
            .position(|x| x == n)
            .map(|k| values[k])
            .expect("component");
        last = m.accept(
            r,
            &s.species,
            Input::Component(i, scalar(at + lag, v)),
            at + lag,
        );
    }
    let e = evaluated(last);
    assert!(!e.reactions.is_empty(), "{:?}", e.reasons);
}

#[test]
fn the_clock_window_is_taken_from_the_spec_both_ways() {
    let s = settings();
    let r = reactor(&s, "lts1");
    let mut m = ReactorMonitor::new(r);
    let now = T0;
    let ahead = ms(r.clock.max_ahead);
    let behind = ms(r.clock.max_behind);
    let t = |ts| Input::Temperature(0, scalar(ts, 500.0));
    assert_eq!(
        m.accept(r, &s.species, t(now + ahead), now),
        Outcome::Stored
    );
    let o = m.accept(r, &s.species, t(now + ahead + 1), now);
    assert_eq!(
        o,
        Outcome::OffClock {
            ahead_ms: ahead + 1
        }
    );
    let o = m.accept(r, &s.species, t(now - behind - 1), now);
    assert_eq!(
        o,
        Outcome::OffClock {
            ahead_ms: -behind - 1
        }
    );
}

// Issue 10 §1: implausible values gave good results (pressure 1e300 barg, 1e6 bara,
// 1e-300 bara, -1 barg; a steam ratio of 50; a thermocouple at 1e6 K).
#[test]
fn implausible_pressures_and_steam_ratios_make_the_result_bad_with_a_reason() {
    let s = settings();
    let r = reactor(&s, "lts1");
    let sample = T0 + 10 * MIN;
    // Values in bar absolute as the monitor takes them (after unit conversion): 1e300,
    // 1e6, 1e-300 and 0.013 bar abs (-1 barg, NIST SP 811: 1 atm = 1.01325 bar).
    for p in [1e300, 1e6, 1e-300, 0.01325] {
        let mut m = ReactorMonitor::new(r);
        feed_lts(&mut m, &s, sample, 493.15);
        m.accept(r, &s.species, Input::Pressure(scalar(sample, p)), sample);
        let e = analyse_lts(&mut m, &s, r, sample);
        assert_eq!(e.quality, Quality::Bad, "{p} bar: {:?}", e.reasons);
        assert!(codes(&e).contains(&"implausible_value"), "{:?}", e.reasons);
    }
    let mut m = ReactorMonitor::new(r);
    feed_lts(&mut m, &s, sample, 493.15);
    m.accept(
        r,
        &s.species,
        Input::SteamRatio(scalar(sample, 50.0)),
        sample,
    );
    let e = analyse_lts(&mut m, &s, r, sample);
    assert_eq!(e.quality, Quality::Bad, "{:?}", e.reasons);
    assert!(codes(&e).contains(&"implausible_value"));
}

#[test]
fn a_thermocouple_at_a_million_kelvin_is_left_out_and_named() {
    let s = settings();
    let r = reactor(&s, "lts1");
    let sample = T0 + 10 * MIN;
    let mut m = ReactorMonitor::new(r);
    feed_lts(&mut m, &s, sample, 493.15);
    m.accept(
        r,
        &s.species,
        Input::Temperature(1, scalar(sample, 1e6)),
        sample,
    );
    let e = analyse_lts(&mut m, &s, r, sample);
    assert_eq!(e.quality, Quality::Uncertain, "{:?}", e.reasons);
    let why = e
        .reasons
        .iter()
        .find(|x| x.code == ReasonCode::ImplausibleValue)
        .expect("implausible_value");
    assert!(
        why.message.contains(&r.temperatures[1].tag),
        "{}",
        why.message
    );
    // The other thermocouple carries the figure: docs/domain.md §8 [derived], 12.00 K.
    assert!((e.reactions[0].approach_k.unwrap() - 12.00).abs() < 0.01);
    assert!(
        !e.inputs
            .iter()
            .any(|u| u.tag == r.temperatures[1].tag && u.used)
    );
}

#[test]
fn a_thermocouple_far_from_its_partners_is_left_out_and_two_that_disagree_are_uncertain() {
    let s = settings();
    let base = reactor(&s, "lts1");
    let sample = T0 + 10 * MIN;
    // Three outlet thermocouples: 493.15, 494.15 and 540 K (one reads 46 K high).
    let mut r = base.clone();
    let mut third = r.temperatures[0].clone();
    third.tag = "TEST-TI-3".into();
    r.temperatures.push(third);
    let mut m = ReactorMonitor::new(&r);
    feed_lts(&mut m, &s, sample, 493.15);
    m.accept(
        &r,
        &s.species,
        Input::Temperature(1, scalar(sample, 494.15)),
        sample,
    );
    m.accept(
        &r,
        &s.species,
        Input::Temperature(2, scalar(sample, 540.0)),
        sample,
    );
    let e = analyse_lts(&mut m, &s, &r, sample);
    let why = e
        .reasons
        .iter()
        .find(|x| x.code == ReasonCode::ThermocouplesDisagree)
        .expect("thermocouples_disagree");
    assert!(why.message.contains("TEST-TI-3"), "{}", why.message);
    assert!((e.temperature_k.unwrap() - 493.65).abs() < 1e-9);
    // Two that disagree by 30 K: neither can be ruled out; uncertain, both named.
    let mut m = ReactorMonitor::new(base);
    feed_lts(&mut m, &s, sample, 493.15);
    m.accept(
        base,
        &s.species,
        Input::Temperature(1, scalar(sample, 523.15)),
        sample,
    );
    let e = analyse_lts(&mut m, &s, base, sample);
    assert_eq!(e.quality, Quality::Uncertain, "{:?}", e.reasons);
    assert!(codes(&e).contains(&"thermocouples_disagree"));
}
