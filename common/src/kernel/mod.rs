//! The search kernel (docs/method.md): every solution of `x³ + y³ + z³ = k` in one rectangle of
//! one region, with the digest of the work.
//!
//! Public surface (stable; the coordinator, the worker and the audit build on it):
//! * [`check_target`] — refuse `k` with no solutions (`±4 mod 9`), cubes, 0, out of range.
//! * [`z0`], [`domain`], [`main_z_floor`] — the geometry of the three regions.
//! * [`check_rect`] — is a rectangle a valid piece of its region for this `k`?
//! * [`scan`] — run one rectangle on `threads` threads.
//! * [`candidates`] — the candidate count of a rectangle, without doing the work.
//! * [`estimate_seconds`] — the cost model: seconds on one reference core.
//!
//! Additions: [`check_target_allowing_cube`] and [`check_rect_allowing_cube`] (a cube `k` is
//! searched for its non-trivial solutions only), [`check_bound`], [`cube_root`], [`domains`]
//! (the non-empty regions up to a bound), [`solve`] (all regions up to a bound, as `solo`
//! does) and [`estimate_candidates`] (a cheap approximation of [`candidates`] for progress).
//!
//! Code map: [`small`] (S, by factoring), [`equal`] (E, brute force then convergents of ∛2),
//! [`main_region`] with [`segsieve`] (its reference: [`sieve`]), [`survivor`] and [`arith`] (C,
//! Booker's method), and the
//! naive paths used by the tests, [`naive_se`] (S and E) and `naive` (C). Each region module
//! documents the digest fields it produces. `scan` checks the rectangle, turns a negative
//! `k` into a positive one, dispatches, and verifies every solution in GMP.
//!
//! What this module does not do: choose rectangles (the coordinator plans), talk to anyone,
//! or touch the file system.

use crate::{Digest, Rect, Region, Solution};

pub mod arith;
mod divisors;
pub mod equal;
mod exact;
pub mod main_region;
#[doc(hidden)]
pub mod naive;
pub mod naive_se;
pub mod segsieve;
pub mod sieve;
pub mod small;
pub mod survivor;

pub use equal::{cbrt2_convergents, z1};
pub use main_region::survivor_hash;

/// Largest `|z|` supported: `2⁶³ − 1`.
pub const MAX_Z: u64 = i64::MAX as u64;
/// Largest `|k|` supported.
pub const MAX_K: i64 = 1 << 40;

#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum KernelError {
    #[error("k = {k} ≡ {r} (mod 9) has no solutions: every cube is 0 or ±1 mod 9, so a sum of three cubes is never ±4 mod 9. Choose another k.")]
    NoSolutionsMod9 { k: i64, r: i64 },
    #[error("k = {k} is a cube ({c}³): it has the infinite trivial family ({c}, t, −t). Choose a k that is not a cube.")]
    Cube { k: i64, c: i64 },
    #[error("k = 0 has the trivial solutions (t, −t, 0) for every t (and no others, by Fermat for exponent 3). Choose k ≠ 0.")]
    Zero,
    #[error("|k| = {0} exceeds the supported range (|k| ≤ 2^40).")]
    KOutOfRange(i64),
    #[error("bound must be at least 1 (got {0})")]
    BoundTooSmall(u64),
    #[error("bound {0} exceeds the supported range (|z| ≤ 2^63 − 1)")]
    BoundOutOfRange(u64),
    #[error("rectangle {rect} is not valid for k = {k}: {why}")]
    BadRect { k: i64, rect: Rect, why: String },
}

/// A target checked by [`check_target`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Target {
    pub k: i64,
    /// `⌊√|k|⌋`: the small region is `|z| ≤ z0`.
    pub z0: u64,
}

/// `Some(c)` with `c³ = k` when `k` is a perfect cube.
pub fn cube_root(k: i64) -> Option<i64> {
    exact::exact_cbrt_i128(k as i128).map(|c| c as i64)
}

/// Everything [`check_target`] checks except "k is a cube".
pub fn check_target_allowing_cube(k: i64) -> Result<Target, KernelError> {
    if k == 0 {
        return Err(KernelError::Zero);
    }
    if k.unsigned_abs() > MAX_K as u64 {
        return Err(KernelError::KOutOfRange(k));
    }
    match k.rem_euclid(9) {
        4 => return Err(KernelError::NoSolutionsMod9 { k, r: 4 }),
        5 => return Err(KernelError::NoSolutionsMod9 { k, r: -4 }),
        _ => {}
    }
    Ok(Target { k, z0: z0(k) })
}

