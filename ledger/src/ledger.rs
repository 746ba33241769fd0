//! The ledger as callers use it: create, open, append signed entries, read, replay, checkpoint.
//!
//! Ties storage, the registry, kind rules and the clock together so that every append is judged
//! by exactly the rules replay will later apply: an entry the registry would flag is refused
//! before it is written, inside the same write transaction that reads the head. Also hands out
//! tree heads and inclusion and consistency proofs of the stored Merkle tree (sizes are entry
//! counts; entry `seq` is leaf `seq - 1`).

use crate::checkpoint::Checkpoint;
use crate::clock::Clock;
use crate::entry::Draft;
use crate::error::Result;
use crate::kinds::REGISTRY_KINDS;
use crate::merkle::{self, TreeHead};
use crate::records::{Enrolment, OpenLedger, Record};
use crate::registry::{Registry, RegistryChange};
use crate::replay::{replay, replay_observed, IntegrityReport, ReplayOptions};
use crate::store::{AppendTx, EntryFilter, Head, Store, TreeFrontier};
use crate::{Entry, EntryHash, KindRules, LedgerError, Role, Signer};
use std::path::Path;
use std::sync::Arc;

pub use crate::store::OpenMode;

/// An open ledger.
pub struct Ledger {
    store: Store,
    rules: KindRules,
    clock: Arc<dyn Clock>,
    registry: Registry,
    /// The head as this handle last checked it under the write lock (its stored hash matched
    /// its contents and the registry was brought up to it); `None` before the first append.
    synced_head: Option<Head>,
    /// The tree's frontier as this handle's last append left it (kept only while the head is
    /// `synced_head`), so appends do not read tree nodes back.
    tree_frontier: TreeFrontier,
}

impl Ledger {
    /// Creates a ledger at `path` and writes its opening entry, which enrols the signer as the
    /// first QA person. Leaves no file behind if anything fails.
    pub fn create(
        path: &Path,
        lab_name: &str,
        founder_name: &str,
        founder: &Signer,
        rules: KindRules,
        clock: Arc<dyn Clock>,
    ) -> Result<(Ledger, Entry)> {
        let mut ledger_id = [0u8; 16];
        getrandom::getrandom(&mut ledger_id).map_err(|e| LedgerError::Io {
            path: path.into(),
            source: std::io::Error::other(e),
        })?;
        let opening = OpenLedger {
            ledger_id,
            lab_name: lab_name.trim().to_string(),
            founder: Enrolment {
                person: founder.person().to_string(),
                name: founder_name.trim().to_string(),
                role: Role::Qa,
                public_key: founder.public_key(),
            },
        };
        let store = Store::create(path)?;
        let mut ledger = Ledger {
            store,
            rules,
            clock,
            registry: Registry::new(),
            synced_head: None,
            tree_frontier: TreeFrontier::default(),
        };
        match ledger.append_record(&opening, founder) {
            Ok(entry) => Ok((ledger, entry)),
            Err(e) => {
                drop(ledger);
                remove_ledger_files(path);
                Err(e)
            }
        }
    }

    /// Opens an existing ledger.
    pub fn open(
        path: &Path,
        mode: OpenMode,
        rules: KindRules,
        clock: Arc<dyn Clock>,
    ) -> Result<Ledger> {
        let mut store = Store::open(path, mode)?;
        if !store.has_labels() && mode == OpenMode::ReadWrite {
            store.build_labels(|kind, body| rules.labels_of(kind, body))?;
        }
        Ok(Ledger {
            store,
            rules,
            clock,
            registry: Registry::new(),
            synced_head: None,
            tree_frontier: TreeFrontier::default(),
        })
    }

    /// Read access to the stored entries.
    pub fn store(&self) -> &Store {
        &self.store
    }

    /// The kind rules this ledger is judged by.
    pub fn rules(&self) -> &KindRules {
        &self.rules
    }

    /// The last entry, if any.
    pub fn head(&self) -> Result<Option<Head>> {
        self.store.head()
    }

    /// One entry.
    pub fn entry(&self, seq: u64) -> Result<Entry> {
        self.store
            .entry(seq)?
            .ok_or(LedgerError::NoSuchEntry { seq })
    }

    /// Entries matching a filter, oldest first.
    pub fn find(&self, filter: &EntryFilter, limit: usize) -> Result<Vec<Entry>> {
        self.store.find(filter, limit)
    }

