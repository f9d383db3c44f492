//! Checks of a layer's hand-written rules beyond the backward: the
//! forward-mode rule ([`TangentRule`]: its tangents against directional
//! derivatives of the forward, and the adjoint identity against the
//! backward) and the second-order rule ([`GenericBackward`]: Hessian-vector
//! products by the complex step through the backward, a hand-written one
//! checked against them, and the integrability test). Both return the
//! same [`Report`] as [`Audit::run`]; each row says which check it holds.

use rand::{RngExt, SeedableRng};

use super::run::{assemble, call, check_gradient_count, sort_rows, RowParts, Start};
use super::Audit;
use crate::compare::{self, relative_error, Compared, Prober};
use crate::diagnosis::summary::{summarize, RowFacts};
use crate::diagnosis::{diagnose, Culprit, Diagnosis, Evidence};
use crate::error::Error;
use crate::layer::sealed::Reference;
use crate::layer::{Args, Forward, GenericBackward, TangentRule};
use crate::report::{Check, Report, Row, Verdict, Worst};
use crate::scalar::{ComplexStep, Real, Traced};
use crate::scheme::engine::guarded;
use crate::scheme::{scalar_sample, Estimate, KinkProbe, Line, Pair, Sample, Scheme};
use crate::signature::{Bindings, Role, Signature};
use crate::tensor::{MultiIndex, Tensor};
use crate::tolerance::ROUNDING_ULPS;

/// Streams of the seeded directions, apart from the upstream's.
const ALONG: u64 = 0x7A4E_6E17;
const ACROSS: u64 = 0x5E11_D1A6;

impl Audit {
    /// Checks a layer's forward-mode rule ([`TangentRule::jvp`]) at `args`.
    ///
    /// For seeded random tangents v of the arguments (zero on fixed
    /// inputs), each output's tangent from `jvp` is compared, element by
    /// element and with an error bar, with the directional derivative of
    /// the forward along v: the complex step for a layer with a
    /// [`GenericForward`](crate::GenericForward) (one complex forward,
    /// exact to rounding), Ridders' method (or the forced real scheme) in
    /// the layer's precision otherwise. One row per output
    /// ([`Check::Tangent`]), diagnosed as gradient rows are.
    ///
    /// Then the adjoint identity ⟨u, J v⟩ = ⟨Jᵀu, v⟩ is checked for a
    /// seeded upstream u, with J v from the same `jvp` call and Jᵀu from
    /// one backward: no differences are taken, so the two sides agree to
    /// rounding, bounded by γₙ·Σ|terms| (Higham, *Accuracy and Stability
    /// of Numerical Algorithms*, 2nd ed., SIAM 2002, §3.1) plus the running
    /// error bound of the tangents along the forward's formulas. One row
    /// named `adjoint` ([`Check::Adjoint`]). When it fails, its diagnosis
    /// names the rule at fault: the backward when every tangent row
    /// agrees with the forward, the tangent rule when one does not.
    ///
    /// Kinks are not probed: at a point where the forward is not
    /// differentiable along v (a tie of a max, a ReLU at 0), the complex
    /// step takes one side and a rule may take another.
    ///
    /// Errors as [`run`](Audit::run) does, and when `jvp` returns more
    /// tangents than the layer has outputs ([`Error::OutputCount`]); a
    /// tangent of the wrong shape, or left out, is a failing row.
    pub fn run_tangents<L: TangentRule + Forward + ?Sized>(
        &self,
        layer: &L,
        args: &Args<L::Real>,
    ) -> Result<Report, Error> {
        let (start, y0) = self.begin(layer, args)?;
        let (name, bindings) = (&start.name, &start.bindings);
        let along = directions(&start.sig, args, self.seed ^ ALONG);
        let jv = call(name, "jvp", || layer.jvp(args, &along))?;
        let outputs = start.sig.outputs();
        if jv.len() > outputs.len() {
            return Err(Error::OutputCount {
                layer: name.clone(),
                call: "jvp".into(),
                expected: outputs.len(),
                names: names_of(outputs.iter().map(|s| s.name.as_str())),
                found: jv.len(),
            });
        }
        let generic = layer.reference().filter(|_| !self.own_precision);
        let scheme = self.choose_scheme(name, generic.is_some())?;
        let mut evals = Evals {
            forward: 1,
            backward: 0,
            rules: 1,
        };
        let estimates = match generic.filter(|_| scheme == Scheme::ComplexStep) {
            Some(g) => complex_tangents(g, name, args, &along, &y0, &mut evals)?,
            None => real_tangents(layer, name, args, &along, &y0, scheme, &mut evals)?,
        };
        let evidence = evidence_of(&start.sig, bindings, args);
        let mut rows = Vec::with_capacity(outputs.len() + 1);
        for (k, slot) in outputs.iter().enumerate() {
            let jk = jv.get(k).map(|t| t.map(|v| v.as_f64()));
            rows.push(self.compared_row(
                Case {
                    check: Check::Tangent,
                    name: &slot.name,
                    role: Role::Output,
                    at: y0[k].data().iter().map(|v| v.as_f64()).collect(),
                    shape: y0[k].shape().to_vec(),
                    analytic: jk,
                    estimates: estimates[k].clone(),
                    scheme,
                },
                &evidence,
                L::Real::EPS,
            )?);
        }

        // The adjoint identity: one backward with a seeded upstream u.
        let upstream = upstream_for(&y0, self.seed);
        let g = call(name, "backward", || layer.backward(args, &upstream))?;
        evals.backward += 1;
        let differentiable = differentiable(&start.sig);
        check_gradient_count(name, &differentiable_slots(&start.sig), &g)?;
        let tangent_side = pair_up(
            upstream.iter().enumerate().map(|(k, u)| (jv.get(k), u)),
            Side::Tangent,
        );
        let backward_side = pair_up(
            (differentiable.iter().enumerate()).map(|(d, &slot)| (g.get(d), &along.all()[slot])),
            Side::Backward,
        );
        // The tangents' own rounding along the forward's formulas (the
        // exact reference's error bars), weighted by |u|; a real scheme's
        // error bar is its truncation, which the identity does not have.
        let exact = scheme == Scheme::ComplexStep;
        let carried: f64 = estimates
            .iter()
            .zip(&upstream)
            .map(|(e, u)| {
                e.iter()
                    .zip(u.data())
                    .map(|(e, u)| {
                        if exact {
                            u.as_f64().abs() * e.error
                        } else {
                            0.0
                        }
                    })
                    .sum::<f64>()
            })
            .sum();
        let tangents_fail = rows.iter().any(|r| !r.verdict.is_pass());
        let tangents_decided = rows
            .iter()
            .all(|r| r.worst.as_ref().is_some_and(|w| w.numeric.is_finite()));
        let blame = |side: Side| match side {
            Side::Tangent => Culprit::TangentRule,
            Side::Backward => Culprit::Backward,
            Side::Values if tangents_fail => Culprit::TangentRule,
            Side::Values if tangents_decided => Culprit::Backward,
            Side::Values => Culprit::Either,
        };
        let adjoint = self.identity_row(
            Identity {
                check: Check::Adjoint,
                name: "adjoint",
                left: tangent_side,
                right: backward_side,
                carried: 2.0 * carried,
                eps: L::Real::EPS,
                scheme,
            },
            |side| Diagnosis::RuleAtFault {
                culprit: blame(side),
            },
        );
        let mut notes = Vec::new();
        if tangents_fail && adjoint.verdict.is_pass() {
            notes.push(
                "the adjoint identity holds: the backward is the transpose of this tangent rule, so it is \
                 likely wrong the same way (`Audit::run` checks it against the forward)"
                    .to_string(),
            );
        }
        rows.push(adjoint);
        Ok(self.finish(start.name, rows, notes, evals, L::Real::NAME, scheme))
    }

