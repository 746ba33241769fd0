//! Integrity replay: walks every entry once, in order, and reports every problem found.
//!
//! For each entry it recomputes the hash from the stored bytes, checks the sequence, the link
//! to the previous entry's recomputed hash, that record times never go backwards, that the
//! author and signing key were enrolled and active at that point and that the author's role
//! allows the kind, that references point to earlier entries, and that registry entries make
//! sense. Signatures of ordinary entries are verified in batches on worker threads while the
//! walk goes on; registry entries are verified one by one before they change the registry.
//! Anchors (checkpoints or their short codes) prove the ledger still extends what was seen
//! before. Memory stays flat: one entry, one pending batch per worker and the registry.

use crate::checkpoint::{Checkpoint, CheckpointCode};
use crate::kinds::REGISTRY_KINDS;
use crate::registry::{AuthorityIssue, Registry};
use crate::signing::{failing_signatures, signed_message, verify_strict, SignatureJob};
use crate::store::{Head, RowRead, Store};
use crate::{Entry, EntryHash, KindRules, Timestamp};
use serde::Serialize;
use std::sync::mpsc::{channel, sync_channel, Receiver, Sender};
use std::sync::{Arc, Mutex};

/// Most problems kept in a report; the rest are only counted.
pub const MAX_PROBLEMS_KEPT: usize = 10_000;
const BATCH_SIZE: usize = 256;

/// A state of the ledger seen earlier, that the ledger must still extend.
#[derive(Clone, Debug)]
pub enum Anchor {
    /// A signed checkpoint.
    Checkpoint(Checkpoint),
    /// A short code copied from a logbook.
    Code(CheckpointCode),
}

impl Anchor {
    fn seq(&self) -> u64 {
        match self {
            Anchor::Checkpoint(c) => c.seq,
            Anchor::Code(c) => c.seq,
        }
    }
}

/// How to replay.
#[derive(Clone, Debug, Default)]
pub struct ReplayOptions {
    /// Verify every signature singly with `verify_strict` instead of in batches.
    pub strict_signatures: bool,
    /// Worker threads for signatures (0: one per available core).
    pub threads: usize,
    /// Earlier states the ledger must extend.
    pub anchors: Vec<Anchor>,
}

/// One thing wrong with the ledger.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
#[serde(tag = "problem", rename_all = "snake_case")]
pub enum Problem {
    /// The ledger holds no entries.
    Empty,
    /// The stored hash is not the hash of the stored fields.
    HashMismatch {
        /// Entry.
        seq: u64,
        /// Hash as stored.
        stored: EntryHash,
        /// Hash recomputed from the stored fields.
        computed: EntryHash,
    },
    /// The entry does not link to the recomputed hash of the entry before it.
    BrokenLink {
        /// Entry.
        seq: u64,
        /// Recomputed hash of the previous entry.
        expected_prev: EntryHash,
        /// Previous hash the entry carries.
        found_prev: EntryHash,
    },
    /// Sequence numbers skip (entries removed).
    SequenceGap {
        /// Sequence number that should come next.
        expected: u64,
        /// Sequence number found.
        found: u64,
    },
    /// A stored row whose columns do not form an entry at all.
    MalformedRow {
        /// Entry.
        seq: u64,
        /// What is wrong.
        detail: String,
    },
    /// The record time is earlier than an earlier entry's.
    TimeWentBack {
        /// Entry.
        seq: u64,
        /// Latest record time before it.
        previous: Timestamp,
        /// Its record time.
        found: Timestamp,
    },
    /// A signature does not verify, or a signer is named without a signature (or the reverse).
    SignatureInvalid {
        /// Entry.
        seq: u64,
        /// What is wrong.
        detail: String,
    },
    /// The author or signer lacked authority for the entry.
    Authority {
        /// Entry.
        seq: u64,
        /// What was lacking.
        issue: AuthorityIssue,
    },
    /// A registry entry that must not have been accepted.
    RegistryRefused {
        /// Entry.
        seq: u64,
        /// Why.
        reason: String,
    },
    /// A reference to a hash no entry has.
    ReferenceUnknown {
        /// Entry.
        seq: u64,
        /// The missing hash.
        reference: EntryHash,
    },
    /// A reference to an entry that is not earlier.
    ReferenceNotEarlier {
        /// Entry.
        seq: u64,
        /// The referenced entry.
        target_seq: u64,
    },
    /// An anchor belongs to another ledger.
    AnchorOtherLedger {
        /// Sequence number of the anchor.
        anchor_seq: u64,
    },
    /// The ledger ends before an anchor's sequence number: truncated or rolled back.
    AnchorBeyondHead {
        /// Sequence number of the anchor.
        anchor_seq: u64,
        /// Last sequence number in the ledger.
        head_seq: u64,
    },
    /// The entry at an anchor's sequence number is not the one the anchor saw: rewritten,
    /// rolled back and re-extended, or a forked copy.
    AnchorHashDiffers {
        /// Sequence number of the anchor.
        anchor_seq: u64,
        /// Hash (or prefix) the anchor holds.
        anchored: String,
        /// Recomputed hash in the ledger.
        found: EntryHash,
    },
    /// A checkpoint whose signature fails or whose signer was not enrolled with that key.
    AnchorSignatureInvalid {
        /// Sequence number of the anchor.
        anchor_seq: u64,
        /// What is wrong.
        detail: String,
    },
}

