//! One audit, start to finish: check the arguments, call the layer,
//! estimate every checked element, compare, summarise, diagnose.

use std::sync::atomic::{AtomicUsize, Ordering};

use rand::{RngExt, SeedableRng};

use super::{screen, Audit, Coverage, Progress, StepSweeps, SCREEN_ABOVE, SCREEN_DIRECTIONS};
use crate::compare::{self, Compared, Prober};
use crate::diagnosis::summary::{summarize, RowFacts};
use crate::diagnosis::{diagnose, Evidence};
use crate::error::Error;
use crate::format::num;
use crate::layer::{Args, Forward, Gradients};
use crate::report::{Report, Row, Screen, StepSweep, SweepPoint, Verdict, Worst};
use crate::scalar::Real;
use crate::scheme::engine::{guarded, Blueprint, Engine};
use crate::scheme::{complex_step_for, scatter_about_parabola, Estimate, KinkProbe, Scheme};
use crate::signature::{Role, Signature, Slot};
use crate::tensor::{MultiIndex, Tensor};

/// Forward evaluations one element costs, for the budget (typical, not
/// worst case).
fn cost_per_element(scheme: Scheme) -> u64 {
    match scheme {
        Scheme::ComplexStep => 1,
        Scheme::Central => 6,
        Scheme::Ridders => 24,
    }
}

/// Calls the layer, turning a panic (or an op's error an adapter carried
/// out of the call) into an error that names the call.
pub(super) fn call<T>(layer: &str, call: &str, f: impl FnOnce() -> T) -> Result<T, Error> {
    guarded(f).map_err(|fault| fault.into_error(layer, call, String::new()))
}

impl Audit {
    /// Audits `layer` at `args`.
    ///
    /// Errors only on misuse (argument count or shape, malformed signature,
    /// a forward returning the wrong outputs, a backward returning more
    /// gradients than there are differentiable tensors, an invalid setting,
    /// a scheme the layer cannot support, an audit over its budget) and
    /// when the layer panics. A wrong gradient is a failing row of the
    /// report, not an error.
    pub fn run<L: Forward + ?Sized>(
        &self,
        layer: &L,
        args: &Args<L::Real>,
    ) -> Result<Report, Error> {
        self.run_with(layer, args, None)
    }

    /// [`run`](Audit::run) with the elements of each tensor estimated on
    /// [`threads`](Audit::threads) threads (default: every core). The layer
    /// is shared between the threads, so it must be `Sync` (a layer that
    /// keeps a `RefCell` cache is not: use a `Mutex`, or [`run`](Audit::run)).
    /// The report is the same for every number of threads: each element's
    /// estimate comes from the same copies of the arguments, and the
    /// results are put back in order.
    /// [`assert_backward!`](crate::assert_backward) calls this for every
    /// `Sync` layer.
    ///
    /// ```
    /// use plumbline::prelude::*;
    ///
    /// /// Frost index of 500 stations, y = x³.
    /// struct Cube;
    /// impl Layer for Cube {
    ///     type Real = f64;
    ///     fn signature(&self) -> Signature { Signature::new().input("x", "station").output("y", "station") }
    ///     fn backward(&self, a: &Args<f64>, g: &[Tensor<f64>]) -> Gradients<f64> {
    ///         let x = a.input(0);
    ///         Gradients::from(vec![Tensor::from_fn(x.shape().to_vec(), |i| 3.0 * x[i] * x[i] * g[0][i])])
    ///     }
    /// }
    /// impl GenericForward for Cube {
    ///     fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
    ///         vec![a.input(0).map(|x| x * x * x)]
    ///     }
    /// }
    /// let x = Tensor::from_fn(vec![500], |i| i[0] as f64 / 250.0 - 1.0);
    /// let args = Args::new(vec![x], vec![]);
    /// let one = Audit::new().threads(1).run_parallel(&Cube, &args)?;
    /// let two = Audit::new().threads(2).run_parallel(&Cube, &args)?;
    /// assert_eq!(one, two);
    /// one.assert_passed();
    /// # Ok::<(), plumbline::Error>(())
    /// ```
    pub fn run_parallel<L: Forward + Sync + ?Sized>(
        &self,
        layer: &L,
        args: &Args<L::Real>,
    ) -> Result<Report, Error> {
        let threads = self.threads.unwrap_or_else(|| {
            std::thread::available_parallelism().map_or(1, std::num::NonZeroUsize::get)
        });
        let workers = Parallel { layer, threads };
        self.run_with(layer, args, Some(&workers))
    }

