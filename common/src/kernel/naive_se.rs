//! Naive paths for the small-z and equal-pair regions, for tests: the same mathematics as
//! [`super::small`] and [`super::equal`] with no factoring and no continued fractions.
//!
//! * small: for each `z`, every `a = 1, 2, …, ⌊∛(4|n|)⌋` is tried as a divisor of `n = k − z³`
//!   by trial division; the digest is the one the fast path must produce (same survivors, same
//!   hash), so it checks the factoring as well as the solutions.
//! * equal: every `z` in the rectangle gets the cube test, also above `Z1`, so it checks the
//!   Legendre argument; only the solutions are comparable (it visits more `z`).

#![allow(clippy::manual_is_multiple_of)] // `is_multiple_of` is newer than our MSRV (1.80)

use super::exact::{exact_sqrt_u128, icbrt_trunc_i128, icbrt_u128};
use super::survivor_hash;
use crate::{Digest, Rect, Solution};

/// Small-z rectangle for `k ≥ 1`, by trial division. Returns the digest and raw solutions.
pub fn scan_small_naive(k: i64, rect: &Rect) -> (Digest, Vec<Solution>) {
    let mut dg = Digest::ZERO;
    let mut sols = Vec::new();
    let zs = (rect.z_lo == 0)
        .then_some(0i64)
        .into_iter()
        .chain((rect.z_lo + 1..=rect.z_hi).flat_map(|a| [a as i64, -(a as i64)]));
    for z in zs {
        dg.d_values += 1;
        dg.candidates += 1;
        let n = k as i128 - (z as i128).pow(3);
        if n == 0 {
            continue;
        }
        let an = n.unsigned_abs();
        for a in 1..=icbrt_u128(4 * an) {
            if an % a != 0 {
                continue;
            }
            dg.survivors += 1;
            dg.hash = dg.hash.wrapping_add(survivor_hash(k, a as u64, z));
            let q = 4 * an / a - a * a;
            if q % 3 != 0 {
                continue;
            }
            if let Some(r) = exact_sqrt_u128(q / 3) {
                if (r + a) % 2 == 0 {
                    let e = if n < 0 { -(a as i128) } else { a as i128 };
                    sols.push(Solution::new(
                        (e + r as i128) / 2,
                        (e - r as i128) / 2,
                        z as i128,
                    ));
                }
            }
        }
    }
    (dg, sols)
}

/// Equal-pair rectangle for any `k`: every `z` with `|z| ∈ (z_lo, z_hi]` (keep `z_hi` below
/// about 2³⁹ so that `2z³` fits in 128 bits), `x = ∛(k − 2z³)` when exact.
pub fn scan_equal_naive(k: i64, rect: &Rect) -> Vec<Solution> {
    let mut sols = Vec::new();
    for a in rect.z_lo + 1..=rect.z_hi {
        for z in [a as i128, -(a as i128)] {
            let v = k as i128 - 2 * z * z * z;
            let c = icbrt_trunc_i128(v);
            if c * c * c == v {
                sols.push(Solution::new(c, z, z));
            }
        }
    }
    sols
}
