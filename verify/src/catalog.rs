//! The lab's view of a ledger: every lab entry decoded, the latest correction of each entry
//! applied, invalidations noted, and lookups by id and by the run an entry belongs to.
//!
//! Built by streaming the ledger once through its public API: a read of its own (`load`), or
//! the entries an integrity replay reads anyway (`from_replay`), decoded on a thread beside the
//! replay. An entry whose body does not decode to its kind, or fails its own checks, is listed
//! as a defect instead of being used. The original of a corrected entry stays visible
//! (`corrections_of`) for the audit trail. Entries are kept in sequence order and indexed by
//! hash, kind, run and id, so no lookup scans the whole ledger.

use crate::records::{
    check_body, Adoption, Balance, BalanceCheck, Blank, Calibration, Correction, Invalidation,
    LabRecord, OosInvestigation, ReferenceLot, Replicate, ReportedResult, Run, Sample, SignOff,
    StatedValue, Titrant, Titration, Weighing,
};
use assize_ledger::store::Store;
use assize_ledger::{
    codec, Entry, EntryHash, IntegrityReport, Ledger, LedgerError, Record, ReplayOptions, Timestamp,
};
use foldhash::{HashMap, HashMapExt, HashSet};
use std::borrow::Cow;
use std::sync::mpsc::sync_channel;
use std::sync::Arc;

/// Most entries a catalog reserves room for before it reads them (it grows beyond as needed).
const MAX_RESERVED_ENTRIES: usize = 1_000_000;
/// Entries a replay hands to the catalog's decoding thread at a time.
const ENTRIES_PER_HANDOFF: usize = 256;
/// Hand-offs that may wait for the decoding thread before the replay waits for it.
const HANDOFFS_WAITING: usize = 8;

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
    SignOff(SignOff),
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
            k if k == SignOff::KIND => one(body, LabBody::SignOff),
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
    /// Lab entries in the order added (sequence order), so a run's entries sit together.
    entries: Vec<Arc<CatalogEntry>>,
    /// Where the entry stored under each hash is: the latest added, should two rows share a
    /// stored hash (possible only in an altered file).
    slots: HashMap<EntryHash, usize>,
    /// Slots whose hash a later row took over; lists naming them resolve through `slots`.
    replaced: HashSet<usize>,
    /// Slots by kind name; a list, as a ledger has a score of lab kinds at most.
    kinds: Vec<(String, Vec<usize>)>,
    /// Slots of entries with an own id, by id (the kind is checked on lookup), first first.
    ids: HashMap<String, Vec<usize>>,
    by_run: HashMap<EntryHash, Vec<usize>>,
    corrections: HashMap<EntryHash, Vec<usize>>,
    invalidations: HashMap<EntryHash, Vec<usize>>,
    defects: Vec<Defect>,
}

impl Catalog {
    /// An empty catalog with room for `entries` lab entries.
    pub fn with_capacity(entries: usize) -> Catalog {
        Catalog {
            entries: Vec::with_capacity(entries),
            slots: HashMap::with_capacity(entries),
            ..Catalog::default()
        }
    }

    /// Reads every entry of the ledger once, in order.
    pub fn load(store: &Store) -> Result<Catalog, LedgerError> {
        let stored = store.head()?.map_or(0, |head| head.seq);
        let mut catalog = Catalog::with_capacity(reserve_for(stored));
        store.for_each_entry(1, |entry| {
            catalog.add(&entry);
            Ok(true)
        })?;
        Ok(catalog)
    }

    /// Replays the ledger and builds the catalog from the entries the replay reads, so the
    /// file is read once for both. The catalog is only as trustworthy as the report says.
    ///
    /// The replay's walk hands each entry it is done with, in batches, to one thread that
    /// decodes them into the catalog in order, so decoding does not lengthen the walk. The
    /// replay keeps its signature threads (one per core when `options.threads` is 0) and the
    /// decoder shares the cores with them: checking signatures is most of a replay's work, and
    /// one signature thread fewer would leave it to a single core while the walk and the
    /// decoder do not fill the other.
    pub fn from_replay(
        ledger: &Ledger,
        options: &ReplayOptions,
    ) -> Result<(IntegrityReport, Catalog), LedgerError> {
        Catalog::from_replay_reporting(ledger, options, &mut |_| {})
    }