    fn run_with<L: Forward + ?Sized>(
        &self,
        layer: &L,
        args: &Args<L::Real>,
        workers: Option<&dyn Workers<L::Real>>,
    ) -> Result<Report, Error> {
        let Start {
            name,
            sig,
            bindings,
        } = self.start(layer, args)?;
        let generic = layer.reference().is_some() && !self.own_precision;
        let scheme = self.choose_scheme(&name, generic)?;

        let y0 = call(&name, "forward", || layer.forward(args))?;
        let y1 = call(&name, "forward (second call)", || layer.forward(args))?;
        // The outputs' named dims join the arguments' for naming factors.
        let bindings = sig.check_outputs(&name, "forward", &bindings, &y0)?;
        sig.check_outputs(&name, "forward (second call)", &bindings, &y1)?;
        let mut evidence = Evidence {
            forward_change: first_difference(&sig, &y0, &y1),
            nonfinite_output: first_nonfinite(&sig, &y0),
            sizes: bindings.named_sizes(),
            tensors: (sig.slots().iter().map(|s| s.name.clone()))
                .zip(args.all().iter().map(|t| t.map(|v| v.as_f64())))
                .collect(),
            ..Evidence::default()
        };

        let upstream = super::rules::upstream_for(&y0, self.seed);
        let g1 = call(&name, "backward", || layer.backward(args, &upstream))?;
        let g2 = call(&name, "backward (second call)", || {
            layer.backward(args, &upstream)
        })?;

        let slots = sig.slots();
        let differentiable: Vec<(usize, &Slot)> = slots
            .iter()
            .copied()
            .enumerate()
            .filter(|(_, s)| s.role != Role::Fixed)
            .collect();
        check_gradient_count(&name, &differentiable, &g1)?;
        let plan: Vec<Vec<usize>> = differentiable
            .iter()
            .map(|&(k, _)| sample(args.all()[k].len(), self.max_elements, self.seed, k))
            .collect();
        let total: usize = plan.iter().map(Vec::len).sum();
        let per_element = cost_per_element(scheme);
        let exhaustive = total as u64 * per_element + 4;
        let screening = match self.coverage {
            Coverage::Elements => false,
            Coverage::Screen => true,
            _ => exhaustive > self.max_evaluations,
        };
        let screened: Vec<bool> = differentiable
            .iter()
            .map(|&(k, _)| screening && args.all()[k].len() > SCREEN_ABOVE)
            .collect();
        let needed = plan
            .iter()
            .zip(&screened)
            .map(|(p, &s)| {
                let estimates = if s {
                    screen::worst_case(p.len(), SCREEN_DIRECTIONS)
                } else {
                    p.len() as u64
                };
                estimates * per_element
            })
            .sum::<u64>()
            + 4;
        if needed > self.max_evaluations {
            return Err(Error::OverBudget {
                layer: name,
                needed,
                budget: self.max_evaluations,
            });
        }

        let slot_names = slots.iter().map(|s| s.name.clone()).collect();
        let mut engine = Engine::new(
            layer,
            &name,
            slot_names,
            args,
            &y0,
            upstream.clone(),
            generic,
        );
        engine.measure_precision()?;
        engine.set_movable(differentiable.iter().map(|&(k, _)| k).collect());
        let mut rows = Vec::with_capacity(differentiable.len());
        let mut notes = Vec::new();
        if screening && self.coverage == Coverage::Auto && screened.contains(&true) {
            notes.push(format!(
                "comparing every element would take about {exhaustive} forward evaluations, over the budget of {}: \
                 tensors of more than {SCREEN_ABOVE} elements were screened along {SCREEN_DIRECTIONS} random directions \
                 (`.coverage(Coverage::Elements)` with a larger `.max_evaluations(..)` compares them all)",
                self.max_evaluations
            ));
        }
        let progress = Tally {
            done: AtomicUsize::new(0),
            evals: AtomicUsize::new(0),
            total,
            callback: self.progress.as_deref(),
        };
        for (d, &(slot, spec)) in differentiable.iter().enumerate() {
            let grad = g1.get(d);
            evidence.backward_change = match (grad, g2.get(d)) {
                (Some(a), Some(b)) => first_tensor_difference(a, b),
                _ => None,
            };
            let args_tensor = &args.all()[slot];
            let grad = grad.map(|g| g.map(|v| v.as_f64()));
            let mut screen_result = None;
            let mut indices = plan[d].clone();
            if screened[d] {
                let inputs: Vec<f64> = args_tensor.data().iter().map(|v| v.as_f64()).collect();
                match grad.as_ref().filter(|g| g.shape() == args_tensor.shape()) {
                    Some(g) => {
                        let target = screen::Target {
                            slot,
                            grad_index: d,
                            grad: g,
                            inputs: &inputs,
                            scheme,
                        };
                        let found = screen::screen(
                            &mut engine,
                            &target,
                            &self.tolerance,
                            L::Real::EPS,
                            self.seed,
                            SCREEN_DIRECTIONS,
                        )?;
                        notes.push(screen::note(&spec.name, &found.screen, args_tensor.len()));
                        indices = found.suspects;
                        screen_result = Some(found.screen);
                    }
                    // No gradient of the tensor's shape: a sample is enough
                    // for the verdict and its diagnosis.
                    None => indices = screen::sample_of(args_tensor.len(), self.seed, slot),
                }
            }
            let mut tensor = TensorCase {
                spec,
                slot,
                grad_index: d,
                args_tensor,
                grad,
                indices: &indices,
                scheme,
                screen: screen_result,
            };
            let estimates =
                self.estimate_tensor(&mut engine, &mut tensor, &mut notes, &progress, workers)?;
            rows.push(self.row(
                tensor,
                estimates,
                &mut engine,
                &evidence,
                L::Real::EPS,
                &mut notes,
            )?);
        }
        sort_rows(&mut rows);
        let forward_evals = engine.evals + 2;
        let backward_evals = engine.backward_evals + 2;
        let reference_precision = engine.precision_name().to_string();
        drop(engine);
        Ok(Report {
            layer: name,
            seed: self.seed,
            rows,
            notes,
            forward_evals,
            backward_evals,
            rule_evals: 0,
            precision: L::Real::NAME.to_string(),
            reference_precision,
            tolerance: self.tolerance.clone(),
            kinks_fail: self.kinks_fail,
        })
    }

