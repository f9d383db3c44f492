//! The complex-step scalar against outside reference values.
//!
//! Every check value carries its source. Digits marked "mpmath at 40
//! digits" (or 50) were computed with mpmath 1.3 at that working precision
//! from the closed form named beside them.

// Reference values are quoted with the digits of their source, and some of
// them happen to equal library constants (2/√π, ln 2): both lints would have
// us rewrite the oracle.
#![allow(clippy::excessive_precision, clippy::approx_constant)]

use approx::abs_diff_eq;
use num_traits::{Float, FloatConst, NumCast, ToPrimitive};
use plumbline::scalar::{complex_step_derivative, ComplexStep};
use plumbline::Scalar;

/// Distance from `got` to `want` in units of the f64 spacing at `want`.
fn ulps64(got: f64, want: f64) -> f64 {
    let w = want.abs();
    let spacing = if w == 0.0 {
        f64::MIN_POSITIVE
    } else {
        f64::from_bits(w.to_bits() + 1) - w
    };
    (got - want).abs() / spacing
}

/// Distance from `got` to `want` in units of the f32 spacing at `want`.
fn ulps32(got: f32, want: f32) -> f32 {
    let w = want.abs();
    let spacing = f32::from_bits(w.to_bits() + 1) - w;
    (got - want).abs() / spacing
}

fn c<T: Scalar>(x: f64) -> T {
    <T as NumCast>::from(x).unwrap()
}

/// d/dx at `x` by one complex evaluation with the default step.
fn cs<F: Fn(ComplexStep<f64>) -> ComplexStep<f64>>(f: F, x: f64) -> f64 {
    complex_step_derivative(f, x, ComplexStep::<f64>::default_step())
}

/// The complex-step derivative with an explicit (possibly negative) step.
fn cs_with<F: Fn(ComplexStep<f64>) -> ComplexStep<f64>>(f: F, x: f64, h: f64) -> f64 {
    complex_step_derivative(f, x, h)
}

// ------------------------------------------------- 1. published test function

/// f(x) = eˣ / √(sin³x + cos³x): the numerical example of Squire & Trapp,
/// SIAM Review 40(1):110–112, 1998, reused by Martins, Sturdza & Alonso,
/// ACM TOMS 29(3):245–262, 2003.
fn squire_trapp<T: Scalar>(x: T) -> T {
    x.exp() / (x.sin().powi(3) + x.cos().powi(3)).sqrt()
}

// f'(1.5) from the closed form f·(1 − g'/(2g)), g = sin³x + cos³x,
// computed with mpmath at 50 digits (agrees with mpmath.diff).
const ST_DERIV: f64 = 4.05342789389862065771418792561;
// f(1.5), mpmath at 50 digits.
const ST_VALUE: f64 = 4.4977800539461619502517700722828657;

#[test]
fn published_function_f64_every_step() {
    for h in [1e-8, 1e-10, 1e-20, 1e-50, 1e-100, 1e-200, 1e-300] {
        let y = squire_trapp(ComplexStep::seeded(1.5_f64, h));
        let d = y.derivative(h);
        let e = ulps64(d, ST_DERIV);
        println!("f64 h = {h:e}: f' = {d:.17e}, error {e} ulp");
        assert!(e <= 4.0, "h = {h:e}: {d} is {e} ulp from {ST_DERIV}");
        assert!(ulps64(y.value(), ST_VALUE) <= 4.0, "value at h = {h:e}");
    }
    // The generic code on plain f64 gives the value (same oracle).
    assert!(ulps64(squire_trapp(1.5_f64), ST_VALUE) <= 4.0);
}

#[test]
fn published_function_f32_every_step() {
    let want = ST_DERIV as f32; // 4.0534277 (f32 rounding of the 50-digit value)
    for h in [1e-4_f32, 1e-6, 1e-8, 1e-10, 1e-15, 1e-20, 1e-25, 1e-30] {
        let d = complex_step_derivative(squire_trapp, 1.5_f32, h);
        let e = ulps32(d, want);
        println!("f32 h = {h:e}: f' = {d:e}, error {e} ulp");
        assert!(e <= 4.0, "h = {h:e}: {d} is {e} ulp from {want}");
    }
}

/// Pitfall, pinned: a subnormal imaginary part loses digits.
#[test]
fn subnormal_step_degrades() {
    let d = complex_step_derivative(squire_trapp, 1.5_f64, 1e-320);
    let rel = (d - ST_DERIV).abs() / ST_DERIV;
    println!("f64 h = 1e-320: relative error {rel:e}");
    assert!(rel > 1e-8, "expected visible degradation, got {rel:e}");
    assert!(rel < 1e-2);
}

// ----------------------------------------------- 2. handbook derivative tables

fn sigmoid<T: Scalar>(x: T) -> T {
    T::one() / (T::one() + (-x).exp())
}

fn softplus<T: Scalar>(x: T) -> T {
    x.exp().ln_1p()
}

