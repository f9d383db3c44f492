//! The audit's *numeric* values against published vector-Jacobian
//! products, under each scheme.
//!
//! Check values computed with mpmath 1.3 at 40 digits (printed to 20
//! significant digits; for layer norm the closed
//! form and mpmath numerical differentiation agree to 1e-25):
//! * softmax at z = (1, 2, 3) with g = (0.3, −0.1, 0.5):
//!   Jᵀg = (−0.0031651871008940680684, −0.10649525900195237283,
//!   0.1096604461028464409), from (Jᵀg)ⱼ = sⱼ(gⱼ − ⟨g, s⟩);
//! * cross-entropy with label 0 at z = (1, 2, 3): loss 2.4076059644443803045,
//!   ∇_z = s − e₀ = (−0.909969426829619542, 0.24472847105479765247,
//!   0.66524095577482188953);
//! * layer norm (no affine, biased variance, eps = 1e-5) at x = (1, 2, 4)
//!   with g = (0.3, −0.1, 0.5): dx = (0.16035554248097806675,
//!   −0.24053451638545857034, 0.080178973904480503586).
//!
//! # How a fixed g reaches the audit
//! The audit projects a layer's outputs on an upstream gradient w that it
//! draws from its seed; its numeric value for element j is ∂⟨w, y⟩/∂xⱼ.
//! To check against a *given* g, each layer here outputs one scalar, the
//! loss L = ⟨g, f(x)⟩ with g fixed inside the layer (for cross-entropy the
//! loss itself). Then the upstream is a single number w and the numeric
//! value is w·∂L/∂xⱼ = w·(Jᵀg)ⱼ. The audit hands the same upstream to the
//! backward, which records it; dividing the numeric value by it leaves the
//! published VJP. (Dividing by w costs at most one rounding; w is drawn
//! from (−1, 1) and is never near 0 for the seeds used, which the test
//! checks.) Three seeds, hence three different w, give the same quotient.

// Check values keep the digits of their source.
#![allow(clippy::excessive_precision)]

use std::cell::Cell;

use approx::assert_abs_diff_eq;
use plumbline::prelude::*;

const Z: [f64; 3] = [1.0, 2.0, 3.0];
const X: [f64; 3] = [1.0, 2.0, 4.0];
const G: [f64; 3] = [0.3, -0.1, 0.5];
const LN_EPS: f64 = 1e-5;

const SOFTMAX_VJP: [f64; 3] = [
    -0.003_165_187_100_894_068_068_4,
    -0.106_495_259_001_952_372_83,
    0.109_660_446_102_846_440_9,
];
const CROSS_ENTROPY_GRAD: [f64; 3] = [
    -0.909_969_426_829_619_542,
    0.244_728_471_054_797_652_47,
    0.665_240_955_774_821_889_53,
];
const CROSS_ENTROPY_LOSS: f64 = 2.407_605_964_444_380_304_5;
const LAYER_NORM_VJP: [f64; 3] = [
    0.160_355_542_480_978_066_75,
    -0.240_534_516_385_458_570_34,
    0.080_178_973_904_480_503_586,
];

/// softmax(z), max-shifted, for any scalar.
fn softmax<T: Scalar>(z: &[T]) -> Vec<T> {
    let m = z.iter().copied().fold(T::neg_infinity(), T::max);
    let e: Vec<T> = z.iter().map(|&v| (v - m).exp()).collect();
    let total: T = e.iter().copied().sum();
    e.into_iter().map(|v| v / total).collect()
}

/// Layer norm without affine, biased variance: (ŷ, σ̂).
fn layer_norm<T: Scalar>(x: &[T]) -> (Vec<T>, T) {
    let n = T::from(x.len()).unwrap();
    let mu = x.iter().copied().sum::<T>() / n;
    let var = x.iter().map(|&v| (v - mu) * (v - mu)).sum::<T>() / n;
    let sigma = (var + T::from(LN_EPS).unwrap()).sqrt();
    (x.iter().map(|&v| (v - mu) / sigma).collect(), sigma)
}

/// The three scalar losses of a 3-vector, each with a hand-written
/// backward, and the upstream the audit handed to it.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Kind {
    /// L = ⟨g, softmax(z)⟩.
    Softmax,
    /// L = −log softmax(z)[label], label a fixed input.
    CrossEntropy,
    /// L = ⟨g, layer_norm(x)⟩.
    LayerNorm,
}

