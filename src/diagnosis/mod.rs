//! Diagnosis: naming the bug from the fingerprint it leaves in the
//! analytic-versus-numeric comparison.
//!
//! Each row gets at most one primary [`Diagnosis`]. The checks run in a
//! fixed order, from the ones that make every number meaningless (a
//! non-finite value, a forward that is not repeatable) to the ones that
//! describe which elements are wrong; the first that fits wins.
//!
//! The diagnosis reads plain comparison data (the element checks and what
//! the audit noticed); it knows nothing of reports or rendering.

use std::fmt;

use crate::compare::{relative_error, ElementCheck, ElementStatus, JointKink};
use crate::format::shape_string;
use crate::tensor::{MultiIndex, Tensor};

mod fingerprints;
pub(crate) mod summary;

pub(crate) use fingerprints::NamedValues;

/// What kind of backward bug the numbers point to.
///
/// ```
/// use plumbline::prelude::*;
/// use plumbline::{Diagnosis, Verdict};
///
/// /// Hive warmth y = 3·x per sensor; `factor` scales the backward.
/// struct Warmth { factor: f64 }
///
/// impl Layer for Warmth {
///     type Real = f64;
///     fn signature(&self) -> Signature {
///         Signature::new().input("x", "sensor").output("y", "sensor")
///     }
///     fn backward(&self, _: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
///         Gradients::from(vec![up[0].map(|g| 3.0 * self.factor * g)])
///     }
/// }
///
/// impl GenericForward for Warmth {
///     fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
///         let k = T::from(3.0).unwrap();
///         vec![a.input(0).map(|x| k * x)]
///     }
/// }
///
/// let args = Args::new(vec![Tensor::new(vec![4], vec![0.1, -0.2, 0.3, 0.4])?], vec![]);
/// let report = Audit::new().run(&Warmth { factor: -1.0 }, &args)?;
/// assert_eq!(report.rows[0].diagnosis, Some(Diagnosis::SignFlipped));
/// # Ok::<(), plumbline::Error>(())
/// ```
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
#[non_exhaustive]
pub enum Diagnosis {
    /// The analytic gradient is the numeric one negated, across the tensor.
    SignFlipped,
    /// The analytic gradient is `factor` times the numeric one, across the
    /// tensor.
    Scaled {
        /// analytic / numeric.
        #[serde(with = "crate::format::float_text")]
        factor: f64,
        /// A common culprit that matches the factor, e.g. `1/N (N = batch = 4)`.
        culprit: Option<String>,
    },
    /// The analytic gradient matches the numeric one with two axes swapped.
    Transposed {
        /// The swapped axes.
        axes: (usize, usize),
    },
    /// The analytic gradient matches the numeric one with these axes
    /// reversed (index i read as n − 1 − i): a kernel flipped as for a true
    /// convolution, a sequence read backwards.
    Flipped {
        /// The reversed axes, ascending.
        axes: Vec<usize>,
    },
    /// An axis split into `blocks` equal blocks, the blocks in another
    /// order: gate blocks of a recurrent cell swapped, heads mixed up.
    BlocksPermuted {
        /// The axis.
        axis: usize,
        /// How many equal blocks it is split into (2 to 4).
        blocks: usize,
        /// Block j of the gradient holds block `order[j]` of the reference.
        order: Vec<usize>,
    },
    /// One factor per slice along an axis: analytic ≈ c_s·numeric in slice
    /// s (a per-sample or per-row normalisation left in or left out).
    ScaledPerSlice {
        /// The axis whose slices carry one factor each.
        axis: usize,
        /// The tensor's rank (rank-2 slices are called rows and columns).
        rank: usize,
        /// The factor of each slice; `None` where no element pins it (and
        /// none is wrong).
        factors: Vec<Option<f64>>,
    },
    /// The analytic gradient is the numeric one multiplied (or divided) by
    /// the values of another tensor of the layer.
    ScaledByTensor {
        /// The tensor whose values are the factors.
        tensor: String,
        /// `true` for a division by its values.
        divided: bool,
        /// How its values line up with the gradient: `elementwise`,
        /// `along axis 1`, `elementwise over the last 2 axes`.
        placement: String,
    },
    /// The sign is flipped on part of the tensor and right elsewhere.
    SignFlippedOn {
        /// Which elements, e.g. `block 1 of 4 along axis 0`, `column 2`,
        /// `odd indices of axis 1`, ``where `x` < 0``.
        subset: String,
        /// Elements seen flipped.
        flipped: usize,
        /// Elements checked.
        of: usize,
    },
    /// The gradient's shape is not the tensor's.
    WrongShape {
        /// The tensor's shape.
        expected: Vec<usize>,
        /// The gradient's shape.
        returned: Vec<usize>,
    },
    /// The backward returned no gradient for this tensor.
    Missing,
    /// The gradient is zero everywhere the derivative is not.
    AllZero,
    /// The gradient is non-zero where the derivative is zero everywhere.
    Spurious,
    /// Only some elements are wrong.
    Partial {
        /// Elements beyond their bound.
        wrong: usize,
        /// Elements checked.
        of: usize,
        /// Where they are, e.g. `last slice of axis 0 (index 3)`.
        pattern: String,
    },
    /// Every wrong element is wrong by a small relative amount, all in the
    /// same direction: a tiny but consistent mismatch (an epsilon added in
    /// the forward and not in the backward, a constant rounded differently,
    /// a clamp or a floor on one side only).
    SmallMismatch {
        /// The median relative error of the wrong elements.
        #[serde(with = "crate::format::float_text")]
        relative: f64,
        /// Elements beyond their bound.
        wrong: usize,
        /// Elements checked.
        of: usize,
    },
    /// Every element is wrong, and no fingerprint (sign, factor,
    /// transposition, reversal, block order, slice or tensor factor, sign
    /// on a subset) explains it: a wrong formula. The numbers that help
    /// next come with it.
    WrongValues {
        /// Elements checked (all wrong).
        of: usize,
        /// Pearson's correlation of analytic with numeric over the checked
        /// elements (NaN when either is constant).
        #[serde(with = "crate::format::float_text")]
        correlation: f64,
        /// The best single factor k (least squares, analytic ≈ k·numeric).
        #[serde(with = "crate::format::float_text")]
        factor: f64,
        /// The share of Σ analytic² that k·numeric leaves unexplained, 0 to 1.
        #[serde(with = "crate::format::float_text")]
        unexplained: f64,
    },
    /// A NaN or infinity, and where it first appears.
    NonFinite {
        /// E.g. `backward at [0, 2]` or `forward output `y` at [1]`.
        place: String,
    },
    /// Two forwards at the same point differ: the audit's numbers are noise.
    ForwardNotRepeatable {
        /// The first difference seen.
        detail: String,
    },
    /// Two backward calls at the same point return different gradients: the
    /// backward accumulates into a buffer instead of returning fresh values.
    BackwardAccumulates {
        /// The first difference seen.
        detail: String,
    },
    /// Two elements at interacting kinks (a tie of one max) fit their
    /// one-sided derivatives one by one, but their sum does not fit the
    /// joint move's: one gradient was handed to both (max-pool ties routed
    /// to every maximum).
    SharedKink {
        /// Where the two elements are, e.g. `[0, 1] and [0, 2]`.
        elements: String,
        /// Σ analytic over them.
        #[serde(with = "crate::format::float_text")]
        analytic_sum: f64,
        /// Joint one-sided derivative from the left.
        #[serde(with = "crate::format::float_text")]
        left: f64,
        /// Joint one-sided derivative from the right.
        #[serde(with = "crate::format::float_text")]
        right: f64,
    },
    /// Some elements sit at a non-differentiable point; listed apart.
    Kinks {
        /// Elements at a kink.
        count: usize,
        /// Of those, how many have an analytic value outside the one-sided
        /// derivatives.
        outside: usize,
    },
}

