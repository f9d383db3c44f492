//! Normalisations and norms: RMS norm, group norm, batch norm in training
//! mode, a weight-normalised dense layer, cosine similarity.

use std::marker::PhantomData;

use plumbline::prelude::*;

use super::common::{k, tensor, Draw};

/// Inputs of one scale between 1e-3 and 1e3, sometimes shifted by an
/// offset of up to that scale (normalisations subtract it again).
fn shifted(d: &mut Draw, n: usize) -> Vec<f64> {
    let s = d.magnitude(-3.0, 3.0);
    let off = if d.coin(0.3) { d.uniform(-s, s) } else { 0.0 };
    d.values(n, s).into_iter().map(|v| v + off).collect()
}

/// Per-feature gains around ±1.
fn gains(d: &mut Draw, n: usize) -> Vec<f64> {
    (0..n)
        .map(|_| {
            let m = d.uniform(0.2, 2.0);
            if d.coin(0.2) {
                -m
            } else {
                m
            }
        })
        .collect()
}

// ------------------------------------------------------------- RMS norm

const RMS_EPS: f64 = 1e-6;

holdout_layer! {
    /// RMS norm (Zhang & Sennrich, "Root Mean Square Layer Normalization",
    /// 2019): y = γ ⊙ x / r, r = √(mean(x²) + ε) per row.
    ///
    /// With u = g ⊙ γ: dx = (u − x·⟨u, x⟩/(d·r²))/r, dγ = Σ_rows g ⊙ x/r.
    /// Planted bug: the 1/d of the mean left out of dx's second term.
    RmsNorm
}

impl<R: Real> Layer for RmsNorm<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "row, feat")
            .param("gamma", "feat")
            .output("y", "row, feat")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, gamma) = (a.input(0), a.param(0));
        let (n, d) = (x.shape()[0], x.shape()[1]);
        let (xd, gd, g) = (x.data(), gamma.data(), up[0].data());
        let dn = k::<R>(d as f64);
        let mut dx = vec![R::zero(); n * d];
        let mut dgamma = vec![R::zero(); d];
        for r in 0..n {
            let row = &xd[r * d..(r + 1) * d];
            let ms = row.iter().map(|&v| v * v).sum::<R>() / dn;
            let rr = (ms + k::<R>(RMS_EPS)).sqrt();
            let dot: R = (0..d).map(|j| g[r * d + j] * gd[j] * row[j]).sum();
            let denom = if self.bug { rr * rr } else { dn * rr * rr };
            for j in 0..d {
                let u = g[r * d + j] * gd[j];
                dx[r * d + j] = (u - row[j] * dot / denom) / rr;
                dgamma[j] += g[r * d + j] * row[j] / rr;
            }
        }
        Gradients::from(vec![tensor(x.shape(), dx), tensor(gamma.shape(), dgamma)])
    }
}

impl<R: Real> GenericForward for RmsNorm<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, gamma) = (a.input(0), a.param(0));
        let (n, d) = (x.shape()[0], x.shape()[1]);
        let mut y = Vec::with_capacity(n * d);
        for r in 0..n {
            let row = &x.data()[r * d..(r + 1) * d];
            let ms = row.iter().map(|&v| v * v).sum::<T>() / k::<T>(d as f64);
            let rr = (ms + k::<T>(RMS_EPS)).sqrt();
            y.extend((0..d).map(|j| gamma.data()[j] * row[j] / rr));
        }
        vec![tensor(x.shape(), y)]
    }
}

pub fn draw_rms_norm(d: &mut Draw) -> Args<f64> {
    let (n, f) = (d.int(1, 3), d.int(2, 8));
    let x = shifted(d, n * f);
    Args::new(vec![tensor(&[n, f], x)], vec![tensor(&[f], gains(d, f))])
}

// ---------------------------------------------------- mean/var normalise

/// Normalises `v` (the members of one group): returns x̂ and 1/√(var + ε),
/// with the biased variance taken around the mean.
fn standardise<T: Scalar>(v: &[T], eps: f64) -> (Vec<T>, T) {
    let m = k::<T>(v.len() as f64);
    let mean = v.iter().copied().sum::<T>() / m;
    let var = v.iter().map(|&x| (x - mean) * (x - mean)).sum::<T>() / m;
    let inv = T::one() / (var + k::<T>(eps)).sqrt();
    (v.iter().map(|&x| (x - mean) * inv).collect(), inv)
}

