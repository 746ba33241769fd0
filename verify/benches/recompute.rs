//! Recompute of every run of a ledger beside the integrity replay of the same ledger, measured
//! in the same run on the same machine.
//!
//! Run with `cargo bench -p assize-verify --bench recompute` (see BENCHMARKS.md). One run:
//!
//! 1. builds, through the public API only, a ledger of `ASSIZE_BENCH_RUNS` runs (default
//!    10,000) under the shipped method `policies/permanganate-peroxide.toml` and
//!    `policies/lab-policy.toml`, adopted once: for every permanganate titrant, one
//!    standardization against sodium oxalate and three hydrogen peroxide assays, each run with
//!    three replicates of a portion weighing, a titrant weighing and a replicate entry, plus the
//!    balances (recalibrated yearly), reference lots, titrants and samples they need. Records are
//!    entered as `intake::Input`s turned into drafts by `intake::draft` against a `Catalog` that
//!    grows with the ledger, one `Ledger::append_batch` transaction per titrant (the classic
//!    style of `support/lab_ledger.rs`, shared with the validation benchmark);
//! 2. times, over several rounds: (a) the integrity replay alone; (b) the same replay building
//!    the lab catalog from the entries it reads (`Catalog::from_replay`), (a) and (b) swapping
//!    order every round; (c) the recompute of every run from that catalog on all cores
//!    (`assemble::recompute_every_run`; also on one thread, for information); and, for
//!    information, (d) `Catalog::load`, a second, separate read of the file;
//! 3. prints the best time of each, the target ratio ((b) - (a) + (c)) / (a) from those, and
//!    the median of the same ratio taken within each round.
//!
//! Inputs are fixed (keys, readings from a seeded generator, a fixed clock), so only the timings
//! and the random ledger id differ between runs. It writes only inside a temporary directory
//! under `ASSIZE_BENCH_DIR` (default: cargo's target tmp dir), prints the table on stdout and its
//! progress on stderr, and asserts no timing: the replays must be intact and every run must
//! recompute (the first runs also exactly as `recompute_run_entry` gives them), nothing more.

#[path = "support/lab_ledger.rs"]
mod lab_ledger;
#[path = "support/machine.rs"]
mod machine;

use assize_ledger::Record;
use assize_ledger::{FixedClock, IntegrityReport, Ledger, OpenMode, ReplayOptions, Timestamp};
use assize_verify::assemble::{self, Recomputer};
use assize_verify::catalog::Catalog;
use assize_verify::records::Run;
use lab_ledger::{
    build_ledger, BenchResult, LedgerSpec, ASSAYS_PER_TITRANT, FIRST_DAY_MICROS, REPLICATES,
    RUNS_PER_TITRANT,
};
use machine::{file_mib, load_average, print_machine, Cost};
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::Duration;

/// Runs in the ledger when `ASSIZE_BENCH_RUNS` is not set.
const DEFAULT_RUNS: u64 = 10_000;
/// Each figure is timed this many times, alternating; the best of each counts.
const ROUNDS: usize = 7;
/// Target: what recomputing every run adds, over the integrity replay alone.
const TARGET_RATIO: f64 = 0.10;

/// What one run does, from the environment.
struct Plan {
    titrants: u64,
    base_dir: PathBuf,
}

impl Plan {
    fn from_env() -> BenchResult<Plan> {
        let runs = match std::env::var("ASSIZE_BENCH_RUNS") {
            Ok(text) => text
                .trim()
                .parse::<u64>()
                .map_err(|e| format!("ASSIZE_BENCH_RUNS={text:?}: {e}"))?,
            Err(_) => DEFAULT_RUNS,
        };
        if runs < RUNS_PER_TITRANT || runs % RUNS_PER_TITRANT != 0 {
            return Err(format!(
                "ASSIZE_BENCH_RUNS must be a positive multiple of {RUNS_PER_TITRANT}, not {runs}"
            )
            .into());
        }
        let base_dir = std::env::var_os("ASSIZE_BENCH_DIR")
            .map(PathBuf::from)
            .unwrap_or_else(|| PathBuf::from(env!("CARGO_TARGET_TMPDIR")));
        Ok(Plan {
            titrants: runs / RUNS_PER_TITRANT,
            base_dir,
        })
    }

    /// The ledger to build: the classic style, as this benchmark has always measured it.
    fn spec(&self) -> LedgerSpec {
        LedgerSpec {
            titrants: self.titrants,
            realistic: false,
        }
    }

    fn runs(&self) -> u64 {
        self.spec().runs()
    }

    fn weighings(&self) -> u64 {
        self.spec().weighings()
    }
}

