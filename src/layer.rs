//! The layer contract: what a user implements, and the argument and
//! gradient containers that cross it.

use std::collections::BTreeMap;
use std::fmt;

use crate::complex_step::ComplexStep;
use crate::error::Error;
use crate::scalar::{Real, Scalar};
use crate::tensor::Tensor;

/// A layer with a hand-written backward pass, in one precision (`f32` or
/// `f64`).
///
/// Implement three methods: [`signature`](Layer::signature) names the
/// tensors, [`forward`](Layer::forward) computes the outputs, and
/// [`backward`](Layer::backward) returns the vector-Jacobian product for
/// every differentiable input and parameter. If your forward can be written
/// for any [`Scalar`], implement [`GenericLayer`] instead: you get `Layer`
/// for free, plus complex-step and `f64` references.
///
/// # Implementor's contract
/// * **Pure.** `forward` and `backward` depend only on their arguments (and
///   on fields that do not change between calls). Two calls with the same
///   arguments return the same values, bit for bit. No RNG without a fixed
///   seed, no caches carried from one call to the next.
/// * **Backward returns, it does not accumulate.** Given the upstream
///   gradient `g_k` of every output `y_k`, `backward` returns, for every
///   differentiable input and parameter `x`, the tensor
///   `Σ_k J_k(x)ᵀ g_k` with the shape of `x` — a fresh value each call, not
///   a sum into a buffer.
/// * **Order.** `args` holds inputs then parameters, each in signature
///   order. The returned [`Gradients`] list the *differentiable* tensors in
///   the same order (fixed inputs are skipped). `forward` returns one tensor
///   per declared output, in order.
/// * **Shapes.** The audit checks argument shapes against the signature
///   before any call, so `forward` may index freely.
///
/// # Wrapping a stateful layer
/// A layer that keeps weights, caches and gradient buffers in a struct and
/// whose `backward(&mut self)` stores weight gradients in it is wrapped in a
/// few lines: copy the argument tensors into the struct, run its forward and
/// backward, and return fresh gradients. See `examples/stateful.rs`.
///
/// # Example
/// ```
/// use plumbline::{Args, Audit, Gradients, Layer, Signature, Tensor};
///
/// /// y = x ⊙ x, elementwise.
/// struct Square;
///
/// impl Layer for Square {
///     type Real = f64;
///     fn signature(&self) -> Signature {
///         Signature::new().input("x", "n").output("y", "n")
///     }
///     fn forward(&self, args: &Args<f64>) -> Vec<Tensor<f64>> {
///         vec![args.input(0).map(|x| x * x)]
///     }
///     fn backward(&self, args: &Args<f64>, upstream: &[Tensor<f64>]) -> Gradients<f64> {
///         let x = args.input(0).data();
///         let g = upstream[0].data();
///         let dx: Vec<f64> = x.iter().zip(g).map(|(x, g)| 2.0 * x * g).collect();
///         Gradients::from(vec![Tensor::new(vec![x.len()], dx).unwrap()])
///     }
/// }
///
/// let x = Tensor::new(vec![3], vec![0.5, -1.0, 2.0])?;
/// let report = Audit::new().run(&Square, &Args::new(vec![x], vec![]))?;
/// assert!(report.passed(), "{report}");
/// # Ok::<(), plumbline::Error>(())
/// ```
pub trait Layer {
    /// The precision the layer computes in: `f32` or `f64`.
    type Real: Real;

    /// Names, roles and shapes of the inputs, parameters and outputs.
    fn signature(&self) -> Signature;

    /// Computes the outputs, one tensor per declared output.
    fn forward(&self, args: &Args<Self::Real>) -> Vec<Tensor<Self::Real>>;

    /// Returns the gradient of `Σ_k ⟨upstream_k, y_k⟩` with respect to every
    /// differentiable input and parameter (a vector-Jacobian product).
    fn backward(
        &self,
        args: &Args<Self::Real>,
        upstream: &[Tensor<Self::Real>],
    ) -> Gradients<Self::Real>;

    /// A forward that runs in `f64` and under the complex step, if the layer
    /// has one. Provided: `None` for a plain `Layer`; `Some` for every
    /// [`GenericLayer`]. There is no need to override it.
    fn reference_forward(&self) -> Option<&dyn ReferenceForward> {
        None
    }
}

