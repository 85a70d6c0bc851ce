//! The audit, certificates and exports on a real store: a small campaign is planned, leased
//! to three owners' workers, computed with the kernel and settled through the store's own
//! operations; then the store is tampered with by raw SQL, one case per test, and the
//! `cubehunt-coordinator` binary must find it.
//!
//! Known solutions used: k = 3 has (1, 1, 1) and (4, 4, −5) and no other solution with
//! min(|x|,|y|,|z|) ≤ 10¹⁷ (Booker and Sutherland, *On a question of Mordell*, PNAS 118 (2021):
//! the third known solution has min ≈ 4.7·10¹⁷); from memory, each confirmed by the exact check.

use cubehunt_common::report::Report;
use cubehunt_common::{kernel, pieces, sign, Digest, Solution, KERNEL_VERSION};
use cubehunt_coordinator::datadir::DataDir;
use cubehunt_coordinator::plan::{plan_target, PlanSettings};
use cubehunt_coordinator::store::workers::Call;
use cubehunt_coordinator::store::{IncomingReport, LeasePolicy, NewCampaign, NewWorker, Store};
use serde_json::{json, Value};
use std::path::{Path, PathBuf};
use std::process::Command;

const BIN: &str = env!("CARGO_BIN_EXE_cubehunt-coordinator");
const CAMPAIGN: &str = "harbour-test";

struct Built {
    _tmp: tempfile::TempDir,
    dir: PathBuf,
}

/// Plan k = 3 and k = 30 up to `bound`, settle every unit with reports of owners ana, bea, cal.
async fn build(bound: u64) -> Built {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path().join("data");
    DataDir::init(&dir).await.unwrap();
    let dd = DataDir::new(&dir);
    let key = dd.signing_key().unwrap();
    let store = Store::open(&dd.db(), false).await.unwrap();
    let settings = PlanSettings {
        unit_seconds: 1e-4,
        max_units: 10_000,
    };
    let plans: Vec<_> = [3i64, 30]
        .iter()
        .map(|&k| plan_target(k, 0, bound, settings).unwrap())
        .collect();
    assert!(
        plans.iter().all(|p| p.units.len() >= 3) && plans[1].units.len() >= 10,
        "want several units per target: {:?}",
        plans.iter().map(|p| p.units.len()).collect::<Vec<_>>()
    );
    let signer: cubehunt_coordinator::store::campaigns::Signer =
        std::sync::Arc::new(move |spec: &cubehunt_common::UnitSpec| {
            sign::sign(&key, &spec.canonical_bytes())
        });
    let now = 1_764_600_000;
    store
        .create_campaign(
            &NewCampaign {
                name: CAMPAIGN.into(),
                kernel: KERNEL_VERSION.into(),
                bound,
                unit_seconds: 1e-4,
                recheck_share: 0.1,
            },
            &plans,
            &signer,
            now,
        )
        .await
        .unwrap();
    settle_all(&store, now).await;
    store.close().await;
    Built { _tmp: tmp, dir }
}

/// A store call on behalf of `worker` at `now`, with a fresh nonce.
fn call(worker: i64, now: i64) -> Call {
    Call {
        worker_id: worker,
        nonce: hex::encode(rand::random::<[u8; 16]>()),
        nonce_expires: now + 600,
        now,
        address: "127.0.0.1".into(),
        net_prefix: "127.0.0.0/24".into(),
    }
}

