//! How initialization carries a signal through deep stacks, against the published analyses.

mod common;

use common::{normal_matrix, second_moment, square_stack};
use relume::{Activation, Init, Pass};

#[test]
fn he_init_keeps_the_second_moment_through_30_relu_layers() {
    // He et al. 2015, "Delving Deep into Rectifiers", Eq. 10: with Var[w] = 2/n the product
    // ∏ ½·n·Var[w] is 1, so E[x²] neither grows nor shrinks with depth.
    let x = normal_matrix(512, 256, 1);
    let mut net = square_stack::<f64>(256, 30, Init::HE, Activation::Relu, 2);
    let out = net.forward(x.view(), Pass::Infer).unwrap().to_owned();
    let ratio = second_moment(&out) / second_moment(&x);
    println!("He, 30 ReLU layers: output/input second moment = {ratio:.4}");
    assert!((0.5..=2.0).contains(&ratio), "ratio {ratio}");
}

#[test]
fn glorot_init_shrinks_the_second_moment_through_30_relu_layers() {
    // Glorot & Bengio 2010 give Var[w] = 2/(n_in+n_out) = 1/n here; with ReLU, half of each
    // layer's variance is lost (He et al. 2015, Sec. 2.2), so 30 layers shrink it by ~2^-30.
    let x = normal_matrix(512, 256, 1);
    let glorot_normal = Init::Glorot {
        draw: relume::Draw::Normal,
    };
    let mut net = square_stack::<f64>(256, 30, glorot_normal, Activation::Relu, 2);
    let out = net.forward(x.view(), Pass::Infer).unwrap().to_owned();
    let ratio = second_moment(&out) / second_moment(&x);
    println!("Glorot, 30 ReLU layers: output/input second moment = {ratio:.3e}");
    assert!(ratio < 1e-6, "ratio {ratio}");
}

#[test]
fn selu_with_lecun_normal_self_normalizes_over_32_layers() {
    // Klambauer et al. 2017: with LeCun-normal weights, SELU activations tend to mean 0 and
    // variance 1 with depth.
    let x = normal_matrix(1024, 256, 3);
    let mut net = square_stack::<f64>(256, 32, Init::LECUN, Activation::Selu, 4);
    let out = net.forward(x.view(), Pass::Infer).unwrap().to_owned();
    let n = out.len() as f64;
    let mean = out.sum() / n;
    let var = out.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>() / n;
    println!("SELU, 32 layers: mean {mean:.4}, variance {var:.4}");
    assert!(mean.abs() < 0.1, "mean {mean}");
    assert!((var - 1.0).abs() < 0.15, "variance {var}");
}

#[test]
fn about_half_of_first_layer_relu_outputs_are_exact_zeros() {
    // Glorot, Bordes & Bengio 2011: with symmetric weights and zero bias about half of the
    // rectifier outputs are exactly zero.
    let x = normal_matrix(1000, 64, 5);
    let mut net = square_stack::<f64>(64, 1, Init::HE, Activation::Relu, 6);
    let out = net.forward(x.view(), Pass::Infer).unwrap().to_owned();
    let zeros = out.iter().filter(|&&v| v == 0.0).count() as f64 / out.len() as f64;
    println!("fraction of exact zeros after the first ReLU layer: {zeros:.4}");
    assert!((zeros - 0.5).abs() <= 0.03, "zero fraction {zeros}");
}