impl Diagnosis {
    /// `true` for the informational diagnosis of a passing row (kinks).
    pub fn is_informational(&self) -> bool {
        matches!(self, Diagnosis::Kinks { outside: 0, .. })
    }

    /// `true` when the diagnosis names a mechanism (sign, factor,
    /// transpose, reversal, block order, slice or tensor factor, shape,
    /// missing, accumulating, shared kink, small mismatch, or a partial
    /// failure with an index pattern) rather than "these values are
    /// wrong" (wrong everywhere, a partial failure scattered without
    /// pattern, kinks).
    ///
    /// ```
    /// use plumbline::Diagnosis;
    /// assert!(Diagnosis::Flipped { axes: vec![2, 3] }.is_specific());
    /// let scattered = Diagnosis::Partial {
    ///     wrong: 3,
    ///     of: 12,
    ///     pattern: "scattered, first at [0, 1]".into(),
    /// };
    /// assert!(!scattered.is_specific());
    /// ```
    pub fn is_specific(&self) -> bool {
        match self {
            Diagnosis::Partial { pattern, .. } => !pattern.starts_with(SCATTERED),
            Diagnosis::WrongValues { .. } | Diagnosis::Kinks { .. } => false,
            _ => true,
        }
    }
}

impl fmt::Display for Diagnosis {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Diagnosis::SignFlipped => f.write_str("sign flipped"),
            Diagnosis::Scaled { factor, culprit } => match culprit {
                Some(c) => write!(f, "scaled by {c}"),
                None => write!(f, "scaled by {}", crate::format::num(*factor)),
            },
            Diagnosis::Transposed { axes } => {
                write!(f, "transposed (axes {} and {} swapped)", axes.0, axes.1)
            }
            Diagnosis::Flipped { axes } => {
                let list: Vec<String> = axes.iter().map(usize::to_string).collect();
                let word = if axes.len() == 1 { "axis" } else { "axes" };
                write!(f, "flipped along {word} {}", list.join(", "))
            }
            Diagnosis::BlocksPermuted {
                axis,
                blocks,
                order,
            } => {
                let moved: Vec<usize> = (0..order.len()).filter(|&j| order[j] != j).collect();
                let k = order.len();
                // Block j holds block j − s: everything moved by s.
                let shift = (1..k).find(|&s| (0..k).all(|j| order[j] == (j + k - s) % k));
                if moved.len() == 2 {
                    write!(
                        f,
                        "blocks {} and {} of axis {axis} swapped ({blocks} blocks)",
                        moved[0], moved[1]
                    )
                } else if let Some(s) = shift {
                    write!(
                        f,
                        "blocks of axis {axis} shifted by {s}, cyclically ({blocks} blocks)"
                    )
                } else {
                    let list: Vec<String> = order.iter().map(usize::to_string).collect();
                    write!(
                        f,
                        "blocks of axis {axis} permuted: order {} ({blocks} blocks)",
                        list.join(", ")
                    )
                }
            }
            Diagnosis::ScaledPerSlice {
                axis,
                rank,
                factors,
            } => f.write_str(&fingerprints::per_slice_text(*axis, *rank, factors)),
            Diagnosis::ScaledByTensor {
                tensor,
                divided,
                placement,
            } => {
                let verb = if *divided { "divided" } else { "multiplied" };
                write!(f, "{verb} by `{tensor}` {placement}")
            }
            Diagnosis::SignFlippedOn {
                subset,
                flipped,
                of,
            } => write!(f, "sign flipped on {subset} ({flipped} of {of})"),
            Diagnosis::WrongShape { expected, returned } => write!(
                f,
                "wrong shape: returned {}, expected {}",
                shape_string(returned),
                shape_string(expected)
            ),
            Diagnosis::Missing => f.write_str("missing: no gradient returned"),
            Diagnosis::AllZero => f.write_str("all zero where the derivative is not"),
            Diagnosis::Spurious => f.write_str("spurious: non-zero, derivative is 0"),
            Diagnosis::Partial { wrong, of, pattern } => {
                write!(f, "partial: {pattern} ({wrong} of {of} wrong)")
            }
            Diagnosis::SmallMismatch { relative, wrong, of } => write!(
                f,
                "small systematic mismatch: {} relative ({wrong} of {of}); an epsilon or constant differs between forward and backward?",
                crate::format::err(*relative)
            ),
            Diagnosis::WrongValues {
                of,
                correlation,
                factor,
                unexplained,
            } => {
                if *of == 1 {
                    // One element: any factor "fits", and no pattern can.
                    return if factor.is_finite() {
                        write!(
                            f,
                            "wrong value (1 of 1): {} times the reference",
                            crate::format::short(*factor)
                        )
                    } else {
                        f.write_str("wrong value (1 of 1)")
                    };
                }
                f.write_str("wrong everywhere (")?;
                write!(
                    f,
                    "{of} of {of}): no sign, factor, axis order or slice pattern fits"
                )?;
                if correlation.is_finite() {
                    write!(f, "; correlation {}", crate::format::short(*correlation))?;
                }
                if factor.is_finite() && unexplained.is_finite() {
                    write!(
                        f,
                        ", best factor {} leaves {:.0}% unexplained",
                        crate::format::short(*factor),
                        100.0 * unexplained
                    )?;
                }
                Ok(())
            }
            Diagnosis::NonFinite { place } => write!(f, "non-finite in {place}"),
            Diagnosis::ForwardNotRepeatable { detail } => {
                write!(f, "forward not repeatable: {detail}")
            }
            Diagnosis::BackwardAccumulates { detail } => {
                write!(f, "backward accumulates: {detail}")
            }
            Diagnosis::SharedKink {
                elements,
                analytic_sum,
                left,
                right,
            } => write!(
                f,
                "kinks share one gradient: {elements} sum to {}, joint one-sided {} / {}",
                crate::format::num(*analytic_sum),
                crate::format::num(*left),
                crate::format::num(*right)
            ),
            Diagnosis::Kinks { count, outside } => {
                if *outside == 0 {
                    write!(f, "{count} at a kink (one-sided values fit)")
                } else {
                    write!(
                        f,
                        "{count} at a kink, {outside} outside the one-sided values"
                    )
                }
            }
        }
    }
}

