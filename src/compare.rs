//! Element verdicts: each analytic value against its numeric reference and
//! error bound, the kink test for elements that disagree, and the joint
//! test for kinks that interact.

use crate::error::Error;
use crate::scheme::{Estimate, KinkProbe};
use crate::tensor::Tensor;
use crate::tolerance::Tolerance;

/// One element's comparison.
#[derive(Clone, Debug, PartialEq)]
pub struct ElementCheck {
    /// Its flat (row-major) position in the tensor.
    pub index: usize,
    /// The backward's value (NaN when no gradient of the right shape exists).
    pub analytic: f64,
    /// The reference value.
    pub numeric: f64,
    /// The reference's estimated error.
    pub error: f64,
    /// Σ|terms| of the derivative (see [`Estimate::scale`]).
    pub scale: f64,
    /// The bound that applied.
    pub bound: f64,
    /// `false` when the reference's truncation error was above 1% of the
    /// derivative's size: the bound is wide there (information only).
    pub decided: bool,
    /// The outcome.
    pub status: ElementStatus,
}

impl ElementCheck {
    /// `true` for an element that agrees only within a wide bound (the
    /// reference's own error above 1% of the derivative there).
    pub(crate) fn is_wide(&self) -> bool {
        !self.decided && self.status == ElementStatus::Agrees
    }

    /// |analytic − numeric| over the bound (∞ for a non-finite value or a
    /// zero bound with a difference).
    pub fn excess(&self) -> f64 {
        let diff = (self.analytic - self.numeric).abs();
        let ratio = if self.bound > 0.0 {
            diff / self.bound
        } else if diff > 0.0 {
            f64::INFINITY
        } else {
            0.0
        };
        if ratio.is_nan() {
            f64::INFINITY
        } else {
            ratio
        }
    }
}

/// The outcome for one element.
#[derive(Clone, Copy, Debug, PartialEq)]
#[non_exhaustive]
pub enum ElementStatus {
    /// Within the bound.
    Agrees,
    /// Beyond the bound.
    Disagrees,
    /// Analytic or numeric value is NaN or infinite.
    NotFinite,
    /// At a non-differentiable point: the one-sided derivatives differ.
    Kink {
        /// One-sided derivatives there.
        probe: KinkProbe,
        /// The analytic value lies between them (a valid one-sided
        /// derivative or subgradient).
        fits: bool,
    },
    /// Not compared: the element itself is ±∞ or NaN, so it cannot be
    /// moved. Its analytic value must still be finite.
    NonFiniteInput,
}

impl ElementStatus {
    /// `true` for a kink (the element is listed apart).
    pub fn is_kink(self) -> bool {
        matches!(self, ElementStatus::Kink { .. })
    }

    /// `true` for `Disagrees` and `NotFinite`.
    pub fn is_failure(self) -> bool {
        matches!(self, ElementStatus::Disagrees | ElementStatus::NotFinite)
    }
}

/// Two kink elements moved together whose analytic values do not add up
/// to a value between the one-sided derivatives of the joint move, though
/// the move shows their kinks interact (one tie of one max).
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct JointKink {
    /// The two flat positions.
    pub elements: [usize; 2],
    /// Σ analytic over them.
    #[serde(with = "crate::format::float_text")]
    pub analytic_sum: f64,
    /// One-sided derivative of the joint move from the left.
    #[serde(with = "crate::format::float_text")]
    pub left: f64,
    /// One-sided derivative of the joint move from the right.
    #[serde(with = "crate::format::float_text")]
    pub right: f64,
}

/// What the comparison may ask of the reference for one tensor.
pub(crate) trait Prober {
    /// The one-sided kink test at element `j`.
    fn kink(&mut self, j: usize) -> Result<Option<KinkProbe>, Error>;
    /// One-sided derivatives of moving elements `group` together.
    fn joint(&mut self, group: &[usize]) -> Result<Option<KinkProbe>, Error>;
    /// A second look at an element that disagrees: the estimate with its
    /// error bar widened by what the forward's own rounding does there
    /// (`None` when there is nothing to add).
    fn second_look(&mut self, j: usize, first: &Estimate) -> Result<Option<Estimate>, Error>;
    /// The largest factor by which the forward's rounding at the point
    /// exceeds a few ulps of its outputs, over all outputs (1 when not
    /// measured).
    fn widest_amplification(&self) -> f64 {
        1.0
    }
    /// The backward's own value for element `j` with the element moved a
    /// little to the left and to the right.
    fn backward_beside(&mut self, j: usize) -> Result<Option<(f64, f64)>, Error>;
    /// The scatter of the backward's own value for element `j` about a
    /// smooth curve, over small moves of the element: the backward's
    /// rounding at this point.
    fn backward_scatter(&mut self, j: usize, at_point: f64) -> Result<f64, Error>;
}

