//! Integrity replay: walks every entry once, in order, and reports every problem found.
//!
//! For each entry it recomputes the hash from the stored bytes, checks the sequence, the link
//! to the previous entry's recomputed hash, that record times never go backwards, that the
//! author and signing key were enrolled and active at that point and that the author's role
//! allows the kind, that references point to earlier entries, and that registry entries make
//! sense. Signatures of ordinary entries are verified in batches on worker threads while the
//! walk goes on; registry entries are verified one by one before they change the registry.
//! Anchors (checkpoints or their short codes) prove the ledger still extends what was seen
//! before. Beside the entries it reads the stored Merkle tree in order, one cursor per level:
//! each leaf must be the leaf hash of its entry's stored hash and each interior node the hash
//! of its two children, with no node beyond the last entry. Memory stays flat: one
//! entry, one pending batch per worker, the registry, and one waiting node per tree level.

use crate::checkpoint::{Checkpoint, CheckpointCode};
use crate::kinds::REGISTRY_KINDS;
use crate::merkle::{self, leaf_hash, node_hash};
use crate::registry::{AuthorityIssue, Registry};
use crate::signing::{failing_signatures, signed_message, verify_strict, SignatureJob};
use crate::store::{Head, NodeScan, RowRead, Store, StoredNode};
use crate::{Entry, EntryHash, KindRules, Timestamp};
use serde::Serialize;
use std::sync::mpsc::{channel, sync_channel, Receiver, Sender, SyncSender};
use std::sync::{Arc, Mutex};

/// Most problems kept in a report; the rest are only counted.
pub const MAX_PROBLEMS_KEPT: usize = 10_000;
const BATCH_SIZE: usize = 256;

/// A state of the ledger seen earlier, that the ledger must still extend.
#[derive(Clone, Debug)]
// A handful of anchors per replay at most: boxing the checkpoint would only burden callers.
#[allow(clippy::large_enum_variant)]
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
    /// A version-2 checkpoint whose tree root is not the root of the stored tree of that
    /// size: the entries it covered were rewritten (or the tree was).
    AnchorTreeDiffers {
        /// Sequence number of the anchor.
        anchor_seq: u64,
        /// Root the checkpoint holds, hex.
        anchored: String,
        /// Root of the stored tree over the same entries, hex.
        found: String,
    },
    /// A checkpoint whose signature fails or whose signer was not enrolled with that key.
    AnchorSignatureInvalid {
        /// Sequence number of the anchor.
        anchor_seq: u64,
        /// What is wrong.
        detail: String,
    },
    /// A stored Merkle tree node that is not what the chain gives: a leaf that is not the leaf
    /// hash of its entry's stored hash, an interior node that is the hash of neither its two
    /// children as stored nor its two children as the chain gives them, a node missing, or a
    /// node beyond the last entry.
    TreeNodeMismatch {
        /// Height above the leaves (0 for a leaf).
        level: u32,
        /// Position in its level; the node covers entries `index * 2^level + 1` onwards.
        index: u64,
        /// What the chain gives (where a gap hides that, the hash of the stored children), hex;
        /// none for a node beyond the last entry.
        expected: Option<String>,
        /// What is stored, hex; none when the node is missing.
        found: Option<String>,
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
            | AnchorHashDiffers { anchor_seq, .. }
            | AnchorTreeDiffers { anchor_seq, .. } => Some(*anchor_seq),
            AnchorBeyondHead { head_seq, .. } => Some(*head_seq + 1),
            TreeNodeMismatch { level, index, .. } => Some(first_seq_under(*level, *index)),
        }
    }
}

/// The first entry under the tree node at `level`, `index` (saturating for absurd positions).
fn first_seq_under(level: u32, index: u64) -> u64 {
    1u64.checked_shl(level)
        .and_then(|width| index.checked_mul(width))
        .map_or(u64::MAX, |first_leaf| first_leaf.saturating_add(1))
}

