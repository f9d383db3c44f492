//! A dual number that carries running error bounds: the value and one
//! directional derivative, each with a bound on the rounding it has
//! accumulated along the forward's own formulas.
//!
//! Running error analysis (J. H. Wilkinson, "Error analysis revisited",
//! IMA Bulletin 22, 1986; N. J. Higham, *Accuracy and Stability of
//! Numerical Algorithms*, 2nd ed., SIAM 2002, §3.3) propagates, beside each
//! computed quantity x̂, a number μ with |x̂ − x| ≲ μ·u (u the unit
//! roundoff, ε/2): every operation adds its inputs' bounds weighted by its
//! partial derivatives, plus its own rounding. Here the same bookkeeping
//! runs on the derivative of a forward-mode dual number (value v,
//! derivative d = ∂v/∂x along one element x), with each elementary
//! function's derivative computed by the formula a hand-written backward
//! uses (`1 − t²` from t = tanh u, `v` from v = eˣ, `1/x` for ln x). The
//! derivative's bound then measures how much a backward that follows the
//! same formulas can lose at this point: `1 + tanh u` at u = −16 keeps no
//! correct digit of `1 − t²`, and the bound says so.
//!
//! First-order bounds (products of two bounds are dropped), as in the
//! books above. The audit uses it only in the second look at an element
//! that disagrees, one forward per look, in the layer's own precision.

use std::fmt;
use std::iter::{Product, Sum};
use std::num::FpCategory;
use std::ops::{
    Add, AddAssign, Div, DivAssign, Mul, MulAssign, Neg, Rem, RemAssign, Sub, SubAssign,
};

use num_traits::{Float, Num, NumCast, One, ToPrimitive, Zero};

use super::{Real, Scalar};

/// Rounding of one call of a library function, in units of u: within one
/// ulp, i.e. 2u (common practice for libm's elementary functions).
const LIBRARY: f64 = 2.0;

/// A value and a derivative along one element, with running error bounds
/// for both (in units of the unit roundoff of `R`).
#[derive(Clone, Copy, Debug, Default)]
pub struct Traced<R> {
    /// The computed value.
    pub v: R,
    /// The computed derivative along the seeded element.
    pub d: R,
    /// Bound on the value's accumulated rounding, in units of u.
    pub ev: f64,
    /// Bound on the derivative's accumulated rounding, in units of u.
    pub ed: f64,
}

/// |a|·b, exactly 0 when b is 0 (a bound of 0 times an infinite
/// sensitivity adds nothing, instead of NaN).
fn w(a: f64, b: f64) -> f64 {
    if b == 0.0 {
        0.0
    } else {
        a.abs() * b
    }
}

impl<R: Real> Traced<R> {
    /// An exact input: derivative `d` (1 for the seeded element, else 0).
    pub fn input(v: R, d: R) -> Self {
        Traced {
            v,
            d,
            ev: 0.0,
            ed: 0.0,
        }
    }

    fn constant(v: R) -> Self {
        Self::input(v, R::zero())
    }

    fn x(self) -> f64 {
        self.v.as_f64()
    }

    /// A differentiable function of one argument: its computed value `v`
    /// (rounded to within `round` units of u), the computed local
    /// derivative `g` and the bound `eg` on the rounding of `g` (in units
    /// of u, including what the argument's own error does to it).
    fn unary(self, v: R, round: f64, g: R, eg: f64) -> Self {
        let (gf, dx) = (g.as_f64(), self.d.as_f64());
        let d = if self.d == R::zero() {
            R::zero()
        } else {
            g * self.d
        };
        Traced {
            v,
            d,
            ev: w(gf, self.ev) + round * v.as_f64().abs(),
            ed: w(gf, self.ed) + w(dx, eg) + d.as_f64().abs(),
        }
    }

    /// A piecewise-constant function: its value is exact, its derivative 0.
    fn flat(v: R) -> Self {
        Self::constant(v)
    }
}

// ---------------------------------------------------------------- comparisons

impl<R: Real> PartialEq for Traced<R> {
    fn eq(&self, other: &Self) -> bool {
        self.v == other.v
    }
}

impl<R: Real> PartialOrd for Traced<R> {
    fn partial_cmp(&self, other: &Self) -> Option<std::cmp::Ordering> {
        self.v.partial_cmp(&other.v)
    }
}

