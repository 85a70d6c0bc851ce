//! Campaign administration (bearer admin token): create, list, show, pause, resume, cancel,
//! extend; invitations; marking workers trusted; quarantining a worker by hand.

use super::error::parse_json;
use super::monitor::{all_views, campaign_view, find_campaign, CampaignView, Skipped};
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

/// Targets as a JSON list of integers or a string: `"114,390"`, a range `"100..200"` or a
/// mix `"3,33,100..200"` (the parser of `plan --k`, [`numarg::parse_k_set`]).
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
    /// Refuse the whole request when a range holds a k that cannot be a target (instead of
    /// skipping it with a note in the answer's `skipped`).
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub strict: bool,
}

/// Most values a range in a creation may name before inadmissible ones are skipped (the
/// admitted targets are then limited to [`MAX_TARGETS`]).
pub const MAX_NAMED: usize = 20_000;

/// Why `k` cannot be a target, when it is one a range may skip: `k ≡ ±4 (mod 9)`, a cube,
/// or 0 ([`kernel::check_target`]). `None` when it can, or when the refusal is not one to
/// skip (|k| beyond the supported range).
fn skippable(k: i64) -> Option<String> {
    match kernel::check_target(k) {
        Err(
            e @ (kernel::KernelError::NoSolutionsMod9 { .. }
            | kernel::KernelError::Cube { .. }
            | kernel::KernelError::Zero),
        ) => Some(match e {
            kernel::KernelError::Cube { c, .. } => format!(
                "k = {k} is a cube ({c}³): the infinite trivial family ({c}, t, −t) makes it no target"
            ),
            other => crate::forecast::skip_reason(k).unwrap_or_else(|| other.to_string()),
        }),
        _ => None,
    }
}

/// The targets of a creation: values named on their own must be valid targets; values of a
/// range that cannot be targets are skipped (returned with the reason), or refused with
/// `strict`.
pub fn admitted_targets(ks: &KList, strict: bool) -> Result<(Vec<i64>, Vec<Skipped>), AppError> {
    let items: Vec<numarg::KItem> = match ks {
        KList::List(v) => {
            if v.len() > MAX_TARGETS {
                return Err(AppError::bad_request(
                    "bad_target",
                    format!(
                        "a campaign has 1 to {MAX_TARGETS} targets (got {})",
                        v.len()
                    ),
                ));
            }
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
            seen.into_iter()
                .map(|k| numarg::KItem {
                    k,
                    from_range: false,
                })
                .collect()
        }
        KList::Text(s) => numarg::parse_k_set(s, MAX_NAMED).map_err(bad("bad_target"))?,
    };
    let mut admitted = Vec::new();
    let mut skipped = Vec::new();
    for it in items {
        match (skippable(it.k), it.from_range) {
            (Some(reason), true) => skipped.push(Skipped { k: it.k, reason }),
            _ => {
                kernel::check_target(it.k)
                    .map_err(|e| AppError::bad_request("bad_target", e.to_string()))?;
                admitted.push(it.k);
            }
        }
    }
    if strict && !skipped.is_empty() {
        let ks: Vec<String> = skipped.iter().take(20).map(|s| s.k.to_string()).collect();
        return Err(AppError::bad_request(
            "bad_target",
            format!(
                "strict: {} value(s) of the ranges cannot be targets: k = {}{} ({}); nothing was created. \
                 Without strict (--strict on the command line) they are skipped",
                skipped.len(),
                ks.join(", "),
                if skipped.len() > 20 { ", …" } else { "" },
                skipped[0].reason
            ),
        ));
    }
    if admitted.is_empty() || admitted.len() > MAX_TARGETS {
        return Err(AppError::bad_request(
            "bad_target",
            format!(
                "a campaign has 1 to {MAX_TARGETS} targets (got {} after skipping {} that cannot be targets)",
                admitted.len(),
                skipped.len()
            ),
        ));
    }
    Ok((admitted, skipped))
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

fn signer(st: &AppState) -> crate::store::campaigns::Signer {
    let key = st.key.clone();
    std::sync::Arc::new(move |spec: &UnitSpec| sign::sign(&key, &spec.canonical_bytes()))
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
    let (ks, skipped) = admitted_targets(&req.ks, req.strict)?;
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
    let keys: Vec<(i64, u64)> = ks.iter().map(|&k| (k, bound)).collect();
    let plans = plan_all(&st, ks, 0, bound, unit_seconds).await?;
    // The model's figures of the new targets, once, now (the views then find them).
    st.model.get(&keys).await;
    let new = crate::store::NewCampaign {
        name: req.name.clone(),
        kernel: KERNEL_VERSION.to_string(),
        bound,
        unit_seconds,
        recheck_share: st.config.recheck_share,
    };
    let sign = signer(&st);
    let c = st
        .store
        .create_campaign(&new, &plans, &sign, crate::now())
        .await?;
    tracing::info!(campaign = %c.name, bound, targets = plans.len(), skipped = skipped.len(), units = plans.iter().map(|p| p.units.len()).sum::<usize>(), "campaign created");
    let mut view = campaign_view(&st, &c).await?;
    view.skipped = skipped;
    Ok(Json(view))
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
            let keys: Vec<(i64, u64)> = ks.iter().map(|&k| (k, b2)).collect();
            let plans = plan_all(&st, ks, c.bound, b2, c.unit_seconds).await?;
            st.model.get(&keys).await;
            let sign = signer(&st);
            let c2 = st
                .store
                .extend_campaign(&name, b2, &plans, &sign, st.config.recheck_share, now)
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

#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CreateInvite {
    /// The owner every worker enrolled with the invitation belongs to.
    pub owner: String,
    /// How many workers it may enrol (default 1).
    #[serde(default)]
    pub workers: Option<u32>,
    /// Seconds until it expires (default: never).
    #[serde(default)]
    pub expires_in_s: Option<u64>,
    #[serde(default)]
    pub note: String,
}

#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct InviteView {
    pub id: i64,
    pub owner: String,
    pub workers_left: i64,
    pub note: String,
    pub created_at: i64,
    pub expires_at: Option<i64>,
    /// The token itself: shown once, when the invitation is made (only its hash is kept).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub token: Option<String>,
}

