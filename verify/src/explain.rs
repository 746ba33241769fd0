//! Where one reported value came from: the run's result recomputed, with every replicate,
//! every raw reading behind it, the balance's calibration and routine check at that moment,
//! the materials and documents it relied on, and the standardization it used, down to the
//! same depth. Each entry comes with who recorded it, when, the state of its signature and
//! every correction of it (old and new values, reason, who).
//!
//! Everything is read through the ledger's indexes (an entry by sequence number or hash, the
//! entries that name a hash, entries of one kind from a sequence number on), never by walking
//! the chain, so one value is explained in milliseconds however long the ledger is. The
//! numbers come from the same engine as `replay` ([`crate::assemble::Recomputer`]) over a small
//! catalog of the entries gathered. This module reads only; it judges nothing (the findings
//! are `replay`'s).

use crate::assemble::Recomputer;
use crate::catalog::{Catalog, CatalogEntry, LabBody};
use crate::exceptions::{changes, FieldChange};
use crate::indexed::IndexedEntries;
use crate::recompute::Outcome;
use crate::records::{BalanceCheck, Calibration, Correction, Run, RunKind, Weighing};
use crate::rules::day_of;
use assize_ledger::signing::{signed_message, verify_strict};
use assize_ledger::{Entry, EntryHash, Ledger, LedgerError, Record, Registry, Timestamp};
use chrono::NaiveDate;
use serde::Serialize;
use std::collections::{BTreeMap, BTreeSet, HashMap};
use std::sync::Arc;

/// Which value to explain.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Target {
    /// The run with this id (its result).
    RunId(String),
    /// The run an entry belongs to (the run entry itself, its result, a weighing, …).
    Entry(u64),
}

/// Why a value could not be explained.
#[derive(Debug)]
pub enum ExplainError {
    /// The ledger could not be read.
    Ledger(LedgerError),
    /// Nothing matches the target.
    NotFound(String),
}

impl std::fmt::Display for ExplainError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            ExplainError::Ledger(e) => write!(f, "{e}"),
            ExplainError::NotFound(what) => write!(f, "{what}"),
        }
    }
}

impl std::error::Error for ExplainError {}

impl From<LedgerError> for ExplainError {
    fn from(e: LedgerError) -> Self {
        ExplainError::Ledger(e)
    }
}

/// The state of an entry's signature.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum SignatureState {
    /// Signed with a key enrolled for the author, and the signature verifies.
    Verified,
    /// Not signed (the kind allows it).
    Unsigned,
    /// The signature or the entry's hash does not verify.
    Broken,
    /// Signed with a key the registry does not give to the author.
    NotTheAuthorsKey,
}

/// One correction of an entry, as the auditor reads it.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct CorrectionStep {
    /// The correction entry.
    pub seq: u64,
    /// Who corrected.
    pub author: String,
    /// When (RFC 3339, UTC).
    pub recorded_at: String,
    /// Whether it is signed (an unsigned correction is never in force).
    pub signed: bool,
    /// The reason given.
    pub reason: String,
    /// Each changed field: before and after this correction.
    pub changes: Vec<FieldChange>,
}

/// One entry with its provenance.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Provenance {
    /// Sequence number.
    pub seq: u64,
    /// Entry hash (hex).
    pub hash: String,
    /// Kind name.
    pub kind: String,
    /// Author.
    pub author: String,
    /// Record time (RFC 3339, UTC).
    pub recorded_at: String,
    /// Signature state.
    pub signature: SignatureState,
    /// What the entry says now (its latest signed correction applied), in one line.
    pub says: String,
    /// Its corrections, oldest first.
    pub corrections: Vec<CorrectionStep>,
}

