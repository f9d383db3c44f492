//! Audits of candle code (feature `candle`): a custom op's hand-written
//! `bwd`, or any function of candle tensors through candle's autograd, and
//! conversions between [`Tensor`] and `candle_core::Tensor`.
//!
//! * [`CustomOp1Layer`], [`CustomOp2Layer`] and [`CustomOp3Layer`] turn a
//!   candle `CustomOp1`/`CustomOp2`/`CustomOp3` and the shapes of its
//!   arguments into a plumbline layer. Its forward runs the op's CPU
//!   forward; its backward calls the op's own
//!   `bwd(args.., res, grad_res)` with the forward's result and the
//!   upstream gradient. A `None` from `bwd` is reported as a *missing*
//!   gradient on that argument's row.
//! * [`AutogradLayer`] audits a function of candle tensors end to end:
//!   its backward builds Σₖ⟨upstreamₖ, yₖ⟩ as a candle scalar, calls
//!   `Tensor::backward()` and reads each argument's gradient from the
//!   `GradStore`. A model that uses custom ops somewhere inside is checked
//!   as a whole.
//!
//! Both are generic over the precision, `f32` or `f64`: the op runs on
//! candle tensors of that dtype, and the audit uses real differences in
//! that precision (Ridders' method by default; the complex step needs a
//! forward written for any [`Scalar`](crate::Scalar), which a candle op is
//! not).
//!
//! An error from the op (its `cpu_fwd`, its `bwd`, the function, or
//! `Tensor::backward`) cannot be returned through a layer call, which
//! returns values: the adapter stops the call, and the audit returns
//! [`Error::OpFailed`] naming the op, which of its calls failed, and the
//! audit's call it happened in. Called outside an audit, the layer's
//! `forward` and `backward` panic with the same text.
//!
//! Everything runs on candle's CPU device.
//!
//! Rust version: candle-core 0.11 declares no minimum. The crates it brings
//! in, at the versions plumbline's `Cargo.lock` holds, declare at most 1.88,
//! plumbline's own; a fresh resolve may pick zip 9.8, which needs 1.89
//! (`cargo update -p zip --precise 9.5.1` keeps 1.88). The feature is built
//! and tested with Rust 1.95 only.

use std::fmt;
use std::marker::PhantomData;

use candle_core::{CustomOp1, CustomOp2, CustomOp3, Device, Var, WithDType};

use crate::error::{raise, Error, OpFailure};
use crate::layer::{Args, Forward, Gradients, Layer};
use crate::scalar::Real;
use crate::signature::{Role, Signature};
use crate::tensor::Tensor;

type CandleTensor = candle_core::Tensor;

/// `[2, 3]`, `[]`.
fn dims_text(dims: &[usize]) -> String {
    crate::format::shape_string(dims)
}

fn describe(t: &CandleTensor) -> String {
    format!(
        "a candle tensor of dtype {} and shape {}",
        t.dtype().as_str(),
        dims_text(t.dims())
    )
}

fn target<T: Real>() -> String {
    format!("Tensor<{}>", T::NAME)
}

impl<T: Real + WithDType> Tensor<T> {
    /// The tensor as a candle tensor of the same dtype (`f32` or `f64`), on
    /// the CPU.
    ///
    /// ```
    /// use plumbline::Tensor;
    /// let t = Tensor::new(vec![2, 2], vec![1.5_f32, -2.0, 0.25, 4.0])?;
    /// let c = t.to_candle();
    /// assert_eq!(c.dims(), &[2, 2]);
    /// assert_eq!(c.dtype(), candle_core::DType::F32);
    /// assert_eq!(c.to_vec2::<f32>().unwrap(), vec![vec![1.5, -2.0], vec![0.25, 4.0]]);
    /// # Ok::<(), plumbline::Error>(())
    /// ```
    pub fn to_candle(&self) -> CandleTensor {
        CandleTensor::from_vec(self.data().to_vec(), self.shape().to_vec(), &Device::Cpu)
            .expect("a Tensor's data always fits its shape, and the CPU device always stores it")
    }

