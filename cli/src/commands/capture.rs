//! `assize capture FILE --run RUN`: a balance printout paired with the run's keyed weighings,
//! and the captured twin of each paired weighing recorded in one transaction (all or none),
//! signed by the analyst importing it; `--dry-run` shows the pairing and writes nothing.
//!
//! The captured weighings are signed, not left unsigned as DESIGN.md would allow for
//! instrument data: the import is a person's act (choosing the file and the run), and an
//! unsigned "captured" reading could be appended by anyone who can write the file, so it would
//! prove nothing against a keyed one. The signature attributes the import, not the reading:
//! the reading stays the balance's, with the balance's own times.

use crate::args::{CaptureArgs, Cli};
use crate::failure::Failure;
use crate::output::print;
use crate::pairing::CaptureView;
use crate::session::{open_ledger, unlock};
use crate::Outcome;
use assize_ledger::OpenMode;
use assize_verify::capture_import::{self, CaptureError};
use assize_verify::catalog::Catalog;
use assize_verify::printout::{parse_printout, PrintedReading};
use std::path::Path;

/// Runs `assize capture`.
pub fn run(cli: &Cli, args: &CaptureArgs) -> Result<Outcome, Failure> {
    let printout = read_printout(&args.file)?;
    if args.dry_run {
        return dry_run(cli, args, &printout);
    }
    let key = args
        .key
        .as_deref()
        .expect("clap requires --key unless --dry-run");
    let mut ledger = open_ledger(cli, OpenMode::ReadWrite)?;
    let signer = unlock(cli, key)?;
    let (plan, entries) = capture_import::record(&mut ledger, &signer, &printout, &args.run)
        .map_err(|e| refused(e, &args.run, false))?;
    let view = CaptureView::of(&plan, &printout, &entries, false);
    print(cli.json, &view, || view.text())?;
    Ok(Outcome::Clean)
}

/// Shows what an import would record; fails, after showing it, when nothing would be.
fn dry_run(cli: &Cli, args: &CaptureArgs, printout: &[PrintedReading]) -> Result<Outcome, Failure> {
    let ledger = open_ledger(cli, OpenMode::ReadOnly)?;
    let catalog = Catalog::load(ledger.store())?;
    let plan = capture_import::plan(&catalog, printout, &args.run)
        .map_err(|e| refused(e, &args.run, true))?;
    let view = CaptureView::of(&plan, printout, &[], true);
    print(cli.json, &view, || view.text())?;
    if plan.pairings.is_empty() {
        return Err(refused(
            CaptureError::NothingPaired {
                run_id: args.run.clone(),
                keyed_weighings: plan.unpaired_weighings.len(),
                lines: printout.len(),
            },
            &args.run,
            true,
        ));
    }
    Ok(Outcome::Clean)
}

fn read_printout(path: &Path) -> Result<Vec<PrintedReading>, Failure> {
    let text = std::fs::read_to_string(path).map_err(|e| {
        Failure::new(
            format!("cannot read {}: {e}", path.display()),
            "check the path of the printout file",
        )
    })?;
    parse_printout(&text).map_err(|e| {
        Failure::new(
            format!("printout {}: {e}", path.display()),
            "nothing was written; each line is a UTC time ending in Z, the balance id, the digits as displayed, the unit and S or U (see the README)",
        )
    })
}

/// The refusal with what to do next (`dry_run`: the plan has just been shown).
fn refused(error: CaptureError, run: &str, dry_run: bool) -> Failure {
    let error = match error {
        CaptureError::Ledger(e) => return Failure::from(e),
        other => other,
    };
    let hint = match &error {
        CaptureError::UnknownRun { .. } => {
            "`assize entries list --kind lab.run` lists the runs".to_string()
        }
        CaptureError::UnknownBalance { .. } => {
            "nothing was written; record the balance first (`assize add balance`), or correct the balance id in the printout".to_string()
        }
        CaptureError::AlreadyCaptured { .. } => {
            "nothing was written; a printout is imported once, and a captured reading is changed only by `assize correct` with a reason".to_string()
        }
        // A ledger error was returned above.
        CaptureError::NothingPaired { .. } | CaptureError::Ledger(_) => {
            let unpaired = if dry_run {
                "the plan above lists what was left unpaired".to_string()
            } else {
                format!("`assize capture FILE --run {run} --dry-run` lists what was left unpaired")
            };
            format!(
                "nothing was written; check the run, and the printout's balance ids and times ({unpaired})"
            )
        }
    };
    Failure::new(error.to_string(), hint)
}
