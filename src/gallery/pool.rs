//! 2-D pooling: max-pool (generic; kinks where two elements tie) and
//! average pool (written for `f32` only).

use std::marker::PhantomData;

use super::{planted_bugs, tensor, Case, Draw, Kind, Subject};
use crate::layer::{Args, Forward, GenericForward, Gradients, Layer};
use crate::scalar::{Real, Scalar};
use crate::signature::Signature;
use crate::tensor::Tensor;

planted_bugs! {
    /// Mistakes planted in [`MaxPool2d`]'s backward.
    MaxPoolBug {
        /// Where two elements tie for the maximum, each receives the full gradient.
        TiesToEveryMax = "ties-to-every-max" => ("x", Kind::SharedKink),
        /// The gradient goes to the window's first element, not to its maximum.
        FirstElement = "first-element" => ("x", Kind::WrongFormula),
        /// The gradient is spread evenly over the window, as for average pooling.
        SpreadEvenly = "spread-evenly" => ("x", Kind::WrongFormula),
        /// The maximum is looked up in the next window along the row.
        WrongWindow = "wrong-window" => ("x", Kind::WrongFormula),
    }
}

planted_bugs! {
    /// Mistakes planted in [`AvgPool2d`]'s backward.
    AvgPoolBug {
        /// The gradient is not divided by the window size.
        NotDivided = "not-divided" => ("x", Kind::Scaled(4.0)),
        /// The gradient is divided by the window size twice.
        DividedTwice = "divided-twice" => ("x", Kind::Scaled(0.25)),
        /// The backward places windows as if the stride were 1.
        StrideIgnored = "stride-ignored" => ("x", Kind::WrongFormula),
        /// The whole gradient of a window goes to its top-left element.
        TopLeftOnly = "top-left-only" => ("x", Kind::WrongFormula),
    }
}

/// Window geometry shared by both pools: input `[n, c, h, w]`, square
/// window `k`, stride `s`, no padding.
#[derive(Clone, Copy)]
struct Windows {
    planes: usize,
    h: usize,
    w: usize,
    k: usize,
    s: usize,
    ho: usize,
    wo: usize,
}

impl Windows {
    fn new(shape: &[usize], k: usize, s: usize) -> Self {
        let (h, w) = (shape[2], shape[3]);
        Windows {
            planes: shape[0] * shape[1],
            h,
            w,
            k,
            s,
            ho: h.saturating_sub(k) / s + 1,
            wo: w.saturating_sub(k) / s + 1,
        }
    }

    fn out_shape(&self, shape: &[usize]) -> Vec<usize> {
        vec![shape[0], shape[1], self.ho, self.wo]
    }

    /// Flat input positions of window (plane, i, j), row-major; `stride`
    /// may differ from the true one (a planted bug).
    fn members(&self, plane: usize, i: usize, j: usize, stride: usize) -> Vec<usize> {
        let mut v = Vec::with_capacity(self.k * self.k);
        for u in 0..self.k {
            for t in 0..self.k {
                let (r, q) = (i * stride + u, j * stride + t);
                if r < self.h && q < self.w {
                    v.push((plane * self.h + r) * self.w + q);
                }
            }
        }
        v
    }
}

fn pool_signature() -> Signature {
    Signature::new()
        .input("x", "batch, chan, height, width")
        .output("y", "*")
}

fn pool_args<R: Real>(seed: u64) -> Args<R> {
    let mut d = Draw::new(seed);
    Args::new(vec![d.uniform(&[1, 2, 4, 4], 1.0)], vec![])
}

/// Max-pool over `k×k` windows with stride `k`:
/// `y[n, c, i, j] = max over the window of x`.
///
/// Backward: each window's upstream gradient goes to the element that
/// attained the maximum (the first one in row-major order on a tie, the
/// same element the forward's strict `>` keeps). At a tie the forward has a
/// kink: any split of the gradient between the tied elements is a valid
/// subgradient element by element, but the *sum* must stay `g`.
///
/// ```
/// use plumbline::gallery::MaxPool2d;
/// use plumbline::Audit;
/// let report = Audit::new().run(&MaxPool2d::<f64>::new(None), &MaxPool2d::args(3))?;
/// report.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct MaxPool2d<R> {
    /// Window size and stride.
    pub k: usize,
    /// The planted bug, or `None` for the correct layer.
    pub bug: Option<MaxPoolBug>,
    _r: PhantomData<R>,
}

