//! One record type per table, decoded from a row of that table (with, for units, the two
//! joined columns that make its signed spec: the campaign's name and kernel, the target's k).
//! A value that does not decode is a [`StoreError::Corrupt`], never a panic: the audit reads
//! stores that may have been tampered with.

use super::{Result, StoreError};
use crate::lifecycle::{Outcome, UnitState, Verdict};
use cubehunt_common::{Digest, Rect, Region, Solution, UnitSpec};
use sqlx::any::AnyRow;
use sqlx::Row;
use std::str::FromStr;

fn corrupt(table: &str, col: &str, e: impl std::fmt::Display) -> StoreError {
    StoreError::Corrupt(format!("{table}.{col}: {e}"))
}

fn u64_col(r: &AnyRow, table: &str, col: &str) -> Result<u64> {
    let v: i64 = r.try_get(col)?;
    u64::try_from(v).map_err(|_| corrupt(table, col, format!("negative value {v}")))
}

fn digest_col(r: &AnyRow, table: &str, col: &str) -> Result<Digest> {
    let s: String = r.try_get(col)?;
    s.parse().map_err(|e| corrupt(table, col, e))
}

/// Parse a stored solution list (canonical JSON).
pub fn parse_solutions(text: &str) -> std::result::Result<Vec<Solution>, String> {
    serde_json::from_str(text).map_err(|e| e.to_string())
}

fn solutions_col(r: &AnyRow, table: &str, col: &str) -> Result<Vec<Solution>> {
    let s: String = r.try_get(col)?;
    parse_solutions(&s).map_err(|e| corrupt(table, col, e))
}

/// An outcome kept in two nullable columns (`<prefix>_digest`, `<prefix>_solutions`).
fn outcome_cols(r: &AnyRow, table: &str, prefix: &str) -> Result<Option<Outcome>> {
    let dcol = format!("{prefix}_digest");
    let scol = format!("{prefix}_solutions");
    let d: Option<String> = r.try_get(dcol.as_str())?;
    let s: Option<String> = r.try_get(scol.as_str())?;
    match (d, s) {
        (None, None) => Ok(None),
        (Some(d), Some(s)) => Ok(Some(Outcome::new(
            d.parse().map_err(|e| corrupt(table, &dcol, e))?,
            parse_solutions(&s).map_err(|e| corrupt(table, &scol, e))?,
        ))),
        _ => Err(corrupt(
            table,
            &dcol,
            "digest and solutions must be set together",
        )),
    }
}

fn flag(r: &AnyRow, col: &str) -> Result<bool> {
    Ok(r.try_get::<i64, _>(col)? != 0)
}

/// `campaigns`
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

impl CampaignRow {
    pub fn from_row(r: &AnyRow) -> Result<CampaignRow> {
        Ok(CampaignRow {
            id: r.try_get("id")?,
            name: r.try_get("name")?,
            kernel: r.try_get("kernel")?,
            bound: u64_col(r, "campaigns", "bound")?,
            unit_seconds: r.try_get("unit_seconds")?,
            state: r.try_get("state")?,
            created_at: r.try_get("created_at")?,
            updated_at: r.try_get("updated_at")?,
        })
    }
}

/// `targets`
#[derive(Clone, Debug)]
pub struct TargetRow {
    pub id: i64,
    pub campaign_id: i64,
    pub k: i64,
    pub bound: u64,
    pub z0: u64,
}

impl TargetRow {
    pub fn from_row(r: &AnyRow) -> Result<TargetRow> {
        Ok(TargetRow {
            id: r.try_get("id")?,
            campaign_id: r.try_get("campaign_id")?,
            k: r.try_get("k")?,
            bound: u64_col(r, "targets", "bound")?,
            z0: u64_col(r, "targets", "z0")?,
        })
    }
}

/// `target_plans`
#[derive(Clone, Debug)]
pub struct PlanRow {
    pub id: i64,
    pub target_id: i64,
    pub bound_from: u64,
    pub bound_to: u64,
    pub units: i64,
    pub cost_us: u64,
    pub created_at: i64,
}

impl PlanRow {
    pub fn from_row(r: &AnyRow) -> Result<PlanRow> {
        Ok(PlanRow {
            id: r.try_get("id")?,
            target_id: r.try_get("target_id")?,
            bound_from: u64_col(r, "target_plans", "bound_from")?,
            bound_to: u64_col(r, "target_plans", "bound_to")?,
            units: r.try_get("units")?,
            cost_us: u64_col(r, "target_plans", "cost_us")?,
            created_at: r.try_get("created_at")?,
        })
    }
}