struct Loss {
    kind: Kind,
    /// The upstream gradient of the last backward call.
    upstream: Cell<f64>,
}

impl Loss {
    fn new(kind: Kind) -> Self {
        Loss {
            kind,
            upstream: Cell::new(f64::NAN),
        }
    }
}

impl Layer for Loss {
    type Real = f64;
    fn signature(&self) -> Signature {
        let sig = Signature::new().input("x", "3");
        let sig = if self.kind == Kind::CrossEntropy {
            sig.fixed_input("label", "")
        } else {
            sig
        };
        sig.output("loss", "")
    }

    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let w = up[0].data()[0];
        self.upstream.set(w);
        let x = a.input(0).data();
        let grad: Vec<f64> = match self.kind {
            // (Jᵀg)ⱼ = sⱼ(gⱼ − ⟨g, s⟩).
            Kind::Softmax => {
                let s = softmax(x);
                let dot: f64 = s.iter().zip(G).map(|(s, g)| s * g).sum();
                s.iter().zip(G).map(|(s, g)| s * (g - dot)).collect()
            }
            // s − e_label.
            Kind::CrossEntropy => {
                let label = a.input(1).data()[0] as usize;
                let s = softmax(x);
                (0..3)
                    .map(|j| s[j] - if j == label { 1.0 } else { 0.0 })
                    .collect()
            }
            // (g − mean g − ŷ·mean(g⊙ŷ))/σ̂.
            Kind::LayerNorm => {
                let (y, sigma) = layer_norm(x);
                let mg = G.iter().sum::<f64>() / 3.0;
                let mgy = G.iter().zip(&y).map(|(g, y)| g * y).sum::<f64>() / 3.0;
                (0..3).map(|j| (G[j] - mg - y[j] * mgy) / sigma).collect()
            }
        };
        let dx = Tensor::new(vec![3], grad.iter().map(|d| w * d).collect()).unwrap();
        // A fixed input gets no gradient.
        Gradients::from(vec![dx])
    }
}

impl GenericForward for Loss {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let x = a.input(0).data();
        let g: Vec<T> = G.iter().map(|&v| T::from(v).unwrap()).collect();
        let loss = match self.kind {
            Kind::Softmax => softmax(x).into_iter().zip(&g).map(|(s, &g)| g * s).sum(),
            Kind::CrossEntropy => {
                let label = a.input(1).data()[0].to_usize().unwrap();
                // −log s_label = log Σ e^(zᵢ − m) − (z_label − m).
                let m = x.iter().copied().fold(T::neg_infinity(), T::max);
                let lse = x.iter().map(|&v| (v - m).exp()).sum::<T>().ln();
                lse - (x[label] - m)
            }
            Kind::LayerNorm => layer_norm(x)
                .0
                .into_iter()
                .zip(&g)
                .map(|(y, &g)| g * y)
                .sum(),
        };
        vec![Tensor::scalar(loss)]
    }
}

fn args(kind: Kind) -> Args<f64> {
    match kind {
        Kind::Softmax => Args::new(vec![Tensor::new(vec![3], Z.to_vec()).unwrap()], vec![]),
        Kind::CrossEntropy => Args::new(
            vec![
                Tensor::new(vec![3], Z.to_vec()).unwrap(),
                Tensor::scalar(0.0),
            ],
            vec![],
        ),
        Kind::LayerNorm => Args::new(vec![Tensor::new(vec![3], X.to_vec()).unwrap()], vec![]),
    }
}

/// Largest allowed |numeric/w − published|, relative to the largest
/// component of the published vector (softmax component 0 cancels:
/// its terms are ~0.03 while it is ~0.003, so each component is judged
/// against the vector's size, not its own).
fn tolerance(scheme: Scheme) -> f64 {
    match scheme {
        // One complex evaluation has no cancellation: a few roundings of the
        // terms (common practice; measured here ≤ 2.5e-16). 8 ε ≈ 4 ulps of
        // the largest component, 1.8e-15.
        Scheme::ComplexStep => 8.0 * f64::EPSILON,
        // Ridders in f64: 1e-14 to 1e-16 relative (measured in tests/schemes.rs);
        // common practice: 1e-12.
        Scheme::Ridders => 1e-12,
        // Central differences in f64 reach ~1e-10 (error model h²|f‴|/6 + ε|f|/h at h ≈ ε^(1/3));
        // common practice: 1e-8 relative.
        Scheme::Central => 1e-8,
        other => panic!("no tolerance for {other}"),
    }
}

