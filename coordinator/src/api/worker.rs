//! The worker protocol (`common::protocol`): enrol, lease, heartbeat, report, release.
//!
//! Nothing a worker says about which unit, lease or worker it is is trusted: the lease is
//! looked up by id, its holder must be the authenticated worker, and every field of a report
//! must equal what was handed out.

use super::error::parse_json;
use super::{auth, check_name, net_prefix, ApiResult, AppError, Peer, Shared};
use crate::store::{IncomingReport, ReportOutcome};
use axum::body::Bytes;
use axum::extract::rejection::BytesRejection;
use axum::extract::{OriginalUri, Path, State};
use axum::http::HeaderMap;
use axum::Json;
use cubehunt_common::protocol::*;
use cubehunt_common::report::SignedReport;
use cubehunt_common::sign;
use cubehunt_common::unit::SignedUnit;
use cubehunt_common::{Rect, Region, Solution};

fn lease_id(s: &str) -> ApiResult<i64> {
    s.parse::<i64>()
        .ok()
        .filter(|v| *v > 0)
        .ok_or_else(|| AppError::bad_request("bad_lease_id", format!("{s:?} is not a lease id")))
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

pub async fn enrol(
    State(st): State<Shared>,
    Peer(peer): Peer,
    OriginalUri(uri): OriginalUri,
    headers: HeaderMap,
    body: Result<Bytes, BytesRejection>,
) -> ApiResult<Json<EnrolResponse>> {
    let body = body?;
    let (id, time, sig) = auth::signed_headers(&headers)?;
    if id != 0 {
        return Err(AppError::bad_request(
            "bad_enrolment",
            format!("an enrolment is signed with worker id 0 (got {id})"),
        ));
    }
    auth::check_skew(time, crate::now())?;
    let req: EnrolRequest = parse_json(&body, "enrolment")?;
    check_name("owner", &req.owner).map_err(|m| AppError::bad_request("bad_owner", m))?;
    printable("kernel", &req.kernel, 64)?;
    printable("label", &req.label, 64)?;
    if req.threads > 4096 {
        return Err(AppError::bad_request(
            "bad_enrolment",
            "threads must be at most 4096",
        ));
    }
    let key = sign::public_from_hex(&req.public_key)
        .map_err(|e| AppError::bad_request("bad_key", format!("public_key: {e}")))?;
    sign::verify(
        &key,
        &sign::request_bytes("POST", uri.path(), time, &body),
        &sig,
    )
    .map_err(|e| {
        AppError::unauthorized(
            "bad_signature",
            format!("an enrolment must be signed with the key it enrols: {e}"),
        )
    })?;
    let out = st
        .store
        .enrol(
            &crate::store::NewWorker {
                owner: req.owner.clone(),
                public_key: sign::public_to_hex(&key),
                kernel: req.kernel.clone(),
                threads: req.threads.max(1),
                label: req.label.clone(),
                address: peer.map(|p| p.ip().to_string()).unwrap_or_default(),
            },
            crate::now(),
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
    let w = auth::worker(&st, "POST", uri.path(), &headers, &body).await?;
    let _req: LeaseRequest = if body.iter().all(|b| b.is_ascii_whitespace()) {
        LeaseRequest::default()
    } else {
        parse_json(&body, "lease request")?
    };
    let now = crate::now();
    let cfg = st.config.clone();
    let rate = w.observed_rate();
    let granted = st
        .store
        .grant_lease(&w, &net_prefix(peer), cfg.distinct_prefix, now, &|u| {
            cfg.deadline(now, u.cost_us, rate)
        })
        .await?;
    let Some(g) = granted else {
        return Ok(Json(LeaseResponse {
            lease: None,
            retry_after_s: cfg.retry_after_s,
        }));
    };
    tracing::info!(
        worker = w.id,
        lease = g.lease.id,
        unit = g.unit.id,
        deadline = g.lease.deadline,
        "lease granted"
    );
    Ok(Json(LeaseResponse {
        lease: Some(LeaseGrant {
            lease_id: g.lease.id,
            deadline: g.lease.deadline,
            heartbeat_s: cfg.heartbeat_s,
            unit: SignedUnit {
                unit: g.unit.spec(),
                signature: g.unit.signature.clone(),
            },
        }),
        retry_after_s: cfg.retry_after_s,
    }))
}

pub async fn heartbeat(
    State(st): State<Shared>,
    Path(id): Path<String>,
    OriginalUri(uri): OriginalUri,
    headers: HeaderMap,
    body: Result<Bytes, BytesRejection>,
) -> ApiResult<Json<HeartbeatResponse>> {
    let body = body?;
    let w = auth::worker(&st, "POST", uri.path(), &headers, &body).await?;
    let id = lease_id(&id)?;
    let req: HeartbeatRequest = if body.iter().all(|b| b.is_ascii_whitespace()) {
        HeartbeatRequest::default()
    } else {
        parse_json(&body, "heartbeat")?
    };
    if w.quarantined {
        return Ok(Json(HeartbeatResponse {
            deadline: 0,
            keep_going: false,
        }));
    }
    let out = st
        .store
        .heartbeat(
            w.id,
            id,
            req.progress,
            crate::now(),
            st.config.heartbeat_grace_s(),
        )
        .await?;
    Ok(Json(HeartbeatResponse {
        deadline: out.deadline,
        keep_going: out.keep_going,
    }))
}

pub async fn release(
    State(st): State<Shared>,
    Path(id): Path<String>,
    OriginalUri(uri): OriginalUri,
    headers: HeaderMap,
    body: Result<Bytes, BytesRejection>,
) -> ApiResult<Json<ReleaseResponse>> {
    let body = body?;
    let w = auth::worker(&st, "POST", uri.path(), &headers, &body).await?;
    let id = lease_id(&id)?;
    let released = st.store.release(w.id, id, crate::now()).await?;
    tracing::info!(worker = w.id, lease = id, released, "lease given back");
    Ok(Json(ReleaseResponse { released }))
}

/// Whether a verified solution lies in a rectangle: its smallest coordinate `z` (any of them
/// on a tie) has `|z|` in `(z_lo, z_hi]` (`z = 0` too for the small region's first piece),
/// and in the main region `d = |x + y|` of the other two is in `[d_lo, d_hi)`; in the equal
/// region the other smallest coordinate equals `z`.
pub fn solution_in_rect(s: &Solution, r: &Rect) -> bool {
    let v = s.0;
    let m = s.min_abs();
    (0..3).filter(|&i| v[i].unsigned_abs() == m).any(|i| {
        let z = v[i];
        let az = z.unsigned_abs();
        let others: Vec<i128> = (0..3).filter(|&j| j != i).map(|j| v[j]).collect();
        let in_z = az > r.z_lo as u128 && az <= r.z_hi as u128;
        match r.region {
            Region::Small => in_z || (z == 0 && r.z_lo == 0),
            Region::Equal => in_z && others.contains(&z),
            Region::Main => {
                let d = (others[0] + others[1]).unsigned_abs();
                in_z && d >= r.d_lo as u128 && d < r.d_hi as u128
            }
        }
    })
}

pub async fn report(
    State(st): State<Shared>,
    Path(id): Path<String>,
    OriginalUri(uri): OriginalUri,
    headers: HeaderMap,
    body: Result<Bytes, BytesRejection>,
) -> ApiResult<Json<ReportResponse>> {
    let body = body?;
    let w = auth::worker(&st, "POST", uri.path(), &headers, &body).await?;
    let id = lease_id(&id)?;
    if w.quarantined {
        return Err(crate::store::StoreError::Forbidden(
            "quarantined",
            format!(
                "worker {} is quarantined; its reports are not accepted",
                w.id
            ),
        )
        .into());
    }
    let sr: SignedReport = parse_json(&body, "report")?;
    let r = &sr.report;
    let ctx = st
        .store
        .lease_context(id)
        .await?
        .ok_or_else(|| AppError::not_found("no_lease", format!("no lease {id}")))?;
    if ctx.lease.worker_id != w.id {
        return Err(AppError::forbidden(
            "not_your_lease",
            format!("lease {id} is not held by worker {}", w.id),
        ));
    }
    let u = &ctx.unit;
    let mismatch = |field: &str, got: String, want: String| {
        AppError::bad_request("report_mismatch", format!("report field {field} is {got} but lease {id} is for {want}; report the unit you were given"))
    };
    if r.lease_id != id {
        return Err(mismatch("lease_id", r.lease_id.to_string(), id.to_string()));
    }
    if r.worker_id != w.id {
        return Err(mismatch(
            "worker_id",
            r.worker_id.to_string(),
            w.id.to_string(),
        ));
    }
    if r.unit_id != u.id {
        return Err(mismatch("unit_id", r.unit_id.to_string(), u.id.to_string()));
    }
    if r.kernel != u.kernel {
        return Err(mismatch(
            "kernel",
            format!("{:?}", r.kernel),
            format!("{:?}", u.kernel),
        ));
    }
    if r.k != u.k {
        return Err(mismatch("k", r.k.to_string(), u.k.to_string()));
    }
    if r.rect != u.rect {
        return Err(mismatch("rect", r.rect.to_string(), u.rect.to_string()));
    }
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
            format!("report signature (over Report::canonical_bytes): {e}"),
        )
    })?;

    let mut sols = r.solutions.clone();
    sols.sort();
    sols.dedup();
    let k = u.k;
    let rect = u.rect;
    let check = sols.clone();
    let refused = tokio::task::spawn_blocking(move || {
        for s in &check {
            if !s.verify(k) {
                return Some(format!(
                    "claimed solution {s} is false: its cubes do not sum to {k}"
                ));
            }
            if !solution_in_rect(s, &rect) {
                return Some(format!(
                    "claimed solution {s} lies outside the unit's rectangle {rect}"
                ));
            }
        }
        None
    })
    .await?;
    let inc = IncomingReport {
        lease_id: id,
        worker_id: w.id,
        digest: r.digest.to_string(),
        candidates: r.digest.candidates,
        solutions: sols,
        signature: sr.signature.clone(),
        body: String::from_utf8_lossy(&body).into_owned(),
        elapsed_s: r.elapsed_s,
        refused,
    };
    let out = st
        .store
        .record_report(&inc, st.config.quarantine_after.max(1) as i64, crate::now())
        .await?;
    match out {
        ReportOutcome::Stored { unit_state } => {
            tracing::info!(worker = w.id, lease = id, unit = u.id, digest = %inc.digest, solutions = inc.solutions.len(), %unit_state, "report stored");
            Ok(Json(ReportResponse {
                accepted: true,
                unit_state,
            }))
        }
        ReportOutcome::Repeat { unit_state } => Ok(Json(ReportResponse {
            accepted: false,
            unit_state,
        })),
        ReportOutcome::Refused {
            reason,
            quarantined,
        } => {
            tracing::warn!(worker = w.id, lease = id, unit = u.id, %reason, quarantined, "report refused");
            Err(AppError::unprocessable(
                "false_solution",
                format!(
                    "{reason}; the report was refused and counted as an error{}",
                    if quarantined {
                        " (this worker is now quarantined)"
                    } else {
                        ""
                    }
                ),
            ))
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    #[test]
    fn solutions_are_placed_in_their_rectangle() {
        // 33 = 8866128975287528³ + (−8778405442862239)³ + (−2736111468807040)³ (Booker 2019,
        // "Cracking the problem with 33", Research in Number Theory 5, art. 26). Smallest is
        // z = −2736111468807040; d = |x + y| = 87723532425289.
        let s = Solution::new(8866128975287528, -8778405442862239, -2736111468807040);
        let z = 2736111468807040u64;
        let d = 87723532425289u64;
        let main = |d_lo, d_hi, z_lo, z_hi| Rect {
            region: Region::Main,
            d_lo,
            d_hi,
            z_lo,
            z_hi,
        };
        assert!(solution_in_rect(&s, &main(d, d + 1, z - 1, z)));
        assert!(!solution_in_rect(&s, &main(d + 1, d + 2, z - 1, z)));
        assert!(!solution_in_rect(&s, &main(d, d + 1, z, z + 5)));
        assert!(!solution_in_rect(
            &s,
            &Rect {
                region: Region::Small,
                d_lo: 0,
                d_hi: 0,
                z_lo: 0,
                z_hi: 100
            }
        ));
        // 3 = 1³ + 1³ + 1³ and 3 = 4³ + 4³ + (−5)³ (common practice, no source): the equal region.
        let e = Solution::new(4, 4, -5);
        let eq = |z_lo, z_hi| Rect {
            region: Region::Equal,
            d_lo: 0,
            d_hi: 0,
            z_lo,
            z_hi,
        };
        assert!(solution_in_rect(&e, &eq(1, 4)));
        assert!(!solution_in_rect(&e, &eq(4, 10)));
        // 2 = 1³ + 1³ + 0³: z = 0 belongs to the small region's first piece only.
        let s0 = Solution::new(1, 1, 0);
        assert!(solution_in_rect(
            &s0,
            &Rect {
                region: Region::Small,
                d_lo: 0,
                d_hi: 0,
                z_lo: 0,
                z_hi: 1
            }
        ));
        assert!(!solution_in_rect(
            &s0,
            &Rect {
                region: Region::Small,
                d_lo: 0,
                d_hi: 0,
                z_lo: 1,
                z_hi: 2
            }
        ));
    }
}
