//! Ensembles and split-conformal prediction intervals, against their published guarantees.

#[path = "common/friedman.rs"]
mod friedman;

use ndarray::Array2;
use relume::data::{EncoderSpec, ReadOptions, Table};
use relume::fit::monitor::MonitorConfig;
use relume::serve::interval::Conformal;
use relume::serve::model::Model;
use relume::serve::predict::Cell;
use relume::{Overrides, Predictor};
use std::path::PathBuf;

/// A CSV text from rows x (columns x0..) and y.
fn csv(x: &Array2<f64>, y: &Array2<f64>) -> String {
    let mut s: String = (0..x.ncols()).map(|j| format!("x{j},")).collect();
    s += "y\n";
    for i in 0..x.nrows() {
        for j in 0..x.ncols() {
            s += &format!("{},", x[(i, j)]);
        }
        s += &format!("{}\n", y[(i, 0)]);
    }
    s
}

fn table(x: &Array2<f64>, y: &Array2<f64>) -> Table {
    Table::read(csv(x, y).as_bytes(), "synthetic", &ReadOptions::default()).unwrap()
}

fn spec() -> EncoderSpec {
    EncoderSpec {
        target: "y".into(),
        ..EncoderSpec::default()
    }
}

/// Our own formula (synthetic, for this test only): y = sin(3·x0) + x1² + 0.3·N(0, 1) with
/// x ~ U[−1, 1]², seeded.
fn wavy(rows: usize, seed: u64) -> (Array2<f64>, Array2<f64>) {
    use rand::{Rng, SeedableRng};
    use rand_distr::{Distribution, StandardNormal};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let x = Array2::from_shape_fn((rows, 2), |_| rng.random::<f64>() * 2.0 - 1.0);
    let y = Array2::from_shape_fn((rows, 1), |(i, _)| {
        let e: f64 = StandardNormal.sample(&mut rng);
        (3.0 * x[(i, 0)]).sin() + x[(i, 1)].powi(2) + 0.3 * e
    });
    (x, y)
}

fn coverage_of(model: &Model, x: &Array2<f64>, y: &Array2<f64>) -> (f64, f64) {
    let p = Predictor::new(model);
    let mut scratch = p.scratch();
    let (mut inside, mut sse) = (0usize, 0.0);
    for i in 0..x.nrows() {
        let row: Vec<Cell> = x.row(i).iter().map(|&v| Cell::Number(v)).collect();
        let out = p.predict_row(&row, &mut scratch).unwrap();
        let (lo, hi) = (out.lower.unwrap(), out.upper.unwrap());
        inside += usize::from(lo <= y[(i, 0)] && y[(i, 0)] <= hi);
        sse += (out.value - y[(i, 0)]).powi(2);
    }
    (
        inside as f64 / x.nrows() as f64,
        (sse / x.nrows() as f64).sqrt(),
    )
}

#[test]
fn conformal_rank_follows_the_finite_sample_formula() {
    // Lei et al. 2018: the ⌈(n+1)(1−α)⌉-th smallest |residual|. n = 9 at 90%: rank 9 of 9.
    let r: Vec<f64> = (1..=9).map(f64::from).collect();
    assert_eq!(Conformal::calibrate(&r, 0.9).unwrap().half_width, 9.0);
    // n = 19: rank ⌈18⌉ = 18.
    let r: Vec<f64> = (1..=19).rev().map(|v| -f64::from(v)).collect();
    assert_eq!(Conformal::calibrate(&r, 0.9).unwrap().half_width, 18.0);
    // n = 8 cannot give 90%.
    assert!(Conformal::calibrate(&r[..8], 0.9).is_none());
    assert!(Conformal::calibrate(&r, 1.0).is_none());
}

#[test]
fn split_conformal_coverage_over_repeated_splits_meets_the_guarantee() {
    // Lei et al. 2018, Theorem 2.2: with n calibration rows and continuous residuals, the
    // coverage averaged over draws lies in [1 − α, 1 − α + 1/(n + 1)]. 100 repetitions, each
    // a fresh 400-row training table and 1000 fresh test rows; small single networks keep it
    // fast (the guarantee holds for any model).
    let reps = 100;
    let mut coverages = Vec::new();
    let mut n_cal = 0;
    for rep in 0..reps {
        let (x, y) = wavy(400, 1000 + rep);
        let (xt, yt) = wavy(1000, 5000 + rep);
        let recipe = Overrides {
            hidden: Some(vec![16]),
            epochs: Some(150),
            members: Some(1),
            seed: Some(rep),
            ..Overrides::default()
        }
        .recipe();
        let (model, _) =
            Model::fit(&table(&x, &y), &spec(), &recipe, MonitorConfig::default()).unwrap();
        n_cal = model.interval.as_ref().unwrap().calibration_rows;
        coverages.push(coverage_of(&model, &xt, &yt).0);
    }
    let mean = coverages.iter().sum::<f64>() / reps as f64;
    let sd = (coverages.iter().map(|c| (c - mean).powi(2)).sum::<f64>() / (reps - 1) as f64).sqrt();
    let se = sd / (reps as f64).sqrt();
    let (lo, hi) = (0.9, 0.9 + 1.0 / (n_cal as f64 + 1.0));
    println!("mean coverage {mean:.4} (se {se:.4}), band [{lo}, {hi:.4}], n_cal {n_cal}");
    assert!(
        mean >= lo - 3.0 * se && mean <= hi + 3.0 * se,
        "mean coverage {mean:.4} outside [{lo}, {hi:.4}] ± 3·{se:.4}"
    );
}

