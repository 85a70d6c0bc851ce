//! Exact integer roots on machine words, used by the small-z and equal-pair regions.
//!
//! Every function here returns the exact floor (no floating-point result is trusted: a
//! floating estimate is corrected by exact integer comparisons).

/// `⌊∛v⌋` for `v: u128`.
pub fn icbrt_u128(v: u128) -> u128 {
    if v == 0 {
        return 0;
    }
    // The estimate is within a few units of the answer; the loops make it exact.
    let mut r = (v as f64).cbrt() as u128;
    // (r+1)³ ≤ v ?  r < 2^43 so (r+1)³ < 2^129 could overflow only near u128::MAX: use checked.
    let cube = |r: u128| r.checked_mul(r).and_then(|s| s.checked_mul(r));
    while cube(r).is_none_or(|c| c > v) {
        r -= 1;
    }
    while cube(r + 1).is_some_and(|c| c <= v) {
        r += 1;
    }
    r
}

/// Cube root rounded toward zero: `sgn(v)·⌊∛|v|⌋`.
pub fn icbrt_trunc_i128(v: i128) -> i128 {
    let r = icbrt_u128(v.unsigned_abs()) as i128;
    if v < 0 {
        -r
    } else {
        r
    }
}

/// `Some(r)` with `r³ = v` when `v` is a perfect cube (of either sign).
pub fn exact_cbrt_i128(v: i128) -> Option<i128> {
    let r = icbrt_trunc_i128(v);
    (r * r * r == v).then_some(r)
}

/// `Some(r)`, `r ≥ 0`, with `r² = v` when `v ≥ 0` is a perfect square.
pub fn exact_sqrt_u128(v: u128) -> Option<u128> {
    let r = v.isqrt();
    (r * r == v).then_some(r)
}

#[cfg(test)]
mod tests {
    use super::*;
    #[test]
    fn cube_roots_are_exact_floors_near_perfect_cubes() {
        // Brute force: compare with (r−1)³, r³, r³ ± 1 for many r, including near 2^42.
        for r in (0u128..2000)
            .chain((1u128 << 40) - 5..(1u128 << 40) + 5)
            .chain([(1u128 << 42) + 12345])
        {
            let c = r * r * r;
            assert_eq!(icbrt_u128(c), r);
            if c > 0 {
                assert_eq!(icbrt_u128(c - 1), r - 1);
            }
            if r > 0 {
                assert_eq!(icbrt_u128(c + 1), r);
            }
            assert_eq!(exact_cbrt_i128(-(c as i128)), Some(-(r as i128)));
        }
        assert_eq!(icbrt_u128(u128::MAX), 6981463658331);
        assert_eq!(exact_cbrt_i128(9), None);
        assert_eq!(icbrt_trunc_i128(-9), -2);
        assert_eq!(exact_sqrt_u128(144), Some(12));
        assert_eq!(exact_sqrt_u128(145), None);
    }
}
