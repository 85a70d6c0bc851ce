//! The search kernel (METHOD.md): every solution of `x³ + y³ + z³ = k` in one rectangle of
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
//! What this module does not do: choose rectangles (the coordinator plans), talk to anyone,
//! or touch the file system.

use crate::{Digest, Rect, Region, Solution};

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

/// Refuse `k` that cannot or must not be searched; otherwise the target with its `Z0`.
pub fn check_target(k: i64) -> Result<Target, KernelError> {
    let _ = k;
    unimplemented!("kernel: check_target")
}

/// `Z0 = ⌊√|k|⌋`.
pub fn z0(k: i64) -> u64 {
    let _ = k;
    unimplemented!("kernel: z0")
}

/// For the main region: the largest `t` with `t ≤ d/α` (α = ∛2 − 1), computed exactly, so
/// that the main region at `d` is `|z| > max(Z0, main_z_floor(d))`.
pub fn main_z_floor(d: u64) -> u64 {
    let _ = d;
    unimplemented!("kernel: main_z_floor")
}

/// The whole of one region of target `k` up to `bound`, as one rectangle:
/// small `(0, Z0∧B]` (with `z = 0`), equal `(Z0, B]`, main `[1, D) × (Z0, B]` with `D` the least
/// `d` such that `d > αB`. Returns `None` when the region is empty (e.g. `B ≤ Z0` for equal/main).
pub fn domain(k: i64, bound: u64, region: Region) -> Option<Rect> {
    let _ = (k, bound, region);
    unimplemented!("kernel: domain")
}

/// Whether `rect` is a valid piece of its region for `k` (see [`crate::unit`] for the rules).
pub fn check_rect(k: i64, rect: &Rect) -> Result<(), KernelError> {
    let _ = (k, rect);
    unimplemented!("kernel: check_rect")
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
pub fn scan(
    k: i64,
    rect: &Rect,
    threads: usize,
    progress: Progress,
) -> Result<ScanOutput, KernelError> {
    let _ = (k, rect, threads, progress);
    unimplemented!("kernel: scan")
}

/// Candidates of a rectangle, computed without doing the work; equals `scan(..).digest.candidates`.
pub fn candidates(k: i64, rect: &Rect) -> u64 {
    let _ = (k, rect);
    unimplemented!("kernel: candidates")
}

/// Cost model: estimated seconds for one reference core to scan `rect` (cheap to evaluate,
/// even for rectangles with `d` up to 10¹⁵; calibrated by the kernel benchmark).
pub fn estimate_seconds(k: i64, rect: &Rect) -> f64 {
    let _ = (k, rect);
    unimplemented!("kernel: estimate_seconds")
}
