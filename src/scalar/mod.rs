//! Scalar types: what a forward pass may compute with, the two precisions
//! a layer may be written in, and the complex-step number.

use std::fmt::{Debug, Display};
use std::iter::Sum;

use num_traits::{Float, NumAssign};

mod complex_step;
mod traced;

pub use complex_step::{complex_step_derivative, ComplexStep};
pub(crate) use traced::Traced;

/// A scalar a generic forward pass can compute with.
///
/// Every `num_traits::Float` method is available, plus the compound
/// assignment operators, `Sum`, and the special functions layers need that
/// `Float` lacks (`erf`, for the exact GELU). plumbline implements it for
/// `f32`, `f64` and [`ComplexStep`](ComplexStep), so a forward written
/// once against `T: Scalar` runs in the layer's own precision, in `f64`, and
/// under the complex step.
///
/// Code written for `T: num_traits::Float` can be called from a
/// `T: Scalar` forward unchanged.
///
/// # Laws
/// * For real types, `erf` agrees with the error function to a few ulp
///   (NIST DLMF 7.2.1).
/// * For [`ComplexStep`](ComplexStep), every method carries the
///   derivative in the imaginary part (see its docs for the conventions).
///
/// ```
/// use plumbline::scalar::Scalar;
/// fn gelu<T: Scalar>(x: T) -> T {
///     let half = T::from(0.5).unwrap();
///     half * x * (T::one() + (x / T::from(2.0).unwrap().sqrt()).erf())
/// }
/// assert!((gelu(1.0_f64) - 0.841_344_746_068_542_9).abs() < 1e-15);
/// assert!((gelu(1.0_f32) - 0.841_344_75).abs() < 1e-6);
/// ```
pub trait Scalar: Float + NumAssign + Sum + Debug + Display + Send + Sync + 'static {
    /// The error function erf(x) = (2/√π) ∫₀ˣ e^(−t²) dt (NIST DLMF 7.2.1).
    fn erf(self) -> Self;
}

impl Scalar for f64 {
    fn erf(self) -> Self {
        libm::erf(self)
    }
}

impl Scalar for f32 {
    fn erf(self) -> Self {
        libm::erff(self)
    }
}

mod sealed {
    pub trait Sealed {}
    impl Sealed for f32 {}
    impl Sealed for f64 {}
}

/// The precision a layer is written in: `f32` or `f64`.
///
/// Sealed: the audit's rounding model knows exactly these two.
///
/// ```
/// use plumbline::scalar::Real;
/// assert_eq!(<f32 as Real>::NAME, "f32");
/// assert_eq!(<f64 as Real>::from_f64(0.5), 0.5);
/// ```
pub trait Real: Scalar + sealed::Sealed + Default + serde::Serialize {
    /// `"f32"` or `"f64"`, as shown in reports.
    const NAME: &'static str;
    /// Machine epsilon of this precision, as an `f64`.
    const EPS: f64;
    /// Converts from `f64`, rounding to nearest.
    fn from_f64(x: f64) -> Self;
    /// Converts to `f64` (exact).
    fn as_f64(self) -> f64;
}

impl Real for f64 {
    const NAME: &'static str = "f64";
    const EPS: f64 = f64::EPSILON;
    fn from_f64(x: f64) -> Self {
        x
    }
    fn as_f64(self) -> f64 {
        self
    }
}

impl Real for f32 {
    const NAME: &'static str = "f32";
    const EPS: f64 = f32::EPSILON as f64;
    fn from_f64(x: f64) -> Self {
        x as f32
    }
    fn as_f64(self) -> f64 {
        self as f64
    }
}
