//! The cheapest attack on the certificate, tried against a real coordinator: one person
//! enrols two workers under two owner names and reports made-up work from both.
//!
//! The pair is driven by hand (`HandWorker`); it knows the protocol and computes every count
//! the coordinator could check without doing the work (closed forms), so only the survivor
//! hashes are invented. Probation and the sampled whole-unit rechecks are turned off, so that
//! what catches the pair is what catches any worker: the pieces the coordinator draws and
//! recomputes after each report is stored. Honest work is done by real `cubehunt-worker run`
//! processes of three other owners.
//!
//! k = 3 with min ≤ 300 has exactly the solutions (1, 1, 1) and (4, 4, −5) up to permutation
//! (classical; from memory, each verified in exact arithmetic here and by the kernel run in
//! this test; the next known one has min ≈ 4.7·10¹⁷, Booker and Sutherland, PNAS 118, 2021).

use cubehunt_common::Digest;
use cubehunt_tests::*;
use serde_json::Value;
use std::collections::BTreeSet;
use std::time::Duration;

const SERVE: &[&str] = &[
    "--retry-after-s",
    "1",
    "--sweep-s",
    "1",
    "--probation-reports",
    "0",
    "--recheck-share",
    "0",
    "--spot-checks",
    "2",
];

#[test]
fn a_colluding_pair_is_refused_caught_quarantined_and_the_certificate_still_holds() {
    let _g = serial();
    let tmp = tempfile::tempdir().unwrap();
    let coord = Coordinator::start(tmp.path(), SERVE).unwrap();
    let created = coord.create_campaign("sly", "3", "300", 1e6).unwrap();
    assert_eq!(created["units"]["total"].as_i64(), Some(3), "{created}");

    let mallet = HandWorker::enrol(&coord.url(), "mallet").unwrap();
    let oscar = HandWorker::enrol(&coord.url(), "oscar").unwrap();

    // The pair asks for work back to back, each with a thread free. With nobody else
    // about, whoever the coordinator draws for the second lease of one's unit is the other:
    // the pair lands on the same units (with honest workers about, it could not choose).
    let gx = oscar.lease(Duration::from_secs(10)).unwrap();
    let gy = mallet.lease(Duration::from_secs(10)).unwrap();
    let gy2 = oscar.lease(Duration::from_secs(10)).unwrap();
    assert_eq!(
        gy.unit.unit.unit_id, gy2.unit.unit.unit_id,
        "the pair shares a unit"
    );

    // 1. One unit honestly, to look like good volunteers: it settles on their word.
    let honest_unit = gy.unit.unit.unit_id;
    let (pieces, sols) = honest(&gy);
    for (w, g) in [(&mallet, &gy), (&oscar, &gy2)] {
        let a = w
            .send(&w.prepare_report(&w.report_for(g, pieces.clone(), sols.clone())))
            .unwrap();
        assert!(a.ok(), "{a:?}");
    }
    // 2. One unit made up: honest counts, invented survivor hashes, no solutions; the same
    //    invented digests from both, so that they agree. Oscar holds it; the next sweep
    //    draws mallet (the only eligible worker) for its second lease.
    std::thread::sleep(Duration::from_secs(3));
    let gx2 = mallet.lease(Duration::from_secs(10)).unwrap();
    assert_eq!(
        gx.unit.unit.unit_id, gx2.unit.unit.unit_id,
        "the pair shares a second unit"
    );
    let (pieces, _) = honest(&gx);
    let made_up = invented(&pieces, 99);
    for (w, g) in [(&oscar, &gx), (&mallet, &gx2)] {
        let a = w
            .send(&w.prepare_report(&w.report_for(g, made_up.clone(), vec![])))
            .unwrap();
        assert!(a.ok(), "a well-formed report is taken for checking: {a:?}");
    }

    // 3. The spot checks recompute pieces the pair could not know in advance: both are
    //    proven wrong and quarantined, with their owners.
    for w in [&mallet, &oscar] {
        wait_for("the pair's quarantine", Duration::from_secs(60), || {
            coord.worker_view(w.worker_id).ok()?["quarantined"]
                .as_bool()
                .filter(|q| *q)
        })
        .unwrap_or_else(|e| panic!("{e:#}\n--- coordinator:\n{}", coord.log_text()));
        let a = w.lease_once().unwrap();
        assert_eq!(
            (a.status, a.error_code().as_str()),
            (403, "quarantined"),
            "{a:?}"
        );
    }
    let incidents = coord.admin_get("/api/v1/admin/incidents").unwrap();
    let list = incidents["incidents"].as_array().unwrap();
    let ids = |field: &str| -> BTreeSet<i64> {
        list.iter()
            .flat_map(|i| i[field].as_array().cloned().unwrap_or_default())
            .filter_map(|v| v.as_i64())
            .collect()
    };
    assert!(
        list.iter().any(|i| i["kind"] == "piece_mismatch"),
        "{incidents}"
    );
    let caught = ids("quarantined");
    assert!(
        caught.contains(&mallet.worker_id) && caught.contains(&oscar.worker_id),
        "{incidents}"
    );
    // The unit they settled honestly goes back to the organiser's side too: their word
    // counts for nothing any more.
    assert!(ids("rechecked").contains(&honest_unit), "{incidents}");
    // A new machine of a quarantined owner (in any spelling of the name) is not enrolled.
    let again = HandWorker::enrol(&coord.url(), "Mallet");
    assert!(
        again
            .as_ref()
            .is_err_and(|e| e.to_string().contains("owner_quarantined")),
        "{:?}",
        again.map(|w| w.worker_id)
    );

    // 4. Zero work, from a third name: the all-zero digest is refused at once and counted.
    let zed = HandWorker::enrol(&coord.url(), "zed").unwrap();
    let g = zed.lease(Duration::from_secs(10)).unwrap();
    let zeros = vec![Digest::ZERO; cubehunt_common::pieces::of_unit(&g.unit.unit).len()];
    let a = zed
        .send(&zed.prepare_report(&zed.report_for(&g, zeros, vec![])))
        .unwrap();
    assert_eq!(
        (a.status, a.error_code().as_str()),
        (422, "zero_work"),
        "{a:?}"
    );
    assert_eq!(coord.worker_view(zed.worker_id).unwrap()["errors"], 1);

    // 5. Honest workers of three other owners finish the campaign.
    let workers: Vec<Worker> = ["olga", "pavel", "quinn"]
        .iter()
        .map(|o| Worker::start(tmp.path(), &coord.url(), o, &[]))
        .map(Result::unwrap)
        .collect();
    let view = coord
        .wait_complete("sly", Duration::from_secs(180))
        .unwrap_or_else(|e| {
            for w in &workers {
                eprintln!("--- worker {}:\n{}", w.owner, w.log_text());
            }
            panic!("{e:#}\n--- coordinator:\n{}", coord.log_text());
        });
    let want: BTreeSet<_> = [
        cubehunt_common::Solution::new(1, 1, 1),
        cubehunt_common::Solution::new(4, 4, -5),
    ]
    .into_iter()
    .collect();
    assert!(want.iter().all(|s| s.verify(3)));
    assert_eq!(view_solutions(&view), want, "{view}");
    assert_eq!(
        kernel_solutions(3, 300),
        want,
        "the kernel, run here, agrees"
    );

    // 6. The certificate names neither of the pair among the settlers, verifies offline
    //    against the coordinator's key, and the audit passes.
    let doc = wait_for("the certificate", Duration::from_secs(60), || {
        coord
            .get("/api/v1/campaigns/sly/targets/3/certificate")
            .ok()
    })
    .unwrap();
    let settlers: BTreeSet<i64> = doc["units"]
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|u| u["settled_by"].as_array().cloned().unwrap_or_default())
        .filter_map(|s| s["worker"].as_i64())
        .collect();
    for w in [mallet.worker_id, oscar.worker_id, zed.worker_id] {
        assert!(
            !settlers.contains(&w),
            "worker {w} among the settlers: {doc}"
        );
    }
    let sols: BTreeSet<_> =
        serde_json::from_value::<Vec<cubehunt_common::Solution>>(doc["solutions"].clone())
            .unwrap()
            .into_iter()
            .collect();
    assert_eq!(sols, want);
    let file = tmp.path().join("k3.json");
    std::fs::write(&file, serde_json::to_vec(&doc).unwrap()).unwrap();
    let (code, out, err) = run_cmd(
        &bin("cubehunt-coordinator"),
        &s(&[
            "verify-certificate",
            file.to_str().unwrap(),
            "--key",
            &coord.public_key,
            "--counts",
            "1",
        ]),
        Duration::from_secs(120),
    )
    .unwrap();
    assert_eq!(code, 0, "{out}{err}");
    let audit = coord.audit("sly").unwrap();
    assert!(audit.ok(), "{}", audit.text);
    let _: Value = view;
}
