//! Writing down what [`crate::lifecycle`] decides: a unit's decision, report verdicts and
//! the worker counters that follow them, quarantine and the rollback after a proven wrong
//! report. Runs inside the caller's transaction.

use super::leases::{
    close_lease, load_unit_row, offer_if_wanted, withdraw_unit_leases, withdraw_worker_leases,
    LeasePolicy,
};
use super::workers::{load_worker, owner_workers};
use super::{ReportRow, Result, UnitRow, WorkerRow};
use crate::lifecycle::{self, Ballot, Counted, Decision, Outcome, UnitState, Verdict};
use sqlx::AnyConnection;
use std::collections::BTreeSet;

/// Why a worker is quarantined, for the incident record.
#[derive(Clone, Debug)]
pub struct Offence {
    /// `piece_mismatch`, `unit_mismatch`, `too_many_errors` or `admin`
    pub kind: &'static str,
    pub report_id: Option<i64>,
    pub unit_id: Option<i64>,
    pub spot_check_id: Option<i64>,
    pub detail: String,
    /// Proven wrong (quarantines the whole owner when the rules say so); `false` for a
    /// quarantine after too many outvoted reports.
    pub proven: bool,
}

pub(super) async fn counted_reports(c: &mut AnyConnection, unit_id: i64) -> Result<Vec<ReportRow>> {
    let rows = sqlx::query(
        "SELECT * FROM reports WHERE unit_id = $1 AND verdict IN ('counted', 'agree', 'disagree') ORDER BY id",
    )
    .bind(unit_id)
    .fetch_all(&mut *c)
    .await?;
    rows.iter().map(ReportRow::from_row).collect()
}

fn ballots(reports: &[ReportRow]) -> Vec<Ballot> {
    reports
        .iter()
        .map(|r| Ballot {
            report_id: r.id,
            worker_id: r.worker_id,
            owner: r.owner.clone(),
            outcome: r.outcome(),
        })
        .collect()
}

/// Change a report's verdict (and whether it is proven wrong), keeping the counters of its
/// worker and unit in step (see [`Verdict::counters`]).
pub(super) async fn set_verdict(
    c: &mut AnyConnection,
    r: &ReportRow,
    to: Verdict,
    wrong: bool,
    reason: Option<&str>,
) -> Result<()> {
    let (s0, e0) = r.verdict.counters(r.wrong);
    let (s1, e1) = to.counters(wrong);
    sqlx::query("UPDATE reports SET verdict = $1, wrong = $2, reason = CASE WHEN $3 = '' THEN reason ELSE $3 END WHERE id = $4")
        .bind(to.as_str())
        .bind(i64::from(wrong))
        .bind(reason.unwrap_or(""))
        .bind(r.id)
        .execute(&mut *c)
        .await?;
    if (s0, e0) != (s1, e1) {
        sqlx::query("UPDATE workers SET units_settled = units_settled + $1, errors = errors + $2 WHERE id = $3")
            .bind(s1 - s0)
            .bind(e1 - e0)
            .bind(r.worker_id)
            .execute(&mut *c)
            .await?;
    }
    let votes_delta = i64::from(to.votes()) - i64::from(r.verdict.votes());
    if votes_delta != 0 {
        sqlx::query("UPDATE units SET reports = reports + $1 WHERE id = $2")
            .bind(votes_delta)
            .bind(r.unit_id)
            .execute(&mut *c)
            .await?;
    }
    Ok(())
}

/// Credit a report that matches the organiser's own result.
async fn confirm(c: &mut AnyConnection, r: &ReportRow) -> Result<()> {
    if r.confirmed {
        return Ok(());
    }
    sqlx::query("UPDATE reports SET confirmed = 1 WHERE id = $1")
        .bind(r.id)
        .execute(&mut *c)
        .await?;
    sqlx::query("UPDATE workers SET confirmed = confirmed + 1 WHERE id = $1")
        .bind(r.worker_id)
        .execute(&mut *c)
        .await?;
    Ok(())
}

/// Decide every unit in `units` and write the decisions down, following the consequences
/// (a proven wrong report quarantines its worker, which re-decides the units it reported
/// on) until nothing changes. Returns the final state of each unit first named.
pub(super) async fn settle(
    c: &mut AnyConnection,
    units: BTreeSet<i64>,
    policy: &LeasePolicy,
    now: i64,
) -> Result<Vec<(i64, UnitState)>> {
    let first: Vec<i64> = units.iter().copied().collect();
    let mut queue = units;
    let mut guard = 0usize;
    while let Some(u) = queue.pop_first() {
        guard += 1;
        if guard > 1_000_000 {
            break; // cannot happen: every round quarantines a worker or decides a unit for good
        }
        queue.extend(settle_one(c, u, policy, now).await?);
    }
    let mut out = Vec::new();
    for u in first {
        out.push((u, load_unit_row(c, u).await?.state));
    }
    Ok(out)
}

