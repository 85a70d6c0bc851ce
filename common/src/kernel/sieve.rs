//! The cube roots of `k` modulo every `d` of a range, for the main region.
//!
//! Two ways to factor the `d` axis, chosen per rectangle:
//! * **segmented sieve** (wide ranges): the primes up to `√d_max` are classified once per
//!   rectangle — *dead* primes (`p ≡ 1 mod 3`, `p ∤ 3k`, `k` not a cube mod `p`: no `d` they
//!   divide has a root), primes with their 1 or 3 roots mod `p`, and the few `p | 3k` with
//!   their root lists mod every `p^e`. A segment of `d` is swept prime by prime: dead primes
//!   strike their multiples, the others append themselves to the factor list of the survivors.
//!   What is left after dividing out the listed primes is 1 or one prime `> √d_max`, whose
//!   roots are found per `d`. The roots mod `d` are then assembled by Hensel lifting and CRT.
//! * **one `d` at a time** (narrow ranges of huge `d`, where sieving primes up to `√d` would
//!   cost more than the whole range): Pollard–Brent factoring of each `d`.
//!
//! Both produce exactly the same roots; the buffers are reused across `d`.
//!
//! The main region now factors with [`super::segsieve`] (buckets for the large primes, memory
//! bounded by the piece rather than `√d`); this table sieve is its reference
//! ([`super::main_region::Path::Reference`]) and the per-`d` factoring fallback.

#![allow(clippy::manual_is_multiple_of)] // `is_multiple_of` is newer than our MSRV (1.80)

use super::arith::{
    cbrt_mod_prime, crt_combine, factor_u64, hensel_lift, inv_pow2_64, isqrt_u64, primes_up_to,
    residue, roots_mod_prime_power,
};

/// Segment length (values of `d` per sweep).
pub const SEG: usize = 8192;
/// Most distinct primes a `d < 2⁶⁴` can have below `√d` (2·3·5·…·47 > 2⁶⁴).
const MAXF: usize = 15;

#[derive(Clone, Debug)]
struct Good {
    p: u64,
    /// `p⁻¹ mod 2⁶⁴` and `⌊(2⁶⁴−1)/p⌋` for division-free divisibility tests (odd `p`)
    pinv: u64,
    plim: u64,
    /// number of roots mod p, or `SPECIAL` when `p | 3k`
    n: u8,
    roots: [u64; 3],
}
const SPECIAL: u8 = u8::MAX;

impl Good {
    fn new(p: u64, n: u8, roots: [u64; 3]) -> Good {
        let (pinv, plim) = if p & 1 == 1 {
            (inv_pow2_64(p), u64::MAX / p)
        } else {
            (0, 0)
        };
        Good {
            p,
            pinv,
            plim,
            n,
            roots,
        }
    }
    /// Divide out `p` from `rem` completely; the exponent.
    #[inline]
    fn strip(&self, rem: &mut u64) -> u32 {
        if self.p == 2 {
            let e = rem.trailing_zeros();
            *rem >>= e;
            return e;
        }
        let mut e = 0;
        loop {
            // rem·p⁻¹ mod 2⁶⁴ is rem/p when p | rem, and exceeds ⌊(2⁶⁴−1)/p⌋ otherwise
            let q = rem.wrapping_mul(self.pinv);
            if q > self.plim {
                return e;
            }
            *rem = q;
            e += 1;
        }
    }
}

/// The primes up to `√d_max`, classified for one `k` (built once per rectangle).
pub struct PrimeTable {
    k: i64,
    limit: u64,
    bad: Vec<u64>,
    good: Vec<Good>,
    /// for `p | 3k`: `(p, roots mod p^e for e = 0..)`
    special: Vec<(u64, Vec<Vec<u64>>)>,
}

impl PrimeTable {
    /// Classify the primes `≤ √(d_max − 1)`.
    pub fn new(k: i64, d_max: u64) -> PrimeTable {
        let limit = isqrt_u64(d_max.saturating_sub(1)).max(1);
        let mut bad = Vec::new();
        let mut good = Vec::new();
        let mut special = Vec::new();
        for p in primes_up_to(limit) {
            if p == 3 || k % p as i64 == 0 {
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
                special.push((p, lists));
                good.push(Good::new(p, SPECIAL, [0; 3]));
                continue;
            }
            let (r, n) = cbrt_mod_prime(residue(k, p), p);
            if n == 0 {
                bad.push(p);
            } else {
                good.push(Good::new(p, n as u8, r));
            }
        }
        PrimeTable {
            k,
            limit,
            bad,
            good,
            special,
        }
    }

