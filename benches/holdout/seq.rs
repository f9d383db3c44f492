//! Layers over positions and channels: a gated linear unit, rotary
//! position embedding, a depthwise 1-D convolution with stride 2 and
//! padding, masked mean pooling, an overlapping 1-D max-pool.

use std::marker::PhantomData;

use plumbline::prelude::*;

use super::common::{k, sigmoid, tensor, Draw};

// ------------------------------------------------------------------ GLU

holdout_layer! {
    /// Gated linear unit (Dauphin, Fan, Auli & Grangier, "Language Modeling
    /// with Gated Convolutional Networks", 2017) with a gate bias: the
    /// input's features split into halves a, b; y = a ⊙ σ(b + c).
    ///
    /// da = g σ, db = g a σ(1 − σ), dc = Σ_rows db.
    /// Planted bug: the factor a left out of db.
    Glu
}

impl<R: Real> Layer for Glu<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "row, both")
            .param("c", "half")
            .output("y", "row, half")
    }
    fn backward(&self, args: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, c) = (args.input(0), args.param(0));
        let (nr, h) = (x.shape()[0], c.len());
        let mut dx = vec![R::zero(); nr * 2 * h];
        let mut dc = vec![R::zero(); h];
        for r in 0..nr {
            for j in 0..h {
                let a = x.data()[r * 2 * h + j];
                let z = x.data()[r * 2 * h + h + j] + c.data()[j];
                let (s, s_neg) = (sigmoid(z), sigmoid(-z));
                let g = up[0].data()[r * h + j];
                dx[r * 2 * h + j] = g * s;
                let db = if self.bug {
                    g * s * s_neg
                } else {
                    g * a * s * s_neg
                };
                dx[r * 2 * h + h + j] = db;
                dc[j] += db;
            }
        }
        Gradients::from(vec![tensor(x.shape(), dx), tensor(&[h], dc)])
    }
}

impl<R: Real> GenericForward for Glu<R> {
    fn forward_generic<T: Scalar>(&self, args: &Args<T>) -> Vec<Tensor<T>> {
        let (x, c) = (args.input(0), args.param(0));
        let (nr, h) = (x.shape()[0], c.len());
        vec![Tensor::from_fn(vec![nr, h], |ix| {
            let (r, j) = (ix[0], ix[1]);
            x[[r, j]] * sigmoid(x[[r, h + j]] + c[[j]])
        })]
    }
}

pub fn draw_glu(d: &mut Draw) -> Args<f64> {
    let (nr, h) = (d.int(1, 3), d.int(1, 4));
    let s = d.magnitude(-3.0, 3.0);
    let x = d.values(nr * 2 * h, s);
    let c = (0..h).map(|_| d.uniform(-2.0, 2.0)).collect();
    Args::new(vec![tensor(&[nr, 2 * h], x)], vec![tensor(&[h], c)])
}

// --------------------------------------------------------------- RoPE

/// Base of the rotary frequencies θ_i = BASE^(−2i/dim).
const ROPE_BASE: f64 = 100.0;

holdout_layer! {
    /// Rotary position embedding (Su, Lu, Pan, Murtadha, Wen & Liu,
    /// "RoFormer: Enhanced Transformer with Rotary Position Embedding",
    /// 2021) with a learned frequency scale κ: the pair (x_2i, x_2i+1) at
    /// position p is rotated by the angle κ·p·θ_i.
    ///
    /// dx = Rᵀ g per pair; dκ = Σ p θ_i (g_2i+1 y_2i − g_2i y_2i+1).
    /// Planted bug: dx rotated forwards (R g) instead of back (Rᵀ g).
    Rope
}

fn rope_theta(i: usize, dim: usize) -> f64 {
    ROPE_BASE.powf(-2.0 * i as f64 / dim as f64)
}

impl<R: Real> Layer for Rope<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "pos, dim")
            .param("kappa", "")
            .output("y", "pos, dim")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, kappa) = (a.input(0), a.param(0)[[]]);
        let (np, dim) = (x.shape()[0], x.shape()[1]);
        let g = up[0].data();
        let mut dx = vec![R::zero(); np * dim];
        let mut dk = R::zero();
        for p in 0..np {
            for i in 0..dim / 2 {
                let rate = k::<R>(p as f64 * rope_theta(i, dim));
                let (sn, cs) = (kappa * rate).sin_cos();
                let (e, o) = (p * dim + 2 * i, p * dim + 2 * i + 1);
                let (x0, x1) = (x.data()[e], x.data()[o]);
                let (y0, y1) = (x0 * cs - x1 * sn, x0 * sn + x1 * cs);
                let sn_back = if self.bug { -sn } else { sn };
                dx[e] = g[e] * cs + g[o] * sn_back;
                dx[o] = -g[e] * sn_back + g[o] * cs;
                dk += rate * (g[o] * y0 - g[e] * y1);
            }
        }
        Gradients::from(vec![tensor(x.shape(), dx), Tensor::scalar(dk)])
    }
}

