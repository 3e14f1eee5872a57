//! The table path of the predictor runs rows through the network a block at a time; every
//! row must get exactly the bits (and the error) of the one-row path, which
//! tests/serving.rs holds to the network's own batch forward pass. Checked over numeric,
//! date and text cells, unseen levels, missing cells and out-of-range values, ensembles of 2
//! and 3 members, ReLU, GELU and PReLU networks, layer widths that fill the register tiles
//! and widths that do not, and every instruction set the CPU has.

use relume::data::{EncoderSpec, Impute, ReadOptions, Table, UnseenPolicy};
use relume::fit::monitor::MonitorConfig;
use relume::kernels::{set_simd_limit, Simd};
use relume::serve::predict::{TableRow, BLOCK_ROWS};
use relume::{Activation, Model, Predictor, Recipe};

fn read(text: &str) -> Table {
    Table::read(text.as_bytes(), "test.csv", &ReadOptions::default()).unwrap()
}

const SITES: [&str; 6] = ["north", "south", "east", "west", "centre", "harbour"];

/// Training rows: y depends on two numbers, a date, a site (the last level is rare and gets
/// pooled) and a colour (no rare level: an unseen colour goes to the levels' average).
fn training_csv(rows: usize, with_missing: bool) -> String {
    let mut s = String::from("a,b,day,site,colour,y\n");
    for i in 0..rows {
        let a = (i as f64 * 0.37).sin() * 3.0;
        let b = if with_missing && i % 17 == 0 {
            String::new()
        } else {
            format!("{:.4}", (i as f64 * 0.11).cos())
        };
        let site = if i % 97 == 0 { SITES[5] } else { SITES[i % 5] };
        let colour = ["red", "blue"][i % 2];
        let day = format!("2021-{:02}-{:02}", 1 + i % 12, 1 + i % 28);
        let y = 2.0 * a + (i % 5) as f64 - 0.5 * (i % 2) as f64 + (i % 12) as f64 * 0.1;
        s += &format!("{a:.4},{b},{day},{site},{colour},{y:.4}\n");
    }
    s
}

/// Rows to predict: ordinary ones mixed with every kind of awkward cell, more rows than one
/// block and not a multiple of the register tile.
fn awkward_csv(rows: usize) -> String {
    let mut s = String::from("a,b,day,site,colour\n");
    for i in 0..rows {
        let a = match i % 23 {
            3 => "40".to_string(),    // out of range
            7 => "1e300".to_string(), // too large to compute with
            11 => "-0.0".to_string(), // a signed zero
            _ => format!("{:.3}", (i as f64 * 0.29).cos() * 3.5),
        };
        let b = if i % 13 == 5 {
            String::new() // missing
        } else {
            format!("{:.3}", (i as f64 * 0.07).sin())
        };
        let day = match i % 31 {
            4 => "2021-13-40".to_string(), // not a date
            9 => String::new(),            // missing
            _ => format!("2022-{:02}-{:02}", 1 + i % 12, 1 + i % 27),
        };
        let site = match i % 19 {
            2 => "moon", // unseen: the pooled level
            6 => "",     // missing
            _ => SITES[i % 6],
        };
        let colour = match i % 29 {
            1 => "green", // unseen, no pooled level: the levels' average
            _ => ["red", "blue"][i % 2],
        };
        s += &format!("{a},{b},{day},{site},{colour}\n");
    }
    s
}

fn model(activation: Activation, hidden: &[usize], members: usize, spec: &EncoderSpec) -> Model {
    let recipe = Recipe {
        hidden: hidden.to_vec(),
        activation: Some(activation),
        members,
        ..Recipe::default()
    };
    let table = read(&training_csv(240, spec.impute.is_some()));
    Model::fit(&table, spec, &recipe, MonitorConfig::default())
        .unwrap()
        .0
}

