//! The layer contract: what a user implements, and the argument and
//! gradient containers that cross it.
//!
//! A layer is a [`Layer`] (its tensors and its hand-written backward) plus
//! one forward: [`GenericForward`] when the forward can be written once for
//! any [`Scalar`], [`Forward`] when it exists in one precision only. The
//! three traits share no method name, so all of them can be in scope at
//! once (as the prelude puts them) and every call stays unambiguous.

use crate::scalar::{ComplexStep, Real, Scalar};
use crate::signature::Signature;
use crate::tensor::Tensor;

/// A layer with a hand-written backward pass, in one precision (`f32` or
/// `f64`): what its tensors are, and the vector-Jacobian product.
///
/// Implement two methods here, and the forward in one of two traits:
/// [`GenericForward`] if it can be written for any [`Scalar`] (the audit
/// then gets exact complex-step references, even for an `f32` layer), or
/// [`Forward`] if it exists in one precision only (a third-party kernel,
/// an `f32`-only library call). Every type with a `GenericForward` has a
/// `Forward` for free.
///
/// # Implementor's contract
/// * **Pure.** `forward` and `backward` depend only on their arguments (and
///   on fields that do not change between calls). Two calls with the same
///   arguments return the same values, bit for bit. No RNG without a fixed
///   seed, no caches carried from one call to the next.
/// * **Backward returns, it does not accumulate.** Given the upstream
///   gradient `g_k` of every output `y_k`, `backward` returns, for every
///   differentiable input and parameter `x`, the tensor
///   `Σ_k J_k(x)ᵀ g_k` with the shape of `x`: a fresh value each call, not
///   a sum into a buffer.
/// * **Order.** `args` holds inputs then parameters, each in signature
///   order. The returned [`Gradients`] list the *differentiable* tensors in
///   the same order (fixed inputs are skipped). `forward` returns one tensor
///   per declared output, in order.
/// * **Shapes.** The audit checks argument shapes against the signature
///   before any call, so `forward` and `backward` may index freely.
/// * **Panics are contained.** A panic in `forward` or `backward` does not
///   unwind through the audit: it becomes an
///   [`Error::LayerPanicked`](crate::Error::LayerPanicked) naming the call,
///   the tensor, the element and the value it was moved to.
///
/// # Wrapping a stateful layer
/// A layer that keeps weights, caches and gradient buffers in a struct and
/// whose `backward(&mut self)` stores weight gradients in it is wrapped in a
/// few lines: copy the argument tensors into the struct, run its forward and
/// backward, and return fresh gradients. See `examples/stateful.rs`.
///
/// # Example
/// ```
/// use plumbline::prelude::*;
///
/// /// y = x ⊙ x, elementwise.
/// struct Square;
///
/// impl Layer for Square {
///     type Real = f64;
///     fn signature(&self) -> Signature {
///         Signature::new().input("x", "n").output("y", "n")
///     }
///     fn backward(&self, args: &Args<f64>, upstream: &[Tensor<f64>]) -> Gradients<f64> {
///         let (x, g) = (args.input(0), &upstream[0]);
///         Gradients::from(vec![Tensor::from_fn(x.shape().to_vec(), |ix| 2.0 * x[ix] * g[ix])])
///     }
/// }
///
/// impl Forward for Square {
///     fn forward(&self, args: &Args<f64>) -> Vec<Tensor<f64>> {
///         vec![args.input(0).map(|x| x * x)]
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

    /// Returns the gradient of `Σ_k ⟨upstream_k, y_k⟩` with respect to every
    /// differentiable input and parameter (a vector-Jacobian product).
    fn backward(
        &self,
        args: &Args<Self::Real>,
        upstream: &[Tensor<Self::Real>],
    ) -> Gradients<Self::Real>;
}

