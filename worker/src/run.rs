//! `cubehunt-worker run`: the volunteer loop.
//!
//! Enrol once (own Ed25519 key, owner name), then forever: deliver any report still waiting
//! for an answer, resume the checkpointed lease or ask for a new one, check the unit
//! (coordinator signature against the pinned key, kernel version, rectangle), compute it chunk
//! by chunk with [`cubehunt_common::kernel::scan`], checkpointing each chunk, heartbeat while
//! computing, and report the signed result.
//!
//! What it deliberately does not do: trust anything the network says without a signature it
//! can check, keep more than one lease, or decide how a unit is sieved (that is the kernel's).

mod client;
mod state;
pub(crate) mod sys;

use anyhow::{bail, Result};
use client::{Api, CallError};
use cubehunt_common::protocol::{
    EnrolRequest, HeartbeatRequest, LeaseGrant, LeaseRequest, MAX_OWNER_LEN,
};
use cubehunt_common::report::{Report, SignedReport};
use cubehunt_common::{kernel, pieces, sign, Digest, Solution, KERNEL_VERSION};
use rand::Rng;
use state::{ChunkResult, Enrolment, StateDir, StoredLease};
use std::cell::Cell;
use std::path::PathBuf;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::Arc;
use std::thread;
use std::time::{Duration, Instant};
use sys::event;

#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum)]
pub enum Priority {
    /// nice 19 and, on Linux, SCHED_IDLE: runs only when nothing else wants the CPU.
    Idle,
    /// Leave the scheduling priority as it was inherited.
    Normal,
}

/// Long help of `run` (also used by main.rs on the subcommand).
pub const LONG_ABOUT: &str = "Donate this machine's idle time to a cubehunt campaign.\n\n\
The worker makes its own Ed25519 key in --state-dir, enrols with the coordinator under \
--owner, and then loops: lease a unit, check it (signed by the pinned coordinator key, \
made for this kernel version, a valid rectangle), compute it chunk by chunk at idle \
priority, checkpointing every chunk, and send back a signed report. It heartbeats while it \
computes and backs off (exponentially, with jitter) while the coordinator is unreachable.\n\n\
Interrupting is safe at any moment. Ctrl-C or SIGTERM: the chunk in progress finishes, the \
lease is handed back, exit 0 (a second Ctrl-C quits at once). Even after kill -9 or a power \
cut, the next start resumes the same lease from its last finished chunk, and a finished \
report is kept until the coordinator has answered for it.";

pub const AFTER_HELP: &str = "STATE DIRECTORY (--state-dir):\n  \
worker.key         this worker's private key (mode 0600; keep it, it is the worker's identity)\n  \
worker.json        enrolment: worker id, owner, coordinator URL\n  \
coordinator.key    the pinned coordinator public key\n  \
lease/             the unit in progress: grant.json and one chunk-NNNNNN.json per finished chunk\n  \
outbox/            signed reports not yet acknowledged (sent again on the next start)\n  \
refused/           reports the coordinator refused, kept for the record\n\n\
EXAMPLES:\n  \
cubehunt-worker run --coordinator https://hunt.example.org --state-dir ~/.cubehunt --owner alice\n  \
cubehunt-worker run --coordinator http://127.0.0.1:8480 --state-dir /var/lib/cubehunt \\\n      \
--owner lab-3 --threads 2 --cpu-percent 50 --coordinator-key 3f1c...e9";

