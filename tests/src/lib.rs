//! Helpers for the cross-crate tests: locating the built binaries, spawning them on
//! loopback with free ports and temporary directories, bounded waits, and a hand-driven
//! client that speaks the worker protocol (to play a misbehaving worker).
//!
//! Every child process is killed when its handle is dropped, every wait has a deadline, and
//! all traffic goes to 127.0.0.1.

use anyhow::{anyhow, bail, Context, Result};
use cubehunt_common::protocol::{
    EnrolRequest, EnrolResponse, LeaseGrant, LeaseRequest, LeaseResponse,
};
use cubehunt_common::report::{Report, SignedReport};
use cubehunt_common::{kernel, sign, Digest, Solution, KERNEL_VERSION};
use serde_json::Value;
use std::collections::BTreeSet;
use std::fs::File;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::sync::Mutex;
use std::time::{Duration, Instant, SystemTime, UNIX_EPOCH};

/// Tests that start processes take this lock so that they do not compete for the CPU.
pub static SERIAL: Mutex<()> = Mutex::new(());

pub fn serial() -> std::sync::MutexGuard<'static, ()> {
    SERIAL.lock().unwrap_or_else(|e| e.into_inner())
}

/// A workspace binary, built next to the test executable (`target/<profile>/NAME`).
///
/// `cargo test` builds binaries only for the integration tests of their own package, so the
/// first call in a test process runs `cargo build --bins` for the coordinator and the worker
/// (a no-op when they are fresh), so that no test ever runs a stale binary.
pub fn bin(name: &str) -> PathBuf {
    let exe = std::env::current_exe().expect("test executable path");
    // target/debug/deps/cubehunt_tests-HASH → target/debug
    let dir = exe
        .parent()
        .and_then(|p| p.parent())
        .expect("target directory")
        .to_path_buf();
    static BUILT: std::sync::Once = std::sync::Once::new();
    BUILT.call_once(|| build_binaries(&dir));
    let p = dir.join(name);
    if !p.exists() {
        panic!(
            "{} is missing: the cross-process tests need the workspace binaries; run \
             `cargo build --workspace --bins` and then `cargo test --workspace`",
            p.display()
        );
    }
    p
}

fn build_binaries(dir: &Path) {
    let cargo = std::env::var("CARGO")
        .ok()
        .or(option_env!("CARGO").map(String::from))
        .unwrap_or_else(|| "cargo".into());
    let manifest = Path::new(env!("CARGO_MANIFEST_DIR")).join("../Cargo.toml");
    let mut cmd = Command::new(cargo);
    cmd.args([
        "build",
        "--quiet",
        "--bins",
        "-p",
        "cubehunt-coordinator",
        "-p",
        "cubehunt-worker",
        "--manifest-path",
    ])
    .arg(&manifest);
    if dir.file_name().and_then(|n| n.to_str()) == Some("release") {
        cmd.arg("--release");
    }
    match cmd.output() {
        Ok(o) if o.status.success() => {}
        Ok(o) => panic!(
            "building the workspace binaries failed:\n{}",
            String::from_utf8_lossy(&o.stderr)
        ),
        Err(e) => eprintln!(
            "could not run cargo to build the binaries ({e}); using what is in {}",
            dir.display()
        ),
    }
}

/// A free TCP port on 127.0.0.1 (bound then released; good enough for tests).
pub fn free_port() -> u16 {
    let l = std::net::TcpListener::bind("127.0.0.1:0").expect("bind 127.0.0.1:0");
    l.local_addr().unwrap().port()
}

/// Poll `f` every 100 ms until it yields `Some`, or fail after `timeout` naming `what`.
pub fn wait_for<T>(what: &str, timeout: Duration, mut f: impl FnMut() -> Option<T>) -> Result<T> {
    let end = Instant::now() + timeout;
    loop {
        if let Some(v) = f() {
            return Ok(v);
        }
        if Instant::now() >= end {
            bail!(
                "timed out after {:.0}s waiting for {what}",
                timeout.as_secs_f64()
            );
        }
        std::thread::sleep(Duration::from_millis(100));
    }
}

/// A child process, killed (SIGKILL) and reaped on drop; its stderr and stdout go to a log file.
pub struct Proc {
    pub name: String,
    pub child: Option<Child>,
    pub log: PathBuf,
}

