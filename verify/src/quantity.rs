//! Raw readings exactly as an instrument displayed them: a decimal string and its unit.
//!
//! A reading is never a float. It keeps its text (so the number of displayed decimals, i.e. the
//! resolution, survives) and converts exactly to grams or millilitres with decimal arithmetic,
//! so a net mass by difference is exact. This module refuses what a careful reviewer would
//! query: a comma as decimal separator, a missing or unknown unit, thousands separators,
//! exponents, stray characters. It never guesses.

use rust_decimal::Decimal;
use serde::{Deserialize, Serialize};
use std::str::FromStr;

/// What a unit measures.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Dimension {
    /// Mass, base unit gram.
    Mass,
    /// Volume, base unit millilitre.
    Volume,
}

/// A unit a balance or burette displays.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
pub enum Unit {
    /// kilogram
    #[serde(rename = "kg")]
    Kilogram,
    /// gram
    #[serde(rename = "g")]
    Gram,
    /// milligram
    #[serde(rename = "mg")]
    Milligram,
    /// microgram
    #[serde(rename = "ug")]
    Microgram,
    /// litre
    #[serde(rename = "L")]
    Litre,
    /// millilitre
    #[serde(rename = "mL")]
    Millilitre,
}

impl Unit {
    const ALL: [Unit; 6] = [
        Unit::Kilogram,
        Unit::Gram,
        Unit::Milligram,
        Unit::Microgram,
        Unit::Litre,
        Unit::Millilitre,
    ];

    /// The symbol used in records and reports.
    pub fn symbol(self) -> &'static str {
        match self {
            Unit::Kilogram => "kg",
            Unit::Gram => "g",
            Unit::Milligram => "mg",
            Unit::Microgram => "ug",
            Unit::Litre => "L",
            Unit::Millilitre => "mL",
        }
    }

    /// Parses a unit symbol; `µg`/`μg` are accepted for micrograms and `ml`/`l` for volumes.
    pub fn parse(text: &str) -> Result<Unit, QuantityError> {
        let t = text.trim();
        if t.is_empty() {
            return Err(QuantityError::MissingUnit);
        }
        let normalized = match t {
            "µg" | "μg" => "ug",
            "ml" | "ML" => "mL",
            "l" => "L",
            other => other,
        };
        Unit::ALL
            .into_iter()
            .find(|u| u.symbol() == normalized)
            .ok_or_else(|| QuantityError::UnknownUnit {
                unit: t.to_string(),
            })
    }

    /// What the unit measures.
    pub fn dimension(self) -> Dimension {
        match self {
            Unit::Litre | Unit::Millilitre => Dimension::Volume,
            _ => Dimension::Mass,
        }
    }

    /// Every unit of one dimension, largest first (kg, g, mg, ug or L, mL).
    pub fn of_dimension(dimension: Dimension) -> impl Iterator<Item = Unit> {
        Unit::ALL
            .into_iter()
            .filter(move |unit| unit.dimension() == dimension)
    }

    /// How many base units (g or mL) one of this unit is.
    pub fn to_base_factor(self) -> Decimal {
        match self {
            Unit::Kilogram => Decimal::from(1000),
            Unit::Gram | Unit::Millilitre => Decimal::ONE,
            Unit::Milligram => Decimal::new(1, 3),
            Unit::Microgram => Decimal::new(1, 6),
            Unit::Litre => Decimal::from(1000),
        }
    }
}

impl std::fmt::Display for Unit {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.symbol())
    }
}

/// Why a reading was refused.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum QuantityError {
    /// No digits at all.
    Empty,
    /// A comma where a decimal point belongs.
    CommaDecimal {
        /// The text as given.
        text: String,
    },
    /// Not a plain decimal number.
    NotANumber {
        /// The text as given.
        text: String,
    },
    /// No unit was given.
    MissingUnit,
    /// A unit this tool does not know.
    UnknownUnit {
        /// The unit as given.
        unit: String,
    },
    /// A mass where a volume was expected, or the reverse.
    WrongDimension {
        /// The reading.
        reading: String,
        /// What was expected.
        expected: Dimension,
    },
}

