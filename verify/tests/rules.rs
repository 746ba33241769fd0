//! Every validation rule against one clean scenario (`support::Plan::clean`): the clean
//! scenario has no finding at all, each firing case changes one thing in it and finds exactly
//! the code it is about (plus a companion where the rules say two things at once), and near
//! misses at a rule's boundary find nothing.
//!
//! Codes that need a tampered SQLite file (INT-01, INT-02, INT-05, INT-06, INT-07) are covered by
//! the ledger crate's tamper matrix; see `every_code_is_covered_here_or_skipped_with_a_reason`.
//! `PER-01` is not a validation finding: the periodic review (`assize_verify::periodic`) emits
//! it, so its case goes through that review.

mod support;

use assize_ledger::store::{OpenMode, Store};
use assize_ledger::Ledger;
use assize_ledger::{codec, Draft, Entry, EntryHash, Record, ReplayOptions, Role, Timestamp};
use assize_verify::catalog::Catalog;
use assize_verify::correction::correction_draft;
use assize_verify::findings::{Finding, RULES};
use assize_verify::periodic;
use assize_verify::records::{DocumentKind, Meaning, Run, RunKind, Sample, Weighing};
use assize_verify::rounding::Reported;
use assize_verify::rules::Evidence;
use assize_verify::validate::{validate, Scope};
use rust_decimal::Decimal;
use std::rc::Rc;
use support::*;

/// Codes with the test that makes each fire, one `CODE test_name` a line.
const COVERED: &str = "
INT-03 int_03_unsigned_entry_of_a_kind_that_must_be_signed
INT-04 int_04_entry_authored_in_a_role_the_kind_does_not_allow
INT-08 int_08_lab_entry_that_fails_its_own_checks
CALC-01 calc_01_stated_final_concentration_one_unit_off_in_its_last_place
CALC-02 calc_02_reported_value_one_unit_off_in_its_last_place
CALC-03 calc_03_reference_lot_of_another_substance_than_the_method_needs
COMP-01 comp_01_weighing_that_feeds_no_replicate
COMP-02 comp_02_assay_with_two_determinations_where_three_are_required
OOS-01 oos_01_failing_result_without_investigation
OOS-02 oos_02_retest_before_the_investigation_was_opened
OOS-03 oos_03_invalidation_citing_only_a_statistical_outlier
OOS-04 oos_04_invalidation_by_the_analyst_that_nobody_else_approved
BAL-01 bal_01_calibration_due_before_the_days_of_use
BAL-02 bal_02_no_routine_check_on_the_assay_day
BAL-03 bal_03_portion_just_below_minimum_weight_times_safety_factor
BAL-04 bal_04_routine_check_just_outside_tolerance_then_passing
BAL-05 bal_05_balance_failing_its_check_after_the_assay
CAP-01 cap_01_keyed_reading_differs_from_the_captured_one
CAP-02 cap_02_keyed_readings_where_the_method_expects_capture
CAP-03 cap_03_reading_without_stability_indicator
CAP-04 cap_04_portions_beyond_ten_percent_of_target
MAT-01 mat_01_reference_lot_expired_before_the_standardization
MAT-02 mat_02_titrant_expired_before_the_assay
MAT-03 mat_03_assay_more_than_seven_days_after_standardization
MAT-04 mat_04_standardization_strength_beyond_ten_percent_of_nominal
MAT-05 mat_05_assay_relies_on_the_standardization_of_another_titrant
SOD-01 sod_01_analyst_turned_reviewer_signs_own_assay
SOD-02 sod_02_correction_after_review_and_approval
SOD-03 sod_03_approval_with_a_justification
ORD-01 ord_01_sample_received_after_the_assay_started
ORD-02 ord_02_assay_weighed_before_the_standardization_finished
ORD-03 ord_03_routine_check_recorded_after_the_first_weighing
ORD-04 ord_04_sign_off_recorded_before_the_last_reading_time
ORD-05 ord_05_reading_timed_five_minutes_after_its_entry
ORD-06 ord_06_assay_names_a_superseded_policy_version
REP-01 rep_01_assay_rsd_just_above_the_limit
REP-02 rep_02_range_beyond_the_iso_5725_6_critical_range
REP-03 rep_03_grubbs_outlier_that_dixon_does_not_flag
REP-04 rep_04_dixon_outlier_that_grubbs_does_not_flag
TIM-01 tim_01_weighing_recorded_31_minutes_after_reading
TIM-02 tim_02_four_readings_share_one_time_stamp
CHG-01 chg_01_correction_turns_a_failing_result_into_a_passing_one
CHG-02 chg_02_correction_without_a_reason
PAT-01 pat_01_two_replicates_with_identical_readings
PAT-02 pat_02_reading_reused_in_another_run
PER-01 per_01_analyst_with_corrections_above_twice_the_lab_rate
";

/// Codes not made to fire here, one `CODE why` a line.
const SKIPPED: &str = "
INT-01 needs an altered row: ledger/tests/tamper.rs
INT-02 needs a missing or malformed row: ledger/tests/tamper.rs
INT-05 needs a row referring forward: ledger/tests/tamper.rs
INT-06 needs a truncated or forked file and a checkpoint: ledger/tests/tamper.rs
INT-07 needs a row whose time goes back: ledger/tests/tamper.rs
";

/// `(code, rest of the line)` of a table above.
fn table(text: &str) -> Vec<(&str, &str)> {
    text.lines()
        .filter(|line| !line.trim().is_empty())
        .map(|line| line.split_once(' ').expect("CODE text"))
        .collect()
}

#[test]
fn every_code_is_covered_here_or_skipped_with_a_reason() {
    let (covered, skipped) = (table(COVERED), table(SKIPPED));
    for rule in RULES {
        let times = covered
            .iter()
            .chain(&skipped)
            .filter(|(code, _)| *code == rule.code)
            .count();
        assert_eq!(times, 1, "{} must be covered or skipped, once", rule.code);
    }
    assert_eq!(covered.len() + skipped.len(), RULES.len());
    let source = include_str!("rules.rs");
    for (code, test) in covered {
        assert!(
            source.contains(&format!("fn {test}()")),
            "{code}: no test {test}"
        );
    }
}

// ---------------------------------------------------------------------------------------------
// The clean baseline

#[test]
fn clean_scenario_has_no_finding_and_data_that_meet_every_limit() {
    let built = build(&Plan::clean());
    let validation = validation(&built);
    assert!(
        validation.integrity.intact(),
        "{:?}",
        validation.integrity.problems
    );
    assert!(
        validation.findings.is_empty(),
        "{}",
        listing(&validation.findings)
    );
    // Not a vacuous pass: the runs are there, recomputable, and inside their limits.
    let catalog = Catalog::load(built.ledger.store()).expect("catalog");
    let standardization = recomputed(&catalog, STANDARDIZATION).outcome;
    assert_eq!(standardization.replicates.len(), 3);
    // Ph. Eur. 4.2.2: RSD ≤ 0.2 %, strength within 10 % of nominal (0.02 mol/kg).
    assert!(standardization.rsd_percent.expect("rsd") <= 0.2);
    assert!((standardization.mean / 0.02 - 1.0).abs() < 0.10);
    let assay = recomputed(&catalog, ASSAY).outcome;
    assert_eq!(assay.replicates.len(), 3);
    assert!(assay.rsd_percent.expect("rsd") <= 0.5, "policy limit");
    let reported = assay.reported.expect("reported");
    let value: f64 = reported.value.to_string().parse().expect("value");
    assert!((29.0..=32.0).contains(&value), "{value}");
    // Three stated values per replicate and a final one per run, and the reported result.
    assert_eq!(built.entries("std-stated").len(), 10);
    assert_eq!(built.entries("assay-stated").len(), 10);
    let (_, result) = result_entry(&catalog, ASSAY);
    assert_eq!(
        (result.value, result.expanded_uncertainty),
        as_reported(&reported)
    );
    // The assay alone, as its summary shows it: conforming, nothing found.
    let assay_only = validate(
        &built.ledger,
        &Scope::Run(ASSAY.into()),
        &ReplayOptions::default(),
        &mut |_| {},
    )
    .expect("validation runs");
    assert_eq!(assay_only.runs.len(), 1);
    assert_eq!(assay_only.runs[0].conforms, Some(true));
    assert!(assay_only.findings.is_empty());
    for sign_off in ["review", "approval"] {
        assert_eq!(built.entries(sign_off)[0].author, Who::Reviewer.person());
    }
}

