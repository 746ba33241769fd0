//! Matches keyed readings to captured ones and names the likely keying slip when they differ.
//!
//! This module owns the matching rule (same balance, nearest in time within a tolerance) and
//! the slip classes below. It is pure: it reads readings handed to it, never the ledger, and
//! never decides what a slip means for a result (the rules do that). All reasoning is exact,
//! on the displayed digit strings and on `rust_decimal` values; no floating point.
//!
//! There is no published standard for slip classes. The classes are common practice in
//! data-integrity review: the usual examples of keying errors made when a reading is copied
//! from a display or a printout by hand. A mismatch between keyed digits K and captured digits
//! C is checked in this order, and the first class that fits is reported:
//!
//! 1. transposed digits: same unit and sign, and K is C with two adjacent digits swapped;
//!    positions are counted over the digits only, ignoring the decimal point, which must stay
//!    in place (so `13.24` for `12.34` is a swap across the point);
//! 2. wrong unit: the keyed number is the captured quantity expressed in some unit U of the
//!    captured reading's dimension (tried in the order: C's own unit, then kg, g, mg, ug or L,
//!    mL), while K's unit is not U or differs from C's unit. This covers the digits copied with
//!    another unit (`150.21 mg` keyed as `150.21 g`), the digits of another display unit keyed
//!    with the captured unit (`0.15021 g` keyed as `150.21 g`: the number is in mg), and the
//!    right quantity converted to a unit that was not displayed (`150.21 mg` keyed as
//!    `0.15021 g`). It is checked before the decimal shift because a factor of exactly 10^3,
//!    10^6 or 10^9 between two mass readings is what one unit read as another gives; the unit
//!    factors are the SI prefixes kilo, milli, micro (SI Brochure, 9th edition, Table 7; the
//!    table number from memory);
//! 3. shifted decimal: same unit and sign, the same digits once leading zeros are set aside,
//!    and the decimal point in another place, so K = C × 10^k with k ≠ 0;
//! 4. dropped digit: same unit and sign, and K is C with exactly one digit removed;
//! 5. extra digit: same unit and sign, and K is C with exactly one digit added;
//! 6. wrong balance: none of the above, and K (digits and unit) is exactly a captured reading
//!    of another balance within the time tolerance (only
//!    [`match_keyed`](crate::slips::match_keyed) knows the other balances);
//! 7. otherwise an unexplained difference, with |K − C| in the base unit (g or mL).
//!
//! Digit positions in the evidence count from 1 at the leftmost digit, ignoring the sign and
//! the decimal point; where a run of equal digits makes several positions fit, the leftmost is
//! given.

use crate::printout::PrintedReading;
use crate::quantity::{Dimension, Reading, Unit};
use assize_ledger::Timestamp;
use rust_decimal::Decimal;
use std::iter::once;

/// A reading of one balance at one time, keyed or captured.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct TimedReading {
    /// The balance's id as the lab names it.
    pub balance_id: String,
    /// When the reading was taken.
    pub at: Timestamp,
    /// Digits and unit as displayed (or as keyed).
    pub reading: Reading,
}

impl From<&PrintedReading> for TimedReading {
    fn from(printed: &PrintedReading) -> Self {
        TimedReading {
            balance_id: printed.balance_id.clone(),
            at: printed.at,
            reading: printed.reading.clone(),
        }
    }
}

/// The likely keying slip behind a keyed reading that differs from the captured one.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Slip {
    /// Two adjacent digits swapped.
    TransposedDigits {
        /// The two positions swapped (from 1, over the digits only).
        positions: [usize; 2],
        /// The captured digits at those positions, in captured order.
        captured_digits: [char; 2],
    },
    /// The keyed number is the captured quantity in `number_unit`, keyed with another unit or
    /// in a unit that was not displayed.
    WrongUnit {
        /// The unit keyed.
        keyed_unit: Unit,
        /// The unit captured.
        captured_unit: Unit,
        /// The unit in which the keyed number equals the captured quantity; when it is the
        /// keyed unit, the quantity is right but not as displayed.
        number_unit: Unit,
    },
    /// The decimal point in another place: keyed = captured × 10^`power_of_ten`.
    ShiftedDecimal {
        /// The power of ten (never 0).
        power_of_ten: i64,
    },
    /// One captured digit left out.
    DroppedDigit {
        /// Its position in the captured digits (from 1).
        position: usize,
        /// The digit.
        digit: char,
    },
    /// One digit keyed that the capture does not have.
    ExtraDigit {
        /// Its position in the keyed digits (from 1).
        position: usize,
        /// The digit.
        digit: char,
    },
    /// The keyed reading is exactly another balance's captured reading.
    WrongBalance {
        /// Index, in the captured readings given, of the other balance's reading.
        other: usize,
        /// That balance's id.
        balance_id: String,
    },
    /// None of the classes fits.
    UnexplainedDifference {
        /// |keyed − captured| in g (mass) or mL (volume); `None` when one is a mass and the
        /// other a volume, or a reading is not a plain decimal.
        difference: Option<Decimal>,
    },
}

