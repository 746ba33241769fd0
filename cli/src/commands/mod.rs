//! One module per verb; each turns parsed arguments into library calls and hands the result to
//! `render`/`output`.

mod capture;
mod checkpoint;
mod create;
mod demo;
mod dossier;
mod entries;
mod evidence;
mod explain;
mod history;
mod key;
mod lab;
mod note;
mod periodic;
mod person;
mod recompute;
mod replay;
mod review;
mod verify;

use crate::args::{Cli, Command};
use crate::failure::Failure;
use crate::Outcome;

/// Runs the command named on the command line.
pub fn run(cli: &Cli) -> Result<Outcome, Failure> {
    match &cli.command {
        Command::Key(command) => key::run(cli, command),
        Command::Create(args) => create::run(cli, args),
        Command::Person(command) => person::run(cli, command),
        Command::Note(args) => note::run(cli, args),
        Command::Entries(command) => entries::run(cli, command),
        Command::Verify(args) => verify::run(cli, args),
        Command::Checkpoint(command) => checkpoint::run(cli, command),
        Command::Adopt(args) => lab::adopt(cli, args),
        Command::Add(args) => lab::add(cli, args),
        Command::Import(args) => lab::import(cli, args),
        Command::Capture(args) => capture::run(cli, args),
        Command::Correct(args) => lab::correct(cli, args),
        Command::Recompute(args) => recompute::run(cli, args),
        Command::Replay(args) => replay::run(cli, args),
        Command::Codes => replay::codes(cli),
        Command::Exceptions(args) => review::exceptions(cli, args),
        Command::Explain(args) => explain::run(cli, args),
        Command::History(args) => history::run(cli, args),
        Command::Evidence(command) => evidence::run(cli, command),
        Command::Dossier(args) => dossier::run(cli, args),
        Command::Sign(args) => review::sign(cli, args),
        Command::Periodic(args) => periodic::run(cli, args),
        Command::Demo(args) => demo::run(cli, args),
    }
}
