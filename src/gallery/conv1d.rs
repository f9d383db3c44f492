//! 1-D convolution (cross-correlation) over a sequence of readings, no
//! padding, stride 1.

use std::marker::PhantomData;

use super::{planted_bugs, register_generic, tensor, Case, Draw, Kind, Subject};
use crate::layer::{Args, GenericForward, Gradients, Layer};
use crate::scalar::{Real, Scalar};
use crate::signature::Signature;
use crate::tensor::Tensor;

planted_bugs! {
    /// Mistakes planted in [`Conv1d`]'s backward.
    Conv1dBug {
        /// The weight gradient is accumulated with the kernel offset reversed (k − 1 − u), as for a true convolution.
        WeightFlipped = "weight-flipped" => ("w", Kind::Flipped(&[2])),
        /// The input gradient's loop over positions stops one short, so the last position gets nothing.
        LastPositionSkipped = "last-position-skipped" => ("x", Kind::Partial),
        /// The bias gradient is averaged over the output positions instead of summed.
        BiasMeanOverPositions = "bias-mean-over-positions" => ("b", Kind::Scaled(0.25)),
        /// The input gradient reads the weight of the next filter (o + 1, wrapping), a loop index mixed up.
        NextFilter = "next-filter" => ("x", Kind::WrongFormula),
    }
}

/// 1-D cross-correlation, stride 1, no padding:
/// `y[n, o, t] = b[o] + Σ_{c,u} w[o, c, u]·x[n, c, t + u]` for
/// `t < len − k + 1`.
///
/// Backward: `dx[n, c, t + u] += g[n, o, t]·w[o, c, u]`,
/// `dw[o, c, u] += g[n, o, t]·x[n, c, t + u]`, `db[o] = Σ_{n,t} g[n, o, t]`.
///
/// ```
/// use plumbline::gallery::Conv1d;
/// use plumbline::Audit;
/// let report = Audit::new().run(&Conv1d::<f64>::new(None), &Conv1d::args(3))?;
/// report.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct Conv1d<R> {
    /// The planted bug, or `None` for the correct layer.
    pub bug: Option<Conv1dBug>,
    _r: PhantomData<R>,
}

impl<R: Real> Conv1d<R> {
    /// The layer, correct (`None`) or with a planted bug.
    pub fn new(bug: Option<Conv1dBug>) -> Self {
        Conv1d {
            bug,
            _r: PhantomData,
        }
    }

    /// Random arguments: two hives' sequences of 2 sensor channels over 6
    /// readings, three filters of width 3, values in [-1, 1].
    pub fn args(seed: u64) -> Args<R> {
        let mut d = Draw::new(seed);
        Args::new(
            vec![d.uniform(&[2, 2, 6], 1.0)],
            vec![d.uniform(&[3, 2, 3], 1.0), d.uniform(&[3], 1.0)],
        )
    }
}

/// Sizes: batch, channels, length, filters, kernel width, output length.
fn sizes<T>(x: &Tensor<T>, w: &Tensor<T>) -> (usize, usize, usize, usize, usize, usize) {
    let (xs, ws) = (x.shape(), w.shape());
    let (len, k) = (xs[2], ws[2]);
    (xs[0], xs[1], len, ws[0], k, (len + 1).saturating_sub(k))
}

impl<R: Real> Layer for Conv1d<R> {
    type Real = R;

    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, chan, len")
            .param("w", "filters, chan, k")
            .param("b", "filters")
            .output("y", "batch, filters, out")
    }

    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, w) = (a.input(0), a.param(0));
        let (n, c, len, o, k, out) = sizes(x, w);
        let (xd, wd, g) = (x.data(), w.data(), up[0].data());
        let bug = self.bug;
        let mut dx = vec![R::zero(); xd.len()];
        let mut dw = vec![R::zero(); wd.len()];
        let mut db = vec![R::zero(); o];
        let last = if bug == Some(Conv1dBug::LastPositionSkipped) {
            len - 1
        } else {
            len
        };
        for s in 0..n {
            for f in 0..o {
                for t in 0..out {
                    let gy = g[(s * o + f) * out + t];
                    db[f] += gy;
                    for ch in 0..c {
                        for u in 0..k {
                            let xi = (s * c + ch) * len + t + u;
                            let wu = if bug == Some(Conv1dBug::WeightFlipped) {
                                k - 1 - u
                            } else {
                                u
                            };
                            dw[(f * c + ch) * k + wu] += gy * xd[xi];
                            let fw = if bug == Some(Conv1dBug::NextFilter) {
                                (f + 1) % o
                            } else {
                                f
                            };
                            if t + u < last {
                                dx[xi] += gy * wd[(fw * c + ch) * k + u];
                            }
                        }
                    }
                }
            }
        }
        if bug == Some(Conv1dBug::BiasMeanOverPositions) {
            let m = R::from_f64(out as f64);
            db.iter_mut().for_each(|v| *v /= m);
        }
        Gradients::from(vec![
            tensor(vec![n, c, len], dx),
            tensor(vec![o, c, k], dw),
            tensor(vec![o], db),
        ])
    }
}

impl<R: Real> GenericForward for Conv1d<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, w, b) = (a.input(0), a.param(0), a.param(1));
        let (n, c, len, o, k, out) = sizes(x, w);
        let (xd, wd) = (x.data(), w.data());
        let mut y = vec![T::zero(); n * o * out];
        for s in 0..n {
            for f in 0..o {
                for t in 0..out {
                    let mut acc = b.data()[f];
                    for ch in 0..c {
                        for u in 0..k {
                            acc += wd[(f * c + ch) * k + u] * xd[(s * c + ch) * len + t + u];
                        }
                    }
                    y[(s * o + f) * out + t] = acc;
                }
            }
        }
        vec![tensor(vec![n, o, out], y)]
    }
}

pub(crate) fn register(out: &mut Vec<Case>) {
    register_generic!(out, "conv1d", Conv1d(), Conv1dBug);
}
