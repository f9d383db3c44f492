//! Holdout measurement of false alarms: 21 correct layers with hand-derived
//! backward passes that the checker was never tuned on, audited at random
//! points in four modes (`f64`/`f32` layers, each through the generic
//! forward with complex-step references and through the plain path with
//! real differences in the layer's own precision, `own_precision`). Each
//! layer also carries one planted bug, to show the harness can fail.
//!
//! Before the audits, every backward formula is checked independently of
//! the checker: at smooth random points, in `f64`, against central
//! differences of the forward extrapolated twice (Richardson, "The
//! approximate arithmetical solution by finite differences of physical
//! problems involving differential equations", 1911). The same check is
//! repeated at the point of every false alarm.
//!
//! Run: `cargo bench --bench holdout` (2,000 random points per layer and
//! mode), `cargo bench --bench holdout -- --quick` (10 points; a smoke run).
//! `HOLDOUT_POINTS=n` and `HOLDOUT_BUG_POINTS=n` override the counts.
//! Prints a table per layer × mode, each false alarm with its report, and
//! writes `target/bench-holdout.json` (under `CARGO_TARGET_DIR` if set).

use std::collections::BTreeMap;
use std::path::PathBuf;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Mutex;
use std::time::Instant;

use plumbline::prelude::*;
use plumbline::report::Role;
use plumbline::{Error, Report};
use rand::{RngExt, SeedableRng};
use serde_json::{json, Value};

/// Declares a holdout layer: a struct generic over its precision `R`, with
/// a switch for its planted bug.
macro_rules! holdout_layer {
    ($(#[$doc:meta])* $name:ident) => {
        $(#[$doc])*
        pub struct $name<R> {
            /// Plant the layer's bug in its backward.
            pub bug: bool,
            _r: PhantomData<fn() -> R>,
        }

        impl<R> $name<R> {
            pub fn new(bug: bool) -> Self {
                $name { bug, _r: PhantomData }
            }
        }
    };
}

#[path = "holdout/act.rs"]
mod act;
#[path = "holdout/common.rs"]
mod common;
#[path = "holdout/loss.rs"]
mod loss;
#[path = "holdout/norm.rs"]
mod norm;
#[path = "holdout/seq.rs"]
mod seq;

use common::Draw;

// ------------------------------------------------------------------ modes

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Mode {
    F64Generic,
    F64Plain,
    F32Generic,
    F32Plain,
}

const MODES: [Mode; 4] = [
    Mode::F64Generic,
    Mode::F64Plain,
    Mode::F32Generic,
    Mode::F32Plain,
];

impl Mode {
    fn name(self) -> &'static str {
        match self {
            Mode::F64Generic => "f64 generic",
            Mode::F64Plain => "f64 plain",
            Mode::F32Generic => "f32 generic",
            Mode::F32Plain => "f32 plain",
        }
    }
    fn key(self) -> &'static str {
        match self {
            Mode::F64Generic => "f64_generic",
            Mode::F64Plain => "f64_plain",
            Mode::F32Generic => "f32_generic",
            Mode::F32Plain => "f32_plain",
        }
    }
    fn plain(self) -> bool {
        matches!(self, Mode::F64Plain | Mode::F32Plain)
    }
    fn single(self) -> bool {
        matches!(self, Mode::F32Generic | Mode::F32Plain)
    }
}

// ------------------------------------------------------------ the layers

type AuditFn = fn(&Args<f64>, Mode, bool, u64) -> Result<Report, Error>;
type CheckFn = fn(&Args<f64>, u64) -> Vec<TensorCheck>;

/// One holdout layer: how to draw its arguments, audit it, and check its
/// backward independently.
struct Spec {
    name: &'static str,
    bug: &'static str,
    draw: fn(&mut Draw) -> Args<f64>,
    audit: AuditFn,
    check: CheckFn,
}

macro_rules! spec {
    ($module:ident :: $ty:ident, $name:literal, $bug:literal, $draw:ident) => {
        Spec {
            name: $name,
            bug: $bug,
            draw: $module::$draw,
            audit: |a, mode, bug, seed| {
                if mode.single() {
                    audit_as(&$module::$ty::<f32>::new(bug), a, mode, seed, $name)
                } else {
                    audit_as(&$module::$ty::<f64>::new(bug), a, mode, seed, $name)
                }
            },
            check: |a, seed| self_check(&$module::$ty::<f64>::new(false), a, seed),
        }
    };
}

