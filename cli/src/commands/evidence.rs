//! `assize evidence export RUN --out FILE` and `assize evidence check FILE`: one result's
//! evidence bundle written from the ledger, and checked and explained without it.

use crate::args::{Cli, EvidenceCheckArgs, EvidenceCommand, EvidenceExportArgs};
use crate::failure::Failure;
use crate::outfile::{write_whole, Existing};
use crate::output::print;
use crate::report::explanation_text;
use crate::session::{open_ledger, unlock};
use crate::Outcome;
use assize_ledger::OpenMode;
use assize_verify::evidence::{export, open, EvidenceError};
use assize_verify::explain::{Explanation, Target};
use serde::Serialize;

/// Runs `assize evidence ...`.
pub fn run(cli: &Cli, command: &EvidenceCommand) -> Result<Outcome, Failure> {
    match command {
        EvidenceCommand::Export(args) => export_bundle(cli, args),
        EvidenceCommand::Check(args) => check_bundle(cli, args),
    }
}

fn export_bundle(cli: &Cli, args: &EvidenceExportArgs) -> Result<Outcome, Failure> {
    let mut ledger = open_ledger(cli, OpenMode::ReadOnly)?;
    let signer = unlock(cli, &args.key)?;
    let target = match (&args.run, args.entry) {
        (_, Some(seq)) => Target::Entry(seq),
        (Some(run), None) => Target::RunId(run.clone()),
        (None, None) => unreachable!("clap requires a run or --entry"),
    };
    let made = export(&mut ledger, &target, &signer).map_err(failure)?;
    let existing = if args.force {
        Existing::Replace
    } else {
        Existing::Keep
    };
    write_whole(&args.out, &made.bytes, existing)?;
    #[derive(Serialize)]
    struct Written<'a> {
        file: String,
        bytes: usize,
        run: &'a str,
        entries: usize,
        head_seq: u64,
    }
    let written = Written {
        file: args.out.display().to_string(),
        bytes: made.bytes.len(),
        run: &made.explanation.run.id,
        entries: made.explanation.entries.len(),
        head_seq: made.explanation.head_seq,
    };
    print(cli.json, &written, || {
        format!(
            "evidence of run {} written to {} ({} bytes): {} entries it depends on and the registry, each with its proof under a checkpoint of entry {} signed by {}\ncheck it anywhere, without the ledger: assize evidence check {}",
            written.run,
            written.file,
            written.bytes,
            written.entries,
            written.head_seq,
            signer.person(),
            written.file
        )
    })?;
    Ok(Outcome::Clean)
}

fn check_bundle(cli: &Cli, args: &EvidenceCheckArgs) -> Result<Outcome, Failure> {
    let bytes = std::fs::read(&args.file).map_err(|e| {
        Failure::new(
            format!("cannot read {}: {e}", args.file.display()),
            "give the path of a bundle written by `assize evidence export`",
        )
    })?;
    let opened = open(&bytes).map_err(failure)?;
    #[derive(Serialize)]
    struct Checked<'a> {
        verified: bool,
        note: &'a str,
        ledger_id: String,
        checkpoint_seq: u64,
        checkpoint_head: String,
        tree_root: String,
        signed_by: &'a str,
        signed_at: String,
        entries: usize,
        longest_proof: usize,
        explanation: &'a Explanation,
    }
    let view = Checked {
        verified: true,
        note: &opened.bundle.note,
        ledger_id: hex::encode(opened.bundle.checkpoint.ledger_id),
        checkpoint_seq: opened.bundle.checkpoint.seq,
        checkpoint_head: opened.bundle.checkpoint.head.to_hex(),
        tree_root: opened
            .bundle
            .checkpoint
            .tree_root
            .map(hex::encode)
            .unwrap_or_default(),
        signed_by: &opened.bundle.checkpoint.by,
        signed_at: opened.bundle.checkpoint.made_at.to_string(),
        entries: opened.bundle.entries.len(),
        longest_proof: opened.bundle.longest_proof,
        explanation: &opened.explanation,
    };
    print(cli.json, &view, || {
        format!(
            "bundle verified without the ledger: {}\n  ledger {} · checkpoint of entry {} (head {}, tree root {}) signed by {} at {}\n  {} entries, each a leaf of that tree (proofs of at most {} hashes); bundle signature and signer's enrolment checked\n\n{}",
            view.note,
            view.ledger_id,
            view.checkpoint_seq,
            short(&view.checkpoint_head),
            short(&view.tree_root),
            view.signed_by,
            view.signed_at,
            view.entries,
            view.longest_proof,
            explanation_text(&opened.explanation)
        )
    })?;
    Ok(Outcome::Clean)
}

/// The first 16 hex digits of a hash, for people.
fn short(hex: &str) -> &str {
    hex.get(..16).unwrap_or(hex)
}

fn failure(e: EvidenceError) -> Failure {
    match e {
        EvidenceError::Ledger(e) => Failure::from(e),
        EvidenceError::NotFound(what) => Failure::new(
            what,
            "`assize entries list --kind lab.run` lists the runs; `--entry SEQ` takes any entry of a run",
        ),
        EvidenceError::Bundle(e) => Failure::new(
            format!("bundle refused: {e}"),
            "do not rely on this bundle; ask for a new one made from the ledger",
        ),
    }
}