/// The table path against the one-row path, row by row, bit for bit.
fn assert_same_as_rows(predictor: &Predictor, table: &Table, what: &str) -> Vec<TableRow> {
    let rows = predictor.predict_table(table).unwrap();
    assert_eq!(rows.len(), table.rows());
    let names = predictor.feature_names();
    let columns: Vec<_> = names.iter().map(|n| table.column(n).unwrap()).collect();
    let mut scratch = predictor.scratch();
    let bits = |v: Option<f64>| v.map(f64::to_bits);
    let (mut predicted, mut failed) = (0, 0);
    for (r, got) in rows.iter().enumerate() {
        let cells: Vec<_> = columns.iter().map(|c| c.cell(r)).collect();
        assert_eq!(got.line, table.lines[r], "{what} row {r}");
        match predictor.predict_row(&cells, &mut scratch) {
            Ok(p) => {
                predicted += 1;
                let flagged = |flags: &[bool]| -> Vec<String> {
                    names
                        .iter()
                        .zip(flags)
                        .filter(|(_, &f)| f)
                        .map(|(n, _)| n.to_string())
                        .collect()
                };
                assert_eq!(
                    (bits(got.value), bits(got.lower), bits(got.upper)),
                    (Some(p.value.to_bits()), bits(p.lower), bits(p.upper)),
                    "{what} row {r}: {:?} vs {p:?}",
                    got.value
                );
                assert_eq!(got.out_of_range, flagged(scratch.out_of_range()), "{what}");
                assert_eq!(got.unseen, flagged(scratch.unseen()), "{what}");
                assert_eq!(got.error, None, "{what} row {r}");
            }
            Err(e) => {
                failed += 1;
                assert_eq!(got.error, Some(predictor.explain(&e)), "{what} row {r}");
                assert_eq!(got.value, None, "{what} row {r}");
                assert!(got.out_of_range.is_empty() && got.unseen.is_empty());
            }
        }
    }
    // The table exercises both outcomes.
    assert!(
        predicted > 2 * BLOCK_ROWS && failed > 10,
        "{what}: {predicted} / {failed}"
    );
    rows
}

#[test]
fn the_table_path_gives_every_row_the_bits_of_the_row_path() {
    let flag = EncoderSpec {
        target: "y".into(),
        impute: Some(Impute::Mean),
        ..EncoderSpec::default()
    };
    let strict = EncoderSpec {
        target: "y".into(),
        unseen: UnseenPolicy::Error,
        ..EncoderSpec::default()
    };
    let prelu = Activation::Prelu {
        init: 0.25,
        shared: false,
    };
    let cases = [
        (
            "relu 32,16 x2",
            model(Activation::Relu, &[32, 16], 2, &flag),
        ),
        (
            "gelu 20,33 x3",
            model(Activation::Gelu, &[20, 33], 3, &flag),
        ),
        (
            "relu 16 x2 strict",
            model(Activation::Relu, &[16], 2, &strict),
        ),
        ("prelu 48,16 x2", model(prelu, &[48, 16], 2, &flag)),
    ];
    let table = read(&awkward_csv(3 * BLOCK_ROWS + 7));
    let mut saw_unseen = false;
    for (what, model) in &cases {
        let predictor = Predictor::new(model);
        let mut results = Vec::new();
        // Every instruction set this CPU has, one after the other (the limit is global, so
        // this is the only test in the file).
        for simd in [Simd::Baseline, Simd::Avx2, Simd::Avx512] {
            set_simd_limit(simd);
            results.push(assert_same_as_rows(&predictor, &table, what));
        }
        set_simd_limit(Simd::Avx512);
        assert!(results.windows(2).all(|w| w[0] == w[1]), "{what}");
        saw_unseen |= results[0].iter().any(|r| !r.unseen.is_empty());
        // A table smaller than one block.
        let few = read(&awkward_csv(5));
        let rows = predictor.predict_table(&few).unwrap();
        assert_eq!(rows[..], results[0][..5], "{what}");
    }
    assert!(saw_unseen);
}
