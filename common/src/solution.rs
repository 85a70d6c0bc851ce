//! A solution triple of `x³ + y³ + z³ = k`, in canonical form, verified in big integers.
//!
//! Canonical form (docs/method.md): the three values sorted ascending, printed as decimal strings.
//! Values are held as `i128`: within the supported range (|z| < 2⁶³) the larger coordinates
//! stay below 2⁹⁶ in absolute value. Verification never trusts `i128` arithmetic: it uses GMP.

use crate::{Rect, Region};
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

    /// Whether a verified solution lies in a rectangle: its smallest coordinate `z` (any of them
    /// on a tie) has `|z|` in `(z_lo, z_hi]` (`z = 0` too for the small region's first piece),
    /// and in the main region `d = |x + y|` of the other two is in `[d_lo, d_hi)`; in the equal
    /// region the other smallest coordinate equals `z`.
    pub fn in_rect(&self, r: &Rect) -> bool {
        let v = self.0;
        let m = self.min_abs();
        (0..3).filter(|&i| v[i].unsigned_abs() == m).any(|i| {
            let z = v[i];
            let az = z.unsigned_abs();
            let others: Vec<i128> = (0..3).filter(|&j| j != i).map(|j| v[j]).collect();
            let in_z = az > r.z_lo as u128 && az <= r.z_hi as u128;
            match r.region {
                Region::Small => in_z || (z == 0 && r.z_lo == 0),
                Region::Equal => in_z && others.contains(&z),
                Region::Main => {
                    let d = (others[0] + others[1]).unsigned_abs();
                    in_z && d >= r.d_lo as u128 && d < r.d_hi as u128
                }
            }
        })
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

#[cfg(test)]
mod rect_tests {
    use super::*;
    use crate::{Rect, Region};
    #[test]
    fn solutions_are_placed_in_their_rectangle() {
        // 33 = 8866128975287528³ + (−8778405442862239)³ + (−2736111468807040)³ (Booker 2019,
        // "Cracking the problem with 33", Research in Number Theory 5, art. 26). Smallest is
        // z = −2736111468807040; d = |x + y| = 87723532425289.
        let s = Solution::new(8866128975287528, -8778405442862239, -2736111468807040);
        let z = 2736111468807040u64;
        let d = 87723532425289u64;
        let main = |d_lo, d_hi, z_lo, z_hi| Rect {
            region: Region::Main,
            d_lo,
            d_hi,
            z_lo,
            z_hi,
        };
        assert!(s.in_rect(&main(d, d + 1, z - 1, z)));
        assert!(!s.in_rect(&main(d + 1, d + 2, z - 1, z)));
        assert!(!s.in_rect(&main(d, d + 1, z, z + 5)));
        assert!(!s.in_rect(&Rect {
            region: Region::Small,
            d_lo: 0,
            d_hi: 0,
            z_lo: 0,
            z_hi: 100
        }));
        // 3 = 1³ + 1³ + 1³ and 3 = 4³ + 4³ + (−5)³ (common practice, no source): the equal region.
        let e = Solution::new(4, 4, -5);
        let eq = |z_lo, z_hi| Rect {
            region: Region::Equal,
            d_lo: 0,
            d_hi: 0,
            z_lo,
            z_hi,
        };
        assert!(e.in_rect(&eq(1, 4)));
        assert!(!e.in_rect(&eq(4, 10)));
        // 2 = 1³ + 1³ + 0³: z = 0 belongs to the small region's first piece only.
        let s0 = Solution::new(1, 1, 0);
        assert!(s0.in_rect(&Rect {
            region: Region::Small,
            d_lo: 0,
            d_hi: 0,
            z_lo: 0,
            z_hi: 1
        }));
        assert!(!s0.in_rect(&Rect {
            region: Region::Small,
            d_lo: 0,
            d_hi: 0,
            z_lo: 1,
            z_hi: 2
        }));
    }
}