    /// Whether sieving is the cheaper way to factor `[d_lo, d_hi)`.
    pub fn worth_sieving(d_lo: u64, d_hi: u64) -> bool {
        let limit = isqrt_u64(d_hi.saturating_sub(1));
        limit <= 1 << 16 || (limit <= 1 << 26 && limit / 64 <= d_hi - d_lo)
    }
}

/// Reusable buffers for root assembly.
pub struct RootScratch {
    rem: Vec<u64>,
    dead: Vec<bool>,
    nf: Vec<u8>,
    fac: Vec<u32>,
    roots: Vec<u64>,
    tmp: Vec<u64>,
    part: Vec<u64>,
}

impl Default for RootScratch {
    fn default() -> Self {
        RootScratch {
            rem: vec![0; SEG],
            dead: vec![false; SEG],
            nf: vec![0; SEG],
            fac: vec![0; SEG * MAXF],
            roots: Vec::with_capacity(64),
            tmp: Vec::with_capacity(64),
            part: Vec::with_capacity(64),
        }
    }
}

/// Fold the roots modulo one prime power `p^e` (given as a slice) into `roots` (mod `m`).
#[inline]
fn fold(roots: &mut Vec<u64>, tmp: &mut Vec<u64>, m: &mut u64, part: &[u64], pe: u64) {
    crt_combine(roots, *m, part, pe, tmp);
    std::mem::swap(roots, tmp);
    *m *= pe;
}

/// Roots mod `q^1` of `k` for a prime `q` not in the table, into `part`.
fn roots_of_large_prime(k: i64, q: u64, part: &mut Vec<u64>) {
    part.clear();
    if q == 3 || k % q as i64 == 0 {
        part.extend(roots_mod_prime_power(k, q, 1));
    } else {
        let (r, n) = cbrt_mod_prime(residue(k, q), q);
        part.extend_from_slice(&r[..n]);
    }
}

/// Roots of `k` modulo a prime power `p^e` with `p ∤ 3k`, from its roots mod `p`.
#[inline]
fn lift_roots(k: i64, g: &Good, e: u32, part: &mut Vec<u64>) -> u64 {
    part.clear();
    let pe = g.p.pow(e);
    if e == 1 {
        part.extend_from_slice(&g.roots[..g.n as usize]);
    } else {
        let a = residue(k, pe);
        for &r in &g.roots[..g.n as usize] {
            part.push(hensel_lift(a, r, pe));
        }
    }
    pe
}

