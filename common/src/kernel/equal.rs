//! Region (E), two equal smallest coordinates: `y = z`, `|z| > Z0`, so `x³ + 2z³ = k`
//! (docs/method.md, "(E) two equal smallest coordinates"). Here `k ≥ 1` ([`super::scan`] turns a
//! negative `k` into a positive one).
//!
//! Each visited `z` gets one exact test: is `k − 2z³` a cube? Which `z` are visited:
//!
//! * **brute force** every `z` with `Z0 < |z| ≤ Z1`, where `Z1 = ⌊10k/19⌋`;
//! * **above `Z1`** only `z = ±g·q`, where `q ≤ z_hi` is the denominator of a continued-fraction
//!   convergent `p/q` of `∛2` and `g ≥ 1` runs over the integers with `g³ | k`.
//!
//! ## Why nothing above `Z1` is missed (Legendre's theorem)
//!
//! Let `x³ + 2z³ = k` with `|z| > max(Z0, Z1)`, and put `t = −x/z`. Then `z³(2 − t³) = k`.
//! Since `|z| ≥ Z0 + 1 > √k ≥ ∛k`, `|2 − t³| = k/|z|³ < 1`, so `1 < t³ < 3` and `t > 1`. Hence
//!
//! ```text
//!   |t − ∛2| = |t³ − 2| / (t² + t∛2 + ∛4) < k / (|z|³ · (1 + ∛2 + ∛4)) < k / (3.8·|z|³),
//! ```
//!
//! because `1 + ∛2 + ∛4 = 3.847… > 3.8`. And `k/(3.8|z|³) ≤ 1/(2z²)` exactly when
//! `|z| ≥ 2k/3.8 = 10k/19`, which holds for `|z| ≥ Z1 + 1`. So `|∛2 − t| < 1/(2z²)`.
//!
//! Let `g = gcd(x, z)` and write `t = p/q` in lowest terms with `q = |z|/g ≥ 1`. Then
//! `|∛2 − p/q| < 1/(2z²) ≤ 1/(2q²)`, and by Legendre's theorem (Hardy & Wright, *An
//! Introduction to the Theory of Numbers*, Thm 184) `p/q` is a convergent of `∛2`. Finally
//! `g³` divides `x³ + 2z³ = k`. So `|z| = g·q` with `g³ | k` and `q` a convergent
//! denominator: exactly the `z` visited above `Z1`. `Z1` depends on `k` only, never on the
//! rectangle, so a split of a rectangle visits the same `z` as the whole.
//!
//! The convergents are computed exactly (no floating point): Lagrange's method keeps an
//! integer cubic whose only real root is the current complete quotient `θ_n > 1`; `⌊θ_n⌋` is
//! found from sign changes, and `θ_{n+1} = 1/(θ_n − ⌊θ_n⌋)` is a substitution in the cubic.
//! There are `O(log z_hi)` of them (about 40 below 2⁶³).
//!
//! Digest of an equal-pair rectangle (the fields of [`Digest`]):
//! * `d_values` — signed `z` values visited (both sets above);
//! * `classes` — 0;
//! * `candidates` — the same count (computable from `k` and the rectangle alone);
//! * `survivors` — the same count again (every visited `z` gets the exact test);
//! * `hash` — Σ `survivor_hash(k, c mod 2⁶⁴, z)` where `c = sgn(v)·⌊∛|v|⌋`, `v = k − 2z³`:
//!   the cube root must be computed to produce it.

#![allow(clippy::manual_is_multiple_of)] // `is_multiple_of` is newer than our MSRV (1.80)

use super::exact::icbrt_trunc_i128;
use super::{survivor_hash, Progress};
use crate::{Digest, Rect, Solution};
use rayon::prelude::*;
use rug::ops::Pow;
use rug::Integer;

/// `Z1 = ⌊10|k|/19⌋`: above it only convergent denominators are visited (see module docs).
pub fn z1(k: i64) -> u64 {
    (k.unsigned_abs() as u128 * 10 / 19) as u64
}

