//! Test-harness glue: [`Report::assert_passed`], the
//! [`assert_backward!`](crate::assert_backward) macro, [`assert_tangents`]
//! and [`assert_second_order`] for the other rules, and the proptest
//! entry point [`check_layer`]. The macro and `check_layer` read the
//! `PLUMBLINE_*` environment (see [`env`](crate::env)), run the audit,
//! record the report (print it, write files), and turn the verdict into a
//! panic or a proptest result.

use std::fmt::Write as _;

use crate::audit::Audit;
use crate::env::{Environment, PrintFormat, SCHEME_VAR};
use crate::error::Error;
use crate::layer::{Args, Forward, GenericBackward, Layer, TangentRule};
use crate::render::{failure_head, failure_message, files, markdown, stdout_style, table};
use crate::report::{ElementStatus, Passed, Report, Verdict};

impl Report {
    /// Panics with the whole table unless the audit passed. The message
    /// names the failing tensors and the code settings that replay
    /// (`.seed(..)`) or change (`.margin(..)`) the outcome.
    ///
    /// ```should_panic
    /// # use plumbline::prelude::*;
    /// # struct Bad;
    /// # impl Layer for Bad {
    /// #     type Real = f64;
    /// #     fn signature(&self) -> Signature { Signature::new().input("x", "n").output("y", "n") }
    /// #     fn backward(&self, _: &Args<f64>, g: &[Tensor<f64>]) -> Gradients<f64> {
    /// #         Gradients::from(vec![g[0].map(|g| -3.0 * g)])
    /// #     }
    /// # }
    /// # impl Forward for Bad {
    /// #     fn forward(&self, a: &Args<f64>) -> Vec<Tensor<f64>> { vec![a.input(0).map(|x| 3.0 * x)] }
    /// # }
    /// let x = Tensor::new(vec![2], vec![1.0, 2.0]).unwrap();
    /// let report = Audit::new().run(&Bad, &Args::new(vec![x], vec![])).unwrap();
    /// report.assert_passed(); // panics: sign flipped
    /// ```
    #[track_caller]
    pub fn assert_passed(&self) {
        if !self.passed() {
            panic!("{}", failure_message(self));
        }
    }
}

