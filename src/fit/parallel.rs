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

/// Most runs started at once per core by [`map_all_at_once`] (common practice, no source:
/// enough to keep the cores busy to the end, few enough that their buffers stay small).
pub const RUNS_PER_CORE: usize = 4;

/// Like [`map_in_order`], for a few long runs of about equal length: when there are more runs
/// than cores (rayon's current thread count), all of them start at once on their own threads
/// (at most [`RUNS_PER_CORE`] per core, the next run starting when one ends), so the operating
/// system shares the cores out evenly. Run one core-sized group after another instead and 5
/// runs on 2 cores take 3 run-lengths, the last with a core idle; at once they take about 2.5.
#[cfg(feature = "parallel")]
pub fn map_all_at_once<T: Sync, R: Send>(items: &[T], f: impl Fn(&T) -> R + Sync + Send) -> Vec<R> {
    use std::sync::atomic::{AtomicUsize, Ordering};
    use std::sync::Mutex;
    let cores = rayon::current_num_threads();
    if cores <= 1 || items.len() <= cores {
        return map_in_order(items, f);
    }
    let workers = items.len().min(cores * RUNS_PER_CORE);
    let next = AtomicUsize::new(0);
    let results: Vec<Mutex<Option<R>>> = items.iter().map(|_| Mutex::new(None)).collect();
    std::thread::scope(|scope| {
        for _ in 0..workers {
            scope.spawn(|| loop {
                let i = next.fetch_add(1, Ordering::Relaxed);
                let Some(item) = items.get(i) else { break };
                let out = f(item);
                *results[i].lock().unwrap_or_else(|e| e.into_inner()) = Some(out);
            });
        }
    });
    results
        .into_iter()
        .map(|slot| {
            slot.into_inner()
                .unwrap_or_else(|e| e.into_inner())
                .expect("every run finished (a panicking run ends the scope first)")
        })
        .collect()
}

/// Like [`map_in_order`], for a few long runs of about equal length (one by one without the
/// `parallel` feature).
#[cfg(not(feature = "parallel"))]
pub fn map_all_at_once<T: Sync, R: Send>(items: &[T], f: impl Fn(&T) -> R + Sync + Send) -> Vec<R> {
    map_in_order(items, f)
}

#[cfg(all(test, feature = "parallel"))]
mod tests {
    use super::*;

    #[test]
    fn runs_started_at_once_come_back_in_input_order() {
        let items: Vec<u64> = (0..11).collect();
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(2)
            .build()
            .unwrap();
        let seen = std::sync::atomic::AtomicUsize::new(0);
        let out = pool.install(|| {
            map_all_at_once(&items, |&i| {
                // Later items finish first.
                std::thread::sleep(std::time::Duration::from_millis(12 - i));
                seen.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
                i * i
            })
        });
        assert_eq!(out, items.iter().map(|i| i * i).collect::<Vec<_>>());
        assert_eq!(seen.into_inner(), items.len());
    }
}