    /// The registry as of the current head.
    pub fn registry(&mut self) -> Result<&Registry> {
        let newer = self
            .store
            .entries_of_kinds_after(&REGISTRY_KINDS, self.registry.last_seq())?;
        apply_stored_registry_entries(&mut self.registry, &newer)?;
        Ok(&self.registry)
    }

    /// Appends a typed record signed by `signer`, who is its author.
    pub fn append_record<R: Record>(&mut self, record: &R, signer: &Signer) -> Result<Entry> {
        let draft = Draft::of_record(signer.person(), record)?;
        self.append(draft, Some(signer))
    }

    /// Appends a draft, signed by `signer` when given (the signer must be the author).
    ///
    /// Everything happens in one `BEGIN IMMEDIATE` transaction: read the head, bring the
    /// registry up to date, judge authority, resolve references, hash, sign, insert, commit.
    pub fn append(&mut self, draft: Draft, signer: Option<&Signer>) -> Result<Entry> {
        let mut draft = Some(draft);
        let mut entries = self.append_batch(1, signer, |_, _| {
            draft.take().ok_or(LedgerError::BadInput {
                what: "batch".into(),
                reason: "asked for a second draft".into(),
            })
        })?;
        Ok(entries.remove(0))
    }

    /// Appends `count` entries in one transaction: all of them, or none. `build(i, earlier)` makes
    /// the i-th draft and may use the entries already appended in this batch (e.g. to refer to
    /// them by hash). Each entry is judged exactly as a single append would be.
    pub fn append_batch<F>(
        &mut self,
        count: usize,
        signer: Option<&Signer>,
        build: F,
    ) -> Result<Vec<Entry>>
    where
        F: FnMut(usize, &[Entry]) -> Result<Draft>,
    {
        self.append_batch_checked(None, count, signer, build)
    }

    /// Like [`Ledger::append_batch`], for drafts prepared from the ledger as it stood when its
    /// last entry was `prepared_at` (`None`: empty): refused with
    /// [`LedgerError::HeadMoved`], appending nothing, when another writer has appended since.
    /// The head is compared under the write lock, so nothing can be appended between the
    /// comparison and the batch.
    pub fn append_batch_after<F>(
        &mut self,
        prepared_at: Option<&Head>,
        count: usize,
        signer: Option<&Signer>,
        build: F,
    ) -> Result<Vec<Entry>>
    where
        F: FnMut(usize, &[Entry]) -> Result<Draft>,
    {
        let expected = prepared_at.map(|head| (head.seq, head.hash));
        self.append_batch_checked(Some(expected), count, signer, build)
    }

    fn append_batch_checked<F>(
        &mut self,
        expected: Option<Option<(u64, EntryHash)>>,
        count: usize,
        signer: Option<&Signer>,
        mut build: F,
    ) -> Result<Vec<Entry>>
    where
        F: FnMut(usize, &[Entry]) -> Result<Draft>,
    {
        let tx = self.store.begin_append()?;
        let mut head = tx.head()?;
        if let Some(expected) = expected {
            let found = head.as_ref().map(|h| (h.seq, h.hash));
            if found != expected {
                return Err(LedgerError::HeadMoved {
                    expected_seq: expected.map_or(0, |(seq, _)| seq),
                    found_seq: found.map_or(0, |(seq, _)| seq),
                });
            }
        }
        // Changed inside the batch on a copy, kept only once the batch commits.
        let mut frontier = self.tree_frontier.clone();
        if head != self.synced_head {
            frontier = TreeFrontier::default();
            // Another writer appended (or this is our first append): check the head it left
            // and bring the registry up to date, all under the write lock.
            if let Some(head_entry) = tx.head_entry()? {
                refuse_altered_head(&head_entry)?;
            }
            let newer = tx.entries_of_kinds_after(&REGISTRY_KINDS, self.registry.last_seq())?;
            apply_stored_registry_entries(&mut self.registry, &newer)?;
        }
        // Registry changes made inside the batch apply to a copy until the commit succeeds.
        let mut changed_registry: Option<Registry> = None;
        let mut appended: Vec<Entry> = Vec::with_capacity(count);
        for index in 0..count {
            let draft = build(index, &appended)?;
            let registry = changed_registry.as_ref().unwrap_or(&self.registry);
            let judge = Judge {
                rules: &self.rules,
                clock: self.clock.as_ref(),
                registry,
            };
            let (entry, change) = judge.seal(&tx, head, draft, signer)?;
            tx.insert_with_frontier(&entry, &mut frontier)?;
            tx.insert_labels(
                entry.seq,
                &entry.kind,
                &self.rules.labels_of(&entry.kind, &entry.body),
            )?;
            if let Some(change) = change {
                changed_registry
                    .get_or_insert_with(|| self.registry.clone())
                    .apply(entry.seq, entry.record_time, change);
            }
            head = Some(Head {
                seq: entry.seq,
                hash: entry.hash,
                record_time: entry.record_time,
            });
            appended.push(entry);
        }
        tx.commit()?;
        if let Some(registry) = changed_registry {
            self.registry = registry;
        }
        self.synced_head = head;
        self.tree_frontier = frontier;
        Ok(appended)
    }