/// Facts the audit gathered beyond the element comparisons.
#[derive(Clone, Debug, Default)]
pub(crate) struct Evidence {
    /// First difference between two forwards at the same point.
    pub forward_change: Option<String>,
    /// First difference between two backwards at the same point (this row).
    pub backward_change: Option<String>,
    /// First non-finite forward output.
    pub nonfinite_output: Option<String>,
    /// Named sizes from the signature (`batch = 4`), for naming factors.
    pub sizes: Vec<(String, usize)>,
    /// The layer's argument tensors by name, as plain values, for naming
    /// a factor or a condition by another tensor.
    pub tensors: Vec<NamedValues>,
}

/// Relative agreement needed to name a common factor.
const FACTOR_MATCH: f64 = 2e-3;

/// The primary diagnosis of a row, if any.
///
/// `shape` is the tensor's shape, `grad` the gradient the backward
/// returned (any shape), `elements` the checked elements.
pub(crate) fn diagnose(
    shape: &[usize],
    grad: Option<&Tensor<f64>>,
    elements: &[ElementCheck],
    joint_kink: Option<&JointKink>,
    ev: &Evidence,
) -> Option<Diagnosis> {
    if let Some(place) = &ev.nonfinite_output {
        return Some(Diagnosis::NonFinite {
            place: format!("forward {place}"),
        });
    }
    if let Some(detail) = &ev.forward_change {
        return Some(Diagnosis::ForwardNotRepeatable {
            detail: detail.clone(),
        });
    }
    if let Some(detail) = &ev.backward_change {
        return Some(Diagnosis::BackwardAccumulates {
            detail: detail.clone(),
        });
    }
    let Some(grad) = grad else {
        return Some(Diagnosis::Missing);
    };
    if let Some(j) = grad.data().iter().position(|v| !v.is_finite()) {
        return Some(Diagnosis::NonFinite {
            place: format!("backward at {}", grad.index_of(j)),
        });
    }
    let el = elements;
    if let Some(e) = el
        .iter()
        .find(|e| !e.numeric.is_finite() && e.status != ElementStatus::NonFiniteInput)
    {
        return Some(Diagnosis::NonFinite {
            place: format!("reference at {}", MultiIndex::from_flat(shape, e.index)),
        });
    }
    if grad.shape() != shape {
        if let Some(axes) = transposed_match(shape, grad, el) {
            return Some(Diagnosis::Transposed { axes });
        }
        return Some(Diagnosis::WrongShape {
            expected: shape.to_vec(),
            returned: grad.shape().to_vec(),
        });
    }
    let wrong: Vec<usize> = (0..el.len())
        .filter(|&j| el[j].status.is_failure())
        .collect();
    let kinks = el.iter().filter(|e| e.status.is_kink()).count();
    let outside = el
        .iter()
        .filter(|e| matches!(e.status, ElementStatus::Kink { fits: false, .. }))
        .count();
    if let Some(j) = joint_kink {
        if wrong.is_empty() {
            return Some(Diagnosis::SharedKink {
                elements: format!(
                    "{} and {}",
                    MultiIndex::from_flat(shape, j.elements[0]),
                    MultiIndex::from_flat(shape, j.elements[1])
                ),
                analytic_sum: j.analytic_sum,
                left: j.left,
                right: j.right,
            });
        }
    }
    if wrong.is_empty() {
        return (kinks > 0).then_some(Diagnosis::Kinks {
            count: kinks,
            outside,
        });
    }
    // Elements at a kink say nothing about the smooth part's bug.
    let smooth: Vec<ElementCheck> = el.iter().filter(|e| !e.status.is_kink()).cloned().collect();
    let significant = |e: &ElementCheck| e.numeric.abs() > e.bound;
    if !smooth.iter().any(significant) {
        return Some(Diagnosis::Spurious);
    }
    if smooth.iter().all(|e| e.analytic.abs() <= e.bound) {
        return Some(Diagnosis::AllZero);
    }
    if let Some(k) = common_factor(&smooth) {
        if (k + 1.0).abs() < FACTOR_MATCH {
            return Some(Diagnosis::SignFlipped);
        }
        // One significant element fits any factor: name one only when it
        // is a common culprit, or when several elements agree on it.
        let named = culprit(k, &ev.sizes);
        if named.is_some() || smooth.iter().filter(|e| significant(e)).count() > 1 {
            return Some(Diagnosis::Scaled {
                factor: k,
                culprit: named,
            });
        }
    }
    if let Some(axes) = transposed_match(shape, grad, el) {
        return Some(Diagnosis::Transposed { axes });
    }
    if let Some(d) = fingerprints::flipped(shape, grad, el) {
        return Some(d);
    }
    if let Some(d) = fingerprints::blocks_permuted(shape, grad, el) {
        return Some(d);
    }
    if let Some(d) = small_mismatch(el, &wrong) {
        return Some(d);
    }
    let tensors = &ev.tensors;
    if let Some(d) = fingerprints::sign_on_subset(shape, &smooth, tensors) {
        return Some(d);
    }
    if let Some(d) = fingerprints::scaled_by_tensor(shape, &smooth, tensors) {
        return Some(d);
    }
    if let Some(d) = fingerprints::scaled_per_slice(shape, &smooth) {
        return Some(d);
    }
    if wrong.len() == smooth.len() {
        let (correlation, factor, unexplained) = fingerprints::guidance(&smooth);
        return Some(Diagnosis::WrongValues {
            of: wrong.len(),
            correlation,
            factor,
            unexplained,
        });
    }
    let right: Vec<usize> = el
        .iter()
        .filter(|e| !e.status.is_failure() && !e.status.is_kink())
        .map(|e| e.index)
        .collect();
    Some(Diagnosis::Partial {
        wrong: wrong.len(),
        of: el.len(),
        pattern: pattern_among(
            shape,
            &wrong.iter().map(|&k| el[k].index).collect::<Vec<_>>(),
            &right,
            tensors,
        ),
    })
}

