//! Invented lab records for the unit tests of the modules that pair and judge weighings
//! (`capture_import`, `rules::capture`): entry hashes from tags, times in seconds after
//! 2026-11-16T08:00:00Z, a balance, and a run named RUN-1.

use crate::catalog::{CatalogEntry, LabBody};
use crate::quantity::Reading;
use crate::records::{Balance, Run, RunKind};
use assize_ledger::{EntryHash, Record, Timestamp};

/// The hash standing for the entry tagged `tag`.
pub fn h(tag: &str) -> EntryHash {
    EntryHash::digest(tag.as_bytes())
}

/// `seconds` after 2026-11-16T08:00:00Z: 20,773 days after 1970-01-01 (Gregorian leap-year
/// rule, RFC 3339 Appendix C) × 86,400 s, plus 8 h.
pub fn at(seconds: i64) -> Timestamp {
    Timestamp((20_773 * 86_400 + 8 * 3600 + seconds) * 1_000_000)
}

/// A reading written with its unit, e.g. `"12.3456 g"`.
pub fn reading(text: &str) -> Reading {
    Reading::parse_with_unit(text).unwrap()
}

/// A signed entry of analyst.a, recorded an hour after the readings.
pub fn entry(seq: u64, tag: &str, kind: &str, body: LabBody) -> CatalogEntry {
    CatalogEntry {
        seq,
        hash: h(tag),
        kind: kind.to_string(),
        author: "analyst.a".into(),
        record_time: at(3_600 + seq as i64),
        signed: true,
        body,
    }
}

/// An analytical balance with id `id` (d = 0.0001 g).
pub fn balance(seq: u64, id: &str) -> CatalogEntry {
    let body = Balance {
        id: id.into(),
        description: "analytical balance (invented)".into(),
        readability: reading("0.0001 g"),
        capacity: reading("220 g"),
        minimum_weight: reading("0.0820 g"),
    };
    entry(seq, id, Balance::KIND, LabBody::Balance(body))
}

/// A standardization run record with id `id` under the policy tagged `policy`.
pub fn run_record(id: &str, policy: &str) -> Run {
    Run {
        id: id.into(),
        kind: RunKind::Standardization,
        method: h("method"),
        policy: h(policy),
        titrant: h("titrant"),
        reference_lot: Some(h("lot")),
        sample: None,
        standardization: None,
        started_at: at(0),
    }
}