#[test]
fn every_entry_of_the_clean_scenario_is_recorded_at_its_planned_time() {
    // The boundary cases below rely on record times being exactly what the plan says.
    let plan = Plan::clean();
    let built = build(&plan);
    for step in &plan.steps {
        assert_eq!(
            built.entries(&step.label)[0].record_time,
            step.at,
            "{}",
            step.label
        );
    }
}

// ---------------------------------------------------------------------------------------------
// INT: integrity (only what the public API can produce)

/// Writes one entry through a second store handle, bypassing the ledger's authority checks
/// (as another program writing the file could), correctly chained and hashed.
fn forge<R: Record>(built: &Built, author: Who, signed: bool, record: &R) -> u64 {
    let mut store =
        Store::open(built.ledger.store().path(), OpenMode::ReadWrite).expect("second handle");
    let tx = store.begin_append().expect("write lock");
    let head = tx.head().expect("head").expect("not empty");
    let signer = author.signer();
    let mut entry = Entry {
        seq: head.seq + 1,
        prev_hash: head.hash,
        record_time: plus(head.record_time, 60),
        author: author.person().into(),
        kind: R::KIND.into(),
        references: record.references(),
        body: codec::encode(record).expect("encode"),
        signer: signed.then(|| signer.public_key()),
        signature: None,
        hash: EntryHash::ZERO,
    };
    entry.hash = entry.compute_hash();
    entry.signature = signed.then(|| signer.sign_entry(&entry.hash));
    tx.insert(&entry).expect("insert");
    tx.commit().expect("commit");
    entry.seq
}

fn extra_sample() -> Sample {
    Sample {
        id: "HP-T-09".into(),
        description: "hydrogen peroxide about 30 %, retained portion".into(),
        received_at: at(day("2026-11-24"), "09:00:00"),
    }
}

#[test]
fn int_03_unsigned_entry_of_a_kind_that_must_be_signed() {
    let mut built = build(&Plan::clean());
    // The ledger itself refuses it ...
    let draft = Draft::of_record(Who::Analyst.person(), &extra_sample()).expect("draft");
    assert!(built.ledger.append(draft, None).is_err());
    // ... so it is written as another program could write it.
    let seq = forge(&built, Who::Analyst, false, &extra_sample());
    let findings = assert_codes(&built, &["INT-03"]);
    assert!(involves(&findings[0], seq), "{}", listing(&findings));
}

#[test]
fn int_04_entry_authored_in_a_role_the_kind_does_not_allow() {
    let mut built = build(&Plan::clean());
    // A reviewer may not record a sample (bench or QA only).
    let reviewer = Who::Reviewer.signer();
    let draft = Draft::of_record(reviewer.person(), &extra_sample()).expect("draft");
    assert!(built.ledger.append(draft, Some(&reviewer)).is_err());
    let seq = forge(&built, Who::Reviewer, true, &extra_sample());
    let findings = assert_codes(&built, &["INT-04"]);
    assert!(involves(&findings[0], seq), "{}", listing(&findings));
}

#[test]
fn int_08_lab_entry_that_fails_its_own_checks() {
    // The same weighing typed again with its readings swapped, written by a tool that skips the
    // intake checks: by difference, the second reading must be the smaller.
    let mut plan = Plan::clean();
    let entered = plan.input_of("assay-1-portion");
    let time = plan.step("assay-1-replicate").at;
    plan.insert_after(
        "assay-1-replicate",
        drafted(
            "swapped",
            plus(time, 20),
            Who::Analyst2,
            entered_then(entered, |w: &mut Weighing, _: &Catalog| {
                std::mem::swap(&mut w.first, &mut w.second)
            }),
        ),
    );
    let (built, findings) = expect_codes(&plan, &["INT-08"]);
    assert!(involves(&findings[0], built.seq("swapped")));
}

// ---------------------------------------------------------------------------------------------
// CALC: arithmetic

#[test]
fn calc_01_stated_final_concentration_one_unit_off_in_its_last_place() {
    let mut plan = Plan::clean();
    let off = Stating {
        final_off_by: 1,
        ..Stating::default()
    };
    plan.replace(
        "std-stated",
        Act::Derived(stated_values(STANDARDIZATION, off)),
    );
    let (built, findings) = expect_codes(&plan, &["CALC-01"]);
    assert_eq!(findings.len(), 1);
    let final_statement = built.entries("std-stated").last().expect("stated").seq;
    assert!(involves(&findings[0], final_statement));
}

#[test]
fn calc_01_silent_for_values_stated_with_fewer_decimals_but_rounded_correctly() {
    let mut plan = Plan::clean();
    let coarser = Stating {
        concentration_places: 5,
        content_places: 1,
        final_off_by: 0,
    };
    plan.replace(
        "std-stated",
        Act::Derived(stated_values(STANDARDIZATION, coarser)),
    );
    plan.replace("assay-stated", Act::Derived(stated_values(ASSAY, coarser)));
    expect_codes(&plan, &[]);
}

fn one_unit(r: &Reported) -> Decimal {
    Decimal::new(1, r.places.max(0) as u32)
}

fn value_one_unit_high(r: &Reported) -> (String, String) {
    let (_, u) = as_reported(r);
    let places = r.places.max(0) as usize;
    (format!("{:.*}", places, r.value + one_unit(r)), u)
}

fn uncertainty_one_unit_high(r: &Reported) -> (String, String) {
    let (value, _) = as_reported(r);
    let places = r.places.max(0) as usize;
    (
        value,
        format!("{:.*}", places, r.expanded_uncertainty + one_unit(r)),
    )
}

fn value_with_one_more_decimal(r: &Reported) -> (String, String) {
    let (_, u) = as_reported(r);
    (format!("{:.*}", r.places.max(0) as usize + 1, r.value), u)
}

#[test]
fn calc_02_reported_value_one_unit_off_in_its_last_place() {
    let mut plan = Plan::clean();
    plan.replace(
        "assay-result",
        Act::Derived(reported_result(ASSAY, value_one_unit_high)),
    );
    let (built, findings) = expect_codes(&plan, &["CALC-02"]);
    assert_eq!(findings.len(), 1);
    assert!(involves(&findings[0], built.seq("assay-result")));
}

#[test]
fn calc_02_reported_uncertainty_one_unit_off() {
    let mut plan = Plan::clean();
    plan.replace(
        "assay-result",
        Act::Derived(reported_result(ASSAY, uncertainty_one_unit_high)),
    );
    let (_, findings) = expect_codes(&plan, &["CALC-02"]);
    assert!(
        findings[0].message.contains("uncertainty"),
        "{}",
        findings[0].message
    );
}

#[test]
fn calc_02_reported_value_with_more_decimals_than_the_place_of_u() {
    // GUM (JCGM 100:2008) 7.2.6: the value is rounded to the place of the two-digit U.
    let mut plan = Plan::clean();
    plan.replace(
        "assay-result",
        Act::Derived(reported_result(ASSAY, value_with_one_more_decimal)),
    );
    expect_codes(&plan, &["CALC-02"]);
}

#[test]
fn calc_03_reference_lot_of_another_substance_than_the_method_needs() {
    // Oxalic acid recorded where the method needs sodium oxalate: nothing can be recomputed,
    // so there is nothing to state or report either.
    let mut plan = Plan::clean();
    plan.set("reference-lot", "substance", "oxalic acid")
        .set("reference-lot", "formula", "H2C2O4")
        .remove("std-stated")
        .remove("assay-stated")
        .remove("assay-result");
    let (_, findings) = expect_codes(&plan, &["CALC-03"]);
    let mut runs: Vec<_> = findings.iter().filter_map(|f| f.run.as_deref()).collect();
    runs.sort_unstable();
    assert_eq!(runs, [ASSAY, STANDARDIZATION]);
}