/// A balance as it stood when a portion was weighed on it.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct BalanceAtUse {
    /// The balance record.
    pub balance: Provenance,
    /// The calibration in force on the day of use (the latest performed on or before it).
    pub calibration: Option<Provenance>,
    /// Whether that calibration passed and was not yet due on the day.
    pub calibration_valid_then: bool,
    /// The routine checks of that day recorded before the weighing, with their verdict.
    pub checks: Vec<Provenance>,
}

/// One weighing behind a replicate.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct WeighingStep {
    /// The weighing entry (its readings in `says`).
    pub entry: Provenance,
    /// Net mass, grams, exactly as computed from the two readings.
    pub net_g: String,
    /// The balance used, at that moment.
    pub balance: BalanceAtUse,
}

/// One replicate and what it was computed from.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ReplicateStep {
    /// Replicate number.
    pub number: u32,
    /// Its recomputed value, when it counts.
    pub value: Option<f64>,
    /// The formula with this replicate's numbers in it.
    pub substituted: Option<String>,
    /// Weighings of this replicate.
    pub weighings: Vec<WeighingStep>,
    /// Titrations, the replicate entry and any invalidation, in sequence order.
    pub entries: Vec<Provenance>,
}

/// One run explained.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct RunExplained {
    /// The run entry.
    pub run: Provenance,
    /// Run id.
    pub id: String,
    /// Standardization or assay.
    pub kind: RunKind,
    /// The formula, in symbols.
    pub formula: String,
    /// The recomputed outcome (mean, SD, replicates, budget, reported value), or why not.
    pub recomputed: Result<Outcome, String>,
    /// The result and the values the analyst stated, as recorded.
    pub results: Vec<Provenance>,
    /// Each replicate, in number order.
    pub replicates: Vec<ReplicateStep>,
    /// Titrant, sample, reference lot.
    pub materials: Vec<Provenance>,
    /// Method and policy adoptions.
    pub documents: Vec<Provenance>,
    /// Sign-offs and investigations naming the run.
    pub statements: Vec<Provenance>,
    /// The standardization the assay relied on.
    pub standardization: Option<Box<RunExplained>>,
}

/// The whole explanation.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Explanation {
    /// Ledger head when explained.
    pub head_seq: u64,
    /// Its hash (hex).
    pub head_hash: String,
    /// The run and everything under it.
    pub run: RunExplained,
    /// Every entry the explanation shows, by sequence number (for tests and bundles).
    pub entries: Vec<u64>,
}

/// Explains the value of `target`.
pub fn explain(ledger: &mut Ledger, target: &Target) -> Result<Explanation, ExplainError> {
    let head = ledger
        .head()?
        .ok_or_else(|| ExplainError::NotFound("the ledger is empty".into()))?;
    let registry = ledger.registry()?.clone();
    explain_in(ledger.store(), (head.seq, head.hash), registry, target)
}

/// Explains the value of `target` from `entries` (a ledger's store, or an evidence bundle's
/// entries), whose head is `head` (sequence number and hash) and whose registry of people and
/// keys is `registry`.
pub fn explain_in(
    entries: &dyn IndexedEntries,
    head: (u64, EntryHash),
    registry: Registry,
    target: &Target,
) -> Result<Explanation, ExplainError> {
    let run = find_run(entries, target)?;
    let mut reader = Reader {
        entries,
        registry,
        read: HashMap::new(),
        shown: BTreeSet::new(),
    };
    let explained = reader.run(&run, true)?;
    Ok(Explanation {
        head_seq: head.0,
        head_hash: head.1.to_hex(),
        run: explained,
        entries: reader.shown.into_iter().collect(),
    })
}

/// The lab entry at `seq`, or why there is none.
fn lab_entry_at(entries: &dyn IndexedEntries, seq: u64) -> Result<Arc<CatalogEntry>, ExplainError> {
    let entry = entries
        .entry_at(seq)?
        .ok_or_else(|| ExplainError::NotFound(format!("there is no entry {seq}")))?;
    decoded(entry).ok_or_else(|| ExplainError::NotFound(format!("entry {seq} is not a lab entry")))
}

