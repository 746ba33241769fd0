//! One validation pass: replay the chain (integrity), recompute every run, apply every rule,
//! and keep what concerns the chosen scope. [`validate`] streams (see [`crate::stream`]);
//! [`validate_in_memory`] and [`judge`] work on a catalog of the whole ledger.
//!
//! Integrity findings concern the whole ledger and are kept whatever the scope. The result
//! carries, per run in scope, the recomputed result and the count of findings, so a caller can
//! print a summary, and the exit decision ([`Validation::verdict`]) that scripts rely on.

use crate::catalog::Catalog;
use crate::conformance::Decision;
use crate::findings::{Finding, Severity, Tally};
use crate::records::RunKind;
use crate::rules::{self, integrity, Evidence, RunView};
use assize_ledger::replay::ReportHead;
use assize_ledger::{EntryHash, IntegrityReport, Ledger, LedgerError, ReplayOptions};
use serde::Serialize;

/// What a validation looks at.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
#[serde(tag = "scope", content = "id", rename_all = "lowercase")]
pub enum Scope {
    /// Every run.
    Ledger,
    /// One run, by id.
    Run(String),
    /// Every run of one sample, by sample id.
    Sample(String),
}

/// Why a validation could not run.
#[derive(Debug)]
pub enum ValidateError {
    /// The ledger could not be read.
    Ledger(LedgerError),
    /// The scope names a run or sample the ledger does not have.
    UnknownScope(String),
}

impl std::fmt::Display for ValidateError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            ValidateError::Ledger(e) => write!(f, "{e}"),
            ValidateError::UnknownScope(what) => f.write_str(what),
        }
    }
}

impl std::error::Error for ValidateError {}

impl From<LedgerError> for ValidateError {
    fn from(e: LedgerError) -> Self {
        ValidateError::Ledger(e)
    }
}

/// One run as the summary shows it.
#[derive(Clone, Debug, Serialize)]
pub struct RunSummary {
    /// Run id.
    pub run: String,
    /// Standardization or assay.
    pub kind: RunKind,
    /// Sample id (assays).
    pub sample: Option<String>,
    /// Method `id vVERSION`.
    pub method: String,
    /// The recomputed result, rounded for reporting, with its unit (`None` if it cannot be
    /// recomputed).
    pub result: Option<String>,
    /// Conformance of an assay's result with the specification.
    pub conforms: Option<bool>,
    /// Findings about the run, by severity.
    pub findings: Tally,
}

/// The outcome of one validation.
#[derive(Debug, Serialize)]
pub struct Validation {
    /// What was validated.
    pub scope: Scope,
    /// The integrity replay.
    pub integrity: IntegrityReport,
    /// The head the validation is based on.
    pub head: Option<ReportHead>,
    /// Runs in scope: every one for a run or sample scope; for the whole ledger, the runs
    /// with findings (the others are counted in `runs_checked`).
    pub runs: Vec<RunSummary>,
    /// Runs judged in scope.
    pub runs_checked: usize,
    /// Findings in scope (integrity findings always), sorted by entry.
    pub findings: Vec<Finding>,
    /// Findings by severity.
    pub tally: Tally,
}

/// How a validation ends, for exit codes.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Verdict {
    /// Intact and no finding at or above the threshold.
    Clean,
    /// Findings at or above the threshold.
    Findings,
    /// The chain itself has problems.
    IntegrityFailure,
}

impl Validation {
    /// The verdict with findings counted from `threshold` up.
    pub fn verdict(&self, threshold: Severity) -> Verdict {
        if !self.integrity.intact() {
            Verdict::IntegrityFailure
        } else if self.tally.any_at_or_above(threshold) {
            Verdict::Findings
        } else {
            Verdict::Clean
        }
    }
}

/// A replayed ledger: the integrity report and the catalog built from the same read.
pub struct Replayed {
    /// The integrity replay.
    pub integrity: IntegrityReport,
    /// The lab entries.
    pub catalog: Catalog,
}

/// Replays the ledger and builds its catalog. `progress` hears the replay's progress.
pub fn replay(
    ledger: &Ledger,
    options: &ReplayOptions,
    progress: &mut dyn FnMut(u64),
) -> Result<Replayed, ValidateError> {
    let (integrity, catalog) = Catalog::from_replay_reporting(ledger, options, progress)?;
    Ok(Replayed { integrity, catalog })
}

