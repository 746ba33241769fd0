//! `assize exceptions RUN` and `assize sign RUN`: review by exception, then a signed review or
//! approval that names the ledger head and the report it was based on.

use crate::args::{Cli, ExceptionsArgs, SignArgs};
use crate::failure::Failure;
use crate::output::print;
use crate::report::{exceptions_text, signed_text};
use crate::session::{open_ledger, unlock};
use crate::Outcome;
use assize_ledger::{OpenMode, ReplayOptions};
use assize_verify::exceptions::report;
use assize_verify::records::Meaning;
use assize_verify::rules::Evidence;
use assize_verify::signoff::{prepare, Request};
use assize_verify::validate::{judge, replay, Scope, ValidateError};
use serde::Serialize;

fn scope_failure(e: ValidateError) -> Failure {
    match e {
        ValidateError::UnknownScope(what) => {
            Failure::new(what, "`assize entries list --kind lab.run` lists the runs")
        }
        ValidateError::Ledger(e) => Failure::from(e),
    }
}

/// The report with its hash, as printed.
#[derive(Serialize)]
struct Printed<'a> {
    report_sha256: String,
    report: &'a assize_verify::exceptions::ExceptionReport,
}

/// Runs `assize exceptions`.
pub fn exceptions(cli: &Cli, args: &ExceptionsArgs) -> Result<Outcome, Failure> {
    let ledger = open_ledger(cli, OpenMode::ReadOnly)?;
    let replayed =
        replay(&ledger, &ReplayOptions::default(), &mut |_| {}).map_err(scope_failure)?;
    let evidence = Evidence::gather(&replayed.catalog);
    let hash_of = |seq: u64| ledger.entry(seq).ok().map(|e| e.hash);
    let run = evidence
        .runs
        .iter()
        .find(|r| r.id() == args.run)
        .ok_or_else(|| {
            scope_failure(ValidateError::UnknownScope(format!(
                "the ledger has no run {:?}",
                args.run
            )))
        })?;
    let validation =
        judge(&replayed, &evidence, &Scope::Ledger, &hash_of).map_err(scope_failure)?;
    let report = report(&evidence, &validation, run);
    let printed = Printed {
        report_sha256: report.sha256(),
        report: &report,
    };
    print(cli.json, &printed, || exceptions_text(&report))?;
    Ok(if report.chain_intact {
        Outcome::Clean
    } else {
        Outcome::IntegrityProblems
    })
}

/// Runs `assize sign`.
pub fn sign(cli: &Cli, args: &SignArgs) -> Result<Outcome, Failure> {
    let meaning = match args.meaning.trim().to_ascii_lowercase().as_str() {
        "reviewed" => Meaning::Reviewed,
        "approved" => Meaning::Approved,
        other => {
            return Err(Failure::new(
                format!("--meaning {other:?} is not a meaning of a sign-off"),
                "use --meaning reviewed or --meaning approved",
            ))
        }
    };
    let signer = unlock(cli, &args.key)?;
    let mut ledger = open_ledger(cli, OpenMode::ReadWrite)?;
    let replayed =
        replay(&ledger, &ReplayOptions::default(), &mut |_| {}).map_err(scope_failure)?;
    let request = Request {
        run: args.run.clone(),
        result: args.result,
        meaning,
        comment: args.comment.clone(),
        justification: args.justification.clone(),
        report_sha256: args.report_sha256.clone(),
    };
    let prepared = prepare(&ledger, &replayed, signer.person(), &request).map_err(|e| {
        Failure::new(
            e,
            "`assize exceptions RUN` shows what stands; a second person signs what they did not do",
        )
    })?;
    let entry = ledger.append(prepared.draft, Some(&signer))?;
    print(cli.json, &prepared.sign_off, || {
        signed_text(&entry, &prepared.sign_off, &prepared.report)
    })?;
    Ok(Outcome::Clean)
}
