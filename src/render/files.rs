//! Report files for CI: a JSON report and a Markdown summary per audit,
//! and an error-against-step picture per row with a step sweep (feature
//! `pictures`).

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
/// With the feature `pictures` (on by default), every row with a
/// [`StepSweep`](crate::report::StepSweep) (failing rows, by default) also
/// gets its error-against-step picture as `<test>--<layer>--<tensor>.svg`
/// (`render::step_picture`), and the Markdown summary links
/// each picture by its file name.
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

/// Writes `<dir>/<stem>.json`, `<dir>/<stem>.md` and (feature `pictures`)
/// `<dir>/<stem>--<tensor>.svg` per row with a step sweep, creating `dir`.
pub(crate) fn write(dir: &Path, stem: &str, report: &Report) -> Result<Vec<PathBuf>, Error> {
    let io = |path: &Path, e: std::io::Error| Error::ReportIo {
        path: path.display().to_string(),
        detail: e.to_string(),
    };
    std::fs::create_dir_all(dir).map_err(|e| io(dir, e))?;
    let json_path = dir.join(format!("{stem}.json"));
    std::fs::write(&json_path, json(report)).map_err(|e| io(&json_path, e))?;
    let mut svgs = Vec::new();
    let mut links = Vec::new();
    for (tensor, file, svg) in pictures(stem, report) {
        let path = dir.join(&file);
        std::fs::write(&path, svg).map_err(|e| io(&path, e))?;
        svgs.push(path);
        links.push((tensor, file));
    }
    let md = dir.join(format!("{stem}.md"));
    std::fs::write(&md, super::markdown_linking(report, &links)).map_err(|e| io(&md, e))?;
    let mut written = vec![json_path, md];
    written.extend(svgs);
    Ok(written)
}

/// (tensor, file name, SVG) of every row with a picture: the file is
/// `<stem>--<tensor>.svg`, with `--<rank>` added when two tensor names
/// read the same once made safe for a file name.
#[cfg(feature = "pictures")]
fn pictures(stem: &str, report: &Report) -> Vec<(String, String, String)> {
    let mut out: Vec<(String, String, String)> = Vec::new();
    for (rank, row) in report.rows.iter().enumerate() {
        let Some(svg) = super::step_picture(row) else {
            continue;
        };
        let mut file = format!("{stem}--{}.svg", sanitize(&row.name));
        if out.iter().any(|(_, f, _)| *f == file) {
            file = format!("{stem}--{}--{}.svg", sanitize(&row.name), rank + 1);
        }
        out.push((row.name.clone(), file, svg));
    }
    out
}

/// Without the feature `pictures`, no pictures.
#[cfg(not(feature = "pictures"))]
fn pictures(_: &str, _: &Report) -> Vec<(String, String, String)> {
    Vec::new()
}
