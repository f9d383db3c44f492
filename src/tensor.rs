//! An owned, row-major tensor: a shape and its contiguous data, indexed by
//! multi-index like the array crates (`t[[i, j]]`).

use std::fmt;
use std::ops::{Index, IndexMut};

use crate::error::Error;
use crate::format::shape_string;

/// An owned, row-major (C order) tensor of scalars.
///
/// The data of element `[i, j, k]` of a `[a, b, c]` tensor sits at flat
/// position `(i * b + j) * c + k`. A rank-0 tensor (shape `[]`) holds one
/// scalar.
///
/// [`Tensor::new`] checks that the data fits the shape and returns an
/// [`Error`] otherwise. Indexing by a multi-index, `t[[i, j]]` or `t[ix]`
/// with `ix: &[usize]`, panics on an index out of bounds or of the wrong
/// rank, as slice indexing does; [`get`](Tensor::get) is the fallible path.
///
/// ```
/// use plumbline::Tensor;
/// let mut t = Tensor::new(vec![2, 3], vec![1.0, 2.0, 3.0, 4.0, 5.0, 6.0])?;
/// assert_eq!(t[[1, 0]], 4.0);
/// t[[1, 0]] = 4.5;
/// assert_eq!(t.get(&[1, 0]), Some(4.5));
/// assert_eq!(t.get(&[2, 0]), None);
/// assert_eq!(t.index_of(4).to_string(), "[1, 1]");
/// assert!(Tensor::new(vec![2, 2], vec![1.0_f64]).is_err());
/// # Ok::<(), plumbline::Error>(())
/// ```
#[derive(Clone, Debug, PartialEq)]
pub struct Tensor<T> {
    shape: Vec<usize>,
    data: Vec<T>,
}

impl<T: Copy> Tensor<T> {
    /// A tensor from a shape and row-major data; errors if
    /// `data.len()` is not the product of `shape`, or if that product
    /// overflows `usize`.
    ///
    /// ```
    /// use plumbline::Tensor;
    /// assert!(Tensor::new(vec![usize::MAX, 2], vec![0.0_f32]).is_err());
    /// ```
    pub fn new(shape: Vec<usize>, data: Vec<T>) -> Result<Self, Error> {
        let Some(expected) = element_count(&shape) else {
            return Err(Error::ShapeOverflow { shape });
        };
        if expected != data.len() {
            return Err(Error::DataLength {
                shape,
                expected,
                found: data.len(),
            });
        }
        Ok(Tensor { shape, data })
    }

    /// A tensor whose element at each multi-index is `f(index)`.
    ///
    /// Panics if the shape's element count overflows `usize` (such a tensor
    /// could not be allocated), as `Vec::with_capacity` does.
    ///
    /// ```
    /// use plumbline::Tensor;
    /// let eye = Tensor::from_fn(vec![2, 2], |ix| if ix[0] == ix[1] { 1.0 } else { 0.0 });
    /// assert_eq!(eye.data(), &[1.0, 0.0, 0.0, 1.0]);
    /// ```
    pub fn from_fn(shape: Vec<usize>, mut f: impl FnMut(&[usize]) -> T) -> Self {
        let n = checked_count(&shape);
        let mut ix = vec![0; shape.len()];
        let mut data = Vec::with_capacity(n);
        for _ in 0..n {
            data.push(f(&ix));
            for axis in (0..shape.len()).rev() {
                ix[axis] += 1;
                if ix[axis] < shape[axis] {
                    break;
                }
                ix[axis] = 0;
            }
        }
        Tensor { shape, data }
    }

    /// A tensor of the given shape filled with `value`. Panics if the
    /// element count overflows `usize`, as [`from_fn`](Tensor::from_fn) does.
    ///
    /// ```
    /// use plumbline::Tensor;
    /// assert_eq!(Tensor::full(vec![3], 0.5).data(), &[0.5, 0.5, 0.5]);
    /// ```
    pub fn full(shape: Vec<usize>, value: T) -> Self {
        let n = checked_count(&shape);
        Tensor {
            shape,
            data: vec![value; n],
        }
    }

