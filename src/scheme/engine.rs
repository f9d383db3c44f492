//! The reference engine: lines over a layer's arguments, and which scheme
//! produces each element's numeric derivative.
//!
//! The engine holds working copies of the arguments (made once per audit:
//! the layer's own precision, and for a generic forward `f64` and
//! complex-step copies), moves one element (or a group) in place, evaluates
//! the forward, and restores the element bit for bit. Outputs are compared
//! with the forward at the point itself, computed once, so an evaluation
//! costs one forward and no copy of the arguments.

use std::panic::{catch_unwind, AssertUnwindSafe};

use super::complex::{self, Directional};
use super::stairs::{self, AcrossStairs};
use super::{
    central, joint_probe, kink_test, look, ridders, scatter, sweep, Estimate, KinkProbe, Line,
    Look, Pair, Sample, Scheme, LOOK_OFFSETS,
};
use crate::error::{take_pending, Error, OpFailure};
use crate::format::num;
use crate::layer::sealed::Reference;
use crate::layer::{Args, Forward};
use crate::scalar::{ComplexStep, Real, Traced};
use crate::tensor::{MultiIndex, Tensor};

/// The message of a caught panic.
pub(crate) fn panic_message(payload: &(dyn std::any::Any + Send)) -> String {
    if let Some(s) = payload.downcast_ref::<&str>() {
        (*s).to_string()
    } else if let Some(s) = payload.downcast_ref::<String>() {
        s.clone()
    } else {
        "(a panic without a message)".to_string()
    }
}

/// What stopped a layer call: a panic, or an op's error that an adapter
/// carried out of the call (see `error::raise`).
#[derive(Debug)]
pub(crate) struct Fault {
    /// The panic's message.
    message: String,
    /// The op failure behind the panic, if an adapter raised one.
    op: Option<OpFailure>,
}

impl Fault {
    /// The fault as an error of the audit's `call` into `layer`.
    pub(crate) fn into_error(self, layer: &str, call: &str, at: String) -> Error {
        match self.op {
            Some(op) => op.into_error(layer, call, at),
            None => Error::LayerPanicked {
                layer: layer.to_string(),
                call: call.to_string(),
                at,
                message: self.message,
            },
        }
    }
}

/// Runs `f`, turning a panic into a [`Fault`].
pub(crate) fn guarded<T>(f: impl FnOnce() -> T) -> Result<T, Fault> {
    // A failure left by a call outside any guard is not this call's.
    take_pending();
    catch_unwind(AssertUnwindSafe(f)).map_err(|p| Fault {
        message: panic_message(p.as_ref()),
        op: take_pending(),
    })
}

/// Σᵢ f(wᵢ, yᵢ) over every output element, or `None` when the outputs do
/// not match the weights' shapes.
fn weigh<U>(w: &[Vec<f64>], y: &[Tensor<U>], f: impl Fn(f64, &U) -> f64) -> Option<f64> {
    if y.len() != w.len() {
        return None;
    }
    let mut total = 0.0;
    for (t, ws) in y.iter().zip(w) {
        if t.len() != ws.len() {
            return None;
        }
        total += t.data().iter().zip(ws).map(|(v, &w)| f(w, v)).sum::<f64>();
    }
    Some(total)
}

/// A working copy of the arguments in one precision, with the forward's
/// outputs at the point (in `f64`) and a buffer reused across evaluations.
#[derive(Clone)]
pub(crate) struct Working<U> {
    args: Args<U>,
    /// Outputs at the point, flattened over all outputs.
    base: Vec<f64>,
    /// yᵢ(x + t) − yᵢ(x) of the last evaluation.
    diff: Vec<f64>,
    /// `diff` of the `+h` end of the current pair.
    kept: Vec<f64>,
    /// Per output, the magnitude its rounding acts on when that exceeds
    /// the output itself: the running error bound of the forward at the
    /// point over ε (`1 + tanh u` at u = −16 is 5e-14 but rounds like 1).
    /// Empty when not measured.
    rounds_like: Vec<f64>,
    /// Per argument tensor, the root mean square of its finite elements:
    /// the scale its elements live on (weights of 10⁻³ make a forward that
    /// normalises them change on that scale, not on 1).
    typical: Vec<f64>,
}

impl<U: Real> Working<U> {
    fn new(args: Args<U>, outputs: &[Tensor<U>]) -> Self {
        let base: Vec<f64> = outputs
            .iter()
            .flat_map(|t| t.data().iter().map(|v| v.as_f64()))
            .collect();
        let n = base.len();
        let typical = args
            .all()
            .iter()
            .map(|t| {
                let (sum, count) = t
                    .data()
                    .iter()
                    .map(|v| v.as_f64())
                    .filter(|v| v.is_finite())
                    .fold((0.0, 0usize), |(s, c), v| (s + v * v, c + 1));
                if count == 0 {
                    0.0
                } else {
                    (sum / count as f64).sqrt()
                }
            })
            .collect();
        Working {
            args,
            base,
            diff: vec![0.0; n],
            kept: vec![0.0; n],
            rounds_like: Vec::new(),
            typical,
        }
    }
}

/// Where a panic happened during a line's evaluations.
struct Caught {
    fault: Fault,
    at: String,
}

/// The probe φ(t) = Σ wᵢ yᵢ(x + t·v) along one element (v = e_j), a group
/// of elements (v = Σ e_j) or a direction, moving them in place.
struct ArgLine<'a, U: Real, F> {
    work: &'a mut Working<U>,
    forward: &'a F,
    /// The upstream weights, flattened like `Working::base`.
    w: &'a [f64],
    slot: usize,
    slot_name: &'a str,
    /// The moved elements: flat position, original value, direction weight.
    targets: Vec<(usize, U, f64)>,
    evals: usize,
    caught: Option<Caught>,
    /// The smallest non-zero change of φ seen by the central differences
    /// taken: |φ(x+h) − φ(x−h)|, |φ(x±h) − φ(x)| (∞ before any moved).
    smallest_move: f64,
    /// The widest width 2h over which φ did not change at all (0 when
    /// every difference moved).
    widest_flat: f64,
}

impl<'a, U: Real, F: Fn(&Args<U>) -> Vec<Tensor<U>>> ArgLine<'a, U, F> {
    fn new(
        work: &'a mut Working<U>,
        forward: &'a F,
        w: &'a [f64],
        slot: usize,
        slot_name: &'a str,
        targets: &[(usize, f64)],
    ) -> Self {
        let data = work.args.all()[slot].data();
        let targets = targets.iter().map(|&(j, v)| (j, data[j], v)).collect();
        ArgLine {
            work,
            forward,
            w,
            slot,
            slot_name,
            targets,
            evals: 0,
            caught: None,
            smallest_move: f64::INFINITY,
            widest_flat: 0.0,
        }
    }