/// The first 16 hex digits of a hash as shown in a problem.
fn short_hex(hex: &str) -> &str {
    hex.get(..16).unwrap_or(hex)
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
            AnchorTreeDiffers { anchor_seq, anchored, found } => write!(
                f,
                "checkpoint at {anchor_seq} saw tree root {}, the ledger's tree of that size has {}: entries it covered were rewritten",
                short_hex(anchored),
                short_hex(found)
            ),
            TreeNodeMismatch { level, index, expected, found } => {
                write!(f, "merkle tree node at level {level}, index {index}: ")?;
                let source = if *level == 0 { "its entry's hash" } else { "the chain" };
                match (expected, found) {
                    (Some(e), Some(s)) => write!(
                        f,
                        "stored {} but {source} gives {}",
                        short_hex(s),
                        short_hex(e)
                    ),
                    (Some(e), None) => write!(f, "missing ({source} gives {})", short_hex(e)),
                    (None, Some(s)) => write!(
                        f,
                        "stored {} beyond the last entry: the tree is longer than the chain",
                        short_hex(s)
                    ),
                    (None, None) => write!(f, "does not match the chain"),
                }
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
        let result = read_rows(store, &mut walk, observe, &job_sender);
        if !walk.pending.is_empty() {
            let _ = job_sender.send(std::mem::take(&mut walk.pending));
        }
        drop(job_sender);
        result
    });
    walked?;
    check_anchored_tree_roots(store, &mut walk, &options.anchors)?;
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

/// Compares each version-2 checkpoint's tree root with the stored tree of its size (the walk
/// has just checked the stored nodes against the chain). Files without a tree, and anchors
/// beyond the last entry (reported by the walk), are left alone.
fn check_anchored_tree_roots(
    store: &Store,
    walk: &mut Walk<'_>,
    anchors: &[Anchor],
) -> crate::error::Result<()> {
    if !store.has_tree() {
        return Ok(());
    }
    let leaves = walk.expected_seq.saturating_sub(1);
    for anchor in anchors {
        let Anchor::Checkpoint(checkpoint) = anchor else {
            continue;
        };
        let Some(anchored) = checkpoint.tree_root else {
            continue;
        };
        if checkpoint.seq > leaves {
            continue;
        }
        // A missing node was reported by the walk already; nothing to compare then.
        let Ok(found) = merkle::tree_root(store, checkpoint.seq) else {
            continue;
        };
        if found != anchored {
            walk.add(Problem::AnchorTreeDiffers {
                anchor_seq: checkpoint.seq,
                anchored: hex::encode(anchored),
                found: hex::encode(found),
            });
        }
    }
    Ok(())
}

/// Reads every stored row once, in order, judging each entry and (when the file has a tree)
/// the tree nodes beside it.
fn read_rows(
    store: &Store,
    walk: &mut Walk<'_>,
    observe: &mut dyn FnMut(Entry),
    jobs: &SyncSender<Vec<SignatureJob>>,
) -> crate::error::Result<()> {
    if !store.has_tree() {
        return store.for_each_row(1, |row| visit_row(walk, observe, jobs, None, row));
    }
    // Every level a leaf index below 2^64 can reach, so the levels never depend on a head
    // read apart from the walk's own snapshot; a cursor of an empty level costs one seek.
    store.scan_tree_nodes(u64::BITS, |scan| {
        let mut tree = TreeCheck::new(scan);
        store.for_each_row(1, |row| {
            visit_row(walk, observe, jobs, Some(&mut tree), row)
        })?;
        let leaves = walk.expected_seq - 1;
        tree.finish(walk, leaves)
    })
}

/// Judges one row (and its tree leaf), hands an entry to `observe` and a full signature batch
/// to the workers.
fn visit_row(
    walk: &mut Walk<'_>,
    observe: &mut dyn FnMut(Entry),
    jobs: &SyncSender<Vec<SignatureJob>>,
    tree: Option<&mut TreeCheck<'_, '_>>,
    row: RowRead,
) -> crate::error::Result<bool> {
    let batch = match row {
        RowRead::Entry(entry) => {
            let batch = walk.visit(&entry)?;
            if let Some(tree) = tree {
                tree.leaf(walk, entry.seq, Some(&entry.hash))?;
            }
            observe(*entry);
            batch
        }
        RowRead::Malformed { seq, detail } => {
            walk.visit_malformed(seq, detail);
            if let Some(tree) = tree {
                tree.leaf(walk, seq, None)?;
            }
            None
        }
    };
    if let Some(batch) = batch {
        let _ = jobs.send(batch);
    }
    Ok(true)
}