// ---------------------------------------------------------------------------------------------
// COMP: completeness

#[test]
fn comp_01_weighing_that_feeds_no_replicate() {
    // A fourth portion weighed and never titrated.
    let mut plan = Plan::clean();
    let previous_second = plan.get("assay-3-portion", "second");
    let vessel: Decimal = previous_second
        .trim_end_matches(" g")
        .parse()
        .expect("reading");
    let second = format!("{} g", vessel - Decimal::new(1504, 4));
    let observed = plus(plan.step("assay-3-replicate").at, 60);
    let step = plan.copy(
        "assay-3-portion",
        "assay-4-portion",
        plus(observed, 70),
        &[
            ("replicate", "4"),
            ("first", &previous_second),
            ("second", &second),
            ("first_at", &observed.to_string()),
            ("second_at", &plus(observed, 40).to_string()),
        ],
    );
    plan.insert_after("assay-3-replicate", step);
    let (built, findings) = expect_codes(&plan, &["COMP-01"]);
    assert!(involves(&findings[0], built.seq("assay-4-portion")));
}

#[test]
fn comp_01_an_abandoned_weighing_of_the_same_portion_is_orphan_data() {
    // The first attempt at replicate 1's portion, keyed and then abandoned: the replicate uses
    // the second attempt, and nothing sets the first aside.
    let mut plan = Plan::clean();
    let portion = plan.step("assay-1-portion").clone();
    let first = plan.get("assay-1-portion", "first");
    let vessel: Decimal = first.trim_end_matches(" g").parse().expect("reading");
    let observed = plus(portion.at, -600);
    let step = plan.copy(
        "assay-1-portion",
        "assay-1-abandoned",
        plus(observed, 70),
        &[
            ("second", &format!("{} g", vessel - Decimal::new(1391, 4))),
            ("first_at", &observed.to_string()),
            ("second_at", &plus(observed, 40).to_string()),
        ],
    );
    plan.insert_before("assay-1-portion", step);
    let (built, findings) = expect_codes(&plan, &["COMP-01"]);
    assert!(involves(&findings[0], built.seq("assay-1-abandoned")));
}

#[test]
fn comp_02_assay_with_two_determinations_where_three_are_required() {
    let mut knobs = Knobs::default();
    knobs.assay_portions_g.truncate(2);
    knobs.assay_contents.truncate(2);
    let (_, findings) = expect_codes(&Plan::from_knobs(knobs), &["COMP-02"]);
    assert_eq!(findings[0].run.as_deref(), Some(ASSAY));
}

// ---------------------------------------------------------------------------------------------
// OOS: out-of-specification handling

fn failing_assay() -> Knobs {
    Knobs {
        // Below the 29.0 % lower limit of the method's (invented) specification.
        assay_contents: vec![28.42, 28.47, 28.44],
        ..Knobs::default()
    }
}

fn investigation(after: Timestamp) -> Step {
    input(
        "oos",
        after,
        Who::Analyst2,
        "oos",
        &[
            ("id", "OOS-T-001"),
            ("run", ASSAY),
            (
                "description",
                "assay below the lower limit; laboratory investigation opened",
            ),
            ("opened_at", &after.to_string()),
        ],
    )
}

#[test]
fn oos_01_failing_result_without_investigation() {
    let (built, findings) = expect_codes(&Plan::from_knobs(failing_assay()), &["OOS-01"]);
    assert!(involves(&findings[0], built.seq("assay-result")));
}

#[test]
fn oos_01_silent_when_an_investigation_names_the_failing_run() {
    let mut plan = Plan::from_knobs(failing_assay());
    let time = plus(plan.step("assay-result").at, 300);
    plan.insert_after("assay-result", investigation(time));
    expect_codes(&plan, &[]);
}

/// The failing assay, then a retest of the same sample in the afternoon.
fn failing_assay_and_retest() -> Plan {
    let knobs = failing_assay();
    let mut plan = Plan::from_knobs(knobs.clone());
    let retest = RunSpec {
        prefix: "retest".into(),
        id: "AS-T-02".into(),
        start: "14:00:00".into(),
        vessel_start_g: "7.9911".into(),
        bottle_start_g: "109.2233".into(),
        targets: Knobs::default().assay_contents,
        ..knobs.assay_spec()
    };
    plan.steps.extend(run_steps(&retest));
    plan
}

#[test]
fn oos_02_retest_before_the_investigation_was_opened() {
    let mut plan = failing_assay_and_retest();
    let time = plus(plan.step("retest-result").at, 600);
    plan.insert_after("retest-result", investigation(time));
    let (_, findings) = expect_codes(&plan, &["OOS-02"]);
    assert_eq!(findings[0].run.as_deref(), Some("AS-T-02"));
}

#[test]
fn oos_02_silent_when_the_investigation_was_opened_before_the_retest() {
    let mut plan = failing_assay_and_retest();
    let time = plus(plan.step("approval").at, 60);
    plan.insert_before("retest-run", investigation(time));
    expect_codes(&plan, &[]);
}

/// Four assay determinations, replicate 2 invalidated with `cause` before the values are
/// stated (the method needs three valid ones).
fn assay_with_invalidation(cause: &str) -> Plan {
    let mut knobs = Knobs::default();
    knobs.assay_portions_g.push("0.1494".into());
    knobs.assay_contents.push(30.45);
    let mut plan = Plan::from_knobs(knobs);
    let time = plus(plan.step("assay-4-replicate").at, 30);
    plan.insert_after(
        "assay-4-replicate",
        input(
            "invalidation",
            time,
            Who::Analyst2,
            "invalidation",
            &[("run", ASSAY), ("replicate", "2"), ("cause", cause)],
        ),
    );
    plan
}

#[test]
fn oos_03_invalidation_citing_only_a_statistical_outlier() {
    let plan = assay_with_invalidation("statistical outlier");
    let (built, findings) = expect_codes(&plan, &["OOS-03"]);
    assert!(involves(&findings[0], built.seq("invalidation")));
}

#[test]
fn oos_03_and_04_silent_for_an_assignable_cause_approved_by_the_reviewer() {
    let plan = assay_with_invalidation("sample spilled on the balance pan during transfer");
    expect_codes(&plan, &[]);
}

#[test]
fn oos_04_invalidation_by_the_analyst_that_nobody_else_approved() {
    // Reviewed, but never approved: the invalidation stands on the analyst's word alone.
    let mut plan = assay_with_invalidation("sample spilled on the balance pan during transfer");
    plan.remove("approval");
    let (built, findings) = expect_codes(&plan, &["OOS-04"]);
    assert!(involves(&findings[0], built.seq("invalidation")));
}

// ---------------------------------------------------------------------------------------------
// BAL: balances at the moment of weighing

#[test]
fn bal_01_calibration_due_before_the_days_of_use() {
    let mut plan = Plan::clean();
    plan.set("calibration", "performed_on", "2025-11-21").set(
        "calibration",
        "due_on",
        "2026-11-22",
    );
    let (_, findings) = expect_codes(&plan, &["BAL-01"]);
    // Every weighing of both runs: 2 runs × 3 replicates × 2 weighings.
    assert_eq!(findings.len(), 12);
}

#[test]
fn bal_01_calibration_366_days_old_on_the_assay_day_but_365_on_the_standardization_day() {
    // Policy: calibration_interval_days = 365 (lab policy); due date still ahead.
    let mut plan = Plan::clean();
    plan.set("calibration", "performed_on", "2025-11-23").set(
        "calibration",
        "due_on",
        "2026-12-15",
    );
    let (_, findings) = expect_codes(&plan, &["BAL-01"]);
    assert_eq!(findings.len(), 6);
    assert!(findings.iter().all(|f| f.run.as_deref() == Some(ASSAY)));
    assert!(
        findings[0].message.contains("366 days"),
        "{}",
        findings[0].message
    );
}

