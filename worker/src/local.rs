//! `solo` and `scan`: the kernel on this machine, without a coordinator.

use crate::meter::Meter;
use anyhow::{bail, Result};
use clap::Args;
use cubehunt_common::kernel::{self, KernelError};
use cubehunt_common::{numarg, Digest, Rect, Region, Solution, KERNEL_VERSION};
use serde::Serialize;
use std::time::Instant;

fn parse_k(s: &str) -> Result<i64, String> {
    numarg::parse_i64(s)
}
fn parse_count(s: &str) -> Result<u64, String> {
    numarg::parse_u64(s)
}

/// Options shared by `solo` and `scan`.
#[derive(Args, Debug, Clone)]
pub struct Common {
    /// Worker threads; 0 means one per core.
    #[arg(long, default_value_t = 0)]
    pub threads: usize,
    /// Print one JSON object on stdout instead of the human summary (progress stays on stderr).
    #[arg(long)]
    pub json: bool,
    /// Accept a k that is a perfect cube and search only its non-trivial solutions (those
    /// with no two coordinates summing to 0; the family (c, t, −t) is left out).
    #[arg(long)]
    pub allow_cube: bool,
    /// Lower this process to the lowest CPU priority (nice 19) before computing, so that
    /// the machine stays responsive. Off by default for solo and scan.
    #[arg(long)]
    pub nice: bool,
    /// No progress display on stderr.
    #[arg(long, short)]
    pub quiet: bool,
}

#[derive(Args, Debug)]
pub struct SoloArgs {
    /// The target k (an integer with |k| ≤ 2^40, not ≡ ±4 mod 9, not a cube unless
    /// --allow-cube). Negative k is searched as −k with every coordinate negated.
    #[arg(long, allow_hyphen_values = true, value_parser = parse_k)]
    pub k: i64,
    /// The bound B on min(|x|, |y|, |z|): 1 ≤ B ≤ 2^63 − 1. Plain or 1e9-style.
    #[arg(long, value_parser = parse_count)]
    pub bound: u64,
    #[command(flatten)]
    pub common: Common,
}

#[derive(Args, Debug)]
pub struct ScanArgs {
    /// The target k (as for solo).
    #[arg(long, allow_hyphen_values = true, value_parser = parse_k)]
    pub k: i64,
    /// The region: small (|z| ≤ Z0), equal (y = z, |z| > Z0) or main (d = |x + y|, |z| > Z0).
    #[arg(long)]
    pub region: Region,
    /// Least d of the rectangle (inclusive). Main region only; 0 elsewhere.
    #[arg(long, value_parser = parse_count, default_value = "0")]
    pub d_min: u64,
    /// End of the d range (exclusive). Main region only; 0 elsewhere.
    #[arg(long, value_parser = parse_count, default_value = "0")]
    pub d_max: u64,
    /// Lower end of the |z| range (exclusive; in the small region 0 also covers z = 0).
    #[arg(long, value_parser = parse_count)]
    pub z_min: u64,
    /// Upper end of the |z| range (inclusive).
    #[arg(long, value_parser = parse_count)]
    pub z_max: u64,
    #[command(flatten)]
    pub common: Common,
}

#[derive(Serialize)]
struct RegionOut {
    region: Region,
    rect: Rect,
    digest: String,
    digest_fields: Digest,
    candidates: u64,
    survivors: u64,
    solutions: Vec<Solution>,
    elapsed_s: f64,
}

#[derive(Serialize)]
struct RunOut {
    mode: &'static str,
    kernel: &'static str,
    k: i64,
    bound: u64,
    threads: usize,
    nontrivial_only: bool,
    solutions: Vec<Solution>,
    digest: String,
    digest_fields: Digest,
    candidates: u64,
    survivors: u64,
    elapsed_s: f64,
    regions: Vec<RegionOut>,
}

fn check_k(k: i64, allow_cube: bool) -> Result<bool> {
    let is_cube = kernel::cube_root(k).is_some();
    let r = if allow_cube {
        kernel::check_target_allowing_cube(k).map(|_| ())
    } else {
        kernel::check_target(k).map(|_| ())
    };
    match r {
        Ok(()) => Ok(is_cube),
        Err(e @ KernelError::Cube { .. }) => {
            bail!("{e} (or pass --allow-cube to search its non-trivial solutions only)")
        }
        Err(e) => bail!("{e}"),
    }
}

fn lower_priority() {
    // SAFETY: setpriority has no memory-safety preconditions.
    let rc = unsafe { libc::setpriority(libc::PRIO_PROCESS, 0, 19) };
    if rc != 0 {
        eprintln!("warning: could not lower the CPU priority; continuing at normal priority");
    }
}

fn threads_used(t: usize) -> usize {
    if t == 0 {
        std::thread::available_parallelism()
            .map(|n| n.get())
            .unwrap_or(1)
    } else {
        t
    }
}

