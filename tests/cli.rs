//! End-to-end tests of the `relume` binary on the demo table and on bad inputs.

mod common;

use common::cli::{fails, path, relume, write};

use std::path::Path;
use std::process::{Command, Stdio};
use std::sync::OnceLock;

const DEMO: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/data/cold_store.csv");

/// Trains once on the demo table; every test that needs a model uses this one.
fn model() -> String {
    static MODEL: OnceLock<String> = OnceLock::new();
    MODEL
        .get_or_init(|| {
            let out = path("cold.json");
            let o = relume(&[
                "train",
                "--data",
                DEMO,
                "--target",
                "power_kw",
                "--out",
                &out,
                "--report",
                &path("run.json"),
                "--plot",
                &path("run.svg"),
            ]);
            let err = String::from_utf8_lossy(&o.stderr);
            assert!(o.status.success(), "{err}");
            for needle in [
                "2000 rows",
                "validation (200 rows held out of all fitting, ensemble): RMSE",
                "best epoch",
                "Cautions",
                "held-out",
            ] {
                assert!(err.contains(needle), "train output lacks '{needle}': {err}");
            }
            out
        })
        .clone()
}

#[test]
fn train_writes_the_model_report_and_chart() {
    model();
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(path("run.json")).unwrap()).unwrap();
    assert!(report["epochs"][0]["layers"][0]["dead_fraction"].is_number());
    let svg = std::fs::read_to_string(path("run.svg")).unwrap();
    assert!(svg.starts_with("<svg"));
}

#[test]
fn predict_writes_keys_prediction_and_flag_from_a_file_or_stdin() {
    let m = model();
    let out = path("pred.csv");
    let o = relume(&[
        "predict",
        "--model",
        &m,
        "--data",
        DEMO,
        "--out",
        &out,
        "--key",
        "outdoor_c,refrigerant",
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let text = std::fs::read_to_string(&out).unwrap();
    let mut lines = text.lines();
    assert_eq!(
        lines.next().unwrap(),
        "outdoor_c,refrigerant,prediction,lower,upper,extrapolated,issue"
    );
    let first: Vec<&str> = lines.next().unwrap().split(',').collect();
    assert_eq!(first[0..2], ["35.9", "hfc"]);
    // Row 1 of the demo table: 38.136 kW measured, inside the interval around the prediction.
    let number = |k: usize| first[k].parse::<f64>().unwrap();
    assert!((number(2) - 38.136).abs() < 1.5, "{first:?}");
    assert!(number(3) < number(2) && number(2) < number(4), "{first:?}");
    assert_eq!(text.lines().count(), 2001);

    let input = "outdoor_c,setpoint_c,door_openings_per_h,load_t,refrigerant\n31,-18,12,20,co2\n60,-18,12,20,co2\n31,-18,12,20,propane\n";
    let mut child = Command::new(env!("CARGO_BIN_EXE_relume"))
        .args(["predict", "--model", &m, "--data", "-"])
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    use std::io::Write;
    child
        .stdin
        .take()
        .unwrap()
        .write_all(input.as_bytes())
        .unwrap();
    let o = child.wait_with_output().unwrap();
    assert!(o.status.success());
    let text = String::from_utf8(o.stdout).unwrap();
    let rows: Vec<&str> = text.lines().collect();
    assert_eq!(rows[0], "line,prediction,lower,upper,extrapolated,issue");
    assert!(
        rows[1].starts_with("2,") && rows[1].ends_with(",false,"),
        "{}",
        rows[1]
    );
    assert!(
        rows[2].contains(",true,") && rows[2].contains("outdoor_c"),
        "{}",
        rows[2]
    );
    // An unseen category is predicted through the pooled level and flagged.
    assert!(
        !rows[3].starts_with("4,,") && rows[3].contains("not seen in training"),
        "{}",
        rows[3]
    );
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("extrapolation") && err.contains("not seen in training"),
        "{err}"
    );
}

#[test]
fn evaluate_prints_metrics_and_writes_the_agreed_json() {
    let m = model();
    let report = path("eval.json");
    let o = relume(&[
        "evaluate", "--model", &m, "--data", DEMO, "--report", &report,
    ]);
    assert!(o.status.success());
    let out = String::from_utf8_lossy(&o.stdout);
    assert!(out.contains("RMSE") && out.contains("R²"), "{out}");
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&report).unwrap()).unwrap();
    assert_eq!(json["rows"], 2000);
    // The interval's coverage on the rows, its nominal level and mean width (the demo model
    // has a 90% split-conformal interval).
    assert_eq!(json["nominal_coverage"].as_f64(), Some(0.9));
    assert!(json["coverage"].as_f64().unwrap() > 0.8);
    assert!(json["mean_interval_width"].as_f64().unwrap() > 0.0);
    for key in ["rmse", "mae", "r2"] {
        assert!(json[key].is_number(), "{key}");
    }
    assert!(json["rmse"].as_f64().unwrap() < 0.4);
}

