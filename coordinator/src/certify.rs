//! Issuing coverage certificates from the store ([`cubehunt_common::cert`] has the document
//! and its offline check).
//!
//! The certificate of a target for bound `B` lists the units that meet its regions up to `B`
//! ([`cert::needed_for_bound`]). Units planned by a later extension lie above the old bound,
//! so the certificate for an old bound keeps listing the same units after an extension.
//! A certificate is issued only when every listed unit is settled, and only after it passes
//! the offline check itself.

use crate::store::{Store, StoreError};
use cubehunt_common::cert::{self, CertUnit, Certificate, Finding, Settler};
use cubehunt_common::sign::SecretKey;
use cubehunt_common::{Digest, Solution};
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
    let rows = store.certificate_units(t.id).await?;
    let needed: Vec<_> = rows
        .into_iter()
        .filter(|u| {
            u.rect
                .as_ref()
                .is_ok_and(|r| cert::needed_for_bound(k, bound, r))
        })
        .collect();
    let unsettled: Vec<_> = needed.iter().filter(|u| u.state != "settled").collect();
    if !unsettled.is_empty() {
        let examples: Vec<String> = unsettled
            .iter()
            .take(5)
            .map(|u| format!("unit {} {}", u.id, u.state))
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
                format!("unit {}", u.id),
                why,
            )])
        };
        let digest: Digest = u
            .settled_digest
            .as_deref()
            .ok_or_else(|| bad("settled without a digest".into()))?
            .parse()
            .map_err(|e| bad(format!("settled digest: {e}")))?;
        let sols: Vec<Solution> =
            serde_json::from_str(u.settled_solutions.as_deref().unwrap_or("[]"))
                .map_err(|e| bad(format!("settled solutions: {e}")))?;
        solutions.extend(sols.into_iter().filter(|s| s.min_abs() <= bound as u128));
        units.push(CertUnit {
            id: u.id,
            rect: u.rect.expect("filtered above"),
            digest,
            settled_by: settlers.remove(&u.id).unwrap_or_default(),
        });
    }
    let doc = Certificate::issue(&c.name, k, bound, &c.kernel, now, units, solutions, key);
    let check = doc.clone();
    match tokio::task::spawn_blocking(move || cert::verify_certificate(&check)).await {
        Ok(Ok(_)) => Ok(doc),
        Ok(Err(findings)) => Err(CertError::Invalid(
            findings.into_iter().filter(|f| f.is_error()).collect(),
        )),
        Err(e) => Err(CertError::Invalid(vec![Finding::error(
            "internal",
            "verification",
            e.to_string(),
        )])),
    }
}