/// Exact GELU x·Φ(x), Φ(x) = ½[1 + erf(x/√2)] (A&S 26.2.29; erf as in
/// DLMF 7.2.1).
fn gelu<T: Scalar>(x: T) -> T {
    let half: T = c(0.5);
    half * x * (T::one() + (x * c::<T>(std::f64::consts::FRAC_1_SQRT_2)).erf())
}

const XS: [f64; 6] = [-2.0, -0.5, 0.0, 0.5, 1.0, 3.0];

/// Checks value (plain f64) and derivative (complex step) of `f` at `XS`.
fn check_table(
    name: &str,
    f64_fn: fn(f64) -> f64,
    cs_fn: fn(ComplexStep<f64>) -> ComplexStep<f64>,
    values: [f64; 6],
    derivs: [f64; 6],
    tol_ulp: f64,
) {
    for ((&x, &v), &dv) in XS.iter().zip(&values).zip(&derivs) {
        let got_v = f64_fn(x);
        let got_d = cs(cs_fn, x);
        let (ev, ed) = (ulps64(got_v, v), ulps64(got_d, dv));
        println!("{name} x = {x}: value {ev} ulp, derivative {ed} ulp");
        assert!(ev <= tol_ulp, "{name}({x}) = {got_v}, want {v} ({ev} ulp)");
        assert!(
            ed <= tol_ulp,
            "{name}'({x}) = {got_d}, want {dv} ({ed} ulp)"
        );
    }
}

#[test]
fn erf_derivative_dlmf_7_10_1() {
    // erf: DLMF 7.2.1; erf'(x) = (2/√π) e^(−x²): DLMF 7.10.1.
    // Values computed with mpmath at 40 digits.
    let values = [
        -0.99532226501895273416,
        -0.52049987781304653768,
        0.0,
        0.52049987781304653768,
        0.84270079294971486934,
        0.99997790950300141456,
    ];
    let derivs = [
        0.020666985354092053857,
        0.87878257893544479409,
        1.1283791670955125739, // 2/√π
        0.87878257893544479409,
        0.41510749742059470334,
        0.00013925305194674785389,
    ];
    check_table("erf", Scalar::erf, Scalar::erf, values, derivs, 4.0);
}

#[test]
fn tanh_derivative_dlmf_4_34_3() {
    // tanh = sinh/cosh: DLMF 4.28.4; tanh' = sech² = 1 − tanh²: DLMF 4.34.3
    // with 4.35.12. Values computed with mpmath at 40 digits.
    let values = [
        -0.96402758007581688395,
        -0.4621171572600097585,
        0.0,
        0.4621171572600097585,
        0.76159415595576488812,
        0.99505475368673045133,
    ];
    let derivs = [
        0.070650824853164465686,
        0.78644773296592741015,
        1.0,
        0.78644773296592741015,
        0.41997434161402606939,
        0.0098660371654401912732,
    ];
    check_table("tanh", |x| x.tanh(), |x| x.tanh(), values, derivs, 4.0);
}

#[test]
fn logistic_derivative() {
    // σ(x) = 1/(1 + e^(−x)) = ½(1 + tanh(x/2)) (from DLMF 4.28.1–4.28.4);
    // σ' = σ(1 − σ). Values computed with mpmath at 40 digits.
    let values = [
        0.11920292202211755594,
        0.37754066879814543536,
        0.5,
        0.62245933120185456464,
        0.73105857863000487925,
        0.95257412682243321912,
    ];
    let derivs = [
        0.10499358540350651735,
        0.23500371220159448907,
        0.25,
        0.23500371220159448907,
        0.19661193324148185254,
        0.045176659730912132649,
    ];
    check_table("sigmoid", sigmoid, sigmoid, values, derivs, 4.0);
}

#[test]
fn softplus_derivative_is_logistic() {
    // softplus(x) = ln(1 + eˣ); softplus' = σ (derived from DLMF 4.28.1–4.28.4).
    // Values computed with mpmath at 40 digits.
    let values = [
        0.12692801104297249644,
        0.47407698418010668087,
        0.69314718055994530942,
        0.97407698418010668087,
        1.313261687518222834,
        3.0485873515737420588,
    ];
    let derivs = [
        0.11920292202211755594,
        0.37754066879814543536,
        0.5,
        0.62245933120185456464,
        0.73105857863000487925,
        0.95257412682243321912,
    ];
    check_table("softplus", softplus, softplus, values, derivs, 4.0);
}

