//! Elementwise activations: smooth ones with stable branches (Swish, Mish,
//! a thresholded softplus, log-cosh) and piecewise ones with kinks (ELU,
//! SELU, hard-swish, a clip whose bounds are parameters).

use std::marker::PhantomData;

use plumbline::prelude::*;

use super::common::{k, sigmoid, softplus, tensor, Draw};

/// Batch and feature sizes of an elementwise layer's input.
fn shape(d: &mut Draw) -> Vec<usize> {
    vec![d.int(1, 3), d.int(2, 6)]
}

/// `n` values of one scale drawn between 1e-3 and 1e3.
fn spread(d: &mut Draw, n: usize) -> Vec<f64> {
    let s = d.magnitude(-3.0, 3.0);
    d.values(n, s)
}

fn flat(sh: &[usize]) -> usize {
    sh.iter().product()
}

// ---------------------------------------------------------------- Swish

holdout_layer! {
    /// Swish with a learned slope, y = x·σ(βx) (Ramachandran, Zoph & Le,
    /// "Searching for Activation Functions", 2017; with β = 1 the SiLU of
    /// Elfwing, Uchibe & Doya, "Sigmoid-Weighted Linear Units for Neural
    /// Network Function Approximation in Reinforcement Learning", 2018).
    ///
    /// dy/dx = s + βx·s(1 − s), dy/dβ = x²·s(1 − s), s = σ(βx).
    /// Planted bug: the β in dy/dx's second term left out.
    Swish
}

impl<R: Real> Layer for Swish<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, feat")
            .param("beta", "")
            .output("y", "batch, feat")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, beta) = (a.input(0), a.param(0)[[]]);
        let g = up[0].data();
        let mut dx = Vec::with_capacity(x.len());
        let mut dbeta = R::zero();
        for (&xi, &gi) in x.data().iter().zip(g) {
            let z = beta * xi;
            let s = sigmoid(z);
            let s1 = s * sigmoid(-z); // s(1 − s) without cancelling
            let slope = if self.bug { xi } else { beta * xi };
            dx.push(gi * (s + slope * s1));
            dbeta += gi * xi * xi * s1;
        }
        Gradients::from(vec![tensor(x.shape(), dx), Tensor::scalar(dbeta)])
    }
}

impl<R: Real> GenericForward for Swish<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let beta = a.param(0)[[]];
        vec![a.input(0).map(|x| x * sigmoid(beta * x))]
    }
}

pub fn draw_swish(d: &mut Draw) -> Args<f64> {
    let sh = shape(d);
    let x = spread(d, flat(&sh));
    let beta = d.magnitude(-1.0, 1.0);
    Args::new(vec![tensor(&sh, x)], vec![Tensor::scalar(beta)])
}

// ----------------------------------------------------------------- Mish

holdout_layer! {
    /// Mish, y = x·tanh(softplus(x)) (Misra, "Mish: A Self Regularized
    /// Non-Monotonic Activation Function", 2019).
    ///
    /// dy/dx = t + x·(1 − t²)·σ(x), t = tanh(softplus(x)).
    /// Planted bug: the factor (1 − t²) left out.
    Mish
}

impl<R: Real> Layer for Mish<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, feat")
            .output("y", "batch, feat")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let x = a.input(0);
        let dx = x
            .data()
            .iter()
            .zip(up[0].data())
            .map(|(&xi, &gi)| {
                let t = softplus(xi).tanh();
                let dt = if self.bug { R::one() } else { R::one() - t * t };
                gi * (t + xi * dt * sigmoid(xi))
            })
            .collect();
        Gradients::from(vec![tensor(x.shape(), dx)])
    }
}

impl<R: Real> GenericForward for Mish<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        vec![a.input(0).map(|x| x * softplus(x).tanh())]
    }
}

pub fn draw_mish(d: &mut Draw) -> Args<f64> {
    let sh = shape(d);
    let x = spread(d, flat(&sh));
    Args::new(vec![tensor(&sh, x)], vec![])
}

// ------------------------------------------------------------------ ELU

holdout_layer! {
    /// ELU with a learned α (Clevert, Unterthiner & Hochreiter, "Fast and
    /// Accurate Deep Network Learning by Exponential Linear Units (ELUs)",
    /// 2016): y = x for x > 0, α(eˣ − 1) otherwise. At 0 the one-sided
    /// slopes are 1 and α: a kink unless α = 1.
    ///
    /// dy/dx = 1 or α·eˣ, dy/dα = eˣ − 1 on the negative side.
    /// Planted bug: dy/dα taken as eˣ (the −1 left out).
    Elu
}

