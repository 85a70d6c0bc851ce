//! Cutting a unit's rectangle into chunks: sub-rectangles small enough (a few seconds of
//! work) that a signal or a kill loses little, each checkpointed when it finishes.
//!
//! The plan depends on the unit alone (its `k` and rectangle, through the kernel's cost
//! model), never on threads, machine or time, so a restarted worker finds the same chunks.
//! The cut runs along the axis over which every digest count is additive:
//! * main: along `d` (each `d` lies in one chunk, with the unit's whole `|z|` range, so
//!   "d values visited" and "residue classes" add up exactly);
//! * small and equal: along `|z|` (their counts are per `z`); the first chunk keeps the unit's
//!   `z_lo`, so a small-region unit with `z_lo = 0` still covers `z = 0` exactly once.
//!
//! The digest of the unit is then the combination of the chunk digests, equal to the digest
//! of one scan of the whole rectangle.

use cubehunt_common::kernel;
use cubehunt_common::{Rect, Region};

/// Target work per chunk, in seconds of one reference core.
pub const CHUNK_SECONDS: f64 = 2.0;
/// Most chunks a unit is cut into (very large units get proportionally larger chunks).
pub const MAX_CHUNKS: usize = 2000;

#[derive(Clone, Copy, PartialEq, Eq, Debug)]
enum Axis {
    /// `d ∈ [lo, hi)` (main region only)
    D,
    /// `|z| ∈ (lo, hi]`
    Z,
}

fn range(rect: &Rect, axis: Axis) -> (u64, u64) {
    match axis {
        Axis::D => (rect.d_lo, rect.d_hi),
        Axis::Z => (rect.z_lo, rect.z_hi),
    }
}

/// The part of `rect` between cut points `a < b` on `axis`.
fn piece(rect: &Rect, axis: Axis, a: u64, b: u64) -> Rect {
    let mut r = *rect;
    match axis {
        Axis::D => {
            r.d_lo = a;
            r.d_hi = b;
        }
        Axis::Z => {
            r.z_lo = a;
            r.z_hi = b;
        }
    }
    r
}

fn est(k: i64, r: &Rect) -> f64 {
    let s = kernel::estimate_seconds(k, r);
    if s.is_finite() && s > 0.0 {
        s
    } else {
        0.0
    }
}

/// For the main region: the same rectangle without the parts that hold no point of the
/// region (`d` so large that `d/α ≥ z_hi`, and `|z| ≤ main_z_floor(d_lo)`). Those parts
/// contribute nothing to the digest, and the kernel refuses a piece made only of them.
fn trim_main(rect: &Rect) -> Rect {
    let mut r = *rect;
    // least d in [d_lo, d_hi] with main_z_floor(d) >= z_hi (main_z_floor is nondecreasing)
    let (mut a, mut b) = (rect.d_lo, rect.d_hi);
    while a < b {
        let m = a + (b - a) / 2;
        if kernel::main_z_floor(m) >= rect.z_hi {
            b = m;
        } else {
            a = m + 1;
        }
    }
    r.d_hi = a.max(rect.d_lo + 1);
    r.z_lo = rect
        .z_lo
        .max(kernel::main_z_floor(rect.d_lo).min(rect.z_hi - 1));
    r
}

/// The chunks of a unit, in order. Together they cover every point of the unit's region
/// inside `rect` exactly once (for the main region, parts of `rect` outside the region,
/// which hold no work, are left out).
pub fn plan(k: i64, rect: &Rect) -> Vec<Rect> {
    plan_with(k, rect, CHUNK_SECONDS)
}

/// [`plan`] with another target per chunk (reference-core seconds).
pub fn plan_with(k: i64, rect: &Rect, chunk_seconds: f64) -> Vec<Rect> {
    let total = est(k, rect);
    let target = chunk_seconds.max(total / MAX_CHUNKS as f64);
    let n = ((total / target).ceil() as u64).clamp(1, MAX_CHUNKS as u64);
    if n <= 1 {
        return vec![*rect];
    }
    let (r, axis) = match rect.region {
        Region::Main => {
            let t = trim_main(rect);
            // Prefer whole `d` columns; a unit with few `d` values is cut along `|z|`.
            if t.d_hi - t.d_lo >= n {
                (t, Axis::D)
            } else {
                (t, Axis::Z)
            }
        }
        Region::Small | Region::Equal => (*rect, Axis::Z),
    };
    split(k, &r, axis, n)
}

