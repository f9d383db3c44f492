//! 2-D convolution (cross-correlation) with stride and zero padding.

use std::marker::PhantomData;

use super::{planted_bugs, register_generic, tensor, Case, Draw, Kind, Subject};
use crate::layer::{Args, GenericForward, Gradients, Layer};
use crate::scalar::{Real, Scalar};
use crate::signature::Signature;
use crate::tensor::Tensor;

planted_bugs! {
    /// Mistakes planted in [`Conv2d`]'s backward.
    Conv2dBug {
        /// The input gradient is scattered as if the stride were 1.
        StrideIgnored = "stride-ignored" => ("x", Kind::WrongFormula),
        /// The weight gradient reads the input one column to the right (index off by one).
        IndexOffByOne = "index-off-by-one" => ("w", Kind::WrongFormula),
        /// The input gradient forgets to subtract the padding from the position.
        PaddingIgnored = "padding-ignored" => ("x", Kind::WrongFormula),
        /// The input gradient uses the kernel flipped, as for a true convolution.
        KernelFlipped = "kernel-flipped" => ("x", Kind::WrongFormula),
        /// The bias gradient sums only the first output position of each map.
        BiasFirstPosition = "bias-first-position" => ("b", Kind::WrongFormula),
        /// The weight gradient is accumulated at the kernel position flipped in both directions.
        WeightGradientFlipped = "weight-gradient-flipped" => ("w", Kind::Flipped(&[2, 3])),
    }
}

/// 2-D cross-correlation with stride `s` and zero padding `p`:
/// `y[n, o, i, j] = b[o] + Σ_{c,u,v} w[o, c, u, v]·x[n, c, i·s + u − p, j·s + v − p]`
/// (terms outside the input are zero).
///
/// Backward: every product `w·x` that made `y[n, o, i, j]` sends
/// `g[n, o, i, j]·w` to that `x` element and `g·x` to that `w` element;
/// `db[o]` sums `g` over batch and positions.
///
/// ```
/// use plumbline::gallery::Conv2d;
/// use plumbline::Audit;
/// let conv = Conv2d::<f64>::new(2, 1, None);
/// let report = Audit::new().run(&conv, &Conv2d::args(7))?;
/// report.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct Conv2d<R> {
    /// The stride, in both directions.
    pub stride: usize,
    /// Zero padding on every side.
    pub padding: usize,
    /// The planted bug, or `None` for the correct layer.
    pub bug: Option<Conv2dBug>,
    _r: PhantomData<R>,
}

struct Geometry {
    n: usize,
    c: usize,
    h: usize,
    w: usize,
    o: usize,
    k: usize,
    ho: usize,
    wo: usize,
}

impl<R: Real> Conv2d<R> {
    /// The layer with the given stride and padding.
    pub fn new(stride: usize, padding: usize, bug: Option<Conv2dBug>) -> Self {
        Conv2d {
            stride: stride.max(1),
            padding,
            bug,
            _r: PhantomData,
        }
    }

    /// Random arguments: one 2-channel 5×5 image, two 3×3 filters.
    pub fn args(seed: u64) -> Args<R> {
        let mut d = Draw::new(seed);
        Args::new(
            vec![d.uniform(&[1, 2, 5, 5], 1.0)],
            vec![d.uniform(&[2, 2, 3, 3], 1.0), d.uniform(&[2], 1.0)],
        )
    }

    fn geometry<T>(&self, x: &Tensor<T>, w: &Tensor<T>) -> Geometry {
        let (xs, ws) = (x.shape(), w.shape());
        let k = ws[2];
        let out = |len: usize| (len + 2 * self.padding).saturating_sub(k) / self.stride + 1;
        Geometry {
            n: xs[0],
            c: xs[1],
            h: xs[2],
            w: xs[3],
            o: ws[0],
            k,
            ho: out(xs[2]),
            wo: out(xs[3]),
        }
    }

    /// The input position read by output `i` through kernel offset `u`.
    fn source(&self, i: usize, u: usize, len: usize, stride: usize, pad: usize) -> Option<usize> {
        (i * stride + u).checked_sub(pad).filter(|&p| p < len)
    }
}

