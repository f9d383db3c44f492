//! The complex step over a generic forward: one complex evaluation per
//! element (or per direction), with a step scaled to the element.

use crate::layer::Args;
use crate::scalar::ComplexStep;
use crate::tensor::Tensor;

/// A complex forward that reports a panic as `None`.
pub(crate) type ComplexForward<'a> =
    dyn FnMut(&Args<ComplexStep<f64>>) -> Option<Vec<Tensor<ComplexStep<f64>>>> + 'a;

/// The imaginary step for an element of value `x`.
///
/// * `1e-20·max(|x|, 1)` for |x| ≥ 1e-8, for 0 and for subnormal `x`:
///   far below where the O(h²) term shows for functions that bend on the
///   scale of 1 or of x, and growing with large |x| so that `h` times a
///   sensitivity of order 1/x stays a normal number.
/// * `1e-12·|x|` for tiny normal `x` (down to 4·`f64::MIN_POSITIVE`), so
///   that a function that bends on the scale of x itself (√x, ln x, 1/x,
///   x·ln x) is still probed in its linear regime. The truncation this
///   leaves is measured, not assumed (see [`tiny`]).
pub(crate) fn step_for(x: f64) -> f64 {
    let a = x.abs();
    if tiny(x) {
        (1e-12 * a).max(4.0 * f64::MIN_POSITIVE)
    } else {
        1e-20 * a.max(1.0)
    }
}

/// `true` when the element is small enough that its step is relative and
/// a second evaluation measures the truncation.
pub(crate) fn tiny(x: f64) -> bool {
    let a = x.abs();
    (f64::MIN_POSITIVE..1e-8).contains(&a)
}

/// One complex-step derivative of φ = Σ wᵢyᵢ along the seeded direction.
#[derive(Clone, Copy, Debug, Default)]
pub(crate) struct Directional {
    /// Σ wᵢ Im yᵢ / h.
    pub value: f64,
    /// Σ |wᵢ Im yᵢ / h|.
    pub terms: f64,
    /// Σ |wᵢ Re yᵢ| over the outputs with a derivative.
    pub touched: f64,
    /// Σ |wᵢ| · (smallest subnormal) / h over outputs whose imaginary part
    /// went subnormal: the granularity lost to underflow.
    pub underflow: f64,
    /// The largest rounding amplification among the outputs with a
    /// derivative (see `Engine::measure_precision`).
    pub amplification: f64,
    /// Every part of every output finite, and the output shapes as expected.
    pub finite: bool,
}

/// Reads the derivative off complex outputs seeded with step `h`;
/// `amplification` holds one factor per output, flattened (empty: all 1).
pub(crate) fn read(
    y: &[Tensor<ComplexStep<f64>>],
    w: &[Vec<f64>],
    h: f64,
    amplification: &[f64],
) -> Directional {
    let shapes_ok = y.len() == w.len() && y.iter().zip(w).all(|(t, w)| t.len() == w.len());
    let mut d = Directional {
        finite: shapes_ok,
        amplification: 1.0,
        ..Directional::default()
    };
    let mut k = 0;
    for (yt, wt) in y.iter().zip(w) {
        for (yi, &wi) in yt.data().iter().zip(wt) {
            k += 1;
            if !(yi.re.is_finite() && yi.im.is_finite()) {
                d.finite = false;
                continue;
            }
            if yi.im == 0.0 {
                continue;
            }
            if let Some(&a) = amplification.get(k - 1) {
                d.amplification = d.amplification.max(a);
            }
            let term = wi * (yi.im / h);
            d.value += term;
            d.terms += term.abs();
            d.touched += (wi * yi.re).abs();
            if yi.im.abs() < f64::MIN_POSITIVE {
                d.underflow += wi.abs() * f64::from_bits(1) / h;
            }
        }
    }
    if !d.finite {
        d.value = f64::NAN;
    }
    d
}

/// Seeds `x_j + i·h` at the flat positions `targets` of tensor `slot`
/// (each with its direction weight), runs `forward`, clears the seeds, and
/// reads the derivative.
pub(crate) fn evaluate(
    work: &mut Args<ComplexStep<f64>>,
    forward: &mut ComplexForward<'_>,
    w: &[Vec<f64>],
    slot: usize,
    targets: &[(usize, f64)],
    h: f64,
    amplification: &[f64],
) -> Directional {
    for &(j, v) in targets {
        work.all_mut()[slot].data_mut()[j].im = h * v;
    }
    let y = forward(work);
    for &(j, _) in targets {
        work.all_mut()[slot].data_mut()[j].im = 0.0;
    }
    match y {
        Some(y) => read(&y, w, h, amplification),
        None => Directional {
            value: f64::NAN,
            ..Directional::default()
        },
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn steps_scale_with_the_element_and_stay_normal() {
        assert_eq!(step_for(0.5), 1e-20);
        assert_eq!(step_for(0.0), 1e-20);
        assert_eq!(step_for(1e300), 1e280);
        assert_eq!(step_for(1e-100), 1e-112);
        assert!(step_for(1e-300) >= 4.0 * f64::MIN_POSITIVE);
        assert_eq!(step_for(1e-310), 1e-20); // subnormal: absolute step
        assert!(tiny(1e-100) && !tiny(0.0) && !tiny(1e-310) && !tiny(1e-3));
    }
}
