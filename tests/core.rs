//! The core contract: a correct dense layer passes in f64 and f32; planted
//! bugs fail with the buggy tensor ranked first and the right verdict and
//! diagnosis; misuse is an error, not a panic.

mod common;

use approx::assert_abs_diff_eq;
use common::{dense_args, Dense, DenseBug};
use plumbline::{Args, Audit, Diagnosis, Error, Scheme, Tensor, Verdict};

#[test]
fn correct_dense_passes_in_f64_and_f32_with_every_scheme() {
    for scheme in [Scheme::ComplexStep, Scheme::Ridders, Scheme::Central] {
        let r = Audit::new()
            .scheme(scheme)
            .run(&Dense::<f64>::new(DenseBug::None), &dense_args(4, 3, 2, 1))
            .unwrap();
        assert!(r.passed(), "{scheme}: {r}");
        assert_eq!(r.rows.len(), 3);
        assert!(r.rows.iter().all(|row| row.scheme == scheme));
        let r = Audit::new()
            .scheme(scheme)
            .run(&Dense::<f32>::new(DenseBug::None), &dense_args(4, 3, 2, 2))
            .unwrap();
        assert!(r.passed(), "f32 {scheme}: {r}");
        assert_eq!(r.precision(), "f32");
    }
}

fn audit_bug(bug: DenseBug, out: usize, inp: usize) -> plumbline::Report {
    Audit::new()
        .run(&Dense::<f64>::new(bug), &dense_args(4, inp, out, 7))
        .unwrap()
}

#[test]
fn sign_flip_is_ranked_first_and_named() {
    let r = audit_bug(DenseBug::SignFlip, 2, 3);
    assert!(!r.passed());
    assert_eq!(r.rows[0].name, "w", "{r}");
    assert_eq!(r.rows[0].verdict, Verdict::Disagrees);
    assert_eq!(r.rows[0].diagnosis, Some(Diagnosis::SignFlipped), "{r}");
    assert!(
        r.rows[1..].iter().all(|row| row.verdict == Verdict::Agrees),
        "{r}"
    );
    assert!(r.to_string().contains("sign flipped"));
}

#[test]
fn factor_two_is_named() {
    let r = audit_bug(DenseBug::FactorTwo, 2, 3);
    assert_eq!(r.rows[0].name, "b", "{r}");
    match &r.rows[0].diagnosis {
        Some(Diagnosis::Scaled { factor, culprit }) => {
            assert_abs_diff_eq!(*factor, 2.0, epsilon = 1e-9);
            assert_eq!(culprit.as_deref(), Some("2"));
        }
        other => panic!("{other:?}\n{r}"),
    }
}

#[test]
fn mean_instead_of_sum_names_the_batch_size() {
    let r = audit_bug(DenseBug::MeanNotSum, 2, 3);
    assert_eq!(r.rows[0].name, "x", "{r}");
    let d = r.rows[0].diagnosis.as_ref().unwrap().to_string();
    assert_eq!(d, "scaled by 1/N (N = batch = 4)", "{r}");
}

#[test]
fn transposed_weight_gradient_gets_a_shape_verdict_and_diagnosis() {
    let r = audit_bug(DenseBug::TransposedWeight, 2, 3);
    let row = &r.rows[0];
    assert_eq!(row.name, "w", "{r}");
    assert_eq!(row.verdict, Verdict::WrongShape);
    assert_eq!(row.gradient_shape.as_deref(), Some(&[3usize, 2][..]));
    assert_eq!(
        row.diagnosis,
        Some(Diagnosis::Transposed { axes: (0, 1) }),
        "{r}"
    );
}

#[test]
fn transposed_square_weight_gradient_is_diagnosed() {
    let r = audit_bug(DenseBug::TransposedSquare, 3, 3);
    assert_eq!(r.rows[0].name, "w", "{r}");
    assert_eq!(r.rows[0].verdict, Verdict::Disagrees);
    assert_eq!(
        r.rows[0].diagnosis,
        Some(Diagnosis::Transposed { axes: (0, 1) }),
        "{r}"
    );
}