    /// The derivative a forward that rounds to a staircase cannot resolve
    /// along this line: where φ(x+h) = φ(x−h) exactly while φ moved
    /// elsewhere, its stairs are at most as high as the smallest move seen,
    /// and any |φ′| up to (smallest move)/2h fits the flat difference; the
    /// widest flat difference gives the tightest such limit. 0 when no
    /// difference was flat, or nothing moved (outputs that never moved are
    /// the quantization allowance's, `scheme::quantization`).
    fn staircase_floor(&self) -> f64 {
        if self.widest_flat > 0.0 && self.smallest_move.is_finite() {
            self.smallest_move / self.widest_flat
        } else {
            0.0
        }
    }

    /// Evaluates at x + t·v and leaves yᵢ(x + t·v) − yᵢ(x) in `work.diff`.
    fn eval(&mut self, t: f64) -> Sample {
        let data = self.work.args.all_mut()[self.slot].data_mut();
        for &(j, x0, v) in &self.targets {
            data[j] = U::from_f64(x0.as_f64() + t * v);
        }
        // The step actually applied (after rounding), from the first target.
        let step = self.targets.first().map_or(0.0, |&(j, x0, v)| {
            if v == 0.0 {
                t
            } else {
                (data[j].as_f64() - x0.as_f64()) / v
            }
        });
        let moved_to = self.targets.first().map(|&(j, _, _)| data[j].as_f64());
        let outcome = guarded(|| (self.forward)(&self.work.args));
        let data = self.work.args.all_mut()[self.slot].data_mut();
        for &(j, x0, _) in &self.targets {
            data[j] = x0;
        }
        self.evals += 1;
        let y = match outcome {
            Ok(y) => y,
            Err(fault) => {
                if self.caught.is_none() {
                    let shape = self.work.args.all()[self.slot].shape();
                    let at = match (self.targets.as_slice(), moved_to) {
                        ([(j, _, _)], Some(v)) => format!(
                            " while `{}` {} was moved to {}",
                            self.slot_name,
                            MultiIndex::from_flat(shape, *j),
                            num(v)
                        ),
                        _ => format!(
                            " while {} elements of `{}` were moved together",
                            self.targets.len(),
                            self.slot_name
                        ),
                    };
                    self.caught = Some(Caught { fault, at });
                }
                return Sample {
                    step,
                    delta: f64::NAN,
                    touched: 0.0,
                    rounds_like: 0.0,
                    finite: false,
                };
            }
        };
        let lengths_ok = y.iter().map(Tensor::len).sum::<usize>() == self.work.base.len();
        let mut sample = Sample {
            step,
            delta: 0.0,
            touched: 0.0,
            rounds_like: 0.0,
            finite: lengths_ok,
        };
        if !lengths_ok {
            sample.delta = f64::NAN;
            return sample;
        }
        let values = y.iter().flat_map(|t| t.data().iter().map(|v| v.as_f64()));
        for (i, yi) in values.enumerate() {
            let b = self.work.base[i];
            let d = yi - b;
            self.work.diff[i] = d;
            if !yi.is_finite() {
                sample.finite = false;
                continue;
            }
            if d != 0.0 {
                let wi = self.w[i];
                let like = self.work.rounds_like.get(i).copied().unwrap_or(0.0);
                let size = yi.abs().max(b.abs());
                sample.delta += wi * d;
                sample.touched += wi.abs() * size;
                sample.rounds_like += wi.abs() * size.max(like);
            }
        }
        if !sample.finite {
            sample.delta = f64::NAN;
        }
        sample
    }
}

impl<U: Real, F: Fn(&Args<U>) -> Vec<Tensor<U>>> Line for ArgLine<'_, U, F> {
    fn eps(&self) -> f64 {
        U::EPS
    }
    fn x(&self) -> f64 {
        self.targets
            .iter()
            .fold(0.0_f64, |m, &(_, x0, _)| m.max(x0.as_f64().abs()))
    }
    fn fine_scale(&self) -> Option<f64> {
        let typical = self.work.typical.get(self.slot).copied().unwrap_or(0.0);
        let fine = self.x().max(typical);
        (fine > 0.0).then_some(fine)
    }
    fn at(&mut self, t: f64) -> Sample {
        self.eval(t)
    }
    fn pair(&mut self, h: f64) -> Pair {
        let p = self.eval(h);
        std::mem::swap(&mut self.work.diff, &mut self.work.kept);
        let m = self.eval(-h);
        let width = p.step - m.step;
        if p.finite && m.finite && width > 0.0 {
            let moved = (p.delta - m.delta).abs();
            if moved == 0.0 {
                self.widest_flat = self.widest_flat.max(width);
            }
            for change in [moved, p.delta.abs(), m.delta.abs()] {
                if change > 0.0 && change.is_finite() {
                    self.smallest_move = self.smallest_move.min(change);
                }
            }
        }
        let (mut terms, mut still) = (0.0_f64, 0.0_f64);
        for (((a, b), w), y) in self
            .work
            .kept
            .iter()
            .zip(&self.work.diff)
            .zip(self.w)
            .zip(&self.work.base)
        {
            if *a == 0.0 && *b == 0.0 {
                still = still.max((w * y).abs());
            } else {
                terms += (w * (a - b)).abs();
            }
        }
        Pair {
            derivative: (p.delta - m.delta) / width,
            terms: terms / width,
            touched: p.touched.max(m.touched),
            rounds_like: p.rounds_like.max(m.rounds_like),
            still,
            width,
            finite: p.finite && m.finite,
        }
    }
}

/// What a line is asked for.
#[derive(Clone, Copy)]
enum Ask {
    Estimate(Scheme),
    Check,
    Pair(f64),
    Look,
    /// The slope across the stairs of a forward flat over the reference's
    /// steps.
    Stairs,
    Kink(f64),
    /// The kink test in the layer's own precision, where a forward that does
    /// not move at all over the test's steps counts as a flat kink.
    OwnKink(f64),
    /// The kink test at the scale of a real-difference stencil.
    StencilKink(f64),
    Joint(f64),
    /// Central differences over a sweep of steps (a forward that panics at
    /// a step gives NaN there, not an error).
    Sweep,
}

/// What a line answered.
enum Answer {
    Estimate(Estimate),
    Check(Option<ridders::Check>),
    Pair(Pair),
    Look(Look),
    Stairs(Option<AcrossStairs>),
    Probe(Option<KinkProbe>),
    Sweep(Vec<(f64, f64)>),
}