/// The run entry a target names.
fn find_run(
    entries: &dyn IndexedEntries,
    target: &Target,
) -> Result<Arc<CatalogEntry>, ExplainError> {
    match target {
        Target::Entry(seq) => {
            let entry = lab_entry_at(entries, *seq)?;
            let run_hash = match &entry.body {
                LabBody::Run(_) => return Ok(entry),
                body => body.run().ok_or_else(|| {
                    ExplainError::NotFound(format!(
                        "entry {seq} ({}) belongs to no run; name a run, a result or a weighing",
                        entry.kind
                    ))
                })?,
            };
            let seq = entries
                .seq_with_hash(&run_hash)?
                .ok_or_else(|| ExplainError::NotFound(format!("run {run_hash} is missing")))?;
            lab_entry_at(entries, seq)
                .map_err(|_| ExplainError::NotFound(format!("entry {seq} is not a run")))
        }
        Target::RunId(id) => run_by_id(entries, id),
    }
}

/// The run recorded with `id`: through the label index when it has the id (each hit checked
/// against the entry's own body), else by reading the run entries in order (the first
/// recorded with that id).
pub(crate) fn run_by_id(
    entries: &dyn IndexedEntries,
    id: &str,
) -> Result<Arc<CatalogEntry>, ExplainError> {
    for seq in entries.labelled(Run::KIND, id)?.unwrap_or_default() {
        if let Some(lab) = entries.entry_at(seq)?.and_then(decoded) {
            if matches!(&lab.body, LabBody::Run(r) if r.id == id) {
                return Ok(lab);
            }
        }
    }
    run_by_reading_runs(entries, id)
}

fn run_by_reading_runs(
    entries: &dyn IndexedEntries,
    id: &str,
) -> Result<Arc<CatalogEntry>, ExplainError> {
    const PAGE: usize = 4096;
    let mut after = 0;
    loop {
        let page = entries.of_kind_between(Run::KIND, after, u64::MAX, PAGE)?;
        let full = page.len() == PAGE;
        for entry in page {
            after = entry.seq;
            if let Some(lab) = decoded(entry) {
                if matches!(&lab.body, LabBody::Run(r) if r.id == id) {
                    return Ok(lab);
                }
            }
        }
        if !full {
            return Err(ExplainError::NotFound(format!(
                "the ledger has no run {id:?}"
            )));
        }
    }
}

pub(crate) fn decoded(entry: Entry) -> Option<Arc<CatalogEntry>> {
    Catalog::decode_entry(entry).ok().flatten().map(Arc::new)
}

/// Reads entries by index, remembering what it read and what it showed.
struct Reader<'l> {
    entries: &'l dyn IndexedEntries,
    registry: Registry,
    /// Every lab entry read, decoded, by sequence number.
    read: HashMap<u64, Arc<CatalogEntry>>,
    /// The entries shown (with their provenance), and the corrections shown under them.
    shown: BTreeSet<u64>,
}

