//! Hand-out of units to workers, offers, heartbeats, expiry and release.
//!
//! # Who gets which unit
//!
//! A worker cannot choose, predict or repeat its partner on a unit:
//! * a unit's **first** lease goes to whoever asks, but the unit is drawn at random from the
//!   first [`LeasePolicy::fresh_window`] untouched units, not taken in order;
//! * every **further** lease of a unit is **offered** to one worker drawn at random from
//!   those eligible for it ([`draw_offer`]): seen recently, not quarantined, below its lease
//!   cap, of an owner (and, optionally, a network) that has no lease or report on the unit,
//!   never a worker that held it before, and out of probation unless the organiser knows the
//!   unit's answer. Only that worker is handed the unit while the offer lasts; an offer
//!   nobody takes up lapses and is drawn again;
//! * a worker on **probation** gets units whose answer the organiser already knows, or, when
//!   there are none, an untouched unit that the organiser's side will then recompute;
//! * a **trusted** worker gets the units waiting for the organiser's side first.

use super::workers::{begin_call, draw_key, load_worker, Call};
use super::{LeaseRow, Result, Store, StoreError, UnitRow, WorkerRow, UNIT_SELECT};
use crate::lifecycle::{self, Rules};
use crate::op;
use rand::Rng;
use sqlx::AnyConnection;

/// The settings that govern hand-out and deadlines.
#[derive(Clone, Debug)]
pub struct LeasePolicy {
    pub rules: Rules,
    /// A lease lasts this many times the unit's expected time on the worker …
    pub deadline_factor: f64,
    /// … and heartbeats may push it to at most this many times (from hand-out).
    pub limit_factor: f64,
    pub floor_s: i64,
    pub ceiling_s: i64,
    /// A heartbeat extends the deadline to at least this far from now (within the limit).
    pub grace_s: i64,
    /// An offer lapses after this long without the worker taking it up.
    pub offer_s: i64,
    /// Workers seen within this long are eligible for offers.
    pub active_window_s: i64,
    /// Only workers that asked for work within this long are drawn for offers, and an offer
    /// lapses when its worker has not asked within this long after it (about three of a
    /// polling worker's intervals).
    pub ask_window_s: i64,
    /// The two leases of a unit also come from different network prefixes.
    pub distinct_prefix: bool,
    /// First leases are drawn among this many untouched units (in planned order).
    pub fresh_window: i64,
    /// Most units waiting for the organiser's side before probation workers stop getting
    /// untouched units (whose recomputation they would add to the queue).
    pub recheck_backlog: i64,
}

impl Default for LeasePolicy {
    fn default() -> LeasePolicy {
        LeasePolicy {
            rules: Rules::default(),
            deadline_factor: 4.0,
            limit_factor: 12.0,
            floor_s: 300,
            ceiling_s: 7 * 86400,
            grace_s: 180,
            offer_s: 120,
            active_window_s: 600,
            ask_window_s: 90,
            distinct_prefix: false,
            fresh_window: 64,
            recheck_backlog: 64,
        }
    }
}

impl LeasePolicy {
    /// Deadline and limit of a lease handed out now on a unit of planned cost `cost_us`.
    pub fn times(&self, now: i64, cost_us: u64, rate: Option<f64>) -> (i64, i64) {
        let expected = lifecycle::expected_seconds(cost_us, rate);
        let clamp = |f: f64| {
            let ceiling = self.ceiling_s.max(self.floor_s) as f64;
            (expected * f).clamp(self.floor_s as f64, ceiling).ceil() as i64
        };
        let deadline = now + clamp(self.deadline_factor);
        let limit = (now + clamp(self.limit_factor)).max(deadline);
        (deadline, limit)
    }
}

/// A lease just granted, with its unit.
#[derive(Clone, Debug)]
pub struct Granted {
    pub lease: LeaseRow,
    pub unit: UnitRow,
}

#[derive(Clone, Debug)]
pub struct HeartbeatOutcome {
    pub deadline: i64,
    pub keep_going: bool,
}

pub(super) fn quarantined(w: &WorkerRow) -> StoreError {
    StoreError::Forbidden(
        "quarantined",
        format!(
            "worker {} is quarantined ({}) and gets no more work; check the machine (memory, overclocking, modified software)",
            w.id,
            if w.quarantine_reason.is_empty() { "too many wrong reports" } else { &w.quarantine_reason }
        ),
    )
}