/// Asserts that a layer's backward agrees with its forward, and returns
/// the report (as [`Passed`], which derefs to [`Report`] and may be
/// dropped).
///
/// Forms:
///
/// * `assert_backward!(layer, &args)` (the layer by value or by reference:
///   `assert_backward!(&layer, &args)` works the same; a layer built in the
///   call, `assert_backward!(FnLayer::new(..), &args)`, lives until the
///   audit is done)
/// * `assert_backward!(layer, &args, key = value, ...)`: each `key = value`
///   calls the [`Audit`] setter of that name (`seed`, `scheme`, `margin`,
///   `max_absolute`, `max_relative`, `kinks_fail`, `max_elements`,
///   `max_evaluations`, `own_precision`, `step_sweeps`, `name`), so the macro accepts every
///   builder option there is, with the same rules.
///
/// Settings start from the `PLUMBLINE_*` environment variables; code
/// settings win over them, except `PLUMBLINE_SEED` (replays) and
/// `PLUMBLINE_MARGIN_FACTOR` (scales every bound): see [`env`](crate::env).
///
/// # Panics
/// * When the audit fails: with the ranked table, the seed that replays it
///   and the setting or environment variable that would change the outcome.
/// * On misuse (wrong argument shapes, a malformed signature, an invalid
///   setting or environment variable, an unwritable report directory) and
///   when the layer panics: with the error's message, which says where.
///
/// ```
/// use plumbline::prelude::*;
///
/// /// Hive weight in kg from a load-cell reading: y = k·x.
/// struct LoadCell;
///
/// impl Layer for LoadCell {
///     type Real = f64;
///     fn signature(&self) -> Signature {
///         Signature::new().input("reading", "hive").param("k", "").output("kg", "hive")
///     }
///     fn backward(&self, a: &Args<f64>, g: &[Tensor<f64>]) -> Gradients<f64> {
///         let (x, k) = (a.input(0), a.param(0)[[]]);
///         let dk = x.data().iter().zip(g[0].data()).map(|(x, g)| x * g).sum();
///         Gradients::from(vec![g[0].map(|g| k * g), Tensor::scalar(dk)])
///     }
/// }
///
/// impl Forward for LoadCell {
///     fn forward(&self, a: &Args<f64>) -> Vec<Tensor<f64>> {
///         let k = a.param(0)[[]];
///         vec![a.input(0).map(|x| k * x)]
///     }
/// }
///
/// let args = Args::new(
///     vec![Tensor::new(vec![3], vec![0.2, 1.5, -0.4])?],
///     vec![Tensor::scalar(12.5)],
/// );
/// let report = assert_backward!(LoadCell, &args);
/// assert_eq!(report.rows.len(), 2);
/// let layer = LoadCell;
/// assert_backward!(&layer, &args, seed = 3, scheme = Scheme::Central, margin = 8.0);
/// # Ok::<(), plumbline::Error>(())
/// ```
#[macro_export]
macro_rules! assert_backward {
    // `match` keeps a layer built in the call (`FnLayer::new(..)`, a
    // function's result) alive until the audit is done.
    ($layer:expr, $args:expr $(,)?) => {{
        #[allow(unused_imports)]
        use $crate::{__Audited as _, __OnOneThread as _, __OnThreads as _};
        match ($layer).__audited() {
            layer => {
                let entry = (&$crate::__Pick(layer)).__entry();
                $crate::__assert_backward(layer, $args, |audit| audit, entry)
            }
        }
    }};
    ($layer:expr, $args:expr, $($key:ident = $value:expr),+ $(,)?) => {{
        #[allow(unused_imports)]
        use $crate::{__Audited as _, __OnOneThread as _, __OnThreads as _};
        match ($layer).__audited() {
            layer => {
                let entry = (&$crate::__Pick(layer)).__entry();
                $crate::__assert_backward(layer, $args, |audit| audit $(.$key($value))+, entry)
            }
        }
    }};
}

/// How the macro runs an audit: [`Audit::run_parallel`] for a `Sync`
/// layer, [`Audit::run`] otherwise. Not public API.
#[doc(hidden)]
pub type __Entry<L> = fn(&Audit, &L, &Args<<L as Layer>::Real>) -> Result<Report, Error>;

/// Picks the entry point by the layer's type (a method found on the value
/// wins over one found through an extra `&`). Not public API.
#[doc(hidden)]
pub struct __Pick<'a, L: ?Sized>(pub &'a L);

/// A `Sync` layer's entry point: every core. Not public API.
#[doc(hidden)]
pub trait __OnThreads<L: Forward + ?Sized> {
    /// The entry point.
    fn __entry(&self) -> __Entry<L>;
}

impl<L: Forward + Sync + ?Sized> __OnThreads<L> for __Pick<'_, L> {
    fn __entry(&self) -> __Entry<L> {
        |audit, layer, args| audit.run_parallel(layer, args)
    }
}

/// Any other layer's entry point: one thread. Not public API.
#[doc(hidden)]
pub trait __OnOneThread<L: Forward + ?Sized> {
    /// The entry point.
    fn __entry(&self) -> __Entry<L>;
}

impl<L: Forward + ?Sized> __OnOneThread<L> for &__Pick<'_, L> {
    fn __entry(&self) -> __Entry<L> {
        |audit, layer, args| audit.run(layer, args)
    }
}

/// Lets [`assert_backward!`](crate::assert_backward) take a layer by value
/// or by reference: method-call auto-deref finds the layer behind any
/// number of `&`. Not public API.
#[doc(hidden)]
pub trait __Audited: Forward {
    /// The layer itself.
    fn __audited(&self) -> &Self {
        self
    }
}

impl<L: Forward + ?Sized> __Audited for L {}

/// The body of [`assert_backward!`](crate::assert_backward); not public API.
#[doc(hidden)]
#[track_caller]
pub fn __assert_backward<L: Forward + ?Sized>(
    layer: &L,
    args: &Args<L::Real>,
    configure: impl Fn(Audit) -> Audit,
    entry: __Entry<L>,
) -> Passed {
    assert_under_env("assert_backward!", layer, args, configure, entry)
}

