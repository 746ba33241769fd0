//! Throughput and memory of the ledger, each set beside a raw ceiling measured in the same run.
//!
//! Run with `cargo bench -p assize-ledger --bench throughput` (see BENCHMARKS.md). One run:
//!
//! 1. builds a ledger of `ASSIZE_BENCH_ENTRIES` entries (default 100,000) through
//!    [`Ledger::append_record`]: the opening entry, three enrolments, then signed notes of
//!    60–120 bytes from four persons with fixed keys. The first fifth of the notes is timed in
//!    chunks that alternate with chunks of plain rusqlite inserts of the very same rows into a
//!    table with the ledger's columns and indexes (same directory, same pragmas, one row per
//!    `BEGIN IMMEDIATE` transaction), so disk noise falls on both; the rest of the ledger is built the same way and timed on its own;
//! 2. times an integrity replay of the whole ledger against batch Ed25519 verification of as
//!    many signatures split across all cores, and asks `openssl speed` for its single
//!    verification rate when `openssl` is installed;
//! 3. replays a ledger of a tenth of the size and the full ledger in child processes (this
//!    executable run again with `--replay-child PATH`) and reads each child's peak resident
//!    memory (`VmHWM`), which must stay flat because replay streams.
//!
//! Inputs are fixed (keys, note texts), so only the timings and the random ledger ids differ
//! between runs. The benchmark writes only inside a temporary directory under
//! `ASSIZE_BENCH_DIR` (default: cargo's target tmp dir, on the same disk as the build), prints
//! the table on stdout and its progress on stderr, and asserts no timing.

use assize_ledger::merkle::{leaf_hash, MemoryTree};
use assize_ledger::records::{Enrolment, Note};
use assize_ledger::signing::signed_message;
use assize_ledger::{
    Entry, EntryHash, KindRules, Ledger, OpenMode, ReplayOptions, Role, Signer, SystemClock,
};
use ed25519_dalek::{Signature, Signer as _, SigningKey, VerifyingKey};
use rusqlite::{params, Connection, TransactionBehavior};
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::Arc;
use std::time::{Duration, Instant};

type BenchResult<T> = Result<T, Box<dyn std::error::Error>>;

/// Ledger size when `ASSIZE_BENCH_ENTRIES` is not set.
const DEFAULT_ENTRIES: u64 = 100_000;
/// Private argument that turns this executable into a replay child.
const CHILD_FLAG: &str = "--replay-child";
/// First word of the line a replay child prints for its parent.
const CHILD_REPORT: &str = "assize-replay-child";
/// Entry hashes signed to time one signature, the CPU floor of a signed append.
const SIGNING_SAMPLES: u64 = 2_000;
/// Signatures per `verify_batch` call in the ceiling (replay uses the same size).
const CEILING_BATCH: usize = 256;
/// Replay and its ceiling are timed alternately this many times; the best of each counts.
const REPLAY_ROUNDS: usize = 2;
/// Target: durable appends/s through the ledger over the raw SQLite ceiling.
const TARGET_APPEND_RATIO: f64 = 0.85;
/// Target: replay entries/s over batch verifications/s on all cores.
const TARGET_REPLAY_RATIO: f64 = 0.60;
/// Target for "flat": peak memory of the full replay over that of the tenth-size replay.
const TARGET_MEMORY_GROWTH: f64 = 1.10;

/// Invented lab name for the opening entry.
const LAB_NAME: &str = "Example Water Testing Lab";

/// A person of the fixture; the first is the founder (QA), who enrols the others.
struct Person {
    id: &'static str,
    name: &'static str,
    role: Role,
    secret_byte: u8,
}

const PERSONS: [Person; 4] = [
    Person {
        id: "qa-1",
        name: "QA Officer One",
        role: Role::Qa,
        secret_byte: 0x11,
    },
    Person {
        id: "analyst-1",
        name: "Analyst One",
        role: Role::Analyst,
        secret_byte: 0x22,
    },
    Person {
        id: "analyst-2",
        name: "Analyst Two",
        role: Role::Analyst,
        secret_byte: 0x33,
    },
    Person {
        id: "reviewer-1",
        name: "Reviewer One",
        role: Role::Reviewer,
        secret_byte: 0x44,
    },
];

