//! Difference schemes: numerical derivatives of one scalar along one
//! coordinate, each with an estimate of its own error, and the engine that
//! applies them to a layer's arguments.
//!
//! Every real-arithmetic scheme works on a [`Line`]: the probe scalar
//! `φ(t)` as one element (or a group of elements) of one tensor moves by
//! `t`. The audit supplies lines over layer arguments (`engine`); the public
//! functions here supply lines over plain scalar functions, so the same code
//! is checked against published values.
//!
//! | file | what |
//! |---|---|
//! | `central.rs` | central differences at h and 2h |
//! | `ridders.rs` | Ridders' extrapolation, cross-checked at a small step |
//! | `kink.rs` | the one-sided test for non-differentiable points |
//! | `complex.rs` | the complex step over a generic forward |
//! | `stairs.rs` | slopes across the stairs of a forward flat at its own precision |
//! | `sweep.rs` | central differences over a sweep of steps (the error-against-step picture's data) |
//! | `engine.rs` | lines over a layer's arguments, and which scheme runs |

use std::fmt;
use std::str::FromStr;

pub(crate) mod central;
mod complex;
pub(crate) mod engine;
mod kink;
pub(crate) mod ridders;
mod stairs;
mod sweep;

pub(crate) use complex::step_for as complex_step_for;
pub use kink::KinkProbe;
pub(crate) use kink::{joint_probe, kink_test};
pub(crate) use sweep::SWEEP_STEPS;

/// Which numerical reference produced a derivative.
///
/// Parsed from the names the table and `PLUMBLINE_SCHEME` use:
///
/// ```
/// use plumbline::Scheme;
///
/// assert_eq!("ridders".parse::<Scheme>(), Ok(Scheme::Ridders));
/// assert_eq!(Scheme::ComplexStep.to_string(), "complex-step");
/// assert!("forward".parse::<Scheme>().is_err());
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
#[non_exhaustive]
pub enum Scheme {
    /// Complex step, Im φ(x + ih)/h: one evaluation, no cancellation
    /// (Squire & Trapp, "Using complex variables to estimate derivatives of
    /// real functions", SIAM Review 40(1), 1998; Martins, Sturdza & Alonso,
    /// "The complex-step derivative approximation", ACM TOMS 29(3), 2003).
    /// Needs a [`GenericForward`](crate::GenericForward).
    ComplexStep,
    /// Ridders' method: central differences at shrinking steps,
    /// extrapolated to a zero step by repeated Richardson elimination of the
    /// even error terms (C. J. F. Ridders, "Accurate computation of F′(x)
    /// and F′(x)F″(x)", Advances in Engineering Software 4(2):75–76, 1982).
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
}

