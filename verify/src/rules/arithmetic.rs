//! Arithmetic findings (`CALC-*`): values written on the worksheet or reported that do not
//! follow from the raw readings, and runs that cannot be recomputed at all.
//!
//! A stated value agrees when it is a correct rounding of the recomputed value at the precision
//! it is written with (within half a unit of its last digit). A reported result must equal the
//! recomputed result rounded by GUM 7.2.6 (U to two significant digits, the value to the same
//! place), in the specification's unit.

use super::{Evidence, RunView};
use crate::catalog::LabBody;
use crate::findings::{Code, Finding};
use crate::recompute::Outcome;
use crate::records::{ReportedResult, StatedQuantity, StatedValue};
use crate::rounding::places_as_written;
use rust_decimal::prelude::ToPrimitive;
use rust_decimal::Decimal;
use std::str::FromStr;

/// Pushes the arithmetic findings of every run.
pub fn check(evidence: &Evidence<'_>, out: &mut Vec<Finding>) {
    for run in evidence.judged_runs() {
        let recomputed = match &run.recomputed {
            Ok(r) => r,
            Err(reason) => {
                out.push(run.finding(Finding::new(
                    Code::NotRecomputable,
                    reason.clone(),
                    format!("{}: every result follows from raw data", run.method_label()),
                )));
                continue;
            }
        };
        for entry in &run.entries {
            match evidence.catalog.current_of(entry).as_ref() {
                LabBody::Stated(stated) => {
                    let expected = expected_for(
                        stated,
                        &recomputed.outcome,
                        recomputed.standardization.as_deref(),
                    );
                    if let Some(problem) = compare_stated(stated, expected) {
                        out.push(
                            run.finding(Finding::new(
                                Code::StatedDiffers,
                                problem,
                                "recomputed from raw readings at the stated precision",
                            ))
                            .involving([super::entry_ref(entry)]),
                        );
                    }
                }
                LabBody::Result(result) => {
                    for problem in compare_reported(run, result, &recomputed.outcome) {
                        out.push(
                            run.finding(Finding::new(
                                Code::ReportedWrong,
                                problem,
                                format!(
                                    "JCGM 100:2008 7.2.6 with {}'s uncertainty settings",
                                    run.policy_label()
                                ),
                            ))
                            .involving([super::entry_ref(entry)]),
                        );
                    }
                }
                _ => {}
            }
        }
    }
}

/// What a stated value should be: the recomputed number and its unit, or why there is none.
fn expected_for(
    stated: &StatedValue,
    outcome: &Outcome,
    standardization: Option<&Outcome>,
) -> Result<(f64, String), String> {
    let replicate = |n: u32| {
        outcome
            .replicates
            .iter()
            .find(|r| r.number == n)
            .ok_or_else(|| format!("replicate {n} is not a valid replicate of the run"))
    };
    let titrant_unit = if outcome.unit.ends_with("/L") {
        "mL"
    } else {
        "g"
    };
    match (stated.quantity, stated.replicate) {
        (StatedQuantity::PortionMass, Some(n)) => {
            Ok((decimal_f64(replicate(n)?.portion_g), "g".into()))
        }
        (StatedQuantity::TitrantAmount, Some(n)) => {
            Ok((decimal_f64(replicate(n)?.titrant_net), titrant_unit.into()))
        }
        (StatedQuantity::Concentration, Some(n)) if standardization.is_none() => {
            Ok((replicate(n)?.value, outcome.unit.clone()))
        }
        (StatedQuantity::Concentration, None) => match standardization {
            Some(s) => Ok((s.mean, s.unit.clone())),
            None => Ok((outcome.mean, outcome.unit.clone())),
        },
        (StatedQuantity::Content, Some(n)) if standardization.is_some() => {
            Ok((replicate(n)?.value, outcome.unit.clone()))
        }
        (StatedQuantity::Content, None) if standardization.is_some() => {
            Ok((outcome.mean, outcome.unit.clone()))
        }
        (quantity, replicate) => Err(format!(
            "a stated {quantity:?}{} does not fit a run of this kind",
            replicate.map_or(String::new(), |n| format!(" for replicate {n}"))
        )),
    }
}

fn decimal_f64(value: Decimal) -> f64 {
    value.to_f64().unwrap_or(f64::NAN)
}

/// Why a stated value disagrees with the recomputed one, if it does.
fn compare_stated(stated: &StatedValue, expected: Result<(f64, String), String>) -> Option<String> {
    let what = describe(stated);
    let (value, unit) = match expected {
        Ok(found) => found,
        Err(reason) => return Some(format!("{what}: {reason}")),
    };
    let Ok(mut written) = Decimal::from_str(stated.value.trim()) else {
        return Some(format!("{what} {:?} is not a number", stated.value));
    };
    let mut places = places_as_written(&stated.value);
    let stated_unit = stated.unit.trim();
    if stated_unit != unit {
        if stated_unit == "mg" && unit == "g" {
            written /= Decimal::from(1000);
            places += 3;
        } else {
            return Some(format!(
                "{what} is written in {stated_unit}, but the quantity is in {unit}"
            ));
        }
    }
    let written_f = decimal_f64(written);
    let half_unit = 0.5 * 10f64.powi(-(places as i32));
    let slack = half_unit * 1e-9 + value.abs() * 1e-12;
    if (written_f - value).abs() <= half_unit + slack {
        return None;
    }
    Some(format!(
        "{what} is written as {} {}; the raw readings give {} {unit}",
        stated.value.trim(),
        stated_unit,
        shown(value, places + 2)
    ))
}

fn describe(stated: &StatedValue) -> String {
    let quantity = match stated.quantity {
        StatedQuantity::PortionMass => "portion mass",
        StatedQuantity::TitrantAmount => "titrant amount",
        StatedQuantity::Concentration => "concentration",
        StatedQuantity::Content => "content",
    };
    match stated.replicate {
        Some(n) => format!("stated {quantity} of replicate {n}"),
        None => format!("stated final {quantity}"),
    }
}

fn shown(value: f64, places: u32) -> String {
    format!("{value:.*}", places.min(12) as usize)
}

/// Why a reported result disagrees with the recomputed one (each problem a sentence).
fn compare_reported(run: &RunView<'_>, result: &ReportedResult, outcome: &Outcome) -> Vec<String> {
    let mut problems = Vec::new();
    if let Some(method) = run.method() {
        if result.unit.trim() != method.specification.unit {
            problems.push(format!(
                "the result is reported in {}, but {} specifies {}",
                result.unit.trim(),
                run.method_label(),
                method.specification.unit
            ));
        }
    }
    let Some(expected) = outcome.reported else {
        problems.push("the recomputed result has no expanded uncertainty to report with".into());
        return problems;
    };
    let parse = |text: &str| Decimal::from_str(text.trim()).ok();
    match (parse(&result.value), parse(&result.expanded_uncertainty)) {
        (Some(value), Some(u)) => {
            if value != expected.value
                || places_as_written(&result.value) as i64 != expected.places.max(0)
            {
                problems.push(format!(
                    "reported value {} differs from the recomputed {} (rounded to the place of U)",
                    result.value.trim(),
                    expected.value
                ));
            }
            if u != expected.expanded_uncertainty {
                problems.push(format!(
                    "reported expanded uncertainty {} differs from the recomputed {}",
                    result.expanded_uncertainty.trim(),
                    expected.expanded_uncertainty
                ));
            }
        }
        _ => problems.push("the reported value or uncertainty is not a number".into()),
    }
    problems
}
