//! Helper threads for splitting one large product (or loop) into parts. The threads start on
//! first use; between jobs they spin for a short while (training posts jobs every few
//! microseconds, and a sleeping thread takes tens of microseconds to wake) and then sleep on a
//! condition variable. Handing out work allocates nothing. One caller at a time uses the
//! helpers; a second concurrent caller runs its parts itself, which keeps training runs in
//! parallel (say, a comparison sweep) from oversubscribing the cores.

use std::panic::{catch_unwind, resume_unwind, AssertUnwindSafe};
use std::sync::atomic::{AtomicBool, AtomicU64, AtomicUsize, Ordering};
use std::sync::{Condvar, Mutex, MutexGuard};
use std::time::{Duration, Instant};

/// A job shared with the helpers: called once with each part index in `1..parts`.
type Job<'a> = dyn Fn(usize) + Sync + 'a;

/// The job's address with its lifetime erased; valid while it is posted, because the caller
/// does not return (or unwind) before every part has finished.
#[derive(Clone, Copy)]
struct JobPtr(*const Job<'static>);

// SAFETY: the pointee is `Sync` and outlives every use (see `JobPtr`).
unsafe impl Send for JobPtr {}

/// How long a helper spins for the next job, and the caller for the helpers, before sleeping
/// (common practice, no source: a few times the cost of a wake-up).
const SPIN: Duration = Duration::from_micros(200);

struct State {
    job: Option<JobPtr>,
    next: usize,
    parts: usize,
    /// Helpers waiting on `work`.
    sleepers: usize,
    /// The caller waits on `done`.
    caller_sleeps: bool,
}

struct Pool {
    state: Mutex<State>,
    /// Bumped whenever a job is posted; spinning helpers watch it.
    posted: AtomicU64,
    /// Parts of the posted job (other than part 0) not finished yet.
    running: AtomicUsize,
    panicked: AtomicBool,
    work: Condvar,
    done: Condvar,
    busy: AtomicBool,
    /// Helper threads started so far (only grows).
    helpers: Mutex<usize>,
}

static POOL: Pool = Pool {
    state: Mutex::new(State {
        job: None,
        next: 0,
        parts: 0,
        sleepers: 0,
        caller_sleeps: false,
    }),
    posted: AtomicU64::new(0),
    running: AtomicUsize::new(0),
    panicked: AtomicBool::new(false),
    work: Condvar::new(),
    done: Condvar::new(),
    busy: AtomicBool::new(false),
    helpers: Mutex::new(0),
};

fn lock(m: &Mutex<State>) -> MutexGuard<'_, State> {
    // A poisoned lock only means a part panicked; that is reported through `panicked`.
    m.lock().unwrap_or_else(|e| e.into_inner())
}

/// Starts helper threads until there are `wanted`; returns how many there are.
fn ensure_helpers(wanted: usize) -> usize {
    let mut started = POOL.helpers.lock().unwrap_or_else(|e| e.into_inner());
    while *started < wanted {
        let spawned = std::thread::Builder::new()
            .name(format!("relume-helper-{started}"))
            .spawn(helper);
        if spawned.is_err() {
            // Fewer helpers only means more parts run on the caller; nothing is lost.
            break;
        }
        *started += 1;
    }
    *started
}

/// Spins until `done()` holds or [`SPIN`] has passed; true if it holds.
fn spin_until(done: impl Fn() -> bool) -> bool {
    let start = Instant::now();
    let mut spins = 0_u32;
    while !done() {
        std::hint::spin_loop();
        spins = spins.wrapping_add(1);
        if spins.is_multiple_of(1024) && start.elapsed() > SPIN {
            return false;
        }
    }
    true
}

/// Marks one part finished, waking the caller if it sleeps and this was the last part.
fn finish_part() {
    if POOL.running.fetch_sub(1, Ordering::AcqRel) == 1 {
        let state = lock(&POOL.state);
        if state.caller_sleeps {
            POOL.done.notify_all();
        }
    }
}

/// Calls [`finish_part`] when dropped, also while unwinding.
struct FinishOnDrop;

impl Drop for FinishOnDrop {
    fn drop(&mut self) {
        finish_part();
    }
}

