//! Sharded sweeps: `--shard auto` from every scheduler environment form, merged shards equal to
//! the unsharded run, reruns, duplicates, and the commands that finish an incomplete sweep.
//!
//! The Slurm variables and the array forms (`--array=0-15:4` is the ids 0, 4, 8, 12; lists such
//! as `--array=0,6,16-32`) are those of the sbatch manual page of Slurm 22.05 (the Debian 12
//! package), "OUTPUT ENVIRONMENT VARIABLES" and `--array`; `.ci/slurm-check` runs the same
//! mapping under a real Slurm. `JOB_COMPLETION_INDEX` (0 to completions − 1, no count) is the
//! Kubernetes Job documentation's "Indexed completion mode", from memory.

use relume::data::{EncoderSpec, ReadOptions, Table};
use relume::sweep::compare::{merge, run, MergeError, RunResult, SweepPlan, SweepReport};
use relume::sweep::shard::{from_environment, resolve, Invocation};
use relume::{Activation, Overrides};
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn env<'a>(pairs: &'a [(&'a str, &'a str)]) -> impl Fn(&str) -> Option<String> + 'a {
    move |name| {
        pairs
            .iter()
            .find(|(k, _)| *k == name)
            .map(|(_, v)| v.to_string())
    }
}

/// (index, count) of `--shard auto` under these variables.
fn auto(pairs: &[(&str, &str)]) -> Result<(usize, usize), String> {
    from_environment(env(pairs)).map(|s| (s.index, s.count))
}

fn refused(pairs: &[(&str, &str)]) -> String {
    match auto(pairs) {
        Ok(s) => panic!("{pairs:?} gave {s:?}, expected an error"),
        Err(e) => e,
    }
}

#[test]
fn slurm_array_forms() {
    // --array=0-3: the ids are the indices.
    let zero = [
        ("SLURM_ARRAY_TASK_ID", "2"),
        ("SLURM_ARRAY_TASK_COUNT", "4"),
        ("SLURM_ARRAY_TASK_MIN", "0"),
        ("SLURM_ARRAY_TASK_MAX", "3"),
    ];
    assert_eq!(auto(&zero), Ok((2, 4)));
    // Only the id and the count: the ids start at 0.
    let bare = [
        ("SLURM_ARRAY_TASK_ID", "3"),
        ("SLURM_ARRAY_TASK_COUNT", "4"),
    ];
    assert_eq!(auto(&bare), Ok((3, 4)));
    // --array=1-4, from the count or from the id range alone.
    assert_eq!(
        auto(&[
            ("SLURM_ARRAY_TASK_ID", "1"),
            ("SLURM_ARRAY_TASK_COUNT", "4"),
            ("SLURM_ARRAY_TASK_MIN", "1"),
            ("SLURM_ARRAY_TASK_MAX", "4"),
        ]),
        Ok((0, 4))
    );
    let range = [
        ("SLURM_ARRAY_TASK_ID", "4"),
        ("SLURM_ARRAY_TASK_MIN", "1"),
        ("SLURM_ARRAY_TASK_MAX", "4"),
    ];
    assert_eq!(auto(&range), Ok((3, 4)));
    // --array=100-106 with the count and the minimum.
    assert_eq!(
        auto(&[
            ("SLURM_ARRAY_TASK_ID", "105"),
            ("SLURM_ARRAY_TASK_COUNT", "7"),
            ("SLURM_ARRAY_TASK_MIN", "100"),
        ]),
        Ok((5, 7))
    );
    // --array=0-15:4 is the ids 0, 4, 8, 12 (sbatch manual): id 8 is the third of four.
    let stepped = [
        ("SLURM_ARRAY_TASK_ID", "8"),
        ("SLURM_ARRAY_TASK_COUNT", "4"),
        ("SLURM_ARRAY_TASK_MIN", "0"),
        ("SLURM_ARRAY_TASK_MAX", "12"),
        ("SLURM_ARRAY_TASK_STEP", "4"),
    ];
    assert_eq!(auto(&stepped), Ok((2, 4)));
    // Our own count variable, when it agrees or is the only count.
    assert_eq!(
        auto(&[
            ("SLURM_ARRAY_TASK_ID", "2"),
            ("SLURM_ARRAY_TASK_COUNT", "3"),
            ("RELUME_SHARD_COUNT", "3")
        ]),
        Ok((2, 3))
    );
    assert_eq!(
        auto(&[("SLURM_ARRAY_TASK_ID", "1"), ("RELUME_SHARD_COUNT", "2")]),
        Ok((1, 2))
    );
    let s = from_environment(env(&range)).unwrap();
    assert_eq!(s.source, "Slurm array task 4 of --array=1-4");
    let s = from_environment(env(&stepped)).unwrap();
    assert_eq!(s.source, "Slurm array task 8 of --array=0-12:4");
}

