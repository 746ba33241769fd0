//! Batch appends: all entries of a batch are written in one transaction, or none.

use assize_ledger::records::{Enrolment, Note};
use assize_ledger::replay::ReplayOptions;
use assize_ledger::{
    Draft, FixedClock, KindRules, Ledger, LedgerError, OpenMode, Role, Signer, Timestamp,
};
use std::sync::Arc;

fn fixture() -> (tempfile::TempDir, Ledger, Signer) {
    let dir = tempfile::tempdir().expect("temp dir");
    let qa = Signer::from_secret("q.ambrose", &[21; 32]);
    let clock = Arc::new(FixedClock::new(Timestamp(1_800_000_000_000_000), 1_000));
    let (ledger, _) = Ledger::create(
        &dir.path().join("batch.ledger"),
        "Batch Test Lab",
        "Quill Ambrose",
        &qa,
        KindRules::core(),
        clock,
    )
    .expect("create");
    (dir, ledger, qa)
}

fn note(author: &str, text: &str) -> Draft {
    Draft::of_record(author, &Note { text: text.into() }).expect("encode note")
}

#[test]
fn later_items_can_refer_to_earlier_items_of_the_same_batch() {
    let (_dir, mut ledger, qa) = fixture();
    let entries = ledger
        .append_batch(3, Some(&qa), |i, earlier| {
            let mut draft = note("q.ambrose", &format!("item {i}"));
            draft.references = earlier.iter().map(|e| e.hash).collect();
            Ok(draft)
        })
        .expect("batch appends");
    assert_eq!(entries.iter().map(|e| e.seq).collect::<Vec<_>>(), [2, 3, 4]);
    assert_eq!(entries[2].references, [entries[0].hash, entries[1].hash]);
    let report = ledger.replay(&ReplayOptions::default()).expect("replay");
    assert!(report.intact(), "{:?}", report.problems);
}

#[test]
fn a_refused_item_leaves_nothing_of_the_batch() {
    let (_dir, mut ledger, qa) = fixture();
    let stranger = Signer::from_secret("x.stray", &[22; 32]);
    let result = ledger.append_batch(3, Some(&qa), |i, _| {
        if i == 2 {
            // An enrolment with a key already enrolled for q.ambrose: refused by the registry.
            return Draft::of_record(
                "q.ambrose",
                &Enrolment {
                    person: "x.stray".into(),
                    name: "X Stray".into(),
                    role: Role::Analyst,
                    public_key: qa.public_key(),
                },
            );
        }
        Ok(note("q.ambrose", "kept only if the whole batch is"))
    });
    assert!(
        matches!(result, Err(LedgerError::Refused { .. })),
        "{result:?}"
    );
    assert_eq!(ledger.head().expect("head").expect("opened").seq, 1);
    // A build error also aborts the batch.
    let result = ledger.append_batch(2, Some(&qa), |i, _| {
        if i == 1 {
            return Err(LedgerError::BadInput {
                what: "row 2".into(),
                reason: "malformed".into(),
            });
        }
        Ok(note("q.ambrose", "first"))
    });
    assert!(result.is_err());
    assert_eq!(ledger.head().expect("head").expect("opened").seq, 1);
    // The registry copy used inside a refused batch is discarded: the stranger stays unknown.
    let enrol = Enrolment {
        person: "x.stray".into(),
        name: "X Stray".into(),
        role: Role::Analyst,
        public_key: stranger.public_key(),
    };
    let result = ledger.append_batch(2, Some(&qa), |i, _| match i {
        0 => Draft::of_record("q.ambrose", &enrol),
        _ => Ok(note("nobody.here", "author not enrolled")),
    });
    assert!(result.is_err());
    let registry = ledger.registry().expect("registry");
    assert!(registry.person("x.stray").is_none());
    // The tree nodes a refused batch computed are discarded with it: later appends through the
    // same handle build the tree the chain gives, which replay checks node by node.
    for i in 0..9 {
        ledger
            .append(
                note("q.ambrose", &format!("after the refusals {i}")),
                Some(&qa),
            )
            .expect("append");
    }
    let report = ledger.replay(&ReplayOptions::default()).expect("replay");
    assert!(report.intact(), "{:#?}", report.problems);
    assert_eq!(report.entries, 10);
}

#[test]
fn a_batch_prepared_before_another_writer_appended_is_refused_whole() {
    let (dir, mut ledger, qa) = fixture();
    let prepared_at = ledger.head().expect("head");
    // Another handle on the same file appends after the batch was prepared (its clock a
    // little later than the fixture's, as a second process's would be).
    let later = Arc::new(FixedClock::new(Timestamp(1_800_000_000_100_000), 1_000));
    let mut other = Ledger::open(
        &dir.path().join("batch.ledger"),
        OpenMode::ReadWrite,
        KindRules::core(),
        later,
    )
    .expect("second handle");
    other
        .append(note("q.ambrose", "written in between"), Some(&qa))
        .expect("append");
    let result = ledger.append_batch_after(prepared_at.as_ref(), 2, Some(&qa), |i, _| {
        Ok(note("q.ambrose", &format!("prepared item {i}")))
    });
    assert!(
        matches!(
            result,
            Err(LedgerError::HeadMoved {
                expected_seq: 1,
                found_seq: 2
            })
        ),
        "{result:?}"
    );
    assert_eq!(ledger.head().expect("head").expect("opened").seq, 2);
    // Prepared against the head as it stands, the batch goes in whole.
    let now = other.head().expect("head");
    let entries = other
        .append_batch_after(now.as_ref(), 2, Some(&qa), |i, _| {
            Ok(note("q.ambrose", &format!("prepared again {i}")))
        })
        .expect("batch appends");
    assert_eq!(entries.iter().map(|e| e.seq).collect::<Vec<_>>(), [3, 4]);
    let report = other.replay(&ReplayOptions::default()).expect("replay");
    assert!(report.intact(), "{:#?}", report.problems);
}
