//! Wrapping layers that exist already: a layer built from closures
//! (`FnLayer`), signatures declared by concrete shapes, and a generic layer
//! audited through its plain path with `own_precision`, through
//! `Audit::run` and through `assert_backward!`.

use std::cell::RefCell;
use std::sync::Mutex;

use plumbline::prelude::*;
use plumbline::{Diagnosis, Error, Verdict};

/// Planted bugs in the station score's backward.
#[derive(Clone, Copy, Debug, PartialEq)]
enum Bug {
    None,
    /// dw divided by the number of stations (a mean taken for a sum).
    MeanOverStations,
    /// dx negated.
    SignOfDx,
}

/// Frost score per station (demo layer): y[s] = tanh(Σ_r x[s, r]·w[r]),
/// 4 stations × 3 readings, declared by concrete shapes, built from
/// closures. Plain forward in `R`.
fn station_score<R: Real>(bug: Bug) -> impl Forward<Real = R> + Sync + std::fmt::Debug {
    let score = |a: &Args<R>| {
        let (x, w) = (a.input(0), a.param(0));
        Tensor::from_fn(vec![4], |s| {
            (0..3)
                .fold(R::zero(), |acc, r| acc + x[[s[0], r]] * w[[r]])
                .tanh()
        })
    };
    FnLayer::new(
        Signature::new()
            .input_shape("x", &[4, 3])
            .param_shape("w", &[3])
            .output_shape("y", &[4]),
        move |a: &Args<R>| vec![score(a)],
        move |a, up| {
            let (x, w, y) = (a.input(0), a.param(0), score(a));
            let pre = Tensor::from_fn(vec![4], |s| up[0][s] * (R::one() - y[s] * y[s]));
            let mut dx = Tensor::from_fn(vec![4, 3], |ix| pre[[ix[0]]] * w[[ix[1]]]);
            let mut dw = Tensor::from_fn(vec![3], |r| {
                (0..4).fold(R::zero(), |acc, s| acc + pre[[s]] * x[[s, r[0]]])
            });
            match bug {
                Bug::None => {}
                Bug::MeanOverStations => dw = dw.map(|v| v / R::from_f64(4.0)),
                Bug::SignOfDx => dx = dx.map(|v| -v),
            }
            vec![dx, dw]
        },
    )
}

/// Demo readings, 4 stations × 3, and weights.
fn station_args<R: Real>() -> Args<R> {
    let x = [
        0.3, -0.8, 0.5, 1.1, 0.2, -0.4, -0.6, 0.9, 0.1, 0.4, -0.2, -1.0,
    ];
    let w = [0.7, -0.3, 0.45];
    Args::new(
        vec![Tensor::new(vec![4, 3], x.iter().map(|&v| R::from_f64(v)).collect()).unwrap()],
        vec![Tensor::new(vec![3], w.iter().map(|&v| R::from_f64(v)).collect()).unwrap()],
    )
}

// ------------------------------------------------------------ closure layer

#[test]
fn a_correct_closure_layer_passes_in_both_precisions() {
    let report = Audit::new()
        .run(&station_score::<f64>(Bug::None), &station_args())
        .unwrap();
    assert!(report.passed(), "{report}");
    assert_eq!(report.layer, "FnLayer<f64>");
    assert_eq!(report.rows.len(), 2);
    // A closure cannot be generic: real differences in the layer's precision.
    assert!(report.rows.iter().all(|r| r.scheme == Scheme::Ridders));
    assert_eq!(report.reference_precision(), "f64");

    let report = Audit::new()
        .run(&station_score::<f32>(Bug::None), &station_args())
        .unwrap();
    assert!(report.passed(), "{report}");
    assert_eq!(report.layer, "FnLayer<f32>");
    assert_eq!(report.reference_precision(), "f32");
}

#[test]
fn the_macro_takes_a_closure_layer_by_value_and_by_reference() {
    let layer = station_score::<f64>(Bug::None);
    let report = assert_backward!(&layer, &station_args());
    assert_eq!(report.rows.len(), 2);
    assert_backward!(station_score::<f32>(Bug::None), &station_args(), seed = 5);
    // `Sync` closures: the macro's threaded entry gives the same report.
    let one = Audit::new()
        .threads(1)
        .run_parallel(&layer, &station_args())
        .unwrap();
    let two = Audit::new()
        .threads(2)
        .run_parallel(&layer, &station_args())
        .unwrap();
    assert_eq!(one, two);
}

