//! Ordinary tables: column roles, rare and unseen categories, empty cells, dates, empty
//! targets, data warnings and column typing. Every table is built in the test.

use relume::data::{
    list_some, parse_iso_date, DataError, Encoder, EncoderSpec, FeatureEncoding, Impute,
    ReadOptions, Table, UnseenPolicy, OTHER_LEVEL,
};
use relume::fit::monitor::MonitorConfig;
use relume::serve::model::Model;
use relume::serve::predict::{Cell, RowErrorKind};
use relume::{Overrides, Predictor};
use std::path::Path;

fn read(text: &str) -> Result<Table, DataError> {
    Table::read(text.as_bytes(), "t.csv", &ReadOptions::default())
}

fn spec(target: &str) -> EncoderSpec {
    EncoderSpec {
        target: target.into(),
        ..EncoderSpec::default()
    }
}

fn all(table: &Table) -> Vec<usize> {
    (0..table.rows()).collect()
}

fn fit(text: &str, spec: &EncoderSpec) -> Encoder {
    let table = read(text).unwrap();
    Encoder::fit(&table, spec, &all(&table)).unwrap()
}

fn note<'e>(encoder: &'e Encoder, column: &str) -> &'e relume::data::ColumnNote {
    encoder.columns.iter().find(|c| c.name == column).unwrap()
}

/// A fast recipe for tests that train (small network, few iterations).
fn quick() -> relume::Recipe {
    Overrides {
        hidden: Some(vec![8]),
        epochs: Some(60),
        ..Overrides::default()
    }
    .recipe()
}

/// `rows` rows: id (distinct), x, colour (red/blue/green, plus rare levels every 50th row),
/// const (always 7), y = 2x + colour offset.
fn mixed_csv(rows: usize) -> String {
    let mut s = String::from("id,x,colour,const,y\n");
    for i in 0..rows {
        let x = (i as f64 * 0.37).sin() * 3.0;
        let colour = if i % 50 == 7 {
            format!("rare{}", i / 50)
        } else {
            ["red", "blue", "green"][i % 3].to_string()
        };
        let offset = match colour.as_str() {
            "red" => 1.0,
            "blue" => -1.0,
            _ => 0.0,
        };
        s += &format!("p{i:04},{x:.4},{colour},7,{:.4}\n", 2.0 * x + offset);
    }
    s
}

#[test]
fn identifier_and_constant_columns_are_left_out_with_reasons() {
    let enc = fit(&mixed_csv(200), &spec("y"));
    let names: Vec<&str> = enc.features.iter().map(|f| f.name()).collect();
    assert_eq!(names, ["x", "colour"]);
    assert!(!note(&enc, "id").used && note(&enc, "id").what.contains("identifier-like"));
    assert!(!note(&enc, "const").used && note(&enc, "const").what.contains("constant"));
    assert!(enc.warnings.iter().any(|w| w.contains("'id'")));
    // Each role can be overridden.
    let kept = fit(
        &mixed_csv(200),
        &EncoderSpec {
            keep: vec!["id".into()],
            drop: vec!["colour".into()],
            ..spec("y")
        },
    );
    let names: Vec<&str> = kept.features.iter().map(|f| f.name()).collect();
    assert_eq!(names, ["id", "x"]);
    assert!(note(&kept, "colour").what.contains("--drop-columns"));
}

