//! `assize checkpoint write|check`: signed heads kept outside the ledger file.

use super::verify::{parse_code, read_checkpoint, replay_and_report};
use crate::args::{CheckpointCommand, CheckpointExtendsArgs, Cli};
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
        CheckpointCommand::Extends(args) => extends(cli, args),
    }
}

/// `assize checkpoint extends EARLIER LATER`: the consistency proof between the two signed
/// trees, taken from the ledger and checked as anyone holding the two files could check it.
fn extends(cli: &Cli, args: &CheckpointExtendsArgs) -> Result<Outcome, Failure> {
    let earlier = read_checkpoint(&args.earlier)?;
    let later = read_checkpoint(&args.later)?;
    let mut ledger = open_ledger(cli, OpenMode::ReadOnly)?;
    for (path, checkpoint) in [(&args.earlier, &earlier), (&args.later, &later)] {
        if checkpoint.tree_root.is_none() {
            return Err(Failure::new(
                format!(
                    "{} is a version 1 checkpoint (no tree root)",
                    path.display()
                ),
                "write a new checkpoint with this version (`assize checkpoint write`), or check a v1 file with `assize checkpoint check`",
            ));
        }
        let owner = ledger
            .registry()?
            .owner_of(&checkpoint.key)
            .map(str::to_string);
        if owner.as_deref() != Some(checkpoint.by.as_str()) {
            return Err(Failure::new(
                format!(
                    "{} is signed with a key this ledger does not give to {}",
                    path.display(),
                    checkpoint.by
                ),
                "check that both checkpoints belong to this ledger",
            ));
        }
    }
    let (earlier, later) = if earlier.seq <= later.seq {
        (earlier, later)
    } else {
        (later, earlier)
    };
    let proof = ledger.consistency_proof(earlier.seq, later.seq)?;
    let verdict = assize_ledger::checkpoint::extends(&earlier, &later, &proof);
    #[derive(serde::Serialize)]
    struct Proven {
        extends: bool,
        earlier_seq: u64,
        later_seq: u64,
        proof: Vec<String>,
        problem: Option<String>,
    }
    let shown = Proven {
        extends: verdict.is_ok(),
        earlier_seq: earlier.seq,
        later_seq: later.seq,
        proof: proof.iter().map(hex::encode).collect(),
        problem: verdict.clone().err(),
    };
    print(cli.json, &shown, || {
        match &verdict {
        Ok(()) => format!(
            "the checkpoint of entry {} extends the checkpoint of entry {}: consistency proof of {} hashes verified against both signed tree roots",
            later.seq,
            earlier.seq,
            proof.len()
        ),
        Err(problem) => format!("NOT CONSISTENT: {problem}"),
    }
    })?;
    Ok(if verdict.is_ok() {
        Outcome::Clean
    } else {
        Outcome::IntegrityProblems
    })
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
