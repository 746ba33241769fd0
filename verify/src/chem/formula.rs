//! Chemical formulas: reads formula text such as `CuSO4·5H2O` or `C2O4^2-` into element counts
//! and a charge.
//!
//! Owns the formula grammar, the list of element symbols and [`FormulaError`], the one error type
//! of the chemistry module. It never looks up atomic weights (that is `molar_mass`) and never
//! guesses: text it cannot read exactly is refused with the position of the first character it
//! could not read.
//!
//! # Grammar
//!
//! ```text
//! formula    := part (separator multiplier? part)* charge?      (whitespace allowed around it)
//! separator  := '·' (U+00B7) | '.' | '*'                         (hydrates and adducts)
//! part       := item+
//! item       := element count? | '(' item+ ')' count? | '[' item+ ']' count?
//! element    := uppercase letter, optional lowercase letter      (one of the 118 symbols)
//! multiplier := count
//! count      := decimal digits, at least 1, no leading zero
//! charge     := '^' count? ('+' | '-')  |  '+'+  |  '-'+
//! ```
//!
//! Charges come last. `^2+`, `^3-`, `^+` and `^-` state the charge explicitly. Bare trailing
//! signs count one each: `NH4+` is +1, `OH-` is −1, `Fe+++` is +3. Digits before a bare sign are
//! always an atom count, never a charge magnitude, so `Ca2+` reads as Ca₂ with charge +1: write
//! the calcium ion as `Ca^2+`. That is deliberate: it keeps `NH4+` (ammonium, +1) unambiguous.
//!
//! A formula cannot start with a count (`2H2O` is refused); stoichiometric coefficients belong
//! to equations. `Y` is yttrium and `D` is not an element, so abbreviations such as `H2Y^2-` or
//! `EDTA` must be written out in element symbols.

use std::collections::BTreeMap;
use std::fmt;

/// The 118 element symbols, in order of atomic number.
const ELEMENT_SYMBOLS: [&str; 118] = [
    "H", "He", "Li", "Be", "B", "C", "N", "O", "F", "Ne", "Na", "Mg", "Al", "Si", "P", "S", "Cl",
    "Ar", "K", "Ca", "Sc", "Ti", "V", "Cr", "Mn", "Fe", "Co", "Ni", "Cu", "Zn", "Ga", "Ge", "As",
    "Se", "Br", "Kr", "Rb", "Sr", "Y", "Zr", "Nb", "Mo", "Tc", "Ru", "Rh", "Pd", "Ag", "Cd", "In",
    "Sn", "Sb", "Te", "I", "Xe", "Cs", "Ba", "La", "Ce", "Pr", "Nd", "Pm", "Sm", "Eu", "Gd", "Tb",
    "Dy", "Ho", "Er", "Tm", "Yb", "Lu", "Hf", "Ta", "W", "Re", "Os", "Ir", "Pt", "Au", "Hg", "Tl",
    "Pb", "Bi", "Po", "At", "Rn", "Fr", "Ra", "Ac", "Th", "Pa", "U", "Np", "Pu", "Am", "Cm", "Bk",
    "Cf", "Es", "Fm", "Md", "No", "Lr", "Rf", "Db", "Sg", "Bh", "Hs", "Mt", "Ds", "Rg", "Cn", "Nh",
    "Fl", "Mc", "Lv", "Ts", "Og",
];

/// Whether `symbol` is one of the 118 element symbols (case matters: `Co` is cobalt, `CO` is not
/// a symbol).
pub fn is_element_symbol(symbol: &str) -> bool {
    ELEMENT_SYMBOLS.contains(&symbol)
}

