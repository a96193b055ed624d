//! libFuzzer target: the weights JSON reader, the CSV reader and the device blob decoder. The
//! first byte picks the reader. See `sinew_fuzz::files`.

#![no_main]

libfuzzer_sys::fuzz_target!(|data: &[u8]| sinew_fuzz::files(data));
