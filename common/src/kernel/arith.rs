//! Word-sized number theory for the kernel: modular arithmetic, integer roots, primality and
//! factoring of `u64`, cube roots of `k` modulo primes and prime powers (Hensel lifting), CRT.
//!
//! Everything here works on machine words (`u64`, with `u128` intermediates) and never touches
//! GMP; callers that need more than 128 bits use `rug` themselves.

#![allow(clippy::manual_is_multiple_of)] // `is_multiple_of` is newer than our MSRV (1.80)

/// `a·b mod m` (any `m ≥ 1`).
#[inline]
pub fn mulmod(a: u64, b: u64, m: u64) -> u64 {
    #[cfg(target_arch = "x86_64")]
    if a < m && b < m {
        let p = a as u128 * b as u128;
        let r: u64;
        // SAFETY: one `div` of the 128-bit product by m; a, b < m makes the high word < m,
        // so the quotient fits 64 bits and the instruction cannot fault. No memory access.
        unsafe {
            core::arch::asm!(
                "div {m}",
                m = in(reg) m,
                inout("rax") p as u64 => _,
                inout("rdx") (p >> 64) as u64 => r,
                options(pure, nomem, nostack)
            );
        }
        return r;
    }
    ((a as u128 * b as u128) % m as u128) as u64
}

/// `a^e mod m` (`m ≥ 1`).
pub fn powmod(mut a: u64, mut e: u64, m: u64) -> u64 {
    if m == 1 {
        return 0;
    }
    a %= m;
    let mut r = 1u64;
    while e > 0 {
        if e & 1 == 1 {
            r = mulmod(r, a, m);
        }
        a = mulmod(a, a, m);
        e >>= 1;
    }
    r
}

/// Montgomery arithmetic modulo an odd `n < 2⁶³` (R = 2⁶⁴): products without division.
#[derive(Clone, Copy, Debug)]
pub struct Mont {
    pub n: u64,
    /// `−n⁻¹ mod 2⁶⁴`
    ninv: u64,
    /// `R² mod n`
    r2: u64,
}

/// `n⁻¹ mod 2⁶⁴` for odd `n` (Newton's iteration, each step doubles the correct bits).
#[inline]
pub fn inv_pow2_64(n: u64) -> u64 {
    debug_assert!(n & 1 == 1);
    let mut x = n; // correct to 3 bits: n·n ≡ 1 (mod 8)
    for _ in 0..5 {
        x = x.wrapping_mul(2u64.wrapping_sub(n.wrapping_mul(x)));
    }
    x
}

/// `n⁻¹ mod 2¹²⁸` for odd `n`.
#[inline]
pub fn inv_pow2_128(n: u64) -> u128 {
    let x = inv_pow2_64(n) as u128;
    x.wrapping_mul(2u128.wrapping_sub((n as u128).wrapping_mul(x)))
}

impl Mont {
    pub fn new(n: u64) -> Mont {
        debug_assert!(n & 1 == 1 && n < 1 << 63);
        // 2⁶⁴ mod n = ((2⁶⁴ − 1) mod n + 1) mod n, without a 128-bit division
        let r = (u64::MAX % n + 1) % n;
        let r2 = mulmod(r, r, n);
        Mont {
            n,
            ninv: inv_pow2_64(n).wrapping_neg(),
            r2,
        }
    }
    #[inline]
    fn redc(&self, t: u128) -> u64 {
        let m = (t as u64).wrapping_mul(self.ninv);
        let r = ((t + m as u128 * self.n as u128) >> 64) as u64;
        if r >= self.n {
            r - self.n
        } else {
            r
        }
    }
    #[inline]
    pub fn to(&self, a: u64) -> u64 {
        self.redc((a % self.n) as u128 * self.r2 as u128)
    }
    #[inline]
    pub fn from(&self, a: u64) -> u64 {
        self.redc(a as u128)
    }
    #[inline]
    pub fn mul(&self, a: u64, b: u64) -> u64 {
        self.redc(a as u128 * b as u128)
    }
    /// `a^e` with `a` and the result in Montgomery form.
    pub fn pow(&self, a: u64, mut e: u64) -> u64 {
        let mut r = self.to(1);
        let mut b = a;
        while e > 0 {
            if e & 1 == 1 {
                r = self.mul(r, b);
            }
            b = self.mul(b, b);
            e >>= 1;
        }
        r
    }
}

