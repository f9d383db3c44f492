//! The checks of a layer's other hand-written rules: the forward-mode rule
//! (tangents against the forward, the adjoint identity against the
//! backward) and the second order (Hessian-vector products by the complex
//! step through a generic backward, and the integrability test).

use plumbline::gallery::{judge, rule_cases, zero_bias, Dense, DenseRuleBug, Entry};
use plumbline::prelude::*;
use plumbline::report::{Check, Culprit};
use plumbline::{Diagnosis, Error, Verdict};

#[test]
fn every_planted_rule_bug_fails_the_right_row_with_the_right_diagnosis() {
    let mut wrong = Vec::new();
    let mut count = 0;
    for case in rule_cases().iter().filter(|c| c.bug.is_some()) {
        let bug = case.bug.unwrap();
        for seed in [1, 2, 3] {
            let report = case.audit(seed, &Audit::new().seed(seed)).unwrap();
            let outcome = judge(&bug.expect, &report);
            let row = report.row(bug.expect.tensor);
            let right_check = row.is_some_and(|r| Some(r.check) == case.check);
            if !(outcome.detected && outcome.right_diagnosis && right_check) {
                wrong.push(format!(
                    "{} seed {seed}: {}\n{report}",
                    case.label(),
                    outcome.said
                ));
            }
            count += 1;
        }
    }
    assert!(count >= 3 * 25, "{count}");
    assert!(wrong.is_empty(), "{}", wrong.join("\n"));
}

/// Over the gallery's layers with rules, in `f64` and `f32`: no correct
/// case raises an alarm, ≥ 1,000 audits per entry point (each runs its
/// checks: tangents and adjoint; Hessian-vector and symmetry).
#[test]
fn no_false_alarm_over_a_thousand_correct_cases_per_check() {
    let cases = rule_cases();
    let mut wrong = Vec::new();
    for entry in [Entry::Tangents, Entry::SecondOrder] {
        let correct: Vec<_> = cases
            .iter()
            .filter(|c| c.bug.is_none() && c.entry == entry)
            .collect();
        let per_case = 1000_usize.div_ceil(correct.len()) as u64;
        let mut audits = 0;
        for case in &correct {
            for seed in 0..per_case {
                let report = case.audit(seed, &Audit::new().seed(seed + 100)).unwrap();
                if !report.passed() {
                    wrong.push(format!("{} seed {seed}\n{report}", case.label()));
                }
                audits += 1;
            }
        }
        assert!(audits >= 1000, "{audits}");
        assert!(correct.iter().any(|c| c.precision == "f32"));
        assert!(correct.iter().any(|c| c.precision == "f64"));
    }
    assert!(wrong.is_empty(), "{}", wrong.join("\n"));
}

#[test]
fn the_adjoint_check_costs_one_jvp_and_one_backward_whatever_the_size() {
    for (batch, inp, out) in [(2, 3, 2), (8, 20, 12)] {
        let x = Tensor::from_fn(vec![batch, inp], |i| ((i[0] * 7 + i[1]) as f64).sin());
        let w = Tensor::from_fn(vec![out, inp], |i| ((i[0] * 3 + i[1]) as f64).cos() / 4.0);
        let b = Tensor::from_fn(vec![out], |i| i[0] as f64 / 10.0);
        let args = Args::new(vec![x], vec![w, b]);
        let report = Audit::new()
            .run_tangents(&Dense::<f64>::new(None), &args)
            .unwrap();
        report.assert_passed();
        // One jvp and one backward for both checks; forwards: the outputs'
        // shapes, one complex forward (the reference), one with running
        // error bounds (the tangents' rounding).
        assert_eq!(report.rule_evals, 1);
        assert_eq!(report.backward_evals, 1);
        assert_eq!(report.forward_evals, 3);
        let second = Audit::new()
            .run_second_order(&Dense::<f64>::new(None), &args)
            .unwrap();
        second.assert_passed();
        assert_eq!((second.forward_evals, second.backward_evals), (1, 4));
        assert_eq!(second.rule_evals, 1);
    }
}

#[test]
fn rows_say_which_check_they_hold_in_the_table_and_the_json() {
    let report = Audit::new()
        .run_tangents(&Dense::<f64>::new(None), &Dense::args(4))
        .unwrap();
    assert_eq!(report.row("y").unwrap().check, Check::Tangent);
    assert_eq!(report.row("adjoint").unwrap().check, Check::Adjoint);
    let table = report.to_string();
    assert!(table.contains("rule audit of Dense<f64>"), "{table}");
    assert!(
        table.contains("tangent y") && table.contains("adjoint"),
        "{table}"
    );
    let json = plumbline::render::json(&report);
    let back: Report = serde_json::from_str(&json).unwrap();
    assert_eq!(back.row("adjoint").unwrap().check, Check::Adjoint);
    // A report written before rows had a check reads as gradient rows.
    let plain = Audit::new()
        .run(&Dense::<f64>::new(None), &Dense::args(4))
        .unwrap();
    let mut value: serde_json::Value =
        serde_json::from_str(&plumbline::render::json(&plain)).unwrap();
    for row in value["rows"].as_array_mut().unwrap() {
        row.as_object_mut().unwrap().remove("check");
    }
    value.as_object_mut().unwrap().remove("rule_evals");
    let old: Report = serde_json::from_value(value).unwrap();
    assert!(old.rows.iter().all(|r| r.check == Check::Gradient));
}

