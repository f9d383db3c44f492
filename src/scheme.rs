//! Difference schemes: numerical derivatives of one scalar along one
//! coordinate, each with an estimate of its own error.
//!
//! Every scheme works on a [`Line`]: the probe scalar `φ(t)` as one element
//! of one tensor moves by `t`. The audit supplies lines over layer
//! arguments; the public functions here supply lines over plain scalar
//! functions, so the same code is checked against published values.

use std::fmt;

/// Which numerical reference produced a derivative.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Scheme {
    /// Complex step, Im φ(x + ih)/h: one evaluation, no cancellation
    /// (Squire & Trapp, "Using complex variables to estimate derivatives of
    /// real functions", SIAM Review 40(1), 1998; Martins, Sturdza & Alonso,
    /// "The complex-step derivative approximation", ACM TOMS 29(3), 2003).
    /// Needs a [`GenericLayer`](crate::GenericLayer).
    ComplexStep,
    /// Ridders' method: central differences at shrinking steps,
    /// extrapolated to h → 0 in a Neville tableau (C. J. F. Ridders,
    /// "Accurate computation of F′(x) and F′(x)F″(x)", Advances in
    /// Engineering Software 4(2), 1982; the tableau with stopping rule as in
    /// Press et al., Numerical Recipes, 2nd ed., 1992, §5.7).
    Ridders,
    /// Central difference (φ(x+h) − φ(x−h))/2h with h = ε^(1/3)·max(|x|, 1),
    /// made exactly representable; error from the spread against step 2h.
    Central,
}

impl Scheme {
    /// The name shown in reports: `complex-step`, `ridders`, `central`.
    pub fn as_str(self) -> &'static str {
        match self {
            Scheme::ComplexStep => "complex-step",
            Scheme::Ridders => "ridders",
            Scheme::Central => "central",
        }
    }

    /// Parses a name as printed by [`as_str`](Scheme::as_str).
    ///
    /// ```
    /// use plumbline::Scheme;
    /// assert_eq!(Scheme::parse("ridders"), Some(Scheme::Ridders));
    /// assert_eq!(Scheme::parse("forward"), None);
    /// ```
    pub fn parse(s: &str) -> Option<Scheme> {
        match s.trim().to_ascii_lowercase().replace('_', "-").as_str() {
            "complex-step" | "complex" => Some(Scheme::ComplexStep),
            "ridders" => Some(Scheme::Ridders),
            "central" => Some(Scheme::Central),
            _ => None,
        }
    }
}

impl fmt::Display for Scheme {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// A numerical derivative with its estimated uncertainty.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Estimate {
    /// The derivative.
    pub value: f64,
    /// Estimated absolute error of `value` (already inflated where the raw
    /// estimate is known to be optimistic).
    pub error: f64,
    /// Σ|terms| of the derivative: for a probe φ = Σ wᵢyᵢ, Σ|wᵢ ∂yᵢ/∂x|.
    /// Sets the rounding floor of a backward that sums those terms.
    pub scale: f64,
    /// Σ|wᵢyᵢ| over the outputs this coordinate moves, divided by
    /// max(|x|, 1): the size of the forward quantities a backward computes
    /// this element from. It keeps rounding in a correct backward (e.g.
    /// `1 − tanh²` near saturation) from reading as a bug.
    pub forward_scale: f64,
    /// Function evaluations spent.
    pub evals: usize,
    /// The widest step the value relied on (0 for the complex step, whose
    /// step is imaginary): how far from x the value looked.
    pub step: f64,
    /// `false` when the scheme's truncation error (not its rounding)
    /// exceeds [`INCONCLUSIVE`] of the derivative's size: the reference
    /// cannot tell a right value from a wrong one there.
    pub conclusive: bool,
}

/// Truncation error, relative to max(|derivative|, Σ|terms|), above which a
/// reference is inconclusive.
pub const INCONCLUSIVE: f64 = 1e-2;

fn conclusive(truncation: f64, value: f64, scale: f64) -> bool {
    let limit = INCONCLUSIVE * value.abs().max(scale);
    truncation.partial_cmp(&limit) != Some(std::cmp::Ordering::Greater)
}

/// One evaluation of the probe scalar.
#[derive(Clone, Copy, Debug, Default)]
pub(crate) struct Sample {
    /// The step actually applied (after rounding x + t to the working precision).
    pub step: f64,
    /// φ at x + step.
    pub value: f64,
    /// Σ|terms| of φ (for its rounding error).
    pub magnitude: f64,
}

/// A central difference over ±h from a [`Line`].
#[derive(Clone, Copy, Debug)]
pub(crate) struct Pair {
    pub derivative: f64,
    /// Σ|terms| of the difference quotient.
    pub scale: f64,
    /// Σ|wᵢyᵢ| over the outputs that moved (at the `+h` sample).
    pub touched: f64,
    /// max magnitude of the two samples.
    pub magnitude: f64,
    /// the full width t₊ − t₋ actually used.
    pub width: f64,
}

