//! Softmax with cross-entropy, averaged over the batch.

use std::marker::PhantomData;

use super::{c, planted_bugs, register_generic, tensor, Case, Draw, Kind, Subject};
use crate::layer::{Args, GenericForward, Gradients, Layer};
use crate::scalar::{Real, Scalar};
use crate::signature::Signature;
use crate::tensor::Tensor;

planted_bugs! {
    /// Mistakes planted in [`SoftmaxCrossEntropy`]'s backward.
    SoftmaxBug {
        /// The chain goes through the softmax Jacobian's diagonal only, sᵢ(1 − sᵢ).
        JacobianDiagonalOnly = "jacobian-diagonal-only" => ("logits", Kind::WrongFormula),
        /// The loss is a mean over the batch but the backward forgets the 1/N.
        SumNotMean = "sum-not-mean" => ("logits", Kind::Scaled(3.0)),
        /// The one-hot label is subtracted at the next class (index off by one).
        LabelOffByOne = "label-off-by-one" => ("logits", Kind::WrongFormula),
        /// The upstream gradient of the loss is ignored (assumed to be 1).
        UpstreamIgnored = "upstream-ignored" => ("logits", Kind::ScaledAny),
        /// The gradient is written as onehot − softmax.
        SignFlipped = "sign-flipped" => ("logits", Kind::SignFlipped),
    }
}

/// Softmax with cross-entropy against integer labels, averaged over the
/// batch: `loss = (1/N) Σ_n [log Σ_k exp(z[n, k]) − z[n, label_n]]`.
///
/// The labels are a fixed input (class indices stored as numbers); they
/// take a place among the arguments but get no gradient.
///
/// Backward: `dz[n, k] = g/N · (softmax(z[n])[k] − [k = label_n])`.
///
/// ```
/// use plumbline::gallery::SoftmaxCrossEntropy;
/// use plumbline::Audit;
/// let layer = SoftmaxCrossEntropy::<f64>::new(None);
/// let report = Audit::new().run(&layer, &SoftmaxCrossEntropy::args(2))?;
/// report.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct SoftmaxCrossEntropy<R> {
    /// The planted bug, or `None` for the correct layer.
    pub bug: Option<SoftmaxBug>,
    /// A bug planted in the layer's forward-mode rule (see
    /// [`SoftmaxRuleBug`](crate::gallery::SoftmaxRuleBug)), or `None`.
    pub rule_bug: Option<super::SoftmaxRuleBug>,
    _r: PhantomData<R>,
}

impl<R: Real> SoftmaxCrossEntropy<R> {
    /// The layer, correct (`None`) or with a planted bug.
    pub fn new(bug: Option<SoftmaxBug>) -> Self {
        SoftmaxCrossEntropy {
            bug,
            rule_bug: None,
            _r: PhantomData,
        }
    }

    /// Random arguments: batch 3, 4 classes, logits in [-2, 2].
    pub fn args(seed: u64) -> Args<R> {
        let mut d = Draw::new(seed);
        let logits = d.uniform(&[3, 4], 2.0);
        let labels = (0..3).map(|_| R::from_f64(d.index(4) as f64)).collect();
        Args::new(vec![logits, tensor(vec![3], labels)], vec![])
    }
}

/// The class index stored in a label (clamped into range).
pub(crate) fn label<T: Scalar>(v: T, classes: usize) -> usize {
    v.to_usize().unwrap_or(0).min(classes.saturating_sub(1))
}

/// Row-wise softmax, stabilised by the row maximum.
pub(crate) fn softmax<T: Scalar>(z: &[T], k: usize) -> Vec<T> {
    let mut s = Vec::with_capacity(z.len());
    for row in z.chunks(k) {
        let m = row.iter().copied().fold(row[0], T::max);
        let e: Vec<T> = row.iter().map(|&v| (v - m).exp()).collect();
        let total = e.iter().copied().sum::<T>();
        s.extend(e.into_iter().map(|v| v / total));
    }
    s
}

impl<R: Real> Layer for SoftmaxCrossEntropy<R> {
    type Real = R;

    fn signature(&self) -> Signature {
        Signature::new()
            .input("logits", "batch, class")
            .fixed_input("labels", "batch")
            .output("loss", "")
    }

    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (z, labels) = (a.input(0), a.input(1));
        let (n, k) = (z.shape()[0], z.shape()[1]);
        let s = softmax(z.data(), k);
        let g = match self.bug {
            Some(SoftmaxBug::UpstreamIgnored) => R::one(),
            _ => up[0].data()[0],
        };
        let scale = match self.bug {
            Some(SoftmaxBug::SumNotMean) => g,
            _ => g / R::from_f64(n as f64),
        };
        let mut dz = vec![R::zero(); n * k];
        for r in 0..n {
            let y = label(labels.data()[r], k);
            for j in 0..k {
                let i = r * k + j;
                let onehot = if j == y { R::one() } else { R::zero() };
                dz[i] = match self.bug {
                    Some(SoftmaxBug::JacobianDiagonalOnly) => {
                        // dL/ds_j = −[j = y]/s_y, through s_j(1 − s_j) only.
                        let dl_ds = -onehot / s[r * k + y];
                        s[i] * (R::one() - s[i]) * dl_ds * scale
                    }
                    Some(SoftmaxBug::LabelOffByOne) => {
                        let off = if j == (y + 1) % k {
                            R::one()
                        } else {
                            R::zero()
                        };
                        (s[i] - off) * scale
                    }
                    Some(SoftmaxBug::SignFlipped) => (onehot - s[i]) * scale,
                    _ => (s[i] - onehot) * scale,
                };
            }
        }
        Gradients::from(vec![tensor(vec![n, k], dz)])
    }
}

impl<R: Real> GenericForward for SoftmaxCrossEntropy<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (z, labels) = (a.input(0), a.input(1));
        let (n, k) = (z.shape()[0], z.shape()[1]);
        let mut loss = T::zero();
        for (r, row) in z.data().chunks(k).enumerate() {
            let m = row.iter().copied().fold(row[0], T::max);
            let lse = m + row.iter().map(|&v| (v - m).exp()).sum::<T>().ln();
            loss += lse - row[label(labels.data()[r], k)];
        }
        vec![Tensor::scalar(loss / c(n as f64))]
    }
}

pub(crate) fn register(out: &mut Vec<Case>) {
    register_generic!(
        out,
        "softmax-cross-entropy",
        SoftmaxCrossEntropy(),
        SoftmaxBug
    );
}
