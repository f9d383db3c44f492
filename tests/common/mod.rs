//! Layers shared by the integration tests.
#![allow(dead_code)]

use std::marker::PhantomData;

pub mod zones;

use plumbline::{Args, GenericForward, Gradients, Layer, Real, Scalar, Signature, Tensor};

/// Planted bugs in the dense layer's backward.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum DenseBug {
    None,
    /// dw negated.
    SignFlip,
    /// db doubled.
    FactorTwo,
    /// dw computed as xᵀg, shape [in, out] instead of [out, in].
    TransposedWeight,
    /// dw computed transposed but reshaped to [out, in] (square w only).
    TransposedSquare,
    /// db returned with shape [out, 1].
    WrongShape,
    /// db not returned.
    Missing,
    /// dx divided by the batch size.
    MeanNotSum,
}

/// y = x·wᵀ + b.
pub struct Dense<R> {
    pub bug: DenseBug,
    _r: PhantomData<R>,
}

impl<R> Dense<R> {
    pub fn new(bug: DenseBug) -> Self {
        Dense {
            bug,
            _r: PhantomData,
        }
    }
}

fn at<T: Copy>(t: &Tensor<T>, ix: &[usize]) -> T {
    t.get(ix).expect("index in range")
}

impl<R: Real> Layer for Dense<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, in")
            .param("w", "out, in")
            .param("b", "out")
            .output("y", "batch, out")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, w, g) = (a.input(0), a.param(0), &up[0]);
        let (n, i, o) = (x.shape()[0], x.shape()[1], w.shape()[0]);
        let mut dx: Tensor<R> = Tensor::from_fn(vec![n, i], |ix| {
            (0..o)
                .map(|r| at(g, &[ix[0], r]) * at(w, &[r, ix[1]]))
                .sum()
        });
        let mut dw: Tensor<R> = Tensor::from_fn(vec![o, i], |ix| {
            (0..n)
                .map(|s| at(g, &[s, ix[0]]) * at(x, &[s, ix[1]]))
                .sum()
        });
        let mut db: Tensor<R> =
            Tensor::from_fn(vec![o], |ix| (0..n).map(|s| at(g, &[s, ix[0]])).sum());
        match self.bug {
            DenseBug::None | DenseBug::Missing => {}
            DenseBug::SignFlip => dw = dw.map(|v| -v),
            DenseBug::FactorTwo => db = db.map(|v| v + v),
            DenseBug::TransposedWeight => {
                dw = Tensor::from_fn(vec![i, o], |ix| at(&dw, &[ix[1], ix[0]]));
            }
            DenseBug::TransposedSquare => {
                dw = Tensor::from_fn(vec![o, i], |ix| at(&dw, &[ix[1], ix[0]]));
            }
            DenseBug::WrongShape => {
                db = Tensor::new(vec![o, 1], db.data().to_vec()).unwrap();
            }
            DenseBug::MeanNotSum => {
                let nn = R::from_f64(n as f64);
                dx = dx.map(|v| v / nn);
            }
        }
        if self.bug == DenseBug::Missing {
            return Gradients::from(vec![Some(dx), Some(dw), None]);
        }
        Gradients::from(vec![dx, dw, db])
    }
}

impl<R: Real> GenericForward for Dense<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, w, b) = (a.input(0), a.param(0), a.param(1));
        let (n, i, o) = (x.shape()[0], x.shape()[1], w.shape()[0]);
        vec![Tensor::from_fn(vec![n, o], |ix| {
            let mut s = b.data()[ix[1]];
            for k in 0..i {
                s += at(w, &[ix[1], k]) * at(x, &[ix[0], k]);
            }
            s
        })]
    }
}

/// Deterministic pseudo-random values in [-1, 1] for test arguments.
pub fn values(n: usize, salt: u64) -> Vec<f64> {
    let mut s = salt.wrapping_mul(0x9E37_79B9_7F4A_7C15).wrapping_add(1);
    (0..n)
        .map(|_| {
            s ^= s << 13;
            s ^= s >> 7;
            s ^= s << 17;
            (s >> 11) as f64 / (1u64 << 53) as f64 * 2.0 - 1.0
        })
        .collect()
}

pub fn tensor<R: Real>(shape: &[usize], salt: u64) -> Tensor<R> {
    let n = shape.iter().product();
    Tensor::new(
        shape.to_vec(),
        values(n, salt).into_iter().map(R::from_f64).collect(),
    )
    .unwrap()
}

pub fn dense_args<R: Real>(batch: usize, inp: usize, out: usize, salt: u64) -> Args<R> {
    Args::new(
        vec![tensor(&[batch, inp], salt)],
        vec![tensor(&[out, inp], salt + 1), tensor(&[out], salt + 2)],
    )
}
