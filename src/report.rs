//! The audit's result: plain data, one row per checked tensor, worst first.
//! Nothing here renders or prints; `render` reads it.

pub use crate::compare::{ElementCheck, ElementStatus, JointKink};
pub use crate::diagnosis::summary::Verdict;
pub use crate::diagnosis::Culprit;
pub use crate::signature::Role;
pub use crate::tensor::MultiIndex;

use crate::diagnosis::Diagnosis;
use crate::scheme::Scheme;
use crate::tolerance::Tolerance;

/// What an audit found, for every differentiable input and parameter.
///
/// `Display` renders the aligned plain-text table (worst row first), so
/// `{}` in a panic message shows everything. The JSON form (`serde`) holds
/// the same words as the table and reads back into an identical report,
/// NaN and infinities included (they are written as the strings `"NaN"`,
/// `"inf"`, `"-inf"`).
///
/// A report carries the verdict, so dropping one unread is a warning:
///
/// ```compile_fail
/// #![deny(unused_must_use)]
/// # use plumbline::prelude::*;
/// # struct Twice;
/// # impl Layer for Twice {
/// #     type Real = f64;
/// #     fn signature(&self) -> Signature { Signature::new().input("x", "n").output("y", "n") }
/// #     fn backward(&self, _: &Args<f64>, g: &[Tensor<f64>]) -> Gradients<f64> {
/// #         Gradients::from(vec![g[0].map(|g| 2.0 * g)])
/// #     }
/// # }
/// # impl Forward for Twice {
/// #     fn forward(&self, a: &Args<f64>) -> Vec<Tensor<f64>> { vec![a.input(0).map(|x| 2.0 * x)] }
/// # }
/// fn check(args: &Args<f64>) -> Result<(), plumbline::Error> {
///     Audit::new().run(&Twice, args)?; // error: unused `Report` that must be used
///     Ok(())
/// }
/// ```
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
#[must_use = "a report carries the verdict: call `assert_passed()` or check `passed()`"]
#[non_exhaustive]
pub struct Report {
    /// The layer's name (its type name unless set with [`Audit::name`](crate::Audit::name)).
    pub layer: String,
    /// The seed of the random upstream gradient; replays the audit.
    pub seed: u64,
    /// One row per differentiable tensor, worst first.
    pub rows: Vec<Row>,
    /// Things the audit noticed about the layer or the settings, e.g. a
    /// generic forward that drops the complex step.
    #[serde(default)]
    pub notes: Vec<String>,
    /// Forward evaluations spent (all precisions).
    pub forward_evals: usize,
    /// Backward evaluations spent.
    pub backward_evals: usize,
    /// Calls of the layer's other hand-written rules (the forward-mode
    /// rule, the Hessian-vector product).
    #[serde(default)]
    pub rule_evals: usize,
    /// The layer's precision: `f32` or `f64`.
    pub(crate) precision: String,
    /// The precision the reference derivatives were computed in.
    pub(crate) reference_precision: String,
    /// The bound rule in force.
    pub(crate) tolerance: Tolerance,
    /// Whether elements at a kink that the analytic value does not fit fail
    /// the audit.
    pub(crate) kinks_fail: bool,
}

/// What a row checks: the backward against the forward (the plain audit),
/// or one of the checks of a layer's other hand-written rules.
///
/// Rows of [`Audit::run`](crate::Audit::run) are `Gradient`; those of
/// [`Audit::run_tangents`](crate::Audit::run_tangents) are `Tangent` and
/// `Adjoint`; those of
/// [`Audit::run_second_order`](crate::Audit::run_second_order) are
/// `HessianVector` and `Symmetry`. The table shows the check before the
/// tensor's name for every row but `Gradient` (`tangent y`, `adjoint`).
///
/// ```
/// use plumbline::report::Check;
/// assert_eq!(Check::default(), Check::Gradient);
/// assert_eq!(Check::Symmetry.as_str(), "symmetry");
/// ```
#[derive(
    Clone, Copy, Debug, Default, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize,
)]
#[serde(rename_all = "kebab-case")]
#[non_exhaustive]
pub enum Check {
    /// One gradient of the backward against derivatives of the forward.
    #[default]
    Gradient,
    /// One output's tangent from the hand-written forward-mode rule
    /// ([`TangentRule`](crate::TangentRule)) against the directional
    /// derivative of the forward.
    Tangent,
    /// The adjoint identity ⟨u, J v⟩ = ⟨Jᵀu, v⟩ between the forward-mode
    /// rule and the backward: one number per layer.
    Adjoint,
    /// One tensor of the hand-written Hessian-vector product
    /// ([`GenericBackward::hessian_vector`](crate::GenericBackward::hessian_vector))
    /// against the complex step through the generic backward.
    HessianVector,
    /// The integrability test ⟨v, H w⟩ = ⟨w, H v⟩: the backward's Jacobian
    /// must be symmetric, since the backward of a scalar probe is a
    /// gradient. One number per layer.
    Symmetry,
}

