//! The promises a test library lives by: no input hangs the audit, NaN
//! never passes, no setting silences it, a layer's panic is contained, and
//! what the backward returns is never silently reshaped. Every layer here
//! is a small piece of an orchard frost model or a hive monitor.

use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Arc;

use plumbline::audit::Coverage;
use plumbline::prelude::*;
use plumbline::report::ElementStatus;
use plumbline::Error;

// ---------------------------------------------------------------- layers

/// Softmax over frost-risk logits per station, with masked (−∞) logits for
/// stations that were offline: y = softmax(z).
struct StationSoftmax;

impl Layer for StationSoftmax {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("z", "station")
            .output("p", "station")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        // VJP of softmax: p ⊙ (g − ⟨g, p⟩), from ∂pᵢ/∂zⱼ = pᵢ(δᵢⱼ − pⱼ).
        let p = &self.forward_generic(a)[0];
        let g = &up[0];
        let dot: f64 = p.data().iter().zip(g.data()).map(|(p, g)| p * g).sum();
        Gradients::from(vec![Tensor::from_fn(p.shape().to_vec(), |ix| {
            p[ix] * (g[ix] - dot)
        })])
    }
}

impl GenericForward for StationSoftmax {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let z = a.input(0);
        let m = z
            .data()
            .iter()
            .copied()
            .fold(T::neg_infinity(), |m, v| if v > m { v } else { m });
        let e = z.map(|v| (v - m).exp());
        let s: T = e.data().iter().copied().sum();
        vec![e.map(|v| v / s)]
    }
}

/// The same softmax as a plain `f64` layer (real differences).
struct PlainStationSoftmax;

impl Layer for PlainStationSoftmax {
    type Real = f64;
    fn signature(&self) -> Signature {
        StationSoftmax.signature()
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        StationSoftmax.backward(a, up)
    }
}

impl Forward for PlainStationSoftmax {
    fn forward(&self, a: &Args<f64>) -> Vec<Tensor<f64>> {
        StationSoftmax.forward_generic(a)
    }
}

/// Dew-point spread warming: y = exp(k·x) elementwise, in the layer's
/// precision `R` (an `f32` forward overflows at k·x > 88.7).
struct Warming<R> {
    k: f64,
    _r: std::marker::PhantomData<R>,
}

impl<R: Real> Warming<R> {
    fn new(k: f64) -> Self {
        Warming {
            k,
            _r: std::marker::PhantomData,
        }
    }
}

impl<R: Real> Layer for Warming<R> {
    type Real = R;
    fn signature(&self) -> Signature {
        Signature::new().input("x", "n").output("y", "n")
    }
    fn backward(&self, a: &Args<R>, up: &[Tensor<R>]) -> Gradients<R> {
        let k = R::from_f64(self.k);
        let x = a.input(0);
        Gradients::from(vec![Tensor::from_fn(x.shape().to_vec(), |ix| {
            k * (k * x[ix]).exp() * up[0][ix]
        })])
    }
}

impl<R: Real> GenericForward for Warming<R> {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let k = T::from(self.k).unwrap_or_else(T::nan);
        vec![a.input(0).map(|x| (k * x).exp())]
    }
}

/// Relative humidity as a fraction: y = 2·x, whose forward asserts its
/// input is a fraction (x ≤ 1), as defensive code does.
struct Humidity {
    /// Where the forward panics: "forward" (at moved points above 1),
    /// "always", or "backward".
    panics: &'static str,
}

impl Layer for Humidity {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new().input("rh", "n").output("y", "n")
    }
    fn backward(&self, _: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        assert!(
            self.panics != "backward",
            "humidity backward: not implemented yet"
        );
        Gradients::from(vec![up[0].map(|g| 2.0 * g)])
    }
}

impl Forward for Humidity {
    fn forward(&self, a: &Args<f64>) -> Vec<Tensor<f64>> {
        let x = a.input(0);
        assert!(self.panics != "always", "humidity forward: sensor offline");
        for &v in x.data() {
            assert!(v <= 1.0, "relative humidity {v} above 1");
        }
        vec![x.map(|v| 2.0 * v)]
    }
}

/// Hive weight from a load cell and a fixed calibration id: y = w·x. Its
/// backward also returns a "gradient" for the fixed id, which has none.
struct LoadCell {
    extra_gradient: bool,
}

