//! `predict` and `evaluate` read, predict and write in chunks: the output is the same as
//! predicting the whole table at once, line numbers run on across chunks, and a failure part
//! way leaves an existing output file as it was.

mod common;

use common::cli::{path, relume};

use relume::data::{ReadOptions, Table};
use relume::Predictor;
use std::path::Path;

const DEMO: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/data/cold_store.csv");

/// A small model on 400 rows of the demo table, and the demo rows repeated to `rows` rows
/// (more than two chunks of the command's 8192); files named after the test.
fn setup(name: &str, rows: usize) -> (String, String) {
    let demo = std::fs::read_to_string(DEMO).unwrap();
    let mut lines = demo.lines();
    let header = lines.next().unwrap();
    let body: Vec<&str> = lines.collect();
    let small = path(&format!("{name}_small.csv"));
    std::fs::write(&small, format!("{header}\n{}\n", body[..400].join("\n"))).unwrap();
    let model = path(&format!("{name}_model.json"));
    let o = relume(&[
        "train",
        "--data",
        &small,
        "--target",
        "power_kw",
        "--members",
        "2",
        "--layers",
        "16,16",
        "--out",
        &model,
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let mut text = format!("{header}\n");
    for r in 0..rows {
        text += body[r % body.len()];
        text.push('\n');
    }
    let big = path(&format!("{name}_big.csv"));
    std::fs::write(&big, text).unwrap();
    (model, big)
}

#[test]
fn chunked_prediction_matches_predicting_the_whole_table() {
    let (model, big) = setup("whole", 20_000);
    let out = path("pred.csv");
    let o = relume(&["predict", "--model", &model, "--data", &big, "--out", &out]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let written = std::fs::read_to_string(&out).unwrap();
    let predictor = Predictor::load(Path::new(&model)).unwrap();
    let table = Table::read_path(Path::new(&big), &ReadOptions::default()).unwrap();
    let whole = predictor.predict_table(&table).unwrap();
    let lines: Vec<&str> = written.lines().skip(1).collect();
    assert_eq!(lines.len(), 20_000);
    for (k, (line, row)) in lines.iter().zip(&whole).enumerate() {
        let fields: Vec<&str> = line.split(',').collect();
        assert_eq!(fields[0], (k + 2).to_string(), "line numbers run on");
        let printed: f32 = fields[1].parse().unwrap();
        assert_eq!(printed, row.value.unwrap() as f32, "row {k}");
    }
    // evaluate reads the same way and counts every row.
    let o = relume(&["evaluate", "--model", &model, "--data", &big]);
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(text.contains("rows      20000"), "{text}");
}

#[test]
fn a_failure_part_way_leaves_the_earlier_output_file_untouched() {
    let (model, big) = setup("fail", 12_000);
    let out = path("kept.csv");
    std::fs::write(&out, "an earlier result\n").unwrap();
    // One damaged number in the second chunk.
    let mut text = std::fs::read_to_string(&big).unwrap();
    let at = text.match_indices('\n').nth(10_000).unwrap().0 + 1;
    let end = at + text[at..].find(',').unwrap();
    text.replace_range(at..end, "warm");
    let damaged = path("damaged.csv");
    std::fs::write(&damaged, text).unwrap();
    let o = relume(&[
        "predict", "--model", &model, "--data", &damaged, "--out", &out,
    ]);
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{err}");
    assert!(
        err.contains("line 10002") && err.contains("'warm'"),
        "{err}"
    );
    assert_eq!(
        std::fs::read_to_string(&out).unwrap(),
        "an earlier result\n"
    );
}
