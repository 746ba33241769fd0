//! Full validation of a large lab ledger (integrity, recompute and every rule, in one streaming
//! read) beside the integrity replay of the same ledger, measured in the same run on the same
//! machine, with the peak memory of each at two ledger sizes.
//!
//! Run with `cargo bench -p assize-verify --bench validate` (see BENCHMARKS.md). One run:
//!
//! 1. builds, through the public API only, a realistic lab ledger of about
//!    `ASSIZE_BENCH_ENTRIES` entries (default 1,000,000) with `support/lab_ledger.rs`: every
//!    entry recorded within minutes of what it records, balances checked every morning, so that
//!    a validation finds (almost) nothing and measures the validator, not the writing of
//!    findings;
//! 2. times, over `ASSIZE_BENCH_ROUNDS` rounds (default 3) that alternate their order: (a) the
//!    integrity replay alone (`Ledger::open` read-only + `replay`) and (b) the full validation
//!    (`validate::validate` over the whole ledger); prints the best of each, the ratio (b) / (a)
//!    from those and the median of the same ratio taken within each round, against the target
//!    ≤ 1.5, and the findings of the validation by code. For information it also times (c)
//!    `validate::validate_in_memory`, the same rules over a catalog of the whole ledger, after
//!    (a) and (b) in each round;
//! 3. builds a second ledger of a tenth of the size and runs (a), (b) and (c) on each ledger in
//!    a child process (this executable again, with `--memory-child PHASE PATH`), reading each
//!    child's peak resident memory (`VmHWM`); flat means large / small ≤ 1.10;
//! 4. times (d) `explain::explain` of one result on the large ledger, by entry and by run id,
//!    against the target of 100 ms;
//! 5. exports (e) the evidence bundle of a middle result from a 10,000-entry ledger, the
//!    tenth-size one and the large one, and prints each bundle's size, entries and longest
//!    proof (they must grow with the logarithm of the ledger, not with it).
//!
//! For profiling, `--build-only ENTRIES PATH` builds one ledger and keeps it,
//! `--memory-child PHASE PATH` then runs one phase on it, and `--explain-only PATH` times
//! `explain` on it.
//!
//! Inputs are fixed (keys, readings from a seeded generator, a clock the builder sets), so only
//! the timings and the random ledger ids differ between runs. It writes only inside a temporary
//! directory under `ASSIZE_BENCH_DIR` (default: cargo's target tmp dir), prints the table on
//! stdout and its progress on stderr, and asserts no timing: every replay must be intact and
//! count every entry, nothing more.

#[path = "support/lab_ledger.rs"]
mod lab_ledger;
#[path = "support/machine.rs"]
mod machine;

use assize_ledger::{FixedClock, IntegrityReport, Ledger, OpenMode, ReplayOptions, Timestamp};
use assize_verify::findings::Code;
use assize_verify::validate::{validate, validate_in_memory, Scope, Validation};
use lab_ledger::{
    build_ledger, BenchResult, Built, LedgerSpec, ASSAYS_PER_TITRANT, FIRST_DAY_MICROS, REPLICATES,
};
use machine::{file_mib, load_average, print_machine, Cost};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::Arc;
use std::time::Duration;

/// Ledger size when `ASSIZE_BENCH_ENTRIES` is not set.
const DEFAULT_ENTRIES: u64 = 1_000_000;
/// The smallest ledger worth building (its tenth still has a few titrants).
const MIN_ENTRIES: u64 = 1_000;
/// Rounds when `ASSIZE_BENCH_ROUNDS` is not set.
const DEFAULT_ROUNDS: usize = 3;
/// Target: the full validation over the integrity replay alone.
const TARGET_RATIO: f64 = 1.5;
/// Target for "flat": peak memory at the full size over that at a tenth of it.
const TARGET_MEMORY_GROWTH: f64 = 1.10;
/// Private argument that turns this executable into a memory child.
const CHILD_FLAG: &str = "--memory-child";
/// Private argument that only builds a ledger and keeps it (for profiling a phase on it with
/// `--memory-child`): `--build-only ENTRIES PATH`.
const BUILD_FLAG: &str = "--build-only";
/// Private argument that only times `explain` on a kept ledger: `--explain-only PATH`.
const EXPLAIN_FLAG: &str = "--explain-only";
/// First word of the line a memory child prints for its parent.
const CHILD_REPORT: &str = "assize-validate-child";

