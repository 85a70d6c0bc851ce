//! The cross-check rule, free of storage: given the counted reports of one unit, is it
//! settled, still open, or disputed, and how many further reports does it want?
//!
//! Reports agree when their digests and solution lists are equal (their "outcome"). Votes are
//! counted per distinct owner: two reports of one owner are one vote. A unit is settled by
//! an outcome backed by at least two owners and by more owners than any other outcome.

use std::collections::{BTreeMap, BTreeSet};

/// One counted report.
#[derive(Clone, Debug)]
pub struct Vote<'a> {
    pub owner: &'a str,
    /// Outcome key: equal keys mean agreeing reports.
    pub outcome: &'a str,
}

#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Decision {
    /// The outcome that settles the unit.
    Settled { outcome: String },
    /// No disagreement yet; `need` more agreeing reports would settle it.
    Open { need: i64 },
    /// Reports disagree; `need` more reports could settle it by majority.
    Disputed { need: i64 },
}

impl Decision {
    pub fn state(&self) -> &'static str {
        match self {
            Decision::Settled { .. } => "settled",
            Decision::Open { .. } => "open",
            Decision::Disputed { .. } => "disputed",
        }
    }
    pub fn need(&self) -> i64 {
        match self {
            Decision::Settled { .. } => 0,
            Decision::Open { need } | Decision::Disputed { need } => *need,
        }
    }
}

/// Decide a unit from its counted reports.
pub fn decide(votes: &[Vote]) -> Decision {
    let mut owners: BTreeMap<&str, BTreeSet<&str>> = BTreeMap::new();
    for v in votes {
        owners.entry(v.outcome).or_default().insert(v.owner);
    }
    let mut tally: Vec<(usize, &str)> = owners.iter().map(|(o, s)| (s.len(), *o)).collect();
    tally.sort_by(|a, b| b.0.cmp(&a.0).then(a.1.cmp(b.1)));
    let top = tally.first().map(|t| t.0 as i64).unwrap_or(0);
    let second = tally.get(1).map(|t| t.0 as i64).unwrap_or(0);
    if top >= 2 && top > second {
        return Decision::Settled {
            outcome: tally[0].1.to_string(),
        };
    }
    let need = (2 - top).max(second + 1 - top).max(1);
    if tally.len() > 1 {
        Decision::Disputed { need }
    } else {
        Decision::Open { need }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    fn v<'a>(owner: &'a str, outcome: &'a str) -> Vote<'a> {
        Vote { owner, outcome }
    }
    #[test]
    fn two_owners_agreeing_settle() {
        assert_eq!(decide(&[]), Decision::Open { need: 2 });
        assert_eq!(decide(&[v("a", "x")]), Decision::Open { need: 1 });
        assert_eq!(
            decide(&[v("a", "x"), v("b", "x")]),
            Decision::Settled {
                outcome: "x".into()
            }
        );
    }
    #[test]
    fn one_owner_twice_is_one_vote() {
        assert_eq!(
            decide(&[v("a", "x"), v("a", "x")]),
            Decision::Open { need: 1 }
        );
    }
    #[test]
    fn disagreement_needs_a_majority() {
        assert_eq!(
            decide(&[v("a", "x"), v("b", "y")]),
            Decision::Disputed { need: 1 }
        );
        assert_eq!(
            decide(&[v("a", "x"), v("b", "y"), v("c", "y")]),
            Decision::Settled {
                outcome: "y".into()
            }
        );
        assert_eq!(
            decide(&[v("a", "x"), v("b", "y"), v("c", "z")]),
            Decision::Disputed { need: 1 }
        );
        // 2 against 2: two more agreeing with one side are not needed, one is enough.
        assert_eq!(
            decide(&[v("a", "x"), v("b", "x"), v("c", "y"), v("d", "y")]),
            Decision::Disputed { need: 1 }
        );
        assert_eq!(
            decide(&[v("a", "x"), v("b", "x"), v("c", "y")]),
            Decision::Settled {
                outcome: "x".into()
            }
        );
    }
}
