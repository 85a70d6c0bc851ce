//! Coverage certificates: "for target `k`, every solution with `min(|x|,|y|,|z|) ≤ B` is in
//! this list", signed by the coordinator and checkable offline — no database, no network.
//!
//! # Document (JSON)
//!
//! ```text
//! {
//!   "format": "cubehunt-certificate/1",
//!   "campaign": "spring-run", "k": 114, "bound": 1000000, "kernel": "cubehunt-kernel/1",
//!   "issued_at": 1764636736,                       // unix seconds, UTC
//!   "units": [ { "id": 17,
//!                "rect": {"region":"main","d_lo":1,"d_hi":40,"z_lo":10,"z_hi":5000},
//!                "digest": "h…-d…-r…-c…-s…",       // the settled digest, text form
//!                "settled_by": [ {"worker": 3, "owner": "ana"}, … ] }, … ],   // sorted by id
//!   "root": "<64 hex>",                            // Merkle root over the units, below
//!   "solutions": [ ["-5","2","5"], … ],             // canonical triples, sorted, no repeats
//!   "coordinator_key": "<64 hex>",                 // Ed25519 public key
//!   "signature": "<128 hex>"                       // Ed25519 over signed_bytes(), below
//! }
//! ```
//!
//! # Root hash
//!
//! Units are sorted by id (ids are unique). Leaf `i` is the UTF-8 text
//!
//! ```text
//! cubehunt-cert-unit/2\nid=<id>\nregion=<small|equal|main>\nd=<d_lo>..<d_hi>\nz=<z_lo>..<z_hi>\ndigest=<digest text>\nrechecked=<true|false>\nsettled_by=<worker>:<owner JSON string>,…\n
//! ```
//!
//! (`settled_by` in document order, which is ascending worker id). The tree is the Merkle
//! tree of RFC 6962 §2.1 (B. Laurie, A. Langley, E. Kasper, *Certificate Transparency*, 2013)
//! with SHA-256: `leaf = SHA256(0x00 ‖ leaf_bytes)`, `node = SHA256(0x01 ‖ left ‖ right)`,
//! split at the largest power of two below `n`; the empty tree hashes to `SHA256("")`.
//! So one unit's presence can be shown with a logarithmic path, and the root changes when
//! anything about any unit changes.
//!
//! # Signed bytes
//!
//! ```text
//! cubehunt-certificate/1\ncampaign=<JSON string>\nk=<k>\nbound=<B>\nkernel=<JSON string>\n
//! issued_at=<t>\ncoordinator_key=<hex>\nunits=<n>\nroot=<hex>\nsolutions=<m>\n
//! solution=<a>,<b>,<c>\n …
//! ```
//!
//! # Extension
//!
//! A certificate for bound `B` lists exactly the units of the target that meet the regions up
//! to `B` ([`needed_for_bound`]). Extending a target plans only `|z| > B₁` (every point of the
//! regions up to `B₂` that is not in the regions up to `B₁` has `|z| > B₁`), so the units of
//! the `B₁` certificate are the same after extension, and the old document stays valid for
//! its bound.

use crate::tiling::{self, Geometry, Tile};
use crate::{kernel, merkle, sign, Digest, Rect, Region, Solution, KERNEL_VERSION};
use serde::{Deserialize, Serialize};
use sha2::{Digest as _, Sha256};
use std::fmt::{self, Write as _};

pub const FORMAT: &str = "cubehunt-certificate/2";

/// A worker whose report settled a unit.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Settler {
    pub worker: i64,
    pub owner: String,
}

/// One unit of the tiling with its settled digest.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct CertUnit {
    pub id: i64,
    pub rect: Rect,
    #[serde(with = "crate::digest::text")]
    pub digest: Digest,
    /// The workers whose agreeing reports settled the unit: of at least two owners, none
    /// quarantined when the certificate was issued.
    pub settled_by: Vec<Settler>,
    /// Whether the organiser's side recomputed the unit in full and found the settled digest.
    pub rechecked: bool,
}

impl CertUnit {
    /// The leaf encoding of the root hash (see the module documentation).
    pub fn leaf_bytes(&self) -> Vec<u8> {
        let r = &self.rect;
        let mut s = format!(
            "cubehunt-cert-unit/2\nid={}\nregion={}\nd={}..{}\nz={}..{}\ndigest={}\nrechecked={}\nsettled_by=",
            self.id, r.region, r.d_lo, r.d_hi, r.z_lo, r.z_hi, self.digest, self.rechecked
        );
        for (i, w) in self.settled_by.iter().enumerate() {
            if i > 0 {
                s.push(',');
            }
            let _ = write!(
                s,
                "{}:{}",
                w.worker,
                serde_json::to_string(&w.owner).expect("string serialises")
            );
        }
        s.push('\n');
        s.into_bytes()
    }
}

#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Certificate {
    pub format: String,
    pub campaign: String,
    pub k: i64,
    pub bound: u64,
    pub kernel: String,
    pub issued_at: i64,
    pub units: Vec<CertUnit>,
    pub root: String,
    pub solutions: Vec<Solution>,
    pub coordinator_key: String,
    pub signature: String,
}

/// The Merkle root (RFC 6962 §2.1, SHA-256; [`crate::merkle`]) over the units in the given order.
pub fn merkle_root(units: &[CertUnit]) -> [u8; 32] {
    let leaves: Vec<merkle::Hash> = units
        .iter()
        .map(|u| merkle::leaf_hash(&u.leaf_bytes()))
        .collect();
    merkle::root(&leaves)
}

