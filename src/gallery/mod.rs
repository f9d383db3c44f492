//! A gallery of correct layers with hand-written backward passes, and the
//! realistic mistakes planted in them.
//!
//! Read these layers as models: each one is written the way a layer with a
//! hand-written backward usually is (loops over plain data, the forward's
//! intermediates recomputed in the backward), documents its formulas, and
//! passes the audit. Each also carries an enum of planted bugs, one variant
//! per realistic mistake, with a one-line description and what the audit
//! should say about it ([`Expect`](crate::gallery::Expect)).
//!
//! [`registry`](crate::gallery::registry) lists every case, correct and planted, with a constructor
//! for random arguments; the tests, the quality bench and the examples all
//! read it.
//!
//! | layer | type | generic | planted bugs |
//! |---|---|---|---|
//! | dense (affine) | [`Dense`](crate::gallery::Dense) | yes | [`DenseBug`](crate::gallery::DenseBug) |
//! | 2-D convolution, stride and padding | [`Conv2d`](crate::gallery::Conv2d) | yes | [`Conv2dBug`](crate::gallery::Conv2dBug) |
//! | 2-D max-pool | [`MaxPool2d`](crate::gallery::MaxPool2d) | yes | [`MaxPoolBug`](crate::gallery::MaxPoolBug) |
//! | 2-D average pool | [`AvgPool2d`](crate::gallery::AvgPool2d) | `f32` only | [`AvgPoolBug`](crate::gallery::AvgPoolBug) |
//! | layer norm | [`LayerNorm`](crate::gallery::LayerNorm) | yes | [`LayerNormBug`](crate::gallery::LayerNormBug) |
//! | batch norm (training mode) | [`BatchNorm`](crate::gallery::BatchNorm) | yes | [`BatchNormBug`](crate::gallery::BatchNormBug) |
//! | RMS norm | [`RmsNorm`](crate::gallery::RmsNorm) | yes | [`RmsNormBug`](crate::gallery::RmsNormBug) |
//! | softmax with cross-entropy | [`SoftmaxCrossEntropy`](crate::gallery::SoftmaxCrossEntropy) | yes | [`SoftmaxBug`](crate::gallery::SoftmaxBug) |
//! | multi-head attention | [`Attention`](crate::gallery::Attention) | yes | [`AttentionBug`](crate::gallery::AttentionBug) |
//! | embedding lookup | [`Embedding`](crate::gallery::Embedding) | `f32` only | [`EmbeddingBug`](crate::gallery::EmbeddingBug) |
//! | GRU cell | [`GruCell`](crate::gallery::GruCell) | yes | [`GruBug`](crate::gallery::GruBug) |
//! | GELU (erf form) | [`Gelu`](crate::gallery::Gelu) | `f32` only | [`GeluBug`](crate::gallery::GeluBug) |
//! | residual block `x + gelu(x·wᵀ + b)` | [`Residual`](crate::gallery::Residual) | yes | [`ResidualBug`](crate::gallery::ResidualBug) |
//! | 1-D convolution | [`Conv1d`](crate::gallery::Conv1d) | yes | [`Conv1dBug`](crate::gallery::Conv1dBug) |
//! | LSTM cell | [`LstmCell`](crate::gallery::LstmCell) | yes | [`LstmBug`](crate::gallery::LstmBug) |
//! | bilinear layer | [`Bilinear`](crate::gallery::Bilinear) | yes | [`BilinearBug`](crate::gallery::BilinearBug) |
//!
//! Four layers also carry other hand-written rules, with their own planted
//! bugs ([`rule_cases`](crate::gallery::rule_cases) lists them): forward-mode
//! rules ([`TangentRule`](crate::TangentRule)) for `Dense`, `Gelu`,
//! `Residual` and `SoftmaxCrossEntropy`
//! ([`DenseRuleBug`](crate::gallery::DenseRuleBug),
//! [`GeluRuleBug`](crate::gallery::GeluRuleBug),
//! [`ResidualRuleBug`](crate::gallery::ResidualRuleBug),
//! [`SoftmaxRuleBug`](crate::gallery::SoftmaxRuleBug)), and generic backwards
//! ([`GenericBackward`](crate::GenericBackward)) for `Dense`, `Gelu` and
//! `Residual`, the first two with a hand-written Hessian-vector product.
//!
//! ```
//! use plumbline::gallery::{judge, rule_cases};
//! use plumbline::Audit;
//! let case = rule_cases()
//!     .into_iter()
//!     .find(|c| c.bug.is_some_and(|b| b.name == "upstream-shifted-by-bias"))
//!     .unwrap();
//! let report = case.audit(1, &Audit::new())?;
//! assert!(judge(&case.bug.unwrap().expect, &report).right_diagnosis, "{report}");
//! # Ok::<(), plumbline::Error>(())
//! ```
//!
//! Generic layers implement [`GenericForward`](crate::GenericForward) for
//! `Real = f32` and `Real = f64`, so the audit uses complex-step
//! references. The three `f32`-only layers implement
//! [`Layer`](crate::Layer) directly and are audited with Ridders' method in
//! `f32`.
//!
//! ```
//! use plumbline::gallery::{registry, Subject};
//! use plumbline::Audit;
//!
//! let cases = registry();
//! assert!(cases.iter().filter(|c| c.bug.is_some()).count() >= 60);
//! let dense = cases
//!     .iter()
//!     .find(|c| c.layer == "dense" && c.bug.is_none() && c.precision == "f64")
//!     .unwrap();
//! let report = dense.subject(1).audit(&Audit::new())?;
//! assert!(report.passed(), "{report}");
//! # Ok::<(), plumbline::Error>(())
//! ```