/// Relative error below which a consistent mismatch counts as small.
const SMALL: f64 = 1e-3;

/// Every wrong element off by less than [`SMALL`] relative, all with the
/// same sign of (analytic − numeric)·numeric: a tiny, consistent
/// mismatch rather than a wrong formula.
fn small_mismatch(el: &[ElementCheck], wrong: &[usize]) -> Option<Diagnosis> {
    let mut rel: Vec<f64> = wrong
        .iter()
        .map(|&k| relative_error(el[k].analytic, el[k].numeric))
        .collect();
    if rel.is_empty() || !rel.iter().all(|&r| r < SMALL) {
        return None;
    }
    let signs: Vec<bool> = wrong
        .iter()
        .map(|&k| (el[k].analytic - el[k].numeric) * el[k].numeric > 0.0)
        .collect();
    if !(signs.iter().all(|&s| s) || signs.iter().all(|&s| !s)) {
        return None;
    }
    rel.sort_by(f64::total_cmp);
    Some(Diagnosis::SmallMismatch {
        relative: rel[rel.len() / 2],
        wrong: wrong.len(),
        of: el.len(),
    })
}

/// One k with a ≈ k·n for every element (within the bounds, scaled by k),
/// if the ratios agree; `None` otherwise. k = 0 and k = 1 are excluded.
fn common_factor(el: &[ElementCheck]) -> Option<f64> {
    let mut ratios: Vec<f64> = el
        .iter()
        .filter(|e| e.numeric.abs() > e.bound && e.numeric != 0.0)
        .map(|e| e.analytic / e.numeric)
        .collect();
    if ratios.is_empty() {
        return None;
    }
    ratios.sort_by(f64::total_cmp);
    let k = ratios[ratios.len() / 2];
    if !k.is_finite() || k.abs() < 1e-12 || (k - 1.0).abs() < FACTOR_MATCH {
        return None;
    }
    let fits = el.iter().all(|e| {
        let slack = e.bound * k.abs().max(1.0) + FACTOR_MATCH * (k * e.numeric).abs();
        (e.analytic - k * e.numeric).abs() <= slack
    });
    fits.then_some(k)
}

