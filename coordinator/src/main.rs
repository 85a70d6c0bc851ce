//! `cubehunt-coordinator`: a thin command line over the `cubehunt_coordinator` library.

use anyhow::Result;
use clap::{CommandFactory, FromArgMatches, Parser, Subcommand};
use cubehunt_coordinator::{
    checks, cli, config::ServiceConfig, config_file, datadir::DataDir, demo, forecast, serve,
};
use std::path::PathBuf;

#[derive(Debug, Parser)]
#[command(
    name = "cubehunt-coordinator",
    version,
    about = "Run cubehunt campaigns: plan and sign units, lease them to volunteer workers, cross-check their reports."
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
        /// Directory to create (must be absent or empty); it will hold the database, keys and token.
        #[arg(long)]
        data_dir: PathBuf,
    },
    /// Run the service on a data directory until SIGINT or SIGTERM.
    Serve {
        /// Data directory made by `init`.
        #[arg(long, env = "CUBEHUNT_DATA_DIR")]
        data_dir: PathBuf,
        /// Address to listen on (port 0 picks a free one; the URL is written to <data-dir>/listen.url).
        #[arg(long, env = "CUBEHUNT_LISTEN", default_value = "127.0.0.1:8480")]
        listen: String,
        #[command(flatten)]
        config: ServiceConfig,
        /// Read settings from this TOML file first; environment variables and flags override
        /// it. Keys are the flags' names with '_' (see deploy/coordinator.example.toml).
        #[arg(long = "config", env = "CUBEHUNT_CONFIG", value_name = "FILE")]
        config_file: Option<PathBuf>,
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
    /// Export a campaign's solutions, per-unit ledger or coverage table as CSV or JSON.
    Export(checks::ExportArgs),
    /// Run the whole system on this machine: a coordinator, local workers, a small campaign,
    /// its certificates and the audit (an invented scenario; a couple of minutes).
    Demo(demo::DemoArgs),
    Plan(forecast::PlanArgs),
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
            config_file: _,
        } => {
            init_logging(c.log_json);
            serve::run(DataDir::new(data_dir), &listen, config).await
        }
        Command::Campaign(a) => cli::run(a).await,
        Command::Audit(a) => exit_with(checks::run_audit(a).await),
        Command::Certificate(a) => exit_with(checks::run_certificate(a).await),
        Command::VerifyCertificate(a) => exit_with(checks::run_verify(a).await),
        Command::Export(a) => exit_with(checks::run_export(a).await),
        Command::Demo(a) => demo::run(a).await,
        Command::Plan(a) => forecast::run(a),
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

/// `--k -3,30` and `--bound -5` reach our own parsers (which accept the one and explain why
/// not the other) instead of being taken for unknown flags, in every subcommand.
fn negatives_are_values(cmd: clap::Command) -> clap::Command {
    cmd.allow_negative_numbers(true)
        .mut_subcommands(negatives_are_values)
}

/// The command line, with the values of `serve --config FILE` as defaults under the
/// environment and the flags.
fn parse_cli(args: Vec<std::ffi::OsString>) -> Result<Cli> {
    let cmd = negatives_are_values(Cli::command());
    let cmd = config_file::apply_to(cmd, "serve", &args, &config_file::process_env)?;
    let m = cmd.get_matches_from(args);
    Ok(Cli::from_arg_matches(&m).unwrap_or_else(|e| e.exit()))
}

#[tokio::main]
async fn main() {
    let c = match parse_cli(std::env::args_os().collect()) {
        Ok(c) => c,
        Err(e) => {
            eprintln!("error: {e:#}");
            std::process::exit(2);
        }
    };
    if let Err(e) = run(c).await {
        eprintln!("error: {e:#}");
        std::process::exit(1);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_example_configuration_sets_every_key_to_its_default() {
        // deploy/coordinator.example.toml documents every setting of `serve` with its
        // built-in default: it must parse against the real command line and change nothing.
        let example = concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/../deploy/coordinator.example.toml"
        );
        let with = parse_cli(vec![
            "c".into(),
            "serve".into(),
            "--config".into(),
            example.into(),
        ])
        .unwrap();
        let Command::Serve {
            data_dir,
            listen,
            config,
            config_file,
        } = with.command
        else {
            panic!("serve")
        };
        assert_eq!(config_file.as_deref(), Some(std::path::Path::new(example)));
        assert_eq!(data_dir, PathBuf::from("/var/lib/cubehunt-coordinator"));
        let without =
            Cli::try_parse_from(["c", "serve", "--data-dir", "/var/lib/cubehunt-coordinator"])
                .unwrap();
        let Command::Serve {
            listen: l0,
            config: c0,
            ..
        } = without.command
        else {
            panic!("serve")
        };
        assert_eq!(listen, l0);
        assert_eq!(format!("{config:?}"), format!("{c0:?}"));
        assert_eq!(with.log_json, without.log_json);
        // And every setting `serve` has is documented there.
        let text = std::fs::read_to_string(example).unwrap();
        let root = Cli::command();
        let serve = root.find_subcommand("serve").unwrap();
        for a in serve
            .get_arguments()
            .chain(root.get_arguments().filter(|a| a.is_global_set()))
        {
            let Some(long) = a.get_long() else { continue };
            if ["help", "version", "config"].contains(&long) {
                continue;
            }
            let key = long.replace('-', "_");
            assert!(
                text.contains(&format!("\n{key} = ")),
                "deploy/coordinator.example.toml does not document `{key}`"
            );
        }
    }

    #[test]
    fn a_configuration_file_is_overridden_by_flags() {
        let dir = tempfile::tempdir().unwrap();
        let f = dir.path().join("c.toml");
        std::fs::write(
            &f,
            "data_dir = \"/srv/a\"\nheartbeat_s = 17\nquarantine_after = 9\n",
        )
        .unwrap();
        let c = parse_cli(vec![
            "c".into(),
            "serve".into(),
            "--config".into(),
            f.clone().into(),
            "--quarantine-after".into(),
            "5".into(),
        ])
        .unwrap();
        let Command::Serve {
            data_dir, config, ..
        } = c.command
        else {
            panic!("serve")
        };
        assert_eq!(
            (data_dir, config.heartbeat_s, config.quarantine_after),
            (PathBuf::from("/srv/a"), 17, 5)
        );
        std::fs::write(&f, "data_dir = \"/srv/a\"\nheartbeat = 17\n").unwrap();
        let e = parse_cli(vec![
            "c".into(),
            "serve".into(),
            "--config".into(),
            f.into(),
        ])
        .err()
        .unwrap()
        .to_string();
        assert!(
            e.contains("unknown key `heartbeat`") && e.contains("heartbeat_s"),
            "{e}"
        );
    }
}