/// The probe scalar along one coordinate.
pub(crate) trait Line {
    /// Unit roundoff-ish epsilon of the arithmetic the line evaluates in.
    fn eps(&self) -> f64;
    /// Typical scale of the coordinate: max(|x|, 1).
    fn scale(&self) -> f64;
    /// φ(x + t), with the step actually applied.
    fn at(&mut self, t: f64) -> Sample;
    /// A central difference over ±h with the Σ|terms| of the quotient.
    fn pair(&mut self, h: f64) -> Pair;
}

/// Central difference at h and 2h: value at h, error from the spread
/// (|D(2h) − D(h)|/3 estimates the O(h²) truncation) plus the rounding
/// term ε·|φ|/h.
pub(crate) fn central(line: &mut impl Line) -> Estimate {
    let h = line.eps().cbrt() * line.scale();
    let p1 = line.pair(h);
    let p2 = line.pair(2.0 * h);
    let truncation = (p2.derivative - p1.derivative).abs() / 3.0;
    let rounding = 4.0 * line.eps() * p1.magnitude.max(p2.magnitude) / p1.width;
    Estimate {
        value: p1.derivative,
        error: truncation + rounding,
        scale: p1.scale,
        forward_scale: p1.touched / line.scale(),
        evals: 4,
        step: p2.width / 2.0,
        conclusive: truncation <= rounding || conclusive(truncation, p1.derivative, p1.scale),
    }
}

/// Ridders' constants (Numerical Recipes §5.7): step shrink factor, table
/// size, and the factor by which a worse higher order stops the tableau.
const CON: f64 = 1.4;
const NTAB: usize = 10;
const SAFE: f64 = 2.0;
/// The raw tableau error can underestimate the true error ~15× (measured);
/// inflate it.
const RIDDERS_INFLATE: f64 = 10.0;

/// Ridders' method from initial step `h0 = 0.1·max(|x|, 1)`.
/// Ridders' method from h0 = 0.1·max(|x|, 1), cross-checked against a
/// Richardson-extrapolated central difference at the small steps
/// 2ε^(1/3)·max(|x|, 1) and half that. Where the
/// tableau stays inconclusive, or disagrees with that check (φ oscillates
/// faster than the stencil, and the extrapolation converged to the wrong
/// value), it starts again from h0/8, h0/64, ... (down to 8× the check's
/// step) and keeps the first conclusive estimate.
pub(crate) fn ridders(line: &mut impl Line) -> Estimate {
    let h0 = 0.1 * line.scale();
    ridders_checked(line, h0)
}

fn ridders_checked(line: &mut impl Line, mut h0: f64) -> Estimate {
    // The check: one Richardson step over central differences at h and h/2
    // (error O(h⁴)), at a step far below Ridders' first ones.
    let h_check = 2.0 * line.eps().cbrt() * line.scale();
    let wide = line.pair(h_check);
    let narrow = line.pair(h_check / 2.0);
    let check = (4.0 * narrow.derivative - wide.derivative) / 3.0;
    let check_noise = 8.0 * line.eps() * narrow.magnitude.max(wide.magnitude) / narrow.width;
    // Ridders' answer must sit within its own error bar of the check (plus
    // the check's rounding, and a relative slack far below any bug).
    let consistent =
        |e: &Estimate| (e.value - check).abs() <= e.error + 10.0 * check_noise + 1e-9 * check.abs();
    let mut best = ridders_from(line, h0);
    best.conclusive &= consistent(&best);
    let mut evals = 4 + best.evals;
    while !best.conclusive && h0 / 8.0 >= 8.0 * h_check {
        h0 /= 8.0;
        let mut next = ridders_from(line, h0);
        next.conclusive &= consistent(&next);
        evals += next.evals;
        if next.conclusive || next.error < best.error || !best.error.is_finite() {
            best = next;
        }
    }
    // Two independent estimates that differ by d leave an uncertainty of at
    // least d: the tableau's own error estimate can be optimistic by far
    // more than its 10× inflation.
    if best.conclusive {
        best.error = best.error.max((best.value - check).abs());
    }
    best.evals = evals;
    best
}