#[test]
fn wrong_shape_and_missing_do_not_stop_other_rows() {
    let r = audit_bug(DenseBug::WrongShape, 2, 3);
    assert_eq!(r.rows[0].name, "b");
    assert_eq!(r.rows[0].verdict, Verdict::WrongShape);
    assert_eq!(
        r.rows[0].diagnosis,
        Some(Diagnosis::WrongShape {
            expected: vec![2],
            returned: vec![2, 1]
        })
    );
    assert_eq!(
        r.rows.iter().filter(|x| x.verdict.is_pass()).count(),
        2,
        "{r}"
    );

    let r = audit_bug(DenseBug::Missing, 2, 3);
    assert_eq!(r.rows[0].name, "b");
    assert_eq!(r.rows[0].verdict, Verdict::Missing);
    assert_eq!(r.rows[0].diagnosis, Some(Diagnosis::Missing));
    assert_eq!(
        r.rows.iter().filter(|x| x.verdict.is_pass()).count(),
        2,
        "{r}"
    );
}

#[test]
fn same_seed_same_report_and_the_seed_is_reported() {
    let layer = Dense::<f64>::new(DenseBug::SignFlip);
    let a = Audit::new()
        .seed(99)
        .run(&layer, &dense_args(3, 2, 2, 5))
        .unwrap();
    let b = Audit::new()
        .seed(99)
        .run(&layer, &dense_args(3, 2, 2, 5))
        .unwrap();
    assert_eq!(a, b);
    assert_eq!(a.seed, 99);
    assert!(a.to_string().contains("seed 99"));
}

#[test]
#[should_panic(expected = "seed 5")]
fn assert_passed_panics_with_table_and_seed() {
    let layer = Dense::<f64>::new(DenseBug::FactorTwo);
    Audit::new()
        .seed(5)
        .run(&layer, &dense_args(3, 2, 2, 5))
        .unwrap()
        .assert_passed();
}

#[test]
fn wrong_argument_count_is_an_error() {
    let layer = Dense::<f64>::new(DenseBug::None);
    let (inputs, mut params) = dense_args::<f64>(2, 3, 2, 1).into_parts();
    params.pop();
    let err = Audit::new()
        .run(&layer, &Args::new(inputs, params))
        .unwrap_err();
    assert!(
        matches!(
            err,
            Error::ArgumentCount {
                expected: 2,
                found: 1,
                ..
            }
        ),
        "{err}"
    );
    assert!(err.to_string().contains("`w`, `b`"), "{err}");
}

#[test]
fn wrong_argument_shape_is_an_error_naming_the_tensor() {
    let layer = Dense::<f64>::new(DenseBug::None);
    let (inputs, mut params) = dense_args::<f64>(2, 3, 2, 1).into_parts();
    params[1] = Tensor::full(vec![5], 0.0);
    let err = Audit::new()
        .run(&layer, &Args::new(inputs, params))
        .unwrap_err();
    let msg = err.to_string();
    assert!(msg.starts_with("parameter `b` has shape [5]"), "{msg}");
    assert!(msg.contains("`out` is 2 (from `w`)"), "{msg}");
}