/// What one run does, from the environment.
struct Plan {
    entries: u64,
    rounds: usize,
    base_dir: PathBuf,
}

impl Plan {
    fn from_env() -> BenchResult<Plan> {
        let entries = env_number("ASSIZE_BENCH_ENTRIES", DEFAULT_ENTRIES)?;
        if entries < MIN_ENTRIES {
            return Err(format!(
                "ASSIZE_BENCH_ENTRIES must be at least {MIN_ENTRIES}, not {entries}"
            )
            .into());
        }
        let rounds = env_number("ASSIZE_BENCH_ROUNDS", DEFAULT_ROUNDS as u64)?;
        if rounds == 0 {
            return Err("ASSIZE_BENCH_ROUNDS must be at least 1".into());
        }
        let base_dir = std::env::var_os("ASSIZE_BENCH_DIR")
            .map(PathBuf::from)
            .unwrap_or_else(|| PathBuf::from(env!("CARGO_TARGET_TMPDIR")));
        Ok(Plan {
            entries,
            rounds: rounds as usize,
            base_dir,
        })
    }
}

/// A whole number from the environment, or `default` when the variable is not set.
fn env_number(name: &str, default: u64) -> BenchResult<u64> {
    match std::env::var(name) {
        Ok(text) => Ok(text
            .trim()
            .parse::<u64>()
            .map_err(|e| format!("{name}={text:?}: {e}"))?),
        Err(_) => Ok(default),
    }
}

/// The phases measured.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Phase {
    /// (a) `Ledger::open` read-only + `replay`.
    Integrity,
    /// (b) `Ledger::open` read-only + `validate::validate` over the whole ledger.
    Validation,
    /// (c) For information: `validate::validate_in_memory` over the whole ledger.
    InMemory,
}

impl Phase {
    const ALL: [Phase; 3] = [Phase::Integrity, Phase::Validation, Phase::InMemory];

    fn name(self) -> &'static str {
        match self {
            Phase::Integrity => "integrity",
            Phase::Validation => "validation",
            Phase::InMemory => "in-memory",
        }
    }

    fn parse(text: &str) -> Option<Phase> {
        Phase::ALL.into_iter().find(|p| p.name() == text)
    }

    /// Opens the ledger at `path` and runs the phase; fails unless the replay is intact and
    /// counts `expected_entries` (any count when `None`). Returns the validation, if any.
    fn run(self, path: &Path, expected_entries: Option<u64>) -> BenchResult<Option<Validation>> {
        let ledger = open_read_only(path)?;
        let options = ReplayOptions::default();
        let (report, validation) = match self {
            Phase::Integrity => (ledger.replay(&options)?, None),
            Phase::Validation | Phase::InMemory => {
                let validate_with = match self {
                    Phase::Validation => validate,
                    _ => validate_in_memory,
                };
                let validation = validate_with(&ledger, &Scope::Ledger, &options, &mut |_| {})?;
                (validation.integrity.clone(), Some(validation))
            }
        };
        check_intact(&report, expected_entries.unwrap_or(report.entries))?;
        Ok(validation)
    }
}

