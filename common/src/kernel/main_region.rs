//! The main region (C) of docs/method.md: Booker's `d = |x + y|` search over one rectangle
//! `d ∈ [d_lo, d_hi)`, `|z| ∈ (z_lo, z_hi]`.
//!
//! # What is enumerated
//! For each `d`, each root `r` of `z³ ≡ k (mod d)` and each sign `s`, the class of `u = |z|`
//! with `u ≡ s·r (mod d)` and `max(z_lo, L(d)) < u ≤ z_hi`, where `L(d) = max(Z0,
//! main_z_floor(d))` (points with `u ≤ L(d)` are not in the region). Along a class,
//! `u = u₀ + d·t`, and `g(t) = (4(u³ − s·k) − d³)/d` is the cubic
//!
//! ```text
//!     g(t) = g(0) + 12u₀²·t + 12d·u₀·t² + 4d²·t³,
//! ```
//!
//! so `g(t) mod Q` depends only on `t mod Q` and has a periodic bit pattern. The sieve
//! predicate is in [`super::survivor`].
//!
//! # Two paths, one predicate
//! * **long classes** (small `d`): the tier-1 acceptance patterns (`Q = 192, 81, 15, 21, 33`)
//!   are built once per class, and 64 values of `t` are tested at a time by AND-ing 64-bit
//!   windows of the patterns, like a segmented prime sieve whose segment is a machine word.
//!   The few words' bits left over go to tiers 2 and 3, then to the exact test.
//! * **short classes** (large `d`): `g(t) mod M1` by Horner for each `t`.
//!
//! Machine words (`u128`) carry the exact test while `u ≤ 2⁴¹`; beyond, each survivor's exact
//! test uses GMP. `g(0) mod M` of a class is computed in words for every `u` (from the
//! definition while `u ≤ 2⁴¹`, else by exact 128-bit division or by expanding the cube around
//! the root, see `g0_residues`). The sieve itself always runs on words.
//!
//! # Factoring the `d` axis
//! The roots of `k` mod every `d` come from the bucketed segmented factor sieve of
//! [`super::segsieve`] (each prime up to `√d` touches only the segments it hits; the roots
//! mod the large cofactor of every `d` computed four at a time), or, for narrow ranges of huge
//! `d`, from factoring each `d`. [`Path::Reference`] keeps the previous implementation (the
//! classic table sieve of [`super::sieve`], `g(0)` in GMP beyond `2⁴¹`) for comparisons; both
//! give the same digest.
//!
//! # The digest of a rectangle
//! * `candidates`: pairs `(d, z)` of the region inside the rectangle with `z³ ≡ k (mod d)`.
//! * `survivors`, `hash`: candidates passing the sieve predicate; sum of
//!   [`survivor_hash`] over them.
//! * `classes`: classes `(d, r, s)` whose *first* member in the region — the least `u > L(d)`
//!   in the class — lies in the rectangle (each class of the region is counted by exactly one
//!   rectangle of any tiling).
//! * `d_values`: the `d` of the rectangle with at least one root whose column starts in it,
//!   i.e. `z_lo ≤ L(d) < z_hi` (so again each `d` is counted once per tiling).
//!
//! All five are sums over points or anchored to one point, so the digest of a rectangle is the
//! sum of the digests of the pieces of any split along `d` or `|z|`, on any number of threads.

#![allow(clippy::manual_is_multiple_of)] // `is_multiple_of` is newer than our MSRV (1.80)

use super::arith::{cube_wide, isqrt_u128};
use super::segsieve::{self, SegScratch, SieveTable};
use super::sieve::{for_each_d, PrimeTable, RootScratch};
pub use super::survivor::survivor_hash;
use super::survivor::{self, tables, tier1, tier2, tier3, Tables, M1, M2, M3};
use super::ScanOutput;
use crate::{Digest, Rect, Solution};
use rug::Integer;

/// `⌊2⁶² / α⌋`, α = ∛2 − 1 (checked exactly in the tests).
const INV_ALPHA_Q62: u128 = 0xf63a_867b_2b83_1d93;
/// `⌊2⁶⁴ · α⌋`.
const ALPHA_Q64: u128 = 0x428a_2f98_d728_ae22;
/// Largest `u = |z|` for which the exact test fits `i128`: `4u³ < 2¹²⁷`.
pub const WORD_U_MAX: u64 = 1 << 41;

/// Is `t ≤ d/α`?
///
/// Proof: `α = ∛2 − 1 > 0`, so `t ≤ d/α ⟺ αt ≤ d ⟺ ∛2·t ≤ d + t`. Both sides are `≥ 0`
/// and cubing is strictly increasing on `[0, ∞)`, so this is `⟺ 2t³ ≤ (d + t)³`, a
/// comparison of integers, done exactly (in `u128` when `d + t < 2⁴²`, else in 256 bits).
#[inline]
fn at_most_d_over_alpha(d: u64, t: u128) -> bool {
    let a = d as u128 + t;
    if a < 1 << 42 {
        2 * t * t * t <= a * a * a
    } else {
        let (ah, al) = cube_wide(a);
        let (th, tl) = cube_wide(t);
        let (th2, tl2) = ((th << 1) | (tl >> 127), tl << 1);
        (th2, tl2) <= (ah, al)
    }
}

/// The largest `t` with `t ≤ d/α` (α = ∛2 − 1), exactly; saturates at `u64::MAX` (which is
/// above every supported `|z|`). The main region at `d` is `|z| > max(Z0, main_z_floor(d))`.
///
/// Method: `t₀ = ⌊d·C/2⁶²⌋` with `C = ⌊2⁶²/α⌋` satisfies `t₀ ≤ d/α < t₀ + 3` (the error of
/// `C` contributes `< d/2⁶² ≤ 2`, the floor `< 1`), then step up while the exact test
/// [`at_most_d_over_alpha`] allows.
pub fn main_z_floor(d: u64) -> u64 {
    let mut t = (d as u128 * INV_ALPHA_Q62) >> 62;
    while at_most_d_over_alpha(d, t + 1) {
        t += 1;
    }
    t.min(u64::MAX as u128) as u64
}

/// The least `d` with `main_z_floor(d) ≥ u`, i.e. `d ≥ α·u`: no `d` from there on has a
/// point of the region with `|z| ≤ u`.
pub fn main_d_end(u: u64) -> u64 {
    let mut d = ((u as u128 * ALPHA_Q64) >> 64) as u64;
    while d > 0 && at_most_d_over_alpha(d - 1, u as u128) {
        d -= 1;
    }
    while !at_most_d_over_alpha(d, u as u128) {
        d += 1;
    }
    d
}

/// `L(d) = max(Z0, main_z_floor(d))`: the region at `d` is `|z| > L(d)`.
#[inline]
pub fn region_floor(z0: u64, d: u64) -> u64 {
    z0.max(main_z_floor(d))
}

/// Per-rectangle constants.
pub(crate) struct Ctx<'a> {
    pub k: i64,
    pub z0: u64,
    pub z_lo: u64,
    pub z_hi: u64,
    pub words: bool,
    pub t: &'a Tables,
    /// the reference path ([`Path::Reference`]): `g(0)` from its definition
    pub reference: bool,
}

