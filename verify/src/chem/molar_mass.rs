//! Molar masses with their standard uncertainty, computed from a formula and an atomic-weight
//! table.
//!
//! Owns the molar-mass sum and its uncertainty model. It never reads formula text itself (that
//! is `formula`) and never picks a table silently: the caller passes one and the result records
//! its name.
//!
//! # Uncertainty model
//!
//! `M = Σ n_i·A_i` over the elements i of the formula, and
//! `u(M) = sqrt(Σ_i (n_i · half_width_i / √3)²)`: each tabulated ± is rectangular, the `n_i`
//! atoms of one element share one atomic weight (so their uncertainty adds linearly, `n_i·u_i`),
//! and different elements are independent. This is the convention of EURACHEM/CITAC QUAM
//! (3rd ed., 2012) example A2.
//!
//! The charge of an ion does not change its molar mass here: the mass of the electrons gained
//! or lost (0.00055 g/mol each) is ignored, as is usual in titrimetry.

use super::atomic_weights::{AtomicWeight, AtomicWeightTable};
use super::formula::{Formula, FormulaError};

/// A molar mass, its standard uncertainty and the table it came from.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct MolarMass {
    /// Molar mass in g/mol.
    pub value: f64,
    /// Standard uncertainty in g/mol.
    pub standard_uncertainty: f64,
    /// Name of the atomic-weight table used (see [`AtomicWeightTable::name`]).
    pub table: &'static str,
}

impl MolarMass {
    /// `u(M) / M`.
    pub fn relative_standard_uncertainty(&self) -> f64 {
        self.standard_uncertainty / self.value
    }
}

/// One element's share of a molar mass, for explaining a value term by term.
#[derive(Debug, Clone, PartialEq)]
pub struct ElementTerm {
    /// Element symbol.
    pub symbol: String,
    /// Atoms of the element in the formula.
    pub count: u32,
    /// The atomic weight used.
    pub atomic_weight: AtomicWeight,
    /// `count · value`, g/mol.
    pub mass: f64,
    /// `count · half_width / √3`, g/mol.
    pub standard_uncertainty: f64,
}

/// Each element's share of the molar mass of `formula`, in alphabetical order of the symbols.
///
/// Fails with [`FormulaError::NoAtomicWeight`] when the table lacks an element of the formula.
pub fn molar_mass_terms(
    formula: &Formula,
    table: &AtomicWeightTable,
) -> Result<Vec<ElementTerm>, FormulaError> {
    formula
        .counts()
        .iter()
        .map(|(symbol, &count)| {
            let atomic_weight = table
                .get(symbol)
                .ok_or_else(|| FormulaError::NoAtomicWeight {
                    symbol: symbol.clone(),
                    table: table.name,
                })?;
            Ok(ElementTerm {
                symbol: symbol.clone(),
                count,
                atomic_weight,
                mass: f64::from(count) * atomic_weight.value,
                standard_uncertainty: f64::from(count) * atomic_weight.standard_uncertainty(),
            })
        })
        .collect()
}

/// The molar mass of `formula` from `table`, with its standard uncertainty by the model in the
/// module documentation.
///
/// Fails with [`FormulaError::NoAtomicWeight`] when the table lacks an element of the formula.
pub fn molar_mass(formula: &Formula, table: &AtomicWeightTable) -> Result<MolarMass, FormulaError> {
    let terms = molar_mass_terms(formula, table)?;
    let value = terms.iter().map(|term| term.mass).sum();
    let variance: f64 = terms
        .iter()
        .map(|term| term.standard_uncertainty * term.standard_uncertainty)
        .sum();
    Ok(MolarMass {
        value,
        standard_uncertainty: variance.sqrt(),
        table: table.name,
    })
}

