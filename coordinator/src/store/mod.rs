//! The store: every byte of SQL in the coordinator lives under this module.
//!
//! One database behind sqlx's `Any` driver: SQLite in the data directory by default (WAL
//! journal, `synchronous = FULL`), PostgreSQL when a `postgres://` URL is given. The SQL is
//! written once for both (`$N` parameters, no engine-specific functions); the schema files
//! under `migrations/<engine>/` are the only per-engine text, and [`Backend`] names the few
//! statements that differ.
//!
//! The rest of the crate sees one record type per table ([`records`]) and whole operations
//! ("grant a lease to this worker", "record this report") that each run in one transaction.
//! The rules those operations apply are not here but in [`crate::lifecycle`]; this module
//! only loads the facts the rules need and writes down what they decided.
//!
//! # Writes: one writer, group commit
//!
//! Every write goes through [`Store::write`]: the operation is sent to one writer task that
//! owns one connection, runs each operation inside a savepoint, and commits a whole batch of
//! them at once — one `fsync` for all the operations that arrived while the previous batch
//! was committing. An operation is answered only after its batch has committed, so an
//! acknowledged write is durable; an operation that fails is rolled back to its savepoint and
//! does not disturb the others. Reads use the connection pool and run concurrently.
//!
//! Submodules, one concern each: [`records`] (the record types), [`campaigns`] (campaigns,
//! targets, planned units), [`workers`] (enrolment, invitations, trust, nonces), [`leases`]
//! (hand-out, offers, heartbeat, expiry), [`reports`] (recording a report and deciding its
//! unit), [`checks`] (spot checks and the organiser's rechecks, rollback after a proven wrong
//! report), [`certificates`] (issued certificates), [`monitor`] (read-only views for the API
//! and `/metrics`), [`audit`] (raw paged rows for the audit and exports).

pub mod audit;
pub mod campaigns;
pub mod certificates;
pub mod checks;
pub mod leases;
pub mod monitor;
pub mod records;
pub mod reports;
mod settle;
pub mod workers;
mod writer;

use sqlx::any::{AnyConnectOptions, AnyPoolOptions};
use sqlx::{AnyConnection, AnyPool, Executor};
use std::future::Future;
use std::path::Path;
use std::pin::Pin;
use std::str::FromStr;

pub use campaigns::{NewCampaign, PlannedUnit, TargetPlan};
pub use checks::{CheckJob, CheckResult};
pub use leases::{Granted, HeartbeatOutcome, LeasePolicy};
pub use monitor::{
    CampaignStats, MetricsSnapshot, SolutionView, TargetStats, UnitCounts, WorkerView,
};
pub use records::*;
pub use reports::{IncomingReport, ReportOutcome};
pub use workers::{EnrolOutcome, NewWorker};

/// What can go wrong in the store, in terms the API can map to a status.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    #[error("database error: {0}")]
    Db(#[from] sqlx::Error),
    #[error("database migration failed: {0}")]
    Migrate(#[from] sqlx::migrate::MigrateError),
    /// A stored value does not decode (a damaged or tampered store).
    #[error("stored data does not decode: {0}")]
    Corrupt(String),
    /// Something named by the caller does not exist.
    #[error("{0}")]
    NotFound(String),
    /// The request conflicts with the current state (code, message).
    #[error("{1}")]
    Conflict(&'static str, String),
    /// The caller may not do this (code, message).
    #[error("{1}")]
    Forbidden(&'static str, String),
    /// The store is shutting down.
    #[error("the store is closed")]
    Closed,
}

pub type Result<T, E = StoreError> = std::result::Result<T, E>;

/// The database engine behind the store.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Backend {
    Sqlite,
    Postgres,
}

impl Backend {
    /// The statements that open a write transaction.
    fn begin(self) -> &'static [&'static str] {
        match self {
            // Take the write lock at once, so that a batch never fails half-way on a busy lock.
            Backend::Sqlite => &["BEGIN IMMEDIATE"],
            // Several coordinators may share the database: every write transaction first takes
            // one transaction-scoped advisory lock, so that the writers of all replicas take
            // turns exactly as one writer's batches do (no unit leased twice to one worker,
            // none settled twice). Reads do not take it.
            Backend::Postgres => &["BEGIN", "SELECT pg_advisory_xact_lock(7263021001)"],
        }
    }

    fn migrator(self) -> &'static sqlx::migrate::Migrator {
        match self {
            Backend::Sqlite => &SQLITE_MIGRATOR,
            Backend::Postgres => &POSTGRES_MIGRATOR,
        }
    }

    /// Whether `location` names a PostgreSQL database (a `postgres://` or `postgresql://` URL).
    pub fn of(location: &str) -> Backend {
        if location.starts_with("postgres://") || location.starts_with("postgresql://") {
            Backend::Postgres
        } else {
            Backend::Sqlite
        }
    }
}