    /// Checks a layer's second derivatives through its generic backward
    /// ([`GenericBackward::backward_generic`]) at `args`.
    ///
    /// With a seeded upstream w (as [`run`](Audit::run) draws it) and
    /// seeded tangents v and z of the arguments (zero on fixed inputs), the
    /// backward runs on complex-step numbers x + i·h·v: the imaginary part
    /// of its gradients over h is the Hessian-vector product H v of the
    /// probe φ = Σ⟨w, y⟩, exact to rounding (one backward each).
    ///
    /// * **Integrability test** (always): the backward of a scalar probe is
    ///   a gradient, so its Jacobian H is symmetric, and ⟨v, H z⟩ must
    ///   equal ⟨z, H v⟩ to rounding (bounded by γₙ·Σ|terms|, Higham 2002,
    ///   §3.1, plus the running error bounds of H v and H z). One row
    ///   named `symmetry` ([`Check::Symmetry`]). It can fail where the
    ///   plain audit passes: a term of the backward that vanishes at this
    ///   point but whose derivative is not symmetric.
    /// * **Hand-written rule** (when
    ///   [`hessian_vector`](GenericBackward::hessian_vector) returns
    ///   `Some`): each tensor of its H v against the complex step's, with
    ///   an error bar, one row per differentiable tensor
    ///   ([`Check::HessianVector`]).
    ///
    /// Costs one forward (for the outputs' shapes), four backwards (two
    /// complex, two with running error bounds; one more for an `f32` layer
    /// with a hand-written rule) and one call of the rule, whatever the
    /// size of the layer.
    pub fn run_second_order<L: GenericBackward + Forward + ?Sized>(
        &self,
        layer: &L,
        args: &Args<L::Real>,
    ) -> Result<Report, Error> {
        let (start, y0) = self.begin(layer, args)?;
        let (name, bindings) = (&start.name, &start.bindings);
        let upstream = upstream_for(&y0, self.seed);
        let along = directions(&start.sig, args, self.seed ^ ALONG);
        let across = directions(&start.sig, args, self.seed ^ ACROSS);
        let slots = differentiable_slots(&start.sig);
        let differentiable = differentiable(&start.sig);
        let mut evals = Evals {
            forward: 1,
            backward: 0,
            rules: 0,
        };
        let second = |v: &Args<L::Real>, evals: &mut Evals| {
            hessian_along(layer, name, args, &upstream, v, &slots, evals)
        };
        let hv = second(&along, &mut evals)?;
        let hz = second(&across, &mut evals)?;
        let mut rows = Vec::new();
        let mut notes = Vec::new();

        let rule = call(name, "hessian_vector", || {
            layer.hessian_vector(args, &upstream, &along)
        })?;
        evals.rules += 1;
        match rule {
            None => notes.push(
                "the layer has no hand-written Hessian-vector rule: only the integrability test ran"
                    .to_string(),
            ),
            Some(rule) => {
                if rule.len() > slots.len() {
                    return Err(Error::OutputCount {
                        layer: name.clone(),
                        call: "hessian_vector".into(),
                        expected: slots.len(),
                        names: names_of(slots.iter().map(|(_, s)| s.name.as_str())),
                        found: rule.len(),
                    });
                }
                let own = if L::Real::EPS > f64::EPSILON {
                    evals.backward += 1;
                    traced_f32_rounding(layer, args, &upstream, &along)
                } else {
                    None
                };
                let evidence = evidence_of(&start.sig, bindings, args);
                for (d, &(slot, spec)) in slots.iter().enumerate() {
                    let x = &args.all()[slot];
                    let largest = largest_abs(x.data());
                    let estimates = hv.estimates(d, own.as_ref(), largest);
                    rows.push(self.compared_row(
                        Case {
                            check: Check::HessianVector,
                            name: &spec.name,
                            role: spec.role,
                            at: x.data().iter().map(|v| v.as_f64()).collect(),
                            shape: x.shape().to_vec(),
                            analytic: rule.get(d).map(|t| t.map(|v| v.as_f64())),
                            estimates,
                            scheme: Scheme::ComplexStep,
                        },
                        &evidence,
                        L::Real::EPS,
                    )?);
                }
            }
        }

        // ⟨v, H z⟩ against ⟨z, H v⟩.
        let left = hz.dot(&along, &differentiable);
        let right = hv.dot(&across, &differentiable);
        let carried = hz.carried(&along, &differentiable) + hv.carried(&across, &differentiable);
        rows.push(self.identity_row(
            Identity {
                check: Check::Symmetry,
                name: "symmetry",
                left,
                right,
                carried,
                eps: f64::EPSILON,
                scheme: Scheme::ComplexStep,
            },
            |_| Diagnosis::NotSymmetric,
        ));
        Ok(self.finish(
            start.name,
            rows,
            notes,
            evals,
            L::Real::NAME,
            Scheme::ComplexStep,
        ))
    }