impl Layer for LoadCell {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new()
            .fixed_input("cell_id", "n")
            .input("x", "n")
            .param("w", "")
            .output("kg", "n")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let (x, w) = (a.input(1), a.param(0)[[]]);
        let g = &up[0];
        let dw: f64 = x.data().iter().zip(g.data()).map(|(x, g)| x * g).sum();
        let mut out = vec![g.map(|g| w * g), Tensor::scalar(dw)];
        if self.extra_gradient {
            out.insert(0, g.map(|_| 0.0));
        }
        Gradients::from(out)
    }
}

impl GenericForward for LoadCell {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let w = a.param(0)[[]];
        vec![a.input(1).map(|x| w * x)]
    }
}

fn vector(v: &[f64]) -> Tensor<f64> {
    Tensor::new(vec![v.len()], v.to_vec()).unwrap()
}

fn schemes() -> [Scheme; 3] {
    [Scheme::ComplexStep, Scheme::Ridders, Scheme::Central]
}

// ------------------------------------------------------------- 1. no hang

#[test]
fn masked_logits_at_minus_infinity_return_promptly_under_every_scheme() {
    let z = vector(&[f64::NEG_INFINITY, 0.3, -1.2, f64::NEG_INFINITY, 2.0]);
    let args = Args::new(vec![z], vec![]);
    for scheme in schemes() {
        let r = Audit::new()
            .scheme(scheme)
            .run(&StationSoftmax, &args)
            .unwrap();
        assert!(r.passed(), "{scheme}: {r}");
        let row = r.row("z").unwrap();
        assert_eq!(row.unchecked, 2, "{r}");
        for k in [0, 3] {
            assert_eq!(row.elements[k].status, ElementStatus::NonFiniteInput, "{r}");
        }
        // The audit stays cheap: a handful of evaluations per element.
        assert!(r.forward_evals < 2000, "{scheme}: {}", r.forward_evals);
    }
    // A plain layer takes Ridders' method by default, whose first step
    // from an infinite element would be infinite.
    let r = Audit::new().run(&PlainStationSoftmax, &args).unwrap();
    assert!(r.passed(), "{r}");
    assert_eq!(r.row("z").unwrap().unchecked, 2);
}

#[test]
fn a_nan_input_fails_the_audit_without_hanging() {
    let z = vector(&[0.1, f64::NAN, 0.4]);
    let args = Args::new(vec![z], vec![]);
    for scheme in schemes() {
        let r = Audit::new()
            .scheme(scheme)
            .run(&StationSoftmax, &args)
            .unwrap();
        // NaN flows into every output: the forward is not finite there.
        assert!(!r.passed(), "{scheme}: {r}");
        let d = r.rows[0].diagnosis.as_ref().unwrap().to_string();
        assert!(d.starts_with("non-finite in forward"), "{d}");
    }
}

// ---------------------------------------------------------- 2. NaN never passes

#[test]
fn an_f32_forward_that_overflows_fails_even_though_f64_would_not() {
    // k·x = 90 > ln(f32::MAX) ≈ 88.72: the f32 forward is +∞ at the point,
    // while the f64 reference is finite. The row fails.
    let x = Tensor::new(vec![2], vec![1.0_f32, 9.0]).unwrap();
    let r = Audit::new()
        .run(&Warming::<f32>::new(10.0), &Args::new(vec![x], vec![]))
        .unwrap();
    assert!(!r.passed(), "{r}");
    let d = r.rows[0].diagnosis.as_ref().unwrap().to_string();
    assert_eq!(d, "non-finite in forward output `y` at [1] (in f32)");
    // The same values in f64 pass.
    let x = Tensor::new(vec![2], vec![1.0_f64, 9.0]).unwrap();
    let r = Audit::new()
        .run(&Warming::<f64>::new(10.0), &Args::new(vec![x], vec![]))
        .unwrap();
    assert!(r.passed(), "{r}");
}

/// y = x (identity) whose backward puts a NaN at one element.
struct NanAt(usize);

impl Layer for NanAt {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new().input("x", "n").output("y", "n")
    }
    fn backward(&self, _: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let mut g = up[0].clone();
        g.data_mut()[self.0] = f64::NAN;
        Gradients::from(vec![g])
    }
}

impl GenericForward for NanAt {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        vec![a.input(0).clone()]
    }
}

