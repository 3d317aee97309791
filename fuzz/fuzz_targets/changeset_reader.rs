//! Fuzz the change-set reader; the invariants are in
//! `fieldcage::fuzz_checks::changeset_bytes`.
#![no_main]

libfuzzer_sys::fuzz_target!(|data: &[u8]| {
    fieldcage::fuzz_checks::changeset_bytes(data);
});
