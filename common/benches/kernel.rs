//! Kernel benchmark (prints figures; not a timed test):
//! `cargo bench -p cubehunt-common --bench kernel`.
//!
//! Measures, on one thread, candidates per CPU-second of the main-region kernel on
//! representative slices of the `d` axis at B = 10⁹ and B = 10¹¹, the naive reference path
//! on the same slices in the same run, their ratio, and the constants of the cost model.
//!
//! Times are CPU time of the measuring thread (the machine is shared, so wall time says more
//! about the neighbours than about the kernel); each kernel figure is the best of several runs.
//! The naive path visits every point of a rectangle, so it is timed on a sub-slice of `|z|`
//! of the same `d` slice (every point inside the region) and its cost per point is scaled to
//! the points of the whole slice — generously to it, only the points inside the region count.

use cubehunt_common::kernel::main_region::{cost, estimate_seconds_main, main_z_floor, scan_main};
use cubehunt_common::kernel::naive::scan_main_naive;
use cubehunt_common::{Rect, Region};
use std::time::Instant;

fn rect(d_lo: u64, d_hi: u64, z_lo: u64, z_hi: u64) -> Rect {
    Rect {
        region: Region::Main,
        d_lo,
        d_hi,
        z_lo,
        z_hi,
    }
}

/// CPU time of the calling thread, seconds.
fn cpu_now() -> f64 {
    let mut ts = libc::timespec {
        tv_sec: 0,
        tv_nsec: 0,
    };
    // SAFETY: clock_gettime writes into the timespec we own.
    unsafe { libc::clock_gettime(libc::CLOCK_THREAD_CPUTIME_ID, &mut ts) };
    ts.tv_sec as f64 + ts.tv_nsec as f64 * 1e-9
}

/// Best CPU time of `reps` runs (seconds) and the value of one run.
fn best<T, F: FnMut() -> T>(reps: usize, mut f: F) -> (f64, T) {
    let mut t = f64::INFINITY;
    let mut v = None;
    for _ in 0..reps {
        let s = cpu_now();
        v = Some(f());
        t = t.min(cpu_now() - s);
    }
    (t, v.unwrap())
}

/// Points `(d, |z|)` of the region inside `r` (what the naive path has to visit).
fn region_points(z0: u64, r: &Rect) -> f64 {
    (r.d_lo..r.d_hi)
        .map(|d| r.z_hi.saturating_sub(z0.max(main_z_floor(d)).max(r.z_lo)) as f64)
        .sum()
}

struct Line {
    name: String,
    kernel: f64,
    naive: f64,
}

struct Meas {
    cpu: f64,
    cand: u64,
    classes: u64,
    nd: u64,
}

fn measure(
    k: i64,
    z0: u64,
    name: &str,
    fast: Rect,
    naive: Rect,
    reps: usize,
    lines: &mut Vec<Line>,
) -> Meas {
    let (tf, out) = best(reps, || scan_main(k, &fast, 1, &|_| {}));
    let cf = out.digest.candidates;
    let (tn, nout) = best(1, || scan_main_naive(k, &naive));
    let per_point = tn / region_points(z0, &naive);
    let naive_time = per_point * region_points(z0, &fast);
    let kernel = cf as f64 / tf;
    let naive_rate = cf as f64 / naive_time;
    println!("{name}");
    println!("  kernel: {fast}: {cf} candidates, {tf:.3} CPU-s → {kernel:.3e} candidates/core-s (cost model {:.3} s)", estimate_seconds_main(k, &fast));
    println!(
        "  naive : {naive}: {} candidates, {tn:.3} CPU-s, {per_point:.2e} s/point → {naive_time:.3e} s for the slice → {naive_rate:.3e} candidates/core-s",
        nout.digest.candidates
    );
    println!("  ratio : {:.0}×", kernel / naive_rate);
    lines.push(Line {
        name: name.to_string(),
        kernel,
        naive: naive_rate,
    });
    Meas {
        cpu: tf,
        cand: cf,
        classes: out.digest.classes,
        nd: fast.d_hi - fast.d_lo,
    }
}

