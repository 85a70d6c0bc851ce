//! cubehunt-worker: searches for integer solutions of x³ + y³ + z³ = k.
//!
//! * `solo` — every region of one target up to a bound, on this machine;
//! * `scan` — one rectangle of one region (re-checking a unit by hand, audits);
//! * `run` — the volunteer loop: lease units from a coordinator, compute, report.
//!
//! The mathematics is in `cubehunt_common::kernel`; this binary parses, reports progress
//! and prints. It does not decide what to search: that is the caller's (or the coordinator's).

mod local;
mod meter;
mod run;

use clap::{Parser, Subcommand};

const ABOUT: &str = "Search for integer solutions of x³ + y³ + z³ = k.";

const LONG_ABOUT: &str = "\
Search for integer solutions of x³ + y³ + z³ = k with min(|x|, |y|, |z|) ≤ B.

Order a solution so that |x| ≥ |y| ≥ |z|; the bound B applies to z, the smallest coordinate.
The other two may be astronomically larger, and the cost of a search depends on B only.
Solutions are printed canonically: the three values sorted ascending, as decimal integers.

The search is split into three regions (Z0 = ⌊√|k|⌋, α = ∛2 − 1):
  small  |z| ≤ Z0: every way to write k − z³ as a sum of two cubes (by factoring).
  equal  y = z, |z| > Z0: x³ + 2z³ = k (brute force, then convergents of ∛2).
  main   |z| > Z0, y ≠ z, d = |x + y| with 1 ≤ d < α|z|: Booker's method, a sieve
         over the classes z³ ≡ k (mod d).
Together they hold every solution with min(|x|, |y|, |z|) ≤ B.

Every solution is verified in exact integer arithmetic before it is printed. Each run
also prints a digest of the work done (counts and a hash over every candidate sent to
the exact test); two honest runs of the same rectangle give the same digest, whatever
the number of threads.";

const AFTER: &str = "\
Examples:
  cubehunt-worker solo --k 3 --bound 1e6
  cubehunt-worker solo --k 33 --bound 1e7 --threads 2 --json
  cubehunt-worker scan --k 33 --region main --d-min 87723532425280 --d-max 87723532425300 \\
      --z-min 2736111468806040 --z-max 2736111468808040
  cubehunt-worker scan --k 42 --region equal --z-min 6 --z-max 1e12

Numbers accept plain integers (1000000, 1_000_000) and exact 1e9-style notation.";

#[derive(Parser)]
#[command(name = "cubehunt-worker", version, about = ABOUT, long_about = LONG_ABOUT, after_long_help = AFTER)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Search every region of one target up to a bound on this machine.
    #[command(
        long_about = "\
Search every region (small, equal, main) of one target k up to the bound B on this machine,
and print every solution with min(|x|, |y|, |z|) ≤ B, the digest of each region and the
combined digest. Progress (candidates done / total, rate, time left) goes to stderr: redrawn
twice a second on a terminal, one line every ten seconds otherwise.

Refused with a message and exit status 2: k ≡ ±4 (mod 9) (no solutions exist: every cube is
0 or ±1 mod 9), k a perfect cube (unless --allow-cube), k = 0, |k| > 2^40, B < 1,
B > 2^63 − 1, numbers that do not parse.

With --json, stdout is one JSON object: {mode, kernel, k, bound, threads, nontrivial_only,
solutions: [[x, y, z] as decimal strings sorted ascending], digest, digest_fields,
candidates, survivors, elapsed_s, regions: [{region, rect, digest, digest_fields,
candidates, survivors, solutions, elapsed_s}]}.

Runs at normal CPU priority unless --nice is given.",
        after_help = "Example: cubehunt-worker solo --k 3 --bound 1e6 --json"
    )]
    Solo(local::SoloArgs),
    /// Search one rectangle of one region (d ∈ [d-min, d-max), |z| ∈ (z-min, z-max]).
    #[command(
        long_about = "\
Search one rectangle of one region: d ∈ [d-min, d-max), |z| ∈ (z-min, z-max].

  small  d must be [0, 0); z-max ≤ Z0 = ⌊√|k|⌋; z-min = 0 also covers z = 0.
  equal  d must be [0, 0); z-min ≥ Z0.
  main   1 ≤ d-min < d-max ≤ 2^63; z-min ≥ Z0; points with d ≥ α|z| are outside the
         region and skipped, and a rectangle with no point of the region is refused.

Output as for solo (bound is z-max). Used to re-check a unit by hand and by audits.",
        after_help = "Example: cubehunt-worker scan --k 33 --region main --d-min 1 --d-max 100 --z-min 5 --z-max 1e5"
    )]
    Scan(local::ScanArgs),
    /// Donate this machine's idle time to a campaign: lease units from a coordinator,
    /// compute them at idle priority with checkpoints, return signed reports.
    #[command(long_about = run::LONG_ABOUT, after_long_help = run::AFTER_HELP)]
    Run(run::RunArgs),
}

fn main() {
    let cli = Cli::parse();
    let r = match cli.command {
        Command::Solo(a) => local::solo(a),
        Command::Scan(a) => local::scan(a),
        Command::Run(a) => run::run(a),
    };
    if let Err(e) = r {
        eprintln!("error: {e:#}");
        std::process::exit(2);
    }
}
