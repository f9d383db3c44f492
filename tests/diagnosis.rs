//! Each diagnosis family is recognised on a planted bug that triggers it,
//! and correct layers with kinks (ReLU, abs, max-pool ties) never get a
//! failing diagnosis over random inputs.

mod common;

use std::cell::{Cell, RefCell};

use plumbline::{
    Args, Audit, Diagnosis, Forward, GenericForward, Gradients, Layer, Scalar, Signature, Tensor,
    Verdict,
};

/// Planted bugs for the scaled-product layer y[i, j] = w[j] · act(x[i, j]).
#[derive(Clone, Copy, PartialEq, Debug)]
enum Bug {
    None,
    NanInBackward,
    AllZeroDw,
    LastColumnDxDropped,
    SpuriousDu,
    DiagonalOnly,
}

/// y[i, j] = w[j] · x[i, j] + m[i, j] · x[i, j]; `u` does not reach the output.
/// `m` is square so a diagonal pattern can be planted.
struct Product {
    bug: Bug,
}

fn at<T: Copy>(t: &Tensor<T>, ix: &[usize]) -> T {
    t.get(ix).unwrap()
}

impl Layer for Product {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "n, n")
            .param("w", "n")
            .param("m", "n, n")
            .param("u", "n")
            .output("y", "n, n")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let (x, w, m, g) = (a.input(0), a.param(0), a.param(1), &up[0]);
        let n = x.shape()[0];
        let mut dx = Tensor::from_fn(vec![n, n], |ix| (w.data()[ix[1]] + at(m, ix)) * at(g, ix));
        let mut dw = Tensor::from_fn(vec![n], |ix| {
            (0..n)
                .map(|i| at(g, &[i, ix[0]]) * at(x, &[i, ix[0]]))
                .sum()
        });
        let mut dm = Tensor::from_fn(vec![n, n], |ix| at(g, ix) * at(x, ix));
        let mut du = Tensor::full(vec![n], 0.0);
        match self.bug {
            Bug::None => {}
            Bug::NanInBackward => dm.data_mut()[n + 1] = f64::NAN,
            Bug::AllZeroDw => dw = dw.map(|_| 0.0),
            Bug::LastColumnDxDropped => {
                dx = Tensor::from_fn(
                    vec![n, n],
                    |ix| if ix[1] == n - 1 { 0.0 } else { at(&dx, ix) },
                )
            }
            Bug::SpuriousDu => du = du.map(|_| 0.25),
            Bug::DiagonalOnly => {
                dm = Tensor::from_fn(
                    vec![n, n],
                    |ix| if ix[0] == ix[1] { at(&dm, ix) } else { 0.0 },
                )
            }
        }
        Gradients::from(vec![dx, dw, dm, du])
    }
}

impl GenericForward for Product {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, w, m) = (a.input(0), a.param(0), a.param(1));
        vec![Tensor::from_fn(x.shape().to_vec(), |ix| {
            (w.data()[ix[1]] + at(m, ix)) * at(x, ix)
        })]
    }
}

fn product_args() -> Args<f64> {
    let n = 3;
    Args::new(
        vec![common::tensor(&[n, n], 1)],
        vec![
            common::tensor(&[n], 2),
            common::tensor(&[n, n], 3),
            common::tensor(&[n], 4),
        ],
    )
}

fn first(bug: Bug) -> (String, Verdict, Option<Diagnosis>) {
    let r = Audit::new().run(&Product { bug }, &product_args()).unwrap();
    let row = &r.rows[0];
    (row.name.clone(), row.verdict, row.diagnosis.clone())
}

#[test]
fn correct_product_layer_passes() {
    let r = Audit::new()
        .run(&Product { bug: Bug::None }, &product_args())
        .unwrap();
    assert!(r.passed(), "{r}");
    assert!(r.rows.iter().all(|row| row.diagnosis.is_none()), "{r}");
}

#[test]
fn non_finite_in_backward_says_where() {
    let (name, verdict, d) = first(Bug::NanInBackward);
    assert_eq!((name.as_str(), verdict), ("m", Verdict::Disagrees));
    assert_eq!(
        d,
        Some(Diagnosis::NonFinite {
            place: "backward at [1, 1]".into()
        })
    );
}