    /// [`Catalog::from_replay`], telling `progress` the sequence number of each batch of
    /// entries the replay has walked (for a progress bar; called on the replay's thread).
    pub fn from_replay_reporting(
        ledger: &Ledger,
        options: &ReplayOptions,
        progress: &mut dyn FnMut(u64),
    ) -> Result<(IntegrityReport, Catalog), LedgerError> {
        let stored = ledger.store().head()?.map_or(0, |head| head.seq);
        let mut catalog = Catalog::with_capacity(reserve_for(stored));
        let (sender, receiver) = sync_channel::<Vec<Entry>>(HANDOFFS_WAITING);
        std::thread::scope(|scope| {
            let decoder = scope.spawn(move || {
                for batch in receiver {
                    for entry in batch {
                        catalog.insert(Prepared::of_owned(entry));
                    }
                }
                catalog
            });
            let mut pending = Vec::with_capacity(ENTRIES_PER_HANDOFF);
            let report = ledger.replay_observed(options, &mut |entry| {
                let seq = entry.seq;
                pending.push(entry);
                if pending.len() == ENTRIES_PER_HANDOFF {
                    progress(seq);
                    let full =
                        std::mem::replace(&mut pending, Vec::with_capacity(ENTRIES_PER_HANDOFF));
                    // The decoder receives until the sender is dropped, so this cannot fail.
                    let _ = sender.send(full);
                }
            });
            let _ = sender.send(pending);
            drop(sender);
            let catalog = match decoder.join() {
                Ok(catalog) => catalog,
                Err(panic) => std::panic::resume_unwind(panic),
            };
            Ok((report?, catalog))
        })
    }