/// Which implementation of the per-`d` work to run; both give the same digest (tested).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Path {
    /// Bucketed segmented factor sieve ([`super::segsieve`]) and `g(0)` residues in words.
    Fast,
    /// The classic table sieve ([`super::sieve`]: every prime up to `√d` visited in every
    /// segment) and `g(0)` in GMP beyond `2⁴¹`; kept as the reference for tests and the
    /// benchmark.
    Reference,
}

/// Accumulated results of a piece of work.
#[derive(Default)]
pub(crate) struct Acc {
    pub digest: Digest,
    pub solutions: Vec<Solution>,
}

/// Most `d` in one job of the bucketed sieve (bounds its memory).
const JOB_D_MAX: u64 = 1 << 24;

/// Classes shorter than this are tested one `t` at a time.
pub const SIEVE_MIN_LEN: u64 = 256;

/// Coefficients of `g(t)` modulo `M`: `[g(0), 12u₀², 12d·u₀, 4d²] mod M` (`M < 2³²`).
#[derive(Clone, Copy)]
struct Poly<const M: u64> {
    c: [u64; 4],
}

impl<const M: u64> Poly<M> {
    #[inline(always)]
    fn new(g0_mod: u64, u0: u64, d: u64) -> Self {
        let um = u0 % M;
        let dm = d % M;
        Poly {
            c: [
                g0_mod,
                12 * um % M * um % M,
                12 * dm % M * um % M,
                4 * dm % M * dm % M,
            ],
        }
    }
    #[inline(always)]
    fn eval(&self, t: u64) -> u64 {
        let t = t % M;
        let [c0, c1, c2, c3] = self.c;
        (((c3 * t + c2) % M * t + c1) % M * t + c0) % M
    }
}

/// `x mod M` for `u128` x with a constant `M < 2³²` (no 128-bit division).
#[inline(always)]
fn mod_u128<const M: u64>(x: u128) -> u64 {
    let r64 = ((1u128 << 64) % M as u128) as u64;
    let (hi, lo) = ((x >> 64) as u64, x as u64);
    ((hi % M) * r64 % M + lo % M) % M
}

/// Per-`d` constants for exact division by `d` in words: `d = 2^v·d'`, `d'⁻¹ mod 2¹²⁸`.
#[derive(Clone, Copy)]
struct DivD {
    v: u32,
    inv: u128,
}

impl DivD {
    #[inline]
    fn new(d: u64) -> DivD {
        let v = d.trailing_zeros();
        DivD {
            v,
            inv: super::arith::inv_pow2_128(d >> v),
        }
    }
    /// `n / d` for `n` a multiple of `d` (exact division by the inverse of the odd part).
    #[inline(always)]
    fn exact(&self, n: u128) -> u128 {
        (n >> self.v).wrapping_mul(self.inv)
    }
}

/// `g(0)` modulo `M1, M2, M3` for the class `u ≡ res (mod d)` starting at `u₀`, sign `s`,
/// in machine words for every `u₀ < 2⁶³` (no GMP).
///
/// Write `u₀ = res + d·q` (`0 ≤ res < d`, `res³ ≡ s·k mod d`). Expanding the cube,
///
/// ```text
///     (u₀³ − s·k)/d = w₀ + 3·res²·q + 3·res·d·q² + d²·q³,   w₀ = (res³ − s·k)/d,
///     g = 4·(u₀³ − s·k)/d − d²,
/// ```
///
/// and `|w₀| < d² + |k| < 2¹²⁷` is found exactly from the low `128 + v` bits of
/// `res³ − s·k` (`d = 2^v·d'`): shift out `2^v`, multiply by `d'⁻¹ mod 2¹²⁸`. The rest is
/// arithmetic mod `M < 2²⁹`. Agrees with [`g0_residues_ref`] (tested).
///
/// When `g < 2¹²⁸` (so whenever `4u₀³ < 2¹²⁸·d`, e.g. the large-`d` classes up to `d ≈ 2⁶⁰`),
/// `g` itself comes from the low bits of `4(u₀³ − s·k) − d³` in the same way, which is cheaper.
#[inline]
fn g0_residues(k: i64, d: u64, dd: &DivD, s: i64, res: u64, u0: u64) -> [u64; 3] {
    debug_assert!(res < d.max(1) && u0 >= res && (u0 - res) % d == 0);
    {
        // N = 4(u₀³ − s·k) − d³ in 256 bits (u₀, d < 2⁶³)
        let (ch, cl) = cube_wide(u0 as u128);
        let (mut h, mut l) = ((ch << 2) | (cl >> 126), cl << 2);
        let sk4 = 4 * s as i128 * k as i128;
        if sk4 >= 0 {
            let (x, b) = l.overflowing_sub(sk4 as u128);
            l = x;
            h = h.wrapping_sub(b as u128);
        } else {
            let (x, c) = l.overflowing_add(sk4.unsigned_abs());
            l = x;
            h = h.wrapping_add(c as u128);
        }
        let (dh, dl) = cube_wide(d as u128);
        let (x, b) = l.overflowing_sub(dl);
        l = x;
        h = h.wrapping_sub(dh).wrapping_sub(b as u128);
        // 0 ≤ N < d·2¹²⁸ ⟺ ⌊N/2¹²⁸⌋ < d: then g = N/d < 2¹²⁸ is exact mod 2¹²⁸
        if h < d as u128 {
            let shifted = if dd.v == 0 {
                l
            } else {
                (l >> dd.v) | (h << (128 - dd.v))
            };
            let g = shifted.wrapping_mul(dd.inv);
            return [mod_u128::<M1>(g), mod_u128::<M2>(g), mod_u128::<M3>(g)];
        }
    }
    let (hi, lo) = cube_wide(res as u128);
    let sk = s as i128 * k as i128;
    let (lo2, hi2) = if sk >= 0 {
        let (l, b) = lo.overflowing_sub(sk as u128);
        (l, hi.wrapping_sub(b as u128))
    } else {
        let (l, c) = lo.overflowing_add(sk.unsigned_abs());
        (l, hi.wrapping_add(c as u128))
    };
    let shifted = if dd.v == 0 {
        lo2
    } else {
        (lo2 >> dd.v) | (hi2 << (128 - dd.v))
    };
    let w0 = shifted.wrapping_mul(dd.inv) as i128;
    // q = (u₀ − res)/d exactly, through the same inverse (low 64 bits)
    let q = ((u0 - res) >> dd.v).wrapping_mul(dd.inv as u64);
    #[inline(always)]
    fn one<const M: u64>(w0: i128, res: u64, d: u64, q: u64) -> u64 {
        let wm = mod_u128::<M>(w0.unsigned_abs());
        let wm = if w0 < 0 && wm != 0 { M - wm } else { wm };
        let (rm, dm, qm) = (res % M, d % M, q % M);
        let t1 = 3 * (rm * rm % M) % M * qm % M;
        let q2 = qm * qm % M;
        let t2 = 3 * (rm * dm % M) % M * q2 % M;
        let d2 = dm * dm % M;
        let t3 = d2 * (q2 * qm % M) % M;
        let w = (wm + t1 + t2 + t3) % M;
        (4 * w + M - d2) % M
    }
    [
        one::<M1>(w0, res, d, q),
        one::<M2>(w0, res, d, q),
        one::<M3>(w0, res, d, q),
    ]
}

