//! Slopes where the forward is flat at its own precision.
//!
//! A forward that rounds a term away (1 + u² with u² below half an ulp of
//! 1, a small logit beside a large one) is exactly flat around x: every
//! difference quotient a reference takes there reads 0, while the function
//! it rounds has a slope, and a correct backward returns that slope.
//! Further out the rounded forward climbs in stairs, each one ulp of the
//! intermediate that absorbs the term. A central difference taken across
//! many stairs measures the slope again, with a rounding of at most one
//! stair at each end over the width.
//!
//! Not every flat stretch is a staircase: a ReLU dead at x is exactly flat
//! too, and its derivative really is 0. The two part where the forward
//! first moves. A rounded term moves it by a whole stair at once, and a
//! little further out it has not moved again; a piece that starts to rise
//! at a kink moves it by an amount that grows from 0 with the distance past
//! the kink. Only the first is read as stairs.

use super::Line;

/// The search for the first move doubles the distance this many times from
/// the reference's widest step (0.1·max(|x|, 1)), so up to about 6,500
/// times max(|x|, 1).
const DOUBLINGS: usize = 16;
/// Halvings that locate where the forward first moves, to 2⁻¹² of the
/// distance.
const HALVINGS: usize = 12;
/// At most this many widths (doubling from the first move's distance) of
/// the differences taken across the stairs.
const WIDTHS: usize = 8;
/// Beyond the onset, a stair stays at its height over the located
/// interval's width; a rising piece at least doubles its move there. A move
/// that grows by more than this factor is not a stair.
const STAIR_GROWTH: f64 = 1.25;

/// A slope measured across the stairs of a flat forward.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(crate) struct AcrossStairs {
    /// The central difference with the smallest error bar.
    pub value: f64,
    /// Its error bar: one stair at each end over the width, plus its
    /// distance from the difference at half the width (truncation).
    pub error: f64,
    /// Forward evaluations spent.
    pub evals: usize,
}

