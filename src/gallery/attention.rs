//! Multi-head scaled dot-product self-attention.

use std::marker::PhantomData;

use super::{affine, c, planted_bugs, register_generic, tensor, Case, Draw, Kind, Subject};
use crate::layer::{Args, GenericForward, Gradients, Layer};
use crate::scalar::{Real, Scalar};
use crate::signature::Signature;
use crate::tensor::Tensor;

planted_bugs! {
    /// Mistakes planted in [`Attention`]'s backward.
    AttentionBug {
        /// The 1/√d_head scale of the scores is left out of the backward.
        ScaleMissing = "scale-missing" => ("wq", Kind::Scaled(std::f64::consts::SQRT_2)),
        /// The scores' gradient is divided by d_head instead of √d_head.
        ScaleTwice = "scale-twice" => ("wq", Kind::Scaled(std::f64::consts::FRAC_1_SQRT_2)),
        /// The softmax Jacobian is reduced to its diagonal, P(1 − P).
        SoftmaxDiagonalOnly = "softmax-diagonal-only" => ("wq", Kind::WrongFormula),
        /// The value gradient uses the attention weights untransposed (P·dO instead of Pᵀ·dO).
        WeightsNotTransposed = "weights-not-transposed" => ("wv", Kind::WrongFormula),
        /// The query gradient of one head is computed with the keys of the other head.
        HeadsMixed = "heads-mixed" => ("wq", Kind::WrongFormula),
        /// The key gradient is negated.
        KeySignFlipped = "key-sign-flipped" => ("wk", Kind::SignFlipped),
        /// The query gradient's loop over heads stops one short, so the last head's rows get nothing.
        LastHeadSkipped = "last-head-skipped" => ("wq", Kind::Partial),
    }
}

/// Multi-head scaled dot-product self-attention without output projection:
/// `Q = x·wqᵀ`, `K = x·wkᵀ`, `V = x·wvᵀ`; for each head `h` (a slice of
/// `d_head` columns), `P = softmax(Q_h·K_hᵀ/√d_head)` row-wise and
/// `out_h = P·V_h`.
///
/// Backward: `dV_h = Pᵀ·dO_h`, `dP = dO_h·V_hᵀ`,
/// `dS = P ⊙ (dP − rowsum(P ⊙ dP))`, `dQ_h = dS·K_h/√d_head`,
/// `dK_h = dSᵀ·Q_h/√d_head`; then `dw = dᵀ·x` and `dx = Σ d·w` over the three
/// projections.
///
/// ```
/// use plumbline::gallery::Attention;
/// use plumbline::Audit;
/// let report = Audit::new().run(&Attention::<f64>::new(None), &Attention::args(4))?;
/// report.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct Attention<R> {
    /// Number of heads (the model width must be a multiple).
    pub heads: usize,
    /// The planted bug, or `None` for the correct layer.
    pub bug: Option<AttentionBug>,
    _r: PhantomData<R>,
}

impl<R: Real> Attention<R> {
    /// Two heads.
    pub fn new(bug: Option<AttentionBug>) -> Self {
        Attention {
            heads: 2,
            bug,
            _r: PhantomData,
        }
    }

    /// Random arguments: 3 tokens, width 4 (two heads of 2), values in [-1, 1].
    pub fn args(seed: u64) -> Args<R> {
        let mut d = Draw::new(seed);
        Args::new(
            vec![d.uniform(&[3, 4], 1.0)],
            vec![
                d.uniform(&[4, 4], 1.0),
                d.uniform(&[4, 4], 1.0),
                d.uniform(&[4, 4], 1.0),
            ],
        )
    }

    fn head_width(&self, d: usize) -> usize {
        (d / self.heads.max(1)).max(1)
    }
}

/// Attention weights P[a, b] of one head: softmax over b of
/// Σ_e Q[a, e]·K[b, e]/√dh for the head's columns.
fn weights<T: Scalar>(q: &[T], k: &[T], t: usize, d: usize, cols: (usize, usize)) -> Vec<T> {
    let scale = c::<T>(((cols.1 - cols.0) as f64).sqrt());
    let mut p = vec![T::zero(); t * t];
    for a in 0..t {
        let s: Vec<T> = (0..t)
            .map(|b| {
                (cols.0..cols.1)
                    .map(|e| q[a * d + e] * k[b * d + e])
                    .sum::<T>()
                    / scale
            })
            .collect();
        let m = s.iter().copied().fold(s[0], T::max);
        let ex: Vec<T> = s.iter().map(|&v| (v - m).exp()).collect();
        let total = ex.iter().copied().sum::<T>();
        for b in 0..t {
            p[a * t + b] = ex[b] / total;
        }
    }
    p
}

