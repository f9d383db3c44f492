//! The gallery's other hand-written rules: forward-mode rules
//! ([`TangentRule`]) for [`Dense`], [`Gelu`], [`Residual`] and
//! [`SoftmaxCrossEntropy`]; generic backwards ([`GenericBackward`]) for
//! [`Dense`], [`Gelu`] and [`Residual`], with hand-written Hessian-vector
//! products for the first two; the mistakes planted in them; and
//! [`rule_cases`], the registry the tests and the quality bench read.

use super::gelu::gelu_derivative;
use super::softmax::{label, softmax};
use super::{affine, c, planted_bugs, tensor, Bug, Kind};
use super::{
    Dense, DenseBug, Gelu, GeluBug, Residual, ResidualBug, SoftmaxBug, SoftmaxCrossEntropy,
};
use crate::audit::Audit;
use crate::diagnosis::Culprit;
use crate::error::Error;
use crate::layer::{Args, GenericBackward, Gradients, TangentRule};
use crate::report::{Check, Report};
use crate::scalar::{Real, Scalar};
use crate::tensor::Tensor;

planted_bugs! {
    /// Mistakes planted in [`Dense`]'s forward-mode and second-order rules.
    DenseRuleBug {
        /// The weight's term of the tangent enters with a minus sign: ẏ = ẋ·wᵀ − x·ẇᵀ + ḃ.
        TangentSignWeight = "tangent-sign-weight" => ("y", Kind::WrongFormula),
        /// The bias's tangent ḃ is left out of ẏ.
        TangentBiasMissing = "tangent-bias-missing" => ("y", Kind::WrongFormula),
        /// The backward adds the bias to the upstream of dx, dx = (g + b)·w: nothing at b = 0, where the plain audit looks, but its Jacobian is not symmetric.
        UpstreamShiftedByBias = "upstream-shifted-by-bias" => ("symmetry", Kind::NotSymmetric),
        /// The Hessian-vector product's weight part is negated: −gᵀ·ẋ.
        HessianSignWeight = "hessian-sign-weight" => ("w", Kind::SignFlipped),
    }
}

planted_bugs! {
    /// Mistakes planted in [`Gelu`]'s forward-mode and second-order rules.
    GeluRuleBug {
        /// The tangent is negated: ẏ = −GELU′(x)·ẋ.
        TangentSignFlipped = "tangent-sign-flipped" => ("y", Kind::SignFlipped),
        /// GELU″ = φ(x)(2 − x²) is written without its −x²φ(x) term.
        HessianMissingTerm = "hessian-missing-term" => ("x", Kind::WrongFormula),
    }
}

planted_bugs! {
    /// Mistakes planted in [`Residual`]'s forward-mode and second-order rules.
    ResidualRuleBug {
        /// The bias's tangent is left out of the branch: ȧ = ẋ·wᵀ + x·ẇᵀ.
        TangentMissingBias = "tangent-missing-bias" => ("y", Kind::WrongFormula),
        /// The backward adds the bias to the branch's upstream, da = (g + b) ⊙ gelu′(a): nothing at b = 0, but not a gradient.
        UpstreamShiftedByBias = "upstream-shifted-by-bias" => ("symmetry", Kind::NotSymmetric),
    }
}

planted_bugs! {
    /// Mistakes planted in [`SoftmaxCrossEntropy`]'s forward-mode rule.
    SoftmaxRuleBug {
        /// The normalisation term Σₖ pₖżₖ is left out of the loss's tangent.
        TangentMissingNormalisation = "tangent-missing-normalisation" => ("adjoint", Kind::RuleAtFault(Culprit::TangentRule)),
    }
}

impl<R: Real> Dense<R> {
    /// The layer with a bug planted in its other rules.
    #[must_use]
    pub fn with_rule_bug(mut self, bug: DenseRuleBug) -> Self {
        self.rule_bug = Some(bug);
        self
    }
}

