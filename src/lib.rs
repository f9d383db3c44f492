//! Prove, from `cargo test`, that every hand-written backward pass agrees
//! with its forward.
//!
//! You wrote a layer's backward pass by hand (a fused attention block, a
//! custom norm, an op your framework lacks). plumbline moves every element
//! of every input and parameter, measures how a random projection of the
//! outputs changes, and compares that with what your backward returns,
//! element by element, with an error bar for each comparison. When they
//! disagree it says which tensor, where, by how much, and what kind of bug
//! it looks like (sign, factor, transpose, shape, missing, partial...).
//!
//! # From the top
//!
//! * [`Layer`] is what you implement: a [`Signature`] naming the tensors and
//!   a hand-written `backward` returning [`Gradients`]; plus the forward,
//!   either [`GenericForward`] (written once for any [`Scalar`]: the audit
//!   then gets exact complex-step references for free, even for `f32`
//!   layers) or [`Forward`] (one precision only, audited with Ridders'
//!   method). The three traits share no method name, so
//!   `use plumbline::prelude::*` brings them all without ambiguity. To
//!   check a layer you did not write, [`FnLayer`] makes one from a
//!   signature and two closures.
//! * [`Audit`] is a builder of settings whose [`run`](Audit::run) checks a
//!   layer at given [`Args`] and returns a [`Report`]. The audit computes;
//!   it never prints.
//! * Other hand-written rules are optional traits: [`TangentRule`] (a
//!   forward-mode rule, checked by [`Audit::run_tangents`] against the
//!   forward's directional derivatives and against the backward by the
//!   adjoint identity) and [`GenericBackward`] (a backward for any
//!   [`Scalar`], which [`Audit::run_second_order`] differentiates by the
//!   complex step to check a hand-written Hessian-vector product and the
//!   symmetry of the backward's Jacobian).
//! * [`Report`] holds one [`Row`] per tensor, worst first, with the worst
//!   element, the bound that applied, a [`Verdict`] and a [`Diagnosis`].
//!   `Display` renders the aligned table; [`Report::assert_passed`] panics
//!   with it. In tests, [`assert_backward!`] and [`check_layer`] (for
//!   proptest) add the `PLUMBLINE_*` environment ([`env`]) for CI;
//!   [`assert_tangents`] and [`assert_second_order`] do the same for a
//!   layer's forward-mode rule ([`TangentRule`]) and second order
//!   ([`GenericBackward`]).
//!
//! # Example
//!
//! ```
//! use plumbline::prelude::*;
//!
//! /// y = w·x + b for a batch of rows x.
//! struct Dense;
//!
//! impl Layer for Dense {
//!     type Real = f64;
//!     fn signature(&self) -> Signature {
//!         Signature::new()
//!             .input("x", "batch, in")
//!             .param("w", "out, in")
//!             .param("b", "out")
//!             .output("y", "batch, out")
//!     }
//!     fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
//!         let (x, w, g) = (a.input(0), a.param(0), &up[0]);
//!         let (n, i, o) = (x.shape()[0], x.shape()[1], w.shape()[0]);
//!         let dx = Tensor::from_fn(vec![n, i], |ix| (0..o).map(|r| g[[ix[0], r]] * w[[r, ix[1]]]).sum());
//!         let dw = Tensor::from_fn(vec![o, i], |ix| (0..n).map(|s| g[[s, ix[0]]] * x[[s, ix[1]]]).sum());
//!         let db = Tensor::from_fn(vec![o], |ix| (0..n).map(|s| g[[s, ix[0]]]).sum());
//!         Gradients::from(vec![dx, dw, db])
//!     }
//! }
//!
//! impl GenericForward for Dense {
//!     fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
//!         let (x, w, b) = (a.input(0), a.param(0), a.param(1));
//!         let (n, o) = (x.shape()[0], w.shape()[0]);
//!         vec![Tensor::from_fn(vec![n, o], |ix| {
//!             (0..x.shape()[1]).fold(b[[ix[1]]], |s, k| s + w[[ix[1], k]] * x[[ix[0], k]])
//!         })]
//!     }
//! }
//!
//! let x = Tensor::new(vec![2, 3], vec![0.5, -1.0, 2.0, 0.1, 0.2, -0.3])?;
//! let w = Tensor::new(vec![2, 3], vec![0.3, -0.2, 0.1, 0.7, 0.4, -0.6])?;
//! let b = Tensor::new(vec![2], vec![0.05, -0.01])?;
//! let report = Audit::new().run(&Dense, &Args::new(vec![x], vec![w, b]))?;
//! println!("{report}");
//! report.assert_passed();
//! # Ok::<(), plumbline::Error>(())
//! ```
//!
//! # Modules
//! The root holds what a first test names; the rest lives in modules named
//! for what they hold: [`scalar`] (the scalar traits and the complex-step
//! number), [`scheme`] (difference schemes on plain functions), [`audit`]
//! (progress, defaults), [`report`] (what a row holds), [`render`] (tables,
//! Markdown, JSON, colour, SVG pictures), [`env`] (the `PLUMBLINE_*` variables),
//! [`strategy`] (proptest), and [`prelude`].
//!
//! # Features
//! * `proptest` (default): strategies and a proptest-friendly entry point.
//! * `pictures` (default): the error-against-step picture of a row as SVG
//!   (`render::step_picture`, through plotters), also written beside the
//!   report files. Without it the report still holds the sweep's numbers.
//! * `ndarray`: conversions between [`Tensor`] and `ndarray::ArrayD`.
//! * `candle`: layers made from candle custom ops (their own `bwd`
//!   audited) and from functions of candle tensors (audited through
//!   candle's autograd), and conversions to and from `candle_core::Tensor`;
//!   see `candle`.
//! * `gallery`: correct reference layers and planted bugs, as models, and
//!   random layers from primitives for stress tests.
#![deny(missing_docs)]
#![forbid(unsafe_code)]

