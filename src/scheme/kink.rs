//! The one-sided test for non-differentiable points (ReLU at 0, |x| at 0,
//! max-pool ties).
//!
//! With the gap between the one-sided differences
//! Δ(s) = [φ(x+s) − 2φ(x) + φ(x−s)]/s, a smooth φ gives Δ(s) ≈ s·φ″, which
//! shrinks linearly with the step, while a kink at x leaves Δ(s) ≈ J, the
//! jump of φ′. So the ratio Δ(h/4)/Δ(h) is about 1/4 for smooth φ and about
//! 1 at a kink; a kink further out than h/4 but within h shows a ratio near
//! 0. The test follows from the Taylor expansion of the one-sided
//! differences (DEVELOPERS.md, "Kinks").

use super::{Line, Sample};

/// What the one-sided kink test saw at a point.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct KinkProbe {
    /// One-sided derivative from the left, (φ(x) − φ(x − s))/s.
    pub left: f64,
    /// One-sided derivative from the right, (φ(x + s) − φ(x))/s.
    pub right: f64,
    /// Allowance on each side for rounding and for the curvature of φ
    /// over the step (the one-sided slopes' change between steps h and h/4).
    pub noise: f64,
    /// `true` if the kink lies within a quarter step of the point; `false`
    /// if it lies further out but inside the step (the point itself is
    /// smooth, but a difference over the full step is not).
    pub at_point: bool,
}

/// Gaps below this many times their rounding count as smooth.
const NOISE_MULTIPLE: f64 = 10.0;

/// The one-sided kink test: four evaluations φ(x ± h), φ(x ± h/4) against
/// φ(x). Returns the one-sided derivatives at step h/4 when φ is not smooth
/// within ±h, `None` when it is.
///
/// A function that bends on a scale below the step (a kink followed by a
/// steep saturation) looks rough rather than kinked at h: the test then
/// tries again at h/64 and h/4096 before calling it smooth. A jump that is
/// below the rounding at h (small steps in `f32`) is looked for again at
/// 8h and 64h.
pub(crate) fn kink_test(line: &mut impl Line, h: f64) -> Option<KinkProbe> {
    let mut step = h;
    let mut widened = 0;
    for _ in 0..5 {
        match kink_at_step(line, step) {
            Shape::Smooth => return hidden_kink(line, step),
            Shape::Kink(p) => return Some(p),
            Shape::Rough => step /= 64.0,
            Shape::Quiet if widened < 2 && step >= h => {
                widened += 1;
                step *= 8.0;
            }
            Shape::Quiet => return None,
        }
    }
    None
}

/// A kink under strong curvature (|x| at 0 beside a sharp bump) passes the
/// ratio test as smooth: the gap is Δ(s) = J + s·φ″ + O(s²), and s·φ″
/// dwarfs the jump J. The gaps at s and s/4 give J ≈ (4Δ(s/4) − Δ(s))/3;
/// a kink shows the same J at steps 64 times apart, smooth φ shows none.
/// Tried from `h` down to h/64⁴; the one-sided derivatives are
/// extrapolated the same way.
fn hidden_kink(line: &mut impl Line, h: f64) -> Option<KinkProbe> {
    let jump = |s: &OneSided| (4.0 * s.gap_narrow - s.gap_wide) / 3.0;
    // The previous step's jump and its noise.
    let mut previous: Option<(f64, f64)> = None;
    let mut step = h;
    for _ in 0..5 {
        let s = OneSided::measure(line, step)?;
        let j = jump(&s);
        let noise = NOISE_MULTIPLE * s.noise_narrow;
        if let Some((p, p_noise)) = previous {
            if j.abs() <= noise && p.abs() <= 2.0 * p_noise {
                return None;
            }
            // Both jumps clearly above their noise, and the same within it.
            let significant = j.abs() > 2.0 * noise && p.abs() > 2.0 * p_noise;
            let same = (j - p).abs() <= 0.1 * j.abs().max(p.abs()) + noise + p_noise;
            if significant && same {
                let left = (4.0 * s.left - s.left_wide) / 3.0;
                let right = (4.0 * s.right - s.right_wide) / 3.0;
                return Some(KinkProbe {
                    left,
                    right,
                    noise: s.allowance(),
                    at_point: true,
                });
            }
        }
        previous = Some((j, noise));
        step /= 64.0;
    }
    None
}

/// What one step of the kink test saw.
enum Shape {
    Smooth,
    /// Both gaps below their rounding: no kink larger than the rounding.
    Quiet,
    Kink(KinkProbe),
    /// Neither: the one-sided slopes change with the step.
    Rough,
}

