//! Tamper matrix: every way an attacker with the ledger file in hand might alter it, and the
//! problem replay must report for each, located at the altered entry.
//!
//! Each test builds a fresh ledger through the public API (fixed keys, an injected clock),
//! closes it, then edits the SQLite file directly. The attacker has the file and SQLite but not
//! the private keys of the people enrolled, unless a case says otherwise. Attacks that need
//! UPDATE or DELETE first drop the guard triggers and put them back afterwards, so the schema
//! looks untouched: the chain, the signatures and checkpoints kept outside the file are what
//! must catch them. The attacker also keeps the Merkle tree's node table in step with what they
//! changed (it is derived from the stored entry hashes and holds no secret), so the tree never
//! gives an attack away here; `tests/merkle.rs` shows what replay finds when it is left behind.
//! This file is therefore the one place outside `store.rs` that writes SQL against the entries
//! table, on purpose.

use assize_ledger::merkle::{leaf_hash, node_hash};
use assize_ledger::records::{AddKey, ChangeRole, Enrolment, Note, RevokeKey};
use assize_ledger::registry::AuthorityIssue;
use assize_ledger::replay::Anchor;
use assize_ledger::{
    Checkpoint, Draft, Entry, EntryHash, FixedClock, IntegrityReport, KindRules, Ledger,
    MemoryTree, OpenMode, Problem, Record, ReplayOptions, Role, Signer, Timestamp,
};
use rusqlite::{params, Connection};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use tempfile::TempDir;

// ---------------------------------------------------------------------------------------------
// Fixture: one lab, four people, a key revocation and a role change, then signed notes.
// ---------------------------------------------------------------------------------------------

/// QA founder of the ledger, QA throughout.
const FOUNDER: &str = "o.castellwick";
/// Analyst whose first key is revoked (seq 6) and replaced (seq 7).
const ANALYST: &str = "p.dolabra";
/// Reviewer.
const REVIEWER: &str = "y.ferrang";
/// Second QA person, moved to the analyst role at seq 8.
const LEAD: &str = "e.marrowby";

/// Sequence number of the revocation of the analyst's first key.
const FIRST_KEY_REVOKED_AT: u64 = 6;
/// Registry entries take seq 1..=8; the notes start here.
const FIRST_NOTE_SEQ: u64 = 9;

/// Record time of the opening entry; every later reading is one second on.
const START: Timestamp = Timestamp(1_798_000_000_000_000);
const STEP_MICROS: i64 = 1_000_000;
const DAY_MICROS: i64 = 86_400_000_000;

/// A set of fixed test keys; another seed gives another lab's keys for the same person ids.
#[derive(Clone, Copy)]
struct Keys(u8);

const LAB_KEYS: Keys = Keys(10);
const OTHER_LAB_KEYS: Keys = Keys(40);

impl Keys {
    fn founder(self) -> Signer {
        Signer::from_secret(FOUNDER, &[self.0; 32])
    }
    fn analyst_first(self) -> Signer {
        Signer::from_secret(ANALYST, &[self.0 + 1; 32])
    }
    fn analyst(self) -> Signer {
        Signer::from_secret(ANALYST, &[self.0 + 2; 32])
    }
    fn reviewer(self) -> Signer {
        Signer::from_secret(REVIEWER, &[self.0 + 3; 32])
    }
    fn lead(self) -> Signer {
        Signer::from_secret(LEAD, &[self.0 + 4; 32])
    }
}

/// A key of `person` that was never enrolled anywhere.
fn stranger(person: &str) -> Signer {
    Signer::from_secret(person, &[99; 32])
}

/// A temp dir holding one ledger file; the dir is removed when the fixture is dropped.
struct Fixture {
    dir: TempDir,
    path: PathBuf,
}

impl Fixture {
    /// Another file name in the same temp dir.
    fn sibling(&self, name: &str) -> PathBuf {
        self.dir.path().join(name)
    }
}

/// A fresh ledger with the lab's keys and `n_notes` notes after the registry entries; its head
/// is `FIRST_NOTE_SEQ - 1 + n_notes`.
fn fixture(n_notes: u64) -> (Fixture, Ledger) {
    fixture_with(LAB_KEYS, n_notes)
}

fn fixture_with(keys: Keys, n_notes: u64) -> (Fixture, Ledger) {
    let dir = tempfile::tempdir().expect("temp dir");
    let path = dir.path().join("lab.assize");
    let clock = Arc::new(FixedClock::new(START, STEP_MICROS));
    let founder = keys.founder();
    let (mut ledger, _) = Ledger::create(
        &path,
        "Harrowgate Assay Lab",
        "Oona Castellwick",
        &founder,
        KindRules::core(),
        clock,
    )
    .expect("create ledger");
    let first_key = keys.analyst_first();
    let enrol = |person: &str, name: &str, role: Role, key: &Signer| Enrolment {
        person: person.into(),
        name: name.into(),
        role,
        public_key: key.public_key(),
    };
    let analyst = enrol(ANALYST, "Perrin Dolabra", Role::Analyst, &first_key);
    append(&mut ledger, &analyst, &founder); // 2
    let reviewer = enrol(REVIEWER, "Ysolde Ferrang", Role::Reviewer, &keys.reviewer());
    append(&mut ledger, &reviewer, &founder); // 3
    append(
        &mut ledger,
        &enrol(LEAD, "Edda Marrowby", Role::Qa, &keys.lead()),
        &founder,
    ); // 4
    let first_note = Note {
        text: "burette 7 recalibrated".into(),
    };
    append(&mut ledger, &first_note, &first_key); // 5
    let revoke = RevokeKey {
        person: ANALYST.into(),
        public_key: first_key.public_key(),
        reason: "laptop holding the key file was lost".into(),
    };
    append(&mut ledger, &revoke, &first_key); // 6
    let add_key = AddKey {
        person: ANALYST.into(),
        public_key: keys.analyst().public_key(),
        reason: "replaces the lost key".into(),
    };
    append(&mut ledger, &add_key, &founder); // 7
    let demote = ChangeRole {
        person: LEAD.into(),
        role: Role::Analyst,
        reason: "moved to bench work".into(),
    };
    append(&mut ledger, &demote, &founder); // 8
    append_notes(&mut ledger, keys, n_notes, "bench");
    (Fixture { dir, path }, ledger)
}

