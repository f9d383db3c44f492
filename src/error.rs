//! The one error type: misuse of the API or a layer that cannot be audited.

use thiserror::Error as ThisError;

/// Why an audit (or a tensor constructor) could not run.
///
/// Every message says *where*: which tensor or output, which call, and what
/// was expected. A gradient that disagrees is not an error: it is a row of
/// the [`Report`](crate::Report).
///
/// Converts into a proptest failure with `?` (any `std::error::Error` does).
///
/// ```
/// use plumbline::{Error, Tensor};
///
/// let err = Tensor::new(vec![2, 3], vec![1.0_f64; 5]).unwrap_err();
/// assert!(matches!(err, Error::DataLength { .. }));
/// assert!(err.to_string().contains("[2, 3]"), "{err}");
/// ```
#[derive(Debug, ThisError, Clone, PartialEq)]
#[non_exhaustive]
pub enum Error {
    /// Tensor data whose length is not the product of its shape.
    #[error(
        "tensor of shape {} needs {expected} elements, but {found} were given",
        crate::format::shape_string(shape)
    )]
    DataLength {
        /// The requested shape.
        shape: Vec<usize>,
        /// Product of the shape.
        expected: usize,
        /// Length of the data given.
        found: usize,
    },
    /// A shape whose element count overflows `usize`.
    #[error(
        "a tensor of shape {} has more elements than usize can count",
        crate::format::shape_string(shape)
    )]
    ShapeOverflow {
        /// The requested shape.
        shape: Vec<usize>,
    },
    /// The layer's signature is malformed (bad dimension spec, duplicate name).
    #[error("layer `{layer}`: bad signature: {detail}")]
    Signature {
        /// Layer type name.
        layer: String,
        /// What is wrong.
        detail: String,
    },
    /// The layer has nothing to check: no differentiable tensor or no output.
    #[error("layer `{layer}` has nothing to check: {detail}")]
    EmptyLayer {
        /// Layer type name.
        layer: String,
        /// What is missing.
        detail: String,
    },
    /// Wrong number of input or parameter tensors.
    #[error(
        "layer `{layer}` expects {expected} {role} tensor(s) ({names}), but {found} were given"
    )]
    ArgumentCount {
        /// Layer type name.
        layer: String,
        /// "input" or "parameter".
        role: &'static str,
        /// Count in the signature.
        expected: usize,
        /// Names in the signature, comma separated.
        names: String,
        /// Count given.
        found: usize,
    },
    /// An argument tensor whose shape does not fit the signature.
    #[error(
        "{role} `{tensor}` has shape {}, but the signature wants {expected}: {detail}",
        crate::format::shape_string(found)
    )]
    ArgumentShape {
        /// Tensor name.
        tensor: String,
        /// "input" or "parameter".
        role: &'static str,
        /// The signature's dims, e.g. `[batch, 3]`.
        expected: String,
        /// The shape given.
        found: Vec<usize>,
        /// Which axis disagrees and why.
        detail: String,
    },
    /// `forward` returned the wrong number of outputs.
    #[error("layer `{layer}`: {call} returned {found} output(s), but the signature declares {expected} ({names})")]
    OutputCount {
        /// Layer type name.
        layer: String,
        /// Which call, e.g. `forward (first call)`.
        call: String,
        /// Declared outputs.
        expected: usize,
        /// Names declared.
        names: String,
        /// Outputs returned.
        found: usize,
    },
    /// `forward` returned an output whose shape does not fit the signature.
    #[error("{call} returned output `{output}` of shape {}, but the signature wants {expected}: {detail}", crate::format::shape_string(found))]
    OutputShape {
        /// Which layer and call, e.g. ``forward of `Dense` (second call)``.
        call: String,
        /// Output name.
        output: String,
        /// The signature's dims.
        expected: String,
        /// The shape returned.
        found: Vec<usize>,
        /// Which axis disagrees and why.
        detail: String,
    },
    /// A setting given through the API or an environment variable is invalid.
    #[error("setting `{setting}` = `{value}` is invalid: {detail}")]
    Setting {
        /// The setting or environment variable.
        setting: String,
        /// The value given.
        value: String,
        /// What is accepted.
        detail: String,
    },
    /// The layer's `forward` or `backward` panicked. The panic does not
    /// unwind through the audit; this error says where it happened.
    #[error("layer `{layer}` panicked in {call}{at}: {message}")]
    LayerPanicked {
        /// Layer name.
        layer: String,
        /// `forward` or `backward`.
        call: String,
        /// Where, e.g. `` while `x` [1, 2] was moved to 1.0000001`` (empty
        /// for a call at the audit's arguments).
        at: String,
        /// The panic's message.
        message: String,
    },
    /// An op the layer hands its work to (a candle custom op, candle's
    /// autograd) returned an error instead of a value. The op did not
    /// panic; the layer's adapter stopped the call and the audit reports
    /// which op, which of its calls, and the audit's call it happened in.
    ///
    /// ```
    /// # #[cfg(feature = "candle")] {
    /// use candle_core::{CpuStorage, CustomOp1, Layout, Shape};
    /// use plumbline::candle::CustomOp1Layer;
    /// use plumbline::{Args, Audit, Error, Tensor};
    ///
    /// /// An op whose forward refuses every input.
    /// struct Refuses;
    /// impl CustomOp1 for Refuses {
    ///     fn name(&self) -> &'static str { "refuses" }
    ///     fn cpu_fwd(&self, _: &CpuStorage, _: &Layout) -> candle_core::Result<(CpuStorage, Shape)> {
    ///         candle_core::bail!("no reading today")
    ///     }
    /// }
    ///
    /// let layer = CustomOp1Layer::<_, f64>::new(Refuses, [2]);
    /// let x = Tensor::new(vec![2], vec![1.0, 2.0])?;
    /// let err = Audit::new().run(&layer, &Args::new(vec![x], vec![])).unwrap_err();
    /// assert!(matches!(err, Error::OpFailed { op: "refuses", step: "cpu_fwd", .. }), "{err}");
    /// assert!(err.to_string().contains("no reading today"), "{err}");
    /// # }
    /// # Ok::<(), plumbline::Error>(())
    /// ```
    #[error("layer `{layer}`: op `{op}` returned an error from `{step}` in the audit's {call}: {message}")]
    OpFailed {
        /// Layer name, as the audit names it.
        layer: String,
        /// The op's own name (a candle custom op's `name()`).
        op: &'static str,
        /// Which of the op's calls failed, e.g. `cpu_fwd`, `bwd`,
        /// `Tensor::backward`.
        step: &'static str,
        /// The audit's call into the layer, e.g. `forward`, `backward`,
        /// and where when not at the audit's arguments, e.g.
        /// ``backward while `x` [1] was moved to 0.5``.
        call: String,
        /// The op's error, as text.
        message: String,
    },
    /// A tensor of another library could not become a [`Tensor`](crate::Tensor)
    /// (or the other way round): another element type, a device the
    /// conversion cannot read, an error of that library.
    #[error("cannot convert {from} to {to}: {detail}")]
    Conversion {
        /// What was given, e.g. `a candle tensor of dtype bf16 and shape [2, 3]`.
        from: String,
        /// What was asked for, e.g. `Tensor<f32>`.
        to: String,
        /// Why not, and what to do.
        detail: String,
    },
    /// `backward` returned more gradients than the signature has
    /// differentiable tensors.
    #[error("layer `{layer}`: backward returned {found} gradient(s), but the signature has {expected} differentiable tensor(s) ({names}); fixed inputs take no gradient")]
    GradientCount {
        /// Layer name.
        layer: String,
        /// Differentiable tensors in the signature.
        expected: usize,
        /// Their names.
        names: String,
        /// Gradients returned.
        found: usize,
    },
    /// The audit would take more forward evaluations than its budget allows.
    #[error("layer `{layer}`: the audit needs about {needed} forward evaluations, above the budget of {budget}; raise it with `.max_evaluations(..)` or PLUMBLINE_MAX_EVALUATIONS, check a sample with `.max_elements(..)` or PLUMBLINE_MAX_ELEMENTS, or screen large tensors with `.coverage(Coverage::Screen)` or PLUMBLINE_COVERAGE=screen")]
    OverBudget {
        /// Layer name.
        layer: String,
        /// Estimated forward evaluations.
        needed: u64,
        /// The budget in force.
        budget: u64,
    },
    /// Writing a report file failed.
    #[error("could not write report `{path}`: {detail}")]
    ReportIo {
        /// The file.
        path: String,
        /// The I/O error, as text.
        detail: String,
    },
}