/// Refuse `k` that cannot or must not be searched; otherwise the target with its `Z0`.
///
/// Refused: `k = 0`; `|k| > 2⁴⁰`; `k ≡ ±4 (mod 9)` (no solutions: cubes are `0, ±1 mod 9`);
/// `k` a cube (the infinite trivial family `(c, t, −t)`). A cube can still be searched for
/// its non-trivial solutions with [`scan`], after [`check_target_allowing_cube`].
pub fn check_target(k: i64) -> Result<Target, KernelError> {
    let t = check_target_allowing_cube(k)?;
    if let Some(c) = cube_root(k) {
        return Err(KernelError::Cube { k, c });
    }
    Ok(t)
}

/// Refuse a bound below 1 or above `2⁶³ − 1`.
pub fn check_bound(bound: u64) -> Result<(), KernelError> {
    if bound < 1 {
        return Err(KernelError::BoundTooSmall(bound));
    }
    if bound > MAX_Z {
        return Err(KernelError::BoundOutOfRange(bound));
    }
    Ok(())
}

/// `Z0 = ⌊√|k|⌋`.
pub fn z0(k: i64) -> u64 {
    k.unsigned_abs().isqrt()
}

/// For the main region: the largest `t` with `t ≤ d/α` (α = ∛2 − 1), computed exactly, so
/// that the main region at `d` is `|z| > max(Z0, main_z_floor(d))`.
pub fn main_z_floor(d: u64) -> u64 {
    main_region::main_z_floor(d)
}

/// The whole of one region of target `k` up to `bound`, as one rectangle:
/// small `(0, Z0∧B]` (with `z = 0`), equal `(Z0, B]`, main `[1, D) × (Z0, B]` with `D` the least
/// `d` such that `d > αB`. Returns `None` when the region is empty (e.g. `B ≤ Z0` for equal/main).
pub fn domain(k: i64, bound: u64, region: Region) -> Option<Rect> {
    let z0 = z0(k);
    let bound = bound.min(MAX_Z);
    match region {
        Region::Small => Some(Rect {
            region,
            d_lo: 0,
            d_hi: 0,
            z_lo: 0,
            z_hi: z0.min(bound),
        }),
        Region::Equal => (bound > z0).then_some(Rect {
            region,
            d_lo: 0,
            d_hi: 0,
            z_lo: z0,
            z_hi: bound,
        }),
        Region::Main => {
            let d_hi = main_region::main_d_end(bound); // least d with d > α·bound
            (bound > z0 && d_hi > 1).then_some(Rect {
                region,
                d_lo: 1,
                d_hi,
                z_lo: z0,
                z_hi: bound,
            })
        }
    }
}

/// The non-empty regions of target `k` up to `bound`, in the order small, equal, main.
pub fn domains(k: i64, bound: u64) -> Vec<Rect> {
    Region::ALL
        .iter()
        .filter_map(|&r| domain(k, bound, r))
        .collect()
}

/// Whether `rect` is a valid piece of its region for `k` (see [`crate::unit`] for the rules).
///
/// Refused: a `d` axis other than `[0, 0)` in the small and equal regions; `d_lo = 0` or
/// `d_lo ≥ d_hi` or `d_hi > 2⁶³` in the main region; `z_lo ≥ z_hi`; `z_hi > 2⁶³ − 1`; a small
/// rectangle reaching above `Z0`; an equal or main rectangle reaching down to `|z| ≤ Z0`; a main
/// rectangle with no point of the region (every point has `d ≥ α|z|`; a tiling may simply
/// leave such a tile out). And every `k` that [`check_target`] refuses.
pub fn check_rect(k: i64, rect: &Rect) -> Result<(), KernelError> {
    check_target(k)?;
    check_rect_shape(k, rect)
}

/// [`check_rect`] for a `k` that may be a cube (only non-trivial solutions are searched).
pub fn check_rect_allowing_cube(k: i64, rect: &Rect) -> Result<(), KernelError> {
    check_target_allowing_cube(k)?;
    check_rect_shape(k, rect)
}

