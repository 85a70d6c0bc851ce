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
//! (cross-check and settlement), [`monitor`] (read-only views for the API and `/metrics`).

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
