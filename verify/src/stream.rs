//! Validation in one streaming pass, with memory that does not grow with the ledger.
//!
//! The integrity replay walks the chain; each entry it has judged is handed, in batches, to a
//! thread that decodes it and files it: a run's entries (its weighings, replicates, stated
//! values, results, and the corrections, invalidations, sign-offs and investigations that name
//! them) go into the run's bucket; adoptions, balances with their calibrations and checks, and
//! materials (reference lots, titrants, samples) go into small tables. When the walk is
//! `window` entries past a run, the run is judged: a small catalog of the run, the
//! standardization it relies on and what both depend on is built, recomputed, and every rule
//! is applied to it exactly as [`crate::validate::validate`] applies them to the whole
//! catalog; the findings about that run are kept and the bucket is dropped.
//!
//! What arrives for a run after it was judged (a late correction, a sign-off months later) is
//! noticed when the walk reaches it; the run, and the assays relying on it if it is a
//! standardization, are judged again at the end from the ledger's indexes. Materials not used
//! for a window are dropped and read back by index when needed. The few rules that look across
//! runs are kept apart: failed balance checks and what was weighed since the last passing one
//! (`BAL-04`, `BAL-05`), late routine checks (`TIM-01`), corrections of records outside runs
//! without a reason (`CHG-02`), retests after an out-of-specification result (`OOS-02`) and
//! readings reused across runs (`PAT-02`, compared within the most recent
//! `fingerprint_horizon` weighings). Memory is bounded by the window, the horizon and the
//! tables of balances and documents, not by the number of entries.
//!
//! The judging thread shares the cores with the replay's walk and all of its signature
//! threads (one per core, as in a plain replay). Checking signatures is most of the work: with
//! one signature thread fewer, that thread alone would set the pace while the walk and the
//! judge left part of the other core idle.

use crate::assemble::{DocumentMemory, Recomputer};
use crate::catalog::{Catalog, CatalogEntry, Defect, LabBody};
use crate::conformance::Decision;
use crate::findings::{sort, Code, EntryRef, Finding, Tally};
use crate::records::{Run, RunKind, Weighing};
use crate::rules::{self, adopted_documents, entry_ref, integrity, Adopted, Evidence};
use crate::validate::{summarize, RunSummary, Scope, ValidateError, Validation};
use assize_ledger::store::Store;
use assize_ledger::{
    Entry, EntryHash, IntegrityReport, Ledger, LedgerError, OpenMode, Record, ReplayOptions,
    Timestamp,
};
use chrono::NaiveDate;
use foldhash::{HashMap, HashMapExt, HashSet, HashSetExt};
use std::borrow::Cow;
use std::collections::{BTreeMap, BTreeSet, VecDeque};
use std::hash::{Hash, Hasher};
use std::sync::mpsc::sync_channel;
use std::sync::Arc;

/// A decoded lab entry, shared between the tables and the small catalogs built from them.
type Shared = Arc<CatalogEntry>;

/// Entries the replay hands over at a time.
const ENTRIES_PER_HANDOFF: usize = 256;
/// Room a run's bucket starts with: a run with three replicates has about a dozen entries.
const ENTRIES_PER_RUN: usize = 16;
/// Hand-offs that may wait for the judging thread.
const HANDOFFS_WAITING: usize = 8;
/// Standardizations kept after they were judged, for the assays that rely on them.
const STANDARDIZATIONS_KEPT: usize = 256;

/// How far the streaming validation looks back.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct StreamOptions {
    /// A run is judged when the walk is this many entries past it.
    pub window: u64,
    /// Weighings whose readings are remembered for `PAT-02`.
    pub fingerprint_horizon: usize,
    /// Runs judged together on one small catalog once they are all past the window (1 judges
    /// each run on its own as soon as it is): what runs share (documents, materials, the
    /// standardization, balance records) is then gathered once for all of them.
    pub runs_per_judgement: usize,
}

impl Default for StreamOptions {
    fn default() -> Self {
        StreamOptions {
            window: 20_000,
            fingerprint_horizon: 32_768,
            runs_per_judgement: 32,
        }
    }
}

/// The codes only the cross-run stage gives (a run's own judgement leaves them out).
const CROSS_RUN: [Code; 3] = [
    Code::WeighedBeforeFailedCheck,
    Code::RetestBeforeInvestigation,
    Code::ReadingReused,
];

/// Validates the ledger in one streaming pass (see the module text).
pub fn validate_streaming(
    ledger: &Ledger,
    scope: &Scope,
    options: &ReplayOptions,
    stream: &StreamOptions,
    progress: &mut dyn FnMut(u64),
) -> Result<Validation, ValidateError> {
    let store = Store::open(ledger.store().path(), OpenMode::ReadOnly)?;
    let (sender, receiver) = sync_channel::<Vec<Entry>>(HANDOFFS_WAITING);
    let (report, judged) = std::thread::scope(|threads| {
        let judge = threads.spawn(move || {
            let mut state = Stream::new(store, scope.clone(), *stream);
            for batch in receiver {
                for entry in batch {
                    state.take(entry)?;
                }
            }
            state.finish()
        });
        let mut pending = Vec::with_capacity(ENTRIES_PER_HANDOFF);
        let report = ledger.replay_observed(options, &mut |entry| {
            let seq = entry.seq;
            pending.push(entry);
            if pending.len() == ENTRIES_PER_HANDOFF {
                progress(seq);
                let full = std::mem::replace(&mut pending, Vec::with_capacity(ENTRIES_PER_HANDOFF));
                // The judging thread receives until the sender is dropped.
                let _ = sender.send(full);
            }
        });
        let _ = sender.send(pending);
        drop(sender);
        let judged = match judge.join() {
            Ok(judged) => judged,
            Err(panic) => std::panic::resume_unwind(panic),
        };
        (report, judged)
    });
    let report = report?;
    let judged = judged?;
    finish_validation(ledger, scope, report, judged)
}

/// What the judging thread hands back.
struct Judged {
    defects: Vec<Defect>,
    findings: Vec<Finding>,
    runs: Vec<RunSummary>,
    runs_checked: usize,
    scope_found: bool,
}

fn finish_validation(
    ledger: &Ledger,
    scope: &Scope,
    integrity_report: IntegrityReport,
    judged: Judged,
) -> Result<Validation, ValidateError> {
    if !judged.scope_found && *scope != Scope::Ledger {
        return Err(ValidateError::UnknownScope(match scope {
            Scope::Run(id) => format!("the ledger has no run {id:?}"),
            Scope::Sample(id) => format!("the ledger has no run on sample {id:?}"),
            Scope::Ledger => unreachable!(),
        }));
    }
    let hash_of = |seq: u64| ledger.entry(seq).ok().map(|e| e.hash);
    let mut findings = integrity::findings(&integrity_report, &judged.defects, &hash_of);
    findings.extend(judged.findings.into_iter().filter(|f| match scope {
        Scope::Ledger => true,
        Scope::Run(id) => f.run.as_deref() == Some(id.as_str()),
        Scope::Sample(id) => f.sample.as_deref() == Some(id.as_str()),
    }));
    sort(&mut findings);
    let tally = Tally::of(&findings);
    Ok(Validation {
        scope: scope.clone(),
        head: integrity_report.head,
        integrity: integrity_report,
        runs: judged.runs,
        runs_checked: judged.runs_checked,
        findings,
        tally,
    })
}

