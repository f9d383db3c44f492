//! A GRU cell (one time step).

use std::marker::PhantomData;

use super::{affine, planted_bugs, register_generic, sigmoid, tensor, Case, Draw, Kind, Subject};
use crate::layer::{Args, GenericForward, Gradients, Layer};
use crate::scalar::{Real, Scalar};
use crate::signature::Signature;
use crate::tensor::Tensor;

planted_bugs! {
    /// Mistakes planted in [`GruCell`]'s backward.
    GruBug {
        /// The direct path to the previous state uses (1 − z) instead of z.
        GateSwapped = "gate-swapped" => ("h", Kind::WrongFormula),
        /// The candidate's tanh derivative is taken at its output (1 − tanh(c)²) instead of its input.
        DerivativeAtOutput = "derivative-at-output" => ("wx", Kind::WrongFormula),
        /// The reset gate's gradient multiplies by the candidate instead of the recurrent term it gates.
        ResetUsesCandidate = "reset-uses-candidate" => ("wh", Kind::WrongFormula),
        /// The gradient of the previous hidden state is not returned.
        HiddenMissing = "hidden-missing" => ("h", Kind::Missing),
        /// The recurrent weight gradient is returned transposed, [hidden, 3·hidden].
        RecurrentTransposed = "recurrent-transposed" => ("wh", Kind::Transposed),
        /// The update gate's gradient uses c − h instead of h − c (the sign of ∂h'/∂z lost).
        UpdateSignFlipped = "update-sign-flipped" => ("wx", Kind::SignFlippedOn("block 1 of 3 along axis 0")),
        /// The recurrent weight gradient writes the reset and update gate blocks in each other's place.
        GateBlocksSwapped = "gate-blocks-swapped" => ("wh", Kind::BlocksPermuted(0)),
    }
}

/// One step of a GRU cell, gates in the order reset, update, candidate:
///
/// ```text
/// ax = x·wxᵀ + b            ah = h·whᵀ            (each [batch, 3·hidden])
/// r  = σ(ax_r + ah_r)        z = σ(ax_z + ah_z)
/// c  = tanh(ax_c + r ⊙ ah_c)
/// h' = (1 − z) ⊙ c + z ⊙ h
/// ```
///
/// Backward, for upstream `g = dh'`: `dc = g(1 − z)`, `dz = g(h − c)`,
/// `dac = dc(1 − c²)`, `dr = dac ⊙ ah_c`; pre-activations through σ′ = σ(1 − σ);
/// `dax = [dr', dz', dac]`, `dah = [dr', dz', dac ⊙ r]`; then the two affine
/// maps, plus the direct path `dh += g ⊙ z`.
///
/// ```
/// use plumbline::gallery::GruCell;
/// use plumbline::Audit;
/// let report = Audit::new().run(&GruCell::<f64>::new(None), &GruCell::args(6))?;
/// report.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct GruCell<R> {
    /// The planted bug, or `None` for the correct layer.
    pub bug: Option<GruBug>,
    _r: PhantomData<R>,
}

impl<R: Real> GruCell<R> {
    /// The layer, correct (`None`) or with a planted bug.
    pub fn new(bug: Option<GruBug>) -> Self {
        GruCell {
            bug,
            _r: PhantomData,
        }
    }

    /// Random arguments: batch 2, 3 inputs, hidden size 2, values in [-1, 1].
    pub fn args(seed: u64) -> Args<R> {
        let mut d = Draw::new(seed);
        Args::new(
            vec![d.uniform(&[2, 3], 1.0), d.uniform(&[2, 2], 1.0)],
            vec![
                d.uniform(&[6, 3], 1.0),
                d.uniform(&[6, 2], 1.0),
                d.uniform(&[6], 1.0),
            ],
        )
    }
}

/// Shapes and pre-activations of one step.
struct Step<T> {
    n: usize,
    i: usize,
    hd: usize,
    ax: Vec<T>,
    ah: Vec<T>,
}

fn step<T: Scalar>(a: &Args<T>) -> Step<T> {
    let (x, h, wx, wh, b) = (a.input(0), a.input(1), a.param(0), a.param(1), a.param(2));
    let (n, i, hd) = (x.shape()[0], x.shape()[1], h.shape()[1]);
    Step {
        n,
        i,
        hd,
        ax: affine(x.data(), wx.data(), Some(b.data()), n, i, 3 * hd),
        ah: affine(h.data(), wh.data(), None, n, hd, 3 * hd),
    }
}

