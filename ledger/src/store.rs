//! SQLite storage of entries: schema, pragmas, guards, atomic appends and streaming reads.
//!
//! Owns every SQL statement of the project. One append is one `BEGIN IMMEDIATE` transaction in
//! WAL mode with `synchronous=FULL`; triggers refuse UPDATE and DELETE and any insert whose
//! sequence number is not the next one (which also stops `INSERT OR REPLACE`). Reads stream row
//! by row so memory does not grow with the ledger. The triggers are a guard only: the chain is
//! what makes tampering visible.
//!
//! It also owns the table of the RFC 9162 tree's perfect subtree roots (`merkle_nodes`, see
//! `merkle`): each append inserts, in its own transaction, the new leaf and every subtree it
//! completes; the same kind of triggers guard it. A schema-1 file (no tree) opened read-write
//! is given its tree in one transaction; opened read-only it still reads and replays, and tree
//! look-ups report that the tree is not built. This module computes no tree hash itself.

use crate::error::{storage, Result};
use crate::merkle::{self, PerfectNode, SubtreeSource};
use crate::{Entry, EntryHash, LedgerError, PublicKey, Timestamp};
use rusqlite::config::DbConfig;
use rusqlite::{params, Connection, OpenFlags, OptionalExtension, Row, TransactionBehavior};
use std::path::{Path, PathBuf};
use std::time::Duration;

/// `PRAGMA application_id` of an assize ledger ("ASZ1").
pub const APPLICATION_ID: i32 = 0x4153_5A31;
/// Schema version this build writes and reads (3: entries, the tree's node table and the label
/// index; files of versions 1 and 2 are still read, and are upgraded when opened read-write).
pub const SCHEMA_VERSION: i64 = 3;
/// The first schema version with the `merkle_nodes` table.
const TREE_SCHEMA_VERSION: i64 = 2;
/// The first schema version with the `entry_labels` table.
const LABEL_SCHEMA_VERSION: i64 = 3;
/// How long a writer waits for another process's append to finish.
const BUSY_TIMEOUT: Duration = Duration::from_secs(60);

const SCHEMA: &str = "
CREATE TABLE entries (
    seq         INTEGER PRIMARY KEY,
    hash        BLOB    NOT NULL,
    prev_hash   BLOB    NOT NULL,
    record_time INTEGER NOT NULL,
    author      TEXT    NOT NULL,
    kind        TEXT    NOT NULL,
    refs        BLOB    NOT NULL,
    body        BLOB    NOT NULL,
    signer      BLOB,
    signature   BLOB
);
CREATE INDEX entries_by_hash   ON entries(hash);
CREATE INDEX entries_by_kind   ON entries(kind, seq);
CREATE INDEX entries_by_author ON entries(author, seq);
CREATE TABLE entry_refs (
    target BLOB    NOT NULL,
    seq    INTEGER NOT NULL,
    PRIMARY KEY (target, seq)
) WITHOUT ROWID;
CREATE TRIGGER entries_refuse_update BEFORE UPDATE ON entries
BEGIN SELECT RAISE(ABORT, 'assize entries are append-only: UPDATE refused'); END;
CREATE TRIGGER entries_refuse_delete BEFORE DELETE ON entries
BEGIN SELECT RAISE(ABORT, 'assize entries are append-only: DELETE refused'); END;
CREATE TRIGGER entries_only_next_seq BEFORE INSERT ON entries
WHEN NEW.seq IS NOT (SELECT COALESCE(MAX(seq), 0) + 1 FROM entries)
BEGIN SELECT RAISE(ABORT, 'assize entries are append-only: only the next sequence number may be inserted'); END;
CREATE TRIGGER entry_refs_refuse_update BEFORE UPDATE ON entry_refs
BEGIN SELECT RAISE(ABORT, 'assize entries are append-only: UPDATE refused'); END;
CREATE TRIGGER entry_refs_refuse_delete BEFORE DELETE ON entry_refs
BEGIN SELECT RAISE(ABORT, 'assize entries are append-only: DELETE refused'); END;
";

/// The tree's perfect subtree roots (level 0: leaf hashes), and their guards: no UPDATE, no
/// DELETE, and no insert over a node already stored (which would replace it).
const TREE_SCHEMA: &str = "
CREATE TABLE merkle_nodes (
    level INTEGER NOT NULL,
    idx   INTEGER NOT NULL,
    hash  BLOB    NOT NULL,
    PRIMARY KEY (level, idx)
) WITHOUT ROWID;
CREATE TRIGGER merkle_nodes_refuse_update BEFORE UPDATE ON merkle_nodes
BEGIN SELECT RAISE(ABORT, 'assize tree nodes are append-only: UPDATE refused'); END;
CREATE TRIGGER merkle_nodes_refuse_delete BEFORE DELETE ON merkle_nodes
BEGIN SELECT RAISE(ABORT, 'assize tree nodes are append-only: DELETE refused'); END;
CREATE TRIGGER merkle_nodes_refuse_replace BEFORE INSERT ON merkle_nodes
WHEN EXISTS (SELECT 1 FROM merkle_nodes WHERE level = NEW.level AND idx = NEW.idx)
BEGIN SELECT RAISE(ABORT, 'assize tree nodes are append-only: a stored node may not be replaced'); END;
";

