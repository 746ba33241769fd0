//! A balance printout imported through `capture_import::record` into the rule tests' invented
//! lab (`support::Plan`), then validated: a printout that agrees with every keyed reading adds
//! no finding at all, each keying slip planted in one keyed reading adds exactly one CAP-01
//! naming that slip, and every refusal leaves the ledger's head where it was.
//!
//! The printout is written here from the clean plan's keyed weighings: each reading as keyed,
//! printed two seconds after its keyed time (a balance clock a little ahead), one line per
//! reading. A slip is planted by changing the keyed value in the plan, so the printout keeps the
//! true reading. Every expected message below is worked out from the values in the comment
//! beside it.

#[allow(dead_code)] // shared with the rule tests, which use the rest of it
mod support;

use assize_ledger::Timestamp;
use assize_verify::capture_import::{record, CaptureError};
use assize_verify::findings::Finding;
use assize_verify::printout::{parse_printout, PrintedReading};
use std::collections::BTreeSet;
use support::*;

/// The labels of a run's keyed weighings in the plan, in recording order.
fn weighing_labels(prefix: &str) -> Vec<String> {
    (1..=3)
        .flat_map(|n| ["portion", "titrant"].map(|part| format!("{prefix}-{n}-{part}")))
        .collect()
}

/// One printed line per reading of each weighing of the run, `offset` seconds after the keyed
/// time, on the keyed balance, stable, in time order.
fn printout_of(plan: &Plan, prefix: &str, offset: i64) -> String {
    printout_with(plan, prefix, offset, &|label| plan.get(label, "balance"))
}

/// Like [`printout_of`], each weighing printed by the balance `balance_of` its label names.
fn printout_with(
    plan: &Plan,
    prefix: &str,
    offset: i64,
    balance_of: &dyn Fn(&str) -> String,
) -> String {
    let mut lines: Vec<(Timestamp, String)> = Vec::new();
    for label in weighing_labels(prefix) {
        let balance = balance_of(&label);
        for (reading, time) in [("first", "first_at"), ("second", "second_at")] {
            let at = plus(plan.time_of(&label, time), offset);
            let (digits, unit) = plan
                .get(&label, reading)
                .split_once(' ')
                .map(|(d, u)| (d.to_string(), u.to_string()))
                .expect("a reading is digits and a unit");
            lines.push((at, format!("{at}  {balance}  {digits}  {unit}  S")));
        }
    }
    lines.sort_by_key(|(at, _)| *at);
    lines.dedup();
    let body: Vec<String> = lines.into_iter().map(|(_, line)| line).collect();
    format!("# invented printout\n{}\n", body.join("\n"))
}

fn parsed(text: &str) -> Vec<PrintedReading> {
    parse_printout(text).expect("the written printout parses")
}

/// The clean scenario without its review and approval: an import after a sign-off is a
/// change to what the sign-off covers (SOD-02), which is not what these tests are about.
fn unsigned_plan() -> Plan {
    let mut plan = Plan::clean();
    plan.remove("review").remove("approval");
    plan
}

fn head_seq(built: &Built) -> u64 {
    built.ledger.head().expect("head").expect("opened").seq
}

/// What a finding says, for comparing validations before and after an import.
fn said(findings: &[Finding]) -> BTreeSet<String> {
    findings
        .iter()
        .map(|f| format!("{} {}", f.code, f.message))
        .collect()
}

/// Builds `plan`, imports `printout` for the standardization, and returns the CAP-01
/// message, checking that the import added that one finding and nothing else.
fn cap_01_after_import(plan: &Plan, printout: &str) -> (Built, Vec<u64>, String) {
    let mut built = build(plan);
    let before = validation(&built).findings;
    let signer = Who::Analyst.signer();
    let (_, entries) = record(
        &mut built.ledger,
        &signer,
        &parsed(printout),
        STANDARDIZATION,
    )
    .expect("the import is recorded");
    // Six keyed weighings in the standardization, each printed: six twins.
    assert_eq!(entries.len(), 6);
    let after = validation(&built).findings;
    let added: Vec<&Finding> = after
        .iter()
        .filter(|f| !said(&before).contains(&format!("{} {}", f.code, f.message)))
        .collect();
    assert_eq!(added.len(), 1, "added:\n{}", listing(&after));
    assert_eq!(added[0].code.text(), "CAP-01");
    // Nothing the import did not cause went away either.
    let kept: BTreeSet<String> = said(&after)
        .into_iter()
        .filter(|s| !s.starts_with("CAP-01"))
        .collect();
    assert_eq!(kept, said(&before));
    let seqs = entries.iter().map(|e| e.seq).collect();
    (built, seqs, added[0].message.clone())
}

