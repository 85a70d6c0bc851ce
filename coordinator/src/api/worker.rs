//! The worker protocol (`common::protocol`): about, enrol, lease, heartbeat, report, release.
//!
//! Nothing a worker says about which unit, lease or worker it is is trusted: the worker is
//! whoever signed the request, the lease is looked up by id and must be held by that worker,
//! and every field of a report must equal what was handed out. The checks on a report are
//! those of [`crate::lifecycle`]; the work of the exact ones (solutions in big integers,
//! derived counts) runs off the async runtime.

use super::error::parse_json;
use super::{auth, check_name, ApiResult, AppError, Peer, Shared};
use crate::lifecycle::{self, Claim, Handed, Refusal};
use crate::store::{IncomingReport, ReportOutcome};
use axum::body::Bytes;
use axum::extract::rejection::BytesRejection;
use axum::extract::{OriginalUri, Path, State};
use axum::http::HeaderMap;
use axum::Json;
use cubehunt_common::protocol::*;
use cubehunt_common::report::SignedReport;
use cubehunt_common::unit::SignedUnit;
use cubehunt_common::{kernel, pieces, sign, KERNEL_VERSION};

fn lease_id(s: &str) -> ApiResult<i64> {
    s.parse::<i64>().ok().filter(|v| *v > 0).ok_or_else(|| {
        AppError::bad_request(
            "bad_lease_id",
            format!(
                "{:?} is not a lease id",
                s.chars().take(24).collect::<String>()
            ),
        )
    })
}

fn printable(what: &str, s: &str, max: usize) -> ApiResult<()> {
    if s.chars().count() > max || s.chars().any(|c| c.is_control()) {
        return Err(AppError::bad_request(
            "bad_enrolment",
            format!("{what} must be at most {max} printable characters"),
        ));
    }
    Ok(())
}

fn empty(body: &[u8]) -> bool {
    body.iter().all(|b| b.is_ascii_whitespace())
}

/// `GET /api/v1/about`: what a worker needs before its first signed request.
pub async fn about(State(st): State<Shared>) -> Json<About> {
    Json(About {
        coordinator_key: st.public_key.clone(),
        kernel: KERNEL_VERSION.to_string(),
        enrolment: st.config.enrolment.as_str().to_string(),
    })
}

pub async fn enrol(
    State(st): State<Shared>,
    Peer(peer): Peer,
    OriginalUri(uri): OriginalUri,
    headers: HeaderMap,
    body: Result<Bytes, BytesRejection>,
) -> ApiResult<Json<EnrolResponse>> {
    let body = body?;
    let now = crate::now();
    let (stamp, sig) = auth::signed_headers(&st, &headers, now)?;
    if stamp.worker != 0 {
        return Err(AppError::bad_request(
            "bad_enrolment",
            format!(
                "an enrolment is signed with worker id 0 (got {})",
                stamp.worker
            ),
        ));
    }
    let req: EnrolRequest = parse_json(&body, "enrolment")?;
    check_name("owner", &req.owner).map_err(|m| AppError::bad_request("bad_owner", m))?;
    printable("kernel", &req.kernel, 64)?;
    printable("label", &req.label, 64)?;
    if let Some(i) = &req.invite {
        printable("invite", i, 128)?;
    }
    if req.threads > 4096 {
        return Err(AppError::bad_request(
            "bad_enrolment",
            "threads must be at most 4096",
        ));
    }
    let key = sign::public_from_hex(&req.public_key)
        .map_err(|e| AppError::bad_request("bad_key", format!("public_key: {e}")))?;
    sign::verify(&key, &sign::request_bytes(&stamp, "POST", uri.path(), &body), &sig).map_err(|e| {
        AppError::unauthorized(
            "bad_signature",
            format!("an enrolment must be signed with the key it enrols, over request_bytes naming this coordinator's key: {e}"),
        )
    })?;
    let call = auth::call_of(&stamp, peer, now);
    let out = st
        .store
        .enrol(
            &crate::store::NewWorker {
                owner: req.owner.to_ascii_lowercase(),
                public_key: sign::public_to_hex(&key),
                kernel: req.kernel.clone(),
                threads: req.threads.clamp(1, 4096),
                label: req.label.clone(),
                address: call.address.clone(),
                net_prefix: call.net_prefix.clone(),
                invite_sha256: req
                    .invite
                    .as_deref()
                    .map(|t| sign::sha256_hex(t.trim().as_bytes())),
                invite_only: st.config.enrolment == crate::config::Enrolment::Invite,
            },
            &call.nonce,
            call.nonce_expires,
            now,
        )
        .await?;
    tracing::info!(worker = out.worker.id, owner = %out.worker.owner, kernel = %out.worker.kernel, created = out.created, "enrolled");
    Ok(Json(EnrolResponse {
        worker_id: out.worker.id,
        coordinator_key: st.public_key.clone(),
    }))
}