fn specs() -> Vec<Spec> {
    vec![
        spec!(
            norm::RmsNorm,
            "rms_norm",
            "1/d left out of dx's second term",
            draw_rms_norm
        ),
        spec!(
            norm::GroupNorm,
            "group_norm",
            "mean(dx̂) term left out",
            draw_group_norm
        ),
        spec!(
            norm::BatchNormTrain,
            "batch_norm_train",
            "dβ averaged, not summed",
            draw_batch_norm
        ),
        spec!(
            norm::WeightNormDense,
            "weight_norm_dense",
            "projection left out of dv",
            draw_weight_norm
        ),
        spec!(norm::Cosine, "cosine", "‖a‖ for ‖a‖² in da", draw_cosine),
        spec!(
            act::Swish,
            "swish",
            "β left out of dx's second term",
            draw_swish
        ),
        spec!(act::Mish, "mish", "(1 − t²) left out", draw_mish),
        spec!(act::Elu, "elu", "dα uses eˣ for eˣ − 1", draw_elu),
        spec!(
            act::Selu,
            "selu",
            "λ left out on the negative side",
            draw_selu
        ),
        spec!(
            act::HardSwish,
            "hard_swish",
            "middle slope (x + 3)/6",
            draw_hard_swish
        ),
        spec!(
            act::SoftplusThreshold,
            "softplus_threshold",
            "−softplus/β left out of dβ",
            draw_softplus_threshold
        ),
        spec!(
            act::LogCosh,
            "log_cosh",
            "−u·tanh(u) left out of dc",
            draw_log_cosh
        ),
        spec!(
            act::Clip,
            "clip",
            "hi collects the elements below lo",
            draw_clip
        ),
        spec!(
            loss::SmoothedNll,
            "smoothed_nll",
            "1/B left out of dz",
            draw_smoothed_nll
        ),
        spec!(loss::Huber, "huber", "dtarget not negated", draw_huber),
        spec!(
            loss::Focal,
            "focal",
            "modulating factor held constant in dz",
            draw_focal
        ),
        spec!(seq::Glu, "glu", "factor a left out of db", draw_glu),
        spec!(seq::Rope, "rope", "dx rotated forwards", draw_rope),
        spec!(
            seq::DepthwiseConv,
            "depthwise_conv_s2",
            "stride forgotten in dw",
            draw_depthwise_conv
        ),
        spec!(
            seq::MaskedMean,
            "masked_mean",
            "divided by length, not count",
            draw_masked_mean
        ),
        spec!(
            seq::MaxPoolOverlap,
            "max_pool_overlap",
            "second window overwrites",
            draw_max_pool
        ),
    ]
}

fn audit_as<L: GenericForward>(
    layer: &L,
    a: &Args<f64>,
    mode: Mode,
    seed: u64,
    name: &str,
) -> Result<Report, Error> {
    let args = a.map(<L::Real as Real>::from_f64);
    Audit::new()
        .seed(seed)
        .own_precision(mode.plain())
        .name(name)
        .run(layer, &args)
}

// ------------------------------------------------- the independent check

/// The independent check of one tensor's backward: per element, the
/// analytic value, the extrapolated difference, and the tolerance.
struct TensorCheck {
    name: String,
    elements: Vec<(f64, f64, f64)>,
}

impl TensorCheck {
    /// The element furthest beyond its tolerance: (flat index, ratio).
    fn worst(&self) -> Option<(usize, f64)> {
        self.elements
            .iter()
            .enumerate()
            .map(|(i, &(a, n, tol))| (i, (a - n).abs() / tol))
            .fold(None, |best, (i, r)| match best {
                Some((_, rb)) if rb >= r || r.is_nan() => best,
                _ => Some((i, r)),
            })
    }
}

