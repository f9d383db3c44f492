//! Quality of the audit: planted bugs found, right diagnoses, and false
//! alarms, on the gallery (the layers the checker was tuned on) and on
//! random programs it never saw (`gallery::programs`), in four modes:
//! `f64`/`f32` layers, each audited through a generic forward (complex-step
//! references) and through its plain path (real differences in the layer's
//! own precision). Beside plumbline, a fixed-step comparison: central
//! differences at one fixed step with fixed tolerances, swept over eight
//! configurations, and the best of them reported.
//!
//! Run: `cargo bench --bench quality` (full), `cargo bench --bench quality
//! -- --quick` or `PLUMBLINE_QUALITY_QUICK=1` (a smoke run).
//! `PLUMBLINE_QUALITY_CASES=n` sets the correct gallery cases per layer and
//! precision (default 1,000), `PLUMBLINE_QUALITY_PROGRAMS=n` the random
//! programs per mode (default 10,000), `PLUMBLINE_QUALITY_PLAIN_SCHEME`
//! the scheme of the plain modes (default: Ridders' method). Prints tables and writes
//! `target/bench-quality.json` (under `CARGO_TARGET_DIR` if set).

use std::path::PathBuf;

use plumbline::gallery::programs::Program;
use plumbline::gallery::{judge, registry, Subject};
use plumbline::report::Role;
use plumbline::{Args, Audit, Forward, Real, Report, Tensor};
use rand::{RngExt, SeedableRng};
use serde_json::{json, Value};

/// The planted rule errors' relative sizes.
const SIZES: [(f64, &str); 4] = [
    (1e-2, "1e-2"),
    (1e-4, "1e-4"),
    (1e-6, "1e-6"),
    (1e-8, "1e-8"),
];

/// Programs that also get planted bugs: one in this many.
const PLANT_EVERY: u64 = 10;

// ------------------------------------------------------------ fixed step

/// One configuration of the fixed-step comparison.
#[derive(Clone, Copy)]
struct FixedStep {
    /// The step, or `None` for √ε·max(|x|, 1) in the layer's precision.
    step: Option<f64>,
}

impl FixedStep {
    fn label(self) -> String {
        match self.step {
            Some(h) => format!("{h:e}"),
            None => "sqrt(eps)*max(|x|,1)".to_string(),
        }
    }

    /// The tolerance rule, stated once for every configuration: ten times
    /// the textbook error of a central difference at step h in precision
    /// ε, i.e. 10·(ε/h + h²), both as the absolute and as the relative
    /// allowance: |a − n| ≤ tol + tol·|n|.
    fn tolerance(h: f64, eps: f64) -> f64 {
        10.0 * (eps / h + h * h)
    }
}

/// What one checker said about one audit.
struct Run {
    passed: bool,
    forward: usize,
}

fn projected<R: Real>(ys: &[Tensor<R>], w: &[Vec<R>]) -> R {
    let mut s = R::zero();
    for (y, wt) in ys.iter().zip(w) {
        for (&yi, &wi) in y.data().iter().zip(wt) {
            s += yi * wi;
        }
    }
    s
}

/// Fixed-step central differences in the layer's own precision against
/// fixed tolerances, with one random upstream gradient and one backward.
fn fixed_step<R: Real>(
    cfg: FixedStep,
    layer: &dyn Forward<Real = R>,
    args: &Args<R>,
    seed: u64,
) -> Run {
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
    };
    let mut work = args.clone();
    let mut k = 0;
    for (slot, (_, role)) in layer.signature().arguments().enumerate() {
        if role == Role::Fixed {
            continue;
        }
        let grad = grads.get(k);
        k += 1;
        let shape = args.all()[slot].shape().to_vec();
        let Some(grad) = grad.filter(|g| g.shape() == shape.as_slice()) else {
            run.passed = false;
            continue;
        };
        for j in 0..grad.len() {
            let x0 = work.all()[slot].data()[j];
            let h = cfg
                .step
                .unwrap_or(R::EPS.sqrt() * x0.as_f64().abs().max(1.0));
            // The step actually applied, after rounding.
            let plus = R::from_f64(x0.as_f64() + h);
            let minus = R::from_f64(x0.as_f64() - h);
            work.all_mut()[slot].data_mut()[j] = plus;
            let fp = projected(&layer.forward(&work), &w);
            work.all_mut()[slot].data_mut()[j] = minus;
            let fm = projected(&layer.forward(&work), &w);
            work.all_mut()[slot].data_mut()[j] = x0;
            run.forward += 2;
            let width = plus.as_f64() - minus.as_f64();
            let n = (fp - fm).as_f64() / width;
            let a = grad.data()[j].as_f64();
            let tol = FixedStep::tolerance(h, R::EPS);
            // NaN never passes: a comparison with NaN is false.
            let agrees = (a - n).abs() <= tol + tol * n.abs();
            if !agrees {
                run.passed = false;
            }
        }
    }
    run
}