impl Problem {
    /// The entry the problem is located at, if any.
    pub fn seq(&self) -> Option<u64> {
        use Problem::*;
        match self {
            Empty => None,
            HashMismatch { seq, .. }
            | BrokenLink { seq, .. }
            | TimeWentBack { seq, .. }
            | SignatureInvalid { seq, .. }
            | Authority { seq, .. }
            | RegistryRefused { seq, .. }
            | ReferenceUnknown { seq, .. }
            | ReferenceNotEarlier { seq, .. } => Some(*seq),
            SequenceGap { expected, .. } => Some(*expected),
            MalformedRow { seq, .. } => Some(*seq),
            AnchorOtherLedger { anchor_seq }
            | AnchorSignatureInvalid { anchor_seq, .. }
            | AnchorHashDiffers { anchor_seq, .. } => Some(*anchor_seq),
            AnchorBeyondHead { head_seq, .. } => Some(*head_seq + 1),
        }
    }
}

impl std::fmt::Display for Problem {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        use Problem::*;
        match self {
            Empty => write!(f, "the ledger has no entries"),
            HashMismatch { seq, stored, computed } => write!(
                f,
                "entry {seq}: stored hash {} is not the hash of its contents ({})",
                &stored.to_hex()[..16],
                &computed.to_hex()[..16]
            ),
            BrokenLink { seq, expected_prev, found_prev } => write!(
                f,
                "entry {seq}: links to {} but the entry before hashes to {}",
                &found_prev.to_hex()[..16],
                &expected_prev.to_hex()[..16]
            ),
            SequenceGap { expected, found } => {
                write!(f, "entry {expected} is missing: next entry found is {found}")
            }
            TimeWentBack { seq, previous, found } => write!(
                f,
                "entry {seq}: record time {found} is earlier than {previous} before it"
            ),
            SignatureInvalid { seq, detail } => write!(f, "entry {seq}: {detail}"),
            MalformedRow { seq, detail } => write!(f, "entry {seq}: stored row is malformed ({detail})"),
            Authority { seq, issue } => write!(f, "entry {seq}: {issue}"),
            RegistryRefused { seq, reason } => write!(f, "entry {seq}: {reason}"),
            ReferenceUnknown { seq, reference } => write!(
                f,
                "entry {seq}: refers to {} which is not in the ledger",
                &reference.to_hex()[..16]
            ),
            ReferenceNotEarlier { seq, target_seq } => {
                write!(f, "entry {seq}: refers to entry {target_seq}, which is not earlier")
            }
            AnchorOtherLedger { anchor_seq } => {
                write!(f, "checkpoint at {anchor_seq} belongs to another ledger")
            }
            AnchorBeyondHead { anchor_seq, head_seq } => write!(
                f,
                "checkpoint at {anchor_seq} is beyond the last entry {head_seq}: entries were removed or rolled back"
            ),
            AnchorHashDiffers { anchor_seq, anchored, found } => write!(
                f,
                "checkpoint at {anchor_seq} saw {anchored}, the ledger now has {}: rewritten, rolled back or forked",
                &found.to_hex()[..16]
            ),
            AnchorSignatureInvalid { anchor_seq, detail } => {
                write!(f, "checkpoint at {anchor_seq}: {detail}")
            }
        }
    }
}

