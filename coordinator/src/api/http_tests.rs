//! HTTP-level tests of the service, driven through `tower::ServiceExt::oneshot` on the real
//! router over a real store in a temporary directory. Units are planned by hand here (the
//! planner has its own tests), so these tests do not depend on the kernel's cost model.

use super::*;
use crate::config::ServiceConfig;
use crate::store::{NewCampaign, PlannedUnit, Store, TargetPlan};
use axum::body::Body;
use axum::http::{Request, StatusCode};
use cubehunt_common::protocol::*;
use cubehunt_common::report::{Report, SignedReport};
use cubehunt_common::sign::{self, HDR_NONCE, HDR_SIGNATURE, HDR_TIME, HDR_WORKER};
use cubehunt_common::{Digest, Rect, Region, Solution, KERNEL_VERSION};
use http_body_util::BodyExt;
use serde_json::{json, Value};
use tower::ServiceExt;

const TOKEN: &str = "0123456789abcdef0123456789abcdef0123456789abcdef0123456789abcdef";

struct Env {
    st: Shared,
    _dir: tempfile::TempDir,
}

struct W {
    id: i64,
    key: sign::SecretKey,
}

/// The default settings without probation (these tests are about the agreement rule and
/// leasing; probation has its own test).
fn plain() -> ServiceConfig {
    ServiceConfig {
        probation_reports: 0,
        ..ServiceConfig::default()
    }
}

async fn env(config: ServiceConfig) -> Env {
    let dir = tempfile::tempdir().unwrap();
    let store = Store::open(&dir.path().join("c.db"), true).await.unwrap();
    let st = AppState::new(store, sign::generate(), TOKEN.into(), config);
    Env { st, _dir: dir }
}

impl Env {
    async fn call(&self, req: Request<Body>) -> (StatusCode, Value) {
        let resp = router(self.st.clone()).oneshot(req).await.unwrap();
        let status = resp.status();
        let bytes = resp.into_body().collect().await.unwrap().to_bytes();
        let v = serde_json::from_slice(&bytes)
            .unwrap_or_else(|_| Value::String(String::from_utf8_lossy(&bytes).into_owned()));
        (status, v)
    }

    async fn get(&self, path: &str) -> (StatusCode, Value) {
        self.call(Request::get(path).body(Body::empty()).unwrap())
            .await
    }

    async fn admin(
        &self,
        method: &str,
        path: &str,
        token: Option<&str>,
        body: Value,
    ) -> (StatusCode, Value) {
        let mut b = Request::builder()
            .method(method)
            .uri(path)
            .header("content-type", "application/json");
        if let Some(t) = token {
            b = b.header("authorization", format!("Bearer {t}"));
        }
        self.call(b.body(Body::from(body.to_string())).unwrap())
            .await
    }

    /// A campaign with one target and hand-made rectangles.
    async fn seed(&self, name: &str, k: i64, rects: &[Rect]) {
        let plan = TargetPlan {
            k,
            z0: 1,
            units: rects
                .iter()
                .map(|r| PlannedUnit {
                    rect: *r,
                    cost_us: 1_000_000,
                })
                .collect(),
        };
        let key = self.st.key.clone();
        let signer: crate::store::campaigns::Signer =
            std::sync::Arc::new(move |s: &cubehunt_common::UnitSpec| {
                sign::sign(&key, &s.canonical_bytes())
            });
        self.st
            .store
            .create_campaign(
                &NewCampaign {
                    name: name.into(),
                    kernel: KERNEL_VERSION.into(),
                    bound: 100,
                    unit_seconds: 1.0,
                    recheck_share: 0.0,
                },
                &[plan],
                &signer,
                crate::now(),
            )
            .await
            .unwrap();
    }

    /// A request signed the way a worker signs it, for this coordinator, at `time`.
    fn stamp(&self, worker_id: i64, time: i64) -> sign::Stamp {
        sign::Stamp::new(&self.st.public_key, worker_id, time)
    }

    async fn signed_raw(
        &self,
        worker_id: i64,
        key: &sign::SecretKey,
        path: &str,
        body: Vec<u8>,
        time: i64,
    ) -> (StatusCode, Value) {
        let stamp = self.stamp(worker_id, time);
        self.send_stamped(&stamp, key, path, body).await
    }

    async fn send_stamped(
        &self,
        stamp: &sign::Stamp,
        key: &sign::SecretKey,
        path: &str,
        body: Vec<u8>,
    ) -> (StatusCode, Value) {
        let sig = sign::sign(key, &sign::request_bytes(stamp, "POST", path, &body));
        let req = Request::post(path)
            .header("content-type", "application/json")
            .header(HDR_WORKER, stamp.worker.to_string())
            .header(HDR_TIME, stamp.time.to_string())
            .header(HDR_NONCE, &stamp.nonce)
            .header(HDR_SIGNATURE, sig)
            .body(Body::from(body))
            .unwrap();
        self.call(req).await
    }

    async fn signed(&self, w: &W, path: &str, body: Value) -> (StatusCode, Value) {
        self.signed_raw(
            w.id,
            &w.key,
            path,
            body.to_string().into_bytes(),
            crate::now(),
        )
        .await
    }

    async fn enrol_kernel(&self, owner: &str, kernel: &str) -> W {
        let key = sign::generate();
        let body = json!({"owner": owner, "public_key": sign::public_to_hex(&key.verifying_key()), "kernel": kernel, "threads": 2, "label": "test-host"});
        let (s, v) = self
            .signed_raw(
                0,
                &key,
                "/api/v1/enrol",
                body.to_string().into_bytes(),
                crate::now(),
            )
            .await;
        assert_eq!(s, StatusCode::OK, "{v}");
        assert_eq!(v["coordinator_key"], self.st.public_key);
        W {
            id: v["worker_id"].as_i64().unwrap(),
            key,
        }
    }

    async fn enrol(&self, owner: &str) -> W {
        self.enrol_kernel(owner, KERNEL_VERSION).await
    }

    async fn lease(&self, w: &W) -> Option<LeaseGrant> {
        let (s, v) = self.signed(w, "/api/v1/lease", json!({"threads": 2})).await;
        assert_eq!(s, StatusCode::OK, "{v}");
        serde_json::from_value::<LeaseResponse>(v).unwrap().lease
    }

    async fn report(
        &self,
        w: &W,
        g: &LeaseGrant,
        h: u64,
        solutions: Vec<Solution>,
    ) -> (StatusCode, Value) {
        let sr = signed_report(w, g, h, solutions);
        self.signed(
            w,
            &format!("/api/v1/lease/{}/report", g.lease_id),
            serde_json::to_value(&sr).unwrap(),
        )
        .await
    }

    async fn worker_view(&self, id: i64) -> Value {
        let (_, v) = self.get("/api/v1/workers").await;
        v.as_array()
            .unwrap()
            .iter()
            .find(|w| w["id"] == id)
            .unwrap()
            .clone()
    }
}

/// The piece digests of a unit as the kernel computes them (honest work).
fn honest_pieces(g: &LeaseGrant) -> Vec<Digest> {
    let u = &g.unit.unit;
    cubehunt_common::pieces::of_unit(u)
        .iter()
        .map(|p| {
            cubehunt_common::kernel::scan(u.k, p, 1, &|_| {})
                .unwrap()
                .digest
        })
        .collect()
}

/// Honest piece digests with the survivor hash of the first piece changed by `h` (`h = 0`:
/// the honest report). What a worker that made up one piece reports.
fn pieces_with(g: &LeaseGrant, h: u64) -> Vec<Digest> {
    let mut p = honest_pieces(g);
    p[0].hash ^= h.wrapping_mul(0x9e37_79b9_7f4a_7c15);
    p
}

/// A report whose pieces are [`pieces_with`]`(g, h)`: the honest report for `h = 0`, a
/// different made-up one for every other `h`.
fn signed_report(w: &W, g: &LeaseGrant, h: u64, solutions: Vec<Solution>) -> SignedReport {
    signed_report_pieces(w, g, pieces_with(g, h), solutions)
}

fn signed_report_pieces(
    w: &W,
    g: &LeaseGrant,
    pieces: Vec<Digest>,
    solutions: Vec<Solution>,
) -> SignedReport {
    let u = &g.unit.unit;
    let digest = pieces.iter().copied().sum();
    let report = Report {
        pieces,
        lease_id: g.lease_id,
        unit_id: u.unit_id,
        worker_id: w.id,
        kernel: u.kernel.clone(),
        k: u.k,
        rect: u.rect,
        digest,
        solutions,
        elapsed_s: 1.0,
    };
    let signature = sign::sign(&w.key, &report.canonical_bytes());
    SignedReport { report, signature }
}

