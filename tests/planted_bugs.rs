//! Every scheme, not only the default one, on layers with planted bugs.
//!
//! The layer is a frost-risk score for orchard blocks from weather-station
//! readings. Each of its three tensors gets one planted bug of a common
//! kind (a sign flip, a factor of two, a term left out of the chain rule).
//! Under each of the three schemes (complex step, Ridders, central
//! differences) the correct backward must pass and each buggy one must fail,
//! on the tensor the bug is in, with the matching kind of diagnosis, while
//! the tensors the bug does not touch agree.
//!
//! The correct backward below is derived by hand from the forward with the
//! chain rule and σ′ = σ(1 − σ) (derived from DLMF 4.28.1–4.28.4); nothing in it is copied from the library.

use std::marker::PhantomData;

use approx::{abs_diff_eq, assert_abs_diff_eq};
use plumbline::prelude::*;
use plumbline::{Diagnosis, Row};

/// Cold and calm nights are the frost nights: the interaction coefficient
/// of temperature and wind in the score.
const COLD_CALM: f64 = -0.8;

/// A planted bug in the backward.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Bug {
    None,
    /// The weight gradient has the wrong sign.
    SignFlip,
    /// The bias gradient is doubled.
    FactorTwo,
    /// The readings gradient leaves out the temperature × wind term.
    MissingTerm,
}

/// Frost risk per orchard block, from the readings of its weather station:
/// `risk[s] = σ(Σ_k w[k]·x[s, k] + b[0] + c·x[s, 0]·x[s, 2])`, where the
/// features are (air temperature, dew-point depression, wind speed), all
/// standardised, and c = `COLD_CALM`.
struct FrostRisk<R> {
    bug: Bug,
    _r: PhantomData<R>,
}

impl<R> FrostRisk<R> {
    fn new(bug: Bug) -> Self {
        FrostRisk {
            bug,
            _r: PhantomData,
        }
    }
}

fn sigmoid<T: Scalar>(z: T) -> T {
    T::one() / (T::one() + (-z).exp())
}

impl<R: Real> Layer for FrostRisk<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("readings", "stations, 3")
            .param("w", "3")
            .param("b", "1")
            .output("risk", "stations")
    }

    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let (x, w, b) = (a.input(0), a.param(0), a.param(1));
        let n = x.shape()[0];
        let c = R::from_f64(COLD_CALM);
        // dz[s] = g[s]·σ(z)(1 − σ(z)).
        let dz: Vec<R> = (0..n)
            .map(|s| {
                let z = w[[0]] * x[[s, 0]]
                    + w[[1]] * x[[s, 1]]
                    + w[[2]] * x[[s, 2]]
                    + b[[0]]
                    + c * x[[s, 0]] * x[[s, 2]];
                let p = sigmoid(z);
                up[0][[s]] * p * (R::one() - p)
            })
            .collect();
        let interaction = self.bug != Bug::MissingTerm;
        let dx = Tensor::from_fn(vec![n, 3], |ix| {
            let (s, k) = (ix[0], ix[1]);
            let mut slope = w[[k]];
            if interaction {
                slope += match k {
                    0 => c * x[[s, 2]],
                    2 => c * x[[s, 0]],
                    _ => R::zero(),
                };
            }
            dz[s] * slope
        });
        let sign = if self.bug == Bug::SignFlip {
            -R::one()
        } else {
            R::one()
        };
        let dw = Tensor::from_fn(vec![3], |ix| {
            sign * (0..n).map(|s| dz[s] * x[[s, ix[0]]]).sum::<R>()
        });
        let factor = if self.bug == Bug::FactorTwo {
            R::from_f64(2.0)
        } else {
            R::one()
        };
        let db = Tensor::from_fn(vec![1], |_| factor * dz.iter().copied().sum::<R>());
        Gradients::from(vec![dx, dw, db])
    }
}

impl<R: Real> GenericForward for FrostRisk<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, w, b) = (a.input(0), a.param(0), a.param(1));
        let c = T::from(COLD_CALM).unwrap();
        vec![Tensor::from_fn(vec![x.shape()[0]], |ix| {
            let s = ix[0];
            let mut z = b[[0]] + c * x[[s, 0]] * x[[s, 2]];
            for k in 0..3 {
                z += w[[k]] * x[[s, k]];
            }
            sigmoid(z)
        })]
    }
}

/// Deterministic readings in [−1.5, 1.5] (standardised units) for four
/// stations, weights in [−1, 1] and a bias in [−0.5, 0.5], drawn from
/// `seed` by a xorshift generator (no library randomness involved).
fn station_args<R: Real>(seed: u64) -> Args<R> {
    let mut state = seed.wrapping_mul(0x9E37_79B9_7F4A_7C15) | 1;
    let mut next = move |scale: f64| {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        let u = (state >> 11) as f64 / (1u64 << 53) as f64;
        R::from_f64(scale * (2.0 * u - 1.0))
    };
    let readings = Tensor::from_fn(vec![4, 3], |_| next(1.5));
    let w = Tensor::from_fn(vec![3], |_| next(1.0));
    let b = Tensor::from_fn(vec![1], |_| next(0.5));
    Args::new(vec![readings], vec![w, b])
}

