//! A bilinear layer: one weight matrix per output between two inputs.

use std::marker::PhantomData;

use super::{planted_bugs, register_generic, tensor, Case, Draw, Kind, Subject};
use crate::layer::{Args, GenericForward, Gradients, Layer};
use crate::scalar::{Real, Scalar};
use crate::signature::Signature;
use crate::tensor::Tensor;

planted_bugs! {
    /// Mistakes planted in [`Bilinear`]'s backward.
    BilinearBug {
        /// The weight gradient pairs the inputs the other way round, x1[n, j]·x2[n, i].
        WeightTransposed = "weight-transposed" => ("w", Kind::Transposed),
        /// The bias gradient buffer is allocated but never written, so zeros are returned.
        BiasNeverWritten = "bias-never-written" => ("b", Kind::AllZero),
        /// The second input's gradient is negated where the first input is negative (a stray sign(x1)).
        RightSignByLeft = "right-sign-by-left" => ("x2", Kind::WrongFormula),
        /// The first input's gradient contracts the weight with x1 instead of x2.
        LeftUsesLeft = "left-uses-left" => ("x1", Kind::WrongFormula),
    }
}

/// Bilinear map of two inputs:
/// `y[n, o] = Σ_{i,j} x1[n, i]·w[o, i, j]·x2[n, j] + b[o]`.
///
/// Backward: `dx1[n, i] = Σ_{o,j} g[n, o]·w[o, i, j]·x2[n, j]`,
/// `dx2[n, j] = Σ_{o,i} g[n, o]·x1[n, i]·w[o, i, j]`,
/// `dw[o, i, j] = Σ_n g[n, o]·x1[n, i]·x2[n, j]`, `db[o] = Σ_n g[n, o]`.
///
/// ```
/// use plumbline::gallery::Bilinear;
/// use plumbline::Audit;
/// let report = Audit::new().run(&Bilinear::<f64>::new(None), &Bilinear::args(4))?;
/// report.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct Bilinear<R> {
    /// The planted bug, or `None` for the correct layer.
    pub bug: Option<BilinearBug>,
    _r: PhantomData<R>,
}

impl<R: Real> Bilinear<R> {
    /// The layer, correct (`None`) or with a planted bug.
    pub fn new(bug: Option<BilinearBug>) -> Self {
        Bilinear {
            bug,
            _r: PhantomData,
        }
    }

    /// Random arguments: 2 hives, 3 hive-weight readings (x1) against 3
    /// temperature readings (x2), 2 outputs, values in [-1, 1].
    pub fn args(seed: u64) -> Args<R> {
        let mut d = Draw::new(seed);
        Args::new(
            vec![d.uniform(&[2, 3], 1.0), d.uniform(&[2, 3], 1.0)],
            vec![d.uniform(&[2, 3, 3], 1.0), d.uniform(&[2], 1.0)],
        )
    }
}

impl<R: Real> Layer for Bilinear<R> {
    type Real = R;

    fn signature(&self) -> Signature {
        Signature::new()
            .input("x1", "batch, left")
            .input("x2", "batch, right")
            .param("w", "out, left, right")
            .param("b", "out")
            .output("y", "batch, out")
    }

    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x1, x2, w) = (a.input(0), a.input(1), a.param(0));
        let (n, p, q, o) = (x1.shape()[0], x1.shape()[1], x2.shape()[1], w.shape()[0]);
        let (x1d, x2d, wd, g) = (x1.data(), x2.data(), w.data(), up[0].data());
        let bug = self.bug;
        let mut dx1 = vec![R::zero(); n * p];
        let mut dx2 = vec![R::zero(); n * q];
        let mut dw = vec![R::zero(); wd.len()];
        let mut db = vec![R::zero(); o];
        for s in 0..n {
            for f in 0..o {
                let gy = g[s * o + f];
                if bug != Some(BilinearBug::BiasNeverWritten) {
                    db[f] += gy;
                }
                for i in 0..p {
                    for j in 0..q {
                        let wij = wd[(f * p + i) * q + j];
                        let right = if bug == Some(BilinearBug::LeftUsesLeft) {
                            x1d[s * p + j % p]
                        } else {
                            x2d[s * q + j]
                        };
                        dx1[s * p + i] += gy * wij * right;
                        let sign = if bug == Some(BilinearBug::RightSignByLeft)
                            && x1d[s * p + i] < R::zero()
                        {
                            -R::one()
                        } else {
                            R::one()
                        };
                        dx2[s * q + j] += sign * gy * x1d[s * p + i] * wij;
                        let (ii, jj) = if bug == Some(BilinearBug::WeightTransposed) {
                            (j % p, i % q)
                        } else {
                            (i, j)
                        };
                        dw[(f * p + i) * q + j] += gy * x1d[s * p + ii] * x2d[s * q + jj];
                    }
                }
            }
        }
        Gradients::from(vec![
            tensor(vec![n, p], dx1),
            tensor(vec![n, q], dx2),
            tensor(vec![o, p, q], dw),
            tensor(vec![o], db),
        ])
    }
}

impl<R: Real> GenericForward for Bilinear<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x1, x2, w, b) = (a.input(0), a.input(1), a.param(0), a.param(1));
        let (n, p, q, o) = (x1.shape()[0], x1.shape()[1], x2.shape()[1], w.shape()[0]);
        let (x1d, x2d, wd) = (x1.data(), x2.data(), w.data());
        let mut y = vec![T::zero(); n * o];
        for s in 0..n {
            for f in 0..o {
                let mut acc = b.data()[f];
                for i in 0..p {
                    for j in 0..q {
                        acc += x1d[s * p + i] * wd[(f * p + i) * q + j] * x2d[s * q + j];
                    }
                }
                y[s * o + f] = acc;
            }
        }
        vec![tensor(vec![n, o], y)]
    }
}

pub(crate) fn register(out: &mut Vec<Case>) {
    register_generic!(out, "bilinear", Bilinear(), BilinearBug);
}
