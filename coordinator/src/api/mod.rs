//! The HTTP service: routes, shared state and request logging.
//!
//! * [`admin`] — campaign administration, bearer admin token.
//! * [`worker`] — the worker protocol (`common::protocol`), signed requests.
//! * [`monitor`] — read-only JSON, `/metrics`, `/healthz`, the status page.
//! * [`records`] — coverage certificates and exports (read-only).
//! * [`openapi`] — the OpenAPI document of all of the above.
//! * [`auth`] — admin token and worker signature checks.
//! * [`limits`] — timeouts, rate and concurrency limits against hostile clients.
//! * [`error`] — [`AppError`]: every failure's HTTP status and `ApiError` body.

pub mod admin;
pub mod auth;
pub mod error;
pub mod limits;
pub mod monitor;
pub mod openapi;
pub mod records;
pub mod worker;

#[cfg(test)]
mod http_tests;

pub use error::{ApiResult, AppError};

use crate::config::ServiceConfig;
use crate::store::{LeasePolicy, Store};
use axum::extract::{ConnectInfo, DefaultBodyLimit, FromRequestParts, Request};
use axum::http::request::Parts;
use axum::middleware::{self, Next};
use axum::response::Response;
use axum::routing::{get, post};
use axum::Router;
use cubehunt_common::protocol::MAX_BODY_BYTES;
use cubehunt_common::sign::SecretKey;
use std::net::{IpAddr, SocketAddr};
use std::sync::Arc;
use tokio::sync::Notify;

/// Everything a request handler may use.
pub struct AppState {
    pub store: Store,
    pub key: SecretKey,
    pub public_key: String,
    pub admin_token: String,
    pub config: ServiceConfig,
    /// The hand-out and lifecycle settings derived from `config`.
    pub policy: LeasePolicy,
    /// Wakes the checker (the coordinator's own computations) when work for it arrives.
    pub checker: Arc<Notify>,
    pub started_at: i64,
    /// The density model's figures per target, computed once per `(k, bound)`.
    pub model: Arc<crate::model::ModelCache>,
}

pub type Shared = Arc<AppState>;

impl AppState {
    pub fn new(store: Store, key: SecretKey, admin_token: String, config: ServiceConfig) -> Shared {
        let public_key = cubehunt_common::sign::public_to_hex(&key.verifying_key());
        Arc::new(AppState {
            store,
            key,
            public_key,
            admin_token,
            policy: config.policy(),
            config,
            checker: Arc::new(Notify::new()),
            started_at: crate::now(),
            model: Arc::new(crate::model::ModelCache::default()),
        })
    }
}

/// All routes with request logging. Bodies are limited to [`MAX_BODY_BYTES`].
pub fn router(state: Shared) -> Router {
    routes(state).layer(middleware::from_fn(log_request))
}

/// The service as `serve` runs it: [`router`] behind the limits against hostile clients
/// (see [`ServiceConfig`]): a body read timeout, a per-address rate limit and a global limit
/// of requests in flight. Each refusal is an `ApiError` body naming the limit. Returns the
/// rate limiter too, whose memory `serve` trims now and then.
pub fn app(state: Shared) -> (Router, Option<limits::Limiter>) {
    let config = state.config.clone();
    let (limited, limiter) = limits::apply(routes(state), &config);
    (limited.layer(middleware::from_fn(log_request)), limiter)
}

