//! The audit: compares every element of every backward gradient with a
//! numerical reference and returns a [`Report`]. It never prints.

use rand::{RngExt, SeedableRng};

use crate::complex_step::ComplexStep;
use crate::diagnosis::{self, Evidence};
use crate::error::Error;
use crate::layer::{Args, Layer, ReferenceForward, Role, Signature};
use crate::report::{ElementCheck, ElementStatus, JointKink, Report, Row, Verdict, Worst};
use crate::scalar::Real;
use crate::scheme::{self, Estimate, KinkProbe, Line, Pair, Sample, Scheme};
use crate::tensor::{Index, Tensor};
use crate::tolerance::Tolerance;

/// The seed used when none is set.
pub const DEFAULT_SEED: u64 = 0x00C0_FFEE;

/// Step of the complex-step reference in `f64` (Martins, Sturdza & Alonso
/// 2003 recommend 1e-20; it keeps Im parts well above the subnormal range
/// for derivatives down to ~1e-280).
pub const COMPLEX_STEP: f64 = 1e-20;

/// Settings of a gradient audit (a builder), and the entry point
/// [`run`](Audit::run).
///
/// ```
/// use plumbline::{Audit, Scheme};
/// let audit = Audit::new().seed(7).margin(8.0).scheme(Scheme::Ridders);
/// assert_eq!(audit.settings().seed, 7);
/// ```
#[derive(Clone, Debug, PartialEq)]
pub struct Audit {
    settings: Settings,
}

/// The values an [`Audit`] runs with.
#[derive(Clone, Debug, PartialEq)]
pub struct Settings {
    /// Seed of the random upstream gradient (default [`DEFAULT_SEED`]).
    pub seed: u64,
    /// Force a scheme; `None` picks complex step for a
    /// [`GenericLayer`](crate::GenericLayer), else Ridders' method.
    pub scheme: Option<Scheme>,
    /// How bounds are set.
    pub tolerance: Tolerance,
    /// Fail elements at a kink whose analytic value lies outside the
    /// one-sided derivatives (default `false`: they are listed apart).
    pub kinks_fail: bool,
    /// Name shown in the report instead of the layer's type name.
    pub name: Option<String>,
    /// Check at most this many elements per tensor, drawn at random from
    /// the seed (default `None`: every element).
    pub max_elements: Option<usize>,
}

impl Default for Settings {
    fn default() -> Self {
        Settings {
            seed: DEFAULT_SEED,
            scheme: None,
            tolerance: Tolerance::default(),
            kinks_fail: false,
            name: None,
            max_elements: None,
        }
    }
}

impl Default for Audit {
    fn default() -> Self {
        Audit::new()
    }
}

impl Audit {
    /// An audit with default settings.
    pub fn new() -> Self {
        Audit {
            settings: Settings::default(),
        }
    }

    /// An audit with the given settings.
    pub fn with_settings(settings: Settings) -> Self {
        Audit { settings }
    }

    /// The settings in force.
    pub fn settings(&self) -> &Settings {
        &self.settings
    }

    /// Seed of the random upstream gradient.
    #[must_use]
    pub fn seed(mut self, seed: u64) -> Self {
        self.settings.seed = seed;
        self
    }

    /// Forces a difference scheme.
    #[must_use]
    pub fn scheme(mut self, scheme: Scheme) -> Self {
        self.settings.scheme = Some(scheme);
        self
    }

    /// Multiple of the error bar an element may deviate by (default 4).
    #[must_use]
    pub fn margin(mut self, margin: f64) -> Self {
        self.settings.tolerance.margin = margin;
        self
    }

    /// A fixed absolute bound instead of the error bar (like approx's
    /// `epsilon`). Combined with [`max_relative`](Audit::max_relative), an
    /// element agrees if either holds.
    #[must_use]
    pub fn epsilon(mut self, epsilon: f64) -> Self {
        self.settings.tolerance.epsilon = Some(epsilon);
        self
    }

    /// A fixed relative bound instead of the error bar (like approx's
    /// `max_relative`).
    #[must_use]
    pub fn max_relative(mut self, max_relative: f64) -> Self {
        self.settings.tolerance.max_relative = Some(max_relative);
        self
    }

    /// Whether elements at a kink that the analytic value does not fit fail.
    #[must_use]
    pub fn kinks_fail(mut self, yes: bool) -> Self {
        self.settings.kinks_fail = yes;
        self
    }

