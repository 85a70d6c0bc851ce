//! Does a set of rectangles cover the three regions of a target completely?
//!
//! The one check that turns "these units were settled" into "every solution with
//! `min ≤ B` was looked for". Used by the offline certificate check ([`crate::cert`]), by the
//! coordinator's audit and by the planner's tests, so it is written for millions of tiles:
//! sort, then one sweep over `d` with a segment tree over the compressed `|z|` axis
//! (`O(n log n)` time, `O(n)` memory).
//!
//! The sets to cover, for target `k` with `Z0 = ⌊√|k|⌋` and bound `B` (docs/method.md):
//! * small (S): every `|z| ∈ [0, min(Z0, B)]`; a tile `(z_lo, z_hi]` covers `z_lo+1 ..= z_hi`,
//!   and the tile with `z_lo = 0` also covers `z = 0`;
//! * equal (E): every `|z| ∈ (Z0, B]`;
//! * main (C): every `(d, |z|)` with `1 ≤ d` and `max(Z0, F(d)) < |z| ≤ B`, where
//!   `F = main_z_floor` (the largest `t ≤ d/α`). A tile `[d_lo, d_hi) × (z_lo, z_hi]` covers
//!   the points of that set inside it. Since `F` is non-decreasing, on a slab `d ∈ [a, b)` on
//!   which the set of tiles crossing it does not change, the tiles must cover
//!   `(max(Z0, F(a)), B]` — that is both necessary (at `d = a`) and sufficient.
//!
//! Gaps are errors. Overlaps (a point of the region in two tiles) and tiles that hold no
//! point of the region are reported but are not fatal: they cost work, not completeness.
//!
//! This module does not decide whether a tile's work was done correctly — only geometry.

use crate::{kernel, Rect, Region};
use serde::{Deserialize, Serialize};
use std::fmt;

/// One tile: a unit id and its rectangle.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Tile {
    pub id: i64,
    pub rect: Rect,
}

/// The geometry of one target up to one bound: what must be covered.
pub struct Geometry<'a> {
    pub z0: u64,
    pub bound: u64,
    /// `F(d)`: the main region at `d` is `|z| > max(Z0, F(d))`. Must be non-decreasing.
    pub main_z_floor: &'a dyn Fn(u64) -> u64,
    /// Least `d` with `F(d) ≥ B` (no point of the main region at or beyond it).
    pub main_d_end: u64,
}

impl Geometry<'static> {
    /// The geometry from the kernel's own definitions ([`kernel::z0`], [`kernel::domain`],
    /// [`kernel::main_z_floor`]).
    pub fn of_target(k: i64, bound: u64) -> Geometry<'static> {
        let main_d_end = kernel::domain(k, bound, Region::Main)
            .map(|r| r.d_hi)
            .unwrap_or(1);
        Geometry {
            z0: kernel::z0(k),
            bound,
            main_z_floor: &kernel::main_z_floor,
            main_d_end,
        }
    }
}

/// A part of a region no tile covers: `d ∈ [d_lo, d_hi)` (main only; `[0, 0)` otherwise) and
/// `|z| ∈ [z_first, z_last]` (inclusive, so that `z = 0` in the small region is expressible).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Gap {
    pub region: Region,
    pub d_lo: u64,
    pub d_hi: u64,
    pub z_first: u64,
    pub z_last: u64,
}

impl fmt::Display for Gap {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if self.region == Region::Main {
            write!(
                f,
                "main d∈[{},{}) |z|∈[{},{}]",
                self.d_lo, self.d_hi, self.z_first, self.z_last
            )
        } else {
            write!(f, "{} |z|∈[{},{}]", self.region, self.z_first, self.z_last)
        }
    }
}

/// A part of a region covered more than once, with (up to two of) the tiles concerned.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Overlap {
    pub region: Region,
    pub d_lo: u64,
    pub d_hi: u64,
    pub z_first: u64,
    pub z_last: u64,
    pub units: Vec<i64>,
}