/// Cut `rect` along `axis` into at most `n` pieces of about equal estimated cost: cut `i` is
/// the least `x` whose prefix costs at least `i/n` of the total (binary search on the cost
/// model, which is monotone in the rectangle).
fn split(k: i64, rect: &Rect, axis: Axis, n: u64) -> Vec<Rect> {
    let (lo, hi) = range(rect, axis);
    let n = n.min(hi - lo);
    if n <= 1 {
        return vec![*rect];
    }
    let total = est(k, rect);
    let mut cuts = vec![lo];
    for i in 1..n {
        let prev = *cuts.last().unwrap();
        if prev + 1 >= hi {
            break;
        }
        let want = total * i as f64 / n as f64;
        let (mut a, mut b) = (prev + 1, hi - 1);
        if est(k, &piece(rect, axis, lo, b)) < want {
            break; // the rest is too cheap to deserve another cut
        }
        while a < b {
            let m = a + (b - a) / 2;
            if est(k, &piece(rect, axis, lo, m)) >= want {
                b = m;
            } else {
                a = m + 1;
            }
        }
        cuts.push(a);
    }
    cuts.push(hi);
    cuts.dedup();
    cuts.windows(2)
        .map(|w| piece(rect, axis, w[0], w[1]))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use cubehunt_common::{Digest, Solution};

    fn scan_all(k: i64, parts: &[Rect]) -> (Digest, Vec<Solution>) {
        let mut d = Digest::ZERO;
        let mut sols = vec![];
        for p in parts {
            let o =
                kernel::scan(k, p, 1, &|_| {}).unwrap_or_else(|e| panic!("chunk {p} refused: {e}"));
            d.add_assign(&o.digest);
            sols.extend(o.solutions);
        }
        sols.sort();
        sols.dedup();
        (d, sols)
    }

    /// The chunks' combined digest and solutions equal one scan of the whole unit, for units of
    /// every region, including a main unit whose d range runs past the region (digest
    /// composability, METHOD.md; common practice, no source).
    #[test]
    fn chunks_combine_to_the_whole_unit() {
        let cases = [
            (
                2i64,
                Rect {
                    region: Region::Main,
                    d_lo: 1,
                    d_hi: 400,
                    z_lo: 1,
                    z_hi: 1500,
                },
            ),
            (
                3,
                Rect {
                    region: Region::Main,
                    d_lo: 5,
                    d_hi: 7,
                    z_lo: 40,
                    z_hi: 3000,
                },
            ),
            (
                29,
                Rect {
                    region: Region::Small,
                    d_lo: 0,
                    d_hi: 0,
                    z_lo: 0,
                    z_hi: 5,
                },
            ),
            (
                2,
                Rect {
                    region: Region::Equal,
                    d_lo: 0,
                    d_hi: 0,
                    z_lo: 1,
                    z_hi: 5000,
                },
            ),
        ];
        for (k, rect) in cases {
            kernel::check_rect(k, &rect).unwrap();
            let whole = kernel::scan(k, &rect, 1, &|_| {}).unwrap();
            let total = kernel::estimate_seconds(k, &rect);
            let parts = plan_with(k, &rect, total / 7.0);
            assert!(
                parts.len() >= 2,
                "k={k} {rect}: expected several chunks, got {parts:?}"
            );
            assert_eq!(
                parts,
                plan_with(k, &rect, total / 7.0),
                "the plan is deterministic"
            );
            for p in &parts {
                assert_eq!(p.region, rect.region);
                assert!(
                    p.d_lo >= rect.d_lo
                        && p.d_hi <= rect.d_hi
                        && p.z_lo >= rect.z_lo
                        && p.z_hi <= rect.z_hi
                );
                kernel::check_rect(k, p).unwrap();
            }
            let (d, sols) = scan_all(k, &parts);
            assert_eq!(d, whole.digest, "k={k} {rect}: chunk digests {parts:?}");
            assert_eq!(sols, whole.solutions, "k={k} {rect}");
        }
    }

    #[test]
    fn a_cheap_unit_is_one_chunk() {
        let r = Rect {
            region: Region::Main,
            d_lo: 5,
            d_hi: 6,
            z_lo: 10,
            z_hi: 100,
        };
        assert_eq!(plan(2, &r), vec![r]);
    }
}
