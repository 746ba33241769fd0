//! Two processes appending at once (DESIGN.md 3.5): one unforked chain, every entry present,
//! no sequence number handed out twice.

mod common;

use assize_ledger::records::Note;
use assize_ledger::{codec, KindRules, Ledger, OpenMode, SystemClock};
use common::{fixture_ledger, replay, ANALYST_SECRET, SECOND_ANALYST_SECRET};
use std::collections::BTreeSet;
use std::process::Command;
use std::sync::Arc;

const PER_WRITER: u64 = 150;

#[test]
fn two_writers_produce_one_chain_with_every_entry() {
    let dir = tempfile::tempdir().expect("temp dir");
    let ledger_path = fixture_ledger(dir.path());
    let before = replay(&ledger_path).entries;
    let spawn = |person: &str, secret: [u8; 32], tag: &str| {
        Command::new(env!("CARGO_BIN_EXE_append-loop"))
            .args([
                ledger_path.to_str().expect("utf-8 path"),
                person,
                &hex::encode(secret),
                &PER_WRITER.to_string(),
                tag,
            ])
            .output()
    };
    let (first, second) = std::thread::scope(|s| {
        let a = s.spawn(|| spawn("a.mensah", ANALYST_SECRET, "writer-a"));
        let b = s.spawn(|| spawn("b.okafor", SECOND_ANALYST_SECRET, "writer-b"));
        (a.join().expect("thread a"), b.join().expect("thread b"))
    });
    let (first, second) = (first.expect("run writer a"), second.expect("run writer b"));
    assert!(
        first.status.success(),
        "{}",
        String::from_utf8_lossy(&first.stderr)
    );
    assert!(
        second.status.success(),
        "{}",
        String::from_utf8_lossy(&second.stderr)
    );

    let seqs = |out: &[u8]| -> Vec<u64> {
        String::from_utf8_lossy(out)
            .lines()
            .map(|l| l.split_once(' ').expect("SEQ HASH").0.parse().expect("seq"))
            .collect()
    };
    let (seqs_a, seqs_b) = (seqs(&first.stdout), seqs(&second.stdout));
    assert_eq!(seqs_a.len() as u64, PER_WRITER);
    assert_eq!(seqs_b.len() as u64, PER_WRITER);
    let all: BTreeSet<u64> = seqs_a.iter().chain(&seqs_b).copied().collect();
    assert_eq!(
        all.len() as u64,
        2 * PER_WRITER,
        "a sequence number was handed out twice"
    );

    let report = replay(&ledger_path);
    assert!(report.intact(), "{:?}", report.problems);
    assert_eq!(report.entries, before + 2 * PER_WRITER);

    let ledger = Ledger::open(
        &ledger_path,
        OpenMode::ReadOnly,
        KindRules::core(),
        Arc::new(SystemClock),
    )
    .expect("open");
    let mut texts = BTreeSet::new();
    ledger
        .store()
        .for_each_entry(before + 1, |entry| {
            let note: Note = codec::decode_exact(&entry.body).expect("note body");
            texts.insert(note.text);
            Ok(true)
        })
        .expect("read entries");
    for i in 0..PER_WRITER {
        assert!(texts.contains(&format!("writer-a {i}")));
        assert!(texts.contains(&format!("writer-b {i}")));
    }
}