    /// A row-major tensor with the logical elements of a candle tensor of
    /// the same dtype, whatever its layout (transposed, narrowed or
    /// broadcast views included) and device.
    ///
    /// Errors with [`Error::Conversion`] when the dtype is not `T` (convert
    /// first with `to_dtype`) or candle cannot read the elements.
    ///
    /// ```
    /// use candle_core::{DType, Device};
    /// use plumbline::{Error, Tensor};
    ///
    /// let c = candle_core::Tensor::new(&[[1.0_f64, 2.0, 3.0], [4.0, 5.0, 6.0]], &Device::Cpu).unwrap();
    /// let t = Tensor::<f64>::from_candle(&c.t().unwrap())?; // a transposed view
    /// assert_eq!(t.shape(), &[3, 2]);
    /// assert_eq!(t.data(), &[1.0, 4.0, 2.0, 5.0, 3.0, 6.0]);
    ///
    /// let half = c.to_dtype(DType::F16).unwrap();
    /// let err = Tensor::<f64>::from_candle(&half).unwrap_err();
    /// assert!(matches!(err, Error::Conversion { .. }));
    /// assert!(err.to_string().contains("dtype f16"), "{err}");
    /// # Ok::<(), plumbline::Error>(())
    /// ```
    pub fn from_candle(t: &CandleTensor) -> Result<Self, Error> {
        let failed = |detail: String| Error::Conversion {
            from: describe(t),
            to: target::<T>(),
            detail,
        };
        if t.dtype() != T::DTYPE {
            return Err(failed(format!(
                "the element types differ; convert first with `.to_dtype(DType::{:?})`",
                T::DTYPE
            )));
        }
        let data = t
            .flatten_all()
            .and_then(|flat| flat.to_vec1::<T>())
            .map_err(|e| {
                failed(format!(
                    "candle could not read its elements: {}",
                    candle_message(&e)
                ))
            })?;
        Tensor::new(t.dims().to_vec(), data).map_err(|e| failed(e.to_string()))
    }
}

impl<T: Real + WithDType> From<&Tensor<T>> for CandleTensor {
    fn from(t: &Tensor<T>) -> Self {
        t.to_candle()
    }
}

impl<T: Real + WithDType> From<Tensor<T>> for CandleTensor {
    fn from(t: Tensor<T>) -> Self {
        let (shape, data) = t.into_parts();
        CandleTensor::from_vec(data, shape, &Device::Cpu)
            .expect("a Tensor's data always fits its shape, and the CPU device always stores it")
    }
}

impl<T: Real + WithDType> TryFrom<&CandleTensor> for Tensor<T> {
    type Error = Error;
    fn try_from(t: &CandleTensor) -> Result<Self, Error> {
        Tensor::from_candle(t)
    }
}

impl<T: Real + WithDType> TryFrom<CandleTensor> for Tensor<T> {
    type Error = Error;
    fn try_from(t: CandleTensor) -> Result<Self, Error> {
        Tensor::from_candle(&t)
    }
}

/// A candle error as one line: the error itself, without the backtrace
/// candle attaches when `RUST_BACKTRACE` is set (the error's place is what
/// [`Error::OpFailed`] says).
fn candle_message(e: &candle_core::Error) -> String {
    match e {
        candle_core::Error::WithBacktrace { inner, .. } => candle_message(inner),
        other => other.to_string(),
    }
}

/// Stops the layer call with an op failure (see the module docs).
fn fail(op: &'static str, step: &'static str, message: impl fmt::Display) -> ! {
    raise(OpFailure {
        op,
        step,
        message: message.to_string(),
    })
}

/// A result of the op in the layer's precision, or the call stopped.
fn take_back<T: Real + WithDType>(
    op: &'static str,
    step: &'static str,
    what: &str,
    t: &CandleTensor,
) -> Tensor<T> {
    if t.dtype() != T::DTYPE {
        fail(
            op,
            step,
            format!(
                "{what} has dtype {}, but the layer computes in {}",
                t.dtype().as_str(),
                T::NAME
            ),
        );
    }
    Tensor::from_candle(t).unwrap_or_else(|e| fail(op, step, format!("{what}: {e}")))
}

/// The arguments of an op layer: names and shapes, and the output's name.
#[derive(Clone, Debug, PartialEq)]
struct OpArguments {
    names: Vec<String>,
    shapes: Vec<Vec<usize>>,
    output: String,
}

impl OpArguments {
    fn new(names: &[&str], shapes: Vec<Vec<usize>>) -> Self {
        OpArguments {
            names: names.iter().map(|s| s.to_string()).collect(),
            shapes,
            output: "res".to_string(),
        }
    }

    fn rename(&mut self, names: &[&str], output: &str) {
        self.names = names.iter().map(|s| s.to_string()).collect();
        self.output = output.to_string();
    }

    fn signature(&self) -> Signature {
        let mut sig = Signature::new();
        for (name, shape) in self.names.iter().zip(&self.shapes) {
            sig = sig.input_shape(name, shape);
        }
        sig.output(&self.output, "*")
    }