fn append<R: Record>(ledger: &mut Ledger, record: &R, signer: &Signer) -> Entry {
    ledger.append_record(record, signer).expect("append")
}

/// Appends `n` notes, the four people taking turns (founder, analyst, reviewer, lead).
fn append_notes(ledger: &mut Ledger, keys: Keys, n: u64, topic: &str) {
    let authors = [keys.founder(), keys.analyst(), keys.reviewer(), keys.lead()];
    for i in 0..n {
        let note = Note {
            text: format!("{topic} note {i}: balance check within tolerance"),
        };
        append(ledger, &note, &authors[(i % 4) as usize]);
    }
}

/// Reopens a closed ledger for appending, with a clock `days_later` days after the fixture's.
fn reopen(path: &Path, days_later: i64) -> Ledger {
    let start = Timestamp(START.0 + days_later * DAY_MICROS);
    let clock = Arc::new(FixedClock::new(start, STEP_MICROS));
    Ledger::open(path, OpenMode::ReadWrite, KindRules::core(), clock).expect("reopen ledger")
}

/// Copies a closed ledger file (and a write-ahead log, if one was left) as a plain file copy.
fn copy_ledger(from: &Path, to: &Path) {
    std::fs::copy(from, to).expect("copy ledger file");
    for suffix in ["-wal", "-shm"] {
        let side = |p: &Path| {
            let mut name = p.as_os_str().to_owned();
            name.push(suffix);
            PathBuf::from(name)
        };
        let _ = std::fs::remove_file(side(to));
        if suffix == "-wal" && side(from).exists() {
            std::fs::copy(side(from), side(to)).expect("copy write-ahead log");
        }
    }
}

// ---------------------------------------------------------------------------------------------
// The attacker's tools: plain SQLite on the closed file.
// ---------------------------------------------------------------------------------------------

/// Drops every guard trigger, runs `attack`, brings the tree in step with the altered entries,
/// then recreates the triggers exactly as they were.
fn tamper(path: &Path, attack: impl FnOnce(&Connection) -> rusqlite::Result<()>) {
    let conn = Connection::open(path).expect("open ledger file with SQLite");
    let triggers: Vec<(String, String)> = conn
        .prepare("SELECT name, sql FROM sqlite_master WHERE type = 'trigger'")
        .and_then(|mut s| {
            s.query_map([], |r| Ok((r.get(0)?, r.get(1)?)))?
                .collect::<rusqlite::Result<_>>()
        })
        .expect("list triggers");
    assert!(triggers.len() >= 3, "guard triggers missing: {triggers:?}");
    for (name, _) in &triggers {
        conn.execute_batch(&format!("DROP TRIGGER {name}"))
            .expect("drop trigger");
    }
    attack(&conn).expect("attack runs");
    rebuild_tree(&conn).expect("tree rebuilt");
    for (_, sql) in &triggers {
        conn.execute_batch(sql).expect("recreate trigger");
    }
}

/// Rewrites the tree's node table from the stored entry hashes (leaf `seq - 1` = RFC 9162 leaf
/// hash of entry `seq`'s stored hash), as an attacker who altered entries would. A node is
/// written only when both its children are, so a gap in the entries leaves a hole above it.
fn rebuild_tree(conn: &Connection) -> rusqlite::Result<()> {
    conn.execute("DELETE FROM merkle_nodes", [])?;
    let mut level_nodes: BTreeMap<u64, [u8; 32]> = conn
        .prepare("SELECT seq, hash FROM entries ORDER BY seq")?
        .query_map([], |r| Ok((r.get::<_, i64>(0)?, r.get::<_, Vec<u8>>(1)?)))?
        .map(|row| row.map(|(seq, hash)| (seq as u64 - 1, leaf_hash(&hash))))
        .collect::<rusqlite::Result<_>>()?;
    let mut level = 0i64;
    while !level_nodes.is_empty() {
        for (index, hash) in &level_nodes {
            conn.execute(
                "INSERT INTO merkle_nodes (level, idx, hash) VALUES (?1, ?2, ?3)",
                params![level, *index as i64, hash.as_slice()],
            )?;
        }
        level_nodes = level_nodes
            .iter()
            .filter(|(index, _)| *index % 2 == 0)
            .filter_map(|(index, left)| {
                let right = level_nodes.get(&(index + 1))?;
                Some((index / 2, node_hash(left, right)))
            })
            .collect();
        level += 1;
    }
    Ok(())
}

/// Flips the lowest bit of byte `index` of a BLOB column of entry `seq`.
fn flip_byte(conn: &Connection, column: &str, seq: u64, index: usize) -> rusqlite::Result<()> {
    let select = format!("SELECT {column} FROM entries WHERE seq = ?1");
    let mut bytes: Vec<u8> = conn.query_row(&select, [seq as i64], |r| r.get(0))?;
    bytes[index] ^= 0x01;
    let update = format!("UPDATE entries SET {column} = ?1 WHERE seq = ?2");
    conn.execute(&update, params![bytes, seq as i64])?;
    Ok(())
}

