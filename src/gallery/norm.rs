//! Normalisation layers: layer norm, batch norm (training mode) and RMS
//! norm. All three share one forward helper and one backward formula.

use std::cell::RefCell;
use std::marker::PhantomData;

use super::{c, planted_bugs, register_generic, tensor, Case, Draw, Kind, Subject};
use crate::layer::{Args, GenericForward, Gradients, Layer};
use crate::scalar::{Real, Scalar};
use crate::signature::Signature;
use crate::tensor::Tensor;

/// The ε added to the variance (a common default).
pub const NORM_EPS: f64 = 1e-5;

planted_bugs! {
    /// Mistakes planted in [`LayerNorm`]'s backward (and one in its forward).
    LayerNormBug {
        /// The input gradient drops the −mean(g·γ) term (the mean's own dependence on x).
        MissingMeanTerm = "missing-mean-term" => ("x", Kind::WrongFormula),
        /// The input gradient drops the −ŷ·mean(g·γ·ŷ) term (the variance's dependence on x).
        MissingVarianceTerm = "missing-variance-term" => ("x", Kind::WrongFormula),
        /// The backward recomputes σ without ε.
        EpsilonLeftOut = "epsilon-left-out" => ("x", Kind::WrongFormula),
        /// The backward recomputes the variance with 1/(d−1) while the forward uses 1/d.
        UnbiasedVariance = "unbiased-variance" => ("x", Kind::WrongFormula),
        /// The scale gradient multiplies g by the raw input instead of the normalised one.
        GammaFromInput = "gamma-from-input" => ("gamma", Kind::WrongFormula),
        /// The shift gradient is negated.
        BetaSignFlipped = "beta-sign-flipped" => ("beta", Kind::SignFlipped),
        /// The scale gradient is averaged over the batch instead of summed.
        GammaMeanOverBatch = "gamma-mean-over-batch" => ("gamma", Kind::Scaled(1.0 / 3.0)),
        /// The forward caches mean and σ from its first call and reuses them on later calls.
        StaleStatistics = "stale-statistics" => ("x", Kind::WrongFormula),
        /// The shift gradient is multiplied by γ, as if β sat inside the scale: dβ = Σ g·γ.
        BetaTimesGamma = "beta-times-gamma" => ("beta", Kind::ScaledByTensor("gamma")),
        /// The input gradient leaves out the final division by σ of each row.
        SigmaLeftOut = "sigma-left-out" => ("x", Kind::ScaledPerSlice(0)),
    }
}

planted_bugs! {
    /// Mistakes planted in [`BatchNorm`]'s backward.
    BatchNormBug {
        /// The input gradient drops the −mean over the batch of g·γ.
        MissingMeanTerm = "missing-mean-term" => ("x", Kind::WrongFormula),
        /// The batch statistics are treated as constants: dx = g·γ/σ.
        StatisticsAsConstants = "statistics-as-constants" => ("x", Kind::WrongFormula),
        /// The backward takes its means over the features instead of over the batch.
        WrongAxis = "wrong-axis" => ("x", Kind::WrongFormula),
        /// The shift gradient takes the first sample only instead of summing over the batch.
        BetaFirstSampleOnly = "beta-first-sample-only" => ("beta", Kind::WrongFormula),
        /// The backward recomputes σ without ε.
        EpsilonLeftOut = "epsilon-left-out" => ("x", Kind::WrongFormula),
        /// The input gradient multiplies by γ a second time (gy = g·γ, then dx scaled by γ again).
        GammaAppliedTwice = "gamma-applied-twice" => ("x", Kind::ScaledByTensor("gamma")),
    }
}

planted_bugs! {
    /// Mistakes planted in [`RmsNorm`]'s backward.
    RmsNormBug {
        /// The input gradient drops the −x̂·mean(g·γ·x̂) term (the RMS's dependence on x).
        MissingProjection = "missing-projection" => ("x", Kind::WrongFormula),
        /// The factor 1/2 of the square root's derivative is forgotten: the projection term doubles.
        ForgotHalf = "forgot-half" => ("x", Kind::WrongFormula),
        /// The scale gradient multiplies g by the output (which already contains γ).
        GammaFromOutput = "gamma-from-output" => ("gamma", Kind::ScaledByTensor("gamma")),
        /// The projection term uses a sum over the features instead of a mean.
        SumInsteadOfMean = "sum-instead-of-mean" => ("x", Kind::WrongFormula),
        /// The input gradient leaves out the final division by each row's RMS.
        RmsLeftOut = "rms-left-out" => ("x", Kind::ScaledPerSlice(0)),
        /// The final division uses the L2 norm √(Σx² + d·ε) instead of the RMS √(mean(x²) + ε).
        NormNotRms = "norm-not-rms" => ("x", Kind::Scaled(0.447_213_595_499_958)),
    }
}