/// `g(0)` modulo `M1, M2, M3` straight from the definition (`u128` while `u ≤ 2⁴¹`, else GMP):
/// the reference for [`g0_residues`].
#[cfg_attr(not(test), allow(dead_code))]
fn g0_residues_ref(ctx: &Ctx, d: u64, dd: &DivD, s: i64, u0: u64) -> [u64; 3] {
    if ctx.words {
        let u = u0 as u128;
        let d3 = (d as u128) * (d as u128) * (d as u128);
        // N = 4(u³ − s·k) − d³ > 0 in the region (u > √k, d < 0.26u)
        let n = (4 * u * u * u)
            .wrapping_sub((4 * s as i128 * ctx.k as i128) as u128)
            .wrapping_sub(d3);
        let g = dd.exact(n);
        debug_assert_eq!(g.wrapping_mul(d as u128), n);
        [mod_u128::<M1>(g), mod_u128::<M2>(g), mod_u128::<M3>(g)]
    } else {
        let g = g_big(ctx.k, d, s, u0);
        [
            g.mod_u(M1 as u32) as u64,
            g.mod_u(M2 as u32) as u64,
            g.mod_u(M3 as u32) as u64,
        ]
    }
}

/// `g = (4(u³ − s·k) − d³)/d` in GMP.
fn g_big(k: i64, d: u64, s: i64, u: u64) -> Integer {
    let u = Integer::from(u);
    let dd = Integer::from(d);
    let n: Integer =
        Integer::from(4) * (u.clone() * &u * &u - Integer::from(s) * k) - dd.clone() * &dd * &dd;
    let (g, r) = n.div_rem_euc(dd);
    debug_assert!(r == 0);
    g
}

/// A survivor: count and hash it, then the exact test.
#[inline(never)]
fn survivor(ctx: &Ctx, acc: &mut Acc, d: u64, s: i64, u: u64) {
    let z = s * u as i64;
    acc.digest.survivors += 1;
    acc.digest.hash = acc.digest.hash.wrapping_add(survivor_hash(ctx.k, d, z));
    if let Some(sol) = exact_test(ctx.k, d, z, ctx.words) {
        acc.solutions.push(sol);
    }
}

/// The exact test of one `(d, z)`: `3d | 4s(z³−k) − d³`, `m` a square `r²`, `r ≡ d (mod 2)`;
/// returns the verified solution.
pub fn exact_test(k: i64, d: u64, z: i64, words: bool) -> Option<Solution> {
    let s: i64 = if z > 0 { 1 } else { -1 };
    let u = z.unsigned_abs();
    let (r, ok) = if words && u <= WORD_U_MAX {
        let uu = u as i128;
        let n = 4 * (uu * uu * uu - s as i128 * k as i128) - (d as i128).pow(3);
        let q = 3 * d as i128;
        if n < 0 || n % q != 0 {
            return None;
        }
        let m = (n / q) as u128;
        let r = isqrt_u128(m);
        (r as i128, r * r == m)
    } else {
        let g = g_big(k, d, s, u);
        let (m, rem) = g.div_rem_euc(Integer::from(3));
        if rem != 0 || m < 0 {
            return None;
        }
        let (r, rest) = m.sqrt_rem(Integer::new());
        if rest != 0 {
            return None;
        }
        (r.to_i128()?, true)
    };
    if !ok || (r as u64 ^ d) & 1 != 0 {
        return None;
    }
    let sd = s as i128 * d as i128;
    let x = (-sd + r) / 2;
    let y = (-sd - r) / 2;
    let sol = Solution::new(x, y, z as i128);
    if sol.verify(k) {
        Some(sol)
    } else {
        debug_assert!(
            false,
            "exact test passed but verification failed: {sol} for k={k}"
        );
        None
    }
}

/// One class `u = u₀ + d·t`, `t ∈ [0, n)`.
#[allow(clippy::too_many_arguments)]
fn scan_class(ctx: &Ctx, acc: &mut Acc, d: u64, dd: &DivD, s: i64, res: u64, u0: u64, n: u64) {
    // in words (|z| ≤ 2⁴¹) the definition is cheapest; beyond, the expansion avoids GMP
    let g0 = if ctx.reference || ctx.words {
        g0_residues_ref(ctx, d, dd, s, u0)
    } else {
        g0_residues(ctx.k, d, dd, s, res, u0)
    };
    let dpar = (d & 1) as usize;
    let t = ctx.t;
    if n == 1 {
        // the usual case for large d: g(0) itself
        if tier1(t, g0[0], dpar) && tier2(t, g0[1]) && tier3(t, g0[2]) {
            survivor(ctx, acc, d, s, u0);
        }
        return;
    }
    let p1 = Poly::<M1>::new(g0[0], u0, d);
    if n < 8 {
        // tiers 2 and 3 only for the few that pass tier 1
        for i in 0..n {
            if tier1(t, p1.eval(i), dpar)
                && tier2(t, Poly::<M2>::new(g0[1], u0, d).eval(i))
                && tier3(t, Poly::<M3>::new(g0[2], u0, d).eval(i))
            {
                survivor(ctx, acc, d, s, u0 + d * i);
            }
        }
        return;
    }
    let p2 = Poly::<M2>::new(g0[1], u0, d);
    let p3 = Poly::<M3>::new(g0[2], u0, d);
    if n < SIEVE_MIN_LEN {
        // g(t) mod M1 by finite differences of the cubic (n < SIEVE_MIN_LEN < M1)
        let e = [p1.eval(0), p1.eval(1), p1.eval(2), p1.eval(3)];
        let mut f = e[0];
        let mut d1 = (e[1] + M1 - e[0]) % M1;
        let mut d2 = (e[2] + 2 * M1 - 2 * e[1] + e[0]) % M1;
        let d3 = (e[3] + 3 * e[1] + 4 * M1 - 3 * e[2] - e[0]) % M1;
        for i in 0..n {
            if tier1(t, f, dpar) && tier2(t, p2.eval(i)) && tier3(t, p3.eval(i)) {
                survivor(ctx, acc, d, s, u0 + d * i);
            }
            f += d1;
            if f >= M1 {
                f -= M1;
            }
            d1 += d2;
            if d1 >= M1 {
                d1 -= M1;
            }
            d2 += d3;
            if d2 >= M1 {
                d2 -= M1;
            }
        }
        return;
    }
    let mut pats = Patterns::new(t, &p1, dpar);
    let words = n.div_ceil(64);
    for w in 0..words {
        let mut bits = pats.next_word();
        if w == words - 1 && n % 64 != 0 {
            bits &= (1u64 << (n % 64)) - 1;
        }
        while bits != 0 {
            let i = w * 64 + bits.trailing_zeros() as u64;
            bits &= bits - 1;
            debug_assert!(tier1(t, p1.eval(i), dpar));
            if tier2(t, p2.eval(i)) && tier3(t, p3.eval(i)) {
                survivor(ctx, acc, d, s, u0 + d * i);
            }
        }
    }
}

/// Tier-1 acceptance patterns of one class, as 64-bit windows.
struct Patterns {
    /// pattern bits repeated, so that any 64-bit window at offset `< len` can be read
    buf: [[u64; 6]; 5],
    len: [u32; 5],
    off: [u32; 5],
}

