//! The life of a unit, in one place: its states, the checks on a report, the agreement rule
//! that settles a unit, spot checks and whole-unit rechecks, and what a proven wrong report
//! sets in motion. Pure and typed: no SQL, no HTTP, no clock, no randomness of its own (the
//! caller passes the time and a random source). The API handlers, the store's transactions
//! and the audit all call it; the audit's tests keep an independent recount of the rule.
//!
//! # States of a unit
//!
//! ```text
//!            reports agree (2 owners)                 
//!   open ───────────────────────────────▶ settled
//!    │  ▲ reports differ          ▲          │ a settler is proven wrong:
//!    ▼  │                         │          │ its reports are voided, the unit is
//!  disputed ── majority ──────────┘          │ rechecked and re-decided
//!    │                                       ▼
//!    └─ `max_reports` without agreement ──▶ review ── the organiser's result ──▶ open/settled
//! ```
//!
//! * **open** — fewer than two agreeing reports; wants `need` more leases.
//! * **disputed** — counted reports disagree and no outcome has a majority yet.
//! * **review** — the unit took `max_reports` reports without agreement: no more leases
//!   until the organiser's side has recomputed it.
//! * **settled** — an outcome backed by at least two distinct owners, none quarantined, and
//!   by more owners than any other outcome; if the organiser's side computed the unit, the
//!   outcome is that result.
//!
//! # What a report is worth
//!
//! A report is checked on arrival ([`check_report`]): it must be for the lease it names and
//! say exactly what was handed out; its piece digests must be as many as the unit's pieces and
//! combine to its digest; it must not claim zero work on a unit that has work; where the
//! counts are cheap to derive the coordinator derives them, and they must match; every claimed
//! solution must be true and lie in the unit. After it is stored the coordinator draws
//! [`Rules::spot_checks`] pieces at random ([`draw_pieces`]) and recomputes them: the report
//! committed to every piece digest before the draw, so a worker that invented a share `q` of
//! its pieces is caught with probability `1 − (1 − q)^r`.
//!
//! A report is **proven wrong** when the organiser's side computed something it contradicts
//! (a spot-checked piece, the whole unit, a unit whose answer was known in advance). That
//! quarantines its worker (and, by [`Rules::quarantine_owner`], every worker of the owner),
//! voids every report those workers made that still counts, and sends each unit such a
//! report helped to the organiser's side again ([`Rollback`]). A report that is merely
//! outvoted counts one error against its worker; [`Rules::quarantine_after`] errors
//! quarantine it.

use cubehunt_common::{Digest, Rect, Region, Solution, UnitSpec};
use std::collections::{BTreeMap, BTreeSet};
use std::fmt;

/// The state of a unit.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum UnitState {
    Open,
    Disputed,
    Review,
    Settled,
}

impl UnitState {
    pub const ALL: [UnitState; 4] = [
        UnitState::Open,
        UnitState::Disputed,
        UnitState::Review,
        UnitState::Settled,
    ];
    pub fn as_str(self) -> &'static str {
        match self {
            UnitState::Open => "open",
            UnitState::Disputed => "disputed",
            UnitState::Review => "review",
            UnitState::Settled => "settled",
        }
    }
    pub fn parse(s: &str) -> Option<UnitState> {
        UnitState::ALL.into_iter().find(|u| u.as_str() == s)
    }
}

impl fmt::Display for UnitState {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// What became of a report.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum Verdict {
    /// A vote on a unit that is not settled yet.
    Counted,
    /// Part of the outcome that settled its unit.
    Agree,
    /// Outvoted, or contradicted by the organiser's result.
    Disagree,
    /// Refused on arrival (a false claim); kept for the record, never a vote.
    Refused,
    /// Its worker was quarantined: it no longer votes.
    Voided,
}

