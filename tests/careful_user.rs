//! One test per defect a careful new user met in the command (column typing, stored types,
//! sizes, output paths, ignored options, small things, results to flag), each on a small table
//! made here. Every test failed on the command as it was when the defects were reported
//! (commit bdb0fc0): run with `RELUME_TEST_BIN=<path of an older relume>` to see that.

mod common;

use common::cli::{bin, dir, fails, ok, path, relume, stderr, write};

use std::path::Path;
use std::process::{Command, Stdio};

/// `rows` rows of a, b (numbers) and y = 2a − b + 0.1·(row mod 7), with `first` as the first
/// data row's text for column a when given.
fn numbers(rows: usize, first_a: Option<&str>) -> String {
    let mut text = String::from("a,b,y\n");
    for i in 0..rows {
        let a = (i as f64 * 0.37).sin();
        let b = (i as f64 * 0.11).cos();
        let y = 2.0 * a - b + 0.1 * (i % 7) as f64;
        match (i, first_a) {
            (0, Some(cell)) => text += &format!("{cell},{b:.4},{y:.4}\n"),
            _ => text += &format!("{a:.4},{b:.4},{y:.4}\n"),
        }
    }
    text
}

const FAST: [&str; 2] = ["--epochs", "30"];

fn train(data: &str, out: &str, extra: &[&str]) -> Vec<String> {
    let mut args: Vec<String> = ["train", "--data", data, "--target", "y", "--out", out]
        .iter()
        .map(|s| s.to_string())
        .collect();
    args.extend(FAST.iter().map(|s| s.to_string()));
    args.extend(extra.iter().map(|s| s.to_string()));
    args
}

#[test]
fn one_odd_cell_in_the_first_row_does_not_make_a_numeric_column_text() {
    // Before: `0x10` in the first data row turned the column into text; a later line was
    // blamed with every training value listed.
    for odd in ["0x10", "5%", "none!"] {
        let data = write("first_row.csv", &numbers(200, Some(odd)));
        let o = relume(&train(&data, &path("never.json"), &[]));
        let err = stderr(&o);
        assert_eq!(o.status.code(), Some(2), "{odd}: {err}");
        assert!(
            err.contains("line 2") && err.contains(&format!("'{odd}'")) && err.contains("'a'"),
            "{odd}: {err}"
        );
        assert!(
            err.len() < 600,
            "the message stays short: {} bytes",
            err.len()
        );
    }
}

#[test]
fn decimal_commas_and_thousands_separators_are_read_as_numbers() {
    // Before: "0,5" and "6,520" made text columns, one-hot encoding the numbers.
    let mut text = String::from("a,b,y\n");
    for i in 0..120 {
        let a = format!("\"{},{}\"", i % 10, (i * 7) % 10);
        let b = format!("\"{},{:03}.5\"", 1 + i % 9, (i * 37) % 1000);
        text += &format!("{a},{b},{}\n", i % 13);
    }
    let data = write("commas.csv", &text);
    let model = path("commas.json");
    let (_, err) = ok(&train(&data, &model, &[]));
    assert!(!err.contains("one-hot") && !err.contains("levels"), "{err}");
    let (inspect, _) = ok(&["inspect", "--model", &model]);
    assert!(
        inspect.contains("a: number") && inspect.contains("b: number"),
        "{inspect}"
    ); // Ambiguous ('1,000' alone could be either): refused, naming the option that decides.
    let ambiguous = write(
        "ambiguous.csv",
        "a,b,y\n\"1,000\",1,2\n\"2,500\",2,3\n\"3,250\",3,4\n",
    );
    let err = fails(&train(&ambiguous, &path("amb.json"), &[]));
    assert!(err.contains("--decimal-comma"), "{err}");
}

#[test]
fn predict_and_evaluate_read_columns_with_the_types_stored_in_the_model() {
    // Before: a model trained with --text-columns code predicted nothing (exit 0) unless the
    // flag was repeated, and evaluate said only "no row could be evaluated".
    let mut text = String::from("code,a,y\n");
    for i in 0..150 {
        let code = ["101", "202", "303"][i % 3];
        let a = (i as f64 * 0.3).sin();
        text += &format!("{code},{a:.4},{}\n", (i % 3) as f64 + a);
    }
    let data = write("codes.csv", &text);
    let model = path("codes.json");
    let o = relume(&train(&data, &model, &["--text-columns", "code"]));
    assert!(o.status.success(), "{}", stderr(&o));
    let pred = path("codes_pred.csv");
    ok(&[
        "predict", "--model", &model, "--data", &data, "--out", &pred,
    ]);
    let written = std::fs::read_to_string(&pred).unwrap();
    assert!(
        !written.contains("must be a category"),
        "{}",
        &written[..300.min(written.len())]
    );
    let (out, _) = ok(&["evaluate", "--model", &model, "--data", &data]);
    assert!(out.contains("rows      150"), "{out}");
}

