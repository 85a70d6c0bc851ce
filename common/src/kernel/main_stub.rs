//! Temporary stand-in for the main region (C) until the sieved implementation lands:
//! the same mathematics as METHOD.md "(C)", visited point by point, with no sieve.
//! Correct but slow; only for small rectangles.

use super::Progress;
use crate::{Digest, Rect, Solution};
use rug::ops::Pow;
use rug::Integer;

/// Largest `t` with `t ≤ d/α`, `α = ∛2 − 1`: `t·∛2 ≤ d + t ⇔ 2t³ ≤ (d + t)³`.
pub fn main_z_floor(d: u64) -> u64 {
    let ok = |t: u64| -> bool {
        let t_ = Integer::from(t);
        Integer::from(2) * t_.clone().pow(3) <= (t_ + d).pow(3)
    };
    let est = (d as f64 / (2f64.cbrt() - 1.0)) as u64;
    let mut t = est.saturating_sub(2);
    if !ok(t) {
        while t > 0 && !ok(t) {
            t -= 1;
        }
        return t;
    }
    while t < u64::MAX && ok(t + 1) {
        t += 1;
    }
    t
}

/// Commutative per-survivor hash (SplitMix64 finaliser over the three words).
pub fn survivor_hash(k: i64, d: u64, z: i64) -> u64 {
    fn mix(mut x: u64) -> u64 {
        x = x.wrapping_add(0x9e37_79b9_7f4a_7c15);
        x = (x ^ (x >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        x = (x ^ (x >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        x ^ (x >> 31)
    }
    mix(mix(mix(k as u64) ^ d) ^ z as u64)
}

fn z_range(rect: &Rect, d: u64, z0: u64) -> std::ops::RangeInclusive<u64> {
    let lo = rect.z_lo.max(z0).max(main_z_floor(d)) + 1;
    lo..=rect.z_hi
}

pub fn candidates_main(k: i64, rect: &Rect) -> u64 {
    let z0 = super::z0(k);
    let mut c = 0;
    for d in rect.d_lo..rect.d_hi {
        let r = z_range(rect, d, z0);
        if r.is_empty() {
            continue;
        }
        for a in r {
            for z in [a as i128, -(a as i128)] {
                let r = z.rem_euclid(d as i128) as u128;
                let cu = (r * r % d as u128) * r % d as u128;
                if (cu as i128 - k as i128).rem_euclid(d as i128) == 0 {
                    c += 1;
                }
            }
        }
    }
    c
}

pub fn scan_main(
    k: i64,
    rect: &Rect,
    _threads: usize,
    progress: Progress,
) -> (Digest, Vec<Solution>) {
    let z0 = super::z0(k);
    let mut dg = Digest::ZERO;
    let mut sols = Vec::new();
    for d in rect.d_lo..rect.d_hi {
        let r = z_range(rect, d, z0);
        if r.is_empty() {
            continue;
        }
        let l = z0.max(main_z_floor(d));
        if rect.z_lo <= l && l < rect.z_hi {
            dg.d_values += 1;
        }
        let c0 = dg.candidates;
        let dd = Integer::from(d);
        for a in r {
            for s in [1i64, -1] {
                let zi = Integer::from(a) * s;
                let zk = zi.clone().pow(3) - k;
                if !zk.is_divisible(&dd) {
                    continue;
                }
                dg.candidates += 1;
                dg.survivors += 1;
                dg.hash = dg.hash.wrapping_add(survivor_hash(k, d, a as i64 * s));
                let num = Integer::from(4 * s) * zk - dd.clone().pow(3);
                let den = Integer::from(3 * d);
                if !num.is_divisible(&den) {
                    continue;
                }
                let m = num / den;
                if m < 0 || !m.is_perfect_square() {
                    continue;
                }
                let r = m.sqrt();
                let sd = Integer::from(-s) * d;
                if !Integer::from(&r - &sd).is_even() {
                    continue;
                }
                let x: Integer = Integer::from(&sd + &r) / 2;
                let y: Integer = Integer::from(&sd - &r) / 2;
                sols.push(Solution::new(
                    x.to_i128().unwrap(),
                    y.to_i128().unwrap(),
                    (a as i64 * s) as i128,
                ));
            }
        }
        progress(dg.candidates - c0);
    }
    (dg, sols)
}

pub fn estimate_seconds_main(k: i64, rect: &Rect) -> f64 {
    let _ = k;
    (rect.d_hi - rect.d_lo) as f64 * (rect.z_hi - rect.z_lo) as f64 * 1e-7
}
