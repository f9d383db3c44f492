//! Conversions between [`Tensor`](crate::Tensor) and other crates' arrays,
//! and layers made from other crates' ops.

#[cfg(feature = "candle")]
pub mod candle;
#[cfg(feature = "ndarray")]
mod ndarray;
