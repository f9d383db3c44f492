//! The CI gate's files: with a report directory set, every audit through
//! the macro writes a JSON report (which reads back into the same report)
//! and a Markdown summary; two audits of one layer in one test keep both;
//! a directory that cannot be written is an error naming the path. The one
//! test here that sets process environment variables is alone in this
//! binary, so no other test can race it.

mod hive;

use hive::{hive_args, HiveBug, HiveScore, CORRECT};
use plumbline::env::Environment;
use plumbline::{assert_backward, Error, Report};

fn fresh_dir(tag: &str) -> std::path::PathBuf {
    let dir = std::env::temp_dir().join(format!("plumbline-{tag}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    dir
}

fn without_elements(mut r: Report) -> Report {
    for row in &mut r.rows {
        row.elements.clear();
    }
    r
}

fn panic_text(p: Box<dyn std::any::Any + Send>) -> String {
    p.downcast_ref::<String>().cloned().unwrap_or_default()
}

#[test]
fn the_macro_writes_json_and_markdown_to_the_report_dir() {
    let dir = fresh_dir("macro");
    // The only test in this binary: nothing else reads the environment.
    std::env::set_var("PLUMBLINE_REPORT_DIR", &dir);
    let passed = assert_backward!(CORRECT, &hive_args(2, 3), name = "hive score");
    // A second audit of the same layer in the same test: its own files.
    let second = assert_backward!(CORRECT, &hive_args(4, 3), name = "hive score");
    let failing = std::panic::catch_unwind(|| {
        assert_backward!(
            HiveScore {
                bug: HiveBug::BiasFromFirstHive
            },
            &hive_args(3, 2),
            name = "hive score (bias bug)"
        )
    });
    // A report directory below a file cannot be created.
    let blocker = dir.join("a-file");
    std::fs::write(&blocker, "").unwrap();
    std::env::set_var("PLUMBLINE_REPORT_DIR", blocker.join("sub"));
    let unwritable = std::panic::catch_unwind(|| assert_backward!(CORRECT, &hive_args(1, 2)));
    // A report directory that names a file is refused when it is read.
    std::env::set_var("PLUMBLINE_REPORT_DIR", &blocker);
    let names_a_file = Environment::from_env().unwrap_err();
    std::env::remove_var("PLUMBLINE_REPORT_DIR");

    let message = panic_text(failing.expect_err("the bias bug fails"));
    assert!(!message.contains("set PLUMBLINE_REPORT_DIR"), "{message}");

    let stem = "the_macro_writes_json_and_markdown_to_the_report_dir--hive_score";
    let read = |name: &str| std::fs::read_to_string(dir.join(name)).unwrap();
    let back: Report = serde_json::from_str(&read(&format!("{stem}.json"))).unwrap();
    assert_eq!(back, without_elements(passed.into_report()));
    let back2: Report = serde_json::from_str(&read(&format!("{stem}--2.json"))).unwrap();
    assert_eq!(back2, without_elements(second.into_report()));
    // hive_args(4, 3): readings 4 × 3, w 2 × 3 (two scores), b 2.
    assert_eq!(
        back2.rows.iter().map(|r| r.total).sum::<usize>(),
        4 * 3 + 2 * 3 + 2
    );

    let md = read(&format!("{stem}.md"));
    assert!(
        md.starts_with("### ✅ `hive score`: all 3 tensors agree"),
        "{md}"
    );

    let bug = format!("{stem}__bias_bug_");
    let back: Report = serde_json::from_str(&read(&format!("{bug}.json"))).unwrap();
    assert!(!back.passed());
    assert_eq!(back.rows[0].name, "b");
    let md = read(&format!("{bug}.md"));
    assert!(
        md.starts_with("### ❌ `hive score (bias bug)`: 1 of 3 tensors disagree"),
        "{md}"
    );
    assert!(md.contains("| 1 | b | param | [2] |"), "{md}");
    assert!(md.contains("| FAIL |"), "{md}");
    // The failing row's error-against-step picture lies beside them, and
    // the summary links it; passing audits have none.
    let svg = format!("{bug}--b.svg");
    assert!(read(&svg).starts_with("<svg"));
    assert!(md.contains(&format!("[{svg}]({svg})")), "{md}");
    assert!(!dir.join(format!("{stem}--b.svg")).exists());

    let message = panic_text(unwritable.expect_err("an unwritable directory panics"));
    assert!(
        message.starts_with("assert_backward!: could not write report")
            && message.contains("a-file"),
        "{message}"
    );
    match names_a_file {
        Error::Setting { setting, .. } => assert_eq!(setting, "PLUMBLINE_REPORT_DIR"),
        other => panic!("{other:?}"),
    }
    let _ = std::fs::remove_dir_all(&dir);
}