/// The outcome of [`check_tiling`].
#[derive(Clone, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct TilingCheck {
    /// Uncovered parts, in sweep order (at most [`MAX_LISTED`] listed).
    pub gaps: Vec<Gap>,
    /// Number of uncovered pieces found (may exceed `gaps.len()`).
    pub gap_count: u64,
    pub overlaps: Vec<Overlap>,
    pub overlap_count: u64,
    /// Tiles holding no point of their region (beyond the bound, or below the floor).
    pub outside: Vec<i64>,
    /// Tiles whose rectangle is malformed (empty, or a `d` axis where none belongs), with why.
    /// They are left out of the coverage sweep.
    pub malformed: Vec<(i64, String)>,
}

/// At most this many gaps and overlaps are listed individually (all are counted).
pub const MAX_LISTED: usize = 200;

impl TilingCheck {
    /// Complete: no gap and no malformed tile.
    pub fn is_complete(&self) -> bool {
        self.gap_count == 0 && self.malformed.is_empty()
    }
}

/// Check that `tiles` cover the small, equal and main regions of the target described by
/// `geom` completely. Tiles may come in any order.
pub fn check_tiling(geom: &Geometry, tiles: &[Tile]) -> TilingCheck {
    let mut out = TilingCheck::default();
    let mut per_region: [Vec<Seg>; 3] = [Vec::new(), Vec::new(), Vec::new()];
    for t in tiles {
        let r = &t.rect;
        let bad = if r.z_lo >= r.z_hi {
            Some(format!("empty |z| range ({}, {}]", r.z_lo, r.z_hi))
        } else if r.region == Region::Main && (r.d_lo < 1 || r.d_lo >= r.d_hi) {
            Some(format!(
                "main needs 1 ≤ d_lo < d_hi, got d∈[{},{})",
                r.d_lo, r.d_hi
            ))
        } else if r.region != Region::Main && (r.d_lo, r.d_hi) != (0, 0) {
            Some(format!(
                "{} has no d axis, got d∈[{},{})",
                r.region, r.d_lo, r.d_hi
            ))
        } else {
            None
        };
        if let Some(why) = bad {
            out.malformed.push((t.id, why));
            continue;
        }
        let (idx, seg) = match r.region {
            // Shift |z| by one so that z = 0 becomes an ordinary point: w = z + 1,
            // required w ∈ (0, min(Z0,B)+1]; a tile covers (z_lo+1, z_hi+1], or (0, z_hi+1]
            // when z_lo = 0.
            Region::Small => {
                let lo = if r.z_lo == 0 { 0 } else { r.z_lo + 1 };
                (
                    0,
                    Seg {
                        id: t.id,
                        d_lo: 0,
                        d_hi: 1,
                        z_lo: lo,
                        z_hi: r.z_hi.saturating_add(1),
                    },
                )
            }
            Region::Equal => (
                1,
                Seg {
                    id: t.id,
                    d_lo: 0,
                    d_hi: 1,
                    z_lo: r.z_lo,
                    z_hi: r.z_hi,
                },
            ),
            Region::Main => (
                2,
                Seg {
                    id: t.id,
                    d_lo: r.d_lo,
                    d_hi: r.d_hi,
                    z_lo: r.z_lo,
                    z_hi: r.z_hi,
                },
            ),
        };
        per_region[idx].push(seg);
    }

    let zb = geom.bound.min(geom.z0);
    let small_floor = |_d: u64| 0u64;
    sweep(
        Region::Small,
        &per_region[0],
        0,
        1,
        0,
        zb + 1,
        &small_floor,
        &mut out,
    );
    if geom.bound > geom.z0 {
        let eq_floor = |_d: u64| geom.z0;
        sweep(
            Region::Equal,
            &per_region[1],
            0,
            1,
            geom.z0,
            geom.bound,
            &eq_floor,
            &mut out,
        );
        let main_floor = |d: u64| (geom.main_z_floor)(d).max(geom.z0);
        sweep(
            Region::Main,
            &per_region[2],
            1,
            geom.main_d_end,
            geom.z0,
            geom.bound,
            &main_floor,
            &mut out,
        );
    } else {
        for s in per_region[1].iter().chain(&per_region[2]) {
            out.outside.push(s.id);
        }
    }
    // Small and equal have no d axis; small-region coordinates come back from w = z + 1.
    for g in out.gaps.iter_mut().filter(|g| g.region != Region::Main) {
        (g.d_lo, g.d_hi) = (0, 0);
        if g.region == Region::Small {
            g.z_first -= 1;
            g.z_last -= 1;
        }
    }
    for o in out.overlaps.iter_mut().filter(|o| o.region != Region::Main) {
        (o.d_lo, o.d_hi) = (0, 0);
        if o.region == Region::Small {
            o.z_first -= 1;
            o.z_last -= 1;
        }
    }
    out.outside.sort_unstable();
    out
}