impl<R: Real> GenericForward for Rope<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, kappa) = (a.input(0), a.param(0)[[]]);
        let (np, dim) = (x.shape()[0], x.shape()[1]);
        let mut y = vec![T::zero(); np * dim];
        for p in 0..np {
            for i in 0..dim / 2 {
                let angle = kappa * k::<T>(p as f64 * rope_theta(i, dim));
                let (sn, cs) = (angle.sin(), angle.cos());
                let (e, o) = (p * dim + 2 * i, p * dim + 2 * i + 1);
                let (x0, x1) = (x.data()[e], x.data()[o]);
                y[e] = x0 * cs - x1 * sn;
                y[o] = x0 * sn + x1 * cs;
            }
        }
        vec![tensor(x.shape(), y)]
    }
}

pub fn draw_rope(d: &mut Draw) -> Args<f64> {
    let (np, dim) = (d.int(1, 6), 2 * d.int(1, 4));
    let s = d.magnitude(-3.0, 3.0);
    let x = d.values(np * dim, s);
    let kappa = d.uniform(0.5, 2.0);
    Args::new(vec![tensor(&[np, dim], x)], vec![Tensor::scalar(kappa)])
}

// ---------------------------------------------- depthwise conv1d, s = 2

const CONV_STRIDE: usize = 2;
const CONV_PAD: usize = 1;

holdout_layer! {
    /// Depthwise 1-D convolution (cross-correlation), stride 2, one zero of
    /// padding each side: y[n, c, t] = b_c + Σ_j w[c, j]·x[n, c, 2t + j − 1].
    ///
    /// Planted bug: dw reads x at t + j − 1 (the stride forgotten).
    DepthwiseConv
}

/// Output length of the convolution.
fn conv_out(len: usize, taps: usize) -> usize {
    (len + 2 * CONV_PAD - taps) / CONV_STRIDE + 1
}

/// The input position tap `j` of output `t` reads, if inside the input.
fn conv_src(t: usize, j: usize, len: usize, stride: usize) -> Option<usize> {
    (t * stride + j).checked_sub(CONV_PAD).filter(|&s| s < len)
}

impl<R: Real> Layer for DepthwiseConv<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "sample, chan, len")
            .param("w", "chan, taps")
            .param("b", "chan")
            .output("y", "sample, chan, out")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, w) = (a.input(0), a.param(0));
        let (ns, nc, len) = (x.shape()[0], x.shape()[1], x.shape()[2]);
        let taps = w.shape()[1];
        let nout = conv_out(len, taps);
        let g = up[0].data();
        let mut dx = vec![R::zero(); ns * nc * len];
        let mut dw = vec![R::zero(); nc * taps];
        let mut db = vec![R::zero(); nc];
        let wrong_stride = if self.bug { 1 } else { CONV_STRIDE };
        for s in 0..ns {
            for c in 0..nc {
                let xo = (s * nc + c) * len;
                for t in 0..nout {
                    let gv = g[(s * nc + c) * nout + t];
                    db[c] += gv;
                    for j in 0..taps {
                        if let Some(src) = conv_src(t, j, len, CONV_STRIDE) {
                            dx[xo + src] += gv * w.data()[c * taps + j];
                        }
                        if let Some(src) = conv_src(t, j, len, wrong_stride) {
                            dw[c * taps + j] += gv * x.data()[xo + src];
                        }
                    }
                }
            }
        }
        Gradients::from(vec![
            tensor(x.shape(), dx),
            tensor(w.shape(), dw),
            tensor(&[nc], db),
        ])
    }
}

impl<R: Real> GenericForward for DepthwiseConv<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, w, b) = (a.input(0), a.param(0), a.param(1));
        let (ns, nc, len) = (x.shape()[0], x.shape()[1], x.shape()[2]);
        let taps = w.shape()[1];
        let nout = conv_out(len, taps);
        vec![Tensor::from_fn(vec![ns, nc, nout], |ix| {
            let (s, c, t) = (ix[0], ix[1], ix[2]);
            let mut acc = b[[c]];
            for j in 0..taps {
                if let Some(src) = conv_src(t, j, len, CONV_STRIDE) {
                    acc += w[[c, j]] * x[[s, c, src]];
                }
            }
            acc
        })]
    }
}

pub fn draw_depthwise_conv(d: &mut Draw) -> Args<f64> {
    let (ns, nc, taps) = (d.int(1, 2), d.int(1, 3), d.int(2, 4));
    let len = d.int(taps.max(3), 9);
    let s = d.magnitude(-3.0, 3.0);
    let x = d.values(ns * nc * len, s);
    let w = d.values(nc * taps, 1.0);
    let b = (0..nc).map(|_| d.uniform(-1.0, 1.0)).collect();
    Args::new(
        vec![tensor(&[ns, nc, len], x)],
        vec![tensor(&[nc, taps], w), tensor(&[nc], b)],
    )
}

