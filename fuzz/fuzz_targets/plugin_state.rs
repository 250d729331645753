//! libFuzzer entry of the `plugin_state` target; the body and its contract are `partita_fuzz::plugin_state`.
#![no_main]

libfuzzer_sys::fuzz_target!(|data: &[u8]| partita_fuzz::plugin_state(data));