/// `a^e mod n` for odd `n < 2⁶³` through [`Mont`]; other `n` by [`powmod`].
pub fn powmod_fast(a: u64, e: u64, n: u64) -> u64 {
    if n & 1 == 1 && n < 1 << 63 && n > 1 {
        let m = Mont::new(n);
        m.from(m.pow(m.to(a), e))
    } else {
        powmod(a, e, n)
    }
}

/// Inverse of `a` modulo `m` (`m ≥ 1`), if `gcd(a, m) = 1`.
pub fn inv_mod(a: u64, m: u64) -> Option<u64> {
    if m == 1 {
        return Some(0);
    }
    if m < 1 << 63 {
        // Euclid in i64: the Bézout coefficients stay below m in absolute value.
        let (mut r0, mut r1) = (m as i64, (a % m) as i64);
        let (mut s0, mut s1) = (0i64, 1i64);
        while r1 != 0 {
            let q = r0 / r1;
            (r0, r1) = (r1, r0 - q * r1);
            (s0, s1) = (s1, s0 - q * s1);
        }
        if r0 != 1 {
            return None;
        }
        return Some(if s0 < 0 {
            (s0 + m as i64) as u64
        } else {
            s0 as u64
        });
    }
    let (mut r0, mut r1) = (m as i128, (a % m) as i128);
    let (mut s0, mut s1) = (0i128, 1i128);
    while r1 != 0 {
        let q = r0 / r1;
        (r0, r1) = (r1, r0 - q * r1);
        (s0, s1) = (s1, s0 - q * s1);
    }
    if r0 != 1 {
        return None;
    }
    Some(s0.rem_euclid(m as i128) as u64)
}

/// `⌊√n⌋` for `u64`.
pub fn isqrt_u64(n: u64) -> u64 {
    if n == 0 {
        return 0;
    }
    let mut r = (n as f64).sqrt() as u64;
    // fix the float estimate (at most a few steps off)
    while r > 0 && (r as u128) * (r as u128) > n as u128 {
        r -= 1;
    }
    while ((r + 1) as u128) * ((r + 1) as u128) <= n as u128 {
        r += 1;
    }
    r
}

/// `⌊√n⌋` for `u128`.
pub fn isqrt_u128(n: u128) -> u128 {
    if n == 0 {
        return 0;
    }
    if n < (1u128 << 64) {
        return isqrt_u64(n as u64) as u128;
    }
    // float estimate (relative error ~2⁻⁵², so absolute error ≲ 2¹²), then Newton from above.
    let mut x = (n as f64).sqrt() as u128 + 2;
    while x > (1u128 << 64) - 1 {
        x -= 1;
    }
    loop {
        let y = (x + n / x) / 2;
        if y >= x {
            break;
        }
        x = y;
    }
    while x.checked_mul(x).is_none_or(|v| v > n) {
        x -= 1;
    }
    while (x + 1).checked_mul(x + 1).is_some_and(|v| v <= n) {
        x += 1;
    }
    x
}

