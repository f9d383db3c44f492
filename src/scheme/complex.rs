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
    /// went subnormal or is exactly 0: the granularity lost to underflow
    /// (a derivative below (smallest subnormal)/h reads as exactly 0).
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
                d.underflow += wi.abs() * f64::from_bits(1) / h;
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
/// (each with its direction weight), runs `forward`, and clears the seeds:
/// the complex outputs, `None` when the forward panicked.
pub(crate) fn seeded(
    work: &mut Args<ComplexStep<f64>>,
    forward: &mut ComplexForward<'_>,
    slot: usize,
    targets: &[(usize, f64)],
    h: f64,
) -> Option<Vec<Tensor<ComplexStep<f64>>>> {
    for &(j, v) in targets {
        work.all_mut()[slot].data_mut()[j].im = h * v;
    }
    let y = forward(work);
    for &(j, _) in targets {
        work.all_mut()[slot].data_mut()[j].im = 0.0;
    }
    y
}

/// What the one-sided derivatives of φ = Σ wᵢyᵢ allow at a tie the complex
/// step met: `plus` holds the outputs seeded with +h, `minus` with −h.
///
/// With ties broken by the imaginary parts (see `ComplexStep`'s `max`),
/// Im yᵢ(x + ih)/h is one one-sided derivative of output i and
/// Im yᵢ(x − ih)/(−h) the other. A backward may resolve the tie of each
/// output its own way, so the values it can return fill the sum over
/// outputs of wᵢ·[one side, other side] (in either order): returned as
/// (low, high, rounding allowance). `None` when an output is not finite or
/// the shapes differ.
pub(crate) fn sides(
    plus: &[Tensor<ComplexStep<f64>>],
    minus: &[Tensor<ComplexStep<f64>>],
    w: &[Vec<f64>],
    h: f64,
) -> Option<(f64, f64, f64)> {
    let shapes_ok = plus.len() == w.len()
        && minus.len() == w.len()
        && plus
            .iter()
            .zip(minus)
            .zip(w)
            .all(|((r, l), w)| r.len() == w.len() && l.len() == w.len());
    if !shapes_ok {
        return None;
    }
    let (mut low, mut high, mut terms) = (0.0, 0.0, 0.0);
    for ((p, m), w) in plus.iter().zip(minus).zip(w) {
        for ((p, m), &wi) in p.data().iter().zip(m.data()).zip(w) {
            if !(p.im.is_finite() && m.im.is_finite()) {
                return None;
            }
            let (a, b) = (wi * (p.im / h), wi * (m.im / -h));
            low += a.min(b);
            high += a.max(b);
            terms += a.abs() + b.abs();
        }
    }
    Some((low, high, 8.0 * f64::EPSILON * terms))
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
        // The floor of a relative step: 4 × the smallest normal (doc comment).
        assert_eq!(step_for(1e-300), 4.0 * f64::MIN_POSITIVE);
        assert!((step_for(-3e-9) / 3e-21 - 1.0).abs() < 1e-15);
        assert!((step_for(-250.0) / 2.5e-18 - 1.0).abs() < 1e-15);
    }

    fn c(re: f64, im: f64) -> ComplexStep<f64> {
        ComplexStep { re, im }
    }

    fn tensor(data: Vec<ComplexStep<f64>>) -> Tensor<ComplexStep<f64>> {
        Tensor::new(vec![data.len()], data).unwrap()
    }

    fn close(got: f64, want: f64) -> bool {
        (got - want).abs() <= 1e-15 * want.abs()
    }

    #[test]
    fn read_sums_weighted_imaginary_parts_over_the_step() {
        // Worked by hand from the field docs of `Directional`, h = 1e-20:
        // value = 0.5·3 + 2·(−1) − 1·2 = −2.5, terms = 1.5 + 2 + 2 = 5.5,
        // touched = |0.5·2| + |2·4| + |−1·−3| = 12 (the output with no
        // imaginary part is left out of all three).
        let y = vec![
            tensor(vec![c(2.0, 3e-20), c(-1.0, 0.0), c(4.0, -1e-20)]),
            tensor(vec![c(-3.0, 2e-20)]),
        ];
        let w = vec![vec![0.5, 7.0, 2.0], vec![-1.0]];
        let d = read(&y, &w, 1e-20, &[]);
        assert!(d.finite, "{d:?}");
        assert!(close(d.value, -2.5) && close(d.terms, 5.5), "{d:?}");
        assert!(close(d.touched, 12.0), "{d:?}");
        // The output with no imaginary part may hide a derivative below
        // the step's granularity: |7|·2⁻¹⁰⁷⁴/1e-20.
        assert!(close(d.underflow, 7.0 * f64::from_bits(1) / 1e-20), "{d:?}");
        assert_eq!(d.amplification, 1.0);
        // Amplification: the largest among the outputs with a derivative
        // (100 belongs to the one without), never below 1.
        let d = read(&y, &w, 1e-20, &[3.0, 100.0, 0.5, 2.0]);
        assert_eq!(d.amplification, 3.0);
        let d = read(&y, &w, 1e-20, &[0.5, 100.0, 0.5, 2.5]);
        assert_eq!(d.amplification, 2.5);
        let d = read(&y, &w, 1e-20, &[0.5, 100.0, 0.5, 0.25]);
        assert_eq!(d.amplification, 1.0);
    }

    #[test]
    fn read_counts_the_granularity_lost_to_underflow() {
        // A subnormal imaginary part loses up to the smallest subnormal
        // (2⁻¹⁰⁷⁴) per unit weight: |−2|·2⁻¹⁰⁷⁴/1e-20.
        let y = vec![tensor(vec![c(1.0, 1e-310), c(1.0, f64::MIN_POSITIVE)])];
        let d = read(&y, &[vec![-2.0, 1.0]], 1e-20, &[]);
        assert!(close(d.underflow, 2.0 * f64::from_bits(1) / 1e-20), "{d:?}");
        assert!(d.finite);
    }

    #[test]
    fn read_refuses_non_finite_outputs_and_wrong_shapes() {
        let w = vec![vec![1.0, 1.0]];
        for bad in [c(f64::NAN, 1e-20), c(1.0, f64::NAN), c(f64::INFINITY, 0.0)] {
            let d = read(&[tensor(vec![c(1.0, 1e-20), bad])], &w, 1e-20, &[]);
            assert!(!d.finite && d.value.is_nan(), "{bad:?}: {d:?}");
        }
        let one = vec![tensor(vec![c(1.0, 1e-20)])];
        let d = read(&one, &w, 1e-20, &[]);
        assert!(!d.finite && d.value.is_nan(), "{d:?}");
        let d = read(&one, &[vec![1.0], vec![1.0]], 1e-20, &[]);
        assert!(!d.finite && d.value.is_nan(), "{d:?}");
        let d = read(&one, &[vec![2.0]], 1e-20, &[]);
        assert!(d.finite && close(d.value, 2.0), "{d:?}");
    }

    #[test]
    fn seeded_moves_the_direction_runs_and_clears() {
        // Hive example: y = x₀·x₁ (brood warmth times humidity). Moving
        // (x₀, x₁) along (1, 0.5) at (2, 3): dy = x₁·1 + x₀·0.5 = 4.
        let mut work = Args::new(vec![tensor(vec![c(2.0, 0.0), c(3.0, 0.0)])], vec![]);
        let mut forward = |a: &Args<ComplexStep<f64>>| {
            let x = a.input(0).data();
            Some(vec![tensor(vec![x[0] * x[1]])])
        };
        let y = seeded(&mut work, &mut forward, 0, &[(0, 1.0), (1, 0.5)], 1e-20);
        let d = read(&y.expect("no panic"), &[vec![1.0]], 1e-20, &[]);
        assert!(d.finite && close(d.value, 4.0), "{d:?}");
        assert!(work.input(0).data().iter().all(|v| v.im == 0.0));
        // A forward that panicked: nothing, and the seeds cleared.
        let mut panicked = |_: &Args<ComplexStep<f64>>| None;
        assert!(seeded(&mut work, &mut panicked, 0, &[(0, 1.0)], 1e-20).is_none());
        assert!(work.input(0).data().iter().all(|v| v.im == 0.0));
    }

    #[test]
    fn sides_sum_each_outputs_one_sided_interval() {
        use num_traits::Float;
        // Two frost-alarm outputs that both tie at x = 0.5: y₀ = max(x, 0.5)
        // and y₁ = max(0.5, 2x − 0.5). Right-hand derivatives y₀′ = 1,
        // y₁′ = 2; left-hand 0 and 0 (the constants win). With w = (1, −1)
        // the outputs' intervals are [0, 1] and [−2, 0]: the sum [−2, 1].
        let f = |x: ComplexStep<f64>| {
            let half = ComplexStep::real(0.5);
            vec![tensor(vec![
                x.max(half),
                half.max(x * ComplexStep::real(2.0) - half),
            ])]
        };
        let h = 1e-20;
        let plus = f(ComplexStep::seeded(0.5, h));
        let minus = f(ComplexStep::seeded(0.5, -h));
        let (lo, hi, noise) = sides(&plus, &minus, &[vec![1.0, -1.0]], h).expect("finite");
        assert_eq!((lo, hi), (-2.0, 1.0));
        assert!(noise > 0.0 && noise < 1e-14);
        // Away from the tie both sides agree: an empty interval.
        let plus = f(ComplexStep::seeded(0.7, h));
        let minus = f(ComplexStep::seeded(0.7, -h));
        let (lo, hi, _) = sides(&plus, &minus, &[vec![1.0, -1.0]], h).expect("finite");
        assert!(close(lo, 1.0 - 2.0) && close(hi, lo), "{lo} {hi}");
        // |x| at 0 and min at a tie: left-hand with +h, right-hand with −h.
        let a = ComplexStep::seeded(0.0, h).abs();
        let b = ComplexStep::seeded(0.0, -h).abs();
        assert_eq!((a.im / h, b.im / -h), (-1.0, 1.0));
        let m = ComplexStep::seeded(1.0, h).min(ComplexStep::real(1.0));
        assert_eq!(m.im / h, 1.0);
        let m = ComplexStep::seeded(1.0, -h).min(ComplexStep::real(1.0));
        assert_eq!(m.im, 0.0);
        // NaN still propagates through clamp and abs_sub.
        let nan = ComplexStep::real(f64::NAN);
        assert!(nan
            .clamp(ComplexStep::real(0.0), ComplexStep::real(1.0))
            .re
            .is_nan());
        assert!(nan.abs_sub(ComplexStep::real(0.0)).re.is_nan());
        // Mismatched shapes: nothing.
        assert!(sides(&plus, &minus, &[vec![1.0]], h).is_none());
    }
}
