//! Explaining a trained model: permutation importance, partial dependence, integrated
//! gradients, against outside checks named beside each test.

use relume::data::{EncoderSpec, ReadOptions, Table};
use relume::fit::monitor::MonitorConfig;
use relume::serve::predict::Cell;
use relume::{Activation, Model, Overrides, Predictor};

/// A seeded table: `inputs` uniform columns x1.., a text column `site`, and the target
/// `y = f(x) + site offset` (no noise unless `f` adds it).
fn table(rows: usize, inputs: usize, seed: u64, f: impl Fn(&[f64]) -> f64) -> Table {
    use rand::{Rng, SeedableRng};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let mut s = (1..=inputs).map(|i| format!("x{i},")).collect::<String>() + "site,y\n";
    for _ in 0..rows {
        let x: Vec<f64> = (0..inputs).map(|_| rng.random::<f64>()).collect();
        let site = rng.random_range(0..3usize);
        let y = f(&x) + [0.0, 1.0, -0.5][site];
        for v in &x {
            s += &format!("{v:.6},");
        }
        s += &format!("{},{y:.6}\n", ["north", "south", "east"][site]);
    }
    Table::read(s.as_bytes(), "synthetic.csv", &ReadOptions::default()).unwrap()
}

fn train(table: &Table, activation: Activation, members: usize, epochs: usize) -> Model {
    let recipe = Overrides {
        activation: Some(activation),
        hidden: Some(vec![24, 24]),
        epochs: Some(epochs),
        members: Some(members),
        ..Overrides::default()
    }
    .recipe();
    let spec = EncoderSpec {
        target: "y".to_string(),
        ..EncoderSpec::default()
    };
    Model::fit(table, &spec, &recipe, MonitorConfig::default())
        .unwrap()
        .0
}

fn cells(table: &Table, predictor: &Predictor, row: usize) -> Vec<Cell<'static>> {
    // Leaked strings keep the test simple: a few hundred short cells.
    predictor
        .feature_names()
        .iter()
        .map(|name| {
            let c = table.column(name).unwrap().cell(row);
            match c {
                Cell::Text(t) => Cell::Text(Box::leak(t.to_string().into_boxed_str())),
                Cell::Number(v) => Cell::Number(v),
                Cell::Missing => Cell::Missing,
            }
        })
        .collect()
}

/// Completeness (Sundararajan, Taly & Yan 2017, the axiom of that name): the attributions
/// add up to prediction − baseline, within 1e-3 relative, for every activation (kinked ones
/// walked exactly, smooth ones by quadrature), on an ensemble.
#[test]
fn attributions_are_complete_for_every_activation() {
    let data = table(160, 3, 1, |x| (3.0 * x[0]).sin() + x[1] * x[2] * 2.0);
    for activation in Activation::all() {
        let model = train(&data, activation, 2, 40);
        let predictor = Predictor::new(&model);
        let mut scratch = predictor.scratch();
        let mut out = vec![0.0; predictor.feature_names().len()];
        let mut worst = 0.0_f64;
        for r in 0..40 {
            let row = cells(&data, &predictor, r);
            let a = predictor
                .attribute_row(&row, &mut scratch, &mut out)
                .unwrap();
            let change = a.prediction.value - a.baseline;
            let gap = (out.iter().sum::<f64>() - change).abs();
            worst = worst.max(gap / change.abs().max(1e-3));
        }
        println!(
            "{}: worst relative completeness gap {worst:.2e}",
            activation.name()
        );
        assert!(worst <= 1e-3, "{}: {worst}", activation.name());
    }
}

/// Friedman #1 (Friedman 1991): y = 10 sin(π x1 x2) + 20 (x3 − 0.5)² + 10 x4 + 5 x5 + N(0, 1),
/// x ~ U[0, 1]^10, x6…x10 pure noise. Returns the table as CSV text.
fn friedman_csv(rows: usize, seed: u64) -> String {
    use rand::{Rng, SeedableRng};
    use rand_distr::{Distribution, StandardNormal};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let mut s = (1..=10).map(|i| format!("x{i},")).collect::<String>() + "y\n";
    for _ in 0..rows {
        let x: Vec<f64> = (0..10).map(|_| rng.random::<f64>()).collect();
        let noise: f64 = StandardNormal.sample(&mut rng);
        let y = 10.0 * (std::f64::consts::PI * x[0] * x[1]).sin()
            + 20.0 * (x[2] - 0.5).powi(2)
            + 10.0 * x[3]
            + 5.0 * x[4]
            + noise;
        for v in &x {
            s += &format!("{v:.6},");
        }
        s += &format!("{y:.6}\n");
    }
    s
}

