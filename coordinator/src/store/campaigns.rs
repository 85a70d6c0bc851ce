//! Campaigns, their targets and planned units.

use super::{int, unit_from_row, Result, Store, StoreError, UnitRow, UNIT_COLUMNS};
use cubehunt_common::{Rect, UnitSpec};
use rayon::prelude::*;
use sqlx::{QueryBuilder, Row, Sqlite, Transaction};

/// A campaign as stored.
#[derive(Clone, Debug)]
pub struct CampaignRow {
    pub id: i64,
    pub name: String,
    pub kernel: String,
    pub bound: u64,
    pub unit_seconds: f64,
    /// `active`, `paused` or `cancelled` (whether it is complete is derived from its units).
    pub state: String,
    pub created_at: i64,
    pub updated_at: i64,
}

#[derive(Clone, Debug)]
pub struct TargetRow {
    pub id: i64,
    pub campaign_id: i64,
    pub k: i64,
    pub bound: u64,
    pub z0: u64,
}

#[derive(Clone, Debug)]
pub struct NewCampaign {
    pub name: String,
    pub kernel: String,
    pub bound: u64,
    pub unit_seconds: f64,
}

/// One rectangle chosen by the planner, with its estimated cost (reference-core µs).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct PlannedUnit {
    pub rect: Rect,
    pub cost_us: u64,
}

/// The units planned for one target (all of it, or the part an extension adds).
#[derive(Clone, Debug)]
pub struct TargetPlan {
    pub k: i64,
    pub z0: u64,
    pub units: Vec<PlannedUnit>,
}

/// Signs a unit spec (hex Ed25519 over its canonical bytes).
pub type Signer<'a> = &'a (dyn Fn(&UnitSpec) -> String + Sync);

fn campaign_from_row(r: &sqlx::sqlite::SqliteRow) -> Result<CampaignRow> {
    Ok(CampaignRow {
        id: r.try_get("id")?,
        name: r.try_get("name")?,
        kernel: r.try_get("kernel")?,
        bound: r.try_get::<i64, _>("bound")? as u64,
        unit_seconds: r.try_get("unit_seconds")?,
        state: r.try_get("state")?,
        created_at: r.try_get("created_at")?,
        updated_at: r.try_get("updated_at")?,
    })
}

const INSERT_CHUNK: usize = 8192;
const ROWS_PER_STATEMENT: usize = 500;

impl Store {
    /// Create a campaign with its targets and every planned unit, signing each unit.
    pub async fn create_campaign(
        &self,
        new: &NewCampaign,
        plans: &[TargetPlan],
        sign: Signer<'_>,
        now: i64,
    ) -> Result<CampaignRow> {
        let _w = self.write.lock().await;
        let mut tx = self.pool.begin().await?;
        let exists: Option<i64> = sqlx::query_scalar("SELECT id FROM campaigns WHERE name = ?")
            .bind(&new.name)
            .fetch_optional(&mut *tx)
            .await?;
        if exists.is_some() {
            return Err(StoreError::Conflict(
                "campaign_exists",
                format!(
                    "a campaign named {:?} already exists: choose another name, or extend that one",
                    new.name
                ),
            ));
        }
        let id: i64 = sqlx::query_scalar(
            "INSERT INTO campaigns (name, kernel, bound, unit_seconds, state, created_at, updated_at) \
             VALUES (?, ?, ?, ?, 'active', ?, ?) RETURNING id",
        )
        .bind(&new.name)
        .bind(&new.kernel)
        .bind(int(new.bound))
        .bind(new.unit_seconds)
        .bind(now)
        .bind(now)
        .fetch_one(&mut *tx)
        .await?;
        for plan in plans {
            let target_id: i64 = sqlx::query_scalar(
                "INSERT INTO targets (campaign_id, k, bound, z0) VALUES (?, ?, ?, ?) RETURNING id",
            )
            .bind(id)
            .bind(plan.k)
            .bind(int(new.bound))
            .bind(int(plan.z0))
            .fetch_one(&mut *tx)
            .await?;
            insert_plan(
                &mut tx,
                id,
                &new.name,
                &new.kernel,
                target_id,
                plan,
                0,
                new.bound,
                sign,
                now,
            )
            .await?;
        }
        tx.commit().await?;
        drop(_w);
        self.campaign(&new.name)
            .await?
            .ok_or_else(|| StoreError::NotFound("campaign vanished".into()))
    }