impl Reader<'_> {
    /// Reads the lab entry at `seq` (once).
    fn at(&mut self, seq: u64) -> Result<Option<Arc<CatalogEntry>>, ExplainError> {
        if let Some(entry) = self.read.get(&seq) {
            return Ok(Some(Arc::clone(entry)));
        }
        let Some(entry) = self.entries.entry_at(seq)?.and_then(decoded) else {
            return Ok(None);
        };
        self.read.insert(seq, Arc::clone(&entry));
        Ok(Some(entry))
    }

    /// Reads the entry stored under `hash`.
    fn by_hash(&mut self, hash: &EntryHash) -> Result<Option<Arc<CatalogEntry>>, ExplainError> {
        match self.entries.seq_with_hash(hash)? {
            Some(seq) => self.at(seq),
            None => Ok(None),
        }
    }

    /// The entries that name `hash`, in sequence order.
    fn naming(&mut self, hash: &EntryHash) -> Result<Vec<Arc<CatalogEntry>>, ExplainError> {
        let mut found = Vec::new();
        for seq in self.entries.naming(hash)? {
            found.extend(self.at(seq)?);
        }
        Ok(found)
    }

    /// The corrections of an entry, oldest first (through the kind index: corrections are
    /// few, whatever else names the entry).
    fn corrections_of(&mut self, hash: &EntryHash) -> Result<Vec<Arc<CatalogEntry>>, ExplainError> {
        let mut found = Vec::new();
        for seq in self.entries.of_kind_naming(Correction::KIND, hash)? {
            if let Some(e) = self.at(seq)? {
                if matches!(&e.body, LabBody::Correction(c) if c.supersedes == *hash) {
                    found.push(e);
                }
            }
        }
        Ok(found)
    }

    /// The body of an entry now in force: its latest signed correction's replacement, else
    /// the body as recorded.
    fn current_body(&mut self, entry: &CatalogEntry) -> Result<LabBody, ExplainError> {
        let latest = self
            .corrections_of(&entry.hash)?
            .into_iter()
            .filter(|c| c.signed)
            .filter_map(|c| match &c.body {
                LabBody::Correction(k) => LabBody::decode(&k.kind, &k.replacement).ok().flatten(),
                _ => None,
            })
            .last();
        Ok(latest.unwrap_or_else(|| entry.body.clone()))
    }

    /// The corrections shown under `shown`, as read (for the catalog a recompute uses).
    fn corrections_shown(&self, shown: &Provenance) -> Vec<Arc<CatalogEntry>> {
        shown
            .corrections
            .iter()
            .filter_map(|c| self.read.get(&c.seq).cloned())
            .collect()
    }

    /// An entry with its corrections, as shown.
    fn provenance(&mut self, entry: &CatalogEntry) -> Result<Provenance, ExplainError> {
        let corrections = self.corrections_of(&entry.hash)?;
        let mut before = entry.body.clone();
        let mut steps = Vec::new();
        let mut now = entry.body.clone();
        for c in &corrections {
            let LabBody::Correction(correction) = &c.body else {
                continue;
            };
            let after = LabBody::decode(&correction.kind, &correction.replacement)
                .ok()
                .flatten();
            steps.push(CorrectionStep {
                seq: c.seq,
                author: c.author.clone(),
                recorded_at: c.record_time.to_string(),
                signed: c.signed,
                reason: correction.reason.clone(),
                changes: changes(Some(&before), after.as_ref()),
            });
            if let (Some(after), true) = (after, c.signed) {
                before = after.clone();
                now = after;
            }
        }
        let stored = self.entries.entry_at(entry.seq)?.ok_or_else(|| {
            ExplainError::NotFound(format!("entry {} is no longer there", entry.seq))
        })?;
        let signature = signature_state(&stored, &self.registry);
        self.shown.insert(entry.seq);
        self.shown.extend(steps.iter().map(|c| c.seq));
        Ok(Provenance {
            seq: entry.seq,
            hash: entry.hash.to_hex(),
            kind: entry.kind.clone(),
            author: entry.author.clone(),
            recorded_at: entry.record_time.to_string(),
            signature,
            says: says(&now),
            corrections: steps,
        })
    }

    /// Explains the run `run` (with its standardization when `deep`).
    fn run(&mut self, run: &Arc<CatalogEntry>, deep: bool) -> Result<RunExplained, ExplainError> {
        let run = self.at(run.seq)?.unwrap_or_else(|| Arc::clone(run));
        let run_prov = self.provenance(&run)?;
        let LabBody::Run(body) = self.current_body(&run)? else {
            return Err(ExplainError::NotFound(format!(
                "entry {} is not a run",
                run.seq
            )));
        };
        let members = self.naming(&run.hash)?;
        let mut gathered: Vec<Arc<CatalogEntry>> = vec![Arc::clone(&run)];
        let mut documents = Vec::new();
        for hash in [body.method, body.policy] {
            if let Some(e) = self.by_hash(&hash)? {
                let shown = self.provenance(&e)?;
                gathered.extend(self.corrections_shown(&shown));
                documents.push(shown);
                gathered.push(e);
            }
        }
        let mut materials = Vec::new();
        for hash in [Some(body.titrant), body.sample, body.reference_lot]
            .into_iter()
            .flatten()
        {
            if let Some(e) = self.by_hash(&hash)? {
                materials.push(self.provenance(&e)?);
                gathered.extend(self.corrections_of(&hash)?);
                gathered.push(e);
            }
        }
        let mut statements = Vec::new();
        let mut results = Vec::new();
        let mut replicate_entries: BTreeMap<u32, Vec<Arc<CatalogEntry>>> = BTreeMap::new();
        for m in &members {
            gathered.push(Arc::clone(m));
            for naming in self.naming(&m.hash)? {
                gathered.push(naming);
            }
            match &m.body {
                LabBody::Result(_) | LabBody::Stated(_) => results.push(self.provenance(m)?),
                LabBody::SignOff(_) | LabBody::Oos(_) => statements.push(self.provenance(m)?),
                LabBody::Weighing(w) => replicate_entries
                    .entry(w.replicate)
                    .or_default()
                    .push(Arc::clone(m)),
                LabBody::Titration(t) => replicate_entries
                    .entry(t.replicate)
                    .or_default()
                    .push(Arc::clone(m)),
                LabBody::Replicate(r) => replicate_entries
                    .entry(r.number)
                    .or_default()
                    .push(Arc::clone(m)),
                _ => {}
            }
        }
        let standardization = match (deep, body.standardization) {
            (true, Some(std_hash)) => match self.by_hash(&std_hash)? {
                Some(std_run) => {
                    let explained = self.run(&std_run, false)?;
                    Some(Box::new(explained))
                }
                None => None,
            },
            _ => None,
        };
        // Balances: the calibration in force and the day's checks, for each weighing.
        let mut replicates = Vec::new();
        let mut balance_records: Vec<Arc<CatalogEntry>> = Vec::new();
        for (number, entries) in &replicate_entries {
            let mut weighings = Vec::new();
            let mut others = Vec::new();
            for e in entries {
                let current = self.provenance(e)?;
                match self.current_body(e)? {
                    LabBody::Weighing(w) => {
                        let balance = self.balance_at(&w, e.seq, &mut balance_records)?;
                        weighings.push(WeighingStep {
                            entry: current,
                            net_g: w.net_grams().normalize().to_string(),
                            balance,
                        });
                    }
                    _ => {
                        others.push(current);
                        for i in self.naming(&e.hash)? {
                            if matches!(i.body, LabBody::Invalidation(_)) {
                                others.push(self.provenance(&i)?);
                            }
                        }
                    }
                }
            }
            replicates.push(ReplicateStep {
                number: *number,
                value: None,
                substituted: None,
                weighings,
                entries: others,
            });
        }
        gathered.extend(balance_records);
        if let Some(std) = &standardization {
            for seq in std_seqs(std) {
                if let Some(e) = self.read.get(&seq) {
                    gathered.push(Arc::clone(e));
                }
            }
        }
        let catalog = Catalog::from_shared(gathered);
        let recomputed = Recomputer::new(&catalog).run(run.hash).map(|r| r.outcome);
        let std_outcome = standardization
            .as_ref()
            .and_then(|s| s.recomputed.as_ref().ok());
        // The titrant is weighed when concentrations are per kilogram of solution.
        let concentration_unit = match body.kind {
            RunKind::Standardization => recomputed.as_ref().ok().map(|o| o.unit.as_str()),
            RunKind::Assay => std_outcome.map(|o| o.unit.as_str()),
        };
        let titrant_by_mass = concentration_unit == Some("mol/kg");
        if let Ok(outcome) = &recomputed {
            for step in &mut replicates {
                if let Some(v) = outcome.replicates.iter().find(|v| v.number == step.number) {
                    step.value = Some(v.value);
                    step.substituted = Some(substituted(
                        body.kind,
                        v,
                        std_outcome.map(|o| (o.mean, o.unit.as_str())),
                        &outcome.unit,
                        titrant_by_mass,
                    ));
                }
            }
        }
        Ok(RunExplained {
            run: run_prov,
            id: body.id.clone(),
            kind: body.kind,
            formula: formula(body.kind, titrant_by_mass).to_string(),
            recomputed,
            results,
            replicates,
            materials,
            documents,
            statements,
            standardization,
        })
    }

    /// The balance of a weighing as it stood at `seq`: its record, the calibration in force
    /// on the day, the checks that day before the weighing.
    fn balance_at(
        &mut self,
        w: &Weighing,
        seq: u64,
        records: &mut Vec<Arc<CatalogEntry>>,
    ) -> Result<BalanceAtUse, ExplainError> {
        let day = day_of(w.first_at);
        let balance_entry = self
            .by_hash(&w.balance)?
            .ok_or_else(|| ExplainError::NotFound(format!("balance {} is missing", w.balance)))?;
        let balance = self.provenance(&balance_entry)?;
        records.extend(self.corrections_shown(&balance));
        records.push(balance_entry);
        let calibration = self.calibration_in_force(&w.balance, day, seq)?;
        let (calibration, calibration_valid_then) = match calibration {
            Some((entry, c)) => {
                let valid = c.passed && parse_day(&c.due_on).is_some_and(|due| due >= day);
                let shown = self.provenance(&entry)?;
                records.extend(self.corrections_shown(&shown));
                records.push(entry);
                (Some(shown), valid)
            }
            None => (None, false),
        };
        let mut checks = Vec::new();
        for entry in self.checks_before(&w.balance, day, w.first_at, seq)? {
            let shown = self.provenance(&entry)?;
            records.extend(self.corrections_shown(&shown));
            checks.push(shown);
            records.push(entry);
        }
        Ok(BalanceAtUse {
            balance,
            calibration,
            calibration_valid_then,
            checks,
        })
    }

    /// The calibration of `balance` performed last on or before `day`, among those recorded
    /// before `seq` (calibrations are few: all of them are read through the kind index).
    fn calibration_in_force(
        &mut self,
        balance: &EntryHash,
        day: NaiveDate,
        seq: u64,
    ) -> Result<Option<(Arc<CatalogEntry>, Calibration)>, ExplainError> {
        let mut best: Option<(NaiveDate, Arc<CatalogEntry>, Calibration)> = None;
        for entry in self.of_kind_between(Calibration::KIND, 0, seq)? {
            let LabBody::Calibration(c) = &entry.body else {
                continue;
            };
            let Some(performed) = parse_day(&c.performed_on) else {
                continue;
            };
            if c.balance != *balance || performed > day {
                continue;
            }
            if best.as_ref().is_none_or(|(d, _, _)| performed >= *d) {
                best = Some((performed, Arc::clone(&entry), c.clone()));
            }
        }
        Ok(best.map(|(_, e, c)| (e, c)))
    }

    /// Routine checks of `balance` observed on `day` no later than `at` and recorded before
    /// `seq`: read backwards through the check index in growing steps until the day is passed.
    fn checks_before(
        &mut self,
        balance: &EntryHash,
        day: NaiveDate,
        at: Timestamp,
        seq: u64,
    ) -> Result<Vec<Arc<CatalogEntry>>, ExplainError> {
        let mut span = 512u64;
        loop {
            let from = seq.saturating_sub(span);
            let candidates = self.of_kind_between(BalanceCheck::KIND, from, seq)?;
            let earliest_day = candidates.iter().find_map(|e| match &e.body {
                LabBody::BalanceCheck(c) => Some(day_of(c.observed_at)),
                _ => None,
            });
            let reached_back = from == 0 || earliest_day.is_some_and(|d| d < day);
            if reached_back {
                return Ok(candidates
                    .into_iter()
                    .filter(|e| {
                        matches!(&e.body, LabBody::BalanceCheck(c)
                            if c.balance == *balance && day_of(c.observed_at) == day && c.observed_at <= at)
                    })
                    .collect());
            }
            span = span.saturating_mul(4);
        }
    }

    /// Entries of `kind` with `from < seq < to`, through the kind index.
    fn of_kind_between(
        &mut self,
        kind: &str,
        from: u64,
        to: u64,
    ) -> Result<Vec<Arc<CatalogEntry>>, ExplainError> {
        const PAGE: usize = 1024;
        let mut found = Vec::new();
        let mut after = from;
        loop {
            let page = self.entries.of_kind_between(kind, after, to, PAGE)?;
            let full = page.len() == PAGE;
            for entry in page {
                after = entry.seq;
                found.extend(decoded(entry));
            }
            if !full {
                return Ok(found);
            }
        }
    }
}