    /// Checks at most `n` elements of each tensor, a random subset drawn
    /// from the seed (every element of smaller tensors). An audit costs one
    /// to a few dozen forwards per checked element, so this bounds the cost
    /// for large layers; the report says how many were checked.
    ///
    /// ```
    /// use plumbline::Audit;
    /// assert_eq!(Audit::new().max_elements(64).settings().max_elements, Some(64));
    /// ```
    #[must_use]
    pub fn max_elements(mut self, n: usize) -> Self {
        self.settings.max_elements = Some(n);
        self
    }

    /// The layer name shown in the report.
    #[must_use]
    pub fn name(mut self, name: impl Into<String>) -> Self {
        self.settings.name = Some(name.into());
        self
    }

    /// Audits `layer` at `args`.
    ///
    /// Errors only on misuse (argument count or shape, malformed signature,
    /// a forward returning the wrong outputs, a scheme the layer cannot
    /// support). A wrong gradient is a failing row of the report, not an
    /// error.
    pub fn run<L: Layer + ?Sized>(&self, layer: &L, args: &Args<L::Real>) -> Result<Report, Error> {
        let s = &self.settings;
        let name = s.name.clone().unwrap_or_else(short_type_name::<L>);
        let sig = layer.signature();
        let bindings = sig.bind(&name, args)?;
        let reference = layer.reference_forward();
        let scheme = match (s.scheme, reference.is_some()) {
            (Some(Scheme::ComplexStep), false) => {
                return Err(Error::Setting {
                    setting: "scheme".into(),
                    value: "complex-step".into(),
                    detail: format!(
                        "layer `{name}` has no generic forward; implement `GenericLayer` for it, or use `ridders` or `central`"
                    ),
                })
            }
            (Some(sch), _) => sch,
            (None, true) => Scheme::ComplexStep,
            (None, false) => Scheme::Ridders,
        };

        let mut counts = Counts::default();
        let y0 = layer.forward(args);
        let y1 = layer.forward(args);
        counts.forward += 2;
        sig.check_outputs(&name, "forward", &bindings, &y0)?;
        sig.check_outputs(&name, "forward (second call)", &bindings, &y1)?;
        let mut evidence = Evidence {
            forward_change: first_difference(&sig, &y0, &y1),
            nonfinite_output: first_nonfinite(&sig, &y0),
            sizes: bindings.named_sizes(),
            ..Evidence::default()
        };

        let mut rng = rand::rngs::StdRng::seed_from_u64(s.seed);
        let upstream: Vec<Tensor<L::Real>> = y0
            .iter()
            .map(|y| y.map(|_| L::Real::from_f64(rng.random_range(-1.0..1.0))))
            .collect();
        let w: Vec<Vec<f64>> = upstream
            .iter()
            .map(|u| u.data().iter().map(|v| v.as_f64()).collect())
            .collect();
        let g1 = layer.backward(args, &upstream);
        let g2 = layer.backward(args, &upstream);
        counts.backward += 2;

        let mut numeric = References::new(layer, reference, args, scheme);
        let mut rows = Vec::new();
        let mut notes = Vec::new();
        let mut diff_index = 0;
        for (slot_index, slot) in sig.slots().into_iter().enumerate() {
            if slot.role == Role::Fixed {
                continue;
            }
            let grad = g1.get(diff_index);
            evidence.backward_change = match (grad, g2.get(diff_index)) {
                (Some(a), Some(b)) => first_tensor_difference(a, b),
                _ => None,
            };
            diff_index += 1;
            let len = args.all()[slot_index].len();
            let indices = sample(len, s.max_elements, s.seed, slot_index);
            let (estimates, row_scheme, note) = numeric.slot(slot_index, &indices, &w, &mut counts);
            if let Some(note) = note {
                notes.push(format!("`{}`: {note}", slot.name));
            }
            let shape = args.all()[slot_index].shape().to_vec();
            let row = self.compare(
                &slot.name,
                slot.role,
                shape,
                grad.map(|g| g.map(|v| v.as_f64())),
                &indices,
                estimates,
                row_scheme,
                L::Real::EPS,
                &mut |probe| match probe {
                    Probe::One(j) => numeric.kink(slot_index, j, &w, &mut counts),
                    Probe::Group(group) => numeric.joint(slot_index, group, &w, &mut counts),
                },
                &evidence,
            );
            rows.push(row);
        }
        // Failing rows first, then by relative error, worst first.
        rows.sort_by(|a, b| {
            (a.verdict.is_pass().cmp(&b.verdict.is_pass()))
                .then(b.max_rel_error.total_cmp(&a.max_rel_error))
        });
        Ok(Report {
            layer: name,
            precision: L::Real::NAME.to_string(),
            reference_precision: numeric.precision_name(),
            seed: s.seed,
            tolerance: s.tolerance.clone(),
            rows,
            forward_evals: counts.forward,
            backward_evals: counts.backward,
            kinks_fail: s.kinks_fail,
            notes,
        })
    }