/// The stored tree judged alongside the entries, one ordered cursor per level.
///
/// Each node carries two values up: the hash *stored* for it, and the hash *the chain gives*
/// (from the leaf hashes of the entries' stored hashes). A leaf must equal what its entry
/// gives (a stored hash that is not the hash of its entry is the chain's problem, reported
/// there). An interior node must equal the hash of its two children, taken either as stored or
/// as the chain gives them: so one altered node is reported where it is, once, not again at its
/// parent, and by induction from the leaves a report with no tree problem means the stored
/// tree is exactly the chain's. Leaves under a gap in the entries or under a malformed row
/// cannot be judged; they are taken as stored, and nodes that cannot be worked out are passed
/// over: the gap is reported as such.
struct TreeCheck<'a, 's> {
    scan: &'a mut NodeScan<'s>,
    /// The next unread node of each level.
    peeked: Vec<Option<StoredNode>>,
    /// Per level, a left child (index, values) waiting for its right sibling.
    waiting: Vec<Option<(u64, NodeValues)>>,
}

/// What is known of one node as the walk passes it.
#[derive(Clone, Copy, Debug, Default)]
struct NodeValues {
    /// The stored hash, if stored and 32 bytes long.
    stored: Option<[u8; 32]>,
    /// The hash the chain gives, if it can be worked out.
    chain: Option<[u8; 32]>,
}

impl<'a, 's> TreeCheck<'a, 's> {
    fn new(scan: &'a mut NodeScan<'s>) -> Self {
        let levels = scan.levels() as usize;
        TreeCheck {
            scan,
            peeked: vec![None; levels],
            waiting: vec![None; levels],
        }
    }

    /// Judges the leaf of the entry row at `seq`; `entry_hash` is its stored hash, or `None`
    /// for a row that does not form an entry.
    fn leaf(
        &mut self,
        walk: &mut Walk<'_>,
        seq: u64,
        entry_hash: Option<&EntryHash>,
    ) -> crate::error::Result<()> {
        let Some(index) = seq.checked_sub(1) else {
            return Ok(());
        };
        self.take_leaves_under_gap(walk, index)?;
        let chain = entry_hash.map(|h| leaf_hash(&h.0));
        self.place(walk, 0, index, chain, None)
    }

    /// Stored leaves before `index` not yet read belong to entries missing from the chain:
    /// they are taken as stored so the nodes above them can still be judged.
    fn take_leaves_under_gap(
        &mut self,
        walk: &mut Walk<'_>,
        index: u64,
    ) -> crate::error::Result<()> {
        while let Some(node) = self.take_before(0, index)? {
            if let Ok(stored_index) = u64::try_from(node.index) {
                let values = NodeValues {
                    stored: node.hash.try_into().ok(),
                    chain: None,
                };
                self.settle(walk, 0, stored_index, values)?;
            }
        }
        Ok(())
    }

    /// Judges the stored node at `level`, `index` against the hash the chain gives and the
    /// hash of its stored children (whichever are known), then passes it on to its parent.
    fn place(
        &mut self,
        walk: &mut Walk<'_>,
        level: usize,
        index: u64,
        chain: Option<[u8; 32]>,
        of_stored_children: Option<[u8; 32]>,
    ) -> crate::error::Result<()> {
        if level >= self.peeked.len() {
            return Ok(());
        }
        let stored = self.take_at(level, index)?;
        if let Some(expected) = chain.or(of_stored_children) {
            let agrees = |value: Option<[u8; 32]>| {
                value.is_some_and(|v| stored.as_deref() == Some(v.as_slice()))
            };
            if !agrees(chain) && !agrees(of_stored_children) {
                walk.add(Problem::TreeNodeMismatch {
                    level: level as u32,
                    index,
                    expected: Some(hex::encode(expected)),
                    found: stored.as_ref().map(hex::encode),
                });
            }
        }
        let values = NodeValues {
            stored: stored.and_then(|s| <[u8; 32]>::try_from(s).ok()),
            chain,
        };
        self.settle(walk, level, index, values)
    }