/// Every column but `seq`, for row copies that keep the sequence number.
const CONTENT_COLUMNS: &str =
    "hash, prev_hash, record_time, author, kind, refs, body, signer, signature";

fn insert_row(conn: &Connection, entry: &Entry) -> rusqlite::Result<usize> {
    let refs: Vec<u8> = entry.references.iter().flat_map(|r| r.0).collect();
    conn.execute(
        &format!("INSERT INTO entries (seq, {CONTENT_COLUMNS}) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10)"),
        params![
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
        ],
    )
}

/// Hand-makes the next entry after the real head, correctly linked, hashed and signed by
/// `signer`, and INSERTs it with the tree nodes its leaf completes. The insert guards only ask
/// for the next sequence number and a node not yet stored, so no trigger needs dropping.
/// Returns its sequence number.
fn forge_next<R: Record>(path: &Path, author: &str, record: &R, signer: &Signer) -> u64 {
    let conn = Connection::open(path).expect("open ledger file with SQLite");
    let (head_seq, head_hash, head_time): (i64, Vec<u8>, i64) = conn
        .query_row(
            "SELECT seq, hash, record_time FROM entries ORDER BY seq DESC LIMIT 1",
            [],
            |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)),
        )
        .expect("read head");
    let draft = Draft::of_record(author, record).expect("encode body");
    let mut entry = Entry {
        seq: head_seq as u64 + 1,
        prev_hash: EntryHash::from_slice(&head_hash).expect("32-byte head hash"),
        record_time: Timestamp(head_time + STEP_MICROS),
        author: draft.author,
        kind: draft.kind,
        references: draft.references,
        body: draft.body,
        signer: Some(signer.public_key()),
        signature: None,
        hash: EntryHash::ZERO,
    };
    entry.hash = entry.compute_hash();
    entry.signature = Some(signer.sign_entry(&entry.hash));
    let stored_hashes: Vec<Vec<u8>> = conn
        .prepare("SELECT hash FROM entries ORDER BY seq")
        .and_then(|mut s| {
            s.query_map([], |r| r.get(0))?
                .collect::<rusqlite::Result<_>>()
        })
        .expect("read entry hashes");
    let mut tree = MemoryTree::from_leaf_data(&stored_hashes);
    insert_row(&conn, &entry).expect("insert forged entry");
    for node in tree.push_leaf_hash(leaf_hash(&entry.hash.0)) {
        conn.execute(
            "INSERT INTO merkle_nodes (level, idx, hash) VALUES (?1, ?2, ?3)",
            params![
                i64::from(node.level),
                node.index as i64,
                node.hash.as_slice()
            ],
        )
        .expect("insert forged tree nodes");
    }
    entry.seq
}

// ---------------------------------------------------------------------------------------------
// Judging: replay read-only, in batch and in strict signature mode.
// ---------------------------------------------------------------------------------------------

fn replay(path: &Path, strict_signatures: bool, anchors: &[Anchor]) -> IntegrityReport {
    let clock = Arc::new(FixedClock::new(START, STEP_MICROS));
    let ledger = Ledger::open(path, OpenMode::ReadOnly, KindRules::core(), clock)
        .expect("open ledger read-only");
    let options = ReplayOptions {
        strict_signatures,
        anchors: anchors.to_vec(),
        ..ReplayOptions::default()
    };
    ledger.replay(&options).expect("replay runs")
}

/// Replays with batch signature checks and again with strict single checks; both must find
/// exactly the same problems. Returns the batch report.
fn replay_both(path: &Path, anchors: &[Anchor]) -> IntegrityReport {
    let batch = replay(path, false, anchors);
    let strict = replay(path, true, anchors);
    assert_eq!(
        batch.problems, strict.problems,
        "batch and strict signature modes disagree"
    );
    batch
}

fn assert_broken_at(report: &IntegrityReport, seq: u64) {
    assert!(!report.intact(), "tampering went unnoticed: {report:#?}");
    assert_eq!(
        report.first_broken_seq(),
        Some(seq),
        "wrong location: {:#?}",
        report.problems
    );
}

fn assert_intact(report: &IntegrityReport) {
    assert!(report.intact(), "{:#?}", report.problems);
    assert_eq!(report.first_broken_seq(), None);
}

/// Asserts that some problem of the report matches a pattern (with an optional `if` guard).
macro_rules! assert_found {
    ($report:expr, $($pattern:tt)+) => {
        assert!(
            $report.problems.iter().any(|p| matches!(p, $($pattern)+)),
            "expected `{}` among {:#?}",
            stringify!($($pattern)+),
            $report.problems
        )
    };
}

// ---------------------------------------------------------------------------------------------
// 1-3: editing and removing stored rows.
// ---------------------------------------------------------------------------------------------

#[test]
fn detects_one_changed_body_byte() {
    // Attack: quietly edit what a signed note says, one byte of its stored CBOR body.
    const TARGET: u64 = 12;
    let (fx, ledger) = fixture(10);
    drop(ledger);
    tamper(&fx.path, |c| flip_byte(c, "body", TARGET, 10));
    let report = replay_both(&fx.path, &[]);
    assert_broken_at(&report, TARGET);
    assert_found!(report, Problem::HashMismatch { seq: TARGET, .. });
    assert_found!(report, Problem::SignatureInvalid { seq: TARGET, .. });
    assert_found!(report, Problem::BrokenLink { seq: 13, .. });
    assert_eq!(report.problems.len(), 3, "{:#?}", report.problems);
}

