//! `serve`: run the service on a data directory until SIGINT or SIGTERM.

use crate::api::{self, AppState};
use crate::config::ServiceConfig;
use crate::datadir::DataDir;
use crate::store::Store;
use anyhow::{Context, Result};
use std::net::SocketAddr;
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

    let checker = crate::checker::spawn(state.clone(), config.checker_threads as usize);
    if checker.is_none() {
        tracing::warn!("checker_threads = 0: spot checks and rechecks wait for trusted workers, and so do certificates");
    }
    let app = api::router(state.clone());
    axum::serve(
        listener,
        app.into_make_service_with_connect_info::<SocketAddr>(),
    )
    .with_graceful_shutdown(shutdown_signal())
    .await
    .context("serving")?;
    sweeper.abort();
    if let Some(c) = checker {
        c.abort();
    }
    state.store.close().await;
    let _ = std::fs::remove_file(dir.path(crate::datadir::URL_FILE));
    tracing::info!("coordinator stopped");
    Ok(())
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
