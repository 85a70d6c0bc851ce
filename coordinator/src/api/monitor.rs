//! Read-only monitoring: campaigns with progress, solutions, workers, `/metrics`,
//! `/healthz` and the status page. No authentication, no state changes.

use super::{ApiResult, AppError, AppState, Shared};
use crate::model::{self, FamilyMark, ModelInfo, TargetModel};
use crate::store::{CampaignRow, SolutionView, TargetStats, UnitCounts, WorkerView};
use axum::extract::{Path, State};
use axum::http::header;
use axum::response::{Html, IntoResponse};
use axum::Json;
use cubehunt_common::Solution;
use serde::Serialize;

/// Rate window: cost settled over the last this many seconds.
pub const RATE_WINDOW_S: i64 = 900;

#[derive(Clone, Debug, Serialize, serde::Deserialize)]
pub struct Progress {
    pub units: UnitCounts,
    /// Estimated reference-core seconds of all units, and of the settled ones.
    pub cost_total_s: f64,
    pub cost_settled_s: f64,
    /// Settled share of the work, by cost (0..=1).
    pub fraction: f64,
    /// Settled reference-core seconds per second over the last 15 minutes.
    pub rate: f64,
    /// Seconds until complete at that rate (`null` when nothing is moving).
    pub eta_s: Option<f64>,
}

#[derive(Clone, Debug, Serialize, serde::Deserialize)]
pub struct TargetView {
    pub k: i64,
    pub bound: u64,
    pub z0: u64,
    #[serde(flatten)]
    pub progress: Progress,
    pub solutions: Vec<Solution>,
    /// The solutions above that belong to a parametric family, with its parameter.
    #[serde(default)]
    pub families: Vec<FamilyMark>,
    /// Found versus expected at the target's bound (the campaign's `model` says how).
    #[serde(default)]
    pub model: Option<TargetModel>,
}

#[derive(Clone, Debug, Serialize, serde::Deserialize)]
pub struct CampaignView {
    pub name: String,
    /// `complete` once every unit of every target is settled; otherwise `active`, `paused`
    /// or `cancelled`.
    pub state: String,
    pub kernel: String,
    pub bound: u64,
    pub unit_seconds: f64,
    pub created_at: i64,
    #[serde(flatten)]
    pub progress: Progress,
    pub targets: Vec<TargetView>,
    /// Every settled solution of every target, triples sorted ascending, by k then triple.
    pub solutions: Vec<Solution>,
    /// How the targets' `model` figures are counted and what their interval is.
    #[serde(default = "ModelInfo::current")]
    pub model: ModelInfo,
    /// Values of k a range asked for that were skipped, with the reason (only in the answer
    /// to a creation).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub skipped: Vec<Skipped>,
}

/// A value of k left out of a campaign, and why.
#[derive(Clone, Debug, Serialize, serde::Deserialize)]
pub struct Skipped {
    pub k: i64,
    pub reason: String,
}

fn progress(
    units: UnitCounts,
    total_us: i64,
    settled_us: i64,
    recent_us: i64,
    window_s: i64,
) -> Progress {
    let cost_total_s = total_us as f64 / 1e6;
    let cost_settled_s = settled_us as f64 / 1e6;
    let rate = recent_us as f64 / 1e6 / window_s.max(1) as f64;
    let remaining = (cost_total_s - cost_settled_s).max(0.0);
    let eta_s = if units.settled == units.total {
        Some(0.0)
    } else if rate > 0.0 {
        Some(remaining / rate)
    } else {
        None
    };
    Progress {
        units,
        cost_total_s,
        cost_settled_s,
        fraction: if total_us > 0 {
            settled_us as f64 / total_us as f64
        } else {
            0.0
        },
        rate,
        eta_s,
    }
}

