//! A row's summary beside its diagnosis: the counts, the worst element,
//! the largest errors, and the verdict.

use std::fmt;

use crate::compare::{relative_error, ElementCheck, ElementStatus, JointKink};

use super::Evidence;

/// A row's verdict.
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
/// let row = &Audit::new().run(&Warmth { factor: 1.0 }, &args)?.rows[0];
/// assert_eq!(row.verdict, Verdict::Agrees);
/// assert!(row.verdict.is_pass());
/// let row = &Audit::new().run(&Warmth { factor: 0.5 }, &args)?.rows[0];
/// assert!(!row.verdict.is_pass());
/// # Ok::<(), plumbline::Error>(())
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
#[non_exhaustive]
pub enum Verdict {
    /// Every element is within its bound (`ok`).
    #[serde(rename = "ok")]
    Agrees,
    /// Some element is beyond its bound or not finite (`FAIL`).
    #[serde(rename = "fail")]
    Disagrees,
    /// The gradient's shape differs from the tensor's (`SHAPE`).
    #[serde(rename = "shape")]
    WrongShape,
    /// The backward returned no gradient for this tensor (`MISSING`).
    Missing,
}

impl Verdict {
    /// `true` only for [`Verdict::Agrees`].
    pub fn is_pass(self) -> bool {
        self == Verdict::Agrees
    }

    /// The word shown in tables (the JSON report uses the same word in
    /// lower case).
    pub fn as_str(self) -> &'static str {
        match self {
            Verdict::Agrees => "ok",
            Verdict::Disagrees => "FAIL",
            Verdict::WrongShape => "SHAPE",
            Verdict::Missing => "MISSING",
        }
    }
}

impl fmt::Display for Verdict {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// What a row says beside its diagnosis.
pub(crate) struct Summary {
    /// Elements that fail (beyond their bound, not finite, or at a kink
    /// they do not fit when kinks fail).
    pub failing: usize,
    /// Elements at a kink.
    pub kinks: usize,
    /// Elements not compared because they are ±∞ or NaN.
    pub unchecked: usize,
    /// Elements judged against a wide bound.
    pub wide: usize,
    /// Position in the element list of the worst element.
    pub worst: Option<usize>,
    pub max_abs_error: f64,
    pub max_rel_error: f64,
    pub verdict: Verdict,
}

/// What decides the verdict besides the element checks.
pub(crate) struct RowFacts<'a> {
    /// The backward returned a gradient for this tensor.
    pub returned: bool,
    /// ... with the tensor's shape.
    pub same_shape: bool,
    /// Every element of the returned gradient (checked or not) is finite.
    pub all_finite: bool,
    pub joint_kink: Option<&'a JointKink>,
    pub evidence: &'a Evidence,
    pub kinks_fail: bool,
}

/// Counts, worst element, largest errors and the verdict of one row.
pub(crate) fn summarize(elements: &[ElementCheck], facts: &RowFacts<'_>) -> Summary {
    let fails = |e: &ElementCheck| {
        e.status.is_failure()
            || (facts.kinks_fail && matches!(e.status, ElementStatus::Kink { fits: false, .. }))
    };
    let failing = elements.iter().filter(|e| fails(e)).count();
    let kinks = elements.iter().filter(|e| e.status.is_kink()).count();
    let unchecked = elements
        .iter()
        .filter(|e| e.status == ElementStatus::NonFiniteInput)
        .count();
    let wide = elements
        .iter()
        .filter(|e| !e.decided && e.status == ElementStatus::Agrees)
        .count();
    let (mut max_abs, mut max_rel) = (0.0_f64, 0.0_f64);
    // Kinks and unmoved elements count in the row's figures only when
    // they fail it.
    let counted = |e: &ElementCheck| {
        fails(e) || !(e.status.is_kink() || e.status == ElementStatus::NonFiniteInput)
    };
    for e in elements.iter().filter(|e| counted(e)) {
        let diff = (e.analytic - e.numeric).abs();
        let rel = relative_error(e.analytic, e.numeric);
        // NaN compares as the worst of all.
        max_abs = if diff.is_nan() || max_abs.is_nan() {
            f64::NAN
        } else {
            max_abs.max(diff)
        };
        max_rel = if rel.is_nan() || max_rel.is_nan() {
            f64::NAN
        } else {
            max_rel.max(rel)
        };
    }
    // The worst element: the furthest beyond its bound among the failing
    // ones; if none fails, the closest to its bound.
    let pool: Vec<usize> = if failing > 0 {
        (0..elements.len())
            .filter(|&k| fails(&elements[k]))
            .collect()
    } else {
        (0..elements.len())
            .filter(|&k| counted(&elements[k]))
            .collect()
    };
    let worst = pool
        .into_iter()
        .max_by(|&a, &b| elements[a].excess().total_cmp(&elements[b].excess()));
    let ev = facts.evidence;
    let verdict = if !facts.returned {
        Verdict::Missing
    } else if !facts.same_shape {
        Verdict::WrongShape
    } else if failing > 0
        || !facts.all_finite
        || facts.joint_kink.is_some()
        || ev.forward_change.is_some()
        || ev.backward_change.is_some()
        || ev.nonfinite_output.is_some()
    {
        Verdict::Disagrees
    } else {
        Verdict::Agrees
    };
    Summary {
        failing,
        kinks,
        unchecked,
        wide,
        worst,
        max_abs_error: max_abs,
        max_rel_error: max_rel,
        verdict,
    }
}