impl<R: Real> Layer for Elu<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, feat")
            .param("alpha", "")
            .output("y", "batch, feat")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, alpha) = (a.input(0), a.param(0)[[]]);
        let mut dalpha = R::zero();
        let mut dx = Vec::with_capacity(x.len());
        for (&xi, &gi) in x.data().iter().zip(up[0].data()) {
            if xi > R::zero() {
                dx.push(gi);
            } else {
                dx.push(gi * alpha * xi.exp());
                dalpha += gi * if self.bug { xi.exp() } else { xi.exp_m1() };
            }
        }
        Gradients::from(vec![tensor(x.shape(), dx), Tensor::scalar(dalpha)])
    }
}

impl<R: Real> GenericForward for Elu<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let alpha = a.param(0)[[]];
        vec![a
            .input(0)
            .map(|x| if x > T::zero() { x } else { alpha * x.exp_m1() })]
    }
}

pub fn draw_elu(d: &mut Draw) -> Args<f64> {
    let sh = shape(d);
    let mut x = spread(d, flat(&sh));
    for v in &mut x {
        if d.plant(0.15) {
            *v = 0.0;
        }
    }
    // Half the draws have matching one-sided slopes at 0 (α = 1).
    let alpha = if d.coin(0.5) {
        1.0
    } else {
        d.uniform(0.2, 3.0)
    };
    Args::new(vec![tensor(&sh, x)], vec![Tensor::scalar(alpha)])
}

// ----------------------------------------------------------------- SELU

/// SELU's scale λ and α (Klambauer et al., 2017, eq. 14), rounded to f64.
const SELU_LAMBDA: f64 = 1.050_700_987_355_480_5;
const SELU_ALPHA: f64 = 1.673_263_242_354_377_3;

holdout_layer! {
    /// SELU (Klambauer, Unterthiner, Mayr & Hochreiter, "Self-Normalizing
    /// Neural Networks", 2017): y = λx for x > 0, λα(eˣ − 1) otherwise;
    /// one-sided slopes λ and λα at 0.
    ///
    /// Planted bug: λ left out of the negative side's derivative.
    Selu
}

impl<R: Real> Layer for Selu<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, feat")
            .output("y", "batch, feat")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let x = a.input(0);
        let (lam, alpha) = (k::<R>(SELU_LAMBDA), k::<R>(SELU_ALPHA));
        let dx = x
            .data()
            .iter()
            .zip(up[0].data())
            .map(|(&xi, &gi)| {
                if xi > R::zero() {
                    gi * lam
                } else if self.bug {
                    gi * alpha * xi.exp()
                } else {
                    gi * lam * alpha * xi.exp()
                }
            })
            .collect();
        Gradients::from(vec![tensor(x.shape(), dx)])
    }
}

impl<R: Real> GenericForward for Selu<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (lam, alpha) = (k::<T>(SELU_LAMBDA), k::<T>(SELU_ALPHA));
        vec![a.input(0).map(|x| {
            if x > T::zero() {
                lam * x
            } else {
                lam * alpha * x.exp_m1()
            }
        })]
    }
}

pub fn draw_selu(d: &mut Draw) -> Args<f64> {
    let sh = shape(d);
    let mut x = spread(d, flat(&sh));
    for v in &mut x {
        if d.plant(0.15) {
            *v = 0.0;
        }
    }
    Args::new(vec![tensor(&sh, x)], vec![])
}

// ----------------------------------------------------------- hard-swish

holdout_layer! {
    /// Hard-swish (Howard et al., "Searching for MobileNetV3", 2019):
    /// y = x·min(max(x + 3, 0), 6)/6. Pieces 0, x(x + 3)/6 and x; kinks at
    /// −3 (slopes 0 and −1/2) and 3 (slopes 3/2 and 1).
    ///
    /// Planted bug: the middle piece's slope written (x + 3)/6.
    HardSwish
}

