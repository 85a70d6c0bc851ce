//! `plan`: expected yield and cost of targets up to a bound, from the density model
//! (`cubehunt_common::heuristic`, docs/heuristic.md) and the kernel's cost model. No server,
//! no data directory: it only computes.
//!
//! Not to be confused with [`crate::plan`], which cuts a target into units.

use anyhow::{bail, Result};
use clap::Args;
use cubehunt_common::heuristic::{self, SeriesTable};
use cubehunt_common::kernel::{self, KernelError};
use cubehunt_common::numarg;
use rayon::prelude::*;
use serde::Serialize;

/// Most values of `k` one `plan` accepts.
pub const MAX_TARGETS: usize = 20_000;

const COUNTING: &str = "solutions with min(|x|,|y|,|z|) <= bound, counted once per unordered triple (up to permutation of x, y, z), as found by a complete search of the three regions";

#[derive(Debug, Args)]
#[command(
    about = "Expected yield and cost per target, from the Heath-Brown density model (no server needed).",
    long_about = "Expected yield and cost per target, from the Heath-Brown density model and the kernel's \
cost model (no server needed; docs/heuristic.md).\n\n\
Counting convention: a solution counts when min(|x|,|y|,|z|) <= bound, once per unordered triple \
(up to permutation of x, y, z), exactly what a complete search of the three regions finds. \
For each admissible k (k not ±4 mod 9) it prints the singular series S(k), the expected number of \
solutions up to the bound, the expected new ones in (--from, --bound], how many decimal digits the \
bound must grow per further solution, the cost in core-years of one reference core, and the \
expected new solutions per core-year, ranked by the latter. A cube k is planned too (its trivial \
family (c, t, -t) is not counted) but flagged: the model does not apply to it. Values of k with no \
solutions (±4 mod 9, 0) are listed as skipped. These are forecasts from a conjecture, not promises."
)]
pub struct PlanArgs {
    /// Targets: K, a list K,K,…, a range A..B (both ends included), or a mix (e.g. 3,33,100..120).
    #[arg(long = "k", value_name = "K[,K…|A..B]", allow_hyphen_values = true)]
    pub ks: String,
    /// Bound on the smallest coordinate (e.g. 1e16).
    #[arg(long)]
    pub bound: String,
    /// Bound already searched: report the expected new solutions in (FROM, BOUND] and the cost
    /// of that part only (default 0: the whole target).
    #[arg(long = "from", value_name = "B0")]
    pub from: Option<String>,
    /// Truncate the singular series' Euler product at this prime (10 … 1e8).
    #[arg(long, default_value = "1e6")]
    pub prime_bound: String,
    /// Print JSON: {"targets":[…],"skipped":[…]}.
    #[arg(long)]
    pub json: bool,
}

/// One planned target.
#[derive(Clone, Debug, Serialize)]
pub struct TargetForecast {
    pub k: i64,
    pub singular_series: f64,
    pub expected_total: f64,
    pub expected_new: f64,
    pub digits_per_solution: f64,
    pub core_years: f64,
    pub per_core_year: f64,
    pub rank: usize,
    /// `S(k)` at `P` over `S(k)` at `P/10`, minus 1.
    pub last_decade_change: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub note: Option<String>,
}

#[derive(Clone, Debug, Serialize)]
pub struct Skipped {
    pub k: i64,
    pub reason: String,
}

#[derive(Clone, Debug, Serialize)]
pub struct Forecast {
    pub bound: u64,
    pub from: u64,
    pub prime_bound: u64,
    pub counting: &'static str,
    pub targets: Vec<TargetForecast>,
    pub skipped: Vec<Skipped>,
}

/// Parse `K`, `K,K,…`, `A..B` or a comma-separated mix ([`numarg::parse_k_set`], the one
/// parser `campaign create --k` uses too); refuses repeats and more than [`MAX_TARGETS`]
/// values (before allocating them).
pub fn parse_targets(s: &str) -> Result<Vec<i64>> {
    Ok(numarg::parse_k_set(s, MAX_TARGETS)
        .map_err(|e| anyhow::anyhow!("--k: {e}"))?
        .into_iter()
        .map(|i| i.k)
        .collect())
}