#[test]
fn inspect_shows_layers_inputs_and_training() {
    let o = relume(&["inspect", "--model", &model()]);
    assert!(o.status.success());
    let out = String::from_utf8_lossy(&o.stdout);
    for needle in [
        "parameters",
        "affine 7 -> 64",
        "relu on 64 units",
        "outdoor_c: number, training range",
        "values held within",
        "refrigerant: one-hot over 3",
        "dead units",
    ] {
        assert!(out.contains(needle), "inspect lacks '{needle}': {out}");
    }
}

#[test]
fn help_shows_examples_and_cautions() {
    for args in [
        &["--help"][..],
        &["train", "--help"],
        &["predict", "--help"],
        &["evaluate", "--help"],
        &["inspect", "--help"],
    ] {
        let o = relume(args);
        assert!(o.status.success());
        let out = String::from_utf8_lossy(&o.stdout);
        assert!(
            out.contains("cold_store") || out.contains("cold.json"),
            "{args:?}"
        );
        if args[0] != "inspect" {
            assert!(out.contains("held-out"), "{args:?} lacks the cautions");
        }
    }
}

#[test]
fn bad_inputs_exit_2_with_a_message_naming_the_problem_and_where() {
    let out = path("never.json");
    let train = |data: &str, target: &str| {
        fails(&["train", "--data", data, "--target", target, "--out", &out])
    };
    let err = train(DEMO, "energy");
    assert!(
        err.contains("no column named 'energy'") && err.contains("power_kw"),
        "{err}"
    );
    let bad_flag = |flag: &str, value: &str| {
        fails(&[
            "train", "--data", DEMO, "--target", "power_kw", "--out", &out, flag, value,
        ])
    };
    let err = bad_flag("--threads", "0");
    assert!(err.contains("--threads"), "{err}");
    let err = bad_flag("--hold-beyond", "-1");
    assert!(
        err.contains("--hold-beyond") && err.contains("'off'"),
        "{err}"
    );
    let o = Command::new(env!("CARGO_BIN_EXE_relume"))
        .args(["inspect", "--model", &out])
        .env("RELUME_THREADS", "two")
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{err}");
    assert!(err.contains("RELUME_THREADS"), "{err}");
    let ragged = write("ragged.csv", "a,b,y\n1,2,3\n4,5\n");
    let err = train(&ragged, "y");
    assert!(
        err.contains("ragged.csv") && err.contains("line 3"),
        "{err}"
    );
    // One word among 30 numbers: a damaged numeric column (typing uses every value of the
    // first 1000 rows), not a text column.
    let mut damaged = String::from("a,b,y\n1,2,3\n4,five,6\n");
    for i in 0..28 {
        damaged += &format!("{i},{},{}\n", i * 2, i * 3);
    }
    let text = write("text.csv", &damaged);
    let err = train(&text, "y");
    assert!(
        err.contains("text.csv")
            && err.contains("line 3")
            && err.contains("'b'")
            && err.contains("'five'"),
        "{err}"
    );
    let empty = write("empty.csv", "");
    let err = train(&empty, "y");
    assert!(err.contains("empty.csv") && err.contains("empty"), "{err}");
    let err = train(&path("absent.csv"), "y");
    assert!(
        err.contains("absent.csv") && err.contains("cannot open"),
        "{err}"
    );
    let err = bad_flag("--speed", "11");
    assert!(err.contains("--speed"), "{err}");
    let err = bad_flag("--activation", "relu9");
    assert!(err.contains("relu9"), "{err}");
    let broken = write(
        "broken.json",
        "{\"format\": \"relume-model\", \"version\": 1, \"encoder\": [",
    );
    let err = fails(&["predict", "--model", &broken, "--data", DEMO]);
    assert!(
        err.contains("broken.json") && err.contains("line 1"),
        "{err}"
    );
    let err = fails(&["inspect", "--model", &broken]);
    assert!(err.contains("broken.json"), "{err}");
    assert!(!Path::new(&out).exists(), "nothing is written on failure");
}