    /// Settings, name, signature and argument binding: the start every
    /// audit and check shares.
    pub(super) fn start<L: Forward + ?Sized>(
        &self,
        layer: &L,
        args: &Args<L::Real>,
    ) -> Result<Start, Error> {
        self.validate()?;
        let name = (self.name.clone())
            .or_else(|| layer.shown_name())
            .unwrap_or_else(short_type_name::<L>);
        let sig = call(&name, "signature", || layer.signature())?;
        let bindings = sig.bind(&name, args)?;
        Ok(Start {
            name,
            sig,
            bindings,
        })
    }

    pub(super) fn choose_scheme(&self, name: &str, generic: bool) -> Result<Scheme, Error> {
        match (self.scheme, generic) {
            (Some(Scheme::ComplexStep), false) => Err(Error::Setting {
                setting: "scheme".into(),
                value: "complex-step".into(),
                detail: if self.own_precision {
                    format!("`own_precision` audits layer `{name}` through its plain forward, which has no complex step")
                } else {
                    format!(
                        "layer `{name}` has no generic forward; implement `GenericForward` for it, or use `ridders` or `central`"
                    )
                },
            }),
            (Some(s), _) => Ok(s),
            (None, true) => Ok(Scheme::ComplexStep),
            (None, false) => Ok(Scheme::Ridders),
        }
    }