    /// A catalog of only `entries` (taken in sequence order), e.g. what one result depends
    /// on; corrections are in it only if they are among `entries`.
    pub fn subset<'a>(&self, entries: impl IntoIterator<Item = &'a CatalogEntry>) -> Catalog {
        let mut chosen: Vec<&CatalogEntry> = entries.into_iter().collect();
        chosen.sort_by_key(|e| e.seq);
        chosen.dedup_by_key(|e| e.seq);
        let mut subset = Catalog::with_capacity(chosen.len());
        for entry in chosen {
            subset.insert(Prepared::Lab(entry.clone()));
        }
        subset
    }

    /// A catalog of these entries (put in sequence order; a repeated sequence number is kept
    /// once).
    pub fn from_entries(entries: impl IntoIterator<Item = CatalogEntry>) -> Catalog {
        Catalog::from_shared(entries.into_iter().map(Arc::new))
    }

    /// Like [`Catalog::from_entries`], sharing entries held elsewhere instead of copying them.
    pub fn from_shared(entries: impl IntoIterator<Item = Arc<CatalogEntry>>) -> Catalog {
        let mut chosen: Vec<Arc<CatalogEntry>> = entries.into_iter().collect();
        chosen.sort_by_key(|e| e.seq);
        chosen.dedup_by_key(|e| e.seq);
        let mut catalog = Catalog::with_capacity(chosen.len());
        for entry in chosen {
            catalog.insert_shared(entry);
        }
        catalog
    }

    /// Decodes one ledger entry as [`Catalog::add`] would: `Ok(None)` when it is not a lab
    /// entry, `Err` when it is one that cannot be used.
    pub fn decode_entry(entry: Entry) -> Result<Option<CatalogEntry>, Defect> {
        match Prepared::of_owned(entry) {
            Prepared::Lab(entry) => Ok(Some(entry)),
            Prepared::NotLab => Ok(None),
            Prepared::Defect(defect) => Err(defect),
        }
    }

    /// Adds one ledger entry (entries must come in sequence order).
    pub fn add(&mut self, entry: &Entry) {
        self.insert(Prepared::of(entry));
    }

    /// Indexes one decoded entry.
    fn insert(&mut self, prepared: Prepared) {
        match prepared {
            Prepared::Lab(entry) => self.insert_shared(Arc::new(entry)),
            Prepared::Defect(defect) => self.defects.push(defect),
            Prepared::NotLab => {}
        }
    }

    /// Indexes one decoded entry held elsewhere too.
    fn insert_shared(&mut self, entry: Arc<CatalogEntry>) {
        let slot = self.entries.len();
        if let Some(id) = entry.body.id() {
            match self.ids.get_mut(id) {
                Some(slots) => slots.push(slot),
                None => {
                    self.ids.insert(id.to_string(), vec![slot]);
                }
            }
        }
        if let Some(run) = entry.body.run() {
            self.by_run.entry(run).or_default().push(slot);
        }
        match &entry.body {
            LabBody::Correction(c) => self.corrections.entry(c.supersedes).or_default().push(slot),
            LabBody::Invalidation(i) => self
                .invalidations
                .entry(i.replicate)
                .or_default()
                .push(slot),
            _ => {}
        }
        match self.kinds.iter_mut().find(|(kind, _)| *kind == entry.kind) {
            Some((_, list)) => list.push(slot),
            None => self.kinds.push((entry.kind.clone(), vec![slot])),
        }
        if let Some(earlier) = self.slots.insert(entry.hash, slot) {
            self.replaced.insert(earlier);
        }
        self.entries.push(entry);
    }

    /// The entry now stored under the hash of the entry at `slot`.
    fn resolve(&self, slot: usize) -> &CatalogEntry {
        let entry = &self.entries[slot];
        if self.replaced.is_empty() || !self.replaced.contains(&slot) {
            return entry;
        }
        &self.entries[self.slots[&entry.hash]]
    }

    fn resolve_all(&self, slots: Option<&Vec<usize>>) -> Vec<&CatalogEntry> {
        slots
            .map(|list| list.iter().map(|slot| self.resolve(*slot)).collect())
            .unwrap_or_default()
    }

    /// An entry as recorded.
    pub fn entry(&self, hash: &EntryHash) -> Option<&CatalogEntry> {
        self.slots.get(hash).map(|slot| &*self.entries[*slot])
    }

    /// The body now in force: the latest signed correction's replacement, else the original.
    pub fn current(&self, hash: &EntryHash) -> Option<LabBody> {
        self.current_ref(hash).map(Cow::into_owned)
    }

    /// Like [`Catalog::current`], but borrows the original body when no correction replaces
    /// it, so reading an uncorrected entry copies nothing.
    pub fn current_ref(&self, hash: &EntryHash) -> Option<Cow<'_, LabBody>> {
        let original = self.entry(hash)?;
        // An unsigned correction is not attributable: it stays visible (and INT-03 flags it)
        // but never replaces what a person signed.
        let latest = self.corrections.get(hash).and_then(|list| {
            list.iter()
                .rev()
                .map(|slot| self.resolve(*slot))
                .find(|entry| entry.signed)
        });
        if let Some(LabBody::Correction(c)) = latest.map(|entry| &entry.body) {
            if check_body(&c.kind, &c.replacement).is_ok() {
                if let Ok(Some(body)) = LabBody::decode(&c.kind, &c.replacement) {
                    return Some(Cow::Owned(body));
                }
            }
        }
        Some(Cow::Borrowed(&original.body))
    }

    /// The body now in force for an entry this catalog handed out (from [`Catalog::of_run`],
    /// [`Catalog::of_kind`], [`Catalog::entry`]): the same as [`Catalog::current_ref`] of its
    /// hash, without looking the entry up again.
    pub fn current_of<'a>(&'a self, entry: &'a CatalogEntry) -> Cow<'a, LabBody> {
        if self.corrections.contains_key(&entry.hash) {
            if let Some(body) = self.current_ref(&entry.hash) {
                return body;
            }
        }
        Cow::Borrowed(&entry.body)
    }

    /// Whether any correction is in the catalog (signed or not).
    pub fn has_corrections(&self) -> bool {
        !self.corrections.is_empty()
    }

    /// Corrections of an entry, oldest first.
    pub fn corrections_of(&self, hash: &EntryHash) -> Vec<&CatalogEntry> {
        self.resolve_all(self.corrections.get(hash))
    }

    /// Invalidations of a replicate, oldest first.
    pub fn invalidations_of(&self, hash: &EntryHash) -> Vec<&CatalogEntry> {
        self.resolve_all(self.invalidations.get(hash))
    }

    /// The entry of `kind` with this id (the first recorded).
    pub fn find_id(&self, kind: &str, id: &str) -> Option<EntryHash> {
        self.ids
            .get(id)?
            .iter()
            .map(|slot| &self.entries[*slot])
            .find(|entry| entry.kind == kind)
            .map(|entry| entry.hash)
    }

    /// Entries that belong to a run, in sequence order.
    pub fn of_run(&self, run: &EntryHash) -> Vec<&CatalogEntry> {
        self.resolve_all(self.by_run.get(run))
    }

    /// Every entry of a kind, in sequence order.
    pub fn of_kind<'a>(&'a self, kind: &'a str) -> impl Iterator<Item = &'a CatalogEntry> + 'a {
        let mut list: Vec<&CatalogEntry> = self
            .kinds
            .iter()
            .find(|(name, _)| name == kind)
            .map(|(_, slots)| slots.as_slice())
            .unwrap_or_default()
            .iter()
            .filter(|slot| self.replaced.is_empty() || !self.replaced.contains(slot))
            .map(|slot| &*self.entries[*slot])
            .collect();
        // Entries are added in sequence order, so this only checks, unless a caller did not.
        if !list.is_sorted_by_key(|e| e.seq) {
            list.sort_by_key(|e| e.seq);
        }
        list.into_iter()
    }

    /// Every lab entry as recorded, in the order added.
    pub fn entries(&self) -> &[Arc<CatalogEntry>] {
        &self.entries
    }

    /// Lab entries that could not be decoded or failed their checks.
    pub fn defects(&self) -> &[Defect] {
        &self.defects
    }
}

