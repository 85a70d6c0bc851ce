//! A whole campaign on loopback: one coordinator and three workers of distinct owners, as
//! real processes on real sockets, for targets whose solutions in range are known.

use cubehunt_common::Solution;
use cubehunt_tests::*;
use std::collections::BTreeSet;
use std::time::{Duration, Instant};

/// Fast service settings for tests: idle workers ask again after 1 s.
pub const SERVE: &[&str] = &["--retry-after-s", "1", "--sweep-s", "1"];

fn set(v: &[(i128, i128, i128)]) -> BTreeSet<Solution> {
    v.iter().map(|&(a, b, c)| Solution::new(a, b, c)).collect()
}

#[test]
fn three_workers_settle_a_campaign_with_exactly_the_known_solutions() {
    let _g = serial();
    let t0 = Instant::now();
    let tmp = tempfile::tempdir().unwrap();
    let coord = Coordinator::start(tmp.path(), SERVE).unwrap();
    const BOUND: u64 = 2000;
    let created = coord
        .create_campaign("loopback", "2,3", &BOUND.to_string(), 0.01)
        .unwrap();
    let units = created["units"]["total"].as_i64().unwrap();
    assert!(
        units >= 6,
        "want several units per target to exercise leasing, got {units}: {created}"
    );

    let workers: Vec<Worker> = ["ada", "bert", "chiara"]
        .iter()
        .map(|o| Worker::start(tmp.path(), &coord.url(), o, &[]).unwrap())
        .collect();
    let view = coord
        .wait_complete("loopback", Duration::from_secs(150))
        .unwrap_or_else(|e| {
            for w in &workers {
                eprintln!("--- worker {}:\n{}", w.owner, w.log_text());
            }
            panic!("{e:#}\n--- coordinator:\n{}", coord.log_text());
        });
    let u = &view["units"];
    assert_eq!(u["settled"], u["total"], "every unit settled: {view}");
    assert_eq!(u["total"].as_i64(), Some(units));
    assert_eq!(
        u["disputed"].as_i64(),
        Some(0),
        "honest workers never disagree: {view}"
    );

    // k = 3: (1, 1, 1) and (4, 4, −5) are the only solutions with min ≤ 2000; the next one
    // known has min ≈ 4.7·10¹⁷ (A. R. Booker and A. V. Sutherland, "On a question of Mordell",
    // PNAS 118 (2021)). Values from memory, each confirmed below in exact arithmetic.
    let k3 = set(&[(1, 1, 1), (4, 4, -5)]);
    // k = 2: (0, 1, 1) and the family (1 + 6t³, 1 − 6t³, −6t²) (Verebrusov, 1908; from
    // memory), with 6t² ≤ 2000, i.e. t = 1..18. No other solution of k = 2 with min ≤ 2000 is
    // known (the next, 1214928³ + 3480205³ − 3528875³, has min 1214928; from memory).
    let mut k2 = set(&[(0, 1, 1)]);
    for t in 1..=18i128 {
        k2.insert(Solution::new(
            1 + 6 * t * t * t,
            1 - 6 * t * t * t,
            -6 * t * t,
        ));
    }
    for s in &k3 {
        assert!(s.verify(3), "{s}");
    }
    for s in &k2 {
        assert!(s.verify(2), "{s}");
        assert!(s.min_abs() <= BOUND as u128);
    }
    assert_eq!(target_solutions(&view, 3), k3, "k = 3: {view}");
    assert_eq!(target_solutions(&view, 2), k2, "k = 2: {view}");
    let mut all = k2.clone();
    all.extend(k3.iter().copied());
    assert_eq!(view_solutions(&view), all);

    // Cross-checks independent of the memory above: a brute-force box (every solution with
    // max ≤ 400 has min ≤ 2000, so it must be stored), and the kernel run here in one piece.
    for (k, stored) in [(2i64, &k2), (3, &k3)] {
        let bf = brute_force_box(k, 400);
        assert!(bf.is_subset(stored), "k = {k}: brute force found {bf:?}");
        assert_eq!(
            &kernel_solutions(k, BOUND),
            stored,
            "k = {k}: one local run over the whole domain"
        );
    }

    // Each worker took part, under its own owner; nobody was blamed.
    let listed = coord.workers().unwrap();
    let mut owners = BTreeSet::new();
    for w in &workers {
        let id = w.worker_id().expect("worker.json holds the worker id");
        let v = listed
            .iter()
            .find(|x| x["id"].as_i64() == Some(id))
            .expect("worker listed");
        assert_eq!(v["owner"].as_str(), Some(w.owner.as_str()));
        assert_eq!(v["errors"].as_i64(), Some(0), "{v}");
        assert!(
            v["reports"].as_i64().unwrap() >= 1,
            "{} did no work: {v}\n{}",
            w.owner,
            w.log_text()
        );
        owners.insert(w.owner.clone());
        let log = w.log_text();
        assert!(
            log.contains(&format!("enrolled as worker {id} (owner {})", w.owner)),
            "{log}"
        );
        assert!(log.contains("pinned coordinator key"), "{log}");
        assert_eq!(
            std::fs::read_to_string(w.state.join("coordinator.key"))
                .unwrap()
                .trim(),
            coord.public_key,
            "the pinned key is the coordinator's"
        );
        assert!(
            lines_with(&log, "reported unit")
                .iter()
                .all(|l| l.contains("accepted")),
            "{log}"
        );
    }
    assert_eq!(owners.len(), 3);
    eprintln!(
        "campaign of {units} units settled in {:.1}s",
        t0.elapsed().as_secs_f64()
    );
}