/// The slope of a forward that does not move at all over a reference's
/// steps, measured across its stairs further out; `None` when the forward
/// stays flat as far as the search goes (its derivative is 0 on that
/// scale), turns non-finite first, or first moves the way a kink's rising
/// piece does.
pub(crate) fn across_stairs(line: &mut impl Line) -> Option<AcrossStairs> {
    let mut evals = 0;
    let mut t = 0.1 * line.scale();
    let mut onset = None;
    for _ in 0..DOUBLINGS {
        t *= 2.0;
        let (p, m) = (line.at(t), line.at(-t));
        evals += 2;
        if !(p.finite && m.finite) {
            return None;
        }
        if p.delta != 0.0 || m.delta != 0.0 {
            onset = Some((t, if p.delta != 0.0 { 1.0 } else { -1.0 }));
            break;
        }
    }
    let (onset, side) = onset?;
    // Locate the first move on that side between onset/2 (flat on both
    // sides) and onset.
    let (mut flat, mut moved) = (onset / 2.0, onset);
    for _ in 0..HALVINGS {
        let mid = 0.5 * (flat + moved);
        let s = line.at(side * mid);
        evals += 1;
        if !s.finite {
            return None;
        }
        if s.delta == 0.0 {
            flat = mid;
        } else {
            moved = mid;
        }
    }
    let first = line.at(side * moved).delta;
    let beyond = line.at(side * (moved + (moved - flat))).delta;
    evals += 2;
    let is_stair = first != 0.0 && (beyond / first - 1.0).abs() <= STAIR_GROWTH - 1.0;
    if !is_stair {
        return None;
    }
    // One stair: the first move. Each end of a difference lies within one
    // stair of the function the forward rounds (half of one, rounding to
    // nearest; a stair may be higher elsewhere).
    let stair = first.abs();
    // The differences widen from half the onset, where the forward was
    // flat on both sides (a slope of 0, give or take a stair at each end
    // over the width: the first candidate), while each agrees with the one
    // before it. A slope that is not uniform over the width (an
    // exponential that wakes up further out, a piece beyond a kink) shows
    // as a jump between widths and ends the chain there, before a wider,
    // straighter stretch can pass for the slope at x.
    let mut previous = (0.0, onset);
    let mut best = (0.0, 2.0 * stair / onset);
    let mut width = onset;
    for _ in 0..WIDTHS {
        let (p, m) = (line.at(width), line.at(-width));
        evals += 2;
        if !(p.finite && m.finite) || p.step == m.step {
            break;
        }
        let full = p.step - m.step;
        let quotient = (p.delta - m.delta) / full;
        let (rounding, earlier) = (2.0 * stair / full, 2.0 * stair / previous.1);
        let jump = (quotient - previous.0).abs();
        if jump > rounding + earlier {
            break;
        }
        let error = rounding + jump;
        if error < best.1 {
            best = (quotient, error);
        }
        previous = (quotient, full);
        width *= 2.0;
    }
    Some(AcrossStairs {
        value: best.0,
        error: best.1,
        evals,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::scheme::ScalarLine;

    /// ln(1 + u²) with u = 10⁻⁹·x, in `f64`: at x = 3, u² = 9·10⁻¹⁸ rounds
    /// away against 1, so the forward is exactly 0 for |x| up to about 10,
    /// while the derivative is 2u·10⁻⁹/(1 + u²) ≈ 6·10⁻¹⁸ (calculus).
    fn absorbed(x: f64) -> f64 {
        let u = 1e-9 * x;
        (1.0 + u * u).ln()
    }

    /// A line that counts the forward evaluations asked of it.
    struct Counted<L> {
        inner: L,
        calls: usize,
    }

    impl<L: Line> Line for Counted<L> {
        fn eps(&self) -> f64 {
            self.inner.eps()
        }
        fn x(&self) -> f64 {
            self.inner.x()
        }
        fn at(&mut self, t: f64) -> crate::scheme::Sample {
            self.calls += 1;
            self.inner.at(t)
        }
        fn pair(&mut self, h: f64) -> crate::scheme::Pair {
            self.calls += 2;
            self.inner.pair(h)
        }
    }

    type CountedFn = Counted<ScalarLine<fn(f64) -> f64>>;

    fn counted(f: fn(f64) -> f64, x: f64) -> CountedFn {
        Counted {
            inner: ScalarLine::new(f, x),
            calls: 0,
        }
    }

    #[test]
    fn a_rounded_away_square_is_measured_across_its_stairs() {
        // At x = 3 both sides first move together; at x = −10 the side
        // away from 0 moves first (|x − t| reaches 14.9 at t = 4.9, x + t
        // only at t = 24.9).
        for x in [3.0, -10.0] {
            let mut line = counted(absorbed, x);
            assert_eq!(line.at(0.3 * x.abs().max(1.0)).delta, 0.0, "flat at {x}");
            line.calls = 0;
            let s = across_stairs(&mut line).expect("stairs further out");
            let exact = 2.0 * x * 1e-18 / (1.0 + (1e-9 * x).powi(2));
            assert!((s.value - exact).abs() <= s.error, "at {x}: {s:?}");
            assert!(s.error < 0.5 * exact.abs(), "a factor of two at {x}: {s:?}");
            assert_eq!(s.evals, line.calls, "at {x}: {s:?}");
        }
    }

    #[test]
    fn a_slope_that_wakes_up_further_out_does_not_pass_for_the_slope_at_x() {
        // ln(1 + e^(x − 60)) summed naively, at x = 3: 1 + 1.7·10⁻²⁵ rounds
        // to 1, so the forward is 0 up to x ≈ 23, then rises to slope 1
        // beyond x = 60. The derivative at 3 is e^(−57) ≈ 1.7·10⁻²⁵
        // (calculus); the straight stretch far out must not be taken for it.
        // The forward first moves between 19.2 and 38.4 away, by one ulp
        // of 1 (2.2·10⁻¹⁶), and the difference at 38.4 already jumps far
        // beyond that stair: what remains is the flat difference, 0 within
        // 2 stairs over its width 38.4 (1.2·10⁻¹⁷).
        let mut line = counted(|x: f64| (1.0 + (x - 60.0).exp()).ln(), 3.0);
        let s = across_stairs(&mut line).expect("a stair at the onset");
        let exact = (-57.0_f64).exp();
        assert!((s.value - exact).abs() <= s.error, "{s:?}");
        assert_eq!(s.value, 0.0, "{s:?}");
        assert!(s.error < 1.5e-17, "{s:?}");
        assert_eq!(s.evals, line.calls, "{s:?}");
    }

    #[test]
    fn a_dead_relu_is_not_read_as_stairs() {
        // max(x − 40, 0) at x = 3: flat, then rising past a kink.
        let mut line = ScalarLine::new(|x: f64| (x - 40.0).max(0.0), 3.0);
        assert_eq!(across_stairs(&mut line), None);
    }

    #[test]
    fn a_forward_flat_as_far_as_the_search_goes_has_no_stairs() {
        let mut line = ScalarLine::new(|_: f64| 2.5, 3.0);
        assert_eq!(across_stairs(&mut line), None);
    }

    #[test]
    fn a_forward_that_turns_non_finite_first_has_no_stairs() {
        // ln(1 + u²), overflowing beyond x = 10, before its first stair.
        let f = |x: f64| if x > 10.0 { f64::INFINITY } else { absorbed(x) };
        let mut line = ScalarLine::new(f, 3.0);
        assert_eq!(across_stairs(&mut line), None);
    }
}
