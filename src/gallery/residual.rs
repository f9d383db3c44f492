//! A residual block composing the dense layer and GELU:
//! `y = x + gelu(x·wᵀ + b)`.

use std::marker::PhantomData;

use super::{
    affine, gelu, gelu_derivative, planted_bugs, register_generic, tensor, Case, Draw, Kind,
    Subject,
};
use crate::layer::{Args, GenericForward, Gradients, Layer};
use crate::scalar::{Real, Scalar};
use crate::signature::Signature;
use crate::tensor::Tensor;

planted_bugs! {
    /// Mistakes planted in [`Residual`]'s backward.
    ResidualBug {
        /// The skip connection's gradient is dropped: dx only flows through the branch.
        ResidualDropped = "residual-dropped" => ("x", Kind::WrongFormula),
        /// The skip connection's gradient is added twice.
        ResidualTwice = "residual-twice" => ("x", Kind::WrongFormula),
        /// GELU's derivative is taken at its output instead of its input.
        DerivativeAtOutput = "derivative-at-output" => ("w", Kind::WrongFormula),
        /// The (square) weight gradient is transposed.
        WeightTransposed = "weight-transposed" => ("w", Kind::Transposed),
    }
}

/// A residual block: `y = x + gelu(a)`, `a = x·wᵀ + b`, with a square `w`.
///
/// Backward: `da = g ⊙ gelu′(a)`; `dx = g + da·w` (skip plus branch),
/// `dw = daᵀ·x`, `db = Σ_n da`.
///
/// ```
/// use plumbline::gallery::Residual;
/// use plumbline::Audit;
/// let report = Audit::new().run(&Residual::<f64>::new(None), &Residual::args(9))?;
/// report.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct Residual<R> {
    /// The planted bug, or `None` for the correct layer.
    pub bug: Option<ResidualBug>,
    /// A bug planted in the layer's other rules (see
    /// [`ResidualRuleBug`](crate::gallery::ResidualRuleBug)), or `None`.
    pub rule_bug: Option<super::ResidualRuleBug>,
    _r: PhantomData<R>,
}

impl<R: Real> Residual<R> {
    /// The layer, correct (`None`) or with a planted bug.
    pub fn new(bug: Option<ResidualBug>) -> Self {
        Residual {
            bug,
            rule_bug: None,
            _r: PhantomData,
        }
    }

    /// Random arguments: batch 2, width 3, values in [-1, 1].
    pub fn args(seed: u64) -> Args<R> {
        let mut d = Draw::new(seed);
        Args::new(
            vec![d.uniform(&[2, 3], 1.0)],
            vec![d.uniform(&[3, 3], 1.0), d.uniform(&[3], 1.0)],
        )
    }
}

impl<R: Real> Layer for Residual<R> {
    type Real = R;

    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, width")
            .param("w", "width, width")
            .param("b", "width")
            .output("y", "batch, width")
    }

    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        self.backward_with(a, up)
    }
}

impl<R: Real> Residual<R> {
    /// The backward for any scalar, with the planted bug and the planted
    /// rule bug [`ResidualRuleBug::UpstreamShiftedByBias`](crate::gallery::ResidualRuleBug).
    pub(crate) fn backward_with<T: Scalar>(&self, a: &Args<T>, up: &[Tensor<T>]) -> Gradients<T> {
        let (x, w, b) = (a.input(0), a.param(0), a.param(1));
        let (n, d) = (x.shape()[0], x.shape()[1]);
        let (xd, wd, g) = (x.data(), w.data(), up[0].data());
        let pre = affine(xd, wd, Some(b.data()), n, d, d);
        let shifted = self.rule_bug == Some(super::ResidualRuleBug::UpstreamShiftedByBias);
        let da: Vec<T> = pre
            .iter()
            .zip(g)
            .enumerate()
            .map(|(f, (&ai, &gi))| {
                // The planted rule bug: the bias added to the branch's upstream.
                let gi = if shifted { gi + b.data()[f % d] } else { gi };
                let at = if self.bug == Some(ResidualBug::DerivativeAtOutput) {
                    gelu(ai)
                } else {
                    ai
                };
                gi * gelu_derivative(at)
            })
            .collect();
        let skip = match self.bug {
            Some(ResidualBug::ResidualDropped) => T::zero(),
            Some(ResidualBug::ResidualTwice) => super::c::<T>(2.0),
            _ => T::one(),
        };
        let mut dx: Vec<T> = g.iter().map(|&gi| skip * gi).collect();
        let mut dw = vec![T::zero(); d * d];
        let mut db = vec![T::zero(); d];
        for r in 0..n {
            for o in 0..d {
                let dao = da[r * d + o];
                db[o] += dao;
                for k in 0..d {
                    dx[r * d + k] += dao * wd[o * d + k];
                    dw[o * d + k] += dao * xd[r * d + k];
                }
            }
        }
        if self.bug == Some(ResidualBug::WeightTransposed) {
            dw = (0..d * d).map(|f| dw[(f % d) * d + f / d]).collect();
        }
        Gradients::from(vec![
            tensor(vec![n, d], dx),
            tensor(vec![d, d], dw),
            tensor(vec![d], db),
        ])
    }
}

impl<R: Real> GenericForward for Residual<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, w, b) = (a.input(0), a.param(0), a.param(1));
        let (n, d) = (x.shape()[0], x.shape()[1]);
        let pre = affine(x.data(), w.data(), Some(b.data()), n, d, d);
        let y = x
            .data()
            .iter()
            .zip(pre)
            .map(|(&xi, ai)| xi + gelu(ai))
            .collect();
        vec![tensor(vec![n, d], y)]
    }
}

pub(crate) fn register(out: &mut Vec<Case>) {
    register_generic!(out, "residual", Residual(), ResidualBug);
}