/// Workers of three owners take leases until none is left, compute every piece with the
/// kernel and report; the organiser's checks (spot checks, sampled rechecks, probation) are
/// run by [`cubehunt_coordinator::checker::run_all`] between rounds.
async fn settle_all(store: &Store, now: i64) {
    let policy = LeasePolicy::default();
    let mut workers = Vec::new();
    for owner in ["ana", "bea", "cal"] {
        let wkey = sign::generate();
        let nw = NewWorker {
            owner: owner.into(),
            public_key: sign::public_to_hex(&wkey.verifying_key()),
            kernel: KERNEL_VERSION.into(),
            threads: 1,
            label: format!("{owner}-desk"),
            address: "127.0.0.1".into(),
            net_prefix: "127.0.0.0/24".into(),
            invite_sha256: None,
            invite_only: false,
        };
        let nonce = hex::encode(rand::random::<[u8; 16]>());
        let w = store
            .enrol(&nw, &nonce, now + 600, now)
            .await
            .unwrap()
            .worker;
        workers.push((w, wkey));
    }
    for _round in 0..1000 {
        let mut any = false;
        for (w, wkey) in &workers {
            let Some(g) = store.grant_lease(&call(w.id, now), &policy).await.unwrap() else {
                continue;
            };
            any = true;
            let spec = &g.unit.spec;
            let mut digests: Vec<Digest> = Vec::new();
            let mut solutions = Vec::new();
            for p in pieces::of_unit(spec) {
                let out = kernel::scan(spec.k, &p, 1, &|_| {}).unwrap();
                digests.push(out.digest);
                solutions.extend(out.solutions.into_iter().filter(|s| s.in_rect(&spec.rect)));
            }
            solutions.sort();
            solutions.dedup();
            let report = Report {
                lease_id: g.lease.id,
                unit_id: spec.unit_id,
                worker_id: w.id,
                kernel: KERNEL_VERSION.into(),
                k: spec.k,
                rect: spec.rect,
                digest: digests.iter().copied().sum(),
                pieces: digests.clone(),
                solutions: solutions.clone(),
                elapsed_s: 0.01,
            };
            let signature = sign::sign(wkey, &report.canonical_bytes());
            let inc = IncomingReport {
                call: call(w.id, now + 1),
                lease_id: g.lease.id,
                digest: report.digest,
                pieces_root: report.pieces_root(),
                pieces: digests,
                solutions,
                signature,
                elapsed_s: 0.01,
                refusal: None,
            };
            store.record_report(&inc, &policy).await.unwrap();
        }
        cubehunt_coordinator::checker::run_all(store, &policy)
            .await
            .unwrap();
        if !any {
            break;
        }
    }
}

fn run(args: &[&str]) -> (i32, String, String) {
    let o = Command::new(BIN).args(args).output().unwrap();
    (
        o.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&o.stdout).into_owned(),
        String::from_utf8_lossy(&o.stderr).into_owned(),
    )
}

fn audit_json(dir: &Path) -> (i32, Value) {
    let (code, out, err) = run(&["audit", "--data-dir", dir.to_str().unwrap(), "--json"]);
    let v: Value = serde_json::from_str(&out)
        .unwrap_or_else(|e| panic!("audit --json printed no JSON ({e}): {out}\n{err}"));
    (code, v)
}

/// Errors of an audit as (check, subject, message).
fn errors(v: &Value) -> Vec<(String, String, String)> {
    v["findings"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|f| f["severity"] == "error")
        .map(|f| {
            (
                f["check"].as_str().unwrap().into(),
                f["subject"].as_str().unwrap().into(),
                f["message"].as_str().unwrap().into(),
            )
        })
        .collect()
}

/// Run raw SQL on the store file, as a tamperer would.
async fn tamper(dir: &Path, sql: &[&str]) {
    use sqlx::{Connection, Executor};
    let url = format!("sqlite://{}", dir.join("coordinator.db").display());
    let mut c = sqlx::SqliteConnection::connect(&url).await.unwrap();
    for q in sql {
        c.execute(*q).await.unwrap_or_else(|e| panic!("{q}: {e}"));
    }
    c.close().await.unwrap();
}

async fn scalar(dir: &Path, sql: &str) -> i64 {
    use sqlx::Connection;
    let url = format!("sqlite://{}", dir.join("coordinator.db").display());
    let mut c = sqlx::SqliteConnection::connect(&url).await.unwrap();
    let v: i64 = sqlx::query_scalar(sql).fetch_one(&mut c).await.unwrap();
    c.close().await.unwrap();
    v
}

async fn text(dir: &Path, sql: &str) -> String {
    use sqlx::Connection;
    let url = format!("sqlite://{}", dir.join("coordinator.db").display());
    let mut c = sqlx::SqliteConnection::connect(&url).await.unwrap();
    let v: String = sqlx::query_scalar(sql).fetch_one(&mut c).await.unwrap();
    c.close().await.unwrap();
    v
}