#[test]
fn detects_a_changed_body_whose_stored_hash_was_recomputed() {
    // Attack: edit a body and store the matching new hash, so the row is self-consistent;
    // the author's signature and the next entry's link still hold the old hash.
    const TARGET: u64 = 12;
    let (fx, ledger) = fixture(10);
    let mut entry = ledger.entry(TARGET).expect("read target");
    drop(ledger);
    entry.body = Draft::of_record(
        &entry.author,
        &Note {
            text: "no drift seen".into(),
        },
    )
    .expect("encode body")
    .body;
    let new_hash = entry.compute_hash();
    tamper(&fx.path, |c| {
        let sql = "UPDATE entries SET body = ?1, hash = ?2 WHERE seq = ?3";
        c.execute(
            sql,
            params![entry.body, new_hash.0.as_slice(), TARGET as i64],
        )?;
        Ok(())
    });
    let report = replay_both(&fx.path, &[]);
    assert_broken_at(&report, TARGET);
    assert!(
        matches!(
            report.problems.as_slice(),
            [
                Problem::SignatureInvalid { seq: TARGET, .. },
                Problem::BrokenLink { seq: 13, .. },
            ]
        ),
        "{:#?}",
        report.problems
    );
}

#[test]
fn detects_a_changed_stored_hash() {
    // Attack: overwrite the stored hash of an entry (e.g. to make a forged reference resolve).
    // The next entry links to the recomputed hash, so only the entry itself is wrong.
    const TARGET: u64 = 12;
    let (fx, ledger) = fixture(10);
    drop(ledger);
    tamper(&fx.path, |c| flip_byte(c, "hash", TARGET, 0));
    let report = replay_both(&fx.path, &[]);
    assert_broken_at(&report, TARGET);
    assert!(
        matches!(
            report.problems.as_slice(),
            [Problem::HashMismatch { seq: TARGET, .. }]
        ),
        "{:#?}",
        report.problems
    );
}

#[test]
fn detects_an_entry_deleted_from_the_middle() {
    // Attack: remove one embarrassing entry and leave the rest. The hole is reported by the
    // next entry present, which names the missing sequence number as `expected`.
    const DELETED: u64 = 12;
    const NEXT: u64 = DELETED + 1;
    let (fx, ledger) = fixture(10);
    drop(ledger);
    tamper(&fx.path, |c| {
        c.execute("DELETE FROM entries WHERE seq = ?1", [DELETED as i64])?;
        Ok(())
    });
    let report = replay_both(&fx.path, &[]);
    assert_broken_at(&report, DELETED);
    assert!(
        matches!(
            report.problems.as_slice(),
            [
                Problem::SequenceGap {
                    expected: DELETED,
                    found: NEXT
                },
                Problem::BrokenLink { seq: NEXT, .. },
            ]
        ),
        "{:#?}",
        report.problems
    );
    assert_eq!(report.entries, FIRST_NOTE_SEQ - 1 + 10 - 1);
}

// ---------------------------------------------------------------------------------------------
// 4: truncation, visible only against an anchor kept outside the file.
// ---------------------------------------------------------------------------------------------

/// Builds a ledger with head 18, takes a checkpoint of it, closes it and deletes 17 and 18.
fn truncated_after_checkpoint() -> (Fixture, Checkpoint) {
    let (fx, mut ledger) = fixture(10);
    let checkpoint = ledger.checkpoint(&LAB_KEYS.founder()).expect("checkpoint");
    assert_eq!(checkpoint.seq, 18);
    drop(ledger);
    tamper(&fx.path, |c| {
        c.execute("DELETE FROM entries WHERE seq > 16", [])?;
        Ok(())
    });
    (fx, checkpoint)
}

#[test]
fn truncation_goes_unseen_without_an_anchor() {
    // Attack: cut the last entries off. What is left is a perfectly valid shorter chain, so the
    // file alone cannot tell; this is why checkpoints are kept outside it.
    let (fx, _checkpoint) = truncated_after_checkpoint();
    let report = replay_both(&fx.path, &[]);
    assert_intact(&report);
    assert_eq!(report.entries, 16);
}

#[test]
fn detects_truncation_against_a_checkpoint_and_its_code() {
    // Same attack, judged against the signed checkpoint file and against the short code
    // copied into the paper logbook: the first missing entry is located.
    let (fx, checkpoint) = truncated_after_checkpoint();
    let code = checkpoint.code();
    for anchor in [Anchor::Checkpoint(checkpoint), Anchor::Code(code)] {
        let report = replay_both(&fx.path, &[anchor]);
        assert_broken_at(&report, 17);
        assert_eq!(
            report.problems,
            vec![Problem::AnchorBeyondHead {
                anchor_seq: 18,
                head_seq: 16
            }]
        );
    }
}

