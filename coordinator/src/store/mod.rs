//! The store: every byte of SQL in the coordinator lives under this module.
//!
//! One SQLite database in the data directory, WAL journal, `synchronous = FULL`, schema from
//! `migrations/` applied at open. The rest of the crate sees typed rows and whole operations
//! ("grant a lease to this worker", "record this report") that run in one transaction each, so
//! that a second backend could be added behind the same methods.
//!
//! Writes are serialised by an in-process lock (one coordinator process owns its database),
//! which keeps SQLite's single writer free of busy-retry loops. Reads run concurrently.
//!
//! Submodules, one concern each: [`campaigns`] (campaigns, targets, planned units),
//! [`workers`] (enrolment), [`leases`] (hand-out, heartbeat, expiry), [`reports`]
//! (cross-check and settlement), [`monitor`] (read-only views for the API and `/metrics`),
//! [`audit`] (raw rows for the audit, certificates and exports).

pub mod audit;
pub mod campaigns;
pub mod leases;
pub mod monitor;
pub mod reports;
pub mod workers;

use cubehunt_common::{Rect, Region, UnitSpec};
use sqlx::sqlite::{
    SqliteConnectOptions, SqliteJournalMode, SqlitePoolOptions, SqliteRow, SqliteSynchronous,
};
use sqlx::{Row, SqlitePool};
use std::path::Path;
use std::str::FromStr;
use std::time::Duration;

pub use campaigns::{CampaignRow, NewCampaign, PlannedUnit, TargetPlan, TargetRow};
pub use leases::{Granted, HeartbeatOutcome, LeaseRow};
pub use monitor::{
    CampaignStats, MetricsSnapshot, SolutionRow, TargetStats, UnitCounts, WorkerView,
};
pub use reports::{IncomingReport, LeaseContext, ReportOutcome};
pub use workers::{EnrolOutcome, NewWorker, WorkerRow};

