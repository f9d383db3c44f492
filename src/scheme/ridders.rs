//! Ridders' method: central differences at a geometric sequence of
//! shrinking steps, extrapolated to a zero step.
//!
//! C. J. F. Ridders, "Accurate computation of F′(x) and F′(x)F″(x)",
//! *Advances in Engineering Software* 4(2):75–76, 1982. The central
//! difference D(s) = (φ(x+s) − φ(x−s))/2s has an error expansion in even
//! powers of s, D(s) = φ′ + c₁s² + c₂s⁴ + …, so two differences at steps in
//! the ratio r eliminate the leading term (Richardson's idea):
//! (r²·D(s/r) − D(s))/(r² − 1) = φ′ + O(s⁴). Repeating the elimination on
//! the eliminated values removes s⁴, s⁶, … in turn (Neville's scheme for
//! extrapolating a polynomial in s² to s = 0). Each new, smaller step adds
//! one row of ever higher orders; the distance of an entry from its two
//! parents estimates its error, and the entry with the smallest such error
//! is the answer. Once the highest order of a new row moves away from the
//! previous row's by more than `STOP_RATIO` times that error, rounding has
//! taken over from truncation and smaller steps cannot help.
//!
//! The code here is written from that description; its structure and names
//! are the project's own.

use super::{conclusive, finite_pair, quantization, Estimate, Line};

/// Each step is the previous one divided by `shrink`.
const SHRINK: f64 = 1.4;
/// At most this many steps (rows), hence orders of elimination.
const MAX_ROWS: usize = 10;
/// Stop when the newest highest-order value moves by more than this many
/// times the best error so far.
const STOP_RATIO: f64 = 2.0;
/// At most this many restarts from smaller first steps: with the checks
/// and the extrapolation's ten rows, an element costs at most a few
/// hundred evaluations whatever the forward does.
const MAX_RESTARTS: usize = 12;
/// The distance of an entry from its parents can understate its true
/// error several times over (measured on the published test function and
/// the DLMF values in `tests/schemes.rs`); the error bar is this many
/// times that distance.
const TRUST: f64 = 10.0;

/// The best entry seen so far.
#[derive(Clone, Copy)]
struct Best {
    value: f64,
    error: f64,
    /// Rounding of the smallest step that entry used.
    rounding: f64,
    /// The widest step that entry used.
    step: f64,
    /// Σ|terms| of the quotient at the smallest step that entry used.
    terms: f64,
}

/// The next row: the fresh central difference at the new step, then each
/// order of elimination combining this row's previous order with the
/// previous row's same order. `ratio2` is shrink².
fn next_row(previous: &[f64], fresh: f64, ratio2: f64) -> Vec<f64> {
    let mut row = Vec::with_capacity(previous.len() + 1);
    row.push(fresh);
    let mut weight = ratio2;
    for &older in previous {
        let newer = row[row.len() - 1];
        row.push(newer + (newer - older) / (weight - 1.0));
        weight *= ratio2;
    }
    row
}