/// The sequence numbers a run explanation shows, with the corrections shown under each
/// (so a catalog rebuilt from them recomputes the run exactly as its own explanation did).
fn std_seqs(run: &RunExplained) -> Vec<u64> {
    let mut shown: Vec<&Provenance> = vec![&run.run];
    shown.extend(&run.results);
    shown.extend(&run.materials);
    shown.extend(&run.documents);
    shown.extend(&run.statements);
    for r in &run.replicates {
        shown.extend(&r.entries);
        for w in &r.weighings {
            shown.push(&w.entry);
            shown.push(&w.balance.balance);
            shown.extend(&w.balance.calibration);
            shown.extend(&w.balance.checks);
        }
    }
    shown
        .into_iter()
        .flat_map(|p| std::iter::once(p.seq).chain(p.corrections.iter().map(|c| c.seq)))
        .collect()
}

fn parse_day(text: &str) -> Option<NaiveDate> {
    NaiveDate::parse_from_str(text, "%Y-%m-%d").ok()
}

/// Whether the stored entry is what it claims: hash, signature, key of the author.
pub(crate) fn signature_state(entry: &Entry, registry: &Registry) -> SignatureState {
    let (Some(key), Some(signature)) = (entry.signer, entry.signature) else {
        return SignatureState::Unsigned;
    };
    if entry.compute_hash() != entry.hash
        || !verify_strict(&key, &signed_message(&entry.hash), &signature)
    {
        return SignatureState::Broken;
    }
    match registry.owner_of(&key) {
        Some(owner) if owner == entry.author => SignatureState::Verified,
        _ => SignatureState::NotTheAuthorsKey,
    }
}