    /// The op's forward on candle copies of `args`.
    fn forward<T: Real + WithDType>(
        &self,
        op: &'static str,
        args: &Args<T>,
        fwd: impl Fn(&[CandleTensor]) -> candle_core::Result<CandleTensor>,
    ) -> (Vec<CandleTensor>, CandleTensor) {
        let xs: Vec<CandleTensor> = args.all().iter().map(Tensor::to_candle).collect();
        let res = fwd(&xs).unwrap_or_else(|e| fail(op, "cpu_fwd", candle_message(&e)));
        (xs, res)
    }

    fn outputs<T: Real + WithDType>(
        &self,
        op: &'static str,
        args: &Args<T>,
        fwd: impl Fn(&[CandleTensor]) -> candle_core::Result<CandleTensor>,
    ) -> Vec<Tensor<T>> {
        let (_, res) = self.forward(op, args, fwd);
        vec![take_back(op, "cpu_fwd", "the result", &res)]
    }

    /// The op's `bwd` at `args`, with the forward's result and `upstream`.
    fn gradients<T: Real + WithDType>(
        &self,
        op: &'static str,
        args: &Args<T>,
        upstream: &[Tensor<T>],
        fwd: impl Fn(&[CandleTensor]) -> candle_core::Result<CandleTensor>,
        bwd: impl Fn(
            &[CandleTensor],
            &CandleTensor,
            &CandleTensor,
        ) -> candle_core::Result<Vec<Option<CandleTensor>>>,
    ) -> Gradients<T> {
        let (xs, res) = self.forward(op, args, fwd);
        let grad_res = upstream
            .first()
            .map(Tensor::to_candle)
            .unwrap_or_else(|| fail(op, "bwd", "no upstream gradient was given"));
        let grads =
            bwd(&xs, &res, &grad_res).unwrap_or_else(|e| fail(op, "bwd", candle_message(&e)));
        let grads = grads
            .iter()
            .zip(&self.names)
            .map(|(g, name)| {
                g.as_ref()
                    .map(|g| take_back(op, "bwd", &format!("the gradient of `{name}`"), g))
            })
            .collect::<Vec<_>>();
        Gradients::from(grads)
    }
}

macro_rules! shape_param_docs {
    () => {
        "Argument shapes are exact extents (`[24, 3]`; `[]` for a scalar); \
         the audit checks the arguments it is given against them."
    };
}

/// A candle [`CustomOp1`] as a plumbline layer: one input (named `arg`,
/// as in the op's `bwd`), one output (`res`), in precision `T` (`f32` or
/// `f64`).
///
/// The forward runs the op's `cpu_fwd` on a candle copy of the argument;
/// the backward runs it again for `res` and calls `bwd(arg, res, grad_res)`
/// with the upstream gradient. A `None` from `bwd` is a missing gradient;
/// an error from either is [`Error::OpFailed`].
///
/// ```
/// use candle_core::{CpuStorage, CustomOp1, Layout, Shape};
/// use plumbline::candle::CustomOp1Layer;
/// use plumbline::{Args, Audit, Tensor};
///
/// /// Frost depth from the soil temperature below 0 °C: y = x².
/// struct Squared;
///
/// impl CustomOp1 for Squared {
///     fn name(&self) -> &'static str {
///         "squared"
///     }
///     fn cpu_fwd(&self, s: &CpuStorage, l: &Layout) -> candle_core::Result<(CpuStorage, Shape)> {
///         let x = s.as_slice::<f64>()?;
///         let y = candle_core::cpu_backend::unary_map(x, l, |v| v * v);
///         Ok((CpuStorage::F64(y), l.shape().clone()))
///     }
///     fn bwd(
///         &self,
///         arg: &candle_core::Tensor,
///         _res: &candle_core::Tensor,
///         grad_res: &candle_core::Tensor,
///     ) -> candle_core::Result<Option<candle_core::Tensor>> {
///         Ok(Some((arg * 2.0)?.mul(grad_res)?))
///     }
/// }
///
/// let layer = CustomOp1Layer::<_, f64>::new(Squared, [3]).with_names(["soil"], "depth");
/// let x = Tensor::new(vec![3], vec![-1.5, -0.25, -3.0])?;
/// let report = Audit::new().name(layer.op_name()).run(&layer, &Args::new(vec![x], vec![]))?;
/// assert_eq!(report.rows[0].name, "soil");
/// report.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct CustomOp1Layer<C, T> {
    op: C,
    args: OpArguments,
    precision: PhantomData<fn() -> T>,
}

