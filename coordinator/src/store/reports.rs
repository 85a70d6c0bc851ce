//! Reports: storing them, the cross-check, settlement, errors and quarantine.

use super::leases::{owned_lease, LeaseRow};
use super::workers::worker_from_row;
use super::{unit_from_row, Result, Store, StoreError, UnitRow, WorkerRow, UNIT_COLUMNS};
use crate::quorum::{decide, Decision, Vote};
use cubehunt_common::Solution;
use sqlx::{Row, Sqlite, Transaction};

/// A lease with its unit and worker, for checking a report against what was handed out.
#[derive(Clone, Debug)]
pub struct LeaseContext {
    pub lease: LeaseRow,
    pub unit: UnitRow,
    pub worker: WorkerRow,
}

/// A report that passed signature and consistency checks. `refused` carries the reason when
/// a claimed solution was false or outside the unit: such a report is kept for the record,
/// counts as an error and never votes.
#[derive(Clone, Debug)]
pub struct IncomingReport {
    pub lease_id: i64,
    pub worker_id: i64,
    pub digest: String,
    pub candidates: u64,
    /// Canonical, sorted, without repeats.
    pub solutions: Vec<Solution>,
    pub signature: String,
    pub body: String,
    pub elapsed_s: f64,
    pub refused: Option<String>,
}

#[derive(Clone, Debug, PartialEq, Eq)]
pub enum ReportOutcome {
    /// Stored and counted; the unit's state afterwards.
    Stored { unit_state: String },
    /// This lease already has a stored report: nothing changed.
    Repeat { unit_state: String },
    /// Stored as refused and counted as an error for the worker.
    Refused { reason: String, quarantined: bool },
}

/// Canonical JSON of a solution list.
pub fn solutions_json(s: &[Solution]) -> String {
    serde_json::to_string(s).expect("solutions serialise")
}

fn outcome_key(digest: &str, solutions: &str) -> String {
    format!("{digest}|{solutions}")
}

impl Store {
    pub async fn lease_context(&self, lease_id: i64) -> Result<Option<LeaseContext>> {
        let Some(lease) = self.lease(lease_id).await? else {
            return Ok(None);
        };
        let unit = self.unit(lease.unit_id).await?.ok_or_else(|| {
            StoreError::NotFound(format!(
                "unit {} of lease {lease_id} is missing",
                lease.unit_id
            ))
        })?;
        let worker = self.worker(lease.worker_id).await?.ok_or_else(|| {
            StoreError::NotFound(format!("worker {} is missing", lease.worker_id))
        })?;
        Ok(Some(LeaseContext {
            lease,
            unit,
            worker,
        }))
    }

