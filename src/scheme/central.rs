//! Central differences at two steps, with the error read off their spread.

use super::{conclusive, finite_pair, quantization, Estimate, Line};

/// Central difference at h = ε^(1/3)·max(|x|, 1) (shrunk until φ is finite
/// at both ends) and at 2h: value at h, error from the spread
/// (|D(2h) − D(h)|/3 estimates the O(h²) truncation at h) plus the
/// rounding of the outputs that moved, over the width.
pub(crate) fn estimate(line: &mut impl Line) -> Estimate {
    let first = line.eps().cbrt() * line.scale();
    let Some((h, near, mut evals)) = finite_pair(line, first) else {
        return Estimate::not_finite(80);
    };
    let mut far = line.pair(2.0 * h);
    evals += 2;
    if !far.finite {
        // The domain ends between h and 2h: compare with h/2 instead.
        far = line.pair(h / 2.0);
        evals += 2;
    }
    if !far.finite {
        return Estimate::not_finite(evals);
    }
    // |D(s₁) − D(s₂)| = |c|·|s₁² − s₂²|; the truncation at the chosen step
    // h is |c|·h², so scale the spread by h²/|s₁² − s₂²|.
    let (s_near, s_far) = (near.width / 2.0, far.width / 2.0);
    let spread = (far.derivative - near.derivative).abs();
    let truncation = spread * s_near * s_near / (s_far * s_far - s_near * s_near).abs();
    // Outputs that did not move may still depend on x below an ulp.
    let rounding =
        near.rounding(line.eps()) + far.rounding(line.eps()) + quantization(&near, line.eps());
    Estimate {
        value: near.derivative,
        error: truncation + rounding,
        scale: near.terms,
        forward_scale: near.touched / line.scale(),
        evals,
        step: s_near.max(s_far),
        conclusive: truncation <= rounding || conclusive(truncation, near.derivative, near.terms),
        amplification: 1.0,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::scheme::tests::Script;

    fn close(got: f64, want: f64, rel: f64) -> bool {
        (got - want).abs() <= rel * want.abs()
    }

    /// D(s) = 3 + s²: the truncation at h is h² (what the spread
    /// against 2h measures, 3h²/3), the rounding 4ε·touched/(2h) at h plus
    /// 4ε·touched/(4h) at 2h, the quantization 8ε·still/(2h): the error model
    /// in the doc comment of `estimate`, worked by hand.
    #[test]
    fn value_and_error_follow_the_documented_model() {
        let mut line = Script::new(3.0, |s: f64| Some(3.0 + s * s));
        line.touched = 2.0;
        line.still = 0.5;
        let e = estimate(&mut line);
        let h = f64::EPSILON.cbrt() * 3.0;
        assert_eq!(line.asked, vec![h, 2.0 * h]);
        let eps = f64::EPSILON;
        let want = h * h + 3.0 * eps * 2.0 / h + 4.0 * eps * 0.5 / h;
        assert!(close(e.value, 3.0 + h * h, 1e-15), "{e:?}");
        assert!(close(e.error, want, 1e-5), "{e:?} vs {want:e}");
        assert_eq!(e.scale, 3.0 + h * h);
        assert!(close(e.forward_scale, 2.0 / 3.0, 1e-15), "{e:?}");
        assert!(close(e.step, 2.0 * h, 1e-15), "{e:?}");
        assert_eq!((e.evals, e.amplification), (4, 1.0));
        assert!(e.conclusive);
    }

    #[test]
    fn the_step_grows_with_x() {
        let mut line = Script::new(-40.0, |s: f64| Some(1.0 + s));
        estimate(&mut line);
        let h = f64::EPSILON.cbrt() * 40.0;
        assert_eq!(line.asked, vec![h, 2.0 * h]);
    }

    #[test]
    fn a_domain_ending_between_h_and_2h_compares_with_h_over_2() {
        let h = f64::EPSILON.cbrt();
        let mut line = Script::new(0.0, |s: f64| (s <= 1.5 * h).then_some(3.0 + s * s));
        let e = estimate(&mut line);
        assert_eq!(line.asked, vec![h, 2.0 * h, h / 2.0]);
        // Spread 3h²/4 over |(h/2)² − h²| = 3h²/4, times h²: h² again; the
        // rounding 4ε/(2h) + 4ε/h.
        let want = h * h + 6.0 * f64::EPSILON / h;
        assert!(close(e.error, want, 1e-5), "{e:?} vs {want:e}");
        assert!(close(e.step, h, 1e-15), "{e:?}");
        assert_eq!(e.evals, 6);
        // Not finite at h: the first step shrinks to h/4 (finite_pair), the
        // second is h/2; every evaluation counted, 2 + 2 + 2.
        let mut line = Script::new(0.0, |s: f64| (s <= 0.6 * h).then_some(3.0 + s * s));
        let e = estimate(&mut line);
        assert_eq!(line.asked, vec![h, h / 4.0, h / 2.0]);
        assert_eq!(e.evals, 6);
        // Finite at h alone: no estimate, and the evaluations are counted.
        let mut line = Script::new(0.0, |s: f64| (s == h).then_some(1.0));
        let e = estimate(&mut line);
        assert!(e.value.is_nan() && e.error.is_nan(), "{e:?}");
        assert_eq!(e.evals, 6);
        // Finite nowhere.
        let e = estimate(&mut Script::new(0.0, |_| None));
        assert!(e.value.is_nan() && !e.conclusive);
        assert_eq!(e.evals, 80);
    }

    #[test]
    fn conclusive_unless_the_truncation_is_above_one_percent_and_the_rounding() {
        let h = f64::EPSILON.cbrt();
        // Truncation 1e5·h² = 3.7e-6 against a derivative of 1e-3: within 1%.
        let mut line = Script::new(0.0, |s: f64| Some(1e-3 + 1e5 * s * s));
        assert!(estimate(&mut line).conclusive);
        // ... against 1e-4: wide.
        let mut line = Script::new(0.0, |s: f64| Some(1e-4 + 1e5 * s * s));
        assert!(!estimate(&mut line).conclusive);
        // A truncation of the whole derivative (D = s²) hidden below the
        // rounding of outputs of 10⁶: decided by the rounding.
        let mut line = Script::new(0.0, |s: f64| Some(s * s));
        line.touched = 1e6;
        let e = estimate(&mut line);
        assert!(e.conclusive, "{e:?}");
        assert!(h * h < e.error);
    }
}