#[test]
fn bal_01_silent_on_the_due_date_and_at_exactly_the_interval() {
    let mut plan = Plan::clean();
    plan.set("calibration", "performed_on", "2025-11-24").set(
        "calibration",
        "due_on",
        "2026-11-24",
    );
    expect_codes(&plan, &[]);
}

#[test]
fn bal_02_no_routine_check_on_the_assay_day() {
    let mut plan = Plan::clean();
    plan.remove("check-assay-day");
    let (_, findings) = expect_codes(&plan, &["BAL-02"]);
    assert_eq!(findings.len(), 6);
    assert!(findings.iter().all(|f| f.run.as_deref() == Some(ASSAY)));
}

#[test]
fn bal_02_routine_check_done_only_after_the_assay_weighings() {
    let mut plan = Plan::clean();
    let afternoon = at(plan.knobs.assay_day, "12:30:00");
    plan.set("check-assay-day", "at", &afternoon.to_string())
        .record_at("check-assay-day", plus(afternoon, 70))
        .move_after("check-assay-day", "assay-result");
    let (_, findings) = expect_codes(&plan, &["BAL-02"]);
    assert_eq!(findings.len(), 6);
}

#[test]
fn bal_02_silent_for_a_check_timed_at_the_first_weighing() {
    // Policy: a passing check earlier the same day; "earlier" includes the same instant.
    let mut plan = Plan::clean();
    let first_weighing = plan.time_of("assay-1-portion", "first_at");
    plan.set("check-assay-day", "at", &first_weighing.to_string())
        .record_at("check-assay-day", plus(first_weighing, 10))
        .move_after("check-assay-day", "assay-run");
    expect_codes(&plan, &[]);
}

#[test]
fn bal_03_portion_just_below_minimum_weight_times_safety_factor() {
    // USP <41> minimum weight × the policy's safety factor 2 = 0.1498 g; replicate 2 of the
    // assay weighs 0.1497 g.
    let mut plan = Plan::clean();
    plan.set("balance", "minimum_weight", "0.07490 g");
    let (built, findings) = expect_codes(&plan, &["BAL-03"]);
    assert_eq!(findings.len(), 1);
    assert!(involves(&findings[0], built.seq("assay-2-portion")));
}

#[test]
fn bal_03_silent_for_a_portion_exactly_at_the_required_minimum() {
    let mut plan = Plan::clean();
    plan.set("balance", "minimum_weight", "0.07485 g");
    expect_codes(&plan, &[]);
}

/// An extra routine check of the standardization day at 07:45 against a 200 g weight whose
/// certified mass is 200.0000 g, before the passing 07:52 check.
fn early_check(reading: &str) -> Plan {
    let mut plan = Plan::clean();
    let observed = at(plan.knobs.std_day, "07:45:00");
    plan.insert_before(
        "check-std-day",
        balance_check("early-check", Who::Analyst, observed, reading),
    );
    plan.set("early-check", "reference_mass", "200.0000 g");
    plan
}

#[test]
fn bal_04_routine_check_just_outside_tolerance_then_passing() {
    // USP <41> accuracy: within 0.10 % of the test weight; 0.2002 g of 200 g is 0.1001 %.
    let (built, findings) = expect_codes(&early_check("200.2002 g"), &["BAL-04"]);
    assert!(involves(&findings[0], built.seq("early-check")));
}

#[test]
fn bal_04_silent_for_a_check_exactly_at_tolerance() {
    // 0.2000 g of 200 g is exactly 0.10 %.
    expect_codes(&early_check("200.2000 g"), &[]);
}

#[test]
fn bal_01_silent_for_a_calibration_certificate_entered_after_the_runs() {
    // The certificate (calibration performed months before) is entered only after the runs
    // were signed: the balance was calibrated when used, and its certificate's sensitivity
    // uncertainty is what the budgets use. The streaming validation judged the runs before
    // the certificate arrived and must judge them again.
    let mut plan = Plan::clean();
    let entered = plus(plan.step("approval").at, 600);
    plan.move_after("calibration", "approval")
        .record_at("calibration", entered);
    let (built, _) = expect_codes(&plan, &[]);
    agree_at_every_window(&built);
}

#[test]
fn bal_05_balance_failing_its_check_after_the_assay() {
    let mut plan = Plan::clean();
    let observed = at(plan.knobs.assay_day, "15:00:00");
    plan.steps.push(balance_check(
        "late-check",
        Who::Analyst2,
        observed,
        "200.4000 g",
    ));
    let (built, findings) = expect_codes(&plan, &["BAL-04", "BAL-05"]);
    agree_at_every_window(&built);
    let affected = of_code(&findings, "BAL-05");
    assert_eq!(affected.len(), 1);
    assert_eq!(affected[0].run.as_deref(), Some(ASSAY));
    for n in 1..=3 {
        for part in ["portion", "titrant"] {
            assert!(involves(
                affected[0],
                built.seq(&format!("assay-{n}-{part}"))
            ));
        }
    }
}

// ---------------------------------------------------------------------------------------------
// CAP: how readings were taken

/// The balance's own record of replicate 1's sample weighing, imported after the replicate.
fn captured_twin(plan: &Plan, second: &str) -> Step {
    let time = plus(plan.step("assay-1-replicate").at, 30);
    plan.copy(
        "assay-1-portion",
        "captured",
        time,
        &[("second", second), ("captured", "true")],
    )
}

#[test]
fn cap_01_keyed_reading_differs_from_the_captured_one() {
    let mut plan = Plan::clean();
    let twin = captured_twin(&plan, "9.7330 g");
    plan.insert_after("assay-1-replicate", twin);
    let (built, findings) = expect_codes(&plan, &["CAP-01"]);
    assert!(involves(&findings[0], built.seq("assay-1-portion")));
    assert!(involves(&findings[0], built.seq("captured")));
}

#[test]
fn cap_01_silent_when_the_captured_reading_agrees() {
    let mut plan = Plan::clean();
    let keyed_second = plan.get("assay-1-portion", "second");
    let twin = captured_twin(&plan, &keyed_second);
    plan.insert_after("assay-1-replicate", twin);
    expect_codes(&plan, &[]);
}

fn capture_expected(plan: &mut Plan) {
    let text = variant(
        METHOD_TEXT,
        "replicates = 3\n",
        "replicates = 3\nreadings_captured = true\n",
    );
    plan.set("adopt-method", "text", &text);
}

fn weighing_labels(plan: &Plan) -> Vec<String> {
    plan.steps
        .iter()
        .filter(|s| matches!(&s.act, Act::Input { kind, .. } if kind == "weighing"))
        .map(|s| s.label.clone())
        .collect()
}

#[test]
fn cap_02_keyed_readings_where_the_method_expects_capture() {
    let mut plan = Plan::clean();
    capture_expected(&mut plan);
    let (_, findings) = expect_codes(&plan, &["CAP-02"]);
    assert_eq!(findings.len(), 12);
}

#[test]
fn cap_02_silent_when_every_reading_is_captured() {
    let mut plan = Plan::clean();
    capture_expected(&mut plan);
    for label in weighing_labels(&plan) {
        plan.set(&label, "captured", "true");
    }
    expect_codes(&plan, &[]);
}

#[test]
fn cap_03_reading_without_stability_indicator() {
    let mut plan = Plan::clean();
    plan.set("assay-2-portion", "unstable", "true");
    let (built, findings) = expect_codes(&plan, &["CAP-03"]);
    assert!(involves(&findings[0], built.seq("assay-2-portion")));
}