    /// The start of a check of other rules: settings, name, signature and
    /// binding, then one forward for the outputs (their named dims joining
    /// the bindings).
    fn begin<L: Forward + ?Sized>(
        &self,
        layer: &L,
        args: &Args<L::Real>,
    ) -> Result<Begun<L::Real>, Error> {
        let mut start = self.start(layer, args)?;
        let name = &start.name;
        let y0 = call(name, "forward", || layer.forward(args))?;
        start.bindings = start
            .sig
            .check_outputs(name, "forward", &start.bindings, &y0)?;
        Ok((start, y0))
    }

    /// A row of element comparisons, judged, summarised and diagnosed as a
    /// gradient row is.
    fn compared_row(&self, c: Case<'_>, evidence: &Evidence, eps: f64) -> Result<Row, Error> {
        let same_shape = c.analytic.as_ref().is_some_and(|g| g.shape() == c.shape);
        let indices: Vec<usize> = (0..c.estimates.len()).collect();
        let Compared {
            elements,
            joint_kink,
        } = compare::compare(
            c.analytic.as_ref().filter(|_| same_shape),
            &c.at,
            &indices,
            c.estimates,
            &self.tolerance,
            eps,
            &mut Exact,
        )?;
        let facts = RowFacts {
            returned: c.analytic.is_some(),
            same_shape,
            all_finite: c
                .analytic
                .as_ref()
                .is_none_or(|g| g.data().iter().all(|v| v.is_finite())),
            joint_kink: joint_kink.as_ref(),
            evidence,
            kinks_fail: self.kinks_fail,
        };
        let s = summarize(&elements, &facts);
        let diagnosis = diagnose(
            &c.shape,
            c.analytic.as_ref(),
            &elements,
            joint_kink.as_ref(),
            evidence,
        );
        Ok(assemble(RowParts {
            check: c.check,
            name: c.name.to_string(),
            role: c.role,
            gradient_shape: c.analytic.as_ref().map(|g| g.shape().to_vec()),
            scheme: c.scheme,
            summary: s,
            joint_kink,
            diagnosis,
            screen: None,
            step_sweep: None,
            shape: c.shape,
            elements,
        }))
    }