/// The elements of one tensor, compared.
pub(crate) struct Compared {
    pub elements: Vec<ElementCheck>,
    pub joint_kink: Option<JointKink>,
}

/// Every pair of kink elements is tested jointly up to this many kinks;
/// above it, neighbours in flat order and a fixed set of other pairs.
const ALL_PAIRS_UP_TO: usize = 16;
const OTHER_PAIRS: usize = 64;

/// Compares the checked elements of one tensor.
///
/// `grad` is the backward's gradient when it has the tensor's shape;
/// `indices` the flat positions checked, with their `estimates`;
/// `inputs` the tensor's own values (to skip non-finite ones).
pub(crate) fn compare(
    grad: Option<&Tensor<f64>>,
    inputs: &[f64],
    indices: &[usize],
    estimates: Vec<Estimate>,
    tol: &Tolerance,
    layer_eps: f64,
    prober: &mut dyn Prober,
) -> Result<Compared, Error> {
    let mut elements = Vec::with_capacity(estimates.len());
    // Per element, how much the forward's own rounding at the point
    // exceeds a few ulps (for the joint test's allowance). A tie's share
    // may be 0 in the element's own estimate (no output moved along it):
    // the whole layer's amplification is the least it gets.
    let mut amplifications = Vec::with_capacity(estimates.len());
    let widest = prober.widest_amplification();
    let mut corners_left = CORNER_PROBES;
    let (mut looks_left, mut confirmed) = (usize::MAX, 0);
    for (&j, est) in indices.iter().zip(estimates) {
        let analytic = grad.map_or(f64::NAN, |g| g.data()[j]);
        let mut e = judge(j, analytic, &est, tol, layer_eps);
        let mut amplification = est.amplification.max(widest);
        if !inputs[j].is_finite() {
            e.status = if analytic.is_finite() {
                ElementStatus::NonFiniteInput
            } else {
                ElementStatus::NotFinite
            };
        } else if e.status == ElementStatus::Disagrees && confirmed < CONFIRMED_ENOUGH {
            // (Once enough elements are confirmed wrong, the tensor fails
            // whatever the rest show: later ones get no kink probe either.)
            match prober.kink(j)? {
                Some(probe) if probe.at_point && sides_with_analytic(&e, &probe) => {
                    e.status = ElementStatus::Kink { probe, fits: true };
                }
                // A clear jump at the point that the analytic value does
                // not fit: listed apart as a kink outside its one-sided
                // values (it fails when kinks fail). A "jump" within the
                // probe's own noise is no evidence of a kink, and excuses
                // nothing.
                Some(probe) if probe.at_point && (probe.left - probe.right).abs() > probe.noise => {
                    e.status = ElementStatus::Kink { probe, fits: false };
                }
                // A kink inside the reference's stencil but not at the
                // point: the reference straddles it; the one-sided values
                // it gives at the point bound what a correct value can be.
                Some(probe) if !probe.at_point && sides_with_analytic(&e, &probe) => {
                    e.status = ElementStatus::Agrees;
                    e.decided = false;
                }
                // Smooth along this element (or a kink in the stencil that
                // the analytic value does not fit): a second look measures
                // what the forward's and the backward's own rounding do
                // here.
                _ if looks_left > 0 => {
                    looks_left -= 1;
                    let mut wider = prober.second_look(j, &est)?.unwrap_or(est);
                    amplification = amplification.max(wider.amplification);
                    wider.error += 2.0 * prober.backward_scatter(j, analytic)?;
                    e = judge(j, analytic, &wider, tol, layer_eps);
                    if e.status == ElementStatus::Disagrees {
                        confirmed += 1;
                        if confirmed >= CONFIRMED_ENOUGH {
                            looks_left = 0;
                        }
                    }
                }
                _ => {}
            }
        }
        if e.status == ElementStatus::Disagrees && corners_left > 0 {
            corners_left -= 1;
            if let Some(probe) = corner(prober, &e)? {
                e.status = ElementStatus::Kink { probe, fits: false };
            }
        }
        elements.push(e);
        amplifications.push(amplification);
    }
    // Once a tensor has a kink, its agreeing elements are probed too: an
    // element that matched the reference by the luck of a tie is at a kink
    // all the same and belongs in the joint test below. The reference there
    // took one side of the tie (or straddled it): one-sided values that do
    // not hold the reference's own value are a smooth φ bending within the
    // probe's step, not a tie.
    if elements.iter().any(|e| e.status.is_kink()) {
        for e in elements.iter_mut() {
            if e.status == ElementStatus::Agrees {
                let probe = prober.kink(e.index)?;
                if let Some(probe) = probe.filter(|p| p.at_point && fits(e.numeric, p, e.bound)) {
                    e.status = ElementStatus::Kink { probe, fits: true };
                }
            }
        }
    }
    let joint_kink = joint_test(&elements, &amplifications, prober, tol, layer_eps)?;
    Ok(Compared {
        elements,
        joint_kink,
    })
}