/// Why a formula or an equation could not be read, or a molar mass not computed.
///
/// Every `position` is a 0-based character index (not a byte index) into `text`, the whole text
/// that was being read: the formula, or the equation when a species inside it failed.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum FormulaError {
    /// The formula text is empty or only whitespace.
    Empty,
    /// The equation text is empty or only whitespace.
    EmptyEquation,
    /// Letters that are not an element symbol.
    UnknownElement {
        /// The letters read as a symbol.
        symbol: String,
        /// Where the symbol starts.
        position: usize,
        /// The text being read.
        text: String,
    },
    /// A character that has no place where it stands.
    UnexpectedCharacter {
        /// The character found.
        found: char,
        /// Where it is.
        position: usize,
        /// What could have stood there instead.
        expected: &'static str,
        /// The text being read.
        text: String,
    },
    /// The text ends where something more is needed (e.g. the sign after `^2`).
    UnexpectedEnd {
        /// Where the missing part should be.
        position: usize,
        /// What is missing.
        expected: &'static str,
        /// The text being read.
        text: String,
    },
    /// A count, multiplier, charge or coefficient of zero.
    ZeroCount {
        /// Where the count starts.
        position: usize,
        /// The text being read.
        text: String,
    },
    /// A count written with a leading zero, such as `H02`.
    LeadingZero {
        /// The digits as written.
        count: String,
        /// Where the count starts.
        position: usize,
        /// The text being read.
        text: String,
    },
    /// A count too large to hold.
    CountTooLarge {
        /// The digits as written.
        count: String,
        /// Where the count starts.
        position: usize,
        /// The text being read.
        text: String,
    },
    /// Multipliers that make the number of atoms of one element too large to hold.
    TooManyAtoms {
        /// The element.
        symbol: String,
        /// Where the multiplied group or part starts.
        position: usize,
        /// The text being read.
        text: String,
    },
    /// An opening bracket that is never closed.
    UnclosedBracket {
        /// The opening bracket, `(` or `[`.
        bracket: char,
        /// Where it is.
        position: usize,
        /// The text being read.
        text: String,
    },
    /// A closing bracket with no opening bracket before it.
    UnmatchedBracket {
        /// The closing bracket, `)` or `]`.
        bracket: char,
        /// Where it is.
        position: usize,
        /// The text being read.
        text: String,
    },
    /// A closing bracket of the wrong kind, such as `(SO4]`.
    MismatchedBracket {
        /// The open bracket waiting to be closed.
        open: char,
        /// The closing bracket found.
        close: char,
        /// Where the closing bracket is.
        position: usize,
        /// The text being read.
        text: String,
    },
    /// Brackets with nothing inside, such as `Na()`.
    EmptyBrackets {
        /// Where the opening bracket is.
        position: usize,
        /// The text being read.
        text: String,
    },
    /// A hydrate or adduct separator with no part after it, such as `CuSO4·`.
    EmptyPart {
        /// Where the separator is.
        position: usize,
        /// The text being read.
        text: String,
    },
    /// The atomic-weight table has no value for an element of the formula.
    NoAtomicWeight {
        /// The element.
        symbol: String,
        /// Name of the table.
        table: &'static str,
    },
    /// An equation without `->`, `→` or `=` between its sides.
    NoArrow {
        /// The equation text.
        text: String,
    },
    /// An equation with more than one arrow.
    SeveralArrows {
        /// Where the second arrow is.
        position: usize,
        /// The equation text.
        text: String,
    },
    /// An equation side, or a place between two `+` separators, with no species.
    EmptySpecies {
        /// Where the species is missing.
        position: usize,
        /// The equation text.
        text: String,
    },
    /// An element whose atoms differ between the two sides of an equation.
    ElementUnbalanced {
        /// The element.
        element: String,
        /// Atoms of it among the reactants (coefficients applied).
        reactants: u64,
        /// Atoms of it among the products (coefficients applied).
        products: u64,
        /// The equation as written back from its species.
        equation: String,
    },
    /// An equation whose total charge differs between the two sides.
    ChargeUnbalanced {
        /// Total charge of the reactants (coefficients applied).
        reactants: i64,
        /// Total charge of the products (coefficients applied).
        products: i64,
        /// The equation as written back from its species.
        equation: String,
    },
}

impl FormulaError {
    /// Moves an error found in a part of a larger text (a species inside an equation) onto the
    /// larger text: positions are shifted by `offset` characters and `text` becomes `whole`.
    pub fn relocate(self, offset: usize, whole: &str) -> FormulaError {
        use FormulaError::*;
        let whole = whole.to_owned();
        match self {
            UnknownElement {
                symbol, position, ..
            } => UnknownElement {
                symbol,
                position: position + offset,
                text: whole,
            },
            UnexpectedCharacter {
                found,
                position,
                expected,
                ..
            } => UnexpectedCharacter {
                found,
                position: position + offset,
                expected,
                text: whole,
            },
            UnexpectedEnd {
                position, expected, ..
            } => UnexpectedEnd {
                position: position + offset,
                expected,
                text: whole,
            },
            ZeroCount { position, .. } => ZeroCount {
                position: position + offset,
                text: whole,
            },
            LeadingZero {
                count, position, ..
            } => LeadingZero {
                count,
                position: position + offset,
                text: whole,
            },
            CountTooLarge {
                count, position, ..
            } => CountTooLarge {
                count,
                position: position + offset,
                text: whole,
            },
            TooManyAtoms {
                symbol, position, ..
            } => TooManyAtoms {
                symbol,
                position: position + offset,
                text: whole,
            },
            UnclosedBracket {
                bracket, position, ..
            } => UnclosedBracket {
                bracket,
                position: position + offset,
                text: whole,
            },
            UnmatchedBracket {
                bracket, position, ..
            } => UnmatchedBracket {
                bracket,
                position: position + offset,
                text: whole,
            },
            MismatchedBracket {
                open,
                close,
                position,
                ..
            } => MismatchedBracket {
                open,
                close,
                position: position + offset,
                text: whole,
            },
            EmptyBrackets { position, .. } => EmptyBrackets {
                position: position + offset,
                text: whole,
            },
            EmptyPart { position, .. } => EmptyPart {
                position: position + offset,
                text: whole,
            },
            other => other,
        }
    }
}

