//! Enrolled workers, invitations, trust and quarantine by hand, and request nonces.

use super::{int, InviteRow, Result, Store, StoreError, WorkerRow};
use crate::op;
use rand::Rng;
use sqlx::AnyConnection;

/// A validated enrolment.
#[derive(Clone, Debug)]
pub struct NewWorker {
    /// Lower case.
    pub owner: String,
    pub public_key: String,
    pub kernel: String,
    pub threads: u32,
    pub label: String,
    pub address: String,
    pub net_prefix: String,
    /// SHA-256 (hex) of the invitation presented, if any.
    pub invite_sha256: Option<String>,
    /// Whether enrolment needs an invitation.
    pub invite_only: bool,
}

#[derive(Clone, Debug)]
pub struct EnrolOutcome {
    pub worker: WorkerRow,
    /// False when the key was already enrolled (the same worker enrolling again).
    pub created: bool,
}

/// One authenticated worker request, as the store records it: who (verified by signature),
/// its nonce (refused if seen before), and where it came from.
#[derive(Clone, Debug)]
pub struct Call {
    pub worker_id: i64,
    pub nonce: String,
    /// Keep the nonce until then (after the clock-skew window has passed).
    pub nonce_expires: i64,
    pub now: i64,
    pub address: String,
    pub net_prefix: String,
}

/// Record a request's nonce; refuse one seen before.
pub(super) async fn use_nonce(
    c: &mut AnyConnection,
    worker_id: i64,
    nonce: &str,
    expires: i64,
) -> Result<()> {
    let n = sqlx::query(
        "INSERT INTO nonces (worker_id, nonce, expires_at) VALUES ($1, $2, $3) ON CONFLICT DO NOTHING",
    )
    .bind(worker_id)
    .bind(nonce)
    .bind(expires)
    .execute(&mut *c)
    .await?
    .rows_affected();
    if n == 0 {
        return Err(StoreError::Conflict(
            "replayed",
            format!("request nonce {nonce} was already used: every request needs a fresh nonce (a replayed request is refused)"),
        ));
    }
    Ok(())
}

/// The start of every operation on behalf of a worker: the nonce, the worker's latest
/// address, and the worker as it is now (refused when unknown).
pub(super) async fn begin_call(c: &mut AnyConnection, call: &Call) -> Result<WorkerRow> {
    use_nonce(c, call.worker_id, &call.nonce, call.nonce_expires).await?;
    sqlx::query(
        "UPDATE workers SET last_seen = CASE WHEN last_seen > $1 THEN last_seen ELSE $1 END, \
         address = $2, net_prefix = $3 WHERE id = $4",
    )
    .bind(call.now)
    .bind(&call.address)
    .bind(&call.net_prefix)
    .bind(call.worker_id)
    .execute(&mut *c)
    .await?;
    load_worker(c, call.worker_id).await
}

pub(super) async fn load_worker(c: &mut AnyConnection, id: i64) -> Result<WorkerRow> {
    let r = sqlx::query("SELECT * FROM workers WHERE id = $1")
        .bind(id)
        .fetch_optional(&mut *c)
        .await?
        .ok_or_else(|| StoreError::NotFound(format!("no worker {id}")))?;
    WorkerRow::from_row(&r)
}

/// The other workers of an owner.
pub(super) async fn owner_workers(
    c: &mut AnyConnection,
    owner: &str,
    except: i64,
) -> Result<Vec<i64>> {
    Ok(
        sqlx::query_scalar("SELECT id FROM workers WHERE owner = $1 AND id <> $2 ORDER BY id")
            .bind(owner)
            .bind(except)
            .fetch_all(&mut *c)
            .await?,
    )
}

/// A fresh random key for the offer draw.
pub(super) fn draw_key() -> i64 {
    rand::rngs::OsRng.gen_range(0..i64::MAX)
}

