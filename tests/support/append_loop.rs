//! Test-only helper: appends signed notes to a ledger in a loop and reports each append on
//! stdout only after it is committed, as `SEQ HASH`. The crash-safety test kills it with SIGKILL
//! at random moments; the concurrency test runs two at once.
//!
//! Usage: `append-loop LEDGER PERSON SECRET_HEX COUNT TAG`

use assize_ledger::records::Note;
use assize_ledger::{KindRules, Ledger, OpenMode, Signer, SystemClock};
use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::Arc;

fn main() -> ExitCode {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let [ledger, person, secret, count, tag] = args.as_slice() else {
        eprintln!("usage: append-loop LEDGER PERSON SECRET_HEX COUNT TAG");
        return ExitCode::from(3);
    };
    let Some(secret) = hex::decode(secret)
        .ok()
        .and_then(|b| <[u8; 32]>::try_from(b).ok())
    else {
        eprintln!("SECRET_HEX must be 64 hex digits");
        return ExitCode::from(3);
    };
    let Ok(count) = count.parse::<u64>() else {
        eprintln!("COUNT must be a number");
        return ExitCode::from(3);
    };
    let signer = Signer::from_secret(person, &secret);
    let path = PathBuf::from(ledger);
    let mut ledger = match Ledger::open(
        &path,
        OpenMode::ReadWrite,
        KindRules::core(),
        Arc::new(SystemClock),
    ) {
        Ok(l) => l,
        Err(e) => {
            eprintln!("error: {e}");
            return ExitCode::from(4);
        }
    };
    let mut out = std::io::stdout().lock();
    for i in 0..count {
        let note = Note {
            text: format!("{tag} {i}"),
        };
        match ledger.append_record(&note, &signer) {
            Ok(entry) => {
                let reported =
                    writeln!(out, "{} {}", entry.seq, entry.hash).and_then(|_| out.flush());
                if reported.is_err() {
                    return ExitCode::from(4);
                }
            }
            Err(e) => {
                eprintln!("error: {e}");
                return ExitCode::from(4);
            }
        }
    }
    ExitCode::SUCCESS
}
