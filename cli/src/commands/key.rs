//! `assize key new|show`: personal key files.

use crate::args::{Cli, KeyCommand};
use crate::failure::Failure;
use crate::output::print;
use crate::{passphrase, Outcome};
use assize_ledger::keyfile::{create_key_file, read_key_file_info};
use assize_ledger::KdfCost;

/// Runs `assize key ...`.
pub fn run(cli: &Cli, command: &KeyCommand) -> Result<Outcome, Failure> {
    let info = match command {
        KeyCommand::New(args) => {
            let cost = KdfCost {
                memory_kib: args.kdf_memory_mib.saturating_mul(1024),
                ..KdfCost::DEFAULT
            };
            let passphrase = passphrase::for_new_key(cli)?;
            create_key_file(&args.out, &args.person, &passphrase, cost)?
        }
        KeyCommand::Show(args) => read_key_file_info(&args.file)?,
    };
    print(cli.json, &info, || {
        format!(
            "person      {}\npublic key  {}\nkdf         argon2id, {} MiB, {} passes",
            info.person,
            info.public_key,
            info.kdf.memory_kib / 1024,
            info.kdf.iterations
        )
    })?;
    Ok(Outcome::Clean)
}
