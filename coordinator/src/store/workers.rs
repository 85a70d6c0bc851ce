//! Enrolled workers.

use super::{Result, Store, StoreError};
use sqlx::Row;

#[derive(Clone, Debug)]
pub struct WorkerRow {
    pub id: i64,
    pub owner: String,
    pub public_key: String,
    pub kernel: String,
    pub threads: i64,
    pub label: String,
    pub address: String,
    pub enrolled_at: i64,
    pub last_seen: i64,
    pub reports: i64,
    pub units_settled: i64,
    pub errors: i64,
    pub quarantined: bool,
    /// Sum of the estimated cost (reference-core µs) of the leases it reported.
    pub work_us: i64,
    /// Sum of the wall seconds those leases took, as seen by the coordinator.
    pub wall_s: i64,
}

impl WorkerRow {
    /// Observed speed in reference-core seconds per wall second, once it has reported work.
    pub fn observed_rate(&self) -> Option<f64> {
        if self.wall_s > 0 && self.work_us > 0 {
            Some(self.work_us as f64 / 1e6 / self.wall_s as f64)
        } else {
            None
        }
    }
}

pub(super) fn worker_from_row(r: &sqlx::sqlite::SqliteRow) -> Result<WorkerRow> {
    Ok(WorkerRow {
        id: r.try_get("id")?,
        owner: r.try_get("owner")?,
        public_key: r.try_get("public_key")?,
        kernel: r.try_get("kernel")?,
        threads: r.try_get("threads")?,
        label: r.try_get("label")?,
        address: r.try_get("address")?,
        enrolled_at: r.try_get("enrolled_at")?,
        last_seen: r.try_get("last_seen")?,
        reports: r.try_get("reports")?,
        units_settled: r.try_get("units_settled")?,
        errors: r.try_get("errors")?,
        quarantined: r.try_get::<i64, _>("quarantined")? != 0,
        work_us: r.try_get("work_us")?,
        wall_s: r.try_get("wall_s")?,
    })
}

/// A validated enrolment.
#[derive(Clone, Debug)]
pub struct NewWorker {
    pub owner: String,
    pub public_key: String,
    pub kernel: String,
    pub threads: u32,
    pub label: String,
    pub address: String,
}

#[derive(Clone, Debug)]
pub struct EnrolOutcome {
    pub worker: WorkerRow,
    /// False when the key was already enrolled (the same worker enrolling again).
    pub created: bool,
}

impl Store {
    /// Enrol a key. The same key enrolling again under the same owner gets its old id back
    /// (with kernel, threads and label updated); under another owner it is refused.
    pub async fn enrol(&self, w: &NewWorker, now: i64) -> Result<EnrolOutcome> {
        let _g = self.write.lock().await;
        let existing = sqlx::query("SELECT * FROM workers WHERE public_key = ?")
            .bind(&w.public_key)
            .fetch_optional(&self.pool)
            .await?;
        if let Some(r) = existing {
            let old = worker_from_row(&r)?;
            if old.owner != w.owner {
                return Err(StoreError::Conflict(
                    "key_enrolled",
                    format!("this key is already enrolled as worker {} of owner {:?}; make a new key to enrol under another owner", old.id, old.owner),
                ));
            }
            sqlx::query("UPDATE workers SET kernel = ?, threads = ?, label = ?, address = ?, last_seen = ? WHERE id = ?")
                .bind(&w.kernel)
                .bind(w.threads as i64)
                .bind(&w.label)
                .bind(&w.address)
                .bind(now)
                .bind(old.id)
                .execute(&self.pool)
                .await?;
            drop(_g);
            let worker = self.worker(old.id).await?.expect("worker exists");
            return Ok(EnrolOutcome {
                worker,
                created: false,
            });
        }
        let id: i64 = sqlx::query_scalar(
            "INSERT INTO workers (owner, public_key, kernel, threads, label, address, enrolled_at, last_seen) \
             VALUES (?, ?, ?, ?, ?, ?, ?, ?) RETURNING id",
        )
        .bind(&w.owner)
        .bind(&w.public_key)
        .bind(&w.kernel)
        .bind(w.threads as i64)
        .bind(&w.label)
        .bind(&w.address)
        .bind(now)
        .bind(now)
        .fetch_one(&self.pool)
        .await?;
        drop(_g);
        let worker = self.worker(id).await?.expect("worker exists");
        Ok(EnrolOutcome {
            worker,
            created: true,
        })
    }

    pub async fn worker(&self, id: i64) -> Result<Option<WorkerRow>> {
        let r = sqlx::query("SELECT * FROM workers WHERE id = ?")
            .bind(id)
            .fetch_optional(&self.pool)
            .await?;
        r.as_ref().map(worker_from_row).transpose()
    }

    /// Record that an authenticated request arrived from this worker.
    pub async fn touch_worker(&self, id: i64, now: i64) -> Result<()> {
        let _g = self.write.lock().await;
        sqlx::query("UPDATE workers SET last_seen = max(last_seen, ?) WHERE id = ?")
            .bind(now)
            .bind(id)
            .execute(&self.pool)
            .await?;
        Ok(())
    }
}
