//! The audit: its settings (a builder) and [`Audit::run`], which compares
//! every element of every backward gradient with a numerical reference and
//! returns a [`Report`](crate::Report). It never prints.

use std::fmt;
use std::sync::Arc;

use crate::error::Error;
use crate::scheme::Scheme;
use crate::tolerance::Tolerance;

mod rules;
mod run;
mod screen;

pub use crate::tolerance::{DEFAULT_MARGIN, MAX_MARGIN, ROUNDING_ULPS};

/// The seed used when none is set.
pub const DEFAULT_SEED: u64 = 0x00C0_FFEE;

/// The default budget of forward evaluations per audit.
pub const DEFAULT_MAX_EVALUATIONS: u64 = 1_000_000;

/// Random directions per screened tensor (see [`Coverage::Screen`]).
pub const SCREEN_DIRECTIONS: usize = 3;

/// Tensors with more elements than this are screened when an audit
/// screens; smaller ones are still compared element by element.
pub const SCREEN_ABOVE: usize = 64;

/// How an audit covers the elements of each tensor.
///
/// ```
/// use plumbline::audit::Coverage;
/// assert_eq!("screen".parse::<Coverage>(), Ok(Coverage::Screen));
/// assert_eq!(Coverage::default(), Coverage::Auto);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
#[non_exhaustive]
pub enum Coverage {
    /// Element by element while the estimated cost fits the budget
    /// ([`Audit::max_evaluations`]); above it, tensors of more than
    /// [`SCREEN_ABOVE`] elements are screened, with a note (the default).
    #[default]
    Auto,
    /// Element by element (or the [`Audit::max_elements`] sample) always;
    /// above the budget the audit refuses with
    /// [`Error::OverBudget`].
    Elements,
    /// Tensors of more than [`SCREEN_ABOVE`] elements are screened: the
    /// backward's gradient is projected on [`SCREEN_DIRECTIONS`] seeded
    /// Gaussian directions v and each ⟨gradient, v⟩ is compared with the
    /// derivative of φ along v (one complex forward per direction), with
    /// an error bar like an element's. This is the dot-product test; its
    /// cost does not grow with the tensor. When a direction disagrees, the
    /// audit bisects the tensor along it to find the elements responsible
    /// and compares those, and a seeded sample, one by one for the
    /// diagnosis.
    Screen,
}

impl Coverage {
    /// The name used by `PLUMBLINE_COVERAGE` and in messages.
    pub fn as_str(self) -> &'static str {
        match self {
            Coverage::Auto => "auto",
            Coverage::Elements => "elements",
            Coverage::Screen => "screen",
        }
    }
}

impl fmt::Display for Coverage {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

impl std::str::FromStr for Coverage {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        match s {
            "auto" => Ok(Coverage::Auto),
            "elements" => Ok(Coverage::Elements),
            "screen" => Ok(Coverage::Screen),
            other => Err(format!(
                "unknown coverage `{other}`; expected `auto`, `elements` or `screen`"
            )),
        }
    }
}

/// Which rows of a report get a [`StepSweep`](crate::report::StepSweep):
/// central differences of the row's worst element over a sweep of steps,
/// the data of the error-against-step picture. A sweep costs
/// [`SWEEP_FORWARDS`] forward evaluations per row.
///
/// ```
/// use plumbline::audit::StepSweeps;
/// assert_eq!("all".parse::<StepSweeps>(), Ok(StepSweeps::All));
/// assert_eq!(StepSweeps::default(), StepSweeps::Failing);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
#[non_exhaustive]
pub enum StepSweeps {
    /// Rows that do not agree (the default): a passing audit pays nothing.
    #[default]
    Failing,
    /// Every row with an element to sweep.
    All,
    /// No row.
    Off,
}

/// Forward evaluations one row's step sweep costs (two per step).
pub const SWEEP_FORWARDS: usize = 2 * crate::scheme::SWEEP_STEPS;

