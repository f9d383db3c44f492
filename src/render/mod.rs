//! Renderers: read a [`Report`] and produce text. The aligned terminal
//! table (plain or coloured, optionally fitted to a width), the failure
//! messages of the assertion helpers, Markdown for CI job summaries, the
//! error-against-step picture of a row as SVG (`step_picture`, feature
//! `pictures`), and report files. The report itself never calls in here.
//!
//! `Display` for [`Report`] is the plain table, so `{}` in a panic message
//! shows everything.

use std::fmt::{self, Write as _};

use crate::format::{err, num, shape_string, shorten_middle};
use crate::report::{Check, Report, Row};

pub(crate) mod files;
#[cfg(feature = "pictures")]
mod picture;
mod terminal;

pub use files::{json, write_report};
#[cfg(feature = "pictures")]
pub use picture::{step_picture, PICTURE_MARGIN};
pub use terminal::{stdout_style, terminal_width, write_table, ColorChoice};

impl fmt::Display for Report {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&table(self, &Style::plain()))
    }
}

impl fmt::Display for crate::report::Passed {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        fmt::Display::fmt(&**self, f)
    }
}

/// How to render a table.
#[derive(Clone, Debug, PartialEq, Eq, Default)]
pub struct Style {
    /// Emit ANSI colour codes.
    pub color: bool,
    /// Fit the table to this many columns by shortening the widest text
    /// cells in the middle (numbers are never cut).
    pub width: Option<usize>,
}

impl Style {
    /// No colour, no width limit: the rendering of `Display`.
    pub fn plain() -> Self {
        Style::default()
    }
}

const COLS: usize = 14;
const HEADERS: [&str; COLS] = [
    "#",
    "tensor",
    "role",
    "shape",
    "checked",
    "bad",
    "worst at",
    "analytic",
    "numeric",
    "bound",
    "abs err",
    "rel err",
    "verdict",
    "diagnosis",
];
/// Columns that hold numbers: right-aligned, never shortened.
const NUMERIC: [bool; COLS] = [
    true, false, false, false, true, true, false, true, true, true, true, true, false, false,
];
const VERDICT: usize = 12;
const DIAGNOSIS: usize = 13;

fn cells(rank: usize, r: &Row) -> [String; COLS] {
    let (at, a, n, b) = match &r.worst {
        Some(w) => (
            w.index.to_string(),
            num(w.analytic),
            num(w.numeric),
            err(w.bound),
        ),
        None => ("-".into(), "-".into(), "-".into(), "-".into()),
    };
    [
        (rank + 1).to_string(),
        row_name(r),
        if r.check.is_whole_layer() {
            "-".to_string()
        } else {
            r.role.to_string()
        },
        shape_string(&r.shape),
        checked_cell(r),
        r.failing.to_string(),
        at,
        a,
        n,
        b,
        err(r.max_abs_error),
        err(r.max_rel_error),
        r.verdict.to_string(),
        r.diagnosis
            .as_ref()
            .map(|d| d.to_string())
            .unwrap_or_default(),
    ]
}

/// The tensor cell: the name, after the check for rows of other rules
/// (`tangent y`, `hessian-vector w`); whole-layer checks by their name
/// alone (`adjoint`, `symmetry`).
fn row_name(r: &Row) -> String {
    match r.check {
        Check::Gradient => r.name.clone(),
        c if c.is_whole_layer() => r.name.clone(),
        c => format!("{c} {}", r.name),
    }
}

/// What the report's rows check, for its title: `gradient` for a plain
/// audit, `rule` when the rows check other hand-written rules.
fn audit_word(report: &Report) -> &'static str {
    if report.rows.iter().all(|r| r.check == Check::Gradient) {
        "gradient"
    } else {
        "rule"
    }
}

/// What a report's rows are counted as: `tensors`, or `checks` for rules.
fn unit(report: &Report) -> &'static str {
    if audit_word(report) == "rule" {
        "checks"
    } else {
        "tensors"
    }
}