pub async fn lease(
    State(st): State<Shared>,
    Peer(peer): Peer,
    OriginalUri(uri): OriginalUri,
    headers: HeaderMap,
    body: Result<Bytes, BytesRejection>,
) -> ApiResult<Json<LeaseResponse>> {
    let body = body?;
    let (_w, call) = auth::worker(&st, "POST", uri.path(), &headers, &body, peer).await?;
    let _req: LeaseRequest = if empty(&body) {
        LeaseRequest::default()
    } else {
        parse_json(&body, "lease request")?
    };
    let cfg = &st.config;
    let Some(g) = st.store.grant_lease(&call, &st.policy).await? else {
        return Ok(Json(LeaseResponse {
            lease: None,
            retry_after_s: cfg.retry_after_s,
        }));
    };
    tracing::info!(
        worker = call.worker_id,
        lease = g.lease.id,
        unit = g.unit.id(),
        deadline = g.lease.deadline,
        "lease granted"
    );
    Ok(Json(LeaseResponse {
        lease: Some(LeaseGrant {
            lease_id: g.lease.id,
            deadline: g.lease.deadline,
            heartbeat_s: cfg.heartbeat_s,
            unit: SignedUnit {
                unit: g.unit.spec.clone(),
                signature: g.unit.signature.clone(),
            },
        }),
        retry_after_s: cfg.retry_after_s,
    }))
}

pub async fn heartbeat(
    State(st): State<Shared>,
    Peer(peer): Peer,
    Path(id): Path<String>,
    OriginalUri(uri): OriginalUri,
    headers: HeaderMap,
    body: Result<Bytes, BytesRejection>,
) -> ApiResult<Json<HeartbeatResponse>> {
    let body = body?;
    let (_w, call) = auth::worker(&st, "POST", uri.path(), &headers, &body, peer).await?;
    let id = lease_id(&id)?;
    let req: HeartbeatRequest = if empty(&body) {
        HeartbeatRequest::default()
    } else {
        parse_json(&body, "heartbeat")?
    };
    if !(0.0..=1.0).contains(&req.progress) {
        return Err(AppError::bad_request(
            "bad_progress",
            format!("progress {} is not between 0 and 1", req.progress),
        ));
    }
    let out = st
        .store
        .heartbeat(&call, id, req.progress, &st.policy)
        .await?;
    Ok(Json(HeartbeatResponse {
        deadline: out.deadline,
        keep_going: out.keep_going,
    }))
}

pub async fn release(
    State(st): State<Shared>,
    Peer(peer): Peer,
    Path(id): Path<String>,
    OriginalUri(uri): OriginalUri,
    headers: HeaderMap,
    body: Result<Bytes, BytesRejection>,
) -> ApiResult<Json<ReleaseResponse>> {
    let body = body?;
    let (w, call) = auth::worker(&st, "POST", uri.path(), &headers, &body, peer).await?;
    let id = lease_id(&id)?;
    if !empty(&body) {
        let _: serde_json::Map<String, serde_json::Value> = parse_json(&body, "release")?;
    }
    let released = st.store.release(&call, id, &st.policy).await?;
    tracing::info!(worker = w.id, lease = id, released, "lease given back");
    Ok(Json(ReleaseResponse { released }))
}

