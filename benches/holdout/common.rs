//! Shared pieces of the holdout layers: scalar helpers written for any
//! [`Scalar`], tensor construction, and the seeded argument draws.

use plumbline::scalar::Scalar;
use plumbline::Tensor;
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};

/// An `f64` constant in any scalar type.
pub fn k<T: Scalar>(v: f64) -> T {
    T::from(v).expect("constant fits the scalar type")
}

/// A tensor from a shape and row-major data (the lengths always match here).
pub fn tensor<T: Copy>(shape: &[usize], data: Vec<T>) -> Tensor<T> {
    Tensor::new(shape.to_vec(), data).expect("data length matches shape")
}

/// The logistic function 1/(1 + e^(−z)), evaluated on the side where the
/// exponential cannot overflow. Both branches are the same analytic
/// function, so the branch is not a kink.
pub fn sigmoid<T: Scalar>(z: T) -> T {
    if z >= T::zero() {
        T::one() / (T::one() + (-z).exp())
    } else {
        let e = z.exp();
        e / (T::one() + e)
    }
}

/// ln(1 + e^z) without overflow: z + ln(1 + e^(−z)) for z > 0.
pub fn softplus<T: Scalar>(z: T) -> T {
    if z > T::zero() {
        z + (-z).exp().ln_1p()
    } else {
        z.exp().ln_1p()
    }
}

/// Seeded draws of argument values with magnitudes spread over orders.
pub struct Draw {
    rng: StdRng,
    /// Smooth draws plant no exact kink points or ties (for the
    /// independent finite-difference check of the backward formulas).
    pub smooth: bool,
}

impl Draw {
    pub fn new(seed: u64, smooth: bool) -> Self {
        Draw {
            rng: StdRng::seed_from_u64(seed),
            smooth,
        }
    }

    /// Uniform in [lo, hi).
    pub fn uniform(&mut self, lo: f64, hi: f64) -> f64 {
        self.rng.random_range(lo..hi)
    }

    /// An integer in lo..=hi.
    pub fn int(&mut self, lo: usize, hi: usize) -> usize {
        self.rng.random_range(lo..=hi)
    }

    /// `true` with probability p.
    pub fn coin(&mut self, p: f64) -> bool {
        self.rng.random_range(0.0..1.0) < p
    }

    /// 10^u with u uniform in [lo, hi): a magnitude spread over orders.
    pub fn magnitude(&mut self, lo_exp: f64, hi_exp: f64) -> f64 {
        10f64.powf(self.uniform(lo_exp, hi_exp))
    }

    /// A kink is planted only in non-smooth draws, with probability p.
    pub fn plant(&mut self, p: f64) -> bool {
        !self.smooth && self.coin(p)
    }

    /// `n` values of scale `s`: uniform in (−s, s), a fifth of them shrunk
    /// by a further factor between 1 and 100 so that one tensor mixes
    /// magnitudes.
    pub fn values(&mut self, n: usize, s: f64) -> Vec<f64> {
        (0..n)
            .map(|_| {
                let v = self.uniform(-s, s);
                if self.coin(0.2) {
                    v / self.magnitude(0.0, 2.0)
                } else {
                    v
                }
            })
            .collect()
    }
}
