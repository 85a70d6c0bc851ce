//! A solution triple of `x³ + y³ + z³ = k`, in canonical form, verified in big integers.
//!
//! Canonical form (METHOD.md): the three values sorted ascending, printed as decimal strings.
//! Values are held as `i128`: within the supported range (|z| < 2⁶³) the larger coordinates
//! stay below 2⁹⁶ in absolute value. Verification never trusts `i128` arithmetic: it uses GMP.

use rug::{ops::Pow, Integer};
use serde::{Deserialize, Serialize};
use std::fmt;

/// A triple sorted ascending. Serialises as three decimal strings.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct Solution(pub [i128; 3]);

impl Solution {
    /// Canonical (sorted) form of any ordering.
    pub fn new(a: i128, b: i128, c: i128) -> Solution {
        let mut v = [a, b, c];
        v.sort();
        Solution(v)
    }

    /// Exact check `x³ + y³ + z³ = k` in big integers.
    pub fn verify(&self, k: i64) -> bool {
        let s: Integer = self.0.iter().map(|&v| Integer::from(v).pow(3)).sum();
        s == k
    }

    /// Smallest absolute value of the three coordinates (the one the bound applies to).
    pub fn min_abs(&self) -> u128 {
        self.0.iter().map(|v| v.unsigned_abs()).min().unwrap()
    }

    pub fn to_strings(&self) -> [String; 3] {
        [
            self.0[0].to_string(),
            self.0[1].to_string(),
            self.0[2].to_string(),
        ]
    }

    /// Parse three decimal strings (any order; result is canonical). Refuses anything that is
    /// not a plain decimal integer of at most 39 digits.
    pub fn parse(parts: &[String]) -> Result<Solution, String> {
        if parts.len() != 3 {
            return Err(format!("a solution has 3 coordinates, got {}", parts.len()));
        }
        let mut v = [0i128; 3];
        for (slot, p) in v.iter_mut().zip(parts) {
            let digits = p.strip_prefix('-').unwrap_or(p);
            if digits.is_empty() || digits.len() > 39 || !digits.bytes().all(|b| b.is_ascii_digit())
            {
                return Err(format!(
                    "coordinate {:?} is not a decimal integer of at most 39 digits",
                    p.chars().take(50).collect::<String>()
                ));
            }
            *slot = p
                .parse::<i128>()
                .map_err(|_| format!("coordinate {p:?} is out of range"))?;
        }
        Ok(Solution::new(v[0], v[1], v[2]))
    }
}

impl fmt::Display for Solution {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "({}, {}, {})", self.0[0], self.0[1], self.0[2])
    }
}

impl Serialize for Solution {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        self.to_strings().serialize(s)
    }
}

impl<'de> Deserialize<'de> for Solution {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        let v: Vec<String> = Vec::deserialize(d)?;
        Solution::parse(&v).map_err(serde::de::Error::custom)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    #[test]
    fn booker_33_verifies_and_a_perturbation_does_not() {
        // Booker, "Cracking the problem with 33", Research in Number Theory 5 (2019), art. 26.
        let s = Solution::new(8866128975287528, -8778405442862239, -2736111468807040);
        assert!(s.verify(33));
        assert!(!Solution::new(8866128975287528, -8778405442862239, -2736111468807041).verify(33));
        assert_eq!(s.to_strings()[0], "-8778405442862239");
        let j = serde_json::to_string(&s).unwrap();
        assert_eq!(serde_json::from_str::<Solution>(&j).unwrap(), s);
    }
    #[test]
    fn parse_refuses_junk() {
        for bad in [
            vec!["1", "2"],
            vec!["1", "2", "x"],
            vec!["1", "2", "+3"],
            vec!["1", "2", &"9".repeat(40)],
        ] {
            let v: Vec<String> = bad.iter().map(|s| s.to_string()).collect();
            assert!(Solution::parse(&v).is_err(), "{bad:?}");
        }
    }
}