#[derive(Clone, Copy, Debug)]
struct Seg {
    id: i64,
    d_lo: u64,
    d_hi: u64,
    z_lo: u64,
    z_hi: u64,
}

/// Sweep one region: cover `{(d, z): d ∈ [d_min, d_end), floor(d) < z ≤ z_max}` where
/// `floor(d) ≥ z_min` is non-decreasing. Tiles are `[d_lo, d_hi) × (z_lo, z_hi]`.
#[allow(clippy::too_many_arguments)]
fn sweep(
    region: Region,
    segs: &[Seg],
    d_min: u64,
    d_end: u64,
    z_min: u64,
    z_max: u64,
    floor: &dyn Fn(u64) -> u64,
    out: &mut TilingCheck,
) {
    let clip_z = |v: u64| v.clamp(z_min, z_max);
    // Keep the tiles that hold a point of the region; the rest are "outside".
    let mut live: Vec<Seg> = Vec::with_capacity(segs.len());
    for s in segs {
        let dl = s.d_lo.max(d_min);
        let dh = s.d_hi.min(d_end);
        if dl >= dh || s.z_lo >= z_max || s.z_hi <= floor(dl) {
            out.outside.push(s.id);
        } else {
            live.push(Seg {
                d_lo: dl,
                d_hi: dh,
                ..*s
            });
        }
    }
    if d_min >= d_end || z_min >= z_max {
        return;
    }
    // d breakpoints: slab starts.
    let mut ds: Vec<u64> = Vec::with_capacity(2 * live.len() + 2);
    ds.push(d_min);
    ds.push(d_end);
    for s in &live {
        ds.push(s.d_lo);
        ds.push(s.d_hi);
    }
    ds.sort_unstable();
    ds.dedup();
    // Slab lower bounds, clipped.
    let slab_lo: Vec<u64> = ds[..ds.len() - 1]
        .iter()
        .map(|&a| clip_z(floor(a)))
        .collect();
    // Compressed z coordinates.
    let mut zs: Vec<u64> = Vec::with_capacity(2 * live.len() + slab_lo.len() + 2);
    zs.push(z_min);
    zs.push(z_max);
    for s in &live {
        zs.push(clip_z(s.z_lo));
        zs.push(clip_z(s.z_hi));
    }
    zs.extend_from_slice(&slab_lo);
    zs.sort_unstable();
    zs.dedup();
    let zi = |v: u64| zs.binary_search(&v).expect("coordinate was inserted");
    let pieces = zs.len() - 1; // piece i is (zs[i], zs[i+1]]
    if pieces == 0 {
        return;
    }
    let mut tree = CoverTree::new(pieces);
    // Events: (d, +1/-1, z piece range).
    let mut events: Vec<(u64, i32, usize, usize)> = Vec::with_capacity(2 * live.len());
    for s in &live {
        let (a, b) = (zi(clip_z(s.z_lo)), zi(clip_z(s.z_hi)));
        if a < b {
            events.push((s.d_lo, 1, a, b - 1));
            events.push((s.d_hi, -1, a, b - 1));
        }
    }
    events.sort_unstable_by_key(|e| (e.0, e.1));
    let mut ev = 0;
    let last_piece = pieces - 1;
    let mut open_gap: Option<Gap> = None;
    for (si, w) in ds.windows(2).enumerate() {
        let (a, b) = (w[0], w[1]);
        while ev < events.len() && events[ev].0 <= a {
            let (_, v, l, r) = events[ev];
            tree.update(l, r, v);
            ev += 1;
        }
        let lo = slab_lo[si];
        if lo >= z_max {
            continue;
        }
        let l = zi(lo);
        // Gaps.
        let mut pos = l;
        while pos <= last_piece {
            let Some(g) = tree.find_first_le(pos, last_piece, 0) else {
                break;
            };
            let end = tree
                .find_first_ge(g, last_piece, 1)
                .map(|e| e - 1)
                .unwrap_or(last_piece);
            let gap = Gap {
                region,
                d_lo: a,
                d_hi: b,
                z_first: zs[g] + 1,
                z_last: zs[end + 1],
            };
            out.gap_count += 1;
            match &mut open_gap {
                Some(p) if p.d_hi == a && p.z_first == gap.z_first && p.z_last == gap.z_last => {
                    p.d_hi = b;
                    out.gap_count -= 1;
                }
                _ => {
                    if let Some(p) = open_gap.take() {
                        if out.gaps.len() < MAX_LISTED {
                            out.gaps.push(p);
                        }
                    }
                    open_gap = Some(gap);
                }
            }
            pos = end + 1;
            if out.gap_count as usize > 4 * MAX_LISTED {
                // Enough detail; count the rest of this slab as one more piece.
                break;
            }
        }
        // Overlaps.
        if out.overlaps.len() < MAX_LISTED && tree.max(l, last_piece) >= 2 {
            let g = tree
                .find_first_ge(l, last_piece, 2)
                .expect("max says there is one");
            let end = tree
                .find_first_le(g, last_piece, 1)
                .map(|e| e - 1)
                .unwrap_or(last_piece);
            let (zf, zl) = (zs[g] + 1, zs[end + 1]);
            let probe = zf;
            let units: Vec<i64> = live
                .iter()
                .filter(|s| s.d_lo <= a && a < s.d_hi && s.z_lo < probe && probe <= s.z_hi)
                .map(|s| s.id)
                .take(4)
                .collect();
            out.overlaps.push(Overlap {
                region,
                d_lo: a,
                d_hi: b,
                z_first: zf,
                z_last: zl,
                units,
            });
            out.overlap_count += 1;
        } else if tree.max(l, last_piece) >= 2 {
            out.overlap_count += 1;
        }
    }
    if let Some(p) = open_gap.take() {
        if out.gaps.len() < MAX_LISTED {
            out.gaps.push(p);
        }
    }
}