/// Backward of x̂ = (x − mean)·inv over one group, given dx̂:
/// dx = inv·(dx̂ − mean(dx̂) − x̂·mean(dx̂ ⊙ x̂)). `drop_mean` plants the
/// bug of leaving the mean(dx̂) term out.
fn standardise_back<R: Real>(xhat: &[R], inv: R, dxhat: &[R], drop_mean: bool) -> Vec<R> {
    let m = k::<R>(xhat.len() as f64);
    let mean_d = if drop_mean {
        R::zero()
    } else {
        dxhat.iter().copied().sum::<R>() / m
    };
    let mean_dx = dxhat.iter().zip(xhat).map(|(&a, &b)| a * b).sum::<R>() / m;
    dxhat
        .iter()
        .zip(xhat)
        .map(|(&dh, &h)| inv * (dh - mean_d - h * mean_dx))
        .collect()
}

// ----------------------------------------------------------- group norm

const GROUPS: usize = 2;
const NORM_EPS: f64 = 1e-5;

holdout_layer! {
    /// Group norm with two groups (Wu & He, "Group Normalization", 2018):
    /// per sample and group of channels, x̂ = (x − μ)/√(σ² + ε) over the
    /// group's channels and positions, y = γ_c x̂ + β_c.
    ///
    /// Planted bug: the mean(dx̂) term left out of dx.
    GroupNorm
}

impl<R: Real> Layer for GroupNorm<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "sample, chan, pos")
            .param("gamma", "chan")
            .param("beta", "chan")
            .output("y", "sample, chan, pos")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, gamma) = (a.input(0), a.param(0));
        let (ns, nc, np) = (x.shape()[0], x.shape()[1], x.shape()[2]);
        let cg = nc / GROUPS;
        let g = up[0].data();
        let mut dx = vec![R::zero(); ns * nc * np];
        let mut dgamma = vec![R::zero(); nc];
        let mut dbeta = vec![R::zero(); nc];
        for s in 0..ns {
            for grp in 0..GROUPS {
                // A group's elements are contiguous: channels grp·cg.., all positions.
                let lo = (s * nc + grp * cg) * np;
                let hi = lo + cg * np;
                let (xhat, inv) = standardise(&x.data()[lo..hi], NORM_EPS);
                let dxhat: Vec<R> = (lo..hi)
                    .map(|i| g[i] * gamma.data()[(i / np) % nc])
                    .collect();
                for (i, h) in (lo..hi).zip(&xhat) {
                    let c = (i / np) % nc;
                    dgamma[c] += g[i] * *h;
                    dbeta[c] += g[i];
                }
                let back = standardise_back(&xhat, inv, &dxhat, self.bug);
                dx[lo..hi].copy_from_slice(&back);
            }
        }
        Gradients::from(vec![
            tensor(x.shape(), dx),
            tensor(&[nc], dgamma),
            tensor(&[nc], dbeta),
        ])
    }
}

impl<R: Real> GenericForward for GroupNorm<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, gamma, beta) = (a.input(0), a.param(0), a.param(1));
        let (ns, nc, np) = (x.shape()[0], x.shape()[1], x.shape()[2]);
        let cg = nc / GROUPS;
        let mut y = vec![T::zero(); ns * nc * np];
        for s in 0..ns {
            for grp in 0..GROUPS {
                let lo = (s * nc + grp * cg) * np;
                let hi = lo + cg * np;
                let (xhat, _) = standardise(&x.data()[lo..hi], NORM_EPS);
                for (i, h) in (lo..hi).zip(xhat) {
                    let c = (i / np) % nc;
                    y[i] = gamma.data()[c] * h + beta.data()[c];
                }
            }
        }
        vec![tensor(x.shape(), y)]
    }
}

pub fn draw_group_norm(d: &mut Draw) -> Args<f64> {
    let (ns, nc, np) = (d.int(1, 2), GROUPS * d.int(1, 3), d.int(1, 4));
    let x = shifted(d, ns * nc * np);
    let beta = (0..nc).map(|_| d.uniform(-1.0, 1.0)).collect();
    Args::new(
        vec![tensor(&[ns, nc, np], x)],
        vec![tensor(&[nc], gains(d, nc)), tensor(&[nc], beta)],
    )
}

// ------------------------------------------------- batch norm, training

holdout_layer! {
    /// Batch norm in training mode (Ioffe & Szegedy, "Batch Normalization:
    /// Accelerating Deep Network Training by Reducing Internal Covariate
    /// Shift", 2015): statistics of the current batch per feature (biased
    /// variance), y = γ x̂ + β.
    ///
    /// Planted bug: dβ averaged over the batch instead of summed.
    BatchNormTrain
}