#[test]
fn complex_step_on_a_plain_layer_is_a_setting_error() {
    struct Plain;
    impl plumbline::Layer for Plain {
        type Real = f64;
        fn signature(&self) -> plumbline::Signature {
            plumbline::Signature::new().input("x", "n").output("y", "n")
        }
        fn backward(&self, _: &Args<f64>, g: &[Tensor<f64>]) -> plumbline::Gradients<f64> {
            plumbline::Gradients::from(vec![g[0].clone()])
        }
    }

    impl plumbline::Forward for Plain {
        fn forward(&self, a: &Args<f64>) -> Vec<Tensor<f64>> {
            vec![a.input(0).clone()]
        }
    }
    let args = Args::new(vec![Tensor::full(vec![2], 1.0)], vec![]);
    let err = Audit::new()
        .scheme(Scheme::ComplexStep)
        .run(&Plain, &args)
        .unwrap_err();
    assert!(matches!(err, Error::Setting { .. }), "{err}");
    // Without forcing, a plain layer gets Ridders' method.
    let r = Audit::new().run(&Plain, &args).unwrap();
    assert!(r.passed(), "{r}");
    assert_eq!(r.rows[0].scheme, Scheme::Ridders);
}

#[test]
fn narrow_tables_keep_verdict_and_diagnosis_and_fit_the_width() {
    let r = Audit::new()
        .name("orchard.frost_model.hidden_layer_with_a_long_name")
        .run(
            &Dense::<f64>::new(DenseBug::SignFlip),
            &dense_args(4, 3, 2, 7),
        )
        .unwrap();
    for width in [80, 100] {
        let text = plumbline::render::table(
            &r,
            &plumbline::render::Style {
                color: false,
                width: Some(width),
            },
        );
        let lines: Vec<&str> = text.lines().skip(1).take(r.rows.len() + 1).collect();
        for l in &lines {
            assert!(l.chars().count() <= width, "width {width}: {l:?}\n{text}");
        }
        assert!(
            lines[0].contains("verdict") && lines[0].contains("diagnosis"),
            "{text}"
        );
        assert!(
            lines[1].contains("FAIL") && lines[1].contains("sign flipped"),
            "{text}"
        );
    }
    // Wide enough: every column.
    let text = plumbline::render::table(
        &r,
        &plumbline::render::Style {
            color: false,
            width: Some(200),
        },
    );
    assert!(
        text.contains("abs err") && text.contains("checked"),
        "{text}"
    );
}

#[test]
fn sampling_bounds_the_cost_and_still_names_the_bug() {
    // w has 24 × 24 = 576 elements; check 40 of each tensor.
    let args = dense_args::<f64>(6, 24, 24, 3);
    let audit = Audit::new().max_elements(40);
    let r = audit
        .run(&Dense::<f64>::new(DenseBug::None), &args)
        .unwrap();
    assert!(r.passed(), "{r}");
    let w = r.row("w").unwrap();
    assert_eq!((w.checked, w.total), (40, 576));
    assert!(r.to_string().contains("40/576"), "{r}");
    let b = r.row("b").unwrap();
    assert_eq!((b.checked, b.total), (24, 24)); // small tensors are checked whole
    let full = Audit::new()
        .run(&Dense::<f64>::new(DenseBug::None), &args)
        .unwrap();
    assert!(
        r.forward_evals * 5 < full.forward_evals,
        "{} vs {}",
        r.forward_evals,
        full.forward_evals
    );

    for (bug, name, want) in [
        (DenseBug::SignFlip, "w", "sign flipped"),
        (
            DenseBug::TransposedSquare,
            "w",
            "transposed (axes 0 and 1 swapped)",
        ),
        (DenseBug::MeanNotSum, "x", "scaled by 1/N (N = batch = 6)"),
    ] {
        let r = audit.run(&Dense::<f64>::new(bug), &args).unwrap();
        assert_eq!(r.rows[0].name, name, "{r}");
        assert_eq!(
            r.rows[0].diagnosis.as_ref().unwrap().to_string(),
            want,
            "{r}"
        );
    }
    // The subset depends only on the seed.
    let again = audit
        .run(&Dense::<f64>::new(DenseBug::None), &args)
        .unwrap();
    let picks = |r: &plumbline::Report| -> Vec<usize> {
        r.row("w")
            .unwrap()
            .elements
            .iter()
            .map(|e| e.index)
            .collect()
    };
    assert_eq!(picks(&r), picks(&again));
}