fn assert_found(v: &Value, check: &str, subject: &str, message: &str) {
    let e = errors(v);
    assert!(
        e.iter()
            .any(|(c, s, m)| c == check && s.contains(subject) && m.contains(message)),
        "expected an error [{check}] about {subject:?} saying {message:?}; got {e:#?}"
    );
}

#[tokio::test(flavor = "multi_thread")]
async fn a_clean_store_passes_and_solutions_are_the_known_ones() {
    let b = build(60).await;
    let (code, v) = audit_json(&b.dir);
    assert_eq!(code, 0, "{v:#}");
    assert_eq!(v["ok"], true);
    assert_eq!(v["errors"], 0);
    assert!(v["findings"].as_array().unwrap().is_empty(), "{v:#}");
    assert!(
        v["targets"]
            .as_array()
            .unwrap()
            .iter()
            .all(|t| t["complete"] == true),
        "{v:#}"
    );
    assert!(
        v["checked"]["reports"].as_u64().unwrap() >= 2 * v["checked"]["units"].as_u64().unwrap()
    );
    // With a recheck of every unit, seeded and reported.
    let (code, out, err) = run(&[
        "audit",
        "--data-dir",
        b.dir.to_str().unwrap(),
        "--recheck",
        "1",
        "--seed",
        "11",
    ]);
    assert_eq!(code, 0, "{out}\n{err}");
    assert!(out.contains("seed 11") && out.contains("PASS"), "{out}");
    // Solutions export: exactly the known ones for k = 3 (and none for k = 30 this low).
    let (code, out, _) = run(&[
        "export",
        "--data-dir",
        b.dir.to_str().unwrap(),
        "--campaign",
        CAMPAIGN,
        "--what",
        "solutions",
        "--format",
        "json",
    ]);
    assert_eq!(code, 0);
    let rows: Vec<Value> = serde_json::from_str(&out).unwrap();
    let mut got: Vec<Solution> = rows
        .iter()
        .map(|r| serde_json::from_value(r["solution"].clone()).unwrap())
        .collect();
    got.sort(); // by k, then in the order they were found
    assert!(
        rows.iter().all(|r| r["family"].is_null()),
        "k = 3 has no family"
    );
    let known = vec![Solution::new(-5, 4, 4), Solution::new(1, 1, 1)];
    assert!(known.iter().all(|s| s.verify(3)));
    assert_eq!(got, known);
    assert!(rows.iter().all(|r| r["k"] == 3));
    // Ledger export: one line per report, naming owner and digest.
    let (code, out, _) = run(&[
        "export",
        "--data-dir",
        b.dir.to_str().unwrap(),
        "--campaign",
        CAMPAIGN,
        "--what",
        "ledger",
        "--format",
        "csv",
    ]);
    assert_eq!(code, 0);
    let lines: Vec<&str> = out.lines().collect();
    assert!(
        lines[0].starts_with("campaign,k,unit,region,"),
        "{}",
        lines[0]
    );
    assert_eq!(
        lines.len() as u64 - 1,
        v["checked"]["reports"].as_u64().unwrap()
    );
    assert!(
        lines[1..]
            .iter()
            .all(|l| l.contains(",agree,") || l.ends_with(",agree")),
        "{out}"
    );
    assert!(
        ["ana", "bea", "cal"]
            .iter()
            .all(|o| out.contains(&format!(",{o},{o}-desk,"))),
        "{out}"
    );
}

#[tokio::test(flavor = "multi_thread")]
async fn a_deleted_unit_is_a_gap() {
    let b = build(60).await;
    let id = scalar(&b.dir, "SELECT max(id) FROM units WHERE region = 'main' AND target_id = (SELECT id FROM targets WHERE k = 30)").await;
    let q = [
        format!("DELETE FROM solutions WHERE unit_id = {id}"),
        format!("DELETE FROM spot_checks WHERE unit_id = {id}"),
        format!("DELETE FROM reports WHERE unit_id = {id}"),
        format!("DELETE FROM leases WHERE unit_id = {id}"),
        format!("DELETE FROM units WHERE id = {id}"),
    ];
    tamper(&b.dir, &q.iter().map(String::as_str).collect::<Vec<_>>()).await;
    let (code, v) = audit_json(&b.dir);
    assert_eq!(code, 1, "{v:#}");
    assert_found(&v, "tiling", "k = 30: region main d∈", "gap");
    let t30 = v["targets"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["k"] == 30)
        .unwrap()
        .clone();
    assert_eq!(t30["complete"], false);
}

