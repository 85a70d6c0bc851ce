//! The store on PostgreSQL, with two coordinator replicas sharing one database.
//!
//! Real `cubehunt-coordinator serve --database postgres://…` processes on loopback over a
//! database made for this test on the server at 127.0.0.1:5432 (`CUBEHUNT_TEST_POSTGRES`
//! names another admin URL); workers of four owners are spread over both replicas; one
//! replica is killed with SIGKILL mid-campaign and its workers (also killed) come back
//! pointed at the other. The campaign completes, no worker ever held two leases of one unit,
//! and the audit run against the same database passes.
//!
//! k = 3 has (1, 1, 1) and (4, 4, −5) with min ≤ 10⁵ and no other (Booker and Sutherland,
//! PNAS 118, 2021; from memory, verified exactly here).

use cubehunt_tests::*;
use std::collections::BTreeSet;
use std::time::Duration;

fn admin_url() -> String {
    std::env::var("CUBEHUNT_TEST_POSTGRES")
        .unwrap_or_else(|_| "postgres://postgres@127.0.0.1:5432/test".to_string())
}

/// A database of our own on the server, dropped when the guard goes.
struct TestDb {
    admin: String,
    name: String,
    url: String,
    rt: tokio::runtime::Runtime,
}

impl TestDb {
    fn create() -> Result<TestDb, String> {
        use sqlx::{Connection, Executor};
        let rt = tokio::runtime::Runtime::new().map_err(|e| e.to_string())?;
        let admin = admin_url();
        let name = format!(
            "cubehunt_test_{}_{}",
            std::process::id(),
            rand::random::<u32>()
        );
        rt.block_on(async {
            let mut c = sqlx::PgConnection::connect(&admin)
                .await
                .map_err(|e| e.to_string())?;
            c.execute(format!("CREATE DATABASE {name}").as_str())
                .await
                .map_err(|e| e.to_string())?;
            c.close().await.map_err(|e| e.to_string())
        })?;
        let base = admin
            .rsplit_once('/')
            .map_or(admin.as_str(), |(b, _)| b)
            .to_string();
        Ok(TestDb {
            url: format!("{base}/{name}"),
            admin,
            name,
            rt,
        })
    }

    fn rows(&self, sql: &str) -> Vec<(i64, i64, i64)> {
        use sqlx::Connection;
        self.rt.block_on(async {
            let mut c = sqlx::PgConnection::connect(&self.url).await.unwrap();
            let v: Vec<(i64, i64, i64)> = sqlx::query_as(sql).fetch_all(&mut c).await.unwrap();
            c.close().await.unwrap();
            v
        })
    }
}

impl Drop for TestDb {
    fn drop(&mut self) {
        use sqlx::{Connection, Executor};
        let (admin, name) = (self.admin.clone(), self.name.clone());
        let _ = self.rt.block_on(async move {
            let mut c = sqlx::PgConnection::connect(&admin).await?;
            c.execute(format!("DROP DATABASE IF EXISTS {name} WITH (FORCE)").as_str())
                .await?;
            c.close().await
        });
    }
}

#[test]
fn two_replicas_share_a_postgres_store_and_survive_a_sigkill() {
    let _g = serial();
    let db = match TestDb::create() {
        Ok(db) => db,
        Err(e) => {
            eprintln!(
                "SKIPPED: no PostgreSQL server at {} ({e}); .ci/run starts one (deploy/bootstrap.sh)",
                admin_url()
            );
            return;
        }
    };
    let tmp = tempfile::tempdir().unwrap();
    let serve = [
        "--database",
        db.url.as_str(),
        "--retry-after-s",
        "1",
        "--sweep-s",
        "1",
        "--heartbeat-s",
        "2",
        "--lease-floor-s",
        "20",
        "--probation-reports",
        "1",
    ];
    let a = Coordinator::start(&tmp.path().join("a"), &serve).unwrap();
    let created = a
        .create_campaign("shared", "3,30", "100000", 0.001)
        .unwrap();
    let units = created["units"]["total"].as_i64().unwrap();
    assert!(units >= 8, "{created}");
    let mut b = a.replica(&tmp.path().join("b"), &serve).unwrap();
    // Both replicas answer for the same campaign.
    assert_eq!(
        b.show("shared").unwrap()["units"]["total"].as_i64(),
        Some(units)
    );

    let on_a: Vec<Worker> = ["lena", "milo"]
        .iter()
        .map(|o| Worker::start(tmp.path(), &a.url(), o, &[]).unwrap())
        .collect();
    let mut on_b: Vec<Worker> = ["nora", "omar"]
        .iter()
        .map(|o| Worker::start(tmp.path(), &b.url(), o, &[]).unwrap())
        .collect();
    // Mid-campaign: some reports went through each replica.
    wait_for(
        "reports through both replicas",
        Duration::from_secs(120),
        || {
            let reports = |w: &Worker| lines_with(&w.log_text(), "): accepted").len();
            (on_a.iter().map(reports).sum::<usize>() >= 1
                && on_b.iter().map(reports).sum::<usize>() >= 1)
                .then_some(())
        },
    )
    .unwrap_or_else(|e| panic!("{e:#}\n{}", b.log_text()));
    b.kill9();
    for w in &mut on_b {
        w.proc.kill9();
    }
    // Behind a load balancer they would reach the other replica; here they are pointed at it.
    let again: Vec<Worker> = on_b
        .iter()
        .map(|w| Worker::start_in(&w.state, &a.url(), &w.owner, &[]).unwrap())
        .collect();
    let view = a
        .wait_complete("shared", Duration::from_secs(300))
        .unwrap_or_else(|e| {
            for w in on_a.iter().chain(&again) {
                eprintln!("--- worker {}:\n{}", w.owner, w.log_text());
            }
            panic!("{e:#}\n--- replica a:\n{}", a.log_text())
        });
    assert_eq!(view["units"]["settled"].as_i64(), Some(units), "{view}");
    let want: BTreeSet<_> = [
        cubehunt_common::Solution::new(1, 1, 1),
        cubehunt_common::Solution::new(4, 4, -5),
    ]
    .into_iter()
    .collect();
    assert!(want.iter().all(|s| s.verify(3)));
    assert_eq!(target_solutions(&view, 3), want, "{view}");
    // No worker ever held two leases of one unit, and no unit has two settling outcomes.
    let twice = db.rows(
        "SELECT unit_id, worker_id, count(*) FROM leases GROUP BY unit_id, worker_id HAVING count(*) > 1",
    );
    assert!(
        twice.is_empty(),
        "a worker leased one unit twice: {twice:?}"
    );
    let audit = a.audit_with(&["--database", &db.url]).unwrap();
    assert!(audit.ok(), "{}", audit.text);
    drop(on_a);
    drop(again);
}