fn main() -> BenchResult<()> {
    let args: Vec<String> = std::env::args().collect();
    if let Some(position) = args.iter().position(|a| a == CHILD_FLAG) {
        let phase = args.get(position + 1).and_then(|p| Phase::parse(p));
        let path = args.get(position + 2);
        let (Some(phase), Some(path)) = (phase, path) else {
            return Err(format!("usage: {CHILD_FLAG} integrity|validation|in-memory PATH").into());
        };
        return run_memory_child(phase, Path::new(path));
    }
    if let Some(position) = args.iter().position(|a| a == EXPLAIN_FLAG) {
        let path = args
            .get(position + 1)
            .ok_or(format!("usage: {EXPLAIN_FLAG} PATH"))?;
        print_explain(&measure_explain(Path::new(path))?);
        return Ok(());
    }
    if let Some(position) = args.iter().position(|a| a == BUILD_FLAG) {
        let entries = args.get(position + 1).and_then(|n| n.parse::<u64>().ok());
        let path = args.get(position + 2);
        let (Some(entries), Some(path)) = (entries, path) else {
            return Err(format!("usage: {BUILD_FLAG} ENTRIES PATH").into());
        };
        let spec = LedgerSpec::realistic_with_entries(entries.max(MIN_ENTRIES));
        let built = build_ledger(&spec, Path::new(path))?;
        print_ledger("ledger", &spec, &built, Path::new(path));
        return Ok(());
    }
    let plan = Plan::from_env()?;
    print_machine();
    std::fs::create_dir_all(&plan.base_dir)?;
    let dir = tempfile::Builder::new()
        .prefix("assize-validate-bench-")
        .tempdir_in(&plan.base_dir)
        .expect("a temporary directory for the benchmark ledgers");

    let big_spec = LedgerSpec::realistic_with_entries(plan.entries);
    let big_path = dir.path().join("full.assize");
    let big = build_ledger(&big_spec, &big_path)?;
    print_ledger("ledger", &big_spec, &big, &big_path);
    println!();
    let timings = measure(&big_path, big.entries, plan.rounds)?;
    let explained = measure_explain(&big_path)?;
    print_findings("(b) full validation", &timings.validation);
    print_findings("(c) in-memory validation", &timings.in_memory_validation);

    let small_spec = LedgerSpec::realistic_with_entries(plan.entries / 10);
    let small_path = dir.path().join("tenth.assize");
    let small = build_ledger(&small_spec, &small_path)?;
    print_ledger("tenth-size ledger", &small_spec, &small, &small_path);
    let mut peaks = Vec::new();
    for phase in Phase::ALL {
        peaks.push([
            child_peak_memory(phase, &small_path)?,
            child_peak_memory(phase, &big_path)?,
        ]);
    }
    let memory = Memory {
        small_entries: small.entries,
        big_entries: big.entries,
        integrity: peaks[0],
        validation: peaks[1],
        in_memory: peaks[2],
    };
    let ten_thousand_path = dir.path().join("ten-thousand.assize");
    let ten_thousand_spec = LedgerSpec::realistic_with_entries(10_000);
    let ten_thousand = build_ledger(&ten_thousand_spec, &ten_thousand_path)?;
    let bundles = [
        measure_bundle(&ten_thousand_path, ten_thousand.entries)?,
        measure_bundle(&small_path, small.entries)?,
        measure_bundle(&big_path, big.entries)?,
    ];
    println!();
    print_table(&timings, &memory);
    print_explain(&explained);
    print_bundles(&bundles);
    Ok(())
}

/// One evidence bundle of a middle result.
struct BundleSize {
    ledger_entries: u64,
    bytes: usize,
    entries: usize,
    longest_proof: usize,
}

/// Exports and opens the evidence bundle of the result in the middle of the ledger.
fn measure_bundle(path: &Path, ledger_entries: u64) -> BenchResult<BundleSize> {
    use assize_verify::evidence::{export, open};
    use assize_verify::explain::Target;
    let mut ledger = open_read_only(path)?;
    // The first entry from the middle on that belongs to a run.
    let signer = lab_ledger::qa_signer();
    let middle = ledger_entries / 2;
    let made = (middle..middle + 200)
        .find_map(|seq| export(&mut ledger, &Target::Entry(seq), &signer).ok())
        .ok_or("no run entry near the middle of the ledger")?;
    let opened = open(&made.bytes)?;
    Ok(BundleSize {
        ledger_entries,
        bytes: made.bytes.len(),
        entries: opened.bundle.entries.len(),
        longest_proof: opened.bundle.longest_proof,
    })
}

