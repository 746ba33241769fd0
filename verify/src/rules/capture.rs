//! Findings about how readings were taken (`CAP-*`): a keyed reading that differs from the
//! instrument's captured reading of the same weighing, a keyed reading where the method expects
//! capture, a reading without the stability indicator, and a portion outside "about" the
//! method's target mass (USP General Notices 8.20: within 10 %).

use super::{entry_ref, setting, weighings_of, Evidence, RunView};
use crate::catalog::CatalogEntry;
use crate::findings::{Code, Finding};
use crate::records::{Portion, RunKind, Source, Weighing};
use rust_decimal::Decimal;
use std::borrow::Cow;

/// Pushes the capture findings.
pub fn check(evidence: &Evidence<'_>, out: &mut Vec<Finding>) {
    for run in evidence.judged_runs() {
        let weighings = weighings_of(evidence.catalog, run);
        keyed_against_captured(run, &weighings, out);
        let capture_expected = run.method().is_some_and(|m| m.readings_captured);
        for (entry, w) in &weighings {
            if capture_expected && w.source == Source::Keyed {
                let twin = weighings.iter().any(|(_, other)| {
                    other.source == Source::Captured
                        && other.replicate == w.replicate
                        && other.portion == w.portion
                });
                if !twin {
                    out.push(
                        run.finding(Finding::new(
                            Code::KeyedWhereCaptureExpected,
                            format!(
                                "entry {} (replicate {}) was keyed by hand; {} expects readings captured from the balance",
                                entry.seq, w.replicate, run.method_label()
                            ),
                            format!("{}: readings_captured = true", run.method_label()),
                        ))
                        .involving([entry_ref(entry)]),
                    );
                }
            }
            if !w.stable {
                out.push(
                    run.finding(Finding::new(
                        Code::UnstableReading,
                        format!(
                            "entry {} (replicate {}) was read without the stability indicator",
                            entry.seq, w.replicate
                        ),
                        "USP <41>: read a stable display",
                    ))
                    .involving([entry_ref(entry)]),
                );
            }
            portion_target(run, entry, w, out);
        }
    }
}

/// Keyed and captured weighings of the same replicate and portion must show the same readings.
fn keyed_against_captured(
    run: &RunView<'_>,
    weighings: &[(&CatalogEntry, Cow<'_, Weighing>)],
    out: &mut Vec<Finding>,
) {
    for (keyed_entry, keyed) in weighings.iter().filter(|(_, w)| w.source == Source::Keyed) {
        for (captured_entry, captured) in weighings.iter().filter(|(_, w)| {
            w.source == Source::Captured
                && w.replicate == keyed.replicate
                && w.portion == keyed.portion
        }) {
            let mut differences = Vec::new();
            for (label, k, c) in [
                ("first", &keyed.first, &captured.first),
                ("second", &keyed.second, &captured.second),
            ] {
                if k.in_base_unit() != c.in_base_unit() || k.unit != c.unit {
                    differences.push(format!(
                        "{label} reading keyed {} {}, captured {} {}",
                        k.value, k.unit, c.value, c.unit
                    ));
                }
            }
            if keyed.balance != captured.balance {
                differences.push("keyed on another balance than the one captured".into());
            }
            if !differences.is_empty() {
                out.push(
                    run.finding(Finding::new(
                        Code::KeyedDiffersFromCaptured,
                        format!(
                            "replicate {} of run {}: {}",
                            keyed.replicate,
                            run.id(),
                            differences.join("; ")
                        ),
                        "the captured instrument reading is the original record",
                    ))
                    .involving([entry_ref(keyed_entry), entry_ref(captured_entry)]),
                );
            }
        }
    }
}

/// A portion of primary standard or sample outside ±10 % of the method's target.
fn portion_target(run: &RunView<'_>, entry: &CatalogEntry, w: &Weighing, out: &mut Vec<Finding>) {
    let Some(method) = run.method() else { return };
    let target_text = match (run.run.kind, w.portion) {
        (RunKind::Standardization, Portion::PrimaryStandard) => &method.standardization.portion_g,
        (RunKind::Assay, Portion::Sample) => &method.assay.portion_g,
        _ => return,
    };
    let Some(target) = setting(target_text) else {
        return;
    };
    let net = w.net_grams();
    let tenth = target / Decimal::TEN;
    if (net - target).abs() > tenth {
        out.push(
            run.finding(Finding::new(
                Code::PortionOffTarget,
                format!(
                    "portion of replicate {} is {} g; the method says about {} g (±10 %: {}–{} g)",
                    w.replicate,
                    net.normalize(),
                    target.normalize(),
                    (target - tenth).normalize(),
                    (target + tenth).normalize()
                ),
                format!("{}: portion_g = {target_text}", run.method_label()),
            ))
            .involving([entry_ref(entry)]),
        );
    }
}