/// Groups of flat positions normalised together.
fn rows(n: usize, d: usize) -> Vec<Vec<usize>> {
    (0..n)
        .map(|r| (0..d).map(|k| r * d + k).collect())
        .collect()
}

fn columns(n: usize, d: usize) -> Vec<Vec<usize>> {
    (0..d)
        .map(|k| (0..n).map(|r| r * d + k).collect())
        .collect()
}

/// Mean and σ = √(var + eps) of each group; `ddof` = 1 for 1/(m−1).
fn statistics<T: Scalar>(x: &[T], groups: &[Vec<usize>], eps: f64, ddof: usize) -> Vec<(T, T)> {
    groups
        .iter()
        .map(|gr| {
            let m = c::<T>(gr.len() as f64);
            let mean = gr.iter().map(|&i| x[i]).sum::<T>() / m;
            let ss = gr.iter().map(|&i| (x[i] - mean) * (x[i] - mean)).sum::<T>();
            let var = ss / c::<T>((gr.len() - ddof.min(gr.len() - 1)) as f64);
            (mean, (var + c(eps)).sqrt())
        })
        .collect()
}

/// ŷ = (x − mean)/σ, per group.
fn normalise<T: Scalar>(x: &[T], groups: &[Vec<usize>], stats: &[(T, T)]) -> Vec<T> {
    let mut y = vec![T::zero(); x.len()];
    for (gr, &(mean, sigma)) in groups.iter().zip(stats) {
        for &i in gr {
            y[i] = (x[i] - mean) / sigma;
        }
    }
    y
}

/// dx = (gy − mean(gy) − ŷ·mean(gy·ŷ))/σ per group; the two mean terms can
/// be dropped (planted bugs).
fn normalise_backward<R: Real>(
    gy: &[R],
    yhat: &[R],
    groups: &[Vec<usize>],
    stats: &[(R, R)],
    mean_term: bool,
    variance_term: bool,
) -> Vec<R> {
    let mut dx = vec![R::zero(); gy.len()];
    for (gr, &(_, sigma)) in groups.iter().zip(stats) {
        let m = R::from_f64(gr.len() as f64);
        let mg = gr.iter().map(|&i| gy[i]).sum::<R>() / m;
        let mgy = gr.iter().map(|&i| gy[i] * yhat[i]).sum::<R>() / m;
        for &i in gr {
            let mut v = gy[i];
            if mean_term {
                v -= mg;
            }
            if variance_term {
                v -= yhat[i] * mgy;
            }
            dx[i] = v / sigma;
        }
    }
    dx
}

fn norm_args<R: Real>(seed: u64, n: usize, d: usize) -> Args<R> {
    let mut dr = Draw::new(seed);
    let x = dr.uniform(&[n, d], 1.0);
    let gamma: Tensor<R> = dr.uniform(&[d], 0.5);
    let gamma = gamma.map(|v| v + R::one());
    Args::new(vec![x], vec![gamma, dr.uniform(&[d], 0.5)])
}

/// Layer norm over the last axis with scale and shift:
/// `ŷ = (x − mean)/√(var + ε)` per row (biased variance), `y = γ·ŷ + β`.
///
/// Backward, with `gy = g·γ`:
/// `dx = (gy − mean(gy) − ŷ·mean(gy·ŷ))/σ` per row,
/// `dγ = Σ_n g·ŷ`, `dβ = Σ_n g`.
///
/// ```
/// use plumbline::gallery::LayerNorm;
/// use plumbline::Audit;
/// let report = Audit::new().run(&LayerNorm::<f64>::new(None), &LayerNorm::args(5))?;
/// report.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct LayerNorm<R> {
    /// The planted bug, or `None` for the correct layer.
    pub bug: Option<LayerNormBug>,
    cache: RefCell<Option<Vec<(f64, f64)>>>,
    _r: PhantomData<R>,
}

impl<R: Real> LayerNorm<R> {
    /// The layer, correct (`None`) or with a planted bug.
    pub fn new(bug: Option<LayerNormBug>) -> Self {
        LayerNorm {
            bug,
            cache: RefCell::new(None),
            _r: PhantomData,
        }
    }

