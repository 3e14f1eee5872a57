//! A short run of the seeded mutation harness (examples/fuzz_inputs.rs) on the three fuzz
//! targets, and a replay of every crash input kept in tests/data/fuzz (named after its target,
//! e.g. `csv_encode-...`), whether the seeded harness or cargo-fuzz found it.

#[path = "../examples/fuzz_inputs.rs"]
#[allow(dead_code)]
mod fuzz_inputs;

use std::time::Duration;

#[test]
fn mutated_inputs_never_panic() {
    for (target, seed) in fuzz_inputs::TARGETS.into_iter().zip(101..) {
        let (runs, accepted, crashes) = fuzz_inputs::fuzz(target, Duration::from_secs(2), seed);
        println!("{target}: {runs} executions, {accepted} accepted, {crashes} crashes");
        assert!(runs > 1000, "{target}: {runs}");
        assert!(
            accepted > 0,
            "{target}: the mutations never reached past the parser"
        );
        assert_eq!(crashes, 0);
    }
}

#[test]
fn every_target_accepts_some_of_its_seeds() {
    // Some seeds are hostile on purpose and refused; each target needs one that gets through
    // the parser, or the mutations would only test its first error.
    for target in fuzz_inputs::TARGETS {
        let seeds = fuzz_inputs::seeds(target);
        let accepted = seeds
            .iter()
            .filter(|s| fuzz_inputs::parse(target, s))
            .count();
        println!("{target}: {accepted} of {} seeds accepted", seeds.len());
        assert!(accepted > 0, "{target}");
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
        let name = path.file_name().unwrap().to_string_lossy().to_string();
        if name == "README.md" {
            continue;
        }
        let target = fuzz_inputs::TARGETS
            .into_iter()
            .find(|t| name.starts_with(t))
            .unwrap_or_else(|| panic!("{name} does not start with a target name"));
        let bytes = std::fs::read(&path).unwrap();
        // Accepted or refused, but no panic.
        let _ = fuzz_inputs::parse(target, &bytes);
    }
}
