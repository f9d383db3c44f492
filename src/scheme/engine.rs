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
use super::{
    central, joint_probe, kink_test, ridders, Estimate, KinkProbe, Line, Pair, Sample, Scheme,
};
use crate::error::Error;
use crate::format::num;
use crate::layer::sealed::Reference;
use crate::layer::{Args, Forward};
use crate::scalar::{ComplexStep, Real};
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

/// Runs `f`, turning a panic into its message.
pub(crate) fn guarded<T>(f: impl FnOnce() -> T) -> Result<T, String> {
    catch_unwind(AssertUnwindSafe(f)).map_err(|p| panic_message(p.as_ref()))
}

/// A working copy of the arguments in one precision, with the forward's
/// outputs at the point (in `f64`) and a buffer reused across evaluations.
pub(crate) struct Working<U> {
    args: Args<U>,
    /// Outputs at the point, flattened over all outputs.
    base: Vec<f64>,
    /// yᵢ(x + t) − yᵢ(x) of the last evaluation.
    diff: Vec<f64>,
    /// `diff` of the `+h` end of the current pair.
    kept: Vec<f64>,
}

impl<U: Real> Working<U> {
    fn new(args: Args<U>, outputs: &[Tensor<U>]) -> Self {
        let base: Vec<f64> = outputs
            .iter()
            .flat_map(|t| t.data().iter().map(|v| v.as_f64()))
            .collect();
        let n = base.len();
        Working {
            args,
            base,
            diff: vec![0.0; n],
            kept: vec![0.0; n],
        }
    }
}

/// Where a panic happened during a line's evaluations.
struct Caught {
    message: String,
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
            Err(message) => {
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
                    self.caught = Some(Caught { message, at });
                }
                return Sample {
                    step,
                    delta: f64::NAN,
                    touched: 0.0,
                    finite: false,
                };
            }
        };
        let lengths_ok = y.iter().map(Tensor::len).sum::<usize>() == self.work.base.len();
        let mut sample = Sample {
            step,
            delta: 0.0,
            touched: 0.0,
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
                sample.delta += wi * d;
                sample.touched += wi.abs() * yi.abs().max(b.abs());
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
    fn at(&mut self, t: f64) -> Sample {
        self.eval(t)
    }
    fn pair(&mut self, h: f64) -> Pair {
        let p = self.eval(h);
        std::mem::swap(&mut self.work.diff, &mut self.work.kept);
        let m = self.eval(-h);
        let width = p.step - m.step;
        let terms: f64 = self
            .work
            .kept
            .iter()
            .zip(&self.work.diff)
            .zip(self.w)
            .map(|((a, b), w)| (w * (a - b)).abs())
            .sum();
        Pair {
            derivative: (p.delta - m.delta) / width,
            terms: terms / width,
            touched: p.touched.max(m.touched),
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
    Kink(f64),
    Joint(f64),
}

/// What a line answered.
enum Answer {
    Estimate(Estimate),
    Check(Option<ridders::Check>),
    Probe(Option<KinkProbe>),
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
        Ask::Estimate(Scheme::Central) => Answer::Estimate(central::estimate(&mut line)),
        Ask::Estimate(_) => Answer::Estimate(ridders::estimate(&mut line)),
        Ask::Check => Answer::Check(ridders::small_step_check(&mut line)),
        Ask::Kink(factor) => {
            let h = factor * U::EPS.cbrt() * line.scale();
            Answer::Probe(kink_test(&mut line, h))
        }
        Ask::Joint(factor) => {
            let h = factor * U::EPS.cbrt() * line.scale();
            Answer::Probe(joint_probe(&mut line, h))
        }
    };
    *evals += line.evals;
    match line.caught {
        Some(c) => Err(c),
        None => Ok(answer),
    }
}

/// Step of the kink test, as a multiple of ε^(1/3)·max(|x|, 1): small
/// enough that a smooth φ's curvature cannot pass for a kink. (A kink
/// further out that spoils a wide Ridders stencil shows up as a wide or
/// inconsistent estimate instead.)
const KINK_STEP: f64 = 4.0;

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
    /// Forward evaluations spent.
    pub evals: usize,
}

