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
pub(crate) fn ridders(line: &mut impl Line) -> Estimate {
    ridders_from(line, 0.1 * line.scale())
}

pub(crate) fn ridders_from(line: &mut impl Line, h0: f64) -> Estimate {
    let mut a = [[0.0_f64; NTAB]; NTAB];
    let mut hh = h0;
    let first = line.pair(hh);
    a[0][0] = first.derivative;
    // Rounding of each column: ε|φ| over that column's step width.
    let mut noise = [0.0_f64; NTAB];
    noise[0] = line.eps() * first.magnitude / first.width;
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
    Estimate {
        value: ans,
        error: (RIDDERS_INFLATE * err).max(floor),
        scale: first.scale,
        forward_scale: first.touched / line.scale(),
        evals,
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
    let gap = |p: Sample, m: Sample| {
        let right = (p.value - c.value) / p.step;
        let left = (c.value - m.value) / -m.step;
        (right - left, left, right)
    };
    let (d1, _, _) = gap(p1, m1);
    let (d4, left, right) = gap(p4, m4);
    let noise1 = 4.0 * eps_a / h;
    let noise4 = 4.0 * eps_a / (h / 4.0);
    const KAPPA: f64 = 10.0;
    if !(d1.is_finite() && d4.is_finite()) {
        return None;
    }
    if d1.abs() <= KAPPA * noise1 && d4.abs() <= KAPPA * noise4 {
        return None;
    }
    let r = d4 / d1;
    if (r - 0.25).abs() <= 0.15 {
        return None;
    }
    Some(KinkProbe {
        left,
        right,
        noise: KAPPA * noise4,
        at_point: r.abs() > 0.5,
    })
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
/// assert!(d.evals <= 20);
/// ```
pub fn ridders_derivative(f: impl FnMut(f64) -> f64, x: f64, h0: f64) -> Estimate {
    ridders_from(&mut ScalarLine { f, x }, h0)
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
