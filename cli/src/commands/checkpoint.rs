//! `assize checkpoint write|check`: signed heads kept outside the ledger file.

use super::verify::{parse_code, read_checkpoint, replay_and_report};
use crate::args::{CheckpointCommand, Cli};
use crate::failure::Failure;
use crate::output::print;
use crate::session::{open_ledger, unlock};
use crate::Outcome;
use assize_ledger::replay::{Anchor, ReplayOptions};
use assize_ledger::OpenMode;
use std::io::Write;
use std::os::unix::fs::OpenOptionsExt;

/// Runs `assize checkpoint ...`.
pub fn run(cli: &Cli, command: &CheckpointCommand) -> Result<Outcome, Failure> {
    match command {
        CheckpointCommand::Write(args) => {
            let mut ledger = open_ledger(cli, OpenMode::ReadOnly)?;
            let signer = unlock(cli, &args.key)?;
            let checkpoint = ledger.checkpoint(&signer)?;
            write_new_file(&args.out, checkpoint.to_text().as_bytes())?;
            print(cli.json, &checkpoint, || {
                format!(
                    "checkpoint of entry {} written to {}\ncode for the logbook: {}",
                    checkpoint.seq,
                    args.out.display(),
                    checkpoint.code()
                )
            })?;
            Ok(Outcome::Clean)
        }
        CheckpointCommand::Check(args) => {
            let anchor = match (&args.file, &args.code) {
                (Some(path), _) => Anchor::Checkpoint(read_checkpoint(path)?),
                (None, Some(code)) => Anchor::Code(parse_code(code)?),
                (None, None) => unreachable!("clap requires a file or a code"),
            };
            let options = ReplayOptions {
                anchors: vec![anchor],
                ..ReplayOptions::default()
            };
            replay_and_report(cli, &options)
        }
    }
}

fn write_new_file(path: &std::path::Path, bytes: &[u8]) -> Result<(), Failure> {
    let written = std::fs::OpenOptions::new()
        .write(true)
        .create_new(true)
        .mode(0o644)
        .open(path)
        .and_then(|mut f| f.write_all(bytes).and_then(|_| f.sync_all()));
    written.map_err(|e| {
        Failure::new(
            format!("cannot write checkpoint {}: {e}", path.display()),
            "choose a new file name; checkpoints are never overwritten",
        )
    })
}