/// Room to reserve for a ledger of `stored` entries (most of a lab's are lab entries).
fn reserve_for(stored: u64) -> usize {
    usize::try_from(stored)
        .unwrap_or(usize::MAX)
        .min(MAX_RESERVED_ENTRIES)
}

/// One ledger entry decoded for the catalog, ready to be indexed.
// Nearly every value is the large variant, moved straight into the catalog; boxing it would
// only add an allocation per entry.
#[allow(clippy::large_enum_variant)]
enum Prepared {
    Lab(CatalogEntry),
    Defect(Defect),
    NotLab,
}

impl Prepared {
    /// Decodes a borrowed entry.
    fn of(entry: &Entry) -> Prepared {
        match LabBody::decode(&entry.kind, &entry.body) {
            Ok(Some(body)) => Prepared::Lab(CatalogEntry {
                seq: entry.seq,
                hash: entry.hash,
                kind: entry.kind.clone(),
                author: entry.author.clone(),
                record_time: entry.record_time,
                signed: entry.signature.is_some(),
                body,
            }),
            Ok(None) => Prepared::NotLab,
            Err(reason) => Prepared::Defect(Defect {
                seq: entry.seq,
                kind: entry.kind.clone(),
                reason,
            }),
        }
    }

    /// Decodes an entry that is no longer needed, taking its texts instead of copying them.
    fn of_owned(entry: Entry) -> Prepared {
        match LabBody::decode(&entry.kind, &entry.body) {
            Ok(Some(body)) => Prepared::Lab(CatalogEntry {
                seq: entry.seq,
                hash: entry.hash,
                kind: entry.kind,
                author: entry.author,
                record_time: entry.record_time,
                signed: entry.signature.is_some(),
                body,
            }),
            Ok(None) => Prepared::NotLab,
            Err(reason) => Prepared::Defect(Defect {
                seq: entry.seq,
                kind: entry.kind,
                reason,
            }),
        }
    }
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;
    use crate::correction::correction_draft;
    use crate::intake::{draft, Batch, Input};
    use crate::records::{DocumentKind, Run, Weighing};
    use assize_ledger::records::Enrolment;
    use assize_ledger::{codec, FixedClock, Role, Signer, Timestamp};
    use std::sync::Arc;

