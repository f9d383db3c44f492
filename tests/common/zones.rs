//! A dense tanh layer from station readings to zones, with planted bugs:
//! the layer of the screen tests and the scale bench.

use plumbline::prelude::*;

#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Bug {
    None,
    /// dW negated.
    Sign,
    /// dW doubled.
    Factor,
    /// dW transposed (square W).
    Transpose,
    /// Row 7 of dW scaled by 1.1.
    OneRow,
    /// One element of dW off by half its value plus 0.01.
    OneElement,
    /// The tanh′ factor left out of every gradient.
    MissingTerm,
}

pub const BUGS: [Bug; 6] = [
    Bug::Sign,
    Bug::Factor,
    Bug::Transpose,
    Bug::OneRow,
    Bug::OneElement,
    Bug::MissingTerm,
];

/// y = tanh(W·x + b) for a batch of readings x.
pub struct Zones {
    pub bug: Bug,
}

impl Layer for Zones {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, station")
            .param("w", "zone, station")
            .param("b", "zone")
            .output("y", "batch, zone")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let (x, w, b) = (a.input(0).data(), a.param(0).data(), a.param(1).data());
        let (n, i) = (a.input(0).shape()[0], a.input(0).shape()[1]);
        let o = a.param(0).shape()[0];
        let g = up[0].data();
        let mut dpre = vec![0.0; n * o];
        for s in 0..n {
            for r in 0..o {
                let row = &w[r * i..(r + 1) * i];
                let xs = &x[s * i..(s + 1) * i];
                let z = b[r] + row.iter().zip(xs).map(|(w, x)| w * x).sum::<f64>();
                let t = z.tanh();
                let local = if self.bug == Bug::MissingTerm {
                    1.0
                } else {
                    1.0 - t * t
                };
                dpre[s * o + r] = g[s * o + r] * local;
            }
        }
        let (mut dx, mut dw, mut db) = (vec![0.0; n * i], vec![0.0; o * i], vec![0.0; o]);
        for s in 0..n {
            for r in 0..o {
                let d = dpre[s * o + r];
                db[r] += d;
                for k in 0..i {
                    dw[r * i + k] += d * x[s * i + k];
                    dx[s * i + k] += d * w[r * i + k];
                }
            }
        }
        match self.bug {
            Bug::Sign => dw.iter_mut().for_each(|v| *v = -*v),
            Bug::Factor => dw.iter_mut().for_each(|v| *v *= 2.0),
            Bug::Transpose => {
                let c = dw.clone();
                for r in 0..o {
                    for k in 0..i {
                        dw[r * i + k] = c[k * o + r];
                    }
                }
            }
            Bug::OneRow => dw[7 * i..8 * i].iter_mut().for_each(|v| *v *= 1.1),
            Bug::OneElement => dw[3 * i + 5] = dw[3 * i + 5] * 1.5 + 0.01,
            Bug::None | Bug::MissingTerm => {}
        }
        let t = |shape: Vec<usize>, v| Tensor::new(shape, v).ok();
        Gradients::from(vec![t(vec![n, i], dx), t(vec![o, i], dw), t(vec![o], db)])
    }
}

impl GenericForward for Zones {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, w, b) = (a.input(0).data(), a.param(0).data(), a.param(1).data());
        let (n, i) = (a.input(0).shape()[0], a.input(0).shape()[1]);
        let o = a.param(0).shape()[0];
        let mut y = Vec::with_capacity(n * o);
        for s in 0..n {
            for r in 0..o {
                let row = &w[r * i..(r + 1) * i];
                let xs = &x[s * i..(s + 1) * i];
                let z = row.iter().zip(xs).fold(b[r], |z, (w, x)| z + *w * *x);
                y.push(z.tanh());
            }
        }
        vec![Tensor::from_fn(vec![n, o], |ix| y[ix[0] * o + ix[1]])]
    }
}

/// Demo readings: a pseudo-random pattern per seed, weights scaled by
/// 1/√stations so the tanh is not saturated.
pub fn args(seed: u64, batch: usize, stations: usize, zones: usize) -> Args<f64> {
    let mut state = seed.wrapping_mul(0x9E37_79B9_7F4A_7C15) | 1;
    let mut next = move || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        (state >> 11) as f64 / (1u64 << 53) as f64 * 2.0 - 1.0
    };
    let scale = 1.0 / (stations as f64).sqrt();
    let x = Tensor::from_fn(vec![batch, stations], |_| next());
    let w = Tensor::from_fn(vec![zones, stations], |_| next() * scale);
    let b = Tensor::from_fn(vec![zones], |_| next() * 0.1);
    Args::new(vec![x], vec![w, b])
}
