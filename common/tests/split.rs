//! Composability of the digest (docs/method.md, "The digest"): any split of a rectangle gives the
//! same solutions and the same combined digest as the whole, and the thread count changes
//! nothing. Common practice, no source.

use cubehunt_common::kernel;
use cubehunt_common::{Digest, Rect, Region, Solution};

/// Deterministic pseudo-random cut points strictly inside (lo, hi).
fn cuts(lo: u64, hi: u64, n: usize, seed: &mut u64) -> Vec<u64> {
    let mut v = vec![lo, hi];
    for _ in 0..n {
        *seed = seed
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        if hi - lo > 1 {
            v.push(lo + 1 + (*seed >> 33) % (hi - lo - 1));
        }
    }
    v.sort();
    v.dedup();
    v
}

fn pieces(k: i64, r: &Rect, seed: &mut u64) -> Vec<Rect> {
    let zc = cuts(r.z_lo, r.z_hi, 5, seed);
    let dc = if r.region == Region::Main {
        cuts(r.d_lo, r.d_hi, 4, seed)
    } else {
        vec![0, 0]
    };
    let mut out = vec![];
    for dw in dc.windows(2) {
        for zw in zc.windows(2) {
            let p = Rect {
                d_lo: dw[0],
                d_hi: dw[1],
                z_lo: zw[0],
                z_hi: zw[1],
                ..*r
            };
            // A main tile with no point of the region is refused; it holds no work.
            if r.region == Region::Main && kernel::main_z_floor(p.d_lo) >= p.z_hi {
                assert!(kernel::check_rect(k, &p).is_err());
                continue;
            }
            out.push(p);
        }
    }
    out
}

#[test]
fn any_split_gives_the_same_solutions_and_digest_and_threads_do_not_matter() {
    let mut seed = 12345u64;
    for (k, bound) in [
        (3i64, 3000u64),
        (501, 3000),
        (-42, 2000),
        (33, 2500),
        (1, 1500),
    ] {
        for whole in kernel::domains(k, bound) {
            let one = kernel::scan(k, &whole, 1, &|_| {}).unwrap();
            let two = kernel::scan(k, &whole, 2, &|_| {}).unwrap();
            assert_eq!(one, two, "k={k} {whole}: 1 vs 2 threads");
            assert_eq!(one.digest.candidates, kernel::candidates(k, &whole));
            for _round in 0..3 {
                let mut dg = Digest::ZERO;
                let mut sols: Vec<Solution> = vec![];
                for p in pieces(k, &whole, &mut seed) {
                    let o = kernel::scan(k, &p, 2, &|_| {}).unwrap();
                    assert_eq!(o.digest.candidates, kernel::candidates(k, &p));
                    dg.add_assign(&o.digest);
                    sols.extend(o.solutions);
                }
                sols.sort();
                sols.dedup();
                assert_eq!(dg, one.digest, "k={k} {whole}: split digest");
                assert_eq!(sols, one.solutions, "k={k} {whole}: split solutions");
            }
        }
    }
}

#[test]
fn progress_reports_add_up_to_the_candidates() {
    use std::sync::atomic::{AtomicU64, Ordering};
    for rect in kernel::domains(501, 2000) {
        let done = AtomicU64::new(0);
        let out = kernel::scan(501, &rect, 2, &|n| {
            done.fetch_add(n, Ordering::Relaxed);
        })
        .unwrap();
        assert_eq!(
            done.load(Ordering::Relaxed),
            out.digest.candidates,
            "{rect}"
        );
    }
}
