//! The complex-step scalar [`ComplexStep`] and [`complex_step_derivative`]:
//! one evaluation gives a derivative accurate to working precision. The
//! method, conventions and pitfalls are documented on [`ComplexStep`].

use std::fmt;
use std::iter::{Product, Sum};
use std::num::FpCategory;
use std::ops::{
    Add, AddAssign, Div, DivAssign, Mul, MulAssign, Neg, Rem, RemAssign, Sub, SubAssign,
};

use num_traits::{Float, FloatConst, Num, NumCast, One, ToPrimitive, Zero};

use crate::scalar::{Real, Scalar};

/// A complex number `re + i·im` for the complex-step derivative
/// approximation: `re` carries the value, `im` carries `h` times the
/// derivative along the seeded direction.
///
/// ```
/// use num_traits::Float;
/// use plumbline::scalar::ComplexStep;
///
/// let h = 1e-20;
/// let z = ComplexStep::seeded(2.0_f64, h);
/// let y = z * z.sin(); // f(x) = x sin x
/// let exact = 2.0_f64.sin() + 2.0 * 2.0_f64.cos();
/// assert!((y.derivative(h) - exact).abs() < 1e-15);
/// assert_eq!(y.re, 2.0 * 2.0_f64.sin()); // the value comes along
/// ```
///
/// # Method
/// The complex-step derivative approximation of Squire & Trapp, "Using
/// complex variables to estimate derivatives of real functions", *SIAM
/// Review* 40(1):110–112, 1998, analysed by Martins, Sturdza & Alonso, "The
/// complex-step derivative approximation", *ACM TOMS* 29(3):245–262, 2003.
/// For `f` real on the real axis and analytic near `x`,
///
/// ```text
/// f(x + ih) = f(x) + ih f'(x) − (h²/2) f''(x) − i(h³/6) f'''(x) + …
/// f'(x)     = Im f(x + ih) / h + O(h²)
/// ```
///
/// No difference of nearly equal numbers is formed, so the step can be far
/// below the square root of machine epsilon: once `h²/6 · |f'''/f'|` is
/// under the unit roundoff the result is `f'(x)` to working precision.
///
/// [`ComplexStep`] is the complex number `re + i·im` with the operations a
/// generic forward pass needs ([`Scalar`], hence all of
/// [`num_traits::Float`]). Write the forward once for `T: Scalar`, run it on
/// `ComplexStep<f64>` with the input seeded `x + ih`, and read the derivative
/// from the imaginary part. With a real direction `v`, seeding `x + ihv`
/// gives the Jacobian-vector product `J v` from one evaluation.
///
/// # Conventions
/// Real code branches, takes absolute values and calls real-only functions.
/// The type follows the conventions published with Martins et al. (2003),
/// so that such code keeps carrying the derivative:
///
/// | operation | definition here |
/// |---|---|
/// | `+ − × ÷`, `exp`, `exp2`, `exp_m1`, `sin`, `cos`, `tan`, `sinh`, `cosh`, `tanh`, `powi`, `recip`, `mul_add` | genuine complex arithmetic |
/// | `ln`, `log2`, `log10`, `ln_1p`, `sqrt`, `cbrt`, `powf` | genuine complex formula where the real part lies off the branch point (`re > 0`; `re ≠ 0` for `cbrt`); otherwise the value/derivative rule below |
/// | `asin`, `acos`, `atan`, `atan2`, `asinh`, `acosh`, `atanh`, `erf`, `hypot`, `powf` with `re ≤ 0` | value/derivative rule `g(x + iy) = g(x) + i·y·g'(x)` |
/// | `==`, `<`, `partial_cmp`, [`Zero::is_zero`] | real parts only |
/// | `abs` | `z` if `re > 0`, `−z` if `re < 0` (never the modulus); at `re = 0`, `−z` if `im > 0` |
/// | `max`, `min`, `clamp`, `abs_sub` | the whole argument with the larger (smaller) real part; **on an exact tie the smaller (larger) imaginary part** wins, as the real function would choose at x − h (left-hand derivatives for h > 0); a NaN real part loses, as for `f64` |
/// | `signum`, `floor`, `ceil`, `round`, `trunc` | applied to `re`; `im = 0` |
/// | `fract`, `%` | `re` as for reals; `im` carries the derivative (1 for `fract`) |
/// | `is_nan` / `is_finite` / `is_infinite` | look at **both** parts: a NaN derivative is a NaN |
/// | `to_f64`, `to_f32`, every [`ToPrimitive`] method | the real part (drops the derivative) |
/// | [`NumCast::from`], constants (`epsilon`, `max_value`, `PI`, …) | the real value, `im = 0` |
///
/// The rule `g(x + iy) = g(x) + i·y·g'(x)` is exact to first order in `y`
/// and cannot cancel. It is used where the complex formula loses the
/// imaginary part (logarithmic formulas for `asin`, `acos`, `atan` round
/// `ln|w|` with `|w| = 1 − O(h)` to zero), where it crosses a branch cut
/// (`powf` with a negative base: `exp(3 ln z)` at `−2` has an imaginary part
/// of order `8 sin 3π` from the cut, not `12h`), and for `erf`, which has no
/// complex implementation here. The derivatives it embeds are handbook
/// facts: `erf'(x) = (2/√π) e^(−x²)` (NIST DLMF 7.10.1), `asin'(x) =
/// 1/√(1 − x²)`, and so on.
///
/// Operations also keep exact zeros exact: a term of the imaginary part with
/// an exactly zero factor is zero, even if the other factor is infinite (so
/// a `−∞` mask times a constant leaves no NaN), and an input with `im == 0`
/// gives an output with `im == 0`.
///
/// `hypot(x, y)` returns `hypot(Re x, Re y)` plus the first-order term of the
/// analytic continuation of `√(x² + y²)`, i.e. `(x·x' + y·y')/r`, computed
/// with scaled operands so it neither overflows nor underflows. At
/// `x = y = 0` it returns `im = hypot(Im x, Im y)`, the one-sided derivative
/// along the seeded direction.
///
/// # Step size
/// [`ComplexStep::default_step`] is `1e-20` for `f64` and `1e-10` for `f32`.
/// Both are far below the point where the `O(h²)` term matters (about
/// `1e-8` in `f64`, `1e-4` in `f32` for O(1) scales) and far above the
/// subnormal range (`2.2e-308` in `f64`, `1.2e-38` in `f32`). Keeping that
/// margin matters because `h · |∂|` for a small intermediate sensitivity `∂`
/// must stay normal; that is why a step such as `1e-200` is not the default.
///
/// # Pitfalls
/// * **Converting to a primitive drops the derivative.** `to_f64`, `to_f32`
///   and every [`ToPrimitive`] method return the real part. Code that casts
///   to `f64` mid-computation, stores into a real array or calls a real-only
///   library routine silently yields a derivative of `0`.
/// * **The modulus and conjugation break the method.** They are not
///   analytic: `|z|` of `−2 + ih` is `2` to working precision and its
///   imaginary part is gone; `z · conj(z)` has no imaginary part at all.
///   Use [`Float::abs`] (which follows the sign convention above), never
///   `√(re² + im²)` or a hand-written conjugate.
/// * **At a kink the result is a one-sided derivative, with no warning.**
///   `abs`, `max`, `min` and `clamp` at an exact tie follow the step: with
///   `h > 0` the left-hand derivative (`abs` at `0` gives `−1`, `max(x, 1)`
///   at `x = 1` gives `0`), with `h < 0` the right-hand one (`+1`, `1`);
///   the audit seeds both to see a tie that rounding made. A branch written with
///   `<` compares real parts only: ReLU as `if x > 0 { x } else { 0 }` gives
///   `0` at `0` whatever the step. Genuine singularities (`sqrt` or `ln` at
///   `0`) give `±∞`. Pair the complex step with a real-arithmetic kink test.
/// * **A step so small that the imaginary part goes subnormal loses
///   digits**, then everything: on the Squire & Trapp test function in `f64`
///   the relative error is `2e-16` down to `h = 1e-307`, `2e-14` at
///   `1e-310`, `1e-4` at `1e-320`. The same happens when
///   `h` times an intermediate sensitivity underflows. Check
///   `z.im.is_subnormal()` if in doubt.
/// * **`==` ignores the imaginary part**, by convention. Compare the fields
///   to compare both parts.
/// * **Nested complex steps do not give second derivatives.** The method is
///   first-order only.
#[derive(Clone, Copy, Debug, Default)]
pub struct ComplexStep<R> {
    /// Real part: the value.
    pub re: R,
    /// Imaginary part: the step times the derivative.
    pub im: R,
}

