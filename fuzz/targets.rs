//! What each fuzz target does with its input, shared by the cargo-fuzz crate
//! (fuzz/fuzz_targets/) and the stable seeded harness (examples/fuzz_inputs.rs, replayed in
//! tests/fuzz_smoke.rs), so a kept crash input replays exactly what found it. Each returns
//! whether the input was accepted; a panic is the bug.

use relume::data::{ReadOptions, Table};
use relume::serve::predict::Cell;
use relume::serve::request::predict_json;
use relume::{Model, Predictor};
use std::sync::OnceLock;

/// The target names, each with its seed folder under fuzz/seeds/.
pub const TARGETS: [&str; 3] = ["model_file", "csv_encode", "predict_request"];

/// tests/data/model_v1.json: features x (number, training range 1..8) and kind (a, b).
fn fixed() -> &'static (Model, Predictor) {
    static MODEL: OnceLock<(Model, Predictor)> = OnceLock::new();
    MODEL.get_or_init(|| {
        let model = Model::from_json(include_str!("../tests/data/model_v1.json"))
            .expect("the fixed model loads");
        let predictor = Predictor::new(&model);
        (model, predictor)
    })
}

/// The model-file loader; an accepted model then predicts one row.
pub fn model_file(data: &[u8]) -> bool {
    let Ok(model) = std::str::from_utf8(data).map(Model::from_json) else {
        return false;
    };
    let Ok(model) = model else {
        return false;
    };
    let predictor = Predictor::new(&model);
    let mut scratch = predictor.scratch();
    let row = vec![Cell::Number(1.0); predictor.feature_names().len()];
    let _ = predictor.predict_row(&row, &mut scratch);
    true
}

/// The CSV reader, then its rows through the fixed model's encoder (strict path) and
/// predictor (flagging path).
pub fn csv_encode(data: &[u8]) -> bool {
    let Ok(table) = Table::read(data, "fuzz.csv", &ReadOptions::default()) else {
        return false;
    };
    let (model, predictor) = fixed();
    let _ = model.encoder.encode_inputs::<f32>(&table, None);
    let _ = predictor.predict_table(&table);
    true
}

/// The example service's request body through `predict_json` on the fixed model; every
/// answered row must carry a number (JSON null would mean a non-finite value).
pub fn predict_request(data: &[u8]) -> bool {
    let Ok(answer) = predict_json(&fixed().1, data, 1000) else {
        return false;
    };
    for row in answer["predictions"]
        .as_array()
        .expect("a predictions array")
    {
        assert!(row["prediction"].is_f64(), "{answer}");
    }
    true
}

/// Runs target `name` (one of [`TARGETS`]) on `data`.
pub fn run(name: &str, data: &[u8]) -> bool {
    match name {
        "model_file" => model_file(data),
        "csv_encode" => csv_encode(data),
        "predict_request" => predict_request(data),
        other => panic!("no fuzz target {other}"),
    }
}
