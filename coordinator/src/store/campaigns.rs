//! Campaigns, their targets and planned units.

use super::{
    int, CampaignRow, PlanRow, Result, Store, StoreError, TargetRow, UnitRow, UNIT_SELECT,
};
use crate::op;
use cubehunt_common::{Rect, UnitSpec};
use rand::Rng;
use rayon::prelude::*;
use sqlx::AnyConnection;
use std::sync::Arc;

#[derive(Clone, Debug)]
pub struct NewCampaign {
    pub name: String,
    pub kernel: String,
    pub bound: u64,
    pub unit_seconds: f64,
    /// Share of units the organiser's side recomputes in full (chosen at random now, never
    /// shown to workers).
    pub recheck_share: f64,
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
pub type Signer = Arc<dyn Fn(&UnitSpec) -> String + Send + Sync>;

/// A unit ready to insert: id, spec, signature, whether it is rechecked.
struct SignedPlanned {
    spec: UnitSpec,
    signature: String,
    recheck: bool,
}

const ROWS_PER_STATEMENT: usize = 500;

pub(super) fn not_found(name: &str) -> StoreError {
    StoreError::NotFound(format!(
        "no campaign named {name:?} (list them with `cubehunt-coordinator campaign list`)"
    ))
}

impl Store {
    /// Reserve `n` consecutive unit ids.
    async fn reserve_unit_ids(&self, n: u64) -> Result<i64> {
        let n = int(n);
        self.write(op!(|c| {
            let next: i64 = sqlx::query_scalar(
                "UPDATE counters SET next = next + $1 WHERE name = 'units' RETURNING next",
            )
            .bind(n)
            .fetch_one(&mut *c)
            .await?;
            Ok(next - n)
        }))
        .await
    }

    /// Give every planned unit an id, sign it (on every core, outside the writer) and draw
    /// whether the organiser's side rechecks it.
    async fn sign_plans(
        &self,
        campaign: &str,
        kernel: &str,
        bound_to: u64,
        plans: &[TargetPlan],
        sign: &Signer,
        recheck_share: f64,
    ) -> Result<Vec<Vec<SignedPlanned>>> {
        let total: u64 = plans.iter().map(|p| p.units.len() as u64).sum();
        let mut next = self.reserve_unit_ids(total).await?;
        let mut out = Vec::new();
        for plan in plans {
            let first = next;
            next += plan.units.len() as i64;
            let (campaign, kernel, sign, units, k) = (
                campaign.to_string(),
                kernel.to_string(),
                sign.clone(),
                plan.units.clone(),
                plan.k,
            );
            let signed = tokio::task::spawn_blocking(move || {
                units
                    .par_iter()
                    .enumerate()
                    .map(|(i, pu)| {
                        let spec = UnitSpec {
                            unit_id: first + i as i64,
                            campaign: campaign.clone(),
                            k,
                            bound: bound_to,
                            kernel: kernel.clone(),
                            rect: pu.rect,
                            cost: pu.cost_us,
                        };
                        let signature = sign(&spec);
                        let recheck = rand::rngs::OsRng.gen_bool(recheck_share.clamp(0.0, 1.0));
                        SignedPlanned {
                            spec,
                            signature,
                            recheck,
                        }
                    })
                    .collect::<Vec<_>>()
            })
            .await
            .map_err(|e| StoreError::Conflict("planning_failed", e.to_string()))?;
            out.push(signed);
        }
        Ok(out)
    }

    /// Create a campaign with its targets and every planned unit, signing each unit.
    pub async fn create_campaign(
        &self,
        new: &NewCampaign,
        plans: &[TargetPlan],
        sign: &Signer,
        now: i64,
    ) -> Result<CampaignRow> {
        if self.campaign(&new.name).await?.is_some() {
            return Err(exists(&new.name));
        }
        let signed = self
            .sign_plans(
                &new.name,
                &new.kernel,
                new.bound,
                plans,
                sign,
                new.recheck_share,
            )
            .await?;
        let new = new.clone();
        let plans: Vec<(i64, u64)> = plans.iter().map(|p| (p.k, p.z0)).collect();
        let id = self
            .write(op!(|c| {
                let taken: Option<i64> =
                    sqlx::query_scalar("SELECT id FROM campaigns WHERE name = $1")
                        .bind(&new.name)
                        .fetch_optional(&mut *c)
                        .await?;
                if taken.is_some() {
                    return Err(exists(&new.name));
                }
                let id: i64 = sqlx::query_scalar(
                    "INSERT INTO campaigns (name, kernel, bound, unit_seconds, state, created_at, updated_at) \
                     VALUES ($1, $2, $3, $4, 'active', $5, $5) RETURNING id",
                )
                .bind(&new.name)
                .bind(&new.kernel)
                .bind(int(new.bound))
                .bind(new.unit_seconds)
                .bind(now)
                .fetch_one(&mut *c)
                .await?;
                for ((k, z0), units) in plans.iter().zip(&signed) {
                    let target_id: i64 = sqlx::query_scalar(
                        "INSERT INTO targets (campaign_id, k, bound, z0) VALUES ($1, $2, $3, $4) RETURNING id",
                    )
                    .bind(id)
                    .bind(k)
                    .bind(int(new.bound))
                    .bind(int(*z0))
                    .fetch_one(&mut *c)
                    .await?;
                    insert_units(c, id, target_id, units, 0, new.bound, now).await?;
                }
                Ok(id)
            }))
            .await?;
        self.campaign_by_id(id).await
    }