impl InviteView {
    fn of(r: crate::store::InviteRow, token: Option<String>) -> InviteView {
        InviteView {
            id: r.id,
            owner: r.owner,
            workers_left: r.workers_left,
            note: r.note,
            created_at: r.created_at,
            expires_at: r.expires_at,
            token,
        }
    }
}

pub async fn create_invite(
    State(st): State<Shared>,
    headers: HeaderMap,
    body: Result<Bytes, BytesRejection>,
) -> ApiResult<Json<InviteView>> {
    auth::require_admin(&st, &headers)?;
    let body = body?;
    let req: CreateInvite = parse_json(&body, "invitation")?;
    check_name("owner", &req.owner).map_err(bad("bad_owner"))?;
    let workers = req.workers.unwrap_or(1);
    if !(1..=100_000).contains(&workers) {
        return Err(AppError::bad_request(
            "bad_workers",
            format!("workers must be 1 to 100000 (got {workers})"),
        ));
    }
    if req.note.chars().count() > 200 || req.note.chars().any(char::is_control) {
        return Err(AppError::bad_request(
            "bad_note",
            "note must be at most 200 printable characters",
        ));
    }
    let now = crate::now();
    let expires_at = match req.expires_in_s {
        None => None,
        Some(s) if s > 0 && s <= 10 * 365 * 86400 => Some(now + s as i64),
        Some(s) => {
            return Err(AppError::bad_request(
                "bad_expiry",
                format!("expires_in_s must be 1 to 315360000 seconds (got {s})"),
            ))
        }
    };
    let mut raw = [0u8; 24];
    rand::RngCore::fill_bytes(&mut rand::rngs::OsRng, &mut raw);
    let token = format!("inv-{}", hex::encode(raw));
    let row = st
        .store
        .create_invite(
            &sign::sha256_hex(token.as_bytes()),
            &req.owner.to_ascii_lowercase(),
            workers,
            &req.note,
            expires_at,
            now,
        )
        .await?;
    tracing::info!(invite = row.id, owner = %row.owner, workers, "invitation made");
    Ok(Json(InviteView::of(row, Some(token))))
}