/// Names a factor that is a common culprit: a named size N or 1/N (the
/// batch size when a mean was taken instead of a sum), ±2, ±1/2, √N or
/// 1/√N of a named size (an attention scale left out or applied twice),
/// ±√2 or ±1/√2.
fn culprit(k: f64, sizes: &[(String, usize)]) -> Option<String> {
    let close = |c: f64| ((k - c) / c).abs() < FACTOR_MATCH;
    let sign = if k < 0.0 { "-" } else { "" };
    let a = k.abs();
    let close_abs = |c: f64| ((a - c) / c).abs() < FACTOR_MATCH;
    for &(ref name, n) in sizes {
        if n > 2 {
            let n = n as f64;
            if close_abs(n) {
                return Some(format!("{sign}N (N = {name} = {n})"));
            }
            if close_abs(1.0 / n) {
                return Some(format!("{sign}1/N (N = {name} = {n})"));
            }
        }
    }
    for (c, text) in [(2.0, "2"), (0.5, "1/2"), (-2.0, "-2"), (-0.5, "-1/2")] {
        if close(c) {
            return Some(text.to_string());
        }
    }
    for &(ref name, n) in sizes {
        if n > 2 {
            let root = (n as f64).sqrt();
            if close_abs(root) {
                return Some(format!("{sign}√N (N = {name} = {n})"));
            }
            if close_abs(1.0 / root) {
                return Some(format!("{sign}1/√N (N = {name} = {n})"));
            }
        }
    }
    if close_abs(std::f64::consts::SQRT_2) {
        return Some(format!("{sign}√2"));
    }
    if close_abs(std::f64::consts::FRAC_1_SQRT_2) {
        return Some(format!("{sign}1/√2"));
    }
    None
}

