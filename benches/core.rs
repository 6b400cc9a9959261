//! Criterion benchmarks of eqwatch's numeric core.
//!
//!     cargo bench --bench core
//!
//! Three groups:
//! - `k_of_t`: one ln K(T) evaluation (the innermost operation of everything else);
//! - `approach`: one analysis turned into approach figures (fugacity + evaluate),
//!   plus the whole calculator path from text;
//! - `equilibrium`: one full equilibrium solve from a feed.
//!
//! Everything that a monitor builds once per reactor (species database, reaction,
//! K model, reactor model, scratch) is built outside the timed closure unless the
//! benchmark says otherwise. `scripts/bench.sh` runs this beside a Cantera timing.

use std::hint::black_box;
use std::time::Duration;

use criterion::{Criterion, criterion_group, criterion_main};

use eqwatch::approach::{GasState, ReactorModel, Uncertainty};
use eqwatch::composition::{Basis, WaterSource, parse_components, to_wet};
use eqwatch::equilibrium::{EosKind, EquilibriumSystem};
use eqwatch::thermo::ksource::{KModel, KSourceId};
use eqwatch::thermo::reaction::parse_reaction;
use eqwatch::thermo::species::SpeciesDb;
use eqwatch::units::CompositionUnit;

/// Temperatures the K(T) benchmarks cycle through, so that no call sees a constant
/// argument and the species-data model crosses its 1000 K segment boundary.
const TEMPS_K: [f64; 8] = [500.0, 600.0, 700.0, 800.0, 900.0, 1000.0, 1100.0, 1200.0];

/// LTS outlet, dry mol%, with water added back from the steam-to-dry-gas ratio.
const LTS_DRY: &str = "H2=61.0536,N2=18.98637,CO=0.28697,CO2=19.38096,CH4=0.2921";
const LTS_STEAM_RATIO: f64 = 0.36312;
/// Ammonia converter gas, wet mol%.
const AMMONIA_WET: &str = "H2=60,N2=20,NH3=15,Ar=3,CH4=2";
/// Steam reformer exit, wet mol%.
const REFORMER_WET: &str = "CH4=6.9245,H2O=38.8563,CO=6.0324,CO2=6.0179,H2=42.1689";

/// Analysis sum tolerance used by the calculator (±2 mol%).
const SUM_TOLERANCE: f64 = 0.02;

fn indices(db: &SpeciesDb, names: &[&str]) -> Vec<usize> {
    names
        .iter()
        .map(|n| db.index_of(n).expect("built-in species"))
        .collect()
}

fn bench_k_of_t(c: &mut Criterion) {
    let db = SpeciesDb::builtin();
    let shift = parse_reaction("CO + H2O = CO2 + H2", &db).expect("shift reaction");
    let from_species = KModel::from_species(&shift, &db).expect("species K");
    let moe = KModel::from_correlation(KSourceId::Moe1962, &shift, &db).expect("Moe K");

    let mut g = c.benchmark_group("k_of_t");
    g.sample_size(50)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(2));

    // One ln K(T) of the shift from species data: segment look-up, the summed NASA
    // polynomial and one logarithm. T cycles through TEMPS_K.
    g.bench_function("species_data", |b| {
        let mut i = 0usize;
        b.iter(|| {
            let t = TEMPS_K[i % TEMPS_K.len()];
            i = i.wrapping_add(1);
            from_species.ln_k(black_box(t))
        });
    });

    // One ln K(T) of the shift from the Moe (1962) correlation, same temperatures.
    g.bench_function("correlation", |b| {
        let mut i = 0usize;
        b.iter(|| {
            let t = TEMPS_K[i % TEMPS_K.len()];
            i = i.wrapping_add(1);
            moe.ln_k(black_box(t))
        });
    });
    g.finish();
}

