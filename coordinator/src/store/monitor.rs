//! Read-only views: progress per target, workers, solutions, counters for `/metrics`.

use super::{Result, SolutionRow, Store, TargetRow, WorkerRow};
use cubehunt_common::Solution;
use sqlx::Row;

/// Units of one target (or campaign) by state.
#[derive(Clone, Debug, Default, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub struct UnitCounts {
    pub total: i64,
    pub open: i64,
    /// Units with at least one active lease (of any state but settled).
    pub leased: i64,
    pub settled: i64,
    pub disputed: i64,
    /// Units waiting for the organiser's side after too many disagreeing reports.
    pub review: i64,
}

#[derive(Clone, Debug)]
pub struct TargetStats {
    pub target: TargetRow,
    pub units: UnitCounts,
    pub cost_total_us: i64,
    pub cost_settled_us: i64,
    /// Cost of the units settled at or after the `since` time given to [`Store::target_stats`].
    pub cost_settled_recent_us: i64,
    pub solutions: Vec<Solution>,
}

#[derive(Clone, Debug)]
pub struct CampaignStats {
    pub targets: Vec<TargetStats>,
}

#[derive(Clone, Debug, serde::Serialize)]
pub struct WorkerView {
    pub id: i64,
    pub owner: String,
    pub label: String,
    pub kernel: String,
    pub threads: i64,
    pub enrolled_at: i64,
    pub last_seen: i64,
    pub reports: i64,
    pub units_settled: i64,
    /// Reports the organiser's own computation confirmed.
    pub confirmed: i64,
    pub errors: i64,
    pub trusted: bool,
    pub quarantined: bool,
    pub active_leases: i64,
    /// Observed speed: reference-core seconds of work per wall second.
    pub rate: Option<f64>,
}

#[derive(Clone, Debug, serde::Serialize)]
pub struct SolutionView {
    pub k: i64,
    pub solution: Solution,
    pub unit_id: i64,
    pub found_at: i64,
    /// The parametric family the solution belongs to, if any (filled by the caller; the
    /// store does not know the families).
    pub family: Option<String>,
}

/// Whole-service counters for `/metrics`.
#[derive(Clone, Debug, Default)]
pub struct MetricsSnapshot {
    /// (campaign name, unit state, count)
    pub units: Vec<(String, String, i64)>,
    /// (campaign name, state)
    pub campaigns: Vec<(String, String)>,
    pub leases_active: i64,
    /// (verdict, count)
    pub reports: Vec<(String, i64)>,
    pub workers: i64,
    pub workers_quarantined: i64,
    pub solutions: i64,
}

impl Store {
    /// Progress of every target of a campaign; `since` starts the window of recent settlements.
    pub async fn campaign_stats(&self, campaign_id: i64, since: i64) -> Result<CampaignStats> {
        let mut out = Vec::new();
        for t in self.targets(campaign_id).await? {
            out.push(self.target_stats(t, since).await?);
        }
        Ok(CampaignStats { targets: out })
    }

    pub async fn target_stats(&self, target: TargetRow, since: i64) -> Result<TargetStats> {
        let rows = sqlx::query(
            "SELECT state, count(*) AS n, CAST(coalesce(sum(cost_us), 0) AS BIGINT) AS cost, \
                    CAST(coalesce(sum(CASE WHEN active > 0 THEN 1 ELSE 0 END), 0) AS BIGINT) AS leased, \
                    CAST(coalesce(sum(CASE WHEN settled_at >= $1 THEN cost_us ELSE 0 END), 0) AS BIGINT) AS recent \
             FROM units WHERE target_id = $2 GROUP BY state",
        )
        .bind(since)
        .bind(target.id)
        .fetch_all(self.pool())
        .await?;
        let mut u = UnitCounts::default();
        let (mut cost_total, mut cost_settled, mut recent) = (0i64, 0i64, 0i64);
        for r in rows {
            let state: String = r.try_get("state")?;
            let n: i64 = r.try_get("n")?;
            let cost: i64 = r.try_get("cost")?;
            u.total += n;
            u.leased += r.try_get::<i64, _>("leased")?;
            cost_total += cost;
            match state.as_str() {
                "settled" => {
                    u.settled += n;
                    cost_settled += cost;
                    recent += r.try_get::<i64, _>("recent")?;
                }
                "disputed" => u.disputed += n,
                "review" => u.review += n,
                _ => u.open += n,
            }
        }
        let solutions = self.target_solutions(target.id).await?;
        Ok(TargetStats {
            target,
            units: u,
            cost_total_us: cost_total,
            cost_settled_us: cost_settled,
            cost_settled_recent_us: recent,
            solutions,
        })
    }