    /// Estimates for the checked elements of one tensor, and the scheme
    /// that produced them.
    ///
    /// With the complex step, a few seeded elements are cross-checked with
    /// real differences: a generic forward that leaves the `Scalar` path
    /// for part of the function (`to_f64()`, `as`, a real-only library
    /// call) drops that part's derivative silently. When real differences
    /// disagree, the tensor is checked with Ridders' method in `f64`
    /// instead, and a note says so.
    fn estimate_tensor<L: Forward + ?Sized>(
        &self,
        engine: &mut Engine<'_, L>,
        t: &mut TensorCase<'_, L::Real>,
        notes: &mut Vec<String>,
        progress: &Tally<'_>,
        workers: Option<&dyn Workers<L::Real>>,
    ) -> Result<Vec<Estimate>, Error> {
        let estimates =
            match workers.filter(|w| w.threads() > 1 && t.indices.len() >= PARALLEL_ABOVE) {
                Some(w) => {
                    let blueprint = engine.blueprint(t.scheme != Scheme::ComplexStep)?;
                    let job = Job {
                        blueprint: &blueprint,
                        layer_name: engine.layer_name(),
                        slot: t.slot,
                        tensor: &t.spec.name,
                        scheme: t.scheme,
                        progress,
                    };
                    let (estimates, evals) = w.estimate(&job, t.indices)?;
                    engine.evals += evals;
                    estimates
                }
                None => {
                    let mut estimates = Vec::with_capacity(t.indices.len());
                    for &j in t.indices {
                        let before = engine.evals;
                        estimates.push(estimate_one(engine, t.slot, j, t.scheme)?);
                        progress.step(&t.spec.name, engine.evals - before);
                    }
                    estimates
                }
            };
        if t.scheme != Scheme::ComplexStep {
            return Ok(estimates);
        }
        if let Some(m) = self.off_the_scalar_path(engine, t.slot, t.indices, &estimates)? {
            notes.push(format!(
                "`{}`: the complex step gave {} at {} where real differences give {}: the generic forward \
                 leaves the Scalar path (to_f64, `as`, a real-only function); Ridders' method in f64 was used instead",
                t.spec.name,
                num(m.complex),
                t.args_tensor.index_of(m.index),
                num(m.real)
            ));
            t.scheme = Scheme::Ridders;
            return t
                .indices
                .iter()
                .map(|&k| engine.real_estimate(t.slot, k, Scheme::Ridders))
                .collect();
        }
        Ok(estimates)
    }

    /// Cross-checks two seeded elements of a complex-step tensor (not at a
    /// kink) against real differences in `f64`. A forward that leaves the
    /// Scalar path drops a term everywhere, so both elements must disagree,
    /// each by more than 10⁻³ of its size, confirmed three ways: a cheap
    /// small-step check, Ridders' method with its error bar, and a central
    /// difference a few thousand ulps wide that sides with Ridders. A
    /// forward that is flat at the ulp scale (a sum that rounds a tiny term
    /// away, a saturated erf), a near tie or a staircase gives real
    /// differences that disagree at some scales and for some elements only,
    /// while the complex step rightly follows the computed forward.
    /// Returns the first of the two mismatches.
    fn off_the_scalar_path<L: Forward + ?Sized>(
        &self,
        engine: &mut Engine<'_, L>,
        slot: usize,
        indices: &[usize],
        estimates: &[Estimate],
    ) -> Result<Option<Mismatch>, Error> {
        let picks = sample(indices.len(), Some(4), self.seed ^ 0x5CA1_AB1E, slot);
        let mut found: Vec<Mismatch> = Vec::new();
        let mut compared = 0;
        for k in picks {
            let (j, cs) = (indices[k], &estimates[k]);
            if !cs.value.is_finite() || !engine.value(slot, j).is_finite() || compared == 2 {
                continue;
            }
            let Some((check, rounding)) = engine.quick_check(slot, j)? else {
                continue;
            };
            let size = cs.scale.max(check.abs()).max(cs.value.abs());
            let agrees =
                (cs.value - check).abs() <= 4.0 * cs.error + 100.0 * rounding + 1e-3 * size;
            if !agrees && engine.kink(slot, j)?.is_some() {
                continue;
            }
            compared += 1;
            if agrees {
                return Ok(None);
            }
            let r = engine.real_estimate(slot, j, Scheme::Ridders)?;
            let decided = r.value.is_finite()
                && r.conclusive
                && (cs.value - r.value).abs() > 4.0 * (r.error + cs.error) + 1e-3 * size;
            if !decided {
                return Ok(None);
            }
            let x = engine.value(slot, j);
            let near = engine.pair(slot, j, 1e4 * f64::EPSILON * x.abs().max(1.0))?;
            let off = (near.derivative - cs.value).abs();
            let sides_with_ridders = near.finite
                && near.touched > 0.0
                && off > 4.0 * (near.rounding(f64::EPSILON) + cs.error)
                && (near.derivative - r.value).abs() < off;
            if !sides_with_ridders {
                return Ok(None);
            }
            found.push(Mismatch {
                index: j,
                complex: cs.value,
                real: r.value,
            });
        }
        let enough = if indices.len() >= 2 { 2 } else { 1 };
        Ok((found.len() >= enough).then(|| found.remove(0)))
    }