/// The plan with one keyed field of replicate 1's titrant weighing changed, and the printout
/// of the clean plan (the true readings).
fn slipped(field: &str, keyed: &str) -> (Plan, String) {
    let clean = unsigned_plan();
    // The clean titrant bottle starts at 112.5321 g (support::Knobs::std_spec).
    assert_eq!(clean.get("std-1-titrant", "first"), "112.5321 g");
    let printout = printout_of(&clean, "std", 2);
    let mut plan = clean;
    plan.set("std-1-titrant", field, keyed);
    (plan, printout)
}

/// CAP-01's message for replicate 1's titrant weighing: the keyed entry is the plan's, the
/// twin the second one recorded (the titrant weighing is the run's second keyed weighing).
fn expected(built: &Built, twins: &[u64], differences: &str) -> String {
    format!(
        "replicate 1 of run {STANDARDIZATION}, titrant weighing (entry {}, captured entry {}): {differences}",
        built.seq("std-1-titrant"),
        twins[1]
    )
}

#[test]
fn a_printout_that_agrees_with_every_keyed_reading_adds_no_finding() {
    let plan = unsigned_plan();
    let mut built = build(&plan);
    assert_codes(&built, &[]);
    let head = head_seq(&built);
    for (prefix, run, who) in [
        ("std", STANDARDIZATION, Who::Analyst),
        ("assay", ASSAY, Who::Analyst2),
    ] {
        let lines = parsed(&printout_of(&plan, prefix, 2));
        let (import, entries) =
            record(&mut built.ledger, &who.signer(), &lines, run).expect("recorded");
        // Three replicates, a portion and a titrant weighing each; each reading printed once.
        assert_eq!(entries.len(), 6);
        assert_eq!(import.readings_differing() + import.balances_differing(), 0);
        assert!(import.unpaired_lines.is_empty() && import.unpaired_weighings.is_empty());
    }
    assert_eq!(head_seq(&built), head + 12);
    // No CAP-01, and no balance, portion or time-stamp finding doubled by the twins.
    assert_codes(&built, &[]);
}

#[test]
fn a_chain_printed_once_with_the_keyed_times_adds_no_finding() {
    // Replicate 2's portion starts from replicate 1's last reading at the same instant, and
    // the balance printed that reading once, at exactly the keyed times (offset 0): two keyed
    // and two captured readings share one time stamp. TIM-02 counts keyed readings only
    // (policy default 3 per stamp), so the two keyed ones stay within it.
    let mut plan = unsigned_plan();
    let shared = plan.get("std-1-portion", "second_at");
    assert_eq!(
        plan.get("std-1-portion", "second"),
        plan.get("std-2-portion", "first")
    );
    plan.set("std-2-portion", "first_at", &shared);
    let mut built = build(&plan);
    assert_codes(&built, &[]);
    let lines = parsed(&printout_of(&plan, "std", 0));
    // Twelve readings, two of them one line.
    assert_eq!(lines.len(), 11);
    let (import, entries) = record(
        &mut built.ledger,
        &Who::Analyst.signer(),
        &lines,
        STANDARDIZATION,
    )
    .unwrap();
    assert_eq!(entries.len(), 6);
    assert_eq!(
        import.pairings[0].readings[1].printed.line,
        import.pairings[2].readings[0].printed.line
    );
    assert_codes(&built, &[]);
}