impl StepSweeps {
    /// The name used by `PLUMBLINE_STEP_SWEEPS` and in messages.
    pub fn as_str(self) -> &'static str {
        match self {
            StepSweeps::Failing => "failing",
            StepSweeps::All => "all",
            StepSweeps::Off => "off",
        }
    }
}

impl fmt::Display for StepSweeps {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

impl std::str::FromStr for StepSweeps {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        match s.trim().to_ascii_lowercase().as_str() {
            "failing" => Ok(StepSweeps::Failing),
            "all" => Ok(StepSweeps::All),
            "off" => Ok(StepSweeps::Off),
            other => Err(format!(
                "unknown choice `{other}`; expected `failing`, `all` or `off`"
            )),
        }
    }
}

/// Where an audit stands, for a progress callback.
#[derive(Clone, Debug, PartialEq)]
#[non_exhaustive]
pub struct Progress {
    /// The tensor being checked.
    pub tensor: String,
    /// Elements checked so far, over all tensors.
    pub done: usize,
    /// Elements to check, over all tensors.
    pub total: usize,
    /// Forward evaluations of the element estimates so far.
    pub forward_evals: usize,
}

type ProgressFn = Arc<dyn Fn(&Progress) + Send + Sync>;

/// Settings of a gradient audit (a builder), and the entry point
/// [`run`](Audit::run).
///
/// Every setter takes and returns the audit. Values are checked when the
/// audit runs: a setting that would silence it (a margin of 0, NaN or
/// ∞, no elements to check, a relative bound of 1 or more) is an
/// [`Error::Setting`] naming the setting and the value, never a verdict.
///
/// `Audit::run` reads no environment variable; [`assert_backward!`](crate::assert_backward)
/// and [`check_layer`](crate::check_layer) start from the `PLUMBLINE_*`
/// variables (see [`env`](crate::env)).
///
/// ```
/// use plumbline::{Audit, Error, Scheme};
/// let audit = Audit::new().seed(7).margin(8.0).scheme(Scheme::Ridders);
/// # let _ = audit;
///
/// // A margin that would accept anything is refused when the audit runs.
/// # use plumbline::prelude::*;
/// # struct Twice;
/// # impl Layer for Twice {
/// #     type Real = f64;
/// #     fn signature(&self) -> Signature { Signature::new().input("x", "n").output("y", "n") }
/// #     fn backward(&self, _: &Args<f64>, g: &[Tensor<f64>]) -> Gradients<f64> {
/// #         Gradients::from(vec![g[0].map(|g| 2.0 * g)])
/// #     }
/// # }
/// # impl Forward for Twice {
/// #     fn forward(&self, a: &Args<f64>) -> Vec<Tensor<f64>> { vec![a.input(0).map(|x| 2.0 * x)] }
/// # }
/// let args = Args::new(vec![Tensor::new(vec![2], vec![1.0, 2.0])?], vec![]);
/// let err = Audit::new().margin(f64::INFINITY).run(&Twice, &args).unwrap_err();
/// assert!(matches!(err, Error::Setting { ref setting, .. } if setting == "margin"));
/// # Ok::<(), plumbline::Error>(())
/// ```
#[derive(Clone)]
pub struct Audit {
    pub(crate) seed: u64,
    pub(crate) scheme: Option<Scheme>,
    pub(crate) tolerance: Tolerance,
    pub(crate) kinks_fail: bool,
    pub(crate) name: Option<String>,
    pub(crate) max_elements: Option<usize>,
    pub(crate) max_evaluations: u64,
    pub(crate) own_precision: bool,
    pub(crate) coverage: Coverage,
    pub(crate) threads: Option<usize>,
    pub(crate) step_sweeps: StepSweeps,
    pub(crate) progress: Option<ProgressFn>,
}

impl Default for Audit {
    fn default() -> Self {
        Audit::new()
    }
}