impl Proc {
    pub fn spawn(name: &str, program: &Path, args: &[String], log: &Path) -> Result<Proc> {
        let out = File::options().create(true).append(true).open(log)?;
        let err = out.try_clone()?;
        let child = Command::new(program)
            .args(args)
            .stdin(Stdio::null())
            .stdout(out)
            .stderr(err)
            .env("RUST_LOG", "info")
            .spawn()
            .with_context(|| format!("spawning {}", program.display()))?;
        Ok(Proc {
            name: name.to_string(),
            child: Some(child),
            log: log.to_path_buf(),
        })
    }

    pub fn pid(&self) -> i32 {
        self.child.as_ref().map(|c| c.id() as i32).unwrap_or(0)
    }

    pub fn log_text(&self) -> String {
        std::fs::read_to_string(&self.log).unwrap_or_default()
    }

    /// Send a signal (e.g. `libc::SIGTERM`).
    pub fn signal(&self, sig: i32) {
        if let Some(c) = &self.child {
            // SAFETY: plain kill(2) on our own child.
            unsafe {
                libc::kill(c.id() as i32, sig);
            }
        }
    }

    /// SIGKILL and reap.
    pub fn kill9(&mut self) {
        if let Some(mut c) = self.child.take() {
            let _ = c.kill();
            let _ = c.wait();
        }
    }

    /// Wait for the process to exit by itself within `timeout`; its exit code.
    pub fn wait_exit(&mut self, timeout: Duration) -> Result<i32> {
        let c = self
            .child
            .as_mut()
            .ok_or_else(|| anyhow!("{} already reaped", self.name))?;
        let end = Instant::now() + timeout;
        loop {
            if let Some(st) = c.try_wait()? {
                self.child = None;
                return Ok(st.code().unwrap_or(-1));
            }
            if Instant::now() >= end {
                bail!(
                    "{} did not exit within {:.0}s; its log:\n{}",
                    self.name,
                    timeout.as_secs_f64(),
                    self.log_text()
                );
            }
            std::thread::sleep(Duration::from_millis(50));
        }
    }

    pub fn running(&mut self) -> bool {
        match self.child.as_mut() {
            Some(c) => matches!(c.try_wait(), Ok(None)),
            None => false,
        }
    }
}

impl Drop for Proc {
    fn drop(&mut self) {
        self.kill9();
    }
}

/// Run a command to completion (bounded), returning (exit code, stdout, stderr).
pub fn run_cmd(
    program: &Path,
    args: &[String],
    timeout: Duration,
) -> Result<(i32, String, String)> {
    let dir = tempfile::tempdir()?;
    let (o, e) = (dir.path().join("out"), dir.path().join("err"));
    let mut child = Command::new(program)
        .args(args)
        .stdin(Stdio::null())
        .stdout(File::create(&o)?)
        .stderr(File::create(&e)?)
        .spawn()
        .with_context(|| format!("spawning {}", program.display()))?;
    let end = Instant::now() + timeout;
    let code = loop {
        if let Some(st) = child.try_wait()? {
            break st.code().unwrap_or(-1);
        }
        if Instant::now() >= end {
            let _ = child.kill();
            let _ = child.wait();
            bail!(
                "{} {:?} did not finish within {:.0}s",
                program.display(),
                args,
                timeout.as_secs_f64()
            );
        }
        std::thread::sleep(Duration::from_millis(20));
    };
    Ok((
        code,
        std::fs::read_to_string(o)?,
        std::fs::read_to_string(e)?,
    ))
}

pub fn s(v: &[&str]) -> Vec<String> {
    v.iter().map(|x| x.to_string()).collect()
}

/// A coordinator data directory and, while serving, its process.
pub struct Coordinator {
    pub dir: PathBuf,
    pub port: u16,
    pub proc: Option<Proc>,
    pub public_key: String,
    pub serve_args: Vec<String>,
    starts: u32,
}