fn ask<U: Real, F: Fn(&Args<U>) -> Vec<Tensor<U>>>(
    work: &mut Working<U>,
    forward: &F,
    w: &[f64],
    slot: (usize, &str),
    targets: &[(usize, f64)],
    question: Ask,
    evals: &mut usize,
) -> Result<Answer, Caught> {
    let mut line = ArgLine::new(work, forward, w, slot.0, slot.1, targets);
    let answer = match question {
        Ask::Estimate(scheme) => {
            let mut e = match scheme {
                Scheme::Central => central::estimate(&mut line),
                _ => ridders::estimate(&mut line),
            };
            // A forward whose hidden intermediates round in steps far
            // coarser than its outputs (a difference of squares of 10² in
            // `f32`) is flat over some steps and not others; what it cannot
            // resolve is part of the error bar.
            let floor = line.staircase_floor();
            if floor > e.error {
                e.error = floor;
                e.conclusive = false;
            }
            Answer::Estimate(e)
        }
        Ask::Check => Answer::Check(ridders::small_step_check(&mut line)),
        Ask::Pair(h) => Answer::Pair(line.pair(h)),
        Ask::Look => Answer::Look(look(&mut line)),
        Ask::Stairs => Answer::Stairs(stairs::across_stairs(&mut line)),
        Ask::Kink(factor) => {
            let h = kink_step(factor, &line);
            Answer::Probe(kink_test(&mut line, h))
        }
        Ask::OwnKink(factor) => {
            let h = kink_step(factor, &line);
            let probe = kink_test(&mut line, h);
            Answer::Probe(probe.or_else(|| flat_at_precision(&mut line, h)))
        }
        Ask::StencilKink(factor) => {
            let h = factor * U::EPS.cbrt() * line.scale();
            Answer::Probe(kink_test(&mut line, h))
        }
        Ask::Joint(factor) => {
            let h = kink_step(factor, &line);
            Answer::Probe(joint_probe(&mut line, h))
        }
        Ask::Sweep => Answer::Sweep(sweep::sweep(&mut line)),
    };
    *evals += line.evals;
    match line.caught {
        // A picture is not worth an error: the steps where the forward
        // panicked are simply missing from it.
        Some(_) if matches!(question, Ask::Sweep) => Ok(answer),
        Some(c) => Err(c),
        None => Ok(answer),
    }
}

/// An element along which the forward, in the layer's own precision, does
/// not move at all over ±h: a max whose arguments tie at that precision
/// though not in `f64`, a sum that rounds the element's term away. The
/// layer cannot resolve a derivative there, so its backward's value is one
/// convention among others: a flat kink, listed apart.
fn flat_at_precision(line: &mut impl Line, h: f64) -> Option<KinkProbe> {
    let (p, m) = (line.at(h), line.at(-h));
    let flat = p.finite && m.finite && p.delta == 0.0 && m.delta == 0.0 && p.touched == 0.0;
    flat.then_some(KinkProbe {
        left: 0.0,
        right: 0.0,
        noise: 0.0,
        at_point: true,
    })
}

/// Offsets of the backward's spread, in units of ε·max(|x|, 1): up to a
/// few thousand ulps in `f64` (10⁻¹² relative, enough to move
/// intermediates far larger than x by several of their own ulps), up to 64
/// in `f32` (where a few thousand would be 5·10⁻⁴, far enough to meet the
/// layer's real curvature and kinks).
fn spread_offsets<R: Real>() -> [f64; 6] {
    if R::EPS < 1e-10 {
        [-4096.0, -512.0, -64.0, 64.0, 512.0, 4096.0]
    } else {
        [-64.0, -16.0, -4.0, 4.0, 16.0, 64.0]
    }
}

/// Where h·Σ|terms| of a complex-step derivative falls below this (2¹⁰⁰
/// times the smallest normal number), the step is taken larger.
const NEAR_SUBNORMAL: f64 = f64::MIN_POSITIVE * (1u128 << 100) as f64;

/// Step of the kink test, as a multiple of ε^(1/3)·max(|x|, ε^(1/3)):
/// small enough that a smooth φ's curvature cannot pass for a kink, and
/// relative to x when x is small, so that a ReLU at 0 is not "at" an x of
/// 10⁻⁷. (A kink further out that spoils a wide Ridders stencil shows up as
/// a wide or inconsistent estimate instead.)
const KINK_STEP: f64 = 4.0;

fn kink_step(factor: f64, line: &impl Line) -> f64 {
    let cbrt = line.eps().cbrt();
    factor * cbrt * line.x().abs().max(cbrt)
}

/// Numerical references for one audit.
pub(crate) struct Engine<'a, L: Forward + ?Sized> {
    layer: &'a L,
    layer_name: &'a str,
    /// Names of all argument tensors, in `Args` order.
    slot_names: Vec<String>,
    generic: Option<&'a dyn Reference>,
    /// The upstream weights, flattened over all outputs.
    w: Vec<f64>,
    /// The same, per output tensor (for complex outputs).
    w_per_output: Vec<Vec<f64>>,
    own: Working<L::Real>,
    /// `f64` working copy of a generic forward (built on first use).
    real: Option<Working<f64>>,
    complex: Option<Args<ComplexStep<f64>>>,
    /// Working copies for the running-error forwards of second looks
    /// (built on first use; the seeded element is reset after each).
    traced: Option<Args<Traced<f64>>>,
    /// The same in `f32`, for an `f32` layer.
    traced_f32: Option<Args<Traced<f32>>>,
    /// The upstream gradients the audit's backward calls use.
    upstream: Vec<Tensor<L::Real>>,
    /// The differentiable tensors (positions in `Args`), in gradient order.
    movable: Vec<usize>,
    /// The backward's gradients with every differentiable tensor moved
    /// along one direction, per offset of `spread_offsets` (built on first
    /// use).
    spread: Option<Vec<Option<Vec<Vec<f64>>>>>,
    /// Per output (flattened): how many ulps of the layer's precision the
    /// layer's own forward is off from the same forward in `f64`, divided
    /// by a few (at least 1). Empty when not measured.
    amplification: Vec<f64>,
    /// Forward evaluations spent.
    pub evals: usize,
    /// Backward evaluations spent (beyond the audit's own two).
    pub backward_evals: usize,
}