fn routes(state: Shared) -> Router {
    Router::new()
        .route("/", get(monitor::status_page))
        .route("/healthz", get(monitor::healthz))
        .route("/metrics", get(monitor::metrics))
        .route("/api/v1/openapi.json", get(openapi::document))
        .route("/api/v1/campaigns", get(monitor::campaigns))
        .route("/api/v1/campaigns/{name}", get(monitor::campaign))
        .route(
            "/api/v1/campaigns/{name}/solutions",
            get(monitor::solutions),
        )
        .route(
            "/api/v1/campaigns/{name}/targets/{k}/certificate",
            get(records::certificate),
        )
        .route(
            "/api/v1/campaigns/{name}/export/{what}",
            get(records::export),
        )
        .route("/api/v1/workers", get(monitor::workers))
        .route("/api/v1/about", get(worker::about))
        .route("/api/v1/enrol", post(worker::enrol))
        .route("/api/v1/lease", post(worker::lease))
        .route("/api/v1/lease/{id}/heartbeat", post(worker::heartbeat))
        .route("/api/v1/lease/{id}/report", post(worker::report))
        .route("/api/v1/lease/{id}/release", post(worker::release))
        .route(
            "/api/v1/admin/campaigns",
            get(admin::list).post(admin::create),
        )
        .route("/api/v1/admin/campaigns/{name}", get(admin::show))
        .route(
            "/api/v1/admin/campaigns/{name}/{action}",
            post(admin::action),
        )
        .route(
            "/api/v1/admin/invites",
            get(admin::list_invites).post(admin::create_invite),
        )
        .route("/api/v1/admin/incidents", get(admin::incidents))
        .route(
            "/api/v1/admin/workers/{id}/{action}",
            post(admin::worker_action),
        )
        .fallback(monitor::not_found)
        .layer(DefaultBodyLimit::max(MAX_BODY_BYTES))
        .with_state(state)
}

async fn log_request(req: Request, next: Next) -> Response {
    let method = req.method().clone();
    let path = req.uri().path().to_string();
    let t = std::time::Instant::now();
    let resp = next.run(req).await;
    tracing::info!(%method, %path, status = resp.status().as_u16(), ms = t.elapsed().as_secs_f64() * 1e3, "request");
    resp
}

/// The peer address when the server was started with connect info (tests without it get `None`).
pub struct Peer(pub Option<SocketAddr>);

impl<S: Send + Sync> FromRequestParts<S> for Peer {
    type Rejection = std::convert::Infallible;
    async fn from_request_parts(parts: &mut Parts, _: &S) -> Result<Self, Self::Rejection> {
        Ok(Peer(
            parts
                .extensions
                .get::<ConnectInfo<SocketAddr>>()
                .map(|c| c.0),
        ))
    }
}

/// Network prefix of an address: `/24` for IPv4, `/48` for IPv6.
pub fn net_prefix(addr: Option<SocketAddr>) -> String {
    match addr.map(|a| a.ip()) {
        None => String::new(),
        Some(IpAddr::V4(v4)) => {
            let o = v4.octets();
            format!("{}.{}.{}.0/24", o[0], o[1], o[2])
        }
        Some(IpAddr::V6(v6)) => match v6.to_ipv4_mapped() {
            Some(v4) => net_prefix(Some(SocketAddr::new(IpAddr::V4(v4), 0))),
            None => {
                let s = v6.segments();
                format!("{:x}:{:x}:{:x}::/48", s[0], s[1], s[2])
            }
        },
    }
}

/// Campaign and owner names: 1–64 characters of `[A-Za-z0-9._-]`.
pub fn check_name(what: &str, s: &str) -> Result<(), String> {
    if s.is_empty()
        || s.len() > 64
        || !s
            .bytes()
            .all(|b| b.is_ascii_alphanumeric() || b == b'.' || b == b'_' || b == b'-')
    {
        let shown: String = s.chars().take(70).collect();
        return Err(format!(
            "{what} {shown:?} is not 1–64 characters of A-Z, a-z, 0-9, '.', '_', '-'"
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    #[test]
    fn prefixes_and_names() {
        assert_eq!(
            net_prefix(Some("10.1.2.3:5".parse().unwrap())),
            "10.1.2.0/24"
        );
        assert_eq!(
            net_prefix(Some("[2001:db8:1:2::5]:5".parse().unwrap())),
            "2001:db8:1::/48"
        );
        assert_eq!(
            net_prefix(Some("[::ffff:10.1.2.3]:5".parse().unwrap())),
            "10.1.2.0/24"
        );
        assert_eq!(net_prefix(None), "");
        assert!(check_name("owner", "alice.b-2_x").is_ok());
        for bad in ["", "a b", "ä", &"x".repeat(65), "a/b"] {
            assert!(check_name("owner", bad).is_err(), "{bad}");
        }
    }
}