/// Why a value of `k` is not planned, or `None` when it is planned.
pub fn skip_reason(k: i64) -> Option<String> {
    match kernel::check_target_allowing_cube(k) {
        Ok(_) => None,
        Err(KernelError::NoSolutionsMod9 { r, .. }) => Some(format!(
            "k ≡ {} (mod 9): no solutions (every cube is 0 or ±1 mod 9)",
            if r < 0 { "−4" } else { "4" }
        )),
        Err(KernelError::Zero) => Some("k = 0: only the trivial solutions (t, −t, 0)".into()),
        Err(e) => Some(e.to_string()),
    }
}

/// What the model does not count for this `k`, if anything.
pub fn note(k: i64) -> Option<String> {
    let ak = k.unsigned_abs() as i64;
    let mut notes = Vec::new();
    if let Some(c) = kernel::cube_root(ak) {
        notes.push(format!(
            "a cube ({c}³): the trivial family ({c}, t, −t) is not counted, and the singular series diverges for a cube, so these figures are not meaningful"
        ));
        if c == 1 {
            notes.push("Mahler's family (9t⁴, 3t − 9t⁴, 1 − 9t³) is not counted either".into());
        }
    }
    if ak == 2 {
        notes.push("Verebrusov's family (1 + 6t³, 1 − 6t³, −6t²) is not counted".into());
    } else if ak % 2 == 0 && ak > 2 {
        if let Some(m) = kernel::cube_root(ak / 2) {
            notes.push(format!(
                "k = 2·{m}³: Verebrusov's family scaled by {m} is not counted"
            ));
        }
    }
    if k < 0 {
        notes.push(format!("planned as {ak} (negate every coordinate)"));
    }
    (!notes.is_empty()).then(|| notes.join("; "))
}

/// The forecast of `ks` up to `bound` (new part above `from`).
pub fn forecast(ks: &[i64], from: u64, bound: u64, prime_bound: u64) -> Result<Forecast> {
    kernel::check_bound(bound)?;
    if from >= bound {
        bail!("--from {from} must be below --bound {bound} (it is the bound already searched)");
    }
    let table = SeriesTable::new(prime_bound).map_err(|e| anyhow::anyhow!("--prime-bound: {e}"))?;
    let mut skipped = Vec::new();
    let mut planned = Vec::new();
    for &k in ks {
        match skip_reason(k) {
            Some(reason) => skipped.push(Skipped { k, reason }),
            None => planned.push(k),
        }
    }
    let mut targets: Vec<TargetForecast> = planned
        .par_iter()
        .map(|&k| {
            let ak = k.unsigned_abs() as i64;
            let p = heuristic::predict(&table, ak, from, bound);
            let core_years =
                heuristic::search_seconds(ak, from, bound) / heuristic::SECONDS_PER_YEAR;
            TargetForecast {
                k,
                singular_series: p.series.value,
                expected_total: p.expected_total,
                expected_new: p.expected_new,
                digits_per_solution: p.digits_per_solution,
                core_years,
                per_core_year: if core_years > 0.0 {
                    p.expected_new / core_years
                } else {
                    0.0
                },
                rank: 0,
                last_decade_change: p.series.last_decade_change(),
                note: note(k),
            }
        })
        .collect();
    let mut order: Vec<usize> = (0..targets.len()).collect();
    // Cubes last: their divergent singular series would otherwise put them first.
    let is_cube = |t: &TargetForecast| kernel::cube_root(t.k).is_some();
    order.sort_by(|&a, &b| {
        let (ta, tb) = (&targets[a], &targets[b]);
        is_cube(ta)
            .cmp(&is_cube(tb))
            .then(tb.per_core_year.total_cmp(&ta.per_core_year))
            .then(ta.k.cmp(&tb.k))
    });
    for (r, &i) in order.iter().enumerate() {
        targets[i].rank = r + 1;
    }
    targets.sort_by_key(|t| t.rank);
    Ok(Forecast {
        bound,
        from,
        prime_bound,
        counting: COUNTING,
        targets,
        skipped,
    })
}

