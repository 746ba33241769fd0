//! The review dossier of one run: everything a reviewer reads about it on one page, gathered as
//! plain data — the ledger head, the run and the method and policy versions it names, the
//! findings of its exception report, each replicate and the result with its expanded
//! uncertainty, the uncertainty budget, the titrant's standardization history with control
//! limits, the replicate scatter, the audit trail of every entry involved and the sign-offs.
//!
//! This module gathers; it computes nothing anew. The findings, the report's hash and the
//! sign-offs are the exception report's ([`crate::exceptions::report`] over an in-memory
//! validation of the whole ledger), the replicates, the budget and the audit trail are
//! [`crate::explain::explain`]'s, each point of the standardization history is that
//! validation's recompute of the run, and the control-limit statistics come from
//! [`crate::stats`]. The result is plain serializable data for the cli to render; this module
//! never prints and never formats for a page.

use crate::catalog::LabBody;
use crate::exceptions::{report, SignOffLine};
use crate::explain::{explain, ExplainError, Explanation, Provenance, RunExplained, Target};
use crate::findings::{Finding, Tally};
use crate::records::{DocumentKind, RunKind};
use crate::rounding::Reported;
use crate::rules::{Evidence, RunView};
use crate::stats;
use crate::uncertainty::Budget;
use crate::validate::{judge, replay, Replayed, Scope, ValidateError};
use assize_ledger::{EntryHash, Ledger, LedgerError, ReplayOptions};
use serde::Serialize;
use std::collections::BTreeSet;

/// How far back and forward the titrant's standardization history reaches.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum History {
    /// Standardizations recorded up to the run itself (what was known when it was done).
    UpToRun,
    /// Every standardization of the titrant up to the ledger head.
    ToHead,
}

/// What the caller decides about a dossier.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct DossierOptions {
    /// The ledger's file name, as the page names it.
    pub ledger_file: String,
    /// Reach of the standardization history.
    pub history: History,
}

/// Why a dossier could not be assembled.
#[derive(Debug)]
pub enum DossierError {
    /// The ledger could not be read.
    Ledger(LedgerError),
    /// The run named is not in the ledger (or the entry belongs to no run).
    NotFound(String),
    /// Entries kept arriving while the dossier was gathered, so its parts would describe
    /// different heads.
    KeptGrowing {
        /// How many times it was tried.
        attempts: u32,
    },
}

impl std::fmt::Display for DossierError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            DossierError::Ledger(e) => write!(f, "{e}"),
            DossierError::NotFound(what) => f.write_str(what),
            DossierError::KeptGrowing { attempts } => write!(
                f,
                "the ledger grew while the dossier was gathered ({attempts} attempts)"
            ),
        }
    }
}

impl std::error::Error for DossierError {}

impl From<LedgerError> for DossierError {
    fn from(e: LedgerError) -> Self {
        DossierError::Ledger(e)
    }
}

impl From<ExplainError> for DossierError {
    fn from(e: ExplainError) -> Self {
        match e {
            ExplainError::Ledger(e) => DossierError::Ledger(e),
            ExplainError::NotFound(what) => DossierError::NotFound(what),
        }
    }
}

impl From<ValidateError> for DossierError {
    fn from(e: ValidateError) -> Self {
        match e {
            ValidateError::Ledger(e) => DossierError::Ledger(e),
            ValidateError::UnknownScope(what) => DossierError::NotFound(what),
        }
    }
}

/// The run the dossier is about.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct RunHeader {
    /// Run id.
    pub id: String,
    /// Standardization or assay.
    pub kind: RunKind,
    /// The run entry's sequence number.
    pub seq: u64,
    /// The run entry's hash (hex).
    pub hash: String,
    /// When the bench work started (RFC 3339, UTC).
    pub started_at: String,
    /// Sample id (assays).
    pub sample: Option<String>,
    /// Titrant preparation id.
    pub titrant: Option<String>,
    /// The standardization an assay relied on (run id).
    pub standardization: Option<String>,
    /// Who did the work.
    pub analysts: Vec<String>,
    /// The model, in symbols.
    pub formula: String,
}