impl fmt::Debug for Audit {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("Audit")
            .field("seed", &self.seed)
            .field("scheme", &self.scheme)
            .field("margin", &self.tolerance.margin)
            .field("max_absolute", &self.tolerance.max_absolute)
            .field("max_relative", &self.tolerance.max_relative)
            .field("kinks_fail", &self.kinks_fail)
            .field("name", &self.name)
            .field("max_elements", &self.max_elements)
            .field("max_evaluations", &self.max_evaluations)
            .field("own_precision", &self.own_precision)
            .field("coverage", &self.coverage)
            .field("threads", &self.threads)
            .field("step_sweeps", &self.step_sweeps)
            .field("progress", &self.progress.as_ref().map(|_| "callback"))
            .finish()
    }
}

impl Audit {
    /// An audit with default settings.
    pub fn new() -> Self {
        Audit {
            seed: DEFAULT_SEED,
            scheme: None,
            tolerance: Tolerance::default(),
            kinks_fail: false,
            name: None,
            max_elements: None,
            max_evaluations: DEFAULT_MAX_EVALUATIONS,
            own_precision: false,
            coverage: Coverage::Auto,
            threads: None,
            step_sweeps: StepSweeps::Failing,
            progress: None,
        }
    }

    /// Seed of the random upstream gradient (default [`DEFAULT_SEED`]).
    #[must_use]
    pub fn seed(mut self, seed: u64) -> Self {
        self.seed = seed;
        self
    }

    /// Forces a difference scheme. By default a layer with a
    /// [`GenericForward`](crate::GenericForward) gets the complex step and
    /// any other layer Ridders' method.
    #[must_use]
    pub fn scheme(mut self, scheme: Scheme) -> Self {
        self.scheme = Some(scheme);
        self
    }

    /// Multiple of the error bar an element may deviate by (default 4;
    /// finite, above 0, at most 10,000).
    #[must_use]
    pub fn margin(mut self, margin: f64) -> Self {
        self.tolerance.margin = margin;
        self
    }

    /// A fixed absolute bound instead of the error bar. Combined with
    /// [`max_relative`](Audit::max_relative), an element agrees if either
    /// holds. Finite and ≥ 0.
    #[must_use]
    pub fn max_absolute(mut self, bound: f64) -> Self {
        self.tolerance.max_absolute = Some(bound);
        self
    }

    /// A fixed relative bound instead of the error bar:
    /// |a − n| ≤ bound · max(|a|, |n|). Finite, ≥ 0 and below 1.
    #[must_use]
    pub fn max_relative(mut self, bound: f64) -> Self {
        self.tolerance.max_relative = Some(bound);
        self
    }

    /// Whether elements at a kink that the analytic value does not fit fail.
    #[must_use]
    pub fn kinks_fail(mut self, yes: bool) -> Self {
        self.kinks_fail = yes;
        self
    }

    /// Checks at most `n` elements of each tensor (n ≥ 1), a random subset
    /// drawn from the seed (every element of smaller tensors). The table
    /// shows how many were checked (`40/576`); every returned gradient
    /// element is still checked for being finite.
    #[must_use]
    pub fn max_elements(mut self, n: usize) -> Self {
        self.max_elements = Some(n);
        self
    }

    /// The budget of forward evaluations (default
    /// [`DEFAULT_MAX_EVALUATIONS`]). An audit estimates its cost before it
    /// starts; above the budget it screens large tensors
    /// ([`Coverage::Auto`]) or, when told to compare every element
    /// ([`Coverage::Elements`]) or when even the screen does not fit,
    /// refuses with [`Error::OverBudget`] (saying how many it would take
    /// and what to set) rather than running for hours.
    #[must_use]
    pub fn max_evaluations(mut self, n: u64) -> Self {
        self.max_evaluations = n;
        self
    }