#[test]
fn rare_levels_pool_into_one_learned_level_and_unseen_levels_are_flagged() {
    let enc = fit(&mixed_csv(200), &spec("y"));
    let colour = enc.features.iter().find(|f| f.name() == "colour").unwrap();
    let FeatureEncoding::Category { levels, pooled, .. } = colour else {
        panic!("colour is a category")
    };
    assert_eq!(levels, &["blue", "green", "red"]);
    assert_eq!(
        pooled.as_ref().unwrap(),
        &["rare0", "rare1", "rare2", "rare3"]
    );
    assert_eq!(colour.width(), 4);
    assert!(enc.input_names().contains(&format!("colour={OTHER_LEVEL}")));

    // Train: a level seen only in the validation rows cannot stop training.
    let table = read(&mixed_csv(200)).unwrap();
    let (model, _) = Model::fit(&table, &spec("y"), &quick(), MonitorConfig::default()).unwrap();
    let predictor = Predictor::new(&model);
    let mut scratch = predictor.scratch();
    let known = predictor
        .predict_row(&[Cell::Number(0.5), Cell::Text("rare2")], &mut scratch)
        .unwrap();
    assert!(
        !known.unseen,
        "a pooled level seen in training is not 'unseen'"
    );
    let fresh = predictor
        .predict_row(&[Cell::Number(0.5), Cell::Text("violet")], &mut scratch)
        .unwrap();
    assert!(fresh.unseen && scratch.unseen()[1]);
    // An unseen level goes through the pooled input, exactly like a known rare level.
    assert_eq!(fresh.value, known.value);

    // The strict policy keeps the old behaviour.
    let strict = EncoderSpec {
        unseen: UnseenPolicy::Error,
        ..spec("y")
    };
    let (model, _) = Model::fit(&table, &strict, &quick(), MonitorConfig::default()).unwrap();
    let predictor = Predictor::new(&model);
    let err = predictor
        .predict_row(
            &[Cell::Number(0.5), Cell::Text("violet")],
            &mut predictor.scratch(),
        )
        .unwrap_err();
    assert_eq!(err.kind, RowErrorKind::UnseenCategory);
}

#[test]
fn an_unseen_level_without_a_pooled_level_predicts_at_the_average_of_the_levels() {
    // Two levels, both frequent: no pooled input. An unseen level puts every one-hot input at
    // its training mean, so the prediction lies between the two levels' predictions.
    let mut s = String::from("x,kind,y\n");
    for i in 0..120 {
        let kind = ["a", "b"][i % 2];
        s += &format!(
            "{},{kind},{}\n",
            i % 10,
            (i % 10) as f64 + if i % 2 == 0 { 5.0 } else { -5.0 }
        );
    }
    let table = read(&s).unwrap();
    let (model, _) = Model::fit(&table, &spec("y"), &quick(), MonitorConfig::default()).unwrap();
    let predictor = Predictor::new(&model);
    let mut scratch = predictor.scratch();
    let mut at = |kind| {
        predictor
            .predict_row(&[Cell::Number(4.0), Cell::Text(kind)], &mut scratch)
            .unwrap()
    };
    let (a, b, unseen) = (at("a"), at("b"), at("zzz"));
    assert!(unseen.unseen && !a.unseen);
    let (lo, hi) = (a.value.min(b.value), a.value.max(b.value));
    assert!(hi - lo > 4.0, "the levels differ: {lo} {hi}");
    assert!(
        lo < unseen.value && unseen.value < hi,
        "{lo} {} {hi}",
        unseen.value
    );
}

#[test]
fn empty_text_cells_are_their_own_level() {
    let mut s = String::from("x,city,y\n");
    for i in 0..60 {
        let city = ["", "oslo", "rome"][i % 3];
        s += &format!(
            "{i},{city},{}\n",
            i as f64 + if city.is_empty() { 10.0 } else { 0.0 }
        );
    }
    let enc = fit(&s, &spec("y"));
    let FeatureEncoding::Category { missing_level, .. } = &enc.features[1] else {
        panic!()
    };
    assert!(*missing_level);
    assert!(enc.input_names().contains(&"city=(missing)".to_string()));
    let table = read(&s).unwrap();
    let x = enc.encode_inputs::<f64>(&table, Some(&[0, 1])).unwrap();
    // Row 0 is empty: only the missing input is set; row 1 is oslo.
    assert_eq!(x.row(0).to_vec(), [0.0, 0.0, 0.0, 1.0]);
    assert_eq!(x.row(1).to_vec(), [1.0, 1.0, 0.0, 0.0]);
}

