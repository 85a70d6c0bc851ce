//! Planning: cut each region of a target into units of about `unit_seconds` on one reference
//! core, using only the kernel's geometry ([`kernel::domain`], [`kernel::main_z_floor`]) and
//! its cost model ([`kernel::estimate_seconds`]).
//!
//! Tiling rules (what the audit and certificates check):
//! * small and equal regions: the region's `|z|` range is cut into consecutive pieces
//!   `(z_lo, z_hi]`, `d = [0, 0)`; in the small region only the first piece (`z_lo = 0`)
//!   covers `z = 0`.
//! * main region: `d` is cut into consecutive strips `[d_lo, d_hi)`. A strip's `|z|` range is
//!   `(max(z_bottom, main_z_floor(d_lo)), B]`, where `z_bottom` is `Z0` (or the old bound when
//!   extending); a strip that is too costly for one unit (small `d`: a single `d` can hold a
//!   huge `z` range) is cut further along `z`. Points of a strip with `|z| ≤ main_z_floor(d)`
//!   for its larger `d` lie outside the region; the kernel skips them. No rectangle lies
//!   entirely outside the region: its corner `(d_lo, z_lo + 1)` is always inside.
//! * extending a bound `B1 → B2` plans only the new part: for each region the domain at `B2`
//!   with `z_lo` raised to the domain's `z_hi` at `B1`. In the main region that is
//!   `[1, D2) × (max(Z0, B1), B2]`, since whether `d < α|z|` does not depend on the bound.
//!
//! The tiling is exact: no gaps, no overlaps (tests below check it by enumeration).

use crate::store::{PlannedUnit, TargetPlan};
use cubehunt_common::kernel::{self, KernelError};
use cubehunt_common::{Rect, Region};

#[derive(Clone, Copy, Debug)]
pub struct PlanSettings {
    /// Goal per unit, seconds on one reference core.
    pub unit_seconds: f64,
    /// Refuse a plan with more units than this.
    pub max_units: u64,
}

#[derive(Debug, thiserror::Error)]
pub enum PlanError {
    #[error("{0}")]
    Kernel(#[from] KernelError),
    #[error(
        "planning k = {k} up to {bound} would make more than {max} units of {unit_seconds} s \
         (the whole job is about {total_s:.3e} core-seconds); use a larger unit_seconds (about {suggest:.0} would do) or a smaller bound"
    )]
    TooManyUnits {
        k: i64,
        bound: u64,
        max: u64,
        unit_seconds: f64,
        total_s: f64,
        suggest: f64,
    },
}

/// Cost in the unit's integer form: reference-core microseconds, at least 1.
pub fn cost_us(seconds: f64) -> u64 {
    if !seconds.is_finite() || seconds <= 0.0 {
        return 1;
    }
    ((seconds * 1e6).ceil() as u64).max(1)
}

/// Plan the part of target `k` with bound in `(bound_from, bound_to]` (`bound_from = 0`: the
/// whole target). `k` must have passed [`kernel::check_target`].
pub fn plan_target(
    k: i64,
    bound_from: u64,
    bound_to: u64,
    s: PlanSettings,
) -> Result<TargetPlan, PlanError> {
    let target = kernel::check_target(k)?;
    if bound_to < 1 {
        return Err(KernelError::BoundTooSmall(bound_to).into());
    }
    if bound_to > kernel::MAX_Z {
        return Err(KernelError::BoundOutOfRange(bound_to).into());
    }
    let goal = if s.unit_seconds.is_finite() && s.unit_seconds > 0.0 {
        s.unit_seconds
    } else {
        600.0
    };
    let mut parts = Vec::new();
    let mut total_s = 0.0;
    for region in Region::ALL {
        let Some(mut rect) = kernel::domain(k, bound_to, region) else {
            continue;
        };
        if bound_from > 0 {
            if let Some(old) = kernel::domain(k, bound_from, region) {
                rect.z_lo = rect.z_lo.max(old.z_hi);
            }
        }
        if rect.z_lo >= rect.z_hi {
            continue;
        }
        total_s += kernel::estimate_seconds(k, &rect).max(0.0);
        parts.push(rect);
    }
    let too_many = |total_s: f64| PlanError::TooManyUnits {
        k,
        bound: bound_to,
        max: s.max_units,
        unit_seconds: goal,
        total_s,
        suggest: (total_s / s.max_units as f64 * 2.0).max(goal * 2.0),
    };
    if total_s / goal > s.max_units as f64 {
        return Err(too_many(total_s));
    }
    let mut p = Planner {
        k,
        goal,
        max: s.max_units as usize,
        out: Vec::new(),
    };
    for rect in parts {
        let ok = match rect.region {
            Region::Small | Region::Equal => p.split_z(rect, None),
            Region::Main => p.main(rect),
        };
        if !ok {
            return Err(too_many(total_s));
        }
    }
    Ok(TargetPlan {
        k,
        z0: target.z0,
        units: p.out,
    })
}

