//! A self-test of the checker: random layers built from primitive
//! operations, whose backward is computed by a small dual-number forward
//! mode written here (independent of the complex-step type, the difference
//! schemes and the gallery). Correct layers must always pass; a layer with
//! one broken derivative rule must always fail.
// Check values are copied digit for digit from their source.
#![allow(clippy::excessive_precision)]
#![cfg(feature = "proptest")]

use std::cell::RefCell;
use std::ops::{Add, Mul};

use plumbline::{Args, Audit, GenericForward, Gradients, Layer, Scalar, Scheme, Signature, Tensor};
use proptest::prelude::*;

/// Width of every register.
const N: usize = 3;

/// One primitive operation; each reads the previous register (and, for the
/// binary ones, an earlier register) and writes a new one.
#[derive(Clone, Copy, Debug, PartialEq)]
enum Op {
    /// r + r_j.
    Add(usize),
    /// r ⊙ r_j.
    Mul(usize),
    Tanh,
    Exp,
    Sin,
    Square,
    /// w·r + b (the layer's parameters).
    Affine,
    /// Every element becomes Σ r.
    SumReduce,
}

/// Arithmetic the program runs on: any plumbline `Scalar` (forward, with
/// bugs ignored) and the dual numbers below (derivatives, with the planted
/// bug applied to one operation's derivative rule).
trait Arith: Copy + Add<Output = Self> + Mul<Output = Self> {
    fn cst(v: f64) -> Self;
    fn value(self) -> f64;
    fn add_op(self, o: Self, bug: bool) -> Self;
    fn mul_op(self, o: Self, bug: bool) -> Self;
    fn tanh_op(self, bug: bool) -> Self;
    fn exp_op(self, bug: bool) -> Self;
    fn sin_op(self, bug: bool) -> Self;
    fn square_op(self, bug: bool) -> Self;
    /// Σ_k w[o][k]·r[k]; the bug reads w transposed in the tangent.
    fn affine_row(w: &[Self], r: &[Self], o: usize, bug: bool) -> Self;
    /// A sum of n terms; the bug divides the tangent by n.
    fn sum_op(r: &[Self], bug: bool) -> Self;
}

impl<T: Scalar> Arith for T {
    fn cst(v: f64) -> Self {
        T::from(v).unwrap_or_else(T::nan)
    }
    fn value(self) -> f64 {
        self.to_f64().unwrap_or(f64::NAN)
    }
    fn add_op(self, o: Self, _: bool) -> Self {
        self + o
    }
    fn mul_op(self, o: Self, _: bool) -> Self {
        self * o
    }
    fn tanh_op(self, _: bool) -> Self {
        self.tanh()
    }
    fn exp_op(self, _: bool) -> Self {
        self.exp()
    }
    fn sin_op(self, _: bool) -> Self {
        self.sin()
    }
    fn square_op(self, _: bool) -> Self {
        self * self
    }
    fn affine_row(w: &[Self], r: &[Self], o: usize, _: bool) -> Self {
        (0..N).fold(T::zero(), |s, k| s + w[o * N + k] * r[k])
    }
    fn sum_op(r: &[Self], _: bool) -> Self {
        r.iter().fold(T::zero(), |s, &v| s + v)
    }
}

/// A dual number v + d·ε with ε² = 0: forward-mode differentiation.
#[derive(Clone, Copy, Debug)]
struct Dual {
    v: f64,
    d: f64,
}

impl Add for Dual {
    type Output = Dual;
    fn add(self, o: Dual) -> Dual {
        Dual {
            v: self.v + o.v,
            d: self.d + o.d,
        }
    }
}

impl Mul for Dual {
    type Output = Dual;
    fn mul(self, o: Dual) -> Dual {
        Dual {
            v: self.v * o.v,
            d: self.d * o.v + self.v * o.d,
        }
    }
}