/// Entries written before the first note: the opening entry and one enrolment per other person.
const SETUP_ENTRIES: u64 = PERSONS.len() as u64;

/// Invented bench-log phrases the note texts are made of.
const NOTE_PHRASES: [&str; 16] = [
    "balance checked with 10 g class E2 weight",
    "titrant standardised in triplicate",
    "burette rinsed three times with titrant",
    "end point from first derivative of the pH curve",
    "sample kept at 4 C until analysis",
    "blank repeated after electrode calibration",
    "room at 21.4 C and 38 % relative humidity",
    "duplicates within the repeatability limit",
    "pipette verification due next week",
    "reagent water 0.06 uS/cm",
    "drift below 2 ug/min before start",
    "vial cap replaced, septum pierced",
    "result held pending second review",
    "control chart point inside warning limits",
    "stirrer speed set to 400 rpm",
    "lot number copied from the bottle label",
];

/// What one run does, from the environment.
struct Plan {
    entries: u64,
    measured_notes: u64,
    chunk: u64,
    small_entries: u64,
    base_dir: PathBuf,
}

impl Plan {
    fn from_env() -> BenchResult<Plan> {
        let entries = match std::env::var("ASSIZE_BENCH_ENTRIES") {
            Ok(text) => text
                .trim()
                .parse::<u64>()
                .map_err(|e| format!("ASSIZE_BENCH_ENTRIES={text:?}: {e}"))?,
            Err(_) => DEFAULT_ENTRIES,
        };
        if entries < 100 {
            return Err(format!("ASSIZE_BENCH_ENTRIES must be at least 100, not {entries}").into());
        }
        let base_dir = std::env::var_os("ASSIZE_BENCH_DIR")
            .map(PathBuf::from)
            .unwrap_or_else(|| PathBuf::from(env!("CARGO_TARGET_TMPDIR")));
        let measured_notes = entries / 5;
        Ok(Plan {
            entries,
            measured_notes,
            chunk: (measured_notes / 10).max(1),
            small_entries: entries / 10,
            base_dir,
        })
    }
}

fn main() -> BenchResult<()> {
    let args: Vec<String> = std::env::args().collect();
    if let Some(path) = child_path(&args) {
        return run_replay_child(Path::new(path));
    }
    let plan = Plan::from_env()?;
    print_machine();
    std::fs::create_dir_all(&plan.base_dir)?;
    let dir = tempfile::Builder::new()
        .prefix("assize-bench-")
        .tempdir_in(&plan.base_dir)
        .expect("a temporary directory for the benchmark ledgers");
    print_inputs(&plan, dir.path());
    let signers = fixture_signers();
    let big = dir.path().join("ledger-big.assize");
    let appends = build_measured_ledger(&plan, &big, &dir.path().join("raw.sqlite"), &signers)?;
    let small = dir.path().join("ledger-small.assize");
    build_ledger(&small, plan.small_entries, &signers)?;
    let replays = measure_replay(&big, plan.entries)?;
    let openssl = openssl_verify_rate();
    let peak_small = child_peak_memory(&small)?;
    let peak_big = child_peak_memory(&big)?;
    let memory = MemoryFigures {
        small_entries: plan.small_entries,
        small_kib: peak_small,
        big_entries: plan.entries,
        big_kib: peak_big,
    };
    print_table(&plan, &appends, &replays, openssl, &memory);
    Ok(())
}

/// The ledger path when this process is a replay child; cargo adds `--bench`, so other
/// arguments are ignored.
fn child_path(args: &[String]) -> Option<&str> {
    let flag = args.iter().position(|a| a == CHILD_FLAG)?;
    args.get(flag + 1).map(String::as_str)
}

// ---------------------------------------------------------------------------------------------
// Machine and inputs

