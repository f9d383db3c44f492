//! The assertion macro (every form), the environment settings and their
//! precedence, and terminal output. Nothing here reads or writes the
//! process environment except through `assert_backward!` itself, whose
//! expectations follow whatever `PLUMBLINE_*` the run was started with.

mod hive;

use approx::assert_abs_diff_eq;
use hive::{hive_args, HiveBug, HiveScore, CORRECT};
use plumbline::env::{Environment, PrintFormat};
use plumbline::render::{terminal_width, write_table, ColorChoice, Style};
use plumbline::{assert_backward, Audit, Error, Report, Scheme};

fn lookup(pairs: &[(&str, &str)]) -> impl Fn(&str) -> Option<String> {
    let pairs: Vec<(String, String)> = pairs
        .iter()
        .map(|(k, v)| (k.to_string(), v.to_string()))
        .collect();
    move |name| {
        pairs
            .iter()
            .find(|(k, _)| k == name)
            .map(|(_, v)| v.clone())
    }
}

fn process_env() -> Environment {
    Environment::from_env().expect("the test run's PLUMBLINE_* variables are valid")
}

// ---- the macro -----------------------------------------------------------

#[test]
fn bare_form_returns_the_report() {
    let report = assert_backward!(CORRECT, &hive_args(3, 4));
    assert!(report.passed());
    assert_eq!(report.layer, "HiveScore");
    assert_eq!(report.rows.len(), 3);
    assert_eq!(
        report.seed,
        process_env().seed.unwrap_or(plumbline::audit::DEFAULT_SEED)
    );
    // Trailing comma accepted.
    let again = assert_backward!(CORRECT, &hive_args(3, 4),);
    assert_eq!(again, report);
}

#[test]
fn key_value_forms_map_onto_the_builder() {
    let env = process_env();
    let args = hive_args(2, 3);
    let r = assert_backward!(CORRECT, &args, seed = 3);
    assert_eq!(r.seed, env.seed.unwrap_or(3));

    let r = assert_backward!(CORRECT, &args, scheme = Scheme::Ridders, margin = 8.0,);
    assert!(r.rows.iter().all(|row| row.scheme == Scheme::Ridders));
    assert_eq!(r.margin(), 8.0 * env.margin_factor.unwrap_or(1.0));

    let r = assert_backward!(CORRECT, &args, max_absolute = 1e-9, max_relative = 1e-7);
    let factor = env.margin_factor.unwrap_or(1.0);
    assert_eq!(
        r.fixed_bounds(),
        Some((Some(1e-9 * factor), Some(1e-7 * factor)))
    );

    let r = assert_backward!(CORRECT, &args, kinks_fail = true, name = "hive score");
    assert!(r.kinks_fail());
    assert_eq!(r.layer, "hive score");

    // The layer may be any expression.
    let layer = HiveScore { bug: HiveBug::None };
    assert_backward!(layer, &args, scheme = Scheme::Central);
}

#[test]
#[should_panic(expected = "disagrees with its forward in tensor: w")]
fn a_wrong_gradient_panics_naming_the_tensor() {
    assert_backward!(
        HiveScore {
            bug: HiveBug::WeightSignFlip
        },
        &hive_args(3, 2)
    );
}

#[test]
#[should_panic(expected = "replay: seed 11 (PLUMBLINE_SEED=11")]
fn a_failure_names_the_replay_variable() {
    assert_backward!(
        HiveScore {
            bug: HiveBug::BiasFromFirstHive
        },
        &hive_args(3, 2),
        seed = 11
    );
}

#[test]
#[should_panic(expected = "assert_backward!: parameter `b` has shape [5]")]
fn misuse_panics_with_the_error_message() {
    let (inputs, mut params) = hive_args(2, 2).into_parts();
    params[1] = plumbline::Tensor::full(vec![5], 0.0);
    assert_backward!(CORRECT, &plumbline::Args::new(inputs, params));
}

