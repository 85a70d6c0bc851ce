//! The cube roots of `k` modulo every `d` of a range, by a segmented factor sieve whose memory
//! does not grow with `√d`.
//!
//! The `d` axis of one piece of work `[d_lo, d_hi)` is swept in segments of [`SEG_DEFAULT`]
//! values (or another power of two, [`SieveTable::with_seg`]; the roots do not depend on it).
//! Every prime `p ≤ √(d_hi − 1)` that divides some `d` of the piece is found by sieving, in one
//! of three ways (as in a segmented sieve of Eratosthenes):
//! * **small primes** `p <` segment length (classified once per rectangle, [`SieveTable`]): per-prime
//!   offsets of the next multiple, carried from segment to segment. *Dead* primes (`p ≡ 1
//!   mod 3`, `p ∤ 3k`, `k` not a cube mod `p`: no `d` they divide has a root) mark their
//!   multiples; the others append themselves to the factor slots of the multiples still alive.
//! * **primes dividing `3k`** (at most 13): the same, with their root lists mod every `p^e`.
//! * **large primes** from the segment length up to `√(d_hi − 1)`: generated per piece by a segmented sieve of
//!   Eratosthenes (base primes up to `d^{1/4}`), and each put in the *bucket* of the segment
//!   holding its next multiple; a segment visits only the primes of its bucket, which move on
//!   to the bucket of their next multiple. A prime is classified (dead or not) when it first
//!   hits a `d` still alive, and the answer travels with it.
//!
//! A `d` that no dead prime divides is then stripped of its listed primes; what is left is 1
//! or one prime `q > √d` (all smaller primes were sieved). A `d` with a power of a divisor of
//! `3k` that has no roots drops out there. For the others, the roots mod `q` of the whole
//! segment are computed next, eight modular exponentiations side by side
//! ([`cofactor_roots`]; for `q ≡ 1 mod 3` most `k` are not cubes and the `d` drops out), then
//! those mod the large sieved primes of the `d` still alive, the same way; finally the roots
//! mod each prime power (stored for small primes, Hensel-lifted for exponents > 1) are
//! combined by CRT. Only the `d` with roots are reported. Buffers live in [`SegScratch`] and
//! are reused: no allocation per `d`.
//!
//! Memory: the per-segment arrays, the small-prime table, and one 8-byte bucket entry per large
//! prime that still has a multiple ahead in the piece — at most `π(√d_hi)`, and about
//! `π(W) + W·ln(ln √d / ln W)` for a piece of width `W < √d`: bounded by the width of the
//! piece, not by `√d` (the main region keeps pieces to at most 2²⁴ values of `d`: about
//! 50 MB of buckets even near `d = 2⁶³`). The classic table of every prime up to `√d` with
//! its roots ([`super::sieve`], kept as the reference) is not needed.
//!
//! Produces exactly the roots of [`super::sieve::for_each_d`] (tested), in another order.

#![allow(clippy::manual_is_multiple_of)] // `is_multiple_of` is newer than our MSRV (1.80)

use super::arith::{
    cbrt_mod_prime, crt_combine, factor_u64, hensel_lift, inv_pow2_64, isqrt_u64, primes_up_to,
    residue, roots_mod_prime_power, Mont,
};

/// Default segment length (values of `d` per sweep; the per-segment arrays take about 55
/// bytes per `d`). Measured by `cargo bench -p cubehunt-common --bench kernel -- segment` on
/// the development machine (1 MiB L2 per core): 2¹²…2¹⁵ within noise of each other, 2¹⁵ the
/// best, 2¹⁶ and longer slower.
pub const SEG_DEFAULT: usize = 1 << 15;
/// Factor slots per `d` inside the segment arrays; further primes of the same `d` go to a
/// per-segment overflow list (rare: 5 distinct sieved primes above the smallest ones).
const SLOTS: usize = 5;
/// `nf` value of a dead `d` (some dead prime divides it).
const DEAD: u8 = u8::MAX;
/// Slot tags: a large prime `p` is stored as `TAG_LARGE | (p − 1)/2` (odd, `< 2³²`); a
/// special prime (`p | 3k`) as `TAG_SPECIAL | index`; a small prime as its table index.
const TAG_LARGE: u32 = 1 << 31;
const TAG_SPECIAL: u32 = 1 << 30;

/// A small prime that is not dead and does not divide `3k`, with its roots mod `p`.
#[derive(Clone, Debug)]
struct Small {
    p: u64,
    /// `p⁻¹ mod 2⁶⁴` and `⌊(2⁶⁴−1)/p⌋` for division-free divisibility tests (odd `p`)
    pinv: u64,
    plim: u64,
    n: u8,
    roots: [u64; 3],
}

impl Small {
    fn new(p: u64, n: u8, roots: [u64; 3]) -> Small {
        let (pinv, plim) = if p & 1 == 1 {
            (inv_pow2_64(p), u64::MAX / p)
        } else {
            (0, 0)
        };
        Small {
            p,
            pinv,
            plim,
            n,
            roots,
        }
    }
}

/// Divide out the odd prime `p` (`pinv = p⁻¹ mod 2⁶⁴`, `plim = ⌊(2⁶⁴−1)/p⌋`) from `rem`
/// completely; the exponent. `rem·p⁻¹ mod 2⁶⁴` is `rem/p` when `p | rem`, else above `plim`.
#[inline]
fn strip_odd(rem: &mut u64, pinv: u64, plim: u64) -> u32 {
    let mut e = 0;
    loop {
        let q = rem.wrapping_mul(pinv);
        if q > plim {
            return e;
        }
        *rem = q;
        e += 1;
    }
}

#[inline]
fn strip(rem: &mut u64, p: u64, pinv: u64, plim: u64) -> u32 {
    if p == 2 {
        let e = rem.trailing_zeros();
        *rem >>= e;
        e
    } else {
        strip_odd(rem, pinv, plim)
    }
}

