//! The audit: re-derive every claim the store makes, from its raw rows.
//!
//! Checks, each finding naming the unit, report, worker or solution concerned:
//! 1. **units** — every unit's coordinator signature over its rebuilt [`UnitSpec`]; its target
//!    and campaign exist and agree; its rectangle is a valid piece of its region.
//! 2. **reports** — every report's worker signature over [`Report::canonical_bytes`] of the
//!    body as received; the stored columns (lease, unit, worker, digest, solutions,
//!    signature) equal the signed body; the body's rectangle, `k` and kernel are the unit's;
//!    the lease exists and belongs to that unit, worker and owner; the report's owner is its
//!    worker's owner.
//! 3. **settlement** — a recount from the reports with valid signatures (votes per distinct
//!    owner, outcome = digest and solutions): a settled unit's stored outcome is backed by at
//!    least two distinct owners and by more owners than any other outcome; verdicts agree with
//!    the recount; an open unit carries no settled outcome.
//! 4. **tiling** — per target, the units tile the small, equal and main regions up to the
//!    target's bound without a gap ([`cubehunt_common::tiling`]; overlaps are warnings).
//! 5. **solutions** — every stored solution is verified in exact arithmetic, lies within the
//!    bound, and is in the settled outcome of its unit and in an agreeing report; every settled
//!    solution is stored.
//! 6. **counts** — what the monitoring API shows ([`Store::target_stats`], [`Store::workers`],
//!    [`Store::metrics`]) equals a recount from the raw rows; the counters kept on units and
//!    workers equal a recount.
//! 7. **recheck** (optional) — a seeded random sample of settled units is recomputed with the
//!    local kernel and the digests compared.
//!
//! Nothing here writes to the store.

use crate::store::audit::{AuditReport, AuditTarget, AuditUnit, AuditWorker};
use crate::store::{Store, TargetRow};
use anyhow::Result;
use cubehunt_common::cert::{self, Finding};
use cubehunt_common::report::SignedReport;
use cubehunt_common::sign::{self, PublicKey};
use cubehunt_common::tiling::{self, Geometry, Tile};
use cubehunt_common::{kernel, Digest, Rect, Solution, UnitSpec, KERNEL_VERSION};
use serde::Serialize;
use std::collections::{BTreeMap, BTreeSet, HashMap};

/// Units read per page.
const PAGE: i64 = 2000;

#[derive(Clone, Debug, Default)]
pub struct AuditOptions {
    /// Fraction of settled units to recompute (0 = none).
    pub recheck: f64,
    pub seed: u64,
    /// Threads for the recheck (0 = all cores).
    pub threads: usize,
}

#[derive(Clone, Debug, Default, Serialize)]
pub struct Checked {
    pub campaigns: usize,
    pub targets: usize,
    pub units: usize,
    pub units_settled: usize,
    pub reports: usize,
    pub workers: usize,
    pub solutions: usize,
}

#[derive(Clone, Debug, Serialize)]
pub struct TargetResult {
    pub campaign: String,
    pub k: i64,
    pub bound: u64,
    pub units: usize,
    pub settled: usize,
    /// Every unit settled and the units tile the regions up to the bound.
    pub complete: bool,
    pub gaps: u64,
    pub overlaps: u64,
}

#[derive(Clone, Debug, Serialize)]
pub struct AuditResult {
    /// True when no finding is an error.
    pub ok: bool,
    pub errors: usize,
    pub warnings: usize,
    pub seed: u64,
    pub recheck_fraction: f64,
    /// Units recomputed by the recheck.
    pub rechecked: Vec<i64>,
    pub checked: Checked,
    pub targets: Vec<TargetResult>,
    pub findings: Vec<Finding>,
}

impl AuditResult {
    pub fn render_text(&self) -> String {
        use std::fmt::Write;
        let mut s = String::new();
        let c = &self.checked;
        let _ = writeln!(
            s,
            "audit: {} campaigns, {} targets, {} units ({} settled), {} reports, {} workers, {} solutions",
            c.campaigns, c.targets, c.units, c.units_settled, c.reports, c.workers, c.solutions
        );
        for t in &self.targets {
            let _ = writeln!(
                s,
                "  {} k = {} bound {}: {}/{} units settled, {}",
                t.campaign,
                t.k,
                t.bound,
                t.settled,
                t.units,
                if t.complete {
                    "complete".to_string()
                } else if t.gaps > 0 {
                    format!("{} gap(s) in the tiling", t.gaps)
                } else {
                    "in progress".to_string()
                }
            );
        }
        if self.recheck_fraction > 0.0 {
            let _ = writeln!(
                s,
                "  recheck: {} unit(s) recomputed (fraction {}, seed {})",
                self.rechecked.len(),
                self.recheck_fraction,
                self.seed
            );
        }
        for f in &self.findings {
            let _ = writeln!(s, "{f}");
        }
        let _ = writeln!(
            s,
            "{}: {} error(s), {} warning(s){}",
            if self.ok { "PASS" } else { "FAIL" },
            self.errors,
            self.warnings,
            if self.recheck_fraction > 0.0 {
                format!(
                    "; repeat with --recheck {} --seed {}",
                    self.recheck_fraction, self.seed
                )
            } else {
                String::new()
            }
        );
        s
    }
}