#[test]
fn exact_gelu_derivative() {
    // GELU(x) = xΦ(x), Φ(x) = ½[1 + erf(x/√2)] (A&S 26.2.29, DLMF 7.2.1);
    // GELU' = Φ(x) + xφ(x), φ(x) = e^(−x²/2)/√(2π).
    // Values computed with mpmath at 40 digits.
    let values = [
        -0.045500263896358414401,
        -0.15426876936299344818,
        0.0,
        0.34573123063700655182,
        0.84134474606854294859,
        2.9959503059051097164,
    ];
    let derivs = [
        -0.085231801078196896701,
        0.13250487534383715747,
        0.5,
        0.86749512465616284253,
        1.0833154705876862984,
        1.011945647204183927,
    ];
    check_table("gelu", gelu, gelu, values, derivs, 4.0);
}

// ------------------------------------------------- 3. conventions and pitfalls

const H: f64 = 1e-20;

#[test]
fn abs_is_sign_convention_not_modulus() {
    // d|x|/dx = sign x; Martins et al. 2003 convention abs(z) = ±z.
    assert_eq!(cs(|x| x.abs(), -2.0), -1.0);
    assert_eq!(cs(|x| x.abs(), 2.0), 1.0);
    // One-sided at the kink, by the sign of the step: left-hand −1 with
    // h > 0, right-hand +1 with h < 0.
    assert_eq!(cs(|x| x.abs(), 0.0), -1.0);
    assert_eq!(cs_with(|x| x.abs(), 0.0, -H), 1.0);
    // The modulus would lose it: |−2 + ih| = 2 exactly in f64.
    let z = ComplexStep::seeded(-2.0_f64, H);
    assert_eq!(z.re.hypot(z.im), 2.0);
}

#[test]
fn max_min_return_whole_argument_and_break_ties_by_the_step() {
    let one = ComplexStep::real(1.0_f64);
    // max(x, 1): x wins above 1, the constant below.
    assert_eq!(cs(|x| x.max(one), 2.0), 1.0);
    assert_eq!(cs(|x| x.max(one), 0.5), 0.0);
    // At an exact tie the argument the real function would pick at x − h
    // wins: with h > 0 the left-hand derivative (0 for max(x, 1), 1 for
    // min(x, 1)), with h < 0 the right-hand one, whatever the order of the
    // arguments (one-sided derivatives of max and min: common practice).
    assert_eq!(cs(|x| x.max(one), 1.0), 0.0);
    assert_eq!(cs(|x| one.max(x), 1.0), 0.0);
    assert_eq!(cs(|x| x.min(one), 1.0), 1.0);
    assert_eq!(cs(|x| one.min(x), 1.0), 1.0);
    assert_eq!(cs_with(|x| x.max(one), 1.0, -H), 1.0);
    assert_eq!(cs_with(|x| one.min(x), 1.0, -H), 0.0);
    assert_eq!(cs(|x| x.min(one), 0.0), 1.0);
    // ReLU written with max: left-hand 0 and right-hand 1 at the kink.
    let zero = ComplexStep::real(0.0_f64);
    assert_eq!(cs(|x| x.max(zero), 0.0), 0.0);
    assert_eq!(cs_with(|x| x.max(zero), 0.0, -H), 1.0);
    assert_eq!(cs(|x| x.max(zero), 0.5), 1.0);
    // Two seeded values that tie: max(x, 2x − 1) at x = 1 has left-hand
    // slope 1 and right-hand slope 2.
    let two = ComplexStep::real(2.0_f64);
    assert_eq!(cs(|x| x.max(two * x - one), 1.0), 1.0);
    assert_eq!(cs_with(|x| x.max(two * x - one), 1.0, -H), 2.0);
}

#[test]
fn inverse_trig_by_value_derivative_rule() {
    // asin'(x) = 1/√(1 − x²), acos' = −asin', atan'(x) = 1/(1 + x²) at
    // x = 0.5: ±1/√0.75 = ±1.1547005383792515290 (mpmath at 40 digits),
    // 1/1.25 = 0.8. A logarithmic complex formula gives 0 here.
    let asin = cs(|x| x.asin(), 0.5);
    let acos = cs(|x| x.acos(), 0.5);
    let atan = cs(|x| x.atan(), 0.5);
    println!("asin' {asin:e} acos' {acos:e} atan' {atan:e}");
    assert!(ulps64(asin, 1.1547005383792515290) <= 2.0, "{asin}");
    assert!(ulps64(acos, -1.1547005383792515290) <= 2.0, "{acos}");
    assert!(ulps64(atan, 0.8) <= 2.0, "{atan}");
    // atan2(y, x) with y = seeded, x = 2: ∂/∂y = x/(x² + y²) = 2/5 at y = 1.
    let two = ComplexStep::real(2.0_f64);
    assert!(ulps64(cs(|y| y.atan2(two), 1.0), 0.4) <= 2.0);
    // ∂/∂x atan2(1, x) = −y/(x² + y²) = −1/5 at x = 2.
    let one = ComplexStep::real(1.0_f64);
    assert!(ulps64(cs(|x| one.atan2(x), 2.0), -0.2) <= 2.0);
}

