//! The worker's side of the protocol (`cubehunt_common::protocol`): signed JSON requests to
//! the coordinator, and the classification of what comes back.
//!
//! Every request carries the four headers of `cubehunt_common::sign` (worker id, time, a
//! fresh nonce, signature) over `request_bytes(stamp, method, path, body)`, where the stamp
//! names the pinned coordinator key and `path` is the URL path exactly as sent (so a
//! coordinator behind a path prefix sees the same path). Answers are read up to a bound;
//! anything larger is treated as a protocol error.
//!
//! What counts as a refusal: only an answer in the coordinator's own error format (an
//! `ApiError` body) with a 4xx status other than 408, 429 and a clock-skew refusal. Anything
//! else — no answer, 5xx, 408, 429, a skewed clock, a proxy's error page — is "try again".

use cubehunt_common::protocol::{
    About, ApiError, EnrolRequest, EnrolResponse, HeartbeatRequest, HeartbeatResponse,
    LeaseRequest, LeaseResponse, ReleaseResponse, ReportResponse,
};
use cubehunt_common::report::SignedReport;
use cubehunt_common::sign;
use reqwest::blocking::Client;
use reqwest::Url;
use serde::{de::DeserializeOwned, Serialize};
use std::io::Read;
use std::sync::Arc;
use std::time::{Duration, SystemTime, UNIX_EPOCH};

/// Largest answer we read from the coordinator.
const MAX_ANSWER_BYTES: u64 = 4 * 1024 * 1024;

/// What can go wrong with one call.
#[derive(Debug)]
pub enum CallError {
    /// Network failure, timeout, 5xx or 429: try again later.
    Unreachable(String),
    /// The coordinator answered with a 4xx and an explanation: retrying the same call is useless.
    Refused {
        status: u16,
        error: String,
        message: String,
    },
    /// The answer was not what the protocol says (wrong JSON, too large).
    Protocol(String),
}

impl std::fmt::Display for CallError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            CallError::Unreachable(m) => write!(f, "coordinator unreachable: {m}"),
            CallError::Refused {
                status,
                error,
                message,
            } => write!(f, "refused ({status} {error}): {message}"),
            CallError::Protocol(m) => write!(f, "protocol error: {m}"),
        }
    }
}

impl std::error::Error for CallError {}

#[derive(Clone)]
pub struct Api {
    http: Client,
    base: Url,
    key: Arc<sign::SecretKey>,
    worker_id: i64,
    /// Hex public key of the coordinator, named in every signed request.
    coordinator_key: String,
}

impl Api {
    pub fn new(base: &str, key: sign::SecretKey) -> anyhow::Result<Api> {
        let mut base = Url::parse(base).map_err(|e| {
            anyhow::anyhow!("--coordinator {base:?} is not a URL ({e}); give it as http://HOST:PORT or https://HOST")
        })?;
        if !matches!(base.scheme(), "http" | "https") {
            anyhow::bail!("--coordinator {base} must start with http:// or https://");
        }
        if !base.path().ends_with('/') {
            let p = format!("{}/", base.path());
            base.set_path(&p);
        }
        let http = Client::builder()
            .connect_timeout(Duration::from_secs(10))
            .timeout(Duration::from_secs(60))
            .user_agent(concat!("cubehunt-worker/", env!("CARGO_PKG_VERSION")))
            .build()?;
        Ok(Api {
            http,
            base,
            key: Arc::new(key),
            worker_id: 0,
            coordinator_key: String::new(),
        })
    }

    pub fn set_coordinator_key(&mut self, hex: &str) {
        self.coordinator_key = hex.trim().to_ascii_lowercase();
    }

    pub fn set_worker_id(&mut self, id: i64) {
        self.worker_id = id;
    }

    pub fn public_key_hex(&self) -> String {
        sign::public_to_hex(&self.key.verifying_key())
    }

    pub fn key(&self) -> &sign::SecretKey {
        &self.key
    }

    pub fn worker_id(&self) -> i64 {
        self.worker_id
    }