#[tokio::test(flavor = "multi_thread")]
async fn an_altered_digest_is_found() {
    let b = build(60).await;
    let id = scalar(&b.dir, "SELECT min(id) FROM units WHERE region = 'main'").await;
    // The settled digest of a unit, changed in its hash field.
    tamper(&b.dir, &[&format!("UPDATE units SET settled_digest = 'h00000000deadbeef' || substr(settled_digest, 18) WHERE id = {id}")]).await;
    let (code, v) = audit_json(&b.dir);
    assert_eq!(code, 1, "{v:#}");
    assert_found(
        &v,
        "settlement",
        &format!("unit {id}"),
        "settled with digest h00000000deadbeef",
    );
    // A report's digest column changed: it no longer matches what the worker signed.
    let b = build(60).await;
    let rid = scalar(&b.dir, "SELECT min(id) FROM reports").await;
    tamper(&b.dir, &[&format!("UPDATE reports SET digest = 'h00000000deadbeef' || substr(digest, 18) WHERE id = {rid}")]).await;
    let (code, v) = audit_json(&b.dir);
    assert_eq!(code, 1, "{v:#}");
    assert_found(
        &v,
        "signature",
        &format!("report {rid} "),
        "worker signature over the stored report",
    );
}

#[tokio::test(flavor = "multi_thread")]
async fn an_altered_solution_is_found() {
    let b = build(60).await;
    // (-5, 4, 4) becomes (-5, 4, 5): not a solution of k = 3.
    tamper(
        &b.dir,
        &["UPDATE solutions SET c = '5' WHERE a = '-5' AND b = '4' AND c = '4'"],
    )
    .await;
    let (code, v) = audit_json(&b.dir);
    assert_eq!(code, 1, "{v:#}");
    assert_found(&v, "solutions", "(-5, 4, 5)", "do not sum to k = 3");
    assert_found(&v, "solutions", "(-5, 4, 5)", "not in the settled outcome");
    assert_found(
        &v,
        "solutions",
        "unit",
        "settled solution (-5, 4, 4) is missing",
    );
}

#[tokio::test(flavor = "multi_thread")]
async fn swapped_or_corrupted_signatures_are_found() {
    let b = build(60).await;
    let (u1, u2) = (
        scalar(&b.dir, "SELECT min(id) FROM units").await,
        scalar(&b.dir, "SELECT max(id) FROM units").await,
    );
    let r1 = scalar(&b.dir, "SELECT min(id) FROM reports").await;
    let s1 = text(
        &b.dir,
        &format!("SELECT signature FROM units WHERE id = {u1}"),
    )
    .await;
    let s2 = text(
        &b.dir,
        &format!("SELECT signature FROM units WHERE id = {u2}"),
    )
    .await;
    tamper(
        &b.dir,
        &[
            // Two units' coordinator signatures swapped.
            &format!("UPDATE units SET signature = '{s2}' WHERE id = {u1}"),
            &format!("UPDATE units SET signature = '{s1}' WHERE id = {u2}"),
            // A report's signature corrupted.
            &format!("UPDATE reports SET signature = '00' || substr(signature, 3) WHERE id = {r1}"),
        ],
    )
    .await;
    let (code, v) = audit_json(&b.dir);
    assert_eq!(code, 1, "{v:#}");
    assert_found(
        &v,
        "signature",
        &format!("unit {u1}"),
        "coordinator signature",
    );
    assert_found(
        &v,
        "signature",
        &format!("unit {u2}"),
        "coordinator signature",
    );
    assert_found(
        &v,
        "signature",
        &format!("report {r1} "),
        "worker signature",
    );

    // A report signature swapped with another report's (column only).
    let b = build(60).await;
    tamper(
        &b.dir,
        &["UPDATE reports SET signature = (SELECT signature FROM reports r2 WHERE r2.id = reports.id + 1) WHERE id = (SELECT min(id) FROM reports)"],
    )
    .await;
    let (code, v) = audit_json(&b.dir);
    assert_eq!(code, 1, "{v:#}");
    assert_found(
        &v,
        "signature",
        "report",
        "worker signature over the stored report",
    );
}