impl<R: Real> Layer for GruCell<R> {
    type Real = R;

    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, in")
            .input("h", "batch, hidden")
            .param("wx", "gates, in")
            .param("wh", "gates, hidden")
            .param("b", "gates")
            .output("h_next", "batch, hidden")
    }

    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let s = step(a);
        let (x, h) = (a.input(0).data(), a.input(1).data());
        let (wx, wh) = (a.param(0).data(), a.param(1).data());
        let g = up[0].data();
        let (n, i, hd, g3) = (s.n, s.i, s.hd, 3 * s.hd);
        let one = R::one();
        let mut dax = vec![R::zero(); n * g3];
        let mut dah = vec![R::zero(); n * g3];
        let mut dh = vec![R::zero(); n * hd];
        for r in 0..n {
            for u in 0..hd {
                let (o, hidx) = (r * g3, r * hd + u);
                let (ri, zi, ci) = (o + u, o + hd + u, o + 2 * hd + u);
                let rg = sigmoid(s.ax[ri] + s.ah[ri]);
                let z = sigmoid(s.ax[zi] + s.ah[zi]);
                let cand = (s.ax[ci] + rg * s.ah[ci]).tanh();
                let gh = g[hidx];
                let dc = gh * (one - z);
                let dz = if self.bug == Some(GruBug::UpdateSignFlipped) {
                    gh * (cand - h[hidx])
                } else {
                    gh * (h[hidx] - cand)
                };
                dh[hidx] = if self.bug == Some(GruBug::GateSwapped) {
                    gh * (one - z)
                } else {
                    gh * z
                };
                let dac = if self.bug == Some(GruBug::DerivativeAtOutput) {
                    let t = cand.tanh();
                    dc * (one - t * t)
                } else {
                    dc * (one - cand * cand)
                };
                let dr = if self.bug == Some(GruBug::ResetUsesCandidate) {
                    dac * cand
                } else {
                    dac * s.ah[ci]
                };
                dax[ri] = dr * rg * (one - rg);
                dax[zi] = dz * z * (one - z);
                dax[ci] = dac;
                dah[ri] = dax[ri];
                dah[zi] = dax[zi];
                dah[ci] = dac * rg;
            }
        }
        // Through ax = x·wxᵀ + b and ah = h·whᵀ.
        let mut dx = vec![R::zero(); n * i];
        let mut dwx = vec![R::zero(); g3 * i];
        let mut dwh = vec![R::zero(); g3 * hd];
        let mut db = vec![R::zero(); g3];
        for r in 0..n {
            for q in 0..g3 {
                let (da, dhh) = (dax[r * g3 + q], dah[r * g3 + q]);
                db[q] += da;
                for k in 0..i {
                    dwx[q * i + k] += da * x[r * i + k];
                    dx[r * i + k] += da * wx[q * i + k];
                }
                // The gate block q is written to (a planted bug moves it).
                let qh = match self.bug {
                    Some(GruBug::GateBlocksSwapped) if q < 2 * hd => (q + hd) % (2 * hd),
                    _ => q,
                };
                for k in 0..hd {
                    dwh[qh * hd + k] += dhh * h[r * hd + k];
                    dh[r * hd + k] += dhh * wh[q * hd + k];
                }
            }
        }
        let dwh = if self.bug == Some(GruBug::RecurrentTransposed) {
            tensor(
                vec![hd, g3],
                (0..hd * g3).map(|f| dwh[(f % g3) * hd + f / g3]).collect(),
            )
        } else {
            tensor(vec![g3, hd], dwh)
        };
        let dh = (self.bug != Some(GruBug::HiddenMissing)).then(|| tensor(vec![n, hd], dh));
        Gradients::from(vec![
            Some(tensor(vec![n, i], dx)),
            dh,
            Some(tensor(vec![g3, i], dwx)),
            Some(dwh),
            Some(tensor(vec![g3], db)),
        ])
    }
}

impl<R: Real> GenericForward for GruCell<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let s = step(a);
        let h = a.input(1).data();
        let g3 = 3 * s.hd;
        let mut out = vec![T::zero(); s.n * s.hd];
        for r in 0..s.n {
            for u in 0..s.hd {
                let (o, hidx) = (r * g3, r * s.hd + u);
                let rg = sigmoid(s.ax[o + u] + s.ah[o + u]);
                let z = sigmoid(s.ax[o + s.hd + u] + s.ah[o + s.hd + u]);
                let cand = (s.ax[o + 2 * s.hd + u] + rg * s.ah[o + 2 * s.hd + u]).tanh();
                out[hidx] = (T::one() - z) * cand + z * h[hidx];
            }
        }
        vec![tensor(vec![s.n, s.hd], out)]
    }
}

pub(crate) fn register(out: &mut Vec<Case>) {
    register_generic!(out, "gru-cell", GruCell(), GruBug);
}
