//! Evidence through the real `assize` binary. A bundle exported from a ledger holding the
//! invented sample week of `samples/lab/`, checked with the ledger file moved away (it needs
//! only the bundle), its explanation equal to `explain` on the ledger, and refused, with a
//! non-zero exit and nothing else, once a byte of it changes; and two checkpoints written a
//! note apart, the later proven to extend the earlier.

mod common;

use common::{assize, json, lab_with_the_sample_week, run_assize};
use std::path::Path;

const RUN: &str = "AS-HP-26-0871-1";

#[test]
fn a_bundle_checks_and_explains_without_the_ledger_and_a_changed_byte_is_refused() {
    let dir = tempfile::tempdir().expect("temp dir");
    let d = dir.path();
    lab_with_the_sample_week(d, Path::new(env!("CARGO_MANIFEST_DIR")));
    let on_ledger = json(&assize(
        d,
        &["--json", "--ledger", "lab.ledger", "explain", RUN],
    ));
    let export = [
        "--ledger",
        "lab.ledger",
        "--passphrase-file",
        "pass.txt",
        "evidence",
        "export",
        RUN,
        "--out",
        "result.bundle",
        "--key",
        "qa.key",
    ];
    let written = json(&assize(d, &[&["--json"][..], &export].concat()));
    assert_eq!(written["run"], RUN);
    // A second export to the same file is refused (bundles are not overwritten silently).
    let again = run_assize(d, &export);
    assert_eq!(again.status.code(), Some(4));

    // Without the ledger.
    std::fs::create_dir(d.join("elsewhere")).expect("dir");
    for suffix in ["", "-wal", "-shm"] {
        let from = d.join(format!("lab.ledger{suffix}"));
        if from.exists() {
            std::fs::rename(&from, d.join(format!("elsewhere/lab.ledger{suffix}"))).expect("move");
        }
    }
    let checked = json(&assize(
        d,
        &["--json", "evidence", "check", "result.bundle"],
    ));
    assert_eq!(checked["verified"], true);
    assert_eq!(checked["signed_by"], "q.halden");
    assert_eq!(checked["explanation"], on_ledger);
    let text = assize(d, &["evidence", "check", "result.bundle"]);
    assert!(
        text.starts_with("bundle verified without the ledger"),
        "{text}"
    );
    assert!(text.contains(&format!("where the result of run {RUN} comes from")));

    let mut bytes = std::fs::read(d.join("result.bundle")).expect("bundle");
    let middle = bytes.len() / 2;
    bytes[middle] ^= 0x20;
    std::fs::write(d.join("changed.bundle"), &bytes).expect("write");
    let refused = run_assize(d, &["evidence", "check", "changed.bundle"]);
    assert_eq!(refused.status.code(), Some(4));
    assert!(refused.stdout.is_empty());
    let stderr = String::from_utf8_lossy(&refused.stderr);
    assert!(stderr.starts_with("error: bundle refused: "), "{stderr}");
}

#[test]
fn a_later_checkpoint_is_proven_to_extend_an_earlier_one() {
    let dir = tempfile::tempdir().expect("temp dir");
    let d = dir.path();
    lab_with_the_sample_week(d, Path::new(env!("CARGO_MANIFEST_DIR")));
    let l = ["--ledger", "lab.ledger", "--passphrase-file", "pass.txt"];
    let write = |out: &str| {
        assize(
            d,
            &[
                &l[..],
                &["checkpoint", "write", "--out", out, "--key", "qa.key"],
            ]
            .concat(),
        )
    };
    write("first.checkpoint");
    assize(
        d,
        &[
            &l[..],
            &["note", "--text", "end of the week", "--key", "analyst.key"],
        ]
        .concat(),
    );
    write("second.checkpoint");
    let text = std::fs::read_to_string(d.join("second.checkpoint")).expect("checkpoint");
    assert!(text.starts_with("assize checkpoint v2\n") && text.contains("\ntree "));
    let proven = json(&assize(
        d,
        &[
            "--json",
            "--ledger",
            "lab.ledger",
            "checkpoint",
            "extends",
            "first.checkpoint",
            "second.checkpoint",
        ],
    ));
    assert_eq!(proven["extends"], true);
    assert_eq!(
        proven["later_seq"].as_u64().unwrap(),
        proven["earlier_seq"].as_u64().unwrap() + 1
    );
    assert!(!proven["proof"].as_array().expect("proof").is_empty());
}
