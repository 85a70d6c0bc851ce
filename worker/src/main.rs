//! cubehunt-worker: the volunteer loop (`run`); `solo` and `scan` join it here.

use clap::{Parser, Subcommand};
use std::process::ExitCode;

mod run;

#[derive(Parser)]
#[command(
    name = "cubehunt-worker",
    version,
    about = "cubehunt worker: computes units of x³+y³+z³=k searches"
)]
struct Cli {
    #[command(subcommand)]
    cmd: Cmd,
}

#[derive(Subcommand)]
enum Cmd {
    /// Donate this machine's idle time to a campaign (the volunteer loop).
    Run(run::RunArgs),
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let r = match cli.cmd {
        Cmd::Run(a) => run::run(a),
    };
    match r {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("cubehunt-worker: error: {e:#}");
            ExitCode::FAILURE
        }
    }
}