    /// A node passed: a left child waits, a right child works out its parent.
    fn settle(
        &mut self,
        walk: &mut Walk<'_>,
        level: usize,
        index: u64,
        right: NodeValues,
    ) -> crate::error::Result<()> {
        if index % 2 == 0 {
            self.waiting[level] = Some((index, right));
            return Ok(());
        }
        let left = match self.waiting[level].take() {
            Some((left_index, left)) if left_index + 1 == index => left,
            _ => NodeValues::default(),
        };
        let chain = left.chain.zip(right.chain).map(|(l, r)| node_hash(&l, &r));
        let as_chain = left.stored == left.chain && right.stored == right.chain;
        let of_stored_children = if as_chain && chain.is_some() {
            chain
        } else {
            left.stored
                .zip(right.stored)
                .map(|(l, r)| node_hash(&l, &r))
        };
        self.place(walk, level + 1, index / 2, chain, of_stored_children)
    }

    /// The stored hash at `level`, `index`; stored nodes before it (under a gap) are passed.
    fn take_at(&mut self, level: usize, index: u64) -> crate::error::Result<Option<Vec<u8>>> {
        while self.take_before(level, index)?.is_some() {}
        let found = self.peek(level)?.is_some_and(|n| n.index == index as i64);
        Ok(if found {
            self.peeked[level].take().map(|n| n.hash)
        } else {
            None
        })
    }

    /// Takes the next stored node of `level` if its index is below `index`.
    fn take_before(
        &mut self,
        level: usize,
        index: u64,
    ) -> crate::error::Result<Option<StoredNode>> {
        let before = self
            .peek(level)?
            .is_some_and(|n| u64::try_from(n.index).map_or(true, |i| i < index));
        Ok(if before {
            self.peeked[level].take()
        } else {
            None
        })
    }

    fn peek(&mut self, level: usize) -> crate::error::Result<Option<&StoredNode>> {
        if self.peeked[level].is_none() {
            self.peeked[level] = self.scan.next(level as u32)?;
        }
        Ok(self.peeked[level].as_ref())
    }

    /// After the last entry: reports the first stored node that lies beyond the `leaves`
    /// entries the chain holds (the rest are left uncounted; one is enough to show the tree is
    /// longer than the chain).
    fn finish(&mut self, walk: &mut Walk<'_>, leaves: u64) -> crate::error::Result<()> {
        for level in 0..self.peeked.len() {
            while let Some(node) = self.take_before(level, u64::MAX)? {
                if !covers_only(&node, leaves) {
                    walk.add(beyond_the_chain(node));
                    return Ok(());
                }
            }
        }
        if let Some(node) = self.scan.next_above()? {
            walk.add(beyond_the_chain(node));
        }
        Ok(())
    }
}

/// Whether a stored node lies wholly under the first `leaves` leaves (negative positions are
/// never read by a proof and are not judged).
fn covers_only(node: &StoredNode, leaves: u64) -> bool {
    let (Ok(level), Ok(index)) = (u32::try_from(node.level), u64::try_from(node.index)) else {
        return true;
    };
    let end = index
        .checked_add(1)
        .and_then(|n| n.checked_mul(1u64.checked_shl(level)?));
    end.is_some_and(|end| end <= leaves)
}

fn beyond_the_chain(node: StoredNode) -> Problem {
    Problem::TreeNodeMismatch {
        level: u32::try_from(node.level).unwrap_or(u32::MAX),
        index: u64::try_from(node.index).unwrap_or(u64::MAX),
        expected: None,
        found: Some(hex::encode(node.hash)),
    }
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
