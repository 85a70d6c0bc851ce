//! The density model used for planning (docs/heuristic.md has the derivation and sources):
//! how many solutions of `x³ + y³ + z³ = k` a search up to `min(|x|,|y|,|z|) ≤ B` should
//! expect to find, counted up to permutation of `(x, y, z)`.
//!
//! expected(k, B) = S(k) · J(B / |k|^(1/3)),   S(k) = ∏_p σ_p(k)
//!
//! * [`local_density`] — σ_p: counting mod `pⁿ` until it is stable for `p | 3k` (when the
//!   modulus is small), closed-form point counts mod `p` otherwise ([`points_mod_p`]).
//! * [`SeriesTable`] — the singular series `S(k)`, an Euler product truncated at a prime bound,
//!   with its value at a tenth of that bound (how much the last decade of primes moved it).
//! * [`real_density`] — `J(t)`: the real (Leray) measure of the part of `x³+y³+z³ = 1` with
//!   `min ≤ t`, divided by 6 (unordered triples); [`REAL_SLOPE`] = `lim J(t)/ln t`.
//! * [`predict`] — expected total, expected new in `(B0, B]`, decimal digits of `B` per new
//!   solution; [`search_seconds`] — the kernel's cost model over a target's regions.
//! * [`poisson_interval`], [`FoundVsExpected`] — comparing what was found with the model;
//!   [`family_of`] — solutions of the parametric families for `k = 1, 2`, which the model
//!   does not count.
//!
//! Pure functions: no I/O, no clocks. What this does not do: say anything certain. It is a
//! conjecture-based forecast, useful for ranking targets, not a proof of anything.

use crate::kernel::{self, arith};
use crate::{Region, Solution};
use rug::{ops::Pow, Integer};

/// `Γ(1/3)³ / (6π√3)`: the unordered solution count per unit of `ln B` for `S(k) = 1`
/// (docs/heuristic.md §3). The tests recompute it by quadrature.
pub const REAL_SLOPE: f64 = 0.588_879_583_428_483_3;

/// Default truncation of the Euler product (see [`SeriesTable`]).
pub const DEFAULT_PRIME_BOUND: u64 = 1_000_000;
/// Largest prime bound accepted (a sieve of this size is about 60 MB).
pub const MAX_PRIME_BOUND: u64 = 100_000_000;
/// Largest modulus `pⁿ` counted by brute force in [`local_density`].
pub const MAX_COUNT_MODULUS: u64 = 4096;

// ---------------------------------------------------------------------------------------
// Local densities
// ---------------------------------------------------------------------------------------

/// `#{(x, y, z) mod m : x³ + y³ + z³ ≡ c (mod m)}` by direct counting: `O(m²)` work.
/// `None` when `m` is 0 or larger than [`MAX_COUNT_MODULUS`].
pub fn count_mod(c: u64, m: u64) -> Option<u64> {
    if m == 0 || m > MAX_COUNT_MODULUS {
        return None;
    }
    let mu = m as usize;
    let mut cubes = vec![0u64; mu];
    for x in 0..m {
        cubes[((x * x % m) * x % m) as usize] += 1;
    }
    let nz: Vec<(usize, u64)> = cubes
        .iter()
        .enumerate()
        .filter(|(_, &n)| n > 0)
        .map(|(r, &n)| (r, n))
        .collect();
    let mut two = vec![0u64; mu];
    for &(a, na) in &nz {
        for &(b, nb) in &nz {
            two[(a + b) % mu] += na * nb;
        }
    }
    let c = (c % m) as usize;
    Some(nz.iter().map(|&(a, na)| na * two[(c + mu - a) % mu]).sum())
}

