//! `assize history SEQ` (or `--run RUN`): every version of one record and every sign-off on
//! it, oldest first.

use crate::args::{Cli, HistoryArgs};
use crate::failure::Failure;
use crate::output::print;
use crate::report::history_text;
use crate::session::open_ledger;
use crate::Outcome;
use assize_ledger::OpenMode;
use assize_verify::explain::ExplainError;
use assize_verify::history::{history, Subject};

/// Runs `assize history`.
pub fn run(cli: &Cli, args: &HistoryArgs) -> Result<Outcome, Failure> {
    let mut ledger = open_ledger(cli, OpenMode::ReadOnly)?;
    let subject = match (args.entry, &args.run) {
        (Some(seq), _) => Subject::Entry(seq),
        (None, Some(run)) => Subject::RunId(run.clone()),
        (None, None) => unreachable!("clap requires an entry or --run"),
    };
    let found = history(&mut ledger, &subject).map_err(|e| match e {
        ExplainError::Ledger(e) => Failure::from(e),
        ExplainError::NotFound(what) => Failure::new(
            what,
            "`assize entries list` shows the entries with their sequence numbers; `--run RUN` takes a run id",
        ),
    })?;
    print(cli.json, &found, || history_text(&found))?;
    Ok(Outcome::Clean)
}