/// A prime dividing `3k` (and `≤ √d_max`): its root lists mod `p^e`, `e = 0, 1, …`.
struct Special {
    p: u64,
    /// as in [`Small`]
    pinv: u64,
    plim: u64,
    lists: Vec<Vec<u64>>,
}

/// What is shared by every piece of one rectangle: the small primes (below the segment length)
/// classified for `k`, the primes dividing `3k` with their roots, and the base primes for
/// generating the large ones.
pub struct SieveTable {
    k: i64,
    seg: usize,
    limit: u64,
    bad: Vec<u64>,
    good: Vec<Small>,
    special: Vec<Special>,
    /// odd primes up to `√limit` (to generate the primes in `[seg, limit]`)
    base: Vec<u64>,
}

impl SieveTable {
    /// Classify the small primes and the divisors of `3k`, for pieces with `d < d_max`.
    pub fn new(k: i64, d_max: u64) -> SieveTable {
        Self::with_seg(k, d_max, SEG_DEFAULT)
    }

    /// [`SieveTable::new`] with segment length `seg` (a power of two in `[2¹⁰, 2²⁰]`).
    pub fn with_seg(k: i64, d_max: u64, seg: usize) -> SieveTable {
        assert!(seg.is_power_of_two() && (1 << 10..=1 << 20).contains(&seg));
        let limit = isqrt_u64(d_max.saturating_sub(1)).max(1);
        let mut bad = Vec::new();
        let mut good = Vec::new();
        let mut special = Vec::new();
        // primes dividing 3k (any size up to the limit)
        let mut pk: Vec<u64> = factor_u64(k.unsigned_abs().max(1))
            .into_iter()
            .map(|(p, _)| p)
            .chain([3])
            .collect();
        pk.sort_unstable();
        pk.dedup();
        for &p in pk.iter().filter(|&&p| p <= limit) {
            let mut lists = vec![vec![0u64]];
            let mut pe = 1u64;
            let mut e = 0;
            while let Some(next) = pe.checked_mul(p) {
                if next > d_max {
                    break;
                }
                pe = next;
                e += 1;
                lists.push(roots_mod_prime_power(k, p, e));
            }
            let (pinv, plim) = if p & 1 == 1 {
                (inv_pow2_64(p), u64::MAX / p)
            } else {
                (0, 0)
            };
            special.push(Special {
                p,
                pinv,
                plim,
                lists,
            });
        }
        for p in primes_up_to(limit.min(seg as u64 - 1)) {
            if pk.contains(&p) {
                continue;
            }
            let (r, n) = cbrt_mod_prime(residue(k, p), p);
            if n == 0 {
                bad.push(p);
            } else {
                good.push(Small::new(p, n as u8, r));
            }
        }
        let base = if limit >= seg as u64 {
            primes_up_to(isqrt_u64(limit))
                .into_iter()
                .filter(|&p| p > 2)
                .collect()
        } else {
            Vec::new()
        };
        SieveTable {
            k,
            seg,
            limit,
            bad,
            good,
            special,
            base,
        }
    }

    /// The largest `d` (exclusive) this table serves: every prime `≤ √(d − 1)` is sieved.
    pub fn covers(&self, d_hi: u64) -> bool {
        d_hi <= 1 || isqrt_u64(d_hi - 1) <= self.limit
    }

    /// Whether sieving is cheaper than factoring each `d` of `[d_lo, d_hi)` on its own
    /// (Pollard–Brent, about 28 µs per `d` near 2⁶²): generating the primes up to `√d_hi` and
    /// placing them in buckets costs about 26 ns per prime, per piece, so sieving wins once the
    /// piece holds more than about `√d/20000` values (measured by the kernel bench); the
    /// threshold `√d/8192` leaves a margin.
    pub fn worth_sieving(d_lo: u64, d_hi: u64) -> bool {
        let limit = isqrt_u64(d_hi.saturating_sub(1));
        limit <= 1 << 16 || limit / 8192 <= d_hi - d_lo
    }

    /// The prime limit `⌊√(d_max − 1)⌋`.
    pub fn limit(&self) -> u64 {
        self.limit
    }
}

/// Reusable buffers of one thread.
#[derive(Default)]
pub struct SegScratch {
    nf: Vec<u8>,
    fac: Vec<u32>,
    extra: Vec<(u32, u32)>,
    buckets: Vec<Vec<u64>>,
    spare: Vec<Vec<u64>>,
    next_bad: Vec<u64>,
    next_good: Vec<u64>,
    next_special: Vec<u64>,
    roots: Vec<u64>,
    tmp: Vec<u64>,
    part: Vec<u64>,
    gen: Vec<u8>,
    gen_next: Vec<u64>,
    qn: Vec<u8>,
    qr: Vec<[u64; 3]>,
    cof: Vec<u64>,
    bn: Vec<u8>,
    br: Vec<[u64; 3]>,
    work: Vec<(u32, u64)>,
    alive: Vec<u32>,
    cw: CofactorWork,
}

/// Buffers of [`cofactor_roots`].
#[derive(Default)]
struct CofactorWork {
    items: Vec<(u64, u64, u64)>,
    kind: Vec<u8>,
    idx: Vec<u32>,
    omega_items: Vec<(u64, u64, u64)>,
    omega_x: Vec<(u32, u64)>,
}

/// Is `k` a cube mod the prime `p ≡ 1 (mod 3)`, `p ∤ k`? Euler: `a^((p−1)/3) ≡ 1`.
fn is_cube_mod(k: i64, p: u64) -> bool {
    let mt = Mont::new(p);
    let a = mt.to(residue(k, p));
    mt.pow(a, (p - 1) / 3) == mt.to(1)
}