/// Checks a layer's tangent rule as [`assert_backward!`](crate::assert_backward)
/// checks its backward: [`Audit::run_tangents`] (each output's tangent
/// against the forward, and the adjoint identity against the backward)
/// with the `PLUMBLINE_*` environment ([`env`](crate::env)) applied around
/// the settings `configure` makes, the report printed or written as the
/// environment asks, and a panic with the whole table unless it passed.
///
/// ```
/// use plumbline::prelude::*;
/// use plumbline::assert_tangents;
///
/// /// Frost index per station: y = 2x², with its forward-mode rule.
/// struct Chill;
/// impl Layer for Chill {
///     type Real = f64;
///     fn signature(&self) -> Signature {
///         Signature::new().input("x", "n").output("y", "n")
///     }
///     fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
///         Gradients::from(vec![Tensor::from_fn(up[0].shape().to_vec(), |i| 4.0 * a.input(0)[i] * up[0][i])])
///     }
/// }
/// impl GenericForward for Chill {
///     fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
///         vec![a.input(0).map(|x| (x + x) * x)]
///     }
/// }
/// impl TangentRule for Chill {
///     fn jvp(&self, a: &Args<f64>, d: &Args<f64>) -> Vec<Tensor<f64>> {
///         vec![Tensor::from_fn(a.input(0).shape().to_vec(), |i| 4.0 * a.input(0)[i] * d.input(0)[i])]
///     }
/// }
///
/// let args = Args::new(vec![Tensor::new(vec![3], vec![0.5, -1.2, 2.0])?], vec![]);
/// let passed = assert_tangents(&Chill, &args, |audit| audit.seed(7));
/// assert_eq!(passed.row("adjoint").unwrap().failing, 0);
/// # Ok::<(), plumbline::Error>(())
/// ```
#[track_caller]
pub fn assert_tangents<L: TangentRule + Forward + ?Sized>(
    layer: &L,
    args: &Args<L::Real>,
    configure: impl Fn(Audit) -> Audit,
) -> Passed {
    assert_under_env(
        "assert_tangents",
        layer,
        args,
        configure,
        |audit, layer, args| audit.run_tangents(layer, args),
    )
}

/// Checks a layer's second order as [`assert_tangents`] checks its tangent
/// rule: [`Audit::run_second_order`] (the integrability test, and the
/// hand-written Hessian-vector rule where the layer has one) under the
/// `PLUMBLINE_*` environment, panicking with the whole table unless it
/// passed.
///
/// ```
/// use plumbline::prelude::*;
/// use plumbline::assert_second_order;
///
/// /// Frost index per station: y = 2x², its backward written once.
/// struct Chill;
/// impl Layer for Chill {
///     type Real = f64;
///     fn signature(&self) -> Signature {
///         Signature::new().input("x", "n").output("y", "n")
///     }
///     fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
///         self.backward_generic(a, up)
///     }
/// }
/// impl GenericForward for Chill {
///     fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
///         vec![a.input(0).map(|x| (x + x) * x)]
///     }
/// }
/// impl GenericBackward for Chill {
///     fn backward_generic<T: Scalar>(&self, a: &Args<T>, up: &[Tensor<T>]) -> Gradients<T> {
///         let four = T::from(4.0).unwrap();
///         Gradients::from(vec![Tensor::from_fn(up[0].shape().to_vec(), |i| four * a.input(0)[i] * up[0][i])])
///     }
/// }
///
/// let args = Args::new(vec![Tensor::new(vec![3], vec![0.5, -1.2, 2.0])?], vec![]);
/// assert_second_order(&Chill, &args, |audit| audit);
/// # Ok::<(), plumbline::Error>(())
/// ```
#[track_caller]
pub fn assert_second_order<L: GenericBackward + Forward + ?Sized>(
    layer: &L,
    args: &Args<L::Real>,
    configure: impl Fn(Audit) -> Audit,
) -> Passed {
    assert_under_env(
        "assert_second_order",
        layer,
        args,
        configure,
        |audit, layer, args| audit.run_second_order(layer, args),
    )
}