/// A run's entries while the walk is within the window of it.
struct Bucket {
    run: EntryHash,
    entries: Vec<Shared>,
}

/// A balance and what is recorded about it.
#[derive(Default)]
struct BalanceRecords {
    /// The balance entry and its calibrations, with corrections of any of them.
    entries: Vec<Shared>,
    /// Recent routine checks and corrections of checks, in the order walked (older ones are
    /// read back by index when needed).
    checks: Vec<Shared>,
    /// The sequence number of every check by UTC day of observation (as recorded and as
    /// corrected): sixteen bytes a check, the only thing kept of old checks.
    checks_by_day: CheckIndex,
    /// When each calibration among `entries` was performed, as recorded.
    performed: Vec<(NaiveDate, u64, EntryHash)>,
    /// Sequence numbers of the checks that have a correction (every correction of a check
    /// is filed here as it is walked), so an uncorrected old check is read back alone.
    corrected_checks: HashSet<u64>,
}

/// Sequence numbers of routine checks by UTC day, as one sorted list of (day, sequence
/// number) pairs: a check appears under the day it was observed and, once corrected, under the
/// corrected day too.
#[derive(Default)]
struct CheckIndex {
    pairs: Vec<(NaiveDate, u64)>,
}

impl CheckIndex {
    /// Files `seq` under `day` (once).
    fn insert(&mut self, day: NaiveDate, seq: u64) {
        let pair = (day, seq);
        // Checks mostly come in day order, so this is mostly a push.
        if self.pairs.last().is_none_or(|last| *last < pair) {
            self.pairs.push(pair);
        } else if let Err(at) = self.pairs.binary_search(&pair) {
            self.pairs.insert(at, pair);
        }
    }

    /// The checks filed under `day`, in sequence order.
    fn on(&self, day: NaiveDate) -> impl Iterator<Item = u64> + '_ {
        let from = self.pairs.partition_point(|(d, _)| *d < day);
        self.pairs[from..]
            .iter()
            .take_while(move |(d, _)| *d == day)
            .map(|(_, seq)| *seq)
    }

    /// The days `seq` is filed under.
    fn days_of(&self, seq: u64) -> Vec<NaiveDate> {
        self.pairs
            .iter()
            .filter(|(_, s)| *s == seq)
            .map(|(day, _)| *day)
            .collect()
    }

    /// Every check filed, once each, in sequence order.
    fn seqs(&self) -> Vec<u64> {
        let mut seqs: Vec<u64> = self.pairs.iter().map(|(_, seq)| *seq).collect();
        seqs.sort_unstable();
        seqs.dedup();
        seqs
    }
}

impl BalanceRecords {
    /// The balance entry, every correction, and the calibrations in force on any of `days`
    /// (the latest performed on or before the day; a calibration that was corrected is always
    /// included, so the choice is made on its corrected date).
    fn in_force(&self, days: impl Iterator<Item = NaiveDate>) -> Vec<Shared> {
        let corrected: HashSet<EntryHash> = self
            .entries
            .iter()
            .filter_map(|e| match &e.body {
                LabBody::Correction(c) => Some(c.supersedes),
                _ => None,
            })
            .collect();
        let mut chosen: HashSet<EntryHash> = HashSet::new();
        for day in days {
            let latest = self.performed.iter().filter(|(p, _, _)| *p <= day).max();
            if let Some((_, _, hash)) = latest {
                chosen.insert(*hash);
            }
        }
        self.entries
            .iter()
            .filter(|e| match &e.body {
                LabBody::Calibration(_) => chosen.contains(&e.hash) || corrected.contains(&e.hash),
                _ => true,
            })
            .cloned()
            .collect()
    }
}

/// A lot, titrant or sample, with its corrections.
struct Material {
    entries: Vec<Shared>,
    last_used: u64,
}

/// A failed routine check, for `BAL-05` at the end.
struct FailedCheck {
    balance: EntryHash,
    check: EntryRef,
    at: Timestamp,
    since: Timestamp,
    since_seq: u64,
}

/// What judging one run leaves for the tables kept across runs.
struct JudgedRun {
    run: EntryHash,
    run_seq: u64,
    /// Each weighing's entry, balance and day, and reading fingerprint.
    weighings: Vec<(EntryRef, (EntryHash, NaiveDate), u64)>,
    /// The run, when its result does not conform.
    failing: Option<Failing>,
    /// Its findings and summary, when it is in scope.
    judged: Option<(Vec<Finding>, RunSummary)>,
    /// A standardization's own entries, kept for the assays that rely on it.
    own_entries: Option<Vec<Shared>>,
}

/// A failing assay, for `OOS-02` at the end.
struct Failing {
    run_seq: u64,
    run_id: String,
    sample: EntryHash,
    investigation_seq: u64,
}

/// The judging thread's state.
struct Stream {
    store: Store,
    scope: Scope,
    options: StreamOptions,
    walked: u64,
    adoptions: Vec<Shared>,
    adopted: HashMap<EntryHash, Arc<Adopted>>,
    balances: HashMap<EntryHash, BalanceRecords>,
    /// Which balance a calibration or check entry belongs to.
    balance_of: HashMap<EntryHash, EntryHash>,
    materials: HashMap<EntryHash, Material>,
    buckets: BTreeMap<u64, Bucket>,
    /// Bucket (run sequence number) of every entry in a bucket.
    owner: HashMap<EntryHash, u64>,
    /// Standardizations already judged, newest last.
    standardizations: VecDeque<(EntryHash, Arc<Vec<Shared>>)>,
    /// Runs to judge again at the end.
    again: BTreeSet<EntryHash>,
    defects: Vec<Defect>,
    cross_run: Vec<Finding>,
    failing: BTreeMap<u64, Failing>,
    /// Runs already judged that weighed on a balance on a day (recent days only), to judge
    /// again when a check or calibration for that day arrives late.
    runs_by_balance_day: BTreeMap<(EntryHash, NaiveDate), Vec<EntryHash>>,
    fingerprints: HashMap<u64, (u64, EntryRef)>,
    fingerprint_order: VecDeque<u64>,
    reused: BTreeMap<u64, Vec<(u64, EntryRef)>>,
    /// Findings and summary of each run judged with findings (every run judged, when the
    /// scope is one run or sample, or while `keep_every_summary` is set).
    judged: BTreeMap<u64, (Vec<Finding>, RunSummary)>,
    /// Runs in scope judged at least once.
    runs_checked: usize,
    keep_every_summary: bool,
    scope_found: bool,
    memory: Option<DocumentMemory>,
}