/// Call `f` for every prime in `[lo, hi]` (odd `lo ≥ 3`), in increasing order, by a segmented
/// sieve of Eratosthenes over odd numbers with the odd `base` primes (`base` must cover `√hi`).
fn for_each_prime(
    lo: u64,
    hi: u64,
    base: &[u64],
    buf: &mut Vec<u8>,
    next: &mut Vec<u64>,
    mut f: impl FnMut(u64),
) {
    const CHUNK: usize = 1 << 16; // odd numbers per chunk
    if hi < lo {
        return;
    }
    let lo = lo | 1;
    // index i ↔ lo + 2i; next[j] = index of the next odd multiple of base[j] (≥ p²)
    next.clear();
    for &p in base {
        let start = (p * p).max(lo.div_ceil(p) * p);
        let start = if start % 2 == 0 { start + p } else { start };
        next.push((start - lo) / 2);
    }
    buf.resize(CHUNK, 0);
    let total = (hi - lo) / 2 + 1;
    let mut c0 = 0u64;
    while c0 < total {
        let len = ((total - c0) as usize).min(CHUNK);
        buf[..len].fill(1);
        for (j, &p) in base.iter().enumerate() {
            if p * p > lo + 2 * (c0 + len as u64 - 1) {
                break;
            }
            let mut i = next[j];
            if i >= c0 + len as u64 {
                continue;
            }
            let mut r = (i - c0) as usize;
            while r < len {
                buf[r] = 0;
                r += p as usize;
            }
            i = c0 + r as u64;
            next[j] = i;
        }
        for (r, &b) in buf[..len].iter().enumerate() {
            if b != 0 {
                f(lo + 2 * (c0 + r as u64));
            }
        }
        c0 += len as u64;
    }
}

/// Emptied bucket vectors kept for reuse.
const POOL: usize = 16;

#[inline]
fn bucket_push(buckets: &mut [Vec<u64>], spare: &mut Vec<Vec<u64>>, slot: usize, e: u64) {
    let b = &mut buckets[slot];
    if b.capacity() == 0 {
        if let Some(v) = spare.pop() {
            *b = v;
        }
    }
    b.push(e);
}

#[inline]
fn push_slot(nf: &mut [u8], fac: &mut [u32], extra: &mut Vec<(u32, u32)>, j: usize, v: u32) {
    let n = nf[j] as usize;
    if n < SLOTS {
        fac[j * SLOTS + n] = v;
    } else {
        extra.push((j as u32, v));
    }
    nf[j] = n as u8 + 1;
}

/// `a⁻¹ mod m` for `gcd(a, m) = 1`, `m < 2³²` (Euclid on 32-bit words).
#[inline]
fn inv_mod_u32(a: u32, m: u32) -> u32 {
    let (mut r0, mut r1) = (m, a % m);
    let (mut s0, mut s1) = (0i64, 1i64);
    while r1 != 0 {
        let q = r0 / r1;
        (r0, r1) = (r1, r0 - q * r1);
        (s0, s1) = (s1, s0 - q as i64 * s1);
    }
    debug_assert_eq!(r0, 1, "coprime moduli");
    s0.rem_euclid(m as i64) as u32
}

/// Fold the roots modulo `pe` (`part`) into `roots` (mod `m`) by CRT.
#[inline]
fn fold(roots: &mut Vec<u64>, tmp: &mut Vec<u64>, m: &mut u64, part: &[u64], pe: u64) {
    if *m == 1 {
        roots.clear();
        roots.extend_from_slice(part);
    } else if pe < 1 << 32 {
        // x = a + m·((b − a)·m⁻¹ mod pe): all in 64-bit words (m is odd when pe = 2^e)
        let inv = if pe.is_power_of_two() {
            inv_pow2_64(*m) & (pe - 1)
        } else {
            inv_mod_u32((*m % pe) as u32, pe as u32) as u64
        };
        tmp.clear();
        for &a in roots.iter() {
            let am = a % pe;
            for &b in part {
                let diff = if b >= am { b - am } else { b + pe - am };
                tmp.push(a + *m * (diff * inv % pe));
            }
        }
        std::mem::swap(roots, tmp);
    } else {
        crt_combine(roots, *m, part, pe, tmp);
        std::mem::swap(roots, tmp);
    }
    *m *= pe;
}

/// Roots mod `p^e` from the roots mod `p` (`p ∤ 3k`, simple roots: Hensel).
#[inline]
fn lift_into(k: i64, p: u64, e: u32, r: &[u64], part: &mut Vec<u64>) -> u64 {
    part.clear();
    let pe = p.pow(e);
    if e == 1 {
        part.extend_from_slice(r);
    } else {
        let a = residue(k, pe);
        for &x in r {
            part.push(hensel_lift(a, x, pe));
        }
    }
    pe
}