fn helper() {
    let pool = &POOL;
    let mut seen = pool.posted.load(Ordering::Acquire);
    loop {
        spin_until(|| pool.posted.load(Ordering::Acquire) != seen);
        let mut state = lock(&pool.state);
        while state.job.is_none() || state.next >= state.parts {
            state.sleepers += 1;
            state = pool.work.wait(state).unwrap_or_else(|e| e.into_inner());
            state.sleepers -= 1;
        }
        seen = pool.posted.load(Ordering::Acquire);
        let part = state.next;
        state.next += 1;
        let job = state.job.expect("checked above");
        drop(state);
        // SAFETY: `job` stays valid until `running` drops to zero, which needs this part.
        let ok = catch_unwind(AssertUnwindSafe(|| unsafe { (*job.0)(part) })).is_ok();
        if !ok {
            pool.panicked.store(true, Ordering::Release);
        }
        finish_part();
    }
}

/// Runs `job(0..parts)`: part 0 (and any part no helper takes) on the calling thread, the
/// others on up to `threads − 1` helper threads; returns when all parts are done. A panic in
/// any part is raised again here after every part has stopped.
pub(crate) fn run(threads: usize, parts: usize, job: &Job<'_>) {
    if parts <= 1 || threads <= 1 {
        (0..parts).for_each(job);
        return;
    }
    let pool = &POOL;
    if ensure_helpers(threads - 1) == 0
        || pool
            .busy
            .compare_exchange(false, true, Ordering::Acquire, Ordering::Relaxed)
            .is_err()
    {
        (0..parts).for_each(job);
        return;
    }
    // SAFETY (lifetime erasure): this function waits below until no part is running and then
    // clears the job, so no helper can call it after `job`'s borrow ends.
    let erased: *const Job<'static> =
        unsafe { std::mem::transmute::<&Job<'_>, &'static Job<'static>>(job) };
    let wake = {
        let mut state = lock(&pool.state);
        state.job = Some(JobPtr(erased));
        state.next = 1;
        state.parts = parts;
        pool.panicked.store(false, Ordering::Relaxed);
        pool.running.store(parts - 1, Ordering::Release);
        pool.posted.fetch_add(1, Ordering::AcqRel);
        state.sleepers > 0
    };
    if wake {
        pool.work.notify_all();
    }
    let mine = catch_unwind(AssertUnwindSafe(|| {
        job(0);
        // Help with parts no helper has started yet.
        loop {
            let part = {
                let mut state = lock(&pool.state);
                if state.next >= state.parts {
                    break;
                }
                state.next += 1;
                state.next - 1
            };
            // Finished even if it panics, so the wait below ends.
            let _finish = FinishOnDrop;
            job(part);
        }
    }));
    let all_done = || pool.running.load(Ordering::Acquire) == 0;
    let mut state = if spin_until(all_done) {
        lock(&pool.state)
    } else {
        let mut state = lock(&pool.state);
        state.caller_sleeps = true;
        while !all_done() {
            state = pool.done.wait(state).unwrap_or_else(|e| e.into_inner());
        }
        state.caller_sleeps = false;
        state
    };
    state.job = None;
    state.parts = 0;
    drop(state);
    let helper_panicked = pool.panicked.load(Ordering::Acquire);
    pool.busy.store(false, Ordering::Release);
    if let Err(payload) = mine {
        resume_unwind(payload);
    }
    if helper_panicked {
        panic!("a helper thread panicked while running part of a product");
    }
}

#[cfg(test)]
mod tests {
    use super::run;
    use std::sync::atomic::{AtomicUsize, Ordering};

    #[test]
    fn every_part_runs_once_and_a_panicking_part_is_reported_to_the_caller() {
        for _ in 0..200 {
            let hits: Vec<AtomicUsize> = (0..5).map(|_| AtomicUsize::new(0)).collect();
            run(2, 5, &|p| {
                hits[p].fetch_add(1, Ordering::Relaxed);
            });
            assert!(hits.iter().all(|h| h.load(Ordering::Relaxed) == 1));
        }
        for bad in [0, 1, 3] {
            let caught = std::panic::catch_unwind(|| {
                run(2, 4, &|p| {
                    if p == bad {
                        panic!("part {p} fails");
                    }
                })
            });
            assert!(caught.is_err(), "part {bad}'s panic reached the caller");
        }
        // Still usable afterwards.
        let sum = AtomicUsize::new(0);
        run(2, 3, &|p| {
            sum.fetch_add(p + 1, Ordering::Relaxed);
        });
        assert_eq!(sum.load(Ordering::Relaxed), 6);
    }
}