fn run_fixed(cfg: FixedStep, subject: &Subject, seed: u64) -> Run {
    match subject {
        Subject::F64(l, a) => fixed_step(cfg, l.as_ref(), a, seed),
        Subject::F32(l, a) => fixed_step(cfg, l.as_ref(), a, seed),
    }
}

// ------------------------------------------------------------- tallies

#[derive(Default, Clone)]
struct Totals {
    planted: usize,
    detected: usize,
    right_diagnosis: usize,
    specific: usize,
    /// Right, but generic: wrong everywhere, or partial without a pattern.
    generic: usize,
    /// Per family of the expected kind: planted, specific, generic.
    families: std::collections::BTreeMap<&'static str, [usize; 3]>,
    cases_f64: usize,
    alarms_f64: usize,
    cases_f32: usize,
    alarms_f32: usize,
    forward: usize,
    audits: usize,
}

impl Totals {
    fn json(&self) -> Value {
        json!({
            "planted": self.planted,
            "detected": self.detected,
            "right_diagnosis": self.right_diagnosis,
            "right_diagnosis_specific": self.specific,
            "right_diagnosis_generic": self.generic,
            "by_family": self
                .families
                .iter()
                .map(|(f, [p, s, g])| {
                    let counts = json!({"planted": p, "specific": s, "generic": g});
                    (f.to_string(), counts)
                })
                .collect::<serde_json::Map<_, _>>(),
            "correct_cases_f64": self.cases_f64,
            "false_alarms_f64": self.alarms_f64,
            "correct_cases_f32": self.cases_f32,
            "false_alarms_f32": self.alarms_f32,
            "forward_evals_per_audit": round1(self.forward as f64 / self.audits.max(1) as f64),
        })
    }

    fn count_correct(&mut self, precision: &str, passed: bool, forward: usize) {
        if precision == "f64" {
            self.cases_f64 += 1;
            self.alarms_f64 += usize::from(!passed);
        } else {
            self.cases_f32 += 1;
            self.alarms_f32 += usize::from(!passed);
        }
        self.forward += forward;
        self.audits += 1;
    }
}

fn round1(v: f64) -> f64 {
    (v * 10.0).round() / 10.0
}

/// One of the four modes.
#[derive(Default)]
struct Mode {
    correct: usize,
    alarms: usize,
    planted: [usize; 4],
    detected: [usize; 4],
    /// Planted errors left out because the layer's own forward is less
    /// precise than δ/10 at that point.
    unresolvable: [usize; 4],
    forward: usize,
    audits: usize,
    examples: Vec<String>,
}

impl Mode {
    fn record_correct(&mut self, report: &Report, label: impl FnOnce() -> String) {
        self.correct += 1;
        self.forward += report.forward_evals;
        self.audits += 1;
        if !report.passed() {
            self.alarms += 1;
            if self.examples.len() < 5 {
                self.examples.push(label());
            }
        }
    }

