//! The CI gate's files: with a report directory set, every audit through
//! the macro writes a JSON report (which parses back into a `Report`) and
//! a Markdown summary. The one test here that sets a process environment
//! variable is alone in this binary, so no other test can race it.

mod hive;

use hive::{hive_args, HiveBug, HiveScore, CORRECT};
use plumbline::{assert_backward, Audit, Environment, Report};

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

#[test]
fn the_macro_writes_json_and_markdown_to_the_report_dir() {
    let dir = fresh_dir("macro");
    // The only test in this binary: nothing else reads the environment.
    std::env::set_var("PLUMBLINE_REPORT_DIR", &dir);
    let passed = assert_backward!(CORRECT, &hive_args(2, 3), name = "hive score");
    let failing = std::panic::catch_unwind(|| {
        assert_backward!(
            HiveScore {
                bug: HiveBug::BiasFromFirstHive
            },
            &hive_args(3, 2),
            name = "hive score (bias bug)"
        )
    });
    std::env::remove_var("PLUMBLINE_REPORT_DIR");
    let message = failing
        .expect_err("the bias bug fails")
        .downcast_ref::<String>()
        .cloned()
        .unwrap_or_default();
    assert!(!message.contains("set PLUMBLINE_REPORT_DIR"), "{message}");

    let stem = "the_macro_writes_json_and_markdown_to_the_report_dir--hive_score";
    let json = std::fs::read_to_string(dir.join(format!("{stem}.json"))).unwrap();
    let back: Report = serde_json::from_str(&json).unwrap();
    assert_eq!(back, without_elements(passed));

    let md = std::fs::read_to_string(dir.join(format!("{stem}.md"))).unwrap();
    assert!(
        md.starts_with("### ✅ `hive score`: all 3 tensors agree"),
        "{md}"
    );

    let bug = format!("{stem}__bias_bug_");
    let back: Report =
        serde_json::from_str(&std::fs::read_to_string(dir.join(format!("{bug}.json"))).unwrap())
            .unwrap();
    assert!(!back.passed());
    assert_eq!(back.rows[0].name, "b");
    let md = std::fs::read_to_string(dir.join(format!("{bug}.md"))).unwrap();
    assert!(
        md.starts_with("### ❌ `hive score (bias bug)`: 1 of 3 tensors disagree"),
        "{md}"
    );
    assert!(md.contains("| 1 | b | param | [2] |"), "{md}");
    assert!(md.contains("| FAIL |"), "{md}");
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn record_writes_both_files_and_says_where() {
    let dir = fresh_dir("record");
    let env = Environment {
        report_dir: Some(dir.clone()),
        ..Environment::default()
    };
    let report = Audit::new().run(&CORRECT, &hive_args(1, 2)).unwrap();
    let paths = env.record(&report).unwrap();
    assert_eq!(paths.len(), 2);
    assert!(paths[0].extension().is_some_and(|e| e == "json"));
    let back: Report = serde_json::from_str(&std::fs::read_to_string(&paths[0]).unwrap()).unwrap();
    assert_eq!(back, without_elements(report.clone()));
    assert_eq!(
        std::fs::read_to_string(&paths[1]).unwrap(),
        plumbline::markdown(&report)
    );

    // An unwritable directory is an error naming the path.
    let blocker = dir.join("a-file");
    std::fs::write(&blocker, "").unwrap();
    let env = Environment {
        report_dir: Some(blocker.join("sub")),
        ..Environment::default()
    };
    match env.record(&report) {
        Err(plumbline::Error::ReportIo { path, .. }) => assert!(path.contains("a-file"), "{path}"),
        other => panic!("{other:?}"),
    }
    let _ = std::fs::remove_dir_all(&dir);
}