/// Donate this machine's idle time to a campaign.
#[derive(clap::Args, Debug, Clone)]
#[command(
    long_about = LONG_ABOUT,
    after_long_help = AFTER_HELP
)]
pub struct RunArgs {
    /// Base URL of the coordinator, e.g. http://127.0.0.1:8480
    #[arg(long, value_name = "URL")]
    pub coordinator: String,
    /// Directory for this worker's key, enrolment, checkpoints and unsent reports (created if missing).
    #[arg(long, value_name = "DIR")]
    pub state_dir: PathBuf,
    /// The volunteer this machine belongs to (1-64 of A-Z a-z 0-9 . _ -). The two leases of a
    /// unit always go to different owners.
    #[arg(long, value_name = "NAME")]
    pub owner: String,
    /// Compute threads; 0 means every core.
    #[arg(long, value_name = "N", default_value_t = 0)]
    pub threads: usize,
    /// The coordinator's public key (64 hex characters), as its operator published it. Without
    /// it the key seen at first contact is pinned; a later change is refused either way.
    #[arg(long, value_name = "HEX")]
    pub coordinator_key: Option<String>,
    /// Cap CPU use: each compute thread, after each piece of work, sleeps (100-P)/P times as
    /// long as the piece took, so it is busy about P% of the time (topped up between chunks).
    /// Combine with --threads to use fewer cores.
    #[arg(long, value_name = "P", default_value_t = 100, value_parser = clap::value_parser!(u32).range(1..=100))]
    pub cpu_percent: u32,
    /// Scheduling priority of the computation.
    #[arg(long, value_enum, default_value_t = Priority::Idle)]
    pub priority: Priority,
    /// Compute one unit, wait until its report is answered, then exit.
    #[arg(long)]
    pub once: bool,
    /// Exit after this many units have been computed and answered for.
    #[arg(long, value_name = "N")]
    pub max_units: Option<u64>,
    /// Longest wait between attempts while the coordinator is unreachable, in seconds.
    #[arg(long, value_name = "SECONDS", default_value_t = 300, value_parser = clap::value_parser!(u64).range(1..=86_400))]
    pub max_backoff: u64,
    /// Label shown in the coordinator's monitoring (default: the host name).
    #[arg(long, value_name = "TEXT")]
    pub label: Option<String>,
    /// The invitation the organiser gave you, when the coordinator enrols by invitation only
    /// (needed once, for the first enrolment of this state directory).
    #[arg(
        long,
        value_name = "TOKEN",
        env = "CUBEHUNT_INVITE",
        hide_env_values = true
    )]
    pub invite: Option<String>,
}

/// How a lease ended.
enum Outcome {
    /// Computed; the signed report is in the outbox.
    Finished,
    /// Interrupted by a signal; the checkpoint is on disk.
    Stopped(i64),
    /// The coordinator no longer wants it (expired, settled, cancelled).
    Withdrawn,
    /// We refused the unit (bad signature, wrong kernel, bad rectangle) and handed it back.
    Refused { bad_signature: bool },
}

/// Consecutive units not signed by the pinned key after which the worker gives up.
const MAX_BAD_SIGNATURES: u32 = 3;

pub fn run(args: RunArgs) -> Result<()> {
    validate(&args)?;
    // Before any thread exists: threads inherit the scheduling policy and nice value.
    let prio = if args.priority == Priority::Idle {
        sys::lower_priority()
    } else {
        vec![]
    };
    let stop = Arc::new(AtomicBool::new(false));
    for sig in [signal_hook::consts::SIGTERM, signal_hook::consts::SIGINT] {
        // A second signal while shutting down exits at once.
        signal_hook::flag::register_conditional_shutdown(sig, 130, Arc::clone(&stop))?;
        signal_hook::flag::register(sig, Arc::clone(&stop))?;
    }
    let threads = if args.threads == 0 {
        sys::cores()
    } else {
        args.threads
    };
    cautions(&args, threads, &prio);

    let state = StateDir::open(&args.state_dir)?;
    let (key, fresh) = state.load_or_create_key()?;
    if fresh {
        event!(
            "made a new worker key in {}",
            state.root().join("worker.key").display()
        );
    }
    let api = Api::new(&args.coordinator, key)?;
    let mut w = Worker {
        backoff: Backoff::new(args.max_backoff as f64),
        args,
        state,
        api,
        pinned: None,
        stop,
        threads,
    };
    w.main()
}

fn validate(a: &RunArgs) -> Result<()> {
    let o = &a.owner;
    if o.is_empty()
        || o.len() > MAX_OWNER_LEN
        || !o
            .bytes()
            .all(|b| b.is_ascii_alphanumeric() || matches!(b, b'.' | b'_' | b'-'))
    {
        bail!("--owner {o:?} is not a valid owner name: use 1-{MAX_OWNER_LEN} characters of A-Z a-z 0-9 . _ -");
    }
    if a.threads > 4096 {
        bail!(
            "--threads {} is more than any machine has; give the number of cores to use (0 = all)",
            a.threads
        );
    }
    if let Some(k) = &a.coordinator_key {
        sign::public_from_hex(k).map_err(|_| {
            anyhow::anyhow!("--coordinator-key {k:?} is not a public key: give the 64 hex characters the coordinator's `init` printed")
        })?;
    }
    if let Some(l) = &a.label {
        if l.len() > 64 {
            bail!("--label is {} characters long; keep it to 64", l.len());
        }
    }
    if a.max_units == Some(0) {
        bail!(
            "--max-units 0 would do nothing; give at least 1, or leave it out to run until stopped"
        );
    }
    Ok(())
}

