//! Signatures: the names, roles and shapes of a layer's tensors, and the
//! binding of named dims to sizes when arguments are checked.

use std::collections::BTreeMap;
use std::fmt;

use crate::error::Error;
use crate::layer::Args;
use crate::tensor::Tensor;

/// The role of a tensor in a layer call.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
#[non_exhaustive]
pub enum Role {
    /// A differentiable input (activations).
    Input,
    /// A trainable parameter (weights, biases); `param` in tables and JSON.
    #[serde(rename = "param")]
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
pub(crate) enum Dim {
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
pub(crate) struct Slot {
    /// The tensor's name, as shown in reports.
    pub name: String,
    /// Input, parameter, fixed input or output.
    pub role: Role,
    /// The axes; `None` accepts any shape (spec `"*"`).
    pub dims: Option<Vec<Dim>>,
    /// Declared by a concrete shape (`input_shape` and friends): its exact
    /// extents are named by tensor and axis where a name is shown.
    pub from_shape: bool,
}

impl Slot {
    /// A slot declared by a concrete shape.
    fn shaped(name: &str, role: Role, shape: &[usize]) -> Slot {
        Slot {
            name: name.to_string(),
            role,
            dims: Some(shape.iter().map(|&n| Dim::Exact(n)).collect()),
            from_shape: true,
        }
    }

