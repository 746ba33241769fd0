//! The review dossier against independent reads of the same ledger: its result, replicates
//! and budget are the whole-catalog recompute's; its audit trail is `explain`'s; its findings,
//! report hash and sign-offs are the exception report's; its control chart holds exactly the
//! titrant's standardizations within reach, each at its recomputed mean, with a mean and a
//! standard deviation worked out here by the textbook two-pass formula.
//!
//! The scenario is the invented one of the rule tests (`support::Plan::clean`), with three more
//! invented standardizations of the same titrant: two before the assay, one after it.

#[allow(dead_code)] // shared with the rule tests, which use the rest of it
mod support;

use assize_ledger::ReplayOptions;
use assize_verify::catalog::{Catalog, LabBody};
use assize_verify::dossier::{dossier, Dossier, DossierError, DossierOptions, History, Zone};
use assize_verify::exceptions::report;
use assize_verify::explain::{explain, Target};
use assize_verify::records::{DocumentKind, RunKind};
use assize_verify::rules::Evidence;
use assize_verify::validate::{judge, replay, Scope};
use sha2::{Digest, Sha256};
use std::collections::BTreeSet;
use support::*;

/// Standardizations added to the clean scenario: id, day, start, strengths (mol/kg).
const EXTRA: [(&str, &str, &str, [f64; 3]); 3] = [
    (
        "STD-T-02",
        "2026-11-23",
        "11:00:00",
        [0.020011, 0.020004, 0.020009],
    ),
    (
        "STD-T-03",
        "2026-11-23",
        "13:30:00",
        [0.019987, 0.019995, 0.019990],
    ),
    (
        "STD-T-04",
        "2026-11-26",
        "08:10:00",
        [0.020030, 0.020026, 0.020034],
    ),
];

fn extra_spec(knobs: &Knobs, index: usize) -> RunSpec {
    let (id, on, start, strengths) = EXTRA[index];
    let mut spec = knobs.std_spec();
    spec.id = id.into();
    spec.prefix = format!("std{}", index + 2);
    spec.day = day(on);
    spec.start = start.into();
    spec.targets = strengths.to_vec();
    spec.portions_g = ["0.2503", "0.2496", "0.2520"].map(String::from).to_vec();
    spec.vessel_start_g = format!("{}.5310", 17 + index);
    spec.bottle_start_g = format!("{}.2214", 101 + index);
    spec
}

/// The clean scenario with STD-T-02 and STD-T-03 recorded before the assay and STD-T-04 on a
/// later day after the sign-offs (with that day's balance check).
fn plan_with_history() -> Plan {
    let mut plan = Plan::clean();
    let knobs = plan.knobs.clone();
    let mut before = run_steps(&extra_spec(&knobs, 0));
    before.extend(run_steps(&extra_spec(&knobs, 1)));
    let position = plan
        .steps
        .iter()
        .position(|s| s.label == "check-assay-day")
        .expect("the assay day's check");
    plan.steps.splice(position..position, before);
    plan.steps.push(balance_check(
        "check-late-day",
        Who::Analyst,
        at(day(EXTRA[2].1), "07:52:00"),
        "200.0002 g",
    ));
    plan.steps.extend(run_steps(&extra_spec(&knobs, 2)));
    plan
}

fn options(history: History) -> DossierOptions {
    DossierOptions {
        ledger_file: "lab.ledger".into(),
        history,
    }
}

fn dossier_of(built: &mut Built, run: &str, history: History) -> Dossier {
    dossier(
        &mut built.ledger,
        &Target::RunId(run.into()),
        &options(history),
    )
    .unwrap_or_else(|e| panic!("dossier of {run}: {e}"))
}

/// Mean and sample standard deviation by the two-pass textbook formula.
fn mean_and_s(values: &[f64]) -> (f64, f64) {
    let n = values.len() as f64;
    let mean = values.iter().sum::<f64>() / n;
    let squares: f64 = values.iter().map(|v| (v - mean) * (v - mean)).sum();
    (mean, (squares / (n - 1.0)).sqrt())
}

fn close(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-12 * b.abs().max(1e-300)
}

