//! Where a passphrase comes from: a file or environment variable named on the command line for
//! scripts, otherwise a prompt on the terminal with echo off.

use crate::args::Cli;
use crate::failure::Failure;
use std::io::IsTerminal;
use zeroize::Zeroizing;

/// A passphrase, wiped from memory when dropped.
pub type Passphrase = Zeroizing<String>;

/// Gets the passphrase to unlock the key file at `key_path`.
pub fn for_unlocking(cli: &Cli, key_path: &std::path::Path) -> Result<Passphrase, Failure> {
    if let Some(secret) = from_flags(cli)? {
        return Ok(secret);
    }
    prompt(&format!("passphrase for {}: ", key_path.display()))
}

/// Gets a new passphrase (asked twice on a terminal).
pub fn for_new_key(cli: &Cli) -> Result<Passphrase, Failure> {
    if let Some(secret) = from_flags(cli)? {
        return Ok(secret);
    }
    let first = prompt("new passphrase: ")?;
    let second = prompt("repeat passphrase: ")?;
    if first != second {
        return Err(Failure::new(
            "the two passphrases differ",
            "run the command again and type the same passphrase twice",
        ));
    }
    Ok(first)
}

fn from_flags(cli: &Cli) -> Result<Option<Passphrase>, Failure> {
    if let Some(path) = &cli.passphrase_file {
        let text = Zeroizing::new(std::fs::read_to_string(path).map_err(|e| {
            Failure::new(
                format!("cannot read passphrase file {}: {e}", path.display()),
                "check the --passphrase-file path",
            )
        })?);
        let line = text.lines().next().unwrap_or("").to_string();
        return Ok(Some(Zeroizing::new(line)));
    }
    if let Some(var) = &cli.passphrase_env {
        let value = std::env::var(var).map_err(|_| {
            Failure::new(
                format!("environment variable {var} is not set"),
                "export the variable named by --passphrase-env, or use --passphrase-file",
            )
        })?;
        return Ok(Some(Zeroizing::new(value)));
    }
    Ok(None)
}

fn prompt(text: &str) -> Result<Passphrase, Failure> {
    if !std::io::stdin().is_terminal() {
        return Err(Failure::new(
            "a passphrase is needed and there is no terminal to ask on",
            "pass --passphrase-file FILE or --passphrase-env VAR, or run in a terminal",
        ));
    }
    rpassword::prompt_password(text)
        .map(Zeroizing::new)
        .map_err(|e| {
            Failure::new(
                format!("cannot read the passphrase: {e}"),
                "pass --passphrase-file FILE or --passphrase-env VAR, or run in a terminal",
            )
        })
}