#[test]
fn a_nan_in_an_element_sampling_skipped_still_fails() {
    let x = Tensor::from_fn(vec![200], |ix| ix[0] as f64 * 0.01);
    let args = Args::new(vec![x], vec![]);
    let audit = Audit::new().max_elements(5);
    // Find an element the sample does not check.
    let r = audit.run(&NanAt(0), &args).unwrap();
    let checked: Vec<usize> = r.rows[0].elements.iter().map(|e| e.index).collect();
    let skipped = (0..200).find(|j| !checked.contains(j)).unwrap();
    let r = audit.run(&NanAt(skipped), &args).unwrap();
    assert_eq!(r.rows[0].checked, 5);
    assert!(
        !r.passed(),
        "a NaN at {skipped} (not sampled) must fail: {r}"
    );
    let d = r.rows[0].diagnosis.as_ref().unwrap().to_string();
    assert_eq!(d, format!("non-finite in backward at [{skipped}]"));
}

// ----------------------------------------------- 3. no setting silences it

fn setting_error(e: Error) -> (String, String) {
    match e {
        Error::Setting { setting, value, .. } => (setting, value),
        other => panic!("expected a setting error, got {other:?}"),
    }
}

#[test]
fn settings_that_would_silence_the_audit_are_refused_naming_the_setting() {
    let args = Args::new(vec![vector(&[0.2, 0.5])], vec![]);
    let run = |a: Audit| a.run(&StationSoftmax, &args).map(|_| ()).unwrap_err();
    let cases: Vec<(Audit, &str, &str)> = vec![
        (Audit::new().max_elements(0), "max_elements", "0"),
        (Audit::new().margin(f64::INFINITY), "margin", "inf"),
        (Audit::new().margin(f64::NAN), "margin", "NaN"),
        (Audit::new().margin(0.0), "margin", "0"),
        (Audit::new().margin(-2.0), "margin", "-2"),
        (Audit::new().margin(1e300), "margin", "1e300"),
        (Audit::new().max_absolute(-1e-9), "max_absolute", "-1e-9"),
        (Audit::new().max_absolute(f64::NAN), "max_absolute", "NaN"),
        (
            Audit::new().max_absolute(f64::INFINITY),
            "max_absolute",
            "inf",
        ),
        (Audit::new().max_relative(f64::NAN), "max_relative", "NaN"),
        (Audit::new().max_relative(1.0), "max_relative", "1"),
        (Audit::new().max_relative(-0.1), "max_relative", "-0.1"),
        (Audit::new().max_evaluations(0), "max_evaluations", "0"),
    ];
    for (audit, setting, value) in cases {
        let (s, v) = setting_error(run(audit));
        assert_eq!((s.as_str(), v.as_str()), (setting, value));
    }
    // Two fixed bounds of 0 fail every correct layer: refused too.
    let (s, _) = setting_error(run(Audit::new().max_absolute(0.0).max_relative(0.0)));
    assert_eq!(s, "max_absolute / max_relative");
}

#[test]
fn the_environment_gets_the_same_rules_and_names_the_variable() {
    use plumbline::env::Environment;
    let env = |pairs: &'static [(&'static str, &'static str)]| {
        Environment::from_lookup(move |n| {
            pairs
                .iter()
                .find(|(k, _)| *k == n)
                .map(|(_, v)| v.to_string())
        })
    };
    for (var, value) in [
        ("PLUMBLINE_MARGIN", "inf"),
        ("PLUMBLINE_MARGIN", "NaN"),
        ("PLUMBLINE_MARGIN", "0"),
        ("PLUMBLINE_MARGIN", "20000"),
        ("PLUMBLINE_MARGIN_FACTOR", "NaN"),
        ("PLUMBLINE_MARGIN_FACTOR", "-1"),
        ("PLUMBLINE_MAX_ELEMENTS", "0"),
        ("PLUMBLINE_MAX_EVALUATIONS", "0"),
    ] {
        let pairs: &'static [(&'static str, &'static str)] = Box::leak(Box::new([(var, value)]));
        let (s, v) = setting_error(env(pairs).unwrap_err());
        assert_eq!((s.as_str(), v.as_str()), (var, value));
    }
    // A factor is checked against the margin it produces.
    let e = env(&[("PLUMBLINE_MARGIN_FACTOR", "1e300")]).unwrap();
    let (s, _) = setting_error(e.audit(|a| a).unwrap_err());
    assert_eq!(s, "PLUMBLINE_MARGIN_FACTOR");
}