impl Arith for Dual {
    fn cst(v: f64) -> Self {
        Dual { v, d: 0.0 }
    }
    fn value(self) -> f64 {
        self.v
    }
    fn add_op(self, o: Self, bug: bool) -> Self {
        // Bug: the second operand's tangent is subtracted.
        let d = if bug { self.d - o.d } else { self.d + o.d };
        Dual { v: self.v + o.v, d }
    }
    fn mul_op(self, o: Self, bug: bool) -> Self {
        // Bug: the product rule loses its second term.
        let d = if bug {
            self.d * o.v
        } else {
            self.d * o.v + self.v * o.d
        };
        Dual { v: self.v * o.v, d }
    }
    fn tanh_op(self, bug: bool) -> Self {
        let t = self.v.tanh();
        // Bug: 1 − x² (derivative formula applied to the input).
        let slope = if bug {
            1.0 - self.v * self.v
        } else {
            1.0 - t * t
        };
        Dual {
            v: t,
            d: slope * self.d,
        }
    }
    fn exp_op(self, bug: bool) -> Self {
        let e = self.v.exp();
        // Bug: the first-order Taylor slope 1 + x instead of eˣ.
        let slope = if bug { 1.0 + self.v } else { e };
        Dual {
            v: e,
            d: slope * self.d,
        }
    }
    fn sin_op(self, bug: bool) -> Self {
        // Bug: d sin = −cos.
        let c = self.v.cos();
        Dual {
            v: self.v.sin(),
            d: if bug { -c } else { c } * self.d,
        }
    }
    fn square_op(self, bug: bool) -> Self {
        // Bug: the factor 2 is forgotten.
        let slope = if bug { self.v } else { 2.0 * self.v };
        Dual {
            v: self.v * self.v,
            d: slope * self.d,
        }
    }
    fn affine_row(w: &[Self], r: &[Self], o: usize, bug: bool) -> Self {
        let mut out = Dual { v: 0.0, d: 0.0 };
        for k in 0..N {
            let wk = w[o * N + k];
            let wt = if bug { w[k * N + o] } else { wk };
            out.v += wk.v * r[k].v;
            out.d += wk.d * r[k].v + wt.v * r[k].d;
        }
        out
    }
    fn sum_op(r: &[Self], bug: bool) -> Self {
        let v = r.iter().map(|x| x.v).sum();
        let d: f64 = r.iter().map(|x| x.d).sum();
        Dual {
            v,
            d: if bug { d / N as f64 } else { d },
        }
    }
}

/// Runs the program; `bug` breaks the derivative rule of one step.
fn run<T: Arith>(prog: &[Op], x: &[T], w: &[T], b: &[T], bug: Option<usize>) -> Vec<T> {
    let mut regs: Vec<Vec<T>> = vec![x.to_vec()];
    for (step, op) in prog.iter().enumerate() {
        let bad = bug == Some(step);
        let r = regs.last().cloned().unwrap_or_default();
        let next: Vec<T> = match *op {
            Op::Add(j) => (0..N).map(|i| r[i].add_op(regs[j][i], bad)).collect(),
            Op::Mul(j) => (0..N).map(|i| r[i].mul_op(regs[j][i], bad)).collect(),
            Op::Tanh => r.iter().map(|v| v.tanh_op(bad)).collect(),
            Op::Exp => r.iter().map(|v| v.exp_op(bad)).collect(),
            Op::Sin => r.iter().map(|v| v.sin_op(bad)).collect(),
            Op::Square => r.iter().map(|v| v.square_op(bad)).collect(),
            Op::Affine => (0..N)
                .map(|o| T::affine_row(w, &r, o, bad) + b[o])
                .collect(),
            Op::SumReduce => vec![T::sum_op(&r, bad); N],
        };
        regs.push(next);
    }
    regs.pop().unwrap_or_default()
}

/// A random layer: the program, with the backward from dual numbers.
#[derive(Debug, Default)]
struct Program {
    ops: Vec<Op>,
    bug: Option<usize>,
    /// The last upstream gradient the backward saw (used only to size a
    /// planted bug; it does not influence any result).
    upstream: RefCell<Vec<f64>>,
}