/// The outcome of a replay.
#[derive(Clone, Debug, Serialize)]
pub struct IntegrityReport {
    /// Entries read.
    pub entries: u64,
    /// Entries carrying a signature.
    pub signed: u64,
    /// Last entry as stored.
    pub head: Option<ReportHead>,
    /// Ledger id from the opening entry, hex.
    pub ledger_id: Option<String>,
    /// Lab name from the opening entry.
    pub lab_name: String,
    /// Problems, ordered by entry.
    pub problems: Vec<Problem>,
    /// Problems found beyond [`MAX_PROBLEMS_KEPT`].
    pub problems_not_listed: u64,
    /// Anchors checked.
    pub anchors_checked: usize,
}

/// The head as shown in a report.
#[derive(Clone, Copy, Debug, Serialize, PartialEq, Eq)]
pub struct ReportHead {
    /// Sequence number.
    pub seq: u64,
    /// Stored hash.
    pub hash: EntryHash,
    /// Record time.
    pub record_time: Timestamp,
}

impl From<Head> for ReportHead {
    fn from(h: Head) -> Self {
        ReportHead {
            seq: h.seq,
            hash: h.hash,
            record_time: h.record_time,
        }
    }
}

impl IntegrityReport {
    /// No problem found.
    pub fn intact(&self) -> bool {
        self.problems.is_empty() && self.problems_not_listed == 0
    }

    /// The first entry at which something is wrong.
    pub fn first_broken_seq(&self) -> Option<u64> {
        self.problems.iter().filter_map(Problem::seq).min()
    }
}

/// Replays the whole ledger in `store` under `rules`.
pub fn replay(
    store: &Store,
    rules: &KindRules,
    options: &ReplayOptions,
) -> crate::error::Result<IntegrityReport> {
    replay_observed(store, rules, options, &mut |_| {})
}

/// Replays like [`replay`] and hands every well-formed entry the walk reads to `observe`, in
/// sequence order, as soon as the walk has judged it (the walk is done with it, so `observe`
/// may keep it or pass it to another thread), so a caller can build its own view of the
/// ledger from the same single read. `observe` sees entries whatever the report will say about
/// them (a signature is only known to fail once its batch is verified); the caller must look
/// at the report before trusting what it built. Rows that do not form an entry are not handed
/// on. Replay itself still holds one entry at a time; what `observe` keeps is its own.
pub fn replay_observed(
    store: &Store,
    rules: &KindRules,
    options: &ReplayOptions,
    observe: &mut dyn FnMut(Entry),
) -> crate::error::Result<IntegrityReport> {
    let threads = match options.threads {
        0 => std::thread::available_parallelism().map_or(1, |n| n.get()),
        n => n,
    };
    let (job_sender, job_receiver) = sync_channel::<Vec<SignatureJob>>(threads * 2);
    let job_receiver = Arc::new(Mutex::new(job_receiver));
    let (failure_sender, failure_receiver) = channel::<Vec<u64>>();
    let mut walk = Walk::new(store, rules, &options.anchors);
    let strict = options.strict_signatures;
    let walked = std::thread::scope(|scope| {
        for _ in 0..threads {
            let receiver = Arc::clone(&job_receiver);
            let sender = failure_sender.clone();
            scope.spawn(move || verify_batches(&receiver, &sender, strict));
        }
        drop(failure_sender);
        let result = store.for_each_row(1, |row| {
            let batch = match row {
                RowRead::Entry(entry) => {
                    let batch = walk.visit(&entry)?;
                    observe(*entry);
                    batch
                }
                RowRead::Malformed { seq, detail } => {
                    walk.visit_malformed(seq, detail);
                    None
                }
            };
            if let Some(batch) = batch {
                let _ = job_sender.send(batch);
            }
            Ok(true)
        });
        if !walk.pending.is_empty() {
            let _ = job_sender.send(std::mem::take(&mut walk.pending));
        }
        drop(job_sender);
        result
    });
    walked?;
    for seqs in failure_receiver.iter() {
        for seq in seqs {
            walk.add(Problem::SignatureInvalid {
                seq,
                detail: "signature does not verify".into(),
            });
        }
    }
    Ok(walk.finish(store.head()?))
}

