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
