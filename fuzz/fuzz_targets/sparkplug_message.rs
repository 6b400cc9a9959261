//! A Sparkplug B message (topic type picked by the first byte, protobuf payload after
//! it) through the host consumer (state carries over from message to message).
#![no_main]
libfuzzer_sys::fuzz_target!(|data: &[u8]| eqwatch::fuzz::sparkplug_message(data));