fn bench_approach(c: &mut Criterion) {
    let db = SpeciesDb::builtin();

    // LTS: shift with Moe K, ideal gas, dry analysis plus steam ratio.
    let shift = parse_reaction("CO + H2O = CO2 + H2", &db).expect("shift reaction");
    let moe = KModel::from_correlation(KSourceId::Moe1962, &shift, &db).expect("Moe K");
    let lts_comps = parse_components(LTS_DRY, CompositionUnit::Percent).expect("LTS analysis");
    let lts = to_wet(
        &db,
        &lts_comps,
        Basis::Dry,
        Some(WaterSource::SteamRatio(LTS_STEAM_RATIO)),
        SUM_TOLERANCE,
    )
    .expect("LTS wet basis");
    let lts_model = ReactorModel::new(&db, vec![(shift, moe)], &lts.species, EosKind::Ideal, None)
        .expect("LTS model");
    let lts_state = GasState {
        temperature_k: 493.15,
        pressure_bar: 30.0,
        y: &lts.y,
        steam_ratio: lts.steam_ratio.zip(lts.added_water),
    };
    let lts_unc = Uncertainty {
        temperature_k: 2.0,
        composition_rel: 0.02,
        ..Uncertainty::default()
    };
    let mut lts_scratch = lts_model.scratch();

    // Ammonia converter: synthesis from species data, Peng-Robinson fugacities.
    let synthesis = parse_reaction("N2 + 3 H2 = 2 NH3", &db).expect("ammonia reaction");
    let synthesis_k = KModel::from_species(&synthesis, &db).expect("ammonia K");
    let nh3_comps = parse_components(AMMONIA_WET, CompositionUnit::Percent).expect("NH3 analysis");
    let nh3 = to_wet(&db, &nh3_comps, Basis::Wet, None, SUM_TOLERANCE).expect("NH3 wet basis");
    let nh3_model = ReactorModel::new(
        &db,
        vec![(synthesis, synthesis_k)],
        &nh3.species,
        EosKind::PengRobinson,
        None,
    )
    .expect("ammonia model");
    let nh3_state = GasState {
        temperature_k: 700.0,
        pressure_bar: 150.0,
        y: &nh3.y,
        steam_ratio: None,
    };
    let mut nh3_scratch = nh3_model.scratch();

    // Reformer: methane reforming with Xu-Froment K; reaction and K model only.
    let reforming = parse_reaction("CH4 + H2O = CO + 3 H2", &db).expect("reforming reaction");
    let xu_froment =
        KModel::from_correlation(KSourceId::XuFroment1989, &reforming, &db).expect("Xu-Froment K");

    let no_unc = Uncertainty::default();

    // The approach cases must produce an approach temperature, or the benchmark
    // would time an early return: check once, outside the timing.
    lts_model.fugacity(&lts_state, &mut lts_scratch);
    let a = lts_model.evaluate(0, &lts_state, &lts_scratch, &lts_unc);
    assert!(a.approach_uncertainty_k.is_some(), "LTS case: {a:?}");
    nh3_model.fugacity(&nh3_state, &mut nh3_scratch);
    let a = nh3_model.evaluate(0, &nh3_state, &nh3_scratch, &no_unc);
    assert!(a.approach_k.is_some(), "ammonia case: {a:?}");

    let mut g = c.benchmark_group("approach");
    g.sample_size(50)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(2));

    // One LTS analysis: fugacity (ideal, so only the reset of ln phi) and evaluate:
    // ln Q, Q/K, direction, the equilibrium temperature by Newton in 1/T, and the
    // approach with its uncertainty (thermocouple ±2 K, analyser ±2 % of reading).
    g.bench_function("lts_ideal_dry_basis", |b| {
        b.iter(|| {
            let state = black_box(&lts_state);
            lts_model.fugacity(state, &mut lts_scratch);
            lts_model.evaluate(0, state, &lts_scratch, &lts_unc)
        });
    });

    // One ammonia converter analysis at 700 K and 150 bar: the Peng-Robinson mixture
    // (cubic for Z, ln phi of five species) and evaluate with species-data K.
    g.bench_function("ammonia_peng_robinson", |b| {
        b.iter(|| {
            let state = black_box(&nh3_state);
            nh3_model.fugacity(state, &mut nh3_scratch);
            nh3_model.evaluate(0, state, &nh3_scratch, &no_unc)
        });
    });

    // The calculator path for one reformer reading given as text: parse the analysis,
    // convert to the wet basis, build the reactor model (including the clone of the
    // prebuilt reaction and K model it takes by value), then fugacity + evaluate.
    // Allocation and name look-ups are part of what this measures.
    g.bench_function("reformer_from_text", |b| {
        b.iter(|| {
            let comps = parse_components(black_box(REFORMER_WET), CompositionUnit::Percent)
                .expect("reformer analysis");
            let wet = to_wet(&db, &comps, Basis::Wet, None, SUM_TOLERANCE).expect("wet basis");
            let model = ReactorModel::new(
                &db,
                vec![(reforming.clone(), xu_froment.clone())],
                &wet.species,
                EosKind::Ideal,
                None,
            )
            .expect("reformer model");
            let state = GasState {
                temperature_k: 1081.15,
                pressure_bar: 30.0,
                y: &wet.y,
                steam_ratio: wet.steam_ratio.zip(wet.added_water),
            };
            let mut scratch = model.scratch();
            model.fugacity(&state, &mut scratch);
            model.evaluate(0, &state, &scratch, &no_unc)
        });
    });
    g.finish();
}