/// A forward pass in the layer's own precision.
///
/// Implement it for a layer whose forward cannot be written for any
/// [`Scalar`]; the audit then uses real differences in that precision
/// (Ridders' method by default). A layer with a [`GenericForward`] gets this
/// trait for free and must not implement it.
///
/// ```
/// use plumbline::prelude::*;
///
/// /// Soil-frost depth in f32 from a lookup the layer only has in f32:
/// /// y = 0.5·x² per station.
/// struct FrostDepth;
///
/// impl Layer for FrostDepth {
///     type Real = f32;
///     fn signature(&self) -> Signature {
///         Signature::new().input("x", "station").output("y", "station")
///     }
///     fn backward(&self, a: &Args<f32>, up: &[Tensor<f32>]) -> Gradients<f32> {
///         let x = a.input(0);
///         Gradients::from(vec![Tensor::from_fn(x.shape().to_vec(), |i| up[0][i] * x[i])])
///     }
/// }
///
/// impl Forward for FrostDepth {
///     fn forward(&self, a: &Args<f32>) -> Vec<Tensor<f32>> {
///         vec![a.input(0).map(|x| 0.5 * x * x)]
///     }
/// }
///
/// let x = Tensor::new(vec![3], vec![0.5_f32, -1.25, 2.0])?;
/// let report = Audit::new().run(&FrostDepth, &Args::new(vec![x], vec![]))?;
/// assert_eq!(report.rows[0].scheme, Scheme::Ridders); // real differences in f32
/// report.assert_passed();
/// # Ok::<(), plumbline::Error>(())
/// ```
pub trait Forward: Layer {
    /// Computes the outputs, one tensor per declared output.
    fn forward(&self, args: &Args<Self::Real>) -> Vec<Tensor<Self::Real>>;

    /// The generic forward behind this one, if there is one. Provided and
    /// sealed: `None` for a layer written against `Forward` directly,
    /// `Some` for every [`GenericForward`]. A plain layer cannot hand the
    /// audit a different forward.
    #[doc(hidden)]
    fn reference(&self) -> Option<&dyn sealed::Reference> {
        None
    }

    /// The name a report shows when the audit sets none. Provided: `None`
    /// (the type's name, without its path); a
    /// [`FnLayer`](crate::FnLayer) returns its own. Not public API.
    #[doc(hidden)]
    fn shown_name(&self) -> Option<String> {
        None
    }
}

/// A forward pass written once for any [`Scalar`].
///
/// Implement this (rather than [`Forward`]) when the forward can be
/// generic: the blanket implementation gives the layer a `Forward` in its
/// own precision, and the audit can evaluate the same code in `f64` and
/// with [`ComplexStep`] numbers, for references accurate to ~1e-16 even
/// when the layer itself is `f32`.
///
/// The forward must stay on the [`Scalar`] path: converting to a primitive
/// (`to_f64()`, `as`) or calling a real-only library routine drops the
/// complex-step derivative. The audit cross-checks a few elements of every
/// tensor with real differences and falls back to them, with a note, when
/// it catches this.
///
/// ```
/// use plumbline::prelude::*;
///
/// /// y = tanh(x), elementwise, in f32.
/// struct Tanh;
///
/// impl Layer for Tanh {
///     type Real = f32;
///     fn signature(&self) -> Signature {
///         Signature::new().input("x", "*").output("y", "*")
///     }
///     fn backward(&self, args: &Args<f32>, upstream: &[Tensor<f32>]) -> Gradients<f32> {
///         let (x, g) = (args.input(0), &upstream[0]);
///         let dx = Tensor::from_fn(x.shape().to_vec(), |ix| {
///             let t = x[ix].tanh();
///             (1.0 - t * t) * g[ix]
///         });
///         Gradients::from(vec![dx])
///     }
/// }
///
/// impl GenericForward for Tanh {
///     fn forward_generic<T: Scalar>(&self, args: &Args<T>) -> Vec<Tensor<T>> {
///         vec![args.input(0).map(|x| x.tanh())]
///     }
/// }
///
/// let x = Tensor::new(vec![2, 2], vec![0.1_f32, -0.7, 1.3, 2.0])?;
/// let report = Audit::new().run(&Tanh, &Args::new(vec![x], vec![]))?;
/// assert!(report.passed(), "{report}");
/// assert_eq!(report.rows[0].scheme, Scheme::ComplexStep);
/// # Ok::<(), plumbline::Error>(())
/// ```
pub trait GenericForward: Layer {
    /// The forward pass, for any scalar type.
    fn forward_generic<T: Scalar>(&self, args: &Args<T>) -> Vec<Tensor<T>>;
}

impl<G: GenericForward> Forward for G {
    fn forward(&self, args: &Args<Self::Real>) -> Vec<Tensor<Self::Real>> {
        self.forward_generic(args)
    }

