//! Verdicts from the error bar, with no hand-set tolerance: a correct f32
//! layer norm gives no false alarm over 500 random inputs, and the subtle
//! "epsilon left out of the backward" bug is caught every time, in f32 and
//! in f64.

// Check values keep the digits of their source.
#![allow(clippy::excessive_precision)]

mod common;

use std::marker::PhantomData;

use approx::abs_diff_eq;
use plumbline::{Args, Audit, GenericForward, Gradients, Layer, Real, Scalar, Signature, Tensor};

const EPS: f64 = 1e-5;

/// Layer norm over the last axis, no affine, biased variance:
/// ŷ = (x − μ)/√(var + eps). Backward (derived by hand, closed form):
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

impl<R: Real> Layer for LayerNorm<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "rows, features")
            .output("y", "rows, features")
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

impl<R: Real> GenericForward for LayerNorm<R> {
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

/// Σᵢ gᵢ ∂yᵢ/∂x_j for every j, by one complex-step forward per j.
fn vjp_by_complex_step<L: GenericForward>(layer: &L, x: &[f64], g: &[f64]) -> Vec<f64> {
    use plumbline::scalar::ComplexStep;
    let h = 1e-20;
    (0..x.len())
        .map(|j| {
            let xs: Vec<ComplexStep<f64>> = x
                .iter()
                .enumerate()
                .map(|(k, &v)| ComplexStep::new(v, if k == j { h } else { 0.0 }))
                .collect();
            let args = Args::new(vec![Tensor::new(vec![1, x.len()], xs).unwrap()], vec![]);
            let y = layer.forward_generic(&args).remove(0);
            y.data().iter().zip(g).map(|(yi, gi)| gi * yi.im / h).sum()
        })
        .collect()
}

fn ulps(a: f64, b: f64) -> f64 {
    (a - b).abs() / (f64::EPSILON * b.abs())
}

#[test]
fn layer_norm_vjp_matches_the_closed_form_oracle() {
    // Layer norm without affine, biased variance, eps = 1e-5, x = (1, 2, 4),
    // g = (0.3, −0.1, 0.5). Closed form dx = (g − mean g − ŷ·mean(g⊙ŷ))/σ̂,
    // evaluated with mpmath at 40 digits (agrees with mpmath numerical
    // differentiation to 1e-25).
    let want = [
        0.160_355_542_480_978_066_75,
        -0.240_534_516_385_458_570_34,
        0.080_178_973_904_480_503_586,
    ];
    let (x, g) = ([1.0, 2.0, 4.0], [0.3, -0.1, 0.5]);
    let cs = vjp_by_complex_step(&LayerNorm::<f64>::new(false), &x, &g);
    let args = Args::new(vec![Tensor::new(vec![1, 3], x.to_vec()).unwrap()], vec![]);
    let up = [Tensor::new(vec![1, 3], g.to_vec()).unwrap()];
    let hand = LayerNorm::<f64>::new(false).backward(&args, &up);
    for k in 0..3 {
        // The component sums three terms of size ~0.3 to ~0.16: a few ulp of
        // the terms, not of the result.
        assert!(
            ulps(cs[k], want[k]) < 16.0,
            "complex step dx[{k}] {} vs {}",
            cs[k],
            want[k]
        );
        let a = hand.get(0).unwrap().data()[k];
        assert!(
            ulps(a, want[k]) < 16.0,
            "backward dx[{k}] {a} vs {}",
            want[k]
        );
    }
}

/// Softmax over the last axis, generic.
struct Softmax;

impl Layer for Softmax {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("z", "rows, classes")
            .output("s", "rows, classes")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let s = &self.forward_generic(a)[0];
        let g = up[0].data();
        let dot: f64 = s.data().iter().zip(g).map(|(s, g)| s * g).sum();
        let dz: Vec<f64> = s.data().iter().zip(g).map(|(s, g)| s * (g - dot)).collect();
        Gradients::from(vec![Tensor::new(s.shape().to_vec(), dz).unwrap()])
    }
}

impl GenericForward for Softmax {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let z = a.input(0);
        let m = z.data().iter().copied().fold(T::neg_infinity(), T::max);
        let e: Vec<T> = z.data().iter().map(|&v| (v - m).exp()).collect();
        let total = e.iter().copied().sum::<T>();
        vec![Tensor::new(z.shape().to_vec(), e.iter().map(|&v| v / total).collect()).unwrap()]
    }
}

