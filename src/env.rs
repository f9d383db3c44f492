//! Settings from `PLUMBLINE_*` environment variables: the CI gate.
//!
//! One table of variables, each parsed with `FromStr` and checked by the
//! same rule as its builder setter, so a value refused in code is refused
//! in the environment with the same message (naming the variable). One
//! pure parser takes a lookup closure (tests never touch the process
//! environment); [`Environment::from_env`] is a thin wrapper over
//! `std::env`. [`Audit::run`](crate::Audit::run) reads none of these:
//! [`assert_backward!`](crate::assert_backward) and
//! [`check_layer`](crate::check_layer) do.
//!
//! | variable | values | default | precedence |
//! |---|---|---|---|
//! | `PLUMBLINE_SEED` | `u64`, decimal or `0x` hex | `0xC0FFEE` | **wins over code**: replays a failure whatever the test sets |
//! | `PLUMBLINE_MARGIN` | number in (0, 10000] | `4` | code `margin = ..` wins |
//! | `PLUMBLINE_MARGIN_FACTOR` | positive number | `1` | **scales every bound**, also those set in code (`< 1` stricter); the scaled margin must stay ≤ 10000 |
//! | `PLUMBLINE_SCHEME` | `complex-step`, `ridders`, `central` | per layer | code `scheme = ..` wins |
//! | `PLUMBLINE_KINKS_FAIL` | `1`/`0`, `true`/`false`, `yes`/`no`, `on`/`off` | `false` | code wins |
//! | `PLUMBLINE_MAX_ELEMENTS` | positive integer | every element | code wins |
//! | `PLUMBLINE_MAX_EVALUATIONS` | positive integer | `1000000` | code wins |
//! | `PLUMBLINE_COVERAGE` | `auto`, `elements`, `screen` | `auto` | code wins |
//! | `PLUMBLINE_THREADS` | positive integer | every core | code wins (`assert_backward!` uses them for `Sync` layers) |
//! | `PLUMBLINE_REPORT_DIR` | a directory (created if missing; not a file) | none | writes `<test>--<layer>.json` and `.md` per audit, and `<test>--<layer>--<tensor>.svg` per row with a step sweep (feature `pictures`) |
//! | `PLUMBLINE_STEP_SWEEPS` | `failing`, `all`, `off` | `failing` | which rows get an error-against-step sweep ([`StepSweeps`]); code wins |
//! | `PLUMBLINE_FORMAT` | `none`, `table`, `markdown`, `json` | `none` | what each audit prints to stdout |
//! | `PLUMBLINE_COLOR` | `auto`, `always`, `never` | `auto` | `auto`: colour only on a terminal, not with `NO_COLOR` or `TERM=dumb`; `CLICOLOR_FORCE` forces |
//!
//! In short: code settings beat the environment, which beats the defaults;
//! except the seed (the environment replays) and the margin factor (the
//! environment scales whatever code set). An invalid value is an
//! [`Error::Setting`] naming the variable.

use std::fmt;
use std::path::PathBuf;
use std::str::FromStr;

use crate::audit::{Audit, Coverage, StepSweeps};
use crate::error::Error;
use crate::render::ColorChoice;
use crate::scheme::Scheme;
use crate::tolerance::check_margin;

