//! Findings about changes (`CHG-*`): a correction without a reason, and corrections that turn
//! a result's conformance around (pass → fail or fail → pass), which the reviewer must read
//! critically even when a reason is given.
//!
//! A reason is missing when it is blank or one of the few placeholders people type to get past
//! a prompt that will not take a blank ([`NOT_A_REASON`]: `-`, `n/a`, `none`, ...): those
//! explain nothing, so they count as no reason. Anything else counts as a reason; whether it
//! is a good one is for the reviewer, who sees it in the exception report.
//!
//! The result "as first recorded" is recomputed from the original bodies of everything the run
//! depends on ([`dependencies`]), gathered into a small catalog without the corrections.

use super::{entry_ref, is_assay, Evidence, RunView};
use crate::assemble::Recomputer;
use crate::catalog::{Catalog, CatalogEntry, LabBody};
use crate::conformance::judge;
use crate::findings::{Code, Finding};
use crate::records::{Calibration, Correction};
use crate::rounding::decimal_from_f64;
use assize_ledger::EntryHash;
use assize_ledger::Record;
use foldhash::{HashSet, HashSetExt};
use rust_decimal::Decimal;
use std::str::FromStr;

/// Placeholders that stand where a reason should be, compared with [`gives_a_reason`]'s
/// plain form of a reason (trimmed, lower case, single spaces, no final full stop).
pub const NOT_A_REASON: [&str; 11] = [
    "",
    "-",
    "--",
    "?",
    "n/a",
    "na",
    "none",
    "nil",
    "no reason",
    "tbd",
    "x",
];

/// Whether a correction's reason says anything: not blank and not a placeholder of
/// [`NOT_A_REASON`].
pub fn gives_a_reason(reason: &str) -> bool {
    let plain: String = reason
        .trim()
        .trim_end_matches('.')
        .to_lowercase()
        .split_whitespace()
        .collect::<Vec<_>>()
        .join(" ");
    !NOT_A_REASON.contains(&plain.as_str())
}

/// The `CHG-02` finding of a correction (by `author`, of the entry at `corrected_seq`) whose
/// reason says nothing; `None` when it gives one. The caller adds the entries involved.
pub fn without_reason(
    author: &str,
    corrected_seq: u64,
    correction: &Correction,
) -> Option<Finding> {
    if gives_a_reason(&correction.reason) {
        return None;
    }
    let changed = format!(
        "{author} changed entry {corrected_seq} ({})",
        correction.kind
    );
    let reason = correction.reason.trim();
    let message = if reason.is_empty() {
        format!("{changed} without giving a reason")
    } else {
        format!("{changed} with {reason:?} as its reason, which explains nothing")
    };
    Some(Finding::new(
        Code::CorrectionWithoutReason,
        message,
        "every change is explained (21 CFR 58.130(e))",
    ))
}

/// Pushes the change findings.
pub fn check(evidence: &Evidence<'_>, out: &mut Vec<Finding>) {
    let catalog = evidence.catalog;
    for entry in catalog.of_kind(Correction::KIND) {
        let LabBody::Correction(c) = &entry.body else {
            continue;
        };
        let corrected_seq = evidence.entry_ref(&c.supersedes).map_or(0, |r| r.seq);
        if let Some(finding) = without_reason(&entry.author, corrected_seq, c) {
            let finding = finding
                .involving([entry_ref(entry)])
                .involving(evidence.entry_ref(&c.supersedes));
            out.push(match evidence.run_of_entry(entry) {
                Some(run) => run.finding(finding),
                None => finding,
            });
        }
    }
    // Without a single correction nothing can flip (and gathering dependencies is not free).
    if catalog.has_corrections() {
        for run in evidence.judged_runs().filter(|r| is_assay(r)) {
            flips(evidence, run, out);
        }
    }
}