#[test]
fn cap_04_portions_beyond_ten_percent_of_target() {
    // USP General Notices 8.20: "about" means within 10 %; the method says about 0.15 g.
    let knobs = Knobs {
        assay_portions_g: vec!["0.1660".into(), "0.1497".into(), "0.1340".into()],
        ..Knobs::default()
    };
    let (built, findings) = expect_codes(&Plan::from_knobs(knobs), &["CAP-04"]);
    assert_eq!(findings.len(), 2);
    assert!(involves(&findings[0], built.seq("assay-1-portion")));
    assert!(involves(&findings[1], built.seq("assay-3-portion")));
}

#[test]
fn cap_04_silent_at_exactly_ten_percent_either_side() {
    let knobs = Knobs {
        assay_portions_g: vec!["0.1650".into(), "0.1497".into(), "0.1350".into()],
        ..Knobs::default()
    };
    expect_codes(&Plan::from_knobs(knobs), &[]);
}

// ---------------------------------------------------------------------------------------------
// MAT: reference standards and titrants

#[test]
fn mat_01_reference_lot_expired_before_the_standardization() {
    let mut plan = Plan::clean();
    plan.set("reference-lot", "valid_until", "2026-11-22");
    let (_, findings) = expect_codes(&plan, &["MAT-01"]);
    assert_eq!(findings[0].run.as_deref(), Some(STANDARDIZATION));
}

#[test]
fn mat_01_silent_once_a_correction_with_a_reason_extends_the_lot_after_the_runs() {
    // The lot was entered with a wrong date and corrected, with a reason, after the runs and
    // their sign-offs. Every run is then judged by the corrected lot: the streaming validation
    // must judge the runs again when the correction arrives (validation() checks it with
    // windows that judged them before).
    let mut plan = Plan::clean();
    plan.set("reference-lot", "valid_until", "2026-11-22");
    let time = plus(plan.step("approval").at, 600);
    plan.steps.push(drafted(
        "lot-correction",
        time,
        Who::Analyst,
        Rc::new(|_: &Ledger, catalog: &Catalog, author: &str| {
            let lot = catalog
                .of_kind("lab.reference-lot")
                .next()
                .expect("the lot")
                .hash;
            let changes = [("valid-until".to_string(), "2027-06-30".to_string())];
            correction_draft(
                catalog,
                lot,
                &changes,
                "certificate date mis-keyed; certificate says 2027-06-30",
                author,
            )
            .expect("correction accepted")
        }),
    ));
    let (built, _) = expect_codes(&plan, &[]);
    agree_at_every_window(&built);
}

#[test]
fn mat_01_silent_on_the_last_valid_day() {
    let mut plan = Plan::clean();
    plan.set("reference-lot", "valid_until", "2026-11-23");
    expect_codes(&plan, &[]);
}

#[test]
fn mat_02_titrant_expired_before_the_assay() {
    let mut plan = Plan::clean();
    plan.set("titrant", "valid_until", "2026-11-23");
    let (_, findings) = expect_codes(&plan, &["MAT-02"]);
    assert_eq!(findings.len(), 1);
    assert_eq!(findings[0].run.as_deref(), Some(ASSAY));
}

#[test]
fn mat_02_silent_on_the_last_valid_day() {
    let mut plan = Plan::clean();
    plan.set("titrant", "valid_until", "2026-11-24");
    expect_codes(&plan, &[]);
}

fn assay_a_week_later(start: &str) -> Plan {
    let knobs = Knobs {
        assay_day: day("2026-11-30"),
        ..Knobs::default()
    };
    let mut plan = Plan::from_knobs(knobs.clone());
    let assay = RunSpec {
        start: start.into(),
        ..knobs.assay_spec()
    };
    // Replace the assay's steps with ones starting at `start`.
    let from = plan
        .steps
        .iter()
        .position(|s| s.label == "assay-run")
        .expect("assay");
    let to = plan
        .steps
        .iter()
        .position(|s| s.label == "assay-result")
        .expect("result");
    plan.steps.splice(from..=to, run_steps(&assay));
    plan
}

#[test]
fn mat_03_assay_more_than_seven_days_after_standardization() {
    // Policy: standardization_valid_days = 7; the last assay reading comes 7 days and about
    // an hour after the standardization's last.
    let (_, findings) = expect_codes(&assay_a_week_later("10:05:00"), &["MAT-03"]);
    assert_eq!(findings[0].run.as_deref(), Some(ASSAY));
}

#[test]
fn mat_03_silent_just_inside_seven_days() {
    // The same day a week later, finished before the hour the standardization finished.
    expect_codes(&assay_a_week_later("08:50:00"), &[]);
}

#[test]
fn mat_04_standardization_strength_beyond_ten_percent_of_nominal() {
    // Ph. Eur. 4.2.2: within 10 % of nominal; 0.0225 mol/kg is 12.5 % above 0.02.
    let knobs = Knobs {
        std_strengths: vec![0.022492, 0.022506, 0.022502],
        ..Knobs::default()
    };
    let (_, findings) = expect_codes(&Plan::from_knobs(knobs), &["MAT-04"]);
    // The standardization itself, and the assay that relies on it.
    let mut runs: Vec<_> = findings.iter().filter_map(|f| f.run.as_deref()).collect();
    runs.sort_unstable();
    assert_eq!(runs, [ASSAY, STANDARDIZATION]);
}

#[test]
fn mat_04_silent_for_strength_just_inside_ten_percent() {
    let knobs = Knobs {
        std_strengths: vec![0.021972, 0.021986, 0.021982],
        ..Knobs::default()
    };
    expect_codes(&Plan::from_knobs(knobs), &[]);
}

fn strengths_with_relative_spread(spread: f64) -> Knobs {
    // Three values c(1 − s), c, c(1 + s) have an RSD of exactly s.
    Knobs {
        std_strengths: vec![0.02 * (1.0 - spread), 0.02, 0.02 * (1.0 + spread)],
        ..Knobs::default()
    }
}

#[test]
fn mat_04_standardization_rsd_just_above_the_limit() {
    // Ph. Eur. 4.2.2: RSD ≤ 0.2 %; here 0.21 %.
    let plan = Plan::from_knobs(strengths_with_relative_spread(0.0021));
    let (_, findings) = expect_codes(&plan, &["MAT-04"]);
    assert!(findings
        .iter()
        .any(|f| f.run.as_deref() == Some(STANDARDIZATION) && f.message.contains("RSD")));
}

#[test]
fn mat_04_silent_for_rsd_just_under_the_limit() {
    expect_codes(
        &Plan::from_knobs(strengths_with_relative_spread(0.0019)),
        &[],
    );
}

#[test]
fn mat_05_assay_relies_on_the_standardization_of_another_titrant() {
    let mut plan = Plan::clean();
    let time = plus(plan.step("titrant").at, 60);
    plan.insert_after("titrant", titrant_step("titrant-2", "KMN-T-02", time));
    plan.set("assay-run", "titrant", "KMN-T-02");
    let (built, findings) = expect_codes(&plan, &["MAT-05"]);
    assert!(involves(&findings[0], built.seq("std-run")));
}

// ---------------------------------------------------------------------------------------------
// SOD: sign-offs and segregation of duties

#[test]
fn sod_01_analyst_turned_reviewer_signs_own_assay() {
    let mut plan = Plan::clean();
    let time = plus(plan.step("assay-result").at, 600);
    plan.insert_after(
        "assay-result",
        drafted(
            "role-change",
            time,
            Who::Qa,
            change_role(Who::Analyst2.person(), Role::Reviewer),
        ),
    );
    plan.step_mut("review").who = Who::Analyst2;
    plan.step_mut("approval").who = Who::Analyst2;
    let (built, findings) = expect_codes(&plan, &["SOD-01"]);
    assert_eq!(findings.len(), 2);
    for sign_off in ["review", "approval"] {
        assert!(findings.iter().any(|f| involves(f, built.seq(sign_off))));
    }
}

fn endpoint_correction(time: Timestamp) -> Step {
    drafted(
        "correction",
        time,
        Who::Analyst2,
        correct_endpoint(ASSAY, 1, "endpoint note completed from the bench notebook"),
    )
}