/// `A` with `4p = A² + 27B²` and `A ≡ 1 (mod 3)`, for a prime `p ≡ 1 (mod 3)` (Gauss).
/// Found from `p = u² + 3v²` (Cornacchia's algorithm with `√−3 = 2ω + 1`, `ω` a primitive
/// cube root of unity mod `p`). `None` if `p` is not such a prime.
pub fn gauss_a(p: u64) -> Option<i64> {
    if p < 7 || p % 3 != 1 || p >= 1 << 62 || !arith::is_prime_u64(p) {
        return None;
    }
    // ω = a^((p−1)/3) ≠ 1 for some small a
    let e = (p - 1) / 3;
    let omega = (2..p).map(|a| arith::powmod(a, e, p)).find(|&w| w != 1)?;
    let root = (2 * omega as u128 + 1) as u64 % p; // (2ω+1)² = 4ω²+4ω+1 = −3
    let lim = arith::isqrt_u64(p);
    for r0 in [root, p - root] {
        let (mut a, mut b) = (p, r0);
        while b > lim {
            let t = a % b;
            a = b;
            b = t;
        }
        let rest = p - b * b;
        if rest % 3 != 0 {
            continue;
        }
        let v = arith::isqrt_u64(rest / 3);
        if v * v * 3 != rest {
            continue;
        }
        let (u, v) = (b as i64, v as i64);
        // 4p = (2u)² + 3(2v)² = (u+3v)² + 3(u−v)² = (u−3v)² + 3(u+v)²: one of 2v, u−v, u+v
        // is divisible by 3.
        let a_abs = if v % 3 == 0 {
            2 * u
        } else if (u - v) % 3 == 0 {
            u + 3 * v
        } else {
            u - 3 * v
        };
        let a = if a_abs.rem_euclid(3) == 1 {
            a_abs
        } else {
            -a_abs
        };
        debug_assert_eq!(
            (4 * p as i128 - (a as i128) * (a as i128)) % 27,
            0,
            "p = {p}"
        );
        return Some(a);
    }
    None
}

/// Whether `c` is a non-zero cube modulo the prime `p` (`p ∤ c`).
fn is_cube_unit(c: u64, p: u64) -> bool {
    p % 3 != 1 || arith::powmod_fast(c % p, (p - 1) / 3, p) == 1
}

/// `#{(x, y, z) mod p : x³ + y³ + z³ ≡ c}` for a prime `p ≠ 3`, in closed form
/// (docs/heuristic.md §2):
/// * `p ≡ 2 (mod 3)`: cubing is a bijection, so `p²` for every `c`;
/// * `p ≡ 1 (mod 3)`, `c ≢ 0`: `p² + 3p(χ(c) + χ̄(c)) − A`, where `χ(c) + χ̄(c)` is 2 when `c`
///   is a cube mod `p` and −1 otherwise, and `A` is [`gauss_a`];
/// * `p ≡ 1 (mod 3)`, `c ≡ 0`: `p² + (p − 1)A`.
///
/// `a` is `gauss_a(p)` (passed in so that tables can cache it; ignored for `p ≡ 2 mod 3`).
pub fn points_mod_p(c: u64, p: u64, a: i64) -> u64 {
    let p2 = (p as i128) * (p as i128);
    if p % 3 == 2 {
        return p2 as u64;
    }
    let c = c % p;
    let n = if c == 0 {
        p2 + (p as i128 - 1) * a as i128
    } else {
        let tr = if is_cube_unit(c, p) { 2 } else { -1 };
        p2 + 3 * p as i128 * tr - a as i128
    };
    n as u64
}

/// `p`-adic valuation of `n > 0`.
fn valuation(mut n: u64, p: u64) -> u32 {
    let mut v = 0;
    while n > 0 && n % p == 0 {
        n /= p;
        v += 1;
    }
    v
}

/// The level `n` from which `#{solutions mod pⁿ} / p²ⁿ` is constant for `k` (`v = v_p(k)`):
/// `max(v + 1, 3⌊v/3⌋ + n₀)` with `n₀ = 3` for `p = 3` and 1 otherwise (Hensel's lemma;
/// docs/heuristic.md §2).
pub fn stable_level(k: u64, p: u64) -> u32 {
    let v = valuation(k, p);
    let n0 = if p == 3 { 3 } else { 1 };
    (v + 1).max(3 * (v / 3) + n0)
}

