//! Raw rows for the audit, the certificate and the exports: read-only, no joins that hide a
//! missing row (left joins, so that a tampered or orphaned row still shows up), paged by id so
//! that memory stays bounded on stores with millions of units.
//!
//! The audit deliberately reads the tables here rather than through the views the service
//! uses ([`super::monitor`]), so that it can compare the two.

use super::{Result, Store, StoreError};
use cubehunt_common::{Rect, Region};
use sqlx::sqlite::SqliteRow;
use sqlx::Row;
use std::str::FromStr;

/// A target with its campaign.
#[derive(Clone, Debug)]
pub struct AuditTarget {
    pub id: i64,
    pub campaign_id: i64,
    pub campaign: String,
    pub kernel: String,
    pub campaign_state: String,
    pub campaign_bound: u64,
    pub k: i64,
    pub bound: u64,
    pub z0: u64,
}

/// A unit row as stored. `k`, `campaign` and `kernel` are `None` when the target or
/// campaign it points at is missing.
#[derive(Clone, Debug)]
pub struct AuditUnit {
    pub id: i64,
    pub target_id: i64,
    pub campaign_id: i64,
    /// The campaign of the unit's target (should equal `campaign_id`).
    pub target_campaign_id: Option<i64>,
    pub campaign: Option<String>,
    pub kernel: Option<String>,
    pub k: Option<i64>,
    /// `Err` holds the stored region text when it is not a region name.
    pub rect: std::result::Result<Rect, String>,
    pub bound: u64,
    pub cost_us: u64,
    pub signature: String,
    pub state: String,
    pub reports: i64,
    pub active: i64,
    pub need: i64,
    pub settled_digest: Option<String>,
    pub settled_solutions: Option<String>,
    pub settled_at: Option<i64>,
}

/// A report row with the lease it names (when that lease exists).
#[derive(Clone, Debug)]
pub struct AuditReport {
    pub id: i64,
    pub lease_id: i64,
    pub unit_id: i64,
    pub worker_id: i64,
    pub owner: String,
    pub digest: String,
    pub candidates: i64,
    pub solutions: String,
    pub signature: String,
    pub body: String,
    pub verdict: String,
    pub received_at: i64,
    pub elapsed_s: f64,
    pub lease: Option<AuditLease>,
}

#[derive(Clone, Debug)]
pub struct AuditLease {
    pub unit_id: i64,
    pub worker_id: i64,
    pub owner: String,
    pub state: String,
    pub issued_at: i64,
}

#[derive(Clone, Debug)]
pub struct AuditWorker {
    pub id: i64,
    pub owner: String,
    pub public_key: String,
    pub kernel: String,
    pub label: String,
    pub reports: i64,
    pub units_settled: i64,
    pub errors: i64,
    pub quarantined: bool,
}

#[derive(Clone, Debug)]
pub struct AuditSolution {
    pub id: i64,
    pub target_id: i64,
    pub a: String,
    pub b: String,
    pub c: String,
    pub unit_id: i64,
    pub found_at: i64,
}

/// One line of the per-unit ledger: a report with its unit and worker.
#[derive(Clone, Debug, serde::Serialize)]
pub struct LedgerRow {
    pub campaign: String,
    pub k: i64,
    pub unit: i64,
    pub region: String,
    pub d_lo: u64,
    pub d_hi: u64,
    pub z_lo: u64,
    pub z_hi: u64,
    pub unit_state: String,
    pub settled_digest: Option<String>,
    pub report: i64,
    pub worker: i64,
    pub owner: String,
    pub label: String,
    pub leased_at: Option<i64>,
    pub reported_at: i64,
    pub elapsed_s: f64,
    pub digest: String,
    pub verdict: String,
}

fn decode(e: impl std::fmt::Display) -> StoreError {
    StoreError::Db(sqlx::Error::Decode(e.to_string().into()))
}