/// Converts an `f64` constant to `R`.
fn k<R: Real>(x: f64) -> R {
    R::from_f64(x)
}

/// Product for imaginary-part terms: exactly zero if either factor is
/// exactly zero, so `0 · ∞` contributes nothing instead of NaN.
fn tmul<R: Real>(x: R, y: R) -> R {
    if x == R::zero() || y == R::zero() {
        R::zero()
    } else {
        x * y
    }
}

impl<R: Real> ComplexStep<R> {
    /// The complex number `re + i·im`.
    ///
    /// ```
    /// use plumbline::scalar::ComplexStep;
    /// let z = ComplexStep::new(1.5_f64, 2e-20);
    /// assert_eq!((z.re, z.im), (1.5, 2e-20));
    /// ```
    pub fn new(re: R, im: R) -> Self {
        Self { re, im }
    }

    /// A constant: `x + 0i` (its derivative is zero).
    ///
    /// ```
    /// use plumbline::scalar::ComplexStep;
    /// assert_eq!(ComplexStep::real(3.0_f32).im, 0.0);
    /// ```
    pub fn real(x: R) -> Self {
        Self::new(x, R::zero())
    }

    /// The seeded input `x + ih`.
    ///
    /// ```
    /// use plumbline::scalar::ComplexStep;
    /// let z = ComplexStep::seeded(1.0_f64, 1e-20);
    /// assert_eq!((z.re, z.im), (1.0, 1e-20));
    /// ```
    pub fn seeded(x: R, h: R) -> Self {
        Self::new(x, h)
    }