/// A method or policy version the run names.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct DocumentInForce {
    /// Method or policy.
    pub document: DocumentKind,
    /// Its id.
    pub id: String,
    /// Its version.
    pub version: String,
    /// SHA-256 of its text (the adoption identity).
    pub sha256: String,
    /// The adoption entry.
    pub adopted_seq: u64,
    /// Who adopted it.
    pub adopted_by: String,
}

/// One replicate as the result section shows it.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ReplicateLine {
    /// Replicate number.
    pub number: u32,
    /// Whether it counts in the result (an invalidated or incomplete replicate does not).
    pub counted: bool,
    /// Net portion (primary standard or sample), g, exact.
    pub portion_g: Option<String>,
    /// Titrant delivered less any blank (g or mL), exact.
    pub titrant_net: Option<String>,
    /// Its recomputed value, in the result's unit.
    pub value: Option<f64>,
    /// The formula with this replicate's numbers in it.
    pub worked: Option<String>,
}

/// The standardization an assay's result rests on.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct StandardizationUsed {
    /// Its run id.
    pub run: String,
    /// Its recomputed mean.
    pub mean: f64,
    /// Its unit.
    pub unit: String,
}

/// The replicates and the result.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ResultSection {
    /// Why the run cannot be recomputed, when it cannot.
    pub not_recomputed: Option<String>,
    /// Unit of the values.
    pub unit: Option<String>,
    /// Unit of the titrant amounts: `g` when the titrant is weighed, `mL` by burette.
    pub titrant_unit: Option<String>,
    /// Every replicate, in number order.
    pub replicates: Vec<ReplicateLine>,
    /// Mean of the counted replicates.
    pub mean: Option<f64>,
    /// Their sample standard deviation.
    pub standard_deviation: Option<f64>,
    /// Their relative standard deviation, percent.
    pub rsd_percent: Option<f64>,
    /// Mean and expanded uncertainty rounded for reporting (GUM 7.2.6).
    pub reported: Option<Reported>,
    /// The reported result as recorded (`value ± U unit`), if one is.
    pub as_recorded: Option<String>,
    /// For an assay, the standardization it used.
    pub standardization: Option<StandardizationUsed>,
}

/// Where a control-chart point lies against the limits.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Zone {
    /// Within mean ± 2s.
    Within2s,
    /// Beyond 2s, within 3s.
    Beyond2s,
    /// Beyond 3s.
    Beyond3s,
}

/// One standardization result of the titrant.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ControlPoint {
    /// Its run id.
    pub run: String,
    /// Its run entry's sequence number (the chart's order).
    pub seq: u64,
    /// When its bench work started (RFC 3339, UTC).
    pub started_at: String,
    /// Its recomputed mean.
    pub value: f64,
    /// Whether it is this run, or the standardization this assay used.
    pub this_run: bool,
    /// Where it lies against the limits, when there are limits.
    pub zone: Option<Zone>,
}

/// A standardization of the titrant that is not on the chart, and why.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct LeftOut {
    /// Its run id.
    pub run: String,
    /// Its run entry's sequence number.
    pub seq: u64,
    /// Why it is not plotted.
    pub reason: String,
}

/// Mean, standard deviation and the ±2s, ±3s lines of the plotted points.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct ControlLimits {
    /// Number of points.
    pub n: usize,
    /// Their mean.
    pub mean: f64,
    /// Their sample standard deviation (n − 1).
    pub standard_deviation: f64,
    /// mean − 3s.
    pub lower_3s: f64,
    /// mean − 2s.
    pub lower_2s: f64,
    /// mean + 2s.
    pub upper_2s: f64,
    /// mean + 3s.
    pub upper_3s: f64,
}

impl ControlLimits {
    /// The limits of `values` (at least two finite values, else `None`).
    pub fn of(values: &[f64]) -> Option<ControlLimits> {
        let mean = stats::mean(values)?;
        let s = stats::sample_standard_deviation(values)?;
        Some(ControlLimits {
            n: values.len(),
            mean,
            standard_deviation: s,
            lower_3s: mean - 3.0 * s,
            lower_2s: mean - 2.0 * s,
            upper_2s: mean + 2.0 * s,
            upper_3s: mean + 3.0 * s,
        })
    }