#[test]
fn the_failure_message_is_plain_and_says_what_to_change() {
    let caught = std::panic::catch_unwind(|| {
        assert_backward!(
            HiveScore {
                bug: HiveBug::WeightSignFlip
            },
            &hive_args(2, 2),
            margin = 6.0
        )
    });
    let payload = caught.expect_err("a flipped sign must fail");
    let msg = payload
        .downcast_ref::<String>()
        .cloned()
        .unwrap_or_default();
    assert!(msg.contains("sign flipped"), "{msg}");
    assert!(
        msg.contains("#  tensor"),
        "the table is in the message: {msg}"
    );
    assert!(
        msg.contains("set in code, so PLUMBLINE_MARGIN does not change it"),
        "{msg}"
    );
    assert!(msg.contains("PLUMBLINE_MARGIN_FACTOR"), "{msg}");
    assert!(
        !msg.contains('\x1b'),
        "panic messages carry no colour: {msg}"
    );
}

// ---- environment settings ------------------------------------------------

#[test]
fn every_variable_parses() {
    let env = Environment::from_lookup(lookup(&[
        ("PLUMBLINE_SEED", "12345"),
        ("PLUMBLINE_MARGIN", "6"),
        ("PLUMBLINE_MARGIN_FACTOR", "0.5"),
        ("PLUMBLINE_SCHEME", "ridders"),
        ("PLUMBLINE_KINKS_FAIL", "yes"),
        ("PLUMBLINE_REPORT_DIR", "target/audits"),
        ("PLUMBLINE_FORMAT", "markdown"),
        ("PLUMBLINE_COLOR", "never"),
        ("PLUMBLINE_MAX_ELEMENTS", "32"),
        ("PLUMBLINE_MAX_EVALUATIONS", "5000"),
    ]))
    .unwrap();
    assert_eq!(env.seed, Some(12345));
    assert_eq!(env.margin, Some(6.0));
    assert_eq!(env.margin_factor, Some(0.5));
    assert_eq!(env.scheme, Some(Scheme::Ridders));
    assert_eq!(env.kinks_fail, Some(true));
    assert_eq!(env.max_elements, Some(32));
    assert_eq!(env.max_evaluations, Some(5000));
    assert_eq!(env.report_dir, Some("target/audits".into()));
    assert_eq!(env.format, PrintFormat::Markdown);
    assert_eq!(env.color, ColorChoice::Never);
    // Unset and empty are the same: nothing set.
    assert_eq!(
        Environment::from_lookup(lookup(&[("PLUMBLINE_SEED", "")])).unwrap(),
        Environment::default()
    );
}

#[test]
fn invalid_values_name_the_variable() {
    for (var, value) in [
        ("PLUMBLINE_SEED", "-3"),
        ("PLUMBLINE_SEED", "0xZZ"),
        ("PLUMBLINE_MARGIN", "0"),
        ("PLUMBLINE_MARGIN", "NaN"),
        ("PLUMBLINE_MARGIN_FACTOR", "inf"),
        ("PLUMBLINE_SCHEME", "forward"),
        ("PLUMBLINE_KINKS_FAIL", "maybe"),
        ("PLUMBLINE_MAX_ELEMENTS", "0"),
        ("PLUMBLINE_MAX_ELEMENTS", "many"),
        ("PLUMBLINE_FORMAT", "xml"),
        ("PLUMBLINE_COLOR", "sometimes"),
    ] {
        let err = Environment::from_lookup(lookup(&[(var, value)])).unwrap_err();
        match &err {
            Error::Setting {
                setting, value: v, ..
            } => {
                assert_eq!(setting, var);
                assert_eq!(v, value);
            }
            other => panic!("{var}: {other:?}"),
        }
        assert!(err
            .to_string()
            .starts_with(&format!("setting `{var}` = `{value}`")));
    }
}

/// Runs the correct hive layer with the audit the environment and code
/// settings give, so the test reads the settings off the report.
fn run_with(env: &Environment, configure: impl FnOnce(Audit) -> Audit) -> Report {
    env.audit(configure)
        .unwrap()
        .run(&CORRECT, &hive_args(2, 2))
        .unwrap()
}