#[test]
fn result_replicates_and_budget_are_the_whole_catalog_recompute() {
    let mut built = build(&Plan::clean());
    let catalog = Catalog::load(built.ledger.store()).expect("catalog");
    let whole = recomputed(&catalog, ASSAY).outcome;
    let d = dossier_of(&mut built, ASSAY, History::UpToRun);
    let result = &d.result;
    assert_eq!(result.not_recomputed, None);
    assert_eq!(result.unit.as_deref(), Some(whole.unit.as_str()));
    // The scenario weighs its titrant (concentrations in mol/kg).
    assert_eq!(result.titrant_unit.as_deref(), Some("g"));
    assert_eq!(result.mean, Some(whole.mean));
    assert_eq!(result.standard_deviation, whole.standard_deviation);
    assert_eq!(result.rsd_percent, whole.rsd_percent);
    assert_eq!(result.reported, whole.reported);
    assert_eq!(d.budget.as_ref(), Some(&whole.budget));
    assert_eq!(result.replicates.len(), whole.replicates.len());
    for (line, value) in result.replicates.iter().zip(&whole.replicates) {
        assert_eq!(line.number, value.number);
        assert!(line.counted);
        assert_eq!(line.value, Some(value.value));
        assert_eq!(
            line.portion_g.as_deref(),
            Some(value.portion_g.normalize().to_string().as_str())
        );
    }
    let chart: Vec<(u32, f64)> = d
        .replicate_chart
        .points
        .iter()
        .map(|p| (p.number, p.value))
        .collect();
    let expected: Vec<(u32, f64)> = whole
        .replicates
        .iter()
        .map(|v| (v.number, v.value))
        .collect();
    assert_eq!(chart, expected);
    assert_eq!(d.replicate_chart.mean, Some(whole.mean));
    let std = recomputed(&catalog, STANDARDIZATION).outcome;
    let used = result
        .standardization
        .as_ref()
        .expect("the standardization");
    assert_eq!((used.run.as_str(), used.mean), (STANDARDIZATION, std.mean));
    // The reported result as the analyst recorded it (value ± U unit).
    let (_, recorded) = result_entry(&catalog, ASSAY);
    assert_eq!(
        result.as_recorded.as_deref(),
        Some(
            format!(
                "{} ± {} {}",
                recorded.value, recorded.expanded_uncertainty, recorded.unit
            )
            .as_str()
        )
    );
}

#[test]
fn header_names_the_head_the_run_and_the_documents_by_content_hash() {
    let mut built = build(&Plan::clean());
    let head = built.ledger.head().expect("head").expect("not empty");
    let catalog = Catalog::load(built.ledger.store()).expect("catalog");
    let d = dossier_of(&mut built, ASSAY, History::UpToRun);
    assert_eq!(
        (d.head_seq, d.head_hash.clone()),
        (head.seq, head.hash.to_hex())
    );
    assert!(d.chain_intact);
    assert_eq!(d.ledger_file, "lab.ledger");
    assert_eq!(d.run.id, ASSAY);
    assert_eq!(d.run.kind, RunKind::Assay);
    assert_eq!(d.run.seq, built.seq("assay-run"));
    assert_eq!(d.run.hash, run_hash(&catalog, ASSAY).to_hex());
    assert_eq!(d.run.sample.as_deref(), Some(SAMPLE));
    assert_eq!(d.run.titrant.as_deref(), Some(TITRANT));
    assert_eq!(d.run.standardization.as_deref(), Some(STANDARDIZATION));
    assert_eq!(d.run.analysts, vec![Who::Analyst2.person().to_string()]);
    let hashes: Vec<(DocumentKind, String, u64)> = d
        .documents
        .iter()
        .map(|doc| (doc.document, doc.sha256.clone(), doc.adopted_seq))
        .collect();
    assert_eq!(
        hashes,
        vec![
            (
                DocumentKind::Method,
                hex::encode(Sha256::digest(METHOD_TEXT.as_bytes())),
                built.seq("adopt-method")
            ),
            (
                DocumentKind::Policy,
                hex::encode(Sha256::digest(POLICY_TEXT.as_bytes())),
                built.seq("adopt-policy")
            ),
        ]
    );
    let (method_id, policy_id) = document_ids();
    assert_eq!(d.documents[0].id, method_id);
    assert_eq!(d.documents[1].id, policy_id);
}