#[test]
fn a_planted_mean_is_named_by_the_shape_it_came_from() {
    let report = Audit::new()
        .run(
            &station_score::<f64>(Bug::MeanOverStations),
            &station_args(),
        )
        .unwrap();
    let w = report.row("w").unwrap();
    assert_eq!(w.verdict, Verdict::Disagrees, "{report}");
    // The factor 1/4 is the extent of axis 0 of `x`, declared by shape.
    assert_eq!(
        w.diagnosis.as_ref().map(ToString::to_string).as_deref(),
        Some("scaled by 1/N (N = axis 0 of `x` = 4)"),
        "{report}"
    );
    assert_eq!(report.row("x").unwrap().verdict, Verdict::Agrees);
}

#[test]
fn a_planted_sign_flip_is_diagnosed_in_f32_too() {
    let report = Audit::new()
        .run(&station_score::<f32>(Bug::SignOfDx), &station_args())
        .unwrap();
    let x = report.row("x").unwrap();
    assert_eq!(x.verdict, Verdict::Disagrees, "{report}");
    assert_eq!(x.diagnosis, Some(Diagnosis::SignFlipped), "{report}");
    assert_eq!(report.row("w").unwrap().verdict, Verdict::Agrees);
}

#[test]
#[should_panic(expected = "sign flipped")]
fn the_macro_panics_with_the_diagnosis_of_a_closure_layer() {
    let _ = assert_backward!(station_score::<f64>(Bug::SignOfDx), &station_args());
}

#[test]
fn names_come_from_the_layer_then_the_audit() {
    let layer = station_score::<f64>(Bug::None);
    let named = FnLayer::new(
        layer.signature(),
        |a: &Args<f64>| layer.forward(a),
        |a, up| layer.backward(a, up),
    )
    .named("station score");
    let report = Audit::new().run(&named, &station_args()).unwrap();
    assert_eq!(report.layer, "station score");
    let report = Audit::new()
        .name("from the audit")
        .run(&named, &station_args())
        .unwrap();
    assert_eq!(report.layer, "from the audit");
    assert!(format!("{named:?}").contains("station score"));
}

/// A stateful layer from elsewhere (demo): y = c·x per station, caching its
/// input in `forward` and writing dc into a buffer in `backward(&mut self)`.
struct Stateful {
    c: f64,
    seen: Vec<f64>,
    grad_c: f64,
}

impl Stateful {
    fn forward(&mut self, x: &[f64]) -> Vec<f64> {
        self.seen = x.to_vec();
        x.iter().map(|x| self.c * x).collect()
    }
    fn backward(&mut self, dy: &[f64]) -> Vec<f64> {
        self.grad_c = self.seen.iter().zip(dy).map(|(x, g)| x * g).sum();
        dy.iter().map(|g| self.c * g).collect()
    }
}

/// The two closures of a wrapper around `Stateful`, behind any lock.
macro_rules! stateful_layer {
    ($cell:expr, $lock:ident) => {
        FnLayer::new(
            Signature::new()
                .input_shape("x", &[3])
                .param_shape("c", &[])
                .output_shape("y", &[3]),
            |a: &Args<f64>| {
                let mut l = $lock!($cell);
                l.c = a.param(0)[[]];
                vec![Tensor::new(vec![3], l.forward(a.input(0).data())).unwrap()]
            },
            |a, up| {
                let mut l = $lock!($cell);
                l.c = a.param(0)[[]];
                l.forward(a.input(0).data());
                let dx = l.backward(up[0].data());
                vec![Tensor::new(vec![3], dx).unwrap(), Tensor::scalar(l.grad_c)]
            },
        )
    };
}

macro_rules! borrow {
    ($c:expr) => {
        $c.borrow_mut()
    };
}

macro_rules! lock {
    ($c:expr) => {
        $c.lock().unwrap()
    };
}

fn fresh() -> Stateful {
    Stateful {
        c: 0.0,
        seen: vec![],
        grad_c: 0.0,
    }
}

fn stateful_args() -> Args<f64> {
    Args::new(
        vec![Tensor::new(vec![3], vec![-1.5, 0.25, 2.0]).unwrap()],
        vec![Tensor::scalar(0.75)],
    )
}