impl Store {
    /// Expire every active lease whose deadline has passed, lapse stale offers and draw new
    /// ones; returns how many leases expired.
    pub async fn sweep(&self, now: i64, policy: &LeasePolicy) -> Result<u64> {
        let policy = policy.clone();
        self.write(op!(|c| {
            let n = expire_in(c, now, &policy).await?;
            lapse_offers(c, now, &policy).await?;
            sqlx::query("DELETE FROM nonces WHERE expires_at < $1")
                .bind(now)
                .execute(&mut *c)
                .await?;
            Ok(n)
        }))
        .await
    }

    /// Pick a unit for this worker and lease it, or `None` when nothing suits it now.
    pub async fn grant_lease(&self, call: &Call, policy: &LeasePolicy) -> Result<Option<Granted>> {
        let (call, policy) = (call.clone(), policy.clone());
        self.write(op!(|c| {
            let w = begin_call(c, &call).await?;
            if w.quarantined {
                return Err(quarantined(&w));
            }
            let now = call.now;
            sqlx::query("UPDATE workers SET asked_at = $1 WHERE id = $2")
                .bind(now)
                .bind(w.id)
                .execute(&mut *c)
                .await?;
            if w.active >= policy.rules.lease_cap(w.threads) {
                return Ok(None);
            }
            let owner_active: i64 = sqlx::query_scalar(
                "SELECT CAST(coalesce(sum(active), 0) AS BIGINT) FROM workers WHERE owner = $1",
            )
            .bind(&w.owner)
            .fetch_one(&mut *c)
            .await?;
            if owner_active >= policy.rules.leases_per_owner as i64 {
                return Ok(None);
            }
            let Some(unit) = pick(c, &w, &policy, now).await? else {
                return Ok(None);
            };
            grant(c, &w, unit, &policy, now).await.map(Some)
        }))
        .await
    }

    pub async fn lease(&self, id: i64) -> Result<Option<LeaseRow>> {
        let r = sqlx::query("SELECT * FROM leases WHERE id = $1")
            .bind(id)
            .fetch_optional(self.pool())
            .await?;
        r.as_ref().map(LeaseRow::from_row).transpose()
    }

    /// Leases of a unit, oldest first.
    pub async fn unit_leases(&self, unit_id: i64) -> Result<Vec<LeaseRow>> {
        let rows = sqlx::query("SELECT * FROM leases WHERE unit_id = $1 ORDER BY id")
            .bind(unit_id)
            .fetch_all(self.pool())
            .await?;
        rows.iter().map(LeaseRow::from_row).collect()
    }

    /// A heartbeat: extends an active lease to at least `now + grace` but never past its
    /// limit. `keep_going` is false when the lease is no longer held, its unit no longer
    /// needs it or its campaign stopped handing out work.
    pub async fn heartbeat(
        &self,
        call: &Call,
        lease_id: i64,
        progress: f64,
        policy: &LeasePolicy,
    ) -> Result<HeartbeatOutcome> {
        let (call, grace) = (call.clone(), policy.grace_s);
        self.write(op!(|c| {
            let w = begin_call(c, &call).await?;
            let lease = owned_lease(c, w.id, lease_id).await?;
            let campaign_state: String = sqlx::query_scalar(
                "SELECT c.state FROM units u JOIN campaigns c ON c.id = u.campaign_id WHERE u.id = $1",
            )
            .bind(lease.unit_id)
            .fetch_one(&mut *c)
            .await?;
            if lease.state != "active" || campaign_state != "active" || w.quarantined {
                return Ok(HeartbeatOutcome { deadline: lease.deadline, keep_going: false });
            }
            let dl = lease.deadline.max(call.now + grace).min(lease.limit_at);
            let p = if progress.is_finite() { progress.clamp(0.0, 1.0) } else { 0.0 };
            sqlx::query("UPDATE leases SET deadline = $1, heartbeat_at = $2, progress = $3 WHERE id = $4")
                .bind(dl)
                .bind(call.now)
                .bind(p)
                .bind(lease_id)
                .execute(&mut *c)
                .await?;
            Ok(HeartbeatOutcome { deadline: dl, keep_going: true })
        }))
        .await
    }

