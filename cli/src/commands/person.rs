//! `assize person ...`: the registry of people, roles and keys, kept as signed entries.

use crate::args::{Cli, PersonCommand};
use crate::failure::Failure;
use crate::output::print;
use crate::render::{person_views, persons_table, EntryView};
use crate::session::{open_ledger, public_key, role, unlock};
use crate::Outcome;
use assize_ledger::records::{AddKey, ChangeRole, Enrolment, RevokeKey};
use assize_ledger::{Entry, OpenMode, PublicKey, Record};

/// Runs `assize person ...`.
pub fn run(cli: &Cli, command: &PersonCommand) -> Result<Outcome, Failure> {
    let entry = match command {
        PersonCommand::List => return list(cli),
        PersonCommand::Enrol(args) => {
            let record = Enrolment {
                person: args.id.clone(),
                name: args.name.trim().to_string(),
                role: role(&args.role)?,
                public_key: public_key(&args.public_key, &args.id)?,
            };
            append(cli, &args.key, &record)?
        }
        PersonCommand::AddKey(args) => {
            let record = AddKey {
                person: args.id.clone(),
                public_key: public_key(&args.public_key, &args.id)?,
                reason: args.reason.clone(),
            };
            append(cli, &args.key, &record)?
        }
        PersonCommand::RevokeKey(args) => {
            let key = PublicKey::from_hex(&args.public_key).ok_or_else(|| {
                Failure::new(
                    format!("{:?} is not a public key", args.public_key),
                    "`assize person list --json` shows each person's keys in full",
                )
            })?;
            let record = RevokeKey {
                person: args.id.clone(),
                public_key: key,
                reason: args.reason.clone(),
            };
            append(cli, &args.key, &record)?
        }
        PersonCommand::ChangeRole(args) => {
            let record = ChangeRole {
                person: args.id.clone(),
                role: role(&args.role)?,
                reason: args.reason.clone(),
            };
            append(cli, &args.key, &record)?
        }
    };
    let view = EntryView::of(&entry);
    print(cli.json, &view, || {
        format!(
            "entry {} recorded: {} signed by {}",
            entry.seq, entry.kind, entry.author
        )
    })?;
    Ok(Outcome::Clean)
}

fn append<R: Record>(cli: &Cli, key: &std::path::Path, record: &R) -> Result<Entry, Failure> {
    let mut ledger = open_ledger(cli, OpenMode::ReadWrite)?;
    let signer = unlock(cli, key)?;
    Ok(ledger.append_record(record, &signer)?)
}

fn list(cli: &Cli) -> Result<Outcome, Failure> {
    let mut ledger = open_ledger(cli, OpenMode::ReadOnly)?;
    let people = person_views(ledger.registry()?);
    print(cli.json, &people, || persons_table(&people))?;
    Ok(Outcome::Clean)
}