/// `workers`
#[derive(Clone, Debug)]
pub struct WorkerRow {
    pub id: i64,
    pub owner: String,
    pub public_key: String,
    pub kernel: String,
    pub threads: i64,
    pub label: String,
    pub address: String,
    pub net_prefix: String,
    pub invite_id: Option<i64>,
    pub enrolled_at: i64,
    pub last_seen: i64,
    pub active: i64,
    pub reports: i64,
    pub units_settled: i64,
    pub confirmed: i64,
    pub errors: i64,
    pub trusted: bool,
    pub quarantined: bool,
    pub quarantined_at: Option<i64>,
    pub quarantine_reason: String,
    /// Sum of the estimated cost (reference-core µs) of the leases it reported.
    pub work_us: i64,
    /// Sum of the wall seconds those leases took, as seen by the coordinator.
    pub wall_s: i64,
}

impl WorkerRow {
    pub fn from_row(r: &AnyRow) -> Result<WorkerRow> {
        Ok(WorkerRow {
            id: r.try_get("id")?,
            owner: r.try_get("owner")?,
            public_key: r.try_get("public_key")?,
            kernel: r.try_get("kernel")?,
            threads: r.try_get("threads")?,
            label: r.try_get("label")?,
            address: r.try_get("address")?,
            net_prefix: r.try_get("net_prefix")?,
            invite_id: r.try_get("invite_id")?,
            enrolled_at: r.try_get("enrolled_at")?,
            last_seen: r.try_get("last_seen")?,
            active: r.try_get("active")?,
            reports: r.try_get("reports")?,
            units_settled: r.try_get("units_settled")?,
            confirmed: r.try_get("confirmed")?,
            errors: r.try_get("errors")?,
            trusted: flag(r, "trusted")?,
            quarantined: flag(r, "quarantined")?,
            quarantined_at: r.try_get("quarantined_at")?,
            quarantine_reason: r.try_get("quarantine_reason")?,
            work_us: r.try_get("work_us")?,
            wall_s: r.try_get("wall_s")?,
        })
    }

    /// Observed speed in reference-core seconds per wall second, once it has reported work.
    pub fn observed_rate(&self) -> Option<f64> {
        if self.wall_s > 0 && self.work_us > 0 {
            Some(self.work_us as f64 / 1e6 / self.wall_s as f64)
        } else {
            None
        }
    }
}

/// `invites`
#[derive(Clone, Debug)]
pub struct InviteRow {
    pub id: i64,
    pub token_sha256: String,
    pub owner: String,
    pub workers_left: i64,
    pub note: String,
    pub created_at: i64,
    pub expires_at: Option<i64>,
}

impl InviteRow {
    pub fn from_row(r: &AnyRow) -> Result<InviteRow> {
        Ok(InviteRow {
            id: r.try_get("id")?,
            token_sha256: r.try_get("token_sha256")?,
            owner: r.try_get("owner")?,
            workers_left: r.try_get("workers_left")?,
            note: r.try_get("note")?,
            created_at: r.try_get("created_at")?,
            expires_at: r.try_get("expires_at")?,
        })
    }
}

/// `units`, with the signed spec rebuilt from the joined campaign and target.
#[derive(Clone, Debug)]
pub struct UnitRow {
    pub target_id: i64,
    pub campaign_id: i64,
    /// What the coordinator signed (id, campaign, k, bound, kernel, rectangle, cost).
    pub spec: UnitSpec,
    pub signature: String,
    pub state: UnitState,
    pub reports: i64,
    pub active: i64,
    pub need: i64,
    pub offered_to: Option<i64>,
    pub offered_at: Option<i64>,
    pub recheck: bool,
    /// The organiser's own result, once computed.
    pub known: Option<Outcome>,
    pub known_by: Option<String>,
    pub known_at: Option<i64>,
    pub settled: Option<Outcome>,
    pub settled_at: Option<i64>,
}

/// Columns for [`UnitRow::from_row`]; `u` = units, `t` = targets, `c` = campaigns.
pub const UNIT_SELECT: &str = "SELECT u.*, c.name AS campaign, c.kernel AS kernel, t.k AS k \
     FROM units u JOIN targets t ON t.id = u.target_id JOIN campaigns c ON c.id = u.campaign_id";