#[test]
fn compare_writes_table_report_and_chart_and_shards_merge() {
    let mut csv = String::from("x,kind,y\n");
    for i in 0..120 {
        let x = i as f64 / 12.0;
        csv += &format!("{x},{},{}\n", ["a", "b"][i % 2], x.sin() + (i % 2) as f64);
    }
    let data = write("cmp.csv", &csv);
    let common = [
        "--data",
        data.as_str(),
        "--target",
        "y",
        "--activations",
        "relu,tanh",
        "--seeds",
        "3",
        "--layers",
        "8",
        "--epochs",
        "60",
    ];
    let (md, svg, json) = (path("cmp.md"), path("cmp.svg"), path("cmp.json"));
    let mut args = vec!["compare"];
    args.extend(common);
    args.extend([
        "--table",
        md.as_str(),
        "--plot",
        svg.as_str(),
        "--report",
        json.as_str(),
    ]);
    let o = relume(&args);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let table = std::fs::read_to_string(&md).unwrap();
    assert!(table.contains("| candidate |") && table.contains("relu") && table.contains("tanh"));
    assert!(table.contains("best mean validation RMSE"));
    assert!(std::fs::read_to_string(&svg).unwrap().starts_with("<svg"));
    let mut parts = Vec::new();
    for i in 0..3 {
        let part = path(&format!("part{i}.json"));
        let shard = format!("{i}/3");
        let mut args = vec!["compare"];
        args.extend(common);
        args.extend(["--shard", shard.as_str(), "--report", part.as_str()]);
        assert!(relume(&args).status.success());
        parts.push(part);
    }
    let merged = path("merged.md");
    let list = parts.join(",");
    let o = relume(&["merge", "--reports", &list, "--table", &merged]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    // Same runs, same table except the wall and CPU times.
    let strip = |t: &str| -> Vec<String> {
        t.lines()
            .map(|l| {
                l.split('|')
                    .enumerate()
                    .filter(|(k, _)| !matches!(k, 9 | 10))
                    .map(|(_, c)| c.to_string())
                    .collect::<Vec<_>>()
                    .join("|")
            })
            .collect()
    };
    assert_eq!(
        strip(&std::fs::read_to_string(&merged).unwrap()),
        strip(&table)
    );
    let err = fails(&["merge", "--reports", &parts[..2].join(",")]);
    assert!(err.contains("missing"), "{err}");
    let mut bad = vec!["compare"];
    bad.extend(common);
    bad.extend(["--shard", "3/3"]);
    let err = fails(&bad);
    assert!(err.contains("3/3"), "{err}");
}

/// Debug forms of Rust values that must never reach a user (issue: our own words).
const DEBUG_FORMS: [&str; 12] = [
    "Some(",
    "None",
    " { ",
    "EarlyStop",
    "EpochLimit",
    "NoProgress",
    "draw:",
    "fan:",
    "Normal",
    "Uniform",
    "Lbfgs",
    "[64, 64]",
];

fn assert_plain(what: &str, text: &str) {
    for form in DEBUG_FORMS {
        assert!(
            !text.contains(form),
            "{what} shows a debug form '{form}':\n{text}"
        );
    }
}

#[test]
fn no_screen_shows_a_debug_form() {
    // Written before this change, `train` and `inspect` printed "stopped: EarlyStop" and
    // "initialized He { draw: Normal, fan: In, slope: 0.0 }".
    let m = model();
    let o = relume(&["inspect", "--model", &m]);
    assert!(o.status.success());
    let inspect = String::from_utf8_lossy(&o.stdout).to_string();
    assert!(
        inspect.contains("initialized he") && inspect.contains("stopped early"),
        "{inspect}"
    );
    assert_plain("inspect", &inspect);
    let o = relume(&["evaluate", "--model", &m, "--data", DEMO]);
    assert_plain("evaluate", &String::from_utf8_lossy(&o.stdout));
    // A small table through train and compare (and the tiny-table L-BFGS path).
    let mut csv = String::from("x,kind,y\n");
    for i in 0..60 {
        csv += &format!("{},{},{}\n", i % 7, ["a", "b"][i % 2], (i % 7) * 2 + i % 2);
    }
    let data = write("plain.csv", &csv);
    let o = relume(&[
        "train",
        "--data",
        &data,
        "--target",
        "y",
        "--out",
        &path("plain.json"),
        "--members",
        "2",
    ]);
    let train = String::from_utf8_lossy(&o.stderr).to_string();
    assert!(o.status.success(), "{train}");
    assert_plain("train", &train);
    let table = path("plain.md");
    let o = relume(&[
        "compare",
        "--data",
        &data,
        "--target",
        "y",
        "--activations",
        "relu,tanh",
        "--seeds",
        "2",
        "--epochs",
        "30",
        "--table",
        &table,
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert_plain("compare", &String::from_utf8_lossy(&o.stderr));
    assert_plain("compare", &String::from_utf8_lossy(&o.stdout));
    assert_plain("compare table", &std::fs::read_to_string(&table).unwrap());
}

#[test]
fn printed_predictions_read_back_to_the_f32_the_model_produced() {
    // Written before this change, predict printed 15-16 digits of an f64 (38.4831616806148).
    let m = model();
    let out = path("roundtrip.csv");
    let o = relume(&["predict", "--model", &m, "--data", DEMO, "--out", &out]);
    assert!(o.status.success());
    let predictor = relume::Predictor::load(Path::new(&m)).unwrap();
    let table = relume::Table::read_path(Path::new(DEMO), &Default::default()).unwrap();
    let rows = predictor.predict_table(&table).unwrap();
    let text = std::fs::read_to_string(&out).unwrap();
    for (line, row) in text.lines().skip(1).zip(&rows) {
        let fields: Vec<&str> = line.split(',').collect();
        let printed: f32 = fields[1].parse().unwrap();
        assert_eq!(printed, row.value.unwrap() as f32, "{line}");
        assert!(fields[1].len() <= 10, "not the shortest form: {line}");
        assert_eq!(fields[2].parse::<f32>().unwrap(), row.lower.unwrap() as f32);
    }
}
