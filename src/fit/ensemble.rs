//! Seed ensembles with the weight penalty chosen on the data.
//!
//! Members differ only in their seed (initialization and shuffling) and share the training
//! and early-stopping rows (Lakshminarayanan, Pritzel & Blundell 2017 train members on the
//! whole set; no bootstrap: see DEVELOPERS.md for the measurements). Before the members, the L2
//! strength is picked from [`PENALTY_GRID`] by the first member's best early-stopping loss;
//! that run becomes the first member. Runs go in parallel over the cores (with the `parallel` feature,
//! all at once so the cores stay busy to the end: [`map_all_at_once`]); each is
//! seeded, so the result does not depend on the thread count.

use crate::fit::monitor::MonitorConfig;
use crate::fit::parallel::map_all_at_once;
use crate::fit::recipe::{Recipe, ScaledRows, Trained};
use crate::fit::train::TrainError;
use crate::report::RunReport;
use ndarray::ArrayView2;

/// One training run: the trained network and, if watched, its report.
type RunOutcome = Result<(Trained<f32>, Option<RunReport>), TrainError>;

/// Members trained unless the recipe says otherwise.
pub const DEFAULT_MEMBERS: usize = 5;
/// L2 strengths on weights tried on the early-stopping rows. 0 keeps the certified low-noise
/// fits possible.
pub const PENALTY_GRID: [f64; 4] = [0.0, 1e-4, 1e-3, 1e-2];
/// Above this many training rows the grid is skipped and the recipe's own penalty is used
/// (large tables regularize themselves, and each grid point costs a full training).
pub const PENALTY_GRID_ROWS: usize = 20_000;

/// A run of the first member with an L2 strength, or of a later member with the recipe's own.
#[derive(Clone, Copy)]
enum Job {
    First(f64),
    Member(usize),
}

/// A trained ensemble.
#[derive(Debug)]
pub struct Ensemble {
    /// The members, the first one trained with the recipe's seed.
    pub members: Vec<Trained<f32>>,
    /// The first member's run report.
    pub report: RunReport,
    /// The L2 strength used, and each grid point's best early-stopping loss (empty if no grid
    /// was run).
    pub l2: f64,
    /// (L2 strength, best early-stopping loss) of every grid point tried.
    pub grid: Vec<(f64, Option<f64>)>,
}

/// The recipe with another L2 strength on weights in every size regime.
pub fn with_l2(recipe: &Recipe, l2: f64) -> Recipe {
    let mut r = recipe.clone();
    r.train.objective.penalty.l2 = l2;
    if let Some(small) = r.small_tables.as_mut() {
        small.objective.penalty.l2 = l2;
    }
    r
}

/// The recipe of member `m`: every seed moved by `m`.
fn member(recipe: &Recipe, m: usize) -> Recipe {
    let mut r = recipe.clone();
    let shift = m as u64;
    r.seed = recipe.seed.wrapping_add(shift);
    r.train.seed = recipe.train.seed.wrapping_add(shift);
    if let Some(small) = r.small_tables.as_mut() {
        small.seed = small.seed.wrapping_add(shift);
    }
    r
}

/// Trains `recipe.members` members on the rows `train` of `x` → `y`, early-stopping on `stop`
/// (which may be empty: no validation), choosing the L2 strength first when
/// `recipe.choose_penalty` is on, there are early-stopping rows and at most
/// [`PENALTY_GRID_ROWS`] training rows. `done` is called after each finished run with (runs
/// done, runs in all).
pub fn fit_ensemble(
    recipe: &Recipe,
    x: ArrayView2<'_, f32>,
    y: ArrayView2<'_, f32>,
    train: &[usize],
    stop: &[usize],
    monitor: MonitorConfig,
    done: &(dyn Fn(usize, usize) + Sync),
) -> Result<Ensemble, TrainError> {
    let rows = recipe.scale_rows(x, y, train, stop)?;
    fit_ensemble_scaled(recipe, &rows, monitor, done)
}

