//! Evidence bundles against the ledger they came from: opened with the ledger file gone, a
//! bundle explains its result exactly as `explain` did on the ledger; changed bytes, a
//! rewritten entry exported by a dishonest holder of the file, and a signer who is not
//! enrolled are all refused; and the proofs grow with the logarithm of the ledger's size.
//!
//! The scenario is the invented one of the rule tests (`support::Plan::clean`). The tree and
//! proof rules are RFC 9162 §2.1 (tested on their own in ledger/tests/merkle.rs).

#[allow(dead_code)] // shared with the rule tests, which use the rest of it
mod support;

use assize_ledger::bundle::BundleError;
use assize_ledger::records::Note;
use assize_ledger::{Draft, Signer};
use assize_verify::evidence::{export, open, EvidenceError};
use assize_verify::explain::{explain, Target};
use support::*;

/// The clean scenario with `notes` notes appended after it by the QA person.
fn scenario_with_notes(notes: usize) -> Built {
    let mut built = build(&Plan::clean());
    let qa = Who::Qa.signer();
    let mut left = notes;
    while left > 0 {
        let count = left.min(2_000);
        built
            .ledger
            .append_batch(count, Some(&qa), |i, _| {
                Draft::of_record(
                    Who::Qa.person(),
                    &Note {
                        text: format!("padding note {left}-{i}"),
                    },
                )
            })
            .expect("notes");
        left -= count;
    }
    built
}

#[test]
fn a_bundle_explains_its_result_without_the_ledger_as_the_ledger_did() {
    let mut built = build(&Plan::clean());
    let on_ledger = explain(&mut built.ledger, &Target::RunId(ASSAY.into())).expect("explain");
    let made = export(
        &mut built.ledger,
        &Target::RunId(ASSAY.into()),
        &Who::Reviewer.signer(),
    )
    .expect("export");
    assert_eq!(made.explanation, on_ledger);
    let path = built.ledger.store().path().to_path_buf();
    drop(built);
    assert!(!path.exists(), "the ledger file is gone");

    let opened = open(&made.bytes).expect("a good bundle opens");
    assert_eq!(opened.explanation, on_ledger);
    assert_eq!(opened.bundle.checkpoint.seq, on_ledger.head_seq);
    assert_eq!(opened.bundle.checkpoint.by, Who::Reviewer.person());
    // It holds every entry the explanation shows, and the registry (entry 1 opens the ledger).
    let held: Vec<u64> = opened.bundle.entries.iter().map(|e| e.seq).collect();
    for seq in &on_ledger.entries {
        assert!(held.contains(seq), "entry {seq} is in the bundle");
    }
    assert_eq!(held[0], 1);
}

#[test]
fn a_changed_byte_anywhere_is_refused() {
    let mut built = build(&Plan::clean());
    let made = export(
        &mut built.ledger,
        &Target::RunId(ASSAY.into()),
        &Who::Reviewer.signer(),
    )
    .expect("export");
    let bytes = made.bytes;
    // Every byte of the first and last kilobyte (the framing, the checkpoint, the signature)
    // and every 37th byte between, each with one bit flipped, then a byte cut off the end and
    // a byte added: each must be refused.
    let len = bytes.len();
    let positions = (0..len).filter(|&i| i < 1024 || i + 1024 >= len || i % 37 == 0);
    for i in positions {
        for bit in [0x01u8, 0x80] {
            let mut changed = bytes.clone();
            changed[i] ^= bit;
            assert!(
                open(&changed).is_err(),
                "flipping bit {bit:#04x} of byte {i} of {len} went unnoticed"
            );
        }
    }
    assert!(open(&bytes[..len - 1]).is_err());
    let mut longer = bytes.clone();
    longer.push(0);
    assert!(open(&longer).is_err());
    assert!(open(&bytes).is_ok(), "the untouched bundle still opens");
}

#[test]
fn a_rewritten_entry_exported_from_the_file_fails_its_proof() {
    // The holder of the file rewrites a raw reading and exports a bundle from it, signing
    // with a key of their own that is enrolled: the bundle's signatures hold, but the entry's
    // recomputed hash is not the leaf the checkpoint's tree holds (the tree was left as the
    // chain made it), so the proof fails.
    let mut built = build(&Plan::clean());
    let on_ledger = explain(&mut built.ledger, &Target::RunId(ASSAY.into())).expect("explain");
    let weighing = *on_ledger
        .entries
        .iter()
        .find(|seq| {
            built
                .ledger
                .entry(**seq)
                .is_ok_and(|e| e.kind == "lab.weighing")
        })
        .expect("a weighing shown");
    let path = built.ledger.store().path().to_path_buf();
    {
        let conn = rusqlite::Connection::open(&path).expect("open with SQLite");
        conn.execute_batch(&format!(
            "DROP TRIGGER entries_refuse_update;
             UPDATE entries SET record_time = record_time + 1 WHERE seq = {weighing};"
        ))
        .expect("rewrite the entry");
    }
    let refused = export(
        &mut built.ledger,
        &Target::RunId(ASSAY.into()),
        &Who::Reviewer.signer(),
    )
    .map(|made| open(&made.bytes));
    match refused {
        Ok(Err(EvidenceError::Bundle(BundleError::Entry { seq, reason }))) => {
            assert_eq!(seq, weighing);
            assert!(reason.contains("proof fails"), "{reason}");
        }
        other => panic!("expected the entry's proof to fail, got {other:?}"),
    }
}

#[test]
fn a_signer_who_is_not_enrolled_cannot_make_a_bundle() {
    let mut built = build(&Plan::clean());
    let stranger = Signer::from_secret("nobody.enrolled", &[99; 32]);
    assert!(export(&mut built.ledger, &Target::RunId(ASSAY.into()), &stranger).is_err());
}

#[test]
fn proofs_grow_with_the_logarithm_of_the_ledger() {
    // RFC 9162 §2.1.3: an inclusion proof in a tree of n leaves holds at most ceil(log2 n)
    // hashes. Ten times the entries adds about log2(10) ≈ 3.3 hashes per bundled entry, not
    // ten times the bytes.
    let sizes = [1_000usize, 10_000];
    let mut bundles = Vec::new();
    for notes in sizes {
        let mut built = scenario_with_notes(notes);
        let made = export(
            &mut built.ledger,
            &Target::RunId(ASSAY.into()),
            &Who::Reviewer.signer(),
        )
        .expect("export");
        let opened = open(&made.bytes).expect("opens");
        let n = opened.bundle.checkpoint.seq;
        let ceil_log2 = u64::BITS - (n - 1).leading_zeros();
        assert_eq!(opened.bundle.longest_proof as u32, ceil_log2, "n = {n}");
        bundles.push((n, made.bytes.len(), opened.bundle.entries.len(), ceil_log2));
    }
    let (n_small, small, count, depth_small) = bundles[0];
    let (n_large, large, count_large, depth_large) = bundles[1];
    assert_eq!(count, count_large, "the same entries are bundled");
    assert!(n_large > 9 * n_small);
    // Each extra proof hash costs 32 bytes and a CBOR byte-string header of 2 bytes.
    let most = count * 34 * (depth_large - depth_small) as usize;
    assert!(
        large > small && large - small <= most,
        "bundle of {small} bytes at {n_small} entries grew to {large} bytes at {n_large} entries (at most {most} more expected)"
    );
}
