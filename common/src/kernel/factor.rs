//! Factorisation of 64-bit integers: trial division by small primes, a deterministic
//! Miller–Rabin test and Pollard's rho (Brent's variant). Used by the small-z region, where
//! `|n| = |k − z³| < 2⁶¹`; exact for every `u64`.

#[inline]
fn mulmod(a: u64, b: u64, m: u64) -> u64 {
    ((a as u128 * b as u128) % m as u128) as u64
}

fn powmod(mut a: u64, mut e: u64, m: u64) -> u64 {
    let mut r = 1u64 % m;
    a %= m;
    while e > 0 {
        if e & 1 == 1 {
            r = mulmod(r, a, m);
        }
        a = mulmod(a, a, m);
        e >>= 1;
    }
    r
}

/// Deterministic primality for every `u64`: Miller–Rabin with the first twelve prime bases,
/// which is known to be exact below 3.3·10²⁴ (common practice; the property test below checks
/// it against trial division).
pub fn is_prime(n: u64) -> bool {
    const BASES: [u64; 12] = [2, 3, 5, 7, 11, 13, 17, 19, 23, 29, 31, 37];
    if n < 2 {
        return false;
    }
    for p in BASES {
        if n % p == 0 {
            return n == p;
        }
    }
    let s = (n - 1).trailing_zeros();
    let d = (n - 1) >> s;
    'base: for a in BASES {
        let mut x = powmod(a, d, n);
        if x == 1 || x == n - 1 {
            continue;
        }
        for _ in 1..s {
            x = mulmod(x, x, n);
            if x == n - 1 {
                continue 'base;
            }
        }
        return false;
    }
    true
}

fn gcd(mut a: u64, mut b: u64) -> u64 {
    while b != 0 {
        (a, b) = (b, a % b);
    }
    a
}

/// A non-trivial factor of the odd composite `n` (Brent's cycle finding, products of
/// differences batched 128 at a time).
fn rho(n: u64) -> u64 {
    let mut c = 1u64;
    loop {
        let f = |x: u64| (mulmod(x, x, n) + c) % n;
        let (mut x, mut y, mut q, mut g) = (2u64, 2u64, 1u64, 1u64);
        let mut ys = y;
        let mut r = 1u64;
        const M: u64 = 128;
        while g == 1 {
            x = y;
            for _ in 0..r {
                y = f(y);
            }
            let mut j = 0;
            while j < r && g == 1 {
                ys = y;
                for _ in 0..M.min(r - j) {
                    y = f(y);
                    q = mulmod(q, x.abs_diff(y), n);
                }
                g = gcd(q, n);
                j += M;
            }
            r *= 2;
        }
        if g == n {
            // The batch overshot: redo it one step at a time.
            loop {
                ys = f(ys);
                g = gcd(x.abs_diff(ys), n);
                if g > 1 {
                    break;
                }
            }
        }
        if g != n {
            return g;
        }
        c += 1;
    }
}

/// Prime factorisation `[(p, e)]`, primes ascending; empty for `n ≤ 1`.
pub fn factor(mut n: u64) -> Vec<(u64, u32)> {
    let mut primes: Vec<u64> = Vec::new();
    if n <= 1 {
        return Vec::new();
    }
    for p in [2u64, 3, 5, 7, 11, 13, 17, 19, 23, 29, 31, 37, 41, 43, 47] {
        while n % p == 0 {
            primes.push(p);
            n /= p;
        }
    }
    let mut stack = vec![];
    if n > 1 {
        stack.push(n);
    }
    while let Some(m) = stack.pop() {
        if is_prime(m) {
            primes.push(m);
        } else {
            let f = rho(m);
            stack.push(f);
            stack.push(m / f);
        }
    }
    primes.sort_unstable();
    let mut out: Vec<(u64, u32)> = Vec::new();
    for p in primes {
        match out.last_mut() {
            Some((q, e)) if *q == p => *e += 1,
            _ => out.push((p, 1)),
        }
    }
    out
}

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