impl Verdict {
    pub const ALL: [Verdict; 5] = [
        Verdict::Counted,
        Verdict::Agree,
        Verdict::Disagree,
        Verdict::Refused,
        Verdict::Voided,
    ];
    pub fn as_str(self) -> &'static str {
        match self {
            Verdict::Counted => "counted",
            Verdict::Agree => "agree",
            Verdict::Disagree => "disagree",
            Verdict::Refused => "refused",
            Verdict::Voided => "voided",
        }
    }
    pub fn parse(s: &str) -> Option<Verdict> {
        Verdict::ALL.into_iter().find(|v| v.as_str() == s)
    }
    /// Whether a report with this verdict takes part in deciding its unit.
    pub fn votes(self) -> bool {
        matches!(self, Verdict::Counted | Verdict::Agree | Verdict::Disagree)
    }
    /// What a report with this verdict (and `wrong`: proven wrong) adds to its worker's
    /// counters `(units_settled, errors)`. The store keeps the counters as these sums over a
    /// worker's reports, changing them only with a report's verdict.
    pub fn counters(self, wrong: bool) -> (i64, i64) {
        let settled = i64::from(self == Verdict::Agree);
        let errors = i64::from(wrong || matches!(self, Verdict::Disagree | Verdict::Refused));
        (settled, errors)
    }
}

/// What a report claims about its unit. Equal outcomes agree.
#[derive(Clone, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct Outcome {
    pub digest: Digest,
    /// Canonical, sorted, without repeats.
    pub solutions: Vec<Solution>,
}

impl Outcome {
    pub fn new(digest: Digest, mut solutions: Vec<Solution>) -> Outcome {
        solutions.sort();
        solutions.dedup();
        Outcome { digest, solutions }
    }
    /// The solutions as canonical JSON (the store's form).
    pub fn solutions_json(&self) -> String {
        solutions_json(&self.solutions)
    }
}

/// Canonical JSON of a solution list.
pub fn solutions_json(s: &[Solution]) -> String {
    serde_json::to_string(s).expect("solutions serialise")
}

/// The organiser's settings that the rules depend on.
#[derive(Clone, Debug)]
pub struct Rules {
    /// Pieces recomputed by the coordinator for every report.
    pub spot_checks: u32,
    /// Most counted reports a unit takes before the organiser's side recomputes it.
    pub max_reports: u32,
    /// Outvoted reports after which a worker is quarantined.
    pub quarantine_after: u32,
    /// A proven wrong report quarantines every worker of its owner, not only its own.
    pub quarantine_owner: bool,
    /// Reports confirmed by the organiser's side a new worker needs before it leaves probation.
    pub probation_reports: u32,
    /// Most active leases of one worker: this many per thread it stated at enrolment.
    pub leases_per_thread: u32,
    /// Most active leases of one owner, over all its workers.
    pub leases_per_owner: u32,
}

impl Default for Rules {
    fn default() -> Rules {
        Rules {
            spot_checks: 2,
            max_reports: 5,
            quarantine_after: 3,
            quarantine_owner: true,
            probation_reports: 2,
            leases_per_thread: 2,
            leases_per_owner: 256,
        }
    }
}

impl Rules {
    /// Whether a worker with `confirmed` organiser-confirmed reports is still on probation.
    pub fn on_probation(&self, confirmed: i64, trusted: bool) -> bool {
        !trusted && confirmed < self.probation_reports as i64
    }
    /// Most active leases for a worker that stated `threads` threads.
    pub fn lease_cap(&self, threads: i64) -> i64 {
        (threads.clamp(1, 4096) * self.leases_per_thread.max(1) as i64).max(1)
    }
}

// ---------------------------------------------------------------------------------------
// Deciding a unit

/// One report that takes part in deciding its unit.
#[derive(Clone, Debug)]
pub struct Ballot {
    pub report_id: i64,
    pub worker_id: i64,
    /// The owner, in its canonical (lower-case) form.
    pub owner: String,
    pub outcome: Outcome,
}

/// The decision on a unit from its ballots.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Decision {
    Settled {
        outcome: Outcome,
        /// Reports in the settling outcome.
        agree: Vec<i64>,
        /// Reports against it.
        disagree: Vec<i64>,
    },
    Open {
        need: u32,
    },
    Disputed {
        need: u32,
    },
    /// Too many reports without agreement: wait for the organiser's result.
    Review,
}

impl Decision {
    pub fn state(&self) -> UnitState {
        match self {
            Decision::Settled { .. } => UnitState::Settled,
            Decision::Open { .. } => UnitState::Open,
            Decision::Disputed { .. } => UnitState::Disputed,
            Decision::Review => UnitState::Review,
        }
    }
    /// Further leases wanted.
    pub fn need(&self) -> u32 {
        match self {
            Decision::Open { need } | Decision::Disputed { need } => *need,
            Decision::Settled { .. } | Decision::Review => 0,
        }
    }
}

