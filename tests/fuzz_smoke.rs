//! A short run of the seeded mutation harness (examples/fuzz_inputs.rs) on both parsers, and a
//! replay of every crash input ever kept in tests/data/fuzz (none so far).

#[path = "../examples/fuzz_inputs.rs"]
#[allow(dead_code)]
mod fuzz_inputs;

use std::time::Duration;

#[test]
fn mutated_model_files_and_csv_never_panic() {
    for (target, seed) in [("model", 101), ("csv", 202)] {
        let (runs, accepted, crashes) = fuzz_inputs::fuzz(target, Duration::from_secs(2), seed);
        println!("{target}: {runs} executions, {accepted} accepted, {crashes} crashes");
        assert!(runs > 1000);
        assert_eq!(crashes, 0);
    }
}

#[test]
fn kept_crash_inputs_stay_fixed() {
    let dir = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/data/fuzz");
    let Ok(entries) = std::fs::read_dir(dir) else {
        return;
    };
    for entry in entries {
        let path = entry.unwrap().path();
        let target = if path
            .file_name()
            .unwrap()
            .to_string_lossy()
            .starts_with("csv")
        {
            "csv"
        } else {
            "model"
        };
        let bytes = std::fs::read(&path).unwrap();
        // Accepted or refused, but no panic.
        let _ = fuzz_inputs::parse(target, &bytes);
    }
}