    /// Random arguments: batch 3, 4 features; γ in [0.5, 1.5], β in [-0.5, 0.5].
    pub fn args(seed: u64) -> Args<R> {
        norm_args(seed, 3, 4)
    }
}

fn norm_signature() -> Signature {
    Signature::new()
        .input("x", "batch, feature")
        .param("gamma", "feature")
        .param("beta", "feature")
        .output("y", "batch, feature")
}

fn scale_shift<T: Scalar>(yhat: &[T], gamma: &[T], beta: &[T], d: usize) -> Vec<T> {
    yhat.iter()
        .enumerate()
        .map(|(i, &v)| gamma[i % d] * v + beta[i % d])
        .collect()
}

/// dγ = Σ_n g·v, dβ = Σ_n g over the batch rows.
fn scale_shift_backward<R: Real>(g: &[R], v: &[R], d: usize) -> (Vec<R>, Vec<R>) {
    let mut dgamma = vec![R::zero(); d];
    let mut dbeta = vec![R::zero(); d];
    for (i, (&gi, &vi)) in g.iter().zip(v).enumerate() {
        dgamma[i % d] += gi * vi;
        dbeta[i % d] += gi;
    }
    (dgamma, dbeta)
}

impl<R: Real> Layer for LayerNorm<R> {
    type Real = R;

    fn signature(&self) -> Signature {
        norm_signature()
    }

    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, gamma) = (a.input(0), a.param(0));
        let (n, d) = (x.shape()[0], x.shape()[1]);
        let g = up[0].data();
        let bug = self.bug;
        let groups = rows(n, d);
        let eps = if bug == Some(LayerNormBug::EpsilonLeftOut) {
            0.0
        } else {
            NORM_EPS
        };
        let ddof = usize::from(bug == Some(LayerNormBug::UnbiasedVariance));
        let stats = statistics(x.data(), &groups, eps, ddof);
        let yhat = normalise(x.data(), &groups, &stats);
        let gy: Vec<R> = g
            .iter()
            .enumerate()
            .map(|(i, &v)| v * gamma.data()[i % d])
            .collect();
        let mut dx = normalise_backward(
            &gy,
            &yhat,
            &groups,
            &stats,
            bug != Some(LayerNormBug::MissingMeanTerm),
            bug != Some(LayerNormBug::MissingVarianceTerm),
        );
        if bug == Some(LayerNormBug::SigmaLeftOut) {
            for (i, v) in dx.iter_mut().enumerate() {
                *v *= stats[i / d].1;
            }
        }
        let by = if bug == Some(LayerNormBug::GammaFromInput) {
            x.data()
        } else {
            &yhat
        };
        let (mut dgamma, mut dbeta) = scale_shift_backward(g, by, d);
        if bug == Some(LayerNormBug::BetaSignFlipped) {
            dbeta.iter_mut().for_each(|v| *v = -*v);
        }
        if bug == Some(LayerNormBug::BetaTimesGamma) {
            for (v, &gm) in dbeta.iter_mut().zip(gamma.data()) {
                *v *= gm;
            }
        }
        if bug == Some(LayerNormBug::GammaMeanOverBatch) {
            let nn = R::from_f64(n as f64);
            dgamma.iter_mut().for_each(|v| *v /= nn);
        }
        Gradients::from(vec![
            tensor(vec![n, d], dx),
            tensor(vec![d], dgamma),
            tensor(vec![d], dbeta),
        ])
    }
}

impl<R: Real> GenericForward for LayerNorm<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, gamma, beta) = (a.input(0), a.param(0), a.param(1));
        let (n, d) = (x.shape()[0], x.shape()[1]);
        let groups = rows(n, d);
        let mut stats = statistics(x.data(), &groups, NORM_EPS, 0);
        if self.bug == Some(LayerNormBug::StaleStatistics) {
            let mut cache = self.cache.borrow_mut();
            match cache.as_ref() {
                Some(saved) if saved.len() == stats.len() => {
                    stats = saved.iter().map(|&(m, s)| (c(m), c(s))).collect();
                }
                _ => {
                    let f = |v: T| v.to_f64().unwrap_or(f64::NAN);
                    *cache = Some(stats.iter().map(|&(m, s)| (f(m), f(s))).collect());
                }
            }
        }
        let yhat = normalise(x.data(), &groups, &stats);
        let y = scale_shift(&yhat, gamma.data(), beta.data(), d);
        vec![tensor(vec![n, d], y)]
    }
}