// ----------------------------------------------------------------- arithmetic

impl<R: Real> Neg for Traced<R> {
    type Output = Self;
    fn neg(self) -> Self {
        Traced {
            v: -self.v,
            d: -self.d,
            ..self
        }
    }
}

impl<R: Real> Add for Traced<R> {
    type Output = Self;
    fn add(self, o: Self) -> Self {
        let (v, d) = (self.v + o.v, self.d + o.d);
        Traced {
            v,
            d,
            ev: self.ev + o.ev + v.as_f64().abs(),
            ed: self.ed + o.ed + d.as_f64().abs(),
        }
    }
}

impl<R: Real> Sub for Traced<R> {
    type Output = Self;
    fn sub(self, o: Self) -> Self {
        self + (-o)
    }
}

impl<R: Real> Mul for Traced<R> {
    type Output = Self;
    fn mul(self, o: Self) -> Self {
        let (a, b) = (self.v.as_f64(), o.v.as_f64());
        let (da, db) = (self.d.as_f64(), o.d.as_f64());
        let v = self.v * o.v;
        let (p, q) = (self.v * o.d, self.d * o.v);
        let d = p + q;
        Traced {
            v,
            d,
            ev: w(b, self.ev) + w(a, o.ev) + v.as_f64().abs(),
            ed: w(a, o.ed)
                + w(db, self.ev)
                + w(b, self.ed)
                + w(da, o.ev)
                + p.as_f64().abs()
                + q.as_f64().abs()
                + d.as_f64().abs(),
        }
    }
}

impl<R: Real> Div for Traced<R> {
    type Output = Self;
    /// v = a/b, d = (da − v·db)/b.
    fn div(self, o: Self) -> Self {
        let b = o.v.as_f64().abs();
        let v = self.v / o.v;
        let vf = v.as_f64().abs();
        let ev = (self.ev + w(vf, o.ev)) / b + vf;
        let p = v * o.d;
        let num = self.d - p;
        let d = num / o.v;
        let (db, pf, nf) = (o.d.as_f64(), p.as_f64().abs(), num.as_f64().abs());
        let ed = (self.ed + w(vf, o.ed) + w(db, ev) + pf + nf) / b
            + w(d.as_f64() / b, o.ev)
            + d.as_f64().abs();
        Traced { v, d, ev, ed }
    }
}

impl<R: Real> Rem for Traced<R> {
    type Output = Self;
    /// `x − n·y` with `n = trunc(x / y)`; `fmod` itself is exact.
    fn rem(self, o: Self) -> Self {
        let v = self.v % o.v;
        let n = ((self.v - v) / o.v).round();
        let d = self.d - n * o.d;
        let nf = n.as_f64();
        Traced {
            v,
            d,
            ev: self.ev + w(nf, o.ev),
            ed: self.ed + w(nf, o.ed) + d.as_f64().abs(),
        }
    }
}

macro_rules! assign_ops {
    ($($tr:ident $m:ident $op:tt),*) => {$(
        impl<R: Real> $tr for Traced<R> {
            fn $m(&mut self, o: Self) {
                *self = *self $op o;
            }
        }
    )*};
}
assign_ops!(AddAssign add_assign +, SubAssign sub_assign -, MulAssign mul_assign *,
            DivAssign div_assign /, RemAssign rem_assign %);

impl<R: Real> Sum for Traced<R> {
    fn sum<I: Iterator<Item = Self>>(iter: I) -> Self {
        iter.fold(Self::zero(), |s, x| s + x)
    }
}

impl<'a, R: Real> Sum<&'a Traced<R>> for Traced<R> {
    fn sum<I: Iterator<Item = &'a Self>>(iter: I) -> Self {
        iter.fold(Self::zero(), |s, x| s + *x)
    }
}

impl<R: Real> Product for Traced<R> {
    fn product<I: Iterator<Item = Self>>(iter: I) -> Self {
        iter.fold(Self::one(), |s, x| s * x)
    }
}

// ------------------------------------------------------------- num-traits glue

impl<R: Real> Zero for Traced<R> {
    fn zero() -> Self {
        Self::constant(R::zero())
    }
    fn is_zero(&self) -> bool {
        self.v == R::zero()
    }
}

