//! The audit: re-derive every claim the store makes, from its raw rows.
//!
//! Checks, each finding naming the unit, report, worker or solution concerned (the check
//! names are the `check` field of each finding):
//! 1. **workers** — every worker's public key is a valid Ed25519 key; its owner is in
//!    canonical (lower-case) form; every quarantined worker is named by an incident.
//! 2. **units** — every unit's coordinator signature over its rebuilt [`UnitSpec`]; its
//!    target and campaign exist and agree; its rectangle is a valid piece of its region;
//!    rows that point at missing rows.
//! 3. **reports** — every report's worker signature over
//!    [`cubehunt_common::report::signed_bytes`] of its stored columns and its unit; its lease
//!    exists, is for that unit, worker and owner, and is in the state its verdict implies; a
//!    report that votes claims as many pieces as the unit has, true solutions inside the unit,
//!    the counts the coordinator can derive (small and equal regions, closed forms), and does
//!    not belong to a quarantined worker.
//! 4. **settlement** — an independent recount of the agreement rule of
//!    [`crate::lifecycle`]: a settled unit's outcome is backed by reports of at least two
//!    distinct owners, none quarantined, and by more owners than any other outcome, or is the
//!    organiser's own result; verdicts agree with the recount; a unit that is not settled
//!    carries no settled outcome.
//! 5. **spot checks** — every spot check's Merkle proof leads from the claimed piece digest
//!    to the root its report signed; a passed check's computed digest is the claim; a failed
//!    one's is not, its report is marked wrong and its worker quarantined.
//! 6. **incidents** — every worker an incident quarantined is quarantined; every report it
//!    voided is voided.
//! 7. **tiling** — per target, the units tile the small, equal and main regions up to the
//!    target's bound without a gap ([`cubehunt_common::tiling`]; overlaps are warnings).
//! 8. **solutions** — every stored solution is verified in exact arithmetic, lies within the
//!    bound, and is in the settled outcome of its unit and in an agreeing report; every settled
//!    solution is stored.
//! 9. **certificates** — every kept certificate holds offline
//!    ([`cert::verify_certificate`]), is signed by this coordinator's key, and, unless revoked,
//!    says what the store says: each unit settled with that digest by those workers, none of
//!    them quarantined.
//! 10. **counts** — the counters kept on units and workers, and what the monitoring API shows
//!     ([`Store::target_stats`], [`Store::workers`], [`Store::metrics`]), equal a recount from
//!     the raw rows.
//! 11. **recheck** (optional) — a seeded random sample of settled units is recomputed with
//!     the local kernel and the digests compared.
//!
//! Nothing here writes to the store.

use crate::lifecycle::{self, Outcome, UnitState, Verdict};
use crate::store::checks::committed;
use crate::store::{
    CampaignRow, CertificateRow, LeaseRow, ReportRow, SpotCheckRow, Store, TargetRow, UnitRow,
    WorkerRow,
};
use anyhow::Result;
use cubehunt_common::cert::{self, Certificate, Finding};
use cubehunt_common::report::{signed_bytes, SignedFields};
use cubehunt_common::sign::{self, PublicKey};
use cubehunt_common::tiling::{self, Geometry, Tile};
use cubehunt_common::{kernel, pieces, Region, Solution, KERNEL_VERSION};
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
    pub spot_checks: usize,
    pub incidents: usize,
    pub workers: usize,
    pub solutions: usize,
    pub certificates: usize,
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
            "audit: {} campaigns, {} targets, {} units ({} settled), {} reports, {} spot checks, {} incidents, {} workers, {} solutions, {} certificates",
            c.campaigns, c.targets, c.units, c.units_settled, c.reports, c.spot_checks, c.incidents, c.workers, c.solutions, c.certificates
        );
        for t in &self.targets {
            let state = if t.complete {
                "complete".to_string()
            } else if t.gaps > 0 {
                format!("{} gap(s) in the tiling", t.gaps)
            } else {
                "in progress".to_string()
            };
            let _ = writeln!(
                s,
                "  {} k = {} bound {}: {}/{} units settled, {state}",
                t.campaign, t.k, t.bound, t.settled, t.units
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
        let again = if self.recheck_fraction > 0.0 {
            format!(
                "; repeat with --recheck {} --seed {}",
                self.recheck_fraction, self.seed
            )
        } else {
            String::new()
        };
        let verdict = if self.ok { "PASS" } else { "FAIL" };
        let _ = writeln!(
            s,
            "{verdict}: {} error(s), {} warning(s){again}",
            self.errors, self.warnings
        );
        s
    }
}

/// What the audit remembers of a unit after its page is gone.
struct Kept {
    target_id: i64,
    k: i64,
    rect: cubehunt_common::Rect,
    state: UnitState,
    cost_us: u64,
    active_leases: i64,
    settled: Option<Outcome>,
    /// Solutions claimed by the reports in the settling outcome.
    agreed_solutions: BTreeSet<Solution>,
    /// (worker, owner) of the reports in the settling outcome.
    settlers: BTreeSet<(i64, String)>,
}