/// `ẏ = ẋ·wᵀ + x·ẇᵀ + ḃ`.
impl<R: Real> TangentRule for Dense<R> {
    fn jvp(&self, a: &Args<R>, t: &Args<R>) -> Vec<Tensor<R>> {
        let (x, w) = (a.input(0), a.param(0));
        let (n, i, o) = (x.shape()[0], x.shape()[1], w.shape()[0]);
        let bias =
            (self.rule_bug != Some(DenseRuleBug::TangentBiasMissing)).then(|| t.param(1).data());
        let through_x = affine(t.input(0).data(), w.data(), bias, n, i, o);
        let through_w = affine(x.data(), t.param(0).data(), None, n, i, o);
        let sign = if self.rule_bug == Some(DenseRuleBug::TangentSignWeight) {
            -R::one()
        } else {
            R::one()
        };
        let y = through_x
            .iter()
            .zip(&through_w)
            .map(|(&p, &q)| p + sign * q)
            .collect();
        vec![tensor(vec![n, o], y)]
    }
}

/// The backward for any scalar; Hessian-vector product, for upstream g:
/// `d(dx) = g·ẇ`, `d(dw) = gᵀ·ẋ`, `d(db) = 0`.
impl<R: Real> GenericBackward for Dense<R> {
    fn backward_generic<T: Scalar>(&self, a: &Args<T>, up: &[Tensor<T>]) -> Gradients<T> {
        self.backward_with(a, up)
    }

    fn hessian_vector(&self, a: &Args<R>, up: &[Tensor<R>], t: &Args<R>) -> Option<Gradients<R>> {
        let (x, w, g) = (a.input(0), a.param(0), &up[0]);
        let (n, i, o) = (x.shape()[0], x.shape()[1], w.shape()[0]);
        let (tx, tw) = (t.input(0), t.param(0));
        let sign = if self.rule_bug == Some(DenseRuleBug::HessianSignWeight) {
            -R::one()
        } else {
            R::one()
        };
        let hx = Tensor::from_fn(vec![n, i], |ix| {
            (0..o).fold(R::zero(), |s, r| s + g[[ix[0], r]] * tw[[r, ix[1]]])
        });
        let hw = Tensor::from_fn(vec![o, i], |ix| {
            sign * (0..n).fold(R::zero(), |s, m| s + g[[m, ix[0]]] * tx[[m, ix[1]]])
        });
        Some(Gradients::from(vec![
            hx,
            hw,
            Tensor::full(vec![o], R::zero()),
        ]))
    }
}

impl Gelu {
    /// The layer with a bug planted in its other rules.
    #[must_use]
    pub fn with_rule_bug(mut self, bug: GeluRuleBug) -> Self {
        self.rule_bug = Some(bug);
        self
    }
}

/// `ẏ = GELU′(x)·ẋ`.
impl TangentRule for Gelu {
    fn jvp(&self, a: &Args<f32>, t: &Args<f32>) -> Vec<Tensor<f32>> {
        let sign = if self.rule_bug == Some(GeluRuleBug::TangentSignFlipped) {
            -1.0
        } else {
            1.0
        };
        let (x, tx) = (a.input(0), t.input(0));
        let y = (x.data().iter().zip(tx.data()))
            .map(|(&x, &v)| sign * gelu_derivative(x) * v)
            .collect();
        vec![tensor(x.shape().to_vec(), y)]
    }
}

/// The backward for any scalar; Hessian-vector product
/// `g·GELU″(x)·ẋ`, GELU″(x) = φ(x)(2 − x²) (the derivative of
/// Φ(x) + xφ(x), with φ′(x) = −xφ(x)).
impl GenericBackward for Gelu {
    fn backward_generic<T: Scalar>(&self, a: &Args<T>, up: &[Tensor<T>]) -> Gradients<T> {
        self.backward_with(a, up)
    }

    fn hessian_vector(
        &self,
        a: &Args<f32>,
        up: &[Tensor<f32>],
        t: &Args<f32>,
    ) -> Option<Gradients<f32>> {
        let missing = self.rule_bug == Some(GeluRuleBug::HessianMissingTerm);
        let (x, tx, g) = (a.input(0), t.input(0), &up[0]);
        let h = Tensor::from_fn(x.shape().to_vec(), |ix| {
            let x = x[ix];
            let pdf = (-x * x / 2.0).exp() / (2.0 * std::f32::consts::PI).sqrt();
            let second = if missing {
                2.0 * pdf
            } else {
                pdf * (2.0 - x * x)
            };
            g[ix] * second * tx[ix]
        });
        Some(Gradients::from(vec![h]))
    }
}