impl Coordinator {
    /// `init` a data directory under `root` and `serve` it on a free loopback port.
    /// `serve_args` are extra flags for `serve` (e.g. `--heartbeat-s 1`).
    pub fn start(root: &Path, serve_args: &[&str]) -> Result<Coordinator> {
        let dir = root.join("coordinator");
        let (code, out, err) = run_cmd(
            &bin("cubehunt-coordinator"),
            &s(&["init", "--data-dir", dir.to_str().unwrap()]),
            Duration::from_secs(60),
        )?;
        if code != 0 {
            bail!("coordinator init failed ({code}): {out}{err}");
        }
        let public_key = std::fs::read_to_string(dir.join("coordinator.pub"))
            .context("init should write coordinator.pub")?
            .trim()
            .to_string();
        let mut c = Coordinator {
            dir,
            port: free_port(),
            proc: None,
            public_key,
            serve_args: s(serve_args),
            starts: 0,
        };
        c.serve()?;
        Ok(c)
    }

    pub fn url(&self) -> String {
        format!("http://127.0.0.1:{}", self.port)
    }

    /// A second coordinator over the same store (`serve_args` name the shared database with
    /// `--database`): a copy of this one's data directory (same key and token) under `root`,
    /// served on a port of its own.
    pub fn replica(&self, root: &Path, serve_args: &[&str]) -> Result<Coordinator> {
        let dir = root.join("coordinator");
        std::fs::create_dir_all(&dir)?;
        for f in ["coordinator.key", "coordinator.pub", "admin.token"] {
            std::fs::copy(self.dir.join(f), dir.join(f)).with_context(|| format!("copying {f}"))?;
        }
        let mut c = Coordinator {
            dir,
            port: free_port(),
            proc: None,
            public_key: self.public_key.clone(),
            serve_args: s(serve_args),
            starts: 0,
        };
        c.serve()?;
        Ok(c)
    }

    /// `audit --data-dir DIR` with extra arguments (e.g. `--database URL`).
    pub fn audit_with(&self, extra: &[&str]) -> Result<CmdOutput> {
        let mut args = s(&["audit", "--data-dir", self.dir.to_str().unwrap()]);
        args.extend(s(extra));
        let (code, out, err) = run_cmd(
            &bin("cubehunt-coordinator"),
            &args,
            Duration::from_secs(300),
        )?;
        Ok(CmdOutput {
            code,
            text: format!("{out}{err}"),
        })
    }

    /// Start `serve` (again) on the same port and data directory; wait until it answers.
    pub fn serve(&mut self) -> Result<()> {
        self.starts += 1;
        let mut args = s(&[
            "serve",
            "--data-dir",
            self.dir.to_str().unwrap(),
            "--listen",
        ]);
        args.push(format!("127.0.0.1:{}", self.port));
        args.extend(self.serve_args.iter().cloned());
        let log = self
            .dir
            .parent()
            .unwrap()
            .join(format!("coordinator-{}.log", self.starts));
        let mut p = Proc::spawn("coordinator", &bin("cubehunt-coordinator"), &args, &log)?;
        let url = format!("{}/healthz", self.url());
        let http = reqwest::blocking::Client::builder()
            .timeout(Duration::from_secs(2))
            .build()?;
        let ok = wait_for(
            "the coordinator to answer /healthz",
            Duration::from_secs(30),
            || {
                if !p.running() {
                    return Some(false);
                }
                http.get(&url)
                    .send()
                    .ok()
                    .filter(|r| r.status().is_success())
                    .map(|_| true)
            },
        )?;
        if !ok {
            bail!(
                "the coordinator exited at start; its log:\n{}",
                p.log_text()
            );
        }
        self.proc = Some(p);
        Ok(())
    }

    pub fn kill9(&mut self) {
        if let Some(mut p) = self.proc.take() {
            p.kill9();
        }
    }

    pub fn log_text(&self) -> String {
        let mut out = String::new();
        for i in 1..=self.starts {
            let p = self
                .dir
                .parent()
                .unwrap()
                .join(format!("coordinator-{i}.log"));
            out.push_str(&std::fs::read_to_string(p).unwrap_or_default());
        }
        out
    }

    /// `campaign …` through the command line (URL and token read from the data directory).
    pub fn campaign(&self, args: &[&str]) -> Result<String> {
        let mut a = s(&[
            "campaign",
            "--data-dir",
            self.dir.to_str().unwrap(),
            "--url",
            &self.url(),
        ]);
        a.extend(s(args));
        let (code, out, err) = run_cmd(&bin("cubehunt-coordinator"), &a, Duration::from_secs(120))?;
        if code != 0 {
            bail!("campaign {args:?} failed ({code}): {out}{err}");
        }
        Ok(out)
    }