/// Whether a unit meets the regions of target `k` up to `bound` (and so belongs in the
/// certificate for that bound).
pub fn needed_for_bound(k: i64, bound: u64, rect: &Rect) -> bool {
    let Some(dom) = kernel::domain(k, bound, rect.region) else {
        return false;
    };
    match rect.region {
        Region::Small | Region::Equal => rect.z_lo < dom.z_hi,
        Region::Main => {
            rect.z_lo < dom.z_hi
                && rect.d_lo < dom.d_hi
                && rect.z_hi > kernel::main_z_floor(rect.d_lo.max(1)).max(dom.z_lo)
        }
    }
}

impl Certificate {
    /// Build and sign a certificate. Units are sorted by id and settlers by worker id.
    #[allow(clippy::too_many_arguments)]
    pub fn issue(
        campaign: &str,
        k: i64,
        bound: u64,
        kernel: &str,
        issued_at: i64,
        mut units: Vec<CertUnit>,
        mut solutions: Vec<Solution>,
        key: &sign::SecretKey,
    ) -> Certificate {
        units.sort_by_key(|u| u.id);
        for u in &mut units {
            u.settled_by
                .sort_by(|a, b| (a.worker, &a.owner).cmp(&(b.worker, &b.owner)));
        }
        solutions.sort();
        solutions.dedup();
        let mut c = Certificate {
            format: FORMAT.to_string(),
            campaign: campaign.to_string(),
            k,
            bound,
            kernel: kernel.to_string(),
            issued_at,
            root: hex::encode(merkle_root(&units)),
            units,
            solutions,
            coordinator_key: sign::public_to_hex(&key.verifying_key()),
            signature: String::new(),
        };
        c.signature = sign::sign(key, &c.signed_bytes());
        c
    }

    /// The bytes the coordinator signs (see the module documentation).
    pub fn signed_bytes(&self) -> Vec<u8> {
        let mut s = format!(
            "{}\ncampaign={}\nk={}\nbound={}\nkernel={}\nissued_at={}\ncoordinator_key={}\nunits={}\nroot={}\nsolutions={}\n",
            FORMAT,
            serde_json::to_string(&self.campaign).expect("string serialises"),
            self.k,
            self.bound,
            serde_json::to_string(&self.kernel).expect("string serialises"),
            self.issued_at,
            self.coordinator_key,
            self.units.len(),
            self.root,
            self.solutions.len()
        );
        for sol in &self.solutions {
            let [a, b, c] = sol.0;
            let _ = writeln!(s, "solution={a},{b},{c}");
        }
        s.into_bytes()
    }

    /// Total candidates over the units (from their digests).
    pub fn candidates(&self) -> u128 {
        self.units.iter().map(|u| u.digest.candidates as u128).sum()
    }

    /// A short human-readable rendering.
    pub fn render_text(&self) -> String {
        let mut per = [0usize; 3];
        for u in &self.units {
            per[u.rect.region as usize] += 1;
        }
        let mut owners: Vec<&str> = self
            .units
            .iter()
            .flat_map(|u| u.settled_by.iter().map(|s| s.owner.as_str()))
            .collect();
        owners.sort_unstable();
        owners.dedup();
        let mut s = String::new();
        let _ = writeln!(s, "cubehunt coverage certificate ({})", self.format);
        let _ = writeln!(s, "  campaign   {}", self.campaign);
        let _ = writeln!(s, "  claim      every solution of x³+y³+z³ = {} with min(|x|,|y|,|z|) ≤ {} is listed below", self.k, self.bound);
        let _ = writeln!(s, "  kernel     {}", self.kernel);
        let _ = writeln!(
            s,
            "  units      {} (small {}, equal {}, main {}), {} candidates, settled by {} owner(s)",
            self.units.len(),
            per[0],
            per[1],
            per[2],
            self.candidates(),
            owners.len()
        );
        let _ = writeln!(s, "  root       sha256 {}", self.root);
        let _ = writeln!(
            s,
            "  issued     {} by coordinator key {}",
            utc_text(self.issued_at),
            self.coordinator_key
        );
        let _ = writeln!(s, "  solutions  {}", self.solutions.len());
        for sol in &self.solutions {
            let [a, b, c] = sol.to_strings();
            let _ = writeln!(s, "    {a}, {b}, {c}");
        }
        let _ = writeln!(s, "  signature  {}", self.signature);
        s
    }
}

/// `YYYY-MM-DDThh:mm:ssZ` for unix seconds (proleptic Gregorian calendar; the days-to-civil
/// conversion is the well-known era/day-of-era arithmetic, common practice, no source).
pub fn utc_text(t: i64) -> String {
    let days = t.div_euclid(86400);
    let secs = t.rem_euclid(86400);
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097);
    let yoe = (doe - doe / 1460 + doe / 36524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = yoe + era * 400 + i64::from(m <= 2);
    format!(
        "{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}Z",
        secs / 3600,
        secs / 60 % 60,
        secs % 60
    )
}

// ---------------------------------------------------------------------------------------------
// Findings
// ---------------------------------------------------------------------------------------------

#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Severity {
    /// Not fatal: costs work or is worth a look, but the claim still holds.
    Warning,
    /// The claim does not hold (or cannot be shown to).
    Error,
}