/// Range add, range min/max over `n` leaves, without push-down: each node's `mn`/`mx`
/// includes its own `add` (and not its ancestors').
struct CoverTree {
    size: usize,
    add: Vec<i32>,
    mn: Vec<i32>,
    mx: Vec<i32>,
}

const FAR: i32 = i32::MAX / 4;

impl CoverTree {
    fn new(n: usize) -> CoverTree {
        let size = n.next_power_of_two();
        let mut mn = vec![0i32; 2 * size];
        let mut mx = vec![0i32; 2 * size];
        for i in n..size {
            mn[size + i] = FAR;
            mx[size + i] = -FAR;
        }
        for i in (1..size).rev() {
            mn[i] = mn[2 * i].min(mn[2 * i + 1]);
            mx[i] = mx[2 * i].max(mx[2 * i + 1]);
        }
        CoverTree {
            size,
            add: vec![0; 2 * size],
            mn,
            mx,
        }
    }

    fn update(&mut self, l: usize, r: usize, v: i32) {
        self.upd(1, 0, self.size - 1, l, r, v);
    }

    fn upd(&mut self, node: usize, nl: usize, nr: usize, l: usize, r: usize, v: i32) {
        if r < nl || nr < l {
            return;
        }
        if l <= nl && nr <= r {
            self.add[node] += v;
            self.mn[node] += v;
            self.mx[node] += v;
            return;
        }
        let mid = (nl + nr) / 2;
        self.upd(2 * node, nl, mid, l, r, v);
        self.upd(2 * node + 1, mid + 1, nr, l, r, v);
        self.mn[node] = self.add[node] + self.mn[2 * node].min(self.mn[2 * node + 1]);
        self.mx[node] = self.add[node] + self.mx[2 * node].max(self.mx[2 * node + 1]);
    }

    fn max(&self, l: usize, r: usize) -> i32 {
        self.qmax(1, 0, self.size - 1, l, r, 0)
    }