fn u(r: &SqliteRow, col: &str) -> Result<u64> {
    let v: i64 = r.try_get(col)?;
    u64::try_from(v).map_err(|_| decode(format!("column {col} holds the negative value {v}")))
}

const AUDIT_UNIT_SQL: &str = "SELECT u.id, u.target_id, u.campaign_id, t.campaign_id AS target_campaign_id, \
       c.name AS campaign, c.kernel, t.k, u.region, u.d_lo, u.d_hi, u.z_lo, u.z_hi, u.bound, u.cost_us, \
       u.signature, u.state, u.reports, u.active, u.need, u.settled_digest, u.settled_solutions, u.settled_at \
     FROM units u LEFT JOIN targets t ON t.id = u.target_id LEFT JOIN campaigns c ON c.id = u.campaign_id";

fn audit_unit(r: &SqliteRow) -> Result<AuditUnit> {
    let region: String = r.try_get("region")?;
    let rect = match Region::from_str(&region) {
        Ok(region) => Ok(Rect {
            region,
            d_lo: u(r, "d_lo")?,
            d_hi: u(r, "d_hi")?,
            z_lo: u(r, "z_lo")?,
            z_hi: u(r, "z_hi")?,
        }),
        Err(_) => Err(region),
    };
    Ok(AuditUnit {
        id: r.try_get("id")?,
        target_id: r.try_get("target_id")?,
        campaign_id: r.try_get("campaign_id")?,
        target_campaign_id: r.try_get("target_campaign_id")?,
        campaign: r.try_get("campaign")?,
        kernel: r.try_get("kernel")?,
        k: r.try_get("k")?,
        rect,
        bound: u(r, "bound")?,
        cost_us: u(r, "cost_us")?,
        signature: r.try_get("signature")?,
        state: r.try_get("state")?,
        reports: r.try_get("reports")?,
        active: r.try_get("active")?,
        need: r.try_get("need")?,
        settled_digest: r.try_get("settled_digest")?,
        settled_solutions: r.try_get("settled_solutions")?,
        settled_at: r.try_get("settled_at")?,
    })
}

const AUDIT_REPORT_SQL: &str = "SELECT r.id, r.lease_id, r.unit_id, r.worker_id, r.owner, r.digest, r.candidates, r.solutions, \
       r.signature, r.body, r.verdict, r.received_at, r.elapsed_s, \
       l.id AS l_id, l.unit_id AS l_unit, l.worker_id AS l_worker, l.owner AS l_owner, l.state AS l_state, l.issued_at AS l_issued \
     FROM reports r LEFT JOIN leases l ON l.id = r.lease_id";

fn audit_report(r: &SqliteRow) -> Result<AuditReport> {
    let lid: Option<i64> = r.try_get("l_id")?;
    let lease = match lid {
        None => None,
        Some(_) => Some(AuditLease {
            unit_id: r.try_get("l_unit")?,
            worker_id: r.try_get("l_worker")?,
            owner: r.try_get("l_owner")?,
            state: r.try_get("l_state")?,
            issued_at: r.try_get("l_issued")?,
        }),
    };
    Ok(AuditReport {
        id: r.try_get("id")?,
        lease_id: r.try_get("lease_id")?,
        unit_id: r.try_get("unit_id")?,
        worker_id: r.try_get("worker_id")?,
        owner: r.try_get("owner")?,
        digest: r.try_get("digest")?,
        candidates: r.try_get("candidates")?,
        solutions: r.try_get("solutions")?,
        signature: r.try_get("signature")?,
        body: r.try_get("body")?,
        verdict: r.try_get("verdict")?,
        received_at: r.try_get("received_at")?,
        elapsed_s: r.try_get("elapsed_s")?,
        lease,
    })
}