#[test]
#[should_panic(expected = "assert_backward!: setting `margin` = `NaN` is invalid")]
fn the_macro_keys_get_the_same_rules() {
    let args = Args::new(vec![vector(&[0.2, 0.5])], vec![]);
    assert_backward!(StationSoftmax, &args, margin = f64::NAN);
}

// ------------------------------------------- 4. off the Scalar path

/// Frost index: readings centred by their mean, y = (x − mean(x))², with
/// the mean computed through `to_f64()` (off the `Scalar` path, so the
/// complex step never sees it).
struct CentredFrost {
    backward_forgets_the_mean: bool,
}

impl Layer for CentredFrost {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new().input("x", "n").output("y", "n")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let x = a.input(0);
        let n = x.len() as f64;
        let m = x.data().iter().sum::<f64>() / n;
        let d: Vec<f64> = x.data().iter().map(|v| 2.0 * (v - m)).collect();
        let g = up[0].data();
        let s: f64 = d.iter().zip(g).map(|(d, g)| d * g).sum();
        Gradients::from(vec![Tensor::from_fn(x.shape().to_vec(), |ix| {
            let j = ix[0];
            // ∂y_i/∂x_j = d_i (δ_ij − 1/n).
            if self.backward_forgets_the_mean {
                d[j] * g[j]
            } else {
                d[j] * g[j] - s / n
            }
        })])
    }
}

impl GenericForward for CentredFrost {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let x = a.input(0);
        let mean = x
            .data()
            .iter()
            .map(|v| v.to_f64().unwrap_or(f64::NAN))
            .sum::<f64>()
            / x.len() as f64;
        let m = T::from(mean).unwrap_or_else(T::nan);
        vec![x.map(|v| (v - m) * (v - m))]
    }
}

#[test]
fn a_generic_forward_off_the_scalar_path_is_caught_and_noted() {
    let args = Args::new(vec![vector(&[0.3, -1.1, 0.8, 2.0, -0.4])], vec![]);
    let right = CentredFrost {
        backward_forgets_the_mean: false,
    };
    let r = Audit::new().run(&right, &args).unwrap();
    assert!(r.passed(), "the correct backward passes: {r}");
    assert_eq!(r.rows[0].scheme, Scheme::Ridders, "{r}");
    assert!(
        r.notes.iter().any(|n| n.contains("leaves the Scalar path")),
        "{r}"
    );
    let wrong = CentredFrost {
        backward_forgets_the_mean: true,
    };
    let r = Audit::new().run(&wrong, &args).unwrap();
    assert!(!r.passed(), "forgetting the mean's term fails: {r}");
}

// ---------------------------------------------------- 5. panics contained

#[test]
fn a_forward_that_panics_at_a_moved_point_is_an_error_saying_where() {
    // rh = 1.0 exactly: the forward is fine there, but real differences
    // move it above 1, where the forward's assertion fires.
    let args = Args::new(vec![vector(&[0.25, 1.0])], vec![]);
    let err = Audit::new()
        .run(&Humidity { panics: "forward" }, &args)
        .unwrap_err();
    let msg = err.to_string();
    assert!(matches!(err, Error::LayerPanicked { .. }), "{msg}");
    assert!(
        msg.starts_with("layer `Humidity` panicked in forward"),
        "{msg}"
    );
    assert!(msg.contains("while `rh` [1] was moved to 1."), "{msg}");
    assert!(msg.contains("relative humidity 1."), "{msg}");
    assert!(msg.ends_with("above 1"), "{msg}");
}

#[test]
fn forwards_and_backwards_that_always_panic_are_errors_naming_the_call() {
    let args = Args::new(vec![vector(&[0.25, 0.5])], vec![]);
    let msg = Audit::new()
        .run(&Humidity { panics: "always" }, &args)
        .unwrap_err()
        .to_string();
    assert_eq!(
        msg,
        "layer `Humidity` panicked in forward: humidity forward: sensor offline"
    );
    let msg = Audit::new()
        .run(&Humidity { panics: "backward" }, &args)
        .unwrap_err()
        .to_string();
    assert_eq!(
        msg,
        "layer `Humidity` panicked in backward: humidity backward: not implemented yet"
    );
}