impl std::fmt::Display for QuantityError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            QuantityError::Empty => write!(f, "the reading is empty"),
            QuantityError::CommaDecimal { text } => write!(
                f,
                "{text:?} uses a comma; write readings with '.' as the decimal separator, exactly as displayed otherwise"
            ),
            QuantityError::NotANumber { text } => write!(
                f,
                "{text:?} is not a plain decimal number (digits, an optional '-' and one '.')"
            ),
            QuantityError::MissingUnit => write!(f, "the reading has no unit (g, mg, kg, ug, mL, L)"),
            QuantityError::UnknownUnit { unit } => {
                write!(f, "unknown unit {unit:?}; use g, mg, kg, ug, mL or L")
            }
            QuantityError::WrongDimension { reading, expected } => {
                write!(f, "{reading} is not a {expected:?} reading")
            }
        }
    }
}

impl std::error::Error for QuantityError {}

/// One raw reading as displayed.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Reading {
    /// The digits exactly as displayed, e.g. `"12.3456"`.
    pub value: String,
    /// The displayed unit.
    pub unit: Unit,
}

impl Reading {
    /// Checks and builds a reading from its displayed digits and unit symbol.
    pub fn parse(value: &str, unit: &str) -> Result<Reading, QuantityError> {
        let value = value.trim();
        check_plain_decimal(value)?;
        Ok(Reading {
            value: value.to_string(),
            unit: Unit::parse(unit)?,
        })
    }

    /// Parses `"12.3456 g"` (number, whitespace, unit).
    pub fn parse_with_unit(text: &str) -> Result<Reading, QuantityError> {
        let text = text.trim();
        let split = text
            .find(|c: char| c.is_alphabetic() || c == 'µ' || c == 'μ')
            .unwrap_or(text.len());
        let (number, unit) = text.split_at(split);
        Reading::parse(number, unit)
    }

    /// Re-checks a reading that came from storage.
    pub fn check(&self) -> Result<(), QuantityError> {
        check_plain_decimal(&self.value)
    }

    /// The displayed number, exactly.
    pub fn number(&self) -> Decimal {
        Decimal::from_str_exact(&self.value).expect("checked when the reading was built")
    }

    /// Digits after the decimal point as displayed (the display resolution).
    pub fn decimals(&self) -> u32 {
        self.value
            .split_once('.')
            .map_or(0, |(_, d)| d.len() as u32)
    }

    /// The value in grams (mass) or millilitres (volume), exactly.
    pub fn in_base_unit(&self) -> Decimal {
        self.number() * self.unit.to_base_factor()
    }

    /// The value in grams; refuses a volume.
    pub fn grams(&self) -> Result<Decimal, QuantityError> {
        self.expect(Dimension::Mass)?;
        Ok(self.in_base_unit())
    }

    /// The value in millilitres; refuses a mass.
    pub fn millilitres(&self) -> Result<Decimal, QuantityError> {
        self.expect(Dimension::Volume)?;
        Ok(self.in_base_unit())
    }

    fn expect(&self, expected: Dimension) -> Result<(), QuantityError> {
        if self.unit.dimension() != expected {
            return Err(QuantityError::WrongDimension {
                reading: self.to_string(),
                expected,
            });
        }
        Ok(())
    }
}

impl std::fmt::Display for Reading {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{} {}", self.value, self.unit)
    }
}