impl Stream {
    fn new(store: Store, scope: Scope, options: StreamOptions) -> Stream {
        Stream {
            store,
            scope,
            options,
            walked: 0,
            adoptions: Vec::new(),
            adopted: HashMap::new(),
            balances: HashMap::new(),
            balance_of: HashMap::new(),
            materials: HashMap::new(),
            buckets: BTreeMap::new(),
            // The two tables with steady turnover are made big enough up front that deleted
            // slots never make them grow (a hash table grows when it is over half full of
            // live entries and out of free slots): their size then depends on the window and
            // the horizon, never on how long the ledger is.
            owner: HashMap::with_capacity(2 * (options.window.min(1 << 20) as usize)),
            standardizations: VecDeque::new(),
            again: BTreeSet::new(),
            defects: Vec::new(),
            cross_run: Vec::new(),
            failing: BTreeMap::new(),
            runs_by_balance_day: BTreeMap::new(),
            fingerprints: HashMap::with_capacity(2 * options.fingerprint_horizon.min(1 << 22)),
            fingerprint_order: VecDeque::new(),
            reused: BTreeMap::new(),
            judged: BTreeMap::new(),
            runs_checked: 0,
            keep_every_summary: false,
            scope_found: false,
            memory: Some(DocumentMemory::default()),
        }
    }

    /// Files one walked entry, then judges the runs the window has left behind.
    fn take(&mut self, entry: Entry) -> Result<(), LedgerError> {
        self.walked = entry.seq;
        match Catalog::decode_entry(entry) {
            Err(defect) => self.defects.push(defect),
            Ok(None) => {}
            Ok(Some(lab)) => self.file(Arc::new(lab))?,
        }
        let batch = self.options.runs_per_judgement.max(1);
        while let Some(cutoff) = (self.walked + 1).checked_sub(self.options.window) {
            // Buckets of runs with `seq + window <= walked`, once there are enough of them.
            if self.buckets.range(..cutoff).take(batch).count() < batch {
                break;
            }
            let due = self.take_buckets(batch);
            self.judge_runs(due, true)?;
        }
        if self.walked % self.options.window.clamp(1, 4096) == 0 {
            let horizon = self.walked.saturating_sub(self.options.window);
            // Rebuilt rather than thinned in place, for the same reason.
            self.materials = std::mem::take(&mut self.materials)
                .into_iter()
                .filter(|(_, m)| m.last_used >= horizon)
                .collect();
            // Checks are kept two windows, so the runs still being judged find theirs.
            let check_horizon = self.walked.saturating_sub(2 * self.options.window);
            for records in self.balances.values_mut() {
                for old in records.checks.iter().filter(|c| c.seq < check_horizon) {
                    self.balance_of.remove(&old.hash);
                }
                records.checks.retain(|c| c.seq >= check_horizon);
            }
        }
        Ok(())
    }

    /// Puts a lab entry where it belongs.
    fn file(&mut self, entry: Shared) -> Result<(), LedgerError> {
        let target = match &entry.body {
            LabBody::Adoption(_) => {
                self.adoptions.push(entry);
                self.adopted = adopted_documents(&Catalog::from_shared(self.adoptions.clone()));
                return Ok(());
            }
            LabBody::Balance(_) => {
                let hash = entry.hash;
                self.balances.entry(hash).or_default().entries.push(entry);
                return Ok(());
            }
            LabBody::Calibration(c) => {
                self.balance_of.insert(entry.hash, c.balance);
                let balance = c.balance;
                let from = NaiveDate::parse_from_str(&c.performed_on, "%Y-%m-%d").ok();
                let records = self.balances.entry(balance).or_default();
                if let Some(day) = from {
                    records.performed.push((day, entry.seq, entry.hash));
                }
                records.entries.push(entry);
                self.judge_again_after(balance, from);
                return Ok(());
            }
            LabBody::BalanceCheck(_) => return self.file_check(entry),
            LabBody::ReferenceLot(_) | LabBody::Titrant(_) | LabBody::Sample(_) => {
                self.materials.insert(
                    entry.hash,
                    Material {
                        entries: vec![entry],
                        last_used: self.walked,
                    },
                );
                return Ok(());
            }
            LabBody::Run(r) => {
                for hash in [Some(r.titrant), r.reference_lot, r.sample]
                    .into_iter()
                    .flatten()
                {
                    if let Some(m) = self.materials.get_mut(&hash) {
                        m.last_used = self.walked;
                    }
                }
                let entry_seq = entry.seq;
                self.owner.insert(entry.hash, entry_seq);
                let run = entry.hash;
                let mut entries = Vec::with_capacity(ENTRIES_PER_RUN);
                entries.push(entry);
                self.buckets.insert(entry_seq, Bucket { run, entries });
                return Ok(());
            }
            LabBody::Correction(c) => c.supersedes,
            LabBody::Invalidation(i) => i.replicate,
            LabBody::SignOff(s) => s.subject,
            LabBody::Oos(o) => o.subject,
            other => other.run().expect("every other lab kind belongs to a run"),
        };
        if let Some(&bucket) = self.owner.get(&target) {
            self.owner.insert(entry.hash, bucket);
            if let Some(b) = self.buckets.get_mut(&bucket) {
                b.entries.push(entry);
            }
            return Ok(());
        }
        if let LabBody::Correction(c) = &entry.body {
            if self.file_outside_runs(&entry, c.supersedes) {
                return Ok(());
            }
        }
        // Something about a run already judged: judge it again at the end.
        if let Some(run) = self.run_of_stored(&target, 0)? {
            self.again.insert(run);
        }
        Ok(())
    }

    /// A correction of an adoption, balance record or material; `CHG-02` when it has no
    /// reason. False when the corrected entry is none of those.
    fn file_outside_runs(&mut self, entry: &Shared, target: EntryHash) -> bool {
        let filed = if let Some(m) = self.materials.get_mut(&target) {
            m.entries.push(entry.clone());
            self.judge_again_naming(&target);
            true
        } else if let Some(b) = self.balances.get_mut(&target) {
            b.entries.push(entry.clone());
            self.judge_again_after(target, None);
            true
        } else if let Some(&balance) = self.balance_of.get(&target) {
            let records = self.balances.entry(balance).or_default();
            let is_check = records.checks.iter().any(|c| c.hash == target);
            if is_check {
                self.file_check_correction(balance, target, entry);
            } else {
                records.entries.push(entry.clone());
                self.judge_again_after(balance, None);
            }
            true
        } else if self.adoptions.iter().any(|a| a.hash == target) {
            self.adoptions.push(entry.clone());
            true
        } else if let Ok(Some(old)) = self.load(&target) {
            match &old.body {
                LabBody::BalanceCheck(k) => {
                    let balance = k.balance;
                    self.file_check_correction(balance, target, entry);
                    true
                }
                _ => self.store_material_correction(entry, target),
            }
        } else {
            false
        };
        if filed {
            if let LabBody::Correction(c) = &entry.body {
                let corrected_seq = self.seq_of(&target).unwrap_or(0);
                if let Some(finding) =
                    rules::changes::without_reason(&entry.author, corrected_seq, c)
                {
                    self.cross_run.push(
                        finding.involving([entry_ref(entry)]).involving(
                            self.seq_of(&target)
                                .map(|seq| EntryRef { seq, hash: target }),
                        ),
                    );
                }
            }
        }
        filed
    }

