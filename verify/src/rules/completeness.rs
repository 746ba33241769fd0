//! Completeness findings (`COMP-*`): raw data that feeds no result and was not set aside with a
//! signed invalidation, and runs with more or fewer determinations than the method requires.

use super::{entry_ref, Evidence, RunView};
use crate::catalog::{CatalogEntry, LabBody};
use crate::findings::{Code, Finding};
use crate::records::{Portion, Replicate, RunKind, Source, Titration, Weighing};
use assize_ledger::EntryHash;
use assize_ledger::Record;
use foldhash::{HashSet, HashSetExt};

/// Pushes the completeness findings of every run.
pub fn check(evidence: &Evidence<'_>, out: &mut Vec<Finding>) {
    for run in evidence.judged_runs() {
        orphans(evidence, run, out);
        determinations(evidence, run, out);
    }
}

/// Weighings and titrations no replicate or blank uses (an invalidated replicate still uses
/// its data: the invalidation is the signed reason it feeds no result).
fn orphans(evidence: &Evidence<'_>, run: &RunView<'_>, out: &mut Vec<Finding>) {
    let catalog = evidence.catalog;
    let mut used: HashSet<EntryHash> = HashSet::new();
    for entry in &run.entries {
        match catalog.current_of(entry).as_ref() {
            LabBody::Replicate(r) => {
                used.insert(r.portion_weighing);
                used.extend(r.titrant_weighing);
                used.extend(r.titration);
            }
            LabBody::Blank(b) => {
                used.extend(b.titrant_weighing);
                used.extend(b.titration);
            }
            _ => {}
        }
    }
    // A captured twin of a keyed weighing (same replicate and portion, the other source) is
    // the original of the same observation, not orphan data; CAP-01 compares the two. A second
    // weighing from the same source is a re-weighing, and orphan unless invalidated.
    let used_slots: HashSet<(u32, Portion, Source)> = run
        .entries
        .iter()
        .filter(|e| used.contains(&e.hash))
        .filter_map(|e| match catalog.current_of(e).as_ref() {
            LabBody::Weighing(w) => Some((w.replicate, w.portion, w.source)),
            _ => None,
        })
        .collect();
    let orphans: Vec<&CatalogEntry> = run
        .entries
        .iter()
        .copied()
        .filter(|e| e.kind == Weighing::KIND || e.kind == Titration::KIND)
        .filter(|e| !used.contains(&e.hash))
        .filter(|e| match catalog.current_of(e).as_ref() {
            LabBody::Weighing(w) => {
                let other = match w.source {
                    Source::Keyed => Source::Captured,
                    Source::Captured => Source::Keyed,
                };
                !used_slots.contains(&(w.replicate, w.portion, other))
            }
            _ => true,
        })
        .collect();
    for entry in orphans {
        let what = match catalog.current_of(entry).as_ref() {
            LabBody::Weighing(w) => format!(
                "weighing (entry {}, replicate {}, {:?} portion)",
                entry.seq, w.replicate, w.portion
            ),
            LabBody::Titration(t) => format!(
                "burette reading (entry {}, replicate {})",
                entry.seq, t.replicate
            ),
            _ => format!("entry {}", entry.seq),
        };
        out.push(
            run.finding(Finding::new(
                Code::OrphanData,
                format!(
                    "{what} of run {} feeds no replicate and no invalidation sets it aside",
                    run.id()
                ),
                "all data are part of the record (21 CFR 211.194(a))",
            ))
            .involving([entry_ref(entry)]),
        );
    }
}

/// Valid replicates against the method's count (a standardization also against the policy's
/// minimum).
fn determinations(evidence: &Evidence<'_>, run: &RunView<'_>, out: &mut Vec<Finding>) {
    let Some(method) = run.method() else { return };
    let catalog = evidence.catalog;
    let replicates: Vec<&CatalogEntry> = run
        .entries
        .iter()
        .copied()
        .filter(|e| e.kind == Replicate::KIND)
        .collect();
    let valid = replicates
        .iter()
        .filter(|e| catalog.invalidations_of(&e.hash).is_empty())
        .count() as u32;
    let invalidated = replicates.len() as u32 - valid;
    let mut required = method.replicates;
    let mut clause = format!("{}: replicates = {}", run.method_label(), method.replicates);
    if run.run.kind == RunKind::Standardization {
        if let Some(policy) = run.policy() {
            let minimum = policy.titrants.standardization_min_replicates;
            if minimum > required {
                required = minimum;
                clause = format!(
                    "{}: titrants.standardization_min_replicates = {minimum}",
                    run.policy_label()
                );
            }
        }
    }
    if valid == required {
        return;
    }
    let mut message = format!(
        "run {} has {valid} valid determination{} where {required} are required",
        run.id(),
        if valid == 1 { "" } else { "s" }
    );
    if invalidated > 0 {
        message.push_str(&format!(" ({invalidated} invalidated)"));
    }
    out.push(
        run.finding(Finding::new(Code::DeterminationCount, message, clause))
            .involving(replicates.iter().map(|e| entry_ref(e))),
    );
}