    /// The row of an identity between two sums that are equal in exact
    /// arithmetic. `blame` names the diagnosis of a failure, given which
    /// side could not be formed (or that the values differ).
    fn identity_row(&self, id: Identity, blame: impl Fn(Side) -> Diagnosis) -> Row {
        let (verdict, worst, diagnosis, errors) = match (id.left, id.right) {
            (Err(bad), _) | (_, Err(bad)) => (bad.verdict, None, Some(blame(bad.side)), (0.0, 0.0)),
            (Ok(l), Ok(r)) => {
                // The sums run in f64; each value summed carries at least
                // a few ulps of the precision it was computed in, and the
                // running error bounds of the formulas behind it.
                let terms = l.terms + r.terms;
                let rounding = gamma(l.count + r.count, f64::EPSILON) * terms
                    + ROUNDING_ULPS * id.eps * terms
                    + id.carried;
                let size = l.value.abs().max(r.value.abs());
                let bound = self.tolerance.identity_bound(rounding, size, id.eps);
                let diff = (r.value - l.value).abs();
                let agrees = crate::tolerance::Tolerance::accepts(diff, bound);
                let worst = Worst {
                    index: MultiIndex::from_flat(&[], 0),
                    analytic: r.value,
                    numeric: l.value,
                    bound,
                };
                let errors = (diff, relative_error(r.value, l.value));
                if agrees {
                    (Verdict::Agrees, Some(worst), None, errors)
                } else {
                    (
                        Verdict::Disagrees,
                        Some(worst),
                        Some(blame(Side::Values)),
                        errors,
                    )
                }
            }
        };
        let compared = worst.is_some();
        Row {
            check: id.check,
            name: id.name.to_string(),
            role: Role::Output,
            shape: Vec::new(),
            gradient_shape: compared.then(Vec::new),
            scheme: id.scheme,
            checked: usize::from(compared),
            total: 1,
            failing: usize::from(!verdict.is_pass()),
            kinks: 0,
            unchecked: 0,
            wide: 0,
            worst,
            max_abs_error: errors.0,
            max_rel_error: errors.1,
            verdict,
            joint_kink: None,
            diagnosis,
            screen: None,
            step_sweep: None,
            elements: Vec::new(),
        }
    }

    fn finish(
        &self,
        layer: String,
        mut rows: Vec<Row>,
        notes: Vec<String>,
        evals: Evals,
        precision: &str,
        scheme: Scheme,
    ) -> Report {
        sort_rows(&mut rows);
        let reference_precision = if scheme == Scheme::ComplexStep {
            "f64"
        } else {
            precision
        };
        Report {
            layer,
            seed: self.seed,
            rows,
            notes,
            forward_evals: evals.forward,
            backward_evals: evals.backward,
            rule_evals: evals.rules,
            precision: precision.to_string(),
            reference_precision: reference_precision.to_string(),
            tolerance: self.tolerance.clone(),
            kinks_fail: self.kinks_fail,
        }
    }
}

/// The start of a check and the outputs at the point.
type Begun<R> = (Start, Vec<Tensor<R>>);

/// Evaluations spent by a check.
struct Evals {
    forward: usize,
    backward: usize,
    rules: usize,
}

/// One compared row's inputs.
struct Case<'a> {
    check: Check,
    name: &'a str,
    role: Role,
    /// The values the row's elements belong to (output or argument), to
    /// skip non-finite ones.
    at: Vec<f64>,
    shape: Vec<usize>,
    analytic: Option<Tensor<f64>>,
    estimates: Vec<Estimate>,
    scheme: Scheme,
}

/// Which side of an identity failed to form, or that both formed and
/// their values differ.
#[derive(Clone, Copy, Debug, PartialEq)]
enum Side {
    Tangent,
    Backward,
    Values,
}

/// A side that could not be formed: a tensor left out or of the wrong
/// shape.
#[derive(Clone, Copy, Debug)]
struct Unformed {
    side: Side,
    verdict: Verdict,
}

/// One side of an identity: Σ aᵢbᵢ, Σ|aᵢbᵢ| and the number of terms.
#[derive(Clone, Copy, Debug, Default)]
struct Sum {
    value: f64,
    terms: f64,
    count: usize,
}

impl Sum {
    fn add(&mut self, a: &[f64], b: &[f64]) {
        for (a, b) in a.iter().zip(b) {
            let t = a * b;
            self.value += t;
            self.terms += t.abs();
        }
        self.count += a.len();
    }
}

struct Identity {
    check: Check,
    name: &'static str,
    left: Result<Sum, Unformed>,
    right: Result<Sum, Unformed>,
    /// Rounding the summed values carried in (running error bounds).
    carried: f64,
    /// Epsilon of the arithmetic the summed values were computed in.
    eps: f64,
    scheme: Scheme,
}

/// γₙ = nε/(1 − nε) (Higham 2002, Lemma 3.1, with a unit roundoff of
/// ε/2 per operation: this is generous by a factor of two): the relative
/// bound of a sum of n products, here summed in `f64`.
fn gamma(n: usize, eps: f64) -> f64 {
    let nu = (n as f64 + 1.0) * eps;
    if nu >= 1.0 {
        f64::INFINITY
    } else {
        nu / (1.0 - nu)
    }
}

/// The comparison's probes for an exact reference: no kinks, no second
/// look (the error bar already holds the rounding), nothing beside.
struct Exact;