    /// Store one report and apply the cross-check. Durable when this returns.
    pub async fn record_report(
        &self,
        r: &IncomingReport,
        quarantine_after: i64,
        now: i64,
    ) -> Result<ReportOutcome> {
        let _w = self.write.lock().await;
        let mut tx = self.pool.begin().await?;
        let lease = owned_lease(&mut tx, r.worker_id, r.lease_id).await?;
        let unit = load_unit(&mut tx, lease.unit_id).await?;
        match lease.state.as_str() {
            "reported" => {
                tx.commit().await?;
                return Ok(ReportOutcome::Repeat {
                    unit_state: unit.state,
                });
            }
            "rejected" => {
                return Err(StoreError::Conflict(
                    "report_refused",
                    format!(
                        "a report for lease {} was already refused; ask for a new lease",
                        r.lease_id
                    ),
                ));
            }
            "released" => {
                return Err(StoreError::Conflict(
                    "lease_released",
                    format!("lease {} was given back; ask for a new lease", r.lease_id),
                ));
            }
            _ => {} // active, expired, withdrawn: the work was done under a lease we issued.
        }
        sqlx::query("UPDATE workers SET last_seen = max(last_seen, ?) WHERE id = ?")
            .bind(now)
            .bind(r.worker_id)
            .execute(&mut *tx)
            .await?;
        if lease.state == "active" {
            sqlx::query("UPDATE units SET active = active - 1 WHERE id = ?")
                .bind(unit.id)
                .execute(&mut *tx)
                .await?;
        }
        let sols = solutions_json(&r.solutions);

        if let Some(reason) = &r.refused {
            insert_report(&mut tx, r, &lease, &sols, "rejected", reason, now).await?;
            sqlx::query("UPDATE leases SET state = 'rejected', closed_at = ? WHERE id = ?")
                .bind(now)
                .bind(lease.id)
                .execute(&mut *tx)
                .await?;
            sqlx::query("UPDATE workers SET reports = reports + 1 WHERE id = ?")
                .bind(r.worker_id)
                .execute(&mut *tx)
                .await?;
            let q = add_error(&mut tx, r.worker_id, quarantine_after).await?;
            tx.commit().await?;
            return Ok(ReportOutcome::Refused {
                reason: reason.clone(),
                quarantined: q,
            });
        }

        let same_owner: i64 = sqlx::query_scalar("SELECT count(*) FROM reports WHERE unit_id = ? AND owner = ? AND verdict <> 'rejected'")
            .bind(unit.id)
            .bind(&lease.owner)
            .fetch_one(&mut *tx)
            .await?;
        if same_owner > 0 {
            // Only possible for a late report on an expired lease after the owner was
            // handed the unit again: one owner has one vote, keep the first.
            sqlx::query("UPDATE leases SET state = 'released', closed_at = ? WHERE id = ?")
                .bind(now)
                .bind(lease.id)
                .execute(&mut *tx)
                .await?;
            tx.commit().await?;
            return Err(StoreError::Conflict(
                "owner_already_reported",
                format!(
                    "owner {:?} already reported unit {}; one owner counts once per unit",
                    lease.owner, unit.id
                ),
            ));
        }

        let verdict = if unit.state == "settled" {
            let settled = outcome_key(
                unit_settled_digest(&mut tx, unit.id)
                    .await?
                    .as_deref()
                    .unwrap_or(""),
                &settled_solutions(&mut tx, unit.id).await?,
            );
            if settled == outcome_key(&r.digest, &sols) {
                "agree"
            } else {
                "disagree"
            }
        } else {
            "pending"
        };
        insert_report(&mut tx, r, &lease, &sols, verdict, "", now).await?;
        let wall = (now - lease.issued_at).max(1);
        sqlx::query("UPDATE leases SET state = 'reported', closed_at = ? WHERE id = ?")
            .bind(now)
            .bind(lease.id)
            .execute(&mut *tx)
            .await?;
        sqlx::query("UPDATE workers SET reports = reports + 1, work_us = work_us + ?, wall_s = wall_s + ? WHERE id = ?")
            .bind(super::int(unit.cost_us))
            .bind(wall)
            .bind(r.worker_id)
            .execute(&mut *tx)
            .await?;
        sqlx::query("UPDATE units SET reports = reports + 1 WHERE id = ?")
            .bind(unit.id)
            .execute(&mut *tx)
            .await?;
        match verdict {
            "agree" => {
                sqlx::query("UPDATE workers SET units_settled = units_settled + 1 WHERE id = ?")
                    .bind(r.worker_id)
                    .execute(&mut *tx)
                    .await?;
                tx.commit().await?;
                return Ok(ReportOutcome::Stored {
                    unit_state: "settled".into(),
                });
            }
            "disagree" => {
                add_error(&mut tx, r.worker_id, quarantine_after).await?;
                tx.commit().await?;
                return Ok(ReportOutcome::Stored {
                    unit_state: "settled".into(),
                });
            }
            _ => {}
        }

        // The cross-check over every counted report of the unit.
        let rows = sqlx::query("SELECT id, worker_id, owner, digest, solutions FROM reports WHERE unit_id = ? AND verdict = 'pending' ORDER BY id")
            .bind(unit.id)
            .fetch_all(&mut *tx)
            .await?;
        let mut counted: Vec<(i64, i64, String, String, String)> = Vec::new();
        for row in &rows {
            let digest: String = row.try_get("digest")?;
            let sol: String = row.try_get("solutions")?;
            counted.push((
                row.try_get("id")?,
                row.try_get("worker_id")?,
                row.try_get("owner")?,
                outcome_key(&digest, &sol),
                sol,
            ));
        }
        let votes: Vec<Vote> = counted
            .iter()
            .map(|c| Vote {
                owner: &c.2,
                outcome: &c.3,
            })
            .collect();
        let decision = decide(&votes);
        match &decision {
            Decision::Settled { outcome } => {
                let (digest, sols_text) = outcome
                    .split_once('|')
                    .expect("outcome key has a separator");
                for (rid, wid, _, key, _) in &counted {
                    if key == outcome {
                        sqlx::query("UPDATE reports SET verdict = 'agree' WHERE id = ?")
                            .bind(rid)
                            .execute(&mut *tx)
                            .await?;
                        sqlx::query(
                            "UPDATE workers SET units_settled = units_settled + 1 WHERE id = ?",
                        )
                        .bind(wid)
                        .execute(&mut *tx)
                        .await?;
                    } else {
                        sqlx::query("UPDATE reports SET verdict = 'disagree' WHERE id = ?")
                            .bind(rid)
                            .execute(&mut *tx)
                            .await?;
                        add_error(&mut tx, *wid, quarantine_after).await?;
                    }
                }
                let withdrawn = sqlx::query("UPDATE leases SET state = 'withdrawn', closed_at = ? WHERE unit_id = ? AND state = 'active'")
                    .bind(now)
                    .bind(unit.id)
                    .execute(&mut *tx)
                    .await?
                    .rows_affected();
                sqlx::query(
                    "UPDATE units SET state = 'settled', need = 0, active = active - ?, settled_digest = ?, settled_solutions = ?, settled_at = ? WHERE id = ?",
                )
                .bind(withdrawn as i64)
                .bind(digest)
                .bind(sols_text)
                .bind(now)
                .bind(unit.id)
                .execute(&mut *tx)
                .await?;
                let settled: Vec<Solution> = serde_json::from_str(sols_text)
                    .map_err(|e| StoreError::Db(sqlx::Error::Decode(e.into())))?;
                for s in settled {
                    let [a, b, c] = s.to_strings();
                    sqlx::query("INSERT OR IGNORE INTO solutions (target_id, a, b, c, unit_id, found_at) VALUES (?, ?, ?, ?, ?, ?)")
                        .bind(unit.target_id)
                        .bind(a)
                        .bind(b)
                        .bind(c)
                        .bind(unit.id)
                        .bind(now)
                        .execute(&mut *tx)
                        .await?;
                }
            }
            Decision::Open { need } | Decision::Disputed { need } => {
                sqlx::query("UPDATE units SET state = ?, need = ? WHERE id = ?")
                    .bind(decision.state())
                    .bind(need)
                    .bind(unit.id)
                    .execute(&mut *tx)
                    .await?;
            }
        }
        tx.commit().await?;
        Ok(ReportOutcome::Stored {
            unit_state: decision.state().to_string(),
        })
    }