#[test]
fn empty_numeric_cells_are_an_error_naming_the_option_or_imputed_with_a_flag() {
    let s = "a,b,y\n1,2,3\n2,,5\n3,4,7\n4,5,9\n";
    let table = read(s).unwrap();
    let err = Encoder::fit(&table, &spec("y"), &all(&table))
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("t.csv")
            && err.contains("line 3")
            && err.contains("'b'")
            && err.contains("--impute"),
        "{err}"
    );
    let enc = Encoder::fit(
        &table,
        &EncoderSpec {
            impute: Some(Impute::Median),
            ..spec("y")
        },
        &all(&table),
    )
    .unwrap();
    assert_eq!(enc.input_names(), ["a", "b", "b:missing"]);
    let x = enc.encode_inputs::<f64>(&table, None).unwrap();
    // Median of 2, 4, 5 is 4; the flag marks the filled row only.
    assert_eq!(x.column(1).to_vec(), [2.0, 4.0, 4.0, 5.0]);
    assert_eq!(x.column(2).to_vec(), [0.0, 1.0, 0.0, 0.0]);
    assert_eq!(x.column(0).to_vec(), [1.0, 2.0, 3.0, 4.0]);
}

#[test]
fn with_imputation_asked_an_empty_cell_met_only_when_predicting_is_filled() {
    // Column a, the date d and the category c have no empty cell in training; with --impute
    // the model still records their fill values (no was-missing input; for c its most
    // frequent level), so a new row with them empty is predicted instead of refused. Found on a real table whose test split had the only
    // empty cell of one column.
    let mut s = String::from("a,d,c,y\n");
    for r in 0..40 {
        let c = ["north", "south", "south", "east"][r % 4];
        s += &format!("{},2020-01-{:02},{c},{}\n", r % 7, 1 + r % 28, r % 5);
    }
    let table = read(&s).unwrap();
    let asked = EncoderSpec {
        impute: Some(Impute::Median),
        ..spec("y")
    };
    let fit = |spec: &EncoderSpec| {
        let recipe = relume::Recipe {
            members: 1,
            hidden: vec![4],
            ..relume::Recipe::default()
        };
        Model::fit(&table, spec, &recipe, MonitorConfig::default())
            .unwrap()
            .0
    };
    let model = fit(&asked);
    assert_eq!(
        model.encoder.input_names().len(),
        1 + 5 + 3,
        "no was-missing inputs"
    );
    let fills: Vec<Option<f64>> = model
        .encoder
        .features
        .iter()
        .map(|f| match f {
            FeatureEncoding::Number { fill, .. } | FeatureEncoding::Date { fill, .. } => *fill,
            FeatureEncoding::Category { .. } => None,
        })
        .collect();
    let category_fill = match &model.encoder.features[2] {
        FeatureEncoding::Category { fill, .. } => fill.clone(),
        _ => None,
    };
    assert_eq!(
        category_fill.as_deref(),
        Some("south"),
        "the most frequent level"
    );
    // Median of a (0..6, each about as often) is 3; the date's fill is its median day.
    assert_eq!(fills[0], Some(3.0));
    assert!(fills[1].is_some());
    let predictor = Predictor::new(&model);
    let mut scratch = predictor.scratch();
    let day = Cell::Text("2020-01-14");
    let (south, north) = (Cell::Text("south"), Cell::Text("north"));
    let filled = predictor
        .predict_row(&[Cell::Missing, day, Cell::Missing], &mut scratch)
        .unwrap();
    let at_fill = predictor
        .predict_row(&[Cell::Number(3.0), day, south], &mut scratch)
        .unwrap();
    assert_eq!(filled.value, at_fill.value);
    assert!(!filled.unseen);
    assert!(predictor
        .predict_row(&[Cell::Number(3.0), Cell::Missing, north], &mut scratch)
        .is_ok());
    // Without imputation the same empty cell stays an error naming the column.
    let p = Predictor::new(&fit(&spec("y")));
    let mut scratch = p.scratch();
    let err = p
        .predict_row(&[Cell::Missing, day, south], &mut scratch)
        .unwrap_err();
    assert!(p.explain(&err).contains("'a'"), "{}", p.explain(&err));
}