/// σ_p by counting: `N(pⁿ)` for `n = 1, 2, …` until `n` has reached [`stable_level`] and
/// `N(pⁿ⁺¹) = p²·N(pⁿ)`. Returns `(n, N(pⁿ))` (the density is `N / p²ⁿ`), or `None` when the
/// modulus needed passes [`MAX_COUNT_MODULUS`].
pub fn density_by_counting(k: u64, p: u64) -> Option<(u32, u64)> {
    let need = stable_level(k, p);
    let mut n = 1u32;
    let mut m = p;
    let mut prev = count_mod(k % m, m)?;
    loop {
        let m2 = m.checked_mul(p)?;
        let next = count_mod(k % m2, m2)?;
        if n >= need && next == prev * p * p {
            return Some((n, prev));
        }
        n += 1;
        m = m2;
        prev = next;
    }
}

/// σ_p(k) for `k ≠ 0` (sign does not matter: `x ↦ −x`). `a` is [`gauss_a`]`(p)` for
/// `p ≡ 1 (mod 3)`, anything otherwise.
///
/// For `p | 3k` the count mod `pⁿ` is used when [`density_by_counting`] can reach it;
/// otherwise, and for every `p ∤ 3k`, Hensel's lemma reduces σ_p to counts of solutions mod
/// `p` (mod 27 for `p = 3`) with some coordinate prime to `p`, plus the solutions divisible by
/// `p`, which are those of `k / p³` scaled (docs/heuristic.md §2).
pub fn local_density(k: i64, p: u64, a: i64) -> f64 {
    let k = k.unsigned_abs();
    if k % p == 0 || p == 3 {
        if let Some((n, count)) = density_by_counting(k, p) {
            return count as f64 / (p as f64).powi(2 * n as i32);
        }
    }
    let mut total = 0.0;
    let mut k = k;
    loop {
        total += primitive_density(k, p, a);
        let p3 = p * p * p;
        if k == 0 || k % p3 != 0 {
            break;
        }
        k /= p3;
    }
    total
}

/// Density of solutions with some coordinate prime to `p` (stable at `n = 1`, or `n = 3` for
/// `p = 3`).
fn primitive_density(k: u64, p: u64, a: i64) -> f64 {
    if p == 3 {
        let all = count_mod(k % 27, 27).expect("27 is countable");
        let zero = if k % 27 == 0 { 9u64.pow(3) } else { 0 };
        return (all - zero) as f64 / 729.0;
    }
    let c = k % p;
    let n = points_mod_p(c, p, a) - u64::from(c == 0);
    n as f64 / (p as f64 * p as f64)
}

// ---------------------------------------------------------------------------------------
// Singular series
// ---------------------------------------------------------------------------------------

/// The primes up to a bound with [`gauss_a`] cached for those `≡ 1 (mod 3)`: build once,
/// evaluate `S(k)` for many `k`.
pub struct SeriesTable {
    bound: u64,
    /// `(p, A_p)` for `p ≡ 1 (mod 3)`; `A = 0` marks `p ≡ 2 mod 3` and `p = 3`.
    primes: Vec<(u64, i64)>,
}

/// The truncated Euler product of one `k`.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Series {
    /// `∏_{p ≤ P} σ_p(k)`.
    pub value: f64,
    /// `∏_{p ≤ P/10} σ_p(k)`: `value / at_tenth − 1` is how much the last decade moved it.
    pub at_tenth: f64,
    pub prime_bound: u64,
}

impl Series {
    /// Relative change over the last decade of primes, `value / at_tenth − 1`.
    pub fn last_decade_change(&self) -> f64 {
        self.value / self.at_tenth - 1.0
    }
}