/// Batch norm in training mode: each feature is normalised with the mean
/// and biased variance of the current batch, `y = γ·ŷ + β`.
///
/// Backward: the layer-norm formula with the roles of the axes swapped:
/// `dx = (gy − mean_n(gy) − ŷ·mean_n(gy·ŷ))/σ` per feature, `gy = g·γ`.
///
/// ```
/// use plumbline::gallery::BatchNorm;
/// use plumbline::Audit;
/// let report = Audit::new().run(&BatchNorm::<f64>::new(None), &BatchNorm::args(5))?;
/// report.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct BatchNorm<R> {
    /// The planted bug, or `None` for the correct layer.
    pub bug: Option<BatchNormBug>,
    _r: PhantomData<R>,
}

impl<R: Real> BatchNorm<R> {
    /// The layer, correct (`None`) or with a planted bug.
    pub fn new(bug: Option<BatchNormBug>) -> Self {
        BatchNorm {
            bug,
            _r: PhantomData,
        }
    }

    /// Random arguments: batch 4, 3 features; γ in [0.5, 1.5], β in [-0.5, 0.5].
    pub fn args(seed: u64) -> Args<R> {
        norm_args(seed, 4, 3)
    }
}

impl<R: Real> Layer for BatchNorm<R> {
    type Real = R;

    fn signature(&self) -> Signature {
        norm_signature()
    }

    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, gamma) = (a.input(0), a.param(0));
        let (n, d) = (x.shape()[0], x.shape()[1]);
        let g = up[0].data();
        let bug = self.bug;
        let groups = columns(n, d);
        let eps = if bug == Some(BatchNormBug::EpsilonLeftOut) {
            0.0
        } else {
            NORM_EPS
        };
        let stats = statistics(x.data(), &groups, eps, 0);
        let yhat = normalise(x.data(), &groups, &stats);
        let gy: Vec<R> = g
            .iter()
            .enumerate()
            .map(|(i, &v)| v * gamma.data()[i % d])
            .collect();
        let dx = match bug {
            Some(BatchNormBug::StatisticsAsConstants) => {
                normalise_backward(&gy, &yhat, &groups, &stats, false, false)
            }
            Some(BatchNormBug::WrongAxis) => {
                // Means over each row (the features) while σ stays per feature.
                let row_groups = rows(n, d);
                let mut out = vec![R::zero(); gy.len()];
                for gr in &row_groups {
                    let m = R::from_f64(gr.len() as f64);
                    let mg = gr.iter().map(|&i| gy[i]).sum::<R>() / m;
                    let mgy = gr.iter().map(|&i| gy[i] * yhat[i]).sum::<R>() / m;
                    for &i in gr {
                        out[i] = (gy[i] - mg - yhat[i] * mgy) / stats[i % d].1;
                    }
                }
                out
            }
            _ => normalise_backward(
                &gy,
                &yhat,
                &groups,
                &stats,
                bug != Some(BatchNormBug::MissingMeanTerm),
                true,
            ),
        };
        let mut dx = dx;
        if bug == Some(BatchNormBug::GammaAppliedTwice) {
            for (i, v) in dx.iter_mut().enumerate() {
                *v *= gamma.data()[i % d];
            }
        }
        let (dgamma, mut dbeta) = scale_shift_backward(g, &yhat, d);
        if bug == Some(BatchNormBug::BetaFirstSampleOnly) {
            dbeta = g[..d].to_vec();
        }
        Gradients::from(vec![
            tensor(vec![n, d], dx),
            tensor(vec![d], dgamma),
            tensor(vec![d], dbeta),
        ])
    }
}

impl<R: Real> GenericForward for BatchNorm<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, gamma, beta) = (a.input(0), a.param(0), a.param(1));
        let (n, d) = (x.shape()[0], x.shape()[1]);
        let groups = columns(n, d);
        let stats = statistics(x.data(), &groups, NORM_EPS, 0);
        let yhat = normalise(x.data(), &groups, &stats);
        vec![tensor(
            vec![n, d],
            scale_shift(&yhat, gamma.data(), beta.data(), d),
        )]
    }
}