/// Decide a unit. `known` is the organiser's own result for the unit, when it has one: then
/// only that outcome can settle, and every ballot against it is proven wrong (see
/// [`proven_wrong`]). Otherwise votes are counted per distinct owner (two reports of one
/// owner are one vote) and an outcome settles when at least two owners and more owners than
/// back any other outcome back it.
pub fn decide(ballots: &[Ballot], known: Option<&Outcome>, rules: &Rules) -> Decision {
    let mut owners: BTreeMap<&Outcome, BTreeSet<&str>> = BTreeMap::new();
    for b in ballots {
        owners.entry(&b.outcome).or_default().insert(&b.owner);
    }
    let split = |winner: &Outcome| {
        let (agree, disagree): (Vec<&Ballot>, Vec<&Ballot>) =
            ballots.iter().partition(|b| &b.outcome == winner);
        (
            agree.iter().map(|b| b.report_id).collect(),
            disagree.iter().map(|b| b.report_id).collect(),
        )
    };
    if let Some(known) = known {
        let n = owners.get(known).map_or(0, |s| s.len()) as u32;
        if n >= 2 {
            let (agree, disagree) = split(known);
            return Decision::Settled {
                outcome: known.clone(),
                agree,
                disagree,
            };
        }
        return Decision::Open { need: 2 - n };
    }
    let mut tally: Vec<(usize, &Outcome)> = owners.iter().map(|(o, s)| (s.len(), *o)).collect();
    tally.sort_by(|a, b| b.0.cmp(&a.0).then(a.1.cmp(b.1)));
    let top = tally.first().map_or(0, |t| t.0) as u32;
    let second = tally.get(1).map_or(0, |t| t.0) as u32;
    if top >= 2 && top > second {
        let winner = tally[0].1.clone();
        let (agree, disagree) = split(&winner);
        return Decision::Settled {
            outcome: winner,
            agree,
            disagree,
        };
    }
    if ballots.len() as u32 >= rules.max_reports.max(2) {
        return Decision::Review;
    }
    let need = (2 - top.min(2)).max(second + 1 - top).max(1);
    if tally.len() > 1 {
        Decision::Disputed { need }
    } else {
        Decision::Open { need }
    }
}

/// The ballots the organiser's result contradicts.
pub fn proven_wrong<'a>(ballots: &'a [Ballot], known: &Outcome) -> Vec<&'a Ballot> {
    ballots.iter().filter(|b| &b.outcome != known).collect()
}

// ---------------------------------------------------------------------------------------
// Checks on a report

/// Why a report is refused on arrival.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Refusal {
    /// A field differs from what the lease handed out (not counted as an error: a confused
    /// client, not a false claim).
    Mismatch {
        field: &'static str,
        got: String,
        want: String,
    },
    /// A false claim about the work; counts as an error against the worker.
    False { code: &'static str, why: String },
}

impl Refusal {
    fn false_claim(code: &'static str, why: String) -> Refusal {
        Refusal::False { code, why }
    }
    pub fn code(&self) -> &'static str {
        match self {
            Refusal::Mismatch { .. } => "report_mismatch",
            Refusal::False { code, .. } => code,
        }
    }
    /// Whether the refusal counts as an error against the worker.
    pub fn counts_against(&self) -> bool {
        matches!(self, Refusal::False { .. })
    }
}

impl fmt::Display for Refusal {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Refusal::Mismatch { field, got, want } => write!(
                f,
                "report field {field} is {got} but the lease is for {want}; report the unit you were given"
            ),
            Refusal::False { why, .. } => f.write_str(why),
        }
    }
}

/// What a report is checked against: the lease it names and the unit handed out with it.
pub struct Handed<'a> {
    pub lease_id: i64,
    pub worker_id: i64,
    pub unit: &'a UnitSpec,
    /// The unit's pieces ([`cubehunt_common::pieces::of_unit`]).
    pub pieces: &'a [Rect],
}

/// The parts of a report the checks read.
pub struct Claim<'a> {
    pub lease_id: i64,
    pub unit_id: i64,
    pub worker_id: i64,
    pub kernel: &'a str,
    pub k: i64,
    pub rect: &'a Rect,
    pub digest: &'a Digest,
    pub pieces: &'a [Digest],
    pub solutions: &'a [Solution],
}