fn verify_batches(
    receiver: &Mutex<Receiver<Vec<SignatureJob>>>,
    failures: &Sender<Vec<u64>>,
    strict: bool,
) {
    loop {
        let batch = match receiver.lock() {
            Ok(guard) => guard.recv(),
            Err(_) => return,
        };
        let Ok(batch) = batch else { return };
        let failed = failing_signatures(&batch, strict);
        if !failed.is_empty() && failures.send(failed).is_err() {
            return;
        }
    }
}

/// State carried from one entry to the next.
struct Walk<'a> {
    store: &'a Store,
    rules: &'a KindRules,
    anchors: &'a [Anchor],
    registry: Registry,
    expected_seq: u64,
    prev_computed: EntryHash,
    /// The previous row was malformed, so the link to it cannot be judged.
    prev_unknown: bool,
    latest_time: Option<Timestamp>,
    entries: u64,
    signed: u64,
    problems: Vec<Problem>,
    problems_not_listed: u64,
    pending: Vec<SignatureJob>,
}

impl<'a> Walk<'a> {
    fn new(store: &'a Store, rules: &'a KindRules, anchors: &'a [Anchor]) -> Self {
        Walk {
            store,
            rules,
            anchors,
            registry: Registry::new(),
            expected_seq: 1,
            prev_computed: EntryHash::ZERO,
            prev_unknown: false,
            latest_time: None,
            entries: 0,
            signed: 0,
            problems: Vec::new(),
            problems_not_listed: 0,
            pending: Vec::new(),
        }
    }

    fn add(&mut self, problem: Problem) {
        if self.problems.len() < MAX_PROBLEMS_KEPT {
            self.problems.push(problem);
        } else {
            self.problems_not_listed += 1;
        }
    }

    /// Records a row that is not an entry; the next entry's link to it is not judged.
    fn visit_malformed(&mut self, seq: u64, detail: String) {
        self.entries += 1;
        if seq != self.expected_seq {
            self.add(Problem::SequenceGap {
                expected: self.expected_seq,
                found: seq,
            });
        }
        self.expected_seq = seq + 1;
        self.add(Problem::MalformedRow { seq, detail });
        self.prev_unknown = true;
    }

    /// Checks one entry; returns a full batch of signatures to verify, if one is ready.
    fn visit(&mut self, entry: &Entry) -> crate::error::Result<Option<Vec<SignatureJob>>> {
        self.entries += 1;
        let computed = entry.compute_hash();
        self.check_chain(entry, &computed);
        let authority = self.registry.authority_issues(
            &entry.author,
            &entry.kind,
            entry.signer.as_ref(),
            self.rules.get(&entry.kind),
        );
        let authority_ok = authority.is_empty();
        for issue in authority {
            self.add(Problem::Authority {
                seq: entry.seq,
                issue,
            });
        }
        let is_registry_kind = REGISTRY_KINDS.contains(&entry.kind.as_str());
        let signature_ok = self.check_signature(entry, &computed, is_registry_kind);
        self.check_references(entry)?;
        if is_registry_kind || self.registry.ledger_id().is_none() {
            self.apply_registry(entry, authority_ok && signature_ok);
        }
        self.check_anchors(entry, &computed);
        self.prev_computed = computed;
        self.prev_unknown = false;
        if self.pending.len() >= BATCH_SIZE {
            return Ok(Some(std::mem::take(&mut self.pending)));
        }
        Ok(None)
    }