#[test]
#[should_panic(
    expected = "assert_backward!: layer `Humidity` panicked in forward while `rh` [1] was moved to"
)]
fn the_macro_shows_the_panic_context() {
    let args = Args::new(vec![vector(&[0.25, 1.0])], vec![]);
    assert_backward!(Humidity { panics: "forward" }, &args);
}

#[test]
fn check_layer_turns_a_panic_into_a_failing_case_with_its_context() {
    let args = Args::new(vec![vector(&[0.25, 1.0])], vec![]);
    let outcome = plumbline::check_layer(&Humidity { panics: "forward" }, &args);
    let msg = outcome.unwrap_err().to_string();
    assert!(
        msg.contains("panicked in forward while `rh` [1] was moved to"),
        "{msg}"
    );
}

// --------------------------------------------- 6. extra gradients reported

#[test]
fn a_gradient_for_a_fixed_input_is_an_error_not_a_shifted_row() {
    let args = Args::new(
        vec![vector(&[3.0, 4.0]), vector(&[0.8, 1.2])],
        vec![Tensor::scalar(12.5)],
    );
    let r = Audit::new()
        .run(
            &LoadCell {
                extra_gradient: false,
            },
            &args,
        )
        .unwrap();
    assert!(r.passed(), "{r}");
    let msg = Audit::new()
        .run(
            &LoadCell {
                extra_gradient: true,
            },
            &args,
        )
        .unwrap_err()
        .to_string();
    assert_eq!(
        msg,
        "layer `LoadCell`: backward returned 3 gradient(s), but the signature has 2 differentiable tensor(s) (`x`, `w`); fixed inputs take no gradient"
    );
}

// -------------------------------------------------------- 7. cost guard

/// Many parameters, elementwise: y = s ⊙ x.
struct WideGate;

impl Layer for WideGate {
    type Real = f32;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "n")
            .param("s", "n")
            .output("y", "n")
    }
    fn backward(&self, a: &Args<f32>, up: &[Tensor<f32>]) -> Gradients<f32> {
        let (x, s, g) = (a.input(0), a.param(0), &up[0]);
        Gradients::from(vec![
            Tensor::from_fn(x.shape().to_vec(), |ix| s[ix] * g[ix]),
            Tensor::from_fn(x.shape().to_vec(), |ix| x[ix] * g[ix]),
        ])
    }
}

impl GenericForward for WideGate {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, s) = (a.input(0), a.param(0));
        vec![Tensor::from_fn(x.shape().to_vec(), |ix| x[ix] * s[ix])]
    }
}

#[test]
fn an_audit_over_budget_refuses_before_it_starts_and_says_what_to_set() {
    let n = 600_000;
    let x = Tensor::from_fn(vec![n], |ix| (ix[0] % 7) as f32 * 0.1);
    let s = Tensor::full(vec![n], 0.5_f32);
    let args = Args::new(vec![x], vec![s]);
    let err = Audit::new()
        .coverage(Coverage::Elements)
        .run(&WideGate, &args)
        .unwrap_err();
    match &err {
        Error::OverBudget { needed, budget, .. } => {
            assert_eq!(*budget, plumbline::audit::DEFAULT_MAX_EVALUATIONS);
            // At least one forward per element of x and of s.
            assert!(*needed >= 2 * n as u64 && *needed > *budget, "{needed}");
        }
        other => panic!("{other:?}"),
    }
    let msg = err.to_string();
    assert!(
        msg.contains(".max_elements(..)")
            && msg.contains("PLUMBLINE_MAX_EVALUATIONS")
            && msg.contains("PLUMBLINE_COVERAGE=screen"),
        "{msg}"
    );
    // A sample fits the budget.
    let r = Audit::new().max_elements(50).run(&WideGate, &args).unwrap();
    assert!(r.passed(), "{r}");
    assert_eq!(r.row("s").unwrap().checked, 50);
    // By default an audit over the budget screens the large tensors
    // instead, and says so.
    let r = Audit::new().run(&WideGate, &args).unwrap();
    assert!(r.passed(), "{r}");
    assert!(
        r.rows
            .iter()
            .all(|row| row.screen.is_some() && row.checked == 0),
        "{r}"
    );
    assert!(r.notes.iter().any(|n| n.contains("over the budget")), "{r}");
    assert!(r.forward_evals < 20, "{}", r.forward_evals);
}

