//! Hostile inputs and faults: numeric extremes, a crash in the middle of saving, and many
//! threads sharing one predictor.

mod common;

use common::normal_matrix;
use ndarray::Array2;
use relume::data::{EncoderSpec, ReadOptions, Table};
use relume::fit::monitor::MonitorConfig;
use relume::fit::optim::OptimizerChoice;
use relume::serve::predict::Cell;
use relume::{train, Activation, Model, NetworkPlan, Predictor, Recipe, TrainConfig, TrainError};
use std::path::PathBuf;
use std::time::{Duration, Instant};

/// Trains with the default recipe and checks the outcome is usable: finite weights and finite
/// predictions on the training rows.
fn fits_cleanly(x: &Array2<f64>, y: &Array2<f64>, what: &str) {
    let (x, y) = (x.mapv(|v| v as f32), y.mapv(|v| v as f32));
    let mut trained = Recipe {
        hidden: vec![8, 8],
        ..Recipe::default()
    }
    .fit(x.view(), y.view())
    .unwrap_or_else(|e| panic!("{what}: {e}"));
    assert!(
        trained.network.params().iter().all(|p| p.is_finite()),
        "{what}: weights"
    );
    let pred = trained.predict(x.view()).unwrap();
    assert!(pred.iter().all(|p| p.is_finite()), "{what}: predictions");
}

#[test]
fn extreme_magnitudes_subnormals_constants_and_odd_shapes_train_or_fail_cleanly() {
    let x = normal_matrix(200, 3, 1);
    let y = Array2::from_shape_fn((200, 1), |(i, _)| x[(i, 0)] - x[(i, 1)]);
    fits_cleanly(
        &x.mapv(|v| v * 1e30),
        &y.mapv(|v| v * 1e30),
        "±1e30 inputs and target",
    );
    fits_cleanly(&x.mapv(|v| v * 1e-40), &y, "subnormal inputs");
    let mut constant = x.clone();
    constant.column_mut(2).fill(4.0);
    fits_cleanly(&constant, &y, "a constant column");
    fits_cleanly(
        &x.slice(ndarray::s![..1, ..]).to_owned(),
        &y.slice(ndarray::s![..1, ..]).to_owned(),
        "a single row",
    );
    let wide = normal_matrix(5, 20, 2);
    fits_cleanly(&wide, &normal_matrix(5, 1, 3), "more columns than rows");
    fits_cleanly(&x, &Array2::from_elem((200, 1), 7.0), "a constant target");
}

#[test]
fn unscaled_huge_inputs_never_leave_non_finite_weights() {
    // Without the recipe's scaling, 1e30 inputs overflow f32 in the first product: the guard
    // must stop with an error or recover, and the weights stay finite either way.
    let x = normal_matrix(64, 3, 4).mapv(|v| (v * 1e30) as f32);
    let y = normal_matrix(64, 1, 5).mapv(|v| v as f32);
    let mut net = NetworkPlan::new(3, &[8], Activation::Relu)
        .build::<f32>(1)
        .unwrap();
    let config = TrainConfig {
        optimizer: OptimizerChoice::Sgd {
            momentum: 0.0,
            nesterov: false,
        },
        epochs: 3,
        max_rollbacks: 3,
        val_frac: 0.0,
        ..TrainConfig::default()
    };
    match train(&mut net, x.view(), y.view(), None, &config, &mut []) {
        Ok(_) | Err(TrainError::Diverged { .. }) => {}
        Err(e) => panic!("unexpected error: {e}"),
    }
    assert!(net.params().iter().all(|p| p.is_finite()));
}

fn demo_model(hidden: Vec<usize>, seed: u64) -> Model {
    let mut csv = String::from("a,b,kind,y\n");
    for i in 0..200 {
        let (a, b) = ((i as f64 * 0.3).sin(), (i as f64 * 0.17).cos());
        csv += &format!("{a},{b},{},{}\n", ["u", "v"][i % 2], a * b + (i % 2) as f64);
    }
    let table = Table::read(csv.as_bytes(), "t", &ReadOptions::default()).unwrap();
    let spec = EncoderSpec {
        target: "y".into(),
        ..EncoderSpec::default()
    };
    let recipe = Recipe {
        hidden,
        seed,
        ..Recipe::default()
    }
    .with_config(TrainConfig {
        epochs: 3,
        ..TrainConfig::default()
    });
    Model::fit(&table, &spec, &recipe, MonitorConfig::default())
        .unwrap()
        .0
}

const CHILD_ENV: &str = "RELUME_SAVE_LOOP_TARGET";
/// The line the child prints when its save loop starts.
const READY: &str = "save loop starts";