#[tokio::test(flavor = "multi_thread")]
async fn a_unit_settled_by_two_reports_of_one_owner_is_found() {
    let b = build(60).await;
    // Make bea's worker and everything it did belong to ana.
    tamper(
        &b.dir,
        &[
            "UPDATE workers SET owner = 'ana' WHERE owner = 'bea'",
            "UPDATE reports SET owner = 'ana' WHERE owner = 'bea'",
            "UPDATE leases SET owner = 'ana' WHERE owner = 'bea'",
        ],
    )
    .await;
    let (code, v) = audit_json(&b.dir);
    assert_eq!(code, 1, "{v:#}");
    assert_found(&v, "settlement", "unit", "backed by 1 distinct owner(s)");
}

#[tokio::test(flavor = "multi_thread")]
async fn counters_shown_by_monitoring_must_match_the_rows() {
    let b = build(60).await;
    tamper(
        &b.dir,
        &["UPDATE workers SET units_settled = units_settled + 5 WHERE owner = 'cal'"],
    )
    .await;
    let (code, v) = audit_json(&b.dir);
    assert_eq!(code, 1, "{v:#}");
    assert_found(&v, "counts", "worker", "units_settled is");
}

#[tokio::test(flavor = "multi_thread")]
async fn certificates_verify_offline_and_bad_ones_fail() {
    use cubehunt_common::cert::{CertUnit, Certificate};
    let b = build(60).await;
    let d = b.dir.to_str().unwrap();
    let elsewhere = tempfile::tempdir().unwrap(); // a machine that never saw the database
    let file = elsewhere.path().join("k3.json");
    let (code, _, err) = run(&[
        "certificate",
        "--data-dir",
        d,
        "--campaign",
        CAMPAIGN,
        "--k",
        "3",
        "--out",
        file.to_str().unwrap(),
    ]);
    assert_eq!(code, 0, "{err}");
    let (code, text, _) = run(&[
        "certificate",
        "--data-dir",
        d,
        "--campaign",
        CAMPAIGN,
        "--k",
        "3",
        "--text",
    ]);
    assert_eq!(code, 0);
    assert!(
        text.contains("min(|x|,|y|,|z|) ≤ 60") && text.contains("-5, 4, 4"),
        "{text}"
    );
    // The coverage table lists both targets, the one without solutions too; k = 3 is
    // certified with the root of the certificate just issued, k = 30 is complete but has no
    // certificate yet.
    let doc: Value = serde_json::from_str(&std::fs::read_to_string(&file).unwrap()).unwrap();
    for format in ["csv", "json"] {
        let (code, out, err) = run(&[
            "export",
            "--data-dir",
            d,
            "--campaign",
            CAMPAIGN,
            "--what",
            "coverage",
            "--format",
            format,
        ]);
        assert_eq!(code, 0, "{err}");
        let rows: Vec<Value> = if format == "json" {
            serde_json::from_str(&out).unwrap()
        } else {
            let mut lines = out.lines();
            let head: Vec<&str> = lines.next().unwrap().split(',').collect();
            assert_eq!(
                head,
                [
                    "campaign",
                    "k",
                    "bound",
                    "units",
                    "units_settled",
                    "complete",
                    "certified",
                    "certified_bound",
                    "certificate_root",
                    "solutions",
                    "family_solutions"
                ]
            );
            lines
                .map(|l| {
                    let f: Vec<&str> = l.split(',').collect();
                    assert_eq!(f.len(), head.len(), "{l}");
                    json!({"k": f[1].parse::<i64>().unwrap(), "bound": f[2].parse::<u64>().unwrap(),
                        "complete": f[5] == "true", "certified": f[6] == "true",
                        "certificate_root": if f[8].is_empty() { Value::Null } else { json!(f[8]) },
                        "solutions": f[9].parse::<i64>().unwrap()})
                })
                .collect()
        };
        assert_eq!(rows.len(), 2, "{out}");
        assert_eq!(
            (rows[0]["k"].as_i64(), rows[1]["k"].as_i64()),
            (Some(3), Some(30))
        );
        assert!(rows
            .iter()
            .all(|r| r["bound"] == 60 && r["complete"] == true));
        assert_eq!(rows[0]["certified"], true);
        assert_eq!(rows[0]["certificate_root"], doc["root"]);
        assert_eq!(rows[0]["solutions"], 2);
        assert_eq!(rows[1]["certified"], false);
        assert!(rows[1]["certificate_root"].is_null());
        assert_eq!(rows[1]["solutions"], 0);
    }
    let pubkey = std::fs::read_to_string(b.dir.join("coordinator.pub"))
        .unwrap()
        .trim()
        .to_string();
    drop(b); // the data directory is gone

    let (code, out, err) = Command::new(BIN)
        .args([
            "verify-certificate",
            "k3.json",
            "--key",
            &pubkey,
            "--recheck",
            "0.5",
            "--seed",
            "3",
        ])
        .current_dir(elsewhere.path())
        .output()
        .map(|o| {
            (
                o.status.code().unwrap(),
                String::from_utf8_lossy(&o.stdout).into_owned(),
                String::from_utf8_lossy(&o.stderr).into_owned(),
            )
        })
        .unwrap();
    assert_eq!(code, 0, "{out}\n{err}");
    assert!(
        out.contains("certificate holds") && out.contains("(pinned)") && out.contains("seed 3"),
        "{out}"
    );

    let doc: Certificate = serde_json::from_str(&std::fs::read_to_string(&file).unwrap()).unwrap();
    assert_eq!(doc.k, 3);
    assert_eq!(
        doc.solutions,
        vec![Solution::new(-5, 4, 4), Solution::new(1, 1, 1)]
    );
    assert!(doc.units.iter().all(|u| u.settled_by.len() >= 2));
    let verify = |c: &Certificate, name: &str| {
        let p = elsewhere.path().join(name);
        std::fs::write(&p, serde_json::to_vec(c).unwrap()).unwrap();
        run(&["verify-certificate", p.to_str().unwrap()])
    };
    // A coordinator key we control, to sign bad certificates "properly".
    let rogue = sign::generate();
    let reissue = |units: Vec<CertUnit>, sols: Vec<Solution>| {
        Certificate::issue(
            &doc.campaign,
            doc.k,
            doc.bound,
            &doc.kernel,
            doc.issued_at,
            units,
            sols,
            &rogue,
        )
    };

    // Gap: a unit left out.
    let mut units = doc.units.clone();
    let gone = units
        .iter()
        .position(|u| u.rect.region == cubehunt_common::Region::Main)
        .unwrap();
    units.remove(gone);
    let (code, out, _) = verify(&reissue(units, doc.solutions.clone()), "gap.json");
    assert_eq!(code, 1, "{out}");
    assert!(
        out.contains("[tiling]") && out.contains("gap") && out.contains("does NOT hold"),
        "{out}"
    );
    // Wrong solution.
    let (code, out, _) = verify(
        &reissue(
            doc.units.clone(),
            vec![Solution::new(1, 1, 1), Solution::new(-5, 4, 3)],
        ),
        "wrong.json",
    );
    assert_eq!(code, 1, "{out}");
    assert!(
        out.contains("[solution]") && out.contains("(-5, 3, 4)"),
        "{out}"
    );
    // Bad signature: the bound raised after signing.
    let mut c = doc.clone();
    c.bound = 61;
    let (code, out, _) = verify(&c, "resigned.json");
    assert_eq!(code, 1, "{out}");
    assert!(out.contains("[signature]"), "{out}");
    // Signed by another key: fails when the coordinator key is pinned.
    let p = elsewhere.path().join("rogue.json");
    std::fs::write(
        &p,
        serde_json::to_vec(&reissue(doc.units.clone(), doc.solutions.clone())).unwrap(),
    )
    .unwrap();
    let (code, out, _) = run(&["verify-certificate", p.to_str().unwrap(), "--key", &pubkey]);
    assert_eq!(code, 1, "{out}");
    // Not a certificate at all.
    std::fs::write(elsewhere.path().join("junk.json"), b"{\"hello\": 1}").unwrap();
    let (code, _, err) = run(&[
        "verify-certificate",
        elsewhere.path().join("junk.json").to_str().unwrap(),
    ]);
    assert_eq!(code, 2);
    assert!(err.contains("is not a cubehunt certificate"), "{err}");
}

