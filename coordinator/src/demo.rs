//! `cubehunt-coordinator demo`: the whole system on this machine, in a few minutes.
//!
//! The scenario is invented: the Riverside maths club hunts sums of three cubes over one
//! weekend, with a handful of targets up to a modest bound and three members lending their
//! laptops. The demo drives the real pieces as separate processes, exactly as an organiser would by
//! hand: `init`, `serve` on 127.0.0.1, `campaign create`, three `cubehunt-worker run`
//! (found next to this binary), then `certificate` and `verify-certificate` for every target
//! and the `audit` of the store. It exits with the audit's verdict.
//!
//! What it does not do: any search or check of its own. Everything it prints comes from the
//! coordinator's API, the certificate files, or the commands it runs.

use anyhow::{bail, Context, Result};
use clap::Args;
use serde_json::Value;
use std::io::{IsTerminal, Write};
use std::path::{Path, PathBuf};
use std::process::Stdio;
use std::time::{Duration, Instant};
use tokio::process::{Child, Command};

/// The scenario.
const CAMPAIGN: &str = "riverside-weekend";
const TARGETS: &str = "3,10,12,29,30,33,42";
const DEFAULT_BOUND: &str = "3e7";
const UNIT_SECONDS: &str = "2";
/// (owner, label): club members and their machines.
const MEMBERS: [(&str, &str); 4] = [
    ("ines", "ines-thinkpad"),
    ("tomasz", "library-desktop-2"),
    ("wanjiru", "wanjiru-macbook"),
    ("olu", "club-raspberry"),
];

#[derive(Debug, Args)]
pub struct DemoArgs {
    /// Keep everything in DIR (a new or empty directory): the coordinator's store, key and
    /// logs, the workers' state, the certificates. Afterwards `cubehunt-coordinator audit
    /// --data-dir DIR` re-checks it. Without this flag a temporary directory is used and removed.
    #[arg(long, value_name = "DIR")]
    pub data_dir: Option<PathBuf>,
    /// Number of local workers (each one thread, each under its own owner name), 2 to 4.
    #[arg(long, default_value_t = 3, value_parser = clap::value_parser!(u8).range(2..=4))]
    pub workers: u8,
    /// Bound on the smallest coordinate for every target (e.g. 1e6 for a quicker run).
    #[arg(long, default_value = DEFAULT_BOUND)]
    pub bound: String,
    /// Give up if the campaign is not complete after this many seconds.
    #[arg(long, default_value_t = 600)]
    pub timeout_s: u64,
}

/// A child process killed when dropped (so that an error never leaves one behind).
struct Proc {
    name: String,
    child: Child,
}

impl Proc {
    fn spawn(name: &str, program: &Path, args: &[String], log: &Path) -> Result<Proc> {
        let out =
            std::fs::File::create(log).with_context(|| format!("creating {}", log.display()))?;
        let err = out.try_clone()?;
        let child = Command::new(program)
            .args(args)
            .stdin(Stdio::null())
            .stdout(out)
            .stderr(err)
            .kill_on_drop(true)
            .spawn()
            .with_context(|| format!("starting {} {}", program.display(), args.join(" ")))?;
        Ok(Proc {
            name: name.to_string(),
            child,
        })
    }

    /// SIGTERM, then wait up to `grace` for a clean exit, then SIGKILL.
    async fn stop(mut self, grace: Duration) {
        if let Some(pid) = self.child.id() {
            // SAFETY: kill(2) on our own child's pid, which we have not reaped yet.
            unsafe {
                libc::kill(pid as i32, libc::SIGTERM);
            }
        }
        if tokio::time::timeout(grace, self.child.wait())
            .await
            .is_err()
        {
            eprintln!(
                "  {} did not stop within {:.0} s; killing it",
                self.name,
                grace.as_secs_f64()
            );
            let _ = self.child.kill().await;
        }
    }

    fn exited(&mut self) -> Option<std::process::ExitStatus> {
        self.child.try_wait().ok().flatten()
    }
}

/// Run one of our own subcommands to completion; (exit code, stdout, stderr).
async fn own(exe: &Path, args: &[&str]) -> Result<(i32, String, String)> {
    let out = Command::new(exe)
        .args(args)
        .stdin(Stdio::null())
        .kill_on_drop(true)
        .output()
        .await
        .with_context(|| format!("running {} {}", exe.display(), args.join(" ")))?;
    Ok((
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    ))
}

async fn own_ok(exe: &Path, args: &[&str]) -> Result<String> {
    let (code, out, err) = own(exe, args).await?;
    if code != 0 {
        bail!(
            "`cubehunt-coordinator {}` failed (exit {code}):\n{out}{err}",
            args.join(" ")
        );
    }
    Ok(out)
}

