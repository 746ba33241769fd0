//! The label index beside the chain: labels come from the kind rules' labeller at every append
//! (single and batch, in the append's own transaction), an older file gets the very same rows
//! when first opened read-write, a read-only open of an older file says it has no index, and
//! the table is guarded like the others.

use assize_ledger::codec;
use assize_ledger::records::Note;
use assize_ledger::{Draft, FixedClock, KindRules, Ledger, OpenMode, Signer, Timestamp};
use rusqlite::Connection;
use std::path::{Path, PathBuf};
use std::sync::Arc;

const START: Timestamp = Timestamp(1_802_000_000_000_000);
const NOTE: &str = "note";

fn signer() -> Signer {
    Signer::from_secret("p.ondrasek", &[71; 32])
}

/// Labels a note by each word of its text that starts with `#` (a test labeller: the ledger
/// itself has no idea what a label means).
fn hashtags(kind: &str, body: &[u8]) -> Vec<String> {
    if kind != NOTE {
        return Vec::new();
    }
    match codec::decode_exact::<Note>(body) {
        Ok(note) => note
            .text
            .split_whitespace()
            .filter(|word| word.starts_with('#'))
            .map(str::to_string)
            .collect(),
        Err(_) => Vec::new(),
    }
}

fn rules() -> KindRules {
    KindRules::core().with_labeller(hashtags)
}

fn clock() -> Arc<FixedClock> {
    Arc::new(FixedClock::new(START, 1_000))
}

/// Opening entry, then notes 2..=6 one by one and 7..=9 in one batch.
fn labelled_ledger(dir: &Path) -> (PathBuf, Ledger) {
    let path = dir.join("labels.assize");
    let signer = signer();
    let (mut ledger, _) = Ledger::create(
        &path,
        "Label Test Lab",
        "Petra Ondrasek",
        &signer,
        rules(),
        clock(),
    )
    .expect("create");
    for text in [
        "#alpha first",
        "no label here",
        "#beta and #alpha",
        "#gamma",
        "#beta again",
    ] {
        let note = Note { text: text.into() };
        ledger.append_record(&note, &signer).expect("append");
    }
    let batch = ["#delta in a batch", "#alpha in a batch", "plain"];
    ledger
        .append_batch(batch.len(), Some(&signer), |i, _| {
            Draft::of_record(
                "p.ondrasek",
                &Note {
                    text: batch[i].into(),
                },
            )
        })
        .expect("batch");
    (path, ledger)
}

fn label_rows(path: &Path) -> Vec<(String, String, i64)> {
    let conn = Connection::open(path).expect("open with SQLite");
    let mut statement = conn
        .prepare("SELECT kind, label, seq FROM entry_labels ORDER BY kind, label, seq")
        .expect("prepare");
    let rows = statement
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))
        .expect("query");
    rows.collect::<rusqlite::Result<_>>().expect("rows")
}

fn schema_version(path: &Path) -> i64 {
    Connection::open(path)
        .expect("open with SQLite")
        .query_row("PRAGMA user_version", [], |r| r.get(0))
        .expect("user_version")
}

#[test]
fn appends_label_entries_through_the_kind_rules() {
    let dir = tempfile::tempdir().expect("temp dir");
    let (_path, ledger) = labelled_ledger(dir.path());
    let store = ledger.store();
    assert!(store.has_labels());
    // Seq 1 is the opening entry; the notes are 2..=9 in the order written above.
    assert_eq!(store.labelled(NOTE, "#alpha").unwrap(), Some(vec![2, 4, 8]));
    assert_eq!(store.labelled(NOTE, "#beta").unwrap(), Some(vec![4, 6]));
    assert_eq!(store.labelled(NOTE, "#delta").unwrap(), Some(vec![7]));
    assert_eq!(store.labelled(NOTE, "#none").unwrap(), Some(vec![]));
    // Labels are per kind.
    assert_eq!(
        store.labelled("person.enrol", "#alpha").unwrap(),
        Some(vec![])
    );
}

#[test]
fn an_older_file_gets_the_same_labels_when_opened_read_write() {
    let dir = tempfile::tempdir().expect("temp dir");
    let (path, ledger) = labelled_ledger(dir.path());
    drop(ledger);
    let written_at_append = label_rows(&path);
    assert_eq!(written_at_append.len(), 7, "{written_at_append:?}");
    {
        let conn = Connection::open(&path).expect("open with SQLite");
        conn.execute_batch(
            "DROP TRIGGER entry_labels_refuse_update; DROP TRIGGER entry_labels_refuse_delete;
             DROP TABLE entry_labels; PRAGMA user_version = 2;",
        )
        .expect("make a schema-2 file");
    }
    let read_only = Ledger::open(&path, OpenMode::ReadOnly, rules(), clock()).expect("open");
    assert!(!read_only.store().has_labels());
    assert_eq!(read_only.store().labelled(NOTE, "#alpha").unwrap(), None);
    drop(read_only);
    assert_eq!(schema_version(&path), 2, "a read-only open never writes");

    let later = Arc::new(FixedClock::new(Timestamp(START.0 + 86_400_000_000), 1_000));
    let mut read_write = Ledger::open(&path, OpenMode::ReadWrite, rules(), later).expect("open");
    assert!(read_write.store().has_labels());
    assert_eq!(schema_version(&path), 3);
    assert_eq!(label_rows(&path), written_at_append);
    let note = Note {
        text: "#alpha after the upgrade".into(),
    };
    let appended = read_write.append_record(&note, &signer()).expect("append");
    assert_eq!(
        read_write.store().labelled(NOTE, "#alpha").unwrap(),
        Some(vec![2, 4, 8, appended.seq])
    );
}

#[test]
fn label_rows_cannot_be_changed_or_removed() {
    let dir = tempfile::tempdir().expect("temp dir");
    let (path, ledger) = labelled_ledger(dir.path());
    drop(ledger);
    let conn = Connection::open(&path).expect("open with SQLite");
    for statement in [
        "UPDATE entry_labels SET seq = 3 WHERE label = '#gamma'",
        "DELETE FROM entry_labels WHERE label = '#gamma'",
    ] {
        let err = conn.execute_batch(statement).expect_err("guarded");
        assert!(err.to_string().contains("append-only"), "{err}");
    }
}

#[test]
fn without_a_labeller_nothing_is_labelled() {
    let dir = tempfile::tempdir().expect("temp dir");
    let path = dir.path().join("plain.assize");
    let signer = signer();
    let (mut ledger, _) = Ledger::create(
        &path,
        "Label Test Lab",
        "Petra Ondrasek",
        &signer,
        KindRules::core(),
        clock(),
    )
    .expect("create");
    let note = Note {
        text: "#alpha".into(),
    };
    ledger.append_record(&note, &signer).expect("append");
    assert_eq!(
        ledger.store().labelled(NOTE, "#alpha").unwrap(),
        Some(vec![])
    );
    assert!(label_rows(&path).is_empty());
}