/// What the audit remembers of a unit after its page is gone.
struct Kept {
    target_id: i64,
    k: i64,
    rect: Rect,
    state: String,
    cost_us: u64,
    active_leases: i64,
    /// Settled outcome, when settled.
    settled: Option<(Digest, Vec<Solution>)>,
    /// Solutions claimed by reports in the settling majority.
    agreed_solutions: Vec<Solution>,
}

/// Per-worker recount from the report rows.
#[derive(Default, Clone)]
struct WorkerCount {
    reports: i64,
    agree: i64,
    errors: i64,
    active_leases: i64,
}

fn unit_subject(id: i64) -> String {
    format!("unit {id}")
}

fn parse_solutions(text: &str) -> std::result::Result<Vec<Solution>, String> {
    serde_json::from_str::<Vec<Solution>>(text).map_err(|e| {
        format!(
            "unreadable solution list {:?}: {e}",
            text.chars().take(80).collect::<String>()
        )
    })
}

/// Run every check on the store. `coordinator_key` is the key units must be signed with.
pub async fn audit(
    store: &Store,
    coordinator_key: &PublicKey,
    opts: &AuditOptions,
) -> Result<AuditResult> {
    let mut f: Vec<Finding> = Vec::new();
    let mut checked = Checked::default();

    // Workers, by id.
    let workers: Vec<AuditWorker> = store.audit_workers().await?;
    checked.workers = workers.len();
    let mut worker_keys: HashMap<i64, Option<PublicKey>> = HashMap::new();
    for w in &workers {
        let key = sign::public_from_hex(&w.public_key).ok();
        if key.is_none() {
            f.push(Finding::error(
                "workers",
                format!("worker {}", w.id),
                format!("public key {:?} is not a valid Ed25519 key", w.public_key),
            ));
        }
        worker_keys.insert(w.id, key);
    }
    let worker_by_id: HashMap<i64, &AuditWorker> = workers.iter().map(|w| (w.id, w)).collect();
    let mut wcount: HashMap<i64, WorkerCount> = HashMap::new();

    // Targets.
    let targets: Vec<AuditTarget> = store.audit_targets().await?;
    checked.targets = targets.len();
    checked.campaigns = targets
        .iter()
        .map(|t| t.campaign_id)
        .collect::<BTreeSet<_>>()
        .len();
    let target_by_id: HashMap<i64, &AuditTarget> = targets.iter().map(|t| (t.id, t)).collect();
    for (tid, cid) in store.audit_orphan_targets().await? {
        f.push(Finding::error(
            "units",
            format!("target {tid}"),
            format!("its campaign {cid} does not exist"),
        ));
    }
    for t in &targets {
        if let Err(e) = kernel::check_target(t.k) {
            f.push(Finding::error(
                "units",
                format!("target {} k = {}", t.campaign, t.k),
                e.to_string(),
            ));
        }
        if t.bound != t.campaign_bound {
            f.push(Finding::warning(
                "units",
                format!("target {} k = {}", t.campaign, t.k),
                format!(
                    "target bound {} differs from the campaign bound {}",
                    t.bound, t.campaign_bound
                ),
            ));
        }
    }

    // Active leases, per unit and worker.
    let mut active_per_unit: HashMap<i64, i64> = HashMap::new();
    for (_lease, unit, worker) in store.audit_active_leases().await? {
        *active_per_unit.entry(unit).or_default() += 1;
        wcount.entry(worker).or_default().active_leases += 1;
    }

    // Units and their reports, page by page.
    let mut kept: BTreeMap<i64, Kept> = BTreeMap::new();
    let mut after = 0i64;
    loop {
        let units = store.audit_units_page(after, PAGE).await?;
        if units.is_empty() {
            break;
        }
        let (lo, hi) = (units[0].id, units[units.len() - 1].id);
        after = hi;
        let reports = store.audit_reports_for_units(lo, hi).await?;
        let mut by_unit: HashMap<i64, Vec<&AuditReport>> = HashMap::new();
        for r in &reports {
            by_unit.entry(r.unit_id).or_default().push(r);
        }
        for u in &units {
            checked.units += 1;
            let rs = by_unit.remove(&u.id).unwrap_or_default();
            checked.reports += rs.len();
            if let Some(k) = check_unit(
                u,
                &rs,
                coordinator_key,
                &worker_by_id,
                &worker_keys,
                &target_by_id,
                &active_per_unit,
                &mut wcount,
                &mut f,
            ) {
                if k.state == "settled" {
                    checked.units_settled += 1;
                }
                kept.insert(u.id, k);
            }
        }
    }
    for (rid, uid) in store.audit_orphan_reports().await? {
        f.push(Finding::error(
            "reports",
            format!("report {rid}"),
            format!("its unit {uid} does not exist"),
        ));
    }

    // Tiling per target.
    let mut per_target: BTreeMap<i64, Vec<Tile>> = BTreeMap::new();
    for (id, k) in &kept {
        per_target.entry(k.target_id).or_default().push(Tile {
            id: *id,
            rect: k.rect,
        });
    }
    let mut target_results = Vec::new();
    for t in &targets {
        let tiles = per_target.remove(&t.id).unwrap_or_default();
        let settled = tiles
            .iter()
            .filter(|x| kept[&x.id].state == "settled")
            .count();
        let mut gaps = 0;
        let mut overlaps = 0;
        if kernel::check_target(t.k).is_ok() && (1..=kernel::MAX_Z).contains(&t.bound) {
            let check = tiling::check_tiling(&Geometry::of_target(t.k, t.bound), &tiles);
            gaps = check.gap_count;
            overlaps = check.overlap_count;
            for mut x in cert::tiling_findings(&check) {
                x.subject = format!("{} k = {}: {}", t.campaign, t.k, x.subject);
                f.push(x);
            }
            if check.gap_count == 0 && !check.malformed.is_empty() {
                gaps = check.malformed.len() as u64;
            }
        }
        target_results.push(TargetResult {
            campaign: t.campaign.clone(),
            k: t.k,
            bound: t.bound,
            units: tiles.len(),
            settled,
            complete: gaps == 0 && settled == tiles.len() && !tiles.is_empty(),
            gaps,
            overlaps,
        });
    }

    // Solutions table.
    let sol_rows = store.audit_solutions().await?;
    checked.solutions = sol_rows.len();
    let mut stored: HashMap<i64, BTreeSet<Solution>> = HashMap::new(); // per target
    for s in &sol_rows {
        let subj = format!("solution {} ({}, {}, {})", s.id, s.a, s.b, s.c);
        let Some(t) = target_by_id.get(&s.target_id) else {
            f.push(Finding::error(
                "solutions",
                subj,
                format!("its target {} does not exist", s.target_id),
            ));
            continue;
        };
        let sol = match Solution::parse(&[s.a.clone(), s.b.clone(), s.c.clone()]) {
            Ok(x) => x,
            Err(e) => {
                f.push(Finding::error("solutions", subj, e));
                continue;
            }
        };
        if sol.to_strings() != [s.a.clone(), s.b.clone(), s.c.clone()] {
            f.push(Finding::error(
                "solutions",
                &subj,
                "not in canonical form (three decimal integers sorted ascending)",
            ));
        }
        if !sol.verify(t.k) {
            f.push(Finding::error(
                "solutions",
                &subj,
                format!("the cubes do not sum to k = {} (exact arithmetic)", t.k),
            ));
        }
        if sol.min_abs() > t.bound as u128 {
            f.push(Finding::error(
                "solutions",
                &subj,
                format!(
                    "smallest |coordinate| {} exceeds the bound {}",
                    sol.min_abs(),
                    t.bound
                ),
            ));
        }
        match kept.get(&s.unit_id) {
            None => f.push(Finding::error(
                "solutions",
                &subj,
                format!("its unit {} does not exist", s.unit_id),
            )),
            Some(k) => {
                if k.target_id != s.target_id {
                    f.push(Finding::error(
                        "solutions",
                        &subj,
                        format!("its unit {} belongs to another target", s.unit_id),
                    ));
                }
                match &k.settled {
                    None => f.push(Finding::error(
                        "solutions",
                        &subj,
                        format!("its unit {} is not settled", s.unit_id),
                    )),
                    Some((_, sols)) if !sols.contains(&sol) => f.push(Finding::error(
                        "solutions",
                        &subj,
                        format!("not in the settled outcome of unit {}", s.unit_id),
                    )),
                    Some(_) => {}
                }
                if !k.agreed_solutions.contains(&sol) {
                    f.push(Finding::error(
                        "solutions",
                        &subj,
                        format!("no agreeing report of unit {} claims it", s.unit_id),
                    ));
                }
            }
        }
        stored.entry(s.target_id).or_default().insert(sol);
    }
    for (id, k) in &kept {
        if let Some((_, sols)) = &k.settled {
            for s in sols {
                if !stored.get(&k.target_id).is_some_and(|x| x.contains(s)) {
                    f.push(Finding::error(
                        "solutions",
                        unit_subject(*id),
                        format!("settled solution {s} is missing from the solutions table"),
                    ));
                }
            }
        }
    }

    // Counters on workers.
    for w in &workers {
        let c = wcount.get(&w.id).cloned().unwrap_or_default();
        for (what, stored_v, counted) in [
            ("reports", w.reports, c.reports),
            ("units_settled", w.units_settled, c.agree),
            ("errors", w.errors, c.errors),
        ] {
            if stored_v != counted {
                f.push(Finding::error(
                    "counts",
                    format!("worker {}", w.id),
                    format!("{what} is {stored_v} but its report rows give {counted}"),
                ));
            }
        }
    }

    // What the monitoring API shows, against a recount from the raw rows.
    check_monitoring(store, &targets, &kept, &stored, &workers, &wcount, &mut f).await?;

    // Recheck.
    let mut rechecked = Vec::new();
    if opts.recheck > 0.0 {
        let settled: Vec<i64> = kept
            .iter()
            .filter(|(_, k)| k.settled.is_some())
            .map(|(id, _)| *id)
            .collect();
        for i in cert::sample(&settled, opts.recheck, opts.seed) {
            let id = settled[i];
            let k = &kept[&id];
            let t = target_by_id.get(&k.target_id);
            let kernel_v = t.map(|t| t.kernel.as_str()).unwrap_or("");
            if kernel_v != KERNEL_VERSION {
                f.push(Finding::error(
                    "recheck",
                    unit_subject(id),
                    format!("the campaign pins kernel {kernel_v:?} but this program runs {KERNEL_VERSION:?}: cannot recompute; use a matching build"),
                ));
                continue;
            }
            let (digest, sols) = k.settled.as_ref().expect("settled");
            rechecked.push(id);
            let k_val = k.k;
            let rect = k.rect;
            let digest = *digest;
            let sols = sols.clone();
            let threads = opts.threads;
            let out = tokio::task::spawn_blocking(move || {
                cert::recheck_unit(k_val, id, &rect, &digest, &sols, threads)
            })
            .await?;
            f.extend(out);
        }
    }

    f.sort_by(|a, b| b.severity.cmp(&a.severity));
    let errors = f.iter().filter(|x| x.is_error()).count();
    let warnings = f.len() - errors;
    Ok(AuditResult {
        ok: errors == 0,
        errors,
        warnings,
        seed: opts.seed,
        recheck_fraction: opts.recheck,
        rechecked,
        checked,
        targets: target_results,
        findings: f,
    })
}

