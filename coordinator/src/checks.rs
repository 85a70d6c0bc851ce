//! The `audit`, `certificate`, `verify-certificate` and `export` commands.
//!
//! Exit codes: 0 when the check holds (or the file was written), 1 when it does not hold
//! (findings printed), 2 when the command could not run (bad input, unreadable files).

use crate::audit::{self, AuditOptions};
use crate::certify;
use crate::datadir::{DataDir, KEY_FILE, PUB_FILE};
use crate::export::{self, Format, What};
use crate::store::Store;
use anyhow::{anyhow, bail, Context, Result};
use clap::Args;
use cubehunt_common::cert::{self, Certificate, VerifyOptions};
use cubehunt_common::{numarg, sign};
use std::io::Write;
use std::path::{Path, PathBuf};

/// Largest certificate file `verify-certificate` reads.
pub const MAX_CERT_BYTES: u64 = 4 << 30;

#[derive(Debug, Args)]
pub struct AuditArgs {
    /// Data directory of the coordinator (made by `init`).
    #[arg(long, env = "CUBEHUNT_DATA_DIR")]
    pub data_dir: PathBuf,
    /// The store, when it is not the SQLite file of the data directory: a PostgreSQL URL
    /// (postgres://…), as given to `serve --database`.
    #[arg(long, env = "CUBEHUNT_DATABASE", hide_env_values = true)]
    pub database: Option<String>,
    /// Recompute this fraction of the settled units with the local kernel (0..=1).
    #[arg(long, default_value = "0", value_parser = parse_fraction)]
    pub recheck: f64,
    /// Seed of the recheck sample (default: random; printed either way).
    #[arg(long)]
    pub seed: Option<u64>,
    /// Threads for the recheck (0 = all cores).
    #[arg(long, default_value_t = 0)]
    pub threads: usize,
    /// Print the result as one JSON object.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct CertificateArgs {
    /// Data directory of the coordinator (made by `init`).
    #[arg(long, env = "CUBEHUNT_DATA_DIR")]
    pub data_dir: PathBuf,
    /// The store, when it is not the SQLite file of the data directory: a PostgreSQL URL
    /// (postgres://…), as given to `serve --database`.
    #[arg(long, env = "CUBEHUNT_DATABASE", hide_env_values = true)]
    pub database: Option<String>,
    /// Campaign name.
    #[arg(long)]
    pub campaign: String,
    /// The target: one value of k of that campaign.
    #[arg(long, allow_hyphen_values = true)]
    pub k: String,
    /// Certify up to this bound (default: the target's bound; an earlier bound of an
    /// extended target gives the certificate of that bound).
    #[arg(long)]
    pub bound: Option<String>,
    /// Write the JSON certificate here (default: standard output).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Print the human-readable rendering (to standard output; with --out, in addition to the file).
    #[arg(long)]
    pub text: bool,
}

#[derive(Debug, Args)]
pub struct VerifyArgs {
    /// The certificate (JSON), as written by `certificate`.
    pub file: PathBuf,
    /// Re-run this fraction of the certificate's units with the local kernel (0..=1).
    #[arg(long, default_value = "0", value_parser = parse_fraction)]
    pub recheck: f64,
    /// Seed of the recheck sample (default: random; printed either way).
    #[arg(long)]
    pub seed: Option<u64>,
    /// Refuse unless the certificate is signed by this coordinator key (64 hex). Without it
    /// a warning is printed: anyone can sign a consistent certificate with a key of their own.
    #[arg(long)]
    pub key: Option<String>,
    /// Recompute the counts (d values, classes, candidates) of this fraction of the main
    /// region's units where that is cheap (0..=1); the small and equal regions' counts are
    /// always recomputed.
    #[arg(long, default_value = "0.01", value_parser = parse_fraction)]
    pub counts: f64,
    /// Threads for the recheck (0 = all cores).
    #[arg(long, default_value_t = 0)]
    pub threads: usize,
    /// Print the result as JSON.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct ExportArgs {
    /// Data directory of the coordinator (made by `init`).
    #[arg(long, env = "CUBEHUNT_DATA_DIR")]
    pub data_dir: PathBuf,
    /// The store, when it is not the SQLite file of the data directory: a PostgreSQL URL
    /// (postgres://…), as given to `serve --database`.
    #[arg(long, env = "CUBEHUNT_DATABASE", hide_env_values = true)]
    pub database: Option<String>,
    /// Campaign name.
    #[arg(long)]
    pub campaign: String,
    /// What to export: the solutions (each with its parametric family, if any), the per-unit
    /// ledger (who computed what, when, with which digest), or the coverage table (one line
    /// per target, those without solutions too: bound, units settled, complete, certified,
    /// the certificate's Merkle root, solution counts).
    #[arg(long, value_enum)]
    pub what: What,
    /// Output format.
    #[arg(long, value_enum, default_value = "csv")]
    pub format: Format,
    /// Write here (default: standard output).
    #[arg(long)]
    pub out: Option<PathBuf>,
}

