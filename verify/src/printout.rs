//! Reads a balance's printed or exported readings, written in assize's own line format, into
//! checked readings with their times.
//!
//! This module owns the printout line format and its parser. It reads text only: it never opens
//! files, never writes the ledger and never guesses at a line it does not understand. The
//! parse is all-or-nothing, so one bad line refuses the whole printout and nothing partial is
//! imported.
//!
//! # The format
//!
//! One reading per line, five fields separated by spaces or tabs (any number of them):
//!
//! 1. the time, RFC 3339 in UTC written with `Z` (fractions of a second allowed):
//!    `2026-11-16T08:02:11Z`; an offset such as `+00:00` or `+01:00` is refused, so every
//!    printout states UTC the same way;
//! 2. the balance id, as the lab names the balance: ASCII letters, digits, `-`, `_`, `.`, `/`;
//! 3. the reading's digits exactly as displayed: an optional `-`, digits, an optional `.` with
//!    digits after it, as [`Reading::parse`](crate::quantity::Reading::parse) accepts them (no
//!    comma, no exponent);
//! 4. the unit, a mass unit as [`Unit::parse`](crate::quantity::Unit::parse) reads it: `kg`,
//!    `g`, `mg` or `ug` (`µg`);
//! 5. the stability flag: `S` when the display showed its stability indicator, `U` when not.
//!
//! A line whose first non-blank character is `#` is a comment; blank lines are ignored. Nothing
//! may follow the fifth field, not even a comment. Lines are numbered from 1, counting every
//! line of the text, comments and blank lines included, so an error points at the line a
//! person sees in an editor.
//!
//! A printout is chronological, so the times of one balance never go backwards: a line timed
//! before an earlier line of the same balance refuses the printout (equal times are allowed, as
//! a balance may print twice within its time resolution). Different balances may interleave
//! freely. A text with no reading at all is refused too, as it is almost certainly the wrong
//! file.
//!
//! An invented example:
//!
//! ```text
//! # bench 3, morning of 2026-11-16
//! 2026-11-16T08:02:11Z   BAL-2   25.4312   g    S
//! 2026-11-16T08:03:40Z   BAL-2   24.1010   g    S
//! 2026-11-16T08:05:02.5Z BAL-7   205.3     mg   U
//! ```

use crate::quantity::{Dimension, QuantityError, Reading, Unit};
use assize_ledger::Timestamp;
use std::collections::HashMap;

/// One reading of a printout.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct PrintedReading {
    /// The line it was read from (from 1).
    pub line: usize,
    /// When the balance printed it.
    pub at: Timestamp,
    /// The balance's id as the lab names it.
    pub balance_id: String,
    /// The digits and unit as displayed.
    pub reading: Reading,
    /// Whether the display showed its stability indicator.
    pub stable: bool,
}

impl std::fmt::Display for PrintedReading {
    /// Writes the reading as one line of the printout format (without a line break).
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let flag = if self.stable { "S" } else { "U" };
        write!(
            f,
            "{}  {}  {}  {}  {flag}",
            self.at, self.balance_id, self.reading.value, self.reading.unit
        )
    }
}

/// Why a printout was refused: the line, the offending text and what was expected.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum PrintoutError {
    /// A line does not have exactly five fields.
    WrongFieldCount {
        /// Line number (from 1).
        line: usize,
        /// The line as given.
        text: String,
        /// How many fields it has.
        found: usize,
    },
    /// The first field is not an RFC 3339 time.
    BadTime {
        /// Line number (from 1).
        line: usize,
        /// The field as given.
        text: String,
    },
    /// The time is RFC 3339 but gives an offset instead of `Z`.
    TimeNotInZ {
        /// Line number (from 1).
        line: usize,
        /// The field as given.
        text: String,
    },
    /// The balance id holds a character outside the allowed set.
    BadBalanceId {
        /// Line number (from 1).
        line: usize,
        /// The field as given.
        text: String,
    },
    /// The digits are not a reading as displayed.
    BadReading {
        /// Line number (from 1).
        line: usize,
        /// The field as given.
        text: String,
        /// Why the reading was refused.
        problem: QuantityError,
    },
    /// The unit is not a mass unit.
    BadUnit {
        /// Line number (from 1).
        line: usize,
        /// The field as given.
        text: String,
    },
    /// The stability flag is neither `S` nor `U`.
    BadStabilityFlag {
        /// Line number (from 1).
        line: usize,
        /// The field as given.
        text: String,
    },
    /// A balance's reading is timed before one of its readings on an earlier line.
    TimeGoesBackwards {
        /// Line number (from 1).
        line: usize,
        /// The balance.
        balance_id: String,
        /// The time on this line.
        at: Timestamp,
        /// The earlier line of the same balance.
        previous_line: usize,
        /// The time on that line.
        previous_at: Timestamp,
    },
    /// The text holds only comments and blank lines.
    NoReadings,
}