    pub fn create_campaign(
        &self,
        name: &str,
        ks: &str,
        bound: &str,
        unit_seconds: f64,
    ) -> Result<Value> {
        let us = unit_seconds.to_string();
        let out = self.campaign(&[
            "create",
            "--name",
            name,
            "--k",
            ks,
            "--bound",
            bound,
            "--unit-seconds",
            &us,
            "--json",
        ])?;
        serde_json::from_str(&out)
            .with_context(|| format!("campaign create --json printed {out:?}"))
    }

    pub fn show(&self, name: &str) -> Result<Value> {
        let out = self.campaign(&["show", name, "--json"])?;
        serde_json::from_str(&out).with_context(|| format!("campaign show --json printed {out:?}"))
    }

    pub fn get(&self, path: &str) -> Result<Value> {
        let r = reqwest::blocking::Client::builder()
            .timeout(Duration::from_secs(10))
            .build()?
            .get(format!("{}{path}", self.url()))
            .send()?;
        if !r.status().is_success() {
            bail!("GET {path}: {}", r.status());
        }
        Ok(r.json()?)
    }

    /// An admin `GET` with the token from the data directory.
    pub fn admin_get(&self, path: &str) -> Result<Value> {
        let token = std::fs::read_to_string(self.dir.join("admin.token"))?;
        let r = reqwest::blocking::Client::builder()
            .timeout(Duration::from_secs(10))
            .build()?
            .get(format!("{}{path}", self.url()))
            .bearer_auth(token.trim())
            .send()?;
        if !r.status().is_success() {
            bail!("GET {path}: {}", r.status());
        }
        Ok(r.json()?)
    }

    /// `audit --data-dir DIR` while the coordinator runs (`_name`: the campaign the caller cares about; the audit covers the whole store).
    pub fn audit(&self, _name: &str) -> Result<CmdOutput> {
        let (code, out, err) = run_cmd(
            &bin("cubehunt-coordinator"),
            &s(&["audit", "--data-dir", self.dir.to_str().unwrap()]),
            Duration::from_secs(300),
        )?;
        Ok(CmdOutput {
            code,
            text: format!("{out}{err}"),
        })
    }

    /// `/api/v1/workers`, keyed by worker id.
    pub fn workers(&self) -> Result<Vec<Value>> {
        // One page at a time, as the status page reads them.
        let mut all = Vec::new();
        loop {
            let after = all
                .last()
                .and_then(|w: &Value| w["id"].as_i64())
                .unwrap_or(0);
            let page = self
                .get(&format!("/api/v1/workers?after={after}&limit=1000"))?
                .as_array()
                .cloned()
                .unwrap_or_default();
            let last = page.len() < 1000;
            all.extend(page);
            if last {
                return Ok(all);
            }
        }
    }

    pub fn worker_view(&self, id: i64) -> Result<Value> {
        self.workers()?
            .into_iter()
            .find(|w| w["id"].as_i64() == Some(id))
            .ok_or_else(|| anyhow!("worker {id} not listed by /api/v1/workers"))
    }

    /// Wait until `campaign show` says `complete`; the final view.
    pub fn wait_complete(&self, name: &str, timeout: Duration) -> Result<Value> {
        let mut last = Value::Null;
        let r = wait_for(&format!("campaign {name} to complete"), timeout, || {
            let v = self.show(name).ok()?;
            let done = v["state"] == "complete";
            last = v.clone();
            done.then_some(v)
        });
        r.with_context(|| format!("last view: {last}"))
    }
}

impl Drop for Coordinator {
    fn drop(&mut self) {
        self.kill9();
    }
}

/// A `cubehunt-worker run` process with its own state directory.
pub struct Worker {
    pub owner: String,
    pub state: PathBuf,
    pub proc: Proc,
}

impl Worker {
    /// Start `run` against `coord` with `extra` flags (defaults: 1 thread, short backoff).
    pub fn start(root: &Path, coord_url: &str, owner: &str, extra: &[&str]) -> Result<Worker> {
        let state = root.join(format!("worker-{owner}"));
        Self::start_in(&state, coord_url, owner, extra)
    }