/// Decide one unit; returns units to decide again (after a quarantine this triggered).
async fn settle_one(
    c: &mut AnyConnection,
    unit_id: i64,
    policy: &LeasePolicy,
    now: i64,
) -> Result<BTreeSet<i64>> {
    let unit = load_unit_row(c, unit_id).await?;
    let reports = counted_reports(c, unit_id).await?;
    if let Some(known) = &unit.known {
        // Proven wrong: everyone who contradicts the organiser's own result.
        for r in reports.iter().filter(|r| r.outcome() != *known) {
            let w = load_worker(c, r.worker_id).await?;
            set_verdict(
                c,
                r,
                r.verdict,
                true,
                Some("proven wrong: the organiser's own computation of the unit differs"),
            )
            .await?;
            if !w.quarantined {
                let off = Offence {
                    kind: "unit_mismatch",
                    report_id: Some(r.id),
                    unit_id: Some(unit_id),
                    spot_check_id: None,
                    detail: format!(
                        "report {} on unit {unit_id} claims {} but the organiser's computation gives {}",
                        r.id, r.digest, known.digest
                    ),
                    proven: true,
                };
                let mut more = quarantine(c, &w, &off, policy, now).await?;
                more.insert(unit_id);
                return Ok(more);
            }
        }
        for r in reports.iter().filter(|r| r.outcome() == *known) {
            confirm(c, r).await?;
        }
    }
    let reports = counted_reports(c, unit_id).await?;
    let decision = lifecycle::decide(&ballots(&reports), unit.known.as_ref(), &policy.rules);
    apply(c, &unit, &reports, &decision, policy, now).await
}

async fn apply(
    c: &mut AnyConnection,
    unit: &UnitRow,
    reports: &[ReportRow],
    d: &Decision,
    policy: &LeasePolicy,
    now: i64,
) -> Result<BTreeSet<i64>> {
    let id = unit.id();
    let mut more = BTreeSet::new();
    match d {
        Decision::Settled { outcome, agree, .. } => {
            for r in reports {
                let to = if agree.contains(&r.id) {
                    Verdict::Agree
                } else {
                    Verdict::Disagree
                };
                if r.verdict != to {
                    set_verdict(c, r, to, r.wrong, None).await?;
                }
            }
            let same = unit.state == UnitState::Settled && unit.settled.as_ref() == Some(outcome);
            if !same {
                if unit.state == UnitState::Settled {
                    unsettle(c, unit, now).await?;
                }
                withdraw_unit_leases(c, id, now).await?;
                sqlx::query(
                    "UPDATE units SET state = 'settled', need = 0, offered_to = NULL, offered_at = NULL, \
                     settled_digest = $1, settled_solutions = $2, settled_at = $3 WHERE id = $4",
                )
                .bind(outcome.digest.to_string())
                .bind(outcome.solutions_json())
                .bind(now)
                .bind(id)
                .execute(&mut *c)
                .await?;
                for s in &outcome.solutions {
                    let [a, b, cc] = s.to_strings();
                    sqlx::query("INSERT INTO solutions (target_id, a, b, c, unit_id, found_at) VALUES ($1, $2, $3, $4, $5, $6) ON CONFLICT DO NOTHING")
                        .bind(unit.target_id)
                        .bind(a)
                        .bind(b)
                        .bind(cc)
                        .bind(id)
                        .bind(now)
                        .execute(&mut *c)
                        .await?;
                }
            }
            // Outvoted workers may now be over the error threshold.
            for r in reports.iter().filter(|r| !agree.contains(&r.id)) {
                more.extend(threshold(c, r.worker_id, policy, now).await?);
            }
        }
        Decision::Open { need } | Decision::Disputed { need } => {
            if unit.state == UnitState::Settled {
                unsettle(c, unit, now).await?;
            }
            for r in reports.iter().filter(|r| r.verdict != Verdict::Counted) {
                set_verdict(c, r, Verdict::Counted, r.wrong, None).await?;
            }
            sqlx::query("UPDATE units SET state = $1, need = $2 WHERE id = $3")
                .bind(d.state().as_str())
                .bind(*need as i64)
                .bind(id)
                .execute(&mut *c)
                .await?;
            offer_if_wanted(c, id, policy, now).await?;
        }
        Decision::Review => {
            if unit.state == UnitState::Settled {
                unsettle(c, unit, now).await?;
            }
            withdraw_unit_leases(c, id, now).await?;
            sqlx::query("UPDATE units SET state = 'review', need = 0, recheck = 1, offered_to = NULL, offered_at = NULL WHERE id = $1")
                .bind(id)
                .execute(&mut *c)
                .await?;
        }
    }
    Ok(more)
}