/// The label index: names a record is looked up by (a run's id, say), as the kind rules'
/// labeller gives them for each entry at append. It is not covered by the chain: a reader
/// takes a hit only after checking the entry's own body, and falls back to reading the
/// entries of the kind when it finds nothing. Guarded like the other tables.
const LABEL_SCHEMA: &str = "
CREATE TABLE entry_labels (
    kind  TEXT    NOT NULL,
    label TEXT    NOT NULL,
    seq   INTEGER NOT NULL,
    PRIMARY KEY (kind, label, seq)
) WITHOUT ROWID;
CREATE TRIGGER entry_labels_refuse_update BEFORE UPDATE ON entry_labels
BEGIN SELECT RAISE(ABORT, 'assize labels are append-only: UPDATE refused'); END;
CREATE TRIGGER entry_labels_refuse_delete BEFORE DELETE ON entry_labels
BEGIN SELECT RAISE(ABORT, 'assize labels are append-only: DELETE refused'); END;
";

const ENTRY_COLUMNS: &str =
    "seq, hash, prev_hash, record_time, author, kind, refs, body, signer, signature";

/// The last entry of the chain: what the next append links to.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Head {
    /// Its sequence number.
    pub seq: u64,
    /// Its stored hash.
    pub hash: EntryHash,
    /// Its record time.
    pub record_time: Timestamp,
}

/// How to open an existing ledger file.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum OpenMode {
    /// Reads only; never writes the file.
    ReadOnly,
    /// Reads and appends.
    ReadWrite,
}

/// An open ledger file.
pub struct Store {
    conn: Connection,
    path: PathBuf,
    /// The file holds the tree's node table (schema version 2 or later).
    has_tree: bool,
    /// The file holds the label index (schema version 3 or later).
    has_labels: bool,
}

impl Store {
    /// Creates a new, empty ledger file; refuses if anything exists at `path`.
    pub fn create(path: &Path) -> Result<Store> {
        if path.exists() {
            return Err(LedgerError::AlreadyExists { path: path.into() });
        }
        let flags = OpenFlags::SQLITE_OPEN_READ_WRITE
            | OpenFlags::SQLITE_OPEN_CREATE
            | OpenFlags::SQLITE_OPEN_NO_MUTEX;
        let conn =
            Connection::open_with_flags(path, flags).map_err(storage("creating the ledger"))?;
        let journal: String = conn
            .query_row("PRAGMA journal_mode = WAL", [], |r| r.get(0))
            .map_err(storage("switching to WAL"))?;
        if !journal.eq_ignore_ascii_case("wal") {
            return Err(LedgerError::BadInput {
                what: "ledger location".into(),
                reason: format!("the file system does not support WAL journaling ({journal})"),
            });
        }
        let setup = format!(
            "PRAGMA application_id = {APPLICATION_ID}; PRAGMA user_version = {SCHEMA_VERSION};
             BEGIN; {SCHEMA} {TREE_SCHEMA} {LABEL_SCHEMA} COMMIT;"
        );
        conn.execute_batch(&setup)
            .map_err(storage("writing the schema"))?;
        Self::configure(&conn)?;
        Ok(Store {
            conn,
            path: path.into(),
            has_tree: true,
            has_labels: true,
        })
    }

    /// Opens an existing ledger, checking it is one and that its schema is understood.
    pub fn open(path: &Path, mode: OpenMode) -> Result<Store> {
        if !path.exists() {
            return Err(LedgerError::LedgerMissing { path: path.into() });
        }
        let access = match mode {
            OpenMode::ReadOnly => OpenFlags::SQLITE_OPEN_READ_ONLY,
            OpenMode::ReadWrite => OpenFlags::SQLITE_OPEN_READ_WRITE,
        };
        let conn = Connection::open_with_flags(path, access | OpenFlags::SQLITE_OPEN_NO_MUTEX)
            .map_err(|e| not_a_ledger(path, e))?;
        let application_id: i32 = conn
            .query_row("PRAGMA application_id", [], |r| r.get(0))
            .map_err(|e| not_a_ledger(path, e))?;
        if application_id != APPLICATION_ID {
            return Err(LedgerError::NotALedger {
                path: path.into(),
                detail: if application_id == 0 {
                    "an empty file or a SQLite database of another program".into()
                } else {
                    format!(
                        "a SQLite database of another program (application id {application_id:#x})"
                    )
                },
            });
        }
        let version: i64 = conn
            .query_row("PRAGMA user_version", [], |r| r.get(0))
            .map_err(storage("reading the schema version"))?;
        if version > SCHEMA_VERSION {
            return Err(LedgerError::NewerSchema {
                found: version,
                supported: SCHEMA_VERSION,
            });
        }
        if version < 1 {
            return Err(LedgerError::NotALedger {
                path: path.into(),
                detail: format!("schema version {version}"),
            });
        }
        Self::configure(&conn)?;
        let mut store = Store {
            conn,
            path: path.into(),
            has_tree: version >= TREE_SCHEMA_VERSION,
            has_labels: version >= LABEL_SCHEMA_VERSION,
        };
        if !store.has_tree && mode == OpenMode::ReadWrite {
            store.build_tree()?;
        }
        Ok(store)
    }

