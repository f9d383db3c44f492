//! A layer built from two closures, for one-off checks and for wrapping
//! code that is not yours.

use std::fmt;
use std::marker::PhantomData;

use crate::layer::{Args, Forward, Gradients, Layer};
use crate::scalar::Real;
use crate::signature::Signature;
use crate::tensor::Tensor;

/// A layer made of a [`Signature`], a forward closure and a backward
/// closure: no type to declare, no trait to implement.
///
/// Use it for a one-off check, or to wrap a layer you did not write (a
/// struct from another crate with its own `forward`/`backward`, weights
/// and caches): the closures copy the audit's arguments in and the results
/// out. [`Audit::run`](crate::Audit::run) takes it like any layer.
/// [`assert_backward!`](crate::assert_backward) does too, and spreads the
/// audit over threads, when both closures are `Sync`: capture a `Mutex`
/// rather than a `RefCell`. (The macro picks threads or one thread by the
/// layer's type, before the compiler has worked out what closures written
/// beside the call capture, so non-`Sync` closures there do not compile;
/// built in a function of its own and returned, such a layer runs on one
/// thread.)
///
/// * `forward(&args) -> Vec<Tensor<R>>`: one tensor per declared output.
/// * `backward(&args, &upstream)`: the gradients, as [`Gradients`] or as a
///   `Vec` of tensors (inputs then parameters, fixed inputs skipped),
///   under the same contract as [`Layer::backward`].
///
/// `R` is `f32` or `f64`; annotate the forward's argument
/// (`|a: &Args<f32>|`) and the rest is inferred. A panic in either closure
/// (an `unwrap` on a conversion, say) is contained and comes back as
/// [`Error::LayerPanicked`](crate::Error::LayerPanicked).
///
/// **The forward is plain.** A closure has one concrete type, so it cannot
/// be written for any [`Scalar`](crate::Scalar): the audit uses real
/// differences in `R` (Ridders' method by default), which resolve about
/// 1e-8 relative in `f64` and 1e-2 in `f32`. For complex-step references,
/// exact to a few ulps even for an `f32` layer, give the layer a type and
/// implement [`GenericForward`](crate::GenericForward) instead.
///
/// The report names the layer `FnLayer<f64>` (or `<f32>`) unless
/// [`named`](FnLayer::named) gives it a name.
///
/// ```
/// use plumbline::prelude::*;
///
/// // Frost-pot warming per station from a curve we did not write (f64):
/// // y = ln(1 + e^(w·x)), one shared w.
/// let layer = FnLayer::new(
///     Signature::new().input_shape("x", &[3]).param("w", "").output_shape("y", &[3]),
///     |a: &Args<f64>| {
///         let w = a.param(0)[[]];
///         vec![a.input(0).map(|x| (w * x).exp().ln_1p())]
///     },
///     |a, up| {
///         let (x, w, g) = (a.input(0), a.param(0)[[]], &up[0]);
///         let s = x.map(|x| 1.0 / (1.0 + (-w * x).exp())); // σ(w·x)
///         let dx = Tensor::from_fn(vec![3], |i| g[i] * s[i] * w);
///         let dw: f64 = (0..3).map(|i| g[[i]] * s[[i]] * x[[i]]).sum();
///         vec![dx, Tensor::scalar(dw)]
///     },
/// )
/// .named("warming curve");
///
/// let x = Tensor::new(vec![3], vec![-1.0, 0.25, 2.0])?;
/// let report = assert_backward!(&layer, &Args::new(vec![x], vec![Tensor::scalar(0.8)]));
/// assert_eq!(report.layer, "warming curve");
/// assert_eq!(report.rows[0].scheme, Scheme::Ridders); // a plain forward
/// # Ok::<(), plumbline::Error>(())
/// ```
pub struct FnLayer<R, F, B> {
    signature: Signature,
    forward: F,
    backward: B,
    name: Option<String>,
    real: PhantomData<fn() -> R>,
}

impl<R, F, B, G> FnLayer<R, F, B>
where
    R: Real,
    F: Fn(&Args<R>) -> Vec<Tensor<R>>,
    B: Fn(&Args<R>, &[Tensor<R>]) -> G,
    G: Into<Gradients<R>>,
{
    /// A layer from its signature, its forward and its backward.
    pub fn new(signature: Signature, forward: F, backward: B) -> Self {
        FnLayer {
            signature,
            forward,
            backward,
            name: None,
            real: PhantomData,
        }
    }

    /// The name reports show for this layer (default `FnLayer<f64>` or
    /// `FnLayer<f32>`). [`Audit::name`](crate::Audit::name) still wins.
    #[must_use]
    pub fn named(mut self, name: impl Into<String>) -> Self {
        self.name = Some(name.into());
        self
    }
}

impl<R, F, B, G> Layer for FnLayer<R, F, B>
where
    R: Real,
    F: Fn(&Args<R>) -> Vec<Tensor<R>>,
    B: Fn(&Args<R>, &[Tensor<R>]) -> G,
    G: Into<Gradients<R>>,
{
    type Real = R;

    fn signature(&self) -> Signature {
        self.signature.clone()
    }

    fn backward(&self, args: &Args<R>, upstream: &[Tensor<R>]) -> Gradients<R> {
        (self.backward)(args, upstream).into()
    }
}

impl<R, F, B, G> Forward for FnLayer<R, F, B>
where
    R: Real,
    F: Fn(&Args<R>) -> Vec<Tensor<R>>,
    B: Fn(&Args<R>, &[Tensor<R>]) -> G,
    G: Into<Gradients<R>>,
{
    fn forward(&self, args: &Args<R>) -> Vec<Tensor<R>> {
        (self.forward)(args)
    }

    fn shown_name(&self) -> Option<String> {
        Some(
            self.name
                .clone()
                .unwrap_or_else(|| format!("FnLayer<{}>", R::NAME)),
        )
    }
}

impl<R: Real, F, B> fmt::Debug for FnLayer<R, F, B> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("FnLayer")
            .field("real", &R::NAME)
            .field("name", &self.name)
            .field("signature", &self.signature)
            .finish_non_exhaustive()
    }
}