    /// The worker gives a lease back; returns whether it was still held.
    pub async fn release(&self, call: &Call, lease_id: i64, policy: &LeasePolicy) -> Result<bool> {
        let (call, policy) = (call.clone(), policy.clone());
        self.write(op!(|c| {
            let w = begin_call(c, &call).await?;
            let lease = owned_lease(c, w.id, lease_id).await?;
            let was_active = lease.state == "active";
            if matches!(lease.state.as_str(), "active" | "expired" | "withdrawn") {
                close_lease(c, &lease, "released", call.now).await?;
            }
            if was_active {
                offer_if_wanted(c, lease.unit_id, &policy, call.now).await?;
                // A worker that hands a lease back is usually stopping: the units it was
                // drawn for go to others rather than wait for its offers to lapse.
                let offered: Vec<i64> =
                    sqlx::query_scalar("SELECT id FROM units WHERE offered_to = $1")
                        .bind(w.id)
                        .fetch_all(&mut *c)
                        .await?;
                sqlx::query(
                    "UPDATE units SET offered_to = NULL, offered_at = NULL WHERE offered_to = $1",
                )
                .bind(w.id)
                .execute(&mut *c)
                .await?;
                for u in offered {
                    draw_offer(c, u, &policy, call.now, w.id).await?;
                }
            }
            Ok(was_active)
        }))
        .await
    }
}

/// The lease, if it exists and belongs to this worker.
pub(super) async fn owned_lease(
    c: &mut AnyConnection,
    worker_id: i64,
    lease_id: i64,
) -> Result<LeaseRow> {
    let r = sqlx::query("SELECT * FROM leases WHERE id = $1")
        .bind(lease_id)
        .fetch_optional(&mut *c)
        .await?;
    let lease = match r {
        Some(r) => LeaseRow::from_row(&r)?,
        None => {
            return Err(StoreError::NotFound(format!(
                "no lease {lease_id}; ask for a new one with POST /api/v1/lease"
            )))
        }
    };
    if lease.worker_id != worker_id {
        return Err(StoreError::Forbidden(
            "not_your_lease",
            format!("lease {lease_id} is not held by worker {worker_id}"),
        ));
    }
    Ok(lease)
}

/// Move a lease to a closed state, keeping the `active` counters of its unit and worker.
pub(super) async fn close_lease(
    c: &mut AnyConnection,
    lease: &LeaseRow,
    to: &str,
    now: i64,
) -> Result<()> {
    sqlx::query("UPDATE leases SET state = $1, closed_at = $2 WHERE id = $3")
        .bind(to)
        .bind(now)
        .bind(lease.id)
        .execute(&mut *c)
        .await?;
    if lease.state == "active" {
        sqlx::query("UPDATE units SET active = active - 1 WHERE id = $1")
            .bind(lease.unit_id)
            .execute(&mut *c)
            .await?;
        sqlx::query("UPDATE workers SET active = active - 1 WHERE id = $1")
            .bind(lease.worker_id)
            .execute(&mut *c)
            .await?;
    }
    Ok(())
}

async fn leases_where(c: &mut AnyConnection, cond: &str, arg: i64) -> Result<Vec<LeaseRow>> {
    let q = format!("SELECT * FROM leases WHERE state = 'active' AND {cond} ORDER BY id");
    let rows = sqlx::query(&q).bind(arg).fetch_all(&mut *c).await?;
    rows.iter().map(LeaseRow::from_row).collect()
}

/// Withdraw every active lease of a unit (it settled or went to review).
pub(super) async fn withdraw_unit_leases(
    c: &mut AnyConnection,
    unit_id: i64,
    now: i64,
) -> Result<()> {
    for l in leases_where(c, "unit_id = $1", unit_id).await? {
        close_lease(c, &l, "withdrawn", now).await?;
    }
    Ok(())
}

/// Withdraw every active lease of a worker (quarantined), and its offers.
pub(super) async fn withdraw_worker_leases(
    c: &mut AnyConnection,
    worker_id: i64,
    now: i64,
) -> Result<Vec<i64>> {
    let mut units = Vec::new();
    for l in leases_where(c, "worker_id = $1", worker_id).await? {
        close_lease(c, &l, "withdrawn", now).await?;
        units.push(l.unit_id);
    }
    let offered: Vec<i64> = sqlx::query_scalar(
        "UPDATE units SET offered_to = NULL, offered_at = NULL WHERE offered_to = $1 RETURNING id",
    )
    .bind(worker_id)
    .fetch_all(&mut *c)
    .await?;
    units.extend(offered);
    Ok(units)
}

