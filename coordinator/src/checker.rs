//! The checker: the coordinator's own computations, which the certificates rest on — the
//! pieces drawn from each report (spot checks) and the units the organiser's side recomputes
//! in full (the sampled share, units in review, units of a quarantined worker).
//!
//! It takes jobs from the store ([`Store::check_jobs`]), runs each with the kernel on its own
//! threads at the lowest scheduling priority (so that serving is never slowed by it), and
//! hands the results back to the store, which applies [`crate::lifecycle`] to them. It keeps
//! nothing in memory that a restart would need: an unfinished job is still waiting in the
//! store and is done again.
//!
//! What it does not do: decide anything. Whether a result proves a report wrong is the
//! lifecycle's rule, applied in the store's transaction.

use crate::api::Shared;
use crate::lifecycle::Outcome;
use crate::store::{CheckJob, CheckResult, LeasePolicy, Store};
use cubehunt_common::kernel;
use std::sync::{mpsc, Arc, Mutex};
use std::time::Duration;
use tokio::sync::oneshot;

/// Jobs fetched per thread per round.
const JOBS_PER_THREAD: i64 = 4;
/// Wait between rounds when there is nothing to do (or until a report wakes it).
const IDLE_WAIT: Duration = Duration::from_secs(5);

type Task = (CheckJob, oneshot::Sender<Result<Outcome, String>>);

/// Start the checker with `threads` compute threads; `None` when `threads` is 0.
pub fn spawn(st: Shared, threads: usize) -> Option<tokio::task::JoinHandle<()>> {
    if threads == 0 {
        return None;
    }
    let (tx, rx) = mpsc::channel::<Task>();
    let rx = Arc::new(Mutex::new(rx));
    for i in 0..threads {
        let rx = rx.clone();
        std::thread::Builder::new()
            .name(format!("checker-{i}"))
            .spawn(move || compute_loop(rx))
            .expect("a checker thread can be started");
    }
    Some(tokio::spawn(
        async move { round_loop(st, tx, threads).await },
    ))
}

fn compute_loop(rx: Arc<Mutex<mpsc::Receiver<Task>>>) {
    lower_thread_priority();
    loop {
        let task = rx.lock().expect("checker queue").recv();
        let Ok((job, answer)) = task else { return };
        let _ = answer.send(compute(&job));
    }
}

/// Run one job with the kernel on this thread.
pub fn compute(job: &CheckJob) -> Result<Outcome, String> {
    let (k, rect) = match job {
        CheckJob::Piece { k, rect, .. } | CheckJob::Unit { k, rect, .. } => (*k, *rect),
    };
    let out = kernel::scan(k, &rect, 1, &|_| {}).map_err(|e| e.to_string())?;
    // Only the solutions that belong to the rectangle (as reports list them).
    let mine = out
        .solutions
        .into_iter()
        .filter(|s| s.in_rect(&rect))
        .collect();
    Ok(Outcome::new(out.digest, mine))
}

async fn round_loop(st: Shared, tx: mpsc::Sender<Task>, threads: usize) {
    loop {
        let jobs = match st.store.check_jobs(JOBS_PER_THREAD * threads as i64).await {
            Ok(j) => j,
            Err(e) => {
                tracing::error!(error = %e, "checker: cannot read its jobs");
                Vec::new()
            }
        };
        if jobs.is_empty() {
            let _ = tokio::time::timeout(IDLE_WAIT, st.checker.notified()).await;
            continue;
        }
        let mut waiting = Vec::new();
        for job in jobs {
            let (atx, arx) = oneshot::channel();
            if tx.send((job.clone(), atx)).is_err() {
                return;
            }
            waiting.push((job, arx));
        }
        for (job, arx) in waiting {
            let Ok(result) = arx.await else { return };
            record(&st.store, &st.policy, &job, result).await;
        }
    }
}

/// Do every waiting job now, on the calling task's runtime (blocking threads), until none is
/// left; returns how many were done. For tests and for running the checks by hand.
pub async fn run_all(store: &Store, policy: &LeasePolicy) -> crate::store::Result<usize> {
    let mut done = 0;
    let mut seen: Vec<CheckJob> = Vec::new();
    loop {
        let jobs: Vec<CheckJob> = store
            .check_jobs(64)
            .await?
            .into_iter()
            .filter(|j| !seen.contains(j))
            .collect();
        if jobs.is_empty() {
            return Ok(done);
        }
        seen.extend(jobs.iter().cloned());
        for job in jobs {
            let j = job.clone();
            let result = tokio::task::spawn_blocking(move || compute(&j))
                .await
                .unwrap_or_else(|e| Err(e.to_string()));
            record(store, policy, &job, result).await;
            done += 1;
        }
    }
}

