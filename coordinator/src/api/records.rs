//! Read-only records: coverage certificates and exports. No authentication (everything here
//! is derived from what the monitoring API already shows), no state changes.
//!
//! * `GET /api/v1/campaigns/{name}/targets/{k}/certificate[?bound=B][&format=text]` — the signed
//!   certificate (JSON, or its text rendering); 409 while the target is not complete.
//! * `GET /api/v1/campaigns/{name}/export/{what}[?format=csv|json]` — `solutions`, `ledger`
//!   or `coverage`, streamed: a task reads the store a page at a time ([`export::Export`])
//!   and hands each page to the answer's body through a short channel, so a large export is
//!   never held in memory and a slow reader holds the task back rather than filling memory.

use super::{ApiResult, AppError, Shared};
use crate::certify::{self, CertError};
use crate::export::{Export, Format, What};
use axum::body::{Body, Bytes, HttpBody};
use axum::extract::{Path, Query, State};
use axum::http::header;
use axum::response::{IntoResponse, Response};
use cubehunt_common::numarg;
use hyper::body::Frame;
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
    let Some(what) = What::parse(&what) else {
        return Err(AppError::not_found(
            "not_found",
            format!(
                "no export named {:?}: use solutions, ledger or coverage",
                what.chars().take(20).collect::<String>()
            ),
        ));
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
    let (tx, rx) =
        tokio::sync::mpsc::channel::<Result<Bytes, std::io::Error>>(EXPORT_CHUNKS_IN_FLIGHT);
    let st2 = st.clone();
    tokio::spawn(async move {
        let mut e = match Export::open(&st2.store, &name, what, format).await {
            Ok(e) => e,
            Err(err) => {
                let _ = tx
                    .send(Err(std::io::Error::other(format!("{err:#}"))))
                    .await;
                return;
            }
        };
        loop {
            let item = match e.next_chunk().await {
                Ok(Some(chunk)) => Ok(Bytes::from(chunk)),
                Ok(None) => return,
                Err(err) => {
                    tracing::warn!(campaign = %name, error = %format!("{err:#}"), "export stopped");
                    Err(std::io::Error::other(format!("{err:#}")))
                }
            };
            let failed = item.is_err();
            // The reader went away: stop reading the store.
            if tx.send(item).await.is_err() || failed {
                return;
            }
        }
    });
    let ct = match format {
        Format::Csv => "text/csv; charset=utf-8",
        Format::Json => "application/json",
    };
    Ok(([(header::CONTENT_TYPE, ct)], Body::new(ChannelBody(rx))).into_response())
}

/// Pages of an export waiting in the channel between the store and the connection.
const EXPORT_CHUNKS_IN_FLIGHT: usize = 2;

/// A response body fed by a channel of chunks; an `Err` aborts the answer (the client sees
/// a broken transfer, not a well-formed partial export).
struct ChannelBody(tokio::sync::mpsc::Receiver<Result<Bytes, std::io::Error>>);

impl HttpBody for ChannelBody {
    type Data = Bytes;
    type Error = std::io::Error;

    fn poll_frame(
        mut self: std::pin::Pin<&mut Self>,
        cx: &mut std::task::Context<'_>,
    ) -> std::task::Poll<Option<Result<Frame<Bytes>, Self::Error>>> {
        self.0.poll_recv(cx).map(|o| o.map(|r| r.map(Frame::data)))
    }
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
            "summary": "Export solutions (with the parametric family of each, if any), the per-unit ledger (one line per report: unit, worker, owner, times, digest, verdict), or the coverage table (one line per target, those without solutions too: k, bound, units, units_settled, complete, certified, certified_bound, certificate_root, solutions, family_solutions). Streamed a page of rows at a time; CSV has a header line, JSON is one array.",
            "parameters": [name,
                {"name": "what", "in": "path", "required": true, "schema": {"type": "string", "enum": ["solutions", "ledger", "coverage"]}},
                {"name": "format", "in": "query", "required": false, "schema": {"type": "string", "enum": ["csv", "json"]}}],
            "responses": {
                "200": {"description": "the export", "content": {"text/csv": {"schema": {"type": "string"}}, "application/json": {"schema": {"type": "array"}}}},
                "400": err("bad format"), "404": err("no such campaign or export")}}}
    })
}