#[test]
fn slurm_array_errors_say_what_is_missing_or_wrong() {
    let e = refused(&[("SLURM_ARRAY_TASK_ID", "3")]);
    assert!(
        e.contains("SLURM_ARRAY_TASK_ID=3 is set but not the array's size")
            && e.contains("SLURM_ARRAY_TASK_COUNT")
            && e.contains("SLURM_ARRAY_TASK_MIN and SLURM_ARRAY_TASK_MAX"),
        "{e}"
    );
    // A maximum without a minimum is not a size either.
    let e = refused(&[("SLURM_ARRAY_TASK_ID", "3"), ("SLURM_ARRAY_TASK_MAX", "4")]);
    assert!(e.contains("not the array's size"), "{e}");
    let e = refused(&[
        ("SLURM_ARRAY_TASK_ID", "x1"),
        ("SLURM_ARRAY_TASK_COUNT", "4"),
    ]);
    assert!(
        e.contains("SLURM_ARRAY_TASK_ID='x1': expected a whole number"),
        "{e}"
    );
    let e = refused(&[
        ("SLURM_ARRAY_TASK_ID", "1"),
        ("SLURM_ARRAY_TASK_COUNT", "-4"),
    ]);
    assert!(e.contains("SLURM_ARRAY_TASK_COUNT='-4'"), "{e}");
    // --array=0,6,16-32 (sbatch manual): 19 ids that are no evenly spaced range.
    let e = refused(&[
        ("SLURM_ARRAY_TASK_ID", "6"),
        ("SLURM_ARRAY_TASK_COUNT", "19"),
        ("SLURM_ARRAY_TASK_MIN", "0"),
        ("SLURM_ARRAY_TASK_MAX", "32"),
    ]);
    assert!(e.contains("not an evenly spaced range"), "{e}");
    // Ids above 0 without the minimum: cannot tell where they start.
    let e = refused(&[
        ("SLURM_ARRAY_TASK_ID", "4"),
        ("SLURM_ARRAY_TASK_COUNT", "4"),
    ]);
    assert!(e.contains("SLURM_ARRAY_TASK_MIN is not set"), "{e}");
    // An id below the minimum, off the step, or a bad step.
    let e = refused(&[
        ("SLURM_ARRAY_TASK_ID", "0"),
        ("SLURM_ARRAY_TASK_MIN", "1"),
        ("SLURM_ARRAY_TASK_MAX", "4"),
    ]);
    assert!(e.contains("SLURM_ARRAY_TASK_ID=0 is not one of"), "{e}");
    let e = refused(&[
        ("SLURM_ARRAY_TASK_ID", "6"),
        ("SLURM_ARRAY_TASK_MIN", "0"),
        ("SLURM_ARRAY_TASK_MAX", "12"),
        ("SLURM_ARRAY_TASK_STEP", "4"),
    ]);
    assert!(e.contains("in steps of 4"), "{e}");
    let e = refused(&[
        ("SLURM_ARRAY_TASK_ID", "0"),
        ("SLURM_ARRAY_TASK_COUNT", "2"),
        ("SLURM_ARRAY_TASK_STEP", "0"),
    ]);
    assert!(e.contains("SLURM_ARRAY_TASK_STEP=0"), "{e}");
    let e = refused(&[
        ("SLURM_ARRAY_TASK_ID", "2"),
        ("SLURM_ARRAY_TASK_MIN", "4"),
        ("SLURM_ARRAY_TASK_MAX", "2"),
    ]);
    assert!(e.contains("below SLURM_ARRAY_TASK_MIN"), "{e}");
    let e = refused(&[
        ("SLURM_ARRAY_TASK_ID", "0"),
        ("SLURM_ARRAY_TASK_COUNT", "0"),
    ]);
    assert!(e.contains("0 tasks"), "{e}");
    // Our count variable disagreeing with Slurm's.
    let e = refused(&[
        ("SLURM_ARRAY_TASK_ID", "1"),
        ("SLURM_ARRAY_TASK_COUNT", "4"),
        ("RELUME_SHARD_COUNT", "3"),
    ]);
    assert!(
        e.contains("RELUME_SHARD_COUNT=3 but the Slurm array has 4 tasks"),
        "{e}"
    );
}

