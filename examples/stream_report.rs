//! Rows per second of chunked prediction against its floor, the CSV reader alone:
//! `cargo run --release --example stream_report -- MODEL TABLE.csv`. Prints one line per stage
//! (read only; read + predict; read + predict + the CSV text `relume predict` writes, sent to
//! a sink), each the best of three passes, with the CPU it ran on.

use relume::data::{ReadOptions, Table};
use relume::Predictor;
use std::fmt::Write;
use std::path::Path;
use std::time::Instant;

/// The chunk size `relume predict` uses.
const CHUNK_ROWS: usize = 8192;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let [model, data] = args.as_slice() else {
        return Err("usage: stream_report MODEL TABLE.csv".into());
    };
    let predictor = Predictor::load(Path::new(model))?;
    let options = ReadOptions {
        model_text_columns: predictor.encoder().text_columns(),
        ..ReadOptions::default()
    };
    println!("cpu={}", relume::sweep::cost::cpu_name().replace(' ', "_"));
    let mut floor = 0.0;
    for stage in ["read", "read_predict", "read_predict_format"] {
        let mut best = f64::INFINITY;
        let mut rows = 0;
        for _ in 0..3 {
            let file = std::fs::File::open(data)?;
            let started = Instant::now();
            let mut text = String::new();
            rows = Table::read_chunks(file, data, &options, CHUNK_ROWS, |table| {
                if stage == "read" {
                    return Ok(());
                }
                let predicted = predictor.predict_table(&table)?;
                if stage == "read_predict_format" {
                    text.clear();
                    for row in &predicted {
                        let _ = writeln!(
                            text,
                            "{},{},{},{}",
                            row.line,
                            row.value.map_or(String::new(), |v| (v as f32).to_string()),
                            row.lower.map_or(String::new(), |v| (v as f32).to_string()),
                            row.upper.map_or(String::new(), |v| (v as f32).to_string()),
                        );
                    }
                    std::hint::black_box(&text);
                }
                Ok::<(), relume::data::DataError>(())
            })?;
            best = best.min(started.elapsed().as_secs_f64());
        }
        let rate = rows as f64 / best;
        if stage == "read" {
            floor = rate;
        }
        println!(
            "stage={stage} rows={rows} seconds={best:.3} rows_per_s={rate:.0} relative_to_read={:.2}",
            floor / rate
        );
    }
    Ok(())
}