fn main_rect(d_lo: u64) -> Rect {
    Rect {
        region: Region::Main,
        d_lo,
        d_hi: d_lo + 1,
        z_lo: 10,
        z_hi: 100,
    }
}

#[tokio::test]
async fn admin_endpoints_refuse_missing_and_wrong_tokens() {
    let e = env(plain()).await;
    let create = json!({"name": "x", "ks": [33], "bound": "1e3"});
    for token in [None, Some("wrong"), Some(&TOKEN[..63])] {
        let (s, v) = e
            .admin("POST", "/api/v1/admin/campaigns", token, create.clone())
            .await;
        assert_eq!(s, StatusCode::UNAUTHORIZED, "{v}");
        assert!(
            v["error"].as_str().unwrap().starts_with("admin_token"),
            "{v}"
        );
        let (s, _) = e
            .admin("GET", "/api/v1/admin/campaigns", token, json!({}))
            .await;
        assert_eq!(s, StatusCode::UNAUTHORIZED);
        let (s, _) = e
            .admin("POST", "/api/v1/admin/campaigns/x/pause", token, json!({}))
            .await;
        assert_eq!(s, StatusCode::UNAUTHORIZED);
    }
    let (s, v) = e
        .admin("GET", "/api/v1/admin/campaigns", Some(TOKEN), json!({}))
        .await;
    assert_eq!(s, StatusCode::OK, "{v}");
    assert_eq!(v, json!([]));
    // Bad names are refused before any planning.
    let (s, v) = e
        .admin(
            "POST",
            "/api/v1/admin/campaigns",
            Some(TOKEN),
            json!({"name": "no spaces", "ks": [33], "bound": 10}),
        )
        .await;
    assert_eq!(s, StatusCode::BAD_REQUEST, "{v}");
    assert_eq!(v["error"], "bad_name");
}

#[tokio::test]
async fn two_agreeing_owners_settle_and_the_campaign_completes() {
    let e = env(plain()).await;
    // 3 = 1³ + 1³ + 1³ (common practice, no source): z = 1 lies in the small piece (0, 1].
    e.seed(
        "club",
        3,
        &[Rect {
            region: Region::Small,
            d_lo: 0,
            d_hi: 0,
            z_lo: 0,
            z_hi: 1,
        }],
    )
    .await;
    let (a, b) = (e.enrol("alice").await, e.enrol("bob").await);
    let ga = e.lease(&a).await.expect("a unit for alice");
    let gb = e.lease(&b).await.expect("the same unit for bob");
    assert_eq!(ga.unit.unit.unit_id, gb.unit.unit.unit_id);
    // The unit is signed by the coordinator.
    let pk = sign::public_from_hex(&e.st.public_key).unwrap();
    sign::verify(&pk, &ga.unit.unit.canonical_bytes(), &ga.unit.signature).unwrap();
    let sol = vec![Solution::new(1, 1, 1)];
    let (s, v) = e.report(&a, &ga, 1, sol.clone()).await;
    assert_eq!(
        (s, v["accepted"].clone(), v["unit_state"].clone()),
        (StatusCode::OK, json!(true), json!("open")),
        "{v}"
    );
    let (_, c) = e.get("/api/v1/campaigns/club").await;
    assert_eq!(c["state"], "active");
    let (s, v) = e.report(&b, &gb, 1, sol.clone()).await;
    assert_eq!(
        (s, v["unit_state"].clone()),
        (StatusCode::OK, json!("settled")),
        "{v}"
    );
    let (_, c) = e.get("/api/v1/campaigns/club").await;
    assert_eq!(c["state"], "complete", "{c}");
    assert_eq!(c["solutions"], json!([["1", "1", "1"]]));
    assert_eq!(c["units"]["settled"], 1);
    assert_eq!(c["fraction"], 1.0);
    assert_eq!(e.worker_view(a.id).await["units_settled"], 1);
    let (_, sols) = e.get("/api/v1/campaigns/club/solutions").await;
    assert_eq!(sols[0]["k"], 3);
    // Nothing more to hand out.
    assert!(e.lease(&e.enrol("carol").await).await.is_none());
}

#[tokio::test]
async fn one_owner_never_gets_both_leases_of_a_unit() {
    let e = env(plain()).await;
    e.seed("c", 33, &[main_rect(1)]).await;
    let (a1, a2) = (e.enrol("alice").await, e.enrol("alice").await);
    assert_ne!(a1.id, a2.id);
    assert!(e.lease(&a1).await.is_some());
    assert!(
        e.lease(&a2).await.is_none(),
        "second machine of the same owner"
    );
    assert!(e.lease(&a1).await.is_none(), "the same worker again");
    assert!(e.lease(&e.enrol("bob").await).await.is_some());
    assert!(
        e.lease(&e.enrol("carol").await).await.is_none(),
        "two leases are enough"
    );
}

#[tokio::test]
async fn a_unit_waiting_for_its_second_lease_is_offered_at_the_next_sweep() {
    let e = env(plain()).await;
    e.seed("c", 33, &[main_rect(1), main_rect(2), main_rect(3)])
        .await;
    let a = e.enrol("alice").await;
    let g1 = e.lease(&a).await.unwrap();
    let g2 = e.lease(&a).await.unwrap();
    assert_ne!(g1.unit.unit.unit_id, g2.unit.unit.unit_id);
    e.report(&a, &g2, 1, vec![]).await;
    // Nobody else was there when alice took the units: nobody was drawn for their second
    // leases. Bob arrives and asks: an untouched unit comes first. Now that he has asked
    // (and has a thread free), the next sweep draws him for one of alice's units (he is the
    // only eligible worker), and that offer comes before anything else.
    let b = e.enrol("bob").await;
    let first = e.lease(&b).await.unwrap();
    assert!(![g1.unit.unit.unit_id, g2.unit.unit.unit_id].contains(&first.unit.unit.unit_id));
    e.st.store.sweep(crate::now(), &e.st.policy).await.unwrap();
    let gb = e.lease(&b).await.unwrap();
    assert!(
        [g1.unit.unit.unit_id, g2.unit.unit.unit_id].contains(&gb.unit.unit.unit_id),
        "an offered unit first"
    );
}

#[tokio::test]
async fn wrong_digest_is_outvoted_counted_and_quarantined() {
    let e = env(ServiceConfig {
        quarantine_after: 1,
        ..plain()
    })
    .await;
    e.seed("c", 33, &[main_rect(1)]).await;
    let (a, b) = (e.enrol("alice").await, e.enrol("bob").await);
    let ga = e.lease(&a).await.unwrap();
    let gb = e.lease(&b).await.unwrap();
    assert_eq!(ga.unit.unit.unit_id, gb.unit.unit.unit_id);
    let (_, v) = e.report(&a, &ga, 666, vec![]).await;
    assert_eq!(v["unit_state"], "open");
    let (_, v) = e.report(&b, &gb, 0, vec![]).await;
    assert_eq!(v["unit_state"], "disputed", "{v}");
    // The dispute asks for a third owner.
    let c = e.enrol("carol").await;
    let gc = e.lease(&c).await.expect("carol gets the disputed unit");
    assert_eq!(gc.unit.unit.unit_id, ga.unit.unit.unit_id);
    let (_, v) = e.report(&c, &gc, 0, vec![]).await;
    assert_eq!(v["unit_state"], "settled", "{v}");
    let u =
        e.st.store
            .unit(ga.unit.unit.unit_id)
            .await
            .unwrap()
            .unwrap();
    assert_eq!(u.state, crate::lifecycle::UnitState::Settled);
    let reps = e.st.store.unit_reports(u.id()).await.unwrap();
    let verdicts: Vec<(i64, String)> = reps
        .iter()
        .map(|r| (r.worker_id, r.verdict.as_str().to_string()))
        .collect();
    // Alice's outvoted report is her error; one error quarantines at this setting, which
    // voids her report (it no longer votes).
    assert_eq!(
        verdicts,
        vec![
            (a.id, "voided".into()),
            (b.id, "agree".into()),
            (c.id, "agree".into())
        ]
    );
    assert_eq!(e.worker_view(a.id).await["errors"], 1);
    assert_eq!(e.worker_view(b.id).await["errors"], 0);
    assert_eq!(e.worker_view(a.id).await["quarantined"], true);
    let (s, v) = e.signed(&a, "/api/v1/lease", json!({})).await;
    assert_eq!(s, StatusCode::FORBIDDEN, "{v}");
    assert_eq!(v["error"], "quarantined");
}

