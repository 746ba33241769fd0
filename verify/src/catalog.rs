//! The lab's view of a ledger: every lab entry decoded, the latest correction of each entry
//! applied, invalidations noted, and lookups by id and by the run an entry belongs to.
//!
//! Built by streaming the ledger once through its public API. An entry whose body does not
//! decode to its kind, or fails its own checks, is listed as a defect instead of being used.
//! The original of a corrected entry stays visible (`history`) for the audit trail.

use crate::records::{
    check_body, Adoption, Balance, BalanceCheck, Blank, Calibration, Correction, Invalidation,
    LabRecord, OosInvestigation, ReferenceLot, Replicate, ReportedResult, Run, Sample, StatedValue,
    Titrant, Titration, Weighing,
};
use assize_ledger::store::Store;
use assize_ledger::{codec, Entry, EntryHash, LedgerError, Record, Timestamp};
use std::collections::BTreeMap;

/// A decoded lab body.
#[derive(Clone, Debug, PartialEq)]
#[allow(missing_docs)]
pub enum LabBody {
    Adoption(Adoption),
    Balance(Balance),
    Calibration(Calibration),
    BalanceCheck(BalanceCheck),
    ReferenceLot(ReferenceLot),
    Titrant(Titrant),
    Sample(Sample),
    Run(Run),
    Weighing(Weighing),
    Titration(Titration),
    Replicate(Replicate),
    Blank(Blank),
    Stated(StatedValue),
    Result(ReportedResult),
    Correction(Correction),
    Invalidation(Invalidation),
    Oos(OosInvestigation),
}

impl LabBody {
    /// Decodes a body of `kind` exactly and checks it; `Ok(None)` for kinds that are not lab kinds.
    pub fn decode(kind: &str, body: &[u8]) -> Result<Option<LabBody>, String> {
        fn one<R: LabRecord>(
            body: &[u8],
            wrap: fn(R) -> LabBody,
        ) -> Result<Option<LabBody>, String> {
            let record: R =
                codec::decode_exact(body).map_err(|e| format!("body does not decode: {e}"))?;
            record.check()?;
            Ok(Some(wrap(record)))
        }
        match kind {
            k if k == Adoption::KIND => one(body, LabBody::Adoption),
            k if k == Balance::KIND => one(body, LabBody::Balance),
            k if k == Calibration::KIND => one(body, LabBody::Calibration),
            k if k == BalanceCheck::KIND => one(body, LabBody::BalanceCheck),
            k if k == ReferenceLot::KIND => one(body, LabBody::ReferenceLot),
            k if k == Titrant::KIND => one(body, LabBody::Titrant),
            k if k == Sample::KIND => one(body, LabBody::Sample),
            k if k == Run::KIND => one(body, LabBody::Run),
            k if k == Weighing::KIND => one(body, LabBody::Weighing),
            k if k == Titration::KIND => one(body, LabBody::Titration),
            k if k == Replicate::KIND => one(body, LabBody::Replicate),
            k if k == Blank::KIND => one(body, LabBody::Blank),
            k if k == StatedValue::KIND => one(body, LabBody::Stated),
            k if k == ReportedResult::KIND => one(body, LabBody::Result),
            k if k == Correction::KIND => one(body, LabBody::Correction),
            k if k == Invalidation::KIND => one(body, LabBody::Invalidation),
            k if k == OosInvestigation::KIND => one(body, LabBody::Oos),
            _ => Ok(None),
        }
    }

    /// The record's own id, for kinds that have one.
    pub fn id(&self) -> Option<&str> {
        match self {
            LabBody::Adoption(a) => Some(&a.id),
            LabBody::Balance(b) => Some(&b.id),
            LabBody::ReferenceLot(l) => Some(&l.id),
            LabBody::Titrant(t) => Some(&t.id),
            LabBody::Sample(s) => Some(&s.id),
            LabBody::Run(r) => Some(&r.id),
            LabBody::Oos(o) => Some(&o.id),
            _ => None,
        }
    }

    /// The run an entry belongs to, if any.
    pub fn run(&self) -> Option<EntryHash> {
        match self {
            LabBody::Weighing(w) => Some(w.run),
            LabBody::Titration(t) => Some(t.run),
            LabBody::Replicate(r) => Some(r.run),
            LabBody::Blank(b) => Some(b.run),
            LabBody::Stated(s) => Some(s.run),
            LabBody::Result(r) => Some(r.run),
            _ => None,
        }
    }
}

/// One lab entry as the catalog holds it.
#[derive(Clone, Debug, PartialEq)]
pub struct CatalogEntry {
    /// Sequence number.
    pub seq: u64,
    /// Entry hash.
    pub hash: EntryHash,
    /// Kind name.
    pub kind: String,
    /// Author id.
    pub author: String,
    /// Record time.
    pub record_time: Timestamp,
    /// Whether it carries a signature.
    pub signed: bool,
    /// The body as recorded.
    pub body: LabBody,
}

