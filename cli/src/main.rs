//! `assize` binary: parse the command line, run one command, print, choose the exit code.
//!
//! Exit codes (stable, documented in the README): 0 done / ledger intact / no findings; 1 the
//! validator found something at or above the chosen severity; 2 integrity problems found; 3 the
//! command line is wrong; 4 the command could not be carried out (bad input, refused entry,
//! wrong passphrase, unreadable file, unknown run).
//! Only this crate writes to stdout or picks exit codes.

mod args;
mod commands;
mod failure;
mod html;
mod outfile;
mod output;
mod pairing;
mod passphrase;
mod render;
mod report;
mod session;

use clap::Parser;
use std::process::ExitCode;

/// Exit status of a command that ran.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Outcome {
    /// Done; nothing wrong.
    Clean,
    /// The ledger has integrity problems.
    IntegrityProblems,
    /// The validator found something at or above the chosen severity.
    Findings,
}

const EXIT_FINDINGS: u8 = 1;
const EXIT_INTEGRITY: u8 = 2;
const EXIT_USAGE: u8 = 3;
const EXIT_FAILED: u8 = 4;

fn main() -> ExitCode {
    let cli = match args::Cli::try_parse() {
        Ok(cli) => cli,
        Err(e) => {
            let _ = e.print();
            return if e.use_stderr() {
                ExitCode::from(EXIT_USAGE)
            } else {
                ExitCode::SUCCESS
            };
        }
    };
    match commands::run(&cli) {
        Ok(Outcome::Clean) => ExitCode::SUCCESS,
        Ok(Outcome::IntegrityProblems) => ExitCode::from(EXIT_INTEGRITY),
        Ok(Outcome::Findings) => ExitCode::from(EXIT_FINDINGS),
        Err(failure) if failure.is_closed_pipe() => ExitCode::SUCCESS,
        Err(failure) => {
            eprint!("{}", failure.render());
            ExitCode::from(EXIT_FAILED)
        }
    }
}