    /// A rank-0 tensor holding one value.
    ///
    /// ```
    /// use plumbline::Tensor;
    /// assert_eq!(Tensor::scalar(2.0).shape(), &[] as &[usize]);
    /// ```
    pub fn scalar(value: T) -> Self {
        Tensor {
            shape: Vec::new(),
            data: vec![value],
        }
    }

    /// The element at a multi-index, or `None` if it is out of bounds or of
    /// the wrong rank.
    pub fn get(&self, index: &[usize]) -> Option<T> {
        self.offset(index).map(|i| self.data[i])
    }

    /// A mutable reference to the element at a multi-index.
    pub fn get_mut(&mut self, index: &[usize]) -> Option<&mut T> {
        self.offset(index).map(move |i| &mut self.data[i])
    }

    /// Applies `f` to every element, keeping the shape.
    ///
    /// ```
    /// use plumbline::Tensor;
    /// let t = Tensor::new(vec![2], vec![1.0_f32, -2.0])?;
    /// assert_eq!(t.map(|x| x as f64 * 2.0).data(), &[2.0, -4.0]);
    /// # Ok::<(), plumbline::Error>(())
    /// ```
    pub fn map<U>(&self, f: impl FnMut(T) -> U) -> Tensor<U> {
        Tensor {
            shape: self.shape.clone(),
            data: self.data.iter().copied().map(f).collect(),
        }
    }
}

impl<T> Tensor<T> {
    /// The shape, one extent per axis.
    pub fn shape(&self) -> &[usize] {
        &self.shape
    }

    /// The row-major data.
    pub fn data(&self) -> &[T] {
        &self.data
    }

    /// The row-major data, mutable. The shape cannot change.
    pub fn data_mut(&mut self) -> &mut [T] {
        &mut self.data
    }

    /// Consumes the tensor, returning shape and data.
    pub fn into_parts(self) -> (Vec<usize>, Vec<T>) {
        (self.shape, self.data)
    }

    /// Number of elements.
    pub fn len(&self) -> usize {
        self.data.len()
    }

    /// `true` if the tensor has no elements (some extent is 0).
    pub fn is_empty(&self) -> bool {
        self.data.is_empty()
    }

    /// Number of axes.
    pub fn rank(&self) -> usize {
        self.shape.len()
    }

    /// The multi-index of a flat position (unchecked against the length:
    /// positions past the end wrap on the first axis).
    pub fn index_of(&self, flat: usize) -> MultiIndex {
        MultiIndex::from_flat(&self.shape, flat)
    }

    fn offset_or_panic(&self, index: &[usize]) -> usize {
        match self.offset(index) {
            Some(i) => i,
            None => panic!(
                "index {} is out of bounds for a tensor of shape {}",
                shape_string(index),
                shape_string(&self.shape)
            ),
        }
    }

    /// The flat position of a multi-index, or `None` if out of bounds.
    ///
    /// ```
    /// use plumbline::Tensor;
    /// let t = Tensor::full(vec![2, 3, 4], 0.0_f32);
    /// assert_eq!(t.offset(&[1, 2, 3]), Some(23));
    /// assert_eq!(t.offset(&[2, 0, 0]), None);
    /// ```
    pub fn offset(&self, index: &[usize]) -> Option<usize> {
        if index.len() != self.shape.len() {
            return None;
        }
        let mut flat = 0;
        for (&i, &n) in index.iter().zip(&self.shape) {
            if i >= n {
                return None;
            }
            flat = flat * n + i;
        }
        Some(flat)
    }
}

/// The number of elements of a shape, `None` on overflow.
fn element_count(shape: &[usize]) -> Option<usize> {
    shape.iter().try_fold(1usize, |n, &d| n.checked_mul(d))
}

fn checked_count(shape: &[usize]) -> usize {
    match element_count(shape) {
        Some(n) => n,
        None => panic!(
            "a tensor of shape {} has more elements than usize can count",
            shape_string(shape)
        ),
    }
}

impl<T, const N: usize> Index<[usize; N]> for Tensor<T> {
    type Output = T;
    fn index(&self, index: [usize; N]) -> &T {
        &self.data[self.offset_or_panic(&index)]
    }
}

