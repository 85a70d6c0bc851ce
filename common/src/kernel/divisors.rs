//! Divisors from a factorisation, for the small-z region (the factorisation itself is
//! [`super::arith::factor_u64`]: trial division, deterministic Miller–Rabin, Pollard–Brent rho).

#![allow(clippy::manual_is_multiple_of)] // `is_multiple_of` is newer than our MSRV (1.80)

/// Every positive divisor of the number with factorisation `f` that is `≤ limit`, in no
/// particular order.
pub fn divisors_up_to(f: &[(u64, u32)], limit: u64, out: &mut Vec<u64>) {
    out.clear();
    out.push(1);
    for &(p, e) in f {
        let len = out.len();
        for i in 0..len {
            let mut d = out[i];
            for _ in 0..e {
                match d.checked_mul(p) {
                    Some(nd) if nd <= limit => {
                        d = nd;
                        out.push(d);
                    }
                    _ => break,
                }
            }
        }
    }
    if limit == 0 {
        out.clear();
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::kernel::arith::{factor_u64 as factor, is_prime_u64 as is_prime};
    use proptest::prelude::*;

    fn trial(mut n: u64) -> Vec<(u64, u32)> {
        let mut out = vec![];
        let mut p = 2;
        while p * p <= n {
            let mut e = 0;
            while n % p == 0 {
                n /= p;
                e += 1;
            }
            if e > 0 {
                out.push((p, e));
            }
            p += 1;
        }
        if n > 1 {
            out.push((n, 1));
        }
        out
    }

    #[test]
    fn hard_cases() {
        // Brute force (trial division) is the reference; these are products of two large
        // primes, prime powers and Carmichael numbers, the usual hard cases for rho and MR.
        let p = 1_000_000_007u64;
        let q = 998_244_353u64;
        assert_eq!(factor(p * q), vec![(q, 1), (p, 1)]);
        assert_eq!(factor(p * p), vec![(p, 2)]);
        assert_eq!(factor(561), vec![(3, 1), (11, 1), (17, 1)]);
        assert!(is_prime((1u64 << 61) - 1)); // Mersenne prime M61 (common practice, no source)
        assert!(!is_prime(3_215_031_751)); // strong pseudoprime to bases 2,3,5,7
        assert_eq!(factor(u64::MAX), trial(u64::MAX));
        assert_eq!(factor(1), vec![]);
    }

    proptest! {
        #[test]
        fn matches_trial_division(n in 1u64..(1u64 << 40)) {
            prop_assert_eq!(factor(n), trial(n));
            prop_assert_eq!(is_prime(n), trial(n) == vec![(n, 1)]);
        }

        #[test]
        fn divisors_match_brute_force(n in 1u64..200_000, limit in 0u64..300_000) {
            let mut got = vec![];
            divisors_up_to(&factor(n), limit, &mut got);
            got.sort_unstable();
            let want: Vec<u64> = (1..=n.min(limit)).filter(|d| n % d == 0).collect();
            prop_assert_eq!(got, want);
        }
    }
}
