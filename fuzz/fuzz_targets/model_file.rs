//! The model-file loader: any bytes are accepted or refused with an error, never a panic; an
//! accepted model predicts a row without panicking.
#![no_main]

use libfuzzer_sys::fuzz_target;
use relume::serve::predict::Cell;
use relume::{Model, Predictor};

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    let Ok(model) = Model::from_json(text) else {
        return;
    };
    let predictor = Predictor::new(&model);
    let mut scratch = predictor.scratch();
    let row = vec![Cell::Number(1.0); predictor.feature_names().len()];
    let _ = predictor.predict_row(&row, &mut scratch);
});