/// Checks the backward of `layer` at `args` against central differences of
/// its f64 forward, extrapolated twice (steps h, h/2, h/4 with
/// h = 1e-4, 1e-3 and 1e-2 times max(|x|, 1e-3); the estimate closest to
/// the backward is kept), for a random upstream gradient drawn from
/// `seed`. An element agrees when |analytic − estimate| is within
/// 1e-6 relative plus the rounding of the differences: 1e-13·Σ|wᵢyᵢ|/h,
/// plus 16/h times the jitter of φ measured under 8 shifts of 1e-9 relative
/// (a forward that cancels, such as log-cosh near 0, loses digits there).
fn self_check<L: GenericForward<Real = f64>>(
    layer: &L,
    args: &Args<f64>,
    seed: u64,
) -> Vec<TensorCheck> {
    let mut rng = rand::rngs::StdRng::seed_from_u64(seed ^ 0x0bad_cafe);
    let y = layer.forward_generic(args);
    let w: Vec<Tensor<f64>> = y
        .iter()
        .map(|t| t.map(|_| rng.random_range(-1.0..1.0)))
        .collect();
    let grads = layer.backward(args, &w);
    let phi_terms = |a: &Args<f64>| -> (f64, f64) {
        let ys = layer.forward_generic(a);
        let mut s = 0.0;
        let mut m = 0.0;
        for (yt, wt) in ys.iter().zip(&w) {
            for (&yv, &wv) in yt.data().iter().zip(wt.data()) {
                s += yv * wv;
                m += (yv * wv).abs();
            }
        }
        (s, m)
    };
    let (_, scale) = phi_terms(args);
    let sig = layer.signature();
    let mut out = Vec::new();
    let mut work = args.clone();
    let mut gi = 0;
    for (slot, (name, role)) in sig.arguments().enumerate() {
        if role == Role::Fixed {
            continue;
        }
        let grad = grads.get(gi).expect("backward returns every gradient");
        gi += 1;
        let mut elements = Vec::new();
        for e in 0..args.all()[slot].len() {
            let x0 = args.all()[slot].data()[e];
            let a = grad.data()[e];
            // The forward's own rounding noise at the point: how φ moves
            // under shifts of 1e-9 relative, beyond the backward slope's share.
            let (phi0, _) = phi_terms(&work);
            let tiny = 1e-9 * x0.abs().max(1e-3);
            let mut noise: f64 = 0.0;
            for j in 1..=8 {
                work.all_mut()[slot].data_mut()[e] = x0 + tiny * f64::from(j);
                let moved = phi_terms(&work).0;
                noise = noise.max((moved - phi0 - a * tiny * f64::from(j)).abs());
            }
            work.all_mut()[slot].data_mut()[e] = x0;
            // Three base steps; the estimate that agrees best is kept (a
            // small step drowns in a cancelling forward's rounding, a large
            // one in a fast-turning forward's truncation).
            let mut best = (f64::INFINITY, 0.0, 0.0);
            for rel in [1e-4, 1e-3, 1e-2] {
                let h = rel * x0.abs().max(1e-3);
                let mut diff = |step: f64| {
                    work.all_mut()[slot].data_mut()[e] = x0 + step;
                    let up = phi_terms(&work).0;
                    work.all_mut()[slot].data_mut()[e] = x0 - step;
                    let down = phi_terms(&work).0;
                    work.all_mut()[slot].data_mut()[e] = x0;
                    (up - down) / (2.0 * step)
                };
                let (d1, d2, d4) = (diff(h), diff(h / 2.0), diff(h / 4.0));
                let r1 = (4.0 * d2 - d1) / 3.0;
                let r2 = (4.0 * d4 - d2) / 3.0;
                let est = (16.0 * r2 - r1) / 15.0;
                let tol =
                    1e-6 * a.abs().max(est.abs()) + (1e-13 * scale + 16.0 * noise) / h + 1e-300;
                let ratio = (a - est).abs() / tol;
                if ratio < best.0 || (best.0 == f64::INFINITY && ratio == f64::INFINITY) {
                    best = (ratio, est, tol);
                }
            }
            elements.push((a, best.1, best.2));
        }
        out.push(TensorCheck {
            name: name.to_string(),
            elements,
        });
    }
    out
}

// ------------------------------------------------------------ the runs

