//! Sign-off findings (`SOD-*`, and `ORD-04`): a reviewer or approver who did the work, a review
//! or approval that predates a change to what it covers, an approval given over blocking
//! findings (shown with its justification), and a sign-off dated before the data it covers.

use super::{entry_ref, when, Evidence};
use crate::catalog::{CatalogEntry, LabBody};
use crate::findings::{Code, Finding};
use crate::records::{Invalidation, Meaning, SignOff};
use assize_ledger::Record;
use assize_ledger::Timestamp;

/// The latest observation time an entry records, if it records one.
fn observed_at(body: &LabBody) -> Option<Timestamp> {
    match body {
        LabBody::Weighing(w) => Some(w.second_at.max(w.first_at)),
        LabBody::Titration(t) => Some(t.read_at),
        LabBody::Run(r) => Some(r.started_at),
        _ => None,
    }
}

/// Pushes the sign-off findings.
pub fn check(evidence: &Evidence<'_>, out: &mut Vec<Finding>) {
    let catalog = evidence.catalog;
    for entry in catalog.of_kind(SignOff::KIND) {
        let LabBody::SignOff(sign_off) = catalog.current_of(entry).into_owned() else {
            continue;
        };
        let covered = evidence.covered_by(&sign_off.subject);
        let run = catalog
            .entry(&sign_off.subject)
            .and_then(|e| evidence.run_of_entry(e));
        let about = |finding: Finding| match run {
            Some(run) => run.finding(finding),
            None => finding,
        };
        let subject = describe(evidence, &sign_off);
        let meaning = sign_off.meaning.name();
        // The signer did work under review: recorded data or corrected it (an invalidation is a
        // decision about the data, which OOS-04 judges on its own).
        let own: Vec<&CatalogEntry> = covered
            .iter()
            .copied()
            .filter(|e| e.author == entry.author && e.seq < entry.seq)
            .filter(|e| e.kind != Invalidation::KIND)
            .collect();
        if !own.is_empty() {
            out.push(
                about(Finding::new(
                    Code::SelfReview,
                    format!(
                        "{} signed {subject} as {meaning}, but authored {} of the entries it covers",
                        entry.author,
                        own.len()
                    ),
                    "second-person review (21 CFR 211.194(a)(8))",
                ))
                .involving([entry_ref(entry)])
                .involving(own.iter().map(|e| entry_ref(e))),
            );
        }
        // Changes after the head the signer saw.
        let later: Vec<&CatalogEntry> = covered
            .iter()
            .copied()
            .filter(|e| e.seq > sign_off.based_on_seq)
            .collect();
        if !later.is_empty() {
            out.push(
                about(Finding::new(
                    Code::ReviewStale,
                    format!(
                        "{} signed {subject} as {meaning} at ledger entry {}; {} covered entr{} came later (from entry {})",
                        entry.author,
                        sign_off.based_on_seq,
                        later.len(),
                        if later.len() == 1 { "y" } else { "ies" },
                        later[0].seq
                    ),
                    "a signature covers the data as it stood when signed",
                ))
                .involving([entry_ref(entry)])
                .involving(later.iter().map(|e| entry_ref(e))),
            );
        }
        if sign_off.meaning == Meaning::Approved && !sign_off.justification.trim().is_empty() {
            out.push(
                about(Finding::new(
                    Code::ApprovedOverFindings,
                    format!(
                        "{} approved {subject} over blocking findings: {:?}",
                        entry.author,
                        sign_off.justification.trim()
                    ),
                    "the approver's recorded justification",
                ))
                .involving([entry_ref(entry)]),
            );
        }
        // Data observed after the signature was recorded.
        let after: Vec<&CatalogEntry> = covered
            .iter()
            .copied()
            .filter(|e| {
                observed_at(&catalog.current_of(e)).is_some_and(|at| at > entry.record_time)
            })
            .collect();
        if !after.is_empty() {
            out.push(
                about(Finding::new(
                    Code::SignOffBeforeData,
                    format!(
                        "{} signed {subject} at {}, before data it covers was observed",
                        entry.author,
                        when(entry.record_time)
                    ),
                    "a signature cannot cover data that did not exist yet",
                ))
                .involving([entry_ref(entry)])
                .involving(after.iter().map(|e| entry_ref(e))),
            );
        }
    }
}

fn describe(evidence: &Evidence<'_>, sign_off: &SignOff) -> String {
    let catalog = evidence.catalog;
    match catalog.current_ref(&sign_off.subject).as_deref() {
        Some(LabBody::Run(r)) => format!("run {}", r.id),
        Some(LabBody::Result(_)) => {
            let run = catalog
                .entry(&sign_off.subject)
                .and_then(|e| evidence.run_of_entry(e))
                .map_or("?".to_string(), |r| r.id().to_string());
            format!("the result of run {run}")
        }
        Some(LabBody::Invalidation(_)) => "an invalidation".to_string(),
        _ => format!("entry {}", sign_off.subject),
    }
}