/// Convergents `(p, q)` of `∛2` with `q ≤ qmax`, in order, computed exactly.
pub fn cbrt2_convergents(qmax: u64) -> Vec<(u128, u128)> {
    // P(x) = c[3]x³ + c[2]x² + c[1]x + c[0]; its one real root is θ_n.
    let mut c: [Integer; 4] = [
        Integer::from(-2),
        Integer::ZERO,
        Integer::ZERO,
        Integer::from(1),
    ];
    let eval = |c: &[Integer; 4], x: &Integer| -> Integer {
        let mut v = c[3].clone();
        for i in (0..3).rev() {
            v *= x;
            v += &c[i];
        }
        v
    };
    // θ > a  ⇔  P(a) has the sign opposite to the leading coefficient (one real root).
    let below_root = |c: &[Integer; 4], a: &Integer| -> bool {
        let v = eval(c, a);
        (v.cmp0() == std::cmp::Ordering::Less) != (c[3].cmp0() == std::cmp::Ordering::Less)
    };
    let (mut p1, mut q1) = (Integer::from(1), Integer::ZERO); // p_{n-1}, q_{n-1}
    let (mut p2, mut q2) = (Integer::ZERO, Integer::from(1)); // p_{n-2}, q_{n-2}
    let mut out = Vec::new();
    loop {
        // a = ⌊θ⌋ ≥ 1: exponential then binary search on `below_root`.
        let mut lo = Integer::from(1);
        debug_assert!(below_root(&c, &lo));
        let mut hi = Integer::from(2);
        while below_root(&c, &hi) {
            lo = hi.clone();
            hi *= 2;
        }
        while Integer::from(&hi - &lo) > 1 {
            let mid: Integer = Integer::from(&lo + &hi) >> 1;
            if below_root(&c, &mid) {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        let a = lo;
        let p = Integer::from(&a * &p1) + &p2;
        let q = Integer::from(&a * &q1) + &q2;
        if q > qmax {
            break;
        }
        out.push((
            p.to_u128().expect("p < 2^128"),
            q.to_u128().expect("q < 2^64"),
        ));
        (p2, q2, p1, q1) = (p1, q1, p, q);
        // θ' = 1/(θ − a): P(a + u) = b3u³ + b2u² + b1u + b0, then y³P(a + 1/y) has
        // coefficients (b0, b1, b2, b3) from the top.
        let b0 = eval(&c, &a);
        let b1 =
            Integer::from(3) * &c[3] * a.clone().pow(2) + Integer::from(2) * &c[2] * &a + &c[1];
        let b2 = Integer::from(3) * &c[3] * &a + &c[2];
        let b3 = c[3].clone();
        c = [b3, b2, b1, b0];
    }
    out
}

/// The `|z|` above `Z1` inside `(z_lo, z_hi]` that region (E) visits, ascending, distinct.
pub fn high_z(k: i64, rect: &Rect) -> Vec<u64> {
    let lo = rect.z_lo.max(z1(k));
    if rect.z_hi <= lo {
        return Vec::new();
    }
    let ak = k.unsigned_abs();
    let gs: Vec<u64> = (1u64..)
        .take_while(|g| g * g * g <= ak)
        .filter(|g| ak % (g * g * g) == 0)
        .collect();
    let mut zs = Vec::new();
    for (_, q) in cbrt2_convergents(rect.z_hi) {
        for &g in &gs {
            let z = g as u128 * q;
            if z > lo as u128 && z <= rect.z_hi as u128 {
                zs.push(z as u64);
            }
        }
    }
    zs.sort_unstable();
    zs.dedup();
    zs
}

/// The brute-force `|z|` range `(z_lo, min(z_hi, Z1)]`, as `lo..hi`.
fn brute_range(k: i64, rect: &Rect) -> std::ops::Range<u64> {
    let hi = rect.z_hi.min(z1(k));
    let lo = rect.z_lo;
    if hi <= lo {
        0..0
    } else {
        lo + 1..hi + 1
    }
}

/// Candidates of an equal-pair rectangle (signed `z` visited).
pub fn candidates_equal(k: i64, rect: &Rect) -> u64 {
    let b = brute_range(k, rect);
    2 * (b.end - b.start) + 2 * high_z(k, rect).len() as u64
}

/// Scan an equal-pair rectangle (already checked) for `k ≥ 1`.
pub fn scan_equal(k: i64, rect: &Rect, progress: Progress) -> (Digest, Vec<Solution>) {
    let b = brute_range(k, rect);
    const CHUNK: u64 = 1 << 14;
    let nchunks = (b.end - b.start).div_ceil(CHUNK);
    let parts: Vec<(Digest, Vec<Solution>)> = (0..nchunks)
        .into_par_iter()
        .map(|i| {
            let lo = b.start + i * CHUNK;
            let hi = (lo + CHUNK).min(b.end);
            let mut dg = Digest::ZERO;
            let mut sols = Vec::new();
            for az in lo..hi {
                for z in [az as i64, -(az as i64)] {
                    let v = k as i128 - 2 * (z as i128).pow(3);
                    let c = icbrt_trunc_i128(v);
                    dg.d_values += 1;
                    dg.candidates += 1;
                    dg.survivors += 1;
                    dg.hash = dg.hash.wrapping_add(survivor_hash(k, c as u64, z));
                    if c * c * c == v {
                        sols.push(Solution::new(c, z as i128, z as i128));
                    }
                }
            }
            progress(2 * (hi - lo));
            (dg, sols)
        })
        .collect();
    let mut dg = Digest::ZERO;
    let mut sols = Vec::new();
    for (d, s) in parts {
        dg.add_assign(&d);
        sols.extend(s);
    }
    let high = high_z(k, rect);
    for &az in &high {
        for z in [az as i64, -(az as i64)] {
            let v = Integer::from(k) - Integer::from(2) * Integer::from(z).pow(3);
            let c = Integer::from(v.abs_ref()).root(3);
            let c = if v < 0 { -c } else { c };
            dg.d_values += 1;
            dg.candidates += 1;
            dg.survivors += 1;
            dg.hash = dg
                .hash
                .wrapping_add(survivor_hash(k, c.to_u64_wrapping(), z));
            if c.clone().pow(3) == v {
                let x = c.to_i128().expect("a solution's x is below 2^66");
                sols.push(Solution::new(x, z as i128, z as i128));
            }
        }
    }
    progress(2 * high.len() as u64);
    (dg, sols)
}

/// Seconds on one reference core: one exact cube root per brute-force `z` (measured about
/// 56 ns per signed `z`), plus a fixed 10⁻⁴ s for the convergents and their big-integer tests.
pub fn estimate_seconds_equal(k: i64, rect: &Rect) -> f64 {
    let b = brute_range(k, rect);
    2.0 * (b.end - b.start) as f64 * 5.6e-8 + 1.0e-4
}

#[cfg(test)]
mod tests {
    use super::*;
    #[test]
    fn convergents_of_cbrt2_are_good_approximations() {
        // ∛2 = [1; 3, 1, 5, 1, 1, 4, 1, 1, 8, 1, 14, 1, 10, 2, 1, 4, 12, 2, 3, 2, 1, 3, 4, 1, 1, 2, 14, 3, …]
        // (OEIS A002945, from memory); the first terms are checked here, and every
        // convergent is checked exactly against the defining inequality of Legendre:
        // |∛2 − p/q| < 1/q², i.e. the cube p³ lies strictly between 2(q ∓ ...) — tested by
        // comparing (p ± 1/q)³ with 2q³ after clearing denominators.
        let cv = cbrt2_convergents(u64::MAX);
        let want_start = [(1u128, 1u128), (4, 3), (5, 4), (29, 23), (34, 27), (63, 50)];
        assert_eq!(&cv[..6], &want_start);
        assert!(cv.len() > 30, "{}", cv.len());
        for &(p, q) in &cv {
            // |p/q − ∛2| < 1/q²  ⇔  (pq − 1)³ < 2q⁶ < (pq + 1)³ (multiply by q², then cube).
            let (p, q) = (Integer::from(p), Integer::from(q));
            let pq = Integer::from(&p * &q);
            let two_q6 = Integer::from(2) * q.clone().pow(6);
            assert!(
                Integer::from(&pq - 1u32).pow(3) < two_q6
                    && two_q6 < Integer::from(&pq + 1u32).pow(3)
            );
        }
    }
}