    fn json(&self) -> Value {
        let by_size: serde_json::Map<String, Value> = SIZES
            .iter()
            .enumerate()
            .map(|(k, (_, name))| {
                let rate = self.detected[k] as f64 / self.planted[k].max(1) as f64;
                (name.to_string(), json!((rate * 1e4).round() / 1e4))
            })
            .collect();
        json!({
            "correct_cases": self.correct,
            "false_alarms": self.alarms,
            "planted": self.planted.iter().sum::<usize>(),
            "detected": self.detected.iter().sum::<usize>(),
            "detected_by_size": by_size,
            "planted_by_size": SIZES.iter().zip(self.planted).map(|((_, n), p)| (n.to_string(), json!(p))).collect::<serde_json::Map<_, _>>(),
            "left_out_below_layer_precision": SIZES.iter().zip(self.unresolvable).map(|((_, n), p)| (n.to_string(), json!(p))).collect::<serde_json::Map<_, _>>(),
            "forward_evals_per_audit": round1(self.forward as f64 / self.audits.max(1) as f64),
        })
    }
}

const MODES: [&str; 4] = ["f64_generic", "f64_plain", "f32_generic", "f32_plain"];

/// The audit of mode `m` (plain modes go through the layer's own forward).
/// `PLUMBLINE_QUALITY_PLAIN_SCHEME=central` audits the plain modes with
/// central differences instead of the default Ridders' method, to compare
/// the two.
fn audit_for(m: usize, seed: u64) -> Audit {
    let plain = m == 1 || m == 3;
    let audit = Audit::new().seed(seed).own_precision(plain);
    match std::env::var("PLUMBLINE_QUALITY_PLAIN_SCHEME") {
        Ok(name) if plain && !name.is_empty() => audit.scheme(
            name.parse()
                .unwrap_or_else(|e| panic!("PLUMBLINE_QUALITY_PLAIN_SCHEME: {e}")),
        ),
        _ => audit,
    }
}

fn program_mode<R: Real>(mode: &mut Mode, m: usize, n: u64) {
    for seed in 0..n {
        let (program, args) = Program::<R>::random(seed);
        let audit = audit_for(m, seed);
        let report = audit
            .run(&program, &args)
            .unwrap_or_else(|e| panic!("program {seed}: {e}"));
        mode.record_correct(&report, || {
            format!("program {seed}: {}", program.describe())
        });
        if seed % PLANT_EVERY != 0 {
            continue;
        }
        // What the layer's own precision resolves at this point: its
        // forward's measured precision, and never better than its ε.
        let precision = program.forward_precision(&args).max(R::EPS);
        for (k, (delta, _)) in SIZES.iter().enumerate() {
            let Some((buggy, _)) = program.with_effective_bug(&args, *delta) else {
                continue;
            };
            if precision > delta / 10.0 {
                mode.unresolvable[k] += 1;
                continue;
            }
            mode.planted[k] += 1;
            let r = audit
                .run(&buggy, &args)
                .unwrap_or_else(|e| panic!("program {seed}: {e}"));
            mode.detected[k] += usize::from(!r.passed());
        }
    }
}

fn target_dir() -> PathBuf {
    match std::env::var_os("CARGO_TARGET_DIR") {
        Some(d) if !d.is_empty() => PathBuf::from(d),
        _ => PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target"),
    }
}