#[test]
fn iso_dates_match_a_reference_date_library() {
    // Reference: the chrono crate (proleptic Gregorian calendar, ISO weekdays).
    use chrono::{Datelike, NaiveDate};
    let epoch = NaiveDate::from_ymd_opt(1970, 1, 1).unwrap();
    let mut day = NaiveDate::from_ymd_opt(1899, 12, 25).unwrap();
    let end = NaiveDate::from_ymd_opt(2101, 3, 1).unwrap();
    let mut checked = 0;
    while day < end {
        let text = day.format("%Y-%m-%d").to_string();
        let p = parse_iso_date(&text).unwrap();
        assert_eq!(p.days, (day - epoch).num_days() as f64, "{text}");
        assert_eq!(p.day_of_year, day.ordinal(), "{text}");
        assert_eq!(p.weekday, day.weekday().num_days_from_monday(), "{text}");
        day += chrono::Duration::days(13);
        checked += 1;
    }
    assert!(checked > 5000);
    // Times and offsets.
    let p = parse_iso_date("2016-07-02T18:00:00+02:00").unwrap();
    assert_eq!(p.days, 16984.0 + 16.0 / 24.0);
    assert!(p.has_time && (p.seconds - 16.0 * 3600.0).abs() < 1e-6);
    let p = parse_iso_date("2016-07-02 00:30Z").unwrap();
    assert!((p.days - (16984.0 + 0.5 / 24.0)).abs() < 1e-9);
    for bad in [
        "2016-02-30",
        "2015-02-29",
        "2016-13-01",
        "2016-7-2",
        "16-07-02",
        "2016-07-02T25:00",
        "2016-07-02x",
        "2016/07/02",
    ] {
        assert!(parse_iso_date(bad).is_none(), "{bad}");
    }
    assert!(parse_iso_date("2016-02-29").is_some());
}

#[test]
fn date_columns_become_days_and_cycles() {
    let mut s = String::from("when,y\n");
    for i in 0..40 {
        s += &format!("2020-01-{:02},{i}\n", i % 28 + 1);
    }
    let enc = fit(&s, &spec("y"));
    assert_eq!(
        enc.input_names(),
        [
            "when:days",
            "when:year-sin",
            "when:year-cos",
            "when:week-sin",
            "when:week-cos"
        ]
    );
    let table = read(&s).unwrap();
    let x = enc.encode_inputs::<f64>(&table, Some(&[0, 5])).unwrap();
    // 2020-01-01 is day 18262 since 1970-01-01, a Wednesday (weekday 2); 2020-01-06 a Monday.
    assert_eq!(x[(0, 0)], 18262.0);
    let tau = std::f64::consts::TAU;
    assert!((x[(0, 1)] - 0.0).abs() < 1e-12 && (x[(0, 2)] - 1.0).abs() < 1e-12);
    assert!((x[(0, 3)] - (tau * 2.0 / 7.0).sin()).abs() < 1e-12);
    assert!((x[(1, 3)] - 0.0).abs() < 1e-12 && (x[(1, 4)] - 1.0).abs() < 1e-12);
    assert!((x[(1, 1)] - (tau * 5.0 / 365.25).sin()).abs() < 1e-12);
    // With times: two more inputs for the time of day.
    let enc = fit(
        "t,y\n2020-01-01T06:00,1\n2020-01-02T18:00,2\n2020-01-03,3\n",
        &spec("y"),
    );
    assert_eq!(enc.width(), 7);
    // A date column predicts from text cells, and a bad date is a row error.
    let (model, _) = Model::fit(&table, &spec("y"), &quick(), MonitorConfig::default()).unwrap();
    let predictor = Predictor::new(&model);
    let mut scratch = predictor.scratch();
    assert!(predictor
        .predict_row(&[Cell::Text("2020-01-09")], &mut scratch)
        .is_ok());
    let far = predictor
        .predict_row(&[Cell::Text("2024-06-01")], &mut scratch)
        .unwrap();
    assert!(far.extrapolated);
    let err = predictor
        .predict_row(&[Cell::Text("soon")], &mut scratch)
        .unwrap_err();
    assert_eq!(err.kind, RowErrorKind::NotADate);
}