    /// Replays the whole ledger and reports every integrity problem.
    pub fn replay(&self, options: &ReplayOptions) -> Result<IntegrityReport> {
        replay(&self.store, &self.rules, options)
    }

    /// Replays like [`Ledger::replay`] and hands every entry the walk reads to `observe`, in
    /// order, so a caller builds its own view from the same single read of the file (see
    /// [`crate::replay::replay_observed`]). Trust what `observe` built only as far as the
    /// report allows.
    pub fn replay_observed(
        &self,
        options: &ReplayOptions,
        observe: &mut dyn FnMut(Entry),
    ) -> Result<IntegrityReport> {
        replay_observed(&self.store, &self.rules, options, observe)
    }

    /// The tree head of the first `size` entries (0 up to the head's sequence number): the
    /// RFC 9162 root over their entry hashes.
    pub fn tree_head(&self, size: u64) -> Result<TreeHead> {
        self.check_tree_size(size)?;
        let root = merkle::tree_root(&self.store, size)?;
        Ok(TreeHead { size, root })
    }

    /// The inclusion proof of entry `seq` in the tree of the first `size` entries (RFC 9162
    /// §2.1.3.1); check it with [`merkle::verify_inclusion`] at leaf index `seq - 1` with the
    /// leaf hash of the entry hash.
    pub fn inclusion_proof(&self, seq: u64, size: u64) -> Result<Vec<[u8; 32]>> {
        self.check_tree_size(size)?;
        if seq == 0 || seq > size {
            return Err(LedgerError::BadInput {
                what: "entry for an inclusion proof".into(),
                reason: format!("entry {seq} is not among entries 1 to {size}"),
            });
        }
        merkle::inclusion_proof(&self.store, seq - 1, size)
    }

    /// The consistency proof from the tree of the first `old_size` entries to the tree of the
    /// first `new_size` (RFC 9162 §2.1.4.1); check it with [`merkle::verify_consistency`].
    pub fn consistency_proof(&self, old_size: u64, new_size: u64) -> Result<Vec<[u8; 32]>> {
        self.check_tree_size(new_size)?;
        merkle::consistency_proof(&self.store, old_size, new_size)
    }

    /// Refuses a tree size beyond the head, or any tree look-up on a file whose tree was never
    /// built.
    fn check_tree_size(&self, size: u64) -> Result<()> {
        self.store.require_tree()?;
        let head_seq = self.head()?.map_or(0, |h| h.seq);
        if size > head_seq {
            return Err(LedgerError::BadInput {
                what: "tree size".into(),
                reason: format!("{size} is beyond the last entry {head_seq}"),
            });
        }
        Ok(())
    }

    /// Signs a checkpoint of the current head.
    pub fn checkpoint(&mut self, signer: &Signer) -> Result<Checkpoint> {
        let head = self.head()?.ok_or(LedgerError::Empty)?;
        refuse_altered_head(&self.entry(head.seq)?)?;
        let registry = self.registry()?;
        let ledger_id = registry.ledger_id().ok_or(LedgerError::Empty)?;
        let key_active = registry
            .person(signer.person())
            .is_some_and(|p| p.active_keys().any(|k| k.public_key == signer.public_key()));
        if !key_active {
            return Err(LedgerError::Refused {
                reason: format!(
                    "{} has no active enrolled key matching this key file",
                    signer.person()
                ),
            });
        }
        // Version 2 (with the tree root) wherever the file has its tree; a schema-1 file
        // opened read-write has been given one, so only a read-only schema-1 file gets v1.
        let tree_root = if self.store.has_tree() {
            Some(merkle::tree_root(&self.store, head.seq)?)
        } else {
            None
        };
        Ok(Checkpoint::sign(
            ledger_id,
            head.seq,
            head.hash,
            tree_root,
            self.clock.now(),
            signer,
        ))
    }
}

