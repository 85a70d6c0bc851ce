//! Published solutions and parametric families, found again by the kernel.
//! Every recalled value is confirmed by exact (GMP) arithmetic before it is searched for.

use cubehunt_common::kernel;
use cubehunt_common::{Rect, Region, Solution};

fn sol(v: [i128; 3]) -> Solution {
    Solution::new(v[0], v[1], v[2])
}

#[test]
fn mahler_family_for_k_1() {
    // K. Mahler, "Note on hypothesis K of Hardy and Littlewood", J. London Math. Soc. 11 (1936):
    // (9t⁴)³ + (3t − 9t⁴)³ + (1 − 9t³)³ = 1 (from memory; checked exactly for each t below).
    // k = 1 is a cube: the search runs for non-trivial solutions only.
    let bound = 10_000u64;
    let out = kernel::solve(1, bound, 0, &|_| {}).unwrap();
    let mut members = 0;
    for t in -20i128..=20 {
        if t == 0 {
            continue; // (0, 0, 1): trivial
        }
        let s = sol([9 * t.pow(4), 3 * t - 9 * t.pow(4), 1 - 9 * t.pow(3)]);
        assert!(s.verify(1), "t={t}");
        if s.min_abs() <= bound as u128 {
            members += 1;
            assert!(out.solutions.contains(&s), "Mahler t={t}: {s} missing");
        }
    }
    assert_eq!(members, 20); // |t| ≤ 10
}

#[test]
fn verebrusov_family_for_k_2() {
    // A. S. Verebrusov (1908): (1 + 6t³)³ + (1 − 6t³)³ + (−6t²)³ = 2 (from memory; checked
    // exactly for each t below).
    let bound = 100_000u64;
    let out = kernel::solve(2, bound, 0, &|_| {}).unwrap();
    let mut members = 0;
    for t in 0i128..=200 {
        let s = sol([1 + 6 * t.pow(3), 1 - 6 * t.pow(3), -6 * t.pow(2)]);
        assert!(s.verify(2), "t={t}");
        if s.min_abs() <= bound as u128 {
            members += 1;
            assert!(out.solutions.contains(&s), "Verebrusov t={t}: {s} missing");
        }
    }
    assert_eq!(members, 130); // 0 ≤ t ≤ 129
}

#[test]
fn smallest_solutions_of_small_k_by_full_runs() {
    // From memory of published tables of small solutions of x³ + y³ + z³ = k (the triple for
    // 39 is the one reported by Heath-Brown, Lioen and te Riele, Math. Comp. 61 (1993)); each
    // is confirmed exactly, then a full search to just above its smallest coordinate finds it.
    let table: [(i64, [i128; 3]); 5] = [
        (12, [7, 10, -11]),
        (16, [-511, -1609, 1626]),
        (51, [602, 659, -796]),
        (80, [69241, 103532, -112969]),
        (39, [117367, 134476, -159380]),
    ];
    for (k, v) in table {
        let s = sol(v);
        assert!(s.verify(k), "k={k}");
        let bound = s.min_abs() as u64 + 1;
        let out = kernel::solve(k, bound, 0, &|_| {}).unwrap();
        assert!(
            out.solutions.contains(&s),
            "k={k}: {s} not found up to {bound}: {:?}",
            out.solutions
        );
    }
}

/// A narrow main-region rectangle around a published solution, searched blind: it is built
/// from d = |x + y| of the two larger coordinates and |z| of the smallest, widened by `c` and
/// `w`, and the kernel is not told the solution.
fn narrow_scan(k: i64, v: [i128; 3], c: u64, w: u64) {
    let s = sol(v);
    assert!(
        s.verify(k),
        "recalled triple for k={k} fails exact verification"
    );
    let mut by_abs = v;
    by_abs.sort_by_key(|a| std::cmp::Reverse(a.unsigned_abs()));
    let d = (by_abs[0] + by_abs[1]).unsigned_abs() as u64;
    let z = by_abs[2].unsigned_abs() as u64;
    let rect = Rect {
        region: Region::Main,
        d_lo: d - c,
        d_hi: d + c,
        z_lo: z.saturating_sub(w).max(kernel::z0(k)),
        z_hi: z + w,
    };
    let out = kernel::scan(k, &rect, 2, &|_| {}).unwrap();
    assert!(out.solutions.contains(&s), "k={k}: {s} not found in {rect}");
    assert_eq!(out.digest.candidates, kernel::candidates(k, &rect));
}

#[test]
fn booker_2019_blind_narrow_scans() {
    // A. R. Booker, "Cracking the problem with 33", Research in Number Theory 5 (2019), art. 26
    // (k = 33; k = 795 from the same paper) — values from memory, confirmed exactly.
    narrow_scan(
        33,
        [8866128975287528, -8778405442862239, -2736111468807040],
        20,
        1000,
    );
    narrow_scan(
        795,
        [-14219049725358227, 14197965759741571, 2337348783323923],
        20,
        1000,
    );
}

#[test]
fn booker_sutherland_2021_blind_narrow_scans() {
    // A. R. Booker and A. V. Sutherland, "On a question of Mordell", PNAS 118 (2021), no. 11
    // (k = 3 and 42), and the further solutions of that search for 165, 579, 906 — from memory,
    // confirmed exactly. For k = 579, |z| ≈ 6.9·10¹⁸ is near the top of the supported range.
    narrow_scan(
        42,
        [-80538738812075974, 80435758145817515, 12602123297335631],
        20,
        1000,
    );
    narrow_scan(
        3,
        [
            569936821221962380720,
            -569936821113563493509,
            -472715493453327032,
        ],
        20,
        1000,
    );
    narrow_scan(
        165,
        [-385495523231271884, 383344975542639445, 98422560467622814],
        20,
        1000,
    );
    narrow_scan(
        579,
        [
            143075750505019222645,
            -143070303858622169975,
            -6941531883806363291,
        ],
        20,
        1000,
    );
    narrow_scan(
        906,
        [-74924259395610397, 72054089679353378, 35961979615356503],
        20,
        1000,
    );
}

#[test]
fn beck_pine_tarrant_yarbrough_jensen_2007_k_30() {
    // M. Beck, E. Pine, W. Tarrant, K. Yarbrough Jensen, "New integer representations as the
    // sum of three cubes", Math. Comp. 76 (2007) — from memory, confirmed exactly.
    narrow_scan(
        30,
        [-283059965, -2218888517, 2220422932],
        50_000,
        10_000_000,
    );
}