fn read(text: &str) -> Table {
    Table::read(text.as_bytes(), "synthetic.csv", &ReadOptions::default()).unwrap()
}

/// One model of Friedman #1 shared by the tests that read it, and the held-out table.
fn friedman() -> &'static (Model, Table) {
    static CELL: std::sync::OnceLock<(Model, Table)> = std::sync::OnceLock::new();
    CELL.get_or_init(|| {
        let train_table = read(&friedman_csv(1000, 11));
        let recipe = Overrides {
            hidden: Some(vec![32, 32]),
            members: Some(3),
            epochs: Some(600),
            l2: Some(1e-4),
            ..Overrides::default()
        }
        .recipe();
        let spec = EncoderSpec {
            target: "y".to_string(),
            ..EncoderSpec::default()
        };
        let model = Model::fit(&train_table, &spec, &recipe, MonitorConfig::default())
            .unwrap()
            .0;
        (model, read(&friedman_csv(1000, 12)))
    })
}

/// Friedman 1991's design: x1…x5 carry the signal, x6…x10 none. On held-out rows every one
/// of x1…x5 has an importance interval above every noise column's, and the noise columns
/// stay near zero (within 0.1 of the noise SD 1.0: a bound of our own, common practice, no
/// source).
#[test]
fn friedman_importance_puts_the_five_signal_columns_first() {
    let (model, test) = friedman();
    let e = relume::explain(model, test, &relume::ExplainOptions::default()).unwrap();
    for i in &e.importance {
        println!(
            "{}: {:.3} [{:.3}, {:.3}]",
            i.feature, i.mean, i.lower, i.upper
        );
    }
    println!("test RMSE {:?}", e.rmse);
    let get = |name: &str| e.importance.iter().find(|i| i.feature == name).unwrap();
    let noise_top = (6..=10)
        .map(|i| get(&format!("x{i}")).upper)
        .fold(f64::MIN, f64::max);
    for i in 1..=5 {
        let signal = get(&format!("x{i}"));
        assert!(signal.lower > noise_top, "x{i}: {signal:?} vs {noise_top}");
    }
    for i in 6..=10 {
        let noise = get(&format!("x{i}"));
        assert!(noise.mean.abs() < 0.1, "{noise:?}");
    }
}

/// Least-squares polynomial coefficients (degree 1 or 2) of `y` on `x`.
fn polyfit(x: &[f64], y: &[f64], degree: usize) -> Vec<f64> {
    let n = degree + 1;
    let mut a = vec![vec![0.0; n + 1]; n];
    for (&xi, &yi) in x.iter().zip(y) {
        for (r, row) in a.iter_mut().enumerate() {
            for (c, v) in row.iter_mut().take(n).enumerate() {
                *v += xi.powi((r + c) as i32);
            }
            row[n] += yi * xi.powi(r as i32);
        }
    }
    // Gauss–Jordan elimination on the normal equations (small and well scaled on [0, 1]).
    for p in 0..n {
        let pivot = a[p][p];
        for v in a[p].iter_mut() {
            *v /= pivot;
        }
        for r in 0..n {
            if r != p {
                let f = a[r][p];
                let row = a[p].clone();
                for (v, w) in a[r].iter_mut().zip(row) {
                    *v -= f * w;
                }
            }
        }
    }
    (0..n).map(|r| a[r][n]).collect()
}