    #[allow(clippy::too_many_arguments)]
    fn compare(
        &self,
        name: &str,
        role: Role,
        shape: Vec<usize>,
        grad: Option<Tensor<f64>>,
        indices: &[usize],
        estimates: Vec<Estimate>,
        scheme: Scheme,
        layer_eps: f64,
        kink: &mut dyn FnMut(Probe<'_>) -> Option<KinkProbe>,
        evidence: &Evidence,
    ) -> Row {
        let tol = &self.settings.tolerance;
        let same_shape = grad.as_ref().is_some_and(|g| g.shape() == shape.as_slice());
        let mut elements = Vec::with_capacity(estimates.len());
        for (&j, est) in indices.iter().zip(&estimates) {
            let analytic = match (&grad, same_shape) {
                (Some(g), true) => g.data()[j],
                _ => f64::NAN,
            };
            // The bound does not depend on a missing or non-finite analytic
            // value (the status below fails it anyway), so diagnoses can
            // still use it.
            let a_for_bound = if analytic.is_finite() {
                analytic
            } else {
                est.value
            };
            let bound = tol.bound(est, a_for_bound, layer_eps);
            let diff = (analytic - est.value).abs();
            let mut status = if !(analytic.is_finite() && est.value.is_finite()) {
                ElementStatus::NotFinite
            } else if !est.conclusive {
                // The reference cannot tell: neither agreement within its
                // (too wide) bound nor a disagreement with its (unreliable)
                // value means anything.
                ElementStatus::Inconclusive
            } else if !Tolerance::accepts(diff, bound) {
                ElementStatus::Disagrees
            } else {
                ElementStatus::Agrees
            };
            if status == ElementStatus::Disagrees {
                match kink(Probe::One(j)) {
                    Some(probe) if probe.at_point => {
                        let lo = probe.left.min(probe.right) - bound - probe.noise;
                        let hi = probe.left.max(probe.right) + bound + probe.noise;
                        status = ElementStatus::Kink {
                            probe,
                            fits: (lo..=hi).contains(&analytic),
                        };
                    }
                    // A kink inside the reference's stencil but not at the
                    // point: the reference straddles it and cannot judge.
                    Some(_) => status = ElementStatus::Inconclusive,
                    None => {}
                }
            }
            elements.push(ElementCheck {
                index: j,
                analytic,
                numeric: est.value,
                error: est.error,
                scale: est.scale,
                bound,
                status,
            });
        }
        // Once a tensor has a kink, its agreeing elements are probed too:
        // an element that matched the reference by the luck of a tie is at a
        // kink all the same and belongs in the joint move below.
        if elements.iter().any(|e| e.status.is_kink()) {
            for e in elements.iter_mut() {
                if e.status == ElementStatus::Agrees {
                    if let Some(probe) = kink(Probe::One(e.index)).filter(|p| p.at_point) {
                        e.status = ElementStatus::Kink { probe, fits: true };
                    }
                }
            }
        }
        // Several elements at kinks (max-pool ties, ReLUs at 0) are also
        // moved together: the analytic values must add up to a value between
        // the joint one-sided derivatives. Ties routed to every maximum fit
        // one by one but not together.
        let kinked: Vec<&ElementCheck> = elements.iter().filter(|e| e.status.is_kink()).collect();
        let joint_kink = if kinked.len() >= 2 {
            let group: Vec<usize> = kinked.iter().map(|e| e.index).collect();
            kink(Probe::Group(&group)).and_then(|p| {
                let sum: f64 = kinked.iter().map(|e| e.analytic).sum();
                let slack: f64 = kinked.iter().map(|e| e.bound).sum::<f64>() + p.noise;
                let (lo, hi) = (p.left.min(p.right) - slack, p.left.max(p.right) + slack);
                (!(lo..=hi).contains(&sum)).then_some(JointKink {
                    elements: kinked.len(),
                    analytic_sum: sum,
                    left: p.left,
                    right: p.right,
                })
            })
        } else {
            None
        };
        let kinks_fail = self.settings.kinks_fail;
        let fails = |e: &ElementCheck| {
            e.status.is_failure()
                || (kinks_fail && matches!(e.status, ElementStatus::Kink { fits: false, .. }))
        };
        let disagreeing = elements.iter().filter(|e| fails(e)).count();
        let kinks = elements
            .iter()
            .filter(|e| matches!(e.status, ElementStatus::Kink { .. }))
            .count();
        let (mut max_abs, mut max_rel) = (0.0_f64, 0.0_f64);
        let mut worst: Option<(usize, f64)> = None;
        for (j, e) in elements.iter().enumerate() {
            // Kinks are listed apart: they count in the row's figures only
            // when they fail it.
            if matches!(e.status, ElementStatus::Kink { .. }) && !fails(e) {
                continue;
            }
            let diff = (e.analytic - e.numeric).abs();
            let rel = relative_error(e.analytic, e.numeric);
            // NaN compares as the worst of all.
            max_abs = if diff.is_nan() || max_abs.is_nan() {
                f64::NAN
            } else {
                max_abs.max(diff)
            };
            max_rel = if rel.is_nan() || max_rel.is_nan() {
                f64::NAN
            } else {
                max_rel.max(rel)
            };
            let ratio = if e.bound > 0.0 {
                diff / e.bound
            } else if diff > 0.0 {
                f64::INFINITY
            } else {
                0.0
            };
            let ratio = if ratio.is_nan() { f64::INFINITY } else { ratio };
            if worst.is_none_or(|(_, r)| ratio > r) {
                worst = Some((j, ratio));
            }
        }
        let verdict = match &grad {
            None => Verdict::Missing,
            Some(_) if !same_shape => Verdict::WrongShape,
            Some(_)
                if disagreeing > 0
                    || joint_kink.is_some()
                    || evidence.forward_change.is_some()
                    || evidence.backward_change.is_some() =>
            {
                Verdict::Disagrees
            }
            Some(_) => Verdict::Agrees,
        };
        let mut row = Row {
            name: name.to_string(),
            role,
            gradient_shape: grad.as_ref().map(|g| g.shape().to_vec()),
            scheme,
            checked: elements.len(),
            disagreeing,
            kinks,
            of: shape.iter().product(),
            worst: worst.map(|(j, _)| Worst {
                index: Index::from_flat(&shape, elements[j].index),
                analytic: elements[j].analytic,
                numeric: elements[j].numeric,
                bound: elements[j].bound,
            }),
            max_abs_error: max_abs,
            max_rel_error: max_rel,
            verdict,
            joint_kink,
            diagnosis: None,
            shape,
            elements,
        };
        row.diagnosis = diagnosis::diagnose(&row, grad.as_ref(), evidence);
        row
    }
}

/// The flat positions to check in a tensor of `len` elements: all of them,
/// or `max` drawn without replacement (seeded by the audit's seed and the
/// tensor's position), in ascending order.
fn sample(len: usize, max: Option<usize>, seed: u64, slot: usize) -> Vec<usize> {
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

/// |a − n| / max(|a|, |n|), with 0/0 = 0 and NaN for non-finite input.
pub(crate) fn relative_error(a: f64, n: f64) -> f64 {
    let d = (a - n).abs();
    if d == 0.0 {
        return 0.0;
    }
    d / a.abs().max(n.abs())
}

/// What `compare` asks the reference for: the kink test at one element, or
/// one-sided derivatives for a joint move of several.
enum Probe<'a> {
    /// Element j.
    One(usize),
    /// A group of elements moved together.
    Group(&'a [usize]),
}

#[derive(Default)]
struct Counts {
    forward: usize,
    backward: usize,
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
        if let Some(d) = first_tensor_difference(&x.map(|v| v.as_f64()), &y.map(|v| v.as_f64())) {
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
                crate::format::num(a.data()[j].as_f64()),
                crate::format::num(b.data()[j].as_f64())
            )
        })
}

