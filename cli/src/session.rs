//! Turns command-line arguments into the things a command works with: an open ledger, an
//! unlocked key, a public key. Every check on arguments happens here, before any work starts.

use crate::args::{Cli, PublicKeySource};
use crate::failure::Failure;
use crate::passphrase;
use assize_ledger::keyfile::{read_key_file_info, unlock_key_file};
use assize_ledger::{KindRules, Ledger, OpenMode, PublicKey, Role, Signer, SystemClock};
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// The ledger path from `--ledger` or `ASSIZE_LEDGER`.
pub fn ledger_path(cli: &Cli) -> Result<&Path, Failure> {
    cli.ledger
        .as_deref()
        .ok_or_else(|| Failure::new("no ledger given", "pass --ledger FILE or set ASSIZE_LEDGER"))
}

/// The kind rules this build judges ledgers by (assembled by the verify crate).
pub fn kind_rules() -> KindRules {
    assize_verify::kind_rules()
}

/// Opens the ledger named on the command line.
pub fn open_ledger(cli: &Cli, mode: OpenMode) -> Result<Ledger, Failure> {
    let path = ledger_path(cli)?;
    Ok(Ledger::open(
        path,
        mode,
        kind_rules(),
        Arc::new(SystemClock),
    )?)
}

/// Unlocks a key file, asking for its passphrase as the command line says.
pub fn unlock(cli: &Cli, key: &Path) -> Result<Signer, Failure> {
    read_key_file_info(key)?;
    let passphrase = passphrase::for_unlocking(cli, key)?;
    Ok(unlock_key_file(key, &passphrase)?)
}

/// The public key given by hex or read from a key file; checks it belongs to `person`.
pub fn public_key(source: &PublicKeySource, person: &str) -> Result<PublicKey, Failure> {
    if let Some(hex) = &source.public_key {
        return PublicKey::from_hex(hex).ok_or_else(|| {
            Failure::new(
                format!("{hex:?} is not a public key"),
                "give the 64 hex digits shown by `assize key show FILE`",
            )
        });
    }
    let file: &PathBuf = source
        .from_key_file
        .as_ref()
        .expect("clap requires one of --public-key and --from-key-file");
    let info = read_key_file_info(file)?;
    if info.person != person {
        return Err(Failure::new(
            format!(
                "key file {} belongs to {}, not {person}",
                file.display(),
                info.person
            ),
            "give the key file made for this person with `assize key new --person ID`",
        ));
    }
    Ok(info.public_key)
}

/// Parses a role word.
pub fn role(text: &str) -> Result<Role, Failure> {
    Role::parse(text).ok_or_else(|| {
        Failure::new(
            format!("{text:?} is not a role"),
            "use one of: analyst, reviewer, qa",
        )
    })
}