/// Per-worker recount from the raw rows.
#[derive(Default, Clone)]
struct WorkerCount {
    reports: i64,
    settled: i64,
    errors: i64,
    confirmed: i64,
    active_leases: i64,
}

/// A report that passed the report checks and votes.
struct Vote<'a> {
    report: &'a ReportRow,
    outcome: Outcome,
}

/// The rows of one unit, read together.
struct UnitRows<'a> {
    unit: &'a UnitRow,
    reports: Vec<&'a ReportRow>,
    leases: Vec<&'a LeaseRow>,
    checks: Vec<&'a SpotCheckRow>,
}

/// The audit's shared state: what it has read, what it has recounted, what it found.
struct Audit<'a> {
    store: &'a Store,
    key: PublicKey,
    findings: Vec<Finding>,
    checked: Checked,
    workers: HashMap<i64, WorkerRow>,
    keys: HashMap<i64, PublicKey>,
    targets: Vec<(TargetRow, CampaignRow)>,
    target_index: HashMap<i64, usize>,
    kept: BTreeMap<i64, Kept>,
    counts: HashMap<i64, WorkerCount>,
    /// Verdict of every report, for the incident check.
    verdicts: HashMap<i64, Verdict>,
}

/// Run every check on the store. `coordinator_key` is the key units must be signed with.
pub async fn audit(
    store: &Store,
    coordinator_key: &PublicKey,
    opts: &AuditOptions,
) -> Result<AuditResult> {
    let mut a = Audit {
        store,
        key: *coordinator_key,
        findings: Vec::new(),
        checked: Checked::default(),
        workers: HashMap::new(),
        keys: HashMap::new(),
        targets: Vec::new(),
        target_index: HashMap::new(),
        kept: BTreeMap::new(),
        counts: HashMap::new(),
        verdicts: HashMap::new(),
    };
    a.read_workers().await?;
    a.read_targets().await?;
    a.orphans().await?;
    a.units().await?;
    let targets = a.tiling();
    let stored = a.solutions().await?;
    a.incidents().await?;
    a.certificates().await?;
    a.worker_counters();
    a.monitoring(&stored).await?;
    let rechecked = a.recheck(opts).await?;

    let mut f = a.findings;
    f.sort_by_key(|x| std::cmp::Reverse(x.severity));
    let errors = f.iter().filter(|x| x.is_error()).count();
    Ok(AuditResult {
        ok: errors == 0,
        errors,
        warnings: f.len() - errors,
        seed: opts.seed,
        recheck_fraction: opts.recheck,
        rechecked,
        checked: a.checked,
        targets,
        findings: f,
    })
}

fn unit_subject(id: i64) -> String {
    format!("unit {id}")
}

fn report_subject(r: &ReportRow) -> String {
    format!(
        "report {} (unit {}, worker {})",
        r.id, r.unit_id, r.worker_id
    )
}

