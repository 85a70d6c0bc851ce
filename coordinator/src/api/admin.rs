//! Campaign administration (bearer admin token): create, list, show, pause, resume, cancel,
//! extend.

use super::error::parse_json;
use super::monitor::{all_views, campaign_view, find_campaign, CampaignView};
use super::{auth, check_name, ApiResult, AppError, AppState, Shared};
use crate::plan::{plan_target, PlanError, PlanSettings};
use crate::store::TargetPlan;
use axum::body::Bytes;
use axum::extract::rejection::BytesRejection;
use axum::extract::{Path, State};
use axum::http::HeaderMap;
use axum::Json;
use cubehunt_common::{kernel, numarg, sign, UnitSpec, KERNEL_VERSION};
use serde::{Deserialize, Serialize};

/// Default planning goal: ten minutes of one reference core per unit.
pub const DEFAULT_UNIT_SECONDS: f64 = 600.0;
/// Most targets in one campaign.
pub const MAX_TARGETS: usize = 1000;

/// A count given as a JSON integer, an exact float, or a string such as `"1e12"`.
#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(untagged)]
pub enum Count {
    Int(u64),
    Float(f64),
    Text(String),
}

impl Count {
    pub fn value(&self, what: &str) -> Result<u64, String> {
        match self {
            Count::Int(v) => Ok(*v),
            Count::Float(f) if f.is_finite() && *f >= 0.0 && f.fract() == 0.0 && *f < 9.007_199_254_740_992e15 => Ok(*f as u64),
            Count::Float(f) => Err(format!("{what} {f} is not an exact non-negative integer; give it as a string such as \"1e12\"")),
            Count::Text(s) => numarg::parse_u64(s).map_err(|e| format!("{what}: {e}")),
        }
    }
}

/// Targets as a JSON list of integers or a string `"114,390"`.
#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(untagged)]
pub enum KList {
    List(Vec<i64>),
    Text(String),
}

#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CreateCampaign {
    pub name: String,
    #[serde(alias = "k")]
    pub ks: KList,
    pub bound: Count,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub unit_seconds: Option<f64>,
}

#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ExtendCampaign {
    pub bound: Count,
}

fn bad(code: &'static str) -> impl Fn(String) -> AppError {
    move |m| AppError::bad_request(code, m)
}

fn check_bound(b: u64) -> ApiResult<u64> {
    if b < 1 {
        return Err(AppError::bad_request(
            "bad_bound",
            "bound must be at least 1",
        ));
    }
    if b > kernel::MAX_Z {
        return Err(AppError::bad_request(
            "bad_bound",
            format!(
                "bound {b} exceeds the supported range (at most {})",
                kernel::MAX_Z
            ),
        ));
    }
    Ok(b)
}

fn plan_error(e: PlanError) -> AppError {
    match e {
        PlanError::Kernel(k) => AppError::bad_request("bad_target", k.to_string()),
        e @ PlanError::TooManyUnits { .. } => {
            AppError::unprocessable("too_many_units", e.to_string())
        }
    }
}

/// Plan every target for `(from, to]` off the async runtime, within the unit limit.
async fn plan_all(
    st: &AppState,
    ks: Vec<i64>,
    from: u64,
    to: u64,
    unit_seconds: f64,
) -> ApiResult<Vec<TargetPlan>> {
    let max = st.config.max_units;
    let plans = tokio::task::spawn_blocking(move || -> Result<Vec<TargetPlan>, PlanError> {
        let mut left = max;
        let mut out = Vec::new();
        for k in ks {
            let p = plan_target(
                k,
                from,
                to,
                PlanSettings {
                    unit_seconds,
                    max_units: left,
                },
            )?;
            left = left.saturating_sub(p.units.len() as u64);
            out.push(p);
        }
        Ok(out)
    })
    .await?
    .map_err(plan_error)?;
    Ok(plans)
}

fn signer(st: &AppState) -> impl Fn(&UnitSpec) -> String + Sync + '_ {
    move |spec: &UnitSpec| sign::sign(&st.key, &spec.canonical_bytes())
}

