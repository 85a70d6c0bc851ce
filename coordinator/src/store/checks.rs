//! The organiser's own computations: spot checks of single pieces of a report and rechecks
//! of whole units, as jobs for the coordinator's checker (or results from a trusted worker),
//! and what their results set in motion.

use super::leases::{load_unit_row, LeasePolicy};
use super::settle::{quarantine, set_verdict, settle, Offence};
use super::workers::load_worker;
use super::{ReportRow, Result, SpotCheckRow, Store, StoreError, UNIT_SELECT};
use crate::lifecycle::{self, Outcome};
use crate::op;
use cubehunt_common::report::piece_leaf;
use cubehunt_common::{merkle, pieces, Rect};
use sqlx::AnyConnection;
use std::collections::BTreeSet;

/// Something for the organiser's side to compute.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum CheckJob {
    /// One piece of one report.
    Piece {
        check_id: i64,
        unit_id: i64,
        k: i64,
        rect: Rect,
    },
    /// A whole unit.
    Unit { unit_id: i64, k: i64, rect: Rect },
}

/// What came of a check.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum CheckResult {
    Passed,
    /// The report (and so its worker) was proven wrong.
    Failed {
        worker_id: i64,
    },
    /// The check was no longer needed (done by someone else meanwhile).
    Moot,
}

impl Store {
    /// Up to `limit` jobs, spot checks first (they are small), oldest first.
    pub async fn check_jobs(&self, limit: i64) -> Result<Vec<CheckJob>> {
        let mut out = Vec::new();
        let rows = sqlx::query(
            "SELECT s.*, t.k AS k FROM spot_checks s JOIN units u ON u.id = s.unit_id JOIN targets t ON t.id = u.target_id \
             WHERE s.state = 'waiting' ORDER BY s.id LIMIT $1",
        )
        .bind(limit)
        .fetch_all(self.pool())
        .await?;
        for r in &rows {
            let sc = SpotCheckRow::from_row(r)?;
            let unit = self
                .unit(sc.unit_id)
                .await?
                .ok_or_else(|| StoreError::NotFound(format!("unit {}", sc.unit_id)))?;
            let ps = pieces::of_unit(&unit.spec);
            let rect = *ps.get(sc.piece as usize).ok_or_else(|| {
                StoreError::Corrupt(format!(
                    "spot check {} names piece {} of {}",
                    sc.id,
                    sc.piece,
                    ps.len()
                ))
            })?;
            out.push(CheckJob::Piece {
                check_id: sc.id,
                unit_id: sc.unit_id,
                k: unit.spec.k,
                rect,
            });
        }
        let left = limit - out.len() as i64;
        if left > 0 {
            let q = format!("{UNIT_SELECT} WHERE u.recheck = 1 AND u.known_digest IS NULL ORDER BY u.id LIMIT $1");
            for r in sqlx::query(&q).bind(left).fetch_all(self.pool()).await? {
                let u = super::UnitRow::from_row(&r)?;
                out.push(CheckJob::Unit {
                    unit_id: u.id(),
                    k: u.spec.k,
                    rect: u.spec.rect,
                });
            }
        }
        Ok(out)
    }

    /// Record the coordinator's computation of a spot-checked piece and act on it.
    pub async fn complete_spot_check(
        &self,
        check_id: i64,
        computed: &Outcome,
        policy: &LeasePolicy,
        now: i64,
    ) -> Result<CheckResult> {
        let (computed, policy) = (computed.clone(), policy.clone());
        self.write(op!(
            |c| spot_check_done(c, check_id, computed, policy, now).await
        ))
        .await
    }

    /// Record the organiser's own result for a whole unit (`by`: `coordinator` or
    /// `worker:<id>`) and decide the unit with it.
    pub async fn complete_recheck(
        &self,
        unit_id: i64,
        outcome: &Outcome,
        by: &str,
        policy: &LeasePolicy,
        now: i64,
    ) -> Result<CheckResult> {
        let (outcome, by, policy) = (outcome.clone(), by.to_string(), policy.clone());
        self.write(op!(|c| {
            let unit = load_unit_row(c, unit_id).await?;
            if unit.known.is_some() {
                return Ok(CheckResult::Moot);
            }
            sqlx::query("UPDATE units SET known_digest = $1, known_solutions = $2, known_by = $3, known_at = $4 WHERE id = $5")
                .bind(outcome.digest.to_string())
                .bind(outcome.solutions_json())
                .bind(&by)
                .bind(now)
                .bind(unit_id)
                .execute(&mut *c)
                .await?;
            settle(c, BTreeSet::from([unit_id]), &policy, now).await?;
            Ok(CheckResult::Passed)
        }))
        .await
    }

