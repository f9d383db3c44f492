//! Embedding lookup, written for `f32` only.

use std::cell::RefCell;

use super::{planted_bugs, tensor, Case, Draw, Kind, Subject};
use crate::layer::{Args, Forward, Gradients, Layer};
use crate::signature::Signature;
use crate::tensor::Tensor;

planted_bugs! {
    /// Mistakes planted in [`Embedding`]'s backward.
    EmbeddingBug {
        /// A repeated id overwrites the row's gradient instead of adding to it.
        RepeatsOverwrite = "repeats-overwrite" => ("table", Kind::WrongFormula),
        /// The gradient is scattered to row (id + 1) mod vocabulary (index off by one, wrapping).
        RowOffByOne = "row-off-by-one" => ("table", Kind::BlocksPermuted(0)),
        /// The gradient is averaged over the tokens although the forward does not average.
        MeanOverTokens = "mean-over-tokens" => ("table", Kind::Scaled(0.2)),
        /// The table gradient is added into a buffer kept between calls and the buffer returned.
        Accumulates = "accumulates" => ("table", Kind::Accumulates),
    }
}

/// Embedding lookup: `y[t, ·] = table[ids[t], ·]`, written for `f32` only
/// (a plain [`Layer`]: the audit uses Ridders' method in `f32`).
///
/// The ids are a fixed input (integers stored as numbers); only the table
/// is differentiated. Backward: `dtable[v, ·] = Σ_{t: ids[t] = v} g[t, ·]`;
/// an id that occurs twice collects both rows.
///
/// ```
/// use plumbline::gallery::Embedding;
/// use plumbline::Audit;
/// let report = Audit::new().run(&Embedding::new(None), &Embedding::args(1))?;
/// report.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct Embedding {
    /// The planted bug, or `None` for the correct layer.
    pub bug: Option<EmbeddingBug>,
    buffer: RefCell<Vec<f32>>,
}

impl Embedding {
    /// The layer, correct (`None`) or with a planted bug.
    pub fn new(bug: Option<EmbeddingBug>) -> Self {
        Embedding {
            bug,
            buffer: RefCell::new(Vec::new()),
        }
    }

    /// Random arguments: 5 tokens over a vocabulary of 4 (so some id
    /// repeats), width 3, table values in [-1, 1].
    pub fn args(seed: u64) -> Args<f32> {
        let mut d = Draw::new(seed);
        let ids = (0..5).map(|_| d.index(4) as f32).collect();
        Args::new(vec![tensor(vec![5], ids)], vec![d.uniform(&[4, 3], 1.0)])
    }
}

fn row(id: f32, vocab: usize) -> usize {
    (id.max(0.0) as usize).min(vocab.saturating_sub(1))
}

impl Layer for Embedding {
    type Real = f32;

    fn signature(&self) -> Signature {
        Signature::new()
            .fixed_input("ids", "token")
            .param("table", "vocab, width")
            .output("y", "token, width")
    }

    fn backward(&self, a: &Args<f32>, up: &[Tensor<f32>]) -> Gradients<f32> {
        let (ids, table) = (a.input(0), a.param(0));
        let (v, w) = (table.shape()[0], table.shape()[1]);
        let g = up[0].data();
        let mut dt = vec![0.0_f32; v * w];
        for (t, &id) in ids.data().iter().enumerate() {
            let mut r = row(id, v);
            if self.bug == Some(EmbeddingBug::RowOffByOne) {
                r = (r + 1) % v;
            }
            for k in 0..w {
                let gk = g[t * w + k];
                match self.bug {
                    Some(EmbeddingBug::RepeatsOverwrite) => dt[r * w + k] = gk,
                    Some(EmbeddingBug::MeanOverTokens) => dt[r * w + k] += gk / ids.len() as f32,
                    _ => dt[r * w + k] += gk,
                }
            }
        }
        if self.bug == Some(EmbeddingBug::Accumulates) {
            let mut buf = self.buffer.borrow_mut();
            if buf.len() != dt.len() {
                *buf = vec![0.0; dt.len()];
            }
            for (b, d) in buf.iter_mut().zip(&dt) {
                *b += d;
            }
            dt = buf.clone();
        }
        Gradients::from(vec![tensor(vec![v, w], dt)])
    }
}

impl Forward for Embedding {
    fn forward(&self, a: &Args<f32>) -> Vec<Tensor<f32>> {
        let (ids, table) = (a.input(0), a.param(0));
        let (v, w) = (table.shape()[0], table.shape()[1]);
        let mut y = Vec::with_capacity(ids.len() * w);
        for &id in ids.data() {
            let r = row(id, v);
            y.extend_from_slice(&table.data()[r * w..(r + 1) * w]);
        }
        vec![tensor(vec![ids.len(), w], y)]
    }
}

pub(crate) fn register(out: &mut Vec<Case>) {
    out.push(Case::new("embedding", "f32", false, None, |s| {
        Subject::F32(Box::new(Embedding::new(None)), Embedding::args(s))
    }));
    for &bug in EmbeddingBug::ALL {
        out.push(Case::new(
            "embedding",
            "f32",
            false,
            Some(bug.info()),
            move |s| Subject::F32(Box::new(Embedding::new(Some(bug))), Embedding::args(s)),
        ));
    }
}