use rand::{RngExt, SeedableRng};

use crate::audit::Audit;
use crate::diagnosis::Diagnosis;
use crate::error::Error;
use crate::layer::{Args, Forward};
use crate::report::Report;
use crate::scalar::{Real, Scalar};
use crate::tensor::Tensor;

mod attention;
mod bilinear;
mod conv;
mod conv1d;
mod dense;
mod embedding;
mod gelu;
mod gru;
mod lstm;
mod norm;
mod pool;
pub mod programs;
mod residual;
mod rules;
mod softmax;

pub use attention::{Attention, AttentionBug};
pub use bilinear::{Bilinear, BilinearBug};
pub use conv::{Conv2d, Conv2dBug};
pub use conv1d::{Conv1d, Conv1dBug};
pub use dense::{Dense, DenseBug};
pub use embedding::{Embedding, EmbeddingBug};
pub use gelu::{gelu, gelu_derivative, Gelu, GeluBug};
pub use gru::{GruBug, GruCell};
pub use lstm::{LstmBug, LstmCell};
pub use norm::{BatchNorm, BatchNormBug, LayerNorm, LayerNormBug, RmsNorm, RmsNormBug};
pub use pool::{AvgPool2d, AvgPoolBug, MaxPool2d, MaxPoolBug};
pub use residual::{Residual, ResidualBug};
pub use rules::{
    rule_cases, zero_bias, DenseRuleBug, Entry, GeluRuleBug, ResidualRuleBug, RuleCase,
    SoftmaxRuleBug,
};
pub use softmax::{SoftmaxBug, SoftmaxCrossEntropy};

