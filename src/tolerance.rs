//! The one place where an element's error bound is computed.
//!
//! An element disagrees only when `|analytic − numeric|` exceeds
//!
//! ```text
//! bound = margin × ( reference error
//!                    + ROUNDING_ULPS · ε_layer · (Σ|terms| + |numeric| + forward scale) )
//! ```
//!
//! * *reference error*: the scheme's own estimate ([`Estimate::error`]):
//!   about `4ε₆₄·Σ|terms|` for the complex step, the tableau error ×10 for
//!   Ridders' method, the step-spread plus rounding for central differences;
//! * the rounding floor of the backward itself, computed in the layer's
//!   precision (`ε_layer` is `f32::EPSILON` or `f64::EPSILON`), scaled by
//!   `Σ|terms|` = Σᵢ|wᵢ ∂yᵢ/∂x| — the magnitudes a backward sums to produce
//!   this element, so cancellation in that sum widens the bound where it must;
//!   the *forward scale* Σ|wᵢyᵢ|/max(|x|, 1) over the outputs this element
//!   moves covers rounding in quantities the backward derives from forward
//!   values (`1 − tanh²` at saturation has absolute error ~ε, however small
//!   the derivative);
//! * `margin` (default [`DEFAULT_MARGIN`]) is the one knob.
//!
//! Users may instead set approx-style `epsilon` (absolute) and
//! `max_relative` bounds; an element then agrees if either holds, as in
//! `approx::relative_eq!`.

use crate::scheme::Estimate;

/// Default multiple of the estimated error bar an element may deviate by.
pub const DEFAULT_MARGIN: f64 = 4.0;

/// ULPs of the layer's precision allowed per unit of Σ|terms| for the
/// rounding of the backward pass.
pub const ROUNDING_ULPS: f64 = 8.0;

/// How the bound for each element is set.
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Tolerance {
    /// Multiple of the error bar (default [`DEFAULT_MARGIN`]).
    pub margin: f64,
    /// Fixed absolute bound, replacing the error bar (approx's `epsilon`).
    pub epsilon: Option<f64>,
    /// Fixed relative bound, replacing the error bar (approx's `max_relative`).
    pub max_relative: Option<f64>,
}

impl Default for Tolerance {
    fn default() -> Self {
        Tolerance {
            margin: DEFAULT_MARGIN,
            epsilon: None,
            max_relative: None,
        }
    }
}

impl Tolerance {
    /// The largest `|analytic − numeric|` accepted for one element.
    ///
    /// A non-finite estimate yields a NaN bound, which nothing passes.
    pub fn bound(&self, estimate: &Estimate, analytic: f64, layer_eps: f64) -> f64 {
        if !(estimate.value.is_finite() && estimate.error.is_finite() && analytic.is_finite()) {
            return f64::NAN;
        }
        if self.epsilon.is_some() || self.max_relative.is_some() {
            let abs = self.epsilon.unwrap_or(0.0);
            let rel = self.max_relative.unwrap_or(0.0) * analytic.abs().max(estimate.value.abs());
            return abs.max(rel);
        }
        let floor = ROUNDING_ULPS
            * layer_eps
            * (estimate.scale + estimate.value.abs() + estimate.forward_scale);
        self.margin * (estimate.error + floor)
    }

    /// `true` if the difference is within the bound. NaN never passes.
    pub fn accepts(diff: f64, bound: f64) -> bool {
        diff <= bound
    }

    /// A one-line description of the rule in force, for reports.
    pub fn describe(&self) -> String {
        match (self.epsilon, self.max_relative) {
            (None, None) => format!(
                "|a-n| <= {} x (reference error + {} ulp x magnitudes)",
                self.margin, ROUNDING_ULPS
            ),
            (e, r) => format!(
                "|a-n| <= max(epsilon {}, max_relative {} x max(|a|,|n|))",
                e.unwrap_or(0.0),
                r.unwrap_or(0.0)
            ),
        }
    }
}
