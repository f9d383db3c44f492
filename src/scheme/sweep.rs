//! Central differences over a sweep of steps: the data of the
//! error-against-step picture.
//!
//! The error of a central difference D(h) = (φ(x+h) − φ(x−h))/2h is the sum
//! of a truncation error, about h²/6·|φ‴| (Taylor's theorem), that falls as
//! the step shrinks, and a rounding error, about ε·|φ|/h, that rises: on
//! log-log axes the distance of D(h) from the true derivative draws a V
//! whose bottom lies near h = (3ε·|φ|/|φ‴|)^(1/3) (common practice). A
//! backward whose value sits far above the bottom of that V at every step
//! is wrong whatever step one would have picked.

use super::Line;

/// Steps in a sweep.
pub(crate) const SWEEP_STEPS: usize = 25;

/// The smallest step, in units of ε·max(|x|, 1): rounding is then about a
/// tenth of the derivative's size, well up the rounding arm of the V.
const LOWEST: f64 = 10.0;

/// The largest step, as a fraction of max(|x|, 1): truncation dominates
/// there for any φ that bends on the scale of 1 or of x.
const HIGHEST: f64 = 0.1;

/// Central differences at [`SWEEP_STEPS`] steps spaced evenly in log from
/// 10·ε·max(|x|, 1) to 0.1·max(|x|, 1) (ε of the line's arithmetic), each
/// as (half-width actually used, derivative). The derivative is NaN where
/// φ is not finite at either end (the domain ends, or the forward
/// panicked). Costs two evaluations per step.
pub(crate) fn sweep(line: &mut impl Line) -> Vec<(f64, f64)> {
    let scale = line.scale();
    let low = (LOWEST * line.eps() * scale).ln();
    let high = (HIGHEST * scale).ln();
    let last = (SWEEP_STEPS - 1) as f64;
    (0..SWEEP_STEPS)
        .map(|k| {
            let h = (low + (high - low) * k as f64 / last).exp();
            let pair = line.pair(h);
            let half = pair.width / 2.0;
            let value = if pair.finite && pair.width > 0.0 {
                pair.derivative
            } else {
                f64::NAN
            };
            (if half > 0.0 { half } else { h }, value)
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::scheme::tests::Script;

    #[test]
    fn steps_are_log_spaced_from_ten_ulps_to_a_tenth_of_the_scale() {
        let mut line = Script::new(-4.0, |s: f64| Some(2.0 + s));
        let points = sweep(&mut line);
        assert_eq!(points.len(), SWEEP_STEPS);
        assert_eq!(line.asked.len(), SWEEP_STEPS);
        let (first, last) = (line.asked[0], line.asked[SWEEP_STEPS - 1]);
        assert!((first / (10.0 * f64::EPSILON * 4.0) - 1.0).abs() < 1e-12);
        assert!((last / 0.4 - 1.0).abs() < 1e-12);
        let ratio = line.asked[1] / line.asked[0];
        for w in line.asked.windows(2) {
            assert!((w[1] / w[0] / ratio - 1.0).abs() < 1e-9, "{w:?}");
        }
        for (&(half, d), &asked) in points.iter().zip(&line.asked) {
            assert_eq!(half, asked);
            assert_eq!(d, 2.0 + asked);
        }
    }

    #[test]
    fn a_step_where_phi_is_not_finite_gives_nan() {
        let mut line = Script::new(0.0, |s: f64| (s < 1e-3).then_some(1.0));
        let points = sweep(&mut line);
        assert!(points.iter().all(|&(h, d)| (h < 1e-3) == d.is_finite()));
        assert!(points.iter().any(|&(_, d)| d.is_nan()));
    }
}