#[test]
fn detects_a_resigned_rewrite_of_the_head_only_against_a_checkpoint() {
    // Attack by an insider: the analyst rewrites their own latest note, re-hashes it and
    // re-signs it with their own valid key. Nothing links to the head, so the file is
    // consistent; only the checkpoint taken before the rewrite can tell.
    const HEAD: u64 = 18;
    let (fx, mut ledger) = fixture(10);
    let checkpoint = ledger.checkpoint(&LAB_KEYS.reviewer()).expect("checkpoint");
    let mut entry = ledger.entry(HEAD).expect("read head");
    drop(ledger);
    let analyst = LAB_KEYS.analyst();
    assert_eq!(entry.signer, Some(analyst.public_key()));
    entry.body = Draft::of_record(
        ANALYST,
        &Note {
            text: "all within tolerance".into(),
        },
    )
    .expect("encode body")
    .body;
    entry.hash = entry.compute_hash();
    let signature = analyst.sign_entry(&entry.hash);
    tamper(&fx.path, |c| {
        let sql = "UPDATE entries SET body = ?1, hash = ?2, signature = ?3 WHERE seq = ?4";
        c.execute(
            sql,
            params![
                entry.body,
                entry.hash.0.as_slice(),
                signature.to_vec(),
                HEAD as i64
            ],
        )?;
        Ok(())
    });
    assert_intact(&replay_both(&fx.path, &[]));
    let code = checkpoint.code();
    for anchor in [Anchor::Checkpoint(checkpoint), Anchor::Code(code)] {
        let signed = matches!(anchor, Anchor::Checkpoint(_));
        let report = replay_both(&fx.path, &[anchor]);
        assert_broken_at(&report, HEAD);
        // The rewrite kept the tree in step with the new head hash, so the signed checkpoint's
        // tree root no longer matches either (the short code has no tree root).
        let as_expected = match report.problems.as_slice() {
            [Problem::AnchorHashDiffers {
                anchor_seq: HEAD,
                found,
                ..
            }] => !signed && *found == entry.hash,
            [Problem::AnchorHashDiffers {
                anchor_seq: HEAD,
                found,
                ..
            }, Problem::AnchorTreeDiffers {
                anchor_seq: HEAD, ..
            }] => signed && *found == entry.hash,
            _ => false,
        };
        assert!(as_expected, "{:#?}", report.problems);
    }
}

// ---------------------------------------------------------------------------------------------
// 5-6: moving rows around, and rows from elsewhere.
// ---------------------------------------------------------------------------------------------

#[test]
fn detects_two_swapped_entries() {
    // Attack: reorder history by swapping the contents of two rows, each keeping its seq.
    const EARLIER: u64 = 11;
    const LATER: u64 = 14;
    let (fx, ledger) = fixture(10);
    drop(ledger);
    tamper(&fx.path, |c| {
        c.execute_batch(&format!(
            "CREATE TEMP TABLE saved AS SELECT * FROM entries WHERE seq IN ({EARLIER}, {LATER});
             UPDATE entries SET ({CONTENT_COLUMNS}) =
                 (SELECT {CONTENT_COLUMNS} FROM saved WHERE saved.seq = {} - entries.seq)
             WHERE seq IN ({EARLIER}, {LATER});",
            EARLIER + LATER
        ))
    });
    let report = replay_both(&fx.path, &[]);
    assert_broken_at(&report, EARLIER);
    for seq in [EARLIER, LATER] {
        assert_found!(report, Problem::HashMismatch { seq: s, .. } if *s == seq);
        assert_found!(report, Problem::BrokenLink { seq: s, .. } if *s == seq);
        assert_found!(report, Problem::SignatureInvalid { seq: s, .. } if *s == seq);
    }
    assert_found!(report, Problem::TimeWentBack { seq: 12, .. });
    assert_found!(report, Problem::BrokenLink { seq: 15, .. });
}

#[test]
fn detects_an_entry_spliced_in_from_another_ledger() {
    // Attack: copy a genuine, validly signed row from another lab's ledger (same person ids,
    // other keys) over a row of this one, keeping its seq. The row is self-consistent and its
    // signature verifies, but it links to the other chain and its key was never enrolled here.
    const TARGET: u64 = 12;
    let (fx, ledger) = fixture(10);
    drop(ledger);
    let (other, other_ledger) = fixture_with(OTHER_LAB_KEYS, 10);
    let spliced = other_ledger.entry(TARGET).expect("read donor row");
    drop(other_ledger);
    let donor = other.path.to_str().expect("utf-8 temp path").to_string();
    tamper(&fx.path, |c| {
        c.execute("ATTACH DATABASE ?1 AS other", [donor])?;
        c.execute_batch(&format!(
            "UPDATE entries SET ({CONTENT_COLUMNS}) =
                 (SELECT {CONTENT_COLUMNS} FROM other.entries WHERE other.entries.seq = {TARGET})
             WHERE seq = {TARGET};
             DETACH DATABASE other;"
        ))
    });
    let report = replay_both(&fx.path, &[]);
    assert_broken_at(&report, TARGET);
    let key = spliced.signer.expect("donor row is signed");
    assert!(
        matches!(
            report.problems.as_slice(),
            [
                Problem::BrokenLink { seq: TARGET, .. },
                Problem::Authority { seq: TARGET, issue: AuthorityIssue::KeyUnknown { key: k } },
                Problem::BrokenLink { seq: 13, .. },
            ] if *k == key
        ),
        "{:#?}",
        report.problems
    );
}

// ---------------------------------------------------------------------------------------------
// 7: forked and rolled-back copies, judged against a checkpoint of the genuine ledger.
// ---------------------------------------------------------------------------------------------

#[test]
fn detects_a_forked_copy_against_a_later_checkpoint() {
    // Attack: keep a copy of the file, let both copies grow separately, and later present the
    // copy whose story suits better. Each copy is a valid chain on its own.
    let (fx, ledger) = fixture(10);
    drop(ledger);
    let fork = fx.sibling("fork.assize");
    copy_ledger(&fx.path, &fork);
    let mut genuine = reopen(&fx.path, 1);
    append_notes(&mut genuine, LAB_KEYS, 3, "genuine");
    let checkpoint = genuine.checkpoint(&LAB_KEYS.founder()).expect("checkpoint");
    drop(genuine);
    let mut forked = reopen(&fork, 1);
    append_notes(&mut forked, LAB_KEYS, 3, "forked");
    drop(forked);

    let anchors = [
        Anchor::Checkpoint(checkpoint.clone()),
        Anchor::Code(checkpoint.code()),
    ];
    assert_intact(&replay_both(&fx.path, &anchors));
    assert_intact(&replay_both(&fork, &[]));
    for anchor in anchors {
        let signed = matches!(anchor, Anchor::Checkpoint(_));
        let report = replay_both(&fork, &[anchor]);
        assert_broken_at(&report, 21);
        // The signed checkpoint also holds the root of the tree over entries 1..=21, which the
        // fork's tree of that size does not have; the short code holds only the head's prefix.
        let as_expected = if signed {
            matches!(
                report.problems.as_slice(),
                [
                    Problem::AnchorHashDiffers { anchor_seq: 21, .. },
                    Problem::AnchorTreeDiffers { anchor_seq: 21, .. }
                ]
            )
        } else {
            matches!(
                report.problems.as_slice(),
                [Problem::AnchorHashDiffers { anchor_seq: 21, .. }]
            )
        };
        assert!(as_expected, "{:#?}", report.problems);
    }
}

