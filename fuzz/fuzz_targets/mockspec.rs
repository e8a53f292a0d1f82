//! Fuzz the mock-spec loader (YAML parsing and validation): a spec or a typed error, never a
//! panic.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Ok(text) = std::str::from_utf8(data) {
        if let Ok(spec) = formfactory::mock::MockSpec::from_yaml(text, "fuzz.mock.yaml") {
            let _ = spec.validate();
        }
    }
});