/// Call `f(d, roots)` for every `d ∈ [d_lo, d_hi)` that has cube roots of `k` mod `d`, in
/// increasing order, with those roots (unsorted; never empty — a `d` without roots is not
/// reported). `table` must cover `d_hi` ([`SieveTable::covers`]).
pub fn for_each_d(
    table: &SieveTable,
    d_lo: u64,
    d_hi: u64,
    sc: &mut SegScratch,
    mut f: impl FnMut(u64, &[u64]),
) {
    let t = table;
    let k = t.k;
    assert!(t.covers(d_hi), "sieve table does not cover d < {d_hi}");
    if d_lo >= d_hi {
        return;
    }
    let seg = t.seg;
    let width = d_hi - d_lo;
    let nseg = width.div_ceil(seg as u64) as usize;
    sc.nf.resize(seg, 0);
    sc.fac.resize(seg * SLOTS, 0);
    // small primes and specials: offset of the next multiple from the segment start
    sc.next_bad.clear();
    sc.next_bad
        .extend(t.bad.iter().map(|&p| (p - d_lo % p) % p));
    sc.next_good.clear();
    sc.next_good
        .extend(t.good.iter().map(|g| (g.p - d_lo % g.p) % g.p));
    sc.next_special.clear();
    sc.next_special
        .extend(t.special.iter().map(|s| (s.p - d_lo % s.p) % s.p));
    // large primes into the bucket of their first multiple (offsets from d_lo)
    for mut b in sc.buckets.drain(..) {
        if b.capacity() > 0 && sc.spare.len() < POOL {
            b.clear();
            sc.spare.push(b);
        }
    }
    sc.buckets.resize_with(nseg, Vec::new);
    let seg_bits = seg.trailing_zeros();
    if t.limit > seg as u64 {
        let (buckets, spare) = (&mut sc.buckets, &mut sc.spare);
        let sp = &t.special;
        for_each_prime(
            seg as u64 + 1,
            t.limit,
            &t.base,
            &mut sc.gen,
            &mut sc.gen_next,
            |p| {
                let off = (p - d_lo % p) % p;
                if off < width && !sp.iter().any(|s| s.p == p) {
                    // state bits 62..63: 0 unknown, 1 alive, 2 dead; p ≡ 2 mod 3 is alive
                    let state = if p % 3 == 2 { 1u64 } else { 0 };
                    let within = off & (seg as u64 - 1);
                    bucket_push(
                        buckets,
                        spare,
                        (off >> seg_bits) as usize,
                        p | (within << 32) | (state << 62),
                    );
                }
            },
        );
    }
    for s in 0..nseg {
        let a = d_lo + (s * seg) as u64;
        let len = ((d_hi - a) as usize).min(seg);
        let nf = &mut sc.nf[..len];
        let fac = &mut sc.fac[..];
        nf.fill(0);
        sc.extra.clear();
        for (&p, nx) in t.bad.iter().zip(sc.next_bad.iter_mut()) {
            let mut j = *nx as usize;
            while j < len {
                nf[j] = DEAD;
                j += p as usize;
            }
            *nx = (j - len) as u64;
        }
        for (si, (sp, nx)) in t.special.iter().zip(sc.next_special.iter_mut()).enumerate() {
            let mut j = *nx;
            while j < len as u64 {
                let jj = j as usize;
                if nf[jj] != DEAD {
                    push_slot(nf, fac, &mut sc.extra, jj, TAG_SPECIAL | si as u32);
                }
                j += sp.p;
            }
            *nx = j - len as u64;
        }
        for (gi, (g, nx)) in t.good.iter().zip(sc.next_good.iter_mut()).enumerate() {
            let p = g.p as usize;
            let mut j = *nx as usize;
            while j < len {
                if nf[j] != DEAD {
                    push_slot(nf, fac, &mut sc.extra, j, gi as u32);
                }
                j += p;
            }
            *nx = (j - len) as u64;
        }
        // this segment's bucket: each large prime hits one d here, then moves on
        let mut bucket = std::mem::take(&mut sc.buckets[s]);
        for &e in bucket.iter() {
            let p = e & 0xffff_ffff;
            let j = ((e >> 32) & 0x3fff_ffff) as usize;
            let mut state = e >> 62;
            if nf[j] != DEAD {
                if state == 0 {
                    state = if is_cube_mod(k, p) { 1 } else { 2 };
                }
                if state == 2 {
                    nf[j] = DEAD;
                } else {
                    push_slot(nf, fac, &mut sc.extra, j, TAG_LARGE | (p >> 1) as u32);
                }
            }
            let next = (s * seg + j) as u64 + p;
            if next < width {
                let within = next & (seg as u64 - 1);
                bucket_push(
                    &mut sc.buckets,
                    &mut sc.spare,
                    (next >> seg_bits) as usize,
                    p | (within << 32) | (state << 62),
                );
            }
        }
        if bucket.capacity() > 0 && sc.spare.len() < POOL {
            bucket.clear();
            sc.spare.push(bucket);
        }
        // overflow entries grouped by d (the order of one d's primes does not matter)
        sc.extra.sort_unstable_by_key(|e| e.0);
        // the factor list of the j-th d of the segment: slot c, overflow entries from xb
        let entry = |j: usize, c: usize, xb: usize, sc: &SegScratch| -> u32 {
            if c < SLOTS {
                sc.fac[j * SLOTS + c]
            } else {
                let (jj, v) = sc.extra[xb + c - SLOTS];
                debug_assert_eq!(jj as usize, j);
                v
            }
        };
        // strip one listed prime from rem; its prime and exponent
        let strip_entry = |v: u32, rem: &mut u64| -> (u64, u32) {
            if v & TAG_LARGE != 0 {
                let p = ((v & !TAG_LARGE) as u64) << 1 | 1;
                (p, strip_odd(rem, inv_pow2_64(p), u64::MAX / p))
            } else if v & TAG_SPECIAL != 0 {
                let sp = &t.special[(v & !TAG_SPECIAL) as usize];
                (sp.p, strip(rem, sp.p, sp.pinv, sp.plim))
            } else {
                let g = &t.good[v as usize];
                (g.p, strip(rem, g.p, g.pinv, g.plim))
            }
        };
        // pass 1: the large cofactor q (1 or a prime > √d) of every d still alive
        sc.qn.resize(seg, 0);
        sc.qr.resize(seg, [0; 3]);
        sc.cof.resize(seg, 0);
        sc.work.clear();
        let mut xb = 0usize;
        sc.alive.clear();
        for j in 0..len {
            let n = sc.nf[j];
            if n == DEAD {
                continue;
            }
            sc.alive.push(j as u32);
            while xb < sc.extra.len() && (sc.extra[xb].0 as usize) < j {
                xb += 1;
            }
            let mut rem = a + j as u64;
            let mut dead = false;
            for c in 0..n as usize {
                let v = entry(j, c, xb, sc);
                let (_, e) = strip_entry(v, &mut rem);
                // a power of a divisor of 3k with no roots (e.g. 9 | d for k ≡ ±3 mod 9)
                dead |= v & TAG_SPECIAL != 0
                    && v & TAG_LARGE == 0
                    && t.special[(v & !TAG_SPECIAL) as usize].lists[e as usize].is_empty();
            }
            sc.cof[j] = rem;
            if dead {
                sc.qn[j] = 0;
            } else if rem > 1 {
                sc.work.push((j as u32, rem));
            } else {
                sc.qn[j] = 1;
                sc.qr[j] = [0; 3]; // the root 0 mod 1
            }
        }
        // pass 2: roots mod every q, many at a time (most q ≡ 1 mod 3 leave none)
        cofactor_roots(k, &sc.work, &mut sc.qn, &mut sc.qr, &mut sc.cw);
        // pass 2b: roots mod the large sieved primes of the d still alive, likewise
        sc.work.clear();
        let mut xb = 0usize;
        let mut live = 0usize;
        for ai in 0..sc.alive.len() {
            let j = sc.alive[ai] as usize;
            let n = sc.nf[j];
            if sc.qn[j] == 0 {
                continue;
            }
            sc.alive[live] = j as u32;
            live += 1;
            while xb < sc.extra.len() && (sc.extra[xb].0 as usize) < j {
                xb += 1;
            }
            for c in 0..n as usize {
                let v = entry(j, c, xb, sc);
                if v & TAG_LARGE != 0 {
                    let i = sc.work.len() as u32;
                    sc.work.push((i, ((v & !TAG_LARGE) as u64) << 1 | 1));
                }
            }
        }
        sc.bn.resize(sc.work.len(), 0);
        sc.br.resize(sc.work.len(), [0; 3]);
        cofactor_roots(k, &sc.work, &mut sc.bn, &mut sc.br, &mut sc.cw);
        // pass 3: roots mod every prime power, combined by CRT
        let mut xb = 0usize;
        let mut bi = 0usize;
        for ai in 0..live {
            let j = sc.alive[ai] as usize;
            let d = a + j as u64;
            let n = sc.nf[j];
            while xb < sc.extra.len() && (sc.extra[xb].0 as usize) < j {
                xb += 1;
            }
            sc.roots.clear();
            let mut m = 1u64;
            // the cofactor q first (nothing to invert), then the small prime powers
            let q = sc.cof[j];
            if q > 1 {
                let qr = sc.qr[j];
                fold(
                    &mut sc.roots,
                    &mut sc.tmp,
                    &mut m,
                    &qr[..sc.qn[j] as usize],
                    q,
                );
            }
            let mut rem = d;
            let mut empty = false;
            for c in 0..n as usize {
                let v = entry(j, c, xb, sc);
                let (p, e) = strip_entry(v, &mut rem);
                if v & TAG_LARGE != 0 {
                    // the batch above, in the same order
                    debug_assert_eq!(sc.work[bi].1, p);
                    let (r, nr) = (sc.br[bi], sc.bn[bi] as usize);
                    bi += 1;
                    debug_assert!(nr > 0);
                    if empty {
                        continue;
                    }
                    let mut part = std::mem::take(&mut sc.part);
                    let pe = lift_into(k, p, e, &r[..nr], &mut part);
                    fold(&mut sc.roots, &mut sc.tmp, &mut m, &part, pe);
                    sc.part = part;
                } else if empty {
                    continue;
                } else if v & TAG_SPECIAL != 0 {
                    let spc = &t.special[(v & !TAG_SPECIAL) as usize];
                    let pe = p.pow(e);
                    fold(
                        &mut sc.roots,
                        &mut sc.tmp,
                        &mut m,
                        &spc.lists[e as usize],
                        pe,
                    );
                } else {
                    let g = &t.good[v as usize];
                    let mut part = std::mem::take(&mut sc.part);
                    let pe = lift_into(k, p, e, &g.roots[..g.n as usize], &mut part);
                    fold(&mut sc.roots, &mut sc.tmp, &mut m, &part, pe);
                    sc.part = part;
                }
                // keep walking the list (the batch cursor), but fold nothing more
                empty = sc.roots.is_empty();
            }
            if empty {
                continue;
            }
            debug_assert_eq!(rem, q.max(1));
            if m == 1 {
                // d = 1: the single root 0
                sc.roots.push(0);
            }
            debug_assert_eq!(m, d);
            f(d, &sc.roots);
        }
    }
}

