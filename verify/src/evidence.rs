//! Evidence bundles of one reported value: the entries its explanation shows, exported with
//! their inclusion proofs under a signed checkpoint ([`assize_ledger::bundle`]), and the same
//! explanation traced again from a bundle alone, without the ledger.
//!
//! The entries chosen are exactly those [`crate::explain`] shows for the run (raw readings,
//! balance records in force, materials, documents, the standardization, corrections, sign-offs
//! it shows), plus the ledger's registry entries that the bundle always carries. Opening a
//! bundle checks it first (the ledger's rules for bundles), then explains the run from the
//! bundled entries with the bundled registry, through the same code as on a ledger; the two
//! explanations are the same.

use crate::explain::{explain, explain_in, ExplainError, Explanation, Target};
use crate::indexed::MemoryEntries;
use assize_ledger::bundle::{open_bundle, BundleError, OpenedBundle};
use assize_ledger::{Ledger, LedgerError, Signer};
use std::collections::BTreeSet;

/// Why a bundle could not be made or read.
#[derive(Debug)]
pub enum EvidenceError {
    /// The ledger could not be read or refused.
    Ledger(LedgerError),
    /// Nothing to explain, or the bundle does not hold what its explanation needs.
    NotFound(String),
    /// The bundle failed a check.
    Bundle(BundleError),
}

impl std::fmt::Display for EvidenceError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            EvidenceError::Ledger(e) => write!(f, "{e}"),
            EvidenceError::NotFound(what) => write!(f, "{what}"),
            EvidenceError::Bundle(e) => write!(f, "{e}"),
        }
    }
}

impl std::error::Error for EvidenceError {}

impl From<ExplainError> for EvidenceError {
    fn from(e: ExplainError) -> Self {
        match e {
            ExplainError::Ledger(e) => EvidenceError::Ledger(e),
            ExplainError::NotFound(what) => EvidenceError::NotFound(what),
        }
    }
}

impl From<LedgerError> for EvidenceError {
    fn from(e: LedgerError) -> Self {
        EvidenceError::Ledger(e)
    }
}

/// A bundle made: its bytes and the explanation it carries the entries of.
#[derive(Debug)]
pub struct Exported {
    /// The bundle file's bytes.
    pub bytes: Vec<u8>,
    /// The explanation whose entries it holds.
    pub explanation: Explanation,
}

/// Makes the evidence bundle of `target`'s result, signed by `signer` (an enrolled person).
pub fn export(
    ledger: &mut Ledger,
    target: &Target,
    signer: &Signer,
) -> Result<Exported, EvidenceError> {
    let explanation = explain(ledger, target)?;
    let seqs: BTreeSet<u64> = explanation.entries.iter().copied().collect();
    let note = format!("evidence of the result of run {}", explanation.run.id);
    let bytes = ledger.export_bundle(&seqs, explanation.run.run.seq, &note, signer)?;
    Ok(Exported { bytes, explanation })
}

/// A bundle checked and explained.
#[derive(Debug)]
pub struct Opened {
    /// What the bundle holds (checked).
    pub bundle: OpenedBundle,
    /// The run's explanation from the bundled entries alone.
    pub explanation: Explanation,
}

/// Checks a bundle without the ledger and explains the run it is about from its entries.
pub fn open(bytes: &[u8]) -> Result<Opened, EvidenceError> {
    let bundle = open_bundle(bytes).map_err(EvidenceError::Bundle)?;
    let held = MemoryEntries::new(bundle.entries.iter().cloned());
    let explanation = explain_in(
        &held,
        (bundle.checkpoint.seq, bundle.checkpoint.head),
        bundle.registry.clone(),
        &Target::Entry(bundle.subject),
    )
    .map_err(|e| match e {
        ExplainError::NotFound(what) => EvidenceError::NotFound(format!(
            "the bundle does not hold what its explanation needs: {what}"
        )),
        other => other.into(),
    })?;
    Ok(Opened {
        bundle,
        explanation,
    })
}