/// Candidates of `rect` for the progress total: exact when counting is cheap; otherwise the
/// kernel's closed-form estimate, corrected by the ratio exact/estimate measured on a few
/// narrow `d` windows spread geometrically over the range (the mean number of cube roots of
/// `k` mod `d` depends on `k`).
fn progress_total(k: i64, rect: &Rect) -> (f64, bool) {
    if rect.region != Region::Main || rect.d_hi - rect.d_lo <= 200_000 {
        return (kernel::candidates(k, rect) as f64, true);
    }
    let (a, b) = (rect.d_lo as f64, rect.d_hi as f64);
    let (mut exact, mut est) = (0.0, 0.0);
    for i in 0..8 {
        let lo = (a * (b / a).powf((i as f64 + 0.5) / 8.0)) as u64;
        let w = Rect {
            d_lo: lo.max(rect.d_lo),
            d_hi: (lo + 2000).min(rect.d_hi),
            ..*rect
        };
        if w.d_lo >= w.d_hi || kernel::check_rect_allowing_cube(k, &w).is_err() {
            continue;
        }
        exact += kernel::candidates(k, &w) as f64;
        est += kernel::estimate_candidates(k, &w);
    }
    let ratio = if est > 0.0 && exact > 0.0 {
        exact / est
    } else {
        1.0
    };
    (kernel::estimate_candidates(k, rect) * ratio, false)
}

fn run_rects(
    k: i64,
    bound: u64,
    rects: Vec<Rect>,
    c: &Common,
    mode: &'static str,
    nontrivial: bool,
) -> Result<()> {
    if c.nice {
        lower_priority();
    }
    let totals: Vec<(f64, bool)> = rects.iter().map(|r| progress_total(k, r)).collect();
    let total: f64 = totals.iter().map(|t| t.0).sum();
    let exact = totals.iter().all(|t| t.1);
    let meter = Meter::start(total, exact, c.quiet);
    let start = Instant::now();
    let mut regions = Vec::new();
    for rect in rects {
        meter.set_label(rect.region.name());
        let t0 = Instant::now();
        let out = kernel::scan(k, &rect, c.threads, &|n| meter.add(n))?;
        regions.push(RegionOut {
            region: rect.region,
            rect,
            digest: out.digest.to_string(),
            digest_fields: out.digest,
            candidates: out.digest.candidates,
            survivors: out.digest.survivors,
            solutions: out.solutions,
            elapsed_s: t0.elapsed().as_secs_f64(),
        });
    }
    meter.finish();
    let digest: Digest = regions.iter().map(|r| r.digest_fields).sum();
    let mut solutions: Vec<Solution> = regions
        .iter()
        .flat_map(|r| r.solutions.iter().copied())
        .collect();
    solutions.sort();
    solutions.dedup();
    let out = RunOut {
        mode,
        kernel: KERNEL_VERSION,
        k,
        bound,
        threads: threads_used(c.threads),
        nontrivial_only: nontrivial,
        solutions,
        digest: digest.to_string(),
        digest_fields: digest,
        candidates: digest.candidates,
        survivors: digest.survivors,
        elapsed_s: start.elapsed().as_secs_f64(),
        regions,
    };
    if c.json {
        println!("{}", serde_json::to_string(&out)?);
    } else {
        print_human(&out);
    }
    Ok(())
}

fn print_human(o: &RunOut) {
    println!(
        "k = {}, {} bound {} (kernel {}, {} threads)",
        o.k, o.mode, o.bound, o.kernel, o.threads
    );
    if o.nontrivial_only {
        println!("k is a cube: only non-trivial solutions were searched (the family (c, t, −t) is left out)");
    }
    for r in &o.regions {
        let d = if r.region == Region::Main {
            format!("d ∈ [{}, {}), ", r.rect.d_lo, r.rect.d_hi)
        } else {
            String::new()
        };
        let z = if r.region == Region::Small && r.rect.z_lo == 0 {
            format!("|z| ∈ [0, {}]", r.rect.z_hi)
        } else {
            format!("|z| ∈ ({}, {}]", r.rect.z_lo, r.rect.z_hi)
        };
        println!(
            "  {:<5} {d}{z}: {} candidates, {} solutions, {:.2} s, digest {}",
            r.region.name(),
            r.candidates,
            r.solutions.len(),
            r.elapsed_s,
            r.digest
        );
    }
    println!(
        "{} solution{}:",
        o.solutions.len(),
        if o.solutions.len() == 1 { "" } else { "s" }
    );
    for s in &o.solutions {
        let [a, b, c] = s.to_strings();
        println!("  {a} {b} {c}");
    }
    println!("digest {}", o.digest);
    println!("{} candidates in {:.2} s", o.candidates, o.elapsed_s);
}

pub fn solo(a: SoloArgs) -> Result<()> {
    let nontrivial = check_k(a.k, a.common.allow_cube)?;
    kernel::check_bound(a.bound).map_err(|e| anyhow::anyhow!("{e}"))?;
    let rects = kernel::domains(a.k, a.bound);
    run_rects(a.k, a.bound, rects, &a.common, "solo", nontrivial)
}

pub fn scan(a: ScanArgs) -> Result<()> {
    let nontrivial = check_k(a.k, a.common.allow_cube)?;
    let rect = Rect {
        region: a.region,
        d_lo: a.d_min,
        d_hi: a.d_max,
        z_lo: a.z_min,
        z_hi: a.z_max,
    };
    kernel::check_rect_allowing_cube(a.k, &rect).map_err(|e| anyhow::anyhow!("{e}"))?;
    run_rects(a.k, rect.z_hi, vec![rect], &a.common, "scan", nontrivial)
}