/// Elements per tensor that get the corner probe (two backward calls
/// each): a bug shows at every element, a corner at a few.
const CORNER_PROBES: usize = 8;

/// Once this many elements of a tensor still disagree after a second look,
/// the tensor fails whatever the rest show: later elements are judged
/// without one (a second look costs a few dozen evaluations).
const CONFIRMED_ENOUGH: usize = 4;

/// An element at a corner of several kinks (a clip at its bound where a max
/// also ties): φ is flat along this element on both sides, but the piece
/// the backward's conventions pick is active at the point in other
/// directions, so its value there is a valid subgradient no move of this
/// element alone can confirm. The sign: the backward's own value switches
/// exactly at the point, and agrees with the reference on one side.
/// Returns the backward's values beside the point; such an element is
/// listed apart with the kinks (it fails only when kinks fail).
fn corner(prober: &mut dyn Prober, e: &ElementCheck) -> Result<Option<KinkProbe>, Error> {
    let Some((left, right)) = prober.backward_beside(e.index)? else {
        return Ok(None);
    };
    let near = |a: f64, b: f64| (a - b).abs() <= e.bound;
    let switches = !near(left, e.analytic) && !near(right, e.analytic);
    let sides_right = near(left, e.numeric) || near(right, e.numeric);
    Ok((switches && sides_right).then_some(KinkProbe {
        left,
        right,
        noise: 0.0,
        at_point: true,
    }))
}

/// The verdict on one element from its estimate alone.
fn judge(j: usize, analytic: f64, est: &Estimate, tol: &Tolerance, layer_eps: f64) -> ElementCheck {
    // The bound does not depend on a missing or non-finite analytic value
    // (the status fails it anyway), so diagnoses can still use it.
    let a_for_bound = if analytic.is_finite() {
        analytic
    } else {
        est.value
    };
    let bound = tol.bound(est, a_for_bound, layer_eps);
    let diff = (analytic - est.value).abs();
    let status = if !(analytic.is_finite() && est.value.is_finite()) {
        ElementStatus::NotFinite
    } else if Tolerance::accepts(diff, bound) {
        ElementStatus::Agrees
    } else {
        ElementStatus::Disagrees
    };
    ElementCheck {
        index: j,
        analytic,
        numeric: est.value,
        error: est.error,
        scale: est.scale,
        bound,
        decided: est.conclusive,
        status,
    }
}

/// `true` if a kink at the point, or near it inside the reference's
/// stencil, explains the disagreement: the analytic value fits the
/// one-sided derivatives at the point (taken on a finer scale than the
/// reference's steps), and lies at most half as far from the interval
/// between them as from the reference. At a kink a valid analytic value is
/// one of the one-sided values or between them, while a reference that
/// straddles the kink can land anywhere near it; a wrong gradient beside a
/// kink (or beside a smooth point misread as one) is far from both.
fn sides_with_analytic(e: &ElementCheck, probe: &KinkProbe) -> bool {
    let (lo, hi) = (probe.left.min(probe.right), probe.left.max(probe.right));
    let off = (lo - e.analytic).max(e.analytic - hi).max(0.0);
    fits(e.analytic, probe, e.bound) && off <= 0.5 * (e.analytic - e.numeric).abs()
}

/// `true` if `analytic` lies between the one-sided derivatives (with the
/// element's bound and the probe's allowance on each side).
fn fits(analytic: f64, probe: &KinkProbe, bound: f64) -> bool {
    let slack = bound + probe.noise;
    let lo = probe.left.min(probe.right) - slack;
    let hi = probe.left.max(probe.right) + slack;
    (lo..=hi).contains(&analytic)
}

