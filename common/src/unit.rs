//! Regions, rectangles and units (docs/vocabulary.md), with the canonical byte encoding that the
//! coordinator signs and the worker verifies.
//!
//! Rectangle semantics, for every region: `d ∈ [d_lo, d_hi)`, `|z| ∈ (z_lo, z_hi]`.
//! * `Main` (C): `1 ≤ d_lo < d_hi`, `z_lo ≥ Z0`; points with `d ≥ α|z|` lie outside the region
//!   and are skipped by the kernel.
//! * `Small` (S) and `Equal` (E): the `d` axis is unused and must be `[0, 0)`. In `Small`,
//!   `z_hi ≤ Z0`, and the rectangle with `z_lo = 0` also covers `z = 0`. In `Equal`, `z_lo ≥ Z0`.

use serde::{Deserialize, Serialize};
use std::fmt;
use std::str::FromStr;

#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Region {
    /// (S) `|z| ≤ Z0`: every `z`, all ways of writing `k − z³` as a sum of two cubes.
    Small,
    /// (E) `y = z`, `|z| > Z0`: the Thue equation `x³ + 2z³ = k`.
    Equal,
    /// (C) `Z0 < |z|`, `y ≠ z`: Booker's `d = |x + y|` method.
    Main,
}

impl Region {
    pub const ALL: [Region; 3] = [Region::Small, Region::Equal, Region::Main];
    pub fn name(self) -> &'static str {
        match self {
            Region::Small => "small",
            Region::Equal => "equal",
            Region::Main => "main",
        }
    }
}

impl fmt::Display for Region {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl FromStr for Region {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        match s {
            "small" | "S" => Ok(Region::Small),
            "equal" | "E" => Ok(Region::Equal),
            "main" | "C" => Ok(Region::Main),
            _ => Err(format!("unknown region {s:?}: use small, equal or main")),
        }
    }
}

/// One rectangle of one region: `d ∈ [d_lo, d_hi)`, `|z| ∈ (z_lo, z_hi]`.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
pub struct Rect {
    pub region: Region,
    pub d_lo: u64,
    pub d_hi: u64,
    pub z_lo: u64,
    pub z_hi: u64,
}

impl fmt::Display for Rect {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "{} d∈[{},{}) |z|∈({},{}]",
            self.region, self.d_lo, self.d_hi, self.z_lo, self.z_hi
        )
    }
}

/// A unit as planned and signed by the coordinator.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct UnitSpec {
    pub unit_id: i64,
    pub campaign: String,
    pub k: i64,
    /// The target's bound when the unit was planned (informational; the rectangle is the work).
    pub bound: u64,
    pub kernel: String,
    pub rect: Rect,
    /// Estimated cost: reference-core microseconds (`kernel::estimate_seconds` × 10⁶, rounded up),
    /// as planned by the coordinator.
    pub cost: u64,
}

impl UnitSpec {
    /// The exact bytes the coordinator signs. Injective: the only free-form field (campaign)
    /// is JSON-quoted.
    pub fn canonical_bytes(&self) -> Vec<u8> {
        let r = &self.rect;
        format!(
            "cubehunt-unit/1\nid={}\ncampaign={}\nk={}\nbound={}\nkernel={}\nregion={}\nd={}..{}\nz={}..{}\ncost={}\n",
            self.unit_id,
            serde_json::to_string(&self.campaign).expect("string serialises"),
            self.k,
            self.bound,
            serde_json::to_string(&self.kernel).expect("string serialises"),
            r.region,
            r.d_lo,
            r.d_hi,
            r.z_lo,
            r.z_hi,
            self.cost
        )
        .into_bytes()
    }
}

/// A unit with the coordinator's Ed25519 signature (hex) over [`UnitSpec::canonical_bytes`].
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct SignedUnit {
    pub unit: UnitSpec,
    pub signature: String,
}