    /// Upgrades a schema-1 file: creates the node table and its guards and fills it from the
    /// stored entries in order, all in one write transaction (another process may have done it
    /// first, which is then left as it is).
    fn build_tree(&mut self) -> Result<()> {
        let tx = self
            .conn
            .transaction_with_behavior(TransactionBehavior::Immediate)
            .map_err(storage("starting to build the tree"))?;
        let version: i64 = tx
            .query_row("PRAGMA user_version", [], |r| r.get(0))
            .map_err(storage("reading the schema version"))?;
        if version < TREE_SCHEMA_VERSION {
            tx.execute_batch(TREE_SCHEMA)
                .map_err(storage("creating the tree table"))?;
            fill_tree(&tx)?;
            tx.execute_batch(&format!("PRAGMA user_version = {TREE_SCHEMA_VERSION}"))
                .map_err(storage("writing the schema version"))?;
        }
        tx.commit().map_err(storage("committing the tree"))?;
        self.has_tree = true;
        Ok(())
    }

    /// Upgrades a file without the label index (schema 1 or 2, its tree already built):
    /// creates the table and its guards and labels every stored entry with `labels_of`, all in
    /// one write transaction (another process may have done it first, which is then left as
    /// it is).
    pub(crate) fn build_labels(
        &mut self,
        labels_of: impl Fn(&str, &[u8]) -> Vec<String>,
    ) -> Result<()> {
        let tx = self
            .conn
            .transaction_with_behavior(TransactionBehavior::Immediate)
            .map_err(storage("starting to build the label index"))?;
        let version: i64 = tx
            .query_row("PRAGMA user_version", [], |r| r.get(0))
            .map_err(storage("reading the schema version"))?;
        if version < LABEL_SCHEMA_VERSION {
            tx.execute_batch(LABEL_SCHEMA)
                .map_err(storage("creating the label index"))?;
            {
                let read = |e: rusqlite::Error| storage("reading entries to label them")(e);
                let mut statement = tx
                    .prepare("SELECT seq, kind, body FROM entries ORDER BY seq")
                    .map_err(read)?;
                let mut rows = statement.query([]).map_err(read)?;
                while let Some(row) = rows.next().map_err(read)? {
                    let seq = row.get::<_, i64>(0).map_err(read)? as u64;
                    let kind: String = row.get(1).map_err(read)?;
                    let labels = match row.get_ref(2).map_err(read)? {
                        rusqlite::types::ValueRef::Blob(body) => labels_of(&kind, body),
                        _ => Vec::new(),
                    };
                    insert_labels(&tx, seq, &kind, &labels)?;
                }
            }
            tx.execute_batch(&format!("PRAGMA user_version = {LABEL_SCHEMA_VERSION}"))
                .map_err(storage("writing the schema version"))?;
        }
        tx.commit().map_err(storage("committing the label index"))?;
        self.has_labels = true;
        Ok(())
    }

    /// Whether the file holds the label index (false only for a file of schema 1 or 2 opened
    /// read-only).
    pub fn has_labels(&self) -> bool {
        self.has_labels
    }

    /// Sequence numbers the label index gives for `label` among entries of `kind`, oldest
    /// first; `None` when the file has no label index. A hint only: check each entry's body.
    pub fn labelled(&self, kind: &str, label: &str) -> Result<Option<Vec<u64>>> {
        if !self.has_labels {
            return Ok(None);
        }
        let mut statement = self
            .conn
            .prepare_cached(
                "SELECT seq FROM entry_labels WHERE kind = ?1 AND label = ?2 ORDER BY seq",
            )
            .map_err(storage("reading the label index"))?;
        let rows = statement
            .query_map(params![kind, label], |r| r.get::<_, i64>(0))
            .map_err(storage("reading the label index"))?;
        rows.map(|r| r.map(|s| s as u64))
            .collect::<rusqlite::Result<Vec<_>>>()
            .map(Some)
            .map_err(storage("reading the label index"))
    }

    fn configure(conn: &Connection) -> Result<()> {
        conn.busy_timeout(BUSY_TIMEOUT)
            .map_err(storage("setting the busy timeout"))?;
        conn.pragma_update(None, "synchronous", "FULL")
            .map_err(storage("setting synchronous=FULL"))?;
        // Query-planner stability: a cached statement keeps its plan whatever is bound to it.
        // Without this, the bundled SQLite (built with STAT4) marks some parameters as
        // plan-relevant and compiles the statement again on every new binding, which cost the
        // replay's per-reference hash lookup about a tenth of its time.
        conn.set_db_config(DbConfig::SQLITE_DBCONFIG_ENABLE_QPSG, true)
            .map_err(storage("fixing query plans (QPSG)"))?;
        Ok(())
    }

    /// Path of the ledger file.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Whether the file holds the tree (false only for a schema-1 file opened read-only).
    pub fn has_tree(&self) -> bool {
        self.has_tree
    }

    /// Refuses tree look-ups on a file whose tree was never built.
    pub(crate) fn require_tree(&self) -> Result<()> {
        if self.has_tree {
            Ok(())
        } else {
            Err(LedgerError::TreeNotBuilt {
                path: self.path.clone(),
            })
        }
    }

