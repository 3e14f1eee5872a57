//! Forward and backward cost of each activation per element, on 1M f32 values, beside a plain
//! copy of the same buffer as the floor; then the slice kernels again with the instruction set
//! capped at AVX2 (`set_simd_limit`), for CPUs without AVX-512.

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use relume::kernels::{set_simd_limit, simd_level, Simd};
use relume::Activation;
use std::hint::black_box;

const N: usize = 1 << 20;

fn inputs() -> Vec<f32> {
    // A deterministic spread over [-4, 4).
    (0..N)
        .map(|i| ((i * 7919) % 8000) as f32 / 1000.0 - 4.0)
        .collect()
}

fn bench_activations(c: &mut Criterion) {
    let x = inputs();
    let mut y = vec![0.0_f32; N];
    let mut group = c.benchmark_group("activation_1m_f32");
    group.throughput(Throughput::Elements(N as u64));
    group.bench_function("copy_floor", |b| {
        b.iter(|| y.copy_from_slice(black_box(&x)))
    });
    for act in Activation::all() {
        group.bench_function(format!("{}_value", act.name()), |b| {
            b.iter(|| {
                for (o, &v) in y.iter_mut().zip(black_box(&x)) {
                    *o = act.value(v);
                }
            })
        });
        group.bench_function(format!("{}_derivative", act.name()), |b| {
            b.iter(|| {
                for (o, &v) in y.iter_mut().zip(black_box(&x)) {
                    *o = act.derivative(v);
                }
            })
        });
        // The slice kernels the layers use (the variant chosen once per call).
        group.bench_function(format!("{}_forward_kernel", act.name()), |b| {
            b.iter(|| act.apply(black_box(&x), &mut y))
        });
        let g = vec![1.0_f32; N];
        let mut d = vec![0.0_f32; N];
        group.bench_function(format!("{}_backward_kernel", act.name()), |b| {
            b.iter(|| act.apply_derivative(black_box(&x), &g, &mut d))
        });
    }
    group.finish();
}

fn bench_activations_avx2(c: &mut Criterion) {
    set_simd_limit(Simd::Avx2);
    let x = inputs();
    let g = vec![1.0_f32; N];
    let (mut y, mut d) = (vec![0.0_f32; N], vec![0.0_f32; N]);
    let mut group = c.benchmark_group(format!("activation_1m_f32_{:?}", simd_level()));
    group.throughput(Throughput::Elements(N as u64));
    for act in Activation::all() {
        group.bench_function(format!("{}_forward_kernel", act.name()), |b| {
            b.iter(|| act.apply(black_box(&x), &mut y))
        });
        group.bench_function(format!("{}_backward_kernel", act.name()), |b| {
            b.iter(|| act.apply_derivative(black_box(&x), &g, &mut d))
        });
    }
    group.finish();
    set_simd_limit(Simd::Avx512);
}

criterion_group!(benches, bench_activations, bench_activations_avx2);
criterion_main!(benches);