impl SeriesTable {
    /// Primes up to `bound` (`10 ≤ bound ≤` [`MAX_PRIME_BOUND`], else an error message).
    pub fn new(bound: u64) -> Result<SeriesTable, String> {
        if !(10..=MAX_PRIME_BOUND).contains(&bound) {
            return Err(format!(
                "prime bound {bound} is outside the supported range 10 ..= {MAX_PRIME_BOUND}"
            ));
        }
        let primes = arith::primes_up_to(bound)
            .into_iter()
            .map(|p| (p, if p % 3 == 1 { gauss_a(p).unwrap() } else { 0 }))
            .collect();
        Ok(SeriesTable { bound, primes })
    }

    pub fn prime_bound(&self) -> u64 {
        self.bound
    }

    /// `S(k)` truncated at the table's bound; `k ≠ 0`.
    pub fn series(&self, k: i64) -> Series {
        let ak = k.unsigned_abs();
        let tenth = self.bound / 10;
        let mut value = 1.0f64;
        let mut at_tenth: Option<f64> = None;
        for &(p, a) in &self.primes {
            if p > tenth && at_tenth.is_none() {
                at_tenth = Some(value);
            }
            let s = if p != 3 && ak % p != 0 {
                if p % 3 == 2 {
                    continue; // σ_p = 1
                }
                let tr = if is_cube_unit(ak % p, p) { 2.0 } else { -1.0 };
                let pf = p as f64;
                1.0 + 3.0 * tr / pf - a as f64 / (pf * pf)
            } else {
                local_density(k, p, a)
            };
            value *= s;
        }
        Series {
            value,
            at_tenth: at_tenth.unwrap_or(value),
            prime_bound: self.bound,
        }
    }
}

// ---------------------------------------------------------------------------------------
// Real density
// ---------------------------------------------------------------------------------------

/// Gauss–Legendre nodes and weights on [−1, 1], 20 points (Newton on `P₂₀`).
fn gauss_legendre() -> &'static [(f64, f64)] {
    use std::sync::OnceLock;
    static NODES: OnceLock<Vec<(f64, f64)>> = OnceLock::new();
    NODES.get_or_init(|| {
        let n = 20usize;
        let mut out = Vec::with_capacity(n);
        for i in 0..n {
            let mut x = (std::f64::consts::PI * (i as f64 + 0.75) / (n as f64 + 0.5)).cos();
            let mut dp = 1.0;
            for _ in 0..100 {
                let (mut p0, mut p1) = (1.0f64, x);
                for j in 2..=n {
                    let p2 = ((2 * j - 1) as f64 * x * p1 - (j - 1) as f64 * p0) / j as f64;
                    p0 = p1;
                    p1 = p2;
                }
                dp = n as f64 * (x * p1 - p0) / (x * x - 1.0);
                let dx = p1 / dp;
                x -= dx;
                if dx.abs() < 1e-16 {
                    break;
                }
            }
            out.push((x, 2.0 / ((1.0 - x * x) * dp * dp)));
        }
        out
    })
}

fn gl(f: impl Fn(f64) -> f64, a: f64, b: f64) -> f64 {
    let (h, m) = ((b - a) / 2.0, (a + b) / 2.0);
    h * gauss_legendre()
        .iter()
        .map(|&(x, w)| w * f(m + h * x))
        .sum::<f64>()
}

/// Tanh–sinh quadrature of `f` on `[a, b]`; `f` is never evaluated at an endpoint, so
/// integrable endpoint singularities and kinks are harmless.
fn tanh_sinh(f: impl Fn(f64) -> f64, a: f64, b: f64) -> f64 {
    if b <= a {
        return 0.0;
    }
    let half = (b - a) / 2.0;
    let h = 1.0 / 32.0;
    let hp = std::f64::consts::FRAC_PI_2;
    let mut sum = hp * f(a + half); // t = 0: weight π/2
    for i in 1..=120 {
        let t = i as f64 * h;
        let u = hp * t.sinh();
        let w = hp * t.cosh() / (u.cosh() * u.cosh());
        let gap = half * 2.0 / ((2.0 * u).exp() + 1.0); // half·(1 − tanh u)
        if gap <= 0.0 || !w.is_finite() || w < 1e-300 {
            break;
        }
        sum += w * (f(a + gap) + f(b - gap));
    }
    sum * h * half
}

