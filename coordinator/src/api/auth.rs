//! Authentication: the admin bearer token (constant-time comparison) and signed worker
//! requests (`common::sign`: worker id, unix time, a fresh nonce and an Ed25519 signature over
//! `request_bytes(stamp, method, path, body)`, where the stamp names this coordinator's key).
//!
//! A signature check happens here, before anything is stored; the nonce is recorded by the
//! store in the same transaction as the request's effect ([`crate::store::workers::Call`]),
//! so a replayed request is refused even across coordinator replicas.

use super::{net_prefix, AppError, AppState};
use crate::store::workers::Call;
use crate::store::WorkerRow;
use axum::http::{header, HeaderMap};
use cubehunt_common::sign::{
    self, Stamp, HDR_NONCE, HDR_SIGNATURE, HDR_TIME, HDR_WORKER, MAX_CLOCK_SKEW_S,
};
use std::net::SocketAddr;
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

/// The signed-request headers, checked for form and clock skew: the stamp (naming this
/// coordinator) and the signature.
pub fn signed_headers(
    state: &AppState,
    headers: &HeaderMap,
    now: i64,
) -> Result<(Stamp, String), AppError> {
    let get = |name: &str| -> Result<&str, AppError> {
        let v = headers
            .get(name)
            .and_then(|v| v.to_str().ok())
            .ok_or_else(|| AppError::unauthorized("unsigned", format!("missing or unreadable header {name}: worker requests must be signed (see common::sign)")))?;
        if v.len() > 256 {
            return Err(AppError::unauthorized(
                "unsigned",
                format!("header {name} is longer than 256 bytes"),
            ));
        }
        Ok(v.trim())
    };
    let worker: i64 = get(HDR_WORKER)?
        .parse()
        .ok()
        .filter(|v| *v >= 0)
        .ok_or_else(|| {
            AppError::unauthorized(
                "unsigned",
                format!("{HDR_WORKER} must be a worker id (0 for an enrolment)"),
            )
        })?;
    let time: i64 = get(HDR_TIME)?.parse().map_err(|_| {
        AppError::unauthorized("unsigned", format!("{HDR_TIME} must be unix seconds"))
    })?;
    let nonce = get(HDR_NONCE)?;
    if !sign::nonce_well_formed(nonce) {
        return Err(AppError::unauthorized(
            "unsigned",
            format!("{HDR_NONCE} must be 32 lowercase hex characters, fresh for every request"),
        ));
    }
    let sig = get(HDR_SIGNATURE)?.to_string();
    if (now - time).abs() > MAX_CLOCK_SKEW_S {
        return Err(AppError::unauthorized(
            "clock_skew",
            format!("request time {time} is {} s away from the coordinator's clock {now} (at most {MAX_CLOCK_SKEW_S} s allowed); fix the worker's clock (NTP)", now - time),
        ));
    }
    let stamp = Stamp {
        coordinator: state.public_key.clone(),
        worker,
        time,
        nonce: nonce.to_string(),
    };
    Ok((stamp, sig))
}

/// How long a nonce is remembered: past the clock-skew window on both sides.
pub fn nonce_expiry(now: i64) -> i64 {
    now + 2 * MAX_CLOCK_SKEW_S + 60
}

/// The store's record of an authenticated request.
pub fn call_of(stamp: &Stamp, peer: Option<SocketAddr>, now: i64) -> Call {
    Call {
        worker_id: stamp.worker,
        nonce: stamp.nonce.clone(),
        nonce_expires: nonce_expiry(now),
        now,
        address: peer.map(|p| p.ip().to_string()).unwrap_or_default(),
        net_prefix: net_prefix(peer),
    }
}

/// Authenticate a worker request: the worker as stored and the call to hand to the store.
pub async fn worker(
    state: &AppState,
    method: &str,
    path: &str,
    headers: &HeaderMap,
    body: &[u8],
    peer: Option<SocketAddr>,
) -> Result<(WorkerRow, Call), AppError> {
    let now = crate::now();
    let (stamp, sig) = signed_headers(state, headers, now)?;
    if stamp.worker == 0 {
        return Err(AppError::unauthorized(
            "unknown_worker",
            "worker id 0 is only for an enrolment; enrol with POST /api/v1/enrol first",
        ));
    }
    let w = state.store.worker(stamp.worker).await?.ok_or_else(|| {
        AppError::unauthorized(
            "unknown_worker",
            format!(
                "no worker {} is enrolled here; enrol with POST /api/v1/enrol",
                stamp.worker
            ),
        )
    })?;
    let key = sign::public_from_hex(&w.public_key)
        .map_err(|e| AppError::internal(format!("stored key of worker {}: {e}", w.id)))?;
    sign::verify(&key, &sign::request_bytes(&stamp, method, path, body), &sig).map_err(|e| {
        AppError::unauthorized(
            "bad_signature",
            format!("request signature of worker {} (over request_bytes naming this coordinator's key {}): {e}", w.id, state.public_key),
        )
    })?;
    Ok((w, call_of(&stamp, peer, now)))
}