#[test]
fn sod_02_correction_after_review_and_approval() {
    let mut plan = Plan::clean();
    let time = plus(plan.step("approval").at, 600);
    plan.steps.push(endpoint_correction(time));
    let (built, findings) = expect_codes(&plan, &["SOD-02"]);
    assert_eq!(findings.len(), 2);
    assert!(findings
        .iter()
        .all(|f| involves(f, built.seq("correction"))));
}

#[test]
fn sod_02_and_chg_01_silent_for_a_correction_with_a_reason_before_the_review() {
    let mut plan = Plan::clean();
    let time = plus(plan.step("assay-result").at, 600);
    plan.insert_before("review", endpoint_correction(time));
    expect_codes(&plan, &[]);
}

#[test]
fn sod_03_approval_with_a_justification() {
    let mut plan = Plan::clean();
    plan.replace(
        "approval",
        Act::Draft(sign_off(
            ASSAY,
            Meaning::Approved,
            "released for internal use only, pending the balance service visit",
        )),
    );
    let (built, findings) = expect_codes(&plan, &["SOD-03"]);
    assert!(involves(&findings[0], built.seq("approval")));
}

// ---------------------------------------------------------------------------------------------
// ORD: order of events

#[test]
fn ord_01_sample_received_after_the_assay_started() {
    let mut plan = Plan::clean();
    let late = at(plan.knobs.assay_day, "10:30:00");
    plan.set("sample", "received_at", &late.to_string());
    let (built, findings) = expect_codes(&plan, &["ORD-01"]);
    assert!(involves(&findings[0], built.seq("sample")));
}

#[test]
fn ord_01_silent_for_a_sample_received_as_the_assay_started() {
    let mut plan = Plan::clean();
    let started = plan.get("assay-run", "started_at");
    plan.set("sample", "received_at", &started);
    expect_codes(&plan, &[]);
}

#[test]
fn ord_02_assay_weighed_before_the_standardization_finished() {
    let knobs = Knobs {
        assay_day: Knobs::default().std_day,
        ..Knobs::default()
    };
    let mut plan = Plan::from_knobs(knobs.clone());
    let early = RunSpec {
        start: "09:40:00".into(),
        ..knobs.assay_spec()
    };
    let from = plan
        .steps
        .iter()
        .position(|s| s.label == "assay-run")
        .expect("assay");
    let to = plan
        .steps
        .iter()
        .position(|s| s.label == "assay-result")
        .expect("result");
    plan.steps.splice(from..=to, run_steps(&early));
    // One day, one routine check (the standardization's) covers both runs.
    plan.remove("check-assay-day");
    let (_, findings) = expect_codes(&plan, &["ORD-02"]);
    assert_eq!(findings[0].run.as_deref(), Some(ASSAY));
}

#[test]
fn ord_03_routine_check_recorded_after_the_first_weighing() {
    // Checked at 07:52, but entered at 08:20, after the first weighing was entered.
    let mut plan = Plan::clean();
    let entered = at(plan.knobs.std_day, "08:20:00");
    plan.move_after("check-std-day", "std-1-portion")
        .record_at("check-std-day", entered);
    let (built, findings) = expect_codes(&plan, &["ORD-03"]);
    assert_eq!(findings.len(), 1);
    assert!(involves(&findings[0], built.seq("std-1-portion")));
    assert!(involves(&findings[0], built.seq("check-std-day")));
}

#[test]
fn ord_03_and_tim_01_for_a_routine_check_entered_after_the_runs_were_signed() {
    // The assay day's check (observed 07:52) is entered only after the approval: every
    // weighing of that day relied on a check not yet recorded. The streaming validation
    // judged the assay before the check arrived and must judge it again.
    let mut plan = Plan::clean();
    let entered = plus(plan.step("approval").at, 600);
    plan.move_after("check-assay-day", "approval")
        .record_at("check-assay-day", entered);
    let (built, findings) = expect_codes(&plan, &["ORD-03", "TIM-01"]);
    agree_at_every_window(&built);
    let late_checks = of_code(&findings, "ORD-03");
    assert_eq!(late_checks.len(), 6, "{}", listing(&findings));
    assert!(late_checks
        .iter()
        .all(|f| involves(f, built.seq("check-assay-day"))));
}

#[test]
fn ord_04_sign_off_recorded_before_the_last_reading_time() {
    // The last weighing is entered 50 s before the balance's own reading time (within the
    // policy's 60 s clock tolerance) and everything after it, the sign-offs included,
    // follows within those 50 s.
    let mut plan = Plan::clean();
    let read = plan.time_of("assay-3-titrant", "second_at");
    plan.record_at("assay-3-titrant", plus(read, -50))
        .follow_closely("assay-3-titrant");
    let (built, findings) = expect_codes(&plan, &["ORD-04"]);
    assert_eq!(findings.len(), 2);
    assert!(built.entries("approval")[0].record_time < read);
}

fn reading_timed_after_its_entry(seconds: i64) -> Plan {
    let mut plan = Plan::clean();
    let entered = plan.step("assay-2-portion").at;
    plan.set(
        "assay-2-portion",
        "second_at",
        &plus(entered, seconds).to_string(),
    );
    plan
}

#[test]
fn ord_05_reading_timed_five_minutes_after_its_entry() {
    let (built, findings) = expect_codes(&reading_timed_after_its_entry(300), &["ORD-05"]);
    assert!(involves(&findings[0], built.seq("assay-2-portion")));
}

#[test]
fn ord_05_silent_at_exactly_the_clock_tolerance() {
    // Policy default: records.clock_tolerance_seconds = 60.
    expect_codes(&reading_timed_after_its_entry(60), &[]);
}

#[test]
fn ord_06_assay_names_a_superseded_policy_version() {
    // Version 5 of the policy is adopted after the standardization; the assay is recorded
    // under version 4 all the same.
    let mut plan = Plan::clean();
    let time = plus(plan.step("std-stated").at, 3600);
    let version_5 = variant(POLICY_TEXT, "version = \"4\"", "version = \"5\"");
    plan.insert_after(
        "std-stated",
        input(
            "adopt-policy-5",
            time,
            Who::Qa,
            "adopt",
            &[("document", "policy"), ("text", &version_5)],
        ),
    );
    let entered = plan.input_of("assay-run");
    plan.replace(
        "assay-run",
        Act::Draft(entered_then(entered, |run: &mut Run, catalog: &Catalog| {
            run.policy = adoptions(catalog, DocumentKind::Policy)[0];
        })),
    );
    let (built, findings) = expect_codes(&plan, &["ORD-06"]);
    assert_eq!(findings[0].run.as_deref(), Some(ASSAY));
    assert!(involves(&findings[0], built.seq("adopt-policy-5")));
}

// ---------------------------------------------------------------------------------------------
// REP: replicate agreement

fn assay_contents(contents: &[f64]) -> Knobs {
    Knobs {
        assay_contents: contents.to_vec(),
        ..Knobs::default()
    }
}

#[test]
fn rep_01_assay_rsd_just_above_the_limit() {
    // Policy: assay_max_rsd_percent = 0.5 (lab policy); SD 0.16 on 30.45 is 0.53 %.
    let plan = Plan::from_knobs(assay_contents(&[30.29, 30.45, 30.61]));
    let (_, findings) = expect_codes(&plan, &["REP-01"]);
    assert_eq!(findings[0].run.as_deref(), Some(ASSAY));
}

#[test]
fn rep_01_silent_for_rsd_just_under_the_limit() {
    // SD 0.145 on 30.45 is 0.48 %.
    expect_codes(
        &Plan::from_knobs(assay_contents(&[30.305, 30.45, 30.595])),
        &[],
    );
}

fn repeatability_stated(plan: &mut Plan) {
    // An invented validation figure: repeatability RSD 0.2 % of the value.
    let text = variant(
        METHOD_TEXT,
        "portion_g = \"0.15\"\n",
        "portion_g = \"0.15\"\nrepeatability_rsd_percent = \"0.2\"\n",
    );
    plan.set("adopt-method", "text", &text);
}