#[tokio::test]
async fn forged_and_misplaced_solutions_are_refused_and_counted() {
    let e = env(plain()).await;
    // d = x + y ∈ [1, 2), |z| ∈ (10, 100]: neither (1, 1, 1) (d = 2) nor (4, 4, −5) (d = 8)
    // lies in it.
    e.seed("c", 3, &[main_rect(1)]).await;
    let a = e.enrol("alice").await;
    let g = e.lease(&a).await.unwrap();
    // 1 + 8 + 27 ≠ 3.
    let (s, v) = e.report(&a, &g, 1, vec![Solution::new(1, 2, 3)]).await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY, "{v}");
    assert_eq!(v["error"], "false_solution");
    assert_eq!(e.worker_view(a.id).await["errors"], 1);
    // Sending it again changes nothing.
    let (s, _) = e.report(&a, &g, 1, vec![Solution::new(1, 2, 3)]).await;
    assert_eq!(s, StatusCode::CONFLICT);
    assert_eq!(e.worker_view(a.id).await["errors"], 1);
    // A true solution outside the unit: 3 = 1³ + 1³ + 1³.
    let b = e.enrol("bob").await;
    let gb = e.lease(&b).await.unwrap();
    let (s, v) = e.report(&b, &gb, 1, vec![Solution::new(1, 1, 1)]).await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY, "{v}");
    assert!(v["message"].as_str().unwrap().contains("outside"), "{v}");
    assert_eq!(e.worker_view(b.id).await["errors"], 1);
    let (_, c) = e.get("/api/v1/campaigns/c").await;
    assert_eq!(c["solutions"], json!([]));
    // 3 = 4³ + 4³ + (−5)³ (common practice, no source) is true and outside the unit:
    // refused too.
    let carol = e.enrol("carol").await;
    let gc = e.lease(&carol).await.unwrap();
    assert!(Solution::new(4, 4, -5).verify(3));
    let (s, _) = e
        .report(&carol, &gc, 1, vec![Solution::new(4, 4, -5)])
        .await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY);
}

#[tokio::test]
async fn reports_for_someone_elses_lease_or_with_altered_fields_are_refused() {
    let e = env(plain()).await;
    e.seed("c", 33, &[main_rect(1)]).await;
    let (a, b) = (e.enrol("alice").await, e.enrol("bob").await);
    let ga = e.lease(&a).await.unwrap();
    // Bob reports alice's lease (signed by bob, claiming to be bob).
    let mut sr = signed_report(&b, &ga, 1, vec![]);
    sr.report.worker_id = b.id;
    sr.signature = sign::sign(&b.key, &sr.report.canonical_bytes());
    let (s, v) = e
        .signed(
            &b,
            &format!("/api/v1/lease/{}/report", ga.lease_id),
            serde_json::to_value(&sr).unwrap(),
        )
        .await;
    assert_eq!(s, StatusCode::FORBIDDEN, "{v}");
    assert_eq!(v["error"], "not_your_lease");
    // Alice claims another rectangle than the one leased.
    let mut sr = signed_report(&a, &ga, 1, vec![]);
    sr.report.rect.d_hi += 1;
    sr.signature = sign::sign(&a.key, &sr.report.canonical_bytes());
    let (s, v) = e
        .signed(
            &a,
            &format!("/api/v1/lease/{}/report", ga.lease_id),
            serde_json::to_value(&sr).unwrap(),
        )
        .await;
    assert_eq!(
        (s, v["error"].clone()),
        (StatusCode::BAD_REQUEST, json!("report_mismatch")),
        "{v}"
    );
    // A report signature that does not verify.
    let mut sr = signed_report(&a, &ga, 1, vec![]);
    sr.report.digest.hash ^= 1;
    let (s, v) = e
        .signed(
            &a,
            &format!("/api/v1/lease/{}/report", ga.lease_id),
            serde_json::to_value(&sr).unwrap(),
        )
        .await;
    assert_eq!(
        (s, v["error"].clone()),
        (StatusCode::UNAUTHORIZED, json!("bad_report_signature")),
        "{v}"
    );
    // Nothing was stored.
    assert!(e
        .st
        .store
        .unit_reports(ga.unit.unit.unit_id)
        .await
        .unwrap()
        .is_empty());
}

#[tokio::test]
async fn a_replayed_report_changes_nothing() {
    let e = env(plain()).await;
    e.seed("c", 33, &[main_rect(1)]).await;
    let a = e.enrol("alice").await;
    let g = e.lease(&a).await.unwrap();
    let sr = serde_json::to_value(signed_report(&a, &g, 9, vec![])).unwrap();
    let path = format!("/api/v1/lease/{}/report", g.lease_id);
    let (s, v) = e.signed(&a, &path, sr.clone()).await;
    assert_eq!((s, v["accepted"].clone()), (StatusCode::OK, json!(true)));
    let before = (
        e.worker_view(a.id).await,
        e.st.store.unit_reports(g.unit.unit.unit_id).await.unwrap(),
    );
    let (s, v) = e.signed(&a, &path, sr).await;
    assert_eq!(
        (s, v["accepted"].clone(), v["unit_state"].clone()),
        (StatusCode::OK, json!(false), json!("open")),
        "{v}"
    );
    let after = (
        e.worker_view(a.id).await,
        e.st.store.unit_reports(g.unit.unit.unit_id).await.unwrap(),
    );
    assert_eq!(before.0["reports"], after.0["reports"]);
    let ids = |v: &[crate::store::ReportRow]| -> Vec<(i64, String)> {
        v.iter()
            .map(|r| (r.id, r.verdict.as_str().to_string()))
            .collect()
    };
    assert_eq!(ids(&before.1), ids(&after.1));
}

#[tokio::test]
async fn expired_leases_are_handed_out_again() {
    let e = env(plain()).await;
    e.seed("c", 33, &[main_rect(1)]).await;
    let (a, b) = (e.enrol("alice").await, e.enrol("bob").await);
    let ga = e.lease(&a).await.unwrap();
    assert!(e.lease(&b).await.is_some());
    let c = e.enrol("carol").await;
    assert!(e.lease(&c).await.is_none());
    // Heartbeats extend a held lease.
    let (s, v) = e
        .signed(
            &a,
            &format!("/api/v1/lease/{}/heartbeat", ga.lease_id),
            json!({"progress": 0.5}),
        )
        .await;
    assert_eq!((s, v["keep_going"].clone()), (StatusCode::OK, json!(true)));
    assert!(v["deadline"].as_i64().unwrap() >= ga.deadline);
    // Time passes beyond every deadline: the sweep expires both leases.
    assert_eq!(
        e.st.store
            .sweep(crate::now() + 30 * 86400, &e.st.policy)
            .await
            .unwrap(),
        2
    );
    let gc = e.lease(&c).await.expect("carol gets the expired unit");
    assert_eq!(gc.unit.unit.unit_id, ga.unit.unit.unit_id);
    // Alice's heartbeat now says stop; her late report still counts (the work was leased).
    let (_, v) = e
        .signed(
            &a,
            &format!("/api/v1/lease/{}/heartbeat", ga.lease_id),
            json!({}),
        )
        .await;
    assert_eq!(v["keep_going"], false);
    let (s, v) = e.report(&a, &ga, 5, vec![]).await;
    assert_eq!(
        (s, v["accepted"].clone()),
        (StatusCode::OK, json!(true)),
        "{v}"
    );
    let (_, v) = e.report(&c, &gc, 5, vec![]).await;
    assert_eq!(v["unit_state"], "settled");
}

#[tokio::test]
async fn pause_and_cancel_stop_leasing_and_resume_restarts_it() {
    let e = env(plain()).await;
    e.seed("c", 33, &[main_rect(1), main_rect(2)]).await;
    let a = e.enrol("alice").await;
    let g = e.lease(&a).await.unwrap();
    let (s, v) = e
        .admin(
            "POST",
            "/api/v1/admin/campaigns/c/pause",
            Some(TOKEN),
            json!({}),
        )
        .await;
    assert_eq!(
        (s, v["state"].clone()),
        (StatusCode::OK, json!("paused")),
        "{v}"
    );
    assert!(e.lease(&a).await.is_none());
    let (_, v) = e
        .signed(
            &a,
            &format!("/api/v1/lease/{}/heartbeat", g.lease_id),
            json!({}),
        )
        .await;
    assert_eq!(v["keep_going"], false);
    let (_, v) = e
        .admin(
            "POST",
            "/api/v1/admin/campaigns/c/resume",
            Some(TOKEN),
            json!({}),
        )
        .await;
    assert_eq!(v["state"], "active");
    assert!(e.lease(&a).await.is_some());
    let (_, v) = e
        .admin(
            "POST",
            "/api/v1/admin/campaigns/c/cancel",
            Some(TOKEN),
            json!({}),
        )
        .await;
    assert_eq!(v["state"], "cancelled");
    assert!(e.lease(&e.enrol("bob").await).await.is_none());
    let (s, v) = e
        .admin(
            "POST",
            "/api/v1/admin/campaigns/c/resume",
            Some(TOKEN),
            json!({}),
        )
        .await;
    assert_eq!(
        (s, v["error"].clone()),
        (StatusCode::CONFLICT, json!("campaign_cancelled"))
    );
    let (s, _) = e
        .admin(
            "POST",
            "/api/v1/admin/campaigns/c/explode",
            Some(TOKEN),
            json!({}),
        )
        .await;
    assert_eq!(s, StatusCode::NOT_FOUND);
}

