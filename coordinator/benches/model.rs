//! What the density model costs per target in the running product, and what the cache saves
//! (prints figures; not a timed test):
//! `cargo bench -p cubehunt-coordinator --bench model [-- TARGETS BOUND]`.
//!
//! Measures, on one thread: building the prime table of the Euler product at the default
//! truncation (once per process), computing the figures of TARGETS admissible k (default 300,
//! from 3 up) at BOUND (default 1e12) one after another — the cost of a target at creation —,
//! and looking every one of them up again in the cache, which is what a request does.

use cubehunt_common::heuristic::SeriesTable;
use cubehunt_common::{kernel, numarg};
use cubehunt_coordinator::model::{self, ModelCache, PRIME_BOUND};
use std::sync::Arc;
use std::time::Instant;

fn cpu_seconds() -> f64 {
    let mut u: libc::rusage = unsafe { std::mem::zeroed() };
    unsafe { libc::getrusage(libc::RUSAGE_SELF, &mut u) };
    let t = |v: libc::timeval| v.tv_sec as f64 + v.tv_usec as f64 * 1e-6;
    t(u.ru_utime) + t(u.ru_stime)
}

fn main() {
    let args: Vec<String> = std::env::args()
        .skip(1)
        .filter(|a| a != "--bench")
        .collect();
    let n: usize = args.first().and_then(|a| a.parse().ok()).unwrap_or(300);
    let bound = args
        .get(1)
        .map(|b| numarg::parse_u64(b).expect("BOUND"))
        .unwrap_or(1_000_000_000_000);
    let ks: Vec<i64> = (3i64..)
        .filter(|&k| kernel::check_target(k).is_ok())
        .take(n)
        .collect();

    let (c0, w0) = (cpu_seconds(), Instant::now());
    let table = SeriesTable::new(PRIME_BOUND).unwrap();
    let (table_cpu, table_wall) = (cpu_seconds() - c0, w0.elapsed().as_secs_f64());

    let (c1, w1) = (cpu_seconds(), Instant::now());
    let mut sum = 0.0;
    for &k in &ks {
        sum += model::figures(&table, k, bound).expected_total;
    }
    let (fig_cpu, fig_wall) = (cpu_seconds() - c1, w1.elapsed().as_secs_f64());

    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .unwrap();
    let cache = Arc::new(ModelCache::default());
    let keys: Vec<(i64, u64)> = ks.iter().map(|&k| (k, bound)).collect();
    rt.block_on(cache.get(&keys)); // fill (on every core; not timed)
    let rounds = 200;
    let w2 = Instant::now();
    let mut hits = 0usize;
    for _ in 0..rounds {
        hits += rt.block_on(cache.get(&keys)).len();
    }
    let lookup_wall = w2.elapsed().as_secs_f64();
    assert_eq!(hits, rounds * ks.len());

    let per_target = fig_cpu / ks.len() as f64;
    let per_lookup = lookup_wall / (rounds * ks.len()) as f64;
    println!(
        "prime table to p <= {PRIME_BOUND}: {:.1} ms CPU ({:.1} ms wall), once per process",
        table_cpu * 1e3,
        table_wall * 1e3
    );
    println!(
        "figures of {} targets at bound {bound}: {:.3} ms CPU per target ({:.3} ms wall); sum of expected {sum:.3}",
        ks.len(),
        per_target * 1e3,
        fig_wall / ks.len() as f64 * 1e3
    );
    println!(
        "cached lookup: {:.3} µs per target, {:.0}x cheaper than computing; a view of 1000 targets would cost {:.2} s computed vs {:.2} ms cached",
        per_lookup * 1e6,
        per_target / per_lookup,
        per_target * 1000.0,
        per_lookup * 1000.0 * 1e3
    );
}
