//! Report files for CI: a JSON report and a Markdown summary per audit.

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::sync::Mutex;

use crate::error::Error;
use crate::report::Report;

/// The report as pretty JSON (per-element detail is not included).
///
/// ```
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
/// let report = Audit::new().run(&Twice, &Args::new(vec![Tensor::new(vec![2], vec![1.0, 2.0])?], vec![]))?;
/// let json = plumbline::render::json(&report);
/// let back: Report = serde_json::from_str(&json).unwrap();
/// assert_eq!(back.rows[0].verdict, report.rows[0].verdict);
/// # Ok::<(), plumbline::Error>(())
/// ```
pub fn json(report: &Report) -> String {
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

/// How many audits each stem has had in this process.
static SEEN: Mutex<Option<HashMap<String, usize>>> = Mutex::new(None);

/// `<test>--<layer>` from the current thread's name (the test's name under
/// `cargo test`) and the layer name; with `unique`, the second and later
/// audits of the same stem in this process get `--2`, `--3`, ... so that
/// two audits of one layer in one test keep both files.
pub(crate) fn stem(report: &Report, unique: bool) -> String {
    let thread = std::thread::current();
    let test = thread.name().unwrap_or("audit");
    let base = format!("{}--{}", sanitize(test), sanitize(&report.layer));
    if !unique {
        return base;
    }
    let mut guard = SEEN.lock().unwrap_or_else(|poisoned| poisoned.into_inner());
    let n = guard
        .get_or_insert_with(HashMap::new)
        .entry(base.clone())
        .and_modify(|n| *n += 1)
        .or_insert(1);
    if *n == 1 {
        base
    } else {
        format!("{base}--{n}")
    }
}

/// Writes the report's JSON and Markdown summary into `dir` (created if
/// missing) as `<test>--<layer>.json` and `.md`, where `<test>` is the
/// current thread's name (the test's name under `cargo test`); a second
/// report of the same layer from the same thread gets `--2`, and so on.
/// Returns the paths written; an I/O failure is an error naming the path.
///
/// ```no_run
/// # fn demo(report: &plumbline::Report) -> Result<(), plumbline::Error> {
/// for path in plumbline::render::write_report(std::path::Path::new("target/audits"), report)? {
///     println!("wrote {}", path.display());
/// }
/// # Ok(()) }
/// ```
pub fn write_report(dir: &Path, report: &Report) -> Result<Vec<PathBuf>, Error> {
    write(dir, &stem(report, true), report)
}

/// Writes `<dir>/<stem>.json` and `<dir>/<stem>.md`, creating `dir`.
pub(crate) fn write(dir: &Path, stem: &str, report: &Report) -> Result<Vec<PathBuf>, Error> {
    let io = |path: &Path, e: std::io::Error| Error::ReportIo {
        path: path.display().to_string(),
        detail: e.to_string(),
    };
    std::fs::create_dir_all(dir).map_err(|e| io(dir, e))?;
    let json_path = dir.join(format!("{stem}.json"));
    std::fs::write(&json_path, json(report)).map_err(|e| io(&json_path, e))?;
    let md = dir.join(format!("{stem}.md"));
    std::fs::write(&md, super::markdown(report)).map_err(|e| io(&md, e))?;
    Ok(vec![json_path, md])
}