#[tokio::test]
async fn units_go_only_to_workers_of_the_pinned_kernel() {
    let e = env(plain()).await;
    e.seed("c", 33, &[main_rect(1)]).await;
    let old = e.enrol_kernel("alice", "cubehunt-kernel/0").await;
    assert!(e.lease(&old).await.is_none());
    assert!(e.lease(&e.enrol("bob").await).await.is_some());
}

#[tokio::test]
async fn release_gives_the_unit_back() {
    let e = env(plain()).await;
    e.seed("c", 33, &[main_rect(1)]).await;
    let (a, b) = (e.enrol("alice").await, e.enrol("bob").await);
    let ga = e.lease(&a).await.unwrap();
    e.lease(&b).await.unwrap();
    let c = e.enrol("carol").await;
    let (s, v) = e
        .signed(
            &a,
            &format!("/api/v1/lease/{}/release", ga.lease_id),
            json!({}),
        )
        .await;
    assert_eq!((s, v["released"].clone()), (StatusCode::OK, json!(true)));
    assert!(e.lease(&c).await.is_some());
    let (s, v) = e.report(&a, &ga, 1, vec![]).await;
    assert_eq!(
        (s, v["error"].clone()),
        (StatusCode::CONFLICT, json!("lease_released"))
    );
    // Someone else's lease cannot be released.
    let (s, _) = e
        .signed(
            &c,
            &format!("/api/v1/lease/{}/release", ga.lease_id),
            json!({}),
        )
        .await;
    assert_eq!(s, StatusCode::FORBIDDEN);
}

#[tokio::test]
async fn signed_requests_are_checked() {
    let e = env(plain()).await;
    let a = e.enrol("alice").await;
    let body = b"{}".to_vec();
    // Wrong key.
    let (s, v) = e
        .signed_raw(
            a.id,
            &sign::generate(),
            "/api/v1/lease",
            body.clone(),
            crate::now(),
        )
        .await;
    assert_eq!(
        (s, v["error"].clone()),
        (StatusCode::UNAUTHORIZED, json!("bad_signature"))
    );
    // Stale time.
    let (s, v) = e
        .signed_raw(
            a.id,
            &a.key,
            "/api/v1/lease",
            body.clone(),
            crate::now() - 3600,
        )
        .await;
    assert_eq!(
        (s, v["error"].clone()),
        (StatusCode::UNAUTHORIZED, json!("clock_skew"))
    );
    // Unknown worker.
    let (s, v) = e
        .signed_raw(999, &a.key, "/api/v1/lease", body.clone(), crate::now())
        .await;
    assert_eq!(
        (s, v["error"].clone()),
        (StatusCode::UNAUTHORIZED, json!("unknown_worker"))
    );
    // Signature for another path.
    let stamp = e.stamp(a.id, crate::now());
    let sig = sign::sign(
        &a.key,
        &sign::request_bytes(&stamp, "POST", "/api/v1/enrol", &body),
    );
    let req = Request::post("/api/v1/lease")
        .header(HDR_WORKER, a.id.to_string())
        .header(HDR_TIME, stamp.time.to_string())
        .header(HDR_NONCE, &stamp.nonce)
        .header(HDR_SIGNATURE, sig)
        .body(Body::from(body.clone()))
        .unwrap();
    assert_eq!(e.call(req).await.0, StatusCode::UNAUTHORIZED);
    // Signed for another coordinator: refused, so a request captured by one coordinator
    // cannot be replayed at another.
    let elsewhere = sign::Stamp::new(
        &sign::public_to_hex(&sign::generate().verifying_key()),
        a.id,
        crate::now(),
    );
    let (s, v) = e
        .send_stamped(&elsewhere, &a.key, "/api/v1/lease", body.clone())
        .await;
    assert_eq!(s, StatusCode::UNAUTHORIZED, "{v}");
    // The same signed request twice: the second is refused as a replay and changes nothing.
    let once = e.stamp(a.id, crate::now());
    let (s, v) = e
        .send_stamped(&once, &a.key, "/api/v1/lease", body.clone())
        .await;
    assert_eq!(s, StatusCode::OK, "{v}");
    let leases_before = e.worker_view(a.id).await["active_leases"].clone();
    let (s, v) = e
        .send_stamped(&once, &a.key, "/api/v1/lease", body.clone())
        .await;
    assert_eq!(
        (s, v["error"].clone()),
        (StatusCode::CONFLICT, json!("replayed")),
        "{v}"
    );
    assert_eq!(e.worker_view(a.id).await["active_leases"], leases_before);
    // A nonce that is not 32 hex characters.
    let mut bad = e.stamp(a.id, crate::now());
    bad.nonce = "x".repeat(32);
    let (s, _) = e
        .send_stamped(&bad, &a.key, "/api/v1/lease", body.clone())
        .await;
    assert_eq!(s, StatusCode::UNAUTHORIZED);
    // No headers at all.
    let (s, _) = e
        .call(
            Request::post("/api/v1/lease")
                .body(Body::from(body))
                .unwrap(),
        )
        .await;
    assert_eq!(s, StatusCode::UNAUTHORIZED);
    // Enrolment signed by another key than the one enrolled, and a bad owner name.
    let key = sign::generate();
    let other = sign::generate();
    let eb = json!({"owner": "bob", "public_key": sign::public_to_hex(&key.verifying_key()), "kernel": KERNEL_VERSION, "threads": 1});
    let (s, _) = e
        .signed_raw(
            0,
            &other,
            "/api/v1/enrol",
            eb.to_string().into_bytes(),
            crate::now(),
        )
        .await;
    assert_eq!(s, StatusCode::UNAUTHORIZED);
    let eb = json!({"owner": "bob smith", "public_key": sign::public_to_hex(&key.verifying_key()), "kernel": KERNEL_VERSION, "threads": 1});
    let (s, v) = e
        .signed_raw(
            0,
            &key,
            "/api/v1/enrol",
            eb.to_string().into_bytes(),
            crate::now(),
        )
        .await;
    assert_eq!(
        (s, v["error"].clone()),
        (StatusCode::BAD_REQUEST, json!("bad_owner"))
    );
    // The same key cannot move to another owner.
    let eb = json!({"owner": "mallory", "public_key": sign::public_to_hex(&a.key.verifying_key()), "kernel": KERNEL_VERSION, "threads": 1});
    let (s, _) = e
        .signed_raw(
            0,
            &a.key,
            "/api/v1/enrol",
            eb.to_string().into_bytes(),
            crate::now(),
        )
        .await;
    assert_eq!(s, StatusCode::CONFLICT);
}

#[tokio::test]
async fn oversized_bodies_are_refused() {
    let e = env(plain()).await;
    let a = e.enrol("alice").await;
    let big = vec![b' '; MAX_BODY_BYTES + 10];
    let (s, v) = e
        .signed_raw(a.id, &a.key, "/api/v1/lease", big, crate::now())
        .await;
    assert_eq!(s, StatusCode::PAYLOAD_TOO_LARGE, "{v}");
    assert_eq!(v["error"], "body_too_large");
}

#[tokio::test]
async fn monitoring_metrics_and_openapi_agree_with_the_routes() {
    let e = env(plain()).await;
    e.seed("c", 33, &[main_rect(1)]).await;
    let (s, v) = e.get("/healthz").await;
    assert_eq!((s, v["ok"].clone()), (StatusCode::OK, json!(true)));
    let (s, m) = e.get("/metrics").await;
    assert_eq!(s, StatusCode::OK);
    let m = m.as_str().unwrap().to_string();
    assert!(
        m.contains("cubehunt_units{campaign=\"c\",state=\"open\"} 1"),
        "{m}"
    );
    assert!(m.contains("# TYPE cubehunt_workers gauge"));
    let (s, html) = e.get("/").await;
    assert_eq!(s, StatusCode::OK);
    assert!(html.as_str().unwrap().contains("<html"));
    let (_, doc) = e.get("/api/v1/openapi.json").await;
    assert_eq!(doc["openapi"], "3.1.0");
    // Every documented operation exists (is not answered by the fallback).
    let mut n = 0;
    for (path, ops) in doc["paths"].as_object().unwrap() {
        let concrete = path
            .replace("{name}", "c")
            .replace("{id}", "1")
            .replace("{action}", "pause");
        for method in ops.as_object().unwrap().keys() {
            let req = Request::builder()
                .method(method.to_uppercase().as_str())
                .uri(&concrete)
                .body(Body::empty())
                .unwrap();
            let (_, v) = e.call(req).await;
            assert_ne!(
                v["error"], "no_route",
                "{method} {path} is documented but not routed"
            );
            n += 1;
        }
    }
    assert!(n >= 17, "{n} operations documented");
    let (s, v) = e.get("/api/v1/nothing-here").await;
    assert_eq!(
        (s, v["error"].clone()),
        (StatusCode::NOT_FOUND, json!("no_route"))
    );
}

