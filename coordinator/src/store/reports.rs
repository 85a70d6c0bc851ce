//! Recording a report: one transaction that stores it in canonical form, closes its lease,
//! draws its spot checks and decides its unit ([`super::settle`]).

use super::leases::{close_lease, load_unit_row, owned_lease, quarantined, LeasePolicy};
use super::settle::{settle, threshold};
use super::workers::{begin_call, Call};
use super::{ReportRow, Result, Store, StoreError};
use crate::lifecycle::{self, Refusal, UnitState};
use crate::op;
use cubehunt_common::report::piece_leaves;
use cubehunt_common::{merkle, Digest, Solution};
use rand::RngCore;
use sqlx::AnyConnection;
use std::collections::BTreeSet;

/// A report whose signature and shape the API has checked. `refusal` carries a false claim
/// found before the store was reached (false solution, counts that differ, zero work): such
/// a report is kept for the record, proves its worker wrong and never votes.
#[derive(Clone, Debug)]
pub struct IncomingReport {
    pub call: Call,
    pub lease_id: i64,
    pub digest: Digest,
    /// Every piece digest, in piece order (combining to `digest`).
    pub pieces: Vec<Digest>,
    pub pieces_root: String,
    /// Canonical, sorted, without repeats.
    pub solutions: Vec<Solution>,
    pub signature: String,
    pub elapsed_s: f64,
    pub refusal: Option<Refusal>,
}

#[derive(Clone, Debug, PartialEq, Eq)]
pub enum ReportOutcome {
    /// Stored and counted; the unit's state afterwards and the pieces drawn for checking.
    Stored {
        unit_state: UnitState,
        spot_checks: usize,
    },
    /// This lease already has a stored report: nothing changed.
    Repeat { unit_state: UnitState },
    /// Stored as refused: a false claim, which quarantined the worker.
    Refused { code: &'static str, reason: String },
}

impl Store {
    /// Store one report and decide its unit. Durable when this returns.
    pub async fn record_report(
        &self,
        r: &IncomingReport,
        policy: &LeasePolicy,
    ) -> Result<ReportOutcome> {
        let (r, policy) = (r.clone(), policy.clone());
        self.write(op!(|c| record(c, r, policy).await)).await
    }

    /// Reports of a unit, oldest first.
    pub async fn unit_reports(&self, unit_id: i64) -> Result<Vec<ReportRow>> {
        let rows = sqlx::query("SELECT * FROM reports WHERE unit_id = $1 ORDER BY id")
            .bind(unit_id)
            .fetch_all(self.pool())
            .await?;
        rows.iter().map(ReportRow::from_row).collect()
    }