fn first_nonfinite<T: Real>(sig: &Signature, outputs: &[Tensor<T>]) -> Option<String> {
    for (slot, y) in sig.outputs().iter().zip(outputs) {
        if let Some(j) = y.data().iter().position(|v| !v.is_finite()) {
            return Some(format!("output `{}` at {}", slot.name, y.index_of(j)));
        }
    }
    None
}

/// Numerical references for one audit: the working copies of the
/// arguments (made once; elements are moved in place and restored) and the
/// forward to evaluate them with.
enum References<'a, L: Layer + ?Sized> {
    /// The layer's own forward, in its own precision.
    Own {
        layer: &'a L,
        work: Args<L::Real>,
        scheme: Scheme,
    },
    /// A generic forward in `f64` (real work copy) and, for the complex
    /// step, with complex-step numbers.
    Generic {
        forward: &'a dyn ReferenceForward,
        real: Args<f64>,
        complex: Option<Args<ComplexStep<f64>>>,
        scheme: Scheme,
    },
}

impl<'a, L: Layer + ?Sized> References<'a, L> {
    fn new(
        layer: &'a L,
        reference: Option<&'a dyn ReferenceForward>,
        args: &Args<L::Real>,
        scheme: Scheme,
    ) -> Self {
        match reference {
            Some(forward) => References::Generic {
                forward,
                real: args.map(|v| v.as_f64()),
                complex: (scheme == Scheme::ComplexStep)
                    .then(|| args.map(|v| ComplexStep::real(v.as_f64()))),
                scheme,
            },
            None => References::Own {
                layer,
                work: args.clone(),
                scheme,
            },
        }
    }

