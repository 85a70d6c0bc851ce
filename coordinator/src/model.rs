//! The density model in the running product: for every target of a campaign, what the
//! Heath-Brown model (`cubehunt_common::heuristic`, docs/heuristic.md) expects at the target's
//! bound, beside what was found, and which stored solutions lie in a parametric family.
//!
//! The model's figures cost milliseconds per target (the Euler product over every prime up to
//! [`PRIME_BOUND`], then the real density by quadrature), so they are computed once per
//! `(k, bound)` and kept in memory by [`ModelCache`]: when a campaign is created or extended,
//! once for every stored target when `serve` starts, and only for a `(k, bound)` not seen
//! before on a request. A request never computes a figure it already has.
//!
//! Found versus expected: `found` counts the stored solutions the model speaks about (every
//! solution with `min(|x|,|y|,|z|) ≤ bound`, once per unordered triple, leaving out the
//! parametric families and the trivial family `(c, t, −t)`: [`heuristic::count_for_model`]);
//! the interval is [`INTERVAL`], computed exactly from the Poisson probabilities
//! ([`heuristic::poisson_interval`]).

use crate::store::TargetRow;
use cubehunt_common::heuristic::{self, FoundVsExpected, SeriesTable, Verdict};
use cubehunt_common::Solution;
use serde::{Deserialize, Serialize};
use std::collections::HashMap;
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::{Arc, Mutex, OnceLock};

/// The Euler product is truncated at this prime (the default of `plan`).
pub const PRIME_BOUND: u64 = heuristic::DEFAULT_PRIME_BOUND;
/// Probability the interval holds under the model.
pub const LEVEL: f64 = 0.95;
/// What the interval is.
pub const INTERVAL: &str = "central 95 % interval of a Poisson variable whose mean is the expected count, from its exact probabilities: low is the largest n with P(N < n) <= 2.5 %, high the smallest n with P(N > high) <= 2.5 %";
/// What is counted.
pub const COUNTING: &str = "solutions with min(|x|,|y|,|z|) <= bound, once per unordered triple (up to permutation of x, y, z); found leaves out the parametric families (Mahler 1936 for k = m^3, Verebrusov 1908 for k = 2m^3) and the trivial family (c, t, -t), which the model does not count";

/// The model's figures for one `(k, bound)`.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Figures {
    /// `S(k)`, the Euler product up to [`PRIME_BOUND`].
    pub singular_series: f64,
    /// Expected solutions with `min ≤ bound`, up to permutation.
    pub expected_total: f64,
}

/// The figures of `k` at `bound` (sign of `k` does not matter: negate every coordinate).
pub fn figures(table: &SeriesTable, k: i64, bound: u64) -> Figures {
    let p = heuristic::predict(table, k.unsigned_abs() as i64, 0, bound);
    Figures {
        singular_series: p.series.value,
        expected_total: p.expected_total,
    }
}

/// A target's key in the cache: `(k, bound)`.
pub type Key = (i64, u64);
/// Figures by key.
pub type FigureMap = HashMap<Key, Figures>;

/// Model figures kept in memory, one entry per `(k, bound)`.
pub struct ModelCache {
    table: OnceLock<SeriesTable>,
    figures: Mutex<FigureMap>,
    /// Serialises the computation of missing entries (requests that miss wait, then find them).
    computing: tokio::sync::Mutex<()>,
    computed: AtomicU64,
}

impl Default for ModelCache {
    fn default() -> Self {
        ModelCache {
            table: OnceLock::new(),
            figures: Mutex::new(HashMap::new()),
            computing: tokio::sync::Mutex::new(()),
            computed: AtomicU64::new(0),
        }
    }
}

impl ModelCache {
    fn table(&self) -> &SeriesTable {
        self.table.get_or_init(|| {
            SeriesTable::new(PRIME_BOUND).expect("the default prime bound is valid")
        })
    }

    /// How many `(k, bound)` figures this cache has computed since it was made.
    pub fn computed(&self) -> u64 {
        self.computed.load(Ordering::Relaxed)
    }