impl Patterns {
    fn new(t: &Tables, p1: &Poly<M1>, dpar: usize) -> Patterns {
        // (residue modulus Q, period in t, acceptance table)
        let specs: [(u64, u64, &[bool]); 5] = [
            (192, 192, &t.t192[dpar][..]),
            (81, 27, &t.t81[..]),
            (15, 15, &t.small[0][..]),
            (21, 21, &t.small[1][..]),
            (33, 33, &t.small[2][..]),
        ];
        let mut buf = [[0u64; 6]; 5];
        let mut len = [0u32; 5];
        for (j, &(q, period, table)) in specs.iter().enumerate() {
            let c = p1.c.map(|c| c % q);
            // one period of acceptance bits, via finite differences of the cubic mod q
            let ev = |t: u64| (((c[3] * t + c[2]) % q * t + c[1]) % q * t + c[0]) % q;
            let (mut f, mut d1, mut d2) = (
                ev(0),
                (ev(1) + q - ev(0)) % q,
                (ev(2) + 2 * q - 2 * ev(1) + ev(0)) % q,
            );
            let d3 = 6 * c[3] % q;
            // one period of acceptance bits, as words
            let mut period_bits = [0u64; 3];
            for i in 0..period as usize {
                period_bits[i / 64] |= (table[f as usize] as u64) << (i % 64);
                f += d1;
                if f >= q {
                    f -= q;
                }
                d1 += d2;
                if d1 >= q {
                    d1 -= q;
                }
                d2 += d3;
                if d2 >= q {
                    d2 -= q;
                }
            }
            // window length: a multiple of the period that is ≥ 64; the buffer holds the
            // pattern repeated over bits [0, l + 64)
            let l = period * 64u64.div_ceil(period);
            len[j] = l as u32;
            let words = (period as usize).div_ceil(64);
            let mut start = 0usize;
            while start < (l + 64) as usize {
                for (wi, &w) in period_bits[..words].iter().enumerate() {
                    let o = start + wi * 64;
                    let (x, sh) = (o / 64, o % 64);
                    if x < 6 {
                        buf[j][x] |= w << sh;
                    }
                    if sh != 0 && x + 1 < 6 {
                        buf[j][x + 1] |= w >> (64 - sh);
                    }
                }
                start += period as usize;
            }
            debug_assert!(l + 64 <= 6 * 64);
        }
        Patterns {
            buf,
            len,
            off: [0; 5],
        }
    }

    #[inline(always)]
    fn window(buf: &[u64; 6], off: u32) -> u64 {
        let w = (off / 64) as usize;
        let sh = off % 64;
        if sh == 0 {
            buf[w]
        } else {
            (buf[w] >> sh) | (buf[w + 1] << (64 - sh))
        }
    }

    #[inline(always)]
    fn next_word(&mut self) -> u64 {
        let mut acc = !0u64;
        for j in 0..5 {
            acc &= Self::window(&self.buf[j], self.off[j]);
            let mut o = self.off[j] + 64;
            if o >= self.len[j] {
                o -= self.len[j];
            }
            self.off[j] = o;
        }
        acc
    }
}

/// All classes of one `d` within `(z_lo', z_hi']` (the piece being scanned).
fn scan_d(ctx: &Ctx, acc: &mut Acc, d: u64, roots: &[u64], count_only: bool) {
    if roots.is_empty() {
        return;
    }
    let l = region_floor(ctx.z0, d);
    if l >= ctx.z_hi {
        return;
    }
    let lo = l.max(ctx.z_lo);
    if l >= ctx.z_lo {
        acc.digest.d_values += 1;
    }
    // least u > floor with u ≡ res (mod d), given floor + 1 and (floor + 1) mod d;
    // floor < 2⁶³ and res < d ≤ 2⁶³: no overflow
    let (la, lam) = (l + 1, (l + 1) % d);
    let (lb, lbm) = if lo == l {
        (la, lam)
    } else {
        (lo + 1, (lo + 1) % d)
    };
    let up = |f1: u64, f1m: u64, res: u64| -> u64 {
        let delta = if res >= f1m { res - f1m } else { res + d - f1m };
        f1 + delta
    };
    let dd = DivD::new(d);
    for &r in roots {
        for s in [1i64, -1] {
            let res = if s == 1 { r } else { (d - r) % d };
            let anchor = up(la, lam, res);
            if anchor > ctx.z_lo && anchor <= ctx.z_hi {
                acc.digest.classes += 1;
            }
            let u0 = up(lb, lbm, res);
            if u0 > ctx.z_hi {
                continue;
            }
            let rest = ctx.z_hi - u0;
            let n = if rest < d { 1 } else { rest / d + 1 };
            acc.digest.candidates += n;
            if !count_only {
                scan_class(ctx, acc, d, &dd, s, res, u0, n);
            }
        }
    }
}

/// One piece of work: `d ∈ [d_lo, d_hi)`, `u ∈ (z_lo, z_hi]`.
#[derive(Clone, Copy, Debug)]
struct Job {
    d_lo: u64,
    d_hi: u64,
    z_lo: u64,
    z_hi: u64,
}

/// Candidates of a job-sized piece for one `d`, roughly (for splitting only).
fn approx_len(z0: u64, d: u64, z_lo: u64, z_hi: u64) -> f64 {
    let l = (z0 as f64)
        .max(d as f64 * 3.847_322_101_863_072)
        .max(z_lo as f64);
    ((z_hi as f64 - l).max(0.0) / d as f64) * 2.0
}

/// Split the rectangle into jobs of roughly `target` candidate-equivalents each, and at least
/// `min_n` (when there are that many), at most `max_n` values of `d` each. Counting only
/// (`count_only`), a class costs the same however long it is, so only the `d` count.
fn plan_jobs(
    z0: u64,
    rect: &Rect,
    d_end: u64,
    target: f64,
    (min_n, max_n): (u64, u64),
    count_only: bool,
) -> Vec<Job> {
    const PER_D: f64 = 60.0; // per-d overhead in candidate-equivalents
    let mut jobs = Vec::new();
    let mut d = rect.d_lo;
    while d < d_end {
        let per_d = if count_only {
            PER_D
        } else {
            approx_len(z0, d, rect.z_lo, rect.z_hi) + PER_D
        };
        if per_d >= target {
            // one d, split along |z|
            let lo = region_floor(z0, d).max(rect.z_lo);
            let pieces = (per_d / target).ceil().min(1e6) as u64;
            let span = (rect.z_hi - lo).div_ceil(pieces).max(1);
            let mut a = rect.z_lo;
            let mut b = lo.saturating_add(span).min(rect.z_hi);
            while a < rect.z_hi {
                jobs.push(Job {
                    d_lo: d,
                    d_hi: d + 1,
                    z_lo: a,
                    z_hi: b,
                });
                a = b;
                b = b.saturating_add(span).min(rect.z_hi);
            }
            d += 1;
        } else {
            // few candidates per d: the per-d work dominates, and long jobs amortise the
            // factor sieve's set-up
            let floor = if per_d <= 4.0 * PER_D { min_n } else { 1 };
            let n = ((target / per_d) as u64)
                .max(floor)
                .clamp(1, max_n)
                .min(d_end - d);
            jobs.push(Job {
                d_lo: d,
                d_hi: d + n,
                z_lo: rect.z_lo,
                z_hi: rect.z_hi,
            });
            d += n;
        }
    }
    jobs
}

