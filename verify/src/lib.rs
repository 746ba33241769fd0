//! Lab knowledge on top of the ledger: what a weighing, a titration and a result are, how to
//! recompute them, and which rules a released result must satisfy.
//!
//! This crate will own the typed lab records, policies and methods, molar masses, the recompute
//! engine with GUM uncertainty, and the validation rules that turn a replayed ledger into
//! findings. It reads the ledger only through `assize_ledger`'s API (never SQL), never prints,
//! prompts or parses command lines. For now it re-exports the ledger's kind rules so the CLI
//! names one place where the kinds a build understands are assembled.
#![forbid(unsafe_code)]
#![deny(missing_docs)]

pub mod quantity;
pub mod rounding;

use assize_ledger::KindRules;

/// The kind rules this build judges ledgers by: the ledger's own kinds (lab record kinds join
/// them as they are added here).
pub fn kind_rules() -> KindRules {
    KindRules::core()
}