/// The checks on a report's identity and shape (everything but solutions and derived counts,
/// which cost computation; see [`check_counts`] and [`check_solutions`]).
pub fn check_shape(h: &Handed, c: &Claim) -> Result<(), Refusal> {
    let mismatch = |field, got: String, want: String| Refusal::Mismatch { field, got, want };
    let u = h.unit;
    if c.lease_id != h.lease_id {
        return Err(mismatch(
            "lease_id",
            c.lease_id.to_string(),
            h.lease_id.to_string(),
        ));
    }
    if c.worker_id != h.worker_id {
        return Err(mismatch(
            "worker_id",
            c.worker_id.to_string(),
            h.worker_id.to_string(),
        ));
    }
    if c.unit_id != u.unit_id {
        return Err(mismatch(
            "unit_id",
            c.unit_id.to_string(),
            u.unit_id.to_string(),
        ));
    }
    if c.kernel != u.kernel {
        return Err(mismatch(
            "kernel",
            format!("{:?}", c.kernel),
            format!("{:?}", u.kernel),
        ));
    }
    if c.k != u.k {
        return Err(mismatch("k", c.k.to_string(), u.k.to_string()));
    }
    if *c.rect != u.rect {
        return Err(mismatch("rect", c.rect.to_string(), u.rect.to_string()));
    }
    if c.pieces.len() != h.pieces.len() {
        return Err(Refusal::false_claim(
            "bad_pieces",
            format!(
                "the report lists {} piece digests but unit {} has {} pieces",
                c.pieces.len(),
                u.unit_id,
                h.pieces.len()
            ),
        ));
    }
    let total: Digest = c.pieces.iter().copied().sum();
    if total != *c.digest {
        return Err(Refusal::false_claim(
            "bad_pieces",
            format!(
                "the piece digests combine to {total}, not to the reported digest {}",
                c.digest
            ),
        ));
    }
    Ok(())
}

/// Refuse a report that claims no work at all (no `d` value, class or candidate) on a unit
/// the coordinator has shown to hold work (`shows_work`, from `kernel::shows_work`; an
/// honest unit can hold none, e.g. one `d` with no cube root of `k`).
pub fn check_work(
    claimed: &Digest,
    shows_work: impl FnOnce() -> bool,
    unit_id: i64,
) -> Result<(), Refusal> {
    let zero = (claimed.d_values, claimed.classes, claimed.candidates) == (0, 0, 0);
    if zero && shows_work() {
        return Err(Refusal::false_claim(
            "zero_work",
            format!(
                "the report claims no work at all on unit {unit_id}, whose rectangle holds work"
            ),
        ));
    }
    Ok(())
}

/// Compare a report's counts with those the coordinator derived for the unit (`None`: too
/// costly to derive; the spot checks stand in for them). In the main region survivors are
/// candidates that passed the sieve, so never more than the candidates (in the small and
/// equal regions `survivors` counts exact tests, which can exceed the candidates).
pub fn check_counts(
    region: Region,
    claimed: &Digest,
    derived: Option<&Digest>,
) -> Result<(), Refusal> {
    if region == Region::Main && claimed.survivors > claimed.candidates {
        return Err(Refusal::false_claim(
            "counts_differ",
            format!(
                "the report claims {} survivors of {} candidates",
                claimed.survivors, claimed.candidates
            ),
        ));
    }
    let Some(d) = derived else { return Ok(()) };
    let c = claimed;
    if (c.d_values, c.classes, c.candidates) != (d.d_values, d.classes, d.candidates) {
        return Err(Refusal::false_claim(
            "counts_differ",
            format!(
                "the report claims d values {}, classes {}, candidates {}, but the unit has {}, {}, {}",
                c.d_values, c.classes, c.candidates, d.d_values, d.classes, d.candidates
            ),
        ));
    }
    Ok(())
}