/// A failing row of a correct layer's audit, with the independent check
/// at the same element.
struct AlarmRow {
    tensor: String,
    verdict: String,
    diagnosis: String,
    index: String,
    analytic: f64,
    numeric: f64,
    bound: f64,
    kinks: usize,
    /// (backward in f64, extrapolated difference, tolerance) at that element.
    check: Option<(f64, f64, f64)>,
}

struct Alarm {
    layer: &'static str,
    mode: Mode,
    seed: u64,
    report: String,
    rows: Vec<AlarmRow>,
}

/// One (layer, mode) work item's outcome: the tally and the reports of
/// its false alarms with their seeds.
type ItemResult = (usize, Mode, Tally, Vec<(u64, Report)>);

#[derive(Default)]
struct Tally {
    audits: usize,
    alarms: usize,
    errors: Vec<String>,
    with_kinks: usize,
    forwards: usize,
    bug_trials: usize,
    bug_detected: usize,
    /// Planted-bug trials on smooth draws, and how many were detected.
    bug_smooth_trials: usize,
    bug_smooth_detected: usize,
    /// Seeds of the planted-bug audits that passed.
    missed: Vec<u64>,
    diagnoses: BTreeMap<String, usize>,
    seconds: f64,
}

fn draw_seed(layer: usize, i: usize, planted: bool) -> u64 {
    (layer as u64 + 1) * 1_000_000 + if planted { 500_000 } else { 0 } + i as u64
}

/// Half the planted-bug draws (even seeds) are smooth: no exact kink
/// points or ties planted. Correct-layer draws never are.
fn smooth_seed(seed: u64) -> bool {
    (500_000..900_000).contains(&(seed % 1_000_000)) && seed.is_multiple_of(2)
}

fn run_item(
    spec: &Spec,
    li: usize,
    mode: Mode,
    points: usize,
    bug_points: usize,
) -> (Tally, Vec<(u64, Report)>) {
    let start = Instant::now();
    let mut t = Tally::default();
    let mut alarms = Vec::new();
    for i in 0..points {
        let seed = draw_seed(li, i, false);
        let args = (spec.draw)(&mut Draw::new(seed, false));
        match (spec.audit)(&args, mode, false, seed) {
            Ok(r) => {
                t.audits += 1;
                t.forwards += r.forward_evals;
                if r.rows.iter().any(|row| row.kinks > 0) {
                    t.with_kinks += 1;
                }
                if !r.passed() {
                    t.alarms += 1;
                    alarms.push((seed, r));
                }
            }
            Err(e) => t.errors.push(format!("seed {seed}: {e}")),
        }
    }
    for i in 0..bug_points {
        let seed = draw_seed(li, i, true);
        let smooth = smooth_seed(seed);
        let args = (spec.draw)(&mut Draw::new(seed, smooth));
        match (spec.audit)(&args, mode, true, seed) {
            Ok(r) => {
                t.bug_trials += 1;
                t.bug_smooth_trials += usize::from(smooth);
                t.bug_smooth_detected += usize::from(smooth && !r.passed());
                if r.passed() {
                    t.missed.push(seed);
                    if std::env::var_os("HOLDOUT_SHOW_MISSED").is_some() {
                        println!(
                            "planted bug of {} not detected, mode {}, seed {seed}\n{r}",
                            spec.name,
                            mode.name()
                        );
                    }
                } else {
                    t.bug_detected += 1;
                    for row in r.failures() {
                        let d = row
                            .diagnosis
                            .as_ref()
                            .map_or("-".to_string(), |d| d.to_string());
                        // Keep the words, not the numbers that vary per draw.
                        let short: String = d.split([':', '(']).next().unwrap_or("").trim().into();
                        *t.diagnoses
                            .entry(format!("{}: {short}", row.name))
                            .or_insert(0) += 1;
                    }
                }
            }
            Err(e) => t.errors.push(format!("planted, seed {seed}: {e}")),
        }
    }
    t.seconds = start.elapsed().as_secs_f64();
    (t, alarms)
}