    /// Reports of a unit, oldest first: (report id, worker id, owner, digest, solutions JSON, verdict).
    pub async fn unit_reports(
        &self,
        unit_id: i64,
    ) -> Result<Vec<(i64, i64, String, String, String, String)>> {
        let rows = sqlx::query("SELECT id, worker_id, owner, digest, solutions, verdict FROM reports WHERE unit_id = ? ORDER BY id")
            .bind(unit_id)
            .fetch_all(&self.pool)
            .await?;
        rows.iter()
            .map(|r| {
                Ok((
                    r.try_get(0)?,
                    r.try_get(1)?,
                    r.try_get(2)?,
                    r.try_get(3)?,
                    r.try_get(4)?,
                    r.try_get(5)?,
                ))
            })
            .collect()
    }
}

async fn load_unit(tx: &mut Transaction<'_, Sqlite>, id: i64) -> Result<UnitRow> {
    let q = format!("SELECT {UNIT_COLUMNS} FROM units u JOIN targets t ON t.id = u.target_id JOIN campaigns c ON c.id = u.campaign_id WHERE u.id = ?");
    let r = sqlx::query(&q).bind(id).fetch_one(&mut **tx).await?;
    unit_from_row(&r)
}

async fn unit_settled_digest(tx: &mut Transaction<'_, Sqlite>, id: i64) -> Result<Option<String>> {
    Ok(
        sqlx::query_scalar("SELECT settled_digest FROM units WHERE id = ?")
            .bind(id)
            .fetch_one(&mut **tx)
            .await?,
    )
}

async fn settled_solutions(tx: &mut Transaction<'_, Sqlite>, id: i64) -> Result<String> {
    let s: Option<String> = sqlx::query_scalar("SELECT settled_solutions FROM units WHERE id = ?")
        .bind(id)
        .fetch_one(&mut **tx)
        .await?;
    Ok(s.unwrap_or_default())
}

#[allow(clippy::too_many_arguments)]
async fn insert_report(
    tx: &mut Transaction<'_, Sqlite>,
    r: &IncomingReport,
    lease: &LeaseRow,
    sols: &str,
    verdict: &str,
    reason: &str,
    now: i64,
) -> Result<()> {
    sqlx::query(
        "INSERT INTO reports (lease_id, unit_id, worker_id, owner, digest, candidates, solutions, signature, body, elapsed_s, verdict, reason, received_at) \
         VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
    )
    .bind(lease.id)
    .bind(lease.unit_id)
    .bind(r.worker_id)
    .bind(&lease.owner)
    .bind(&r.digest)
    .bind(super::int(r.candidates))
    .bind(sols)
    .bind(&r.signature)
    .bind(&r.body)
    .bind(if r.elapsed_s.is_finite() { r.elapsed_s } else { 0.0 })
    .bind(verdict)
    .bind(reason)
    .bind(now)
    .execute(&mut **tx)
    .await?;
    Ok(())
}

/// Raise a worker's error count; quarantine it at `quarantine_after`. Returns whether it is
/// quarantined now.
async fn add_error(
    tx: &mut Transaction<'_, Sqlite>,
    worker_id: i64,
    quarantine_after: i64,
) -> Result<bool> {
    let r = sqlx::query("UPDATE workers SET errors = errors + 1, quarantined = CASE WHEN errors + 1 >= ? THEN 1 ELSE quarantined END WHERE id = ? RETURNING *")
        .bind(quarantine_after)
        .bind(worker_id)
        .fetch_one(&mut **tx)
        .await?;
    let w = worker_from_row(&r)?;
    if w.quarantined {
        // Its held leases go back to the pool.
        let units: Vec<i64> = sqlx::query_scalar("UPDATE leases SET state = 'withdrawn' WHERE worker_id = ? AND state = 'active' RETURNING unit_id")
            .bind(worker_id)
            .fetch_all(&mut **tx)
            .await?;
        for u in units {
            sqlx::query("UPDATE units SET active = active - 1 WHERE id = ?")
                .bind(u)
                .execute(&mut **tx)
                .await?;
        }
    }
    Ok(w.quarantined)
}
