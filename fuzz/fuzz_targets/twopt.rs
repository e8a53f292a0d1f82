//! Fuzz the two-point CSV reader: any bytes give data or a typed error, never a panic.
#![no_main]
use libfuzzer_sys::fuzz_target;
use std::path::Path;

fuzz_target!(|data: &[u8]| {
    let _ = formfactory::io::read_twopt_from(data, Path::new("fuzz/twopt.csv"));
});