/// Withdraw every active lease of a campaign (paused or cancelled).
pub(super) async fn withdraw_campaign_leases(
    c: &mut AnyConnection,
    campaign_id: i64,
    now: i64,
) -> Result<()> {
    let ls = leases_where(
        c,
        "unit_id IN (SELECT id FROM units WHERE campaign_id = $1)",
        campaign_id,
    )
    .await?;
    for l in ls {
        close_lease(c, &l, "withdrawn", now).await?;
    }
    Ok(())
}

async fn expire_in(c: &mut AnyConnection, now: i64, policy: &LeasePolicy) -> Result<u64> {
    let rows =
        sqlx::query("SELECT * FROM leases WHERE state = 'active' AND deadline < $1 ORDER BY id")
            .bind(now)
            .fetch_all(&mut *c)
            .await?;
    let leases: Vec<LeaseRow> = rows.iter().map(LeaseRow::from_row).collect::<Result<_>>()?;
    for l in &leases {
        close_lease(c, l, "expired", now).await?;
        offer_if_wanted(c, l.unit_id, policy, now).await?;
    }
    Ok(leases.len() as u64)
}

/// Most offers drawn by one sweep.
const OFFERS_PER_SWEEP: i64 = 1000;

async fn lapse_offers(c: &mut AnyConnection, now: i64, policy: &LeasePolicy) -> Result<()> {
    // Lapse offers that are old, or whose worker has not come for them within the ask window.
    sqlx::query(
        "UPDATE units SET offered_to = NULL, offered_at = NULL WHERE offered_to IS NOT NULL AND \
         (offered_at < $1 OR (offered_at < $2 AND EXISTS \
           (SELECT 1 FROM workers w WHERE w.id = units.offered_to AND w.asked_at < units.offered_at)))",
    )
    .bind(now - policy.offer_s)
    .bind(now - policy.ask_window_s)
    .execute(&mut *c)
    .await?;
    let wanting: Vec<i64> = sqlx::query_scalar(
        "SELECT u.id FROM units u JOIN campaigns c ON c.id = u.campaign_id \
         WHERE u.need > u.active AND u.offered_to IS NULL AND u.state IN ('open', 'disputed') \
           AND (u.reports > 0 OR u.active > 0) AND c.state = 'active' ORDER BY u.id LIMIT $1",
    )
    .bind(OFFERS_PER_SWEEP)
    .fetch_all(&mut *c)
    .await?;
    for u in wanting {
        draw_offer(c, u, policy, now, 0).await?;
    }
    Ok(())
}

async fn load_unit(c: &mut AnyConnection, id: i64) -> Result<UnitRow> {
    let q = format!("{UNIT_SELECT} WHERE u.id = $1");
    let r = sqlx::query(&q).bind(id).fetch_one(&mut *c).await?;
    UnitRow::from_row(&r)
}

pub(super) async fn load_unit_row(c: &mut AnyConnection, id: i64) -> Result<UnitRow> {
    load_unit(c, id).await
}

/// `NOT EXISTS` clause: worker `$w` of owner `$o` (network `$p`, when the prefix rule is on)
/// has no standing on unit `u`: it never held it, and no lease of its owner or network is
/// held or reported on it.
const NOT_ON_UNIT: &str = "NOT EXISTS (SELECT 1 FROM leases l WHERE l.unit_id = u.id AND \
     (l.worker_id = $1 OR (l.state IN ('active', 'reported') AND (l.owner = $2 OR ($3 <> '' AND l.net_prefix = $3)))))";

/// Candidate units for worker `w` under an extra condition, at most `limit`, in id order.
/// Parameters `$1..$3` are the worker, its owner and its prefix (or ''), `$4` its kernel,
/// `$5` the limit.
async fn candidates(
    c: &mut AnyConnection,
    w: &WorkerRow,
    policy: &LeasePolicy,
    cond: &str,
    limit: i64,
) -> Result<Vec<UnitRow>> {
    let q = format!(
        "{UNIT_SELECT} WHERE c.state = 'active' AND c.kernel = $4 AND u.state <> 'settled' AND {cond} AND {NOT_ON_UNIT} ORDER BY u.id LIMIT $5"
    );
    let prefix = if policy.distinct_prefix {
        w.net_prefix.as_str()
    } else {
        ""
    };
    let rows = sqlx::query(&q)
        .bind(w.id)
        .bind(&w.owner)
        .bind(prefix)
        .bind(&w.kernel)
        .bind(limit)
        .fetch_all(&mut *c)
        .await?;
    rows.iter().map(UnitRow::from_row).collect()
}

