//! `assize explain RUN` (or `--entry SEQ`): the derivation of one result as a tree down to
//! every raw reading, read through the ledger's indexes.

use crate::args::{Cli, ExplainArgs};
use crate::failure::Failure;
use crate::output::print;
use crate::report::explanation_text;
use crate::session::open_ledger;
use crate::Outcome;
use assize_ledger::OpenMode;
use assize_verify::explain::{explain, ExplainError, Target};

/// Runs `assize explain`.
pub fn run(cli: &Cli, args: &ExplainArgs) -> Result<Outcome, Failure> {
    let mut ledger = open_ledger(cli, OpenMode::ReadOnly)?;
    let target = match (&args.run, args.entry) {
        (_, Some(seq)) => Target::Entry(seq),
        (Some(run), None) => Target::RunId(run.clone()),
        (None, None) => unreachable!("clap requires a run or --entry"),
    };
    let explanation = explain(&mut ledger, &target).map_err(|e| match e {
        ExplainError::Ledger(e) => Failure::from(e),
        ExplainError::NotFound(what) => Failure::new(
            what,
            "`assize entries list --kind lab.run` lists the runs; `--entry SEQ` takes any entry of a run",
        ),
    })?;
    print(cli.json, &explanation, || explanation_text(&explanation))?;
    Ok(Outcome::Clean)
}
