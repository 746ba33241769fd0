//! Corrections: a new version of an earlier lab entry, with the fields a person changes and the
//! mandatory reason. The original entry is never touched; the correction carries the complete
//! replacement record, checked like any new record.
//!
//! Only values can change (readings, times, stated numbers, texts). What an entry belongs to
//! (its run, replicate, balance, portion) cannot: record a new entry and invalidate the old
//! one instead, so the trail shows what happened.

use crate::catalog::{Catalog, LabBody};
use crate::intake::parse_time;
use crate::quantity::Reading;
use crate::records::{Correction, LabRecord};
use assize_ledger::{codec, Draft, EntryHash};

/// Fields that may be corrected, per kind.
pub const CORRECTABLE: [(&str, &str); 9] = [
    (
        "lab.weighing",
        "first, second, first-at, second-at, captured, unstable",
    ),
    ("lab.titration", "initial, final, at, endpoint"),
    ("lab.stated", "value, unit"),
    ("lab.result", "value, expanded-uncertainty, unit"),
    ("lab.balance-check", "reference-mass, reading, at"),
    ("lab.sample", "description, received-at"),
    (
        "lab.reference-lot",
        "purity, purity-expanded-u, coverage-factor, certificate, valid-until, drying",
    ),
    (
        "lab.titrant",
        "nominal-concentration, prepared-on, valid-until",
    ),
    ("lab.replicate", "endpoint"),
];

fn reading(field: &str, text: &str) -> Result<Reading, String> {
    Reading::parse_with_unit(text).map_err(|e| format!("{field}: {e}"))
}

fn flag(field: &str, text: &str) -> Result<bool, String> {
    match text.trim() {
        "true" | "yes" => Ok(true),
        "false" | "no" => Ok(false),
        other => Err(format!("{field}: {other:?} is not true or false")),
    }
}

fn not_correctable(kind: &str, field: &str) -> String {
    let allowed = CORRECTABLE
        .iter()
        .find(|(k, _)| *k == kind)
        .map_or("none", |(_, f)| f);
    format!("{field} of a {kind} entry cannot be corrected (correctable: {allowed})")
}

