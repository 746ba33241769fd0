//! `assize verify`: replay the chain, optionally against checkpoints, and report.

use crate::args::{Cli, VerifyArgs};
use crate::failure::Failure;
use crate::output::print;
use crate::render::integrity_report;
use crate::session::open_ledger;
use crate::Outcome;
use assize_ledger::checkpoint::CheckpointCode;
use assize_ledger::replay::{Anchor, IntegrityReport, ReplayOptions};
use assize_ledger::{Checkpoint, OpenMode};
use std::path::Path;

/// Runs `assize verify`.
pub fn run(cli: &Cli, args: &VerifyArgs) -> Result<Outcome, Failure> {
    let mut anchors = Vec::new();
    for path in &args.checkpoints {
        anchors.push(Anchor::Checkpoint(read_checkpoint(path)?));
    }
    for code in &args.codes {
        anchors.push(Anchor::Code(parse_code(code)?));
    }
    let options = ReplayOptions {
        strict_signatures: args.strict,
        threads: args.threads,
        anchors,
    };
    replay_and_report(cli, &options)
}

/// Replays with `options`, prints the report, and maps it to an outcome.
pub fn replay_and_report(cli: &Cli, options: &ReplayOptions) -> Result<Outcome, Failure> {
    let ledger = open_ledger(cli, OpenMode::ReadOnly)?;
    let report: IntegrityReport = ledger.replay(options)?;
    print(cli.json, &report, || integrity_report(&report))?;
    Ok(if report.intact() {
        Outcome::Clean
    } else {
        Outcome::IntegrityProblems
    })
}

/// Reads and parses a checkpoint file.
pub fn read_checkpoint(path: &Path) -> Result<Checkpoint, Failure> {
    let text = std::fs::read_to_string(path).map_err(|e| {
        Failure::new(
            format!("cannot read checkpoint {}: {e}", path.display()),
            "check the path of the checkpoint file",
        )
    })?;
    Checkpoint::parse_text(&text).map_err(|e| {
        Failure::new(
            format!("{} is not a checkpoint: {e}", path.display()),
            "give a file written by `assize checkpoint write`",
        )
    })
}

/// Parses a logbook checkpoint code.
pub fn parse_code(code: &str) -> Result<CheckpointCode, Failure> {
    CheckpointCode::parse(code).map_err(|e| {
        Failure::new(
            format!("{code:?} is not a checkpoint code: {e}"),
            "copy the code exactly as `assize checkpoint write` printed it, e.g. 42-9f86-d081-884c-7d65",
        )
    })
}