    fn lookup(&self, keys: &[Key]) -> (FigureMap, Vec<Key>) {
        let map = self.figures.lock().unwrap_or_else(|e| e.into_inner());
        let mut found = HashMap::new();
        let mut missing = Vec::new();
        for key in keys {
            match map.get(key) {
                Some(f) => {
                    found.insert(*key, *f);
                }
                None => missing.push(*key),
            }
        }
        (found, missing)
    }

    /// Compute (on every core) and keep the figures of the keys not held yet. Blocking.
    pub fn fill(&self, keys: &[(i64, u64)]) {
        use rayon::prelude::*;
        let (_, missing) = self.lookup(keys);
        if missing.is_empty() {
            return;
        }
        let table = self.table();
        let new: Vec<((i64, u64), Figures)> = missing
            .par_iter()
            .map(|&(k, b)| ((k, b), figures(table, k, b)))
            .collect();
        self.computed.fetch_add(new.len() as u64, Ordering::Relaxed);
        let mut map = self.figures.lock().unwrap_or_else(|e| e.into_inner());
        map.extend(new);
    }

    /// The figures of every key, computing the missing ones off the async runtime.
    pub async fn get(self: &Arc<Self>, keys: &[Key]) -> FigureMap {
        let (found, missing) = self.lookup(keys);
        if missing.is_empty() {
            return found;
        }
        let _one = self.computing.lock().await;
        let me = self.clone();
        let _ = tokio::task::spawn_blocking(move || me.fill(&missing)).await;
        self.lookup(keys).0
    }

    /// [`ModelCache::get`] for the targets of a campaign.
    pub async fn for_targets(self: &Arc<Self>, targets: &[TargetRow]) -> FigureMap {
        let keys: Vec<(i64, u64)> = targets.iter().map(|t| (t.k, t.bound)).collect();
        self.get(&keys).await
    }
}

/// Campaign-wide description of the per-target figures.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct ModelInfo {
    pub counting: String,
    pub interval: String,
    pub level: f64,
    pub prime_bound: u64,
}

impl ModelInfo {
    pub fn current() -> ModelInfo {
        ModelInfo {
            counting: COUNTING.into(),
            interval: INTERVAL.into(),
            level: LEVEL,
            prime_bound: PRIME_BOUND,
        }
    }
}

/// Found versus expected for one target at its bound.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct TargetModel {
    pub singular_series: f64,
    pub expected_total: f64,
    /// Stored solutions the model counts ([`COUNTING`]).
    pub found: u64,
    /// Stored solutions left out of `found` (parametric or trivial families).
    pub not_counted: u64,
    /// [`INTERVAL`] of `expected_total`.
    pub low: u64,
    pub high: u64,
    /// `fewer`, `as_expected` or `more` than the interval.
    pub verdict: Verdict,
    /// What the model does not count for this k, or why its figures mean little.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub note: Option<String>,
}

/// Found versus expected for `k` up to `bound`, given the stored solutions.
pub fn target_model(
    k: i64,
    bound: u64,
    f: &Figures,
    solutions: &[Solution],
) -> Option<TargetModel> {
    let found = heuristic::count_for_model(k, solutions, bound);
    let fve = FoundVsExpected::new(found, f.expected_total, LEVEL).ok()?;
    Some(TargetModel {
        singular_series: f.singular_series,
        expected_total: f.expected_total,
        found,
        not_counted: solutions.len() as u64 - found.min(solutions.len() as u64),
        low: fve.low,
        high: fve.high,
        verdict: fve.verdict,
        note: crate::forecast::note(k),
    })
}

/// A stored solution that belongs to a parametric family.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FamilyMark {
    pub solution: Solution,
    /// `mahler` or `verebrusov`.
    pub family: heuristic::Family,
    /// The family's parameter for this solution (decimal).
    pub t: String,
    /// e.g. `Mahler 1936, t = -1` or `Verebrusov 1908, t = 1, scaled by 2, negated`.
    pub description: String,
}

/// The family a solution of `k` belongs to, as a mark.
pub fn family_mark(k: i64, s: &Solution) -> Option<FamilyMark> {
    heuristic::family_member(k, s).map(|m| FamilyMark {
        solution: *s,
        family: m.family,
        t: m.t.to_string(),
        description: m.describe(),
    })
}

