//! An LSTM cell (one time step), gates in the order input, forget,
//! candidate, output.

use std::marker::PhantomData;

use super::{affine, planted_bugs, register_generic, sigmoid, tensor, Case, Draw, Kind, Subject};
use crate::layer::{Args, GenericForward, Gradients, Layer};
use crate::scalar::{Real, Scalar};
use crate::signature::Signature;
use crate::tensor::Tensor;

planted_bugs! {
    /// Mistakes planted in [`LstmCell`]'s backward.
    LstmBug {
        /// The input-weight gradient writes the input and forget gate blocks in each other's place.
        GateBlocksSwapped = "gate-blocks-swapped" => ("wx", Kind::BlocksPermuted(0)),
        /// The bias gradient is laid out in the gate order input, forget, output, candidate.
        BiasGateOrder = "bias-gate-order" => ("b", Kind::BlocksPermuted(0)),
        /// The forget gate's gradient uses −c instead of c (dc'·c with the sign lost).
        ForgetSignFlipped = "forget-sign-flipped" => ("wx", Kind::SignFlippedOn("block 1 of 4 along axis 0")),
        /// The output gate's gradient is left out (do = 0), so its recurrent weight rows get nothing.
        OutputGateDropped = "output-gate-dropped" => ("wh", Kind::Partial),
        /// The previous cell state's gradient is not returned.
        CellMissing = "cell-missing" => ("c", Kind::Missing),
        /// The cell's tanh derivative is taken at its output, 1 − tanh(tanh(c'))², instead of 1 − tanh(c')².
        CellDerivativeAtOutput = "cell-derivative-at-output" => ("c", Kind::WrongFormula),
    }
}

/// One step of an LSTM cell with outputs `h'` and `c'`:
///
/// ```text
/// a  = x·wxᵀ + h·whᵀ + b                 [batch, 4·hidden] = [i | f | g | o]
/// i = σ(a_i)   f = σ(a_f)   g = tanh(a_g)   o = σ(a_o)
/// c' = f ⊙ c + i ⊙ g          h' = o ⊙ tanh(c')
/// ```
///
/// Backward, for upstream `gh = dh'`, `gc = dc'`:
/// `dc' = gc + gh ⊙ o ⊙ (1 − tanh²(c'))`, `do = gh ⊙ tanh(c')`,
/// `di = dc' ⊙ g`, `df = dc' ⊙ c`, `dg = dc' ⊙ i`, `dc = dc' ⊙ f`; through
/// σ′ = σ(1 − σ) and tanh′ = 1 − tanh² to `da`; then `dwx = daᵀ·x`,
/// `dwh = daᵀ·h`, `db = Σ_n da`, `dx = da·wx`, `dh = da·wh`.
///
/// ```
/// use plumbline::gallery::LstmCell;
/// use plumbline::Audit;
/// let report = Audit::new().run(&LstmCell::<f64>::new(None), &LstmCell::args(2))?;
/// report.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct LstmCell<R> {
    /// The planted bug, or `None` for the correct layer.
    pub bug: Option<LstmBug>,
    _r: PhantomData<R>,
}

impl<R: Real> LstmCell<R> {
    /// The layer, correct (`None`) or with a planted bug.
    pub fn new(bug: Option<LstmBug>) -> Self {
        LstmCell {
            bug,
            _r: PhantomData,
        }
    }

    /// Random arguments: batch 2 orchard stations, 3 readings each, hidden
    /// size 2, values in [-1, 1].
    pub fn args(seed: u64) -> Args<R> {
        let mut d = Draw::new(seed);
        Args::new(
            vec![
                d.uniform(&[2, 3], 1.0),
                d.uniform(&[2, 2], 1.0),
                d.uniform(&[2, 2], 1.0),
            ],
            vec![
                d.uniform(&[8, 3], 1.0),
                d.uniform(&[8, 2], 1.0),
                d.uniform(&[8], 1.0),
            ],
        )
    }
}

/// The gates and new cell state of one unit.
struct Unit<T> {
    i: T,
    f: T,
    g: T,
    o: T,
    c_next: T,
}

/// Pre-activations `a` ([batch, 4·hidden]) and sizes of one step.
fn pre<T: Scalar>(a: &Args<T>) -> (Vec<T>, usize, usize, usize) {
    let (x, h) = (a.input(0), a.input(1));
    let (wx, wh, b) = (a.param(0), a.param(1), a.param(2));
    let (n, i, hd) = (x.shape()[0], x.shape()[1], h.shape()[1]);
    let ax = affine(x.data(), wx.data(), Some(b.data()), n, i, 4 * hd);
    let ah = affine(h.data(), wh.data(), None, n, hd, 4 * hd);
    let sum = ax.iter().zip(&ah).map(|(&p, &q)| p + q).collect();
    (sum, n, i, hd)
}