#[test]
fn a_stateful_layer_wraps_behind_a_mutex_for_the_macro() {
    // `Sync`: the macro spreads the audit over threads; the lock keeps the
    // cache of each forward/backward pair to itself.
    let mutex = Mutex::new(fresh());
    assert_backward!(stateful_layer!(mutex, lock), &stateful_args(), threads = 2);
}

#[test]
fn a_stateful_layer_wraps_behind_a_refcell_for_audit_run() {
    // Not `Sync`: `Audit::run` takes it. (The macro would not: it picks its
    // entry point by the layer's type, before the compiler has worked out
    // what closures defined beside the call capture.)
    let cell = RefCell::new(fresh());
    let report = Audit::new()
        .run(&stateful_layer!(cell, borrow), &stateful_args())
        .unwrap();
    assert!(report.passed(), "{report}");
}

/// The RefCell wrapper built in a function of its own: its closures' types
/// are known by the time the macro looks, so the macro runs it on one thread.
fn behind_a_refcell(cell: &RefCell<Stateful>) -> impl Forward<Real = f64> + '_ {
    stateful_layer!(cell, borrow)
}

#[test]
fn a_refcell_wrapper_from_a_function_goes_through_the_macro() {
    let cell = RefCell::new(fresh());
    assert_backward!(behind_a_refcell(&cell), &stateful_args());
}

#[test]
fn a_panicking_closure_is_an_error_naming_the_layer_and_call() {
    let layer = FnLayer::new(
        Signature::new()
            .input_shape("x", &[2])
            .output_shape("y", &[2]),
        |a: &Args<f64>| vec![a.input(0).clone()],
        |_, _| -> Vec<Tensor<f64>> { panic!("no gradient buffer") },
    )
    .named("broken");
    let args = Args::new(vec![Tensor::new(vec![2], vec![1.0, 2.0]).unwrap()], vec![]);
    let err = Audit::new().run(&layer, &args).unwrap_err();
    match &err {
        Error::LayerPanicked {
            layer,
            call,
            message,
            ..
        } => {
            assert_eq!((layer.as_str(), call.as_str()), ("broken", "backward"));
            assert!(message.contains("no gradient buffer"), "{err}");
        }
        other => panic!("{other:?}"),
    }
}

// ------------------------------------------------------------ concrete shapes

#[test]
fn a_wrong_argument_shape_names_the_tensor_and_the_axis() {
    let layer = station_score::<f64>(Bug::None);
    let x = Tensor::full(vec![4, 5], 0.1);
    let w = Tensor::full(vec![3], 0.1);
    let err = Audit::new()
        .run(&layer, &Args::new(vec![x], vec![w]))
        .unwrap_err();
    assert!(matches!(err, Error::ArgumentShape { ref tensor, .. } if tensor == "x"));
    assert_eq!(
        err.to_string(),
        "input `x` has shape [4, 5], but the signature wants [4, 3]: axis 1 is 5, declared 3"
    );

    let x = Tensor::full(vec![4, 3], 0.1);
    let w = Tensor::full(vec![3, 1], 0.1);
    let err = Audit::new()
        .run(&layer, &Args::new(vec![x], vec![w]))
        .unwrap_err();
    assert_eq!(
        err.to_string(),
        "parameter `w` has shape [3, 1], but the signature wants [3]: rank 2 given, rank 1 declared"
    );
}

#[test]
fn a_wrong_output_shape_names_the_output_and_the_axis() {
    let layer = FnLayer::new(
        Signature::new()
            .input_shape("x", &[2, 3])
            .output_shape("y", &[2, 3]),
        |a: &Args<f64>| vec![Tensor::full(vec![2, 2], a.input(0)[[0, 0]])],
        |a, _| vec![a.input(0).clone()],
    )
    .named("narrow");
    let args = Args::new(vec![Tensor::full(vec![2, 3], 0.5)], vec![]);
    let err = Audit::new().run(&layer, &args).unwrap_err();
    assert!(matches!(err, Error::OutputShape { ref output, .. } if output == "y"));
    assert_eq!(
        err.to_string(),
        "layer `narrow`: forward returned output `y` of shape [2, 2], but the signature \
         wants [2, 3]: axis 1 is 2, declared 3"
    );
}