impl UnitRow {
    pub fn id(&self) -> i64 {
        self.spec.unit_id
    }
    pub fn rect(&self) -> Rect {
        self.spec.rect
    }
    pub fn from_row(r: &AnyRow) -> Result<UnitRow> {
        let region: String = r.try_get("region")?;
        let region = Region::from_str(&region).map_err(|e| corrupt("units", "region", e))?;
        let state: String = r.try_get("state")?;
        let state = UnitState::parse(&state)
            .ok_or_else(|| corrupt("units", "state", format!("unknown state {state:?}")))?;
        Ok(UnitRow {
            target_id: r.try_get("target_id")?,
            campaign_id: r.try_get("campaign_id")?,
            spec: UnitSpec {
                unit_id: r.try_get("id")?,
                campaign: r.try_get("campaign")?,
                k: r.try_get("k")?,
                bound: u64_col(r, "units", "bound")?,
                kernel: r.try_get("kernel")?,
                rect: Rect {
                    region,
                    d_lo: u64_col(r, "units", "d_lo")?,
                    d_hi: u64_col(r, "units", "d_hi")?,
                    z_lo: u64_col(r, "units", "z_lo")?,
                    z_hi: u64_col(r, "units", "z_hi")?,
                },
                cost: u64_col(r, "units", "cost_us")?,
            },
            signature: r.try_get("signature")?,
            state,
            reports: r.try_get("reports")?,
            active: r.try_get("active")?,
            need: r.try_get("need")?,
            offered_to: r.try_get("offered_to")?,
            offered_at: r.try_get("offered_at")?,
            recheck: flag(r, "recheck")?,
            known: outcome_cols(r, "units", "known")?,
            known_by: r.try_get("known_by")?,
            known_at: r.try_get("known_at")?,
            settled: outcome_cols(r, "units", "settled")?,
            settled_at: r.try_get("settled_at")?,
        })
    }
}

/// `leases`
#[derive(Clone, Debug)]
pub struct LeaseRow {
    pub id: i64,
    pub unit_id: i64,
    pub worker_id: i64,
    pub owner: String,
    pub net_prefix: String,
    pub state: String,
    pub issued_at: i64,
    pub deadline: i64,
    pub limit_at: i64,
    pub heartbeat_at: Option<i64>,
    pub progress: f64,
    pub closed_at: Option<i64>,
}

impl LeaseRow {
    pub fn from_row(r: &AnyRow) -> Result<LeaseRow> {
        Ok(LeaseRow {
            id: r.try_get("id")?,
            unit_id: r.try_get("unit_id")?,
            worker_id: r.try_get("worker_id")?,
            owner: r.try_get("owner")?,
            net_prefix: r.try_get("net_prefix")?,
            state: r.try_get("state")?,
            issued_at: r.try_get("issued_at")?,
            deadline: r.try_get("deadline")?,
            limit_at: r.try_get("limit_at")?,
            heartbeat_at: r.try_get("heartbeat_at")?,
            progress: r.try_get("progress")?,
            closed_at: r.try_get("closed_at")?,
        })
    }
}

/// `reports`
#[derive(Clone, Debug)]
pub struct ReportRow {
    pub id: i64,
    pub lease_id: i64,
    pub unit_id: i64,
    pub worker_id: i64,
    pub owner: String,
    pub digest: Digest,
    pub pieces: i64,
    pub pieces_root: String,
    pub solutions: Vec<Solution>,
    pub signature: String,
    pub elapsed_s: f64,
    pub verdict: Verdict,
    /// Proven wrong by the organiser's own result, or a false claim.
    pub wrong: bool,
    /// Confirmed by the organiser's own result.
    pub confirmed: bool,
    pub reason: String,
    pub received_at: i64,
}

impl ReportRow {
    pub fn from_row(r: &AnyRow) -> Result<ReportRow> {
        let verdict: String = r.try_get("verdict")?;
        Ok(ReportRow {
            id: r.try_get("id")?,
            lease_id: r.try_get("lease_id")?,
            unit_id: r.try_get("unit_id")?,
            worker_id: r.try_get("worker_id")?,
            owner: r.try_get("owner")?,
            digest: digest_col(r, "reports", "digest")?,
            pieces: r.try_get("pieces")?,
            pieces_root: r.try_get("pieces_root")?,
            solutions: solutions_col(r, "reports", "solutions")?,
            signature: r.try_get("signature")?,
            elapsed_s: r.try_get("elapsed_s")?,
            verdict: Verdict::parse(&verdict)
                .ok_or_else(|| corrupt("reports", "verdict", format!("unknown {verdict:?}")))?,
            wrong: flag(r, "wrong")?,
            confirmed: flag(r, "confirmed")?,
            reason: r.try_get("reason")?,
            received_at: r.try_get("received_at")?,
        })
    }
    pub fn outcome(&self) -> Outcome {
        Outcome::new(self.digest, self.solutions.clone())
    }
}

