//! The reference implementation of the main region, for tests and benchmarks: the same
//! mathematics as [`super::main_region`] with no sieve, no root finding and no shortcuts.
//!
//! It visits every `(d, z)` of the rectangle, keeps those in the region (`|z| > Z0` and
//! `d < α|z|`, tested as `(d + |z|)³ < 2|z|³`), tests `d | z³ − k` directly, evaluates the sieve
//! predicate from scratch in GMP ([`super::survivor::survives_exact`]) for the digest, and runs
//! the exact test in GMP. Its cost is `(d_hi − d_lo)·(z_hi − z_lo)`: small rectangles only.

#![allow(clippy::manual_is_multiple_of)] // `is_multiple_of` is newer than our MSRV (1.80)

use super::main_region::main_z_floor;
use super::survivor::{survives_exact, survivor_hash};
use super::ScanOutput;
use crate::{Digest, Rect, Solution};
use rug::Integer;

/// `d < α·u`, i.e. `(d + u)³ < 2u³` (machine words while they suffice, else GMP).
fn in_region_d(d: u64, u: u64) -> bool {
    let a = d as u128 + u as u128;
    if a < 1 << 42 {
        let uu = u as u128;
        return a * a * a < 2 * uu * uu * uu;
    }
    let a = Integer::from(a);
    let lhs: Integer = a.clone() * &a * &a;
    let uu = Integer::from(u);
    let rhs: Integer = Integer::from(2) * &uu * &uu * &uu;
    lhs < rhs
}

/// `u³ mod d`.
fn cube_mod(d: u64, u: u64) -> u128 {
    let um = (u % d) as u128;
    (um * um % d as u128) * um % d as u128
}

/// Does `d` divide `s·u³ − k` (i.e. `z³ − k` for `z = s·u`)?
fn divides(k: i64, d: u64, s: i64, u: u64) -> bool {
    cube_mod(d, u) == (s as i128 * k as i128).rem_euclid(d as i128) as u128
}

/// The exact test, all in GMP.
fn exact(k: i64, d: u64, s: i64, u: u64) -> Option<Solution> {
    let z = Integer::from(s) * u;
    let n: Integer = Integer::from(4) * s * (z.clone() * &z * &z - k) - Integer::from(d) * d * d;
    let (m, rem) = n.div_rem_euc(Integer::from(3u64 * d));
    if rem != 0 || m < 0 {
        return None;
    }
    let (r, rest) = m.sqrt_rem(Integer::new());
    if rest != 0 || r.is_odd() != (d % 2 == 1) {
        return None;
    }
    let sd = Integer::from(s) * d;
    let x: Integer = (r.clone() - &sd) / 2;
    let y: Integer = (-r - &sd) / 2;
    let sol = Solution::new(x.to_i128()?, y.to_i128()?, z.to_i128()?);
    sol.verify(k).then_some(sol)
}

/// Scan `rect` of the main region for `k > 0` by visiting every point.
pub fn scan_main_naive(k: i64, rect: &Rect) -> ScanOutput {
    let z0 = crate::kernel::arith::isqrt_u64(k.unsigned_abs());
    let mut dg = Digest::ZERO;
    let mut sols = Vec::new();
    let in_region = |d: u64, u: u64| u > z0 && in_region_d(d, u);
    for d in rect.d_lo..rect.d_hi {
        // d_values: d has a root and its column's lowest row of the region lies in the rectangle
        let lowest = z0.max(main_z_floor(d)).saturating_add(1);
        if lowest > rect.z_lo && lowest <= rect.z_hi && (0..d).any(|r| divides(k, d, 1, r)) {
            debug_assert!(in_region(d, lowest) && (lowest == 1 || !in_region(d, lowest - 1)));
            dg.d_values += 1;
        }
        let kp = (k as i128).rem_euclid(d as i128) as u128; // z = +u: u³ ≡ k
        let km = (-(k as i128)).rem_euclid(d as i128) as u128; // z = −u: u³ ≡ −k
        let mut u = rect.z_lo + 1;
        while u <= rect.z_hi {
            if in_region(d, u) {
                let c = cube_mod(d, u);
                for s in [1i64, -1] {
                    if c != if s == 1 { kp } else { km } {
                        continue;
                    }
                    debug_assert!(divides(k, d, s, u));
                    dg.candidates += 1;
                    // the class (d, s·u mod d, s) is counted where its first member is
                    if u <= d || !in_region(d, u - d) {
                        dg.classes += 1;
                    }
                    let z = s * u as i64;
                    if survives_exact(k, d, z) {
                        dg.survivors += 1;
                        dg.hash = dg.hash.wrapping_add(survivor_hash(k, d, z));
                    }
                    if let Some(sol) = exact(k, d, s, u) {
                        sols.push(sol);
                    }
                }
            }
            u += 1;
        }
    }
    sols.sort();
    sols.dedup();
    ScanOutput {
        digest: dg,
        solutions: sols,
    }
}