/// One problem found by a check, naming what it concerns.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Finding {
    pub severity: Severity,
    /// Which check: `format`, `signature`, `solution`, `tiling`, `overlap`, `root`, `recheck`, …
    pub check: String,
    /// What it concerns: `unit 17`, `report 40`, `worker 3`, `solution (-5, 2, 5)`, a region part.
    pub subject: String,
    pub message: String,
}

impl Finding {
    pub fn error(check: &str, subject: impl Into<String>, message: impl Into<String>) -> Finding {
        Finding {
            severity: Severity::Error,
            check: check.into(),
            subject: subject.into(),
            message: message.into(),
        }
    }
    pub fn warning(check: &str, subject: impl Into<String>, message: impl Into<String>) -> Finding {
        Finding {
            severity: Severity::Warning,
            check: check.into(),
            subject: subject.into(),
            message: message.into(),
        }
    }
    pub fn is_error(&self) -> bool {
        self.severity == Severity::Error
    }
}

impl fmt::Display for Finding {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let sev = match self.severity {
            Severity::Error => "ERROR",
            Severity::Warning => "warning",
        };
        write!(
            f,
            "{sev} [{}] {}: {}",
            self.check, self.subject, self.message
        )
    }
}

/// Findings of a tiling check, for target `k` up to `bound`.
pub fn tiling_findings(check: &tiling::TilingCheck) -> Vec<Finding> {
    let mut out = Vec::new();
    for (id, why) in &check.malformed {
        out.push(Finding::error(
            "tiling",
            format!("unit {id}"),
            format!("malformed rectangle: {why}"),
        ));
    }
    for g in &check.gaps {
        out.push(Finding::error(
            "tiling",
            format!("region {g}"),
            "no unit covers this part of the region (gap)",
        ));
    }
    if check.gap_count > check.gaps.len() as u64 {
        out.push(Finding::error(
            "tiling",
            "regions",
            format!(
                "{} more uncovered pieces not listed",
                check.gap_count - check.gaps.len() as u64
            ),
        ));
    }
    for o in &check.overlaps {
        let units: Vec<String> = o.units.iter().map(|u| u.to_string()).collect();
        out.push(Finding::warning(
            "overlap",
            format!("units {}", units.join(", ")),
            format!(
                "{} d∈[{},{}) |z|∈[{},{}] is covered more than once (extra work, not a gap)",
                o.region, o.d_lo, o.d_hi, o.z_first, o.z_last
            ),
        ));
    }
    if check.overlap_count > check.overlaps.len() as u64 {
        out.push(Finding::warning(
            "overlap",
            "regions",
            format!(
                "{} more overlapping pieces not listed",
                check.overlap_count - check.overlaps.len() as u64
            ),
        ));
    }
    for id in check.outside.iter().take(tiling::MAX_LISTED) {
        out.push(Finding::warning(
            "outside",
            format!("unit {id}"),
            "holds no point of its region up to the bound",
        ));
    }
    if check.outside.len() > tiling::MAX_LISTED {
        out.push(Finding::warning(
            "outside",
            "units",
            format!(
                "{} more units outside the regions not listed",
                check.outside.len() - tiling::MAX_LISTED
            ),
        ));
    }
    out
}

// ---------------------------------------------------------------------------------------------
// Verification
// ---------------------------------------------------------------------------------------------

/// What a certificate that holds says.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct Summary {
    pub campaign: String,
    pub k: i64,
    pub bound: u64,
    pub kernel: String,
    pub units: usize,
    pub candidates: u128,
    pub solutions: Vec<Solution>,
    pub root: String,
    pub coordinator_key: String,
    pub issued_at: String,
    /// Units re-run locally and found to agree.
    pub rechecked: usize,
    /// Non-fatal findings (overlaps, units beyond the bound).
    pub warnings: Vec<Finding>,
}

/// Options of [`verify_certificate_with`].
#[derive(Clone, Debug, Default)]
pub struct VerifyOptions {
    /// Refuse unless the certificate is signed by this key (64 hex).
    pub pinned_key: Option<String>,
    /// Re-run this fraction of the units with the local kernel (0 = none).
    pub recheck: f64,
    pub seed: u64,
    /// Threads for the recheck (0 = all cores).
    pub threads: usize,
    /// Recompute the counts (d values, classes, candidates) of this fraction of the
    /// main-region units whose counts are cheap to derive ([`kernel::counts`]); the small and
    /// equal regions' counts are closed forms and always recomputed.
    pub counts: f64,
}

/// Check a certificate offline: format, signature, each solution's arithmetic and bound, that
/// the units tile the three regions up to the bound, and the root hash.
pub fn verify_certificate(doc: &Certificate) -> Result<Summary, Vec<Finding>> {
    verify_certificate_with(doc, &VerifyOptions::default())
}

/// [`verify_certificate`] with a pinned key and an optional local recheck of sampled units.
pub fn verify_certificate_with(
    doc: &Certificate,
    opts: &VerifyOptions,
) -> Result<Summary, Vec<Finding>> {
    let target = kernel::check_target(doc.k)
        .map(|_| ())
        .map_err(|e| e.to_string());
    let geom = if target.is_ok() && (1..=kernel::MAX_Z).contains(&doc.bound) {
        Some(Geometry::of_target(doc.k, doc.bound))
    } else {
        None
    };
    let rect_check = |r: &Rect| kernel::check_rect(doc.k, r).map_err(|e| e.to_string());
    let counted = if target.is_ok() {
        recount(doc, opts)
    } else {
        Vec::new()
    };
    verify_impl(doc, opts, target, geom.as_ref(), &rect_check, counted)
}

