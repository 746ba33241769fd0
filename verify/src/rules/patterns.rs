//! Suspicious patterns (`PAT-*`): replicates of one run with identical raw readings, and one
//! raw reading pair appearing in more than one run. Neither proves anything; both are worth a
//! look at the balance printout.

use super::{entry_ref, weighings_of, Evidence};
use crate::catalog::CatalogEntry;
use crate::findings::{Code, Finding};
use crate::quantity::Unit;
use crate::records::{Portion, Weighing};
use assize_ledger::EntryHash;
use foldhash::{HashMap, HashMapExt};

/// What makes two weighings look like the same observation: balance, both readings, unit.
type Fingerprint = (EntryHash, String, String, Unit);

/// A [`Fingerprint`] borrowed from the weighing.
type FingerprintRef<'a> = (EntryHash, &'a str, &'a str, Unit);

/// The fingerprint of a weighing, borrowed from it.
fn fingerprint(w: &Weighing) -> FingerprintRef<'_> {
    (w.balance, &w.first.value, &w.second.value, w.first.unit)
}

/// Pushes the pattern findings.
pub fn check(evidence: &Evidence<'_>, out: &mut Vec<Finding>) {
    // Readings across runs are compared only over a whole catalog; a focused judgement leaves
    // them to the caller (the streaming validation compares them across its horizon).
    let across_runs = !evidence.focused();
    let mut seen: HashMap<Fingerprint, Vec<(usize, &CatalogEntry, Portion)>> = HashMap::new();
    for (index, run) in evidence.runs.iter().enumerate() {
        if evidence.focused() && !evidence.judges(run) {
            continue;
        }
        let weighings = weighings_of(evidence.catalog, run);
        if across_runs {
            for (entry, w) in &weighings {
                let (balance, first, second, unit) = fingerprint(w);
                seen.entry((balance, first.to_string(), second.to_string(), unit))
                    .or_default()
                    .push((index, entry, w.portion));
            }
        }
        // Identical readings between different replicates of the run: a run has a few
        // weighings, so each is compared with the rest rather than filed in a table.
        let keys: Vec<(Portion, FingerprintRef<'_>)> = weighings
            .iter()
            .map(|(_, w)| (w.portion, fingerprint(w)))
            .collect();
        let mut groups: Vec<Vec<(&CatalogEntry, u32)>> = Vec::new();
        for (first, key) in keys.iter().enumerate() {
            if keys[..first].contains(key) {
                continue;
            }
            let alike = || (first..keys.len()).filter(|&other| keys[other] == *key);
            let replicate_of = |at: usize| weighings[at].1.replicate;
            let starting = replicate_of(first);
            if alike().all(|other| replicate_of(other) == starting) {
                continue;
            }
            groups.push(
                alike()
                    .map(|at| (weighings[at].0, replicate_of(at)))
                    .collect(),
            );
        }
        groups.sort_by_key(|g| g[0].0.seq);
        for group in groups {
            let numbers: Vec<String> = group.iter().map(|(_, r)| r.to_string()).collect();
            out.push(
                run.finding(Finding::new(
                    Code::IdenticalReplicates,
                    format!(
                        "replicates {} of run {} show identical raw readings",
                        numbers.join(", "),
                        run.id()
                    ),
                    "independent portions rarely read alike to the last digit",
                ))
                .involving(group.iter().map(|(e, _)| entry_ref(e))),
            );
        }
    }
    if !across_runs {
        return;
    }
    let mut reused: Vec<Vec<(usize, &CatalogEntry, Portion)>> = seen
        .into_values()
        .filter(|list| {
            let mut runs: Vec<usize> = list.iter().map(|(r, _, _)| *r).collect();
            runs.sort_unstable();
            runs.dedup();
            runs.len() > 1
        })
        .collect();
    reused.sort_by_key(|list| list[0].1.seq);
    for list in reused {
        let later = list.last().expect("at least two");
        let run = &evidence.runs[later.0];
        let others: Vec<&str> = list
            .iter()
            .filter(|(r, _, _)| *r != later.0)
            .map(|(r, _, _)| evidence.runs[*r].id())
            .collect();
        out.push(
            run.finding(Finding::new(
                Code::ReadingReused,
                format!(
                    "run {} has a weighing (entry {}) with the same balance and readings as run {}",
                    run.id(),
                    later.1.seq,
                    others.join(", ")
                ),
                "one observation belongs to one sample",
            ))
            .involving(list.iter().map(|(_, e, _)| entry_ref(e))),
        );
    }
}