fn main() -> BenchResult<()> {
    let plan = Plan::from_env()?;
    print_machine();
    std::fs::create_dir_all(&plan.base_dir)?;
    let dir = tempfile::Builder::new()
        .prefix("assize-recompute-bench-")
        .tempdir_in(&plan.base_dir)
        .expect("a temporary directory for the benchmark ledger");
    let path = dir.path().join("runs.assize");
    let built = build_ledger(&plan.spec(), &path)?;
    println!(
        "ledger: {} entries, {} runs ({} standardizations, {} assays, {} replicates each), {} weighings; built in {:.1} s",
        built.entries,
        plan.runs(),
        plan.titrants,
        plan.titrants * ASSAYS_PER_TITRANT,
        REPLICATES,
        plan.weighings(),
        built.time.as_secs_f64()
    );
    println!("file: {} ({:.1} MiB)", path.display(), file_mib(&path));
    println!();
    let figures = measure(&path, built.entries, plan.runs())?;
    print_table(&figures);
    Ok(())
}

// ---------------------------------------------------------------------------------------------
// 2. Measuring

/// Best costs of each phase.
struct Figures {
    entries: u64,
    runs: u64,
    replay: Cost,
    replay_with_catalog: Cost,
    recompute: Cost,
    recompute_one_thread: Cost,
    catalog_load: Cost,
    /// ((b) - (a) + (c)) / (a) within each round.
    round_ratios: Vec<f64>,
}

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

/// (a) Opens the ledger and replays it.
fn replay_alone(path: &Path, entries: u64) -> BenchResult<()> {
    let ledger = open_read_only(path)?;
    let report = ledger.replay(&ReplayOptions::default())?;
    check_intact(&report, entries)
}

/// (b) Opens the ledger and replays it, building the catalog from the entries it reads.
fn replay_with_catalog(path: &Path, entries: u64) -> BenchResult<Catalog> {
    let ledger = open_read_only(path)?;
    let (report, catalog) = Catalog::from_replay(&ledger, &ReplayOptions::default())?;
    check_intact(&report, entries)?;
    Ok(catalog)
}

/// (c) Recomputes every run in the catalog on `threads` threads (0: all cores); fails unless
/// each one recomputes.
fn recompute_every_run(catalog: &Catalog, threads: usize, expected_runs: u64) -> BenchResult<()> {
    let results = assemble::recompute_every_run(catalog, threads, |_, result| {
        result.map(|recomputed| {
            std::hint::black_box(&recomputed);
        })
    });
    let failures: Vec<&String> = results
        .iter()
        .filter_map(|(_, r)| r.as_ref().err())
        .collect();
    if !failures.is_empty() || results.len() as u64 != expected_runs {
        return Err(format!(
            "{} of {expected_runs} runs recomputed; {} failed, first: {:?}",
            results.len() - failures.len(),
            failures.len(),
            failures.first()
        )
        .into());
    }
    Ok(())
}

/// (d) Builds the catalog by a second, separate read of the file.
fn catalog_load(path: &Path) -> BenchResult<Catalog> {
    let ledger = open_read_only(path)?;
    Ok(Catalog::load(ledger.store())?)
}

/// Checks on a few runs that the caching recomputer and the one-run function agree.
fn check_recomputer_agrees(catalog: &Catalog) -> BenchResult<()> {
    let mut recomputer = Recomputer::new(catalog);
    for entry in catalog
        .of_kind(Run::KIND)
        .take(2 * RUNS_PER_TITRANT as usize)
    {
        let shared = recomputer.run(entry.hash)?;
        let alone = assemble::recompute_run_entry(catalog, entry.hash)?;
        if shared.outcome != alone.outcome || shared.standardization != alone.standardization {
            return Err(format!(
                "run {}: Recomputer and recompute_run_entry differ",
                shared.context.run.id
            )
            .into());
        }
    }
    Ok(())
}

fn measure(path: &Path, entries: u64, runs: u64) -> BenchResult<Figures> {
    let mut best = Figures {
        entries,
        runs,
        replay: Cost::NONE,
        replay_with_catalog: Cost::NONE,
        recompute: Cost::NONE,
        recompute_one_thread: Cost::NONE,
        catalog_load: Cost::NONE,
        round_ratios: Vec::new(),
    };
    // One untimed pass so the file is in the page cache for every timed one.
    replay_alone(path, entries)?;
    for round in 1..=ROUNDS {
        // (a) and (b) swap places every round, so neither always runs on a warmer machine.
        let (replay, (with_catalog, catalog)) = if round % 2 == 1 {
            let (replay, ()) = Cost::of(|| replay_alone(path, entries))?;
            (replay, Cost::of(|| replay_with_catalog(path, entries))?)
        } else {
            let with_catalog = Cost::of(|| replay_with_catalog(path, entries))?;
            let (replay, ()) = Cost::of(|| replay_alone(path, entries))?;
            (replay, with_catalog)
        };
        let (recompute, ()) = Cost::of(|| recompute_every_run(&catalog, 0, runs))?;
        let (one_thread, ()) = Cost::of(|| recompute_every_run(&catalog, 1, runs))?;
        if round == 1 {
            check_recomputer_agrees(&catalog)?;
        }
        drop(catalog);
        let (load, catalog) = Cost::of(|| catalog_load(path))?;
        drop(catalog);
        let ratio = (with_catalog.wall.as_secs_f64() - replay.wall.as_secs_f64()
            + recompute.wall.as_secs_f64())
            / replay.wall.as_secs_f64();
        eprintln!(
            "round {round} of {ROUNDS}: (a) {:.3} s, (b) {:.3} s, (c) {:.3} s, one thread {:.3} s, (d) {:.3} s; ratio {ratio:.3}",
            replay.wall.as_secs_f64(),
            with_catalog.wall.as_secs_f64(),
            recompute.wall.as_secs_f64(),
            one_thread.wall.as_secs_f64(),
            load.wall.as_secs_f64()
        );
        best.round_ratios.push(ratio);
        best.replay = best.replay.best(replay);
        best.replay_with_catalog = best.replay_with_catalog.best(with_catalog);
        best.recompute = best.recompute.best(recompute);
        best.recompute_one_thread = best.recompute_one_thread.best(one_thread);
        best.catalog_load = best.catalog_load.best(load);
    }
    Ok(best)
}