#[test]
fn all_zero_gradient() {
    let (name, _, d) = first(Bug::AllZeroDw);
    assert_eq!((name.as_str(), d), ("w", Some(Diagnosis::AllZero)));
}

#[test]
fn spurious_gradient() {
    let (name, _, d) = first(Bug::SpuriousDu);
    assert_eq!((name.as_str(), d), ("u", Some(Diagnosis::Spurious)));
}

#[test]
fn partial_last_column() {
    let (name, _, d) = first(Bug::LastColumnDxDropped);
    assert_eq!(name, "x");
    assert_eq!(
        d.unwrap().to_string(),
        "partial: all of column 2 (last slice of axis 1) (3 of 9 wrong)"
    );
}

#[test]
fn partial_every_element_but_the_diagonal() {
    let (name, _, d) = first(Bug::DiagonalOnly);
    assert_eq!(name, "m");
    assert_eq!(
        d.unwrap().to_string(),
        "partial: every element but the diagonal (6 of 9 wrong)"
    );
}

/// y = x + noise from a counter: an unseeded-dropout stand-in.
struct Jittery {
    calls: Cell<u32>,
}

impl Layer for Jittery {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new().input("x", "n").output("y", "n")
    }
    fn backward(&self, _: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        Gradients::from(vec![up[0].clone()])
    }
}

impl Forward for Jittery {
    fn forward(&self, a: &Args<f64>) -> Vec<Tensor<f64>> {
        self.calls.set(self.calls.get() + 1);
        let jitter = 1e-3 * f64::from(self.calls.get() % 7);
        vec![a.input(0).map(|x| x + jitter)]
    }
}

#[test]
fn non_deterministic_forward_is_reported_as_such() {
    let layer = Jittery {
        calls: Cell::new(0),
    };
    let args = Args::new(vec![common::tensor(&[4], 9)], vec![]);
    let r = Audit::new().run(&layer, &args).unwrap();
    assert!(!r.passed());
    match &r.rows[0].diagnosis {
        Some(Diagnosis::ForwardNotRepeatable { detail }) => {
            assert!(detail.starts_with("output `y` at [0]"), "{detail}")
        }
        other => panic!("{other:?}\n{r}"),
    }
}

/// y = 3x whose backward adds into a buffer kept between calls.
struct Accumulating {
    buffer: RefCell<Vec<f64>>,
}

impl Layer for Accumulating {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new().input("x", "n").output("y", "n")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let mut buf = self.buffer.borrow_mut();
        buf.resize(a.input(0).len(), 0.0);
        for (b, g) in buf.iter_mut().zip(up[0].data()) {
            *b += 3.0 * g;
        }
        Gradients::from(vec![Tensor::new(vec![buf.len()], buf.clone()).unwrap()])
    }
}

impl Forward for Accumulating {
    fn forward(&self, a: &Args<f64>) -> Vec<Tensor<f64>> {
        vec![a.input(0).map(|x| 3.0 * x)]
    }
}

#[test]
fn accumulating_backward_is_reported_as_such() {
    let layer = Accumulating {
        buffer: RefCell::new(Vec::new()),
    };
    let args = Args::new(vec![common::tensor(&[4], 9)], vec![]);
    let r = Audit::new().run(&layer, &args).unwrap();
    assert!(!r.passed());
    assert!(
        matches!(
            &r.rows[0].diagnosis,
            Some(Diagnosis::BackwardAccumulates { .. })
        ),
        "{r}"
    );
}

/// y = relu(x) + |x| on one tensor and a 2-wide max-pool on another, with
/// backward conventions relu′(0) = 0, |·|′(0) = `abs_at_zero` and ties routed
/// to the first maximum: valid one-sided derivatives (for |abs_at_zero| ≤ 1),
/// but not the ones the complex step picks.
struct Kinky {
    abs_at_zero: f64,
    /// Route max-pool ties to both maxima (a real bug at ties).
    ties_to_both: bool,
}

