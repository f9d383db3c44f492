//! The directional screen of a large tensor, and the bisection that finds
//! the elements behind a failed screen.
//!
//! For a seeded Gaussian direction v over the tensor's elements, the
//! backward's projection ⟨g, v⟩ = Σⱼ gⱼvⱼ must equal the derivative of φ
//! along v, which one complex forward (or one real stencil) measures. This
//! is the dot-product test of adjoint code; its cost does not depend on the
//! tensor's size. Its error bar is an element's (the reference's own error
//! and the rounding floor of the bound rule) plus the backward's rounding
//! projected on v: with measured per-element roundings rⱼ and v Gaussian,
//! Σⱼ vⱼrⱼ is normal with standard deviation √(Σⱼ vⱼ²rⱼ²) whatever the
//! rⱼ are, so six of those bound it except with probability 2·10⁻⁹.
//!
//! An error vector e in the gradient shows along v as ⟨e, v⟩, normal with
//! standard deviation ‖e‖: it stays below a bound b with probability at
//! most √(2/π)·b/‖e‖ per direction.

use rand::SeedableRng;

use crate::error::Error;
use crate::layer::Forward;
use crate::report::Screen;
use crate::scheme::engine::Engine;
use crate::scheme::Scheme;
use crate::tensor::Tensor;
use crate::tolerance::Tolerance;

/// Standard deviations of the projected rounding allowed in a direction.
const SIGMAS: f64 = 6.0;

/// Bisection stops at pieces of at most this many elements, which are then
/// compared one by one.
const LEAF: usize = 8;

/// Failing pieces followed per level of the bisection.
const BRANCHES: usize = 4;

/// Elements sampled for the diagnosis after a failed screen.
const SAMPLE: usize = 32;

/// What one tensor's screen found, and which elements to compare one by
/// one (none when every direction agrees).
pub(crate) struct Screened {
    pub screen: Screen,
    pub suspects: Vec<usize>,
}

/// The tensor's data a screen needs.
pub(crate) struct Target<'a> {
    pub slot: usize,
    pub grad_index: usize,
    pub grad: &'a Tensor<f64>,
    /// The tensor's own values (non-finite ones are not moved).
    pub inputs: &'a [f64],
    pub scheme: Scheme,
}

/// One direction's comparison.
#[derive(Clone, Copy)]
struct Check {
    analytic: f64,
    numeric: f64,
    bound: f64,
}

impl Check {
    /// |a − n| over the bound (NaN never agrees).
    fn excess(&self) -> f64 {
        let e = (self.analytic - self.numeric).abs() / self.bound;
        if e.is_nan() {
            f64::INFINITY
        } else {
            e
        }
    }
    fn agrees(&self) -> bool {
        Tolerance::accepts((self.analytic - self.numeric).abs(), self.bound)
    }
}

/// Screens one tensor along `directions` seeded Gaussian directions.
pub(crate) fn screen<L: Forward + ?Sized>(
    engine: &mut Engine<'_, L>,
    t: &Target<'_>,
    tol: &Tolerance,
    layer_eps: f64,
    seed: u64,
    directions: usize,
) -> Result<Screened, Error> {
    let support: Vec<usize> = (0..t.inputs.len())
        .filter(|&j| t.inputs[j].is_finite())
        .collect();
    let rounding = rounding_per_element(engine, t, &support, layer_eps)?;
    let mut probe = Probe {
        engine,
        t,
        support,
        rounding,
        tol,
        layer_eps,
    };
    let mut rng = rand::rngs::StdRng::seed_from_u64(
        seed ^ 0x05C2_EE4E_D1EC ^ (t.slot as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15),
    );
    let mut worst: Option<Check> = None;
    let mut failed: Option<Vec<f64>> = None;
    let mut disagreeing = 0;
    for _ in 0..directions {
        let v: Vec<f64> = probe.support.iter().map(|_| gaussian(&mut rng)).collect();
        let check = probe.along(0..probe.support.len(), &v)?;
        if !check.agrees() {
            disagreeing += 1;
            failed.get_or_insert(v);
        }
        if worst.is_none_or(|w| check.excess() > w.excess()) {
            worst = Some(check);
        }
    }
    let (mut suspects, mut located) = (Vec::new(), 0);
    if let Some(v) = failed {
        // A seeded sample first, each element along its own axis: a bug
        // that touches many elements shows there, and the bisection is
        // only needed for one that touches few.
        suspects = sample(&probe.support, seed ^ t.slot as u64);
        if !probe.any_disagrees(&suspects)? {
            let narrowed = probe.bisect(&v)?;
            located = narrowed.len();
            suspects.extend(narrowed);
        }
        suspects.sort_unstable();
        suspects.dedup();
    }
    let w = worst.unwrap_or(Check {
        analytic: 0.0,
        numeric: 0.0,
        bound: 0.0,
    });
    Ok(Screened {
        screen: Screen {
            directions,
            disagreeing,
            analytic: w.analytic,
            numeric: w.numeric,
            bound: w.bound,
            located,
        },
        suspects,
    })
}

/// Each element's rounding in the backward: its measured scatter when the
/// inputs move by a few hundred ulps, and never below the bound rule's
/// floor for its own value.
fn rounding_per_element<L: Forward + ?Sized>(
    engine: &mut Engine<'_, L>,
    t: &Target<'_>,
    support: &[usize],
    layer_eps: f64,
) -> Result<Vec<f64>, Error> {
    let g = t.grad.data();
    support
        .iter()
        .map(|&j| {
            let scatter = engine.backward_spread(t.grad_index, j, g[j])?;
            Ok(scatter.max(crate::audit::ROUNDING_ULPS * layer_eps * g[j].abs()))
        })
        .collect()
}