/// `F₁(a) = ∫₀ᵃ ds / (3(1 − s³)^{2/3})`, `0 ≤ a ≤ 1`, via `1 − s = u³` (smooth integrand).
fn f1(a: f64) -> f64 {
    let a = a.clamp(0.0, 1.0);
    let u0 = (1.0 - a).cbrt();
    gl(
        |u| {
            let s = 1.0 - u * u * u;
            (1.0 + s + s * s).powf(-2.0 / 3.0)
        },
        u0,
        1.0,
    )
}

/// `F₂(a) = ∫₀ᵃ ds / (3(1 + s³)^{2/3})`, `a ≥ 0` (`a = ∞` allowed): `F₂(a) = 2F₂(1) − F₂(1/a)`.
fn f2(a: f64) -> f64 {
    let base = |a: f64| gl(|s| (1.0 + s * s * s).powf(-2.0 / 3.0) / 3.0, 0.0, a);
    if a <= 1.0 {
        base(a.max(0.0))
    } else {
        2.0 * base(1.0) - base(1.0 / a)
    }
}

/// `G(r) = ∫ dw / (3|1 − w³|^{2/3})` over `|w| ≥ r`, `|1 − w³| ≥ r³` (docs/heuristic.md §3).
fn g_inner(r: f64) -> f64 {
    let a = if r > 0.0 { f2(1.0 / r) } else { 2.0 * f2(1.0) };
    let b = f1((1.0 + r * r * r).cbrt().recip());
    let c = if 2.0 * r * r * r <= 1.0 {
        f1((1.0 - r * r * r).cbrt()) - f1(r)
    } else {
        0.0
    };
    a + b + c
}

/// The inner integral at height `z` on `x³+y³+z³ = 1`: `|1 − z³|^{−1/3} · G(|z| / |1 − z³|^{1/3})`.
fn slice(z: f64) -> f64 {
    let c = 1.0 - z * z * z;
    if c == 0.0 {
        return 2.0 / 3.0; // the limit 2/(3|z|) at z = 1
    }
    let cr = c.abs().cbrt();
    g_inner(z.abs() / cr) / cr
}

/// `φ(w) = slice(w) + slice(−w)`, `w ≥ 0`.
fn phi(w: f64) -> f64 {
    slice(w) + slice(-w)
}

/// `(1/2)∫₀ᵗ φ`, for `t ≤ 64`, on pieces split at the kinks `3^{−1/3}` and 1.
fn j_direct(t: f64) -> f64 {
    let cuts = [0.0, 3f64.powf(-1.0 / 3.0), 1.0, 4.0, 16.0, 64.0];
    let mut total = 0.0;
    for w in cuts.windows(2) {
        if t <= w[0] {
            break;
        }
        total += tanh_sinh(phi, w[0], w[1].min(t));
    }
    total / 2.0
}

const T_SPLIT: f64 = 64.0;
const LOG_TAIL: f64 = 24.0;

/// `∫_{ln 64}^{ln 64 + x} (φ(eᵘ)eᵘ − 2·REAL_SLOPE) du` (the integrand decays like `e^{−3u}`).
fn tail_correction(x: f64) -> f64 {
    let l0 = T_SPLIT.ln();
    let h = |u: f64| {
        let z = u.exp();
        phi(z) * z - 2.0 * REAL_SLOPE
    };
    let mut total = 0.0;
    let mut lo = 0.0;
    for hi in [1.0, 3.0, 8.0, LOG_TAIL] {
        if x <= lo {
            break;
        }
        total += tanh_sinh(h, l0 + lo, l0 + hi.min(x));
        lo = hi;
    }
    total
}