/// Applies `changes` (`name`, `value` as text) to the body now in force.
fn apply(kind: &str, body: LabBody, changes: &[(String, String)]) -> Result<Vec<u8>, String> {
    let mut body = body;
    for (name, value) in changes {
        let field = name.replace('_', "-");
        let v = value.as_str();
        let ok = match (&mut body, field.as_str()) {
            (LabBody::Weighing(w), "first") => {
                w.first = reading("first", v)?;
                true
            }
            (LabBody::Weighing(w), "second") => {
                w.second = reading("second", v)?;
                true
            }
            (LabBody::Weighing(w), "first-at") => {
                w.first_at = parse_time("first-at", v)?;
                true
            }
            (LabBody::Weighing(w), "second-at") => {
                w.second_at = parse_time("second-at", v)?;
                true
            }
            (LabBody::Weighing(w), "captured") => {
                w.source = if flag("captured", v)? {
                    crate::records::Source::Captured
                } else {
                    crate::records::Source::Keyed
                };
                true
            }
            (LabBody::Weighing(w), "unstable") => {
                w.stable = !flag("unstable", v)?;
                true
            }
            (LabBody::Titration(t), "initial") => {
                t.initial = reading("initial", v)?;
                true
            }
            (LabBody::Titration(t), "final") => {
                t.final_reading = reading("final", v)?;
                true
            }
            (LabBody::Titration(t), "at") => {
                t.read_at = parse_time("at", v)?;
                true
            }
            (LabBody::Titration(t), "endpoint") => {
                t.endpoint = v.to_string();
                true
            }
            (LabBody::Stated(s), "value") => {
                s.value = v.to_string();
                true
            }
            (LabBody::Stated(s), "unit") => {
                s.unit = v.to_string();
                true
            }
            (LabBody::Result(r), "value") => {
                r.value = v.to_string();
                true
            }
            (LabBody::Result(r), "expanded-uncertainty") => {
                r.expanded_uncertainty = v.to_string();
                true
            }
            (LabBody::Result(r), "unit") => {
                r.unit = v.to_string();
                true
            }
            (LabBody::BalanceCheck(c), "reference-mass") => {
                c.reference_mass = reading("reference-mass", v)?;
                true
            }
            (LabBody::BalanceCheck(c), "reading") => {
                c.reading = reading("reading", v)?;
                true
            }
            (LabBody::BalanceCheck(c), "at") => {
                c.observed_at = parse_time("at", v)?;
                true
            }
            (LabBody::Sample(s), "description") => {
                s.description = v.to_string();
                true
            }
            (LabBody::Sample(s), "received-at") => {
                s.received_at = parse_time("received-at", v)?;
                true
            }
            (LabBody::ReferenceLot(l), "purity") => {
                l.purity = v.to_string();
                true
            }
            (LabBody::ReferenceLot(l), "purity-expanded-u") => {
                l.purity_expanded_u = v.to_string();
                true
            }
            (LabBody::ReferenceLot(l), "coverage-factor") => {
                l.coverage_factor = v.to_string();
                true
            }
            (LabBody::ReferenceLot(l), "certificate") => {
                l.certificate = v.to_string();
                true
            }
            (LabBody::ReferenceLot(l), "valid-until") => {
                l.valid_until = v.to_string();
                true
            }
            (LabBody::ReferenceLot(l), "drying") => {
                l.drying = v.to_string();
                true
            }
            (LabBody::Titrant(t), "nominal-concentration") => {
                t.nominal_concentration = v.to_string();
                true
            }
            (LabBody::Titrant(t), "prepared-on") => {
                t.prepared_on = v.to_string();
                true
            }
            (LabBody::Titrant(t), "valid-until") => {
                t.valid_until = v.to_string();
                true
            }
            (LabBody::Replicate(r), "endpoint") => {
                r.endpoint = v.to_string();
                true
            }
            _ => false,
        };
        if !ok {
            return Err(not_correctable(kind, &field));
        }
    }
    fn encode<R: LabRecord>(record: &R) -> Result<Vec<u8>, String> {
        record.check()?;
        codec::encode(record).map_err(|e| e.to_string())
    }
    match &body {
        LabBody::Weighing(r) => encode(r),
        LabBody::Titration(r) => encode(r),
        LabBody::Stated(r) => encode(r),
        LabBody::Result(r) => encode(r),
        LabBody::BalanceCheck(r) => encode(r),
        LabBody::Sample(r) => encode(r),
        LabBody::ReferenceLot(r) => encode(r),
        LabBody::Titrant(r) => encode(r),
        LabBody::Replicate(r) => encode(r),
        _ => Err(format!("a {kind} entry cannot be corrected")),
    }
}

/// A correction of the lab entry `original`, authored by `author`.
pub fn correction_draft(
    catalog: &Catalog,
    original: EntryHash,
    changes: &[(String, String)],
    reason: &str,
    author: &str,
) -> Result<Draft, String> {
    let entry = catalog
        .entry(&original)
        .ok_or("that entry is not a lab record, so it cannot be corrected here")?;
    if let LabBody::Correction(c) = &entry.body {
        return Err(format!(
            "entry {} is itself a correction; correct the original entry (it supersedes {})",
            entry.seq, c.supersedes
        ));
    }
    if changes.is_empty() {
        return Err("give at least one field to change".into());
    }
    if reason.trim().is_empty() {
        return Err("a correction needs its reason: say why the value changes".into());
    }
    let current = catalog.current(&original).ok_or("the entry has no body")?;
    let replacement = apply(&entry.kind, current, changes)?;
    let correction = Correction {
        supersedes: original,
        kind: entry.kind.clone(),
        replacement,
        reason: reason.to_string(),
    };
    correction.check()?;
    Draft::of_record(author, &correction).map_err(|e| e.to_string())
}