#[test]
fn progress_reaches_the_callback_and_counts_every_element() {
    let seen = Arc::new(AtomicUsize::new(0));
    let last = Arc::new(AtomicUsize::new(0));
    let (s2, l2) = (seen.clone(), last.clone());
    let audit = Audit::new().on_progress(move |p| {
        s2.fetch_add(1, Ordering::Relaxed);
        assert!(p.done <= p.total);
        l2.store(p.done * 1000 + p.total, Ordering::Relaxed);
    });
    let args = Args::new(
        vec![vector(&[0.1, 0.2, 0.3])],
        vec![vector(&[1.0, 2.0, 3.0])],
    );
    let r = audit.run(&WideGate32, &args).unwrap();
    assert!(r.passed(), "{r}");
    assert_eq!(seen.load(Ordering::Relaxed), 6);
    assert_eq!(last.load(Ordering::Relaxed), 6 * 1000 + 6);
}

/// `WideGate` in `f64`, for small audits.
struct WideGate32;

impl Layer for WideGate32 {
    type Real = f64;
    fn signature(&self) -> Signature {
        WideGate.signature()
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let (x, s, g) = (a.input(0), a.param(0), &up[0]);
        Gradients::from(vec![
            Tensor::from_fn(x.shape().to_vec(), |ix| s[ix] * g[ix]),
            Tensor::from_fn(x.shape().to_vec(), |ix| x[ix] * g[ix]),
        ])
    }
}

impl GenericForward for WideGate32 {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        WideGate.forward_generic(a)
    }
}

// -------------------------------------------------- 8. honest messages

#[test]
fn assert_passed_suggests_only_what_applies_to_audit_run() {
    let args = Args::new(vec![vector(&[0.2, 0.5])], vec![]);
    let r = Audit::new().run(&NanAt(1), &args).unwrap();
    let msg = plumbline::render::failure_message(&r);
    assert!(msg.contains("`.seed("), "{msg}");
    assert!(
        !msg.contains("PLUMBLINE_"),
        "Audit::run reads no variable: {msg}"
    );
}

#[test]
fn a_shape_whose_size_overflows_is_an_error() {
    let e = Tensor::new(vec![usize::MAX, 3], vec![0.0_f64]).unwrap_err();
    assert_eq!(
        e.to_string(),
        format!(
            "a tensor of shape [{}, 3] has more elements than usize can count",
            usize::MAX
        )
    );
}

#[test]
fn a_json_report_with_nan_and_infinity_reads_back_identically() {
    let args = Args::new(vec![vector(&[0.2, 0.5, -0.3])], vec![]);
    let r = Audit::new().run(&NanAt(1), &args).unwrap();
    assert!(r.rows[0].max_abs_error.is_nan(), "{r}");
    let json = plumbline::render::json(&r);
    assert!(json.contains("\"NaN\""), "{json}");
    let back: Report = serde_json::from_str(&json).unwrap();
    // NaN ≠ NaN, so compare the serialized forms and the non-finite fields.
    assert_eq!(plumbline::render::json(&back), json);
    assert!(back.rows[0].max_abs_error.is_nan() && back.rows[0].max_rel_error.is_nan());
    let key = "\"max_abs_error\": \"NaN\"";
    assert!(json.contains(key), "{json}");
    let inf: Report =
        serde_json::from_str(&json.replacen(key, "\"max_abs_error\": \"-inf\"", 1)).unwrap();
    assert_eq!(inf.rows[0].max_abs_error, f64::NEG_INFINITY);
}

// ---------------------------------------------------- 9. subnormal inputs

#[test]
fn subnormal_inputs_raise_no_false_alarm() {
    // Softmax and exp(k·x) are smooth at the scale of 1: an element of
    // 1e-310 is, for them, 0 plus a rounding error.
    let args = Args::new(vec![vector(&[1e-310, -3e-310, 0.4, 5e-324])], vec![]);
    for scheme in schemes() {
        let r = Audit::new()
            .scheme(scheme)
            .run(&StationSoftmax, &args)
            .unwrap();
        assert!(r.passed(), "{scheme}: {r}");
        let r = Audit::new()
            .scheme(scheme)
            .run(&Warming::<f64>::new(1.5), &args)
            .unwrap();
        assert!(r.passed(), "{scheme}: {r}");
    }
    let r = Audit::new().run(&PlainStationSoftmax, &args).unwrap();
    assert!(r.passed(), "{r}");
}