/// The SQLite schema, embedded at build time.
pub static SQLITE_MIGRATOR: sqlx::migrate::Migrator = sqlx::migrate!("../migrations/sqlite");
/// The PostgreSQL schema (the same tables), embedded at build time.
pub static POSTGRES_MIGRATOR: sqlx::migrate::Migrator = sqlx::migrate!("../migrations/postgres");

/// A boxed future borrowing a connection.
pub type BoxFut<'c, T> = Pin<Box<dyn Future<Output = T> + Send + 'c>>;

pub struct Store {
    pool: AnyPool,
    writer: writer::Handle,
    backend: Backend,
}

impl Store {
    /// Open (optionally create) the SQLite database file and bring its schema up to date.
    pub async fn open(path: &Path, create: bool) -> Result<Store> {
        sqlx::any::install_default_drivers();
        if !create && !path.exists() {
            return Err(StoreError::NotFound(format!(
                "no database at {}",
                path.display()
            )));
        }
        let url = format!(
            "sqlite://{}?mode={}",
            path.display(),
            if create { "rwc" } else { "rw" }
        );
        let opts = AnyConnectOptions::from_str(&url)?;
        let pool = AnyPoolOptions::new()
            .max_connections(4)
            .after_connect(|conn, _| {
                Box::pin(async move {
                    conn.execute(
                        "PRAGMA foreign_keys = ON; PRAGMA synchronous = FULL; PRAGMA busy_timeout = 30000;",
                    )
                    .await?;
                    Ok(())
                })
            })
            .connect_with(opts.clone())
            .await?;
        sqlx::query("PRAGMA journal_mode = WAL")
            .execute(&pool)
            .await?;
        Store::finish_open(pool, Backend::Sqlite).await
    }

    /// Open a PostgreSQL database (`postgres://user@host:port/db?…`), bringing its schema up
    /// to date. Several coordinators may open the same database at once.
    pub async fn open_postgres(url: &str) -> Result<Store> {
        sqlx::any::install_default_drivers();
        let pool = AnyPoolOptions::new()
            .max_connections(8)
            .acquire_timeout(std::time::Duration::from_secs(30))
            .connect(url)
            .await?;
        Store::finish_open(pool, Backend::Postgres).await
    }

    /// Open the store a command names: a `postgres://` URL, or else the SQLite file `path`.
    pub async fn open_at(database: Option<&str>, path: &Path, create: bool) -> Result<Store> {
        match database {
            Some(url) if Backend::of(url) == Backend::Postgres => Store::open_postgres(url).await,
            Some(other) => {
                Store::open(
                    Path::new(other.strip_prefix("sqlite://").unwrap_or(other)),
                    create,
                )
                .await
            }
            None => Store::open(path, create).await,
        }
    }

