//! Real-arithmetic difference schemes against published values.
//!
//! Check values: the test function of Squire & Trapp, "Using complex
//! variables to estimate derivatives of real functions", SIAM Review 40(1),
//! 1998 (also used by Martins, Sturdza & Alonso, ACM TOMS 29(3), 2003), and
//! handbook derivatives from the NIST Digital Library of Mathematical
//! Functions (DLMF). Digits were computed with mpmath at 40-50 digits from
//! the closed forms cited beside each table.

// Check values keep the digits of their source.
#![allow(clippy::excessive_precision, clippy::approx_constant)]

use approx::{abs_diff_eq, assert_abs_diff_eq};
use plumbline::scheme::{central_difference, one_sided_derivatives, ridders_derivative};
use plumbline::Scalar;

/// f(x) = eˣ / √(sin³x + cos³x) (Squire & Trapp 1998).
fn test_fn(x: f64) -> f64 {
    x.exp() / (x.sin().powi(3) + x.cos().powi(3)).sqrt()
}
/// f′(1.5), mpmath at 50 digits from f′ = f·(1 − g′/(2g)), g = sin³ + cos³.
const TEST_FN_DERIV: f64 = 4.053_427_893_898_620_657_714_187_925_6;

fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs()
}

/// Accuracy cap of f64 central differences on the published function,
/// relative to |f′|, independent of the scheme's own error bar. Source:
/// measured against the mpmath value of f′(1.5) on a decade grid of steps:
/// the best central difference is 1.35e-10 at h = 1e-5; the scheme's own
/// step, ε^(1/3)·max(|x|, 1) = 9.1e-6 at x = 1.5, is within 10% of it, so
/// its truncation error h²|f‴|/6 is too. Cap: 1.35e-10 plus 10%.
const CENTRAL_CAP_PUBLISHED: f64 = 1.5e-10;

/// Accuracy cap of f64 central differences on smooth O(1) functions,
/// relative to max(|f′|, |f|) (differences of f carry absolute rounding
/// ~ε|f|). Common practice: central differences in f64 reach about 1e-10
/// relative (the error model h²|f‴|/6 + ε|f|/h gives a best of ~ε^(2/3) =
/// 3.7e-11).
const CENTRAL_CAP: f64 = 1e-10;

/// Accuracy cap of Ridders' method in f64, relative to max(|f′|, |f|).
/// Common practice: 1e-13 to 1e-16 relative. Cap: 1e-12.
const RIDDERS_CAP: f64 = 1e-12;

/// The third derivative of the published function at 1.5, f‴(1.5) =
/// 32.16790451368894089325457 (computed with mpmath at 40 digits).
const TEST_FN_THIRD: f64 = 32.167_904_513_688_940_893;

#[test]
fn central_difference_on_the_published_test_function() {
    let d = central_difference(test_fn, 1.5);
    let err = (d.value - TEST_FN_DERIV).abs();
    let r = rel(d.value, TEST_FN_DERIV);
    println!(
        "central: rel {r:e}, error bar {:e} ({}x the true error)",
        d.error,
        d.error / err
    );
    // 1. An accuracy cap from the method, not from the scheme's own bar.
    assert!(r <= CENTRAL_CAP_PUBLISHED, "rel {r:e} above the cap");
    // The same from the error model (common practice): truncation
    // h²|f‴|/6 at the documented step h = ε^(1/3)·1.5, plus rounding of a
    // few ulps of f over h (each term is ≈ 4.4e-10 here).
    let h = f64::EPSILON.cbrt() * 1.5;
    let model = h * h * TEST_FN_THIRD / 6.0 + 4.0 * f64::EPSILON * test_fn(1.5) / h;
    assert!(
        err <= model,
        "error {err:e} above the error model {model:e}"
    );
    // 2. Its error bar must cover the true error.
    assert!(err <= d.error, "{d:?}");
    assert_eq!(d.evals, 4);
}

#[test]
fn ridders_on_the_published_test_function() {
    for h0 in [0.1, 0.5] {
        let d = ridders_derivative(test_fn, 1.5, h0);
        let r = rel(d.value, TEST_FN_DERIV);
        assert!(r <= RIDDERS_CAP, "h0 {h0}: rel {r}");
        assert!(
            abs_diff_eq!(d.value, TEST_FN_DERIV, epsilon = d.error),
            "h0 {h0}: {d:?}"
        );
        // 4 evaluations for the small-step check, at most 8 for finer
        // checks, at most 20 for the extrapolation.
        assert!(d.evals <= 32, "{d:?}");
    }
}