    /// Raise the bound of every target of a campaign, adding the planned units of the new part.
    pub async fn extend_campaign(
        &self,
        name: &str,
        new_bound: u64,
        plans: &[TargetPlan],
        sign: Signer<'_>,
        now: i64,
    ) -> Result<CampaignRow> {
        let _w = self.write.lock().await;
        let mut tx = self.pool.begin().await?;
        let c = sqlx::query("SELECT * FROM campaigns WHERE name = ?")
            .bind(name)
            .fetch_optional(&mut *tx)
            .await?;
        let c = match c {
            Some(r) => campaign_from_row(&r)?,
            None => return Err(not_found(name)),
        };
        if c.state == "cancelled" {
            return Err(StoreError::Conflict(
                "campaign_cancelled",
                format!(
                    "campaign {name:?} is cancelled and cannot be extended; create a new campaign"
                ),
            ));
        }
        if new_bound <= c.bound {
            return Err(StoreError::Conflict(
                "bound_not_larger",
                format!("campaign {name:?} already has bound {}; an extension needs a larger bound (got {new_bound})", c.bound),
            ));
        }
        for plan in plans {
            let target_id: Option<i64> =
                sqlx::query_scalar("SELECT id FROM targets WHERE campaign_id = ? AND k = ?")
                    .bind(c.id)
                    .bind(plan.k)
                    .fetch_optional(&mut *tx)
                    .await?;
            let target_id = target_id.ok_or_else(|| {
                StoreError::NotFound(format!("campaign {name:?} has no target k = {}", plan.k))
            })?;
            insert_plan(
                &mut tx, c.id, &c.name, &c.kernel, target_id, plan, c.bound, new_bound, sign, now,
            )
            .await?;
            sqlx::query("UPDATE targets SET bound = ? WHERE id = ?")
                .bind(int(new_bound))
                .bind(target_id)
                .execute(&mut *tx)
                .await?;
        }
        sqlx::query("UPDATE campaigns SET bound = ?, updated_at = ? WHERE id = ?")
            .bind(int(new_bound))
            .bind(now)
            .bind(c.id)
            .execute(&mut *tx)
            .await?;
        tx.commit().await?;
        drop(_w);
        self.campaign(name).await?.ok_or_else(|| not_found(name))
    }

    /// Change a campaign's state. `to` is `active`, `paused` or `cancelled`; a cancelled
    /// campaign stays cancelled.
    pub async fn set_campaign_state(&self, name: &str, to: &str, now: i64) -> Result<CampaignRow> {
        let _w = self.write.lock().await;
        let c = self.campaign(name).await?.ok_or_else(|| not_found(name))?;
        if c.state == "cancelled" && to != "cancelled" {
            return Err(StoreError::Conflict("campaign_cancelled", format!("campaign {name:?} is cancelled; a cancelled campaign cannot be resumed or paused")));
        }
        sqlx::query("UPDATE campaigns SET state = ?, updated_at = ? WHERE id = ?")
            .bind(to)
            .bind(now)
            .bind(c.id)
            .execute(&self.pool)
            .await?;
        drop(_w);
        self.campaign(name).await?.ok_or_else(|| not_found(name))
    }

    pub async fn campaign(&self, name: &str) -> Result<Option<CampaignRow>> {
        let r = sqlx::query("SELECT * FROM campaigns WHERE name = ?")
            .bind(name)
            .fetch_optional(&self.pool)
            .await?;
        r.as_ref().map(campaign_from_row).transpose()
    }

    pub async fn campaigns(&self) -> Result<Vec<CampaignRow>> {
        let rows = sqlx::query("SELECT * FROM campaigns ORDER BY id")
            .fetch_all(&self.pool)
            .await?;
        rows.iter().map(campaign_from_row).collect()
    }

    pub async fn targets(&self, campaign_id: i64) -> Result<Vec<TargetRow>> {
        let rows = sqlx::query("SELECT * FROM targets WHERE campaign_id = ? ORDER BY k")
            .bind(campaign_id)
            .fetch_all(&self.pool)
            .await?;
        rows.iter()
            .map(|r| {
                Ok(TargetRow {
                    id: r.try_get("id")?,
                    campaign_id: r.try_get("campaign_id")?,
                    k: r.try_get("k")?,
                    bound: r.try_get::<i64, _>("bound")? as u64,
                    z0: r.try_get::<i64, _>("z0")? as u64,
                })
            })
            .collect()
    }