impl<R: Real> Residual<R> {
    /// The layer with a bug planted in its other rules.
    #[must_use]
    pub fn with_rule_bug(mut self, bug: ResidualRuleBug) -> Self {
        self.rule_bug = Some(bug);
        self
    }
}

/// `ẏ = ẋ + gelu′(a) ⊙ ȧ`, `ȧ = ẋ·wᵀ + x·ẇᵀ + ḃ`.
impl<R: Real> TangentRule for Residual<R> {
    fn jvp(&self, a: &Args<R>, t: &Args<R>) -> Vec<Tensor<R>> {
        let (x, w, b) = (a.input(0), a.param(0), a.param(1));
        let (n, d) = (x.shape()[0], x.shape()[1]);
        let pre = affine(x.data(), w.data(), Some(b.data()), n, d, d);
        let bias =
            (self.rule_bug != Some(ResidualRuleBug::TangentMissingBias)).then(|| t.param(1).data());
        let through_x = affine(t.input(0).data(), w.data(), bias, n, d, d);
        let through_w = affine(x.data(), t.param(0).data(), None, n, d, d);
        let y = (0..n * d)
            .map(|f| t.input(0).data()[f] + gelu_derivative(pre[f]) * (through_x[f] + through_w[f]))
            .collect();
        vec![tensor(vec![n, d], y)]
    }
}

/// The backward for any scalar (no hand-written Hessian-vector product:
/// the integrability test still runs).
impl<R: Real> GenericBackward for Residual<R> {
    fn backward_generic<T: Scalar>(&self, a: &Args<T>, up: &[Tensor<T>]) -> Gradients<T> {
        self.backward_with(a, up)
    }
}

impl<R: Real> SoftmaxCrossEntropy<R> {
    /// The layer with a bug planted in its forward-mode rule.
    #[must_use]
    pub fn with_rule_bug(mut self, bug: SoftmaxRuleBug) -> Self {
        self.rule_bug = Some(bug);
        self
    }
}

/// `losṡ = (1/N) Σ_n (Σ_k p[n, k]·ż[n, k] − ż[n, label_n])`, p the softmax.
impl<R: Real> TangentRule for SoftmaxCrossEntropy<R> {
    fn jvp(&self, a: &Args<R>, t: &Args<R>) -> Vec<Tensor<R>> {
        let (z, labels, tz) = (a.input(0), a.input(1), t.input(0));
        let (n, k) = (z.shape()[0], z.shape()[1]);
        let p = softmax(z.data(), k);
        let normalise = self.rule_bug != Some(SoftmaxRuleBug::TangentMissingNormalisation);
        let mut total = R::zero();
        for r in 0..n {
            if normalise {
                for j in 0..k {
                    total += p[r * k + j] * tz.data()[r * k + j];
                }
            }
            total -= tz.data()[r * k + label(labels.data()[r], k)];
        }
        vec![Tensor::scalar(total / c::<R>(n as f64))]
    }
}

/// Which entry point a [`RuleCase`] runs.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[non_exhaustive]
pub enum Entry {
    /// [`Audit::run_tangents`].
    Tangents,
    /// [`Audit::run_second_order`].
    SecondOrder,
}

type Runner = Box<dyn Fn(u64, &Audit) -> Result<Report, Error> + Send + Sync>;

/// One entry of [`rule_cases`]: a layer with rules, correct or with one
/// planted bug, in one precision, checked through one entry point.
pub struct RuleCase {
    /// The layer's short name.
    pub layer: &'static str,
    /// `"f32"` or `"f64"`.
    pub precision: &'static str,
    /// The entry point.
    pub entry: Entry,
    /// The planted bug (in the rules, or in the backward for the adjoint
    /// identity), or `None`.
    pub bug: Option<Bug>,
    /// The check of the row the bug should fail (`None` for a correct
    /// case).
    pub check: Option<Check>,
    run: Runner,
}

impl RuleCase {
    /// Runs the entry point on the layer at arguments drawn from `seed`.
    pub fn audit(&self, seed: u64, audit: &Audit) -> Result<Report, Error> {
        (self.run)(seed, audit)
    }

