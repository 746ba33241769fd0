//! `assize entries list|show`: read entries without judging them.

use crate::args::{Cli, EntriesCommand};
use crate::failure::Failure;
use crate::output::print;
use crate::render::{entries_table, entry_detail, EntryView};
use crate::session::open_ledger;
use crate::Outcome;
use assize_ledger::store::EntryFilter;
use assize_ledger::OpenMode;

/// Runs `assize entries ...`.
pub fn run(cli: &Cli, command: &EntriesCommand) -> Result<Outcome, Failure> {
    let ledger = open_ledger(cli, OpenMode::ReadOnly)?;
    match command {
        EntriesCommand::List(args) => {
            let filter = EntryFilter {
                after_seq: args.after,
                kind: args.kind.clone(),
                author: args.author.clone(),
            };
            let entries = ledger.find(&filter, args.limit)?;
            let views: Vec<EntryView> = entries.iter().map(EntryView::of).collect();
            print(cli.json, &views, || entries_table(&entries))?;
        }
        EntriesCommand::Show(args) => {
            let entry = ledger.entry(args.seq)?;
            let view = EntryView::of(&entry);
            print(cli.json, &view, || entry_detail(&view))?;
        }
    }
    Ok(Outcome::Clean)
}
