//! Raw reads for the audit, the certificates and the exports: read-only, paged by id so that
//! memory stays bounded on stores with millions of units, in the same record types as the
//! rest of the store. Rows that the record types cannot hold (a unit whose target is gone, a
//! report whose unit is gone) are listed by the `orphan_*` reads, so that the audit reports
//! them instead of missing them.
//!
//! The audit deliberately reads the tables here rather than through the views the service
//! uses ([`super::monitor`]), so that it can compare the two.

use super::{
    CampaignRow, CertificateRow, IncidentRow, LeaseRow, ReportRow, Result, SolutionRow,
    SpotCheckRow, Store, TargetRow, UnitRow, WorkerRow, UNIT_SELECT,
};
use sqlx::Row;

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

/// One line of the coverage table: a target with its counts and current certificate.
#[derive(Clone, Debug)]
pub struct CoverageRow {
    pub target_id: i64,
    pub k: i64,
    pub bound: u64,
    pub units: i64,
    pub units_settled: i64,
    pub solutions: i64,
    /// The largest bound with a current (not revoked) certificate.
    pub certified_bound: Option<u64>,
    /// The Merkle root of the current certificate at the target's own bound.
    pub certificate_root: Option<String>,
}

impl Store {
    async fn all<T>(&self, sql: &str, f: fn(&sqlx::any::AnyRow) -> Result<T>) -> Result<Vec<T>> {
        let rows = sqlx::query(sql).fetch_all(self.pool()).await?;
        rows.iter().map(f).collect()
    }

    async fn range<T>(
        &self,
        sql: &str,
        lo: i64,
        hi: i64,
        f: fn(&sqlx::any::AnyRow) -> Result<T>,
    ) -> Result<Vec<T>> {
        let rows = sqlx::query(sql)
            .bind(lo)
            .bind(hi)
            .fetch_all(self.pool())
            .await?;
        rows.iter().map(f).collect()
    }

    /// Every target with its campaign, by campaign then k.
    pub async fn audit_targets(&self) -> Result<Vec<(TargetRow, CampaignRow)>> {
        let rows = sqlx::query(
            "SELECT t.*, c.id AS c_id, c.name, c.kernel, c.bound AS c_bound, c.unit_seconds, c.state, c.created_at, c.updated_at \
             FROM targets t JOIN campaigns c ON c.id = t.campaign_id ORDER BY c.id, t.k",
        )
        .fetch_all(self.pool())
        .await?;
        rows.iter()
            .map(|r| {
                let t = TargetRow::from_row(r)?;
                let c = CampaignRow {
                    id: r.try_get("c_id")?,
                    name: r.try_get("name")?,
                    kernel: r.try_get("kernel")?,
                    bound: r.try_get::<i64, _>("c_bound")?.max(0) as u64,
                    unit_seconds: r.try_get("unit_seconds")?,
                    state: r.try_get("state")?,
                    created_at: r.try_get("created_at")?,
                    updated_at: r.try_get("updated_at")?,
                };
                Ok((t, c))
            })
            .collect()
    }

    /// Rows that point at a missing row: (table, id, what is missing).
    pub async fn audit_orphans(&self) -> Result<Vec<(String, i64, String)>> {
        let checks = [
            ("targets", "SELECT id FROM targets WHERE campaign_id NOT IN (SELECT id FROM campaigns)", "its campaign"),
            ("units", "SELECT id FROM units WHERE target_id NOT IN (SELECT id FROM targets) OR campaign_id NOT IN (SELECT id FROM campaigns)", "its target or campaign"),
            ("units", "SELECT u.id FROM units u JOIN targets t ON t.id = u.target_id WHERE t.campaign_id <> u.campaign_id", "agreement between its target's campaign and its own"),
            ("reports", "SELECT id FROM reports WHERE unit_id NOT IN (SELECT id FROM units) OR worker_id NOT IN (SELECT id FROM workers) OR lease_id NOT IN (SELECT id FROM leases)", "its unit, worker or lease"),
            ("leases", "SELECT id FROM leases WHERE unit_id NOT IN (SELECT id FROM units) OR worker_id NOT IN (SELECT id FROM workers)", "its unit or worker"),
            ("spot_checks", "SELECT id FROM spot_checks WHERE report_id NOT IN (SELECT id FROM reports)", "its report"),
            ("solutions", "SELECT id FROM solutions WHERE unit_id NOT IN (SELECT id FROM units) OR target_id NOT IN (SELECT id FROM targets)", "its unit or target"),
        ];
        let mut out = Vec::new();
        for (table, sql, what) in checks {
            let ids: Vec<i64> = sqlx::query_scalar(sql).fetch_all(self.pool()).await?;
            out.extend(
                ids.into_iter()
                    .map(|id| (table.to_string(), id, what.to_string())),
            );
        }
        Ok(out)
    }

    /// Up to `limit` units with id greater than `after`, by id.
    pub async fn audit_units_page(&self, after: i64, limit: i64) -> Result<Vec<UnitRow>> {
        let q = format!("{UNIT_SELECT} WHERE u.id > $1 ORDER BY u.id LIMIT $2");
        self.range(&q, after, limit, UnitRow::from_row).await
    }

    /// Every report whose unit id lies in `lo ..= hi`, by unit then report id.
    pub async fn audit_reports_for_units(&self, lo: i64, hi: i64) -> Result<Vec<ReportRow>> {
        self.range(
            "SELECT * FROM reports WHERE unit_id BETWEEN $1 AND $2 ORDER BY unit_id, id",
            lo,
            hi,
            ReportRow::from_row,
        )
        .await
    }

