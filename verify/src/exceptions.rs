//! The exception report of one run's result: everything a reviewer must look at so review can
//! be done by exception — the findings about the run and the standardization it relies on,
//! every correction with its old and new values and reason, readings keyed by hand, late
//! entries, invalidations, and the sign-offs already given.
//!
//! The report is plain data with a fixed field order; its SHA-256 is taken over its JSON
//! encoding ([`ExceptionReport::sha256`]). A sign-off records that hash, so anyone can later
//! rebuild the report at the same ledger head and confirm what the reviewer saw.

use crate::catalog::{CatalogEntry, LabBody};
use crate::findings::{Code, EntryRef, Finding, Tally};
use crate::records::{Replicate, SignOff, Source};
use crate::rules::{entry_ref, weighings_of, Evidence, RunView};
use crate::validate::Validation;
use assize_ledger::Record;
use serde::Serialize;
use serde_json::Value;
use sha2::{Digest, Sha256};

/// One changed field of a correction.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct FieldChange {
    /// Field name as stored.
    pub field: String,
    /// Value before (JSON text).
    pub old: String,
    /// Value after (JSON text).
    pub new: String,
}

/// A correction as the reviewer reads it.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct CorrectionLine {
    /// The correction entry.
    pub entry: EntryRef,
    /// The entry corrected.
    pub corrects: u64,
    /// Its kind.
    pub kind: String,
    /// Who corrected.
    pub author: String,
    /// When (UTC).
    pub recorded: String,
    /// Whether it carries a signature.
    pub signed: bool,
    /// The reason given.
    pub reason: String,
    /// What changed, against the version before it.
    pub changes: Vec<FieldChange>,
}

/// A reading typed by a person.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct ManualLine {
    /// The weighing entry.
    pub entry: EntryRef,
    /// Replicate number.
    pub replicate: u32,
    /// What was weighed.
    pub portion: String,
    /// The two readings as displayed.
    pub readings: String,
    /// Who keyed them.
    pub author: String,
}

/// An invalidated replicate.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct InvalidationLine {
    /// The invalidation entry.
    pub entry: EntryRef,
    /// Replicate number.
    pub replicate: u32,
    /// The cause given.
    pub cause: String,
    /// Who invalidated.
    pub author: String,
}

/// A sign-off already given.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct SignOffLine {
    /// The sign-off entry.
    pub entry: EntryRef,
    /// Who signed.
    pub signer: String,
    /// Reviewed or approved.
    pub meaning: String,
    /// When (UTC).
    pub recorded: String,
    /// The ledger head it was based on.
    pub based_on_seq: u64,
    /// The comment.
    pub comment: String,
    /// The justification of an approval over blocking findings.
    pub justification: String,
}

/// Everything a reviewer must look at for one run's result.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ExceptionReport {
    /// Run id.
    pub run: String,
    /// Sample id (assays).
    pub sample: Option<String>,
    /// Method `id vVERSION`.
    pub method: String,
    /// Policy `id vVERSION`.
    pub policy: String,
    /// The ledger head the report was built at.
    pub head_seq: u64,
    /// Its hash.
    pub head_hash: String,
    /// Whether the whole chain replayed intact.
    pub chain_intact: bool,
    /// Who did the work.
    pub analysts: Vec<String>,
    /// The recomputed result as reported (value ± U unit), if it recomputes.
    pub recomputed: Option<String>,
    /// The reported value as written, if one is recorded.
    pub reported: Option<String>,
    /// Findings about the run, and about the standardization it relies on.
    pub findings: Vec<Finding>,
    /// Findings by severity.
    pub tally: Tally,
    /// Every correction of what the result depends on, oldest first.
    pub corrections: Vec<CorrectionLine>,
    /// Readings keyed by hand.
    pub manual_entries: Vec<ManualLine>,
    /// Late entries (the `TIM-01` findings among `findings`, by entry).
    pub late_entries: Vec<EntryRef>,
    /// Invalidated replicates.
    pub invalidations: Vec<InvalidationLine>,
    /// Sign-offs already given on the run or its result.
    pub sign_offs: Vec<SignOffLine>,
}

