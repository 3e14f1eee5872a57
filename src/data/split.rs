//! Seeded row splits: holdout, k-fold, and k-fold stratified by target quantile.

use crate::nn::init::rng_from_seed;
use rand::seq::SliceRandom;

/// A seeded split of `0..rows` into (training, held-out) rows, `fraction` of them held out,
/// each part in ascending order. The same as the trainer's own validation split.
pub fn holdout(rows: usize, fraction: f64, seed: u64) -> (Vec<usize>, Vec<usize>) {
    let n = (rows as f64 * fraction).round() as usize;
    crate::fit::train::holdout_indices(rows, n.min(rows), seed)
}

/// `k` seeded folds of `0..rows`: (training rows, held-out rows) per fold; every row is held
/// out exactly once. `k` is clamped to 2..=rows.
pub fn kfold(rows: usize, k: usize, seed: u64) -> Vec<(Vec<usize>, Vec<usize>)> {
    let mut order: Vec<usize> = (0..rows).collect();
    order.shuffle(&mut rng_from_seed(seed));
    folds_from_order(&order, k)
}

/// Like [`kfold`], but each fold gets a share of every target quantile band: rows are sorted by
/// target and dealt to the folds in turn, in seeded random order within each band of k rows.
pub fn stratified_kfold(target: &[f64], k: usize, seed: u64) -> Vec<(Vec<usize>, Vec<usize>)> {
    let k = k.clamp(2, target.len().max(2));
    let mut by_target: Vec<usize> = (0..target.len()).collect();
    by_target.sort_by(|&a, &b| target[a].total_cmp(&target[b]).then(a.cmp(&b)));
    let mut rng = rng_from_seed(seed);
    let mut assignment = vec![0; target.len()];
    for band in by_target.chunks(k) {
        let mut slots: Vec<usize> = (0..k).collect();
        slots.shuffle(&mut rng);
        for (&row, &fold) in band.iter().zip(&slots) {
            assignment[row] = fold;
        }
    }
    (0..k)
        .map(|f| {
            let (test, train): (Vec<usize>, Vec<usize>) =
                (0..target.len()).partition(|&r| assignment[r] == f);
            (train, test)
        })
        .collect()
}

fn folds_from_order(order: &[usize], k: usize) -> Vec<(Vec<usize>, Vec<usize>)> {
    let rows = order.len();
    let k = k.clamp(2, rows.max(2));
    (0..k)
        .map(|f| {
            let mut test: Vec<usize> = order.iter().skip(f).step_by(k).copied().collect();
            test.sort_unstable();
            let mut train: Vec<usize> = (0..rows)
                .filter(|r| test.binary_search(r).is_err())
                .collect();
            train.sort_unstable();
            (train, test)
        })
        .collect()
}
