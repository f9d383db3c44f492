//! Wrapping an existing stateful layer: a struct that holds its weights, a
//! cache filled by `forward`, and gradient buffers filled by
//! `backward(&mut self)` — the shape of most from-scratch trainers.
//!
//! The wrapper copies the audit's arguments into the struct, runs its own
//! forward and backward, and returns fresh gradient tensors. Nothing in the
//! original layer changes.
//!
//! Run: `cargo run --example stateful`

use std::cell::RefCell;

use plumbline::{Args, Audit, Forward, Gradients, Layer, Signature, Tensor};

/// The user's existing layer: a frost-sensor calibration stage,
/// y = x·Wᵀ + b, written for `f32` with caches and gradient buffers.
struct Calibration {
    w: Vec<f32>,
    b: Vec<f32>,
    inputs: usize,
    outputs: usize,
    cached_x: Vec<f32>,
    grad_w: Vec<f32>,
    grad_b: Vec<f32>,
}

impl Calibration {
    fn new(inputs: usize, outputs: usize) -> Self {
        Calibration {
            w: vec![0.0; outputs * inputs],
            b: vec![0.0; outputs],
            inputs,
            outputs,
            cached_x: Vec::new(),
            grad_w: vec![0.0; outputs * inputs],
            grad_b: vec![0.0; outputs],
        }
    }

    fn forward(&mut self, x: &[f32]) -> Vec<f32> {
        self.cached_x = x.to_vec();
        let batch = x.len() / self.inputs;
        let mut y = vec![0.0; batch * self.outputs];
        for s in 0..batch {
            for o in 0..self.outputs {
                let row = &self.w[o * self.inputs..(o + 1) * self.inputs];
                let xs = &x[s * self.inputs..(s + 1) * self.inputs];
                y[s * self.outputs + o] =
                    self.b[o] + row.iter().zip(xs).map(|(w, x)| w * x).sum::<f32>();
            }
        }
        y
    }

    /// Stores dW and db in the struct, returns dx.
    fn backward(&mut self, dy: &[f32]) -> Vec<f32> {
        let batch = self.cached_x.len() / self.inputs;
        self.grad_w.iter_mut().for_each(|g| *g = 0.0);
        self.grad_b.iter_mut().for_each(|g| *g = 0.0);
        let mut dx = vec![0.0; self.cached_x.len()];
        for s in 0..batch {
            for o in 0..self.outputs {
                let g = dy[s * self.outputs + o];
                self.grad_b[o] += g;
                for i in 0..self.inputs {
                    self.grad_w[o * self.inputs + i] += g * self.cached_x[s * self.inputs + i];
                    dx[s * self.inputs + i] += g * self.w[o * self.inputs + i];
                }
            }
        }
        dx
    }
}

/// The wrapper: a few lines per method.
struct Audited(RefCell<Calibration>);

impl Layer for Audited {
    type Real = f32;

    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "batch, in")
            .param("w", "out, in")
            .param("b", "out")
            .output("y", "batch, out")
    }

    fn backward(&self, a: &Args<f32>, up: &[Tensor<f32>]) -> Gradients<f32> {
        self.forward(a); // fill the caches for exactly these arguments
        let mut l = self.0.borrow_mut();
        let dx = l.backward(up[0].data());
        let t = |t: &Tensor<f32>, v: Vec<f32>| Tensor::new(t.shape().to_vec(), v).ok();
        Gradients::from(vec![
            t(a.input(0), dx),
            t(a.param(0), l.grad_w.clone()),
            t(a.param(1), l.grad_b.clone()),
        ])
    }
}

impl Forward for Audited {
    fn forward(&self, a: &Args<f32>) -> Vec<Tensor<f32>> {
        let mut l = self.0.borrow_mut();
        l.w.copy_from_slice(a.param(0).data());
        l.b.copy_from_slice(a.param(1).data());
        let y = l.forward(a.input(0).data());
        let shape = vec![a.input(0).shape()[0], l.outputs];
        vec![Tensor::new(shape, y).expect("forward output fits its shape")]
    }
}

fn main() -> Result<(), plumbline::Error> {
    let layer = Audited(RefCell::new(Calibration::new(3, 2)));
    // Three sensor readings per station (demo data), two calibrated outputs.
    let x = Tensor::new(vec![2, 3], vec![1.5, -0.4, 0.8, 0.2, 0.9, -1.1])?;
    let w = Tensor::new(vec![2, 3], vec![0.6, -0.1, 0.3, 0.05, 0.7, -0.2])?;
    let b = Tensor::new(vec![2], vec![0.1, -0.3])?;
    let report = Audit::new().run(&layer, &Args::new(vec![x], vec![w, b]))?;
    println!("{report}");
    report.assert_passed();
    Ok(())
}
