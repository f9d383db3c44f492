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
    /// A passing row with elements that agree only within a wide bound:
    /// the reference's own error there is above 1% of the derivative (a
    /// plain forward that rounds a term away, weights far below 1 in
    /// `f32`), so a wrong value of about that size would pass as well.
    Undecided {
        /// Elements judged against a wide bound.
        count: usize,
        /// Elements checked.
        of: usize,
    },
    /// Some elements sit at a non-differentiable point; listed apart.
    Kinks {
        /// Elements at a kink.
        count: usize,
        /// Of those, how many have an analytic value outside the one-sided
        /// derivatives.
        outside: usize,
    },
    /// The adjoint identity ⟨u, J v⟩ = ⟨Jᵀu, v⟩ fails between the
    /// forward-mode rule and the backward; the tangent rows say which rule
    /// is at fault.
    RuleAtFault {
        /// The rule the evidence points to.
        culprit: Culprit,
    },
    /// ⟨v, H w⟩ ≠ ⟨w, H v⟩: the backward's Jacobian is not symmetric, so
    /// the backward is not the gradient of any function, whatever the
    /// forward says at this point.
    NotSymmetric,
}

/// Which hand-written rule an adjoint failure points to.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
#[non_exhaustive]
pub enum Culprit {
    /// Every tangent row agrees with the forward's directional
    /// derivatives: the backward is the wrong one.
    Backward,
    /// A tangent row disagrees with the forward: the forward-mode rule is
    /// wrong (the backward may be right, or wrong another way).
    TangentRule,
    /// The tangent rows could not be compared (no reference): the two
    /// rules disagree, and nothing says which is wrong.
    Either,
}

impl fmt::Display for Culprit {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Culprit::Backward => "backward wrong (tangent rule matches forward)",
            Culprit::TangentRule => "tangent rule wrong (differs from forward)",
            Culprit::Either => "tangent rule and backward disagree",
        })
    }
}