    /// The founder (QA) and an analyst of the test lab, with fixed keys.
    pub(crate) fn signers() -> (Signer, Signer) {
        (
            Signer::from_secret("qa-1", &[41; 32]),
            Signer::from_secret("analyst-1", &[42; 32]),
        )
    }

    /// Appends `inputs` signed by `signer` in one batch, resolving ids as the CLI does.
    pub(crate) fn record(ledger: &mut Ledger, signer: &Signer, inputs: &[Input]) -> Vec<Entry> {
        let mut catalog = Catalog::load(ledger.store()).expect("catalog");
        let author = signer.person().to_string();
        ledger
            .append_batch(inputs.len(), Some(signer), |i, earlier| {
                if let Some(previous) = earlier.last() {
                    catalog.add(previous);
                }
                draft(&inputs[i], &catalog, &author).map_err(|reason| LedgerError::BadInput {
                    what: inputs[i].kind().into(),
                    reason,
                })
            })
            .expect("records append")
    }

    /// The shipped permanganate method and lab policy, adopted by the test ledger.
    pub(crate) const METHOD_TEXT: &str = include_str!("../../policies/permanganate-peroxide.toml");
    pub(crate) const POLICY_TEXT: &str = include_str!("../../policies/lab-policy.toml");
    /// Ids of the test batch's runs, titrant and sample.
    pub(crate) const STANDARDIZATION_ID: &str = "STD-T-01";
    pub(crate) const ASSAY_ID: &str = "AS-T-01";
    pub(crate) const TITRANT_ID: &str = "KMN-T-01";
    pub(crate) const SAMPLE_ID: &str = "HP-T-01";

    /// The ids the shipped method and policy give themselves.
    pub(crate) fn document_ids() -> (String, String) {
        let method = crate::documents::Method::parse(METHOD_TEXT).expect("shipped method");
        let policy = crate::documents::LabPolicy::parse(POLICY_TEXT).expect("shipped policy");
        (method.id, policy.id)
    }

    /// One invented standardization and one assay, three replicates each, titrant weighed.
    fn test_batch() -> Batch {
        let (method, policy) = document_ids();
        let mut text = format!(
            r#"
[[record]]
kind = "balance"
id = "BT-1"
description = "test balance"
readability = "0.0001 g"
capacity = "220 g"
minimum_weight = "0.0820 g"

[[record]]
kind = "calibration"
balance = "BT-1"
certificate = "CAL-T-1"
performed_on = "2026-03-02"
due_on = "2027-03-02"
passed = true
repeatability_sd = "0.00004 g"
sensitivity_relative_u = "0.000005"

[[record]]
kind = "reference-lot"
id = "NOX-T-01"
substance = "sodium oxalate"
formula = "Na2C2O4"
purity = "0.99965"
purity_expanded_u = "0.00024"
coverage_factor = "2"
certificate = "RM-T-1"
valid_until = "2027-06-30"
drying = "2 h at 110 C"

[[record]]
kind = "titrant"
id = "{TITRANT_ID}"
formula = "KMnO4"
nominal_concentration = "0.02"
prepared_on = "2026-11-16"
valid_until = "2027-02-16"

[[record]]
kind = "sample"
id = "{SAMPLE_ID}"
description = "hydrogen peroxide about 30 %"
received_at = "2026-11-20T14:05:00Z"

[[record]]
kind = "run"
id = "{STANDARDIZATION_ID}"
run_kind = "standardization"
method = "{method}"
policy = "{policy}"
titrant = "{TITRANT_ID}"
reference_lot = "NOX-T-01"
started_at = "2026-11-23T08:10:00Z"

[[record]]
kind = "run"
id = "{ASSAY_ID}"
run_kind = "assay"
method = "{method}"
policy = "{policy}"
titrant = "{TITRANT_ID}"
sample = "{SAMPLE_ID}"
standardization = "{STANDARDIZATION_ID}"
started_at = "2026-11-23T10:05:00Z"
"#
        );
        let replicates = [
            (
                STANDARDIZATION_ID,
                "primary-standard",
                ["18.4127", "18.1616", "17.9129", "17.6599"],
                [
                    ("112.5321", "75.1201"),
                    ("75.1201", "38.0650"),
                    ("114.0877", "76.3859"),
                ],
            ),
            (
                ASSAY_ID,
                "sample",
                ["9.8842", "9.7340", "9.5843", "9.4332"],
                [
                    ("110.9410", "84.6100"),
                    ("84.6100", "58.3692"),
                    ("111.7725", "85.2804"),
                ],
            ),
        ];
        for (run, portion, vessel, titrant) in replicates {
            for number in 1..=3 {
                let (first, second) = (vessel[number - 1], vessel[number]);
                let (before, after) = titrant[number - 1];
                text.push_str(&format!(
                    r#"
[[record]]
kind = "weighing"
run = "{run}"
replicate = {number}
portion = "{portion}"
balance = "BT-1"
mode = "by-difference"
first = "{first} g"
first_at = "2026-11-23T11:0{number}:00Z"
second = "{second} g"
second_at = "2026-11-23T11:0{number}:30Z"

[[record]]
kind = "weighing"
run = "{run}"
replicate = {number}
portion = "titrant"
balance = "BT-1"
mode = "by-difference"
first = "{before} g"
first_at = "2026-11-23T11:1{number}:00Z"
second = "{after} g"
second_at = "2026-11-23T11:1{number}:30Z"

[[record]]
kind = "replicate"
run = "{run}"
number = {number}
endpoint = "faint pink persisting 30 s"
"#
                ));
            }
        }
        Batch::parse(&text).expect("test batch")
    }