fn cached() -> (f64, f64) {
    use std::sync::OnceLock;
    static C: OnceLock<(f64, f64)> = OnceLock::new();
    *C.get_or_init(|| (j_direct(T_SPLIT), tail_correction(LOG_TAIL)))
}

/// `J(t)`: one sixth of the real (Leray) measure `dy dz / |∂F/∂x|` of the points of
/// `x³ + y³ + z³ = 1` with `min(|x|,|y|,|z|) ≤ t` — the expected number of unordered solutions
/// with `min ≤ B` for `k` with `t = B/k^{1/3}` and `S(k) = 1`. Grows like `REAL_SLOPE · ln t`.
pub fn real_density(t: f64) -> f64 {
    if t.is_nan() || t <= 0.0 {
        return 0.0;
    }
    if t <= T_SPLIT {
        return j_direct(t);
    }
    let (j64, tail_all) = cached();
    let x = (t / T_SPLIT).ln();
    let corr = if x >= LOG_TAIL {
        tail_all
    } else {
        tail_correction(x)
    };
    j64 + REAL_SLOPE * x + corr / 2.0
}

/// `dJ/d(ln t)`: the expected solutions per unit of `ln B` at `t` when `S(k) = 1`.
pub fn real_density_slope(t: f64) -> f64 {
    if t.is_nan() || t <= 0.0 {
        return 0.0;
    }
    if t > 1e6 {
        return REAL_SLOPE;
    }
    t * phi(t) / 2.0
}

// ---------------------------------------------------------------------------------------
// Predictions and cost
// ---------------------------------------------------------------------------------------

/// What the model expects of one target.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Prediction {
    pub k: i64,
    pub series: Series,
    /// Expected unordered solutions with `min ≤ bound`.
    pub expected_total: f64,
    /// Expected unordered solutions with `from < min ≤ bound`.
    pub expected_new: f64,
    /// Decimal digits the bound must grow, at `bound`, per further expected solution.
    pub digits_per_solution: f64,
}

/// `S(k) · J(B / |k|^{1/3})` and friends. `from = 0` means the whole target.
pub fn predict(table: &SeriesTable, k: i64, from: u64, bound: u64) -> Prediction {
    let series = table.series(k);
    let s = series.value;
    let scale = (k.unsigned_abs() as f64).cbrt();
    let at = |b: u64| {
        if b == 0 {
            0.0
        } else {
            s * real_density(b as f64 / scale)
        }
    };
    let total = at(bound);
    let new = (total - at(from)).max(0.0);
    let per_ln = s * real_density_slope(bound as f64 / scale);
    let digits = if per_ln > 0.0 {
        1.0 / (per_ln * std::f64::consts::LN_10)
    } else {
        f64::INFINITY
    };
    Prediction {
        k,
        series,
        expected_total: total,
        expected_new: new,
        digits_per_solution: digits,
    }
}

/// Seconds of one reference core to search `k` over `(from, bound]` (`from = 0`: the whole
/// target), from [`kernel::estimate_seconds`] over each region's domain with `z_lo` raised to
/// the domain's `z_hi` at `from` — the same parts the coordinator's planner tiles.
pub fn search_seconds(k: i64, from: u64, bound: u64) -> f64 {
    let mut total = 0.0;
    for region in Region::ALL {
        let Some(mut rect) = kernel::domain(k, bound, region) else {
            continue;
        };
        if from > 0 {
            if let Some(old) = kernel::domain(k, from, region) {
                rect.z_lo = rect.z_lo.max(old.z_hi);
            }
        }
        if rect.z_lo >= rect.z_hi {
            continue;
        }
        total += kernel::estimate_seconds(k, &rect).max(0.0);
    }
    total
}

/// Seconds in a year of 365.25 days.
pub const SECONDS_PER_YEAR: f64 = 365.25 * 86400.0;

// ---------------------------------------------------------------------------------------
// Found versus expected
// ---------------------------------------------------------------------------------------