impl<'a, L: Forward + ?Sized> Engine<'a, L> {
    /// `outputs` are the layer's outputs at `args`; `w` the upstream
    /// weights per output.
    pub(crate) fn new(
        layer: &'a L,
        layer_name: &'a str,
        slot_names: Vec<String>,
        args: &Args<L::Real>,
        outputs: &[Tensor<L::Real>],
        w: Vec<Vec<f64>>,
        use_generic: bool,
    ) -> Self {
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
            evals: 0,
        }
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
        let base =
            guarded(|| generic.forward_f64(&args)).map_err(|message| Error::LayerPanicked {
                layer: self.layer_name.to_string(),
                call: "forward (in f64)".to_string(),
                at: String::new(),
                message,
            })?;
        self.evals += 1;
        self.real = Some(Working::new(args, &base));
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
        outcome.map_err(|c| Error::LayerPanicked {
            layer: self.layer_name.to_string(),
            call: call.to_string(),
            at: c.at,
            message: c.message,
        })
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

    /// The one-sided kink test at one element, in real arithmetic.
    pub(crate) fn kink(&mut self, slot: usize, j: usize) -> Result<Option<KinkProbe>, Error> {
        match self.ask(slot, &[(j, 1.0)], Ask::Kink(KINK_STEP))? {
            Answer::Probe(p) => Ok(p),
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
        let d = complex::evaluate(work, &mut forward, &self.w_per_output, slot, targets, h);
        self.evals += 1;
        match caught {
            None => Ok(d),
            Some(message) => {
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
                Err(Error::LayerPanicked {
                    layer: self.layer_name.to_string(),
                    call: "forward (complex step)".to_string(),
                    at,
                    message,
                })
            }
        }
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
        Ok(Estimate {
            value: if d.finite { d.value } else { f64::NAN },
            error,
            scale: d.terms,
            forward_scale: d.touched / x.abs().max(1.0),
            evals,
            step: 0.0,
            conclusive: true,
        })
    }

    /// A second look at a complex-step estimate that disagrees: the same
    /// derivative at the element moved by a few ulps either way. The
    /// complex step is exact for the *computed* forward, but its imaginary
    /// parts round along the forward's own formulas; where those cancel
    /// (an erf series near |x| = 2.5, `1 + tanh(u)` at u ≈ −3) the
    /// reference's error is far above 4ε·Σ|terms|, and a backward following
    /// the same formulas loses as much. The rounding pattern changes from
    /// one ulp to the next while the derivative does not, so the spread of
    /// these values measures that error at this point. `None` when there
    /// is no spread to add (or the element is 0).
    pub(crate) fn complex_second_look(
        &mut self,
        slot: usize,
        j: usize,
        first: &Estimate,
    ) -> Result<Option<Estimate>, Error> {
        let x = self.own.args.all()[slot].data()[j].as_f64();
        if x == 0.0 || !x.is_finite() {
            return Ok(None);
        }
        let mut spread = 0.0_f64;
        for k in [-2.0, -1.0, 1.0, 2.0] {
            let moved = x * (1.0 + k * f64::EPSILON);
            let h = complex::step_for(moved);
            let Some(work) = self.complex.as_mut() else {
                return Ok(None);
            };
            work.all_mut()[slot].data_mut()[j].re = moved;
            let d = self.complex_along(slot, &[(j, 1.0)], h);
            if let Some(work) = self.complex.as_mut() {
                work.all_mut()[slot].data_mut()[j].re = x;
            }
            let d = d?;
            if d.finite {
                spread = spread.max((d.value - first.value).abs());
            }
        }
        if spread == 0.0 {
            return Ok(None);
        }
        Ok(Some(Estimate {
            error: first.error + 2.0 * spread,
            evals: first.evals + 4,
            ..*first
        }))
    }
}
