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
//! cubehunt-cert-unit/1\nid=<id>\nregion=<small|equal|main>\nd=<d_lo>..<d_hi>\nz=<z_lo>..<z_hi>\ndigest=<digest text>\nsettled_by=<worker>:<owner JSON string>,…\n
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
use crate::{kernel, sign, Digest, Rect, Region, Solution, KERNEL_VERSION};
use serde::{Deserialize, Serialize};
use sha2::{Digest as _, Sha256};
use std::fmt::{self, Write as _};

pub const FORMAT: &str = "cubehunt-certificate/1";

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
    #[serde(with = "digest_text")]
    pub digest: Digest,
    #[serde(default)]
    pub settled_by: Vec<Settler>,
}

mod digest_text {
    use crate::Digest;
    use serde::{Deserialize, Deserializer, Serializer};
    pub fn serialize<S: Serializer>(d: &Digest, s: S) -> Result<S::Ok, S::Error> {
        s.collect_str(d)
    }
    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Digest, D::Error> {
        let s = String::deserialize(d)?;
        s.parse().map_err(serde::de::Error::custom)
    }
}

impl CertUnit {
    /// The leaf encoding of the root hash (see the module documentation).
    pub fn leaf_bytes(&self) -> Vec<u8> {
        let r = &self.rect;
        let mut s = format!(
            "cubehunt-cert-unit/1\nid={}\nregion={}\nd={}..{}\nz={}..{}\ndigest={}\nsettled_by=",
            self.id, r.region, r.d_lo, r.d_hi, r.z_lo, r.z_hi, self.digest
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

/// The Merkle root (RFC 6962 §2.1, SHA-256) over the units in the given order.
pub fn merkle_root(units: &[CertUnit]) -> [u8; 32] {
    let leaves: Vec<[u8; 32]> = units
        .iter()
        .map(|u| {
            let mut h = Sha256::new();
            h.update([0u8]);
            h.update(u.leaf_bytes());
            h.finalize().into()
        })
        .collect();
    mth(&leaves)
}

fn mth(leaves: &[[u8; 32]]) -> [u8; 32] {
    match leaves.len() {
        0 => Sha256::digest([]).into(),
        1 => leaves[0],
        n => {
            let k = if n.is_power_of_two() {
                n / 2
            } else {
                1 << (usize::BITS - 1 - n.leading_zeros())
            };
            let mut h = Sha256::new();
            h.update([1u8]);
            h.update(mth(&leaves[..k]));
            h.update(mth(&leaves[k..]));
            h.finalize().into()
        }
    }
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
    verify_impl(doc, opts, target, geom.as_ref(), &rect_check)
}

/// The checks, with the kernel's geometry passed in (so that they can be tested against an
/// independent implementation of it).
fn verify_impl(
    doc: &Certificate,
    opts: &VerifyOptions,
    target_check: Result<(), String>,
    geom: Option<&Geometry>,
    rect_check: &dyn Fn(&Rect) -> Result<(), String>,
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

/// Re-run one unit with the local kernel and compare its digest with `expected`; every
/// solution the kernel finds must be among `known`.
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
            for s in &out.solutions {
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
