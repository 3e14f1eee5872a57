//! The activation comparison: paired design, shard/merge equality, thread-count independence,
//! summaries and outputs.

use relume::data::{EncoderSpec, ReadOptions, Table};
use relume::report::plot_comparison;
use relume::sweep::compare::{markdown, merge, run, summarize, RunResult, SweepPlan, SweepReport};
use relume::{Activation, Overrides};

fn table() -> Table {
    let mut s = String::from("a,b,y\n");
    for i in 0..160 {
        let (a, b) = ((i as f64 * 0.37).sin() * 2.0, (i as f64 * 0.61).cos());
        let noise = ((i * 7919 % 101) as f64 / 101.0 - 0.5) * 0.2;
        s += &format!("{a},{b},{}\n", (a * b).max(0.0) + 0.5 * a + noise);
    }
    Table::read(s.as_bytes(), "t.csv", &ReadOptions::default()).unwrap()
}

fn plan() -> SweepPlan {
    let base = Overrides {
        hidden: Some(vec![16, 16]),
        epochs: Some(150),
        ..Overrides::default()
    };
    SweepPlan::grid(
        &[Activation::Relu, Activation::ELU, Activation::Tanh],
        &[],
        &[],
        3,
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

fn with_threads(n: usize, f: impl FnOnce() -> SweepReport + Send) -> SweepReport {
    rayon::ThreadPoolBuilder::new()
        .num_threads(n)
        .build()
        .unwrap()
        .install(f)
}

#[test]
fn every_candidate_sees_the_same_seeds_and_folds() {
    let (t, p) = (table(), plan());
    let splits = p.splits(t.rows());
    assert_eq!(
        splits,
        p.splits(t.rows()),
        "the folds depend only on the plan"
    );
    let mut held_out: Vec<usize> = splits.iter().flat_map(|(_, test)| test.clone()).collect();
    held_out.sort_unstable();
    assert_eq!(
        held_out,
        (0..t.rows()).collect::<Vec<_>>(),
        "each row held out once"
    );
    let report = with_threads(2, || run(&t, &spec(), &p, None).unwrap());
    assert_eq!(report.runs.len(), 3 * 3 * 2);
    for c in 0..3 {
        let cells: Vec<(u64, usize)> = report
            .runs
            .iter()
            .filter(|r| r.candidate == c)
            .map(|r| (r.seed, r.fold))
            .collect();
        assert_eq!(cells, vec![(0, 0), (0, 1), (1, 0), (1, 1), (2, 0), (2, 1)]);
    }
    let comparison = summarize(&report).unwrap();
    let md = markdown(&comparison);
    println!("{md}");
    assert_eq!(md.lines().count(), 2 + 3);
    let best = &comparison.candidates[comparison.best];
    assert!(best.verdict.contains("best"));
    for (i, c) in comparison.candidates.iter().enumerate() {
        assert_eq!(c.runs + c.diverged, 6);
        let values: Vec<f64> = report
            .runs
            .iter()
            .filter(|r| r.candidate == i)
            .filter_map(|r| r.val_rmse)
            .collect();
        let mean = values.iter().sum::<f64>() / values.len() as f64;
        assert!((c.mean_rmse - mean).abs() < 1e-12);
        assert!(c.ci95.0 < c.mean_rmse && c.mean_rmse < c.ci95.1);
        if i != comparison.best {
            let v = c.versus_best.as_ref().unwrap();
            assert_eq!(v.n, 6);
            assert!(v.mean_difference >= 0.0, "the best has the lowest mean");
            let worse = v.p_value < 0.05 && v.ci95.0 > 0.0;
            assert_eq!(c.verdict.starts_with("worse"), worse, "{}", c.verdict);
            let apart = v.p_value >= 0.05 && v.ci95.0 <= 0.0;
            assert_eq!(
                c.verdict.starts_with("cannot be told apart"),
                apart,
                "{}",
                c.verdict
            );
        }
    }
    let svg = plot_comparison(&comparison, &report);
    assert_eq!(svg.matches("<circle").count(), 18);
    let back = SweepReport::from_json(&report.to_json()).unwrap();
    assert_eq!(untimed(&back), untimed(&report));
}

#[test]
fn three_shards_merged_equal_the_unsharded_run() {
    let (t, p) = (table(), plan());
    let whole = with_threads(2, || run(&t, &spec(), &p, None).unwrap());
    let shards: Vec<SweepReport> = (0..3)
        .map(|i| with_threads(2, || run(&t, &spec(), &p, Some((i, 3))).unwrap()))
        .collect();
    assert!(shards.iter().all(|s| s.runs.len() == 6));
    assert!(
        summarize(&shards[0]).is_err(),
        "a shard alone is not a comparison"
    );
    let merged = merge(&[shards[2].clone(), shards[0].clone(), shards[1].clone()]).unwrap();
    assert_eq!(untimed(&merged), untimed(&whole));
    let gap = merge(&shards[..2]).unwrap_err().to_string();
    assert!(gap.contains("6 of 18 cells are missing"), "{gap}");
    // A shard given twice merges exactly; the third is still missing.
    let twice = merge(&[shards[0].clone(), shards[0].clone(), shards[1].clone()]);
    assert!(twice.unwrap_err().to_string().contains("shard 2/3"));
}

#[test]
fn results_do_not_depend_on_the_thread_count() {
    let (t, p) = (table(), plan());
    let one = with_threads(1, || run(&t, &spec(), &p, None).unwrap());
    let two = with_threads(2, || run(&t, &spec(), &p, None).unwrap());
    assert_eq!(untimed(&one), untimed(&two));
}