impl<R: Real> Layer for HardSwish<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, feat")
            .output("y", "batch, feat")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let x = a.input(0);
        let (three, six) = (k::<R>(3.0), k::<R>(6.0));
        let dx = x
            .data()
            .iter()
            .zip(up[0].data())
            .map(|(&xi, &gi)| {
                let slope = if xi < -three {
                    R::zero()
                } else if xi > three {
                    R::one()
                } else if self.bug {
                    (xi + three) / six
                } else {
                    (xi + xi + three) / six
                };
                gi * slope
            })
            .collect();
        Gradients::from(vec![tensor(x.shape(), dx)])
    }
}

impl<R: Real> GenericForward for HardSwish<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (three, six) = (k::<T>(3.0), k::<T>(6.0));
        vec![a
            .input(0)
            .map(|x| x * (x + three).max(T::zero()).min(six) / six)]
    }
}

pub fn draw_hard_swish(d: &mut Draw) -> Args<f64> {
    let sh = shape(d);
    let n = flat(&sh);
    let s = d.magnitude(-3.0, 3.0);
    let x = (0..n)
        .map(|_| {
            if d.plant(0.2) {
                [-3.0, 3.0, 0.0][d.int(0, 2)]
            } else if d.coin(0.4) {
                d.uniform(-5.0, 5.0)
            } else {
                d.uniform(-s, s)
            }
        })
        .collect();
    Args::new(vec![tensor(&sh, x)], vec![])
}

// ------------------------------------------------- thresholded softplus

/// Above this βx the softplus returns x itself.
const SOFTPLUS_THRESHOLD: f64 = 20.0;

holdout_layer! {
    /// Softplus with a sharpness β and a large-argument branch:
    /// y = ln(1 + e^(βx))/β for βx ≤ 20, y = x above (where the two differ
    /// by about 2e-9/β: the forward jumps there, and so does its slope).
    ///
    /// dy/dx = σ(βx) (1 on the branch), dy/dβ = (x·σ(βx) − softplus(βx)/β)/β
    /// (0 on the branch). Planted bug: −softplus(βx)/β left out of dy/dβ.
    SoftplusThreshold
}

impl<R: Real> Layer for SoftplusThreshold<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, feat")
            .param("beta", "")
            .output("y", "batch, feat")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, beta) = (a.input(0), a.param(0)[[]]);
        let thr = k::<R>(SOFTPLUS_THRESHOLD);
        let mut dx = Vec::with_capacity(x.len());
        let mut dbeta = R::zero();
        for (&xi, &gi) in x.data().iter().zip(up[0].data()) {
            let z = beta * xi;
            if z > thr {
                dx.push(gi);
            } else {
                let s = sigmoid(z);
                dx.push(gi * s);
                let tail = if self.bug {
                    R::zero()
                } else {
                    softplus(z) / beta
                };
                dbeta += gi * (xi * s - tail) / beta;
            }
        }
        Gradients::from(vec![tensor(x.shape(), dx), Tensor::scalar(dbeta)])
    }
}

impl<R: Real> GenericForward for SoftplusThreshold<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let beta = a.param(0)[[]];
        let thr = k::<T>(SOFTPLUS_THRESHOLD);
        vec![a.input(0).map(|x| {
            let z = beta * x;
            if z > thr {
                x
            } else {
                z.exp().ln_1p() / beta
            }
        })]
    }
}

pub fn draw_softplus_threshold(d: &mut Draw) -> Args<f64> {
    let sh = shape(d);
    let n = flat(&sh);
    let beta = d.magnitude(-0.7, 0.7);
    let s = d.magnitude(-3.0, 3.0);
    let x = (0..n)
        .map(|_| {
            if d.plant(0.15) {
                SOFTPLUS_THRESHOLD / beta
            } else if d.coin(0.3) {
                d.uniform(-30.0, 30.0) / beta
            } else {
                d.uniform(-s, s)
            }
        })
        .collect();
    Args::new(vec![tensor(&sh, x)], vec![Tensor::scalar(beta)])
}

// ------------------------------------------------------------- log-cosh

holdout_layer! {
    /// Scaled log-cosh, y = c·lc(x/c) with lc(u) = ln cosh u written as
    /// u + softplus(−2u) − ln 2 (which cancels to ~u²/2 for small u: the
    /// forward loses digits there).
    ///
    /// dy/dx = tanh(u), dy/dc = lc(u) − u·tanh(u), u = x/c.
    /// Planted bug: −u·tanh(u) left out of dy/dc.
    LogCosh
}