/// Each claimed solution must be true (checked by `verify`, exact arithmetic) and lie in the
/// unit's rectangle (`inside`).
pub fn check_solutions(
    k: i64,
    rect: &Rect,
    solutions: &[Solution],
    verify: impl Fn(&Solution) -> bool,
    inside: impl Fn(&Solution, &Rect) -> bool,
) -> Result<(), Refusal> {
    for s in solutions {
        if !verify(s) {
            return Err(Refusal::false_claim(
                "false_solution",
                format!("claimed solution {s} is false: its cubes do not sum to {k}"),
            ));
        }
        if !inside(s, rect) {
            return Err(Refusal::false_claim(
                "false_solution",
                format!("claimed solution {s} lies outside the unit's rectangle {rect}"),
            ));
        }
    }
    Ok(())
}

// ---------------------------------------------------------------------------------------
// Spot checks

/// Draw `r` distinct piece indices out of `n` (all of them when `r ≥ n`), in ascending order.
/// `next` yields uniform random numbers; the caller draws from the operating system's source
/// after the report is stored, so the worker cannot know the draw when it commits.
pub fn draw_pieces(n: usize, r: u32, mut next: impl FnMut() -> u64) -> Vec<usize> {
    let r = (r as usize).min(n);
    // Floyd's algorithm: r distinct values with r draws (common practice, no source).
    let mut chosen = BTreeSet::new();
    for j in n - r..n {
        let t = (next() % (j as u64 + 1)) as usize;
        if !chosen.insert(t) {
            chosen.insert(j);
        }
    }
    chosen.into_iter().collect()
}

/// Probability that a report which invented a share `q` of its pieces escapes `r` spot
/// checks: `(1 − q)^r` (pieces drawn with replacement; without replacement it is smaller).
pub fn escape_probability(q: f64, r: u32) -> f64 {
    (1.0 - q.clamp(0.0, 1.0)).powi(r as i32)
}

/// Probability that a colluding pair escapes when it fakes `units` units together (both
/// partners report the same invented share `q` of each unit's pieces), each report has `r`
/// pieces spot-checked and each unit is recomputed in full with probability `recheck_share`:
/// `((1 − s) · (1 − q)^(2r))^units` — every one of the `2·units` reports must escape its
/// spot checks and no faked unit may be among the rechecked ones (pieces drawn with
/// replacement; the coordinator draws without, which only lowers the chance of escape). One
/// caught report is enough for both: it sends the unit to the organiser's side, whose result
/// proves the partner's identical report wrong as well.
pub fn pair_escape_probability(q: f64, r: u32, recheck_share: f64, units: u32) -> f64 {
    let one = (1.0 - recheck_share.clamp(0.0, 1.0)) * escape_probability(q, r).powi(2);
    one.powi(units as i32)
}

/// Whether the organiser's computation of one piece confirms a report's claim: the same
/// digest, and the report's solutions that belong to the piece (`inside`) are exactly the
/// computed ones that do. (The kernel also meets solutions through a coordinate that is not
/// the smallest; those belong to another piece or unit and are compared there.)
pub fn piece_confirms(
    claimed: &Digest,
    claimed_solutions: &[Solution],
    piece: &Rect,
    computed: &Outcome,
    inside: impl Fn(&Solution, &Rect) -> bool,
) -> bool {
    let mine: BTreeSet<&Solution> = claimed_solutions
        .iter()
        .filter(|s| inside(s, piece))
        .collect();
    let theirs: BTreeSet<&Solution> = computed
        .solutions
        .iter()
        .filter(|s| inside(s, piece))
        .collect();
    *claimed == computed.digest && mine == theirs
}

// ---------------------------------------------------------------------------------------
// Rollback

/// A report still counting, as the rollback sees it.
#[derive(Clone, Debug)]
pub struct Counted {
    pub report_id: i64,
    pub unit_id: i64,
    pub worker_id: i64,
}

/// What a proven wrong report sets in motion.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct Rollback {
    /// Workers to quarantine.
    pub quarantine: BTreeSet<i64>,
    /// Reports that stop counting.
    pub void: BTreeSet<i64>,
    /// Units to re-decide without those reports and to send to the organiser's side again.
    pub recheck: BTreeSet<i64>,
}

/// Plan the rollback after worker `offender` was proven wrong. `owner_workers` are the other
/// workers of its owner (quarantined too when [`Rules::quarantine_owner`]); `counted` are the
/// counted reports of all of them.
pub fn rollback(
    offender: i64,
    owner_workers: &[i64],
    counted: &[Counted],
    rules: &Rules,
) -> Rollback {
    let mut quarantine: BTreeSet<i64> = [offender].into();
    if rules.quarantine_owner {
        quarantine.extend(owner_workers);
    }
    let mut out = Rollback {
        quarantine,
        ..Rollback::default()
    };
    for c in counted {
        if out.quarantine.contains(&c.worker_id) {
            out.void.insert(c.report_id);
            out.recheck.insert(c.unit_id);
        }
    }
    out
}