    /// Streams the stored tree nodes for replay, in order, one cursor per level below `levels`
    /// (each ordered by index) and one for any row at or above `levels`, all read alongside
    /// whatever `visit` reads from this connection.
    pub(crate) fn scan_tree_nodes<R>(
        &self,
        levels: u32,
        visit: impl FnOnce(&mut NodeScan<'_>) -> Result<R>,
    ) -> Result<R> {
        self.require_tree()?;
        let read = |e: rusqlite::Error| storage("reading tree nodes")(e);
        let mut per_level = (0..levels)
            .map(|_| {
                self.conn.prepare(
                    "SELECT level, idx, hash FROM merkle_nodes WHERE level = ?1 ORDER BY idx",
                )
            })
            .collect::<rusqlite::Result<Vec<_>>>()
            .map_err(read)?;
        let mut above = self
            .conn
            .prepare(
                "SELECT level, idx, hash FROM merkle_nodes WHERE level >= ?1 ORDER BY level, idx",
            )
            .map_err(read)?;
        let level_rows = per_level
            .iter_mut()
            .zip(0i64..)
            .map(|(statement, level)| statement.query([level]))
            .collect::<rusqlite::Result<Vec<_>>>()
            .map_err(read)?;
        let above_rows = above.query([i64::from(levels)]).map_err(read)?;
        let mut scan = NodeScan {
            levels: level_rows,
            above: above_rows,
        };
        visit(&mut scan)
    }

    /// The last entry, if any.
    pub fn head(&self) -> Result<Option<Head>> {
        read_head(&self.conn)
    }

    /// Sequence number of the first entry stored with this hash.
    pub fn seq_of_hash(&self, hash: &EntryHash) -> Result<Option<u64>> {
        seq_of_hash(&self.conn, hash)
    }

    /// One entry by sequence number.
    pub fn entry(&self, seq: u64) -> Result<Option<Entry>> {
        let sql = format!("SELECT {ENTRY_COLUMNS} FROM entries WHERE seq = ?1");
        self.conn
            .prepare_cached(&sql)
            .and_then(|mut s| s.query_row([seq as i64], row_to_entry).optional())
            .map_err(storage("reading an entry"))
    }

    /// Calls `visit` for each entry with `seq >= from_seq` in order, one row in memory at a
    /// time; stops early when `visit` returns `Ok(false)`. A row that does not form an entry is
    /// an error here (replay uses [`Store::for_each_row`] to report it and go on).
    pub fn for_each_entry(
        &self,
        from_seq: u64,
        mut visit: impl FnMut(Entry) -> Result<bool>,
    ) -> Result<()> {
        self.for_each_row(from_seq, |read| match read {
            RowRead::Entry(entry) => visit(*entry),
            RowRead::Malformed { seq, detail } => Err(LedgerError::Codec {
                what: format!("the stored row of entry {seq}"),
                reason: detail,
            }),
        })
    }

    /// Like [`Store::for_each_entry`], but a row whose columns cannot form an entry (wrong blob
    /// length, wrong type) is handed to `visit` as [`RowRead::Malformed`] instead of stopping
    /// the walk, so replay can report it and go on.
    pub fn for_each_row(
        &self,
        from_seq: u64,
        mut visit: impl FnMut(RowRead) -> Result<bool>,
    ) -> Result<()> {
        let sql = format!("SELECT {ENTRY_COLUMNS} FROM entries WHERE seq >= ?1 ORDER BY seq");
        let mut statement = self
            .conn
            .prepare(&sql)
            .map_err(storage("reading entries"))?;
        let mut rows = statement
            .query([from_seq as i64])
            .map_err(storage("reading entries"))?;
        while let Some(row) = rows.next().map_err(storage("reading entries"))? {
            let read = match row_to_entry(row) {
                Ok(entry) => RowRead::Entry(Box::new(entry)),
                Err(e) => RowRead::Malformed {
                    seq: row.get::<_, i64>(0).map_or(0, |s| s as u64),
                    detail: e.to_string(),
                },
            };
            if !visit(read)? {
                break;
            }
        }
        Ok(())
    }

    /// Entries matching a filter, oldest first, at most `limit`.
    pub fn find(&self, filter: &EntryFilter, limit: usize) -> Result<Vec<Entry>> {
        let sql = format!(
            "SELECT {ENTRY_COLUMNS} FROM entries
             WHERE seq > ?1 AND (?2 IS NULL OR kind = ?2) AND (?3 IS NULL OR author = ?3)
             ORDER BY seq LIMIT ?4"
        );
        let mut statement = self
            .conn
            .prepare(&sql)
            .map_err(storage("finding entries"))?;
        let rows = statement
            .query_map(
                params![
                    filter.after_seq as i64,
                    filter.kind,
                    filter.author,
                    limit.min(i64::MAX as usize) as i64
                ],
                row_to_entry,
            )
            .map_err(storage("finding entries"))?;
        rows.collect::<rusqlite::Result<Vec<_>>>()
            .map_err(storage("finding entries"))
    }

    /// Sequence numbers of entries that reference `target`, oldest first.
    pub fn referencing(&self, target: &EntryHash) -> Result<Vec<u64>> {
        let mut statement = self
            .conn
            .prepare_cached("SELECT seq FROM entry_refs WHERE target = ?1 ORDER BY seq")
            .map_err(storage("finding references"))?;
        let rows = statement
            .query_map([target.0.as_slice()], |r| r.get::<_, i64>(0))
            .map_err(storage("finding references"))?;
        rows.map(|r| r.map(|s| s as u64))
            .collect::<rusqlite::Result<Vec<_>>>()
            .map_err(storage("finding references"))
    }

    /// Entries of the given kinds after `after_seq`, oldest first.
    pub fn entries_of_kinds_after(&self, kinds: &[&str], after_seq: u64) -> Result<Vec<Entry>> {
        entries_of_kinds_after(&self.conn, kinds, after_seq)
    }

    /// Sequence numbers of the entries of `kind` that name `target`, oldest first. It walks
    /// the entries of that kind and looks each up in the reference index, so it is quick for
    /// rare kinds (corrections) whatever else names the target (a balance is named by every
    /// weighing on it).
    pub fn of_kind_naming(&self, kind: &str, target: &EntryHash) -> Result<Vec<u64>> {
        let mut statement = self
            .conn
            .prepare_cached(
                "SELECT e.seq FROM entries AS e INDEXED BY entries_by_kind
                 WHERE e.kind = ?1
                   AND EXISTS (SELECT 1 FROM entry_refs AS r WHERE r.target = ?2 AND r.seq = e.seq)
                 ORDER BY e.seq",
            )
            .map_err(storage("finding references of a kind"))?;
        let rows = statement
            .query_map(params![kind, target.0.as_slice()], |r| r.get::<_, i64>(0))
            .map_err(storage("finding references of a kind"))?;
        rows.map(|r| r.map(|s| s as u64))
            .collect::<rusqlite::Result<Vec<_>>>()
            .map_err(storage("finding references of a kind"))
    }

    /// Entries of one kind with `after_seq < seq < before_seq`, oldest first, at most
    /// `limit`, through the kind index (it never reads entries of other kinds).
    pub fn of_kind_between(
        &self,
        kind: &str,
        after_seq: u64,
        before_seq: u64,
        limit: usize,
    ) -> Result<Vec<Entry>> {
        let sql = format!(
            "SELECT {ENTRY_COLUMNS} FROM entries INDEXED BY entries_by_kind
             WHERE kind = ?1 AND seq > ?2 AND seq < ?3 ORDER BY seq LIMIT ?4"
        );
        let mut statement = self
            .conn
            .prepare_cached(&sql)
            .map_err(storage("reading entries of a kind"))?;
        let rows = statement
            .query_map(
                params![
                    kind,
                    after_seq.min(i64::MAX as u64) as i64,
                    before_seq.min(i64::MAX as u64) as i64,
                    limit.min(i64::MAX as usize) as i64
                ],
                row_to_entry,
            )
            .map_err(storage("reading entries of a kind"))?;
        rows.collect::<rusqlite::Result<Vec<_>>>()
            .map_err(storage("reading entries of a kind"))
    }

    /// Starts an append: takes the write lock (`BEGIN IMMEDIATE`) until commit or drop.
    pub fn begin_append(&mut self) -> Result<AppendTx<'_>> {
        let tx = self
            .conn
            .transaction_with_behavior(TransactionBehavior::Immediate)
            .map_err(storage("starting an append"))?;
        Ok(AppendTx { tx })
    }
}