/// What a worker engine on another thread starts from: copies of the
/// working arguments and of what the main engine measured, so that every
/// element's estimate is the same whichever engine makes it.
#[derive(Clone)]
pub(crate) struct Blueprint<R> {
    slot_names: Vec<String>,
    use_generic: bool,
    w: Vec<f64>,
    w_per_output: Vec<Vec<f64>>,
    own: Working<R>,
    real: Option<Working<f64>>,
    complex: Option<Args<ComplexStep<f64>>>,
    upstream: Vec<Tensor<R>>,
    movable: Vec<usize>,
    amplification: Vec<f64>,
}

impl<'a, L: Forward + ?Sized> Engine<'a, L> {
    /// The layer's name, for messages.
    pub(crate) fn layer_name(&self) -> &'a str {
        self.layer_name
    }

    /// A copy of what this engine works from, for engines on other threads
    /// (with the `f64` working copy built first when `real` is asked for).
    pub(crate) fn blueprint(&mut self, real: bool) -> Result<Blueprint<L::Real>, Error> {
        if real {
            if let Some(generic) = self.generic {
                self.ensure_real(generic)?;
            }
        }
        Ok(Blueprint {
            slot_names: self.slot_names.clone(),
            use_generic: self.generic.is_some(),
            w: self.w.clone(),
            w_per_output: self.w_per_output.clone(),
            own: self.own.clone(),
            real: self.real.clone(),
            complex: self.complex.clone(),
            upstream: self.upstream.clone(),
            movable: self.movable.clone(),
            amplification: self.amplification.clone(),
        })
    }

    /// An engine built from a blueprint, on the calling thread.
    pub(crate) fn from_blueprint(layer: &'a L, layer_name: &'a str, b: Blueprint<L::Real>) -> Self {
        Engine {
            layer,
            layer_name,
            slot_names: b.slot_names,
            generic: if b.use_generic {
                layer.reference()
            } else {
                None
            },
            w: b.w,
            w_per_output: b.w_per_output,
            own: b.own,
            real: b.real,
            complex: b.complex,
            traced: None,
            traced_f32: None,
            upstream: b.upstream,
            movable: b.movable,
            spread: None,
            amplification: b.amplification,
            evals: 0,
            backward_evals: 0,
        }
    }

    /// `outputs` are the layer's outputs at `args`; `w` the upstream
    /// weights per output.
    pub(crate) fn new(
        layer: &'a L,
        layer_name: &'a str,
        slot_names: Vec<String>,
        args: &Args<L::Real>,
        outputs: &[Tensor<L::Real>],
        upstream: Vec<Tensor<L::Real>>,
        use_generic: bool,
    ) -> Self {
        let w: Vec<Vec<f64>> = upstream
            .iter()
            .map(|u| u.data().iter().map(|v| v.as_f64()).collect())
            .collect();
        let generic = if use_generic { layer.reference() } else { None };
        Engine {
            layer,
            layer_name,
            slot_names,
            generic,
            w: w.iter().flatten().copied().collect(),
            w_per_output: w,
            own: Working::new(args.clone(), outputs),
            real: None,
            complex: generic.map(|_| args.map(|v| ComplexStep::real(v.as_f64()))),
            traced: None,
            traced_f32: None,
            upstream,
            movable: Vec::new(),
            spread: None,
            amplification: Vec::new(),
            evals: 0,
            backward_evals: 0,
        }
    }

    /// Declares which tensors are differentiable (positions in `Args`, in
    /// gradient order).
    pub(crate) fn set_movable(&mut self, movable: Vec<usize>) {
        self.movable = movable;
    }

    /// The scatter of the backward's value for element `j` of gradient
    /// `grad` about a parabola, when every differentiable tensor moves
    /// along one fixed direction by a few hundred to a few thousand ulps of
    /// each element (at least of 1): the backward's own rounding at this
    /// point, including what it inherits from intermediates that other
    /// elements feed (a cancelling difference of squares upstream of a
    /// weight gradient, a max whose arguments tie at the layer's
    /// precision). Six backward calls per audit, made on first use.
    pub(crate) fn backward_spread(
        &mut self,
        grad: usize,
        j: usize,
        at_point: f64,
    ) -> Result<f64, Error> {
        let offsets_in_ulps = spread_offsets::<L::Real>();
        if self.spread.is_none() {
            let mut samples = Vec::with_capacity(offsets_in_ulps.len());
            for k in offsets_in_ulps {
                samples.push(self.backward_along(k)?);
            }
            self.spread = Some(samples);
        }
        let mut offsets = Vec::with_capacity(offsets_in_ulps.len());
        let mut values = Vec::with_capacity(offsets_in_ulps.len());
        for (k, sample) in offsets_in_ulps.iter().zip(self.spread.iter().flatten()) {
            if let Some(v) = sample
                .as_ref()
                .and_then(|g| g.get(grad))
                .and_then(|t| t.get(j))
            {
                if v.is_finite() {
                    offsets.push(*k);
                    values.push(*v);
                }
            }
        }
        Ok(super::scatter_about_parabola(&offsets, &values, at_point))
    }

    /// The backward's gradients (in `f64`) with every differentiable
    /// element x moved by k·ε·max(|x|, 1) in a fixed ±1 pattern; `None`
    /// entries for gradients the backward did not return.
    fn backward_along(&mut self, k: f64) -> Result<Option<Vec<Vec<f64>>>, Error> {
        let eps = L::Real::EPS;
        let mut moved = self.own.args.clone();
        for &slot in &self.movable {
            for (j, v) in moved.all_mut()[slot].data_mut().iter_mut().enumerate() {
                let sign = if (slot * 7919 + j * 104_729) % 3 == 1 {
                    -1.0
                } else {
                    1.0
                };
                let x = v.as_f64();
                *v = L::Real::from_f64(x + sign * k * eps * x.abs().max(1.0));
            }
        }
        let layer = self.layer;
        let up = &self.upstream;
        self.backward_evals += 1;
        match guarded(|| layer.backward(&moved, up)) {
            Ok(g) => Ok(Some(
                (0..self.movable.len())
                    .map(|d| {
                        g.get(d)
                            .map(|t| t.data().iter().map(|v| v.as_f64()).collect())
                            .unwrap_or_default()
                    })
                    .collect(),
            )),
            // A backward that panics at a moved point says nothing about
            // its rounding here; the audit reports panics at the point.
            Err(_) => Ok(None),
        }
    }

    /// The backward's value for element `j` of tensor `slot` (gradient
    /// entry `grad`) with that element moved by `t`: how the backward
    /// itself behaves beside the point.
    pub(crate) fn backward_moved(
        &mut self,
        slot: usize,
        grad: usize,
        j: usize,
        t: f64,
    ) -> Result<Option<f64>, Error> {
        let data = self.own.args.all_mut()[slot].data_mut();
        let x0 = data[j];
        data[j] = L::Real::from_f64(x0.as_f64() + t);
        let moved = data[j].as_f64();
        let layer = self.layer;
        let (args, up) = (&self.own.args, &self.upstream);
        self.backward_evals += 1;
        let outcome = guarded(|| layer.backward(args, up));
        self.own.args.all_mut()[slot].data_mut()[j] = x0;
        match outcome {
            Ok(g) => Ok(g
                .get(grad)
                .and_then(|t| t.data().get(j))
                .map(|v| v.as_f64())),
            Err(fault) => Err(fault.into_error(
                self.layer_name,
                "backward",
                format!(
                    " while `{}` {} was moved to {}",
                    self.slot_names[slot],
                    self.own.args.all()[slot].index_of(j),
                    num(moved)
                ),
            )),
        }
    }

    /// For an `f32` layer with a generic forward: how far its own outputs
    /// are from the same forward in `f64`, in ulps of `f32`. A forward that
    /// cancels (`ln(1 + r²)` for small r, `(r + a)² − a²`) is off by many
    /// ulps at the point, and an `f32` backward that follows the same
    /// formulas works from those values: the rounding floor of each element
    /// is multiplied by the largest factor among the outputs it moves. One
    /// `f64` forward per audit; nothing to do for an `f64` layer.
    pub(crate) fn measure_precision(&mut self) -> Result<(), Error> {
        let Some(generic) = self.generic else {
            return Ok(());
        };
        if L::Real::EPS <= f64::EPSILON {
            return Ok(());
        }
        self.ensure_real(generic)?;
        let Some(real) = self.real.as_ref() else {
            return Ok(());
        };
        let eps = L::Real::EPS;
        // Below the precision's smallest normal number, an output is off by
        // its absolute resolution, not by a relative amount: e^(−124)
        // flushed to 0 in f32 is not amplified rounding.
        let tiny = <L::Real as num_traits::Float>::min_positive_value().as_f64();
        self.amplification = self
            .own
            .base
            .iter()
            .zip(&real.base)
            .map(|(own, exact)| {
                let off = (own - exact).abs() / (4.0 * eps * exact.abs().max(tiny));
                if off.is_finite() {
                    off.max(1.0)
                } else {
                    1.0
                }
            })
            .collect();
        Ok(())
    }

    /// The largest rounding amplification among the outputs (1 when not
    /// measured): how many times a few ulps the layer's own forward is off
    /// from the same forward in `f64`, at worst.
    pub(crate) fn widest_amplification(&self) -> f64 {
        self.amplification.iter().copied().fold(1.0, f64::max)
    }

    /// The value of element `j` of tensor `slot`, in `f64`.
    pub(crate) fn value(&self, slot: usize, j: usize) -> f64 {
        self.own.args.all()[slot].data()[j].as_f64()
    }

    /// `true` when references come from a generic forward.
    pub(crate) fn is_generic(&self) -> bool {
        self.generic.is_some()
    }

    /// The precision references are computed in.
    pub(crate) fn precision_name(&self) -> &'static str {
        if self.is_generic() {
            "f64"
        } else {
            L::Real::NAME
        }
    }

    /// Builds the `f64` working copy of a generic forward on first use.
    fn ensure_real(&mut self, generic: &dyn Reference) -> Result<(), Error> {
        if self.real.is_some() {
            return Ok(());
        }
        let args = self.own.args.map(|v| v.as_f64());
        let base = guarded(|| generic.forward_f64(&args)).map_err(|fault| {
            fault.into_error(self.layer_name, "forward (in f64)", String::new())
        })?;
        self.evals += 1;
        let mut work = Working::new(args, &base);
        // The forward's own rounding at the point, by running error
        // analysis (see `Traced`): real differences of a forward that
        // cancels see a staircase of that height, not of ε·|y|.
        let traced = work.args.map(|v| Traced::input(v, 0.0));
        if let Ok(y) = guarded(|| generic.forward_traced_f64(&traced)) {
            self.evals += 1;
            let like: Vec<f64> = y
                .iter()
                .flat_map(|t| t.data().iter().map(|v| v.ev / 2.0))
                .collect();
            if like.len() == work.base.len() && like.iter().all(|v| v.is_finite()) {
                work.rounds_like = like;
            }
        }
        self.real = Some(work);
        Ok(())
    }

    /// Runs one question on the right forward: the generic one in `f64`
    /// for a generic layer, the layer's own otherwise.
    fn ask(
        &mut self,
        slot: usize,
        targets: &[(usize, f64)],
        question: Ask,
    ) -> Result<Answer, Error> {
        let name = self.slot_names[slot].as_str();
        let mut evals = 0;
        let (outcome, call) = match (self.generic, self.real.as_mut()) {
            (Some(generic), Some(work)) => {
                let f = |a: &Args<f64>| generic.forward_f64(a);
                let outcome = ask(
                    work,
                    &f,
                    &self.w,
                    (slot, name),
                    targets,
                    question,
                    &mut evals,
                );
                (outcome, "forward (in f64)")
            }
            (Some(generic), None) => {
                self.ensure_real(generic)?;
                return self.ask(slot, targets, question);
            }
            (None, _) => {
                let layer = self.layer;
                let f = |a: &Args<L::Real>| layer.forward(a);
                let outcome = ask(
                    &mut self.own,
                    &f,
                    &self.w,
                    (slot, name),
                    targets,
                    question,
                    &mut evals,
                );
                (outcome, "forward")
            }
        };
        self.evals += evals;
        outcome.map_err(|c| c.fault.into_error(self.layer_name, call, c.at))
    }

    /// A real-difference estimate of element `j` of tensor `slot`.
    pub(crate) fn real_estimate(
        &mut self,
        slot: usize,
        j: usize,
        scheme: Scheme,
    ) -> Result<Estimate, Error> {
        match self.ask(slot, &[(j, 1.0)], Ask::Estimate(scheme))? {
            Answer::Estimate(e) => Ok(e),
            _ => unreachable!("an estimate was asked for"),
        }
    }

    /// The cheap small-step check of element `j` (value and rounding), in
    /// real arithmetic.
    pub(crate) fn quick_check(
        &mut self,
        slot: usize,
        j: usize,
    ) -> Result<Option<(f64, f64)>, Error> {
        match self.ask(slot, &[(j, 1.0)], Ask::Check)? {
            Answer::Check(c) => Ok(c.map(|c| (c.value, c.rounding))),
            _ => unreachable!("a check was asked for"),
        }
    }

    /// The one-sided kink test at one element, in real arithmetic. For an
    /// `f32` layer with a generic forward the test runs in `f64` first and,
    /// when that sees no kink, in the layer's own precision: two values that
    /// differ in `f64` can tie in `f32`, and the layer's backward then routes
    /// its gradient by the `f32` tie.
    pub(crate) fn kink(&mut self, slot: usize, j: usize) -> Result<Option<KinkProbe>, Error> {
        let probe = match self.ask(slot, &[(j, 1.0)], Ask::Kink(KINK_STEP))? {
            Answer::Probe(p) => p,
            _ => unreachable!("a probe was asked for"),
        };
        if probe.is_some() || self.generic.is_none() || L::Real::EPS <= f64::EPSILON {
            return Ok(probe);
        }
        let name = self.slot_names[slot].as_str();
        let layer = self.layer;
        let f = |a: &Args<L::Real>| layer.forward(a);
        let mut evals = 0;
        let answer = ask(
            &mut self.own,
            &f,
            &self.w,
            (slot, name),
            &[(j, 1.0)],
            Ask::OwnKink(KINK_STEP),
            &mut evals,
        );
        self.evals += evals;
        match answer {
            Ok(Answer::Probe(p)) => Ok(p),
            Ok(_) => unreachable!("a probe was asked for"),
            Err(c) => Err(c.fault.into_error(self.layer_name, "forward", c.at)),
        }
    }

    /// The kink test at the scale of a real-difference stencil,
    /// 4ε^(1/3)·max(|x|, 1): a kink further from x than the point test
    /// sees (a ReLU at 0 beside an x of 10⁻⁶) but inside the steps that
    /// real differences take. Any kink found is reported as not at the
    /// point.
    pub(crate) fn kink_in_stencil(
        &mut self,
        slot: usize,
        j: usize,
    ) -> Result<Option<KinkProbe>, Error> {
        match self.ask(slot, &[(j, 1.0)], Ask::StencilKink(KINK_STEP))? {
            Answer::Probe(p) => Ok(p.map(|p| KinkProbe {
                at_point: false,
                ..p
            })),
            _ => unreachable!("a probe was asked for"),
        }
    }

    /// One-sided derivatives for a joint move of several elements.
    pub(crate) fn joint(
        &mut self,
        slot: usize,
        group: &[usize],
    ) -> Result<Option<KinkProbe>, Error> {
        let targets: Vec<(usize, f64)> = group.iter().map(|&j| (j, 1.0)).collect();
        match self.ask(slot, &targets, Ask::Joint(KINK_STEP))? {
            Answer::Probe(p) => Ok(p),
            _ => unreachable!("a probe was asked for"),
        }
    }

    /// The complex-step derivative along `targets` (flat position and
    /// direction weight) of tensor `slot`, with step `h`.
    fn complex_along(
        &mut self,
        slot: usize,
        targets: &[(usize, f64)],
        h: f64,
    ) -> Result<Directional, Error> {
        Ok(match self.complex_outputs(slot, targets, h)? {
            Some(y) => complex::read(&y, &self.w_per_output, h, &self.amplification),
            None => Directional {
                value: f64::NAN,
                ..Directional::default()
            },
        })
    }

    /// The complex forward's outputs with `targets` seeded by step `h`; a
    /// panic comes back as the error, naming the element and the step.
    fn complex_outputs(
        &mut self,
        slot: usize,
        targets: &[(usize, f64)],
        h: f64,
    ) -> Result<Option<Vec<Tensor<ComplexStep<f64>>>>, Error> {
        let (Some(generic), Some(work)) = (self.generic, self.complex.as_mut()) else {
            unreachable!("the complex step needs a generic forward")
        };
        let mut caught = None;
        let mut forward = |a: &Args<ComplexStep<f64>>| match guarded(|| generic.forward_complex(a))
        {
            Ok(y) => Some(y),
            Err(m) => {
                caught = Some(m);
                None
            }
        };
        let y = complex::seeded(work, &mut forward, slot, targets, h);
        self.evals += 1;
        match caught {
            None => Ok(y),
            Some(fault) => {
                let x = self.own.args.all()[slot].data()[targets[0].0].as_f64();
                let at = if targets.len() == 1 {
                    format!(
                        " while `{}` {} carried the complex step {} + {}i",
                        self.slot_names[slot],
                        self.own.args.all()[slot].index_of(targets[0].0),
                        num(x),
                        num(h)
                    )
                } else {
                    format!(
                        " while `{}` carried a complex direction",
                        self.slot_names[slot]
                    )
                };
                Err(fault.into_error(self.layer_name, "forward (complex step)", at))
            }
        }
    }

    /// A tie at the point that only the complex step sees: two values
    /// equal in the computed forward though not in exact arithmetic (two
    /// differences that both round to 0 under a max), where real
    /// differences find φ flat or smooth. Seeding +ih and −ih gives each
    /// output's two one-sided derivatives (`ComplexStep` breaks exact ties
    /// by the imaginary part); a kink at the point when they differ by more
    /// than rounding. Two complex forwards.
    pub(crate) fn complex_sides(
        &mut self,
        slot: usize,
        j: usize,
    ) -> Result<Option<KinkProbe>, Error> {
        let x = self.own.args.all()[slot].data()[j].as_f64();
        let h = complex::step_for(x);
        let (Some(plus), Some(minus)) = (
            self.complex_outputs(slot, &[(j, 1.0)], h)?,
            self.complex_outputs(slot, &[(j, 1.0)], -h)?,
        ) else {
            return Ok(None);
        };
        Ok(
            complex::sides(&plus, &minus, &self.w_per_output, h).and_then(|(low, high, noise)| {
                (high - low > noise).then_some(KinkProbe {
                    left: low,
                    right: high,
                    noise,
                    at_point: true,
                })
            }),
        )
    }

    /// The complex-step estimate of element `j` of tensor `slot`.
    ///
    /// For a tiny element (|x| < 1e-8, normal) the step is relative to x
    /// and a second evaluation at twice the step measures the truncation:
    /// Im φ(x + ih)/h = φ′ − (h²/6)φ‴ + …, so the two differ by about
    /// 3·(h²/6)|φ‴| and the error bar includes that difference.
    pub(crate) fn complex_estimate(&mut self, slot: usize, j: usize) -> Result<Estimate, Error> {
        let x = self.own.args.all()[slot].data()[j].as_f64();
        let h = complex::step_for(x);
        let d = self.complex_along(slot, &[(j, 1.0)], h)?;
        let mut error = 4.0 * f64::EPSILON * d.terms + d.underflow;
        let mut evals = 1;
        if complex::tiny(x) && d.finite {
            let d2 = self.complex_along(slot, &[(j, 1.0)], 2.0 * h)?;
            evals += 1;
            error += (d2.value - d.value).abs() / 3.0 + d2.underflow;
        }
        let mut d = d;
        if d.finite && d.terms > 0.0 && d.terms * h < NEAR_SUBNORMAL {
            if let Some((wide, wide_error)) = self.complex_wide(slot, j, x, d.terms)? {
                error = wide_error;
                d = wide;
            }
            evals += 2;
        }
        Ok(Estimate {
            value: if d.finite { d.value } else { f64::NAN },
            error,
            scale: d.terms,
            forward_scale: d.touched / x.abs().max(1.0),
            evals,
            step: 0.0,
            conclusive: true,
            amplification: d.amplification,
        })
    }

    /// The complex step again at a larger step, for a derivative so small
    /// that h·Σ|terms| comes within 2¹⁰⁰ of the subnormal range (gradients
    /// near 1e-300), or that read as exactly 0 while such underflow may
    /// have hidden it (`terms` = 0): intermediates whose imaginary parts go
    /// subnormal before the outputs' do lose digits, or the whole
    /// derivative. A larger step keeps them normal; its truncation
    /// (Im φ(x + ih)/h = φ′ − h²φ‴/6 + …) is measured at twice the step, as
    /// for tiny elements. The step is at most 1e-6 of the scale φ bends
    /// on: x itself for a tiny element, max(|x|, 1) otherwise (truncation
    /// about 1e-13). Returns the derivative and its error (two forwards),
    /// or `None` when either was not finite.
    fn complex_wide(
        &mut self,
        slot: usize,
        j: usize,
        x: f64,
        terms: f64,
    ) -> Result<Option<(Directional, f64)>, Error> {
        let room = if complex::tiny(x) {
            x.abs()
        } else {
            x.abs().max(1.0)
        };
        // Aim h·Σ|terms| another 2²⁰⁰ higher, well inside the normals.
        let wide = (NEAR_SUBNORMAL * 2f64.powi(200) / terms)
            .min(1e-6 * room)
            .max(complex::step_for(x));
        let d1 = self.complex_along(slot, &[(j, 1.0)], wide)?;
        let d2 = self.complex_along(slot, &[(j, 1.0)], 2.0 * wide)?;
        Ok((d1.finite && d2.finite).then(|| {
            let error = 4.0 * f64::EPSILON * d1.terms
                + d1.underflow
                + (d2.value - d1.value).abs() / 3.0
                + d2.underflow;
            (d1, error)
        }))
    }

    /// The derivative of φ along a direction of tensor `slot`: every
    /// element `j` of `direction` moved by t·vⱼ at once. The complex step
    /// takes one evaluation with h = 1e-20·max(|x|, 1) over the largest
    /// element moved; real schemes take their usual stencil along the
    /// line. The estimate's scale is the line's Σ|terms|.
    pub(crate) fn directional(
        &mut self,
        slot: usize,
        direction: &[(usize, f64)],
        scheme: Scheme,
    ) -> Result<Estimate, Error> {
        if direction.is_empty() {
            // Nothing moves: φ does not change.
            return Ok(Estimate {
                value: 0.0,
                error: 0.0,
                conclusive: true,
                ..Estimate::not_finite(0)
            });
        }
        if scheme != Scheme::ComplexStep {
            return match self.ask(slot, direction, Ask::Estimate(scheme))? {
                Answer::Estimate(e) => Ok(e),
                _ => unreachable!("an estimate was asked for"),
            };
        }
        let data = self.own.args.all()[slot].data();
        let largest = direction
            .iter()
            .fold(0.0_f64, |m, &(j, _)| m.max(data[j].as_f64().abs()));
        let h = 1e-20 * largest.max(1.0);
        let d = self.complex_along(slot, direction, h)?;
        Ok(Estimate {
            value: if d.finite { d.value } else { f64::NAN },
            error: 4.0 * f64::EPSILON * d.terms + d.underflow,
            scale: d.terms,
            forward_scale: d.touched / largest.max(1.0),
            evals: 1,
            step: 0.0,
            conclusive: true,
            amplification: d.amplification,
        })
    }

    /// Central differences of element `j` of tensor `slot` over a sweep
    /// of steps, in the precision references are computed in (`f64` for a
    /// generic forward, the layer's own otherwise): (half-width,
    /// derivative) pairs, NaN where the forward was not finite or panicked.
    /// Moves the element in place like every other question.
    pub(crate) fn sweep(&mut self, slot: usize, j: usize) -> Result<Vec<(f64, f64)>, Error> {
        match self.ask(slot, &[(j, 1.0)], Ask::Sweep)? {
            Answer::Sweep(points) => Ok(points),
            _ => unreachable!("a sweep was asked for"),
        }
    }

    /// A central difference over ±h at element `j`, in real arithmetic.
    pub(crate) fn pair(&mut self, slot: usize, j: usize, h: f64) -> Result<Pair, Error> {
        match self.ask(slot, &[(j, 1.0)], Ask::Pair(h))? {
            Answer::Pair(p) => Ok(p),
            _ => unreachable!("a pair was asked for"),
        }
    }

    /// A second look at an element that disagrees and is not at a kink: the
    /// error bar widened by what the forward does at this very point.
    ///
    /// * **The forward's own rounding.** Moves of x by 1 to 4096 ulps either
    ///   way (`LOOK_OFFSETS`) scatter φ about a smooth curve by the
    ///   forward's rounding there.
    ///   Where it exceeds a few ulps of the outputs (a series that cancels,
    ///   `1 + tanh(u)` near u = −3), a backward following the same formulas
    ///   loses as much: the backward's floor is multiplied by that
    ///   amplification, and a real-difference reference gets that noise
    ///   over its smallest step added to its error.
    /// * **How the derivative decays.** A backward that derives a local
    ///   derivative from a forward value (`1 − t²` from t = tanh u) has an
    ///   absolute error of ε·|t| in that factor, times how fast the
    ///   pre-activation moves with x. At saturation that rate shows in the
    ///   derivative itself, which decays like an exponential: |φ″/φ′| and
    ///   |φ‴/φ″| agree. Their smaller one (capped at 1/step of the
    ///   differences) replaces 1/max(|x|, 1) in the forward scale of the
    ///   floor when it is larger.
    /// * **The complex step's own limits.** Its imaginary parts round along
    ///   the forward's formulas (an erf series near |x| = 2.5 cancels), and
    ///   a derivative that is zero up to O(h²) terms reads as those terms:
    ///   the same derivative at x moved by 1 to 4096 ulps, and at twice the
    ///   step, add their spread.
    ///
    /// `None` when the look adds nothing.
    pub(crate) fn second_look(
        &mut self,
        slot: usize,
        j: usize,
        first: &Estimate,
        scheme: Scheme,
    ) -> Result<Option<Estimate>, Error> {
        let x = self.own.args.all()[slot].data()[j].as_f64();
        if !x.is_finite() || !first.value.is_finite() {
            return Ok(None);
        }
        let look = match self.ask(slot, &[(j, 1.0)], Ask::Look)? {
            Answer::Look(l) => l,
            _ => unreachable!("a look was asked for"),
        };
        let eps = if self.is_generic() {
            f64::EPSILON
        } else {
            L::Real::EPS
        };
        let mut e = *first;
        e.evals += LOOK_OFFSETS.len() + 4;
        if look.touched > 0.0 {
            e.amplification = e.amplification.max(look.noise / (4.0 * eps * look.touched));
        }
        // The rate at which the derivative decays, |φ″/φ′|, where it
        // decays like an exponential (|φ‴/φ″| agrees): a saturating
        // nonlinearity behind a gain. A derivative merely crossing zero (x²
        // at small x) has a large |φ″/φ′| but a small |φ‴/φ″|, and adds
        // nothing.
        let size = first.value.abs().max(look.curvature * look.bend_step);
        if size > 0.0 && look.curvature > 0.0 {
            let decay = (look.curvature / size).min(look.third / look.curvature);
            let touched = first.forward_scale * x.abs().max(1.0);
            e.forward_scale = e.forward_scale.max(touched * decay);
        }
        // What the backward's own formulas lose here (a generic forward
        // only): `1 − t²` at saturation, a cancelling series.
        if let Some(b) = self.backward_rounding(slot, j) {
            e.error += b;
            e.evals += 1;
        }
        if scheme == Scheme::ComplexStep {
            let h = complex::step_for(x);
            // A derivative that read as (nearly) 0 where underflow can hide
            // it: x·σ(βx) at βx = −707 has a derivative near 1e-305 whose
            // imaginary part, 1e-20 times smaller, is lost inside σ.
            if first.scale * h < NEAR_SUBNORMAL {
                e.evals += 2;
                if let Some((wide, error)) = self.complex_wide(slot, j, x, first.scale)? {
                    e.value = wide.value;
                    e.scale = wide.terms;
                    e.error = e.error.max(error);
                }
            }
            let twice = self.complex_along(slot, &[(j, 1.0)], 2.0 * h)?;
            e.evals += 1;
            if twice.finite {
                e.error += (twice.value - first.value).abs() / 3.0;
            }
            e.error += 2.0 * self.complex_jitter(slot, j, x, first.value)?;
            e.evals += LOOK_OFFSETS.len();
        } else {
            if e.step > 0.0 {
                // The smallest step of the estimate is about a sixteenth of
                // its widest; the forward's scatter over it is that
                // reference's own rounding, which its error bar may have
                // understated.
                e.error += 4.0 * look.noise / (e.step / 16.0);
            }
            // Nothing moved over any of the reference's steps: a term the
            // forward rounds away still has a slope, measured across the
            // stairs further out.
            if first.forward_scale == 0.0 && first.value == 0.0 {
                if let Answer::Stairs(Some(s)) = self.ask(slot, &[(j, 1.0)], Ask::Stairs)? {
                    e.value = s.value;
                    e.error = e.error.max(s.error);
                    e.conclusive = false;
                    e.evals += s.evals;
                }
            }
        }
        Ok(Some(e))
    }

    /// What a backward that follows the generic forward's formulas can
    /// lose on element `j` of tensor `slot`, in absolute terms: the running
    /// error bound of Σᵢ wᵢ ∂yᵢ/∂x computed in forward mode, in the layer's
    /// own precision, with each function's derivative taken from the usual
    /// formula ([`Traced`]). `None` for a plain layer, a forward that
    /// panics, or a bound that is not finite (which must not silence the
    /// element).
    fn backward_rounding(&mut self, slot: usize, j: usize) -> Option<f64> {
        let generic = self.generic?;
        let own = &self.own.args;
        let wide_args = self
            .traced
            .get_or_insert_with(|| own.map(|x| Traced::input(x.as_f64(), 0.0)));
        wide_args.all_mut()[slot].data_mut()[j].d = 1.0;
        let wide = guarded(|| generic.forward_traced_f64(wide_args));
        wide_args.all_mut()[slot].data_mut()[j].d = 0.0;
        self.evals += 1;
        let wide = wide.ok()?;
        let total = if L::Real::EPS < 1e-10 {
            let u = f64::EPSILON / 2.0;
            weigh(&self.w_per_output, &wide, |w, v| w.abs() * v.ed * u)?
        } else {
            // `Real` is sealed to f32 and f64: this is an f32 layer.
            #[allow(clippy::cast_possible_truncation)]
            let narrow_args = self
                .traced_f32
                .get_or_insert_with(|| own.map(|x| Traced::input(x.as_f64() as f32, 0.0)));
            narrow_args.all_mut()[slot].data_mut()[j].d = 1.0;
            let narrow = guarded(|| generic.forward_traced_f32(narrow_args));
            narrow_args.all_mut()[slot].data_mut()[j].d = 0.0;
            self.evals += 1;
            let narrow = narrow.ok()?;
            let exact = weigh(&self.w_per_output, &wide, |w, v| w * v.d)?;
            let own = weigh(&self.w_per_output, &narrow, |w, v| w * f64::from(v.d))?;
            (own - exact).abs()
        };
        total.is_finite().then_some(total)
    }

    /// The scatter of the complex-step derivative when x moves by a few
    /// ulps of max(|x|, 1) either way: its rounding along the forward's
    /// formulas.
    fn complex_jitter(&mut self, slot: usize, j: usize, x: f64, at_x: f64) -> Result<f64, Error> {
        let mut offsets = Vec::with_capacity(LOOK_OFFSETS.len());
        let mut values = Vec::with_capacity(LOOK_OFFSETS.len());
        for k in LOOK_OFFSETS {
            let moved = x + k * f64::EPSILON * x.abs().max(1.0);
            if let Some(work) = self.complex.as_mut() {
                work.all_mut()[slot].data_mut()[j].re = moved;
            }
            let d = self.complex_along(slot, &[(j, 1.0)], complex::step_for(moved));
            if let Some(work) = self.complex.as_mut() {
                work.all_mut()[slot].data_mut()[j].re = x;
            }
            let d = d?;
            if d.finite {
                offsets.push(k);
                values.push(d.value);
            }
        }
        Ok(scatter(&offsets, &values, at_x))
    }
}