impl<T, const N: usize> IndexMut<[usize; N]> for Tensor<T> {
    fn index_mut(&mut self, index: [usize; N]) -> &mut T {
        let i = self.offset_or_panic(&index);
        &mut self.data[i]
    }
}

impl<T> Index<&[usize]> for Tensor<T> {
    type Output = T;
    fn index(&self, index: &[usize]) -> &T {
        &self.data[self.offset_or_panic(index)]
    }
}

impl<T> IndexMut<&[usize]> for Tensor<T> {
    fn index_mut(&mut self, index: &[usize]) -> &mut T {
        let i = self.offset_or_panic(index);
        &mut self.data[i]
    }
}

// ------------------------------------------------------------ approx

impl<T> Tensor<T> {
    /// Same shape, and `eq` holds for every pair of elements.
    fn pairwise(&self, other: &Self, eq: impl Fn(&T, &T) -> bool) -> bool {
        self.shape == other.shape && self.data.iter().zip(&other.data).all(|(a, b)| eq(a, b))
    }
}

/// Element-wise comparison with [`approx`]: tensors of different shapes are
/// never equal, and NaN equals nothing (as for the scalars). So tensors can
/// be compared in a user's own tests with `assert_abs_diff_eq!`,
/// `assert_relative_eq!` and `assert_ulps_eq!`.
///
/// ```
/// use approx::{assert_relative_eq, relative_ne};
/// use plumbline::Tensor;
/// let a = Tensor::new(vec![2], vec![1.0_f64, 2.0])?;
/// let b = Tensor::new(vec![2], vec![1.0, 2.0 + 1e-13])?;
/// assert_relative_eq!(a, b, max_relative = 1e-12);
/// // Same values, another shape: not equal.
/// let c = Tensor::new(vec![1, 2], vec![1.0, 2.0])?;
/// assert!(relative_ne!(a, c));
/// # Ok::<(), plumbline::Error>(())
/// ```
impl<T: approx::AbsDiffEq> approx::AbsDiffEq for Tensor<T>
where
    T::Epsilon: Copy,
{
    type Epsilon = T::Epsilon;

    fn default_epsilon() -> Self::Epsilon {
        T::default_epsilon()
    }

    fn abs_diff_eq(&self, other: &Self, epsilon: Self::Epsilon) -> bool {
        self.pairwise(other, |a, b| a.abs_diff_eq(b, epsilon))
    }
}

/// See the [`AbsDiffEq`](approx::AbsDiffEq) implementation.
impl<T: approx::RelativeEq> approx::RelativeEq for Tensor<T>
where
    T::Epsilon: Copy,
{
    fn default_max_relative() -> Self::Epsilon {
        T::default_max_relative()
    }

    fn relative_eq(
        &self,
        other: &Self,
        epsilon: Self::Epsilon,
        max_relative: Self::Epsilon,
    ) -> bool {
        self.pairwise(other, |a, b| a.relative_eq(b, epsilon, max_relative))
    }
}

/// See the [`AbsDiffEq`](approx::AbsDiffEq) implementation.
impl<T: approx::UlpsEq> approx::UlpsEq for Tensor<T>
where
    T::Epsilon: Copy,
{
    fn default_max_ulps() -> u32 {
        T::default_max_ulps()
    }

    fn ulps_eq(&self, other: &Self, epsilon: Self::Epsilon, max_ulps: u32) -> bool {
        self.pairwise(other, |a, b| a.ulps_eq(b, epsilon, max_ulps))
    }
}

/// A multi-index into a tensor, rendered as `[i, j, k]` in reports.
///
/// ```
/// use plumbline::report::MultiIndex;
/// let ix = MultiIndex::from_flat(&[2, 3], 5);
/// assert_eq!(ix.as_slice(), &[1, 2]);
/// assert_eq!(ix.to_string(), "[1, 2]");
/// ```
#[derive(Clone, Debug, PartialEq, Eq, Hash, Default, serde::Serialize, serde::Deserialize)]
#[serde(transparent)]
pub struct MultiIndex(pub Vec<usize>);