/// Friedman 1991's formula: the partial dependence of x4 and x5 is a line of slope 10 and 5,
/// that of x3 the parabola 20 (x3 − 0.5)² (coefficient of x3² = 20); within 15% of each.
#[test]
fn friedman_partial_dependence_has_the_formula_shapes() {
    let (model, test) = friedman();
    let options = relume::ExplainOptions {
        repeats: 2,
        ..relume::ExplainOptions::default()
    };
    let e = relume::explain(model, test, &options).unwrap();
    let curve = |name: &str| {
        let d = e
            .partial_dependence
            .iter()
            .find(|d| d.feature == name)
            .unwrap();
        let x: Vec<f64> = d
            .grid
            .iter()
            .map(|g| match g {
                relume::explain::GridValue::Number(v) => *v,
                relume::explain::GridValue::Level(_) => panic!("numeric column"),
            })
            .collect();
        assert_eq!(d.ice.len(), relume::explain::ICE_ROWS);
        (x, d.mean.clone())
    };
    let (x4, y4) = curve("x4");
    let (x5, y5) = curve("x5");
    let (x3, y3) = curve("x3");
    let slope4 = polyfit(&x4, &y4, 1)[1];
    let slope5 = polyfit(&x5, &y5, 1)[1];
    let square3 = polyfit(&x3, &y3, 2)[2];
    println!("slope x4 {slope4:.3}, slope x5 {slope5:.3}, x3² coefficient {square3:.3}");
    assert!((slope4 / 10.0 - 1.0).abs() < 0.15, "{slope4}");
    assert!((slope5 / 5.0 - 1.0).abs() < 0.15, "{slope5}");
    assert!((square3 / 20.0 - 1.0).abs() < 0.15, "{square3}");
}

/// An exactly linear target y = 3 x1 − 2 x2 + 0.5 x3, and a column x4 shuffled before
/// training (a copy of x1 in a random order, so it says nothing about y).
fn linear_csv(rows: usize, seed: u64) -> String {
    use rand::seq::SliceRandom;
    use rand::{Rng, SeedableRng};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let x: Vec<[f64; 3]> = (0..rows)
        .map(|_| [rng.random(), rng.random(), rng.random()])
        .collect();
    let mut shuffled: Vec<f64> = x.iter().map(|v| v[0]).collect();
    shuffled.shuffle(&mut rng);
    let mut s = String::from("x1,x2,x3,x4,y\n");
    for (v, w) in x.iter().zip(shuffled) {
        let y = 3.0 * v[0] - 2.0 * v[1] + 0.5 * v[2];
        s += &format!("{:.6},{:.6},{:.6},{w:.6},{y:.6}\n", v[0], v[1], v[2]);
    }
    s
}

fn linear_model() -> &'static (Model, Table) {
    static CELL: std::sync::OnceLock<(Model, Table)> = std::sync::OnceLock::new();
    CELL.get_or_init(|| {
        let recipe = Overrides {
            activation: Some(Activation::Relu),
            hidden: Some(vec![16, 16]),
            members: Some(3),
            epochs: Some(800),
            ..Overrides::default()
        }
        .recipe();
        let spec = EncoderSpec {
            target: "y".to_string(),
            ..EncoderSpec::default()
        };
        let model = Model::fit(
            &read(&linear_csv(400, 21)),
            &spec,
            &recipe,
            MonitorConfig::default(),
        )
        .unwrap()
        .0;
        (model, read(&linear_csv(400, 22)))
    })
}

/// For a linear function, integrated gradients are exactly coefficient × (x − baseline)
/// (Sundararajan, Taly & Yan 2017: the gradient is constant along the path). The network
/// only approximates the line, so the tolerance is 0.01 target units against values spanning
/// about ±1.5 (under 1% of the span; measured 0.0035; our own bound, common practice, no source).
#[test]
fn linear_target_attributions_are_coefficient_times_distance() {
    let (model, test) = linear_model();
    let predictor = Predictor::new(model);
    let coefficients = [3.0, -2.0, 0.5, 0.0];
    let mut scratch = predictor.scratch();
    let mut out = vec![0.0; 4];
    let mut worst = 0.0_f64;
    for r in 0..200 {
        let row = cells(test, &predictor, r);
        predictor
            .attribute_row(&row, &mut scratch, &mut out)
            .unwrap();
        for j in 0..4 {
            let Cell::Number(x) = row[j] else { panic!() };
            let expected = coefficients[j] * (x - model.inputs.mean[j]);
            worst = worst.max((out[j] - expected).abs());
        }
    }
    println!("largest |attribution − coefficient × (x − mean)|: {worst:.4}");
    assert!(worst < 0.01, "{worst}");
}