/// The planted `upstream-shifted-by-bias` term vanishes at b = 0, where a
/// layer is often audited: the plain audit passes there, and only the
/// integrability test (which looks at the backward's Jacobian) fails.
#[test]
fn the_integrability_test_catches_what_the_plain_audit_misses_at_a_point() {
    let layer = Dense::<f64>::new(None).with_rule_bug(DenseRuleBug::UpstreamShiftedByBias);
    for seed in 0..5 {
        let args = zero_bias(Dense::args(seed));
        Audit::new().run(&layer, &args).unwrap().assert_passed();
        let second = Audit::new().run_second_order(&layer, &args).unwrap();
        let row = second.row("symmetry").unwrap();
        assert_eq!(row.verdict, Verdict::Disagrees, "{second}");
        assert_eq!(row.diagnosis, Some(Diagnosis::NotSymmetric));
        // Away from b = 0 the plain audit sees it too.
        assert!(!Audit::new()
            .run(&layer, &Dense::args(seed))
            .unwrap()
            .passed());
    }
}

#[test]
fn a_wrong_backward_is_named_when_the_tangent_rule_matches_the_forward() {
    let layer = Dense::<f64>::new(Some(plumbline::gallery::DenseBug::SignFlippedWeight));
    let report = Audit::new().run_tangents(&layer, &Dense::args(2)).unwrap();
    assert!(report.row("y").unwrap().verdict.is_pass(), "{report}");
    assert_eq!(
        report.row("adjoint").unwrap().diagnosis,
        Some(Diagnosis::RuleAtFault {
            culprit: Culprit::Backward
        })
    );
    let message = std::panic::catch_unwind(|| report.assert_passed())
        .unwrap_err()
        .downcast::<String>()
        .unwrap();
    assert!(message.contains("fail 1 check: adjoint"), "{message}");
}

// ---- an orchard frost layer of the test's own -------------------------

/// Chance of frost damage per orchard block from a chill index x (its
/// shape is erf), with a tangent rule whose mistakes are chosen by `flaw`.
struct FrostOdds {
    flaw: Flaw,
}

#[derive(Clone, Copy, PartialEq)]
enum Flaw {
    None,
    /// `jvp` returns one tensor too many.
    ExtraTangent,
    /// `jvp` returns a tangent of the wrong shape.
    Reshaped,
    /// `jvp` panics.
    Panics,
    /// `hessian_vector` returns a tensor of the wrong shape.
    ReshapedHessian,
    /// `hessian_vector` returns one tensor too many.
    ExtraHessian,
    /// `backward_generic` panics on complex numbers.
    GenericPanics,
}

/// 2/√π, the factor of erf′ (NIST DLMF 7.10.1).
const TWO_OVER_ROOT_PI: f64 = std::f64::consts::FRAC_2_SQRT_PI;

impl Layer for FrostOdds {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("chill", "block")
            .output("odds", "block")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        self.backward_generic(a, up)
    }
}

impl GenericForward for FrostOdds {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        vec![a.input(0).map(|x| x.erf())]
    }
}

impl TangentRule for FrostOdds {
    fn jvp(&self, a: &Args<f64>, along: &Args<f64>) -> Vec<Tensor<f64>> {
        let (x, v) = (a.input(0), along.input(0));
        let t = Tensor::from_fn(x.shape().to_vec(), |i| {
            TWO_OVER_ROOT_PI * (-x[i] * x[i]).exp() * v[i]
        });
        match self.flaw {
            Flaw::ExtraTangent => vec![t.clone(), t],
            Flaw::Reshaped => vec![Tensor::full(vec![1], 0.0)],
            Flaw::Panics => panic!("tangent table not loaded"),
            _ => vec![t],
        }
    }
}

impl GenericBackward for FrostOdds {
    fn backward_generic<T: Scalar>(&self, a: &Args<T>, up: &[Tensor<T>]) -> Gradients<T> {
        if self.flaw == Flaw::GenericPanics && std::any::type_name::<T>().contains("ComplexStep") {
            panic!("not for these numbers");
        }
        let x = a.input(0);
        let k = T::from(TWO_OVER_ROOT_PI).unwrap();
        Gradients::from(vec![Tensor::from_fn(x.shape().to_vec(), |i| {
            k * (-x[i] * x[i]).exp() * up[0][i]
        })])
    }

