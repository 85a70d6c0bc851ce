//! cubehunt-coordinator: hosts campaigns, plans and signs units, leases them to volunteer
//! workers, cross-checks their reports and serves the read-only monitoring API.
//!
//! Code map, one concern per module:
//! * [`lifecycle`] — the life of a unit: states, checks on a report, the agreement rule,
//!   spot checks, rechecks, rollback (pure: no SQL, no HTTP).
//! * [`store`] — the database (SQLite or PostgreSQL); the only module that contains SQL.
//! * [`checker`] — the coordinator's own computations (spot checks, rechecks).
//! * [`plan`] — cutting a target's regions into units with the kernel's cost model.
//! * [`forecast`] — the `plan` command: expected yield and cost per target (density model).
//! * [`model`] — the density model's figures per running target (found vs expected), cached.
//! * [`api`] — the HTTP service (axum): admin, worker protocol, monitoring, errors.
//! * [`datadir`] — the data directory: database, coordinator key, admin token.
//! * [`config`] — service settings.
//! * [`cli`] — the `campaign …` commands, a client of the admin API.
//! * [`audit`] — re-derives every claim of the store from its raw rows.
//! * [`certify`] — issues coverage certificates (the document is `cubehunt_common::cert`).
//! * [`export`] — solutions and the per-unit ledger as CSV or JSON.
//! * [`checks`] — the `audit`, `certificate`, `verify-certificate` and `export` commands.
//!
//! Deliberately absent: any knowledge of how a unit is sieved (that is the kernel's, in
//! `cubehunt-common`), and any trust in what a worker says about itself.

#![recursion_limit = "512"]

pub mod api;
pub mod audit;
pub mod certify;
pub mod checker;
pub mod checks;
pub mod cli;
pub mod config;
pub mod config_file;
pub mod datadir;
pub mod demo;
pub mod export;
pub mod forecast;
pub mod lifecycle;
pub mod model;
pub mod plan;
pub mod serve;
pub mod store;

/// Unix seconds now.
pub fn now() -> i64 {
    std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| d.as_secs() as i64)
        .unwrap_or(0)
}