pub async fn campaign_view(st: &AppState, c: &CampaignRow) -> ApiResult<CampaignView> {
    let now = crate::now();
    let window = RATE_WINDOW_S.min(now - c.created_at).max(1);
    let stats = st.store.campaign_stats(c.id, now - window).await?;
    let rows: Vec<_> = stats.targets.iter().map(|t| t.target.clone()).collect();
    let figures = st.model.for_targets(&rows).await;
    let mut all = UnitCounts::default();
    let (mut tot, mut set, mut rec) = (0, 0, 0);
    let mut targets = Vec::new();
    let mut solutions = Vec::new();
    for TargetStats {
        target,
        units,
        cost_total_us,
        cost_settled_us,
        cost_settled_recent_us,
        solutions: sols,
    } in stats.targets
    {
        all.total += units.total;
        all.open += units.open;
        all.leased += units.leased;
        all.settled += units.settled;
        all.disputed += units.disputed;
        tot += cost_total_us;
        set += cost_settled_us;
        rec += cost_settled_recent_us;
        solutions.extend(sols.iter().copied());
        let model = figures
            .get(&(target.k, target.bound))
            .and_then(|f| model::target_model(target.k, target.bound, f, &sols));
        targets.push(TargetView {
            families: model::family_marks(target.k, &sols),
            model,
            k: target.k,
            bound: target.bound,
            z0: target.z0,
            progress: progress(
                units,
                cost_total_us,
                cost_settled_us,
                cost_settled_recent_us,
                window,
            ),
            solutions: sols,
        });
    }
    let complete = all.total > 0 && all.settled == all.total;
    Ok(CampaignView {
        name: c.name.clone(),
        state: if complete {
            "complete".into()
        } else {
            c.state.clone()
        },
        kernel: c.kernel.clone(),
        bound: c.bound,
        unit_seconds: c.unit_seconds,
        created_at: c.created_at,
        progress: progress(all, tot, set, rec, window),
        targets,
        solutions,
        model: ModelInfo::current(),
        skipped: Vec::new(),
    })
}

pub async fn find_campaign(st: &AppState, name: &str) -> ApiResult<CampaignRow> {
    st.store.campaign(name).await?.ok_or_else(|| {
        AppError::not_found(
            "no_campaign",
            format!("no campaign named {name:?}; GET /api/v1/campaigns lists them"),
        )
    })
}

pub async fn all_views(st: &AppState) -> ApiResult<Vec<CampaignView>> {
    let mut v = Vec::new();
    for c in st.store.campaigns().await? {
        v.push(campaign_view(st, &c).await?);
    }
    Ok(v)
}

pub async fn campaigns(State(st): State<Shared>) -> ApiResult<Json<Vec<CampaignView>>> {
    Ok(Json(all_views(&st).await?))
}

pub async fn campaign(
    State(st): State<Shared>,
    Path(name): Path<String>,
) -> ApiResult<Json<CampaignView>> {
    let c = find_campaign(&st, &name).await?;
    Ok(Json(campaign_view(&st, &c).await?))
}

pub async fn solutions(
    State(st): State<Shared>,
    Path(name): Path<String>,
) -> ApiResult<Json<Vec<SolutionView>>> {
    let c = find_campaign(&st, &name).await?;
    let mut v = st.store.campaign_solutions(c.id).await?;
    for s in &mut v {
        s.family = model::family_text(s.k, &s.solution);
    }
    Ok(Json(v))
}

/// Workers listed by one `GET /api/v1/workers` when no `limit` is given, and at most.
pub const WORKERS_PAGE_DEFAULT: i64 = 500;
pub const WORKERS_PAGE_MAX: i64 = 1000;

#[derive(Debug, Default, serde::Deserialize)]
pub struct WorkersQuery {
    pub after: Option<String>,
    pub limit: Option<String>,
}