const SCHEMES: [Scheme; 3] = [Scheme::ComplexStep, Scheme::Ridders, Scheme::Central];
const SEEDS: [u64; 3] = [1, 29, 0x00C0_FFEE];

/// Audits `kind` under `scheme` at every seed and returns the largest
/// |numeric/w − published| over elements and seeds, relative to the
/// largest published component.
fn worst_offset(kind: Kind, want: [f64; 3], scheme: Scheme) -> f64 {
    let size = want.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
    let mut worst = 0.0_f64;
    for seed in SEEDS {
        let layer = Loss::new(kind);
        let report = Audit::new()
            .scheme(scheme)
            .seed(seed)
            .run(&layer, &args(kind))
            .unwrap();
        // The hand-written backward agrees too (not the point here, but a
        // disagreement would make the comparison below suspect).
        assert!(report.passed(), "{kind:?} {scheme}:\n{report}");
        let row = report.row("x").expect("a row for x");
        assert_eq!(row.scheme, scheme);
        assert_eq!(row.elements.len(), 3, "every element checked");
        let w = layer.upstream.get();
        assert!(w.abs() > 0.05, "seed {seed}: upstream {w} too close to 0");
        for e in &row.elements {
            let got = e.numeric / w;
            let off = (got - want[e.index]).abs() / size;
            println!(
                "{kind:?} {scheme} seed {seed} (w = {w:.4}): x[{}] numeric/w = {got:.17e}, \
                 published {:.17e}, {off:.1e} off",
                e.index, want[e.index]
            );
            worst = worst.max(off);
        }
    }
    worst
}

fn numeric_matches(kind: Kind, want: [f64; 3]) {
    for scheme in SCHEMES {
        let off = worst_offset(kind, want, scheme);
        assert!(
            off <= tolerance(scheme),
            "{kind:?} {scheme}: numeric/w is {off:e} of the vector's size from the \
             published values, allowed {:e}",
            tolerance(scheme)
        );
    }
}

#[test]
fn softmax_vjp_numeric_values_match_the_published_vector() {
    numeric_matches(Kind::Softmax, SOFTMAX_VJP);
}

#[test]
fn cross_entropy_numeric_gradient_matches_the_published_vector() {
    numeric_matches(Kind::CrossEntropy, CROSS_ENTROPY_GRAD);
    // The loss value itself (mpmath 1.3, 40 digits): a few ulps.
    let loss = Loss::new(Kind::CrossEntropy).forward_generic(&args(Kind::CrossEntropy));
    let l = loss[0].data()[0];
    assert_abs_diff_eq!(
        l,
        CROSS_ENTROPY_LOSS,
        epsilon = 4.0 * f64::EPSILON * CROSS_ENTROPY_LOSS
    );
}

#[test]
fn layer_norm_vjp_numeric_values_match_the_published_vector() {
    numeric_matches(Kind::LayerNorm, LAYER_NORM_VJP);
}

#[test]
fn each_tolerance_is_tight_enough_to_see_a_wrong_value() {
    // One published component moved by 10 times a scheme's tolerance must
    // be outside that scheme's tolerance: the comparison cannot pass
    // whatever the values.
    for scheme in SCHEMES {
        for (kind, want) in [
            (Kind::Softmax, SOFTMAX_VJP),
            (Kind::CrossEntropy, CROSS_ENTROPY_GRAD),
            (Kind::LayerNorm, LAYER_NORM_VJP),
        ] {
            let size = want.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
            for k in 0..3 {
                let mut nudged = want;
                nudged[k] += 10.0 * tolerance(scheme) * size;
                let off = worst_offset(kind, nudged, scheme);
                assert!(
                    off > tolerance(scheme),
                    "{kind:?} {scheme}: component {k} moved, still within tolerance"
                );
            }
        }
    }
}