fn pick_random(mut v: Vec<UnitRow>) -> Option<UnitRow> {
    if v.is_empty() {
        return None;
    }
    let i = rand::rngs::OsRng.gen_range(0..v.len());
    Some(v.swap_remove(i))
}

/// The unit to hand to `w` now (see the module documentation for the order).
async fn pick(
    c: &mut AnyConnection,
    w: &WorkerRow,
    policy: &LeasePolicy,
    now: i64,
) -> Result<Option<UnitRow>> {
    let want = "u.need > u.active AND u.state IN ('open', 'disputed')";
    let offered = candidates(
        c,
        w,
        policy,
        &format!("u.offered_to = {} AND {want}", w.id),
        1,
    )
    .await?;
    if let Some(u) = offered.into_iter().next() {
        return Ok(Some(u));
    }
    // An offer to this worker that it may no longer take (rules changed): let it go.
    sqlx::query("UPDATE units SET offered_to = NULL, offered_at = NULL WHERE offered_to = $1")
        .bind(w.id)
        .execute(&mut *c)
        .await?;
    if w.trusted {
        let waiting =
            candidates(c, w, policy, "u.recheck = 1 AND u.known_digest IS NULL", 1).await?;
        if let Some(u) = waiting.into_iter().next() {
            return Ok(Some(u));
        }
    }
    let unoffered = format!("{want} AND u.offered_to IS NULL");
    if policy.rules.on_probation(w.confirmed, w.trusted) {
        let known = candidates(
            c,
            w,
            policy,
            &format!("u.known_digest IS NOT NULL AND {unoffered}"),
            policy.fresh_window,
        )
        .await?;
        if let Some(u) = pick_random(known) {
            return Ok(Some(u));
        }
        let backlog: i64 = sqlx::query_scalar(
            "SELECT count(*) FROM units WHERE recheck = 1 AND known_digest IS NULL",
        )
        .fetch_one(&mut *c)
        .await?;
        if backlog >= policy.recheck_backlog {
            return Ok(None);
        }
        // An untouched unit, or else one waiting for a further lease that nobody was drawn
        // for (otherwise a unit reported once by a worker past probation would wait for
        // ever while only new workers are about); either way the organiser's side then
        // recomputes it, so a new worker's word never settles anything alone.
        let fresh = candidates(
            c,
            w,
            policy,
            "u.state = 'open' AND u.reports = 0 AND u.active = 0 AND u.offered_to IS NULL",
            policy.fresh_window,
        )
        .await?;
        let u = match pick_random(fresh) {
            Some(u) => u,
            None => {
                match pick_random(candidates(c, w, policy, &unoffered, policy.fresh_window).await?)
                {
                    Some(u) => u,
                    None => return Ok(None),
                }
            }
        };
        sqlx::query("UPDATE units SET recheck = 1 WHERE id = $1")
            .bind(u.id())
            .execute(&mut *c)
            .await?;
        return Ok(Some(u));
    }
    let fresh = candidates(
        c,
        w,
        policy,
        "u.state = 'open' AND u.reports = 0 AND u.active = 0 AND u.offered_to IS NULL",
        policy.fresh_window,
    )
    .await?;
    if let Some(u) = pick_random(fresh) {
        return Ok(Some(u));
    }
    // Units that want a lease and have nobody drawn for them (no eligible worker was seen
    // when they were last drawn for).
    let _ = now;
    Ok(pick_random(
        candidates(c, w, policy, &unoffered, policy.fresh_window).await?,
    ))
}