/// In the child process: save two alternating models to the target path until killed (or 60 s).
#[test]
fn save_loop_child() {
    let Ok(target) = std::env::var(CHILD_ENV) else {
        return; // Only does something when started by the crash test below.
    };
    let models = [demo_model(vec![256, 256], 1), demo_model(vec![256, 256], 2)];
    let path = PathBuf::from(target);
    // Tells the parent that the saving starts now (building the models takes a while, longer
    // on a busy machine).
    println!("{READY}");
    // Bounded, so that a child whose parent died does not save forever.
    let until = Instant::now() + Duration::from_secs(60);
    for k in 0.. {
        models[k % 2].save(&path).unwrap();
        if Instant::now() > until {
            break;
        }
    }
}

#[test]
fn a_crash_in_the_middle_of_saving_never_damages_the_saved_file() {
    let dir = std::env::temp_dir().join(format!("relume-crash-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join("model.json");
    demo_model(vec![4], 3).save(&path).unwrap();
    let exe = std::env::current_exe().unwrap();
    let mut rng_state = 12345u64;
    let (mut loaded, mut replaced) = (0, 0);
    for attempt in 0..40 {
        let mut child = std::process::Command::new(&exe)
            .args([
                "--exact",
                "save_loop_child",
                "--nocapture",
                "--test-threads",
                "1",
            ])
            .env(CHILD_ENV, &path)
            .stdout(std::process::Stdio::piped())
            .stderr(std::process::Stdio::null())
            .spawn()
            .unwrap();
        // Wait until the child is saving, so that the kill lands in the save loop however
        // long building the models took on a loaded machine.
        let stdout = std::io::BufReader::new(child.stdout.take().unwrap());
        let started = std::io::BufRead::lines(stdout).any(|l| l.is_ok_and(|l| l.ends_with(READY)));
        assert!(started, "attempt {attempt}: the child ended before saving");
        // Then a pseudo-random moment 0 to 60 ms into the loop (several saves).
        rng_state = rng_state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        std::thread::sleep(Duration::from_micros((rng_state >> 33) % 60_000));
        child.kill().unwrap(); // SIGKILL on Unix: no destructor or flush runs.
        child.wait().unwrap();
        let model = Model::load(&path).unwrap_or_else(|e| panic!("attempt {attempt}: {e}"));
        assert!(model.members[0].params().iter().all(|p| p.is_finite()));
        loaded += 1;
        replaced += usize::from(model.members[0].param_count() > 10_000);
    }
    // A kill in the middle of a save leaves that save's temporary file behind.
    let interrupted = std::fs::read_dir(&dir)
        .unwrap()
        .filter(|e| {
            e.as_ref()
                .unwrap()
                .file_name()
                .to_string_lossy()
                .ends_with(".tmp")
        })
        .count();
    println!("40 kills: {interrupted} in the middle of a save; the file held a later save {replaced} times");
    assert_eq!(loaded, 40);
    assert!(
        interrupted >= 5,
        "too few kills landed during a save ({interrupted})"
    );
    std::fs::remove_dir_all(dir).ok();
}

#[test]
fn sixteen_threads_sharing_a_predictor_match_the_sequential_results() {
    let predictor = std::sync::Arc::new(Predictor::new(&demo_model(vec![16, 16], 4)));
    let rows: Vec<(f64, f64, &str)> = (0..256)
        .map(|i| {
            (
                (i as f64 * 0.11).sin(),
                (i as f64 * 0.07).cos(),
                ["u", "v"][i % 2],
            )
        })
        .collect();
    let predict = |p: &Predictor, scratch: &mut relume::serve::predict::Scratch, i: usize| {
        let (a, b, k) = rows[i];
        p.predict_row(&[Cell::Number(a), Cell::Number(b), Cell::Text(k)], scratch)
            .unwrap()
            .value
    };
    let mut scratch = predictor.scratch();
    let sequential: Vec<f64> = (0..rows.len())
        .map(|i| predict(&predictor, &mut scratch, i))
        .collect();
    let deadline = Instant::now() + Duration::from_secs(2);
    std::thread::scope(|s| {
        for t in 0..16 {
            let (p, sequential, rows) = (predictor.clone(), &sequential, &rows);
            s.spawn(move || {
                let mut scratch = p.scratch();
                let mut i = t * 13;
                let mut done = 0;
                while Instant::now() < deadline && done < 2_000_000 {
                    let k = i % rows.len();
                    let (a, b, kind) = rows[k];
                    let v = p
                        .predict_row(
                            &[Cell::Number(a), Cell::Number(b), Cell::Text(kind)],
                            &mut scratch,
                        )
                        .unwrap()
                        .value;
                    assert_eq!(v.to_bits(), sequential[k].to_bits(), "thread {t}, row {k}");
                    i += 7;
                    done += 1;
                }
                assert!(done > 0);
            });
        }
    });
}
