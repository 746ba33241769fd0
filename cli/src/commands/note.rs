//! `assize note`: a signed free-text entry, optionally referring to earlier entries.

use crate::args::{Cli, NoteArgs};
use crate::failure::Failure;
use crate::output::print;
use crate::render::EntryView;
use crate::session::{open_ledger, unlock};
use crate::Outcome;
use assize_ledger::records::Note;
use assize_ledger::{Draft, OpenMode};

/// Runs `assize note`.
pub fn run(cli: &Cli, args: &NoteArgs) -> Result<Outcome, Failure> {
    if args.text.trim().is_empty() {
        return Err(Failure::new(
            "the note is empty",
            "give the text with --text",
        ));
    }
    let mut ledger = open_ledger(cli, OpenMode::ReadWrite)?;
    let references = args
        .refers_to
        .iter()
        .map(|seq| ledger.entry(*seq).map(|e| e.hash))
        .collect::<Result<Vec<_>, _>>()?;
    let signer = unlock(cli, &args.key)?;
    let mut draft = Draft::of_record(
        signer.person(),
        &Note {
            text: args.text.clone(),
        },
    )?;
    draft.references = references;
    let entry = ledger.append(draft, Some(&signer))?;
    let view = EntryView::of(&entry);
    print(cli.json, &view, || {
        format!("entry {} recorded: note by {}", entry.seq, entry.author)
    })?;
    Ok(Outcome::Clean)
}