fn log_cosh<T: Scalar>(u: T) -> T {
    u + softplus(u * k::<T>(-2.0)) - k::<T>(std::f64::consts::LN_2)
}

impl<R: Real> Layer for LogCosh<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, feat")
            .param("c", "feat")
            .output("y", "batch, feat")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, c) = (a.input(0), a.param(0));
        let (nb, nf) = (x.shape()[0], x.shape()[1]);
        let (xd, cd, g) = (x.data(), c.data(), up[0].data());
        let mut dx = vec![R::zero(); nb * nf];
        let mut dc = vec![R::zero(); nf];
        for b in 0..nb {
            for f in 0..nf {
                let i = b * nf + f;
                let u = xd[i] / cd[f];
                let t = u.tanh();
                dx[i] = g[i] * t;
                let rest = if self.bug { R::zero() } else { u * t };
                dc[f] += g[i] * (log_cosh(u) - rest);
            }
        }
        Gradients::from(vec![tensor(x.shape(), dx), tensor(c.shape(), dc)])
    }
}

impl<R: Real> GenericForward for LogCosh<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, c) = (a.input(0), a.param(0));
        vec![Tensor::from_fn(x.shape().to_vec(), |ix| {
            let cf = c[[ix[1]]];
            cf * log_cosh(x[ix] / cf)
        })]
    }
}

pub fn draw_log_cosh(d: &mut Draw) -> Args<f64> {
    let sh = shape(d);
    let x = spread(d, flat(&sh));
    let c = (0..sh[1]).map(|_| d.magnitude(-2.0, 1.0)).collect();
    Args::new(vec![tensor(&sh, x)], vec![tensor(&[sh[1]], c)])
}

// ----------------------------------------------------------------- clip

holdout_layer! {
    /// A clip whose bounds are parameters: y = min(max(x, lo), hi) per
    /// feature, lo < hi. dy/dx = 1 strictly inside, dy/dlo = 1 where
    /// x ≤ lo, dy/dhi = 1 where x ≥ hi (a tie goes to the bound).
    ///
    /// Planted bug: the hi gradient collects the elements below lo.
    Clip
}

impl<R: Real> Layer for Clip<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, feat")
            .param("lo", "feat")
            .param("hi", "feat")
            .output("y", "batch, feat")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, lo, hi) = (a.input(0), a.param(0), a.param(1));
        let (nb, nf) = (x.shape()[0], x.shape()[1]);
        let g = up[0].data();
        let mut dx = vec![R::zero(); nb * nf];
        let mut dlo = vec![R::zero(); nf];
        let mut dhi = vec![R::zero(); nf];
        for b in 0..nb {
            for f in 0..nf {
                let i = b * nf + f;
                let (v, l, h) = (x.data()[i], lo.data()[f], hi.data()[f]);
                if v <= l {
                    if self.bug {
                        dhi[f] += g[i];
                    } else {
                        dlo[f] += g[i];
                    }
                } else if v >= h {
                    dhi[f] += g[i];
                } else {
                    dx[i] = g[i];
                }
            }
        }
        Gradients::from(vec![
            tensor(x.shape(), dx),
            tensor(lo.shape(), dlo),
            tensor(hi.shape(), dhi),
        ])
    }
}

impl<R: Real> GenericForward for Clip<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, lo, hi) = (a.input(0), a.param(0), a.param(1));
        vec![Tensor::from_fn(x.shape().to_vec(), |ix| {
            x[ix].max(lo[[ix[1]]]).min(hi[[ix[1]]])
        })]
    }
}

pub fn draw_clip(d: &mut Draw) -> Args<f64> {
    let sh = shape(d);
    let s = d.magnitude(-3.0, 3.0);
    let lo: Vec<f64> = (0..sh[1]).map(|_| -s * d.uniform(0.1, 1.0)).collect();
    let hi: Vec<f64> = (0..sh[1]).map(|_| s * d.uniform(0.1, 1.0)).collect();
    let mut x = d.values(flat(&sh), 2.0 * s);
    for (i, v) in x.iter_mut().enumerate() {
        if d.plant(0.2) {
            let f = i % sh[1];
            *v = if d.coin(0.5) { lo[f] } else { hi[f] };
        }
    }
    Args::new(
        vec![tensor(&sh, x)],
        vec![tensor(&[sh[1]], lo), tensor(&[sh[1]], hi)],
    )
}
