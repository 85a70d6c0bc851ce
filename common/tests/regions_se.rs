//! The small-z and equal-pair regions against their naive paths (same mathematics, no
//! factoring, no continued fractions), and explicit equal-pair solutions.

use cubehunt_common::kernel::{self, naive_se};
use cubehunt_common::{Rect, Region, Solution};

fn admissible(k: i64) -> bool {
    kernel::check_target_allowing_cube(k).is_ok()
}

fn sorted(mut v: Vec<Solution>) -> Vec<Solution> {
    v.retain(|s| {
        let [a, b, c] = s.0;
        a + b != 0 && a + c != 0 && b + c != 0
    });
    v.sort();
    v.dedup();
    v
}

#[test]
fn small_region_matches_trial_division_digest_and_solutions() {
    // Reference: trial division of k − z³ by every a ≤ ∛(4|n|) (naive_se), no source needed.
    let ks: Vec<i64> = (1..=400)
        .chain([1_000_003, 123_456_789, 987_654_321_000])
        .filter(|&k| admissible(k))
        .collect();
    for k in ks {
        let rect = kernel::domain(k, u64::MAX >> 1, Region::Small).unwrap();
        // Keep the naive side affordable for the large k: the first 40 |z| only.
        let rect = Rect {
            z_hi: rect.z_hi.min(40),
            ..rect
        };
        let fast = kernel::scan(k, &rect, 1, &|_| {}).unwrap();
        let (dg, sols) = naive_se::scan_small_naive(k, &rect);
        assert_eq!(fast.digest, dg, "k={k}");
        assert_eq!(fast.solutions, sorted(sols), "k={k}");
        assert_eq!(kernel::candidates(k, &rect), dg.candidates);
    }
}

#[test]
fn equal_region_matches_brute_force_far_above_z1() {
    // Reference: brute force over every z (naive_se), including |z| > Z1 where the fast path
    // visits only multiples of convergent denominators of ∛2 (Legendre's theorem).
    for k in (1..=150).chain([1001, 2005]).filter(|&k| admissible(k)) {
        let z0 = kernel::z0(k);
        let rect = Rect {
            region: Region::Equal,
            d_lo: 0,
            d_hi: 0,
            z_lo: z0,
            z_hi: 60_000,
        };
        let fast = kernel::scan(k, &rect, 1, &|_| {}).unwrap();
        let naive = sorted(naive_se::scan_equal_naive(k, &rect));
        assert_eq!(fast.solutions, naive, "k={k}");
        assert_eq!(
            kernel::candidates(k, &rect),
            fast.digest.candidates,
            "k={k}"
        );
    }
}

#[test]
fn equal_region_finds_convergent_solutions_above_z1() {
    // Computed here (no source): the convergents 5/4 and 63/50 of ∛2 give
    // (−5)³ + 2·4³ = 3 and 63³ + 2·(−50)³ = 47; in both |z| > Z1 = ⌊10k/19⌋, so only the
    // convergent path can find them. Exact arithmetic confirms each triple.
    for (k, x, z) in [(3i64, -5i128, 4i128), (47, 63, -50)] {
        let s = Solution::new(x, z, z);
        assert!(s.verify(k));
        assert!(z.unsigned_abs() as u64 > kernel::z1(k));
        let rect = kernel::domain(k, 1 << 62, Region::Equal).unwrap();
        let out = kernel::scan(k, &rect, 2, &|_| {}).unwrap();
        assert!(out.solutions.contains(&s), "k={k}: {:?}", out.solutions);
        // The same with k negated: every coordinate negated.
        let neg = kernel::scan(-k, &rect, 1, &|_| {}).unwrap();
        assert!(neg.solutions.contains(&Solution::new(-x, -z, -z)));
        assert_eq!(neg.digest, out.digest);
    }
}

#[test]
fn equal_region_reaches_the_top_of_the_range_cheaply() {
    // |z| up to 2⁶³ − 1: about 40 convergents, every test exact in big integers.
    let rect = kernel::domain(3, kernel::MAX_Z, Region::Equal).unwrap();
    let c = kernel::candidates(3, &rect);
    assert!(c < 200, "{c}");
    let out = kernel::scan(3, &rect, 1, &|_| {}).unwrap();
    assert_eq!(out.digest.candidates, c);
    assert!(out.solutions.contains(&Solution::new(-5, 4, 4)));
}