/// What a keyed reading found among the captured ones.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Match {
    /// A captured reading of the same balance within the tolerance shows the same digits and
    /// unit (the nearest such in time).
    Exact {
        /// Index in the captured readings.
        captured: usize,
    },
    /// The nearest captured reading of the same balance within the tolerance differs.
    Mismatch {
        /// Index in the captured readings.
        captured: usize,
        /// The likely slip.
        slip: Slip,
    },
    /// No captured reading of the keyed balance within the tolerance.
    Unmatched {
        /// Index of a reading of another balance within the tolerance that shows exactly the
        /// keyed digits and unit (the nearest such), if any.
        same_reading_on_other_balance: Option<usize>,
    },
}

/// Matches one keyed reading against the captured ones, times within `tolerance_seconds`
/// (inclusive) either side.
///
/// A captured reading of the keyed balance equal to the keyed one wins over a nearer one that
/// differs, because keyed times are often rounded (to the minute, say) while the printout's are
/// not. Otherwise the nearest captured reading of the keyed balance is compared; between two
/// equally near, the earlier one is taken, and then the first given.
pub fn match_keyed(
    keyed: &TimedReading,
    captured: &[TimedReading],
    tolerance_seconds: u32,
) -> Match {
    let candidates = || {
        (0..captured.len()).filter(|&i| {
            captured[i].balance_id == keyed.balance_id
                && within(keyed, &captured[i], tolerance_seconds)
        })
    };
    let equal_reading = |&i: &usize| captured[i].reading == keyed.reading;
    if let Some(index) = nearest(keyed.at, captured, candidates().filter(equal_reading)) {
        return Match::Exact { captured: index };
    }
    let elsewhere = other_balances_within(keyed, captured, tolerance_seconds);
    let on_other_balance = nearest(
        keyed.at,
        captured,
        elsewhere.into_iter().filter(equal_reading),
    );
    let Some(index) = nearest(keyed.at, captured, candidates()) else {
        return Match::Unmatched {
            same_reading_on_other_balance: on_other_balance,
        };
    };
    match classify(&keyed.reading, &captured[index].reading) {
        None => Match::Exact { captured: index },
        Some(slip) => Match::Mismatch {
            captured: index,
            slip: or_wrong_balance(slip, on_other_balance, captured),
        },
    }
}

/// An unexplained difference becomes a wrong balance when another balance showed exactly the
/// keyed reading; any other class stands.
fn or_wrong_balance(
    slip: Slip,
    on_other_balance: Option<usize>,
    captured: &[TimedReading],
) -> Slip {
    match (slip, on_other_balance) {
        (Slip::UnexplainedDifference { .. }, Some(other)) => Slip::WrongBalance {
            other,
            balance_id: captured[other].balance_id.clone(),
        },
        (slip, _) => slip,
    }
}

/// Indices of the captured readings of balances other than the keyed one, timed within
/// `tolerance_seconds` (inclusive) of the keyed reading, in the order given.
pub fn other_balances_within(
    keyed: &TimedReading,
    captured: &[TimedReading],
    tolerance_seconds: u32,
) -> Vec<usize> {
    (0..captured.len())
        .filter(|&i| captured[i].balance_id != keyed.balance_id)
        .filter(|&i| within(keyed, &captured[i], tolerance_seconds))
        .collect()
}

/// The slip between a keyed and a captured reading of the same balance, by the classes 1–5
/// and 7 of the module's list (wrong balance needs the other balances: see [`match_keyed`]);
/// `None` when the two show the same digits and unit.
pub fn classify(keyed: &Reading, captured: &Reading) -> Option<Slip> {
    if keyed == captured {
        return None;
    }
    let (keyed_negative, k) = unsigned(&keyed.value);
    let (captured_negative, c) = unsigned(&captured.value);
    let comparable = keyed.unit == captured.unit && keyed_negative == captured_negative;
    let by_digits = |check: fn(&str, &str) -> Option<Slip>| {
        if comparable {
            check(k, c)
        } else {
            None
        }
    };
    let slip = by_digits(transposed_digits)
        .or_else(|| wrong_unit(keyed, captured))
        .or_else(|| by_digits(shifted_decimal))
        .or_else(|| by_digits(dropped_digit))
        .or_else(|| by_digits(extra_digit))
        .unwrap_or_else(|| Slip::UnexplainedDifference {
            difference: difference(keyed, captured),
        });
    Some(slip)
}

/// Whether a keyed reading says something other than the captured one: another unit, or
/// another value. Digits that differ only in trailing zeros (`12.34 g` for `12.340 g`) say the
/// same mass and do not differ here, though [`classify`] names the dropped zero.
pub fn differ_in_value(keyed: &Reading, captured: &Reading) -> bool {
    keyed.unit != captured.unit || base_value(keyed) != base_value(captured)
}