impl<C: CustomOp1, T: Real + WithDType> CustomOp1Layer<C, T> {
    /// The layer of `op` applied to an argument of shape `arg`.
    #[doc = shape_param_docs!()]
    /// See the example on [`CustomOp1Layer`].
    pub fn new(op: C, arg: impl Into<Vec<usize>>) -> Self {
        CustomOp1Layer {
            op,
            args: OpArguments::new(&["arg"], vec![arg.into()]),
            precision: PhantomData,
        }
    }
}

/// A candle [`CustomOp2`] as a plumbline layer: two inputs (`arg1`,
/// `arg2`), one output (`res`), in precision `T` (`f32` or `f64`).
///
/// As [`CustomOp1Layer`], with `bwd(arg1, arg2, res, grad_res)`; either
/// gradient may be `None` (reported missing on its row).
///
/// ```
/// use candle_core::{CpuStorage, CustomOp2, Layout, Shape};
/// use plumbline::candle::CustomOp2Layer;
/// use plumbline::{Args, Audit, Tensor};
///
/// /// Wind chill proxy per station: y = t · w.
/// struct Product;
///
/// impl CustomOp2 for Product {
///     fn name(&self) -> &'static str {
///         "product"
///     }
///     fn cpu_fwd(
///         &self,
///         s1: &CpuStorage,
///         l1: &Layout,
///         s2: &CpuStorage,
///         l2: &Layout,
///     ) -> candle_core::Result<(CpuStorage, Shape)> {
///         let (a, b) = (s1.as_slice::<f32>()?, s2.as_slice::<f32>()?);
///         let y = candle_core::cpu_backend::binary_map(l1, l2, a, b, |a, b| a * b);
///         Ok((CpuStorage::F32(y), l1.shape().clone()))
///     }
///     fn bwd(
///         &self,
///         a: &candle_core::Tensor,
///         b: &candle_core::Tensor,
///         _res: &candle_core::Tensor,
///         g: &candle_core::Tensor,
///     ) -> candle_core::Result<(Option<candle_core::Tensor>, Option<candle_core::Tensor>)> {
///         Ok((Some(g.mul(b)?), Some(g.mul(a)?)))
///     }
/// }
///
/// let layer = CustomOp2Layer::<_, f32>::new(Product, [2], [2]);
/// let t = Tensor::new(vec![2], vec![-2.5_f32, 1.0])?;
/// let w = Tensor::new(vec![2], vec![4.0_f32, 0.5])?;
/// Audit::new().run(&layer, &Args::new(vec![t, w], vec![]))?.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct CustomOp2Layer<C, T> {
    op: C,
    args: OpArguments,
    precision: PhantomData<fn() -> T>,
}

impl<C: CustomOp2, T: Real + WithDType> CustomOp2Layer<C, T> {
    /// The layer of `op` applied to arguments of shapes `arg1` and `arg2`.
    #[doc = shape_param_docs!()]
    /// See the example on [`CustomOp2Layer`].
    pub fn new(op: C, arg1: impl Into<Vec<usize>>, arg2: impl Into<Vec<usize>>) -> Self {
        CustomOp2Layer {
            op,
            args: OpArguments::new(&["arg1", "arg2"], vec![arg1.into(), arg2.into()]),
            precision: PhantomData,
        }
    }
}