    /// Where `value` lies.
    pub fn zone(&self, value: f64) -> Zone {
        let distance = (value - self.mean).abs();
        if distance > 3.0 * self.standard_deviation {
            Zone::Beyond3s
        } else if distance > 2.0 * self.standard_deviation {
            Zone::Beyond2s
        } else {
            Zone::Within2s
        }
    }
}

/// The titrant's standardization results over time.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ControlChart {
    /// Titrant preparation id.
    pub titrant: String,
    /// Reach of the history.
    pub history: History,
    /// Last sequence number a point's run entry may have.
    pub up_to_seq: u64,
    /// Unit of the values.
    pub unit: Option<String>,
    /// The points, in ledger order.
    pub points: Vec<ControlPoint>,
    /// Standardizations of the titrant within reach that are not plotted.
    pub left_out: Vec<LeftOut>,
    /// Mean, s and the lines, with two points or more.
    pub limits: Option<ControlLimits>,
}

/// One replicate's value on the scatter chart.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct ReplicatePoint {
    /// Replicate number.
    pub number: u32,
    /// Its value.
    pub value: f64,
}

/// The counted replicates and their mean.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ReplicateChart {
    /// Unit of the values.
    pub unit: Option<String>,
    /// The points.
    pub points: Vec<ReplicatePoint>,
    /// Their mean (the result before rounding).
    pub mean: Option<f64>,
}

/// One entry of the audit trail and where it sits in the run.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct AuditLine {
    /// Where the entry belongs (e.g. `assay AS-1, replicate 2`).
    pub context: String,
    /// The entry with its author, time, signature state and corrections.
    pub entry: Provenance,
}

/// Everything the review page shows about one run.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Dossier {
    /// The ledger's file name.
    pub ledger_file: String,
    /// Ledger head the dossier was gathered at.
    pub head_seq: u64,
    /// Its hash (hex).
    pub head_hash: String,
    /// Whether the whole chain replayed intact.
    pub chain_intact: bool,
    /// The run.
    pub run: RunHeader,
    /// The method and policy versions the run names.
    pub documents: Vec<DocumentInForce>,
    /// SHA-256 of the run's exception report at this head (what a sign-off records).
    pub exception_report_sha256: String,
    /// The exception report's findings: about the run, the standardization it relies on, and
    /// the chain.
    pub findings: Vec<Finding>,
    /// Findings by severity.
    pub tally: Tally,
    /// Replicates and result.
    pub result: ResultSection,
    /// The uncertainty budget of the result.
    pub budget: Option<Budget>,
    /// The titrant's standardization history.
    pub control_chart: ControlChart,
    /// The replicate scatter.
    pub replicate_chart: ReplicateChart,
    /// Every entry involved, by sequence number.
    pub audit_trail: Vec<AuditLine>,
    /// Sign-offs already given on the run or its result.
    pub sign_offs: Vec<SignOffLine>,
}

/// How many times the parts are gathered again when the ledger grows in between.
const ATTEMPTS: u32 = 3;

/// Gathers the dossier of the run `target` names.
pub fn dossier(
    ledger: &mut Ledger,
    target: &Target,
    options: &DossierOptions,
) -> Result<Dossier, DossierError> {
    for _ in 0..ATTEMPTS {
        let replayed = replay(ledger, &ReplayOptions::default(), &mut |_| {})?;
        let explanation = explain(ledger, target)?;
        let same_head = replayed.integrity.head.is_some_and(|h| {
            h.seq == explanation.head_seq && h.hash.to_hex() == explanation.head_hash
        });
        if same_head {
            return gather(ledger, &replayed, explanation, options);
        }
    }
    Err(DossierError::KeptGrowing { attempts: ATTEMPTS })
}

