//! The writer task: one connection, one transaction per batch of operations, one savepoint
//! per operation, answers only after the commit (group commit; see the store's module
//! documentation).

use super::{Backend, BoxFut, Result, StoreError};
use sqlx::{AnyConnection, Connection, Executor};
use tokio::sync::{mpsc, oneshot};

/// Most operations committed together.
const MAX_BATCH: usize = 256;

/// What an operation leaves for after the commit: hand its answer over, or the commit's error.
type Deliver = Box<dyn FnOnce(Result<()>) + Send>;

/// One queued operation: `run` executes it on the writer's connection and says whether it
/// succeeded (keep its savepoint) or failed (roll it back), with its deliverer; `abort`
/// answers it with an error when it cannot run at all.
type RunOp = Box<dyn for<'c> FnOnce(&'c mut AnyConnection) -> BoxFut<'c, (bool, Deliver)> + Send>;

struct Job {
    run: RunOp,
    abort: Deliver,
}

enum Msg {
    Job(Job),
    Close(oneshot::Sender<()>),
}

pub(super) struct Handle {
    tx: mpsc::Sender<Msg>,
}

pub(super) fn spawn(conn: AnyConnection, backend: Backend) -> Handle {
    let (tx, rx) = mpsc::channel(4 * MAX_BATCH);
    tokio::spawn(run(conn, backend, rx));
    Handle { tx }
}

impl Handle {
    pub(super) async fn run<T, F>(&self, op: F) -> Result<T>
    where
        T: Send + 'static,
        F: for<'c> FnOnce(&'c mut AnyConnection) -> BoxFut<'c, Result<T>> + Send + 'static,
    {
        let (answer_tx, answer_rx) = oneshot::channel::<Result<T>>();
        let slot = std::sync::Arc::new(std::sync::Mutex::new(Some(answer_tx)));
        let slot2 = slot.clone();
        let abort: Deliver = Box::new(move |e: Result<()>| {
            if let Some(tx) = slot2.lock().expect("answer slot").take() {
                let _ = tx.send(Err(e.err().unwrap_or(StoreError::Closed)));
            }
        });
        let job = Job {
            run: Box::new(move |conn| {
                Box::pin(async move {
                    let outcome = op(conn).await;
                    let ok = outcome.is_ok();
                    let deliver: Deliver = Box::new(move |commit: Result<()>| {
                        if let Some(tx) = slot.lock().expect("answer slot").take() {
                            let _ = tx.send(commit.and(outcome));
                        }
                    });
                    (ok, deliver)
                })
            }),
            abort,
        };
        self.tx
            .send(Msg::Job(job))
            .await
            .map_err(|_| StoreError::Closed)?;
        answer_rx.await.map_err(|_| StoreError::Closed)?
    }

    /// Let the queued operations finish, then stop the writer.
    pub(super) async fn close(&self) {
        let (tx, rx) = oneshot::channel();
        if self.tx.send(Msg::Close(tx)).await.is_ok() {
            let _ = rx.await;
        }
    }
}

async fn run(mut conn: AnyConnection, backend: Backend, mut rx: mpsc::Receiver<Msg>) {
    let mut closing: Option<oneshot::Sender<()>> = None;
    while closing.is_none() {
        let Some(first) = rx.recv().await else { break };
        let mut batch = Vec::new();
        match first {
            Msg::Job(j) => batch.push(j),
            Msg::Close(t) => closing = Some(t),
        }
        while batch.len() < MAX_BATCH && closing.is_none() {
            match rx.try_recv() {
                Ok(Msg::Job(j)) => batch.push(j),
                Ok(Msg::Close(t)) => closing = Some(t),
                Err(_) => break,
            }
        }
        if !batch.is_empty() {
            run_batch(&mut conn, backend, batch).await;
        }
    }
    let _ = conn.close().await;
    if let Some(t) = closing {
        let _ = t.send(());
    }
}

async fn run_batch(conn: &mut AnyConnection, backend: Backend, batch: Vec<Job>) {
    let mut delivers: Vec<Deliver> = Vec::with_capacity(batch.len());
    for (i, stmt) in backend.begin().iter().enumerate() {
        if let Err(e) = conn.execute(*stmt).await {
            tracing::error!(error = %e, "cannot begin a write transaction");
            if i > 0 {
                let _ = conn.execute("ROLLBACK").await;
            }
            let msg = e.to_string();
            for job in batch {
                (job.abort)(Err(db_error(&msg)));
            }
            return;
        }
    }
    for job in batch {
        if let Err(e) = conn.execute("SAVEPOINT op").await {
            (job.abort)(Err(db_error(&e.to_string())));
            continue;
        }
        let (ok, d) = (job.run)(conn).await;
        let end = if ok {
            conn.execute("RELEASE SAVEPOINT op").await
        } else {
            match conn.execute("ROLLBACK TO SAVEPOINT op").await {
                Ok(_) => conn.execute("RELEASE SAVEPOINT op").await,
                Err(e) => Err(e),
            }
        };
        if let Err(e) = end {
            tracing::error!(error = %e, "savepoint handling failed; the batch is rolled back");
            let _ = conn.execute("ROLLBACK").await;
            let msg = e.to_string();
            d(Err(db_error(&msg)));
            for d in delivers {
                d(Err(db_error(&msg)));
            }
            return;
        }
        delivers.push(d);
    }
    let commit = conn.execute("COMMIT").await.map(|_| ());
    match commit {
        Ok(()) => {
            for d in delivers {
                d(Ok(()));
            }
        }
        Err(e) => {
            tracing::error!(error = %e, "commit failed; every write of the batch is refused");
            let _ = conn.execute("ROLLBACK").await;
            let msg = e.to_string();
            for d in delivers {
                d(Err(db_error(&msg)));
            }
        }
    }
}

fn db_error(msg: &str) -> StoreError {
    StoreError::Db(sqlx::Error::Protocol(msg.to_string()))
}