    /// Compares, summarises and diagnoses one tensor.
    fn row<L: Forward + ?Sized>(
        &self,
        t: TensorCase<'_, L::Real>,
        estimates: Vec<Estimate>,
        engine: &mut Engine<'_, L>,
        evidence: &Evidence,
        layer_eps: f64,
        notes: &mut Vec<String>,
    ) -> Result<Row, Error> {
        let shape = t.args_tensor.shape().to_vec();
        let same_shape = t
            .grad
            .as_ref()
            .is_some_and(|g| g.shape() == shape.as_slice());
        let inputs: Vec<f64> = t.args_tensor.data().iter().map(|v| v.as_f64()).collect();
        // The step each reference took, for the step sweep's chosen point.
        let steps: Vec<f64> = estimates.iter().map(|e| e.step).collect();
        let mut prober = SlotProber {
            engine,
            slot: t.slot,
            grad_index: t.grad_index,
            scheme: t.scheme,
        };
        let Compared {
            elements,
            joint_kink,
        } = compare::compare(
            t.grad.as_ref().filter(|_| same_shape),
            &inputs,
            t.indices,
            estimates,
            &self.tolerance,
            layer_eps,
            &mut prober,
        )?;
        let facts = RowFacts {
            returned: t.grad.is_some(),
            same_shape,
            all_finite: t
                .grad
                .as_ref()
                .is_none_or(|g| g.data().iter().all(|v| v.is_finite())),
            joint_kink: joint_kink.as_ref(),
            evidence,
            kinks_fail: self.kinks_fail,
        };
        let mut s = summarize(&elements, &facts);
        // A screen that disagreed fails the row even when no element
        // compared one by one shows why.
        if t.screen.as_ref().is_some_and(|sc| sc.disagreeing > 0) && s.verdict.is_pass() {
            s.verdict = Verdict::Disagrees;
        }
        if self.tolerance.is_fixed()
            && !elements.is_empty()
            && elements.iter().all(|e| e.bound >= e.numeric.abs())
        {
            notes.push(format!(
                "`{}`: the fixed bound is at least every reference value, so an all-zero gradient would pass there",
                t.spec.name
            ));
        }
        let diagnosis = diagnose(
            &shape,
            t.grad.as_ref(),
            &elements,
            joint_kink.as_ref(),
            evidence,
        );
        let wanted = match self.step_sweeps {
            StepSweeps::Failing => !s.verdict.is_pass(),
            StepSweeps::All => true,
            _ => false,
        };
        let step_sweep = match s.worst {
            Some(k) if wanted => {
                let e = &elements[k];
                let step = (t.indices.iter().position(|&j| j == e.index))
                    .and_then(|p| steps.get(p).copied())
                    .unwrap_or(0.0);
                step_sweep(engine, t.slot, &shape, e, step, t.scheme)?
            }
            _ => None,
        };
        Ok(assemble(RowParts {
            check: crate::report::Check::Gradient,
            name: t.spec.name.clone(),
            role: t.spec.role,
            gradient_shape: t.grad.as_ref().map(|g| g.shape().to_vec()),
            scheme: t.scheme,
            summary: s,
            joint_kink,
            diagnosis,
            screen: t.screen,
            step_sweep,
            shape,
            elements,
        }))
    }
}

/// The layer's name, signature and argument bindings.
pub(super) struct Start {
    pub name: String,
    pub sig: Signature,
    pub bindings: crate::signature::Bindings,
}

/// What a row of element comparisons is built from.
pub(super) struct RowParts {
    pub check: crate::report::Check,
    pub name: String,
    pub role: Role,
    pub gradient_shape: Option<Vec<usize>>,
    pub scheme: Scheme,
    pub summary: crate::diagnosis::summary::Summary,
    pub joint_kink: Option<compare::JointKink>,
    pub diagnosis: Option<crate::diagnosis::Diagnosis>,
    pub screen: Option<Screen>,
    pub step_sweep: Option<StepSweep>,
    pub shape: Vec<usize>,
    pub elements: Vec<compare::ElementCheck>,
}