    /// The declared dims as text, e.g. `[batch, 3]` or `any shape`.
    pub(crate) fn dims_string(&self) -> String {
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
/// # let _ = sig;
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
            from_shape: false,
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

    /// Declares a differentiable input by its concrete shape, for when its
    /// dims need no names: a shape known only at run time
    /// (`input_shape("x", x.shape())`), a wrapped layer's fixed sizes.
    ///
    /// The same as writing the extents in a spec (`&[4, 3]` is `"4, 3"`): a
    /// mismatch is an [`Error::ArgumentShape`](crate::Error::ArgumentShape)
    /// naming the tensor and the axis (``input `w` has shape [5], but the
    /// signature wants [3]: axis 0 is 5, declared 3``). Beyond that, a
    /// diagnosis whose factor is one of these extents names it by tensor and
    /// axis, as it names a named dim: ``1/N (N = axis 0 of `x` = 4)``, or
    /// ``length of `w` `` for a rank-1 tensor. A named dim of the same size
    /// elsewhere in the signature takes precedence.
    ///
    /// ```
    /// use plumbline::prelude::*;
    /// use plumbline::Error;
    ///
    /// // Frost score per station: y = x·w, shapes taken from the data.
    /// let readings = Tensor::full(vec![4, 3], 0.5_f64);
    /// let layer = FnLayer::new(
    ///     Signature::new()
    ///         .input_shape("x", readings.shape())
    ///         .param_shape("w", &[3])
    ///         .output_shape("y", &[4]),
    ///     |a: &Args<f64>| {
    ///         let (x, w) = (a.input(0), a.param(0));
    ///         vec![Tensor::from_fn(vec![4], |i| (0..3).map(|j| x[[i[0], j]] * w[[j]]).sum())]
    ///     },
    ///     |a, up| {
    ///         let (x, w, g) = (a.input(0), a.param(0), &up[0]);
    ///         let dx = Tensor::from_fn(vec![4, 3], |ix| g[[ix[0]]] * w[[ix[1]]]);
    ///         let dw = Tensor::from_fn(vec![3], |j| (0..4).map(|i| g[[i]] * x[[i, j[0]]]).sum());
    ///         vec![dx, dw]
    ///     },
    /// );
    /// let w = Tensor::new(vec![3], vec![0.2, -0.5, 1.0])?;
    /// Audit::new().run(&layer, &Args::new(vec![readings.clone()], vec![w]))?.assert_passed();
    ///
    /// let wrong = Args::new(vec![readings], vec![Tensor::full(vec![5], 0.1)]);
    /// let err = Audit::new().run(&layer, &wrong).unwrap_err();
    /// assert!(matches!(err, Error::ArgumentShape { ref tensor, .. } if tensor == "w"));
    /// assert!(err.to_string().ends_with("axis 0 is 5, declared 3"), "{err}");
    /// # Ok::<(), plumbline::Error>(())
    /// ```
    #[must_use]
    pub fn input_shape(mut self, name: &str, shape: &[usize]) -> Self {
        self.inputs.push(Slot::shaped(name, Role::Input, shape));
        self
    }

    /// Declares an input that is not differentiated by its concrete shape
    /// (see [`input_shape`](Signature::input_shape)).
    #[must_use]
    pub fn fixed_input_shape(mut self, name: &str, shape: &[usize]) -> Self {
        self.inputs.push(Slot::shaped(name, Role::Fixed, shape));
        self
    }

    /// Declares a parameter by its concrete shape (see
    /// [`input_shape`](Signature::input_shape)).
    #[must_use]
    pub fn param_shape(mut self, name: &str, shape: &[usize]) -> Self {
        self.params.push(Slot::shaped(name, Role::Parameter, shape));
        self
    }

    /// Declares an output by its concrete shape (see
    /// [`input_shape`](Signature::input_shape)).
    #[must_use]
    pub fn output_shape(mut self, name: &str, shape: &[usize]) -> Self {
        self.outputs.push(Slot::shaped(name, Role::Output, shape));
        self
    }

    /// The name and role of every input and parameter, in `Args` order.
    ///
    /// ```
    /// use plumbline::{report::Role, Signature};
    /// let sig = Signature::new().input("x", "n").fixed_input("mask", "n").param("w", "n").output("y", "n");
    /// let roles: Vec<(&str, Role)> = sig.arguments().collect();
    /// assert_eq!(roles, [("x", Role::Input), ("mask", Role::Fixed), ("w", Role::Parameter)]);
    /// ```
    pub fn arguments(&self) -> impl Iterator<Item = (&str, Role)> {
        self.inputs
            .iter()
            .chain(&self.params)
            .map(|s| (s.name.as_str(), s.role))
    }

    /// Inputs then parameters, in `Args` order.
    pub(crate) fn slots(&self) -> Vec<&Slot> {
        self.inputs.iter().chain(&self.params).collect()
    }

    /// The declared inputs (differentiable and fixed).
    pub(crate) fn inputs(&self) -> &[Slot] {
        &self.inputs
    }

    /// The declared outputs.
    pub(crate) fn outputs(&self) -> &[Slot] {
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

    /// Checks forward outputs against the declared outputs; returns the
    /// bindings with the outputs' named dims added.
    pub(crate) fn check_outputs<T>(
        &self,
        layer: &str,
        call: &str,
        bindings: &Bindings,
        outputs: &[Tensor<T>],
    ) -> Result<Bindings, Error> {
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
        Ok(b)
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
    /// The extents of tensors declared by concrete shape, each named by
    /// tensor and axis (`axis 1 of `w``), in declaration order.
    shaped: Vec<(String, usize)>,
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
                Dim::Exact(_) if slot.from_shape => {
                    let label = if dims.len() == 1 {
                        format!("length of `{}`", slot.name)
                    } else {
                        format!("axis {axis} of `{}`", slot.name)
                    };
                    self.shaped.push((label, n));
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

    /// Every named dim with its size, in name order, then the extents of
    /// tensors declared by concrete shape that no earlier entry has, named
    /// by tensor and axis.
    pub(crate) fn named_sizes(&self) -> Vec<(String, usize)> {
        let mut out: Vec<(String, usize)> = (self.sizes.iter())
            .map(|(k, (n, _))| (k.clone(), *n))
            .collect();
        for (label, n) in &self.shaped {
            if !out.iter().any(|(_, m)| m == n) {
                out.push((label.clone(), *n));
            }
        }
        out
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
    fn shape_declared_extents_are_labelled_after_named_dims() {
        let sig = Signature::new()
            .input("x", "batch, 3")
            .param_shape("w", &[5, 3])
            .param_shape("b", &[5])
            .output_shape("y", &[2, 5]);
        let args = Args::new(vec![t(&[2, 3])], vec![t(&[5, 3]), t(&[5])]);
        let b = sig.bind("L", &args).unwrap();
        // `batch` (2) comes first; 5 is labelled by its first declaration,
        // 3 by `w` (the spec's exact 3 on `x` carries no label).
        assert_eq!(
            b.named_sizes(),
            [
                ("batch".to_string(), 2),
                ("axis 0 of `w`".to_string(), 5),
                ("axis 1 of `w`".to_string(), 3),
            ]
        );
        let sig = Signature::new()
            .input_shape("x", &[4])
            .output_shape("y", &[4]);
        let args = Args::new(vec![t(&[4])], vec![]);
        let b = sig.bind("L", &args).unwrap();
        assert_eq!(b.named_sizes(), [("length of `x`".to_string(), 4)]);
    }

    #[test]
    fn a_shape_declared_fixed_input_takes_its_place_without_a_gradient() {
        let sig = Signature::new()
            .input_shape("x", &[3])
            .fixed_input_shape("mask", &[3])
            .output_shape("y", &[3]);
        let roles: Vec<Role> = sig.arguments().map(|(_, r)| r).collect();
        assert_eq!(roles, [Role::Input, Role::Fixed]);
        let args = Args::new(vec![t(&[3]), t(&[2])], vec![]);
        let msg = sig.bind("L", &args).unwrap_err().to_string();
        assert_eq!(
            msg,
            "input `mask` has shape [2], but the signature wants [3]: axis 0 is 2, declared 3"
        );
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