    /// Audits a layer with a [`GenericForward`](crate::GenericForward)
    /// through its plain path: its own forward, in its own precision, with
    /// real differences, as if it had only a [`Forward`](crate::Forward).
    /// (Default `false`: complex-step references in `f64`.)
    ///
    /// One type thus serves both audits: the exact references of the
    /// generic path, and the forward as it runs in production, `f32`
    /// rounding included. In a test: `assert_backward!(layer, &args,
    /// own_precision = true)`.
    ///
    /// ```
    /// use plumbline::prelude::*;
    ///
    /// /// Frost score per station in f32: y = tanh(w·x), one shared w.
    /// struct Score;
    ///
    /// impl Layer for Score {
    ///     type Real = f32;
    ///     fn signature(&self) -> Signature {
    ///         Signature::new().input("x", "station").param("w", "").output("y", "station")
    ///     }
    ///     fn backward(&self, a: &Args<f32>, up: &[Tensor<f32>]) -> Gradients<f32> {
    ///         let (x, w) = (a.input(0), a.param(0)[[]]);
    ///         let d = Tensor::from_fn(x.shape().to_vec(), |i| {
    ///             let y = (w * x[i]).tanh();
    ///             up[0][i] * (1.0 - y * y)
    ///         });
    ///         let dw = (0..x.len()).map(|i| d[[i]] * x[[i]]).sum();
    ///         Gradients::from(vec![d.map(|d| d * w), Tensor::scalar(dw)])
    ///     }
    /// }
    ///
    /// impl GenericForward for Score {
    ///     fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
    ///         let w = a.param(0)[[]];
    ///         vec![a.input(0).map(|x| (w * x).tanh())]
    ///     }
    /// }
    ///
    /// let x = Tensor::new(vec![3], vec![0.4_f32, -1.2, 2.5])?;
    /// let args = Args::new(vec![x], vec![Tensor::scalar(0.6)]);
    /// let exact = Audit::new().run(&Score, &args)?;
    /// assert_eq!(exact.reference_precision(), "f64"); // complex step in f64
    /// let plain = Audit::new().own_precision(true).run(&Score, &args)?;
    /// assert_eq!(plain.rows[0].scheme, Scheme::Ridders);
    /// assert_eq!(plain.reference_precision(), "f32");
    /// plain.assert_passed();
    /// let same = assert_backward!(Score, &args, own_precision = true);
    /// assert_eq!(*same, plain);
    /// # Ok::<(), plumbline::Error>(())
    /// ```
    #[must_use]
    pub fn own_precision(mut self, yes: bool) -> Self {
        self.own_precision = yes;
        self
    }

    /// How the audit covers each tensor's elements (default
    /// [`Coverage::Auto`]: element by element within the budget, large
    /// tensors screened above it).
    ///
    /// ```
    /// use plumbline::audit::Coverage;
    /// use plumbline::prelude::*;
    ///
    /// /// Frost-risk weights of 20,000 stations, y = 2·w.
    /// struct Weights;
    /// impl Layer for Weights {
    ///     type Real = f64;
    ///     fn signature(&self) -> Signature { Signature::new().param("w", "station").output("y", "station") }
    ///     fn backward(&self, _: &Args<f64>, g: &[Tensor<f64>]) -> Gradients<f64> {
    ///         Gradients::from(vec![g[0].map(|g| 2.0 * g)])
    ///     }
    /// }
    /// impl GenericForward for Weights {
    ///     fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
    ///         vec![a.param(0).map(|w| w + w)]
    ///     }
    /// }
    /// let w = Tensor::from_fn(vec![20_000], |i| (i[0] % 13) as f64 * 0.1 - 0.6);
    /// let report = Audit::new().coverage(Coverage::Screen).run(&Weights, &Args::new(vec![], vec![w]))?;
    /// let row = &report.rows[0];
    /// assert_eq!(row.screen.as_ref().map(|s| s.directions), Some(3));
    /// assert_eq!(row.checked, 0); // no element compared one by one
    /// assert!(report.forward_evals < 20);
    /// report.assert_passed();
    /// # Ok::<(), plumbline::Error>(())
    /// ```
    #[must_use]
    pub fn coverage(mut self, coverage: Coverage) -> Self {
        self.coverage = coverage;
        self
    }

    /// Threads for [`run_parallel`](Audit::run_parallel) (n ≥ 1; default:
    /// every core the machine has). [`run`](Audit::run) uses one.
    #[must_use]
    pub fn threads(mut self, n: usize) -> Self {
        self.threads = Some(n);
        self
    }