#[test]
fn kubernetes_indexed_job_forms_and_errors() {
    let ok = [("JOB_COMPLETION_INDEX", "0"), ("RELUME_SHARD_COUNT", "5")];
    assert_eq!(auto(&ok), Ok((0, 5)));
    assert_eq!(
        auto(&[("JOB_COMPLETION_INDEX", "4"), ("RELUME_SHARD_COUNT", " 5 ")]),
        Ok((4, 5))
    );
    let e = refused(&[("JOB_COMPLETION_INDEX", "2")]);
    assert!(
        e.contains("JOB_COMPLETION_INDEX=2 is set")
            && e.contains("not the shard count: set RELUME_SHARD_COUNT"),
        "{e}"
    );
    let e = refused(&[("JOB_COMPLETION_INDEX", "2"), ("RELUME_SHARD_COUNT", "")]);
    assert!(
        e.contains("set RELUME_SHARD_COUNT"),
        "an empty count is no count: {e}"
    );
    let e = refused(&[("JOB_COMPLETION_INDEX", "5"), ("RELUME_SHARD_COUNT", "5")]);
    assert!(e.contains("not below RELUME_SHARD_COUNT=5"), "{e}");
    let e = refused(&[("JOB_COMPLETION_INDEX", "0"), ("RELUME_SHARD_COUNT", "0")]);
    assert!(e.contains("not below RELUME_SHARD_COUNT=0"), "{e}");
    let e = refused(&[("JOB_COMPLETION_INDEX", "two"), ("RELUME_SHARD_COUNT", "5")]);
    assert!(e.contains("JOB_COMPLETION_INDEX='two'"), "{e}");
    let e = refused(&[
        ("JOB_COMPLETION_INDEX", "1"),
        ("RELUME_SHARD_COUNT", "many"),
    ]);
    assert!(e.contains("RELUME_SHARD_COUNT='many'"), "{e}");
}

#[test]
fn no_index_or_two_indices_are_refused_and_i_of_n_still_works() {
    for pairs in [
        &[][..],
        &[("RELUME_SHARD_COUNT", "4")][..],
        &[
            ("SLURM_ARRAY_TASK_ID", " "),
            ("SLURM_ARRAY_TASK_COUNT", "4"),
        ][..],
    ] {
        let e = refused(pairs);
        assert!(
            e.contains("no shard index in the environment")
                && e.contains("SLURM_ARRAY_TASK_ID")
                && e.contains("JOB_COMPLETION_INDEX"),
            "{e}"
        );
    }
    let e = refused(&[
        ("SLURM_ARRAY_TASK_ID", "1"),
        ("SLURM_ARRAY_TASK_COUNT", "2"),
        ("JOB_COMPLETION_INDEX", "0"),
        ("RELUME_SHARD_COUNT", "2"),
    ]);
    assert!(e.contains("ambiguous"), "{e}");
    let none = env(&[]);
    let s = resolve("2/5", &none).unwrap();
    assert_eq!((s.index, s.count), (2, 5));
    for bad in ["5/5", "0/0", "x/2", "2", "-1/3", "automatic"] {
        let e = resolve(bad, &none).unwrap_err();
        assert!(e.contains(bad) && e.contains("or auto"), "{e}");
    }
    let k8s = [("JOB_COMPLETION_INDEX", "1"), ("RELUME_SHARD_COUNT", "2")];
    let s = resolve("auto", env(&k8s)).unwrap();
    assert_eq!((s.index, s.count), (1, 2));
}