/// Call `f(d, roots)` for every `d ∈ [d_lo, d_hi)` in increasing order, with the cube roots
/// of `k` mod `d` (unsorted; possibly empty). Uses `table` when given (it must cover
/// `√(d_hi − 1)`), else factors each `d` on its own.
pub fn for_each_d(
    k: i64,
    d_lo: u64,
    d_hi: u64,
    table: Option<&PrimeTable>,
    sc: &mut RootScratch,
    mut f: impl FnMut(u64, &[u64]),
) {
    let Some(t) = table else {
        for d in d_lo..d_hi {
            sc.roots.clear();
            sc.roots.push(0);
            let mut m = 1u64;
            for (p, e) in factor_u64(d) {
                let pe = p.pow(e);
                sc.part.clear();
                sc.part.extend(roots_mod_prime_power(k, p, e));
                fold(&mut sc.roots, &mut sc.tmp, &mut m, &sc.part, pe);
                if sc.roots.is_empty() {
                    break;
                }
            }
            f(d, &sc.roots);
        }
        return;
    };
    debug_assert!(t.k == k);
    debug_assert!(d_hi <= 1 || isqrt_u64(d_hi - 1) <= t.limit);
    // next multiple of each prime at or after the segment start, carried across segments
    let mut next_bad: Vec<u64> = t.bad.iter().map(|&p| (p - d_lo % p) % p).collect();
    let mut next_good: Vec<u64> = t.good.iter().map(|g| (g.p - d_lo % g.p) % g.p).collect();
    let mut a = d_lo;
    while a < d_hi {
        let len = ((d_hi - a) as usize).min(SEG);
        for i in 0..len {
            sc.rem[i] = a + i as u64;
            sc.dead[i] = false;
            sc.nf[i] = 0;
        }
        for (&p, nx) in t.bad.iter().zip(next_bad.iter_mut()) {
            let mut j = *nx as usize;
            while j < len {
                sc.dead[j] = true;
                j += p as usize;
            }
            *nx = (j - len) as u64;
        }
        for (gi, (g, nx)) in t.good.iter().zip(next_good.iter_mut()).enumerate() {
            let p = g.p as usize;
            let mut j = *nx as usize;
            while j < len {
                if !sc.dead[j] {
                    let n = sc.nf[j] as usize;
                    sc.fac[j * MAXF + n] = gi as u32;
                    sc.nf[j] = n as u8 + 1;
                }
                j += p;
            }
            *nx = (j - len) as u64;
        }
        for i in 0..len {
            let d = a + i as u64;
            if sc.dead[i] {
                f(d, &[]);
                continue;
            }
            let mut rem = sc.rem[i];
            sc.roots.clear();
            sc.roots.push(0);
            let mut m = 1u64;
            for c in 0..sc.nf[i] as usize {
                let g = &t.good[sc.fac[i * MAXF + c] as usize];
                let p = g.p;
                let e = g.strip(&mut rem);
                if g.n == SPECIAL {
                    let lists = &t
                        .special
                        .iter()
                        .find(|s| s.0 == p)
                        .expect("special prime listed")
                        .1;
                    let pe = p.pow(e);
                    let part = &lists[e as usize];
                    crt_combine(&sc.roots, m, part, pe, &mut sc.tmp);
                    std::mem::swap(&mut sc.roots, &mut sc.tmp);
                    m *= pe;
                } else {
                    let pe = lift_roots(k, g, e, &mut sc.part);
                    fold(&mut sc.roots, &mut sc.tmp, &mut m, &sc.part, pe);
                }
                if sc.roots.is_empty() {
                    break;
                }
            }
            if rem > 1 && !sc.roots.is_empty() {
                roots_of_large_prime(k, rem, &mut sc.part);
                fold(&mut sc.roots, &mut sc.tmp, &mut m, &sc.part, rem);
            }
            f(d, &sc.roots);
        }
        a += len as u64;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::kernel::arith::cube_roots_mod;

    #[test]
    fn sieve_and_per_d_factoring_agree_with_direct_roots() {
        // source: arith::cube_roots_mod, itself checked against brute force
        for &k in &[
            1i64,
            2,
            3,
            33,
            42,
            -42,
            2 * 27 * 8,
            3 * 3 * 5 * 5 * 7,
            1 << 20,
            999_999_937,
        ] {
            for &(lo, hi) in &[
                (1u64, 3000u64),
                (1_000_000, 1_005_000),
                (999_999_000_000, 999_999_002_000),
            ] {
                let table = PrimeTable::new(k, hi);
                let mut sc = RootScratch::default();
                let mut got = Vec::new();
                for_each_d(k, lo, hi, Some(&table), &mut sc, |d, r| {
                    let mut r = r.to_vec();
                    r.sort_unstable();
                    got.push((d, r));
                });
                let mut got2 = Vec::new();
                for_each_d(k, lo, lo + 300, None, &mut sc, |d, r| {
                    let mut r = r.to_vec();
                    r.sort_unstable();
                    got2.push((d, r));
                });
                assert_eq!(got.len() as u64, hi - lo);
                for (d, r) in got.iter().take(300) {
                    assert_eq!(r, &cube_roots_mod(k, *d), "k={k} d={d}");
                }
                assert_eq!(&got[..300], &got2[..]);
                for (d, r) in got.iter().step_by(97) {
                    assert_eq!(r, &cube_roots_mod(k, *d), "k={k} d={d}");
                }
            }
        }
    }
}
