//! The audit's result: plain data, one row per checked tensor, worst first.
//! Rendering lives in `render`; nothing here prints.

use std::fmt;

use crate::diagnosis::Diagnosis;
use crate::layer::Role;
use crate::scheme::{KinkProbe, Scheme};
use crate::tensor::Index;
use crate::tolerance::Tolerance;

/// What an audit found, for every differentiable input and parameter.
///
/// `Display` renders the aligned plain-text table (worst row first), so
/// `{}` in a panic message shows everything.
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Report {
    /// The layer's name (its type name unless set with [`Audit::name`](crate::Audit::name)).
    pub layer: String,
    /// The layer's precision: `f32` or `f64`.
    pub precision: String,
    /// The precision the reference derivatives were computed in.
    pub reference_precision: String,
    /// The seed of the random upstream gradient; replays the audit.
    pub seed: u64,
    /// The bound rule in force.
    pub tolerance: Tolerance,
    /// One row per differentiable tensor, worst first.
    pub rows: Vec<Row>,
    /// Forward evaluations spent (all precisions).
    pub forward_evals: usize,
    /// Backward evaluations spent.
    pub backward_evals: usize,
    /// Whether elements at a kink that the analytic value does not fit fail
    /// the audit.
    pub kinks_fail: bool,
    /// Things the audit noticed about the layer itself, e.g. a generic
    /// forward that drops the complex step.
    #[serde(default)]
    pub notes: Vec<String>,
}

/// The finding for one input or parameter tensor.
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Row {
    /// The tensor's name from the signature.
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
    /// Elements in the tensor (more than `checked` when
    /// [`Audit::max_elements`](crate::Audit::max_elements) sampled them).
    pub of: usize,
    /// Elements that disagree (or are not finite).
    pub disagreeing: usize,
    /// Elements at a non-differentiable point.
    pub kinks: usize,
    /// The element furthest beyond its bound (or the worst, if all agree).
    pub worst: Option<Worst>,
    /// Largest |analytic − numeric|.
    pub max_abs_error: f64,
    /// Largest |a − n| / max(|a|, |n|) over elements.
    pub max_rel_error: f64,
    /// The row's verdict.
    pub verdict: Verdict,
    /// Elements at kinks whose analytic values fit one by one but not
    /// together (e.g. a max-pool tie whose gradient went to every maximum).
    pub joint_kink: Option<JointKink>,
    /// What kind of bug the numbers point to, if any.
    pub diagnosis: Option<Diagnosis>,
    /// Per-element detail, in row-major order (not serialized).
    #[serde(skip)]
    pub elements: Vec<ElementCheck>,
}

/// A group of kink elements whose analytic values do not add up to a value
/// between the one-sided derivatives of moving them together.
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct JointKink {
    /// Elements in the group (every kink element of the tensor).
    pub elements: usize,
    /// Σ analytic over the group.
    pub analytic_sum: f64,
    /// One-sided derivative of the joint move from the left.
    pub left: f64,
    /// One-sided derivative of the joint move from the right.
    pub right: f64,
}

/// The worst element of a row.
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Worst {
    /// Its multi-index.
    pub index: Index,
    /// The backward's value.
    pub analytic: f64,
    /// The reference value.
    pub numeric: f64,
    /// The bound that applied.
    pub bound: f64,
}

/// A row's verdict.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Verdict {
    /// Every element is within its bound.
    Agrees,
    /// Some element is beyond its bound or not finite.
    Disagrees,
    /// The gradient's shape differs from the tensor's.
    WrongShape,
    /// The backward returned no gradient for this tensor.
    Missing,
}

impl Verdict {
    /// `true` only for [`Verdict::Agrees`].
    pub fn is_pass(self) -> bool {
        self == Verdict::Agrees
    }

    /// The word shown in tables.
    pub fn as_str(self) -> &'static str {
        match self {
            Verdict::Agrees => "ok",
            Verdict::Disagrees => "FAIL",
            Verdict::WrongShape => "SHAPE",
            Verdict::Missing => "MISSING",
        }
    }
}

impl fmt::Display for Verdict {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// One element's comparison.
#[derive(Clone, Debug, PartialEq)]
pub struct ElementCheck {
    /// Its flat (row-major) position in the tensor.
    pub index: usize,
    /// The backward's value (NaN when no gradient of the right shape exists).
    pub analytic: f64,
    /// The reference value.
    pub numeric: f64,
    /// The reference's estimated error.
    pub error: f64,
    /// Σ|terms| of the derivative (see [`Estimate::scale`](crate::Estimate::scale)).
    pub scale: f64,
    /// The bound that applied.
    pub bound: f64,
    /// The outcome.
    pub status: ElementStatus,
}

/// The outcome for one element.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum ElementStatus {
    /// Within the bound.
    Agrees,
    /// Beyond the bound.
    Disagrees,
    /// Analytic or numeric value is NaN or infinite.
    NotFinite,
    /// Within the bound, but the reference's truncation error is too large
    /// to tell a right value from a wrong one (counts as a failure).
    Inconclusive,
    /// At a non-differentiable point: the one-sided derivatives differ.
    Kink {
        /// One-sided derivatives there.
        probe: KinkProbe,
        /// The analytic value lies between them (a valid one-sided
        /// derivative or subgradient).
        fits: bool,
    },
}

impl ElementStatus {
    /// `true` for a kink (the element is listed apart).
    pub fn is_kink(self) -> bool {
        matches!(self, ElementStatus::Kink { .. })
    }

    /// `true` for `Disagrees`, `NotFinite` and `Inconclusive`.
    pub fn is_failure(self) -> bool {
        matches!(
            self,
            ElementStatus::Disagrees | ElementStatus::NotFinite | ElementStatus::Inconclusive
        )
    }
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

    /// Panics with the whole table and the seed unless the audit passed.
    ///
    /// ```should_panic
    /// # use plumbline::*;
    /// # struct Bad;
    /// # impl Layer for Bad {
    /// #     type Real = f64;
    /// #     fn signature(&self) -> Signature { Signature::new().input("x", "n").output("y", "n") }
    /// #     fn forward(&self, a: &Args<f64>) -> Vec<Tensor<f64>> { vec![a.input(0).map(|x| 3.0 * x)] }
    /// #     fn backward(&self, _: &Args<f64>, g: &[Tensor<f64>]) -> Gradients<f64> {
    /// #         Gradients::from(vec![g[0].map(|g| -3.0 * g)])
    /// #     }
    /// # }
    /// let x = Tensor::new(vec![2], vec![1.0, 2.0]).unwrap();
    /// let report = Audit::new().run(&Bad, &Args::new(vec![x], vec![])).unwrap();
    /// report.assert_passed(); // panics: sign flipped
    /// ```
    #[track_caller]
    pub fn assert_passed(&self) {
        if !self.passed() {
            panic!("{}", crate::render::failure_message(self));
        }
    }
}

impl fmt::Display for Report {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&crate::render::table(self, &crate::render::Style::plain()))
    }
}
