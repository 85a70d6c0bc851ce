//! Every region together against a brute-force box: for every admissible k ≤ 100 (cubes
//! included, non-trivial solutions only), the solutions with max(|x|, |y|, |z|) ≤ N are exactly
//! those a full search up to bound N finds inside the box. Source: brute force.

use cubehunt_common::kernel;
use cubehunt_common::Solution;
use std::collections::{BTreeMap, BTreeSet};

const N: i128 = 3000;
const KMAX: i128 = 100;

/// ⌊∛v⌋ for any sign, exactly.
fn floor_cbrt(v: i128) -> i128 {
    let mut r = (v as f64).cbrt().round() as i128;
    while r * r * r > v {
        r -= 1;
    }
    while (r + 1) * (r + 1) * (r + 1) <= v {
        r += 1;
    }
    r
}

fn trivial(s: &Solution) -> bool {
    let [a, b, c] = s.0;
    a + b == 0 || a + c == 0 || b + c == 0
}

/// All non-trivial triples with max ≤ N and 1 ≤ x³ + y³ + z³ ≤ KMAX, keyed by k.
fn brute_box() -> BTreeMap<i64, BTreeSet<Solution>> {
    let mut out: BTreeMap<i64, BTreeSet<Solution>> = BTreeMap::new();
    for x in -N..=N {
        for y in x..=N {
            let s = x * x * x + y * y * y;
            // z³ ∈ [1 − s, KMAX − s]
            let mut z = floor_cbrt(1 - s - 1) + 1; // least z with z³ ≥ 1 − s
            let zmax = floor_cbrt(KMAX - s);
            while z <= zmax {
                if z.abs() <= N {
                    let sol = Solution::new(x, y, z);
                    if !trivial(&sol) {
                        out.entry((s + z * z * z) as i64).or_default().insert(sol);
                    }
                }
                z += 1;
            }
        }
    }
    out
}

#[test]
fn every_box_solution_is_found_and_nothing_found_in_the_box_is_missing() {
    let boxed = brute_box();
    let mut searched = 0;
    for k in 1..=KMAX as i64 {
        if kernel::check_target_allowing_cube(k).is_err() {
            assert!(
                !boxed.contains_key(&k),
                "brute force found a solution for refused k = {k}"
            );
            continue;
        }
        searched += 1;
        let out = kernel::solve(k, N as u64, 0, &|_| {}).unwrap();
        let found_in_box: BTreeSet<Solution> = out
            .solutions
            .iter()
            .copied()
            .filter(|s| s.0.iter().all(|v| v.abs() <= N))
            .collect();
        let want = boxed.get(&k).cloned().unwrap_or_default();
        assert_eq!(found_in_box, want, "k = {k}");
        for s in &out.solutions {
            assert!(s.verify(k) && s.min_abs() <= N as u128 && !trivial(s));
        }
    }
    assert_eq!(searched, 78);
    // The box is not empty: e.g. k = 3 has (1,1,1) and (4,4,−5) (common practice, no source).
    assert!(
        boxed[&3].contains(&Solution::new(4, 4, -5)) && boxed[&3].contains(&Solution::new(1, 1, 1))
    );
}