async fn record(
    store: &Store,
    policy: &LeasePolicy,
    job: &CheckJob,
    result: Result<Outcome, String>,
) {
    let outcome = match result {
        Ok(o) => o,
        Err(e) => {
            tracing::error!(?job, error = %e, "checker: the kernel refused a job (a planning defect)");
            return;
        }
    };
    let now = crate::now();
    let done = match job {
        CheckJob::Piece { check_id, .. } => {
            store
                .complete_spot_check(*check_id, &outcome, policy, now)
                .await
        }
        CheckJob::Unit { unit_id, .. } => {
            store
                .complete_recheck(*unit_id, &outcome, "coordinator", policy, now)
                .await
        }
    };
    match done {
        Ok(CheckResult::Failed { worker_id }) => {
            tracing::warn!(
                ?job,
                worker = worker_id,
                "checker: a report was proven wrong"
            )
        }
        Ok(_) => tracing::debug!(?job, "checker: done"),
        Err(e) => tracing::error!(?job, error = %e, "checker: cannot record a result"),
    }
}

/// Lowest scheduling priority for the calling thread (nice 19; on Linux also SCHED_IDLE).
fn lower_thread_priority() {
    #[cfg(target_os = "linux")]
    unsafe {
        // SAFETY: plain system calls on the calling thread with valid arguments.
        let tid = libc::syscall(libc::SYS_gettid) as libc::id_t;
        libc::setpriority(libc::PRIO_PROCESS, tid, 19);
        let param = libc::sched_param { sched_priority: 0 };
        libc::sched_setscheduler(0, libc::SCHED_IDLE, &param);
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::lifecycle::piece_confirms;
    use cubehunt_common::{pieces, Rect, Region, Solution, UnitSpec, KERNEL_VERSION};

    fn unit(k: i64, rect: Rect, cost: u64) -> UnitSpec {
        UnitSpec {
            unit_id: 1,
            campaign: "t".into(),
            k,
            bound: rect.z_hi,
            kernel: KERNEL_VERSION.into(),
            rect,
            cost,
        }
    }

    /// An honest report (what the worker sends: every piece's digest, the unit's own
    /// solutions) is confirmed on every piece, including pieces where the kernel meets a
    /// solution through a coordinate that is not its smallest (k = 29 = 1 + 1 + 27 =
    /// (−3)³ + (−2)³ + 4³, from memory, verified exactly here; brute force over the pieces).
    #[test]
    fn every_piece_of_an_honest_report_is_confirmed() {
        let small = |z_lo, z_hi| Rect {
            region: Region::Small,
            d_lo: 0,
            d_hi: 0,
            z_lo,
            z_hi,
        };
        let main = |z_lo| Rect {
            region: Region::Main,
            d_lo: 1,
            d_hi: 300,
            z_lo,
            z_hi: 3000,
        };
        assert!(Solution::new(1, 1, 3).verify(29) && Solution::new(-3, -2, 4).verify(29));
        for (k, rect) in [
            (29i64, small(0, 5)),
            (29, small(2, 5)),
            (3, main(1)),
            (29, main(5)),
        ] {
            let spec = unit(k, rect, 2_000_000);
            let ps = pieces::of_unit(&spec);
            assert!(ps.len() > 1);
            let outs: Vec<Outcome> = ps
                .iter()
                .map(|p| {
                    compute(&CheckJob::Piece {
                        check_id: 0,
                        unit_id: 1,
                        k,
                        rect: *p,
                    })
                    .unwrap()
                })
                .collect();
            let mut claimed: Vec<Solution> = ps
                .iter()
                .flat_map(|p| kernel::scan(k, p, 1, &|_| {}).unwrap().solutions)
                .filter(|s| s.in_rect(&rect))
                .collect();
            claimed.sort();
            claimed.dedup();
            for (p, o) in ps.iter().zip(&outs) {
                assert!(
                    piece_confirms(&o.digest, &claimed, p, o, Solution::in_rect),
                    "k={k} {rect}: piece {p} not confirmed"
                );
            }
            let whole = compute(&CheckJob::Unit {
                unit_id: 1,
                k,
                rect,
            })
            .unwrap();
            assert_eq!(whole.solutions, claimed, "k={k} {rect}");
        }
    }
}