impl<R: Real> Layer for Attention<R> {
    type Real = R;

    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "token, model")
            .param("wq", "model, model")
            .param("wk", "model, model")
            .param("wv", "model, model")
            .output("out", "token, model")
    }

    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let x = a.input(0);
        let (t, d) = (x.shape()[0], x.shape()[1]);
        let xd = x.data();
        let w: Vec<&[R]> = (0..3).map(|i| a.param(i).data()).collect();
        let (q, k, v) = (
            affine(xd, w[0], None, t, d, d),
            affine(xd, w[1], None, t, d, d),
            affine(xd, w[2], None, t, d, d),
        );
        let g = up[0].data();
        let dh = self.head_width(d);
        let heads = d / dh;
        let bug = self.bug;
        let score_scale = match bug {
            Some(AttentionBug::ScaleMissing) => R::one(),
            Some(AttentionBug::ScaleTwice) => R::from_f64(dh as f64),
            _ => R::from_f64((dh as f64).sqrt()),
        };
        let (mut dq, mut dk, mut dv) = (
            vec![R::zero(); t * d],
            vec![R::zero(); t * d],
            vec![R::zero(); t * d],
        );
        for h in 0..heads {
            let cols = (h * dh, (h + 1) * dh);
            let p = weights(&q, &k, t, d, cols);
            // dV_h = Pᵀ·dO_h.
            for b in 0..t {
                for e in cols.0..cols.1 {
                    dv[b * d + e] = (0..t)
                        .map(|r| {
                            let pw = if bug == Some(AttentionBug::WeightsNotTransposed) {
                                p[b * t + r]
                            } else {
                                p[r * t + b]
                            };
                            pw * g[r * d + e]
                        })
                        .sum();
                }
            }
            // dP = dO_h·V_hᵀ, then through the row-wise softmax.
            let mut ds = vec![R::zero(); t * t];
            for r in 0..t {
                let dp: Vec<R> = (0..t)
                    .map(|b| (cols.0..cols.1).map(|e| g[r * d + e] * v[b * d + e]).sum())
                    .collect();
                let dot: R = (0..t).map(|b| p[r * t + b] * dp[b]).sum();
                for b in 0..t {
                    let pb = p[r * t + b];
                    ds[r * t + b] = if bug == Some(AttentionBug::SoftmaxDiagonalOnly) {
                        pb * (R::one() - pb) * dp[b]
                    } else {
                        pb * (dp[b] - dot)
                    };
                }
            }
            // dQ_h = dS·K_h/√dh (keys of another head if mixed), dK_h = dSᵀ·Q_h/√dh.
            let key_shift = if bug == Some(AttentionBug::HeadsMixed) {
                ((h + 1) % heads) * dh
            } else {
                h * dh
            };
            for r in 0..t {
                for e in 0..dh {
                    let qe = cols.0 + e;
                    if bug != Some(AttentionBug::LastHeadSkipped) || h + 1 < heads {
                        dq[r * d + qe] = (0..t)
                            .map(|b| ds[r * t + b] * k[b * d + key_shift + e])
                            .sum::<R>()
                            / score_scale;
                    }
                    dk[r * d + qe] =
                        (0..t).map(|b| ds[b * t + r] * q[b * d + qe]).sum::<R>() / score_scale;
                }
            }
        }
        if bug == Some(AttentionBug::KeySignFlipped) {
            dk.iter_mut().for_each(|v| *v = -*v);
        }
        // Through the projections: dw[e, i] = Σ_r d[r, e]·x[r, i]; dx = Σ d·w.
        let mut dx = vec![R::zero(); t * d];
        let mut dws = Vec::with_capacity(3);
        for (dproj, wp) in [&dq, &dk, &dv].into_iter().zip(&w) {
            let mut dw = vec![R::zero(); d * d];
            for r in 0..t {
                for e in 0..d {
                    let de = dproj[r * d + e];
                    for i in 0..d {
                        dw[e * d + i] += de * xd[r * d + i];
                        dx[r * d + i] += de * wp[e * d + i];
                    }
                }
            }
            dws.push(tensor(vec![d, d], dw));
        }
        let mut grads = vec![tensor(vec![t, d], dx)];
        grads.extend(dws);
        Gradients::from(grads)
    }
}

impl<R: Real> GenericForward for Attention<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let x = a.input(0);
        let (t, d) = (x.shape()[0], x.shape()[1]);
        let proj = |i: usize| affine(x.data(), a.param(i).data(), None, t, d, d);
        let (q, k, v) = (proj(0), proj(1), proj(2));
        let dh = self.head_width(d);
        let mut out = vec![T::zero(); t * d];
        for h in 0..d / dh {
            let cols = (h * dh, (h + 1) * dh);
            let p = weights(&q, &k, t, d, cols);
            for r in 0..t {
                for e in cols.0..cols.1 {
                    out[r * d + e] = (0..t).map(|b| p[r * t + b] * v[b * d + e]).sum();
                }
            }
        }
        vec![tensor(vec![t, d], out)]
    }
}

pub(crate) fn register(out: &mut Vec<Case>) {
    register_generic!(out, "attention", Attention(), AttentionBug);
}