#[test]
fn a_finding_about_a_keyed_weighing_is_not_repeated_for_its_agreeing_twin() {
    // A minimum weight of 0.2 g × the policy's safety factor 2 = 0.4 g puts every portion
    // (about 0.25 g and 0.15 g) below it: BAL-03 for each portion weighing. Replicate 1's
    // standard portion is keyed as read without the stability indicator (CAP-03), and the
    // balance printed its first reading with U. The twins show the same net masses on the same
    // balance, so each of those findings stays once, on the keyed weighing.
    let mut plan = unsigned_plan();
    plan.set("balance", "minimum_weight", "0.2000 g");
    plan.set("std-1-portion", "unstable", "true");
    let printout = printout_of(&plan, "std", 2);
    let first = plan.get("std-1-portion", "first").replace(" g", "  g  S");
    assert_eq!(printout.matches(&first).count(), 1, "{printout}");
    let printout = printout.replace(&first, &first.replace("  S", "  U"));
    let mut built = build(&plan);
    let before = validation(&built).findings;
    assert_eq!(of_code(&before, "BAL-03").len(), 6);
    assert_eq!(of_code(&before, "CAP-03").len(), 1);
    let (import, _) = record(
        &mut built.ledger,
        &Who::Analyst.signer(),
        &parsed(&printout),
        STANDARDIZATION,
    )
    .unwrap();
    assert!(!import.pairings[0].captured.stable);
    let after = validation(&built).findings;
    assert_eq!(said(&after), said(&before));
}

#[test]
fn transposed_digits_are_named_in_cap_01() {
    // 112.5321 keyed as 112.5231: digits 5 and 6 (3, 2) swapped.
    let (plan, printout) = slipped("first", "112.5231 g");
    let (built, twins, message) = cap_01_after_import(&plan, &printout);
    assert_eq!(
        message,
        expected(
            &built,
            &twins,
            "first reading keyed 112.5231 g, captured 112.5321 g: transposed digits: 32 keyed as 23 (digit places 5 and 6)"
        )
    );
}

#[test]
fn a_shifted_decimal_is_named_in_cap_01() {
    // 1125.321 = 112.5321 × 10: the point one place to the right.
    let (plan, printout) = slipped("first", "1125.321 g");
    let (built, twins, message) = cap_01_after_import(&plan, &printout);
    assert_eq!(
        message,
        expected(
            &built,
            &twins,
            "first reading keyed 1125.321 g, captured 112.5321 g: shifted decimal: the point moved 1 place right (keyed = captured × 10^1)"
        )
    );
}

#[test]
fn a_dropped_digit_is_named_in_cap_01() {
    // 112.5321 without its 5th digit (3) is 112.521.
    let (plan, printout) = slipped("first", "112.521 g");
    let (built, twins, message) = cap_01_after_import(&plan, &printout);
    assert_eq!(
        message,
        expected(
            &built,
            &twins,
            "first reading keyed 112.521 g, captured 112.5321 g: dropped digit: the 3 at digit place 5 left out"
        )
    );
}

#[test]
fn an_extra_digit_is_named_in_cap_01() {
    // 112.53321 is 112.5321 with a 3 put in at the 5th digit (the leftmost place that fits).
    let (plan, printout) = slipped("first", "112.53321 g");
    let (built, twins, message) = cap_01_after_import(&plan, &printout);
    assert_eq!(
        message,
        expected(
            &built,
            &twins,
            "first reading keyed 112.53321 g, captured 112.5321 g: extra digit: a 3 added at digit place 5"
        )
    );
}

#[test]
fn a_wrong_unit_is_named_in_cap_01_for_each_reading() {
    // Both displayed numbers keyed with mg (a weighing keeps one unit); each is the number the
    // balance showed in g.
    let clean = unsigned_plan();
    let second = clean.get("std-1-titrant", "second");
    let second_digits = second.strip_suffix(" g").expect("grams");
    let (mut plan, printout) = slipped("first", "112.5321 mg");
    plan.set("std-1-titrant", "second", &format!("{second_digits} mg"));
    let (built, twins, message) = cap_01_after_import(&plan, &printout);
    assert_eq!(
        message,
        expected(
            &built,
            &twins,
            &format!(
                "first reading keyed 112.5321 mg, captured 112.5321 g: wrong unit: the displayed number keyed in mg instead of g; \
                 second reading keyed {second_digits} mg, captured {second}: wrong unit: the displayed number keyed in mg instead of g"
            )
        )
    );
}

#[test]
fn an_unexplained_difference_is_named_with_its_size_in_cap_01() {
    // |112.9999 − 112.5321| = 0.4678 g, and no class fits.
    let (plan, printout) = slipped("first", "112.9999 g");
    let (built, twins, message) = cap_01_after_import(&plan, &printout);
    assert_eq!(
        message,
        expected(
            &built,
            &twins,
            "first reading keyed 112.9999 g, captured 112.5321 g: no common keying slip explains it (they differ by 0.4678 g)"
        )
    );
}