    async fn finish_open(pool: AnyPool, backend: Backend) -> Result<Store> {
        check_schema_lineage(&pool, backend).await?;
        backend.migrator().run(&pool).await?;
        let conn = pool.acquire().await?.detach();
        Ok(Store {
            writer: writer::spawn(conn, backend),
            pool,
            backend,
        })
    }

    pub fn backend(&self) -> Backend {
        self.backend
    }

    /// The connection pool, for reads inside the store module tree.
    /// Every row of every table (SQLite), as text, tables by name and rows in rowid order:
    /// what the bad-input tests compare before and after. (sqlx's own table of applied
    /// migrations is left out: the `Any` driver cannot decode its time column.)
    #[cfg(test)]
    pub async fn dump(&self) -> Result<Vec<(String, Vec<String>)>> {
        use sqlx::Row;
        let names: Vec<String> =
            sqlx::query("SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY name")
                .fetch_all(self.pool())
                .await?
                .iter()
                .map(|r| r.get::<String, _>(0))
                .filter(|t| !t.starts_with("_sqlx"))
                .collect();
        let mut out = Vec::new();
        for t in names {
            let rows = sqlx::query(&format!("SELECT * FROM \"{t}\" ORDER BY rowid"))
                .fetch_all(self.pool())
                .await?;
            let text = rows
                .iter()
                .map(|r| {
                    (0..r.len())
                        .map(|i| {
                            r.try_get::<Option<i64>, _>(i)
                                .map(|v| format!("{v:?}"))
                                .or_else(|_| {
                                    r.try_get::<Option<f64>, _>(i).map(|v| format!("{v:?}"))
                                })
                                .or_else(|_| {
                                    r.try_get::<Option<String>, _>(i).map(|v| format!("{v:?}"))
                                })
                                .or_else(|_| {
                                    r.try_get::<Option<Vec<u8>>, _>(i).map(|v| format!("{v:?}"))
                                })
                                .unwrap_or_else(|e| format!("<{e}>"))
                        })
                        .collect::<Vec<_>>()
                        .join(" | ")
                })
                .collect();
            out.push((t, text));
        }
        Ok(out)
    }

    pub(crate) fn pool(&self) -> &AnyPool {
        &self.pool
    }

    /// Run one write operation in the writer's transaction (see the module documentation).
    /// The answer arrives after the batch holding it has committed.
    pub async fn write<T, F>(&self, op: F) -> Result<T>
    where
        T: Send + 'static,
        F: for<'c> FnOnce(&'c mut AnyConnection) -> BoxFut<'c, Result<T>> + Send + 'static,
    {
        self.writer.run(op).await
    }

    /// Schema version applied (the highest migration number).
    pub async fn schema_version(&self) -> Result<i64> {
        let v: Option<i64> =
            sqlx::query_scalar("SELECT max(version) FROM _sqlx_migrations WHERE success = $1")
                .bind(true)
                .fetch_one(&self.pool)
                .await?;
        Ok(v.unwrap_or(0))
    }

    /// Finish the writes under way, then close every connection.
    pub async fn close(&self) {
        self.writer.close().await;
        self.pool.close().await;
    }
}

/// Refuse a database made by an earlier, incompatible pre-release of the schema (its first
/// migration has another checksum) with a message that says what to do, instead of sqlx's
/// checksum error.
async fn check_schema_lineage(pool: &AnyPool, backend: Backend) -> Result<()> {
    let sql = match backend {
        Backend::Sqlite => {
            "SELECT count(*) FROM sqlite_master WHERE type = 'table' AND name = '_sqlx_migrations'"
        }
        Backend::Postgres => {
            "SELECT count(*) FROM information_schema.tables WHERE table_schema = current_schema() AND table_name = '_sqlx_migrations'"
        }
    };
    let has_table: i64 = sqlx::query_scalar(sql).fetch_one(pool).await?;
    if has_table == 0 {
        return Ok(());
    }
    let stored: Option<Vec<u8>> =
        sqlx::query_scalar("SELECT checksum FROM _sqlx_migrations WHERE version = 1")
            .fetch_optional(pool)
            .await?;
    let ours = backend
        .migrator()
        .iter()
        .find(|m| m.version == 1)
        .map(|m| m.checksum.to_vec());
    if let (Some(stored), Some(ours)) = (stored, ours) {
        if stored != ours {
            return Err(StoreError::Conflict(
                "schema_lineage",
                "this database was made by an incompatible pre-release of cubehunt (its schema \
                 differs from this build's); keep it with the build that made it, or start a \
                 fresh data directory with `cubehunt-coordinator init`"
                    .into(),
            ));
        }
    }
    Ok(())
}

