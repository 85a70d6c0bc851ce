//! Limits against hostile clients, from well-kept tower layers: a request body read timeout
//! (`tower_http`), a per-address rate limit (`tower_governor`) and a global limit of
//! requests in flight that sheds the excess (`tower`). The header read timeout and the
//! connection limit are the accept loop's, in [`crate::serve`].
//!
//! Rate-limit counts live in this process's memory only. The address is the TCP peer's:
//! behind a reverse proxy every client has the proxy's address (deploy/coordinator.example.toml).

use super::AppError;
use crate::config::ServiceConfig;
use axum::error_handling::HandleErrorLayer;
use axum::extract::ConnectInfo;
use axum::http::{header, HeaderValue, Request, StatusCode};
use axum::response::{IntoResponse, Response};
use axum::{BoxError, Router};
use governor::middleware::NoOpMiddleware;
use std::net::{IpAddr, Ipv4Addr, SocketAddr};
use std::time::Duration;
use tower::ServiceBuilder;
use tower_governor::governor::{GovernorConfigBuilder, SharedRateLimiter};
use tower_governor::key_extractor::KeyExtractor;
use tower_governor::{GovernorError, GovernorLayer};
use tower_http::timeout::RequestBodyTimeoutLayer;

/// The keyed rate limiter shared by all connections.
pub type Limiter = SharedRateLimiter<IpAddr, NoOpMiddleware>;

/// Rate-limit key: the peer's IP address. A request without one (the in-process tests, which
/// have no connection) shares the key of the unspecified address.
#[derive(Clone, Copy, Debug)]
pub struct PeerAddress;

impl KeyExtractor for PeerAddress {
    type Key = IpAddr;
    fn extract<T>(&self, req: &Request<T>) -> Result<IpAddr, GovernorError> {
        Ok(req
            .extensions()
            .get::<ConnectInfo<SocketAddr>>()
            .map(|c| c.0.ip())
            .unwrap_or(IpAddr::V4(Ipv4Addr::UNSPECIFIED)))
    }
}

fn with_retry_after(mut resp: Response, seconds: u64) -> Response {
    if let Ok(v) = HeaderValue::from_str(&seconds.max(1).to_string()) {
        resp.headers_mut().insert(header::RETRY_AFTER, v);
    }
    resp
}

fn rate_refusal(e: GovernorError, config: &ServiceConfig) -> Response {
    match e {
        GovernorError::TooManyRequests { wait_time, .. } => with_retry_after(
            AppError::new(
                StatusCode::TOO_MANY_REQUESTS,
                "rate_limited",
                format!(
                    "too many requests from this address (at most {} per second, bursts of {}); wait {} s",
                    config.rate_per_s, config.rate_burst, wait_time.max(1)
                ),
            )
            .into_response(),
            wait_time,
        ),
        other => AppError::internal(format!("rate limiter: {other}")).into_response(),
    }
}

async fn overloaded(e: BoxError) -> Response {
    if e.is::<tower::load_shed::error::Overloaded>() {
        with_retry_after(
            AppError::new(
                StatusCode::SERVICE_UNAVAILABLE,
                "overloaded",
                "the coordinator is handling as many requests as it allows at once (max_in_flight); try again in a moment",
            )
            .into_response(),
            1,
        )
    } else {
        AppError::internal(format!("request failed: {e}")).into_response()
    }
}

/// `router` behind the limits of `config`; the rate limiter when there is one.
pub fn apply(router: Router, config: &ServiceConfig) -> (Router, Option<Limiter>) {
    let mut limiter = None;
    // Innermost first: the body timeout wraps the body handlers read.
    let mut r = router.layer(RequestBodyTimeoutLayer::new(Duration::from_secs(
        config.body_timeout_s,
    )));
    if config.rate_per_s > 0 {
        let governor = GovernorConfigBuilder::default()
            .key_extractor(PeerAddress)
            .period(Duration::from_nanos(
                (1_000_000_000 / u64::from(config.rate_per_s)).max(1),
            ))
            .burst_size(config.rate_burst.max(1))
            .finish()
            .expect("rate and burst are positive");
        limiter = Some(governor.limiter().clone());
        let cfg = config.clone();
        r = r.layer(
            GovernorLayer::<PeerAddress, NoOpMiddleware, axum::body::Body>::new(governor)
                .error_handler(move |e| rate_refusal(e, &cfg)),
        );
    }
    let r = r.layer(
        ServiceBuilder::new()
            .layer(HandleErrorLayer::new(overloaded))
            .load_shed()
            .concurrency_limit(config.max_in_flight as usize),
    );
    (r, limiter)
}
