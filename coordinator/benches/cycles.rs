//! Lease → report cycles per second against the real service on loopback (prints figures;
//! not a timed test): `cargo bench -p cubehunt-coordinator --bench cycles [-- WORKERS SECONDS]`.
//!
//! One process runs the coordinator's router over a SQLite store in a temporary directory,
//! with its sweep and its checker, and `WORKERS` simulated workers (default 8, each of its
//! own owner) that speak the signed protocol over HTTP: ask for a lease, report the honest
//! result (precomputed, so that the workers cost no CPU of note), again. Every report is
//! spot-checked by the checker as in production; probation is off so that every worker is
//! a plain one. The run is done twice: with the checks as configured by default
//! (`spot_checks` 2, `recheck_share` 0.02, one checker thread) and with them off, and prints
//! cycles per second, p50/p99 latency of a lease and of a report, and what share of the
//! grid's work the checks cost at the default sizes.

use cubehunt_common::protocol::{EnrolRequest, EnrolResponse, LeaseGrant, LeaseRequest, LeaseResponse};
use cubehunt_common::report::{Report, SignedReport};
use cubehunt_common::{kernel, pieces, sign, Digest, Rect, Region, Solution, UnitSpec, KERNEL_VERSION};
use cubehunt_coordinator::api::{self, AppState};
use cubehunt_coordinator::config::ServiceConfig;
use cubehunt_coordinator::store::campaigns::Signer;
use cubehunt_coordinator::store::{NewCampaign, PlannedUnit, Store, TargetPlan};
use std::collections::HashMap;
use std::net::SocketAddr;
use std::sync::Arc;
use std::time::{Duration, Instant};

const K: i64 = 33;
const UNITS: u64 = 6000;

fn rect(d: u64) -> Rect {
    Rect { region: Region::Main, d_lo: d, d_hi: d + 1, z_lo: 10, z_hi: 200 }
}

/// Honest piece digests and solutions of every unit's rectangle, by `d`.
fn answers(cost_us: u64) -> Arc<HashMap<u64, (Vec<Digest>, Vec<Solution>)>> {
    let mut m = HashMap::new();
    for d in 1..=UNITS {
        let r = rect(d);
        let spec = UnitSpec { unit_id: 0, campaign: String::new(), k: K, bound: 200, kernel: KERNEL_VERSION.into(), rect: r, cost: cost_us };
        let mut ds = Vec::new();
        let mut sols = Vec::new();
        for p in pieces::of_unit(&spec) {
            let o = kernel::scan(K, &p, 1, &|_| {}).unwrap();
            ds.push(o.digest);
            sols.extend(o.solutions.into_iter().filter(|s| s.in_rect(&r)));
        }
        sols.sort();
        sols.dedup();
        m.insert(d, (ds, sols));
    }
    Arc::new(m)
}

struct Sim {
    http: reqwest::Client,
    base: String,
    coordinator: String,
    id: i64,
    key: sign::SecretKey,
}

impl Sim {
    async fn post(&self, path: &str, body: Vec<u8>) -> reqwest::Response {
        let stamp = sign::Stamp::new(&self.coordinator, self.id, unix_now());
        let sig = sign::sign(&self.key, &sign::request_bytes(&stamp, "POST", path, &body));
        self.http
            .post(format!("{}{path}", self.base))
            .header("content-type", "application/json")
            .header(sign::HDR_WORKER, self.id.to_string())
            .header(sign::HDR_TIME, stamp.time.to_string())
            .header(sign::HDR_NONCE, &stamp.nonce)
            .header(sign::HDR_SIGNATURE, sig)
            .body(body)
            .send()
            .await
            .expect("request")
    }
}

fn unix_now() -> i64 {
    std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).unwrap().as_secs() as i64
}