/// How a rectangle's `d` are factored.
enum Factorer {
    /// bucketed segmented sieve
    Seg(SieveTable),
    /// classic table sieve (reference path)
    Table(PrimeTable),
    /// Pollard–Brent on each `d` (narrow ranges of huge `d`)
    PerD,
}

fn run_job(k: i64, z0: u64, job: &Job, fac: &Factorer, count_only: bool, path: Path) -> Acc {
    let ctx = Ctx {
        k,
        z0,
        z_lo: job.z_lo,
        z_hi: job.z_hi,
        words: job.z_hi <= WORD_U_MAX,
        t: tables(),
        reference: path == Path::Reference,
    };
    let mut acc = Acc::default();
    match fac {
        Factorer::Seg(t) => {
            thread_local! {
                static SC: std::cell::RefCell<SegScratch> = std::cell::RefCell::new(SegScratch::default());
            }
            SC.with(|sc| {
                let mut sc = sc.borrow_mut();
                segsieve::for_each_d(t, job.d_lo, job.d_hi, &mut sc, |d, roots| {
                    scan_d(&ctx, &mut acc, d, roots, count_only)
                });
            });
        }
        Factorer::Table(t) => {
            let mut sc = RootScratch::default();
            for_each_d(k, job.d_lo, job.d_hi, Some(t), &mut sc, |d, roots| {
                scan_d(&ctx, &mut acc, d, roots, count_only)
            });
        }
        Factorer::PerD => {
            let mut sc = RootScratch::default();
            for_each_d(k, job.d_lo, job.d_hi, None, &mut sc, |d, roots| {
                scan_d(&ctx, &mut acc, d, roots, count_only)
            });
        }
    }
    acc
}

fn z0_of(k: i64) -> u64 {
    super::arith::isqrt_u64(k.unsigned_abs())
}

/// The part `[d_lo, d_end)` of the rectangle's `d` range that meets the region.
fn d_end_of(rect: &Rect) -> u64 {
    rect.d_hi.min(main_d_end(rect.z_hi))
}

fn run(
    k: i64,
    rect: &Rect,
    threads: usize,
    progress: &(dyn Fn(u64) + Sync),
    count_only: bool,
    path: Path,
) -> ScanOutput {
    use rayon::prelude::*;
    let z0 = z0_of(k);
    let d_end = d_end_of(rect);
    if rect.d_lo >= d_end || rect.z_lo >= rect.z_hi {
        return ScanOutput {
            digest: Digest::ZERO,
            solutions: Vec::new(),
        };
    }
    let nthreads = if threads == 0 {
        rayon::current_num_threads()
    } else {
        threads
    }
    .max(1) as u64;
    let (fac, job_n) = match path {
        Path::Fast if SieveTable::worth_sieving(rect.d_lo, d_end) => {
            let t = SieveTable::new(k, d_end);
            // each job generates the primes up to √d: make jobs long enough to amortise that
            // (about 26 ns per prime against ~100 ns per d), but keep one per thread, and at
            // most 2²⁴ d, which bounds the bucket entries of a job (about π(W) + W/4 for a
            // width W < √d: about 50 MB at d ≈ 2⁶³)
            let span = d_end - rect.d_lo;
            let n = (8 * t.limit())
                .min(JOB_D_MAX)
                .min(span.div_ceil(nthreads))
                .max(1 << 20);
            (Factorer::Seg(t), (n, n))
        }
        Path::Reference if PrimeTable::worth_sieving(rect.d_lo, d_end) => {
            (Factorer::Table(PrimeTable::new(k, d_end)), (1, 1 << 20))
        }
        _ => (Factorer::PerD, (1, 1 << 20)),
    };
    let target = if count_only { 1e7 } else { 1e8 };
    let jobs = plan_jobs(z0, rect, d_end, target, job_n, count_only);
    let work = || {
        let accs: Vec<Acc> = jobs
            .par_iter()
            .map(|j| {
                let a = run_job(k, z0, j, &fac, count_only, path);
                progress(a.digest.candidates);
                a
            })
            .collect();
        accs
    };
    let accs = if threads == 1 {
        jobs.iter()
            .map(|j| {
                let a = run_job(k, z0, j, &fac, count_only, path);
                progress(a.digest.candidates);
                a
            })
            .collect()
    } else {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .expect("thread pool");
        pool.install(work)
    };
    let mut digest = Digest::ZERO;
    let mut solutions = Vec::new();
    for a in accs {
        digest.add_assign(&a.digest);
        solutions.extend(a.solutions);
    }
    solutions.sort();
    solutions.dedup();
    ScanOutput { digest, solutions }
}

/// Scan one rectangle of the main region for `k > 0` (validated by the caller: admissible `k`,
/// `|k| ≤ 2⁴⁰`, `z_hi ≤ 2⁶³ − 1`, `d_hi ≤ 2⁶³`) on `threads` threads (0 = all cores).
/// `progress` receives candidate counts as pieces finish. The digest is independent of
/// `threads` and of how the rectangle is split (see the module documentation).
pub fn scan_main(
    k: i64,
    rect: &Rect,
    threads: usize,
    progress: &(dyn Fn(u64) + Sync),
) -> ScanOutput {
    run(k, rect, threads, progress, false, Path::Fast)
}

/// [`scan_main`] on a chosen implementation ([`Path::Reference`] for comparisons); the same
/// digest and solutions either way.
#[doc(hidden)]
pub fn scan_main_path(
    k: i64,
    rect: &Rect,
    threads: usize,
    progress: &(dyn Fn(u64) + Sync),
    path: Path,
) -> ScanOutput {
    run(k, rect, threads, progress, false, path)
}

/// The candidates of a main-region rectangle, without sieving: the roots of every `d` and the
/// length of every class. Equals `scan_main(..).digest.candidates`; also returns the other
/// counts (`d_values`, `classes`) in the digest (survivors and hash are zero).
pub fn digest_counts_main(k: i64, rect: &Rect) -> Digest {
    run(k, rect, 0, &|_| {}, true, Path::Fast).digest
}

/// `candidates` of [`digest_counts_main`].
pub fn candidates_main(k: i64, rect: &Rect) -> u64 {
    digest_counts_main(k, rect).candidates
}

