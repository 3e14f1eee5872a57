//! The single-row prediction path allocates nothing: a counting global allocator in this test
//! binary (one test only, so no other thread allocates while it counts).

use relume::data::{EncoderSpec, ReadOptions, Table};
use relume::fit::monitor::MonitorConfig;
use relume::serve::predict::Cell;
use relume::{Model, Predictor, Recipe};

#[path = "../examples/support/counting.rs"]
mod counting;

#[global_allocator]
static GLOBAL: counting::Counting = counting::Counting;

#[test]
fn predicting_one_row_allocates_nothing() {
    let mut csv = String::from("a,b,kind,y\n");
    for i in 0..200 {
        let (a, b) = ((i as f64 * 0.3).sin(), (i as f64 * 0.7).cos());
        let kind = ["p", "q"][i % 2];
        csv += &format!(
            "{a},{b},{kind},{}\n",
            a * b + if i % 2 == 0 { 1.0 } else { 0.0 }
        );
    }
    let table = Table::read(csv.as_bytes(), "t", &ReadOptions::default()).unwrap();
    let spec = EncoderSpec {
        target: "y".into(),
        ..EncoderSpec::default()
    };
    let recipe = Recipe {
        hidden: vec![64, 64],
        ..Recipe::default()
    };
    let (model, _) = Model::fit(&table, &spec, &recipe, MonitorConfig::default()).unwrap();
    let predictor = Predictor::new(&model);
    let mut scratch = predictor.scratch();
    let row = [Cell::Number(0.3), Cell::Number(-0.2), Cell::Text("q")];
    predictor.predict_row(&row, &mut scratch).unwrap();
    let before = counting::allocations();
    let mut sum = 0.0;
    for i in 0..1000 {
        let row = [
            Cell::Number(0.001 * i as f64),
            Cell::Number(-0.2),
            Cell::Text(["p", "q"][i % 2]),
        ];
        sum += predictor.predict_row(&row, &mut scratch).unwrap().value;
    }
    let after = counting::allocations();
    assert!(sum.is_finite());
    assert_eq!(after - before, 0, "allocations in 1000 row predictions");
}