/// Puts the parts together, all at one head.
fn gather(
    ledger: &Ledger,
    replayed: &Replayed,
    explanation: Explanation,
    options: &DossierOptions,
) -> Result<Dossier, DossierError> {
    let evidence = Evidence::gather(&replayed.catalog);
    let hash_of = |seq: u64| ledger.entry(seq).ok().map(|e| e.hash);
    let validation = judge(replayed, &evidence, &Scope::Ledger, &hash_of)?;
    let view = evidence
        .runs
        .iter()
        .find(|r| r.entry.seq == explanation.run.run.seq)
        .ok_or_else(|| {
            DossierError::NotFound(format!("the ledger has no run {:?}", explanation.run.id))
        })?;
    let exceptions = report(&evidence, &validation, view);
    let explained = &explanation.run;
    let result = result_section(explained, exceptions.reported.clone());
    let up_to_seq = match options.history {
        History::UpToRun => view.entry.seq,
        History::ToHead => explanation.head_seq,
    };
    Ok(Dossier {
        ledger_file: options.ledger_file.clone(),
        head_seq: explanation.head_seq,
        head_hash: explanation.head_hash.clone(),
        chain_intact: exceptions.chain_intact,
        run: run_header(&evidence, view, explained, exceptions.analysts.clone()),
        documents: documents_of(&evidence, view),
        exception_report_sha256: exceptions.sha256(),
        findings: exceptions.findings.clone(),
        tally: exceptions.tally,
        budget: explained.recomputed.as_ref().ok().map(|o| o.budget.clone()),
        control_chart: control_chart(&evidence, view, options.history, up_to_seq),
        replicate_chart: replicate_chart(&result),
        result,
        audit_trail: audit_trail(explained),
        sign_offs: exceptions.sign_offs,
    })
}

/// The id a material or run entry gives itself.
fn id_of(evidence: &Evidence<'_>, hash: &EntryHash) -> Option<String> {
    evidence
        .catalog
        .current(hash)
        .and_then(|body| body.id().map(str::to_string))
}

fn run_header(
    evidence: &Evidence<'_>,
    view: &RunView<'_>,
    explained: &RunExplained,
    analysts: Vec<String>,
) -> RunHeader {
    RunHeader {
        id: view.id().to_string(),
        kind: view.run.kind,
        seq: view.entry.seq,
        hash: view.entry.hash.to_hex(),
        started_at: view.run.started_at.to_string(),
        sample: view.sample_id().map(str::to_string),
        titrant: id_of(evidence, &view.run.titrant),
        standardization: view
            .run
            .standardization
            .and_then(|h| evidence.run(&h))
            .map(|r| r.id().to_string()),
        analysts,
        formula: explained.formula.clone(),
    }
}

/// The method and policy adoptions the run names, as recorded now.
fn documents_of(evidence: &Evidence<'_>, view: &RunView<'_>) -> Vec<DocumentInForce> {
    let catalog = evidence.catalog;
    [view.run.method, view.run.policy]
        .iter()
        .filter_map(|hash| {
            let entry = catalog.entry(hash)?;
            match catalog.current_of(entry).as_ref() {
                LabBody::Adoption(a) => Some(DocumentInForce {
                    document: a.document,
                    id: a.id.clone(),
                    version: a.version.clone(),
                    sha256: a.sha256.clone(),
                    adopted_seq: entry.seq,
                    adopted_by: entry.author.clone(),
                }),
                _ => None,
            }
        })
        .collect()
}

/// The replicates and the result, from the explanation's recompute.
fn result_section(explained: &RunExplained, as_recorded: Option<String>) -> ResultSection {
    let outcome = explained.recomputed.as_ref().ok();
    let replicates = explained
        .replicates
        .iter()
        .map(|step| {
            let value = outcome.and_then(|o| o.replicates.iter().find(|v| v.number == step.number));
            ReplicateLine {
                number: step.number,
                counted: value.is_some(),
                portion_g: value.map(|v| v.portion_g.normalize().to_string()),
                titrant_net: value.map(|v| v.titrant_net.normalize().to_string()),
                value: value.map(|v| v.value),
                worked: step.substituted.clone(),
            }
        })
        .collect();
    let standardization = explained.standardization.as_deref().and_then(|s| {
        let o = s.recomputed.as_ref().ok()?;
        Some(StandardizationUsed {
            run: s.id.clone(),
            mean: o.mean,
            unit: o.unit.clone(),
        })
    });
    // Concentrations are per kilogram of solution exactly when the titrant is weighed.
    let concentration_unit = match explained.kind {
        RunKind::Standardization => outcome.map(|o| o.unit.as_str()),
        RunKind::Assay => standardization.as_ref().map(|s| s.unit.as_str()),
    };
    let titrant_unit = concentration_unit.map(|u| if u == "mol/kg" { "g" } else { "mL" });
    ResultSection {
        not_recomputed: explained.recomputed.as_ref().err().cloned(),
        unit: outcome.map(|o| o.unit.clone()),
        titrant_unit: titrant_unit.map(str::to_string),
        replicates,
        mean: outcome.map(|o| o.mean),
        standard_deviation: outcome.and_then(|o| o.standard_deviation),
        rsd_percent: outcome.and_then(|o| o.rsd_percent),
        reported: outcome.and_then(|o| o.reported),
        as_recorded,
        standardization,
    }
}

