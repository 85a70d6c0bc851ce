//! Authentication: the admin bearer token (constant-time comparison) and signed worker
//! requests (`common::sign`: worker id, unix time and an Ed25519 signature over
//! `request_bytes(method, path, time, body)`).

use super::{AppError, AppState};
use crate::store::WorkerRow;
use axum::http::{header, HeaderMap};
use cubehunt_common::sign::{self, HDR_SIGNATURE, HDR_TIME, HDR_WORKER, MAX_CLOCK_SKEW_S};
use subtle::ConstantTimeEq;

/// Refuse unless `Authorization: Bearer <admin token>`.
pub fn require_admin(state: &AppState, headers: &HeaderMap) -> Result<(), AppError> {
    let Some(v) = headers.get(header::AUTHORIZATION) else {
        return Err(AppError::unauthorized("admin_token_missing", "this endpoint needs `Authorization: Bearer <admin token>` (the token is in <data-dir>/admin.token)"));
    };
    let given = v.as_bytes().strip_prefix(b"Bearer ").unwrap_or(b"");
    let ok: bool = given.ct_eq(state.admin_token.as_bytes()).into();
    if !ok || state.admin_token.is_empty() {
        return Err(AppError::unauthorized("admin_token_wrong", "the admin token is wrong; use the one printed by `init` (kept in <data-dir>/admin.token)"));
    }
    Ok(())
}

/// The signed-request headers: (worker id, time, signature).
pub fn signed_headers(headers: &HeaderMap) -> Result<(i64, i64, String), AppError> {
    let get = |name: &str| -> Result<&str, AppError> {
        headers
            .get(name)
            .and_then(|v| v.to_str().ok())
            .ok_or_else(|| AppError::unauthorized("unsigned", format!("missing or unreadable header {name}: worker requests must be signed (see common::sign)")))
    };
    let id: i64 = get(HDR_WORKER)?.trim().parse().map_err(|_| {
        AppError::unauthorized("unsigned", format!("{HDR_WORKER} must be a worker id"))
    })?;
    let time: i64 = get(HDR_TIME)?.trim().parse().map_err(|_| {
        AppError::unauthorized("unsigned", format!("{HDR_TIME} must be unix seconds"))
    })?;
    let sig = get(HDR_SIGNATURE)?;
    if sig.len() > 256 {
        return Err(AppError::unauthorized(
            "bad_signature",
            "signature header too long",
        ));
    }
    Ok((id, time, sig.to_string()))
}

pub fn check_skew(time: i64, now: i64) -> Result<(), AppError> {
    if (now - time).abs() > MAX_CLOCK_SKEW_S {
        return Err(AppError::unauthorized(
            "clock_skew",
            format!("request time {time} is {} s away from the coordinator's clock {now} (at most {MAX_CLOCK_SKEW_S} s allowed); fix the worker's clock (NTP)", now - time),
        ));
    }
    Ok(())
}

/// Authenticate a worker request; the worker as stored.
pub async fn worker(
    state: &AppState,
    method: &str,
    path: &str,
    headers: &HeaderMap,
    body: &[u8],
) -> Result<WorkerRow, AppError> {
    let (id, time, sig) = signed_headers(headers)?;
    check_skew(time, crate::now())?;
    let w = state.store.worker(id).await?.ok_or_else(|| {
        AppError::unauthorized(
            "unknown_worker",
            format!("no worker {id} is enrolled here; enrol with POST /api/v1/enrol"),
        )
    })?;
    let key = sign::public_from_hex(&w.public_key)
        .map_err(|e| AppError::internal(format!("stored key of worker {id}: {e}")))?;
    sign::verify(&key, &sign::request_bytes(method, path, time, body), &sig).map_err(|e| {
        AppError::unauthorized(
            "bad_signature",
            format!("request signature of worker {id}: {e}"),
        )
    })?;
    Ok(w)
}
