//! Losses: log-softmax with negative log-likelihood and label smoothing,
//! Huber, binary focal loss.

use std::marker::PhantomData;

use plumbline::prelude::*;

use super::common::{k, sigmoid, softplus, tensor, Draw};

/// A class or 0/1 label stored in a fixed input, as an index.
fn label<T: Scalar>(v: T) -> usize {
    v.to_usize()
        .expect("labels are small non-negative integers")
}

// ------------------------------------------ log-softmax NLL, smoothing

holdout_layer! {
    /// Mean over the batch of the cross-entropy of log-softmax(z) against
    /// the smoothed target q = (1 − ε)·onehot(label) + ε/K (label smoothing
    /// of Szegedy, Vanhoucke, Ioffe, Shlens & Wojna, "Rethinking the
    /// Inception Architecture for Computer Vision", 2016), ε a parameter.
    ///
    /// dz = (softmax(z) − q)/B; dε = mean_b(log p_label − mean_k log p_k).
    /// Planted bug: the 1/B of the mean left out of dz.
    SmoothedNll
}

/// log-softmax of one row, shifted by its maximum.
fn log_softmax<T: Scalar>(z: &[T]) -> Vec<T> {
    let m = z.iter().copied().fold(z[0], T::max);
    let lse = m + z.iter().map(|&v| (v - m).exp()).sum::<T>().ln();
    z.iter().map(|&v| v - lse).collect()
}

impl<R: Real> Layer for SmoothedNll<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("z", "batch, class")
            .fixed_input("label", "batch")
            .param("eps", "")
            .output("loss", "")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (z, lab, eps) = (a.input(0), a.input(1), a.param(0)[[]]);
        let (nb, nk) = (z.shape()[0], z.shape()[1]);
        let g = up[0].data()[0];
        let kk = k::<R>(nk as f64);
        let inv_b = if self.bug {
            R::one()
        } else {
            R::one() / k::<R>(nb as f64)
        };
        let mut dz = vec![R::zero(); nb * nk];
        let mut deps = R::zero();
        for b in 0..nb {
            let lp = log_softmax(&z.data()[b * nk..(b + 1) * nk]);
            let y = label(lab.data()[b]);
            for (j, &l) in lp.iter().enumerate() {
                let onehot = if j == y { R::one() } else { R::zero() };
                let q = (R::one() - eps) * onehot + eps / kk;
                dz[b * nk + j] = g * (l.exp() - q) * inv_b;
            }
            let mean_lp = lp.iter().copied().sum::<R>() / kk;
            deps += g * (lp[y] - mean_lp) / k::<R>(nb as f64);
        }
        Gradients::from(vec![tensor(z.shape(), dz), Tensor::scalar(deps)])
    }
}

impl<R: Real> GenericForward for SmoothedNll<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (z, lab, eps) = (a.input(0), a.input(1), a.param(0)[[]]);
        let (nb, nk) = (z.shape()[0], z.shape()[1]);
        let kk = k::<T>(nk as f64);
        let mut total = T::zero();
        for b in 0..nb {
            let lp = log_softmax(&z.data()[b * nk..(b + 1) * nk]);
            let y = label(lab.data()[b]);
            let mean_lp = lp.iter().copied().sum::<T>() / kk;
            total -= (T::one() - eps) * lp[y] + eps * mean_lp;
        }
        vec![Tensor::scalar(total / k::<T>(nb as f64))]
    }
}

pub fn draw_smoothed_nll(d: &mut Draw) -> Args<f64> {
    let (nb, nk) = (d.int(2, 4), d.int(2, 6));
    let s = d.magnitude(-3.0, 3.0);
    let mut z = d.values(nb * nk, s);
    if d.plant(0.3) {
        // Tied maxima in the first row.
        let m = z[..nk].iter().copied().fold(f64::MIN, f64::max);
        z[0] = m;
        z[nk - 1] = m;
    }
    let lab = (0..nb).map(|_| d.int(0, nk - 1) as f64).collect();
    let eps = if d.coin(0.2) {
        0.0
    } else {
        d.uniform(0.0, 0.3)
    };
    Args::new(
        vec![tensor(&[nb, nk], z), tensor(&[nb], lab)],
        vec![Tensor::scalar(eps)],
    )
}

// ---------------------------------------------------------------- Huber

holdout_layer! {
    /// Mean Huber loss of residuals r = pred − target (Huber, "Robust
    /// Estimation of a Location Parameter", 1964): h = r²/2 for |r| ≤ δ,
    /// δ(|r| − δ/2) beyond. Its first derivative clamp(r, −δ, δ) is
    /// continuous; only the second jumps at |r| = δ.
    ///
    /// dpred = clamp(r, −δ, δ)/n = −dtarget; dδ = (|r| − δ)/n beyond δ.
    /// Planted bug: dtarget not negated.
    Huber
}

impl<R: Real> Layer for Huber<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("pred", "n")
            .input("target", "n")
            .param("delta", "")
            .output("loss", "")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (p, t, delta) = (a.input(0), a.input(1), a.param(0)[[]]);
        let n = p.len();
        let scale = up[0].data()[0] / k::<R>(n as f64);
        let mut dp = Vec::with_capacity(n);
        let mut dd = R::zero();
        for (&pi, &ti) in p.data().iter().zip(t.data()) {
            let r = pi - ti;
            dp.push(scale * r.max(-delta).min(delta));
            if r.abs() > delta {
                dd += scale * (r.abs() - delta);
            }
        }
        let dt = dp.iter().map(|&v| if self.bug { v } else { -v }).collect();
        Gradients::from(vec![tensor(&[n], dp), tensor(&[n], dt), Tensor::scalar(dd)])
    }
}