// ---------------------------------------------------------------------------------------------
// 3. The table

fn print_table(f: &Figures) {
    // A (b) faster than (a) is noise; it counts as no cost rather than as a saving.
    let catalog_extra = f.replay_with_catalog.wall.saturating_sub(f.replay.wall);
    let signed_extra = f.replay_with_catalog.wall.as_secs_f64() - f.replay.wall.as_secs_f64();
    let added = catalog_extra + f.recompute.wall;
    let ratio = added.as_secs_f64() / f.replay.wall.as_secs_f64().max(f64::MIN_POSITIVE);
    let separate_ratio = (f.catalog_load.wall + f.recompute.wall).as_secs_f64()
        / f.replay.wall.as_secs_f64().max(f64::MIN_POSITIVE);
    print_row(&[
        "figure",
        "wall",
        "CPU",
        "per item (wall)",
        "ratio",
        "target",
        "verdict",
    ]);
    print_cost_row(
        &format!("(a) integrity replay, {} entries", f.entries),
        f.replay,
        f.entries,
        "entry",
    );
    print_cost_row(
        "(b) replay + catalog, one read",
        f.replay_with_catalog,
        f.entries,
        "entry",
    );
    print_row(&[
        "    catalog building: (b) - (a)",
        &format!("{signed_extra:+.3} s"),
        &cpu_difference(f.replay_with_catalog, f.replay),
        &format!(
            "{:+.1} us/entry",
            signed_extra * 1e6 / f.entries.max(1) as f64
        ),
        "-",
        "-",
        "info",
    ]);
    print_cost_row(
        &format!("(c) recompute of every run, {} runs", f.runs),
        f.recompute,
        f.runs,
        "run",
    );
    print_cost_row(
        "    the same on one thread",
        f.recompute_one_thread,
        f.runs,
        "run",
    );
    print_row(&[
        "recompute cost: ((b) - (a) + (c)) / (a)",
        &seconds(added),
        "-",
        "-",
        &format!("{ratio:.3}"),
        &format!("< {TARGET_RATIO:.2}"),
        if ratio < TARGET_RATIO {
            "met"
        } else {
            "MISSED"
        },
    ]);
    let mut ratios = f.round_ratios.clone();
    ratios.sort_by(f64::total_cmp);
    let median = ratios.get(ratios.len() / 2).copied().unwrap_or(f64::NAN);
    print_row(&[
        "    median of the same ratio per round",
        "-",
        "-",
        &format!(
            "{:.3} .. {:.3}",
            ratios.first().copied().unwrap_or(f64::NAN),
            ratios.last().copied().unwrap_or(f64::NAN)
        ),
        &format!("{median:.3}"),
        &format!("< {TARGET_RATIO:.2}"),
        if median < TARGET_RATIO {
            "met"
        } else {
            "MISSED"
        },
    ]);
    print_cost_row(
        "(d) Catalog::load, a second read",
        f.catalog_load,
        f.entries,
        "entry",
    );
    print_row(&[
        "    separate read: ((d) + (c)) / (a)",
        &seconds(f.catalog_load.wall + f.recompute.wall),
        "-",
        "-",
        &format!("{separate_ratio:.3}"),
        "-",
        "info",
    ]);
    println!();
    println!(
        "best of {ROUNDS} rounds by wall time (the median row pairs (a), (b) and (c) of each round, \
         and shows the lowest .. highest round); CPU = user + system time of all threads in that \
         round (10 ms ticks). (a), (b) and (d) include opening the file, which is in the page cache."
    );
    println!("load average at end: {}", load_average());
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

fn print_cost_row(name: &str, cost: Cost, count: u64, what: &str) {
    print_row(&[
        name,
        &seconds(cost.wall),
        &cpu_text(cost),
        &micros_each(cost.wall, count, what),
        "-",
        "-",
        "info",
    ]);
}

fn micros_each(elapsed: Duration, count: u64, what: &str) -> String {
    format!(
        "{:.1} us/{what}",
        elapsed.as_secs_f64() * 1e6 / count.max(1) as f64
    )
}

fn print_row(cells: &[&str; 7]) {
    println!(
        "{:<42} {:>8} {:>8} {:>16} {:>6}  {:<7} {}",
        cells[0], cells[1], cells[2], cells[3], cells[4], cells[5], cells[6]
    );
}
