//! Read-only records: coverage certificates and exports. No authentication (everything here
//! is derived from what the monitoring API already shows), no state changes.
//!
//! * `GET /api/v1/campaigns/{name}/targets/{k}/certificate[?bound=B][&format=text]` — the signed
//!   certificate (JSON, or its text rendering); 409 while the target is not complete.
//! * `GET /api/v1/campaigns/{name}/export/{what}[?format=csv|json]` — `solutions` or `ledger`.

use super::{ApiResult, AppError, Shared};
use crate::certify::{self, CertError};
use crate::export::{self, Format, What};
use axum::extract::{Path, Query, State};
use axum::http::header;
use axum::response::{IntoResponse, Response};
use cubehunt_common::numarg;
use serde::Deserialize;
use serde_json::{json, Value};

#[derive(Debug, Default, Deserialize)]
pub struct CertQuery {
    pub bound: Option<String>,
    pub format: Option<String>,
}

#[derive(Debug, Default, Deserialize)]
pub struct ExportQuery {
    pub format: Option<String>,
}

pub async fn certificate(
    State(st): State<Shared>,
    Path((name, k)): Path<(String, String)>,
    Query(q): Query<CertQuery>,
) -> ApiResult<Response> {
    let k = numarg::parse_i64(&k)
        .map_err(|e| AppError::bad_request("bad_k", format!("target k: {e}")))?;
    let bound = q
        .bound
        .as_deref()
        .map(numarg::parse_u64)
        .transpose()
        .map_err(|e| AppError::bad_request("bad_bound", format!("bound: {e}")))?;
    let text = match q.format.as_deref() {
        None | Some("json") => false,
        Some("text") => true,
        Some(other) => {
            return Err(AppError::bad_request(
                "bad_format",
                format!(
                    "format {:?} is not json or text",
                    other.chars().take(20).collect::<String>()
                ),
            ))
        }
    };
    let doc = certify::issue(&st.store, &st.key, &name, k, bound, crate::now())
        .await
        .map_err(|e| match e {
            CertError::NotFound(m) => AppError::not_found("not_found", m),
            CertError::BadRequest(m) => AppError::bad_request("bad_bound", m),
            CertError::Incomplete(m) => AppError::conflict("target_incomplete", m),
            CertError::Invalid(_) => AppError::internal(format!(
                "{e}; run `cubehunt-coordinator audit` on the data directory"
            )),
            CertError::Store(s) => s.into(),
        })?;
    if text {
        Ok((
            [(header::CONTENT_TYPE, "text/plain; charset=utf-8")],
            doc.render_text(),
        )
            .into_response())
    } else {
        let body =
            serde_json::to_vec_pretty(&doc).map_err(|e| AppError::internal(e.to_string()))?;
        Ok(([(header::CONTENT_TYPE, "application/json")], body).into_response())
    }
}

pub async fn export(
    State(st): State<Shared>,
    Path((name, what)): Path<(String, String)>,
    Query(q): Query<ExportQuery>,
) -> ApiResult<Response> {
    let what = match what.as_str() {
        "solutions" => What::Solutions,
        "ledger" => What::Ledger,
        other => {
            return Err(AppError::not_found(
                "not_found",
                format!(
                    "no export named {:?}: use solutions or ledger",
                    other.chars().take(20).collect::<String>()
                ),
            ))
        }
    };
    let format = match q.format.as_deref() {
        None | Some("csv") => Format::Csv,
        Some("json") => Format::Json,
        Some(other) => {
            return Err(AppError::bad_request(
                "bad_format",
                format!(
                    "format {:?} is not csv or json",
                    other.chars().take(20).collect::<String>()
                ),
            ))
        }
    };
    if st.store.campaign(&name).await?.is_none() {
        return Err(AppError::not_found(
            "not_found",
            format!("no campaign named {name:?}"),
        ));
    }
    let mut buf: Vec<u8> = Vec::new();
    export::export(&st.store, &name, what, format, &mut buf)
        .await
        .map_err(|e| AppError::internal(format!("{e:#}")))?;
    let ct = match format {
        Format::Csv => "text/csv; charset=utf-8",
        Format::Json => "application/json",
    };
    Ok(([(header::CONTENT_TYPE, ct)], buf).into_response())
}

/// The OpenAPI paths of this module, merged into the document by [`super::openapi::spec`].
pub fn openapi_paths() -> Value {
    let name = json!({"name": "name", "in": "path", "required": true, "schema": {"type": "string", "pattern": "^[A-Za-z0-9._-]{1,64}$"}});
    let err = |d: &str| json!({"description": d, "content": {"application/json": {"schema": {"$ref": "#/components/schemas/ApiError"}}}});
    json!({
        "/api/v1/campaigns/{name}/targets/{k}/certificate": {"get": {
            "summary": "Signed coverage certificate of one target (format cubehunt-certificate/1; check it offline with `cubehunt-coordinator verify-certificate`)",
            "parameters": [name,
                {"name": "k", "in": "path", "required": true, "schema": {"type": "integer"}},
                {"name": "bound", "in": "query", "required": false, "schema": {"type": "string"}, "description": "certify up to this bound (default: the target's bound)"},
                {"name": "format", "in": "query", "required": false, "schema": {"type": "string", "enum": ["json", "text"]}}],
            "responses": {
                "200": {"description": "the certificate", "content": {"application/json": {"schema": {"type": "object"}}, "text/plain": {"schema": {"type": "string"}}}},
                "400": err("bad k, bound or format"), "404": err("no such campaign or target"),
                "409": err("the target is not complete: some needed unit is not settled")}}},
        "/api/v1/campaigns/{name}/export/{what}": {"get": {
            "summary": "Export solutions, or the per-unit ledger (one line per report: unit, worker, owner, times, digest, verdict)",
            "parameters": [name,
                {"name": "what", "in": "path", "required": true, "schema": {"type": "string", "enum": ["solutions", "ledger"]}},
                {"name": "format", "in": "query", "required": false, "schema": {"type": "string", "enum": ["csv", "json"]}}],
            "responses": {
                "200": {"description": "the export", "content": {"text/csv": {"schema": {"type": "string"}}, "application/json": {"schema": {"type": "array"}}}},
                "400": err("bad format"), "404": err("no such campaign or export")}}}
    })
}