impl Prober for Exact {
    fn kink(&mut self, _: usize) -> Result<Option<KinkProbe>, Error> {
        Ok(None)
    }
    fn joint(&mut self, _: &[usize]) -> Result<Option<KinkProbe>, Error> {
        Ok(None)
    }
    fn second_look(&mut self, _: usize, _: &Estimate) -> Result<Option<Estimate>, Error> {
        Ok(None)
    }
    fn backward_beside(&mut self, _: usize) -> Result<Option<(f64, f64)>, Error> {
        Ok(None)
    }
    fn backward_scatter(&mut self, _: usize, _: f64) -> Result<f64, Error> {
        Ok(0.0)
    }
}

fn names_of<'a>(names: impl Iterator<Item = &'a str>) -> String {
    names
        .map(|n| format!("`{n}`"))
        .collect::<Vec<_>>()
        .join(", ")
}

fn largest_abs<R: Real>(data: &[R]) -> f64 {
    data.iter().fold(0.0_f64, |m, v| m.max(v.as_f64().abs()))
}

/// Positions (in `Args`) of the differentiable tensors.
fn differentiable(sig: &Signature) -> Vec<usize> {
    differentiable_slots(sig).iter().map(|&(k, _)| k).collect()
}

fn differentiable_slots(sig: &Signature) -> Vec<(usize, &crate::signature::Slot)> {
    sig.slots()
        .into_iter()
        .enumerate()
        .filter(|(_, s)| s.role != Role::Fixed)
        .collect()
}

/// Seeded tangents of the arguments: uniform in [−1, 1) on differentiable
/// tensors, zero on fixed inputs.
fn directions<R: Real>(sig: &Signature, args: &Args<R>, seed: u64) -> Args<R> {
    let mut rng = rand::rngs::StdRng::seed_from_u64(seed);
    let mut out = args.map(|_| R::zero());
    for (t, slot) in out.all_mut().iter_mut().zip(sig.slots()) {
        if slot.role != Role::Fixed {
            for v in t.data_mut() {
                *v = R::from_f64(rng.random_range(-1.0..1.0));
            }
        }
    }
    out
}

/// The seeded upstream of [`Audit::run`]: uniform in [−1, 1), one per
/// output element, in the layer's precision.
pub(super) fn upstream_for<R: Real>(outputs: &[Tensor<R>], seed: u64) -> Vec<Tensor<R>> {
    let mut rng = rand::rngs::StdRng::seed_from_u64(seed);
    outputs
        .iter()
        .map(|y| y.map(|_| R::from_f64(rng.random_range(-1.0..1.0))))
        .collect()
}

fn evidence_of<R: Real>(sig: &Signature, bindings: &Bindings, args: &Args<R>) -> Evidence {
    Evidence {
        sizes: bindings.named_sizes(),
        tensors: (sig.slots().iter().map(|s| s.name.clone()))
            .zip(args.all().iter().map(|t| t.map(|v| v.as_f64())))
            .collect(),
        ..Evidence::default()
    }
}

/// Σ over tensor pairs of ⟨rule's tensor, other⟩ (⟨u, J v⟩ from the
/// tangents, ⟨Jᵀu, v⟩ from the gradients), or which rule's tensor is
/// missing or misshapen.
fn pair_up<'a, R: Real>(
    pairs: impl Iterator<Item = (Option<&'a Tensor<R>>, &'a Tensor<R>)>,
    side: Side,
) -> Result<Sum, Unformed> {
    let mut sum = Sum::default();
    for (rule, other) in pairs {
        let verdict = match rule {
            None => Verdict::Missing,
            Some(t) if t.shape() != other.shape() => Verdict::WrongShape,
            Some(t) => {
                sum.add(&as_f64(t.data()), &as_f64(other.data()));
                continue;
            }
        };
        return Err(Unformed { side, verdict });
    }
    Ok(sum)
}

fn as_f64<R: Real>(data: &[R]) -> Vec<f64> {
    data.iter().map(|v| v.as_f64()).collect()
}

/// The arguments as numbers of another kind, each made from its value and
/// its tangent's (`make(x, v)`).
fn seeded_with<R: Real, U: Copy>(
    args: &Args<R>,
    along: &Args<R>,
    make: impl Fn(R, R) -> U,
) -> Args<U> {
    let mut out = args.map(|x| make(x, R::zero()));
    for ((o, x), v) in out.all_mut().iter_mut().zip(args.all()).zip(along.all()) {
        for ((o, &x), &v) in o.data_mut().iter_mut().zip(x.data()).zip(v.data()) {
            *o = make(x, v);
        }
    }
    out
}

/// Complex-step numbers x + i·h·v over `f64`.
fn seeded<R: Real>(args: &Args<R>, along: &Args<R>, h: f64) -> Args<ComplexStep<f64>> {
    seeded_with(args, along, |x, v| {
        ComplexStep::new(x.as_f64(), h * v.as_f64())
    })
}

