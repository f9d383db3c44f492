//! Quality of the audit on the gallery, beside a hand-rolled baseline.
//!
//! For every planted bug: detected or not, and with which diagnosis. For
//! every correct layer: false alarms over N random cases (N = 1,000 by
//! default) in `f64` (generic layers) and in `f32` (all layers), and the
//! forward and backward evaluations spent per audit.
//!
//! The baseline is the check as it is commonly hand-rolled: central
//! differences with a fixed step of 1e-6 on the layer's own forward, in its
//! own precision, against the fixed tolerances `|a − n| <= 1e-5 + 1e-3·|n|`
//! per element, with one random upstream gradient and one backward call.
//!
//! Run: `cargo bench --bench quality` (full), `cargo bench --bench quality
//! -- --quick` or `PLUMBLINE_QUALITY_QUICK=1` (50 cases per layer, for a
//! smoke run). `PLUMBLINE_QUALITY_CASES=n` sets N. Prints a table and
//! writes `target/bench-quality.json` (under `CARGO_TARGET_DIR` if set).

use std::path::PathBuf;

use plumbline::gallery::{judge, registry, Subject};
use plumbline::report::Role;
use plumbline::{Args, Audit, Forward, Real, Tensor};
use rand::{RngExt, SeedableRng};

/// The baseline's step and tolerances.
const STEP: f64 = 1e-6;
const ABS_TOL: f64 = 1e-5;
const REL_TOL: f64 = 1e-3;

/// What one run of a checker said.
struct Run {
    passed: bool,
    forward: usize,
    backward: usize,
}

/// φ = Σ wᵢ·yᵢ in the layer's own precision, as a hand-rolled check would.
fn projected<R: Real>(ys: &[Tensor<R>], w: &[Vec<R>]) -> R {
    let mut s = R::zero();
    for (y, wt) in ys.iter().zip(w) {
        for (&yi, &wi) in y.data().iter().zip(wt) {
            s += yi * wi;
        }
    }
    s
}

/// Fixed-step central differences with fixed tolerances.
fn baseline<R: Real>(layer: &dyn Forward<Real = R>, args: &Args<R>, seed: u64) -> Run {
    let mut rng = rand::rngs::StdRng::seed_from_u64(seed);
    let y0 = layer.forward(args);
    let w: Vec<Vec<R>> = y0
        .iter()
        .map(|y| {
            (0..y.len())
                .map(|_| R::from_f64(rng.random_range(-1.0..1.0)))
                .collect()
        })
        .collect();
    let upstream: Vec<Tensor<R>> = y0
        .iter()
        .zip(&w)
        .map(|(y, wt)| {
            let mut it = wt.iter().copied();
            Tensor::from_fn(y.shape().to_vec(), |_| it.next().unwrap_or_else(R::zero))
        })
        .collect();
    let grads = layer.backward(args, &upstream);
    let mut run = Run {
        passed: true,
        forward: 1,
        backward: 1,
    };
    let sig = layer.signature();
    let mut work = args.clone();
    let h = R::from_f64(STEP);
    let two_h = R::from_f64(2.0 * STEP);
    let mut k = 0;
    for (slot_index, (_, role)) in sig.arguments().enumerate() {
        if role == Role::Fixed {
            continue;
        }
        let grad = grads.get(k);
        k += 1;
        let shape = args.all()[slot_index].shape().to_vec();
        let Some(grad) = grad.filter(|g| g.shape() == shape.as_slice()) else {
            run.passed = false;
            continue;
        };
        for j in 0..grad.len() {
            let x0 = work.all()[slot_index].data()[j];
            work.all_mut()[slot_index].data_mut()[j] = x0 + h;
            let plus = projected(&layer.forward(&work), &w);
            work.all_mut()[slot_index].data_mut()[j] = x0 - h;
            let minus = projected(&layer.forward(&work), &w);
            work.all_mut()[slot_index].data_mut()[j] = x0;
            run.forward += 2;
            let n = ((plus - minus) / two_h).as_f64();
            let a = grad.data()[j].as_f64();
            // NaN never passes.
            let agrees = (a - n).abs() <= ABS_TOL + REL_TOL * n.abs();
            if !agrees {
                run.passed = false;
            }
        }
    }
    run
}