/// A layer whose forward is written once for any [`Scalar`].
///
/// Implement this instead of [`Layer`] when the forward can be generic: the
/// blanket implementation makes it a `Layer` whose forward runs in
/// `Self::Real`, and the audit can then evaluate the same code in `f64` and
/// with [`ComplexStep`] numbers, for references accurate to ~1e-16 even when
/// the layer itself is `f32`.
///
/// The contract of [`Layer`] applies. In addition, the generic forward must
/// stay on the [`Scalar`] path: converting to a primitive (`to_f64()`, `as`)
/// drops the complex-step derivative.
///
/// ```
/// use plumbline::{Args, Audit, GenericLayer, Gradients, Scalar, Scheme, Signature, Tensor};
///
/// /// y = tanh(x), elementwise, in f32.
/// struct Tanh;
///
/// impl GenericLayer for Tanh {
///     type Real = f32;
///     fn signature(&self) -> Signature {
///         Signature::new().input("x", "*").output("y", "*")
///     }
///     fn forward_generic<T: Scalar>(&self, args: &Args<T>) -> Vec<Tensor<T>> {
///         vec![args.input(0).map(|x| x.tanh())]
///     }
///     fn backward(&self, args: &Args<f32>, upstream: &[Tensor<f32>]) -> Gradients<f32> {
///         let y = args.input(0).map(|x| x.tanh());
///         let dx = Tensor::from_fn(y.shape().to_vec(), |ix| {
///             let t = y.get(ix).unwrap();
///             (1.0 - t * t) * upstream[0].get(ix).unwrap()
///         });
///         Gradients::from(vec![dx])
///     }
/// }
///
/// let x = Tensor::new(vec![2, 2], vec![0.1_f32, -0.7, 1.3, 2.0])?;
/// let report = Audit::new().run(&Tanh, &Args::new(vec![x], vec![]))?;
/// assert!(report.passed(), "{report}");
/// assert_eq!(report.rows[0].scheme, Scheme::ComplexStep);
/// # Ok::<(), plumbline::Error>(())
/// ```
pub trait GenericLayer {
    /// The precision the layer's backward computes in: `f32` or `f64`.
    type Real: Real;

    /// Names, roles and shapes of the inputs, parameters and outputs.
    fn signature(&self) -> Signature;

    /// The forward pass, for any scalar type.
    fn forward_generic<T: Scalar>(&self, args: &Args<T>) -> Vec<Tensor<T>>;

    /// The hand-written backward pass; see [`Layer::backward`].
    fn backward(
        &self,
        args: &Args<Self::Real>,
        upstream: &[Tensor<Self::Real>],
    ) -> Gradients<Self::Real>;
}

impl<G: GenericLayer> Layer for G {
    type Real = G::Real;

    fn signature(&self) -> Signature {
        GenericLayer::signature(self)
    }

    fn forward(&self, args: &Args<Self::Real>) -> Vec<Tensor<Self::Real>> {
        self.forward_generic(args)
    }

    fn backward(
        &self,
        args: &Args<Self::Real>,
        upstream: &[Tensor<Self::Real>],
    ) -> Gradients<Self::Real> {
        GenericLayer::backward(self, args, upstream)
    }

    fn reference_forward(&self) -> Option<&dyn ReferenceForward> {
        Some(self)
    }
}

/// The forward of a [`GenericLayer`] at the two scalar types the audit uses
/// for references. Implemented for every `GenericLayer`; you never
/// implement it yourself.
pub trait ReferenceForward {
    /// The forward in `f64`.
    fn forward_f64(&self, args: &Args<f64>) -> Vec<Tensor<f64>>;
    /// The forward with complex-step numbers over `f64`.
    fn forward_complex(&self, args: &Args<ComplexStep<f64>>) -> Vec<Tensor<ComplexStep<f64>>>;
}

impl<G: GenericLayer> ReferenceForward for G {
    fn forward_f64(&self, args: &Args<f64>) -> Vec<Tensor<f64>> {
        self.forward_generic(args)
    }
    fn forward_complex(&self, args: &Args<ComplexStep<f64>>) -> Vec<Tensor<ComplexStep<f64>>> {
        self.forward_generic(args)
    }
}

