//! Merkle trees over byte strings: the tree hash of RFC 6962 §2.1 (B. Laurie, A. Langley,
//! E. Kasper, *Certificate Transparency*, 2013) with SHA-256, and its audit paths (§2.1.1).
//!
//! `leaf = SHA256(0x00 ‖ bytes)`, `node = SHA256(0x01 ‖ left ‖ right)`, a list of `n > 1`
//! leaves split at the largest power of two below `n`, the empty tree `SHA256("")`.
//!
//! Used twice: the certificate's root over its units ([`crate::cert`]) and a report's
//! commitment to the digests of its unit's pieces ([`crate::report`]), where an audit path
//! shows, for one piece the coordinator spot-checks, that the claimed piece digest is the
//! one the worker signed.
//!
//! This module knows nothing of what the leaves mean.

use sha2::{Digest as _, Sha256};

pub type Hash = [u8; 32];

/// The hash of one leaf.
pub fn leaf_hash(bytes: &[u8]) -> Hash {
    let mut h = Sha256::new();
    h.update([0u8]);
    h.update(bytes);
    h.finalize().into()
}

fn node_hash(left: &Hash, right: &Hash) -> Hash {
    let mut h = Sha256::new();
    h.update([1u8]);
    h.update(left);
    h.update(right);
    h.finalize().into()
}

/// Largest power of two strictly below `n` (for `n ≥ 2`).
fn split_point(n: usize) -> usize {
    debug_assert!(n >= 2);
    1 << (usize::BITS - 1 - (n - 1).leading_zeros())
}

/// The tree hash over leaf hashes, in order.
pub fn root(leaves: &[Hash]) -> Hash {
    match leaves.len() {
        0 => Sha256::digest([]).into(),
        1 => leaves[0],
        n => {
            let k = split_point(n);
            node_hash(&root(&leaves[..k]), &root(&leaves[k..]))
        }
    }
}

/// The audit path of leaf `index` (RFC 6962 §2.1.1): sibling hashes from the leaf upwards.
/// Panics when `index` is out of range.
pub fn path(leaves: &[Hash], index: usize) -> Vec<Hash> {
    assert!(index < leaves.len(), "leaf {index} of {}", leaves.len());
    let mut out = Vec::new();
    path_into(leaves, index, &mut out);
    out
}

fn path_into(leaves: &[Hash], index: usize, out: &mut Vec<Hash>) {
    let n = leaves.len();
    if n <= 1 {
        return;
    }
    let k = split_point(n);
    if index < k {
        path_into(&leaves[..k], index, out);
        out.push(root(&leaves[k..]));
    } else {
        path_into(&leaves[k..], index - k, out);
        out.push(root(&leaves[..k]));
    }
}

/// Whether `leaf` at `index` of a tree of `size` leaves, with audit path `path`, gives `root`.
pub fn verify_path(leaf: &Hash, index: usize, size: usize, path: &[Hash], want: &Hash) -> bool {
    if index >= size {
        return false;
    }
    match climb(leaf, index, size, path) {
        Some((h, rest)) => rest.is_empty() && h == *want,
        None => false,
    }
}

/// Recompute the root of a subtree of `size` leaves holding `leaf` at `index`, consuming the
/// path from its end (the top of the path belongs to the outermost split).
fn climb<'a>(
    leaf: &Hash,
    index: usize,
    size: usize,
    path: &'a [Hash],
) -> Option<(Hash, &'a [Hash])> {
    if size <= 1 {
        return Some((*leaf, path));
    }
    let (top, below) = path.split_last()?;
    let k = split_point(size);
    if index < k {
        let (h, rest) = climb(leaf, index, k, below)?;
        Some((node_hash(&h, top), rest))
    } else {
        let (h, rest) = climb(leaf, index - k, size - k, below)?;
        Some((node_hash(top, &h), rest))
    }
}

/// Hex text of a path: hashes joined by commas (empty for a one-leaf tree).
pub fn path_to_hex(path: &[Hash]) -> String {
    path.iter().map(hex::encode).collect::<Vec<_>>().join(",")
}

/// Parse [`path_to_hex`]; `None` on anything malformed (at most 64 hashes).
pub fn path_from_hex(s: &str) -> Option<Vec<Hash>> {
    if s.is_empty() {
        return Some(Vec::new());
    }
    let parts: Vec<&str> = s.split(',').collect();
    if parts.len() > 64 {
        return None;
    }
    parts
        .iter()
        .map(|p| hex::decode(p).ok().and_then(|v| v.try_into().ok()))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The RFC 6962 definition written out literally, as an independent reference.
    fn mth_reference(d: &[Vec<u8>]) -> Hash {
        let n = d.len();
        if n == 0 {
            return Sha256::digest([]).into();
        }
        if n == 1 {
            let mut h = Sha256::new();
            h.update([0u8]);
            h.update(&d[0]);
            return h.finalize().into();
        }
        let mut k = 1;
        while k * 2 < n {
            k *= 2;
        }
        let mut h = Sha256::new();
        h.update([1u8]);
        h.update(mth_reference(&d[..k]));
        h.update(mth_reference(&d[k..]));
        h.finalize().into()
    }

    #[test]
    fn root_and_every_path_verify_for_many_sizes() {
        for n in 0..40usize {
            let data: Vec<Vec<u8>> = (0..n).map(|i| format!("leaf {i}").into_bytes()).collect();
            let leaves: Vec<Hash> = data.iter().map(|d| leaf_hash(d)).collect();
            let r = root(&leaves);
            assert_eq!(r, mth_reference(&data), "n = {n}");
            for i in 0..n {
                let p = path(&leaves, i);
                assert!(p.len() <= 6);
                assert!(verify_path(&leaves[i], i, n, &p, &r), "n = {n}, i = {i}");
                // Wrong index, wrong leaf, truncated or extended path: refused.
                if n > 1 {
                    assert!(!verify_path(&leaves[i], (i + 1) % n, n, &p, &r));
                    assert!(!verify_path(&leaves[(i + 1) % n], i, n, &p, &r));
                    assert!(!verify_path(&leaves[i], i, n, &p[..p.len() - 1], &r));
                }
                let mut longer = p.clone();
                longer.push([7; 32]);
                assert!(!verify_path(&leaves[i], i, n, &longer, &r));
                assert_eq!(path_from_hex(&path_to_hex(&p)).unwrap(), p);
            }
        }
        assert!(path_from_hex("zz").is_none());
        assert!(path_from_hex(&vec!["00".repeat(32); 65].join(",")).is_none());
    }
}
