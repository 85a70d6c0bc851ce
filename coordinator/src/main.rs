//! `cubehunt-coordinator`: a thin command line over the `cubehunt_coordinator` library.

use anyhow::Result;
use clap::{Parser, Subcommand};
use cubehunt_coordinator::{checks, cli, config::ServiceConfig, datadir::DataDir, serve};
use std::path::PathBuf;

#[derive(Debug, Parser)]
#[command(
    name = "cubehunt-coordinator",
    version,
    about = "Host cubehunt campaigns: plan and sign units, lease them to volunteer workers, cross-check their reports."
)]
struct Cli {
    /// Log as JSON lines (default: human-readable). Filter with RUST_LOG (default info).
    #[arg(long, global = true, env = "CUBEHUNT_LOG_JSON")]
    log_json: bool,
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// Create a data directory: database, coordinator key, admin token.
    Init {
        #[arg(long)]
        data_dir: PathBuf,
    },
    /// Run the service on a data directory until SIGINT or SIGTERM.
    Serve {
        #[arg(long, env = "CUBEHUNT_DATA_DIR")]
        data_dir: PathBuf,
        /// Address to listen on (port 0 picks a free one; the URL is written to <data-dir>/listen.url).
        #[arg(long, env = "CUBEHUNT_LISTEN", default_value = "127.0.0.1:8480")]
        listen: String,
        #[command(flatten)]
        config: ServiceConfig,
    },
    /// Administer campaigns through the admin API.
    Campaign(cli::CampaignArgs),
    /// Re-derive every claim of the store: signatures, settlements, tiling, solutions, counts.
    /// Exit 0 only when every check passes.
    Audit(checks::AuditArgs),
    /// Issue the signed coverage certificate of one target (JSON; --text for a rendering).
    Certificate(checks::CertificateArgs),
    /// Check a certificate offline (no database, no network). Exit 0 only when it holds.
    VerifyCertificate(checks::VerifyArgs),
    /// Export a campaign's solutions or its per-unit ledger as CSV or JSON.
    Export(checks::ExportArgs),
}

fn init_logging(json: bool) {
    use tracing_subscriber::EnvFilter;
    let filter = EnvFilter::try_from_default_env().unwrap_or_else(|_| EnvFilter::new("info"));
    let b = tracing_subscriber::fmt()
        .with_env_filter(filter)
        .with_writer(std::io::stderr);
    if json {
        b.json().init();
    } else {
        b.init();
    }
}

async fn run(c: Cli) -> Result<()> {
    match c.command {
        Command::Init { data_dir } => {
            let i = DataDir::init(&data_dir).await?;
            println!("data directory: {}", i.dir.root.display());
            println!(
                "coordinator public key (workers pin it with --coordinator-key): {}",
                i.public_key
            );
            println!(
                "admin token (shown once; also kept in {}): {}",
                i.dir
                    .path(cubehunt_coordinator::datadir::TOKEN_FILE)
                    .display(),
                i.admin_token
            );
            Ok(())
        }
        Command::Serve {
            data_dir,
            listen,
            config,
        } => {
            init_logging(c.log_json);
            serve::run(DataDir::new(data_dir), &listen, config).await
        }
        Command::Campaign(a) => cli::run(a).await,
        Command::Audit(a) => exit_with(checks::run_audit(a).await),
        Command::Certificate(a) => exit_with(checks::run_certificate(a).await),
        Command::VerifyCertificate(a) => exit_with(checks::run_verify(a).await),
        Command::Export(a) => exit_with(checks::run_export(a).await),
    }
}

/// Checks exit 0 when they hold, 1 when they do not, 2 when they could not run.
fn exit_with(r: Result<i32>) -> Result<()> {
    match r {
        Ok(0) => Ok(()),
        Ok(code) => std::process::exit(code),
        Err(e) => {
            eprintln!("error: {e:#}");
            std::process::exit(2);
        }
    }
}

#[tokio::main]
async fn main() {
    let c = Cli::parse();
    if let Err(e) = run(c).await {
        eprintln!("error: {e:#}");
        std::process::exit(1);
    }
}