impl Diagnosis {
    /// `true` for the informational diagnosis of a passing row (kinks,
    /// undecided elements).
    pub fn is_informational(&self) -> bool {
        matches!(
            self,
            Diagnosis::Kinks { outside: 0, .. } | Diagnosis::Undecided { .. }
        )
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
            Diagnosis::WrongValues { .. }
            | Diagnosis::Kinks { .. }
            | Diagnosis::Undecided { .. }
            | Diagnosis::RuleAtFault {
                culprit: Culprit::Either,
            } => false,
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
            Diagnosis::RuleAtFault { culprit } => write!(f, "{culprit}"),
            Diagnosis::NotSymmetric => f.write_str("backward's Jacobian not symmetric"),
            Diagnosis::Undecided { count, of } => write!(
                f,
                "{count} of {of} undecided (reference error above 1% there)"
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
        let wide = el.iter().filter(|e| e.is_wide()).count();
        return if kinks > 0 {
            Some(Diagnosis::Kinks {
                count: kinks,
                outside,
            })
        } else {
            (wide > 0).then_some(Diagnosis::Undecided {
                count: wide,
                of: el.len(),
            })
        };
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

    /// An element check with a bound of 1e-6: agrees within it, disagrees
    /// beyond it (also used by the fingerprints' tests).
    pub(crate) fn el(index: usize, analytic: f64, numeric: f64) -> ElementCheck {
        let bound = 1e-6;
        ElementCheck {
            index,
            analytic,
            numeric,
            error: 0.0,
            scale: numeric.abs(),
            bound,
            decided: true,
            status: if (analytic - numeric).abs() <= bound {
                ElementStatus::Agrees
            } else {
                ElementStatus::Disagrees
            },
        }
    }

    /// Diagnoses a rank-1 tensor whose gradient holds `analytic`, against
    /// `numeric`, with no other evidence.
    fn diagnose_pairs(analytic: &[f64], numeric: &[f64]) -> Option<Diagnosis> {
        let n = analytic.len();
        let grad = Tensor::new(vec![n], analytic.to_vec()).unwrap();
        let el: Vec<ElementCheck> = (0..n).map(|j| el(j, analytic[j], numeric[j])).collect();
        diagnose(&[n], Some(&grad), &el, None, &Evidence::default())
    }

    #[test]
    fn a_factor_within_the_match_of_minus_one_is_a_sign_flip() {
        // Internal logic: |k + 1| < FACTOR_MATCH (2e-3) reads as a flipped
        // sign; further from −1 it is a factor.
        let n = [1.0, 2.0, -3.0];
        let scaled = |k: f64| n.map(|v| k * v);
        assert_eq!(
            diagnose_pairs(&scaled(-1.0), &n),
            Some(Diagnosis::SignFlipped)
        );
        assert_eq!(
            diagnose_pairs(&scaled(-1.001), &n),
            Some(Diagnosis::SignFlipped)
        );
        match diagnose_pairs(&scaled(-1.003), &n) {
            Some(Diagnosis::Scaled { factor, culprit }) => {
                assert!((factor + 1.003).abs() < 1e-12 && culprit.is_none());
            }
            d => panic!("{d:?}"),
        }
    }

    #[test]
    fn one_significant_element_names_only_a_common_culprit() {
        // Internal logic (comment in `diagnose`): a single element with a
        // derivative fits any factor, so 3.7 is not named from it alone,
        // while 2 (a common culprit) is.
        let d = diagnose_pairs(&[3.7, 0.0], &[1.0, 0.0]);
        assert!(
            matches!(
                d,
                Some(Diagnosis::Partial {
                    wrong: 1,
                    of: 2,
                    ..
                })
            ),
            "{d:?}"
        );
        let d = diagnose_pairs(&[2.0, 0.0], &[1.0, 0.0]);
        assert_eq!(
            d,
            Some(Diagnosis::Scaled {
                factor: 2.0,
                culprit: Some("2".to_string())
            })
        );
    }

    #[test]
    fn only_kinks_that_all_fit_are_informational() {
        assert!(Diagnosis::Kinks {
            count: 2,
            outside: 0
        }
        .is_informational());
        assert!(!Diagnosis::Kinks {
            count: 2,
            outside: 1
        }
        .is_informational());
        let undecided = Diagnosis::Undecided { count: 3, of: 10 };
        assert!(undecided.is_informational() && !undecided.is_specific());
        assert_eq!(
            undecided.to_string(),
            "3 of 10 undecided (reference error above 1% there)"
        );
        assert!(!Diagnosis::SignFlipped.is_informational());
        assert!(!Diagnosis::Missing.is_informational());
    }

    #[test]
    fn a_partial_failure_is_specific_only_with_a_pattern() {
        let partial = |pattern: &str| Diagnosis::Partial {
            wrong: 3,
            of: 12,
            pattern: pattern.to_string(),
        };
        assert!(!partial("scattered, first at [0, 1]").is_specific());
        assert!(partial("all of row 0 (first slice of axis 0)").is_specific());
        assert!(!Diagnosis::Kinks {
            count: 1,
            outside: 0
        }
        .is_specific());
        assert!(Diagnosis::Missing.is_specific());
    }

    #[test]
    fn reversals_and_block_orders_read_as_documented() {
        // The texts of `Display`, from its rules: one axis or several; two
        // blocks swapped, a cyclic shift (block j holds block j − s), or the
        // order itself.
        assert_eq!(
            Diagnosis::Flipped { axes: vec![1] }.to_string(),
            "flipped along axis 1"
        );
        assert_eq!(
            Diagnosis::Flipped { axes: vec![2, 3] }.to_string(),
            "flipped along axes 2, 3"
        );
        let blocks = |order: Vec<usize>| Diagnosis::BlocksPermuted {
            axis: 1,
            blocks: order.len(),
            order,
        };
        assert_eq!(
            blocks(vec![0, 2, 1]).to_string(),
            "blocks 1 and 2 of axis 1 swapped (3 blocks)"
        );
        assert_eq!(
            blocks(vec![2, 0, 1]).to_string(),
            "blocks of axis 1 shifted by 1, cyclically (3 blocks)"
        );
        assert_eq!(
            blocks(vec![2, 3, 0, 1]).to_string(),
            "blocks of axis 1 shifted by 2, cyclically (4 blocks)"
        );
        assert_eq!(
            blocks(vec![1, 0, 3, 2]).to_string(),
            "blocks of axis 1 permuted: order 1, 0, 3, 2 (4 blocks)"
        );
    }

    #[test]
    fn tiny_reference_values_do_not_vote_on_the_factor() {
        // Internal logic (`common_factor`): only elements whose reference is
        // above its bound give a ratio. Three flipped elements and three
        // whose reference (1e-9) is below the bound of 1e-6, with ratios of
        // 50 that would outvote them: still a sign flip.
        let d = diagnose_pairs(
            &[-1.0, -2.0, -3.0, 5e-8, 5e-8, 5e-8],
            &[1.0, 2.0, 3.0, 1e-9, 1e-9, 1e-9],
        );
        assert_eq!(d, Some(Diagnosis::SignFlipped));
    }

    #[test]
    fn a_small_mismatch_must_go_one_way() {
        // Internal logic (`small_mismatch`): every wrong element off by less
        // than 1e-3 relative, all on the same side. The factor 1.0005 is too
        // close to 1 to be a scaling (FACTOR_MATCH = 2e-3). The relative
        // error |a − n|/max(|a|, |n|) = 5e-4/1.0005 for each.
        let n = [1.0, -2.0, 3.0];
        let d = diagnose_pairs(&n.map(|v| 1.0005 * v), &n);
        match d {
            Some(Diagnosis::SmallMismatch {
                relative,
                wrong: 3,
                of: 3,
            }) => {
                assert!((relative - 5e-4 / 1.0005).abs() < 1e-12, "{relative}");
            }
            d => panic!("{d:?}"),
        }
        // Half above, half below: no consistent mismatch.
        let d = diagnose_pairs(&[1.0005, -2.001, 2.9985, -4.002], &[1.0, -2.0, 3.0, -4.0]);
        assert!(!matches!(d, Some(Diagnosis::SmallMismatch { .. })), "{d:?}");
    }

    #[test]
    fn a_partial_failure_is_described_against_the_right_elements() {
        // Wrong values (no factor, sign or order fits) at the even indices of
        // six, right at the odd ones: the slice patterns find nothing, the
        // index condition that separates wrong from right names them.
        let d = diagnose_pairs(
            &[5.0, 2.0, -7.0, 4.0, 0.3, 6.0],
            &[1.0, 2.0, 3.0, 4.0, 5.0, 6.0],
        );
        assert_eq!(
            d,
            Some(Diagnosis::Partial {
                wrong: 3,
                of: 6,
                pattern: "even indices of axis 0".to_string()
            })
        );
    }

    #[test]
    fn a_common_factor_fits_every_element_within_its_slack() {
        // Internal logic (`common_factor`): with k the median ratio, every
        // element must satisfy |a − k·n| ≤ bound·max(|k|, 1) + 2e-3·|k·n|.
        // 2.003 against k = 2 is within 2e-3·6 = 0.012 of 6: scaled by 2.
        let d = diagnose_pairs(&[2.0, 4.0, 6.009], &[1.0, 2.0, 3.0]);
        assert_eq!(
            d,
            Some(Diagnosis::Scaled {
                factor: 2.0,
                culprit: Some("2".to_string())
            })
        );
        // 7.5 against 6 is not: no common factor.
        let d = diagnose_pairs(&[2.0, 4.0, 7.5], &[1.0, 2.0, 3.0]);
        assert!(!matches!(d, Some(Diagnosis::Scaled { .. })), "{d:?}");
        // A factor below 1e-12 counts as 0 (doc comment: k = 0 is
        // excluded): no scaling is named.
        let d = diagnose_pairs(&[0.1, 0.2, 0.3], &[1e15, 2e15, 3e15]);
        assert!(!matches!(d, Some(Diagnosis::Scaled { .. })), "{d:?}");
    }

    #[test]
    fn culprits_match_within_the_relative_tolerance_and_skip_sizes_up_to_two() {
        // Internal logic (`culprit`): a factor within FACTOR_MATCH (2e-3)
        // relative of a common one is named; 2.003 is 1.5e-3 from 2. A size
        // of 2 is never named as N (it would shadow the plain 2).
        assert_eq!(culprit(2.003, &[]).as_deref(), Some("2"));
        assert_eq!(
            culprit(2.0, &[("pair".to_string(), 2)]).as_deref(),
            Some("2")
        );
        assert_eq!(culprit(2.01, &[]), None);
    }

    #[test]
    fn patterns_need_all_off_diagonal_elements_and_prefer_the_first_axis() {
        // Internal logic (`pattern`): "every element but the diagonal" only
        // when all n² − n are wrong; two off-diagonal elements in no common
        // row or column are scattered. Elements sharing a slice on two axes
        // (rank 3), neither slice whole: the first axis is named.
        assert_eq!(pattern(&[3, 3], &[1, 5]), "scattered, first at [0, 1]");
        assert_eq!(
            pattern(&[2, 2, 3], &[0, 1]),
            "part of first slice 0 of axis 0"
        );
    }

    #[test]
    fn a_gradient_with_axes_swapped_is_transposed() {
        // Numeric n[i][j] of a 2×3 tensor returned as a 3×2 gradient g[j][i]
        // = n[i][j]: transposed, axes 0 and 1. The elements carry NaN: no
        // gradient of the right shape exists (doc of `ElementCheck`).
        let numeric: Vec<f64> = (1..=6).map(f64::from).collect();
        let mut g = vec![0.0; 6];
        for i in 0..2 {
            for j in 0..3 {
                g[j * 2 + i] = numeric[i * 3 + j];
            }
        }
        let grad = Tensor::new(vec![3, 2], g).unwrap();
        let nan = |k: usize| ElementCheck {
            status: ElementStatus::NotFinite,
            ..el(k, f64::NAN, numeric[k])
        };
        let el6: Vec<ElementCheck> = (0..6).map(nan).collect();
        let d = diagnose(&[2, 3], Some(&grad), &el6, None, &Evidence::default());
        assert_eq!(d, Some(Diagnosis::Transposed { axes: (0, 1) }));
        // A wrong value anywhere: only a wrong shape.
        let mut bad = grad.data().to_vec();
        bad[5] = -6.0;
        let bad = Tensor::new(vec![3, 2], bad).unwrap();
        let d = diagnose(&[2, 3], Some(&bad), &el6, None, &Evidence::default());
        assert!(matches!(d, Some(Diagnosis::WrongShape { .. })), "{d:?}");
        // Two elements (a 1×2 tensor returned as 2×1) are enough, and an
        // axis of length 1 may take part when the shapes differ.
        let grad = Tensor::new(vec![2, 1], vec![1.0, 2.0]).unwrap();
        let el2: Vec<ElementCheck> = (0..2).map(nan).collect();
        let d = diagnose(&[1, 2], Some(&grad), &el2, None, &Evidence::default());
        assert_eq!(d, Some(Diagnosis::Transposed { axes: (0, 1) }));
    }

    #[test]
    fn square_root_culprits_name_the_size() {
        // Internal logic (`culprit`): √N and 1/√N of a named size above 2.
        let heads = [("heads".to_string(), 9)];
        assert_eq!(culprit(3.0, &heads).as_deref(), Some("√N (N = heads = 9)"));
        assert_eq!(
            culprit(-1.0 / 3.0, &heads).as_deref(),
            Some("-1/√N (N = heads = 9)")
        );
    }
}
