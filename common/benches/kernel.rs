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
//!
//! Sections (pass one or more names after `--` to run only those; default all):
//! * `rates` — the figures above, and the cost-model constants;
//! * `paths` — ns per `d` of the large-`d` kernel, fast path against the reference path
//!   (classic table sieve, `g(0)` in GMP) in the same run, at `d ≈ 10⁹, 10¹², 2·10¹⁵` and the
//!   top of the main region (`d ≈ 2⁶¹`: the region ends at `α·(2⁶³ − 1)`, so `d ≈ 2⁶²` has no
//!   points), and the factor sieve alone at `d ≈ 2⁶²`;
//! * `segment` — the factor sieve alone at `d ≈ 2·10¹⁵` for several segment lengths;
//! * `extrapolate` — CPU time of a whole main region `B = 10¹⁶`, by sampling the `d` axis.

#![allow(clippy::manual_is_multiple_of)] // `is_multiple_of` is newer than our MSRV (1.80)

use cubehunt_common::kernel::main_region::{
    cost, digest_counts_main, estimate_seconds_main, main_d_end, main_z_floor, scan_main,
    scan_main_path, Path,
};
use cubehunt_common::kernel::naive::scan_main_naive;
use cubehunt_common::kernel::segsieve::{self, SegScratch, SieveTable};
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

fn want(section: &str) -> bool {
    let args: Vec<String> = std::env::args()
        .skip(1)
        .filter(|a| !a.starts_with('-'))
        .collect();
    args.is_empty() || args.iter().any(|a| a == section)
}

fn main() {
    if let Ok(spec) = std::env::var("CUBEHUNT_PROFILE") {
        // one case for a profiler: "fast|reference,k,d,w,z_hi" (not part of the default run)
        let v: Vec<&str> = spec.split(',').collect();
        let path = if v[0] == "fast" {
            Path::Fast
        } else {
            Path::Reference
        };
        let n = |i: usize| v[i].parse::<u64>().expect("number");
        let (ns, c, _) = per_d(n(1) as i64, path, n(2), n(3), n(4));
        println!("{spec}: {ns:.1} ns/d, {c} classes");
        return;
    }
    if want("paths") {
        paths();
    }
    if want("segment") {
        segment();
    }
    if want("extrapolate") {
        extrapolate();
    }
    if want("rates") {
        rates();
    }
}

/// ns per d of both paths on `[d, d + w)`, `|z| ∈ (L(d), z_hi]`.
fn per_d(k: i64, path: Path, d: u64, w: u64, z_hi: u64) -> (f64, u64, u64) {
    let r = rect(d, d + w, main_z_floor(d), z_hi);
    let (t, out) = best(1, || scan_main_path(k, &r, 1, &|_| {}, path));
    (
        t / w as f64 * 1e9,
        out.digest.classes,
        out.digest.candidates,
    )
}

fn paths() {
    let k = 114;
    println!(
        "large-d kernel, k = {k}, one thread, CPU time: ns per d, fast path vs reference path"
    );
    println!("(|z| from the region floor L(d) to B = 5·d, about one candidate per class — the large-d regime of B = 10¹⁶ at d ≈ 2·10¹⁵)");
    let top = i64::MAX as u64;
    let d61 = main_d_end(top) - 12_000_000;
    // (label, d, width fast, width reference, z_hi)
    let cases: [(&str, u64, u64, u64, u64); 4] = [
        (
            "d ≈ 1e9",
            1_000_000_000,
            10_000_000,
            10_000_000,
            5_000_000_000,
        ),
        (
            "d ≈ 1e12",
            1_000_000_000_000,
            10_000_000,
            10_000_000,
            5_000_000_000_000,
        ),
        (
            "d ≈ 2e15",
            2_000_000_000_000_000,
            10_000_000,
            10_000_000,
            10_000_000_000_000_000,
        ),
        ("d ≈ 2^61 (top of region)", d61, 10_000_000, 20_000, top),
    ];
    for (label, d, wf, wr, z_hi) in cases {
        let (nf, cf, kf) = per_d(k, Path::Fast, d, wf, z_hi);
        let (nr, cr, kr) = per_d(k, Path::Reference, d, wr, z_hi);
        println!(
            "  {label:<26} fast {nf:>9.1} ns/d ({wf} d, {:.2} classes/d, {:.2} candidates/d)   reference {nr:>9.1} ns/d ({wr} d, {:.2} classes/d)   ratio {:.1}×",
            cf as f64 / wf as f64,
            kf as f64 / wf as f64,
            cr as f64 / wr as f64,
            nr / nf
        );
        let _ = kr;
    }
    // the factor sieve alone (roots of k mod every d) at d ≈ 2⁶², where no region point exists
    let d = 1u64 << 62;
    for w in [10_000_000u64, 40_000_000] {
        let (t, n) = best(1, || {
            let tab = SieveTable::new(k, d + w);
            let mut sc = SegScratch::default();
            let mut n = 0u64;
            segsieve::for_each_d(&tab, d, d + w, &mut sc, |_, r| n += r.len() as u64);
            n
        });
        println!(
            "  factor sieve alone, d ∈ [2^62, 2^62 + {w}): {:.1} ns/d ({:.3} roots/d; includes generating the primes up to 2^31 once)",
            t / w as f64 * 1e9,
            n as f64 / w as f64
        );
    }
    let t_ref = {
        let w = 2_000u64;
        let (t, _) = best(1, || {
            (d..d + w)
                .map(|x| cubehunt_common::kernel::arith::cube_roots_mod(k, x).len())
                .sum::<usize>()
        });
        t / w as f64 * 1e9
    };
    println!("  reference at d ≈ 2^62 (Pollard–Brent per d, as the table path does beyond √d = 2^26): {t_ref:.0} ns/d\n");
}

