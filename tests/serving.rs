//! From CSV to a served model: ingestion, encoding, splits, metrics, the model file and the
//! predictor.

use relume::data::{
    kfold, stratified_kfold, DataError, Encoder, EncoderSpec, Impute, ReadOptions, Table,
};
use relume::fit::monitor::MonitorConfig;
use relume::serve::metrics::Metrics;
use relume::serve::model::{Model, MAX_WIDTH};
use relume::serve::predict::{Cell, RowErrorKind};
use relume::{Predictor, Recipe};
use std::path::PathBuf;

fn read(text: &str) -> Result<Table, DataError> {
    Table::read(text.as_bytes(), "test.csv", &ReadOptions::default())
}

fn temp_dir(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("relume-{name}-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// A small table with a text column: y = 2a − b + (site offset) + noise-free.
fn small_csv(rows: usize) -> String {
    let mut s = String::from("a,b,site,y\n");
    for i in 0..rows {
        let a = (i as f64 * 0.37).sin() * 3.0;
        let b = (i as f64 * 0.11).cos();
        let site = ["north", "south", "east"][i % 3];
        let offset = [0.0, 1.5, -1.0][i % 3];
        s += &format!("{a:.4},{b:.4},{site},{:.4}\n", 2.0 * a - b + offset);
    }
    s
}

#[test]
fn numbers_parse_strictly_and_errors_name_line_and_column() {
    let t = read("x,y\n1e-3,2\n-0.5,+3\n").unwrap();
    assert_eq!(t.rows(), 2);
    let err = read("x,y\n1,2\nNaN,3\n").unwrap_err().to_string();
    assert!(
        err.contains("test.csv") && err.contains("line 3") && err.contains("'x'"),
        "{err}"
    );
    let err = read("x,y\n1,2\n1,5,3\n").unwrap_err().to_string();
    assert!(err.contains("line 3") && err.contains("3 fields"), "{err}");
    // A word among many numbers is a damaged numeric column (typing reads the first 1000 rows).
    let numbers: String = (0..40).map(|i| format!("{i},{i}\n")).collect();
    let err = read(&format!("x,y\n1,2\nabc,3\n{numbers}"))
        .unwrap_err()
        .to_string();
    assert!(err.contains("line 3 'abc'"), "{err}");
    let err = read(&format!("x,y\n1,2\n1;5,3\n{numbers}"))
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("'1;5'"),
        "decimal commas and other locales are refused: {err}"
    );
    assert!(read("").unwrap_err().to_string().contains("empty"));
    assert!(read("x,y\n")
        .unwrap_err()
        .to_string()
        .contains("no data rows"));
    let allowed = Table::read(
        "x,y\n1,2\nNaN,3\n".as_bytes(),
        "t",
        &ReadOptions {
            allow_non_finite: true,
            ..ReadOptions::default()
        },
    )
    .unwrap();
    assert!(allowed.columns[0].is_missing(1));
}

#[test]
fn empty_cells_are_errors_unless_imputation_is_on() {
    let table = read("a,b,y\n1,x,1\n,y,2\n3,,3\n5,x,4\n").unwrap();
    let spec = EncoderSpec {
        target: "y".into(),
        ..EncoderSpec::default()
    };
    let all: Vec<usize> = (0..4).collect();
    let err = Encoder::fit(&table, &spec, &all).unwrap_err().to_string();
    assert!(
        err.contains("line 3") && err.contains("'a'") && err.contains("empty"),
        "{err}"
    );
    for (how, fill) in [
        (Impute::Mean, 3.0),
        (Impute::Median, 3.0),
        (Impute::MostFrequent, 1.0),
    ] {
        let spec = EncoderSpec {
            target: "y".into(),
            impute: Some(how),
            min_level_rows: 1,
            ..EncoderSpec::default()
        };
        let enc = Encoder::fit(&table, &spec, &all).unwrap();
        assert_eq!(
            enc.input_names(),
            ["a", "a:missing", "b=x", "b=y", "b=(missing)"]
        );
        let x = enc.encode_inputs::<f64>(&table, None).unwrap();
        assert_eq!((x[(1, 0)], x[(1, 1)]), (fill, 1.0), "{how:?}");
        // The empty text cell is its own level.
        assert_eq!(x.row(2).to_vec(), vec![3.0, 0.0, 0.0, 0.0, 1.0]);
    }
}

#[test]
fn categories_come_from_every_row_handed_to_training() {
    let table = read("c,y\nred,1\nblue,2\ngreen,3\nred,4\n").unwrap();
    let spec = EncoderSpec {
        target: "y".into(),
        min_level_rows: 1,
        ..EncoderSpec::default()
    };
    // Statistics come from the training rows [0, 1, 3]; levels from every row, so the level
    // of a validation row (green, row 2) cannot stop training.
    let enc = Encoder::fit(&table, &spec, &[0, 1, 3]).unwrap();
    assert_eq!(enc.input_names(), vec!["c=blue", "c=green", "c=red"]);
    let x = enc.encode_inputs::<f64>(&table, None).unwrap();
    assert_eq!(x.row(2).to_vec(), vec![0.0, 1.0, 0.0]);
    assert_eq!(x.row(0).to_vec(), vec![0.0, 0.0, 1.0]);
    // With the default minimum (5 rows) all three are rare and share the pooled level.
    let pooled = Encoder::fit(
        &table,
        &EncoderSpec {
            min_level_rows: 5,
            ..spec.clone()
        },
        &[0],
    )
    .unwrap();
    assert_eq!(pooled.input_names(), vec!["c=(other)"]);
    let err = Encoder::fit(
        &table,
        &EncoderSpec {
            target: "z".into(),
            ..spec
        },
        &[0],
    )
    .unwrap_err();
    assert!(err.to_string().contains("no column named 'z'"), "{err}");
}

#[test]
fn log_target_round_trips_and_refuses_non_positive_values() {
    let table = read("x,y\n1,2.5\n2,10\n").unwrap();
    let spec = EncoderSpec {
        target: "y".into(),
        log_target: true,
        ..EncoderSpec::default()
    };
    let enc = Encoder::fit(&table, &spec, &[0, 1]).unwrap();
    let y = enc.encode_target(&table, None).unwrap();
    assert!((enc.decode_target(y[(0, 0)]) - 2.5).abs() < 1e-12);
    let bad = read("x,y\n1,2.5\n2,0\n").unwrap();
    assert!(enc
        .encode_target(&bad, None)
        .unwrap_err()
        .to_string()
        .contains("> 0"));
}

#[test]
fn folds_cover_every_row_once() {
    for folds in [
        kfold(23, 5, 1),
        stratified_kfold(&(0..23).map(|i| i as f64).collect::<Vec<_>>(), 5, 1),
    ] {
        let mut seen = [0; 23];
        for (train, test) in &folds {
            assert_eq!(train.len() + test.len(), 23);
            test.iter().for_each(|&r| seen[r] += 1);
        }
        assert!(seen.iter().all(|&n| n == 1));
    }
    // Stratified: each fold holds one of every band of five consecutive targets.
    let target: Vec<f64> = (0..20).map(|i| i as f64).collect();
    for (_, test) in stratified_kfold(&target, 5, 3) {
        let mut bands: Vec<usize> = test.iter().map(|&r| r / 5).collect();
        bands.sort_unstable();
        assert_eq!(bands, vec![0, 1, 2, 3]);
    }
    assert_eq!(kfold(10, 3, 7), kfold(10, 3, 7));
}

#[test]
fn metrics_match_a_hand_computation() {
    let m = Metrics::compute(&[1.0, 2.0, 4.0, 0.0], &[1.0, 3.0, 2.0, 0.0]);
    // Residuals 0, −1, 2, 0: SSE 5, RMSE √1.25, MAE 0.75; ȳ = 1.5, SST 5 → R² 0.
    assert!((m.rmse - 1.25f64.sqrt()).abs() < 1e-15);
    assert_eq!(m.mae, 0.75);
    assert_eq!(m.r2, 0.0);
    // MAPE over the non-zero targets: (0 + 1/3 + 1)/3.
    assert!((m.mape.unwrap() - 100.0 * (4.0 / 3.0) / 3.0).abs() < 1e-12);
    assert_eq!(m.mape_skipped, 1);
    assert_eq!(m.residual_quantiles[2], 0.0);
}

fn trained_model() -> Model {
    let table = read(&small_csv(300)).unwrap();
    let spec = EncoderSpec {
        target: "y".into(),
        ..EncoderSpec::default()
    };
    let recipe = Recipe {
        hidden: vec![16, 16],
        ..Recipe::default()
    };
    Model::fit(&table, &spec, &recipe, MonitorConfig::default())
        .unwrap()
        .0
}

#[test]
fn save_and_load_give_bit_identical_predictions() {
    let model = trained_model();
    let dir = temp_dir("roundtrip");
    let path = dir.join("m.json");
    model.save(&path).unwrap();
    let (before, after) = (Predictor::new(&model), Predictor::load(&path).unwrap());
    let table = read(&small_csv(50)).unwrap();
    let (a, b) = (
        before.predict_table(&table).unwrap(),
        after.predict_table(&table).unwrap(),
    );
    assert_eq!(a, b);
    assert!(a.iter().all(|r| r.value.is_some()));
    let v = model.summary.validation.as_ref().unwrap();
    println!("small table: validation RMSE {:.4}, R² {:.4}", v.rmse, v.r2);
    assert!(v.r2 > 0.99);
    std::fs::remove_dir_all(dir).ok();
}

#[test]
fn the_row_predictor_agrees_with_the_training_forward_pass() {
    // The predictor has its own single-row kernels; the network's batch forward (what training
    // optimizes) is the reference. Both run in f32: agreement to 1e-5 of the target scale.
    let model = trained_model();
    let table = read(&small_csv(40)).unwrap();
    let mut x = model.encoder.encode_inputs::<f32>(&table, None).unwrap();
    model.inputs.apply_in_place(&mut x);
    // The served value is the members' average.
    let mut sum = ndarray::Array2::<f32>::zeros((x.nrows(), 1));
    for member in &model.members {
        let mut network = member.clone();
        sum += &network
            .forward(x.view(), relume::nn::layer::Pass::Infer)
            .unwrap();
    }
    let scaled = sum / model.members.len() as f32;
    let batch = model.target.invert(scaled.view());
    let rows = Predictor::new(&model).predict_table(&table).unwrap();
    let spread = model.target.sd[0];
    for (r, row) in rows.iter().enumerate() {
        let want = model.encoder.decode_target(batch[[r, 0]] as f64);
        let got = row.value.unwrap();
        assert!(
            (got - want).abs() <= 1e-5 * spread,
            "row {r}: {got} vs {want}"
        );
    }
}

#[test]
fn damaged_files_give_clear_errors() {
    let model = trained_model();
    let text = model.to_json();
    let edit = |change: &dyn Fn(&mut serde_json::Value)| {
        let mut v: serde_json::Value = serde_json::from_str(&text).unwrap();
        change(&mut v);
        v.to_string()
    };
    let cases: Vec<(&str, String, &str)> = vec![
        ("garbage", "not json at all".to_string(), "not a model file"),
        ("truncated", text[..text.len() / 2].to_string(), "line 1"),
        (
            "foreign",
            r#"{"format":"something-else","version":1}"#.to_string(),
            "something-else",
        ),
        ("version", edit(&|v| v["version"] = 99.into()), "version 99"),
        (
            "oversized",
            edit(&|v| v["input_width"] = (MAX_WIDTH * 1000).into()),
            "input width",
        ),
        (
            "huge layer",
            edit(&|v| v["members"][0]["layers"][0]["outputs"] = 4_000_000_000u64.into()),
            "outputs is 4000000000",
        ),
        (
            "short parameters",
            edit(&|v| {
                v["members"][0]["parameters"].as_array_mut().unwrap().pop();
            }),
            "parameters stored",
        ),
        (
            "non-finite",
            text.replacen("\"parameters\":[", "\"parameters\":[1e999,", 1),
            "damaged model file",
        ),
    ];
    let dir = temp_dir("damaged");
    for (name, body, needle) in cases {
        let path = dir.join(format!("{}.json", name.replace(' ', "_")));
        std::fs::write(&path, &body).unwrap();
        let err = match Model::load(&path) {
            Ok(_) => panic!("{name}: a damaged file loaded"),
            Err(e) => e.to_string(),
        };
        println!("{name}: {err}");
        assert!(err.contains(needle), "{name}: {err}");
        assert!(
            err.contains(path.to_str().unwrap()),
            "{name}: names the file: {err}"
        );
    }
    assert!(Model::load(&dir.join("absent.json"))
        .unwrap_err()
        .to_string()
        .contains("cannot open"));
    std::fs::remove_dir_all(dir).ok();
}

#[test]
fn rows_with_unseen_categories_or_out_of_range_values_are_flagged() {
    let predictor = Predictor::new(&trained_model());
    let mut scratch = predictor.scratch();
    assert_eq!(predictor.feature_names(), vec!["a", "b", "site"]);
    let ok = predictor
        .predict_row(
            &[Cell::Number(0.5), Cell::Number(0.2), Cell::Text("south")],
            &mut scratch,
        )
        .unwrap();
    assert!(!ok.extrapolated);
    assert!(
        (ok.value - (2.0 * 0.5 - 0.2 + 1.5)).abs() < 0.2,
        "{}",
        ok.value
    );
    let far = predictor
        .predict_row(
            &[Cell::Number(30.0), Cell::Number(0.2), Cell::Text("south")],
            &mut scratch,
        )
        .unwrap();
    assert!(far.extrapolated);
    assert_eq!(scratch.out_of_range(), &[true, false, false]);
    // An unseen category is predicted (through the average of the levels: no level was rare
    // here) and flagged.
    let unseen = predictor
        .predict_row(
            &[Cell::Number(0.5), Cell::Number(0.2), Cell::Text("west")],
            &mut scratch,
        )
        .unwrap();
    assert!(unseen.unseen && !unseen.extrapolated);
    assert_eq!(scratch.unseen(), &[false, false, true]);
    let err = predictor
        .predict_row(
            &[Cell::Number(0.5), Cell::Text("x"), Cell::Text("east")],
            &mut scratch,
        )
        .unwrap_err();
    assert_eq!((err.feature, err.kind), (1, RowErrorKind::NotANumber));
    assert!(predictor.explain(&err).contains("'b'"));
    let err = predictor
        .predict_row(&[Cell::Number(0.5)], &mut scratch)
        .unwrap_err();
    assert_eq!(err.kind, RowErrorKind::WrongLength);
    // Finite values whose standardized form leaves f32 (or comes near it) are refused: they
    // gave a meaningless number (1e300 predicted the same as -1e300) before.
    for huge in [1e38, 1e300, -1e300] {
        let err = predictor
            .predict_row(
                &[Cell::Number(huge), Cell::Number(0.2), Cell::Text("east")],
                &mut scratch,
            )
            .unwrap_err();
        assert_eq!(
            (err.feature, err.kind),
            (0, RowErrorKind::Overflow),
            "{huge}"
        );
        assert!(predictor.explain(&err).contains("'a'"));
    }
    // The table path flags per row instead of failing the whole table.
    let table = read("a,b,site\n0.5,0.2,west\n0.5,0.2,east\n99,0.2,east\n").unwrap();
    let rows = predictor.predict_table(&table).unwrap();
    assert!(rows[0].value.is_some() && rows[0].unseen == ["site"]);
    assert!(rows[1].value.is_some() && rows[1].out_of_range.is_empty());
    assert_eq!(rows[2].out_of_range, vec!["a".to_string()]);
    assert_eq!(rows[2].line, 4);
}

#[test]
fn eight_threads_sharing_one_predictor_match_the_single_thread_results() {
    let predictor = Predictor::new(&trained_model());
    let rows: Vec<[f64; 2]> = (0..400)
        .map(|i| [(i as f64 * 0.1).sin() * 3.0, (i as f64 * 0.05).cos()])
        .collect();
    let sites = ["north", "south", "east"];
    let run = |p: &Predictor, range: std::ops::Range<usize>| {
        let mut scratch = p.scratch();
        range
            .map(|i| {
                let cells = [
                    Cell::Number(rows[i][0]),
                    Cell::Number(rows[i][1]),
                    Cell::Text(sites[i % 3]),
                ];
                p.predict_row(&cells, &mut scratch).unwrap().value
            })
            .collect::<Vec<f64>>()
    };
    let single = run(&predictor, 0..400);
    let shared = std::sync::Arc::new(predictor);
    let handles: Vec<_> = (0..8)
        .map(|t| {
            let p = shared.clone();
            let rows = rows.clone();
            std::thread::spawn(move || {
                let mut scratch = p.scratch();
                (0..400)
                    .map(|i| {
                        let i = (i + t * 50) % 400;
                        let cells = [
                            Cell::Number(rows[i][0]),
                            Cell::Number(rows[i][1]),
                            Cell::Text(sites[i % 3]),
                        ];
                        (i, p.predict_row(&cells, &mut scratch).unwrap().value)
                    })
                    .collect::<Vec<_>>()
            })
        })
        .collect();
    for h in handles {
        for (i, v) in h.join().unwrap() {
            assert_eq!(v.to_bits(), single[i].to_bits(), "row {i}");
        }
    }
}
