//! The fixed split of a unit into pieces: what a report commits to piece by piece, and what
//! the coordinator spot-checks.
//!
//! A worker reports the digest of every piece of its unit (in this order) beside the unit's
//! digest, which must be their combination, and signs the Merkle root of the piece digests
//! ([`crate::report`]). After the report is stored the coordinator draws a few pieces at
//! random and recomputes them: a worker that skipped or invented a share `q` of the pieces
//! is caught with probability `1 − (1 − q)^r` per report with `r` pieces checked.
//!
//! The split depends only on the signed unit (its rectangle and its planned cost), through
//! integer arithmetic and [`kernel::main_z_floor`], never on a machine, a thread count or the
//! calibrated cost model, so the worker and the coordinator always agree on it. Changing the
//! rule changes what reports commit to, so it is part of the kernel version.
//!
//! * count: about one piece per [`PIECE_COST_US`] of planned cost, at least [`MIN_PIECES`],
//!   at most [`MAX_PIECES`], and never more than the cut axis has values;
//! * main region: first trimmed to the part that holds points of the region (d beyond the
//!   region's edge and `|z|` below it hold no work), then cut into equal widths along `d`
//!   when there are at least as many `d` values as pieces (each `d` then lies in one piece
//!   with the unit's whole `|z|` range), otherwise along `|z|`;
//! * small and equal regions: equal widths along `|z|`; the first piece keeps the unit's
//!   `z_lo`, so the small region's piece with `z_lo = 0` still covers `z = 0` exactly once.
//!
//! Every digest count is additive over such cuts (see [`crate::kernel::main_region`]), so the
//! pieces' digests combine to the digest of one scan of the whole unit.
//!
//! What this module does not do: compute anything, or decide how many pieces are checked.

use crate::{kernel, Rect, Region, UnitSpec};

/// Planned cost (reference-core µs) per piece.
pub const PIECE_COST_US: u64 = 50_000;
/// Fewest pieces of a unit (when its axis is wide enough).
pub const MIN_PIECES: u64 = 16;
/// Most pieces of a unit.
pub const MAX_PIECES: u64 = 1024;

/// For the main region: the same rectangle without the parts that hold no point of the
/// region (`d` so large that `d/α ≥ z_hi`, and `|z| ≤ main_z_floor(d_lo)`). Those parts
/// contribute nothing to the digest, and the kernel refuses a piece made only of them.
/// Other regions are returned unchanged.
pub fn trim(rect: &Rect) -> Rect {
    if rect.region != Region::Main || rect.z_lo >= rect.z_hi || rect.d_lo >= rect.d_hi {
        return *rect;
    }
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

/// How many pieces a unit of this planned cost wants (before the axis width limits it).
pub fn wanted(cost_us: u64) -> u64 {
    (cost_us / PIECE_COST_US).clamp(MIN_PIECES, MAX_PIECES)
}

/// The pieces of a unit, in report order.
pub fn of_unit(unit: &UnitSpec) -> Vec<Rect> {
    split(&unit.rect, wanted(unit.cost))
}

/// Cut `rect` into at most `n` pieces by the rules of the module documentation.
pub fn split(rect: &Rect, n: u64) -> Vec<Rect> {
    let r = trim(rect);
    let n = n.max(1);
    let along_d = r.region == Region::Main && r.d_hi - r.d_lo >= n;
    let (lo, hi) = if along_d {
        (r.d_lo, r.d_hi)
    } else {
        (r.z_lo, r.z_hi)
    };
    let n = n.min(hi.saturating_sub(lo)).max(1);
    let width = (hi - lo) as u128;
    let cut = |i: u64| lo + (width * i as u128 / n as u128) as u64;
    (0..n)
        .map(|i| {
            let (a, b) = (cut(i), cut(i + 1));
            let mut p = r;
            if along_d {
                p.d_lo = a;
                p.d_hi = b;
            } else {
                p.z_lo = a;
                p.z_hi = b;
            }
            p
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::Digest;

    fn main_rect(d_lo: u64, d_hi: u64, z_lo: u64, z_hi: u64) -> Rect {
        Rect {
            region: Region::Main,
            d_lo,
            d_hi,
            z_lo,
            z_hi,
        }
    }

    /// The pieces' digests combine to one scan of the whole unit, for units of every region
    /// and both cut axes (digest additivity; brute force against the kernel itself, common
    /// practice, no source).
    #[test]
    fn pieces_combine_to_the_whole_unit() {
        let cases = [
            (2i64, main_rect(1, 400, 1, 1500), 64),
            (3, main_rect(5, 7, 40, 3000), 40),
            (33, main_rect(100, 3000, 5, 2000), 16),
            (
                29,
                Rect {
                    region: Region::Small,
                    d_lo: 0,
                    d_hi: 0,
                    z_lo: 0,
                    z_hi: 5,
                },
                16,
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
                100,
            ),
        ];
        for (k, rect, n) in cases {
            kernel::check_rect(k, &rect).unwrap();
            let whole = kernel::scan(k, &rect, 1, &|_| {}).unwrap();
            let ps = split(&rect, n);
            assert!(ps.len() > 1 && ps.len() as u64 <= n, "{rect}: {}", ps.len());
            assert_eq!(ps, split(&rect, n), "deterministic");
            let mut d = Digest::ZERO;
            let mut sols = vec![];
            for p in &ps {
                kernel::check_rect(k, p).unwrap_or_else(|e| panic!("{p}: {e}"));
                let o = kernel::scan(k, p, 1, &|_| {}).unwrap();
                d.add_assign(&o.digest);
                sols.extend(o.solutions);
            }
            // A triple with two coordinates in different pieces is found in each of them.
            sols.sort();
            sols.dedup();
            assert_eq!(d, whole.digest, "k={k} {rect}");
            assert_eq!(sols, whole.solutions, "k={k} {rect}");
        }
    }

    #[test]
    fn counts_follow_the_planned_cost_and_the_axis() {
        assert_eq!(wanted(0), MIN_PIECES);
        assert_eq!(wanted(600_000_000), MAX_PIECES);
        assert_eq!(wanted(PIECE_COST_US * 100), 100);
        // A narrow axis limits the count.
        let r = main_rect(10, 12, 100, 110);
        assert!(split(&r, 1024).len() <= 10);
        // Wide d: cut along d, each piece with the whole |z| range.
        let r = main_rect(1000, 100_000, 1_000_000, 2_000_000);
        let ps = split(&r, 1024);
        assert_eq!(ps.len(), 1024);
        assert!(ps.iter().all(|p| p.z_hi == r.z_hi));
        assert_eq!(ps[0].d_lo, 1000);
        assert_eq!(ps.last().unwrap().d_hi, 100_000);
        for w in ps.windows(2) {
            assert_eq!(w[0].d_hi, w[1].d_lo);
        }
    }
}