fn kink_at_step(line: &mut impl Line, h: f64) -> Shape {
    let Some(s) = OneSided::measure(line, h) else {
        return Shape::Smooth;
    };
    if s.gap_wide.abs() <= NOISE_MULTIPLE * s.noise_wide
        && s.gap_narrow.abs() <= NOISE_MULTIPLE * s.noise_narrow
    {
        return Shape::Quiet;
    }
    let ratio = s.gap_narrow / s.gap_wide;
    if (ratio - 0.25).abs() <= 0.15 {
        return Shape::Smooth;
    }
    let at_point = ratio.abs() > 0.5;
    // A kink at the point leaves the one-sided slopes nearly the same at h
    // and h/4; a function that merely bends faster than the step does not,
    // and is no kink at this step (it must not excuse a disagreement).
    if at_point && !s.stable(0.5) {
        return Shape::Rough;
    }
    // A jump of φ′ at the point keeps the gap as the step shrinks; a smooth
    // φ whose curvature terms cancel at these two steps (φ″ near zero, the
    // s³ term of the other sign) can mimic a ratio near 1 once, not at a
    // step eight times smaller, where its gap has shrunk at least eightfold.
    if at_point {
        let Some(finer) = OneSided::measure(line, h / 8.0) else {
            return Shape::Smooth;
        };
        let kept = finer.gap_narrow * s.gap_narrow > 0.0
            && finer.gap_narrow.abs() >= 0.5 * s.gap_narrow.abs();
        let lost_in_rounding = finer.gap_narrow.abs() <= NOISE_MULTIPLE * finer.noise_narrow;
        if !kept && !lost_in_rounding {
            return Shape::Smooth;
        }
    }
    Shape::Kink(KinkProbe {
        left: s.left,
        right: s.right,
        noise: s.allowance(),
        at_point,
    })
}

/// One-sided derivatives at step h/4 along a line (a joint move of several
/// elements), whether or not it has a kink there. `None` when they are not
/// stable between steps h and h/4: φ is rough on that scale, and no
/// one-sided value can be trusted.
pub(crate) fn joint_probe(line: &mut impl Line, h: f64) -> Option<KinkProbe> {
    let s = OneSided::measure(line, h)?;
    s.stable(0.25).then_some(KinkProbe {
        left: s.left,
        right: s.right,
        noise: s.allowance(),
        at_point: true,
    })
}

/// The four evaluations of the test and what they give.
struct OneSided {
    /// D₊ − D₋ at step h, and at step h/4.
    gap_wide: f64,
    gap_narrow: f64,
    /// Rounding allowance of those gaps.
    noise_wide: f64,
    noise_narrow: f64,
    /// D₋ and D₊ at step h/4.
    left: f64,
    right: f64,
    /// D₋ and D₊ at step h.
    left_wide: f64,
    right_wide: f64,
}

impl OneSided {
    /// `None` if any evaluation is not finite.
    fn measure(line: &mut impl Line, h: f64) -> Option<OneSided> {
        let wide = [line.at(h), line.at(-h)];
        let narrow = [line.at(h / 4.0), line.at(-h / 4.0)];
        if !wide.iter().chain(&narrow).all(|s| s.finite) {
            return None;
        }
        // Rounding acts on the outputs that moved, in the line's precision.
        let touched = wide
            .iter()
            .chain(&narrow)
            .map(|s| s.touched.max(s.rounds_like))
            .fold(0.0, f64::max);
        let rounding = 16.0 * line.eps() * touched;
        let sides = |[p, m]: [Sample; 2]| (-m.delta / -m.step, p.delta / p.step);
        let (left_wide, right_wide) = sides(wide);
        let (left, right) = sides(narrow);
        Some(OneSided {
            gap_wide: right_wide - left_wide,
            gap_narrow: right - left,
            noise_wide: rounding / h,
            noise_narrow: rounding / (h / 4.0),
            left,
            right,
            left_wide,
            right_wide,
        })
    }

    /// Rounding of the narrow slopes, plus how much they still move with
    /// the step (curvature of φ on either side).
    fn allowance(&self) -> f64 {
        let drift = (self.left - self.left_wide)
            .abs()
            .max((self.right - self.right_wide).abs());
        NOISE_MULTIPLE * self.noise_narrow + drift
    }

    /// The one-sided slopes at h and h/4 agree within `fraction` of the
    /// largest of them (plus rounding).
    fn stable(&self, fraction: f64) -> bool {
        let size = [self.left, self.right, self.left_wide, self.right_wide]
            .iter()
            .fold(0.0_f64, |m, v| m.max(v.abs()));
        let slack = fraction * size + NOISE_MULTIPLE * self.noise_wide;
        (self.left - self.left_wide).abs() <= slack && (self.right - self.right_wide).abs() <= slack
    }
}
