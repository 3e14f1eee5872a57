//! Helper threads for splitting one large product (or loop) into parts. The threads start on
//! first use and then wait on a condition variable, so handing out work allocates nothing.
//! One caller at a time uses them; a second concurrent caller runs its parts itself, which keeps
//! training runs in parallel (say, a comparison sweep) from oversubscribing the cores.

use std::panic::{catch_unwind, resume_unwind, AssertUnwindSafe};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Condvar, Mutex, MutexGuard};

/// A job shared with the helpers: called once with each part index in `1..parts`.
type Job<'a> = dyn Fn(usize) + Sync + 'a;

/// The job's address with its lifetime erased; valid while `State::parts` is non-zero, because
/// the caller does not return before every part has finished.
#[derive(Clone, Copy)]
struct JobPtr(*const Job<'static>);

// SAFETY: the pointee is `Sync` and outlives every use (see `JobPtr`).
unsafe impl Send for JobPtr {}

struct State {
    job: Option<JobPtr>,
    next: usize,
    parts: usize,
    running: usize,
    panicked: bool,
}

struct Pool {
    state: Mutex<State>,
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
        running: 0,
        panicked: false,
    }),
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
            .spawn(|| helper(&POOL));
        if spawned.is_err() {
            // Fewer helpers only means more parts run on the caller; nothing is lost.
            break;
        }
        *started += 1;
    }
    *started
}

fn helper(pool: &'static Pool) {
    let mut state = lock(&pool.state);
    loop {
        while state.job.is_none() || state.next >= state.parts {
            state = pool.work.wait(state).unwrap_or_else(|e| e.into_inner());
        }
        let part = state.next;
        state.next += 1;
        let job = state.job.expect("checked above");
        drop(state);
        // SAFETY: `job` stays valid until `running` drops to zero, which needs this part.
        let ok = catch_unwind(AssertUnwindSafe(|| unsafe { (*job.0)(part) })).is_ok();
        state = lock(&pool.state);
        state.panicked |= !ok;
        state.running -= 1;
        if state.running == 0 {
            pool.done.notify_all();
        }
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
    {
        let mut state = lock(&pool.state);
        state.job = Some(JobPtr(erased));
        state.next = 1;
        state.parts = parts;
        state.running = parts - 1;
        state.panicked = false;
    }
    pool.work.notify_all();
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
                state.running -= 1;
                state.next - 1
            };
            job(part);
        }
    }));
    let mut state = lock(&pool.state);
    while state.running > 0 {
        state = pool.done.wait(state).unwrap_or_else(|e| e.into_inner());
    }
    state.job = None;
    state.parts = 0;
    let helper_panicked = state.panicked;
    drop(state);
    pool.busy.store(false, Ordering::Release);
    if let Err(payload) = mine {
        resume_unwind(payload);
    }
    if helper_panicked {
        panic!("a helper thread panicked while running part of a product");
    }
}
