//! Balanced chemical equations: reads a method's reaction, checks that it balances, and gives the
//! stoichiometric coefficients the recompute engine divides by.
//!
//! Owns the equation syntax and the balance check (atoms per element and total charge). It never
//! balances an equation itself or guesses a coefficient: a method states its equation and an
//! equation that does not balance is refused, naming the element or the charge that differs.
//!
//! # Syntax
//!
//! `reactants ARROW products`, where ARROW is `->`, `→` or `=` (exactly one), and each side is
//! species separated by `+` standing alone between whitespace. A `+` touching a formula belongs
//! to it as a charge, so `16 H+ + 5 C2O4^2-` is two species; write whitespace around the arrow
//! too. Each species is an optional positive integer coefficient (`2 MnO4-` or `2MnO4-`)
//! followed by a formula in the grammar of `formula` (charges as `^2+`, or bare signs counting
//! one each).

use std::collections::BTreeMap;
use std::fmt;

use super::formula::{parse_count, Formula, FormulaError};

/// One species of an equation with its stoichiometric coefficient.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Species {
    /// Stoichiometric coefficient (at least 1).
    pub coefficient: u32,
    /// The species.
    pub formula: Formula,
}

impl fmt::Display for Species {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.coefficient {
            1 => write!(f, "{}", self.formula),
            n => write!(f, "{n} {}", self.formula),
        }
    }
}

/// A chemical equation: reactants on the left, products on the right.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Equation {
    /// Left side, in the order written.
    pub reactants: Vec<Species>,
    /// Right side, in the order written.
    pub products: Vec<Species>,
}

impl fmt::Display for Equation {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write_side(f, &self.reactants)?;
        f.write_str(" -> ")?;
        write_side(f, &self.products)
    }
}

fn write_side(f: &mut fmt::Formatter<'_>, side: &[Species]) -> fmt::Result {
    for (i, species) in side.iter().enumerate() {
        if i > 0 {
            f.write_str(" + ")?;
        }
        write!(f, "{species}")?;
    }
    Ok(())
}

impl Equation {
    /// Reads an equation such as `2 MnO4- + 5 C2O4^2- + 16 H+ -> 2 Mn^2+ + 10 CO2 + 8 H2O`.
    ///
    /// Reading does not check the balance; call [`Equation::check_balanced`] for that. Errors
    /// inside a species carry positions in the whole equation text.
    pub fn parse(text: &str) -> Result<Equation, FormulaError> {
        let chars: Vec<char> = text.chars().collect();
        if chars.iter().all(|c| c.is_whitespace()) {
            return Err(FormulaError::EmptyEquation);
        }
        let (arrow_start, arrow_end) = find_arrow(&chars, text)?;
        Ok(Equation {
            reactants: parse_side(&chars, 0, arrow_start, text)?,
            products: parse_side(&chars, arrow_end, chars.len(), text)?,
        })
    }

    /// Checks that every element has as many atoms among the reactants as among the products,
    /// then that the total charge is the same on both sides.
    ///
    /// The first unbalanced element in alphabetical order is named; the charge is checked only
    /// once all elements balance.
    pub fn check_balanced(&self) -> Result<(), FormulaError> {
        let left = atoms(&self.reactants);
        let right = atoms(&self.products);
        let elements: std::collections::BTreeSet<&String> =
            left.keys().chain(right.keys()).collect();
        for element in elements {
            let reactants = left.get(element).copied().unwrap_or(0);
            let products = right.get(element).copied().unwrap_or(0);
            if reactants != products {
                return Err(FormulaError::ElementUnbalanced {
                    element: element.clone(),
                    reactants,
                    products,
                    equation: self.to_string(),
                });
            }
        }
        let (reactants, products) = (charge(&self.reactants), charge(&self.products));
        if reactants != products {
            return Err(FormulaError::ChargeUnbalanced {
                reactants,
                products,
                equation: self.to_string(),
            });
        }
        Ok(())
    }