const SCHEMES: [Scheme; 3] = [Scheme::ComplexStep, Scheme::Ridders, Scheme::Central];
const SEEDS: [u64; 5] = [1, 2, 3, 4, 5];

/// The tensor a bug is planted in, and whether the diagnosis fits it.
fn expected(bug: Bug) -> (&'static str, fn(&Diagnosis) -> bool) {
    match bug {
        Bug::None => unreachable!("the correct layer has no failing row"),
        Bug::SignFlip => ("w", |d| matches!(d, Diagnosis::SignFlipped)),
        Bug::FactorTwo => (
            "b",
            |d| matches!(d, Diagnosis::Scaled { factor, .. } if abs_diff_eq!(*factor, 2.0, epsilon = 1e-3)),
        ),
        // Only the temperature and wind columns lose a term; the dew-point
        // column stays right, so some (not all) elements are wrong.
        Bug::MissingTerm => ("readings", |d| {
            matches!(d, Diagnosis::Partial { .. } | Diagnosis::WrongValues { .. })
        }),
    }
}

fn run<R: Real>(bug: Bug, scheme: Scheme, seed: u64) -> Report {
    Audit::new()
        .scheme(scheme)
        .seed(seed)
        .run(&FrostRisk::<R>::new(bug), &station_args::<R>(seed))
        .expect("the arguments fit the signature")
}

fn check_precision<R: Real>() {
    let mut problems = Vec::new();
    for scheme in SCHEMES {
        for seed in SEEDS {
            let ok = run::<R>(Bug::None, scheme, seed);
            if !ok.passed() {
                problems.push(format!("correct, {scheme}, seed {seed}: false alarm\n{ok}"));
            }
            for r in &ok.rows {
                assert_eq!(r.scheme, scheme, "the scheme asked for is the one used");
            }
            for bug in [Bug::SignFlip, Bug::FactorTwo, Bug::MissingTerm] {
                let report = run::<R>(bug, scheme, seed);
                let (tensor, fits) = expected(bug);
                let row: &Row = report.row(tensor).expect("a row per tensor");
                let others_agree = report
                    .rows
                    .iter()
                    .filter(|r| r.name != tensor)
                    .all(|r| r.verdict.is_pass());
                let diagnosed = row.diagnosis.as_ref().is_some_and(fits);
                if report.passed() || row.verdict.is_pass() || !others_agree || !diagnosed {
                    problems.push(format!(
                        "{bug:?}, {scheme}, seed {seed}: expected `{tensor}` to fail with the \
                         matching diagnosis, the others to agree\n{report}"
                    ));
                }
            }
        }
    }
    assert!(problems.is_empty(), "{}", problems.join("\n"));
}

#[test]
fn every_scheme_passes_the_correct_f64_layer_and_fails_each_bug() {
    check_precision::<f64>();
}

#[test]
fn every_scheme_passes_the_correct_f32_layer_and_fails_each_bug() {
    // An f32 layer: the references are still computed in f64 from the
    // generic forward; the f32 backward's own rounding sets the bound.
    check_precision::<f32>();
}

#[test]
fn the_correct_backward_matches_the_chain_rule_at_a_hand_checked_point() {
    // One station, x = (0, 0, 0), w = (0.5, −0.25, 1), b = 0: z = 0,
    // σ(0) = 1/2, σ′(0) = 1/4 (exact). With upstream 1, dx = w/4 (the
    // interaction term vanishes at x = 0), dw = x·σ′ = 0, db = 1/4.
    let args = Args::new(
        vec![Tensor::new(vec![1, 3], vec![0.0, 0.0, 0.0]).unwrap()],
        vec![
            Tensor::new(vec![3], vec![0.5, -0.25, 1.0]).unwrap(),
            Tensor::new(vec![1], vec![0.0]).unwrap(),
        ],
    );
    let g = FrostRisk::<f64>::new(Bug::None).backward(&args, &[Tensor::full(vec![1], 1.0)]);
    assert_eq!(g.get(0).unwrap().data(), &[0.125, -0.0625, 0.25]);
    assert_eq!(g.get(1).unwrap().data(), &[0.0, 0.0, 0.0]);
    assert_eq!(g.get(2).unwrap().data(), &[0.25]);
    // At x = (1, 0, 1) the interaction adds c·x₂ = −0.8 to the temperature
    // slope and c·x₀ = −0.8 to the wind slope: z = 0.5 + 1 − 0.8 = 0.7.
    let args = Args::new(
        vec![Tensor::new(vec![1, 3], vec![1.0, 0.0, 1.0]).unwrap()],
        vec![
            Tensor::new(vec![3], vec![0.5, -0.25, 1.0]).unwrap(),
            Tensor::new(vec![1], vec![0.0]).unwrap(),
        ],
    );
    let p = 1.0 / (1.0 + (-0.7_f64).exp());
    let s = p * (1.0 - p);
    let g = FrostRisk::<f64>::new(Bug::None).backward(&args, &[Tensor::full(vec![1], 1.0)]);
    let want = Tensor::new(
        vec![1, 3],
        vec![s * (0.5 - 0.8), s * -0.25, s * (1.0 - 0.8)],
    )
    .unwrap();
    assert_abs_diff_eq!(g.get(0).unwrap(), &want, epsilon = 4.0 * f64::EPSILON);
}