fn logistic<T: Scalar>(x: T) -> T {
    T::one() / (T::one() + (-x).exp())
}
fn softplus<T: Scalar>(x: T) -> T {
    (T::one() + x.exp()).ln()
}

/// (x, erf′(x)) — DLMF 7.10.1 with n = 0: erf′(z) = (2/√π) e^(−z²).
const ERF_DERIV: [(f64, f64); 6] = [
    (-2.0, 0.020_666_985_354_092_053_857),
    (-0.5, 0.878_782_578_935_444_794_09),
    (0.0, 1.128_379_167_095_512_573_9),
    (0.5, 0.878_782_578_935_444_794_09),
    (1.0, 0.415_107_497_420_594_703_34),
    (3.0, 0.000_139_253_051_946_747_853_89),
];
/// (x, tanh′(x)) — DLMF 4.34.3 (tanh′ = sech²) with 4.35.12 (sech² = 1 − tanh²).
const TANH_DERIV: [(f64, f64); 6] = [
    (-2.0, 0.070_650_824_853_164_465_686),
    (-0.5, 0.786_447_732_965_927_410_15),
    (0.0, 1.0),
    (0.5, 0.786_447_732_965_927_410_15),
    (1.0, 0.419_974_341_614_026_069_39),
    (3.0, 0.009_866_037_165_440_191_273_2),
];
/// (x, σ′(x)) — σ = ½(1 + tanh(x/2)) from DLMF 4.28.1–4.28.4, so σ′ = σ(1 − σ).
const LOGISTIC_DERIV: [(f64, f64); 6] = [
    (-2.0, 0.104_993_585_403_506_517_35),
    (-0.5, 0.235_003_712_201_594_489_07),
    (0.0, 0.25),
    (0.5, 0.235_003_712_201_594_489_07),
    (1.0, 0.196_611_933_241_481_852_54),
    (3.0, 0.045_176_659_730_912_132_649),
];
/// (x, softplus′(x)) — softplus′ = σ (derived identity, common practice).
const SOFTPLUS_DERIV: [(f64, f64); 6] = [
    (-2.0, 0.119_202_922_022_117_555_94),
    (-0.5, 0.377_540_668_798_145_435_36),
    (0.0, 0.5),
    (0.5, 0.622_459_331_201_854_564_64),
    (1.0, 0.731_058_578_630_004_879_25),
    (3.0, 0.952_574_126_822_433_219_12),
];

#[test]
fn handbook_derivatives_through_central_and_ridders() {
    type Case = (&'static str, fn(f64) -> f64, &'static [(f64, f64)]);
    let cases: [Case; 4] = [
        ("erf", Scalar::erf, &ERF_DERIV),
        ("tanh", f64::tanh, &TANH_DERIV),
        ("logistic", logistic::<f64>, &LOGISTIC_DERIV),
        ("softplus", softplus::<f64>, &SOFTPLUS_DERIV),
    ];
    for (name, f, table) in cases {
        for &(x, want) in table {
            // Differences of f carry absolute rounding ~ε|f|, so the error is
            // judged against the larger of |f′| and |f| (erf′(3) ≈ 1.4e-4
            // while erf(3) ≈ 1).
            let scale = want.abs().max(f(x).abs());
            let c = central_difference(f, x);
            let err = (c.value - want).abs();
            // 1. The cap from the method's theory, whatever the bar says.
            assert!(
                err <= CENTRAL_CAP * scale,
                "{name}'({x}) central: {} vs {want}: {:e} relative, above the cap",
                c.value,
                err / scale
            );
            // 2. The reported error bar covers the true error. (At x = 0 for
            // the odd functions erf and tanh the error is pure truncation,
            // which the spread against 2h estimates almost exactly: the bar
            // was 1.00007 times the true error when this was written.)
            assert!(
                err <= c.error,
                "{name}'({x}) central: error bar {:e} below the true error {err:e}",
                c.error
            );
            let r = ridders_derivative(f, x, 0.1);
            let err = (r.value - want).abs();
            assert!(
                err <= RIDDERS_CAP * scale,
                "{name}'({x}) ridders: {} vs {want}",
                r.value
            );
            assert!(err <= r.error, "{name}'({x}) ridders error bar {r:?}");
        }
    }
}