/// The arguments of one layer call: input tensors, then parameter tensors,
/// each in signature order.
///
/// ```
/// use plumbline::{Args, Tensor};
/// let x = Tensor::new(vec![1, 2], vec![0.3, -0.2])?;
/// let w = Tensor::new(vec![3, 2], vec![0.1; 6])?;
/// let args = Args::new(vec![x], vec![w]);
/// assert_eq!(args.param(0).shape(), &[3, 2]);
/// assert_eq!(args.len(), 2);
/// # Ok::<(), plumbline::Error>(())
/// ```
#[derive(Clone, Debug, PartialEq)]
pub struct Args<T> {
    tensors: Vec<Tensor<T>>,
    inputs: usize,
}

impl<T> Args<T> {
    /// Arguments from input tensors and parameter tensors.
    pub fn new(inputs: Vec<Tensor<T>>, params: Vec<Tensor<T>>) -> Self {
        let n = inputs.len();
        let mut tensors = inputs;
        tensors.extend(params);
        Args { tensors, inputs: n }
    }

    /// Input `i` (signature order). Panics if `i` is out of range; the
    /// audit checks the count before calling the layer.
    pub fn input(&self, i: usize) -> &Tensor<T> {
        &self.inputs()[i]
    }

    /// Parameter `i` (signature order). Panics if `i` is out of range; the
    /// audit checks the count before calling the layer.
    pub fn param(&self, i: usize) -> &Tensor<T> {
        &self.params()[i]
    }

    /// All inputs.
    pub fn inputs(&self) -> &[Tensor<T>] {
        &self.tensors[..self.inputs]
    }

    /// All parameters.
    pub fn params(&self) -> &[Tensor<T>] {
        &self.tensors[self.inputs..]
    }

    /// All tensors: inputs, then parameters.
    pub fn all(&self) -> &[Tensor<T>] {
        &self.tensors
    }

    /// All tensors, mutable (shapes cannot change).
    pub fn all_mut(&mut self) -> &mut [Tensor<T>] {
        &mut self.tensors
    }

    /// Number of tensors (inputs and parameters).
    pub fn len(&self) -> usize {
        self.tensors.len()
    }

    /// `true` if there are no tensors.
    pub fn is_empty(&self) -> bool {
        self.tensors.is_empty()
    }

    /// Consumes the arguments, returning inputs and parameters.
    pub fn into_parts(mut self) -> (Vec<Tensor<T>>, Vec<Tensor<T>>) {
        let params = self.tensors.split_off(self.inputs);
        (self.tensors, params)
    }
}

impl<T: Copy> Args<T> {
    /// The same arguments with every element converted by `f`.
    pub fn map<U>(&self, mut f: impl FnMut(T) -> U) -> Args<U> {
        Args {
            tensors: self.tensors.iter().map(|t| t.map(&mut f)).collect(),
            inputs: self.inputs,
        }
    }
}

/// What `backward` returns: one gradient per differentiable input and
/// parameter (inputs first, signature order; fixed inputs skipped).
///
/// Build it from a `Vec<Tensor<T>>`. An entry may be absent (a gradient the
/// backward does not produce); the audit reports it as *missing* on that
/// tensor's row rather than failing the whole call.
///
/// ```
/// use plumbline::{Gradients, Tensor};
/// let dx = Tensor::full(vec![2], 1.0_f64);
/// let g = Gradients::from(vec![dx.clone()]);
/// assert_eq!(g.get(0), Some(&dx));
/// assert_eq!(g.get(1), None); // missing
/// let partial = Gradients::from(vec![None, Some(dx)]);
/// assert!(partial.get(0).is_none());
/// ```
#[derive(Clone, Debug, PartialEq, Default)]
pub struct Gradients<T> {
    entries: Vec<Option<Tensor<T>>>,
}

impl<T> Gradients<T> {
    /// The gradient of differentiable tensor `i`, if the backward returned one.
    pub fn get(&self, i: usize) -> Option<&Tensor<T>> {
        self.entries.get(i).and_then(Option::as_ref)
    }

    /// Number of entries given (present or absent).
    pub fn len(&self) -> usize {
        self.entries.len()
    }

    /// `true` if no entries were given.
    pub fn is_empty(&self) -> bool {
        self.entries.is_empty()
    }
}

impl<T> From<Vec<Tensor<T>>> for Gradients<T> {
    fn from(v: Vec<Tensor<T>>) -> Self {
        Gradients {
            entries: v.into_iter().map(Some).collect(),
        }
    }
}

impl<T> From<Vec<Option<Tensor<T>>>> for Gradients<T> {
    fn from(entries: Vec<Option<Tensor<T>>>) -> Self {
        Gradients { entries }
    }
}