/// The model of each run kind, in symbols: `t` is the titrant delivered less any blank, in
/// grams when the titrant is weighed (c in mol/kg), in millilitres when it is measured by
/// volume (c in mol/L).
fn formula(kind: RunKind, titrant_by_mass: bool) -> &'static str {
    match (kind, titrant_by_mass) {
        (RunKind::Standardization, true) => {
            "c = m(std) × P / M(std) × (ν titrant / ν std) / (t / 1000)   [t in g, c in mol/kg]"
        }
        (RunKind::Standardization, false) => {
            "c = m(std) × P / M(std) × (ν titrant / ν std) / (t / 1000)   [t in mL, c in mol/L]"
        }
        (RunKind::Assay, true) => {
            "w = c × t / 1000 × (ν analyte / ν titrant) × M(analyte) / m(sample) × 100   [t in g]"
        }
        (RunKind::Assay, false) => {
            "w = c × t / 1000 × (ν analyte / ν titrant) × M(analyte) / m(sample) × 100   [t in mL]"
        }
    }
}

/// One replicate's formula with its numbers.
fn substituted(
    kind: RunKind,
    value: &crate::recompute::ReplicateValue,
    standardization: Option<(f64, &str)>,
    unit: &str,
    titrant_by_mass: bool,
) -> String {
    let t_unit = if titrant_by_mass { "g" } else { "mL" };
    match kind {
        RunKind::Standardization => format!(
            "m(std) = {} g, t = {} {t_unit} → c = {:.6} {unit}",
            value.portion_g.normalize(),
            value.titrant_net.normalize(),
            value.value
        ),
        RunKind::Assay => format!(
            "c = {}, t = {} {t_unit}, m(sample) = {} g → w = {:.4} {unit}",
            standardization.map_or("?".into(), |(c, u)| format!("{c:.6} {u}")),
            value.titrant_net.normalize(),
            value.portion_g.normalize(),
            value.value
        ),
    }
}