impl Store {
    /// Every target with its campaign, by campaign then k.
    pub async fn audit_targets(&self) -> Result<Vec<AuditTarget>> {
        let rows = sqlx::query(
            "SELECT t.id, t.campaign_id, c.name, c.kernel, c.state, c.bound AS c_bound, t.k, t.bound, t.z0 \
             FROM targets t JOIN campaigns c ON c.id = t.campaign_id ORDER BY c.id, t.k",
        )
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| {
                Ok(AuditTarget {
                    id: r.try_get("id")?,
                    campaign_id: r.try_get("campaign_id")?,
                    campaign: r.try_get("name")?,
                    kernel: r.try_get("kernel")?,
                    campaign_state: r.try_get("state")?,
                    campaign_bound: u(r, "c_bound")?,
                    k: r.try_get("k")?,
                    bound: u(r, "bound")?,
                    z0: u(r, "z0")?,
                })
            })
            .collect()
    }

    /// Targets whose campaign row is missing: (target id, campaign id).
    pub async fn audit_orphan_targets(&self) -> Result<Vec<(i64, i64)>> {
        let rows = sqlx::query("SELECT id, campaign_id FROM targets WHERE campaign_id NOT IN (SELECT id FROM campaigns) ORDER BY id")
            .fetch_all(&self.pool)
            .await?;
        rows.iter()
            .map(|r| Ok((r.try_get(0)?, r.try_get(1)?)))
            .collect()
    }

    /// Up to `limit` units with id greater than `after`, by id.
    pub async fn audit_units_page(&self, after: i64, limit: i64) -> Result<Vec<AuditUnit>> {
        let q = format!("{AUDIT_UNIT_SQL} WHERE u.id > ? ORDER BY u.id LIMIT ?");
        let rows = sqlx::query(&q)
            .bind(after)
            .bind(limit)
            .fetch_all(&self.pool)
            .await?;
        rows.iter().map(audit_unit).collect()
    }

    /// Every report whose unit id lies in `lo ..= hi`, by unit then report id.
    pub async fn audit_reports_for_units(&self, lo: i64, hi: i64) -> Result<Vec<AuditReport>> {
        let q =
            format!("{AUDIT_REPORT_SQL} WHERE r.unit_id BETWEEN ? AND ? ORDER BY r.unit_id, r.id");
        let rows = sqlx::query(&q)
            .bind(lo)
            .bind(hi)
            .fetch_all(&self.pool)
            .await?;
        rows.iter().map(audit_report).collect()
    }

    /// Reports whose unit row is missing: (report id, unit id).
    pub async fn audit_orphan_reports(&self) -> Result<Vec<(i64, i64)>> {
        let rows = sqlx::query("SELECT id, unit_id FROM reports WHERE unit_id NOT IN (SELECT id FROM units) ORDER BY id")
            .fetch_all(&self.pool)
            .await?;
        rows.iter()
            .map(|r| Ok((r.try_get(0)?, r.try_get(1)?)))
            .collect()
    }

    pub async fn audit_workers(&self) -> Result<Vec<AuditWorker>> {
        let rows = sqlx::query("SELECT id, owner, public_key, kernel, label, reports, units_settled, errors, quarantined FROM workers ORDER BY id")
            .fetch_all(&self.pool)
            .await?;
        rows.iter()
            .map(|r| {
                Ok(AuditWorker {
                    id: r.try_get("id")?,
                    owner: r.try_get("owner")?,
                    public_key: r.try_get("public_key")?,
                    kernel: r.try_get("kernel")?,
                    label: r.try_get("label")?,
                    reports: r.try_get("reports")?,
                    units_settled: r.try_get("units_settled")?,
                    errors: r.try_get("errors")?,
                    quarantined: r.try_get::<i64, _>("quarantined")? != 0,
                })
            })
            .collect()
    }

    /// (lease id, unit id, worker id) of every lease in state `active`.
    pub async fn audit_active_leases(&self) -> Result<Vec<(i64, i64, i64)>> {
        let rows = sqlx::query(
            "SELECT id, unit_id, worker_id FROM leases WHERE state = 'active' ORDER BY id",
        )
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| Ok((r.try_get(0)?, r.try_get(1)?, r.try_get(2)?)))
            .collect()
    }

    pub async fn audit_solutions(&self) -> Result<Vec<AuditSolution>> {
        let rows = sqlx::query(
            "SELECT id, target_id, a, b, c, unit_id, found_at FROM solutions ORDER BY id",
        )
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| {
                Ok(AuditSolution {
                    id: r.try_get("id")?,
                    target_id: r.try_get("target_id")?,
                    a: r.try_get("a")?,
                    b: r.try_get("b")?,
                    c: r.try_get("c")?,
                    unit_id: r.try_get("unit_id")?,
                    found_at: r.try_get("found_at")?,
                })
            })
            .collect()
    }

    /// Every unit of one target, by id, for a certificate.
    pub async fn certificate_units(&self, target_id: i64) -> Result<Vec<AuditUnit>> {
        let q = format!("{AUDIT_UNIT_SQL} WHERE u.target_id = ? ORDER BY u.id");
        let rows = sqlx::query(&q)
            .bind(target_id)
            .fetch_all(&self.pool)
            .await?;
        rows.iter().map(audit_unit).collect()
    }

    /// (unit id, worker id, owner from the worker row) of every report in a settling majority
    /// of one target, by unit then worker.
    pub async fn certificate_settlers(&self, target_id: i64) -> Result<Vec<(i64, i64, String)>> {
        let rows = sqlx::query(
            "SELECT r.unit_id, r.worker_id, w.owner FROM reports r \
             JOIN units u ON u.id = r.unit_id JOIN workers w ON w.id = r.worker_id \
             WHERE u.target_id = ? AND r.verdict = 'agree' ORDER BY r.unit_id, r.worker_id",
        )
        .bind(target_id)
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| Ok((r.try_get(0)?, r.try_get(1)?, r.try_get(2)?)))
            .collect()
    }

    /// Up to `limit` ledger lines of one campaign with report id greater than `after`, by report id.
    pub async fn ledger_page(
        &self,
        campaign_id: i64,
        after: i64,
        limit: i64,
    ) -> Result<Vec<LedgerRow>> {
        let rows = sqlx::query(
            "SELECT c.name AS campaign, t.k, u.id AS unit, u.region, u.d_lo, u.d_hi, u.z_lo, u.z_hi, u.state AS unit_state, \
                    u.settled_digest, r.id AS report, r.worker_id, r.owner, coalesce(w.label, '') AS label, \
                    l.issued_at, r.received_at, r.elapsed_s, r.digest, r.verdict \
             FROM reports r JOIN units u ON u.id = r.unit_id JOIN targets t ON t.id = u.target_id \
             JOIN campaigns c ON c.id = u.campaign_id LEFT JOIN workers w ON w.id = r.worker_id \
             LEFT JOIN leases l ON l.id = r.lease_id \
             WHERE u.campaign_id = ? AND r.id > ? ORDER BY r.id LIMIT ?",
        )
        .bind(campaign_id)
        .bind(after)
        .bind(limit)
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| {
                Ok(LedgerRow {
                    campaign: r.try_get("campaign")?,
                    k: r.try_get("k")?,
                    unit: r.try_get("unit")?,
                    region: r.try_get("region")?,
                    d_lo: u(r, "d_lo")?,
                    d_hi: u(r, "d_hi")?,
                    z_lo: u(r, "z_lo")?,
                    z_hi: u(r, "z_hi")?,
                    unit_state: r.try_get("unit_state")?,
                    settled_digest: r.try_get("settled_digest")?,
                    report: r.try_get("report")?,
                    worker: r.try_get("worker_id")?,
                    owner: r.try_get("owner")?,
                    label: r.try_get("label")?,
                    leased_at: r.try_get("issued_at")?,
                    reported_at: r.try_get("received_at")?,
                    elapsed_s: r.try_get("elapsed_s")?,
                    digest: r.try_get("digest")?,
                    verdict: r.try_get("verdict")?,
                })
            })
            .collect()
    }
}