/// The role of a tensor in a layer call.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Role {
    /// A differentiable input (activations).
    Input,
    /// A trainable parameter (weights, biases).
    Parameter,
    /// An input that is not differentiated (token ids, masks, labels).
    Fixed,
    /// An output of the layer.
    Output,
}

impl Role {
    /// Short name, as shown in tables.
    pub fn as_str(self) -> &'static str {
        match self {
            Role::Input => "input",
            Role::Parameter => "param",
            Role::Fixed => "fixed",
            Role::Output => "output",
        }
    }
}

impl fmt::Display for Role {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// One axis of a declared shape: a fixed extent or a named size shared
/// between tensors.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Dim {
    /// This extent exactly.
    Exact(usize),
    /// A named size; every axis with the same name must agree.
    Named(String),
}

impl fmt::Display for Dim {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Dim::Exact(n) => write!(f, "{n}"),
            Dim::Named(s) => f.write_str(s),
        }
    }
}

/// One declared tensor: name, role and shape.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Slot {
    /// The tensor's name, as shown in reports.
    pub name: String,
    /// Input, parameter, fixed input or output.
    pub role: Role,
    /// The axes; `None` accepts any shape (spec `"*"`).
    pub dims: Option<Vec<Dim>>,
}

impl Slot {
    /// The declared dims as text, e.g. `[batch, 3]` or `any shape`.
    pub fn dims_string(&self) -> String {
        match &self.dims {
            None => "any shape".to_string(),
            Some(d) => {
                let parts: Vec<String> = d.iter().map(Dim::to_string).collect();
                format!("[{}]", parts.join(", "))
            }
        }
    }
}

/// Names, roles and shapes of a layer's tensors.
///
/// Shapes are written as comma-separated dims: a number is an exact extent,
/// a name is a size that every axis with that name must share (`"batch, in"`).
/// `""` is a scalar (rank 0); `"*"` accepts any shape. Inputs and parameters
/// are listed in the order `Args` holds them.
///
/// ```
/// use plumbline::Signature;
/// let sig = Signature::new()
///     .input("x", "batch, in")
///     .param("w", "out, in")
///     .param("b", "out")
///     .output("y", "batch, out");
/// assert_eq!(sig.slots().len(), 3);
/// assert_eq!(sig.outputs()[0].dims_string(), "[batch, out]");
/// ```
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct Signature {
    inputs: Vec<Slot>,
    params: Vec<Slot>,
    outputs: Vec<Slot>,
    problems: Vec<String>,
}

impl Signature {
    /// An empty signature.
    pub fn new() -> Self {
        Self::default()
    }

    fn slot(&mut self, name: &str, role: Role, spec: &str) -> Slot {
        let dims = parse_dims(spec).unwrap_or_else(|e| {
            self.problems.push(format!("`{name}`: {e}"));
            Some(Vec::new())
        });
        Slot {
            name: name.to_string(),
            role,
            dims,
        }
    }

    /// Declares a differentiable input.
    #[must_use]
    pub fn input(mut self, name: &str, dims: &str) -> Self {
        let s = self.slot(name, Role::Input, dims);
        self.inputs.push(s);
        self
    }

    /// Declares an input that is not differentiated (ids, masks, labels).
    /// It takes a place among the inputs of `Args` but none in `Gradients`.
    #[must_use]
    pub fn fixed_input(mut self, name: &str, dims: &str) -> Self {
        let s = self.slot(name, Role::Fixed, dims);
        self.inputs.push(s);
        self
    }

    /// Declares a parameter.
    #[must_use]
    pub fn param(mut self, name: &str, dims: &str) -> Self {
        let s = self.slot(name, Role::Parameter, dims);
        self.params.push(s);
        self
    }

    /// Declares an output.
    #[must_use]
    pub fn output(mut self, name: &str, dims: &str) -> Self {
        let s = self.slot(name, Role::Output, dims);
        self.outputs.push(s);
        self
    }

    /// Inputs then parameters, in `Args` order.
    pub fn slots(&self) -> Vec<&Slot> {
        self.inputs.iter().chain(&self.params).collect()
    }

    /// The declared inputs (differentiable and fixed).
    pub fn inputs(&self) -> &[Slot] {
        &self.inputs
    }

    /// The declared parameters.
    pub fn params(&self) -> &[Slot] {
        &self.params
    }