/// Axes (p, q) such that the gradient equals the numeric derivative with
/// axes p and q swapped: gradient[.. j .. i ..] ≈ numeric[.. i .. j ..].
fn transposed_match(
    shape: &[usize],
    grad: &Tensor<f64>,
    el: &[ElementCheck],
) -> Option<(usize, usize)> {
    if grad.len() != shape.iter().product::<usize>() || el.len() < 2 {
        return None;
    }
    let r = shape.len();
    for p in 0..r {
        for q in p + 1..r {
            let mut swapped = shape.to_vec();
            swapped.swap(p, q);
            if swapped != grad.shape() || (shape == grad.shape() && shape[p] < 2) {
                continue;
            }
            let ok = el.iter().all(|e| {
                if e.status.is_kink() {
                    return true;
                }
                let mut ix = MultiIndex::from_flat(shape, e.index).0;
                ix.swap(p, q);
                grad.get(&ix)
                    .is_some_and(|a| (a - e.numeric).abs() <= e.bound)
            });
            // A symmetric derivative matches itself transposed: only call
            // it a transposition if the plain comparison fails somewhere.
            let plain_ok = grad.shape() == shape && el.iter().all(|e| !e.status.is_failure());
            if ok && !plain_ok {
                return Some((p, q));
            }
        }
    }
    None
}