impl Slip {
    /// A short name of the class, for scripts: `transposed-digits`, `wrong-unit`,
    /// `shifted-decimal`, `dropped-digit`, `extra-digit`, `wrong-balance` or
    /// `unexplained-difference`.
    pub fn class(&self) -> &'static str {
        match self {
            Slip::TransposedDigits { .. } => "transposed-digits",
            Slip::WrongUnit { .. } => "wrong-unit",
            Slip::ShiftedDecimal { .. } => "shifted-decimal",
            Slip::DroppedDigit { .. } => "dropped-digit",
            Slip::ExtraDigit { .. } => "extra-digit",
            Slip::WrongBalance { .. } => "wrong-balance",
            Slip::UnexplainedDifference { .. } => "unexplained-difference",
        }
    }

    /// The slip with its evidence in words, for a reviewer; `dimension` is what the readings
    /// measure (it names the quantity and the unit of an unexplained difference).
    pub fn describe(&self, dimension: Dimension) -> String {
        let quantity = match dimension {
            Dimension::Mass => "mass",
            Dimension::Volume => "volume",
        };
        match self {
            Slip::TransposedDigits {
                positions: [i, j],
                captured_digits: [a, b],
            } => format!("transposed digits: {a}{b} keyed as {b}{a} (digit places {i} and {j})"),
            Slip::WrongUnit {
                keyed_unit,
                captured_unit,
                number_unit,
            } => {
                if keyed_unit != captured_unit && number_unit == captured_unit {
                    format!("wrong unit: the displayed number keyed in {keyed_unit} instead of {captured_unit}")
                } else if number_unit == keyed_unit {
                    format!("wrong unit: the {quantity} converted to {keyed_unit}, not as displayed in {captured_unit}")
                } else {
                    format!("wrong unit: the number keyed is the {quantity} in {number_unit}, written as {keyed_unit}")
                }
            }
            Slip::ShiftedDecimal { power_of_ten } => {
                let direction = if *power_of_ten > 0 { "right" } else { "left" };
                let places = power_of_ten.unsigned_abs();
                let plural = if places == 1 { "" } else { "s" };
                format!("shifted decimal: the point moved {places} place{plural} {direction} (keyed = captured × 10^{power_of_ten})")
            }
            Slip::DroppedDigit { position, digit } => {
                format!("dropped digit: the {digit} at digit place {position} left out")
            }
            Slip::ExtraDigit { position, digit } => {
                format!("extra digit: a {digit} added at digit place {position}")
            }
            Slip::WrongBalance { balance_id, .. } => {
                format!("wrong balance: the keyed reading is what balance {balance_id} printed")
            }
            Slip::UnexplainedDifference {
                difference: Some(difference),
            } => {
                let base = Unit::of_dimension(dimension)
                    .find(|unit| unit.to_base_factor() == Decimal::ONE)
                    .expect("every dimension has a base unit");
                format!(
                    "no common keying slip explains it (they differ by {} {base})",
                    difference.normalize()
                )
            }
            Slip::UnexplainedDifference { difference: None } => {
                "no common keying slip explains it".to_string()
            }
        }
    }
}

/// Whether two readings are at most `tolerance_seconds` apart.
fn within(keyed: &TimedReading, other: &TimedReading, tolerance_seconds: u32) -> bool {
    keyed.at.0.abs_diff(other.at.0) <= u64::from(tolerance_seconds) * 1_000_000
}

/// The nearest candidate in time; ties go to the earlier reading, then to the first given.
fn nearest(
    at: Timestamp,
    captured: &[TimedReading],
    candidates: impl Iterator<Item = usize>,
) -> Option<usize> {
    candidates.min_by_key(|&i| (at.0.abs_diff(captured[i].at.0), captured[i].at, i))
}

/// Whether the displayed value is negative, and its text without the sign.
fn unsigned(value: &str) -> (bool, &str) {
    match value.strip_prefix('-') {
        Some(rest) => (true, rest),
        None => (false, value),
    }
}

fn digits(text: &str) -> Vec<char> {
    text.chars().filter(|c| *c != '.').collect()
}

fn fraction_length(text: &str) -> i64 {
    text.split_once('.')
        .map_or(0, |(_, fraction)| fraction.chars().count() as i64)
}

fn transposed_digits(keyed: &str, captured: &str) -> Option<Slip> {
    if fraction_length(keyed) != fraction_length(captured) {
        return None;
    }
    let (k, c) = (digits(keyed), digits(captured));
    if k.len() != c.len() {
        return None;
    }
    let differing: Vec<usize> = (0..k.len()).filter(|&i| k[i] != c[i]).collect();
    match differing[..] {
        [i, j] if j == i + 1 && k[i] == c[j] && k[j] == c[i] => Some(Slip::TransposedDigits {
            positions: [i + 1, j + 1],
            captured_digits: [c[i], c[j]],
        }),
        _ => None,
    }
}

fn wrong_unit(keyed: &Reading, captured: &Reading) -> Option<Slip> {
    let keyed_number = Decimal::from_str_exact(&keyed.value).ok()?;
    let captured_quantity = base_value(captured)?;
    let mut units = once(captured.unit).chain(Unit::of_dimension(captured.unit.dimension()));
    let number_unit = units
        .find(|unit| keyed_number.checked_mul(unit.to_base_factor()) == Some(captured_quantity))?;
    if number_unit == keyed.unit && keyed.unit == captured.unit {
        return None;
    }
    Some(Slip::WrongUnit {
        keyed_unit: keyed.unit,
        captured_unit: captured.unit,
        number_unit,
    })
}

