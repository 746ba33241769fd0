//! Materials findings (`MAT-*`): reference standards and titrants used past their dates,
//! titrants used beyond their standardization's validity, standardizations that fail their own
//! limits (Ph. Eur. 4.2.2: at least three titrations, RSD ≤ 0.2 %, strength within 10 % of
//! nominal; the lab policy sets the values) and assays tied to the wrong standardization.

use super::{day_of, entry_ref, is_assay, setting_f64, Evidence, RunView};
use crate::catalog::LabBody;
use crate::findings::{Code, Finding};
use crate::records::RunKind;
use assize_ledger::Timestamp;
use chrono::NaiveDate;

/// The latest observation time among a run's data (the run's start when it has none).
pub fn last_observation(evidence: &Evidence<'_>, run: &RunView<'_>) -> Timestamp {
    run.entries
        .iter()
        .filter_map(|e| match evidence.catalog.current_of(e).as_ref() {
            LabBody::Weighing(w) => Some(w.second_at.max(w.first_at)),
            LabBody::Titration(t) => Some(t.read_at),
            _ => None,
        })
        .max()
        .unwrap_or(run.run.started_at)
        .max(run.run.started_at)
}

fn date(text: &str) -> Option<NaiveDate> {
    NaiveDate::parse_from_str(text, "%Y-%m-%d").ok()
}

/// Pushes the materials findings.
pub fn check(evidence: &Evidence<'_>, out: &mut Vec<Finding>) {
    let catalog = evidence.catalog;
    for run in evidence.judged_runs() {
        let used_on = day_of(last_observation(evidence, run));
        // Reference lot in date.
        if let Some(lot_hash) = run.run.reference_lot {
            if let Some(LabBody::ReferenceLot(lot)) = catalog.current_ref(&lot_hash).as_deref() {
                if let Some(until) = date(&lot.valid_until) {
                    if until < used_on {
                        out.push(
                            run.finding(Finding::new(
                                Code::ReferenceExpired,
                                format!(
                                    "run {} used reference lot {} on {used_on}; its certificate {} is valid until {until}",
                                    run.id(),
                                    lot.id,
                                    lot.certificate
                                ),
                                format!("certificate {} of lot {}", lot.certificate, lot.id),
                            ))
                            .involving(evidence.entry_ref(&lot_hash)),
                        );
                    }
                }
            }
        }
        // Titrant in date, and close to its nominal strength.
        let titrant = match catalog.current_ref(&run.run.titrant).as_deref() {
            Some(LabBody::Titrant(t)) => Some(t.clone()),
            _ => None,
        };
        if let Some(t) = &titrant {
            if let Some(until) = date(&t.valid_until) {
                if until < used_on {
                    out.push(
                        run.finding(Finding::new(
                            Code::TitrantExpired,
                            format!(
                                "run {} used titrant {} on {used_on}; it is good until {until}",
                                run.id(),
                                t.id
                            ),
                            format!("titrant preparation {}", t.id),
                        ))
                        .involving(evidence.entry_ref(&run.run.titrant)),
                    );
                }
            }
        }
        match run.run.kind {
            RunKind::Standardization => {
                for problem in standardization_problems(
                    run,
                    titrant.as_ref().map(|t| t.nominal_concentration.as_str()),
                ) {
                    out.push(run.finding(Finding::new(
                        Code::StandardizationFailed,
                        format!("standardization {} {problem}", run.id()),
                        format!("{}: [titrants]", run.policy_label()),
                    )));
                }
            }
            RunKind::Assay => assay_standardization(evidence, run, out),
        }
    }
}

/// What a standardization fails of the policy's limits on RSD and strength (too few
/// titrations is COMP-02's, which counts against the policy's minimum too).
fn standardization_problems(run: &RunView<'_>, nominal: Option<&str>) -> Vec<String> {
    let mut problems = Vec::new();
    let (Some(policy), Ok(recomputed)) = (run.policy(), &run.recomputed) else {
        return problems;
    };
    let outcome = &recomputed.outcome;
    if let (Some(rsd), Some(limit)) = (
        outcome.rsd_percent,
        setting_f64(&policy.titrants.standardization_max_rsd_percent),
    ) {
        if rsd > limit {
            problems.push(format!(
                "has an RSD of {rsd:.3} %, above the {limit} % limit (titrants.standardization_max_rsd_percent)"
            ));
        }
    }
    if let (Some(nominal), Some(within)) = (
        nominal.and_then(setting_f64),
        setting_f64(&policy.titrants.strength_within_percent_of_nominal),
    ) {
        if nominal > 0.0 {
            let off = (outcome.mean / nominal - 1.0) * 100.0;
            if off.abs() > within {
                problems.push(format!(
                    "gives {:.5} {}, {off:+.1} % from the nominal {nominal}, beyond ±{within} % (titrants.strength_within_percent_of_nominal)",
                    outcome.mean, outcome.unit
                ));
            }
        }
    }
    problems
}

/// The assay's standardization: of the same titrant and method, still valid, and passing.
fn assay_standardization(evidence: &Evidence<'_>, run: &RunView<'_>, out: &mut Vec<Finding>) {
    debug_assert!(is_assay(run));
    let Some(std_hash) = run.run.standardization else {
        return;
    };
    let Some(standardization) = evidence.run(&std_hash) else {
        out.push(run.finding(Finding::new(
            Code::WrongStandardization,
            format!(
                "assay {} names a standardization that is not a run",
                run.id()
            ),
            "the method: an assay uses its titrant's standardization",
        )));
        return;
    };
    let mut wrong = Vec::new();
    if standardization.run.kind != RunKind::Standardization {
        wrong.push("it is an assay, not a standardization".to_string());
    }
    if standardization.run.titrant != run.run.titrant {
        wrong.push("it standardized another titrant".to_string());
    }
    if standardization.run.method != run.run.method {
        wrong.push("it ran under another method adoption".to_string());
    }
    if !wrong.is_empty() {
        out.push(
            run.finding(Finding::new(
                Code::WrongStandardization,
                format!(
                    "assay {} relies on run {}, but {}",
                    run.id(),
                    standardization.id(),
                    wrong.join(" and ")
                ),
                "the method: an assay uses its titrant's standardization",
            ))
            .involving([entry_ref(standardization.entry)]),
        );
        return;
    }
    if let Some(policy) = run.policy() {
        let days = policy.titrants.standardization_valid_days;
        let done = last_observation(evidence, standardization);
        let used = last_observation(evidence, run);
        let age_days = (used.0 - done.0) as f64 / 86_400_000_000.0;
        if age_days > f64::from(days) {
            out.push(
                run.finding(Finding::new(
                    Code::StandardizationLapsed,
                    format!(
                        "assay {} used titrant standardized by {} {age_days:.1} days earlier; it is valid for {days} days",
                        run.id(),
                        standardization.id()
                    ),
                    format!("{}: titrants.standardization_valid_days = {days}", run.policy_label()),
                ))
                .involving([entry_ref(standardization.entry)]),
            );
        }
    }
    let nominal = match evidence.catalog.current_ref(&run.run.titrant).as_deref() {
        Some(LabBody::Titrant(t)) => Some(t.nominal_concentration.clone()),
        _ => None,
    };
    if !standardization_problems(standardization, nominal.as_deref()).is_empty() {
        out.push(
            run.finding(Finding::new(
                Code::StandardizationFailed,
                format!(
                    "assay {} relies on standardization {}, which fails its limits",
                    run.id(),
                    standardization.id()
                ),
                format!("{}: [titrants]", standardization.policy_label()),
            ))
            .involving([entry_ref(standardization.entry)]),
        );
    }
}