    /// d²erf/dx² at the block's chill index, as pinned values.
    fn hessian_vector(
        &self,
        a: &Args<f64>,
        up: &[Tensor<f64>],
        along: &Args<f64>,
    ) -> Option<Gradients<f64>> {
        let x = a.input(0);
        let second = |x: f64| {
            // d²erf/dx² = −(4x/√π)e^(−x²), from NIST DLMF 7.10.1
            // (d erf/dx = (2/√π)e^(−x²)) differentiated once; values from
            // that closed form in double precision.
            if x == 1.0 {
                -0.830_214_994_841_189_4
            } else if x == 0.5 {
                -0.878_782_578_935_444_8
            } else {
                f64::NAN
            }
        };
        let h = Tensor::from_fn(x.shape().to_vec(), |i| {
            second(x[i]) * up[0][i] * along.input(0)[i]
        });
        Some(Gradients::from(match self.flaw {
            Flaw::ReshapedHessian => vec![Tensor::full(vec![3], 0.0)],
            Flaw::ExtraHessian => vec![h.clone(), h],
            _ => vec![h],
        }))
    }
}

fn frost_args() -> Args<f64> {
    Args::new(vec![Tensor::new(vec![2], vec![1.0, 0.5]).unwrap()], vec![])
}

#[test]
fn the_complex_step_through_the_backward_gives_erfs_second_derivative() {
    let layer = FrostOdds { flaw: Flaw::None };
    let report = Audit::new()
        .run_second_order(&layer, &frost_args())
        .unwrap();
    report.assert_passed();
    let row = report.row("chill").unwrap();
    assert_eq!(row.check, Check::HessianVector);
    assert!(row.max_rel_error < 1e-13, "{report}");
    Audit::new()
        .run_tangents(&layer, &frost_args())
        .unwrap()
        .assert_passed();
}

#[test]
fn misbehaving_rules_are_errors_or_failing_rows_never_panics() {
    let args = frost_args();
    let err = Audit::new()
        .run_tangents(
            &FrostOdds {
                flaw: Flaw::ExtraTangent,
            },
            &args,
        )
        .unwrap_err();
    assert!(
        matches!(err, Error::OutputCount { ref call, found: 2, expected: 1, .. } if call == "jvp"),
        "{err}"
    );
    let report = Audit::new()
        .run_tangents(
            &FrostOdds {
                flaw: Flaw::Reshaped,
            },
            &args,
        )
        .unwrap();
    assert_eq!(report.row("odds").unwrap().verdict, Verdict::WrongShape);
    assert_eq!(
        report.row("adjoint").unwrap().diagnosis,
        Some(Diagnosis::RuleAtFault {
            culprit: Culprit::TangentRule
        })
    );
    let err = Audit::new()
        .run_tangents(&FrostOdds { flaw: Flaw::Panics }, &args)
        .unwrap_err();
    assert!(
        matches!(err, Error::LayerPanicked { ref call, .. } if call == "jvp"),
        "{err}"
    );
    let err = Audit::new()
        .run_second_order(
            &FrostOdds {
                flaw: Flaw::GenericPanics,
            },
            &args,
        )
        .unwrap_err();
    assert!(err.to_string().contains("backward_generic"), "{err}");
    let report = Audit::new()
        .run_second_order(
            &FrostOdds {
                flaw: Flaw::ReshapedHessian,
            },
            &args,
        )
        .unwrap();
    let row = report.row("chill").unwrap();
    assert_eq!(
        (row.check, row.verdict),
        (Check::HessianVector, Verdict::WrongShape)
    );
    assert!(report.row("symmetry").unwrap().verdict.is_pass());
    let err = Audit::new()
        .run_second_order(
            &FrostOdds {
                flaw: Flaw::ExtraHessian,
            },
            &args,
        )
        .unwrap_err();
    assert!(
        matches!(err, Error::OutputCount { ref call, found: 2, .. } if call == "hessian_vector"),
        "{err}"
    );
}

/// The environment-aware assertions of the other rules: a correct layer
/// passes and hands back its report; a planted rule bug panics with the
/// whole table and the replay line, as `assert_backward!` does.
#[test]
fn the_assertions_of_other_rules_pass_correct_rules_and_panic_with_the_table() {
    let args = Dense::args(5);
    let passed = plumbline::assert_tangents(&Dense::<f64>::new(None), &args, |a| a.seed(5));
    assert!(passed.row("adjoint").is_some(), "{}", *passed);
    let passed = plumbline::assert_second_order(&Dense::<f64>::new(None), &args, |a| a);
    assert!(passed.row("symmetry").is_some(), "{}", *passed);

    let layer = Dense::<f64>::new(None).with_rule_bug(DenseRuleBug::UpstreamShiftedByBias);
    let caught = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
        plumbline::assert_second_order(&layer, &args, |a| a.seed(5));
    }));
    let message = caught.expect_err("a non-symmetric backward must panic");
    let text = message
        .downcast_ref::<String>()
        .cloned()
        .unwrap_or_default();
    assert!(text.contains("symmetry"), "{text}");
    assert!(text.contains("replay: seed 5"), "{text}");
}