fn parse_fraction(s: &str) -> Result<f64, String> {
    let v: f64 = s.trim().parse().map_err(|_| {
        format!("{s:?} is not a number; give a fraction between 0 and 1, e.g. 0.05")
    })?;
    if !(0.0..=1.0).contains(&v) {
        return Err(format!(
            "{s:?} is outside 0..=1; give a fraction of the units, e.g. 0.05"
        ));
    }
    Ok(v)
}

fn seed_or_random(s: Option<u64>) -> u64 {
    s.unwrap_or_else(rand::random)
}

async fn open_store(dir: &DataDir, database: Option<&str>) -> Result<Store> {
    let database = database.filter(|d| !d.is_empty());
    dir.check_for(database.is_none())?;
    Store::open_at(database, &dir.db(), false)
        .await
        .with_context(|| match database {
            Some(_) => "opening the database given by --database".to_string(),
            None => format!("opening {}", dir.db().display()),
        })
}

/// Write `bytes` to `path` atomically (temporary file, then rename), or to stdout.
fn write_out(path: Option<&Path>, bytes: &[u8]) -> Result<()> {
    match path {
        None => {
            let mut o = std::io::stdout().lock();
            o.write_all(bytes)?;
            o.flush()?;
        }
        Some(p) => {
            let tmp = p.with_extension("partial");
            std::fs::write(&tmp, bytes).with_context(|| format!("writing {}", tmp.display()))?;
            std::fs::rename(&tmp, p)
                .with_context(|| format!("renaming {} to {}", tmp.display(), p.display()))?;
        }
    }
    Ok(())
}

pub async fn run_audit(a: AuditArgs) -> Result<i32> {
    let dir = DataDir::new(&a.data_dir);
    let store = open_store(&dir, a.database.as_deref()).await?;
    let key = dir.signing_key()?.verifying_key();
    let seed = seed_or_random(a.seed);
    let opts = AuditOptions {
        recheck: a.recheck,
        seed,
        threads: a.threads,
    };
    let mut res = audit::audit(&store, &key, &opts).await?;
    store.close().await;
    // The published key must be the key that signs.
    if let Ok(text) = std::fs::read_to_string(dir.path(PUB_FILE)) {
        if text.trim() != sign::public_to_hex(&key) {
            res.findings.insert(
                0,
                cert::Finding::error("signature", PUB_FILE, format!("{PUB_FILE} does not hold the public key of {KEY_FILE}: workers pinning it would refuse every unit")),
            );
            res.errors += 1;
            res.ok = false;
        }
    }
    if a.json {
        println!("{}", serde_json::to_string_pretty(&res)?);
    } else {
        print!("{}", res.render_text());
    }
    Ok(if res.ok { 0 } else { 1 })
}

pub async fn run_certificate(a: CertificateArgs) -> Result<i32> {
    let k = numarg::parse_i64(&a.k).map_err(|e| anyhow!("--k: {e}"))?;
    let bound = a
        .bound
        .as_deref()
        .map(numarg::parse_u64)
        .transpose()
        .map_err(|e| anyhow!("--bound: {e}"))?;
    let dir = DataDir::new(&a.data_dir);
    let store = open_store(&dir, a.database.as_deref()).await?;
    let key = dir.signing_key()?;
    let res = certify::issue(&store, &key, &a.campaign, k, bound, crate::now()).await;
    store.close().await;
    let doc = match res {
        Ok(d) => d,
        Err(e @ (certify::CertError::Incomplete(_) | certify::CertError::Invalid(_))) => {
            eprintln!("error: {e}");
            return Ok(1);
        }
        Err(e) => bail!("{e}"),
    };
    let mut json = serde_json::to_vec_pretty(&doc)?;
    json.push(b'\n');
    match &a.out {
        Some(p) => {
            write_out(Some(p), &json)?;
            eprintln!(
                "certificate of k = {} up to {} ({} units, {} solutions) written to {}",
                doc.k,
                doc.bound,
                doc.units.len(),
                doc.solutions.len(),
                p.display()
            );
            if a.text {
                print!("{}", doc.render_text());
            }
        }
        None if a.text => print!("{}", doc.render_text()),
        None => write_out(None, &json)?,
    }
    Ok(0)
}