    fn precision_name(&self) -> String {
        match self {
            References::Own { .. } => L::Real::NAME.to_string(),
            References::Generic { .. } => "f64".to_string(),
        }
    }

    /// Estimates for every element of one argument tensor.
    ///
    /// Also returns the scheme that produced them: a generic forward that
    /// leaves the `Scalar` path (`to_f64()`, `as`) shows no complex-step
    /// derivative at all; when real differences disagree, the tensor falls
    /// back to Ridders' method in `f64` and a note says why.
    fn slot(
        &mut self,
        slot: usize,
        indices: &[usize],
        w: &[Vec<f64>],
        counts: &mut Counts,
    ) -> (Vec<Estimate>, Scheme, Option<String>) {
        match self {
            References::Own {
                layer,
                work,
                scheme,
            } => {
                let forward = |a: &Args<L::Real>| layer.forward(a);
                let est = estimate_all(work, &forward, w, slot, indices, *scheme, counts);
                (est, *scheme, None)
            }
            References::Generic {
                forward,
                complex: Some(work),
                real,
                ..
            } => {
                let est = complex_step_all(*forward, work, w, slot, indices, counts);
                let silent =
                    !est.is_empty() && est.iter().all(|e| e.value == 0.0 && e.scale == 0.0);
                if silent {
                    let f = |a: &Args<f64>| forward.forward_f64(a);
                    let real_est =
                        estimate_all(real, &f, w, slot, indices, Scheme::Ridders, counts);
                    if real_est
                        .iter()
                        .any(|e| e.conclusive && e.value.abs() > 10.0 * e.error)
                    {
                        return (
                            real_est,
                            Scheme::Ridders,
                            Some(
                                "the complex step saw no derivative although real differences do: \
                                 the generic forward leaves the Scalar path (to_f64, `as`, a real-only \
                                 function); Ridders' method in f64 was used instead"
                                    .to_string(),
                            ),
                        );
                    }
                }
                (est, Scheme::ComplexStep, None)
            }
            References::Generic {
                forward,
                real,
                scheme,
                ..
            } => {
                let f = |a: &Args<f64>| forward.forward_f64(a);
                let est = estimate_all(real, &f, w, slot, indices, *scheme, counts);
                (est, *scheme, None)
            }
        }
    }

    /// The one-sided kink test at one element, in real arithmetic.
    fn kink(
        &mut self,
        slot: usize,
        j: usize,
        w: &[Vec<f64>],
        counts: &mut Counts,
    ) -> Option<KinkProbe> {
        let (probe, scheme) = match self {
            References::Own {
                layer,
                work,
                scheme,
            } => {
                let forward = |a: &Args<L::Real>| layer.forward(a);
                (kink_at(work, &forward, w, slot, j, counts), *scheme)
            }
            References::Generic {
                forward,
                real,
                scheme,
                ..
            } => {
                let f = |a: &Args<f64>| forward.forward_f64(a);
                (kink_at(real, &f, w, slot, j, counts), *scheme)
            }
        };
        // For the complex step only a kink at the point itself matters: one
        // that is merely near is outside its (imaginary) stencil.
        probe.filter(|p| scheme != Scheme::ComplexStep || p.at_point)
    }