#[test]
fn rows_with_an_empty_target_are_left_out_and_counted() {
    let mut s = String::from("x,y\n");
    for i in 0..50 {
        let y = if i % 10 == 3 {
            String::new()
        } else {
            format!("{}", 2 * i)
        };
        s += &format!("{i},{y}\n");
    }
    let table = read(&s).unwrap();
    let (model, report) =
        Model::fit(&table, &spec("y"), &quick(), MonitorConfig::default()).unwrap();
    assert_eq!(model.summary.empty_targets, 5);
    // Row i sits on file line i + 2.
    assert_eq!(model.summary.empty_target_lines, [5, 15, 25, 35, 45]);
    assert_eq!(model.summary.train_rows + model.summary.val_rows, 45);
    assert!(report
        .data_warnings
        .iter()
        .any(|w| w.contains("empty target")));
}

#[test]
fn a_near_copy_of_the_target_is_reported_as_a_likely_leak() {
    let mut s = String::from("x,copy,y\n");
    for i in 0..100 {
        let x = (i as f64 * 0.7).sin();
        let y = 3.0 * x + (i as f64 * 1.3).cos();
        s += &format!("{x:.5},{:.5},{y:.5}\n", y + 0.01 * (i as f64 * 2.1).sin());
    }
    let enc = fit(&s, &spec("y"));
    let leaks: Vec<&String> = enc.warnings.iter().filter(|w| w.contains("leak")).collect();
    assert_eq!(leaks.len(), 1, "{:?}", enc.warnings);
    assert!(leaks[0].contains("'copy'") && leaks[0].contains("r²"));
}

#[test]
fn a_right_skewed_positive_target_gets_the_log_advice() {
    // Skewness of a lognormal with σ = 1 is (e + 2)·sqrt(e − 1) ≈ 6.2 (a textbook formula);
    // a uniform target has skewness 0.
    let mut skewed = String::from("x,y\n");
    let mut flat = String::from("x,y\n");
    for i in 0..400 {
        let z = (i as f64 + 0.5) / 400.0;
        // Quantiles of the standard normal by a simple inverse (good enough for the shape).
        let q = (2.0 * z - 1.0).clamp(-0.999, 0.999);
        let normal = (std::f64::consts::PI / 8.0).sqrt() * ((1.0 + q) / (1.0 - q)).ln();
        skewed += &format!("{i},{:.6}\n", normal.exp());
        flat += &format!("{i},{:.6}\n", 1.0 + z);
    }
    let enc = fit(&skewed, &spec("y"));
    assert!(
        enc.warnings.iter().any(|w| w.contains("--log-target")),
        "{:?}",
        enc.warnings
    );
    let enc = fit(&flat, &spec("y"));
    assert!(!enc.warnings.iter().any(|w| w.contains("--log-target")));
    // With the log target already chosen there is nothing to advise.
    let enc = fit(
        &skewed,
        &EncoderSpec {
            log_target: true,
            ..spec("y")
        },
    );
    assert!(!enc.warnings.iter().any(|w| w.contains("--log-target")));
}