    pub fn start_in(state: &Path, coord_url: &str, owner: &str, extra: &[&str]) -> Result<Worker> {
        let mut args = s(&[
            "run",
            "--coordinator",
            coord_url,
            "--state-dir",
            state.to_str().unwrap(),
            "--owner",
            owner,
        ]);
        if !extra.contains(&"--threads") {
            args.extend(s(&["--threads", "1"]));
        }
        if !extra.contains(&"--max-backoff") {
            args.extend(s(&["--max-backoff", "2"]));
        }
        args.extend(s(extra));
        std::fs::create_dir_all(state.parent().unwrap())?;
        let log = state.with_extension("log");
        let proc = Proc::spawn(
            &format!("worker {owner}"),
            &bin("cubehunt-worker"),
            &args,
            &log,
        )?;
        Ok(Worker {
            owner: owner.to_string(),
            state: state.to_path_buf(),
            proc,
        })
    }

    pub fn log_text(&self) -> String {
        self.proc.log_text()
    }

    pub fn worker_id(&self) -> Option<i64> {
        let t = std::fs::read_to_string(self.state.join("worker.json")).ok()?;
        serde_json::from_str::<Value>(&t).ok()?["worker_id"].as_i64()
    }

    /// Names of the checkpointed chunk files of the lease in progress.
    pub fn chunk_files(&self) -> Vec<String> {
        let mut v: Vec<String> = std::fs::read_dir(self.state.join("lease"))
            .map(|d| {
                d.filter_map(|e| e.ok())
                    .map(|e| e.file_name().to_string_lossy().into_owned())
                    .filter(|n| n.starts_with("chunk-") && n.ends_with(".json"))
                    .collect()
            })
            .unwrap_or_default();
        v.sort();
        v
    }

    /// The stored grant of the lease in progress, if any.
    pub fn grant(&self) -> Option<Value> {
        let t = std::fs::read_to_string(self.state.join("lease/grant.json")).ok()?;
        serde_json::from_str(&t).ok()
    }
}

/// Lines of a log containing `needle`.
pub fn lines_with<'a>(log: &'a str, needle: &str) -> Vec<&'a str> {
    log.lines().filter(|l| l.contains(needle)).collect()
}

pub fn unix_now() -> i64 {
    SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .unwrap()
        .as_secs() as i64
}

// ---- a worker driven by hand ------------------------------------------------------------

/// The answer to one hand-made request.
/// A finished command: its exit code and everything it printed.
#[derive(Debug)]
pub struct CmdOutput {
    pub code: i32,
    pub text: String,
}

impl CmdOutput {
    pub fn ok(&self) -> bool {
        self.code == 0
    }
}

#[derive(Debug, Clone)]
pub struct Answer {
    pub status: u16,
    pub body: Value,
}

impl Answer {
    pub fn ok(&self) -> bool {
        (200..300).contains(&self.status)
    }
    pub fn error_code(&self) -> String {
        self.body["error"].as_str().unwrap_or("").to_string()
    }
}

/// A request exactly as it went on the wire, to send again verbatim.
#[derive(Debug, Clone)]
pub struct Wire {
    pub path: String,
    pub worker: String,
    pub time: String,
    pub nonce: String,
    pub signature: String,
    pub body: Vec<u8>,
}

/// A worker that speaks the protocol step by step, with `cubehunt_common::sign`, and can be
/// told to lie: the misbehaving volunteer of the fault tests. Not part of any product binary.
pub struct HandWorker {
    pub base: String,
    pub key: sign::SecretKey,
    pub worker_id: i64,
    pub coordinator_key: String,
    http: reqwest::blocking::Client,
}

impl HandWorker {
    pub fn enrol(base: &str, owner: &str) -> Result<HandWorker> {
        Self::enrol_with_key(base, owner, sign::generate())
    }

