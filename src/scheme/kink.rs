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

/// A gap that keeps more than this share of itself from step h/4 to h/32
/// is no smooth φ's (whose gap shrinks with the step, to 1/8): a kink lies
/// between the two scales.
const NEARBY_SHRINK: f64 = 0.25;

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
            // Shrunk, but far less than a smooth gap's eightfold: a kink
            // a little off the point, inside the step h/4 but not inside
            // h/32 (hard-swish's kink 10⁻³ from x = 3 in `f32`). It is in
            // the stencil of real differences, not at the point.
            let shrink = finer.gap_narrow / s.gap_narrow;
            if shrink > NEARBY_SHRINK {
                return Shape::Kink(KinkProbe {
                    left: s.left,
                    right: s.right,
                    noise: s.allowance(),
                    at_point: false,
                });
            }
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::scheme::Pair;

    /// A line over a plain function of x with a chosen machine epsilon
    /// (the precision the noise model assumes; the arithmetic stays `f64`),
    /// recording every move asked for. Same samples as `ScalarLine`.
    struct Traced<F> {
        f: F,
        x: f64,
        at_x: f64,
        eps: f64,
        asked: Vec<f64>,
    }

    impl<F: FnMut(f64) -> f64> Traced<F> {
        fn new(mut f: F, x: f64, eps: f64) -> Self {
            let at_x = f(x);
            Traced {
                f,
                x,
                at_x,
                eps,
                asked: Vec::new(),
            }
        }
    }

    impl<F: FnMut(f64) -> f64> Line for Traced<F> {
        fn eps(&self) -> f64 {
            self.eps
        }
        fn x(&self) -> f64 {
            self.x
        }
        fn at(&mut self, t: f64) -> Sample {
            self.asked.push(t);
            let xt = self.x + t;
            crate::scheme::scalar_sample(self.x, self.at_x, xt, (self.f)(xt))
        }
        fn pair(&mut self, _: f64) -> Pair {
            unreachable!("the kink test asks single moves")
        }
    }

    /// The moves of one `OneSided::measure` per step, in order: ±s, ±s/4.
    fn measures(steps: &[f64]) -> Vec<f64> {
        steps
            .iter()
            .flat_map(|&s| [s, -s, s / 4.0, -s / 4.0])
            .collect()
    }

    fn close(got: f64, want: f64, rel: f64) -> bool {
        (got - want).abs() <= rel * want.abs()
    }

    #[test]
    fn a_kink_at_the_point_is_confirmed_at_an_eighth_of_the_step() {
        // |x| at 0: one-sided slopes −1 and +1 at every step (common
        // practice), a gap ratio of 1, so the kink is at the point and is
        // confirmed once more at h/8 (doc comments of `kink_at_step`).
        let h = 1e-3;
        let mut line = Traced::new(f64::abs, 0.0, f64::EPSILON);
        let k = kink_test(&mut line, h).unwrap();
        assert_eq!(line.asked, measures(&[h, h / 8.0]));
        assert_eq!((k.left, k.right, k.at_point), (-1.0, 1.0, true));
        // The allowance: 10 × the narrow slopes' rounding 16ε·touched/(h/4)
        // with touched = |φ(±h)| = h, plus their drift (0 here): 640ε
        // (doc comments of `noise` and `allowance`).
        assert!(close(k.noise, 640.0 * f64::EPSILON, 1e-12), "{k:?}");
        // A kink beyond h/4 but within h (max(0.3 − t, 0) probed at 0.29
        // with h = 0.02): the gap ratio is near 0, so no second look.
        let mut line = Traced::new(|t: f64| (0.3 - t).max(0.0), 0.29, f64::EPSILON);
        let k = kink_test(&mut line, 0.02).unwrap();
        assert!(!k.at_point, "{k:?}");
        assert_eq!(line.asked, measures(&[0.02]));
    }

    /// φ(x) = g(|x|)·|x| with g given at the radii a measure asks for:
    /// one-sided slopes ∓g(r) at step r, so a gap of 2g(r). `table` holds
    /// (radius, g) pairs; any other radius is not finite.
    fn radial(table: Vec<(f64, f64)>) -> impl FnMut(f64) -> f64 {
        move |x: f64| {
            let r = x.abs();
            if r == 0.0 {
                return 0.0;
            }
            match table.iter().find(|(at, _)| *at == r) {
                Some((_, g)) => g * r,
                None => f64::NAN,
            }
        }
    }

    #[test]
    fn a_gap_ratio_of_exactly_one_half_is_not_at_the_point() {
        // Internal logic: `at_point` is |ratio| > 0.5, strictly. Slopes ∓1 at
        // step 1, ∓0.5 at 1/4 (and at the 1/8, 1/32 a second look would use):
        // ratio 0.5, a kink within the step but not at the point.
        let table = vec![(1.0, 1.0), (0.25, 0.5), (0.125, 0.5), (0.03125, 0.5)];
        let mut line = Traced::new(radial(table), 0.0, f64::EPSILON);
        let k = kink_test(&mut line, 1.0).unwrap();
        assert!(!k.at_point, "{k:?}");
        assert_eq!((k.left, k.right), (-0.5, 0.5));
        assert_eq!(line.asked, measures(&[1.0]));
        // The allowance: 10 × 16ε·1/(1/4) (touched = |φ(±1)| = 1) plus the
        // slopes' drift between the steps, |−0.5 − (−1)| = 0.5.
        assert!(close(k.noise, 0.5 + 640.0 * f64::EPSILON, 1e-15), "{k:?}");
    }

    #[test]
    fn slopes_are_stable_within_half_their_size_plus_rounding() {
        // Internal logic (`OneSided::stable`): the slopes at h and h/4 may
        // differ by half the largest of them plus 10 × the wide rounding.
        // φ = 1 + g(|x|)·|x|, g = 1 at radius 1 and 2.2 below, ε = 1e-3:
        // the slopes move by 1.2, above 0.5 × 2.2 = 1.1 but within 1.1 +
        // 10 × 16ε·2/1 = 1.42: stable, so a kink at the point (ratio 2.2),
        // confirmed at 1/8. Its allowance: 10 × 16ε·2/(1/4) + 1.2 = 2.48.
        let g = |r: f64| if r >= 1.0 { 1.0 } else { 2.2 };
        let mut line = Traced::new(|x: f64| 1.0 + g(x.abs()) * x.abs(), 0.0, 1e-3);
        let k = kink_test(&mut line, 1.0).unwrap();
        assert!(k.at_point, "{k:?}");
        assert!(
            close(k.left, -2.2, 1e-12) && close(k.right, 2.2, 1e-12),
            "{k:?}"
        );
        assert!(close(k.noise, 2.48, 1e-12), "{k:?}");
        assert_eq!(line.asked, measures(&[1.0, 0.125]));
    }

    #[test]
    fn a_confirmation_lost_in_rounding_keeps_the_kink() {
        // Internal logic (`kink_at_step`): a second look at h/8 whose gap has
        // shrunk below half is no confirmation, but when that gap is within
        // 10× its rounding it says nothing, and the kink stands. φ = 1 +
        // g(|x|)·|x| with g = 1 at radii 1 and 1/4, 0.3 below; ε = 1e-3 so
        // that the rounding 16ε·1/(s/4) at s = 1/8 is 0.512: the gap 0.6 is
        // within 10 × 0.512. At step 1 the gap 2 is above 10 × 0.064.
        let g = |r: f64| if r >= 0.25 { 1.0 } else { 0.3 };
        let mut line = Traced::new(|x: f64| 1.0 + g(x.abs()) * x.abs(), 0.0, 1e-3);
        let k = kink_test(&mut line, 1.0).unwrap();
        assert!(k.at_point, "{k:?}");
        assert!(
            close(k.left, -1.0, 1e-12) && close(k.right, 1.0, 1e-12),
            "{k:?}"
        );
        assert_eq!(line.asked, measures(&[1.0, 0.125]));
    }

    #[test]
    fn a_smooth_function_mimicking_a_kink_once_is_smooth() {
        // φ = x² − (0.8/h)|x|³ is twice differentiable at 0. Its gap is
        // 2s − 1.6s²/h: 0.4h at both s = h and h/4 (ratio 1, like a kink),
        // but 0.225h at h/8 and 0.061h at h/32, below half of 0.4h: not
        // kept, so smooth at this step (doc comment in `kink_at_step`). The
        // extrapolated jump (4Δ(s/4) − Δ(s))/3 = 0.4s²/h then shrinks
        // 4096-fold per 64-fold step, never the same twice: no hidden kink
        // in the five steps h, h/64, …, h/64⁴. (Worked by hand.)
        let h = 1e-3;
        let f = move |x: f64| x * x - 0.8 / h * x.abs().powi(3);
        let mut line = Traced::new(f, 0.0, f64::EPSILON);
        assert!(kink_test(&mut line, h).is_none());
        let hidden: Vec<f64> = (0..5).map(|k| h / 64f64.powi(k)).collect();
        let mut want = measures(&[h, h / 8.0]);
        want.extend(measures(&hidden));
        assert_eq!(line.asked, want);
    }

    #[test]
    fn plain_curvature_is_smooth_after_two_hidden_looks() {
        // 1000x²: gap ratio 1/4 at h (smooth), then the extrapolated jump is
        // 0 (to rounding) at h and h/64, both below their noise: smooth,
        // after exactly those two looks (doc comment of `hidden_kink`).
        let h = 1e-3;
        let mut line = Traced::new(|x: f64| 1000.0 * x * x, 0.0, f64::EPSILON);
        assert!(kink_test(&mut line, h).is_none());
        assert_eq!(line.asked, measures(&[h, h, h / 64.0]));
        // With a jump of 2e-4 in the slope (1e-4·|x|): the same jump at h and
        // h/64, found after the same looks (`a_kink_under_strong_curvature_is_still_found`
        // in tests/schemes.rs has its values).
        let mut line = Traced::new(|x: f64| 1e-4 * x.abs() + 1000.0 * x * x, 0.0, f64::EPSILON);
        assert!(kink_test(&mut line, h).is_some());
        assert_eq!(line.asked, measures(&[h, h, h / 64.0]));
    }

    /// The noise of a hidden-kink step of the `jumps` lines below: 10 ×
    /// 16ε·touched/(s/4) with touched = g(s)·s = 4s, i.e. 2560ε, with
    /// ε = 2⁻²⁰ (exact in binary).
    const EPS: f64 = 1.0 / 1_048_576.0;
    const N: f64 = 2560.0 * EPS;

    /// A radial line whose extrapolated jump at step 64⁻ᵏ is `js[k]`:
    /// g(64⁻ᵏ) = 4 and g(64⁻ᵏ/4) = 1 + 3·js[k]/8, so (8g(s/4) − 2g(s))/3 =
    /// js[k]. At step 1 the gap ratio g(1/4)/g(1) is near 1/4: smooth, and
    /// the hidden-kink test runs from step 1.
    fn jumps(js: &[f64]) -> impl FnMut(f64) -> f64 {
        let table = js
            .iter()
            .enumerate()
            .flat_map(|(k, j)| {
                let s = 64f64.powi(-(k as i32));
                [(s, 4.0), (s / 4.0, 1.0 + 3.0 * j / 8.0)]
            })
            .collect();
        radial(table)
    }

    /// Runs the kink test on a `jumps` line from step 1.
    fn hidden(js: &[f64]) -> (Option<KinkProbe>, Vec<f64>) {
        let mut line = Traced::new(jumps(js), 0.0, EPS);
        let k = kink_test(&mut line, 1.0);
        (k, line.asked)
    }

    /// The moves of the ratio test at 1 and of `looks` hidden-kink steps.
    fn looks(n: i32) -> Vec<f64> {
        let mut steps = vec![1.0];
        steps.extend((0..n).map(|k| 64f64.powi(-k)));
        measures(&steps)
    }

    #[test]
    fn hidden_jumps_must_be_above_their_noise_at_two_steps() {
        // Internal logic of `hidden_kink`, with N the noise of every step.
        // A jump of 3N then 0.5N: the second is noise, but the first was not
        // (above 2N), so one more step; 0.5N and 0.5N: smooth.
        let (k, asked) = hidden(&[3.0 * N, 0.5 * N, 0.5 * N]);
        assert!(k.is_none(), "{k:?}");
        assert_eq!(asked, looks(3));
        // 3N then 1.5N: close enough to be the same (|Δ| ≤ 0.1·3N + 2N), but
        // 1.5N is not clearly above its noise (2N): no kink yet; then 0 after
        // 1.5N: smooth.
        let (k, asked) = hidden(&[3.0 * N, 1.5 * N, 0.0]);
        assert!(k.is_none(), "{k:?}");
        assert_eq!(asked, looks(3));
        // A previous jump of exactly 2N (exact in binary here) is not clearly
        // above its noise: 2N then 2.2N is no kink yet; 2.2N twice is.
        let (k, asked) = hidden(&[2.0 * N, 2.2 * N, 2.2 * N]);
        assert!(k.is_some());
        assert_eq!(asked, looks(3));
    }

    #[test]
    fn hidden_jumps_must_agree_within_a_tenth_plus_their_noise() {
        // 10N then 12.78N: |Δ| = 2.78N, within 0.1·12.78N + N + N = 3.28N
        // but not within the tenth alone: the same jump, a kink at the
        // point. Its one-sided slopes are the extrapolated ones at step
        // 1/64, (4·D(s/4) − D(s))/3 = ∓j/2 for these lines.
        let j = 12.78 * N;
        let (k, asked) = hidden(&[10.0 * N, j]);
        let k = k.unwrap();
        assert_eq!(asked, looks(2));
        assert!(k.at_point, "{k:?}");
        assert!(
            close(k.left, -j / 2.0, 1e-9) && close(k.right, j / 2.0, 1e-9),
            "{k:?}"
        );
        // 100N then 130N: 30N apart, beyond 0.1·130N + 2N = 15N: not yet;
        // 130N again at the next step: the kink.
        let (k, asked) = hidden(&[100.0 * N, 130.0 * N, 130.0 * N]);
        assert!(k.is_some());
        assert_eq!(asked, looks(3));
    }

    #[test]
    fn a_quiet_step_widens_to_8h_and_64h_only() {
        // 1 + J·|x| with ε = 1e-7 (single precision's order), h = 1e-3: the
        // gap 2J against 10 × the wide rounding 16ε/s (1.6e-2 at h, 2e-3 at
        // 8h, 2.5e-4 at 64h). J = 2e-3 is quiet at h and seen at 8h
        // (confirmed at 8h/8 = h); J = 1e-4 is quiet at h, 8h and 64h, and
        // no wider step is tried (doc comment of `kink_test`).
        let h = 1e-3;
        let mut line = Traced::new(|x: f64| 1.0 + 2e-3 * x.abs(), 0.0, 1e-7);
        let k = kink_test(&mut line, h).unwrap();
        assert!(k.at_point, "{k:?}");
        assert!(
            close(k.right, 2e-3, 1e-9) && close(k.left, -2e-3, 1e-9),
            "{k:?}"
        );
        assert_eq!(line.asked, measures(&[h, 8.0 * h, h]));
        let mut line = Traced::new(|x: f64| 1.0 + 1e-4 * x.abs(), 0.0, 1e-7);
        assert!(kink_test(&mut line, h).is_none());
        assert_eq!(line.asked, measures(&[h, 8.0 * h, 64.0 * h]));
    }

    #[test]
    fn a_rough_step_retries_at_h_over_64_without_widening() {
        // 1 + 0.4·min(|x|, 1e-4), h = 1e-3, ε = 1e-7: at h the slopes are
        // ±0.04 (over h) and ±0.16 (over h/4), a gap ratio of 4 but slopes
        // that move by more than half: rough, so step h/64 = 1.5625e-5,
        // inside the kink's linear part: the gap 0.8 is within 10 × the
        // rounding 16ε/s = 0.1024 on both sides: quiet. A quiet step below h
        // is not widened: smooth (doc comment of `kink_test`).
        let h = 1e-3;
        let mut line = Traced::new(|x: f64| 1.0 + 0.4 * x.abs().min(1e-4), 0.0, 1e-7);
        assert!(kink_test(&mut line, h).is_none());
        assert_eq!(line.asked, measures(&[h, h / 64.0]));
        // A tent 1 + max(0, min(|x|, h/2 − |x|)): flat at ±h (wide gap 0,
        // quiet), slopes ±1 at ±h/4 (narrow gap 2, far above its rounding):
        // not quiet, and the slopes move by 1 between the steps: rough. At
        // h/64 the kink at the point shows, confirmed at h/512.
        let tent = move |x: f64| 1.0 + x.abs().min(h / 2.0 - x.abs()).max(0.0);
        let mut line = Traced::new(tent, 0.0, f64::EPSILON);
        let k = kink_test(&mut line, h).unwrap();
        assert!(k.at_point, "{k:?}");
        assert!(
            close(k.left, -1.0, 1e-9) && close(k.right, 1.0, 1e-9),
            "{k:?}"
        );
        assert_eq!(line.asked, measures(&[h, h / 64.0, h / 512.0]));
        // Stable needs both sides: slopes −0.4 on the left at every step, on
        // the right 2·min(x, 1e-4)/x: 0.2 over h, 0.8 over h/4, a move of 0.6
        // beyond 0.5 × 0.8 + 10 × 1.6e-3. Rough at h; at h/64 the kink at
        // the point has slopes −0.4 and 2.
        let one_sided = |x: f64| 1.0 + if x > 0.0 { 2.0 * x.min(1e-4) } else { -0.4 * x };
        let mut line = Traced::new(one_sided, 0.0, 1e-7);
        let k = kink_test(&mut line, h).unwrap();
        assert!(
            close(k.left, -0.4, 1e-6) && close(k.right, 2.0, 1e-6),
            "{k:?}"
        );
        assert_eq!(line.asked, measures(&[h, h / 64.0, h / 512.0]));
    }
}