/// Declares a layer's planted-bug enum: one variant per mistake, its
/// one-line doc comment doubling as the description, a short name, and what
/// the audit should say.
macro_rules! planted_bugs {
    (
        $(#[doc = $edoc:literal])*
        $name:ident {
            $( #[doc = $doc:literal] $variant:ident = $id:literal => ($tensor:literal, $kind:expr), )+
        }
    ) => {
        $(#[doc = $edoc])*
        #[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
        pub enum $name {
            $( #[doc = $doc] $variant, )+
        }

        impl $name {
            /// Every planted bug of this layer.
            pub const ALL: &'static [$name] = &[$($name::$variant),+];

            /// A short name, e.g. `sign-flipped-weight`.
            pub fn name(self) -> &'static str {
                match self { $($name::$variant => $id),+ }
            }

            /// One line describing the mistake.
            pub fn describe(self) -> &'static str {
                match self { $($name::$variant => $doc.trim()),+ }
            }

            /// What the audit should report for it.
            pub fn expect(self) -> $crate::gallery::Expect {
                match self {
                    $($name::$variant => $crate::gallery::Expect { tensor: $tensor, kind: $kind }),+
                }
            }

            /// Name, description and expectation together.
            pub fn info(self) -> $crate::gallery::Bug {
                $crate::gallery::Bug {
                    name: self.name(),
                    description: self.describe(),
                    expect: self.expect(),
                }
            }
        }
    };
}
pub(crate) use planted_bugs;

/// Registers a layer generic over its precision: the correct layer in
/// `f64` and `f32`, and every planted bug in `f64`.
/// `register_generic!(out, "conv2d", Conv2d(2, 1), Conv2dBug)` builds
/// `Conv2d::<R>::new(2, 1, bug)` and draws `Conv2d::args(seed)`.
macro_rules! register_generic {
    ($out:expr, $name:literal, $layer:ident ( $($pre:expr),* ), $bugs:ident) => {{
        $out.push(Case::new($name, "f64", true, None, |s| {
            Subject::F64(Box::new($layer::<f64>::new($($pre,)* None)), $layer::args(s))
        }));
        $out.push(Case::new($name, "f32", true, None, |s| {
            Subject::F32(Box::new($layer::<f32>::new($($pre,)* None)), $layer::args(s))
        }));
        for &bug in $bugs::ALL {
            $out.push(Case::new($name, "f64", true, Some(bug.info()), move |s| {
                Subject::F64(Box::new($layer::<f64>::new($($pre,)* Some(bug))), $layer::args(s))
            }));
        }
    }};
}
pub(crate) use register_generic;

/// The kind of diagnosis a planted bug should get.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Kind {
    /// [`Diagnosis::SignFlipped`].
    SignFlipped,
    /// [`Diagnosis::Scaled`] with this factor (within 0.1 %).
    Scaled(f64),
    /// [`Diagnosis::Scaled`] with a factor that depends on the arguments.
    ScaledAny,
    /// [`Diagnosis::Transposed`].
    Transposed,
    /// [`Diagnosis::Flipped`] along exactly these axes.
    Flipped(&'static [usize]),
    /// [`Diagnosis::BlocksPermuted`] along this axis.
    BlocksPermuted(usize),
    /// [`Diagnosis::ScaledPerSlice`] along this axis.
    ScaledPerSlice(usize),
    /// [`Diagnosis::ScaledByTensor`] naming this tensor.
    ScaledByTensor(&'static str),
    /// [`Diagnosis::SignFlippedOn`] a subset described by these words.
    SignFlippedOn(&'static str),
    /// [`Diagnosis::WrongShape`].
    WrongShape,
    /// [`Diagnosis::Missing`].
    Missing,
    /// [`Diagnosis::AllZero`]: a gradient returned but never written.
    AllZero,
    /// [`Diagnosis::Partial`]: only the elements where an index condition
    /// holds are wrong (specific when the pattern is found).
    Partial,
    /// A wrong formula: [`Diagnosis::Partial`] (some elements wrong) or
    /// [`Diagnosis::WrongValues`] (every element, with no fingerprint that
    /// fits): the honest answer when nothing simpler fits.
    WrongFormula,
    /// [`Diagnosis::SharedKink`]: tied elements handed one gradient each.
    SharedKink,
    /// [`Diagnosis::BackwardAccumulates`].
    Accumulates,
    /// [`Diagnosis::RuleAtFault`] naming this rule (the adjoint row).
    RuleAtFault(crate::report::Culprit),
    /// [`Diagnosis::NotSymmetric`] (the symmetry row).
    NotSymmetric,
}

impl Kind {
    /// `true` if the diagnosis is of this kind.
    ///
    /// ```
    /// use plumbline::gallery::Kind;
    /// use plumbline::Diagnosis;
    /// let d = Diagnosis::Scaled { factor: 0.25, culprit: None };
    /// assert!(Kind::Scaled(0.25).matches(&d));
    /// assert!(!Kind::Scaled(4.0).matches(&d));
    /// assert!(Kind::ScaledAny.matches(&d));
    /// ```
    pub fn matches(self, d: &Diagnosis) -> bool {
        match (self, d) {
            (Kind::SignFlipped, Diagnosis::SignFlipped) => true,
            (Kind::Scaled(k), Diagnosis::Scaled { factor, .. }) => ((factor - k) / k).abs() < 1e-3,
            (Kind::ScaledAny, Diagnosis::Scaled { .. }) => true,
            (Kind::Transposed, Diagnosis::Transposed { .. }) => true,
            (Kind::Flipped(want), Diagnosis::Flipped { axes }) => axes.as_slice() == want,
            (Kind::BlocksPermuted(want), Diagnosis::BlocksPermuted { axis, .. }) => *axis == want,
            (Kind::ScaledPerSlice(want), Diagnosis::ScaledPerSlice { axis, .. }) => *axis == want,
            (Kind::ScaledByTensor(want), Diagnosis::ScaledByTensor { tensor, .. }) => {
                tensor == want
            }
            (Kind::SignFlippedOn(want), Diagnosis::SignFlippedOn { subset, .. }) => subset == want,
            (Kind::WrongShape, Diagnosis::WrongShape { .. }) => true,
            (Kind::Missing, Diagnosis::Missing) => true,
            (Kind::AllZero, Diagnosis::AllZero) => true,
            (Kind::Partial, Diagnosis::Partial { .. }) => true,
            (Kind::WrongFormula, Diagnosis::Partial { .. } | Diagnosis::WrongValues { .. }) => true,
            (Kind::SharedKink, Diagnosis::SharedKink { .. }) => true,
            (Kind::Accumulates, Diagnosis::BackwardAccumulates { .. }) => true,
            (Kind::RuleAtFault(want), Diagnosis::RuleAtFault { culprit }) => *culprit == want,
            (Kind::NotSymmetric, Diagnosis::NotSymmetric) => true,
            _ => false,
        }
    }

    /// The family of the mechanism, for counting: `sign` (the whole tensor
    /// or a subset negated), `scale` (one factor, one per slice, or another
    /// tensor's values), `transpose` (the right values in the wrong places:
    /// transposed, flipped, blocks permuted), `missing` (no gradient, or
    /// one never written), `partial` (only where an index condition holds),
    /// `shape`, `formula` (a wrong formula, nothing simpler fits), `kink`,
    /// `state` (a backward that accumulates), `rule` (the adjoint identity
    /// names the wrong rule) and `symmetry` (the integrability test).
    ///
    /// ```
    /// use plumbline::gallery::Kind;
    /// assert_eq!(Kind::Flipped(&[2]).family(), "transpose");
    /// assert_eq!(Kind::ScaledByTensor("gamma").family(), "scale");
    /// ```
    pub fn family(self) -> &'static str {
        match self {
            Kind::SignFlipped | Kind::SignFlippedOn(_) => "sign",
            Kind::Scaled(_)
            | Kind::ScaledAny
            | Kind::ScaledPerSlice(_)
            | Kind::ScaledByTensor(_) => "scale",
            Kind::Transposed | Kind::Flipped(_) | Kind::BlocksPermuted(_) => "transpose",
            Kind::Missing | Kind::AllZero => "missing",
            Kind::Partial => "partial",
            Kind::WrongShape => "shape",
            Kind::WrongFormula => "formula",
            Kind::SharedKink => "kink",
            Kind::Accumulates => "state",
            Kind::RuleAtFault(_) => "rule",
            Kind::NotSymmetric => "symmetry",
        }
    }
}

/// What the audit should report for a planted bug: the tensor whose row
/// fails, and the kind of diagnosis on that row.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Expect {
    /// The name of the tensor whose gradient the bug corrupts.
    pub tensor: &'static str,
    /// The diagnosis that row should get.
    pub kind: Kind,
}

/// A planted bug: a short name, a description and what the audit should
/// say.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Bug {
    /// Short name, unique within its layer.
    pub name: &'static str,
    /// One line describing the mistake.
    pub description: &'static str,
    /// What the audit should report.
    pub expect: Expect,
}

/// A layer ready to audit, with its arguments, in one precision.
pub enum Subject {
    /// An `f64` layer.
    F64(Box<dyn Forward<Real = f64>>, Args<f64>),
    /// An `f32` layer.
    F32(Box<dyn Forward<Real = f32>>, Args<f32>),
}

impl Subject {
    /// Runs `audit` on the layer at its arguments.
    pub fn audit(&self, audit: &Audit) -> Result<Report, Error> {
        match self {
            Subject::F64(l, a) => audit.run(l.as_ref(), a),
            Subject::F32(l, a) => audit.run(l.as_ref(), a),
        }
    }
}

type Maker = Box<dyn Fn(u64) -> Subject + Send + Sync>;

/// One entry of the [`registry`]: a layer, correct or with one planted
/// bug, in one precision, with a constructor for random arguments.
pub struct Case {
    /// The layer's short name, e.g. `"layer-norm"`.
    pub layer: &'static str,
    /// `"f32"` or `"f64"`.
    pub precision: &'static str,
    /// `true` if the layer's forward is generic (complex-step references).
    pub generic: bool,
    /// The planted bug, or `None` for the correct layer.
    pub bug: Option<Bug>,
    make: Maker,
}

impl Case {
    fn new(
        layer: &'static str,
        precision: &'static str,
        generic: bool,
        bug: Option<Bug>,
        make: impl Fn(u64) -> Subject + Send + Sync + 'static,
    ) -> Self {
        Case {
            layer,
            precision,
            generic,
            bug,
            make: Box::new(make),
        }
    }

    /// A fresh layer and random arguments drawn from `seed`.
    pub fn subject(&self, seed: u64) -> Subject {
        (self.make)(seed)
    }

    /// `layer` or `layer/bug`, for tables.
    pub fn label(&self) -> String {
        match &self.bug {
            Some(b) => format!("{}/{}", self.layer, b.name),
            None => self.layer.to_string(),
        }
    }
}

/// Every case of the gallery: each layer correct (in `f64` if it is
/// generic, and in `f32`), then each planted bug (in `f64` for generic
/// layers, in `f32` for the `f32`-only ones).
pub fn registry() -> Vec<Case> {
    let mut out = Vec::new();
    dense::register(&mut out);
    conv::register(&mut out);
    pool::register(&mut out);
    norm::register(&mut out);
    softmax::register(&mut out);
    attention::register(&mut out);
    embedding::register(&mut out);
    gru::register(&mut out);
    gelu::register(&mut out);
    residual::register(&mut out);
    conv1d::register(&mut out);
    lstm::register(&mut out);
    bilinear::register(&mut out);
    out
}

/// How the audit fared on a planted bug.
#[derive(Clone, Debug, PartialEq)]
pub struct Outcome {
    /// The audit failed.
    pub detected: bool,
    /// The expected tensor's row failed with the expected kind of diagnosis.
    pub right_diagnosis: bool,
    /// What the expected tensor's row said (`"passed"` if it agreed).
    pub said: String,
}

/// Compares a report with what a planted bug should produce.
///
/// ```
/// use plumbline::gallery::{judge, registry};
/// use plumbline::Audit;
/// let case = registry()
///     .into_iter()
///     .find(|c| c.bug.is_some_and(|b| b.name == "sign-flipped-weight"))
///     .unwrap();
/// let report = case.subject(3).audit(&Audit::new())?;
/// let outcome = judge(&case.bug.unwrap().expect, &report);
/// assert!(outcome.detected && outcome.right_diagnosis, "{}", outcome.said);
/// # Ok::<(), plumbline::Error>(())
/// ```
pub fn judge(expect: &Expect, report: &Report) -> Outcome {
    let row = report.row(expect.tensor);
    let said = match row {
        None => format!("no row named `{}`", expect.tensor),
        Some(r) if r.verdict.is_pass() => "passed".to_string(),
        Some(r) => match &r.diagnosis {
            Some(d) => format!("{}: {d}", r.name),
            None => format!("{}: failed, no diagnosis", r.name),
        },
    };
    let right = row.is_some_and(|r| {
        !r.verdict.is_pass() && r.diagnosis.as_ref().is_some_and(|d| expect.kind.matches(d))
    });
    Outcome {
        detected: !report.passed(),
        right_diagnosis: right,
        said,
    }
}

// ---- helpers shared by the layers -------------------------------------

/// An `f64` constant in any scalar type (NaN if it cannot be represented,
/// which never passes a check).
pub(crate) fn c<T: Scalar>(x: f64) -> T {
    T::from(x).unwrap_or_else(T::nan)
}

/// A tensor from a shape and row-major data (missing values are NaN).
pub(crate) fn tensor<T: Scalar>(shape: Vec<usize>, data: Vec<T>) -> Tensor<T> {
    let mut it = data.into_iter();
    Tensor::from_fn(shape, |_| it.next().unwrap_or_else(T::nan))
}

/// Random uniform values in `[-scale, scale]` drawn from `seed`, as a
/// tensor of the given shape.
pub(crate) struct Draw(rand::rngs::StdRng);

impl Draw {
    pub(crate) fn new(seed: u64) -> Self {
        Draw(rand::rngs::StdRng::seed_from_u64(seed ^ 0x6A11_E7E5))
    }

    pub(crate) fn uniform<R: Real>(&mut self, shape: &[usize], scale: f64) -> Tensor<R> {
        let n = shape.iter().product();
        let data = (0..n)
            .map(|_| R::from_f64(self.0.random_range(-scale..scale)))
            .collect();
        tensor(shape.to_vec(), data)
    }

    pub(crate) fn index(&mut self, below: usize) -> usize {
        self.0.random_range(0..below)
    }
}

/// The sigmoid 1/(1 + e^(−x)).
pub(crate) fn sigmoid<T: Scalar>(x: T) -> T {
    T::one() / (T::one() + (-x).exp())
}

/// Row-major `y[r, o] = Σ_k w[o, k] x[r, k] (+ b[o])` on flat slices.
pub(crate) fn affine<T: Scalar>(
    x: &[T],
    w: &[T],
    b: Option<&[T]>,
    rows: usize,
    inp: usize,
    out: usize,
) -> Vec<T> {
    let mut y = vec![T::zero(); rows * out];
    for r in 0..rows {
        for o in 0..out {
            let mut s = b.map_or(T::zero(), |b| b[o]);
            for k in 0..inp {
                s += w[o * inp + k] * x[r * inp + k];
            }
            y[r * out + o] = s;
        }
    }
    y
}