#[test]
fn friedman_1_default_ensemble_rmse_and_coverage() {
    // Friedman 1991 #1: noise SD 1.0. Default model (ensemble, penalty chosen on the data,
    // 90% interval) on 5000 training rows; 10 000 fresh rows score it.
    let (x, y) = friedman::friedman1(5000, 1);
    let (xt, yt) = friedman::friedman1(10_000, 2);
    let (model, _) = Model::fit(
        &table(&x, &y),
        &spec(),
        &relume::Recipe::default(),
        MonitorConfig::default(),
    )
    .unwrap();
    let (coverage, rmse) = coverage_of(&model, &xt, &yt);
    println!(
        "Friedman #1: test RMSE {rmse:.4}, coverage {coverage:.4}, L2 {:?}",
        model.summary.l2
    );
    assert_eq!(model.members.len(), relume::fit::ensemble::DEFAULT_MEMBERS);
    assert!(rmse <= 1.10, "test RMSE {rmse:.4} > 1.10 × the noise SD");
    assert!((0.88..=0.92).contains(&coverage), "coverage {coverage:.4}");
}

#[test]
fn the_predictor_averages_the_members_and_saves_them_all() {
    let (x, y) = wavy(300, 3);
    let recipe = Overrides {
        hidden: Some(vec![8]),
        epochs: Some(80),
        members: Some(3),
        ..Overrides::default()
    }
    .recipe();
    let t = table(&x, &y);
    let (mut model, _) = Model::fit(&t, &spec(), &recipe, MonitorConfig::default()).unwrap();
    assert_eq!(model.members.len(), 3);
    assert_eq!(model.summary.members.len(), 3);
    // Members differ (different seeds), and the served value is their average.
    let xs = model
        .encoder
        .encode_inputs::<f32>(&t, Some(&[0, 1, 2]))
        .unwrap();
    let scaled = model.inputs.apply(xs.view());
    let outs: Vec<f64> = model
        .members
        .iter_mut()
        .map(|n| {
            let o = n.forward(scaled.view(), relume::Pass::Infer).unwrap();
            f64::from(o[(0, 0)]) * model.target.sd[0] + model.target.mean[0]
        })
        .collect();
    assert!(outs[0] != outs[1]);
    let p = Predictor::new(&model);
    let row = [Cell::Number(x[(0, 0)]), Cell::Number(x[(0, 1)])];
    let served = p.predict_row(&row, &mut p.scratch()).unwrap();
    let mean = outs.iter().sum::<f64>() / 3.0;
    assert!(
        (served.value - mean).abs() < 1e-5,
        "{} {mean}",
        served.value
    );
    // Save and load: every member comes back, predictions are the same bits.
    let dir = std::env::temp_dir().join(format!("relume-ens-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path: PathBuf = dir.join("m.json");
    model.save(&path).unwrap();
    let back = Predictor::load(&path).unwrap();
    assert_eq!(back.member_count(), 3);
    let again = back.predict_row(&row, &mut back.scratch()).unwrap();
    assert_eq!(again.value.to_bits(), served.value.to_bits());
    assert_eq!(again.lower, served.lower);
}

#[test]
fn members_are_the_same_bits_on_one_two_and_three_threads() {
    // With more runs than cores the runs start all at once (fit::parallel::map_all_at_once);
    // each is seeded, so the thread count must not change a bit, with or without the grid.
    use relume::fit::ensemble::fit_ensemble;
    let (x, y) = friedman::friedman1(600, 3);
    let (x, y) = (x.mapv(|v| v as f32), y.mapv(|v| v as f32));
    let train: Vec<usize> = (0..480).collect();
    let stop: Vec<usize> = (480..600).collect();
    for choose_penalty in [false, true] {
        let recipe = relume::Recipe {
            members: 5,
            choose_penalty,
            ..relume::Recipe::default()
        }
        .with_config(relume::TrainConfig {
            epochs: 4,
            patience: None,
            ..relume::TrainConfig::default()
        });
        let fit = |threads: usize| {
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap();
            let e = pool
                .install(|| {
                    fit_ensemble(
                        &recipe,
                        x.view(),
                        y.view(),
                        &train,
                        &stop,
                        MonitorConfig::default(),
                        &|_, _| {},
                    )
                })
                .unwrap();
            let params: Vec<Vec<f32>> = e
                .members
                .iter()
                .map(|m| m.network.params().to_vec())
                .collect();
            (params, e.l2, e.grid.len())
        };
        let one = fit(1);
        assert_eq!(one.0.len(), 5);
        assert_eq!(one.2, if choose_penalty { 4 } else { 0 });
        assert!(one.0[0] != one.0[1], "members differ from each other");
        assert!(one == fit(2), "two threads, grid {choose_penalty}");
        assert!(one == fit(3), "three threads, grid {choose_penalty}");
    }
}