#[test]
fn a_weighing_keyed_on_the_wrong_balance_is_named_in_cap_01() {
    // A second balance, BAL-09, calibrated and checked like BAL-07. Replicate 1's titrant was
    // weighed on BAL-09 (its printout shows both readings) but keyed as BAL-07, which printed
    // nothing within the tolerance of those times (its nearest lines belong to the portion,
    // more than 1000 s before).
    let mut plan = unsigned_plan();
    let other = "BAL-09";
    let step = plan.copy(
        "balance",
        "balance-09",
        plus(plan.step("balance").at, 30),
        &[("id", other)],
    );
    plan.insert_after("balance", step);
    let step = plan.copy(
        "calibration",
        "calibration-09",
        plus(plan.step("calibration").at, 30),
        &[("balance", other), ("certificate", "CAL-T-0413")],
    );
    plan.insert_after("calibration", step);
    let step = plan.copy(
        "check-std-day",
        "check-std-day-09",
        plus(plan.step("check-std-day").at, 30),
        &[("balance", other)],
    );
    plan.insert_after("check-std-day", step);
    let printout = printout_with(&plan, "std", 2, &|label| {
        if label == "std-1-titrant" {
            other.to_string()
        } else {
            plan.get(label, "balance")
        }
    });
    assert_eq!(printout.matches(other).count(), 2, "{printout}");
    let (built, twins, message) = cap_01_after_import(&plan, &printout);
    assert_eq!(
        message,
        expected(
            &built,
            &twins,
            "keyed on balance BAL-07, captured on balance BAL-09: wrong balance"
        )
    );
}

#[test]
fn refusals_leave_the_head_where_it_was() {
    let plan = unsigned_plan();
    let mut built = build(&plan);
    let signer = Who::Analyst.signer();
    let good = printout_of(&plan, "std", 2);
    let head = head_seq(&built);

    // A line naming a balance the ledger does not have.
    let unknown = format!("{good}2026-11-23T12:00:00Z  BAL-99  1.0000  g  S\n");
    let err = record(
        &mut built.ledger,
        &signer,
        &parsed(&unknown),
        STANDARDIZATION,
    )
    .unwrap_err();
    assert!(
        matches!(&err, CaptureError::UnknownBalance { balance_id, .. } if balance_id == "BAL-99"),
        "{err:?}"
    );
    assert_eq!(head_seq(&built), head);

    // A printout of another day pairs with nothing.
    let other_day = good.replace("2026-11-23T", "2026-11-25T");
    let err = record(
        &mut built.ledger,
        &signer,
        &parsed(&other_day),
        STANDARDIZATION,
    )
    .unwrap_err();
    assert!(
        matches!(
            err,
            CaptureError::NothingPaired {
                keyed_weighings: 6,
                lines: 12,
                ..
            }
        ),
        "{err:?}"
    );
    assert_eq!(head_seq(&built), head);

    // An unknown run.
    let err = record(&mut built.ledger, &signer, &parsed(&good), "STD-NONE").unwrap_err();
    assert!(matches!(err, CaptureError::UnknownRun { .. }), "{err:?}");
    assert_eq!(head_seq(&built), head);

    // The same printout twice: the second import names every weighing and its twin.
    let (_, first) = record(&mut built.ledger, &signer, &parsed(&good), STANDARDIZATION).unwrap();
    let head = head_seq(&built);
    let err = record(&mut built.ledger, &signer, &parsed(&good), STANDARDIZATION).unwrap_err();
    let CaptureError::AlreadyCaptured { weighings, .. } = &err else {
        panic!("{err:?}");
    };
    let keyed: Vec<u64> = weighing_labels("std")
        .iter()
        .map(|l| built.seq(l))
        .collect();
    let named: Vec<u64> = weighings.iter().map(|w| w.keyed_seq).collect();
    assert_eq!(named, keyed);
    let twins: Vec<u64> = weighings
        .iter()
        .flat_map(|w| w.captured_seqs.clone())
        .collect();
    assert_eq!(twins, first.iter().map(|e| e.seq).collect::<Vec<_>>());
    assert_eq!(head_seq(&built), head);
}
