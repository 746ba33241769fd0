//! `explain` against a full read of the same ledger: the entries it reaches through the
//! indexes are exactly the ones a whole-ledger scan says the result depends on (every raw
//! reading of the assay and of its standardization, the balance with the calibration in force
//! and the day's check, materials, documents), no others, and its numbers are those of the
//! recompute over the whole catalog.
//!
//! The scenario is the invented one of the rule tests (`support::Plan::clean`); what the result
//! "depends on" is worked out here independently, by kind and by what each entry names.

#[allow(dead_code)] // shared with the rule tests, which use the rest of it
mod support;

use assize_ledger::{Ledger, Record};
use assize_verify::catalog::{Catalog, LabBody};
use assize_verify::correction::correction_draft;
use assize_verify::explain::{explain, ExplainError, SignatureState, Target};
use assize_verify::records::{ReferenceLot, Run};
use std::collections::BTreeSet;
use std::rc::Rc;
use support::*;

/// Every entry the assay's value depends on, from a scan of the whole catalog.
fn expected_entries(catalog: &Catalog) -> BTreeSet<u64> {
    let assay = run_hash(catalog, ASSAY);
    let standardization = run_hash(catalog, STANDARDIZATION);
    let runs = [assay, standardization];
    let mut expected = BTreeSet::new();
    for entry in catalog.entries() {
        let keep = match &entry.body {
            // The two runs, and every entry of them that carries a reading or a value.
            LabBody::Run(_) => runs.contains(&entry.hash),
            LabBody::Weighing(w) => runs.contains(&w.run),
            LabBody::Titration(t) => runs.contains(&t.run),
            LabBody::Replicate(r) => runs.contains(&r.run),
            LabBody::Result(r) => runs.contains(&r.run),
            LabBody::Stated(s) => runs.contains(&s.run),
            // What they rely on: in this scenario one of each, all in force.
            LabBody::Titrant(_)
            | LabBody::Sample(_)
            | LabBody::ReferenceLot(_)
            | LabBody::Balance(_)
            | LabBody::Calibration(_)
            | LabBody::BalanceCheck(_)
            | LabBody::Adoption(_) => true,
            // Sign-offs name the run; investigations, corrections and invalidations have none
            // in the clean scenario.
            LabBody::SignOff(s) => runs.contains(&s.subject),
            _ => false,
        };
        if keep {
            expected.insert(entry.seq);
        }
    }
    expected
}

#[test]
fn explains_every_raw_reading_behind_an_assay_and_nothing_else() {
    let mut built = build(&Plan::clean());
    let catalog = Catalog::load(built.ledger.store()).expect("catalog");
    let expected = expected_entries(&catalog);
    let explanation = explain(&mut built.ledger, &Target::RunId(ASSAY.into())).expect("explained");
    let shown: BTreeSet<u64> = explanation.entries.iter().copied().collect();
    assert_eq!(
        shown, expected,
        "entries shown differ from what the result depends on"
    );
    // Every weighing of the assay and of its standardization is under a replicate, with its
    // balance, the calibration in force and the day's check.
    let weighings: usize = [
        &explanation.run,
        explanation.run.standardization.as_deref().unwrap(),
    ]
    .iter()
    .flat_map(|r| r.replicates.iter())
    .map(|rep| rep.weighings.len())
    .sum();
    let expected_weighings = catalog
        .entries()
        .iter()
        .filter(|e| matches!(e.body, LabBody::Weighing(_)))
        .count();
    assert_eq!(weighings, expected_weighings);
    for rep in &explanation.run.replicates {
        for w in &rep.weighings {
            assert!(w.balance.calibration.is_some() && w.balance.calibration_valid_then);
            assert!(!w.balance.checks.is_empty(), "the morning check is shown");
            assert_eq!(w.entry.signature, SignatureState::Verified);
        }
    }
}

#[test]
fn explained_numbers_are_those_of_the_whole_catalog_recompute() {
    let mut built = build(&Plan::clean());
    let catalog = Catalog::load(built.ledger.store()).expect("catalog");
    let whole = recomputed(&catalog, ASSAY);
    let explanation = explain(&mut built.ledger, &Target::RunId(ASSAY.into())).expect("explained");
    let outcome = explanation.run.recomputed.as_ref().expect("recomputed");
    assert_eq!(outcome, &whole.outcome);
    for rep in &explanation.run.replicates {
        let value = whole
            .outcome
            .replicates
            .iter()
            .find(|v| v.number == rep.number)
            .map(|v| v.value);
        assert_eq!(rep.value, value, "replicate {}", rep.number);
    }
}

#[test]
fn any_entry_of_a_run_leads_to_the_same_explanation() {
    let mut built = build(&Plan::clean());
    let catalog = Catalog::load(built.ledger.store()).expect("catalog");
    let assay = run_hash(&catalog, ASSAY);
    let by_id = explain(&mut built.ledger, &Target::RunId(ASSAY.into())).expect("by id");
    let weighing = catalog
        .entries()
        .iter()
        .find(|e| matches!(&e.body, LabBody::Weighing(w) if w.run == assay))
        .expect("a weighing of the assay")
        .seq;
    let by_entry = explain(&mut built.ledger, &Target::Entry(weighing)).expect("by entry");
    assert_eq!(by_entry.run, by_id.run);
    assert_eq!(by_entry.entries, by_id.entries);
}