/// The README's examples, compiled and run as doctests.
#[cfg(doctest)]
#[doc = include_str!("../README.md")]
pub struct ReadmeDoctests;

#[cfg(any(feature = "ndarray", feature = "candle"))]
mod adapters;
pub mod audit;
mod compare;
mod diagnosis;
pub mod env;
mod error;
mod fn_layer;
mod format;
/// Correct reference layers with hand-written backward passes, planted
/// bugs in them, and random layers for stress tests (feature `gallery`).
#[cfg(feature = "gallery")]
pub mod gallery;
mod harness;
mod layer;
pub mod render;
pub mod report;
pub mod scalar;
pub mod scheme;
mod signature;
#[cfg(feature = "proptest")]
pub mod strategy;
mod tensor;
mod tolerance;

/// Audits of candle custom ops and of candle functions through candle's
/// autograd, and conversions to and from `candle_core::Tensor` (feature
/// `candle`).
#[cfg(feature = "candle")]
pub use adapters::candle;
pub use audit::Audit;
pub use diagnosis::Diagnosis;
pub use error::Error;
pub use fn_layer::FnLayer;
#[cfg(feature = "proptest")]
pub use harness::check_layer;
#[doc(hidden)]
pub use harness::{__Audited, __Entry, __OnOneThread, __OnThreads, __Pick, __assert_backward};
pub use harness::{assert_second_order, assert_tangents};
pub use layer::{Args, Forward, GenericBackward, GenericForward, Gradients, Layer, TangentRule};
pub use report::{Report, Row, Verdict};
pub use scalar::{Real, Scalar};
pub use scheme::Scheme;
pub use signature::Signature;
pub use tensor::Tensor;

/// Everything a layer file and its tests usually name, in one `use`.
///
/// ```
/// use plumbline::prelude::*;
/// let _ = Audit::new().seed(3);
/// ```
pub mod prelude {
    pub use crate::assert_backward;
    pub use crate::{
        Args, Audit, FnLayer, Forward, GenericBackward, GenericForward, Gradients, Layer, Real,
        Report, Scalar, Scheme, Signature, TangentRule, Tensor,
    };
}