impl<R: Real> MaxPool2d<R> {
    /// 2×2 windows, stride 2.
    pub fn new(bug: Option<MaxPoolBug>) -> Self {
        MaxPool2d {
            k: 2,
            bug,
            _r: PhantomData,
        }
    }

    /// Random arguments: one 2-channel 4×4 image, values in [-1, 1].
    pub fn args(seed: u64) -> Args<R> {
        pool_args(seed)
    }

    /// Arguments where, in every window, the first and last elements tie
    /// for the maximum.
    pub fn tied_args(seed: u64) -> Args<R> {
        let mut d = Draw::new(seed);
        let mut x: Tensor<R> = d.uniform(&[1, 2, 4, 4], 1.0);
        let lift: Tensor<R> = d.uniform(&[8], 0.5);
        let win = Windows::new(x.shape(), 2, 2);
        let mut wi = 0;
        for plane in 0..win.planes {
            for i in 0..win.ho {
                for j in 0..win.wo {
                    let m = win.members(plane, i, j, 2);
                    let top = R::from_f64(1.5) + lift.data()[wi % 8];
                    x.data_mut()[m[0]] = top;
                    x.data_mut()[m[3]] = top;
                    wi += 1;
                }
            }
        }
        Args::new(vec![x], vec![])
    }
}

fn argmax<T: Scalar>(x: &[T], members: &[usize]) -> usize {
    let mut best = members[0];
    for &m in &members[1..] {
        if x[m] > x[best] {
            best = m;
        }
    }
    best
}

impl<R: Real> Layer for MaxPool2d<R> {
    type Real = R;

    fn signature(&self) -> Signature {
        pool_signature()
    }

    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let x = a.input(0);
        let xd = x.data();
        let win = Windows::new(x.shape(), self.k, self.k);
        let mut dx = vec![R::zero(); xd.len()];
        for plane in 0..win.planes {
            for i in 0..win.ho {
                for j in 0..win.wo {
                    let g = up[0].data()[(plane * win.ho + i) * win.wo + j];
                    let m = win.members(plane, i, j, win.s);
                    match self.bug {
                        None => dx[argmax(xd, &m)] += g,
                        Some(MaxPoolBug::TiesToEveryMax) => {
                            let top = xd[argmax(xd, &m)];
                            for &e in m.iter().filter(|&&e| xd[e] == top) {
                                dx[e] += g;
                            }
                        }
                        Some(MaxPoolBug::FirstElement) => dx[m[0]] += g,
                        Some(MaxPoolBug::SpreadEvenly) => {
                            let share = g / R::from_f64(m.len() as f64);
                            for &e in &m {
                                dx[e] += share;
                            }
                        }
                        Some(MaxPoolBug::WrongWindow) => {
                            let jj = (j + 1) % win.wo;
                            let other = win.members(plane, i, jj, win.s);
                            dx[argmax(xd, &other)] += g;
                        }
                    }
                }
            }
        }
        Gradients::from(vec![tensor(x.shape().to_vec(), dx)])
    }
}

impl<R: Real> GenericForward for MaxPool2d<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let x = a.input(0);
        let win = Windows::new(x.shape(), self.k, self.k);
        let mut y = Vec::with_capacity(win.planes * win.ho * win.wo);
        for plane in 0..win.planes {
            for i in 0..win.ho {
                for j in 0..win.wo {
                    let m = win.members(plane, i, j, win.s);
                    y.push(x.data()[argmax(x.data(), &m)]);
                }
            }
        }
        vec![tensor(win.out_shape(x.shape()), y)]
    }
}