/// What a body says, in one line.
pub(crate) fn says(body: &LabBody) -> String {
    match body {
        LabBody::Adoption(a) => format!("{:?} {} version {}", a.document, a.id, a.version),
        LabBody::Balance(b) => format!(
            "balance {} (d = {}, min. weight {})",
            b.id, b.readability, b.minimum_weight
        ),
        LabBody::Calibration(c) => format!(
            "calibration {} performed {}, due {}, {}",
            c.certificate,
            c.performed_on,
            c.due_on,
            if c.passed { "passed" } else { "FAILED" }
        ),
        LabBody::BalanceCheck(c) => format!(
            "check with {} ({}): read {} at {}",
            c.test_weight, c.reference_mass, c.reading, c.observed_at
        ),
        LabBody::ReferenceLot(l) => format!(
            "reference lot {} of {}: purity {} (U {}, k {}), certificate {}, valid until {}",
            l.id,
            l.substance,
            l.purity,
            l.purity_expanded_u,
            l.coverage_factor,
            l.certificate,
            l.valid_until
        ),
        LabBody::Titrant(t) => format!(
            "titrant {} ({} nominal {}), prepared {}, valid until {}",
            t.id, t.formula, t.nominal_concentration, t.prepared_on, t.valid_until
        ),
        LabBody::Sample(s) => format!("sample {}: {}", s.id, s.description),
        LabBody::Run(r) => format!("run {} ({:?}), started {}", r.id, r.kind, r.started_at),
        LabBody::Weighing(w) => format!(
            "replicate {} {:?}: {} at {} then {} at {} ({:?}, {})",
            w.replicate,
            w.portion,
            w.first,
            w.first_at,
            w.second,
            w.second_at,
            w.source,
            if w.stable { "stable" } else { "UNSTABLE" }
        ),
        LabBody::Titration(t) => format!(
            "replicate {}{}: burette {} from {} to {} at {}",
            t.replicate,
            if t.blank { " (blank)" } else { "" },
            t.burette,
            t.initial,
            t.final_reading,
            t.read_at
        ),
        LabBody::Replicate(r) => {
            format!("replicate {} complete (end point {})", r.number, r.endpoint)
        }
        LabBody::Blank(_) => "blank".into(),
        LabBody::Stated(s) => format!("stated {:?} = {} {}", s.quantity, s.value, s.unit),
        LabBody::Result(r) => format!(
            "reported {} ± {} {}",
            r.value, r.expanded_uncertainty, r.unit
        ),
        LabBody::Correction(c) => format!("correction of a {}: {}", c.kind, c.reason),
        LabBody::Invalidation(i) => format!("replicate invalidated: {}", i.cause),
        LabBody::Oos(o) => format!(
            "out-of-specification investigation {}: {}",
            o.id, o.description
        ),
        LabBody::SignOff(s) => format!("sign-off ({:?}): {}", s.meaning, s.comment),
    }
}