/// Seed of the random upstream gradient; replays an audit.
pub const SEED_VAR: &str = "PLUMBLINE_SEED";
/// Default margin (multiple of the error bar).
pub const MARGIN_VAR: &str = "PLUMBLINE_MARGIN";
/// Factor applied to every bound after all other settings.
pub const MARGIN_FACTOR_VAR: &str = "PLUMBLINE_MARGIN_FACTOR";
/// Default difference scheme.
pub const SCHEME_VAR: &str = "PLUMBLINE_SCHEME";
/// Default for failing elements at a kink.
pub const KINKS_FAIL_VAR: &str = "PLUMBLINE_KINKS_FAIL";
/// Default cap on the elements checked per tensor.
pub const MAX_ELEMENTS_VAR: &str = "PLUMBLINE_MAX_ELEMENTS";
/// Default budget of forward evaluations per audit.
pub const MAX_EVALUATIONS_VAR: &str = "PLUMBLINE_MAX_EVALUATIONS";
/// How each tensor's elements are covered (see [`Coverage`]).
pub const COVERAGE_VAR: &str = "PLUMBLINE_COVERAGE";
/// Threads of a parallel audit.
pub const THREADS_VAR: &str = "PLUMBLINE_THREADS";
/// Directory for JSON and Markdown reports.
pub const REPORT_DIR_VAR: &str = "PLUMBLINE_REPORT_DIR";
/// Which rows get an error-against-step sweep.
pub const STEP_SWEEPS_VAR: &str = "PLUMBLINE_STEP_SWEEPS";
/// What each audit prints to standard output.
pub const FORMAT_VAR: &str = "PLUMBLINE_FORMAT";
/// Colour of printed tables.
pub const COLOR_VAR: &str = "PLUMBLINE_COLOR";

/// What every audit run through [`assert_backward!`](crate::assert_backward)
/// or [`check_layer`](crate::check_layer) prints to standard output
/// (through `println!`, so `cargo test` captures it and shows it for
/// failing tests or with `--nocapture`).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
#[non_exhaustive]
pub enum PrintFormat {
    /// Print nothing (a failure still panics with the whole table).
    #[default]
    None,
    /// The aligned table, fitted to the terminal width, coloured on a terminal.
    Table,
    /// The Markdown summary.
    Markdown,
    /// The report as pretty JSON.
    Json,
}

/// Parses `none` (or `off`), `table`, `markdown` (or `md`), `json`.
///
/// ```
/// use plumbline::env::PrintFormat;
/// assert_eq!("Markdown".parse(), Ok(PrintFormat::Markdown));
/// assert!("xml".parse::<PrintFormat>().is_err());
/// ```
impl FromStr for PrintFormat {
    type Err = String;
    fn from_str(s: &str) -> Result<PrintFormat, String> {
        match s.trim().to_ascii_lowercase().as_str() {
            "none" | "off" => Ok(PrintFormat::None),
            "table" => Ok(PrintFormat::Table),
            "markdown" | "md" => Ok(PrintFormat::Markdown),
            "json" => Ok(PrintFormat::Json),
            _ => Err("expected `none`, `table`, `markdown` or `json`".to_string()),
        }
    }
}

impl fmt::Display for PrintFormat {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            PrintFormat::None => "none",
            PrintFormat::Table => "table",
            PrintFormat::Markdown => "markdown",
            PrintFormat::Json => "json",
        })
    }
}

/// A yes/no setting: `1`/`0`, `true`/`false`, `yes`/`no`, `on`/`off`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
struct Switch(bool);

impl FromStr for Switch {
    type Err = String;
    fn from_str(s: &str) -> Result<Switch, String> {
        match s.trim().to_ascii_lowercase().as_str() {
            "1" | "true" | "yes" | "on" => Ok(Switch(true)),
            "0" | "false" | "no" | "off" => Ok(Switch(false)),
            _ => Err("expected `1`/`0`, `true`/`false`, `yes`/`no` or `on`/`off`".to_string()),
        }
    }
}

/// A seed: decimal or `0x` hex.
struct Seed(u64);

impl FromStr for Seed {
    type Err = String;
    fn from_str(s: &str) -> Result<Seed, String> {
        let t = s.trim();
        match t.strip_prefix("0x").or_else(|| t.strip_prefix("0X")) {
            Some(hex) => u64::from_str_radix(hex, 16),
            None => t.parse::<u64>(),
        }
        .map(Seed)
        .map_err(|_| "expected an unsigned 64-bit integer, decimal or 0x hex".to_string())
    }
}