/// Dual numbers with running error bounds, seeded along `along`, in `f64`.
fn traced_f64<R: Real>(args: &Args<R>, along: &Args<R>) -> Args<Traced<f64>> {
    seeded_with(args, along, |x, v| Traced::input(x.as_f64(), v.as_f64()))
}

/// The same in `f32`. `Real` is sealed to f32 and f64: used for f32
/// layers only, where the conversions are exact.
#[allow(clippy::cast_possible_truncation)]
fn traced_f32<R: Real>(args: &Args<R>, along: &Args<R>) -> Args<Traced<f32>> {
    seeded_with(args, along, |x, v| {
        Traced::input(x.as_f64() as f32, v.as_f64() as f32)
    })
}

/// The imaginary step for moving every element along a direction.
fn step_over<R: Real>(args: &Args<R>) -> f64 {
    1e-20
        * args
            .all()
            .iter()
            .fold(1.0_f64, |m, t| m.max(largest_abs(t.data())))
}

/// Estimates of each output's tangent by the complex step (one complex
/// forward), with error bars holding the rounding a tangent rule that
/// follows the forward's formulas makes in the layer's precision (running
/// error bounds, one more forward).
fn complex_tangents<R: Real>(
    generic: &dyn Reference,
    name: &str,
    args: &Args<R>,
    along: &Args<R>,
    y0: &[Tensor<R>],
    evals: &mut Evals,
) -> Result<Vec<Vec<Estimate>>, Error> {
    let h = step_over(args);
    let work = seeded(args, along, h);
    let y = guarded(|| generic.forward_complex(&work)).map_err(|fault| {
        fault.into_error(
            name,
            "forward (complex step)",
            " while the arguments carried a complex tangent".into(),
        )
    })?;
    evals.forward += 1;
    let rounding = tangent_rounding::<R>(generic, args, along);
    evals.forward += 1;
    let scale = args
        .all()
        .iter()
        .fold(1.0_f64, |m, t| m.max(largest_abs(t.data())));
    let shapes_ok = y.len() == y0.len() && y.iter().zip(y0).all(|(a, b)| a.len() == b.len());
    Ok(y0
        .iter()
        .enumerate()
        .map(|(k, y0k)| {
            (0..y0k.len())
                .map(|j| {
                    let c = shapes_ok.then(|| y[k].data()[j]);
                    let value = c.map_or(f64::NAN, |c| {
                        if c.re.is_finite() && c.im.is_finite() {
                            c.im / h
                        } else {
                            f64::NAN
                        }
                    });
                    let carried = rounding
                        .as_ref()
                        .and_then(|r| r.get(k).and_then(|r| r.get(j)).copied())
                        .unwrap_or(0.0);
                    exact_estimate(value, carried, y0k.data()[j].as_f64().abs() / scale)
                })
                .collect()
        })
        .collect())
}

/// An exact reference's estimate: value, its own rounding (4ε₆₄|value|)
/// plus the rounding `carried` from the layer's formulas, and the size of
/// the quantities it is derived from.
fn exact_estimate(value: f64, carried: f64, forward_scale: f64) -> Estimate {
    Estimate {
        value,
        error: 4.0 * f64::EPSILON * value.abs() + carried,
        scale: value.abs(),
        forward_scale,
        evals: 1,
        step: 0.0,
        conclusive: true,
        amplification: 1.0,
    }
}

/// Per output element, a running error bound of the tangent computed in
/// the layer's precision along the forward's formulas (`None` if the
/// traced forward panicked or was not finite).
fn tangent_rounding<R: Real>(
    generic: &dyn Reference,
    args: &Args<R>,
    along: &Args<R>,
) -> Option<Vec<Vec<f64>>> {
    let out: Vec<Vec<f64>> = if R::EPS > f64::EPSILON {
        let u = f64::from(f32::EPSILON) / 2.0;
        let work = traced_f32(args, along);
        let y = guarded(|| generic.forward_traced_f32(&work)).ok()?;
        y.iter()
            .map(|t| t.data().iter().map(|v| v.ed * u).collect())
            .collect()
    } else {
        let u = f64::EPSILON / 2.0;
        let work = traced_f64(args, along);
        let y = guarded(|| generic.forward_traced_f64(&work)).ok()?;
        y.iter()
            .map(|t| t.data().iter().map(|v| v.ed * u).collect())
            .collect()
    };
    out.iter()
        .all(|t| t.iter().all(|v| v.is_finite()))
        .then_some(out)
}

