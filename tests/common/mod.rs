//! Shared fixtures for the cross-crate tests: a fresh ledger in a temp dir with fixed test keys,
//! and the paths of the binaries under test.
#![allow(dead_code)]

use assize_ledger::records::Enrolment;
use assize_ledger::replay::{IntegrityReport, ReplayOptions};
use assize_ledger::{KindRules, Ledger, OpenMode, Role, Signer, SystemClock};
use std::path::{Path, PathBuf};
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
