//! The beehive demo layer shared by the harness tests: a health score per
//! hive from sensor readings (scale weight change, brood temperature,
//! humidity, entrance traffic...), score = tanh(w·readings + b).
#![allow(dead_code)]

use plumbline::{Args, GenericForward, Gradients, Layer, Scalar, Signature, Tensor};

/// Planted bugs in the backward.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum HiveBug {
    None,
    /// The bias gradient takes the first hive only instead of summing over
    /// all hives: right for one hive, wrong for two or more.
    BiasFromFirstHive,
    /// The weight gradient has its sign flipped.
    WeightSignFlip,
}

/// health[h, s] = tanh(Σ_k w[s, k]·readings[h, k] + b[s]).
pub struct HiveScore {
    pub bug: HiveBug,
}

pub const CORRECT: HiveScore = HiveScore { bug: HiveBug::None };

fn at(t: &Tensor<f64>, ix: &[usize]) -> f64 {
    t.get(ix).unwrap_or(f64::NAN)
}

impl Layer for HiveScore {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("readings", "hive, sensor")
            .param("w", "score, sensor")
            .param("b", "score")
            .output("health", "hive, score")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let (x, w) = (a.input(0), a.param(0));
        let (n, k, s) = (x.shape()[0], x.shape()[1], w.shape()[0]);
        let y = &self.forward_generic(a)[0];
        let dz = Tensor::from_fn(vec![n, s], |ix| {
            let t = at(y, ix);
            at(&up[0], ix) * (1.0 - t * t)
        });
        let dx = Tensor::from_fn(vec![n, k], |ix| {
            (0..s)
                .map(|o| at(&dz, &[ix[0], o]) * at(w, &[o, ix[1]]))
                .sum()
        });
        let sign = if self.bug == HiveBug::WeightSignFlip {
            -1.0
        } else {
            1.0
        };
        let dw = Tensor::from_fn(vec![s, k], |ix| {
            sign * (0..n)
                .map(|h| at(&dz, &[h, ix[0]]) * at(x, &[h, ix[1]]))
                .sum::<f64>()
        });
        let db = Tensor::from_fn(vec![s], |ix| match self.bug {
            HiveBug::BiasFromFirstHive => at(&dz, &[0, ix[0]]),
            _ => (0..n).map(|h| at(&dz, &[h, ix[0]])).sum(),
        });
        Gradients::from(vec![dx, dw, db])
    }
}

impl GenericForward for HiveScore {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, w, b) = (a.input(0), a.param(0), a.param(1));
        let (n, k, s) = (x.shape()[0], x.shape()[1], w.shape()[0]);
        vec![Tensor::from_fn(vec![n, s], |ix| {
            let mut z = b.data()[ix[1]];
            for j in 0..k {
                z += w.data()[ix[1] * k + j] * x.data()[ix[0] * k + j];
            }
            z.tanh()
        })]
    }
}

/// Demo readings for `hives` hives and `sensors` sensors, two scores.
pub fn hive_args(hives: usize, sensors: usize) -> Args<f64> {
    let wave = |shape: Vec<usize>, phase: f64| {
        Tensor::from_fn(shape, |ix| {
            let p = ix.iter().fold(phase, |acc, &i| acc * 1.7 + i as f64);
            0.8 * p.sin()
        })
    };
    Args::new(
        vec![wave(vec![hives, sensors], 0.3)],
        vec![wave(vec![2, sensors], 1.1), wave(vec![2], 2.0)],
    )
}