    /// The derivative read from a result: `im / h`, where `h` is the step
    /// the input was seeded with. `h = 0` gives NaN or ±∞, never a panic.
    ///
    /// ```
    /// use plumbline::scalar::ComplexStep;
    /// let h = 1e-20;
    /// let x = ComplexStep::seeded(3.0_f64, h);
    /// assert_eq!((x * x).derivative(h), 6.0);
    /// ```
    pub fn derivative(self, h: R) -> R {
        self.im / h
    }

    /// The value: the real part. Equal to `f(x)` up to `(h²/2)|f''(x)|`.
    ///
    /// ```
    /// use plumbline::scalar::ComplexStep;
    /// assert_eq!(ComplexStep::new(2.0_f64, 1e-20).value(), 2.0);
    /// ```
    pub fn value(self) -> R {
        self.re
    }

    /// The recommended step: `1e-20` for `f64`, `1e-10` for `f32`.
    ///
    /// Far below where the `O(h²)` truncation term shows, and far above
    /// the subnormal range, so that `h` times a small intermediate
    /// sensitivity stays a normal number (see "Step size" on [`ComplexStep`]).
    ///
    /// ```
    /// use plumbline::scalar::ComplexStep;
    /// assert_eq!(ComplexStep::<f64>::default_step(), 1e-20);
    /// assert_eq!(ComplexStep::<f32>::default_step(), 1e-10);
    /// ```
    pub fn default_step() -> R {
        if R::EPS < 1e-10 {
            k(1e-20)
        } else {
            k(1e-10)
        }
    }

    /// `g(x + iy) = g(x) + i·y·g'(x)`, given `g(x)` and `g'(x)`.
    fn rule(self, g: R, dg: R) -> Self {
        Self::new(g, tmul(self.im, dg))
    }

    /// `g(x + iy) = g(x) + i·y/d`, given `g(x)` and `d = 1/g'(x)`.
    fn rule_over(self, g: R, d: R) -> Self {
        let im = if self.im == R::zero() {
            R::zero()
        } else {
            self.im / d
        };
        Self::new(g, im)
    }

    /// Multiplies both parts by the real `s` (the derivative scales too).
    ///
    /// ```
    /// use plumbline::scalar::ComplexStep;
    /// let z = ComplexStep::new(1.0_f64, 1e-20).scaled(2.0);
    /// assert_eq!((z.re, z.im), (2.0, 2e-20));
    /// ```
    pub fn scaled(self, s: R) -> Self {
        Self::new(self.re * s, tmul(self.im, s))
    }