/// A lab entry that could not be used.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Defect {
    /// Sequence number.
    pub seq: u64,
    /// Kind name.
    pub kind: String,
    /// What is wrong.
    pub reason: String,
}

/// All lab entries of a ledger, indexed.
#[derive(Clone, Debug, Default)]
pub struct Catalog {
    entries: BTreeMap<EntryHash, CatalogEntry>,
    ids: BTreeMap<(String, String), EntryHash>,
    by_run: BTreeMap<EntryHash, Vec<EntryHash>>,
    corrections: BTreeMap<EntryHash, Vec<EntryHash>>,
    invalidations: BTreeMap<EntryHash, Vec<EntryHash>>,
    defects: Vec<Defect>,
}

impl Catalog {
    /// Reads every entry of the ledger once, in order.
    pub fn load(store: &Store) -> Result<Catalog, LedgerError> {
        let mut catalog = Catalog::default();
        store.for_each_entry(1, |entry| {
            catalog.add(&entry);
            Ok(true)
        })?;
        Ok(catalog)
    }

    /// Adds one ledger entry (entries must come in sequence order).
    pub fn add(&mut self, entry: &Entry) {
        let body = match LabBody::decode(&entry.kind, &entry.body) {
            Ok(Some(body)) => body,
            Ok(None) => return,
            Err(reason) => {
                self.defects.push(Defect {
                    seq: entry.seq,
                    kind: entry.kind.clone(),
                    reason,
                });
                return;
            }
        };
        if let Some(id) = body.id() {
            self.ids
                .entry((entry.kind.clone(), id.to_string()))
                .or_insert(entry.hash);
        }
        if let Some(run) = body.run() {
            self.by_run.entry(run).or_default().push(entry.hash);
        }
        match &body {
            LabBody::Correction(c) => self
                .corrections
                .entry(c.supersedes)
                .or_default()
                .push(entry.hash),
            LabBody::Invalidation(i) => self
                .invalidations
                .entry(i.replicate)
                .or_default()
                .push(entry.hash),
            _ => {}
        }
        self.entries.insert(
            entry.hash,
            CatalogEntry {
                seq: entry.seq,
                hash: entry.hash,
                kind: entry.kind.clone(),
                author: entry.author.clone(),
                record_time: entry.record_time,
                signed: entry.signature.is_some(),
                body,
            },
        );
    }

    /// An entry as recorded.
    pub fn entry(&self, hash: &EntryHash) -> Option<&CatalogEntry> {
        self.entries.get(hash)
    }

    /// The body now in force: the latest correction's replacement, else the original.
    pub fn current(&self, hash: &EntryHash) -> Option<LabBody> {
        let original = self.entries.get(hash)?;
        let latest = self.corrections.get(hash).and_then(|list| list.last());
        if let Some(LabBody::Correction(c)) =
            latest.and_then(|h| self.entries.get(h)).map(|e| &e.body)
        {
            if check_body(&c.kind, &c.replacement).is_ok() {
                if let Ok(Some(body)) = LabBody::decode(&c.kind, &c.replacement) {
                    return Some(body);
                }
            }
        }
        Some(original.body.clone())
    }

    /// Corrections of an entry, oldest first.
    pub fn corrections_of(&self, hash: &EntryHash) -> Vec<&CatalogEntry> {
        self.corrections
            .get(hash)
            .map(|list| list.iter().filter_map(|h| self.entries.get(h)).collect())
            .unwrap_or_default()
    }

    /// Invalidations of a replicate, oldest first.
    pub fn invalidations_of(&self, hash: &EntryHash) -> Vec<&CatalogEntry> {
        self.invalidations
            .get(hash)
            .map(|list| list.iter().filter_map(|h| self.entries.get(h)).collect())
            .unwrap_or_default()
    }

    /// The entry of `kind` with this id (the first recorded).
    pub fn find_id(&self, kind: &str, id: &str) -> Option<EntryHash> {
        self.ids.get(&(kind.to_string(), id.to_string())).copied()
    }

    /// Entries that belong to a run, in sequence order.
    pub fn of_run(&self, run: &EntryHash) -> Vec<&CatalogEntry> {
        self.by_run
            .get(run)
            .map(|list| list.iter().filter_map(|h| self.entries.get(h)).collect())
            .unwrap_or_default()
    }

    /// Every entry of a kind, in sequence order.
    pub fn of_kind<'a>(&'a self, kind: &'a str) -> impl Iterator<Item = &'a CatalogEntry> + 'a {
        let mut list: Vec<&CatalogEntry> = self
            .entries
            .values()
            .filter(move |e| e.kind == kind)
            .collect();
        list.sort_by_key(|e| e.seq);
        list.into_iter()
    }

    /// Lab entries that could not be decoded or failed their checks.
    pub fn defects(&self) -> &[Defect] {
        &self.defects
    }
}
