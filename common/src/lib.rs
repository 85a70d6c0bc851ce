//! cubehunt-common: everything the coordinator and the worker must agree on, and nothing else.
//!
//! * [`kernel`] — the search for `x³ + y³ + z³ = k` over one rectangle of one region
//!   (docs/method.md), the work [`digest`] it produces, exact verification of solutions.
//! * [`unit`] — regions, rectangles, units and their canonical (signed) encoding.
//! * [`report`] — what a worker returns for a lease, and its canonical encoding.
//! * [`sign`] — Ed25519 keys, signatures over canonical bytes, signed HTTP requests.
//! * [`protocol`] — the JSON bodies exchanged between worker and coordinator.
//! * [`pieces`] — the fixed split of a unit into the pieces a report commits to.
//! * [`merkle`] — RFC 6962 Merkle trees and audit paths (certificates, piece commitments).
//! * [`tiling`] — does a set of rectangles cover the three regions completely?
//! * [`cert`] — coverage certificates: the signed document and its offline check.
//! * [`heuristic`] — the density model for planning: expected solutions and cost per target.
//!
//! Deliberately absent: HTTP, SQL, files, clocks. The kernel knows nothing of campaigns;
//! the protocol knows nothing of how a unit is sieved.

#![allow(clippy::manual_is_multiple_of)] // `is_multiple_of` is newer than our MSRV (1.80)

pub mod cert;
pub mod digest;
pub mod heuristic;
pub mod kernel;
pub mod merkle;
pub mod numarg;
pub mod pieces;
pub mod protocol;
pub mod report;
pub mod sign;
pub mod solution;
pub mod tiling;
pub mod unit;

pub use digest::Digest;
pub use solution::Solution;
pub use unit::{Rect, Region, UnitSpec};

/// Version of the search kernel. It names the sieve moduli, the survivor hash and the
/// candidate-counting rules: any change to those changes digests, so it must change this.
/// A campaign pins the kernel version its units were made for.
pub const KERNEL_VERSION: &str = "cubehunt-kernel/1";
