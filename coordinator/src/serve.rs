//! `serve`: run the service on a data directory until SIGINT or SIGTERM.

use crate::api::{self, AppState};
use crate::config::ServiceConfig;
use crate::datadir::DataDir;
use crate::store::Store;
use anyhow::{Context, Result};
use std::time::Duration;

pub async fn run(dir: DataDir, listen: &str, config: ServiceConfig) -> Result<()> {
    let database = (!config.database.is_empty()).then_some(config.database.as_str());
    dir.check_for(database.is_none())?;
    let store = Store::open_at(database, &dir.db(), false)
        .await
        .with_context(|| match database {
            Some(_) => "opening the database given by --database".to_string(),
            None => format!("opening {}", dir.db().display()),
        })?;
    let key = dir.signing_key()?;
    let token = dir.admin_token()?;
    let listener = tokio::net::TcpListener::bind(listen)
        .await
        .with_context(|| format!("cannot listen on {listen}: is the address right and the port free? (e.g. --listen 127.0.0.1:8480)"))?;
    let addr = listener.local_addr()?;
    let url = format!("http://{addr}");
    if let Err(e) = dir.write_url(&url) {
        // A read-only data directory (a replica with its key from a secret) is fine.
        tracing::warn!(error = %e, "cannot write listen.url into the data directory");
    }
    let state = AppState::new(store, key, token, config.clone());
    tracing::info!(%url, coordinator_key = %state.public_key, store = ?state.store.backend(), schema = state.store.schema_version().await?, "coordinator listening");
    eprintln!("cubehunt-coordinator listening on {url}");

    let sweeper = {
        let st = state.clone();
        let every = Duration::from_secs(config.sweep_s.max(1));
        tokio::spawn(async move {
            let mut t = tokio::time::interval(every);
            t.tick().await;
            loop {
                t.tick().await;
                match st.store.sweep(crate::now(), &st.policy).await {
                    Ok(0) => {}
                    Ok(n) => tracing::info!(expired = n, "overdue leases expired"),
                    Err(e) => tracing::error!(error = %e, "lease sweep failed"),
                }
            }
        })
    };

    {
        // The density model's figures of every stored target, once, in the background (the
        // views compute any they still miss on first use).
        let st = state.clone();
        tokio::spawn(async move {
            match st.store.audit_targets().await {
                Ok(ts) => {
                    let keys: Vec<(i64, u64)> = ts.iter().map(|(t, _)| (t.k, t.bound)).collect();
                    let t0 = std::time::Instant::now();
                    st.model.get(&keys).await;
                    tracing::info!(
                        targets = keys.len(),
                        ms = t0.elapsed().as_secs_f64() * 1e3,
                        "density model figures computed"
                    );
                }
                Err(e) => tracing::warn!(error = %e, "cannot list targets for the density model"),
            }
        });
    }
    let checker = crate::checker::spawn(state.clone(), config.checker_threads as usize);
    if checker.is_none() {
        tracing::warn!("checker_threads = 0: spot checks and rechecks wait for trusted workers, and so do certificates");
    }
    let (app, limiter) = api::app(state.clone());
    let trimmer = limiter.map(|l| {
        // The rate limiter keeps one entry per address seen; forget the idle ones.
        tokio::spawn(async move {
            let mut t = tokio::time::interval(Duration::from_secs(60));
            loop {
                t.tick().await;
                l.retain_recent();
                l.shrink_to_fit();
            }
        })
    });
    accept_loop(listener, app, &config, shutdown_signal()).await;
    if let Some(t) = trimmer {
        t.abort();
    }
    sweeper.abort();
    if let Some(c) = checker {
        c.abort();
    }
    state.store.close().await;
    let _ = std::fs::remove_file(dir.path(crate::datadir::URL_FILE));
    tracing::info!("coordinator stopped");
    Ok(())
}

/// Serve connections until `shutdown` completes, then stop accepting and wait for the open
/// connections to finish their requests in flight (idle kept-alive ones are closed).
///
/// HTTP/1 only (workers, reverse proxies and browsers of the status page speak it), so every
/// connection is under the header read timeout. At most `max_connections` are open at once:
/// the loop accepts only when it holds a permit, so the excess waits in the kernel's queue.
async fn accept_loop(
    listener: tokio::net::TcpListener,
    app: axum::Router,
    config: &ServiceConfig,
    shutdown: impl std::future::Future<Output = ()>,
) {
    use hyper_util::rt::{TokioExecutor, TokioIo, TokioTimer};
    use hyper_util::server::conn::auto;
    use tower::ServiceExt;

    let mut builder = auto::Builder::new(TokioExecutor::new()).http1_only();
    builder
        .http1()
        .timer(TokioTimer::new())
        .header_read_timeout(Duration::from_secs(config.header_timeout_s))
        .keep_alive(true);
    let permits = std::sync::Arc::new(tokio::sync::Semaphore::new(config.max_connections as usize));
    let graceful = hyper_util::server::graceful::GracefulShutdown::new();
    tokio::pin!(shutdown);
    loop {
        let permit = tokio::select! {
            p = permits.clone().acquire_owned() => p.expect("the semaphore is never closed"),
            _ = &mut shutdown => break,
        };
        let (stream, peer) = tokio::select! {
            r = listener.accept() => match r {
                Ok(x) => x,
                Err(e) => {
                    // Out of file descriptors and the like: wait rather than spin.
                    tracing::warn!(error = %e, "accept failed");
                    tokio::time::sleep(Duration::from_millis(100)).await;
                    continue;
                }
            },
            _ = &mut shutdown => break,
        };
        let svc = app.clone().map_request(
            move |mut req: axum::extract::Request<hyper::body::Incoming>| {
                req.extensions_mut()
                    .insert(axum::extract::ConnectInfo(peer));
                req
            },
        );
        let conn = builder
            .serve_connection(
                TokioIo::new(stream),
                hyper_util::service::TowerToHyperService::new(svc),
            )
            .into_owned();
        let conn = graceful.watch(conn);
        tokio::spawn(async move {
            if let Err(e) = conn.await {
                tracing::debug!(%peer, error = %e, "connection closed with an error");
            }
            drop(permit);
        });
    }
    drop(listener);
    tracing::info!(
        open = graceful.count(),
        "no longer accepting; finishing requests in flight"
    );
    graceful.shutdown().await;
}

async fn shutdown_signal() {
    use tokio::signal::unix::{signal, SignalKind};
    let mut term = signal(SignalKind::terminate()).expect("SIGTERM handler");
    let mut int = signal(SignalKind::interrupt()).expect("SIGINT handler");
    tokio::select! {
        _ = term.recv() => tracing::info!("SIGTERM: shutting down"),
        _ = int.recv() => tracing::info!("SIGINT: shutting down"),
    }
}