impl<R: Real> GenericForward for Huber<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (p, t, delta) = (a.input(0), a.input(1), a.param(0)[[]]);
        let half = k::<T>(0.5);
        let total: T = p
            .data()
            .iter()
            .zip(t.data())
            .map(|(&pi, &ti)| {
                let r = pi - ti;
                if r.abs() <= delta {
                    half * r * r
                } else {
                    delta * (r.abs() - half * delta)
                }
            })
            .sum();
        vec![Tensor::scalar(total / k::<T>(p.len() as f64))]
    }
}

pub fn draw_huber(d: &mut Draw) -> Args<f64> {
    let n = d.int(2, 8);
    // δ a power of two from 2^-10 to 2^10, so that planted residuals of
    // exactly ±δ stay exact in f32 as well.
    let delta = 2f64.powi(d.int(0, 20) as i32 - 10);
    let mut p = Vec::with_capacity(n);
    let mut t = Vec::with_capacity(n);
    for _ in 0..n {
        if d.plant(0.25) {
            let ti = delta * (d.int(0, 16) as f64 - 8.0) / 4.0;
            let side = if d.coin(0.5) { delta } else { -delta };
            t.push(ti);
            p.push(ti + side);
        } else {
            let ti = d.uniform(-3.0, 3.0) * delta;
            t.push(ti);
            p.push(ti + d.uniform(-3.0, 3.0) * delta);
        }
    }
    Args::new(
        vec![tensor(&[n], p), tensor(&[n], t)],
        vec![Tensor::scalar(delta)],
    )
}

// ---------------------------------------------------------- focal loss

holdout_layer! {
    /// Mean binary focal loss (Lin, Goyal, Girshick, He & Dollár, "Focal
    /// Loss for Dense Object Detection", 2017) of logits z against 0/1
    /// labels, with α and γ parameters. With u = ±z (+ for label 1) the
    /// loss per element is α_t·σ(−u)^γ·softplus(−u), σ(−u)^γ written
    /// exp(−γ·softplus(u)) so it cannot overflow or take 0^γ.
    ///
    /// dL/du = −α_t σ(−u)^γ (γ σ(u) softplus(−u) + σ(−u)),
    /// dL/dγ = −α_t σ(−u)^γ softplus(u) softplus(−u), dL/dα = ±σ(−u)^γ softplus(−u).
    /// Planted bug: the modulating factor treated as a constant in dL/du
    /// (the γ σ(u) softplus(−u) term left out).
    Focal
}

impl<R: Real> Layer for Focal<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("z", "n")
            .fixed_input("label", "n")
            .param("alpha", "")
            .param("gamma", "")
            .output("loss", "")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (z, lab) = (a.input(0), a.input(1));
        let (alpha, gamma) = (a.param(0)[[]], a.param(1)[[]]);
        let n = z.len();
        let scale = up[0].data()[0] / k::<R>(n as f64);
        let mut dz = Vec::with_capacity(n);
        let (mut dalpha, mut dgamma) = (R::zero(), R::zero());
        for (&zi, &li) in z.data().iter().zip(lab.data()) {
            let positive = label(li) == 1;
            let (sign, at) = if positive {
                (R::one(), alpha)
            } else {
                (-R::one(), R::one() - alpha)
            };
            let u = sign * zi;
            let modul = (-gamma * softplus(u)).exp();
            let sp_neg = softplus(-u);
            let inner = if self.bug {
                sigmoid(-u)
            } else {
                gamma * sigmoid(u) * sp_neg + sigmoid(-u)
            };
            dz.push(scale * sign * (-at * modul * inner));
            dgamma += scale * (-at * modul * softplus(u) * sp_neg);
            dalpha += scale * sign * modul * sp_neg;
        }
        Gradients::from(vec![
            tensor(&[n], dz),
            Tensor::scalar(dalpha),
            Tensor::scalar(dgamma),
        ])
    }
}

impl<R: Real> GenericForward for Focal<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (z, lab) = (a.input(0), a.input(1));
        let (alpha, gamma) = (a.param(0)[[]], a.param(1)[[]]);
        let total: T = z
            .data()
            .iter()
            .zip(lab.data())
            .map(|(&zi, &li)| {
                let (u, at) = if label(li) == 1 {
                    (zi, alpha)
                } else {
                    (-zi, T::one() - alpha)
                };
                at * (-gamma * softplus(u)).exp() * softplus(-u)
            })
            .sum();
        vec![Tensor::scalar(total / k::<T>(z.len() as f64))]
    }
}

pub fn draw_focal(d: &mut Draw) -> Args<f64> {
    let n = d.int(2, 8);
    let s = d.magnitude(-3.0, 3.0);
    let z = d.values(n, s);
    let lab = (0..n).map(|_| d.int(0, 1) as f64).collect();
    let alpha = d.uniform(0.1, 0.9);
    let gamma = d.uniform(0.5, 4.0);
    Args::new(
        vec![tensor(&[n], z), tensor(&[n], lab)],
        vec![Tensor::scalar(alpha), Tensor::scalar(gamma)],
    )
}