impl Kinky {
    /// Valid conventions everywhere.
    const CORRECT: Kinky = Kinky {
        abs_at_zero: 0.0,
        ties_to_both: false,
    };
}

impl Layer for Kinky {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "n")
            .input("p", "pairs, 2")
            .output("y", "n")
            .output("pooled", "pairs")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let x = a.input(0);
        let dx = Tensor::from_fn(x.shape().to_vec(), |ix| {
            let v = at(x, ix);
            let relu = if v > 0.0 { 1.0 } else { 0.0 };
            let abs = if v > 0.0 {
                1.0
            } else if v < 0.0 {
                -1.0
            } else {
                self.abs_at_zero
            };
            (relu + abs) * at(&up[0], ix)
        });
        let p = a.input(1);
        let dp = Tensor::from_fn(p.shape().to_vec(), |ix| {
            let (l, r) = (at(p, &[ix[0], 0]), at(p, &[ix[0], 1]));
            let g = at(&up[1], &[ix[0]]);
            let winner = if ix[1] == 0 {
                l >= r
            } else {
                r > l || (self.ties_to_both && r == l)
            };
            if winner {
                g
            } else {
                0.0
            }
        });
        Gradients::from(vec![dx, dp])
    }
}

impl GenericForward for Kinky {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let y = a.input(0).map(|x| x.max(T::zero()) + x.abs());
        let p = a.input(1);
        let pooled = Tensor::from_fn(vec![p.shape()[0]], |ix| {
            at(p, &[ix[0], 0]).max(at(p, &[ix[0], 1]))
        });
        vec![y, pooled]
    }
}

/// Values from a coarse grid so zeros and ties are common.
fn grid_args(seed: u64, n: usize, pairs: usize) -> Args<f64> {
    let v = common::values(n + 2 * pairs, seed);
    let snap = |t: f64| (t * 2.0).round() / 2.0;
    let x = Tensor::new(vec![n], v[..n].iter().map(|&t| snap(t)).collect()).unwrap();
    let p = Tensor::new(vec![pairs, 2], v[n..].iter().map(|&t| snap(t)).collect()).unwrap();
    Args::new(vec![x, p], vec![])
}

#[test]
fn kinks_are_listed_apart_and_do_not_fail() {
    let x = Tensor::new(vec![3], vec![0.0, 0.5, -0.5]).unwrap();
    let p = Tensor::new(vec![2, 2], vec![0.5, 0.5, -1.0, 1.0]).unwrap();
    let args = Args::new(vec![x, p], vec![]);
    let r = Audit::new().run(&Kinky::CORRECT, &args).unwrap();
    assert!(r.passed(), "{r}");
    // relu + |x| at 0: one-sided slopes −1 and 2; the analytic 0 fits.
    assert_eq!(
        r.row("x").unwrap().diagnosis,
        Some(Diagnosis::Kinks {
            count: 1,
            outside: 0
        }),
        "{r}"
    );
    // The tie (0.5, 0.5): the complex step picks the second maximum, the
    // backward the first; both fit their one-sided intervals.
    assert_eq!(r.row("p").unwrap().kinks, 2, "{r}");
    // Kinks are listed apart: the worst element shown is a smooth one.
    assert_eq!(r.row("x").unwrap().max_abs_error, 0.0, "{r}");
}

#[test]
fn an_analytic_value_outside_the_one_sided_interval_fails_only_when_asked() {
    let x = Tensor::new(vec![2], vec![0.0, 0.5]).unwrap();
    let p = Tensor::new(vec![1, 2], vec![-1.0, 1.0]).unwrap();
    let args = Args::new(vec![x, p], vec![]);
    let layer = Kinky {
        abs_at_zero: 5.0,
        ties_to_both: false,
    };
    let r = Audit::new().run(&layer, &args).unwrap();
    assert!(r.passed(), "listed apart by default: {r}");
    assert_eq!(
        r.row("x").unwrap().diagnosis,
        Some(Diagnosis::Kinks {
            count: 1,
            outside: 1
        })
    );
    let r = Audit::new().kinks_fail(true).run(&layer, &args).unwrap();
    assert!(!r.passed(), "{r}");
    assert_eq!(r.rows[0].name, "x");
}

