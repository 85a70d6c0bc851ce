//! Hand-out of units to workers, heartbeats, expiry and release.

use super::{unit_from_row, Result, Store, StoreError, UnitRow, WorkerRow, UNIT_COLUMNS};
use sqlx::{Row, Sqlite, Transaction};

#[derive(Clone, Debug)]
pub struct LeaseRow {
    pub id: i64,
    pub unit_id: i64,
    pub worker_id: i64,
    pub owner: String,
    pub net_prefix: String,
    pub state: String,
    pub issued_at: i64,
    pub deadline: i64,
}

pub(super) fn lease_from_row(r: &sqlx::sqlite::SqliteRow) -> Result<LeaseRow> {
    Ok(LeaseRow {
        id: r.try_get("id")?,
        unit_id: r.try_get("unit_id")?,
        worker_id: r.try_get("worker_id")?,
        owner: r.try_get("owner")?,
        net_prefix: r.try_get("net_prefix")?,
        state: r.try_get("state")?,
        issued_at: r.try_get("issued_at")?,
        deadline: r.try_get("deadline")?,
    })
}

/// A lease just granted, with its unit.
#[derive(Clone, Debug)]
pub struct Granted {
    pub lease: LeaseRow,
    pub unit: UnitRow,
}

#[derive(Clone, Debug)]
pub struct HeartbeatOutcome {
    pub deadline: i64,
    pub keep_going: bool,
}

impl Store {
    /// Expire every active lease whose deadline has passed; returns how many.
    pub async fn expire_leases(&self, now: i64) -> Result<u64> {
        let _w = self.write.lock().await;
        let mut tx = self.pool.begin().await?;
        let n = expire_in(&mut tx, now).await?;
        tx.commit().await?;
        Ok(n)
    }

    /// Pick a unit for this worker and lease it, or `None` when nothing suits it now.
    ///
    /// Rules: only campaigns that are active and pinned to the worker's kernel; only units
    /// that want another lease (`need > active`); never a unit on which the worker's owner
    /// (or, when `net_prefix` is given, its network prefix) already holds or has reported a
    /// lease, or on which the worker's report was refused. Units with a report come first,
    /// then planned order. `deadline` computes the lease deadline from the unit.
    pub async fn grant_lease(
        &self,
        worker: &WorkerRow,
        net_prefix: &str,
        prefix_rule: bool,
        now: i64,
        deadline: &(dyn Fn(&UnitRow) -> i64 + Sync),
    ) -> Result<Option<Granted>> {
        if worker.quarantined {
            return Err(quarantined(worker.id));
        }
        let _w = self.write.lock().await;
        let mut tx = self.pool.begin().await?;
        expire_in(&mut tx, now).await?;
        sqlx::query("UPDATE workers SET last_seen = max(last_seen, ?) WHERE id = ?")
            .bind(now)
            .bind(worker.id)
            .execute(&mut *tx)
            .await?;
        let campaigns: Vec<i64> = sqlx::query_scalar(
            "SELECT id FROM campaigns WHERE state = 'active' AND kernel = ? ORDER BY id",
        )
        .bind(&worker.kernel)
        .fetch_all(&mut *tx)
        .await?;
        let prefix = if prefix_rule { net_prefix } else { "" };
        let q = format!(
            "SELECT {UNIT_COLUMNS} FROM units u JOIN targets t ON t.id = u.target_id JOIN campaigns c ON c.id = u.campaign_id \
             WHERE u.campaign_id = ?1 AND u.need > u.active AND u.state <> 'settled' \
               AND NOT EXISTS (SELECT 1 FROM leases l WHERE l.unit_id = u.id \
                   AND ((l.state IN ('active', 'reported') AND (l.owner = ?2 OR (?3 <> '' AND l.net_prefix = ?3))) \
                        OR (l.state = 'rejected' AND l.worker_id = ?4))) \
             ORDER BY u.reports DESC, u.id LIMIT 1"
        );
        for cid in campaigns {
            let row = sqlx::query(&q)
                .bind(cid)
                .bind(&worker.owner)
                .bind(prefix)
                .bind(worker.id)
                .fetch_optional(&mut *tx)
                .await?;
            let Some(row) = row else { continue };
            let mut unit = unit_from_row(&row)?;
            let dl = deadline(&unit).max(now + 1);
            let lease_id: i64 = sqlx::query_scalar(
                "INSERT INTO leases (unit_id, worker_id, owner, net_prefix, state, issued_at, deadline) \
                 VALUES (?, ?, ?, ?, 'active', ?, ?) RETURNING id",
            )
            .bind(unit.id)
            .bind(worker.id)
            .bind(&worker.owner)
            .bind(net_prefix)
            .bind(now)
            .bind(dl)
            .fetch_one(&mut *tx)
            .await?;
            sqlx::query("UPDATE units SET active = active + 1 WHERE id = ?")
                .bind(unit.id)
                .execute(&mut *tx)
                .await?;
            tx.commit().await?;
            unit.active += 1;
            let lease = LeaseRow {
                id: lease_id,
                unit_id: unit.id,
                worker_id: worker.id,
                owner: worker.owner.clone(),
                net_prefix: net_prefix.to_string(),
                state: "active".into(),
                issued_at: now,
                deadline: dl,
            };
            return Ok(Some(Granted { lease, unit }));
        }
        tx.commit().await?;
        Ok(None)
    }