/// Average pool over 2×2 windows with stride 2, written for `f32` only
/// (a plain [`Layer`]: the audit uses Ridders' method in `f32`):
/// `y[n, c, i, j] = (1/4) Σ over the window of x`.
///
/// Backward: each window element receives a quarter of the window's
/// upstream gradient.
///
/// ```
/// use plumbline::gallery::AvgPool2d;
/// use plumbline::Audit;
/// let report = Audit::new().run(&AvgPool2d::new(None), &AvgPool2d::args(3))?;
/// report.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct AvgPool2d {
    /// The planted bug, or `None` for the correct layer.
    pub bug: Option<AvgPoolBug>,
}

impl AvgPool2d {
    /// The layer, correct (`None`) or with a planted bug.
    pub fn new(bug: Option<AvgPoolBug>) -> Self {
        AvgPool2d { bug }
    }

    /// Random arguments: one 2-channel 4×4 image, values in [-1, 1].
    pub fn args(seed: u64) -> Args<f32> {
        pool_args(seed)
    }
}

impl Layer for AvgPool2d {
    type Real = f32;

    fn signature(&self) -> Signature {
        pool_signature()
    }

    fn backward(&self, a: &Args<f32>, up: &[Tensor<f32>]) -> Gradients<f32> {
        let x = a.input(0);
        let win = Windows::new(x.shape(), 2, 2);
        let mut dx = vec![0.0_f32; x.len()];
        let stride = if self.bug == Some(AvgPoolBug::StrideIgnored) {
            1
        } else {
            win.s
        };
        for plane in 0..win.planes {
            for i in 0..win.ho {
                for j in 0..win.wo {
                    let g = up[0].data()[(plane * win.ho + i) * win.wo + j];
                    let m = win.members(plane, i, j, stride);
                    let size = m.len() as f32;
                    let share = match self.bug {
                        Some(AvgPoolBug::NotDivided) => g,
                        Some(AvgPoolBug::DividedTwice) => g / size / size,
                        _ => g / size,
                    };
                    if self.bug == Some(AvgPoolBug::TopLeftOnly) {
                        dx[m[0]] += g;
                    } else {
                        for &e in &m {
                            dx[e] += share;
                        }
                    }
                }
            }
        }
        Gradients::from(vec![tensor(x.shape().to_vec(), dx)])
    }
}

impl Forward for AvgPool2d {
    fn forward(&self, a: &Args<f32>) -> Vec<Tensor<f32>> {
        let x = a.input(0);
        let win = Windows::new(x.shape(), 2, 2);
        let mut y = Vec::with_capacity(win.planes * win.ho * win.wo);
        for plane in 0..win.planes {
            for i in 0..win.ho {
                for j in 0..win.wo {
                    let m = win.members(plane, i, j, win.s);
                    let s: f32 = m.iter().map(|&e| x.data()[e]).sum();
                    y.push(s / m.len() as f32);
                }
            }
        }
        vec![tensor(win.out_shape(x.shape()), y)]
    }
}

pub(crate) fn register(out: &mut Vec<Case>) {
    out.push(Case::new("max-pool", "f64", true, None, |s| {
        Subject::F64(Box::new(MaxPool2d::<f64>::new(None)), MaxPool2d::args(s))
    }));
    out.push(Case::new("max-pool", "f32", true, None, |s| {
        Subject::F32(Box::new(MaxPool2d::<f32>::new(None)), MaxPool2d::args(s))
    }));
    for &bug in MaxPoolBug::ALL {
        out.push(Case::new(
            "max-pool",
            "f64",
            true,
            Some(bug.info()),
            move |s| {
                let args = if bug == MaxPoolBug::TiesToEveryMax {
                    MaxPool2d::tied_args(s)
                } else {
                    MaxPool2d::args(s)
                };
                Subject::F64(Box::new(MaxPool2d::<f64>::new(Some(bug))), args)
            },
        ));
    }
    out.push(Case::new("avg-pool", "f32", false, None, |s| {
        Subject::F32(Box::new(AvgPool2d::new(None)), AvgPool2d::args(s))
    }));
    for &bug in AvgPoolBug::ALL {
        out.push(Case::new(
            "avg-pool",
            "f32",
            false,
            Some(bug.info()),
            move |s| Subject::F32(Box::new(AvgPool2d::new(Some(bug))), AvgPool2d::args(s)),
        ));
    }
}