async fn grant(
    c: &mut AnyConnection,
    w: &WorkerRow,
    mut unit: UnitRow,
    policy: &LeasePolicy,
    now: i64,
) -> Result<Granted> {
    let (deadline, limit) = policy.times(now, unit.spec.cost, w.observed_rate());
    let lease_id: i64 = sqlx::query_scalar(
        "INSERT INTO leases (unit_id, worker_id, owner, net_prefix, state, issued_at, deadline, limit_at) \
         VALUES ($1, $2, $3, $4, 'active', $5, $6, $7) RETURNING id",
    )
    .bind(unit.id())
    .bind(w.id)
    .bind(&w.owner)
    .bind(&w.net_prefix)
    .bind(now)
    .bind(deadline)
    .bind(limit)
    .fetch_one(&mut *c)
    .await?;
    sqlx::query(
        "UPDATE units SET active = active + 1, offered_to = NULL, offered_at = NULL WHERE id = $1",
    )
    .bind(unit.id())
    .execute(&mut *c)
    .await?;
    sqlx::query("UPDATE workers SET active = active + 1 WHERE id = $1")
        .bind(w.id)
        .execute(&mut *c)
        .await?;
    unit.active += 1;
    unit.offered_to = None;
    unit.offered_at = None;
    offer_if_wanted(c, unit.id(), policy, now).await?;
    let r = sqlx::query("SELECT * FROM leases WHERE id = $1")
        .bind(lease_id)
        .fetch_one(&mut *c)
        .await?;
    Ok(Granted {
        lease: LeaseRow::from_row(&r)?,
        unit,
    })
}

/// Draw an offer for a unit that wants a further lease and has none.
pub(super) async fn offer_if_wanted(
    c: &mut AnyConnection,
    unit_id: i64,
    policy: &LeasePolicy,
    now: i64,
) -> Result<()> {
    let u = load_unit(c, unit_id).await?;
    let wants = matches!(
        u.state,
        lifecycle::UnitState::Open | lifecycle::UnitState::Disputed
    ) && u.need > u.active
        && u.offered_to.is_none();
    if wants {
        draw_offer(c, unit_id, policy, now, 0).await?;
    }
    Ok(())
}

/// Offer the next lease of a unit to a worker drawn at random among the eligible ones
/// (module documentation). Returns the worker drawn, if any was eligible.
///
/// The draw walks workers in the order of a random key from a random starting point and
/// takes the first eligible one, then gives that worker a new random key. Keys are the
/// coordinator's own randomness, so no worker can place itself next to another. `except`
/// (a worker id, or 0) is never drawn.
pub(super) async fn draw_offer(
    c: &mut AnyConnection,
    unit_id: i64,
    policy: &LeasePolicy,
    now: i64,
    except: i64,
) -> Result<Option<i64>> {
    let u = load_unit(c, unit_id).await?;
    let known = i64::from(u.known.is_some());
    // Eligible: asked for work lately and has a thread free (so an offer is taken up soon),
    // of the campaign's kernel, not quarantined, past probation unless the answer is known,
    // and of an owner (and optionally a network) that has not taken the unit.
    let eligible = "w.quarantined = 0 AND w.kernel = $1 AND w.asked_at >= $2 \
         AND w.active < w.threads \
         AND ($4 = 1 OR w.trusted = 1 OR w.confirmed >= $5) \
         AND (SELECT count(*) FROM units x WHERE x.offered_to = w.id) < w.threads * $3 \
         AND NOT EXISTS (SELECT 1 FROM leases l WHERE l.unit_id = $6 AND (l.worker_id = w.id OR \
             (l.state IN ('active', 'reported') AND (l.owner = w.owner OR ($7 = 1 AND w.net_prefix <> '' AND l.net_prefix = w.net_prefix)))))";
    let start = draw_key();
    let mut chosen: Option<i64> = None;
    for (cmp, order) in [(">=", "ASC"), ("<", "ASC")] {
        let q = format!(
            "SELECT w.id FROM workers w WHERE {eligible} AND w.id <> $9 AND w.draw_key {cmp} $8 ORDER BY w.draw_key {order} LIMIT 1"
        );
        chosen = sqlx::query_scalar(&q)
            .bind(&u.spec.kernel)
            .bind(now - policy.ask_window_s)
            .bind(policy.rules.leases_per_thread.max(1) as i64)
            .bind(known)
            .bind(policy.rules.probation_reports as i64)
            .bind(unit_id)
            .bind(i64::from(policy.distinct_prefix))
            .bind(start)
            .bind(except)
            .fetch_optional(&mut *c)
            .await?;
        if chosen.is_some() {
            break;
        }
    }
    if let Some(w) = chosen {
        sqlx::query("UPDATE units SET offered_to = $1, offered_at = $2 WHERE id = $3")
            .bind(w)
            .bind(now)
            .bind(unit_id)
            .execute(&mut *c)
            .await?;
        sqlx::query("UPDATE workers SET draw_key = $1 WHERE id = $2")
            .bind(draw_key())
            .bind(w)
            .execute(&mut *c)
            .await?;
    }
    let _ = load_worker;
    Ok(chosen)
}