#[test]
fn code_beats_environment_beats_defaults_except_seed_and_factor() {
    let env = Environment::from_lookup(lookup(&[
        ("PLUMBLINE_MARGIN", "6"),
        ("PLUMBLINE_SCHEME", "central"),
        ("PLUMBLINE_KINKS_FAIL", "1"),
    ]))
    .unwrap();
    // Environment over defaults.
    let r = run_with(&env, |a| a);
    assert_eq!(
        (r.margin(), r.rows[0].scheme, r.kinks_fail()),
        (6.0, Scheme::Central, true)
    );
    assert_eq!(r.seed, plumbline::audit::DEFAULT_SEED);
    // Code over environment.
    let r = run_with(&env, |a| {
        a.margin(9.0)
            .scheme(Scheme::Ridders)
            .kinks_fail(false)
            .seed(4)
    });
    assert_eq!(
        (r.margin(), r.rows[0].scheme, r.kinks_fail(), r.seed),
        (9.0, Scheme::Ridders, false, 4)
    );

    // The replay seed and the factor win over code.
    let env = Environment::from_lookup(lookup(&[
        ("PLUMBLINE_SEED", "0xBEE"),
        ("PLUMBLINE_MARGIN_FACTOR", "2"),
    ]))
    .unwrap();
    let r = run_with(&env, |a| a.seed(4).margin(3.0).max_absolute(1e-6));
    assert_eq!(r.seed, 0xBEE);
    assert_eq!(r.margin(), 6.0);
    assert_eq!(r.fixed_bounds(), Some((Some(2e-6), None)));
}

#[test]
fn a_tighter_factor_changes_the_outcome() {
    // The correct layer passes a fixed absolute bound of 1e-9, but not when
    // every bound is scaled down a trillionfold: the factor reaches the
    // audit.
    let env = Environment::from_lookup(lookup(&[("PLUMBLINE_MARGIN_FACTOR", "1e-12")])).unwrap();
    let r = run_with(&env, |a| a.max_absolute(1e-9));
    let (abs, _) = r.fixed_bounds().unwrap();
    assert_abs_diff_eq!(abs.unwrap(), 1e-21, epsilon = 1e-35);
    let loose = Audit::new()
        .max_absolute(1e-9)
        .run(&CORRECT, &hive_args(2, 2))
        .unwrap();
    assert!(loose.passed(), "{loose}");
    // Complex-step references agree to ~1e-16, so 1e-21 is beyond reach
    // for at least one element.
    assert!(!r.passed(), "{r}");
}

// ---- terminal ------------------------------------------------------------

#[test]
fn colour_decision_follows_the_conventions() {
    let auto = ColorChoice::Auto;
    assert!(auto.enabled(true, lookup(&[("TERM", "xterm-256color")])));
    assert!(!auto.enabled(false, lookup(&[("TERM", "xterm-256color")])));
    assert!(!auto.enabled(true, lookup(&[("NO_COLOR", "1")])));
    // An empty NO_COLOR does not count.
    assert!(auto.enabled(true, lookup(&[("NO_COLOR", "")])));
    assert!(!auto.enabled(true, lookup(&[("TERM", "dumb")])));
    assert!(auto.enabled(false, lookup(&[("CLICOLOR_FORCE", "1")])));
    assert!(!auto.enabled(false, lookup(&[("CLICOLOR_FORCE", "0")])));
    assert!(!auto.enabled(true, lookup(&[("NO_COLOR", "1"), ("CLICOLOR_FORCE", "1")])));
    assert!(ColorChoice::Always.enabled(false, lookup(&[("NO_COLOR", "1")])));
    assert!(!ColorChoice::Never.enabled(true, lookup(&[])));
}

#[test]
fn width_comes_from_columns() {
    assert_eq!(terminal_width(lookup(&[("COLUMNS", "88")])), Some(88));
    assert_eq!(terminal_width(lookup(&[("COLUMNS", "0")])), None);
    assert_eq!(terminal_width(lookup(&[])), None);
}

fn failing_report() -> Report {
    let mut r = Audit::new()
        .seed(7)
        .name("apiary.north_field.hive_health_score")
        .run(
            &HiveScore {
                bug: HiveBug::WeightSignFlip,
            },
            &hive_args(2, 2),
        )
        .unwrap();
    // Long names, as nested modules produce them.
    for row in &mut r.rows {
        row.name = format!("apiary.north_field.hive_score.{}", row.name);
    }
    r
}

fn rendered(report: &Report, style: &Style) -> String {
    let mut out = Vec::new();
    write_table(&mut out, report, style).unwrap();
    String::from_utf8(out).unwrap()
}