#[test]
fn powers_with_negative_base() {
    // d/dx x³ = 3x² = 12 at x = −2. exp(3 ln z) would cross the branch cut.
    let three = ComplexStep::real(3.0_f64);
    let d = cs(|x| x.powf(three), -2.0);
    assert!(ulps64(d, 12.0) <= 2.0, "{d}");
    assert_eq!(cs(|x| x.powi(3), -2.0), 12.0);
    // x^(−2) at −2: −2x^(−3) = 0.25.
    assert!(ulps64(cs(|x| x.powi(-2), -2.0), 0.25) <= 2.0);
    // Positive base through exp(p ln z): d/dx x^1.5 = 1.5√x = 3 at x = 4.
    let p = ComplexStep::real(1.5_f64);
    assert!(ulps64(cs(|x| x.powf(p), 4.0), 3.0) <= 2.0);
    // Exponent seeded: d/dp 2^p = 2^p ln 2 = 8 ln 2 at p = 3.
    let two = ComplexStep::real(2.0_f64);
    let want = 8.0 * std::f64::consts::LN_2;
    assert!(ulps64(cs(|q| two.powf(q), 3.0), want) <= 2.0);
}

#[test]
fn elementary_analytic_functions() {
    // √x at 4: 1/(2√4) = 0.25. ln x at 2: 1/2.
    assert_eq!(cs(|x| x.sqrt(), 4.0), 0.25);
    assert_eq!(cs(|x| x.ln(), 2.0), 0.5);
    // log2' = 1/(x ln 2), log10' = 1/(x ln 10), at x = 2.
    assert!(ulps64(cs(|x| x.log2(), 2.0), 0.5 / std::f64::consts::LN_2) <= 2.0);
    assert!(ulps64(cs(|x| x.log10(), 2.0), 0.5 / std::f64::consts::LN_10) <= 2.0);
    // cbrt' = 1/(3 x^(2/3)): 1/12 at x = ±8.
    assert!(ulps64(cs(|x| x.cbrt(), 8.0), 1.0 / 12.0) <= 2.0);
    assert!(ulps64(cs(|x| x.cbrt(), -8.0), 1.0 / 12.0) <= 2.0);
    // tan' = 1/cos², exp_m1' = eˣ, ln_1p' = 1/(1 + x), hypot(x, 4)' = x/5.
    let t = cs(|x| x.tan(), 1.0);
    assert!(ulps64(t, 1.0 / 1.0_f64.cos().powi(2)) <= 4.0, "{t}");
    assert!(ulps64(cs(|x| x.exp_m1(), 1e-3), 1e-3_f64.exp()) <= 2.0);
    assert!(ulps64(cs(|x| x.ln_1p(), 0.5), 1.0 / 1.5) <= 2.0);
    let four = ComplexStep::real(4.0_f64);
    assert!(ulps64(cs(|x| x.hypot(four), -3.0), -0.6) <= 2.0);
    // Division never forms |y|²: d/dx (1e300/x) = −1e300/x² = −1e-100 at
    // x = 1e200, although x² overflows.
    let a = ComplexStep::real(1e300_f64);
    let d = cs(|x| a / x, 1e200);
    assert!(ulps64(d, -1e-100) <= 2.0, "{d:e}");
}

#[test]
fn comparisons_use_real_part() {
    let a = ComplexStep::new(1.0_f64, 5.0);
    let b = ComplexStep::new(1.0_f64, -5.0);
    assert!(a == b);
    assert_eq!(a.partial_cmp(&b), Some(std::cmp::Ordering::Equal));
    assert!(ComplexStep::new(0.5_f64, 9.0) < ComplexStep::new(1.0_f64, -9.0));
    assert!(num_traits::Zero::is_zero(&ComplexStep::new(0.0_f64, 1e-20)));
    // Rounding decides on the real part and has derivative 0; fract keeps it.
    let z = ComplexStep::seeded(2.5_f64, H);
    assert_eq!((z.floor().re, z.floor().im), (2.0, 0.0));
    assert_eq!(z.round().im, 0.0);
    assert_eq!(z.signum(), ComplexStep::real(1.0));
    assert_eq!(z.fract().derivative(H), 1.0);
}

#[test]
fn nan_in_either_part_is_nan() {
    assert!(ComplexStep::new(f64::NAN, 0.0).is_nan());
    assert!(ComplexStep::new(1.0, f64::NAN).is_nan());
    assert!(!ComplexStep::new(1.0, f64::NAN).is_finite());
    assert!(!ComplexStep::new(1.0, f64::INFINITY).is_finite());
    assert!(ComplexStep::new(1.0, f64::INFINITY).is_infinite());
    assert!(ComplexStep::new(1.0_f64, 1e-20).is_finite());
    // A −∞ mask times a constant leaves no NaN in the derivative part.
    let masked = ComplexStep::real(f64::NEG_INFINITY) * ComplexStep::real(2.0);
    assert!(!masked.is_nan());
    assert_eq!(masked.exp().re, 0.0);
}