/// A count of at least 1.
struct Count(u64);

impl FromStr for Count {
    type Err = String;
    fn from_str(s: &str) -> Result<Count, String> {
        match s.trim().parse::<u64>() {
            Ok(n) if n > 0 => Ok(Count(n)),
            _ => Err("expected a positive integer".to_string()),
        }
    }
}

/// Audit settings read from `PLUMBLINE_*` environment variables.
///
/// Every field is `None` (or the default) when its variable is unset or
/// empty. Build one with [`Environment::from_env`] (the process
/// environment) or [`Environment::from_lookup`] (any lookup, for tests);
/// see the [module docs](self) for the table of variables.
#[derive(Clone, Debug, PartialEq, Default)]
#[non_exhaustive]
pub struct Environment {
    /// `PLUMBLINE_SEED`: replaces every seed, also one set in code.
    pub seed: Option<u64>,
    /// `PLUMBLINE_MARGIN`: default margin; a margin set in code wins.
    pub margin: Option<f64>,
    /// `PLUMBLINE_MARGIN_FACTOR`: multiplies every bound (margin, and fixed
    /// bounds), after code settings.
    pub margin_factor: Option<f64>,
    /// `PLUMBLINE_SCHEME`: default scheme; a scheme set in code wins.
    pub scheme: Option<Scheme>,
    /// `PLUMBLINE_KINKS_FAIL`: default for failing kinks; code wins.
    pub kinks_fail: Option<bool>,
    /// `PLUMBLINE_MAX_ELEMENTS`: default cap on the elements checked per
    /// tensor; code wins.
    pub max_elements: Option<usize>,
    /// `PLUMBLINE_MAX_EVALUATIONS`: default budget of forward evaluations;
    /// code wins.
    pub max_evaluations: Option<u64>,
    /// `PLUMBLINE_COVERAGE`: default coverage; code wins.
    pub coverage: Option<Coverage>,
    /// `PLUMBLINE_THREADS`: default threads of a parallel audit; code wins.
    pub threads: Option<usize>,
    /// `PLUMBLINE_REPORT_DIR`: write a JSON report and a Markdown summary
    /// of every audit here, and the error-against-step picture of every
    /// row with a step sweep (feature `pictures`).
    pub report_dir: Option<PathBuf>,
    /// `PLUMBLINE_STEP_SWEEPS`: which rows get a step sweep; code wins.
    pub step_sweeps: Option<StepSweeps>,
    /// `PLUMBLINE_FORMAT`: what each audit prints.
    pub format: PrintFormat,
    /// `PLUMBLINE_COLOR`: colour of printed tables.
    pub color: ColorChoice,
}

fn bad(var: &str, value: &str, detail: impl Into<String>) -> Error {
    Error::Setting {
        setting: var.to_string(),
        value: value.to_string(),
        detail: detail.into(),
    }
}

/// Parses a variable's value with `FromStr`, naming the variable on error.
fn parse<T: FromStr>(var: &str, value: &str) -> Result<T, Error>
where
    T::Err: fmt::Display,
{
    value
        .trim()
        .parse::<T>()
        .map_err(|e| bad(var, value, e.to_string()))
}

impl Environment {
    /// Reads the settings from the process environment.
    ///
    /// ```
    /// let env = plumbline::env::Environment::from_env()?;
    /// let audit = env.audit(|a| a.seed(7))?;
    /// # let _ = audit;
    /// # Ok::<(), plumbline::Error>(())
    /// ```
    pub fn from_env() -> Result<Environment, Error> {
        Environment::from_lookup(|name| std::env::var(name).ok())
    }