/// The aligned table: a title line, one row per tensor (worst first), and
/// a footer with the bound rule, the cost and the seed.
pub fn table(report: &Report, style: &Style) -> String {
    let mut rows: Vec<[String; COLS]> = vec![HEADERS.map(String::from)];
    rows.extend(report.rows.iter().enumerate().map(|(i, r)| cells(i, r)));
    let mut widths = [0usize; COLS];
    for row in &rows {
        for (w, c) in widths.iter_mut().zip(row) {
            *w = (*w).max(c.chars().count());
        }
    }
    let shown = match style.width {
        Some(limit) => fit(&mut widths, limit),
        None => [true; COLS],
    };
    let failing = report.failures().count();
    let mut out = String::new();
    let _ = writeln!(
        out,
        "{} audit of {} ({} layer, {} reference in {}, seed {}): {}",
        audit_word(report),
        report.layer,
        report.precision(),
        schemes(report),
        report.reference_precision(),
        report.seed,
        if failing == 0 {
            format!("all {} {} agree", report.rows.len(), unit(report))
        } else {
            format!(
                "{failing} of {} {} DISAGREE",
                report.rows.len(),
                unit(report)
            )
        }
    );
    for (i, row) in rows.iter().enumerate() {
        let mut line = String::new();
        let last = (0..COLS).rev().find(|&k| shown[k]).unwrap_or(0);
        for (k, c) in row.iter().enumerate() {
            if !shown[k] {
                continue;
            }
            let text = if NUMERIC[k] {
                c.clone()
            } else {
                shorten_middle(c, widths[k])
            };
            let pad = widths[k].saturating_sub(text.chars().count());
            if k > 0 {
                line.push_str("  ");
            }
            let cell = if NUMERIC[k] {
                format!("{}{text}", " ".repeat(pad))
            } else if k == last {
                text
            } else {
                format!("{text}{}", " ".repeat(pad))
            };
            line.push_str(&paint(style, i, &report.rows, k, cell));
        }
        out.push_str(line.trim_end());
        out.push('\n');
    }
    let _ = write!(
        out,
        "bound per element: {}; {} forward and {} backward evaluations",
        report.bound_rule(),
        report.forward_evals,
        report.backward_evals
    );
    if report.rule_evals > 0 {
        let _ = write!(out, ", {} of other rules", report.rule_evals);
    }
    out.push('\n');
    for note in &report.notes {
        let _ = writeln!(out, "note: {note}");
    }
    out
}

fn schemes(report: &Report) -> String {
    let mut v: Vec<&str> = report.rows.iter().map(|r| r.scheme.as_str()).collect();
    v.dedup();
    if v.is_empty() {
        "-".into()
    } else {
        v.join("/")
    }
}

/// Columns that may be left out of a narrow table, least useful first:
/// abs err, checked, bound, role, bad.
const DROPPABLE: [usize; 5] = [10, 4, 9, 2, 5];
/// The narrowest a text column is shortened to (tensor, shape, worst at,
/// diagnosis); other text columns are never shortened.
const MIN_TEXT: [(usize, usize); 4] = [(1, 10), (3, 7), (6, 7), (13, 16)];

/// Fits the table into `limit` columns: first shortens text columns in the
/// middle (widest first, down to their minimum), then leaves out the least
/// useful columns, re-widening text columns for the room that frees.
/// Returns which columns are shown.
fn fit(widths: &mut [usize; COLS], limit: usize) -> [bool; COLS] {
    let natural = *widths;
    let mut shown = [true; COLS];
    let total = |w: &[usize; COLS], shown: &[bool; COLS]| {
        let n = shown.iter().filter(|&&s| s).count();
        (0..COLS).filter(|&k| shown[k]).map(|k| w[k]).sum::<usize>() + 2 * n.saturating_sub(1)
    };
    let mut drops = DROPPABLE.iter();
    loop {
        *widths = natural;
        while total(widths, &shown) > limit {
            let Some(&(k, _)) = MIN_TEXT
                .iter()
                .filter(|&&(k, min)| shown[k] && widths[k] > min)
                .max_by_key(|&&(k, min)| widths[k] - min)
            else {
                break;
            };
            widths[k] -= 1;
        }
        if total(widths, &shown) <= limit {
            return shown;
        }
        match drops.next() {
            Some(&k) => shown[k] = false,
            None => return shown,
        }
    }
}

fn paint(style: &Style, line: usize, rows: &[Row], col: usize, cell: String) -> String {
    if !style.color {
        return cell;
    }
    if line == 0 {
        return format!("\x1b[1m{cell}\x1b[0m");
    }
    let pass = rows[line - 1].verdict.is_pass();
    match col {
        VERDICT if pass => format!("\x1b[32m{cell}\x1b[0m"),
        VERDICT | DIAGNOSIS if !pass => format!("\x1b[1;31m{cell}\x1b[0m"),
        1 if !pass => format!("\x1b[1m{cell}\x1b[0m"),
        _ => cell,
    }
}