async fn enrol(base: &str, coordinator: &str, owner: &str) -> Sim {
    let key = sign::generate();
    let mut s = Sim { http: reqwest::Client::new(), base: base.into(), coordinator: coordinator.into(), id: 0, key };
    let req = EnrolRequest {
        owner: owner.into(),
        public_key: sign::public_to_hex(&s.key.verifying_key()),
        kernel: KERNEL_VERSION.into(),
        threads: 1,
        label: owner.into(),
        invite: None,
    };
    let r: EnrolResponse = s.post("/api/v1/enrol", serde_json::to_vec(&req).unwrap()).await.json().await.unwrap();
    s.id = r.worker_id;
    s
}

fn report(s: &Sim, g: &LeaseGrant, a: &(Vec<Digest>, Vec<Solution>)) -> Vec<u8> {
    let u = &g.unit.unit;
    let report = Report {
        lease_id: g.lease_id,
        unit_id: u.unit_id,
        worker_id: s.id,
        kernel: u.kernel.clone(),
        k: u.k,
        rect: u.rect,
        digest: a.0.iter().copied().sum(),
        pieces: a.0.clone(),
        solutions: a.1.clone(),
        elapsed_s: 0.0,
    };
    let signature = sign::sign(&s.key, &report.canonical_bytes());
    serde_json::to_vec(&SignedReport { report, signature }).unwrap()
}

fn pct(v: &mut [f64], p: f64) -> f64 {
    if v.is_empty() {
        return f64::NAN;
    }
    v.sort_by(|a, b| a.partial_cmp(b).unwrap());
    v[((v.len() as f64 - 1.0) * p).round() as usize]
}

async fn run(workers: usize, seconds: u64, checks: bool, cost_us: u64, ans: Arc<HashMap<u64, (Vec<Digest>, Vec<Solution>)>>) {
    let dir = tempfile::tempdir().unwrap();
    let store = Store::open(&dir.path().join("c.db"), true).await.unwrap();
    let key = sign::generate();
    let config = ServiceConfig {
        probation_reports: 0,
        spot_checks: if checks { 2 } else { 0 },
        recheck_share: if checks { 0.02 } else { 0.0 },
        checker_threads: u32::from(checks),
        ..ServiceConfig::default()
    };
    let signing = key.clone();
    let signer: Signer = Arc::new(move |s: &UnitSpec| sign::sign(&signing, &s.canonical_bytes()));
    let plan = TargetPlan { k: K, z0: 1, units: (1..=UNITS).map(|d| PlannedUnit { rect: rect(d), cost_us }).collect() };
    let nc = NewCampaign { name: "bench".into(), kernel: KERNEL_VERSION.into(), bound: 200, unit_seconds: 1.0, recheck_share: config.recheck_share };
    store.create_campaign(&nc, &[plan], &signer, unix_now()).await.unwrap();
    let st = AppState::new(store, key, "0".repeat(64), config.clone());
    let checker = cubehunt_coordinator::checker::spawn(st.clone(), config.checker_threads as usize);
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
    let base = format!("http://{}", listener.local_addr().unwrap());
    let app = api::router(st.clone());
    let server = tokio::spawn(async move {
        axum::serve(listener, app.into_make_service_with_connect_info::<SocketAddr>()).await.unwrap();
    });
    let mut sims = Vec::new();
    for i in 0..workers {
        sims.push(enrol(&base, &st.public_key, &format!("owner-{i}")).await);
    }
    let cpu0 = cpu_seconds();
    let t0 = Instant::now();
    let stop = t0 + Duration::from_secs(seconds);
    let mut tasks = Vec::new();
    for s in sims {
        let ans = ans.clone();
        tasks.push(tokio::spawn(async move {
            let (mut lease_ms, mut report_ms, mut cycles) = (Vec::new(), Vec::new(), 0u64);
            while Instant::now() < stop {
                let t = Instant::now();
                let body = serde_json::to_vec(&LeaseRequest { threads: 1 }).unwrap();
                let r: LeaseResponse = s.post("/api/v1/lease", body).await.json().await.unwrap();
                lease_ms.push(t.elapsed().as_secs_f64() * 1e3);
                let Some(g) = r.lease else {
                    tokio::time::sleep(Duration::from_millis(20)).await;
                    continue;
                };
                let a = &ans[&g.unit.unit.rect.d_lo];
                let t = Instant::now();
                let resp = s.post(&format!("/api/v1/lease/{}/report", g.lease_id), report(&s, &g, a)).await;
                assert!(resp.status().is_success(), "{}", resp.text().await.unwrap_or_default());
                report_ms.push(t.elapsed().as_secs_f64() * 1e3);
                cycles += 1;
            }
            (lease_ms, report_ms, cycles)
        }));
    }
    let (mut lease_ms, mut report_ms, mut cycles) = (Vec::new(), Vec::new(), 0);
    for t in tasks {
        let (l, r, c) = t.await.unwrap();
        lease_ms.extend(l);
        report_ms.extend(r);
        cycles += c;
    }
    let wall = t0.elapsed().as_secs_f64();
    let cpu = cpu_seconds() - cpu0;
    let settled: i64 = st.store.metrics().await.unwrap().units.iter().filter(|(_, s, _)| s == "settled").map(|x| x.2).sum();
    println!(
        "  checks {:<3}  {workers} workers  {:>7.0} cycles/s  lease p50 {:>5.1} ms p99 {:>5.1} ms  report p50 {:>5.1} ms p99 {:>5.1} ms  process CPU {:.2} ms/cycle  units settled {settled}",
        if checks { "on" } else { "off" },
        cycles as f64 / wall,
        pct(&mut lease_ms, 0.5),
        pct(&mut lease_ms, 0.99),
        pct(&mut report_ms, 0.5),
        pct(&mut report_ms, 0.99),
        cpu * 1e3 / cycles.max(1) as f64,
    );
    server.abort();
    if let Some(c) = checker {
        c.abort();
    }
}

