//! Dense (affine) layer: `y = x·wᵀ + b`.

use std::cell::RefCell;
use std::marker::PhantomData;

use super::{affine, planted_bugs, register_generic, tensor, Case, Draw, Kind, Subject};
use crate::layer::{Args, GenericForward, Gradients, Layer};
use crate::scalar::{Real, Scalar};
use crate::signature::Signature;
use crate::tensor::Tensor;

planted_bugs! {
    /// Mistakes planted in [`Dense`]'s backward.
    DenseBug {
        /// The weight gradient is negated (g·x subtracted instead of added).
        SignFlippedWeight = "sign-flipped-weight" => ("w", Kind::SignFlipped),
        /// The bias gradient is doubled (the bias counted once per output and once per input).
        DoubledBias = "doubled-bias" => ("b", Kind::Scaled(2.0)),
        /// The weight gradient is averaged over the batch although the forward sums it.
        MeanOverBatch = "mean-over-batch" => ("w", Kind::Scaled(1.0 / 3.0)),
        /// The weight gradient is computed as xᵀ·g, shape [in, out] instead of [out, in].
        TransposedWeight = "transposed-weight" => ("w", Kind::Transposed),
        /// The bias gradient is not summed over the batch: one row per sample is returned.
        BiasNotSummed = "bias-not-summed" => ("b", Kind::WrongShape),
        /// The weight gradient is left out of the returned list.
        WeightMissing = "weight-missing" => ("w", Kind::Missing),
        /// The weight gradient is added into a buffer kept between calls and the buffer returned.
        Accumulates = "accumulates" => ("w", Kind::Accumulates),
    }
}

/// Dense (affine) layer: `y[n, o] = Σ_k w[o, k]·x[n, k] + b[o]`.
///
/// Backward, for upstream `g`:
/// `dx = g·w`, `dw = gᵀ·x` (summed over the batch), `db = Σ_n g[n, ·]`.
///
/// ```
/// use plumbline::gallery::Dense;
/// use plumbline::{Args, Audit, Tensor};
/// let x = Tensor::new(vec![2, 3], vec![0.5, -1.0, 2.0, 0.1, 0.2, -0.3])?;
/// let w = Tensor::new(vec![2, 3], vec![0.3, -0.2, 0.1, 0.7, 0.4, -0.6])?;
/// let b = Tensor::new(vec![2], vec![0.05, -0.01])?;
/// let report = Audit::new().run(&Dense::<f64>::new(None), &Args::new(vec![x], vec![w, b]))?;
/// report.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct Dense<R> {
    /// The planted bug, or `None` for the correct layer.
    pub bug: Option<DenseBug>,
    /// A bug planted in the layer's other rules (see
    /// [`DenseRuleBug`](crate::gallery::DenseRuleBug)), or `None`.
    pub rule_bug: Option<super::DenseRuleBug>,
    buffer: RefCell<Vec<R>>,
    _r: PhantomData<R>,
}

impl<R: Real> Dense<R> {
    /// The layer, correct (`None`) or with a planted bug.
    pub fn new(bug: Option<DenseBug>) -> Self {
        Dense {
            bug,
            rule_bug: None,
            buffer: RefCell::new(Vec::new()),
            _r: PhantomData,
        }
    }

    /// Random arguments: batch 3, 3 inputs, 2 outputs, values in [-1, 1].
    pub fn args(seed: u64) -> Args<R> {
        let mut d = Draw::new(seed);
        Args::new(
            vec![d.uniform(&[3, 3], 1.0)],
            vec![d.uniform(&[2, 3], 1.0), d.uniform(&[2], 1.0)],
        )
    }
}

impl<R: Real> Layer for Dense<R> {
    type Real = R;

    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, in")
            .param("w", "out, in")
            .param("b", "out")
            .output("y", "batch, out")
    }

    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let mut grads = self.backward_with(a, up);
        if self.bug == Some(DenseBug::Accumulates) {
            if let Some(dw) = grads.get(1) {
                let mut buf = self.buffer.borrow_mut();
                if buf.len() != dw.len() {
                    *buf = vec![R::zero(); dw.len()];
                }
                for (b, v) in buf.iter_mut().zip(dw.data()) {
                    *b += *v;
                }
                let dw = tensor(dw.shape().to_vec(), buf.clone());
                grads =
                    Gradients::from(vec![grads.get(0).cloned(), Some(dw), grads.get(2).cloned()]);
            }
        }
        grads
    }
}

impl<R: Real> Dense<R> {
    /// The backward for any scalar, with the planted bug (a buffer kept
    /// between calls is added by [`Layer::backward`] only) and the planted
    /// rule bug [`DenseRuleBug::UpstreamShiftedByBias`](crate::gallery::DenseRuleBug).
    pub(crate) fn backward_with<T: Scalar>(&self, a: &Args<T>, up: &[Tensor<T>]) -> Gradients<T> {
        let (x, w, b, g) = (
            a.input(0).data(),
            a.param(0).data(),
            a.param(1).data(),
            up[0].data(),
        );
        let (n, i, o) = (
            a.input(0).shape()[0],
            a.input(0).shape()[1],
            a.param(0).shape()[0],
        );
        let shifted = self.rule_bug == Some(super::DenseRuleBug::UpstreamShiftedByBias);
        let mut dx = vec![T::zero(); n * i];
        let mut dw = vec![T::zero(); o * i];
        let mut db = vec![T::zero(); o];
        for s in 0..n {
            for r in 0..o {
                let gs = g[s * o + r];
                db[r] += gs;
                // The planted rule bug: the bias added to the upstream of dx.
                let gx = if shifted { gs + b[r] } else { gs };
                for k in 0..i {
                    dx[s * i + k] += gx * w[r * i + k];
                    dw[r * i + k] += gs * x[s * i + k];
                }
            }
        }
        let mut dw = tensor(vec![o, i], dw);
        let mut db = tensor(vec![o], db);
        match self.bug {
            None | Some(DenseBug::WeightMissing | DenseBug::Accumulates) => {}
            Some(DenseBug::SignFlippedWeight) => dw = dw.map(|v| -v),
            Some(DenseBug::DoubledBias) => db = db.map(|v| v + v),
            Some(DenseBug::MeanOverBatch) => {
                let nn = super::c::<T>(n as f64);
                dw = dw.map(|v| v / nn);
            }
            Some(DenseBug::TransposedWeight) => {
                let d = dw.data();
                dw = tensor(
                    vec![i, o],
                    (0..i * o).map(|f| d[(f % o) * i + f / o]).collect(),
                );
            }
            Some(DenseBug::BiasNotSummed) => db = tensor(vec![n, o], g.to_vec()),
        }
        let dx = tensor(vec![n, i], dx);
        if self.bug == Some(DenseBug::WeightMissing) {
            return Gradients::from(vec![Some(dx), None, Some(db)]);
        }
        Gradients::from(vec![dx, dw, db])
    }
}

impl<R: Real> GenericForward for Dense<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, w, b) = (a.input(0), a.param(0), a.param(1));
        let (n, i, o) = (x.shape()[0], x.shape()[1], w.shape()[0]);
        let y = affine(x.data(), w.data(), Some(b.data()), n, i, o);
        vec![tensor(vec![n, o], y)]
    }
}

pub(crate) fn register(out: &mut Vec<Case>) {
    register_generic!(out, "dense", Dense(), DenseBug);
}