    /// `ln`-like functions: `log_b z = ln z / ln b`, with `ln|z|` replaced by
    /// `real_log(|z|)` and `inv_ln_b = 1/ln b`.
    fn log_with(self, real_log: fn(R) -> R, inv_ln_b: R) -> Self {
        let (a, b) = (self.re, self.im);
        if b == R::zero() {
            Self::real(real_log(a))
        } else if a > R::zero() {
            Self::new(real_log(a.hypot(b)), b.atan2(a) * inv_ln_b)
        } else {
            self.rule_over(real_log(a), a / inv_ln_b)
        }
    }
}

/// Derivative of a scalar function by one complex evaluation:
/// `Im f(x + ih) / h` (Squire & Trapp 1998; Martins, Sturdza & Alonso 2003).
///
/// `f` must compute the analytic continuation of the real function: write
/// it against [`Scalar`] or [`Float`] and do not convert to primitives
/// inside (see the pitfalls on [`ComplexStep`]). Use
/// [`ComplexStep::default_step`] for `h` unless you have a reason not to.
///
/// ```
/// use num_traits::Float;
/// use plumbline::scalar::{complex_step_derivative, ComplexStep};
///
/// // d/dx eˣ/√(sin³x + cos³x) at x = 1.5 (Squire & Trapp 1998).
/// let f = |x: ComplexStep<f64>| x.exp() / (x.sin().powi(3) + x.cos().powi(3)).sqrt();
/// let d = complex_step_derivative(f, 1.5, 1e-20);
/// assert!((d - 4.053_427_893_898_621).abs() < 4e-15);
/// ```
pub fn complex_step_derivative<R: Real>(
    f: impl FnOnce(ComplexStep<R>) -> ComplexStep<R>,
    x: R,
    h: R,
) -> R {
    f(ComplexStep::seeded(x, h)).derivative(h)
}

// ---------------------------------------------------------------- comparisons

impl<R: Real> PartialEq for ComplexStep<R> {
    fn eq(&self, other: &Self) -> bool {
        self.re == other.re
    }
}

impl<R: Real> PartialOrd for ComplexStep<R> {
    fn partial_cmp(&self, other: &Self) -> Option<std::cmp::Ordering> {
        self.re.partial_cmp(&other.re)
    }
}

// ----------------------------------------------------------------- arithmetic

impl<R: Real> Neg for ComplexStep<R> {
    type Output = Self;
    fn neg(self) -> Self {
        Self::new(-self.re, -self.im)
    }
}

impl<R: Real> Add for ComplexStep<R> {
    type Output = Self;
    fn add(self, o: Self) -> Self {
        Self::new(self.re + o.re, self.im + o.im)
    }
}

impl<R: Real> Sub for ComplexStep<R> {
    type Output = Self;
    fn sub(self, o: Self) -> Self {
        Self::new(self.re - o.re, self.im - o.im)
    }
}

impl<R: Real> Mul for ComplexStep<R> {
    type Output = Self;
    fn mul(self, o: Self) -> Self {
        let (a, b, c, d) = (self.re, self.im, o.re, o.im);
        Self::new(a * c - tmul(b, d), tmul(a, d) + tmul(b, c))
    }
}

impl<R: Real> Div for ComplexStep<R> {
    type Output = Self;
    /// Smith's ordering, with the imaginary part taken from
    /// `w·(c + id) = a + ib`, i.e. `Im w = (b − Re w · d)/c`, so that no
    /// product of two step-sized numbers enters it (no premature underflow).
    fn div(self, o: Self) -> Self {
        let (a, b, c, d) = (self.re, self.im, o.re, o.im);
        if d == R::zero() {
            let im = if b == R::zero() { R::zero() } else { b / c };
            return Self::new(a / c, im);
        }
        if c.abs() >= d.abs() {
            let r = d / c;
            let den = c + d * r;
            let re = (a + tmul(b, r)) / den;
            Self::new(re, (b - tmul(re, d)) / c)
        } else {
            let r = c / d;
            let den = c * r + d;
            Self::new((a * r + b) / den, (b * r - a) / den)
        }
    }
}

impl<R: Real> Rem for ComplexStep<R> {
    type Output = Self;
    /// `x − n·y` with `n = trunc(Re x / Re y)`: the real part is `Re x % Re y`.
    fn rem(self, o: Self) -> Self {
        let re = self.re % o.re;
        let n = ((self.re - re) / o.re).round();
        Self::new(re, self.im - tmul(n, o.im))
    }
}

