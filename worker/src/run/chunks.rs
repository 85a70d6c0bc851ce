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
pub const CHUNK_SECONDS: f64 = 3.0;
/// Most chunks a unit is cut into (very large units get proportionally larger chunks).
pub const MAX_CHUNKS: usize = 2000;

/// The axis range a rectangle is cut along: `[lo, hi)` of `d` for main, `(lo, hi]` of `|z|` otherwise.
fn axis(rect: &Rect) -> (u64, u64) {
    match rect.region {
        Region::Main => (rect.d_lo, rect.d_hi),
        Region::Small | Region::Equal => (rect.z_lo, rect.z_hi),
    }
}

/// The part of `rect` between cut points `a < b` on its axis.
fn piece(rect: &Rect, a: u64, b: u64) -> Rect {
    let mut r = *rect;
    match rect.region {
        Region::Main => {
            r.d_lo = a;
            r.d_hi = b;
        }
        Region::Small | Region::Equal => {
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

/// The chunks of a unit, in order; together they tile `rect` exactly.
pub fn plan(k: i64, rect: &Rect) -> Vec<Rect> {
    let (lo, hi) = axis(rect);
    if hi <= lo.saturating_add(1) {
        return vec![*rect];
    }
    let total = est(k, rect);
    let target = CHUNK_SECONDS.max(total / MAX_CHUNKS as f64);
    let n = ((total / target).ceil() as u64).clamp(1, (hi - lo).min(MAX_CHUNKS as u64));
    if n <= 1 {
        return vec![*rect];
    }
    // Cut i is the least x in (prev, hi) whose prefix [lo, x) costs at least i/n of the total
    // (binary search on the cost model, which is monotone in the rectangle).
    let mut cuts = vec![lo];
    for i in 1..n {
        let prev = *cuts.last().unwrap();
        if prev + 1 >= hi {
            break;
        }
        let want = total * i as f64 / n as f64;
        let (mut a, mut b) = (prev + 1, hi - 1);
        if est(k, &piece(rect, lo, b)) < want {
            // the tail beyond b is too cheap to deserve a cut of its own
            continue;
        }
        while a < b {
            let m = a + (b - a) / 2;
            if est(k, &piece(rect, lo, m)) >= want {
                b = m;
            } else {
                a = m + 1;
            }
        }
        cuts.push(a);
    }
    cuts.push(hi);
    cuts.dedup();
    cuts.windows(2).map(|w| piece(rect, w[0], w[1])).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tiles(rect: &Rect, parts: &[Rect]) {
        let (lo, hi) = axis(rect);
        assert_eq!(axis(&parts[0]).0, lo);
        assert_eq!(axis(parts.last().unwrap()).1, hi);
        for w in parts.windows(2) {
            assert_eq!(axis(&w[0]).1, axis(&w[1]).0, "chunks must abut: {parts:?}");
            assert!(axis(&w[0]).0 < axis(&w[0]).1);
        }
        for p in parts {
            assert_eq!(p.region, rect.region);
            match rect.region {
                Region::Main => assert_eq!((p.z_lo, p.z_hi), (rect.z_lo, rect.z_hi)),
                _ => assert_eq!((p.d_lo, p.d_hi), (rect.d_lo, rect.d_hi)),
            }
        }
    }

    #[test]
    fn pieces_tile_and_are_deterministic() {
        let main = Rect {
            region: Region::Main,
            d_lo: 1,
            d_hi: 3000,
            z_lo: 1,
            z_hi: 200_000,
        };
        let small = Rect {
            region: Region::Small,
            d_lo: 0,
            d_hi: 0,
            z_lo: 0,
            z_hi: 31,
        };
        for (k, r) in [(2, main), (1000, small)] {
            let a = plan(k, &r);
            tiles(&r, &a);
            assert_eq!(a, plan(k, &r));
        }
    }

    #[test]
    fn a_single_step_axis_is_one_chunk() {
        let r = Rect {
            region: Region::Main,
            d_lo: 5,
            d_hi: 6,
            z_lo: 1,
            z_hi: 1_000_000,
        };
        assert_eq!(plan(2, &r), vec![r]);
    }
}