#[test]
fn many_levels_keep_the_most_frequent_and_warn() {
    let mut s = String::from("shop,y\n");
    for i in 0..2000 {
        // Shop k appears about 2000 / (k + 1) / 8 times: a long tail.
        let k = (i * 7919) % 97;
        let shop = if i % 2 == 0 { k % 60 } else { k };
        s += &format!("s{shop},{}\n", shop % 5);
    }
    let enc = fit(
        &s,
        &EncoderSpec {
            max_levels: 20,
            ..spec("y")
        },
    );
    let FeatureEncoding::Category { levels, pooled, .. } = &enc.features[0] else {
        panic!()
    };
    assert_eq!(levels.len(), 20);
    assert_eq!(levels.len() + pooled.as_ref().unwrap().len(), 97);
    assert!(
        enc.warnings.iter().any(|w| w.contains("97 levels")),
        "{:?}",
        enc.warnings
    );
}

#[test]
fn a_numeric_column_with_a_few_damaged_cells_is_an_error_naming_them() {
    let mut s = String::from("x,y\n");
    for i in 0..200 {
        let x = match i {
            0 => "0x10".to_string(),
            50 => "5%".to_string(),
            60 => "NA".to_string(),
            _ => format!("{i}"),
        };
        s += &format!("{x},{i}\n");
    }
    let err = read(&s).unwrap_err().to_string();
    assert!(
        err.contains("line 2") && err.contains("'0x10'") && err.contains("line 52 '5%'"),
        "{err}"
    );
    assert!(!err.contains("'NA'"), "NA is a missing-value marker: {err}");
    // A column with mostly words is text, whatever its first cell.
    let t = read("c,y\n5,1\nred,2\nblue,3\nred,4\n").unwrap();
    assert!(matches!(
        t.columns[0].data,
        relume::data::ColumnData::Text(_)
    ));
    // Missing markers read as empty numbers.
    let t = read("x,y\n1,2\nNA,3\nnull,4\n?,5\n").unwrap();
    assert!(t.columns[0].is_missing(1) && t.columns[0].is_missing(3));
    // A text-column name that is not a column is refused.
    let err = Table::read(
        "x,y\n1,2\n".as_bytes(),
        "t.csv",
        &ReadOptions {
            text_columns: vec!["z".into()],
            ..ReadOptions::default()
        },
    )
    .unwrap_err()
    .to_string();
    assert!(err.contains("'z'") && err.contains("x, y"), "{err}");
}

#[test]
fn lists_in_messages_are_capped() {
    let names: Vec<String> = (0..250).map(|i| format!("n{i}")).collect();
    let text = list_some(&names, 10);
    assert!(text.ends_with("n9 and 240 more"), "{text}");
    assert_eq!(list_some(["a", "b"], 10), "a, b");
    // The unknown-column message lists at most 30 columns.
    let header: Vec<String> = (0..100).map(|i| format!("c{i}")).collect();
    let row: Vec<String> = (0..100).map(|i| i.to_string()).collect();
    let t = read(&format!("{}\n{}\n", header.join(","), row.join(","))).unwrap();
    let err = t.column("nope").unwrap_err().to_string();
    assert!(err.contains("and 70 more"), "{err}");
}