/// The extrapolation from `first_step` (shrunk until φ is finite at both
/// ends), without the small-step cross-check. `scale` is the typical scale
/// of x the steps are relative to.
fn extrapolate(line: &mut impl Line, first_step: f64, scale: f64) -> Estimate {
    let eps = line.eps();
    let Some((mut step, first, mut evals)) = finite_pair(line, first_step) else {
        return Estimate::not_finite(80);
    };
    let ratio2 = SHRINK * SHRINK;
    // Half-widths of the rows, widest first: entry k of row n uses rows
    // n − k ..= n.
    let mut steps = vec![first.width / 2.0];
    let mut previous = vec![first.derivative];
    let mut best = Best {
        value: first.derivative,
        error: f64::INFINITY,
        rounding: first.rounding(eps),
        step: first.width / 2.0,
        terms: first.terms,
    };
    for _ in 1..MAX_ROWS {
        step /= SHRINK;
        let pair = line.pair(step);
        evals += 2;
        if !pair.finite {
            break;
        }
        steps.push(pair.width / 2.0);
        let row = next_row(&previous, pair.derivative, ratio2);
        let newest = steps.len() - 1;
        for order in 1..row.len() {
            let error = (row[order] - row[order - 1])
                .abs()
                .max((row[order] - previous[order - 1]).abs());
            if error <= best.error {
                best = Best {
                    value: row[order],
                    error,
                    rounding: pair.rounding(eps),
                    step: steps[newest - order],
                    terms: pair.terms,
                };
            }
        }
        let moved = (row[row.len() - 1] - previous[previous.len() - 1]).abs();
        previous = row;
        if moved >= STOP_RATIO * best.error {
            break;
        }
    }
    // Entries can agree by chance (a linear φ): never claim less than the
    // rounding of the smallest step used, nor than 16ε of the terms, nor
    // than what outputs that did not move even at the widest step may hide.
    // The terms are those near the point (the best entry's smallest step):
    // a first step far wider than the scale φ changes on can sum terms
    // that are orders of magnitude larger, and must not widen the bound
    // nor make a poor extrapolation look conclusive.
    let floor = (4.0 * best.rounding)
        .max(16.0 * eps * (best.value.abs() + best.terms))
        .max(quantization(&first, eps));
    let truncation = TRUST * best.error;
    Estimate {
        value: best.value,
        error: truncation.max(floor),
        scale: best.terms,
        forward_scale: first.touched / scale,
        evals,
        step: best.step,
        amplification: 1.0,
        conclusive: first.touched > 0.0
            && (truncation <= floor || conclusive(truncation, best.value, best.terms)),
    }
}

/// One Richardson elimination over central differences at the small steps
/// s and s/2 (s shrunk until φ is finite): error O(s⁴) plus rounding.
/// Independent of the extrapolation's first steps.
pub(crate) struct Check {
    pub value: f64,
    pub rounding: f64,
    pub step: f64,
    pub evals: usize,
}

pub(crate) fn check_at(line: &mut impl Line, step: f64) -> Option<Check> {
    let (step, wide, evals) = finite_pair(line, step)?;
    let narrow = line.pair(step / 2.0);
    if !narrow.finite {
        return None;
    }
    Some(Check {
        value: (4.0 * narrow.derivative - wide.derivative) / 3.0,
        rounding: 2.0 * narrow.rounding(line.eps()),
        step,
        evals: evals + 2,
    })
}

/// The check at s = 2ε^(1/3)·max(|x|, 1).
pub(crate) fn small_step_check(line: &mut impl Line) -> Option<Check> {
    let scale = line.scale();
    check_at_scale(line, scale)
}

/// The first check's step, 2ε^(1/3)·`scale`.
fn check_step(line: &impl Line, scale: f64) -> f64 {
    2.0 * line.eps().cbrt() * scale
}

/// The check at s = 2ε^(1/3)·`scale`.
fn check_at_scale(line: &mut impl Line, scale: f64) -> Option<Check> {
    let step = check_step(line, scale);
    check_at(line, step)
}

/// Ridders' method from a first step of 0.1·max(|x|, 1).
///
/// Where that stays undecided and the element's tensor lives on a scale s
/// finer than the cross-checks' steps ([`Line::fine_scale`]: weights of
/// 10⁻³ that the forward normalises change it on their own scale, which
/// steps relative to 1 never reach), the method runs again with every step
/// relative to s, as an independent estimate: two estimates that differ by
/// d leave an uncertainty of at least d, so the error bar widens to that
/// distance. The finer run does not replace the first: at steps that small
/// a forward that cancels inside has a computed slope of its own, which
/// the finer run measures with confidence (on the quality bench's random
/// programs, taking it raised more false alarms than it removed).
pub(crate) fn estimate(line: &mut impl Line) -> Estimate {
    let scale = line.scale();
    let mut unit = estimate_at(line, scale, 0.1 * scale);
    // The unit run's cross-checks are no check on a scale finer than
    // their own steps.
    let widest_check = check_step(line, scale);
    let reached = |fine: &f64| !unit.conclusive && *fine < widest_check;
    if let Some(fine) = line.fine_scale().filter(reached) {
        let finer = estimate_at(line, fine, 0.1 * fine);
        unit.evals += finer.evals;
        if finer.value.is_finite() {
            unit.error = unit.error.max((finer.value - unit.value).abs());
        }
    }
    unit
}