    /// One-sided derivatives for a joint move of several elements.
    fn joint(
        &mut self,
        slot: usize,
        group: &[usize],
        w: &[Vec<f64>],
        counts: &mut Counts,
    ) -> Option<KinkProbe> {
        match self {
            References::Own { layer, work, .. } => {
                let forward = |a: &Args<L::Real>| layer.forward(a);
                joint_at(work, &forward, w, slot, group, counts)
            }
            References::Generic { forward, real, .. } => {
                let f = |a: &Args<f64>| forward.forward_f64(a);
                joint_at(real, &f, w, slot, group, counts)
            }
        }
    }
}

/// Complex-step estimates for every element of one tensor: one complex
/// forward each, with x_j + i·h set in place and reset after.
fn complex_step_all(
    forward: &dyn ReferenceForward,
    work: &mut Args<ComplexStep<f64>>,
    w: &[Vec<f64>],
    slot: usize,
    indices: &[usize],
    counts: &mut Counts,
) -> Vec<Estimate> {
    let h = COMPLEX_STEP;
    let mut out = Vec::with_capacity(indices.len());
    for &j in indices {
        work.all_mut()[slot].data_mut()[j].im = h;
        let y = forward.forward_complex(work);
        work.all_mut()[slot].data_mut()[j].im = 0.0;
        counts.forward += 1;
        let shapes_ok = y.len() == w.len() && y.iter().zip(w).all(|(t, w)| t.len() == w.len());
        let (mut value, mut scale, mut touched) = (0.0_f64, 0.0_f64, 0.0_f64);
        for (yt, wt) in y.iter().zip(w) {
            for (yi, wi) in yt.data().iter().zip(wt) {
                let term = wi * (yi.im / h);
                // A non-finite value poisons the derivative too.
                value += if yi.re.is_finite() { term } else { f64::NAN };
                scale += term.abs();
                if yi.im != 0.0 {
                    touched += (wi * yi.re).abs();
                }
            }
        }
        let x_scale = work.all()[slot].data()[j].re.abs().max(1.0);
        if !shapes_ok {
            value = f64::NAN;
        }
        out.push(Estimate {
            value,
            error: 4.0 * f64::EPSILON * scale,
            scale,
            forward_scale: touched / x_scale,
            evals: 1,
            step: 0.0,
            conclusive: true,
        });
    }
    out
}

fn estimate_all<U: Real, F: Fn(&Args<U>) -> Vec<Tensor<U>>>(
    work: &mut Args<U>,
    forward: &F,
    w: &[Vec<f64>],
    slot: usize,
    indices: &[usize],
    scheme: Scheme,
    counts: &mut Counts,
) -> Vec<Estimate> {
    let mut line = ArgLine::new(work, forward, w, slot);
    let mut out = Vec::with_capacity(indices.len());
    for &j in indices {
        line.select(j);
        let est = match scheme {
            Scheme::Central => scheme::central(&mut line),
            _ => scheme::ridders(&mut line),
        };
        out.push(est);
    }
    counts.forward += line.evals;
    out
}

/// The step of the kink test: 4ε^(1/3)·max(|x|, 1), small enough that a
/// smooth φ's curvature cannot pass for a kink. (A kink further out that
/// spoils a wide Ridders stencil shows up as an inconclusive or
/// inconsistent estimate instead.)
fn kink_step(eps: f64, scale: f64) -> f64 {
    4.0 * eps.cbrt() * scale
}

fn kink_at<U: Real, F: Fn(&Args<U>) -> Vec<Tensor<U>>>(
    work: &mut Args<U>,
    forward: &F,
    w: &[Vec<f64>],
    slot: usize,
    j: usize,
    counts: &mut Counts,
) -> Option<KinkProbe> {
    let mut line = ArgLine::new(work, forward, w, slot);
    line.select(j);
    let h = kink_step(U::EPS, line.scale());
    let probe = scheme::kink_test(&mut line, h);
    counts.forward += line.evals;
    probe
}