/// Constants of the cost model (CPU seconds on one reference core), measured by
/// `cargo bench -p cubehunt-common --bench kernel` on the development machine (a shared
/// 2-core Xeon VM; best of 3, thread CPU time).
pub mod cost {
    /// Per candidate in long classes (bit-pattern path).
    pub const PER_CANDIDATE_SIEVE: f64 = 0.14e-9;
    /// Per candidate in short classes (one `t` at a time).
    pub const PER_CANDIDATE_SHORT: f64 = 2.9e-9;
    /// Building the patterns of one long class.
    pub const PER_LONG_CLASS: f64 = 0.8e-6;
    /// Per class in machine words (`g(0)`, first member, class length), plus the root work
    /// (cofactor root, CRT) that grows with the number of roots per `d`.
    pub const PER_CLASS: f64 = 70e-9;
    /// Per class beyond `|z| > 2⁴¹` (`g(0)` still in words, from the expansion of the cube;
    /// was 0.6 µs with `g(0)` in GMP).
    pub const PER_CLASS_BIG: f64 = 80e-9;
    /// Per `d` (bucketed factor sieve, factor stripping, batched roots of the large cofactor,
    /// CRT): `PER_D_BASE + PER_D_PER_BIT · log₂ d` (was 25 ns + 7.5 ns·log₂ d with the
    /// classic table sieve: about 400 ns at `d ≈ 2·10¹⁵`, now about 115 ns; fitted with
    /// `PER_CLASS` to the bench's `paths` figures for k = 114 at `d ≈ 10⁹, 2·10¹⁵` and the
    /// per-d figures for k = 33 at `d ≈ 10⁸, 10¹⁰`, within about 20%).
    pub const PER_D_BASE: f64 = 40e-9;
    pub const PER_D_PER_BIT: f64 = 1.5e-9;
    /// Per prime up to `√d`, per job: generating it and placing it in its bucket (each job of
    /// about `max(2²⁰, min(8·√d, 2²⁴))` values of `d` does this once).
    pub const PER_SIEVE_PRIME: f64 = 26e-9;
    /// Per `d` factored on its own (Pollard–Brent; narrow ranges of huge `d`).
    pub const PER_D_FACTORED: f64 = 28e-6;
}

/// Mean number of cube roots of `k` modulo `d`: `Σ_{d<D} ρ_k(d) ≈ c_k·D`, with
/// `c_k = Π_p (1 − 1/p)·Σ_{e≥0} ρ_k(p^e)/p^e`. For `p ∤ 3k` the factor is `1 + (ρ_k(p) − 1)/p`
/// (so 1 for `p ≡ 2 mod 3`); for `p | 3k` the series is summed from exact root counts. The
/// product runs over `p < 3000` (the tail is a slowly convergent product of factors
/// `1 − 1/p` and `1 + 2/p` that averages out). Cached per `k`.
pub fn mean_roots(k: i64) -> f64 {
    use std::collections::HashMap;
    use std::sync::Mutex;
    static CACHE: Mutex<Option<HashMap<i64, f64>>> = Mutex::new(None);
    if let Some(v) = CACHE
        .lock()
        .unwrap()
        .get_or_insert_with(HashMap::new)
        .get(&k)
    {
        return *v;
    }
    let mut c = 1.0f64;
    for p in super::arith::primes_up_to(3000) {
        if p == 3 || k % p as i64 == 0 {
            let mut sum = 1.0;
            let mut pe = 1u64;
            for e in 1..=40u32 {
                pe = match pe.checked_mul(p) {
                    Some(v) if v < 1 << 40 => v,
                    _ => break,
                };
                sum += super::arith::roots_mod_prime_power(k, p, e).len() as f64 / pe as f64;
            }
            c *= (1.0 - 1.0 / p as f64) * sum;
        } else if p % 3 == 1 {
            let (_, n) = super::arith::cbrt_mod_prime(super::arith::residue(k, p), p);
            c *= 1.0 + (n as f64 - 1.0) / p as f64;
        }
    }
    CACHE
        .lock()
        .unwrap()
        .get_or_insert_with(HashMap::new)
        .insert(k, c);
    c
}

/// Cost model: estimated CPU seconds for one reference core to scan `rect` of the main
/// region. Integrates the density of classes (`2·c_k` per `d`, [`mean_roots`]) and of
/// candidates over `d` on 64 geometric sub-intervals (no per-`d` work), so it is cheap for any
/// rectangle, including `d` up to 10¹⁵ and beyond.
pub fn estimate_seconds_main(k: i64, rect: &Rect) -> f64 {
    use cost::*;
    let z0 = z0_of(k) as f64;
    let d_end = d_end_of(rect);
    if rect.d_lo >= d_end || rect.z_lo >= rect.z_hi {
        return 0.0;
    }
    let (zl, zh) = (rect.z_lo as f64, rect.z_hi as f64);
    let inv_alpha = 3.847_322_101_863_072;
    let per_class = if rect.z_hi > WORD_U_MAX {
        PER_CLASS_BIG
    } else {
        PER_CLASS
    };
    let ck = mean_roots(k);
    // the first few hundred d one by one (the density is lumpy there), the rest geometric
    let mut total = 0.0;
    let exact_end = d_end.min(rect.d_lo.max(256));
    for d in rect.d_lo..exact_end {
        let lo = z0.max(d as f64 * inv_alpha).max(zl);
        let len = ((zh - lo) / d as f64).max(0.0);
        let classes = 2.0 * ck;
        total += PER_D_BASE + classes * per_class;
        total += if len >= SIEVE_MIN_LEN as f64 {
            classes * (PER_LONG_CLASS + len * PER_CANDIDATE_SIEVE)
        } else {
            classes * len * PER_CANDIDATE_SHORT
        };
    }
    if exact_end >= d_end {
        return total;
    }
    let (a, b) = (exact_end as f64, d_end as f64);
    let pieces = 64;
    let ratio = (b / a).powf(1.0 / pieces as f64);
    if SieveTable::worth_sieving(rect.d_lo, d_end) {
        let lim = (b.sqrt()).max(2.0);
        let job = (8.0 * lim).min(JOB_D_MAX as f64).max(1_048_576.0);
        let jobs = ((b - a) / job).ceil().max(1.0);
        total += PER_SIEVE_PRIME * lim / lim.ln().max(1.0) * jobs;
    } else {
        total += (b - a) * PER_D_FACTORED;
    }
    let mut x = a;
    for _ in 0..pieces {
        let y = (x * ratio).min(b);
        let width = y - x;
        if width <= 0.0 {
            break;
        }
        let dm = (x * y).sqrt().max(1.0);
        let lo = z0.max(dm * inv_alpha).max(zl);
        let len = ((zh - lo) / dm).max(0.0); // candidates per class
        let classes = 2.0 * ck * width;
        let cand = classes * len;
        let per_cand = if len >= SIEVE_MIN_LEN as f64 {
            total += classes * PER_LONG_CLASS;
            PER_CANDIDATE_SIEVE
        } else {
            PER_CANDIDATE_SHORT
        };
        total += width * (PER_D_BASE + PER_D_PER_BIT * dm.log2())
            + classes * per_class
            + cand * per_cand;
        x = y;
    }
    total
}