#[tokio::test(flavor = "multi_thread")]
async fn an_incomplete_target_gets_no_certificate_and_extension_keeps_the_old_one() {
    let b = build(40).await;
    let d = b.dir.to_str().unwrap();
    let old = b.dir.join("old.json");
    let (code, _, err) = run(&[
        "certificate",
        "--data-dir",
        d,
        "--campaign",
        CAMPAIGN,
        "--k",
        "30",
        "--out",
        old.to_str().unwrap(),
    ]);
    assert_eq!(code, 0, "{err}");
    // Extend to 80 through the store; the new units are not settled yet.
    {
        let dd = DataDir::new(&b.dir);
        let key = dd.signing_key().unwrap();
        let store = Store::open(&dd.db(), false).await.unwrap();
        let settings = PlanSettings {
            unit_seconds: 1e-4,
            max_units: 10_000,
        };
        let plans: Vec<_> = [3i64, 30]
            .iter()
            .map(|&k| plan_target(k, 40, 80, settings).unwrap())
            .collect();
        let signer: cubehunt_coordinator::store::campaigns::Signer =
            std::sync::Arc::new(move |spec: &cubehunt_common::UnitSpec| {
                sign::sign(&key, &spec.canonical_bytes())
            });
        store
            .extend_campaign(CAMPAIGN, 80, &plans, &signer, 0.0, 1_764_700_000)
            .await
            .unwrap();
        store.close().await;
    }
    let (code, _, err) = run(&[
        "certificate",
        "--data-dir",
        d,
        "--campaign",
        CAMPAIGN,
        "--k",
        "30",
    ]);
    assert_eq!(code, 1);
    assert!(err.contains("is not complete up to bound 80"), "{err}");
    // The certificate for the old bound can still be issued, and lists the same units.
    let (code, out, err) = run(&[
        "certificate",
        "--data-dir",
        d,
        "--campaign",
        CAMPAIGN,
        "--k",
        "30",
        "--bound",
        "40",
    ]);
    assert_eq!(code, 0, "{err}");
    let again: Value = serde_json::from_str(&out).unwrap();
    let first: Value = serde_json::from_str(&std::fs::read_to_string(&old).unwrap()).unwrap();
    assert_eq!(again["root"], first["root"]);
    assert_eq!(again["units"], first["units"]);
    // Settle the extension: the new certificate covers 80, the old file still holds for 40.
    {
        let store = Store::open(&DataDir::new(&b.dir).db(), false)
            .await
            .unwrap();
        settle_all(&store, 1_764_700_100).await;
        store.close().await;
    }
    let new = b.dir.join("new.json");
    let (code, _, err) = run(&[
        "certificate",
        "--data-dir",
        d,
        "--campaign",
        CAMPAIGN,
        "--k",
        "30",
        "--out",
        new.to_str().unwrap(),
    ]);
    assert_eq!(code, 0, "{err}");
    for f in [&old, &new] {
        let (code, out, _) = run(&["verify-certificate", f.to_str().unwrap()]);
        assert_eq!(code, 0, "{out}");
    }
    let (_, out, _) = run(&["verify-certificate", new.to_str().unwrap()]);
    assert!(out.contains("≤ 80"), "{out}");
    let (code, v) = audit_json(&b.dir);
    assert_eq!(code, 0, "{v:#}");
}