#[test]
fn conversion_to_primitive_drops_derivative() {
    // Documented behaviour: a cast mid-computation silently loses the step.
    let f = |x: ComplexStep<f64>| {
        let y = x * x;
        ComplexStep::real(y.to_f64().unwrap())
    };
    assert_eq!(cs(f, 3.0), 0.0);
    assert_eq!(cs(|x| x * x, 3.0), 6.0);
    let z = ComplexStep::new(2.5_f32, 1e-10);
    assert_eq!(z.to_f32(), Some(2.5));
    assert_eq!(z.to_i32(), Some(2));
    let n: ComplexStep<f64> = NumCast::from(7_u8).unwrap();
    assert_eq!((n.re, n.im), (7.0, 0.0));
}

#[test]
fn display() {
    assert_eq!(ComplexStep::new(1.5_f64, 2e-20).to_string(), "1.5+2e-20i");
    assert_eq!(ComplexStep::new(1.5_f64, -2e-20).to_string(), "1.5-2e-20i");
    assert_eq!(ComplexStep::new(0.1_f32, 1e-10).to_string(), "0.1+1e-10i");
}

// ------------------------------------------ 4. a layer-like vector function

/// Softmax over logits, max-shifted (the shift goes through `max`).
fn softmax<T: Scalar>(z: &[T]) -> Vec<T> {
    let m = z.iter().copied().fold(T::neg_infinity(), T::max);
    let e: Vec<T> = z.iter().map(|&v| (v - m).exp()).collect();
    let s: T = e.iter().copied().sum();
    e.into_iter().map(|v| v / s).collect()
}

/// log Σ eᶻ, max-shifted.
fn logsumexp<T: Scalar>(z: &[T]) -> T {
    let m = z.iter().copied().fold(T::neg_infinity(), T::max);
    m + z.iter().map(|&v| (v - m).exp()).sum::<T>().ln()
}

/// Im F(x + ihv)/h = J v.
fn jvp(f: impl Fn(&[ComplexStep<f64>]) -> Vec<ComplexStep<f64>>, x: &[f64], v: &[f64]) -> Vec<f64> {
    let z: Vec<_> = x
        .iter()
        .zip(v)
        .map(|(&xi, &vi)| ComplexStep::new(xi, H * vi))
        .collect();
    f(&z).into_iter().map(|y| y.derivative(H)).collect()
}

#[test]
fn softmax_and_logsumexp_vector_oracles() {
    let z = [1.0, 2.0, 3.0];
    // ∇LSE = softmax(z) at z = (1, 2, 3), mpmath at 40 digits.
    let s_ref = [
        0.090030573170380457998,
        0.24472847105479765247,
        0.66524095577482188953,
    ];
    for (j, &want) in s_ref.iter().enumerate() {
        let mut v = [0.0; 3];
        v[j] = 1.0;
        let g = jvp(|z| vec![logsumexp(z)], &z, &v)[0];
        assert!(ulps64(g, want) <= 4.0, "dLSE/dz{j} = {g}, want {want}");
        assert!(ulps64(softmax(&z)[j], want) <= 4.0);
    }
    // Softmax VJP with g = (0.3, −0.1, 0.5): (Jᵀg)ⱼ = sⱼ(gⱼ − ⟨g, s⟩),
    // mpmath at 40 digits. J = diag(s) − s sᵀ is symmetric, so the JVP along
    // g from the complex step equals the VJP.
    let g = [0.3, -0.1, 0.5];
    let vjp_ref = [
        -0.0031651871008940680684,
        -0.10649525900195237283,
        0.1096604461028464409,
    ];
    let got = jvp(softmax, &z, &g);
    let scale = vjp_ref.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
    for (gj, want) in got.iter().zip(vjp_ref) {
        // Component 0 cancels (gⱼ ≈ ⟨g, s⟩), so measure against the norm.
        let err = (gj - want).abs() / (scale * f64::EPSILON);
        println!("softmax JVP: {gj:e} vs {want:e}: {err} eps·‖v‖∞");
        assert!(err <= 4.0, "{gj} vs {want}");
    }
}

#[test]
fn constants_and_generic_use() {
    // FloatConst and NumCast give real constants with zero derivative.
    let pi = ComplexStep::<f64>::PI();
    assert_eq!((pi.re, pi.im), (std::f64::consts::PI, 0.0));
    assert_eq!(ComplexStep::<f32>::epsilon().re, f32::EPSILON);
    // sin' = cos at π/3 = 0.5.
    assert!(ulps64(cs(|x| x.sin(), std::f64::consts::FRAC_PI_3), 0.5) <= 4.0);
}

// ------------------------------- 5. rules no other test reaches (review)
//
// Each value below is the closed-form derivative evaluated with mpmath 1.3
// at 40 significant digits (printed to 21) at the exact binary value of the
// argument (`mpf(0.7)` is the double nearest 0.7), and cross-checked
// against `mpmath.diff` of the function itself (agreement to 1e-35 or
// better; for erf and tanh at large arguments with 420 digits, since the
// difference of erf(x) ≈ 1 needs them).

