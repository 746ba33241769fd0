//! `history` of one record against what was written: the versions are the record and its
//! corrections in ledger order, the one in force is the last signed correction, each version's
//! changes are the fields that differ from the version before it, and the invalidations and
//! sign-offs listed are exactly the entries of those kinds naming the record.
//!
//! The scenario is the invented one of the rule tests (`support::Plan::clean`), with
//! corrections, an invalidation and sign-offs added here.

#[allow(dead_code)] // shared with the rule tests, which use the rest of it
mod support;

use assize_ledger::{codec, Draft, Ledger, Record};
use assize_verify::catalog::Catalog;
use assize_verify::explain::{ExplainError, SignatureState};
use assize_verify::history::{history, Subject};
use assize_verify::records::{Correction, Invalidation, LabRecord, Replicate};
use std::rc::Rc;
use support::*;

/// A correction of replicate `number`'s endpoint note to `endpoint`, with `reason`.
fn endpoint_to(number: u32, endpoint: &'static str, reason: &'static str) -> MakeDraft {
    Rc::new(move |_: &Ledger, catalog: &Catalog, author: &str| {
        let (hash, mut replicate) = replicate_entry(catalog, ASSAY, number);
        replicate.endpoint = endpoint.into();
        let correction = Correction {
            supersedes: hash,
            kind: Replicate::KIND.into(),
            replacement: codec::encode(&replicate).expect("encode"),
            reason: reason.into(),
        };
        correction.check().expect("a valid replacement");
        Draft::of_record(author, &correction).expect("draft")
    })
}

fn invalidate(number: u32, cause: &'static str) -> MakeDraft {
    Rc::new(move |_: &Ledger, catalog: &Catalog, author: &str| {
        let (hash, _) = replicate_entry(catalog, ASSAY, number);
        let invalidation = Invalidation {
            replicate: hash,
            cause: cause.into(),
        };
        Draft::of_record(author, &invalidation).expect("draft")
    })
}

#[test]
fn versions_in_order_with_the_last_signed_correction_in_force() {
    let mut plan = Plan::clean();
    let time = plus(plan.step("approval").at, 600);
    plan.steps.push(drafted(
        "first correction",
        time,
        Who::Analyst2,
        endpoint_to(
            2,
            "pale pink, 30 s",
            "endpoint note copied from the bench notebook",
        ),
    ));
    plan.steps.push(drafted(
        "second correction",
        plus(time, 60),
        Who::Analyst,
        endpoint_to(2, "pale pink persisting 30 s", "completed the note"),
    ));
    let mut built = build(&plan);
    let catalog = Catalog::load(built.ledger.store()).expect("catalog");
    let (replicate_hash, _) = replicate_entry(&catalog, ASSAY, 2);
    let original = catalog
        .entries()
        .iter()
        .find(|e| e.hash == replicate_hash)
        .expect("replicate entry");
    let original_endpoint = match &original.body {
        assize_verify::catalog::LabBody::Replicate(r) => r.endpoint.clone(),
        other => panic!("not a replicate: {other:?}"),
    };
    let (first, second) = (
        built.seq("first correction"),
        built.seq("second correction"),
    );

    let found = history(&mut built.ledger, &Subject::Entry(original.seq)).expect("history");
    let seqs: Vec<u64> = found.versions.iter().map(|v| v.written.seq).collect();
    assert_eq!(seqs, vec![original.seq, first, second]);
    assert_eq!(
        found.versions.iter().map(|v| v.number).collect::<Vec<_>>(),
        vec![1, 2, 3]
    );
    let in_force: Vec<bool> = found.versions.iter().map(|v| v.in_force).collect();
    assert_eq!(in_force, vec![false, false, true]);
    assert_eq!(found.in_force().expect("one in force").written.seq, second);
    // Each correction's change is measured against the version before it.
    let change = |version: usize| {
        let c = &found.versions[version].changes;
        let endpoint = c
            .iter()
            .find(|c| c.field == "endpoint")
            .unwrap_or_else(|| panic!("version {version} changes the endpoint: {c:?}"));
        assert_eq!(c.len(), 1, "only the endpoint changed: {c:?}");
        (endpoint.old.clone(), endpoint.new.clone())
    };
    let quoted = |s: &str| serde_json::to_string(s).unwrap();
    assert_eq!(
        change(1),
        (quoted(&original_endpoint), quoted("pale pink, 30 s"))
    );
    assert_eq!(
        change(2),
        (
            quoted("pale pink, 30 s"),
            quoted("pale pink persisting 30 s")
        )
    );
    assert_eq!(
        found.versions[1].reason.as_deref(),
        Some("endpoint note copied from the bench notebook")
    );
    assert_eq!(found.versions[1].written.author, Who::Analyst2.person());
    assert!(found
        .versions
        .iter()
        .all(|v| v.written.signature == SignatureState::Verified));
    assert!(found.sign_offs.is_empty(), "sign-offs name the run, not it");
}