    /// A ledger with the shipped permanganate method and lab policy adopted and an invented
    /// batch (one standardization, one assay) entered.
    pub(crate) fn sample_ledger() -> (tempfile::TempDir, Ledger) {
        let dir = tempfile::tempdir().expect("temp dir");
        let (qa, analyst) = signers();
        let clock = Arc::new(FixedClock::new(Timestamp(1_795_000_000_000_000), 1_000_000));
        let (mut ledger, _) = Ledger::create(
            &dir.path().join("lab.ledger"),
            "Catalog Test Lab",
            "QA Officer One",
            &qa,
            crate::kind_rules(),
            clock,
        )
        .expect("create");
        let enrolment = Enrolment {
            person: analyst.person().into(),
            name: "Analyst One".into(),
            role: Role::Analyst,
            public_key: analyst.public_key(),
        };
        ledger.append_record(&enrolment, &qa).expect("enrol");
        let adoptions = [
            (DocumentKind::Method, METHOD_TEXT),
            (DocumentKind::Policy, POLICY_TEXT),
        ]
        .map(|(document, text)| Input::Adopt {
            document,
            file: None,
            text: Some(text.into()),
        });
        record(&mut ledger, &qa, &adoptions);
        record(&mut ledger, &analyst, &test_batch().record);
        (dir, ledger)
    }

    fn listing(catalog: &Catalog, kind: &str) -> Vec<(u64, EntryHash)> {
        catalog.of_kind(kind).map(|e| (e.seq, e.hash)).collect()
    }

    #[test]
    fn from_replay_builds_the_catalog_load_builds_and_an_intact_report() {
        let (_dir, ledger) = sample_ledger();
        let loaded = Catalog::load(ledger.store()).expect("load");
        for threads in [0, 1, 3] {
            let options = ReplayOptions {
                threads,
                ..ReplayOptions::default()
            };
            let (report, replayed) = Catalog::from_replay(&ledger, &options).expect("replay");
            assert!(report.intact(), "{:?}", report.problems);
            assert_eq!(replayed.entries, loaded.entries);
            assert_eq!(replayed.defects(), loaded.defects());
            for kind in [Run::KIND, Weighing::KIND, "lab.adopt", "lab.replicate"] {
                assert_eq!(listing(&replayed, kind), listing(&loaded, kind), "{kind}");
            }
            let run = replayed
                .find_id(Run::KIND, STANDARDIZATION_ID)
                .expect("run");
            assert_eq!(replayed.of_run(&run), loaded.of_run(&run));
        }
    }