#[test]
fn rep_02_range_beyond_the_iso_5725_6_critical_range() {
    // ISO 5725-6 §5.2: CR = f(3)·σr = 3.3 × 0.2 % × 30.43 ≈ 0.20; the range here is 0.25,
    // while the RSD (0.41 %) stays inside the policy.
    let mut plan = Plan::from_knobs(assay_contents(&[30.30, 30.45, 30.55]));
    repeatability_stated(&mut plan);
    expect_codes(&plan, &["REP-02"]);
}

#[test]
fn rep_02_silent_for_the_clean_replicates() {
    let mut plan = Plan::clean();
    repeatability_stated(&mut plan);
    expect_codes(&plan, &[]);
}

/// Seven determinations per run (a method variant), the assay's contents given.
fn seven_replicates(contents: &[f64]) -> Plan {
    let knobs = Knobs {
        std_portions_g: [
            "0.2511", "0.2487", "0.2530", "0.2494", "0.2518", "0.2476", "0.2503",
        ]
        .map(String::from)
        .to_vec(),
        // Evenly spaced, a part in 10⁴ apart: no outlier, RSD about 0.02 %.
        std_strengths: (-3..=3)
            .map(|k| 0.02 * (1.0 + f64::from(k) * 1e-4))
            .collect(),
        assay_portions_g: [
            "0.1502", "0.1497", "0.1511", "0.1489", "0.1505", "0.1493", "0.1508",
        ]
        .map(String::from)
        .to_vec(),
        assay_contents: contents.to_vec(),
        ..Knobs::default()
    };
    let mut plan = Plan::from_knobs(knobs);
    let text = variant(METHOD_TEXT, "replicates = 3\n", "replicates = 7\n");
    plan.set("adopt-method", "text", &text);
    plan
}

#[test]
fn rep_03_grubbs_outlier_that_dixon_does_not_flag() {
    // n = 7: G = 2.08 > 2.020 (ISO 5725-2:1994 Table 5, 5 %), while Dixon's r10 = 0.55 stays
    // under 0.568 (Rorabacher 1991, 95 %). Shape 0, .15, .15, .15, .15, .45, 1 × 0.2 %.
    let plan = seven_replicates(&[30.30, 30.33, 30.33, 30.33, 30.33, 30.39, 30.50]);
    let (_, findings) = expect_codes(&plan, &["REP-03"]);
    assert!(
        findings[0].message.contains("replicate 7"),
        "{}",
        findings[0].message
    );
}

#[test]
fn rep_04_dixon_outlier_that_grubbs_does_not_flag() {
    // n = 7: r10 = 0.60 > 0.568 (Rorabacher 1991, 95 %), while G = 1.89 stays under 2.020
    // (ISO 5725-2:1994 Table 5). Shape 0, 0, 0, .4, .4, .4, 1 × 0.2 %.
    let plan = seven_replicates(&[30.30, 30.30, 30.30, 30.38, 30.38, 30.38, 30.50]);
    let (_, findings) = expect_codes(&plan, &["REP-04"]);
    assert!(
        findings[0].message.contains("replicate 7"),
        "{}",
        findings[0].message
    );
}

#[test]
fn rep_03_and_04_silent_for_seven_evenly_spread_replicates() {
    expect_codes(
        &seven_replicates(&[30.40, 30.42, 30.44, 30.46, 30.48, 30.50, 30.52]),
        &[],
    );
}

// ---------------------------------------------------------------------------------------------
// TIM: timeliness

fn titrant_weighing_entered_after(minutes: i64) -> Plan {
    let mut plan = Plan::clean();
    let read = plan.time_of("assay-3-titrant", "second_at");
    plan.record_at("assay-3-titrant", plus(read, minutes * 60));
    plan
}

#[test]
fn tim_01_weighing_recorded_31_minutes_after_reading() {
    // Policy: records.contemporaneous_window_minutes = 30 (lab policy).
    let (built, findings) = expect_codes(&titrant_weighing_entered_after(31), &["TIM-01"]);
    assert!(involves(&findings[0], built.seq("assay-3-titrant")));
}

#[test]
fn tim_01_silent_for_a_weighing_recorded_exactly_at_the_window() {
    let plan = titrant_weighing_entered_after(30);
    let built = build(&plan);
    let read = plan.time_of("assay-3-titrant", "second_at");
    assert_eq!(
        built.entries("assay-3-titrant")[0].record_time,
        plus(read, 1800)
    );
    assert_codes(&built, &[]);
}

fn check_entered_after(minutes: i64) -> Plan {
    let mut plan = Plan::clean();
    let observed = plan.time_of("check-assay-day", "at");
    plan.record_at("check-assay-day", plus(observed, minutes * 60));
    plan
}

#[test]
fn tim_01_routine_check_recorded_31_minutes_after_reading() {
    let (built, findings) = expect_codes(&check_entered_after(31), &["TIM-01"]);
    assert!(involves(&findings[0], built.seq("check-assay-day")));
    assert_eq!(findings[0].run, None);
}

#[test]
fn tim_01_silent_for_a_routine_check_recorded_exactly_at_the_window() {
    expect_codes(&check_entered_after(30), &[]);
}

fn readings_at_one_instant(titrant_second_too: bool) -> Plan {
    let mut plan = Plan::clean();
    let instant = plan.get("assay-1-portion", "first_at");
    plan.set("assay-1-portion", "second_at", &instant)
        .set("assay-1-titrant", "first_at", &instant);
    if titrant_second_too {
        plan.set("assay-1-titrant", "second_at", &instant);
    }
    plan
}

#[test]
fn tim_02_four_readings_share_one_time_stamp() {
    // Policy default: records.max_readings_per_timestamp = 3.
    let (built, findings) = expect_codes(&readings_at_one_instant(true), &["TIM-02"]);
    assert!(involves(&findings[0], built.seq("assay-1-portion")));
    assert!(involves(&findings[0], built.seq("assay-1-titrant")));
}

#[test]
fn tim_02_silent_for_three_readings_at_one_instant() {
    expect_codes(&readings_at_one_instant(false), &[]);
}

// ---------------------------------------------------------------------------------------------
// CHG: changes

fn decimal_point_misplaced(r: &Reported) -> (String, String) {
    let (_, u) = as_reported(r);
    let shifted = r.value / Decimal::TEN;
    (format!("{:.*}", r.places.max(0) as usize + 1, shifted), u)
}

#[test]
fn chg_01_correction_turns_a_failing_result_into_a_passing_one() {
    // 30.44 typed as 3.044 (failing), then corrected with a reason before the review.
    let mut plan = Plan::clean();
    plan.replace(
        "assay-result",
        Act::Derived(reported_result(ASSAY, decimal_point_misplaced)),
    );
    let time = plus(plan.step("assay-result").at, 300);
    plan.insert_after(
        "assay-result",
        drafted(
            "correction",
            time,
            Who::Analyst2,
            correct_result_value(ASSAY, "decimal point misplaced when typing the result"),
        ),
    );
    let (built, findings) = expect_codes(&plan, &["CHG-01"]);
    assert!(involves(&findings[0], built.seq("correction")));
    assert!(
        findings[0].message.contains("failing"),
        "{}",
        findings[0].message
    );
}

#[test]
fn chg_02_correction_without_a_reason() {
    let mut plan = Plan::clean();
    let time = plus(plan.step("assay-stated").at, 60);
    plan.insert_after(
        "assay-stated",
        drafted(
            "correction",
            time,
            Who::Analyst2,
            correct_endpoint(ASSAY, 1, ""),
        ),
    );
    let (built, findings) = expect_codes(&plan, &["CHG-02"]);
    assert!(involves(&findings[0], built.seq("correction")));
}