impl fmt::Display for FormulaError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        use FormulaError::*;
        match self {
            Empty => write!(f, "empty formula: expected element symbols such as \"Na2C2O4\""),
            EmptyEquation => write!(
                f,
                "empty equation: expected reactants, an arrow and products such as \"C8H5O4- + OH- -> C8H4O4^2- + H2O\""
            ),
            UnknownElement {
                symbol,
                position,
                text,
            } => write!(
                f,
                "unknown element symbol {symbol:?} at position {position} in {text:?}"
            ),
            UnexpectedCharacter {
                found,
                position,
                expected,
                text,
            } => write!(
                f,
                "unexpected {found:?} at position {position} in {text:?}: expected {expected}"
            ),
            UnexpectedEnd {
                position,
                expected,
                text,
            } => write!(
                f,
                "text ends too early at position {position} in {text:?}: expected {expected}"
            ),
            ZeroCount { position, text } => write!(
                f,
                "zero count at position {position} in {text:?}: a count, multiplier, charge or coefficient must be at least 1"
            ),
            LeadingZero {
                count,
                position,
                text,
            } => write!(
                f,
                "count {count:?} at position {position} in {text:?} has a leading zero"
            ),
            CountTooLarge {
                count,
                position,
                text,
            } => write!(
                f,
                "count {count:?} at position {position} in {text:?} is too large"
            ),
            TooManyAtoms {
                symbol,
                position,
                text,
            } => write!(
                f,
                "too many atoms of {symbol} from the multiplier at position {position} in {text:?}"
            ),
            UnclosedBracket {
                bracket,
                position,
                text,
            } => write!(
                f,
                "bracket {bracket:?} at position {position} in {text:?} is never closed"
            ),
            UnmatchedBracket {
                bracket,
                position,
                text,
            } => write!(
                f,
                "closing bracket {bracket:?} at position {position} in {text:?} has no opening bracket"
            ),
            MismatchedBracket {
                open,
                close,
                position,
                text,
            } => write!(
                f,
                "closing bracket {close:?} at position {position} in {text:?} does not match the open {open:?}"
            ),
            EmptyBrackets { position, text } => write!(
                f,
                "nothing inside the brackets at position {position} in {text:?}"
            ),
            EmptyPart { position, text } => write!(
                f,
                "nothing after the separator at position {position} in {text:?}"
            ),
            NoAtomicWeight { symbol, table } => write!(
                f,
                "the atomic-weight table {table} has no value for {symbol}"
            ),
            NoArrow { text } => write!(
                f,
                "no arrow (\"->\", \"→\" or \"=\") between reactants and products in {text:?}"
            ),
            SeveralArrows { position, text } => write!(
                f,
                "a second arrow at position {position} in {text:?}: an equation has exactly one"
            ),
            EmptySpecies { position, text } => write!(
                f,
                "a species is missing at position {position} in {text:?}"
            ),
            ElementUnbalanced {
                element,
                reactants,
                products,
                equation,
            } => write!(
                f,
                "equation {equation:?} is not balanced: {element} has {reactants} atoms among the reactants and {products} among the products"
            ),
            ChargeUnbalanced {
                reactants,
                products,
                equation,
            } => write!(
                f,
                "equation {equation:?} is not balanced in charge: the reactants carry {reactants:+} and the products {products:+} (difference {:+})",
                products - reactants
            ),
        }
    }
}

impl std::error::Error for FormulaError {}

/// A parsed chemical formula: how many atoms of each element, the charge, and the text it was
/// read from.
///
/// Two formulas are equal when they hold the same atoms and the same charge; the text is not
/// compared, so `OH-` equals `HO-` and `CuSO4·5H2O` equals `CuSO9H10`.
#[derive(Debug, Clone)]
pub struct Formula {
    counts: BTreeMap<String, u32>,
    charge: i32,
    text: String,
}

