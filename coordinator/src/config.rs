//! Service settings of `serve` (command-line flags, each with an environment variable).

use crate::lifecycle::Rules;
use crate::store::LeasePolicy;
use clap::Args;

/// How new workers may enrol.
#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum)]
pub enum Enrolment {
    /// Anyone with the coordinator's address may enrol a worker under any owner name.
    Open,
    /// A new worker needs an invitation issued by the organiser (`invite create`), which
    /// fixes its owner.
    Invite,
}

impl Enrolment {
    pub fn as_str(self) -> &'static str {
        match self {
            Enrolment::Open => "open",
            Enrolment::Invite => "invite",
        }
    }
}

/// Settings of the running service. Defaults suit a campaign of thousands of workers.
#[derive(Clone, Debug, Args)]
pub struct ServiceConfig {
    /// The store: empty for the SQLite file in the data directory (the default), or a
    /// PostgreSQL URL such as postgres://cubehunt@db.internal:5432/cubehunt (several
    /// coordinators may share one PostgreSQL database; the key and token stay in the data
    /// directory, which every replica needs a copy of).
    #[arg(
        long,
        env = "CUBEHUNT_DATABASE",
        default_value = "",
        hide_env_values = true
    )]
    pub database: String,
    /// Workers must heartbeat at least this often (seconds); a heartbeat extends the lease to
    /// three times this from now, within the lease's limit.
    #[arg(long, env = "CUBEHUNT_HEARTBEAT_S", default_value_t = 60)]
    pub heartbeat_s: u64,
    /// Shortest lease deadline (seconds from hand-out).
    #[arg(long, env = "CUBEHUNT_LEASE_FLOOR_S", default_value_t = 300)]
    pub lease_floor_s: u64,
    /// Longest lease deadline (seconds from hand-out).
    #[arg(long, env = "CUBEHUNT_LEASE_CEILING_S", default_value_t = 7 * 86400)]
    pub lease_ceiling_s: u64,
    /// A lease lasts this many times the unit's expected time on the worker.
    #[arg(long, env = "CUBEHUNT_DEADLINE_FACTOR", default_value_t = 4.0)]
    pub deadline_factor: f64,
    /// Heartbeats extend a lease to at most this many times the unit's expected time on the
    /// worker, from hand-out (then it expires however often the worker calls).
    #[arg(long, env = "CUBEHUNT_LEASE_LIMIT_FACTOR", default_value_t = 12.0)]
    pub lease_limit_factor: f64,
    /// Outvoted reports after which a worker is quarantined (a report proven wrong by the
    /// organiser's own computation quarantines at once).
    #[arg(long, env = "CUBEHUNT_QUARANTINE_AFTER", default_value_t = 3)]
    pub quarantine_after: u32,
    /// A report proven wrong quarantines every worker of its owner, not only its own.
    #[arg(long, env = "CUBEHUNT_QUARANTINE_OWNER", default_value_t = true, action = clap::ArgAction::Set)]
    pub quarantine_owner: bool,
    /// Pieces of every report that the coordinator recomputes itself. A report that invented
    /// a share q of its unit escapes with probability (1 − q)^N.
    #[arg(long, env = "CUBEHUNT_SPOT_CHECKS", default_value_t = 2, value_parser = clap::value_parser!(u32).range(0..=64))]
    pub spot_checks: u32,
    /// Share of units (0 to 1) that the organiser's side recomputes in full; drawn at random
    /// when a campaign is planned and never shown to workers.
    #[arg(long, env = "CUBEHUNT_RECHECK_SHARE", default_value_t = 0.02, value_parser = parse_share)]
    pub recheck_share: f64,
    /// Counted reports a unit takes without agreement before the organiser's side
    /// recomputes it.
    #[arg(long, env = "CUBEHUNT_MAX_REPORTS", default_value_t = 5, value_parser = clap::value_parser!(u32).range(2..=100))]
    pub max_reports: u32,
    /// Reports confirmed by the organiser's own computation that a new worker needs before
    /// it gets ordinary units (0: no probation).
    #[arg(long, env = "CUBEHUNT_PROBATION_REPORTS", default_value_t = 2)]
    pub probation_reports: u32,
    /// Most active leases of one worker, per thread it runs.
    #[arg(long, env = "CUBEHUNT_LEASES_PER_THREAD", default_value_t = 2, value_parser = clap::value_parser!(u32).range(1..=64))]
    pub leases_per_thread: u32,
    /// Most active leases of one owner, over all its workers.
    #[arg(long, env = "CUBEHUNT_LEASES_PER_OWNER", default_value_t = 256, value_parser = clap::value_parser!(u32).range(1..))]
    pub leases_per_owner: u32,
    /// An offer (a unit's further lease reserved for a randomly drawn worker) lapses after
    /// this many seconds if the worker has not asked for work.
    #[arg(long, env = "CUBEHUNT_OFFER_S", default_value_t = 120)]
    pub offer_s: u64,
    /// Workers seen within this many seconds can be drawn for offers.
    #[arg(long, env = "CUBEHUNT_ACTIVE_WINDOW_S", default_value_t = 900)]
    pub active_window_s: u64,
    /// How new workers may enrol.
    #[arg(long, env = "CUBEHUNT_ENROLMENT", value_enum, default_value_t = Enrolment::Open)]
    pub enrolment: Enrolment,
    /// Threads the coordinator spends on its own computations (spot checks and rechecks), at
    /// idle priority. 0: none (then only workers marked trusted can do them, and a target's
    /// certificate waits until they have).
    #[arg(long, env = "CUBEHUNT_CHECKER_THREADS", default_value_t = 1, value_parser = clap::value_parser!(u32).range(0..=256))]
    pub checker_threads: u32,
    /// Also require the leases of one unit to come from different network prefixes
    /// (/24 for IPv4, /48 for IPv6).
    #[arg(long, env = "CUBEHUNT_DISTINCT_PREFIX", default_value_t = false)]
    pub distinct_prefix: bool,
    /// Seconds between sweeps that expire overdue leases and draw offers.
    #[arg(long, env = "CUBEHUNT_SWEEP_S", default_value_t = 30)]
    pub sweep_s: u64,
    /// Most units one campaign may plan (creation or extension).
    #[arg(long, env = "CUBEHUNT_MAX_UNITS", default_value_t = 2_000_000)]
    pub max_units: u64,
    /// Seconds a worker is told to wait when there is nothing to lease.
    #[arg(long, env = "CUBEHUNT_RETRY_AFTER_S", default_value_t = 30)]
    pub retry_after_s: u64,
    /// Seconds a client has to send a request's headers once it starts one (or after the
    /// previous response on a kept-alive connection); then the connection is closed.
    #[arg(long, env = "CUBEHUNT_HEADER_TIMEOUT_S", default_value_t = 10, value_parser = clap::value_parser!(u64).range(1..=3600))]
    pub header_timeout_s: u64,
    /// Seconds a client has to send a request's body; a body that stalls longer is refused
    /// (400) and nothing of it is used.
    #[arg(long, env = "CUBEHUNT_BODY_TIMEOUT_S", default_value_t = 30, value_parser = clap::value_parser!(u64).range(1..=3600))]
    pub body_timeout_s: u64,
    /// Most open connections at once; further ones wait in the operating system's queue
    /// until one closes.
    #[arg(long, env = "CUBEHUNT_MAX_CONNECTIONS", default_value_t = 1024, value_parser = clap::value_parser!(u32).range(1..=1_000_000))]
    pub max_connections: u32,
    /// Most requests handled at once over all connections; beyond it a request is answered
    /// 503 with Retry-After at once.
    #[arg(long, env = "CUBEHUNT_MAX_IN_FLIGHT", default_value_t = 256, value_parser = clap::value_parser!(u32).range(1..=1_000_000))]
    pub max_in_flight: u32,
    /// Requests per second allowed from one client address, on average (0: no limit). The
    /// count lives in this process's memory only. Behind a reverse proxy every client has the
    /// proxy's address, so this is a limit on all clients together there.
    #[arg(long, env = "CUBEHUNT_RATE_PER_S", default_value_t = 100)]
    pub rate_per_s: u32,
    /// Requests one client address may send in a burst above `rate_per_s` before being
    /// answered 429 with Retry-After.
    #[arg(long, env = "CUBEHUNT_RATE_BURST", default_value_t = 1000, value_parser = clap::value_parser!(u32).range(1..))]
    pub rate_burst: u32,
}