/// A row of element comparisons: counts and figures from the summary,
/// the worst element located in the tensor.
pub(super) fn assemble(p: RowParts) -> Row {
    let s = p.summary;
    Row {
        check: p.check,
        name: p.name,
        role: p.role,
        gradient_shape: p.gradient_shape,
        scheme: p.scheme,
        checked: p.elements.len(),
        total: p.shape.iter().product(),
        failing: s.failing,
        kinks: s.kinks,
        unchecked: s.unchecked,
        wide: s.wide,
        worst: s.worst.map(|k| Worst {
            index: MultiIndex::from_flat(&p.shape, p.elements[k].index),
            analytic: p.elements[k].analytic,
            numeric: p.elements[k].numeric,
            bound: p.elements[k].bound,
        }),
        max_abs_error: s.max_abs_error,
        max_rel_error: s.max_rel_error,
        verdict: s.verdict,
        joint_kink: p.joint_kink,
        diagnosis: p.diagnosis,
        screen: p.screen,
        step_sweep: p.step_sweep,
        shape: p.shape,
        elements: p.elements,
    }
}

/// The step sweep of one element (`None` when it cannot be moved: ±∞ or
/// NaN). `step` is the reference's widest real step (0 for the complex
/// step, whose imaginary step is recorded instead).
fn step_sweep<L: Forward + ?Sized>(
    engine: &mut Engine<'_, L>,
    slot: usize,
    shape: &[usize],
    e: &compare::ElementCheck,
    step: f64,
    scheme: Scheme,
) -> Result<Option<StepSweep>, Error> {
    let x = engine.value(slot, e.index);
    if !x.is_finite() {
        return Ok(None);
    }
    let before = engine.evals;
    let points = engine
        .sweep(slot, e.index)?
        .into_iter()
        .map(|(step, numeric)| SweepPoint { step, numeric })
        .collect();
    Ok(Some(StepSweep {
        index: MultiIndex::from_flat(shape, e.index),
        x,
        points,
        analytic: e.analytic,
        reference: e.numeric,
        bound: e.bound,
        chosen_step: if scheme == Scheme::ComplexStep {
            complex_step_for(x)
        } else {
            step
        },
        forward_evals: engine.evals - before,
    }))
}

/// An element where the complex step and real differences disagree.
struct Mismatch {
    index: usize,
    complex: f64,
    real: f64,
}

/// One tensor's inputs to its row.
struct TensorCase<'a, R> {
    spec: &'a Slot,
    slot: usize,
    /// Its position among the differentiable tensors (in `Gradients`).
    grad_index: usize,
    args_tensor: &'a Tensor<R>,
    grad: Option<Tensor<f64>>,
    indices: &'a [usize],
    scheme: Scheme,
    /// The directional screen, when the tensor was screened.
    screen: Option<Screen>,
}

/// Counts checked elements and calls the progress callback (from any
/// thread).
struct Tally<'a> {
    done: AtomicUsize,
    /// Forward evaluations of the element estimates so far.
    evals: AtomicUsize,
    total: usize,
    callback: Option<&'a (dyn Fn(&Progress) + Send + Sync)>,
}

impl Tally<'_> {
    /// One more element done, which took `evals` forward evaluations.
    fn step(&self, tensor: &str, evals: usize) {
        let done = self.done.fetch_add(1, Ordering::Relaxed) + 1;
        let forward_evals = self.evals.fetch_add(evals, Ordering::Relaxed) + evals;
        if let Some(f) = self.callback {
            f(&Progress {
                tensor: tensor.to_string(),
                done,
                total: self.total,
                forward_evals,
            });
        }
    }
}

/// Tensors with fewer checked elements than this are estimated on the
/// calling thread: starting threads would cost more than it saves.
const PARALLEL_ABOVE: usize = 64;

/// The estimate of one element (an element that is ±∞ or NaN cannot be
/// moved: it is reported as not compared, and only its gradient's
/// finiteness counts).
fn estimate_one<L: Forward + ?Sized>(
    engine: &mut Engine<'_, L>,
    slot: usize,
    j: usize,
    scheme: Scheme,
) -> Result<Estimate, Error> {
    if !engine.value(slot, j).is_finite() {
        return Ok(Estimate::not_finite(0));
    }
    match scheme {
        Scheme::ComplexStep => engine.complex_estimate(slot, j),
        _ => engine.real_estimate(slot, j, scheme),
    }
}

/// One tensor's element estimates, as handed to the workers.
struct Job<'a, R> {
    blueprint: &'a Blueprint<R>,
    layer_name: &'a str,
    slot: usize,
    tensor: &'a str,
    scheme: Scheme,
    progress: &'a Tally<'a>,
}