/// A settled unit goes back: its outcome and solutions are withdrawn, and so is every
/// certificate that rests on it.
async fn unsettle(c: &mut AnyConnection, unit: &UnitRow, now: i64) -> Result<()> {
    let id = unit.id();
    sqlx::query("UPDATE units SET settled_digest = NULL, settled_solutions = NULL, settled_at = NULL WHERE id = $1")
        .bind(id)
        .execute(&mut *c)
        .await?;
    sqlx::query("DELETE FROM solutions WHERE unit_id = $1")
        .bind(id)
        .execute(&mut *c)
        .await?;
    sqlx::query(
        "UPDATE certificates SET revoked_at = $1, revoked_reason = $2 \
         WHERE target_id = $3 AND bound >= $4 AND revoked_at IS NULL",
    )
    .bind(now)
    .bind(format!(
        "unit {id} was reopened after one of its settlers was found wrong"
    ))
    .bind(unit.target_id)
    .bind(super::int(unit.spec.bound))
    .execute(&mut *c)
    .await?;
    Ok(())
}

/// Quarantine a worker whose error count reached the threshold.
pub(super) async fn threshold(
    c: &mut AnyConnection,
    worker_id: i64,
    policy: &LeasePolicy,
    now: i64,
) -> Result<BTreeSet<i64>> {
    let w = load_worker(c, worker_id).await?;
    if w.quarantined || w.errors < policy.rules.quarantine_after.max(1) as i64 {
        return Ok(BTreeSet::new());
    }
    let off = Offence {
        kind: "too_many_errors",
        report_id: None,
        unit_id: None,
        spot_check_id: None,
        detail: format!(
            "{} wrong reports (the limit is {})",
            w.errors, policy.rules.quarantine_after
        ),
        proven: false,
    };
    quarantine(c, &w, &off, policy, now).await
}

/// Quarantine `w` (and, for a proven offence when the rules say so, every worker of its
/// owner): withdraw their leases and offers, void every report of theirs that still counts,
/// send those units to the organiser's side, and record the incident. Returns the units to
/// decide again.
pub(super) async fn quarantine(
    c: &mut AnyConnection,
    w: &WorkerRow,
    off: &Offence,
    policy: &LeasePolicy,
    now: i64,
) -> Result<BTreeSet<i64>> {
    let others = if off.proven {
        owner_workers(c, &w.owner, w.id).await?
    } else {
        Vec::new()
    };
    let mut everyone = vec![w.id];
    everyone.extend(&others);
    let mut counted = Vec::new();
    for &wid in &everyone {
        let rows = sqlx::query("SELECT * FROM reports WHERE worker_id = $1 AND verdict IN ('counted', 'agree', 'disagree')")
            .bind(wid)
            .fetch_all(&mut *c)
            .await?;
        for r in rows.iter().map(ReportRow::from_row) {
            counted.push(r?);
        }
    }
    let plan = lifecycle::rollback(
        w.id,
        &others,
        &counted
            .iter()
            .map(|r| Counted {
                report_id: r.id,
                unit_id: r.unit_id,
                worker_id: r.worker_id,
            })
            .collect::<Vec<_>>(),
        &policy.rules,
    );
    let reason = format!("{}: {}", off.kind, off.detail);
    let mut affected: BTreeSet<i64> = BTreeSet::new();
    for &q in &plan.quarantine {
        sqlx::query("UPDATE workers SET quarantined = 1, quarantined_at = $1, quarantine_reason = $2 WHERE id = $3 AND quarantined = 0")
            .bind(now)
            .bind(&reason)
            .bind(q)
            .execute(&mut *c)
            .await?;
        affected.extend(withdraw_worker_leases(c, q, now).await?);
    }
    for r in counted.iter().filter(|r| plan.void.contains(&r.id)) {
        // An outvoted report stays its worker's error after it is voided.
        let wrong = r.wrong || r.verdict == Verdict::Disagree;
        set_verdict(
            c,
            r,
            Verdict::Voided,
            wrong,
            Some(&format!("its worker was quarantined ({reason})")),
        )
        .await?;
    }
    for u in &plan.recheck {
        sqlx::query("UPDATE units SET recheck = 1 WHERE id = $1")
            .bind(u)
            .execute(&mut *c)
            .await?;
    }
    let list = |v: &BTreeSet<i64>| serde_json::to_string(v).expect("ids serialise");
    sqlx::query(
        "INSERT INTO incidents (at, kind, worker_id, report_id, unit_id, spot_check_id, detail, quarantined, voided, rechecked) \
         VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10)",
    )
    .bind(now)
    .bind(off.kind)
    .bind(w.id)
    .bind(off.report_id)
    .bind(off.unit_id)
    .bind(off.spot_check_id)
    .bind(&off.detail)
    .bind(list(&plan.quarantine))
    .bind(list(&plan.void))
    .bind(list(&plan.recheck))
    .execute(&mut *c)
    .await?;
    tracing::warn!(worker = w.id, kind = off.kind, quarantined = ?plan.quarantine, voided = plan.void.len(), rechecked = plan.recheck.len(), detail = %off.detail, "quarantine");
    affected.extend(plan.recheck.iter().copied());
    let _ = close_lease;
    let _: Option<&Outcome> = None;
    Ok(affected)
}
