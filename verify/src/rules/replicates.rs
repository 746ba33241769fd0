//! Replicate agreement findings (`REP-*`): the RSD of an assay's replicates against the
//! policy's limit, their range against the ISO 5725-6 critical range (when the method states
//! its repeatability), and the Grubbs (ISO 5725-2) and Dixon r10 (Rorabacher 1991) outlier
//! tests at the policy's significance level. A flagged replicate is for the reviewer: a
//! statistical flag alone is never a reason to drop it.

use super::{is_assay, setting_f64, Evidence, RunView};
use crate::findings::{Code, Finding};
use crate::outliers::{evaluate_agreement, Agreement, AgreementSettings};

/// Pushes the replicate agreement findings.
pub fn check(evidence: &Evidence<'_>, out: &mut Vec<Finding>) {
    for run in evidence.judged_runs() {
        if let Some(agreement) = agreement_of(run) {
            push_findings(run, &agreement, out);
        }
    }
}

/// The agreement statistics of a run's valid replicates under its policy and method.
pub fn agreement_of(run: &RunView<'_>) -> Option<Agreement> {
    let outcome = &run.recomputed.as_ref().ok()?.outcome;
    let policy = run.policy()?;
    let values: Vec<f64> = outcome.replicates.iter().map(|r| r.value).collect();
    if values.len() < 2 {
        return None;
    }
    let repeatability_sd = if is_assay(run) {
        run.method()
            .and_then(|m| m.assay.repeatability_rsd_percent.as_deref())
            .and_then(setting_f64)
            .map(|rsd| rsd / 100.0 * outcome.mean.abs())
    } else {
        None
    };
    let settings = AgreementSettings {
        rsd_limit_percent: setting_f64(&policy.replicates.assay_max_rsd_percent)?,
        critical_range_probability: setting_f64(&policy.replicates.critical_range_probability)?,
        outlier_significance: setting_f64(&policy.replicates.outlier_significance)?,
        repeatability_sd,
    };
    evaluate_agreement(&values, &settings).ok()
}

fn push_findings(run: &RunView<'_>, agreement: &Agreement, out: &mut Vec<Finding>) {
    let Ok(recomputed) = &run.recomputed else {
        return;
    };
    let outcome = &recomputed.outcome;
    let number = |index: usize| outcome.replicates.get(index).map_or(0, |r| r.number);
    let policy = run.policy_label();
    if is_assay(run) {
        if let Some(rsd) = agreement.rsd_percent {
            if rsd > agreement.rsd_limit_percent {
                out.push(run.finding(Finding::new(
                    Code::ReplicateRsd,
                    format!(
                        "the {} replicates of run {} have an RSD of {rsd:.3} %, above {} %",
                        agreement.n_replicates,
                        run.id(),
                        agreement.rsd_limit_percent
                    ),
                    format!("{policy}: replicates.assay_max_rsd_percent"),
                )));
            }
        }
    }
    if let (Some(critical), Some(true)) =
        (agreement.critical_range, agreement.range_exceeds_critical)
    {
        out.push(run.finding(Finding::new(
            Code::ReplicateRange,
            format!(
                "the range of run {}'s {} replicates is {:.5} {}, beyond the critical range {critical:.5}",
                run.id(),
                agreement.n_replicates,
                agreement.range,
                outcome.unit
            ),
            format!(
                "ISO 5725-6 with {}: assay.repeatability_rsd_percent and {policy}: replicates.critical_range_probability",
                run.method_label()
            ),
        )));
    }
    if let Some(grubbs) = agreement.grubbs.filter(|g| g.is_outlier) {
        out.push(run.finding(Finding::new(
            Code::GrubbsOutlier,
            format!(
                "replicate {} of run {} is a Grubbs outlier (G = {:.3} > {:.3} at α = {})",
                number(grubbs.suspect_index),
                run.id(),
                grubbs.statistic,
                grubbs.critical,
                grubbs.significance
            ),
            format!("ISO 5725-2 Grubbs test; {policy}: replicates.outlier_significance"),
        )));
    }
    if let Some(dixon) = agreement.dixon.filter(|d| d.is_outlier) {
        out.push(run.finding(Finding::new(
            Code::DixonOutlier,
            format!(
                "replicate {} of run {} is a Dixon outlier (r10 = {:.3} > {:.3} at α = {})",
                number(dixon.suspect_index),
                run.id(),
                dixon.statistic,
                dixon.critical,
                dixon.significance
            ),
            format!("Dixon r10 (Rorabacher 1991); {policy}: replicates.outlier_significance"),
        )));
    }
}