fn bench_equilibrium(c: &mut Criterion) {
    let db = SpeciesDb::builtin();

    let reformer_species = indices(&db, &["CH4", "H2O", "CO", "CO2", "H2"]);
    let reformer =
        EquilibriumSystem::from_species(&db, &reformer_species, &[], EosKind::Ideal, None)
            .expect("reformer system");
    let reformer_feed = [1.0, 3.0, 0.0, 0.0, 0.0];

    let ammonia_species = indices(&db, &["N2", "H2", "NH3"]);
    let argon = indices(&db, &["Ar"]);
    let ammonia =
        EquilibriumSystem::from_species(&db, &ammonia_species, &argon, EosKind::PengRobinson, None)
            .expect("ammonia system");
    let ammonia_feed = [1.0, 3.0, 0.0, 0.1];

    // A benchmark of a solve that fails would time the wrong thing: check once.
    for (sys, t, p, feed) in [
        (&reformer, 1100.0, 30.0, &reformer_feed[..]),
        (&ammonia, 700.0, 150.0, &ammonia_feed[..]),
    ] {
        let r = sys.solve(&db, t, p, feed);
        assert!(
            r.converged,
            "equilibrium benchmark case failed: {}",
            r.reason
        );
    }

    let mut g = c.benchmark_group("equilibrium");
    g.sample_size(50)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(2));

    // One ideal-gas equilibrium of CH4/H2O/CO/CO2/H2 from a 1:3 methane-steam feed at
    // 1100 K and 30 bar, from scratch: element rows, initial potentials, the total-moles
    // Newton and the element-potential minimisation inside it. Same case as Cantera's
    // equilibrate('TP') in scripts/bench_cantera.py.
    g.bench_function("reformer_5_species", |b| {
        b.iter(|| reformer.solve(&db, 1100.0, 30.0, black_box(&reformer_feed)));
    });

    // One Peng-Robinson equilibrium of N2/H2/NH3 with argon inert at 700 K and 150 bar:
    // the ideal solve repeated with updated fugacity coefficients until they settle.
    g.bench_function("ammonia_peng_robinson", |b| {
        b.iter(|| ammonia.solve(&db, 700.0, 150.0, black_box(&ammonia_feed)));
    });
    g.finish();
}

criterion_group!(benches, bench_k_of_t, bench_approach, bench_equilibrium);
criterion_main!(benches);