/// A POST signed as a worker signs it, for the bad-input table.
fn signed_request(
    stamp: &sign::Stamp,
    key: &sign::SecretKey,
    path: &str,
    body: &[u8],
) -> Request<Body> {
    let sig = sign::sign(key, &sign::request_bytes(stamp, "POST", path, body));
    Request::post(path)
        .header("content-type", "application/json")
        .header(HDR_WORKER, stamp.worker.to_string())
        .header(HDR_TIME, stamp.time.to_string())
        .header(HDR_NONCE, &stamp.nonce)
        .header(HDR_SIGNATURE, sig)
        .body(Body::from(body.to_vec()))
        .unwrap()
}

fn admin_request(method: &str, path: &str, token: Option<&str>, body: &str) -> Request<Body> {
    let mut b = Request::builder()
        .method(method)
        .uri(path)
        .header("content-type", "application/json");
    if let Some(t) = token {
        b = b.header("authorization", format!("Bearer {t}"));
    }
    b.body(Body::from(body.to_string())).unwrap()
}

/// Every endpoint against malformed, mistyped, incomplete, oversized, absurd, unauthorised
/// and replayed input: each is refused with the expected 4xx status and an `ApiError` whose
/// code names the problem and whose message is not empty, and the store (every row of every
/// table) is the same afterwards.
#[tokio::test]
async fn bad_input_is_refused_with_a_reason_and_changes_nothing() {
    let e = env(plain()).await;
    e.seed("c", 33, &[main_rect(1), main_rect(2)]).await;
    let a = e.enrol("alice").await;
    let b = e.enrol("bob").await;
    let g = e.lease(&a).await.expect("a unit for alice");
    let hb = format!("/api/v1/lease/{}/heartbeat", g.lease_id);
    let rep = format!("/api/v1/lease/{}/report", g.lease_id);
    let rel = format!("/api/v1/lease/{}/release", g.lease_id);
    // A heartbeat that is accepted once, to be replayed below.
    let once = e.stamp(a.id, crate::now());
    let hb_body = br#"{"progress": 0.5}"#.to_vec();
    let (s, v) = e.send_stamped(&once, &a.key, &hb, hb_body.clone()).await;
    assert_eq!(s, StatusCode::OK, "{v}");
    // Pages of the worker list: by id, `after` exclusive, `limit` at most.
    let (s, v) = e.get("/api/v1/workers?limit=1").await;
    assert_eq!((s, v.as_array().unwrap().len()), (StatusCode::OK, 1), "{v}");
    assert_eq!(v[0]["id"], a.id);
    let (_, v) = e.get(&format!("/api/v1/workers?after={}", a.id)).await;
    assert_eq!(v.as_array().unwrap().len(), 1, "{v}");
    assert_eq!(v[0]["id"], b.id);
    let (_, v) = e.get(&format!("/api/v1/workers?after={}", b.id)).await;
    assert_eq!(v, json!([]));
    let before = e.st.store.dump().await.unwrap();
    assert!(before
        .iter()
        .any(|(t, rows)| t == "leases" && rows.len() == 1));

    let now = crate::now();
    let sa =
        |path: &str, body: &str| signed_request(&e.stamp(a.id, now), &a.key, path, body.as_bytes());
    let sb =
        |path: &str, body: &str| signed_request(&e.stamp(b.id, now), &b.key, path, body.as_bytes());
    let new_key = sign::generate();
    let new_pub = sign::public_to_hex(&new_key.verifying_key());
    let enrol =
        |body: String| signed_request(&e.stamp(0, now), &new_key, "/api/v1/enrol", body.as_bytes());
    let enrol_ok = |extra: &str| {
        format!(
            r#"{{"owner": "carol", "public_key": "{new_pub}", "kernel": "{KERNEL_VERSION}", "threads": 2{extra}}}"#
        )
    };
    let admin = |m: &str, p: &str, body: &str| admin_request(m, p, Some(TOKEN), body);
    let create = |body: &str| admin("POST", "/api/v1/admin/campaigns", body);
    let huge = "9".repeat(MAX_BODY_BYTES + 1);
    let report_body = serde_json::to_string(&signed_report(&b, &g, 0, vec![])).unwrap();
    let unsigned = |path: &str, body: &str| {
        Request::post(path)
            .header("content-type", "application/json")
            .body(Body::from(body.to_string()))
            .unwrap()
    };
    let bad_sig = {
        let mut r = sa("/api/v1/lease", "{}");
        r.headers_mut()
            .insert(HDR_SIGNATURE, "00".repeat(64).parse().unwrap());
        r
    };
    let get = |p: &str| Request::get(p).body(Body::empty()).unwrap();

    use StatusCode as S;
    let cases: Vec<(&str, Request<Body>, StatusCode, &str)> = vec![
        // Read-only endpoints.
        (
            "unknown campaign",
            get("/api/v1/campaigns/nope"),
            S::NOT_FOUND,
            "no_campaign",
        ),
        (
            "unknown campaign's solutions",
            get("/api/v1/campaigns/nope/solutions"),
            S::NOT_FOUND,
            "no_campaign",
        ),
        (
            "certificate, k = 1e800000000",
            get("/api/v1/campaigns/c/targets/1e800000000/certificate"),
            S::BAD_REQUEST,
            "bad_k",
        ),
        (
            "certificate, k beyond 2^63",
            get("/api/v1/campaigns/c/targets/9223372036854775808/certificate"),
            S::BAD_REQUEST,
            "bad_k",
        ),
        (
            "certificate, k not a number",
            get("/api/v1/campaigns/c/targets/abc/certificate"),
            S::BAD_REQUEST,
            "bad_k",
        ),
        (
            "certificate, bound = 1e800000000",
            get("/api/v1/campaigns/c/targets/33/certificate?bound=1e800000000"),
            S::BAD_REQUEST,
            "bad_bound",
        ),
        (
            "certificate, negative bound",
            get("/api/v1/campaigns/c/targets/33/certificate?bound=-5"),
            S::BAD_REQUEST,
            "bad_bound",
        ),
        (
            "certificate, unknown format",
            get("/api/v1/campaigns/c/targets/33/certificate?format=xml"),
            S::BAD_REQUEST,
            "bad_format",
        ),
        (
            "certificate, unknown target",
            get("/api/v1/campaigns/c/targets/42/certificate"),
            S::NOT_FOUND,
            "not_found",
        ),
        (
            "certificate, incomplete target",
            get("/api/v1/campaigns/c/targets/33/certificate"),
            S::CONFLICT,
            "target_incomplete",
        ),
        (
            "export, unknown kind",
            get("/api/v1/campaigns/c/export/everything"),
            S::NOT_FOUND,
            "not_found",
        ),
        (
            "export, unknown format",
            get("/api/v1/campaigns/c/export/ledger?format=xml"),
            S::BAD_REQUEST,
            "bad_format",
        ),
        (
            "export, unknown campaign",
            get("/api/v1/campaigns/nope/export/ledger"),
            S::NOT_FOUND,
            "not_found",
        ),
        (
            "unknown route",
            get("/api/v1/nothing"),
            S::NOT_FOUND,
            "no_route",
        ),
        (
            "workers, limit zero",
            get("/api/v1/workers?limit=0"),
            S::BAD_REQUEST,
            "bad_page",
        ),
        (
            "workers, limit beyond the maximum",
            get("/api/v1/workers?limit=1001"),
            S::BAD_REQUEST,
            "bad_page",
        ),
        (
            "workers, after 1e800000000",
            get("/api/v1/workers?after=1e800000000"),
            S::BAD_REQUEST,
            "bad_page",
        ),
        (
            "workers, negative after",
            get("/api/v1/workers?after=-1"),
            S::BAD_REQUEST,
            "bad_page",
        ),
        // Admin: tokens.
        (
            "admin, no token",
            admin_request(
                "POST",
                "/api/v1/admin/campaigns",
                None,
                r#"{"name": "d", "ks": [33], "bound": 10}"#,
            ),
            S::UNAUTHORIZED,
            "admin_token_missing",
        ),
        (
            "admin, wrong token",
            admin_request(
                "POST",
                "/api/v1/admin/campaigns",
                Some(&TOKEN[1..]),
                r#"{"name": "d", "ks": [33], "bound": 10}"#,
            ),
            S::UNAUTHORIZED,
            "admin_token_wrong",
        ),
        (
            "admin, not a bearer token",
            admin_request("POST", "/api/v1/admin/campaigns/c/pause", None, "").map(|b| b),
            S::UNAUTHORIZED,
            "admin_token_missing",
        ),
        (
            "admin pause, wrong token",
            admin_request("POST", "/api/v1/admin/campaigns/c/pause", Some("x"), ""),
            S::UNAUTHORIZED,
            "admin_token_wrong",
        ),
        (
            "admin quarantine, no token",
            admin_request(
                "POST",
                &format!("/api/v1/admin/workers/{}/quarantine", a.id),
                None,
                "",
            ),
            S::UNAUTHORIZED,
            "admin_token_missing",
        ),
        (
            "admin invite, wrong token",
            admin_request(
                "POST",
                "/api/v1/admin/invites",
                Some("x"),
                r#"{"owner": "dan"}"#,
            ),
            S::UNAUTHORIZED,
            "admin_token_wrong",
        ),
        // Admin: bodies.
        (
            "create, malformed JSON",
            create(r#"{"name": "d", "ks": [33"#),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "create, not an object",
            create("[1, 2]"),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "create, name of the wrong type",
            create(r#"{"name": 5, "ks": [33], "bound": 10}"#),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "create, missing bound",
            create(r#"{"name": "d", "ks": [33]}"#),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "create, unknown field",
            create(r#"{"name": "d", "ks": [33], "bound": 10, "colour": "red"}"#),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "create, bad name",
            create(r#"{"name": "a b", "ks": [33], "bound": 10}"#),
            S::BAD_REQUEST,
            "bad_name",
        ),
        (
            "create, negative bound",
            create(r#"{"name": "d", "ks": [33], "bound": -5}"#),
            S::BAD_REQUEST,
            "bad_bound",
        ),
        (
            "create, zero bound",
            create(r#"{"name": "d", "ks": [33], "bound": 0}"#),
            S::BAD_REQUEST,
            "bad_bound",
        ),
        (
            "create, bound beyond 2^64",
            create(r#"{"name": "d", "ks": [33], "bound": 18446744073709551617}"#),
            S::BAD_REQUEST,
            "bad_bound",
        ),
        (
            "create, bound 1e800000000 as a number",
            create(r#"{"name": "d", "ks": [33], "bound": 1e800000000}"#),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "create, bound 1e800000000 as a string",
            create(r#"{"name": "d", "ks": [33], "bound": "1e800000000"}"#),
            S::BAD_REQUEST,
            "bad_bound",
        ),
        (
            "create, bound beyond the kernel's range",
            create(r#"{"name": "d", "ks": [33], "bound": "1e19"}"#),
            S::BAD_REQUEST,
            "bad_bound",
        ),
        (
            "create, k beyond 2^63",
            create(r#"{"name": "d", "ks": [9223372036854775808], "bound": 10}"#),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "create, k list 1e800000000",
            create(r#"{"name": "d", "ks": "1e800000000", "bound": 10}"#),
            S::BAD_REQUEST,
            "bad_target",
        ),
        (
            "create, k = 4 (mod 9)",
            create(r#"{"name": "d", "ks": [4], "bound": 10}"#),
            S::BAD_REQUEST,
            "bad_target",
        ),
        (
            "create, k twice",
            create(r#"{"name": "d", "ks": [33, 33], "bound": 10}"#),
            S::BAD_REQUEST,
            "bad_target",
        ),
        (
            "create, no targets",
            create(r#"{"name": "d", "ks": [], "bound": 10}"#),
            S::BAD_REQUEST,
            "bad_target",
        ),
        (
            "create, negative unit seconds",
            create(r#"{"name": "d", "ks": [33], "bound": 10, "unit_seconds": -1}"#),
            S::BAD_REQUEST,
            "bad_unit_seconds",
        ),
        (
            "create, zero unit seconds",
            create(r#"{"name": "d", "ks": [33], "bound": 10, "unit_seconds": 0}"#),
            S::BAD_REQUEST,
            "bad_unit_seconds",
        ),
        (
            "create, existing name",
            create(r#"{"name": "c", "ks": [33], "bound": 10}"#),
            S::CONFLICT,
            "campaign_exists",
        ),
        (
            "create, oversize body",
            create(&huge),
            S::PAYLOAD_TOO_LARGE,
            "body_too_large",
        ),
        (
            "action on an unknown campaign",
            admin("POST", "/api/v1/admin/campaigns/nope/pause", ""),
            S::NOT_FOUND,
            "no_campaign",
        ),
        (
            "unknown action",
            admin("POST", "/api/v1/admin/campaigns/c/explode", ""),
            S::NOT_FOUND,
            "no_action",
        ),
        (
            "extend, malformed",
            admin("POST", "/api/v1/admin/campaigns/c/extend", "{"),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "extend, smaller bound",
            admin(
                "POST",
                "/api/v1/admin/campaigns/c/extend",
                r#"{"bound": 5}"#,
            ),
            S::CONFLICT,
            "bound_not_larger",
        ),
        (
            "extend, bound 1e800000000",
            admin(
                "POST",
                "/api/v1/admin/campaigns/c/extend",
                r#"{"bound": "1e800000000"}"#,
            ),
            S::BAD_REQUEST,
            "bad_bound",
        ),
        (
            "worker action, bad id",
            admin("POST", "/api/v1/admin/workers/abc/trust", ""),
            S::BAD_REQUEST,
            "bad_worker_id",
        ),
        (
            "worker action, id beyond 2^63",
            admin(
                "POST",
                "/api/v1/admin/workers/9223372036854775808/trust",
                "",
            ),
            S::BAD_REQUEST,
            "bad_worker_id",
        ),
        (
            "worker action, unknown worker",
            admin("POST", "/api/v1/admin/workers/999/trust", ""),
            S::NOT_FOUND,
            "not_found",
        ),
        (
            "worker action, unknown action",
            admin(
                "POST",
                &format!("/api/v1/admin/workers/{}/promote", a.id),
                "",
            ),
            S::NOT_FOUND,
            "no_action",
        ),
        (
            "worker action, unknown field",
            admin(
                "POST",
                &format!("/api/v1/admin/workers/{}/quarantine", a.id),
                r#"{"why": "x"}"#,
            ),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "invite, malformed",
            admin("POST", "/api/v1/admin/invites", "{"),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "invite, bad owner",
            admin("POST", "/api/v1/admin/invites", r#"{"owner": "a/b"}"#),
            S::BAD_REQUEST,
            "bad_owner",
        ),
        // Enrolment.
        (
            "enrol, unsigned",
            unsigned("/api/v1/enrol", &enrol_ok("")),
            S::UNAUTHORIZED,
            "unsigned",
        ),
        (
            "enrol, malformed",
            enrol("{\"owner\":".into()),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "enrol, missing key",
            enrol(format!(
                r#"{{"owner": "carol", "kernel": "{KERNEL_VERSION}", "threads": 2}}"#
            )),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "enrol, unknown field",
            enrol(enrol_ok(r#", "admin": true"#)),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "enrol, negative threads",
            enrol(enrol_ok("").replace("\"threads\": 2", "\"threads\": -2")),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "enrol, threads 1e800000000",
            enrol(enrol_ok("").replace("\"threads\": 2", "\"threads\": 1e800000000")),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "enrol, threads beyond the limit",
            enrol(enrol_ok("").replace("\"threads\": 2", "\"threads\": 5000")),
            S::BAD_REQUEST,
            "bad_enrolment",
        ),
        (
            "enrol, bad owner",
            enrol(enrol_ok("").replace("carol", "car ol")),
            S::BAD_REQUEST,
            "bad_owner",
        ),
        (
            "enrol, long label",
            enrol(enrol_ok(&format!(r#", "label": "{}""#, "x".repeat(65)))),
            S::BAD_REQUEST,
            "bad_enrolment",
        ),
        (
            "enrol, key not hex",
            enrol(enrol_ok("").replace(&new_pub, "zz")),
            S::BAD_REQUEST,
            "bad_key",
        ),
        (
            "enrol, signed by another key",
            signed_request(
                &e.stamp(0, now),
                &a.key,
                "/api/v1/enrol",
                enrol_ok("").as_bytes(),
            ),
            S::UNAUTHORIZED,
            "bad_signature",
        ),
        (
            "enrol, with a worker id",
            signed_request(
                &e.stamp(a.id, now),
                &new_key,
                "/api/v1/enrol",
                enrol_ok("").as_bytes(),
            ),
            S::BAD_REQUEST,
            "bad_enrolment",
        ),
        (
            "enrol, oversize body",
            enrol(huge.clone()),
            S::PAYLOAD_TOO_LARGE,
            "body_too_large",
        ),
        // Signed worker requests: signatures and clocks.
        (
            "lease, unsigned",
            unsigned("/api/v1/lease", "{}"),
            S::UNAUTHORIZED,
            "unsigned",
        ),
        (
            "lease, wrong signature",
            bad_sig,
            S::UNAUTHORIZED,
            "bad_signature",
        ),
        (
            "lease, signed by another worker's key",
            signed_request(&e.stamp(a.id, now), &b.key, "/api/v1/lease", b"{}"),
            S::UNAUTHORIZED,
            "bad_signature",
        ),
        (
            "lease, an hour old",
            signed_request(&e.stamp(a.id, now - 3600), &a.key, "/api/v1/lease", b"{}"),
            S::UNAUTHORIZED,
            "clock_skew",
        ),
        (
            "lease, unknown worker",
            signed_request(&e.stamp(999, now), &a.key, "/api/v1/lease", b"{}"),
            S::UNAUTHORIZED,
            "unknown_worker",
        ),
        (
            "lease, worker id beyond 2^63",
            signed_request(
                &sign::Stamp {
                    worker: -1,
                    ..e.stamp(a.id, now)
                },
                &a.key,
                "/api/v1/lease",
                b"{}",
            ),
            S::UNAUTHORIZED,
            "unsigned",
        ),
        (
            "lease, malformed",
            sa("/api/v1/lease", "{\"threads\""),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "lease, unknown field",
            sa("/api/v1/lease", r#"{"threads": 1, "unit": 1}"#),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "lease, threads of the wrong type",
            sa("/api/v1/lease", r#"{"threads": "many"}"#),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "lease, negative threads",
            sa("/api/v1/lease", r#"{"threads": -1}"#),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "lease, oversize body",
            sa("/api/v1/lease", &huge),
            S::PAYLOAD_TOO_LARGE,
            "body_too_large",
        ),
        // Leases by id.
        (
            "heartbeat, replayed",
            signed_request(&once, &a.key, &hb, &hb_body),
            S::CONFLICT,
            "replayed",
        ),
        (
            "heartbeat, lease id not a number",
            sa("/api/v1/lease/abc/heartbeat", ""),
            S::BAD_REQUEST,
            "bad_lease_id",
        ),
        (
            "heartbeat, lease id zero",
            sa("/api/v1/lease/0/heartbeat", ""),
            S::BAD_REQUEST,
            "bad_lease_id",
        ),
        (
            "heartbeat, lease id beyond 2^63",
            sa("/api/v1/lease/9223372036854775808/heartbeat", ""),
            S::BAD_REQUEST,
            "bad_lease_id",
        ),
        (
            "heartbeat, unknown lease",
            sa("/api/v1/lease/999/heartbeat", ""),
            S::NOT_FOUND,
            "not_found",
        ),
        (
            "heartbeat, another worker's lease",
            sb(&hb, ""),
            S::FORBIDDEN,
            "not_your_lease",
        ),
        (
            "heartbeat, progress of the wrong type",
            sa(&hb, r#"{"progress": "half"}"#),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "heartbeat, progress beyond 1",
            sa(&hb, r#"{"progress": 5}"#),
            S::BAD_REQUEST,
            "bad_progress",
        ),
        (
            "heartbeat, negative progress",
            sa(&hb, r#"{"progress": -0.5}"#),
            S::BAD_REQUEST,
            "bad_progress",
        ),
        (
            "heartbeat, progress 1e800000000",
            sa(&hb, r#"{"progress": 1e800000000}"#),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "heartbeat, unknown field",
            sa(&hb, r#"{"progress": 0.5, "deadline": 1}"#),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "release, another worker's lease",
            sb(&rel, ""),
            S::FORBIDDEN,
            "not_your_lease",
        ),
        (
            "release, not an object",
            sa(&rel, "[]"),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "report, another worker's lease",
            sb(&rep, &report_body),
            S::FORBIDDEN,
            "not_your_lease",
        ),
        (
            "report, unknown lease",
            sa("/api/v1/lease/999/report", &report_body),
            S::NOT_FOUND,
            "no_lease",
        ),
        (
            "report, malformed",
            sa(&rep, "{\"report\": {"),
            S::BAD_REQUEST,
            "bad_json",
        ),
        ("report, empty", sa(&rep, ""), S::BAD_REQUEST, "bad_json"),
        (
            "report, missing signature",
            sa(&rep, &{
                let mut v: Value = serde_json::from_str(&report_body).unwrap();
                v.as_object_mut().unwrap().remove("signature");
                v.to_string()
            }),
            S::BAD_REQUEST,
            "bad_json",
        ),
        (
            "report, oversize body",
            sa(&rep, &huge),
            S::PAYLOAD_TOO_LARGE,
            "body_too_large",
        ),
    ];
    let mut wrong = Vec::new();
    for (what, req, status, code) in cases {
        let line = format!("{} {}", req.method(), req.uri());
        let t = std::time::Instant::now();
        let (s, v) = e.call(req).await;
        let ms = t.elapsed().as_secs_f64() * 1e3;
        if what.contains("1e800000000") {
            eprintln!("{what}: answered {} in {ms:.2} ms", s.as_u16());
            assert!(ms < 1000.0, "{what} took {ms} ms");
        }
        let msg = v["message"].as_str().unwrap_or("");
        if s != status || v["error"] != code || msg.len() < 10 {
            wrong.push(format!(
                "{what} ({line}): want {status} {code}, got {s} {v}"
            ));
        }
    }
    assert!(
        wrong.is_empty(),
        "{} wrong answers:\n{}",
        wrong.len(),
        wrong.join("\n")
    );
    let after = e.st.store.dump().await.unwrap();
    for ((t, r0), (_, r1)) in before.iter().zip(&after) {
        assert_eq!(r0, r1, "table {t} changed");
    }
    assert_eq!(before, after);
}

/// A campaign whose one small-region unit (|z| ≤ 1) is settled by two owners reporting `sols`.
async fn settled_small(e: &Env, name: &str, k: i64, sols: Vec<Solution>) {
    e.seed(
        name,
        k,
        &[Rect {
            region: Region::Small,
            d_lo: 0,
            d_hi: 0,
            z_lo: 0,
            z_hi: 1,
        }],
    )
    .await;
    let (a, b) = (
        e.enrol(&format!("{name}-a")).await,
        e.enrol(&format!("{name}-b")).await,
    );
    let ga = e.lease(&a).await.unwrap();
    let gb = e.lease(&b).await.unwrap();
    assert_eq!(e.report(&a, &ga, 0, sols.clone()).await.0, StatusCode::OK);
    let (s, v) = e.report(&b, &gb, 0, sols).await;
    assert_eq!(
        (s, v["unit_state"].clone()),
        (StatusCode::OK, json!("settled")),
        "{v}"
    );
}

#[tokio::test]
async fn targets_carry_found_vs_expected_computed_once_and_families_are_marked() {
    // 2 = 0³ + 1³ + 1³ is Verebrusov's family at t = 0; 3 = 1³ + 1³ + 1³ is in no family
    // (both verified exactly below). One store each (their units would compete for leases).
    let v2 = Solution::new(0, 1, 1);
    let v3 = Solution::new(1, 1, 1);
    assert!(v2.verify(2) && v3.verify(3));
    let e2 = env(plain()).await;
    let e3 = env(plain()).await;
    settled_small(&e2, "two", 2, vec![v2]).await;
    settled_small(&e3, "three", 3, vec![v3]).await;
    let plan = crate::forecast::forecast(&[2, 3], 0, 100, crate::model::PRIME_BOUND).unwrap();
    let want = |k: i64| plan.targets.iter().find(|t| t.k == k).unwrap().clone();
    for _round in 0..3 {
        for (e, name, k, found, not_counted) in [(&e2, "two", 2, 0, 1), (&e3, "three", 3, 1, 0)] {
            let (s, public) = e.get(&format!("/api/v1/campaigns/{name}")).await;
            assert_eq!(s, StatusCode::OK, "{public}");
            let (s, admin) = e
                .admin(
                    "GET",
                    &format!("/api/v1/admin/campaigns/{name}"),
                    Some(TOKEN),
                    json!({}),
                )
                .await;
            assert_eq!(s, StatusCode::OK, "{admin}");
            for v in [&public, &admin] {
                let m = &v["targets"][0]["model"];
                // the figures of `plan` at the same bound and truncation
                assert_eq!(
                    m["singular_series"].as_f64().unwrap(),
                    want(k).singular_series
                );
                assert_eq!(
                    m["expected_total"].as_f64().unwrap(),
                    want(k).expected_total
                );
                assert_eq!(
                    (m["found"].as_u64(), m["not_counted"].as_u64()),
                    (Some(found), Some(not_counted)),
                    "{m}"
                );
                let (lo, hi) =
                    cubehunt_common::heuristic::poisson_interval(want(k).expected_total, 0.95)
                        .unwrap();
                assert_eq!(
                    (m["low"].as_u64(), m["high"].as_u64()),
                    (Some(lo), Some(hi))
                );
                assert!(["fewer", "as_expected", "more"].contains(&m["verdict"].as_str().unwrap()));
                assert_eq!(v["model"]["level"], 0.95);
                assert!(v["model"]["interval"].as_str().unwrap().contains("Poisson"));
            }
            let fam = &public["targets"][0]["families"];
            if k == 2 {
                assert_eq!(fam[0]["solution"], json!(["0", "1", "1"]));
                assert_eq!(fam[0]["family"], "verebrusov");
                assert_eq!(fam[0]["t"], "0");
                assert_eq!(fam[0]["description"], "Verebrusov 1908, t = 0");
            } else {
                assert_eq!(fam, &json!([]));
            }
        }
    }
    // Three rounds of two views each: the model ran once per (k, bound).
    assert_eq!((e2.st.model.computed(), e3.st.model.computed()), (1, 1));
    let e = &e2;
    let (_, sols) = e.get("/api/v1/campaigns/two/solutions").await;
    assert_eq!(sols[0]["family"], "Verebrusov 1908, t = 0");
    let (_, sols) = e3.get("/api/v1/campaigns/three/solutions").await;
    assert!(sols[0]["family"].is_null());
    let resp = router(e.st.clone())
        .oneshot(
            Request::get("/api/v1/campaigns/two/export/solutions?format=csv")
                .body(Body::empty())
                .unwrap(),
        )
        .await
        .unwrap();
    let text = String::from_utf8(
        resp.into_body()
            .collect()
            .await
            .unwrap()
            .to_bytes()
            .to_vec(),
    )
    .unwrap();
    let lines: Vec<&str> = text.lines().collect();
    assert!(lines[0].ends_with(",found_at,family"), "{text}");
    assert!(
        lines[1].starts_with("two,2,0,1,1,") && lines[1].ends_with(",\"Verebrusov 1908, t = 0\""),
        "{text}"
    );
}

#[tokio::test]
async fn creation_takes_ranges_skipping_what_cannot_be_a_target_or_refusing_with_strict() {
    let e = env(plain()).await;
    let create = |name: &str, ks: Value, strict: bool| json!({"name": name, "ks": ks, "bound": "100", "unit_seconds": 1000, "strict": strict});
    // 1..20: 4, 5, 13, 14 are ±4 mod 9 (cubes are 0, ±1 mod 9), 1 and 8 are cubes.
    let (s, v) = e
        .admin(
            "POST",
            "/api/v1/admin/campaigns",
            Some(TOKEN),
            create("r", json!("1..20,-10..-3"), false),
        )
        .await;
    assert_eq!(s, StatusCode::OK, "{v}");
    let ks: Vec<i64> = v["targets"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t["k"].as_i64().unwrap())
        .collect();
    assert_eq!(
        ks,
        vec![-10, -9, -7, -6, -3, 2, 3, 6, 7, 9, 10, 11, 12, 15, 16, 17, 18, 19, 20]
    );
    let skipped: Vec<i64> = v["skipped"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| s["k"].as_i64().unwrap())
        .collect();
    assert_eq!(skipped, vec![1, 4, 5, 8, 13, 14, -8, -5, -4]);
    for s in v["skipped"].as_array().unwrap() {
        let r = s["reason"].as_str().unwrap();
        assert!(r.contains("mod 9") || r.contains("cube"), "{r}");
    }
    assert!(v["targets"]
        .as_array()
        .unwrap()
        .iter()
        .all(|t| t["model"]["expected_total"].as_f64().unwrap() > 0.0));
    // strict: refused, naming the offending k, and nothing is made
    let (s, v) = e
        .admin(
            "POST",
            "/api/v1/admin/campaigns",
            Some(TOKEN),
            create("r2", json!("2..5"), true),
        )
        .await;
    assert_eq!(
        (s, v["error"].as_str()),
        (StatusCode::BAD_REQUEST, Some("bad_target")),
        "{v}"
    );
    assert!(v["message"].as_str().unwrap().contains("k = 4, 5"), "{v}");
    assert_eq!(e.get("/api/v1/campaigns/r2").await.0, StatusCode::NOT_FOUND);
    // strict with nothing to skip is a plain creation
    let (s, v) = e
        .admin(
            "POST",
            "/api/v1/admin/campaigns",
            Some(TOKEN),
            create("r3", json!("2..3"), true),
        )
        .await;
    assert_eq!(s, StatusCode::OK, "{v}");
    assert!(v.get("skipped").is_none());
    // a value named on its own that cannot be a target is refused, range or not
    for ks in [
        json!("3,4"),
        json!([3, 8]),
        json!("0,2..3"),
        json!("4..5"),
        json!("1..1e6"),
    ] {
        let (s, v) = e
            .admin(
                "POST",
                "/api/v1/admin/campaigns",
                Some(TOKEN),
                create("r4", ks.clone(), false),
            )
            .await;
        assert_eq!(
            (s, v["error"].as_str()),
            (StatusCode::BAD_REQUEST, Some("bad_target")),
            "{ks}: {v}"
        );
    }
    assert_eq!(e.get("/api/v1/campaigns/r4").await.0, StatusCode::NOT_FOUND);
}

#[tokio::test]
async fn the_coverage_export_streams_every_target_in_pages() {
    let e = env(plain()).await;
    // Every admissible non-cube k in 1..=1500 (more than one page of rows) up to a small bound.
    let (s, v) = e
        .admin(
            "POST",
            "/api/v1/admin/campaigns",
            Some(TOKEN),
            json!({"name": "wide", "ks": "1..1500", "bound": "20", "unit_seconds": 1e6}),
        )
        .await;
    assert_eq!(s, StatusCode::BAD_REQUEST, "more than 1000 targets: {v}");
    let (s, v) = e
        .admin(
            "POST",
            "/api/v1/admin/campaigns",
            Some(TOKEN),
            json!({"name": "wide", "ks": "-400..900", "bound": "20", "unit_seconds": 1e6}),
        )
        .await;
    assert_eq!(s, StatusCode::OK, "{}", v["message"]);
    let n = v["targets"].as_array().unwrap().len();
    let ks: Vec<i64> = (-400..=900i64)
        .filter(|&k| cubehunt_common::kernel::check_target(k).is_ok())
        .collect();
    assert_eq!(n, ks.len());
    assert!(n as i64 > crate::export::PAGE_ROWS, "{n} rows fit one page");
    for format in ["csv", "json"] {
        let resp = router(e.st.clone())
            .oneshot(
                Request::get(format!(
                    "/api/v1/campaigns/wide/export/coverage?format={format}"
                ))
                .body(Body::empty())
                .unwrap(),
            )
            .await
            .unwrap();
        assert_eq!(resp.status(), StatusCode::OK);
        // Read it frame by frame: a streamed answer arrives in several.
        let mut body = resp.into_body();
        let (mut bytes, mut frames) = (Vec::new(), 0);
        while let Some(f) = body.frame().await {
            if let Ok(d) = f.unwrap().into_data() {
                bytes.extend_from_slice(&d);
                frames += 1;
            }
        }
        assert!(frames >= 3, "{format}: {frames} frames");
        let text = String::from_utf8(bytes).unwrap();
        let got: Vec<i64> = if format == "csv" {
            let mut lines = text.lines();
            let head = lines.next().unwrap();
            assert!(
                head.starts_with("campaign,k,bound,units,units_settled,complete,certified,"),
                "{head}"
            );
            lines
                .map(|l| {
                    let f: Vec<&str> = l.split(',').collect();
                    assert_eq!(f.len(), 11, "{l}");
                    assert_eq!(
                        (f[0], f[2], f[5], f[6], f[8], f[9]),
                        ("wide", "20", "false", "false", "", "0"),
                        "{l}"
                    );
                    f[1].parse().unwrap()
                })
                .collect()
        } else {
            let rows: Vec<Value> = serde_json::from_str(&text).expect("one well-formed JSON array");
            assert!(rows.iter().all(|r| r["certified"] == false
                && r["certificate_root"].is_null()
                && r["solutions"] == 0));
            rows.iter().map(|r| r["k"].as_i64().unwrap()).collect()
        };
        assert_eq!(got, ks, "{format}: every target once, by k");
    }
    // An unknown export or campaign is refused before anything streams.
    assert_eq!(
        e.get("/api/v1/campaigns/wide/export/everything").await.0,
        StatusCode::NOT_FOUND
    );
    assert_eq!(
        e.get("/api/v1/campaigns/nope/export/coverage").await.0,
        StatusCode::NOT_FOUND
    );
}
