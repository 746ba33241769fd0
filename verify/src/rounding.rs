//! Rounding for reporting and for conformance, in exact decimal arithmetic.
//!
//! Owns the rounding rules a specification can name (USP half-up to the limit's places, the ASTM
//! E29 rounding method with round-half-even, the E29 absolute method with no rounding,
//! significant figures), the GUM 7.2.6 presentation of a result with its expanded uncertainty
//! (U to at most two significant digits, the value to the same decimal place), and the one
//! sanctioned way to turn a computed `f64` into a decimal (its shortest round-trip text, so
//! `2.675` stays 2.675 and rounds half-up to 2.68 instead of the binary 2.67).

use rust_decimal::{Decimal, RoundingStrategy};
use serde::{Deserialize, Serialize};
use std::str::FromStr;

/// How a value is rounded before it is compared with a limit or reported.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "rule", rename_all = "kebab-case")]
pub enum RoundingRule {
    /// Round half up (away from zero) to `places` decimals: USP General Notices 7.20, with
    /// `places` taken from the limit as written.
    HalfUp {
        /// Decimal places kept.
        places: u32,
    },
    /// ASTM E29 rounding method: to `places` decimals, an exact 5 rounding to the even digit.
    HalfEven {
        /// Decimal places kept.
        places: u32,
    },
    /// ASTM E29 absolute method: the value is compared as obtained, never rounded.
    Absolute,
    /// Half up to a number of significant figures.
    SignificantFigures {
        /// Significant figures kept.
        figures: u32,
    },
}

/// Rounds `value` by `rule`.
pub fn round(value: Decimal, rule: RoundingRule) -> Decimal {
    match rule {
        RoundingRule::HalfUp { places } => {
            value.round_dp_with_strategy(places, RoundingStrategy::MidpointAwayFromZero)
        }
        RoundingRule::HalfEven { places } => {
            value.round_dp_with_strategy(places, RoundingStrategy::MidpointNearestEven)
        }
        RoundingRule::Absolute => value,
        RoundingRule::SignificantFigures { figures } => {
            round_to_significant(value, figures, RoundingStrategy::MidpointAwayFromZero)
        }
    }
}

/// Decimal places of a number as written, e.g. `"98.0"` → 1, `"102"` → 0.
pub fn places_as_written(text: &str) -> u32 {
    text.trim()
        .split_once('.')
        .map_or(0, |(_, digits)| digits.len() as u32)
}

/// The decimal a computed `f64` prints as (shortest text that reads back to the same double).
/// `None` for NaN, infinities and magnitudes beyond `Decimal`.
pub fn decimal_from_f64(value: f64) -> Option<Decimal> {
    if !value.is_finite() {
        return None;
    }
    Decimal::from_str(&format!("{value}"))
        .or_else(|_| Decimal::from_scientific(&format!("{value:e}")))
        .ok()
}

/// Power of ten of the leading digit: 0.00201 → -3, 98.4 → 1. `None` for zero.
pub fn leading_exponent(value: Decimal) -> Option<i64> {
    let magnitude = value.abs();
    if magnitude.is_zero() {
        return None;
    }
    let mut exponent = 0i64;
    let mut scaled = magnitude;
    let ten = Decimal::TEN;
    while scaled >= ten {
        scaled /= ten;
        exponent += 1;
    }
    while scaled < Decimal::ONE {
        scaled *= ten;
        exponent -= 1;
    }
    Some(exponent)
}

/// Rounds to a number of decimal places that may be negative (−1 rounds to tens).
pub fn round_to_place(value: Decimal, places: i64, strategy: RoundingStrategy) -> Decimal {
    if places >= 0 {
        return value.round_dp_with_strategy(places.min(28) as u32, strategy);
    }
    let factor = Decimal::from(10i64.pow(places.unsigned_abs().min(18) as u32));
    (value / factor).round_dp_with_strategy(0, strategy) * factor
}

/// Rounds to `figures` significant figures with `strategy`.
pub fn round_to_significant(value: Decimal, figures: u32, strategy: RoundingStrategy) -> Decimal {
    match leading_exponent(value) {
        None => value,
        Some(exponent) => round_to_place(value, figures as i64 - 1 - exponent, strategy),
    }
}

/// How the expanded uncertainty is rounded to two significant digits.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum UncertaintyRounding {
    /// To the nearest (half up).
    #[default]
    Nearest,
    /// Always up, never understating the uncertainty (GUM 7.2.6 allows this).
    Up,
}

/// A result as reported: the expanded uncertainty with two significant digits and the value
/// rounded half up to the same decimal place (GUM, JCGM 100:2008, 7.2.6).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub struct Reported {
    /// The value, rounded.
    pub value: Decimal,
    /// The expanded uncertainty, rounded.
    pub expanded_uncertainty: Decimal,
    /// Decimal place both are rounded to (may be negative for large values).
    pub places: i64,
}

