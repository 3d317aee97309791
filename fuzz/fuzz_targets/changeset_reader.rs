//! Fuzz the change-set reader; the invariants are in
//! `fieldcage_testkit::fuzz_checks::changeset_bytes`.
#![no_main]

libfuzzer_sys::fuzz_target!(|data: &[u8]| {
    fieldcage_testkit::fuzz_checks::changeset_bytes(data);
});