/// Checks the complex-step derivative of `f` at each `(x, want)` within
/// `tol` f64 ulps of `want`.
fn within_ulps(
    name: &str,
    f: impl Fn(ComplexStep<f64>) -> ComplexStep<f64>,
    cases: &[(f64, f64)],
    tol: f64,
) {
    for &(x, want) in cases {
        let got = cs(&f, x);
        let e = ulps64(got, want);
        println!("{name}'({x}) = {got:e}: {e} ulp from {want:e}");
        assert!(e <= tol, "{name}'({x}) = {got:e}, want {want:e} ({e} ulp)");
    }
}

#[test]
fn hyperbolic_sine_and_cosine_dlmf_4_34() {
    // sinh′ = cosh, cosh′ = sinh (DLMF §4.34; equation numbers 4.34.1 and
    // 4.34.2 from memory). sinh(a + ib) = sinh a cos b + i cosh a sin b: the
    // imaginary part is a product, no cancellation, so a few ulps.
    within_ulps(
        "sinh",
        |x| x.sinh(),
        &[
            (0.7, 1.25516900563094298448),
            (-2.5, 6.13228947966368611662),
        ],
        2.0,
    );
    within_ulps(
        "cosh",
        |x| x.cosh(),
        &[
            (0.7, 0.758583701839533447719),
            (-2.5, -6.05020448103978732145),
        ],
        2.0,
    );
    // cosh′(0) = sinh 0 = 0 exactly: the derivative of an even function.
    assert_eq!(cs(|x| x.cosh(), 0.0), 0.0);
}

#[test]
fn inverse_hyperbolic_by_value_derivative_rule_dlmf_4_38() {
    // DLMF §4.38(ii) (the section is confirmed; its equation numbers were
    // not read): asinh′ = (1 + x²)^(−1/2), acosh′ = (x² − 1)^(−1/2) for
    // x > 1, atanh′ = 1/(1 − x²) for |x| < 1.
    within_ulps(
        "asinh",
        |x| x.asinh(),
        &[
            (0.7, 0.819231920519040483662),
            (-3.0, 0.3162277660168379332),
        ],
        2.0,
    );
    within_ulps(
        "acosh",
        |x| x.acosh(),
        &[
            (1.5, 0.894427190999915878564),
            (10.0, 0.100503781525921207549),
        ],
        2.0,
    );
    // At −0.9 the factor (1 − x)(1 + x) takes one rounding for 1 − x = 1.9
    // (1 + x is exact by Sterbenz's lemma) and one for the product: a few
    // ulps.
    within_ulps(
        "atanh",
        |x| x.atanh(),
        &[
            (0.5, 1.33333333333333333333),
            (-0.9, 5.26315789473684321241),
        ],
        4.0,
    );
}

#[test]
fn exp2_log_base_and_recip() {
    // d/dx 2ˣ = 2ˣ ln 2 (from 2ˣ = e^(x ln 2), common practice).
    within_ulps(
        "exp2",
        |x| x.exp2(),
        &[
            (0.7, 1.12602091687476765997),
            (-3.5, 0.0612661339667841994821),
        ],
        4.0,
    );
    // log_b x = ln x / ln b (common practice): ∂/∂x = 1/(x ln b) at x = 3,
    // b = 5; ∂/∂b = −ln x/(b ln² b) at the same point (the base seeded).
    let five = ComplexStep::real(5.0_f64);
    within_ulps(
        "log(x, 5)",
        |x| x.log(five),
        &[(3.0, 0.207111644853203936902)],
        4.0,
    );
    let three = ComplexStep::real(3.0_f64);
    within_ulps(
        "log(3, b)",
        |b| three.log(b),
        &[(5.0, -0.0848254150361870651547)],
        4.0,
    );
    // d/dx 1/x = −1/x².
    within_ulps(
        "recip",
        |x| x.recip(),
        &[
            (0.7, -2.04081632653061250384),
            (-3.0, -0.111111111111111111111),
        ],
        2.0,
    );
}

#[test]
fn mul_add_carries_each_operand() {
    // x·a + b: ∂/∂x = a, ∂/∂a = x, ∂/∂b = 1 (exact calculus; the values are
    // exact binary fractions, so exact results are required).
    let (a, b) = (ComplexStep::real(0.375_f64), ComplexStep::real(-1.25_f64));
    let x = ComplexStep::real(2.5_f64);
    assert_eq!(cs(|x| x.mul_add(a, b), 2.5), 0.375);
    assert_eq!(cs(|a| x.mul_add(a, b), 0.375), 2.5);
    assert_eq!(cs(|b| x.mul_add(a, b), -1.25), 1.0);
    // x·x + b: 2x, both factors seeded at once.
    assert_eq!(cs(|x| x.mul_add(x, b), 2.5), 5.0);
    // The value keeps the fused rounding: 0.1·0.1 − 0.01 in one rounding
    // is the rounding error of fl(0.1·0.1), not 0.
    let t = ComplexStep::real(0.1_f64);
    let fused = t.mul_add(t, ComplexStep::real(-(0.1_f64 * 0.1)));
    assert_eq!(fused.re, 0.1_f64.mul_add(0.1, -(0.1 * 0.1)));
    assert_ne!(fused.re, 0.0);
}