#[test]
fn rerun_commands_replace_the_shard_and_the_report() {
    let inv = Invocation {
        dir: "/runs/it's here".into(),
        args: [
            "relume",
            "compare",
            "--data",
            "t.csv",
            "--shard=auto",
            "--report=out/part-3.json",
        ]
        .map(String::from)
        .to_vec(),
    };
    assert_eq!(inv.report(), Some("out/part-3.json"));
    let again = inv.for_shard(1, 4, "out/shard-1-of-4.json");
    assert_eq!(
        again.args[4..],
        ["--shard=1/4", "--report=out/shard-1-of-4.json"].map(String::from)
    );
    assert_eq!(
        again.shell(),
        r"cd '/runs/it'\''s here' && relume compare --data t.csv --shard=1/4 --report=out/shard-1-of-4.json"
    );
    let spaced = Invocation {
        dir: "/r".into(),
        args: [
            "relume", "compare", "--shard", "auto", "--report", "p.json", "--seeds", "3",
        ]
        .map(String::from)
        .to_vec(),
    };
    assert_eq!(
        spaced.for_shard(0, 2, "s.json").args,
        ["relume", "compare", "--shard", "0/2", "--report", "s.json", "--seeds", "3"]
    );
    let bare = Invocation {
        dir: "/r".into(),
        args: ["relume", "compare"].map(String::from).to_vec(),
    };
    assert_eq!(
        bare.for_shard(2, 3, "a b.json").shell(),
        "cd /r && relume compare --shard 2/3 --report 'a b.json'"
    );
}

fn table() -> Table {
    let mut s = String::from("a,b,y\n");
    for i in 0..60 {
        let (a, b) = ((i as f64 * 0.37).sin() * 2.0, (i as f64 * 0.61).cos());
        s += &format!("{a},{b},{}\n", (a * b).max(0.0) + 0.5 * a);
    }
    Table::read(s.as_bytes(), "t.csv", &ReadOptions::default()).unwrap()
}

/// 3 candidates × 2 seeds × 2 folds = 12 cells of a tiny network.
fn plan() -> SweepPlan {
    let base = Overrides {
        hidden: Some(vec![6]),
        epochs: Some(20),
        ..Overrides::default()
    };
    SweepPlan::grid(
        &[Activation::Relu, Activation::ELU, Activation::Tanh],
        &[],
        &[],
        2,
        2,
        base,
    )
}

fn spec() -> EncoderSpec {
    EncoderSpec {
        target: "y".into(),
        ..EncoderSpec::default()
    }
}

/// Results without wall and CPU times, which differ from run to run.
fn untimed(r: &SweepReport) -> Vec<RunResult> {
    r.runs
        .iter()
        .map(|x| RunResult {
            seconds_per_epoch: 0.0,
            cpu_seconds_per_epoch: None,
            ..x.clone()
        })
        .collect()
}

#[test]
fn merged_shards_equal_the_unsharded_run_for_1_2_3_and_7_shards() {
    let (t, p) = (table(), plan());
    let whole = run(&t, &spec(), &p, None).unwrap();
    assert_eq!(whole.runs.len(), 12);
    for n in [1, 2, 3, 7] {
        let mut parts: Vec<SweepReport> = (0..n)
            .map(|i| run(&t, &spec(), &p, Some((i, n))).unwrap())
            .collect();
        assert_eq!(parts.iter().map(|s| s.runs.len()).sum::<usize>(), 12);
        parts.reverse();
        let merged = merge(&parts).unwrap();
        assert_eq!(merged.shard, None);
        // Candidate, seed, fold, validation RMSE, best epoch and the rest, exactly.
        assert_eq!(untimed(&merged), untimed(&whole), "{n} shards");
    }
}