    /// A correction of a material the window no longer holds: read the material back.
    fn store_material_correction(&mut self, entry: &Shared, target: EntryHash) -> bool {
        match self.load(&target) {
            Ok(Some(found))
                if matches!(
                    found.body,
                    LabBody::ReferenceLot(_) | LabBody::Titrant(_) | LabBody::Sample(_)
                ) =>
            {
                let mut entries = self.load_with_corrections(found).unwrap_or_default();
                if !entries.iter().any(|e| e.hash == entry.hash) {
                    entries.push(entry.clone());
                }
                self.materials.insert(
                    target,
                    Material {
                        entries,
                        last_used: self.walked,
                    },
                );
                self.judge_again_naming(&target);
                true
            }
            _ => false,
        }
    }

    fn seq_of(&self, hash: &EntryHash) -> Option<u64> {
        self.store.seq_of_hash(hash).ok().flatten()
    }

    /// A routine balance check, filed by its day of observation; a run already judged that
    /// weighed on that balance that day is judged again at the end. The check's own findings
    /// (`BAL-04`, `TIM-01`) are made at the end, with its corrections applied.
    fn file_check(&mut self, entry: Shared) -> Result<(), LedgerError> {
        let LabBody::BalanceCheck(check) = &entry.body else {
            unreachable!("called for checks")
        };
        self.balance_of.insert(entry.hash, check.balance);
        let balance = check.balance;
        let day = rules::day_of(check.observed_at);
        let records = self.balances.entry(balance).or_default();
        records.checks_by_day.insert(day, entry.seq);
        records.checks.push(entry);
        self.judge_again_on(balance, day);
        Ok(())
    }

    /// A correction of a routine check: kept with the recent checks, filed under the day it
    /// gives as well, and the runs of both days judged again.
    fn file_check_correction(&mut self, balance: EntryHash, target: EntryHash, entry: &Shared) {
        let Some(target_seq) = self.seq_of(&target) else {
            return;
        };
        let records = self.balances.entry(balance).or_default();
        records.checks.push(entry.clone());
        records.corrected_checks.insert(target_seq);
        let mut days: Vec<NaiveDate> = records.checks_by_day.days_of(target_seq);
        if let LabBody::Correction(c) = &entry.body {
            if let Ok(Some(LabBody::BalanceCheck(k))) = LabBody::decode(&c.kind, &c.replacement) {
                let day = rules::day_of(k.observed_at);
                records.checks_by_day.insert(day, target_seq);
                days.push(day);
            }
        }
        for day in days {
            self.judge_again_on(balance, day);
        }
    }

    /// Runs already judged that weighed on `balance` on `day` are judged again at the end.
    fn judge_again_on(&mut self, balance: EntryHash, day: NaiveDate) {
        if let Some(runs) = self.runs_by_balance_day.get(&(balance, day)) {
            self.again.extend(runs.iter().copied());
        }
    }

    /// Runs already judged that weighed on `balance` on or after `from` (every day when
    /// `None`) are judged again at the end.
    fn judge_again_after(&mut self, balance: EntryHash, from: Option<NaiveDate>) {
        let from = from.unwrap_or(NaiveDate::MIN);
        for ((b, day), runs) in &self.runs_by_balance_day {
            if *b == balance && *day >= from {
                self.again.extend(runs.iter().copied());
            }
        }
    }

    /// Runs already judged that name `material` are judged again at the end.
    fn judge_again_naming(&mut self, material: &EntryHash) {
        let Ok(naming) = self.naming(material) else {
            return;
        };
        for e in naming {
            if matches!(e.body, LabBody::Run(_)) && !self.owner.contains_key(&e.hash) {
                self.again.insert(e.hash);
            }
        }
    }

    /// A balance's checks observed on `day`, with every correction of them: from memory when
    /// recent, else read back by index.
    fn checks_on(&self, balance: &EntryHash, day: NaiveDate) -> Result<Vec<Shared>, LedgerError> {
        let Some(records) = self.balances.get(balance) else {
            return Ok(Vec::new());
        };
        let mut found = Vec::new();
        for seq in records.checks_by_day.on(day) {
            found.extend(self.check_with_corrections(records, seq)?);
        }
        Ok(found)
    }

    /// One check and its corrections.
    fn check_with_corrections(
        &self,
        records: &BalanceRecords,
        seq: u64,
    ) -> Result<Vec<Shared>, LedgerError> {
        // `checks` is in walk order, so by sequence number, and a correction comes after what
        // it corrects.
        if let Ok(at) = records.checks.binary_search_by_key(&seq, |c| c.seq) {
            let check = &records.checks[at];
            let mut found = vec![Arc::clone(check)];
            if records.corrected_checks.contains(&seq) {
                found.extend(
                    records.checks[at + 1..]
                        .iter()
                        .filter(|c| {
                            matches!(&c.body, LabBody::Correction(k) if k.supersedes == check.hash)
                        })
                        .cloned(),
                );
            }
            return Ok(found);
        }
        let Some(entry) = self.store.entry(seq)? else {
            return Ok(Vec::new());
        };
        match Catalog::decode_entry(entry) {
            Ok(Some(found)) if records.corrected_checks.contains(&seq) => {
                self.load_with_corrections(Arc::new(found))
            }
            Ok(Some(found)) => Ok(vec![Arc::new(found)]),
            _ => Ok(Vec::new()),
        }
    }

