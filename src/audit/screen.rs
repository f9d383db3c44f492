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
    let mut rng = rand::rngs::StdRng::seed_from_u64(
        seed ^ 0x05C2_EE4E_D1EC ^ (t.slot as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15),
    );
    let mut worst: Option<Check> = None;
    let mut failed: Option<Vec<f64>> = None;
    let mut disagreeing = 0;
    for _ in 0..directions {
        let v: Vec<f64> = support.iter().map(|_| gaussian(&mut rng)).collect();
        let check = along(engine, t, &support, &v, &rounding, tol, layer_eps)?;
        if !check.agrees() {
            disagreeing += 1;
            failed.get_or_insert(v);
        }
        if worst.is_none_or(|w| check.excess() > w.excess()) {
            worst = Some(check);
        }
    }
    let suspects = match failed {
        None => Vec::new(),
        Some(v) => {
            // A seeded sample first, each element along its own axis: a
            // bug that touches many elements shows there, and the
            // bisection is only needed for one that touches few.
            let mut found = sample(&support, seed ^ t.slot as u64);
            let mut located = 0;
            if !any_disagrees(engine, t, &support, &found, &rounding, tol, layer_eps)? {
                let narrowed = bisect(engine, t, &support, &v, &rounding, tol, layer_eps)?;
                located = narrowed.len();
                found.extend(narrowed);
            }
            found.sort_unstable();
            found.dedup();
            let w = worst.unwrap_or(Check {
                analytic: f64::NAN,
                numeric: f64::NAN,
                bound: f64::NAN,
            });
            return Ok(Screened {
                screen: Screen {
                    directions,
                    disagreeing,
                    analytic: w.analytic,
                    numeric: w.numeric,
                    bound: w.bound,
                    located,
                },
                suspects: found,
            });
        }
    };
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
            located: 0,
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

/// ⟨g, v⟩ against the derivative of φ along v, over the elements `part`
/// (flat positions), with their weights `v` and roundings `rounding`.
fn along<L: Forward + ?Sized>(
    engine: &mut Engine<'_, L>,
    t: &Target<'_>,
    part: &[usize],
    v: &[f64],
    rounding: &[f64],
    tol: &Tolerance,
    layer_eps: f64,
) -> Result<Check, Error> {
    let g = t.grad.data();
    let direction: Vec<(usize, f64)> = part.iter().copied().zip(v.iter().copied()).collect();
    let analytic: f64 = direction.iter().map(|&(j, vj)| g[j] * vj).sum();
    let projected = part
        .iter()
        .zip(v)
        .zip(rounding)
        .map(|((_, vj), r)| (vj * r) * (vj * r))
        .sum::<f64>()
        .sqrt();
    let mut est = engine.directional(t.slot, &direction, t.scheme)?;
    est.error += SIGMAS * projected;
    let bound = tol.bound(&est, analytic, layer_eps);
    Ok(Check {
        analytic,
        numeric: est.value,
        bound,
    })
}

/// `true` if any of the elements `picks` disagrees on its own (its axis as
/// the direction).
fn any_disagrees<L: Forward + ?Sized>(
    engine: &mut Engine<'_, L>,
    t: &Target<'_>,
    support: &[usize],
    picks: &[usize],
    rounding: &[f64],
    tol: &Tolerance,
    layer_eps: f64,
) -> Result<bool, Error> {
    for &j in picks {
        let Ok(k) = support.binary_search(&j) else {
            continue;
        };
        if !along(engine, t, &[j], &[1.0], &rounding[k..=k], tol, layer_eps)?.agrees() {
            return Ok(true);
        }
    }
    Ok(false)
}

/// Splits the elements along a failed direction in halves, keeps the
/// halves that still disagree (at most [`BRANCHES`] per level, the worst
/// first), and returns the elements of the pieces of at most [`LEAF`]
/// elements it reaches.
fn bisect<L: Forward + ?Sized>(
    engine: &mut Engine<'_, L>,
    t: &Target<'_>,
    support: &[usize],
    v: &[f64],
    rounding: &[f64],
    tol: &Tolerance,
    layer_eps: f64,
) -> Result<Vec<usize>, Error> {
    // Pieces are ranges of positions in `support`.
    let mut level = vec![(0, support.len())];
    let mut found = Vec::new();
    while !level.is_empty() {
        let mut next: Vec<((usize, usize), f64)> = Vec::new();
        for (lo, hi) in level {
            if hi - lo <= LEAF {
                found.extend_from_slice(&support[lo..hi]);
                continue;
            }
            let mid = lo + (hi - lo) / 2;
            for (a, b) in [(lo, mid), (mid, hi)] {
                let check = along(
                    engine,
                    t,
                    &support[a..b],
                    &v[a..b],
                    &rounding[a..b],
                    tol,
                    layer_eps,
                )?;
                if !check.agrees() {
                    next.push(((a, b), check.excess()));
                }
            }
        }
        next.sort_by(|x, y| y.1.total_cmp(&x.1));
        next.truncate(BRANCHES);
        level = next.into_iter().map(|(piece, _)| piece).collect();
    }
    Ok(found)
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