fn cautions(a: &RunArgs, threads: usize, prio: &[String]) {
    let cores = sys::cores();
    event!(
        "starting: {threads} of {cores} cores, cpu cap {}%, priority {} ({}), kernel {KERNEL_VERSION}",
        a.cpu_percent,
        if a.priority == Priority::Idle { "idle" } else { "normal" },
        if prio.is_empty() { "unchanged".to_string() } else { prio.join(", ") }
    );
    eprintln!(
        "  Before donating this machine: full load makes it warmer and its fans louder, draws more power,\n  \
         and drains a battery fast (run laptops on mains). Cap it with --threads N and --cpu-percent P.\n  \
         Ctrl-C or SIGTERM stops safely: the current chunk is saved and the unit handed back."
    );
    if sys::on_battery() {
        event!("warning: this machine is running on battery; consider --cpu-percent 25 or stopping until it is plugged in");
    }
}

struct Worker {
    args: RunArgs,
    state: StateDir,
    api: Api,
    pinned: Option<sign::PublicKey>,
    stop: Arc<AtomicBool>,
    threads: usize,
    backoff: Backoff,
}

impl Worker {
    fn stopped(&self) -> bool {
        self.stop.load(Ordering::SeqCst)
    }

    /// Sleep up to `d`, waking early on a signal. False when stopped.
    fn nap(&self, d: Duration) -> bool {
        nap(&self.stop, d)
    }

    /// The key the coordinator presents (`GET /api/v1/about`) against the pinned one, pinning
    /// it on first contact. `Ok(false)`: asked to stop while waiting for an answer.
    fn check_presented_key(&mut self) -> Result<bool> {
        // Before any request in the worker's name: the key the coordinator presents. On first
        // contact it is pinned;
        // with a pinned key (from --coordinator-key or an earlier contact) it must match, or
        // nothing is sent in the worker's name.
        let about = loop {
            match self.api.about() {
                Ok(a) => break a,
                Err(e) => {
                    if !self.retry_later("asking the coordinator for its key", &e) {
                        return Ok(false);
                    }
                }
            }
        };
        let (got, key) = self.presented_key(&about.coordinator_key, "work for it")?;
        if self.pinned.is_none() {
            self.state.save_pinned_key(&got)?;
            self.pinned = Some(key);
            self.api.set_coordinator_key(&got);
            event!("pinned coordinator key {got} (first contact; pass --coordinator-key to check it instead)");
        }
        Ok(true)
    }

    /// A key the coordinator presents, parsed and compared with the pinned one (if any):
    /// a mismatch stops the worker, which refuses to do `refusing`.
    fn presented_key(&self, presented: &str, refusing: &str) -> Result<(String, sign::PublicKey)> {
        let got = presented.trim().to_ascii_lowercase();
        let key = sign::public_from_hex(&got).map_err(|_| {
            anyhow::anyhow!(
                "the coordinator presents {presented:?} as its key, which is not a public key"
            )
        })?;
        if let Some(p) = &self.pinned {
            if *p != key {
                bail!(
                    "COORDINATOR KEY MISMATCH: the coordinator at {} presents key {got}, but the pinned key is {}. \
                     Refusing to {refusing}. Either this is not your coordinator, or its key changed: verify with its operator.",
                    self.args.coordinator,
                    sign::public_to_hex(p)
                );
            }
        }
        Ok((got, key))
    }

    fn retry_later(&mut self, what: &str, e: &CallError) -> bool {
        let d = self.backoff.next();
        event!("backoff: {what}: {e}; retrying in {:.1}s", d.as_secs_f64());
        self.nap(d)
    }