macro_rules! assign_ops {
    ($($tr:ident $m:ident $op:tt),*) => {$(
        impl<R: Real> $tr for ComplexStep<R> {
            fn $m(&mut self, o: Self) {
                *self = *self $op o;
            }
        }
    )*};
}
assign_ops!(AddAssign add_assign +, SubAssign sub_assign -, MulAssign mul_assign *,
            DivAssign div_assign /, RemAssign rem_assign %);

impl<R: Real> Sum for ComplexStep<R> {
    fn sum<I: Iterator<Item = Self>>(iter: I) -> Self {
        iter.fold(Self::zero(), |s, x| s + x)
    }
}

impl<'a, R: Real> Sum<&'a ComplexStep<R>> for ComplexStep<R> {
    fn sum<I: Iterator<Item = &'a Self>>(iter: I) -> Self {
        iter.fold(Self::zero(), |s, x| s + *x)
    }
}

impl<R: Real> Product for ComplexStep<R> {
    fn product<I: Iterator<Item = Self>>(iter: I) -> Self {
        iter.fold(Self::one(), |s, x| s * x)
    }
}

// ------------------------------------------------------------- num-traits glue

impl<R: Real> Zero for ComplexStep<R> {
    fn zero() -> Self {
        Self::real(R::zero())
    }
    /// Real part only, like `==`.
    fn is_zero(&self) -> bool {
        self.re == R::zero()
    }
}

impl<R: Real> One for ComplexStep<R> {
    fn one() -> Self {
        Self::real(R::one())
    }
}

impl<R: Real> Num for ComplexStep<R> {
    type FromStrRadixErr = R::FromStrRadixErr;
    fn from_str_radix(s: &str, radix: u32) -> Result<Self, Self::FromStrRadixErr> {
        R::from_str_radix(s, radix).map(Self::real)
    }
}

macro_rules! to_prim {
    ($($m:ident $t:ty),*) => {$(
        fn $m(&self) -> Option<$t> {
            self.re.$m()
        }
    )*};
}

/// Every conversion returns the real part: the derivative is dropped.
impl<R: Real> ToPrimitive for ComplexStep<R> {
    to_prim!(to_isize isize, to_i8 i8, to_i16 i16, to_i32 i32, to_i64 i64, to_i128 i128,
             to_usize usize, to_u8 u8, to_u16 u16, to_u32 u32, to_u64 u64, to_u128 u128,
             to_f32 f32, to_f64 f64);
}

impl<R: Real> NumCast for ComplexStep<R> {
    fn from<T: ToPrimitive>(n: T) -> Option<Self> {
        <R as NumCast>::from(n).map(Self::real)
    }
}

macro_rules! float_consts {
    ($($c:ident),*) => {
        impl<R: Real> FloatConst for ComplexStep<R> {
            $(fn $c() -> Self {
                Self::real(k(std::f64::consts::$c))
            })*
        }
    };
}
float_consts!(
    E,
    FRAC_1_PI,
    FRAC_1_SQRT_2,
    FRAC_2_PI,
    FRAC_2_SQRT_PI,
    FRAC_PI_2,
    FRAC_PI_3,
    FRAC_PI_4,
    FRAC_PI_6,
    FRAC_PI_8,
    LN_10,
    LN_2,
    LOG10_E,
    LOG2_E,
    PI,
    SQRT_2,
    TAU,
    LOG10_2,
    LOG2_10
);

/// `1.5+2e-20i`: the real part as `R` displays it, the imaginary part in
/// exponent notation (it is usually step-sized). A precision applies to both.
impl<R: Real> fmt::Display for ComplexStep<R> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        // Negative numbers print their own sign; NaN prints none.
        let sign = if self.im.is_sign_negative() && !self.im.is_nan() {
            ""
        } else {
            "+"
        };
        // `Real` is sealed to f32 and f64; format each in its own width.
        let (re, im) = (self.re.as_f64(), self.im.as_f64());
        match (f.precision(), R::EPS < 1e-10) {
            (Some(p), true) => write!(f, "{re:.p$}{sign}{im:.p$e}i"),
            (Some(p), false) => write!(f, "{:.p$}{sign}{:.p$e}i", re as f32, im as f32),
            (None, true) => write!(f, "{re}{sign}{im:e}i"),
            (None, false) => write!(f, "{}{sign}{:e}i", re as f32, im as f32),
        }
    }
}

// ---------------------------------------------------------------------- Float

