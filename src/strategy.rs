//! proptest strategies for tensors and for a layer's whole argument set
//! (feature `proptest`, on by default).
//!
//! Values are drawn in `f64` and rounded to the layer's precision. Shapes
//! are drawn first and values second, so proptest shrinks the sizes of the
//! named dims (toward the low end of each range) before the values.
//!
//! # Random shapes
//! Name the dims in the layer's [`Signature`] (`"batch, in"`) and give each
//! a range; [`args_for`] draws one size per name, shared by every tensor
//! that uses it, then the tensors:
//!
//! ```
//! use plumbline::{strategy, Signature};
//! use proptest::prelude::*;
//! use proptest::strategy::ValueTree;
//!
//! let sig = Signature::new()
//!     .input("x", "batch, features")
//!     .param("w", "out, features")
//!     .param("b", "out")
//!     .output("y", "batch, out");
//! let sizes = [("batch", 1..=4), ("features", 1..=8), ("out", 1..=3)];
//! let args = strategy::args_for::<f64>(&sig, &sizes, -1.0..=1.0);
//! let mut runner = proptest::test_runner::TestRunner::deterministic();
//! let drawn = args.new_tree(&mut runner).unwrap().current();
//! let (n, f) = (drawn.input(0).shape()[0], drawn.input(0).shape()[1]);
//! assert!((1..=4).contains(&n) && (1..=8).contains(&f));
//! assert_eq!(drawn.param(0).shape()[1], f); // `features` is shared
//! ```

use std::collections::BTreeMap;
use std::ops::RangeInclusive;

use proptest::collection::vec;
use proptest::strategy::{BoxedStrategy, Strategy};

pub use crate::harness::{check_layer_with, CaseOutcome};

use crate::layer::{Args, Forward};
use crate::scalar::Real;
use crate::signature::{Dim, Signature};
use crate::tensor::Tensor;

/// The size range of a named dim that [`args_for`] is not given, and the
/// extent of a tensor declared with any shape (`"*"`, drawn as rank 1).
pub const DEFAULT_EXTENT: RangeInclusive<usize> = 1..=4;

fn build<R: Real>(shape: Vec<usize>, data: Vec<f64>) -> Tensor<R> {
    let mut values = data.into_iter();
    Tensor::from_fn(shape, |_| R::from_f64(values.next().unwrap_or(0.0)))
}

/// Tensors of a fixed shape with values in `values`.
///
/// ```
/// use plumbline::strategy;
/// use proptest::strategy::{Strategy, ValueTree};
/// let mut runner = proptest::test_runner::TestRunner::deterministic();
/// let t = strategy::tensor::<f32>(vec![2, 3], -0.5..=0.5).new_tree(&mut runner).unwrap().current();
/// assert_eq!(t.shape(), &[2, 3]);
/// assert!(t.data().iter().all(|v| (-0.5..=0.5).contains(v)));
/// ```
pub fn tensor<R: Real>(
    shape: Vec<usize>,
    values: RangeInclusive<f64>,
) -> impl Strategy<Value = Tensor<R>> {
    let n = shape.iter().product::<usize>();
    vec(values, n).prop_map(move |data| build(shape.clone(), data))
}

/// Tensors of a random shape: a rank in `rank`, each extent in `extent`,
/// values in `values`.
///
/// ```
/// use plumbline::strategy;
/// use proptest::strategy::{Strategy, ValueTree};
/// let mut runner = proptest::test_runner::TestRunner::deterministic();
/// let t = strategy::tensor_of_any_shape::<f64>(1..=3, 1..=4, -1.0..=1.0)
///     .new_tree(&mut runner).unwrap().current();
/// assert!((1..=3).contains(&t.rank()));
/// assert!(t.shape().iter().all(|n| (1..=4).contains(n)));
/// ```
pub fn tensor_of_any_shape<R: Real>(
    rank: RangeInclusive<usize>,
    extent: RangeInclusive<usize>,
    values: RangeInclusive<f64>,
) -> impl Strategy<Value = Tensor<R>> {
    vec(extent, rank).prop_flat_map(move |shape| tensor(shape, values.clone()))
}

/// What one argument slot needs: its axes, each a named dim (index into
/// the drawn sizes) or an exact extent.
#[derive(Clone, Debug)]
enum Axis {
    Drawn(usize),
    Exact(usize),
}

