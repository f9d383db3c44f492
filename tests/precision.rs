//! Verdicts from the error bar, with no hand-set tolerance: a correct f32
//! layer norm gives no false alarm over 500 random inputs, and the subtle
//! "epsilon left out of the backward" bug is caught every time, in f32 and
//! in f64.

mod common;

use std::marker::PhantomData;

use plumbline::{Args, Audit, GenericLayer, Gradients, Real, Scalar, Signature, Tensor};

const EPS: f64 = 1e-5;

/// Layer norm over the last axis, no affine, biased variance:
/// ŷ = (x − μ)/√(var + eps). Backward (derived, METHODS-style closed form):
/// dx = (g − mean(g) − ŷ·mean(g⊙ŷ)) / √(var + eps).
struct LayerNorm<R> {
    /// Leave eps out of the backward's σ (the subtle bug).
    eps_left_out: bool,
    _r: PhantomData<R>,
}

impl<R> LayerNorm<R> {
    fn new(eps_left_out: bool) -> Self {
        LayerNorm {
            eps_left_out,
            _r: PhantomData,
        }
    }
}

impl<R: Real> GenericLayer for LayerNorm<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "rows, features")
            .output("y", "rows, features")
    }
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let x = a.input(0);
        let (n, d) = (x.shape()[0], x.shape()[1]);
        let mut y = x.clone();
        let dd = T::from(d).unwrap();
        for r in 0..n {
            let row = &x.data()[r * d..(r + 1) * d];
            let mu = row.iter().copied().sum::<T>() / dd;
            let var = row.iter().map(|&v| (v - mu) * (v - mu)).sum::<T>() / dd;
            let sigma = (var + T::from(EPS).unwrap()).sqrt();
            for (o, &v) in y.data_mut()[r * d..(r + 1) * d].iter_mut().zip(row) {
                *o = (v - mu) / sigma;
            }
        }
        vec![y]
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let x = a.input(0);
        let (n, d) = (x.shape()[0], x.shape()[1]);
        let dd = R::from_f64(d as f64);
        let mut dx = x.clone();
        for r in 0..n {
            let row = &x.data()[r * d..(r + 1) * d];
            let g = &up[0].data()[r * d..(r + 1) * d];
            let mu = row.iter().copied().sum::<R>() / dd;
            let var = row.iter().map(|&v| (v - mu) * (v - mu)).sum::<R>() / dd;
            let eps = if self.eps_left_out {
                R::zero()
            } else {
                R::from_f64(EPS)
            };
            let sigma = (var + eps).sqrt();
            let yhat: Vec<R> = row.iter().map(|&v| (v - mu) / sigma).collect();
            let mg = g.iter().copied().sum::<R>() / dd;
            let mgy = g.iter().zip(&yhat).map(|(&a, &b)| a * b).sum::<R>() / dd;
            for k in 0..d {
                dx.data_mut()[r * d + k] = (g[k] - mg - yhat[k] * mgy) / sigma;
            }
        }
        Gradients::from(vec![dx])
    }
}

/// Activations of a typical scale: rows of U(−0.5, 0.5), var ≈ 1/12.
fn input<R: Real>(case: u64, rows: usize, features: usize) -> Args<R> {
    let v = common::values(rows * features, 1000 + case);
    let x = Tensor::new(
        vec![rows, features],
        v.iter().map(|&v| R::from_f64(0.5 * v)).collect(),
    );
    Args::new(vec![x.unwrap()], vec![])
}

fn sweep<R: Real>(cases: u64) -> (usize, usize, f64, f64) {
    let (mut false_alarms, mut missed) = (0, 0);
    let (mut worst_ok, mut best_bug) = (0.0_f64, f64::INFINITY);
    for case in 0..cases {
        let args = input::<R>(case, 2, 8);
        let audit = Audit::new().seed(case);
        let ok = audit.run(&LayerNorm::<R>::new(false), &args).unwrap();
        let bug = audit.run(&LayerNorm::<R>::new(true), &args).unwrap();
        false_alarms += usize::from(!ok.passed());
        missed += usize::from(bug.passed());
        let ratio = |r: &plumbline::Report| {
            r.rows[0]
                .elements
                .iter()
                .map(|e| (e.analytic - e.numeric).abs() / e.bound)
                .fold(0.0, f64::max)
        };
        worst_ok = worst_ok.max(ratio(&ok));
        best_bug = best_bug.min(ratio(&bug));
    }
    (false_alarms, missed, worst_ok, best_bug)
}

#[test]
fn f32_layer_norm_500_inputs_no_false_alarm_and_eps_bug_caught() {
    let (fa, missed, worst_ok, best_bug) = sweep::<f32>(500);
    println!(
        "f32: worst correct |a-n|/bound = {worst_ok:.3}, smallest bug |a-n|/bound = {best_bug:.3}"
    );
    assert_eq!(fa, 0, "false alarms on a correct f32 layer");
    assert_eq!(missed, 0, "eps bug missed in f32");
}

#[test]
fn f64_layer_norm_no_false_alarm_and_eps_bug_caught() {
    let (fa, missed, worst_ok, best_bug) = sweep::<f64>(200);
    println!(
        "f64: worst correct |a-n|/bound = {worst_ok:.3}, smallest bug |a-n|/bound = {best_bug:.3}"
    );
    assert_eq!(fa, 0, "false alarms on a correct f64 layer");
    assert_eq!(missed, 0, "eps bug missed in f64");
}