pub async fn report(
    State(st): State<Shared>,
    Peer(peer): Peer,
    Path(id): Path<String>,
    OriginalUri(uri): OriginalUri,
    headers: HeaderMap,
    body: Result<Bytes, BytesRejection>,
) -> ApiResult<Json<ReportResponse>> {
    let body = body?;
    let (w, call) = auth::worker(&st, "POST", uri.path(), &headers, &body, peer).await?;
    let id = lease_id(&id)?;
    if w.quarantined {
        return Err(AppError::forbidden(
            "quarantined",
            format!(
                "worker {} is quarantined; its reports are not accepted",
                w.id
            ),
        ));
    }
    let sr: SignedReport = parse_json(&body, "report")?;
    let r = &sr.report;
    let lease = st.store.lease(id).await?.ok_or_else(|| {
        AppError::not_found(
            "no_lease",
            format!("no lease {id}; ask for a new one with POST /api/v1/lease"),
        )
    })?;
    if lease.worker_id != w.id {
        return Err(AppError::forbidden(
            "not_your_lease",
            format!("lease {id} is not held by worker {}", w.id),
        ));
    }
    let unit = st.store.unit(lease.unit_id).await?.ok_or_else(|| {
        AppError::internal(format!("unit {} of lease {id} is missing", lease.unit_id))
    })?;
    if r.solutions.len() > MAX_SOLUTIONS_PER_REPORT {
        return Err(AppError::bad_request(
            "too_many_solutions",
            format!("a report may claim at most {MAX_SOLUTIONS_PER_REPORT} solutions"),
        ));
    }
    let key = sign::public_from_hex(&w.public_key)
        .map_err(|e| AppError::internal(format!("stored key of worker {}: {e}", w.id)))?;
    sign::verify(&key, &r.canonical_bytes(), &sr.signature).map_err(|e| {
        AppError::unauthorized(
            "bad_report_signature",
            format!(
                "report signature (over Report::canonical_bytes, format {}): {e}",
                cubehunt_common::report::FORMAT
            ),
        )
    })?;
    let spec = unit.spec.clone();
    let report = sr.report.clone();
    // The checks that cost computation (piece split, exact solutions, derived counts) run on
    // a blocking thread.
    let checked = tokio::task::spawn_blocking(move || -> Result<Option<Refusal>, Refusal> {
        let ps = pieces::of_unit(&spec);
        let mut sols = report.solutions.clone();
        sols.sort();
        sols.dedup();
        let claim = Claim {
            lease_id: report.lease_id,
            unit_id: report.unit_id,
            worker_id: report.worker_id,
            kernel: &report.kernel,
            k: report.k,
            rect: &report.rect,
            digest: &report.digest,
            pieces: &report.pieces,
            solutions: &sols,
        };
        let handed = Handed {
            lease_id: id,
            worker_id: lease.worker_id,
            unit: &spec,
            pieces: &ps,
        };
        let false_claim = |r: Refusal| {
            if r.counts_against() {
                Ok(Some(r))
            } else {
                Err(r)
            }
        };
        if let Err(r) = lifecycle::check_shape(&handed, &claim) {
            return false_claim(r);
        }
        if let Err(r) = lifecycle::check_solutions(
            spec.k,
            &spec.rect,
            &sols,
            |s| s.verify(spec.k),
            |s, r| s.in_rect(r),
        ) {
            return false_claim(r);
        }
        if let Err(r) = lifecycle::check_work(
            &report.digest,
            || kernel::shows_work(spec.k, &spec.rect),
            spec.unit_id,
        ) {
            return false_claim(r);
        }
        let derived = kernel::counts(spec.k, &spec.rect);
        if let Err(r) =
            lifecycle::check_counts(report.rect.region, &report.digest, derived.as_ref())
        {
            return false_claim(r);
        }
        Ok(None)
    })
    .await?;
    let refusal = match checked {
        Err(mismatch) => return Err(AppError::bad_request(mismatch.code(), mismatch.to_string())),
        Ok(r) => r,
    };
    let mut sols = r.solutions.clone();
    sols.sort();
    sols.dedup();
    let inc = IncomingReport {
        call,
        lease_id: id,
        digest: r.digest,
        pieces_root: r.pieces_root(),
        pieces: r.pieces.clone(),
        solutions: sols,
        signature: sr.signature.clone(),
        elapsed_s: r.elapsed_s,
        refusal,
    };
    match st.store.record_report(&inc, &st.policy).await? {
        ReportOutcome::Stored {
            unit_state,
            spot_checks,
        } => {
            tracing::info!(worker = w.id, lease = id, unit = unit.id(), digest = %inc.digest, solutions = inc.solutions.len(), spot_checks, %unit_state, "report stored");
            st.checker.notify_one();
            Ok(Json(ReportResponse {
                accepted: true,
                unit_state: unit_state.to_string(),
            }))
        }
        ReportOutcome::Repeat { unit_state } => Ok(Json(ReportResponse {
            accepted: false,
            unit_state: unit_state.to_string(),
        })),
        ReportOutcome::Refused { code, reason } => {
            tracing::warn!(worker = w.id, lease = id, unit = unit.id(), %reason, "report refused");
            Err(AppError::unprocessable(
                code,
                format!(
                    "{reason}; the report was refused and counted as an error against worker {}",
                    w.id
                ),
            ))
        }
    }
}