fn alarm_rows(spec: &Spec, seed: u64, report: &Report) -> Vec<AlarmRow> {
    // The independent check at the alarm's point, in f64 (an f32 layer's
    // point converted exactly).
    let args = (spec.draw)(&mut Draw::new(seed, false));
    let args = if report.precision() == "f32" {
        args.map(|v| v as f32 as f64)
    } else {
        args
    };
    let checks = (spec.check)(&args, seed);
    report
        .failures()
        .map(|row| {
            let (index, analytic, numeric, bound) = row
                .worst
                .as_ref()
                .map_or((String::from("-"), f64::NAN, f64::NAN, f64::NAN), |w| {
                    (w.index.to_string(), w.analytic, w.numeric, w.bound)
                });
            let check = row.worst.as_ref().and_then(|w| {
                let tc = checks.iter().find(|c| c.name == row.name)?;
                let flat = w
                    .index
                    .as_slice()
                    .iter()
                    .zip(&row.shape)
                    .fold(0, |acc, (&i, &n)| acc * n + i);
                tc.elements.get(flat).copied()
            });
            AlarmRow {
                tensor: row.name.clone(),
                verdict: row.verdict.to_string(),
                diagnosis: row
                    .diagnosis
                    .as_ref()
                    .map_or("-".to_string(), |d| d.to_string()),
                index,
                analytic,
                numeric,
                bound,
                kinks: row.kinks,
                check,
            }
        })
        .collect()
}

/// `HOLDOUT_REPLAY=layer:seed`: prints the arguments of that draw and the
/// reports of the correct and the planted layer in every mode.
fn replay_one(specs: &[Spec], what: &str) {
    let (name, seed) = what.split_once(':').expect("HOLDOUT_REPLAY=layer:seed");
    let seed: u64 = seed.parse().expect("a numeric seed");
    let spec = specs
        .iter()
        .find(|s| s.name == name)
        .expect("a known layer");
    let args = (spec.draw)(&mut Draw::new(seed, smooth_seed(seed)));
    for (i, t) in args.all().iter().enumerate() {
        println!("argument {i} {:?}: {:?}", t.shape(), t.data());
    }
    for bug in [false, true] {
        for mode in MODES {
            match (spec.audit)(&args, mode, bug, seed) {
                Ok(r) => println!(
                    "{} {}\n{r}",
                    if bug { "planted" } else { "correct" },
                    mode.name()
                ),
                Err(e) => println!("error: {e}"),
            }
        }
    }
}

fn target_dir() -> PathBuf {
    match std::env::var_os("CARGO_TARGET_DIR") {
        Some(d) if !d.is_empty() => PathBuf::from(d),
        _ => PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target"),
    }
}