    /// The declared outputs.
    pub fn outputs(&self) -> &[Slot] {
        &self.outputs
    }

    /// Checks the signature itself, then the arguments against it, and
    /// returns the sizes bound to each named dim.
    pub(crate) fn bind<T>(&self, layer: &str, args: &Args<T>) -> Result<Bindings, Error> {
        self.check_self(layer)?;
        for (role, slots, given) in [
            ("input", &self.inputs, args.inputs()),
            ("parameter", &self.params, args.params()),
        ] {
            if slots.len() != given.len() {
                return Err(Error::ArgumentCount {
                    layer: layer.to_string(),
                    role,
                    expected: slots.len(),
                    names: names(slots),
                    found: given.len(),
                });
            }
        }
        let mut b = Bindings::default();
        for (slot, t) in self.slots().into_iter().zip(args.all()) {
            b.unify(slot, t.shape())
                .map_err(|detail| Error::ArgumentShape {
                    tensor: slot.name.clone(),
                    role: if slot.role == Role::Parameter {
                        "parameter"
                    } else {
                        "input"
                    },
                    expected: slot.dims_string(),
                    found: t.shape().to_vec(),
                    detail,
                })?;
        }
        Ok(b)
    }

    /// Checks forward outputs against the declared outputs.
    pub(crate) fn check_outputs<T>(
        &self,
        layer: &str,
        call: &str,
        bindings: &Bindings,
        outputs: &[Tensor<T>],
    ) -> Result<(), Error> {
        if outputs.len() != self.outputs.len() {
            return Err(Error::OutputCount {
                layer: layer.to_string(),
                call: call.to_string(),
                expected: self.outputs.len(),
                names: names(&self.outputs),
                found: outputs.len(),
            });
        }
        let mut b = bindings.clone();
        for (slot, t) in self.outputs.iter().zip(outputs) {
            b.unify(slot, t.shape())
                .map_err(|detail| Error::OutputShape {
                    call: format!("layer `{layer}`: {call}"),
                    output: slot.name.clone(),
                    expected: slot.dims_string(),
                    found: t.shape().to_vec(),
                    detail,
                })?;
        }
        Ok(())
    }

    fn check_self(&self, layer: &str) -> Result<(), Error> {
        let bad = |detail: String| Error::Signature {
            layer: layer.to_string(),
            detail,
        };
        if let Some(p) = self.problems.first() {
            return Err(bad(p.clone()));
        }
        let mut seen = std::collections::HashSet::new();
        for s in self.inputs.iter().chain(&self.params).chain(&self.outputs) {
            if !seen.insert(s.name.as_str()) {
                return Err(bad(format!("the name `{}` is declared twice", s.name)));
            }
        }
        let empty = |detail: &str| Error::EmptyLayer {
            layer: layer.to_string(),
            detail: detail.to_string(),
        };
        if self.outputs.is_empty() {
            return Err(empty("the signature declares no output"));
        }
        if !self.slots().iter().any(|s| s.role != Role::Fixed) {
            return Err(empty(
                "the signature declares no differentiable input or parameter",
            ));
        }
        Ok(())
    }
}

fn names(slots: &[Slot]) -> String {
    let v: Vec<String> = slots.iter().map(|s| format!("`{}`", s.name)).collect();
    if v.is_empty() {
        "none".to_string()
    } else {
        v.join(", ")
    }
}

fn parse_dims(spec: &str) -> Result<Option<Vec<Dim>>, String> {
    let spec = spec.trim();
    if spec == "*" {
        return Ok(None);
    }
    let spec = spec.trim_start_matches('[').trim_end_matches(']').trim();
    if spec.is_empty() {
        return Ok(Some(Vec::new()));
    }
    spec.split(',')
        .map(|part| {
            let p = part.trim();
            if let Ok(n) = p.parse::<usize>() {
                Ok(Dim::Exact(n))
            } else if !p.is_empty()
                && p.chars().all(|c| c.is_alphanumeric() || c == '_')
                && !p.starts_with(|c: char| c.is_ascii_digit())
            {
                Ok(Dim::Named(p.to_string()))
            } else {
                Err(format!(
                    "dim `{p}` in `{spec}` is neither a number nor a name"
                ))
            }
        })
        .collect::<Result<Vec<_>, _>>()
        .map(Some)
}