impl<R: Real> One for Traced<R> {
    fn one() -> Self {
        Self::constant(R::one())
    }
}

impl<R: Real> Num for Traced<R> {
    type FromStrRadixErr = R::FromStrRadixErr;
    fn from_str_radix(s: &str, radix: u32) -> Result<Self, Self::FromStrRadixErr> {
        R::from_str_radix(s, radix).map(Self::constant)
    }
}

macro_rules! to_prim {
    ($($m:ident $t:ty),*) => {$(
        fn $m(&self) -> Option<$t> {
            self.v.$m()
        }
    )*};
}

impl<R: Real> ToPrimitive for Traced<R> {
    to_prim!(to_isize isize, to_i8 i8, to_i16 i16, to_i32 i32, to_i64 i64, to_i128 i128,
             to_usize usize, to_u8 u8, to_u16 u16, to_u32 u32, to_u64 u64, to_u128 u128,
             to_f32 f32, to_f64 f64);
}

impl<R: Real> NumCast for Traced<R> {
    /// A constant; when converting it to `R` rounds (an `f64` constant in
    /// an `f32` forward), that rounding starts its bound.
    fn from<T: ToPrimitive>(n: T) -> Option<Self> {
        let exact = n.to_f64();
        let v = <R as NumCast>::from(n)?;
        let mut t = Self::constant(v);
        if exact.is_some_and(|e| e != v.as_f64()) {
            t.ev = v.as_f64().abs();
        }
        Some(t)
    }
}

impl<R: Real> fmt::Display for Traced<R> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "{} (±{:e}u, d {} ±{:e}u)",
            self.v, self.ev, self.d, self.ed
        )
    }
}

// ---------------------------------------------------------------------- Float

/// The local derivative `g` and its bound for `f(x)` when `g` is computed
/// from a quantity `base` already known with bound `e_base` (units of u):
/// `g = scale·base` costs `e_base·|scale|` plus the product's rounding.
fn from_value<R: Real>(scale: f64, base: R, e_base: f64) -> (R, f64) {
    let g = R::from_f64(scale) * base;
    (g, w(scale, e_base) + g.as_f64().abs())
}