    /// Checks a target's certificate waits for: (spot checks waiting on its units' counted
    /// reports, units waiting for the organiser's side).
    pub async fn target_waiting_checks(&self, target_id: i64) -> Result<(i64, i64)> {
        let spot: i64 = sqlx::query_scalar(
            "SELECT count(*) FROM spot_checks s JOIN units u ON u.id = s.unit_id JOIN reports r ON r.id = s.report_id \
             WHERE u.target_id = $1 AND s.state = 'waiting' AND r.verdict IN ('counted', 'agree', 'disagree')",
        )
        .bind(target_id)
        .fetch_one(self.pool())
        .await?;
        let units: i64 = sqlx::query_scalar(
            "SELECT count(*) FROM units WHERE target_id = $1 AND recheck = 1 AND known_digest IS NULL",
        )
        .bind(target_id)
        .fetch_one(self.pool())
        .await?;
        Ok((spot, units))
    }

    /// Quarantine a worker by the organiser's decision: its counted reports stop counting
    /// and their units go to the organiser's side again (as for any quarantine).
    pub async fn quarantine_by_hand(
        &self,
        worker_id: i64,
        reason: &str,
        policy: &LeasePolicy,
        now: i64,
    ) -> Result<()> {
        let (reason, policy) = (reason.to_string(), policy.clone());
        self.write(op!(|c| {
            let w = load_worker(c, worker_id).await?;
            if w.quarantined {
                return Ok(());
            }
            let off = Offence {
                kind: "admin",
                report_id: None,
                unit_id: None,
                spot_check_id: None,
                detail: reason,
                proven: false,
            };
            let again = quarantine(c, &w, &off, &policy, now).await?;
            settle(c, again, &policy, now).await?;
            Ok(())
        }))
        .await
    }

    pub async fn spot_checks_of_report(&self, report_id: i64) -> Result<Vec<SpotCheckRow>> {
        let rows = sqlx::query("SELECT * FROM spot_checks WHERE report_id = $1 ORDER BY piece")
            .bind(report_id)
            .fetch_all(self.pool())
            .await?;
        rows.iter().map(SpotCheckRow::from_row).collect()
    }
}

async fn spot_check_done(
    c: &mut AnyConnection,
    check_id: i64,
    computed: Outcome,
    policy: LeasePolicy,
    now: i64,
) -> Result<CheckResult> {
    let r = sqlx::query("SELECT * FROM spot_checks WHERE id = $1")
        .bind(check_id)
        .fetch_optional(&mut *c)
        .await?
        .ok_or_else(|| StoreError::NotFound(format!("no spot check {check_id}")))?;
    let sc = SpotCheckRow::from_row(&r)?;
    if sc.state != "waiting" {
        return Ok(CheckResult::Moot);
    }
    let report = ReportRow::from_row(
        &sqlx::query("SELECT * FROM reports WHERE id = $1")
            .bind(sc.report_id)
            .fetch_one(&mut *c)
            .await?,
    )?;
    let unit = load_unit_row(c, sc.unit_id).await?;
    let ps = pieces::of_unit(&unit.spec);
    let piece = *ps.get(sc.piece as usize).ok_or_else(|| {
        StoreError::Corrupt(format!("spot check {check_id}: no piece {}", sc.piece))
    })?;
    // The claimed digest must be the one the worker signed (its path leads to the root).
    let committed = committed(&sc, &report, ps.len());
    let passed = committed
        && lifecycle::piece_confirms(&sc.claimed, &report.solutions, &piece, &computed, |s, r| {
            s.in_rect(r)
        });
    sqlx::query("UPDATE spot_checks SET state = $1, computed = $2, computed_solutions = $3, done_at = $4 WHERE id = $5")
        .bind(if passed { "passed" } else { "failed" })
        .bind(computed.digest.to_string())
        .bind(computed.solutions_json())
        .bind(now)
        .bind(check_id)
        .execute(&mut *c)
        .await?;
    if passed {
        return Ok(CheckResult::Passed);
    }
    set_verdict(
        c,
        &report,
        report.verdict,
        true,
        Some("proven wrong by a spot check"),
    )
    .await?;
    let w = load_worker(c, report.worker_id).await?;
    if !w.quarantined {
        let off = Offence {
            kind: "piece_mismatch",
            report_id: Some(report.id),
            unit_id: Some(unit.id()),
            spot_check_id: Some(check_id),
            detail: format!(
                "report {} on unit {} claims {} for piece {} but the coordinator computes {}",
                report.id,
                unit.id(),
                sc.claimed,
                sc.piece,
                computed.digest
            ),
            proven: true,
        };
        let mut again = quarantine(c, &w, &off, &policy, now).await?;
        again.insert(unit.id());
        settle(c, again, &policy, now).await?;
    }
    Ok(CheckResult::Failed { worker_id: w.id })
}

/// Whether a spot check's claimed digest is committed under the report's signed root.
pub fn committed(sc: &SpotCheckRow, report: &ReportRow, n_pieces: usize) -> bool {
    let Some(path) = merkle::path_from_hex(&sc.proof) else {
        return false;
    };
    let Ok(root) = hex::decode(&report.pieces_root) else {
        return false;
    };
    let Ok(root): std::result::Result<merkle::Hash, _> = root.try_into() else {
        return false;
    };
    report.pieces as usize == n_pieces
        && merkle::verify_path(
            &merkle::leaf_hash(&piece_leaf(sc.piece as usize, &sc.claimed)),
            sc.piece as usize,
            n_pieces,
            &path,
            &root,
        )
}