/// The checks, with the kernel's geometry passed in (so that they can be tested against an
/// independent implementation of it).
fn verify_impl(
    doc: &Certificate,
    opts: &VerifyOptions,
    target_check: Result<(), String>,
    geom: Option<&Geometry>,
    rect_check: &dyn Fn(&Rect) -> Result<(), String>,
    counted: Vec<Finding>,
) -> Result<Summary, Vec<Finding>> {
    let mut f: Vec<Finding> = Vec::new();
    let target = format!("k = {}", doc.k);

    if doc.format != FORMAT {
        f.push(Finding::error(
            "format",
            "document",
            format!(
                "format is {:?}; this program reads {FORMAT:?}",
                doc.format.chars().take(60).collect::<String>()
            ),
        ));
        return Err(f);
    }

    // Signature.
    match sign::public_from_hex(&doc.coordinator_key) {
        Err(e) => f.push(Finding::error(
            "signature",
            "coordinator_key",
            e.to_string(),
        )),
        Ok(pk) => {
            if let Err(e) = sign::verify(&pk, &doc.signed_bytes(), &doc.signature) {
                f.push(Finding::error(
                    "signature",
                    "document",
                    format!("coordinator signature: {e} (the document was altered or signed by another key)"),
                ));
            }
        }
    }
    if let Some(pin) = &opts.pinned_key {
        if !pin.trim().eq_ignore_ascii_case(&doc.coordinator_key) {
            f.push(Finding::error(
                "signature",
                "coordinator_key",
                format!(
                    "signed by key {} but the pinned coordinator key is {}",
                    doc.coordinator_key,
                    pin.trim()
                ),
            ));
        }
    }

    // Target and bound.
    let target_ok = match target_check {
        Ok(()) => true,
        Err(e) => {
            f.push(Finding::error("target", &target, e));
            false
        }
    };
    if doc.bound < 1 || doc.bound > kernel::MAX_Z {
        f.push(Finding::error(
            "target",
            &target,
            format!("bound {} is outside 1 ..= 2^63−1", doc.bound),
        ));
    }

    // Solutions.
    for w in doc.solutions.windows(2) {
        if w[0] >= w[1] {
            f.push(Finding::error(
                "solution",
                format!("solution {}", w[1]),
                "solutions must be sorted and without repeats",
            ));
        }
    }
    for s in &doc.solutions {
        if !s.verify(doc.k) {
            f.push(Finding::error(
                "solution",
                format!("solution {s}"),
                format!("the cubes do not sum to {}", doc.k),
            ));
        }
        if s.min_abs() > doc.bound as u128 {
            f.push(Finding::error(
                "solution",
                format!("solution {s}"),
                format!(
                    "smallest |coordinate| {} exceeds the bound {}",
                    s.min_abs(),
                    doc.bound
                ),
            ));
        }
    }

    // Units: ids unique and sorted, root.
    for w in doc.units.windows(2) {
        if w[0].id >= w[1].id {
            f.push(Finding::error(
                "format",
                format!("unit {}", w[1].id),
                "units must be sorted by id without repeats",
            ));
        }
    }
    let root = hex::encode(merkle_root(&doc.units));
    if !root.eq_ignore_ascii_case(&doc.root) {
        f.push(Finding::error(
            "root",
            "units",
            format!(
                "root hash over the units is {root}, the document says {}",
                doc.root
            ),
        ));
    }

    // Tiling.
    let mut warnings = Vec::new();
    if let (true, Some(geom)) = (target_ok, geom) {
        for u in &doc.units {
            if let Err(e) = rect_check(&u.rect) {
                f.push(Finding::error("tiling", format!("unit {}", u.id), e));
            }
        }
        let tiles: Vec<Tile> = doc
            .units
            .iter()
            .map(|u| Tile {
                id: u.id,
                rect: u.rect,
            })
            .collect();
        let check = tiling::check_tiling(geom, &tiles);
        for x in tiling_findings(&check) {
            if x.is_error() {
                f.push(x);
            } else {
                warnings.push(x);
            }
        }
    }

    // Settlers: every unit rests on reports of at least two distinct owners.
    for u in &doc.units {
        let owners: std::collections::BTreeSet<&str> =
            u.settled_by.iter().map(|s| s.owner.as_str()).collect();
        if owners.len() < 2 {
            f.push(Finding::error(
                "settlers",
                format!("unit {}", u.id),
                format!(
                    "settled by {} distinct owner(s); a unit needs agreeing reports of at least two",
                    owners.len()
                ),
            ));
        }
    }

    // Counts, recomputed by the caller (they need the real kernel).
    if target_ok {
        f.extend(counted);
    }

    // Recheck.
    let mut rechecked = 0;
    if opts.recheck > 0.0 && target_ok {
        if doc.kernel != KERNEL_VERSION {
            f.push(Finding::error(
                "recheck",
                "kernel",
                format!(
                    "the certificate's units were computed with kernel {:?}, this program runs {KERNEL_VERSION:?}: digests are not comparable; use a matching build or drop --recheck",
                    doc.kernel
                ),
            ));
        } else {
            let units: Vec<(i64, Rect, Digest)> =
                doc.units.iter().map(|u| (u.id, u.rect, u.digest)).collect();
            for i in sample(
                &units.iter().map(|u| u.0).collect::<Vec<_>>(),
                opts.recheck,
                opts.seed,
            ) {
                let (id, rect, digest) = units[i];
                rechecked += 1;
                f.extend(recheck_unit(
                    doc.k,
                    id,
                    &rect,
                    &digest,
                    &doc.solutions,
                    opts.threads,
                ));
            }
        }
    }

    if f.iter().any(Finding::is_error) {
        f.extend(warnings);
        return Err(f);
    }
    warnings.extend(f);
    Ok(Summary {
        campaign: doc.campaign.clone(),
        k: doc.k,
        bound: doc.bound,
        kernel: doc.kernel.clone(),
        units: doc.units.len(),
        candidates: doc.candidates(),
        solutions: doc.solutions.clone(),
        root: doc.root.clone(),
        coordinator_key: doc.coordinator_key.clone(),
        issued_at: utc_text(doc.issued_at),
        rechecked,
        warnings,
    })
}

