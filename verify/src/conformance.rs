//! Conformance of a result with a method's specification, in exact decimal arithmetic.
//!
//! The specification names its rounding rule: USP half up to the decimal places of each limit
//! (General Notices 7.20), ASTM E29's rounding method (to the limit's places, an exact 5 to even)
//! or absolute method (no rounding), or the significant figures of the limit. The value is
//! rounded by the rule for each limit separately, never the limits themselves, and then
//! compared. Values arrive as exact decimals: a reported value as written, or a recomputed
//! mean turned into a decimal by [`crate::rounding::decimal_from_f64`].

use crate::documents::Specification;
use crate::rounding::round;
use rust_decimal::Decimal;
use serde::Serialize;
use std::str::FromStr;

/// Which limit a value fails.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Side {
    /// Below the lower limit.
    Low,
    /// Above the upper limit.
    High,
}

/// The decision for one value.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct Decision {
    /// The value as compared with each limit that failed or, when it conforms, with the last
    /// limit checked (the value itself when the specification has no limits).
    pub compared: Decimal,
    /// `None` when the value conforms.
    pub fails: Option<Side>,
    /// The limit it failed, as written.
    pub limit: Option<String>,
}

impl Decision {
    /// Whether the value conforms.
    pub fn conforms(&self) -> bool {
        self.fails.is_none()
    }
}

/// Judges `value` (in the specification's unit) against the specification.
pub fn judge(value: Decimal, spec: &Specification) -> Result<Decision, String> {
    let mut compared = value;
    for (side, limit) in [(Side::Low, &spec.lower), (Side::High, &spec.upper)] {
        let Some(text) = limit else { continue };
        let limit = Decimal::from_str(text.trim())
            .map_err(|_| format!("specification limit {text:?} is not a number"))?;
        compared = round(value, spec.rule_for(text));
        let outside = match side {
            Side::Low => compared < limit,
            Side::High => compared > limit,
        };
        if outside {
            return Ok(Decision {
                compared,
                fails: Some(side),
                limit: Some(text.clone()),
            });
        }
    }
    Ok(Decision {
        compared,
        fails: None,
        limit: None,
    })
}

/// A specification's limits as one line, e.g. `29.0 – 32.0 %`.
pub fn limits_text(spec: &Specification) -> String {
    match (&spec.lower, &spec.upper) {
        (Some(low), Some(high)) => format!("{low} – {high} {}", spec.unit),
        (Some(low), None) => format!("≥ {low} {}", spec.unit),
        (None, Some(high)) => format!("≤ {high} {}", spec.unit),
        (None, None) => "no limits".to_string(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::documents::SpecRounding;

    fn spec(lower: Option<&str>, upper: Option<&str>, rounding: SpecRounding) -> Specification {
        Specification {
            quantity: "assay".into(),
            unit: "%".into(),
            lower: lower.map(str::to_string),
            upper: upper.map(str::to_string),
            rounding,
        }
    }

    fn conforms(value: &str, spec: &Specification) -> bool {
        judge(Decimal::from_str(value).unwrap(), spec)
            .unwrap()
            .conforms()
    }

    #[test]
    fn usp_general_notices_7_20_examples() {
        // USP General Notices 7.20, as quoted in REFERENCES.md §9 [pub]: limit ≥ 98.0 %.
        let low = spec(Some("98.0"), None, SpecRounding::UspHalfUp);
        assert!(conforms("97.96", &low)); // → 98.0 conforms
        assert!(!conforms("97.92", &low)); // → 97.9 fails
        assert!(conforms("97.95", &low)); // → 98.0 conforms (half up)

        // Same source, limit ≤ 101.5 %.
        let high = spec(None, Some("101.5"), SpecRounding::UspHalfUp);
        assert!(!conforms("101.55", &high)); // → 101.6 fails
        assert!(conforms("101.45", &high)); // → 101.5 conforms
        let decision = judge(Decimal::from_str("101.55").unwrap(), &high).unwrap();
        assert_eq!(decision.fails, Some(Side::High));
        assert_eq!(decision.compared, Decimal::from_str("101.6").unwrap());
    }

    #[test]
    fn astm_e29_rounding_goes_to_even_and_absolute_does_not_round() {
        // ASTM E29 rounding method: an exact 5 rounds to the even digit [pub/secondary, REFERENCES §9].
        // 97.85 to one decimal: half up gives 97.9, half even gives 97.8 (8 is even).
        let rounding = spec(Some("97.9"), None, SpecRounding::AstmE29Rounding);
        assert!(!conforms("97.85", &rounding));
        assert!(conforms("97.95", &rounding)); // → 98.0 (9 is odd, so the 5 rounds up)
        let usp = spec(Some("97.9"), None, SpecRounding::UspHalfUp);
        assert!(conforms("97.85", &usp));
        let absolute = spec(Some("98.0"), None, SpecRounding::AstmE29Absolute);
        assert!(!conforms("97.99", &absolute)); // compared as obtained
        assert!(conforms("98.00", &absolute));
    }

    #[test]
    fn significant_figures_of_the_limit() {
        // Ph. Eur. practice: round to the limit's significant figures [pub/secondary, REFERENCES §9].
        let s = spec(Some("29.0"), Some("32.0"), SpecRounding::SignificantFigures);
        assert!(conforms("28.96", &s)); // 3 figures → 29.0
        assert!(!conforms("28.94", &s)); // → 28.9
        assert!(!conforms("32.06", &s)); // → 32.1
    }

    #[test]
    fn a_limit_that_is_not_a_number_is_an_error() {
        let s = spec(Some("ninety"), None, SpecRounding::UspHalfUp);
        assert!(judge(Decimal::ONE, &s).is_err());
    }
}
