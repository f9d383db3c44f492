//! Settings from environment variables: the CI gate. One pure parser that
//! takes a lookup closure (so tests never touch the process environment),
//! one thin wrapper over `std::env`, and the rules for combining them with
//! the settings written in code.

use std::fmt;
use std::path::{Path, PathBuf};

use crate::audit::{Audit, Settings};
use crate::error::Error;
use crate::report::Report;
use crate::scheme::Scheme;
use crate::terminal::ColorChoice;

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
/// Directory for JSON and Markdown reports.
pub const REPORT_DIR_VAR: &str = "PLUMBLINE_REPORT_DIR";
/// What each audit prints to standard output.
pub const FORMAT_VAR: &str = "PLUMBLINE_FORMAT";
/// Colour of printed tables.
pub const COLOR_VAR: &str = "PLUMBLINE_COLOR";

/// What every audit run through [`assert_backward!`](crate::assert_backward)
/// or `check_layer` prints to standard output (through `println!`, so
/// `cargo test` captures it and shows it for failing tests or with
/// `--nocapture`).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
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

impl PrintFormat {
    /// Parses `none`, `table`, `markdown` (or `md`), `json`.
    ///
    /// ```
    /// use plumbline::PrintFormat;
    /// assert_eq!(PrintFormat::parse("Markdown"), Some(PrintFormat::Markdown));
    /// assert_eq!(PrintFormat::parse("xml"), None);
    /// ```
    pub fn parse(s: &str) -> Option<PrintFormat> {
        match s.trim().to_ascii_lowercase().as_str() {
            "none" | "off" => Some(PrintFormat::None),
            "table" => Some(PrintFormat::Table),
            "markdown" | "md" => Some(PrintFormat::Markdown),
            "json" => Some(PrintFormat::Json),
            _ => None,
        }
    }

    /// The name accepted by [`parse`](PrintFormat::parse).
    pub fn as_str(self) -> &'static str {
        match self {
            PrintFormat::None => "none",
            PrintFormat::Table => "table",
            PrintFormat::Markdown => "markdown",
            PrintFormat::Json => "json",
        }
    }
}

impl fmt::Display for PrintFormat {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// Audit settings read from `PLUMBLINE_*` environment variables.
///
/// Every field is `None` (or the default) when its variable is unset or
/// empty. Build one with [`Environment::from_env`] (the process
/// environment) or [`Environment::from_lookup`] (any lookup, for tests).
#[derive(Clone, Debug, PartialEq, Default)]
pub struct Environment {
    /// `PLUMBLINE_SEED`: replaces every seed, also one set in code.
    pub seed: Option<u64>,
    /// `PLUMBLINE_MARGIN`: default margin; a margin set in code wins.
    pub margin: Option<f64>,
    /// `PLUMBLINE_MARGIN_FACTOR`: multiplies every bound (margin, and fixed
    /// `epsilon` / `max_relative` bounds), after code settings.
    pub margin_factor: Option<f64>,
    /// `PLUMBLINE_SCHEME`: default scheme; a scheme set in code wins.
    pub scheme: Option<Scheme>,
    /// `PLUMBLINE_KINKS_FAIL`: default for failing kinks; code wins.
    pub kinks_fail: Option<bool>,
    /// `PLUMBLINE_MAX_ELEMENTS`: default cap on the elements checked per
    /// tensor; code `.max_elements(..)` wins.
    pub max_elements: Option<usize>,
    /// `PLUMBLINE_REPORT_DIR`: write a JSON report and a Markdown summary
    /// of every audit here.
    pub report_dir: Option<PathBuf>,
    /// `PLUMBLINE_FORMAT`: what each audit prints.
    pub format: PrintFormat,
    /// `PLUMBLINE_COLOR`: colour of printed tables.
    pub color: ColorChoice,
}

fn bad(var: &str, value: &str, detail: &str) -> Error {
    Error::Setting {
        setting: var.to_string(),
        value: value.to_string(),
        detail: detail.to_string(),
    }
}

fn positive(var: &str, v: &str) -> Result<f64, Error> {
    match v.trim().parse::<f64>() {
        Ok(x) if x.is_finite() && x > 0.0 => Ok(x),
        _ => Err(bad(
            var,
            v,
            "expected a positive finite number, e.g. `8` or `0.5`",
        )),
    }
}

impl Environment {
    /// Reads the settings from the process environment. A thin wrapper over
    /// [`from_lookup`](Environment::from_lookup); see there for the table of
    /// variables.
    ///
    /// ```
    /// let env = plumbline::Environment::from_env()?;
    /// let audit = env.audit(|a| a.seed(7));
    /// # Ok::<(), plumbline::Error>(())
    /// ```
    pub fn from_env() -> Result<Environment, Error> {
        Environment::from_lookup(|name| std::env::var(name).ok())
    }