impl Program {
    /// ∂/∂(each element of x, w, b) of Σ g·y, one dual forward per element.
    fn gradients(&self, a: &Args<f64>, g: &[f64]) -> Vec<Vec<f64>> {
        let plain = |t: &Tensor<f64>| t.data().iter().map(|&v| Dual::cst(v)).collect::<Vec<_>>();
        let base: Vec<Vec<Dual>> = a.all().iter().map(plain).collect();
        let mut out = Vec::new();
        for (slot, t) in base.iter().enumerate() {
            let mut grad = Vec::with_capacity(t.len());
            for j in 0..t.len() {
                let mut seeded = base.clone();
                seeded[slot][j].d = 1.0;
                let y = run(&self.ops, &seeded[0], &seeded[1], &seeded[2], self.bug);
                grad.push(y.iter().zip(g).map(|(yi, gi)| yi.d * gi).sum());
            }
            out.push(grad);
        }
        out
    }
}

impl Layer for Program {
    type Real = f64;

    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "3")
            .param("w", "3, 3")
            .param("b", "3")
            .output("y", "3")
    }

    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        *self.upstream.borrow_mut() = up[0].data().to_vec();
        let grads = self.gradients(a, up[0].data());
        let shapes = [vec![N], vec![N, N], vec![N]];
        Gradients::from(
            grads
                .into_iter()
                .zip(shapes)
                .map(|(g, s)| Tensor::new(s, g).unwrap())
                .collect::<Vec<_>>(),
        )
    }
}

impl GenericForward for Program {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let y = run(
            &self.ops,
            a.input(0).data(),
            a.param(0).data(),
            a.param(1).data(),
            None,
        );
        let mut it = y.into_iter();
        vec![Tensor::from_fn(vec![N], |_| {
            it.next().unwrap_or_else(T::nan)
        })]
    }
}

fn op() -> impl Strategy<Value = (u8, usize)> {
    (0u8..8, any::<usize>())
}

fn to_op(code: u8, pick: usize, step: usize) -> Op {
    // Binary operations read an earlier register (0..=step).
    let j = pick % (step + 1);
    match code {
        0 => Op::Add(j),
        1 => Op::Mul(j),
        2 => Op::Tanh,
        3 => Op::Exp,
        4 => Op::Sin,
        5 => Op::Square,
        6 => Op::Affine,
        _ => Op::SumReduce,
    }
}

prop_compose! {
    fn program()(codes in prop::collection::vec(op(), 1..7),
                 values in prop::collection::vec(-1.0f64..1.0, 15),
                 bug_pick in any::<usize>())
                -> (Vec<Op>, Args<f64>, usize) {
        let ops: Vec<Op> = codes.iter().enumerate().map(|(s, &(c, p))| to_op(c, p, s)).collect();
        let args = Args::new(
            vec![Tensor::new(vec![N], values[..3].to_vec()).unwrap()],
            vec![
                Tensor::new(vec![N, N], values[3..12].to_vec()).unwrap(),
                Tensor::new(vec![N], values[12..].to_vec()).unwrap(),
            ],
        );
        let bug = bug_pick % ops.len();
        (ops, args, bug)
    }
}

/// Programs whose values stay moderate (exp of exp can overflow) and whose
/// derivatives are moderate too (sin of exp of exp can have a finite value,
/// a derivative of 1e232 and an oscillation far shorter than any step:
/// noise to every reference, and not a layer anyone trains).
fn tame(ops: &[Op], args: &Args<f64>) -> bool {
    let y = run(
        ops,
        args.input(0).data(),
        args.param(0).data(),
        args.param(1).data(),
        None,
    );
    let program = Program {
        ops: ops.to_vec(),
        ..Program::default()
    };
    // Keep every operation's input moderate: a saturated tanh makes the
    // textbook 1 − t² lose every digit, and sin(e^(e^x)) at an argument of
    // 600 is so ill-conditioned that the backward's own rounding (1e-11
    // relative in f64) exceeds any error bar a checker could justify. Layers
    // people train live far from both.
    let tanh_ok = ops.iter().enumerate().all(|(k, op)| {
        let limit = if matches!(op, Op::Tanh) { 5.0 } else { 30.0 };
        run(
            &ops[..k],
            args.input(0).data(),
            args.param(0).data(),
            args.param(1).data(),
            None,
        )
        .iter()
        .all(|v| v.value().abs() <= limit)
    });
    tanh_ok
        && y.iter().all(|v| v.value().abs() < 1e3)
        && program
            .gradients(args, &[1.0; N])
            .iter()
            .flatten()
            .all(|d| d.abs() < 1e6)
}