fn shifted_decimal(keyed: &str, captured: &str) -> Option<Slip> {
    let significant =
        |text: &str| -> Vec<char> { digits(text).into_iter().skip_while(|d| *d == '0').collect() };
    let sequence = significant(keyed);
    if sequence.is_empty() || sequence != significant(captured) {
        return None;
    }
    // Both are the same integer of significant digits × 10^(−fraction length).
    let power_of_ten = fraction_length(captured) - fraction_length(keyed);
    (power_of_ten != 0).then_some(Slip::ShiftedDecimal { power_of_ten })
}

fn dropped_digit(keyed: &str, captured: &str) -> Option<Slip> {
    let (position, digit) = one_digit_removed(captured, keyed)?;
    Some(Slip::DroppedDigit { position, digit })
}

fn extra_digit(keyed: &str, captured: &str) -> Option<Slip> {
    let (position, digit) = one_digit_removed(keyed, captured)?;
    Some(Slip::ExtraDigit { position, digit })
}

/// The leftmost digit of `longer` whose removal leaves exactly `shorter`: its position among
/// the digits (from 1) and the digit.
fn one_digit_removed(longer: &str, shorter: &str) -> Option<(usize, char)> {
    if longer.chars().count() != shorter.chars().count() + 1 {
        return None;
    }
    longer
        .char_indices()
        .filter(|(_, c)| *c != '.')
        .enumerate()
        .find(|(_, (index, c))| {
            let without = format!("{}{}", &longer[..*index], &longer[index + c.len_utf8()..]);
            without == shorter
        })
        .map(|(digit_index, (_, c))| (digit_index + 1, c))
}

fn base_value(reading: &Reading) -> Option<Decimal> {
    Decimal::from_str_exact(&reading.value)
        .ok()?
        .checked_mul(reading.unit.to_base_factor())
}