#[test]
fn clamp_passes_the_derivative_of_the_selected_argument() {
    // clamp(x, lo, hi) is x inside [lo, hi] and the bound outside (Rust's
    // f64::clamp: "Returns max if self is greater than max, and min if self
    // is less than min. Otherwise this returns self", quoted from memory).
    // With the Martins et al. (2003) convention the whole selected argument
    // is returned, so its derivative comes along.
    let (lo, hi) = (ComplexStep::real(-1.0_f64), ComplexStep::real(2.0_f64));
    assert_eq!(cs(|x| x.clamp(lo, hi), 0.5), 1.0);
    assert_eq!(cs(|x| x.clamp(lo, hi), -3.0), 0.0);
    assert_eq!(cs(|x| x.clamp(lo, hi), 7.0), 0.0);
    // A seeded bound that is selected carries its derivative.
    let x = ComplexStep::real(-3.0_f64);
    assert_eq!(cs(|l| x.clamp(l, hi), -1.0), 1.0);
    let x = ComplexStep::real(7.0_f64);
    assert_eq!(cs(|h| x.clamp(lo, h), 2.0), 1.0);
    // At a bound the step decides, as for max and min: with h > 0 the
    // left-hand slopes, 1 at the upper bound and 0 at the lower one; with
    // h < 0 the right-hand ones, 0 and 1.
    assert_eq!(cs(|x| x.clamp(lo, hi), 2.0), 1.0);
    assert_eq!(cs(|x| x.clamp(lo, hi), -1.0), 0.0);
    assert_eq!(cs_with(|x| x.clamp(lo, hi), 2.0, -H), 0.0);
    assert_eq!(cs_with(|x| x.clamp(lo, hi), -1.0, -H), 1.0);
    // The value agrees with f64::clamp.
    for x in [-3.0, -1.0, 0.5, 2.0, 7.0] {
        assert_eq!(ComplexStep::real(x).clamp(lo, hi).re, x.clamp(-1.0, 2.0));
    }
}

/// Spacing between subnormal f64 numbers, 2^−1074.
const SUBNORMAL_SPACING: f64 = 4.940_656_458_412_465_4e-324;

#[test]
fn erf_derivative_at_large_arguments_dlmf_7_10_1() {
    // erf′(x) = (2/√π) e^(−x²) (DLMF 7.10.1, n = 0), mpmath 1.3 at 40 digits
    // (420 digits for the mpmath.diff cross-check).
    // At 5 and 10 the value is far above the subnormal range and so is
    // h·erf′ with h = 1e-20: a few ulps.
    within_ulps(
        "erf",
        |x| x.erf(),
        &[
            (5.0, 1.56708665310173353082e-11),
            (10.0, 4.19765623135441689009e-44),
        ],
        4.0,
    );
    // 10.3 is not a dyadic number, so x² is not exact in f64: rounding x²
    // (≈ 106.09) costs up to half its ulp, 7e-15, as a relative error of
    // e^(−x²) (up to ≈ 30 ulp). The rule splits x² exactly, so a few ulps
    // here too.
    let want = 9.50940784783604594157e-47;
    within_ulps("erf", |x| x.erf(), &[(10.3, want)], 4.0);
    // The check has teeth: the same formula with x² rounded is outside the
    // tolerance (15 ulp when this was written).
    let naive = std::f64::consts::FRAC_2_SQRT_PI * (-(10.3_f64 * 10.3)).exp();
    assert!(ulps64(naive, want) > 4.0, "{}", ulps64(naive, want));

    // At 26, e^(−676) ≈ 2.6e-294 does NOT underflow in f64 (the smallest
    // normal number is 2.2e-308 ≈ e^(−708.4)), so the right answer is the
    // normal number erf′(26) = 2.9470349932662695402e-294, not 0. But the
    // imaginary part h·erf′ with the default h = 1e-20 is ≈ 2.9e-314, which
    // is subnormal: it carries an absolute rounding of up to half the
    // subnormal spacing, 2^−1075, i.e. ≈ 2.5e-304 in the derivative after
    // dividing by h (8e-11 relative). So with the default step the result
    // must be within that quantum (plus a few ulps); with a step of 1e-10
    // h·erf′ ≈ 2.9e-304 is normal again and a few ulps are required.
    let want26: f64 = 2.9470349932662695402e-294;
    let d = cs(|x| x.erf(), 26.0);
    // (Half of 2^−1074 is not representable; halve after dividing by h.)
    let quantum = SUBNORMAL_SPACING / ComplexStep::<f64>::default_step() * 0.5;
    let spacing = f64::from_bits(want26.to_bits() + 1) - want26;
    println!(
        "erf'(26) with h = 1e-20: {d:e}, off by {:e} (quantum {quantum:e})",
        (d - want26).abs()
    );
    assert!(
        abs_diff_eq!(d, want26, epsilon = quantum + 4.0 * spacing),
        "erf'(26) = {d:e}, want {want26:e}"
    );
    assert!(d > 0.0, "erf'(26) is a normal number, not 0");
    let d = complex_step_derivative(|x: ComplexStep<f64>| x.erf(), 26.0, 1e-10);
    assert!(
        ulps64(d, want26) <= 4.0,
        "erf'(26) with h = 1e-10 = {d:e}, {} ulp from {want26:e}",
        ulps64(d, want26)
    );

    // At 28, erf′(28) = 3.67774189592733417324e-341 is below half the
    // smallest subnormal (2^−1075 ≈ 2.5e-324): its correctly rounded f64
    // value is 0, and 0 (not NaN, not a stray subnormal) is required.
    assert_eq!(cs(|x| x.erf(), 28.0), 0.0);
    assert_eq!(cs(|x| x.erf(), -28.0), 0.0);
}