    #[test]
    fn of_kind_lists_every_entry_of_the_kind_in_sequence_order() {
        let (_dir, ledger) = sample_ledger();
        let catalog = Catalog::load(ledger.store()).expect("load");
        let weighings = listing(&catalog, Weighing::KIND);
        assert_eq!(weighings.len(), 12);
        assert!(weighings.windows(2).all(|w| w[0].0 < w[1].0));
        assert_eq!(listing(&catalog, Run::KIND).len(), 2);
        assert!(listing(&catalog, "lab.no-such-kind").is_empty());
    }

    #[test]
    fn current_of_borrows_an_uncorrected_body_and_applies_a_correction() {
        let (_dir, mut ledger) = sample_ledger();
        let (_, analyst) = signers();
        let catalog = Catalog::load(ledger.store()).expect("load");
        let first = catalog.of_kind(Weighing::KIND).next().expect("a weighing");
        assert!(matches!(
            catalog.current_ref(&first.hash),
            Some(Cow::Borrowed(_))
        ));
        assert!(matches!(catalog.current_of(first), Cow::Borrowed(_)));
        let original = first.hash;
        let changes = [("second".to_string(), "18.1617 g".to_string())];
        ledger
            .append_batch(1, Some(&analyst), |_, _| {
                correction_draft(
                    &catalog,
                    original,
                    &changes,
                    "transposed digits",
                    "analyst-1",
                )
                .map_err(|reason| LedgerError::BadInput {
                    what: "correction".into(),
                    reason,
                })
            })
            .expect("correction appends");
        let corrected = Catalog::load(ledger.store()).expect("load");
        let entry = corrected.entry(&original).expect("still there");
        let Cow::Owned(LabBody::Weighing(w)) = corrected.current_of(entry) else {
            panic!("the correction's replacement is in force");
        };
        assert_eq!(w.second.value, "18.1617");
        assert_eq!(corrected.current(&original), Some(LabBody::Weighing(w)));
        assert!(matches!(entry.body, LabBody::Weighing(ref o) if o.second.value == "18.1616"));

        // The same correction without a signature (as only a foreign writer could store it)
        // stays listed but is not in force.
        let mut unsigned: Vec<CatalogEntry> =
            corrected.entries().iter().map(|e| (**e).clone()).collect();
        for e in unsigned.iter_mut().filter(|e| e.kind == Correction::KIND) {
            e.signed = false;
        }
        let unsigned = Catalog::from_entries(unsigned);
        assert_eq!(unsigned.corrections_of(&original).len(), 1);
        assert!(matches!(
            unsigned.current(&original),
            Some(LabBody::Weighing(ref o)) if o.second.value == "18.1616"
        ));
    }

    #[test]
    fn a_later_row_stored_under_the_same_hash_takes_its_place_in_every_list() {
        let (_dir, ledger) = sample_ledger();
        let loaded = Catalog::load(ledger.store()).expect("load");
        let run = loaded.find_id(Run::KIND, ASSAY_ID).expect("run");
        let weighing = loaded
            .of_run(&run)
            .into_iter()
            .find(|e| e.kind == Weighing::KIND)
            .expect("a weighing")
            .clone();
        let LabBody::Weighing(mut altered) = weighing.body.clone() else {
            panic!("a weighing");
        };
        altered.second.value = "9.7341".into();
        let mut catalog = Catalog::default();
        let mut copy_of_weighing = None;
        ledger
            .store()
            .for_each_entry(1, |entry| {
                catalog.add(&entry);
                if entry.hash == weighing.hash {
                    copy_of_weighing = Some(entry);
                }
                Ok(true)
            })
            .expect("read");
        // An altered file: a later row carries the weighing's stored hash with other contents.
        let mut row = copy_of_weighing.expect("the weighing row");
        row.seq = 1_000;
        row.body = codec::encode(&altered).expect("encode");
        catalog.add(&row);
        let in_force = catalog.entry(&weighing.hash).expect("entry");
        assert_eq!(in_force.seq, 1_000);
        let weighings = listing(&catalog, Weighing::KIND);
        assert_eq!(weighings.len(), 12);
        assert_eq!(weighings.last(), Some(&(1_000, weighing.hash)));
        let of_run = catalog.of_run(&run);
        assert!(of_run.iter().all(|e| e.seq != weighing.seq));
        assert_eq!(of_run.iter().filter(|e| e.seq == 1_000).count(), 2);
    }
}