pub async fn list_invites(
    State(st): State<Shared>,
    headers: HeaderMap,
) -> ApiResult<Json<Vec<InviteView>>> {
    auth::require_admin(&st, &headers)?;
    Ok(Json(
        st.store
            .invites()
            .await?
            .into_iter()
            .map(|r| InviteView::of(r, None))
            .collect(),
    ))
}

/// Most incidents in one answer of `GET /api/v1/admin/incidents`.
pub const INCIDENTS_PAGE: i64 = 500;

#[derive(Clone, Debug, Serialize)]
pub struct IncidentsPage {
    pub incidents: Vec<crate::store::IncidentRow>,
    /// Pass as `?after=` for the next page; absent on the last page.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub next_after: Option<i64>,
}

#[derive(Clone, Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AfterQuery {
    #[serde(default)]
    pub after: i64,
}

/// `GET /api/v1/admin/incidents[?after=ID]`: proven mismatches and quarantines, oldest first,
/// [`INCIDENTS_PAGE`] at a time.
pub async fn incidents(
    State(st): State<Shared>,
    headers: HeaderMap,
    q: Result<axum::extract::Query<AfterQuery>, axum::extract::rejection::QueryRejection>,
) -> ApiResult<Json<IncidentsPage>> {
    auth::require_admin(&st, &headers)?;
    let after = q
        .map_err(|e| AppError::bad_request("bad_query", format!("query string: {e}")))?
        .0
        .after;
    let incidents = st.store.incidents_page(after, INCIDENTS_PAGE).await?;
    let next_after = (incidents.len() as i64 == INCIDENTS_PAGE)
        .then(|| incidents.last().map(|i| i.id))
        .flatten();
    Ok(Json(IncidentsPage {
        incidents,
        next_after,
    }))
}

#[derive(Clone, Debug, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct WorkerAction {
    /// Why (kept with a quarantine).
    #[serde(default)]
    pub reason: String,
}

/// `POST /api/v1/admin/workers/{id}/{trust|distrust|quarantine}`.
pub async fn worker_action(
    State(st): State<Shared>,
    headers: HeaderMap,
    Path((id, action)): Path<(String, String)>,
    body: Result<Bytes, BytesRejection>,
) -> ApiResult<Json<crate::store::WorkerView>> {
    auth::require_admin(&st, &headers)?;
    let body = body?;
    let id: i64 = id.parse().ok().filter(|v| *v > 0).ok_or_else(|| {
        AppError::bad_request(
            "bad_worker_id",
            format!(
                "{:?} is not a worker id",
                id.chars().take(24).collect::<String>()
            ),
        )
    })?;
    let req: WorkerAction = if body.iter().all(|b| b.is_ascii_whitespace()) {
        WorkerAction::default()
    } else {
        parse_json(&body, "worker action")?
    };
    if req.reason.chars().count() > 200 || req.reason.chars().any(char::is_control) {
        return Err(AppError::bad_request(
            "bad_reason",
            "reason must be at most 200 printable characters",
        ));
    }
    match action.as_str() {
        "trust" => {
            st.store.set_trusted(id, true).await?;
        }
        "distrust" => {
            st.store.set_trusted(id, false).await?;
        }
        "quarantine" => {
            let reason = if req.reason.is_empty() {
                "by the organiser".to_string()
            } else {
                req.reason.clone()
            };
            st.store
                .quarantine_by_hand(id, &reason, &st.config.policy(), crate::now())
                .await?;
        }
        other => {
            return Err(AppError::not_found(
                "no_action",
                format!(
                    "unknown worker action {:?}: use trust, distrust or quarantine",
                    other.chars().take(24).collect::<String>()
                ),
            ))
        }
    }
    tracing::info!(worker = id, %action, "worker changed by the organiser");
    let v = st
        .store
        .workers()
        .await?
        .into_iter()
        .find(|w| w.id == id)
        .ok_or_else(|| AppError::not_found("not_found", format!("no worker {id}")))?;
    Ok(Json(v))
}