fn env_count(name: &str, default: u64) -> u64 {
    std::env::var(name)
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

fn sweep_configs() -> Vec<FixedStep> {
    let mut v: Vec<FixedStep> = [1e-2, 1e-3, 1e-4, 1e-5, 1e-6, 1e-7, 1e-8]
        .into_iter()
        .map(|h| FixedStep { step: Some(h) })
        .collect();
    v.push(FixedStep { step: None });
    v
}

fn main() {
    let quick = std::env::args().any(|a| a == "--quick")
        || std::env::var("PLUMBLINE_QUALITY_QUICK").is_ok_and(|v| !v.is_empty() && v != "0");
    let n_cases = env_count("PLUMBLINE_QUALITY_CASES", if quick { 20 } else { 1000 });
    let n_programs = env_count(
        "PLUMBLINE_QUALITY_PROGRAMS",
        if quick { 200 } else { 10_000 },
    );
    let cases = registry();
    let configs = sweep_configs();
    let mut ours = Totals::default();
    let mut sweep: Vec<Totals> = vec![Totals::default(); configs.len()];
    let mut modes: Vec<Mode> = (0..4).map(|_| Mode::default()).collect();

    println!("plumbline quality bench: {n_cases} correct cases per gallery layer and precision, {n_programs} random programs per mode");
    println!();
    println!("Gallery: planted bugs (arguments and audit seed 1)");
    println!(
        "{:<46} {:<26} {:<4} {:<64}",
        "layer/bug", "expected", "plb", "plumbline diagnosis (expected tensor's row)"
    );
    for case in cases.iter().filter(|c| c.bug.is_some()) {
        let bug = case.bug.unwrap_or_else(|| unreachable!());
        let report = case
            .subject(1)
            .audit(&Audit::new().seed(1))
            .unwrap_or_else(|e| panic!("{}: {e}", case.label()));
        let outcome = judge(&bug.expect, &report);
        ours.planted += 1;
        ours.detected += usize::from(outcome.detected);
        ours.right_diagnosis += usize::from(outcome.right_diagnosis);
        let specific = report
            .row(bug.expect.tensor)
            .and_then(|r| r.diagnosis.as_ref())
            .is_some_and(|d| d.is_specific());
        ours.specific += usize::from(outcome.right_diagnosis && specific);
        ours.generic += usize::from(outcome.right_diagnosis && !specific);
        let family = ours.families.entry(bug.expect.kind.family()).or_default();
        family[0] += 1;
        family[1] += usize::from(outcome.right_diagnosis && specific);
        family[2] += usize::from(outcome.right_diagnosis && !specific);
        for (cfg, t) in configs.iter().zip(sweep.iter_mut()) {
            // A fresh layer: state carried between calls must not leak.
            let b = run_fixed(*cfg, &case.subject(1), 1);
            t.planted += 1;
            t.detected += usize::from(!b.passed);
        }
        let expected = format!("{}: {:?}", bug.expect.tensor, bug.expect.kind);
        let said = if outcome.right_diagnosis {
            outcome.said.clone()
        } else {
            format!("{} [unexpected]", outcome.said)
        };
        println!(
            "{:<46} {:<26} {:<4} {:<64}",
            case.label(),
            truncate(&expected, 26),
            if outcome.detected { "yes" } else { "NO" },
            truncate(&said, 64)
        );
    }

    println!();
    println!("Gallery: right diagnoses by family of the planted bug");
    println!(
        "{:<12} {:>8} {:>9} {:>8}",
        "family", "planted", "specific", "generic"
    );
    for (f, [p, sp, g]) in &ours.families {
        println!("{f:<12} {p:>8} {sp:>9} {g:>8}");
    }

    println!();
    println!("Gallery: correct layers, false alarms in {n_cases} cases each");
    println!(
        "{:<24} {:<5} {:>9} {:>9} {:>9}",
        "layer", "prec", "generic", "plain", "fwd/aud"
    );
    for case in cases.iter().filter(|c| c.bug.is_none()) {
        let (mut generic_alarms, mut plain_alarms, mut forward) = (0, 0, 0);
        for seed in 0..n_cases {
            let subject = case.subject(seed);
            let f64_layer = case.precision == "f64";
            // Generic gallery layers run in both of their precision's modes;
            // f32-only layers are plain.
            let plain_mode = if f64_layer { 1 } else { 3 };
            if case.generic {
                let generic_mode = if f64_layer { 0 } else { 2 };
                let r = subject
                    .audit(&audit_for(generic_mode, seed))
                    .unwrap_or_else(|e| panic!("{}: {e}", case.label()));
                modes[generic_mode].record_correct(&r, || {
                    format!("gallery {} {} seed {seed}", case.layer, case.precision)
                });
                ours.count_correct(case.precision, r.passed(), r.forward_evals);
                generic_alarms += usize::from(!r.passed());
                forward += r.forward_evals;
            }
            let r = subject
                .audit(&audit_for(plain_mode, seed))
                .unwrap_or_else(|e| panic!("{}: {e}", case.label()));
            modes[plain_mode].record_correct(&r, || {
                format!(
                    "gallery {} {} plain seed {seed}",
                    case.layer, case.precision
                )
            });
            plain_alarms += usize::from(!r.passed());
            if !case.generic {
                ours.count_correct(case.precision, r.passed(), r.forward_evals);
                forward += r.forward_evals;
            }
            for (cfg, t) in configs.iter().zip(sweep.iter_mut()) {
                let b = run_fixed(*cfg, &case.subject(seed), seed);
                t.count_correct(case.precision, b.passed, b.forward);
            }
        }
        println!(
            "{:<24} {:<5} {:>9} {:>9} {:>9.1}",
            case.layer,
            case.precision,
            if case.generic {
                generic_alarms.to_string()
            } else {
                "-".into()
            },
            plain_alarms,
            forward as f64 / n_cases as f64
        );
    }

    println!();
    println!(
        "Random programs: {n_programs} per mode, planted rule errors on every {PLANT_EVERY}th"
    );
    program_mode::<f64>(&mut modes[0], 0, n_programs);
    program_mode::<f64>(&mut modes[1], 1, n_programs);
    program_mode::<f32>(&mut modes[2], 2, n_programs);
    program_mode::<f32>(&mut modes[3], 3, n_programs);
    println!(
        "{:<12} {:>8} {:>7} | {:>13} {:>13} {:>13} {:>13} | {:>8}",
        "mode", "correct", "alarms", "1e-2", "1e-4", "1e-6", "1e-8", "fwd/aud"
    );
    for (name, m) in MODES.iter().zip(&modes) {
        let cell = |k: usize| format!("{}/{}", m.detected[k], m.planted[k]);
        println!(
            "{:<12} {:>8} {:>7} | {:>13} {:>13} {:>13} {:>13} | {:>8.1}",
            name,
            m.correct,
            m.alarms,
            cell(0),
            cell(1),
            cell(2),
            cell(3),
            m.forward as f64 / m.audits.max(1) as f64
        );
        for e in &m.examples {
            println!("    false alarm: {e}");
        }
    }

    println!();
    println!("Fixed-step comparison: central differences at one step, |a-n| <= t + t|n|, t = 10(eps/h + h^2)");
    println!(
        "{:<22} {:>10} {:>12} {:>12}",
        "step", "detected", "alarms f64", "alarms f32"
    );
    let mut sweep_json = Vec::new();
    for (cfg, t) in configs.iter().zip(&sweep) {
        println!(
            "{:<22} {:>10} {:>12} {:>12}",
            cfg.label(),
            format!("{}/{}", t.detected, t.planted),
            format!("{}/{}", t.alarms_f64, t.cases_f64),
            format!("{}/{}", t.alarms_f32, t.cases_f32)
        );
        sweep_json.push(json!({
            "step": cfg.label(),
            "abs": "10*(eps/h + h^2)",
            "rel": "10*(eps/h + h^2)",
            "detected": t.detected,
            "false_alarms_f64": t.alarms_f64,
            "false_alarms_f32": t.alarms_f32,
        }));
    }
    // The best configuration: fewest false alarms, then most detections.
    let best = (0..configs.len())
        .min_by_key(|&k| {
            (
                sweep[k].alarms_f64 + sweep[k].alarms_f32,
                usize::MAX - sweep[k].detected,
            )
        })
        .unwrap_or(0);
    let mut fixed_json = sweep[best].json();
    if let Value::Object(map) = &mut fixed_json {
        map.insert("best_step".into(), json!(configs[best].label()));
        // A fixed-step comparison names no diagnosis.
        map.insert("right_diagnosis".into(), Value::Null);
        map.insert("right_diagnosis_specific".into(), Value::Null);
        map.insert("right_diagnosis_generic".into(), Value::Null);
        map.remove("by_family");
        map.insert("sweep".into(), Value::Array(sweep_json));
    }
    println!("best: step {}", configs[best].label());

    println!();
    println!("Summary (gallery)              plumbline   best fixed step");
    let b = &sweep[best];
    for (k, a, c) in [
        (
            "planted bugs detected",
            format!("{}/{}", ours.detected, ours.planted),
            format!("{}/{}", b.detected, b.planted),
        ),
        (
            "right diagnosis",
            format!(
                "{} ({} specific, {} generic)",
                ours.right_diagnosis, ours.specific, ours.generic
            ),
            "-".into(),
        ),
        (
            "false alarms f64",
            format!("{}/{}", ours.alarms_f64, ours.cases_f64),
            format!("{}/{}", b.alarms_f64, b.cases_f64),
        ),
        (
            "false alarms f32",
            format!("{}/{}", ours.alarms_f32, ours.cases_f32),
            format!("{}/{}", b.alarms_f32, b.cases_f32),
        ),
    ] {
        println!("{k:<30} {a:>12} {c:>16}");
    }

    let rules_json = rule_checks(n_cases);

    let modes_json: serde_json::Map<String, Value> = MODES
        .iter()
        .zip(&modes)
        .map(|(name, m)| (name.to_string(), m.json()))
        .collect();
    let out = json!({
        "checkers": {
            "plumbline": ours.json(),
            "fixed_step": fixed_json,
        },
        "rules": rules_json,
        "modes": modes_json,
        "settings": {
            "gallery_cases_per_layer": n_cases,
            "programs_per_mode": n_programs,
            "plant_every": PLANT_EVERY,
        },
    });
    let dir = target_dir();
    let path = dir.join("bench-quality.json");
    let text = serde_json::to_string_pretty(&out).unwrap_or_else(|e| panic!("JSON: {e}"));
    if let Err(e) = std::fs::create_dir_all(&dir).and_then(|_| std::fs::write(&path, &text)) {
        panic!("cannot write {}: {e}", path.display());
    }
    println!();
    println!("wrote {}", path.display());
}

/// The checks of other rules (`Audit::run_tangents`,
/// `Audit::run_second_order`) on the gallery's rule cases: every planted
/// bug in a rule (and every backward bug seen through the adjoint
/// identity) with the row it should fail, and false alarms over `n_cases`
/// seeds per correct case.
fn rule_checks(n_cases: u64) -> Value {
    use plumbline::gallery::rule_cases;
    let cases = rule_cases();
    println!();
    println!("Rules: planted bugs in tangent and second-order rules (seed 1)");
    let (mut planted, mut detected, mut right) = (0, 0, 0);
    let mut by_row: std::collections::BTreeMap<String, [usize; 3]> = Default::default();
    for case in cases.iter().filter(|c| c.bug.is_some()) {
        let bug = case.bug.unwrap_or_else(|| unreachable!());
        let report = case
            .audit(1, &Audit::new().seed(1))
            .unwrap_or_else(|e| panic!("{}: {e}", case.label()));
        let outcome = judge(&bug.expect, &report);
        let right_row = report
            .row(bug.expect.tensor)
            .is_some_and(|r| Some(r.check) == case.check);
        let ok = outcome.right_diagnosis && right_row;
        planted += 1;
        detected += usize::from(outcome.detected);
        right += usize::from(ok);
        let key = case.check.map_or("-", |c| c.as_str()).to_string();
        let counts = by_row.entry(key).or_default();
        counts[0] += 1;
        counts[1] += usize::from(outcome.detected);
        counts[2] += usize::from(ok);
        println!(
            "{:<62} {:<4} {}",
            case.label(),
            if outcome.detected { "yes" } else { "NO" },
            truncate(&outcome.said, 70)
        );
    }
    let (mut audits, mut alarms) = (0, 0);
    for case in cases.iter().filter(|c| c.bug.is_none()) {
        for seed in 0..n_cases {
            let report = case
                .audit(seed, &Audit::new().seed(seed))
                .unwrap_or_else(|e| panic!("{}: {e}", case.label()));
            audits += 1;
            alarms += usize::from(!report.passed());
        }
    }
    println!("rules: {detected}/{planted} planted bugs detected, {right} with the right row and diagnosis; {alarms} false alarms in {audits} correct audits");
    json!({
        "planted": planted,
        "detected": detected,
        "right_row_and_diagnosis": right,
        "by_check": by_row
            .iter()
            .map(|(k, [p, d, r])| (k.clone(), json!({"planted": p, "detected": d, "right": r})))
            .collect::<serde_json::Map<_, _>>(),
        "correct_audits": audits,
        "false_alarms": alarms,
    })
}

fn truncate(s: &str, n: usize) -> String {
    if s.chars().count() <= n {
        s.to_string()
    } else {
        let t: String = s.chars().take(n - 1).collect();
        format!("{t}…")
    }
}
