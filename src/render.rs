//! Renderers: read a [`Report`] and produce text. The aligned terminal
//! table (plain or coloured, optionally fitted to a width), the failure
//! message of the assertion helpers, and Markdown for CI job summaries.

use std::fmt::Write as _;

use crate::format::{err, num, shorten_middle};
use crate::report::{Report, Row};
use crate::tensor::shape_string;

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
        r.name.clone(),
        r.role.to_string(),
        shape_string(&r.shape),
        if r.of > r.checked {
            format!("{}/{}", r.checked, r.of)
        } else {
            r.checked.to_string()
        },
        r.disagreeing.to_string(),
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
        "gradient audit of {} ({} layer, {} reference in {}, seed {}): {}",
        report.layer,
        report.precision,
        schemes(report),
        report.reference_precision,
        report.seed,
        if failing == 0 {
            format!("all {} tensors agree", report.rows.len())
        } else {
            format!("{failing} of {} tensors DISAGREE", report.rows.len())
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
    let _ = writeln!(
        out,
        "bound per element: {}; {} forward and {} backward evaluations",
        report.tolerance.describe(),
        report.forward_evals,
        report.backward_evals
    );
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

/// The message the assertion helpers panic with: what failed, the whole
/// table, and how to replay or change the outcome.
pub fn failure_message(report: &Report) -> String {
    let failing: Vec<&str> = report.failures().map(|r| r.name.as_str()).collect();
    let mut out = String::new();
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
    out.push('\n');
    out.push_str(&table(report, &Style::plain()));
    out.push('\n');
    let _ = writeln!(
        out,
        "replay: seed {} (set PLUMBLINE_SEED={} or `.seed({})`)",
        report.seed, report.seed, report.seed
    );
    let _ = writeln!(
        out,
        "to loosen: PLUMBLINE_MARGIN (now {}) or `.margin(..)`; fixed bounds with `.epsilon(..)` / `.max_relative(..)`",
        report.tolerance.margin
    );
    out
}

/// A Markdown summary, ready to append to a CI job summary.
pub fn markdown(report: &Report) -> String {
    let mut out = String::new();
    let failing = report.failures().count();
    let _ = writeln!(
        out,
        "### {} `{}`: {}\n",
        if failing == 0 { "✅" } else { "❌" },
        report.layer,
        if failing == 0 {
            format!("all {} tensors agree", report.rows.len())
        } else {
            format!("{failing} of {} tensors disagree", report.rows.len())
        }
    );
    let _ = writeln!(
        out,
        "{} layer, {} reference in {}, seed `{}`\n",
        report.precision,
        schemes(report),
        report.reference_precision,
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
    out
}