impl Check {
    /// The word shown in tables and JSON.
    pub fn as_str(self) -> &'static str {
        match self {
            Check::Gradient => "gradient",
            Check::Tangent => "tangent",
            Check::Adjoint => "adjoint",
            Check::HessianVector => "hessian-vector",
            Check::Symmetry => "symmetry",
        }
    }

    /// `true` for checks of the whole layer (one number), which have no
    /// tensor of their own.
    pub fn is_whole_layer(self) -> bool {
        matches!(self, Check::Adjoint | Check::Symmetry)
    }
}

impl std::fmt::Display for Check {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// The finding for one input or parameter tensor (or, for the checks of
/// other rules, one output tensor or the whole layer: see [`Check`]).
///
/// ```
/// use plumbline::prelude::*;
/// use plumbline::{Diagnosis, Verdict};
///
/// /// Hive warmth y = 3·x per sensor; `factor` scales the backward.
/// struct Warmth { factor: f64 }
///
/// impl Layer for Warmth {
///     type Real = f64;
///     fn signature(&self) -> Signature {
///         Signature::new().input("x", "sensor").output("y", "sensor")
///     }
///     fn backward(&self, _: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
///         Gradients::from(vec![up[0].map(|g| 3.0 * self.factor * g)])
///     }
/// }
///
/// impl GenericForward for Warmth {
///     fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
///         let k = T::from(3.0).unwrap();
///         vec![a.input(0).map(|x| k * x)]
///     }
/// }
///
/// let args = Args::new(vec![Tensor::new(vec![4], vec![0.1, -0.2, 0.3, 0.4])?], vec![]);
/// let report = Audit::new().run(&Warmth { factor: 2.0 }, &args)?;
/// let row = report.row("x").unwrap();
/// assert_eq!((row.checked, row.failing), (4, 4));
/// let worst = row.worst.as_ref().unwrap();
/// assert!((worst.analytic - 2.0 * worst.numeric).abs() < 1e-12);
/// # Ok::<(), plumbline::Error>(())
/// ```
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
#[non_exhaustive]
pub struct Row {
    /// What the row checks (`Gradient` in reports written before the
    /// field existed).
    #[serde(default)]
    pub check: Check,
    /// The tensor's name from the signature (for whole-layer checks, the
    /// check's name: `adjoint`, `symmetry`).
    pub name: String,
    /// Input or parameter.
    pub role: Role,
    /// The tensor's shape.
    pub shape: Vec<usize>,
    /// The shape of the gradient the backward returned (`None`: none returned).
    pub gradient_shape: Option<Vec<usize>>,
    /// The scheme that produced the numeric reference.
    pub scheme: Scheme,
    /// Elements compared.
    pub checked: usize,
    /// Elements in the tensor (more than `checked` when only a sample was
    /// compared, see [`Audit::max_elements`](crate::Audit::max_elements)).
    pub total: usize,
    /// Elements that fail (beyond their bound, or not finite).
    pub failing: usize,
    /// Elements at a non-differentiable point.
    pub kinks: usize,
    /// Elements not compared because they are ±∞ or NaN (a masked logit);
    /// their gradient must still be finite.
    #[serde(default)]
    pub unchecked: usize,
    /// Elements that agree within a wide bound: the reference's own error
    /// was above 1% of the derivative there.
    #[serde(default)]
    pub wide: usize,
    /// The element furthest beyond its bound (or the closest to it, if all
    /// agree).
    pub worst: Option<Worst>,
    /// Largest |analytic − numeric|.
    #[serde(with = "crate::format::float_text")]
    pub max_abs_error: f64,
    /// Largest |a − n| / max(|a|, |n|) over elements.
    #[serde(with = "crate::format::float_text")]
    pub max_rel_error: f64,
    /// The row's verdict.
    pub verdict: Verdict,
    /// Two elements at interacting kinks whose analytic values fit one by
    /// one but not together.
    pub joint_kink: Option<JointKink>,
    /// What kind of bug the numbers point to, if any.
    pub diagnosis: Option<Diagnosis>,
    /// The directional screen, when the tensor was screened (see
    /// [`Coverage::Screen`](crate::audit::Coverage::Screen)); `None` when
    /// it was compared element by element only.
    #[serde(default)]
    pub screen: Option<Screen>,
    /// Central differences of the worst element over a sweep of steps, for
    /// the error-against-step picture (drawn by `step_picture` in
    /// [`render`](crate::render), feature `pictures`):
    /// for failing rows, and for every row when asked
    /// ([`Audit::step_sweeps`](crate::Audit::step_sweeps)). `None`
    /// otherwise, or when the row has no worst element that can be moved.
    #[serde(default)]
    pub step_sweep: Option<StepSweep>,
    /// Per-element detail, in row-major order (not serialized).
    #[serde(skip)]
    pub elements: Vec<ElementCheck>,
}

/// What the directional screen of a tensor found: each direction v
/// compares ⟨gradient, v⟩ with the derivative of φ along v.
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
#[non_exhaustive]
pub struct Screen {
    /// Random directions tried.
    pub directions: usize,
    /// Directions along which the two disagree beyond their bound.
    pub disagreeing: usize,
    /// ⟨gradient, v⟩ along the direction furthest beyond (or closest to)
    /// its bound.
    #[serde(with = "crate::format::float_text")]
    pub analytic: f64,
    /// The derivative of φ along that direction.
    #[serde(with = "crate::format::float_text")]
    pub numeric: f64,
    /// The bound that applied there.
    #[serde(with = "crate::format::float_text")]
    pub bound: f64,
    /// Elements the bisection located and compared one by one (0 when a
    /// seeded sample already showed disagreeing elements, or the screen
    /// agreed).
    pub located: usize,
}

/// Central differences of one element at a sweep of steps, with what they
/// are compared against: the data of the error-against-step picture.
///
/// The distance of each difference from the true derivative is a
/// truncation error, about h²/6·|φ‴|, that falls with the step h, plus a
/// rounding error, about ε·|φ|/h, that rises as it shrinks (common
/// practice): on log-log axes a V. The distance from [`reference`](Self::reference)
/// draws that V; the distance from [`analytic`](Self::analytic) follows it
/// only where the backward is right, and stays above the
/// [`bound`](Self::bound) at every step where it is wrong.
///
/// Steps are spaced evenly in log from 10·ε·max(|x|, 1) to
/// 0.1·max(|x|, 1), with ε and the forward of the reference's precision
/// ([`Report::reference_precision`]), moving the element in place as the
/// audit does. The sweep costs two forward evaluations per step
/// ([`forward_evals`](Self::forward_evals)), counted in the report's.
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
#[non_exhaustive]
pub struct StepSweep {
    /// The element swept: the row's worst.
    pub index: MultiIndex,
    /// The element's value.
    #[serde(with = "crate::format::float_text")]
    pub x: f64,
    /// The central differences, smallest step first.
    pub points: Vec<SweepPoint>,
    /// The backward's value.
    #[serde(with = "crate::format::float_text")]
    pub analytic: f64,
    /// The reference value the audit compared it with.
    #[serde(with = "crate::format::float_text")]
    pub reference: f64,
    /// The bound that applied to |analytic − reference|.
    #[serde(with = "crate::format::float_text")]
    pub bound: f64,
    /// The step of the row's scheme: the widest step the reference relied
    /// on for real differences, the imaginary step for the complex step.
    #[serde(with = "crate::format::float_text")]
    pub chosen_step: f64,
    /// Forward evaluations the sweep took.
    pub forward_evals: usize,
}

/// One central difference of a [`StepSweep`].
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
#[non_exhaustive]
pub struct SweepPoint {
    /// The half-width h actually used (x ± h rounded to the working
    /// precision).
    #[serde(with = "crate::format::float_text")]
    pub step: f64,
    /// (φ(x + h) − φ(x − h))/2h; NaN where the forward was not finite (or
    /// panicked) at either end.
    #[serde(with = "crate::format::float_text")]
    pub numeric: f64,
}

/// The worst element of a row.
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
#[non_exhaustive]
pub struct Worst {
    /// Its multi-index.
    pub index: MultiIndex,
    /// The backward's value.
    #[serde(with = "crate::format::float_text")]
    pub analytic: f64,
    /// The reference value.
    #[serde(with = "crate::format::float_text")]
    pub numeric: f64,
    /// The bound that applied.
    #[serde(with = "crate::format::float_text")]
    pub bound: f64,
}

impl Report {
    /// `true` if every row agrees (elements at kinks fail only when
    /// [`Audit::kinks_fail`](crate::Audit::kinks_fail) is set).
    pub fn passed(&self) -> bool {
        self.rows.iter().all(|r| r.verdict.is_pass())
    }