/// A layer's whole argument set, from its [`Signature`]: one size per named
/// dim, drawn from `sizes` (names not listed use [`DEFAULT_EXTENT`]), then
/// every input and parameter tensor (fixed inputs too) with values in
/// `values`. Exact extents are kept; a tensor declared with any shape
/// (`"*"`) is drawn as rank 1 with its own extent from [`DEFAULT_EXTENT`].
///
/// A signature that does not parse yields tensors the audit rejects with
/// the signature's own error, so the problem shows on the first case.
/// See the [module docs](self) for an example.
pub fn args_for<R: Real>(
    signature: &Signature,
    sizes: &[(&str, RangeInclusive<usize>)],
    values: RangeInclusive<f64>,
) -> impl Strategy<Value = Args<R>> {
    let mut names: BTreeMap<String, usize> = BTreeMap::new();
    let mut ranges: Vec<RangeInclusive<usize>> = Vec::new();
    let mut slots: Vec<Vec<Axis>> = Vec::new();
    for slot in signature.slots() {
        let axes = match &slot.dims {
            None => {
                ranges.push(DEFAULT_EXTENT);
                vec![Axis::Drawn(ranges.len() - 1)]
            }
            Some(dims) => dims
                .iter()
                .map(|d| match d {
                    Dim::Exact(n) => Axis::Exact(*n),
                    Dim::Named(name) => {
                        let k = *names.entry(name.clone()).or_insert_with(|| {
                            let range = sizes
                                .iter()
                                .find(|(n, _)| n == name)
                                .map(|(_, r)| r.clone())
                                .unwrap_or(DEFAULT_EXTENT);
                            ranges.push(range);
                            ranges.len() - 1
                        });
                        Axis::Drawn(k)
                    }
                })
                .collect(),
        };
        slots.push(axes);
    }
    let inputs = signature.inputs().len();
    ranges.prop_flat_map(move |drawn| {
        let tensors: Vec<BoxedStrategy<Tensor<R>>> = slots
            .iter()
            .map(|axes| {
                let shape = axes
                    .iter()
                    .map(|a| match a {
                        Axis::Drawn(k) => drawn[*k],
                        Axis::Exact(n) => *n,
                    })
                    .collect();
                tensor(shape, values.clone()).boxed()
            })
            .collect();
        tensors.prop_map(move |mut all| {
            let params = all.split_off(inputs.min(all.len()));
            Args::new(all, params)
        })
    })
}

/// [`args_for`] with the signature and precision of `layer`.
///
/// ```
/// use plumbline::{strategy, Args, Forward, Gradients, Layer, Signature, Tensor};
/// use proptest::strategy::{Strategy, ValueTree};
///
/// /// Brood temperature above a set point: y = x − 34.5 (°C).
/// struct Offset;
/// impl Layer for Offset {
///     type Real = f32;
///     fn signature(&self) -> Signature { Signature::new().input("x", "hive").output("y", "hive") }
///     fn backward(&self, _: &Args<f32>, g: &[Tensor<f32>]) -> Gradients<f32> {
///         Gradients::from(vec![g[0].clone()])
///     }
/// }
///
/// impl Forward for Offset {
///     fn forward(&self, a: &Args<f32>) -> Vec<Tensor<f32>> { vec![a.input(0).map(|x| x - 34.5)] }
/// }
///
/// let mut runner = proptest::test_runner::TestRunner::deterministic();
/// let args = strategy::layer_args(&Offset, &[("hive", 2..=2)], 30.0..=38.0)
///     .new_tree(&mut runner).unwrap().current();
/// assert_eq!(args.input(0).shape(), &[2]);
/// ```
pub fn layer_args<L: Forward + ?Sized>(
    layer: &L,
    sizes: &[(&str, RangeInclusive<usize>)],
    values: RangeInclusive<f64>,
) -> impl Strategy<Value = Args<L::Real>> {
    args_for::<L::Real>(&layer.signature(), sizes, values)
}

/// A proptest [`Config`](proptest::test_runner::Config) suited to audits:
/// `cases` cases, room to shrink (proptest's automatic limit of 4 × cases
/// stops before drawn values reach their simplest form), and failing cases
/// persisted beside the test's source file as `<file>.proptest-regressions`
/// (for a test in `tests/`, where proptest's default location cannot be
/// found). Commit that file: every later run replays the stored cases
/// first. `PROPTEST_*` variables change proptest's defaults, not values set
/// here.
///
/// ```
/// let config = plumbline::strategy::config(24);
/// assert_eq!(config.cases, 24);
/// assert_eq!(config.max_shrink_iters, 4096);
/// ```
pub fn config(cases: u32) -> proptest::test_runner::Config {
    proptest::test_runner::Config {
        cases,
        max_shrink_iters: 4096,
        failure_persistence: Some(Box::new(
            proptest::test_runner::FileFailurePersistence::WithSource("proptest-regressions"),
        )),
        ..proptest::test_runner::Config::default()
    }
}