/// Estimates a tensor's elements on several threads.
trait Workers<R> {
    fn threads(&self) -> usize;
    /// The estimates in the order of `indices`, and the forward
    /// evaluations they took.
    fn estimate(
        &self,
        job: &Job<'_, R>,
        indices: &[usize],
    ) -> Result<(Vec<Estimate>, usize), Error>;
}

/// Scoped threads over contiguous chunks of the elements, each with its
/// own engine built from the same blueprint.
struct Parallel<'a, L: ?Sized> {
    layer: &'a L,
    threads: usize,
}

impl<L: Forward + Sync + ?Sized> Workers<L::Real> for Parallel<'_, L> {
    fn threads(&self) -> usize {
        self.threads
    }

    fn estimate(
        &self,
        job: &Job<'_, L::Real>,
        indices: &[usize],
    ) -> Result<(Vec<Estimate>, usize), Error> {
        let chunk = indices.len().div_ceil(self.threads);
        let layer = self.layer;
        let results: Vec<Result<(Vec<Estimate>, usize), Error>> = std::thread::scope(|scope| {
            let handles: Vec<_> = indices
                .chunks(chunk)
                .map(|part| {
                    scope.spawn(move || {
                        let mut engine =
                            Engine::from_blueprint(layer, job.layer_name, job.blueprint.clone());
                        let mut out = Vec::with_capacity(part.len());
                        for &j in part {
                            let before = engine.evals;
                            out.push(estimate_one(&mut engine, job.slot, j, job.scheme)?);
                            job.progress.step(job.tensor, engine.evals - before);
                        }
                        Ok((out, engine.evals))
                    })
                })
                .collect();
            handles
                .into_iter()
                .map(|h| {
                    h.join()
                        .unwrap_or_else(|panic| std::panic::resume_unwind(panic))
                })
                .collect()
        });
        let mut estimates = Vec::with_capacity(indices.len());
        let mut evals = 0;
        for r in results {
            let (part, n) = r?;
            estimates.extend(part);
            evals += n;
        }
        Ok((estimates, evals))
    }
}

/// The reference's probes for one tensor, as the comparison asks for them.
struct SlotProber<'e, 'a, L: Forward + ?Sized> {
    engine: &'e mut Engine<'a, L>,
    slot: usize,
    grad_index: usize,
    scheme: Scheme,
}

impl<L: Forward + ?Sized> Prober for SlotProber<'_, '_, L> {
    fn kink(&mut self, j: usize) -> Result<Option<KinkProbe>, Error> {
        let probe = self.engine.kink(self.slot, j)?;
        if self.scheme == Scheme::ComplexStep {
            // Only a kink at the point itself matters to the complex step:
            // one that is merely near is outside its (imaginary) stencil.
            // A tie that rounding made, which real differences cannot see,
            // shows in the complex step's own one-sided values.
            // (An `f32` forward flat at its own precision is no evidence of
            // which one-sided values a tie there allows.)
            return match probe.filter(|p| p.at_point) {
                Some(p) if p.left != p.right => Ok(Some(p)),
                other => Ok(self.engine.complex_sides(self.slot, j)?.or(other)),
            };
        }
        // Real differences also straddle kinks further out, up to the scale
        // of their steps.
        match probe {
            Some(p) => Ok(Some(p)),
            None => self.engine.kink_in_stencil(self.slot, j),
        }
    }

    fn joint(&mut self, group: &[usize]) -> Result<Option<KinkProbe>, Error> {
        self.engine.joint(self.slot, group)
    }

    fn second_look(&mut self, j: usize, first: &Estimate) -> Result<Option<Estimate>, Error> {
        self.engine.second_look(self.slot, j, first, self.scheme)
    }

    fn backward_scatter(&mut self, j: usize, at_point: f64) -> Result<f64, Error> {
        let x = self.engine.value(self.slot, j);
        let cbrt = f64::EPSILON.cbrt();
        let step = 1e-6 * x.abs().max(cbrt);
        let mut offsets = Vec::with_capacity(8);
        let mut values = Vec::with_capacity(8);
        for k in [-4.0, -3.0, -2.0, -1.0, 1.0, 2.0, 3.0, 4.0] {
            if let Some(v) = self
                .engine
                .backward_moved(self.slot, self.grad_index, j, k * step)?
            {
                if v.is_finite() {
                    offsets.push(k);
                    values.push(v);
                }
            }
        }
        let own = scatter_about_parabola(&offsets, &values, at_point);
        let all = self.engine.backward_spread(self.grad_index, j, at_point)?;
        Ok(own.max(all))
    }