// ---------------------------------------------------------------------------------------
// Leases

/// Expected seconds of a unit of planned cost `cost_us` on a worker of observed speed `rate`
/// (reference-core seconds per second; `None`: not yet observed, taken as one core).
pub fn expected_seconds(cost_us: u64, rate: Option<f64>) -> f64 {
    let rate = rate.filter(|r| r.is_finite() && *r > 0.0).unwrap_or(1.0);
    cost_us as f64 / 1e6 / rate
}

#[cfg(test)]
mod tests {
    use super::*;

    fn o(h: u64) -> Outcome {
        Outcome::new(
            Digest {
                hash: h,
                candidates: 10,
                ..Digest::ZERO
            },
            vec![],
        )
    }
    fn b(id: i64, owner: &str, h: u64) -> Ballot {
        Ballot {
            report_id: id,
            worker_id: id,
            owner: owner.into(),
            outcome: o(h),
        }
    }
    fn rules() -> Rules {
        Rules::default()
    }

    #[test]
    fn two_owners_agreeing_settle_and_one_owner_twice_is_one_vote() {
        assert_eq!(decide(&[], None, &rules()), Decision::Open { need: 2 });
        assert_eq!(
            decide(&[b(1, "a", 1)], None, &rules()),
            Decision::Open { need: 1 }
        );
        assert_eq!(
            decide(&[b(1, "a", 1), b(2, "a", 1)], None, &rules()),
            Decision::Open { need: 1 }
        );
        assert_eq!(
            decide(&[b(1, "a", 1), b(2, "b", 1)], None, &rules()),
            Decision::Settled {
                outcome: o(1),
                agree: vec![1, 2],
                disagree: vec![]
            }
        );
    }

    #[test]
    fn disagreement_needs_a_majority_and_ends_in_review() {
        let r = rules();
        assert_eq!(
            decide(&[b(1, "a", 1), b(2, "b", 2)], None, &r),
            Decision::Disputed { need: 1 }
        );
        assert_eq!(
            decide(&[b(1, "a", 1), b(2, "b", 2), b(3, "c", 2)], None, &r),
            Decision::Settled {
                outcome: o(2),
                agree: vec![2, 3],
                disagree: vec![1]
            }
        );
        // 2 against 2: one more agreeing with either side settles.
        assert_eq!(
            decide(
                &[b(1, "a", 1), b(2, "b", 1), b(3, "c", 2), b(4, "d", 2)],
                None,
                &r
            ),
            Decision::Disputed { need: 1 }
        );
        // Five owners, five different digests: the organiser's side takes over.
        let five: Vec<Ballot> = (1..=5).map(|i| b(i, &format!("o{i}"), i as u64)).collect();
        assert_eq!(decide(&five, None, &r), Decision::Review);
        assert_eq!(decide(&five, None, &r).need(), 0);
    }

    #[test]
    fn a_known_result_settles_only_itself_and_proves_the_rest_wrong() {
        let r = rules();
        let bal = [b(1, "a", 7), b(2, "b", 7), b(3, "c", 1)];
        // The colluding majority (7) loses against the organiser's result (1).
        assert_eq!(decide(&bal, Some(&o(1)), &r), Decision::Open { need: 1 });
        let wrong: Vec<i64> = proven_wrong(&bal, &o(1))
            .iter()
            .map(|b| b.report_id)
            .collect();
        assert_eq!(wrong, vec![1, 2]);
        let bal = [b(1, "a", 1), b(2, "b", 7), b(3, "c", 1)];
        assert_eq!(
            decide(&bal, Some(&o(1)), &r),
            Decision::Settled {
                outcome: o(1),
                agree: vec![1, 3],
                disagree: vec![2]
            }
        );
    }