/// [`fit_ensemble`] on rows already copied out and scaled by [`Recipe::scale_rows`] (every run
/// shares them), so that a caller can let go of its own copy of the table before training.
pub fn fit_ensemble_scaled(
    recipe: &Recipe,
    rows: &ScaledRows<f32>,
    monitor: MonitorConfig,
    done: &(dyn Fn(usize, usize) + Sync),
) -> Result<Ensemble, TrainError> {
    let k = recipe.members.max(1);
    let grid: Vec<f64> =
        if recipe.choose_penalty && rows.has_validation() && rows.train_rows() <= PENALTY_GRID_ROWS
        {
            PENALTY_GRID.to_vec()
        } else {
            Vec::new()
        };
    let total = grid.len().max(1) + k - 1;
    let finished = std::sync::atomic::AtomicUsize::new(0);
    let tick = || {
        let n = finished.fetch_add(1, std::sync::atomic::Ordering::Relaxed) + 1;
        done(n, total);
    };
    let run = |r: &Recipe, watch: bool| {
        let out = r.fit_scaled(rows, &mut [], watch.then_some(monitor));
        tick();
        out
    };
    // The first member, for each grid point (or once with the recipe's own penalty).
    let first = member(recipe, 0);
    let candidates: Vec<f64> = if grid.is_empty() {
        vec![recipe.train.objective.penalty.l2]
    } else {
        grid.clone()
    };
    // Without a grid nothing waits on the first run: every member starts at once.
    let together: Vec<usize> = if grid.is_empty() {
        (1..k).collect()
    } else {
        Vec::new()
    };
    let jobs: Vec<Job> = candidates
        .iter()
        .map(|&l2| Job::First(l2))
        .chain(together.iter().map(|&m| Job::Member(m)))
        .collect();
    let mut outcomes = map_all_at_once(&jobs, |job| match *job {
        Job::First(_) if grid.is_empty() => run(&first, true),
        Job::First(l2) => run(&with_l2(&first, l2), true),
        Job::Member(m) => run(&member(recipe, m), false),
    });
    let together_done = outcomes.split_off(candidates.len());
    let runs: Vec<(f64, RunOutcome)> = candidates.iter().copied().zip(outcomes).collect();
    let scores: Vec<(f64, Option<f64>)> = runs
        .iter()
        .map(|(l2, r)| {
            (
                *l2,
                r.as_ref().ok().and_then(|(t, _)| t.summary.best_val_loss),
            )
        })
        .collect();
    let mut best: Option<(f64, Trained<f32>, RunReport)> = None;
    let mut first_error = None;
    for (l2, result) in runs {
        match result {
            Ok((trained, report)) => {
                let loss = trained.summary.best_val_loss.unwrap_or(f64::INFINITY);
                let better = best.as_ref().is_none_or(|(_, b, _)| {
                    loss < b.summary.best_val_loss.unwrap_or(f64::INFINITY)
                });
                if better {
                    best = Some((l2, trained, report.expect("watched runs report")));
                }
            }
            Err(e) => {
                first_error.get_or_insert(e);
            }
        }
    }
    let Some((l2, first_member, report)) = best else {
        return Err(first_error.expect("at least one run"));
    };
    let chosen = if grid.is_empty() {
        recipe.clone()
    } else {
        with_l2(recipe, l2)
    };
    let rest: Vec<Trained<f32>> = if grid.is_empty() {
        together_done
    } else {
        let indices: Vec<usize> = (1..k).collect();
        map_all_at_once(&indices, |&m| run(&member(&chosen, m), false))
    }
    .into_iter()
    .map(|outcome| outcome.map(|(t, _)| t))
    .collect::<Result<_, _>>()?;
    let mut members = vec![first_member];
    members.extend(rest);
    Ok(Ensemble {
        members,
        report,
        l2,
        grid: if grid.is_empty() { Vec::new() } else { scores },
    })
}