/// Ridders' method from `first_step`, cross-checked against one Richardson
/// elimination over central differences at the small steps
/// 2ε^(1/3)·max(|x|, 1) and half that (error O(s⁴)).
///
/// Where the extrapolation stays wide, or lands outside its own error bar
/// around a check (φ changes on a scale finer than the first steps, and
/// the extrapolation converged to the wrong value), it starts again from a
/// first step 8× smaller, down to 8× the smallest check's step, and keeps
/// the first decided estimate. The final error bar is never below the
/// distance to the check at 2ε^(1/3)·max(|x|, 1): two independent
/// estimates that differ by d leave an uncertainty of at least d.
pub(crate) fn estimate_from(line: &mut impl Line, first_step: f64) -> Estimate {
    let scale = line.scale();
    estimate_at(line, scale, first_step)
}

/// [`estimate_from`] with the checks (and the forward's scale) relative to
/// `scale` instead of max(|x|, 1).
fn estimate_at(line: &mut impl Line, scale: f64, first_step: f64) -> Estimate {
    let Some(check) = check_at_scale(line, scale) else {
        return Estimate::not_finite(80);
    };
    let mut evals = check.evals;
    let checks = finer_checks(line, check, &mut evals);
    // The first check's rounding is well modelled; a finer one's less so
    // (intermediates that cancel inside the forward add to it), so it is
    // given ten times the room.
    let room = |k: usize| if k == 0 { 10.0 } else { 100.0 };
    let fits = |e: &Estimate| {
        checks.iter().enumerate().all(|(k, c)| {
            (e.value - c.value).abs() <= e.error + room(k) * c.rounding + 1e-9 * c.value.abs()
        })
    };
    let lowest = checks.iter().map(|c| c.step).fold(f64::INFINITY, f64::min);
    let mut first = first_step;
    let mut best = extrapolate(line, first, scale);
    best.conclusive &= fits(&best);
    evals += best.evals;
    // Restarts: 8× smaller first steps down to 64× the first check's step,
    // then 64× smaller down to 8× the finest check's.
    let mut restarts = 0;
    while !best.conclusive && first / 8.0 >= 8.0 * lowest && restarts < MAX_RESTARTS {
        restarts += 1;
        let shrink = if first / 8.0 >= 64.0 * checks[0].step {
            8.0
        } else {
            64.0
        };
        first = (first / shrink).max(8.0 * lowest);
        let mut next = extrapolate(line, first, scale);
        next.conclusive &= fits(&next);
        evals += next.evals;
        if next.conclusive || next.error < best.error || !best.error.is_finite() {
            best = next;
        }
    }
    if best.value.is_finite() {
        // Two independent estimates that differ by d leave an uncertainty
        // of at least d.
        best.error = best.error.max((best.value - checks[0].value).abs());
        for c in &checks[1..] {
            best.error = best
                .error
                .max((best.value - c.value).abs() - room(1) * c.rounding);
        }
    }
    best.evals = evals;
    best
}