impl<R: Real> Layer for BatchNormTrain<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, feat")
            .param("gamma", "feat")
            .param("beta", "feat")
            .output("y", "batch, feat")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, gamma) = (a.input(0), a.param(0));
        let (nb, nf) = (x.shape()[0], x.shape()[1]);
        let g = up[0].data();
        let mut dx = vec![R::zero(); nb * nf];
        let mut dgamma = vec![R::zero(); nf];
        let mut dbeta = vec![R::zero(); nf];
        for f in 0..nf {
            let col: Vec<R> = (0..nb).map(|b| x.data()[b * nf + f]).collect();
            let gc: Vec<R> = (0..nb).map(|b| g[b * nf + f]).collect();
            let (xhat, inv) = standardise(&col, NORM_EPS);
            dgamma[f] = gc.iter().zip(&xhat).map(|(&a, &b)| a * b).sum();
            dbeta[f] = gc.iter().copied().sum();
            if self.bug {
                dbeta[f] /= k::<R>(nb as f64);
            }
            let dxhat: Vec<R> = gc.iter().map(|&v| v * gamma.data()[f]).collect();
            for (b, v) in standardise_back(&xhat, inv, &dxhat, false)
                .into_iter()
                .enumerate()
            {
                dx[b * nf + f] = v;
            }
        }
        Gradients::from(vec![
            tensor(x.shape(), dx),
            tensor(&[nf], dgamma),
            tensor(&[nf], dbeta),
        ])
    }
}

impl<R: Real> GenericForward for BatchNormTrain<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, gamma, beta) = (a.input(0), a.param(0), a.param(1));
        let (nb, nf) = (x.shape()[0], x.shape()[1]);
        let mut y = vec![T::zero(); nb * nf];
        for f in 0..nf {
            let col: Vec<T> = (0..nb).map(|b| x.data()[b * nf + f]).collect();
            let (xhat, _) = standardise(&col, NORM_EPS);
            for (b, h) in xhat.into_iter().enumerate() {
                y[b * nf + f] = gamma.data()[f] * h + beta.data()[f];
            }
        }
        vec![tensor(x.shape(), y)]
    }
}

pub fn draw_batch_norm(d: &mut Draw) -> Args<f64> {
    let (nb, nf) = (d.int(2, 6), d.int(1, 4));
    let x = shifted(d, nb * nf);
    let beta = (0..nf).map(|_| d.uniform(-1.0, 1.0)).collect();
    Args::new(
        vec![tensor(&[nb, nf], x)],
        vec![tensor(&[nf], gains(d, nf)), tensor(&[nf], beta)],
    )
}

// ------------------------------------------- weight-normalised dense

holdout_layer! {
    /// Dense layer with weight normalisation (Salimans & Kingma, "Weight
    /// Normalization: A Simple Reparameterization to Accelerate Training of
    /// Deep Neural Networks", 2016): w_o = g_o·v_o/‖v_o‖, y = x·wᵀ + b.
    ///
    /// With G = Σ_batch gᵀx (the gradient of w) and v̂ = v/‖v‖:
    /// dg_o = ⟨G_o, v̂_o⟩, dv_o = (g_o/‖v_o‖)(G_o − dg_o·v̂_o).
    /// Planted bug: the projection −dg_o·v̂_o left out of dv.
    WeightNormDense
}

impl<R: Real> Layer for WeightNormDense<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, inp")
            .param("v", "out, inp")
            .param("g", "out")
            .param("b", "out")
            .output("y", "batch, out")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, v, gs) = (a.input(0), a.param(0), a.param(1));
        let (nb, ni, no) = (x.shape()[0], x.shape()[1], v.shape()[0]);
        let up = up[0].data();
        let mut dx = vec![R::zero(); nb * ni];
        let mut dv = vec![R::zero(); no * ni];
        let mut dg = vec![R::zero(); no];
        let mut db = vec![R::zero(); no];
        for o in 0..no {
            let vo = &v.data()[o * ni..(o + 1) * ni];
            let norm = vo.iter().map(|&t| t * t).sum::<R>().sqrt();
            let scale = gs.data()[o] / norm;
            // G_o = Σ_b up[b, o]·x[b, ·]
            let mut gw = vec![R::zero(); ni];
            for b in 0..nb {
                let u = up[b * no + o];
                db[o] += u;
                for i in 0..ni {
                    gw[i] += u * x.data()[b * ni + i];
                    dx[b * ni + i] += u * scale * vo[i];
                }
            }
            let proj = (0..ni).map(|i| gw[i] * vo[i]).sum::<R>() / norm;
            dg[o] = proj;
            for i in 0..ni {
                let keep = if self.bug {
                    R::zero()
                } else {
                    proj * vo[i] / norm
                };
                dv[o * ni + i] = scale * (gw[i] - keep);
            }
        }
        Gradients::from(vec![
            tensor(x.shape(), dx),
            tensor(v.shape(), dv),
            tensor(&[no], dg),
            tensor(&[no], db),
        ])
    }
}