    pub async fn report(&self, id: i64) -> Result<Option<ReportRow>> {
        let r = sqlx::query("SELECT * FROM reports WHERE id = $1")
            .bind(id)
            .fetch_optional(self.pool())
            .await?;
        r.as_ref().map(ReportRow::from_row).transpose()
    }
}

async fn record(
    c: &mut AnyConnection,
    r: IncomingReport,
    policy: LeasePolicy,
) -> Result<ReportOutcome> {
    let now = r.call.now;
    let w = begin_call(c, &r.call).await?;
    if w.quarantined {
        return Err(quarantined(&w));
    }
    let lease = owned_lease(c, w.id, r.lease_id).await?;
    let unit = load_unit_row(c, lease.unit_id).await?;
    match lease.state.as_str() {
        "reported" => {
            return Ok(ReportOutcome::Repeat {
                unit_state: unit.state,
            })
        }
        "refused" => {
            return Err(StoreError::Conflict(
                "report_refused",
                format!(
                    "a report for lease {} was already refused; ask for a new lease",
                    r.lease_id
                ),
            ))
        }
        "released" => {
            return Err(StoreError::Conflict(
                "lease_released",
                format!("lease {} was given back; ask for a new lease", r.lease_id),
            ))
        }
        _ => {} // active, expired, withdrawn: the work was done under a lease we issued.
    }
    let solutions = lifecycle::solutions_json(&r.solutions);
    if let Some(refusal) = &r.refusal {
        insert(
            c,
            &r,
            &lease.owner,
            lease.unit_id,
            &solutions,
            "refused",
            true,
            &refusal.to_string(),
        )
        .await?;
        close_lease(c, &lease, "refused", now).await?;
        sqlx::query("UPDATE workers SET reports = reports + 1, errors = errors + 1 WHERE id = $1")
            .bind(w.id)
            .execute(&mut *c)
            .await?;
        let again = threshold(c, w.id, &policy, now).await?;
        settle(c, again, &policy, now).await?;
        return Ok(ReportOutcome::Refused {
            code: refusal.code(),
            reason: refusal.to_string(),
        });
    }
    let same_owner: i64 = sqlx::query_scalar(
        "SELECT count(*) FROM reports WHERE unit_id = $1 AND owner = $2 AND verdict IN ('counted', 'agree', 'disagree')",
    )
    .bind(unit.id())
    .bind(&lease.owner)
    .fetch_one(&mut *c)
    .await?;
    if same_owner > 0 {
        // Only possible for a late report on an expired lease after the owner was handed the
        // unit again through another worker: one owner has one vote, keep the first.
        close_lease(c, &lease, "released", now).await?;
        return Err(StoreError::Conflict(
            "owner_already_reported",
            format!(
                "owner {:?} already reported unit {}; one owner counts once per unit",
                lease.owner,
                unit.id()
            ),
        ));
    }
    let report_id = insert(
        c,
        &r,
        &lease.owner,
        unit.id(),
        &solutions,
        "counted",
        false,
        "",
    )
    .await?;
    close_lease(c, &lease, "reported", now).await?;
    let wall = (now - lease.issued_at).max(1);
    sqlx::query("UPDATE workers SET reports = reports + 1, work_us = work_us + $1, wall_s = wall_s + $2 WHERE id = $3")
        .bind(super::int(unit.spec.cost))
        .bind(wall)
        .bind(w.id)
        .execute(&mut *c)
        .await?;
    sqlx::query("UPDATE units SET reports = reports + 1 WHERE id = $1")
        .bind(unit.id())
        .execute(&mut *c)
        .await?;
    if w.trusted && unit.known.is_none() {
        // A trusted worker's result counts as the organiser's own.
        sqlx::query("UPDATE units SET known_digest = $1, known_solutions = $2, known_by = $3, known_at = $4 WHERE id = $5")
            .bind(r.digest.to_string())
            .bind(&solutions)
            .bind(format!("worker:{}", w.id))
            .bind(now)
            .bind(unit.id())
            .execute(&mut *c)
            .await?;
    }
    let spot_checks = if unit.known.is_none() && !w.trusted {
        draw_spot_checks(
            c,
            report_id,
            unit.id(),
            &r.pieces,
            policy.rules.spot_checks,
            now,
        )
        .await?
    } else {
        0
    };
    let states = settle(c, BTreeSet::from([unit.id()]), &policy, now).await?;
    Ok(ReportOutcome::Stored {
        unit_state: states[0].1,
        spot_checks,
    })
}

#[allow(clippy::too_many_arguments)]
async fn insert(
    c: &mut AnyConnection,
    r: &IncomingReport,
    owner: &str,
    unit_id: i64,
    solutions: &str,
    verdict: &str,
    wrong: bool,
    reason: &str,
) -> Result<i64> {
    Ok(sqlx::query_scalar(
        "INSERT INTO reports (lease_id, unit_id, worker_id, owner, digest, pieces, pieces_root, solutions, signature, elapsed_s, verdict, wrong, reason, received_at) \
         VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14) RETURNING id",
    )
    .bind(r.lease_id)
    .bind(unit_id)
    .bind(r.call.worker_id)
    .bind(owner)
    .bind(r.digest.to_string())
    .bind(r.pieces.len() as i64)
    .bind(&r.pieces_root)
    .bind(solutions)
    .bind(&r.signature)
    .bind(if r.elapsed_s.is_finite() { r.elapsed_s } else { 0.0 })
    .bind(verdict)
    .bind(i64::from(wrong))
    .bind(reason)
    .bind(r.call.now)
    .fetch_one(&mut *c)
    .await?)
}

/// Draw the pieces the coordinator will recompute, from the operating system's randomness,
/// after the report (which committed to every piece) is stored; keep each drawn piece's
/// claimed digest with its audit path to the signed root.
async fn draw_spot_checks(
    c: &mut AnyConnection,
    report_id: i64,
    unit_id: i64,
    pieces: &[Digest],
    r: u32,
    now: i64,
) -> Result<usize> {
    let drawn = lifecycle::draw_pieces(pieces.len(), r, || rand::rngs::OsRng.next_u64());
    if drawn.is_empty() {
        return Ok(0);
    }
    let leaves = piece_leaves(pieces);
    for &i in &drawn {
        let proof = merkle::path_to_hex(&merkle::path(&leaves, i));
        sqlx::query(
            "INSERT INTO spot_checks (report_id, unit_id, piece, claimed, proof, state, created_at) \
             VALUES ($1, $2, $3, $4, $5, 'waiting', $6)",
        )
        .bind(report_id)
        .bind(unit_id)
        .bind(i as i64)
        .bind(pieces[i].to_string())
        .bind(proof)
        .bind(now)
        .execute(&mut *c)
        .await?;
    }
    Ok(drawn.len())
}