#[test]
fn model_files_of_version_1_still_load_and_predict_the_same() {
    // tests/data/model_v1.json was written by relume at commit bdb0fc0 (model file version 1)
    // from an 8-row table; that build predicted 8.875941089810022 for (x = 4.5, kind = a) and
    // 4.9528227945649785 for (2.5, b).
    let p = Predictor::load(Path::new("tests/data/model_v1.json")).unwrap();
    let mut scratch = p.scratch();
    let a = p
        .predict_row(&[Cell::Number(4.5), Cell::Text("a")], &mut scratch)
        .unwrap();
    let b = p
        .predict_row(&[Cell::Number(2.5), Cell::Text("b")], &mut scratch)
        .unwrap();
    // The f32 activation kernels were rewritten since (GELU now rounds differently in the last
    // bits: this build gives 8.875940885222128), so the check allows f32 rounding: 1e-6
    // relative is about 8 units in the last place of an f32.
    assert!(
        (a.value - 8.875941089810022).abs() <= 1e-6 * 8.875941089810022,
        "{}",
        a.value
    );
    assert!(
        (b.value - 4.9528227945649785).abs() <= 1e-6 * 4.9528227945649785,
        "{}",
        b.value
    );
    // An unseen level in a version-1 model (no pooled level) is flagged, not refused.
    let c = p
        .predict_row(&[Cell::Number(2.5), Cell::Text("c")], &mut scratch)
        .unwrap();
    assert!(c.unseen);
    // A newer version than this library knows is refused with a clear message.
    let text = std::fs::read_to_string("tests/data/model_v1.json")
        .unwrap()
        .replace("\"version\":1", "\"version\":99");
    let err = Model::from_json(&text).unwrap_err();
    assert!(err.contains("version 99") && err.contains("newer"), "{err}");
}

#[test]
fn prediction_reads_columns_as_the_model_was_trained() {
    // Codes that look numeric, trained as text.
    let mut s = String::from("code,x,y\n");
    for i in 0..60 {
        s += &format!("{},{i},{}\n", ["01", "02", "03"][i % 3], i + 10 * (i % 3));
    }
    let table = Table::read(
        s.as_bytes(),
        "t.csv",
        &ReadOptions {
            text_columns: vec!["code".into()],
            ..ReadOptions::default()
        },
    )
    .unwrap();
    let (model, _) = Model::fit(&table, &spec("y"), &quick(), MonitorConfig::default()).unwrap();
    assert_eq!(model.encoder.text_columns(), ["code"]);
    let fresh = Table::read(
        "code,x\n02,5\n".as_bytes(),
        "new.csv",
        &ReadOptions {
            model_text_columns: model.encoder.text_columns(),
            ..ReadOptions::default()
        },
    )
    .unwrap();
    let rows = Predictor::new(&model).predict_table(&fresh).unwrap();
    assert!(
        rows[0].value.is_some() && rows[0].error.is_none(),
        "{:?}",
        rows[0]
    );
}

#[test]
fn reading_in_chunks_gives_the_rows_of_reading_whole() {
    let mut text = String::from("a,b,y\n");
    for i in 0..30 {
        text += &format!("{i},{},{}\n", ["x", "y", "z"][i % 3], i * 2);
    }
    let whole = read(&text).unwrap();
    let mut chunks = Vec::new();
    let total = Table::read_chunks(text.as_bytes(), "t.csv", &ReadOptions::default(), 7, |t| {
        chunks.push(t);
        Ok::<(), DataError>(())
    })
    .unwrap();
    assert_eq!(total, 30);
    assert_eq!(
        chunks.iter().map(Table::rows).collect::<Vec<_>>(),
        vec![7, 7, 7, 7, 2]
    );
    let lines: Vec<u64> = chunks.iter().flat_map(|c| c.lines.clone()).collect();
    assert_eq!(lines, whole.lines);
    for (k, chunk) in chunks.iter().enumerate() {
        let rows: Vec<usize> = (7 * k..7 * k + chunk.rows()).collect();
        assert_eq!(chunk.columns, whole.select(&rows).columns, "chunk {k}");
    }
    let err = Table::read_chunks(
        "a,y\n".as_bytes(),
        "e.csv",
        &ReadOptions::default(),
        7,
        |_| Ok::<(), DataError>(()),
    )
    .unwrap_err();
    assert!(err.to_string().contains("no data rows"), "{err}");
}