/// A candle [`CustomOp3`] as a plumbline layer: three inputs (`arg1`,
/// `arg2`, `arg3`), one output (`res`), in precision `T` (`f32` or `f64`).
///
/// As [`CustomOp1Layer`], with `bwd(arg1, arg2, arg3, res, grad_res)`.
///
/// ```
/// use candle_core::{CpuStorage, CustomOp3, Layout, Shape};
/// use plumbline::candle::CustomOp3Layer;
/// use plumbline::{Args, Audit, Tensor};
///
/// /// Degree-days above a base, scaled: y = k · (t − base), elementwise.
/// struct Scaled;
///
/// impl CustomOp3 for Scaled {
///     fn name(&self) -> &'static str {
///         "scaled"
///     }
///     fn cpu_fwd(
///         &self,
///         s1: &CpuStorage,
///         l1: &Layout,
///         s2: &CpuStorage,
///         l2: &Layout,
///         s3: &CpuStorage,
///         l3: &Layout,
///     ) -> candle_core::Result<(CpuStorage, Shape)> {
///         use candle_core::cpu_backend::{binary_map, unary_map};
///         let d = binary_map(l1, l2, s1.as_slice::<f64>()?, s2.as_slice::<f64>()?, |t, b| t - b);
///         let k = unary_map(s3.as_slice::<f64>()?, l3, |k| k);
///         Ok((CpuStorage::F64(d.iter().zip(&k).map(|(d, k)| d * k).collect()), l1.shape().clone()))
///     }
///     fn bwd(
///         &self,
///         t: &candle_core::Tensor,
///         base: &candle_core::Tensor,
///         k: &candle_core::Tensor,
///         _res: &candle_core::Tensor,
///         g: &candle_core::Tensor,
///     ) -> candle_core::Result<(
///         Option<candle_core::Tensor>,
///         Option<candle_core::Tensor>,
///         Option<candle_core::Tensor>,
///     )> {
///         let dt = g.mul(k)?;
///         Ok((Some(dt.clone()), Some(dt.neg()?), Some(g.mul(&(t - base)?)?)))
///     }
/// }
///
/// let layer = CustomOp3Layer::<_, f64>::new(Scaled, [3], [3], [3]).with_names(["t", "base", "k"], "dd");
/// let t = Tensor::new(vec![3], vec![12.0, 7.5, 3.0])?;
/// let base = Tensor::new(vec![3], vec![5.0, 5.0, 5.0])?;
/// let k = Tensor::new(vec![3], vec![0.5, 1.0, 2.0])?;
/// Audit::new().run(&layer, &Args::new(vec![t, base, k], vec![]))?.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct CustomOp3Layer<C, T> {
    op: C,
    args: OpArguments,
    precision: PhantomData<fn() -> T>,
}

impl<C: CustomOp3, T: Real + WithDType> CustomOp3Layer<C, T> {
    /// The layer of `op` applied to arguments of shapes `arg1`, `arg2` and
    /// `arg3`.
    #[doc = shape_param_docs!()]
    /// See the example on [`CustomOp3Layer`].
    pub fn new(
        op: C,
        arg1: impl Into<Vec<usize>>,
        arg2: impl Into<Vec<usize>>,
        arg3: impl Into<Vec<usize>>,
    ) -> Self {
        CustomOp3Layer {
            op,
            args: OpArguments::new(
                &["arg1", "arg2", "arg3"],
                vec![arg1.into(), arg2.into(), arg3.into()],
            ),
            precision: PhantomData,
        }
    }
}

/// The methods every op layer shares, written once for the three.
macro_rules! op_layer_common {
    ($layer:ident, $trait:ident, $n:literal, $example:literal) => {
        impl<C: $trait, T: Real + WithDType> $layer<C, T> {
            /// Names the arguments (in the op's order) and the output, as
            /// the report's rows show them.
            ///
            /// ```
            #[doc = $example]
            /// ```
            #[must_use]
            pub fn with_names(mut self, args: [&str; $n], output: &str) -> Self {
                self.args.rename(&args, output);
                self
            }

            /// The op's own name (its `name()`), e.g. for
            /// [`Audit::name`](crate::Audit::name) (see the example on
            /// `with_names`).
            pub fn op_name(&self) -> &'static str {
                self.op.name()
            }

            /// The op, e.g. to call it on candle tensors of your own.
            pub fn op(&self) -> &C {
                &self.op
            }
        }

        impl<C, T> fmt::Debug for $layer<C, T> {
            fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.debug_struct(stringify!($layer))
                    .field("op", &std::any::type_name::<C>())
                    .field("args", &self.args.names)
                    .field("shapes", &self.args.shapes)
                    .field("output", &self.args.output)
                    .finish()
            }
        }
    };
}