#[test]
#[should_panic(
    expected = "input `x` has shape [4, 2], but the signature wants [4, 3]: axis 1 is 2"
)]
fn the_macro_panics_with_the_shape_error() {
    let args = Args::new(
        vec![Tensor::full(vec![4, 2], 0.1)],
        vec![Tensor::full(vec![3], 0.1)],
    );
    let _ = assert_backward!(station_score::<f64>(Bug::None), &args);
}

/// y[s] = Σ_r x[s, r]·w[r] with `x` declared by spec (`station, 3`) and `w`
/// by shape; dw divided by 4, the number of stations.
fn mixed_declarations() -> impl Forward<Real = f64> {
    FnLayer::new(
        Signature::new()
            .input("x", "station, 3")
            .param_shape("w", &[3])
            .output_shape("y", &[4]),
        |a: &Args<f64>| {
            let (x, w) = (a.input(0), a.param(0));
            vec![Tensor::from_fn(vec![4], |s| {
                (0..3).map(|r| x[[s[0], r]] * w[[r]]).sum()
            })]
        },
        |a, up| {
            let (x, w, g) = (a.input(0), a.param(0), &up[0]);
            let dx = Tensor::from_fn(vec![4, 3], |ix| g[[ix[0]]] * w[[ix[1]]]);
            let dw = Tensor::from_fn(vec![3], |r| {
                (0..4).map(|s| g[[s]] * x[[s, r[0]]]).sum::<f64>() / 4.0
            });
            vec![dx, dw]
        },
    )
}

#[test]
fn a_named_dim_of_the_same_extent_wins_over_a_shape_label() {
    let report = Audit::new()
        .run(&mixed_declarations(), &station_args())
        .unwrap();
    let w = report.row("w").unwrap();
    // Both `station` (from the spec) and the length of `y` (from the shape)
    // are 4; the name the user chose is the one shown.
    assert_eq!(
        w.diagnosis.as_ref().map(ToString::to_string).as_deref(),
        Some("scaled by 1/N (N = station = 4)"),
        "{report}"
    );
}

// ------------------------------------------------------------ own precision

/// A generic layer (demo): frost score y = tanh(w·x) per station, f32.
struct GenericScore {
    /// Leave out the factor w in dx.
    bug: bool,
}

impl Layer for GenericScore {
    type Real = f32;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "station")
            .param("w", "")
            .output("y", "station")
    }
    fn backward(&self, a: &Args<f32>, up: &[Tensor<f32>]) -> Gradients<f32> {
        let (x, w, g) = (a.input(0), a.param(0)[[]], &up[0]);
        let d = Tensor::from_fn(x.shape().to_vec(), |i| {
            let t = (w * x[i]).tanh();
            g[i] * (1.0 - t * t)
        });
        let dx = d.map(|d| if self.bug { d } else { d * w });
        let dw = (0..x.len()).map(|i| d[[i]] * x[[i]]).sum();
        Gradients::from(vec![dx, Tensor::scalar(dw)])
    }
}

impl GenericForward for GenericScore {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let w = a.param(0)[[]];
        vec![a.input(0).map(|x| (w * x).tanh())]
    }
}

fn score_args() -> Args<f32> {
    Args::new(
        vec![Tensor::new(vec![4], vec![0.4, -1.2, 0.05, 2.5]).unwrap()],
        vec![Tensor::scalar(0.6)],
    )
}

#[test]
fn own_precision_through_the_macro_uses_the_plain_path() {
    let generic = assert_backward!(GenericScore { bug: false }, &score_args());
    assert!(generic.rows.iter().all(|r| r.scheme == Scheme::ComplexStep));
    assert_eq!(generic.reference_precision(), "f64");

    let layer = GenericScore { bug: false };
    let plain = assert_backward!(&layer, &score_args(), own_precision = true);
    assert!(plain.rows.iter().all(|r| r.scheme == Scheme::Ridders));
    assert_eq!(plain.reference_precision(), "f32");
    // The same as the builder's setting.
    let built = Audit::new()
        .own_precision(true)
        .run(&layer, &score_args())
        .unwrap();
    assert_eq!(*plain, built);
}

#[test]
#[should_panic(expected = "ridders reference in f32")]
fn own_precision_through_the_macro_still_catches_a_bug() {
    let _ = assert_backward!(
        GenericScore { bug: true },
        &score_args(),
        own_precision = true
    );
}