#[test]
fn consistency_proofs_join_honest_checkpoints_and_part_a_fork() {
    // RFC 9162 §2.1.4: a consistency proof from the tree an earlier checkpoint signed to the
    // tree a later one signed holds exactly when the later tree extends the earlier one.
    use assize_ledger::checkpoint::extends;
    let (fx, ledger) = fixture(10);
    drop(ledger);
    let fork = fx.sibling("fork.assize");
    copy_ledger(&fx.path, &fork);
    let mut genuine = reopen(&fx.path, 1);
    let shared = genuine.checkpoint(&LAB_KEYS.founder()).expect("checkpoint");
    append_notes(&mut genuine, LAB_KEYS, 3, "genuine");
    let earlier = genuine.checkpoint(&LAB_KEYS.founder()).expect("checkpoint");
    append_notes(&mut genuine, LAB_KEYS, 4, "genuine later");
    let later = genuine.checkpoint(&LAB_KEYS.founder()).expect("checkpoint");
    let proof = genuine
        .consistency_proof(earlier.seq, later.seq)
        .expect("proof");
    assert_eq!(extends(&earlier, &later, &proof), Ok(()));
    // The forked copy grows differently from the shared history on.
    let mut forked = reopen(&fork, 1);
    append_notes(&mut forked, LAB_KEYS, 7, "forked");
    let on_fork = forked.checkpoint(&LAB_KEYS.founder()).expect("checkpoint");
    assert_eq!(on_fork.seq, later.seq);
    // The history both copies share is consistent with either ...
    let from_shared = forked
        .consistency_proof(shared.seq, on_fork.seq)
        .expect("proof");
    assert_eq!(extends(&shared, &on_fork, &from_shared), Ok(()));
    // ... but no proof from the fork joins the genuine checkpoint to the fork's, and the
    // genuine ledger's own proof does not fit the fork's root either.
    let from_fork = forked
        .consistency_proof(earlier.seq, on_fork.seq)
        .expect("proof");
    assert!(extends(&earlier, &on_fork, &from_fork).is_err());
    assert!(extends(&earlier, &on_fork, &proof).is_err());
    // A changed proof hash, or the checkpoints swapped, fail too.
    let mut bent = proof.clone();
    bent[0][0] ^= 1;
    assert!(extends(&earlier, &later, &bent).is_err());
    assert!(extends(&later, &earlier, &proof).is_err());
}

#[test]
fn detects_a_rolled_back_copy_against_a_later_checkpoint() {
    // Attack: restore an older backup of the file over the current one, undoing everything
    // recorded since (the backup is a valid, shorter chain).
    let (fx, ledger) = fixture(10);
    drop(ledger);
    let backup = fx.sibling("backup.assize");
    copy_ledger(&fx.path, &backup);
    let mut ledger = reopen(&fx.path, 1);
    append_notes(&mut ledger, LAB_KEYS, 5, "later");
    let checkpoint = ledger.checkpoint(&LAB_KEYS.lead()).expect("checkpoint");
    drop(ledger);
    copy_ledger(&backup, &fx.path);

    assert_intact(&replay_both(&fx.path, &[]));
    let report = replay_both(&fx.path, &[Anchor::Checkpoint(checkpoint)]);
    assert_broken_at(&report, 19);
    assert_eq!(
        report.problems,
        vec![Problem::AnchorBeyondHead {
            anchor_seq: 23,
            head_seq: 18
        }]
    );
}

// ---------------------------------------------------------------------------------------------
// 8: entries the ledger API refuses, forged and inserted directly with a correct chain.
// ---------------------------------------------------------------------------------------------

#[test]
fn detects_an_entry_signed_by_a_revoked_key() {
    // Attack: whoever found the analyst's lost (revoked) key signs a note in their name.
    let (fx, ledger) = fixture(10);
    drop(ledger);
    let revoked = LAB_KEYS.analyst_first();
    let note = Note {
        text: "titrant standardised".into(),
    };
    let seq = forge_next(&fx.path, ANALYST, &note, &revoked);
    let report = replay_both(&fx.path, &[]);
    assert_broken_at(&report, seq);
    let issue = AuthorityIssue::KeyRevoked {
        key: revoked.public_key(),
        revoked_at_seq: FIRST_KEY_REVOKED_AT,
    };
    assert_eq!(report.problems, vec![Problem::Authority { seq, issue }]);
}

#[test]
fn detects_an_entry_signed_by_a_never_enrolled_key() {
    // Attack: sign a note in the reviewer's name with a key the attacker made up.
    let (fx, ledger) = fixture(10);
    drop(ledger);
    let made_up = stranger(REVIEWER);
    let note = Note {
        text: "results reviewed, no findings".into(),
    };
    let seq = forge_next(&fx.path, REVIEWER, &note, &made_up);
    let report = replay_both(&fx.path, &[]);
    assert_broken_at(&report, seq);
    let issue = AuthorityIssue::KeyUnknown {
        key: made_up.public_key(),
    };
    assert_eq!(report.problems, vec![Problem::Authority { seq, issue }]);
}