/// The first check, then checks at steps 64 and 64² times smaller while
/// their rounding stays below 10⁻³ of the derivative: a function that moves
/// on a scale finer than the first check (a max whose arguments nearly tie
/// switches a few 10⁻⁷ away, values of 10⁻⁶ multiplied together) looks
/// flat or straight from further out, and only a finer step sees it.
fn finer_checks(line: &mut impl Line, first: Check, evals: &mut usize) -> Vec<Check> {
    let size = first.value.abs();
    let mut step = first.step;
    let mut out = vec![first];
    for _ in 0..2 {
        step /= 64.0;
        let Some(c) = check_at(line, step) else {
            break;
        };
        *evals += c.evals;
        let informative = c.rounding <= 1e-3 * size.max(c.value.abs());
        if !informative {
            break;
        }
        out.push(c);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn one_row_of_elimination_removes_the_square_term() {
        // D(s) = 1 + s² at s = 1 and s = 1/1.4: the first elimination
        // recovers the limit 1 exactly (up to rounding).
        let r2 = SHRINK * SHRINK;
        let row = next_row(&[2.0], 1.0 + 1.0 / r2, r2);
        assert!((row[1] - 1.0).abs() < 1e-15, "{row:?}");
    }

    #[test]
    fn two_orders_remove_square_and_fourth_power_terms() {
        // D(s) = 1 + s² + s⁴ at s = 1, 1/1.4, 1/1.96.
        let r2 = SHRINK * SHRINK;
        let d = |s: f64| 1.0 + s * s + s.powi(4);
        let row1 = next_row(&[d(1.0)], d(1.0 / SHRINK), r2);
        let row2 = next_row(&row1, d(1.0 / (SHRINK * SHRINK)), r2);
        assert!((row2[2] - 1.0).abs() < 1e-14, "{row2:?}");
    }

    use crate::scheme::tests::Script;

    /// The check step at x = 0: 2ε^(1/3) (doc comment of `small_step_check`).
    fn check_step() -> f64 {
        2.0 * f64::EPSILON.cbrt()
    }

    #[test]
    fn the_steps_follow_the_documented_ladder() {
        // D(s) = 2 + s² + s⁴: even powers only, as Ridders' method assumes;
        // the extrapolation recovers 2 (the derivative) to rounding.
        let mut line = Script::new(0.0, |s: f64| Some(2.0 + s * s + s.powi(4)));
        let e = estimate_from(&mut line, 0.1);
        let s = check_step();
        // Checks at s and s/2, then 64 and 64² times finer; then the
        // extrapolation from 0.1, each row 1.4 times smaller.
        let want = [s, s / 2.0, s / 64.0, s / 128.0, s / 4096.0, s / 8192.0];
        assert_eq!(line.asked[..6], want);
        assert_eq!(line.asked[6..9], [0.1, 0.1 / 1.4, 0.1 / 1.4 / 1.4]);
        assert!((e.value - 2.0).abs() < 1e-13, "{e:?}");
        assert!(e.error >= (e.value - 2.0).abs() && e.error < 1e-12, "{e:?}");
        // The floor: 16ε·(|value| + Σ|terms|) = 16ε·4 at least.
        assert!(e.error >= 64.0 * f64::EPSILON, "{e:?}");
        assert!(e.conclusive, "{e:?}");
        assert_eq!(e.evals, 2 * line.asked.len(), "{e:?}");
        assert!(e.step > 0.0 && e.step <= 0.1, "{e:?}");
        // `estimate` starts from 0.1·max(|x|, 1), the check from 2ε^(1/3)·max(|x|, 1).
        let mut line = Script::new(-30.0, |s: f64| Some(2.0 + s * s));
        estimate(&mut line);
        assert_eq!(line.asked[0], 30.0 * s);
        assert_eq!(line.asked[6], 3.0);
    }

    #[test]
    fn an_extrapolation_off_the_checks_restarts_from_smaller_steps() {
        // D jumps from 2 to 3 beyond s = 1e-3: from 0.1 every row sees 3 and
        // extrapolates confidently to 3, which the checks (2) refute. The
        // restarts go 8× down while above 64× the check step, then 64× down
        // (DEVELOPERS.md, "Restarts"): 0.0125, 0.0015625, 0.0015625/64.
        let mut line = Script::new(0.0, |s: f64| Some(if s > 1e-3 { 3.0 } else { 2.0 }));
        let e = estimate_from(&mut line, 0.1);
        for first in [0.0125, 0.0015625, 0.0015625 / 64.0] {
            assert!(
                line.asked.contains(&first),
                "{first} not in {:?}",
                line.asked
            );
        }
        assert!(!line.asked.contains(&(0.0015625 / 8.0)));
        assert_eq!(e.value, 2.0, "{e:?}");
        assert!(e.conclusive, "{e:?}");
        assert_eq!(e.evals, 2 * line.asked.len(), "{e:?}");
    }

    #[test]
    fn the_error_bar_is_never_below_the_distance_to_the_check() {
        // The checks see 2 + 1e-9 (D changes below s = 1e-4), the
        // extrapolation from 0.1 sees 2 exactly: they fit within 10× the
        // check's rounding, and the bar is their distance, 1e-9.
        let mut line = Script::new(0.0, |s: f64| Some(if s < 1e-4 { 2.0 + 1e-9 } else { 2.0 }));
        let e = estimate_from(&mut line, 0.1);
        assert_eq!(e.value, 2.0, "{e:?}");
        assert!((e.error - 1e-9).abs() < 1e-15, "{e:?}");
        assert!(e.conclusive, "{e:?}");
    }

    #[test]
    fn nothing_moved_is_never_conclusive() {
        let mut line = Script::new(0.0, |s: f64| Some(2.0 + s * s));
        line.touched = 0.0;
        let e = estimate_from(&mut line, 0.1);
        assert!(!e.conclusive, "{e:?}");
        assert!((e.value - 2.0).abs() < 1e-13, "{e:?}");
        // A forward not finite anywhere: NaN.
        let e = estimate_from(&mut Script::new(0.0, |_| None), 0.1);
        assert!(e.value.is_nan() && !e.conclusive, "{e:?}");
    }

    /// A line whose first six pairs (the checks of
    /// `the_steps_follow_the_documented_ladder`) see D = 2 and every later
    /// pair D = `later(s)`, which stays near 3: no extrapolation ever fits a
    /// check, so `estimate_from` runs every restart its rules allow.
    fn refuted(later: fn(f64) -> f64) -> Script<impl FnMut(f64) -> Option<f64>> {
        let mut calls = 0;
        Script::new(0.0, move |s| {
            calls += 1;
            Some(if calls <= 6 { 2.0 } else { later(s) })
        })
    }

    /// A `refuted` line with D = 3 after the checks. A constant D stops
    /// each extrapolation after its second row (the new row moves by
    /// 0 ≥ STOP_RATIO × 0), so each pass asks exactly two steps, the first
    /// of which is that pass's first step.
    fn refuted_everywhere() -> Script<impl FnMut(f64) -> Option<f64>> {
        refuted(|_| 3.0)
    }

    /// The first steps of the passes of a `refuted_everywhere` line.
    fn first_steps(asked: &[f64]) -> Vec<f64> {
        assert_eq!(asked.len() % 2, 0, "{asked:?}");
        asked[6..].iter().step_by(2).copied().collect()
    }

    #[test]
    fn restarts_stop_at_eight_times_the_finest_check_step() {
        // Internal logic, from the restart rule in `estimate_from`: 8× down
        // while first/8 ≥ 64·s, then 64× down, clamped at 8× the finest
        // check's step (s/4096, so 8·s/4096), and no restart once first/8
        // falls below that. From 0.1 with s = 2ε^(1/3): 0.0125, 0.0015625,
        // 0.0015625/64, 0.0015625/64², then the clamp s/512.
        let mut line = refuted_everywhere();
        let e = estimate_from(&mut line, 0.1);
        let s = check_step();
        let want = [
            0.1,
            0.0125,
            0.0015625,
            0.0015625 / 64.0,
            0.0015625 / 4096.0,
            s / 512.0,
        ];
        assert_eq!(first_steps(&line.asked), want);
        assert!(!e.conclusive, "{e:?}");
        // No pass fits: the answer is the extrapolation (3), and its bar
        // covers the distance to the check (2).
        assert_eq!(e.value, 3.0, "{e:?}");
        assert!(e.error >= 1.0, "{e:?}");
        assert_eq!(e.evals, 2 * line.asked.len(), "{e:?}");
        // Each later pass has a wider bar (the rounding 4ε/width grows as
        // the steps shrink), so the first pass is the one kept: its value
        // relied on its first step, 0.1.
        assert_eq!(e.step, 0.1, "{e:?}");
    }

    #[test]
    fn a_later_pass_replaces_the_kept_one_only_with_a_strictly_smaller_bar() {
        // Internal logic, from the replacement rule in `estimate_from`
        // (conclusive, or a strictly smaller error, or no finite error
        // yet). With nothing moved (touched = 0) every pass of a constant
        // D has the same bar, 16ε·(|3| + 3): the first pass is kept.
        let mut line = refuted_everywhere();
        line.touched = 0.0;
        let e = estimate_from(&mut line, 0.1);
        assert_eq!(first_steps(&line.asked).len(), 6, "{:?}", line.asked);
        assert_eq!(e.step, 0.1, "{e:?}");
        // D = 3 + s after the checks: an odd power, which the elimination
        // does not remove, so a pass's bar shrinks with its first step and
        // a later, narrower pass is kept.
        let mut line = refuted(|s| 3.0 + s);
        let e = estimate_from(&mut line, 0.1);
        assert!(!e.conclusive, "{e:?}");
        assert!(e.step < 0.01, "{e:?}");
        assert!((e.value - 3.0).abs() < 0.01, "{e:?}");
    }

    #[test]
    fn restarts_are_capped() {
        // From a first step of 1e10 the 8× ladder alone would allow 14
        // restarts before reaching 64·s; MAX_RESTARTS = 12 stops it, so
        // the passes start at 1e10, 1e10/8, …, 1e10/8¹² (internal logic,
        // from the loop condition in `estimate_from`).
        let mut line = refuted_everywhere();
        let e = estimate_from(&mut line, 1e10);
        let firsts = first_steps(&line.asked);
        assert_eq!(firsts.len(), 1 + MAX_RESTARTS, "{firsts:?}");
        for (k, f) in firsts.iter().enumerate() {
            assert_eq!(*f, 1e10 / 8f64.powi(k as i32));
        }
        assert!(!e.conclusive, "{e:?}");
    }

    #[test]
    fn a_check_of_a_large_derivative_fits_within_a_billionth_of_it() {
        // Internal logic, from `fits` and the final bar in `estimate_from`:
        // an extrapolation fits a check within its error bar, room·rounding
        // and 1e-9 of |check|; a finer check's distance, less its room,
        // still widens the final bar. Here the extrapolation's steps see
        // D = 1000 and the rounding is made negligible (touched = 1e-6:
        // room·rounding below 1e-14), so only the relative 1e-9·1000 = 1e-6
        // lets a check 5e-7 away fit, and the first pass from 0.1 is kept
        // without a restart. The bar is that distance.
        for first_check_moved in [true, false] {
            // All checks below 1e-4 see 1000 + 5e-7; or only the finer ones
            // (below 1e-6; the first check's steps s and s/2 are above it).
            let edge = if first_check_moved { 1e-4 } else { 1e-6 };
            let mut line = Script::new(0.0, move |s: f64| {
                Some(if s < edge { 1000.0 + 5e-7 } else { 1000.0 })
            });
            line.touched = 1e-6;
            let e = estimate_from(&mut line, 0.1);
            assert_eq!(e.value, 1000.0, "{e:?}");
            assert!(e.conclusive, "{e:?}");
            assert!(!line.asked.contains(&0.0125), "{:?}", line.asked);
            assert!((e.error - 5e-7).abs() < 1e-12, "{first_check_moved}: {e:?}");
        }
    }

    #[test]
    fn a_finer_check_is_kept_while_its_rounding_is_below_a_thousandth() {
        // Internal logic, from `finer_checks`: a check at s/64 (and then
        // s/4096) is kept while its rounding 2·4ε·touched/(step) stays at
        // most 1e-3 of the derivative (here 2); the first one that fails
        // ends the ladder. At s/64 that rounding is 9.39e-9·touched.
        let s = check_step();
        // touched = 1e5: 9.4e-4 at s/64 (kept), 6.0e-2 at s/4096 (dropped).
        let mut line = Script::new(0.0, |_| Some(2.0));
        line.touched = 1e5;
        estimate_from(&mut line, 0.1);
        let want = [s, s / 2.0, s / 64.0, s / 128.0, s / 4096.0, s / 8192.0, 0.1];
        assert_eq!(line.asked[..7], want);
        // touched = 1e6: 9.4e-3 at s/64, dropped, and no check beyond it.
        let mut line = Script::new(0.0, |_| Some(2.0));
        line.touched = 1e6;
        estimate_from(&mut line, 0.1);
        assert_eq!(line.asked[..5], [s, s / 2.0, s / 64.0, s / 128.0, 0.1]);
    }
}