    /// Reads the settings through `lookup` (a variable name to its value).
    /// Unset and empty variables mean "not set".
    ///
    /// ```
    /// use plumbline::env::{Environment, PrintFormat};
    /// use plumbline::{Error, Scheme};
    ///
    /// let vars = [("PLUMBLINE_SEED", "0x2a"), ("PLUMBLINE_SCHEME", "central"), ("PLUMBLINE_FORMAT", "json")];
    /// let lookup = |name: &str| vars.iter().find(|(k, _)| *k == name).map(|(_, v)| v.to_string());
    /// let env = Environment::from_lookup(lookup)?;
    /// assert_eq!(env.seed, Some(42));
    /// assert_eq!(env.scheme, Some(Scheme::Central));
    /// assert_eq!(env.format, PrintFormat::Json);
    ///
    /// let err = Environment::from_lookup(|n| (n == "PLUMBLINE_MARGIN").then(|| "-1".into())).unwrap_err();
    /// assert!(matches!(err, Error::Setting { ref setting, .. } if setting == "PLUMBLINE_MARGIN"));
    /// # Ok::<(), plumbline::Error>(())
    /// ```
    pub fn from_lookup(lookup: impl Fn(&str) -> Option<String>) -> Result<Environment, Error> {
        let get = |name: &str| lookup(name).filter(|v| !v.trim().is_empty());
        let mut env = Environment::default();
        if let Some(v) = get(SEED_VAR) {
            env.seed = Some(parse::<Seed>(SEED_VAR, &v)?.0);
        }
        if let Some(v) = get(MARGIN_VAR) {
            let m: f64 = parse(MARGIN_VAR, &v)?;
            check_margin(MARGIN_VAR, m)?;
            env.margin = Some(m);
        }
        if let Some(v) = get(MARGIN_FACTOR_VAR) {
            let f: f64 = parse(MARGIN_FACTOR_VAR, &v)?;
            if !(f.is_finite() && f > 0.0) {
                return Err(bad(
                    MARGIN_FACTOR_VAR,
                    &v,
                    "expected a positive finite number, e.g. `2` or `0.5`",
                ));
            }
            env.margin_factor = Some(f);
        }
        if let Some(v) = get(SCHEME_VAR) {
            env.scheme = Some(parse(SCHEME_VAR, &v)?);
        }
        if let Some(v) = get(KINKS_FAIL_VAR) {
            env.kinks_fail = Some(parse::<Switch>(KINKS_FAIL_VAR, &v)?.0);
        }
        if let Some(v) = get(MAX_ELEMENTS_VAR) {
            let n = parse::<Count>(MAX_ELEMENTS_VAR, &v)?.0;
            env.max_elements = Some(usize::try_from(n).unwrap_or(usize::MAX));
        }
        if let Some(v) = get(MAX_EVALUATIONS_VAR) {
            env.max_evaluations = Some(parse::<Count>(MAX_EVALUATIONS_VAR, &v)?.0);
        }
        if let Some(v) = get(COVERAGE_VAR) {
            env.coverage = Some(parse(COVERAGE_VAR, &v)?);
        }
        if let Some(v) = get(THREADS_VAR) {
            let n = parse::<Count>(THREADS_VAR, &v)?.0;
            env.threads = Some(usize::try_from(n).unwrap_or(usize::MAX));
        }
        if let Some(v) = get(REPORT_DIR_VAR) {
            let dir = PathBuf::from(&v);
            if dir.exists() && !dir.is_dir() {
                return Err(bad(
                    REPORT_DIR_VAR,
                    &v,
                    "names a file; it must be a directory (created if missing)",
                ));
            }
            env.report_dir = Some(dir);
        }
        if let Some(v) = get(STEP_SWEEPS_VAR) {
            env.step_sweeps = Some(parse(STEP_SWEEPS_VAR, &v)?);
        }
        if let Some(v) = get(FORMAT_VAR) {
            env.format = parse(FORMAT_VAR, &v)?;
        }
        if let Some(v) = get(COLOR_VAR) {
            env.color = parse(COLOR_VAR, &v)?;
        }
        Ok(env)
    }