    fn check_chain(&mut self, entry: &Entry, computed: &EntryHash) {
        if entry.seq != self.expected_seq {
            self.add(Problem::SequenceGap {
                expected: self.expected_seq,
                found: entry.seq,
            });
        }
        self.expected_seq = entry.seq + 1;
        if *computed != entry.hash {
            self.add(Problem::HashMismatch {
                seq: entry.seq,
                stored: entry.hash,
                computed: *computed,
            });
        }
        if entry.prev_hash != self.prev_computed && !self.prev_unknown {
            self.add(Problem::BrokenLink {
                seq: entry.seq,
                expected_prev: self.prev_computed,
                found_prev: entry.prev_hash,
            });
        }
        match self.latest_time {
            Some(previous) if entry.record_time < previous => self.add(Problem::TimeWentBack {
                seq: entry.seq,
                previous,
                found: entry.record_time,
            }),
            _ => self.latest_time = Some(entry.record_time),
        }
    }

    /// Queues or performs the signature check; returns false when it is known to fail now.
    fn check_signature(&mut self, entry: &Entry, computed: &EntryHash, verify_now: bool) -> bool {
        let (key, signature) = match (entry.signer, entry.signature) {
            (None, None) => return true,
            (Some(key), Some(signature)) => (key, signature),
            (Some(_), None) => {
                self.add(Problem::SignatureInvalid {
                    seq: entry.seq,
                    detail: "a signer is named but the signature is missing".into(),
                });
                return false;
            }
            (None, Some(_)) => {
                self.add(Problem::SignatureInvalid {
                    seq: entry.seq,
                    detail: "a signature is stored without a signer key".into(),
                });
                return false;
            }
        };
        self.signed += 1;
        if verify_now {
            if verify_strict(&key, &signed_message(computed), &signature) {
                return true;
            }
            self.add(Problem::SignatureInvalid {
                seq: entry.seq,
                detail: "signature does not verify".into(),
            });
            return false;
        }
        self.pending.push(SignatureJob {
            seq: entry.seq,
            hash: *computed,
            key,
            signature,
        });
        true
    }

    fn check_references(&mut self, entry: &Entry) -> crate::error::Result<()> {
        for reference in &entry.references {
            match self.store.seq_of_hash(reference)? {
                None => self.add(Problem::ReferenceUnknown {
                    seq: entry.seq,
                    reference: *reference,
                }),
                Some(target_seq) if target_seq >= entry.seq => {
                    self.add(Problem::ReferenceNotEarlier {
                        seq: entry.seq,
                        target_seq,
                    })
                }
                Some(_) => {}
            }
        }
        Ok(())
    }

    fn apply_registry(&mut self, entry: &Entry, trusted: bool) {
        let change = self.registry.check_change(
            entry.seq,
            &entry.author,
            &entry.kind,
            entry.signer.as_ref(),
            &entry.body,
        );
        match change {
            Err(reason) => self.add(Problem::RegistryRefused {
                seq: entry.seq,
                reason,
            }),
            Ok(Some(change)) if trusted => {
                self.registry.apply(entry.seq, entry.record_time, change)
            }
            Ok(_) => {}
        }
    }

    fn check_anchors(&mut self, entry: &Entry, computed: &EntryHash) {
        let anchors = self.anchors;
        for anchor in anchors.iter().filter(|a| a.seq() == entry.seq) {
            let (matches, anchored) = match anchor {
                Anchor::Checkpoint(c) => (c.head == *computed, c.head.to_hex()),
                Anchor::Code(c) => (c.matches(computed), c.to_string()),
            };
            if !matches {
                self.add(Problem::AnchorHashDiffers {
                    anchor_seq: entry.seq,
                    anchored,
                    found: *computed,
                });
            }
            if let Anchor::Checkpoint(c) = anchor {
                self.check_checkpoint_signer(c);
            }
        }
    }