/// Reads the environment, runs `entry`, records the report and panics
/// (naming `what`) unless it passed.
#[track_caller]
fn assert_under_env<L: Forward + ?Sized>(
    what: &str,
    layer: &L,
    args: &Args<L::Real>,
    configure: impl Fn(Audit) -> Audit,
    entry: __Entry<L>,
) -> Passed {
    let env = match Environment::from_env() {
        Ok(env) => env,
        Err(e) => panic!("{what}: {e}"),
    };
    match audit_with_env(layer, args, &env, &configure, entry) {
        Ok(report) => {
            if let Err(e) = record(&env, &report, true) {
                panic!("{what}: {e}");
            }
            if !report.passed() {
                panic!("{}", failure_text(&report, &env, &configure(Audit::new())));
            }
            Passed(report)
        }
        Err(e) => panic!("{what}: {e}"),
    }
}

/// Runs the audit with the environment's defaults, the code settings and
/// the environment's overrides. A scheme the layer cannot support names
/// `PLUMBLINE_SCHEME` when that is where it came from.
fn audit_with_env<L: Forward + ?Sized>(
    layer: &L,
    args: &Args<L::Real>,
    env: &Environment,
    configure: &impl Fn(Audit) -> Audit,
    entry: __Entry<L>,
) -> Result<Report, Error> {
    let audit = env.audit(configure)?;
    entry(&audit, layer, args).map_err(|e| match e {
        Error::Setting {
            setting,
            value,
            detail,
        } if setting == "scheme"
            && env.scheme.is_some()
            && configure(Audit::new()).scheme.is_none() =>
        {
            Error::Setting {
                setting: SCHEME_VAR.to_string(),
                value,
                detail,
            }
        }
        other => other,
    })
}

/// The whole failure message of the environment-aware helpers: what
/// failed, the table, and where the settings came from with the variables
/// that change them.
fn failure_text(report: &Report, env: &Environment, code: &Audit) -> String {
    let mut out = failure_head(report);
    let _ = writeln!(
        out,
        "replay: seed {} (PLUMBLINE_SEED={} or `seed = {}`)",
        report.seed, report.seed, report.seed
    );
    out.push_str(&env.explain(code));
    out
}

/// Prints the report in the environment's format and, with a report
/// directory, writes `<stem>.json` and `<stem>.md` there (`unique`: a
/// second audit of the same layer in the same test gets its own files).
fn record(env: &Environment, report: &Report, unique: bool) -> Result<(), Error> {
    match env.format {
        PrintFormat::Table => println!("{}", table(report, &stdout_style(env.color))),
        PrintFormat::Markdown => println!("{}", markdown(report)),
        PrintFormat::Json => println!("{}", files::json(report)),
        _ => {}
    }
    if let Some(dir) = &env.report_dir {
        files::write(dir, &files::stem(report, unique), report)?;
    }
    Ok(())
}

/// How a report maps onto a property-test case.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[non_exhaustive]
pub enum CaseOutcome {
    /// The backward agrees (kinks, if any, have analytic values that fit
    /// between the one-sided derivatives).
    Pass,
    /// The input puts some element at a kink whose one-sided derivatives the
    /// analytic value does not fit, and nothing else is wrong: draw another
    /// input rather than fail.
    Reject,
    /// A real disagreement: wrong values, shape, missing gradient, or a
    /// layer that is not deterministic.
    Fail,
}

impl CaseOutcome {
    /// Classifies a report.
    pub fn of(report: &Report) -> CaseOutcome {
        let unfit_kink = |s: &ElementStatus| matches!(s, ElementStatus::Kink { fits: false, .. });
        let mut kinked = false;
        for row in &report.rows {
            let row_kinks = row.elements.iter().any(|e| unfit_kink(&e.status));
            kinked |= row_kinks;
            let real = match row.verdict {
                Verdict::Agrees => false,
                // Failing only because kinks fail is not a real failure;
                // no failing element and no kink means the layer is not
                // deterministic, which is.
                Verdict::Disagrees => {
                    row.elements.iter().any(|e| e.status.is_failure())
                        || row.joint_kink.is_some()
                        || !row_kinks
                }
                _ => true,
            };
            if real {
                return CaseOutcome::Fail;
            }
        }
        if kinked {
            CaseOutcome::Reject
        } else {
            CaseOutcome::Pass
        }
    }
}