/// Estimates of each output's tangent by real differences along the
/// direction, in the layer's precision: one line per output element, the
/// forwards at each step shared between elements.
fn real_tangents<L: Forward + ?Sized>(
    layer: &L,
    name: &str,
    args: &Args<L::Real>,
    along: &Args<L::Real>,
    y0: &[Tensor<L::Real>],
    scheme: Scheme,
    evals: &mut Evals,
) -> Result<Vec<Vec<Estimate>>, Error> {
    let mut mover = Mover {
        layer,
        base: args,
        along,
        work: args.clone(),
        cache: Vec::new(),
        fault: None,
    };
    let largest = args
        .all()
        .iter()
        .fold(1.0_f64, |m, t| m.max(largest_abs(t.data())));
    let mut out = Vec::with_capacity(y0.len());
    for (k, y) in y0.iter().enumerate() {
        let mut row = Vec::with_capacity(y.len());
        for j in 0..y.len() {
            let mut line = TangentLine {
                mover: &mut mover,
                output: k,
                element: j,
                at_x: y.data()[j].as_f64(),
            };
            let mut e = match scheme {
                Scheme::Central => crate::scheme::central::estimate(&mut line),
                _ => crate::scheme::ridders::estimate(&mut line),
            };
            // What the comparison of a gradient row measures in its second
            // look, assumed here: the output's own rounding and that of the
            // moved arguments (every argument moves, each rounded to the
            // layer's precision), over the smallest step the estimate
            // relied on (about a sixteenth of its widest).
            if e.step > 0.0 {
                let noise = y.data()[j].as_f64().abs() + largest * e.value.abs();
                e.error += 16.0 * L::Real::EPS * noise / e.step;
            }
            if let Some((fault, t)) = mover.fault.take() {
                return Err(fault.into_error(
                    name,
                    "forward (along the tangent)",
                    format!(" with the arguments moved by {t} times the tangent"),
                ));
            }
            row.push(e);
        }
        out.push(row);
    }
    evals.forward += mover.cache.len();
    Ok(out)
}

/// The outputs at one step along the tangent (by the step's bits), `None`
/// where the forward panicked.
type Step<R> = (u64, Option<Vec<Tensor<R>>>);

/// Moves every argument along the tangent in place, runs the forward, and
/// restores the arguments; outputs are kept per step for the other
/// elements' lines.
struct Mover<'a, L: Forward + ?Sized> {
    layer: &'a L,
    base: &'a Args<L::Real>,
    along: &'a Args<L::Real>,
    work: Args<L::Real>,
    cache: Vec<Step<L::Real>>,
    fault: Option<(crate::scheme::engine::Fault, f64)>,
}

impl<L: Forward + ?Sized> Mover<'_, L> {
    fn value(&mut self, t: f64, k: usize, j: usize) -> f64 {
        let key = t.to_bits();
        let at = match self.cache.iter().position(|(b, _)| *b == key) {
            Some(p) => p,
            None => {
                for ((w, b), v) in self
                    .work
                    .all_mut()
                    .iter_mut()
                    .zip(self.base.all())
                    .zip(self.along.all())
                {
                    for ((w, b), v) in w.data_mut().iter_mut().zip(b.data()).zip(v.data()) {
                        *w = L::Real::from_f64(b.as_f64() + t * v.as_f64());
                    }
                }
                let (layer, work) = (self.layer, &self.work);
                let y = match guarded(|| layer.forward(work)) {
                    Ok(y) => Some(y),
                    Err(fault) => {
                        self.fault.get_or_insert((fault, t));
                        None
                    }
                };
                for (w, b) in self.work.all_mut().iter_mut().zip(self.base.all()) {
                    w.data_mut().copy_from_slice(b.data());
                }
                self.cache.push((key, y));
                self.cache.len() - 1
            }
        };
        self.cache[at]
            .1
            .as_ref()
            .and_then(|y| y.get(k))
            .and_then(|y| y.data().get(j))
            .map_or(f64::NAN, |v| v.as_f64())
    }
}

/// One output element as a function of the distance t along the tangent.
struct TangentLine<'m, 'a, L: Forward + ?Sized> {
    mover: &'m mut Mover<'a, L>,
    output: usize,
    element: usize,
    at_x: f64,
}

impl<L: Forward + ?Sized> Line for TangentLine<'_, '_, L> {
    fn eps(&self) -> f64 {
        L::Real::EPS
    }
    fn x(&self) -> f64 {
        0.0
    }
    fn at(&mut self, t: f64) -> Sample {
        let v = self.mover.value(t, self.output, self.element);
        scalar_sample(0.0, self.at_x, t, v)
    }
    fn pair(&mut self, h: f64) -> Pair {
        let p = self.at(h);
        let m = self.at(-h);
        crate::scheme::pair_of(p, m, self.at_x)
    }
}

/// H·v of the probe by the complex step through the generic backward, and
/// the running error bound of each of its elements (in `f64`).
struct Second {
    /// Per differentiable tensor: H v (`None` when missing or misshapen).
    values: Vec<Option<Vec<f64>>>,
    /// The gradient itself (real part), for the size of what H v is
    /// derived from.
    gradient: Vec<Option<Vec<f64>>>,
    /// Running error bounds of H v in `f64`.
    rounding: Option<Vec<Option<Vec<f64>>>>,
    /// Shapes expected.
    shapes: Vec<Vec<usize>>,
}