/// Every entry the run's result depends on, as recorded (corrections not included): the run,
/// its entries and invalidations, its documents, titrant, sample and reference lot, the
/// balances it weighed on with their calibrations, and the same for its standardization.
pub fn dependencies<'a>(evidence: &Evidence<'a>, run: &RunView<'a>) -> Vec<&'a CatalogEntry> {
    let catalog = evidence.catalog;
    let mut seen: HashSet<EntryHash> = HashSet::new();
    let mut out: Vec<&'a CatalogEntry> = Vec::new();
    let mut add = |entry: Option<&'a CatalogEntry>, out: &mut Vec<&'a CatalogEntry>| {
        if let Some(entry) = entry {
            if seen.insert(entry.hash) {
                out.push(entry);
            }
        }
    };
    let mut runs = vec![run];
    if let Some(standardization) = run.run.standardization.and_then(|h| evidence.run(&h)) {
        runs.push(standardization);
    }
    let mut balances: HashSet<EntryHash> = HashSet::new();
    for r in runs {
        add(Some(r.entry), &mut out);
        let refs = [
            Some(r.run.method),
            Some(r.run.policy),
            Some(r.run.titrant),
            r.run.sample,
            r.run.reference_lot,
        ];
        for hash in refs.into_iter().flatten() {
            add(catalog.entry(&hash), &mut out);
        }
        for e in &r.entries {
            add(Some(e), &mut out);
            for invalidation in catalog.invalidations_of(&e.hash) {
                add(Some(invalidation), &mut out);
            }
            if let LabBody::Weighing(w) = catalog.current_of(e).as_ref() {
                balances.insert(w.balance);
            }
        }
    }
    for balance in &balances {
        add(catalog.entry(balance), &mut out);
    }
    for calibration in catalog.of_kind(Calibration::KIND) {
        if let LabBody::Calibration(c) = &calibration.body {
            if balances.contains(&c.balance) {
                add(Some(calibration), &mut out);
            }
        }
    }
    out.sort_by_key(|e| e.seq);
    out
}

/// A correction among the run's dependencies that changes its conformance.
fn flips(evidence: &Evidence<'_>, run: &RunView<'_>, out: &mut Vec<Finding>) {
    let catalog = evidence.catalog;
    let depends = dependencies(evidence, run);
    let corrections: Vec<&CatalogEntry> = depends
        .iter()
        .flat_map(|e| catalog.corrections_of(&e.hash))
        .collect();
    if corrections.is_empty() {
        return;
    }
    let Some((now, _)) = super::out_of_spec::decision_of(evidence, run) else {
        return;
    };
    let Some(method) = run.method() else { return };
    let original: Catalog = catalog.subset(depends.iter().copied());
    // The reported value as first written, else the result recomputed from the originals.
    let first_reported = run.entries.iter().find_map(|e| match &e.body {
        LabBody::Result(r) => Decimal::from_str(r.value.trim()).ok(),
        _ => None,
    });
    let first_value = match first_reported {
        Some(value) => Some(value),
        None => Recomputer::new(&original)
            .run(run.entry.hash)
            .ok()
            .and_then(|r| match r.outcome.reported {
                Some(reported) => Some(reported.value),
                None => decimal_from_f64(r.outcome.mean),
            }),
    };
    let Some(first) = first_value.and_then(|v| judge(v, &method.specification).ok()) else {
        return;
    };
    if first.conforms() == now.conforms() {
        return;
    }
    let verdict = |conforms: bool| if conforms { "conforming" } else { "failing" };
    out.push(
        run.finding(Finding::new(
            Code::CorrectionFlipsConformance,
            format!(
                "corrections turned run {}'s result from {} {} ({}) to {} {} ({})",
                run.id(),
                first.compared,
                method.specification.unit,
                verdict(first.conforms()),
                now.compared,
                method.specification.unit,
                verdict(now.conforms())
            ),
            format!("{}: specification", run.method_label()),
        ))
        .involving(corrections.into_iter().map(entry_ref)),
    );
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn blanks_and_placeholders_give_no_reason() {
        for reason in [
            "",
            "   ",
            "-",
            "N/A",
            "n/a.",
            " None ",
            "no  reason",
            "TBD",
            ".",
        ] {
            assert!(!gives_a_reason(reason), "{reason:?}");
        }
    }

    #[test]
    fn any_words_beyond_a_placeholder_give_a_reason() {
        for reason in [
            "typo",
            "n/a was written in the wrong field",
            "transposed digits, checked against the balance display",
            "none of the portion was lost; reading misread",
        ] {
            assert!(gives_a_reason(reason), "{reason:?}");
        }
    }
}