    /// `BAL-04` and `TIM-01` of every routine check, corrections applied, each judged by the
    /// policy adopted most recently before it, a few hundred checks at a time in the order they
    /// were observed; returns the checks that failed, each with the last passing check before
    /// it.
    fn judge_checks(&mut self) -> Result<Vec<FailedCheck>, LedgerError> {
        const CHECKS_AT_A_TIME: usize = 256;
        let mut failed = Vec::new();
        let balances: Vec<EntryHash> = self.balances.keys().copied().collect();
        for balance in balances {
            let records = &self.balances[&balance];
            // Every check once, by its time of observation as corrected.
            let seqs = records.checks_by_day.seqs();
            let mut order: Vec<(Timestamp, u64, EntryHash)> = Vec::new();
            for seq in seqs {
                let entries = self.check_with_corrections(records, seq)?;
                let Some(hash) = entries.iter().find(|e| e.seq == seq).map(|e| e.hash) else {
                    continue;
                };
                if let Some(LabBody::BalanceCheck(c)) = current_body(&entries, &hash).as_deref() {
                    order.push((c.observed_at, seq, hash));
                }
            }
            order.sort();
            let mut last_pass: Option<(Timestamp, u64)> = None;
            for chunk in order.chunks(CHECKS_AT_A_TIME) {
                let records = &self.balances[&balance];
                let mut entries = self.adoptions.clone();
                entries.extend(
                    records
                        .entries
                        .iter()
                        .filter(|e| !matches!(e.body, LabBody::Calibration(_)))
                        .cloned(),
                );
                for (_, seq, _) in chunk {
                    entries.extend(self.check_with_corrections(records, *seq)?);
                }
                let catalog = Catalog::from_shared(entries);
                let evidence = Evidence::with_documents(&catalog, self.adopted.clone(), Vec::new());
                let mut findings = Vec::new();
                rules::balances::check(&evidence, &mut findings);
                rules::timeliness::check(&evidence, &mut findings);
                let failing: HashSet<EntryHash> = findings
                    .iter()
                    .filter(|f| f.code == Code::BalanceCheckFailed)
                    .flat_map(|f| f.entries.iter().map(|e| e.hash))
                    .collect();
                for (at, seq, hash) in chunk {
                    if failing.contains(hash) {
                        let (since, since_seq) = last_pass.unwrap_or((Timestamp(i64::MIN), 0));
                        failed.push(FailedCheck {
                            balance,
                            check: EntryRef {
                                seq: *seq,
                                hash: *hash,
                            },
                            at: *at,
                            since,
                            since_seq,
                        });
                    } else {
                        last_pass = Some((*at, *seq));
                    }
                }
                self.cross_run.extend(
                    findings
                        .into_iter()
                        .filter(|f| f.run.is_none() && f.code != Code::WeighedBeforeFailedCheck),
                );
            }
        }
        Ok(failed)
    }

    /// Reads one entry back by hash and decodes it.
    fn load(&self, hash: &EntryHash) -> Result<Option<Shared>, LedgerError> {
        let Some(seq) = self.store.seq_of_hash(hash)? else {
            return Ok(None);
        };
        if seq > self.walked {
            return Ok(None);
        }
        match self.store.entry(seq)? {
            Some(entry) => Ok(Catalog::decode_entry(entry).ok().flatten().map(Arc::new)),
            None => Ok(None),
        }
    }

    /// The entries that name `hash` (as the walk has seen them), decoded.
    fn naming(&self, hash: &EntryHash) -> Result<Vec<Shared>, LedgerError> {
        let mut found = Vec::new();
        for seq in self.store.referencing(hash)? {
            if seq > self.walked {
                continue;
            }
            if let Some(entry) = self.store.entry(seq)? {
                if let Ok(Some(lab)) = Catalog::decode_entry(entry) {
                    found.push(Arc::new(lab));
                }
            }
        }
        Ok(found)
    }

    /// An entry read back with the corrections of it.
    fn load_with_corrections(&self, entry: Shared) -> Result<Vec<Shared>, LedgerError> {
        let corrections = self
            .naming(&entry.hash)?
            .into_iter()
            .filter(|e| matches!(e.body, LabBody::Correction(_)));
        Ok(std::iter::once(entry).chain(corrections).collect())
    }

    /// The run a stored entry belongs to, following corrections, invalidations, sign-offs and
    /// investigations to what they name.
    fn run_of_stored(
        &self,
        hash: &EntryHash,
        depth: u32,
    ) -> Result<Option<EntryHash>, LedgerError> {
        if depth > 4 {
            return Ok(None);
        }
        let Some(entry) = self.load(hash)? else {
            return Ok(None);
        };
        let next = match &entry.body {
            LabBody::Run(_) => return Ok(Some(entry.hash)),
            LabBody::Correction(c) => c.supersedes,
            LabBody::Invalidation(i) => i.replicate,
            LabBody::SignOff(s) => s.subject,
            LabBody::Oos(o) => o.subject,
            body => match body.run() {
                Some(run) => return Ok(Some(run)),
                None => return Ok(None),
            },
        };
        self.run_of_stored(&next, depth + 1)
    }

    /// Everything recorded about a run, read back from the ledger's indexes.
    fn load_run(&self, run: &EntryHash) -> Result<Vec<Shared>, LedgerError> {
        let Some(run_entry) = self.load(run)? else {
            return Ok(Vec::new());
        };
        let mut entries = vec![run_entry];
        let mut next = 0;
        let mut seen: HashSet<EntryHash> = [*run].into_iter().collect();
        while next < entries.len() {
            let hash = entries[next].hash;
            next += 1;
            for found in self.naming(&hash)? {
                let belongs = match &found.body {
                    LabBody::Correction(_)
                    | LabBody::Invalidation(_)
                    | LabBody::SignOff(_)
                    | LabBody::Oos(_) => true,
                    body => body.run() == Some(*run),
                };
                if belongs && seen.insert(found.hash) {
                    entries.push(found);
                }
            }
        }
        entries.sort_by_key(|e| e.seq);
        Ok(entries)
    }

    /// A material's entries, from the table or read back.
    fn material(&mut self, hash: &EntryHash) -> Result<Vec<Shared>, LedgerError> {
        if let Some(m) = self.materials.get_mut(hash) {
            m.last_used = self.walked;
            return Ok(m.entries.clone());
        }
        let Some(found) = self.load(hash)? else {
            return Ok(Vec::new());
        };
        let entries = self.load_with_corrections(found)?;
        self.materials.insert(
            *hash,
            Material {
                entries: entries.clone(),
                last_used: self.walked,
            },
        );
        Ok(entries)
    }

    /// A standardization's entries: kept from when it was judged, or read back.
    fn standardization_entries(
        &mut self,
        hash: &EntryHash,
    ) -> Result<Arc<Vec<Shared>>, LedgerError> {
        if let Some(bucket) = self.owner.get(hash).and_then(|seq| self.buckets.get(seq)) {
            return Ok(Arc::new(bucket.entries.clone()));
        }
        if let Some((_, kept)) = self.standardizations.iter().find(|(h, _)| h == hash) {
            return Ok(Arc::clone(kept));
        }
        Ok(Arc::new(self.load_run(hash)?))
    }

    /// Whether a run is in the validation's scope.
    fn in_scope(&self, run_id: &str, sample_id: Option<&str>) -> bool {
        match &self.scope {
            Scope::Ledger => true,
            Scope::Run(id) => id == run_id,
            Scope::Sample(id) => sample_id == Some(id.as_str()),
        }
    }

    /// The oldest `count` buckets (fewer if there are not that many), taken out with their
    /// entries' owners, oldest first. Two runs with the same id are never put in one batch
    /// (their findings are told apart by run id): the batch then stops before the second.
    fn take_buckets(&mut self, count: usize) -> Vec<(EntryHash, Vec<Shared>)> {
        let mut ids: Vec<String> = Vec::new();
        let mut due = Vec::new();
        while due.len() < count {
            let Some(entry) = self.buckets.first_entry() else {
                break;
            };
            let bucket = entry.get();
            if let Some(LabBody::Run(body)) = current_body(&bucket.entries, &bucket.run).as_deref()
            {
                if ids.contains(&body.id) {
                    break;
                }
                ids.push(body.id.clone());
            }
            let bucket = entry.remove();
            for e in &bucket.entries {
                self.owner.remove(&e.hash);
            }
            due.push((bucket.run, bucket.entries));
        }
        due
    }