#[test]
fn reruns_are_equal_duplicates_merge_exactly_or_are_refused() {
    let (t, p) = (table(), plan());
    let parts: Vec<SweepReport> = (0..3)
        .map(|i| run(&t, &spec(), &p, Some((i, 3))).unwrap())
        .collect();
    let again = run(&t, &spec(), &p, Some((1, 3))).unwrap();
    assert_eq!(
        untimed(&again),
        untimed(&parts[1]),
        "a rerun shard is the same"
    );
    let whole = merge(&parts).unwrap();
    let with_rerun = merge(&[
        parts[0].clone(),
        parts[1].clone(),
        again.clone(),
        parts[2].clone(),
    ])
    .unwrap();
    assert_eq!(untimed(&with_rerun), untimed(&whole));
    // Shards of another count cover the same cells: they merge too.
    let halves: Vec<SweepReport> = (0..2)
        .map(|i| run(&t, &spec(), &p, Some((i, 2))).unwrap())
        .collect();
    let mixed = merge(&[parts[0].clone(), halves[0].clone(), halves[1].clone()]).unwrap();
    assert_eq!(untimed(&mixed), untimed(&whole));
    // A duplicate that differs in the last bit of one RMSE is refused, naming the cell.
    let mut tampered = again.clone();
    let v = tampered.runs[0].val_rmse.unwrap();
    tampered.runs[0].val_rmse = Some(f64::from_bits(v.to_bits() + 1));
    let e = merge(&[
        parts[1].clone(),
        tampered,
        parts[0].clone(),
        parts[2].clone(),
    ])
    .unwrap_err();
    let MergeError::Refused(reason) = &e else {
        panic!("{e}")
    };
    let cell = &again.runs[0];
    let label = format!(
        "{}, seed {}, fold {}",
        p.candidates[cell.candidate].label, cell.seed, cell.fold
    );
    assert!(
        reason.contains(&label) && reason.contains("two different results"),
        "{reason}"
    );
    assert!(
        reason.contains("report 1") && reason.contains("report 2"),
        "{reason}"
    );
    // The same plan on other data, or on other columns, is refused.
    let mut changed = t.clone();
    if let relume::data::ColumnData::Number(v) = &mut changed.columns[0].data {
        v[7] += 1e-9;
    }
    let elsewhere = run(&changed, &spec(), &p, Some((2, 3))).unwrap();
    let e = merge(&[parts[0].clone(), parts[1].clone(), elsewhere]).unwrap_err();
    assert!(e.to_string().contains("report 3 ran on other data"), "{e}");
    let other_target = EncoderSpec {
        target: "a".into(),
        ..EncoderSpec::default()
    };
    let other = run(&t, &other_target, &p, Some((2, 3))).unwrap();
    let e = merge(&[parts[0].clone(), parts[1].clone(), other]).unwrap_err();
    assert!(e.to_string().contains("target a"), "{e}");
    // Another plan is refused.
    let mut other = parts[2].clone();
    other.plan.seeds = 3;
    let e = merge(&[parts[0].clone(), parts[1].clone(), other]).unwrap_err();
    assert!(e.to_string().contains("different sweep"), "{e}");
}

#[test]
fn an_incomplete_merge_lists_the_missing_cells_and_the_commands() {
    let (t, p) = (table(), plan());
    let mut parts: Vec<SweepReport> = (0..3)
        .map(|i| run(&t, &spec(), &p, Some((i, 3))).unwrap())
        .collect();
    for (i, part) in parts.iter_mut().enumerate() {
        part.invocation = Some(Invocation {
            dir: "/runs".into(),
            args: ["relume", "compare", "--shard", "auto", "--report"]
                .map(String::from)
                .into_iter()
                .chain([format!("out/part-{}.json", i + 1)])
                .collect(),
        });
    }
    let e = merge(&[parts[0].clone(), parts[2].clone()]).unwrap_err();
    let MergeError::Incomplete(gap) = &e else {
        panic!("{e}")
    };
    // The cells of shard 1/3 are cells 1, 4, 7, 10 of the 12, in cell order.
    let cells = p.cells();
    let expected: Vec<String> = [1, 4, 7, 10]
        .iter()
        .map(|&k| p.cell_label(cells[k]))
        .collect();
    assert_eq!(gap.missing, expected);
    assert_eq!((gap.count, gap.shards.clone(), gap.extra), (3, vec![1], 0));
    assert_eq!(
        gap.commands,
        ["cd /runs && relume compare --shard 1/3 --report out/shard-1-of-3.json"]
    );
    let text = e.to_string();
    assert!(
        text.starts_with("4 of 12 cells are missing (the cells of shard 1/3)"),
        "{text}"
    );
    assert!(text.contains("relu, seed 0, fold 1") && text.contains("out/shard-1-of-3.json"));
    // Without recorded commands, it says which shards to run.
    parts.iter_mut().for_each(|r| r.invocation = None);
    let e = merge(&[parts[1].clone()]).unwrap_err().to_string();
    assert!(
        e.contains("8 of 12") && e.contains("--shard 0/3, --shard 2/3"),
        "{e}"
    );
}

// ---- the command ----