impl SubtreeSource for Store {
    fn perfect_root(&self, level: u32, index: u64) -> Result<[u8; 32]> {
        self.require_tree()?;
        read_node(&self.conn, level, index)
    }
}

/// One stored tree node as a scan reads it, unjudged (its hash may not be 32 bytes).
#[derive(Clone, Debug, PartialEq, Eq)]
pub(crate) struct StoredNode {
    /// Level as stored.
    pub level: i64,
    /// Index as stored.
    pub index: i64,
    /// Hash bytes as stored.
    pub hash: Vec<u8>,
}

/// Ordered cursors over the node table (see [`Store::scan_tree_nodes`]).
pub(crate) struct NodeScan<'s> {
    levels: Vec<rusqlite::Rows<'s>>,
    above: rusqlite::Rows<'s>,
}

impl NodeScan<'_> {
    /// Number of levels with a cursor of their own.
    pub(crate) fn levels(&self) -> u32 {
        self.levels.len() as u32
    }

    /// The next stored node of `level` (by index), if any.
    pub(crate) fn next(&mut self, level: u32) -> Result<Option<StoredNode>> {
        match self.levels.get_mut(level as usize) {
            Some(rows) => next_node(rows),
            None => Ok(None),
        }
    }

    /// The next stored node at a level without a cursor of its own.
    pub(crate) fn next_above(&mut self) -> Result<Option<StoredNode>> {
        next_node(&mut self.above)
    }
}

fn next_node(rows: &mut rusqlite::Rows<'_>) -> Result<Option<StoredNode>> {
    let read = |e: rusqlite::Error| storage("reading tree nodes")(e);
    let Some(row) = rows.next().map_err(read)? else {
        return Ok(None);
    };
    let hash = match row.get_ref(2).map_err(read)? {
        rusqlite::types::ValueRef::Blob(b) | rusqlite::types::ValueRef::Text(b) => b.to_vec(),
        _ => Vec::new(),
    };
    Ok(Some(StoredNode {
        level: row.get(0).map_err(read)?,
        index: row.get(1).map_err(read)?,
        hash,
    }))
}