    /// Judges runs, each from its entries, on one small catalog of them and what they depend
    /// on (`first_time`: whether this is their first judgement).
    fn judge_runs(
        &mut self,
        batch: Vec<(EntryHash, Vec<Shared>)>,
        first_time: bool,
    ) -> Result<(), LedgerError> {
        let mut runs: Vec<(EntryHash, Run, Vec<Shared>)> = Vec::new();
        for (run, entries) in batch {
            if let Some(LabBody::Run(body)) = current_body(&entries, &run).map(Cow::into_owned) {
                runs.push((run, body, entries));
            }
        }
        if runs.is_empty() {
            return Ok(());
        }
        let mut all: Vec<Shared> = self.adoptions.clone();
        // The days the runs started (the calibration in force then gives the budget's
        // sensitivity term).
        let mut run_days = Vec::new();
        let mut standardizations: Vec<EntryHash> = Vec::new();
        for (_, body, entries) in &runs {
            all.extend(entries.iter().cloned());
            run_days.push(rules::day_of(body.started_at));
            for hash in [Some(body.titrant), body.reference_lot, body.sample]
                .into_iter()
                .flatten()
            {
                all.extend(self.material(&hash)?);
            }
            let Some(std_hash) = body.standardization else {
                continue;
            };
            if standardizations.contains(&std_hash) {
                continue;
            }
            standardizations.push(std_hash);
            if runs.iter().any(|(hash, _, _)| *hash == std_hash) {
                continue;
            }
            let std_entries = self.standardization_entries(&std_hash)?;
            if let Some(LabBody::Run(std_body)) = current_body(&std_entries, &std_hash).as_deref() {
                for hash in [
                    Some(std_body.titrant),
                    std_body.reference_lot,
                    std_body.sample,
                ]
                .into_iter()
                .flatten()
                {
                    all.extend(self.material(&hash)?);
                }
                run_days.push(rules::day_of(std_body.started_at));
            }
            all.extend(std_entries.iter().cloned());
        }
        // Balances weighed on, with their calibrations and the checks on the days of use.
        // (Weighings as recorded and as corrected: either may name the balance and day.)
        let mut days: BTreeMap<EntryHash, BTreeSet<NaiveDate>> = BTreeMap::new();
        for e in &all {
            let weighing = match &e.body {
                LabBody::Weighing(w) => Some(std::borrow::Cow::Borrowed(w)),
                LabBody::Correction(c) if c.kind == Weighing::KIND => {
                    match LabBody::decode(&c.kind, &c.replacement) {
                        Ok(Some(LabBody::Weighing(w))) => Some(std::borrow::Cow::Owned(w)),
                        _ => None,
                    }
                }
                _ => None,
            };
            if let Some(w) = weighing {
                days.entry(w.balance)
                    .or_default()
                    .insert(rules::day_of(w.first_at));
            }
        }
        for (balance, used) in &days {
            if let Some(records) = self.balances.get(balance) {
                all.extend(records.in_force(used.iter().copied().chain(run_days.iter().copied())));
                for day in used {
                    all.extend(self.checks_on(balance, *day)?);
                }
            } else if let Some(found) = self.load(balance)? {
                all.extend(self.load_with_corrections(found)?);
            }
        }
        let catalog = Catalog::from_shared(all);
        let memory = self.memory.take().unwrap_or_default();
        let mut recomputer = Recomputer::with_memory(&catalog, memory);
        let mut recomputed: Vec<(EntryHash, _)> = Vec::new();
        for hash in runs
            .iter()
            .map(|(hash, _, _)| *hash)
            .chain(standardizations.iter().copied())
        {
            if !recomputed.iter().any(|(done, _)| *done == hash) {
                recomputed.push((hash, recomputer.run(hash)));
            }
        }
        self.memory = Some(recomputer.into_memory());
        let evidence = Evidence::with_documents(&catalog, self.adopted.clone(), recomputed);
        let in_scope: Vec<EntryHash> = runs
            .iter()
            .filter_map(|(hash, _, _)| evidence.run(hash))
            .filter(|view| self.in_scope(view.id(), view.sample_id()))
            .map(|view| view.entry.hash)
            .collect();
        let evidence = evidence.focused_on_runs(in_scope.clone());
        // Every run's own findings, told apart by run id (unique within a batch).
        let mut findings_by_run: HashMap<String, Vec<Finding>> = HashMap::new();
        if !in_scope.is_empty() {
            for finding in rules::evaluate(&evidence) {
                if CROSS_RUN.contains(&finding.code) {
                    continue;
                }
                if let Some(run_id) = &finding.run {
                    findings_by_run
                        .entry(run_id.clone())
                        .or_default()
                        .push(finding);
                }
            }
        }
        let mut judged_runs = Vec::new();
        for (run, body, entries) in &runs {
            let Some(view) = evidence.run(run) else {
                continue;
            };
            let judged = in_scope.contains(run).then(|| {
                let findings = findings_by_run.remove(view.id()).unwrap_or_default();
                let summary = summarize(&evidence, view, &findings);
                (findings, summary)
            });
            let own_entries = (body.kind == RunKind::Standardization).then(|| entries.clone());
            judged_runs.push(self.run_judged(&catalog, &evidence, view, judged, own_entries));
        }
        drop(evidence);
        for judged in judged_runs {
            self.remember_judged(judged, first_time);
        }
        self.forget_old_days();
        Ok(())
    }

    /// What one judged run leaves for the tables kept across runs.
    fn run_judged(
        &self,
        catalog: &Catalog,
        evidence: &Evidence<'_>,
        view: &rules::RunView<'_>,
        judged: Option<(Vec<Finding>, RunSummary)>,
        own_entries: Option<Vec<Shared>>,
    ) -> JudgedRun {
        let run = view.entry.hash;
        // Fingerprints of the run's weighings, for PAT-02.
        let weighings = rules::weighings_of(catalog, view)
            .into_iter()
            .map(|(e, w)| {
                let balance_day = (w.balance, rules::day_of(w.first_at));
                (entry_ref(e), balance_day, fingerprint_key(&w))
            })
            .collect();
        let failing = if view.run.kind == RunKind::Assay {
            rules::out_of_spec::decision_of(evidence, view)
                .filter(|(decision, _): &(Decision, _)| !decision.conforms())
                .and_then(|(_, result)| {
                    let subjects: Vec<EntryHash> =
                        std::iter::once(run).chain(result.map(|r| r.hash)).collect();
                    let investigation_seq = catalog
                        .of_kind("lab.oos")
                        .filter(
                            |e| matches!(&e.body, LabBody::Oos(o) if subjects.contains(&o.subject)),
                        )
                        .map(|e| e.seq)
                        .min()
                        .unwrap_or(u64::MAX);
                    Some(Failing {
                        run_seq: view.entry.seq,
                        run_id: view.id().to_string(),
                        sample: view.run.sample?,
                        investigation_seq,
                    })
                })
        } else {
            None
        };
        JudgedRun {
            run,
            run_seq: view.entry.seq,
            weighings,
            failing,
            judged,
            own_entries,
        }
    }