/// Audits one property-test case, with settings from the environment.
///
/// Returns the report when the backward agrees (as [`Passed`], which may
/// be dropped);
/// [`TestCaseError::fail`](proptest::test_runner::TestCaseError::fail) with
/// the whole failure message (table, seed, variables) when it does not, so
/// proptest shrinks the input and prints the minimal case with the table;
/// [`TestCaseError::reject`](proptest::test_runner::TestCaseError::reject)
/// when the input sits on a kink that the analytic value does not fit (see
/// [`CaseOutcome`]). A misuse [`Error`](crate::Error) (or a panic in the
/// layer) fails the case with its message; inside `proptest!` use `?`.
///
/// Only failing cases are printed (`PLUMBLINE_FORMAT`) and written to
/// `PLUMBLINE_REPORT_DIR`; each overwrites the last, so after shrinking the
/// files hold the minimal failing case.
///
/// ```
/// use plumbline::prelude::*;
/// use plumbline::{check_layer, strategy};
/// use proptest::prelude::*;
///
/// /// Hive temperature in °C from a thermistor reading: y = 40·x − 10.
/// struct Thermistor;
///
/// impl Layer for Thermistor {
///     type Real = f64;
///     fn signature(&self) -> Signature {
///         Signature::new().input("reading", "hive, sensor").output("celsius", "hive, sensor")
///     }
///     fn backward(&self, _: &Args<f64>, g: &[Tensor<f64>]) -> Gradients<f64> {
///         Gradients::from(vec![g[0].map(|g| 40.0 * g)])
///     }
/// }
///
/// impl GenericForward for Thermistor {
///     fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
///         let (k, c) = (T::from(40.0).unwrap(), T::from(10.0).unwrap());
///         vec![a.input(0).map(|x| k * x - c)]
///     }
/// }
///
/// let sizes = [("hive", 1..=3), ("sensor", 1..=4)];
/// let mut runner = proptest::test_runner::TestRunner::new(ProptestConfig::with_cases(8));
/// runner
///     .run(&strategy::layer_args(&Thermistor, &sizes, -1.0..=1.0), |args| {
///         check_layer(&Thermistor, &args)?;
///         Ok(())
///     })
///     .unwrap();
/// ```
#[cfg(feature = "proptest")]
pub fn check_layer<L: Forward + ?Sized>(
    layer: &L,
    args: &Args<L::Real>,
) -> Result<Passed, proptest::test_runner::TestCaseError> {
    check_layer_with(layer, args, |audit| audit)
}

/// [`check_layer`] with code settings: `configure` receives the audit with
/// the environment's defaults and returns it with the test's own settings
/// (`|a| a.margin(8.0)`), before the environment's overrides apply.
#[cfg(feature = "proptest")]
pub fn check_layer_with<L: Forward + ?Sized>(
    layer: &L,
    args: &Args<L::Real>,
    configure: impl Fn(Audit) -> Audit,
) -> Result<Passed, proptest::test_runner::TestCaseError> {
    use proptest::test_runner::TestCaseError;
    let env = Environment::from_env()?;
    let report = audit_with_env(layer, args, &env, &configure, |audit, layer, args| {
        audit.run(layer, args)
    })?;
    match CaseOutcome::of(&report) {
        CaseOutcome::Pass => Ok(Passed(report)),
        CaseOutcome::Reject => Err(TestCaseError::reject(format!(
            "`{}`: an element sits on a kink the analytic value does not fit",
            report.layer
        ))),
        CaseOutcome::Fail => {
            record(&env, &report, false)?;
            Err(TestCaseError::fail(failure_text(
                &report,
                &env,
                &configure(Audit::new()),
            )))
        }
    }
}