#[test]
fn softmax_vjp_matches_the_closed_form_oracle() {
    // z = (1, 2, 3), g = (0.3, −0.1, 0.5): (Jᵀg)ⱼ = sⱼ(gⱼ − ⟨g, s⟩), evaluated
    // with mpmath at 40 digits.
    let want = [
        -0.003_165_187_100_894_068_068_4,
        -0.106_495_259_001_952_372_83,
        0.109_660_446_102_846_440_9,
    ];
    let cs = vjp_by_complex_step(&Softmax, &[1.0, 2.0, 3.0], &[0.3, -0.1, 0.5]);
    for k in 0..3 {
        // Component 0 cancels (terms ~0.03): judge against the terms' size.
        assert!(
            abs_diff_eq!(cs[k], want[k], epsilon = 8.0 * f64::EPSILON * 0.3),
            "dz[{k}] {} vs {}",
            cs[k],
            want[k]
        );
    }
    let z = Tensor::new(vec![1, 3], vec![1.0, 2.0, 3.0]).unwrap();
    let r = Audit::new()
        .run(&Softmax, &Args::new(vec![z], vec![]))
        .unwrap();
    assert!(r.passed(), "{r}");
}

#[test]
fn fixed_approx_style_bounds_replace_the_error_bar() {
    let args = input::<f64>(3, 2, 8);
    let buggy = LayerNorm::<f64>::new(true);
    // The eps bug is ~1e-4 relative here: a loose fixed bound lets it pass,
    // a tight one does not; the report says which rule applied.
    let loose = Audit::new()
        .max_relative(1e-2)
        .max_absolute(1e-6)
        .run(&buggy, &args)
        .unwrap();
    assert!(loose.passed(), "{loose}");
    assert!(loose.to_string().contains("relative 0.01"), "{loose}");
    let tight = Audit::new().max_relative(1e-8).run(&buggy, &args).unwrap();
    assert!(!tight.passed(), "{tight}");
}

/// y = tanh(x), with the textbook backward g·(1 − y²): correct, but at
/// saturation `1 − y²` has an absolute rounding error of ~ε however small
/// the derivative is.
struct Tanh;

impl Layer for Tanh {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new().input("x", "n").output("y", "n")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let x = a.input(0);
        let dx = Tensor::from_fn(x.shape().to_vec(), |ix| {
            let t = x.get(ix).unwrap().tanh();
            up[0].get(ix).unwrap() * (1.0 - t * t)
        });
        Gradients::from(vec![dx])
    }
}

impl GenericForward for Tanh {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        vec![a.input(0).map(|x| x.tanh())]
    }
}

#[test]
fn saturated_tanh_with_a_textbook_backward_is_not_a_false_alarm() {
    for scale in [1.0, 4.0, 8.0, 12.0] {
        let v = common::values(16, 77);
        let x = Tensor::new(vec![16], v.iter().map(|t| t * scale).collect()).unwrap();
        let r = Audit::new()
            .run(&Tanh, &Args::new(vec![x], vec![]))
            .unwrap();
        assert!(r.passed(), "inputs up to {scale}: {r}");
    }
}

/// y = 40x − 10 as a plain `Layer` (Ridders in f64): outputs far larger
/// than the derivative's terms.
struct Offset;

impl plumbline::Layer for Offset {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new().input("x", "n").output("y", "n")
    }
    fn backward(&self, _: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        Gradients::from(vec![up[0].map(|g| 40.0 * g)])
    }
}

impl plumbline::Forward for Offset {
    fn forward(&self, a: &Args<f64>) -> Vec<Tensor<f64>> {
        vec![a.input(0).map(|x| 40.0 * x - 10.0)]
    }
}

#[test]
fn ridders_error_bar_includes_the_rounding_of_large_outputs() {
    for seed in 0..50 {
        let x = common::tensor::<f64>(&[6], seed);
        let r = Audit::new()
            .seed(seed)
            .run(&Offset, &Args::new(vec![x], vec![]))
            .unwrap();
        assert!(r.passed(), "seed {seed}: {r}");
        assert_eq!(r.rows[0].scheme, plumbline::Scheme::Ridders);
    }
}

/// A generic forward that leaves the `Scalar` path: it computes tanh on an
/// `f64` copy, which drops the complex-step derivative.
struct LeakyTanh;

impl Layer for LeakyTanh {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new().input("x", "n").output("y", "n")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        Tanh.backward(a, up)
    }
}

impl GenericForward for LeakyTanh {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        vec![a
            .input(0)
            .map(|x| T::from(x.to_f64().unwrap_or(f64::NAN).tanh()).unwrap_or(T::nan()))]
    }
}

#[test]
fn a_forward_that_drops_the_complex_step_falls_back_to_ridders_with_a_note() {
    let x = common::tensor::<f64>(&[5], 3);
    let r = Audit::new()
        .run(&LeakyTanh, &Args::new(vec![x.clone()], vec![]))
        .unwrap();
    assert!(r.passed(), "{r}");
    assert_eq!(r.rows[0].scheme, plumbline::Scheme::Ridders);
    assert_eq!(r.notes.len(), 1, "{r}");
    assert!(r.to_string().contains("leaves the Scalar path"), "{r}");
    // A forward that stays on the path gets no note.
    let r = Audit::new()
        .run(&Tanh, &Args::new(vec![x], vec![]))
        .unwrap();
    assert!(r.notes.is_empty() && r.rows[0].scheme == plumbline::Scheme::ComplexStep);
}