fn env_count(name: &str, default: usize) -> usize {
    std::env::var(name)
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

fn main() {
    let quick = std::env::args().any(|a| a == "--quick");
    let points = env_count("HOLDOUT_POINTS", if quick { 10 } else { 2000 });
    let bug_points = env_count("HOLDOUT_BUG_POINTS", if quick { 3 } else { 20 });
    let self_points = if quick { 3 } else { 100 };
    let specs = specs();
    let total = Instant::now();
    if let Ok(replay) = std::env::var("HOLDOUT_REPLAY") {
        replay_one(&specs, &replay);
        return;
    }

    // 1. The backward formulas, checked without the checker.
    println!("independent check of the backward formulas ({self_points} smooth points per layer, f64, twice-extrapolated central differences)");
    let mut self_json = Vec::new();
    let mut self_bad = 0;
    for (li, spec) in specs.iter().enumerate() {
        let mut worst = (0.0_f64, String::new());
        let mut elements = 0;
        for i in 0..self_points {
            let seed = draw_seed(li, i, false) + 900_000;
            let args = (spec.draw)(&mut Draw::new(seed, true));
            for tc in (spec.check)(&args, seed) {
                elements += tc.elements.len();
                if let Some((e, r)) = tc.worst() {
                    if r > worst.0 || r.is_nan() {
                        let (a, n, _) = tc.elements[e];
                        worst = (r, format!("seed {seed} `{}` element {e}: backward {a:.6e}, difference {n:.6e}", tc.name));
                    }
                }
            }
        }
        let ok = worst.0 <= 1.0;
        self_bad += usize::from(!ok);
        println!(
            "  {:<20} {:>5} elements  worst |a−n|/tol {:>9.2e}  {}{}",
            spec.name,
            elements,
            worst.0,
            if ok { "ok" } else { "DISAGREES: " },
            if ok { String::new() } else { worst.1.clone() }
        );
        self_json.push(json!({"layer": spec.name, "elements": elements, "worst_ratio": worst.0, "worst": worst.1, "agrees": ok}));
    }
    println!();

    // 2. The audits: every (layer, mode) pair is one work item, spread
    // over two threads.
    let items: Vec<(usize, Mode)> = (0..specs.len())
        .flat_map(|l| MODES.iter().map(move |&m| (l, m)))
        .collect();
    let next = AtomicUsize::new(0);
    let results: Mutex<Vec<ItemResult>> = Mutex::new(Vec::new());
    let threads = std::thread::available_parallelism()
        .map_or(1, |n| n.get())
        .min(2);
    std::thread::scope(|s| {
        for _ in 0..threads {
            s.spawn(|| loop {
                let k = next.fetch_add(1, Ordering::Relaxed);
                let Some(&(li, mode)) = items.get(k) else {
                    break;
                };
                let (t, alarms) = run_item(&specs[li], li, mode, points, bug_points);
                results
                    .lock()
                    .expect("no thread panicked")
                    .push((li, mode, t, alarms));
            });
        }
    });
    let mut results = results.into_inner().expect("no thread panicked");
    results.sort_by_key(|(li, mode, _, _)| (*li, MODES.iter().position(|m| m == mode)));
    let wall = total.elapsed().as_secs_f64();

    // 3. The table.
    println!(
        "holdout audits: {points} random points per layer and mode, {bug_points} with the planted bug ({})",
        if quick { "quick" } else { "full" }
    );
    print!("{:<20}", "layer");
    for m in MODES {
        print!(" | {:^26}", m.name());
    }
    println!();
    print!("{:<20}", "");
    for _ in MODES {
        print!(
            " | {:>8} {:>6} {:>4} {:>5}",
            "alarms", "kinks", "err", "bug"
        );
    }
    println!();
    let mut per_mode: BTreeMap<&str, Tally> = BTreeMap::new();
    let mut layers_json = Vec::new();
    let mut alarms: Vec<Alarm> = Vec::new();
    for (li, spec) in specs.iter().enumerate() {
        print!("{:<20}", spec.name);
        let mut modes_json = serde_json::Map::new();
        for (_, mode, t, found) in results.iter().filter(|r| r.0 == li) {
            print!(
                " | {:>4}/{:<3} {:>6} {:>4} {:>2}/{:<2}",
                t.alarms,
                t.audits,
                t.with_kinks,
                t.errors.len(),
                t.bug_detected,
                t.bug_trials
            );
            let agg = per_mode.entry(mode.key()).or_default();
            agg.audits += t.audits;
            agg.alarms += t.alarms;
            agg.errors.extend(
                t.errors
                    .iter()
                    .map(|e| format!("{} {}: {e}", spec.name, mode.name())),
            );
            agg.with_kinks += t.with_kinks;
            agg.forwards += t.forwards;
            agg.bug_trials += t.bug_trials;
            agg.bug_detected += t.bug_detected;
            agg.bug_smooth_trials += t.bug_smooth_trials;
            agg.bug_smooth_detected += t.bug_smooth_detected;
            agg.missed.extend(t.missed.iter().copied());
            agg.seconds += t.seconds;
            modes_json.insert(
                mode.key().into(),
                json!({
                    "audits": t.audits,
                    "false_alarms": t.alarms,
                    "audits_with_kinks": t.with_kinks,
                    "errors": t.errors,
                    "forwards": t.forwards,
                    "planted_trials": t.bug_trials,
                    "planted_detected": t.bug_detected,
                    "planted_smooth_trials": t.bug_smooth_trials,
                    "planted_smooth_detected": t.bug_smooth_detected,
                    "planted_diagnoses": t.diagnoses,
                    "planted_missed_seeds": t.missed,
                    "seconds": t.seconds,
                }),
            );
            for (seed, report) in found {
                alarms.push(Alarm {
                    layer: spec.name,
                    mode: *mode,
                    seed: *seed,
                    report: report.to_string(),
                    rows: alarm_rows(spec, *seed, report),
                });
            }
        }
        println!();
        layers_json.push(json!({"layer": spec.name, "planted_bug": spec.bug, "modes": Value::Object(modes_json)}));
    }
    println!("(alarms = false alarms / correct audits; kinks = audits with elements at a kink; err = audits that returned an error; bug = planted bug detected / trials)");
    println!();
    println!("per mode:");
    println!(
        "{:<12} {:>8} {:>12} {:>8} {:>7} {:>14} {:>14} {:>10} {:>8}",
        "mode",
        "audits",
        "false alarms",
        "rate",
        "errors",
        "planted found",
        "of them smooth",
        "fwd/audit",
        "cpu s"
    );
    let mut modes_json = serde_json::Map::new();
    for m in MODES {
        let t = &per_mode[m.key()];
        println!(
            "{:<12} {:>8} {:>12} {:>7.3}% {:>7} {:>8}/{:<5} {:>8}/{:<5} {:>10.0} {:>8.1}",
            m.name(),
            t.audits,
            t.alarms,
            100.0 * t.alarms as f64 / t.audits.max(1) as f64,
            t.errors.len(),
            t.bug_detected,
            t.bug_trials,
            t.bug_smooth_detected,
            t.bug_smooth_trials,
            t.forwards as f64 / t.audits.max(1) as f64,
            t.seconds
        );
        modes_json.insert(
            m.key().into(),
            json!({
                "audits": t.audits,
                "false_alarms": t.alarms,
                "errors": t.errors.len(),
                "audits_with_kinks": t.with_kinks,
                "forwards_per_audit": t.forwards as f64 / t.audits.max(1) as f64,
                "planted_trials": t.bug_trials,
                "planted_detected": t.bug_detected,
                "planted_smooth_trials": t.bug_smooth_trials,
                "planted_smooth_detected": t.bug_smooth_detected,
                "cpu_seconds": t.seconds,
            }),
        );
        for e in &t.errors {
            println!("  error: {e}");
        }
    }
    println!();

    // 4. Each false alarm, with the independent check at its element.
    let mut alarms_json = Vec::new();
    if alarms.is_empty() {
        println!("no false alarms");
    }
    for a in &alarms {
        println!(
            "FALSE ALARM: layer {}, mode {}, seed {} (draw and audit seed)",
            a.layer,
            a.mode.name(),
            a.seed
        );
        print!("{}", a.report);
        let mut rows_json = Vec::new();
        for r in &a.rows {
            let check = match r.check {
                Some((an, n, tol)) => format!(
                    "independent check at {}: backward(f64) {an:.6e}, extrapolated difference {n:.6e}, |a−n|/tol {:.2e}",
                    r.index,
                    (an - n).abs() / tol
                ),
                None => "independent check: -".into(),
            };
            println!("  {}: {check}", r.tensor);
            rows_json.push(json!({
                "tensor": r.tensor,
                "verdict": r.verdict,
                "diagnosis": r.diagnosis,
                "index": r.index,
                "analytic": r.analytic,
                "numeric": r.numeric,
                "bound": r.bound,
                "kinks": r.kinks,
                "check": r.check.map(|(an, n, tol)| json!({"backward_f64": an, "difference": n, "ratio": (an - n).abs() / tol})),
            }));
        }
        println!();
        alarms_json.push(json!({"layer": a.layer, "mode": a.mode.key(), "seed": a.seed, "rows": rows_json, "report": a.report}));
    }

    println!(
        "wall time {:.1} s on {threads} threads; independent check: {} of {} layers disagree",
        wall,
        self_bad,
        specs.len()
    );
    let out = json!({
        "quick": quick,
        "points_per_layer_and_mode": points,
        "planted_points_per_layer_and_mode": bug_points,
        "layers_count": specs.len(),
        "wall_seconds": wall,
        "threads": threads,
        "modes": Value::Object(modes_json),
        "layers": layers_json,
        "false_alarms": alarms_json,
        "independent_check": self_json,
    });
    let dir = target_dir();
    std::fs::create_dir_all(&dir).expect("target directory is writable");
    let path = dir.join("bench-holdout.json");
    std::fs::write(&path, serde_json::to_string_pretty(&out).expect("JSON"))
        .expect("bench-holdout.json is writable");
    println!("wrote {}", path.display());
}