impl ExceptionReport {
    /// SHA-256 of the report's JSON encoding, lowercase hex.
    pub fn sha256(&self) -> String {
        let bytes = serde_json::to_vec(self).expect("a report always encodes");
        hex::encode(Sha256::digest(bytes))
    }

    /// Whether any blocking finding stands.
    pub fn has_blocking(&self) -> bool {
        self.tally.blocking > 0
    }
}

/// Builds the exception report of `run` from the evidence and a validation of the whole
/// ledger (judged with [`crate::validate::Scope::Ledger`], so the findings about the
/// standardization the run relies on are there to take).
pub fn report(
    evidence: &Evidence<'_>,
    validation: &Validation,
    run: &RunView<'_>,
) -> ExceptionReport {
    let catalog = evidence.catalog;
    let standardization = run
        .run
        .standardization
        .and_then(|h| evidence.run(&h))
        .map(|r| r.id().to_string());
    let findings: Vec<Finding> = validation
        .findings
        .iter()
        .filter(|f| {
            f.run.is_none() && f.code.text().starts_with("INT")
                || f.run.as_deref() == Some(run.id())
                || (f.run.is_some() && f.run == standardization)
        })
        .cloned()
        .collect();
    let mut late_entries: Vec<EntryRef> = findings
        .iter()
        .filter(|f| f.code == Code::LateEntry && f.run.as_deref() == Some(run.id()))
        .flat_map(|f| f.entries.iter().copied())
        .filter(|e| e.seq != run.entry.seq)
        .collect();
    late_entries.sort();
    late_entries.dedup();
    let covered = evidence.covered_by(&run.entry.hash);
    let mut corrections = Vec::new();
    for entry in &covered {
        let mut before = catalog.entry(&entry.hash).map(|e| e.body.clone());
        for correction in catalog.corrections_of(&entry.hash) {
            let LabBody::Correction(c) = &correction.body else {
                continue;
            };
            let after = LabBody::decode(&c.kind, &c.replacement).ok().flatten();
            corrections.push(CorrectionLine {
                entry: entry_ref(correction),
                corrects: entry.seq,
                kind: c.kind.clone(),
                author: correction.author.clone(),
                recorded: correction.record_time.to_string(),
                signed: correction.signed,
                reason: c.reason.clone(),
                changes: changes(before.as_ref(), after.as_ref()),
            });
            if after.is_some() {
                before = after;
            }
        }
    }
    corrections.sort_by_key(|c| c.entry.seq);
    let manual_entries = weighings_of(catalog, run)
        .into_iter()
        .filter(|(_, w)| w.source == Source::Keyed)
        .map(|(e, w)| ManualLine {
            entry: entry_ref(e),
            replicate: w.replicate,
            portion: format!("{:?}", w.portion).to_lowercase(),
            readings: format!(
                "{} {} → {} {}",
                w.first.value, w.first.unit, w.second.value, w.second.unit
            ),
            author: e.author.clone(),
        })
        .collect();
    let mut invalidations = Vec::new();
    for entry in run.entries.iter().filter(|e| e.kind == Replicate::KIND) {
        let number = match catalog.current_of(entry).as_ref() {
            LabBody::Replicate(r) => r.number,
            _ => 0,
        };
        for inv in catalog.invalidations_of(&entry.hash) {
            if let LabBody::Invalidation(i) = catalog.current_of(inv).as_ref() {
                invalidations.push(InvalidationLine {
                    entry: entry_ref(inv),
                    replicate: number,
                    cause: i.cause.clone(),
                    author: inv.author.clone(),
                });
            }
        }
    }
    let result_entries: Vec<&CatalogEntry> = run
        .entries
        .iter()
        .copied()
        .filter(|e| matches!(e.body, LabBody::Result(_)))
        .collect();
    let sign_offs = catalog
        .of_kind(SignOff::KIND)
        .filter_map(|e| match catalog.current_of(e).as_ref() {
            LabBody::SignOff(s)
                if s.subject == run.entry.hash
                    || result_entries.iter().any(|r| r.hash == s.subject) =>
            {
                Some(SignOffLine {
                    entry: entry_ref(e),
                    signer: e.author.clone(),
                    meaning: s.meaning.name().to_string(),
                    recorded: e.record_time.to_string(),
                    based_on_seq: s.based_on_seq,
                    comment: s.comment.clone(),
                    justification: s.justification.clone(),
                })
            }
            _ => None,
        })
        .collect();
    let reported = result_entries
        .last()
        .and_then(|e| match catalog.current_of(e).as_ref() {
            LabBody::Result(r) => Some(format!(
                "{} ± {} {}",
                r.value, r.expanded_uncertainty, r.unit
            )),
            _ => None,
        });
    let recomputed = run
        .recomputed
        .as_ref()
        .ok()
        .map(|r| match r.outcome.reported {
            Some(rep) => format!(
                "{} ± {} {}",
                rep.value, rep.expanded_uncertainty, r.outcome.unit
            ),
            None => format!("{:.6} {}", r.outcome.mean, r.outcome.unit),
        });
    let tally = Tally::of(&findings);
    ExceptionReport {
        run: run.id().to_string(),
        sample: run.sample_id().map(str::to_string),
        method: run.method_label().to_string(),
        policy: run.policy_label().to_string(),
        head_seq: validation.head.map_or(0, |h| h.seq),
        head_hash: validation.head.map_or(String::new(), |h| h.hash.to_hex()),
        chain_intact: validation.integrity.intact(),
        analysts: evidence.analysts_of(run).into_iter().collect(),
        recomputed,
        reported,
        findings,
        tally,
        corrections,
        manual_entries,
        late_entries,
        invalidations,
        sign_offs,
    }
}