    /// Files what a judged run leaves into the tables kept across runs.
    fn remember_judged(&mut self, judged_run: JudgedRun, first_time: bool) {
        let JudgedRun {
            run,
            run_seq,
            weighings,
            failing,
            judged,
            own_entries,
        } = judged_run;
        match failing {
            Some(failing) => {
                self.failing.insert(run_seq, failing);
            }
            None => {
                self.failing.remove(&run_seq);
            }
        }
        for (at, balance_day, fingerprint) in weighings {
            let runs = self.runs_by_balance_day.entry(balance_day).or_default();
            if !runs.contains(&run) {
                runs.push(run);
            }
            self.remember_fingerprint(run_seq, at, fingerprint);
        }
        if let Some((findings, summary)) = judged {
            self.scope_found = true;
            if first_time {
                self.runs_checked += 1;
            }
            if findings.is_empty() && self.scope == Scope::Ledger && !self.keep_every_summary {
                self.judged.remove(&run_seq);
            } else {
                self.judged.insert(run_seq, (findings, summary));
            }
        }
        if let Some(own_entries) = own_entries {
            let kept = Arc::new(own_entries);
            self.standardizations.retain(|(h, _)| *h != run);
            self.standardizations.push_back((run, kept));
            while self.standardizations.len() > STANDARDIZATIONS_KEPT {
                self.standardizations.pop_front();
            }
        }
    }

    /// Keeps `runs_by_balance_day` to the most recent days: a check or calibration recorded
    /// more than that after the weighings it concerns does not make their runs judged again.
    fn forget_old_days(&mut self) {
        const DAYS_KEPT: u64 = 62;
        let Some(newest) = self.runs_by_balance_day.keys().map(|(_, d)| *d).max() else {
            return;
        };
        let Some(oldest_kept) = newest.checked_sub_days(chrono::Days::new(DAYS_KEPT)) else {
            return;
        };
        self.runs_by_balance_day
            .retain(|(_, day), _| *day >= oldest_kept);
    }

    /// Remembers a weighing's readings by their [`fingerprint_key`]; a match from another run
    /// is a `PAT-02` candidate.
    fn remember_fingerprint(&mut self, run_seq: u64, at: EntryRef, key: u64) {
        match self.fingerprints.get(&key) {
            Some((earlier_run, earlier)) if *earlier_run != run_seq => {
                let group = self.reused.entry(key).or_default();
                if group.is_empty() {
                    group.push((*earlier_run, *earlier));
                }
                if !group.iter().any(|(_, e)| e.seq == at.seq) {
                    group.push((run_seq, at));
                }
            }
            Some(_) => {}
            None => {
                self.fingerprints.insert(key, (run_seq, at));
                self.fingerprint_order.push_back(key);
                if self.fingerprint_order.len() > self.options.fingerprint_horizon {
                    if let Some(old) = self.fingerprint_order.pop_front() {
                        self.fingerprints.remove(&old);
                    }
                }
            }
        }
    }

    /// Judges what is left, then what came late, then the cross-run rules.
    fn finish(mut self) -> Result<Judged, LedgerError> {
        while !self.buckets.is_empty() {
            let due = self.take_buckets(self.options.runs_per_judgement.max(1));
            self.judge_runs(due, true)?;
        }
        self.owner.clear();
        // Late arrivals: the run again, and the assays relying on a standardization.
        let mut again: BTreeSet<EntryHash> = std::mem::take(&mut self.again);
        for run in again.clone() {
            for e in self.naming(&run)? {
                if matches!(&e.body, LabBody::Run(r) if r.standardization == Some(run)) {
                    again.insert(e.hash);
                }
            }
        }
        let mut ordered: Vec<(u64, EntryHash)> = again
            .into_iter()
            .filter_map(|h| self.seq_of(&h).map(|seq| (seq, h)))
            .collect();
        ordered.sort();
        for (_, run) in ordered {
            self.standardizations.retain(|(h, _)| *h != run);
            let entries = self.load_run(&run)?;
            self.judge_runs(vec![(run, entries)], false)?;
        }
        let failed = self.judge_checks()?;
        self.failed_check_impact(failed)?;
        self.retests()?;
        self.reused_readings()?;
        // A run whose only findings compare it with other runs still needs its summary.
        let summarized: HashSet<String> =
            self.judged.values().map(|(_, s)| s.run.clone()).collect();
        let mut missing: BTreeSet<(u64, EntryHash)> = BTreeSet::new();
        for f in &self.cross_run {
            let Some(run_id) = &f.run else { continue };
            if summarized.contains(run_id) {
                continue;
            }
            for e in &f.entries {
                if let Ok(Some((_, id, _))) = self.run_identity(&e.hash) {
                    if &id == run_id {
                        missing.insert((e.seq, e.hash));
                    }
                }
            }
        }
        self.keep_every_summary = true;
        for (_, run) in missing {
            let entries = self.load_run(&run)?;
            self.judge_runs(vec![(run, entries)], false)?;
        }
        let mut findings = std::mem::take(&mut self.cross_run);
        let mut runs = Vec::new();
        let runs_checked = self.runs_checked;
        for (_, (run_findings, summary)) in std::mem::take(&mut self.judged) {
            findings.extend(run_findings);
            runs.push(summary);
        }
        // Cross-run findings count towards their run's summary too.
        for summary in &mut runs {
            summary.findings = Tally::of(
                &findings
                    .iter()
                    .filter(|f| f.run.as_deref() == Some(summary.run.as_str()))
                    .cloned()
                    .collect::<Vec<_>>(),
            );
        }
        Ok(Judged {
            defects: self.defects,
            findings,
            runs,
            runs_checked,
            scope_found: self.scope_found,
        })
    }

    /// The run entry stored under `hash`, as (sequence number, id, sample id).
    fn run_identity(
        &self,
        hash: &EntryHash,
    ) -> Result<Option<(u64, String, Option<String>)>, LedgerError> {
        let Some(entry) = self.load(hash)? else {
            return Ok(None);
        };
        let entries = self.load_with_corrections(entry.clone())?;
        let catalog = Catalog::from_shared(entries);
        let Some(LabBody::Run(run)) = catalog.current(hash) else {
            return Ok(None);
        };
        let sample = match run.sample {
            Some(s) => match self.load(&s)? {
                Some(found) => {
                    let catalog = Catalog::from_shared(self.load_with_corrections(found)?);
                    match catalog.current(&s) {
                        Some(LabBody::Sample(sample)) => Some(sample.id),
                        _ => None,
                    }
                }
                None => None,
            },
            None => None,
        };
        Ok(Some((entry.seq, run.id, sample)))
    }