fn check_rect_shape(k: i64, rect: &Rect) -> Result<(), KernelError> {
    let bad = |why: String| {
        Err(KernelError::BadRect {
            k,
            rect: *rect,
            why,
        })
    };
    let z0 = z0(k);
    if rect.z_lo >= rect.z_hi {
        return bad(format!(
            "the |z| range ({}, {}] is empty: it needs z_lo < z_hi",
            rect.z_lo, rect.z_hi
        ));
    }
    if rect.z_hi > MAX_Z {
        return bad(format!(
            "|z| ≤ {} exceeds the supported range |z| ≤ 2^63 − 1 = {MAX_Z}",
            rect.z_hi
        ));
    }
    match rect.region {
        Region::Small | Region::Equal if (rect.d_lo, rect.d_hi) != (0, 0) => {
            bad(format!("the {} region has no d axis: give d = [0, 0)", rect.region))
        }
        Region::Small if rect.z_hi > z0 => bad(format!(
            "the small region is |z| ≤ Z0 = ⌊√|k|⌋ = {z0}; |z| above it belongs to the equal and main regions"
        )),
        Region::Equal | Region::Main if rect.z_lo < z0 => bad(format!(
            "the {} region is |z| > Z0 = ⌊√|k|⌋ = {z0}, so z_lo must be at least {z0}; smaller |z| belong to the small region",
            rect.region
        )),
        Region::Main if rect.d_lo == 0 => bad("the main region has d ≥ 1: d_lo must be at least 1".into()),
        Region::Main if rect.d_lo >= rect.d_hi => {
            bad(format!("the d range [{}, {}) is empty: it needs d_lo < d_hi", rect.d_lo, rect.d_hi))
        }
        Region::Main if rect.d_hi > 1 << 63 => bad(format!("d_hi = {} exceeds the supported d_hi ≤ 2^63", rect.d_hi)),
        Region::Main if main_z_floor(rect.d_lo) >= rect.z_hi => bad(format!(
            "no point lies in the main region: it needs |z| > d/α (α = ∛2 − 1), but d ≥ {} means |z| > {} ≥ z_hi",
            rect.d_lo,
            main_z_floor(rect.d_lo)
        )),
        _ => Ok(()),
    }
}

/// What a scan found.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ScanOutput {
    pub digest: Digest,
    /// Canonical triples, sorted, without repeats, each verified exactly.
    pub solutions: Vec<Solution>,
}

/// Progress callback: called from any thread with the number of candidates just finished.
pub type Progress<'a> = &'a (dyn Fn(u64) + Sync);

/// Search one rectangle on `threads` threads (0 = all cores). The digest does not depend on
/// `threads`. Every solution is verified in big integers before it is returned.
///
/// A negative `k` is searched as `−k` with every coordinate negated (the digest is the one of
/// `−k`). A cube `k = c³` is accepted here and only its non-trivial solutions are returned:
/// a triple with two coordinates summing to 0 (the family `(c, t, −t)`) is dropped, and the
/// small region skips `z = c`, where `k − z³ = 0`. For any other `k` no solution has such a
/// pair (the third cube would be `k`), so nothing else is dropped.
pub fn scan(
    k: i64,
    rect: &Rect,
    threads: usize,
    progress: Progress,
) -> Result<ScanOutput, KernelError> {
    check_rect_allowing_cube(k, rect)?;
    let ak = k.abs();
    let run = || match rect.region {
        Region::Small => small::scan_small(ak, rect, progress),
        Region::Equal => equal::scan_equal(ak, rect, progress),
        Region::Main => {
            let o = main_region::scan_main(ak, rect, threads, progress);
            (o.digest, o.solutions)
        }
    };
    let (digest, found) = if threads == 0 || rect.region == Region::Main {
        run()
    } else {
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .expect("a thread pool can be built")
            .install(run)
    };
    let sign = k.signum() as i128;
    let mut solutions: Vec<Solution> = found
        .into_iter()
        .map(|s| Solution::new(sign * s.0[0], sign * s.0[1], sign * s.0[2]))
        .filter(|s| {
            let [a, b, c] = s.0;
            a + b != 0 && a + c != 0 && b + c != 0
        })
        .collect();
    solutions.sort_unstable();
    solutions.dedup();
    for s in &solutions {
        // A failure here is a kernel defect; never report an unverified triple.
        assert!(
            s.verify(k),
            "kernel produced {s}, which is not a solution for k = {k}"
        );
    }
    Ok(ScanOutput { digest, solutions })
}

/// Every region of `k` up to `bound`: the combined digest and all solutions (sorted, distinct).
pub fn solve(
    k: i64,
    bound: u64,
    threads: usize,
    progress: Progress,
) -> Result<ScanOutput, KernelError> {
    check_bound(bound)?;
    check_target_allowing_cube(k)?;
    let mut digest = Digest::ZERO;
    let mut solutions = Vec::new();
    for rect in domains(k, bound) {
        let out = scan(k, &rect, threads, progress)?;
        digest.add_assign(&out.digest);
        solutions.extend(out.solutions);
    }
    solutions.sort_unstable();
    solutions.dedup();
    Ok(ScanOutput { digest, solutions })
}

/// Candidates of a rectangle, computed without doing the work; equals `scan(..).digest.candidates`.
pub fn candidates(k: i64, rect: &Rect) -> u64 {
    let ak = k.abs();
    match rect.region {
        Region::Small => small::candidates_small(rect),
        Region::Equal => equal::candidates_equal(ak, rect),
        Region::Main => main_region::candidates_main(ak, rect),
    }
}