    /// `layer/entry` or `layer/entry/bug`, for tables.
    pub fn label(&self) -> String {
        let entry = match self.entry {
            Entry::Tangents => "tangents",
            Entry::SecondOrder => "second-order",
        };
        match &self.bug {
            Some(b) => format!("{}/{entry}/{}/{}", self.layer, self.precision, b.name),
            None => format!("{}/{entry}/{}", self.layer, self.precision),
        }
    }
}

/// The arguments with the bias (parameter 1) set to zero: where a layer is
/// often audited (at initialisation) and where the planted
/// `upstream-shifted-by-bias` bugs vanish from the gradient.
pub fn zero_bias<R: Real>(mut args: Args<R>) -> Args<R> {
    if let Some(b) = args.all_mut().get_mut(2) {
        b.data_mut().fill(R::zero());
    }
    args
}

fn case(
    layer: &'static str,
    precision: &'static str,
    entry: Entry,
    bug: Option<(Bug, Check)>,
    run: impl Fn(u64, &Audit) -> Result<Report, Error> + Send + Sync + 'static,
) -> RuleCase {
    RuleCase {
        layer,
        precision,
        entry,
        bug: bug.map(|b| b.0),
        check: bug.map(|b| b.1),
        run: Box::new(run),
    }
}

/// The check a planted bug's expected row holds, from its name.
fn check_of(bug: &Bug, entry: Entry) -> Check {
    match (bug.expect.tensor, entry) {
        ("adjoint", _) => Check::Adjoint,
        ("symmetry", _) => Check::Symmetry,
        (_, Entry::Tangents) => Check::Tangent,
        (_, Entry::SecondOrder) => Check::HessianVector,
    }
}

/// A planted rule bug checked through `entry`: what it should fail.
fn in_rule(b: Bug, entry: Entry) -> (Bug, Check, Entry) {
    (b, check_of(&b, entry), entry)
}

/// A backward bug seen through the adjoint identity: the tangent rule is
/// right, so the adjoint row must blame the backward.
fn in_backward(b: Bug) -> (Bug, Check, Entry) {
    let expect = super::Expect {
        tensor: "adjoint",
        kind: Kind::RuleAtFault(Culprit::Backward),
    };
    (Bug { expect, ..b }, Check::Adjoint, Entry::Tangents)
}

type Run<B> = fn(B, Entry, u64, &Audit) -> Result<Report, Error>;

/// One case per planted bug of `bugs`, described by `describe` and run by
/// `run`.
fn plant<B: Copy + Send + Sync + 'static>(
    out: &mut Vec<RuleCase>,
    (layer, precision): (&'static str, &'static str),
    bugs: &[B],
    describe: fn(B) -> (Bug, Check, Entry),
    run: Run<B>,
) {
    for &bug in bugs {
        let (info, check, entry) = describe(bug);
        out.push(case(
            layer,
            precision,
            entry,
            Some((info, check)),
            move |s, a| run(bug, entry, s, a),
        ));
    }
}

