//! Property tests (proptest): shapes for random architectures, gradient checks on random small
//! networks over every activation, encoder and model-file round trips.

mod common;

use common::normal_matrix;
use ndarray::Array2;
use proptest::prelude::*;
use relume::data::{Encoder, EncoderSpec, ReadOptions, Table};
use relume::nn::layer::{LayerSpec, Pass};
use relume::{
    check_gradients, Activation, CheckOptions, Loss, Model, NetworkPlan, Recipe, TrainConfig,
};

fn activation() -> impl Strategy<Value = Activation> {
    prop::sample::select(Activation::all())
}

proptest! {
    // A fixed seed: the same 48 cases on every run, so a case near a kink cannot turn CI red
    // at random (set PROPTEST_RNG_SEED to explore others).
    #![proptest_config(ProptestConfig {
        cases: 48,
        rng_seed: proptest::test_runner::RngSeed::Fixed(
            std::env::var("PROPTEST_RNG_SEED").ok().and_then(|s| s.parse().ok()).unwrap_or(2026),
        ),
        ..ProptestConfig::default()
    })]

    #[test]
    fn forward_and_backward_shapes_follow_the_architecture(
        inputs in 1usize..6,
        hidden in prop::collection::vec(1usize..9, 0..4),
        outputs in 1usize..3,
        batch in 1usize..12,
        act in activation(),
        dropout in prop::sample::select(vec![0.0, 0.3]),
        seed in 0u64..1000,
    ) {
        let mut net = NetworkPlan::new(inputs, &hidden, act).outputs(outputs).dropout(dropout)
            .build::<f64>(seed).unwrap();
        let x = normal_matrix(batch, inputs, seed);
        let out = net.forward(x.view(), Pass::Train).unwrap().to_owned();
        prop_assert_eq!(out.dim(), (batch, outputs));
        prop_assert!(out.iter().all(|v| v.is_finite()));
        let grad_in = net.backward(Array2::ones((batch, outputs)).view()).unwrap().to_owned();
        prop_assert_eq!(grad_in.dim(), (batch, inputs));
        prop_assert_eq!(net.grads().len(), net.param_count());
        let mut width = inputs;
        let mut expected = 0;
        for h in hidden.iter().chain(std::iter::once(&outputs)) {
            expected += width * h + h;
            width = *h;
        }
        if act.is_learnable() {
            expected += hidden.iter().sum::<usize>();
        }
        prop_assert_eq!(net.param_count(), expected);
    }

    #[test]
    fn random_small_networks_pass_the_gradient_check(
        act in activation(),
        hidden in prop::collection::vec(2usize..5, 1..3),
        seed in 0u64..10_000,
    ) {
        let mut net = NetworkPlan::new(3, &hidden, act).build::<f64>(seed).unwrap();
        let x = normal_matrix(5, 3, seed + 1);
        let y = normal_matrix(5, 1, seed + 2);
        net.forward(x.view(), Pass::Train).unwrap();
        // Keep clear of kinks (biases start at 0, so a pre-activation can sit right on one).
        let mut nearest = f64::INFINITY;
        for (i, layer) in net.layers().iter().enumerate() {
            if let LayerSpec::Activation { activation, .. } = layer.spec() {
                // ELU and CELU with α = 1 have no kink, but their second derivative jumps at
                // 0, which puts central differences off by O(step) there.
                let mut breaks = activation.kinks();
                if matches!(activation, Activation::Elu { .. } | Activation::Celu { .. }) {
                    breaks.push(0.0);
                }
                for k in breaks {
                    for &v in net.layer_input(i).unwrap().iter() {
                        nearest = nearest.min((v - k).abs());
                    }
                }
            }
        }
        prop_assume!(nearest > 1e-2);
        let report = check_gradients(&mut net, Loss::Mse, x.view(), y.view(), CheckOptions::default()).unwrap();
        prop_assert!(report.max_rel_error() <= 1e-6, "{} {:?}", act, report.worst_tensor());
    }

    #[test]
    fn encoders_survive_serialization_and_encode_the_same(
        values in prop::collection::vec((-1e6f64..1e6, 0usize..4, 0.1f64..1e3), 3..40),
        log_target in any::<bool>(),
    ) {
        let mut csv = String::from("x,kind,y\n");
        for (x, k, y) in &values {
            csv += &format!("{x},{},{y}\n", ["a", "b", "c", "d"][*k]);
        }
        let table = Table::read(csv.as_bytes(), "p", &ReadOptions::default()).unwrap();
        let spec = EncoderSpec { target: "y".into(), log_target, ..EncoderSpec::default() };
        let rows: Vec<usize> = (0..table.rows()).collect();
        let enc = Encoder::fit(&table, &spec, &rows).unwrap();
        let back: Encoder = serde_json::from_str(&serde_json::to_string(&enc).unwrap()).unwrap();
        prop_assert_eq!(&back, &enc);
        prop_assert_eq!(
            back.encode_inputs::<f64>(&table, None).unwrap(),
            enc.encode_inputs::<f64>(&table, None).unwrap()
        );
        let y = enc.encode_target(&table, None).unwrap();
        for (r, (_, _, original)) in values.iter().enumerate() {
            let decoded = enc.decode_target(y[(r, 0)]);
            prop_assert!((decoded - original).abs() <= 1e-9 * original.abs());
        }
    }

    #[test]
    fn model_files_round_trip_exactly(seed in 0u64..1000, width in 1usize..12, act in activation()) {
        let mut csv = String::from("a,b,y\n");
        for i in 0..40 {
            let (a, b) = ((i as f64 + seed as f64).sin(), (i as f64 * 0.3).cos());
            csv += &format!("{a},{b},{}\n", a + b);
        }
        let table = Table::read(csv.as_bytes(), "p", &ReadOptions::default()).unwrap();
        let spec = EncoderSpec { target: "y".into(), ..EncoderSpec::default() };
        let recipe = Recipe { hidden: vec![width], activation: Some(act), seed, ..Recipe::default() }
            .with_config(TrainConfig { epochs: 2, ..TrainConfig::default() });
        let (model, _) = Model::fit(&table, &spec, &recipe, Default::default()).unwrap();
        let back = Model::from_json(&model.to_json()).unwrap();
        prop_assert_eq!(back.members[0].params(), model.members[0].params());
        prop_assert_eq!(back.members[0].specs(), model.members[0].specs());
        prop_assert_eq!(&back.encoder, &model.encoder);
        let x = Array2::from_shape_fn((7, 2), |(i, j)| (i + j) as f32 * 0.3);
        let (mut a, mut b) = (model.members[0].clone(), back.members[0].clone());
        prop_assert_eq!(a.predict(x.view()).unwrap(), b.predict(x.view()).unwrap());
    }
}