/// The message [`Report::assert_passed`] panics with: what failed, the
/// whole table, and the code settings that replay or change the outcome.
/// (`Audit::run` reads no environment variable, so none is suggested.)
///
/// ```
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
/// let x = Tensor::new(vec![2], vec![1.0, 2.0])?;
/// let report = Audit::new().run(&Bad, &Args::new(vec![x], vec![]))?;
/// let message = plumbline::render::failure_message(&report);
/// assert!(message.contains("sign flipped") && message.contains(".seed("));
/// assert!(!message.contains("PLUMBLINE_"));
/// # Ok::<(), plumbline::Error>(())
/// ```
pub fn failure_message(report: &Report) -> String {
    let mut out = failure_head(report);
    let _ = writeln!(
        out,
        "replay: seed {} (`.seed({})`)",
        report.seed, report.seed
    );
    let _ = writeln!(
        out,
        "to loosen: `.margin(..)` (now {}); fixed bounds with `.max_absolute(..)` / `.max_relative(..)`",
        report.margin()
    );
    out
}

/// What failed and the whole table: the common head of every failure
/// message.
pub(crate) fn failure_head(report: &Report) -> String {
    let failing: Vec<String> = report.failures().map(row_name).collect();
    let mut out = String::new();
    if audit_word(report) == "rule" {
        let _ = writeln!(
            out,
            "the hand-written rules of `{}` fail {} {}: {}",
            report.layer,
            failing.len(),
            if failing.len() == 1 {
                "check"
            } else {
                "checks"
            },
            failing.join(", ")
        );
    } else {
        let _ = writeln!(
            out,
            "the backward of `{}` disagrees with its forward in {}: {}",
            report.layer,
            if failing.len() == 1 {
                "tensor"
            } else {
                "tensors"
            },
            failing.join(", ")
        );
    }
    out.push('\n');
    out.push_str(&table(report, &Style::plain()));
    out.push('\n');
    out
}

/// A Markdown summary, ready to append to a CI job summary.
pub fn markdown(report: &Report) -> String {
    markdown_linking(report, &[])
}

/// The Markdown summary with a relative link to each row's picture:
/// `pictures` holds (tensor name, file name) pairs.
pub(crate) fn markdown_linking(report: &Report, pictures: &[(String, String)]) -> String {
    let mut out = String::new();
    let failing = report.failures().count();
    let _ = writeln!(
        out,
        "### {} `{}`: {}\n",
        if failing == 0 { "✅" } else { "❌" },
        report.layer,
        if failing == 0 {
            format!("all {} {} agree", report.rows.len(), unit(report))
        } else {
            format!(
                "{failing} of {} {} disagree",
                report.rows.len(),
                unit(report)
            )
        }
    );
    let _ = writeln!(
        out,
        "{} layer, {} reference in {}, seed `{}`\n",
        report.precision(),
        schemes(report),
        report.reference_precision(),
        report.seed
    );
    let _ = writeln!(out, "| {} |", HEADERS.join(" | "));
    let align: Vec<&str> = NUMERIC
        .iter()
        .map(|&n| if n { "---:" } else { "---" })
        .collect();
    let _ = writeln!(out, "| {} |", align.join(" | "));
    for (i, r) in report.rows.iter().enumerate() {
        let c = cells(i, r).map(|s| s.replace('|', "\\|"));
        let _ = writeln!(out, "| {} |", c.join(" | "));
    }
    if !pictures.is_empty() {
        out.push_str(
            "\nError against step (central differences at the worst element, log-log):\n\n",
        );
        for (tensor, file) in pictures {
            let _ = writeln!(out, "- `{tensor}`: [{file}]({file})");
        }
    }
    out
}

/// The `checked` cell: elements compared (of the total when fewer), and the
/// screen's directions when the tensor was screened (`3 dir`, `40/10^6 + 3 dir`).
fn checked_cell(r: &Row) -> String {
    let elements = if r.total > r.checked {
        format!("{}/{}", r.checked, r.total)
    } else {
        r.checked.to_string()
    };
    match &r.screen {
        Some(s) if r.checked == 0 => format!("{} dir", s.directions),
        Some(s) => format!("{elements} + {} dir", s.directions),
        None => elements,
    }
}