/// One-sided derivatives for a joint move of a group of elements.
fn joint_at<U: Real, F: Fn(&Args<U>) -> Vec<Tensor<U>>>(
    work: &mut Args<U>,
    forward: &F,
    w: &[Vec<f64>],
    slot: usize,
    group: &[usize],
    counts: &mut Counts,
) -> Option<KinkProbe> {
    let mut line = ArgLine::new(work, forward, w, slot);
    line.select_group(group);
    let h = kink_step(U::EPS, line.scale());
    let probe = scheme::one_sided_probe(&mut line, h);
    counts.forward += line.evals;
    probe
}

/// The probe φ(t) = Σ wᵢ yᵢ(x + t·v), moving one element (v = e_j) or a
/// group of elements (v = Σ e_j) of one tensor in place.
struct ArgLine<'a, U: Real, F> {
    work: &'a mut Args<U>,
    forward: &'a F,
    w: &'a [Vec<f64>],
    slot: usize,
    /// The moved elements and their original values, restored bit for bit.
    targets: Vec<(usize, U)>,
    /// wᵢyᵢ of the last `+h` evaluation, reused across elements.
    terms: Vec<f64>,
    evals: usize,
}

impl<'a, U: Real, F: Fn(&Args<U>) -> Vec<Tensor<U>>> ArgLine<'a, U, F> {
    fn new(work: &'a mut Args<U>, forward: &'a F, w: &'a [Vec<f64>], slot: usize) -> Self {
        ArgLine {
            work,
            forward,
            w,
            slot,
            targets: Vec::with_capacity(1),
            terms: Vec::new(),
            evals: 0,
        }
    }

    fn select(&mut self, j: usize) {
        self.select_group(&[j]);
    }

    fn select_group(&mut self, group: &[usize]) {
        self.targets.clear();
        let data = self.work.all()[self.slot].data();
        self.targets.extend(group.iter().map(|&j| (j, data[j])));
    }

    /// Evaluates at x0 + t. With `keep`, stores the terms wᵢyᵢ; otherwise
    /// also returns Σ|kept − current| and Σ|kept| over the outputs that
    /// moved.
    fn eval(&mut self, t: f64, keep: bool) -> (Sample, f64, f64) {
        let data = self.work.all_mut()[self.slot].data_mut();
        for &(j, x0) in &self.targets {
            data[j] = U::from_f64(x0.as_f64() + t);
        }
        // The step actually applied, after rounding (of the first target).
        let step = self
            .targets
            .first()
            .map_or(0.0, |&(j, x0)| data[j].as_f64() - x0.as_f64());
        let y = (self.forward)(self.work);
        let data = self.work.all_mut()[self.slot].data_mut();
        for &(j, x0) in &self.targets {
            data[j] = x0;
        }
        self.evals += 1;
        let mut value = 0.0;
        let mut magnitude = 0.0;
        let mut spread = 0.0;
        let mut touched = 0.0;
        if keep {
            self.terms.clear();
        }
        let mut k = 0;
        let shapes_ok =
            y.len() == self.w.len() && y.iter().zip(self.w).all(|(t, w)| t.len() == w.len());
        for (yt, wt) in y.iter().zip(self.w) {
            for (yi, wi) in yt.data().iter().zip(wt) {
                let term = wi * yi.as_f64();
                value += term;
                magnitude += term.abs();
                if keep {
                    self.terms.push(term);
                } else if let Some(&p) = self.terms.get(k) {
                    if p != term {
                        spread += (p - term).abs();
                        touched += p.abs();
                    }
                }
                k += 1;
            }
        }
        if !shapes_ok {
            value = f64::NAN;
        }
        let sample = Sample {
            step,
            value,
            magnitude,
        };
        (sample, spread, touched)
    }
}

impl<U: Real, F: Fn(&Args<U>) -> Vec<Tensor<U>>> Line for ArgLine<'_, U, F> {
    fn eps(&self) -> f64 {
        U::EPS
    }
    fn scale(&self) -> f64 {
        self.targets
            .iter()
            .fold(1.0, |m, &(_, x0)| m.max(x0.as_f64().abs()))
    }
    fn at(&mut self, t: f64) -> Sample {
        self.eval(t, false).0
    }
    fn pair(&mut self, h: f64) -> Pair {
        let (p, _, _) = self.eval(h, true);
        let (m, spread, touched) = self.eval(-h, false);
        let width = p.step - m.step;
        Pair {
            derivative: (p.value - m.value) / width,
            scale: spread / width,
            touched,
            magnitude: p.magnitude.max(m.magnitude),
            width,
        }
    }
}
