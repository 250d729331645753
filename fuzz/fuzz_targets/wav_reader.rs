//! libFuzzer entry of the `wav_reader` target; the body and its contract are `partita_fuzz::wav_reader`.
#![no_main]

libfuzzer_sys::fuzz_target!(|data: &[u8]| partita_fuzz::wav_reader(data));