impl<R: Real> Float for ComplexStep<R> {
    fn nan() -> Self {
        Self::real(R::nan())
    }
    fn infinity() -> Self {
        Self::real(R::infinity())
    }
    fn neg_infinity() -> Self {
        Self::real(R::neg_infinity())
    }
    fn neg_zero() -> Self {
        Self::real(R::neg_zero())
    }
    fn min_value() -> Self {
        Self::real(R::min_value())
    }
    fn min_positive_value() -> Self {
        Self::real(R::min_positive_value())
    }
    fn epsilon() -> Self {
        Self::real(R::epsilon())
    }
    fn max_value() -> Self {
        Self::real(R::max_value())
    }

    fn is_nan(self) -> bool {
        self.re.is_nan() || self.im.is_nan()
    }
    fn is_infinite(self) -> bool {
        !self.is_nan() && (self.re.is_infinite() || self.im.is_infinite())
    }
    fn is_finite(self) -> bool {
        self.re.is_finite() && self.im.is_finite()
    }
    fn is_normal(self) -> bool {
        self.re.is_normal() && self.im.is_finite()
    }
    fn classify(self) -> FpCategory {
        if self.is_nan() {
            FpCategory::Nan
        } else if self.im.is_infinite() {
            FpCategory::Infinite
        } else {
            self.re.classify()
        }
    }
    fn integer_decode(self) -> (u64, i16, i8) {
        self.re.integer_decode()
    }
    fn is_sign_positive(self) -> bool {
        self.re.is_sign_positive()
    }
    fn is_sign_negative(self) -> bool {
        self.re.is_sign_negative()
    }

    fn floor(self) -> Self {
        Self::real(self.re.floor())
    }
    fn ceil(self) -> Self {
        Self::real(self.re.ceil())
    }
    fn round(self) -> Self {
        Self::real(self.re.round())
    }
    fn trunc(self) -> Self {
        Self::real(self.re.trunc())
    }
    fn fract(self) -> Self {
        Self::new(self.re.fract(), self.im)
    }
    fn signum(self) -> Self {
        Self::real(self.re.signum())
    }
    // At an exact tie (or |x| at 0) the branch is chosen by the imaginary
    // parts, as the real function would choose it at x − h·v, just behind
    // the seeded direction: with a positive step the result is the
    // left-hand derivative, with a negative step the right-hand one. (A
    // correct backward that routes a tie to one side then meets a
    // disagreement at the first look, and the kink tests run.) `PartialOrd`
    // compares real parts only, so code that branches with `<` is
    // unaffected.
    fn abs(self) -> Self {
        if self.re < R::zero() || (self.re == R::zero() && self.im > R::zero()) {
            -self
        } else {
            self
        }
    }
    fn max(self, other: Self) -> Self {
        if other.re.is_nan() || self.re > other.re || (self.re == other.re && self.im <= other.im) {
            self
        } else {
            other
        }
    }
    fn min(self, other: Self) -> Self {
        if other.re.is_nan() || self.re < other.re || (self.re == other.re && self.im >= other.im) {
            self
        } else {
            other
        }
    }
    fn clamp(self, min: Self, max: Self) -> Self {
        if self.re.is_nan() {
            self
        } else {
            self.max(min).min(max)
        }
    }
    fn abs_sub(self, other: Self) -> Self {
        let d = self - other;
        if d.re.is_nan() {
            d
        } else {
            d.max(Self::zero())
        }
    }