    /// Settled solutions of a target, sorted.
    pub async fn target_solutions(&self, target_id: i64) -> Result<Vec<Solution>> {
        let rows = sqlx::query("SELECT * FROM solutions WHERE target_id = $1")
            .bind(target_id)
            .fetch_all(self.pool())
            .await?;
        let mut v = rows
            .iter()
            .map(|r| SolutionRow::from_row(r).map(|s| s.solution))
            .collect::<Result<Vec<_>>>()?;
        v.sort();
        Ok(v)
    }

    /// Settled solutions of a campaign with where they came from, sorted by k then triple.
    pub async fn campaign_solutions(&self, campaign_id: i64) -> Result<Vec<SolutionView>> {
        let rows = sqlx::query("SELECT s.*, t.k AS k FROM solutions s JOIN targets t ON t.id = s.target_id WHERE t.campaign_id = $1")
            .bind(campaign_id)
            .fetch_all(self.pool())
            .await?;
        let mut v = Vec::new();
        for r in rows {
            let s = SolutionRow::from_row(&r)?;
            v.push(SolutionView {
                k: r.try_get("k")?,
                solution: s.solution,
                unit_id: s.unit_id,
                found_at: s.found_at,
                family: None,
            });
        }
        v.sort_by(|a, b| a.k.cmp(&b.k).then(a.solution.cmp(&b.solution)));
        Ok(v)
    }

    pub async fn workers(&self) -> Result<Vec<WorkerView>> {
        self.workers_page(0, i64::MAX).await
    }

    /// At most `limit` workers with ids above `after`, by id.
    pub async fn workers_page(&self, after: i64, limit: i64) -> Result<Vec<WorkerView>> {
        let rows = sqlx::query("SELECT * FROM workers WHERE id > $1 ORDER BY id LIMIT $2")
            .bind(after)
            .bind(limit)
            .fetch_all(self.pool())
            .await?;
        let mut v = Vec::new();
        for r in rows {
            let w = WorkerRow::from_row(&r)?;
            v.push(WorkerView {
                id: w.id,
                owner: w.owner.clone(),
                label: w.label.clone(),
                kernel: w.kernel.clone(),
                threads: w.threads,
                enrolled_at: w.enrolled_at,
                last_seen: w.last_seen,
                reports: w.reports,
                units_settled: w.units_settled,
                confirmed: w.confirmed,
                errors: w.errors,
                trusted: w.trusted,
                quarantined: w.quarantined,
                active_leases: w.active,
                rate: w.observed_rate(),
            });
        }
        Ok(v)
    }

    pub async fn metrics(&self) -> Result<MetricsSnapshot> {
        let mut m = MetricsSnapshot::default();
        for r in sqlx::query("SELECT c.name, u.state, count(*) FROM units u JOIN campaigns c ON c.id = u.campaign_id GROUP BY c.name, u.state ORDER BY c.name, u.state")
            .fetch_all(self.pool())
            .await?
        {
            m.units.push((r.get(0), r.get(1), r.get(2)));
        }
        for r in sqlx::query("SELECT name, state FROM campaigns ORDER BY id")
            .fetch_all(self.pool())
            .await?
        {
            m.campaigns.push((r.get(0), r.get(1)));
        }
        m.leases_active = sqlx::query_scalar("SELECT count(*) FROM leases WHERE state = 'active'")
            .fetch_one(self.pool())
            .await?;
        for r in
            sqlx::query("SELECT verdict, count(*) FROM reports GROUP BY verdict ORDER BY verdict")
                .fetch_all(self.pool())
                .await?
        {
            m.reports.push((r.get(0), r.get(1)));
        }
        m.workers = sqlx::query_scalar("SELECT count(*) FROM workers")
            .fetch_one(self.pool())
            .await?;
        m.workers_quarantined =
            sqlx::query_scalar("SELECT count(*) FROM workers WHERE quarantined = 1")
                .fetch_one(self.pool())
                .await?;
        m.solutions = sqlx::query_scalar("SELECT count(*) FROM solutions")
            .fetch_one(self.pool())
            .await?;
        Ok(m)
    }
}
