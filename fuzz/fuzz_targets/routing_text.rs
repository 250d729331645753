//! libFuzzer entry of the `routing_text` target; the body and its contract are `partita_fuzz::routing_text`.
#![no_main]

libfuzzer_sys::fuzz_target!(|data: &[u8]| partita_fuzz::routing_text(data));
