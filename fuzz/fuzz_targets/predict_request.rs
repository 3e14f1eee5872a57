//! The example service's request body, parsed and predicted by the same function the service
//! calls (`relume::serve::request::predict_json`), against a fixed model.
#![no_main]

use libfuzzer_sys::fuzz_target;
use relume::serve::request::predict_json;
use relume::{Model, Predictor};
use std::sync::OnceLock;

/// tests/data/model_v1.json: features x (number, training range 1..8) and kind (a, b).
fn fixed() -> &'static Predictor {
    static PREDICTOR: OnceLock<Predictor> = OnceLock::new();
    PREDICTOR.get_or_init(|| {
        let model = Model::from_json(include_str!("../../tests/data/model_v1.json"))
            .expect("the fixed model loads");
        Predictor::new(&model)
    })
}

fuzz_target!(|data: &[u8]| {
    if let Ok(answer) = predict_json(fixed(), data, 1000) {
        // Every answered row carries a number (JSON null would mean a non-finite value).
        for row in answer["predictions"].as_array().expect("a predictions array") {
            assert!(row["prediction"].is_f64(), "{answer}");
        }
    }
});