    /// Every lease whose unit id lies in `lo ..= hi`, by unit then lease id.
    pub async fn audit_leases_for_units(&self, lo: i64, hi: i64) -> Result<Vec<LeaseRow>> {
        self.range(
            "SELECT * FROM leases WHERE unit_id BETWEEN $1 AND $2 ORDER BY unit_id, id",
            lo,
            hi,
            LeaseRow::from_row,
        )
        .await
    }

    /// Every spot check whose unit id lies in `lo ..= hi`, by unit then id.
    pub async fn audit_spot_checks_for_units(&self, lo: i64, hi: i64) -> Result<Vec<SpotCheckRow>> {
        self.range(
            "SELECT * FROM spot_checks WHERE unit_id BETWEEN $1 AND $2 ORDER BY unit_id, id",
            lo,
            hi,
            SpotCheckRow::from_row,
        )
        .await
    }

    pub async fn audit_workers(&self) -> Result<Vec<WorkerRow>> {
        self.all("SELECT * FROM workers ORDER BY id", WorkerRow::from_row)
            .await
    }

    /// Incidents with id > `after`, oldest first, at most `limit`.
    pub async fn incidents_page(&self, after: i64, limit: i64) -> Result<Vec<IncidentRow>> {
        let mut c = self.pool.acquire().await?;
        let rows = sqlx::query("SELECT * FROM incidents WHERE id > $1 ORDER BY id LIMIT $2")
            .bind(after)
            .bind(limit)
            .fetch_all(&mut *c)
            .await?;
        rows.iter().map(IncidentRow::from_row).collect()
    }

    pub async fn audit_incidents(&self) -> Result<Vec<IncidentRow>> {
        self.all("SELECT * FROM incidents ORDER BY id", IncidentRow::from_row)
            .await
    }

    pub async fn audit_solutions(&self) -> Result<Vec<SolutionRow>> {
        self.all("SELECT * FROM solutions ORDER BY id", SolutionRow::from_row)
            .await
    }

    pub async fn audit_certificates(&self) -> Result<Vec<CertificateRow>> {
        self.all(
            "SELECT * FROM certificates ORDER BY id",
            CertificateRow::from_row,
        )
        .await
    }

    /// Every unit of one target, by id, for a certificate.
    pub async fn certificate_units(&self, target_id: i64) -> Result<Vec<UnitRow>> {
        self.target_units(target_id).await
    }

    /// (unit id, worker id, owner) of every report in a settling outcome of one target, by
    /// unit then worker.
    pub async fn certificate_settlers(&self, target_id: i64) -> Result<Vec<(i64, i64, String)>> {
        let rows = sqlx::query(
            "SELECT r.unit_id, r.worker_id, w.owner FROM reports r \
             JOIN units u ON u.id = r.unit_id JOIN workers w ON w.id = r.worker_id \
             WHERE u.target_id = $1 AND r.verdict = 'agree' ORDER BY r.unit_id, r.worker_id",
        )
        .bind(target_id)
        .fetch_all(self.pool())
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
             WHERE u.campaign_id = $1 AND r.id > $2 ORDER BY r.id LIMIT $3",
        )
        .bind(campaign_id)
        .bind(after)
        .bind(limit)
        .fetch_all(self.pool())
        .await?;
        let u = |r: &sqlx::any::AnyRow, c: &str| -> Result<u64> {
            Ok(r.try_get::<i64, _>(c)?.max(0) as u64)
        };
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

    /// Up to `limit` coverage lines of one campaign with k greater than `after_k`, by k.
    pub async fn coverage_page(
        &self,
        campaign_id: i64,
        after_k: i64,
        limit: i64,
    ) -> Result<Vec<CoverageRow>> {
        let rows = sqlx::query(
            "SELECT t.id, t.k, t.bound, \
                    (SELECT count(*) FROM units u WHERE u.target_id = t.id) AS units, \
                    (SELECT count(*) FROM units u WHERE u.target_id = t.id AND u.state = 'settled') AS settled, \
                    (SELECT count(*) FROM solutions s WHERE s.target_id = t.id) AS solutions, \
                    (SELECT max(c.bound) FROM certificates c WHERE c.target_id = t.id AND c.revoked_at IS NULL) AS cert_bound, \
                    (SELECT max(c.root) FROM certificates c WHERE c.target_id = t.id AND c.bound = t.bound AND c.revoked_at IS NULL) AS cert_root \
             FROM targets t WHERE t.campaign_id = $1 AND t.k > $2 ORDER BY t.k LIMIT $3",
        )
        .bind(campaign_id)
        .bind(after_k)
        .bind(limit)
        .fetch_all(self.pool())
        .await?;
        rows.iter()
            .map(|r| {
                Ok(CoverageRow {
                    target_id: r.try_get("id")?,
                    k: r.try_get("k")?,
                    bound: r.try_get::<i64, _>("bound")?.max(0) as u64,
                    units: r.try_get("units")?,
                    units_settled: r.try_get("settled")?,
                    solutions: r.try_get("solutions")?,
                    certified_bound: r
                        .try_get::<Option<i64>, _>("cert_bound")?
                        .map(|b| b.max(0) as u64),
                    certificate_root: r.try_get("cert_root")?,
                })
            })
            .collect()
    }

    /// Up to `limit` solutions of one target with id greater than `after`, by id.
    pub async fn solutions_page(
        &self,
        target_id: i64,
        after: i64,
        limit: i64,
    ) -> Result<Vec<SolutionRow>> {
        let rows = sqlx::query(
            "SELECT * FROM solutions WHERE target_id = $1 AND id > $2 ORDER BY id LIMIT $3",
        )
        .bind(target_id)
        .bind(after)
        .bind(limit)
        .fetch_all(self.pool())
        .await?;
        rows.iter().map(SolutionRow::from_row).collect()
    }
}