/// Kinks that interact must share one gradient. Two kink elements moved
/// together can keep φ smooth where each alone meets a kink: a tie of one
/// max stays a tie when both tied elements move, and φ then changes at one
/// rate. Every piece active at the point agrees with that rate along the
/// joint move, so the two analytic values must add up to it: ties routed
/// to every maximum fit one by one but not together. Pairs whose joint move
/// still meets a kink (separate ReLUs at 0, a clip at both bounds, products
/// of kinks) say nothing about how a gradient was shared, and are left
/// alone; so are pairs whose joint one-sided values are just the sums of
/// their own (separate kinks whose jumps cancel), and pairs whose joint
/// move did not change φ at all.
///
/// Each element's share is allowed the backward's rounding at the size of
/// its one-sided values (times the forward's measured rounding
/// amplification there), not only at the size of its own value and
/// reference: an element that got 0 of a tie (and whose reference took
/// that side too) computes nothing exactly, while the element that got the
/// whole gradient computed it with rounding.
fn joint_test(
    elements: &[ElementCheck],
    amplifications: &[f64],
    prober: &mut dyn Prober,
    tol: &Tolerance,
    layer_eps: f64,
) -> Result<Option<JointKink>, Error> {
    let kinked: Vec<(ElementCheck, KinkProbe)> = elements
        .iter()
        .zip(amplifications)
        .filter_map(|(e, &amplification)| match e.status {
            ElementStatus::Kink { probe, .. } => {
                let side = probe.left.abs().max(probe.right.abs());
                let at_sides = Estimate {
                    value: side,
                    error: e.error,
                    scale: e.scale.max(side),
                    forward_scale: 0.0,
                    evals: 0,
                    step: 0.0,
                    conclusive: e.decided,
                    amplification,
                };
                let bound = e.bound.max(tol.bound(&at_sides, e.analytic, layer_eps));
                Some((ElementCheck { bound, ..*e }, probe))
            }
            _ => None,
        })
        .collect();
    for (a, b) in pairs(kinked.len()) {
        let ((ea, pa), (eb, pb)) = (&kinked[a], &kinked[b]);
        let Some(joint) = prober.joint(&[ea.index, eb.index])? else {
            continue;
        };
        // A joint move that left φ unchanged on both sides saw nothing: a
        // forward that rounds to a staircase (`1 + tanh u` deep in
        // saturation, a difference of squares in `f32`) is flat over the
        // step while its derivative is not, and the probe has no rounding
        // to measure when no output moved.
        if joint.left == 0.0 && joint.right == 0.0 && joint.noise == 0.0 {
            continue;
        }
        let slack = pa.noise + pb.noise + joint.noise + ea.bound + eb.bound;
        // Smooth along the joint move by the joint probe's own allowance: a
        // noisy probe of one element alone says nothing about it.
        let smooth = (joint.left - joint.right).abs() <= joint.noise + ea.bound + eb.bound;
        let separate = (joint.left - (pa.left + pb.left)).abs() <= slack
            && (joint.right - (pa.right + pb.right)).abs() <= slack;
        if !smooth || separate {
            continue;
        }
        let sum = ea.analytic + eb.analytic;
        if !fits(sum, &joint, ea.bound + eb.bound) {
            return Ok(Some(JointKink {
                elements: [ea.index, eb.index],
                analytic_sum: sum,
                left: joint.left,
                right: joint.right,
            }));
        }
    }
    Ok(None)
}

/// The pairs (a, b), a < b, of `n` kink elements the joint test visits:
/// all of them up to [`ALL_PAIRS_UP_TO`] kinks; above that, neighbours in
/// flat order (ties of one pooling window sit close together) and
/// [`OTHER_PAIRS`] more spread evenly over the rest.
fn pairs(n: usize) -> Vec<(usize, usize)> {
    if n <= ALL_PAIRS_UP_TO {
        return (0..n)
            .flat_map(|a| (a + 1..n).map(move |b| (a, b)))
            .collect();
    }
    let mut out: Vec<(usize, usize)> = (0..n - 1).map(|a| (a, a + 1)).collect();
    let total = n * (n - 1) / 2;
    let stride = (total / OTHER_PAIRS).max(1);
    let mut k = 0;
    for a in 0..n {
        for b in a + 2..n {
            if k % stride == 0 && out.len() < n - 1 + OTHER_PAIRS {
                out.push((a, b));
            }
            k += 1;
        }
    }
    out
}

/// |a − n| / max(|a|, |n|), with 0/0 = 0 and NaN for non-finite input.
pub(crate) fn relative_error(a: f64, n: f64) -> f64 {
    let d = (a - n).abs();
    if d == 0.0 {
        return 0.0;
    }
    d / a.abs().max(n.abs())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn pairs_cover_small_sets_and_neighbours_of_large_ones() {
        assert_eq!(pairs(3), vec![(0, 1), (0, 2), (1, 2)]);
        assert!(pairs(1).is_empty());
        let big = pairs(40);
        assert!(big.contains(&(0, 1)) && big.contains(&(38, 39)));
        assert!(big.len() <= 39 + OTHER_PAIRS);
        assert!(big.iter().all(|&(a, b)| a < b && b < 40));
    }
}
