//! What a worker returns for a lease, and the canonical bytes it signs.
//!
//! A report carries the unit's digest and the digest of every piece of the unit
//! ([`crate::pieces`]), in piece order; the unit's digest must be their combination. The
//! signature covers the Merkle root of the piece digests ([`Report::pieces_root`]), so the
//! coordinator can keep the root alone and still show, for each piece it spot-checks, that
//! the claimed piece digest is the one the worker signed (an audit path, [`crate::merkle`]).

use crate::{merkle, Digest, Rect, Solution};
use serde::{Deserialize, Serialize};
use std::fmt::Write as _;

/// The text that opens a report's canonical bytes; names the format version.
pub const FORMAT: &str = "cubehunt-report/2";

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Report {
    pub lease_id: i64,
    pub unit_id: i64,
    pub worker_id: i64,
    pub kernel: String,
    pub k: i64,
    pub rect: Rect,
    #[serde(with = "crate::digest::text")]
    pub digest: Digest,
    /// The digest of every piece of the unit, in [`crate::pieces::of_unit`] order.
    #[serde(with = "crate::digest::text_list")]
    pub pieces: Vec<Digest>,
    /// Canonical triples found in the rectangle, sorted, without repeats.
    pub solutions: Vec<Solution>,
    /// Wall-clock seconds the computation took (informational, not signed).
    #[serde(default)]
    pub elapsed_s: f64,
}

/// The leaf bytes of piece `index` with digest `d` in the pieces tree.
pub fn piece_leaf(index: usize, d: &Digest) -> Vec<u8> {
    format!("cubehunt-piece/1\nindex={index}\ndigest={d}\n").into_bytes()
}

/// The leaf hashes of a list of piece digests.
pub fn piece_leaves(pieces: &[Digest]) -> Vec<merkle::Hash> {
    pieces
        .iter()
        .enumerate()
        .map(|(i, d)| merkle::leaf_hash(&piece_leaf(i, d)))
        .collect()
}

impl Report {
    /// Merkle root (hex) over the piece digests.
    pub fn pieces_root(&self) -> String {
        hex::encode(merkle::root(&piece_leaves(&self.pieces)))
    }

    /// The combination of the piece digests (must equal `digest`).
    pub fn pieces_total(&self) -> Digest {
        self.pieces.iter().copied().sum()
    }

    /// The exact bytes the worker signs: everything but the timing, with the pieces by their
    /// root (see [`signed_bytes`]).
    pub fn canonical_bytes(&self) -> Vec<u8> {
        signed_bytes(&SignedFields {
            lease_id: self.lease_id,
            unit_id: self.unit_id,
            worker_id: self.worker_id,
            kernel: &self.kernel,
            k: self.k,
            rect: &self.rect,
            digest: &self.digest,
            pieces: self.pieces.len(),
            pieces_root: &self.pieces_root(),
            solutions: &self.solutions,
        })
    }
}

/// Everything a report's signature covers; what a store keeps of a report so that its
/// signature can still be checked without the list of piece digests.
pub struct SignedFields<'a> {
    pub lease_id: i64,
    pub unit_id: i64,
    pub worker_id: i64,
    pub kernel: &'a str,
    pub k: i64,
    pub rect: &'a Rect,
    pub digest: &'a Digest,
    pub pieces: usize,
    pub pieces_root: &'a str,
    pub solutions: &'a [Solution],
}

/// The canonical bytes of a report. Injective: the only free-form field (kernel) is
/// JSON-quoted and every other field is a number, a digest or a hex string.
pub fn signed_bytes(f: &SignedFields) -> Vec<u8> {
    let r = f.rect;
    let mut s = format!(
        "{FORMAT}\nlease={}\nunit={}\nworker={}\nkernel={}\nk={}\nregion={}\nd={}..{}\nz={}..{}\ndigest={}\npieces={}\npieces_root={}\n",
        f.lease_id,
        f.unit_id,
        f.worker_id,
        serde_json::to_string(f.kernel).expect("string serialises"),
        f.k,
        r.region,
        r.d_lo,
        r.d_hi,
        r.z_lo,
        r.z_hi,
        f.digest,
        f.pieces,
        f.pieces_root,
    );
    for sol in f.solutions {
        let [a, b, c] = sol.0;
        let _ = writeln!(s, "solution={a},{b},{c}");
    }
    s.into_bytes()
}

/// A report with the worker's Ed25519 signature (hex) over [`Report::canonical_bytes`].
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SignedReport {
    pub report: Report,
    pub signature: String,
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::Region;

    fn report() -> Report {
        let p = |h| Digest {
            candidates: 2,
            hash: h,
            ..Digest::ZERO
        };
        let pieces = vec![p(1), p(2), p(3)];
        Report {
            lease_id: 7,
            unit_id: 3,
            worker_id: 2,
            kernel: "k/1".into(),
            k: 33,
            rect: Rect {
                region: Region::Main,
                d_lo: 1,
                d_hi: 9,
                z_lo: 5,
                z_hi: 99,
            },
            digest: pieces.iter().copied().sum(),
            pieces,
            solutions: vec![],
            elapsed_s: 1.5,
        }
    }

    #[test]
    fn signed_bytes_cover_every_piece_but_not_the_timing() {
        let r = report();
        let base = r.canonical_bytes();
        let mut t = r.clone();
        t.elapsed_s = 99.0;
        assert_eq!(t.canonical_bytes(), base);
        let mut t = r.clone();
        t.pieces[1].survivors += 1;
        assert_ne!(t.canonical_bytes(), base);
        let mut t = r.clone();
        t.pieces.swap(0, 2);
        assert_ne!(t.canonical_bytes(), base);
        assert_eq!(r.pieces_total(), r.digest);
        // An audit path from the root proves one piece's claimed digest.
        let leaves = piece_leaves(&r.pieces);
        let root: [u8; 32] = hex::decode(r.pieces_root()).unwrap().try_into().unwrap();
        let path = merkle::path(&leaves, 1);
        assert!(merkle::verify_path(&leaves[1], 1, 3, &path, &root));
    }

    #[test]
    fn unknown_fields_are_refused() {
        let r = report();
        let mut v = serde_json::to_value(SignedReport {
            report: r,
            signature: "s".into(),
        })
        .unwrap();
        assert!(serde_json::from_value::<SignedReport>(v.clone()).is_ok());
        v["report"]["padding"] = serde_json::json!("x".repeat(100));
        let e = serde_json::from_value::<SignedReport>(v).unwrap_err();
        assert!(e.to_string().contains("padding"), "{e}");
    }
}
