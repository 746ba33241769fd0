//! Chemistry for the recompute engine: formulas, atomic weights, molar masses with their
//! uncertainty, and balanced equations giving stoichiometric coefficients.
//!
//! Owns everything the validator needs to turn a method's formula and equation text into
//! numbers: [`Formula`] (with [`FormulaError`], the one error type of this module), the
//! atomic-weight tables ([`ciaaw_2021`], the default, and [`quam_2012`] for reproducing a
//! published example), [`molar_mass()`] with the uncertainty model of QUAM example A2, and
//! [`Equation`]. It never reads the ledger, never prints, and never guesses: unreadable text,
//! an element missing from a table or an unbalanced equation is an error naming what is wrong.

pub mod atomic_weights;
pub mod equation;
pub mod formula;
pub mod molar_mass;

pub use atomic_weights::{ciaaw_2021, quam_2012, table_named, AtomicWeight, AtomicWeightTable};
pub use equation::{Equation, Species};
pub use formula::{is_element_symbol, Formula, FormulaError};
pub use molar_mass::{molar_mass, molar_mass_of, molar_mass_terms, ElementTerm, MolarMass};