    #[test]
    fn counts_are_checked() {
        let d = Digest {
            d_values: 3,
            classes: 4,
            candidates: 50,
            survivors: 2,
            hash: 9,
        };
        let derived = Digest {
            hash: 0,
            survivors: 0,
            ..d
        };
        assert!(check_counts(Region::Main, &d, Some(&derived)).is_ok());
        assert!(check_counts(Region::Main, &d, None).is_ok());
        let e = check_counts(
            Region::Main,
            &d,
            Some(&Digest {
                candidates: 51,
                ..derived
            }),
        )
        .unwrap_err();
        assert_eq!(e.code(), "counts_differ");
        assert!(e.counts_against());
        assert!(check_counts(Region::Main, &Digest::ZERO, Some(&derived)).is_err());
        // Zero work: refused where the unit is shown to hold work, accepted where an honest
        // scan finds none (k = 33, d = 19: the kernel, run here, visits nothing).
        let empty = Rect {
            region: Region::Main,
            d_lo: 19,
            d_hi: 20,
            z_lo: 86,
            z_hi: 486,
        };
        let honest = cubehunt_common::kernel::scan(33, &empty, 1, &|_| {})
            .unwrap()
            .digest;
        assert_eq!(
            (honest.d_values, honest.classes, honest.candidates),
            (0, 0, 0),
            "{honest}"
        );
        assert!(!cubehunt_common::kernel::shows_work(33, &empty));
        assert!(check_work(
            &honest,
            || cubehunt_common::kernel::shows_work(33, &empty),
            1
        )
        .is_ok());
        let busy = Rect {
            region: Region::Main,
            d_lo: 1,
            d_hi: 40,
            z_lo: 200,
            z_hi: 5000,
        };
        assert!(cubehunt_common::kernel::shows_work(33, &busy));
        let e = check_work(
            &Digest::ZERO,
            || cubehunt_common::kernel::shows_work(33, &busy),
            1,
        )
        .unwrap_err();
        assert_eq!(e.code(), "zero_work");
        assert!(check_counts(Region::Main, &Digest { survivors: 51, ..d }, None).is_err());
        // Small region: survivors count exact tests, which can exceed the candidates
        // (k = 3, |z| ≤ 1 has 3 candidates and 5 survivors; the kernel, run here).
        let small = Rect {
            region: Region::Small,
            d_lo: 0,
            d_hi: 0,
            z_lo: 0,
            z_hi: 1,
        };
        let honest = cubehunt_common::kernel::scan(3, &small, 1, &|_| {})
            .unwrap()
            .digest;
        assert!(honest.survivors > honest.candidates, "{honest}");
        let derived = cubehunt_common::kernel::counts(3, &small);
        assert!(check_counts(Region::Small, &honest, derived.as_ref()).is_ok());
    }

    #[test]
    fn draws_are_distinct_and_cover_small_units() {
        let mut x = 12345u64;
        let mut next = || {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            x
        };
        for n in 1..50 {
            for r in 0..6 {
                let d = draw_pieces(n, r, &mut next);
                assert_eq!(d.len(), (r as usize).min(n));
                assert!(d.windows(2).all(|w| w[0] < w[1]));
                assert!(d.iter().all(|&i| i < n));
            }
        }
        // Uniform enough: over many draws of 1 of 10, every piece comes up about 10% of the
        // time (binomial, n = 20000, p = 0.1: sd ≈ 42; allow ±5 sd).
        let mut hits = [0u32; 10];
        for _ in 0..20000 {
            hits[draw_pieces(10, 1, &mut next)[0]] += 1;
        }
        assert!(hits.iter().all(|&h| (1790..=2210).contains(&h)), "{hits:?}");
        assert!((escape_probability(0.1, 2) - 0.81).abs() < 1e-12);
    }