    fn check_checkpoint_signer(&mut self, checkpoint: &Checkpoint) {
        let anchor_seq = checkpoint.seq;
        if self.registry.ledger_id() != Some(checkpoint.ledger_id) {
            self.add(Problem::AnchorOtherLedger { anchor_seq });
            return;
        }
        let detail = if !checkpoint.signature_valid() {
            Some("signature does not verify".to_string())
        } else if self.registry.owner_of(&checkpoint.key) != Some(checkpoint.by.as_str()) {
            Some(format!(
                "key {} was not enrolled for {} at that point",
                checkpoint.key.short(),
                checkpoint.by
            ))
        } else {
            self.revocation_of(checkpoint)
                .map(|seq| format!("key {} was revoked by entry {seq}", checkpoint.key.short()))
        };
        if let Some(detail) = detail {
            self.add(Problem::AnchorSignatureInvalid { anchor_seq, detail });
        }
    }

    /// The entry that revoked the checkpoint's key, if it came at or before the checkpoint.
    fn revocation_of(&self, checkpoint: &Checkpoint) -> Option<u64> {
        let person = self.registry.person(&checkpoint.by)?;
        let key = person
            .keys
            .iter()
            .find(|k| k.public_key == checkpoint.key)?;
        key.revoked
            .map(|(seq, _)| seq)
            .filter(|seq| *seq <= checkpoint.seq)
    }

    fn finish(mut self, head: Option<Head>) -> IntegrityReport {
        if self.entries == 0 {
            self.add(Problem::Empty);
        }
        let last_seq = self.expected_seq.saturating_sub(1);
        let anchors = self.anchors;
        for anchor in anchors.iter().filter(|a| a.seq() > last_seq) {
            self.add(Problem::AnchorBeyondHead {
                anchor_seq: anchor.seq(),
                head_seq: last_seq,
            });
        }
        self.problems.sort_by_key(|p| {
            (
                p.seq().unwrap_or(0),
                matches!(p, Problem::SignatureInvalid { .. }),
            )
        });
        IntegrityReport {
            entries: self.entries,
            signed: self.signed,
            head: head.map(ReportHead::from),
            ledger_id: self.registry.ledger_id().map(hex::encode),
            lab_name: self.registry.lab_name().to_string(),
            problems: self.problems,
            problems_not_listed: self.problems_not_listed,
            anchors_checked: self.anchors.len(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::records::Note;
    use crate::{FixedClock, Ledger, Signer};
    use std::sync::Arc;

    #[test]
    fn observer_sees_every_entry_once_in_order_and_the_report_is_unchanged() {
        let dir = tempfile::tempdir().expect("temp dir");
        let qa = Signer::from_secret("q.ambrose", &[31; 32]);
        let clock = Arc::new(FixedClock::new(Timestamp(1_800_000_000_000_000), 1_000));
        let (mut ledger, _) = Ledger::create(
            &dir.path().join("observed.ledger"),
            "Observer Test Lab",
            "Quill Ambrose",
            &qa,
            KindRules::core(),
            clock,
        )
        .expect("create");
        for i in 0..300 {
            let note = Note {
                text: format!("note {i}"),
            };
            ledger.append_record(&note, &qa).expect("append");
        }
        let mut seen = Vec::new();
        let observed = ledger
            .replay_observed(&ReplayOptions::default(), &mut |e| {
                seen.push((e.seq, e.hash))
            })
            .expect("replay");
        let plain = ledger.replay(&ReplayOptions::default()).expect("replay");
        assert!(observed.intact(), "{:?}", observed.problems);
        assert_eq!(observed.entries, plain.entries);
        assert_eq!(seen.len(), 301);
        let seqs: Vec<u64> = seen.iter().map(|(seq, _)| *seq).collect();
        assert_eq!(seqs, (1..=301).collect::<Vec<_>>());
        assert_eq!(seen.last().map(|(_, h)| *h), observed.head.map(|h| h.hash));
    }
}
