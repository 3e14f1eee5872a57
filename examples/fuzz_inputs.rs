//! Seeded mutation harness for the inputs that meet untrusted bytes, on stable Rust: the same
//! three targets as the coverage-guided fuzz crate (fuzz/targets.rs: model file, CSV through a
//! fixed model's encoding, the service's request body), started from the same seeds
//! (fuzz/seeds/), with byte flips, inserts, deletes, truncations, splices and number swaps.
//! It has no coverage feedback; what it adds is that it runs in every `cargo test`
//! (tests/fuzz_smoke.rs), without nightly. Any panic is a bug: the input is written to
//! tests/data/fuzz/ and the run fails.
//!
//! Run: `cargo run --release --example fuzz_inputs -- [model_file|csv_encode|predict_request]
//! SECONDS [SEED]`.

#[path = "../fuzz/targets.rs"]
mod targets;

use rand::{Rng, SeedableRng};
use std::panic::{catch_unwind, AssertUnwindSafe};
use std::time::{Duration, Instant};

pub use targets::{run as parse, TARGETS};

/// The checked-in seed inputs of `target`.
pub fn seeds(target: &str) -> Vec<Vec<u8>> {
    let dir = format!("{}/fuzz/seeds/{target}", env!("CARGO_MANIFEST_DIR"));
    let mut paths: Vec<_> = std::fs::read_dir(&dir)
        .unwrap_or_else(|e| panic!("{dir}: {e}"))
        .map(|entry| entry.expect("a readable folder").path())
        .collect();
    paths.sort();
    paths
        .iter()
        .map(|p| std::fs::read(p).expect("a readable seed"))
        .collect()
}

const NUMBERS: [&[u8]; 10] = [
    b"0",
    b"-1",
    b"1e308",
    b"1e999",
    b"-0",
    b"18446744073709551616",
    b"4294967296",
    b"NaN",
    b"null",
    b"65537",
];

fn mutate(seed: &[u8], rng: &mut impl Rng) -> Vec<u8> {
    let mut v = seed.to_vec();
    for _ in 0..rng.random_range(1..6) {
        let n = v.len().max(1);
        match rng.random_range(0..7) {
            0 => {
                let i = rng.random_range(0..n);
                if i < v.len() {
                    v[i] ^= 1 << rng.random_range(0..8);
                }
            }
            1 => {
                let i = rng.random_range(0..=v.len());
                v.insert(i, rng.random());
            }
            2 if !v.is_empty() => {
                let i = rng.random_range(0..v.len());
                v.remove(i);
            }
            3 => v.truncate(rng.random_range(0..=v.len())),
            4 if v.len() > 2 => {
                // Copy a random span elsewhere.
                let a = rng.random_range(0..v.len());
                let b = rng.random_range(a..v.len().min(a + 64));
                let span = v[a..b].to_vec();
                let at = rng.random_range(0..=v.len());
                v.splice(at..at, span);
            }
            5 => {
                // Replace a run of digits with a hostile number.
                if let Some(start) = (0..v.len())
                    .map(|_| rng.random_range(0..n))
                    .find(|&i| i < v.len() && v[i].is_ascii_digit())
                {
                    let mut end = start;
                    while end < v.len() && (v[end].is_ascii_digit() || v[end] == b'.') {
                        end += 1;
                    }
                    let with = NUMBERS[rng.random_range(0..NUMBERS.len())];
                    v.splice(start..end, with.iter().copied());
                }
            }
            _ => {
                let i = rng.random_range(0..=v.len());
                let junk: &[u8] =
                    [b"," as &[u8], b"\"", b"\n", b"{", b"]", b"\xff\xfe"][rng.random_range(0..6)];
                v.splice(i..i, junk.iter().copied());
            }
        }
    }
    v
}

/// Mutates the seed inputs of `target` for `duration`; returns (executions, inputs accepted,
/// crashes). Crashing inputs are written to tests/data/fuzz/.
pub fn fuzz(target: &str, duration: Duration, seed: u64) -> (u64, u64, u64) {
    let corpus = seeds(target);
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let deadline = Instant::now() + duration;
    let (mut runs, mut accepted, mut crashes) = (0u64, 0u64, 0u64);
    while Instant::now() < deadline {
        let input = mutate(&corpus[rng.random_range(0..corpus.len())], &mut rng);
        runs += 1;
        match catch_unwind(AssertUnwindSafe(|| parse(target, &input))) {
            Ok(ok) => accepted += u64::from(ok),
            Err(_) => {
                crashes += 1;
                let dir = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/data/fuzz");
                std::fs::create_dir_all(dir).ok();
                let path = format!("{dir}/{target}-crash-{seed}-{runs}.bin");
                std::fs::write(&path, &input).ok();
                eprintln!("crash saved to {path}");
            }
        }
    }
    (runs, accepted, crashes)
}

#[allow(dead_code)]
fn main() {
    let mut args = std::env::args().skip(1);
    let target = args.next().unwrap_or_else(|| "model_file".into());
    let seconds: u64 = args.next().and_then(|s| s.parse().ok()).unwrap_or(10);
    let seed: u64 = args.next().and_then(|s| s.parse().ok()).unwrap_or(1);
    std::panic::set_hook(Box::new(|_| {}));
    let (runs, accepted, crashes) = fuzz(&target, Duration::from_secs(seconds), seed);
    println!("fuzz {target}: {runs} executions in {seconds} s, {accepted} accepted, {crashes} crashes (seed {seed})");
    if crashes > 0 {
        std::process::exit(1);
    }
}