#[test]
fn tanh_derivative_in_saturation_dlmf_4_34_3() {
    // tanh′ = sech² (DLMF 4.34.3), mpmath 1.3 at 40 digits (420 for the
    // mpmath.diff cross-check at 400).
    // At 20, sech² 20 = 1.69934170211663558369e-17 is a normal f64 and
    // h·tanh′ ≈ 1.7e-37 is normal too: a few ulps. (1 − tanh² would give 0
    // here, since tanh 20 rounds to 1 in f64.)
    within_ulps(
        "tanh",
        |x| x.tanh(),
        &[
            (20.0, 1.69934170211663558369e-17),
            (-20.0, 1.69934170211663558369e-17),
        ],
        4.0,
    );
    assert_eq!(
        20.0_f64.tanh(),
        1.0,
        "why 1 − tanh² cannot be the reference"
    );
    // At 400, sech² 400 = 1.46714983367107488538e-347 is below half the
    // smallest subnormal: its correctly rounded f64 value is 0, and the
    // complex step must give exactly 0 (cosh 800 overflows in the
    // denominator, which must not produce NaN).
    assert_eq!(cs(|x| x.tanh(), 400.0), 0.0);
    assert_eq!(cs(|x| x.tanh(), -400.0), 0.0);
    assert_eq!(ComplexStep::seeded(400.0_f64, 1e-20).tanh().re, 1.0);
}

#[test]
fn f32_rules_against_the_same_closed_forms() {
    // The same closed forms, mpmath 1.3 at 40 digits, at the f32 value of
    // the argument (0.7_f32 = 0.699999988079071044921875), written here
    // with their 21 digits and rounded to f32 by the compiler. Tolerance:
    // 2 f32 ulps (each rule is a handful of f32 operations).
    let h = ComplexStep::<f32>::default_step();
    let d32 =
        |f: fn(ComplexStep<f32>) -> ComplexStep<f32>, x: f32| complex_step_derivative(f, x, h);
    type Case = (
        &'static str,
        fn(ComplexStep<f32>) -> ComplexStep<f32>,
        f32,
        f32,
    );
    let cases: [Case; 7] = [
        ("sinh", |x| x.sinh(), 0.7, 1.25516899658792069124),
        ("asinh", |x| x.asinh(), 0.7, 0.819231925107096751662),
        ("atanh", |x| x.atanh(), 0.5, 1.33333333333333333333),
        ("exp2", |x| x.exp2(), 0.7, 1.12602090757050385779),
        ("recip", |x| x.recip(), 0.7, -2.04081639604040384604),
        // sech² 20 ≈ 1.7e-17 is a normal f32 (smallest 1.2e-38), and so is
        // h·sech² 20 ≈ 1.7e-27.
        ("tanh", |x| x.tanh(), 20.0, 1.69934170211663558369e-17),
        // erf′(5) = (2/√π)e^(−25) (DLMF 7.10.1).
        ("erf", |x| x.erf(), 5.0, 1.56708665310173353082e-11),
    ];
    for (name, f, x, want) in cases {
        let got = d32(f, x);
        let e = ulps32(got, want);
        println!("f32 {name}'({x}) = {got:e}: {e} ulp");
        assert!(
            e <= 2.0,
            "f32 {name}'({x}) = {got:e}, want {want:e} ({e} ulp)"
        );
    }
    // sech² 400 underflows in f32 as in f64: exactly 0, no NaN.
    assert_eq!(d32(|x| x.tanh(), 400.0), 0.0);
}