    fn main(&mut self) -> Result<()> {
        self.pin_and_enrol()?;
        if self.stopped() {
            event!("stopped before enrolling; exiting");
            return Ok(());
        }
        let limit = if self.args.once {
            Some(1)
        } else {
            self.args.max_units
        };
        let mut finished: u64 = 0;
        let mut bad_signatures = 0u32;
        let mut idle_logged = false;
        loop {
            if self.stopped() {
                event!("stopping (signal); nothing in progress");
                return Ok(());
            }
            // 1. Nothing finished is ever lost: deliver what waits in the outbox first.
            match self.deliver_outbox()? {
                Ok(()) => {}
                Err(e) => {
                    if !self.retry_later("delivering a report", &e) {
                        event!("stopping (signal); the report stays in the outbox and is sent on the next start");
                        return Ok(());
                    }
                    continue;
                }
            }
            if limit.is_some_and(|l| finished >= l) {
                event!("done: {finished} unit(s) computed and reported; exiting");
                return Ok(());
            }
            // 2. Resume the checkpointed lease, or ask for a new one.
            let (stored, resumed) = match self.state.load_lease()? {
                Some(l) => (l, true),
                None => match self.api.lease(&LeaseRequest {
                    threads: self.threads as u32,
                }) {
                    Ok(r) => {
                        self.backoff.reset();
                        match r.lease {
                            Some(g) => {
                                idle_logged = false;
                                let plan = pieces::of_unit(&g.unit.unit);
                                (
                                    StoredLease {
                                        grant: g,
                                        chunks: plan,
                                        received_at: client::unix_now(),
                                    },
                                    false,
                                )
                            }
                            None => {
                                let wait = r.retry_after_s.clamp(1, 600) as f64
                                    * rand::thread_rng().gen_range(0.8..1.2);
                                if !idle_logged {
                                    event!(
                                        "no work available; asking again every ~{}s",
                                        r.retry_after_s.clamp(1, 600)
                                    );
                                    idle_logged = true;
                                }
                                self.nap(Duration::from_secs_f64(wait));
                                continue;
                            }
                        }
                    }
                    Err(CallError::Refused {
                        status,
                        error,
                        message,
                    }) => {
                        bail!("the coordinator refuses to lease units to this worker ({status} {error}): {message}")
                    }
                    Err(e) => {
                        self.retry_later("asking for a lease", &e);
                        continue;
                    }
                },
            };
            match self.work(stored, resumed)? {
                Outcome::Finished => {
                    finished += 1;
                    bad_signatures = 0;
                }
                Outcome::Withdrawn => {}
                Outcome::Refused { bad_signature } => {
                    if bad_signature {
                        bad_signatures += 1;
                        if bad_signatures >= MAX_BAD_SIGNATURES {
                            bail!(
                                "{bad_signatures} units in a row were NOT signed by the pinned coordinator key {}. \
                                 Either someone is forging units or the coordinator's key changed. Ask its operator; \
                                 if the key really changed, check the new one out of band and start a fresh \
                                 --state-dir with --coordinator-key NEW.",
                                sign::public_to_hex(self.pinned.as_ref().unwrap())
                            );
                        }
                    }
                    let d = self.backoff.next();
                    self.nap(d);
                }
                Outcome::Stopped(lease_id) => {
                    self.release_on_exit(lease_id);
                    return Ok(());
                }
            }
        }
    }