/// Probabilities `P(N = n)` of a Poisson variable with mean `lambda`, for `n` in `lo..=hi`.
fn poisson_pmf_window(lambda: f64, lo: u64, hi: u64) -> Vec<f64> {
    // Start from the mode, where ln P is computed with ln Γ; step outward by ratios.
    let mode = (lambda.floor() as u64).clamp(lo, hi);
    let ln_fact = |n: u64| -> f64 {
        if n < 30 {
            (1..=n).map(|i| (i as f64).ln()).sum()
        } else {
            let x = n as f64 + 1.0;
            // Stirling series for ln Γ(x)
            (x - 0.5) * x.ln() - x + 0.5 * (2.0 * std::f64::consts::PI).ln() + 1.0 / (12.0 * x)
                - 1.0 / (360.0 * x.powi(3))
                + 1.0 / (1260.0 * x.powi(5))
        }
    };
    let p_mode = if lambda == 0.0 {
        if mode == 0 {
            1.0
        } else {
            0.0
        }
    } else {
        (mode as f64 * lambda.ln() - lambda - ln_fact(mode)).exp()
    };
    let mut out = vec![0.0; (hi - lo + 1) as usize];
    out[(mode - lo) as usize] = p_mode;
    let mut p = p_mode;
    for n in (lo..mode).rev() {
        p *= (n + 1) as f64 / lambda;
        out[(n - lo) as usize] = p;
    }
    p = p_mode;
    for n in mode + 1..=hi {
        p *= lambda / n as f64;
        out[(n - lo) as usize] = p;
    }
    out
}

/// Largest mean [`poisson_interval`] accepts.
pub const MAX_POISSON_MEAN: f64 = 1e12;

/// The central interval `[lo, hi]` of counts for a Poisson variable with mean `expected`:
/// `lo` is the largest `n` with `P(N < n) ≤ (1 − level)/2`, `hi` the smallest with
/// `P(N > hi) ≤ (1 − level)/2`, so `P(lo ≤ N ≤ hi) ≥ level`. Errors on a mean outside
/// `[0, 10¹²]` or a level outside `(0, 1)`.
pub fn poisson_interval(expected: f64, level: f64) -> Result<(u64, u64), String> {
    if !(expected.is_finite() && (0.0..=MAX_POISSON_MEAN).contains(&expected)) {
        return Err(format!(
            "expected count {expected} must be a finite number in [0, {MAX_POISSON_MEAN:e}]"
        ));
    }
    if !(level > 0.0 && level < 1.0) {
        return Err(format!("level {level} must lie strictly between 0 and 1"));
    }
    let tail = (1.0 - level) / 2.0;
    let sd = expected.sqrt();
    let lo_w = (expected - 12.0 * sd - 40.0).max(0.0) as u64;
    let hi_w = (expected + 12.0 * sd + 40.0).ceil() as u64;
    let pmf = poisson_pmf_window(expected, lo_w, hi_w);
    let mut below = 0.0; // P(N < n)
    let mut lo = lo_w;
    for (i, &p) in pmf.iter().enumerate() {
        if below + p > tail {
            lo = lo_w + i as u64;
            break;
        }
        below += p;
    }
    let mut above = 0.0; // P(N > n)
    let mut hi = hi_w;
    for (i, &p) in pmf.iter().enumerate().rev() {
        if above + p > tail {
            hi = lo_w + i as u64;
            break;
        }
        above += p;
    }
    Ok((lo, hi))
}

/// Where a found count sits against the model.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Verdict {
    /// Fewer than the interval's lower end.
    Fewer,
    /// Inside the interval.
    AsExpected,
    /// More than the interval's upper end.
    More,
}

/// Found versus expected for one target (or a sum of targets) at one confidence level.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize)]
pub struct FoundVsExpected {
    pub found: u64,
    pub expected: f64,
    pub level: f64,
    /// [`poisson_interval`] of `expected` at `level`.
    pub low: u64,
    pub high: u64,
    pub verdict: Verdict,
}

