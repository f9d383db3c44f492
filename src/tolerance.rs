//! The one place where an element's error bound is computed, and the rules
//! every bound setting must satisfy.
//!
//! An element disagrees only when `|analytic − numeric|` exceeds
//!
//! ```text
//! bound = margin × ( reference error
//!                    + ROUNDING_ULPS · ε_layer · max(A · (Σ|terms| + |n| + forward scale), |a|)
//!                    + the layer precision's smallest normal number )
//! ```
//!
//! * *reference error*: the scheme's own estimate ([`Estimate::error`]):
//!   about `4ε₆₄·Σ|terms|` for the complex step, the extrapolation's error
//!   ×10 for Ridders' method, the step spread plus rounding for central
//!   differences; widened where a second look measured the forward's own
//!   rounding at the point;
//! * the rounding floor of the backward itself, computed in the layer's
//!   precision (`ε_layer` is `f32::EPSILON` or `f64::EPSILON`), scaled by
//!   `Σ|terms|` = Σᵢ|wᵢ ∂yᵢ/∂x|: the magnitudes a backward sums to produce
//!   this element, so cancellation in that sum widens the bound where it
//!   must; the *forward scale* Σ|wᵢyᵢ|/max(|x|, 1) over the outputs this
//!   element moves covers rounding in quantities the backward derives from
//!   forward values (`1 − tanh²` at saturation has absolute error ~ε,
//!   however small the derivative);
//! * `A`, the forward's rounding amplification at the point (1 unless
//!   measured there: an `f32` forward compared with the same forward in
//!   `f64`, or a second look at an element that disagrees);
//! * `margin` (default [`DEFAULT_MARGIN`]) is the one knob.
//!
//! Users may instead set fixed bounds, `max_absolute` and `max_relative`;
//! an element then agrees if either holds, as in `approx::relative_eq!`.

use crate::error::Error;
use crate::scheme::Estimate;

/// Default multiple of the estimated error bar an element may deviate by.
pub const DEFAULT_MARGIN: f64 = 4.0;

/// The largest margin accepted: beyond it the bound stops meaning anything
/// (ten thousand times the reference's own error bar).
pub const MAX_MARGIN: f64 = 1e4;

/// ULPs of the layer's precision allowed per unit of Σ|terms| for the
/// rounding of the backward pass.
pub const ROUNDING_ULPS: f64 = 8.0;

/// The smallest normal number of the layer's precision (told apart by its
/// ε; `Real` is `f32` or `f64`): a gradient below it is not resolved by
/// that precision at all (e^(−124) flushes to 0 in `f32`), so differences
/// that small say nothing about the backward.
fn resolution(layer_eps: f64) -> f64 {
    if layer_eps >= f64::from(f32::EPSILON) {
        f64::from(f32::MIN_POSITIVE)
    } else {
        f64::MIN_POSITIVE
    }
}

/// How the bound for each element is set.
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub(crate) struct Tolerance {
    /// Multiple of the error bar (default [`DEFAULT_MARGIN`]).
    pub margin: f64,
    /// Fixed absolute bound, replacing the error bar.
    pub max_absolute: Option<f64>,
    /// Fixed relative bound, replacing the error bar.
    pub max_relative: Option<f64>,
}

impl Default for Tolerance {
    fn default() -> Self {
        Tolerance {
            margin: DEFAULT_MARGIN,
            max_absolute: None,
            max_relative: None,
        }
    }
}

fn refuse(setting: &str, value: f64, detail: &str) -> Error {
    Error::Setting {
        setting: setting.to_string(),
        value: short(value),
        detail: detail.to_string(),
    }
}

/// A number as a person types it: `4`, `0.5`, `1e300`, `-1e-9`, `NaN`.
fn short(x: f64) -> String {
    let a = x.abs();
    if a != 0.0 && a.is_finite() && !(1e-4..1e16).contains(&a) {
        format!("{x:e}")
    } else {
        x.to_string()
    }
}

