//! A reaction equation against the built-in species.
#![no_main]
use std::sync::OnceLock;

use eqwatch_core::thermo::reaction::parse_reaction;
use eqwatch_core::thermo::species::SpeciesDb;

static DB: OnceLock<SpeciesDb> = OnceLock::new();

libfuzzer_sys::fuzz_target!(|data: &[u8]| {
    let db = DB.get_or_init(SpeciesDb::builtin);
    let _ = parse_reaction(&String::from_utf8_lossy(data), db);
});