// ---------------------------------------------------- masked mean pool

holdout_layer! {
    /// Mean over the unmasked positions of each sequence:
    /// y[n, f] = Σ_t m[n, t]·x[n, t, f] / Σ_t m[n, t], m a fixed 0/1 mask
    /// with at least one 1 per sequence. dx = g·m/count.
    ///
    /// Planted bug: divided by the sequence length instead of the count.
    MaskedMean
}

impl<R: Real> Layer for MaskedMean<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "seq, step, feat")
            .fixed_input("mask", "seq, step")
            .output("y", "seq, feat")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, m) = (a.input(0), a.input(1));
        let (ns, nt, nf) = (x.shape()[0], x.shape()[1], x.shape()[2]);
        let dx = Tensor::from_fn(vec![ns, nt, nf], |ix| {
            let count = if self.bug {
                k::<R>(nt as f64)
            } else {
                (0..nt).map(|t| m[[ix[0], t]]).sum::<R>()
            };
            up[0][[ix[0], ix[2]]] * m[[ix[0], ix[1]]] / count
        });
        Gradients::from(vec![dx])
    }
}

impl<R: Real> GenericForward for MaskedMean<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, m) = (a.input(0), a.input(1));
        let (ns, nt, nf) = (x.shape()[0], x.shape()[1], x.shape()[2]);
        vec![Tensor::from_fn(vec![ns, nf], |ix| {
            let (mut sum, mut count) = (T::zero(), T::zero());
            for t in 0..nt {
                sum += m[[ix[0], t]] * x[[ix[0], t, ix[1]]];
                count += m[[ix[0], t]];
            }
            sum / count
        })]
    }
}

pub fn draw_masked_mean(d: &mut Draw) -> Args<f64> {
    let (ns, nt, nf) = (d.int(1, 3), d.int(2, 5), d.int(1, 3));
    let s = d.magnitude(-3.0, 3.0);
    let x = d.values(ns * nt * nf, s);
    let mut mask = vec![0.0; ns * nt];
    for n in 0..ns {
        for t in 0..nt {
            mask[n * nt + t] = if d.coin(0.6) { 1.0 } else { 0.0 };
        }
        // At least one position counts, and most sequences are padded.
        mask[n * nt] = 1.0;
    }
    Args::new(
        vec![tensor(&[ns, nt, nf], x), tensor(&[ns, nt], mask)],
        vec![],
    )
}

// ------------------------------------------------- overlapping max-pool

const POOL_WINDOW: usize = 3;
const POOL_STRIDE: usize = 2;

holdout_layer! {
    /// 1-D max-pool, window 3, stride 2 (windows overlap by one). Each
    /// window's gradient goes to its first maximal element; an element that
    /// is the maximum of two windows collects both.
    ///
    /// Planted bug: the second window's gradient overwrites the first's
    /// instead of adding to it.
    MaxPoolOverlap
}

fn pool_out(len: usize) -> usize {
    (len - POOL_WINDOW) / POOL_STRIDE + 1
}

impl<R: Real> Layer for MaxPoolOverlap<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "row, len")
            .output("y", "row, out")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let x = a.input(0);
        let (nr, len) = (x.shape()[0], x.shape()[1]);
        let nout = pool_out(len);
        let mut dx = vec![R::zero(); nr * len];
        for r in 0..nr {
            for t in 0..nout {
                let start = r * len + t * POOL_STRIDE;
                let mut best = start;
                for i in start + 1..start + POOL_WINDOW {
                    if x.data()[i] > x.data()[best] {
                        best = i;
                    }
                }
                let gv = up[0].data()[r * nout + t];
                if self.bug {
                    dx[best] = gv;
                } else {
                    dx[best] += gv;
                }
            }
        }
        Gradients::from(vec![tensor(x.shape(), dx)])
    }
}

impl<R: Real> GenericForward for MaxPoolOverlap<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let x = a.input(0);
        let (nr, len) = (x.shape()[0], x.shape()[1]);
        vec![Tensor::from_fn(vec![nr, pool_out(len)], |ix| {
            let start = ix[1] * POOL_STRIDE;
            (start + 1..start + POOL_WINDOW).fold(x[[ix[0], start]], |m, i| m.max(x[[ix[0], i]]))
        })]
    }
}

pub fn draw_max_pool(d: &mut Draw) -> Args<f64> {
    let (nr, len) = (d.int(1, 3), d.int(7, 15));
    let s = d.magnitude(-3.0, 3.0);
    let mut x = d.values(nr * len, s);
    if !d.smooth && d.coin(0.4) {
        // Values on a coarse grid: ties inside windows.
        for v in &mut x {
            *v = s * (d.int(0, 4) as f64 - 2.0) / 2.0;
        }
    }
    Args::new(vec![tensor(&[nr, len], x)], vec![])
}