impl PrintoutError {
    /// The line the error is about; `None` for a printout without readings.
    pub fn line(&self) -> Option<usize> {
        match self {
            PrintoutError::WrongFieldCount { line, .. }
            | PrintoutError::BadTime { line, .. }
            | PrintoutError::TimeNotInZ { line, .. }
            | PrintoutError::BadBalanceId { line, .. }
            | PrintoutError::BadReading { line, .. }
            | PrintoutError::BadUnit { line, .. }
            | PrintoutError::BadStabilityFlag { line, .. }
            | PrintoutError::TimeGoesBackwards { line, .. } => Some(*line),
            PrintoutError::NoReadings => None,
        }
    }
}

impl std::fmt::Display for PrintoutError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            PrintoutError::WrongFieldCount { line, text, found } => write!(
                f,
                "line {line}: {found} fields in {text:?}; expected 5: time, balance id, digits, unit, S or U"
            ),
            PrintoutError::BadTime { line, text } => write!(
                f,
                "line {line}: {text:?} is not an RFC 3339 time; expected e.g. 2026-11-16T08:02:11Z"
            ),
            PrintoutError::TimeNotInZ { line, text } => write!(
                f,
                "line {line}: time {text:?} gives an offset; expected UTC written with Z, e.g. 2026-11-16T08:02:11Z"
            ),
            PrintoutError::BadBalanceId { line, text } => write!(
                f,
                "line {line}: {text:?} is not a balance id; expected ASCII letters, digits, '-', '_', '.' or '/'"
            ),
            PrintoutError::BadReading {
                line,
                text,
                problem,
            } => write!(
                f,
                "line {line}: reading {text:?} refused: {problem}; expected the digits as displayed, e.g. 25.4312"
            ),
            PrintoutError::BadUnit { line, text } => write!(
                f,
                "line {line}: {text:?} is not a balance unit; expected g, mg, kg or ug"
            ),
            PrintoutError::BadStabilityFlag { line, text } => write!(
                f,
                "line {line}: stability flag {text:?}; expected S (stable) or U (unstable)"
            ),
            PrintoutError::TimeGoesBackwards {
                line,
                balance_id,
                at,
                previous_line,
                previous_at,
            } => write!(
                f,
                "line {line}: {balance_id} at {at} is before its reading at {previous_at} on line {previous_line}; expected the times of one balance in order"
            ),
            PrintoutError::NoReadings => {
                write!(f, "the printout holds no readings, only comments or blank lines")
            }
        }
    }
}

impl std::error::Error for PrintoutError {}

/// Parses a whole printout; one bad line refuses it all.
pub fn parse_printout(text: &str) -> Result<Vec<PrintedReading>, PrintoutError> {
    let mut readings = Vec::new();
    let mut last_of_balance: HashMap<String, (usize, Timestamp)> = HashMap::new();
    for (index, content) in text.lines().enumerate() {
        let trimmed = content.trim();
        if trimmed.is_empty() || trimmed.starts_with('#') {
            continue;
        }
        let reading = parse_line(index + 1, trimmed)?;
        check_in_order(&reading, &mut last_of_balance)?;
        readings.push(reading);
    }
    if readings.is_empty() {
        return Err(PrintoutError::NoReadings);
    }
    Ok(readings)
}

/// One line that is neither blank nor a comment.
fn parse_line(line: usize, text: &str) -> Result<PrintedReading, PrintoutError> {
    let fields: Vec<&str> = text.split_ascii_whitespace().collect();
    let [time, balance_id, digits, unit, flag] = fields[..] else {
        return Err(PrintoutError::WrongFieldCount {
            line,
            text: text.to_string(),
            found: fields.len(),
        });
    };
    let at = parse_time(line, time)?;
    let balance_id = parse_balance_id(line, balance_id)?;
    let unit = parse_mass_unit(line, unit)?;
    let reading =
        Reading::parse(digits, unit.symbol()).map_err(|problem| PrintoutError::BadReading {
            line,
            text: digits.to_string(),
            problem,
        })?;
    let stable = parse_stability_flag(line, flag)?;
    Ok(PrintedReading {
        line,
        at,
        balance_id,
        reading,
        stable,
    })
}