/// What can go wrong in the store, in terms the API can map to a status.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    #[error("database error: {0}")]
    Db(#[from] sqlx::Error),
    #[error("database migration failed: {0}")]
    Migrate(#[from] sqlx::migrate::MigrateError),
    /// Something named by the caller does not exist.
    #[error("{0}")]
    NotFound(String),
    /// The request conflicts with the current state (code, message).
    #[error("{1}")]
    Conflict(&'static str, String),
    /// The caller may not do this (code, message).
    #[error("{1}")]
    Forbidden(&'static str, String),
}

pub type Result<T, E = StoreError> = std::result::Result<T, E>;

/// The migrations in `migrations/`, embedded at build time.
pub static MIGRATOR: sqlx::migrate::Migrator = sqlx::migrate!("../migrations");

pub struct Store {
    pool: SqlitePool,
    write: tokio::sync::Mutex<()>,
}

impl Store {
    /// Open (optionally create) the database file and bring its schema up to date.
    pub async fn open(path: &Path, create: bool) -> Result<Store> {
        let opts = SqliteConnectOptions::new()
            .filename(path)
            .create_if_missing(create)
            .journal_mode(SqliteJournalMode::Wal)
            .synchronous(SqliteSynchronous::Full)
            .foreign_keys(true)
            .busy_timeout(Duration::from_secs(30));
        let pool = SqlitePoolOptions::new()
            .max_connections(4)
            .connect_with(opts)
            .await?;
        MIGRATOR.run(&pool).await?;
        Ok(Store {
            pool,
            write: tokio::sync::Mutex::new(()),
        })
    }

    /// The connection pool, for read-only tools inside the store module tree
    /// (audit, export) that add their own submodule here.
    pub fn pool(&self) -> &SqlitePool {
        &self.pool
    }

    /// Schema version applied (the highest migration number).
    pub async fn schema_version(&self) -> Result<i64> {
        let v: Option<i64> =
            sqlx::query_scalar("SELECT max(version) FROM _sqlx_migrations WHERE success = 1")
                .fetch_one(&self.pool)
                .await?;
        Ok(v.unwrap_or(0))
    }

    pub async fn close(&self) {
        self.pool.close().await;
    }
}

/// A unit row with what is needed to rebuild its signed spec.
#[derive(Clone, Debug)]
pub struct UnitRow {
    pub id: i64,
    pub target_id: i64,
    pub campaign_id: i64,
    pub campaign: String,
    pub kernel: String,
    pub k: i64,
    pub rect: Rect,
    pub bound: u64,
    pub cost_us: u64,
    pub signature: String,
    pub state: String,
    pub reports: i64,
    pub active: i64,
    pub need: i64,
}

impl UnitRow {
    pub fn spec(&self) -> UnitSpec {
        UnitSpec {
            unit_id: self.id,
            campaign: self.campaign.clone(),
            k: self.k,
            bound: self.bound,
            kernel: self.kernel.clone(),
            rect: self.rect,
            cost: self.cost_us,
        }
    }
}

/// Columns selected by [`unit_from_row`]; `u` = units, `t` = targets, `c` = campaigns.
pub(crate) const UNIT_COLUMNS: &str = "u.id, u.target_id, u.campaign_id, c.name AS campaign, c.kernel, t.k, \
     u.region, u.d_lo, u.d_hi, u.z_lo, u.z_hi, u.bound, u.cost_us, u.signature, u.state, u.reports, u.active, u.need";

pub(crate) fn unit_from_row(r: &SqliteRow) -> Result<UnitRow> {
    let region: String = r.try_get("region")?;
    let region =
        Region::from_str(&region).map_err(|e| StoreError::Db(sqlx::Error::Decode(e.into())))?;
    Ok(UnitRow {
        id: r.try_get("id")?,
        target_id: r.try_get("target_id")?,
        campaign_id: r.try_get("campaign_id")?,
        campaign: r.try_get("campaign")?,
        kernel: r.try_get("kernel")?,
        k: r.try_get("k")?,
        rect: Rect {
            region,
            d_lo: r.try_get::<i64, _>("d_lo")? as u64,
            d_hi: r.try_get::<i64, _>("d_hi")? as u64,
            z_lo: r.try_get::<i64, _>("z_lo")? as u64,
            z_hi: r.try_get::<i64, _>("z_hi")? as u64,
        },
        bound: r.try_get::<i64, _>("bound")? as u64,
        cost_us: r.try_get::<i64, _>("cost_us")? as u64,
        signature: r.try_get("signature")?,
        state: r.try_get("state")?,
        reports: r.try_get("reports")?,
        active: r.try_get("active")?,
        need: r.try_get("need")?,
    })
}

/// Convert a u64 that the schema keeps in INTEGER (bounds, edges, costs: all < 2⁶³).
pub(crate) fn int(v: u64) -> i64 {
    i64::try_from(v).unwrap_or(i64::MAX)
}

#[cfg(test)]
pub(crate) mod testutil {
    use super::*;
    /// A fresh store in a temporary directory (kept alive by the returned guard).
    pub async fn temp_store() -> (Store, tempfile::TempDir) {
        let dir = tempfile::tempdir().unwrap();
        let store = Store::open(&dir.path().join("t.db"), true).await.unwrap();
        (store, dir)
    }
}

#[cfg(test)]
mod tests {
    use super::testutil::temp_store;
    use super::*;
    use cubehunt_common::{Solution, KERNEL_VERSION};

    async fn seed(store: &Store, n: u64) {
        let units = (1..=n)
            .map(|d| PlannedUnit {
                rect: Rect {
                    region: Region::Main,
                    d_lo: d,
                    d_hi: d + 1,
                    z_lo: 10,
                    z_hi: 100,
                },
                cost_us: 5_000_000,
            })
            .collect();
        let plan = TargetPlan {
            k: 33,
            z0: 5,
            units,
        };
        let new = NewCampaign {
            name: "c".into(),
            kernel: KERNEL_VERSION.into(),
            bound: 100,
            unit_seconds: 5.0,
        };
        store
            .create_campaign(&new, &[plan], &|s| format!("sig-{}", s.unit_id), 1000)
            .await
            .unwrap();
    }

    async fn worker(store: &Store, owner: &str, key: &str) -> WorkerRow {
        let w = NewWorker {
            owner: owner.into(),
            public_key: key.into(),
            kernel: KERNEL_VERSION.into(),
            threads: 1,
            label: String::new(),
            address: String::new(),
        };
        store.enrol(&w, 1000).await.unwrap().worker
    }

    fn report(lease: &LeaseRow, digest: &str, solutions: Vec<Solution>) -> IncomingReport {
        IncomingReport {
            lease_id: lease.id,
            worker_id: lease.worker_id,
            digest: digest.into(),
            candidates: 1,
            solutions,
            signature: "s".into(),
            body: "{}".into(),
            elapsed_s: 1.0,
            refused: None,
        }
    }

    #[tokio::test]
    async fn planned_units_are_stored_with_their_signatures_and_names_are_unique() {
        let (store, _d) = temp_store().await;
        seed(&store, 3).await;
        let c = store.campaign("c").await.unwrap().unwrap();
        let t = &store.targets(c.id).await.unwrap()[0];
        let units = store.target_units(t.id).await.unwrap();
        assert_eq!(units.len(), 3);
        for u in &units {
            assert_eq!(u.signature, format!("sig-{}", u.id));
            assert_eq!(u.spec().rect, u.rect);
            assert_eq!((u.state.as_str(), u.need, u.active), ("open", 2, 0));
        }
        let new = NewCampaign {
            name: "c".into(),
            kernel: KERNEL_VERSION.into(),
            bound: 1,
            unit_seconds: 1.0,
        };
        assert!(matches!(
            store
                .create_campaign(&new, &[], &|_| String::new(), 0)
                .await,
            Err(StoreError::Conflict("campaign_exists", _))
        ));
        assert_eq!(store.schema_version().await.unwrap(), 1);
    }

    #[tokio::test]
    async fn distinct_prefix_rule_keeps_one_network_off_both_leases() {
        let (store, _d) = temp_store().await;
        seed(&store, 1).await;
        let (a, b, c) = (
            worker(&store, "a", "k1").await,
            worker(&store, "b", "k2").await,
            worker(&store, "c", "k3").await,
        );
        let dl = |_: &UnitRow| 5000;
        assert!(store
            .grant_lease(&a, "10.0.0.0/24", true, 1000, &dl)
            .await
            .unwrap()
            .is_some());
        assert!(
            store
                .grant_lease(&b, "10.0.0.0/24", true, 1000, &dl)
                .await
                .unwrap()
                .is_none(),
            "same /24"
        );
        // Without the rule the same network is fine.
        assert!(store
            .grant_lease(&b, "10.0.0.0/24", false, 1000, &dl)
            .await
            .unwrap()
            .is_some());
        assert!(
            store
                .grant_lease(&c, "10.9.0.0/24", true, 1000, &dl)
                .await
                .unwrap()
                .is_none(),
            "two leases already"
        );
    }

    #[tokio::test]
    async fn acknowledged_reports_survive_a_reopen() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("c.db");
        let unit_id;
        {
            let store = Store::open(&path, true).await.unwrap();
            seed(&store, 1).await;
            let (a, b) = (
                worker(&store, "a", "k1").await,
                worker(&store, "b", "k2").await,
            );
            let ga = store
                .grant_lease(&a, "", false, 1000, &|_| 5000)
                .await
                .unwrap()
                .unwrap();
            let gb = store
                .grant_lease(&b, "", false, 1000, &|_| 5000)
                .await
                .unwrap()
                .unwrap();
            unit_id = ga.unit.id;
            // 33 has no small solutions; a made-up triple is fine at this level (the API verifies).
            let s = vec![Solution::new(1, 2, 3)];
            assert_eq!(
                store
                    .record_report(&report(&ga.lease, "h1", s.clone()), 3, 1100)
                    .await
                    .unwrap(),
                ReportOutcome::Stored {
                    unit_state: "open".into()
                }
            );
            assert_eq!(
                store
                    .record_report(&report(&gb.lease, "h1", s), 3, 1200)
                    .await
                    .unwrap(),
                ReportOutcome::Stored {
                    unit_state: "settled".into()
                }
            );
            // No close: as if the process died right after answering.
        }
        let store = Store::open(&path, false).await.unwrap();
        let u = store.unit(unit_id).await.unwrap().unwrap();
        assert_eq!(
            (u.state.as_str(), u.reports, u.active, u.need),
            ("settled", 2, 0, 0)
        );
        let t = store.targets(u.campaign_id).await.unwrap();
        assert_eq!(
            store.target_solutions(t[0].id).await.unwrap(),
            vec![Solution::new(1, 2, 3)]
        );
        let w = store.worker(1).await.unwrap().unwrap();
        assert_eq!((w.units_settled, w.work_us, w.wall_s), (1, 5_000_000, 100));
        assert_eq!(w.observed_rate(), Some(0.05));
    }

    #[tokio::test]
    async fn a_settlement_withdraws_the_other_leases_of_the_unit() {
        let (store, _d) = temp_store().await;
        seed(&store, 1).await;
        let ws = [
            worker(&store, "a", "k1").await,
            worker(&store, "b", "k2").await,
            worker(&store, "c", "k3").await,
        ];
        let g: Vec<Granted> = {
            let mut v = Vec::new();
            for w in &ws[..2] {
                v.push(
                    store
                        .grant_lease(w, "", false, 1000, &|_| 5000)
                        .await
                        .unwrap()
                        .unwrap(),
                );
            }
            v
        };
        store
            .record_report(&report(&g[0].lease, "x", vec![]), 3, 1001)
            .await
            .unwrap();
        store
            .record_report(&report(&g[1].lease, "y", vec![]), 3, 1002)
            .await
            .unwrap();
        let gc = store
            .grant_lease(&ws[2], "", false, 1003, &|_| 5000)
            .await
            .unwrap()
            .unwrap();
        // The outvoted worker's ally arrives first through a late path: settle with c = y.
        store
            .record_report(&report(&gc.lease, "y", vec![]), 3, 1004)
            .await
            .unwrap();
        let u = store.unit(gc.unit.id).await.unwrap().unwrap();
        assert_eq!((u.state.as_str(), u.active), ("settled", 0));
        assert_eq!(store.worker(ws[0].id).await.unwrap().unwrap().errors, 1);
        // Expiry of nothing changes nothing.
        assert_eq!(store.expire_leases(1_000_000).await.unwrap(), 0);
        assert_eq!(store.unit(u.id).await.unwrap().unwrap().active, 0);
    }
}