/// One row as read by [`Store::for_each_row`].
#[derive(Clone, Debug)]
pub enum RowRead {
    /// A well-formed entry (its hash and signature are still to be checked).
    Entry(Box<Entry>),
    /// A row whose columns do not form an entry.
    Malformed {
        /// Its sequence number.
        seq: u64,
        /// What is wrong with it.
        detail: String,
    },
}

/// Filter for [`Store::find`].
#[derive(Clone, Debug, Default)]
pub struct EntryFilter {
    /// Only entries after this sequence number.
    pub after_seq: u64,
    /// Only this kind.
    pub kind: Option<String>,
    /// Only this author.
    pub author: Option<String>,
}

/// An append in progress; holds the database write lock.
pub struct AppendTx<'a> {
    tx: rusqlite::Transaction<'a>,
}

/// The stored tree under the write lock: what the next leaf's left siblings are read from.
impl SubtreeSource for AppendTx<'_> {
    fn perfect_root(&self, level: u32, index: u64) -> Result<[u8; 32]> {
        read_node(&self.tx, level, index)
    }
}

impl AppendTx<'_> {
    /// The head as seen under the write lock.
    pub fn head(&self) -> Result<Option<Head>> {
        read_head(&self.tx)
    }

    /// The whole last entry, under the write lock.
    pub fn head_entry(&self) -> Result<Option<Entry>> {
        let sql = format!("SELECT {ENTRY_COLUMNS} FROM entries ORDER BY seq DESC LIMIT 1");
        self.tx
            .prepare_cached(&sql)
            .and_then(|mut s| s.query_row([], row_to_entry).optional())
            .map_err(storage("reading the head"))
    }

    /// Sequence number of the entry with this hash, under the write lock.
    pub fn seq_of_hash(&self, hash: &EntryHash) -> Result<Option<u64>> {
        seq_of_hash(&self.tx, hash)
    }

    /// Entries of the given kinds after `after_seq`, under the write lock.
    pub fn entries_of_kinds_after(&self, kinds: &[&str], after_seq: u64) -> Result<Vec<Entry>> {
        entries_of_kinds_after(&self.tx, kinds, after_seq)
    }

    /// Inserts the entry, its reference index rows, and its leaf with every tree node the leaf
    /// completes.
    pub fn insert(&self, entry: &Entry) -> Result<()> {
        self.insert_with_frontier(entry, &mut TreeFrontier::default())
    }

    /// Like [`AppendTx::insert`], taking the left siblings of the new tree nodes from
    /// `frontier` when it holds them (else from the stored tree) and leaving in it the
    /// frontier of the tree with this entry. The caller keeps `frontier` only while nobody
    /// else appends (it must describe the stored tree, or be empty).
    pub fn insert_with_frontier(&self, entry: &Entry, frontier: &mut TreeFrontier) -> Result<()> {
        let refs: Vec<u8> = entry.references.iter().flat_map(|r| r.0).collect();
        self.tx
            .prepare_cached(&format!(
                "INSERT INTO entries ({ENTRY_COLUMNS}) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10)"
            ))
            .and_then(|mut s| {
                s.execute(params![
                    entry.seq as i64,
                    entry.hash.0.as_slice(),
                    entry.prev_hash.0.as_slice(),
                    entry.record_time.0,
                    entry.author,
                    entry.kind,
                    refs,
                    entry.body,
                    entry.signer.map(|k| k.0.to_vec()),
                    entry.signature.map(|s| s.to_vec()),
                ])
            })
            .map_err(storage("inserting an entry"))?;
        let mut distinct = entry.references.clone();
        distinct.sort();
        distinct.dedup();
        for target in distinct {
            self.tx
                .prepare_cached("INSERT INTO entry_refs (target, seq) VALUES (?1, ?2)")
                .and_then(|mut s| s.execute(params![target.0.as_slice(), entry.seq as i64]))
                .map_err(storage("indexing references"))?;
        }
        let leaf_index = entry
            .seq
            .checked_sub(1)
            .ok_or_else(|| LedgerError::BadInput {
                what: "sequence number".into(),
                reason: "entries are numbered from 1".into(),
            })?;
        let source = FrontierFirst {
            frontier,
            stored: self,
        };
        let nodes =
            merkle::nodes_completed_by(&source, leaf_index, merkle::leaf_hash(&entry.hash.0))?;
        for node in &nodes {
            insert_node(&self.tx, node)?;
        }
        frontier.advance(entry.seq, &nodes);
        Ok(())
    }

    /// Adds the label index rows of entry `seq` (inserted in this transaction).
    pub fn insert_labels(&self, seq: u64, kind: &str, labels: &[String]) -> Result<()> {
        insert_labels(&self.tx, seq, kind, labels)
    }

    /// Makes the append durable.
    pub fn commit(self) -> Result<()> {
        self.tx.commit().map_err(storage("committing an append"))
    }
}

fn insert_labels(conn: &Connection, seq: u64, kind: &str, labels: &[String]) -> Result<()> {
    for label in labels {
        conn.prepare_cached(
            "INSERT OR IGNORE INTO entry_labels (kind, label, seq) VALUES (?1, ?2, ?3)",
        )
        .and_then(|mut s| s.execute(params![kind, label, seq as i64]))
        .map_err(storage("indexing labels"))?;
    }
    Ok(())
}

