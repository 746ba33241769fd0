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
//!    grows with the ledger, one `Ledger::append_batch` transaction per titrant;
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

use assize_ledger::records::Enrolment;
use assize_ledger::Record;
use assize_ledger::{
    Entry, FixedClock, IntegrityReport, Ledger, LedgerError, OpenMode, ReplayOptions, Role, Signer,
    Timestamp,
};
use assize_verify::assemble::{self, Recomputer};
use assize_verify::catalog::Catalog;
use assize_verify::intake::{draft, Input};
use assize_verify::records::{DocumentKind, Portion, Run, RunKind, WeighingMode};
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::{Duration, Instant};

type BenchResult<T> = Result<T, Box<dyn std::error::Error>>;

/// Runs in the ledger when `ASSIZE_BENCH_RUNS` is not set.
const DEFAULT_RUNS: u64 = 10_000;
/// Assays that rely on each standardization (so runs come in groups of this plus one).
const ASSAYS_PER_TITRANT: u64 = 3;
/// Runs per titrant: its standardization and its assays.
const RUNS_PER_TITRANT: u64 = ASSAYS_PER_TITRANT + 1;
/// Determinations per run (the method asks for three).
const REPLICATES: u32 = 3;
/// Each figure is timed this many times, alternating; the best of each counts.
const ROUNDS: usize = 7;
/// Target: what recomputing every run adds, over the integrity replay alone.
const TARGET_RATIO: f64 = 0.10;

/// Invented lab name for the opening entry.
const LAB_NAME: &str = "Example Peroxide Testing Lab";
/// The shipped method and policy, adopted once at the start.
const METHOD_TEXT: &str = include_str!("../../policies/permanganate-peroxide.toml");
const POLICY_TEXT: &str = include_str!("../../policies/lab-policy.toml");
/// Ids inside those documents, by which runs name them.
const METHOD_ID: &str = "QAL-M-014";
const POLICY_ID: &str = "QAL-POL-001";

/// A person of the fixture; the first is the founder (QA), who enrols the others.
struct Person {
    id: &'static str,
    name: &'static str,
    role: Role,
    secret_byte: u8,
}

const PERSONS: [Person; 3] = [
    Person {
        id: "qa-1",
        name: "QA Officer One",
        role: Role::Qa,
        secret_byte: 0x51,
    },
    Person {
        id: "analyst-1",
        name: "Analyst One",
        role: Role::Analyst,
        secret_byte: 0x62,
    },
    Person {
        id: "analyst-2",
        name: "Analyst Two",
        role: Role::Analyst,
        secret_byte: 0x73,
    },
];

/// Balances: portions are weighed on the first, titrant bottles on the second. The first has a
/// calibration certificate stating its sensitivity uncertainty; the second relies on the policy.
const PORTION_BALANCE: &str = "B1-AX";
const TITRANT_BALANCE: &str = "B2-AX";
/// Sodium oxalate lots; titrant number `t` is standardized against lot `t % LOTS`.
const LOTS: u64 = 4;
/// Standardizations started per day (each followed by its assays).
const TITRANTS_PER_DAY: u64 = 2;
/// Days between balance calibrations.
const CALIBRATION_DAYS: u64 = 365;
/// Monday 2026-01-05 07:00:00 UTC, the first working day of the invented record.
const FIRST_DAY_MICROS: i64 = 1_767_596_400_000_000;
const DAY_MICROS: i64 = 86_400_000_000;
const MINUTE_MICROS: i64 = 60_000_000;