    fn qmax(&self, node: usize, nl: usize, nr: usize, l: usize, r: usize, acc: i32) -> i32 {
        if r < nl || nr < l {
            return -FAR;
        }
        if l <= nl && nr <= r {
            return acc + self.mx[node];
        }
        let mid = (nl + nr) / 2;
        let acc2 = acc + self.add[node];
        self.qmax(2 * node, nl, mid, l, r, acc2).max(self.qmax(
            2 * node + 1,
            mid + 1,
            nr,
            l,
            r,
            acc2,
        ))
    }

    /// First leaf in `[l, r]` whose value is `≤ t`.
    fn find_first_le(&self, l: usize, r: usize, t: i32) -> Option<usize> {
        self.ffle(1, 0, self.size - 1, l, r, 0, t)
    }

    #[allow(clippy::too_many_arguments)]
    fn ffle(
        &self,
        node: usize,
        nl: usize,
        nr: usize,
        l: usize,
        r: usize,
        acc: i32,
        t: i32,
    ) -> Option<usize> {
        if r < nl || nr < l || acc + self.mn[node] > t {
            return None;
        }
        if nl == nr {
            return Some(nl);
        }
        let mid = (nl + nr) / 2;
        let acc2 = acc + self.add[node];
        self.ffle(2 * node, nl, mid, l, r, acc2, t)
            .or_else(|| self.ffle(2 * node + 1, mid + 1, nr, l, r, acc2, t))
    }

    /// First leaf in `[l, r]` whose value is `≥ t`.
    fn find_first_ge(&self, l: usize, r: usize, t: i32) -> Option<usize> {
        self.ffge(1, 0, self.size - 1, l, r, 0, t)
    }

    #[allow(clippy::too_many_arguments)]
    fn ffge(
        &self,
        node: usize,
        nl: usize,
        nr: usize,
        l: usize,
        r: usize,
        acc: i32,
        t: i32,
    ) -> Option<usize> {
        if r < nl || nr < l || acc + self.mx[node] < t {
            return None;
        }
        if nl == nr {
            return Some(nl);
        }
        let mid = (nl + nr) / 2;
        let acc2 = acc + self.add[node];
        self.ffge(2 * node, nl, mid, l, r, acc2, t)
            .or_else(|| self.ffge(2 * node + 1, mid + 1, nr, l, r, acc2, t))
    }
}

/// An implementation of the region geometry independent of the kernel's, for tests:
/// `F(d)` = the largest `t` with `t·α ≤ d`, i.e. `t·∛2 ≤ d + t`, i.e. `2t³ ≤ (d + t)³`
/// (exact integer comparison; α = ∛2 − 1 as in Booker 2019, §2).
#[cfg(test)]
pub(crate) mod testgeom {
    use super::*;

    pub fn floor_d_over_alpha(d: u64) -> u64 {
        let ok = |t: u64| {
            let (t, d) = (t as u128, d as u128);
            2 * t * t * t <= (d + t) * (d + t) * (d + t)
        };
        let (mut lo, mut hi) = (0u64, 4 * d + 2); // 1/α < 3.85
        while lo + 1 < hi {
            let mid = lo + (hi - lo) / 2;
            if ok(mid) {
                lo = mid
            } else {
                hi = mid
            }
        }
        lo
    }

    pub fn isqrt(n: u64) -> u64 {
        let mut r = (n as f64).sqrt() as u64;
        while r * r > n {
            r -= 1;
        }
        while (r + 1) * (r + 1) <= n {
            r += 1;
        }
        r
    }

    /// Least `d` with `F(d) ≥ bound`.
    pub fn d_end(bound: u64) -> u64 {
        let mut d = 1;
        while floor_d_over_alpha(d) < bound {
            d += 1;
        }
        d
    }