impl Audit<'_> {
    fn error(&mut self, check: &str, subject: impl Into<String>, message: impl Into<String>) {
        self.findings.push(Finding::error(check, subject, message));
    }

    fn warning(&mut self, check: &str, subject: impl Into<String>, message: impl Into<String>) {
        self.findings
            .push(Finding::warning(check, subject, message));
    }

    fn quarantined(&self, worker: i64) -> bool {
        self.workers.get(&worker).is_some_and(|w| w.quarantined)
    }

    fn target(&self, id: i64) -> Option<&(TargetRow, CampaignRow)> {
        self.target_index.get(&id).map(|&i| &self.targets[i])
    }

    /// Check 1 (keys and owners; the incident part is in [`Audit::incidents`]).
    async fn read_workers(&mut self) -> Result<()> {
        let workers = self.store.audit_workers().await?;
        self.checked.workers = workers.len();
        for w in workers {
            match sign::public_from_hex(&w.public_key) {
                Ok(k) => {
                    self.keys.insert(w.id, k);
                }
                Err(_) => self.error(
                    "workers",
                    format!("worker {}", w.id),
                    format!("public key {:?} is not a valid Ed25519 key", w.public_key),
                ),
            }
            if w.owner != w.owner.to_lowercase() || w.owner.trim() != w.owner {
                self.error(
                    "workers",
                    format!("worker {}", w.id),
                    format!("owner {:?} is not in canonical form", w.owner),
                );
            }
            self.workers.insert(w.id, w);
        }
        Ok(())
    }

    async fn read_targets(&mut self) -> Result<()> {
        self.targets = self.store.audit_targets().await?;
        self.checked.targets = self.targets.len();
        self.checked.campaigns = self
            .targets
            .iter()
            .map(|(_, c)| c.id)
            .collect::<BTreeSet<_>>()
            .len();
        self.target_index = self
            .targets
            .iter()
            .enumerate()
            .map(|(i, (t, _))| (t.id, i))
            .collect();
        let mut found = Vec::new();
        for (t, c) in &self.targets {
            let subject = format!("target {} k = {}", c.name, t.k);
            if let Err(e) = kernel::check_target(t.k) {
                found.push(Finding::error("units", &subject, e.to_string()));
            }
            if t.bound != c.bound {
                found.push(Finding::warning(
                    "units",
                    &subject,
                    format!(
                        "target bound {} differs from the campaign bound {}",
                        t.bound, c.bound
                    ),
                ));
            }
        }
        self.findings.extend(found);
        Ok(())
    }

    /// Check 2, rows pointing at missing rows.
    async fn orphans(&mut self) -> Result<()> {
        for (table, id, what) in self.store.audit_orphans().await? {
            self.error(
                "units",
                format!("{table} row {id}"),
                format!("{what} does not exist"),
            );
        }
        Ok(())
    }

    /// Checks 2–5, page by page of units.
    async fn units(&mut self) -> Result<()> {
        let mut after = 0i64;
        loop {
            let units = self.store.audit_units_page(after, PAGE).await?;
            let (Some(first), Some(last)) = (units.first(), units.last()) else {
                break;
            };
            let (lo, hi) = (first.id(), last.id());
            after = hi;
            let reports = self.store.audit_reports_for_units(lo, hi).await?;
            let leases = self.store.audit_leases_for_units(lo, hi).await?;
            let checks = self.store.audit_spot_checks_for_units(lo, hi).await?;
            let mut rows: BTreeMap<i64, UnitRows> = units
                .iter()
                .map(|u| {
                    let rows = UnitRows {
                        unit: u,
                        reports: Vec::new(),
                        leases: Vec::new(),
                        checks: Vec::new(),
                    };
                    (u.id(), rows)
                })
                .collect();
            for r in &reports {
                if let Some(x) = rows.get_mut(&r.unit_id) {
                    x.reports.push(r);
                }
            }
            for l in &leases {
                if let Some(x) = rows.get_mut(&l.unit_id) {
                    x.leases.push(l);
                }
            }
            for c in &checks {
                if let Some(x) = rows.get_mut(&c.unit_id) {
                    x.checks.push(c);
                }
            }
            for x in rows.values() {
                self.unit(x);
            }
        }
        Ok(())
    }

    fn unit(&mut self, x: &UnitRows) {
        let u = x.unit;
        self.checked.units += 1;
        self.checked.reports += x.reports.len();
        self.checked.spot_checks += x.checks.len();
        self.unit_row(u);
        let mut active = 0;
        for l in &x.leases {
            if l.state == "active" {
                active += 1;
                self.counts.entry(l.worker_id).or_default().active_leases += 1;
            }
        }
        if u.active != active {
            self.error(
                "counts",
                unit_subject(u.id()),
                format!(
                    "active counter is {} but {active} active lease rows exist",
                    u.active
                ),
            );
        }
        let n_pieces = pieces::of_unit(&u.spec).len();
        let mut votes = Vec::new();
        for r in &x.reports {
            let lease = x.leases.iter().find(|l| l.id == r.lease_id).copied();
            if let Some(v) = self.report(u, r, lease, n_pieces) {
                votes.push(v);
            }
        }
        let voting = x.reports.iter().filter(|r| r.verdict.votes()).count() as i64;
        if u.reports != voting {
            self.error(
                "counts",
                unit_subject(u.id()),
                format!(
                    "reports counter is {} but {voting} voting report rows exist",
                    u.reports
                ),
            );
        }
        let kept = self.settlement(u, &votes, active);
        for sc in &x.checks {
            let report = x.reports.iter().find(|r| r.id == sc.report_id).copied();
            self.spot_check(u, sc, report, n_pieces);
        }
        if kept.state == UnitState::Settled {
            self.checked.units_settled += 1;
        }
        self.kept.insert(u.id(), kept);
    }

    /// Check 2 for one unit row.
    fn unit_row(&mut self, u: &UnitRow) {
        let subject = unit_subject(u.id());
        if let Err(e) = sign::verify(&self.key, &u.spec.canonical_bytes(), &u.signature) {
            self.error(
                "signature",
                &subject,
                format!("coordinator signature over the unit: {e} (the unit row was altered, or signed by another key)"),
            );
        }
        if let Err(e) = kernel::check_rect(u.spec.k, &u.spec.rect) {
            self.error("units", &subject, e.to_string());
        }
        let target = self
            .target(u.target_id)
            .map(|(t, c)| (t.k, t.campaign_id, c.name.clone(), c.kernel.clone()));
        match target {
            None => self.error(
                "units",
                &subject,
                format!("its target {} does not exist", u.target_id),
            ),
            Some((k, campaign_id, name, kernel_v)) => {
                if k != u.spec.k
                    || campaign_id != u.campaign_id
                    || name != u.spec.campaign
                    || kernel_v != u.spec.kernel
                {
                    self.error(
                        "units",
                        &subject,
                        "its k, campaign or kernel differ from its target's",
                    );
                }
            }
        }
    }

    /// Check 3 for one report; the report as a vote when it votes and holds up.
    fn report<'r>(
        &mut self,
        u: &UnitRow,
        r: &'r ReportRow,
        lease: Option<&LeaseRow>,
        n_pieces: usize,
    ) -> Option<Vote<'r>> {
        self.verdicts.insert(r.id, r.verdict);
        let c = self.counts.entry(r.worker_id).or_default();
        c.reports += 1;
        let (settled, errors) = r.verdict.counters(r.wrong);
        c.settled += settled;
        c.errors += errors;
        c.confirmed += i64::from(r.confirmed);

        let subject = report_subject(r);
        let votes = r.verdict.votes();
        let serious = |a: &mut Self, check: &str, msg: String| {
            if votes {
                a.error(check, &subject, msg);
            } else {
                a.warning(check, &subject, msg);
            }
        };
        let Some(w) = self.workers.get(&r.worker_id) else {
            self.error(
                "reports",
                &subject,
                format!("its worker {} does not exist", r.worker_id),
            );
            return None;
        };
        let owner = w.owner.clone();
        let mut sound = true;
        if r.owner != owner {
            self.error(
                "reports",
                &subject,
                format!(
                    "owner {:?} differs from its worker's owner {owner:?}",
                    r.owner
                ),
            );
            sound = false;
        }
        match lease {
            None => {
                self.error(
                    "reports",
                    &subject,
                    format!("its lease {} is not a lease of this unit", r.lease_id),
                );
                sound = false;
            }
            Some(l) => {
                if l.worker_id != r.worker_id || l.owner != owner {
                    self.error(
                        "reports",
                        &subject,
                        format!(
                            "its lease {} was issued to worker {} of owner {:?}",
                            l.id, l.worker_id, l.owner
                        ),
                    );
                    sound = false;
                }
                let expect = if r.verdict == Verdict::Refused {
                    "refused"
                } else {
                    "reported"
                };
                if l.state != expect {
                    self.warning(
                        "reports",
                        &subject,
                        format!(
                            "its lease {} is in state {:?}, expected {expect:?}",
                            l.id, l.state
                        ),
                    );
                }
            }
        }
        let fields = SignedFields {
            lease_id: r.lease_id,
            unit_id: u.id(),
            worker_id: r.worker_id,
            kernel: &u.spec.kernel,
            k: u.spec.k,
            rect: &u.spec.rect,
            digest: &r.digest,
            pieces: r.pieces.max(0) as usize,
            pieces_root: &r.pieces_root,
            solutions: &r.solutions,
        };
        let signed = match self.keys.get(&r.worker_id) {
            None => Err("its worker's key is unreadable".to_string()),
            Some(k) => {
                sign::verify(k, &signed_bytes(&fields), &r.signature).map_err(|e| e.to_string())
            }
        };
        if let Err(e) = signed {
            serious(self, "signature", format!("worker signature over the stored report: {e} (the row was altered, or is not this worker's)"));
            sound = false;
        }
        if !votes {
            return None;
        }
        if self.quarantined(r.worker_id) {
            self.error(
                "reports",
                &subject,
                format!(
                    "still votes ({}) although worker {} is quarantined",
                    r.verdict.as_str(),
                    r.worker_id
                ),
            );
        }
        if r.pieces as usize != n_pieces {
            self.error(
                "reports",
                &subject,
                format!(
                    "commits to {} piece digests, the unit has {n_pieces} pieces",
                    r.pieces
                ),
            );
            sound = false;
        }
        for s in &r.solutions {
            if !s.verify(u.spec.k) || !s.in_rect(&u.spec.rect) {
                self.error("solutions", &subject, format!("claims {s}, which is not a solution of k = {} inside the unit (exact arithmetic)", u.spec.k));
                sound = false;
            }
        }
        if matches!(u.spec.rect.region, Region::Small | Region::Equal) {
            if let Some(want) = kernel::counts(u.spec.k, &u.spec.rect) {
                let d = &r.digest;
                if (d.d_values, d.classes, d.candidates)
                    != (want.d_values, want.classes, want.candidates)
                {
                    self.error(
                        "reports",
                        &subject,
                        format!("its counts (d values, classes, candidates) = ({}, {}, {}); the unit has ({}, {}, {})", d.d_values, d.classes, d.candidates, want.d_values, want.classes, want.candidates),
                    );
                    sound = false;
                }
            }
        }
        sound.then(|| Vote {
            report: r,
            outcome: r.outcome(),
        })
    }

    /// Check 4: the settlement of one unit, recounted from its votes.
    fn settlement(&mut self, u: &UnitRow, votes: &[Vote], active: i64) -> Kept {
        let subject = unit_subject(u.id());
        let mut owners: BTreeMap<&Outcome, BTreeSet<&str>> = BTreeMap::new();
        for v in votes {
            owners
                .entry(&v.outcome)
                .or_default()
                .insert(&v.report.owner);
        }
        let backing = |o: &Outcome| owners.get(o).map_or(0, |s| s.len());
        let mut kept = Kept {
            target_id: u.target_id,
            k: u.spec.k,
            rect: u.spec.rect,
            state: u.state,
            cost_us: u.spec.cost,
            active_leases: active,
            settled: None,
            agreed_solutions: BTreeSet::new(),
            settlers: BTreeSet::new(),
        };
        if let Some(known) = &u.known {
            for v in votes.iter().filter(|v| &v.outcome != known) {
                self.error(
                    "settlement",
                    report_subject(v.report),
                    "contradicts the organiser's own result for the unit but still votes (it should have been proven wrong)",
                );
            }
        }
        if u.state != UnitState::Settled {
            if u.settled.is_some() || u.settled_at.is_some() {
                self.error(
                    "settlement",
                    &subject,
                    format!("state {} but a settled outcome is stored", u.state),
                );
            }
            for v in votes
                .iter()
                .filter(|v| v.report.verdict != Verdict::Counted)
            {
                self.error(
                    "settlement",
                    report_subject(v.report),
                    format!(
                        "verdict {} on a unit that is not settled",
                        v.report.verdict.as_str()
                    ),
                );
            }
            return kept;
        }
        let Some(outcome) = &u.settled else {
            self.error("settlement", &subject, "settled without a stored outcome");
            return kept;
        };
        let n = backing(outcome);
        let rival = owners
            .iter()
            .filter(|(o, _)| *o != &outcome)
            .map(|(_, s)| s.len())
            .max()
            .unwrap_or(0);
        if n < 2 {
            self.error(
                "settlement",
                &subject,
                format!("settled with digest {}, backed by {n} distinct owner(s); at least two are needed", outcome.digest),
            );
        } else if let Some(known) = &u.known {
            if known != outcome {
                self.error(
                    "settlement",
                    &subject,
                    "settled against the organiser's own result",
                );
            }
        } else if rival >= n {
            self.error(
                "settlement",
                &subject,
                format!("settled by {n} owners while another outcome has {rival}: no majority"),
            );
        }
        for s in &outcome.solutions {
            if !s.verify(u.spec.k) {
                self.error(
                    "solutions",
                    &subject,
                    format!(
                        "settled solution {s} does not sum to k = {} (exact arithmetic)",
                        u.spec.k
                    ),
                );
            }
        }
        for v in votes {
            let agrees = &v.outcome == outcome;
            let expect = if agrees {
                Verdict::Agree
            } else {
                Verdict::Disagree
            };
            if v.report.verdict != expect {
                self.error(
                    "settlement",
                    report_subject(v.report),
                    format!(
                        "verdict {}, but the recount says {}",
                        v.report.verdict.as_str(),
                        expect.as_str()
                    ),
                );
            }
            if agrees {
                kept.agreed_solutions
                    .extend(v.outcome.solutions.iter().copied());
                kept.settlers
                    .insert((v.report.worker_id, v.report.owner.clone()));
                if self.quarantined(v.report.worker_id) {
                    self.error(
                        "settlement",
                        &subject,
                        format!(
                            "settled with the word of quarantined worker {}",
                            v.report.worker_id
                        ),
                    );
                }
            }
        }
        if u.need != 0 {
            self.warning(
                "counts",
                &subject,
                format!("settled but still wants {} lease(s)", u.need),
            );
        }
        kept.settled = Some(outcome.clone());
        kept
    }

    /// Check 5 for one spot check.
    fn spot_check(
        &mut self,
        u: &UnitRow,
        sc: &SpotCheckRow,
        report: Option<&ReportRow>,
        n_pieces: usize,
    ) {
        let subject = format!("spot check {} (unit {}, piece {})", sc.id, u.id(), sc.piece);
        let Some(r) = report else {
            self.error(
                "spot checks",
                &subject,
                format!("its report {} is not a report of this unit", sc.report_id),
            );
            return;
        };
        if sc.piece < 0 || sc.piece as usize >= n_pieces {
            self.error(
                "spot checks",
                &subject,
                format!("the unit has {n_pieces} pieces"),
            );
            return;
        }
        if !committed(sc, r, n_pieces) {
            self.error("spot checks", &subject, format!("its proof does not lead from the claimed digest {} to the root report {} signed", sc.claimed, r.id));
        }
        let piece = pieces::of_unit(&u.spec)[sc.piece as usize];
        let confirms = |c: &Outcome| {
            lifecycle::piece_confirms(&sc.claimed, &r.solutions, &piece, c, Solution::in_rect)
        };
        match (sc.state.as_str(), &sc.computed) {
            ("waiting", None) => {}
            ("passed", Some(c)) if confirms(c) => {}
            ("failed", Some(c)) if !confirms(c) => {
                if !r.wrong {
                    self.error(
                        "spot checks",
                        &subject,
                        format!("failed, but report {} is not marked wrong", r.id),
                    );
                }
                if !self.quarantined(r.worker_id) {
                    self.error(
                        "spot checks",
                        &subject,
                        format!("failed, but worker {} is not quarantined", r.worker_id),
                    );
                }
            }
            (state, computed) => self.error(
                "spot checks",
                &subject,
                format!("state {state:?} does not fit its computed result {computed:?}"),
            ),
        }
    }

    /// Check 7.
    fn tiling(&mut self) -> Vec<TargetResult> {
        let mut per_target: BTreeMap<i64, Vec<Tile>> = BTreeMap::new();
        for (id, k) in &self.kept {
            per_target.entry(k.target_id).or_default().push(Tile {
                id: *id,
                rect: k.rect,
            });
        }
        let mut out = Vec::new();
        let mut found = Vec::new();
        for (t, c) in &self.targets {
            let tiles = per_target.remove(&t.id).unwrap_or_default();
            let settled = tiles
                .iter()
                .filter(|x| self.kept[&x.id].state == UnitState::Settled)
                .count();
            let (mut gaps, mut overlaps) = (0, 0);
            if kernel::check_target(t.k).is_ok() && (1..=kernel::MAX_Z).contains(&t.bound) {
                let check = tiling::check_tiling(&Geometry::of_target(t.k, t.bound), &tiles);
                gaps = check.gap_count;
                overlaps = check.overlap_count;
                if check.gap_count == 0 && !check.malformed.is_empty() {
                    gaps = check.malformed.len() as u64;
                }
                for mut x in cert::tiling_findings(&check) {
                    x.subject = format!("{} k = {}: {}", c.name, t.k, x.subject);
                    found.push(x);
                }
            }
            out.push(TargetResult {
                campaign: c.name.clone(),
                k: t.k,
                bound: t.bound,
                units: tiles.len(),
                settled,
                complete: gaps == 0 && settled == tiles.len() && !tiles.is_empty(),
                gaps,
                overlaps,
            });
        }
        self.findings.extend(found);
        out
    }

    /// Check 8. Returns the stored solutions per target.
    async fn solutions(&mut self) -> Result<HashMap<i64, BTreeSet<Solution>>> {
        let rows = self.store.audit_solutions().await?;
        self.checked.solutions = rows.len();
        let mut stored: HashMap<i64, BTreeSet<Solution>> = HashMap::new();
        for s in &rows {
            let subject = format!("solution {} {}", s.id, s.solution);
            let Some((t, _)) = self.target(s.target_id).cloned() else {
                self.error(
                    "solutions",
                    &subject,
                    format!("its target {} does not exist", s.target_id),
                );
                continue;
            };
            if !s.solution.verify(t.k) {
                self.error(
                    "solutions",
                    &subject,
                    format!("the cubes do not sum to k = {} (exact arithmetic)", t.k),
                );
            }
            if s.solution.min_abs() > t.bound as u128 {
                self.error(
                    "solutions",
                    &subject,
                    format!(
                        "smallest |coordinate| {} exceeds the bound {}",
                        s.solution.min_abs(),
                        t.bound
                    ),
                );
            }
            let problem = match self.kept.get(&s.unit_id) {
                None => Some(format!("its unit {} does not exist", s.unit_id)),
                Some(k) if k.target_id != s.target_id => {
                    Some(format!("its unit {} belongs to another target", s.unit_id))
                }
                Some(k) => match &k.settled {
                    None => Some(format!("its unit {} is not settled", s.unit_id)),
                    Some(o) if !o.solutions.contains(&s.solution) => {
                        Some(format!("not in the settled outcome of unit {}", s.unit_id))
                    }
                    Some(_) if !k.agreed_solutions.contains(&s.solution) => Some(format!(
                        "no agreeing report of unit {} claims it",
                        s.unit_id
                    )),
                    Some(_) => None,
                },
            };
            if let Some(p) = problem {
                self.error("solutions", &subject, p);
            }
            stored.entry(s.target_id).or_default().insert(s.solution);
        }
        let mut missing = Vec::new();
        for (id, k) in &self.kept {
            for s in k.settled.iter().flat_map(|o| &o.solutions) {
                if !stored.get(&k.target_id).is_some_and(|x| x.contains(s)) {
                    missing.push(Finding::error(
                        "solutions",
                        unit_subject(*id),
                        format!("settled solution {s} is missing from the solutions table"),
                    ));
                }
            }
        }
        self.findings.extend(missing);
        Ok(stored)
    }

    /// Checks 6 and the incident part of 1.
    async fn incidents(&mut self) -> Result<()> {
        let incidents = self.store.audit_incidents().await?;
        self.checked.incidents = incidents.len();
        let mut named: BTreeSet<i64> = BTreeSet::new();
        for i in &incidents {
            let subject = format!("incident {} ({})", i.id, i.kind);
            for w in &i.quarantined {
                named.insert(*w);
                if !self.quarantined(*w) {
                    self.error(
                        "incidents",
                        &subject,
                        format!("quarantined worker {w}, which is not quarantined"),
                    );
                }
            }
            for r in &i.voided {
                match self.verdicts.get(r) {
                    Some(Verdict::Voided) => {}
                    Some(v) => self.error(
                        "incidents",
                        &subject,
                        format!("voided report {r}, whose verdict is {}", v.as_str()),
                    ),
                    None => self.error(
                        "incidents",
                        &subject,
                        format!("voided report {r}, which does not exist"),
                    ),
                }
            }
        }
        let unnamed: Vec<i64> = self
            .workers
            .values()
            .filter(|w| w.quarantined && !named.contains(&w.id))
            .map(|w| w.id)
            .collect();
        for w in unnamed {
            self.error(
                "workers",
                format!("worker {w}"),
                "quarantined, but no incident records why",
            );
        }
        Ok(())
    }

    /// Check 9.
    async fn certificates(&mut self) -> Result<()> {
        let certs = self.store.audit_certificates().await?;
        self.checked.certificates = certs.len();
        for c in &certs {
            self.certificate(c);
        }
        Ok(())
    }

    fn certificate(&mut self, row: &CertificateRow) {
        let subject = format!(
            "certificate {} (target {}, bound {})",
            row.id, row.target_id, row.bound
        );
        let doc: Certificate = match serde_json::from_str(&row.document) {
            Ok(d) => d,
            Err(e) => {
                self.error(
                    "certificates",
                    &subject,
                    format!("the stored document is not a certificate: {e}"),
                );
                return;
            }
        };
        if let Err(found) = cert::verify_certificate(&doc) {
            for x in found.into_iter().filter(Finding::is_error) {
                self.error(
                    "certificates",
                    &subject,
                    format!("{}: {}", x.subject, x.message),
                );
            }
        }
        if doc.coordinator_key != sign::public_to_hex(&self.key) {
            self.error(
                "certificates",
                &subject,
                "signed by another key than this coordinator's",
            );
        }
        if doc.root != row.root || doc.bound != row.bound {
            self.error(
                "certificates",
                &subject,
                "its root or bound differ from the row's",
            );
        }
        if row.revoked_at.is_some() {
            return;
        }
        for cu in &doc.units {
            let problem = match self.kept.get(&cu.id) {
                None => Some("is not in the store".to_string()),
                Some(k) if k.target_id != row.target_id || k.rect != cu.rect => {
                    Some("differs in target or rectangle from the store".to_string())
                }
                Some(k) => match &k.settled {
                    None => {
                        Some("is no longer settled, yet the certificate is not revoked".to_string())
                    }
                    Some(o) if o.digest != cu.digest => Some(format!(
                        "is settled with digest {}, the certificate says {}",
                        o.digest, cu.digest
                    )),
                    Some(_) => {
                        let said: BTreeSet<(i64, String)> = cu
                            .settled_by
                            .iter()
                            .map(|s| (s.worker, s.owner.clone()))
                            .collect();
                        let owners: BTreeSet<&str> = said.iter().map(|(_, o)| o.as_str()).collect();
                        if said != k.settlers {
                            Some(
                                "names other settlers than the store's agreeing reports"
                                    .to_string(),
                            )
                        } else if owners.len() < 2 {
                            Some("is settled by fewer than two distinct owners".to_string())
                        } else {
                            said.iter()
                                .find(|(w, _)| self.quarantined(*w))
                                .map(|(w, _)| format!("was settled by worker {w}, now quarantined, yet the certificate is not revoked"))
                        }
                    }
                },
            };
            if let Some(p) = problem {
                self.error("certificates", &subject, format!("unit {} {p}", cu.id));
            }
        }
    }

    /// Check 10, the counters kept on workers.
    fn worker_counters(&mut self) {
        let mut found = Vec::new();
        for w in self.workers.values() {
            let c = self.counts.get(&w.id).cloned().unwrap_or_default();
            for (what, kept, counted) in [
                ("reports", w.reports, c.reports),
                ("units_settled", w.units_settled, c.settled),
                ("errors", w.errors, c.errors),
                ("confirmed", w.confirmed, c.confirmed),
                ("active", w.active, c.active_leases),
            ] {
                if kept != counted {
                    found.push(Finding::error(
                        "counts",
                        format!("worker {}", w.id),
                        format!("{what} is {kept} but its rows give {counted}"),
                    ));
                }
            }
        }
        self.findings.extend(found);
    }

    /// Check 10, what the monitoring API shows.
    async fn monitoring(&mut self, stored: &HashMap<i64, BTreeSet<Solution>>) -> Result<()> {
        #[derive(Default, Debug, PartialEq)]
        struct Tally {
            total: i64,
            open: i64,
            leased: i64,
            settled: i64,
            disputed: i64,
            review: i64,
            cost_total: i64,
            cost_settled: i64,
        }
        let mut per_target: HashMap<i64, Tally> = HashMap::new();
        for k in self.kept.values() {
            let t = per_target.entry(k.target_id).or_default();
            t.total += 1;
            t.cost_total += k.cost_us as i64;
            if k.active_leases > 0 && k.state != UnitState::Settled {
                t.leased += 1;
            }
            match k.state {
                UnitState::Settled => {
                    t.settled += 1;
                    t.cost_settled += k.cost_us as i64;
                }
                UnitState::Disputed => t.disputed += 1,
                UnitState::Review => t.review += 1,
                UnitState::Open => t.open += 1,
            }
        }
        let mut found = Vec::new();
        for (t, c) in &self.targets {
            let s = self.store.target_stats(t.clone(), 0).await?;
            let shown = Tally {
                total: s.units.total,
                open: s.units.open,
                leased: s.units.leased,
                settled: s.units.settled,
                disputed: s.units.disputed,
                review: s.units.review,
                cost_total: s.cost_total_us,
                cost_settled: s.cost_settled_us,
            };
            let subject = format!("target {} k = {}", c.name, t.k);
            let mine = per_target.remove(&t.id).unwrap_or_default();
            if shown != mine {
                found.push(Finding::error(
                    "counts",
                    &subject,
                    format!("the monitoring view shows {shown:?}, the unit rows give {mine:?}"),
                ));
            }
            let mine_s: Vec<Solution> = stored
                .get(&t.id)
                .map(|x| x.iter().copied().collect())
                .unwrap_or_default();
            if s.solutions != mine_s {
                found.push(Finding::error(
                    "counts",
                    &subject,
                    format!(
                        "the monitoring view shows {} solution(s), the solution rows give {}",
                        s.solutions.len(),
                        mine_s.len()
                    ),
                ));
            }
        }
        let views = self.store.workers().await?;
        if views.len() != self.workers.len() {
            found.push(Finding::error(
                "counts",
                "workers",
                format!(
                    "the monitoring view lists {} workers, the store holds {}",
                    views.len(),
                    self.workers.len()
                ),
            ));
        }
        for v in &views {
            let c = self.counts.get(&v.id).cloned().unwrap_or_default();
            let Some(w) = self.workers.get(&v.id) else {
                continue;
            };
            let shown = (
                v.reports,
                v.units_settled,
                v.errors,
                v.confirmed,
                v.quarantined,
                v.active_leases,
            );
            let mine = (
                c.reports,
                c.settled,
                c.errors,
                c.confirmed,
                w.quarantined,
                c.active_leases,
            );
            if shown != mine {
                found.push(Finding::error("counts", format!("worker {}", v.id), format!("the monitoring view shows (reports, settled, errors, confirmed, quarantined, active leases) = {shown:?}, the rows give {mine:?}")));
            }
        }
        let m = self.store.metrics().await?;
        let mut units_by: BTreeMap<(String, String), i64> = BTreeMap::new();
        for k in self.kept.values() {
            if let Some((_, c)) = self.target(k.target_id) {
                *units_by
                    .entry((c.name.clone(), k.state.as_str().to_string()))
                    .or_default() += 1;
            }
        }
        let shown: BTreeMap<(String, String), i64> = m
            .units
            .iter()
            .map(|(c, s, n)| ((c.clone(), s.clone()), *n))
            .collect();
        if shown != units_by {
            found.push(Finding::error(
                "counts",
                "/metrics",
                format!("units by campaign and state: shown {shown:?}, rows give {units_by:?}"),
            ));
        }
        let active: i64 = self.counts.values().map(|c| c.active_leases).sum();
        if m.leases_active != active {
            found.push(Finding::error(
                "counts",
                "/metrics",
                format!(
                    "active leases: shown {}, rows give {active}",
                    m.leases_active
                ),
            ));
        }
        let quarantined = self.workers.values().filter(|w| w.quarantined).count() as i64;
        if m.workers != self.workers.len() as i64 || m.workers_quarantined != quarantined {
            found.push(Finding::error(
                "counts",
                "/metrics",
                format!(
                    "workers: shown {} ({} quarantined), rows give {} ({quarantined})",
                    m.workers,
                    m.workers_quarantined,
                    self.workers.len()
                ),
            ));
        }
        let sols: i64 = stored.values().map(|s| s.len() as i64).sum();
        if m.solutions != sols {
            found.push(Finding::error(
                "counts",
                "/metrics",
                format!("solutions: shown {}, rows give {sols}", m.solutions),
            ));
        }
        self.findings.extend(found);
        Ok(())
    }

    /// Check 11.
    async fn recheck(&mut self, opts: &AuditOptions) -> Result<Vec<i64>> {
        let mut rechecked = Vec::new();
        if opts.recheck <= 0.0 {
            return Ok(rechecked);
        }
        let settled: Vec<i64> = self
            .kept
            .iter()
            .filter(|(_, k)| k.settled.is_some())
            .map(|(id, _)| *id)
            .collect();
        for i in cert::sample(&settled, opts.recheck, opts.seed) {
            let id = settled[i];
            let k = &self.kept[&id];
            let kernel_v = self
                .target(k.target_id)
                .map(|(_, c)| c.kernel.clone())
                .unwrap_or_default();
            if kernel_v != KERNEL_VERSION {
                self.error(
                    "recheck",
                    unit_subject(id),
                    format!("the campaign pins kernel {kernel_v:?} but this program runs {KERNEL_VERSION:?}: cannot recompute; use a matching build"),
                );
                continue;
            }
            let outcome = k.settled.clone().expect("settled");
            let (k_val, rect, threads) = (k.k, k.rect, opts.threads);
            rechecked.push(id);
            let found = tokio::task::spawn_blocking(move || {
                cert::recheck_unit(
                    k_val,
                    id,
                    &rect,
                    &outcome.digest,
                    &outcome.solutions,
                    threads,
                )
            })
            .await?;
            self.findings.extend(found);
        }
        Ok(rechecked)
    }
}