#[doc(hidden)]
pub fn survives(k: i64, d: u64, z: i64) -> bool {
    survivor::survives_exact(k, d, z)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::kernel::naive::scan_main_naive;
    use crate::Region;
    use proptest::prelude::*;

    fn rect(d_lo: u64, d_hi: u64, z_lo: u64, z_hi: u64) -> Rect {
        Rect {
            region: Region::Main,
            d_lo,
            d_hi,
            z_lo,
            z_hi,
        }
    }

    /// `t ≤ d/α` in GMP, independently of the word code: `(d + t)³ ≥ 2t³`.
    fn le_big(d: u64, t: u128) -> bool {
        let a = Integer::from(d) + t;
        let tt = Integer::from(t);
        (a.clone() * &a * &a) >= Integer::from(2) * &tt * &tt * &tt
    }

    #[test]
    fn constants_are_exact() {
        // C = ⌊2⁶²/α⌋ ⟺ 2C³ ≤ (2⁶² + C)³ < 2(C+1)³ … checked in GMP (source: definition)
        let two62 = Integer::from(1u64 << 62);
        let ok = |c: u128| {
            let c = Integer::from(c);
            let a: Integer = two62.clone() + &c;
            Integer::from(2) * &c * &c * &c <= (a.clone() * &a * &a)
        };
        assert!(ok(INV_ALPHA_Q62) && !ok(INV_ALPHA_Q62 + 1));
        // A = ⌊2⁶⁴·α⌋ ⟺ (2⁶⁴ + A)³ ≤ 2·2¹⁹² < (2⁶⁴ + A + 1)³
        let two64 = Integer::from(1u128 << 64);
        let cube = |a: u128| {
            let x: Integer = two64.clone() + a;
            x.clone() * &x * &x
        };
        let rhs = Integer::from(2) * Integer::from(1u128 << 96) * Integer::from(1u128 << 96);
        assert!(cube(ALPHA_Q64) <= rhs && cube(ALPHA_Q64 + 1) > rhs);
    }

    proptest! {
        // source: exact comparison in GMP, and the f64 value of d/α as a rough cross-check
        #[test]
        fn main_z_floor_is_exact(d in prop_oneof![1u64..10_000, 1u64..(1u64 << 40), 1u64..=(1u64 << 63)]) {
            let t = main_z_floor(d) as u128;
            if t < u64::MAX as u128 {
                prop_assert!(le_big(d, t) && !le_big(d, t + 1), "d={} t={}", d, t);
            } else {
                prop_assert!(le_big(d, t));
            }
            let f = d as f64 / (2f64.cbrt() - 1.0);
            prop_assert!(t == u64::MAX as u128 || (f - t as f64).abs() <= 1.0 + f * 1e-14);
            let u = (t.min(MAX_U as u128)) as u64;
            let e = main_d_end(u);
            prop_assert!(main_z_floor(e) >= u && (e == 0 || main_z_floor(e - 1) < u));
        }
    }
    const MAX_U: u64 = i64::MAX as u64;

    #[test]
    fn main_z_floor_small_values() {
        // source: brute force with exact integers (α·t ≤ d ⟺ 2t³ ≤ (d+t)³)
        for d in 0u64..2000 {
            let t = (0u128..)
                .take_while(|&t| 2 * t * t * t <= (d as u128 + t).pow(3))
                .last()
                .unwrap();
            assert_eq!(main_z_floor(d) as u128, t, "d={d}");
        }
    }

    fn check_against_naive(k: i64, r: &Rect) {
        let fast = scan_main(k, r, 1, &|_| {});
        let slow = scan_main_naive(k, r);
        assert_eq!(fast.digest, slow.digest, "k={k} {r}");
        assert_eq!(fast.solutions, slow.solutions, "k={k} {r}");
        assert_eq!(candidates_main(k, r), fast.digest.candidates, "k={k} {r}");
    }

    #[test]
    fn scan_matches_naive_on_small_rects() {
        // source: brute force (naive::scan_main_naive visits every point)
        for k in [
            1i64,
            2,
            3,
            6,
            7,
            12,
            33,
            42,
            51,
            74,
            80,
            87,
            96,
            114,
            1000 - 1,
            1 << 20,
        ] {
            let z0 = crate::kernel::arith::isqrt_u64(k as u64);
            check_against_naive(k, &rect(1, 60, z0, 400));
            check_against_naive(k, &rect(7, 31, z0 + 13, 1500));
        }
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(48))]
        // source: brute force
        #[test]
        fn scan_matches_naive_random(k in 1i64..3000, d_lo in 1u64..300, dl in 1u64..40, zl in 0u64..3000, zs in 1u64..400) {
            prop_assume!(k % 9 != 4 && k % 9 != 5);
            let z0 = crate::kernel::arith::isqrt_u64(k as u64);
            let r = rect(d_lo, d_lo + dl, zl.max(z0), zl.max(z0) + zs);
            check_against_naive(k, &r);
        }
    }

    #[test]
    fn long_classes_take_the_pattern_path_and_agree() {
        // classes far longer than SIEVE_MIN_LEN (source: brute force)
        for k in [2i64, 3, 33, 42] {
            check_against_naive(k, &rect(1, 4, 10, 20_000));
            check_against_naive(k, &rect(2, 3, 100, 1_000_000));
        }
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(256))]
        // source: g = (4(u³ − s·k) − d³)/d evaluated in GMP (g_big), reduced mod M1, M2, M3
        #[test]
        fn g0_residues_in_words_match_gmp(
            k in prop_oneof![1i64..100, 1i64..=(1i64 << 40)],
            d0 in prop_oneof![1u64..1000, 1u64..(1u64 << 40), 1u64..(1u64 << 62)],
            qsel in 0u64..u64::MAX,
            pick in 0usize..3,
            neg in proptest::bool::ANY,
        ) {
            // the first d ≥ d0 with a cube root of k (most d have none)
            let (d, roots) = (d0..d0 + 10_000)
                .map(|d| (d, crate::kernel::arith::cube_roots_mod(k, d)))
                .find(|(_, r)| !r.is_empty())
                .expect("some d with roots");
            let s: i64 = if neg { -1 } else { 1 };
            let r = roots[pick % roots.len()];
            let res = if s == 1 { r } else { (d - r) % d };
            // small q: g < 2¹²⁸ for most d (the short path); any q: the expansion
            let qmax = (i64::MAX as u64 - res) / d + 1;
            let q = if qsel & 1 == 0 { (qsel >> 1) % qmax.min(8) } else { qsel % qmax };
            let u0 = res + d * q;
            let got = g0_residues(k, d, &DivD::new(d), s, res, u0);
            let g = g_big(k, d, s, u0);
            let want = [
                g.mod_u(M1 as u32) as u64,
                g.mod_u(M2 as u32) as u64,
                g.mod_u(M3 as u32) as u64,
            ];
            prop_assert_eq!(got, want, "k={} d={} s={} u0={}", k, d, s, u0);
        }
    }

    fn check_paths(k: i64, r: &Rect) {
        let fast = scan_main_path(k, r, 1, &|_| {}, Path::Fast);
        let reference = scan_main_path(k, r, 1, &|_| {}, Path::Reference);
        assert_eq!(fast, reference, "k={k} {r}");
        let counts = digest_counts_main(k, r);
        assert_eq!(
            (counts.candidates, counts.classes, counts.d_values),
            (
                fast.digest.candidates,
                fast.digest.classes,
                fast.digest.d_values
            ),
            "k={k} {r}"
        );
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(16))]
        // source: the reference path (classic table sieve, g(0) from its definition in u128
        // or GMP), itself checked against brute force above
        #[test]
        fn fast_path_matches_reference_on_random_rects(
            k in prop_oneof![Just(2i64), Just(33), Just(42), Just(114), 1i64..100_000],
            scale in 0usize..4,
            off in 0u64..1_000_000_000,
            w in 1u64..60_000,
            zspan in 1u64..40,
        ) {
            prop_assume!(k % 9 != 4 && k % 9 != 5);
            // d near 10⁴, 10⁹, 2⁴⁰ and 2⁴⁶ (the last in release builds: primes up to 2²³)
            let base = [10_000u64, 1_000_000_000, 1 << 40, 1 << 46][scale];
            prop_assume!(scale < 3 || !cfg!(debug_assertions));
            let d_lo = base + off % base;
            let d_hi = d_lo + w.min(if scale == 0 { 5_000 } else { 60_000 });
            // |z| from the region floor at d_lo to a few multiples of d above it
            let z_lo = main_z_floor(d_lo);
            let z_hi = (main_z_floor(d_hi) + zspan * d_hi / 4).min(i64::MAX as u64);
            check_paths(k, &rect(d_lo, d_hi, z_lo, z_hi));
        }
    }

    #[test]
    fn fast_path_matches_reference_on_fixed_rects() {
        // source: the reference path; wide d ranges so that the bucket sieve has many
        // segments and primes with several multiples, small d with long classes
        check_paths(114, &rect(1, 20_000, 5, 3_000_000));
        check_paths(33, &rect(1_000_000, 1_400_000, 5, 40_000_000));
        check_paths(
            42,
            &rect(3_000_000_000, 3_000_200_000, 11_600_000_000, 11_700_000_000),
        );
        // |z| beyond 2⁴¹ (GMP on the reference path, words on the fast path)
        let d = 1u64 << 39;
        check_paths(
            114,
            &rect(
                d,
                d + 70_000,
                main_z_floor(d),
                main_z_floor(d + 70_000) + 3 * d,
            ),
        );
    }

    #[test]
    fn finds_a_small_solution_of_2() {
        // 7³ + (−5)³ + (−6)³ = 2 (checked exactly below); z = −5, d = |7 − 6| = 1
        let out = scan_main(2, &rect(1, 10, 1, 100), 1, &|_| {});
        let s = Solution::new(7, -5, -6);
        assert!(s.verify(2));
        assert!(out.solutions.contains(&s), "{:?}", out.solutions);
    }

    #[test]
    fn digest_is_independent_of_threads_and_splits() {
        for (k, r) in [
            (33i64, rect(1, 3000, 5, 2_000_000)),
            (42, rect(100, 200_000, 6, 600_000)),
            (3, rect(1, 50, 1, 100_000_000)),
        ] {
            let one = scan_main(k, &r, 1, &|_| {});
            let two = scan_main(k, &r, 2, &|_| {});
            assert_eq!(one, two);
            assert!(one.digest.survivors > 0);
            // split along d and along z at awkward places
            let dm = r.d_lo + (r.d_hi - r.d_lo) / 3 + 1;
            let zm = r.z_lo + (r.z_hi - r.z_lo) / 7 + 3;
            let parts = [
                rect(r.d_lo, dm, r.z_lo, zm),
                rect(r.d_lo, dm, zm, r.z_hi),
                rect(dm, r.d_hi, r.z_lo, zm + 11),
                rect(dm, r.d_hi, zm + 11, r.z_hi),
            ];
            let sum: Digest = parts
                .iter()
                .map(|p| scan_main(k, p, 1, &|_| {}).digest)
                .sum();
            assert_eq!(sum, one.digest, "k={k} {r}");
            let counts = digest_counts_main(k, &r);
            assert_eq!(
                (counts.candidates, counts.classes, counts.d_values),
                (
                    one.digest.candidates,
                    one.digest.classes,
                    one.digest.d_values
                )
            );
        }
    }

    #[test]
    fn progress_adds_up_to_candidates() {
        use std::sync::atomic::{AtomicU64, Ordering};
        let seen = AtomicU64::new(0);
        let r = rect(1, 10_000, 6, 300_000);
        let out = scan_main(42, &r, 2, &|n| {
            seen.fetch_add(n, Ordering::Relaxed);
        });
        assert_eq!(seen.load(Ordering::Relaxed), out.digest.candidates);
    }

    #[test]
    fn booker_33_found_blind() {
        // A. R. Booker, "Cracking the problem with 33", Research in Number Theory 5 (2019),
        // art. 26: 33 = 8866128975287528³ + (−8778405442862239)³ + (−2736111468807040)³
        // (from memory; confirmed by the exact check below). The rectangle is built from the
        // triple, but the scan is not told the answer.
        let (x, y, z) = (
            8866128975287528i128,
            -8778405442862239i128,
            -2736111468807040i128,
        );
        let known = Solution::new(x, y, z);
        assert!(known.verify(33));
        let d = (x + y).unsigned_abs() as u64;
        let u = z.unsigned_abs() as u64;
        let r = rect(d - 50, d + 50, u - 10_000, u + 10_000);
        let out = scan_main(33, &r, 0, &|_| {});
        assert_eq!(out.solutions, vec![known]);
        assert!(out.digest.candidates > 0);
        // the same rectangle in two halves along z gives the same digest
        let a = scan_main(33, &rect(d - 50, d + 50, u - 10_000, u), 1, &|_| {});
        let b = scan_main(33, &rect(d - 50, d + 50, u, u + 10_000), 1, &|_| {});
        assert_eq!(a.digest.combine(&b.digest), out.digest);
    }

    #[test]
    fn beyond_words_agrees_with_naive() {
        // |z| above 2⁴¹: the GMP paths (source: brute force)
        let base = (1u64 << 41) - 500;
        for k in [2i64, 33, 42] {
            check_against_naive(k, &rect(1, 40, base, base + 1000));
        }
        let top = i64::MAX as u64;
        check_against_naive(3, &rect(1, 30, top - 3000, top));
    }
}