    pub fn geometry(k: i64, bound: u64) -> Geometry<'static> {
        Geometry {
            z0: isqrt(k.unsigned_abs()),
            bound,
            main_z_floor: &floor_d_over_alpha,
            main_d_end: d_end(bound),
        }
    }

    /// A simple complete tiling: one small tile, one equal tile, main cut into d-columns of
    /// doubling width, each cut into |z| chunks of `chunk`.
    pub fn plan(k: i64, bound: u64, chunk: u64) -> Vec<Tile> {
        let g = geometry(k, bound);
        let mut out = Vec::new();
        let mut id = 1;
        let mut push = |rect: Rect, out: &mut Vec<Tile>| {
            out.push(Tile { id, rect });
            id += 1;
        };
        push(
            Rect {
                region: Region::Small,
                d_lo: 0,
                d_hi: 0,
                z_lo: 0,
                z_hi: g.z0.min(bound),
            },
            &mut out,
        );
        if bound > g.z0 {
            push(
                Rect {
                    region: Region::Equal,
                    d_lo: 0,
                    d_hi: 0,
                    z_lo: g.z0,
                    z_hi: bound,
                },
                &mut out,
            );
            let mut a = 1;
            while a < g.main_d_end {
                let b = (2 * a).min(g.main_d_end);
                let mut z = floor_d_over_alpha(a).max(g.z0);
                while z < bound {
                    let zh = (z + chunk).min(bound);
                    push(
                        Rect {
                            region: Region::Main,
                            d_lo: a,
                            d_hi: b,
                            z_lo: z,
                            z_hi: zh,
                        },
                        &mut out,
                    );
                    z = zh;
                }
                a = b;
            }
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::testgeom::*;
    use super::*;

    fn main_rect(d_lo: u64, d_hi: u64, z_lo: u64, z_hi: u64) -> Rect {
        Rect {
            region: Region::Main,
            d_lo,
            d_hi,
            z_lo,
            z_hi,
        }
    }

    #[test]
    fn floor_matches_floating_point_away_from_rounding() {
        // Common practice, no source: ⌊d/α⌋ in f64 is right unless d/α is within 1e-9 of an integer.
        let alpha = 2f64.cbrt() - 1.0;
        for d in 1..5000u64 {
            let x = d as f64 / alpha;
            if (x - x.round()).abs() > 1e-6 {
                assert_eq!(floor_d_over_alpha(d), x.floor() as u64, "d = {d}");
            }
        }
    }

    #[test]
    fn a_planned_tiling_is_complete_without_overlaps() {
        for (k, bound, chunk) in [
            (3i64, 500u64, 37u64),
            (30, 1000, 100),
            (114, 5, 3),
            (390, 19, 4),
            (2, 1, 1),
        ] {
            let tiles = plan(k, bound, chunk);
            let c = check_tiling(&geometry(k, bound), &tiles);
            assert!(c.is_complete(), "k={k} B={bound}: {c:?}");
            assert_eq!(c.overlap_count, 0, "k={k} B={bound}: {c:?}");
            assert!(c.outside.is_empty(), "k={k} B={bound}: {c:?}");
        }
    }

    #[test]
    fn a_missing_main_tile_is_a_gap_at_its_place() {
        let (k, bound) = (30, 1000);
        let mut tiles = plan(k, bound, 100);
        let pos = tiles
            .iter()
            .position(|t| t.rect.region == Region::Main && t.rect.d_lo == 16)
            .unwrap();
        let gone = tiles.remove(pos + 1);
        let c = check_tiling(&geometry(k, bound), &tiles);
        assert!(!c.is_complete());
        assert_eq!(c.gap_count, 1, "{c:?}");
        let g = c.gaps[0];
        assert_eq!(
            (g.region, g.d_lo, g.d_hi, g.z_first, g.z_last),
            (
                Region::Main,
                gone.rect.d_lo,
                gone.rect.d_hi,
                gone.rect.z_lo + 1,
                gone.rect.z_hi
            )
        );
    }

    #[test]
    fn small_region_needs_z_zero_and_equal_region_needs_every_z() {
        let (k, bound) = (390, 100); // Z0 = 19
        let g = geometry(k, bound);
        assert_eq!(g.z0, 19);
        let mut tiles = plan(k, bound, 30);
        // Replace the small tile (0, 19] by (1, 19]: z = 0 and z = 1 are uncovered.
        tiles[0].rect.z_lo = 1;
        let c = check_tiling(&g, &tiles);
        assert_eq!(
            c.gaps,
            vec![Gap {
                region: Region::Small,
                d_lo: 0,
                d_hi: 0,
                z_first: 0,
                z_last: 1
            }]
        );
        // Split it as (0, 7] ∪ (7, 19]: complete again.
        tiles[0].rect = Rect {
            region: Region::Small,
            d_lo: 0,
            d_hi: 0,
            z_lo: 0,
            z_hi: 7,
        };
        tiles.push(Tile {
            id: 900,
            rect: Rect {
                region: Region::Small,
                d_lo: 0,
                d_hi: 0,
                z_lo: 7,
                z_hi: 19,
            },
        });
        assert!(check_tiling(&g, &tiles).is_complete());
        // Cut the equal tile short.
        tiles[1].rect.z_hi = 99;
        let c = check_tiling(&g, &tiles);
        assert_eq!(
            c.gaps,
            vec![Gap {
                region: Region::Equal,
                d_lo: 0,
                d_hi: 0,
                z_first: 100,
                z_last: 100
            }]
        );
    }

    #[test]
    fn overlaps_are_named_but_not_fatal_and_outside_tiles_are_listed() {
        let (k, bound) = (3, 500);
        let mut tiles = plan(k, bound, 50);
        tiles.push(Tile {
            id: 1000,
            rect: main_rect(2, 3, 100, 120),
        });
        tiles.push(Tile {
            id: 1001,
            rect: main_rect(1, 2, 500, 900),
        }); // beyond the bound
        tiles.push(Tile {
            id: 1002,
            rect: main_rect(100, 101, 1, 5),
        }); // below the floor
        let c = check_tiling(&geometry(k, bound), &tiles);
        assert!(c.is_complete(), "{c:?}");
        assert_eq!(c.overlap_count, 1, "{c:?}");
        assert!(c.overlaps[0].units.contains(&1000), "{c:?}");
        assert_eq!((c.overlaps[0].z_first, c.overlaps[0].z_last), (101, 120));
        assert_eq!(c.outside, vec![1001, 1002]);
    }

    #[test]
    fn malformed_tiles_are_refused() {
        let (k, bound) = (3, 50);
        let mut tiles = plan(k, bound, 10);
        tiles.push(Tile {
            id: 77,
            rect: main_rect(5, 5, 10, 20),
        });
        tiles.push(Tile {
            id: 78,
            rect: Rect {
                region: Region::Equal,
                d_lo: 1,
                d_hi: 2,
                z_lo: 1,
                z_hi: 20,
            },
        });
        let c = check_tiling(&geometry(k, bound), &tiles);
        assert!(!c.is_complete());
        assert_eq!(
            c.malformed.iter().map(|m| m.0).collect::<Vec<_>>(),
            vec![77, 78]
        );
    }

    /// Brute force: enumerate every point of the three regions and count its tiles.
    fn brute(k: i64, bound: u64, tiles: &[Tile]) -> (bool, bool) {
        let g = geometry(k, bound);
        let count = |region: Region, d: u64, z: u64| {
            tiles
                .iter()
                .filter(|t| {
                    let r = &t.rect;
                    r.region == region
                        && (region != Region::Main || (r.d_lo <= d && d < r.d_hi))
                        && ((r.z_lo < z && z <= r.z_hi)
                            || (region == Region::Small && r.z_lo == 0 && z == 0))
                })
                .count()
        };
        let mut points = Vec::new();
        for z in 0..=g.z0.min(bound) {
            points.push((Region::Small, 0, z));
        }
        for z in g.z0 + 1..=bound {
            points.push((Region::Equal, 0, z));
            for d in 1.. {
                if floor_d_over_alpha(d) >= z {
                    break;
                }
                points.push((Region::Main, d, z));
            }
        }
        let counts: Vec<usize> = points.iter().map(|&(r, d, z)| count(r, d, z)).collect();
        (
            counts.iter().all(|&c| c >= 1),
            counts.iter().any(|&c| c >= 2),
        )
    }

    #[test]
    fn agrees_with_brute_force_on_random_tilings() {
        // Brute force over every point; random tilings from a fixed linear congruential stream.
        let mut x: u64 = 0x2545_f491_4f6c_dd1d;
        let mut rnd = |n: u64| {
            x = x
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (x >> 33) % n
        };
        let mut complete_seen = 0;
        let mut gap_seen = 0;
        for round in 0..400 {
            let k = [2i64, 3, 30, 33, 42, 114, 390][round % 7];
            let bound = 1 + rnd(60);
            let mut tiles = plan(k, bound, 1 + rnd(20));
            // Perturb: drop, shrink, grow or add tiles.
            for _ in 0..rnd(4) {
                if tiles.is_empty() {
                    break;
                }
                let i = rnd(tiles.len() as u64) as usize;
                match rnd(4) {
                    0 => {
                        tiles.remove(i);
                    }
                    1 => tiles[i].rect.z_hi = tiles[i].rect.z_lo + 1 + rnd(3),
                    2 => tiles[i].rect.z_lo = tiles[i].rect.z_lo.saturating_sub(rnd(5)),
                    _ => {
                        let d_lo = 1 + rnd(20);
                        let z_lo = rnd(70);
                        let rect = main_rect(d_lo, d_lo + 1 + rnd(5), z_lo, z_lo + 1 + rnd(30));
                        tiles.push(Tile {
                            id: 5000 + i as i64,
                            rect,
                        });
                    }
                }
            }
            tiles.retain(|t| t.rect.z_lo < t.rect.z_hi);
            let c = check_tiling(&geometry(k, bound), &tiles);
            let (covered, overlapped) = brute(k, bound, &tiles);
            assert_eq!(
                c.is_complete(),
                covered,
                "round {round} k={k} B={bound}: {c:?}\n{tiles:?}"
            );
            assert_eq!(
                c.overlap_count > 0,
                overlapped,
                "round {round} k={k} B={bound}: {c:?}\n{tiles:?}"
            );
            if covered {
                complete_seen += 1
            } else {
                gap_seen += 1
            }
        }
        assert!(
            complete_seen > 50 && gap_seen > 50,
            "{complete_seen} complete, {gap_seen} with gaps"
        );
    }

    #[test]
    fn a_million_tiles_in_reasonable_time() {
        // d-columns of one width, each cut into |z| chunks; then the same area cut the other
        // way round in the upper half (z-bands of d-ranges), so that slabs are misaligned.
        let (k, bound) = (33, 40_000_000u64);
        let g = geometry(k, bound);
        let mut tiles = Vec::new();
        let mut id = 0;
        let half = bound / 2;
        let width = g.main_d_end / 1000 + 1;
        let mut a = 1;
        while a < g.main_d_end {
            let b = (a + width).min(g.main_d_end);
            let mut z = floor_d_over_alpha(a).max(g.z0);
            while z < half {
                let zh = (z + half / 1500).min(half);
                tiles.push(Tile {
                    id,
                    rect: main_rect(a, b, z, zh),
                });
                id += 1;
                z = zh;
            }
            a = b;
        }
        let mut z = half;
        let band = half / 1000;
        while z < bound {
            let zh = (z + band).min(bound);
            let mut a = 1;
            let w = width + 7;
            while a < g.main_d_end {
                let b = (a + w).min(g.main_d_end);
                let zl = z.max(floor_d_over_alpha(a));
                if zl < zh {
                    tiles.push(Tile {
                        id,
                        rect: main_rect(a, b, zl, zh),
                    });
                    id += 1;
                }
                a = b;
            }
            z = zh;
        }
        tiles.push(Tile {
            id: -1,
            rect: Rect {
                region: Region::Small,
                d_lo: 0,
                d_hi: 0,
                z_lo: 0,
                z_hi: g.z0,
            },
        });
        tiles.push(Tile {
            id: -2,
            rect: Rect {
                region: Region::Equal,
                d_lo: 0,
                d_hi: 0,
                z_lo: g.z0,
                z_hi: bound,
            },
        });
        assert!(tiles.len() > 1_000_000, "{}", tiles.len());
        let t = std::time::Instant::now();
        let c = check_tiling(&geometry(k, bound), &tiles);
        let el = t.elapsed();
        assert!(c.is_complete() && c.overlap_count == 0, "{c:?}");
        eprintln!("{} tiles checked in {:.2?}", tiles.len(), el);
        assert!(el.as_secs() < 60, "{el:?}");
    }
}