struct Planner {
    k: i64,
    goal: f64,
    max: usize,
    out: Vec<PlannedUnit>,
}

impl Planner {
    fn est(&self, r: &Rect) -> f64 {
        kernel::estimate_seconds(self.k, r).max(0.0)
    }

    /// Push a unit; false once the unit limit is passed.
    fn push(&mut self, rect: Rect, secs: f64) -> bool {
        self.out.push(PlannedUnit {
            rect,
            cost_us: cost_us(secs),
        });
        self.out.len() <= self.max
    }

    /// Cut `(z_lo, z_hi]` into pieces of at most the goal (or single values of |z|).
    fn split_z(&mut self, rect: Rect, known: Option<f64>) -> bool {
        let e = known.unwrap_or_else(|| self.est(&rect));
        let width = rect.z_hi - rect.z_lo;
        if e <= self.goal || width <= 1 {
            return self.push(rect, e);
        }
        // Equal pieces first (cost is close to uniform in z for a fixed d), each refined.
        let n = ((e / self.goal).ceil() as u64).clamp(2, width.min(1 << 16));
        let mut lo = rect.z_lo;
        for i in 1..=n {
            let hi = rect.z_lo + ((width as u128 * i as u128) / n as u128) as u64;
            if hi > lo
                && !self.split_z(
                    Rect {
                        z_lo: lo,
                        z_hi: hi,
                        ..rect
                    },
                    None,
                )
            {
                return false;
            }
            lo = hi;
        }
        true
    }

    /// Cut the main region `[d_lo, d_hi) × (z_bottom, B]` into strips along d.
    fn main(&mut self, rect: Rect) -> bool {
        let (z_bottom, b, d_end) = (rect.z_lo, rect.z_hi, rect.d_hi);
        let strip = |d: u64, w: u64| Rect {
            region: Region::Main,
            d_lo: d,
            d_hi: d + w,
            z_lo: z_bottom.max(kernel::main_z_floor(d)),
            z_hi: b,
        };
        let mut d = rect.d_lo.max(1);
        let mut w: u64 = 1;
        while d < d_end {
            let zl = z_bottom.max(kernel::main_z_floor(d));
            if zl >= b {
                break; // main_z_floor grows with d: nothing of the region is left
            }
            w = w.clamp(1, d_end - d);
            let mut e = self.est(&strip(d, w));
            while w > 1 && e > self.goal {
                w = (w / 2).max(1);
                e = self.est(&strip(d, w));
            }
            if w == 1 && e > self.goal {
                // One d is too much for one unit: cut it along z.
                if !self.split_z(strip(d, 1), Some(e)) {
                    return false;
                }
                d += 1;
                continue;
            }
            while d + w < d_end {
                let w2 = (w * 2).min(d_end - d);
                let e2 = self.est(&strip(d, w2));
                if e2 > self.goal {
                    break;
                }
                w = w2;
                e = e2;
            }
            if !self.push(strip(d, w), e) {
                return false;
            }
            d += w;
        }
        true
    }
}

#[cfg(test)]
mod tests {
    //! Exactness of the tiling, checked by enumeration against the kernel's own geometry
    //! (`kernel::domain`, `kernel::main_z_floor`); "common practice, no source".
    use super::*;
    use proptest::prelude::*;