fn parse_share(s: &str) -> Result<f64, String> {
    let v: f64 = s
        .trim()
        .parse()
        .map_err(|_| format!("{s:?} is not a number between 0 and 1"))?;
    if !(0.0..=1.0).contains(&v) {
        return Err(format!("{v} is not between 0 and 1"));
    }
    Ok(v)
}

impl Default for ServiceConfig {
    fn default() -> Self {
        use clap::Parser;
        #[derive(Parser)]
        struct P {
            #[command(flatten)]
            c: ServiceConfig,
        }
        P::parse_from(["x"]).c
    }
}

impl ServiceConfig {
    /// Seconds a lease is extended to by a heartbeat.
    pub fn heartbeat_grace_s(&self) -> i64 {
        3 * self.heartbeat_s.max(1) as i64
    }

    /// The rules of the unit lifecycle under these settings.
    pub fn rules(&self) -> Rules {
        Rules {
            spot_checks: self.spot_checks,
            max_reports: self.max_reports,
            quarantine_after: self.quarantine_after.max(1),
            quarantine_owner: self.quarantine_owner,
            probation_reports: self.probation_reports,
            leases_per_thread: self.leases_per_thread,
            leases_per_owner: self.leases_per_owner,
        }
    }

    /// Hand-out and deadline settings.
    pub fn policy(&self) -> LeasePolicy {
        LeasePolicy {
            rules: self.rules(),
            deadline_factor: self.deadline_factor,
            limit_factor: self.lease_limit_factor.max(self.deadline_factor),
            floor_s: self.lease_floor_s as i64,
            ceiling_s: self.lease_ceiling_s as i64,
            grace_s: self.heartbeat_grace_s(),
            offer_s: self.offer_s as i64,
            active_window_s: self.active_window_s as i64,
            ask_window_s: (3 * self.retry_after_s as i64)
                .clamp(5, (self.active_window_s as i64).max(5)),
            distinct_prefix: self.distinct_prefix,
            ..LeasePolicy::default()
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    #[test]
    fn deadline_has_floor_factor_limit_and_ceiling() {
        let p = ServiceConfig::default().policy();
        assert_eq!(p.times(1000, 1_000_000, None), (1300, 1300)); // 1 s of work: the floor
        assert_eq!(p.times(0, 600_000_000, None), (2400, 7200)); // 600 s × 4, × 12
        assert_eq!(p.times(0, 600_000_000, Some(2.0)), (1200, 3600)); // twice as fast
        assert_eq!(p.times(0, u64::MAX / 2, Some(1e-9)), (7 * 86400, 7 * 86400));
        let c = ServiceConfig::default();
        assert_eq!((c.spot_checks, c.enrolment), (2, Enrolment::Open));
        assert!(parse_share("1.5").is_err() && parse_share("x").is_err());
        assert_eq!(parse_share("0.25").unwrap(), 0.25);
    }
}