op_layer_common!(
    CustomOp1Layer,
    CustomOp1,
    1,
    "# use candle_core::{CpuStorage, CustomOp1, Layout, Shape};
# struct Id;
# impl CustomOp1 for Id {
#     fn name(&self) -> &'static str { \"id\" }
#     fn cpu_fwd(&self, s: &CpuStorage, l: &Layout) -> candle_core::Result<(CpuStorage, Shape)> {
#         Ok((s.clone(), l.shape().clone()))
#     }
# }
use plumbline::candle::CustomOp1Layer;
use plumbline::Layer;
let layer = CustomOp1Layer::<_, f32>::new(Id, [4]).with_names([\"temperature\"], \"chill\");
let names: Vec<_> = layer.signature().arguments().map(|(n, _)| n.to_string()).collect();
assert_eq!(names, [\"temperature\"]);
assert_eq!(layer.op_name(), \"id\");"
);
op_layer_common!(
    CustomOp2Layer,
    CustomOp2,
    2,
    "# use candle_core::{CpuStorage, CustomOp2, Layout, Shape};
# struct First;
# impl CustomOp2 for First {
#     fn name(&self) -> &'static str { \"first\" }
#     fn cpu_fwd(&self, s: &CpuStorage, l: &Layout, _: &CpuStorage, _: &Layout)
#         -> candle_core::Result<(CpuStorage, Shape)> { Ok((s.clone(), l.shape().clone())) }
# }
use plumbline::candle::CustomOp2Layer;
use plumbline::Layer;
let layer = CustomOp2Layer::<_, f64>::new(First, [4], [4]).with_names([\"air\", \"dew\"], \"spread\");
let names: Vec<_> = layer.signature().arguments().map(|(n, _)| n.to_string()).collect();
assert_eq!(names, [\"air\", \"dew\"]);"
);
op_layer_common!(
    CustomOp3Layer,
    CustomOp3,
    3,
    "# use candle_core::{CpuStorage, CustomOp3, Layout, Shape};
# struct First;
# impl CustomOp3 for First {
#     fn name(&self) -> &'static str { \"first\" }
#     fn cpu_fwd(&self, s: &CpuStorage, l: &Layout, _: &CpuStorage, _: &Layout, _: &CpuStorage, _: &Layout)
#         -> candle_core::Result<(CpuStorage, Shape)> { Ok((s.clone(), l.shape().clone())) }
# }
use plumbline::candle::CustomOp3Layer;
use plumbline::Layer;
let layer = CustomOp3Layer::<_, f64>::new(First, [2, 2], [2], [])
    .with_names([\"x\", \"w\", \"b\"], \"y\");
let names: Vec<_> = layer.signature().arguments().map(|(n, _)| n.to_string()).collect();
assert_eq!(names, [\"x\", \"w\", \"b\"]);"
);

impl<C: CustomOp1, T: Real + WithDType> Layer for CustomOp1Layer<C, T> {
    type Real = T;
    fn signature(&self) -> Signature {
        self.args.signature()
    }
    fn backward(&self, args: &Args<T>, upstream: &[Tensor<T>]) -> Gradients<T> {
        let op = &self.op;
        self.args.gradients(
            op.name(),
            args,
            upstream,
            |x| x[0].apply_op1_no_bwd(op),
            |x, res, g| Ok(vec![op.bwd(&x[0], res, g)?]),
        )
    }
}

impl<C: CustomOp1, T: Real + WithDType> Forward for CustomOp1Layer<C, T> {
    fn forward(&self, args: &Args<T>) -> Vec<Tensor<T>> {
        let op = &self.op;
        self.args
            .outputs(op.name(), args, |x| x[0].apply_op1_no_bwd(op))
    }
}

impl<C: CustomOp2, T: Real + WithDType> Layer for CustomOp2Layer<C, T> {
    type Real = T;
    fn signature(&self) -> Signature {
        self.args.signature()
    }
    fn backward(&self, args: &Args<T>, upstream: &[Tensor<T>]) -> Gradients<T> {
        let op = &self.op;
        self.args.gradients(
            op.name(),
            args,
            upstream,
            |x| x[0].apply_op2_no_bwd(&x[1], op),
            |x, res, g| {
                let (g1, g2) = op.bwd(&x[0], &x[1], res, g)?;
                Ok(vec![g1, g2])
            },
        )
    }
}

impl<C: CustomOp2, T: Real + WithDType> Forward for CustomOp2Layer<C, T> {
    fn forward(&self, args: &Args<T>) -> Vec<Tensor<T>> {
        let op = &self.op;
        self.args
            .outputs(op.name(), args, |x| x[0].apply_op2_no_bwd(&x[1], op))
    }
}

impl<C: CustomOp3, T: Real + WithDType> Layer for CustomOp3Layer<C, T> {
    type Real = T;
    fn signature(&self) -> Signature {
        self.args.signature()
    }
    fn backward(&self, args: &Args<T>, upstream: &[Tensor<T>]) -> Gradients<T> {
        let op = &self.op;
        self.args.gradients(
            op.name(),
            args,
            upstream,
            |x| x[0].apply_op3_no_bwd(&x[1], &x[2], op),
            |x, res, g| {
                let (g1, g2, g3) = op.bwd(&x[0], &x[1], &x[2], res, g)?;
                Ok(vec![g1, g2, g3])
            },
        )
    }
}

impl<C: CustomOp3, T: Real + WithDType> Forward for CustomOp3Layer<C, T> {
    fn forward(&self, args: &Args<T>) -> Vec<Tensor<T>> {
        let op = &self.op;
        self.args
            .outputs(op.name(), args, |x| x[0].apply_op3_no_bwd(&x[1], &x[2], op))
    }
}

/// What an [`AutogradLayer`]'s function may return: one candle tensor, or
/// a `Vec` with one per declared output. Sealed: implemented for these two.
///
/// ```
/// use plumbline::candle::AutogradLayer;
/// use plumbline::{Args, Audit, Signature, Tensor};
///
/// // Two outputs: the hourly mean temperature and its spread.
/// let sig = Signature::new()
///     .input("temperature", "station, hour")
///     .output("mean", "station")
///     .output("range", "station");
/// let layer = AutogradLayer::<_, f64>::new(sig, |t: &[candle_core::Tensor]| {
///     Ok(vec![t[0].mean(1)?, (t[0].max(1)? - t[0].min(1)?)?])
/// });
/// let t = Tensor::new(vec![2, 3], vec![4.0, 6.5, 2.0, -1.0, 0.5, 1.5])?;
/// Audit::new().run(&layer, &Args::new(vec![t], vec![]))?.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub trait AutogradOutputs: sealed::Sealed {
    /// The outputs, in signature order.
    fn into_tensors(self) -> Vec<CandleTensor>;
}

impl AutogradOutputs for CandleTensor {
    fn into_tensors(self) -> Vec<CandleTensor> {
        vec![self]
    }
}

impl AutogradOutputs for Vec<CandleTensor> {
    fn into_tensors(self) -> Vec<CandleTensor> {
        self
    }
}

mod sealed {
    pub trait Sealed {}
    impl Sealed for candle_core::Tensor {}
    impl Sealed for Vec<candle_core::Tensor> {}
}

/// Any function of candle tensors, audited through candle's own autograd:
/// the gradient under test is what `Tensor::backward()` computes, through
/// every op inside (custom ops' `bwd` included).
///
/// The [`Signature`] names the arguments (inputs, fixed inputs and
/// parameters, in the order the function receives them) and the outputs.
/// The function gets candle tensors of dtype `T` (`f32` or `f64`) on the
/// CPU and returns one tensor or a `Vec` of them (one per declared output).
///
/// The backward makes every input and parameter a candle `Var` (fixed
/// inputs stay plain tensors), runs the function, builds
/// Σₖ⟨upstreamₖ, yₖ⟩ as a candle scalar, calls `backward()` on it and
/// reads each argument's gradient from the `GradStore`. An argument with
/// no entry there (no path from it to the outputs) gets a zero gradient,
/// as candle's convention is; where the true derivative is not zero, the
/// row fails with an all-zero diagnosis, which is what a custom op's `bwd`
/// returning `None` inside the model looks like.
///
/// An error from the function or from `backward()` is
/// [`Error::OpFailed`], with the op named by [`with_name`](Self::with_name)
/// (default `function`).
///
/// ```
/// use plumbline::candle::AutogradLayer;
/// use plumbline::{Args, Audit, Signature, Tensor};
///
/// // Frost risk per station: sigmoid(w · readings + b), in candle ops.
/// let sig = Signature::new()
///     .input("readings", "station, feature")
///     .param("w", "feature")
///     .param("b", "")
///     .output("risk", "station");
/// let model = AutogradLayer::<_, f64>::new(sig, |t: &[candle_core::Tensor]| {
///     let (x, w, b) = (&t[0], &t[1], &t[2]);
///     let z = x.broadcast_mul(w)?.sum(1)?.broadcast_add(b)?;
///     candle_core::Tensor::ones_like(&z)? / (z.neg()?.exp()? + 1.0)?
/// });
/// let x = Tensor::new(vec![2, 3], vec![-1.5, 0.8, 0.3, 2.0, -0.4, 0.9])?;
/// let w = Tensor::new(vec![3], vec![0.7, -0.2, 1.1])?;
/// let b = Tensor::scalar(0.1);
/// Audit::new().run(&model, &Args::new(vec![x], vec![w, b]))?.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct AutogradLayer<F, T> {
    f: F,
    signature: Signature,
    name: &'static str,
    precision: PhantomData<fn() -> T>,
}

impl<F, T> AutogradLayer<F, T> {
    /// The layer of `f`, whose arguments and outputs `signature` declares
    /// (see the example on [`AutogradLayer`]).
    pub fn new(signature: Signature, f: F) -> Self {
        AutogradLayer {
            f,
            signature,
            name: "function",
            precision: PhantomData,
        }
    }

    /// The name [`Error::OpFailed`] gives the function (default
    /// `function`).
    ///
    /// ```
    /// use plumbline::candle::AutogradLayer;
    /// use plumbline::{Args, Audit, Error, Signature, Tensor};
    ///
    /// let sig = Signature::new().input("x", "2").output("y", "2");
    /// let broken = AutogradLayer::<_, f32>::new(sig, |t: &[candle_core::Tensor]| t[0].sqrt()?.reshape(3))
    ///     .with_name("frost_model");
    /// let x = Tensor::new(vec![2], vec![1.0_f32, 4.0])?;
    /// let err = Audit::new().run(&broken, &Args::new(vec![x], vec![])).unwrap_err();
    /// assert!(matches!(err, Error::OpFailed { op: "frost_model", .. }), "{err}");
    /// # Ok::<(), plumbline::Error>(())
    /// ```
    #[must_use]
    pub fn with_name(mut self, name: &'static str) -> Self {
        self.name = name;
        self
    }
}

impl<F, T> fmt::Debug for AutogradLayer<F, T> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("AutogradLayer")
            .field("name", &self.name)
            .field("signature", &self.signature)
            .finish()
    }
}

impl<F, O, T> AutogradLayer<F, T>
where
    F: Fn(&[CandleTensor]) -> candle_core::Result<O>,
    O: AutogradOutputs,
    T: Real + WithDType,
{
    fn outputs(&self, xs: &[CandleTensor]) -> Vec<CandleTensor> {
        (self.f)(xs)
            .unwrap_or_else(|e| fail(self.name, "function", candle_message(&e)))
            .into_tensors()
    }
}

impl<F, O, T> Layer for AutogradLayer<F, T>
where
    F: Fn(&[CandleTensor]) -> candle_core::Result<O>,
    O: AutogradOutputs,
    T: Real + WithDType,
{
    type Real = T;

    fn signature(&self) -> Signature {
        self.signature.clone()
    }

    fn backward(&self, args: &Args<T>, upstream: &[Tensor<T>]) -> Gradients<T> {
        let name = self.name;
        let roles: Vec<Role> = self.signature.arguments().map(|(_, r)| r).collect();
        let mut vars = Vec::new();
        let xs: Vec<CandleTensor> = args
            .all()
            .iter()
            .enumerate()
            .map(|(i, t)| {
                if roles.get(i) == Some(&Role::Fixed) {
                    return t.to_candle();
                }
                let v = Var::from_tensor(&t.to_candle())
                    .unwrap_or_else(|e| fail(name, "Var::from_tensor", candle_message(&e)));
                let x = v.as_tensor().clone();
                vars.push((i, v));
                x
            })
            .collect();
        let ys = self.outputs(&xs);
        let mut total: Option<CandleTensor> = None;
        for (y, g) in ys.iter().zip(upstream) {
            let term = y
                .mul(&g.to_candle())
                .and_then(|p| p.sum_all())
                .unwrap_or_else(|e| fail(name, "Σ⟨upstream, y⟩", candle_message(&e)));
            total = Some(match total {
                None => term,
                Some(s) => {
                    (s + term).unwrap_or_else(|e| fail(name, "Σ⟨upstream, y⟩", candle_message(&e)))
                }
            });
        }
        let store = match total {
            Some(t) => t
                .backward()
                .unwrap_or_else(|e| fail(name, "Tensor::backward", candle_message(&e))),
            None => fail(name, "Σ⟨upstream, y⟩", "the function returned no output"),
        };
        let grads = vars
            .iter()
            .map(|(i, v)| {
                let what = format!(
                    "the gradient of `{}`",
                    self.signature.arguments().nth(*i).map_or("?", |(n, _)| n)
                );
                Some(match store.get(v.as_tensor()) {
                    Some(g) => take_back(name, "Tensor::backward", &what, g),
                    None => Tensor::full(args.all()[*i].shape().to_vec(), T::zero()),
                })
            })
            .collect::<Vec<_>>();
        Gradients::from(grads)
    }
}

impl<F, O, T> Forward for AutogradLayer<F, T>
where
    F: Fn(&[CandleTensor]) -> candle_core::Result<O>,
    O: AutogradOutputs,
    T: Real + WithDType,
{
    fn forward(&self, args: &Args<T>) -> Vec<Tensor<T>> {
        let xs: Vec<CandleTensor> = args.all().iter().map(Tensor::to_candle).collect();
        self.outputs(&xs)
            .iter()
            .enumerate()
            .map(|(k, y)| take_back(self.name, "function", &format!("output {k}"), y))
            .collect()
    }
}
