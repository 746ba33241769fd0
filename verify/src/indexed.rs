//! The index look-ups `explain` reads through, over a ledger file or over a set of entries in
//! memory (an evidence bundle's), so one derivation can be traced from either.
//!
//! [`IndexedEntries`] names exactly the reads the explanation needs: an entry by sequence
//! number or hash, the entries that name a hash, the entries of one kind in a range, the
//! entries of one kind that name a hash, and the label index. The ledger's [`Store`] answers
//! them from SQLite; [`MemoryEntries`] answers them from a sorted list.

use assize_ledger::store::Store;
use assize_ledger::{Entry, EntryHash, LedgerError};
use std::collections::{BTreeMap, HashMap};

/// Index look-ups over stored entries.
pub trait IndexedEntries {
    /// The entry with this sequence number, if held.
    fn entry_at(&self, seq: u64) -> Result<Option<Entry>, LedgerError>;
    /// The sequence number of the entry with this hash, if held.
    fn seq_with_hash(&self, hash: &EntryHash) -> Result<Option<u64>, LedgerError>;
    /// Sequence numbers of the entries that name `hash`, oldest first.
    fn naming(&self, hash: &EntryHash) -> Result<Vec<u64>, LedgerError>;
    /// Sequence numbers of the entries of `kind` that name `hash`, oldest first.
    fn of_kind_naming(&self, kind: &str, hash: &EntryHash) -> Result<Vec<u64>, LedgerError>;
    /// Entries of `kind` with `after < seq < before`, oldest first, at most `limit`.
    fn of_kind_between(
        &self,
        kind: &str,
        after: u64,
        before: u64,
        limit: usize,
    ) -> Result<Vec<Entry>, LedgerError>;
    /// Sequence numbers the label index gives for `label` among entries of `kind`; `None`
    /// when there is no label index to ask.
    fn labelled(&self, kind: &str, label: &str) -> Result<Option<Vec<u64>>, LedgerError>;
}

impl IndexedEntries for Store {
    fn entry_at(&self, seq: u64) -> Result<Option<Entry>, LedgerError> {
        self.entry(seq)
    }

    fn seq_with_hash(&self, hash: &EntryHash) -> Result<Option<u64>, LedgerError> {
        self.seq_of_hash(hash)
    }

    fn naming(&self, hash: &EntryHash) -> Result<Vec<u64>, LedgerError> {
        self.referencing(hash)
    }

    fn of_kind_naming(&self, kind: &str, hash: &EntryHash) -> Result<Vec<u64>, LedgerError> {
        Store::of_kind_naming(self, kind, hash)
    }

    fn of_kind_between(
        &self,
        kind: &str,
        after: u64,
        before: u64,
        limit: usize,
    ) -> Result<Vec<Entry>, LedgerError> {
        Store::of_kind_between(self, kind, after, before, limit)
    }

    fn labelled(&self, kind: &str, label: &str) -> Result<Option<Vec<u64>>, LedgerError> {
        Store::labelled(self, kind, label)
    }
}

/// Entries held in memory, indexed like the store (no label index: look-ups by label read
/// the entries of the kind).
#[derive(Clone, Debug, Default)]
pub struct MemoryEntries {
    by_seq: BTreeMap<u64, Entry>,
    by_hash: HashMap<EntryHash, u64>,
    naming: HashMap<EntryHash, Vec<u64>>,
}

impl MemoryEntries {
    /// Indexes `entries` (their stored hashes are taken as they are; check them first).
    pub fn new(entries: impl IntoIterator<Item = Entry>) -> MemoryEntries {
        let mut held = MemoryEntries::default();
        for entry in entries {
            held.by_hash.insert(entry.hash, entry.seq);
            let mut named = entry.references.clone();
            named.sort();
            named.dedup();
            for target in named {
                held.naming.entry(target).or_default().push(entry.seq);
            }
            held.by_seq.insert(entry.seq, entry);
        }
        for seqs in held.naming.values_mut() {
            seqs.sort_unstable();
        }
        held
    }

    /// The entries held, in sequence order.
    pub fn entries(&self) -> impl Iterator<Item = &Entry> {
        self.by_seq.values()
    }
}

impl IndexedEntries for MemoryEntries {
    fn entry_at(&self, seq: u64) -> Result<Option<Entry>, LedgerError> {
        Ok(self.by_seq.get(&seq).cloned())
    }

    fn seq_with_hash(&self, hash: &EntryHash) -> Result<Option<u64>, LedgerError> {
        Ok(self.by_hash.get(hash).copied())
    }

    fn naming(&self, hash: &EntryHash) -> Result<Vec<u64>, LedgerError> {
        Ok(self.naming.get(hash).cloned().unwrap_or_default())
    }

    fn of_kind_naming(&self, kind: &str, hash: &EntryHash) -> Result<Vec<u64>, LedgerError> {
        Ok(self
            .naming(hash)?
            .into_iter()
            .filter(|seq| self.by_seq.get(seq).is_some_and(|e| e.kind == kind))
            .collect())
    }

    fn of_kind_between(
        &self,
        kind: &str,
        after: u64,
        before: u64,
        limit: usize,
    ) -> Result<Vec<Entry>, LedgerError> {
        if after >= before {
            return Ok(Vec::new());
        }
        Ok(self
            .by_seq
            .range(after.saturating_add(1)..before)
            .map(|(_, e)| e)
            .filter(|e| e.kind == kind)
            .take(limit)
            .cloned()
            .collect())
    }

    fn labelled(&self, _kind: &str, _label: &str) -> Result<Option<Vec<u64>>, LedgerError> {
        Ok(None)
    }
}
