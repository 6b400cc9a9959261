//! Unit and quantity text (temperatures, pressures, gauge with an atmosphere).
#![no_main]
use eqwatch_core::units::{parse_pressure, parse_pressure_with_atmosphere, parse_temperature};

libfuzzer_sys::fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data);
    let _ = parse_temperature(&text);
    let _ = parse_pressure(&text);
    let _ = parse_pressure_with_atmosphere(&text, 1.01325);
});
