//! Test-harness glue: the [`assert_backward!`](crate::assert_backward)
//! macro and the proptest entry point [`check_layer`]. Both read the
//! `PLUMBLINE_*` environment (see [`Environment::from_lookup`]), run the
//! audit, record the report, and turn the verdict into a panic or a
//! proptest result.

use crate::audit::Audit;
use crate::env::Environment;
use crate::layer::Layer;
use crate::report::Report;

/// Asserts that a layer's backward agrees with its forward, and returns
/// the [`Report`].
///
/// Forms:
///
/// * `assert_backward!(layer, &args)`
/// * `assert_backward!(layer, &args, key = value, ...)`: each `key = value`
///   calls the [`Audit`] setter of that name (`seed`, `scheme`, `margin`,
///   `epsilon`, `max_relative`, `kinks_fail`, `max_elements`, `name`), so the macro accepts
///   every builder option there is.
///
/// Settings start from the `PLUMBLINE_*` environment variables; code
/// settings win over them, except `PLUMBLINE_SEED` (replays) and
/// `PLUMBLINE_MARGIN_FACTOR` (scales every bound) — see
/// [`Environment::from_lookup`] for the table.
///
/// # Panics
/// * When the audit fails: with the ranked table, the seed that replays it
///   and the setting or environment variable that would change the outcome.
/// * On misuse (wrong argument shapes, a malformed signature, an invalid
///   environment variable, an unwritable report directory): with the
///   error's message.
///
/// ```
/// use plumbline::{assert_backward, Args, Gradients, Layer, Scheme, Signature, Tensor};
///
/// /// Hive weight in kg from a load-cell reading: y = k·x.
/// struct LoadCell;
///
/// impl Layer for LoadCell {
///     type Real = f64;
///     fn signature(&self) -> Signature {
///         Signature::new().input("reading", "hive").param("k", "").output("kg", "hive")
///     }
///     fn forward(&self, a: &Args<f64>) -> Vec<Tensor<f64>> {
///         let k = a.param(0).data()[0];
///         vec![a.input(0).map(|x| k * x)]
///     }
///     fn backward(&self, a: &Args<f64>, g: &[Tensor<f64>]) -> Gradients<f64> {
///         let (x, k) = (a.input(0), a.param(0).data()[0]);
///         let dk = x.data().iter().zip(g[0].data()).map(|(x, g)| x * g).sum();
///         Gradients::from(vec![g[0].map(|g| k * g), Tensor::scalar(dk)])
///     }
/// }
///
/// let args = Args::new(
///     vec![Tensor::new(vec![3], vec![0.2, 1.5, -0.4])?],
///     vec![Tensor::scalar(12.5)],
/// );
/// let report = assert_backward!(LoadCell, &args);
/// assert_eq!(report.rows.len(), 2);
/// assert_backward!(LoadCell, &args, seed = 3, scheme = Scheme::Central, margin = 8.0);
/// # Ok::<(), plumbline::Error>(())
/// ```
#[macro_export]
macro_rules! assert_backward {
    ($layer:expr, $args:expr $(,)?) => {
        $crate::__assert_backward(&$layer, $args, |audit| audit)
    };
    ($layer:expr, $args:expr, $($key:ident = $value:expr),+ $(,)?) => {
        $crate::__assert_backward(&$layer, $args, |audit| audit $(.$key($value))+)
    };
}

/// The body of [`assert_backward!`](crate::assert_backward); not public API.
#[doc(hidden)]
#[track_caller]
pub fn __assert_backward<L: Layer + ?Sized>(
    layer: &L,
    args: &crate::layer::Args<L::Real>,
    configure: impl FnOnce(Audit) -> Audit,
) -> Report {
    let env = match Environment::from_env() {
        Ok(env) => env,
        Err(e) => panic!("assert_backward!: {e}"),
    };
    let code = configure(Audit::with_settings(env.defaults()));
    let code_settings = code.settings().clone();
    let audit = Audit::with_settings(env.overrides(code_settings.clone()));
    let report = match audit.run(layer, args) {
        Ok(r) => r,
        Err(e) => panic!("assert_backward!: {e}"),
    };
    if let Err(e) = env.record(&report) {
        panic!("assert_backward!: {e}");
    }
    if !report.passed() {
        panic!("{}", failure_text(&report, &env, &code_settings));
    }
    report
}

/// The whole failure message: the renderer's message plus where the
/// settings came from.
pub(crate) fn failure_text(
    report: &Report,
    env: &Environment,
    code: &crate::audit::Settings,
) -> String {
    format!(
        "{}{}",
        crate::render::failure_message(report),
        env.explain(code)
    )
}