    /// Enrol with a given key (e.g. one read from a real worker's state directory).
    pub fn enrol_with_key(base: &str, owner: &str, key: sign::SecretKey) -> Result<HandWorker> {
        let http = reqwest::blocking::Client::builder()
            .timeout(Duration::from_secs(30))
            .build()?;
        let base = base.trim_end_matches('/').to_string();
        let about: Value = http.get(format!("{base}/api/v1/about")).send()?.json()?;
        let coordinator_key = about["coordinator_key"]
            .as_str()
            .ok_or_else(|| anyhow!("no coordinator key in {about}"))?
            .to_string();
        let mut w = HandWorker {
            base,
            key,
            worker_id: 0,
            coordinator_key,
            http,
        };
        let req = EnrolRequest {
            owner: owner.to_string(),
            public_key: sign::public_to_hex(&w.key.verifying_key()),
            kernel: KERNEL_VERSION.to_string(),
            threads: 2,
            label: format!("hand-{owner}"),
            invite: None,
        };
        let a = w.post("/api/v1/enrol", &serde_json::to_vec(&req)?)?;
        if !a.ok() {
            bail!("enrolment refused: {a:?}");
        }
        let r: EnrolResponse = serde_json::from_value(a.body)?;
        w.worker_id = r.worker_id;
        w.coordinator_key = r.coordinator_key;
        Ok(w)
    }

    /// Sign and build a request without sending it.
    pub fn prepare(&self, path: &str, body: &[u8]) -> Wire {
        let stamp = sign::Stamp::new(&self.coordinator_key, self.worker_id, unix_now());
        let sig = sign::sign(&self.key, &sign::request_bytes(&stamp, "POST", path, body));
        Wire {
            path: path.to_string(),
            worker: self.worker_id.to_string(),
            time: stamp.time.to_string(),
            nonce: stamp.nonce,
            signature: sig,
            body: body.to_vec(),
        }
    }

    pub fn send(&self, w: &Wire) -> Result<Answer> {
        let r = self
            .http
            .post(format!("{}{}", self.base, w.path))
            .header("content-type", "application/json")
            .header(sign::HDR_WORKER, &w.worker)
            .header(sign::HDR_TIME, &w.time)
            .header(sign::HDR_NONCE, &w.nonce)
            .header(sign::HDR_SIGNATURE, &w.signature)
            .body(w.body.clone())
            .send()?;
        let status = r.status().as_u16();
        let text = r.text()?;
        let body = serde_json::from_str(&text).unwrap_or(Value::String(text));
        Ok(Answer { status, body })
    }

    pub fn post(&self, path: &str, body: &[u8]) -> Result<Answer> {
        self.send(&self.prepare(path, body))
    }

    /// Ask for a lease once; the coordinator's answer as it came.
    pub fn lease_once(&self) -> Result<Answer> {
        self.post(
            "/api/v1/lease",
            &serde_json::to_vec(&LeaseRequest { threads: 1 })?,
        )
    }

    /// Ask for a lease, retrying while there is none, up to `timeout`.
    pub fn lease(&self, timeout: Duration) -> Result<LeaseGrant> {
        wait_for("a lease for the hand-driven worker", timeout, || {
            let a = self
                .post(
                    "/api/v1/lease",
                    &serde_json::to_vec(&LeaseRequest { threads: 1 }).ok()?,
                )
                .ok()?;
            if !a.ok() {
                return None;
            }
            let r: LeaseResponse = serde_json::from_value(a.body).ok()?;
            r.lease
        })
    }

    /// The coordinator's signature on a granted unit must verify with the key it gave us.
    pub fn check_unit(&self, g: &LeaseGrant) -> Result<()> {
        let k = sign::public_from_hex(&self.coordinator_key)?;
        sign::verify(&k, &g.unit.unit.canonical_bytes(), &g.unit.signature)
            .map_err(|e| anyhow!("unit signature: {e}"))
    }

    /// A signed report of the piece digests `pieces` (their sum is the unit's digest) and
    /// `solutions` for the grant.
    pub fn report_for(
        &self,
        g: &LeaseGrant,
        pieces: Vec<Digest>,
        solutions: Vec<Solution>,
    ) -> SignedReport {
        let u = &g.unit.unit;
        let report = Report {
            lease_id: g.lease_id,
            unit_id: u.unit_id,
            worker_id: self.worker_id,
            kernel: u.kernel.clone(),
            k: u.k,
            rect: u.rect,
            digest: pieces.iter().copied().sum(),
            pieces,
            solutions,
            elapsed_s: 0.0,
        };
        let signature = sign::sign(&self.key, &report.canonical_bytes());
        SignedReport { report, signature }
    }