/// `G = g^t` for the least non-cube `g ≥ 3` mod the prime `q ≡ 1 (mod 3)`, `q − 1 = 3^s·t`,
/// `3 ∤ t`: a generator of the 3-Sylow subgroup (for `s = 1`, a primitive cube root of unity).
fn sylow_generator(q: u64) -> u64 {
    use super::arith::{mulmod, powmod_fast};
    let mut t = q - 1;
    let mut s = 0u32;
    while t % 3 == 0 {
        t /= 3;
        s += 1;
    }
    let mut g = 3u64;
    loop {
        let w = powmod_fast(g, t, q);
        let mut c = w;
        for _ in 1..s {
            c = mulmod(mulmod(c, c, q), c, q);
        }
        if c != 1 {
            return w;
        }
        g += 1;
    }
}

/// Cube roots of `a` mod a prime `q ≡ 1 (mod 9)`, `q ∤ a`, from `x = a^e`, `y = a^t` and
/// `G = 2^t`, where `q − 1 = 3^s·t`, `3 ∤ t`, `3e ≡ 1 (mod t)` (Adleman–Manders–Miller for
/// cube roots, with a Pohlig–Hellman logarithm in the 3-Sylow subgroup `S`, `|S| = 3^s`).
///
/// `a` is a cube iff `y^(3^(s−1)) = 1`. Then `x³ = a·b` with `b = y^j ∈ S³` (`3e − 1 = j·t`),
/// and if `2` is not a cube, `G` generates `S`: write `b = G^L` (`3 | L`, digit by digit), and
/// `x·G^(−L/3)` is a root; the others are it times `ω = G^(3^(s−1))`. `None` when `2` is a cube
/// mod `q` (the caller falls back to [`cbrt_mod_prime`]) or, defensively, when the check fails.
fn cbrt_sylow(q: u64, a: u64, x: u64, y: u64, g: u64) -> Option<([u64; 3], usize)> {
    use super::arith::{inv_mod, mulmod};
    let mut t = q - 1;
    let mut s = 0u32;
    while t % 3 == 0 {
        t /= 3;
        s += 1;
    }
    let cube = |v: u64| mulmod(mulmod(v, v, q), v, q);
    let cube_n = |mut v: u64, n: u32| {
        for _ in 0..n {
            v = cube(v);
        }
        v
    };
    if cube_n(y, s - 1) != 1 {
        return Some(([0; 3], 0));
    }
    let omega = cube_n(g, s - 1);
    if omega == 1 {
        return None; // 2 is a cube mod q: no generator from it
    }
    let j = if t % 3 == 1 { 2 } else { 1 };
    let b = if j == 2 { mulmod(y, y, q) } else { y };
    // L = Σ l_i·3^i with G^L = b: at step i, (b·G^(−L_i))^(3^(s−1−i)) ∈ {1, ω, ω²} gives l_i
    let ginv = inv_mod(g, q)?;
    let omega2 = mulmod(omega, omega, q);
    let mut cur = b;
    let mut gp = ginv; // G^(−3^i)
    let mut l = 0u64;
    let mut p3 = 1u64;
    for i in 0..s {
        let c = cube_n(cur, s - 1 - i);
        let digit = if c == 1 {
            0
        } else if c == omega {
            1
        } else if c == omega2 {
            2
        } else {
            return None;
        };
        if digit > 0 {
            cur = mulmod(cur, gp, q);
            if digit == 2 {
                cur = mulmod(cur, gp, q);
            }
            l += digit * p3;
        }
        gp = cube(gp);
        p3 *= 3;
    }
    if cur != 1 || l % 3 != 0 {
        return None;
    }
    let x0 = mulmod(x, super::arith::powmod(ginv, l / 3, q), q);
    if cube(x0) != a {
        return None;
    }
    let x1 = mulmod(x0, omega, q);
    Some(([x0, x1, mulmod(x1, omega, q)], 3))
}