pub(crate) fn ridders_from(line: &mut impl Line, h0: f64) -> Estimate {
    let mut a = [[0.0_f64; NTAB]; NTAB];
    let mut hh = h0;
    let first = line.pair(hh);
    a[0][0] = first.derivative;
    // Rounding of each column: ε|φ| over that column's step width.
    let mut noise = [0.0_f64; NTAB];
    noise[0] = line.eps() * first.magnitude / first.width;
    let mut steps = [0.0_f64; NTAB];
    steps[0] = first.width / 2.0;
    let mut ans_step = steps[0];
    let mut evals = 2;
    let mut err = f64::INFINITY;
    let mut ans = a[0][0];
    let mut ans_noise = noise[0];
    for i in 1..NTAB {
        hh /= CON;
        let p = line.pair(hh);
        evals += 2;
        a[0][i] = p.derivative;
        noise[i] = line.eps() * p.magnitude / p.width;
        steps[i] = p.width / 2.0;
        let mut fac = CON * CON;
        for j in 1..=i {
            a[j][i] = (a[j - 1][i] * fac - a[j - 1][i - 1]) / (fac - 1.0);
            fac *= CON * CON;
            let errt = (a[j][i] - a[j - 1][i])
                .abs()
                .max((a[j][i] - a[j - 1][i - 1]).abs());
            if errt <= err {
                err = errt;
                ans = a[j][i];
                ans_noise = noise[i];
                // A[j][i] combines the columns i − j ..= i.
                ans_step = steps[i - j];
            }
        }
        if (a[i][i] - a[i - 1][i - 1]).abs() >= SAFE * err {
            break;
        }
    }
    // The tableau's own error can be lucky where entries agree by chance
    // (e.g. a linear φ): never claim less than the rounding of the column
    // the answer came from, nor than 100ε of the terms.
    let floor = (4.0 * ans_noise).max(100.0 * line.eps() * (ans.abs() + first.scale));
    let truncation = RIDDERS_INFLATE * err;
    Estimate {
        value: ans,
        error: truncation.max(floor),
        scale: first.scale,
        forward_scale: first.touched / line.scale(),
        evals,
        step: ans_step,
        conclusive: truncation <= floor || conclusive(truncation, ans, first.scale),
    }
}

/// What the one-sided kink test saw at a point.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct KinkProbe {
    /// One-sided derivative from the left, (φ(x) − φ(x − s))/s.
    pub left: f64,
    /// One-sided derivative from the right, (φ(x + s) − φ(x))/s.
    pub right: f64,
    /// Allowance for rounding on each side.
    pub noise: f64,
    /// `true` if the kink lies within a quarter step of the point; `false`
    /// if it lies further out but inside the step (the point itself is
    /// smooth, but a difference over the full step is not).
    pub at_point: bool,
}

/// The one-sided kink test: five evaluations φ(x), φ(x ± h), φ(x ± h/4).
/// For smooth φ the gap D₊ − D₋ shrinks linearly with the step; at a kink it
/// stays of the size of the jump. Returns the one-sided derivatives at
/// step h/4 when φ is not smooth within ±h, `None` when it is.
///
/// The test is derived from the Taylor expansion of the one-sided
/// differences (see DEVELOPERS.md, "Kinks"); κ = 10 times the rounding
/// noise 4ε|φ|/s is the threshold below which a gap is noise.
pub(crate) fn kink_test(line: &mut impl Line, h: f64) -> Option<KinkProbe> {
    let s = one_sided(line, h);
    const KAPPA: f64 = 10.0;
    if !(s.gap_h.is_finite() && s.gap_quarter.is_finite()) {
        return None;
    }
    if s.gap_h.abs() <= KAPPA * s.noise_h && s.gap_quarter.abs() <= KAPPA * s.noise_quarter {
        return None;
    }
    let r = s.gap_quarter / s.gap_h;
    if (r - 0.25).abs() <= 0.15 {
        return None;
    }
    let at_point = r.abs() > 0.5;
    // A kink at the point leaves the one-sided slopes nearly the same at h
    // and h/4; a function that merely oscillates faster than the step does
    // not, and is no kink (it must not excuse a disagreement).
    if at_point && !s.stable(0.5) {
        return None;
    }
    Some(KinkProbe {
        left: s.left,
        right: s.right,
        noise: KAPPA * s.noise_quarter,
        at_point,
    })
}

/// One-sided derivatives at step h/4 along a line, whether or not it has
/// a kink there (used for a joint move of several kink elements). `None`
/// when they are not stable between steps h and h/4: φ is rough on that
/// scale (it oscillates faster than the step), and no one-sided value can
/// be trusted.
pub(crate) fn one_sided_probe(line: &mut impl Line, h: f64) -> Option<KinkProbe> {
    let s = one_sided(line, h);
    s.stable(0.25).then_some(KinkProbe {
        left: s.left,
        right: s.right,
        noise: 10.0 * s.noise_quarter,
        at_point: true,
    })
}

/// The five evaluations of the kink test and what they give.
struct OneSided {
    /// D₊ − D₋ at step h, and at step h/4.
    gap_h: f64,
    gap_quarter: f64,
    /// Rounding allowance of those gaps (4ε|φ|/s).
    noise_h: f64,
    noise_quarter: f64,
    /// D₋ and D₊ at step h/4.
    left: f64,
    right: f64,
    /// D₋ and D₊ at step h.
    left_h: f64,
    right_h: f64,
}

