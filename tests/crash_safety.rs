//! Crash safety (DESIGN.md 3.5): a child appending in a loop is killed with SIGKILL at
//! pseudo-random moments; afterwards the ledger verifies and every append the child reported
//! as committed is present with the same hash.

mod common;

use assize_ledger::{KindRules, Ledger, OpenMode, SystemClock};
use common::{fixture_ledger, replay, Jitter, ANALYST_SECRET};
use std::io::{BufRead, BufReader};
use std::process::{Command, Stdio};
use std::sync::mpsc;
use std::sync::Arc;
use std::time::Duration;

const ROUNDS: u64 = 12;

#[test]
fn survives_sigkill_during_appends_and_keeps_every_acknowledged_entry() {
    let dir = tempfile::tempdir().expect("temp dir");
    let ledger_path = fixture_ledger(dir.path());
    let mut jitter = Jitter::new(0x5eed_2026);
    let mut acknowledged: Vec<(u64, String)> = Vec::new();
    for round in 0..ROUNDS {
        let mut child = Command::new(env!("CARGO_BIN_EXE_append-loop"))
            .args([
                ledger_path.to_str().expect("utf-8 path"),
                "a.mensah",
                &hex::encode(ANALYST_SECRET),
                "100000",
                &format!("round-{round}"),
            ])
            .stdout(Stdio::piped())
            .stderr(Stdio::null())
            .spawn()
            .expect("spawn append-loop");
        let stdout = child.stdout.take().expect("piped stdout");
        let (lines_tx, lines_rx) = mpsc::channel();
        let reader = std::thread::spawn(move || {
            for line in BufReader::new(stdout).lines() {
                let Ok(line) = line else { break };
                if lines_tx.send(line).is_err() {
                    break;
                }
            }
        });
        // Wait for the first acknowledged append so the kill lands mid-loop, then a little more.
        let first = lines_rx
            .recv_timeout(Duration::from_secs(30))
            .expect("child acknowledged an append");
        std::thread::sleep(Duration::from_millis(5 + jitter.below(120)));
        child.kill().expect("SIGKILL the child");
        child.wait().expect("reap the child");
        reader.join().expect("reader thread");
        for line in std::iter::once(first).chain(lines_rx.try_iter()) {
            let (seq, hash) = line.split_once(' ').expect("SEQ HASH line");
            acknowledged.push((seq.parse().expect("seq"), hash.to_string()));
        }
        let report = replay(&ledger_path);
        assert!(report.intact(), "round {round}: {:?}", report.problems);
    }
    let ledger = Ledger::open(
        &ledger_path,
        OpenMode::ReadOnly,
        KindRules::core(),
        Arc::new(SystemClock),
    )
    .expect("open");
    assert!(acknowledged.len() as u64 >= ROUNDS);
    for (seq, hash) in &acknowledged {
        let entry = ledger.entry(*seq).expect("acknowledged entry is present");
        assert_eq!(
            &entry.hash.to_hex(),
            hash,
            "entry {seq} changed after a crash"
        );
    }
}