impl<R: Real> Float for Traced<R> {
    fn nan() -> Self {
        Self::constant(R::nan())
    }
    fn infinity() -> Self {
        Self::constant(R::infinity())
    }
    fn neg_infinity() -> Self {
        Self::constant(R::neg_infinity())
    }
    fn neg_zero() -> Self {
        Self::constant(R::neg_zero())
    }
    fn min_value() -> Self {
        Self::constant(R::min_value())
    }
    fn min_positive_value() -> Self {
        Self::constant(R::min_positive_value())
    }
    fn epsilon() -> Self {
        Self::constant(R::epsilon())
    }
    fn max_value() -> Self {
        Self::constant(R::max_value())
    }
    fn is_nan(self) -> bool {
        self.v.is_nan()
    }
    fn is_infinite(self) -> bool {
        self.v.is_infinite()
    }
    fn is_finite(self) -> bool {
        self.v.is_finite()
    }
    fn is_normal(self) -> bool {
        self.v.is_normal()
    }
    fn classify(self) -> FpCategory {
        self.v.classify()
    }
    fn integer_decode(self) -> (u64, i16, i8) {
        self.v.integer_decode()
    }
    fn is_sign_positive(self) -> bool {
        self.v.is_sign_positive()
    }
    fn is_sign_negative(self) -> bool {
        self.v.is_sign_negative()
    }
    fn floor(self) -> Self {
        Self::flat(self.v.floor())
    }
    fn ceil(self) -> Self {
        Self::flat(self.v.ceil())
    }
    fn round(self) -> Self {
        Self::flat(self.v.round())
    }
    fn trunc(self) -> Self {
        Self::flat(self.v.trunc())
    }
    fn fract(self) -> Self {
        self - self.trunc()
    }
    fn signum(self) -> Self {
        Self::flat(self.v.signum())
    }
    /// Decided on the value, like a backward's `if x < 0`.
    fn abs(self) -> Self {
        if self.v < R::zero() {
            -self
        } else {
            self
        }
    }
    fn max(self, other: Self) -> Self {
        if other.v > self.v || self.v.is_nan() {
            other
        } else {
            self
        }
    }
    fn min(self, other: Self) -> Self {
        if other.v < self.v || self.v.is_nan() {
            other
        } else {
            self
        }
    }
    fn clamp(self, min: Self, max: Self) -> Self {
        self.max(min).min(max)
    }
    fn abs_sub(self, other: Self) -> Self {
        if self.v > other.v {
            self - other
        } else {
            Self::zero()
        }
    }
    fn mul_add(self, a: Self, b: Self) -> Self {
        self * a + b
    }
    fn recip(self) -> Self {
        Self::one() / self
    }
    fn powi(self, n: i32) -> Self {
        if n == 0 {
            return Self::one();
        }
        let v = self.v.powi(n);
        let nf = <f64 as From<i32>>::from(n);
        let lower = self.v.powi(n - 1);
        // x^(n−1) carries up to |n−1| + 1 roundings of its own, and the
        // argument's error times its derivative (none for n = 1).
        let slope = if n == 1 {
            0.0
        } else {
            (nf - 1.0) * self.v.powi(n - 2).as_f64()
        };
        let lower_err = w(slope, self.ev) + (nf.abs() + 1.0) * lower.as_f64().abs();
        let (g, eg) = from_value(nf, lower, lower_err);
        self.unary(v, nf.abs() + 1.0, g, eg)
    }
    fn powf(self, n: Self) -> Self {
        if n.d == R::zero() && n.ev == 0.0 && n.ed == 0.0 {
            // A constant exponent: g = n·x^(n−1) = n·v/x.
            let v = self.v.powf(n.v);
            let x = self.x();
            let g = n.v * v / self.v;
            let rel = w((n.x() - 1.0) / x, self.ev);
            return self.unary(v, LIBRARY, g, g.as_f64().abs() * (rel + LIBRARY + 2.0));
        }
        // x^y = exp(y·ln x), with the library's value.
        let composed = (n * self.ln()).exp();
        Traced {
            v: self.v.powf(n.v),
            ..composed
        }
    }
    fn sqrt(self) -> Self {
        let v = self.v.sqrt();
        let vf = v.as_f64();
        // The value's bound: μ/(2√x), or √(μ/u)-sized where x is near 0.
        let ev = if self.ev == 0.0 {
            0.0
        } else {
            (self.ev / (2.0 * vf)).min((self.ev * 2.0 / R::EPS).sqrt())
        } + vf;
        let g = R::from_f64(0.5) / v;
        let eg = w(g.as_f64() / vf, ev) + 2.0 * g.as_f64().abs();
        let mut t = self.unary(v, 1.0, g, eg);
        t.ev = ev;
        t
    }
    fn cbrt(self) -> Self {
        let v = self.v.cbrt();
        let g = R::one() / (R::from_f64(3.0) * v * v);
        let vf = v.as_f64();
        let eg =
            w(2.0 * g.as_f64() / vf, w(1.0 / (3.0 * vf * vf), self.ev)) + 3.0 * g.as_f64().abs();
        self.unary(v, LIBRARY, g, eg)
    }
    fn exp(self) -> Self {
        let v = self.v.exp();
        let ev = w(v.as_f64(), self.ev) + LIBRARY * v.as_f64().abs();
        self.unary(v, LIBRARY, v, ev)
    }
    fn exp2(self) -> Self {
        let v = self.v.exp2();
        let ev = w(v.as_f64() * std::f64::consts::LN_2, self.ev) + LIBRARY * v.as_f64().abs();
        let (g, eg) = from_value(std::f64::consts::LN_2, v, ev);
        self.unary(v, LIBRARY, g, eg)
    }
    fn exp_m1(self) -> Self {
        let v = self.v.exp_m1();
        let g = v + R::one();
        let ev = w(g.as_f64(), self.ev) + LIBRARY * v.as_f64().abs();
        self.unary(v, LIBRARY, g, ev + g.as_f64().abs())
    }
    fn ln(self) -> Self {
        let x = self.x();
        let g = R::one() / self.v;
        let eg = w(g.as_f64() / x, self.ev) + g.as_f64().abs();
        self.unary(self.v.ln(), LIBRARY, g, eg)
    }
    fn log2(self) -> Self {
        self.ln() * Self::constant(R::from_f64(std::f64::consts::LOG2_E))
    }
    fn log10(self) -> Self {
        self.ln() * Self::constant(R::from_f64(std::f64::consts::LOG10_E))
    }
    fn log(self, base: Self) -> Self {
        self.ln() / base.ln()
    }
    fn ln_1p(self) -> Self {
        let one_plus = self.v + R::one();
        let g = R::one() / one_plus;
        let eg = w(
            g.as_f64() / one_plus.as_f64(),
            self.ev + one_plus.as_f64().abs(),
        ) + g.as_f64().abs();
        self.unary(self.v.ln_1p(), LIBRARY, g, eg)
    }
    fn sin(self) -> Self {
        let (s, c) = self.v.sin_cos();
        let eg = w(s.as_f64(), self.ev) + LIBRARY * c.as_f64().abs();
        self.unary(s, LIBRARY, c, eg)
    }
    fn cos(self) -> Self {
        let (s, c) = self.v.sin_cos();
        let eg = w(c.as_f64(), self.ev) + LIBRARY * s.as_f64().abs();
        self.unary(c, LIBRARY, -s, eg)
    }
    fn sin_cos(self) -> (Self, Self) {
        (self.sin(), self.cos())
    }
    fn tan(self) -> Self {
        // tan′ = 1 + t².
        let t = self.v.tan();
        let tf = t.as_f64();
        let et = w(1.0 + tf * tf, self.ev) + LIBRARY * tf.abs();
        let g = R::one() + t * t;
        let eg = w(2.0 * tf, et) + 2.0 * tf * tf + g.as_f64().abs();
        self.unary(t, LIBRARY, g, eg)
    }
    fn asin(self) -> Self {
        // asin′ = 1/√(1 − x²): the difference cancels near |x| = 1.
        let x = self.x();
        let one_minus = R::one() - self.v * self.v;
        let g = R::one() / one_minus.sqrt();
        let gf = g.as_f64().abs();
        let e_inner = w(2.0 * x, self.ev) + x * x + one_minus.as_f64().abs();
        let eg = gf * (0.5 * e_inner * gf * gf + 2.0);
        self.unary(self.v.asin(), LIBRARY, g, eg)
    }
    fn acos(self) -> Self {
        let t = (-self).asin();
        Traced {
            v: self.v.acos(),
            ..t
        }
    }
    fn atan(self) -> Self {
        let x = self.x();
        let one_plus = R::one() + self.v * self.v;
        let g = R::one() / one_plus;
        let gf = g.as_f64().abs();
        let eg = gf * ((w(2.0 * x, self.ev) + x * x + one_plus.as_f64()) * gf + 1.0);
        self.unary(self.v.atan(), LIBRARY, g, eg)
    }
    fn atan2(self, other: Self) -> Self {
        // atan2(y, x) = atan(y/x) up to a constant on each branch.
        let t = (self / other).atan();
        Traced {
            v: self.v.atan2(other.v),
            ..t
        }
    }
    fn sinh(self) -> Self {
        let (s, c) = (self.v.sinh(), self.v.cosh());
        let eg = w(s.as_f64(), self.ev) + LIBRARY * c.as_f64().abs();
        self.unary(s, LIBRARY, c, eg)
    }
    fn cosh(self) -> Self {
        let (s, c) = (self.v.sinh(), self.v.cosh());
        let eg = w(c.as_f64(), self.ev) + LIBRARY * s.as_f64().abs();
        self.unary(c, LIBRARY, s, eg)
    }
    fn tanh(self) -> Self {
        // tanh′ = 1 − t², from the value: the subtraction keeps no digit
        // of a tiny 1 − t² once t rounds near ±1.
        let t = self.v.tanh();
        let tf = t.as_f64();
        let et = w(1.0 - tf * tf, self.ev) + LIBRARY * tf.abs();
        let g = R::one() - t * t;
        let eg = w(2.0 * tf, et) + tf * tf + g.as_f64().abs();
        self.unary(t, LIBRARY, g, eg)
    }
    fn asinh(self) -> Self {
        let x = self.x();
        let g = R::one() / (R::one() + self.v * self.v).sqrt();
        let gf = g.as_f64().abs();
        let eg = gf * ((w(x, self.ev) + x * x) * gf * gf + 3.0);
        self.unary(self.v.asinh(), LIBRARY, g, eg)
    }
    fn acosh(self) -> Self {
        let x = self.x();
        let g = R::one() / (self.v * self.v - R::one()).sqrt();
        let gf = g.as_f64().abs();
        let eg = gf * ((w(x, self.ev) + x * x) * gf * gf + 3.0);
        self.unary(self.v.acosh(), LIBRARY, g, eg)
    }
    fn atanh(self) -> Self {
        let x = self.x();
        let g = R::one() / (R::one() - self.v * self.v);
        let gf = g.as_f64().abs();
        let eg = gf * ((w(2.0 * x, self.ev) + x * x) * gf + 2.0);
        self.unary(self.v.atanh(), LIBRARY, g, eg)
    }
    fn hypot(self, other: Self) -> Self {
        let v = self.v.hypot(other.v);
        let t = (self * self + other * other).sqrt();
        Traced { v, ..t }
    }
    fn to_degrees(self) -> Self {
        self * Self::constant(R::from_f64(180.0 / std::f64::consts::PI))
    }
    fn to_radians(self) -> Self {
        self * Self::constant(R::from_f64(std::f64::consts::PI / 180.0))
    }
}

