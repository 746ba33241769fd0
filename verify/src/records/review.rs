//! Sign-offs: a reviewer's or QA's electronic signature on a run, a reported result or an
//! invalidation, with its meaning, the ledger head it was based on and, when it was made from
//! an exception report, that report's SHA-256.

use super::LabRecord;
use assize_ledger::{EntryHash, Record};
use serde::{Deserialize, Serialize};

/// What a sign-off means (21 CFR 11.50: a signature shows its meaning).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Meaning {
    /// Second-person review done.
    Reviewed,
    /// Released for use.
    Approved,
}

impl Meaning {
    /// The word used on the command line and in reports.
    pub fn name(self) -> &'static str {
        match self {
            Meaning::Reviewed => "reviewed",
            Meaning::Approved => "approved",
        }
    }
}

/// A signed review or approval of what `subject` covers, as of the ledger head `based_on`.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct SignOff {
    /// The run, reported result or invalidation signed.
    pub subject: EntryHash,
    /// Reviewed or approved.
    pub meaning: Meaning,
    /// Sequence number of the ledger head the signer saw.
    pub based_on_seq: u64,
    /// Hash of that head entry.
    pub based_on: EntryHash,
    /// SHA-256 of the exception report reviewed, lowercase hex, if one was.
    pub report_sha256: Option<String>,
    /// The signer's comment (may be empty).
    pub comment: String,
    /// Why the signer approved while blocking findings stood (empty otherwise).
    pub justification: String,
}

impl Record for SignOff {
    const KIND: &'static str = "lab.sign-off";

    fn references(&self) -> Vec<EntryHash> {
        if self.based_on == self.subject {
            vec![self.subject]
        } else {
            vec![self.subject, self.based_on]
        }
    }
}

impl LabRecord for SignOff {
    fn check(&self) -> Result<(), String> {
        if let Some(hex) = &self.report_sha256 {
            let well_formed = hex.len() == 64
                && hex
                    .chars()
                    .all(|c| c.is_ascii_digit() || ('a'..='f').contains(&c));
            if !well_formed {
                return Err(format!(
                    "report SHA-256 {hex:?} is not 64 lowercase hexadecimal digits"
                ));
            }
        }
        if self.based_on_seq == 0 {
            return Err("a sign-off must name the ledger head it was based on".into());
        }
        if !self.justification.trim().is_empty() && self.meaning != Meaning::Approved {
            return Err("only an approval carries a justification".into());
        }
        Ok(())
    }
}