/// Montgomery product `a·b·2⁻⁶⁴ mod n` (odd `n < 2⁶³`, `a, b < n`, `ninv = −n⁻¹ mod 2⁶⁴`).
#[inline(always)]
fn mmul(a: u64, b: u64, n: u64, ninv: u64) -> u64 {
    let t = a as u128 * b as u128;
    let m = (t as u64).wrapping_mul(ninv);
    // t < 2¹²⁶ and m·n < 2¹²⁷: no overflow
    let r = ((t + m as u128 * n as u128) >> 64) as u64;
    if r >= n {
        r - n
    } else {
        r
    }
}

/// Exponentiations done side by side (independent chains keep the multiplier busy).
const LANES: usize = 8;

/// Montgomery product without the final reduction, for `n < 2⁶²` and `a, b < 2n`: the result
/// is `< 2n` again (`a·b + m·n < 4n² + 2⁶⁴·n < 2⁶⁵·n`).
#[inline(always)]
fn mmul_lazy(a: u64, b: u64, n: u64, ninv: u64) -> u64 {
    let t = a as u128 * b as u128;
    let m = (t as u64).wrapping_mul(ninv);
    ((t + m as u128 * n as u128) >> 64) as u64
}

/// `a_i^(e_i) mod n_i` for [`LANES`] lanes (odd `n_i < 2⁶³`, `a_i < n_i`): left-to-right,
/// two exponent bits per step, in Montgomery form (lazily reduced when every `n_i < 2⁶²`).
fn pow_lanes(n: [u64; LANES], a: [u64; LANES], e: [u64; LANES]) -> [u64; LANES] {
    if n.iter().all(|&x| x < 1 << 62) {
        pow_lanes_with::<true>(n, a, e)
    } else {
        pow_lanes_with::<false>(n, a, e)
    }
}

fn pow_lanes_with<const LAZY: bool>(
    n: [u64; LANES],
    a: [u64; LANES],
    e: [u64; LANES],
) -> [u64; LANES] {
    use super::arith::mulmod;
    let mul = |x: u64, y: u64, n: u64, ninv: u64| {
        if LAZY {
            mmul_lazy(x, y, n, ninv)
        } else {
            mmul(x, y, n, ninv)
        }
    };
    let mut ninv = [0u64; LANES];
    let mut tab = [[0u64; 4]; LANES];
    for i in 0..LANES {
        ninv[i] = inv_pow2_64(n[i]).wrapping_neg();
        let one = (u64::MAX % n[i] + 1) % n[i]; // 2⁶⁴ mod n
        let b = mulmod(a[i], one, n[i]); // a·2⁶⁴ mod n
        let b2 = mul(b, b, n[i], ninv[i]);
        tab[i] = [one, b, b2, mul(b2, b, n[i], ninv[i])];
    }
    let top = e.iter().map(|&x| 64 - x.leading_zeros()).max().unwrap_or(0);
    let mut r = [0u64; LANES];
    for i in 0..LANES {
        r[i] = tab[i][0];
    }
    let mut pos = top.div_ceil(2) * 2;
    while pos > 0 {
        pos -= 2;
        for i in 0..LANES {
            let x = mul(r[i], r[i], n[i], ninv[i]);
            let x = mul(x, x, n[i], ninv[i]);
            r[i] = mul(x, tab[i][((e[i] >> pos) & 3) as usize], n[i], ninv[i]);
        }
    }
    let mut out = [0u64; LANES];
    for i in 0..LANES {
        // r < 2n: r·2⁻⁶⁴ reduces to at most n
        let v = mmul_lazy(r[i], 1, n[i], ninv[i]);
        out[i] = if v >= n[i] { v - n[i] } else { v };
    }
    out
}

