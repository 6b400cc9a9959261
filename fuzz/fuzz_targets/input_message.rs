//! An MQTT message on one of the demo plant's input or command topics, through the
//! pipeline (state carries over from message to message).
#![no_main]
libfuzzer_sys::fuzz_target!(|data: &[u8]| eqwatch::fuzz::input_message(data));