fn print_bundles(bundles: &[BundleSize]) {
    let mut bundles: Vec<&BundleSize> = bundles.iter().collect();
    bundles.sort_by_key(|b| b.ledger_entries);
    for b in &bundles {
        print_row(&[
            &format!(
                "(e) evidence bundle of a middle result, {} entries",
                b.ledger_entries
            ),
            &format!("{:.1} KiB", b.bytes as f64 / 1024.0),
            "-",
            &format!("{} entries", b.entries),
            "-",
            &format!("proofs <= {} hashes", b.longest_proof),
            "-",
        ]);
    }
    if let (Some(first), Some(last)) = (bundles.first(), bundles.last()) {
        println!(
            "bundles: {}x the ledger entries, {:.2}x the bundle bytes (log2 of the sizes: {:.1} and {:.1})",
            last.ledger_entries / first.ledger_entries.max(1),
            last.bytes as f64 / first.bytes.max(1) as f64,
            (first.ledger_entries as f64).log2(),
            (last.ledger_entries as f64).log2()
        );
    }
}

/// How long `explain` takes on the large ledger, opening it each time, best of a few.
struct ExplainTimes {
    /// Entries an explanation shows.
    entries_shown: usize,
    /// By the sequence number of one of the last run's entries (index reads only).
    by_entry: Duration,
    /// By the id of the last run recorded.
    by_id_newest: Duration,
    /// By the id of a run in the middle of the ledger.
    by_id_middle: Duration,
}

/// Target for explaining one value.
const TARGET_EXPLAIN: Duration = Duration::from_millis(100);
/// Timed tries of each explain.
const EXPLAIN_TRIES: usize = 5;

fn measure_explain(path: &Path) -> BenchResult<ExplainTimes> {
    use assize_verify::explain::{explain, Explanation, Target};
    let explain_once = |target: &Target| -> BenchResult<(Duration, Explanation)> {
        let started = std::time::Instant::now();
        let mut ledger = open_read_only(path)?;
        let explanation = explain(&mut ledger, target)?;
        Ok((started.elapsed(), explanation))
    };
    let best = |target: &Target| -> BenchResult<(Duration, Explanation)> {
        let mut best = explain_once(target)?;
        for _ in 1..EXPLAIN_TRIES {
            let next = explain_once(target)?;
            if next.0 < best.0 {
                best = next;
            }
        }
        Ok(best)
    };
    let head = open_read_only(path)?.head()?.ok_or("empty ledger")?.seq;
    // The last entries belong to the newest assay.
    let (by_entry, newest) = best(&Target::Entry(head))?;
    let (by_id_newest, _) = best(&Target::RunId(newest.run.id.clone()))?;
    let (_, middle) = explain_once(&Target::Entry(head / 2))
        .or_else(|_| explain_once(&Target::Entry(head / 2 + 1)))?;
    let (by_id_middle, _) = best(&Target::RunId(middle.run.id.clone()))?;
    eprintln!(
        "explain: run {} by entry {head}: {:.1} ms; by id {:.1} ms; run {} by id {:.1} ms",
        newest.run.id,
        by_entry.as_secs_f64() * 1e3,
        by_id_newest.as_secs_f64() * 1e3,
        middle.run.id,
        by_id_middle.as_secs_f64() * 1e3
    );
    Ok(ExplainTimes {
        entries_shown: newest.entries.len(),
        by_entry,
        by_id_newest,
        by_id_middle,
    })
}

fn print_explain(e: &ExplainTimes) {
    let ms = |d: Duration| format!("{:.1} ms", d.as_secs_f64() * 1e3);
    let target = format!("< {} ms", TARGET_EXPLAIN.as_millis());
    for (label, took) in [
        ("(d) explain the newest result, by entry", e.by_entry),
        ("(d) explain the newest result, by run id", e.by_id_newest),
        ("(d) explain a middle result, by run id", e.by_id_middle),
    ] {
        print_row(&[
            label,
            &ms(took),
            "-",
            &format!("{} entries", e.entries_shown),
            "-",
            &target,
            verdict(took < TARGET_EXPLAIN),
        ]);
    }
    println!(
        "explain: best of {EXPLAIN_TRIES}, each opening the ledger read-only first (as the command does)."
    );
}