    fn reference(&self) -> Option<&dyn sealed::Reference> {
        Some(self)
    }
}

/// A hand-written forward-mode rule: the Jacobian-vector product of the
/// layer, checked by [`Audit::run_tangents`](crate::Audit::run_tangents).
///
/// `jvp` returns, for tangents `along` (one tensor per argument, in
/// [`Args`] order, each of its argument's shape), the directional
/// derivative of every output: `ẏ_k = Σ_x J_k(x)·ẋ`, one tensor per
/// declared output, in order. Fixed inputs (token ids, labels) get a zero
/// tangent, which the rule may ignore.
///
/// The same contract as [`Layer`] holds: pure, deterministic, returns
/// fresh tensors. A wrong count of tangents is an
/// [`Error::OutputCount`](crate::Error::OutputCount); a tangent of the
/// wrong shape, or one left out, is a failing row, as for gradients.
///
/// ```
/// use plumbline::prelude::*;
///
/// /// Frost risk per orchard block, y = x², from a chill index x.
/// struct Chill;
///
/// impl Layer for Chill {
///     type Real = f64;
///     fn signature(&self) -> Signature {
///         Signature::new().input("x", "block").output("y", "block")
///     }
///     fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
///         let x = a.input(0);
///         Gradients::from(vec![Tensor::from_fn(x.shape().to_vec(), |i| 2.0 * x[i] * up[0][i])])
///     }
/// }
///
/// impl GenericForward for Chill {
///     fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
///         vec![a.input(0).map(|x| x * x)]
///     }
/// }
///
/// impl TangentRule for Chill {
///     fn jvp(&self, a: &Args<f64>, along: &Args<f64>) -> Vec<Tensor<f64>> {
///         let (x, dx) = (a.input(0), along.input(0));
///         vec![Tensor::from_fn(x.shape().to_vec(), |i| 2.0 * x[i] * dx[i])]
///     }
/// }
///
/// let x = Tensor::new(vec![3], vec![0.4, -1.2, 2.5])?;
/// let report = Audit::new().run_tangents(&Chill, &Args::new(vec![x], vec![]))?;
/// report.assert_passed();
/// assert!(report.row("adjoint").is_some());
/// # Ok::<(), plumbline::Error>(())
/// ```
pub trait TangentRule: Layer {
    /// The tangents of the outputs, one tensor per declared output, for
    /// tangents `along` of the arguments (inputs, then parameters).
    fn jvp(&self, args: &Args<Self::Real>, along: &Args<Self::Real>) -> Vec<Tensor<Self::Real>>;
}

/// A backward written once for any [`Scalar`], which gives the audit
/// second derivatives: [`Audit::run_second_order`](crate::Audit::run_second_order)
/// runs it on complex-step numbers to get exact Hessian-vector products of
/// the probe φ = Σ_k ⟨w_k, y_k⟩, checks that they are symmetric (the
/// *integrability test*), and checks a hand-written
/// [`hessian_vector`](GenericBackward::hessian_vector) if the layer has one.
///
/// `backward_generic` must compute what [`Layer::backward`] computes (the
/// simplest way: `backward` calls it), and stay on the [`Scalar`] path.
///
/// ```
/// use plumbline::prelude::*;
///
/// /// Frost risk per orchard block, y = x², from a chill index x.
/// struct Chill;
///
/// impl Layer for Chill {
///     type Real = f64;
///     fn signature(&self) -> Signature {
///         Signature::new().input("x", "block").output("y", "block")
///     }
///     fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
///         self.backward_generic(a, up)
///     }
/// }
///
/// impl GenericForward for Chill {
///     fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
///         vec![a.input(0).map(|x| x * x)]
///     }
/// }
///
/// impl GenericBackward for Chill {
///     fn backward_generic<T: Scalar>(&self, a: &Args<T>, up: &[Tensor<T>]) -> Gradients<T> {
///         let (x, two) = (a.input(0), T::one() + T::one());
///         Gradients::from(vec![Tensor::from_fn(x.shape().to_vec(), |i| two * x[i] * up[0][i])])
///     }
///     fn hessian_vector(
///         &self,
///         _: &Args<f64>,
///         up: &[Tensor<f64>],
///         along: &Args<f64>,
///     ) -> Option<Gradients<f64>> {
///         let dx = along.input(0);
///         Some(Gradients::from(vec![Tensor::from_fn(dx.shape().to_vec(), |i| 2.0 * up[0][i] * dx[i])]))
///     }
/// }
///
/// let x = Tensor::new(vec![3], vec![0.4, -1.2, 2.5])?;
/// let report = Audit::new().run_second_order(&Chill, &Args::new(vec![x], vec![]))?;
/// report.assert_passed();
/// assert!(report.row("symmetry").is_some());
/// # Ok::<(), plumbline::Error>(())
/// ```
pub trait GenericBackward: Layer {
    /// The backward pass, for any scalar type: the same values as
    /// [`Layer::backward`].
    fn backward_generic<T: Scalar>(&self, args: &Args<T>, upstream: &[Tensor<T>]) -> Gradients<T>;

