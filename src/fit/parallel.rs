//! Independent training runs spread over the cores (the `parallel` feature), or run one by
//! one without it. Either way the results come back in input order and are the same bits:
//! each run depends only on its own input.

/// `f` applied to every item, in input order; on every core with the `parallel` feature.
#[cfg(feature = "parallel")]
pub fn map_in_order<T: Sync, R: Send>(items: &[T], f: impl Fn(&T) -> R + Sync + Send) -> Vec<R> {
    use rayon::prelude::*;
    items.par_iter().map(f).collect()
}

/// `f` applied to every item, in input order; on every core with the `parallel` feature.
#[cfg(not(feature = "parallel"))]
pub fn map_in_order<T: Sync, R: Send>(items: &[T], f: impl Fn(&T) -> R + Sync + Send) -> Vec<R> {
    items.iter().map(f).collect()
}