    /// The rows that do not agree.
    pub fn failures(&self) -> impl Iterator<Item = &Row> {
        self.rows.iter().filter(|r| !r.verdict.is_pass())
    }

    /// The row of a tensor by name.
    pub fn row(&self, name: &str) -> Option<&Row> {
        self.rows.iter().find(|r| r.name == name)
    }

    /// The layer's precision: `"f32"` or `"f64"`.
    pub fn precision(&self) -> &str {
        &self.precision
    }

    /// The precision the references were computed in.
    pub fn reference_precision(&self) -> &str {
        &self.reference_precision
    }

    /// The bound rule in force, in words.
    pub fn bound_rule(&self) -> String {
        self.tolerance.describe()
    }

    /// The margin in force (multiple of the error bar).
    pub fn margin(&self) -> f64 {
        self.tolerance.margin
    }

    /// The fixed bounds in force, if any: (absolute, relative).
    pub fn fixed_bounds(&self) -> Option<(Option<f64>, Option<f64>)> {
        self.tolerance
            .is_fixed()
            .then_some((self.tolerance.max_absolute, self.tolerance.max_relative))
    }

    /// Whether elements at a kink that the analytic value does not fit
    /// fail the audit.
    pub fn kinks_fail(&self) -> bool {
        self.kinks_fail
    }
}

/// The report of an audit that passed, as [`assert_backward!`](crate::assert_backward)
/// and [`check_layer`](crate::check_layer) return it: it derefs to the
/// [`Report`], and unlike a bare `Report` it may be dropped without a
/// warning (the verdict was already enforced).
///
/// ```
/// # use plumbline::prelude::*;
/// # struct Twice;
/// # impl Layer for Twice {
/// #     type Real = f64;
/// #     fn signature(&self) -> Signature { Signature::new().input("x", "n").output("y", "n") }
/// #     fn backward(&self, _: &Args<f64>, g: &[Tensor<f64>]) -> Gradients<f64> {
/// #         Gradients::from(vec![g[0].map(|g| 2.0 * g)])
/// #     }
/// # }
/// # impl Forward for Twice {
/// #     fn forward(&self, a: &Args<f64>) -> Vec<Tensor<f64>> { vec![a.input(0).map(|x| 2.0 * x)] }
/// # }
/// let args = Args::new(vec![Tensor::new(vec![2], vec![1.0, 2.0])?], vec![]);
/// assert_backward!(Twice, &args); // dropped: fine
/// let passed = assert_backward!(Twice, &args);
/// assert_eq!(passed.rows.len(), 1); // or read it
/// # Ok::<(), plumbline::Error>(())
/// ```
#[derive(Clone, Debug, PartialEq)]
pub struct Passed(pub(crate) Report);

impl Passed {
    /// The report itself.
    pub fn into_report(self) -> Report {
        self.0
    }
}

impl std::ops::Deref for Passed {
    type Target = Report;
    fn deref(&self) -> &Report {
        &self.0
    }
}