#[cfg(test)]
mod cost_tests {
    use super::*;
    use crate::Region;

    #[test]
    fn estimate_is_cheap_positive_and_roughly_additive() {
        let r = |d_lo, d_hi, z_lo, z_hi| Rect {
            region: Region::Main,
            d_lo,
            d_hi,
            z_lo,
            z_hi,
        };
        let t = std::time::Instant::now();
        let whole = r(1, 260_000_000_000_000, 5, 1_000_000_000_000_000);
        let e = estimate_seconds_main(33, &whole);
        assert!(
            t.elapsed().as_millis() < 50,
            "estimate must not enumerate d"
        );
        assert!(e.is_finite() && e > 0.0);
        // splitting along d changes the estimate only by the per-rectangle prime table
        let parts = [
            r(1, 1_000_000, 5, 1_000_000_000_000_000),
            r(1_000_000, 260_000_000_000_000, 5, 1_000_000_000_000_000),
        ];
        let sum: f64 = parts.iter().map(|p| estimate_seconds_main(33, p)).sum();
        assert!((sum / e - 1.0).abs() < 0.05, "{sum} vs {e}");
        // empty pieces cost nothing; more |z| costs more
        assert_eq!(estimate_seconds_main(33, &r(10_000, 20_000, 5, 100)), 0.0);
        assert!(
            estimate_seconds_main(33, &r(1, 1000, 5, 2_000_000))
                > estimate_seconds_main(33, &r(1, 1000, 5, 1_000_000))
        );
    }

    #[test]
    fn mean_roots_matches_counted_roots() {
        // source: brute-force average of ρ_k(d) over d < 20000 (via arith::cube_roots_mod,
        // itself checked against brute force); the Euler product converges slowly, so 15%.
        for k in [2i64, 3, 33, 42] {
            let n = 20_000u64;
            let avg = (1..n)
                .map(|d| crate::kernel::arith::cube_roots_mod(k, d).len() as f64)
                .sum::<f64>()
                / (n - 1) as f64;
            let c = mean_roots(k);
            assert!(
                (c / avg - 1.0).abs() < 0.15,
                "k={k}: model {c} counted {avg}"
            );
        }
    }
}
