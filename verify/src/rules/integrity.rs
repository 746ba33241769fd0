//! Integrity findings (`INT-*`): the problems the ledger's replay reports, and lab entries the
//! catalog had to set aside because they fail their own checks.

use crate::catalog::Defect;
use crate::findings::{Code, EntryRef, Finding};
use assize_ledger::{AuthorityIssue, EntryHash, IntegrityReport, Problem};

/// The code a replay problem falls under.
pub fn code_of(problem: &Problem) -> Code {
    match problem {
        // The Merkle tree kept beside the chain disagreeing with it is an alteration too.
        Problem::HashMismatch { .. }
        | Problem::BrokenLink { .. }
        | Problem::TreeNodeMismatch { .. } => Code::EntryAltered,
        Problem::Empty | Problem::SequenceGap { .. } | Problem::MalformedRow { .. } => {
            Code::EntriesMissing
        }
        Problem::SignatureInvalid { .. } => Code::SignatureProblem,
        Problem::Authority {
            issue: AuthorityIssue::SignatureMissing { .. },
            ..
        } => Code::SignatureProblem,
        Problem::Authority { .. } | Problem::RegistryRefused { .. } => Code::NotAuthorised,
        Problem::ReferenceUnknown { .. } | Problem::ReferenceNotEarlier { .. } => {
            Code::ReferenceBroken
        }
        Problem::AnchorOtherLedger { .. }
        | Problem::AnchorBeyondHead { .. }
        | Problem::AnchorHashDiffers { .. }
        | Problem::AnchorTreeDiffers { .. }
        | Problem::AnchorSignatureInvalid { .. } => Code::CheckpointNotExtended,
        Problem::TimeWentBack { .. } => Code::RecordTimeBack,
    }
}

/// Findings for every replay problem and catalog defect. `hash_of` gives the stored hash of an
/// entry by sequence number where the ledger still has one.
pub fn findings(
    report: &IntegrityReport,
    defects: &[Defect],
    hash_of: &dyn Fn(u64) -> Option<EntryHash>,
) -> Vec<Finding> {
    let involving = |seq: Option<u64>| {
        seq.and_then(|seq| hash_of(seq).map(|hash| EntryRef { seq, hash }))
            .into_iter()
            .collect::<Vec<_>>()
    };
    let mut findings: Vec<Finding> = report
        .problems
        .iter()
        .map(|problem| {
            Finding::new(
                code_of(problem),
                problem.to_string(),
                "ledger invariants (ARCHITECTURE.md): hash chain, signatures, authority",
            )
            .involving(involving(problem.seq()))
        })
        .collect();
    if report.problems_not_listed > 0 {
        findings.push(Finding::new(
            Code::EntriesMissing,
            format!(
                "{} more integrity problems were found and not listed; fix the listed ones and replay again",
                report.problems_not_listed
            ),
            "ledger invariants (ARCHITECTURE.md)",
        ));
    }
    for defect in defects {
        findings.push(
            Finding::new(
                Code::RecordDefective,
                format!(
                    "entry {} ({}) cannot be used: {}",
                    defect.seq, defect.kind, defect.reason
                ),
                "the record's own field checks",
            )
            .involving(involving(Some(defect.seq))),
        );
    }
    findings
}
