//! The demo job: read the bundled cold-store table, train with the default recipe, report the
//! validation error beside the noise floor of the formula that made the data, save the model
//! file and serve one prediction from it.
//!
//! Run: `cargo run --release --example demo [-- table.csv [model.json]]`.

use relume::fit::monitor::MonitorConfig;
use relume::serve::predict::Cell;
use relume::{EncoderSpec, Model, Predictor, Recipe, Table};
use std::error::Error;
use std::path::PathBuf;

/// Noise SD of the generating formula (examples/make_demo_data.rs).
const NOISE_SD_KW: f64 = 0.25;

fn main() -> Result<(), Box<dyn Error>> {
    let root = env!("CARGO_MANIFEST_DIR");
    let mut args = std::env::args().skip(1);
    let data = args.next().map_or_else(
        || PathBuf::from(root).join("examples/data/cold_store.csv"),
        PathBuf::from,
    );
    let out = args.next().map_or_else(
        || PathBuf::from(root).join("target/demo/cold_store.model.json"),
        PathBuf::from,
    );

    let table = Table::read_path(&data, &Default::default())?;
    println!(
        "{}: {} rows, {} columns",
        data.display(),
        table.rows(),
        table.columns.len()
    );
    let spec = EncoderSpec {
        target: "power_kw".to_string(),
        ..EncoderSpec::default()
    };
    let (model, report) = Model::fit(&table, &spec, &Recipe::default(), MonitorConfig::default())?;
    let s = &model.summary;
    println!(
        "trained on {} rows ({} inputs after encoding), {} epochs, best {}, stopped by {:?}",
        s.train_rows,
        model.encoder.width(),
        s.epochs_run,
        s.best_epoch,
        s.stop
    );
    if let Some(v) = &s.validation {
        println!(
            "validation ({} rows): RMSE {:.3} kW, MAE {:.3} kW, R² {:.4}; noise floor {NOISE_SD_KW} kW",
            v.rows, v.rmse, v.mae, v.r2
        );
    }
    for w in &report.warnings {
        println!("warning: {} — {}", w.message, w.remedy);
    }
    if let Some(dir) = out.parent() {
        std::fs::create_dir_all(dir)?;
    }
    model.save(&out)?;
    println!("model written to {}", out.display());

    // Serve one row from the saved file, as a service would.
    let predictor = Predictor::load(&out)?;
    let mut scratch = predictor.scratch();
    let row = [
        Cell::Number(31.0),
        Cell::Number(-18.0),
        Cell::Number(12.0),
        Cell::Number(20.0),
        Cell::Text("co2"),
    ];
    let p = predictor
        .predict_row(&row, &mut scratch)
        .map_err(|e| predictor.explain(&e))?;
    println!(
        "31 °C outside, −18 °C setpoint, 12 openings/h, 20 t, co2 plant: {:.2} kW{}",
        p.value,
        if p.extrapolated {
            " (extrapolated)"
        } else {
            ""
        }
    );
    println!();
    println!("Cautions: validate on held-out data from your own process before use; predictions");
    println!("outside the training range are extrapolation; keep a human and domain review in the");
    println!("loop; follow local regulations and defer to licensed professionals.");
    Ok(())
}
