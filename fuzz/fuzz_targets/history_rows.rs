//! Rows of a history file under the demo HTS's header, through `replay`.
#![no_main]
libfuzzer_sys::fuzz_target!(|data: &[u8]| eqwatch::fuzz::history_rows(data));