    /// Settle the coordinator key (flag, pinned file, first contact) and the enrolment.
    fn pin_and_enrol(&mut self) -> Result<()> {
        let stored = self.state.load_pinned_key()?;
        let flag = self
            .args
            .coordinator_key
            .as_ref()
            .map(|s| s.trim().to_ascii_lowercase());
        let pin_path = self.state.root().join("coordinator.key");
        match (&stored, &flag) {
            (Some(s), Some(f)) if s != f => bail!(
                "COORDINATOR KEY MISMATCH: --coordinator-key {f} differs from the key pinned in {} ({s}). \
                 Refusing to continue. If the coordinator's key really changed, verify the new key with its \
                 operator, then start with a fresh --state-dir.",
                pin_path.display()
            ),
            (None, Some(f)) => {
                self.state.save_pinned_key(f)?;
                event!("pinned coordinator key {f} (from --coordinator-key)");
            }
            _ => {}
        }
        let pinned_hex = self.state.load_pinned_key()?;
        self.pinned = pinned_hex
            .as_deref()
            .map(|h| sign::public_from_hex(h).expect("checked on load"));
        if let Some(h) = &pinned_hex {
            self.api.set_coordinator_key(h);
        }

        if let Some(e) = self.state.load_enrolment()? {
            if e.owner != self.args.owner {
                bail!(
                    "the state directory {} belongs to owner {:?}, not {:?}. Use --owner {} with it, or give the \
                     new owner its own --state-dir.",
                    self.state.root().display(),
                    e.owner,
                    self.args.owner,
                    e.owner
                );
            }
            if e.public_key != self.api.public_key_hex() {
                bail!(
                    "{} was written for another key than {}; the state directory is inconsistent. Start with a fresh --state-dir.",
                    self.state.root().join("worker.json").display(),
                    self.state.root().join("worker.key").display()
                );
            }
            if self.pinned.is_none() {
                bail!(
                    "enrolled as worker {} but {} is missing; restore it, or pass --coordinator-key HEX.",
                    e.worker_id,
                    pin_path.display()
                );
            }
            if e.coordinator.trim_end_matches('/') != self.args.coordinator.trim_end_matches('/') {
                event!(
                    "note: enrolled at {} and now talking to {}; the pinned key still decides which units are accepted",
                    e.coordinator,
                    self.args.coordinator
                );
            }
            if !self.check_presented_key()? {
                return Ok(());
            }
            self.api.set_worker_id(e.worker_id);
            event!(
                "worker {} (owner {}) at {}",
                e.worker_id,
                e.owner,
                self.args.coordinator
            );
            return Ok(());
        }

        if !self.check_presented_key()? {
            return Ok(());
        }
        let req = EnrolRequest {
            owner: self.args.owner.clone(),
            public_key: self.api.public_key_hex(),
            kernel: KERNEL_VERSION.to_string(),
            threads: self.threads as u32,
            label: self.args.label.clone().unwrap_or_else(sys::hostname),
            invite: self.args.invite.clone(),
        };
        let resp = loop {
            match self.api.enrol(&req) {
                Ok(r) => break r,
                Err(CallError::Refused {
                    status,
                    error,
                    message,
                }) => {
                    bail!("the coordinator refused the enrolment ({status} {error}): {message}")
                }
                Err(e) => {
                    if !self.retry_later("enrolling", &e) {
                        return Ok(());
                    }
                }
            }
        };
        self.backoff.reset();
        assert!(self.pinned.is_some(), "pinned before enrolling");
        self.presented_key(&resp.coordinator_key, "enrol")?;
        if resp.worker_id <= 0 {
            bail!(
                "the coordinator answered the enrolment with worker id {}, which is not valid",
                resp.worker_id
            );
        }
        self.state.save_enrolment(&Enrolment {
            worker_id: resp.worker_id,
            owner: self.args.owner.clone(),
            coordinator: self.args.coordinator.clone(),
            public_key: self.api.public_key_hex(),
        })?;
        self.api.set_worker_id(resp.worker_id);
        event!(
            "enrolled as worker {} (owner {}) at {}",
            resp.worker_id,
            self.args.owner,
            self.args.coordinator
        );
        Ok(())
    }

    /// Why a unit must not be computed, if it must not.
    fn check_grant(&self, g: &LeaseGrant) -> std::result::Result<(), (String, bool)> {
        let u = &g.unit.unit;
        let pinned = self.pinned.as_ref().expect("pinned before leasing");
        if sign::verify(pinned, &u.canonical_bytes(), &g.unit.signature).is_err() {
            return Err((
                "it is NOT signed by the pinned coordinator key".to_string(),
                true,
            ));
        }
        if u.kernel != KERNEL_VERSION {
            return Err((
                format!(
                    "it was made for kernel {:?} and this worker runs {KERNEL_VERSION:?}",
                    u.kernel
                ),
                false,
            ));
        }
        kernel::check_target(u.k).map_err(|e| (e.to_string(), false))?;
        kernel::check_rect(u.k, &u.rect).map_err(|e| (e.to_string(), false))?;
        Ok(())
    }