/// Parses a name as printed by [`Scheme::as_str`] (case and `_`/`-`
/// insensitive; `complex` is accepted for `complex-step`).
///
/// ```
/// use plumbline::Scheme;
/// assert_eq!("ridders".parse::<Scheme>(), Ok(Scheme::Ridders));
/// assert!("forward".parse::<Scheme>().is_err());
/// ```
impl FromStr for Scheme {
    type Err = String;
    fn from_str(s: &str) -> Result<Scheme, String> {
        match s.trim().to_ascii_lowercase().replace('_', "-").as_str() {
            "complex-step" | "complex" => Ok(Scheme::ComplexStep),
            "ridders" => Ok(Scheme::Ridders),
            "central" => Ok(Scheme::Central),
            _ => Err("expected `complex-step`, `ridders` or `central`".to_string()),
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
    /// exceeds 1% of the derivative's size: the error bar is wide, and an
    /// element judged against it is reported as such. It is information,
    /// not a verdict: an element within its bound agrees.
    pub conclusive: bool,
    /// How many times the forward's own rounding at this point exceeds a
    /// few ulps of its outputs (1 unless a second look measured more): a
    /// backward following the same formulas loses as much, so the
    /// backward's rounding floor is multiplied by it.
    pub amplification: f64,
}

impl Estimate {
    /// An estimate that could not be formed (the forward was not finite
    /// anywhere near the point): NaN, which never passes.
    pub(crate) fn not_finite(evals: usize) -> Estimate {
        Estimate {
            value: f64::NAN,
            error: f64::NAN,
            scale: 0.0,
            forward_scale: 0.0,
            evals,
            step: 0.0,
            conclusive: false,
            amplification: 1.0,
        }
    }
}

/// Truncation error, relative to max(|derivative|, Σ|terms|), above which a
/// reference counts as wide.
pub(crate) const WIDE: f64 = 1e-2;

pub(crate) fn conclusive(truncation: f64, value: f64, scale: f64) -> bool {
    truncation <= WIDE * value.abs().max(scale)
}

/// One evaluation of the probe scalar, measured against the point itself.
#[derive(Clone, Copy, Debug, Default)]
pub(crate) struct Sample {
    /// The step actually applied (after rounding x + t to the working
    /// precision).
    pub step: f64,
    /// φ(x + step) − φ(x), summed over the outputs that changed, so that
    /// the outputs the move leaves alone add no rounding.
    pub delta: f64,
    /// Σ|wᵢyᵢ| over the outputs that changed: what the forward's rounding
    /// acts on in this evaluation.
    pub touched: f64,
    /// `touched` with each output's magnitude raised to what its rounding
    /// acts on where that is known to be larger (a forward that cancels
    /// rounds like its intermediates): the height of the staircase real
    /// differences see, for the one-sided kink test.
    pub rounds_like: f64,
    /// Every output was finite.
    pub finite: bool,
}

/// A central difference over ±h.
#[derive(Clone, Copy, Debug, Default)]
pub(crate) struct Pair {
    /// (φ(x + h) − φ(x − h)) / width.
    pub derivative: f64,
    /// Σ|wᵢ (yᵢ(x + h) − yᵢ(x − h))| / width: the terms of the quotient.
    pub terms: f64,
    /// Σ|wᵢyᵢ| over the outputs that moved, larger of the two ends.
    pub touched: f64,
    /// As `touched`, each output taken at least at the magnitude its
    /// rounding acts on when the forward's running error bound exceeds the
    /// output itself (`Sample::rounds_like`; 0 where not measured).
    pub rounds_like: f64,
    /// The largest |wᵢyᵢ| among the outputs that did not move at either
    /// end: a derivative of such an output below an ulp over the width
    /// leaves no trace.
    pub still: f64,
    /// The full width t₊ − t₋ actually used.
    pub width: f64,
    /// Both ends finite.
    pub finite: bool,
}

impl Pair {
    /// The rounding of this quotient: a few ulps of the outputs that moved
    /// (of what their rounding acts on, where measured), over the width.
    pub fn rounding(&self, eps: f64) -> f64 {
        4.0 * eps * self.touched.max(self.rounds_like) / self.width
    }
}

/// The resolution of a difference quotient: an output that did not move
/// over the width may still depend on x, by up to an ulp of it over the
/// width (a term rounded away inside the forward). A few such outputs are
/// allowed for.
pub(crate) fn quantization(pair: &Pair, eps: f64) -> f64 {
    4.0 * 2.0 * eps * pair.still / pair.width
}

/// The probe scalar along one coordinate.
pub(crate) trait Line {
    /// Machine epsilon of the arithmetic the line evaluates in.
    fn eps(&self) -> f64;
    /// The coordinate's value at the point.
    fn x(&self) -> f64;
    /// The typical scale of a step: max(|x|, 1).
    fn scale(&self) -> f64 {
        self.x().abs().max(1.0)
    }
    /// The scale the coordinate's tensor lives on, max(|x|, the tensor's
    /// root mean square), where known: weights of 10⁻³ live on 10⁻³, and a
    /// reference undecided at [`scale`](Line::scale) can try it.
    fn fine_scale(&self) -> Option<f64> {
        None
    }
    /// φ at x + t, measured against φ(x).
    fn at(&mut self, t: f64) -> Sample;
    /// A central difference over ±h.
    fn pair(&mut self, h: f64) -> Pair;
}

/// What a second look at one element measured along its line.
#[derive(Clone, Copy, Debug, Default)]
pub(crate) struct Look {
    /// The scatter of φ about a straight line over moves of a few ulps of
    /// x: the forward's own rounding at this point.
    pub noise: f64,
    /// Σ|wᵢyᵢ| over the outputs those moves changed.
    pub touched: f64,
    /// |φ″| from a second difference over ±`bend_step`.
    pub curvature: f64,
    /// |φ‴| from a third difference over ±`bend_step`, ±2·`bend_step`.
    pub third: f64,
    /// The step of that second difference.
    pub bend_step: f64,
}

/// Offsets of the second look, in ulps of max(|x|, 1): small enough that
/// the derivative does not change, spread enough that the rounding pattern
/// of intermediates larger than x changes too.
pub(crate) const LOOK_OFFSETS: [f64; 8] = [-4096.0, -256.0, -16.0, -1.0, 1.0, 16.0, 256.0, 4096.0];

/// The largest distance of `values` (with the point itself at offset 0,
/// value `at_zero`) from the straight line that fits them best: the
/// scatter of a quantity that should change linearly over these offsets.
pub(crate) fn scatter(offsets: &[f64], values: &[f64], at_zero: f64) -> f64 {
    let n = (values.len() + 1) as f64;
    let (sx, sy) = offsets
        .iter()
        .zip(values)
        .fold((0.0, at_zero), |(a, b), (x, y)| (a + x, b + y));
    let (mx, my) = (sx / n, sy / n);
    let (mut sxy, mut sxx) = ((0.0 - mx) * (at_zero - my), (0.0 - mx) * (0.0 - mx));
    for (x, y) in offsets.iter().zip(values) {
        sxy += (x - mx) * (y - my);
        sxx += (x - mx) * (x - mx);
    }
    let slope = if sxx > 0.0 { sxy / sxx } else { 0.0 };
    let line = |x: f64| my + slope * (x - mx);
    offsets
        .iter()
        .zip(values)
        .map(|(x, y)| (y - line(*x)).abs())
        .fold((at_zero - line(0.0)).abs(), f64::max)
}

/// The largest distance of `values` (and `at_zero` at offset 0) from the
/// parabola that fits them best: the scatter of a quantity that should
/// change smoothly (to second order) over these offsets.
pub(crate) fn scatter_about_parabola(offsets: &[f64], values: &[f64], at_zero: f64) -> f64 {
    let xs: Vec<f64> = std::iter::once(0.0)
        .chain(offsets.iter().copied())
        .collect();
    let ys: Vec<f64> = std::iter::once(at_zero)
        .chain(values.iter().copied())
        .collect();
    if xs.len() < 4 {
        return 0.0;
    }
    // Least squares for y = a + b x + c x² through the normal equations.
    let n = xs.len() as f64;
    let (mut s1, mut s2, mut s3, mut s4) = (0.0, 0.0, 0.0, 0.0);
    let (mut t0, mut t1, mut t2) = (0.0, 0.0, 0.0);
    let mean = ys.iter().sum::<f64>() / n;
    for (&x, &y) in xs.iter().zip(&ys) {
        let (x2, y) = (x * x, y - mean);
        s1 += x;
        s2 += x2;
        s3 += x2 * x;
        s4 += x2 * x2;
        t0 += y;
        t1 += x * y;
        t2 += x2 * y;
    }
    let m = [[n, s1, s2], [s1, s2, s3], [s2, s3, s4]];
    let Some([a, b, c]) = solve3(m, [t0, t1, t2]) else {
        return 0.0;
    };
    xs.iter()
        .zip(&ys)
        .map(|(&x, &y)| (y - mean - (a + b * x + c * x * x)).abs())
        .fold(0.0, f64::max)
}

/// Solves a 3×3 linear system by Cramer's rule.
fn solve3(m: [[f64; 3]; 3], r: [f64; 3]) -> Option<[f64; 3]> {
    let det = |m: [[f64; 3]; 3]| {
        m[0][0] * (m[1][1] * m[2][2] - m[1][2] * m[2][1])
            - m[0][1] * (m[1][0] * m[2][2] - m[1][2] * m[2][0])
            + m[0][2] * (m[1][0] * m[2][1] - m[1][1] * m[2][0])
    };
    let d = det(m);
    if d == 0.0 || !d.is_finite() {
        return None;
    }
    let mut out = [0.0; 3];
    for (k, slot) in out.iter_mut().enumerate() {
        let mut mk = m;
        for (row, &v) in mk.iter_mut().zip(&r) {
            row[k] = v;
        }
        *slot = det(mk) / d;
    }
    Some(out)
}

/// Measures the forward's rounding (moves of a few ulps of max(|x|, 1))
/// and how the derivative bends (±10⁻⁴·max(|x|, 1)) at the point.
pub(crate) fn look(line: &mut impl Line) -> Look {
    let mut touched = 0.0_f64;
    let noise = {
        let ulp = line.eps() * line.scale();
        let mut offsets = Vec::with_capacity(LOOK_OFFSETS.len());
        let mut values = Vec::with_capacity(LOOK_OFFSETS.len());
        for k in LOOK_OFFSETS {
            let s = line.at(k * ulp);
            if s.finite && s.step != 0.0 {
                offsets.push(s.step / ulp);
                values.push(s.delta);
                touched = touched.max(s.touched);
            }
        }
        scatter(&offsets, &values, 0.0)
    };
    let bend_step = 1e-4 * line.scale();
    let (p, m) = (line.at(bend_step), line.at(-bend_step));
    let (p2, m2) = (line.at(2.0 * bend_step), line.at(-2.0 * bend_step));
    let (mut curvature, mut third) = (0.0, 0.0);
    if p.finite && m.finite && p2.finite && m2.finite {
        let s = 0.5 * (p.step - m.step);
        curvature = ((p.delta + m.delta) / (s * s)).abs();
        third = ((p2.delta - 2.0 * p.delta + 2.0 * m.delta - m2.delta) / (2.0 * s * s * s)).abs();
    }
    let finite_or_zero = |v: f64| if v.is_finite() { v } else { 0.0 };
    Look {
        noise,
        touched,
        curvature: finite_or_zero(curvature),
        third: finite_or_zero(third),
        bend_step,
    }
}

/// The largest step ≤ `h` (shrunk by 4 each try, at most 40 times) at
/// which both φ(x ± step) are finite: steps never leave the region where
/// the forward is defined. `None` if no such step exists (x sits on the
/// edge of the domain).
pub(crate) fn finite_pair(line: &mut impl Line, mut h: f64) -> Option<(f64, Pair, usize)> {
    let mut evals = 0;
    for _ in 0..40 {
        let p = line.pair(h);
        evals += 2;
        if p.finite && p.width > 0.0 {
            return Some((h, p, evals));
        }
        h /= 4.0;
    }
    None
}

/// A [`Line`] over a plain scalar function in `f64`.
pub(crate) struct ScalarLine<F> {
    f: F,
    x: f64,
    at_x: f64,
}

impl<F: FnMut(f64) -> f64> ScalarLine<F> {
    pub(crate) fn new(mut f: F, x: f64) -> Self {
        let at_x = f(x);
        ScalarLine { f, x, at_x }
    }
}

/// The sample of a scalar function moved from `x` (value `at_x`) to `xt`
/// (value `value`).
pub(crate) fn scalar_sample(x: f64, at_x: f64, xt: f64, value: f64) -> Sample {
    let delta = value - at_x;
    Sample {
        step: xt - x,
        delta,
        touched: if delta == 0.0 {
            0.0
        } else {
            value.abs().max(at_x.abs())
        },
        rounds_like: 0.0,
        finite: value.is_finite(),
    }
}

impl<F: FnMut(f64) -> f64> Line for ScalarLine<F> {
    fn eps(&self) -> f64 {
        f64::EPSILON
    }
    fn x(&self) -> f64 {
        self.x
    }
    fn at(&mut self, t: f64) -> Sample {
        let xt = self.x + t;
        scalar_sample(self.x, self.at_x, xt, (self.f)(xt))
    }
    fn pair(&mut self, h: f64) -> Pair {
        let p = self.at(h);
        let m = self.at(-h);
        pair_of(p, m, self.at_x)
    }
}

/// The central difference of a scalar function from its samples at +h
/// (`p`) and −h (`m`), with value `at_x` at the point.
pub(crate) fn pair_of(p: Sample, m: Sample, at_x: f64) -> Pair {
    let width = p.step - m.step;
    let derivative = (p.delta - m.delta) / width;
    Pair {
        derivative,
        terms: derivative.abs(),
        touched: p.touched.max(m.touched),
        rounds_like: p.rounds_like.max(m.rounds_like),
        still: if p.delta == 0.0 && m.delta == 0.0 {
            at_x.abs()
        } else {
            0.0
        },
        width,
        finite: p.finite && m.finite,
    }
}

/// Central-difference derivative of a scalar function at `x`, with the step
/// h = ε^(1/3)·max(|x|, 1) made exactly representable (shrunk where the
/// function is not finite at x ± h), and an error estimate from the spread
/// against step 2h.
///
/// ```
/// let d = plumbline::scheme::central_difference(f64::sin, 1.0);
/// assert!((d.value - 1.0_f64.cos()).abs() < 1e-9);
/// assert!(d.error < 1e-8);
/// ```
pub fn central_difference(f: impl FnMut(f64) -> f64, x: f64) -> Estimate {
    central::estimate(&mut ScalarLine::new(f, x))
}

/// Ridders' derivative of a scalar function at `x` from the initial
/// (largest) step `h0`, cross-checked against a small-step Richardson
/// estimate; the error estimate is the extrapolation's, inflated 10×, and
/// never below the distance to that check.
///
/// (C. J. F. Ridders, "Accurate computation of F′(x) and F′(x)F″(x)",
/// Advances in Engineering Software 4(2):75–76, 1982.)
///
/// ```
/// let d = plumbline::scheme::ridders_derivative(f64::exp, 0.0, 0.1);
/// assert!((d.value - 1.0).abs() < 1e-13);
/// // 4 for the first cross-check, up to 8 for finer ones, at most 20 for
/// // one pass of the extrapolation; exp needs no restart from smaller steps.
/// assert!(d.evals <= 32, "{}", d.evals);
/// ```
pub fn ridders_derivative(f: impl FnMut(f64) -> f64, x: f64, h0: f64) -> Estimate {
    ridders::estimate_from(&mut ScalarLine::new(f, x), h0)
}

/// One-sided derivatives of a scalar function at `x` if it has a kink
/// within ±h of `x` (`None` if it is smooth there).
///
/// ```
/// use plumbline::scheme::one_sided_derivatives;
/// let k = one_sided_derivatives(f64::abs, 0.0, 1e-3).unwrap();
/// assert!((k.left + 1.0).abs() < 1e-9 && (k.right - 1.0).abs() < 1e-9);
/// assert!(one_sided_derivatives(f64::tanh, 0.5, 1e-3).is_none());
/// ```
pub fn one_sided_derivatives(f: impl FnMut(f64) -> f64, x: f64, h: f64) -> Option<KinkProbe> {
    kink_test(&mut ScalarLine::new(f, x), h)
}

#[cfg(test)]
// Check values keep the digits of their source.
#[allow(clippy::excessive_precision)]
pub(crate) mod tests {
    use super::*;

    /// A line whose central differences are scripted: `derivative(s)` is
    /// D(s) at half-width s (`None`: not finite there), with fixed
    /// Σ|wᵢyᵢ| of the outputs that moved (`touched`) and did not (`still`).
    /// Every half-width asked for is recorded. The schemes' arithmetic can
    /// then be checked by hand against their documented error models.
    pub(crate) struct Script<F> {
        pub x: f64,
        pub eps: f64,
        pub derivative: F,
        pub touched: f64,
        pub still: f64,
        pub asked: Vec<f64>,
    }

    impl<F: FnMut(f64) -> Option<f64>> Script<F> {
        pub(crate) fn new(x: f64, derivative: F) -> Self {
            Script {
                x,
                eps: f64::EPSILON,
                derivative,
                touched: 1.0,
                still: 0.0,
                asked: Vec::new(),
            }
        }
    }

    impl<F: FnMut(f64) -> Option<f64>> Line for Script<F> {
        fn eps(&self) -> f64 {
            self.eps
        }
        fn x(&self) -> f64 {
            self.x
        }
        fn at(&mut self, _: f64) -> Sample {
            unreachable!("scripted lines answer pairs only")
        }
        fn pair(&mut self, h: f64) -> Pair {
            self.asked.push(h);
            match (self.derivative)(h) {
                Some(d) => Pair {
                    derivative: d,
                    terms: d.abs(),
                    touched: self.touched,
                    rounds_like: 0.0,
                    still: self.still,
                    width: 2.0 * h,
                    finite: true,
                },
                None => Pair {
                    width: 2.0 * h,
                    ..Pair::default()
                },
            }
        }
    }

    /// Relative closeness for check values.
    fn close(got: f64, want: f64, rel: f64) -> bool {
        (got - want).abs() <= rel * want.abs()
    }

    #[test]
    fn scheme_names_round_trip_and_parse_leniently() {
        for (s, name) in [
            (Scheme::ComplexStep, "complex-step"),
            (Scheme::Ridders, "ridders"),
            (Scheme::Central, "central"),
        ] {
            assert_eq!(s.as_str(), name);
            assert_eq!(s.to_string(), name);
            assert_eq!(name.parse::<Scheme>(), Ok(s));
        }
        assert_eq!(" COMPLEX_STEP ".parse::<Scheme>(), Ok(Scheme::ComplexStep));
        assert_eq!("complex".parse::<Scheme>(), Ok(Scheme::ComplexStep));
        assert_eq!("Ridders".parse::<Scheme>(), Ok(Scheme::Ridders));
        assert_eq!("CENTRAL".parse::<Scheme>(), Ok(Scheme::Central));
        assert!("forward".parse::<Scheme>().is_err());
        assert!("".parse::<Scheme>().is_err());
    }

    #[test]
    fn an_estimate_that_could_not_be_formed_never_passes() {
        let e = Estimate::not_finite(12);
        assert!(e.value.is_nan() && e.error.is_nan(), "{e:?}");
        assert_eq!((e.evals, e.conclusive, e.amplification), (12, false, 1.0));
    }

    #[test]
    fn wide_means_a_truncation_above_one_percent_of_the_size() {
        // WIDE = 1% of max(|derivative|, Σ|terms|) (doc comment of WIDE).
        assert!(conclusive(0.01, 1.0, 0.0));
        assert!(!conclusive(0.011, 1.0, 0.0));
        assert!(!conclusive(0.5, -1.0, 0.0));
        assert!(conclusive(0.05, -10.0, 0.0));
        assert!(!conclusive(0.2, -10.0, 0.0));
        // Σ|terms| sets the size when it is the larger.
        assert!(conclusive(0.02, 0.001, 2.0));
        assert!(!conclusive(0.03, 0.001, 2.0));
    }

    #[test]
    fn rounding_and_quantization_follow_their_documented_models() {
        // Pair::rounding: 4 ulps of the outputs that moved, over the width;
        // quantization: 4 × (one ulp, counted twice) of the still outputs
        // over the width. Worked by hand: 4·1e-3·2/0.5 and 8·1e-3·3/0.5.
        let p = Pair {
            touched: 2.0,
            still: 3.0,
            width: 0.5,
            ..Pair::default()
        };
        assert!(
            close(p.rounding(1e-3), 0.016, 1e-15),
            "{}",
            p.rounding(1e-3)
        );
        assert!(close(quantization(&p, 1e-3), 0.048, 1e-15));
    }

    #[test]
    fn scatter_is_the_largest_distance_from_the_least_squares_line() {
        // (0,0), (1,1), (2,2), (3,4): the line is y = 1.3x − 0.2, the
        // largest residual 0.4 at x = 2 (worked by hand; mpmath 1.3 at 40
        // digits gives 0.4).
        let s = scatter(&[1.0, 2.0, 3.0], &[1.0, 2.0, 4.0], 0.0);
        assert!(close(s, 0.4, 1e-14), "{s}");
        // The point itself counts, and a shift of every value changes nothing.
        let s = scatter(&[1.0, 2.0, 3.0], &[11.0, 12.0, 14.0], 10.0);
        assert!(close(s, 0.4, 1e-13), "{s}");
        // Points on a line scatter by nothing; the point alone, by nothing.
        assert!(scatter(&[-2.0, 1.0, 5.0], &[-6.0, 3.0, 15.0], 0.0) < 1e-14);
        assert_eq!(scatter(&[], &[], 3.0), 0.0);
        // Offsets 1, −2, 3, 5 with values 2, 0, 7, −1 and 1 at 0:
        // 4.9041095890410958904 (mpmath 1.3 at 40 digits, normal equations).
        let s = scatter(&[1.0, -2.0, 3.0, 5.0], &[2.0, 0.0, 7.0, -1.0], 1.0);
        assert!(close(s, 4.904_109_589_041_095_890_4, 1e-13), "{s}");
    }

    #[test]
    fn scatter_about_a_parabola_is_the_least_squares_residual() {
        // mpmath 1.3 at 40 digits, normal equations of y = a + bx + cx²:
        // (0..4, [0,0,0,0,1]) → 0.25714285714285714286;
        // offsets 1, −2, 3, 5, values 2, 0, 7, −1, 1 at 0 → 3.6365608361269966476.
        let s = scatter_about_parabola(&[1.0, 2.0, 3.0, 4.0], &[0.0, 0.0, 0.0, 1.0], 0.0);
        assert!(close(s, 0.257_142_857_142_857_142_86, 1e-12), "{s}");
        let s = scatter_about_parabola(&[1.0, -2.0, 3.0, 5.0], &[2.0, 0.0, 7.0, -1.0], 1.0);
        assert!(close(s, 3.636_560_836_126_996_647_6, 1e-12), "{s}");
        // Points on a parabola: nothing left over.
        let on = |x: f64| 2.0 - x + 0.5 * x * x;
        let xs = [-3.0, -1.0, 2.0, 4.0, 7.0];
        let ys: Vec<f64> = xs.iter().map(|&x| on(x)).collect();
        assert!(scatter_about_parabola(&xs, &ys, on(0.0)) < 1e-12);
        // Three points or fewer fit any parabola.
        assert_eq!(scatter_about_parabola(&[1.0, 2.0], &[5.0, -3.0], 1.0), 0.0);
        // Repeated offsets leave the normal equations singular: 0.
        assert_eq!(
            scatter_about_parabola(&[0.0, 0.0, 0.0], &[1.0, 2.0, 3.0], 0.0),
            0.0
        );
    }

    #[test]
    fn solve3_solves_a_regular_system_and_refuses_a_singular_one() {
        // 2a + b + c = 4, a + 3b + 2c = 5, a = 6 → (6, 15, −23) (by hand;
        // mpmath lu_solve agrees).
        let m = [[2.0, 1.0, 1.0], [1.0, 3.0, 2.0], [1.0, 0.0, 0.0]];
        let x = solve3(m, [4.0, 5.0, 6.0]).unwrap();
        for (got, want) in x.iter().zip([6.0, 15.0, -23.0]) {
            assert!(close(*got, want, 1e-14), "{x:?}");
        }
        let singular = [[1.0, 2.0, 3.0], [2.0, 4.0, 6.0], [0.0, 1.0, 1.0]];
        assert!(solve3(singular, [1.0, 2.0, 3.0]).is_none());
        let huge = [[1e200, 0.0, 0.0], [0.0, 1e200, 0.0], [0.0, 0.0, 1e200]];
        assert!(solve3(huge, [1.0, 1.0, 1.0]).is_none());
    }

    /// d³ + 2d² + d with d = x − 1, plus 1e-12 just left of 1 (within a
    /// millionth): a forward whose rounding pattern is known exactly.
    fn bumpy(x: f64) -> f64 {
        let d = x - 1.0;
        let bump = if d < 0.0 && d > -1e-6 { 1e-12 } else { 0.0 };
        d * d * d + 2.0 * d * d + d + bump
    }

    #[test]
    fn look_measures_rounding_curvature_and_third_derivative() {
        let l = look(&mut ScalarLine::new(bumpy, 1.0));
        // The moves are k ulps of 1 for the eight LOOK_OFFSETS; the bump
        // on the left side scatters 5.5542585782755457901e-13 about the
        // best line (mpmath 1.3 at 40 digits, normal equations).
        assert!(
            close(l.noise, 5.554_258_578_275_545_790_1e-13, 1e-6),
            "{l:?}"
        );
        // The largest output moved: 1e-12 − 2⁻⁵² one ulp left of 1 (by
        // hand: 9.99777955395074969e-13).
        assert!(
            close(l.touched, 9.997_779_553_950_749_69e-13, 1e-6),
            "{l:?}"
        );
        // φ″(1) = 4 and φ‴(1) = 6 (from the polynomial, by hand).
        assert_eq!(l.bend_step, 1e-4);
        assert!(close(l.curvature, 4.0, 1e-6), "{l:?}");
        assert!(close(l.third, 6.0, 1e-6), "{l:?}");
        // The step scales with max(|x|, 1).
        let l = look(&mut ScalarLine::new(|x: f64| x * x, -8.0));
        assert_eq!(l.bend_step, 8e-4);
        assert!(close(l.curvature, 2.0, 1e-6), "{l:?}");
        assert!(l.third < 1e-3, "{l:?}");
    }

    #[test]
    fn look_skips_moves_where_the_forward_is_not_finite() {
        // The same bump with the move of +16 ulps not finite: the other seven
        // scatter 5.0012946134757952403e-13 (mpmath 1.3 at 40 digits).
        let sixteen = 1.0 + 16.0 * f64::EPSILON;
        let f = |x: f64| if x == sixteen { f64::NAN } else { bumpy(x) };
        let l = look(&mut ScalarLine::new(f, 1.0));
        assert!(
            close(l.noise, 5.001_294_613_475_795_240_3e-13, 1e-6),
            "{l:?}"
        );
        // A forward not finite at the bend steps has no curvature to report.
        let g = |x: f64| if (x - 1.0).abs() > 1e-6 { f64::NAN } else { x };
        let l = look(&mut ScalarLine::new(g, 1.0));
        assert_eq!((l.curvature, l.third), (0.0, 0.0), "{l:?}");
    }

    #[test]
    fn finite_pair_shrinks_by_four_until_both_ends_are_finite() {
        // Finite only within 1e-3 of x = 2: 1 → 1/4 → … → 4⁻⁵ = 9.765625e-4,
        // after six pairs (twelve evaluations).
        let f = |x: f64| {
            if (x - 2.0).abs() < 1e-3 {
                x * x
            } else {
                f64::NAN
            }
        };
        let (h, p, evals) = finite_pair(&mut ScalarLine::new(f, 2.0), 1.0).unwrap();
        assert_eq!((h, evals), (9.765_625e-4, 12));
        assert!(p.finite && close(p.derivative, 4.0, 1e-12), "{p:?}");
        // Nowhere finite, or steps lost below an ulp of x: no pair.
        assert!(finite_pair(&mut ScalarLine::new(|_| f64::NAN, 0.0), 1.0).is_none());
        assert!(finite_pair(&mut ScalarLine::new(|x| x, 1e20), 1.0).is_none());
    }

    #[test]
    fn a_scalar_line_measures_against_the_point() {
        let mut line = ScalarLine::new(|x: f64| 3.0 * x, 2.0);
        assert_eq!(
            (line.eps(), line.x(), line.scale()),
            (f64::EPSILON, 2.0, 2.0)
        );
        let s = line.at(0.5);
        assert_eq!(
            (s.step, s.delta, s.touched, s.finite),
            (0.5, 1.5, 7.5, true)
        );
        let s = line.at(-0.5);
        assert_eq!((s.step, s.delta, s.touched), (-0.5, -1.5, 6.0));
        let p = line.pair(0.25);
        assert_eq!((p.derivative, p.terms, p.width), (3.0, 3.0, 0.5));
        assert_eq!((p.touched, p.still, p.finite), (6.75, 0.0, true));
        assert_eq!(ScalarLine::new(|x: f64| x, -0.5).scale(), 1.0);
        // A move that changes nothing touches nothing; an output that moves
        // at neither end is still.
        let mut flat = ScalarLine::new(|_| -5.0, 1.0);
        assert_eq!(flat.at(0.1).touched, 0.0);
        let p = flat.pair(0.1);
        assert_eq!((p.derivative, p.still), (0.0, 5.0));
        // Still only when neither end moved.
        let mut half = ScalarLine::new(|x: f64| x.max(1.0), 1.0);
        assert_eq!(half.pair(0.5).still, 0.0);
        let mut half = ScalarLine::new(|x: f64| x.min(1.0), 1.0);
        assert_eq!(half.pair(0.5).still, 0.0);
        // One end not finite: the pair is not.
        let mut edge = ScalarLine::new(|x: f64| if x > 1.0 { f64::NAN } else { x }, 1.0);
        assert!(!edge.pair(0.5).finite);
        let mut edge = ScalarLine::new(|x: f64| if x < 1.0 { f64::NAN } else { x }, 1.0);
        assert!(!edge.pair(0.5).finite);
    }
}