impl OneSided {
    /// The one-sided slopes at h and h/4 agree within `fraction` of the
    /// largest of them (plus rounding).
    fn stable(&self, fraction: f64) -> bool {
        let size = [self.left, self.right, self.left_h, self.right_h]
            .iter()
            .fold(0.0_f64, |m, v| m.max(v.abs()));
        let slack = fraction * size + 10.0 * self.noise_h;
        (self.left - self.left_h).abs() <= slack && (self.right - self.right_h).abs() <= slack
    }
}

fn one_sided(line: &mut impl Line, h: f64) -> OneSided {
    let c = line.at(0.0);
    let p1 = line.at(h);
    let m1 = line.at(-h);
    let p4 = line.at(h / 4.0);
    let m4 = line.at(-h / 4.0);
    let mag = [c, p1, m1, p4, m4]
        .iter()
        .map(|s| s.magnitude.abs())
        .fold(0.0, f64::max);
    let eps_a = 4.0 * line.eps() * mag;
    let sides = |p: Sample, m: Sample| {
        let right = (p.value - c.value) / p.step;
        let left = (c.value - m.value) / -m.step;
        (left, right)
    };
    let (l1, r1) = sides(p1, m1);
    let (left, right) = sides(p4, m4);
    OneSided {
        gap_h: r1 - l1,
        gap_quarter: right - left,
        noise_h: 4.0 * eps_a / h,
        noise_quarter: 4.0 * eps_a / (h / 4.0),
        left,
        right,
        left_h: l1,
        right_h: r1,
    }
}

/// A [`Line`] over a plain scalar function in `f64`.
struct ScalarLine<F> {
    f: F,
    x: f64,
}

impl<F: FnMut(f64) -> f64> Line for ScalarLine<F> {
    fn eps(&self) -> f64 {
        f64::EPSILON
    }
    fn scale(&self) -> f64 {
        self.x.abs().max(1.0)
    }
    fn at(&mut self, t: f64) -> Sample {
        let xt = self.x + t;
        let value = (self.f)(xt);
        Sample {
            step: xt - self.x,
            value,
            magnitude: value.abs(),
        }
    }
    fn pair(&mut self, h: f64) -> Pair {
        let p = self.at(h);
        let m = self.at(-h);
        let width = p.step - m.step;
        let derivative = (p.value - m.value) / width;
        Pair {
            derivative,
            scale: derivative.abs(),
            touched: p.magnitude,
            magnitude: p.magnitude.max(m.magnitude),
            width,
        }
    }
}

/// Central-difference derivative of a scalar function at `x`, with the step
/// h = ε^(1/3)·max(|x|, 1) made exactly representable, and an error
/// estimate from the spread against step 2h.
///
/// ```
/// let d = plumbline::central_difference(f64::sin, 1.0);
/// assert!((d.value - 1.0_f64.cos()).abs() < 1e-9);
/// assert!(d.error < 1e-8);
/// ```
pub fn central_difference(f: impl FnMut(f64) -> f64, x: f64) -> Estimate {
    central(&mut ScalarLine { f, x })
}

/// Ridders' derivative of a scalar function at `x` from the initial
/// (largest) step `h0`; the error estimate is the tableau's, inflated 10×.
///
/// (C. J. F. Ridders, "Accurate computation of F′(x) and F′(x)F″(x)",
/// Advances in Engineering Software 4(2):75–76, 1982.)
///
/// ```
/// let d = plumbline::ridders_derivative(f64::exp, 0.0, 0.1);
/// assert!((d.value - 1.0).abs() < 1e-13);
/// assert!(d.evals <= 24); // 4 for the cross-check, at most 20 for the tableau
/// ```
pub fn ridders_derivative(f: impl FnMut(f64) -> f64, x: f64, h0: f64) -> Estimate {
    ridders_checked(&mut ScalarLine { f, x }, h0)
}

/// One-sided derivatives of a scalar function at `x` if it has a kink
/// within ±h of `x` (`None` if it is smooth there).
///
/// ```
/// let k = plumbline::one_sided_derivatives(f64::abs, 0.0, 1e-3).unwrap();
/// assert!((k.left + 1.0).abs() < 1e-9 && (k.right - 1.0).abs() < 1e-9);
/// assert!(plumbline::one_sided_derivatives(f64::tanh, 0.5, 1e-3).is_none());
/// ```
pub fn one_sided_derivatives(f: impl FnMut(f64) -> f64, x: f64, h: f64) -> Option<KinkProbe> {
    kink_test(&mut ScalarLine { f, x }, h)
}