/// The clean scenario with replicate 1's end-point note corrected after the stated values,
/// giving `reason`.
fn endpoint_corrected_with(reason: &str) -> Plan {
    let mut plan = Plan::clean();
    let time = plus(plan.step("assay-stated").at, 60);
    plan.insert_after(
        "assay-stated",
        drafted(
            "correction",
            time,
            Who::Analyst2,
            correct_endpoint(ASSAY, 1, reason),
        ),
    );
    plan
}

#[test]
fn chg_02_placeholder_reason_counts_as_none() {
    // `assize correct` refuses a blank reason, so a placeholder is what gets typed instead.
    let plan = endpoint_corrected_with("n/a");
    let (built, findings) = expect_codes(&plan, &["CHG-02"]);
    assert!(involves(&findings[0], built.seq("correction")));
    assert!(
        findings[0].message.contains("\"n/a\" as its reason"),
        "{}",
        findings[0].message
    );
}

#[test]
fn chg_02_silent_for_a_short_reason_that_says_something() {
    expect_codes(&endpoint_corrected_with("n/a in the wrong box"), &[]);
}

// ---------------------------------------------------------------------------------------------
// PAT: suspicious patterns

#[test]
fn pat_01_two_replicates_with_identical_readings() {
    let mut plan = Plan::clean();
    let (first, second) = (
        plan.get("assay-1-portion", "first"),
        plan.get("assay-1-portion", "second"),
    );
    plan.set("assay-2-portion", "first", &first)
        .set("assay-2-portion", "second", &second);
    let (built, findings) = expect_codes(&plan, &["PAT-01"]);
    assert!(involves(&findings[0], built.seq("assay-1-portion")));
    assert!(involves(&findings[0], built.seq("assay-2-portion")));
}

#[test]
fn pat_02_reading_reused_in_another_run() {
    // A second sample assayed in the afternoon; its first portion shows the very readings of
    // the morning assay's first portion.
    let mut plan = Plan::clean();
    let time = plus(plan.step("sample").at, 60);
    plan.insert_after(
        "sample",
        sample_step("sample-2", "HP-T-02", time, &plus(time, -60).to_string()),
    );
    let second = RunSpec {
        prefix: "second".into(),
        id: "AS-T-02".into(),
        sample: Some("HP-T-02".into()),
        start: "14:00:00".into(),
        portions_g: ["0.1502", "0.1493", "0.1506"].map(String::from).to_vec(),
        bottle_start_g: "108.3315".into(),
        ..Knobs::default().assay_spec()
    };
    plan.steps.extend(run_steps(&second));
    let (built, findings) = expect_codes(&plan, &["PAT-02"]);
    assert_eq!(findings.len(), 1);
    assert!(involves(&findings[0], built.seq("assay-1-portion")));
    assert!(involves(&findings[0], built.seq("second-1-portion")));
}

#[test]
fn run_kinds_of_the_clean_scenario() {
    // The plan's two runs are what the rules expect them to be.
    let built = build(&Plan::clean());
    let catalog = Catalog::load(built.ledger.store()).expect("catalog");
    let kinds: Vec<RunKind> = catalog
        .of_kind(Run::KIND)
        .filter_map(|e| match &e.body {
            assize_verify::catalog::LabBody::Run(r) => Some(r.kind),
            _ => None,
        })
        .collect();
    assert_eq!(kinds, [RunKind::Standardization, RunKind::Assay]);
}

// ---------------------------------------------------------------------------------------------
// PER: periodic review (emitted by `periodic::review`, not by `validate`)

/// The periodic review's findings for the week of the scenario.
fn periodic_findings(built: &mut Built) -> Vec<Finding> {
    let validation = validation(built);
    let catalog = Catalog::load(built.ledger.store()).expect("catalog");
    let evidence = Evidence::gather(&catalog);
    let registry = built.ledger.registry().expect("registry").clone();
    let request = periodic::Request {
        from: day("2026-11-20"),
        to: day("2026-11-30"),
        seed: 48,
        random: 1,
    };
    periodic::review(&evidence, &validation, &registry, &request).findings
}

/// The clean scenario plus an assay of a second sample by the first analyst in the afternoon
/// (three runs, two analysts), and `corrections` endpoint corrections (with reasons) to the
/// second analyst's assay before its review.
fn three_runs_with_corrections(corrections: u32) -> Plan {
    let mut plan = Plan::clean();
    let time = plus(plan.step("sample").at, 60);
    plan.insert_after(
        "sample",
        sample_step("sample-2", "HP-T-02", time, &plus(time, -60).to_string()),
    );
    let second = RunSpec {
        prefix: "second".into(),
        id: "AS-T-02".into(),
        who: Who::Analyst,
        sample: Some("HP-T-02".into()),
        start: "14:00:00".into(),
        vessel_start_g: "7.9911".into(),
        bottle_start_g: "109.2233".into(),
        ..Knobs::default().assay_spec()
    };
    plan.steps.extend(run_steps(&second));
    for number in 1..=corrections {
        let time = plus(plan.step("assay-result").at, 60 * i64::from(number));
        let label = format!("correction-{number}");
        plan.insert_before(
            "review",
            drafted(
                &label,
                time,
                Who::Analyst2,
                correct_endpoint(ASSAY, number, "endpoint note completed from the notebook"),
            ),
        );
    }
    plan
}

#[test]
fn per_01_analyst_with_corrections_above_twice_the_lab_rate() {
    // Two corrections in one run against 2/3 per run for the lab: more than twice the rate,
    // on two events (the review's threshold; EU GMP Annex 11 §9 asks for the regular review).
    let mut built = build(&three_runs_with_corrections(2));
    assert_codes(&built, &[]);
    let findings = periodic_findings(&mut built);
    assert_eq!(
        codes(&findings),
        ["PER-01"].into(),
        "{}",
        listing(&findings)
    );
    assert_eq!(findings.len(), 1);
    assert!(
        findings[0].message.contains(Who::Analyst2.person()),
        "{}",
        findings[0].message
    );
}

#[test]
fn per_01_silent_for_one_correction_and_for_the_clean_scenario() {
    let mut built = build(&three_runs_with_corrections(1));
    assert_codes(&built, &[]);
    let findings = periodic_findings(&mut built);
    assert!(findings.is_empty(), "{}", listing(&findings));
    let mut clean = build(&Plan::clean());
    let findings = periodic_findings(&mut clean);
    assert!(findings.is_empty(), "{}", listing(&findings));
}

#[test]
fn periodic_review_counts_per_analyst_and_samples_reproducibly() {
    let mut built = build(&three_runs_with_corrections(2));
    let validation = validation(&built);
    let catalog = Catalog::load(built.ledger.store()).expect("catalog");
    let evidence = Evidence::gather(&catalog);
    let registry = built.ledger.registry().expect("registry").clone();
    let review = |seed: u64, random: usize| {
        let request = periodic::Request {
            from: day("2026-11-20"),
            to: day("2026-11-30"),
            seed,
            random,
        };
        periodic::review(&evidence, &validation, &registry, &request)
    };
    let first = review(48, 2);
    assert_eq!(first.runs, 3);
    assert_eq!(first.lab.corrections, 2);
    let analyst = first
        .by_analyst
        .iter()
        .find(|r| r.name == Who::Analyst2.person())
        .expect("the second analyst's row");
    assert_eq!((analyst.runs, analyst.corrections), (1, 2));
    // The same seed picks the same runs; over many seeds every run gets picked.
    assert_eq!(first.random_sample, review(48, 2).random_sample);
    assert_eq!(first.random_sample.len(), 2);
    let picked: std::collections::BTreeSet<String> = (0..40)
        .flat_map(|seed| review(seed, 1).random_sample.into_iter().map(|p| p.run))
        .collect();
    assert_eq!(picked.len(), 3, "{picked:?}");
    // The corrected run is targeted, with its reason.
    assert!(
        first
            .targeted_sample
            .iter()
            .any(|p| p.reason.contains("2 correction(s)")),
        "{:?}",
        first.targeted_sample
    );
    // Everyone who held a role or key in the period is listed.
    assert_eq!(first.people.len(), 4, "{:?}", first.people);
}