/// The top-level fields that differ between two bodies.
pub(crate) fn changes(before: Option<&LabBody>, after: Option<&LabBody>) -> Vec<FieldChange> {
    let as_map = |body: Option<&LabBody>| match body.map(body_json) {
        Some(Value::Object(map)) => map,
        _ => serde_json::Map::new(),
    };
    let (old, new) = (as_map(before), as_map(after));
    let mut fields: Vec<&String> = old.keys().chain(new.keys()).collect();
    fields.sort();
    fields.dedup();
    fields
        .into_iter()
        .filter(|f| old.get(*f) != new.get(*f))
        .map(|f| FieldChange {
            field: f.clone(),
            old: old.get(f).map_or("(none)".into(), Value::to_string),
            new: new.get(f).map_or("(none)".into(), Value::to_string),
        })
        .collect()
}

fn body_json(body: &LabBody) -> Value {
    let value = match body {
        LabBody::Adoption(r) => serde_json::to_value(r),
        LabBody::Balance(r) => serde_json::to_value(r),
        LabBody::Calibration(r) => serde_json::to_value(r),
        LabBody::BalanceCheck(r) => serde_json::to_value(r),
        LabBody::ReferenceLot(r) => serde_json::to_value(r),
        LabBody::Titrant(r) => serde_json::to_value(r),
        LabBody::Sample(r) => serde_json::to_value(r),
        LabBody::Run(r) => serde_json::to_value(r),
        LabBody::Weighing(r) => serde_json::to_value(r),
        LabBody::Titration(r) => serde_json::to_value(r),
        LabBody::Replicate(r) => serde_json::to_value(r),
        LabBody::Blank(r) => serde_json::to_value(r),
        LabBody::Stated(r) => serde_json::to_value(r),
        LabBody::Result(r) => serde_json::to_value(r),
        LabBody::Correction(r) => serde_json::to_value(r),
        LabBody::Invalidation(r) => serde_json::to_value(r),
        LabBody::Oos(r) => serde_json::to_value(r),
        LabBody::SignOff(r) => serde_json::to_value(r),
    };
    value.unwrap_or(Value::Null)
}