fn difference(keyed: &Reading, captured: &Reading) -> Option<Decimal> {
    if keyed.unit.dimension() != captured.unit.dimension() {
        return None;
    }
    let gap = base_value(keyed)?.checked_sub(base_value(captured)?)?;
    Some(gap.abs())
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::str::FromStr;

    // All readings, ids and times below are invented for the tests.

    fn reading(text: &str) -> Reading {
        Reading::parse_with_unit(text).unwrap()
    }

    fn slip(keyed: &str, captured: &str) -> Slip {
        classify(&reading(keyed), &reading(captured)).unwrap()
    }

    fn decimal(text: &str) -> Decimal {
        Decimal::from_str(text).unwrap()
    }

    fn at(seconds: i64) -> Timestamp {
        // 2026-11-16T08:00:00Z plus seconds: 20_773 days from 1970-01-01 to 2026-11-16 (counted
        // with the Gregorian leap-year rule of RFC 3339 Appendix C) × 86_400 s, plus 8 h.
        Timestamp((20_773 * 86_400 + 8 * 3600 + seconds) * 1_000_000)
    }

    fn timed(balance: &str, seconds: i64, text: &str) -> TimedReading {
        TimedReading {
            balance_id: balance.into(),
            at: at(seconds),
            reading: reading(text),
        }
    }

    /// An independent oracle for the unexplained difference: both values rescaled by hand to
    /// integers of micrograms or microlitres (10^-6 of the base unit, SI Brochure, 9th
    /// edition, Table 7, table number from memory), subtracted as integers.
    fn micro_base_units(text: &str) -> i128 {
        let r = reading(text);
        let (negative, unsigned_text) = unsigned(&r.value);
        let (whole, fraction) = unsigned_text.split_once('.').unwrap_or((unsigned_text, ""));
        let places = fraction.len() as u32;
        let integer: i128 = format!("{whole}{fraction}").parse().unwrap();
        let unit_exponent: i32 = match r.unit {
            Unit::Kilogram | Unit::Litre => 3,
            Unit::Gram | Unit::Millilitre => 0,
            Unit::Milligram => -3,
            Unit::Microgram => -6,
        };
        let exponent = unit_exponent + 6 - places as i32;
        assert!(exponent >= 0, "test values stay at or above 1 µg");
        let value = integer * 10i128.pow(exponent as u32);
        if negative {
            -value
        } else {
            value
        }
    }

    #[test]
    fn classifies_adjacent_swap_as_transposed_digits() {
        // Common practice: the classic keying slip, two neighbouring digits swapped.
        assert_eq!(
            slip("12.3546 g", "12.3456 g"),
            Slip::TransposedDigits {
                positions: [4, 5],
                captured_digits: ['4', '5'],
            }
        );
    }

    #[test]
    fn classifies_a_swap_across_the_decimal_point_as_transposed_digits() {
        // The point stays in place; positions count digits only.
        assert_eq!(
            slip("13.24 g", "12.34 g"),
            Slip::TransposedDigits {
                positions: [2, 3],
                captured_digits: ['2', '3'],
            }
        );
    }

    #[test]
    fn classifies_every_adjacent_swap_of_a_reading_as_transposed_digits() {
        // Oracle: each swap built here by exchanging two neighbouring digit characters.
        let captured = "25.4312";
        let positions: Vec<usize> = captured
            .char_indices()
            .filter(|(_, c)| c.is_ascii_digit())
            .map(|(i, _)| i)
            .collect();
        for (n, pair) in positions.windows(2).enumerate() {
            let mut bytes = captured.as_bytes().to_vec();
            bytes.swap(pair[0], pair[1]);
            let keyed = String::from_utf8(bytes).unwrap();
            assert_eq!(
                slip(&format!("{keyed} g"), &format!("{captured} g")),
                Slip::TransposedDigits {
                    positions: [n + 1, n + 2],
                    captured_digits: [
                        captured.as_bytes()[pair[0]] as char,
                        captured.as_bytes()[pair[1]] as char
                    ],
                },
                "{keyed}"
            );
        }
    }

    #[test]
    fn does_not_take_a_non_adjacent_swap_for_transposed_digits() {
        // Near-miss: positions 3 and 6 swapped (12.6453 for 12.3456).
        let s = slip("12.6453 g", "12.3456 g");
        assert!(matches!(s, Slip::UnexplainedDifference { .. }), "{s:?}");
    }

    #[test]
    fn does_not_take_a_swap_that_moves_the_decimal_point_for_transposed_digits() {
        // Near-miss: "1.234" has the same digits as "12.34" but the point moved; that is a
        // decimal shift, not a swap.
        assert_eq!(
            slip("1.234 g", "12.34 g"),
            Slip::ShiftedDecimal { power_of_ten: -1 }
        );
    }

    #[test]
    fn does_not_take_a_swap_with_another_unit_for_transposed_digits() {
        // Near-miss: two slips at once are not explained by one class.
        let s = slip("12.3546 mg", "12.3456 g");
        assert!(matches!(s, Slip::UnexplainedDifference { .. }), "{s:?}");
    }

    #[test]
    fn classifies_the_point_moved_as_shifted_decimal() {
        for (keyed, captured, power) in [
            ("15.021 g", "0.15021 g", 2),
            ("1.5021 g", "0.15021 g", 1),
            ("0.0015021 g", "0.15021 g", -2),
            ("150.0 g", "1.500 g", 2),
            ("0.2041 mg", "20.41 mg", -2),
        ] {
            assert_eq!(
                slip(keyed, captured),
                Slip::ShiftedDecimal {
                    power_of_ten: power
                },
                "{keyed} for {captured}"
            );
            // Independent check of the evidence: keyed = captured × 10^power in exact decimals.
            let (k, c) = (reading(keyed).number(), reading(captured).number());
            let factor = Decimal::from(10i64.pow(power.unsigned_abs() as u32));
            let expected = if power > 0 { c * factor } else { c / factor };
            assert_eq!(k, expected, "{keyed} for {captured}");
        }
    }

    #[test]
    fn does_not_take_a_factor_of_two_for_shifted_decimal() {
        // Near-miss: 2.4 is 1.2 × 2, not a power of ten.
        assert_eq!(
            slip("2.4 g", "1.2 g"),
            Slip::UnexplainedDifference {
                difference: Some(decimal("1.2"))
            }
        );
    }

    #[test]
    fn does_not_take_a_shift_that_adds_a_digit_for_shifted_decimal() {
        // Near-miss: 15.0 is 1.5 × 10, but a digit was added, so the digit sequence differs.
        let s = slip("15.0 g", "1.5 g");
        assert!(matches!(s, Slip::UnexplainedDifference { .. }), "{s:?}");
    }

    #[test]
    fn classifies_digits_copied_with_another_unit_as_wrong_unit() {
        assert_eq!(
            slip("150.21 g", "150.21 mg"),
            Slip::WrongUnit {
                keyed_unit: Unit::Gram,
                captured_unit: Unit::Milligram,
                number_unit: Unit::Milligram,
            }
        );
    }

    #[test]
    fn classifies_milligram_digits_keyed_as_grams_as_wrong_unit() {
        // 0.15021 g is 150.21 mg (milli = 10^-3, SI Brochure, 9th edition, Table 7; the table
        // number from memory); keyed as 150.21 g the number is in mg though the unit says g.
        // Checked before the decimal shift, which would also fit (10^3).
        assert_eq!(
            slip("150.21 g", "0.15021 g"),
            Slip::WrongUnit {
                keyed_unit: Unit::Gram,
                captured_unit: Unit::Gram,
                number_unit: Unit::Milligram,
            }
        );
        // Kilogram digits keyed as grams (kilo = 10^3, same table).
        assert_eq!(
            slip("1.5021 g", "1502.1 g"),
            Slip::WrongUnit {
                keyed_unit: Unit::Gram,
                captured_unit: Unit::Gram,
                number_unit: Unit::Kilogram,
            }
        );
    }

    #[test]
    fn classifies_the_right_quantity_in_an_undisplayed_unit_as_wrong_unit() {
        // 150.21 mg = 0.15021 g (SI Brochure, 9th edition, Table 7; the table number from
        // memory): the mass is right, the reading is not as displayed.
        assert_eq!(
            slip("0.15021 g", "150.21 mg"),
            Slip::WrongUnit {
                keyed_unit: Unit::Gram,
                captured_unit: Unit::Milligram,
                number_unit: Unit::Gram,
            }
        );
    }

    #[test]
    fn does_not_take_a_factor_of_a_hundred_for_wrong_unit() {
        // Near-miss: no mass unit is 100 times another, so this is a decimal shift.
        assert_eq!(
            slip("15.021 g", "0.15021 g"),
            Slip::ShiftedDecimal { power_of_ten: 2 }
        );
    }

    #[test]
    fn does_not_take_a_unit_change_with_other_digits_for_wrong_unit() {
        // Near-miss: 150.12 mg is not 0.15021 g in any unit.
        let s = slip("150.12 mg", "0.15021 g");
        assert!(matches!(s, Slip::UnexplainedDifference { .. }), "{s:?}");
    }

    #[test]
    fn classifies_one_digit_left_out_as_dropped_digit() {
        assert_eq!(
            slip("12.346 g", "12.3456 g"),
            Slip::DroppedDigit {
                position: 5,
                digit: '5'
            }
        );
        // A trailing zero left out changes the displayed resolution.
        assert_eq!(
            slip("12.34 g", "12.340 g"),
            Slip::DroppedDigit {
                position: 5,
                digit: '0'
            }
        );
    }

    #[test]
    fn classifies_every_single_digit_deletion_as_dropped_digit() {
        // Oracle: each deletion built here by removing one digit character; the digits are
        // all different, so no other class can fit.
        let captured = "25.4317";
        let mut position = 0;
        for (index, c) in captured.char_indices() {
            if c == '.' {
                continue;
            }
            position += 1;
            let keyed = format!("{}{}", &captured[..index], &captured[index + 1..]);
            if Reading::parse(&keyed, "g").is_err() {
                continue;
            }
            assert_eq!(
                slip(&format!("{keyed} g"), &format!("{captured} g")),
                Slip::DroppedDigit { position, digit: c },
                "{keyed}"
            );
        }
    }

    #[test]
    fn gives_the_leftmost_position_in_a_run_of_equal_digits() {
        assert_eq!(
            slip("12.356 g", "12.3356 g"),
            Slip::DroppedDigit {
                position: 3,
                digit: '3'
            }
        );
    }

    #[test]
    fn does_not_take_two_dropped_digits_for_dropped_digit() {
        // Near-miss: 12.36 is 12.3456 without "45".
        let s = slip("12.36 g", "12.3456 g");
        assert!(matches!(s, Slip::UnexplainedDifference { .. }), "{s:?}");
    }

    #[test]
    fn classifies_one_digit_too_many_as_extra_digit() {
        assert_eq!(
            slip("12.34556 g", "12.3456 g"),
            Slip::ExtraDigit {
                position: 5,
                digit: '5'
            }
        );
        assert_eq!(
            slip("102.5 g", "12.5 g"),
            Slip::ExtraDigit {
                position: 2,
                digit: '0'
            }
        );
    }

    #[test]
    fn does_not_take_a_changed_digit_for_extra_or_dropped_digit() {
        // Near-miss: same length, one digit changed.
        let s = slip("12.3457 g", "12.3456 g");
        assert_eq!(
            s,
            Slip::UnexplainedDifference {
                difference: Some(decimal("0.0001"))
            }
        );
    }

    #[test]
    fn reports_an_unexplained_difference_exactly_in_the_base_unit() {
        for (keyed, captured) in [
            ("12.3456 g", "12.3999 g"),
            ("205.3 mg", "0.2049 g"),
            ("-0.0003 g", "0.0004 g"),
            ("1.000 kg", "998.7 g"),
        ] {
            let Slip::UnexplainedDifference {
                difference: Some(difference),
            } = slip(keyed, captured)
            else {
                panic!("{keyed} for {captured} was given another class");
            };
            // Oracle: integer micro-units computed independently of rust_decimal.
            let micro = (micro_base_units(keyed) - micro_base_units(captured)).abs();
            assert_eq!(
                difference * Decimal::from(1_000_000),
                Decimal::from_i128_with_scale(micro, 0),
                "{keyed} for {captured}"
            );
        }
    }

    #[test]
    fn gives_no_difference_between_a_mass_and_a_volume() {
        let s = slip("20.05 mL", "20.40 g");
        assert_eq!(s, Slip::UnexplainedDifference { difference: None });
    }

    #[test]
    fn a_sign_change_is_not_a_digit_slip() {
        // Near-miss for every digit class: the digits are the same, the sign is not.
        assert_eq!(
            slip("-0.0003 g", "0.0003 g"),
            Slip::UnexplainedDifference {
                difference: Some(decimal("0.0006"))
            }
        );
    }

    #[test]
    fn equal_readings_have_no_slip() {
        assert_eq!(classify(&reading("12.3456 g"), &reading("12.3456 g")), None);
    }

    #[test]
    fn matches_an_equal_captured_reading_exactly_with_no_alarm() {
        let keyed = timed("BAL-2", 0, "25.4312 g");
        let captured = [
            timed("BAL-2", -400, "25.4312 g"),
            timed("BAL-2", 3, "25.4312 g"),
        ];
        assert_eq!(
            match_keyed(&keyed, &captured, 60),
            Match::Exact { captured: 1 }
        );
    }

    #[test]
    fn prefers_an_equal_reading_to_a_nearer_different_one() {
        // Keyed at 08:02:00 (rounded to the minute); the balance printed a tare at 08:02:01
        // and the keyed reading at 08:02:40.
        let keyed = timed("BAL-2", 120, "25.4312 g");
        let captured = [
            timed("BAL-2", 121, "0.0000 g"),
            timed("BAL-2", 160, "25.4312 g"),
        ];
        assert_eq!(
            match_keyed(&keyed, &captured, 60),
            Match::Exact { captured: 1 }
        );
    }

    #[test]
    fn compares_with_the_nearest_reading_of_the_same_balance() {
        let keyed = timed("BAL-2", 0, "25.4321 g");
        let captured = [
            timed("BAL-2", -50, "24.1010 g"),
            timed("BAL-7", 1, "25.4312 g"),
            timed("BAL-2", 10, "25.4312 g"),
        ];
        assert_eq!(
            match_keyed(&keyed, &captured, 60),
            Match::Mismatch {
                captured: 2,
                slip: Slip::TransposedDigits {
                    positions: [5, 6],
                    captured_digits: ['1', '2'],
                },
            }
        );
    }

    #[test]
    fn takes_the_earlier_of_two_equally_near_readings() {
        let keyed = timed("BAL-2", 0, "9.9999 g");
        let captured = [
            timed("BAL-2", 5, "1.0000 g"),
            timed("BAL-2", -5, "2.0000 g"),
        ];
        let Match::Mismatch {
            captured: index, ..
        } = match_keyed(&keyed, &captured, 60)
        else {
            panic!("expected a mismatch");
        };
        assert_eq!(index, 1);
    }

    #[test]
    fn counts_the_tolerance_inclusively_and_no_further() {
        let keyed = timed("BAL-2", 0, "25.4312 g");
        let at_the_edge = [timed("BAL-2", 60, "25.4312 g")];
        assert_eq!(
            match_keyed(&keyed, &at_the_edge, 60),
            Match::Exact { captured: 0 }
        );
        let just_beyond = [TimedReading {
            at: Timestamp(at(60).0 + 1),
            ..at_the_edge[0].clone()
        }];
        assert_eq!(
            match_keyed(&keyed, &just_beyond, 60),
            Match::Unmatched {
                same_reading_on_other_balance: None
            }
        );
    }

    #[test]
    fn classifies_another_balances_reading_as_wrong_balance() {
        // The analyst copied BAL-7's reading into BAL-2's weighing.
        let keyed = timed("BAL-2", 0, "18.0724 g");
        let captured = [
            timed("BAL-2", 4, "25.4312 g"),
            timed("BAL-7", -20, "18.0724 g"),
        ];
        assert_eq!(
            match_keyed(&keyed, &captured, 60),
            Match::Mismatch {
                captured: 0,
                slip: Slip::WrongBalance {
                    other: 1,
                    balance_id: "BAL-7".into()
                },
            }
        );
    }

    #[test]
    fn does_not_take_another_balances_reading_outside_the_tolerance_for_wrong_balance() {
        // Near-miss: BAL-7 shows the keyed digits, but 61 s away with a 60 s tolerance.
        let keyed = timed("BAL-2", 0, "18.0724 g");
        let captured = [
            timed("BAL-2", 4, "25.4312 g"),
            timed("BAL-7", 61, "18.0724 g"),
        ];
        let Match::Mismatch { slip, .. } = match_keyed(&keyed, &captured, 60) else {
            panic!("expected a mismatch");
        };
        assert!(
            matches!(slip, Slip::UnexplainedDifference { .. }),
            "{slip:?}"
        );
    }

    #[test]
    fn does_not_take_another_balances_reading_in_another_unit_for_wrong_balance() {
        // Near-miss: the same digits in mg are not exactly the keyed reading.
        let keyed = timed("BAL-2", 0, "18.0724 g");
        let captured = [
            timed("BAL-2", 4, "25.4312 g"),
            timed("BAL-7", 2, "18.0724 mg"),
        ];
        let Match::Mismatch { slip, .. } = match_keyed(&keyed, &captured, 60) else {
            panic!("expected a mismatch");
        };
        assert!(
            matches!(slip, Slip::UnexplainedDifference { .. }),
            "{slip:?}"
        );
    }

    #[test]
    fn a_digit_slip_explains_before_another_balance_does() {
        // Order: the dropped digit (class 4) is reported before wrong balance (class 6).
        let keyed = timed("BAL-2", 0, "25.412 g");
        let captured = [
            timed("BAL-2", 4, "25.4312 g"),
            timed("BAL-7", 2, "25.412 g"),
        ];
        let Match::Mismatch { slip, .. } = match_keyed(&keyed, &captured, 60) else {
            panic!("expected a mismatch");
        };
        assert_eq!(
            slip,
            Slip::DroppedDigit {
                position: 4,
                digit: '3'
            }
        );
    }

    #[test]
    fn reports_no_captured_reading_and_names_another_balance_showing_the_keyed_digits() {
        let keyed = timed("BAL-2", 0, "18.0724 g");
        let captured = [
            timed("BAL-7", 30, "18.0724 g"),
            timed("BAL-7", -10, "18.0724 g"),
            timed("BAL-9", 1, "3.0000 g"),
        ];
        assert_eq!(
            match_keyed(&keyed, &captured, 60),
            Match::Unmatched {
                same_reading_on_other_balance: Some(1)
            }
        );
        assert_eq!(other_balances_within(&keyed, &captured, 60), [0, 1, 2]);
        assert_eq!(other_balances_within(&keyed, &captured, 20), [1, 2]);
    }

    #[test]
    fn builds_timed_readings_from_a_printout() {
        let printout = crate::printout::parse_printout(
            "2026-11-16T08:00:05Z BAL-2 25.4312 g S\n2026-11-16T08:00:09Z BAL-2 24.1010 g S\n",
        )
        .unwrap();
        let captured: Vec<TimedReading> = printout.iter().map(TimedReading::from).collect();
        let keyed = timed("BAL-2", 8, "24.1001 g");
        assert_eq!(
            match_keyed(&keyed, &captured, 60),
            Match::Mismatch {
                captured: 1,
                slip: Slip::TransposedDigits {
                    positions: [5, 6],
                    captured_digits: ['1', '0'],
                },
            }
        );
    }

    #[test]
    fn describes_each_class_with_its_evidence() {
        // Each expected text restates the evidence worked out by hand for the pair.
        let cases = [
            // 12.34 → 12.43: the 3rd and 4th digits (3, 4) swapped.
            (
                slip("12.43 g", "12.34 g"),
                "transposed digits: 34 keyed as 43 (digit places 3 and 4)",
            ),
            // 150.21 displayed in mg, keyed with g: the number is the displayed one.
            (
                slip("150.21 g", "150.21 mg"),
                "wrong unit: the displayed number keyed in g instead of mg",
            ),
            // 0.15021 g displayed; 150.21 is that mass in mg, keyed with g.
            (
                slip("150.21 g", "0.15021 g"),
                "wrong unit: the number keyed is the mass in mg, written as g",
            ),
            // 150.21 mg displayed; 0.15021 g is the same mass converted.
            (
                slip("0.15021 g", "150.21 mg"),
                "wrong unit: the mass converted to g, not as displayed in mg",
            ),
            // 15.021 = 0.15021 × 10^2: the point moved two places right.
            (
                slip("15.021 g", "0.15021 g"),
                "shifted decimal: the point moved 2 places right (keyed = captured × 10^2)",
            ),
            // 1.234 = 12.34 × 10^-1: one place left.
            (
                slip("1.234 g", "12.34 g"),
                "shifted decimal: the point moved 1 place left (keyed = captured × 10^-1)",
            ),
            // 12.3456 without its 5th digit (5) is 12.346.
            (
                slip("12.346 g", "12.3456 g"),
                "dropped digit: the 5 at digit place 5 left out",
            ),
            // 102.5 is 12.5 with a 0 put in as its 2nd digit.
            (
                slip("102.5 g", "12.5 g"),
                "extra digit: a 0 added at digit place 2",
            ),
            // |12.3457 − 12.3456| = 0.0001 g.
            (
                slip("12.3457 g", "12.3456 g"),
                "no common keying slip explains it (they differ by 0.0001 g)",
            ),
        ];
        for (slip, text) in cases {
            assert_eq!(slip.describe(Dimension::Mass), text, "{slip:?}");
        }
        let other = Slip::WrongBalance {
            other: 3,
            balance_id: "BAL-7".into(),
        };
        assert_eq!(
            other.describe(Dimension::Mass),
            "wrong balance: the keyed reading is what balance BAL-7 printed"
        );
        // A burette difference is in mL: |20.05 − 20.15| = 0.10 mL, written without the
        // trailing zero.
        assert_eq!(
            slip("20.05 mL", "20.15 mL").describe(Dimension::Volume),
            "no common keying slip explains it (they differ by 0.1 mL)"
        );
        assert_eq!(
            slip("20.05 mL", "20.40 g").describe(Dimension::Volume),
            "no common keying slip explains it"
        );
    }

    #[test]
    fn names_each_class_for_scripts() {
        assert_eq!(slip("12.43 g", "12.34 g").class(), "transposed-digits");
        assert_eq!(slip("150.21 g", "150.21 mg").class(), "wrong-unit");
        assert_eq!(slip("15.021 g", "0.15021 g").class(), "shifted-decimal");
        assert_eq!(slip("12.346 g", "12.3456 g").class(), "dropped-digit");
        assert_eq!(slip("102.5 g", "12.5 g").class(), "extra-digit");
        assert_eq!(
            slip("12.3457 g", "12.3456 g").class(),
            "unexplained-difference"
        );
    }

    #[test]
    fn differ_in_value_ignores_trailing_zeros_but_not_units() {
        // 12.34 g and 12.340 g are the same mass; classify still names the dropped zero.
        assert!(!differ_in_value(&reading("12.34 g"), &reading("12.340 g")));
        assert!(classify(&reading("12.34 g"), &reading("12.340 g")).is_some());
        // The same mass in another unit is not the reading as displayed.
        assert!(differ_in_value(
            &reading("0.15021 g"),
            &reading("150.21 mg")
        ));
        assert!(differ_in_value(&reading("12.43 g"), &reading("12.34 g")));
        assert!(!differ_in_value(&reading("12.34 g"), &reading("12.34 g")));
    }
}