fn fmt_duration(s: f64) -> String {
    if !s.is_finite() || s < 0.0 {
        "–".into()
    } else if s < 90.0 {
        format!("{s:.0} s")
    } else {
        format!("{:.1} min", s / 60.0)
    }
}

fn triple(v: &Value) -> String {
    let parts: Vec<&str> = v
        .as_array()
        .map(|a| a.iter().filter_map(Value::as_str).collect())
        .unwrap_or_default();
    format!("({})", parts.join(", "))
}

/// Where the demo keeps its files, and whether to remove them at the end.
struct Place {
    root: PathBuf,
    keep: bool,
}

impl Place {
    fn new(dir: Option<&Path>) -> Result<Place> {
        match dir {
            Some(d) => {
                if d.exists()
                    && std::fs::read_dir(d)
                        .map(|mut r| r.next().is_some())
                        .unwrap_or(true)
                {
                    bail!("{} exists and is not empty: give --data-dir a new or empty directory (the demo creates a fresh coordinator there and keeps it)", d.display());
                }
                Ok(Place {
                    root: d.to_path_buf(),
                    keep: true,
                })
            }
            None => {
                let stamp = std::time::SystemTime::now()
                    .duration_since(std::time::UNIX_EPOCH)
                    .map(|t| t.as_nanos())
                    .unwrap_or(0);
                let root = std::env::temp_dir()
                    .join(format!("cubehunt-demo-{}-{stamp}", std::process::id()));
                Ok(Place { root, keep: false })
            }
        }
    }
    /// The coordinator's data directory is the root itself, so that `audit --data-dir DIR`
    /// works on a kept demo; logs, worker state and certificates sit beside the store.
    fn store(&self) -> PathBuf {
        self.root.clone()
    }
}

impl Drop for Place {
    fn drop(&mut self) {
        if !self.keep {
            let _ = std::fs::remove_dir_all(&self.root);
        }
    }
}

/// The worker binary: `cubehunt-worker` beside this executable.
fn worker_binary(exe: &Path) -> Result<PathBuf> {
    let dir = exe
        .parent()
        .context("the coordinator binary has no directory")?;
    let w = dir.join("cubehunt-worker");
    if !w.is_file() {
        bail!(
            "the demo runs real workers, but {} is missing. Build both binaries first: `cargo build --release`, then run `target/release/cubehunt-coordinator demo`",
            w.display()
        );
    }
    Ok(w)
}

pub async fn run(a: DemoArgs) -> Result<()> {
    let exe = std::env::current_exe().context("locating this executable")?;
    let worker_bin = worker_binary(&exe)?;
    cubehunt_common::numarg::parse_u64(&a.bound).map_err(|e| anyhow::anyhow!("--bound: {e}"))?;
    let mut place = Place::new(a.data_dir.as_deref())?;
    let r = demo(&a, &exe, &worker_bin, &place).await;
    if r.is_err() && place.root.exists() {
        // Keep the logs of a failed run, temporary or not, for whoever looks into it.
        place.keep = true;
        return r.with_context(|| {
            format!(
                "the demo's files, logs included, are kept in {}",
                place.root.display()
            )
        });
    }
    r
}