/// How a report maps onto a property-test case.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
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
    ///
    /// ```
    /// # use plumbline::*;
    /// # struct Twice;
    /// # impl Layer for Twice {
    /// #     type Real = f64;
    /// #     fn signature(&self) -> Signature { Signature::new().input("x", "n").output("y", "n") }
    /// #     fn forward(&self, a: &Args<f64>) -> Vec<Tensor<f64>> { vec![a.input(0).map(|x| 2.0 * x)] }
    /// #     fn backward(&self, _: &Args<f64>, g: &[Tensor<f64>]) -> Gradients<f64> {
    /// #         Gradients::from(vec![g[0].map(|g| 2.0 * g)])
    /// #     }
    /// # }
    /// let x = Tensor::new(vec![2], vec![1.0, 2.0])?;
    /// let report = Audit::new().run(&Twice, &Args::new(vec![x], vec![]))?;
    /// assert_eq!(CaseOutcome::of(&report), CaseOutcome::Pass);
    /// # Ok::<(), plumbline::Error>(())
    /// ```
    pub fn of(report: &Report) -> CaseOutcome {
        use crate::report::{ElementStatus, Verdict};
        let unfit_kink = |s: &ElementStatus| matches!(s, ElementStatus::Kink { fits: false, .. });
        let mut kinked = false;
        for row in &report.rows {
            let row_kinks = row.elements.iter().any(|e| unfit_kink(&e.status));
            kinked |= row_kinks;
            let real = match row.verdict {
                Verdict::Agrees => false,
                Verdict::Missing | Verdict::WrongShape => true,
                // Failing only because kinks fail is not a real failure;
                // no failing element and no kink means the layer is not
                // deterministic, which is.
                Verdict::Disagrees => {
                    row.elements.iter().any(|e| e.status.is_failure()) || !row_kinks
                }
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
/// Returns the report when the backward agrees;
/// [`TestCaseError::fail`](proptest::test_runner::TestCaseError::fail) with
/// the whole failure message (table, seed, variables) when it does not, so
/// proptest shrinks the input and prints the minimal case with the table;
/// [`TestCaseError::reject`](proptest::test_runner::TestCaseError::reject)
/// when the input sits on a kink that the analytic value does not fit (see
/// [`CaseOutcome`]). A misuse [`Error`](crate::Error) fails the case with
/// its message; inside `proptest!` use `?` on the result.
///
/// Only failing cases are printed (`PLUMBLINE_FORMAT`) and written to
/// `PLUMBLINE_REPORT_DIR`; each overwrites the last, so after shrinking the
/// files hold the minimal failing case.
///
/// ```
/// use plumbline::{check_layer, strategy, Args, GenericLayer, Gradients, Scalar, Signature, Tensor};
/// use proptest::prelude::*;
///
/// /// Hive temperature in °C from a thermistor reading: y = 40·x − 10.
/// struct Thermistor;
///
/// impl GenericLayer for Thermistor {
///     type Real = f64;
///     fn signature(&self) -> Signature {
///         Signature::new().input("reading", "hive, sensor").output("celsius", "hive, sensor")
///     }
///     fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
///         let (k, c) = (T::from(40.0).unwrap(), T::from(10.0).unwrap());
///         vec![a.input(0).map(|x| k * x - c)]
///     }
///     fn backward(&self, _: &Args<f64>, g: &[Tensor<f64>]) -> Gradients<f64> {
///         Gradients::from(vec![g[0].map(|g| 40.0 * g)])
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
pub fn check_layer<L: Layer + ?Sized>(
    layer: &L,
    args: &crate::layer::Args<L::Real>,
) -> Result<Report, proptest::test_runner::TestCaseError> {
    check_layer_with(layer, args, |audit| audit)
}

/// [`check_layer`] with code settings: `configure` receives the audit with
/// the environment's defaults and returns it with the test's own settings
/// (`|a| a.margin(8.0)`), before the environment's overrides apply.
#[cfg(feature = "proptest")]
pub fn check_layer_with<L: Layer + ?Sized>(
    layer: &L,
    args: &crate::layer::Args<L::Real>,
    configure: impl FnOnce(Audit) -> Audit,
) -> Result<Report, proptest::test_runner::TestCaseError> {
    use proptest::test_runner::TestCaseError;
    let env = Environment::from_env()?;
    let code_settings = configure(Audit::with_settings(env.defaults()))
        .settings()
        .clone();
    let report = Audit::with_settings(env.overrides(code_settings.clone())).run(layer, args)?;
    match CaseOutcome::of(&report) {
        CaseOutcome::Pass => Ok(report),
        CaseOutcome::Reject => Err(TestCaseError::reject(format!(
            "`{}`: an element sits on a kink the analytic value does not fit",
            report.layer
        ))),
        CaseOutcome::Fail => {
            env.record(&report)?;
            Err(TestCaseError::fail(failure_text(
                &report,
                &env,
                &code_settings,
            )))
        }
    }
}