/// A column shuffled before training carries nothing the model can use: its importance
/// interval on held-out rows contains zero (Fisher, Rudin & Dominici 2019: model reliance of
/// an unused variable is zero).
#[test]
fn a_column_shuffled_before_training_has_an_interval_around_zero() {
    let (model, test) = linear_model();
    let e = relume::explain(model, test, &relume::ExplainOptions::default()).unwrap();
    for i in &e.importance {
        println!(
            "{}: {:.4} [{:.4}, {:.4}]",
            i.feature, i.mean, i.lower, i.upper
        );
    }
    let x4 = e.importance.iter().find(|i| i.feature == "x4").unwrap();
    assert!(x4.lower <= 0.0 && x4.upper >= 0.0, "{x4:?}");
    let x3 = e.importance.iter().find(|i| i.feature == "x3").unwrap();
    assert!(
        x3.lower > 0.0,
        "the weakest real column is told apart: {x3:?}"
    );
}

/// The command: `explain` writes the report with the names outside tools read and an SVG;
/// `predict --explain` adds `attribution:<column>` and `baseline`, which add up to
/// `prediction` (completeness, Sundararajan et al. 2017; printed predictions have f32
/// precision, hence 1e-4 relative).
#[test]
fn command_explains_and_predict_adds_attribution_columns() {
    let (model, test) = linear_model();
    let dir = std::env::temp_dir().join(format!("relume-explain-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let model_path = dir.join("model.json");
    model.save(&model_path).unwrap();
    let data = dir.join("data.csv");
    std::fs::write(&data, linear_csv(300, 23)).unwrap();
    let _ = test;
    let run = |args: &[&str]| {
        let out = std::process::Command::new(env!("CARGO_BIN_EXE_relume"))
            .args(args)
            .output()
            .unwrap();
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        String::from_utf8(out.stdout).unwrap()
    };
    let (report, plot) = (dir.join("e.json"), dir.join("e.svg"));
    run(&[
        "explain",
        "--model",
        model_path.to_str().unwrap(),
        "--data",
        data.to_str().unwrap(),
        "--report",
        report.to_str().unwrap(),
        "--plot",
        plot.to_str().unwrap(),
    ]);
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&report).unwrap()).unwrap();
    let importance = json["importance"].as_array().unwrap();
    assert_eq!(importance.len(), 4);
    for i in importance {
        for key in ["feature", "mean", "lower", "upper"] {
            assert!(!i[key].is_null(), "{key} in {i}");
        }
    }
    let pd = json["partial_dependence"].as_array().unwrap();
    assert_eq!(pd.len(), 4);
    assert_eq!(
        pd[0]["grid"].as_array().unwrap().len(),
        pd[0]["mean"].as_array().unwrap().len()
    );
    assert!(!pd[0]["ice"].as_array().unwrap().is_empty());
    let svg = std::fs::read_to_string(&plot).unwrap();
    assert!(svg.starts_with("<svg") && svg.contains("x1") && svg.contains("polyline"));

    let csv = run(&[
        "predict",
        "--model",
        model_path.to_str().unwrap(),
        "--data",
        data.to_str().unwrap(),
        "--explain",
    ]);
    let mut lines = csv.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    let at = |name: &str| header.iter().position(|h| *h == name).unwrap();
    let columns: Vec<usize> = ["x1", "x2", "x3", "x4"]
        .iter()
        .map(|c| at(&format!("attribution:{c}")))
        .collect();
    let (prediction, baseline) = (at("prediction"), at("baseline"));
    let mut rows = 0;
    for line in lines {
        let f: Vec<f64> = line
            .split(',')
            .map(|v| v.parse().unwrap_or(f64::NAN))
            .collect();
        let sum: f64 = columns.iter().map(|&c| f[c]).sum::<f64>() + f[baseline];
        assert!(
            (sum - f[prediction]).abs() <= 1e-4 * f[prediction].abs().max(1.0),
            "{line}"
        );
        rows += 1;
    }
    assert_eq!(rows, 300);
    std::fs::remove_dir_all(&dir).ok();
}

/// Counts the allocations of the calling thread only, so the other tests of this file, which
/// run in parallel, do not disturb the count.
struct ThreadCounting;

thread_local! {
    static ALLOCATIONS: std::cell::Cell<usize> = const { std::cell::Cell::new(0) };
}