fn print_ledger(what: &str, spec: &LedgerSpec, built: &Built, path: &Path) {
    println!(
        "{what}: {} entries, {} runs ({} standardizations, {} assays, {} replicates each), {} weighings, {} days of records; built in {:.1} s",
        built.entries,
        spec.runs(),
        spec.titrants,
        spec.titrants * ASSAYS_PER_TITRANT,
        REPLICATES,
        spec.weighings(),
        spec.days(),
        built.time.as_secs_f64()
    );
    println!("file: {} ({:.1} MiB)", path.display(), file_mib(path));
}

// ---------------------------------------------------------------------------------------------
// 2. Timing

fn open_read_only(path: &Path) -> BenchResult<Ledger> {
    let clock = Arc::new(FixedClock::new(Timestamp(FIRST_DAY_MICROS), 1));
    Ok(Ledger::open(
        path,
        OpenMode::ReadOnly,
        assize_verify::kind_rules(),
        clock,
    )?)
}

/// Fails unless the report is intact and counts every entry.
fn check_intact(report: &IntegrityReport, expected_entries: u64) -> BenchResult<()> {
    if !report.intact() || report.entries != expected_entries {
        return Err(format!(
            "replay found {} problems in {} entries (expected {expected_entries}); first: {:?}",
            report.problems.len() as u64 + report.problems_not_listed,
            report.entries,
            report.problems.first()
        )
        .into());
    }
    Ok(())
}

/// Best costs of each phase, the ratio within each round, and the first round's validations.
struct Timings {
    entries: u64,
    rounds: usize,
    integrity: Cost,
    validation_cost: Cost,
    in_memory: Cost,
    /// (b) / (a) within each round.
    round_ratios: Vec<f64>,
    validation: Validation,
    in_memory_validation: Validation,
}

fn measure(path: &Path, entries: u64, rounds: usize) -> BenchResult<Timings> {
    let run = |phase: Phase| Cost::of(|| phase.run(path, Some(entries)));
    // One untimed pass so the file is in the page cache for every timed one.
    Phase::Integrity.run(path, Some(entries))?;
    let mut integrity = Cost::NONE;
    let mut validation_cost = Cost::NONE;
    let mut in_memory = Cost::NONE;
    let mut round_ratios = Vec::new();
    let mut first = None;
    for round in 1..=rounds {
        // (a) and (b) swap places every round, so neither always runs on a warmer machine;
        // (c), for information only, comes after both.
        let ((replay, _), (full, validation)) = if round % 2 == 1 {
            let replay = run(Phase::Integrity)?;
            (replay, run(Phase::Validation)?)
        } else {
            let full = run(Phase::Validation)?;
            (run(Phase::Integrity)?, full)
        };
        let (whole, whole_validation) = run(Phase::InMemory)?;
        let ratio = full.wall.as_secs_f64() / replay.wall.as_secs_f64().max(f64::MIN_POSITIVE);
        eprintln!(
            "round {round} of {rounds}: (a) {:.3} s, (b) {:.3} s, (c) {:.3} s; ratio (b) / (a) {ratio:.3}",
            replay.wall.as_secs_f64(),
            full.wall.as_secs_f64(),
            whole.wall.as_secs_f64()
        );
        round_ratios.push(ratio);
        integrity = integrity.best(replay);
        validation_cost = validation_cost.best(full);
        in_memory = in_memory.best(whole);
        if first.is_none() {
            first = validation.zip(whole_validation);
        }
    }
    let (validation, in_memory_validation) = first.ok_or("a validation returned no result")?;
    Ok(Timings {
        entries,
        rounds,
        integrity,
        validation_cost,
        in_memory,
        round_ratios,
        validation,
        in_memory_validation,
    })
}

/// Prints what a validation found, by severity and by code, with one example of each code.
fn print_findings(label: &str, validation: &Validation) {
    let mut by_code: BTreeMap<Code, usize> = BTreeMap::new();
    for finding in &validation.findings {
        *by_code.entry(finding.code).or_default() += 1;
    }
    let codes = if by_code.is_empty() {
        "none".to_string()
    } else {
        by_code
            .iter()
            .map(|(code, count)| format!("{code} {count}"))
            .collect::<Vec<_>>()
            .join(", ")
    };
    let tally = &validation.tally;
    println!(
        "findings of the {label}: {} (blocking {}, review {}, periodic {}) over {} runs",
        validation.findings.len(),
        tally.blocking,
        tally.review,
        tally.periodic,
        validation.runs_checked
    );
    println!("  by code: {codes}");
    for code in by_code.keys() {
        if let Some(example) = validation.findings.iter().find(|f| f.code == *code) {
            println!("  e.g. {code}: {}", example.message);
        }
    }
}