#[test]
fn sizes_the_loader_would_refuse_are_refused_before_anything_is_allocated() {
    // Before: --layers 70000 wrote a model inspect refused; --layers 100000,100000 aborted on
    // a 40 GB allocation (exit 134).
    let data = write("sizes.csv", &numbers(60, None));
    for layers in ["70000", "100000,100000", "12000,12000"] {
        let out = path("huge.json");
        let o = relume(&train(&data, &out, &["--layers", layers]));
        let err = stderr(&o);
        assert_eq!(o.status.code(), Some(2), "{layers}: {err}");
        assert!(
            err.contains("--layers") || err.contains("parameters"),
            "{err}"
        );
        assert!(!Path::new(&out).exists());
    }
}

#[test]
fn output_paths_are_checked_before_training() {
    // Before: a missing folder, a folder, or an unwritable report was found after training.
    let data = write("paths.csv", &numbers(60, None));
    let folder = dir().join("a_folder");
    std::fs::create_dir_all(&folder).unwrap();
    let cases = [
        ("--out", path("no/such/folder/m.json")),
        ("--out", folder.display().to_string()),
        ("--out", format!("{}/", path("m_slash.json"))),
        ("--report", path("missing_dir/run.json")),
        ("--plot", folder.display().to_string()),
    ];
    for (option, target) in cases {
        let mut args = train(&data, &path("ok_model.json"), &[]);
        if option == "--out" {
            let k = args.iter().position(|a| a == "--out").unwrap();
            args[k + 1] = target.clone();
        } else {
            args.extend([option.to_string(), target.clone()]);
        }
        let o = relume(&args);
        let err = stderr(&o);
        assert_eq!(o.status.code(), Some(2), "{option} {target}: {err}");
        assert!(err.contains(option), "{option}: {err}");
        assert!(!err.contains("trained"), "refused before training: {err}");
    }
}

#[test]
fn options_that_would_be_ignored_are_refused() {
    // Before: --lr under L-BFGS changed nothing, an unknown --text-columns name was ignored
    // and --features a,a,b encoded a twice, each with exit 0.
    let data = write("ignored.csv", &numbers(200, None));
    let out = path("ignored.json");
    let err = fails(&train(&data, &out, &["--lr", "0.5"]));
    assert!(err.contains("--lr") && err.contains("L-BFGS"), "{err}");
    let err = fails(&train(&data, &out, &["--text-columns", "colour"]));
    assert!(err.contains("'colour'") && err.contains("a, b, y"), "{err}");
    let err = fails(&train(&data, &out, &["--features", "a,a,b"]));
    assert!(err.contains("'a'") && err.contains("twice"), "{err}");
    assert!(!Path::new(&out).exists());
}

#[test]
fn negative_numbers_parse_and_get_the_range_message() {
    // Before: `--val-frac -0.1` gave the parser's "unexpected argument '-0'".
    let data = write("negative.csv", &numbers(60, None));
    for (option, value) in [("--val-frac", "-0.1"), ("--l2", "-1"), ("--lr", "-0.01")] {
        let mut args = train(&data, &path("neg.json"), &[option, value]);
        args.extend(["--optimizer".to_string(), "adam".to_string()]);
        let o = relume(&args);
        let err = stderr(&o);
        assert_eq!(o.status.code(), Some(2), "{option}: {err}");
        assert!(!err.contains("unexpected argument"), "{option}: {err}");
    }
}

#[test]
fn inspect_into_a_closed_pipe_ends_quietly() {
    // Before: a reader that stops early (`relume inspect | head -1`) made inspect panic.
    let data = write("pipe.csv", &numbers(120, None));
    let model = path("pipe.json");
    assert!(relume(&train(&data, &model, &[])).status.success());
    let mut child = Command::new(bin())
        .args(["inspect", "--model", &model])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    drop(child.stdout.take()); // close the reading end at once
    let o = child.wait_with_output().unwrap();
    let err = stderr(&o);
    assert_eq!(o.status.code(), Some(0), "{err}");
    assert!(
        !err.contains("panicked") && !err.contains("internal"),
        "{err}"
    );
}

