//! The CSV reader, then the rows it read through a fixed model's encoding (the encoder's
//! strict path and the predictor's flagging path).
#![no_main]

use libfuzzer_sys::fuzz_target;
use relume::data::{ReadOptions, Table};
use relume::{Model, Predictor};
use std::sync::OnceLock;

/// tests/data/model_v1.json: features x (number, training range 1..8) and kind (a, b).
fn fixed() -> &'static (Model, Predictor) {
    static MODEL: OnceLock<(Model, Predictor)> = OnceLock::new();
    MODEL.get_or_init(|| {
        let model = Model::from_json(include_str!("../../tests/data/model_v1.json"))
            .expect("the fixed model loads");
        let predictor = Predictor::new(&model);
        (model, predictor)
    })
}

fuzz_target!(|data: &[u8]| {
    let Ok(table) = Table::read(data, "fuzz.csv", &ReadOptions::default()) else {
        return;
    };
    let (model, predictor) = fixed();
    let _ = model.encoder.encode_inputs::<f32>(&table, None);
    let _ = predictor.predict_table(&table);
});