/// Rounds a value and its expanded uncertainty for reporting. `None` if either is not finite or
/// the uncertainty is not positive.
pub fn report(value: f64, expanded: f64, mode: UncertaintyRounding) -> Option<Reported> {
    let value = decimal_from_f64(value)?;
    let expanded = decimal_from_f64(expanded)?;
    if expanded <= Decimal::ZERO {
        return None;
    }
    let strategy = match mode {
        UncertaintyRounding::Nearest => RoundingStrategy::MidpointAwayFromZero,
        UncertaintyRounding::Up => RoundingStrategy::AwayFromZero,
    };
    let mut places = 1 - leading_exponent(expanded)?;
    let mut rounded_u = round_to_place(expanded, places, strategy);
    // Rounding 9.96e-3 gives 1.0e-2: keep two significant digits of the rounded value.
    if leading_exponent(rounded_u)? > leading_exponent(expanded)? {
        places -= 1;
        rounded_u = round_to_place(rounded_u, places, strategy);
    }
    Some(Reported {
        value: round_to_place(value, places, RoundingStrategy::MidpointAwayFromZero),
        expanded_uncertainty: rounded_u,
        places,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn d(text: &str) -> Decimal {
        Decimal::from_str(text).unwrap()
    }

    // USP General Notices 7.20 examples, REFERENCES.md section 9 [pub]: round half up to the
    // decimal places of the limit (98.0 and 101.5, one place).
    #[test]
    fn usp_half_up_examples() {
        let rule = RoundingRule::HalfUp {
            places: places_as_written("98.0"),
        };
        assert_eq!(round(d("97.96"), rule), d("98.0"));
        assert_eq!(round(d("97.92"), rule), d("97.9"));
        assert_eq!(round(d("97.95"), rule), d("98.0"));
        let rule = RoundingRule::HalfUp {
            places: places_as_written("101.5"),
        };
        assert_eq!(round(d("101.55"), rule), d("101.6"));
        assert_eq!(round(d("101.45"), rule), d("101.5"));
    }

    // ASTM E29 rounding method: an exact 5 rounds to the even digit (REFERENCES.md section 9,
    // [pub/secondary]); the absolute method does not round at all.
    #[test]
    fn astm_e29_rounding_and_absolute_methods() {
        let rule = RoundingRule::HalfEven { places: 1 };
        assert_eq!(round(d("2.25"), rule), d("2.2"));
        assert_eq!(round(d("2.35"), rule), d("2.4"));
        assert_eq!(round(d("2.251"), rule), d("2.3"));
        assert_eq!(round(d("97.9499"), RoundingRule::Absolute), d("97.9499"));
    }

    // Common practice: 2.675 is stored in binary as 2.67499999..., so float formatting rounds
    // it down; the decimal path rounds half up as written.
    #[test]
    fn values_that_binary_floats_get_wrong_round_as_written() {
        assert_eq!(format!("{:.2}", 2.675_f64), "2.67");
        let exact = decimal_from_f64(2.675).unwrap();
        assert_eq!(exact, d("2.675"));
        assert_eq!(round(exact, RoundingRule::HalfUp { places: 2 }), d("2.68"));
        assert_eq!(
            round(d("1.005"), RoundingRule::HalfUp { places: 2 }),
            d("1.01")
        );
        assert_eq!(
            round(d("-2.675"), RoundingRule::HalfUp { places: 2 }),
            d("-2.68")
        );
    }

    #[test]
    fn rounds_to_significant_figures() {
        let rule = RoundingRule::SignificantFigures { figures: 3 };
        assert_eq!(round(d("0.0012345"), rule), d("0.00123"));
        assert_eq!(round(d("98765"), rule), d("98800"));
        assert_eq!(round(d("1.995"), rule), d("2.00"));
    }

    // GUM (JCGM 100:2008) 7.2.6: U with at most two significant digits, the value to the same
    // place. The EURACHEM QUAM A2 figures (c = 0.102136, u_c = 1.005e-4, REFERENCES.md 5) with
    // k = 2 give U = 0.000201 -> 0.00020, c -> 0.10214.
    #[test]
    fn reports_value_and_u_to_the_same_place() {
        let r = report(0.102136, 2.0 * 1.005e-4, UncertaintyRounding::Nearest).unwrap();
        assert_eq!(
            (r.value, r.expanded_uncertainty, r.places),
            (d("0.10214"), d("0.00020"), 5)
        );
        let up = report(0.102136, 2.0 * 1.005e-4, UncertaintyRounding::Up).unwrap();
        assert_eq!(
            (up.value, up.expanded_uncertainty),
            (d("0.10214"), d("0.00021"))
        );
        let big = report(1234.56, 123.4, UncertaintyRounding::Nearest).unwrap();
        assert_eq!(
            (big.value, big.expanded_uncertainty, big.places),
            (d("1230"), d("120"), -1)
        );
        let carry = report(5.4321, 0.00996, UncertaintyRounding::Nearest).unwrap();
        assert_eq!(
            (carry.value, carry.expanded_uncertainty),
            (d("5.432"), d("0.010"))
        );
        assert!(report(1.0, 0.0, UncertaintyRounding::Nearest).is_none());
        assert!(report(f64::NAN, 0.1, UncertaintyRounding::Nearest).is_none());
    }
}