impl Formula {
    /// Reads a formula by the grammar in the module documentation.
    ///
    /// Whitespace around the formula is ignored; anything the grammar does not allow is an
    /// error naming the position of the first character that could not be read.
    ///
    /// Charge rule: bare trailing signs count one each (`NH4+` is +1, `Fe+++` is +3) and digits
    /// before them are atom counts, so `Ca2+` is Ca₂ with charge +1; write the ion `Ca^2+`.
    pub fn parse(text: &str) -> Result<Formula, FormulaError> {
        let chars: Vec<char> = text.chars().collect();
        let Some(start) = chars.iter().position(|c| !c.is_whitespace()) else {
            return Err(FormulaError::Empty);
        };
        let end = chars
            .iter()
            .rposition(|c| !c.is_whitespace())
            .map_or(start, |last| last + 1);
        let mut reader = Reader {
            text,
            chars: &chars,
            pos: start,
            end,
        };
        let counts = reader.parts()?;
        let charge = reader.charge()?;
        reader.expect_end()?;
        Ok(Formula {
            counts,
            charge,
            text: chars[start..end].iter().collect(),
        })
    }

    /// Atoms per element symbol, in alphabetical order of the symbols.
    pub fn counts(&self) -> &BTreeMap<String, u32> {
        &self.counts
    }

    /// Atoms of one element (0 when the formula has none).
    pub fn count(&self, symbol: &str) -> u32 {
        self.counts.get(symbol).copied().unwrap_or(0)
    }

    /// Charge in elementary charges (0 for a neutral species).
    pub fn charge(&self) -> i32 {
        self.charge
    }

    /// The formula text as given, without surrounding whitespace.
    pub fn text(&self) -> &str {
        &self.text
    }
}

impl PartialEq for Formula {
    fn eq(&self, other: &Formula) -> bool {
        self.counts == other.counts && self.charge == other.charge
    }
}

impl Eq for Formula {}

impl fmt::Display for Formula {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.text)
    }
}

/// Whether `c` separates hydrate or adduct parts.
fn is_separator(c: char) -> bool {
    matches!(c, '·' | '.' | '*')
}

/// Adds `multiplier` times `part` into `total`, refusing counts that do not fit.
fn add_counts(
    total: &mut BTreeMap<String, u32>,
    part: &BTreeMap<String, u32>,
    multiplier: u32,
    position: usize,
    text: &str,
) -> Result<(), FormulaError> {
    for (symbol, count) in part {
        let slot = total.entry(symbol.clone()).or_insert(0);
        let sum = count
            .checked_mul(multiplier)
            .and_then(|added| slot.checked_add(added));
        match sum {
            Some(sum) => *slot = sum,
            None => {
                return Err(FormulaError::TooManyAtoms {
                    symbol: symbol.clone(),
                    position,
                    text: text.to_owned(),
                })
            }
        }
    }
    Ok(())
}

/// What an item list expects: the bracket it is inside, if any.
#[derive(Clone, Copy)]
struct OpenBracket {
    open: char,
    close: char,
    position: usize,
}

/// A cursor over the characters of one formula, between its first and last non-whitespace
/// characters.
struct Reader<'t> {
    text: &'t str,
    chars: &'t [char],
    pos: usize,
    end: usize,
}

