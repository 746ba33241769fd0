//! `assize recompute RUN`: a run recomputed from its raw records, with its uncertainty budget.

use crate::args::{Cli, RecomputeArgs};
use crate::failure::Failure;
use crate::output::print;
use crate::render::recomputed_text;
use crate::session::open_ledger;
use crate::Outcome;
use assize_ledger::OpenMode;
use assize_verify::assemble::recompute_run;
use assize_verify::catalog::Catalog;

/// Runs `assize recompute`.
pub fn run(cli: &Cli, args: &RecomputeArgs) -> Result<Outcome, Failure> {
    let ledger = open_ledger(cli, OpenMode::ReadOnly)?;
    let catalog = Catalog::load(ledger.store())?;
    let recomputed = recompute_run(&catalog, &args.run).map_err(|e| {
        Failure::new(
            e,
            "`assize entries list --kind lab.run` shows the runs; record what is missing with `assize add`",
        )
    })?;
    print(cli.json, &recomputed, || recomputed_text(&recomputed))?;
    Ok(Outcome::Clean)
}
