//! The history of one record: every version of an entry, oldest first (as recorded, then after
//! each correction, with who, when, why and whether the correction is signed and so in force),
//! every invalidation of it, and every sign-off on it.
//!
//! Read through the ledger's indexes like [`crate::explain`] (the entry by sequence number or
//! by a run's id, corrections, invalidations and sign-offs through the kind index joined with
//! the reference index), so one record's history comes back at once on any ledger. It reads
//! and judges nothing beyond the signatures it shows.

use crate::catalog::{CatalogEntry, LabBody};
use crate::exceptions::{changes, FieldChange};
use crate::explain::{decoded, run_by_id, says, signature_state, ExplainError, SignatureState};
use crate::records::{Correction, Invalidation, SignOff};
use assize_ledger::{EntryHash, Ledger, Record, Registry};
use serde::Serialize;
use std::sync::Arc;

/// Which record's history.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Subject {
    /// The entry with this sequence number.
    Entry(u64),
    /// The run with this id (its run entry).
    RunId(String),
}

/// Who wrote an entry, when, and the state of its signature.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct Written {
    /// Sequence number.
    pub seq: u64,
    /// Entry hash (hex).
    pub hash: String,
    /// Author.
    pub author: String,
    /// Record time (RFC 3339, UTC).
    pub recorded_at: String,
    /// Signature state.
    pub signature: SignatureState,
}

/// One version of the record.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct Version {
    /// 1 for the record as first written, then one more per correction.
    pub number: usize,
    /// The entry that wrote this version (the record itself, or a correction of it).
    pub written: Written,
    /// Whether this version counts: the original does until a signed correction replaces it;
    /// an unsigned correction never does.
    pub in_force: bool,
    /// The reason given (corrections only).
    pub reason: Option<String>,
    /// Fields changed from the version in force before it (corrections only).
    pub changes: Vec<FieldChange>,
    /// What the record says in this version, in one line.
    pub says: String,
}

/// A sign-off on the record.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct SignOffStep {
    /// The sign-off entry.
    pub written: Written,
    /// Reviewed or approved.
    pub meaning: String,
    /// The ledger head the signer saw.
    pub based_on_seq: u64,
    /// SHA-256 of the exception report reviewed, if one was.
    pub report_sha256: Option<String>,
    /// The signer's comment.
    pub comment: String,
    /// Why the signer approved while blocking findings stood.
    pub justification: String,
}

/// An invalidation of the record (a replicate).
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct InvalidationStep {
    /// The invalidation entry.
    pub written: Written,
    /// The assignable cause given.
    pub cause: String,
}

/// The history of one record.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct History {
    /// Ledger head when read.
    pub head_seq: u64,
    /// Its hash (hex).
    pub head_hash: String,
    /// The record's kind.
    pub kind: String,
    /// Every version, oldest first.
    pub versions: Vec<Version>,
    /// Invalidations of it, oldest first.
    pub invalidations: Vec<InvalidationStep>,
    /// Sign-offs on it, oldest first.
    pub sign_offs: Vec<SignOffStep>,
}

impl History {
    /// The version in force now (the latest signed one, else the original).
    pub fn in_force(&self) -> Option<&Version> {
        self.versions.iter().rev().find(|v| v.in_force)
    }
}