fn print_machine() {
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    let model = std::fs::read_to_string("/proc/cpuinfo")
        .ok()
        .and_then(|text| {
            text.lines()
                .find(|l| l.starts_with("model name"))
                .and_then(|l| l.split_once(':'))
                .map(|(_, v)| v.trim().to_string())
        })
        .unwrap_or_else(|| "unknown".into());
    let kernel = std::fs::read_to_string("/proc/sys/kernel/osrelease")
        .map(|k| k.trim().to_string())
        .unwrap_or_else(|_| "unknown".into());
    println!("machine: nproc {cores}, {model}, kernel {kernel}");
    println!("load average at start: {}", load_average());
}

/// The 1-, 5- and 15-minute load averages, to show whether the machine was busy.
fn load_average() -> String {
    std::fs::read_to_string("/proc/loadavg")
        .map(|text| {
            text.split_whitespace()
                .take(3)
                .collect::<Vec<_>>()
                .join(" ")
        })
        .unwrap_or_else(|_| "unknown".into())
}

fn print_inputs(plan: &Plan, dir: &Path) {
    println!(
        "ledger: {} entries ({} setup + {} notes of 60-120 bytes, {} signing persons); small ledger: {} entries",
        plan.entries,
        SETUP_ENTRIES,
        plan.entries - SETUP_ENTRIES,
        PERSONS.len(),
        plan.small_entries
    );
    println!(
        "durable rate: first {} notes, interleaved with raw inserts in chunks of {}; files in {}",
        plan.measured_notes,
        plan.chunk,
        dir.display()
    );
    println!();
}

fn fixture_signers() -> Vec<Signer> {
    PERSONS
        .iter()
        .map(|p| Signer::from_secret(p.id, &[p.secret_byte; 32]))
        .collect()
}