/// Reads `text` as a formula and returns its molar mass from `table`.
pub fn molar_mass_of(text: &str, table: &AtomicWeightTable) -> Result<MolarMass, FormulaError> {
    molar_mass(&Formula::parse(text)?, table)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::chem::atomic_weights::{ciaaw_2021, quam_2012};
    use rand::rngs::StdRng;
    use rand::seq::SliceRandom;
    use rand::{Rng, SeedableRng};

    fn ciaaw(text: &str) -> MolarMass {
        molar_mass_of(text, ciaaw_2021()).expect("molar mass")
    }

    /// Whether `value` rounded half away from zero to `decimals` places reads `printed`.
    fn rounds_to(value: f64, decimals: i32, printed: f64) -> bool {
        let scale = 10_f64.powi(decimals);
        ((value * scale).round() / scale - printed).abs() < 1e-9
    }

    #[test]
    fn sodium_oxalate_matches_certified_molar_mass() {
        // NIST RM 8040 report, NMIJ CRM 3007-a: 133.9985 g/mol [pub]. Checked to 0.001 only:
        // the five-figure atomic weights give 133.998, not the full-precision value.
        let m = ciaaw("Na2C2O4");
        assert!((m.value - 133.9985).abs() <= 0.001, "{}", m.value);
        assert_eq!(m.table, "ciaaw-2021");
    }

    #[test]
    fn pharmacopoeial_molar_masses_round_to_their_printed_digits() {
        let cases = [
            ("KMnO4", 158.03),              // pharmacopoeial monograph [pub]
            ("H2O2", 34.01),                // pharmacopoeial [pub]
            ("KHC8H4O4", 204.22),           // QUAM; BAM KHP certificate, with 2021 values [pub]
            ("CaCO3", 100.09),              // REFERENCES.md 6, [pub/mem]
            ("NaOH", 40.00),                // REFERENCES.md 6, [pub/mem]
            ("Na2CO3", 105.99),             // REFERENCES.md 6, [pub/mem]
            ("C10H14N2Na2O8·2H2O", 372.24), // Na2H2EDTA·2H2O, REFERENCES.md 6, [pub/mem]
        ];
        for (text, printed) in cases {
            let m = ciaaw(text);
            assert!(rounds_to(m.value, 2, printed), "{text}: {}", m.value);
        }
    }

    #[test]
    fn reproduces_quam_2012_example_a2_molar_mass_of_khp() {
        // EURACHEM/CITAC QUAM 3rd ed. 2012, example A2: M = 204.2212 g/mol, u = 0.0038 g/mol [pub].
        let m = molar_mass_of("KHC8H4O4", quam_2012()).unwrap();
        assert!((m.value - 204.2212).abs() < 1e-9, "{}", m.value);
        assert!(
            rounds_to(m.standard_uncertainty, 4, 0.0038),
            "{}",
            m.standard_uncertainty
        );
        assert_eq!(m.table, "quam-2012");
    }

    #[test]
    fn uncertainty_of_n_atoms_of_one_element_is_n_times_u() {
        // [calc] from the model: u(O2) = 2·u(O); u(H2O) combines H2 and O in quadrature.
        let u_o = ciaaw_2021().get("O").unwrap().standard_uncertainty();
        let u_h = ciaaw_2021().get("H").unwrap().standard_uncertainty();
        assert!((ciaaw("O2").standard_uncertainty - 2.0 * u_o).abs() < 1e-15);
        let expected = ((2.0 * u_h).powi(2) + u_o.powi(2)).sqrt();
        assert!((ciaaw("H2O").standard_uncertainty - expected).abs() < 1e-15);
    }

    #[test]
    fn refuses_element_missing_from_the_table() {
        let error = molar_mass_of("NaOH", quam_2012()).unwrap_err();
        assert_eq!(
            error,
            FormulaError::NoAtomicWeight {
                symbol: "Na".into(),
                table: "quam-2012"
            }
        );
        assert_eq!(
            error.to_string(),
            "the atomic-weight table quam-2012 has no value for Na"
        );
        assert!(matches!(
            molar_mass_of("UO2", ciaaw_2021()).unwrap_err(),
            FormulaError::NoAtomicWeight { .. }
        ));
    }

    #[test]
    fn passes_formula_errors_through() {
        assert!(matches!(
            molar_mass_of("Xx2O", ciaaw_2021()).unwrap_err(),
            FormulaError::UnknownElement { .. }
        ));
    }

    #[test]
    fn charge_does_not_change_molar_mass() {
        assert_eq!(ciaaw("C2O4^2-").value, ciaaw("C2O4").value);
    }

    #[test]
    fn terms_explain_the_sum() {
        let formula = Formula::parse("KMnO4").unwrap();
        let terms = molar_mass_terms(&formula, ciaaw_2021()).unwrap();
        let symbols: Vec<_> = terms.iter().map(|t| t.symbol.as_str()).collect();
        assert_eq!(symbols, ["K", "Mn", "O"]);
        assert_eq!(terms[2].count, 4);
        let sum: f64 = terms.iter().map(|t| t.mass).sum();
        assert_eq!(sum, ciaaw("KMnO4").value);
    }

    #[test]
    fn hydrate_equals_sum_of_its_parts() {
        let whole = ciaaw("CuSO4·5H2O");
        let parts = ciaaw("CuSO4").value + 5.0 * ciaaw("H2O").value;
        assert!((whole.value - parts).abs() < 1e-9);
        let edta = ciaaw("C10H14N2Na2O8·2H2O").value;
        assert!((edta - ciaaw("C10H14N2Na2O8").value - 2.0 * ciaaw("H2O").value).abs() < 1e-9);
        let ferrocyanide = ciaaw("K4[Fe(CN)6]·3H2O").value;
        let pieces = 4.0 * ciaaw("K").value
            + ciaaw("Fe").value
            + 6.0 * ciaaw("CN").value
            + 3.0 * ciaaw("H2O").value;
        assert!((ferrocyanide - pieces).abs() < 1e-9);
    }

    /// A random neutral composition from the CIAAW table: 1 to 5 distinct elements.
    fn random_composition(rng: &mut StdRng) -> Vec<(&'static str, u32)> {
        let entries = ciaaw_2021().entries();
        let n_elements = rng.gen_range(1..=5);
        entries
            .choose_multiple(rng, n_elements)
            .map(|entry| (entry.symbol, rng.gen_range(1..=20)))
            .collect()
    }

    fn render(composition: &[(&str, u32)]) -> String {
        composition
            .iter()
            .map(|(symbol, count)| match count {
                1 => symbol.to_string(),
                n => format!("{symbol}{n}"),
            })
            .collect()
    }

    #[test]
    fn molar_mass_does_not_depend_on_element_order() {
        let mut rng = StdRng::seed_from_u64(20_21);
        for _ in 0..500 {
            let mut composition = random_composition(&mut rng);
            let first = ciaaw(&render(&composition));
            composition.shuffle(&mut rng);
            let shuffled = ciaaw(&render(&composition));
            assert_eq!(first, shuffled, "{}", render(&composition));
        }
    }

    #[test]
    fn molar_mass_of_joined_parts_is_the_sum_of_the_parts() {
        let mut rng = StdRng::seed_from_u64(573);
        for _ in 0..500 {
            let a = render(&random_composition(&mut rng));
            let b = render(&random_composition(&mut rng));
            let k: u32 = rng.gen_range(1..=9);
            let separator = ["·", ".", "*"][rng.gen_range(0..3)];
            let joined = ciaaw(&format!("{a}{separator}{k}{b}"));
            let grouped = ciaaw(&format!("{a}({b}){k}"));
            let sum = ciaaw(&a).value + f64::from(k) * ciaaw(&b).value;
            assert!((joined.value - sum).abs() <= 1e-9 * sum, "{a}·{k}{b}");
            assert_eq!(joined, grouped, "{a}({b}){k}");
            // Shared elements add linearly, so u of the whole never exceeds the sum of u.
            let u_sum =
                ciaaw(&a).standard_uncertainty + f64::from(k) * ciaaw(&b).standard_uncertainty;
            assert!(joined.standard_uncertainty <= u_sum * (1.0 + 1e-12));
        }
    }

    #[test]
    fn uncertainty_is_never_negative() {
        let mut rng = StdRng::seed_from_u64(629);
        for _ in 0..500 {
            let m = ciaaw(&render(&random_composition(&mut rng)));
            assert!(m.standard_uncertainty >= 0.0 && m.standard_uncertainty.is_finite());
            assert!(m.value > 0.0);
        }
    }
}