    /// Every point of every region up to `bound` with `|z| > from` is covered exactly once,
    /// and no rectangle lies entirely outside its region.
    pub(crate) fn assert_tiles(k: i64, from: u64, bound: u64, units: &[PlannedUnit]) {
        let z0 = kernel::z0(k);
        for region in Region::ALL {
            let rects: Vec<Rect> = units
                .iter()
                .map(|u| u.rect)
                .filter(|r| r.region == region)
                .collect();
            let Some(dom) = kernel::domain(k, bound, region) else {
                assert!(rects.is_empty(), "{region}: units for an empty region");
                continue;
            };
            let old_hi = if from > 0 {
                kernel::domain(k, from, region).map(|r| r.z_hi).unwrap_or(0)
            } else {
                0
            };
            let lo = dom.z_lo.max(old_hi);
            match region {
                Region::Small | Region::Equal => {
                    let mut zs: Vec<(u64, u64)> = rects.iter().map(|r| (r.z_lo, r.z_hi)).collect();
                    zs.sort();
                    for r in &rects {
                        assert_eq!((r.d_lo, r.d_hi), (0, 0), "{r}");
                    }
                    if lo >= dom.z_hi {
                        assert!(zs.is_empty());
                        continue;
                    }
                    assert_eq!(zs.first().unwrap().0, lo, "{region} starts at {lo}");
                    assert_eq!(
                        zs.last().unwrap().1,
                        dom.z_hi,
                        "{region} ends at {}",
                        dom.z_hi
                    );
                    for w in zs.windows(2) {
                        assert_eq!(
                            w[0].1, w[1].0,
                            "{region}: gap or overlap between {:?} and {:?}",
                            w[0], w[1]
                        );
                    }
                    for z in &zs {
                        assert!(z.0 < z.1, "empty piece {z:?}");
                    }
                }
                Region::Main => {
                    let zb = dom.z_lo.max(old_hi);
                    for r in &rects {
                        assert!(
                            r.d_lo >= 1
                                && r.d_lo < r.d_hi
                                && r.d_hi <= dom.d_hi
                                && r.z_lo < r.z_hi
                                && r.z_hi <= bound,
                            "{r}"
                        );
                        assert!(r.z_lo >= zb, "{r} reaches below the planned part");
                        assert!(
                            r.z_lo >= kernel::main_z_floor(r.d_lo),
                            "{r} lies outside the region at its corner"
                        );
                    }
                    for d in dom.d_lo..dom.d_hi {
                        let need_lo = zb.max(kernel::main_z_floor(d));
                        let mut iv: Vec<(u64, u64)> = rects
                            .iter()
                            .filter(|r| r.d_lo <= d && d < r.d_hi)
                            .map(|r| (r.z_lo, r.z_hi))
                            .collect();
                        iv.sort();
                        for w in iv.windows(2) {
                            assert!(
                                w[0].1 <= w[1].0,
                                "main d={d}: overlap {:?} {:?}",
                                w[0],
                                w[1]
                            );
                        }
                        if need_lo >= bound {
                            continue;
                        }
                        // Union of the intervals must contain (need_lo, bound].
                        let mut covered = need_lo;
                        for (a, b) in &iv {
                            if *a <= covered && *b > covered {
                                covered = *b;
                            }
                        }
                        assert!(
                            covered >= bound,
                            "main d={d}: |z| in ({covered}, {bound}] not covered"
                        );
                        assert!(
                            iv.first().map(|x| x.0 <= need_lo).unwrap_or(false),
                            "main d={d}: gap above {need_lo}"
                        );
                    }
                    let _ = z0;
                }
            }
        }
    }

    fn settings(unit_seconds: f64) -> PlanSettings {
        PlanSettings {
            unit_seconds,
            max_units: 2_000_000,
        }
    }

    /// Admissible k: not ±4 mod 9, not a cube, not 0.
    fn admissible(k: i64) -> bool {
        kernel::check_target(k).is_ok()
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(40))]
        #[test]
        fn tiling_is_exact(k in 1i64..2000, bound in 1u64..3000, scale in 0u32..4) {
            prop_assume!(admissible(k));
            let whole: f64 = Region::ALL.iter().filter_map(|r| kernel::domain(k, bound, *r)).map(|r| kernel::estimate_seconds(k, &r)).sum();
            // Unit goals from "everything in one unit" down to a few hundred units.
            let goal = (whole / [1.0, 7.0, 60.0, 400.0][scale as usize]).max(1e-9);
            let plan = plan_target(k, 0, bound, settings(goal)).unwrap();
            assert_tiles(k, 0, bound, &plan.units);
            for u in &plan.units {
                kernel::check_rect(k, &u.rect).unwrap();
            }
        }

        #[test]
        fn extension_plans_only_the_new_part(k in 1i64..2000, b1 in 1u64..2000, extra in 1u64..2000) {
            prop_assume!(admissible(k));
            let b2 = b1 + extra;
            let goal = 1e-4;
            let first = plan_target(k, 0, b1, settings(goal)).unwrap();
            let second = plan_target(k, b1, b2, settings(goal)).unwrap();
            assert_tiles(k, b1, b2, &second.units);
            let mut all = first.units.clone();
            all.extend(second.units.iter().copied());
            assert_tiles(k, 0, b2, &all);
        }
    }

    #[test]
    fn too_many_units_is_refused_with_advice() {
        let e = plan_target(
            33,
            0,
            1_000_000,
            PlanSettings {
                unit_seconds: 1e-9,
                max_units: 1000,
            },
        )
        .unwrap_err();
        let m = e.to_string();
        assert!(
            m.contains("more than 1000 units") && m.contains("larger unit_seconds"),
            "{m}"
        );
    }

    #[test]
    fn inadmissible_k_is_refused_with_the_kernel_message() {
        let e = plan_target(4, 0, 100, settings(600.0)).unwrap_err();
        assert!(e.to_string().contains("mod 9"), "{e}");
    }
}