    fn work(&mut self, mut stored: StoredLease, resumed: bool) -> Result<Outcome> {
        let lease_id = stored.grant.lease_id;
        let unit = stored.grant.unit.unit.clone();
        if let Err((why, bad_signature)) = self.check_grant(&stored.grant) {
            event!(
                "refused unit {} (lease {lease_id}): {why}; handing it back",
                unit.unit_id
            );
            if let Err(e) = self.api.release(lease_id) {
                event!("could not hand back lease {lease_id}: {e}");
            }
            self.state.clear_lease()?;
            return Ok(Outcome::Refused { bad_signature });
        }
        // The pieces are a function of the unit (`common::pieces`); recomputed so that a stored
        // plan is never trusted. Each piece is one checkpointed chunk, and the report commits
        // to every piece's digest.
        let plan = pieces::of_unit(&unit);
        stored.chunks = plan.clone();
        if !resumed {
            self.state.begin_lease(&stored)?;
        }
        let mut done = self.state.load_chunks(lease_id, &plan)?;
        let n = plan.len();
        let have = done.iter().filter(|c| c.is_some()).count();
        if resumed {
            event!(
                "resuming lease {lease_id} (unit {}): {have}/{n} chunks already done",
                unit.unit_id
            );
            match self.api.heartbeat(
                lease_id,
                &HeartbeatRequest {
                    progress: have as f64 / n as f64,
                },
            ) {
                Ok(r) if !r.keep_going => {
                    event!("lease {lease_id} is no longer valid at the coordinator; dropping its checkpoint");
                    self.state.clear_lease()?;
                    return Ok(Outcome::Withdrawn);
                }
                Err(CallError::Refused {
                    status,
                    error,
                    message,
                }) => {
                    event!("lease {lease_id} refused by the coordinator ({status} {error}: {message}); dropping its checkpoint");
                    self.state.clear_lease()?;
                    return Ok(Outcome::Withdrawn);
                }
                Err(e) => event!("heartbeat for lease {lease_id} failed ({e}); computing on"),
                Ok(_) => {}
            }
        } else {
            event!(
                "leased unit {} (lease {lease_id}): k={} {} cost {}, {n} chunk(s), deadline in {}s",
                unit.unit_id,
                unit.k,
                unit.rect,
                unit.cost,
                stored.grant.deadline - client::unix_now()
            );
        }

        let progress = Arc::new(AtomicU64::new((have as f64 / n as f64).to_bits()));
        let heart = Heart::start(
            self.api.clone(),
            lease_id,
            stored.grant.heartbeat_s.clamp(1, 3600),
            Arc::clone(&progress),
        );
        let throttle = Throttle::new(self.args.cpu_percent, Arc::clone(&self.stop));
        let mut kernel_error = None;
        for (i, rect) in plan.iter().enumerate() {
            if done[i].is_some() {
                continue;
            }
            if self.stopped() || heart.withdrawn() {
                break;
            }
            throttle.begin_chunk();
            let t0 = Instant::now();
            let cb = |_c: u64| throttle.on_progress();
            match kernel::scan(unit.k, rect, self.threads, &cb) {
                Ok(out) => {
                    let elapsed = t0.elapsed().as_secs_f64();
                    for s in &out.solutions {
                        event!("lease {lease_id}: found solution {s} of k={}", unit.k);
                    }
                    let c = ChunkResult {
                        lease_id,
                        index: i,
                        rect: *rect,
                        digest: out.digest,
                        solutions: out.solutions,
                        elapsed_s: elapsed,
                    };
                    self.state.save_chunk(&c)?;
                    event!(
                        "lease {lease_id}: chunk {}/{n} done in {elapsed:.1}s (candidates {}, survivors {})",
                        i + 1,
                        c.digest.candidates,
                        c.digest.survivors
                    );
                    done[i] = Some(c);
                    let fraction = done.iter().filter(|c| c.is_some()).count() as f64 / n as f64;
                    progress.store(fraction.to_bits(), Ordering::Relaxed);
                    throttle.end_chunk(t0.elapsed(), self.threads);
                }
                Err(e) => {
                    kernel_error = Some(e);
                    break;
                }
            }
        }
        let withdrawn = heart.finish();
        if let Some(e) = kernel_error {
            event!(
                "refused unit {} (lease {lease_id}): the kernel rejects it: {e}; handing it back",
                unit.unit_id
            );
            if let Err(e) = self.api.release(lease_id) {
                event!("could not hand back lease {lease_id}: {e}");
            }
            self.state.clear_lease()?;
            return Ok(Outcome::Refused {
                bad_signature: false,
            });
        }
        if withdrawn {
            event!("lease {lease_id} withdrawn by the coordinator; dropping its checkpoint");
            self.state.clear_lease()?;
            return Ok(Outcome::Withdrawn);
        }
        if done.iter().any(|c| c.is_none()) {
            return Ok(Outcome::Stopped(lease_id));
        }

        let results: Vec<ChunkResult> = done.into_iter().map(|c| c.expect("all present")).collect();
        let digest: Digest = results.iter().map(|c| c.digest).sum();
        // A report lists the solutions that belong to its unit (smallest coordinate inside
        // it, `Solution::in_rect`); the kernel also meets others through a larger coordinate,
        // and those belong to other units.
        let mut solutions: Vec<Solution> = results
            .iter()
            .flat_map(|c| c.solutions.iter().copied())
            .filter(|s| s.in_rect(&unit.rect))
            .collect();
        solutions.sort();
        solutions.dedup();
        let elapsed_s: f64 = results.iter().map(|c| c.elapsed_s).sum();
        let report = Report {
            lease_id,
            unit_id: unit.unit_id,
            worker_id: self.api.worker_id(),
            kernel: KERNEL_VERSION.to_string(),
            k: unit.k,
            rect: unit.rect,
            digest,
            pieces: results.iter().map(|c| c.digest).collect(),
            solutions,
            elapsed_s,
        };
        let signature = sign::sign(self.api.key(), &report.canonical_bytes());
        // Outbox first, then forget the checkpoint: a kill in between recomputes nothing
        // (all chunks are on disk) and writes the same report again.
        self.state.save_outbox(&SignedReport {
            report: report.clone(),
            signature,
        })?;
        self.state.clear_lease()?;
        event!(
            "finished unit {} (lease {lease_id}): digest {digest}, {} solution(s), {elapsed_s:.1}s of compute",
            unit.unit_id,
            report.solutions.len()
        );
        Ok(Outcome::Finished)
    }