    /// The defaults with this environment applied: what code settings
    /// start from.
    pub(crate) fn defaults(&self) -> Audit {
        let mut a = Audit::new();
        if let Some(m) = self.margin {
            a = a.margin(m);
        }
        if let Some(s) = self.scheme {
            a = a.scheme(s);
        }
        if let Some(k) = self.kinks_fail {
            a = a.kinks_fail(k);
        }
        if let Some(n) = self.max_elements {
            a = a.max_elements(n);
        }
        if let Some(n) = self.max_evaluations {
            a = a.max_evaluations(n);
        }
        if let Some(c) = self.coverage {
            a = a.coverage(c);
        }
        if let Some(n) = self.threads {
            a = a.threads(n);
        }
        if let Some(w) = self.step_sweeps {
            a = a.step_sweeps(w);
        }
        a
    }

    /// Applies the settings that win over code: the replay seed and the
    /// margin factor. A factor that takes the margin out of its range is
    /// refused, naming the variable.
    pub(crate) fn overrides(&self, mut a: Audit) -> Result<Audit, Error> {
        if let Some(seed) = self.seed {
            a = a.seed(seed);
        }
        if let Some(f) = self.margin_factor {
            a = a.scale_bounds(f);
            check_margin(MARGIN_FACTOR_VAR, a.tolerance.margin).map_err(|_| {
                bad(
                    MARGIN_FACTOR_VAR,
                    &f.to_string(),
                    format!(
                        "scales the margin to {}, outside (0, 10000]: such a bound accepts anything",
                        a.tolerance.margin
                    ),
                )
            })?;
        }
        Ok(a)
    }

    /// The audit for one call: the environment's defaults, then the code
    /// settings `configure` applies, then the seed and margin factor.
    ///
    /// ```
    /// use plumbline::env::Environment;
    /// let env = Environment::from_lookup(|n| match n {
    ///     "PLUMBLINE_SEED" => Some("9".into()),
    ///     "PLUMBLINE_MARGIN_FACTOR" => Some("0.5".into()),
    ///     _ => None,
    /// })?;
    /// let audit = env.audit(|a| a.seed(3).margin(8.0))?;
    /// let text = format!("{audit:?}");
    /// assert!(text.contains("seed: 9")); // the environment replays
    /// assert!(text.contains("margin: 4.0")); // code margin, scaled
    /// # Ok::<(), plumbline::Error>(())
    /// ```
    pub fn audit(&self, configure: impl FnOnce(Audit) -> Audit) -> Result<Audit, Error> {
        self.overrides(configure(self.defaults()))
    }

    /// A paragraph for failure messages: where the seed and margin came
    /// from and which variable changes them. `code` holds what the test's
    /// own settings would be without the environment.
    pub(crate) fn explain(&self, code: &Audit) -> String {
        let mut out = String::new();
        let plain = Audit::new();
        let seed_from = if self.seed.is_some() {
            format!("from {SEED_VAR}, which replaces any seed set in code")
        } else if code.seed != plain.seed {
            "set in code".to_string()
        } else {
            "the default".to_string()
        };
        out.push_str(&format!(
            "seed: {seed_from}; replay with {SEED_VAR}=<seed>\n"
        ));
        let margin_from = if code.tolerance != plain.tolerance {
            format!("set in code, so {MARGIN_VAR} does not change it")
        } else if self.margin.is_some() {
            format!("from {MARGIN_VAR}")
        } else {
            format!("the default; {MARGIN_VAR} changes it")
        };
        out.push_str(&format!(
            "bounds: {margin_from}; {MARGIN_FACTOR_VAR} (now {}) scales every bound, including those set in code\n",
            self.margin_factor.unwrap_or(1.0)
        ));
        if self.report_dir.is_none() {
            out.push_str(&format!(
                "set {REPORT_DIR_VAR}=<dir> to keep a JSON report and a Markdown summary of each audit\n"
            ));
        }
        out
    }
}
