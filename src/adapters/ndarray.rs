//! Conversions between [`Tensor`] and `ndarray` arrays (feature `ndarray`),
//! so a layer written with ndarray operations plugs into the audit.
//!
//! Arrays of any memory layout (row-major, column-major, transposed or
//! strided views) convert to a row-major `Tensor` with the same logical
//! elements; a `Tensor` converts to a row-major `ArrayD`.

use ndarray::{ArrayBase, ArrayD, Data, Dimension, IxDyn};

use crate::tensor::Tensor;

impl<T: Copy> Tensor<T> {
    /// The tensor as a row-major dynamic-rank array.
    ///
    /// ```
    /// use plumbline::Tensor;
    /// let t = Tensor::new(vec![2, 3], vec![1.0, 2.0, 3.0, 4.0, 5.0, 6.0])?;
    /// let a = t.to_ndarray();
    /// assert_eq!(a.shape(), &[2, 3]);
    /// assert_eq!(a[[1, 0]], 4.0);
    /// # Ok::<(), plumbline::Error>(())
    /// ```
    pub fn to_ndarray(&self) -> ArrayD<T> {
        ArrayD::from_shape_vec(IxDyn(self.shape()), self.data().to_vec())
            .expect("a Tensor's data always fits its shape")
    }

    /// A row-major tensor with the logical elements of any array or view,
    /// whatever its memory layout.
    ///
    /// ```
    /// use ndarray::array;
    /// use plumbline::Tensor;
    /// let a = array![[1.0, 2.0, 3.0], [4.0, 5.0, 6.0]];
    /// let t = Tensor::from_ndarray(&a.t()); // a transposed view
    /// assert_eq!(t.shape(), &[3, 2]);
    /// assert_eq!(t.data(), &[1.0, 4.0, 2.0, 5.0, 3.0, 6.0]);
    /// ```
    pub fn from_ndarray<S, D>(array: &ArrayBase<S, D>) -> Tensor<T>
    where
        S: Data<Elem = T>,
        D: Dimension,
    {
        // `iter` visits every element once, in logical row-major order.
        Tensor::new(array.shape().to_vec(), array.iter().copied().collect())
            .expect("an array yields one element per position of its shape")
    }
}

impl<T: Copy> From<Tensor<T>> for ArrayD<T> {
    fn from(t: Tensor<T>) -> Self {
        let (shape, data) = t.into_parts();
        ArrayD::from_shape_vec(IxDyn(&shape), data).expect("a Tensor's data always fits its shape")
    }
}

impl<T: Copy, S: Data<Elem = T>, D: Dimension> From<&ArrayBase<S, D>> for Tensor<T> {
    fn from(a: &ArrayBase<S, D>) -> Self {
        Tensor::from_ndarray(a)
    }
}