#[test]
fn max_pool_ties_routed_to_every_maximum_are_caught_jointly() {
    // Each tied element's analytic value fits its own one-sided interval
    // [0, g]; moving both together raises the pooled value at rate 1, not 2.
    let x = Tensor::new(vec![1], vec![0.25]).unwrap();
    let p = Tensor::new(vec![2, 2], vec![0.5, 0.5, -1.0, -1.0]).unwrap();
    let args = Args::new(vec![x, p], vec![]);
    let r = Audit::new()
        .run(
            &Kinky {
                abs_at_zero: 0.0,
                ties_to_both: true,
            },
            &args,
        )
        .unwrap();
    assert!(!r.passed(), "{r}");
    assert_eq!(r.rows[0].name, "p");
    assert!(
        matches!(r.rows[0].diagnosis, Some(Diagnosis::SharedKink { .. })),
        "{r}"
    );
    // Routed to one maximum, the same ties pass.
    let r = Audit::new().run(&Kinky::CORRECT, &args).unwrap();
    assert!(r.passed(), "{r}");
}

#[test]
fn correct_kinky_layers_never_get_a_failing_diagnosis() {
    for seed in 0..300 {
        let args = grid_args(seed, 5, 3);
        let r = Audit::new().seed(seed).run(&Kinky::CORRECT, &args).unwrap();
        assert!(r.passed(), "seed {seed}\n{r}");
        for row in &r.rows {
            assert!(
                row.diagnosis.as_ref().is_none_or(|d| d.is_informational()),
                "{r}"
            );
        }
    }
}

/// y = √x: NaN in the forward for a negative element.
struct Root;

impl Layer for Root {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new().input("x", "n").output("y", "n")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let dx = Tensor::from_fn(a.input(0).shape().to_vec(), |ix| {
            0.5 / at(a.input(0), ix).sqrt() * at(&up[0], ix)
        });
        Gradients::from(vec![dx])
    }
}

impl GenericForward for Root {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        vec![a.input(0).map(|x| x.sqrt())]
    }
}

#[test]
fn non_finite_forward_says_which_output_and_where() {
    let x = Tensor::new(vec![3], vec![1.0, 4.0, -1.0]).unwrap();
    let r = Audit::new()
        .run(&Root, &Args::new(vec![x], vec![]))
        .unwrap();
    assert!(!r.passed(), "NaN never passes: {r}");
    assert_eq!(
        r.rows[0].diagnosis,
        Some(Diagnosis::NonFinite {
            place: "forward output `y` at [2] (in f64)".into()
        })
    );
}

proptest::proptest! {
    #![proptest_config(proptest::prelude::ProptestConfig::with_cases(200))]
    /// Correct layers with ReLU, |x| and max-pool kinks, on a coarse grid of
    /// values (so zeros and ties are frequent), never get a failing verdict
    /// or diagnosis.
    #[test]
    fn correct_kinky_layer_is_clean_over_random_grid_inputs(
        xs in proptest::collection::vec(-4i32..=4, 1..6),
        ps in proptest::collection::vec(-2i32..=2, 2..=8),
        seed in 0u64..1000,
    ) {
        let x = Tensor::new(vec![xs.len()], xs.iter().map(|&v| f64::from(v) * 0.5).collect()).unwrap();
        let pairs = ps.len() / 2;
        let p = Tensor::new(vec![pairs, 2], ps[..2 * pairs].iter().map(|&v| f64::from(v) * 0.5).collect()).unwrap();
        let r = Audit::new().seed(seed).run(&Kinky::CORRECT, &Args::new(vec![x, p], vec![])).unwrap();
        proptest::prop_assert!(r.passed(), "{}", r);
        for row in &r.rows {
            proptest::prop_assert!(row.diagnosis.as_ref().is_none_or(|d| d.is_informational()), "{}", r);
        }
    }
}