// SAFETY: forwards every call to the system allocator unchanged; the counter is a const
// thread-local `Cell`, which never allocates.
unsafe impl std::alloc::GlobalAlloc for ThreadCounting {
    unsafe fn alloc(&self, layout: std::alloc::Layout) -> *mut u8 {
        let _ = ALLOCATIONS.try_with(|c| c.set(c.get() + 1));
        unsafe { std::alloc::System.alloc(layout) }
    }

    unsafe fn dealloc(&self, ptr: *mut u8, layout: std::alloc::Layout) {
        unsafe { std::alloc::System.dealloc(ptr, layout) }
    }

    unsafe fn realloc(&self, ptr: *mut u8, layout: std::alloc::Layout, size: usize) -> *mut u8 {
        let _ = ALLOCATIONS.try_with(|c| c.set(c.get() + 1));
        unsafe { std::alloc::System.realloc(ptr, layout, size) }
    }
}

#[global_allocator]
static GLOBAL: ThreadCounting = ThreadCounting;

/// A row's attributions reuse the scratch: no allocation, for a piecewise-linear and a smooth
/// ensemble.
#[test]
fn attributing_a_row_allocates_nothing() {
    let data = table(160, 3, 4, |x| x[0] * x[1] + x[2]);
    for activation in [Activation::Relu, Activation::Gelu] {
        let model = train(&data, activation, 2, 30);
        let predictor = Predictor::new(&model);
        let counted = ALLOCATIONS.with(|c| c.get());
        let mut scratch = predictor.scratch();
        assert!(
            ALLOCATIONS.with(|c| c.get()) > counted,
            "the counter sees allocations"
        );
        let mut out = vec![0.0; 4];
        let rows: Vec<Vec<Cell<'static>>> = (0..50).map(|r| cells(&data, &predictor, r)).collect();
        predictor
            .attribute_row(&rows[0], &mut scratch, &mut out)
            .unwrap();
        let before = ALLOCATIONS.with(|c| c.get());
        for row in &rows {
            predictor
                .attribute_row(row, &mut scratch, &mut out)
                .unwrap();
        }
        let after = ALLOCATIONS.with(|c| c.get());
        assert_eq!(after - before, 0, "{}", activation.name());
    }
}

/// A log target and a date column: completeness still holds in the target's own units
/// (Sundararajan et al. 2017), and the date column gets a grid of day numbers over its
/// training range with a rug.
#[test]
fn log_targets_and_dates_are_explained() {
    let mut csv = String::from("day,x,y\n");
    for i in 0..150 {
        let (year, month, dom) = (2024, 1 + (i * 7) % 12, 1 + (i * 11) % 28);
        let x = (i as f64 * 0.37).sin();
        let y = (1.0 + 0.5 * x + 0.3 * ((month as f64) / 12.0 * std::f64::consts::TAU).sin()).exp();
        csv += &format!("{year}-{month:02}-{dom:02},{x:.5},{y:.5}\n");
    }
    let data = read(&csv);
    let recipe = Overrides {
        hidden: Some(vec![16, 16]),
        members: Some(2),
        epochs: Some(60),
        ..Overrides::default()
    }
    .recipe();
    let spec = EncoderSpec {
        target: "y".to_string(),
        log_target: true,
        ..EncoderSpec::default()
    };
    let model = Model::fit(&data, &spec, &recipe, MonitorConfig::default())
        .unwrap()
        .0;
    let predictor = Predictor::new(&model);
    let mut scratch = predictor.scratch();
    let mut out = vec![0.0; 2];
    for r in 0..40 {
        let row = cells(&data, &predictor, r);
        let a = predictor
            .attribute_row(&row, &mut scratch, &mut out)
            .unwrap();
        let change = a.prediction.value - a.baseline;
        let gap = (out.iter().sum::<f64>() - change).abs();
        assert!(
            gap <= 1e-3 * change.abs().max(1e-3),
            "row {r}: {gap} of {change}"
        );
    }
    let e = relume::explain(&model, &data, &relume::ExplainOptions::default()).unwrap();
    let day = e
        .partial_dependence
        .iter()
        .find(|d| d.feature == "day")
        .unwrap();
    assert_eq!(day.kind, "date");
    assert_eq!(day.grid.len(), relume::explain::GRID_POINTS);
    assert!(!day.rug.is_empty());
    assert!(day.mean.iter().all(|v| v.is_finite() && *v > 0.0));
    assert!(relume::report::plot_explanation(&e).contains("2024-"));
}