impl Reader<'_> {
    fn peek(&self) -> Option<char> {
        (self.pos < self.end).then(|| self.chars[self.pos])
    }

    fn unexpected(&self, found: char, expected: &'static str) -> FormulaError {
        FormulaError::UnexpectedCharacter {
            found,
            position: self.pos,
            expected,
            text: self.text.to_owned(),
        }
    }

    /// The hydrate or adduct parts, each with its multiplier, added together.
    fn parts(&mut self) -> Result<BTreeMap<String, u32>, FormulaError> {
        let mut total = self.items(None)?;
        if total.is_empty() {
            return Err(self.empty_part_error(None));
        }
        while self.peek().is_some_and(is_separator) {
            let separator_position = self.pos;
            self.pos += 1;
            let multiplier = self.optional_count()?.unwrap_or(1);
            let part = self.items(None)?;
            if part.is_empty() {
                return Err(self.empty_part_error(Some(separator_position)));
            }
            add_counts(&mut total, &part, multiplier, separator_position, self.text)?;
        }
        Ok(total)
    }

    /// The error for a part with no items: the character standing in its way, or the end.
    fn empty_part_error(&self, separator_position: Option<usize>) -> FormulaError {
        match (self.peek(), separator_position) {
            (Some(found), _) => self.unexpected(found, "an element symbol or a bracket"),
            (None, Some(position)) => FormulaError::EmptyPart {
                position,
                text: self.text.to_owned(),
            },
            (None, None) => FormulaError::Empty,
        }
    }

    /// Elements and bracketed groups up to the end of a part or, inside brackets, up to and
    /// including the closing bracket.
    fn items(
        &mut self,
        inside: Option<OpenBracket>,
    ) -> Result<BTreeMap<String, u32>, FormulaError> {
        let mut counts = BTreeMap::new();
        loop {
            let Some(c) = self.peek() else {
                return match inside {
                    Some(open) => Err(FormulaError::UnclosedBracket {
                        bracket: open.open,
                        position: open.position,
                        text: self.text.to_owned(),
                    }),
                    None => Ok(counts),
                };
            };
            match c {
                'A'..='Z' => self.element(&mut counts)?,
                '(' | '[' => self.group(&mut counts, c)?,
                ')' | ']' => {
                    self.closing(c, inside)?;
                    return Ok(counts);
                }
                _ if inside.is_some() => {
                    return Err(self.unexpected(c, "an element symbol or a bracket"));
                }
                '^' | '+' | '-' => return Ok(counts),
                _ if is_separator(c) => return Ok(counts),
                _ => return Err(self.unexpected(c, "an element symbol or a bracket")),
            }
        }
    }

    /// Consumes a closing bracket, which must close `inside`.
    fn closing(&mut self, close: char, inside: Option<OpenBracket>) -> Result<(), FormulaError> {
        let text = self.text.to_owned();
        match inside {
            None => Err(FormulaError::UnmatchedBracket {
                bracket: close,
                position: self.pos,
                text,
            }),
            Some(open) if open.close != close => Err(FormulaError::MismatchedBracket {
                open: open.open,
                close,
                position: self.pos,
                text,
            }),
            Some(_) => {
                self.pos += 1;
                Ok(())
            }
        }
    }

    /// One element symbol and its optional count.
    fn element(&mut self, counts: &mut BTreeMap<String, u32>) -> Result<(), FormulaError> {
        let start = self.pos;
        self.pos += 1;
        if self.peek().is_some_and(|c| c.is_ascii_lowercase()) {
            self.pos += 1;
        }
        let symbol: String = self.chars[start..self.pos].iter().collect();
        if !is_element_symbol(&symbol) {
            return Err(FormulaError::UnknownElement {
                symbol,
                position: start,
                text: self.text.to_owned(),
            });
        }
        let count = self.optional_count()?.unwrap_or(1);
        let single = BTreeMap::from([(symbol, 1)]);
        add_counts(counts, &single, count, start, self.text)
    }

    /// One bracketed group and its optional count.
    fn group(
        &mut self,
        counts: &mut BTreeMap<String, u32>,
        open: char,
    ) -> Result<(), FormulaError> {
        let bracket = OpenBracket {
            open,
            close: if open == '(' { ')' } else { ']' },
            position: self.pos,
        };
        self.pos += 1;
        let inner = self.items(Some(bracket))?;
        if inner.is_empty() {
            return Err(FormulaError::EmptyBrackets {
                position: bracket.position,
                text: self.text.to_owned(),
            });
        }
        let count = self.optional_count()?.unwrap_or(1);
        add_counts(counts, &inner, count, bracket.position, self.text)
    }

    /// A run of digits, if one stands here: at least 1, no leading zero.
    fn optional_count(&mut self) -> Result<Option<u32>, FormulaError> {
        let start = self.pos;
        while self.peek().is_some_and(|c| c.is_ascii_digit()) {
            self.pos += 1;
        }
        if start == self.pos {
            return Ok(None);
        }
        let digits: String = self.chars[start..self.pos].iter().collect();
        parse_count(&digits, start, self.text).map(Some)
    }

    /// The trailing charge, 0 when there is none.
    fn charge(&mut self) -> Result<i32, FormulaError> {
        match self.peek() {
            Some('^') => self.explicit_charge(),
            Some(sign @ ('+' | '-')) => {
                let mut magnitude = 0_i32;
                while self.peek() == Some(sign) {
                    self.pos += 1;
                    magnitude = magnitude.saturating_add(1);
                }
                Ok(if sign == '+' { magnitude } else { -magnitude })
            }
            _ => Ok(0),
        }
    }

    /// `^N+`, `^N-`, `^+` or `^-`.
    fn explicit_charge(&mut self) -> Result<i32, FormulaError> {
        self.pos += 1;
        let number_start = self.pos;
        let magnitude = self.optional_count()?.unwrap_or(1);
        let sign = match self.peek() {
            Some('+') => 1,
            Some('-') => -1,
            Some(found) => return Err(self.unexpected(found, "'+' or '-' to end the charge")),
            None => {
                return Err(FormulaError::UnexpectedEnd {
                    position: self.pos,
                    expected: "'+' or '-' to end the charge",
                    text: self.text.to_owned(),
                })
            }
        };
        self.pos += 1;
        let magnitude = i32::try_from(magnitude).map_err(|_| FormulaError::CountTooLarge {
            count: magnitude.to_string(),
            position: number_start,
            text: self.text.to_owned(),
        })?;
        Ok(sign * magnitude)
    }

    /// Refuses anything left after the charge.
    fn expect_end(&self) -> Result<(), FormulaError> {
        match self.peek() {
            None => Ok(()),
            Some(found) => Err(self.unexpected(found, "the end of the formula after its charge")),
        }
    }
}

