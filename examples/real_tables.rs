//! Holdout RMSE of the default model against ridge regression on real tables.
//!
//! `cargo run --release --example real_tables -- DIR [SEED]` reads the tables listed below from
//! DIR (the shared real tables; sources in their README), makes a seeded 80/20 split of the
//! rows with a target, trains the default model on the 80% and scores both it and a ridge
//! regression (Hoerl & Kennard 1970, closed form solved by nalgebra, penalty picked by 5-fold
//! cross-validation on the training rows over 10^-3..10^3) on the same one-hot, mean-imputed,
//! standardized columns (values not held: see `EncoderSpec::hold_beyond`). Prints one line per
//! table.

use nalgebra::{DMatrix, DVector};
use relume::data::{EncoderSpec, Impute, ReadOptions, Table};
use relume::fit::monitor::MonitorConfig;
use relume::serve::model::Model;
use relume::{Encoder, Predictor, Recipe, Standardizer};
use std::path::Path;
use std::time::Instant;

/// (file, target, impute empty numeric cells)
const TABLES: [(&str, &str, bool); 6] = [
    ("mpg.csv", "hwy", false),
    ("hitters.csv", "Salary", false),
    ("cpus.csv", "perf", false),
    ("hotel_rates.csv", "avg_price_per_room", false),
    ("chem_proc_yield.csv", "yield", true),
    ("car_prices.csv", "Price", false),
];

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let args: Vec<String> = std::env::args().collect();
    let dir = args.get(1).map_or("../shared/data/real", String::as_str);
    let seed: u64 = args.get(2).map_or(Ok(2026), |s| s.parse())?;
    println!("table target rows model_rmse ridge_rmse ratio seconds");
    for (file, target, impute) in TABLES {
        let path = Path::new(dir).join(file);
        if !path.exists() {
            println!("{file}: not found in {dir}");
            continue;
        }
        let table = Table::read_path(&path, &ReadOptions::default())?;
        let spec = EncoderSpec {
            target: target.to_string(),
            impute: impute.then_some(Impute::Median),
            ..EncoderSpec::default()
        };
        let (train, test) = split(&table, target, seed);
        let started = Instant::now();
        let (model, _) = Model::fit(
            &table.select(&train),
            &spec,
            &Recipe::default(),
            MonitorConfig::default(),
        )?;
        let seconds = started.elapsed().as_secs_f64();
        let truth = column(&table, target);
        let rows = Predictor::new(&model).predict_table(&table.select(&test))?;
        let failed: Vec<&String> = rows.iter().filter_map(|r| r.error.as_ref()).collect();
        if let Some(first) = failed.first() {
            eprintln!(
                "{file}: {} test rows not predicted; first: {first}",
                failed.len()
            );
        }
        let model_rmse = rmse(
            test.iter()
                .zip(&rows)
                .map(|(&r, p)| (p.value.unwrap_or(f64::NAN), truth[r])),
        );
        let ridge_rmse = ridge_holdout(&table, target, &train, &test)?;
        println!(
            "{file} {target} {} {model_rmse:.4} {ridge_rmse:.4} {:.3} {seconds:.1}",
            train.len() + test.len(),
            model_rmse / ridge_rmse
        );
    }
    Ok(())
}

fn column<'t>(table: &'t Table, name: &str) -> &'t [f64] {
    match &table.column(name).expect("target exists").data {
        relume::data::ColumnData::Number(v) => v,
        relume::data::ColumnData::Text(_) => panic!("numeric target"),
    }
}

/// Seeded 80/20 split of the rows whose target is filled.
fn split(table: &Table, target: &str, seed: u64) -> (Vec<usize>, Vec<usize>) {
    let y = column(table, target);
    let rows: Vec<usize> = (0..table.rows()).filter(|&r| !y[r].is_nan()).collect();
    let n_test = rows.len() / 5;
    let (train_idx, test_idx) = relume::fit::train::holdout_indices(rows.len(), n_test, seed);
    (
        train_idx.iter().map(|&i| rows[i]).collect(),
        test_idx.iter().map(|&i| rows[i]).collect(),
    )
}

fn rmse(pairs: impl Iterator<Item = (f64, f64)>) -> f64 {
    let (mut s, mut n) = (0.0, 0.0);
    for (p, t) in pairs {
        s += (p - t) * (p - t);
        n += 1.0;
    }
    (s / n).sqrt()
}

/// Ridge on the one-hot, mean-imputed, standardized columns (every column kept but the
/// target and identifier-like text), penalty by 5-fold CV on the training rows.
fn ridge_holdout(
    table: &Table,
    target: &str,
    train: &[usize],
    test: &[usize],
) -> Result<f64, Box<dyn std::error::Error>> {
    let spec = EncoderSpec {
        target: target.to_string(),
        impute: Some(Impute::Mean),
        hold_beyond: None,
        ..EncoderSpec::default()
    };
    let used: Vec<usize> = train.iter().chain(test).copied().collect();
    let sub = table.select(&used);
    let train_local: Vec<usize> = (0..train.len()).collect();
    let encoder = Encoder::fit(&sub, &spec, &train_local)?;
    let x = encoder.encode_inputs::<f64>(&sub, None)?;
    let y = encoder.encode_target(&sub, None)?;
    let xs = x.select(ndarray::Axis(0), &train_local);
    let scale = Standardizer::fit(xs.view());
    let x = scale.apply(x.view());
    let to_matrix = |rows: &[usize]| {
        DMatrix::from_fn(rows.len(), x.ncols() + 1, |i, j| {
            if j == 0 {
                1.0
            } else {
                x[(rows[i], j - 1)]
            }
        })
    };
    let to_vector = |rows: &[usize]| DVector::from_fn(rows.len(), |i, _| y[(rows[i], 0)]);
    let fit = |rows: &[usize], lambda: f64| {
        let a = to_matrix(rows);
        let mut gram = a.transpose() * &a;
        for j in 1..gram.ncols() {
            gram[(j, j)] += lambda;
        }
        let rhs = a.transpose() * to_vector(rows);
        gram.cholesky().map(|c| c.solve(&rhs))
    };
    let score = |beta: &DVector<f64>, rows: &[usize]| {
        let p = to_matrix(rows) * beta;
        rmse(rows.iter().enumerate().map(|(i, &r)| (p[i], y[(r, 0)])))
    };
    let mut best = (f64::INFINITY, 1.0);
    for k in -6..=6 {
        let lambda = 10f64.powf(k as f64 * 0.5);
        let mut total = 0.0;
        for fold in 0..5 {
            let (inner, held): (Vec<usize>, Vec<usize>) =
                train_local.iter().partition(|&&r| r % 5 != fold);
            total += fit(&inner, lambda).map_or(f64::INFINITY, |b| score(&b, &held));
        }
        if total < best.0 {
            best = (total, lambda);
        }
    }
    let beta = fit(&train_local, best.1).ok_or("ridge system is singular")?;
    let test_local: Vec<usize> = (train.len()..used.len()).collect();
    Ok(score(&beta, &test_local))
}
