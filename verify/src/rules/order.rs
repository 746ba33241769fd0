//! Findings about the order of events (`ORD-01`, `-02`, `-05`, `-06`): data observed before the
//! sample arrived, a titrant used before its standardization was done, an observation timed
//! after the entry that records it, and a run recorded under a superseded document version.
//! (`ORD-03` lives with the balance rules, `ORD-04` with the sign-off rules.)

use super::materials::last_observation;
use super::{entry_ref, is_assay, when, Adopted, Evidence, RunView};
use crate::catalog::LabBody;
use crate::findings::{Code, Finding};
use crate::records::DocumentKind;
use assize_ledger::{EntryHash, Timestamp};

/// The earliest observation among a run's data (its start when it has none).
fn first_observation(evidence: &Evidence<'_>, run: &RunView<'_>) -> Timestamp {
    run.entries
        .iter()
        .filter_map(|e| match evidence.catalog.current_of(e).as_ref() {
            LabBody::Weighing(w) => Some(w.first_at),
            LabBody::Titration(t) => Some(t.read_at),
            _ => None,
        })
        .min()
        .unwrap_or(run.run.started_at)
}

/// Pushes the order-of-events findings.
pub fn check(evidence: &Evidence<'_>, out: &mut Vec<Finding>) {
    for run in evidence.judged_runs() {
        if let Some((sample_entry, sample)) = &run.sample {
            let first = first_observation(evidence, run).min(run.run.started_at);
            if first < sample.received_at {
                out.push(
                    run.finding(Finding::new(
                        Code::BeforeSampleReceipt,
                        format!(
                            "run {} has data from {}, before sample {} was received at {}",
                            run.id(),
                            when(first),
                            sample.id,
                            when(sample.received_at)
                        ),
                        "the sample's receipt time",
                    ))
                    .involving([entry_ref(sample_entry)]),
                );
            }
        }
        if is_assay(run) {
            if let Some(standardization) = run.run.standardization.and_then(|h| evidence.run(&h)) {
                let done = last_observation(evidence, standardization);
                let used = first_observation(evidence, run);
                if standardization.entry.seq > run.entry.seq || done > used {
                    out.push(
                        run.finding(Finding::new(
                            Code::TitrantUsedBeforeStandardization,
                            format!(
                                "assay {} began at {}, before standardization {} was finished at {}",
                                run.id(),
                                when(used),
                                standardization.id(),
                                when(done)
                            ),
                            "a titrant is standardized before it is used",
                        ))
                        .involving([entry_ref(standardization.entry)]),
                    );
                }
            }
        }
        superseded(evidence, run, run.run.method, DocumentKind::Method, out);
        superseded(evidence, run, run.run.policy, DocumentKind::Policy, out);
    }
    timed_after_recording(evidence, out);
}

/// The run names the latest adoption of its document before the run was recorded.
fn superseded(
    evidence: &Evidence<'_>,
    run: &RunView<'_>,
    named: EntryHash,
    document: DocumentKind,
    out: &mut Vec<Finding>,
) {
    let Some(adopted) = evidence.adopted.get(&named) else {
        return;
    };
    let latest: Option<&Adopted> = evidence
        .adopted
        .values()
        .filter(|a| a.document == document && a.id == adopted.id && a.at.seq < run.entry.seq)
        .max_by_key(|a| a.at.seq)
        .map(|a| a.as_ref());
    if let Some(latest) = latest {
        if latest.at.seq != adopted.at.seq {
            out.push(
                run.finding(Finding::new(
                    Code::SupersededDocument,
                    format!(
                        "run {} names {} but {} was in force when it was recorded",
                        run.id(),
                        adopted.label,
                        latest.label
                    ),
                    format!("adoption of {} (entry {})", latest.label, latest.at.seq),
                ))
                .involving([adopted.at, latest.at]),
            );
        }
    }
}

/// Observations timed after the entry recording them, beyond the policy's clock tolerance.
fn timed_after_recording(evidence: &Evidence<'_>, out: &mut Vec<Finding>) {
    let catalog = evidence.catalog;
    for run in evidence.judged_runs() {
        let tolerance = run
            .policy()
            .map_or(60, |p| p.records.clock_tolerance_seconds);
        for entry in run.entries.iter().chain(std::iter::once(&run.entry)) {
            let observed = match catalog.current_of(entry).as_ref() {
                LabBody::Weighing(w) => w.second_at.max(w.first_at),
                LabBody::Titration(t) => t.read_at,
                LabBody::Run(r) => r.started_at,
                _ => continue,
            };
            if observed.0 > entry.record_time.0 + i64::from(tolerance) * 1_000_000 {
                out.push(
                    run.finding(Finding::new(
                        Code::EventAfterRecord,
                        format!(
                            "entry {} records an observation at {}, after it was itself recorded at {}",
                            entry.seq,
                            when(observed),
                            when(entry.record_time)
                        ),
                        format!(
                            "{}: records.clock_tolerance_seconds = {tolerance}",
                            run.policy_label()
                        ),
                    ))
                    .involving([entry_ref(entry)]),
                );
            }
        }
    }
}
