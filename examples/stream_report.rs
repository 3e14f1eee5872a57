//! Rows per second of chunked prediction against its floor, the CSV reader alone:
//! `cargo run --release --example stream_report -- MODEL TABLE.csv`. Prints one line per stage
//! (read only; read + predict; read + predict + the CSV text `relume predict` writes, sent to
//! a sink), each the best of three passes, with the CPU it ran on and its instruction set.
//! Passes are timed by the thread's CPU time where the system has that clock (named in the
//! header), so that other processes on a shared machine do not inflate them; `wall_seconds`
//! is the best pass by the wall clock.

use relume::data::{ReadOptions, Table};
use relume::sweep::cost::ThreadClock;
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
    println!("simd={:?}", relume::kernels::simd_level());
    println!("clock={}", ThreadClock::describe().replace(' ', "_"));
    let mut floor = 0.0;
    for stage in ["read", "read_predict", "read_predict_format"] {
        let (mut best, mut best_wall) = (f64::INFINITY, f64::INFINITY);
        let mut rows = 0;
        for _ in 0..3 {
            let file = std::fs::File::open(data)?;
            let (started, clock) = (Instant::now(), ThreadClock::start());
            let mut text = String::new();
            rows = Table::read_chunks(file, data, &options, CHUNK_ROWS, |table| {
                if stage == "read" {
                    return Ok(());
                }
                let predicted = predictor.predict_table(&table)?;
                if stage == "read_predict_format" {
                    text.clear();
                    // As `relume predict` writes them: straight into the chunk's text.
                    for row in &predicted {
                        let _ = write!(text, "{}", row.line);
                        for v in [row.value, row.lower, row.upper] {
                            let _ = match v {
                                Some(v) => write!(text, ",{}", v as f32),
                                None => write!(text, ","),
                            };
                        }
                        let _ = writeln!(text, ",{},", !row.out_of_range.is_empty());
                    }
                    std::hint::black_box(&text);
                }
                Ok::<(), relume::data::DataError>(())
            })?;
            best = best.min(clock.seconds());
            best_wall = best_wall.min(started.elapsed().as_secs_f64());
        }
        let rate = rows as f64 / best;
        if stage == "read" {
            floor = rate;
        }
        println!(
            "stage={stage} rows={rows} seconds={best:.3} wall_seconds={best_wall:.3} \
             rows_per_s={rate:.0} relative_to_read={:.2}",
            floor / rate
        );
    }
    Ok(())
}