    pub async fn unit(&self, id: i64) -> Result<Option<UnitRow>> {
        let q = format!("SELECT {UNIT_COLUMNS} FROM units u JOIN targets t ON t.id = u.target_id JOIN campaigns c ON c.id = u.campaign_id WHERE u.id = ?");
        let r = sqlx::query(&q).bind(id).fetch_optional(&self.pool).await?;
        r.as_ref().map(unit_from_row).transpose()
    }

    /// Every unit of a target, in planned order.
    pub async fn target_units(&self, target_id: i64) -> Result<Vec<UnitRow>> {
        let q = format!("SELECT {UNIT_COLUMNS} FROM units u JOIN targets t ON t.id = u.target_id JOIN campaigns c ON c.id = u.campaign_id WHERE u.target_id = ? ORDER BY u.id");
        let rows = sqlx::query(&q)
            .bind(target_id)
            .fetch_all(&self.pool)
            .await?;
        rows.iter().map(unit_from_row).collect()
    }
}

pub(super) fn not_found(name: &str) -> StoreError {
    StoreError::NotFound(format!(
        "no campaign named {name:?} (list them with `cubehunt-coordinator campaign list`)"
    ))
}

#[allow(clippy::too_many_arguments)]
async fn insert_plan(
    tx: &mut Transaction<'_, Sqlite>,
    campaign_id: i64,
    campaign: &str,
    kernel: &str,
    target_id: i64,
    plan: &TargetPlan,
    bound_from: u64,
    bound_to: u64,
    sign: Signer<'_>,
    now: i64,
) -> Result<()> {
    let first: i64 = sqlx::query_scalar("SELECT coalesce(max(id), 0) + 1 FROM units")
        .fetch_one(&mut **tx)
        .await?;
    let mut total_cost: u64 = 0;
    for (chunk_no, chunk) in plan.units.chunks(INSERT_CHUNK).enumerate() {
        let base = first + (chunk_no * INSERT_CHUNK) as i64;
        // Signing dominates planning a big campaign: spread it over the cores.
        let rows: Vec<(i64, &PlannedUnit, String)> = chunk
            .par_iter()
            .enumerate()
            .map(|(i, pu)| {
                let id = base + i as i64;
                let spec = UnitSpec {
                    unit_id: id,
                    campaign: campaign.to_string(),
                    k: plan.k,
                    bound: bound_to,
                    kernel: kernel.to_string(),
                    rect: pu.rect,
                    cost: pu.cost_us,
                };
                (id, pu, sign(&spec))
            })
            .collect();
        for rows in rows.chunks(ROWS_PER_STATEMENT) {
            let mut qb: QueryBuilder<Sqlite> = QueryBuilder::new(
            "INSERT INTO units (id, target_id, campaign_id, region, d_lo, d_hi, z_lo, z_hi, bound, cost_us, signature) ",
        );
            qb.push_values(rows, |mut b, (id, pu, sig)| {
                b.push_bind(*id)
                    .push_bind(target_id)
                    .push_bind(campaign_id)
                    .push_bind(pu.rect.region.name())
                    .push_bind(int(pu.rect.d_lo))
                    .push_bind(int(pu.rect.d_hi))
                    .push_bind(int(pu.rect.z_lo))
                    .push_bind(int(pu.rect.z_hi))
                    .push_bind(int(bound_to))
                    .push_bind(int(pu.cost_us))
                    .push_bind(sig.clone());
            });
            qb.build().execute(&mut **tx).await?;
        }
        total_cost = total_cost.saturating_add(chunk.iter().map(|u| u.cost_us).sum());
        tokio::task::yield_now().await;
    }
    sqlx::query("INSERT INTO target_plans (target_id, bound_from, bound_to, units, cost_us, created_at) VALUES (?, ?, ?, ?, ?, ?)")
        .bind(target_id)
        .bind(int(bound_from))
        .bind(int(bound_to))
        .bind(plan.units.len() as i64)
        .bind(int(total_cost))
        .bind(now)
        .execute(&mut **tx)
        .await?;
    Ok(())
}