/// Parse the arguments and compute the forecast (no printing).
pub fn forecast_from_args(a: &PlanArgs) -> Result<Forecast> {
    let ks = parse_targets(&a.ks)?;
    let bound =
        numarg::u64_in(1, kernel::MAX_Z)(&a.bound).map_err(|e| anyhow::anyhow!("--bound: {e}"))?;
    let from = match &a.from {
        Some(f) => numarg::parse_u64(f).map_err(|e| anyhow::anyhow!("--from: {e}"))?,
        None => 0,
    };
    let prime_bound =
        numarg::parse_u64(&a.prime_bound).map_err(|e| anyhow::anyhow!("--prime-bound: {e}"))?;
    forecast(&ks, from, bound, prime_bound)
}

/// The `plan` command.
pub fn run(a: PlanArgs) -> Result<()> {
    let f = forecast_from_args(&a)?;
    if a.json {
        println!("{}", serde_json::to_string_pretty(&f)?);
        return Ok(());
    }
    print!("{}", render(&f));
    Ok(())
}

/// The text rendering.
pub fn render(f: &Forecast) -> String {
    use std::fmt::Write;
    let mut s = String::new();
    let _ = writeln!(
        s,
        "Counting: {}. Bound {}{}; singular series truncated at p ≤ {}.",
        COUNTING,
        f.bound,
        if f.from > 0 {
            format!(", new part above {}", f.from)
        } else {
            String::new()
        },
        f.prime_bound
    );
    let _ = writeln!(
        s,
        "{:>4}  {:>8}  {:>8}  {:>10}  {:>10}  {:>10}  {:>11}  {:>13}",
        "rank", "k", "S(k)", "expected", "new", "digits/sol", "core-years", "new/core-year"
    );
    for t in &f.targets {
        let _ = writeln!(
            s,
            "{:>4}  {:>8}  {:>8.5}  {:>10.3}  {:>10.3}  {:>10.2}  {:>11.3e}  {:>13.3e}{}",
            t.rank,
            t.k,
            t.singular_series,
            t.expected_total,
            t.expected_new,
            t.digits_per_solution,
            t.core_years,
            t.per_core_year,
            if t.note.is_some() { "  *" } else { "" }
        );
    }
    for t in f.targets.iter().filter(|t| t.note.is_some()) {
        let _ = writeln!(s, "* k = {}: {}", t.k, t.note.as_deref().unwrap_or(""));
    }
    if let Some(worst) = f
        .targets
        .iter()
        .filter(|t| t.note.is_none())
        .map(|t| t.last_decade_change.abs())
        .max_by(|a, b| a.total_cmp(b))
    {
        let _ = writeln!(
            s,
            "The last decade of primes moved S(k) by at most {:.3} % (targets without a note).",
            worst * 100.0
        );
    }
    if !f.skipped.is_empty() {
        let _ = writeln!(s, "Skipped {}:", f.skipped.len());
        for k in &f.skipped {
            let _ = writeln!(s, "  k = {}: {}", k.k, k.reason);
        }
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    fn args(ks: &str, bound: &str, from: Option<&str>) -> PlanArgs {
        PlanArgs {
            ks: ks.into(),
            bound: bound.into(),
            from: from.map(String::from),
            prime_bound: "1e5".into(),
            json: false,
        }
    }

    #[test]
    fn targets_parse_as_lists_ranges_and_mixes() {
        assert_eq!(parse_targets("3,33, 42").unwrap(), vec![3, 33, 42]);
        assert_eq!(parse_targets("1..4").unwrap(), vec![1, 2, 3, 4]);
        assert_eq!(parse_targets("-2..1,7").unwrap(), vec![-2, -1, 0, 1, 7]);
        for bad in [
            "",
            "a",
            "3..1",
            "1..",
            "1,1",
            "1..3,2",
            "1..100000",
            "1..1e12",
        ] {
            assert!(parse_targets(bad).is_err(), "{bad:?}");
        }
    }

    #[test]
    fn a_range_lists_inadmissible_k_as_skipped_and_ranks_the_rest() {
        let f = forecast_from_args(&args("1..20", "1e6", None)).unwrap();
        // ±4 mod 9 below 20: 4, 5, 13, 14 (every cube is 0, ±1 mod 9)
        let skipped: Vec<i64> = f.skipped.iter().map(|s| s.k).collect();
        assert_eq!(skipped, vec![4, 5, 13, 14]);
        assert!(f.skipped.iter().all(|s| s.reason.contains("mod 9")));
        assert_eq!(f.targets.len(), 16);
        let mut ranks: Vec<usize> = f.targets.iter().map(|t| t.rank).collect();
        ranks.sort_unstable();
        assert_eq!(ranks, (1..=16).collect::<Vec<_>>());
        // ranked by expected new per core-year, cubes (1, 8) last
        let (cubes, rest): (Vec<_>, Vec<_>) = f.targets.iter().partition(|t| [1, 8].contains(&t.k));
        assert!(cubes.iter().all(|c| c.rank > rest.len()));
        for w in rest.windows(2) {
            assert!(w[0].per_core_year >= w[1].per_core_year);
        }
        // cubes are planned but flagged
        for c in [1, 8] {
            let t = f.targets.iter().find(|t| t.k == c).unwrap();
            assert!(t.note.as_deref().unwrap().contains("cube"), "{c}");
        }
        assert!(f.targets.iter().find(|t| t.k == 2).unwrap().note.is_some());
        assert!(f.targets.iter().find(|t| t.k == 3).unwrap().note.is_none());
        let j = serde_json::to_value(&f).unwrap();
        for key in [
            "k",
            "singular_series",
            "expected_total",
            "expected_new",
            "digits_per_solution",
            "core_years",
            "per_core_year",
            "rank",
        ] {
            assert!(j["targets"][0].get(key).is_some(), "{key}");
        }
        assert!(j["skipped"][0]["reason"].is_string());
    }

    #[test]
    fn the_cost_is_the_one_the_unit_planner_tiles() {
        // The forecast's cost and the planner's units (crate::plan) come from the same kernel
        // cost model over the same parts; the sum of the units' costs must agree closely.
        use crate::plan::{plan_target, PlanSettings};
        for (k, from, bound) in [(33i64, 0u64, 200_000u64), (42, 50_000, 300_000)] {
            let f = forecast(&[k], from, bound, 1000).unwrap();
            let units = plan_target(
                k,
                from,
                bound,
                PlanSettings {
                    unit_seconds: 5.0,
                    max_units: 1_000_000,
                },
            )
            .unwrap()
            .units;
            let s: f64 = units.iter().map(|u| u.cost_us as f64 * 1e-6).sum();
            let ours = f.targets[0].core_years * heuristic::SECONDS_PER_YEAR;
            assert!(
                (s / ours - 1.0).abs() < 0.05,
                "k = {k}: units {s} s, plan {ours} s"
            );
        }
    }

    #[test]
    fn extension_forecasts_only_the_new_part() {
        let whole = forecast(&[33], 0, 10u64.pow(16), 1000).unwrap().targets[0].clone();
        let ext = forecast(&[33], 10u64.pow(15), 10u64.pow(16), 1000)
            .unwrap()
            .targets[0]
            .clone();
        assert!((whole.expected_total - ext.expected_total).abs() < 1e-12);
        assert!(ext.expected_new < whole.expected_new);
        // one decade at large t: S · ln 10 · Γ(1/3)³/(6π√3)
        let decade = whole.singular_series * std::f64::consts::LN_10 * heuristic::REAL_SLOPE;
        assert!((ext.expected_new / decade - 1.0).abs() < 1e-6);
        assert!(ext.core_years < whole.core_years);
    }

    #[test]
    fn bad_input_is_refused_with_a_reason() {
        for (a, want) in [
            (args("3", "0", None), "--bound"),
            (args("3", "1e6", Some("1e6")), "--from"),
            (args("3", "1e6", Some("2e6")), "--from"),
            (args("3", "x", None), "--bound"),
            (args("3", "1e30", None), "--bound"),
            (args("3,,4", "1e6", None), "--k"),
        ] {
            let e = forecast_from_args(&a).unwrap_err().to_string();
            assert!(e.contains(want), "{e}");
        }
        let mut a = args("3", "1e6", None);
        a.prime_bound = "1e12".into();
        assert!(forecast_from_args(&a)
            .unwrap_err()
            .to_string()
            .contains("--prime-bound"));
    }
}
