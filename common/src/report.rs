//! What a worker returns for a lease, and the canonical bytes it signs.

use crate::{Digest, Rect, Solution};
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Report {
    pub lease_id: i64,
    pub unit_id: i64,
    pub worker_id: i64,
    pub kernel: String,
    pub k: i64,
    pub rect: Rect,
    pub digest: Digest,
    /// Canonical triples found in the rectangle, sorted, without repeats.
    pub solutions: Vec<Solution>,
    /// Wall-clock seconds the computation took (informational, not signed).
    #[serde(default)]
    pub elapsed_s: f64,
}

impl Report {
    /// The exact bytes the worker signs: everything but the timing.
    pub fn canonical_bytes(&self) -> Vec<u8> {
        let r = &self.rect;
        let mut s = format!(
            "cubehunt-report/1\nlease={}\nunit={}\nworker={}\nkernel={}\nk={}\nregion={}\nd={}..{}\nz={}..{}\ndigest={}\n",
            self.lease_id,
            self.unit_id,
            self.worker_id,
            serde_json::to_string(&self.kernel).expect("string serialises"),
            self.k,
            r.region,
            r.d_lo,
            r.d_hi,
            r.z_lo,
            r.z_hi,
            self.digest
        );
        for sol in &self.solutions {
            let [a, b, c] = sol.0;
            s.push_str(&format!("solution={a},{b},{c}\n"));
        }
        s.into_bytes()
    }
}

/// A report with the worker's Ed25519 signature (hex) over [`Report::canonical_bytes`].
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SignedReport {
    pub report: Report,
    pub signature: String,
}