/// The size of a planted bug at these arguments, relative to the correct
/// gradient: max |bugged − correct| / max(|correct|, 1e-3), via the duals.
fn bug_size(ops: &[Op], bug: usize, args: &Args<f64>, g: &[f64]) -> f64 {
    let good = Program {
        ops: ops.to_vec(),
        ..Program::default()
    }
    .gradients(args, g);
    let bad = Program {
        ops: ops.to_vec(),
        bug: Some(bug),
        ..Program::default()
    }
    .gradients(args, g);
    let scale = good.iter().flatten().fold(1e-3_f64, |m, v| m.max(v.abs()));
    let diff = good
        .iter()
        .flatten()
        .zip(bad.iter().flatten())
        .fold(0.0_f64, |m, (a, b)| m.max((a - b).abs()));
    diff / scale
}

/// A correct program passes the audit.
fn correct_passes(scheme: Scheme, ops: Vec<Op>, args: Args<f64>) -> Result<(), TestCaseError> {
    prop_assume!(tame(&ops, &args));
    let correct = Program {
        ops: ops.clone(),
        ..Program::default()
    };
    let report = Audit::new().scheme(scheme).run(&correct, &args)?;
    prop_assert!(report.passed(), "correct program {ops:?} failed:\n{report}");
    Ok(())
}

/// A program with one broken derivative rule fails the audit.
fn bugged_fails(
    scheme: Scheme,
    ops: Vec<Op>,
    args: Args<f64>,
    bug: usize,
) -> Result<(), TestCaseError> {
    prop_assume!(tame(&ops, &args));
    let audit = Audit::new().scheme(scheme);
    // Run the correct program once to learn the upstream gradient the audit
    // draws (same seed for both runs), to size the bug.
    let correct = Program {
        ops: ops.clone(),
        ..Program::default()
    };
    let _ = audit.run(&correct, &args)?;
    let g = correct.upstream.borrow().clone();
    // A rule broken where it has no effect at these arguments (e.g. a
    // tangent that is zero there) is not a bug at this point; require an
    // effect far above any reference's error.
    prop_assume!(bug_size(&ops, bug, &args, &g) > 1e-6);
    let bugged = Program {
        ops: ops.clone(),
        bug: Some(bug),
        ..Program::default()
    };
    let report = audit.run(&bugged, &args)?;
    prop_assert!(
        !report.passed(),
        "bug at step {bug} of {ops:?} not detected:\n{report}"
    );
    Ok(())
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 256, ..ProptestConfig::default() })]

    #[test]
    fn bugged_programs_fail_with_complex_step((ops, args, bug) in program()) {
        bugged_fails(Scheme::ComplexStep, ops, args, bug)?;
    }

    #[test]
    fn bugged_programs_fail_with_ridders((ops, args, bug) in program()) {
        bugged_fails(Scheme::Ridders, ops, args, bug)?;
    }

    #[test]
    fn correct_programs_pass_with_complex_step((ops, args, _bug) in program()) {
        correct_passes(Scheme::ComplexStep, ops, args)?;
    }

    #[test]
    fn correct_programs_pass_with_ridders((ops, args, _bug) in program()) {
        correct_passes(Scheme::Ridders, ops, args)?;
    }
}

#[test]
fn dual_numbers_match_handbook_derivatives() {
    // tanh′(0.5) = 0.78644773296592741015 (METHODS §8: DLMF 4.34.3/4.35.12,
    // mpmath); d/dx sin x = cos x at 1: cos 1 = 0.5403023058681398 (common
    // practice).
    let t = Dual { v: 0.5, d: 1.0 }.tanh_op(false);
    assert!((t.d - 0.786_447_732_965_927_4).abs() < 1e-15);
    let s = Dual { v: 1.0, d: 1.0 }.sin_op(false);
    assert!((s.d - 0.540_302_305_868_139_8).abs() < 1e-15);
    let e = Dual { v: 0.0, d: 1.0 }.exp_op(false);
    assert_eq!(e.d, 1.0);
}