    fn mul_add(self, a: Self, b: Self) -> Self {
        let re = self.re.mul_add(a.re, b.re) - tmul(self.im, a.im);
        Self::new(re, tmul(self.re, a.im) + tmul(self.im, a.re) + b.im)
    }
    fn recip(self) -> Self {
        Self::one() / self
    }
    fn powi(self, n: i32) -> Self {
        if self.im == R::zero() {
            return Self::real(self.re.powi(n));
        }
        let (mut base, mut e, mut acc) = (self, n.unsigned_abs(), Self::one());
        while e > 0 {
            if e & 1 == 1 {
                acc *= base;
            }
            e >>= 1;
            if e > 0 {
                base *= base;
            }
        }
        if n < 0 {
            acc.recip()
        } else {
            acc
        }
    }
    fn powf(self, n: Self) -> Self {
        let (a, b, c, d) = (self.re, self.im, n.re, n.im);
        if (b == R::zero() && d == R::zero()) || (c == R::zero() && d == R::zero()) {
            return Self::real(a.powf(c));
        }
        if a > R::zero() {
            // z^w = |z|^c e^(−dθ) · e^(i(cθ + d ln|z|)), θ = arg z.
            let m = a.hypot(b);
            let th = b.atan2(a);
            let mag = m.powf(c) * (-tmul(d, th)).exp();
            let phase = tmul(c, th) + tmul(d, m.ln());
            Self::new(mag * phase.cos(), tmul(mag, phase.sin()))
        } else {
            // Rule: d(a^c) = c a^(c−1) da + a^c ln(a) dc.
            let v = a.powf(c);
            let im = tmul(b, c * a.powf(c - R::one())) + tmul(d, tmul(v, a.ln()));
            Self::new(v, im)
        }
    }
    fn sqrt(self) -> Self {
        let (a, b) = (self.re, self.im);
        if b == R::zero() {
            Self::real(a.sqrt())
        } else if a > R::zero() {
            let half = k::<R>(0.5);
            let t = (a.hypot(b) * half + a * half).sqrt();
            Self::new(t, b / (t + t))
        } else {
            let s = a.sqrt();
            self.rule_over(s, s + s)
        }
    }
    fn cbrt(self) -> Self {
        let (a, b) = (self.re, self.im);
        if b == R::zero() {
            Self::real(a.cbrt())
        } else if a > R::zero() {
            let m = a.hypot(b).cbrt();
            let th = b.atan2(a) / k(3.0);
            Self::new(m * th.cos(), m * th.sin())
        } else if a < R::zero() {
            -(-self).cbrt()
        } else {
            self.rule_over(a, R::zero())
        }
    }
    fn exp(self) -> Self {
        let (a, b) = (self.re, self.im);
        let e = a.exp();
        if b == R::zero() {
            return Self::real(e);
        }
        Self::new(e * b.cos(), tmul(e, b.sin()))
    }
    fn exp2(self) -> Self {
        let (a, b) = (self.re, self.im);
        let e = a.exp2();
        if b == R::zero() {
            return Self::real(e);
        }
        let t = b * k(std::f64::consts::LN_2);
        Self::new(e * t.cos(), tmul(e, t.sin()))
    }
    fn exp_m1(self) -> Self {
        let (a, b) = (self.re, self.im);
        if b == R::zero() {
            return Self::real(a.exp_m1());
        }
        // e^a cos b − 1 = expm1(a) cos b − 2 sin²(b/2)
        let s = (b * k(0.5)).sin();
        let re = a.exp_m1() * b.cos() - k::<R>(2.0) * s * s;
        Self::new(re, tmul(a.exp(), b.sin()))
    }
    fn ln(self) -> Self {
        self.log_with(R::ln, R::one())
    }
    fn log2(self) -> Self {
        self.log_with(R::log2, k(std::f64::consts::LOG2_E))
    }
    fn log10(self) -> Self {
        self.log_with(R::log10, k(std::f64::consts::LOG10_E))
    }
    fn log(self, base: Self) -> Self {
        self.ln() / base.ln()
    }
    fn ln_1p(self) -> Self {
        let (a, b) = (self.re, self.im);
        if b == R::zero() {
            return Self::real(a.ln_1p());
        }
        let u = a + R::one();
        if a > -R::one() {
            // ln|1 + z| = ln(1 + a) + ½ ln(1 + (b/(1 + a))²)
            let w = b / u;
            let re = a.ln_1p() + k::<R>(0.5) * (w * w).ln_1p();
            Self::new(re, b.atan2(u))
        } else {
            self.rule_over(a.ln_1p(), u)
        }
    }
    fn sin(self) -> Self {
        let (a, b) = (self.re, self.im);
        if b == R::zero() {
            return Self::real(a.sin());
        }
        Self::new(a.sin() * b.cosh(), tmul(a.cos(), b.sinh()))
    }
    fn cos(self) -> Self {
        let (a, b) = (self.re, self.im);
        if b == R::zero() {
            return Self::real(a.cos());
        }
        Self::new(a.cos() * b.cosh(), -tmul(a.sin(), b.sinh()))
    }
    fn sin_cos(self) -> (Self, Self) {
        (self.sin(), self.cos())
    }
    fn tan(self) -> Self {
        if self.im == R::zero() {
            return Self::real(self.re.tan());
        }
        // sin/cos: no cancellation near odd multiples of π/2, unlike the
        // (sin 2a + i sinh 2b)/(cos 2a + cosh 2b) form.
        self.sin() / self.cos()
    }
    fn sinh(self) -> Self {
        let (a, b) = (self.re, self.im);
        if b == R::zero() {
            return Self::real(a.sinh());
        }
        Self::new(a.sinh() * b.cos(), tmul(a.cosh(), b.sin()))
    }
    fn cosh(self) -> Self {
        let (a, b) = (self.re, self.im);
        if b == R::zero() {
            return Self::real(a.cosh());
        }
        Self::new(a.cosh() * b.cos(), tmul(a.sinh(), b.sin()))
    }
    fn tanh(self) -> Self {
        let (a, b) = (self.re, self.im);
        let t = a.tanh();
        if b == R::zero() {
            return Self::real(t);
        }
        // tanh(a + ib) = (sinh 2a + i sin 2b)/(cosh 2a + cos 2b), with
        // sinh 2a = tanh a (cosh 2a + 1). The denominator never cancels; if
        // it overflows the imaginary part underflows to 0, as it should.
        let den = (a + a).cosh() + (b + b).cos();
        let s = b.sin();
        let re = t + t * (k::<R>(2.0) * s * s / den);
        Self::new(re, (b + b).sin() / den)
    }
    fn asin(self) -> Self {
        let a = self.re;
        self.rule_over(a.asin(), ((R::one() - a) * (R::one() + a)).sqrt())
    }
    fn acos(self) -> Self {
        let a = self.re;
        self.rule_over(a.acos(), -((R::one() - a) * (R::one() + a)).sqrt())
    }
    fn atan(self) -> Self {
        let a = self.re;
        self.rule_over(a.atan(), a.mul_add(a, R::one()))
    }
    /// `self` is `y`, `other` is `x`: `atan2(y, x)` with derivative
    /// `(x·y' − y·x')/(x² + y²)`, evaluated with scaled operands.
    fn atan2(self, other: Self) -> Self {
        let (a, b, c, d) = (self.re, self.im, other.re, other.im);
        let v = a.atan2(c);
        if b == R::zero() && d == R::zero() {
            return Self::real(v);
        }
        let r = a.hypot(c);
        Self::new(v, (tmul(c / r, b) - tmul(a / r, d)) / r)
    }
    fn asinh(self) -> Self {
        let a = self.re;
        self.rule_over(a.asinh(), R::one().hypot(a))
    }
    fn acosh(self) -> Self {
        let a = self.re;
        self.rule_over(a.acosh(), ((a - R::one()) * (a + R::one())).sqrt())
    }
    fn atanh(self) -> Self {
        let a = self.re;
        self.rule_over(a.atanh(), (R::one() - a) * (R::one() + a))
    }
    fn hypot(self, other: Self) -> Self {
        let (a, b, c, d) = (self.re, self.im, other.re, other.im);
        let r = a.hypot(c);
        if b == R::zero() && d == R::zero() {
            Self::real(r)
        } else if r == R::zero() {
            Self::new(r, b.hypot(d))
        } else {
            Self::new(r, tmul(a / r, b) + tmul(c / r, d))
        }
    }
    fn to_degrees(self) -> Self {
        Self::new(
            self.re.to_degrees(),
            tmul(self.im, k(180.0 / std::f64::consts::PI)),
        )
    }
    fn to_radians(self) -> Self {
        Self::new(
            self.re.to_radians(),
            tmul(self.im, k(std::f64::consts::PI / 180.0)),
        )
    }
}

impl<R: Real> Scalar for ComplexStep<R> {
    /// Value/derivative rule with `erf'(x) = (2/√π) e^(−x²)` (NIST DLMF
    /// 7.10.1) and the real `erf` of `R`. `x²` is split exactly
    /// (`x² = hi + lo` by a fused multiply-add) so that `e^(−x²)` stays
    /// accurate for large `|x|`.
    fn erf(self) -> Self {
        let a = self.re;
        let hi = a * a;
        let e = if hi.is_finite() {
            let lo = a.mul_add(a, -hi);
            (-hi).exp() * (R::one() - lo)
        } else {
            R::zero()
        };
        self.rule(a.erf(), k::<R>(std::f64::consts::FRAC_2_SQRT_PI) * e)
    }
}
