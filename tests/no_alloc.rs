//! The K(T) and approach hot paths must not allocate (issue: core speed goals).
//! A counting global allocator, per thread, around the calls under test.

use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;

use eqwatch::approach::{GasState, ReactorModel, Uncertainty};
use eqwatch::composition::{Basis, WaterSource, parse_components, to_wet};
use eqwatch::equilibrium::EosKind;
use eqwatch::thermo::ksource::{KModel, KSourceId};
use eqwatch::thermo::reaction::parse_reaction;
use eqwatch::thermo::species::SpeciesDb;
use eqwatch::units::CompositionUnit;

struct Counting;

thread_local! {
    static ALLOCS: Cell<usize> = const { Cell::new(0) };
}

unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        ALLOCS.with(|c| c.set(c.get() + 1));
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        unsafe { System.dealloc(ptr, layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        ALLOCS.with(|c| c.set(c.get() + 1));
        unsafe { System.realloc(ptr, layout, new_size) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

fn allocations_in(f: impl FnOnce()) -> usize {
    let before = ALLOCS.with(Cell::get);
    f();
    ALLOCS.with(Cell::get) - before
}

#[test]
fn k_of_t_and_approach_do_not_allocate() {
    let db = SpeciesDb::builtin();
    for (eq, src, comp, basis, water, t, p, eos) in [
        (
            "CO + H2O = CO2 + H2",
            KSourceId::Moe1962,
            "H2=61.0536,N2=18.98637,CO=0.28697,CO2=19.38096,CH4=0.2921",
            Basis::Dry,
            Some(WaterSource::SteamRatio(0.36312)),
            493.15,
            30.0,
            EosKind::Ideal,
        ),
        (
            "N2 + 3 H2 = 2 NH3",
            KSourceId::SpeciesData,
            "H2=60,N2=20,NH3=15,Ar=3,CH4=2",
            Basis::Wet,
            None,
            700.0,
            150.0,
            EosKind::PengRobinson,
        ),
    ] {
        let r = parse_reaction(eq, &db).unwrap();
        let k = KModel::from_correlation(src, &r, &db).unwrap();
        let c = parse_components(comp, CompositionUnit::Percent).unwrap();
        let w = to_wet(&db, &c, basis, water, 0.02).unwrap();
        let model = ReactorModel::new(&db, vec![(r, k.clone())], &w.species, eos, None).unwrap();
        let mut scratch = model.scratch();
        let unc = Uncertainty {
            temperature_k: 2.0,
            composition_rel: 0.02,
            ..Default::default()
        };
        let mut sink = 0.0;
        let n = allocations_in(|| {
            for i in 0..100 {
                let tt = t + i as f64 * 0.1;
                sink += k.ln_k(tt);
                let st = GasState {
                    temperature_k: tt,
                    pressure_bar: p,
                    y: &w.y,
                    steam_ratio: w.steam_ratio.zip(w.added_water),
                };
                model.fugacity(&st, &mut scratch);
                let a = model.evaluate(0, &st, &scratch, &unc);
                sink += a.approach_k.unwrap_or(0.0);
            }
        });
        assert!(sink.is_finite());
        assert_eq!(n, 0, "{eq}: {n} allocations in the hot path");
    }
}