    /// POST a signed JSON body to `rel` (relative to the base URL, e.g. `api/v1/lease`).
    pub fn post<Q: Serialize, A: DeserializeOwned>(
        &self,
        rel: &str,
        body: &Q,
    ) -> Result<A, CallError> {
        let url = self
            .base
            .join(rel)
            .map_err(|e| CallError::Protocol(format!("bad path {rel}: {e}")))?;
        let bytes = serde_json::to_vec(body).map_err(|e| CallError::Protocol(e.to_string()))?;
        let stamp = sign::Stamp::new(&self.coordinator_key, self.worker_id, unix_now());
        let sig = sign::sign(
            &self.key,
            &sign::request_bytes(&stamp, "POST", url.path(), &bytes),
        );
        let resp = self
            .http
            .post(url.clone())
            .header(reqwest::header::CONTENT_TYPE, "application/json")
            .header(sign::HDR_WORKER, self.worker_id.to_string())
            .header(sign::HDR_TIME, stamp.time.to_string())
            .header(sign::HDR_NONCE, &stamp.nonce)
            .header(sign::HDR_SIGNATURE, sig)
            .body(bytes)
            .send()
            .map_err(|e| CallError::Unreachable(describe(&e)))?;
        self.answer(url, resp)
    }

    /// GET a JSON document (not signed), e.g. `api/v1/about`.
    pub fn get<A: DeserializeOwned>(&self, rel: &str) -> Result<A, CallError> {
        let url = self
            .base
            .join(rel)
            .map_err(|e| CallError::Protocol(format!("bad path {rel}: {e}")))?;
        let resp = self
            .http
            .get(url.clone())
            .send()
            .map_err(|e| CallError::Unreachable(describe(&e)))?;
        self.answer(url, resp)
    }

    fn answer<A: DeserializeOwned>(
        &self,
        url: Url,
        resp: reqwest::blocking::Response,
    ) -> Result<A, CallError> {
        let status = resp.status();
        let mut buf = Vec::new();
        resp.take(MAX_ANSWER_BYTES + 1)
            .read_to_end(&mut buf)
            .map_err(|e| CallError::Unreachable(format!("reading the answer: {e}")))?;
        if buf.len() as u64 > MAX_ANSWER_BYTES {
            return Err(CallError::Protocol(format!(
                "answer from {} larger than {MAX_ANSWER_BYTES} bytes",
                url.path()
            )));
        }
        if status.is_success() {
            return serde_json::from_slice(&buf).map_err(|e| {
                CallError::Protocol(format!(
                    "answer from {} is not the expected JSON: {e}",
                    url.path()
                ))
            });
        }
        let (error, message) = match serde_json::from_slice::<ApiError>(&buf) {
            Ok(a) => (a.error, a.message),
            Err(_) => {
                // Not the coordinator's own answer (a proxy's or load balancer's page):
                // nothing was decided about this request.
                let text: String = String::from_utf8_lossy(&buf).chars().take(200).collect();
                return Err(CallError::Unreachable(format!(
                    "{} from something that is not the coordinator: {text}",
                    status.as_u16()
                )));
            }
        };
        if status.is_server_error()
            || status.as_u16() == 429
            || status.as_u16() == 408
            || error == "clock_skew"
        {
            return Err(CallError::Unreachable(format!(
                "{} {error}: {message}",
                status.as_u16()
            )));
        }
        Err(CallError::Refused {
            status: status.as_u16(),
            error,
            message,
        })
    }

    pub fn about(&self) -> Result<About, CallError> {
        self.get("api/v1/about")
    }

    pub fn enrol(&self, req: &EnrolRequest) -> Result<EnrolResponse, CallError> {
        self.post("api/v1/enrol", req)
    }

    pub fn lease(&self, req: &LeaseRequest) -> Result<LeaseResponse, CallError> {
        self.post("api/v1/lease", req)
    }

    pub fn heartbeat(
        &self,
        lease_id: i64,
        req: &HeartbeatRequest,
    ) -> Result<HeartbeatResponse, CallError> {
        self.post(&format!("api/v1/lease/{lease_id}/heartbeat"), req)
    }

    pub fn report(&self, r: &SignedReport) -> Result<ReportResponse, CallError> {
        self.post(&format!("api/v1/lease/{}/report", r.report.lease_id), r)
    }

    pub fn release(&self, lease_id: i64) -> Result<ReleaseResponse, CallError> {
        self.post(
            &format!("api/v1/lease/{lease_id}/release"),
            &serde_json::json!({}),
        )
    }
}

pub fn unix_now() -> i64 {
    SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .map(|d| d.as_secs() as i64)
        .unwrap_or(0)
}

fn describe(e: &reqwest::Error) -> String {
    let mut s = e.to_string();
    let mut src = std::error::Error::source(e);
    while let Some(inner) = src {
        s.push_str(": ");
        s.push_str(&inner.to_string());
        src = inner.source();
    }
    s
}