#[test]
fn advice_and_help_name_options_that_exist_and_defaults_that_hold() {
    // Before: the divergence advice named `clip_norm`, no option of the command, and --help
    // said GELU up to 1000 rows although --optimizer adam picks ReLU.
    let (help, _) = ok(&["train", "--help"]);
    assert!(help.contains("--clip-norm"), "{help}");
    let advice = relume::fit::train::TrainError::Diverged {
        epoch: 3,
        step: None,
        location: "hidden layer 1".into(),
        rollbacks: 8,
        lr: 1e-6,
    }
    .to_string();
    assert!(advice.contains("--clip-norm"), "{advice}");
    let data = write("help_default.csv", &numbers(200, None));
    let (_, err) = ok(&train(&data, &path("adam.json"), &["--optimizer", "adam"]));
    assert!(err.contains("relu, adam optimizer"), "{err}");
    assert!(
        help.contains("gelu when L-BFGS trains") && help.contains("relu for every other"),
        "{help}"
    );
}

#[test]
fn separators_encodings_and_quotes_get_a_hint() {
    // Before: a semicolon file got "no column named 'y'; the columns are: a;b;y", invalid UTF-8
    // no hint to re-encode, and an unterminated quote a field count.
    let semi = write("semi.csv", &numbers(120, None).replace(',', ";"));
    assert!(relume(&train(&semi, &path("semi.json"), &[]))
        .status
        .success());
    let tab = write("tab.csv", &numbers(120, None).replace(',', "\t"));
    assert!(relume(&train(&tab, &path("tab.json"), &[]))
        .status
        .success());
    let forced = relume(&train(
        &semi,
        &path("forced.json"),
        &["--separator", "comma"],
    ));
    let err = stderr(&forced);
    assert_eq!(forced.status.code(), Some(2), "{err}");
    assert!(err.contains("separator"), "{err}");
    let mut bytes = b"a,b,y\n1,2,3\n".to_vec();
    bytes.extend_from_slice(b"4,\xff\xfe,6\n");
    let latin = path("latin.csv");
    std::fs::write(&latin, bytes).unwrap();
    let err = fails(&train(&latin, &path("latin.json"), &[]));
    assert!(err.contains("UTF-8") && err.contains("line 3"), "{err}");
    let quote = write("quote.csv", "a,b,y\n1,2,3\n4,\"5,6\n7,8,9\n");
    let err = fails(&train(&quote, &path("quote.json"), &[]));
    assert!(err.contains("quote") && err.contains("line 3"), "{err}");
}

#[test]
fn results_a_careful_analyst_would_flag_are_flagged() {
    // Before: a validation R² below 0 and a run on 2 training rows were written without a
    // word.
    let mut noise = String::from("a,b,y\n");
    for i in 0..120u64 {
        // y does not depend on a or b: a hash of the row number (our own formula).
        let h = i.wrapping_mul(0x9E37_79B9_7F4A_7C15) >> 40;
        noise += &format!("{},{},{}\n", (i * 13) % 17, (i * 7) % 11, h % 1000);
    }
    let data = write("noise.csv", &noise);
    let (_, err) = ok(&train(&data, &path("noise.json"), &["--layers", "64,64"]));
    assert!(err.contains("R²") && err.contains("warning"), "{err}");
    let (_, err) = ok(&train(&data, &path("few.json"), &["--val-frac", "0.9"]));
    assert!(err.contains("only 12 training rows"), "{err}");
}

#[test]
#[cfg(unix)]
fn an_output_that_is_a_named_pipe_is_written_into_not_replaced() {
    // Before: `--out /dev/null` (or a named pipe) got a temporary file renamed over it, which,
    // run as root, replaced the /dev/null device with a regular file.
    use std::io::Read;
    use std::os::unix::fs::FileTypeExt;
    let data = write("fifo.csv", &numbers(120, None));
    let model = path("fifo.json");
    assert!(relume(&train(&data, &model, &[])).status.success());
    let fifo = path("fifo.out");
    let _ = std::fs::remove_file(&fifo);
    assert!(Command::new("mkfifo")
        .arg(&fifo)
        .status()
        .unwrap()
        .success());
    let reader = {
        let fifo = fifo.clone();
        std::thread::spawn(move || {
            let mut text = String::new();
            std::fs::File::open(&fifo)
                .unwrap()
                .read_to_string(&mut text)
                .unwrap();
            text
        })
    };
    let o = relume(&[
        "predict", "--model", &model, "--data", &data, "--out", &fifo,
    ]);
    let err = stderr(&o);
    assert!(o.status.success(), "{err}");
    assert!(std::fs::metadata(&fifo).unwrap().file_type().is_fifo());
    let text = reader.join().unwrap();
    assert_eq!(text.lines().count(), 121, "{text}");
}