/// What an append is judged by: the kind rules, the clock and the registry as of the head.
struct Judge<'a> {
    rules: &'a KindRules,
    clock: &'a dyn Clock,
    registry: &'a Registry,
}

impl Judge<'_> {
    /// Judges one draft against the registry and the head, and builds the signed entry.
    fn seal(
        &self,
        tx: &AppendTx<'_>,
        head: Option<Head>,
        draft: Draft,
        signer: Option<&Signer>,
    ) -> Result<(Entry, Option<RegistryChange>)> {
        draft.check()?;
        if let Some(signer) = signer {
            if signer.person() != draft.author {
                return Err(LedgerError::Refused {
                    reason: format!(
                        "the key belongs to {} but the entry is authored by {}",
                        signer.person(),
                        draft.author
                    ),
                });
            }
        }
        let (seq, prev_hash) = head.map_or((1, EntryHash::ZERO), |h| (h.seq + 1, h.hash));
        let record_time = self.clock.now();
        if let Some(head) = head {
            if record_time < head.record_time {
                return Err(LedgerError::ClockBehind {
                    head_time: head.record_time,
                    now: record_time,
                });
            }
        }
        let signer_key = signer.map(Signer::public_key);
        let rule = self.rules.get(&draft.kind);
        let issues =
            self.registry
                .authority_issues(&draft.author, &draft.kind, signer_key.as_ref(), rule);
        if !issues.is_empty() {
            let reason = issues.iter().map(|i| i.to_string()).collect::<Vec<_>>();
            return Err(LedgerError::Refused {
                reason: reason.join("; "),
            });
        }
        let change = self
            .registry
            .check_change(
                seq,
                &draft.author,
                &draft.kind,
                signer_key.as_ref(),
                &draft.body,
            )
            .map_err(|reason| LedgerError::Refused { reason })?;
        for reference in &draft.references {
            if tx.seq_of_hash(reference)?.is_none() {
                return Err(LedgerError::UnknownReference { hash: *reference });
            }
        }
        let mut entry = Entry {
            seq,
            prev_hash,
            record_time,
            author: draft.author,
            kind: draft.kind,
            references: draft.references,
            body: draft.body,
            signer: signer_key,
            signature: None,
            hash: EntryHash::ZERO,
        };
        entry.hash = entry.compute_hash();
        entry.signature = signer.map(|s| s.sign_entry(&entry.hash));
        Ok((entry, change))
    }
}

/// Refuses to build on a head whose stored hash is not the hash of its contents: linking to it
/// (or certifying it in a checkpoint) would hide an alteration.
fn refuse_altered_head(head: &Entry) -> Result<()> {
    if head.compute_hash() != head.hash {
        return Err(LedgerError::Refused {
            reason: format!(
                "the stored hash of the last entry ({}) does not match its contents; the ledger may have been altered",
                head.seq
            ),
        });
    }
    Ok(())
}

/// Applies registry entries already in the ledger (judged when they were appended; replay
/// re-judges them with their signatures). A stored entry that no longer makes sense means the
/// file was altered, so appending stops until the ledger is verified.
pub(crate) fn apply_stored_registry_entries(
    registry: &mut Registry,
    entries: &[Entry],
) -> Result<()> {
    for entry in entries {
        let change = registry
            .check_change(
                entry.seq,
                &entry.author,
                &entry.kind,
                entry.signer.as_ref(),
                &entry.body,
            )
            .map_err(|reason| LedgerError::Refused {
                reason: format!(
                    "registry entry {} is not valid ({reason}); the ledger may have been altered",
                    entry.seq
                ),
            })?;
        if let Some(change) = change {
            registry.apply(entry.seq, entry.record_time, change);
        }
    }
    Ok(())
}

fn remove_ledger_files(path: &Path) {
    for suffix in ["", "-wal", "-shm", "-journal"] {
        let mut name = path.as_os_str().to_owned();
        name.push(suffix);
        let _ = std::fs::remove_file(name);
    }
}
