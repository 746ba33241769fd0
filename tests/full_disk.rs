//! A full disk during an append (simulated with a file-size limit, which binds even root):
//! the command fails with a clear error and a non-zero exit, and the ledger is unchanged.

mod common;

use assize_ledger::keyfile::read_key_file_info;
use assize_ledger::records::Enrolment;
use assize_ledger::{KindRules, Ledger, OpenMode, Role, Signer, SystemClock};
use common::{assize_binary, fixture_ledger, replay, QA_SECRET};
use std::path::Path;
use std::process::Command;
use std::sync::Arc;

fn enrol_key_holder(ledger: &Path, key: &Path) {
    let info = read_key_file_info(key).expect("key file header");
    let qa = Signer::from_secret("q.lindqvist", &QA_SECRET);
    let mut ledger = Ledger::open(
        ledger,
        OpenMode::ReadWrite,
        KindRules::core(),
        Arc::new(SystemClock),
    )
    .expect("open ledger");
    let enrolment = Enrolment {
        person: info.person,
        name: "Cai Full".into(),
        role: Role::Analyst,
        public_key: info.public_key,
    };
    ledger
        .append_record(&enrolment, &qa)
        .expect("enrol key holder");
}

#[test]
fn append_on_a_full_disk_fails_cleanly_and_loses_nothing() {
    let dir = tempfile::tempdir().expect("temp dir");
    let ledger = fixture_ledger(dir.path());
    // The fixture's analyst key as a key file the CLI can unlock.
    let key = dir.path().join("analyst.key");
    let made = Command::new(assize_binary())
        .args([
            "--passphrase-env",
            "P",
            "key",
            "new",
            "--person",
            "c.full",
            "--out",
        ])
        .arg(&key)
        .args(["--kdf-memory-mib", "8"])
        .env("P", "full disk passphrase")
        .output()
        .expect("run key new");
    assert!(
        made.status.success(),
        "{}",
        String::from_utf8_lossy(&made.stderr)
    );
    enrol_key_holder(&ledger, &key);
    let before = std::fs::read(&ledger).expect("read ledger");
    let entries_before = replay(&ledger).entries;

    // 64 blocks (32 KiB with 512-byte blocks, 64 KiB with 1024) lets SQLite map its 32 KiB
    // shared-memory file but not write a 120 KB note into the WAL. SIGXFSZ is ignored so the
    // write fails with EFBIG instead of killing the process.
    let big_note = "x".repeat(120_000);
    let out = Command::new("sh")
        .arg("-c")
        .arg("trap '' XFSZ; ulimit -f 64; exec \"$0\" \"$@\"")
        .arg(assize_binary())
        .args(["--passphrase-env", "P", "--ledger"])
        .arg(&ledger)
        .args(["note", "--text", &big_note, "--key"])
        .arg(&key)
        .env("P", "full disk passphrase")
        .output()
        .expect("run assize under a file-size limit");
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(4), "stderr: {stderr}");
    assert!(stderr.starts_with("error: "), "{stderr}");
    assert!(stderr.contains("disk full or file size limit"), "{stderr}");
    assert!(stderr.contains("\nhint: "), "{stderr}");

    assert_eq!(
        std::fs::read(&ledger).expect("read ledger"),
        before,
        "ledger bytes changed"
    );
    let report = replay(&ledger);
    assert!(report.intact(), "{:?}", report.problems);
    assert_eq!(report.entries, entries_before);
}