fn main() {
    let k = 33;
    let z0 = 5;
    let reps = 3;
    let t_all = Instant::now();
    println!(
        "cubehunt kernel benchmark — main region, k = {k}, one thread, CPU time, best of {reps}"
    );
    println!("slices: small d with the top 2·10⁷ of |z|; middle and large d with their whole |z| column (Z0, B]\n");
    let mut lines = Vec::new();
    let (b9, b11) = (1_000_000_000u64, 100_000_000_000u64);

    let small9 = measure(
        k,
        z0,
        "B=1e9, small d: d ∈ [1, 200), |z| ∈ (B−2·10⁷, B]",
        rect(1, 200, b9 - 20_000_000, b9),
        rect(1, 200, b9 - 20_000, b9),
        reps,
        &mut lines,
    );
    measure(
        k,
        z0,
        "B=1e11, small d: d ∈ [1, 200), |z| ∈ (B−2·10⁷, B]",
        rect(1, 200, b11 - 20_000_000, b11),
        rect(1, 200, b11 - 20_000, b11),
        reps,
        &mut lines,
    );
    let mid = measure(
        k,
        z0,
        "B=1e9, middle d: d ∈ [10⁵, 10⁵+2000), |z| ∈ (Z0, B]",
        rect(100_000, 102_000, z0, b9),
        rect(100_000, 100_010, b9 - 1_000_000, b9),
        reps,
        &mut lines,
    );
    let short = measure(
        k,
        z0,
        "B=1e9, d ≈ 10⁷: d ∈ [10⁷, 10⁷+10⁴), |z| ∈ (Z0, B]",
        rect(10_000_000, 10_010_000, z0, b9),
        rect(10_000_000, 10_000_002, b9 - 1_000_000, b9),
        reps,
        &mut lines,
    );
    let large9 = measure(
        k,
        z0,
        "B=1e9, large d: d ∈ [10⁸, 10⁸+10⁵), |z| ∈ (Z0, B]",
        rect(100_000_000, 100_100_000, z0, b9),
        rect(100_000_000, 100_000_002, b9 - 1_000_000, b9),
        reps,
        &mut lines,
    );
    let large11 = measure(
        k,
        z0,
        "B=1e11, large d: d ∈ [10¹⁰, 10¹⁰+10⁵), |z| ∈ (Z0, B]",
        rect(10_000_000_000, 10_000_100_000, z0, b11),
        rect(10_000_000_000, 10_000_000_002, b11 - 1_000_000, b11),
        reps,
        &mut lines,
    );

    let b13 = 10_000_000_000_000u64;
    let big = measure(
        k,
        z0,
        "B=1e13, large d (beyond words): d ∈ [10¹², 10¹²+2·10⁴), |z| ∈ (Z0, B]",
        rect(1_000_000_000_000, 1_000_000_020_000, z0, b13),
        rect(1_000_000_000_000, 1_000_000_000_001, b13 - 300_000, b13),
        1,
        &mut lines,
    );

    // The cost model on a whole main region (B = 10⁸, every d) and on a mixed rectangle.
    println!("\ncost model against whole rectangles (CPU time, one thread):");
    for (name, r) in [
        (
            "whole main region, B=1e8",
            rect(1, 25_992_105, z0, 100_000_000),
        ),
        (
            "mixed: d ∈ [10³, 10⁶), |z| ∈ (10⁸, 10⁹]",
            rect(1_000, 1_000_000, 100_000_000, b9),
        ),
    ] {
        let (t, out) = best(1, || scan_main(k, &r, 1, &|_| {}));
        let m = estimate_seconds_main(k, &r);
        println!(
            "  {name}: {} candidates, {t:.2} CPU-s; model {m:.2} s (model/measured {:.2})",
            out.digest.candidates,
            m / t
        );
    }

    println!("\nsummary (candidates per core-second, one thread):");
    for l in &lines {
        println!(
            "  {:<56} kernel {:>10.3e}   naive {:>10.3e}   ratio {:>10.0}×",
            l.name,
            l.kernel,
            l.naive,
            l.kernel / l.naive
        );
    }
    // Cost-model constants: per candidate on the pattern path (small d), per d and class
    // (large d, where candidates are few), per candidate on the short path (d ≈ 10⁷).
    let per_cand_sieve = small9.cpu / small9.cand as f64;
    let per_d9 = large9.cpu / large9.nd as f64;
    let per_d11 = large11.cpu / large11.nd as f64;
    println!("\ncost-model constants measured here (compiled-in values in brackets):");
    println!(
        "  per candidate, pattern path : {per_cand_sieve:.3e} s   [{:.3e}]",
        cost::PER_CANDIDATE_SIEVE
    );
    println!(
        "  per candidate, middle d     : {:.3e} s",
        mid.cpu / mid.cand as f64
    );
    println!(
        "  per d at d≈10⁷ (B=1e9)      : {:.3e} s with {:.1} candidates and {:.2} classes per d",
        short.cpu / short.nd as f64,
        short.cand as f64 / short.nd as f64,
        short.classes as f64 / short.nd as f64
    );
    println!("  per d at d≈10⁸ (B=1e9)      : {per_d9:.3e} s with {:.1} candidates and {:.2} classes per d", large9.cand as f64 / large9.nd as f64, large9.classes as f64 / large9.nd as f64);
    println!("  per d at d≈10¹⁰ (B=1e11)    : {per_d11:.3e} s with {:.1} candidates and {:.2} classes per d", large11.cand as f64 / large11.nd as f64, large11.classes as f64 / large11.nd as f64);
    println!(
        "  per d at d≈10¹² (B=1e13)    : {:.3e} s with {:.2} classes per d (GMP per class)",
        big.cpu / big.nd as f64,
        big.classes as f64 / big.nd as f64
    );
    println!(
        "  compiled-in: PER_D_BASE {:.2e} + PER_D_PER_BIT {:.2e}·log2 d, PER_CLASS {:.2e} (GMP {:.2e}), PER_CANDIDATE_SHORT {:.2e}, PER_LONG_CLASS {:.2e}",
        cost::PER_D_BASE, cost::PER_D_PER_BIT, cost::PER_CLASS, cost::PER_CLASS_BIG, cost::PER_CANDIDATE_SHORT, cost::PER_LONG_CLASS
    );
    println!(
        "\ntotal bench wall time {:.1} s",
        t_all.elapsed().as_secs_f64()
    );
}