fn run_baseline(subject: &Subject, seed: u64) -> Run {
    match subject {
        Subject::F64(l, a) => baseline(l.as_ref(), a, seed),
        Subject::F32(l, a) => baseline(l.as_ref(), a, seed),
    }
}

fn run_plumbline(subject: &Subject, seed: u64) -> Run {
    match subject.audit(&Audit::new().seed(seed)) {
        Ok(r) => Run {
            passed: r.passed(),
            forward: r.forward_evals,
            backward: r.backward_evals,
        },
        Err(e) => panic!("gallery arguments must fit: {e}"),
    }
}

#[derive(Default)]
struct Totals {
    planted: usize,
    detected: usize,
    right_diagnosis: usize,
    cases_f64: usize,
    alarms_f64: usize,
    cases_f32: usize,
    alarms_f32: usize,
    forward: usize,
    backward: usize,
    audits: usize,
}

impl Totals {
    fn json(&self) -> serde_json::Value {
        serde_json::json!({
            "planted": self.planted,
            "detected": self.detected,
            "right_diagnosis": self.right_diagnosis,
            "correct_cases_f64": self.cases_f64,
            "false_alarms_f64": self.alarms_f64,
            "correct_cases_f32": self.cases_f32,
            "false_alarms_f32": self.alarms_f32,
            "forward_evals_per_audit": self.forward_per_audit(),
        })
    }

    fn forward_per_audit(&self) -> f64 {
        let v = self.forward as f64 / self.audits.max(1) as f64;
        (v * 10.0).round() / 10.0
    }

    fn backward_per_audit(&self) -> f64 {
        let v = self.backward as f64 / self.audits.max(1) as f64;
        (v * 10.0).round() / 10.0
    }
}

fn target_dir() -> PathBuf {
    match std::env::var_os("CARGO_TARGET_DIR") {
        Some(d) if !d.is_empty() => PathBuf::from(d),
        _ => PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target"),
    }
}