/// RMS norm over the last axis with a scale:
/// `r = √(mean(x²) + ε)`, `x̂ = x/r`, `y = γ·x̂`.
///
/// Backward, with `gy = g·γ`: `dx = (gy − x̂·mean(gy·x̂))/r` per row,
/// `dγ = Σ_n g·x̂`.
///
/// ```
/// use plumbline::gallery::RmsNorm;
/// use plumbline::Audit;
/// let report = Audit::new().run(&RmsNorm::<f64>::new(None), &RmsNorm::args(5))?;
/// report.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct RmsNorm<R> {
    /// The planted bug, or `None` for the correct layer.
    pub bug: Option<RmsNormBug>,
    _r: PhantomData<R>,
}

impl<R: Real> RmsNorm<R> {
    /// The layer, correct (`None`) or with a planted bug.
    pub fn new(bug: Option<RmsNormBug>) -> Self {
        RmsNorm {
            bug,
            _r: PhantomData,
        }
    }

    /// Random arguments: batch 3, 5 features; γ in [0.5, 1.5].
    pub fn args(seed: u64) -> Args<R> {
        let (inputs, mut params) = norm_args::<R>(seed, 3, 5).into_parts();
        params.truncate(1);
        Args::new(inputs, params)
    }
}

fn rms<T: Scalar>(x: &[T], d: usize) -> Vec<T> {
    x.chunks(d)
        .map(|row| {
            let ms = row.iter().map(|&v| v * v).sum::<T>() / c::<T>(d as f64);
            (ms + c(NORM_EPS)).sqrt()
        })
        .collect()
}

impl<R: Real> Layer for RmsNorm<R> {
    type Real = R;

    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, feature")
            .param("gamma", "feature")
            .output("y", "batch, feature")
    }

    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, gamma) = (a.input(0), a.param(0));
        let (n, d) = (x.shape()[0], x.shape()[1]);
        let (xd, gd, g) = (x.data(), gamma.data(), up[0].data());
        let r = rms(xd, d);
        let xhat: Vec<R> = xd.iter().enumerate().map(|(i, &v)| v / r[i / d]).collect();
        let gy: Vec<R> = g.iter().enumerate().map(|(i, &v)| v * gd[i % d]).collect();
        let projection = match self.bug {
            Some(RmsNormBug::MissingProjection) => 0.0,
            Some(RmsNormBug::ForgotHalf) => 2.0,
            Some(RmsNormBug::SumInsteadOfMean) => d as f64,
            _ => 1.0,
        };
        let projection = R::from_f64(projection);
        let mut dx = vec![R::zero(); xd.len()];
        for (row, &r_row) in r.iter().enumerate().take(n) {
            let span = row * d..(row + 1) * d;
            let m = span.clone().map(|i| gy[i] * xhat[i]).sum::<R>() / R::from_f64(d as f64);
            // The divisor as the backward computes it (bugs change it only).
            let divisor = match self.bug {
                Some(RmsNormBug::RmsLeftOut) => R::one(),
                Some(RmsNormBug::NormNotRms) => {
                    let ss = span.clone().map(|i| xd[i] * xd[i]).sum::<R>();
                    (ss + R::from_f64(d as f64 * NORM_EPS)).sqrt()
                }
                _ => r_row,
            };
            for i in span {
                dx[i] = (gy[i] - projection * xhat[i] * m) / divisor;
            }
        }
        let by: Vec<R> = if self.bug == Some(RmsNormBug::GammaFromOutput) {
            xhat.iter()
                .enumerate()
                .map(|(i, &v)| v * gd[i % d])
                .collect()
        } else {
            xhat
        };
        let (dgamma, _) = scale_shift_backward(g, &by, d);
        Gradients::from(vec![tensor(vec![n, d], dx), tensor(vec![d], dgamma)])
    }
}

impl<R: Real> GenericForward for RmsNorm<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, gamma) = (a.input(0), a.param(0));
        let (n, d) = (x.shape()[0], x.shape()[1]);
        let r = rms(x.data(), d);
        let y = x
            .data()
            .iter()
            .enumerate()
            .map(|(i, &v)| gamma.data()[i % d] * v / r[i / d])
            .collect();
        vec![tensor(vec![n, d], y)]
    }
}

pub(crate) fn register(out: &mut Vec<Case>) {
    register_generic!(out, "layer-norm", LayerNorm(), LayerNormBug);
    register_generic!(out, "batch-norm", BatchNorm(), BatchNormBug);
    register_generic!(out, "rms-norm", RmsNorm(), RmsNormBug);
}