#[test]
fn audit_trail_is_every_entry_explain_shows_once_in_ledger_order() {
    let mut built = build(&Plan::clean());
    let explanation = explain(&mut built.ledger, &Target::RunId(ASSAY.into())).expect("explain");
    let d = dossier_of(&mut built, ASSAY, History::UpToRun);
    let seqs: Vec<u64> = d.audit_trail.iter().map(|l| l.entry.seq).collect();
    let mut sorted = seqs.clone();
    sorted.sort();
    sorted.dedup();
    assert_eq!(seqs, sorted, "in ledger order, each once");
    let with_corrections: BTreeSet<u64> = d
        .audit_trail
        .iter()
        .flat_map(|l| std::iter::once(l.entry.seq).chain(l.entry.corrections.iter().map(|c| c.seq)))
        .collect();
    let shown: BTreeSet<u64> = explanation.entries.iter().copied().collect();
    assert_eq!(with_corrections, shown);
    // Each replicate's worked formula is explain's.
    for line in &d.result.replicates {
        let step = explanation
            .run
            .replicates
            .iter()
            .find(|s| s.number == line.number)
            .expect("the replicate");
        assert_eq!(line.worked, step.substituted);
    }
    let weighing = d
        .audit_trail
        .iter()
        .find(|l| l.entry.seq == built.entries("assay-2-portion")[0].seq)
        .expect("the second portion weighing");
    assert_eq!(
        weighing.context,
        format!("assay {ASSAY}, replicate 2: weighing")
    );
    assert_eq!(weighing.entry.author, Who::Analyst2.person());
}

#[test]
fn control_chart_holds_the_titrants_standardizations_up_to_the_run() {
    let mut built = build(&plan_with_history());
    let catalog = Catalog::load(built.ledger.store()).expect("catalog");
    let d = dossier_of(&mut built, ASSAY, History::UpToRun);
    let chart = &d.control_chart;
    assert_eq!(chart.titrant, TITRANT);
    assert_eq!(chart.up_to_seq, d.run.seq);
    assert!(chart.left_out.is_empty(), "{:?}", chart.left_out);
    let runs: Vec<&str> = chart.points.iter().map(|p| p.run.as_str()).collect();
    assert_eq!(runs, [STANDARDIZATION, "STD-T-02", "STD-T-03"]);
    let values: Vec<f64> = [STANDARDIZATION, "STD-T-02", "STD-T-03"]
        .iter()
        .map(|id| recomputed(&catalog, id).outcome.mean)
        .collect();
    let plotted: Vec<f64> = chart.points.iter().map(|p| p.value).collect();
    assert_eq!(plotted, values);
    let highlighted: Vec<bool> = chart.points.iter().map(|p| p.this_run).collect();
    assert_eq!(
        highlighted,
        [true, false, false],
        "the standardization used"
    );
    let (mean, s) = mean_and_s(&values);
    let limits = chart.limits.expect("limits from three points");
    assert_eq!(limits.n, 3);
    assert!(close(limits.mean, mean), "{} vs {mean}", limits.mean);
    assert!(close(limits.standard_deviation, s));
    assert!(close(limits.upper_2s, mean + 2.0 * s));
    assert!(close(limits.lower_2s, mean - 2.0 * s));
    assert!(close(limits.upper_3s, mean + 3.0 * s));
    assert!(close(limits.lower_3s, mean - 3.0 * s));
    // Three points cannot lie beyond 2s of their own mean (|z| ≤ (n − 1)/√n ≈ 1.15).
    assert!(chart.points.iter().all(|p| p.zone == Some(Zone::Within2s)));

    // To the head, the later standardization is there too, and moves the limits.
    let to_head = dossier_of(&mut built, ASSAY, History::ToHead);
    let runs: Vec<&str> = to_head
        .control_chart
        .points
        .iter()
        .map(|p| p.run.as_str())
        .collect();
    assert_eq!(runs, [STANDARDIZATION, "STD-T-02", "STD-T-03", "STD-T-04"]);
    assert_eq!(to_head.control_chart.up_to_seq, to_head.head_seq);
    let mut values = values;
    values.push(recomputed(&catalog, "STD-T-04").outcome.mean);
    let (mean, s) = mean_and_s(&values);
    let limits = to_head.control_chart.limits.expect("limits");
    assert!(close(limits.mean, mean) && close(limits.standard_deviation, s));
}