    /// Send every waiting report. `Ok(Err(e))`: the coordinator could not be reached (retry later).
    fn deliver_outbox(&mut self) -> Result<std::result::Result<(), CallError>> {
        for r in self.state.outbox()? {
            let lease_id = r.report.lease_id;
            match self.api.report(&r) {
                Ok(a) => {
                    self.backoff.reset();
                    self.state.acknowledge(lease_id)?;
                    event!(
                        "reported unit {} (lease {lease_id}): {}; unit is {}",
                        r.report.unit_id,
                        if a.accepted {
                            "accepted"
                        } else {
                            "already stored"
                        },
                        a.unit_state
                    );
                }
                Err(CallError::Refused {
                    status,
                    error,
                    message,
                }) => {
                    let kept = self.state.set_aside(lease_id)?;
                    event!(
                        "coordinator refused the report for lease {lease_id} ({status} {error}: {message}); kept in {}",
                        kept.display()
                    );
                }
                Err(e) => return Ok(Err(e)),
            }
        }
        Ok(Ok(()))
    }

    fn release_on_exit(&mut self, lease_id: i64) {
        match self.api.release(lease_id) {
            Ok(_) | Err(CallError::Refused { .. }) => {
                let _ = self.state.clear_lease();
                event!("stopping (signal): handed back lease {lease_id}; exiting");
            }
            Err(e) => event!(
                "stopping (signal): could not hand back lease {lease_id} ({e}); its checkpoint stays in {} and is resumed on the next start",
                self.state.root().join("lease").display()
            ),
        }
    }
}

fn nap(stop: &AtomicBool, d: Duration) -> bool {
    let end = Instant::now() + d;
    loop {
        if stop.load(Ordering::SeqCst) {
            return false;
        }
        let now = Instant::now();
        if now >= end {
            return true;
        }
        thread::sleep((end - now).min(Duration::from_millis(100)));
    }
}

/// Exponential backoff with jitter: waits uniformly in `[t/2, t]`, `t` doubling from 1 s up to the cap.
struct Backoff {
    next: f64,
    cap: f64,
}

impl Backoff {
    fn new(cap: f64) -> Backoff {
        Backoff { next: 1.0, cap }
    }
    fn next(&mut self) -> Duration {
        let t = self.next.min(self.cap);
        self.next = (self.next * 2.0).min(self.cap);
        Duration::from_secs_f64(rand::thread_rng().gen_range(t / 2.0..=t))
    }
    fn reset(&mut self) {
        self.next = 1.0;
    }
}

/// The heartbeat thread of one lease.
struct Heart {
    handle: Option<thread::JoinHandle<()>>,
    done: Arc<AtomicBool>,
    withdrawn: Arc<AtomicBool>,
}