    /// Raise the bound of every target of a campaign, adding the planned units of the new part.
    pub async fn extend_campaign(
        &self,
        name: &str,
        new_bound: u64,
        plans: &[TargetPlan],
        sign: &Signer,
        recheck_share: f64,
        now: i64,
    ) -> Result<CampaignRow> {
        let c = self.campaign(name).await?.ok_or_else(|| not_found(name))?;
        check_extension(&c, new_bound)?;
        let signed = self
            .sign_plans(&c.name, &c.kernel, new_bound, plans, sign, recheck_share)
            .await?;
        let ks: Vec<i64> = plans.iter().map(|p| p.k).collect();
        let cid = c.id;
        self.write(op!(|tx| {
            let row = sqlx::query("SELECT * FROM campaigns WHERE id = $1")
                .bind(cid)
                .fetch_one(&mut *tx)
                .await?;
            let c = CampaignRow::from_row(&row)?;
            check_extension(&c, new_bound)?;
            for (k, units) in ks.iter().zip(&signed) {
                let target_id: Option<i64> =
                    sqlx::query_scalar("SELECT id FROM targets WHERE campaign_id = $1 AND k = $2")
                        .bind(c.id)
                        .bind(k)
                        .fetch_optional(&mut *tx)
                        .await?;
                let target_id = target_id.ok_or_else(|| {
                    StoreError::NotFound(format!("campaign {:?} has no target k = {k}", c.name))
                })?;
                insert_units(tx, c.id, target_id, units, c.bound, new_bound, now).await?;
                sqlx::query("UPDATE targets SET bound = $1 WHERE id = $2")
                    .bind(int(new_bound))
                    .bind(target_id)
                    .execute(&mut *tx)
                    .await?;
            }
            sqlx::query("UPDATE campaigns SET bound = $1, updated_at = $2 WHERE id = $3")
                .bind(int(new_bound))
                .bind(now)
                .bind(c.id)
                .execute(&mut *tx)
                .await?;
            Ok(())
        }))
        .await?;
        self.campaign_by_id(cid).await
    }

    /// Change a campaign's state. `to` is `active`, `paused` or `cancelled`; a cancelled
    /// campaign stays cancelled. Pausing or cancelling withdraws the active leases.
    pub async fn set_campaign_state(&self, name: &str, to: &str, now: i64) -> Result<CampaignRow> {
        let (name, to) = (name.to_string(), to.to_string());
        let n2 = name.clone();
        let id = self
            .write(op!(|c| {
                let row = sqlx::query("SELECT * FROM campaigns WHERE name = $1")
                    .bind(&name)
                    .fetch_optional(&mut *c)
                    .await?;
                let camp = match row {
                    Some(r) => CampaignRow::from_row(&r)?,
                    None => return Err(not_found(&name)),
                };
                if camp.state == "cancelled" && to != "cancelled" {
                    return Err(StoreError::Conflict(
                        "campaign_cancelled",
                        format!("campaign {name:?} is cancelled; a cancelled campaign cannot be resumed or paused"),
                    ));
                }
                sqlx::query("UPDATE campaigns SET state = $1, updated_at = $2 WHERE id = $3")
                    .bind(&to)
                    .bind(now)
                    .bind(camp.id)
                    .execute(&mut *c)
                    .await?;
                if to != "active" {
                    super::leases::withdraw_campaign_leases(c, camp.id, now).await?;
                }
                Ok(camp.id)
            }))
            .await?;
        let _ = n2;
        self.campaign_by_id(id).await
    }

    pub async fn campaign(&self, name: &str) -> Result<Option<CampaignRow>> {
        let r = sqlx::query("SELECT * FROM campaigns WHERE name = $1")
            .bind(name)
            .fetch_optional(self.pool())
            .await?;
        r.as_ref().map(CampaignRow::from_row).transpose()
    }

    async fn campaign_by_id(&self, id: i64) -> Result<CampaignRow> {
        let r = sqlx::query("SELECT * FROM campaigns WHERE id = $1")
            .bind(id)
            .fetch_one(self.pool())
            .await?;
        CampaignRow::from_row(&r)
    }