/// The rule for a margin, shared by the builder, the macro and
/// `PLUMBLINE_MARGIN` (with the factor applied).
pub(crate) fn check_margin(setting: &str, m: f64) -> Result<(), Error> {
    if m.is_finite() && m > 0.0 && m <= MAX_MARGIN {
        Ok(())
    } else {
        Err(refuse(
            setting,
            m,
            "a margin must be a finite number above 0 and at most 10000 (a larger one accepts anything)",
        ))
    }
}

/// The rule for a fixed absolute bound.
pub(crate) fn check_max_absolute(setting: &str, a: f64) -> Result<(), Error> {
    if a.is_finite() && a >= 0.0 {
        Ok(())
    } else {
        Err(refuse(
            setting,
            a,
            "an absolute bound must be a finite number ≥ 0",
        ))
    }
}

/// The rule for a fixed relative bound: below 1, because a relative bound
/// of 1 accepts any value of the right sign.
pub(crate) fn check_max_relative(setting: &str, r: f64) -> Result<(), Error> {
    if r.is_finite() && (0.0..1.0).contains(&r) {
        Ok(())
    } else {
        Err(refuse(
            setting,
            r,
            "a relative bound must be a finite number ≥ 0 and below 1 (1 accepts any value of the right sign)",
        ))
    }
}

impl Tolerance {
    /// Checks every setting; a fixed rule needs one bound above 0.
    pub fn validate(&self) -> Result<(), Error> {
        check_margin("margin", self.margin)?;
        if let Some(a) = self.max_absolute {
            check_max_absolute("max_absolute", a)?;
        }
        if let Some(r) = self.max_relative {
            check_max_relative("max_relative", r)?;
        }
        if self.max_absolute.unwrap_or(0.0) == 0.0
            && self.max_relative.unwrap_or(0.0) == 0.0
            && (self.max_absolute.is_some() || self.max_relative.is_some())
        {
            return Err(refuse(
                "max_absolute / max_relative",
                0.0,
                "fixed bounds of 0 fail every correct layer; set one above 0",
            ));
        }
        Ok(())
    }

    /// `true` when fixed bounds replace the error bar.
    pub fn is_fixed(&self) -> bool {
        self.max_absolute.is_some() || self.max_relative.is_some()
    }

    /// The largest `|analytic − numeric|` accepted for one element.
    ///
    /// A non-finite estimate yields a NaN bound, which nothing passes.
    pub fn bound(&self, estimate: &Estimate, analytic: f64, layer_eps: f64) -> f64 {
        if !(estimate.value.is_finite() && estimate.error.is_finite() && analytic.is_finite()) {
            return f64::NAN;
        }
        if self.is_fixed() {
            let abs = self.max_absolute.unwrap_or(0.0);
            let rel = self.max_relative.unwrap_or(0.0) * analytic.abs().max(estimate.value.abs());
            return abs.max(rel);
        }
        // The amplification applies to what the forward's formulas feed the
        // backward (the terms, the reference's size, the forward values),
        // never to the analytic value itself: a wrong gradient must not
        // widen its own bound.
        let amplified = estimate.amplification
            * (estimate.scale + estimate.value.abs() + estimate.forward_scale);
        let floor = ROUNDING_ULPS * layer_eps * amplified.max(analytic.abs());
        self.margin * (estimate.error + floor + resolution(layer_eps))
    }

    /// The largest `|left − right|` accepted for an identity between two
    /// sums that are equal in exact arithmetic (the adjoint identity, the
    /// symmetry of a Hessian), given the estimated `rounding` of their
    /// difference and the larger of their magnitudes, `size`.
    ///
    /// With fixed bounds, the fixed rule applies to the two sums as to an
    /// element; otherwise `margin × (rounding + smallest normal)` of the
    /// precision with epsilon `eps`. A non-finite input gives NaN, which
    /// nothing passes.
    pub fn identity_bound(&self, rounding: f64, size: f64, eps: f64) -> f64 {
        if !(rounding.is_finite() && size.is_finite()) {
            return f64::NAN;
        }
        if self.is_fixed() {
            let abs = self.max_absolute.unwrap_or(0.0);
            return abs.max(self.max_relative.unwrap_or(0.0) * size);
        }
        self.margin * (rounding + resolution(eps))
    }