fn replicate_chart(result: &ResultSection) -> ReplicateChart {
    ReplicateChart {
        unit: result.unit.clone(),
        points: result
            .replicates
            .iter()
            .filter_map(|r| {
                r.value.map(|value| ReplicatePoint {
                    number: r.number,
                    value,
                })
            })
            .collect(),
        mean: result.mean,
    }
}

/// Every standardization of the run's titrant whose run entry is at or before `up_to_seq`,
/// in ledger order, with its recomputed mean; the limits of those plotted.
fn control_chart(
    evidence: &Evidence<'_>,
    view: &RunView<'_>,
    history: History,
    up_to_seq: u64,
) -> ControlChart {
    let highlighted = match view.run.kind {
        RunKind::Standardization => Some(view.entry.hash),
        RunKind::Assay => view.run.standardization,
    };
    let mut unit: Option<String> = None;
    let mut points = Vec::new();
    let mut left_out = Vec::new();
    let standardizations = evidence.runs.iter().filter(|r| {
        r.run.kind == RunKind::Standardization
            && r.run.titrant == view.run.titrant
            && r.entry.seq <= up_to_seq
    });
    for run in standardizations {
        let outcome = match &run.recomputed {
            Ok(r) => &r.outcome,
            Err(reason) => {
                left_out.push(LeftOut {
                    run: run.id().to_string(),
                    seq: run.entry.seq,
                    reason: reason.clone(),
                });
                continue;
            }
        };
        let chart_unit = unit.get_or_insert_with(|| outcome.unit.clone());
        if *chart_unit != outcome.unit {
            left_out.push(LeftOut {
                run: run.id().to_string(),
                seq: run.entry.seq,
                reason: format!("in {}, the chart is in {chart_unit}", outcome.unit),
            });
            continue;
        }
        points.push(ControlPoint {
            run: run.id().to_string(),
            seq: run.entry.seq,
            started_at: run.run.started_at.to_string(),
            value: outcome.mean,
            this_run: Some(run.entry.hash) == highlighted,
            zone: None,
        });
    }
    let values: Vec<f64> = points.iter().map(|p| p.value).collect();
    let limits = ControlLimits::of(&values);
    if let Some(limits) = &limits {
        for point in &mut points {
            point.zone = Some(limits.zone(point.value));
        }
    }
    ControlChart {
        titrant: id_of(evidence, &view.run.titrant).unwrap_or_default(),
        history,
        up_to_seq,
        unit,
        points,
        left_out,
        limits,
    }
}

/// Every entry the explanation shows, each once (where it first appears), by sequence number.
fn audit_trail(explained: &RunExplained) -> Vec<AuditLine> {
    let mut lines = Vec::new();
    audit_lines(explained, &mut lines);
    lines.sort_by_key(|l| l.entry.seq);
    let mut seen = BTreeSet::new();
    lines.retain(|l| seen.insert(l.entry.seq));
    lines
}