/// `GET /api/v1/workers[?after=ID][&limit=N]`: the enrolled workers with ids above `after`
/// (default 0), by id, at most `limit` of them (default [`WORKERS_PAGE_DEFAULT`], at most
/// [`WORKERS_PAGE_MAX`]). A page shorter than `limit` is the last one; the next page is the
/// one after the last id shown.
pub async fn workers(
    State(st): State<Shared>,
    axum::extract::Query(q): axum::extract::Query<WorkersQuery>,
) -> ApiResult<Json<Vec<WorkerView>>> {
    let num = |what: &str, v: &Option<String>, default: i64, lo: i64, hi: i64| -> ApiResult<i64> {
        let Some(v) = v else { return Ok(default) };
        v.trim()
            .parse::<i64>()
            .ok()
            .filter(|n| (lo..=hi).contains(n))
            .ok_or_else(|| {
                AppError::bad_request(
                    "bad_page",
                    format!(
                        "{what} {:?} is not an integer from {lo} to {hi}",
                        v.chars().take(24).collect::<String>()
                    ),
                )
            })
    };
    let after = num("after", &q.after, 0, 0, i64::MAX)?;
    let limit = num("limit", &q.limit, WORKERS_PAGE_DEFAULT, 1, WORKERS_PAGE_MAX)?;
    Ok(Json(st.store.workers_page(after, limit).await?))
}

pub async fn healthz(State(st): State<Shared>) -> ApiResult<Json<serde_json::Value>> {
    let v = st.store.schema_version().await?;
    Ok(Json(
        serde_json::json!({ "ok": true, "schema_version": v, "kernel": cubehunt_common::KERNEL_VERSION }),
    ))
}

pub async fn metrics(State(st): State<Shared>) -> ApiResult<impl IntoResponse> {
    use std::fmt::Write;
    let m = st.store.metrics().await?;
    let mut s = String::new();
    let head = |s: &mut String, name: &str, help: &str| {
        let _ = writeln!(s, "# HELP {name} {help}\n# TYPE {name} gauge");
    };
    head(&mut s, "cubehunt_units", "Units by campaign and state.");
    for (c, state, n) in &m.units {
        let _ = writeln!(
            s,
            "cubehunt_units{{campaign=\"{c}\",state=\"{state}\"}} {n}"
        );
    }
    head(
        &mut s,
        "cubehunt_campaign_info",
        "One series per campaign, labelled with its stored state.",
    );
    for (c, state) in &m.campaigns {
        let _ = writeln!(
            s,
            "cubehunt_campaign_info{{campaign=\"{c}\",state=\"{state}\"}} 1"
        );
    }
    head(
        &mut s,
        "cubehunt_leases_active",
        "Leases currently held by workers.",
    );
    let _ = writeln!(s, "cubehunt_leases_active {}", m.leases_active);
    head(&mut s, "cubehunt_reports", "Stored reports by verdict.");
    for (v, n) in &m.reports {
        let _ = writeln!(s, "cubehunt_reports{{verdict=\"{v}\"}} {n}");
    }
    head(&mut s, "cubehunt_workers", "Enrolled workers.");
    let _ = writeln!(s, "cubehunt_workers {}", m.workers);
    head(
        &mut s,
        "cubehunt_workers_quarantined",
        "Workers quarantined after repeated wrong reports.",
    );
    let _ = writeln!(s, "cubehunt_workers_quarantined {}", m.workers_quarantined);
    head(
        &mut s,
        "cubehunt_solutions",
        "Settled solutions stored, over all targets.",
    );
    let _ = writeln!(s, "cubehunt_solutions {}", m.solutions);
    head(
        &mut s,
        "cubehunt_uptime_seconds",
        "Seconds since this coordinator process started.",
    );
    let _ = writeln!(
        s,
        "cubehunt_uptime_seconds {}",
        crate::now() - st.started_at
    );
    Ok((
        [(
            header::CONTENT_TYPE,
            "text/plain; version=0.0.4; charset=utf-8",
        )],
        s,
    ))
}

/// The status page (static HTML over the JSON API).
pub const STATUS_HTML: &str = include_str!("../../static/status.html");

pub async fn status_page() -> Html<&'static str> {
    Html(STATUS_HTML)
}

pub async fn not_found(uri: axum::http::Uri) -> AppError {
    AppError::not_found(
        "no_route",
        format!(
            "no endpoint {}; GET /api/v1/openapi.json lists them",
            uri.path()
        ),
    )
}