/// `spot_checks`
#[derive(Clone, Debug)]
pub struct SpotCheckRow {
    pub id: i64,
    pub report_id: i64,
    pub unit_id: i64,
    pub piece: i64,
    pub claimed: Digest,
    pub proof: String,
    /// `waiting`, `passed` or `failed`
    pub state: String,
    pub computed: Option<Outcome>,
    pub created_at: i64,
    pub done_at: Option<i64>,
}

impl SpotCheckRow {
    pub fn from_row(r: &AnyRow) -> Result<SpotCheckRow> {
        let computed: Option<String> = r.try_get("computed")?;
        let sols: Option<String> = r.try_get("computed_solutions")?;
        let computed = match (computed, sols) {
            (Some(d), Some(s)) => Some(Outcome::new(
                d.parse()
                    .map_err(|e| corrupt("spot_checks", "computed", e))?,
                parse_solutions(&s).map_err(|e| corrupt("spot_checks", "computed_solutions", e))?,
            )),
            (None, None) => None,
            _ => return Err(corrupt("spot_checks", "computed", "half a result")),
        };
        Ok(SpotCheckRow {
            id: r.try_get("id")?,
            report_id: r.try_get("report_id")?,
            unit_id: r.try_get("unit_id")?,
            piece: r.try_get("piece")?,
            claimed: digest_col(r, "spot_checks", "claimed")?,
            proof: r.try_get("proof")?,
            state: r.try_get("state")?,
            computed,
            created_at: r.try_get("created_at")?,
            done_at: r.try_get("done_at")?,
        })
    }
}

/// `incidents`
#[derive(Clone, Debug, serde::Serialize)]
pub struct IncidentRow {
    pub id: i64,
    pub at: i64,
    pub kind: String,
    pub worker_id: i64,
    pub report_id: Option<i64>,
    pub unit_id: Option<i64>,
    pub spot_check_id: Option<i64>,
    pub detail: String,
    pub quarantined: Vec<i64>,
    pub voided: Vec<i64>,
    pub rechecked: Vec<i64>,
}

impl IncidentRow {
    pub fn from_row(r: &AnyRow) -> Result<IncidentRow> {
        let list = |col: &str| -> Result<Vec<i64>> {
            let s: String = r.try_get(col)?;
            serde_json::from_str(&s).map_err(|e| corrupt("incidents", col, e))
        };
        Ok(IncidentRow {
            id: r.try_get("id")?,
            at: r.try_get("at")?,
            kind: r.try_get("kind")?,
            worker_id: r.try_get("worker_id")?,
            report_id: r.try_get("report_id")?,
            unit_id: r.try_get("unit_id")?,
            spot_check_id: r.try_get("spot_check_id")?,
            detail: r.try_get("detail")?,
            quarantined: list("quarantined")?,
            voided: list("voided")?,
            rechecked: list("rechecked")?,
        })
    }
}

/// `solutions`
#[derive(Clone, Debug)]
pub struct SolutionRow {
    pub id: i64,
    pub target_id: i64,
    pub solution: Solution,
    pub unit_id: i64,
    pub found_at: i64,
}

impl SolutionRow {
    pub fn from_row(r: &AnyRow) -> Result<SolutionRow> {
        let parts: [String; 3] = [r.try_get("a")?, r.try_get("b")?, r.try_get("c")?];
        Ok(SolutionRow {
            id: r.try_get("id")?,
            target_id: r.try_get("target_id")?,
            solution: Solution::parse(&parts).map_err(|e| corrupt("solutions", "a,b,c", e))?,
            unit_id: r.try_get("unit_id")?,
            found_at: r.try_get("found_at")?,
        })
    }
}

/// `certificates`
#[derive(Clone, Debug)]
pub struct CertificateRow {
    pub id: i64,
    pub target_id: i64,
    pub bound: u64,
    pub issued_at: i64,
    pub root: String,
    pub document: String,
    pub revoked_at: Option<i64>,
    pub revoked_reason: String,
}

impl CertificateRow {
    pub fn from_row(r: &AnyRow) -> Result<CertificateRow> {
        Ok(CertificateRow {
            id: r.try_get("id")?,
            target_id: r.try_get("target_id")?,
            bound: u64_col(r, "certificates", "bound")?,
            issued_at: r.try_get("issued_at")?,
            root: r.try_get("root")?,
            document: r.try_get("document")?,
            revoked_at: r.try_get("revoked_at")?,
            revoked_reason: r.try_get("revoked_reason")?,
        })
    }
}