/// RFC 3339 (section 5.6) with the UTC designator `Z`; RFC 3339 section 5.6 also lets it be `z`.
fn parse_time(line: usize, text: &str) -> Result<Timestamp, PrintoutError> {
    let at = Timestamp::parse_rfc3339(text).ok_or_else(|| PrintoutError::BadTime {
        line,
        text: text.to_string(),
    })?;
    if !text.ends_with(['Z', 'z']) {
        return Err(PrintoutError::TimeNotInZ {
            line,
            text: text.to_string(),
        });
    }
    Ok(at)
}

fn parse_balance_id(line: usize, text: &str) -> Result<String, PrintoutError> {
    let allowed = |c: char| c.is_ascii_alphanumeric() || matches!(c, '-' | '_' | '.' | '/');
    if !text.chars().all(allowed) {
        return Err(PrintoutError::BadBalanceId {
            line,
            text: text.to_string(),
        });
    }
    Ok(text.to_string())
}

fn parse_mass_unit(line: usize, text: &str) -> Result<Unit, PrintoutError> {
    match Unit::parse(text) {
        Ok(unit) if unit.dimension() == Dimension::Mass => Ok(unit),
        _ => Err(PrintoutError::BadUnit {
            line,
            text: text.to_string(),
        }),
    }
}

fn parse_stability_flag(line: usize, text: &str) -> Result<bool, PrintoutError> {
    match text {
        "S" => Ok(true),
        "U" => Ok(false),
        _ => Err(PrintoutError::BadStabilityFlag {
            line,
            text: text.to_string(),
        }),
    }
}