#[test]
fn detects_an_entry_by_a_role_that_may_not_sign_it() {
    // Attack: the former QA lead, now an analyst, still holds a valid key and uses it to enrol
    // an accomplice as QA. The accomplice then signs a note, which must not count either.
    let (fx, ledger) = fixture(10);
    drop(ledger);
    let accomplice = stranger("n.vantor");
    let enrolment = Enrolment {
        person: "n.vantor".into(),
        name: "Nils Vantor".into(),
        role: Role::Qa,
        public_key: accomplice.public_key(),
    };
    let seq = forge_next(&fx.path, LEAD, &enrolment, &LAB_KEYS.lead());
    let report = replay_both(&fx.path, &[]);
    assert_broken_at(&report, seq);
    let issue = AuthorityIssue::RoleNotAllowed {
        role: Role::Analyst,
        kind: Enrolment::KIND.into(),
    };
    assert_eq!(report.problems, vec![Problem::Authority { seq, issue }]);

    let note = Note {
        text: "batch released".into(),
    };
    let next = forge_next(&fx.path, "n.vantor", &note, &accomplice);
    let report = replay_both(&fx.path, &[]);
    assert_broken_at(&report, seq);
    assert_found!(
        report,
        Problem::Authority { seq: s, issue: AuthorityIssue::AuthorUnknown { .. } } if *s == next
    );
}

// ---------------------------------------------------------------------------------------------
// 9-10: record times and signatures.
// ---------------------------------------------------------------------------------------------

#[test]
fn detects_a_record_time_moved_back() {
    // Attack: backdate an entry so it seems recorded before the one it follows.
    const TARGET: u64 = 12;
    let (fx, ledger) = fixture(10);
    drop(ledger);
    tamper(&fx.path, |c| {
        c.execute(
            "UPDATE entries SET record_time =
                 (SELECT record_time FROM entries WHERE seq = ?1) - 1 WHERE seq = ?2",
            [TARGET as i64 - 1, TARGET as i64],
        )?;
        Ok(())
    });
    let report = replay_both(&fx.path, &[]);
    assert_broken_at(&report, TARGET);
    assert_found!(report, Problem::TimeWentBack { seq: TARGET, .. });
    assert_found!(report, Problem::HashMismatch { seq: TARGET, .. });
    assert_found!(report, Problem::SignatureInvalid { seq: TARGET, .. });
    assert_found!(report, Problem::BrokenLink { seq: 13, .. });
    assert_eq!(report.problems.len(), 4, "{:#?}", report.problems);
}

#[test]
fn detects_a_stripped_signature() {
    // Attack: remove a signature so the entry looks like unsigned instrument data. The signer
    // key is hashed, so the entry still claims a signer, now without a signature.
    const TARGET: u64 = 12;
    let (fx, ledger) = fixture(10);
    drop(ledger);
    tamper(&fx.path, |c| {
        c.execute(
            "UPDATE entries SET signature = NULL WHERE seq = ?1",
            [TARGET as i64],
        )?;
        Ok(())
    });
    let report = replay_both(&fx.path, &[]);
    assert_broken_at(&report, TARGET);
    assert!(
        matches!(
            report.problems.as_slice(),
            [Problem::SignatureInvalid { seq: TARGET, .. }]
        ),
        "{:#?}",
        report.problems
    );
}

#[test]
fn detects_a_flipped_signature_byte_in_the_middle_of_a_batch() {
    // Attack: corrupt one signature among hundreds. Notes from seq 9 are checked in batches of
    // 256 (9..=264, 265..=520, 521..=628), so seq 400 sits mid-batch: the batch check fails
    // and the per-signature fallback must single it out, agreeing with strict mode.
    const TARGET: u64 = 400;
    let (fx, ledger) = fixture(620);
    drop(ledger);
    tamper(&fx.path, |c| flip_byte(c, "signature", TARGET, 5));
    let report = replay_both(&fx.path, &[]);
    assert_eq!(report.entries, 628);
    assert_broken_at(&report, TARGET);
    assert!(
        matches!(
            report.problems.as_slice(),
            [Problem::SignatureInvalid { seq: TARGET, .. }]
        ),
        "{:#?}",
        report.problems
    );
}

// ---------------------------------------------------------------------------------------------
// 11: the clean control.
// ---------------------------------------------------------------------------------------------

#[test]
fn untampered_ledger_replays_intact_with_and_without_anchors() {
    // No attack: several people, a revoked and replaced key, a role change, a few hundred
    // notes, and checkpoints (signed and as codes) taken mid-way and at the head.
    let (fx, mut ledger) = fixture(150);
    let midway = ledger.checkpoint(&LAB_KEYS.reviewer()).expect("checkpoint");
    append_notes(&mut ledger, LAB_KEYS, 150, "afternoon");
    let at_head = ledger.checkpoint(&LAB_KEYS.analyst()).expect("checkpoint");
    drop(ledger);

    let plain = replay_both(&fx.path, &[]);
    assert_intact(&plain);
    assert_eq!((plain.entries, plain.signed), (308, 308));
    let anchors = [
        Anchor::Checkpoint(midway.clone()),
        Anchor::Code(midway.code()),
        Anchor::Checkpoint(at_head.clone()),
        Anchor::Code(at_head.code()),
    ];
    let anchored = replay_both(&fx.path, &anchors);
    assert_intact(&anchored);
    assert_eq!(anchored.anchors_checked, 4);
}