fn segment() {
    let k = 114;
    let (d, w) = (2_000_000_000_000_000u64, 10_000_000u64);
    println!(
        "factor sieve alone at d ∈ [2·10¹⁵, 2·10¹⁵ + 10⁷), k = {k}: ns per d by segment length"
    );
    for bits in [12u32, 13, 14, 15, 16, 17, 18] {
        let (t, _) = best(1, || {
            let tab = SieveTable::with_seg(k, d + w, 1 << bits);
            let mut sc = SegScratch::default();
            let mut n = 0u64;
            segsieve::for_each_d(&tab, d, d + w, &mut sc, |_, r| n += r.len() as u64);
            n
        });
        println!("  segment 2^{bits:<2}: {:.1} ns/d", t / w as f64 * 1e9);
    }
    println!();
}

/// Whole main region at B = 10¹⁶: sample the d axis at 3 points per decade (geometric
/// middles of the bins [10^(i/3), 10^((i+1)/3))). At each, count the candidates per d of the
/// whole |z| column (Z0, B] on a probe of up to 1000 d (counting is cheap), then scan about
/// 3·10⁷ candidates: as many consecutive d with their whole column as that allows (large d:
/// up to 2·10⁶ d), or, when one column alone holds more, the top part of the column of up to
/// 16 d (classes there are still ≥ 10⁶ long, so the same pattern-path regime), scaling the time
/// by candidates. The per-d time, times the bin width, summed over the bins, is the estimate.
fn extrapolate() {
    let b: u64 = 10_000_000_000_000_000;
    let budget = 3e7;
    println!("extrapolation to a whole main region, B = 10¹⁶, one core");
    for (k, path) in [
        (114i64, Path::Fast),
        (33, Path::Fast),
        (114, Path::Reference),
    ] {
        let z0 = cubehunt_common::kernel::arith::isqrt_u64(k as u64);
        let d_end = main_d_end(b);
        let mut total = 0.0f64;
        let mut lo = 1u64;
        let mut i = 0u32;
        println!(
            "  k = {k}, {path:?} path: d range [1, {d_end}); per-d CPU time at sample points:"
        );
        while lo < d_end {
            let hi = ((10f64.powf((i + 1) as f64 / 3.0)) as u64).clamp(lo + 1, d_end);
            let mid = ((lo as f64 * hi as f64).sqrt() as u64).clamp(lo, hi - 1);
            let probe = (hi - mid).min(1000);
            let per_d_cand = digest_counts_main(k, &rect(mid, mid + probe, z0, b)).candidates
                as f64
                / probe as f64;
            let (w, z_lo) = if per_d_cand * 16.0 <= budget {
                let w = ((budget / per_d_cand.max(1.0)) as u64)
                    .clamp(1, 2_000_000)
                    .min(hi - mid);
                (w, z0)
            } else {
                let w = (hi - mid).min(16);
                let column = (b - main_z_floor(mid).max(z0)) as f64;
                let span = (budget / (per_d_cand * w as f64) * column) as u64;
                (w, b - span.min(b - z0))
            };
            let slice = rect(mid, mid + w, z_lo, b);
            let (t, out) = best(1, || scan_main_path(k, &slice, 1, &|_| {}, path));
            let per_d = if z_lo == z0 {
                t / w as f64
            } else {
                // the column's candidates of these w d, from the same count
                let full = digest_counts_main(k, &rect(mid, mid + w, z0, b)).candidates as f64;
                t * full / out.digest.candidates.max(1) as f64 / w as f64
            };
            total += per_d * (hi - lo) as f64;
            if i % 3 == 0 || hi == d_end {
                println!(
                    "    d ≈ {mid:>9.2e}: {per_d:.3e} s/d ({per_d_cand:.3e} candidates/d; {w} d{})",
                    if z_lo > z0 {
                        ", top of the column"
                    } else {
                        ", whole column"
                    },
                    mid = mid as f64
                );
            }
            lo = hi;
            i += 1;
        }
        let model = estimate_seconds_main(k, &rect(1, d_end, z0, b));
        println!(
            "  k = {k}, {path:?} path: about {:.1} core-years for the main region to B = 10¹⁶ (cost model of the fast path: {:.1} core-years)\n",
            total / 3.156e7,
            model / 3.156e7
        );
    }
}

fn rates() {
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