impl FoundVsExpected {
    pub fn new(found: u64, expected: f64, level: f64) -> Result<FoundVsExpected, String> {
        let (low, high) = poisson_interval(expected, level)?;
        let verdict = if found < low {
            Verdict::Fewer
        } else if found > high {
            Verdict::More
        } else {
            Verdict::AsExpected
        };
        Ok(FoundVsExpected {
            found,
            expected,
            level,
            low,
            high,
            verdict,
        })
    }
}

// ---------------------------------------------------------------------------------------
// Parametric families
// ---------------------------------------------------------------------------------------

/// A polynomial family of solutions, which the density model does not count.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Family {
    /// `k = 1`: `(9t⁴, 3t − 9t⁴, 1 − 9t³)` (Mahler 1936).
    Mahler,
    /// `k = 2`: `(1 + 6t³, 1 − 6t³, −6t²)` (Verebrusov 1908).
    Verebrusov,
}

impl Family {
    /// The member of the family at parameter `t`, in big integers.
    pub fn member(self, t: &Integer) -> [Integer; 3] {
        match self {
            Family::Mahler => {
                let t3 = Integer::from(t.pow(3u32));
                let t4 = Integer::from(&t3 * t);
                [
                    Integer::from(9 * &t4),
                    Integer::from(3 * t) - Integer::from(9 * &t4),
                    1 - Integer::from(9 * &t3),
                ]
            }
            Family::Verebrusov => {
                let t2 = Integer::from(t.pow(2u32));
                let t3 = Integer::from(&t2 * t);
                [
                    1 + Integer::from(6 * &t3),
                    1 - Integer::from(6 * &t3),
                    Integer::from(-6 * &t2),
                ]
            }
        }
    }

    pub fn k(self) -> i64 {
        match self {
            Family::Mahler => 1,
            Family::Verebrusov => 2,
        }
    }
}

/// Exact integer cube root of `n`, if `n` is a cube.
fn exact_cbrt(n: &Integer) -> Option<Integer> {
    let r = Integer::from(n.root_ref(3));
    // root_ref truncates toward zero for negative n as well
    (Integer::from((&r).pow(3u32)) == *n).then_some(r)
}

/// The family a solution of `x³ + y³ + z³ = k` belongs to, if any (only `k = 1, 2` have one
/// here). Every coordinate is tried as the family's third entry, from which `t` is recovered
/// exactly, and the other two are compared as a set.
pub fn family_of(k: i64, s: &Solution) -> Option<Family> {
    let fam = match k {
        1 => Family::Mahler,
        2 => Family::Verebrusov,
        _ => return None,
    };
    let v: Vec<Integer> = s.0.iter().map(|&c| Integer::from(c)).collect();
    for i in 0..3 {
        let third = &v[i];
        let ts: Vec<Integer> = match fam {
            // 1 − 9t³ = c  ⇒  t³ = (1 − c)/9
            Family::Mahler => {
                let num = Integer::from(1 - third);
                if !num.is_divisible_u(9) {
                    continue;
                }
                exact_cbrt(&Integer::from(num / 9u32)).into_iter().collect()
            }
            // −6t² = c  ⇒  t² = −c/6, t = ±√
            Family::Verebrusov => {
                let num = Integer::from(-third);
                if num < 0 || !num.is_divisible_u(6) {
                    continue;
                }
                let q = Integer::from(num / 6u32);
                let r = Integer::from(q.sqrt_ref());
                if Integer::from(r.square_ref()) != q {
                    continue;
                }
                vec![r.clone(), -r]
            }
        };
        let (a, b) = (&v[(i + 1) % 3], &v[(i + 2) % 3]);
        for t in ts {
            let m = fam.member(&t);
            if (m[0] == *a && m[1] == *b) || (m[0] == *b && m[1] == *a) {
                return Some(fam);
            }
        }
    }
    None
}
