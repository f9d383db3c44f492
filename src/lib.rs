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
//! * [`Layer`] is what you implement: a [`Signature`] naming the tensors, a
//!   `forward`, and a hand-written `backward` returning [`Gradients`]. If the
//!   forward can be written for any [`Scalar`], implement [`GenericLayer`]
//!   instead and the audit gets exact complex-step references for free,
//!   even for `f32` layers.
//! * [`Audit`] is a builder of settings whose [`run`](Audit::run) checks a
//!   layer at given [`Args`] and returns a [`Report`]. The audit computes;
//!   it never prints.
//! * [`Report`] holds one [`Row`] per tensor, worst first, with the worst
//!   element, the bound that applied, a [`Verdict`] and a [`Diagnosis`].
//!   `Display` renders the aligned table; [`Report::assert_passed`] panics
//!   with it.
//!
//! # Example
//!
//! ```
//! use plumbline::{Args, Audit, GenericLayer, Gradients, Scalar, Signature, Tensor};
//!
//! /// y = w·x + b for a batch of rows x.
//! struct Dense;
//!
//! impl GenericLayer for Dense {
//!     type Real = f64;
//!     fn signature(&self) -> Signature {
//!         Signature::new()
//!             .input("x", "batch, in")
//!             .param("w", "out, in")
//!             .param("b", "out")
//!             .output("y", "batch, out")
//!     }
//!     fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
//!         let (x, w, b) = (a.input(0), a.param(0), a.param(1));
//!         let (n, o) = (x.shape()[0], w.shape()[0]);
//!         vec![Tensor::from_fn(vec![n, o], |ix| {
//!             let mut s = b.data()[ix[1]];
//!             for k in 0..x.shape()[1] {
//!                 s += w.get(&[ix[1], k]).unwrap() * x.get(&[ix[0], k]).unwrap();
//!             }
//!             s
//!         })]
//!     }
//!     fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
//!         let (x, w, g) = (a.input(0), a.param(0), &up[0]);
//!         let (n, i, o) = (x.shape()[0], x.shape()[1], w.shape()[0]);
//!         let dx = Tensor::from_fn(vec![n, i], |ix| {
//!             (0..o).map(|r| g.get(&[ix[0], r]).unwrap() * w.get(&[r, ix[1]]).unwrap()).sum()
//!         });
//!         let dw = Tensor::from_fn(vec![o, i], |ix| {
//!             (0..n).map(|s| g.get(&[s, ix[0]]).unwrap() * x.get(&[s, ix[1]]).unwrap()).sum()
//!         });
//!         let db = Tensor::from_fn(vec![o], |ix| (0..n).map(|s| g.get(&[s, ix[0]]).unwrap()).sum());
//!         Gradients::from(vec![dx, dw, db])
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
//! # Features
//! * `proptest` (default): strategies and a proptest-friendly entry point.
//! * `ndarray`: conversions between [`Tensor`] and `ndarray::ArrayD`.
//! * `gallery`: correct reference layers and planted bugs, as models.
#![deny(missing_docs)]

/// The README's examples, compiled and run as doctests.
#[cfg(doctest)]
#[doc = include_str!("../README.md")]
pub struct ReadmeDoctests;

mod audit;
mod complex_step;
mod diagnosis;
mod env;
mod error;
mod format;
/// Correct reference layers with hand-written backward passes, and planted
/// bugs in them (feature `gallery`).
#[cfg(feature = "gallery")]
pub mod gallery;
mod harness;
mod layer;
#[cfg(feature = "ndarray")]
mod ndarray_adapter;
mod render;
mod report;
mod scalar;
mod scheme;
#[cfg(feature = "proptest")]
pub mod strategy;
mod tensor;
mod terminal;
mod tolerance;

pub use audit::{Audit, Settings, COMPLEX_STEP, DEFAULT_SEED};
pub use complex_step::{complex_step_derivative, ComplexStep};
pub use diagnosis::Diagnosis;
pub use env::{
    Environment, PrintFormat, COLOR_VAR, FORMAT_VAR, KINKS_FAIL_VAR, MARGIN_FACTOR_VAR, MARGIN_VAR,
    MAX_ELEMENTS_VAR, REPORT_DIR_VAR, SCHEME_VAR, SEED_VAR,
};
pub use error::Error;
#[doc(hidden)]
pub use harness::__assert_backward;
pub use harness::CaseOutcome;
#[cfg(feature = "proptest")]
pub use harness::{check_layer, check_layer_with};
pub use layer::{
    Args, Dim, GenericLayer, Gradients, Layer, ReferenceForward, Role, Signature, Slot,
};
pub use render::{failure_message, markdown, table, Style};
pub use report::{ElementCheck, ElementStatus, JointKink, Report, Row, Verdict, Worst};
pub use scalar::{Real, Scalar};
pub use scheme::{
    central_difference, one_sided_derivatives, ridders_derivative, Estimate, KinkProbe, Scheme,
    INCONCLUSIVE,
};
pub use tensor::{Index, Tensor};
pub use terminal::{stdout_style, terminal_width, write_table, ColorChoice};
pub use tolerance::{Tolerance, DEFAULT_MARGIN, ROUNDING_ULPS};