/// Reads the history of `subject`.
pub fn history(ledger: &mut Ledger, subject: &Subject) -> Result<History, ExplainError> {
    let head = ledger
        .head()?
        .ok_or_else(|| ExplainError::NotFound("the ledger is empty".into()))?;
    let entry = match subject {
        Subject::Entry(seq) => {
            if *seq == 0 || *seq > head.seq {
                return Err(ExplainError::NotFound(format!(
                    "the ledger has no entry {seq} (its entries are 1 to {})",
                    head.seq
                )));
            }
            decoded(ledger.entry(*seq)?).ok_or_else(|| {
                ExplainError::NotFound(format!(
                    "entry {seq} is not a lab record (`assize entries show {seq}` shows any entry)"
                ))
            })?
        }
        Subject::RunId(id) => run_by_id(ledger.store(), id)?,
    };
    if matches!(entry.body, LabBody::Correction(_)) {
        return Err(ExplainError::NotFound(format!(
            "entry {} is a correction; ask for the history of the entry it corrects",
            entry.seq
        )));
    }
    let registry = ledger.registry()?.clone();
    let versions = versions(ledger, &registry, &entry)?;
    let invalidations = naming(ledger, Invalidation::KIND, &entry.hash)?
        .into_iter()
        .filter_map(|e| match &e.body {
            LabBody::Invalidation(i) if i.replicate == entry.hash => Some((e.clone(), i.clone())),
            _ => None,
        })
        .map(|(e, i)| {
            Ok(InvalidationStep {
                written: written(ledger, &registry, &e)?,
                cause: i.cause,
            })
        })
        .collect::<Result<Vec<_>, ExplainError>>()?;
    let sign_offs = naming(ledger, SignOff::KIND, &entry.hash)?
        .into_iter()
        .filter_map(|e| match &e.body {
            LabBody::SignOff(s) if s.subject == entry.hash => Some((e.clone(), s.clone())),
            _ => None,
        })
        .map(|(e, s)| {
            Ok(SignOffStep {
                written: written(ledger, &registry, &e)?,
                meaning: s.meaning.name().to_string(),
                based_on_seq: s.based_on_seq,
                report_sha256: s.report_sha256,
                comment: s.comment,
                justification: s.justification,
            })
        })
        .collect::<Result<Vec<_>, ExplainError>>()?;
    Ok(History {
        head_seq: head.seq,
        head_hash: head.hash.to_hex(),
        kind: entry.kind.clone(),
        versions,
        invalidations,
        sign_offs,
    })
}

/// The record as written, then one version per correction (a signed one replaces the version
/// in force; an unsigned one is shown against it and never counts).
fn versions(
    ledger: &Ledger,
    registry: &Registry,
    entry: &Arc<CatalogEntry>,
) -> Result<Vec<Version>, ExplainError> {
    let mut versions = vec![Version {
        number: 1,
        written: written(ledger, registry, entry)?,
        in_force: true,
        reason: None,
        changes: Vec::new(),
        says: says(&entry.body),
    }];
    let mut in_force_body = entry.body.clone();
    let mut in_force_at = 0;
    for c in naming(ledger, Correction::KIND, &entry.hash)? {
        let LabBody::Correction(correction) = &c.body else {
            continue;
        };
        if correction.supersedes != entry.hash {
            continue;
        }
        let after = LabBody::decode(&correction.kind, &correction.replacement)
            .ok()
            .flatten();
        let counts = c.signed && after.is_some();
        versions.push(Version {
            number: versions.len() + 1,
            written: written(ledger, registry, &c)?,
            in_force: false,
            reason: Some(correction.reason.clone()),
            changes: changes(Some(&in_force_body), after.as_ref()),
            says: after
                .as_ref()
                .map_or_else(|| "(replacement does not decode)".into(), says),
        });
        if let (true, Some(after)) = (counts, after) {
            in_force_body = after;
            in_force_at = versions.len() - 1;
        }
    }
    for (index, version) in versions.iter_mut().enumerate() {
        version.in_force = index == in_force_at;
    }
    Ok(versions)
}

/// Entries of `kind` that name `target`, oldest first, decoded.
fn naming(
    ledger: &Ledger,
    kind: &str,
    target: &EntryHash,
) -> Result<Vec<Arc<CatalogEntry>>, ExplainError> {
    let mut found = Vec::new();
    for seq in ledger.store().of_kind_naming(kind, target)? {
        found.extend(decoded(ledger.entry(seq)?));
    }
    Ok(found)
}

fn written(
    ledger: &Ledger,
    registry: &Registry,
    entry: &CatalogEntry,
) -> Result<Written, ExplainError> {
    Ok(Written {
        seq: entry.seq,
        hash: entry.hash.to_hex(),
        author: entry.author.clone(),
        recorded_at: entry.record_time.to_string(),
        signature: signature_state(&ledger.entry(entry.seq)?, registry),
    })
}