#[test]
fn level_lookups_hash_with_fnv1a_as_published() {
    use std::hash::Hasher;
    // Test vectors of the 64-bit FNV-1a hash from its authors' reference test suite
    // (Fowler, Noll & Vo, test_fnv.c): "", "a" and "foobar".
    for (text, want) in [
        ("", 0xcbf2_9ce4_8422_2325_u64),
        ("a", 0xaf63_dc4c_8601_ec8c),
        ("foobar", 0x8594_4171_f739_67e8),
    ] {
        let mut h = relume::data::Fnv1a::default();
        h.write(text.as_bytes());
        assert_eq!(h.finish(), want, "{text:?}");
    }
}

/// The prediction of a one-number-column model for `x`.
fn one_number(predictor: &Predictor, x: f64) -> relume::serve::predict::RowPrediction {
    predictor
        .predict_row(&[Cell::Number(x)], &mut predictor.scratch())
        .unwrap()
}

#[test]
fn numeric_values_far_outside_the_training_range_are_held_and_still_flagged() {
    // x in [0, 9], y = 3x: with the default (0.25 of the range) a value past 9 + 2.25 = 11.25
    // reaches the network as 11.25, so x = 50 and x = 1000 predict the same bits as 11.25;
    // below the range likewise at -2.25. Both rows are flagged as extrapolated.
    let mut s = String::from("x,y\n");
    for i in 0..200 {
        let x = (i % 10) as f64;
        s += &format!("{x},{}\n", 3.0 * x);
    }
    let table = read(&s).unwrap();
    let (model, _) = Model::fit(&table, &spec("y"), &quick(), MonitorConfig::default()).unwrap();
    match &model.encoder.features[0] {
        FeatureEncoding::Number { held, .. } => assert_eq!(*held, Some((-2.25, 11.25))),
        other => panic!("{other:?}"),
    }
    assert!(note(&model.encoder, "x").what.contains("held"));
    let predictor = Predictor::new(&model);
    let at = |x: f64| one_number(&predictor, x);
    let (edge, far, farther) = (at(11.25), at(50.0), at(1000.0));
    assert_eq!(far.value.to_bits(), edge.value.to_bits());
    assert_eq!(farther.value.to_bits(), edge.value.to_bits());
    assert!(far.extrapolated && farther.extrapolated);
    assert_eq!(at(-40.0).value.to_bits(), at(-2.25).value.to_bits());
    // Within the reach the network sees the value itself.
    assert_ne!(at(10.0).value.to_bits(), edge.value.to_bits());
    // An absurd value is still refused (judged by the value given), not held.
    let err = predictor
        .predict_row(&[Cell::Number(1e300)], &mut predictor.scratch())
        .unwrap_err();
    assert_eq!(err.kind, RowErrorKind::Overflow);
    // The bounds survive saving; the table path holds the same way.
    let reloaded = Model::from_json(&model.to_json()).unwrap();
    let again = Predictor::new(&reloaded);
    let rows = again
        .predict_table(&read("x,y\n1000,0\n11.25,0\n").unwrap())
        .unwrap();
    assert_eq!(rows[0].value, Some(edge.value));
    assert_eq!(rows[1].value, Some(edge.value));
    assert_eq!(rows[0].out_of_range, vec!["x".to_string()]);

    // Off: every value reaches the network, and the file records no bounds.
    let open = EncoderSpec {
        hold_beyond: None,
        ..spec("y")
    };
    let (model, _) = Model::fit(&table, &open, &quick(), MonitorConfig::default()).unwrap();
    assert!(matches!(
        model.encoder.features[0],
        FeatureEncoding::Number { held: None, .. }
    ));
    let predictor = Predictor::new(&model);
    let at = |x: f64| one_number(&predictor, x);
    assert_ne!(at(50.0).value.to_bits(), at(11.25).value.to_bits());
    // A negative fraction is refused with the reason.
    let bad = EncoderSpec {
        hold_beyond: Some(-1.0),
        ..spec("y")
    };
    let err = Model::fit(&table, &bad, &quick(), MonitorConfig::default()).unwrap_err();
    assert!(err.to_string().contains("hold-beyond"), "{err}");
}