impl MultiIndex {
    /// The multi-index of flat position `flat` in a row-major tensor of
    /// `shape`.
    pub fn from_flat(shape: &[usize], mut flat: usize) -> MultiIndex {
        let mut ix = vec![0; shape.len()];
        for axis in (0..shape.len()).rev() {
            let n = shape[axis].max(1);
            ix[axis] = flat % n;
            flat /= n;
        }
        MultiIndex(ix)
    }

    /// The indices, one per axis.
    pub fn as_slice(&self) -> &[usize] {
        &self.0
    }
}

impl fmt::Display for MultiIndex {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&shape_string(&self.0))
    }
}

#[cfg(test)]
mod tests {
    use approx::{abs_diff_eq, relative_eq, ulps_eq};

    #[test]
    fn approx_compares_element_wise_and_never_across_shapes_or_nan() {
        let t = |shape: Vec<usize>, v: Vec<f64>| Tensor::new(shape, v).unwrap();
        let a = t(vec![2, 2], vec![1.0, -2.0, 3.0, 0.0]);
        // One element off by 1e-12: inside 1e-11 either way, outside 1e-13.
        let b = t(vec![2, 2], vec![1.0, -2.0 + 1e-12, 3.0, 0.0]);
        assert!(abs_diff_eq!(a, b, epsilon = 1e-11));
        assert!(!abs_diff_eq!(a, b, epsilon = 1e-13));
        assert!(relative_eq!(a, b, max_relative = 1e-11));
        assert!(!relative_eq!(a, b, max_relative = 1e-13));
        // −2 + 1e-12 lies in (−2, −1], where an ulp is 2⁻⁵² ≈ 2.2e-16
        // (IEEE 754 binary64): about 4500 ulps from −2.
        assert!(ulps_eq!(a, b, max_ulps = 8192));
        assert!(!ulps_eq!(a, b, max_ulps = 2048));
        // The same data in another shape is never equal.
        let c = t(vec![4], vec![1.0, -2.0, 3.0, 0.0]);
        assert!(!abs_diff_eq!(a, c, epsilon = 1.0));
        assert!(!relative_eq!(a, c, max_relative = 1.0));
        assert!(!ulps_eq!(a, c, max_ulps = u32::MAX));
        // NaN equals nothing, itself included.
        let n = t(vec![2, 2], vec![1.0, f64::NAN, 3.0, 0.0]);
        assert!(!abs_diff_eq!(n, n.clone(), epsilon = f64::INFINITY));
        assert!(!relative_eq!(n, n.clone(), max_relative = 1.0));
    }

    use super::*;

    #[test]
    fn flat_and_multi_index_round_trip() {
        let t = Tensor::from_fn(vec![2, 3, 4], |ix| {
            (ix[0] * 100 + ix[1] * 10 + ix[2]) as f64
        });
        for flat in 0..t.len() {
            let ix = t.index_of(flat);
            assert_eq!(t.offset(ix.as_slice()), Some(flat));
            let want = (ix.0[0] * 100 + ix.0[1] * 10 + ix.0[2]) as f64;
            assert_eq!(t.data()[flat], want);
        }
    }

    #[test]
    fn rank_zero_and_empty() {
        let s = Tensor::scalar(3.0_f32);
        assert_eq!(s.len(), 1);
        assert_eq!(s.get(&[]), Some(3.0));
        assert_eq!(s.index_of(0).to_string(), "[]");
        let e = Tensor::new(vec![0, 3], Vec::<f64>::new()).unwrap();
        assert!(e.is_empty());
    }

    #[test]
    fn mismatch_is_an_error_naming_the_shape() {
        let err = Tensor::new(vec![2, 3], vec![0.0_f64; 5]).unwrap_err();
        let msg = err.to_string();
        assert!(
            msg.contains("[2, 3]") && msg.contains('6') && msg.contains('5'),
            "{msg}"
        );
        assert_eq!(
            Tensor::new(vec![2], vec![1.0, 2.0]).unwrap().get(&[2]),
            None
        );
    }
}
