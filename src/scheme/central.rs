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