fn hessian_along<L: GenericBackward + ?Sized>(
    layer: &L,
    name: &str,
    args: &Args<L::Real>,
    upstream: &[Tensor<L::Real>],
    along: &Args<L::Real>,
    slots: &[(usize, &crate::signature::Slot)],
    evals: &mut Evals,
) -> Result<Second, Error> {
    let h = step_over(args);
    let work = seeded(args, along, h);
    let up: Vec<Tensor<ComplexStep<f64>>> = upstream
        .iter()
        .map(|t| t.map(|v| ComplexStep::real(v.as_f64())))
        .collect();
    let g = guarded(|| layer.backward_generic(&work, &up)).map_err(|fault| {
        fault.into_error(
            name,
            "backward_generic (complex step)",
            " while the arguments carried a complex tangent".into(),
        )
    })?;
    evals.backward += 1;
    check_gradient_count(name, slots, &g)?;
    let shapes: Vec<Vec<usize>> = slots
        .iter()
        .map(|&(k, _)| args.all()[k].shape().to_vec())
        .collect();
    let read = |d: usize, f: &dyn Fn(ComplexStep<f64>) -> f64| {
        g.get(d)
            .filter(|t| t.shape() == shapes[d].as_slice())
            .map(|t| t.data().iter().map(|&c| f(c)).collect::<Vec<f64>>())
    };
    let values = (0..slots.len())
        .map(|d| read(d, &|c| if c.re.is_finite() { c.im / h } else { f64::NAN }))
        .collect();
    let gradient = (0..slots.len()).map(|d| read(d, &|c| c.re)).collect();
    let traced = traced_f64(args, along);
    let up_traced: Vec<Tensor<Traced<f64>>> = upstream
        .iter()
        .map(|t| t.map(|v| Traced::input(v.as_f64(), 0.0)))
        .collect();
    let u = f64::EPSILON / 2.0;
    let rounding = guarded(|| layer.backward_generic(&traced, &up_traced))
        .ok()
        .map(|g| {
            (0..slots.len())
                .map(|d| {
                    g.get(d)
                        .filter(|t| t.shape() == shapes[d].as_slice())
                        .map(|t| t.data().iter().map(|v| v.ed * u).collect())
                })
                .collect()
        });
    evals.backward += 1;
    Ok(Second {
        values,
        gradient,
        rounding,
        shapes,
    })
}

/// The running error bound of an `f32` layer's H v along its generic
/// backward's formulas in `f32`: what a hand-written rule in `f32` loses.
fn traced_f32_rounding<L: GenericBackward + ?Sized>(
    layer: &L,
    args: &Args<L::Real>,
    upstream: &[Tensor<L::Real>],
    along: &Args<L::Real>,
) -> Option<Vec<Option<Vec<f64>>>> {
    let work = traced_f32(args, along);
    #[allow(clippy::cast_possible_truncation)]
    let up: Vec<Tensor<Traced<f32>>> = upstream
        .iter()
        .map(|t| t.map(|v| Traced::input(v.as_f64() as f32, 0.0)))
        .collect();
    let g = guarded(|| layer.backward_generic(&work, &up)).ok()?;
    let u = f64::from(f32::EPSILON) / 2.0;
    Some(
        (0..g.len())
            .map(|d| {
                g.get(d)
                    .map(|t| t.data().iter().map(|v| v.ed * u).collect())
            })
            .collect(),
    )
}

impl Second {
    /// Estimates of tensor `d` of H v, with the rounding of the layer's own
    /// precision when measured (`own`), else that of `f64`.
    fn estimates(
        &self,
        d: usize,
        own: Option<&Vec<Option<Vec<f64>>>>,
        largest: f64,
    ) -> Vec<Estimate> {
        let n: usize = self.shapes[d].iter().product();
        let carried = |j: usize| {
            own.or(self.rounding.as_ref())
                .and_then(|r| r.get(d))
                .and_then(|r| r.as_ref())
                .and_then(|r| r.get(j))
                .copied()
                .unwrap_or(0.0)
        };
        (0..n)
            .map(|j| {
                let value = self.values[d].as_ref().map_or(f64::NAN, |v| v[j]);
                let g = self.gradient[d].as_ref().map_or(0.0, |v| v[j].abs());
                exact_estimate(value, carried(j), g / largest.max(1.0))
            })
            .collect()
    }

    /// ⟨t, H v⟩ over the differentiable tensors.
    fn dot<R: Real>(&self, t: &Args<R>, differentiable: &[usize]) -> Result<Sum, Unformed> {
        let mut sum = Sum::default();
        for (d, &slot) in differentiable.iter().enumerate() {
            let Some(v) = &self.values[d] else {
                return Err(Unformed {
                    side: Side::Backward,
                    verdict: Verdict::Missing,
                });
            };
            sum.add(&as_f64(t.all()[slot].data()), v);
        }
        Ok(sum)
    }

    /// Σ|tⱼ|·(rounding of (H v)ⱼ).
    fn carried<R: Real>(&self, t: &Args<R>, differentiable: &[usize]) -> f64 {
        let Some(r) = &self.rounding else {
            return 0.0;
        };
        differentiable
            .iter()
            .enumerate()
            .filter_map(|(d, &slot)| {
                r[d].as_ref().map(|r| {
                    r.iter()
                        .zip(t.all()[slot].data())
                        .map(|(r, t)| r * t.as_f64().abs())
                        .sum::<f64>()
                })
            })
            .sum()
    }
}