impl Heart {
    fn start(api: Api, lease_id: i64, every_s: u64, progress: Arc<AtomicU64>) -> Heart {
        let done = Arc::new(AtomicBool::new(false));
        let withdrawn = Arc::new(AtomicBool::new(false));
        let (d, w) = (Arc::clone(&done), Arc::clone(&withdrawn));
        let handle = thread::spawn(move || {
            let mut failing = false;
            while nap(&d, Duration::from_secs(every_s)) {
                let p = f64::from_bits(progress.load(Ordering::Relaxed));
                match api.heartbeat(lease_id, &HeartbeatRequest { progress: p }) {
                    Ok(r) if !r.keep_going => {
                        event!("heartbeat: the coordinator says stop work on lease {lease_id}");
                        w.store(true, Ordering::SeqCst);
                        return;
                    }
                    Ok(_) => {
                        if failing {
                            event!("heartbeat for lease {lease_id} reaches the coordinator again");
                            failing = false;
                        }
                    }
                    Err(CallError::Refused {
                        status,
                        error,
                        message,
                    }) => {
                        event!(
                            "heartbeat for lease {lease_id} refused ({status} {error}: {message})"
                        );
                        w.store(true, Ordering::SeqCst);
                        return;
                    }
                    Err(e) => {
                        if !failing {
                            event!("heartbeat for lease {lease_id} failed ({e}); computing on");
                            failing = true;
                        }
                    }
                }
            }
        });
        Heart {
            handle: Some(handle),
            done,
            withdrawn,
        }
    }
    fn withdrawn(&self) -> bool {
        self.withdrawn.load(Ordering::SeqCst)
    }
    /// Stop the thread; whether the coordinator withdrew the lease.
    fn finish(mut self) -> bool {
        self.done.store(true, Ordering::SeqCst);
        if let Some(h) = self.handle.take() {
            let _ = h.join();
        }
        self.withdrawn()
    }
}

/// The CPU cap: per-thread sleeps in the kernel's progress callback, topped up between chunks.
struct Throttle {
    percent: u32,
    generation: AtomicU64,
    slept_ns: AtomicU64,
    stop: Arc<AtomicBool>,
}

thread_local! {
    /// (chunk generation, end of this thread's last sleep)
    static LAST_WAKE: Cell<(u64, Option<Instant>)> = const { Cell::new((0, None)) };
}

impl Throttle {
    fn new(percent: u32, stop: Arc<AtomicBool>) -> Throttle {
        Throttle {
            percent,
            generation: AtomicU64::new(0),
            slept_ns: AtomicU64::new(0),
            stop,
        }
    }
    fn ratio(&self) -> f64 {
        (100 - self.percent) as f64 / self.percent as f64
    }
    fn begin_chunk(&self) {
        self.generation.fetch_add(1, Ordering::SeqCst);
        self.slept_ns.store(0, Ordering::SeqCst);
    }
    fn on_progress(&self) {
        if self.percent >= 100 {
            return;
        }
        let g = self.generation.load(Ordering::Relaxed);
        LAST_WAKE.with(|c| {
            let (lg, last) = c.get();
            if let (true, Some(prev)) = (lg == g, last) {
                let busy = prev.elapsed();
                let d = busy.mul_f64(self.ratio()).min(Duration::from_secs(10));
                nap(&self.stop, d);
                self.slept_ns
                    .fetch_add(d.as_nanos() as u64, Ordering::Relaxed);
            }
            c.set((g, Some(Instant::now())));
        });
    }
    /// After a chunk: sleep whatever the callbacks did not, so the average holds even when
    /// the kernel reports progress rarely.
    fn end_chunk(&self, wall: Duration, threads: usize) {
        if self.percent >= 100 {
            return;
        }
        let slept =
            Duration::from_nanos(self.slept_ns.load(Ordering::SeqCst) / threads.max(1) as u64);
        let busy = wall.saturating_sub(slept);
        let want = busy.mul_f64(self.ratio());
        if want > slept {
            nap(&self.stop, want - slept);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn backoff_doubles_with_jitter_up_to_the_cap() {
        let mut b = Backoff::new(8.0);
        let waits: Vec<f64> = (0..6).map(|_| b.next().as_secs_f64()).collect();
        for (w, t) in waits.iter().zip([1.0, 2.0, 4.0, 8.0, 8.0, 8.0]) {
            assert!(*w >= t / 2.0 && *w <= t, "{waits:?}");
        }
        b.reset();
        assert!(b.next().as_secs_f64() <= 1.0);
    }

    #[test]
    fn nap_wakes_on_stop() {
        let stop = AtomicBool::new(true);
        let t = Instant::now();
        assert!(!nap(&stop, Duration::from_secs(5)));
        assert!(t.elapsed() < Duration::from_secs(1));
    }
}
