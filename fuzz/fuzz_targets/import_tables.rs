//! Fuzz the table importer with sets of table files; the invariants are in
//! `fieldcage_testkit::fuzz_checks::import_file_set`.
#![no_main]

libfuzzer_sys::fuzz_target!(|data: &[u8]| {
    fieldcage_testkit::fuzz_checks::import_file_set(data);
});
