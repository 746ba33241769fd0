//! Timeliness findings (`TIM-*`): entries recorded later than the policy's contemporaneous
//! window after what they record, and many readings of one run sharing one time stamp.
//! Captured readings are exempt from the window and from the count of shared time stamps: the
//! instrument's own record is the original, whenever it is imported, and carries the times
//! the balance printed.

use super::{entry_ref, when, Evidence};
use crate::catalog::{CatalogEntry, LabBody};
use crate::findings::{Code, Finding};
use crate::records::{BalanceCheck, Source};
use assize_ledger::Record;
use assize_ledger::Timestamp;

const MINUTE_MICROS: i64 = 60_000_000;

/// What an entry observed and when, if it is a bench observation typed by a person.
fn keyed_observation(body: &LabBody) -> Option<Timestamp> {
    match body {
        LabBody::Weighing(w) if w.source == Source::Keyed => Some(w.second_at.max(w.first_at)),
        LabBody::Titration(t) => Some(t.read_at),
        LabBody::BalanceCheck(c) => Some(c.observed_at),
        _ => None,
    }
}

fn late(entry: &CatalogEntry, observed: Timestamp, window_minutes: u32) -> Option<String> {
    let delay = entry.record_time.0 - observed.0;
    (delay > i64::from(window_minutes) * MINUTE_MICROS).then(|| {
        format!(
            "entry {} was recorded at {}, {} min after the observation at {} (window {window_minutes} min)",
            entry.seq,
            when(entry.record_time),
            delay / MINUTE_MICROS,
            when(observed)
        )
    })
}

/// Pushes the timeliness findings.
pub fn check(evidence: &Evidence<'_>, out: &mut Vec<Finding>) {
    let catalog = evidence.catalog;
    for run in evidence.judged_runs() {
        let Some(policy) = run.policy() else { continue };
        let window = policy.records.contemporaneous_window_minutes;
        let clause = || {
            format!(
                "{}: records.contemporaneous_window_minutes = {window}",
                run.policy_label()
            )
        };
        // Every time stamp of a reading typed by a person, in the order the run's entries
        // give them (sorted below, stably, so each stamp's entries keep that order).
        let mut stamps: Vec<(Timestamp, &CatalogEntry)> = Vec::new();
        for entry in &run.entries {
            let body = catalog.current_of(entry);
            if let Some(observed) = keyed_observation(&body) {
                if let Some(message) = late(entry, observed, window) {
                    out.push(
                        run.finding(Finding::new(Code::LateEntry, message, clause()))
                            .involving([entry_ref(entry)]),
                    );
                }
            }
            match body.as_ref() {
                // A captured twin repeats the time of the keyed reading it is the original
                // of; only readings typed by a person can be back-filled.
                LabBody::Weighing(w) if w.source == Source::Keyed => {
                    stamps.push((w.first_at, entry));
                    stamps.push((w.second_at, entry));
                }
                LabBody::Titration(t) => stamps.push((t.read_at, entry)),
                _ => {}
            }
        }
        stamps.sort_by_key(|(at, _)| *at);
        let most = policy.records.max_readings_per_timestamp as usize;
        for group in stamps.chunk_by(|a, b| a.0 == b.0) {
            if group.len() <= most {
                continue;
            }
            let at = group[0].0;
            out.push(
                run.finding(Finding::new(
                    Code::SharedTimestamp,
                    format!(
                        "{} readings of run {} are all timed {}",
                        group.len(),
                        run.id(),
                        when(at)
                    ),
                    format!(
                        "{}: records.max_readings_per_timestamp = {most}",
                        run.policy_label()
                    ),
                ))
                .involving(group.iter().map(|(_, entry)| entry_ref(entry))),
            );
        }
    }
    // Routine balance checks belong to no run: judged by the policy in force when recorded.
    for entry in catalog
        .of_kind(BalanceCheck::KIND)
        .filter(|_| !evidence.focused())
    {
        let Some(adopted) = evidence.policy_before(entry.seq) else {
            continue;
        };
        let Some(policy) = adopted.policy.as_deref() else {
            continue;
        };
        let window = policy.records.contemporaneous_window_minutes;
        if let Some(observed) = keyed_observation(&catalog.current_of(entry)) {
            if let Some(message) = late(entry, observed, window) {
                out.push(
                    Finding::new(
                        Code::LateEntry,
                        message,
                        format!(
                            "{}: records.contemporaneous_window_minutes = {window}",
                            adopted.label
                        ),
                    )
                    .involving([entry_ref(entry)]),
                );
            }
        }
    }
}