impl<R: Real> Scalar for Traced<R> {
    /// erf′(x) = (2/√π)·e^(−x²) (NIST DLMF 7.10.1), with the rounding of
    /// the square, the exponential and the product.
    fn erf(self) -> Self {
        let x = self.x();
        let g = R::from_f64(std::f64::consts::FRAC_2_SQRT_PI) * (-(self.v * self.v)).exp();
        let gf = g.as_f64().abs();
        let eg = gf * (w(2.0 * x, self.ev) + x * x + LIBRARY + 2.0);
        self.unary(self.v.erf(), LIBRARY, g, eg)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const U: f64 = f64::EPSILON / 2.0;

    fn seed(x: f64) -> Traced<f64> {
        Traced::input(x, 1.0)
    }

    /// The bound on the derivative, in absolute terms.
    fn bound(t: Traced<f64>) -> f64 {
        t.ed * U
    }

    #[test]
    fn every_operation_charges_its_rounding() {
        // Multiplying by 2 and adding a power of two are exact in binary
        // floating point, but the running bound cannot know that: it
        // charges one rounding per operation, |result|·u (Higham 2002,
        // §3.3, the model fl(x op y) = (x op y)(1 + δ), |δ| ≤ u).
        let t = seed(3.0) * Traced::constant(2.0) + Traced::constant(1.0);
        assert_eq!((t.v, t.d), (7.0, 2.0));
        assert_eq!(t.ev, 6.0 + 7.0);
        // The derivative 0·3 + 1·2 is two products and a sum (2 + 2),
        // then the addition of the constant (2).
        assert_eq!(t.ed, 2.0 + 2.0 + 2.0);
        // An input is exact.
        assert_eq!((seed(0.1).ev, seed(0.1).ed), (0.0, 0.0));
    }

    #[test]
    fn one_plus_tanh_at_saturation_keeps_no_digit_of_its_derivative() {
        // d/du (1 + tanh u) = 1 − tanh²u = sech²u. At u = −16 the exact
        // value is 4·e^(−32)/(1 + e^(−32))² ≈ 5.07e-14 (from the definition
        // sech u = 2/(eᵘ + e⁻ᵘ), DLMF 4.28.2). The formula 1 − t² with t
        // rounded to the nearest double next to −1 is off by up to an ulp of
        // 1 (2.2e-16): a relative error near 0.4%, which the bound must cover.
        let u = -16.0_f64;
        let t = Traced::constant(1.0) + seed(u).tanh();
        let exact = 4.0 * (2.0 * u).exp() / (1.0 + (2.0 * u).exp()).powi(2);
        assert!((t.d - exact).abs() <= bound(t), "{t}, exact {exact:e}");
        assert!(
            bound(t) > 1e-3 * exact,
            "the bound should show the lost digits: {t}"
        );
        // At u = 0.3 nothing cancels: the bound is a few ulps.
        let t = Traced::constant(1.0) + seed(0.3).tanh();
        assert!(bound(t) < 16.0 * U * t.d.abs(), "{t}");
    }

    #[test]
    fn a_difference_of_squares_that_cancels_shows_in_the_value_bound() {
        // (r + a)² − a² at r = 1e-9, a = 3.85: the exact value is
        // 2ar + r² = 7.7e-9 + 1e-18 (algebra); the computed one loses about
        // eight digits, which the value's bound covers.
        let (r, a) = (1e-9_f64, 3.85);
        let s = seed(r) + Traced::constant(a);
        let t = s * s - Traced::constant(a) * Traced::constant(a);
        let exact = 2.0 * a * r + r * r;
        assert!((t.v - exact).abs() <= t.ev * U, "{t}");
        assert!(t.ev * U > 1e-9 * exact.abs(), "{t}");
        // Its derivative 2(r + a) does not cancel.
        assert!(
            (t.d - 2.0 * (r + a)).abs() <= bound(t) && bound(t) < 1e-14,
            "{t}"
        );
    }

    #[test]
    fn the_derivative_bound_covers_the_derivative_of_a_long_sum() {
        // Σ_{k=1}^{n} x/k at x = 1: the derivative is the harmonic number
        // H_n; H_1000 = 7.485470860550345 (DLMF 2.10.8 with the Euler
        // constant γ = 0.5772156649015329, DLMF 5.2.3:
        // ln 1000 + γ + 1/2000 − 1/(12·10⁶), to 16 digits).
        let x = seed(1.0);
        let s: Traced<f64> = (1..=1000)
            .map(|k: i32| x / Traced::constant(<f64 as From<i32>>::from(k)))
            .sum();
        let h = 7.485_470_860_550_345;
        assert!((s.d - h).abs() <= bound(s) + 1e-15, "{s}");
        assert!(bound(s) < 1e-11, "{s}");
    }

    #[test]
    fn library_functions_have_the_derivatives_of_the_handbook() {
        // DLMF 4.5.1 (ln), 4.4.x (exp), 4.14.x (sin, cos), 7.10.1 (erf),
        // 4.34.x (tanh), 4.24 (inverse trig), 4.40 (inverse hyperbolic).
        type Rule = fn(Traced<f64>) -> Traced<f64>;
        let cases: [(Rule, f64, f64); 14] = [
            (|t| t.ln(), 2.0, 0.5),
            (|t| t.exp(), 0.5, 0.5_f64.exp()),
            (|t| t.sin(), 0.7, 0.7_f64.cos()),
            (|t| t.cos(), 0.7, -(0.7_f64.sin())),
            (
                |t| t.erf(),
                0.5,
                std::f64::consts::FRAC_2_SQRT_PI * (-0.25_f64).exp(),
            ),
            (|t| t.tanh(), 0.5, 1.0 - 0.5_f64.tanh().powi(2)),
            (|t| t.asin(), 0.5, 1.0 / 0.75_f64.sqrt()),
            (|t| t.acos(), 0.5, -1.0 / 0.75_f64.sqrt()),
            (|t| t.atan(), 0.5, 0.8),
            (|t| t.asinh(), 0.75, 0.8),
            (|t| t.atanh(), 0.5, 4.0 / 3.0),
            (|t| t.sqrt(), 4.0, 0.25),
            (|t| t.powi(3), 2.0, 12.0),
            (|t| t.powf(Traced::constant(1.5)), 4.0, 3.0),
        ];
        for (k, (f, x, want)) in cases.iter().enumerate() {
            let t = f(seed(*x));
            assert!(
                (t.d - want).abs() <= bound(t).max(4.0 * U * want.abs()),
                "case {k}: {t}, want {want}"
            );
            assert!(bound(t) < 64.0 * U * want.abs(), "case {k}: {t}");
        }
    }

    #[test]
    fn constants_rounded_into_f32_start_their_bound() {
        // 0.1 is not a binary fraction: as f32 it rounds.
        let t: Traced<f32> = NumCast::from(0.1_f64).unwrap();
        assert!(t.ev > 0.0);
        let t: Traced<f32> = NumCast::from(0.5_f64).unwrap();
        assert_eq!(t.ev, 0.0);
    }
}
