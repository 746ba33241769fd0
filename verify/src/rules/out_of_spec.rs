//! Out-of-specification findings (`OOS-*`): a failing result without an investigation, a retest
//! before one was opened, and invalidations without an assignable cause or approved only by
//! the analyst who did the work (FDA guidance on OOS results, 2006, rev. 2022).

use super::{entry_ref, is_assay, Evidence, RunView};
use crate::catalog::{CatalogEntry, LabBody};
use crate::conformance::{judge, limits_text, Decision};
use crate::findings::{Code, Finding};
use crate::records::{Invalidation, Meaning, OosInvestigation, SignOff};
use crate::rounding::decimal_from_f64;
use assize_ledger::EntryHash;
use assize_ledger::Record;
use rust_decimal::Decimal;
use std::str::FromStr;

/// Pushes the OOS findings.
pub fn check(evidence: &Evidence<'_>, out: &mut Vec<Finding>) {
    let investigations: Vec<(&CatalogEntry, EntryHash)> = evidence
        .catalog
        .of_kind(OosInvestigation::KIND)
        .filter_map(|e| match evidence.catalog.current_of(e).as_ref() {
            LabBody::Oos(o) => Some((e, o.subject)),
            _ => None,
        })
        .collect();
    let mut failures: Vec<(&RunView<'_>, u64)> = Vec::new();
    for run in evidence.judged_runs().filter(|r| is_assay(r)) {
        let Some((decision, result_entry)) = decision_of(evidence, run) else {
            continue;
        };
        if decision.conforms() {
            continue;
        }
        let subjects: Vec<EntryHash> = std::iter::once(run.entry.hash)
            .chain(result_entry.map(|e| e.hash))
            .collect();
        let opened = investigations
            .iter()
            .filter(|(_, subject)| subjects.contains(subject))
            .map(|(e, _)| e.seq)
            .min();
        failures.push((run, opened.unwrap_or(u64::MAX)));
        if opened.is_none() {
            let method = run.method().expect("decision_of needs the method");
            out.push(
                run.finding(Finding::new(
                    Code::OosWithoutInvestigation,
                    format!(
                        "run {} gives {} {} against {}, and no OOS investigation names it",
                        run.id(),
                        decision.compared,
                        method.specification.unit,
                        limits_text(&method.specification)
                    ),
                    format!("{}: specification", run.method_label()),
                ))
                .involving(result_entry.map(entry_ref)),
            );
        }
    }
    // A retest: a later assay run of the same sample, started before an investigation of the
    // failing run was opened.
    for (failed, opened_seq) in failures.iter().filter(|_| !evidence.focused()) {
        let Some(sample) = failed.run.sample else {
            continue;
        };
        for retest in evidence.runs.iter().filter(|r| {
            is_assay(r) && r.run.sample == Some(sample) && r.entry.seq > failed.entry.seq
        }) {
            if retest.entry.seq < *opened_seq {
                out.push(
                    retest
                        .finding(Finding::new(
                            Code::RetestBeforeInvestigation,
                            format!(
                                "run {} retests sample {} after run {} failed, before any investigation was opened",
                                retest.id(),
                                retest.sample_id().unwrap_or("?"),
                                failed.id()
                            ),
                            "FDA OOS guidance: investigate before retesting",
                        ))
                        .involving([entry_ref(failed.entry)]),
                );
            }
        }
    }
    invalidations(evidence, out);
}

/// The conformance decision for an assay run: on the reported value as written when there is
/// one, else on the recomputed result rounded for reporting.
pub fn decision_of<'a>(
    evidence: &Evidence<'a>,
    run: &RunView<'a>,
) -> Option<(Decision, Option<&'a CatalogEntry>)> {
    let method = run.method()?;
    let reported =
        run.entries
            .iter()
            .rev()
            .find_map(|e| match evidence.catalog.current_of(e).as_ref() {
                LabBody::Result(r) => Some((*e, r.value.clone())),
                _ => None,
            });
    let (value, entry) = match reported {
        Some((entry, text)) => (Decimal::from_str(text.trim()).ok()?, Some(entry)),
        None => {
            let outcome = &run.recomputed.as_ref().ok()?.outcome;
            let value = match outcome.reported {
                Some(r) => r.value,
                None => decimal_from_f64(outcome.mean)?,
            };
            (value, None)
        }
    };
    Some((judge(value, &method.specification).ok()?, entry))
}

/// Words that name no cause at the bench: a statistical flag, or nothing at all.
const NOT_A_CAUSE: [&str; 16] = [
    "",
    "outlier",
    "statistical outlier",
    "grubbs",
    "grubbs outlier",
    "dixon",
    "dixon outlier",
    "q test",
    "q-test",
    "failed q test",
    "unknown",
    "n/a",
    "none",
    "not known",
    "bad result",
    "analyst error",
];

/// Whether an invalidation's cause names something that happened at the bench.
pub fn is_assignable(cause: &str) -> bool {
    let plain: String = cause
        .trim()
        .trim_end_matches('.')
        .to_lowercase()
        .split_whitespace()
        .collect::<Vec<_>>()
        .join(" ");
    !NOT_A_CAUSE.contains(&plain.as_str())
}

fn invalidations(evidence: &Evidence<'_>, out: &mut Vec<Finding>) {
    let catalog = evidence.catalog;
    let sign_offs: Vec<(&CatalogEntry, SignOff)> = catalog
        .of_kind(SignOff::KIND)
        .filter_map(|e| match catalog.current_of(e).into_owned() {
            LabBody::SignOff(s) => Some((e, s)),
            _ => None,
        })
        .collect();
    for entry in catalog.of_kind(Invalidation::KIND) {
        let LabBody::Invalidation(invalidation) = catalog.current_of(entry).into_owned() else {
            continue;
        };
        let Some(run) = evidence.run_of_entry(entry) else {
            continue;
        };
        if !is_assignable(&invalidation.cause) {
            out.push(
                run.finding(Finding::new(
                    Code::NoAssignableCause,
                    if invalidation.cause.trim().is_empty() {
                        format!("a replicate of run {} was invalidated with no cause", run.id())
                    } else {
                        format!(
                            "a replicate of run {} was invalidated for {:?}, which names no cause at the bench",
                            run.id(),
                            invalidation.cause.trim()
                        )
                    },
                    "FDA OOS guidance: invalidation only with an assignable cause",
                ))
                .involving([entry_ref(entry)])
                .involving(evidence.entry_ref(&invalidation.replicate)),
            );
        }
        let analysts = evidence.analysts_of(run);
        if !analysts.contains(&entry.author) {
            continue;
        }
        let results: Vec<EntryHash> = run
            .entries
            .iter()
            .filter(|e| matches!(e.body, LabBody::Result(_)))
            .map(|e| e.hash)
            .collect();
        let approved = sign_offs.iter().any(|(s_entry, s)| {
            s.meaning == Meaning::Approved
                && (s.subject == entry.hash
                    || s.subject == run.entry.hash
                    || results.contains(&s.subject))
                && s.based_on_seq >= entry.seq
                && !analysts.contains(&s_entry.author)
        });
        if !approved {
            out.push(
                run.finding(Finding::new(
                    Code::SelfInvalidation,
                    format!(
                        "{} invalidated a replicate of run {}, which they worked on, and nobody else has approved it",
                        entry.author,
                        run.id()
                    ),
                    "FDA OOS guidance; second-person approval of invalidations",
                ))
                .involving([entry_ref(entry)]),
            );
        }
    }
}
