//! Service settings of `serve` (command-line flags, each with an environment variable).

use clap::Args;

/// Settings of the running service. Defaults suit a small fleet.
#[derive(Clone, Debug, Args)]
pub struct ServiceConfig {
    /// Workers must heartbeat at least this often (seconds); a heartbeat extends the lease to
    /// three times this from now.
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
    /// Wrong reports after which a worker is quarantined.
    #[arg(long, env = "CUBEHUNT_QUARANTINE_AFTER", default_value_t = 3)]
    pub quarantine_after: u32,
    /// Also require the leases of one unit to come from different network prefixes
    /// (/24 for IPv4, /48 for IPv6).
    #[arg(long, env = "CUBEHUNT_DISTINCT_PREFIX", default_value_t = false)]
    pub distinct_prefix: bool,
    /// Seconds between sweeps that expire overdue leases.
    #[arg(long, env = "CUBEHUNT_SWEEP_S", default_value_t = 30)]
    pub sweep_s: u64,
    /// Most units one campaign may plan (creation or extension).
    #[arg(long, env = "CUBEHUNT_MAX_UNITS", default_value_t = 2_000_000)]
    pub max_units: u64,
    /// Seconds a worker is told to wait when there is nothing to lease.
    #[arg(long, env = "CUBEHUNT_RETRY_AFTER_S", default_value_t = 30)]
    pub retry_after_s: u64,
}

impl Default for ServiceConfig {
    fn default() -> Self {
        ServiceConfig {
            heartbeat_s: 60,
            lease_floor_s: 300,
            lease_ceiling_s: 7 * 86400,
            deadline_factor: 4.0,
            quarantine_after: 3,
            distinct_prefix: false,
            sweep_s: 30,
            max_units: 2_000_000,
            retry_after_s: 30,
        }
    }
}

impl ServiceConfig {
    /// Seconds a lease is extended to by a heartbeat.
    pub fn heartbeat_grace_s(&self) -> i64 {
        3 * self.heartbeat_s.max(1) as i64
    }

    /// Deadline of a lease on a unit of estimated `cost_us` (reference-core µs) for a worker
    /// whose observed speed is `rate` reference-core seconds per second (`None`: not yet
    /// observed; assume one reference core).
    pub fn deadline(&self, now: i64, cost_us: u64, rate: Option<f64>) -> i64 {
        let rate = rate.filter(|r| r.is_finite() && *r > 0.0).unwrap_or(1.0);
        let expected = cost_us as f64 / 1e6 / rate;
        let secs = (expected * self.deadline_factor).clamp(
            self.lease_floor_s as f64,
            self.lease_ceiling_s.max(self.lease_floor_s) as f64,
        );
        now + secs.ceil() as i64
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    #[test]
    fn deadline_has_floor_factor_and_ceiling() {
        let c = ServiceConfig::default();
        assert_eq!(c.deadline(1000, 1_000_000, None), 1000 + 300); // 1 s of work: the floor
        assert_eq!(c.deadline(0, 600_000_000, None), 2400); // 600 s × 4
        assert_eq!(c.deadline(0, 600_000_000, Some(2.0)), 1200); // twice as fast
        assert_eq!(c.deadline(0, u64::MAX / 2, Some(1e-9)), 7 * 86400);
    }
}
