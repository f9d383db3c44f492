//! The directional screen for large tensors: cost that does not grow with
//! the tensor, planted bugs caught and located, no alarm on correct layers.
//!
//! The layer is an orchard-wide frost model: readings of `station`s pass a
//! dense tanh layer with a weight per (zone, station) pair.

use approx::abs_diff_eq;
use plumbline::audit::{Coverage, SCREEN_DIRECTIONS};
use plumbline::prelude::*;
use plumbline::Diagnosis;

mod common;
use common::zones::{args, Bug, Zones as FrostZones};

fn screened(bug: Bug, seed: u64) -> Report {
    Audit::new()
        .seed(seed)
        .coverage(Coverage::Screen)
        .run(&FrostZones { bug }, &args(seed, 3, 120, 100))
        .unwrap()
}

#[test]
fn a_correct_layer_passes_the_screen_at_a_cost_independent_of_its_size() {
    for seed in 0..10 {
        let r = screened(Bug::None, seed);
        assert!(r.passed(), "{r}");
        for row in &r.rows {
            let s = row
                .screen
                .as_ref()
                .expect("every tensor is above 64 elements");
            assert_eq!((s.directions, s.disagreeing), (SCREEN_DIRECTIONS, 0), "{r}");
            assert_eq!(row.checked, 0, "{r}");
        }
        // Three directions per tensor, three tensors, two plain forwards.
        assert_eq!(r.forward_evals, 3 * SCREEN_DIRECTIONS + 2, "{r}");
        assert!(r.to_string().contains("3 dir"), "{r}");
    }
}

#[test]
fn planted_bugs_fail_the_screen_and_are_located_and_named() {
    for seed in 0..3 {
        let r = screened(Bug::Sign, seed);
        let w = r.row("w").unwrap();
        assert!(!r.passed() && w.failing > 0, "{r}");
        assert_eq!(w.diagnosis, Some(Diagnosis::SignFlipped), "{r}");
        assert!(r.row("x").unwrap().verdict.is_pass(), "{r}");

        let r = screened(Bug::Factor, seed);
        let w = r.row("w").unwrap();
        assert!(
            matches!(w.diagnosis, Some(Diagnosis::Scaled { factor, .. }) if abs_diff_eq!(factor, 2.0, epsilon = 1e-9)),
            "{r}"
        );

        // One wrong element of 12,000: the bisection finds it.
        let r = screened(Bug::OneElement, seed);
        let w = r.row("w").unwrap();
        assert_eq!(w.failing, 1, "{r}");
        let worst = w.worst.as_ref().unwrap();
        assert_eq!(worst.index.as_slice(), &[3, 5], "{r}");
        assert!(w.screen.as_ref().unwrap().located >= 1, "{r}");

        let r = screened(Bug::OneRow, seed);
        let w = r.row("w").unwrap();
        assert!(w.failing > 0, "{r}");
        assert!(
            w.elements
                .iter()
                .filter(|e| e.status == plumbline::report::ElementStatus::Disagrees)
                .all(|e| e.index / 120 == 7),
            "only row 7 is wrong\n{r}"
        );
    }
}

#[test]
fn over_the_budget_the_default_audit_screens_and_the_strict_one_refuses() {
    let a = args(1, 3, 120, 100);
    let r = Audit::new()
        .max_evaluations(5_000)
        .run(&FrostZones { bug: Bug::None }, &a)
        .unwrap();
    assert!(r.passed(), "{r}");
    assert!(r.row("w").unwrap().screen.is_some(), "{r}");
    assert!(
        r.notes
            .iter()
            .any(|n| n.contains("over the budget of 5000")),
        "{r}"
    );
    // Within the budget, every element is compared.
    let r = Audit::new()
        .run(&FrostZones { bug: Bug::None }, &a)
        .unwrap();
    assert!(r
        .rows
        .iter()
        .all(|row| row.screen.is_none() && row.checked == row.total));
    let err = Audit::new()
        .max_evaluations(5_000)
        .coverage(Coverage::Elements)
        .run(&FrostZones { bug: Bug::None }, &a)
        .unwrap_err();
    assert!(matches!(err, plumbline::Error::OverBudget { .. }), "{err}");
}

#[test]
fn coverage_is_a_macro_key_and_an_environment_variable() {
    let a = args(2, 2, 80, 40);
    let r = assert_backward!(
        FrostZones { bug: Bug::None },
        &a,
        coverage = Coverage::Screen
    );
    assert!(r.row("w").unwrap().screen.is_some());
    let env = plumbline::env::Environment::from_lookup(|name| {
        (name == "PLUMBLINE_COVERAGE").then(|| "screen".to_string())
    })
    .unwrap();
    let r = env
        .audit(|a| a)
        .unwrap()
        .run(&FrostZones { bug: Bug::None }, &a)
        .unwrap();
    assert!(r.row("w").unwrap().screen.is_some(), "{r}");
    let bad = plumbline::env::Environment::from_lookup(|name| {
        (name == "PLUMBLINE_COVERAGE").then(|| "some".to_string())
    })
    .unwrap_err();
    assert!(bad.to_string().contains("PLUMBLINE_COVERAGE"), "{bad}");
}

#[test]
fn reports_are_the_same_on_one_two_and_three_threads() {
    let a = args(4, 2, 30, 16);
    for bug in [Bug::None, Bug::Sign, Bug::OneElement] {
        let layer = FrostZones { bug };
        for audit in [
            Audit::new().seed(9),
            Audit::new().seed(9).scheme(Scheme::Central),
            Audit::new().seed(9).coverage(Coverage::Screen),
        ] {
            let one = audit.clone().run(&layer, &a).unwrap();
            for threads in [1, 2, 3] {
                let many = audit
                    .clone()
                    .threads(threads)
                    .run_parallel(&layer, &a)
                    .unwrap();
                assert_eq!(one, many, "{bug:?}, {threads} threads\n{one}\n{many}");
                assert_eq!(one.rows[0].elements, many.rows[0].elements);
            }
        }
    }
    let refused = Audit::new()
        .threads(0)
        .run_parallel(&FrostZones { bug: Bug::None }, &a);
    assert!(
        matches!(refused, Err(plumbline::Error::Setting { ref setting, .. }) if setting == "threads")
    );
}