#[test]
fn a_run_id_is_found_through_the_label_index_and_a_wrong_label_is_not_believed() {
    let mut built = build(&Plan::clean());
    let catalog = Catalog::load(built.ledger.store()).expect("catalog");
    let assay = catalog
        .entries()
        .iter()
        .find(|e| e.hash == run_hash(&catalog, ASSAY))
        .expect("assay run entry")
        .seq;
    let standardization = catalog
        .entries()
        .iter()
        .find(|e| e.hash == run_hash(&catalog, STANDARDIZATION))
        .expect("standardization run entry")
        .seq;
    // Every run was labelled with its id when it was appended.
    let store = built.ledger.store();
    assert_eq!(
        store.labelled(Run::KIND, ASSAY).expect("index"),
        Some(vec![assay])
    );
    let honest = explain(&mut built.ledger, &Target::RunId(ASSAY.into())).expect("by id");
    assert_eq!(honest.run.run.seq, assay);

    // Point the assay's label at the standardization run, as a tampered or damaged index
    // would: the body of the entry found is checked, so explain still finds the assay by
    // reading the runs, and a label pointing at a run of another id is never taken.
    let path = built.ledger.store().path().to_path_buf();
    let conn = rusqlite::Connection::open(&path).expect("open with SQLite");
    conn.execute_batch(&format!(
        "DROP TRIGGER entry_labels_refuse_delete;
         DELETE FROM entry_labels WHERE label = '{ASSAY}';
         INSERT INTO entry_labels (kind, label, seq) VALUES ('{kind}', '{ASSAY}', {standardization});",
        kind = Run::KIND
    ))
    .expect("tamper with the label index");
    drop(conn);
    let misled = explain(&mut built.ledger, &Target::RunId(ASSAY.into())).expect("by id");
    assert_eq!(misled.run.run.seq, assay);
    assert_eq!(misled.entries, honest.entries);
}

#[test]
fn a_correction_shows_its_old_and_new_value_reason_and_author() {
    let mut plan = Plan::clean();
    let time = plus(plan.step("approval").at, 600);
    plan.steps.push(drafted(
        "correction",
        time,
        Who::Analyst2,
        correct_endpoint(ASSAY, 1, "endpoint note completed from the bench notebook"),
    ));
    let mut built = build(&plan);
    let correction_seq = built.seq("correction");
    let explanation = explain(&mut built.ledger, &Target::RunId(ASSAY.into())).expect("explained");
    assert!(explanation.entries.contains(&correction_seq));
    let step = explanation
        .run
        .replicates
        .iter()
        .flat_map(|r| r.entries.iter())
        .flat_map(|p| p.corrections.iter())
        .find(|c| c.seq == correction_seq)
        .expect("the correction is shown under the entry it corrects");
    assert_eq!(
        step.reason,
        "endpoint note completed from the bench notebook"
    );
    assert_eq!(step.author, Who::Analyst2.person());
    assert!(step.signed);
    assert!(
        step.changes
            .iter()
            .any(|c| c.field == "endpoint" && c.old != c.new),
        "the endpoint's old and new text are both shown: {:?}",
        step.changes
    );
}

#[test]
fn an_unknown_run_or_an_entry_outside_runs_is_refused_with_what_to_do() {
    let mut built = build(&Plan::clean());
    match explain(&mut built.ledger, &Target::RunId("NO-SUCH-RUN".into())) {
        Err(ExplainError::NotFound(what)) => assert!(what.contains("NO-SUCH-RUN")),
        other => panic!("expected NotFound, got {other:?}"),
    }
    // Entry 1 opens the ledger: it belongs to no run.
    match explain(&mut built.ledger, &Target::Entry(1)) {
        Err(ExplainError::NotFound(what)) => assert!(what.contains("entry 1"), "{what}"),
        other => panic!("expected NotFound, got {other:?}"),
    }
}

#[test]
fn a_corrected_reference_lot_is_used_as_corrected_in_the_explained_numbers() {
    let mut plan = Plan::clean();
    let time = plus(plan.step("approval").at, 600);
    plan.steps.push(drafted(
        "lot-correction",
        time,
        Who::Analyst,
        Rc::new(|_: &Ledger, catalog: &Catalog, author: &str| {
            let lot = catalog
                .find_id(ReferenceLot::KIND, REFERENCE_LOT)
                .expect("the scenario's reference lot");
            // Invented: the certificate's purity re-read as 0.99915 instead of 0.99965.
            let changes = [("purity".to_string(), "0.99915".to_string())];
            correction_draft(
                catalog,
                lot,
                &changes,
                "purity re-read from the certificate",
                author,
            )
            .expect("a correction of the lot")
        }),
    ));
    let mut built = build(&plan);
    let correction_seq = built.seq("lot-correction");
    let catalog = Catalog::load(built.ledger.store()).expect("catalog");
    let whole = recomputed(&catalog, ASSAY);
    let explanation = explain(&mut built.ledger, &Target::RunId(ASSAY.into())).expect("explained");
    assert!(explanation.entries.contains(&correction_seq));
    assert_eq!(
        explanation.run.recomputed.as_ref().expect("recomputed"),
        &whole.outcome
    );
    let std = explanation
        .run
        .standardization
        .as_deref()
        .expect("standardization");
    let std_whole = recomputed(&catalog, STANDARDIZATION);
    assert_eq!(
        std.recomputed.as_ref().expect("recomputed"),
        &std_whole.outcome
    );
    // And the correction did change the numbers (else this test would prove nothing).
    let uncorrected = recomputed(
        &Catalog::load(build(&Plan::clean()).ledger.store()).expect("catalog"),
        ASSAY,
    );
    assert_ne!(uncorrected.outcome.mean, whole.outcome.mean);
}
