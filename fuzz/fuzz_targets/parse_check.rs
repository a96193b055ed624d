//! libFuzzer target: spec bytes through parse, check, render, report and (for small models)
//! the emitter and the engine. See `sinew_fuzz::parse_check`.

#![no_main]

libfuzzer_sys::fuzz_target!(|data: &[u8]| sinew_fuzz::parse_check(data));
