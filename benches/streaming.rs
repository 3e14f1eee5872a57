//! The chunked prediction path of `relume predict`: reading a chunk of CSV (the floor) and
//! predicting it, for a 10-input model of two hidden layers of 64 units.

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use relume::data::{ReadOptions, Table};
use relume::Predictor;
use std::hint::black_box;

const ROWS: usize = 8192;

fn csv_text(inputs: usize) -> String {
    let mut text = (1..=inputs)
        .map(|j| format!("x{j}"))
        .collect::<Vec<_>>()
        .join(",");
    text.push('\n');
    for r in 0..ROWS {
        let row: Vec<String> = (0..inputs)
            .map(|j| format!("{:.5}", ((r * 31 + j * 7) as f64 * 0.01).sin()))
            .collect();
        text += &row.join(",");
        text.push('\n');
    }
    text
}

fn streaming(c: &mut Criterion) {
    let model = relume::sweep::cost::model_for_inputs(10, &[64, 64], 0).expect("model");
    let predictor = Predictor::new(&model);
    let text = csv_text(10);
    let options = ReadOptions::default();
    let mut group = c.benchmark_group("stream_chunk");
    group.throughput(Throughput::Elements(ROWS as u64));
    group.bench_function("read", |b| {
        b.iter(|| Table::read(black_box(text.as_bytes()), "bench", &options).expect("table"))
    });
    let table = Table::read(text.as_bytes(), "bench", &options).expect("table");
    group.bench_function("predict", |b| {
        b.iter(|| predictor.predict_table(black_box(&table)).expect("rows"))
    });
    group.finish();
}

criterion_group!(benches, streaming);
criterion_main!(benches);