    /// Which rows get a step sweep, the data of the error-against-step
    /// picture (default [`StepSweeps::Failing`]; see
    /// [`StepSweep`](crate::report::StepSweep)). Each sweep costs
    /// [`SWEEP_FORWARDS`] forward evaluations.
    ///
    /// ```
    /// use plumbline::audit::{StepSweeps, SWEEP_FORWARDS};
    /// use plumbline::prelude::*;
    ///
    /// /// Frost-night cooling per station, y = x².
    /// struct Cooling;
    /// impl Layer for Cooling {
    ///     type Real = f64;
    ///     fn signature(&self) -> Signature { Signature::new().input("x", "station").output("y", "station") }
    ///     fn backward(&self, a: &Args<f64>, g: &[Tensor<f64>]) -> Gradients<f64> {
    ///         let x = a.input(0);
    ///         Gradients::from(vec![Tensor::from_fn(x.shape().to_vec(), |i| 2.0 * x[i] * g[0][i])])
    ///     }
    /// }
    /// impl GenericForward for Cooling {
    ///     fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
    ///         vec![a.input(0).map(|x| x * x)]
    ///     }
    /// }
    /// let args = Args::new(vec![Tensor::new(vec![2], vec![0.5, -1.5])?], vec![]);
    /// let quiet = Audit::new().run(&Cooling, &args)?;
    /// assert!(quiet.rows[0].step_sweep.is_none()); // passing rows: no sweep
    /// let swept = Audit::new().step_sweeps(StepSweeps::All).run(&Cooling, &args)?;
    /// let sweep = swept.rows[0].step_sweep.as_ref().unwrap();
    /// assert_eq!(sweep.forward_evals, SWEEP_FORWARDS);
    /// assert_eq!(swept.forward_evals, quiet.forward_evals + SWEEP_FORWARDS);
    /// # Ok::<(), plumbline::Error>(())
    /// ```
    #[must_use]
    pub fn step_sweeps(mut self, which: StepSweeps) -> Self {
        self.step_sweeps = which;
        self
    }

    /// The layer name shown in the report.
    #[must_use]
    pub fn name(mut self, name: impl Into<String>) -> Self {
        self.name = Some(name.into());
        self
    }

    /// Calls `f` after each checked element, with where the audit stands
    /// (the library never prints).
    ///
    /// ```
    /// use std::sync::atomic::{AtomicUsize, Ordering};
    /// use std::sync::Arc;
    /// let seen = Arc::new(AtomicUsize::new(0));
    /// let counter = seen.clone();
    /// let audit = plumbline::Audit::new().on_progress(move |p| {
    ///     counter.store(p.done, Ordering::Relaxed);
    /// });
    /// # let _ = audit;
    /// ```
    #[must_use]
    pub fn on_progress(mut self, f: impl Fn(&Progress) + Send + Sync + 'static) -> Self {
        self.progress = Some(Arc::new(f));
        self
    }

    /// Checks every setting (run calls this first).
    pub(crate) fn validate(&self) -> Result<(), Error> {
        self.tolerance.validate()?;
        if self.max_elements == Some(0) {
            return Err(Error::Setting {
                setting: "max_elements".into(),
                value: "0".into(),
                detail: "checking no element passes any backward; give at least 1".into(),
            });
        }
        if self.threads == Some(0) {
            return Err(Error::Setting {
                setting: "threads".into(),
                value: "0".into(),
                detail: "an audit needs at least one thread".into(),
            });
        }
        if self.max_evaluations == 0 {
            return Err(Error::Setting {
                setting: "max_evaluations".into(),
                value: "0".into(),
                detail: "an audit needs at least one forward evaluation".into(),
            });
        }
        Ok(())
    }

    /// Scales every bound by `factor` (the environment's margin factor).
    pub(crate) fn scale_bounds(mut self, factor: f64) -> Self {
        let t = &mut self.tolerance;
        t.margin *= factor;
        t.max_absolute = t.max_absolute.map(|a| a * factor);
        t.max_relative = t.max_relative.map(|r| r * factor);
        self
    }
}