    /// A hand-written second-order rule: the derivative of the backward
    /// along `along` (one tangent per argument, in [`Args`] order) with the
    /// upstream held fixed, i.e. the Hessian of φ = Σ_k ⟨upstream_k, y_k⟩
    /// times the tangent, one tensor per differentiable argument (as
    /// [`Gradients`]). Provided: `None` (the layer has no such rule; the
    /// integrability test still runs).
    fn hessian_vector(
        &self,
        args: &Args<Self::Real>,
        upstream: &[Tensor<Self::Real>],
        along: &Args<Self::Real>,
    ) -> Option<Gradients<Self::Real>> {
        let _ = (args, upstream, along);
        None
    }
}

pub(crate) mod sealed {
    use super::{Args, ComplexStep, GenericForward, Tensor};
    use crate::scalar::Traced;

    /// The forward of a [`GenericForward`] at the two scalar types the
    /// audit uses for references. Implemented for every `GenericForward`;
    /// it cannot be named or implemented outside the crate.
    pub trait Reference {
        /// The forward in `f64`.
        fn forward_f64(&self, args: &Args<f64>) -> Vec<Tensor<f64>>;
        /// The forward with complex-step numbers over `f64`.
        fn forward_complex(&self, args: &Args<ComplexStep<f64>>) -> Vec<Tensor<ComplexStep<f64>>>;
        /// The forward with running error bounds, for an `f64` layer.
        fn forward_traced_f64(&self, args: &Args<Traced<f64>>) -> Vec<Tensor<Traced<f64>>>;
        /// The forward with running error bounds, for an `f32` layer.
        fn forward_traced_f32(&self, args: &Args<Traced<f32>>) -> Vec<Tensor<Traced<f32>>>;
    }

    impl<G: GenericForward> Reference for G {
        fn forward_f64(&self, args: &Args<f64>) -> Vec<Tensor<f64>> {
            self.forward_generic(args)
        }
        fn forward_complex(&self, args: &Args<ComplexStep<f64>>) -> Vec<Tensor<ComplexStep<f64>>> {
            self.forward_generic(args)
        }
        fn forward_traced_f64(&self, args: &Args<Traced<f64>>) -> Vec<Tensor<Traced<f64>>> {
            self.forward_generic(args)
        }
        fn forward_traced_f32(&self, args: &Args<Traced<f32>>) -> Vec<Tensor<Traced<f32>>> {
            self.forward_generic(args)
        }
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

    /// Input `i` (signature order). Panics if `i` is out of range, as
    /// slice indexing does; the audit checks the count before calling the
    /// layer.
    pub fn input(&self, i: usize) -> &Tensor<T> {
        &self.inputs()[i]
    }

    /// Parameter `i` (signature order). Panics if `i` is out of range, as
    /// slice indexing does; the audit checks the count before calling the
    /// layer.
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
    ///
    /// ```
    /// use plumbline::{Args, Tensor};
    /// let a = Args::new(vec![Tensor::new(vec![2], vec![0.5_f32, 1.5])?], vec![]);
    /// assert_eq!(a.map(f64::from).input(0).data(), &[0.5, 1.5]);
    /// # Ok::<(), plumbline::Error>(())
    /// ```
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
/// tensor's row rather than failing the whole call. More entries than the
/// signature has differentiable tensors are reported too, never ignored.
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
