//! The digest of a unit's work (docs/method.md, "The digest").
//!
//! Counts plus a commutative hash over every sieve survivor. Combination is field-wise
//! addition (wrapping for the hash), so the digest of a union of disjoint rectangles is the
//! combination of their digests, independent of thread count, order and machine.

use serde::{Deserialize, Serialize};
use std::fmt;
use std::str::FromStr;

#[derive(
    Clone, Copy, Debug, Default, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize,
)]
pub struct Digest {
    /// `d` values visited (main region); `z` values visited in the small and equal regions.
    pub d_values: u64,
    /// Residue classes `(d, z₀ mod d, s)` enumerated (main region); 0 elsewhere.
    pub classes: u64,
    /// Candidates `(d, z)` in the rectangle (computable without doing the work).
    pub candidates: u64,
    /// Candidates that passed the sieve and were sent to the exact test.
    pub survivors: u64,
    /// Sum mod 2⁶⁴ of the survivor hash over every survivor.
    pub hash: u64,
}

impl Digest {
    pub const ZERO: Digest = Digest {
        d_values: 0,
        classes: 0,
        candidates: 0,
        survivors: 0,
        hash: 0,
    };

    /// Combine the digests of two disjoint pieces of work.
    pub fn combine(&self, o: &Digest) -> Digest {
        Digest {
            d_values: self.d_values.wrapping_add(o.d_values),
            classes: self.classes.wrapping_add(o.classes),
            candidates: self.candidates.wrapping_add(o.candidates),
            survivors: self.survivors.wrapping_add(o.survivors),
            hash: self.hash.wrapping_add(o.hash),
        }
    }

    pub fn add_assign(&mut self, o: &Digest) {
        *self = self.combine(o);
    }
}

impl std::iter::Sum for Digest {
    fn sum<I: Iterator<Item = Digest>>(iter: I) -> Digest {
        iter.fold(Digest::ZERO, |a, b| a.combine(&b))
    }
}

/// Text form: `h<hash hex 16>-d<d_values>-r<classes>-c<candidates>-s<survivors>`.
impl fmt::Display for Digest {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "h{:016x}-d{}-r{}-c{}-s{}",
            self.hash, self.d_values, self.classes, self.candidates, self.survivors
        )
    }
}

#[derive(Debug, thiserror::Error)]
#[error("malformed digest {0:?}: expected h<16 hex>-d<n>-r<n>-c<n>-s<n>")]
pub struct DigestParseError(String);

impl FromStr for Digest {
    type Err = DigestParseError;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let err = || DigestParseError(s.chars().take(120).collect());
        let mut parts = s.split('-');
        let mut next = |tag: char| -> Result<&str, DigestParseError> {
            let p = parts.next().ok_or_else(err)?;
            p.strip_prefix(tag).ok_or_else(err)
        };
        let h = next('h')?;
        if h.len() != 16 {
            return Err(err());
        }
        let hash = u64::from_str_radix(h, 16).map_err(|_| err())?;
        let d_values = next('d')?.parse().map_err(|_| err())?;
        let classes = next('r')?.parse().map_err(|_| err())?;
        let candidates = next('c')?.parse().map_err(|_| err())?;
        let survivors = next('s')?.parse().map_err(|_| err())?;
        if parts.next().is_some() {
            return Err(err());
        }
        Ok(Digest {
            d_values,
            classes,
            candidates,
            survivors,
            hash,
        })
    }
}

/// Serde helpers: a digest as its text form (`#[serde(with = "digest::text")]`).
pub mod text {
    use super::Digest;
    use serde::{Deserialize, Deserializer, Serializer};
    pub fn serialize<S: Serializer>(d: &Digest, s: S) -> Result<S::Ok, S::Error> {
        s.collect_str(d)
    }
    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Digest, D::Error> {
        let s = <std::borrow::Cow<'de, str>>::deserialize(d)?;
        if s.len() > super::MAX_TEXT_LEN {
            return Err(serde::de::Error::custom("digest text too long"));
        }
        s.parse().map_err(serde::de::Error::custom)
    }
}

/// Serde helpers: a list of digests as a list of text forms, at most
/// [`crate::pieces::MAX_PIECES`] long (`#[serde(with = "digest::text_list")]`).
pub mod text_list {
    use super::Digest;
    use serde::de::{SeqAccess, Visitor};
    use serde::ser::SerializeSeq;
    use serde::{Deserializer, Serializer};
    use std::fmt;

    pub fn serialize<S: Serializer>(v: &[Digest], s: S) -> Result<S::Ok, S::Error> {
        let mut seq = s.serialize_seq(Some(v.len()))?;
        for d in v {
            seq.serialize_element(&d.to_string())?;
        }
        seq.end()
    }

    struct ListVisitor;
    impl<'de> Visitor<'de> for ListVisitor {
        type Value = Vec<Digest>;
        fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
            write!(
                f,
                "a list of at most {} digests in text form",
                crate::pieces::MAX_PIECES
            )
        }
        fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<Vec<Digest>, A::Error> {
            let max = crate::pieces::MAX_PIECES as usize;
            let mut out = Vec::with_capacity(seq.size_hint().unwrap_or(0).min(max));
            while let Some(s) = seq.next_element::<std::borrow::Cow<'de, str>>()? {
                if out.len() == max {
                    return Err(serde::de::Error::custom(format!(
                        "more than {max} piece digests"
                    )));
                }
                if s.len() > super::MAX_TEXT_LEN {
                    return Err(serde::de::Error::custom("digest text too long"));
                }
                out.push(s.parse().map_err(serde::de::Error::custom)?);
            }
            Ok(out)
        }
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<Digest>, D::Error> {
        d.deserialize_seq(ListVisitor)
    }
}

/// Longest text form: `h` + 16 hex + four counts of at most 20 digits with their tags.
pub const MAX_TEXT_LEN: usize = 17 + 4 * 22;

#[cfg(test)]
mod tests {
    use super::*;
    #[test]
    fn text_round_trip_and_rejects_garbage() {
        let d = Digest {
            d_values: 3,
            classes: 9,
            candidates: 1234,
            survivors: 7,
            hash: 0xdead_beef,
        };
        let s = d.to_string();
        assert_eq!(s.parse::<Digest>().unwrap(), d);
        for bad in [
            "",
            "h12-d1-r1-c1-s1",
            "x0000000000000000-d1-r1-c1-s1",
            &format!("{s}-extra"),
        ] {
            assert!(bad.parse::<Digest>().is_err(), "{bad}");
        }
    }
    #[test]
    fn combine_is_commutative_and_wraps() {
        let a = Digest {
            hash: u64::MAX,
            candidates: 1,
            ..Digest::ZERO
        };
        let b = Digest {
            hash: 2,
            candidates: 5,
            ..Digest::ZERO
        };
        assert_eq!(a.combine(&b), b.combine(&a));
        assert_eq!(a.combine(&b).hash, 1);
    }
}
