//! Writes the bundled demo table, examples/data/cold_store.csv (see examples/data/README.md
//! for the scenario and the formula). Run: `cargo run --release --example make_demo_data`.

use rand::{Rng, SeedableRng};
use rand_distr::{Distribution, Normal};
use std::fmt::Write as _;

/// Rows in the demo table.
const ROWS: usize = 2000;
/// Seed of the draw, so the file is reproducible.
const SEED: u64 = 20_261_201;
/// Standard deviation of the measurement noise, in kW.
pub const NOISE_SD_KW: f64 = 0.25;

/// Refrigerant plants and the factor each applies to the lift-driven power.
const REFRIGERANTS: [(&str, f64); 3] = [("ammonia", 0.9), ("co2", 1.0), ("hfc", 1.15)];

/// Compressor power (kW) of a cold store, before measurement noise.
pub fn power_kw(outdoor_c: f64, setpoint_c: f64, doors_per_h: f64, load_t: f64, plant: f64) -> f64 {
    let lift = outdoor_c - setpoint_c;
    1.5 + plant * (0.12 * lift + 0.0015 * lift * lift)
        + 0.25 * doors_per_h
        + 0.6 * (doors_per_h - 15.0).max(0.0)
        + 0.04 * load_t
        + 1.2 * (outdoor_c - 30.0).max(0.0)
}

fn main() -> std::io::Result<()> {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(SEED);
    let noise = Normal::new(0.0, NOISE_SD_KW).expect("valid normal");
    let mut text =
        String::from("outdoor_c,setpoint_c,door_openings_per_h,load_t,refrigerant,power_kw\n");
    for _ in 0..ROWS {
        let outdoor: f64 = rng.random_range(-5.0..38.0);
        let setpoint: f64 = rng.random_range(-25.0..4.0);
        let doors = rng.random_range(0..=30) as f64;
        let load: f64 = rng.random_range(2.0..40.0);
        let (refrigerant, plant) = REFRIGERANTS[rng.random_range(0..REFRIGERANTS.len())];
        let power = power_kw(outdoor, setpoint, doors, load, plant) + noise.sample(&mut rng);
        writeln!(
            text,
            "{outdoor:.2},{setpoint:.2},{doors},{load:.2},{refrigerant},{power:.3}"
        )
        .expect("writing to a String cannot fail");
    }
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/data/cold_store.csv");
    std::fs::write(path, text)?;
    println!("wrote {ROWS} rows to {path}");
    Ok(())
}