    /// The coefficient of the species whose formula has the same atoms and charge as
    /// `species_text` (so `HO-` finds `OH-`), looking first among the reactants, then the
    /// products. `None` when the text is not a formula or no species matches.
    pub fn coefficient_of(&self, species_text: &str) -> Option<u32> {
        let wanted = Formula::parse(species_text).ok()?;
        self.reactants
            .iter()
            .chain(&self.products)
            .find(|species| species.formula == wanted)
            .map(|species| species.coefficient)
    }
}

/// Atoms per element on one side, coefficients applied.
fn atoms(side: &[Species]) -> BTreeMap<String, u64> {
    let mut total = BTreeMap::new();
    for species in side {
        for (symbol, count) in species.formula.counts() {
            *total.entry(symbol.clone()).or_insert(0) +=
                u64::from(species.coefficient) * u64::from(*count);
        }
    }
    total
}

/// Total charge of one side, coefficients applied.
fn charge(side: &[Species]) -> i64 {
    side.iter()
        .map(|s| i64::from(s.coefficient) * i64::from(s.formula.charge()))
        .sum()
}

/// The character range of the one arrow: `->`, `→` or `=`.
fn find_arrow(chars: &[char], text: &str) -> Result<(usize, usize), FormulaError> {
    let mut found: Option<(usize, usize)> = None;
    let mut i = 0;
    while i < chars.len() {
        let width = match (chars[i], chars.get(i + 1)) {
            ('-', Some('>')) => 2,
            ('→' | '=', _) => 1,
            _ => 0,
        };
        if width > 0 {
            if found.is_some() {
                return Err(FormulaError::SeveralArrows {
                    position: i,
                    text: text.to_owned(),
                });
            }
            found = Some((i, i + width));
            i += width;
        } else {
            i += 1;
        }
    }
    found.ok_or_else(|| FormulaError::NoArrow {
        text: text.to_owned(),
    })
}

/// A run of non-whitespace characters: `[start, end)` in the equation.
#[derive(Clone, Copy)]
struct Token {
    start: usize,
    end: usize,
}

/// Splits `chars[start..end]` into whitespace-separated tokens.
fn tokens(chars: &[char], start: usize, end: usize) -> Vec<Token> {
    let mut found = Vec::new();
    let mut i = start;
    while i < end {
        if chars[i].is_whitespace() {
            i += 1;
            continue;
        }
        let token_start = i;
        while i < end && !chars[i].is_whitespace() {
            i += 1;
        }
        found.push(Token {
            start: token_start,
            end: i,
        });
    }
    found
}

/// The species of one side, `chars[start..end]`.
fn parse_side(
    chars: &[char],
    start: usize,
    end: usize,
    text: &str,
) -> Result<Vec<Species>, FormulaError> {
    let tokens = tokens(chars, start, end);
    let is_plus = |token: &Token| token.end - token.start == 1 && chars[token.start] == '+';
    let mut side = Vec::new();
    let mut group_start = start;
    let mut group: Vec<Token> = Vec::new();
    for token in tokens.iter().copied() {
        if is_plus(&token) {
            side.push(parse_species(chars, &group, group_start, text)?);
            group.clear();
            group_start = token.start;
        } else {
            group.push(token);
        }
    }
    side.push(parse_species(chars, &group, group_start, text)?);
    Ok(side)
}