impl Store {
    /// Enrol a key. The same key enrolling again under the same owner gets its old id back
    /// (with kernel, threads and label updated); under another owner it is refused. When
    /// enrolment is by invitation a new key needs an unexpired invitation for its owner,
    /// and uses up one of its enrolments. A new key of an owner with a quarantined worker is
    /// refused.
    pub async fn enrol(
        &self,
        w: &NewWorker,
        nonce: &str,
        nonce_expires: i64,
        now: i64,
    ) -> Result<EnrolOutcome> {
        let (w, nonce) = (w.clone(), nonce.to_string());
        self.write(op!(|c| {
            use_nonce(c, 0, &nonce, nonce_expires).await?;
            let existing = sqlx::query("SELECT * FROM workers WHERE public_key = $1")
                .bind(&w.public_key)
                .fetch_optional(&mut *c)
                .await?;
            if let Some(r) = existing {
                let old = WorkerRow::from_row(&r)?;
                if old.owner != w.owner {
                    return Err(StoreError::Conflict(
                        "key_enrolled",
                        format!("this key is already enrolled as worker {} of owner {:?}; make a new key to enrol under another owner", old.id, old.owner),
                    ));
                }
                sqlx::query("UPDATE workers SET kernel = $1, threads = $2, label = $3, address = $4, net_prefix = $5, last_seen = $6 WHERE id = $7")
                    .bind(&w.kernel)
                    .bind(w.threads as i64)
                    .bind(&w.label)
                    .bind(&w.address)
                    .bind(&w.net_prefix)
                    .bind(now)
                    .bind(old.id)
                    .execute(&mut *c)
                    .await?;
                return Ok(EnrolOutcome { worker: load_worker(c, old.id).await?, created: false });
            }
            let quarantined: i64 = sqlx::query_scalar("SELECT count(*) FROM workers WHERE owner = $1 AND quarantined = 1")
                .bind(&w.owner)
                .fetch_one(&mut *c)
                .await?;
            if quarantined > 0 {
                return Err(StoreError::Forbidden(
                    "owner_quarantined",
                    format!("owner {:?} has quarantined workers; new machines of this owner are not enrolled until the organiser has looked into it", w.owner),
                ));
            }
            let invite_id = if w.invite_only {
                Some(take_invite(c, w.invite_sha256.as_deref(), &w.owner, now).await?)
            } else {
                None
            };
            let id: i64 = sqlx::query_scalar(
                "INSERT INTO workers (owner, public_key, kernel, threads, label, address, net_prefix, invite_id, enrolled_at, last_seen, draw_key) \
                 VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $9, $10) RETURNING id",
            )
            .bind(&w.owner)
            .bind(&w.public_key)
            .bind(&w.kernel)
            .bind(w.threads as i64)
            .bind(&w.label)
            .bind(&w.address)
            .bind(&w.net_prefix)
            .bind(invite_id)
            .bind(now)
            .bind(draw_key())
            .fetch_one(&mut *c)
            .await?;
            Ok(EnrolOutcome { worker: load_worker(c, id).await?, created: true })
        }))
        .await
    }

    pub async fn worker(&self, id: i64) -> Result<Option<WorkerRow>> {
        let r = sqlx::query("SELECT * FROM workers WHERE id = $1")
            .bind(id)
            .fetch_optional(self.pool())
            .await?;
        r.as_ref().map(WorkerRow::from_row).transpose()
    }

    /// Create an invitation: `token_sha256` of a token shown once to the organiser.
    pub async fn create_invite(
        &self,
        token_sha256: &str,
        owner: &str,
        workers: u32,
        note: &str,
        expires_at: Option<i64>,
        now: i64,
    ) -> Result<InviteRow> {
        let (t, o, n) = (
            token_sha256.to_string(),
            owner.to_string(),
            note.to_string(),
        );
        self.write(op!(|c| {
            let r = sqlx::query(
                "INSERT INTO invites (token_sha256, owner, workers_left, note, created_at, expires_at) \
                 VALUES ($1, $2, $3, $4, $5, $6) RETURNING *",
            )
            .bind(&t)
            .bind(&o)
            .bind(workers as i64)
            .bind(&n)
            .bind(now)
            .bind(expires_at)
            .fetch_one(&mut *c)
            .await?;
            InviteRow::from_row(&r)
        }))
        .await
    }

    pub async fn invites(&self) -> Result<Vec<InviteRow>> {
        let rows = sqlx::query("SELECT * FROM invites ORDER BY id")
            .fetch_all(self.pool())
            .await?;
        rows.iter().map(InviteRow::from_row).collect()
    }

    /// Mark a worker trusted (its results count as the organiser's own) or not.
    pub async fn set_trusted(&self, id: i64, trusted: bool) -> Result<WorkerRow> {
        self.write(op!(|c| {
            let n = sqlx::query("UPDATE workers SET trusted = $1 WHERE id = $2")
                .bind(i64::from(trusted))
                .bind(id)
                .execute(&mut *c)
                .await?
                .rows_affected();
            if n == 0 {
                return Err(StoreError::NotFound(format!("no worker {id}")));
            }
            load_worker(c, id).await
        }))
        .await
    }
}

/// Use up one enrolment of the invitation with this token hash, for this owner.
async fn take_invite(
    c: &mut AnyConnection,
    sha: Option<&str>,
    owner: &str,
    now: i64,
) -> Result<i64> {
    let refuse = |why: &str| {
        StoreError::Forbidden(
            "invite_required",
            format!("this coordinator enrols workers by invitation only: {why}; ask the organiser for an invitation and give it with --invite"),
        )
    };
    let Some(sha) = sha else {
        return Err(refuse("no invitation was given"));
    };
    let r = sqlx::query("SELECT * FROM invites WHERE token_sha256 = $1")
        .bind(sha)
        .fetch_optional(&mut *c)
        .await?
        .ok_or_else(|| refuse("the invitation is not known here"))?;
    let inv = InviteRow::from_row(&r)?;
    if inv.owner != owner {
        return Err(refuse(&format!(
            "the invitation is for owner {:?}, not {owner:?}",
            inv.owner
        )));
    }
    if inv.expires_at.is_some_and(|t| t < now) {
        return Err(refuse("the invitation has expired"));
    }
    if inv.workers_left <= 0 {
        return Err(refuse(
            "the invitation has been used for as many workers as it allows",
        ));
    }
    sqlx::query("UPDATE invites SET workers_left = workers_left - 1 WHERE id = $1")
        .bind(inv.id)
        .execute(&mut *c)
        .await?;
    let _ = int(0);
    Ok(inv.id)
}