fn unit<T: Scalar>(pre: &[T], c: &[T], r: usize, u: usize, hd: usize) -> Unit<T> {
    let o = r * 4 * hd;
    let (i, f) = (sigmoid(pre[o + u]), sigmoid(pre[o + hd + u]));
    let g = pre[o + 2 * hd + u].tanh();
    let og = sigmoid(pre[o + 3 * hd + u]);
    Unit {
        i,
        f,
        g,
        o: og,
        c_next: f * c[r * hd + u] + i * g,
    }
}

impl<R: Real> Layer for LstmCell<R> {
    type Real = R;

    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, in")
            .input("h", "batch, hidden")
            .input("c", "batch, hidden")
            .param("wx", "gates, in")
            .param("wh", "gates, hidden")
            .param("b", "gates")
            .output("h_next", "batch, hidden")
            .output("c_next", "batch, hidden")
    }

    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (pre, n, i, hd) = pre(a);
        let (x, h, c) = (a.input(0).data(), a.input(1).data(), a.input(2).data());
        let (wx, wh) = (a.param(0).data(), a.param(1).data());
        let (gh, gc) = (up[0].data(), up[1].data());
        let (g4, one, bug) = (4 * hd, R::one(), self.bug);
        let mut da = vec![R::zero(); n * g4];
        let mut dc = vec![R::zero(); n * hd];
        for r in 0..n {
            for u in 0..hd {
                let s = unit(&pre, c, r, u, hd);
                let k = r * hd + u;
                let tc = s.c_next.tanh();
                let slope = if bug == Some(LstmBug::CellDerivativeAtOutput) {
                    one - tc.tanh() * tc.tanh()
                } else {
                    one - tc * tc
                };
                let dcn = gc[k] + gh[k] * s.o * slope;
                let d_o = if bug == Some(LstmBug::OutputGateDropped) {
                    R::zero()
                } else {
                    gh[k] * tc
                };
                let df = if bug == Some(LstmBug::ForgetSignFlipped) {
                    -dcn * c[k]
                } else {
                    dcn * c[k]
                };
                let o = r * g4;
                da[o + u] = dcn * s.g * s.i * (one - s.i);
                da[o + hd + u] = df * s.f * (one - s.f);
                da[o + 2 * hd + u] = dcn * s.i * (one - s.g * s.g);
                da[o + 3 * hd + u] = d_o * s.o * (one - s.o);
                dc[k] = dcn * s.f;
            }
        }
        let mut dx = vec![R::zero(); n * i];
        let mut dh = vec![R::zero(); n * hd];
        let mut dwx = vec![R::zero(); g4 * i];
        let mut dwh = vec![R::zero(); g4 * hd];
        let mut db = vec![R::zero(); g4];
        for r in 0..n {
            for q in 0..g4 {
                let d = da[r * g4 + q];
                db[q] += d;
                // The gate block q is written to (a planted bug moves it).
                let qx = match bug {
                    Some(LstmBug::GateBlocksSwapped) if q < 2 * hd => (q + hd) % (2 * hd),
                    _ => q,
                };
                for k in 0..i {
                    dwx[qx * i + k] += d * x[r * i + k];
                    dx[r * i + k] += d * wx[q * i + k];
                }
                for k in 0..hd {
                    dwh[q * hd + k] += d * h[r * hd + k];
                    dh[r * hd + k] += d * wh[q * hd + k];
                }
            }
        }
        if bug == Some(LstmBug::BiasGateOrder) {
            // Blocks i, f, o, g: the last two swapped.
            let (g_block, o_block) = (db[2 * hd..3 * hd].to_vec(), db[3 * hd..].to_vec());
            db[2 * hd..3 * hd].copy_from_slice(&o_block);
            db[3 * hd..].copy_from_slice(&g_block);
        }
        let dc = (bug != Some(LstmBug::CellMissing)).then(|| tensor(vec![n, hd], dc));
        Gradients::from(vec![
            Some(tensor(vec![n, i], dx)),
            Some(tensor(vec![n, hd], dh)),
            dc,
            Some(tensor(vec![g4, i], dwx)),
            Some(tensor(vec![g4, hd], dwh)),
            Some(tensor(vec![g4], db)),
        ])
    }
}

impl<R: Real> GenericForward for LstmCell<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (pre, n, _, hd) = pre(a);
        let c = a.input(2).data();
        let mut h_next = vec![T::zero(); n * hd];
        let mut c_next = vec![T::zero(); n * hd];
        for r in 0..n {
            for u in 0..hd {
                let s = unit(&pre, c, r, u, hd);
                h_next[r * hd + u] = s.o * s.c_next.tanh();
                c_next[r * hd + u] = s.c_next;
            }
        }
        vec![tensor(vec![n, hd], h_next), tensor(vec![n, hd], c_next)]
    }
}

pub(crate) fn register(out: &mut Vec<Case>) {
    register_generic!(out, "lstm-cell", LstmCell(), LstmBug);
}