/// An op's error carried out of a layer call, which can only return values
/// or panic: an adapter records it here and panics with its text; the
/// audit's guard takes it back and reports [`Error::OpFailed`].
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct OpFailure {
    /// The op's own name.
    pub op: &'static str,
    /// Which of the op's calls failed.
    pub step: &'static str,
    /// The op's error, as text.
    pub message: String,
}

impl OpFailure {
    /// The failure as an error of the audit's `call` into `layer`.
    pub(crate) fn into_error(self, layer: &str, call: &str, at: String) -> Error {
        Error::OpFailed {
            layer: layer.to_string(),
            op: self.op,
            step: self.step,
            call: format!("{call}{at}"),
            message: self.message,
        }
    }
}

impl std::fmt::Display for OpFailure {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "op `{}` returned an error from `{}`: {}",
            self.op, self.step, self.message
        )
    }
}

thread_local! {
    /// The op failure behind the panic in flight on this thread, if any.
    static PENDING: std::cell::RefCell<Option<OpFailure>> = const { std::cell::RefCell::new(None) };
}

/// Records `failure` for the audit's guard and panics with its text (the
/// text alone is what a caller outside an audit sees).
#[cfg(feature = "candle")]
pub(crate) fn raise(failure: OpFailure) -> ! {
    let text = failure.to_string();
    PENDING.with(|p| *p.borrow_mut() = Some(failure));
    panic!("{text}")
}

/// Takes the op failure recorded on this thread, leaving none.
pub(crate) fn take_pending() -> Option<OpFailure> {
    PENDING.with(|p| p.borrow_mut().take())
}