/// How [`pattern`] starts when the wrong elements follow no pattern.
const SCATTERED: &str = "scattered";

/// Describes where the wrong elements are among the checked ones: the
/// slice and diagonal patterns of [`pattern`], then an index condition
/// that separates them from the right ones (`right`, flat) exactly.
fn pattern_among(
    shape: &[usize],
    wrong: &[usize],
    right: &[usize],
    tensors: &[NamedValues],
) -> String {
    let found = pattern(shape, wrong);
    if !found.starts_with(SCATTERED) {
        return found;
    }
    let multi = |v: &[usize]| -> Vec<Vec<usize>> {
        v.iter()
            .map(|&j| MultiIndex::from_flat(shape, j).0)
            .collect()
    };
    match fingerprints::describe(shape, &multi(wrong), &multi(right), tensors) {
        Some(d) => d,
        None => found,
    }
}

/// Describes where the wrong elements are.
fn pattern(shape: &[usize], wrong: &[usize]) -> String {
    let idx: Vec<Vec<usize>> = wrong
        .iter()
        .map(|&j| MultiIndex::from_flat(shape, j).0)
        .collect();
    let total: usize = shape.iter().product();
    // The diagonal of a square matrix, or everything but it.
    if shape.len() == 2 && shape[0] == shape[1] && shape[0] > 1 {
        let n = shape[0];
        let on_diag = idx.iter().filter(|ix| ix[0] == ix[1]).count();
        if on_diag == idx.len() && on_diag == n {
            return "the diagonal only".to_string();
        }
        if on_diag == 0 && idx.len() == n * n - n {
            return "every element but the diagonal".to_string();
        }
    }
    if idx.len() == 1 {
        return format!("one element, {}", MultiIndex(idx[0].clone()));
    }
    // All wrong elements in one slice of one axis.
    let mut best: Option<(usize, usize, bool)> = None;
    for axis in 0..shape.len() {
        let v = idx[0][axis];
        if shape[axis] > 1 && idx.iter().all(|ix| ix[axis] == v) {
            let slice_len = total / shape[axis];
            let full = idx.len() == slice_len;
            if best.is_none_or(|(_, _, f)| full && !f) {
                best = Some((axis, v, full));
            }
        }
    }
    if let Some((axis, v, full)) = best {
        let which = if v == 0 {
            "first slice".to_string()
        } else if v + 1 == shape[axis] {
            "last slice".to_string()
        } else {
            "slice".to_string()
        };
        let word = match (shape.len(), axis) {
            (2, 0) => "row",
            (2, 1) => "column",
            _ => "",
        };
        let whole = if full { "all of " } else { "part of " };
        return if word.is_empty() {
            format!("{whole}{which} {v} of axis {axis}")
        } else {
            format!("{whole}{word} {v} ({which} of axis {axis})")
        };
    }
    format!("{SCATTERED}, first at {}", MultiIndex(idx[0].clone()))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn patterns_name_rows_columns_and_diagonals() {
        // 3x3: all of column 2.
        assert_eq!(
            pattern(&[3, 3], &[2, 5, 8]),
            "all of column 2 (last slice of axis 1)"
        );
        assert_eq!(pattern(&[3, 3], &[0, 4, 8]), "the diagonal only");
        assert_eq!(pattern(&[2, 2], &[1, 2]), "every element but the diagonal");
        assert_eq!(
            pattern(&[4, 2], &[0, 1]),
            "all of row 0 (first slice of axis 0)"
        );
        assert_eq!(pattern(&[5], &[3]), "one element, [3]");
    }

    #[test]
    fn culprits_name_batch_size_and_halves() {
        let sizes = vec![("batch".to_string(), 4)];
        assert_eq!(culprit(0.25, &sizes).unwrap(), "1/N (N = batch = 4)");
        assert_eq!(culprit(4.0, &sizes).unwrap(), "N (N = batch = 4)");
        assert_eq!(culprit(2.0, &sizes).unwrap(), "2");
        assert_eq!(culprit(0.5, &[]).unwrap(), "1/2");
        assert!(culprit(0.37, &sizes).is_none());
    }
}