#[test]
fn kink_test_separates_kinks_from_smooth_points() {
    // Kinks: |x| at 0, ReLU at 0, max(x, 0.3) at 0.3 (one-sided slopes −1/1, 0/1, 0/1).
    let k = one_sided_derivatives(f64::abs, 0.0, 1e-3).unwrap();
    assert_abs_diff_eq!(k.left, -1.0, epsilon = 1e-9);
    assert_abs_diff_eq!(k.right, 1.0, epsilon = 1e-9);
    let k = one_sided_derivatives(|x: f64| x.max(0.0), 0.0, 1e-3).unwrap();
    assert_abs_diff_eq!(k.left, 0.0, epsilon = 1e-9);
    assert_abs_diff_eq!(k.right, 1.0, epsilon = 1e-9);
    assert!(k.at_point);
    assert!(one_sided_derivatives(|x: f64| x.max(0.3), 0.3, 1e-3).is_some());
    // Smooth: tanh at 0.5 and 0, exp at 3, x² at 0, sin(50x) at 0.1, x|x| at 0.
    for (f, x) in [
        (f64::tanh as fn(f64) -> f64, 0.5),
        (f64::tanh, 0.0),
        (f64::exp, 3.0),
        (|x: f64| x * x, 0.0),
        (|x: f64| (50.0 * x).sin(), 0.1),
        (|x: f64| x * x.abs(), 0.0),
    ] {
        assert!(
            one_sided_derivatives(f, x, 1e-3).is_none(),
            "false kink at {x}"
        );
    }
}

#[test]
fn nan_never_passes_as_a_derivative() {
    let d = central_difference(|x: f64| if x > 1.0 { f64::NAN } else { x }, 1.0);
    assert!(d.value.is_nan() || d.error.is_nan() || d.error.is_infinite());
}

#[test]
fn kink_test_reports_slopes_noise_and_where_the_kink_lies() {
    // One-sided slopes from the definitions (common practice): |x| at 0 is
    // −1 / +1; max(x, 0.3) is 0 / 1 at 0.3.
    let k = one_sided_derivatives(f64::abs, 0.0, 1e-3).unwrap();
    assert!(k.at_point && k.noise < 1e-9, "{k:?}");
    // Orchard frost: damage grows as max(0.3 − t, 0) below 0.3 °C of
    // margin. Probed at 0.29 with h = 0.02, the kink at 0.3 lies within h
    // but beyond h/4: reported, but not at the point, with the slopes over
    // ±h/4 (both −1: damage falls one for one as the margin grows).
    let frost = |t: f64| (0.3 - t).max(0.0);
    let k = one_sided_derivatives(frost, 0.29, 0.02).unwrap();
    assert!(!k.at_point, "{k:?}");
    assert!(
        abs_diff_eq!(k.left, -1.0, epsilon = 1e-9) && abs_diff_eq!(k.right, -1.0, epsilon = 1e-9),
        "{k:?}"
    );
    // At the kink itself: −1 from the left, 0 from the right.
    let k = one_sided_derivatives(frost, 0.3, 0.02).unwrap();
    assert!(k.at_point, "{k:?}");
    assert!(
        abs_diff_eq!(k.left, -1.0, epsilon = 1e-9) && abs_diff_eq!(k.right, 0.0, epsilon = 1e-9),
        "{k:?}"
    );
}

#[test]
fn a_kink_under_strong_curvature_is_still_found() {
    // 1e-4·|x| + 1000·x²: over ±1e-3 the curvature term (2 per unit step)
    // dwarfs the jump of the slope (2e-4), so the gaps shrink like a smooth
    // function's. Extrapolated one-sided slopes (4·D(s/4) − D(s))/3 cancel
    // the curvature exactly and leave ∓1e-4 (worked by hand).
    let f = |x: f64| 1e-4 * x.abs() + 1000.0 * x * x;
    let k = one_sided_derivatives(f, 0.0, 1e-3).unwrap();
    assert!(k.at_point, "{k:?}");
    assert!(
        abs_diff_eq!(k.left, -1e-4, epsilon = 1e-9) && abs_diff_eq!(k.right, 1e-4, epsilon = 1e-9),
        "{k:?}"
    );
    // The same curvature without the kink: smooth.
    assert!(one_sided_derivatives(|x: f64| 1000.0 * x * x, 0.0, 1e-3).is_none());
}