// The table's specification, written out here independently of the
// renderer: the columns in order; numbers with 4 significant digits in
// scientific notation (`{:.3e}`), bounds and errors with 2 (`{:.1e}`), and
// 0 printed as `0`; shapes and indices as `[2, 2]`; columns separated by
// two spaces, numbers right-aligned, text left-aligned.

const HEADERS: [&str; 14] = [
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
/// Columns that hold numbers (right-aligned).
const NUMBER_COLUMNS: [usize; 8] = [0, 4, 5, 7, 8, 9, 10, 11];

/// A value as the spec prints it: `{:.3e}`, 0 as `0`.
fn sci3(x: f64) -> String {
    if x == 0.0 {
        "0".to_string()
    } else {
        format!("{x:.3e}")
    }
}

/// A bound or error as the spec prints it: `{:.1e}`, 0 as `0`.
fn sci1(x: f64) -> String {
    if x == 0.0 {
        "0".to_string()
    } else {
        format!("{x:.1e}")
    }
}

fn bracketed(v: &[usize]) -> String {
    let parts: Vec<String> = v.iter().map(usize::to_string).collect();
    format!("[{}]", parts.join(", "))
}

/// The cells of row `rank` (0-based) computed from the report's own row
/// data with the spec's formats.
fn expected_cells(rank: usize, row: &plumbline::Row) -> Vec<String> {
    let w = row.worst.as_ref().expect("every row has a worst element");
    vec![
        (rank + 1).to_string(),
        row.name.clone(),
        row.role.to_string(),
        bracketed(&row.shape),
        row.checked.to_string(),
        row.failing.to_string(),
        bracketed(w.index.as_slice()),
        sci3(w.analytic),
        sci3(w.numeric),
        sci1(w.bound),
        sci1(row.max_abs_error),
        sci1(row.max_rel_error),
        row.verdict.to_string(),
        row.diagnosis
            .as_ref()
            .map(|d| d.to_string())
            .unwrap_or_default(),
    ]
}

/// The cells of a rendered line: runs of two or more spaces separate them.
fn split_cells(line: &str) -> Vec<String> {
    line.split("  ")
        .map(str::trim)
        .filter(|c| !c.is_empty())
        .map(String::from)
        .collect()
}

/// `short` is `full` with its middle cut out and replaced by `…`.
fn is_middle_cut(short: &str, full: &str) -> bool {
    let Some((head, tail)) = short.split_once('…') else {
        return false;
    };
    !head.is_empty()
        && !tail.is_empty()
        && full.starts_with(head)
        && full.ends_with(tail)
        && short.chars().count() < full.chars().count()
}

#[test]
fn a_width_limit_shortens_text_cells_in_the_middle_and_keeps_numbers() {
    let report = failing_report();
    let wide = rendered(&report, &Style::plain());
    let wide_lines: Vec<&str> = wide.lines().collect();
    // Without a limit: the headers exactly, and every cell of every row as
    // the spec formats the report's own data.
    assert_eq!(split_cells(wide_lines[1]), HEADERS, "{wide}");
    for (i, row) in report.rows.iter().enumerate() {
        // (An empty diagnosis leaves no cell.)
        let mut want = expected_cells(i, row);
        want.retain(|c| !c.is_empty());
        assert_eq!(split_cells(wide_lines[2 + i]), want, "{wide}");
    }

    let longest = |s: &str| {
        s.lines()
            .skip(1)
            .take(4)
            .map(|l| l.chars().count())
            .max()
            .unwrap()
    };
    let limit = longest(&wide) - 10;
    let narrow = rendered(
        &report,
        &Style {
            color: false,
            width: Some(limit),
        },
    );
    let lines: Vec<&str> = narrow.lines().collect();
    // Header and rows (not the title and footer lines) fit.
    for line in &lines[1..5] {
        assert!(
            line.chars().count() <= limit,
            "{line:?} is wider than {limit}"
        );
    }
    // The headers that remain are the spec's, in order, whole or cut in the
    // middle.
    let mut rest = HEADERS.iter();
    for cell in split_cells(lines[1]) {
        assert!(
            rest.any(|h| *h == cell || is_middle_cut(&cell, h)),
            "header {cell:?} out of order or unknown:\n{narrow}"
        );
    }
    for (i, row) in report.rows.iter().enumerate() {
        let cells = split_cells(lines[2 + i]);
        let want = expected_cells(i, row);
        // The tensor name is cut in the middle, never at an end.
        assert!(
            is_middle_cut(&cells[1], &row.name),
            "{:?} is not {:?} cut in the middle:\n{narrow}",
            cells[1],
            row.name
        );
        // Numbers are never cut: the worst element's values appear whole.
        for k in [7, 8] {
            assert!(
                cells.contains(&want[k]),
                "{} {:?} missing from {cells:?}",
                HEADERS[k],
                want[k]
            );
        }
        // And any error column still shown holds the spec's figure.
        for k in [9, 10, 11] {
            if split_cells(lines[1]).iter().any(|h| h == HEADERS[k]) {
                assert!(cells.contains(&want[k]), "{} in {cells:?}", HEADERS[k]);
            }
        }
    }
}

#[test]
fn colour_only_when_asked_and_the_rows_line_up() {
    let report = failing_report();
    let plain = rendered(&report, &Style::plain());
    let coloured = rendered(
        &report,
        &Style {
            color: true,
            width: None,
        },
    );
    assert!(!plain.contains('\x1b'));
    assert!(coloured.contains("\x1b[1;31mFAIL"), "{coloured:?}");
    // Header and rows align: the verdict column starts at the same place.
    let lines: Vec<&str> = plain.lines().skip(1).take(4).collect();
    let at = lines[0].find("verdict").unwrap();
    for l in &lines[1..] {
        let cell = &l[at..];
        assert!(
            cell.starts_with("FAIL") || cell.starts_with("ok"),
            "{plain}"
        );
    }
}

#[test]
fn exact_text_at_a_width() {
    let report = failing_report();
    let text = rendered(
        &report,
        &Style {
            color: false,
            width: Some(130),
        },
    );
    // The expected table, built here: the names as the 130-column table
    // shortens them (text), every other cell from the report's own rows
    // with the spec's formats, laid out by the spec (widths = widest cell,
    // numbers right-aligned, text left-aligned, two spaces between columns,
    // no trailing spaces).
    let names = ["apiary.n…score.w", "apiary.n…eadings", "apiary.n…score.b"];
    let mut table: Vec<Vec<String>> = vec![HEADERS.iter().map(|h| h.to_string()).collect()];
    for (i, row) in report.rows.iter().enumerate() {
        let mut cells = expected_cells(i, row);
        cells[1] = names[i].to_string();
        table.push(cells);
    }
    let widths: Vec<usize> = (0..HEADERS.len())
        .map(|k| table.iter().map(|r| r[k].chars().count()).max().unwrap())
        .collect();
    let expected: Vec<String> = table
        .iter()
        .map(|cells| {
            let line: Vec<String> = cells
                .iter()
                .enumerate()
                .map(|(k, c)| {
                    let pad = " ".repeat(widths[k] - c.chars().count());
                    if NUMBER_COLUMNS.contains(&k) {
                        format!("{pad}{c}")
                    } else {
                        format!("{c}{pad}")
                    }
                })
                .collect();
            line.join("  ").trim_end().to_string()
        })
        .collect();
    let got: Vec<&str> = text.lines().skip(1).take(4).collect();
    assert_eq!(got, expected, "{text}");
    assert!(got.iter().all(|l| l.chars().count() <= 130));
    // The rows are the report's, worst first: the failing `w` leads.
    assert_eq!(report.rows[0].name, "apiary.north_field.hive_score.w");
    assert_eq!(report.rows[0].verdict.to_string(), "FAIL");
}

#[test]
fn max_elements_from_the_environment_is_a_default_code_overrides() {
    let env = Environment::from_lookup(lookup(&[("PLUMBLINE_MAX_ELEMENTS", "2")])).unwrap();
    // hive_args(3, 4): `w` has 4 × 4 = 16 elements.
    let args = hive_args(3, 4);
    let run =
        |configure: fn(Audit) -> Audit| env.audit(configure).unwrap().run(&CORRECT, &args).unwrap();
    let r = run(|a| a);
    assert_eq!(r.row("w").unwrap().checked, 2);
    let r = run(|a| a.max_elements(5));
    assert_eq!(r.row("w").unwrap().checked, 5);
}