/// Convert a u64 that the schema keeps in INTEGER (bounds, edges, costs: all < 2⁶³).
pub(crate) fn int(v: u64) -> i64 {
    i64::try_from(v).unwrap_or(i64::MAX)
}

/// Box an `async move` block borrowing the writer's connection (see [`Store::write`]).
#[macro_export]
macro_rules! op {
    (|$c:ident| $body:expr) => {
        move |$c: &mut ::sqlx::AnyConnection| -> $crate::store::BoxFut<'_, _> {
            Box::pin(async move { $body })
        }
    };
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A fresh store in a temporary directory (kept alive by the returned guard).
    async fn temp_store() -> (Store, tempfile::TempDir) {
        let dir = tempfile::tempdir().unwrap();
        let store = Store::open(&dir.path().join("t.db"), true).await.unwrap();
        (store, dir)
    }

    async fn insert_counter(store: &Store, name: &str, fail: bool) -> Result<i64> {
        let name = name.to_string();
        store
            .write(op!(|c| {
                sqlx::query("INSERT INTO counters (name, next) VALUES ($1, 7)")
                    .bind(&name)
                    .execute(&mut *c)
                    .await?;
                if fail {
                    return Err(StoreError::Conflict(
                        "test",
                        "this operation fails after writing".into(),
                    ));
                }
                Ok(7)
            }))
            .await
    }

    async fn counter_names(store: &Store) -> Vec<String> {
        sqlx::query_scalar("SELECT name FROM counters WHERE name LIKE 't-%' ORDER BY name")
            .fetch_all(store.pool())
            .await
            .unwrap()
    }

    /// Operations sent together share a commit, but one that fails leaves no trace and does
    /// not take the others with it; every answered write survives closing and reopening.
    #[tokio::test(flavor = "multi_thread")]
    async fn a_failing_operation_is_undone_alone_and_answered_writes_last() {
        let (store, dir) = temp_store().await;
        let store = std::sync::Arc::new(store);
        let mut tasks = Vec::new();
        for i in 0..40 {
            let st = store.clone();
            tasks.push(tokio::spawn(async move {
                insert_counter(&st, &format!("t-{i:02}"), i % 5 == 0).await
            }));
        }
        let mut ok = Vec::new();
        for (i, t) in tasks.into_iter().enumerate() {
            match t.await.unwrap() {
                Ok(_) => ok.push(format!("t-{i:02}")),
                Err(StoreError::Conflict("test", _)) => assert_eq!(i % 5, 0),
                Err(e) => panic!("{e}"),
            }
        }
        assert_eq!(ok.len(), 32);
        assert_eq!(counter_names(&store).await, ok);
        store.close().await;
        let again = Store::open(&dir.path().join("t.db"), false).await.unwrap();
        assert_eq!(counter_names(&again).await, ok, "after reopening");
        again.close().await;
    }

    /// The schema is applied once and reopening finds the same version.
    #[tokio::test]
    async fn reopening_keeps_the_schema() {
        let (store, dir) = temp_store().await;
        let v = store.schema_version().await.unwrap();
        assert!(v >= 1);
        store.close().await;
        let again = Store::open(&dir.path().join("t.db"), false).await.unwrap();
        assert_eq!(again.schema_version().await.unwrap(), v);
    }
}
