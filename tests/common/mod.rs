//! Shared fixtures for the cross-crate tests: a fresh ledger in a temp dir with fixed test keys,
//! and the paths of the binaries under test.
#![allow(dead_code)]

use assize_ledger::records::Enrolment;
use assize_ledger::replay::{IntegrityReport, ReplayOptions};
use assize_ledger::{KindRules, Ledger, OpenMode, Role, Signer, SystemClock};
use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::sync::Arc;

/// Fixed test secret of the founding QA person.
pub const QA_SECRET: [u8; 32] = [0x51; 32];
/// Fixed test secret of an analyst.
pub const ANALYST_SECRET: [u8; 32] = [0xa7; 32];
/// Fixed test secret of a second analyst.
pub const SECOND_ANALYST_SECRET: [u8; 32] = [0x3c; 32];

/// The `assize` binary built for this test run (next to the test executable's directory).
pub fn assize_binary() -> PathBuf {
    if let Some(path) = option_env!("CARGO_BIN_EXE_assize") {
        return PathBuf::from(path);
    }
    let exe = std::env::current_exe().expect("test executable path");
    let dir = exe
        .parent()
        .and_then(Path::parent)
        .expect("test executable lives in target/<profile>/deps");
    let binary = dir.join("assize");
    assert!(
        binary.exists(),
        "{} is missing; run the tests with `cargo test --workspace` so the cli binary is built",
        binary.display()
    );
    binary
}

/// A ledger with a QA person (`q.lindqvist`) and two analysts (`a.mensah`, `b.okafor`).
pub fn fixture_ledger(dir: &Path) -> PathBuf {
    let path = dir.join("fixture.ledger");
    let qa = Signer::from_secret("q.lindqvist", &QA_SECRET);
    let (mut ledger, _) = Ledger::create(
        &path,
        "Fixture Test Laboratory",
        "Quinn Lindqvist",
        &qa,
        KindRules::core(),
        Arc::new(SystemClock),
    )
    .expect("create fixture ledger");
    for (id, name, secret) in [
        ("a.mensah", "Adjoa Mensah", ANALYST_SECRET),
        ("b.okafor", "Bolu Okafor", SECOND_ANALYST_SECRET),
    ] {
        let enrolment = Enrolment {
            person: id.into(),
            name: name.into(),
            role: Role::Analyst,
            public_key: Signer::from_secret(id, &secret).public_key(),
        };
        ledger
            .append_record(&enrolment, &qa)
            .expect("enrol fixture person");
    }
    path
}

/// Replays a ledger file read-only.
pub fn replay(path: &Path) -> IntegrityReport {
    let ledger = Ledger::open(
        path,
        OpenMode::ReadOnly,
        KindRules::core(),
        Arc::new(SystemClock),
    )
    .expect("open ledger");
    ledger
        .replay(&ReplayOptions::default())
        .expect("replay runs")
}

/// A tiny deterministic generator (xorshift64*), so "random" moments are reproducible.
pub struct Jitter(u64);

impl Jitter {
    /// Seeded generator.
    pub fn new(seed: u64) -> Self {
        Jitter(seed.max(1))
    }

    /// Next value in `0..bound`.
    pub fn below(&mut self, bound: u64) -> u64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        self.0.wrapping_mul(0x2545_f491_4f6c_dd1d) % bound
    }
}

// ---------------------------------------------------------------------------------------------
// Driving the real binary.

/// Runs `assize` in `dir` with `args` (no ledger or key from the environment).
pub fn run_assize(dir: &Path, args: &[&str]) -> Output {
    Command::new(assize_binary())
        .current_dir(dir)
        .args(args)
        .env_remove("ASSIZE_LEDGER")
        .env_remove("ASSIZE_KEY")
        .output()
        .expect("run assize")
}

/// Runs `assize` like [`run_assize`] and returns its stdout, failing the test unless it succeeds.
pub fn assize(dir: &Path, args: &[&str]) -> String {
    let out = run_assize(dir, args);
    assert!(
        out.status.success(),
        "assize {args:?} failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).expect("utf-8 output")
}

/// Parses `--json` output.
pub fn json(text: &str) -> serde_json::Value {
    serde_json::from_str(text).expect("JSON output")
}

/// Sequence number of the ledger's last entry.
pub fn head(dir: &Path) -> u64 {
    let listed = json(&assize(
        dir,
        &[
            "--json",
            "--ledger",
            "lab.ledger",
            "entries",
            "list",
            "--limit",
            "100000",
        ],
    ));
    listed
        .as_array()
        .and_then(|entries| entries.last())
        .and_then(|last| last["seq"].as_u64())
        .expect("a ledger with entries")
}

/// A ledger `lab.ledger` in `dir` with a QA person (`qa.key`) and the analyst (`analyst.key`,
/// passphrase in `pass.txt`) who entered the sample week of `samples/lab/` (`root` is the
/// workspace root).
pub fn lab_with_the_sample_week(dir: &Path, root: &Path) {
    std::fs::write(dir.join("pass.txt"), "capture test passphrase\n").expect("passphrase");
    let p = ["--passphrase-file", "pass.txt"];
    for (person, file) in [("q.halden", "qa.key"), ("t.rasmilov", "analyst.key")] {
        let args = [
            "key",
            "new",
            "--person",
            person,
            "--out",
            file,
            "--kdf-memory-mib",
            "8",
        ];
        assize(dir, &[&p[..], &args].concat());
    }
    let l = ["--ledger", "lab.ledger", "--passphrase-file", "pass.txt"];
    let path = |relative: &str| root.join(relative).to_str().expect("path").to_string();
    let (method, policy, batch) = (
        path("policies/permanganate-peroxide.toml"),
        path("policies/lab-policy.toml"),
        path("samples/lab/permanganate-week-48.toml"),
    );
    let steps: [&[&str]; 5] = [
        &[
            "create",
            "--lab",
            "Capture Test Laboratory",
            "--name",
            "Quentin Halden",
            "--key",
            "qa.key",
        ],
        &[
            "person",
            "enrol",
            "--id",
            "t.rasmilov",
            "--name",
            "Teodor Rasmilov",
            "--role",
            "analyst",
            "--from-key-file",
            "analyst.key",
            "--key",
            "qa.key",
        ],
        &["adopt", "--method", &method, "--key", "qa.key"],
        &["adopt", "--policy", &policy, "--key", "qa.key"],
        &["import", &batch, "--key", "analyst.key"],
    ];
    for step in steps {
        assize(dir, &[&l[..], step].concat());
    }
}
