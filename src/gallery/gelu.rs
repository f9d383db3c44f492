//! GELU in its exact (erf) form: a generic scalar function shared with the
//! residual block, and a layer written for `f32` only.

use super::{c, planted_bugs, Case, Draw, Kind, Subject};
use crate::layer::{Args, Forward, Gradients, Layer};
use crate::scalar::Scalar;
use crate::signature::Signature;
use crate::tensor::Tensor;

planted_bugs! {
    /// Mistakes planted in [`Gelu`]'s backward.
    GeluBug {
        /// The derivative is evaluated at the output instead of the input.
        DerivativeAtOutput = "derivative-at-output" => ("x", Kind::WrongFormula),
        /// The x·φ(x) term is dropped: only Φ(x) is returned.
        MissingDensityTerm = "missing-density-term" => ("x", Kind::WrongFormula),
        /// The normal density is written without its 1/√(2π).
        DensityUnnormalised = "density-unnormalised" => ("x", Kind::WrongFormula),
        /// The derivative of the tanh approximation is used for the exact (erf) forward.
        TanhApproximation = "tanh-approximation" => ("x", Kind::WrongFormula),
        /// The gradient is negated.
        SignFlipped = "sign-flipped" => ("x", Kind::SignFlipped),
    }
}

/// GELU(x) = x·Φ(x) = ½x(1 + erf(x/√2)) (Φ: normal CDF, A&S 26.2.29).
///
/// ```
/// // GELU(1) = 0.84134474606854294859 (computed with mpmath at 40 digits).
/// assert!((plumbline::gallery::gelu(1.0_f64) - 0.841_344_746_068_542_9).abs() < 1e-15);
/// ```
pub fn gelu<T: Scalar>(x: T) -> T {
    c::<T>(0.5) * x * (T::one() + (x / c::<T>(std::f64::consts::SQRT_2)).erf())
}

/// GELU′(x) = Φ(x) + x·φ(x), φ(x) = e^(−x²/2)/√(2π).
///
/// ```
/// // GELU′(1) = 1.0833154705876862984 (computed with mpmath at 40 digits).
/// let d = plumbline::gallery::gelu_derivative(1.0_f64);
/// assert!((d - 1.083_315_470_587_686_3).abs() < 1e-14);
/// ```
pub fn gelu_derivative<T: Scalar>(x: T) -> T {
    let cdf = c::<T>(0.5) * (T::one() + (x / c::<T>(std::f64::consts::SQRT_2)).erf());
    let pdf = (-x * x / c::<T>(2.0)).exp() / c::<T>((2.0 * std::f64::consts::PI).sqrt());
    cdf + x * pdf
}

/// The derivative of the tanh approximation ½x(1 + tanh(k(x + 0.044715x³))),
/// k = √(2/π) (Hendrycks & Gimpel, "Gaussian Error Linear Units", 2016):
/// ½(1 + t) + ½x(1 − t²)·k(1 + 3·0.044715x²). A planted bug uses it.
fn tanh_gelu_derivative<T: Scalar>(x: T) -> T {
    let (half, one, a) = (c::<T>(0.5), T::one(), c::<T>(0.044715));
    let k = c::<T>((2.0 / std::f64::consts::PI).sqrt());
    let t = (k * (x + a * x * x * x)).tanh();
    half * (one + t) + half * x * (one - t * t) * k * (one + c::<T>(3.0) * a * x * x)
}

/// GELU applied elementwise, written for `f32` only (a plain [`Layer`]:
/// the audit uses Ridders' method in `f32`).
///
/// Backward: `dx = g·GELU′(x)` with [`gelu_derivative`].
///
/// ```
/// use plumbline::gallery::Gelu;
/// use plumbline::Audit;
/// let report = Audit::new().run(&Gelu::new(None), &Gelu::args(8))?;
/// report.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct Gelu {
    /// The planted bug, or `None` for the correct layer.
    pub bug: Option<GeluBug>,
    /// A bug planted in the layer's other rules (see
    /// [`GeluRuleBug`](crate::gallery::GeluRuleBug)), or `None`.
    pub rule_bug: Option<super::GeluRuleBug>,
}

impl Gelu {
    /// The layer, correct (`None`) or with a planted bug.
    pub fn new(bug: Option<GeluBug>) -> Self {
        Gelu {
            bug,
            rule_bug: None,
        }
    }

    /// Random arguments: a 2×5 tensor with values in [-3, 3].
    pub fn args(seed: u64) -> Args<f32> {
        Args::new(vec![Draw::new(seed).uniform(&[2, 5], 3.0)], vec![])
    }
}

impl Layer for Gelu {
    type Real = f32;

    fn signature(&self) -> Signature {
        Signature::new().input("x", "*").output("y", "*")
    }

    fn backward(&self, a: &Args<f32>, up: &[Tensor<f32>]) -> Gradients<f32> {
        self.backward_with(a, up)
    }
}

impl Gelu {
    /// The backward for any scalar, with the planted bug.
    pub(crate) fn backward_with<T: Scalar>(&self, a: &Args<T>, up: &[Tensor<T>]) -> Gradients<T> {
        let x = a.input(0);
        let (half, one, root2) = (c::<T>(0.5), T::one(), c::<T>(std::f64::consts::SQRT_2));
        let dx = x.data().iter().zip(up[0].data()).map(|(&x, &g)| {
            let d = match self.bug {
                None => gelu_derivative(x),
                Some(GeluBug::DerivativeAtOutput) => gelu_derivative(gelu(x)),
                Some(GeluBug::MissingDensityTerm) => half * (one + (x / root2).erf()),
                Some(GeluBug::DensityUnnormalised) => {
                    half * (one + (x / root2).erf()) + x * (-x * x / c::<T>(2.0)).exp()
                }
                Some(GeluBug::TanhApproximation) => tanh_gelu_derivative(x),
                Some(GeluBug::SignFlipped) => -gelu_derivative(x),
            };
            g * d
        });
        Gradients::from(vec![super::tensor(x.shape().to_vec(), dx.collect())])
    }
}

impl Forward for Gelu {
    fn forward(&self, a: &Args<f32>) -> Vec<Tensor<f32>> {
        vec![a.input(0).map(gelu)]
    }
}

pub(crate) fn register(out: &mut Vec<Case>) {
    out.push(Case::new("gelu", "f32", false, None, |s| {
        Subject::F32(Box::new(Gelu::new(None)), Gelu::args(s))
    }));
    for &bug in GeluBug::ALL {
        out.push(Case::new(
            "gelu",
            "f32",
            false,
            Some(bug.info()),
            move |s| Subject::F32(Box::new(Gelu::new(Some(bug))), Gelu::args(s)),
        ));
    }
}