/// The family members among `solutions` of `k` (none unless `k = ±m³` or `±2m³`).
pub fn family_marks(k: i64, solutions: &[Solution]) -> Vec<FamilyMark> {
    if !heuristic::has_family(k) {
        return Vec::new();
    }
    solutions.iter().filter_map(|s| family_mark(k, s)).collect()
}

/// Just the description, for listings.
pub fn family_text(k: i64, s: &Solution) -> Option<String> {
    if !heuristic::has_family(k) {
        return None;
    }
    heuristic::family_member(k, s).map(|m| m.describe())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_figures_are_the_plan_commands() {
        // The same model as `plan` at the same truncation.
        let f = crate::forecast::forecast(&[33, -42], 0, 10u64.pow(12), PRIME_BOUND).unwrap();
        let c = Arc::new(ModelCache::default());
        c.fill(&[(33, 10u64.pow(12)), (-42, 10u64.pow(12))]);
        for t in &f.targets {
            let (m, _) = c.lookup(&[(t.k, 10u64.pow(12))]);
            let g = m[&(t.k, 10u64.pow(12))];
            assert_eq!(g.singular_series, t.singular_series);
            assert_eq!(g.expected_total, t.expected_total);
        }
        assert_eq!(c.computed(), 2);
        c.fill(&[(33, 10u64.pow(12))]);
        assert_eq!(c.computed(), 2, "a held figure is not computed again");
    }

    #[test]
    fn found_leaves_out_families_and_the_interval_is_the_poisson_one() {
        // k = 2 up to 100: the kernel's solutions are all Verebrusov's (heuristic tests), so
        // found = 0 and every one is marked.
        let sols = [
            Solution::new(7, -5, -6),
            Solution::new(1214928, 3480205, -3528875),
        ];
        let f = Figures {
            singular_series: 1.0,
            expected_total: 3.2,
        };
        let m = target_model(2, 10_000_000, &f, &sols).unwrap();
        assert_eq!((m.found, m.not_counted), (1, 1));
        // The interval against values computed independently, by hand from the Poisson CDF
        // F(n) = e^{−λ} Σ_{i ≤ n} λⁱ/i! (Python 3 `math`, exact factorials): low is the smallest
        // n with F(n) > 0.025, high the smallest n with F(n) ≥ 0.975 — the definition of
        // scipy.stats.poisson.interval(0.95, λ) = (ppf(0.025), ppf(0.975)) too, except when
        // F(n) = 0.025 exactly. λ = 3.2: F(0) = 0.04076, F(6) = 0.95538, F(7) = 0.98317 → (0, 7);
        // λ = 0.5: F(1) = 0.9098, F(2) = 0.98561 → (0, 2); λ = 12.7: F(5) = 0.01304, F(6) =
        // 0.03082, F(19) = 0.96493, F(20) = 0.97987 → (6, 20); λ = 40: F(27) = 0.01934, F(28) =
        // 0.02938, F(52) = 0.97194, F(53) = 0.98001 → (28, 53).
        assert_eq!((m.low, m.high, m.verdict), (0, 7, Verdict::AsExpected));
        for (lambda, want) in [(0.5, (0, 2)), (12.7, (6, 20)), (40.0, (28, 53))] {
            let f = Figures {
                singular_series: 1.0,
                expected_total: lambda,
            };
            let m = target_model(3, 100, &f, &[]).unwrap();
            assert_eq!((m.low, m.high), want, "λ = {lambda}");
            assert_eq!(
                m.verdict,
                if want.0 > 0 {
                    Verdict::Fewer
                } else {
                    Verdict::AsExpected
                }
            );
        }
        assert!(m.note.unwrap().contains("Verebrusov"));
        let marks = family_marks(2, &sols);
        assert_eq!(marks.len(), 1);
        assert_eq!(marks[0].t, "1");
        assert_eq!(marks[0].description, "Verebrusov 1908, t = 1");
        assert!(family_marks(3, &[Solution::new(4, 4, -5), Solution::new(1, 1, 1)]).is_empty());
    }
}