    pub async fn lease(&self, id: i64) -> Result<Option<LeaseRow>> {
        let r = sqlx::query("SELECT * FROM leases WHERE id = ?")
            .bind(id)
            .fetch_optional(&self.pool)
            .await?;
        r.as_ref().map(lease_from_row).transpose()
    }

    /// Leases of a unit, oldest first.
    pub async fn unit_leases(&self, unit_id: i64) -> Result<Vec<LeaseRow>> {
        let rows = sqlx::query("SELECT * FROM leases WHERE unit_id = ? ORDER BY id")
            .bind(unit_id)
            .fetch_all(&self.pool)
            .await?;
        rows.iter().map(lease_from_row).collect()
    }

    /// A heartbeat: extends an active lease to at least `now + grace_s`. `keep_going` is
    /// false when the lease is no longer held or its campaign stopped handing out work.
    pub async fn heartbeat(
        &self,
        worker_id: i64,
        lease_id: i64,
        progress: f64,
        now: i64,
        grace_s: i64,
    ) -> Result<HeartbeatOutcome> {
        let _w = self.write.lock().await;
        let mut tx = self.pool.begin().await?;
        let lease = owned_lease(&mut tx, worker_id, lease_id).await?;
        sqlx::query("UPDATE workers SET last_seen = max(last_seen, ?) WHERE id = ?")
            .bind(now)
            .bind(worker_id)
            .execute(&mut *tx)
            .await?;
        let campaign_state: String = sqlx::query_scalar(
            "SELECT c.state FROM units u JOIN campaigns c ON c.id = u.campaign_id WHERE u.id = ?",
        )
        .bind(lease.unit_id)
        .fetch_one(&mut *tx)
        .await?;
        let out = if lease.state == "active" && campaign_state == "active" {
            let dl = lease.deadline.max(now + grace_s);
            let p = if progress.is_finite() {
                progress.clamp(0.0, 1.0)
            } else {
                0.0
            };
            sqlx::query(
                "UPDATE leases SET deadline = ?, heartbeat_at = ?, progress = ? WHERE id = ?",
            )
            .bind(dl)
            .bind(now)
            .bind(p)
            .bind(lease_id)
            .execute(&mut *tx)
            .await?;
            HeartbeatOutcome {
                deadline: dl,
                keep_going: true,
            }
        } else {
            HeartbeatOutcome {
                deadline: lease.deadline,
                keep_going: false,
            }
        };
        tx.commit().await?;
        Ok(out)
    }

    /// The worker gives a lease back; returns whether it was still held.
    pub async fn release(&self, worker_id: i64, lease_id: i64, now: i64) -> Result<bool> {
        let _w = self.write.lock().await;
        let mut tx = self.pool.begin().await?;
        let lease = owned_lease(&mut tx, worker_id, lease_id).await?;
        sqlx::query("UPDATE workers SET last_seen = max(last_seen, ?) WHERE id = ?")
            .bind(now)
            .bind(worker_id)
            .execute(&mut *tx)
            .await?;
        let released = match lease.state.as_str() {
            "active" => {
                sqlx::query("UPDATE leases SET state = 'released', closed_at = ? WHERE id = ?")
                    .bind(now)
                    .bind(lease_id)
                    .execute(&mut *tx)
                    .await?;
                sqlx::query("UPDATE units SET active = active - 1 WHERE id = ?")
                    .bind(lease.unit_id)
                    .execute(&mut *tx)
                    .await?;
                true
            }
            "expired" | "withdrawn" => {
                sqlx::query("UPDATE leases SET state = 'released', closed_at = ? WHERE id = ?")
                    .bind(now)
                    .bind(lease_id)
                    .execute(&mut *tx)
                    .await?;
                false
            }
            _ => false,
        };
        tx.commit().await?;
        Ok(released)
    }
}

pub(super) fn quarantined(id: i64) -> StoreError {
    StoreError::Forbidden(
        "quarantined",
        format!("worker {id} is quarantined after repeated wrong reports and gets no more work; check the machine (memory, overclocking, modified software) and enrol a fresh key"),
    )
}

/// The lease, if it exists and belongs to this worker.
pub(super) async fn owned_lease(
    tx: &mut Transaction<'_, Sqlite>,
    worker_id: i64,
    lease_id: i64,
) -> Result<LeaseRow> {
    let r = sqlx::query("SELECT * FROM leases WHERE id = ?")
        .bind(lease_id)
        .fetch_optional(&mut **tx)
        .await?;
    let lease = match r {
        Some(r) => lease_from_row(&r)?,
        None => {
            return Err(StoreError::NotFound(format!(
                "no lease {lease_id}; ask for a new one with POST /api/v1/lease"
            )))
        }
    };
    if lease.worker_id != worker_id {
        return Err(StoreError::Forbidden(
            "not_your_lease",
            format!("lease {lease_id} is not held by worker {worker_id}"),
        ));
    }
    Ok(lease)
}

pub(super) async fn expire_in(tx: &mut Transaction<'_, Sqlite>, now: i64) -> Result<u64> {
    let units: Vec<i64> = sqlx::query_scalar("UPDATE leases SET state = 'expired', closed_at = ?1 WHERE state = 'active' AND deadline < ?1 RETURNING unit_id")
        .bind(now)
        .fetch_all(&mut **tx)
        .await?;
    for u in &units {
        sqlx::query("UPDATE units SET active = active - 1 WHERE id = ?")
            .bind(u)
            .execute(&mut **tx)
            .await?;
    }
    Ok(units.len() as u64)
}