fn check_plain_decimal(text: &str) -> Result<(), QuantityError> {
    if text.is_empty() {
        return Err(QuantityError::Empty);
    }
    let digits = text.strip_prefix('-').unwrap_or(text);
    let (whole, fraction) = digits.split_once('.').unwrap_or((digits, ""));
    let all_digits = |s: &str| s.chars().all(|c| c.is_ascii_digit());
    let plain = !whole.is_empty()
        && all_digits(whole)
        && all_digits(fraction)
        && !(digits.contains('.') && fraction.is_empty());
    if plain && Decimal::from_str(text).is_ok() {
        return Ok(());
    }
    if text.contains(',') && !text.contains('.') {
        return Err(QuantityError::CommaDecimal { text: text.into() });
    }
    Err(QuantityError::NotANumber { text: text.into() })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn keeps_the_displayed_digits_and_resolution() {
        let r = Reading::parse("12.3450", "g").unwrap();
        assert_eq!(r.to_string(), "12.3450 g");
        assert_eq!(r.decimals(), 4);
        assert_eq!(r.grams().unwrap(), Decimal::from_str("12.345").unwrap());
    }

    #[test]
    fn net_mass_by_difference_is_exact_in_decimal() {
        // 0.1 + 0.2 style binary error must not appear: 25.4312 - 24.1010 = 1.3302 exactly.
        let before = Reading::parse("25.4312", "g").unwrap();
        let after = Reading::parse("24.1010", "g").unwrap();
        let net = before.grams().unwrap() - after.grams().unwrap();
        assert_eq!(net.to_string(), "1.3302");
    }

    #[test]
    fn converts_milligrams_and_litres_exactly() {
        let mg = Reading::parse("205.3", "mg").unwrap();
        assert_eq!(mg.grams().unwrap().to_string(), "0.2053");
        let l = Reading::parse("0.0250", "L").unwrap();
        assert_eq!(l.millilitres().unwrap().normalize().to_string(), "25");
    }

    #[test]
    fn refuses_a_comma_decimal_separator() {
        let err = Reading::parse("12,3456", "g").unwrap_err();
        assert!(matches!(err, QuantityError::CommaDecimal { .. }));
        assert!(err.to_string().contains("'.' as the decimal separator"));
    }

    #[test]
    fn refuses_missing_and_unknown_units() {
        assert_eq!(
            Reading::parse("1.0", " ").unwrap_err(),
            QuantityError::MissingUnit
        );
        assert!(matches!(
            Reading::parse("1.0", "grams").unwrap_err(),
            QuantityError::UnknownUnit { .. }
        ));
        assert_eq!(
            Reading::parse_with_unit("12.3456").unwrap_err(),
            QuantityError::MissingUnit
        );
    }

    #[test]
    fn refuses_what_is_not_a_plain_displayed_number() {
        for text in [
            "", "1.2.3", "1e-3", "1,234.5", "12.", ".5", "+1.0", "12 .5", "0x10", "NaN",
        ] {
            assert!(Reading::parse(text, "g").is_err(), "{text:?} was accepted");
        }
        assert!(
            Reading::parse("-0.0003", "g").is_ok(),
            "a tare drift may read negative"
        );
    }

    #[test]
    fn refuses_a_volume_where_a_mass_is_needed() {
        let v = Reading::parse("20.05", "mL").unwrap();
        assert!(matches!(
            v.grams(),
            Err(QuantityError::WrongDimension { .. })
        ));
    }

    #[test]
    fn lists_the_units_of_each_dimension() {
        let mass: Vec<Unit> = Unit::of_dimension(Dimension::Mass).collect();
        assert_eq!(
            mass,
            [Unit::Kilogram, Unit::Gram, Unit::Milligram, Unit::Microgram]
        );
        let volume: Vec<Unit> = Unit::of_dimension(Dimension::Volume).collect();
        assert_eq!(volume, [Unit::Litre, Unit::Millilitre]);
    }

    #[test]
    fn parses_number_and_unit_together() {
        let r = Reading::parse_with_unit("0.2041 g").unwrap();
        assert_eq!((r.value.as_str(), r.unit), ("0.2041", Unit::Gram));
        let r = Reading::parse_with_unit("150µg").unwrap();
        assert_eq!(r.unit, Unit::Microgram);
    }
}