async fn demo(a: &DemoArgs, exe: &Path, worker_bin: &Path, place: &Place) -> Result<()> {
    let exe = exe.to_path_buf();
    let store = place.store();
    let store_s = store
        .to_str()
        .context("the data directory path is not UTF-8")?
        .to_string();
    let t_start = Instant::now();

    println!("cubehunt demo: the Riverside maths club's weekend hunt for x³ + y³ + z³ = k");
    println!(
        "  targets k = {TARGETS}, every solution with min(|x|,|y|,|z|) ≤ {}",
        a.bound
    );
    println!(
        "  files in {}{}",
        place.root.display(),
        if place.keep {
            " (kept)"
        } else {
            " (temporary)"
        }
    );

    // 1. The coordinator: a fresh data directory, then the service on a free loopback port.
    own_ok(&exe, &["init", "--data-dir", &store_s]).await?;
    let public_key = std::fs::read_to_string(store.join("coordinator.pub"))
        .context("init wrote no coordinator.pub")?
        .trim()
        .to_string();
    let serve_log = place.root.join("coordinator.log");
    let serve_args: Vec<String> = [
        "serve",
        "--data-dir",
        &store_s,
        "--listen",
        "127.0.0.1:0",
        "--heartbeat-s",
        "2",
        "--sweep-s",
        "2",
        "--retry-after-s",
        "1",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect();
    let mut serve = Proc::spawn("coordinator", &exe, &serve_args, &serve_log)?;
    let http = reqwest::Client::builder()
        .timeout(Duration::from_secs(10))
        .build()?;
    let url = wait_for_service(&mut serve, &store, &http, &serve_log).await?;
    println!(
        "  coordinator listening on {url} (status page: {url}/), key {}…",
        &public_key[..16.min(public_key.len())]
    );

    // 2. The campaign.
    let created: Value = serde_json::from_str(
        &own_ok(
            &exe,
            &[
                "campaign",
                "--data-dir",
                &store_s,
                "create",
                "--name",
                CAMPAIGN,
                "--k",
                TARGETS,
                "--bound",
                &a.bound,
                "--unit-seconds",
                UNIT_SECONDS,
                "--json",
            ],
        )
        .await?,
    )
    .context("campaign create --json did not print JSON")?;
    let total = created["units"]["total"].as_i64().unwrap_or(0);
    println!(
        "  campaign {CAMPAIGN}: {total} signed units over {} targets",
        created["targets"].as_array().map_or(0, Vec::len)
    );

    // 3. The workers: club members' laptops, one thread each, idle priority.
    let wdir = place.root.join("workers");
    std::fs::create_dir_all(&wdir)?;
    let mut workers = Vec::new();
    for (owner, label) in MEMBERS.iter().take(a.workers as usize) {
        let state = wdir.join(owner);
        let args: Vec<String> = [
            "run",
            "--coordinator",
            &url,
            "--state-dir",
            state.to_str().unwrap(),
            "--owner",
            owner,
            "--label",
            label,
            "--threads",
            "1",
            "--coordinator-key",
            &public_key,
            "--max-backoff",
            "2",
        ]
        .iter()
        .map(|s| s.to_string())
        .collect();
        workers.push(Proc::spawn(
            &format!("worker {owner}"),
            worker_bin,
            &args,
            &wdir.join(format!("{owner}.log")),
        )?);
        println!("  worker of {owner} ({label}) started");
    }

    // 4. Progress until every unit is settled.
    let view = watch(
        &http,
        &url,
        &mut serve,
        &mut workers,
        place,
        Duration::from_secs(a.timeout_s),
    )
    .await;
    for w in workers {
        w.stop(Duration::from_secs(20)).await;
    }
    let view = view?;
    println!(
        "  campaign complete after {}",
        fmt_duration(t_start.elapsed().as_secs_f64())
    );

    // 5. Solutions, from the API.
    println!("\nSolutions (every one verified exactly, confirmed by two owners):");
    for t in view["targets"].as_array().into_iter().flatten() {
        let sols: Vec<String> = t["solutions"]
            .as_array()
            .into_iter()
            .flatten()
            .map(triple)
            .collect();
        let k = t["k"].as_i64().unwrap_or(0);
        if sols.is_empty() {
            println!("  k = {k:>3}: none with min ≤ {}", t["bound"]);
        } else {
            // Three to a line: the larger coordinates run to many digits.
            for (i, line) in sols.chunks(3).enumerate() {
                let head = if i == 0 {
                    format!("k = {k:>3}:")
                } else {
                    String::new()
                };
                println!("  {head:<8} {}", line.join("  "));
            }
        }
    }

    // 6. A certificate per target, checked offline.
    println!("\nCertificates (signed by the coordinator, checked by verify-certificate):");
    let cdir = place.root.join("certificates");
    std::fs::create_dir_all(&cdir)?;
    let mut all_verified = true;
    for t in view["targets"].as_array().into_iter().flatten() {
        let k = t["k"].as_i64().context("target without k")?.to_string();
        let file = cdir.join(format!("{CAMPAIGN}-k{k}.json"));
        let file_s = file.to_str().unwrap().to_string();
        own_ok(
            &exe,
            &[
                "certificate",
                "--data-dir",
                &store_s,
                "--campaign",
                CAMPAIGN,
                "--k",
                &k,
                "--out",
                &file_s,
            ],
        )
        .await?;
        let doc: Value = serde_json::from_str(&std::fs::read_to_string(&file)?)
            .with_context(|| format!("{} is not JSON", file.display()))?;
        let (code, out, err) =
            own(&exe, &["verify-certificate", &file_s, "--key", &public_key]).await?;
        let verdict = if code == 0 { "verified" } else { "FAILED" };
        all_verified &= code == 0;
        let root = doc["root"].as_str().unwrap_or("");
        println!(
            "  k = {k:>3}: bound {}, {:>3} units, {} solutions, root {}…  {verdict}",
            doc["bound"],
            doc["units"].as_array().map_or(0, Vec::len),
            doc["solutions"].as_array().map_or(0, Vec::len),
            &root[..root.len().min(16)]
        );
        if code != 0 {
            println!("{out}{err}");
        }
    }

    // 7. The audit, on the store alone, with the service stopped.
    serve.stop(Duration::from_secs(20)).await;
    println!(
        "\nAudit of the store (re-checking every signature, the tiling and a sample of units):"
    );
    let (code, out, err) = own(
        &exe,
        &["audit", "--data-dir", &store_s, "--recheck", "0.05"],
    )
    .await?;
    for line in out.lines().chain(err.lines()) {
        println!("  {line}");
    }
    println!();
    if place.keep {
        println!("Everything is kept in {}. Try:", place.root.display());
        println!("  cubehunt-coordinator audit --data-dir {store_s}");
        println!(
            "  cubehunt-coordinator verify-certificate {}/{CAMPAIGN}-k3.json",
            cdir.display()
        );
    }
    if code != 0 || !all_verified {
        bail!("the demo's checks did not all pass (audit exit {code}, certificates {}); logs are in {}", if all_verified { "ok" } else { "failed" }, place.root.display());
    }
    println!(
        "demo finished in {}: every unit settled, every certificate verified, audit passed.",
        fmt_duration(t_start.elapsed().as_secs_f64())
    );
    Ok(())
}

/// Wait for `serve` to write its URL and answer `/healthz`.
async fn wait_for_service(
    serve: &mut Proc,
    store: &Path,
    http: &reqwest::Client,
    log: &Path,
) -> Result<String> {
    let end = Instant::now() + Duration::from_secs(30);
    loop {
        if let Some(st) = serve.exited() {
            bail!(
                "the coordinator stopped at start ({st}); its log {}:\n{}",
                log.display(),
                std::fs::read_to_string(log).unwrap_or_default()
            );
        }
        if let Ok(u) = std::fs::read_to_string(store.join("listen.url")) {
            let u = u.trim().trim_end_matches('/').to_string();
            if http
                .get(format!("{u}/healthz"))
                .send()
                .await
                .is_ok_and(|r| r.status().is_success())
            {
                return Ok(u);
            }
        }
        if Instant::now() > end {
            bail!(
                "the coordinator did not answer within 30 s; see {}",
                log.display()
            );
        }
        tokio::time::sleep(Duration::from_millis(100)).await;
    }
}

/// Show progress until the campaign is complete; its final view.
async fn watch(
    http: &reqwest::Client,
    url: &str,
    serve: &mut Proc,
    workers: &mut [Proc],
    place: &Place,
    timeout: Duration,
) -> Result<Value> {
    let tty = std::io::stderr().is_terminal();
    let start = Instant::now();
    let mut last_line = Instant::now() - Duration::from_secs(60);
    loop {
        if let Some(st) = serve.exited() {
            bail!(
                "the coordinator stopped ({st}); see {}",
                place.root.join("coordinator.log").display()
            );
        }
        let running = workers
            .iter_mut()
            .map(|w| w.exited().is_none() as usize)
            .sum::<usize>();
        if running == 0 {
            bail!(
                "every worker stopped before the campaign was complete; see the logs in {}",
                place.root.join("workers").display()
            );
        }
        let v: Option<Value> = match http
            .get(format!("{url}/api/v1/campaigns/{CAMPAIGN}"))
            .send()
            .await
        {
            Ok(r) if r.status().is_success() => r.json().await.ok(),
            _ => None,
        };
        if let Some(v) = v {
            let u = &v["units"];
            let line = format!(
                "  [{:>4.0} s] {}/{} units settled, {} leased, {} disputed · {:.1}% of the work · {running} workers · ETA {}",
                start.elapsed().as_secs_f64(),
                u["settled"],
                u["total"],
                u["leased"],
                u["disputed"],
                100.0 * v["fraction"].as_f64().unwrap_or(0.0),
                v["eta_s"].as_f64().map_or("–".to_string(), fmt_duration),
            );
            let complete = v["state"] == "complete";
            if tty {
                eprint!("\r\x1b[2K{line}");
                if complete {
                    eprintln!();
                }
                let _ = std::io::stderr().flush();
            } else if complete || last_line.elapsed() >= Duration::from_secs(5) {
                eprintln!("{line}");
                last_line = Instant::now();
            }
            if complete {
                return Ok(v);
            }
            if v["state"] == "cancelled" || v["state"] == "paused" {
                bail!("the campaign is {} (it should be running)", v["state"]);
            }
        }
        if start.elapsed() > timeout {
            bail!(
                "the campaign was not complete after {} s; logs are in {}",
                timeout.as_secs(),
                place.root.display()
            );
        }
        tokio::time::sleep(Duration::from_millis(500)).await;
    }
}