/// Read a certificate file (bounded size, clear errors).
pub fn read_certificate(path: &Path) -> Result<Certificate> {
    let meta =
        std::fs::metadata(path).with_context(|| format!("cannot read {}", path.display()))?;
    if meta.len() > MAX_CERT_BYTES {
        bail!(
            "{} is {} bytes; certificates larger than {} bytes are refused",
            path.display(),
            meta.len(),
            MAX_CERT_BYTES
        );
    }
    let f = std::fs::File::open(path).with_context(|| format!("cannot open {}", path.display()))?;
    serde_json::from_reader(std::io::BufReader::new(f))
        .with_context(|| format!("{} is not a cubehunt certificate (JSON as written by `cubehunt-coordinator certificate`)", path.display()))
}

pub async fn run_verify(a: VerifyArgs) -> Result<i32> {
    if let Some(k) = &a.key {
        sign::public_from_hex(k).map_err(|e| {
            anyhow!("--key: {e}; give the coordinator's public key as 64 hex characters")
        })?;
    }
    let doc = read_certificate(&a.file)?;
    let seed = seed_or_random(a.seed);
    let opts = VerifyOptions {
        pinned_key: a.key.clone(),
        recheck: a.recheck,
        seed,
        threads: a.threads,
        counts: a.counts,
    };
    if a.key.is_none() {
        eprintln!(
            "warning: no --key given: this checks that the certificate is consistent and signed by the key it names, not that it is the coordinator's you trust; pass --key with the coordinator's published key"
        );
    }
    let res =
        tokio::task::spawn_blocking(move || cert::verify_certificate_with(&doc, &opts)).await?;
    match res {
        Ok(s) => {
            if a.json {
                println!(
                    "{}",
                    serde_json::to_string_pretty(
                        &serde_json::json!({"holds": true, "seed": seed, "summary": s})
                    )?
                );
            } else {
                println!(
                    "certificate holds: every solution of x³+y³+z³ = {} with min(|x|,|y|,|z|) ≤ {} is among its {} solution(s)",
                    s.k,
                    s.bound,
                    s.solutions.len()
                );
                println!(
                    "  campaign {}, kernel {}, {} units, {} candidates, root {}",
                    s.campaign, s.kernel, s.units, s.candidates, s.root
                );
                println!(
                    "  signed {} by coordinator key {}{}",
                    s.issued_at,
                    s.coordinator_key,
                    if a.key.is_some() {
                        " (pinned)"
                    } else {
                        " (not pinned: pass --key to require it)"
                    }
                );
                for sol in &s.solutions {
                    let [x, y, z] = sol.to_strings();
                    println!("    {x}, {y}, {z}");
                }
                if a.recheck > 0.0 {
                    println!(
                        "  recheck: {} unit(s) recomputed locally, digests agree (seed {seed})",
                        s.rechecked
                    );
                }
                for w in &s.warnings {
                    println!("{w}");
                }
            }
            Ok(0)
        }
        Err(findings) => {
            if a.json {
                println!(
                    "{}",
                    serde_json::to_string_pretty(
                        &serde_json::json!({"holds": false, "seed": seed, "findings": findings})
                    )?
                );
            } else {
                for f in &findings {
                    println!("{f}");
                }
                let n = findings.iter().filter(|f| f.is_error()).count();
                println!(
                    "certificate does NOT hold: {n} error(s){}",
                    if a.recheck > 0.0 {
                        format!(" (recheck seed {seed})")
                    } else {
                        String::new()
                    }
                );
            }
            Ok(1)
        }
    }
}

pub async fn run_export(a: ExportArgs) -> Result<i32> {
    let dir = DataDir::new(&a.data_dir);
    let store = open_store(&dir, a.database.as_deref()).await?;
    let n = match &a.out {
        None => {
            let mut o = std::io::BufWriter::new(std::io::stdout());
            export::export(&store, &a.campaign, a.what, a.format, &mut o).await?
        }
        Some(p) => {
            let tmp = p.with_extension("partial");
            let f = std::fs::File::create(&tmp)
                .with_context(|| format!("creating {}", tmp.display()))?;
            let mut o = std::io::BufWriter::new(f);
            let n = export::export(&store, &a.campaign, a.what, a.format, &mut o).await?;
            drop(o);
            std::fs::rename(&tmp, p)
                .with_context(|| format!("renaming {} to {}", tmp.display(), p.display()))?;
            eprintln!("{n} row(s) written to {}", p.display());
            n
        }
    };
    let _ = n;
    store.close().await;
    Ok(0)
}