#[test]
fn a_run_shows_its_sign_offs_and_a_replicate_its_invalidation() {
    let mut plan = Plan::clean();
    let time = plus(plan.step("approval").at, 600);
    plan.steps.push(drafted(
        "invalidation",
        time,
        Who::Analyst,
        invalidate(3, "burette tip broke during the titration"),
    ));
    let mut built = build(&plan);
    let (review, approval) = (built.seq("review"), built.seq("approval"));
    let run = history(&mut built.ledger, &Subject::RunId(ASSAY.into())).expect("history");
    assert_eq!(run.kind, "lab.run");
    assert_eq!(run.versions.len(), 1);
    let signed: Vec<(u64, &str)> = run
        .sign_offs
        .iter()
        .map(|s| (s.written.seq, s.meaning.as_str()))
        .collect();
    assert_eq!(signed, vec![(review, "reviewed"), (approval, "approved")]);
    assert!(run
        .sign_offs
        .iter()
        .all(|s| s.written.author == Who::Reviewer.person() && s.based_on_seq < s.written.seq));

    let catalog = Catalog::load(built.ledger.store()).expect("catalog");
    let (replicate_hash, _) = replicate_entry(&catalog, ASSAY, 3);
    let seq = built
        .ledger
        .store()
        .seq_of_hash(&replicate_hash)
        .expect("index")
        .expect("stored");
    let replicate = history(&mut built.ledger, &Subject::Entry(seq)).expect("history");
    assert_eq!(replicate.invalidations.len(), 1);
    assert_eq!(
        replicate.invalidations[0].written.seq,
        built.seq("invalidation")
    );
    assert_eq!(
        replicate.invalidations[0].cause,
        "burette tip broke during the titration"
    );
}

#[test]
fn refuses_what_has_no_history_of_its_own_with_what_to_do() {
    let mut plan = Plan::clean();
    let time = plus(plan.step("approval").at, 600);
    plan.steps.push(drafted(
        "correction",
        time,
        Who::Analyst,
        endpoint_to(1, "pale pink, 30 s", "note completed"),
    ));
    let mut built = build(&plan);
    let head = built.ledger.head().unwrap().unwrap().seq;
    let correction = built.seq("correction");
    for (subject, expected) in [
        (Subject::Entry(head + 1), "no entry"),
        (Subject::Entry(0), "no entry"),
        // Entry 1 opens the ledger: not a lab record.
        (Subject::Entry(1), "entries show 1"),
        (Subject::Entry(correction), "the entry it corrects"),
        (Subject::RunId("NO-SUCH-RUN".into()), "NO-SUCH-RUN"),
    ] {
        match history(&mut built.ledger, &subject) {
            Err(ExplainError::NotFound(what)) => {
                assert!(what.contains(expected), "{subject:?}: {what}")
            }
            other => panic!("{subject:?}: expected NotFound, got {other:?}"),
        }
    }
}