/// Values used only to make plausible readings (the benchmark never checks them).
const OXALATE_MOLAR_MASS: f64 = 133.998;
const PEROXIDE_MOLAR_MASS: f64 = 34.0147;
const LOT_PURITY: f64 = 0.99965;

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

    fn runs(&self) -> u64 {
        self.titrants * RUNS_PER_TITRANT
    }

    fn weighings(&self) -> u64 {
        self.runs() * u64::from(REPLICATES) * 2
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
    let built = build_ledger(&plan, &path)?;
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
// Machine

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

fn file_mib(path: &Path) -> f64 {
    std::fs::metadata(path).map_or(0.0, |m| m.len() as f64 / (1024.0 * 1024.0))
}

// ---------------------------------------------------------------------------------------------
// Deterministic inputs

/// splitmix64: a fixed, well-mixed sequence from a seed.
struct Generator {
    state: u64,
}

impl Generator {
    fn new(seed: u64) -> Generator {
        Generator { state: seed }
    }

    fn next(&mut self) -> u64 {
        self.state = self.state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut x = self.state;
        x = (x ^ (x >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        x = (x ^ (x >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        x ^ (x >> 31)
    }

    /// A whole number in `0..n`.
    fn below(&mut self, n: u64) -> u64 {
        self.next() % n
    }

    /// A whole number in `-spread..=spread`.
    fn around_zero(&mut self, spread: u64) -> i64 {
        self.below(2 * spread + 1) as i64 - spread as i64
    }
}

/// A balance display of `tenth_mg` tenths of a milligram, e.g. `"18.4127 g"`.
fn grams(tenth_mg: u64) -> String {
    format!("{}.{:04} g", tenth_mg / 10_000, tenth_mg % 10_000)
}

/// Grams to whole tenths of a milligram, as a 0.1 mg balance would show them.
fn to_tenth_mg(grams: f64) -> u64 {
    (grams * 10_000.0).round() as u64
}

fn time_text(at: Timestamp) -> String {
    at.to_string()
}

fn fixture_signers() -> Vec<Signer> {
    PERSONS
        .iter()
        .map(|p| Signer::from_secret(p.id, &[p.secret_byte; 32]))
        .collect()
}

// ---------------------------------------------------------------------------------------------
// 1. Building the ledger

struct Built {
    entries: u64,
    time: Duration,
}

/// The ledger being written and the lab catalog that resolves ids for the next drafts.
struct Writer {
    ledger: Ledger,
    catalog: Catalog,
    entries: u64,
}

impl Writer {
    /// Appends `inputs` signed by `signer` in one transaction, resolving ids against the
    /// catalog, which takes in each entry as soon as it is appended.
    fn record(&mut self, signer: &Signer, inputs: &[Input]) -> BenchResult<()> {
        let author = signer.person().to_string();
        let catalog = &mut self.catalog;
        let appended = self
            .ledger
            .append_batch(inputs.len(), Some(signer), |i, earlier| {
                if let Some(previous) = earlier.last() {
                    catalog.add(previous);
                }
                draft(&inputs[i], catalog, &author).map_err(|reason| LedgerError::BadInput {
                    what: format!("bench record {} ({})", i + 1, inputs[i].kind()),
                    reason,
                })
            })?;
        if let Some(last) = appended.last() {
            self.catalog.add(last);
        }
        self.entries += appended.len() as u64;
        Ok(())
    }

    fn append_signed<R: Record>(&mut self, record: &R, signer: &Signer) -> BenchResult<Entry> {
        let entry = self.ledger.append_record(record, signer)?;
        self.catalog.add(&entry);
        self.entries += 1;
        Ok(entry)
    }
}

fn build_ledger(plan: &Plan, path: &Path) -> BenchResult<Built> {
    eprintln!(
        "building a ledger of {} runs in {} ...",
        plan.runs(),
        path.display()
    );
    let started = Instant::now();
    let signers = fixture_signers();
    let clock = Arc::new(FixedClock::new(Timestamp(FIRST_DAY_MICROS), 1_000_000));
    let (ledger, opening) = Ledger::create(
        path,
        LAB_NAME,
        PERSONS[0].name,
        &signers[0],
        assize_verify::kind_rules(),
        clock,
    )?;
    let mut writer = Writer {
        ledger,
        catalog: Catalog::default(),
        entries: 0,
    };
    writer.catalog.add(&opening);
    writer.entries += 1;
    for (person, signer) in PERSONS.iter().zip(&signers).skip(1) {
        let enrolment = Enrolment {
            person: person.id.into(),
            name: person.name.into(),
            role: person.role,
            public_key: signer.public_key(),
        };
        writer.append_signed(&enrolment, &signers[0])?;
    }
    writer.record(&signers[0], &adoptions())?;
    writer.record(&signers[1], &equipment_and_lots())?;
    let mut generator = Generator::new(0x00A5_5152_E000_0001);
    for titrant in 0..plan.titrants {
        let analyst = &signers[1 + (titrant % 2) as usize];
        let inputs = titrant_week(titrant, &mut generator);
        writer.record(analyst, &inputs)?;
        if (titrant + 1) % 250 == 0 {
            eprintln!("  {} of {} titrants", titrant + 1, plan.titrants);
        }
    }
    Ok(Built {
        entries: writer.entries,
        time: started.elapsed(),
    })
}

fn adoptions() -> Vec<Input> {
    [
        (DocumentKind::Method, METHOD_TEXT),
        (DocumentKind::Policy, POLICY_TEXT),
    ]
    .into_iter()
    .map(|(document, text)| Input::Adopt {
        document,
        file: None,
        text: Some(text.to_string()),
    })
    .collect()
}

fn balance_input(id: &str, description: &str) -> Input {
    Input::Balance {
        id: id.into(),
        description: description.into(),
        readability: "0.0001 g".into(),
        capacity: "220 g".into(),
        minimum_weight: "0.0820 g".into(),
    }
}

/// A yearly calibration of `balance`, the `year`-th since the start.
fn calibration_input(balance: &str, year: u64) -> Input {
    let performed = 2026 + year;
    Input::Calibration {
        balance: balance.into(),
        certificate: format!("QCAL-{balance}-{performed}"),
        performed_on: format!("{performed}-01-02"),
        due_on: format!("{}-01-02", performed + 1),
        passed: true,
        repeatability_sd: "0.00004 g".into(),
        // The titrant balance's certificate states no sensitivity; the policy's default applies.
        sensitivity_relative_u: (balance == PORTION_BALANCE).then(|| "0.000005".to_string()),
    }
}

fn lot_id(lot: u64) -> String {
    format!("NOX-26-{:03}", lot + 1)
}

fn equipment_and_lots() -> Vec<Input> {
    let mut inputs = vec![
        balance_input(PORTION_BALANCE, "analytical balance, room B1, bench 2"),
        balance_input(TITRANT_BALANCE, "analytical balance, room B2, bench 1"),
        calibration_input(PORTION_BALANCE, 0),
        calibration_input(TITRANT_BALANCE, 0),
    ];
    for lot in 0..LOTS {
        inputs.push(Input::ReferenceLot {
            id: lot_id(lot),
            substance: "sodium oxalate".into(),
            formula: "Na2C2O4".into(),
            purity: "0.99965".into(),
            purity_expanded_u: "0.00024".into(),
            coverage_factor: "2".into(),
            certificate: format!("QRM-OX-{}", 5521 + lot),
            valid_until: "2035-06-30".into(),
            drying: "2 h at 110 C, cooled in desiccator".into(),
        });
    }
    inputs
}

/// Where the bench clock stands while a titrant's runs are entered.
struct BenchTime {
    at: Timestamp,
}

impl BenchTime {
    /// Advances by `minutes` and returns the new time as text.
    fn after(&mut self, minutes: i64) -> String {
        self.at = Timestamp(self.at.0 + minutes * MINUTE_MICROS);
        time_text(self.at)
    }
}

/// One titrant's records: its yearly balance calibrations when due, the titrant, its
/// standardization, the samples and their assays, in the order an analyst enters them.
fn titrant_week(titrant: u64, generator: &mut Generator) -> Vec<Input> {
    let day = titrant / TITRANTS_PER_DAY;
    let start = FIRST_DAY_MICROS
        + day as i64 * DAY_MICROS
        + (titrant % TITRANTS_PER_DAY) as i64 * 240 * MINUTE_MICROS;
    let mut clock = BenchTime {
        at: Timestamp(start),
    };
    let mut inputs = Vec::new();
    if day > 0 && day % CALIBRATION_DAYS == 0 && titrant % TITRANTS_PER_DAY == 0 {
        let year = day / CALIBRATION_DAYS;
        inputs.push(calibration_input(PORTION_BALANCE, year));
        inputs.push(calibration_input(TITRANT_BALANCE, year));
    }
    let titrant_id = format!("KMN-{:05}", titrant + 1);
    let date = clock.at.to_datetime().date_naive();
    inputs.push(Input::Titrant {
        id: titrant_id.clone(),
        formula: "KMnO4".into(),
        nominal_concentration: "0.02".into(),
        prepared_on: date.to_string(),
        valid_until: (date + chrono::Days::new(90)).to_string(),
    });
    // The titrant's true strength, within ±2 % of nominal.
    let concentration = 0.02 * (1.0 + generator.around_zero(200) as f64 / 10_000.0);
    let standardization = format!("STD-{titrant_id}");
    inputs.extend(standardization_run(
        &standardization,
        &titrant_id,
        &lot_id(titrant % LOTS),
        concentration,
        &mut clock,
        generator,
    ));
    for assay in 0..ASSAYS_PER_TITRANT {
        let sample = format!("HP-{:05}-{}", titrant + 1, assay + 1);
        inputs.push(Input::Sample {
            id: sample.clone(),
            description: format!(
                "hydrogen peroxide about 30 %, drum {} of lot PX-{:05}",
                assay + 1,
                titrant + 1
            ),
            received_at: clock.after(5),
        });
        inputs.extend(assay_run(
            &format!("AS-{sample}"),
            &titrant_id,
            &sample,
            &standardization,
            concentration,
            &mut clock,
            generator,
        ));
    }
    inputs
}

/// A weighing by difference: the vessel before and after the portion left it.
#[allow(clippy::too_many_arguments)]
fn weighing(
    run: &str,
    replicate: u32,
    portion: Portion,
    balance: &str,
    before_tenth_mg: u64,
    net_tenth_mg: u64,
    clock: &mut BenchTime,
    minutes: i64,
) -> Input {
    Input::Weighing {
        run: run.into(),
        replicate,
        portion,
        balance: balance.into(),
        mode: WeighingMode::ByDifference,
        first: grams(before_tenth_mg),
        first_at: clock.after(2),
        second: grams(before_tenth_mg - net_tenth_mg),
        second_at: clock.after(minutes),
        captured: false,
        unstable: false,
    }
}

fn run_input(
    id: &str,
    kind: RunKind,
    titrant: &str,
    lot: Option<&str>,
    sample: Option<&str>,
    standardization: Option<&str>,
    clock: &mut BenchTime,
) -> Input {
    Input::Run {
        id: id.into(),
        run_kind: kind,
        method: METHOD_ID.into(),
        policy: POLICY_ID.into(),
        titrant: titrant.into(),
        reference_lot: lot.map(str::to_string),
        sample: sample.map(str::to_string),
        standardization: standardization.map(str::to_string),
        started_at: clock.after(5),
    }
}

/// Three titrations of about 0.25 g sodium oxalate with the titrant weighed by difference.
fn standardization_run(
    run: &str,
    titrant: &str,
    lot: &str,
    concentration: f64,
    clock: &mut BenchTime,
    generator: &mut Generator,
) -> Vec<Input> {
    let mut inputs = vec![run_input(
        run,
        RunKind::Standardization,
        titrant,
        Some(lot),
        None,
        None,
        clock,
    )];
    let mut bottle = 180_000 + generator.below(10_000);
    for number in 1..=REPLICATES {
        let portion = 2_400 + generator.below(200);
        let moles_titrant = portion as f64 / 10_000.0 * LOT_PURITY / OXALATE_MOLAR_MASS * 0.4;
        let titrant_mass = to_tenth_mg(moles_titrant / concentration * 1000.0)
            .saturating_add_signed(generator.around_zero(15));
        let dropping_bottle = 1_100_000 + generator.below(50_000);
        inputs.push(weighing(
            run,
            number,
            Portion::PrimaryStandard,
            PORTION_BALANCE,
            bottle,
            portion,
            clock,
            1,
        ));
        inputs.push(weighing(
            run,
            number,
            Portion::Titrant,
            TITRANT_BALANCE,
            dropping_bottle,
            titrant_mass,
            clock,
            12,
        ));
        inputs.push(Input::Replicate {
            run: run.into(),
            number,
            endpoint: "faint pink persisting 30 s, titrated at about 70 C".into(),
        });
        bottle -= portion;
    }
    inputs
}

/// Three titrations of about 0.15 g of a 29–31 % peroxide sample.
fn assay_run(
    run: &str,
    titrant: &str,
    sample: &str,
    standardization: &str,
    concentration: f64,
    clock: &mut BenchTime,
    generator: &mut Generator,
) -> Vec<Input> {
    let mut inputs = vec![run_input(
        run,
        RunKind::Assay,
        titrant,
        None,
        Some(sample),
        Some(standardization),
        clock,
    )];
    let content = 0.30 + generator.around_zero(100) as f64 / 10_000.0;
    let mut vial = 98_000 + generator.below(5_000);
    for number in 1..=REPLICATES {
        let portion = 1_400 + generator.below(200);
        let peroxide_moles = portion as f64 / 10_000.0 * content / PEROXIDE_MOLAR_MASS;
        let titrant_mass = to_tenth_mg(peroxide_moles * 0.4 / concentration * 1000.0)
            .saturating_add_signed(generator.around_zero(15));
        let dropping_bottle = 1_100_000 + generator.below(50_000);
        inputs.push(weighing(
            run,
            number,
            Portion::Sample,
            PORTION_BALANCE,
            vial,
            portion,
            clock,
            1,
        ));
        inputs.push(weighing(
            run,
            number,
            Portion::Titrant,
            TITRANT_BALANCE,
            dropping_bottle,
            titrant_mass,
            clock,
            7,
        ));
        inputs.push(Input::Replicate {
            run: run.into(),
            number,
            endpoint: "faint pink persisting 30 s, titrated cold".into(),
        });
        vial -= portion;
    }
    inputs
}

// ---------------------------------------------------------------------------------------------
// 2. Measuring

/// Wall-clock time of one phase and the CPU time (user + system, all threads) it used.
#[derive(Clone, Copy)]
struct Cost {
    wall: Duration,
    cpu: Option<Duration>,
}

impl Cost {
    const NONE: Cost = Cost {
        wall: Duration::MAX,
        cpu: None,
    };

    /// Runs `phase`, measuring its wall-clock and CPU time.
    fn of<T>(phase: impl FnOnce() -> BenchResult<T>) -> BenchResult<(Cost, T)> {
        let cpu_before = process_cpu();
        let started = Instant::now();
        let value = phase()?;
        let wall = started.elapsed();
        let cpu = match (cpu_before, process_cpu()) {
            (Some(before), Some(after)) => Some(after.saturating_sub(before)),
            _ => None,
        };
        Ok((Cost { wall, cpu }, value))
    }

    /// The faster of two measurements of the same phase.
    fn best(self, other: Cost) -> Cost {
        if other.wall < self.wall {
            other
        } else {
            self
        }
    }
}

/// User plus system CPU time of this process so far, all threads (finished ones included),
/// from `/proc/self/stat` in clock ticks of 10 ms (Linux `USER_HZ` = 100).
fn process_cpu() -> Option<Duration> {
    let stat = std::fs::read_to_string("/proc/self/stat").ok()?;
    let after_name = &stat[stat.rfind(')')? + 1..];
    let fields: Vec<&str> = after_name.split_whitespace().collect();
    let user: u64 = fields.get(11)?.parse().ok()?;
    let system: u64 = fields.get(12)?.parse().ok()?;
    Some(Duration::from_millis((user + system) * 10))
}

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