    /// A colluding pair that fakes `units` units together, measured with seeded draws of the
    /// real [`draw_pieces`] and a seeded recheck sample, against [`pair_escape_probability`]
    /// (its bound) and the exact law for draws without replacement.
    #[test]
    fn a_colluding_pair_escapes_at_the_stated_rate() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand::rngs::StdRng::seed_from_u64(7);
        let (n, m) = (64usize, 8usize); // q = 1/8 of the pieces invented
        let invented: BTreeSet<usize> = (0..m).map(|i| i * (n / m)).collect();
        for (r, share, units) in [
            (2u32, 0.02f64, 1u32),
            (2, 0.02, 4),
            (1, 0.1, 3),
            (3, 0.0, 2),
        ] {
            let trials = 20_000u32;
            let escaped = (0..trials)
                .filter(|_| {
                    (0..units).all(|_| {
                        let rechecked = rng.gen::<f64>() < share;
                        let report_escapes = |rng: &mut rand::rngs::StdRng| {
                            draw_pieces(n, r, || rng.gen::<u64>())
                                .iter()
                                .all(|p| !invented.contains(p))
                        };
                        !rechecked && report_escapes(&mut rng) && report_escapes(&mut rng)
                    })
                })
                .count() as f64
                / trials as f64;
            let one: f64 = (0..r as usize)
                .map(|i| (n - m - i) as f64 / (n - i) as f64)
                .product();
            let exact = ((1.0 - share) * one * one).powi(units as i32);
            let sd = (exact * (1.0 - exact) / trials as f64).sqrt().max(1e-4);
            assert!(
                (escaped - exact).abs() < 5.0 * sd,
                "r={r} s={share} units={units}: measured {escaped}, exact {exact}"
            );
            let bound = pair_escape_probability(m as f64 / n as f64, r, share, units);
            assert!(exact <= bound + 1e-12);
            assert!(escaped <= bound + 5.0 * sd);
        }
    }

    /// A worker that invents `m` of `n` piece digests escapes `r` spot checks drawn without
    /// replacement with probability C(n − m, r) / C(n, r) (hypergeometric distribution,
    /// standard), which is at most the bound (1 − q)^r that [`escape_probability`] states.
    /// Measured here with seeded draws against both.
    #[test]
    fn measured_escape_rate_matches_the_hypergeometric_law_and_the_stated_bound() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand::rngs::StdRng::seed_from_u64(20261202);
        for (n, m, r) in [
            (400usize, 40usize, 2u32),
            (100, 5, 3),
            (16, 8, 1),
            (1024, 1, 4),
        ] {
            let invented: BTreeSet<usize> = (0..m).map(|i| i * (n / m)).collect();
            let trials = 20_000u32;
            let escaped = (0..trials)
                .filter(|_| {
                    draw_pieces(n, r, || rng.gen::<u64>())
                        .iter()
                        .all(|p| !invented.contains(p))
                })
                .count() as f64
                / trials as f64;
            let exact: f64 = (0..r as usize)
                .map(|i| (n - m - i) as f64 / (n - i) as f64)
                .product();
            let sd = (exact * (1.0 - exact) / trials as f64).sqrt().max(1e-4);
            assert!(
                (escaped - exact).abs() < 5.0 * sd,
                "n={n} m={m} r={r}: measured {escaped}, exact {exact}"
            );
            let bound = escape_probability(m as f64 / n as f64, r);
            assert!(exact <= bound + 1e-12, "n={n} m={m} r={r}");
            assert!(escaped <= bound + 5.0 * sd, "n={n} m={m} r={r}");
        }
    }

    #[test]
    fn rollback_quarantines_the_owner_and_voids_every_counted_report() {
        let counted = [
            Counted {
                report_id: 10,
                unit_id: 1,
                worker_id: 5,
            },
            Counted {
                report_id: 11,
                unit_id: 2,
                worker_id: 6,
            },
            Counted {
                report_id: 12,
                unit_id: 3,
                worker_id: 7,
            },
        ];
        let r = rollback(5, &[6], &counted, &rules());
        assert_eq!(r.quarantine, [5, 6].into());
        assert_eq!(r.void, [10, 11].into());
        assert_eq!(r.recheck, [1, 2].into());
        let only = Rules {
            quarantine_owner: false,
            ..rules()
        };
        let r = rollback(5, &[6], &counted, &only);
        assert_eq!(r.quarantine, [5].into());
        assert_eq!(r.void, [10].into());
    }

    #[test]
    fn probation_and_caps() {
        let r = rules();
        assert!(r.on_probation(0, false));
        assert!(!r.on_probation(0, true));
        assert!(!r.on_probation(2, false));
        assert_eq!(r.lease_cap(4), 8);
        assert_eq!(r.lease_cap(0), 2);
        assert_eq!(UnitState::parse("review"), Some(UnitState::Review));
        assert_eq!(Verdict::parse("voided"), Some(Verdict::Voided));
        assert!(!Verdict::Voided.votes());
    }
}