/// The perfect subtree roots of the tree's right edge ("frontier"): for a tree of `size`
/// leaves, one root per set bit of `size`. The next leaf's new nodes need exactly these as
/// their left siblings, so an appender that keeps them never reads the tree back.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct TreeFrontier {
    /// Leaves of the tree described; 0 with no roots when unknown (read from the store then).
    size: u64,
    /// `(level, index, hash)` of each frontier root.
    roots: Vec<PerfectNode>,
}

impl TreeFrontier {
    /// The roots after appending leaf `size` (its seq), given the nodes it completed.
    fn advance(&mut self, size: u64, completed: &[PerfectNode]) {
        let known = self.size + 1 == size;
        self.size = size;
        self.roots.extend_from_slice(completed);
        if !known {
            // Started from the store: keep only what this leaf made; the rest is read back.
            self.roots = completed.to_vec();
        }
        self.roots.retain(|node| {
            size & (1u64 << node.level) != 0 && (size >> node.level) == node.index + 1
        });
    }

    fn get(&self, level: u32, index: u64) -> Option<[u8; 32]> {
        self.roots
            .iter()
            .find(|n| n.level == level && n.index == index)
            .map(|n| n.hash)
    }
}

/// Left siblings from the kept frontier, else from the stored tree.
struct FrontierFirst<'a, 'b> {
    frontier: &'a TreeFrontier,
    stored: &'a AppendTx<'b>,
}

impl SubtreeSource for FrontierFirst<'_, '_> {
    fn perfect_root(&self, level: u32, index: u64) -> Result<[u8; 32]> {
        match self.frontier.get(level, index) {
            Some(hash) => Ok(hash),
            None => read_node(&self.stored.tx, level, index),
        }
    }
}

fn read_head(conn: &Connection) -> Result<Option<Head>> {
    conn.prepare_cached("SELECT seq, hash, record_time FROM entries ORDER BY seq DESC LIMIT 1")
        .and_then(|mut s| {
            s.query_row([], |r| {
                Ok(Head {
                    seq: r.get::<_, i64>(0)? as u64,
                    hash: hash_column(r, 1)?,
                    record_time: Timestamp(r.get(2)?),
                })
            })
            .optional()
        })
        .map_err(storage("reading the head"))
}

/// Inserts the leaf of entry `seq` and the nodes it completes, reading left siblings from
/// `source` (the same connection).
fn insert_leaf(
    conn: &Connection,
    source: &impl SubtreeSource,
    seq: u64,
    hash: &EntryHash,
) -> Result<()> {
    let leaf_index = seq.checked_sub(1).ok_or_else(|| LedgerError::BadInput {
        what: "sequence number".into(),
        reason: "entries are numbered from 1".into(),
    })?;
    for node in merkle::nodes_completed_by(source, leaf_index, merkle::leaf_hash(&hash.0))? {
        insert_node(conn, &node)?;
    }
    Ok(())
}

fn insert_node(conn: &Connection, node: &PerfectNode) -> Result<()> {
    conn.prepare_cached("INSERT INTO merkle_nodes (level, idx, hash) VALUES (?1, ?2, ?3)")
        .and_then(|mut s| {
            s.execute(params![
                i64::from(node.level),
                node.index as i64,
                node.hash.as_slice()
            ])
        })
        .map(|_| ())
        .map_err(storage("inserting a tree node"))
}

fn read_node(conn: &Connection, level: u32, index: u64) -> Result<[u8; 32]> {
    let stored: Option<Vec<u8>> = conn
        .prepare_cached("SELECT hash FROM merkle_nodes WHERE level = ?1 AND idx = ?2")
        .and_then(|mut s| {
            s.query_row(params![i64::from(level), index as i64], |r| r.get(0))
                .optional()
        })
        .map_err(storage("reading a tree node"))?;
    let stored = stored.ok_or_else(|| merkle::missing_node(level, index))?;
    stored.try_into().map_err(|_| LedgerError::Codec {
        what: format!("merkle tree node at level {level}, index {index}"),
        reason: "the stored hash is not 32 bytes".into(),
    })
}

/// The tree read from the node table under construction (for [`fill_tree`]).
struct NodeReader<'c>(&'c Connection);

impl SubtreeSource for NodeReader<'_> {
    fn perfect_root(&self, level: u32, index: u64) -> Result<[u8; 32]> {
        read_node(self.0, level, index)
    }
}

/// Fills an empty node table from the stored entry hashes, in sequence order; refuses when
/// entries are missing, since leaf `seq - 1` must be entry `seq`.
fn fill_tree(conn: &Connection) -> Result<()> {
    let read = |e: rusqlite::Error| storage("reading entries to build the tree")(e);
    let mut statement = conn
        .prepare("SELECT seq, hash FROM entries ORDER BY seq")
        .map_err(read)?;
    let mut rows = statement.query([]).map_err(read)?;
    let reader = NodeReader(conn);
    let mut expected_seq = 1u64;
    while let Some(row) = rows.next().map_err(read)? {
        let seq = row.get::<_, i64>(0).map_err(read)? as u64;
        if seq != expected_seq {
            return Err(LedgerError::Refused {
                reason: format!(
                    "cannot build the merkle tree: entry {expected_seq} is missing (the next stored entry is {seq}); replay the ledger to see what is wrong"
                ),
            });
        }
        let hash = hash_column(row, 1).map_err(read)?;
        insert_leaf(conn, &reader, seq, &hash)?;
        expected_seq += 1;
    }
    Ok(())
}