    /// `true` if the difference is within the bound. NaN never passes.
    pub fn accepts(diff: f64, bound: f64) -> bool {
        diff <= bound
    }

    /// A one-line description of the rule in force, for reports.
    pub fn describe(&self) -> String {
        match (self.max_absolute, self.max_relative) {
            (None, None) => format!(
                "|a-n| <= {} x (reference error + {} ulp x magnitudes)",
                self.margin, ROUNDING_ULPS
            ),
            (a, r) => format!(
                "|a-n| <= max(absolute {}, relative {} x max(|a|,|n|))",
                a.unwrap_or(0.0),
                r.unwrap_or(0.0)
            ),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// An estimate whose parts are all distinguishable in the bound:
    /// value 2, error `error`, Σ|terms| 3, forward scale 0.5.
    fn estimate(error: f64, amplification: f64) -> Estimate {
        Estimate {
            value: 2.0,
            error,
            scale: 3.0,
            forward_scale: 0.5,
            evals: 4,
            step: 1e-5,
            conclusive: true,
            amplification,
        }
    }

    fn close(got: f64, want: f64) -> bool {
        (got - want).abs() <= 1e-12 * want.abs()
    }

    fn setting_value(r: Result<(), Error>) -> String {
        match r {
            Err(Error::Setting { value, .. }) => value,
            other => panic!("expected a setting error, got {other:?}"),
        }
    }

    #[test]
    fn resolution_is_the_smallest_normal_of_the_layer_precision() {
        // IEEE 754 smallest normal numbers (from memory): binary32 2⁻¹²⁶,
        // binary64 2⁻¹⁰²².
        assert_eq!(
            resolution(f64::from(f32::EPSILON)),
            1.175_494_350_822_287_5e-38
        );
        assert_eq!(resolution(f64::EPSILON), 2.225_073_858_507_201_4e-308);
    }

    #[test]
    fn margins_outside_zero_to_ten_thousand_are_refused() {
        for ok in [4.0, 1e-300, 1.0, 1e4] {
            assert!(check_margin("margin", ok).is_ok(), "{ok}");
        }
        for bad in [
            0.0,
            -1.0,
            -4.0,
            1e4 * (1.0 + f64::EPSILON),
            f64::INFINITY,
            f64::NAN,
        ] {
            assert!(check_margin("margin", bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn absolute_bounds_must_be_finite_and_not_negative() {
        for ok in [0.0, 1e-12, 1.0] {
            assert!(check_max_absolute("max_absolute", ok).is_ok(), "{ok}");
        }
        for bad in [-1.0, -1e-300, f64::INFINITY, f64::NAN] {
            assert!(check_max_absolute("max_absolute", bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn relative_bounds_must_lie_in_zero_to_one() {
        for ok in [0.0, 1e-6, 0.5] {
            assert!(check_max_relative("max_relative", ok).is_ok(), "{ok}");
        }
        for bad in [1.0, 2.0, -0.1, f64::INFINITY, f64::NAN] {
            assert!(check_max_relative("max_relative", bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn refused_values_are_written_as_a_person_types_them() {
        assert_eq!(setting_value(check_margin("m", 0.0)), "0");
        assert_eq!(setting_value(check_margin("m", -4.0)), "-4");
        assert_eq!(setting_value(check_margin("m", 1e5)), "100000");
        assert_eq!(setting_value(check_margin("m", 1e300)), "1e300");
        assert_eq!(setting_value(check_margin("m", -1e-9)), "-1e-9");
        assert_eq!(setting_value(check_margin("m", f64::NAN)), "NaN");
        assert_eq!(setting_value(check_margin("m", f64::INFINITY)), "inf");
        assert_eq!(setting_value(check_max_relative("r", 1.5)), "1.5");
        match check_margin("PLUMBLINE_MARGIN", 0.0) {
            Err(Error::Setting {
                setting, detail, ..
            }) => {
                assert_eq!(setting, "PLUMBLINE_MARGIN");
                assert!(detail.contains("above 0"), "{detail}");
            }
            other => panic!("{other:?}"),
        }
    }

    #[test]
    fn validation_needs_one_fixed_bound_above_zero() {
        let tol = |margin, max_absolute, max_relative| Tolerance {
            margin,
            max_absolute,
            max_relative,
        };
        assert!(Tolerance::default().validate().is_ok());
        assert!(tol(0.0, None, None).validate().is_err());
        assert!(tol(4.0, Some(-1.0), None).validate().is_err());
        assert!(tol(4.0, None, Some(1.0)).validate().is_err());
        // Both bounds 0, or the only one set 0: every correct layer fails.
        assert!(tol(4.0, Some(0.0), Some(0.0)).validate().is_err());
        assert!(tol(4.0, Some(0.0), None).validate().is_err());
        assert!(tol(4.0, None, Some(0.0)).validate().is_err());
        // One bound above 0 is enough.
        assert!(tol(4.0, Some(1e-6), None).validate().is_ok());
        assert!(tol(4.0, None, Some(1e-3)).validate().is_ok());
        assert!(tol(4.0, Some(0.0), Some(1e-3)).validate().is_ok());
        assert!(tol(4.0, Some(1e-6), Some(0.0)).validate().is_ok());
    }

    #[test]
    fn fixed_when_either_bound_is_set() {
        assert!(!Tolerance::default().is_fixed());
        for (a, r) in [
            (Some(1e-6), None),
            (None, Some(1e-3)),
            (Some(1e-6), Some(1e-3)),
        ] {
            let t = Tolerance {
                max_absolute: a,
                max_relative: r,
                ..Tolerance::default()
            };
            assert!(t.is_fixed(), "{t:?}");
        }
    }

    #[test]
    fn the_bound_follows_the_documented_rule() {
        // Check values worked by hand from the rule in the module docs
        // (DEVELOPERS.md, "The bound rule"):
        // margin × (error + 8·ε·max(A·(Σ|terms| + |n| + forward scale), |a|)
        //           + smallest normal).
        let tol = Tolerance::default();
        let eps = f64::EPSILON;
        // 4 × (1e-10 + 8·2⁻⁵²·2·(3 + 2 + 0.5)), amplification 2, |a| = 1.
        let b = tol.bound(&estimate(1e-10, 2.0), 1.0, eps);
        assert!(close(b, 4.000_781_597_009_336e-10), "{b:e}");
        // The same with an error comparable to the rounding floor:
        // 4 × (1e-14 + 8·2⁻⁵²·2·5.5).
        let b = tol.bound(&estimate(1e-14, 2.0), 1.0, eps);
        assert!(close(b, 1.181_597_009_336_110_3e-13), "{b:e}");
        // A large analytic value sets the floor unamplified: 4 × 8·2⁻⁵²·100.
        let b = tol.bound(&estimate(0.0, 1.0), -100.0, eps);
        assert!(close(b, 7.105_427_357_601_002e-13), "{b:e}");
        // The layer's precision sets ε: 4 × (1e-10 + 8·2⁻²³·2·5.5 + 2⁻¹²⁶).
        let b = tol.bound(&estimate(1e-10, 2.0), 1.0, f64::from(f32::EPSILON));
        assert!(close(b, 4.196_206_992_187_5e-5), "{b:e}");
        // Nothing to scale: the bound is margin × the smallest normal
        // (IEEE 754 binary64 2⁻¹⁰²², binary32 2⁻¹²⁶, from memory).
        let zero = Estimate {
            value: 0.0,
            error: 0.0,
            scale: 0.0,
            forward_scale: 0.0,
            ..estimate(0.0, 1.0)
        };
        assert_eq!(
            tol.bound(&zero, 0.0, eps),
            4.0 * 2.225_073_858_507_201_4e-308
        );
        assert_eq!(
            tol.bound(&zero, 0.0, f64::from(f32::EPSILON)),
            4.0 * 1.175_494_350_822_287_5e-38
        );
        // The margin multiplies the whole bar.
        let ten = Tolerance {
            margin: 10.0,
            ..Tolerance::default()
        };
        let b = ten.bound(&estimate(1e-10, 2.0), 1.0, eps);
        assert!(close(b, 4.000_781_597_009_336e-10 * 2.5), "{b:e}");
    }

    #[test]
    fn an_identity_is_bounded_by_its_rounding_or_the_fixed_rule() {
        let t = Tolerance::default();
        // margin × (rounding + smallest normal of f64)
        let b = t.identity_bound(1e-15, 3.0, f64::EPSILON);
        assert!(close(b, 4.0 * (1e-15 + f64::MIN_POSITIVE)), "{b}");
        assert!(t.identity_bound(f64::NAN, 3.0, f64::EPSILON).is_nan());
        assert!(t
            .identity_bound(1e-15, f64::INFINITY, f64::EPSILON)
            .is_nan());
        let fixed = Tolerance {
            max_absolute: Some(1e-9),
            max_relative: Some(1e-3),
            ..Tolerance::default()
        };
        assert!(close(fixed.identity_bound(1e-15, 2.0, f64::EPSILON), 2e-3));
        assert!(close(fixed.identity_bound(1e-15, 1e-9, f64::EPSILON), 1e-9));
    }

    #[test]
    fn fixed_bounds_replace_the_error_bar() {
        let rel = Tolerance {
            max_relative: Some(0.01),
            ..Tolerance::default()
        };
        // 0.01 × max(|3|, |2|) = 0.03, whatever the estimate's error.
        let b = rel.bound(&estimate(1e-10, 1.0), -3.0, f64::EPSILON);
        assert!(close(b, 0.03), "{b:e}");
        // The numeric value when it is the larger: 0.01 × 2.
        let b = rel.bound(&estimate(5.0, 1.0), 0.5, f64::EPSILON);
        assert!(close(b, 0.02), "{b:e}");
        let both = Tolerance {
            max_absolute: Some(0.1),
            max_relative: Some(0.01),
            ..Tolerance::default()
        };
        assert_eq!(both.bound(&estimate(1e-10, 1.0), 3.0, f64::EPSILON), 0.1);
        let abs = Tolerance {
            max_absolute: Some(1e-6),
            ..Tolerance::default()
        };
        assert_eq!(abs.bound(&estimate(1e-10, 1.0), 300.0, f64::EPSILON), 1e-6);
    }

    #[test]
    fn a_non_finite_value_error_or_analytic_value_gives_a_nan_bound() {
        let fixed = Tolerance {
            max_absolute: Some(1e-6),
            max_relative: Some(1e-3),
            ..Tolerance::default()
        };
        for tol in [Tolerance::default(), fixed] {
            let mut e = estimate(1e-10, 1.0);
            assert!(tol.bound(&e, 1.0, f64::EPSILON).is_finite());
            e.value = f64::NAN;
            assert!(tol.bound(&e, 1.0, f64::EPSILON).is_nan(), "{tol:?}");
            let mut e = estimate(1e-10, 1.0);
            e.error = f64::INFINITY;
            assert!(tol.bound(&e, 1.0, f64::EPSILON).is_nan(), "{tol:?}");
            let e = estimate(1e-10, 1.0);
            assert!(tol.bound(&e, f64::NAN, f64::EPSILON).is_nan(), "{tol:?}");
            assert!(
                tol.bound(&e, f64::INFINITY, f64::EPSILON).is_nan(),
                "{tol:?}"
            );
        }
    }

    #[test]
    fn accepts_up_to_the_bound_and_never_nan() {
        assert!(Tolerance::accepts(1.0, 2.0));
        assert!(Tolerance::accepts(2.0, 2.0));
        assert!(!Tolerance::accepts(2.5, 2.0));
        assert!(!Tolerance::accepts(1.0, f64::NAN));
        assert!(!Tolerance::accepts(f64::NAN, 1.0));
    }

    #[test]
    fn descriptions_name_the_rule_in_force() {
        assert_eq!(
            Tolerance::default().describe(),
            "|a-n| <= 4 x (reference error + 8 ulp x magnitudes)"
        );
        let fixed = Tolerance {
            max_relative: Some(0.001),
            ..Tolerance::default()
        };
        assert_eq!(
            fixed.describe(),
            "|a-n| <= max(absolute 0, relative 0.001 x max(|a|,|n|))"
        );
    }
}
