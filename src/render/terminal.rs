//! Terminal output: the colour decision, the terminal width, and writing a
//! table into any writer. Decisions are pure functions of a lookup closure
//! and an "is a terminal" flag, so tests pin them without touching the
//! process environment.
//!
//! The width comes from `COLUMNS` only. Asking the terminal itself would
//! need a platform crate (and its system-call layer) for a case that rarely
//! matters: under `cargo test` and in CI, output is captured or piped, and
//! interactive shells set `COLUMNS` for their children when exported.

use std::fmt;
use std::io::{IsTerminal, Write};

use super::{table, Style};
use crate::report::Report;

/// Whether printed tables are coloured.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum ColorChoice {
    /// Colour on a terminal, unless `NO_COLOR` is set (non-empty) or
    /// `TERM=dumb`; `CLICOLOR_FORCE` (non-empty, not `0`) forces it.
    #[default]
    Auto,
    /// Always colour.
    Always,
    /// Never colour.
    Never,
}

/// Parses `auto`, `always`, `never` (any case).
///
/// ```
/// use plumbline::render::ColorChoice;
/// assert_eq!("Never".parse(), Ok(ColorChoice::Never));
/// assert!("sometimes".parse::<ColorChoice>().is_err());
/// ```
impl std::str::FromStr for ColorChoice {
    type Err = String;
    fn from_str(s: &str) -> Result<ColorChoice, String> {
        match s.trim().to_ascii_lowercase().as_str() {
            "auto" => Ok(ColorChoice::Auto),
            "always" => Ok(ColorChoice::Always),
            "never" => Ok(ColorChoice::Never),
            _ => Err("expected `auto`, `always` or `never`".to_string()),
        }
    }
}

impl ColorChoice {
    /// Decides, given whether the output is a terminal and a lookup of
    /// environment variables.
    ///
    /// `Auto`, in order: `NO_COLOR` non-empty → off; `CLICOLOR_FORCE`
    /// non-empty and not `0` → on; not a terminal → off; `TERM=dumb` → off;
    /// else on.
    ///
    /// ```
    /// use plumbline::render::ColorChoice;
    /// let vars = |pairs: &'static [(&'static str, &'static str)]| {
    ///     move |n: &str| pairs.iter().find(|(k, _)| *k == n).map(|(_, v)| v.to_string())
    /// };
    /// assert!(ColorChoice::Auto.enabled(true, vars(&[("TERM", "xterm")])));
    /// assert!(!ColorChoice::Auto.enabled(true, vars(&[("NO_COLOR", "1")])));
    /// assert!(!ColorChoice::Auto.enabled(false, vars(&[])));
    /// assert!(ColorChoice::Auto.enabled(false, vars(&[("CLICOLOR_FORCE", "1")])));
    /// assert!(!ColorChoice::Auto.enabled(true, vars(&[("TERM", "dumb")])));
    /// assert!(ColorChoice::Always.enabled(false, vars(&[("NO_COLOR", "1")])));
    /// ```
    pub fn enabled(self, is_terminal: bool, lookup: impl Fn(&str) -> Option<String>) -> bool {
        let set = |name: &str| lookup(name).filter(|v| !v.is_empty());
        match self {
            ColorChoice::Always => true,
            ColorChoice::Never => false,
            ColorChoice::Auto => {
                if set("NO_COLOR").is_some() {
                    false
                } else if set("CLICOLOR_FORCE").is_some_and(|v| v != "0") {
                    true
                } else {
                    is_terminal && set("TERM").as_deref() != Some("dumb")
                }
            }
        }
    }
}

impl fmt::Display for ColorChoice {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            ColorChoice::Auto => "auto",
            ColorChoice::Always => "always",
            ColorChoice::Never => "never",
        })
    }
}

/// The terminal width from `COLUMNS` (a positive integer), else `None`
/// (no limit).
///
/// ```
/// assert_eq!(plumbline::render::terminal_width(|_| Some("100".into())), Some(100));
/// assert_eq!(plumbline::render::terminal_width(|_| Some("wide".into())), None);
/// assert_eq!(plumbline::render::terminal_width(|_| None), None);
/// ```
pub fn terminal_width(lookup: impl Fn(&str) -> Option<String>) -> Option<usize> {
    lookup("COLUMNS")
        .and_then(|v| v.trim().parse::<usize>().ok())
        .filter(|&w| w > 0)
}

/// The style for standard output: colour per `choice` and the
/// environment, width from `COLUMNS`.
pub fn stdout_style(choice: ColorChoice) -> Style {
    let env = |name: &str| std::env::var(name).ok();
    Style {
        color: choice.enabled(std::io::stdout().is_terminal(), env),
        width: terminal_width(env),
    }
}

/// Writes the table of `report` into `w` in the given style.
///
/// ```
/// # use plumbline::prelude::*;
/// use plumbline::render::{write_table, Style};
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
/// let x = Tensor::new(vec![2], vec![1.0, 2.0])?;
/// let report = Audit::new().run(&Twice, &Args::new(vec![x], vec![]))?;
/// let mut out = Vec::new();
/// write_table(&mut out, &report, &Style { color: false, width: Some(60) }).unwrap();
/// let text = String::from_utf8(out).unwrap();
/// assert!(text.contains("all 1 tensors agree"));
/// # Ok::<(), plumbline::Error>(())
/// ```
pub fn write_table(w: &mut impl Write, report: &Report, style: &Style) -> std::io::Result<()> {
    w.write_all(table(report, style).as_bytes())
}