/// CPU seconds used by this process so far (user + system).
fn cpu_seconds() -> f64 {
    let mut u: libc::rusage = unsafe { std::mem::zeroed() };
    // SAFETY: getrusage fills the struct it is given.
    unsafe { libc::getrusage(libc::RUSAGE_SELF, &mut u) };
    let t = |v: libc::timeval| v.tv_sec as f64 + v.tv_usec as f64 / 1e6;
    t(u.ru_utime) + t(u.ru_stime)
}

fn main() {
    let args: Vec<String> = std::env::args().skip(1).filter(|a| !a.starts_with('-')).collect();
    let workers: usize = args.first().and_then(|s| s.parse().ok()).unwrap_or(8);
    let seconds: u64 = args.get(1).and_then(|s| s.parse().ok()).unwrap_or(10);
    let cost_us = 1_000_000;
    let rt = tokio::runtime::Builder::new_multi_thread().enable_all().build().unwrap();
    println!("lease → report cycles on loopback, SQLite store, {UNITS} units of k = {K} ({} pieces each)", pieces::wanted(cost_us));
    let ans = answers(cost_us);
    rt.block_on(run(workers, seconds, true, cost_us, ans.clone()));
    rt.block_on(run(workers, seconds, false, cost_us, ans));
    // What the checks cost the organiser, as a share of the grid's work, at the default
    // sizes: a ten-minute unit has the most pieces (1024), each unit gets two reports, each
    // report has r = 2 pieces recomputed, and a share s = 0.02 of units is recomputed whole.
    let (r, n, s) = (2.0, pieces::MAX_PIECES as f64, 0.02);
    println!(
        "checks' share of the grid's CPU at the defaults (600 s units, {n} pieces, r = {r}, recheck share {s}): spot checks {:.3}% + rechecks {:.2}% = {:.2}% (plus probation: two rechecked units per new worker)",
        100.0 * 2.0 * r / n / 2.0,
        100.0 * s / 2.0,
        100.0 * (2.0 * r / n + s) / 2.0
    );
}