/// splitmix64: a fixed, well-mixed sequence from an index.
fn mix(mut x: u64) -> u64 {
    x = x.wrapping_add(0x9E37_79B9_7F4A_7C15);
    x = (x ^ (x >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    x = (x ^ (x >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    x ^ (x >> 31)
}

/// Note text number `index`: deterministic ASCII, 60 to 120 bytes.
fn note_text(index: u64) -> String {
    let target_len = 60 + (mix(index) % 61) as usize;
    let mut text = format!("Run {index:06}:");
    let mut state = mix(index ^ 0x5EED);
    while text.len() < target_len {
        state = mix(state);
        text.push(' ');
        text.push_str(NOTE_PHRASES[(state % NOTE_PHRASES.len() as u64) as usize]);
        text.push(';');
    }
    text.truncate(120);
    text
}

// ---------------------------------------------------------------------------------------------
// 1. Durable appends against the raw ceiling

/// Timings of the append phase, with the CPU time and writes behind the timed part.
struct AppendFigures {
    measured: u64,
    ledger: Duration,
    raw: Duration,
    ledger_usage: Option<Usage>,
    raw_usage: Option<Usage>,
    rest: u64,
    rest_time: Duration,
    signing: Duration,
}

/// CPU time of the calling thread and bytes this process has sent towards storage (Linux
/// `/proc`), to tell whether a gap between ledger and ceiling is computing or writing.
#[derive(Clone, Copy, Default)]
struct Usage {
    cpu_ns: u64,
    written_bytes: u64,
}

impl Usage {
    fn now() -> Option<Usage> {
        let schedstat = std::fs::read_to_string("/proc/thread-self/schedstat").ok()?;
        let io = std::fs::read_to_string("/proc/self/io").ok()?;
        let written = io.lines().find_map(|l| l.strip_prefix("write_bytes:"))?;
        Some(Usage {
            cpu_ns: schedstat.split_whitespace().next()?.parse().ok()?,
            written_bytes: written.trim().parse().ok()?,
        })
    }

    /// Adds what happened between two readings to a running total.
    fn accumulate(
        total: Option<Usage>,
        before: Option<Usage>,
        after: Option<Usage>,
    ) -> Option<Usage> {
        let (total, before, after) = (total?, before?, after?);
        Some(Usage {
            cpu_ns: total.cpu_ns + after.cpu_ns.saturating_sub(before.cpu_ns),
            written_bytes: total.written_bytes
                + after.written_bytes.saturating_sub(before.written_bytes),
        })
    }
}

/// Opens a ledger and enrols every fixture person after the founder.
fn create_ledger(path: &Path, signers: &[Signer]) -> BenchResult<Ledger> {
    let founder = &signers[0];
    let (mut ledger, _) = Ledger::create(
        path,
        LAB_NAME,
        PERSONS[0].name,
        founder,
        KindRules::core(),
        Arc::new(SystemClock),
    )?;
    for (person, signer) in PERSONS.iter().zip(signers).skip(1) {
        let enrolment = Enrolment {
            person: person.id.into(),
            name: person.name.into(),
            role: person.role,
            public_key: signer.public_key(),
        };
        ledger.append_record(&enrolment, founder)?;
    }
    Ok(ledger)
}

/// Appends note number `index`, signed by the persons in turn.
fn append_note(ledger: &mut Ledger, signers: &[Signer], index: u64) -> BenchResult<Entry> {
    let signer = &signers[(index % signers.len() as u64) as usize];
    let note = Note {
        text: note_text(index),
    };
    ledger
        .append_record(&note, signer)
        .map_err(|e| format!("appending note {index}: {e}").into())
}

/// Builds a ledger of `entries` entries without timing it.
fn build_ledger(path: &Path, entries: u64, signers: &[Signer]) -> BenchResult<()> {
    eprintln!("building the {entries}-entry ledger ...");
    let mut ledger = create_ledger(path, signers)?;
    for index in 0..entries - SETUP_ENTRIES {
        append_note(&mut ledger, signers, index)?;
    }
    Ok(())
}

/// Builds the full ledger, timing the first notes in chunks alternating with raw inserts.
fn build_measured_ledger(
    plan: &Plan,
    ledger_path: &Path,
    raw_path: &Path,
    signers: &[Signer],
) -> BenchResult<AppendFigures> {
    eprintln!("building the {}-entry ledger ...", plan.entries);
    let mut ledger = create_ledger(ledger_path, signers)?;
    let mut raw = RawTable::create(raw_path)?;
    let notes = plan.entries - SETUP_ENTRIES;
    let measured = plan.measured_notes.min(notes);
    let (mut ledger_time, mut raw_time) = (Duration::ZERO, Duration::ZERO);
    let (mut ledger_usage, mut raw_usage) = (Some(Usage::default()), Some(Usage::default()));
    let mut next = 0;
    while next < measured {
        let end = (next + plan.chunk).min(measured);
        let before = Usage::now();
        let started = Instant::now();
        let appended = (next..end)
            .map(|i| append_note(&mut ledger, signers, i))
            .collect::<BenchResult<Vec<_>>>()?;
        ledger_time += started.elapsed();
        let between = Usage::now();
        ledger_usage = Usage::accumulate(ledger_usage, before, between);
        raw_time += raw.insert_rows(&appended)?;
        raw_usage = Usage::accumulate(raw_usage, between, Usage::now());
        next = end;
    }
    let started = Instant::now();
    for index in measured..notes {
        append_note(&mut ledger, signers, index)?;
    }
    Ok(AppendFigures {
        measured,
        ledger: ledger_time,
        raw: raw_time,
        ledger_usage,
        raw_usage,
        rest: notes - measured,
        rest_time: started.elapsed(),
        signing: time_one_signature(&signers[1]),
    })
}

/// Mean time of one entry signature, which every signed append spends under the write lock.
fn time_one_signature(signer: &Signer) -> Duration {
    let hashes: Vec<EntryHash> = (0..SIGNING_SAMPLES)
        .map(|i| EntryHash::digest(&i.to_le_bytes()))
        .collect();
    let started = Instant::now();
    let signed = hashes
        .iter()
        .map(|h| signer.sign_entry(h)[0])
        .fold(0u8, |a, b| a ^ b);
    let elapsed = started.elapsed();
    std::hint::black_box(signed);
    elapsed / SIGNING_SAMPLES as u32
}

/// The raw ceiling: the very rows the ledger stored, inserted by plain rusqlite into tables
/// with the ledger's columns and indexes (no guard triggers), one entry per durable
/// `BEGIN IMMEDIATE` transaction with the ledger's pragmas: its row, and the Merkle tree nodes
/// its leaf completes (computed in memory, the same rows the ledger writes). What separates the
/// two is exactly the ledger's own work: reading the head, judging authority, hashing, signing,
/// reading the left siblings of the new tree nodes, the guards.
struct RawTable {
    conn: Connection,
    tree: MemoryTree,
}

/// The ledger's table and index layout (kept in step with `SCHEMA` in ledger/src/store.rs).
const RAW_SCHEMA: &str = "
CREATE TABLE entries (
    seq INTEGER PRIMARY KEY, hash BLOB NOT NULL, prev_hash BLOB NOT NULL,
    record_time INTEGER NOT NULL, author TEXT NOT NULL, kind TEXT NOT NULL,
    refs BLOB NOT NULL, body BLOB NOT NULL, signer BLOB, signature BLOB
);
CREATE INDEX entries_by_hash   ON entries(hash);
CREATE INDEX entries_by_kind   ON entries(kind, seq);
CREATE INDEX entries_by_author ON entries(author, seq);
CREATE TABLE merkle_nodes (
    level INTEGER NOT NULL, idx INTEGER NOT NULL, hash BLOB NOT NULL,
    PRIMARY KEY (level, idx)
) WITHOUT ROWID;
";

impl RawTable {
    fn create(path: &Path) -> BenchResult<RawTable> {
        let conn = Connection::open(path)?;
        let journal: String = conn.query_row("PRAGMA journal_mode = WAL", [], |r| r.get(0))?;
        if !journal.eq_ignore_ascii_case("wal") {
            return Err(format!("raw table: journal mode is {journal}, not wal").into());
        }
        conn.pragma_update(None, "synchronous", "FULL")?;
        conn.execute_batch(RAW_SCHEMA)?;
        Ok(RawTable {
            conn,
            tree: MemoryTree::new(),
        })
    }

    /// Inserts each entry's stored values, each in its own `BEGIN IMMEDIATE` transaction;
    /// returns the time the inserts took.
    fn insert_rows(&mut self, entries: &[Entry]) -> BenchResult<Duration> {
        let started = Instant::now();
        for entry in entries {
            let refs: Vec<u8> = entry.references.iter().flat_map(|r| r.0).collect();
            let tx = self
                .conn
                .transaction_with_behavior(TransactionBehavior::Immediate)?;
            tx.prepare_cached(
                "INSERT INTO entries (seq, hash, prev_hash, record_time, author, kind, refs, body, signer, signature)
                 VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10)",
            )?
            .execute(params![
                entry.seq as i64,
                entry.hash.0.as_slice(),
                entry.prev_hash.0.as_slice(),
                entry.record_time.0,
                entry.author,
                entry.kind,
                refs,
                entry.body,
                entry.signer.map(|k| k.0.to_vec()),
                entry.signature.map(|s| s.to_vec()),
            ])?;
            for node in self.tree.push_leaf_hash(leaf_hash(&entry.hash.0)) {
                tx.prepare_cached(
                    "INSERT INTO merkle_nodes (level, idx, hash) VALUES (?1, ?2, ?3)",
                )?
                .execute(params![
                    i64::from(node.level),
                    node.index as i64,
                    node.hash.as_slice()
                ])?;
            }
            tx.commit()?;
        }
        Ok(started.elapsed())
    }
}

// ---------------------------------------------------------------------------------------------
// 2. Integrity replay against batch verification

/// Best timings of the replay phase.
struct ReplayFigures {
    entries: u64,
    replay: Duration,
    signatures: usize,
    ceiling: Duration,
    threads: usize,
}

fn measure_replay(path: &Path, entries: u64) -> BenchResult<ReplayFigures> {
    let threads = std::thread::available_parallelism().map_or(1, |n| n.get());
    eprintln!("signing {entries} messages for the verification ceiling ...");
    let batch = SignedBatch::generate(entries as usize, threads);
    let (mut replay, mut ceiling) = (Duration::MAX, Duration::MAX);
    for round in 1..=REPLAY_ROUNDS {
        eprintln!("replay and ceiling, round {round} of {REPLAY_ROUNDS} ...");
        replay = replay.min(time_replay(path, entries)?);
        ceiling = ceiling.min(batch.verify_across_threads(threads)?);
    }
    Ok(ReplayFigures {
        entries,
        replay,
        signatures: batch.messages.len(),
        ceiling,
        threads,
    })
}

fn open_read_only(path: &Path) -> BenchResult<Ledger> {
    let ledger = Ledger::open(
        path,
        OpenMode::ReadOnly,
        KindRules::core(),
        Arc::new(SystemClock),
    )?;
    Ok(ledger)
}

/// Opens and replays the ledger; fails unless it is intact and complete.
fn time_replay(path: &Path, expected_entries: u64) -> BenchResult<Duration> {
    let started = Instant::now();
    let ledger = open_read_only(path)?;
    let report = ledger.replay(&ReplayOptions::default())?;
    let elapsed = started.elapsed();
    if !report.intact() || report.entries != expected_entries {
        return Err(format!(
            "replay of {} found {} problems in {} entries (expected {expected_entries}); first: {:?}",
            path.display(),
            report.problems.len() + report.problems_not_listed as usize,
            report.entries,
            report.problems.first()
        )
        .into());
    }
    Ok(elapsed)
}

/// Signatures of entry-shaped (48-byte) messages by the fixture keys, ready for batch checks.
struct SignedBatch {
    messages: Vec<[u8; 48]>,
    signatures: Vec<Signature>,
    keys: Vec<VerifyingKey>,
}

impl SignedBatch {
    fn generate(count: usize, threads: usize) -> SignedBatch {
        let signing_keys: Vec<SigningKey> = PERSONS
            .iter()
            .map(|p| SigningKey::from_bytes(&[p.secret_byte; 32]))
            .collect();
        let messages: Vec<[u8; 48]> = (0..count as u64)
            .map(|i| signed_message(&EntryHash::digest(&i.to_be_bytes())))
            .collect();
        let key_of = |i: usize| &signing_keys[i % signing_keys.len()];
        let share = count.div_ceil(threads).max(1);
        let signatures = std::thread::scope(|scope| {
            let workers: Vec<_> = messages
                .chunks(share)
                .enumerate()
                .map(|(part, chunk)| {
                    scope.spawn(move || {
                        let offset = part * share;
                        let sign = |(i, m): (usize, &[u8; 48])| key_of(offset + i).sign(m);
                        chunk.iter().enumerate().map(sign).collect::<Vec<_>>()
                    })
                })
                .collect();
            workers
                .into_iter()
                .flat_map(|w| w.join().expect("a signing thread does not panic"))
                .collect()
        });
        let keys = (0..count).map(|i| key_of(i).verifying_key()).collect();
        SignedBatch {
            messages,
            signatures,
            keys,
        }
    }

    /// Verifies every signature in batches of [`CEILING_BATCH`], one equal share per thread.
    fn verify_across_threads(&self, threads: usize) -> BenchResult<Duration> {
        let message_refs: Vec<&[u8]> = self.messages.iter().map(|m| m.as_slice()).collect();
        let share = self.messages.len().div_ceil(threads).max(1);
        let started = Instant::now();
        let all_passed = std::thread::scope(|scope| {
            let workers: Vec<_> = (0..self.messages.len())
                .step_by(share)
                .map(|start| {
                    let end = (start + share).min(self.messages.len());
                    let messages = &message_refs[start..end];
                    let signatures = &self.signatures[start..end];
                    let keys = &self.keys[start..end];
                    scope.spawn(move || verify_share(messages, signatures, keys))
                })
                .collect();
            workers
                .into_iter()
                .all(|w| w.join().expect("a verifying thread does not panic"))
        });
        let elapsed = started.elapsed();
        if !all_passed {
            return Err("the ceiling's batch verification failed".into());
        }
        Ok(elapsed)
    }
}

fn verify_share(messages: &[&[u8]], signatures: &[Signature], keys: &[VerifyingKey]) -> bool {
    messages
        .chunks(CEILING_BATCH)
        .zip(signatures.chunks(CEILING_BATCH))
        .zip(keys.chunks(CEILING_BATCH))
        .all(|((m, s), k)| ed25519_dalek::verify_batch(m, s, k).is_ok())
}

/// Single verifications per second reported by `openssl speed`, if openssl runs here.
fn openssl_verify_rate() -> Option<f64> {
    eprintln!("running openssl speed -seconds 2 ed25519 ...");
    let output = Command::new("openssl")
        .args(["speed", "-seconds", "2", "ed25519"])
        .output()
        .ok()?;
    if !output.status.success() {
        return None;
    }
    parse_openssl_verify_rate(&String::from_utf8_lossy(&output.stdout))
}

/// The last column (verify/s) of the Ed25519 line of `openssl speed` output.
fn parse_openssl_verify_rate(output: &str) -> Option<f64> {
    let line = output.lines().find(|l| l.contains("Ed25519"))?;
    line.split_whitespace().last()?.parse().ok()
}

// ---------------------------------------------------------------------------------------------
// 3. Peak memory of a replay, in a child process

/// Peak resident memory of replays of two ledger sizes.
struct MemoryFigures {
    small_entries: u64,
    small_kib: u64,
    big_entries: u64,
    big_kib: u64,
}

/// Runs in the child: replay, check, print the peak resident set.
fn run_replay_child(path: &Path) -> BenchResult<()> {
    let ledger = open_read_only(path)?;
    let report = ledger.replay(&ReplayOptions::default())?;
    if !report.intact() {
        return Err(format!("replay child: {} is not intact", path.display()).into());
    }
    let peak = peak_resident_kib()?;
    println!(
        "{CHILD_REPORT} entries={} vm_hwm_kib={peak}",
        report.entries
    );
    Ok(())
}

/// `VmHWM` of this process, in KiB.
fn peak_resident_kib() -> BenchResult<u64> {
    let status = std::fs::read_to_string("/proc/self/status")?;
    let line = status
        .lines()
        .find(|l| l.starts_with("VmHWM:"))
        .ok_or("no VmHWM line in /proc/self/status")?;
    let kib = line
        .trim_start_matches("VmHWM:")
        .trim()
        .trim_end_matches("kB")
        .trim()
        .parse()?;
    Ok(kib)
}

/// Replays `path` in a child process and returns the child's peak resident memory in KiB.
fn child_peak_memory(path: &Path) -> BenchResult<u64> {
    eprintln!("replaying {} in a child process ...", path.display());
    let output = Command::new(std::env::current_exe()?)
        .arg(CHILD_FLAG)
        .arg(path)
        .output()?;
    let stdout = String::from_utf8_lossy(&output.stdout);
    if !output.status.success() {
        let stderr = String::from_utf8_lossy(&output.stderr);
        return Err(format!("replay child failed ({}): {stderr}", output.status).into());
    }
    let peak = stdout
        .lines()
        .find(|l| l.starts_with(CHILD_REPORT))
        .and_then(|l| {
            l.split_whitespace()
                .find_map(|w| w.strip_prefix("vm_hwm_kib="))
        })
        .ok_or_else(|| format!("replay child printed no peak: {stdout:?}"))?;
    Ok(peak.parse()?)
}

// ---------------------------------------------------------------------------------------------
// The table

fn print_table(
    plan: &Plan,
    appends: &AppendFigures,
    replays: &ReplayFigures,
    openssl: Option<f64>,
    memory: &MemoryFigures,
) {
    let append_rate = per_second(appends.measured, appends.ledger);
    let raw_rate = per_second(appends.measured, appends.raw);
    let replay_rate = per_second(replays.entries, replays.replay);
    let verify_rate = per_second(replays.signatures as u64, replays.ceiling);
    let memory_growth = memory.big_kib as f64 / memory.small_kib as f64;
    print_row(&["figure", "assize", "ceiling", "ratio", "target", "verdict"]);
    print_row(&[
        &format!("durable appends/s, first {} notes", appends.measured),
        &grouped(append_rate),
        &grouped(raw_rate),
        &format!("{:.2}", append_rate / raw_rate),
        &format!(">= {TARGET_APPEND_RATIO:.2}"),
        verdict(append_rate / raw_rate >= TARGET_APPEND_RATIO),
    ]);
    print_usage_rows(appends);
    print_row(&[
        "  Ed25519 signing us per append",
        &format!("{:.1}", appends.signing.as_secs_f64() * 1e6),
        "-",
        "-",
        "-",
        "info",
    ]);
    print_row(&[
        &format!("durable appends/s, other {} notes", appends.rest),
        &grouped(per_second(appends.rest, appends.rest_time)),
        "-",
        "-",
        "-",
        "info",
    ]);
    print_row(&[
        &format!("replay entries/s, {} entries", replays.entries),
        &grouped(replay_rate),
        &grouped(verify_rate),
        &format!("{:.2}", replay_rate / verify_rate),
        &format!(">= {TARGET_REPLAY_RATIO:.2}"),
        verdict(replay_rate / verify_rate >= TARGET_REPLAY_RATIO),
    ]);
    print_row(&[
        "openssl speed ed25519 verify/s, 1 core",
        "-",
        &openssl.map_or("not available".into(), grouped),
        "-",
        "-",
        "info",
    ]);
    print_row(&[
        &format!("replay peak memory, {} entries", memory.small_entries),
        &mebibytes(memory.small_kib),
        "-",
        "-",
        "-",
        "info",
    ]);
    print_row(&[
        &format!("replay peak memory, {} entries", memory.big_entries),
        &mebibytes(memory.big_kib),
        "-",
        &format!("{memory_growth:.2}"),
        &format!("flat, <= {TARGET_MEMORY_GROWTH:.2}"),
        verdict(memory_growth <= TARGET_MEMORY_GROWTH),
    ]);
    println!();
    println!(
        "ceilings: the same rows (each entry and the tree nodes its leaf completes) inserted by plain rusqlite into the ledger's tables and indexes, \
         one per BEGIN IMMEDIATE transaction (WAL, synchronous=FULL), interleaved in chunks of {}; ed25519_dalek::verify_batch in \
         batches of {CEILING_BATCH} on {} threads. Replay and ceiling: best of {REPLAY_ROUNDS}. \
         Memory ratio: {} entries over {} entries.",
        plan.chunk, replays.threads, memory.big_entries, memory.small_entries
    );
    println!("load average at end: {}", load_average());
}

/// CPU time and bytes written per append in the timed chunks, when /proc provides them.
fn print_usage_rows(appends: &AppendFigures) {
    let (Some(ledger), Some(raw)) = (appends.ledger_usage, appends.raw_usage) else {
        return;
    };
    let per_append = |total: u64| total as f64 / appends.measured.max(1) as f64;
    print_row(&[
        "  CPU us per append (timed notes)",
        &format!("{:.1}", per_append(ledger.cpu_ns) / 1000.0),
        &format!("{:.1}", per_append(raw.cpu_ns) / 1000.0),
        "-",
        "-",
        "info",
    ]);
    print_row(&[
        "  KiB sent to storage per append",
        &format!("{:.1}", per_append(ledger.written_bytes) / 1024.0),
        &format!("{:.1}", per_append(raw.written_bytes) / 1024.0),
        "-",
        "-",
        "info",
    ]);
}

fn print_row(cells: &[&str; 6]) {
    println!(
        "{:<40} {:>12} {:>14} {:>6}  {:<14} {}",
        cells[0], cells[1], cells[2], cells[3], cells[4], cells[5]
    );
}

fn verdict(met: bool) -> &'static str {
    if met {
        "met"
    } else {
        "MISSED"
    }
}

fn per_second(count: u64, elapsed: Duration) -> f64 {
    count as f64 / elapsed.as_secs_f64().max(f64::MIN_POSITIVE)
}

/// A rate rounded to a whole number with thousands separated by commas.
fn grouped(rate: f64) -> String {
    let digits = format!("{:.0}", rate.max(0.0));
    let mut out = String::new();
    for (i, digit) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i) % 3 == 0 {
            out.push(',');
        }
        out.push(digit);
    }
    out
}

fn mebibytes(kib: u64) -> String {
    format!("{:.1} MiB", kib as f64 / 1024.0)
}