/// Recompute the counts every unit's digest carries where that is cheap (see
/// [`VerifyOptions::counts`]) and compare.
fn recount(doc: &Certificate, opts: &VerifyOptions) -> Vec<Finding> {
    let main: Vec<i64> = doc
        .units
        .iter()
        .filter(|u| u.rect.region == crate::Region::Main)
        .map(|u| u.id)
        .collect();
    let sampled: std::collections::BTreeSet<i64> = sample(&main, opts.counts, opts.seed)
        .into_iter()
        .map(|i| main[i])
        .collect();
    let mut f = Vec::new();
    for u in &doc.units {
        if u.rect.region == crate::Region::Main && !sampled.contains(&u.id) {
            continue;
        }
        let Some(want) = kernel::counts(doc.k, &u.rect) else {
            continue;
        };
        let d = &u.digest;
        if (d.d_values, d.classes, d.candidates) != (want.d_values, want.classes, want.candidates) {
            f.push(Finding::error(
                "counts",
                format!("unit {}", u.id),
                format!(
                    "the digest's counts (d values, classes, candidates) are ({}, {}, {}); the rectangle has ({}, {}, {})",
                    d.d_values, d.classes, d.candidates, want.d_values, want.classes, want.candidates
                ),
            ));
        }
    }
    f
}

/// Re-run one unit with the local kernel and compare its digest with `expected`; every
/// solution the kernel finds that belongs to the unit ([`Solution::in_rect`]) must be among
/// `known`.
pub fn recheck_unit(
    k: i64,
    id: i64,
    rect: &Rect,
    expected: &Digest,
    known: &[Solution],
    threads: usize,
) -> Vec<Finding> {
    let mut f = Vec::new();
    match kernel::scan(k, rect, threads, &|_| {}) {
        Err(e) => f.push(Finding::error(
            "recheck",
            format!("unit {id}"),
            format!("the kernel refused the rectangle: {e}"),
        )),
        Ok(out) => {
            if out.digest != *expected {
                f.push(Finding::error(
                    "recheck",
                    format!("unit {id}"),
                    format!(
                        "recomputed digest {} differs from the settled digest {expected}",
                        out.digest
                    ),
                ));
            }
            for s in out.solutions.iter().filter(|s| s.in_rect(rect)) {
                if !known.contains(s) {
                    f.push(Finding::error(
                        "recheck",
                        format!("unit {id}"),
                        format!("recomputation finds solution {s}, which is missing from the list"),
                    ));
                }
            }
        }
    }
    f
}