fn with<'a>(base: &[&'a str], extra: &[&'a str]) -> Vec<&'a str> {
    base.iter().chain(extra).copied().collect()
}

fn scratch() -> PathBuf {
    let d = std::env::temp_dir().join(format!("relume-shards-{}", std::process::id()));
    std::fs::create_dir_all(d.join("out")).unwrap();
    d
}

/// The binary in `dir` with only the given variables set.
fn relume(dir: &Path, vars: &[(&str, &str)], args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_relume"))
        .current_dir(dir)
        .env_clear()
        .envs(vars.iter().copied())
        .args(args)
        .output()
        .unwrap()
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

fn read(path: PathBuf) -> SweepReport {
    SweepReport::from_json(&std::fs::read_to_string(path).unwrap()).unwrap()
}

#[test]
fn command_shards_from_the_environment_and_finishes_an_incomplete_sweep() {
    let dir = scratch();
    let mut csv = String::from("x,y\n");
    for i in 0..48 {
        let x = i as f64 / 8.0;
        csv += &format!("{x},{}\n", x.sin());
    }
    std::fs::write(dir.join("t.csv"), csv).unwrap();
    let sweep = [
        "compare",
        "--data",
        "t.csv",
        "--target",
        "y",
        "--activations",
        "relu,tanh",
        "--seeds",
        "2",
        "--folds",
        "2",
        "--layers",
        "4",
        "--epochs",
        "15",
    ];
    let o = relume(&dir, &[], &with(&sweep, &["--report", "whole.json"]));
    assert!(o.status.success(), "{}", stderr(&o));
    let whole = read(dir.join("whole.json"));
    // Three pods of a Kubernetes indexed Job.
    for i in ["0", "1", "2"] {
        let vars = [("JOB_COMPLETION_INDEX", i), ("RELUME_SHARD_COUNT", "3")];
        let report = format!("out/part-{i}.json");
        let mut args = with(&sweep, &["--shard", "auto", "--report"]);
        args.push(&report);
        let o = relume(&dir, &vars, &args);
        assert!(o.status.success(), "{}", stderr(&o));
        assert!(
            stderr(&o).contains(&format!("shard {i}/3 (Kubernetes")),
            "{}",
            stderr(&o)
        );
    }
    let k8s_1 = read(dir.join("out/part-1.json"));
    assert_eq!(k8s_1.shard, Some((1, 3)));
    // The same shard as Slurm array task 2 of --array=1-3: the same cells, the same results.
    let slurm = [
        ("SLURM_ARRAY_TASK_ID", "2"),
        ("SLURM_ARRAY_TASK_COUNT", "3"),
        ("SLURM_ARRAY_TASK_MIN", "1"),
        ("SLURM_ARRAY_TASK_MAX", "3"),
    ];
    let o = relume(
        &dir,
        &slurm,
        &with(&sweep, &["--shard", "auto", "--report", "slurm-2.json"]),
    );
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(untimed(&read(dir.join("slurm-2.json"))), untimed(&k8s_1));
    // Missing environment: exit 2 naming what is missing.
    for (vars, says) in [
        (&[][..], "no shard index in the environment"),
        (
            &[("SLURM_ARRAY_TASK_ID", "2")][..],
            "SLURM_ARRAY_TASK_COUNT",
        ),
        (
            &[("JOB_COMPLETION_INDEX", "1")][..],
            "set RELUME_SHARD_COUNT",
        ),
    ] {
        let o = relume(
            &dir,
            vars,
            &with(&sweep, &["--shard", "auto", "--report", "no.json"]),
        );
        assert_eq!(o.status.code(), Some(2), "{vars:?}: {}", stderr(&o));
        assert!(stderr(&o).contains(says), "{vars:?}: {}", stderr(&o));
        assert!(!dir.join("no.json").exists());
    }
    // Shard 1 lost: merge names its cells and prints the command that runs only them.
    let o = relume(
        &dir,
        &[],
        &["merge", "--reports", "out/part-0.json,out/part-2.json"],
    );
    assert_eq!(o.status.code(), Some(2));
    let err = stderr(&o);
    assert!(err.contains("3 of 8 cells are missing"), "{err}");
    assert!(err.contains("tanh, seed 0, fold 0"), "{err}");
    let lines: Vec<&str> = err.lines().collect();
    let at = lines
        .iter()
        .position(|l| *l == "run only those with:")
        .unwrap();
    let command = lines[at + 1].trim();
    assert!(
        command.contains("--shard 1/3 --report out/shard-1-of-3.json"),
        "{command}"
    );
    let o = Command::new("/bin/sh")
        .args(["-c", command])
        .env_clear()
        .output()
        .unwrap();
    assert!(o.status.success(), "{command}: {}", stderr(&o));
    let o = relume(
        &dir,
        &[],
        &[
            "merge",
            "--reports",
            "out/part-0.json,out/part-2.json,out/shard-1-of-3.json",
            "--report",
            "merged.json",
        ],
    );
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(untimed(&read(dir.join("merged.json"))), untimed(&whole));
    std::fs::remove_dir_all(&dir).unwrap();
}
