//! Loads a model file and predicts the rows given on standard input, one row per line with
//! the cells in the model's input order separated by commas (no quoting); prints each
//! prediction's f64 bits in hex, or `error: ...` for a row that cannot be predicted. Built
//! with `relume = { default-features = false }`: what a predicting service compiles.

use relume::serve::predict::Cell;
use relume::Predictor;
use std::io::BufRead;
use std::path::Path;
use std::process::ExitCode;

fn main() -> ExitCode {
    let Some(model) = std::env::args().nth(1) else {
        eprintln!("usage: lean-service MODEL < rows");
        return ExitCode::from(2);
    };
    let predictor = match Predictor::load(Path::new(&model)) {
        Ok(p) => p,
        Err(e) => {
            eprintln!("{e}");
            return ExitCode::from(2);
        }
    };
    let mut scratch = predictor.scratch();
    for line in std::io::stdin().lock().lines() {
        let Ok(line) = line else {
            eprintln!("standard input is not readable text");
            return ExitCode::from(2);
        };
        let cells: Vec<Cell<'_>> = line
            .split(',')
            .map(|c| match c.trim().parse::<f64>() {
                Ok(v) => Cell::Number(v),
                Err(_) => Cell::Text(c.trim()),
            })
            .collect();
        match predictor.predict_row(&cells, &mut scratch) {
            Ok(p) => println!("{:016x}", p.value.to_bits()),
            Err(e) => println!("error: {}", predictor.explain(&e)),
        }
    }
    ExitCode::SUCCESS
}
