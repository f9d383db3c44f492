//! Conversions between [`Tensor`](crate::Tensor) and other crates' arrays.

#[cfg(feature = "ndarray")]
mod ndarray;