#[test]
fn a_standardizations_chart_ends_at_itself_and_marks_itself() {
    let mut built = build(&plan_with_history());
    let d = dossier_of(&mut built, "STD-T-02", History::UpToRun);
    let points: Vec<(&str, bool)> = d
        .control_chart
        .points
        .iter()
        .map(|p| (p.run.as_str(), p.this_run))
        .collect();
    assert_eq!(points, [(STANDARDIZATION, false), ("STD-T-02", true)]);
    assert_eq!(d.run.kind, RunKind::Standardization);
    assert_eq!(d.result.standardization, None);
}

#[test]
fn findings_report_hash_and_sign_offs_are_the_exception_reports() {
    let mut plan = Plan::clean();
    let off = Stating {
        final_off_by: 1,
        ..Stating::default()
    };
    plan.replace(
        "std-stated",
        Act::Derived(stated_values(STANDARDIZATION, off)),
    );
    let mut built = build(&plan);
    let d = dossier_of(&mut built, ASSAY, History::UpToRun);
    // The exception report, built here from the library's parts.
    let replayed = replay(&built.ledger, &ReplayOptions::default(), &mut |_| {}).expect("replay");
    let evidence = Evidence::gather(&replayed.catalog);
    let hash_of = |seq: u64| built.ledger.entry(seq).ok().map(|e| e.hash);
    let validation = judge(&replayed, &evidence, &Scope::Ledger, &hash_of).expect("judged");
    let run = evidence
        .runs
        .iter()
        .find(|r| r.id() == ASSAY)
        .expect("the assay");
    let expected = report(&evidence, &validation, run);
    assert_eq!(d.findings, expected.findings);
    assert_eq!(d.exception_report_sha256, expected.sha256());
    assert_eq!(d.sign_offs, expected.sign_offs);
    // The planted slip: the standardization's final value one unit off, found via the assay.
    let codes: Vec<(&str, Option<&str>)> = d
        .findings
        .iter()
        .map(|f| (f.code.text(), f.run.as_deref()))
        .collect();
    assert_eq!(codes, [("CALC-01", Some(STANDARDIZATION))]);
    assert_eq!(d.tally.blocking, 1);
    assert!(!d.findings[0].action.is_empty());
    // The clean scenario's review and approval, by the reviewer.
    let meanings: Vec<(&str, &str)> = d
        .sign_offs
        .iter()
        .map(|s| (s.signer.as_str(), s.meaning.as_str()))
        .collect();
    let reviewer = Who::Reviewer.person();
    assert_eq!(meanings, [(reviewer, "reviewed"), (reviewer, "approved")]);
}

#[test]
fn any_entry_of_a_run_leads_to_the_same_dossier() {
    let mut built = build(&Plan::clean());
    let catalog = Catalog::load(built.ledger.store()).expect("catalog");
    let assay = run_hash(&catalog, ASSAY);
    let titration_weighing = catalog
        .entries()
        .iter()
        .find(|e| matches!(&e.body, LabBody::Weighing(w) if w.run == assay))
        .expect("a weighing of the assay")
        .seq;
    let by_id = dossier_of(&mut built, ASSAY, History::UpToRun);
    let by_entry = dossier(
        &mut built.ledger,
        &Target::Entry(titration_weighing),
        &options(History::UpToRun),
    )
    .expect("by entry");
    assert_eq!(by_entry, by_id);
}

#[test]
fn an_unknown_run_is_not_found() {
    let mut built = build(&Plan::clean());
    match dossier(
        &mut built.ledger,
        &Target::RunId("NO-SUCH-RUN".into()),
        &options(History::UpToRun),
    ) {
        Err(DossierError::NotFound(what)) => assert!(what.contains("NO-SUCH-RUN"), "{what}"),
        other => panic!("expected NotFound, got {other:?}"),
    }
}
