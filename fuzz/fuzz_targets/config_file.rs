//! A configuration file's text, validated.
#![no_main]
libfuzzer_sys::fuzz_target!(|data: &[u8]| eqwatch::fuzz::config_text(data));