impl<R: Real> GenericForward for WeightNormDense<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, v, gs, bias) = (a.input(0), a.param(0), a.param(1), a.param(2));
        let (nb, ni, no) = (x.shape()[0], x.shape()[1], v.shape()[0]);
        let mut y = vec![T::zero(); nb * no];
        for o in 0..no {
            let vo = &v.data()[o * ni..(o + 1) * ni];
            let norm = vo.iter().map(|&t| t * t).sum::<T>().sqrt();
            for b in 0..nb {
                let dot: T = (0..ni).map(|i| x.data()[b * ni + i] * vo[i]).sum();
                y[b * no + o] = gs.data()[o] * dot / norm + bias.data()[o];
            }
        }
        vec![tensor(&[nb, no], y)]
    }
}

pub fn draw_weight_norm(d: &mut Draw) -> Args<f64> {
    let (nb, ni, no) = (d.int(1, 3), d.int(2, 5), d.int(1, 3));
    let sx = d.magnitude(-3.0, 3.0);
    let x = d.values(nb * ni, sx);
    let sv = d.magnitude(-3.0, 3.0);
    let v = d.values(no * ni, sv);
    let g = (0..no).map(|_| d.uniform(-2.0, 2.0)).collect();
    let b = (0..no).map(|_| d.uniform(-1.0, 1.0)).collect();
    Args::new(
        vec![tensor(&[nb, ni], x)],
        vec![tensor(&[no, ni], v), tensor(&[no], g), tensor(&[no], b)],
    )
}

// ---------------------------------------------------- cosine similarity

holdout_layer! {
    /// Cosine similarity of paired rows: y = ⟨a, b⟩/(‖a‖·‖b‖).
    ///
    /// da = b/(‖a‖‖b‖) − y·a/‖a‖², and db alike.
    /// Planted bug: da's second term divided by ‖a‖ instead of ‖a‖².
    Cosine
}

impl<R: Real> Layer for Cosine<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("a", "pair, feat")
            .input("b", "pair, feat")
            .output("y", "pair")
    }
    fn backward(&self, args: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (a, b) = (args.input(0), args.input(1));
        let (np, nf) = (a.shape()[0], a.shape()[1]);
        let mut da = vec![R::zero(); np * nf];
        let mut db = vec![R::zero(); np * nf];
        for p in 0..np {
            let ar = &a.data()[p * nf..(p + 1) * nf];
            let br = &b.data()[p * nf..(p + 1) * nf];
            let na = ar.iter().map(|&t| t * t).sum::<R>().sqrt();
            let nb = br.iter().map(|&t| t * t).sum::<R>().sqrt();
            let dot: R = ar.iter().zip(br).map(|(&s, &t)| s * t).sum();
            let y = dot / (na * nb);
            let g = up[0].data()[p];
            let na2 = if self.bug { na } else { na * na };
            for j in 0..nf {
                da[p * nf + j] = g * (br[j] / (na * nb) - y * ar[j] / na2);
                db[p * nf + j] = g * (ar[j] / (na * nb) - y * br[j] / (nb * nb));
            }
        }
        Gradients::from(vec![tensor(a.shape(), da), tensor(b.shape(), db)])
    }
}

impl<R: Real> GenericForward for Cosine<R> {
    fn forward_generic<T: Scalar>(&self, args: &Args<T>) -> Vec<Tensor<T>> {
        let (a, b) = (args.input(0), args.input(1));
        let (np, nf) = (a.shape()[0], a.shape()[1]);
        let y = (0..np)
            .map(|p| {
                let ar = &a.data()[p * nf..(p + 1) * nf];
                let br = &b.data()[p * nf..(p + 1) * nf];
                let na = ar.iter().map(|&t| t * t).sum::<T>().sqrt();
                let nb = br.iter().map(|&t| t * t).sum::<T>().sqrt();
                ar.iter().zip(br).map(|(&s, &t)| s * t).sum::<T>() / (na * nb)
            })
            .collect();
        vec![tensor(&[np], y)]
    }
}

pub fn draw_cosine(d: &mut Draw) -> Args<f64> {
    let (np, nf) = (d.int(1, 3), d.int(2, 6));
    let sa = d.magnitude(-3.0, 3.0);
    let a = d.values(np * nf, sa);
    let sb = d.magnitude(-3.0, 3.0);
    let b = d.values(np * nf, sb);
    Args::new(vec![tensor(&[np, nf], a), tensor(&[np, nf], b)], vec![])
}