// ---------------------------------------------------------------------------------------------
// 3. Peak memory, in child processes

/// Peak resident memory (KiB) of each phase on the tenth-size and the full ledger.
struct Memory {
    small_entries: u64,
    big_entries: u64,
    /// (a) on the small ledger, then on the big one.
    integrity: [u64; 2],
    /// (b) on the small ledger, then on the big one.
    validation: [u64; 2],
    /// (c) on the small ledger, then on the big one.
    in_memory: [u64; 2],
}

/// Runs in the child: one phase over the ledger at `path`, then its peak resident set.
fn run_memory_child(phase: Phase, path: &Path) -> BenchResult<()> {
    let findings = phase.run(path, None)?.map_or(0, |v| v.findings.len());
    println!(
        "{CHILD_REPORT} phase={} findings={findings} vm_hwm_kib={}",
        phase.name(),
        peak_resident_kib()?
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

/// Runs `phase` over `path` in a child process and returns the child's peak memory in KiB.
fn child_peak_memory(phase: Phase, path: &Path) -> BenchResult<u64> {
    eprintln!(
        "{} of {} in a child process ...",
        phase.name(),
        path.display()
    );
    let output = Command::new(std::env::current_exe()?)
        .arg(CHILD_FLAG)
        .arg(phase.name())
        .arg(path)
        .output()?;
    let stdout = String::from_utf8_lossy(&output.stdout);
    if !output.status.success() {
        let stderr = String::from_utf8_lossy(&output.stderr);
        return Err(format!("memory child failed ({}): {stderr}", output.status).into());
    }
    let peak = stdout
        .lines()
        .find(|l| l.starts_with(CHILD_REPORT))
        .and_then(|l| {
            l.split_whitespace()
                .find_map(|w| w.strip_prefix("vm_hwm_kib="))
        })
        .ok_or_else(|| format!("memory child printed no peak: {stdout:?}"))?;
    Ok(peak.parse()?)
}

// ---------------------------------------------------------------------------------------------
// The table

fn print_table(t: &Timings, memory: &Memory) {
    let best_ratio = t.validation_cost.wall.as_secs_f64()
        / t.integrity.wall.as_secs_f64().max(f64::MIN_POSITIVE);
    let mut ratios = t.round_ratios.clone();
    ratios.sort_by(f64::total_cmp);
    let median = ratios.get(ratios.len() / 2).copied().unwrap_or(f64::NAN);
    print_row(&[
        "figure", "wall", "CPU", "per item", "ratio", "target", "verdict",
    ]);
    print_cost_row(
        &format!("(a) integrity replay, {} entries", t.entries),
        t.integrity,
        t.entries,
    );
    print_cost_row(
        "(b) full validation (replay+recompute+rules)",
        t.validation_cost,
        t.entries,
    );
    print_row(&[
        "    what validation adds: (b) - (a)",
        &format!(
            "{:+.3} s",
            t.validation_cost.wall.as_secs_f64() - t.integrity.wall.as_secs_f64()
        ),
        &cpu_difference(t.validation_cost, t.integrity),
        "-",
        "-",
        "-",
        "info",
    ]);
    print_row(&[
        &format!("ratio (b) / (a), best of {}", t.rounds),
        "-",
        "-",
        "-",
        &format!("{best_ratio:.2}"),
        &format!("<= {TARGET_RATIO:.2}"),
        verdict(best_ratio <= TARGET_RATIO),
    ]);
    print_row(&[
        "    median of the same ratio per round",
        "-",
        "-",
        &format!(
            "{:.2} .. {:.2}",
            ratios.first().copied().unwrap_or(f64::NAN),
            ratios.last().copied().unwrap_or(f64::NAN)
        ),
        &format!("{median:.2}"),
        &format!("<= {TARGET_RATIO:.2}"),
        verdict(median <= TARGET_RATIO),
    ]);
    let in_memory_ratio =
        t.in_memory.wall.as_secs_f64() / t.integrity.wall.as_secs_f64().max(f64::MIN_POSITIVE);
    print_row(&[
        "(c) in-memory validation, for information",
        &seconds(t.in_memory.wall),
        &cpu_text(t.in_memory),
        &micros_per_entry(t.in_memory, t.entries),
        &format!("{in_memory_ratio:.2}"),
        "-",
        "info",
    ]);
    for (label, peaks, judged) in [
        ("(a) integrity replay", memory.integrity, true),
        ("(b) full validation", memory.validation, true),
        ("(c) in-memory validation", memory.in_memory, false),
    ] {
        print_memory_rows(label, peaks, memory, judged);
    }
    println!();
    println!(
        "best of {} rounds by wall time (the median row pairs (a) and (b) of each round and shows \
         the lowest .. highest round; (c) ran after both in each round); CPU = user + system \
         time of all threads (10 ms ticks). Each phase includes opening the file, which is in \
         the page cache. Peak memory: VmHWM of a \
         child process running one phase; growth = {} entries over {} entries.",
        t.rounds, memory.big_entries, memory.small_entries
    );
    println!("load average at end: {}", load_average());
}

/// The two peaks of one phase, their growth (against the flatness target when `judged`), and
/// what each added entry costs.
fn print_memory_rows(label: &str, peaks: [u64; 2], memory: &Memory, judged: bool) {
    let [small, big] = peaks;
    let growth = big as f64 / small.max(1) as f64;
    let added_entries = memory
        .big_entries
        .saturating_sub(memory.small_entries)
        .max(1);
    let bytes_per_entry = (big as f64 - small as f64) * 1024.0 / added_entries as f64;
    print_row(&[
        &format!("{label} peak, {} entries", memory.small_entries),
        &mebibytes(small),
        "-",
        "-",
        "-",
        "-",
        "info",
    ]);
    print_row(&[
        &format!("{label} peak, {} entries", memory.big_entries),
        &mebibytes(big),
        "-",
        &format!("{bytes_per_entry:+.0} B/entry"),
        &format!("{growth:.2}"),
        &if judged {
            format!("flat, <= {TARGET_MEMORY_GROWTH:.2}")
        } else {
            "-".to_string()
        },
        if judged {
            verdict(growth <= TARGET_MEMORY_GROWTH)
        } else {
            "info"
        },
    ]);
}

fn print_cost_row(name: &str, cost: Cost, entries: u64) {
    print_row(&[
        name,
        &seconds(cost.wall),
        &cpu_text(cost),
        &micros_per_entry(cost, entries),
        "-",
        "-",
        "info",
    ]);
}

fn micros_per_entry(cost: Cost, entries: u64) -> String {
    format!(
        "{:.1} us/entry",
        cost.wall.as_secs_f64() * 1e6 / entries.max(1) as f64
    )
}

fn print_row(cells: &[&str; 7]) {
    println!(
        "{:<48} {:>10} {:>8} {:>16} {:>6}  {:<12} {}",
        cells[0], cells[1], cells[2], cells[3], cells[4], cells[5], cells[6]
    );
}

fn verdict(met: bool) -> &'static str {
    if met {
        "met"
    } else {
        "MISSED"
    }
}

fn seconds(d: Duration) -> String {
    format!("{:.3} s", d.as_secs_f64())
}

fn cpu_text(cost: Cost) -> String {
    cost.cpu
        .map_or("-".into(), |cpu| format!("{:.2} s", cpu.as_secs_f64()))
}

fn cpu_difference(with: Cost, without: Cost) -> String {
    match (with.cpu, without.cpu) {
        (Some(a), Some(b)) => format!("{:+.2} s", a.as_secs_f64() - b.as_secs_f64()),
        _ => "-".into(),
    }
}

fn mebibytes(kib: u64) -> String {
    format!("{:.1} MiB", kib as f64 / 1024.0)
}