/// Run `pow_lanes` over a list of `(n, a, e)`, calling `done(index, a^e mod n)`.
fn pow_batch(items: &[(u64, u64, u64)], mut done: impl FnMut(usize, u64)) {
    for (ci, chunk) in items.chunks(LANES).enumerate() {
        let mut n = [3u64; LANES];
        let mut a = [1u64; LANES];
        let mut e = [0u64; LANES];
        for (i, &(ni, ai, ei)) in chunk.iter().enumerate() {
            n[i] = ni;
            a[i] = ai;
            e[i] = ei;
        }
        let r = pow_lanes(n, a, e);
        for (i, &ri) in r.iter().enumerate().take(chunk.len()) {
            done(ci * LANES + i, ri);
        }
    }
}

/// Roots of `k` mod each prime `q` of `work` (`(j, q)`), into `qn[j]` (count) and `qr[j]`.
///
/// * `q ≡ 2 (mod 3)`: the one root `a^((2q−1)/3)` (`3·(2q−1)/3 ≡ 1 mod q − 1`).
/// * `q ≡ 1 (mod 3)`, `q − 1 = 3t`, `3 ∤ t`: `x = a^e` with `3e ≡ 1 (mod t)` is a root iff
///   `k` is a cube at all (then the roots are `x, xω, xω²` with `ω = g^t ≠ 1`, tried with
///   `g = 2` first, else [`cbrt_mod_prime`]).
/// * `q ≡ 1 (mod 9)`: Euler's criterion `a^((q−1)/3) = 1` first, then [`cbrt_mod_prime`].
/// * `q ≤ 3` or `q | k`: [`roots_mod_prime_power`].
///
/// The exponentiations of one kind run [`LANES`] at a time.
fn cofactor_roots(
    k: i64,
    work: &[(u32, u64)],
    qn: &mut [u8],
    qr: &mut [[u64; 3]],
    cw: &mut CofactorWork,
) {
    use super::arith::mulmod;
    // (n, a, e) per lane and what the result means
    let CofactorWork {
        items,
        kind,
        idx,
        omega_items,
        omega_x,
    } = cw;
    items.clear();
    kind.clear();
    idx.clear();
    omega_items.clear();
    omega_x.clear();
    for &(j, q) in work {
        let ju = j as usize;
        if q <= 3 || k % q as i64 == 0 {
            let r = roots_mod_prime_power(k, q, 1);
            qn[ju] = r.len() as u8;
            qr[ju][..r.len()].copy_from_slice(&r);
            continue;
        }
        let a = residue(k, q);
        if q % 3 == 2 {
            items.push((q, a, (2 * q - 1) / 3));
            kind.push(0);
        } else if q % 9 != 1 {
            let t = (q - 1) / 3;
            let e = if t % 3 == 1 {
                (2 * t + 1) / 3
            } else {
                (t + 1) / 3
            };
            items.push((q, a, e));
            kind.push(1);
        } else {
            // q − 1 = 3^s·t, s ≥ 2: x = a^e, y = a^t and G = 2^t, side by side
            let mut t = q - 1;
            while t % 3 == 0 {
                t /= 3;
            }
            let e = if t % 3 == 1 {
                (2 * t + 1) / 3
            } else {
                (t + 1) / 3
            };
            items.extend_from_slice(&[(q, a, e), (q, a, t), (q, 2, t)]);
            kind.extend_from_slice(&[2, 3, 4]);
            idx.extend_from_slice(&[j, j]);
        }
        idx.push(j);
    }
    let mut held = [0u64; 2];
    // second round: ω = 2^t for the q ≡ 1 (mod 3) where k is a cube: (j, q, x)
    pow_batch(items, |i, r| {
        let (q, a, _) = items[i];
        let j = idx[i] as usize;
        match kind[i] {
            0 => {
                qn[j] = 1;
                qr[j][0] = r;
            }
            1 => {
                if mulmod(mulmod(r, r, q), r, q) != a {
                    qn[j] = 0;
                } else {
                    omega_items.push((q, 2, (q - 1) / 3));
                    omega_x.push((idx[i], r));
                }
            }
            2 => held[0] = r,
            3 => held[1] = r,
            // the lanes of one q are consecutive: (q, a, e), (q, a, t), (q, 2, t)
            _ => {
                let a = items[i - 1].1;
                // 2 a cube mod q (one time in three): the next non-cube g instead
                let found = cbrt_sylow(q, a, held[0], held[1], r)
                    .or_else(|| cbrt_sylow(q, a, held[0], held[1], sylow_generator(q)));
                let (rs, n) = found.unwrap_or_else(|| cbrt_mod_prime(a, q));
                qn[j] = n as u8;
                qr[j] = rs;
            }
        }
    });
    pow_batch(omega_items, |i, w| {
        let q = omega_items[i].0;
        let (j, x) = omega_x[i];
        let j = j as usize;
        if w != 1 {
            let x2 = mulmod(x, w, q);
            qn[j] = 3;
            qr[j] = [x, x2, mulmod(x2, w, q)];
        } else {
            // 2 is a cube mod q: ω = g^t for the next non-cube g
            let w = sylow_generator(q);
            let x2 = mulmod(x, w, q);
            qn[j] = 3;
            qr[j] = [x, x2, mulmod(x2, w, q)];
        }
    });
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::kernel::arith::cube_roots_mod;
    use crate::kernel::sieve;

    /// Every d of [lo, hi) with its sorted roots (empty when the sieve did not report it).
    fn collect_new(k: i64, lo: u64, hi: u64) -> Vec<(u64, Vec<u64>)> {
        let t = SieveTable::new(k, hi);
        let mut sc = SegScratch::default();
        let mut got: Vec<(u64, Vec<u64>)> = (lo..hi).map(|d| (d, Vec::new())).collect();
        let mut last = None;
        for_each_d(&t, lo, hi, &mut sc, |d, r| {
            assert!(
                !r.is_empty() && last < Some(d),
                "d={d}: increasing, with roots"
            );
            last = Some(d);
            let mut r = r.to_vec();
            r.sort_unstable();
            got[(d - lo) as usize].1 = r;
        });
        got
    }

    #[test]
    fn primes_of_the_generator() {
        // source: arith::primes_up_to (a plain sieve of Eratosthenes)
        let all = primes_up_to(200_000);
        let base: Vec<u64> = primes_up_to(isqrt_u64(200_000))
            .into_iter()
            .filter(|&p| p > 2)
            .collect();
        for (lo, hi) in [(3u64, 200_000u64), (1001, 150_001), (65_537, 131_071)] {
            let mut got = Vec::new();
            let (mut b, mut n) = (Vec::new(), Vec::new());
            for_each_prime(lo, hi, &base, &mut b, &mut n, |p| got.push(p));
            let want: Vec<u64> = all
                .iter()
                .copied()
                .filter(|&p| p >= lo && p <= hi && p > 2)
                .collect();
            assert_eq!(got, want, "[{lo}, {hi}]");
        }
    }

    #[test]
    fn agrees_with_the_reference_sieve_and_direct_roots() {
        // source: arith::cube_roots_mod (checked against brute force in arith) and the
        // classic table sieve of kernel::sieve
        for &k in &[
            1i64,
            2,
            3,
            33,
            42,
            -42,
            114,
            2 * 27 * 8,
            3 * 3 * 5 * 5 * 7,
            1 << 20,
            999_999_937,
        ] {
            for &(lo, hi) in &[
                (1u64, 3000u64),
                (1_000_000, 1_070_000),
                (999_999_000_000, 999_999_070_000),
            ] {
                let got = collect_new(k, lo, hi);
                assert_eq!(got.len() as u64, hi - lo);
                let table = sieve::PrimeTable::new(k, hi);
                let mut sc = sieve::RootScratch::default();
                let mut want = Vec::new();
                sieve::for_each_d(k, lo, hi, Some(&table), &mut sc, |d, r| {
                    let mut r = r.to_vec();
                    r.sort_unstable();
                    want.push((d, r));
                });
                assert_eq!(got, want, "k={k} [{lo}, {hi})");
                for (d, r) in got.iter().step_by(101) {
                    assert_eq!(r, &cube_roots_mod(k, *d), "k={k} d={d}");
                }
            }
        }
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(64))]
        // source: arith::cbrt_mod_prime (checked against brute force in arith); primes of
        // every size up to 2⁶² and every 3-adic valuation of q − 1 (the batched paths)
        #[test]
        fn cofactor_roots_match_cbrt_mod_prime(
            k in proptest::prop_oneof![1i64..1000, 1i64..=(1i64 << 40)],
            starts in proptest::collection::vec(5u64..(1u64 << 62), 1..24),
            nines in 0u32..6,
        ) {
            use crate::kernel::arith::is_prime_u64;
            // primes at or above each start, every other one forced to q ≡ 1 (mod 3^(2+nines))
            let mut qs = Vec::new();
            for (i, &st) in starts.iter().enumerate() {
                let step = if i % 2 == 0 { 2 } else { 2 * 3u64.pow(2 + nines) };
                let mut q = if i % 2 == 0 { st | 1 } else { st - st % step + 1 };
                while !is_prime_u64(q) || k % q as i64 == 0 {
                    q += step;
                }
                qs.push(q);
            }
            let work: Vec<(u32, u64)> = qs.iter().enumerate().map(|(i, &q)| (i as u32, q)).collect();
            let mut qn = vec![9u8; qs.len()];
            let mut qr = vec![[0u64; 3]; qs.len()];
            cofactor_roots(k, &work, &mut qn, &mut qr, &mut CofactorWork::default());
            for (i, &q) in qs.iter().enumerate() {
                let (want, n) = cbrt_mod_prime(residue(k, q), q);
                let mut got = qr[i][..qn[i] as usize].to_vec();
                got.sort_unstable();
                proptest::prop_assert_eq!(&got[..], &want[..n], "k={} q={}", k, q);
            }
        }
    }

    proptest::proptest! {
        // source: arith::powmod (plain square-and-multiply with 128-bit remainders); moduli
        // below and above 2⁶² (lazy and strict reduction)
        #[test]
        fn pow_lanes_match_powmod(
            ns in proptest::collection::vec(1u64..(1u64 << 62), LANES),
            big in proptest::bool::ANY,
            xs in proptest::collection::vec(proptest::num::u64::ANY, 2 * LANES),
        ) {
            let mut n = [0u64; LANES];
            let mut a = [0u64; LANES];
            let mut e = [0u64; LANES];
            for i in 0..LANES {
                n[i] = (2 * ns[i] + 1) | if big && i == 0 { 1 << 62 } else { 0 };
                a[i] = xs[i] % n[i];
                e[i] = xs[LANES + i] >> (i * 7);
            }
            let got = pow_lanes(n, a, e);
            for i in 0..LANES {
                proptest::prop_assert_eq!(got[i], crate::kernel::arith::powmod(a[i], e[i], n[i]));
            }
        }
    }

    #[test]
    fn large_d_agrees_with_direct_roots() {
        // d near 2⁴⁰, 2⁵⁰ and 2⁵⁶ (every prime up to √d sieved, buckets with few hits per
        // prime); source: arith::cube_roots_mod (Pollard–Brent factoring, brute-force checked)
        for &(k, lo, w) in &[
            (33i64, (1u64 << 40) - 20_000, 40_000u64),
            (114, (1u64 << 50) + 12_345, 5_000),
            (2, (1u64 << 56) - 3_000, 3_000),
        ] {
            if lo > 1 << 52 && cfg!(debug_assertions) {
                continue; // primes up to 2²⁸: release builds only
            }
            let got = collect_new(k, lo, lo + w);
            let step = if lo > 1 << 55 { 7 } else { 3 };
            for (d, r) in got.iter().step_by(step) {
                assert_eq!(r, &cube_roots_mod(k, *d), "k={k} d={d}");
            }
        }
    }
}