fn entries_of_kinds_after(conn: &Connection, kinds: &[&str], after_seq: u64) -> Result<Vec<Entry>> {
    let placeholders = vec!["?"; kinds.len()].join(", ");
    let sql = format!(
        "SELECT {ENTRY_COLUMNS} FROM entries WHERE kind IN ({placeholders}) AND seq > ? ORDER BY seq"
    );
    let mut values: Vec<rusqlite::types::Value> =
        kinds.iter().map(|k| k.to_string().into()).collect();
    values.push((after_seq as i64).into());
    let mut statement = conn
        .prepare_cached(&sql)
        .map_err(storage("reading registry"))?;
    let rows = statement
        .query_map(rusqlite::params_from_iter(values), row_to_entry)
        .map_err(storage("reading registry"))?;
    rows.collect::<rusqlite::Result<Vec<_>>>()
        .map_err(storage("reading registry"))
}

fn seq_of_hash(conn: &Connection, hash: &EntryHash) -> Result<Option<u64>> {
    conn.prepare_cached("SELECT MIN(seq) FROM entries WHERE hash = ?1")
        .and_then(|mut s| s.query_row([hash.0.as_slice()], |r| r.get::<_, Option<i64>>(0)))
        .map(|seq| seq.map(|s| s as u64))
        .map_err(storage("looking up a hash"))
}

fn blob_error(column: usize, what: &str) -> rusqlite::Error {
    rusqlite::Error::FromSqlConversionFailure(
        column,
        rusqlite::types::Type::Blob,
        format!("stored {what} has the wrong length").into(),
    )
}

fn hash_column(row: &Row<'_>, column: usize) -> rusqlite::Result<EntryHash> {
    let bytes: Vec<u8> = row.get(column)?;
    EntryHash::from_slice(&bytes).ok_or_else(|| blob_error(column, "hash"))
}

fn row_to_entry(row: &Row<'_>) -> rusqlite::Result<Entry> {
    let refs: Vec<u8> = row.get(6)?;
    if refs.len() % 32 != 0 {
        return Err(blob_error(6, "reference list"));
    }
    let signer: Option<Vec<u8>> = row.get(8)?;
    let signer = match signer {
        None => None,
        Some(b) => Some(PublicKey(b.try_into().map_err(|_| blob_error(8, "key"))?)),
    };
    let signature: Option<Vec<u8>> = row.get(9)?;
    let signature = match signature {
        None => None,
        Some(b) => {
            Some(<[u8; 64]>::try_from(b.as_slice()).map_err(|_| blob_error(9, "signature"))?)
        }
    };
    Ok(Entry {
        seq: row.get::<_, i64>(0)? as u64,
        hash: hash_column(row, 1)?,
        prev_hash: hash_column(row, 2)?,
        record_time: Timestamp(row.get(3)?),
        author: row.get(4)?,
        kind: row.get(5)?,
        references: refs
            .chunks_exact(32)
            .map(|c| EntryHash::from_slice(c).expect("chunks are 32 bytes"))
            .collect(),
        body: row.get(7)?,
        signer,
        signature,
    })
}

fn not_a_ledger(path: &Path, error: rusqlite::Error) -> LedgerError {
    match error.sqlite_error_code() {
        Some(rusqlite::ErrorCode::NotADatabase) => LedgerError::NotALedger {
            path: path.into(),
            detail: "not a SQLite database".into(),
        },
        _ => LedgerError::Storage {
            action: "opening the ledger",
            source: error,
        },
    }
}

#[cfg(test)]
mod frontier_tests {
    use super::TreeFrontier;
    use crate::merkle::{leaf_hash, MemoryTree};

    /// After every leaf, the kept frontier is exactly the perfect roots at the set bits of the
    /// tree's size (RFC 9162's tree of `n` leaves decomposes into those subtrees), with the
    /// hashes of a tree kept in full.
    #[test]
    fn the_frontier_is_the_roots_at_the_set_bits_of_the_size() {
        let mut full = MemoryTree::new();
        let mut frontier = TreeFrontier::default();
        for n in 1..=300u64 {
            let completed = full.push_leaf_hash(leaf_hash(&n.to_be_bytes()));
            frontier.advance(n, &completed);
            let mut expected: Vec<(u32, u64)> = (0..64)
                .filter(|level| n & (1u64 << level) != 0)
                .map(|level| (level, (n >> level) - 1))
                .collect();
            expected.sort_unstable();
            let mut kept: Vec<(u32, u64)> =
                frontier.roots.iter().map(|r| (r.level, r.index)).collect();
            kept.sort_unstable();
            assert_eq!(kept, expected, "n = {n}");
            for root in &frontier.roots {
                assert_eq!(full.node(root.level, root.index), Some(root.hash));
            }
        }
    }
}