/// Sizes bound to named dims while checking shapes: `name -> (size, which
/// tensor bound it)`.
#[derive(Clone, Debug, Default)]
pub(crate) struct Bindings {
    sizes: BTreeMap<String, (usize, String)>,
}

impl Bindings {
    fn unify(&mut self, slot: &Slot, shape: &[usize]) -> Result<(), String> {
        let Some(dims) = &slot.dims else {
            return Ok(());
        };
        if dims.len() != shape.len() {
            return Err(format!(
                "rank {} given, rank {} declared",
                shape.len(),
                dims.len()
            ));
        }
        for (axis, (d, &n)) in dims.iter().zip(shape).enumerate() {
            match d {
                Dim::Exact(m) if *m != n => {
                    return Err(format!("axis {axis} is {n}, declared {m}"));
                }
                Dim::Exact(_) => {}
                Dim::Named(name) => match self.sizes.get(name) {
                    Some((m, by)) if *m != n => {
                        return Err(format!(
                            "axis {axis} is {n}, but `{name}` is {m} (from `{by}`)"
                        ));
                    }
                    Some(_) => {}
                    None => {
                        self.sizes.insert(name.clone(), (n, slot.name.clone()));
                    }
                },
            }
        }
        Ok(())
    }

    /// Every named dim with its size, in name order.
    pub(crate) fn named_sizes(&self) -> Vec<(String, usize)> {
        self.sizes
            .iter()
            .map(|(k, (n, _))| (k.clone(), *n))
            .collect()
    }

    /// The size bound to a named dim, if any.
    #[cfg(test)]
    pub(crate) fn get(&self, name: &str) -> Option<usize> {
        self.sizes.get(name).map(|(n, _)| *n)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn dense_sig() -> Signature {
        Signature::new()
            .input("x", "batch, in")
            .param("w", "out, in")
            .param("b", "out")
            .output("y", "batch, out")
    }

    fn t(shape: &[usize]) -> Tensor<f64> {
        Tensor::full(shape.to_vec(), 0.0)
    }

    #[test]
    fn binds_named_dims_across_tensors() {
        let args = Args::new(vec![t(&[2, 3])], vec![t(&[4, 3]), t(&[4])]);
        let b = dense_sig().bind("Dense", &args).unwrap();
        assert_eq!(b.get("batch"), Some(2));
        assert_eq!(b.get("out"), Some(4));
    }

    #[test]
    fn shape_error_names_tensor_axis_and_binder() {
        let args = Args::new(vec![t(&[2, 3])], vec![t(&[4, 5]), t(&[4])]);
        let msg = dense_sig().bind("Dense", &args).unwrap_err().to_string();
        assert!(msg.contains("parameter `w`"), "{msg}");
        assert!(
            msg.contains("axis 1 is 5, but `in` is 3 (from `x`)"),
            "{msg}"
        );
    }

    #[test]
    fn count_error_lists_names() {
        let args = Args::new(vec![t(&[2, 3])], vec![t(&[4, 3])]);
        let msg = dense_sig().bind("Dense", &args).unwrap_err().to_string();
        assert!(
            msg.contains("expects 2 parameter tensor(s) (`w`, `b`), but 1 were given"),
            "{msg}"
        );
    }

    #[test]
    fn bad_spec_and_empty_layer_are_errors() {
        let sig = Signature::new().input("x", "n, 3x").output("y", "n");
        let args = Args::new(vec![t(&[1, 3])], vec![]);
        assert!(matches!(sig.bind("L", &args), Err(Error::Signature { .. })));
        let sig = Signature::new().fixed_input("ids", "n").output("y", "n");
        let args = Args::new(vec![t(&[2])], vec![]);
        assert!(matches!(
            sig.bind("L", &args),
            Err(Error::EmptyLayer { .. })
        ));
        let sig = Signature::new().input("x", "n");
        assert!(matches!(
            sig.bind("L", &args),
            Err(Error::EmptyLayer { .. })
        ));
    }

    #[test]
    fn any_shape_and_scalar_specs() {
        let sig = Signature::new()
            .input("x", "*")
            .param("s", "")
            .output("y", "*");
        let args = Args::new(vec![t(&[2, 7, 1])], vec![Tensor::scalar(1.0)]);
        assert!(sig.bind("L", &args).is_ok());
        let args = Args::new(vec![t(&[2])], vec![t(&[1])]);
        assert!(sig.bind("L", &args).is_err());
    }
}