/// Validates the ledger in one streaming pass with bounded memory
/// ([`crate::stream::validate_streaming`] with its default window). `progress` hears the
/// replay's progress.
pub fn validate(
    ledger: &Ledger,
    scope: &Scope,
    options: &ReplayOptions,
    progress: &mut dyn FnMut(u64),
) -> Result<Validation, ValidateError> {
    crate::stream::validate_streaming(
        ledger,
        scope,
        options,
        &crate::stream::StreamOptions::default(),
        progress,
    )
}

/// Validates the ledger from a catalog of every lab entry held in memory: the reference the
/// streaming validation is tested against, and what `exceptions`, `sign` and `periodic` build
/// on. Same findings as [`validate`] (which compares readings for `PAT-02` only within its
/// horizon).
pub fn validate_in_memory(
    ledger: &Ledger,
    scope: &Scope,
    options: &ReplayOptions,
    progress: &mut dyn FnMut(u64),
) -> Result<Validation, ValidateError> {
    let replayed = replay(ledger, options, progress)?;
    let evidence = Evidence::gather(&replayed.catalog);
    let hash_of = |seq: u64| ledger.entry(seq).ok().map(|e| e.hash);
    judge(&replayed, &evidence, scope, &hash_of)
}

/// Applies every rule to replayed evidence and keeps what concerns `scope`. `hash_of` gives
/// the stored hash of an entry by sequence number, for integrity findings.
pub fn judge(
    replayed: &Replayed,
    evidence: &Evidence<'_>,
    scope: &Scope,
    hash_of: &dyn Fn(u64) -> Option<EntryHash>,
) -> Result<Validation, ValidateError> {
    let in_scope = |run: &RunView<'_>| match scope {
        Scope::Ledger => true,
        Scope::Run(id) => run.id() == id,
        Scope::Sample(id) => run.sample_id() == Some(id.as_str()),
    };
    if !evidence.runs.iter().any(&in_scope) && *scope != Scope::Ledger {
        return Err(ValidateError::UnknownScope(match scope {
            Scope::Run(id) => format!("the ledger has no run {id:?}"),
            Scope::Sample(id) => format!("the ledger has no run on sample {id:?}"),
            Scope::Ledger => unreachable!(),
        }));
    }
    let mut findings =
        integrity::findings(&replayed.integrity, replayed.catalog.defects(), hash_of);
    let rule_findings = rules::evaluate(evidence);
    findings.extend(rule_findings.into_iter().filter(|f| match scope {
        Scope::Ledger => true,
        Scope::Run(id) => f.run.as_deref() == Some(id.as_str()),
        Scope::Sample(id) => f.sample.as_deref() == Some(id.as_str()),
    }));
    crate::findings::sort(&mut findings);
    let runs: Vec<RunSummary> = evidence
        .runs
        .iter()
        .filter(|r| in_scope(r))
        .map(|run| summarize(evidence, run, &findings))
        .collect();
    let runs_checked = runs.len();
    let runs = runs
        .into_iter()
        .filter(|r| *scope != Scope::Ledger || r.findings != Tally::default())
        .collect();
    let tally = Tally::of(&findings);
    Ok(Validation {
        scope: scope.clone(),
        head: replayed.integrity.head,
        integrity: replayed.integrity.clone(),
        runs,
        runs_checked,
        findings,
        tally,
    })
}

pub(crate) fn summarize(
    evidence: &Evidence<'_>,
    run: &RunView<'_>,
    findings: &[Finding],
) -> RunSummary {
    let result = run.recomputed.as_ref().ok().map(|r| {
        let outcome = &r.outcome;
        match outcome.reported {
            Some(reported) => format!(
                "{} ± {} {}",
                reported.value, reported.expanded_uncertainty, outcome.unit
            ),
            None => format!("{:.6} {}", outcome.mean, outcome.unit),
        }
    });
    let conforms = (run.run.kind == RunKind::Assay)
        .then(|| rules::out_of_spec::decision_of(evidence, run))
        .flatten()
        .map(|(decision, _): (Decision, _)| decision.conforms());
    let own: Vec<Finding> = findings
        .iter()
        .filter(|f| f.run.as_deref() == Some(run.id()))
        .cloned()
        .collect();
    RunSummary {
        run: run.id().to_string(),
        kind: run.run.kind,
        sample: run.sample_id().map(str::to_string),
        method: run.method_label().to_string(),
        result,
        conforms,
        findings: Tally::of(&own),
    }
}
