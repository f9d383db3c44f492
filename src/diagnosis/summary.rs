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
    let wide = elements.iter().filter(|e| e.is_wide()).count();
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::scheme::KinkProbe;

    fn check(
        index: usize,
        analytic: f64,
        numeric: f64,
        bound: f64,
        status: ElementStatus,
    ) -> ElementCheck {
        ElementCheck {
            index,
            analytic,
            numeric,
            error: bound / 4.0,
            scale: numeric.abs(),
            bound,
            decided: true,
            status,
        }
    }

    fn kink(fits: bool) -> ElementStatus {
        ElementStatus::Kink {
            probe: KinkProbe {
                left: 0.0,
                right: 1.0,
                noise: 1e-9,
                at_point: true,
            },
            fits,
        }
    }

    fn facts(evidence: &Evidence, kinks_fail: bool) -> RowFacts<'_> {
        RowFacts {
            returned: true,
            same_shape: true,
            all_finite: true,
            joint_kink: None,
            evidence,
            kinks_fail,
        }
    }

    /// Frost-risk row: one element agrees, one is off by 1 (10× its bound),
    /// a kink that fits, one that does not, a masked input, one agreeing
    /// against a wide bound. Figures worked by hand.
    fn frost_row() -> Vec<ElementCheck> {
        let mut wide = check(5, 3.0, 3.3, 0.5, ElementStatus::Agrees);
        wide.decided = false;
        vec![
            check(0, 1.0, 1.1, 0.2, ElementStatus::Agrees),
            check(1, 2.0, 1.0, 0.1, ElementStatus::Disagrees),
            check(2, 0.5, 0.0, 0.1, kink(true)),
            check(3, 5.0, 0.0, 0.1, kink(false)),
            check(4, 0.0, f64::NAN, 0.0, ElementStatus::NonFiniteInput),
            wide,
        ]
    }

    #[test]
    fn counts_worst_and_largest_errors() {
        let ev = Evidence::default();
        let s = summarize(&frost_row(), &facts(&ev, false));
        assert_eq!((s.failing, s.kinks, s.unchecked, s.wide), (1, 2, 1, 1));
        // Kinks and the masked input stay out of the figures: the largest
        // error is element 1's, |2 − 1| = 1, relative 1/2.
        assert_eq!((s.max_abs_error, s.max_rel_error), (1.0, 0.5));
        assert_eq!(s.worst, Some(1));
        assert_eq!(s.verdict, Verdict::Disagrees);
        // With kinks failing, the kink outside its one-sided values fails
        // too and is the worst (excess 5/0.1 = 50), relative error 5/5 = 1.
        let s = summarize(&frost_row(), &facts(&ev, true));
        assert_eq!((s.failing, s.kinks), (2, 2));
        assert_eq!((s.max_abs_error, s.max_rel_error), (5.0, 1.0));
        assert_eq!(s.worst, Some(3));
    }

    #[test]
    fn with_nothing_failing_the_worst_is_the_closest_to_its_bound() {
        let ev = Evidence::default();
        let mut row = frost_row();
        row.remove(1);
        // A second decided element that agrees exactly.
        row.push(check(6, 1.0, 1.0, 0.1, ElementStatus::Agrees));
        // Element 0: 0.1 of 0.2 (half its bound); the wide one 0.3 of 0.5.
        let s = summarize(&row, &facts(&ev, false));
        assert_eq!((s.failing, s.wide), (0, 1));
        assert_eq!(s.worst, Some(4));
        assert_eq!(s.verdict, Verdict::Agrees);
        assert!((s.max_abs_error - 0.3).abs() < 1e-15, "{}", s.max_abs_error);
        // Only kinks and masked inputs: no figures, no worst.
        let s = summarize(&row[2..4], &facts(&ev, false));
        assert_eq!(
            (s.max_abs_error, s.max_rel_error, s.worst),
            (0.0, 0.0, None)
        );
    }

    #[test]
    fn a_failing_element_is_the_worst_even_when_closer_to_its_bound() {
        // With kinks failing, a kink outside its one-sided values fails at
        // half its bound; an agreeing element at 0.9 of its bound does not.
        let ev = Evidence::default();
        let row = vec![
            check(0, 1.0, 1.09, 0.1, ElementStatus::Agrees),
            check(1, 0.05, 0.0, 0.1, kink(false)),
        ];
        let s = summarize(&row, &facts(&ev, true));
        assert_eq!((s.failing, s.worst), (1, Some(1)));
        let s = summarize(&row, &facts(&ev, false));
        assert_eq!((s.failing, s.worst), (0, Some(0)));
    }

    #[test]
    fn a_nan_difference_is_the_worst_of_all_whatever_comes_after() {
        let ev = Evidence::default();
        let row = vec![
            check(0, f64::NAN, 1.0, 0.1, ElementStatus::NotFinite),
            check(1, 9.0, 1.0, 0.1, ElementStatus::Disagrees),
        ];
        let s = summarize(&row, &facts(&ev, false));
        assert!(s.max_abs_error.is_nan() && s.max_rel_error.is_nan());
        assert_eq!(s.failing, 2);
        assert_eq!(s.worst, Some(0));
        let row = vec![row[1].clone(), row[0].clone()];
        let s = summarize(&row, &facts(&ev, false));
        assert!(s.max_abs_error.is_nan() && s.max_rel_error.is_nan());
    }

    #[test]
    fn the_verdict_weighs_everything_the_audit_noticed() {
        let mut row = frost_row();
        row.remove(1);
        let ok = Evidence::default();
        assert_eq!(summarize(&row, &facts(&ok, false)).verdict, Verdict::Agrees);
        let mut f = facts(&ok, false);
        f.returned = false;
        assert_eq!(summarize(&row, &f).verdict, Verdict::Missing);
        let mut f = facts(&ok, false);
        f.same_shape = false;
        assert_eq!(summarize(&row, &f).verdict, Verdict::WrongShape);
        let mut f = facts(&ok, false);
        f.all_finite = false;
        assert_eq!(summarize(&row, &f).verdict, Verdict::Disagrees);
        let joint = JointKink {
            elements: [2, 3],
            analytic_sum: 2.0,
            left: 0.0,
            right: 1.0,
        };
        let mut f = facts(&ok, false);
        f.joint_kink = Some(&joint);
        assert_eq!(summarize(&row, &f).verdict, Verdict::Disagrees);
        let said = Some("y at [0] differs".to_string());
        for ev in [
            Evidence {
                forward_change: said.clone(),
                ..Evidence::default()
            },
            Evidence {
                backward_change: said.clone(),
                ..Evidence::default()
            },
            Evidence {
                nonfinite_output: said.clone(),
                ..Evidence::default()
            },
        ] {
            assert_eq!(
                summarize(&row, &facts(&ev, false)).verdict,
                Verdict::Disagrees
            );
        }
    }

    #[test]
    fn verdict_words() {
        let all = [
            (Verdict::Agrees, "ok", true),
            (Verdict::Disagrees, "FAIL", false),
            (Verdict::WrongShape, "SHAPE", false),
            (Verdict::Missing, "MISSING", false),
        ];
        for (v, word, pass) in all {
            assert_eq!(
                (v.as_str(), v.to_string(), v.is_pass()),
                (word, word.to_string(), pass)
            );
        }
    }
}