/// Refuses a reading timed before the latest earlier reading of the same balance.
fn check_in_order(
    reading: &PrintedReading,
    last_of_balance: &mut HashMap<String, (usize, Timestamp)>,
) -> Result<(), PrintoutError> {
    if let Some(&(previous_line, previous_at)) = last_of_balance.get(&reading.balance_id) {
        if reading.at < previous_at {
            return Err(PrintoutError::TimeGoesBackwards {
                line: reading.line,
                balance_id: reading.balance_id.clone(),
                at: reading.at,
                previous_line,
                previous_at,
            });
        }
    }
    last_of_balance.insert(reading.balance_id.clone(), (reading.line, reading.at));
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Microseconds since 1970-01-01T00:00:00Z of a UTC date and time, counted here day by day
    /// with the Gregorian leap-year rule as RFC 3339 Appendix C states it, independently of the
    /// date library the parser uses.
    fn utc_micros(year: i64, month: i64, day: i64, hour: i64, minute: i64, second: i64) -> i64 {
        let leap = |y: i64| y % 4 == 0 && (y % 100 != 0 || y % 400 == 0);
        let month_days = [31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31];
        let mut days: i64 = (1970..year).map(|y| if leap(y) { 366 } else { 365 }).sum();
        days += month_days[..(month - 1) as usize].iter().sum::<i64>();
        if month > 2 && leap(year) {
            days += 1;
        }
        days += day - 1;
        ((days * 24 + hour) * 60 + minute) * 60 * 1_000_000 + second * 1_000_000
    }

    #[test]
    fn reads_each_field_of_a_line() {
        // Invented printout.
        let text = "2026-11-16T08:02:11Z  BAL-2  25.4312  g  S\n";
        let readings = parse_printout(text).unwrap();
        assert_eq!(readings.len(), 1);
        let r = &readings[0];
        assert_eq!(r.line, 1);
        // Expected instant counted day by day (RFC 3339 Appendix C leap-year rule).
        assert_eq!(r.at, Timestamp(utc_micros(2026, 11, 16, 8, 2, 11)));
        assert_eq!(r.balance_id, "BAL-2");
        assert_eq!(r.reading, Reading::parse("25.4312", "g").unwrap());
        assert!(r.stable);
    }

    #[test]
    fn reads_the_rfc_3339_utc_example_with_a_fraction_of_a_second() {
        // RFC 3339 section 5.8, first example (quoted from memory): 1985-04-12T23:20:50.52Z;
        // 0.52 s = 520000 µs.
        let text = "1985-04-12T23:20:50.52Z BAL-1 1.0 g U";
        let r = &parse_printout(text).unwrap()[0];
        assert_eq!(
            r.at,
            Timestamp(utc_micros(1985, 4, 12, 23, 20, 50) + 520_000)
        );
        assert!(!r.stable);
    }

    #[test]
    fn skips_comments_and_blank_lines_but_counts_them() {
        // Invented printout; CRLF line ends and tabs as a text editor may save them.
        let text = "# bench 3\r\n\r\n   \t\r\n  # another note\r\n2026-11-16T08:02:11Z\tBAL-2\t0.2041\tg\tS\r\n";
        let readings = parse_printout(text).unwrap();
        assert_eq!(readings.len(), 1);
        assert_eq!(readings[0].line, 5);
    }

    #[test]
    fn keeps_the_displayed_digits_and_normalizes_the_unit_symbol() {
        // Invented values; "µg" is the SI symbol for microgram (SI Brochure, 9th edition,
        // Table 7, table number from memory), stored as "ug" by quantity::Unit.
        let text = "2026-11-16T08:02:11Z BAL-9 150.20 µg S";
        let r = &parse_printout(text).unwrap()[0];
        assert_eq!(r.reading.value, "150.20");
        assert_eq!(r.reading.unit, Unit::Microgram);
    }

    #[test]
    fn writes_lines_it_reads_back_unchanged() {
        // Invented printout with interleaved balances.
        let text = "2026-11-16T08:02:11Z BAL-2 25.4312 g S\n\
                    2026-11-16T08:02:30.25Z BAL-7 205.3 mg U\n\
                    2026-11-16T08:03:40Z BAL-2 -0.0003 g S\n";
        let first = parse_printout(text).unwrap();
        let written: String = first.iter().map(|r| format!("{r}\n")).collect();
        let second = parse_printout(&written).unwrap();
        assert_eq!(first, second);
        assert_eq!(
            written.lines().next(),
            Some("2026-11-16T08:02:11Z  BAL-2  25.4312  g  S")
        );
    }

    #[test]
    fn allows_equal_times_and_interleaved_balances() {
        // Invented: BAL-7 is earlier than BAL-2's previous line, which is fine across balances.
        let text = "2026-11-16T08:05:00Z BAL-2 1.0000 g S\n\
                    2026-11-16T08:05:00Z BAL-2 1.0001 g S\n\
                    2026-11-16T08:01:00Z BAL-7 2.0000 g S\n";
        assert_eq!(parse_printout(text).unwrap().len(), 3);
    }

    #[test]
    fn refuses_a_line_with_too_few_or_too_many_fields() {
        let text = "2026-11-16T08:02:11Z BAL-2 1.0 g S\n2026-11-16T08:03:11Z BAL-2 1.0 g\n";
        assert_eq!(
            parse_printout(text).unwrap_err(),
            PrintoutError::WrongFieldCount {
                line: 2,
                text: "2026-11-16T08:03:11Z BAL-2 1.0 g".into(),
                found: 4,
            }
        );
        let text = "2026-11-16T08:02:11Z BAL-2 1.0 g S # trailing note\n";
        let err = parse_printout(text).unwrap_err();
        assert!(
            matches!(
                err,
                PrintoutError::WrongFieldCount {
                    line: 1,
                    found: 8,
                    ..
                }
            ),
            "{err:?}"
        );
    }

    #[test]
    fn refuses_a_time_that_is_not_rfc_3339() {
        // A date without a time (RFC 3339 section 5.6 asks for both), a month 13 (RFC 3339
        // section 5.7 restricts it to 01-12).
        for (time, line) in [("2026-11-16", 1), ("2026-13-16T08:02:11Z", 1)] {
            let text = format!("{time} BAL-2 1.0 g S");
            assert_eq!(
                parse_printout(&text).unwrap_err(),
                PrintoutError::BadTime {
                    line,
                    text: time.into()
                }
            );
        }
    }

    #[test]
    fn refuses_a_time_with_an_offset_even_a_zero_one() {
        // RFC 3339 section 5.8, second example (quoted from memory): 1996-12-19T16:39:57-08:00,
        // valid RFC 3339 but not written in Z.
        let text = "# one comment line\n1996-12-19T16:39:57-08:00 BAL-2 1.0 g S";
        assert_eq!(
            parse_printout(text).unwrap_err(),
            PrintoutError::TimeNotInZ {
                line: 2,
                text: "1996-12-19T16:39:57-08:00".into()
            }
        );
        let err = parse_printout("2026-11-16T08:02:11+00:00 BAL-2 1.0 g S").unwrap_err();
        assert!(matches!(err, PrintoutError::TimeNotInZ { line: 1, .. }));
    }

    #[test]
    fn refuses_a_balance_id_with_other_characters() {
        let text = "2026-11-16T08:02:11Z BAL#2 1.0 g S";
        assert_eq!(
            parse_printout(text).unwrap_err(),
            PrintoutError::BadBalanceId {
                line: 1,
                text: "BAL#2".into()
            }
        );
    }

    #[test]
    fn refuses_digits_that_are_not_a_reading_as_displayed() {
        let text = "2026-11-16T08:02:11Z BAL-2 1.0 g S\n2026-11-16T08:02:12Z BAL-2 12,3456 g S";
        assert_eq!(
            parse_printout(text).unwrap_err(),
            PrintoutError::BadReading {
                line: 2,
                text: "12,3456".into(),
                problem: QuantityError::CommaDecimal {
                    text: "12,3456".into()
                },
            }
        );
        let err = parse_printout("2026-11-16T08:02:11Z BAL-2 1e-3 g S").unwrap_err();
        assert!(matches!(err, PrintoutError::BadReading { line: 1, .. }));
    }

    #[test]
    fn refuses_a_volume_or_unknown_unit() {
        for unit in ["mL", "grams", "G"] {
            let text = format!("2026-11-16T08:02:11Z BAL-2 1.0 {unit} S");
            assert_eq!(
                parse_printout(&text).unwrap_err(),
                PrintoutError::BadUnit {
                    line: 1,
                    text: unit.into()
                }
            );
        }
    }

    #[test]
    fn refuses_a_stability_flag_other_than_s_or_u() {
        for flag in ["s", "stable", "?"] {
            let text = format!("2026-11-16T08:02:11Z BAL-2 1.0 g {flag}");
            assert_eq!(
                parse_printout(&text).unwrap_err(),
                PrintoutError::BadStabilityFlag {
                    line: 1,
                    text: flag.into()
                }
            );
        }
    }

    #[test]
    fn refuses_a_balance_whose_times_go_backwards() {
        // Invented printout: line 3 is a second before line 1 of the same balance.
        let text = "2026-11-16T08:02:11Z BAL-2 1.0 g S\n\
                    2026-11-16T07:00:00Z BAL-7 1.0 g S\n\
                    2026-11-16T08:02:10Z BAL-2 1.0 g S\n";
        let err = parse_printout(text).unwrap_err();
        assert_eq!(
            err,
            PrintoutError::TimeGoesBackwards {
                line: 3,
                balance_id: "BAL-2".into(),
                at: Timestamp(utc_micros(2026, 11, 16, 8, 2, 10)),
                previous_line: 1,
                previous_at: Timestamp(utc_micros(2026, 11, 16, 8, 2, 11)),
            }
        );
        assert_eq!(err.line(), Some(3));
    }

    #[test]
    fn refuses_a_printout_without_readings() {
        for text in ["", "\n\n", "# only a note\n   \n"] {
            let err = parse_printout(text).unwrap_err();
            assert_eq!(err, PrintoutError::NoReadings);
            assert_eq!(err.line(), None);
        }
    }

    #[test]
    fn refuses_the_whole_printout_for_one_bad_line() {
        // Invented: many good lines, one bad flag at the end; nothing comes back.
        let mut text = String::new();
        for second in 10..40 {
            text.push_str(&format!(
                "2026-11-16T08:02:{second}Z BAL-2 1.0{second} g S\n"
            ));
        }
        text.push_str("2026-11-16T08:03:00Z BAL-2 1.0 g X\n");
        let err = parse_printout(&text).unwrap_err();
        assert_eq!(err.line(), Some(31));
    }

    #[test]
    fn error_messages_name_the_line_and_are_lowercase_without_a_final_period() {
        let errors = [
            parse_printout("x").unwrap_err(),
            parse_printout("2026-11-16 BAL-2 1.0 g S").unwrap_err(),
            parse_printout("2026-11-16T08:02:11+01:00 BAL-2 1.0 g S").unwrap_err(),
            parse_printout("2026-11-16T08:02:11Z B@L 1.0 g S").unwrap_err(),
            parse_printout("2026-11-16T08:02:11Z BAL-2 1.0.0 g S").unwrap_err(),
            parse_printout("2026-11-16T08:02:11Z BAL-2 1.0 L S").unwrap_err(),
            parse_printout("2026-11-16T08:02:11Z BAL-2 1.0 g Y").unwrap_err(),
        ];
        for err in errors {
            let message = err.to_string();
            assert!(message.starts_with("line 1: "), "{message}");
            assert!(message.contains("expected"), "{message}");
            assert!(!message.ends_with('.'), "{message}");
        }
        let message = PrintoutError::NoReadings.to_string();
        assert!(!message.ends_with('.') && message.starts_with("the printout"));
    }
}
