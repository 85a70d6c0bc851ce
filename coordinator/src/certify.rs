//! Issuing coverage certificates from the store ([`cubehunt_common::cert`] has the document
//! and its offline check).
//!
//! The certificate of a target for bound `B` lists the units that meet its regions up to `B`
//! ([`cert::needed_for_bound`]). Units planned by a later extension lie above the old bound,
//! so the certificate for an old bound keeps listing the same units after an extension.
//! A certificate is issued only when every listed unit is settled by non-quarantined workers
//! of at least two owners, when none of the coordinator's own checks on the target's units is
//! still waiting, and only after it passes the offline check itself. It is issued once and
//! kept in the store; later requests get the same document (until a unit it rests on is
//! reopened, which revokes it).

use crate::lifecycle::UnitState;
use crate::store::{Store, StoreError};
use cubehunt_common::cert::{self, CertUnit, Certificate, Finding, Settler};
use cubehunt_common::sign::SecretKey;
use cubehunt_common::Solution;
use std::collections::HashMap;

#[derive(Debug, thiserror::Error)]
pub enum CertError {
    #[error("{0}")]
    NotFound(String),
    #[error("{0}")]
    BadRequest(String),
    /// Not every needed unit is settled.
    #[error("{0}")]
    Incomplete(String),
    /// The store's data would not make a valid certificate.
    #[error("refusing to sign: the certificate would not hold:\n{}", .0.iter().map(|f| f.to_string()).collect::<Vec<_>>().join("\n"))]
    Invalid(Vec<Finding>),
    #[error(transparent)]
    Store(#[from] StoreError),
}

/// Build and sign the certificate of target `k` of `campaign` up to `bound` (default: the
/// target's bound).
pub async fn issue(
    store: &Store,
    key: &SecretKey,
    campaign: &str,
    k: i64,
    bound: Option<u64>,
    now: i64,
) -> Result<Certificate, CertError> {
    let c = store.campaign(campaign).await?.ok_or_else(|| {
        CertError::NotFound(format!(
            "no campaign named {campaign:?} (list them with `cubehunt-coordinator campaign list`)"
        ))
    })?;
    let targets = store.targets(c.id).await?;
    let t = targets.iter().find(|t| t.k == k).ok_or_else(|| {
        let ks: Vec<String> = targets.iter().map(|t| t.k.to_string()).collect();
        CertError::NotFound(format!(
            "campaign {campaign:?} has no target k = {k} (its targets: {})",
            ks.join(", ")
        ))
    })?;
    let bound = bound.unwrap_or(t.bound);
    if bound == 0 || bound > t.bound {
        return Err(CertError::BadRequest(format!(
            "bound {bound} is not covered: target k = {k} of campaign {campaign:?} is planned up to {}; ask for a bound between 1 and {}",
            t.bound, t.bound
        )));
    }
    if let Some(kept) = store.certificate(t.id, bound).await? {
        // Issued once: the stored document is the certificate.
        return serde_json::from_str(&kept.document).map_err(|e| {
            CertError::Invalid(vec![Finding::error(
                "certificate",
                format!("certificate {}", kept.id),
                format!("the stored document does not parse: {e}"),
            )])
        });
    }
    let rows = store.certificate_units(t.id).await?;
    let needed: Vec<_> = rows
        .into_iter()
        .filter(|u| cert::needed_for_bound(k, bound, &u.spec.rect))
        .collect();
    let unsettled: Vec<_> = needed
        .iter()
        .filter(|u| u.state != UnitState::Settled)
        .collect();
    if !unsettled.is_empty() {
        let examples: Vec<String> = unsettled
            .iter()
            .take(5)
            .map(|u| format!("unit {} {}", u.id(), u.state))
            .collect();
        return Err(CertError::Incomplete(format!(
            "target k = {k} of campaign {campaign:?} is not complete up to bound {bound}: {} of {} units are not settled yet ({}{}). \
             Wait until `campaign show {campaign}` says complete, or ask for a smaller --bound",
            unsettled.len(),
            needed.len(),
            examples.join(", "),
            if unsettled.len() > 5 { ", …" } else { "" }
        )));
    }
    let (spot, rechecks) = store.target_waiting_checks(t.id).await?;
    if spot > 0 || rechecks > 0 {
        return Err(CertError::Incomplete(format!(
            "target k = {k} of campaign {campaign:?} has every unit settled, but the coordinator's own checks are not finished \
             ({spot} spot-checked pieces and {rechecks} whole units to recompute); no certificate is issued until they are"
        )));
    }
    let workers: HashMap<i64, bool> = store
        .audit_workers()
        .await?
        .into_iter()
        .map(|w| (w.id, w.quarantined))
        .collect();
    let mut settlers: HashMap<i64, Vec<Settler>> = HashMap::new();
    for (unit, worker, owner) in store.certificate_settlers(t.id).await? {
        settlers
            .entry(unit)
            .or_default()
            .push(Settler { worker, owner });
    }
    let mut units = Vec::with_capacity(needed.len());
    let mut solutions: Vec<Solution> = Vec::new();
    for u in needed {
        let bad = |why: String| {
            CertError::Invalid(vec![Finding::error(
                "settlement",
                format!("unit {}", u.id()),
                why,
            )])
        };
        let outcome = u
            .settled
            .clone()
            .ok_or_else(|| bad("settled without an outcome".into()))?;
        let settled_by = settlers.remove(&u.id()).unwrap_or_default();
        if let Some(q) = settled_by
            .iter()
            .find(|s| workers.get(&s.worker).copied().unwrap_or(true))
        {
            return Err(bad(format!(
                "settler worker {} is quarantined or unknown",
                q.worker
            )));
        }
        solutions.extend(
            outcome
                .solutions
                .iter()
                .copied()
                .filter(|s| s.min_abs() <= bound as u128),
        );
        units.push(CertUnit {
            id: u.id(),
            rect: u.spec.rect,
            digest: outcome.digest,
            settled_by,
            rechecked: u.known.as_ref() == Some(&outcome),
        });
    }
    let doc = Certificate::issue(&c.name, k, bound, &c.kernel, now, units, solutions, key);
    let check = doc.clone();
    let doc = match tokio::task::spawn_blocking(move || cert::verify_certificate(&check)).await {
        Ok(Ok(_)) => doc,
        Ok(Err(findings)) => {
            return Err(CertError::Invalid(
                findings.into_iter().filter(|f| f.is_error()).collect(),
            ))
        }
        Err(e) => {
            return Err(CertError::Invalid(vec![Finding::error(
                "internal",
                "verification",
                e.to_string(),
            )]))
        }
    };
    let text = serde_json::to_string_pretty(&doc).map_err(|e| {
        CertError::Invalid(vec![Finding::error("internal", "document", e.to_string())])
    })?;
    let kept = store
        .keep_certificate(t.id, bound, &doc.root, &text, now)
        .await?;
    serde_json::from_str(&kept.document).map_err(|e| {
        CertError::Invalid(vec![Finding::error("certificate", "stored", e.to_string())])
    })
}