fn main() {
    let quick = std::env::args().any(|a| a == "--quick")
        || std::env::var("PLUMBLINE_QUALITY_QUICK").is_ok_and(|v| !v.is_empty() && v != "0");
    let n: u64 = std::env::var("PLUMBLINE_QUALITY_CASES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(if quick { 50 } else { 1000 });
    let cases = registry();
    let mut ours = Totals::default();
    let mut base = Totals::default();

    println!("plumbline quality bench: {n} random cases per correct layer and precision");
    println!();
    println!("Planted bugs (arguments and audit seed 1)");
    println!(
        "{:<46} {:<22} {:<4} {:<60} {:<4}",
        "layer/bug", "expected", "plb", "plumbline diagnosis (expected tensor's row)", "base"
    );
    for case in cases.iter().filter(|c| c.bug.is_some()) {
        let bug = case.bug.unwrap_or_else(|| unreachable!());
        let subject = case.subject(1);
        let report = subject
            .audit(&Audit::new().seed(1))
            .unwrap_or_else(|e| panic!("{}: {e}", case.label()));
        let outcome = judge(&bug.expect, &report);
        // A fresh layer for the baseline: a layer with state between calls
        // must not carry the audit's calls into the baseline's.
        let b = run_baseline(&case.subject(1), 1);
        ours.planted += 1;
        base.planted += 1;
        ours.detected += usize::from(outcome.detected);
        ours.right_diagnosis += usize::from(outcome.right_diagnosis);
        base.detected += usize::from(!b.passed);
        let mark = |d: bool| if d { "yes" } else { "NO" };
        let expected = format!("{}: {:?}", bug.expect.tensor, bug.expect.kind);
        let said = if outcome.right_diagnosis {
            outcome.said.clone()
        } else {
            format!("{} [unexpected]", outcome.said)
        };
        println!(
            "{:<46} {:<22} {:<4} {:<60} {:<4}",
            case.label(),
            truncate(&expected, 22),
            mark(outcome.detected),
            truncate(&said, 60),
            mark(!b.passed)
        );
    }

    println!();
    println!("Correct layers: false alarms in {n} random cases (arguments and audit seed 0..{n})");
    println!(
        "{:<24} {:<5} {:>7} | {:>9} {:>9} {:>9} | {:>9} {:>9} {:>9}",
        "layer",
        "prec",
        "cases",
        "plb alarm",
        "plb fwd",
        "plb bwd",
        "base alrm",
        "base fwd",
        "base bwd"
    );
    for case in cases.iter().filter(|c| c.bug.is_none()) {
        let (mut a_ours, mut a_base) = (0, 0);
        let (mut f_ours, mut b_ours, mut f_base, mut b_base) = (0, 0, 0, 0);
        for seed in 0..n {
            let subject = case.subject(seed);
            let r = run_plumbline(&subject, seed);
            let b = run_baseline(&case.subject(seed), seed);
            a_ours += usize::from(!r.passed);
            a_base += usize::from(!b.passed);
            f_ours += r.forward;
            b_ours += r.backward;
            f_base += b.forward;
            b_base += b.backward;
        }
        for (t, alarms, f, bw) in [
            (&mut ours, a_ours, f_ours, b_ours),
            (&mut base, a_base, f_base, b_base),
        ] {
            if case.precision == "f64" {
                t.cases_f64 += n as usize;
                t.alarms_f64 += alarms;
            } else {
                t.cases_f32 += n as usize;
                t.alarms_f32 += alarms;
            }
            t.forward += f;
            t.backward += bw;
            t.audits += n as usize;
        }
        let per = |x: usize| x as f64 / n as f64;
        println!(
            "{:<24} {:<5} {:>7} | {:>9} {:>9.1} {:>9.1} | {:>9} {:>9.1} {:>9.1}",
            case.layer,
            case.precision,
            n,
            a_ours,
            per(f_ours),
            per(b_ours),
            a_base,
            per(f_base),
            per(b_base)
        );
    }

    println!();
    println!("Summary (evaluations per audit: mean over the correct-layer audits)");
    println!("{:<26} {:>12} {:>12}", "", "plumbline", "baseline");
    let rows: [(&str, String, String); 10] = [
        (
            "planted bugs",
            ours.planted.to_string(),
            base.planted.to_string(),
        ),
        (
            "detected",
            ours.detected.to_string(),
            base.detected.to_string(),
        ),
        (
            "right diagnosis",
            ours.right_diagnosis.to_string(),
            "n/a (0)".to_string(),
        ),
        (
            "correct cases f64",
            ours.cases_f64.to_string(),
            base.cases_f64.to_string(),
        ),
        (
            "false alarms f64",
            ours.alarms_f64.to_string(),
            base.alarms_f64.to_string(),
        ),
        (
            "correct cases f32",
            ours.cases_f32.to_string(),
            base.cases_f32.to_string(),
        ),
        (
            "false alarms f32",
            ours.alarms_f32.to_string(),
            base.alarms_f32.to_string(),
        ),
        (
            "forward evals / audit",
            format!("{:.1}", ours.forward_per_audit()),
            format!("{:.1}", base.forward_per_audit()),
        ),
        (
            "backward evals / audit",
            format!("{:.1}", ours.backward_per_audit()),
            format!("{:.1}", base.backward_per_audit()),
        ),
        (
            "detection rate",
            percent(ours.detected, ours.planted),
            percent(base.detected, base.planted),
        ),
    ];
    for (k, a, b) in rows {
        println!("{k:<26} {a:>12} {b:>12}");
    }

    let json = serde_json::json!({
        "checkers": {
            "plumbline": ours.json(),
            "baseline": base.json(),
        }
    });
    let dir = target_dir();
    let path = dir.join("bench-quality.json");
    let text = serde_json::to_string_pretty(&json).unwrap_or_else(|e| panic!("JSON: {e}"));
    if let Err(e) = std::fs::create_dir_all(&dir).and_then(|_| std::fs::write(&path, &text)) {
        panic!("cannot write {}: {e}", path.display());
    }
    println!();
    println!("wrote {}", path.display());
    println!("{text}");
}

fn percent(a: usize, b: usize) -> String {
    format!("{:.1} %", 100.0 * a as f64 / b.max(1) as f64)
}

fn truncate(s: &str, n: usize) -> String {
    if s.chars().count() <= n {
        s.to_string()
    } else {
        let t: String = s.chars().take(n - 1).collect();
        format!("{t}…")
    }
}