/// Deterministic sample of `ceil(fraction · n)` positions of `ids` (at least one when
/// `fraction > 0` and `ids` is not empty): the positions whose `SHA256(seed ‖ id)` is smallest.
/// The same seed picks the same units on any machine, whatever their order.
pub fn sample(ids: &[i64], fraction: f64, seed: u64) -> Vec<usize> {
    if ids.is_empty() || fraction <= 0.0 {
        return Vec::new();
    }
    let n = ((fraction.min(1.0) * ids.len() as f64).ceil() as usize).clamp(1, ids.len());
    let mut keyed: Vec<([u8; 32], usize)> = ids
        .iter()
        .enumerate()
        .map(|(i, id)| {
            let mut h = Sha256::new();
            h.update(b"cubehunt-sample/1");
            h.update(seed.to_le_bytes());
            h.update(id.to_le_bytes());
            (h.finalize().into(), i)
        })
        .collect();
    keyed.sort_unstable();
    let mut out: Vec<usize> = keyed[..n].iter().map(|x| x.1).collect();
    out.sort_unstable();
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::tiling::testgeom;

    /// Verify against the test geometry (independent of the kernel's implementation).
    fn verify_t(doc: &Certificate, pinned: Option<&str>) -> Result<Summary, Vec<Finding>> {
        let geom = testgeom::geometry(doc.k, doc.bound);
        let opts = VerifyOptions {
            pinned_key: pinned.map(str::to_string),
            ..Default::default()
        };
        verify_impl(doc, &opts, Ok(()), Some(&geom), &|_| Ok(()), Vec::new())
    }

    fn units(k: i64, bound: u64) -> Vec<CertUnit> {
        testgeom::plan(k, bound, 7)
            .into_iter()
            .map(|t| CertUnit {
                id: t.id,
                rect: t.rect,
                digest: Digest {
                    d_values: 1,
                    classes: 2,
                    candidates: 10 + t.id as u64,
                    survivors: 1,
                    hash: t.id as u64 * 0x9e37,
                },
                settled_by: vec![
                    Settler {
                        worker: 2,
                        owner: "bea".into(),
                    },
                    Settler {
                        worker: 1,
                        owner: "ana".into(),
                    },
                ],
                rechecked: false,
            })
            .collect()
    }

    // k = 3: (1, 1, 1) and (4, 4, −5), from memory, confirmed by the exact check below.
    fn sols() -> Vec<Solution> {
        vec![Solution::new(4, 4, -5), Solution::new(1, 1, 1)]
    }

    fn good(key: &sign::SecretKey) -> Certificate {
        Certificate::issue(
            "spring-run",
            3,
            40,
            KERNEL_VERSION,
            1_764_636_736,
            units(3, 40),
            sols(),
            key,
        )
    }

    fn checks_of(e: &[Finding]) -> Vec<&str> {
        e.iter()
            .filter(|f| f.is_error())
            .map(|f| f.check.as_str())
            .collect()
    }

    #[test]
    fn a_good_certificate_verifies_after_a_json_round_trip() {
        let key = sign::generate();
        let c = good(&key);
        assert!(sols().iter().all(|s| s.verify(3)));
        assert_eq!(
            c.solutions,
            vec![Solution::new(-5, 4, 4), Solution::new(1, 1, 1)]
        );
        assert!(c.units.windows(2).all(|w| w[0].id < w[1].id));
        assert_eq!(c.units[0].settled_by[0].owner, "ana");
        let json = serde_json::to_string_pretty(&c).unwrap();
        assert!(
            json.contains("\"digest\": \"h"),
            "digest travels in text form"
        );
        let back: Certificate = serde_json::from_str(&json).unwrap();
        assert_eq!(back, c);
        let s = verify_t(&back, Some(&sign::public_to_hex(&key.verifying_key()))).expect("holds");
        assert_eq!(
            (s.k, s.bound, s.units, s.solutions.len()),
            (3, 40, c.units.len(), 2)
        );
        assert!(s.warnings.is_empty(), "{:?}", s.warnings);
        let text = c.render_text();
        assert!(text.contains("min(|x|,|y|,|z|) ≤ 40"), "{text}");
        assert!(text.contains("-5, 4, 4"), "{text}");
        assert!(text.contains("2025-12-02T00:52:16Z"), "{text}");
    }

    #[test]
    fn a_gap_fails() {
        let key = sign::generate();
        let mut us = units(3, 40);
        let gone = us
            .iter()
            .position(|u| u.rect.region == Region::Main)
            .unwrap()
            + 2;
        let rect = us.remove(gone).rect;
        let c = Certificate::issue("spring-run", 3, 40, KERNEL_VERSION, 0, us, sols(), &key);
        let e = verify_t(&c, None).unwrap_err();
        assert_eq!(checks_of(&e), vec!["tiling"], "{e:?}");
        assert!(
            e[0].subject
                .contains(&format!("d∈[{},{})", rect.d_lo, rect.d_hi)),
            "{e:?}"
        );
    }

    #[test]
    fn a_wrong_solution_or_one_beyond_the_bound_fails() {
        let key = sign::generate();
        let mut s = sols();
        s.push(Solution::new(1, 1, 2));
        let c = Certificate::issue(
            "spring-run",
            3,
            40,
            KERNEL_VERSION,
            0,
            units(3, 40),
            s,
            &key,
        );
        let e = verify_t(&c, None).unwrap_err();
        assert_eq!(checks_of(&e), vec!["solution"], "{e:?}");
        assert!(e[0].subject.contains("(1, 1, 2)"), "{e:?}");

        let c = Certificate::issue(
            "spring-run",
            3,
            3,
            KERNEL_VERSION,
            0,
            units(3, 3),
            sols(),
            &key,
        );
        let e = verify_t(&c, None).unwrap_err();
        assert_eq!(checks_of(&e), vec!["solution"], "{e:?}");
        assert!(e[0].message.contains("exceeds the bound 3"), "{e:?}");
    }

    #[test]
    fn a_bad_signature_fails() {
        let key = sign::generate();
        let c = good(&key);
        // Altered after signing: the claim widened to a larger bound.
        let mut t = c.clone();
        t.bound = 41;
        let e = verify_t(&t, None).unwrap_err();
        assert!(checks_of(&e).contains(&"signature"), "{e:?}");
        // A solution dropped after signing.
        let mut t = c.clone();
        t.solutions.pop();
        assert!(checks_of(&verify_t(&t, None).unwrap_err()).contains(&"signature"));
        // Corrupted signature bytes.
        let mut t = c.clone();
        let flip = if t.signature.starts_with('0') {
            "1"
        } else {
            "0"
        };
        t.signature.replace_range(0..1, flip);
        assert_eq!(
            checks_of(&verify_t(&t, None).unwrap_err()),
            vec!["signature"]
        );
        // Someone else's key, embedded with its own valid signature: fine alone, refused when pinned.
        let other = sign::generate();
        let forged = good(&other);
        assert!(verify_t(&forged, None).is_ok());
        let pin = sign::public_to_hex(&key.verifying_key());
        assert_eq!(
            checks_of(&verify_t(&forged, Some(&pin)).unwrap_err()),
            vec!["signature"]
        );
        // A signature moved from one certificate to another.
        let mut t = good(&other);
        t.signature = c.signature.clone();
        assert_eq!(
            checks_of(&verify_t(&t, None).unwrap_err()),
            vec!["signature"]
        );
    }

    #[test]
    fn an_altered_unit_breaks_the_root() {
        let key = sign::generate();
        let mut c = good(&key);
        c.units[3].digest.hash ^= 1;
        let e = verify_t(&c, None).unwrap_err();
        assert_eq!(checks_of(&e), vec!["root"], "{e:?}");
        let mut c = good(&key);
        c.units[1].settled_by[0].owner = "cal".into();
        assert_eq!(checks_of(&verify_t(&c, None).unwrap_err()), vec!["root"]);
        // Reordered or repeated units.
        let mut c = good(&key);
        c.units.swap(0, 1);
        let e = verify_t(&c, None).unwrap_err();
        assert!(
            checks_of(&e).contains(&"format") && checks_of(&e).contains(&"root"),
            "{e:?}"
        );
    }

    #[test]
    fn unknown_format_is_refused() {
        let key = sign::generate();
        let mut c = good(&key);
        c.format = "something-else/9".into();
        assert_eq!(checks_of(&verify_t(&c, None).unwrap_err()), vec!["format"]);
    }

    /// RFC 6962 §2.1 written out literally, for comparison with the implementation.
    fn naive_root(leaves: &[Vec<u8>]) -> [u8; 32] {
        fn h(parts: &[&[u8]]) -> [u8; 32] {
            let mut s = Sha256::new();
            for p in parts {
                s.update(p);
            }
            s.finalize().into()
        }
        match leaves.len() {
            0 => h(&[]),
            1 => h(&[&[0], &leaves[0]]),
            n => {
                let mut k = 1;
                while 2 * k < n {
                    k *= 2;
                }
                h(&[&[1], &naive_root(&leaves[..k]), &naive_root(&leaves[k..])])
            }
        }
    }

    #[test]
    fn merkle_root_is_rfc6962() {
        // SHA-256 of the empty string, from memory, confirmed with Python's hashlib.
        assert_eq!(
            hex::encode(merkle_root(&[])),
            "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"
        );
        let us = units(30, 300);
        assert!(us.len() > 40);
        for n in 0..us.len() {
            let leaves: Vec<Vec<u8>> = us[..n].iter().map(|u| u.leaf_bytes()).collect();
            assert_eq!(merkle_root(&us[..n]), naive_root(&leaves), "n = {n}");
        }
        assert_eq!(
            String::from_utf8(us[0].leaf_bytes()).unwrap(),
            "cubehunt-cert-unit/2\nid=1\nregion=small\nd=0..0\nz=0..5\ndigest=h0000000000009e37-d1-r2-c11-s1\nrechecked=false\nsettled_by=2:\"bea\",1:\"ana\"\n"
        );
    }

    #[test]
    fn sampling_is_deterministic_and_sized() {
        let ids: Vec<i64> = (100..1100).collect();
        let a = sample(&ids, 0.05, 7);
        assert_eq!(a.len(), 50);
        let mut rev = ids.clone();
        rev.reverse();
        let b: Vec<i64> = sample(&rev, 0.05, 7).iter().map(|&i| rev[i]).collect();
        let mut a_ids: Vec<i64> = a.iter().map(|&i| ids[i]).collect();
        let mut b = b;
        a_ids.sort();
        b.sort();
        assert_eq!(a_ids, b, "the sample depends on ids and seed, not order");
        assert_ne!(sample(&ids, 0.05, 8), a);
        assert_eq!(sample(&ids, 1e-9, 1).len(), 1);
        assert_eq!(sample(&ids, 2.0, 1).len(), 1000);
        assert!(sample(&ids, 0.0, 1).is_empty());
    }

    #[test]
    fn the_kernel_geometry_agrees_with_the_independent_one() {
        for d in (1..3000u64).chain([10_000_000, 123_456_789_012]) {
            assert_eq!(
                kernel::main_z_floor(d),
                testgeom::floor_d_over_alpha(d),
                "d = {d}"
            );
        }
        for (k, b) in [
            (3i64, 1u64),
            (3, 2),
            (30, 1000),
            (114, 10),
            (390, 19),
            (390, 20),
            (33, 123_456),
        ] {
            let g = Geometry::of_target(k, b);
            let t = testgeom::geometry(k, b);
            assert_eq!(g.z0, t.z0, "k={k}");
            if b > g.z0 {
                assert_eq!(g.main_d_end, t.main_d_end, "k={k} B={b}");
            }
        }
    }

    /// Units with digests computed by the kernel: small plan of a target in pieces.
    fn scanned(k: i64, bound_from: u64, bound_to: u64, first_id: i64) -> Vec<CertUnit> {
        let z0 = kernel::z0(k);
        let mut rects = Vec::new();
        if bound_from < z0 {
            rects.push(Rect {
                region: Region::Small,
                d_lo: 0,
                d_hi: 0,
                z_lo: bound_from,
                z_hi: z0.min(bound_to),
            });
        }
        let lo = bound_from.max(z0);
        if bound_to > lo {
            rects.push(Rect {
                region: Region::Equal,
                d_lo: 0,
                d_hi: 0,
                z_lo: lo,
                z_hi: bound_to,
            });
            let d_end = kernel::domain(k, bound_to, Region::Main).unwrap().d_hi;
            let mut a = 1;
            while a < d_end {
                let b = (a + 5).min(d_end);
                let zl = lo.max(kernel::main_z_floor(a));
                if zl < bound_to {
                    rects.push(Rect {
                        region: Region::Main,
                        d_lo: a,
                        d_hi: b,
                        z_lo: zl,
                        z_hi: bound_to,
                    });
                }
                a = b;
            }
        }
        rects
            .into_iter()
            .enumerate()
            .map(|(i, rect)| {
                let out = kernel::scan(k, &rect, 1, &|_| {}).unwrap();
                CertUnit {
                    id: first_id + i as i64,
                    rect,
                    digest: out.digest,
                    settled_by: vec![
                        Settler {
                            worker: 1,
                            owner: "ana".into(),
                        },
                        Settler {
                            worker: 2,
                            owner: "bea".into(),
                        },
                    ],
                    rechecked: false,
                }
            })
            .collect()
    }

    #[test]
    fn with_the_kernel_extension_keeps_the_old_certificate_and_recheck_catches_a_false_digest() {
        let key = sign::generate();
        let k = 30; // Z0 = 5
        let (b1, b2) = (60u64, 150u64);
        let old = scanned(k, 0, b1, 1);
        let new = scanned(k, b1, b2, 1000);
        let c1 = Certificate::issue("ext", k, b1, KERNEL_VERSION, 0, old.clone(), vec![], &key);
        let opts = VerifyOptions {
            recheck: 1.0,
            seed: 5,
            ..Default::default()
        };
        let s = verify_certificate_with(&c1, &opts).expect("the first certificate holds");
        assert_eq!(s.rechecked, old.len());
        // After extension every unit planned for B1 is still the one needed for B1, and the
        // new ones are not needed for B1.
        let all: Vec<CertUnit> = old.iter().chain(&new).cloned().collect();
        let needed_b1: Vec<i64> = all
            .iter()
            .filter(|u| needed_for_bound(k, b1, &u.rect))
            .map(|u| u.id)
            .collect();
        assert_eq!(needed_b1, old.iter().map(|u| u.id).collect::<Vec<_>>());
        assert!(all.iter().all(|u| needed_for_bound(k, b2, &u.rect)));
        let again = Certificate::issue(
            "ext",
            k,
            b1,
            KERNEL_VERSION,
            0,
            all.iter()
                .filter(|u| needed_for_bound(k, b1, &u.rect))
                .cloned()
                .collect(),
            vec![],
            &key,
        );
        assert_eq!(again.root, c1.root, "same units, same root");
        let c2 = Certificate::issue("ext", k, b2, KERNEL_VERSION, 0, all.clone(), vec![], &key);
        assert!(verify_certificate(&c2).is_ok());
        assert!(
            verify_certificate(&c1).is_ok(),
            "the old certificate still holds for its bound"
        );
        // The old units alone do not cover the new bound.
        let short = Certificate::issue("ext", k, b2, KERNEL_VERSION, 0, old.clone(), vec![], &key);
        assert!(checks_of(&verify_certificate(&short).unwrap_err()).contains(&"tiling"));
        // A coordinator that signs a made-up digest passes the offline checks but not a recheck.
        let mut lie = old.clone();
        lie[2].digest.hash ^= 0x40;
        let c = Certificate::issue("ext", k, b1, KERNEL_VERSION, 0, lie, vec![], &key);
        assert!(verify_certificate(&c).is_ok());
        let e = verify_certificate_with(&c, &opts).unwrap_err();
        assert_eq!(checks_of(&e), vec!["recheck"], "{e:?}");
        assert!(e[0].subject == format!("unit {}", old[2].id), "{e:?}");
    }

    #[test]
    fn with_the_kernel_a_missing_solution_is_found_by_recheck() {
        // k = 3: (1, 1, 1) and (4, 4, −5), from memory; the kernel must find both up to 10.
        let key = sign::generate();
        let us = scanned(3, 0, 10, 1);
        let full = Certificate::issue("k3", 3, 10, KERNEL_VERSION, 0, us.clone(), sols(), &key);
        let opts = VerifyOptions {
            recheck: 1.0,
            seed: 1,
            ..Default::default()
        };
        verify_certificate_with(&full, &opts).expect("holds");
        let missing = Certificate::issue(
            "k3",
            3,
            10,
            KERNEL_VERSION,
            0,
            us,
            vec![Solution::new(1, 1, 1)],
            &key,
        );
        assert!(
            verify_certificate(&missing).is_ok(),
            "offline checks cannot see a missing solution"
        );
        let e = verify_certificate_with(&missing, &opts).unwrap_err();
        assert!(
            e.iter()
                .any(|f| f.check == "recheck" && f.message.contains("(-5, 4, 4)")),
            "{e:?}"
        );
    }

    #[test]
    fn utc_text_matches_python_datetime() {
        // Reference values from Python's datetime.fromtimestamp(t, timezone.utc).
        for (t, s) in [
            (0, "1970-01-01T00:00:00Z"),
            (951_782_400, "2000-02-29T00:00:00Z"),
            (1_764_636_736, "2025-12-02T00:52:16Z"),
            (-86_400, "1969-12-31T00:00:00Z"),
            (4_102_444_800, "2100-01-01T00:00:00Z"),
        ] {
            assert_eq!(utc_text(t), s);
        }
    }
}