// ---------------------------------------------------------------------------------------------
// The guard triggers, while they are in place.
// ---------------------------------------------------------------------------------------------

/// Runs `sql` on the closed ledger file with its triggers in place; returns SQLite's error text.
fn refusal(path: &Path, sql: &str) -> Option<String> {
    let conn = Connection::open(path).expect("open ledger file with SQLite");
    conn.execute(sql, []).err().map(|e| e.to_string())
}

fn assert_refused(path: &Path, sql: &str, message: &str) {
    let refused = refusal(path, sql);
    assert!(
        refused.as_deref().is_some_and(|m| m.contains(message)),
        "{sql:?} was not refused with {message:?}: {refused:?}"
    );
}

#[test]
fn guard_refuses_a_plain_update() {
    let (fx, ledger) = fixture(3);
    drop(ledger);
    let sql = "UPDATE entries SET body = x'a0' WHERE seq = 10";
    assert_refused(
        &fx.path,
        sql,
        "assize entries are append-only: UPDATE refused",
    );
    assert_intact(&replay_both(&fx.path, &[]));
}

#[test]
fn guard_refuses_a_plain_delete() {
    let (fx, ledger) = fixture(3);
    drop(ledger);
    let sql = "DELETE FROM entries WHERE seq >= 10";
    assert_refused(
        &fx.path,
        sql,
        "assize entries are append-only: DELETE refused",
    );
    assert_intact(&replay_both(&fx.path, &[]));
}

#[test]
fn guard_refuses_insert_or_replace_of_an_existing_seq() {
    // Without the insert guard, REPLACE would delete row 10 and insert a new one in its place
    // without firing the UPDATE or DELETE triggers.
    let (fx, ledger) = fixture(3);
    drop(ledger);
    let sql = format!(
        "INSERT OR REPLACE INTO entries (seq, {CONTENT_COLUMNS})
         SELECT seq, {CONTENT_COLUMNS} FROM entries WHERE seq = 10"
    );
    let message = "assize entries are append-only: only the next sequence number may be inserted";
    assert_refused(&fx.path, &sql, message);
    assert_intact(&replay_both(&fx.path, &[]));
}

// ---------------------------------------------------------------------------------------------
// Rows that are not entries, heads that were altered, checkpoints by revoked keys.
// ---------------------------------------------------------------------------------------------

/// Attack: a signature column cut to 63 bytes, so the row no longer forms an entry. Replay
/// reports it at its seq and goes on to judge every other entry.
#[test]
fn reports_a_malformed_row_and_keeps_going() {
    const BROKEN: u64 = FIRST_NOTE_SEQ + 3;
    let (fx, ledger) = fixture(10);
    drop(ledger);
    tamper(&fx.path, |c| {
        c.execute(
            "UPDATE entries SET signature = zeroblob(63) WHERE seq = ?1",
            [BROKEN as i64],
        )?;
        Ok(())
    });
    let report = replay_both(&fx.path, &[]);
    assert_broken_at(&report, BROKEN);
    assert!(
        matches!(
            report.problems.as_slice(),
            [Problem::MalformedRow { seq: BROKEN, .. }]
        ),
        "{:#?}",
        report.problems
    );
    assert_eq!(report.entries, FIRST_NOTE_SEQ - 1 + 10);
}

/// Attack: the head's stored hash is replaced. An honest append must not link to it, and a
/// checkpoint must not certify it.
#[test]
fn refuses_to_extend_or_checkpoint_a_head_whose_hash_was_altered() {
    let (fx, ledger) = fixture(4);
    let head = ledger.head().expect("head").expect("some head").seq;
    drop(ledger);
    tamper(&fx.path, |c| {
        c.execute(
            "UPDATE entries SET hash = zeroblob(32) WHERE seq = ?1",
            [head as i64],
        )?;
        Ok(())
    });
    let mut ledger = reopen(&fx.path, 1);
    let note = Note {
        text: "written after the tamper".into(),
    };
    let refused = ledger.append_record(&note, &LAB_KEYS.reviewer());
    let message = refused.expect_err("append refused").to_string();
    assert!(message.contains("does not match its contents"), "{message}");
    let refused = ledger.checkpoint(&LAB_KEYS.founder());
    assert!(refused.is_err(), "checkpoint of an altered head was signed");
    drop(ledger);
    let report = replay_both(&fx.path, &[]);
    assert_eq!(report.entries, head, "nothing was appended");
}

/// A checkpoint signed with a key revoked before it is worthless: the ledger refuses to make
/// one, and replay flags one forged with that key.
#[test]
fn refuses_and_flags_a_checkpoint_signed_with_a_revoked_key() {
    let (fx, mut ledger) = fixture(3);
    let revoked = LAB_KEYS.analyst_first();
    assert!(ledger.checkpoint(&revoked).is_err());
    let head = ledger.head().expect("head").expect("some head");
    let honest = ledger.checkpoint(&LAB_KEYS.analyst()).expect("checkpoint");
    drop(ledger);
    let forged = Checkpoint::sign(
        honest.ledger_id,
        head.seq,
        head.hash,
        honest.tree_root,
        honest.made_at,
        &revoked,
    );
    let report = replay_both(&fx.path, &[Anchor::Checkpoint(forged)]);
    assert!(
        matches!(
            report.problems.as_slice(),
            [Problem::AnchorSignatureInvalid { anchor_seq, detail }]
                if *anchor_seq == head.seq && detail.contains("revoked by entry 6")
        ),
        "{:#?}",
        report.problems
    );
    assert_intact(&replay_both(&fx.path, &[Anchor::Checkpoint(honest)]));
}