/// Checks 1–3 for one unit and its reports. Returns what later checks need, or `None` when
/// the unit is too broken to take part (no target, unreadable rectangle).
#[allow(clippy::too_many_arguments)]
fn check_unit(
    u: &AuditUnit,
    reports: &[&AuditReport],
    coordinator_key: &PublicKey,
    workers: &HashMap<i64, &AuditWorker>,
    worker_keys: &HashMap<i64, Option<PublicKey>>,
    targets: &HashMap<i64, &AuditTarget>,
    active_per_unit: &HashMap<i64, i64>,
    wcount: &mut HashMap<i64, WorkerCount>,
    f: &mut Vec<Finding>,
) -> Option<Kept> {
    let subj = unit_subject(u.id);
    let rect = match &u.rect {
        Ok(r) => *r,
        Err(region) => {
            f.push(Finding::error(
                "units",
                &subj,
                format!("region {region:?} is not small, equal or main"),
            ));
            return None;
        }
    };
    let (Some(k), Some(campaign), Some(kernel_v)) = (u.k, u.campaign.clone(), u.kernel.clone())
    else {
        f.push(Finding::error(
            "units",
            &subj,
            format!(
                "its target {} or campaign {} does not exist",
                u.target_id, u.campaign_id
            ),
        ));
        return None;
    };
    if u.target_campaign_id != Some(u.campaign_id) {
        f.push(Finding::error(
            "units",
            &subj,
            format!(
                "campaign {} differs from its target's campaign {:?}",
                u.campaign_id, u.target_campaign_id
            ),
        ));
    }
    if !targets.contains_key(&u.target_id) {
        f.push(Finding::error(
            "units",
            &subj,
            format!("its target {} does not exist", u.target_id),
        ));
        return None;
    }

    // 1. Coordinator signature.
    let spec = UnitSpec {
        unit_id: u.id,
        campaign: campaign.clone(),
        k,
        bound: u.bound,
        kernel: kernel_v.clone(),
        rect,
        cost: u.cost_us,
    };
    if let Err(e) = sign::verify(coordinator_key, &spec.canonical_bytes(), &u.signature) {
        f.push(Finding::error(
            "signature",
            &subj,
            format!("coordinator signature over the unit: {e} (the unit row was altered, or signed by another key)"),
        ));
    }
    if let Err(e) = kernel::check_rect(k, &rect) {
        f.push(Finding::error("units", &subj, e.to_string()));
    }

    // 2. Reports.
    struct Counted {
        id: i64,
        owner: String,
        key: (String, String),
        verdict: String,
        solutions: Vec<Solution>,
    }
    let mut counted: Vec<Counted> = Vec::new();
    for r in reports {
        let rs = format!("report {} (unit {}, worker {})", r.id, u.id, r.worker_id);
        let wc = wcount.entry(r.worker_id).or_default();
        wc.reports += 1;
        match r.verdict.as_str() {
            "agree" => wc.agree += 1,
            "disagree" | "rejected" => wc.errors += 1,
            _ => {}
        }
        let Some(w) = workers.get(&r.worker_id) else {
            f.push(Finding::error(
                "reports",
                &rs,
                format!("its worker {} does not exist", r.worker_id),
            ));
            continue;
        };
        let mut valid = true;
        if r.owner != w.owner {
            f.push(Finding::error(
                "reports",
                &rs,
                format!(
                    "owner {:?} differs from its worker's owner {:?}",
                    r.owner, w.owner
                ),
            ));
        }
        match &r.lease {
            None => {
                f.push(Finding::error(
                    "reports",
                    &rs,
                    format!("its lease {} does not exist", r.lease_id),
                ));
                valid = false;
            }
            Some(l) => {
                if l.unit_id != u.id || l.worker_id != r.worker_id {
                    f.push(Finding::error(
                        "reports",
                        &rs,
                        format!(
                            "its lease {} was for unit {} and worker {}",
                            r.lease_id, l.unit_id, l.worker_id
                        ),
                    ));
                    valid = false;
                }
                if l.owner != w.owner {
                    f.push(Finding::error(
                        "reports",
                        &rs,
                        format!(
                            "its lease was issued to owner {:?}, the worker's owner is {:?}",
                            l.owner, w.owner
                        ),
                    ));
                }
                let expect = if r.verdict == "rejected" {
                    "rejected"
                } else {
                    "reported"
                };
                if l.state != expect {
                    f.push(Finding::warning(
                        "reports",
                        &rs,
                        format!(
                            "its lease {} is in state {:?}, expected {expect:?}",
                            r.lease_id, l.state
                        ),
                    ));
                }
            }
        }
        let body: SignedReport = match serde_json::from_str(&r.body) {
            Ok(b) => b,
            Err(e) => {
                f.push(Finding::error(
                    "reports",
                    &rs,
                    format!("stored body is not a signed report: {e}"),
                ));
                continue;
            }
        };
        let b = &body.report;
        if body.signature != r.signature {
            f.push(Finding::error(
                "signature",
                &rs,
                "the signature column differs from the signature in the stored body",
            ));
            valid = false;
        }
        match worker_keys.get(&r.worker_id).cloned().flatten() {
            None => valid = false,
            Some(pk) => {
                if let Err(e) = sign::verify(&pk, &b.canonical_bytes(), &r.signature) {
                    f.push(Finding::error(
                        "signature",
                        &rs,
                        format!("worker signature over the report: {e} (the report was altered, or is not this worker's)"),
                    ));
                    valid = false;
                }
            }
        }
        // The coordinator stores claimed solutions sorted and without repeats.
        let mut body_sols = b.solutions.clone();
        body_sols.sort();
        body_sols.dedup();
        let sols_col = parse_solutions(&r.solutions);
        let mut mismatch = Vec::new();
        if b.lease_id != r.lease_id {
            mismatch.push(format!("lease {} vs {}", b.lease_id, r.lease_id));
        }
        if b.unit_id != u.id {
            mismatch.push(format!("unit {} vs {}", b.unit_id, u.id));
        }
        if b.worker_id != r.worker_id {
            mismatch.push(format!("worker {} vs {}", b.worker_id, r.worker_id));
        }
        if b.digest.to_string() != r.digest {
            mismatch.push(format!("digest {} vs {}", b.digest, r.digest));
        }
        if b.digest.candidates as i64 != r.candidates {
            mismatch.push(format!(
                "candidates {} vs {}",
                b.digest.candidates, r.candidates
            ));
        }
        match &sols_col {
            Ok(s) if *s == body_sols => {}
            Ok(_) => mismatch.push("solutions".to_string()),
            Err(e) => mismatch.push(e.clone()),
        }
        if b.rect != rect || b.k != k {
            mismatch.push(format!(
                "rectangle k = {} {} vs the unit's k = {k} {rect}",
                b.k, b.rect
            ));
        }
        if !mismatch.is_empty() {
            f.push(Finding::error(
                "reports",
                &rs,
                format!(
                    "stored columns differ from the signed body: {}",
                    mismatch.join("; ")
                ),
            ));
            valid = false;
        }
        if b.kernel != kernel_v && r.verdict != "rejected" {
            f.push(Finding::error(
                "reports",
                &rs,
                format!(
                    "computed with kernel {:?}, the campaign pins {kernel_v:?}",
                    b.kernel
                ),
            ));
            valid = false;
        }
        if r.verdict == "rejected" {
            continue;
        }
        if !matches!(r.verdict.as_str(), "pending" | "agree" | "disagree") {
            f.push(Finding::error(
                "reports",
                &rs,
                format!("unknown verdict {:?}", r.verdict),
            ));
        }
        if valid {
            let sols = body_sols;
            counted.push(Counted {
                id: r.id,
                owner: w.owner.clone(),
                key: (
                    b.digest.to_string(),
                    serde_json::to_string(&sols).expect("solutions serialise"),
                ),
                verdict: r.verdict.clone(),
                solutions: sols,
            });
        }
    }
    let n_counted = reports.iter().filter(|r| r.verdict != "rejected").count() as i64;
    if u.reports != n_counted {
        f.push(Finding::error(
            "counts",
            &subj,
            format!(
                "reports counter is {} but {} counted report rows exist",
                u.reports, n_counted
            ),
        ));
    }
    let active = active_per_unit.get(&u.id).copied().unwrap_or(0);
    if u.active != active {
        f.push(Finding::error(
            "counts",
            &subj,
            format!(
                "active counter is {} but {} active lease rows exist",
                u.active, active
            ),
        ));
    }

    // 3. Recount: owners per outcome.
    let mut owners: BTreeMap<&(String, String), BTreeSet<&str>> = BTreeMap::new();
    for c in &counted {
        owners.entry(&c.key).or_default().insert(&c.owner);
    }
    let mut tally: Vec<(usize, &(String, String))> =
        owners.iter().map(|(k, o)| (o.len(), *k)).collect();
    tally.sort_by(|a, b| b.0.cmp(&a.0));
    let winner = match (tally.first(), tally.get(1)) {
        (Some(&(n, key)), second) if n >= 2 && second.is_none_or(|s| s.0 < n) => Some(key.clone()),
        _ => None,
    };

    let mut settled = None;
    let mut agreed_solutions = Vec::new();
    match u.state.as_str() {
        "settled" => {
            let (Some(d), Some(s)) = (&u.settled_digest, &u.settled_solutions) else {
                f.push(Finding::error(
                    "settlement",
                    &subj,
                    "settled without a stored digest or solution list",
                ));
                return Some(Kept {
                    target_id: u.target_id,
                    k,
                    rect,
                    state: u.state.clone(),
                    cost_us: u.cost_us,
                    active_leases: active,
                    settled: None,
                    agreed_solutions,
                });
            };
            let stored_key = match (d.parse::<Digest>(), parse_solutions(s)) {
                (Ok(dg), Ok(sols)) => {
                    for x in &sols {
                        if !x.verify(k) {
                            f.push(Finding::error("solutions", &subj, format!("settled solution {x} does not sum to k = {k} (exact arithmetic)")));
                        }
                    }
                    let key = (
                        dg.to_string(),
                        serde_json::to_string(&sols).expect("solutions serialise"),
                    );
                    settled = Some((dg, sols));
                    key
                }
                (Err(e), _) => {
                    f.push(Finding::error(
                        "settlement",
                        &subj,
                        format!("settled digest: {e}"),
                    ));
                    (d.clone(), s.clone())
                }
                (_, Err(e)) => {
                    f.push(Finding::error(
                        "settlement",
                        &subj,
                        format!("settled solutions: {e}"),
                    ));
                    (d.clone(), s.clone())
                }
            };
            let backers: Vec<&Counted> = counted.iter().filter(|c| c.key == stored_key).collect();
            let distinct: BTreeSet<&str> = backers.iter().map(|c| c.owner.as_str()).collect();
            if backers.len() >= 2 && distinct.len() < 2 {
                let ids: Vec<String> = backers.iter().map(|c| c.id.to_string()).collect();
                f.push(Finding::error(
                    "settlement",
                    &subj,
                    format!(
                        "settled by {} reports of a single owner {:?} (reports {}): agreeing reports must come from distinct owners",
                        backers.len(),
                        distinct.iter().next().copied().unwrap_or(""),
                        ids.join(", ")
                    ),
                ));
            } else if winner.as_ref() != Some(&stored_key) {
                let why = match &winner {
                    Some(w) => format!("the reports' majority is digest {} with solutions {}", w.0, w.1),
                    None => format!(
                        "no outcome is backed by two or more distinct owners and more owners than any other ({} valid counted report(s), {} backing the stored outcome)",
                        counted.len(),
                        backers.len()
                    ),
                };
                f.push(Finding::error(
                    "settlement",
                    &subj,
                    format!(
                        "settled as digest {} with solutions {}, but {why}",
                        stored_key.0, stored_key.1
                    ),
                ));
            }
            for c in &counted {
                let expect = if c.key == stored_key {
                    "agree"
                } else {
                    "disagree"
                };
                if c.verdict != expect {
                    f.push(Finding::error(
                        "settlement",
                        format!("report {} (unit {})", c.id, u.id),
                        format!("verdict {:?}, but the recount says {expect:?}", c.verdict),
                    ));
                }
                if c.key == stored_key {
                    agreed_solutions.extend(c.solutions.iter().copied());
                }
            }
            if u.need != 0 {
                f.push(Finding::warning(
                    "counts",
                    &subj,
                    format!("settled but still wants {} lease(s)", u.need),
                ));
            }
        }
        "open" | "disputed" => {
            if u.settled_digest.is_some() || u.settled_solutions.is_some() || u.settled_at.is_some()
            {
                f.push(Finding::error(
                    "settlement",
                    &subj,
                    format!("state {:?} but a settled outcome is stored", u.state),
                ));
            }
            for c in &counted {
                if c.verdict != "pending" {
                    f.push(Finding::error(
                        "settlement",
                        format!("report {} (unit {})", c.id, u.id),
                        format!("verdict {:?} on a unit that is not settled", c.verdict),
                    ));
                }
            }
            if winner.is_some() {
                f.push(Finding::warning(
                    "settlement",
                    &subj,
                    format!(
                        "state {:?} although its reports agree by a majority of distinct owners",
                        u.state
                    ),
                ));
            }
        }
        other => f.push(Finding::error(
            "units",
            &subj,
            format!("unknown state {other:?}"),
        )),
    }
    Some(Kept {
        target_id: u.target_id,
        k,
        rect,
        state: u.state.clone(),
        cost_us: u.cost_us,
        active_leases: active,
        settled,
        agreed_solutions,
    })
}

