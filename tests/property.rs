//! Property tests over random shapes: the correct hive score passes for
//! every drawn size; a planted bug that only shows with two or more hives
//! is found and shrunk to the smallest failing shape; kinks are rejected
//! rather than failed; our `Error` converts with `?`.

mod hive;

use hive::{HiveBug, HiveScore, CORRECT};
use plumbline::strategy::{check_layer_with, CaseOutcome};
use plumbline::{check_layer, strategy, Args, Audit, Forward, Gradients, Layer, Signature, Tensor};
use proptest::prelude::*;
use proptest::test_runner::{Config, RngAlgorithm, TestError, TestRng, TestRunner};

/// The documented pattern: one range per named dim of the signature.
fn hive_sizes() -> [(&'static str, std::ops::RangeInclusive<usize>); 3] {
    [("hive", 1..=4), ("sensor", 1..=8), ("score", 1..=3)]
}

proptest! {
    // 256 draws cover every combination of the three dims' sizes
    // (4 × 8 × 3 = 96) with room to spare; each audit takes well under a
    // millisecond.
    #![proptest_config(strategy::config(256))]

    #[test]
    fn hive_score_agrees_for_random_shapes(
        args in strategy::layer_args(&CORRECT, &hive_sizes(), -0.5..=0.5)
    ) {
        let report = check_layer(&CORRECT, &args)?;
        prop_assert_eq!(report.rows.len(), 3);
    }

    #[test]
    fn tensors_have_the_asked_shape_and_range(
        t in strategy::tensor_of_any_shape::<f32>(0..=3, 1..=4, -0.25..=0.75)
    ) {
        prop_assert!(t.rank() <= 3);
        prop_assert!(t.shape().iter().all(|n| (1..=4).contains(n)));
        prop_assert!(t.data().iter().all(|v| (-0.25..=0.75).contains(v)));
        prop_assert_eq!(t.len(), t.shape().iter().product::<usize>());
    }
}

#[test]
fn a_batch_bug_is_found_and_shrunk_to_two_hives() {
    let buggy = HiveScore {
        bug: HiveBug::BiasFromFirstHive,
    };
    let config = Config {
        cases: 32,
        // proptest's automatic limit is 4 × cases; drawn values shrink one
        // element at a time, so give shrinking room (each step is one
        // small audit).
        max_shrink_iters: 4096,
        failure_persistence: None,
        ..Config::default()
    };
    let rng = TestRng::deterministic_rng(RngAlgorithm::ChaCha);
    let mut runner = TestRunner::new_with_rng(config, rng);
    let strategy = strategy::layer_args(&buggy, &hive_sizes(), -0.5..=0.5);
    let result = runner.run(&strategy, |args| {
        check_layer(&buggy, &args)?;
        Ok(())
    });
    let (reason, minimal) = match result {
        Err(TestError::Fail(reason, minimal)) => (reason, minimal),
        other => panic!("the planted bug was not found: {other:?}"),
    };
    println!("minimal failing case: {minimal:?}\n{reason}");
    // The bug needs two hives; everything else shrinks to its smallest size.
    assert_eq!(minimal.input(0).shape(), &[2, 1], "{minimal:?}");
    assert_eq!(minimal.param(0).shape(), &[1, 1]);
    assert_eq!(minimal.param(1).shape(), &[1]);
    let message = reason.to_string();
    assert!(
        message.contains("disagrees with its forward in tensor: b"),
        "{message}"
    );
    assert!(message.contains("PLUMBLINE_SEED="), "{message}");
    // One hive is a case the bug cannot show in: it passes.
    let (inputs, params) = minimal.into_parts();
    let one_hive = Tensor::new(vec![1, 1], inputs[0].data()[..1].to_vec()).unwrap();
    assert!(check_layer(&buggy, &Args::new(vec![one_hive], params)).is_ok());
}

/// y = |x| with a backward that returns 3 at x = 0: outside the one-sided
/// derivatives −1 and 1 there.
struct Magnitude {
    at_zero: f64,
    flip_elsewhere: bool,
}

impl Layer for Magnitude {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new().input("x", "n").output("y", "n")
    }
    fn backward(&self, a: &Args<f64>, g: &[Tensor<f64>]) -> Gradients<f64> {
        let flip = if self.flip_elsewhere { -1.0 } else { 1.0 };
        let dx = Tensor::from_fn(a.input(0).shape().to_vec(), |ix| {
            let x = a.input(0).get(ix).unwrap_or(f64::NAN);
            let d = if x == 0.0 {
                self.at_zero
            } else {
                flip * x.signum()
            };
            d * g[0].get(ix).unwrap_or(f64::NAN)
        });
        Gradients::from(vec![dx])
    }
}

impl Forward for Magnitude {
    fn forward(&self, a: &Args<f64>) -> Vec<Tensor<f64>> {
        vec![a.input(0).map(f64::abs)]
    }
}

#[test]
fn kinks_are_rejected_not_failed() {
    let x = Args::new(vec![Tensor::new(vec![2], vec![0.0, 0.5]).unwrap()], vec![]);
    let wrong_at_kink = Magnitude {
        at_zero: 3.0,
        flip_elsewhere: false,
    };
    for kinks_fail in [false, true] {
        let r = Audit::new()
            .kinks_fail(kinks_fail)
            .run(&wrong_at_kink, &x)
            .unwrap();
        assert_eq!(r.rows[0].kinks, 1, "{r}");
        assert_eq!(CaseOutcome::of(&r), CaseOutcome::Reject, "{r}");
    }
    let rejected = check_layer_with(&wrong_at_kink, &x, |a| a.kinks_fail(true));
    assert!(
        matches!(rejected, Err(TestCaseError::Reject(_))),
        "{rejected:?}"
    );

    // A subgradient that fits (sign(0) = 1 lies in [−1, 1]) passes.
    let fits = Magnitude {
        at_zero: 1.0,
        flip_elsewhere: false,
    };
    let r = Audit::new().kinks_fail(true).run(&fits, &x).unwrap();
    assert_eq!(CaseOutcome::of(&r), CaseOutcome::Pass, "{r}");

    // A real failure elsewhere fails even with a kink in the same tensor.
    let both = Magnitude {
        at_zero: 3.0,
        flip_elsewhere: true,
    };
    let r = Audit::new().run(&both, &x).unwrap();
    assert_eq!(CaseOutcome::of(&r), CaseOutcome::Fail, "{r}");
    assert!(matches!(
        check_layer(&both, &x),
        Err(TestCaseError::Fail(_))
    ));
}

#[test]
fn our_error_converts_into_a_test_failure_with_question_mark() {
    fn case() -> Result<(), TestCaseError> {
        let wrong = Args::new(vec![Tensor::full(vec![2, 3], 0.1)], vec![]);
        let _report = Audit::new().run(&CORRECT, &wrong)?;
        Ok(())
    }
    match case() {
        Err(TestCaseError::Fail(reason)) => {
            let msg = reason.to_string();
            assert!(
                msg.contains("expects 2 parameter tensor(s) (`w`, `b`)"),
                "{msg}"
            );
        }
        other => panic!("{other:?}"),
    }
}