pub async fn create(
    State(st): State<Shared>,
    headers: HeaderMap,
    body: Result<Bytes, BytesRejection>,
) -> ApiResult<Json<CampaignView>> {
    auth::require_admin(&st, &headers)?;
    let body = body?;
    let req: CreateCampaign = parse_json(&body, "campaign")?;
    check_name("campaign name", &req.name).map_err(bad("bad_name"))?;
    let ks = match &req.ks {
        KList::List(v) => {
            let mut seen = Vec::new();
            for k in v {
                if seen.contains(k) {
                    return Err(AppError::bad_request(
                        "bad_target",
                        format!("k = {k} appears twice"),
                    ));
                }
                seen.push(*k);
            }
            seen
        }
        KList::Text(s) => numarg::parse_i64_list(s).map_err(bad("bad_target"))?,
    };
    if ks.is_empty() || ks.len() > MAX_TARGETS {
        return Err(AppError::bad_request(
            "bad_target",
            format!(
                "a campaign has 1 to {MAX_TARGETS} targets (got {})",
                ks.len()
            ),
        ));
    }
    for &k in &ks {
        kernel::check_target(k).map_err(|e| AppError::bad_request("bad_target", e.to_string()))?;
    }
    let bound = check_bound(req.bound.value("bound").map_err(bad("bad_bound"))?)?;
    let unit_seconds = req.unit_seconds.unwrap_or(DEFAULT_UNIT_SECONDS);
    if !(unit_seconds.is_finite() && unit_seconds > 0.0 && unit_seconds <= 1e9) {
        return Err(AppError::bad_request("bad_unit_seconds", format!("unit_seconds must be a positive number of seconds, at most 1e9 (got {unit_seconds})")));
    }
    if st.store.campaign(&req.name).await?.is_some() {
        return Err(AppError::conflict(
            "campaign_exists",
            format!(
                "a campaign named {:?} already exists: choose another name, or extend that one",
                req.name
            ),
        ));
    }
    let plans = plan_all(&st, ks, 0, bound, unit_seconds).await?;
    let new = crate::store::NewCampaign {
        name: req.name.clone(),
        kernel: KERNEL_VERSION.to_string(),
        bound,
        unit_seconds,
    };
    let sign = signer(&st);
    let c = st
        .store
        .create_campaign(&new, &plans, &sign, crate::now())
        .await?;
    tracing::info!(campaign = %c.name, bound, targets = plans.len(), units = plans.iter().map(|p| p.units.len()).sum::<usize>(), "campaign created");
    Ok(Json(campaign_view(&st, &c).await?))
}

pub async fn list(
    State(st): State<Shared>,
    headers: HeaderMap,
) -> ApiResult<Json<Vec<CampaignView>>> {
    auth::require_admin(&st, &headers)?;
    Ok(Json(all_views(&st).await?))
}

pub async fn show(
    State(st): State<Shared>,
    headers: HeaderMap,
    Path(name): Path<String>,
) -> ApiResult<Json<CampaignView>> {
    auth::require_admin(&st, &headers)?;
    let c = find_campaign(&st, &name).await?;
    Ok(Json(campaign_view(&st, &c).await?))
}

pub async fn action(
    State(st): State<Shared>,
    headers: HeaderMap,
    Path((name, action)): Path<(String, String)>,
    body: Result<Bytes, BytesRejection>,
) -> ApiResult<Json<CampaignView>> {
    auth::require_admin(&st, &headers)?;
    let body = body?;
    let c = find_campaign(&st, &name).await?;
    let now = crate::now();
    let c = match action.as_str() {
        "pause" => st.store.set_campaign_state(&name, "paused", now).await?,
        "resume" => st.store.set_campaign_state(&name, "active", now).await?,
        "cancel" => st.store.set_campaign_state(&name, "cancelled", now).await?,
        "extend" => {
            let req: ExtendCampaign = parse_json(&body, "extension")?;
            let b2 = check_bound(req.bound.value("bound").map_err(bad("bad_bound"))?)?;
            if b2 <= c.bound {
                return Err(AppError::conflict("bound_not_larger", format!("campaign {name:?} already has bound {}; an extension needs a larger bound (got {b2})", c.bound)));
            }
            if c.state == "cancelled" {
                return Err(AppError::conflict(
                    "campaign_cancelled",
                    format!("campaign {name:?} is cancelled and cannot be extended"),
                ));
            }
            let ks: Vec<i64> = st.store.targets(c.id).await?.iter().map(|t| t.k).collect();
            let plans = plan_all(&st, ks, c.bound, b2, c.unit_seconds).await?;
            let sign = signer(&st);
            let c2 = st
                .store
                .extend_campaign(&name, b2, &plans, &sign, now)
                .await?;
            tracing::info!(campaign = %name, from = c.bound, to = b2, units = plans.iter().map(|p| p.units.len()).sum::<usize>(), "campaign extended");
            c2
        }
        other => {
            return Err(AppError::not_found(
                "no_action",
                format!("unknown campaign action {other:?}: use pause, resume, cancel or extend"),
            ));
        }
    };
    tracing::info!(campaign = %name, %action, state = %c.state, "campaign changed");
    Ok(Json(campaign_view(&st, &c).await?))
}