/// One species from its tokens: an optional coefficient, then a formula.
fn parse_species(
    chars: &[char],
    group: &[Token],
    missing_at: usize,
    text: &str,
) -> Result<Species, FormulaError> {
    let (Some(first), Some(last)) = (group.first(), group.last()) else {
        return Err(FormulaError::EmptySpecies {
            position: missing_at,
            text: text.to_owned(),
        });
    };
    let digits_end = (first.start..first.end)
        .find(|&i| !chars[i].is_ascii_digit())
        .unwrap_or(first.end);
    let coefficient = if digits_end > first.start {
        let digits: String = chars[first.start..digits_end].iter().collect();
        parse_count(&digits, first.start, text)?
    } else {
        1
    };
    let formula_start = if digits_end == first.end {
        match group.get(1) {
            Some(next) => next.start,
            None => {
                return Err(FormulaError::EmptySpecies {
                    position: first.end,
                    text: text.to_owned(),
                })
            }
        }
    } else {
        digits_end
    };
    let formula_text: String = chars[formula_start..last.end].iter().collect();
    let formula =
        Formula::parse(&formula_text).map_err(|error| error.relocate(formula_start, text))?;
    Ok(Species {
        coefficient,
        formula,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::chem::atomic_weights::ciaaw_2021;
    use crate::chem::molar_mass::molar_mass_of;

    const OXALATE: &str = "2 MnO4- + 5 C2O4^2- + 16 H+ -> 2 Mn^2+ + 10 CO2 + 8 H2O";
    const PEROXIDE: &str = "2 MnO4- + 5 H2O2 + 6 H+ -> 2 Mn^2+ + 5 O2 + 8 H2O";
    const KHP: &str = "C8H5O4- + OH- -> C8H4O4^2- + H2O";
    // Y (the edetate anion C10H12N2O8^4-) written out: Y is the symbol of yttrium.
    const EDETATE: &str = "Ca^2+ + C10H14N2O8^2- -> CaC10H12N2O8^2- + 2 H+";

    fn parsed(text: &str) -> Equation {
        Equation::parse(text).expect("equation parses")
    }

    fn molar(text: &str) -> f64 {
        molar_mass_of(text, ciaaw_2021()).expect("molar mass").value
    }

    fn rounds_to(value: f64, decimals: i32, printed: f64) -> bool {
        let scale = 10_f64.powi(decimals);
        ((value * scale).round() / scale - printed).abs() < 1e-9
    }

    #[test]
    fn reads_species_coefficients_and_charges() {
        let equation = parsed(OXALATE);
        assert_eq!(equation.reactants.len(), 3);
        assert_eq!(equation.products.len(), 3);
        assert_eq!(equation.reactants[2].coefficient, 16);
        assert_eq!(equation.reactants[2].formula.charge(), 1);
        assert_eq!(equation.reactants[1].formula.text(), "C2O4^2-");
        assert_eq!(equation.products[0].formula.charge(), 2);
        assert_eq!(equation.to_string(), OXALATE);
    }

    #[test]
    fn permanganate_oxalate_balances_two_to_five() {
        // REFERENCES.md 7: 2 MnO4⁻ + 5 C2O4²⁻ + 16 H⁺ → 2 Mn²⁺ + 10 CO2 + 8 H2O (2 : 5) [pub].
        let equation = parsed(OXALATE);
        assert_eq!(equation.check_balanced(), Ok(()));
        assert_eq!(equation.coefficient_of("MnO4-"), Some(2));
        assert_eq!(equation.coefficient_of("C2O4^2-"), Some(5));
    }

    #[test]
    fn permanganate_peroxide_balances_two_to_five() {
        // REFERENCES.md 7: 2 MnO4⁻ + 5 H2O2 + 6 H⁺ → 2 Mn²⁺ + 5 O2 + 8 H2O (2 : 5) [pub].
        let equation = parsed(PEROXIDE);
        assert_eq!(equation.check_balanced(), Ok(()));
        assert_eq!(equation.coefficient_of("MnO4-"), Some(2));
        assert_eq!(equation.coefficient_of("H2O2"), Some(5));
    }

    #[test]
    fn hydrogen_phthalate_and_hydroxide_balance_one_to_one() {
        // REFERENCES.md 7: KHP + NaOH 1 : 1 [pub]; written as the ions [cp].
        let equation = parsed(KHP);
        assert_eq!(equation.check_balanced(), Ok(()));
        assert_eq!(equation.coefficient_of("C8H5O4-"), Some(1));
        assert_eq!(equation.coefficient_of("OH-"), Some(1));
    }

    #[test]
    fn calcium_and_edetate_balance_one_to_one() {
        // REFERENCES.md 7: Ca²⁺ + EDTA 1 : 1 [pub]; H2Y²⁻ written in elements [cp].
        let equation = parsed(EDETATE);
        assert_eq!(equation.check_balanced(), Ok(()));
        assert_eq!(equation.coefficient_of("Ca^2+"), Some(1));
        assert_eq!(equation.coefficient_of("C10H14N2O8^2-"), Some(1));
        assert_eq!(equation.coefficient_of("H+"), Some(2));
    }

    #[test]
    fn finds_coefficients_by_composition_on_either_side() {
        let equation = parsed(OXALATE);
        assert_eq!(equation.coefficient_of("O4Mn-"), Some(2));
        assert_eq!(equation.coefficient_of("OH2"), Some(8));
        assert_eq!(equation.coefficient_of(" CO2 "), Some(10));
        assert_eq!(equation.coefficient_of("Mn^3+"), None);
        assert_eq!(equation.coefficient_of("MnO4"), None);
        assert_eq!(equation.coefficient_of("not a formula"), None);
    }

    #[test]
    fn usp_oxalate_equivalence_from_molar_masses() {
        // USP assay of KMnO4: 0.4718 mg KMnO4 per mg Na2C2O4 = 2·158.034/(5·133.999) [pub].
        // Recomputed with CIAAW 2021 five-figure weights the ratio is 0.471744, which rounds to
        // 0.4717 (so does the quoted 2·158.034/(5·133.999) = 0.471747). The printed 0.4718 is
        // therefore held only to one unit in its last digit.
        let equation = parsed(OXALATE);
        let permanganate = f64::from(equation.coefficient_of("MnO4-").unwrap());
        let oxalate = f64::from(equation.coefficient_of("C2O4^2-").unwrap());
        let ratio = permanganate * molar("KMnO4") / (oxalate * molar("Na2C2O4"));
        assert!((ratio - 0.4718).abs() <= 0.0001, "{ratio}");
        assert!(rounds_to(ratio, 4, 0.4717), "{ratio}");
    }

    #[test]
    fn peroxide_equivalence_from_molar_masses() {
        // Each mL of 0.02 mol/L KMnO4 ≡ 1.701 mg H2O2 [pub].
        let equation = parsed(PEROXIDE);
        let ratio = f64::from(equation.coefficient_of("H2O2").unwrap())
            / f64::from(equation.coefficient_of("MnO4-").unwrap());
        let mg_per_ml = 0.02 * ratio * molar("H2O2");
        assert!(rounds_to(mg_per_ml, 3, 1.701), "{mg_per_ml}");
    }

    #[test]
    fn khp_equivalence_from_molar_masses() {
        // 1 mL of 0.1 mol/L NaOH ≡ 20.42 mg KHP (Ph. Eur./BP) [pub].
        let equation = parsed(KHP);
        let ratio = f64::from(equation.coefficient_of("C8H5O4-").unwrap())
            / f64::from(equation.coefficient_of("OH-").unwrap());
        let mg_per_ml = 0.1 * ratio * molar("KHC8H4O4");
        assert!(rounds_to(mg_per_ml, 2, 20.42), "{mg_per_ml}");
    }

    #[test]
    fn edetate_equivalence_from_molar_masses() {
        // 1 mL of 0.05 mol/L disodium edetate ≡ 5.005 mg CaCO3 (WHO QC methods) [pub].
        // Recomputed: 0.05 · 100.086 = 5.0043, which rounds to 5.004; the printed 5.005 is
        // what M(CaCO3) rounded to 100.1 gives [calc], so it is held to one unit in its last
        // digit.
        let equation = parsed(EDETATE);
        let ratio = f64::from(equation.coefficient_of("Ca^2+").unwrap())
            / f64::from(equation.coefficient_of("C10H14N2O8^2-").unwrap());
        let mg_per_ml = 0.05 * ratio * molar("CaCO3");
        assert!((mg_per_ml - 5.005).abs() <= 0.001, "{mg_per_ml}");
        assert!(rounds_to(0.05 * 100.1, 3, 5.005));
    }

    #[test]
    fn refuses_unbalanced_equation_naming_the_element() {
        let equation = parsed("MnO4- + C2O4^2- -> Mn^2+ + CO2");
        let error = equation.check_balanced().unwrap_err();
        assert_eq!(
            error,
            FormulaError::ElementUnbalanced {
                element: "C".into(),
                reactants: 2,
                products: 1,
                equation: "MnO4- + C2O4^2- -> Mn^2+ + CO2".into()
            }
        );
        assert_eq!(
            error.to_string(),
            "equation \"MnO4- + C2O4^2- -> Mn^2+ + CO2\" is not balanced: C has 2 atoms among \
             the reactants and 1 among the products"
        );
    }

    #[test]
    fn refuses_equation_balanced_in_atoms_but_not_in_charge() {
        // The permanganate half-reaction without its five electrons.
        let equation = parsed("MnO4- + 8 H+ -> Mn^2+ + 4 H2O");
        let error = equation.check_balanced().unwrap_err();
        assert_eq!(
            error,
            FormulaError::ChargeUnbalanced {
                reactants: 7,
                products: 2,
                equation: "MnO4- + 8 H+ -> Mn^2+ + 4 H2O".into()
            }
        );
        assert_eq!(
            error.to_string(),
            "equation \"MnO4- + 8 H+ -> Mn^2+ + 4 H2O\" is not balanced in charge: the \
             reactants carry +7 and the products +2 (difference -5)"
        );
    }

    #[test]
    fn refuses_element_present_on_one_side_only() {
        let error = parsed("H2 + O2 -> H2O2 + Na").check_balanced().unwrap_err();
        assert!(matches!(
            error,
            FormulaError::ElementUnbalanced { ref element, reactants: 0, products: 1, .. }
                if element == "Na"
        ));
    }

    #[test]
    fn accepts_every_arrow_and_attached_coefficients() {
        let expected = parsed(PEROXIDE);
        for text in [
            "2 MnO4- + 5 H2O2 + 6 H+ → 2 Mn^2+ + 5 O2 + 8 H2O",
            "2 MnO4- + 5 H2O2 + 6 H+ = 2 Mn^2+ + 5 O2 + 8 H2O",
            "2MnO4- + 5H2O2 + 6H+ -> 2Mn^2+ + 5O2 + 8H2O",
            "  2  MnO4-   +  5 H2O2 + 6 H+->2 Mn^2+ + 5 O2 + 8 H2O ",
        ] {
            assert_eq!(parsed(text), expected, "{text}");
        }
    }

    #[test]
    fn reads_hydrates_inside_equations() {
        let equation = parsed("CuSO4·5H2O -> CuSO4 + 5 H2O");
        assert_eq!(equation.check_balanced(), Ok(()));
    }

    #[test]
    fn rejects_empty_equation() {
        assert_eq!(Equation::parse(" "), Err(FormulaError::EmptyEquation));
    }

    #[test]
    fn rejects_equation_without_arrow() {
        assert_eq!(
            Equation::parse("H+ + OH- H2O"),
            Err(FormulaError::NoArrow {
                text: "H+ + OH- H2O".into()
            })
        );
    }

    #[test]
    fn rejects_two_arrows() {
        assert!(matches!(
            Equation::parse("A -> B -> C").unwrap_err(),
            FormulaError::SeveralArrows { position: 7, .. }
        ));
    }

    #[test]
    fn rejects_missing_species() {
        assert!(matches!(
            Equation::parse("H+ + -> H2O").unwrap_err(),
            FormulaError::EmptySpecies { position: 3, .. }
        ));
        assert!(matches!(
            Equation::parse(" -> H2O").unwrap_err(),
            FormulaError::EmptySpecies { position: 0, .. }
        ));
        assert!(matches!(
            Equation::parse("H2O -> 2").unwrap_err(),
            FormulaError::EmptySpecies { position: 8, .. }
        ));
    }

    #[test]
    fn rejects_zero_coefficient() {
        assert!(matches!(
            Equation::parse("0 H2O -> H2O").unwrap_err(),
            FormulaError::ZeroCount { position: 0, .. }
        ));
    }

    #[test]
    fn reports_species_errors_at_their_place_in_the_equation() {
        let error = Equation::parse("2 MnO4- + 5 Xx -> Y").unwrap_err();
        assert_eq!(
            error,
            FormulaError::UnknownElement {
                symbol: "Xx".into(),
                position: 12,
                text: "2 MnO4- + 5 Xx -> Y".into()
            }
        );
    }

    #[test]
    fn rejects_plus_without_whitespace_as_part_of_a_formula() {
        // "H+ +OH-": the second '+' touches OH-, so "+OH-" is not a species.
        assert!(matches!(
            Equation::parse("H+ +OH- -> H2O").unwrap_err(),
            FormulaError::UnexpectedCharacter {
                found: ' ',
                position: 2,
                ..
            }
        ));
    }
}