/// Every rule case: the four layers with tangent rules (correct in `f64`
/// and `f32` where generic, `f32` for [`Gelu`]), each planted tangent bug,
/// each planted backward bug (but the one that accumulates, which one
/// backward call cannot see) against the correct tangent rule, and the
/// three layers with generic backwards, correct and with each planted
/// second-order bug (the non-symmetric backwards at a zero bias, where
/// their extra term vanishes from the gradient).
pub fn rule_cases() -> Vec<RuleCase> {
    use Entry::{SecondOrder, Tangents};
    let mut out = Vec::new();
    macro_rules! generic {
        ($name:literal, $layer:ident, $entry:ident, $method:ident) => {
            out.push(case($name, "f64", $entry, None, |s, a| {
                a.$method(&$layer::<f64>::new(None), &$layer::args(s))
            }));
            out.push(case($name, "f32", $entry, None, |s, a| {
                a.$method(&$layer::<f32>::new(None), &$layer::args(s))
            }));
        };
    }
    generic!("dense", Dense, Tangents, run_tangents);
    generic!("residual", Residual, Tangents, run_tangents);
    generic!(
        "softmax-cross-entropy",
        SoftmaxCrossEntropy,
        Tangents,
        run_tangents
    );
    out.push(case("gelu", "f32", Tangents, None, |s, a| {
        a.run_tangents(&Gelu::new(None), &Gelu::args(s))
    }));
    generic!("dense", Dense, SecondOrder, run_second_order);
    generic!("residual", Residual, SecondOrder, run_second_order);
    out.push(case("gelu", "f32", SecondOrder, None, |s, a| {
        a.run_second_order(&Gelu::new(None), &Gelu::args(s))
    }));

    let (dense, gelu, residual, softmax) = (
        ("dense", "f64"),
        ("gelu", "f32"),
        ("residual", "f64"),
        ("softmax-cross-entropy", "f64"),
    );
    plant(
        &mut out,
        dense,
        DenseRuleBug::ALL,
        |b| match b {
            DenseRuleBug::TangentSignWeight | DenseRuleBug::TangentBiasMissing => {
                in_rule(b.info(), Tangents)
            }
            _ => in_rule(b.info(), SecondOrder),
        },
        |b, entry, s, a| {
            let layer = Dense::<f64>::new(None).with_rule_bug(b);
            match entry {
                Tangents => a.run_tangents(&layer, &Dense::args(s)),
                _ => a.run_second_order(&layer, &zero_bias(Dense::args(s))),
            }
        },
    );
    plant(
        &mut out,
        gelu,
        GeluRuleBug::ALL,
        |b| match b {
            GeluRuleBug::TangentSignFlipped => in_rule(b.info(), Tangents),
            GeluRuleBug::HessianMissingTerm => in_rule(b.info(), SecondOrder),
        },
        |b, entry, s, a| {
            let layer = Gelu::new(None).with_rule_bug(b);
            match entry {
                Tangents => a.run_tangents(&layer, &Gelu::args(s)),
                _ => a.run_second_order(&layer, &Gelu::args(s)),
            }
        },
    );
    plant(
        &mut out,
        residual,
        ResidualRuleBug::ALL,
        |b| match b {
            ResidualRuleBug::TangentMissingBias => in_rule(b.info(), Tangents),
            ResidualRuleBug::UpstreamShiftedByBias => in_rule(b.info(), SecondOrder),
        },
        |b, entry, s, a| {
            let layer = Residual::<f64>::new(None).with_rule_bug(b);
            match entry {
                Tangents => a.run_tangents(&layer, &Residual::args(s)),
                _ => a.run_second_order(&layer, &zero_bias(Residual::args(s))),
            }
        },
    );
    plant(
        &mut out,
        softmax,
        SoftmaxRuleBug::ALL,
        |b| in_rule(b.info(), Tangents),
        |b, _, s, a| {
            let layer = SoftmaxCrossEntropy::<f64>::new(None).with_rule_bug(b);
            a.run_tangents(&layer, &SoftmaxCrossEntropy::args(s))
        },
    );

    // Backward bugs against the correct tangent rule.
    let dense_bugs: Vec<DenseBug> = (DenseBug::ALL.iter().copied())
        .filter(|&b| b != DenseBug::Accumulates)
        .collect();
    plant(
        &mut out,
        dense,
        &dense_bugs,
        |b| in_backward(b.info()),
        |b, _, s, a| a.run_tangents(&Dense::<f64>::new(Some(b)), &Dense::args(s)),
    );
    plant(
        &mut out,
        gelu,
        GeluBug::ALL,
        |b| in_backward(b.info()),
        |b, _, s, a| a.run_tangents(&Gelu::new(Some(b)), &Gelu::args(s)),
    );
    plant(
        &mut out,
        residual,
        ResidualBug::ALL,
        |b| in_backward(b.info()),
        |b, _, s, a| a.run_tangents(&Residual::<f64>::new(Some(b)), &Residual::args(s)),
    );
    plant(
        &mut out,
        softmax,
        SoftmaxBug::ALL,
        |b| in_backward(b.info()),
        |b, _, s, a| {
            let layer = SoftmaxCrossEntropy::<f64>::new(Some(b));
            a.run_tangents(&layer, &SoftmaxCrossEntropy::args(s))
        },
    );
    out
}
