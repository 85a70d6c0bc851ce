//! Misbehaving workers against a real coordinator: a forged solution is refused and counted,
//! a report for someone else's lease is refused, a replayed request is refused and changes
//! nothing, and invented survivor hashes are caught by the coordinator's spot checks, which
//! quarantine the liar. The misbehaving worker is driven by hand (`HandWorker`, speaking the
//! protocol with `cubehunt_common::sign`); honest work is done by real `cubehunt-worker run`
//! processes.

use cubehunt_common::{Region, Solution};
use cubehunt_tests::*;
use serde_json::Value;
use std::collections::BTreeSet;
use std::time::Duration;

const SERVE: &[&str] = &[
    "--retry-after-s",
    "1",
    "--sweep-s",
    "1",
    "--leases-per-thread",
    "3",
];

fn errors(coord: &Coordinator, id: i64) -> i64 {
    coord.worker_view(id).unwrap()["errors"].as_i64().unwrap()
}

#[test]
fn lies_are_refused_caught_and_quarantined_and_replays_change_nothing() {
    let _g = serial();
    let tmp = tempfile::tempdir().unwrap();
    let coord = Coordinator::start(tmp.path(), SERVE).unwrap();
    // One unit per region: small, equal, main.
    let created = coord.create_campaign("faults", "3", "300", 1e6).unwrap();
    assert_eq!(created["units"]["total"].as_i64(), Some(3), "{created}");

    let mallory = HandWorker::enrol(&coord.url(), "mallory").unwrap();
    let trudy = HandWorker::enrol(&coord.url(), "trudy").unwrap();
    assert_eq!(mallory.coordinator_key, coord.public_key);
    let grants: Vec<_> = (0..3)
        .map(|_| mallory.lease(Duration::from_secs(10)).unwrap())
        .collect();
    for g in &grants {
        mallory.check_unit(g).unwrap();
    }
    let units: BTreeSet<i64> = grants.iter().map(|g| g.unit.unit.unit_id).collect();
    assert_eq!(units.len(), 3, "three different units");
    let by_region = |r: Region| {
        grants
            .iter()
            .find(|g| g.unit.unit.rect.region == r)
            .unwrap()
            .clone()
    };
    let (g_small, g_equal, g_main) = (
        by_region(Region::Small),
        by_region(Region::Equal),
        by_region(Region::Main),
    );

    // 1. Someone else's lease: trudy reports on mallory's lease with a correct report.
    let (d, sols) = honest(&g_main);
    let mut stolen = mallory.report_for(&g_main, d, sols.clone());
    stolen.report.worker_id = trudy.worker_id;
    stolen.signature = cubehunt_common::sign::sign(&trudy.key, &stolen.report.canonical_bytes());
    let a = trudy.send(&trudy.prepare_report(&stolen)).unwrap();
    assert_eq!(a.status, 403, "{a:?}");
    assert_eq!(a.error_code(), "not_your_lease");
    assert_eq!(
        coord.worker_view(trudy.worker_id).unwrap()["reports"].as_i64(),
        Some(0)
    );

    // 2. A forged solution: the honest digests of the equal-region unit plus a false triple.
    let (d, mut sols) = honest(&g_equal);
    sols.push(Solution::new(2, 3, 5)); // 8 + 27 + 125 ≠ 3
    let a = mallory
        .send(&mallory.prepare_report(&mallory.report_for(&g_equal, d, sols)))
        .unwrap();
    assert_eq!(a.status, 422, "a false solution is refused: {a:?}");
    assert_eq!(errors(&coord, mallory.worker_id), 1, "and counted");

    // 3. A replay: mallory's honest report of the main unit, sent twice verbatim.
    let (d, sols) = honest(&g_main);
    let wire = mallory.prepare_report(&mallory.report_for(&g_main, d, sols));
    let first = mallory.send(&wire).unwrap();
    assert!(first.ok(), "{first:?}");
    assert_eq!(first.body["accepted"], Value::Bool(true));
    let before = coord.show("faults").unwrap();
    let reports_before = coord.worker_view(mallory.worker_id).unwrap()["reports"].clone();
    let again = mallory.send(&wire).unwrap();
    assert_eq!(
        again.status, 409,
        "a replayed request is refused: {again:?}"
    );
    assert_eq!(again.error_code(), "replayed");
    assert_eq!(
        coord.worker_view(mallory.worker_id).unwrap()["reports"],
        reports_before
    );
    assert_eq!(
        coord.show("faults").unwrap()["units"],
        before["units"],
        "a replay changes no unit"
    );

    // 4. Invented survivor hashes for the small-region unit, with every easy count right:
    //    the report's shape is fine, so it is accepted; the coordinator's spot checks of
    //    pieces drawn after the report was stored prove it wrong.
    let (d, sols) = honest(&g_small);
    let a = mallory
        .send(&mallory.prepare_report(&mallory.report_for(&g_small, invented(&d, 7), sols)))
        .unwrap();
    assert!(
        a.ok(),
        "a well-formed report is accepted for checking: {a:?}"
    );
    wait_for("mallory's quarantine", Duration::from_secs(60), || {
        coord.worker_view(mallory.worker_id).ok()?["quarantined"]
            .as_bool()
            .filter(|q| *q)
    })
    .unwrap_or_else(|e| panic!("{e:#}\n--- coordinator:\n{}", coord.log_text()));
    let quarantined = mallory.lease_once().unwrap();
    assert_eq!(quarantined.status, 403, "{quarantined:?}");
    assert_eq!(quarantined.error_code(), "quarantined");

    // Honest workers of three other owners finish the campaign.
    let workers: Vec<Worker> = ["olga", "pavel", "quinn"]
        .iter()
        .map(|o| Worker::start(tmp.path(), &coord.url(), o, &[]))
        .map(Result::unwrap)
        .collect();
    let view = coord
        .wait_complete("faults", Duration::from_secs(120))
        .unwrap_or_else(|e| {
            for w in &workers {
                eprintln!("--- worker {}:\n{}", w.owner, w.log_text());
            }
            panic!("{e:#}\n--- coordinator:\n{}", coord.log_text());
        });
    // Mallory's errors: the false triple and the invented hashes. Her honest report of the
    // main unit was voided by the quarantine; the unit was settled by others.
    assert!(
        errors(&coord, mallory.worker_id) >= 2,
        "{}",
        coord.worker_view(mallory.worker_id).unwrap()
    );
    for w in &workers {
        assert_eq!(errors(&coord, w.worker_id().unwrap()), 0);
    }
    assert_eq!(
        errors(&coord, trudy.worker_id),
        0,
        "a refused foreign report is not the thief's error count"
    );
    let incidents = coord.admin_get("/api/v1/admin/incidents").unwrap();
    let list = incidents["incidents"].as_array().expect("incidents list");
    assert!(
        // Caught by a spot check, or by the recheck of a unit it took on probation.
        list.iter().any(
            |i| (i["kind"] == "piece_mismatch" || i["kind"] == "unit_mismatch")
                && i["quarantined"]
                    .as_array()
                    .is_some_and(|q| q.contains(&Value::from(mallory.worker_id)))
        ),
        "{incidents}"
    );
    // (1, 1, 1) and (4, 4, −5): the solutions of k = 3 with min ≤ 300 (classical; from memory,
    // verified exactly here; next known min ≈ 4.7·10¹⁷, Booker and Sutherland, PNAS 118, 2021).
    let want: BTreeSet<Solution> = [Solution::new(1, 1, 1), Solution::new(4, 4, -5)]
        .into_iter()
        .collect();
    assert!(want.iter().all(|s| s.verify(3)));
    assert_eq!(view_solutions(&view), want, "{view}");
    assert_eq!(
        kernel_solutions(3, 300),
        want,
        "the kernel, run here, agrees"
    );
    // No unit was settled with mallory's word: every settled unit names two honest settlers.
    let audit = coord.audit("faults").unwrap();
    assert!(audit.ok(), "{}", audit.text);
}