    /// Prepare the request that posts `r` to its lease (to send now, or again later).
    pub fn prepare_report(&self, r: &SignedReport) -> Wire {
        self.prepare(
            &format!("/api/v1/lease/{}/report", r.report.lease_id),
            &serde_json::to_vec(r).unwrap(),
        )
    }

    pub fn release(&self, lease_id: i64) -> Result<Answer> {
        self.post(&format!("/api/v1/lease/{lease_id}/release"), b"{}")
    }
}

/// The honest result of a granted unit, computed here with the kernel piece by piece
/// (`common::pieces`): the piece digests and the solutions.
pub fn honest(g: &LeaseGrant) -> (Vec<Digest>, Vec<Solution>) {
    let u = &g.unit.unit;
    let mut digests = Vec::new();
    let mut sols = Vec::new();
    for p in cubehunt_common::pieces::of_unit(u) {
        let out = kernel::scan(u.k, &p, 1, &|_| {})
            .expect("the kernel scans a piece of a unit the coordinator planned");
        digests.push(out.digest);
        sols.extend(out.solutions.into_iter().filter(|s| s.in_rect(&u.rect)));
    }
    sols.sort();
    sols.dedup();
    (digests, sols)
}

/// Piece digests with the honest counts but invented survivor hashes: what a worker that
/// skipped the sieve, and guessed the easy numbers right, would report.
pub fn invented(pieces: &[Digest], salt: u64) -> Vec<Digest> {
    pieces
        .iter()
        .enumerate()
        .map(|(i, d)| Digest {
            hash: d.hash ^ (0x9e37_79b9_7f4a_7c15u64.wrapping_mul(salt.wrapping_add(i as u64 + 1))),
            ..*d
        })
        .collect()
}

/// Every solution of `x³+y³+z³ = k` with `max(|x|,|y|,|z|) ≤ m`, by brute force over `x ≤ y`
/// and an exact cube-root test for `z` (brute force; independent of the kernel).
pub fn brute_force_box(k: i64, m: i64) -> BTreeSet<Solution> {
    let mut out = BTreeSet::new();
    let k = k as i128;
    for x in -m..=m {
        for y in x..=m {
            let rest = k - (x as i128).pow(3) - (y as i128).pow(3);
            let z = icbrt(rest);
            if z.pow(3) == rest && z.abs() <= m as i128 && z >= y as i128 {
                out.insert(Solution::new(x as i128, y as i128, z));
            }
        }
    }
    out
}

/// Integer cube root rounding toward zero, exact for |n| < 2¹²⁰.
pub fn icbrt(n: i128) -> i128 {
    let a = n.unsigned_abs();
    let mut r = (a as f64).cbrt() as u128;
    while r > 0 && r.pow(3) > a {
        r -= 1;
    }
    while (r + 1).pow(3) <= a {
        r += 1;
    }
    if n < 0 {
        -(r as i128)
    } else {
        r as i128
    }
}

/// Every solution with `min(|x|,|y|,|z|) ≤ bound`, from the kernel run here over the three
/// regions' domains (what `solo` computes).
pub fn kernel_solutions(k: i64, bound: u64) -> BTreeSet<Solution> {
    let mut out = BTreeSet::new();
    for region in cubehunt_common::Region::ALL {
        if let Some(rect) = kernel::domain(k, bound, region) {
            let o = kernel::scan(k, &rect, 0, &|_| {}).expect("scan of a domain");
            out.extend(o.solutions);
        }
    }
    out
}

/// Solutions listed in a campaign view (`solutions`: arrays of three decimal strings).
pub fn view_solutions(v: &Value) -> BTreeSet<Solution> {
    v["solutions"]
        .as_array()
        .map(|a| {
            a.iter()
                .map(|t| {
                    let parts: Vec<String> = t
                        .as_array()
                        .unwrap()
                        .iter()
                        .map(|x| x.as_str().unwrap().to_string())
                        .collect();
                    Solution::parse(&parts).unwrap()
                })
                .collect()
        })
        .unwrap_or_default()
}

/// Solutions of one target of a campaign view.
pub fn target_solutions(v: &Value, k: i64) -> BTreeSet<Solution> {
    let t = v["targets"]
        .as_array()
        .and_then(|ts| ts.iter().find(|t| t["k"].as_i64() == Some(k)).cloned());
    t.map(|t| view_solutions(&t)).unwrap_or_default()
}