    pub async fn campaigns(&self) -> Result<Vec<CampaignRow>> {
        let rows = sqlx::query("SELECT * FROM campaigns ORDER BY id")
            .fetch_all(self.pool())
            .await?;
        rows.iter().map(CampaignRow::from_row).collect()
    }

    pub async fn targets(&self, campaign_id: i64) -> Result<Vec<TargetRow>> {
        let rows = sqlx::query("SELECT * FROM targets WHERE campaign_id = $1 ORDER BY k")
            .bind(campaign_id)
            .fetch_all(self.pool())
            .await?;
        rows.iter().map(TargetRow::from_row).collect()
    }

    /// The planning history of a target, oldest first.
    pub async fn target_plans(&self, target_id: i64) -> Result<Vec<PlanRow>> {
        let rows = sqlx::query("SELECT * FROM target_plans WHERE target_id = $1 ORDER BY id")
            .bind(target_id)
            .fetch_all(self.pool())
            .await?;
        rows.iter().map(PlanRow::from_row).collect()
    }

    pub async fn unit(&self, id: i64) -> Result<Option<UnitRow>> {
        let q = format!("{UNIT_SELECT} WHERE u.id = $1");
        let r = sqlx::query(&q).bind(id).fetch_optional(self.pool()).await?;
        r.as_ref().map(UnitRow::from_row).transpose()
    }

    /// Every unit of a target, in planned order.
    pub async fn target_units(&self, target_id: i64) -> Result<Vec<UnitRow>> {
        let q = format!("{UNIT_SELECT} WHERE u.target_id = $1 ORDER BY u.id");
        let rows = sqlx::query(&q)
            .bind(target_id)
            .fetch_all(self.pool())
            .await?;
        rows.iter().map(UnitRow::from_row).collect()
    }
}

fn exists(name: &str) -> StoreError {
    StoreError::Conflict(
        "campaign_exists",
        format!(
            "a campaign named {name:?} already exists: choose another name, or extend that one"
        ),
    )
}

fn check_extension(c: &CampaignRow, new_bound: u64) -> Result<()> {
    if c.state == "cancelled" {
        return Err(StoreError::Conflict(
            "campaign_cancelled",
            format!(
                "campaign {:?} is cancelled and cannot be extended; create a new campaign",
                c.name
            ),
        ));
    }
    if new_bound <= c.bound {
        return Err(StoreError::Conflict(
            "bound_not_larger",
            format!(
                "campaign {:?} already has bound {}; an extension needs a larger bound (got {new_bound})",
                c.name, c.bound
            ),
        ));
    }
    Ok(())
}

async fn insert_units(
    c: &mut AnyConnection,
    campaign_id: i64,
    target_id: i64,
    units: &[SignedPlanned],
    bound_from: u64,
    bound_to: u64,
    now: i64,
) -> Result<()> {
    const COLS: usize = 12;
    for rows in units.chunks(ROWS_PER_STATEMENT) {
        let sql = format!(
            "INSERT INTO units (id, target_id, campaign_id, region, d_lo, d_hi, z_lo, z_hi, bound, cost_us, signature, recheck) VALUES {}",
            values_placeholders(rows.len(), COLS)
        );
        let mut q = sqlx::query(&sql);
        for u in rows {
            let r = &u.spec.rect;
            q = q
                .bind(u.spec.unit_id)
                .bind(target_id)
                .bind(campaign_id)
                .bind(r.region.name().to_string())
                .bind(int(r.d_lo))
                .bind(int(r.d_hi))
                .bind(int(r.z_lo))
                .bind(int(r.z_hi))
                .bind(int(u.spec.bound))
                .bind(int(u.spec.cost))
                .bind(u.signature.clone())
                .bind(i64::from(u.recheck));
        }
        q.execute(&mut *c).await?;
    }
    let total_cost: u64 = units
        .iter()
        .map(|u| u.spec.cost)
        .fold(0u64, u64::saturating_add);
    sqlx::query("INSERT INTO target_plans (target_id, bound_from, bound_to, units, cost_us, created_at) VALUES ($1, $2, $3, $4, $5, $6)")
        .bind(target_id)
        .bind(int(bound_from))
        .bind(int(bound_to))
        .bind(units.len() as i64)
        .bind(int(total_cost))
        .bind(now)
        .execute(&mut *c)
        .await?;
    Ok(())
}

/// `($1, …, $cols), ($cols+1, …), …` for `rows` rows: numbered placeholders, which both
/// engines read the same way.
pub(super) fn values_placeholders(rows: usize, cols: usize) -> String {
    let mut s = String::with_capacity(rows * cols * 6);
    for r in 0..rows {
        if r > 0 {
            s.push_str(", ");
        }
        s.push('(');
        for c in 0..cols {
            if c > 0 {
                s.push_str(", ");
            }
            s.push('$');
            s.push_str(&(r * cols + c + 1).to_string());
        }
        s.push(')');
    }
    s
}