/// Reads a count, multiplier or coefficient written as decimal digits starting at `position`.
pub(crate) fn parse_count(digits: &str, position: usize, text: &str) -> Result<u32, FormulaError> {
    if digits.chars().all(|c| c == '0') {
        return Err(FormulaError::ZeroCount {
            position,
            text: text.to_owned(),
        });
    }
    if digits.starts_with('0') {
        return Err(FormulaError::LeadingZero {
            count: digits.to_owned(),
            position,
            text: text.to_owned(),
        });
    }
    digits.parse().map_err(|_| FormulaError::CountTooLarge {
        count: digits.to_owned(),
        position,
        text: text.to_owned(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn counts_of(text: &str) -> Vec<(String, u32)> {
        let formula = Formula::parse(text).expect("formula parses");
        formula.counts().clone().into_iter().collect()
    }

    fn pairs(expected: &[(&str, u32)]) -> Vec<(String, u32)> {
        expected.iter().map(|(s, n)| (s.to_string(), *n)).collect()
    }

    #[test]
    fn reads_simple_formula() {
        assert_eq!(
            counts_of("Na2C2O4"),
            pairs(&[("C", 2), ("Na", 2), ("O", 4)])
        );
        assert_eq!(Formula::parse("Na2C2O4").unwrap().charge(), 0);
    }

    #[test]
    fn adds_repeated_elements() {
        // KHP as written by chemists: K, H, C8, H4, O4.
        assert_eq!(
            counts_of("KHC8H4O4"),
            pairs(&[("C", 8), ("H", 5), ("K", 1), ("O", 4)])
        );
    }

    #[test]
    fn reads_parentheses_with_multiplier() {
        assert_eq!(
            counts_of("Ca3(PO4)2"),
            pairs(&[("Ca", 3), ("O", 8), ("P", 2)])
        );
    }

    #[test]
    fn reads_nested_brackets_and_hydrate() {
        assert_eq!(
            counts_of("K4[Fe(CN)6]·3H2O"),
            pairs(&[("C", 6), ("Fe", 1), ("H", 6), ("K", 4), ("N", 6), ("O", 3)])
        );
    }

    #[test]
    fn reads_every_hydrate_separator() {
        let expected = pairs(&[("Cu", 1), ("H", 10), ("O", 9), ("S", 1)]);
        for text in ["CuSO4·5H2O", "CuSO4.5H2O", "CuSO4*5H2O"] {
            assert_eq!(counts_of(text), expected, "{text}");
        }
    }

    #[test]
    fn reads_hydrate_without_multiplier_and_several_parts() {
        assert_eq!(
            counts_of("CaSO4·H2O"),
            pairs(&[("Ca", 1), ("H", 2), ("O", 5), ("S", 1)])
        );
        assert_eq!(
            counts_of("Na2CO3·NaHCO3·2H2O"),
            pairs(&[("C", 2), ("H", 5), ("Na", 3), ("O", 8)])
        );
    }

    #[test]
    fn reads_disodium_edetate_dihydrate() {
        assert_eq!(
            counts_of("C10H14N2Na2O8·2H2O"),
            pairs(&[("C", 10), ("H", 18), ("N", 2), ("Na", 2), ("O", 10)])
        );
    }

    #[test]
    fn ignores_whitespace_around_the_formula_and_keeps_trimmed_text() {
        let formula = Formula::parse("  \tKMnO4 \n").unwrap();
        assert_eq!(formula.text(), "KMnO4");
        assert_eq!(formula.count("Mn"), 1);
    }

    #[test]
    fn reads_explicit_charges() {
        for (text, charge) in [
            ("C2O4^2-", -2),
            ("Mn^2+", 2),
            ("Fe^3+", 3),
            ("MnO4^-", -1),
            ("H^+", 1),
            ("PO4^3-", -3),
        ] {
            assert_eq!(Formula::parse(text).unwrap().charge(), charge, "{text}");
        }
    }

    #[test]
    fn reads_bare_signs_one_charge_each() {
        for (text, charge) in [
            ("NH4+", 1),
            ("OH-", -1),
            ("Fe+++", 3),
            ("SO4--", -2),
            ("H+", 1),
        ] {
            assert_eq!(Formula::parse(text).unwrap().charge(), charge, "{text}");
        }
        assert_eq!(counts_of("NH4+"), pairs(&[("H", 4), ("N", 1)]));
    }

    #[test]
    fn reads_digits_before_a_bare_sign_as_an_atom_count() {
        // The documented rule: Ca2+ is Ca₂ with charge +1; the ion is Ca^2+.
        let formula = Formula::parse("Ca2+").unwrap();
        assert_eq!(formula.count("Ca"), 2);
        assert_eq!(formula.charge(), 1);
        let ion = Formula::parse("Ca^2+").unwrap();
        assert_eq!(ion.count("Ca"), 1);
        assert_eq!(ion.charge(), 2);
    }

    #[test]
    fn equal_formulas_ignore_order_and_text() {
        assert_eq!(
            Formula::parse("OH-").unwrap(),
            Formula::parse("HO^-").unwrap()
        );
        assert_eq!(
            Formula::parse("CuSO4·5H2O").unwrap(),
            Formula::parse("CuSO9H10").unwrap()
        );
        assert_ne!(
            Formula::parse("OH-").unwrap(),
            Formula::parse("OH").unwrap()
        );
    }

    #[test]
    fn rejects_empty_text() {
        assert_eq!(Formula::parse(""), Err(FormulaError::Empty));
        assert_eq!(Formula::parse("   "), Err(FormulaError::Empty));
    }

    #[test]
    fn rejects_unknown_element_symbol() {
        let error = Formula::parse("Xx2O").unwrap_err();
        assert_eq!(
            error,
            FormulaError::UnknownElement {
                symbol: "Xx".into(),
                position: 0,
                text: "Xx2O".into()
            }
        );
        assert_eq!(
            error.to_string(),
            "unknown element symbol \"Xx\" at position 0 in \"Xx2O\""
        );
    }

    #[test]
    fn rejects_abbreviation_edta() {
        let error = Formula::parse("EDTA").unwrap_err();
        assert!(matches!(
            error,
            FormulaError::UnknownElement { ref symbol, position: 0, .. } if symbol == "E"
        ));
    }

    #[test]
    fn rejects_unknown_symbol_after_known_ones() {
        let error = Formula::parse("NaQ").unwrap_err();
        assert!(matches!(
            error,
            FormulaError::UnknownElement { ref symbol, position: 2, .. } if symbol == "Q"
        ));
    }

    #[test]
    fn rejects_trailing_comma_with_its_position() {
        let error = Formula::parse("NaCl,").unwrap_err();
        assert!(matches!(
            error,
            FormulaError::UnexpectedCharacter {
                found: ',',
                position: 4,
                ..
            }
        ));
        assert_eq!(
            error.to_string(),
            "unexpected ',' at position 4 in \"NaCl,\": expected an element symbol or a bracket"
        );
    }

    #[test]
    fn rejects_inner_whitespace() {
        let error = Formula::parse("Na Cl").unwrap_err();
        assert!(matches!(
            error,
            FormulaError::UnexpectedCharacter {
                found: ' ',
                position: 2,
                ..
            }
        ));
    }

    #[test]
    fn rejects_unclosed_parenthesis() {
        let error = Formula::parse("Na2(SO4").unwrap_err();
        assert_eq!(
            error,
            FormulaError::UnclosedBracket {
                bracket: '(',
                position: 3,
                text: "Na2(SO4".into()
            }
        );
        assert_eq!(
            error.to_string(),
            "bracket '(' at position 3 in \"Na2(SO4\" is never closed"
        );
    }

    #[test]
    fn rejects_unmatched_and_mismatched_brackets() {
        assert!(matches!(
            Formula::parse("NaSO4)2").unwrap_err(),
            FormulaError::UnmatchedBracket {
                bracket: ')',
                position: 5,
                ..
            }
        ));
        assert!(matches!(
            Formula::parse("K4[Fe(CN]6)").unwrap_err(),
            FormulaError::MismatchedBracket {
                open: '(',
                close: ']',
                position: 8,
                ..
            }
        ));
    }

    #[test]
    fn rejects_empty_brackets() {
        assert!(matches!(
            Formula::parse("Na()").unwrap_err(),
            FormulaError::EmptyBrackets { position: 2, .. }
        ));
    }

    #[test]
    fn rejects_zero_count() {
        let error = Formula::parse("H0").unwrap_err();
        assert_eq!(
            error,
            FormulaError::ZeroCount {
                position: 1,
                text: "H0".into()
            }
        );
        assert!(matches!(
            Formula::parse("(OH)0").unwrap_err(),
            FormulaError::ZeroCount { position: 4, .. }
        ));
        assert!(matches!(
            Formula::parse("CuSO4·0H2O").unwrap_err(),
            FormulaError::ZeroCount { position: 6, .. }
        ));
        assert!(matches!(
            Formula::parse("Fe^0+").unwrap_err(),
            FormulaError::ZeroCount { position: 3, .. }
        ));
    }

    #[test]
    fn rejects_leading_zero_and_huge_counts() {
        assert!(matches!(
            Formula::parse("H02").unwrap_err(),
            FormulaError::LeadingZero { ref count, position: 1, .. } if count == "02"
        ));
        assert!(matches!(
            Formula::parse("H99999999999").unwrap_err(),
            FormulaError::CountTooLarge { position: 1, .. }
        ));
        assert!(matches!(
            Formula::parse("(H4000000000)2").unwrap_err(),
            FormulaError::TooManyAtoms { ref symbol, position: 0, .. } if symbol == "H"
        ));
    }

    #[test]
    fn rejects_leading_count() {
        assert!(matches!(
            Formula::parse("2H2O").unwrap_err(),
            FormulaError::UnexpectedCharacter {
                found: '2',
                position: 0,
                ..
            }
        ));
    }

    #[test]
    fn rejects_lowercase_start() {
        assert!(matches!(
            Formula::parse("nacl").unwrap_err(),
            FormulaError::UnexpectedCharacter {
                found: 'n',
                position: 0,
                ..
            }
        ));
    }

    #[test]
    fn rejects_empty_hydrate_part() {
        assert!(matches!(
            Formula::parse("CuSO4·").unwrap_err(),
            FormulaError::EmptyPart { position: 5, .. }
        ));
        assert!(matches!(
            Formula::parse("CuSO4··5H2O").unwrap_err(),
            FormulaError::UnexpectedCharacter {
                found: '·',
                position: 6,
                ..
            }
        ));
        assert!(matches!(
            Formula::parse("CuSO4·5").unwrap_err(),
            FormulaError::EmptyPart { position: 5, .. }
        ));
    }

    #[test]
    fn rejects_charge_that_is_not_last() {
        assert!(matches!(
            Formula::parse("NH4+Cl").unwrap_err(),
            FormulaError::UnexpectedCharacter {
                found: 'C',
                position: 4,
                ..
            }
        ));
        assert!(matches!(
            Formula::parse("Fe+-").unwrap_err(),
            FormulaError::UnexpectedCharacter {
                found: '-',
                position: 3,
                ..
            }
        ));
        assert!(matches!(
            Formula::parse("(NH4+)").unwrap_err(),
            FormulaError::UnexpectedCharacter {
                found: '+',
                position: 4,
                ..
            }
        ));
    }

    #[test]
    fn rejects_charge_without_sign() {
        let error = Formula::parse("Ca^2").unwrap_err();
        assert_eq!(
            error,
            FormulaError::UnexpectedEnd {
                position: 4,
                expected: "'+' or '-' to end the charge",
                text: "Ca^2".into()
            }
        );
        assert!(matches!(
            Formula::parse("Ca^2x").unwrap_err(),
            FormulaError::UnexpectedCharacter {
                found: 'x',
                position: 4,
                ..
            }
        ));
    }

    #[test]
    fn rejects_charge_alone() {
        assert!(matches!(
            Formula::parse("+").unwrap_err(),
            FormulaError::UnexpectedCharacter {
                found: '+',
                position: 0,
                ..
            }
        ));
    }

    #[test]
    fn positions_count_characters_not_bytes() {
        // '·' is two bytes in UTF-8 but one character.
        assert!(matches!(
            Formula::parse("CuSO4·5H2Q").unwrap_err(),
            FormulaError::UnknownElement { position: 9, .. }
        ));
    }

    #[test]
    fn positions_count_leading_whitespace() {
        assert!(matches!(
            Formula::parse("  Xx").unwrap_err(),
            FormulaError::UnknownElement { position: 2, .. }
        ));
    }

    #[test]
    fn relocates_errors_into_a_larger_text() {
        let error = Formula::parse("Xx").unwrap_err().relocate(4, "H + Xx -> Y");
        assert_eq!(
            error,
            FormulaError::UnknownElement {
                symbol: "Xx".into(),
                position: 4,
                text: "H + Xx -> Y".into()
            }
        );
    }

    #[test]
    fn knows_all_118_element_symbols_once() {
        let mut sorted = ELEMENT_SYMBOLS.to_vec();
        sorted.sort_unstable();
        sorted.dedup();
        assert_eq!(sorted.len(), 118);
        assert!(is_element_symbol("Og"));
        assert!(!is_element_symbol("CO"));
        assert!(!is_element_symbol("D"));
    }
}
