//! Lab knowledge on top of the ledger: what a weighing, a titration and a result are, how to
//! recompute them, and which rules a released result must satisfy.
//!
//! This crate owns the typed lab records (`records`), methods and the lab policy (`documents`),
//! raw readings and exact decimals (`quantity`, `rounding`), molar masses from formulas
//! (`chem`), statistics and GUM uncertainty (`stats`, `uncertainty`) and the recompute engine;
//! the validation rules that turn a replayed ledger into findings follow. It reads the ledger
//! only through `assize_ledger`'s API (never SQL), and never prints, prompts or parses command
//! lines.
#![forbid(unsafe_code)]
#![deny(missing_docs)]

pub mod assemble;
pub mod capture_import;
pub mod catalog;
pub mod chem;
pub mod conformance;
pub mod correction;
pub mod documents;
pub mod dossier;
pub mod evidence;
pub mod exceptions;
pub mod explain;
pub mod findings;
pub mod history;
pub mod indexed;
pub mod intake;
pub mod outliers;
pub mod periodic;
/// A balance's printed readings in assize's own line format, parsed all-or-nothing.
pub mod printout;
pub mod quantity;
pub mod recompute;
pub mod records;
pub mod rounding;
pub mod rules;
pub mod signoff;
/// Keyed readings matched to captured ones, and the likely keying slip when they differ.
pub mod slips;
pub mod stats;
pub mod stream;
#[cfg(test)]
mod test_records;
pub mod uncertainty;
pub mod validate;

use assize_ledger::KindRules;

/// The kind rules this build judges ledgers by: the ledger's own kinds and every lab kind.
pub fn kind_rules() -> KindRules {
    records::all_kind_rules()
}