/// The counts of a rectangle's digest that do not depend on the sieve (`d_values`,
/// `classes`, `candidates`; `survivors` and `hash` are zero), or `None` when computing them
/// would cost more than a small share of scanning the rectangle.
///
/// Small and equal regions: closed forms, always cheap. Main region: the roots of `k` modulo
/// every `d` are needed, which is the factorisation work of the scan; that is a small share
/// of the scan only when classes are long, so the counts are derived when the rectangle has
/// at least [`COUNTS_MIN_CANDIDATES_PER_D`] estimated candidates per `d` and at most
/// [`COUNTS_MAX_D`] values of `d`.
pub fn counts(k: i64, rect: &Rect) -> Option<Digest> {
    let ak = k.abs();
    match rect.region {
        Region::Small | Region::Equal => {
            let c = candidates(k, rect);
            Some(Digest {
                d_values: c,
                candidates: c,
                ..Digest::ZERO
            })
        }
        Region::Main => {
            let n_d = rect.d_hi.saturating_sub(rect.d_lo).max(1);
            let per_d = estimate_candidates(k, rect) / n_d as f64;
            (n_d <= COUNTS_MAX_D && per_d >= COUNTS_MIN_CANDIDATES_PER_D).then(|| {
                let d = main_region::digest_counts_main(ak, rect);
                Digest {
                    survivors: 0,
                    hash: 0,
                    ..d
                }
            })
        }
    }
}

/// Whether the rectangle provably holds work (some `d` value, class or candidate), found
/// cheaply: the closed forms of [`counts`] where they apply, otherwise the counts of the
/// first few single values of `d` (each costs the roots of `k` modulo that `d`). `false`
/// means "not shown", not "none": a main-region rectangle whose first [`WORK_PROBE_D`]
/// values of `d` have no cube root of `k` is left to the spot checks.
pub fn shows_work(k: i64, rect: &Rect) -> bool {
    let busy = |d: &Digest| (d.d_values, d.classes, d.candidates) != (0, 0, 0);
    if let Some(c) = counts(k, rect) {
        return busy(&c);
    }
    if rect.region != Region::Main {
        return false;
    }
    let ak = k.abs();
    let last = rect.d_hi.min(rect.d_lo.saturating_add(WORK_PROBE_D));
    (rect.d_lo..last).any(|d| {
        let one = Rect {
            d_lo: d,
            d_hi: d + 1,
            z_lo: rect.z_lo.max(main_z_floor(d)),
            ..*rect
        };
        one.z_lo < one.z_hi
            && check_rect(k, &one).is_ok()
            && busy(&main_region::digest_counts_main(ak, &one))
    })
}

/// See [`shows_work`].
pub const WORK_PROBE_D: u64 = 64;

/// See [`counts`]: a `d` costs about as much as 10⁴ sieved candidates (kernel cost model),
/// so below this many candidates per `d` counting would cost more than about 1% of the scan.
pub const COUNTS_MIN_CANDIDATES_PER_D: f64 = 1e6;
/// See [`counts`].
pub const COUNTS_MAX_D: u64 = 1 << 20;

/// Cost model: estimated seconds for one reference core to scan `rect` (cheap to evaluate,
/// even for rectangles with `d` up to 10¹⁵; calibrated by the kernel benchmark).
pub fn estimate_seconds(k: i64, rect: &Rect) -> f64 {
    let ak = k.abs();
    match rect.region {
        Region::Small => small::estimate_seconds_small(ak, rect),
        Region::Equal => equal::estimate_seconds_equal(ak, rect),
        Region::Main => main_region::estimate_seconds_main(ak, rect),
    }
}

/// A quick estimate of [`candidates`], for progress displays: exact for the small and equal
/// regions; for the main region `Σ_d 2ρ(d)·(z_hi − max(z_lo, d/α))/d` with the mean number of
/// cube roots `ρ` taken as 1, integrated in closed form on geometric pieces of the `d` range.
pub fn estimate_candidates(k: i64, rect: &Rect) -> f64 {
    if rect.region != Region::Main {
        return candidates(k, rect) as f64;
    }
    let inv_alpha = 1.0 / (2f64.cbrt() - 1.0);
    let (zl, zh) = (rect.z_lo as f64, rect.z_hi as f64);
    let a = rect.d_lo.max(1) as f64;
    let b = (rect.d_hi as f64).min(zh / inv_alpha + 1.0);
    if b <= a {
        return 0.0;
    }
    let pieces = 64;
    let ratio = (b / a).powf(1.0 / pieces as f64);
    let mut total = 0.0;
    let mut x = a;
    for _ in 0..pieces {
        let y = (x * ratio).min(b);
        let dm = (x * y).sqrt();
        let span = (zh - zl.max(dm * inv_alpha)).max(0.0);
        total += 2.0 * (y - x) * span / dm;
        x = y;
    }
    total
}