    /// Reads the settings through `lookup` (a variable name to its value).
    /// Unset and empty variables mean "not set".
    ///
    /// | variable | values | default | precedence |
    /// |---|---|---|---|
    /// | `PLUMBLINE_SEED` | `u64`, decimal or `0x` hex | `0xC0FFEE` | **wins over code**: replays a failure whatever the test sets |
    /// | `PLUMBLINE_MARGIN` | positive number | `4` | code `.margin(..)` wins |
    /// | `PLUMBLINE_MARGIN_FACTOR` | positive number | `1` | **scales every bound**, also those set in code (`< 1` stricter) |
    /// | `PLUMBLINE_SCHEME` | `complex-step`, `ridders`, `central` | per layer | code `.scheme(..)` wins |
    /// | `PLUMBLINE_KINKS_FAIL` | `1`/`0`, `true`/`false`, `yes`/`no`, `on`/`off` | `false` | code `.kinks_fail(..)` wins |
    /// | `PLUMBLINE_MAX_ELEMENTS` | positive integer | every element | code `.max_elements(..)` wins |
    /// | `PLUMBLINE_REPORT_DIR` | a directory (created if missing) | none | writes `<test>--<layer>.json` and `.md` per audit |
    /// | `PLUMBLINE_FORMAT` | `none`, `table`, `markdown`, `json` | `none` | what each audit prints to stdout |
    /// | `PLUMBLINE_COLOR` | `auto`, `always`, `never` | `auto` | `auto`: colour only on a terminal, not with `NO_COLOR` or `TERM=dumb`; `CLICOLOR_FORCE` forces |
    ///
    /// In short: code settings beat the environment, which beats the
    /// defaults; except the seed (the environment replays) and the margin
    /// factor (the environment scales whatever code set). Panic messages are
    /// never coloured.
    ///
    /// An invalid value is an [`Error::Setting`] naming the variable.
    ///
    /// ```
    /// use plumbline::{Environment, Error, PrintFormat, Scheme};
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
            let t = v.trim();
            let parsed = match t.strip_prefix("0x").or_else(|| t.strip_prefix("0X")) {
                Some(hex) => u64::from_str_radix(hex, 16),
                None => t.parse::<u64>(),
            };
            env.seed = Some(parsed.map_err(|_| {
                bad(
                    SEED_VAR,
                    &v,
                    "expected an unsigned 64-bit integer, decimal or 0x hex",
                )
            })?);
        }
        if let Some(v) = get(MARGIN_VAR) {
            env.margin = Some(positive(MARGIN_VAR, &v)?);
        }
        if let Some(v) = get(MARGIN_FACTOR_VAR) {
            env.margin_factor = Some(positive(MARGIN_FACTOR_VAR, &v)?);
        }
        if let Some(v) = get(SCHEME_VAR) {
            env.scheme = Some(Scheme::parse(&v).ok_or_else(|| {
                bad(
                    SCHEME_VAR,
                    &v,
                    "expected `complex-step`, `ridders` or `central`",
                )
            })?);
        }
        if let Some(v) = get(KINKS_FAIL_VAR) {
            env.kinks_fail = Some(
                match v.trim().to_ascii_lowercase().as_str() {
                    "1" | "true" | "yes" | "on" => Some(true),
                    "0" | "false" | "no" | "off" => Some(false),
                    _ => None,
                }
                .ok_or_else(|| {
                    bad(
                        KINKS_FAIL_VAR,
                        &v,
                        "expected `1`/`0`, `true`/`false`, `yes`/`no` or `on`/`off`",
                    )
                })?,
            );
        }
        if let Some(v) = get(MAX_ELEMENTS_VAR) {
            env.max_elements = Some(
                v.trim()
                    .parse::<usize>()
                    .ok()
                    .filter(|&n| n > 0)
                    .ok_or_else(|| bad(MAX_ELEMENTS_VAR, &v, "expected a positive integer"))?,
            );
        }
        if let Some(v) = get(REPORT_DIR_VAR) {
            env.report_dir = Some(PathBuf::from(v));
        }
        if let Some(v) = get(FORMAT_VAR) {
            env.format = PrintFormat::parse(&v).ok_or_else(|| {
                bad(
                    FORMAT_VAR,
                    &v,
                    "expected `none`, `table`, `markdown` or `json`",
                )
            })?;
        }
        if let Some(v) = get(COLOR_VAR) {
            env.color = ColorChoice::parse(&v)
                .ok_or_else(|| bad(COLOR_VAR, &v, "expected `auto`, `always` or `never`"))?;
        }
        Ok(env)
    }

    /// The defaults with this environment applied: what code settings start
    /// from.
    pub fn defaults(&self) -> Settings {
        let mut s = Settings::default();
        if let Some(m) = self.margin {
            s.tolerance.margin = m;
        }
        s.scheme = self.scheme.or(s.scheme);
        s.kinks_fail = self.kinks_fail.unwrap_or(s.kinks_fail);
        s.max_elements = self.max_elements.or(s.max_elements);
        s
    }

    /// Applies the settings that win over code: the replay seed and the
    /// margin factor.
    pub fn overrides(&self, mut s: Settings) -> Settings {
        if let Some(seed) = self.seed {
            s.seed = seed;
        }
        if let Some(f) = self.margin_factor {
            s.tolerance.margin *= f;
            s.tolerance.epsilon = s.tolerance.epsilon.map(|e| e * f);
            s.tolerance.max_relative = s.tolerance.max_relative.map(|r| r * f);
        }
        s
    }

    /// The audit for one call: [`defaults`](Environment::defaults), then the
    /// code settings `configure` applies, then
    /// [`overrides`](Environment::overrides).
    ///
    /// ```
    /// use plumbline::Environment;
    /// let env = Environment { seed: Some(9), margin: Some(2.0), margin_factor: Some(0.5), ..Environment::default() };
    /// let audit = env.audit(|a| a.seed(3).margin(8.0));
    /// assert_eq!(audit.settings().seed, 9); // the environment replays
    /// assert_eq!(audit.settings().tolerance.margin, 4.0); // code margin, scaled
    /// assert_eq!(env.audit(|a| a).settings().tolerance.margin, 1.0); // env margin, scaled
    /// ```
    pub fn audit(&self, configure: impl FnOnce(Audit) -> Audit) -> Audit {
        let configured = configure(Audit::with_settings(self.defaults()));
        Audit::with_settings(self.overrides(configured.settings().clone()))
    }

    /// Handles one finished report: prints it in [`format`](Environment::format)
    /// and, with a report directory, writes `<stem>.json` and `<stem>.md`
    /// there, where the stem is the current thread's name (the test's name
    /// under `cargo test`) and the layer name. Returns the paths written.
    pub fn record(&self, report: &Report) -> Result<Vec<PathBuf>, Error> {
        match self.format {
            PrintFormat::None => {}
            PrintFormat::Table => {
                let style = crate::terminal::stdout_style(self.color);
                println!("{}", crate::render::table(report, &style));
            }
            PrintFormat::Markdown => println!("{}", crate::render::markdown(report)),
            PrintFormat::Json => println!("{}", report_json(report)),
        }
        match &self.report_dir {
            Some(dir) => write_report_files(dir, &report_stem(report), report),
            None => Ok(Vec::new()),
        }
    }

    /// A paragraph for failure messages: where the seed and margin came
    /// from and which variable changes them.
    pub(crate) fn explain(&self, code: &Settings) -> String {
        let mut out = String::new();
        let seed_from = if self.seed.is_some() {
            format!("from {SEED_VAR}, which replaces any seed set in code")
        } else if code.seed != Settings::default().seed {
            "set in code".to_string()
        } else {
            "the default".to_string()
        };
        out.push_str(&format!("seed: {seed_from}\n"));
        let defaults = self.defaults();
        let margin_from = if code.tolerance != defaults.tolerance {
            format!("set in code, so {MARGIN_VAR} does not change it")
        } else if self.margin.is_some() {
            format!("from {MARGIN_VAR}")
        } else {
            "the default".to_string()
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

/// The report as pretty JSON (per-element detail is not included).
pub(crate) fn report_json(report: &Report) -> String {
    // Serialising plain data with derived impls cannot fail; keep a visible
    // fallback rather than a panic all the same.
    serde_json::to_string_pretty(report)
        .unwrap_or_else(|e| format!("{{\"error\": \"report not serialisable: {e}\"}}"))
}

fn sanitize(s: &str) -> String {
    s.chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' || c == '.' {
                c
            } else {
                '_'
            }
        })
        .collect()
}

fn report_stem(report: &Report) -> String {
    let thread = std::thread::current();
    let test = thread.name().unwrap_or("audit");
    format!("{}--{}", sanitize(test), sanitize(&report.layer))
}

/// Writes `<dir>/<stem>.json` and `<dir>/<stem>.md`, creating `dir`.
pub(crate) fn write_report_files(
    dir: &Path,
    stem: &str,
    report: &Report,
) -> Result<Vec<PathBuf>, Error> {
    let io = |path: &Path, e: std::io::Error| Error::ReportIo {
        path: path.display().to_string(),
        detail: e.to_string(),
    };
    std::fs::create_dir_all(dir).map_err(|e| io(dir, e))?;
    let json = dir.join(format!("{stem}.json"));
    std::fs::write(&json, report_json(report)).map_err(|e| io(&json, e))?;
    let md = dir.join(format!("{stem}.md"));
    std::fs::write(&md, crate::render::markdown(report)).map_err(|e| io(&md, e))?;
    Ok(vec![json, md])
}