impl<R: Real> Layer for Conv2d<R> {
    type Real = R;

    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, chan, height, width")
            .param("w", "filters, chan, k, k")
            .param("b", "filters")
            .output("y", "*")
    }

    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, w) = (a.input(0), a.param(0));
        let g = self.geometry(x, w);
        let (xd, wd, gd) = (x.data(), w.data(), up[0].data());
        let (s, p) = (self.stride, self.padding);
        let bug = self.bug;
        // Positions as the backward computes them (bugs change these only).
        let dx_stride = if bug == Some(Conv2dBug::StrideIgnored) {
            1
        } else {
            s
        };
        let dx_pad = if bug == Some(Conv2dBug::PaddingIgnored) {
            0
        } else {
            p
        };
        let mut dx = vec![R::zero(); xd.len()];
        let mut dw = vec![R::zero(); wd.len()];
        let mut db = vec![R::zero(); g.o];
        for n in 0..g.n {
            for o in 0..g.o {
                for i in 0..g.ho {
                    for j in 0..g.wo {
                        let gy = gd[((n * g.o + o) * g.ho + i) * g.wo + j];
                        if bug != Some(Conv2dBug::BiasFirstPosition) || (i == 0 && j == 0) {
                            db[o] += gy;
                        }
                        for c in 0..g.c {
                            for u in 0..g.k {
                                for v in 0..g.k {
                                    let wi = ((o * g.c + c) * g.k + u) * g.k + v;
                                    let dwi = if bug == Some(Conv2dBug::WeightGradientFlipped) {
                                        ((o * g.c + c) * g.k + (g.k - 1 - u)) * g.k + (g.k - 1 - v)
                                    } else {
                                        wi
                                    };
                                    // Weight gradient.
                                    let shift = usize::from(bug == Some(Conv2dBug::IndexOffByOne));
                                    if let (Some(r), Some(q)) = (
                                        self.source(i, u, g.h, s, p),
                                        self.source(j, v + shift, g.w, s, p),
                                    ) {
                                        dw[dwi] += gy * xd[((n * g.c + c) * g.h + r) * g.w + q];
                                    }
                                    // Input gradient.
                                    let wk = if bug == Some(Conv2dBug::KernelFlipped) {
                                        ((o * g.c + c) * g.k + (g.k - 1 - u)) * g.k + (g.k - 1 - v)
                                    } else {
                                        wi
                                    };
                                    if let (Some(r), Some(q)) = (
                                        self.source(i, u, g.h, dx_stride, dx_pad),
                                        self.source(j, v, g.w, dx_stride, dx_pad),
                                    ) {
                                        dx[((n * g.c + c) * g.h + r) * g.w + q] += gy * wd[wk];
                                    }
                                }
                            }
                        }
                    }
                }
            }
        }
        Gradients::from(vec![
            tensor(x.shape().to_vec(), dx),
            tensor(w.shape().to_vec(), dw),
            tensor(vec![g.o], db),
        ])
    }
}

impl<R: Real> GenericForward for Conv2d<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, w, b) = (a.input(0), a.param(0), a.param(1));
        let g = self.geometry(x, w);
        let (xd, wd) = (x.data(), w.data());
        let (s, p) = (self.stride, self.padding);
        let mut y = vec![T::zero(); g.n * g.o * g.ho * g.wo];
        for n in 0..g.n {
            for o in 0..g.o {
                for i in 0..g.ho {
                    for j in 0..g.wo {
                        let mut acc = b.data()[o];
                        for c in 0..g.c {
                            for u in 0..g.k {
                                let Some(r) = self.source(i, u, g.h, s, p) else {
                                    continue;
                                };
                                for v in 0..g.k {
                                    let Some(q) = self.source(j, v, g.w, s, p) else {
                                        continue;
                                    };
                                    acc += wd[((o * g.c + c) * g.k + u) * g.k + v]
                                        * xd[((n * g.c + c) * g.h + r) * g.w + q];
                                }
                            }
                        }
                        y[((n * g.o + o) * g.ho + i) * g.wo + j] = acc;
                    }
                }
            }
        }
        vec![tensor(vec![g.n, g.o, g.ho, g.wo], y)]
    }
}

pub(crate) fn register(out: &mut Vec<Case>) {
    register_generic!(out, "conv2d", Conv2d(2, 1), Conv2dBug);
}
