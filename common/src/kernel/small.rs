//! Region (S), small z: `|z| ≤ Z0`, every way of writing `n = k − z³` as `x³ + y³`
//! (docs/method.md, "(S) small z").
//!
//! For `x³ + y³ = n ≠ 0` put `e = x + y`. Since `x³ + y³ = e·(x² − xy + y²)` and
//! `x² − xy + y² = (e² + 3(x − y)²)/4 > 0`, `e` divides `n`, has the sign of `n`, and
//! `(x − y)² = (4n/e − e²)/3`; the right side is non-negative exactly when `|e|³ ≤ 4|n|`.
//! So we factor `|n|` exactly, run over its positive divisors `a ≤ ∛(4|n|)`, put
//! `e = sgn(n)·a` (the opposite sign makes `4n/e − e² < 0`, never a square, so it is not
//! visited), and keep `e` when `Q = 4|n|/a − a²` is divisible by 3, `Q/3 = r²` is a perfect
//! square and `r ≡ a (mod 2)`; then `x = (e + r)/2`, `y = (e − r)/2`.
//!
//! `n = 0` happens only when `k` is a cube `c³` and `z = c`: the trivial family `(t, −t, c)`,
//! which is not searched (see [`super::scan`]).
//!
//! Digest of a small-z rectangle (the fields of [`Digest`]):
//! * `d_values` — signed `z` values visited (`±z` for each `|z|` in `(z_lo, z_hi]`, plus
//!   `z = 0` when `z_lo = 0`);
//! * `classes` — 0;
//! * `candidates` — the same count as `d_values` (computable from the rectangle alone);
//! * `survivors` — divisors `a` sent to the square test, over all `z`;
//! * `hash` — Σ `survivor_hash(k, a, z)` over those divisors, mod 2⁶⁴. The divisors are
//!   known only after factoring `k − z³`, so the hash cannot be produced without the work.

#![allow(clippy::manual_is_multiple_of)] // `is_multiple_of` is newer than our MSRV (1.80)

use super::arith::factor_u64 as factor;
use super::divisors::divisors_up_to;
use super::exact::exact_sqrt_u128;
use super::exact::icbrt_u128;
use super::{survivor_hash, Progress};
use crate::{Digest, Rect, Solution};
use rayon::prelude::*;

/// The signed `z` values of a small-z rectangle, in ascending `|z|`.
fn z_values(rect: &Rect) -> impl Iterator<Item = i64> + Clone {
    let zero = (rect.z_lo == 0).then_some(0i64);
    zero.into_iter()
        .chain((rect.z_lo + 1..=rect.z_hi).flat_map(|a| [a as i64, -(a as i64)]))
}

/// Candidates of a small-z rectangle: the number of signed `z` visited.
pub fn candidates_small(rect: &Rect) -> u64 {
    if rect.z_hi <= rect.z_lo {
        return 0;
    }
    2 * (rect.z_hi - rect.z_lo) + u64::from(rect.z_lo == 0)
}

/// The work for one `z`: adds to `dg`, pushes solutions `(x, y, z)`.
pub fn one_z(k: i64, z: i64, dg: &mut Digest, sols: &mut Vec<Solution>, divs: &mut Vec<u64>) {
    dg.d_values += 1;
    dg.candidates += 1;
    let n = k as i128 - (z as i128).pow(3);
    if n == 0 {
        return;
    }
    let an = n.unsigned_abs();
    let an64 = u64::try_from(an).expect("|k − z³| < 2^64 in the small region");
    let lim = icbrt_u128(4 * an) as u64;
    divisors_up_to(&factor(an64), lim, divs);
    divs.sort_unstable();
    for &a in divs.iter() {
        dg.survivors += 1;
        dg.hash = dg.hash.wrapping_add(survivor_hash(k, a, z));
        let a128 = a as u128;
        let q = 4 * an / a128 - a128 * a128; // ≥ 0 because a³ ≤ 4|n|
        if q % 3 != 0 {
            continue;
        }
        let Some(r) = exact_sqrt_u128(q / 3) else {
            continue;
        };
        if (r ^ a128) & 1 != 0 {
            continue;
        }
        let e = if n < 0 { -(a as i128) } else { a as i128 };
        let r = r as i128;
        sols.push(Solution::new((e + r) / 2, (e - r) / 2, z as i128));
    }
}

/// Scan a small-z rectangle (already checked) for `k`.
pub fn scan_small(k: i64, rect: &Rect, progress: Progress) -> (Digest, Vec<Solution>) {
    let zs: Vec<i64> = z_values(rect).collect();
    let chunk = 256;
    let parts: Vec<(Digest, Vec<Solution>)> = zs
        .par_chunks(chunk)
        .map(|c| {
            let mut dg = Digest::ZERO;
            let mut sols = Vec::new();
            let mut divs = Vec::new();
            for &z in c {
                one_z(k, z, &mut dg, &mut sols, &mut divs);
            }
            progress(c.len() as u64);
            (dg, sols)
        })
        .collect();
    let mut dg = Digest::ZERO;
    let mut sols = Vec::new();
    for (d, s) in parts {
        dg.add_assign(&d);
        sols.extend(s);
    }
    (dg, sols)
}

/// Seconds on one reference core: one factorisation of `|k − z³|` per `z`.
///
/// Pollard's rho costs grow with the size of `n`; measured (debug profile, which builds this
/// crate at opt-level 3) about 10 µs per `z` for `n ≈ 2⁵⁰` and well under 1 µs for `n < 2²⁰`,
/// modelled as `10⁻⁷ + 10⁻⁵·(b/50)⁴` seconds with `b` the bit length of the largest `n`.
pub fn estimate_seconds_small(k: i64, rect: &Rect) -> f64 {
    let n_max = k.unsigned_abs() as u128 + (rect.z_hi as u128).pow(3);
    let bits = (128 - n_max.leading_zeros()) as f64;
    let per_z = 1.0e-7 + 1.0e-5 * (bits / 50.0).powi(4);
    candidates_small(rect) as f64 * per_z
}
