//! Signing a run or its result: what the tool checks before a reviewer's or QA's sign-off
//! enters the ledger.
//!
//! The sign-off names the ledger head it was based on and the SHA-256 of the exception report
//! the signer saw. The tool refuses a signer who did any of the work covered (self-review),
//! refuses an approval while blocking findings stand unless the signer records a
//! justification (integrity problems are blocking findings like any other, so approving over
//! them needs one too), and refuses a report hash that no longer matches the report at the current
//! head (the data changed since the signer read it). The validator checks the same things
//! again on replay (`SOD-*`), for sign-offs written by any means.

use crate::exceptions::{report, ExceptionReport};
use crate::findings::Severity;
use crate::records::{LabRecord, Meaning, SignOff};
use crate::rules::Evidence;
use crate::validate::{judge, Replayed, Scope};
use assize_ledger::{Draft, EntryHash, Ledger};

/// What the signer asks for.
#[derive(Clone, Debug)]
pub struct Request {
    /// Run id.
    pub run: String,
    /// Sign the run's reported result instead of the run.
    pub result: bool,
    /// Reviewed or approved.
    pub meaning: Meaning,
    /// The signer's comment.
    pub comment: String,
    /// Why approval is given while blocking findings stand.
    pub justification: String,
    /// The report hash the signer read, if they give one.
    pub report_sha256: Option<String>,
}

/// A sign-off ready to append, with the report it was based on.
pub struct Prepared {
    /// The draft to append with the signer's key.
    pub draft: Draft,
    /// The record inside it.
    pub sign_off: SignOff,
    /// The exception report at the head the sign-off names.
    pub report: ExceptionReport,
}

/// Checks a sign-off request against the replayed ledger and builds the draft.
pub fn prepare(
    ledger: &Ledger,
    replayed: &Replayed,
    signer: &str,
    request: &Request,
) -> Result<Prepared, String> {
    let evidence = Evidence::gather(&replayed.catalog);
    let hash_of = |seq: u64| ledger.entry(seq).ok().map(|e| e.hash);
    let validation =
        judge(replayed, &evidence, &Scope::Ledger, &hash_of).map_err(|e| e.to_string())?;
    let run = evidence
        .runs
        .iter()
        .find(|r| r.id() == request.run)
        .ok_or_else(|| format!("the ledger has no run {:?}", request.run))?;
    let report = report(&evidence, &validation, run);
    let subject: EntryHash = if request.result {
        run.entries
            .iter()
            .rev()
            .find(|e| matches!(e.body, crate::catalog::LabBody::Result(_)))
            .map(|e| e.hash)
            .ok_or_else(|| format!("run {} has no reported result to sign", request.run))?
    } else {
        run.entry.hash
    };
    if report.analysts.iter().any(|a| a == signer) {
        return Err(format!(
            "{signer} did work on run {} and cannot review or approve it; a second person must sign",
            request.run
        ));
    }
    if let Some(read) = &request.report_sha256 {
        if !read.eq_ignore_ascii_case(&report.sha256()) {
            return Err(format!(
                "the exception report of run {} has changed since it was read (the hash given starts {}); read it again with `assize exceptions {}`",
                request.run,
                short(read),
                request.run
            ));
        }
    }
    let justification = request.justification.trim().to_string();
    if request.meaning == Meaning::Approved
        && report
            .findings
            .iter()
            .any(|f| f.severity == Severity::Blocking)
        && justification.is_empty()
    {
        return Err(format!(
            "run {} has {} blocking finding(s); approval needs a recorded justification, or resolve them first",
            request.run, report.tally.blocking
        ));
    }
    if request.meaning == Meaning::Reviewed && !justification.is_empty() {
        return Err("only an approval carries a justification; put remarks in the comment".into());
    }
    let head = validation.head.ok_or("the ledger is empty")?;
    let sign_off = SignOff {
        subject,
        meaning: request.meaning,
        based_on_seq: head.seq,
        based_on: head.hash,
        report_sha256: Some(report.sha256()),
        comment: request.comment.trim().to_string(),
        justification,
    };
    sign_off.check()?;
    let draft = Draft::of_record(signer, &sign_off).map_err(|e| e.to_string())?;
    Ok(Prepared {
        draft,
        sign_off,
        report,
    })
}

fn short(hex: &str) -> &str {
    &hex[..hex.len().min(12)]
}
