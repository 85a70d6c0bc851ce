//! The kernel's public surface: target and rectangle checks, region geometry, cost model.

use cubehunt_common::kernel::{self, KernelError};
use cubehunt_common::{Rect, Region};
use rug::{ops::Pow, Integer};

#[test]
fn targets_are_refused_for_the_right_reasons() {
    // Cubes are 0, ±1 mod 9, so three of them never sum to ±4 mod 9 (common practice).
    for k in [4i64, 5, 13, -4, -5, 1_000_003] {
        assert!(
            matches!(
                kernel::check_target(k),
                Err(KernelError::NoSolutionsMod9 { .. })
            ),
            "{k}"
        );
    }
    assert!(matches!(
        kernel::check_target(-13),
        Err(KernelError::NoSolutionsMod9 { r: -4, .. })
    ));
    for (k, c) in [(1i64, 1i64), (8, 2), (-27, -3), (1 << 39, 1 << 13)] {
        assert_eq!(kernel::check_target(k), Err(KernelError::Cube { k, c }));
        assert!(kernel::check_target_allowing_cube(k).is_ok());
    }
    assert_eq!(kernel::check_target(0), Err(KernelError::Zero));
    assert_eq!(
        kernel::check_target((1 << 40) + 3),
        Err(KernelError::KOutOfRange((1 << 40) + 3))
    );
    assert_eq!(kernel::check_target(33).unwrap().z0, 5);
    assert_eq!(kernel::check_target(-42).unwrap().z0, 6);
    assert!(kernel::check_bound(0).is_err() && kernel::check_bound(kernel::MAX_Z + 1).is_err());
    assert!(kernel::check_bound(1).is_ok() && kernel::check_bound(kernel::MAX_Z).is_ok());
}

#[test]
fn domains_tile_the_search_exactly() {
    for (k, bound) in [
        (3i64, 1u64),
        (3, 4),
        (33, 5),
        (33, 6),
        (42, 1_000_000),
        (3, kernel::MAX_Z),
    ] {
        let z0 = kernel::z0(k);
        let s = kernel::domain(k, bound, Region::Small).unwrap();
        assert_eq!((s.z_lo, s.z_hi), (0, z0.min(bound)));
        let e = kernel::domain(k, bound, Region::Equal);
        let m = kernel::domain(k, bound, Region::Main);
        if bound <= z0 {
            assert!(e.is_none() && m.is_none());
            continue;
        }
        assert_eq!(e.map(|r| (r.z_lo, r.z_hi)), Some((z0, bound)));
        if let Some(m) = m {
            // d_hi is the least d with d > αB, α = ∛2 − 1: (d + B)³ > 2B³ (exact check).
            let ok = |d: u64| {
                Integer::from(d + bound).pow(3) > Integer::from(2) * Integer::from(bound).pow(3)
            };
            assert!(ok(m.d_hi) && !ok(m.d_hi - 1), "k={k} B={bound}");
            assert_eq!((m.d_lo, m.z_lo, m.z_hi), (1, z0, bound));
            assert!(kernel::check_rect(k, &m).is_ok());
        }
    }
}

#[test]
fn rectangles_outside_their_region_are_refused() {
    let r = |region, d_lo, d_hi, z_lo, z_hi| Rect {
        region,
        d_lo,
        d_hi,
        z_lo,
        z_hi,
    };
    use Region::*;
    let good = [
        r(Small, 0, 0, 0, 5),
        r(Small, 0, 0, 2, 5),
        r(Equal, 0, 0, 5, 6),
        r(Main, 1, 2, 5, 1 << 62),
        r(Main, 10, 20, 40, 50),
    ];
    for g in good {
        assert!(kernel::check_rect(33, &g).is_ok(), "{g}");
    }
    let bad = [
        r(Small, 0, 0, 0, 6),
        r(Small, 0, 1, 0, 5),
        r(Small, 0, 0, 3, 3),
        r(Equal, 0, 0, 4, 9),
        r(Equal, 1, 2, 5, 9),
        r(Main, 0, 2, 5, 9),
        r(Main, 3, 3, 5, 9),
        r(Main, 1, 2, 4, 9),
        r(Main, 1, 2, 9, 9),
        r(Main, 1, 2, 5, kernel::MAX_Z + 1),
        r(Main, 1, (1 << 63) + 1, 5, 9),
        r(Main, 20, 30, 5, 50), // every point has d ≥ α|z|
    ];
    for b in bad {
        assert!(
            matches!(kernel::check_rect(33, &b), Err(KernelError::BadRect { .. })),
            "{b}"
        );
    }
    assert!(kernel::check_rect(8, &good[0]).is_err());
    assert!(kernel::check_rect_allowing_cube(8, &r(Small, 0, 0, 0, 2)).is_ok());
}

#[test]
fn cost_model_is_cheap_positive_and_grows() {
    let t = std::time::Instant::now();
    for k in [3i64, 33, 1 << 39 | 1] {
        let mut last = 0.0;
        for b in [1e3, 1e6, 1e9, 1e12, 1e15, 9e18] {
            let b = b as u64;
            let total: f64 = kernel::domains(k, b)
                .iter()
                .map(|r| kernel::estimate_seconds(k, r))
                .sum();
            assert!(
                total.is_finite() && total > 0.0 && total >= last,
                "k={k} B={b}: {total}"
            );
            last = total;
        }
    }
    assert!(t.elapsed().as_secs_f64() < 2.0);
}