/// Check 6: the store's monitoring views against a recount from raw rows.
async fn check_monitoring(
    store: &Store,
    targets: &[AuditTarget],
    kept: &BTreeMap<i64, Kept>,
    stored: &HashMap<i64, BTreeSet<Solution>>,
    workers: &[AuditWorker],
    wcount: &HashMap<i64, WorkerCount>,
    f: &mut Vec<Finding>,
) -> Result<()> {
    #[derive(Default, Debug, PartialEq)]
    struct Tally {
        total: i64,
        open: i64,
        leased: i64,
        settled: i64,
        disputed: i64,
        cost_total: i64,
        cost_settled: i64,
    }
    let mut per_target: HashMap<i64, Tally> = HashMap::new();
    for k in kept.values() {
        let t = per_target.entry(k.target_id).or_default();
        t.total += 1;
        t.cost_total += k.cost_us as i64;
        if k.active_leases > 0 {
            t.leased += 1;
        }
        match k.state.as_str() {
            "settled" => {
                t.settled += 1;
                t.cost_settled += k.cost_us as i64;
            }
            "disputed" => t.disputed += 1,
            _ => t.open += 1,
        }
    }
    for t in targets {
        let row = TargetRow {
            id: t.id,
            campaign_id: t.campaign_id,
            k: t.k,
            bound: t.bound,
            z0: t.z0,
        };
        let s = store.target_stats(row, 0).await?;
        let shown = Tally {
            total: s.units.total,
            open: s.units.open,
            leased: s.units.leased,
            settled: s.units.settled,
            disputed: s.units.disputed,
            cost_total: s.cost_total_us,
            cost_settled: s.cost_settled_us,
        };
        let mine = per_target.remove(&t.id).unwrap_or_default();
        if shown != mine {
            f.push(Finding::error(
                "counts",
                format!("target {} k = {}", t.campaign, t.k),
                format!("the monitoring view shows {shown:?}, the unit rows give {mine:?}"),
            ));
        }
        let mine_s: Vec<Solution> = stored
            .get(&t.id)
            .map(|x| x.iter().copied().collect())
            .unwrap_or_default();
        if s.solutions != mine_s {
            f.push(Finding::error(
                "counts",
                format!("target {} k = {}", t.campaign, t.k),
                format!(
                    "the monitoring view shows {} solution(s), the solution rows give {}",
                    s.solutions.len(),
                    mine_s.len()
                ),
            ));
        }
    }

    let views = store.workers().await?;
    let by_id: HashMap<i64, &AuditWorker> = workers.iter().map(|w| (w.id, w)).collect();
    if views.len() != workers.len() {
        f.push(Finding::error(
            "counts",
            "workers",
            format!(
                "the monitoring view lists {} workers, the store holds {}",
                views.len(),
                workers.len()
            ),
        ));
    }
    for v in &views {
        let c = wcount.get(&v.id).cloned().unwrap_or_default();
        let Some(w) = by_id.get(&v.id) else { continue };
        let shown = (
            v.reports,
            v.units_settled,
            v.errors,
            v.quarantined,
            v.active_leases,
        );
        let mine = (c.reports, c.agree, c.errors, w.quarantined, c.active_leases);
        if shown != mine {
            f.push(Finding::error(
                "counts",
                format!("worker {}", v.id),
                format!("the monitoring view shows (reports, settled, errors, quarantined, active leases) = {shown:?}, the rows give {mine:?}"),
            ));
        }
    }

    let m = store.metrics().await?;
    let mut units_by: BTreeMap<(String, String), i64> = BTreeMap::new();
    let campaign_of: HashMap<i64, &str> = targets
        .iter()
        .map(|t| (t.id, t.campaign.as_str()))
        .collect();
    for k in kept.values() {
        if let Some(c) = campaign_of.get(&k.target_id) {
            *units_by
                .entry((c.to_string(), k.state.clone()))
                .or_default() += 1;
        }
    }
    let shown: BTreeMap<(String, String), i64> = m
        .units
        .iter()
        .map(|(c, s, n)| ((c.clone(), s.clone()), *n))
        .collect();
    if shown != units_by {
        f.push(Finding::error(
            "counts",
            "/metrics",
            format!("units by campaign and state: shown {shown:?}, rows give {units_by:?}"),
        ));
    }
    let active: i64 = wcount.values().map(|c| c.active_leases).sum();
    if m.leases_active != active {
        f.push(Finding::error(
            "counts",
            "/metrics",
            format!(
                "active leases: shown {}, rows give {active}",
                m.leases_active
            ),
        ));
    }
    if m.workers != workers.len() as i64
        || m.workers_quarantined != workers.iter().filter(|w| w.quarantined).count() as i64
    {
        f.push(Finding::error(
            "counts",
            "/metrics",
            format!(
                "workers: shown {} ({} quarantined), rows give {}",
                m.workers,
                m.workers_quarantined,
                workers.len()
            ),
        ));
    }
    let sols: i64 = stored.values().map(|s| s.len() as i64).sum();
    if m.solutions != sols {
        f.push(Finding::error(
            "counts",
            "/metrics",
            format!("solutions: shown {}, rows give {sols}", m.solutions),
        ));
    }
    Ok(())
}