    fn widest_amplification(&self) -> f64 {
        self.engine.widest_amplification()
    }

    fn backward_beside(&mut self, j: usize) -> Result<Option<(f64, f64)>, Error> {
        let x = self.engine.value(self.slot, j);
        let h = 4.0 * f64::EPSILON.cbrt() * x.abs().max(f64::EPSILON.cbrt());
        let left = self
            .engine
            .backward_moved(self.slot, self.grad_index, j, -h)?;
        let right = self
            .engine
            .backward_moved(self.slot, self.grad_index, j, h)?;
        Ok(left.zip(right))
    }
}

/// Failing rows first, then by relative error, worst first.
pub(super) fn sort_rows(rows: &mut [Row]) {
    rows.sort_by(|a, b| {
        (a.verdict.is_pass().cmp(&b.verdict.is_pass()))
            .then(b.max_rel_error.total_cmp(&a.max_rel_error))
    });
}

/// More gradients than differentiable tensors: refused, naming both
/// counts, rather than truncated (which would shift rows).
pub(super) fn check_gradient_count<T>(
    layer: &str,
    differentiable: &[(usize, &Slot)],
    g: &Gradients<T>,
) -> Result<(), Error> {
    if g.len() > differentiable.len() {
        let names: Vec<String> = differentiable
            .iter()
            .map(|(_, s)| format!("`{}`", s.name))
            .collect();
        return Err(Error::GradientCount {
            layer: layer.to_string(),
            expected: differentiable.len(),
            names: names.join(", "),
            found: g.len(),
        });
    }
    Ok(())
}

/// The flat positions to check in a tensor of `len` elements: all of them,
/// or `max` drawn without replacement (seeded by the audit's seed and the
/// tensor's position), in ascending order.
pub(crate) fn sample(len: usize, max: Option<usize>, seed: u64, slot: usize) -> Vec<usize> {
    let mut all: Vec<usize> = (0..len).collect();
    let Some(max) = max.filter(|&m| m < len) else {
        return all;
    };
    let mut rng = rand::rngs::StdRng::seed_from_u64(
        seed ^ (slot as u64 + 1).wrapping_mul(0x9E37_79B9_7F4A_7C15),
    );
    for k in 0..max {
        let pick = rng.random_range(k..len);
        all.swap(k, pick);
    }
    all.truncate(max);
    all.sort_unstable();
    all
}

fn short_type_name<L: ?Sized>() -> String {
    let full = std::any::type_name::<L>();
    let base = full.split('<').next().unwrap_or(full);
    let short = base.rsplit("::").next().unwrap_or(base);
    match full.find('<') {
        Some(i) => format!("{short}{}", &full[i..]),
        None => short.to_string(),
    }
}

fn first_difference<T: Real>(sig: &Signature, a: &[Tensor<T>], b: &[Tensor<T>]) -> Option<String> {
    for (slot, (x, y)) in sig.outputs().iter().zip(a.iter().zip(b)) {
        if let Some(d) = first_tensor_difference(x, y) {
            return Some(format!("output `{}` {d}", slot.name));
        }
    }
    None
}

fn first_tensor_difference<T: Real>(a: &Tensor<T>, b: &Tensor<T>) -> Option<String> {
    if a.shape() != b.shape() {
        return Some("changes shape between calls".to_string());
    }
    a.data()
        .iter()
        .zip(b.data())
        .position(|(x, y)| x.as_f64().to_bits() != y.as_f64().to_bits())
        .map(|j| {
            format!(
                "at {}: {} then {}",
                a.index_of(j),
                num(a.data()[j].as_f64()),
                num(b.data()[j].as_f64())
            )
        })
}

fn first_nonfinite<T: Real>(sig: &Signature, outputs: &[Tensor<T>]) -> Option<String> {
    for (slot, y) in sig.outputs().iter().zip(outputs) {
        if let Some(j) = y.data().iter().position(|v| !v.is_finite()) {
            return Some(format!(
                "output `{}` at {} (in {})",
                slot.name,
                y.index_of(j),
                T::NAME
            ));
        }
    }
    None
}