    /// `BAL-05`: every run weighed on a balance after its last passing check and before a
    /// check that failed. Weighings are looked for among the entries recorded within a window
    /// of those two checks.
    fn failed_check_impact(&mut self, failed: Vec<FailedCheck>) -> Result<(), LedgerError> {
        for f in failed {
            let low = f.since_seq.saturating_sub(self.options.window);
            let high = f.check.seq + self.options.window;
            let name = self
                .balances
                .get(&f.balance)
                .and_then(|r| {
                    r.entries.iter().find_map(|e| match &e.body {
                        LabBody::Balance(b) => Some(b.id.clone()),
                        _ => None,
                    })
                })
                .map_or_else(
                    || format!("balance {}", f.balance),
                    |id| format!("balance {id}"),
                );
            let mut affected: BTreeMap<EntryHash, Vec<EntryRef>> = BTreeMap::new();
            for seq in self.store.referencing(&f.balance)? {
                if seq < low || seq > high || seq > self.walked {
                    continue;
                }
                let Some(entry) = self.store.entry(seq)? else {
                    continue;
                };
                let Ok(Some(lab)) = Catalog::decode_entry(entry) else {
                    continue;
                };
                let lab = Arc::new(lab);
                let current = Catalog::from_shared(self.load_with_corrections(lab.clone())?);
                if let Some(LabBody::Weighing(w)) = current.current(&lab.hash) {
                    if w.first_at >= f.since && w.first_at < f.at {
                        affected.entry(w.run).or_default().push(entry_ref(&lab));
                    }
                }
            }
            let mut by_seq: Vec<(u64, String, Option<String>, Vec<EntryRef>)> = Vec::new();
            for (run, weighings) in affected {
                if let Some((seq, id, sample)) = self.run_identity(&run)? {
                    if self.in_scope(&id, sample.as_deref()) {
                        let mut involved = weighings;
                        involved.push(EntryRef { seq, hash: run });
                        by_seq.push((seq, id, sample, involved));
                    }
                }
            }
            by_seq.sort_by_key(|(seq, ..)| *seq);
            for (_, id, sample, involved) in by_seq {
                self.cross_run.push(
                    Finding::new(
                        Code::WeighedBeforeFailedCheck,
                        format!(
                            "run {id} was weighed on {name} after its last passing check and before the check that failed at {}",
                            rules::when(f.at)
                        ),
                        "USP <41>; impact assessment of a failed check",
                    )
                    .about_run(Some(&id), sample.as_deref())
                    .involving(involved)
                    .involving([f.check]),
                );
            }
        }
        Ok(())
    }

    /// `OOS-02`: a later assay of a failing sample recorded before any investigation.
    fn retests(&mut self) -> Result<(), LedgerError> {
        let failing = std::mem::take(&mut self.failing);
        for f in failing.values() {
            let mut retests: Vec<(u64, EntryHash)> = Vec::new();
            for e in self.naming(&f.sample)? {
                if let LabBody::Run(r) = &e.body {
                    if r.kind == RunKind::Assay && e.seq > f.run_seq && e.seq < f.investigation_seq
                    {
                        retests.push((e.seq, e.hash));
                    }
                }
            }
            for (_, retest) in retests {
                let Some((seq, id, sample)) = self.run_identity(&retest)? else {
                    continue;
                };
                if !self.in_scope(&id, sample.as_deref()) {
                    continue;
                }
                let failed_hash = self
                    .store
                    .entry(f.run_seq)?
                    .map(|e| e.hash)
                    .unwrap_or(EntryHash::ZERO);
                self.cross_run.push(
                    Finding::new(
                        Code::RetestBeforeInvestigation,
                        format!(
                            "run {id} retests sample {} after run {} failed, before any investigation was opened",
                            sample.as_deref().unwrap_or("?"),
                            f.run_id
                        ),
                        "FDA OOS guidance: investigate before retesting",
                    )
                    .about_run(Some(&id), sample.as_deref())
                    .involving([EntryRef { seq, hash: retest }])
                    .involving([EntryRef {
                        seq: f.run_seq,
                        hash: failed_hash,
                    }]),
                );
            }
        }
        Ok(())
    }

    /// `PAT-02`: one finding per reading pair seen in more than one run, about the latest.
    fn reused_readings(&mut self) -> Result<(), LedgerError> {
        let reused = std::mem::take(&mut self.reused);
        let mut groups: Vec<Vec<(u64, EntryRef)>> = reused.into_values().collect();
        groups.sort_by_key(|g| g.iter().map(|(_, e)| e.seq).min().unwrap_or(0));
        for group in groups {
            let mut runs: Vec<u64> = group.iter().map(|(r, _)| *r).collect();
            runs.sort_unstable();
            runs.dedup();
            if runs.len() < 2 {
                continue;
            }
            let latest = group.iter().max_by_key(|(_, e)| e.seq).expect("non-empty");
            let Some(latest_run) = self.store.entry(latest.0)? else {
                continue;
            };
            let Some((_, id, sample)) = self.run_identity(&latest_run.hash)? else {
                continue;
            };
            if !self.in_scope(&id, sample.as_deref()) {
                continue;
            }
            let mut others = Vec::new();
            for run_seq in runs.iter().filter(|s| **s != latest.0) {
                if let Some(entry) = self.store.entry(*run_seq)? {
                    if let Some((_, other, _)) = self.run_identity(&entry.hash)? {
                        others.push(other);
                    }
                }
            }
            self.cross_run.push(
                Finding::new(
                    Code::ReadingReused,
                    format!(
                        "run {id} has a weighing (entry {}) with the same balance and readings as run {}",
                        latest.1.seq,
                        others.join(", ")
                    ),
                    "one observation belongs to one sample",
                )
                .about_run(Some(&id), sample.as_deref())
                .involving(group.iter().map(|(_, e)| *e))
                .involving([EntryRef {
                    seq: latest_run.seq,
                    hash: latest_run.hash,
                }]),
            );
        }
        Ok(())
    }
}

/// The body in force for `hash` among `entries` (its latest signed correction applied).
fn current_body<'a>(entries: &'a [Shared], hash: &EntryHash) -> Option<Cow<'a, LabBody>> {
    let original = entries.iter().find(|e| e.hash == *hash)?;
    let corrected = entries
        .iter()
        .filter(|e| e.signed && e.seq > original.seq)
        .filter_map(|e| match &e.body {
            LabBody::Correction(c) if c.supersedes == *hash => Some((e.seq, c)),
            _ => None,
        })
        .max_by_key(|(seq, _)| *seq)
        .and_then(|(_, c)| LabBody::decode(&c.kind, &c.replacement).ok().flatten());
    Some(corrected.map_or(Cow::Borrowed(&original.body), Cow::Owned))
}

/// What makes two weighings look like the same observation (balance, both readings, unit),
/// as a 64-bit key with fixed hashing, so runs compare the same way on every machine.
fn fingerprint_key(w: &Weighing) -> u64 {
    let mut hasher = std::collections::hash_map::DefaultHasher::new();
    (w.balance, &w.first.value, &w.second.value, w.first.unit).hash(&mut hasher);
    hasher.finish()
}