/// What every directional test of one tensor shares.
struct Probe<'p, 'e, 'a, L: Forward + ?Sized> {
    engine: &'p mut Engine<'e, L>,
    t: &'p Target<'a>,
    /// The elements that can move (finite inputs), ascending.
    support: Vec<usize>,
    /// Their roundings in the backward, in the same order.
    rounding: Vec<f64>,
    tol: &'p Tolerance,
    layer_eps: f64,
}

impl<L: Forward + ?Sized> Probe<'_, '_, '_, L> {
    /// ⟨g, v⟩ against the derivative of φ along v, over the elements at
    /// positions `part` of the support, with their weights `v` (one per
    /// position of `part`).
    fn along(&mut self, part: std::ops::Range<usize>, v: &[f64]) -> Result<Check, Error> {
        let g = self.t.grad.data();
        let elements = &self.support[part.clone()];
        let direction: Vec<(usize, f64)> =
            elements.iter().copied().zip(v.iter().copied()).collect();
        let analytic: f64 = direction.iter().map(|&(j, vj)| g[j] * vj).sum();
        let projected = v
            .iter()
            .zip(&self.rounding[part])
            .map(|(vj, r)| (vj * r) * (vj * r))
            .sum::<f64>()
            .sqrt();
        let mut est = self
            .engine
            .directional(self.t.slot, &direction, self.t.scheme)?;
        est.error += SIGMAS * projected;
        let bound = self.tol.bound(&est, analytic, self.layer_eps);
        Ok(Check {
            analytic,
            numeric: est.value,
            bound,
        })
    }

    /// `true` if any of the elements `picks` (flat positions) disagrees on
    /// its own, its axis as the direction.
    fn any_disagrees(&mut self, picks: &[usize]) -> Result<bool, Error> {
        for &j in picks {
            let Ok(k) = self.support.binary_search(&j) else {
                continue;
            };
            if !self.along(k..k + 1, &[1.0])?.agrees() {
                return Ok(true);
            }
        }
        Ok(false)
    }

    /// Splits the elements along a failed direction `v` in halves, keeps
    /// the halves that still disagree (at most [`BRANCHES`] per level, the
    /// worst first), and returns the elements of the pieces of at most
    /// [`LEAF`] elements it reaches.
    fn bisect(&mut self, v: &[f64]) -> Result<Vec<usize>, Error> {
        let whole = 0..self.support.len();
        let mut level = vec![whole];
        let mut found = Vec::new();
        while !level.is_empty() {
            let mut next: Vec<(std::ops::Range<usize>, f64)> = Vec::new();
            for piece in level {
                if piece.len() <= LEAF {
                    found.extend_from_slice(&self.support[piece]);
                    continue;
                }
                let mid = piece.start + piece.len() / 2;
                for half in [piece.start..mid, mid..piece.end] {
                    let check = self.along(half.clone(), &v[half.clone()])?;
                    if !check.agrees() {
                        next.push((half, check.excess()));
                    }
                }
            }
            next.sort_by(|x, y| y.1.total_cmp(&x.1));
            next.truncate(BRANCHES);
            level = next.into_iter().map(|(piece, _)| piece).collect();
        }
        Ok(found)
    }
}

/// A seeded sample of the tensor's elements, for the diagnosis.
fn sample(support: &[usize], seed: u64) -> Vec<usize> {
    let picks = super::run::sample(support.len(), Some(SAMPLE), seed, 0);
    picks.into_iter().map(|k| support[k]).collect()
}

/// A seeded sample of a tensor of `len` elements (flat positions).
pub(crate) fn sample_of(len: usize, seed: u64, slot: usize) -> Vec<usize> {
    super::run::sample(len, Some(SAMPLE), seed, slot)
}

/// The most estimates a screen of `len` elements can take: the directions,
/// every level of the bisection with [`BRANCHES`] pieces split in two, and
/// the elements compared one by one.
pub(crate) fn worst_case(len: usize, directions: usize) -> u64 {
    let mut levels = 0;
    let mut piece = len;
    while piece > LEAF {
        piece = piece.div_ceil(2);
        levels += 1;
    }
    (directions + levels * 2 * BRANCHES + BRANCHES * 2 * LEAF + SAMPLE) as u64
}

/// The note under the table for a screened tensor.
pub(crate) fn note(name: &str, s: &Screen, len: usize) -> String {
    use crate::format::num;
    if s.disagreeing == 0 {
        format!(
            "`{name}`: screened along {} random directions, all agree (worst: ⟨gradient, v⟩ = {}, derivative {}, bound {}); \
             its {len} elements were not compared one by one. An error e in the gradient escapes all directions with \
             probability at most (0.8·b/‖e‖)^{} (Gaussian directions, b the bound)",
            s.directions,
            num(s.analytic),
            num(s.numeric),
            num(s.bound),
            s.directions
        )
    } else {
        let how = if s.located == 0 {
            "a seeded sample compared one by one shows where".to_string()
        } else {
            format!(
                "{} elements located by bisection, and a seeded sample, compared one by one",
                s.located
            )
        };
        format!(
            "`{name}`: screen disagrees along {} of {} random directions (⟨gradient, v⟩ = {}, derivative {}, bound {}); {how}",
            s.disagreeing,
            s.directions,
            num(s.analytic),
            num(s.numeric),
            num(s.bound),
        )
    }
}

/// A standard normal number (Box–Muller).
fn gaussian(rng: &mut impl rand::Rng) -> f64 {
    use rand::RngExt;
    let u: f64 = rng.random_range(f64::EPSILON..1.0);
    let w: f64 = rng.random_range(0.0..1.0);
    (-2.0 * u.ln()).sqrt() * (std::f64::consts::TAU * w).cos()
}
