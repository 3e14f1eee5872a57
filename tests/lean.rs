//! A predict-only service builds without the default features, pulls in no argument parser,
//! progress bar, CSV reader or thread pool, and predicts the same bits as the full build
//! (examples/lean-service).

use relume::fit::monitor::MonitorConfig;
use relume::serve::predict::Cell;
use relume::{EncoderSpec, Model, Predictor, Recipe, Table};
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

const ROOT: &str = env!("CARGO_MANIFEST_DIR");
const DEMO: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/data/cold_store.csv");

fn cargo() -> Command {
    Command::new(std::env::var("CARGO").unwrap_or_else(|_| "cargo".to_string()))
}

#[test]
fn the_library_without_default_features_pulls_no_command_or_table_crates() {
    let o = cargo()
        .args([
            "tree",
            "-e",
            "normal",
            "--no-default-features",
            "--prefix",
            "none",
            "--manifest-path",
        ])
        .arg(Path::new(ROOT).join("Cargo.toml"))
        .output()
        .unwrap();
    let tree = String::from_utf8_lossy(&o.stdout);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    for name in ["clap ", "indicatif ", "csv ", "rayon "] {
        assert!(
            !tree.lines().any(|l| l.starts_with(name)),
            "{name}in the lean tree:\n{tree}"
        );
    }
    assert!(tree.lines().any(|l| l.starts_with("ndarray ")), "{tree}");
}

#[test]
fn a_lean_build_predicts_the_same_bits_as_the_full_build() {
    // A small model from the demo table, trained and saved by the full build.
    let table = Table::read_path(Path::new(DEMO), &Default::default()).unwrap();
    let rows: Vec<usize> = (0..400).collect();
    let table = table.select(&rows);
    let spec = EncoderSpec {
        target: "power_kw".into(),
        ..EncoderSpec::default()
    };
    let recipe = Recipe {
        members: 2,
        hidden: vec![16, 16],
        ..Recipe::default()
    };
    let (model, _) = Model::fit(&table, &spec, &recipe, MonitorConfig::default()).unwrap();
    let dir = std::env::temp_dir().join(format!("relume-lean-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let file = dir.join("model.json");
    model.save(&file).unwrap();

    // The same rows through the full build's predictor.
    let predictor = Predictor::load(&file).unwrap();
    let mut scratch = predictor.scratch();
    let names: Vec<String> = predictor
        .feature_names()
        .iter()
        .map(|s| s.to_string())
        .collect();
    let mut input = String::new();
    let mut expected = Vec::new();
    for r in 0..50 {
        let texts: Vec<String> = names
            .iter()
            .map(|n| match &table.column(n).unwrap().data {
                relume::data::ColumnData::Number(v) => format!("{}", v[r]),
                relume::data::ColumnData::Text(v) => v[r].clone().unwrap_or_default(),
            })
            .collect();
        input += &texts.join(",");
        input.push('\n');
        let cells: Vec<Cell<'_>> = texts
            .iter()
            .map(|t| match t.parse::<f64>() {
                Ok(v) => Cell::Number(v),
                Err(_) => Cell::Text(t),
            })
            .collect();
        let p = predictor.predict_row(&cells, &mut scratch).unwrap();
        expected.push(format!("{:016x}", p.value.to_bits()));
    }

    // The lean build, in its own target folder beside ours.
    let target: PathBuf = Path::new(ROOT).join("target").join("lean-service");
    let build = cargo()
        .args(["build", "--release", "--quiet", "--manifest-path"])
        .arg(Path::new(ROOT).join("examples/lean-service/Cargo.toml"))
        .arg("--target-dir")
        .arg(&target)
        .output()
        .unwrap();
    assert!(
        build.status.success(),
        "{}",
        String::from_utf8_lossy(&build.stderr)
    );
    let mut child = Command::new(target.join("release/lean-service"))
        .arg(&file)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .spawn()
        .unwrap();
    child
        .stdin
        .take()
        .unwrap()
        .write_all(input.as_bytes())
        .unwrap();
    let out = child.wait_with_output().unwrap();
    assert!(out.status.success());
    let got: Vec<String> = String::from_utf8_lossy(&out.stdout)
        .lines()
        .map(str::to_string)
        .collect();
    assert_eq!(got, expected);
}
