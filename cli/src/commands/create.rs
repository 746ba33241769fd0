//! `assize create`: a new ledger whose first entry enrols the founding QA person.

use crate::args::{Cli, CreateArgs};
use crate::failure::Failure;
use crate::output::print;
use crate::render::EntryView;
use crate::session::{kind_rules, ledger_path, unlock};
use crate::Outcome;
use assize_ledger::{Ledger, SystemClock};
use std::sync::Arc;

/// Runs `assize create`.
pub fn run(cli: &Cli, args: &CreateArgs) -> Result<Outcome, Failure> {
    let path = ledger_path(cli)?;
    if path.exists() {
        return Err(assize_ledger::LedgerError::AlreadyExists { path: path.into() }.into());
    }
    let signer = unlock(cli, &args.key)?;
    let (_, entry) = Ledger::create(
        path,
        &args.lab,
        &args.name,
        &signer,
        kind_rules(),
        Arc::new(SystemClock),
    )?;
    let view = EntryView::of(&entry);
    print(cli.json, &view, || {
        format!(
            "created {} for {}\nentry 1 enrols {} ({}) as qa",
            path.display(),
            args.lab.trim(),
            signer.person(),
            args.name.trim()
        )
    })?;
    Ok(Outcome::Clean)
}
