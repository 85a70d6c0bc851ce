//! JSON bodies of the worker ↔ coordinator protocol (all under `/api/v1/`).
//!
//! | call | body → answer |
//! |---|---|
//! | `GET /api/v1/about` (not signed) | → [`About`] |
//! | `POST /api/v1/enrol` (signed with the new key; header worker id `0`) | [`EnrolRequest`] → [`EnrolResponse`] |
//! | `POST /api/v1/lease` (signed) | [`LeaseRequest`] → [`LeaseResponse`] |
//! | `POST /api/v1/lease/{lease_id}/heartbeat` (signed) | [`HeartbeatRequest`] → [`HeartbeatResponse`] |
//! | `POST /api/v1/lease/{lease_id}/report` (signed) | [`SignedReport`] → [`ReportResponse`] |
//! | `POST /api/v1/lease/{lease_id}/release` (signed) | `{}` → [`ReleaseResponse`] |
//!
//! Errors from the coordinator are [`ApiError`] bodies with a matching HTTP status.

#[allow(unused_imports)]
use crate::report::SignedReport; // named in the table above
use crate::unit::SignedUnit;
use serde::{Deserialize, Serialize};

/// Largest request body the coordinator accepts, in bytes.
pub const MAX_BODY_BYTES: usize = 256 * 1024;
/// Most solutions one report may claim.
pub const MAX_SOLUTIONS_PER_REPORT: usize = 1000;
/// Longest owner name.
pub const MAX_OWNER_LEN: usize = 64;

/// What a worker needs before it can sign its first request.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct About {
    /// The coordinator's public key, 64 hex characters (pin it; every signed request names it).
    pub coordinator_key: String,
    /// The kernel version this coordinator's build runs.
    pub kernel: String,
    /// `open` (anyone may enrol) or `invite` (an enrolment needs an invitation).
    pub enrolment: String,
}

#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct EnrolRequest {
    /// The volunteer this worker belongs to: 1–64 characters of `[A-Za-z0-9._-]`, compared
    /// without regard to case (stored in lower case).
    pub owner: String,
    /// The worker's Ed25519 public key, 64 hex characters.
    pub public_key: String,
    /// Kernel version the worker runs ([`crate::KERNEL_VERSION`]).
    pub kernel: String,
    pub threads: u32,
    /// Free-form label for monitoring; at most 64 characters.
    #[serde(default)]
    pub label: String,
    /// The invitation the organiser gave this volunteer, when enrolment is by invitation.
    #[serde(default)]
    pub invite: Option<String>,
}

#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct EnrolResponse {
    pub worker_id: i64,
    /// The coordinator's public key, 64 hex characters (the worker pins it).
    pub coordinator_key: String,
}

#[derive(Clone, Debug, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LeaseRequest {
    /// Threads the worker will use on the unit (for the deadline estimate).
    #[serde(default)]
    pub threads: u32,
}

#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct LeaseGrant {
    pub lease_id: i64,
    /// Unix seconds.
    pub deadline: i64,
    /// Send a heartbeat at least this often.
    pub heartbeat_s: u64,
    pub unit: SignedUnit,
}

#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct LeaseResponse {
    /// `None` when there is nothing to do right now.
    pub lease: Option<LeaseGrant>,
    /// When `lease` is `None`: ask again after this many seconds.
    pub retry_after_s: u64,
}

#[derive(Clone, Debug, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct HeartbeatRequest {
    /// Fraction of the unit done, 0..=1 (informational).
    #[serde(default)]
    pub progress: f64,
}

#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct HeartbeatResponse {
    pub deadline: i64,
    /// False when the lease is no longer valid (expired, unit settled or cancelled): stop work.
    pub keep_going: bool,
}

#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct ReportResponse {
    /// True when the report was stored (false for a repeat of an already stored report).
    pub accepted: bool,
    /// The unit's state after the report: `open`, `settled`, `disputed`, …
    pub unit_state: String,
}

#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct ReleaseResponse {
    pub released: bool,
}

#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct ApiError {
    /// Machine-readable short code, e.g. `bad_signature`, `not_your_lease`.
    pub error: String,
    /// What was wrong and what to do.
    pub message: String,
}
