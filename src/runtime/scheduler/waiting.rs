//! A worker waiting for work: claiming a ready block under the lock, and
//! between claims a short watch for new work before sleeping.

use super::picking::{WAKE_WORTH, helper_gain, pick};
use super::step::{forward_all, forward_to};
use super::{Claimed, Shared, State, StopReason, lock};
use lobeflow_blocks::{BlockError, Item, Outputs};
use std::sync::MutexGuard;
use std::sync::atomic::Ordering;
use std::time::{Duration, Instant};

/// How long a worker that found nothing to do watches for work before it
/// sleeps: a few capture reads, the usual wait in a chain. (Waking a sleeping
/// worker took up to 4 ms on a virtual machine; at 50 us a worker often fell
/// asleep just before a read ended.)
pub(super) const SPIN_FOR: Duration = Duration::from_micros(200);
/// The shortest watch: after watches that found nothing a worker halves its
/// next one down to this, so a worker with nothing to do mostly sleeps
/// instead of burning a core another thread (or process) could use.
pub(super) const SPIN_MIN: Duration = Duration::from_micros(25);

/// Wait for a block that can make progress and take it out to run, with
/// its input items in `batch`; None once the run is over (stopped,
/// cancelled, every block done, or stalled). `spin_for` is this worker's
/// current watch before sleeping (see `watch_for_work`).
pub(super) fn claim<'a>(
    sh: &'a Shared,
    mut st: MutexGuard<'a, State>,
    batch: &mut Vec<(usize, Item)>,
    spin_for: &mut Duration,
) -> (MutexGuard<'a, State>, Option<Claimed>) {
    let mut spun = false;
    loop {
        if st.stop.is_some() || st.done == st.nodes.len() {
            sh.wake.notify_all();
            return (st, None);
        }
        if sh.cancel.load(Ordering::SeqCst) {
            st.stop.get_or_insert(StopReason::Cancelled);
            sh.wake.notify_all();
            return (st, None);
        }
        let mut picked = pick(&mut st, sh.capacity, false, batch);
        if picked.is_none() && st.running == 0 {
            // Nothing can run: queue every held-back item, then overfill.
            if forward_all(&mut st) {
                picked = pick(&mut st, sh.capacity, false, batch);
            }
            if picked.is_none() {
                picked = pick(&mut st, sh.capacity, true, batch);
            }
        }
        if let Some((idx, step)) = picked {
            // Room on its inputs now: what their producers hold back moves up.
            forward_to(&mut st, idx, sh.burst_limit);
            let nd = &mut st.nodes[idx];
            nd.running = true;
            let block = nd.block.take().expect("a node not running holds its block");
            let out = std::mem::replace(&mut nd.out, Outputs::new(0));
            st.running += 1;
            // More work than this worker takes, enough that sharing it
            // pays for the wake-up: wake a sleeping one.
            if st.idle > 0 && helper_gain(&st, idx, sh.capacity) >= WAKE_WORTH {
                sh.wake.notify_one();
            }
            return (st, Some(Claimed { idx, step, block, out }));
        }
        if st.running == 0 {
            // Nothing can run and nothing is running: a scheduler bug.
            let name = st.nodes.iter().find(|n| !n.done).map(|n| n.name.to_string()).unwrap_or_default();
            st.stop = Some(StopReason::Failed {
                block: name,
                kind: String::new(),
                error: BlockError::new("the graph stalled (internal error)"),
            });
            sh.wake.notify_all();
            return (st, None);
        }
        if sh.threads > 1 && !spun {
            // Work usually turns up within a step of another worker:
            // watching for it briefly costs less than sleeping and being
            // woken (a system call each side, and the wake-up latency).
            let seen = sh.changes.load(Ordering::Acquire);
            drop(st);
            spun = true;
            watch_for_work(sh, seen, spin_for);
            st = lock(sh);
            continue;
        }
        spun = false;
        st.idle += 1;
        st = sh.wake.wait_timeout(st, Duration::from_millis(100)).unwrap_or_else(|e| e.into_inner()).0;
        st.idle -= 1;
    }
}

/// Watch for a change of the scheduler's state (since `seen`) for up to
/// `spin_for`, then adapt it: a watch that saw work keeps watching long next
/// time (doubled up to `SPIN_FOR`), one that saw none is halved (down to
/// `SPIN_MIN`), so an idle worker soon sleeps on the condition variable.
/// Between checks it yields its core, which on a shared core lets the
/// worker it waits for run.
pub(super) fn watch_for_work(sh: &Shared, seen: u64, spin_for: &mut Duration) {
    let t0 = Instant::now();
    let mut rounds = 0u32;
    loop {
        if sh.changes.load(Ordering::Acquire) != seen {
            *spin_for = (*spin_for * 2).min(SPIN_FOR);
            return;
        }
        if t0.elapsed() >= *spin_for {
            *spin_for = (*spin_for / 2).max(SPIN_MIN);
            return;
        }
        rounds += 1;
        if rounds.is_multiple_of(8) {
            std::thread::yield_now();
        } else {
            for _ in 0..64 {
                std::hint::spin_loop();
            }
        }
    }
}