fn audit_lines(run: &RunExplained, out: &mut Vec<AuditLine>) {
    let kind = match run.kind {
        RunKind::Standardization => "standardization",
        RunKind::Assay => "assay",
    };
    let label = format!("{kind} {}", run.id);
    let mut push = |context: String, entry: &Provenance| {
        out.push(AuditLine {
            context,
            entry: entry.clone(),
        })
    };
    push(format!("{label}: run"), &run.run);
    for entry in &run.documents {
        push(format!("{label}: document"), entry);
    }
    for entry in &run.materials {
        push(format!("{label}: material"), entry);
    }
    for step in &run.replicates {
        let context = format!("{label}, replicate {}", step.number);
        for weighing in &step.weighings {
            push(format!("{context}: weighing"), &weighing.entry);
            let balance = &weighing.balance;
            push(format!("{context}: balance"), &balance.balance);
            if let Some(calibration) = &balance.calibration {
                push(format!("{context}: calibration in force"), calibration);
            }
            for check in &balance.checks {
                push(format!("{context}: routine check"), check);
            }
        }
        for entry in &step.entries {
            push(context.clone(), entry);
        }
    }
    for entry in &run.results {
        push(format!("{label}: stated or reported"), entry);
    }
    for entry in &run.statements {
        push(format!("{label}: sign-off or investigation"), entry);
    }
    if let Some(standardization) = &run.standardization {
        audit_lines(standardization, out);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// NIST StRD univariate summary statistics, data set NumAcc1: 10000001, 10000003,
    /// 10000002; certified mean 10000002, certified standard deviation 1 (data and certified
    /// values quoted from memory of the StRD pages; they are also plain to check by hand).
    #[test]
    fn limits_of_the_nist_numacc1_data_set() {
        let limits = ControlLimits::of(&[10000001.0, 10000003.0, 10000002.0]).expect("limits");
        assert_eq!(limits.n, 3);
        assert_eq!(limits.mean, 10000002.0);
        assert!((limits.standard_deviation - 1.0).abs() < 1e-9);
        assert!((limits.lower_3s - 9999999.0).abs() < 1e-8);
        assert!((limits.lower_2s - 10000000.0).abs() < 1e-8);
        assert!((limits.upper_2s - 10000004.0).abs() < 1e-8);
        assert!((limits.upper_3s - 10000005.0).abs() < 1e-8);
    }

    /// NIST StRD NumAcc3: 1000000.2, then 1000000.1 and 1000000.3 alternating 500 times each
    /// (1001 values); certified mean 1000000.2, certified standard deviation 0.1 (quoted from
    /// memory; by hand: 1000 squared deviations of 0.01 over n − 1 = 1000 give s² = 0.01).
    #[test]
    fn limits_of_the_nist_numacc3_data_set() {
        let mut values = vec![1000000.2];
        for _ in 0..500 {
            values.push(1000000.1);
            values.push(1000000.3);
        }
        let limits = ControlLimits::of(&values).expect("limits");
        assert_eq!(limits.n, 1001);
        assert!((limits.mean - 1000000.2).abs() < 1e-8);
        assert!((limits.standard_deviation - 0.1).abs() < 1e-8);
        assert!((limits.upper_3s - 1000000.5).abs() < 1e-7);
        assert!((limits.lower_2s - 1000000.0).abs() < 1e-7);
    }

    /// By hand: 0.02001, 0.01998, 0.02003, 0.02000, 0.01999 have mean 0.020002; deviations
    /// 8, −22, 28, −2, −12 (×10⁻⁶) square to 64 + 484 + 784 + 4 + 144 = 1480 (×10⁻¹²); divided
    /// by n − 1 = 4 that is 370 × 10⁻¹², so s = √370 × 10⁻⁶ = 1.923538406 × 10⁻⁵.
    #[test]
    fn limits_of_five_strengths_computed_by_hand() {
        let limits =
            ControlLimits::of(&[0.02001, 0.01998, 0.02003, 0.02000, 0.01999]).expect("limits");
        assert!((limits.mean - 0.020002).abs() < 1e-15);
        assert!((limits.standard_deviation - 1.923538406e-5).abs() < 1e-14);
        assert!((limits.upper_2s - 0.0200404707681).abs() < 1e-12);
        assert!((limits.lower_3s - 0.0199442938478).abs() < 1e-12);
        assert_eq!(limits.zone(0.02003), Zone::Within2s);
        assert_eq!(limits.zone(0.02005), Zone::Beyond2s);
        assert_eq!(limits.zone(0.01994), Zone::Beyond3s);
    }

    #[test]
    fn no_limits_from_fewer_than_two_points() {
        assert_eq!(ControlLimits::of(&[]), None);
        assert_eq!(ControlLimits::of(&[0.02]), None);
    }
}