/// Deterministic Miller–Rabin for `u64` (the first twelve primes as bases suffice below
/// 3.3·10²⁴; common practice, no source).
pub fn is_prime_u64(n: u64) -> bool {
    if n < 2 {
        return false;
    }
    const SMALL: [u64; 12] = [2, 3, 5, 7, 11, 13, 17, 19, 23, 29, 31, 37];
    for &p in &SMALL {
        if n % p == 0 {
            return n == p;
        }
    }
    let mut dd = n - 1;
    let mut s = 0;
    while dd % 2 == 0 {
        dd /= 2;
        s += 1;
    }
    'base: for &a in &SMALL {
        let mut x = powmod(a, dd, n);
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

/// One non-trivial factor of the odd composite `n` (Pollard's rho, Brent's variant).
fn pollard_brent(n: u64) -> u64 {
    let mut c = 1u64;
    loop {
        let f = |x: u64| (mulmod(x, x, n) + c) % n;
        let (mut x, mut y, mut q) = (2u64, 2u64, 1u64);
        let mut g = 1;
        let mut r = 1u64;
        let mut ys = 2u64;
        while g == 1 {
            x = y;
            for _ in 0..r {
                y = f(y);
            }
            let mut kk = 0;
            while kk < r && g == 1 {
                ys = y;
                for _ in 0..r.min(128) {
                    y = f(y);
                    q = mulmod(q, x.abs_diff(y), n);
                }
                g = gcd(q, n);
                kk += 128;
            }
            r *= 2;
        }
        if g == n {
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

/// Prime factorisation of `n ≥ 1` as sorted `(p, e)` pairs.
pub fn factor_u64(n: u64) -> Vec<(u64, u32)> {
    let mut out: Vec<(u64, u32)> = Vec::new();
    let mut n = n;
    for p in [2u64, 3, 5, 7, 11, 13, 17, 19, 23, 29, 31, 37, 41, 43, 47] {
        let mut e = 0;
        while n % p == 0 {
            n /= p;
            e += 1;
        }
        if e > 0 {
            out.push((p, e));
        }
    }
    let mut stack = vec![n];
    let mut primes: Vec<u64> = Vec::new();
    while let Some(m) = stack.pop() {
        if m == 1 {
            continue;
        }
        if is_prime_u64(m) {
            primes.push(m);
            continue;
        }
        // perfect squares defeat nothing here, but a small trial division keeps rho honest
        let f = pollard_brent(m);
        stack.push(f);
        stack.push(m / f);
    }
    primes.sort_unstable();
    for p in primes {
        match out.last_mut() {
            Some((q, e)) if *q == p => *e += 1,
            _ => out.push((p, 1)),
        }
    }
    out.sort_unstable();
    out
}

/// Primes `≤ n` (sieve of Eratosthenes over odd numbers).
pub fn primes_up_to(n: u64) -> Vec<u64> {
    if n < 2 {
        return Vec::new();
    }
    let n = n as usize;
    let half = (n - 1) / 2; // index i ↔ 2i+1, i in 1..=half
    let mut comp = vec![false; half + 1];
    let mut i = 1;
    while (2 * i + 1) * (2 * i + 1) <= n {
        if !comp[i] {
            let p = 2 * i + 1;
            let mut j = (p * p - 1) / 2;
            while j <= half {
                comp[j] = true;
                j += p;
            }
        }
        i += 1;
    }
    let mut out = vec![2u64];
    out.extend((1..=half).filter(|&i| !comp[i]).map(|i| (2 * i + 1) as u64));
    out
}

/// `k mod m` as a residue in `[0, m)`.
#[inline]
pub fn residue(k: i64, m: u64) -> u64 {
    // 64-bit divisions only (a 128-bit remainder is a library call)
    let r = k.unsigned_abs() % m;
    if k < 0 && r != 0 {
        m - r
    } else {
        r
    }
}

/// The cube roots of `a` modulo a prime `p` with `p ∤ a`: 0, 1 or 3 of them, in the first
/// `count` slots. `p = 2, 3` included (`z³ ≡ z` there).
pub fn cbrt_mod_prime(a: u64, p: u64) -> ([u64; 3], usize) {
    let a = a % p;
    debug_assert!(a != 0);
    if p == 2 || p == 3 {
        return ([a, 0, 0], 1);
    }
    if p >= 1 << 63 {
        return cbrt_mod_prime_slow(a, p);
    }
    let mt = Mont::new(p);
    let am = mt.to(a);
    if p % 3 == 2 {
        // 3·(2p−1)/3 = 2p − 1 ≡ 1 (mod p − 1)
        return ([mt.from(mt.pow(am, (2 * p - 1) / 3)), 0, 0], 1);
    }
    // p ≡ 1 (mod 3), p − 1 = 3^s·t with 3 ∤ t.
    let one = mt.to(1);
    let mut t = p - 1;
    let mut s = 0u32;
    while t % 3 == 0 {
        t /= 3;
        s += 1;
    }
    if s == 1 {
        // x = a^e with 3e ≡ 1 (mod t): x³ = a·(a^t)^j, j ∈ {1, 2}, and a^t = a^((p−1)/3) has
        // order 1 or 3, so x³ = a iff a is a cube (Euler's criterion for free) and then x is
        // a root; ω = g^t for a non-cube g.
        let e = if t % 3 == 1 {
            (2 * t + 1) / 3
        } else {
            (t + 1) / 3
        };
        let x = mt.pow(am, e);
        if mt.mul(mt.mul(x, x), x) != am {
            return ([0; 3], 0);
        }
        let mut g = 2u64;
        let omega = loop {
            let w = mt.pow(mt.to(g), t);
            if w != one {
                break w;
            }
            g += 1;
        };
        let x2 = mt.mul(x, omega);
        let x3 = mt.mul(x2, omega);
        let mut r = [mt.from(x), mt.from(x2), mt.from(x3)];
        r.sort_unstable();
        return (r, 3);
    }
    // s ≥ 2: x = a^e has x³ = a·b with b = (a^t)^j in the subgroup of order 3^(s−1); find
    // b = H^l with H = G³, G = g^t a generator of the 3-Sylow subgroup (digit by digit), and
    // return x·G^(−l). Inverses in a group of order 3^s come from powers: y⁻¹ = y^(3^s − 1).
    let cube = |y: u64| mt.mul(mt.mul(y, y), y);
    let cube_n = |mut y: u64, n: u32| {
        for _ in 0..n {
            y = cube(y);
        }
        y
    };
    let y = mt.pow(am, t);
    if cube_n(y, s - 1) != one {
        return ([0; 3], 0);
    }
    let (e, j) = if t % 3 == 1 {
        ((2 * t + 1) / 3, 2)
    } else {
        ((t + 1) / 3, 1)
    };
    let mut x = mt.pow(am, e);
    let b = if j == 1 { y } else { mt.mul(y, y) };
    let mut g = 2u64;
    let gen = loop {
        let w = mt.pow(mt.to(g), t);
        if cube_n(w, s - 1) != one {
            break w; // order exactly 3^s
        }
        g += 1;
    };
    let order = s - 1; // H has order 3^order
    let h = cube(gen);
    let zeta = cube_n(h, order - 1); // order 3
    let zeta2 = mt.mul(zeta, zeta);
    let pow3 = |n: u32| 3u64.pow(n);
    let h_inv = mt.pow(h, pow3(order) - 1);
    let mut l = 0u64;
    let mut cur = b;
    for i in 0..order {
        let c = cube_n(cur, order - 1 - i);
        let digit = if c == one {
            0
        } else if c == zeta {
            1
        } else {
            debug_assert_eq!(c, zeta2);
            2
        };
        if digit > 0 {
            cur = mt.mul(cur, mt.pow(h_inv, digit * pow3(i)));
            l += digit * pow3(i);
        }
    }
    let gen_inv = mt.pow(gen, pow3(s) - 1);
    x = mt.mul(x, mt.pow(gen_inv, l));
    let omega = cube_n(gen, 0);
    let omega = mt.pow(omega, pow3(s - 1));
    let x2 = mt.mul(x, omega);
    let x3 = mt.mul(x2, omega);
    debug_assert_eq!(cube(x), am);
    let mut r = [mt.from(x), mt.from(x2), mt.from(x3)];
    r.sort_unstable();
    (r, 3)
}

/// [`cbrt_mod_prime`] in plain `u128` arithmetic, any `p`, any 3-adic valuation of `p − 1`.
fn cbrt_mod_prime_slow(a: u64, p: u64) -> ([u64; 3], usize) {
    if p % 3 == 2 {
        return ([powmod(a, (2 * p - 1) / 3, p), 0, 0], 1);
    }
    if powmod(a, (p - 1) / 3, p) != 1 {
        return ([0; 3], 0);
    }
    // p − 1 = 3^s · t with 3 ∤ t. x = a^e with 3e ≡ 1 (mod t) gives x³ = a·b, b in the
    // subgroup of order 3^(s−1); correct x by a cube root of b⁻¹ found in the 3-Sylow subgroup
    // (a Tonelli–Shanks-style discrete logarithm, digit by digit).
    let mut t = p - 1;
    let mut s = 0u32;
    while t % 3 == 0 {
        t /= 3;
        s += 1;
    }
    let e = if t % 3 == 1 {
        (2 * t + 1) / 3
    } else {
        (t + 1) / 3
    };
    let mut x = powmod(a, e, p);
    // generator of the 3-Sylow subgroup: G = g^t for a non-cube g
    let mut g = 2u64;
    while powmod(g, (p - 1) / 3, p) == 1 {
        g += 1;
    }
    let gen = powmod(g, t, p); // order 3^s
    let omega = powmod(gen, 3u64.pow(s - 1), p); // primitive cube root of unity
    if s > 1 {
        let inv_a = inv_mod(a, p).expect("p prime, p ∤ a");
        // b = x³/a has order dividing 3^(s−1); write b = H^l with H = gen³, find l.
        let b = mulmod(mulmod(mulmod(x, x, p), x, p), inv_a, p);
        let h = mulmod(mulmod(gen, gen, p), gen, p); // order 3^(s−1)
        let order = s - 1;
        let zeta = if order >= 1 {
            powmod(h, 3u64.pow(order - 1), p)
        } else {
            1
        };
        let zeta2 = mulmod(zeta, zeta, p);
        let h_inv = inv_mod(h, p).unwrap();
        let mut l = 0u64;
        let mut cur = b; // b · H^(−l)
        let mut pow3 = 1u64;
        for i in 0..order {
            let c = powmod(cur, 3u64.pow(order - 1 - i), p);
            let digit = if c == 1 {
                0
            } else if c == zeta {
                1
            } else {
                debug_assert_eq!(c, zeta2);
                2
            };
            if digit > 0 {
                cur = mulmod(cur, powmod(h_inv, digit * pow3, p), p);
                l += digit * pow3;
            }
            pow3 *= 3;
        }
        // b = gen^(3l), so (x · gen^(−l))³ = a·b·gen^(−3l) = a
        let gen_inv = inv_mod(gen, p).unwrap();
        x = mulmod(x, powmod(gen_inv, l, p), p);
    }
    let x2 = mulmod(x, omega, p);
    let x3 = mulmod(x2, omega, p);
    let mut r = [x, x2, x3];
    r.sort_unstable();
    (r, 3)
}

/// Lift a simple root `r` of `z³ ≡ a (mod p)` (`p ∤ 3a`) to the unique root modulo `m = p^e`
/// (Hensel's lemma; Newton iteration doubles the precision each step).
pub fn hensel_lift(a_mod_m: u64, r: u64, m: u64) -> u64 {
    let mut r = r % m;
    for _ in 0..7 {
        let r2 = mulmod(r, r, m);
        let f = (mulmod(r2, r, m) + m - a_mod_m % m) % m;
        if f == 0 {
            return r;
        }
        let fp = mulmod(3, r2, m);
        let inv = inv_mod(fp, m).expect("simple root: 3r² invertible mod p^e");
        r = (r + m - mulmod(f, inv, m)) % m;
    }
    debug_assert_eq!(mulmod(mulmod(r, r, m), r, m), a_mod_m % m);
    r
}

/// Every `z mod p^e` with `z³ ≡ k (mod p^e)`, sorted. `p` prime, `p^e < 2⁶⁴`.
///
/// * `p ∤ 3k`: the roots mod `p` (0, 1 or 3), each lifted uniquely by Hensel.
/// * `p | k`, `p ≠ 3`: `z = p·w`; for `e ≤ 3` every multiple of `p` when `p^e | k`; for `e > 3`
///   it needs `p³ | k` and `w³ ≡ k/p³ (mod p^(e−3))`, each root `w₀` giving `p²` roots
///   `p·w₀ + j·p^(e−2)`.
/// * `p = 3`: lifted level by level by trying the three lifts of every root.
pub fn roots_mod_prime_power(k: i64, p: u64, e: u32) -> Vec<u64> {
    let mut out = Vec::new();
    roots_pp_into(k, p, e, &mut out);
    out.sort_unstable();
    out
}

fn roots_pp_into(k: i64, p: u64, e: u32, out: &mut Vec<u64>) {
    out.clear();
    if e == 0 {
        out.push(0);
        return;
    }
    let m = p.pow(e);
    if p == 3 {
        out.push(0); // roots mod 3^0
        let mut level = 1u64;
        let mut next = Vec::new();
        for _ in 0..e {
            let lm = level * 3;
            let a = residue(k, lm);
            next.clear();
            for &r in out.iter() {
                for j in 0..3 {
                    let z = r + j * level;
                    if mulmod(mulmod(z, z, lm), z, lm) == a {
                        next.push(z);
                    }
                }
            }
            std::mem::swap(out, &mut next);
            level = lm;
        }
        return;
    }
    let a = residue(k, m);
    if a % p != 0 {
        let (rs, n) = cbrt_mod_prime(a % p, p);
        for &r in &rs[..n] {
            out.push(hensel_lift(a, r, m));
        }
        return;
    }
    if e <= 3 {
        if a != 0 {
            return;
        }
        let n = m / p;
        out.extend((0..n).map(|j| j * p));
        return;
    }
    let p3 = p * p * p;
    if (k as i128) % (p3 as i128) != 0 {
        return;
    }
    let mut w = Vec::new();
    roots_pp_into(k / p3 as i64, p, e - 3, &mut w);
    let step = m / (p * p); // p^(e−2)
    for &w0 in &w {
        for j in 0..p * p {
            out.push((p * w0 + j * step) % m);
        }
    }
}

/// Combine roots `ra` mod `ma` and `rb` mod `mb` (coprime) into roots mod `ma·mb` (CRT),
/// appended to `out` (cleared first). `ma·mb < 2⁶⁴`.
pub fn crt_combine(ra: &[u64], ma: u64, rb: &[u64], mb: u64, out: &mut Vec<u64>) {
    out.clear();
    let inv = inv_mod(ma % mb, mb).expect("coprime moduli");
    for &a in ra {
        for &b in rb {
            // x = a + ma·((b − a)·ma⁻¹ mod mb)
            let diff = (b + mb - a % mb) % mb;
            let h = mulmod(diff, inv, mb);
            out.push(a + ma * h);
        }
    }
}

/// Every cube root of `k` modulo `n ≥ 1`, sorted (factoring `n`).
pub fn cube_roots_mod(k: i64, n: u64) -> Vec<u64> {
    let mut roots = vec![0u64];
    let mut m = 1u64;
    let mut tmp = Vec::new();
    for (p, e) in factor_u64(n) {
        let rp = roots_mod_prime_power(k, p, e);
        let pe = p.pow(e);
        crt_combine(&roots, m, &rp, pe, &mut tmp);
        std::mem::swap(&mut roots, &mut tmp);
        m *= pe;
        if roots.is_empty() {
            break;
        }
    }
    roots.sort_unstable();
    roots
}

/// Full 256-bit product of two `u128` as `(hi, lo)`.
#[inline]
pub fn mul_u128_wide(a: u128, b: u128) -> (u128, u128) {
    let (a1, a0) = (a >> 64, a & 0xffff_ffff_ffff_ffff);
    let (b1, b0) = (b >> 64, b & 0xffff_ffff_ffff_ffff);
    let p00 = a0 * b0;
    let p01 = a0 * b1;
    let p10 = a1 * b0;
    let p11 = a1 * b1;
    let mid = (p00 >> 64) + (p01 & 0xffff_ffff_ffff_ffff) + (p10 & 0xffff_ffff_ffff_ffff);
    let lo = (p00 & 0xffff_ffff_ffff_ffff) | (mid << 64);
    let hi = p11 + (p01 >> 64) + (p10 >> 64) + (mid >> 64);
    (hi, lo)
}

/// `a³` as `(hi, lo)` 256-bit for `a < 2⁸⁵` (so that `a³ < 2²⁵⁶`).
#[inline]
pub fn cube_wide(a: u128) -> (u128, u128) {
    let (h, l) = mul_u128_wide(a, a); // a² = h·2¹²⁸ + l
    let (h1, l1) = mul_u128_wide(l, a);
    // h·a < 2¹²⁸ because a² < 2¹⁷⁰ ⇒ h < 2⁴², a < 2⁸⁵
    (h1 + h * a, l1)
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn brute_roots(k: i64, n: u64) -> Vec<u64> {
        let a = residue(k, n);
        (0..n)
            .filter(|&z| mulmod(mulmod(z, z, n), z, n) == a)
            .collect()
    }

    #[test]
    fn primes_and_factoring() {
        // brute force: trial division
        let ps = primes_up_to(1000);
        let brute: Vec<u64> = (2..=1000u64)
            .filter(|&n| (2..n).take_while(|d| d * d <= n).all(|d| n % d != 0))
            .collect();
        assert_eq!(ps, brute);
        for n in [
            1u64,
            2,
            12,
            97,
            1 << 40,
            600851475143,
            18446744073709551557,
            9223372036854775807,
            4294967291 * 4294967279,
        ] {
            let f = factor_u64(n);
            let prod: u128 = f.iter().map(|&(p, e)| (p as u128).pow(e)).product();
            assert_eq!(prod, n as u128, "{n}");
            assert!(f.iter().all(|&(p, _)| is_prime_u64(p)), "{n}: {f:?}");
        }
    }

    #[test]
    fn wide_cube_matches_gmp() {
        // reference: GMP via rug
        for a in [
            0u128,
            1,
            3,
            (1 << 64) - 1,
            1 << 66,
            (1 << 84) + 12345,
            (1 << 85) - 1,
        ] {
            let (h, l) = cube_wide(a);
            let r = rug::Integer::from(a) * rug::Integer::from(a) * rug::Integer::from(a);
            let back = (rug::Integer::from(h) << 128u32) + rug::Integer::from(l);
            assert_eq!(r, back, "{a}");
        }
    }

    #[test]
    fn isqrt_exact_on_edges() {
        for n in [
            0u128,
            1,
            2,
            3,
            4,
            15,
            16,
            17,
            u64::MAX as u128,
            (u64::MAX as u128) + 1,
            u128::MAX,
            (1u128 << 100) - 1,
            1u128 << 100,
        ] {
            let r = isqrt_u128(n);
            assert!(
                r * r <= n && (r + 1).checked_mul(r + 1).is_none_or(|v| v > n),
                "{n}"
            );
        }
    }

    proptest! {
        // source: i128::rem_euclid of the standard library
        #[test]
        fn residue_is_the_euclidean_remainder(k in proptest::num::i64::ANY, m in 1u64..=u64::MAX) {
            prop_assert_eq!(residue(k, m) as i128, (k as i128).rem_euclid(m as i128));
        }

        // source: the definition, 2⁶⁴·2⁶⁴ reduced with u128 arithmetic
        #[test]
        fn montgomery_round_trip(n in (1u64..(1u64 << 62)).prop_map(|n| 2 * n + 1), a in proptest::num::u64::ANY, b in proptest::num::u64::ANY) {
            let m = Mont::new(n);
            let want = ((a % n) as u128 * (b % n) as u128 % n as u128) as u64;
            prop_assert_eq!(m.from(m.mul(m.to(a), m.to(b))), want);
        }
    }

    proptest! {
        // source: brute force over all residues
        #[test]
        fn cube_roots_mod_n_match_brute_force(n in 1u64..3000, k in -100_000i64..100_000) {
            prop_assert_eq!(cube_roots_mod(k, n), brute_roots(k, n));
        }

        // prime powers with p | 3k and repeated factors (source: brute force)
        #[test]
        fn roots_mod_prime_powers_match_brute_force(pi in 0usize..8, e in 1u32..8, j in -50i64..50, v in 0u32..7) {
            let p = [2u64, 3, 5, 7, 11, 13, 19, 31][pi];
            let pe = p.checked_pow(e).unwrap();
            prop_assume!(pe <= 200_000);
            let k = j * (p as i64).pow(v);
            prop_assert_eq!(roots_mod_prime_power(k, p, e), brute_roots(k, pe));
        }

        // cube roots mod large primes: every returned root cubes to k, and the count is
        // 1 for p ≡ 2 (mod 3) and 0 or 3 otherwise, matching Euler's criterion.
        #[test]
        fn cube_roots_mod_large_primes(a in 1u64..u64::MAX, x in 1u64..(1u64 << 62)) {
            let mut p = x | 1;
            while !is_prime_u64(p) { p += 2; }
            let a = a % p;
            prop_assume!(a != 0);
            let (r, n) = cbrt_mod_prime(a, p);
            for &z in &r[..n] {
                prop_assert_eq!(mulmod(mulmod(z, z, p), z, p), a);
            }
            let expect = if p % 3 == 2 { 1 } else if powmod(a, (p - 1) / 3, p) == 1 { 3 } else { 0 };
            prop_assert_eq!(n, expect);
            if n == 3 { prop_assert!(r[0] != r[1] && r[1] != r[2]); }
        }

        // CRT: combined roots reduce to the inputs (source: brute force definition)
        #[test]
        fn crt_and_hensel(k in -1_000_000i64..1_000_000, n1 in 1u64..500, n2 in 1u64..500) {
            prop_assume!(gcd(n1, n2) == 1);
            let (r1, r2) = (cube_roots_mod(k, n1), cube_roots_mod(k, n2));
            let mut out = Vec::new();
            crt_combine(&r1, n1, &r2, n2, &mut out);
            out.sort_unstable();
            prop_assert_eq!(&out, &cube_roots_mod(k, n1 * n2));
            prop_assert_eq!(&out, &brute_roots(k, n1 * n2));
        }
    }

    #[test]
    fn cube_roots_when_p_minus_1_has_many_threes() {
        // primes p ≡ 1 (mod 3^s) exercise the discrete-logarithm correction; every root must
        // cube to a, and the count must match Euler's criterion (source: definition)
        for s in 2..=14u32 {
            let q = 3u64.pow(s);
            let mut p = 2 * q + 1;
            while !is_prime_u64(p) {
                p += 2 * q;
            }
            for a in (1..300u64).filter(|a| a % p != 0) {
                let (r, n) = cbrt_mod_prime(a, p);
                let expect = if powmod(a, (p - 1) / 3, p) == 1 { 3 } else { 0 };
                assert_eq!(n, expect, "p={p} a={a}");
                for &z in &r[..n] {
                    assert_eq!(mulmod(mulmod(z, z, p), z, p), a % p, "p={p} a={a}");
                }
                if n == 3 {
                    assert!(r[0] < r[1] && r[1] < r[2]);
                }
            }
        }
    }

    #[test]
    fn hensel_lifts_to_high_powers() {
        // source: definition, checked by exact modular arithmetic
        for (k, p) in [(2i64, 5u64), (33, 7), (42, 11), (-7, 13), (3, 1_000_003)] {
            let e = (63.0 / (p as f64).log2()).floor() as u32;
            for r in roots_mod_prime_power(k, p, e) {
                let m = p.pow(e);
                assert_eq!(mulmod(mulmod(r, r, m), r, m), residue(k, m));
            }
        }
    }
}
