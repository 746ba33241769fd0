//! The invented lab ledger the `verify` benchmarks measure, built through the public API only.
//!
//! Shared by `recompute.rs` and `validate.rs`, which include it with `#[path]` (files in
//! `benches/support/` are not benchmark targets of their own). Per titrant: the titrant, its
//! standardization against sodium oxalate, three hydrogen peroxide samples and their assays, each
//! run with three replicates of a portion weighing, a titrant weighing (both by difference,
//! signed) and a replicate entry, under the shipped method `policies/permanganate-peroxide.toml`
//! and `policies/lab-policy.toml`, adopted once; plus the balances, their calibrations and the
//! reference lots the runs need. Records are entered as `intake::Input`s turned into drafts by
//! `intake::draft` against a `Catalog` that takes in each entry as soon as it is appended.
//!
//! Two styles, chosen by [`LedgerSpec::realistic`]:
//!
//! - **classic** (`false`, the ledger of the recompute benchmark, kept exactly as it was): a
//!   `FixedClock` one second per entry from the first working day, one transaction per titrant,
//!   0.1 mg balances with a minimum weight of 82 mg, yearly calibrations. It recomputes, but the
//!   rules would find it full of faults: entries are recorded long before what they record
//!   happens, no balance is ever checked, and assay portions are below the minimum weight;
//! - **realistic** (`true`, for the validation benchmark): every transaction is recorded a
//!   minute after the last observation it holds (a [`BatchClock`] the builder sets), one
//!   transaction per replicate so nothing waits more than 30 minutes; a passing routine check of
//!   each balance starts every day; the balances read 0.01 mg (minimum weight 8.2 mg, readings
//!   with five decimals); calibrations and new reference lots every 360 days; and each run's
//!   three replicates scatter by 0.03–0.10 %, one low, one high and one near the middle, so
//!   that the standardizations and assays meet the policy's limits and raise no outlier flag.
//!
//! Inputs are fixed: keys, readings from a seeded splitmix64 generator, and the clock, so only the
//! random ledger id differs between two builds of the same size.

use assize_ledger::records::Enrolment;
use assize_ledger::Record;
use assize_ledger::{Clock, Entry, FixedClock, Ledger, LedgerError, Role, Signer, Timestamp};
use assize_verify::catalog::Catalog;
use assize_verify::intake::{draft, Input};
use assize_verify::records::{DocumentKind, Portion, RunKind, WeighingMode};
use std::path::Path;
use std::sync::atomic::{AtomicI64, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

/// What a benchmark step returns.
pub type BenchResult<T> = Result<T, Box<dyn std::error::Error>>;

/// Assays that rely on each standardization (so runs come in groups of this plus one).
pub const ASSAYS_PER_TITRANT: u64 = 3;
/// Runs per titrant: its standardization and its assays.
pub const RUNS_PER_TITRANT: u64 = ASSAYS_PER_TITRANT + 1;
/// Determinations per run (the method asks for three).
pub const REPLICATES: u32 = 3;

/// Invented lab name for the opening entry.
const LAB_NAME: &str = "Example Peroxide Testing Lab";
/// The shipped method and policy, adopted once at the start.
const METHOD_TEXT: &str = include_str!("../../../policies/permanganate-peroxide.toml");
const POLICY_TEXT: &str = include_str!("../../../policies/lab-policy.toml");
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
/// Sodium oxalate lots in use at a time; titrant number `t` is standardized against lot
/// `t % LOTS` (of the current 360-day cycle, in the realistic style).
const LOTS: u64 = 4;
/// Standardizations started per day (each followed by its assays), 240 minutes apart.
const TITRANTS_PER_DAY: u64 = 2;
/// Classic style: days between balance calibrations.
const CALIBRATION_DAYS: u64 = 365;
/// Realistic style: days between calibrations (and new reference lots), inside the policy's
/// 365-day interval; a certificate is due 365 days after it was performed, a lot is valid for
/// three years.
const RECALIBRATION_DAYS: u64 = 360;
const CERTIFICATE_DAYS: u64 = 365;
const LOT_VALID_DAYS: u64 = 3 * 365;
/// Monday 2026-01-05 07:00:00 UTC, the first working day of the invented record.
pub const FIRST_DAY_MICROS: i64 = 1_767_596_400_000_000;
const DAY_MICROS: i64 = 86_400_000_000;
const MINUTE_MICROS: i64 = 60_000_000;
/// Realistic style: the routine checks of the two balances, minutes before the day's first run.
const CHECK_LEAD_MINUTES: [i64; 2] = [20, 16];
/// Realistic style: entries added per titrant (its 44, and half a day's two routine checks).
const REALISTIC_ENTRIES_PER_TITRANT: u64 = 45;
/// Entries before the first titrant: opening, two enrolments, two adoptions, two balances, two
/// calibrations and four lots.
const SETUP_ENTRIES: u64 = 13;

/// Values used only to make plausible readings (the benchmarks never check them).
const OXALATE_MOLAR_MASS: f64 = 133.998;
const PEROXIDE_MOLAR_MASS: f64 = 34.0147;
const LOT_PURITY: f64 = 0.99965;

/// What to build.
pub struct LedgerSpec {
    /// Titrants, each with its standardization and assays (so `RUNS_PER_TITRANT` runs each).
    pub titrants: u64,
    /// The realistic style (see the module text) instead of the classic one.
    pub realistic: bool,
}

// Used by the validation benchmark only; the recompute benchmark sizes its ledger in runs.
#[allow(dead_code)]
impl LedgerSpec {
    /// A realistic ledger of about `entries` entries (at least one titrant).
    pub fn realistic_with_entries(entries: u64) -> LedgerSpec {
        let titrants =
            entries.saturating_sub(SETUP_ENTRIES) as f64 / REALISTIC_ENTRIES_PER_TITRANT as f64;
        LedgerSpec {
            titrants: (titrants.round() as u64).max(1),
            realistic: true,
        }
    }

    /// Days of the invented record.
    pub fn days(&self) -> u64 {
        self.titrants.div_ceil(TITRANTS_PER_DAY)
    }
}

impl LedgerSpec {
    /// Runs in the ledger.
    pub fn runs(&self) -> u64 {
        self.titrants * RUNS_PER_TITRANT
    }

    /// Weighings in the ledger (two per replicate).
    pub fn weighings(&self) -> u64 {
        self.runs() * u64::from(REPLICATES) * 2
    }
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

/// A 0.1 mg balance display of `tenth_mg` tenths of a milligram, e.g. `"18.4127 g"`.
fn grams(tenth_mg: u64) -> String {
    format!("{}.{:04} g", tenth_mg / 10_000, tenth_mg % 10_000)
}

/// Grams to whole tenths of a milligram, as a 0.1 mg balance would show them.
fn to_tenth_mg(grams: f64) -> u64 {
    (grams * 10_000.0).round() as u64
}

/// A 0.01 mg balance display of `hundredth_mg` hundredths of a milligram, e.g. `"18.41273 g"`.
fn grams_5(hundredth_mg: u64) -> String {
    format!("{}.{:05} g", hundredth_mg / 100_000, hundredth_mg % 100_000)
}

/// Grams to whole hundredths of a milligram, as a 0.01 mg balance would show them.
fn to_hundredth_mg(grams: f64) -> u64 {
    (grams * 100_000.0).round() as u64
}

fn time_text(at: Timestamp) -> String {
    at.to_string()
}

/// The fixture's QA person, who may sign checkpoints and evidence bundles.
#[allow(dead_code)] // used by the validate bench only
pub fn qa_signer() -> Signer {
    let qa = &PERSONS[0];
    Signer::from_secret(qa.id, &[qa.secret_byte; 32])
}

fn fixture_signers() -> Vec<Signer> {
    PERSONS
        .iter()
        .map(|p| Signer::from_secret(p.id, &[p.secret_byte; 32]))
        .collect()
}

/// The calendar date of working day `day` (07:00 UTC).
fn date_of_day(day: u64) -> chrono::NaiveDate {
    Timestamp(FIRST_DAY_MICROS + day as i64 * DAY_MICROS)
        .to_datetime()
        .date_naive()
}

// ---------------------------------------------------------------------------------------------
// The clock of the realistic style

/// A clock the builder sets before each transaction. It never goes back (a later setting
/// wins only if it is ahead) and advances one microsecond per reading.
pub struct BatchClock {
    next: AtomicI64,
}

impl BatchClock {
    fn new(start: Timestamp) -> BatchClock {
        BatchClock {
            next: AtomicI64::new(start.0),
        }
    }

    /// Moves the clock forward to `at`; does nothing if it already reads later.
    fn advance_to(&self, at: Timestamp) {
        self.next.fetch_max(at.0, Ordering::SeqCst);
    }
}

impl Clock for BatchClock {
    fn now(&self) -> Timestamp {
        Timestamp(self.next.fetch_add(1, Ordering::SeqCst))
    }
}

// ---------------------------------------------------------------------------------------------
// Writing

/// A finished build.
pub struct Built {
    /// Entries in the ledger.
    pub entries: u64,
    /// Time the build took.
    pub time: Duration,
}

/// Inputs recorded in one transaction, and the latest observation time among them.
struct Batch {
    inputs: Vec<Input>,
    last_observation: Timestamp,
}

/// The ledger being written and the lab catalog that resolves ids for the next drafts.
struct Writer {
    ledger: Ledger,
    catalog: Catalog,
    entries: u64,
    /// The realistic style's clock, set before each batch.
    batch_clock: Option<Arc<BatchClock>>,
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

    /// Records a batch one minute after its last observation.
    fn record_batch(&mut self, signer: &Signer, batch: &Batch) -> BenchResult<()> {
        if let Some(clock) = &self.batch_clock {
            clock.advance_to(Timestamp(batch.last_observation.0 + MINUTE_MICROS));
        }
        self.record(signer, &batch.inputs)
    }

    fn append_signed<R: Record>(&mut self, record: &R, signer: &Signer) -> BenchResult<Entry> {
        let entry = self.ledger.append_record(record, signer)?;
        self.catalog.add(&entry);
        self.entries += 1;
        Ok(entry)
    }
}

/// Builds the ledger `spec` describes at `path` (a new file), printing progress on stderr.
pub fn build_ledger(spec: &LedgerSpec, path: &Path) -> BenchResult<Built> {
    eprintln!(
        "building a ledger of {} runs in {} ...",
        spec.runs(),
        path.display()
    );
    let started = Instant::now();
    let signers = fixture_signers();
    let (clock, batch_clock): (Arc<dyn Clock>, _) = if spec.realistic {
        // The lab is set up the day before its first working day.
        let clock = Arc::new(BatchClock::new(Timestamp(FIRST_DAY_MICROS - DAY_MICROS)));
        (clock.clone(), Some(clock))
    } else {
        let clock = Arc::new(FixedClock::new(Timestamp(FIRST_DAY_MICROS), 1_000_000));
        (clock, None)
    };
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
        batch_clock,
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
    if spec.realistic {
        writer.record(&signers[1], &realistic_setup())?;
        write_realistic_titrants(&mut writer, &signers, spec.titrants)?;
    } else {
        writer.record(&signers[1], &equipment_and_lots())?;
        write_classic_titrants(&mut writer, &signers, spec.titrants)?;
    }
    Ok(Built {
        entries: writer.entries,
        time: started.elapsed(),
    })
}

fn write_classic_titrants(
    writer: &mut Writer,
    signers: &[Signer],
    titrants: u64,
) -> BenchResult<()> {
    let mut generator = Generator::new(0x00A5_5152_E000_0001);
    for titrant in 0..titrants {
        let analyst = &signers[1 + (titrant % 2) as usize];
        let inputs = titrant_week(titrant, &mut generator);
        writer.record(analyst, &inputs)?;
        if (titrant + 1) % 250 == 0 {
            eprintln!("  {} of {} titrants", titrant + 1, titrants);
        }
    }
    Ok(())
}

fn write_realistic_titrants(
    writer: &mut Writer,
    signers: &[Signer],
    titrants: u64,
) -> BenchResult<()> {
    let mut generator = Generator::new(0x00A5_5152_E000_0002);
    for titrant in 0..titrants {
        let analyst = &signers[1 + (titrant % 2) as usize];
        if titrant % TITRANTS_PER_DAY == 0 {
            let opening = day_opening(titrant / TITRANTS_PER_DAY, &mut generator);
            writer.record_batch(analyst, &opening)?;
        }
        for batch in realistic_titrant(titrant, &mut generator) {
            writer.record_batch(analyst, &batch)?;
        }
        if (titrant + 1) % 2_000 == 0 {
            eprintln!("  {} of {} titrants", titrant + 1, titrants);
        }
    }
    Ok(())
}

// ---------------------------------------------------------------------------------------------
// Inputs shared by both styles

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

/// A balance's specification as its record shows it.
struct BalanceSpec {
    readability: &'static str,
    minimum_weight: &'static str,
    repeatability_sd: &'static str,
}

/// Classic style: 0.1 mg balances.
const TENTH_MG_BALANCE: BalanceSpec = BalanceSpec {
    readability: "0.0001 g",
    minimum_weight: "0.0820 g",
    repeatability_sd: "0.00004 g",
};

/// Realistic style: 0.01 mg balances, whose minimum weight (8.2 mg, twice that with the
/// policy's safety factor) lies well below the smallest portion.
const HUNDREDTH_MG_BALANCE: BalanceSpec = BalanceSpec {
    readability: "0.00001 g",
    minimum_weight: "0.0082 g",
    repeatability_sd: "0.000012 g",
};

fn balance_input(id: &str, description: &str, spec: &BalanceSpec) -> Input {
    Input::Balance {
        id: id.into(),
        description: description.into(),
        readability: spec.readability.into(),
        capacity: "220 g".into(),
        minimum_weight: spec.minimum_weight.into(),
    }
}

fn balances(spec: &BalanceSpec) -> [Input; 2] {
    [
        balance_input(
            PORTION_BALANCE,
            "analytical balance, room B1, bench 2",
            spec,
        ),
        balance_input(
            TITRANT_BALANCE,
            "analytical balance, room B2, bench 1",
            spec,
        ),
    ]
}

/// A passing calibration of `balance`.
fn calibration(
    balance: &str,
    certificate: String,
    performed_on: String,
    due_on: String,
    spec: &BalanceSpec,
) -> Input {
    Input::Calibration {
        balance: balance.into(),
        certificate,
        performed_on,
        due_on,
        passed: true,
        repeatability_sd: spec.repeatability_sd.into(),
        // The titrant balance's certificate states no sensitivity; the policy's default applies.
        sensitivity_relative_u: (balance == PORTION_BALANCE).then(|| "0.000005".to_string()),
    }
}

fn reference_lot(id: String, certificate_number: u64, valid_until: String) -> Input {
    Input::ReferenceLot {
        id,
        substance: "sodium oxalate".into(),
        formula: "Na2C2O4".into(),
        purity: "0.99965".into(),
        purity_expanded_u: "0.00024".into(),
        coverage_factor: "2".into(),
        certificate: format!("QRM-OX-{certificate_number}"),
        valid_until,
        drying: "2 h at 110 C, cooled in desiccator".into(),
    }
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

/// Where the runs of titrant number `titrant` start, and the day they belong to.
fn titrant_start(titrant: u64) -> (u64, BenchTime) {
    let day = titrant / TITRANTS_PER_DAY;
    let start = FIRST_DAY_MICROS
        + day as i64 * DAY_MICROS
        + (titrant % TITRANTS_PER_DAY) as i64 * 240 * MINUTE_MICROS;
    (
        day,
        BenchTime {
            at: Timestamp(start),
        },
    )
}

fn titrant_input(titrant_id: &str, clock: &BenchTime) -> Input {
    let date = clock.at.to_datetime().date_naive();
    Input::Titrant {
        id: titrant_id.to_string(),
        formula: "KMnO4".into(),
        nominal_concentration: "0.02".into(),
        prepared_on: date.to_string(),
        valid_until: (date + chrono::Days::new(90)).to_string(),
    }
}

/// The titrant's true strength, within ±2 % of nominal.
fn true_concentration(generator: &mut Generator) -> f64 {
    0.02 * (1.0 + generator.around_zero(200) as f64 / 10_000.0)
}

fn sample_input(titrant: u64, assay: u64, clock: &mut BenchTime) -> (String, Input) {
    let sample = format!("HP-{:05}-{}", titrant + 1, assay + 1);
    let input = Input::Sample {
        id: sample.clone(),
        description: format!(
            "hydrogen peroxide about 30 %, drum {} of lot PX-{:05}",
            assay + 1,
            titrant + 1
        ),
        received_at: clock.after(5),
    };
    (sample, input)
}

/// A weighing by difference: the vessel before and after the portion left it.
#[allow(clippy::too_many_arguments)]
fn weighing_shown(
    run: &str,
    replicate: u32,
    portion: Portion,
    balance: &str,
    first: String,
    second: String,
    clock: &mut BenchTime,
    minutes: i64,
) -> Input {
    Input::Weighing {
        run: run.into(),
        replicate,
        portion,
        balance: balance.into(),
        mode: WeighingMode::ByDifference,
        first,
        first_at: clock.after(2),
        second,
        second_at: clock.after(minutes),
        captured: false,
        unstable: false,
    }
}

/// The runs a run names: its titrant, and the lot (standardization) or the sample and the
/// standardization (assay).
struct RunLinks<'a> {
    titrant: &'a str,
    lot: Option<&'a str>,
    sample: Option<&'a str>,
    standardization: Option<&'a str>,
}

fn run_input(id: &str, kind: RunKind, links: &RunLinks<'_>, clock: &mut BenchTime) -> Input {
    Input::Run {
        id: id.into(),
        run_kind: kind,
        method: METHOD_ID.into(),
        policy: POLICY_ID.into(),
        titrant: links.titrant.into(),
        reference_lot: links.lot.map(str::to_string),
        sample: links.sample.map(str::to_string),
        standardization: links.standardization.map(str::to_string),
        started_at: clock.after(5),
    }
}

fn replicate_input(run: &str, number: u32, endpoint: &str) -> Input {
    Input::Replicate {
        run: run.into(),
        number,
        endpoint: endpoint.into(),
    }
}

const STANDARDIZATION_ENDPOINT: &str = "faint pink persisting 30 s, titrated at about 70 C";
const ASSAY_ENDPOINT: &str = "faint pink persisting 30 s, titrated cold";

// ---------------------------------------------------------------------------------------------
// Classic style

/// A yearly calibration of `balance`, the `year`-th since the start.
fn calibration_input(balance: &str, year: u64) -> Input {
    let performed = 2026 + year;
    calibration(
        balance,
        format!("QCAL-{balance}-{performed}"),
        format!("{performed}-01-02"),
        format!("{}-01-02", performed + 1),
        &TENTH_MG_BALANCE,
    )
}

fn lot_id(lot: u64) -> String {
    format!("NOX-26-{:03}", lot + 1)
}

fn equipment_and_lots() -> Vec<Input> {
    let mut inputs = Vec::from(balances(&TENTH_MG_BALANCE));
    inputs.push(calibration_input(PORTION_BALANCE, 0));
    inputs.push(calibration_input(TITRANT_BALANCE, 0));
    for lot in 0..LOTS {
        inputs.push(reference_lot(lot_id(lot), 5521 + lot, "2035-06-30".into()));
    }
    inputs
}

/// One titrant's records: its yearly balance calibrations when due, the titrant, its
/// standardization, the samples and their assays, in the order an analyst enters them.
fn titrant_week(titrant: u64, generator: &mut Generator) -> Vec<Input> {
    let (day, mut clock) = titrant_start(titrant);
    let mut inputs = Vec::new();
    if day > 0 && day % CALIBRATION_DAYS == 0 && titrant % TITRANTS_PER_DAY == 0 {
        let year = day / CALIBRATION_DAYS;
        inputs.push(calibration_input(PORTION_BALANCE, year));
        inputs.push(calibration_input(TITRANT_BALANCE, year));
    }
    let titrant_id = format!("KMN-{:05}", titrant + 1);
    inputs.push(titrant_input(&titrant_id, &clock));
    let concentration = true_concentration(generator);
    let standardization = format!("STD-{titrant_id}");
    let lot = lot_id(titrant % LOTS);
    let links = RunLinks {
        titrant: &titrant_id,
        lot: Some(&lot),
        sample: None,
        standardization: None,
    };
    inputs.extend(standardization_run(
        &standardization,
        &links,
        concentration,
        &mut clock,
        generator,
    ));
    for assay in 0..ASSAYS_PER_TITRANT {
        let (sample, input) = sample_input(titrant, assay, &mut clock);
        inputs.push(input);
        let links = RunLinks {
            titrant: &titrant_id,
            lot: None,
            sample: Some(&sample),
            standardization: Some(&standardization),
        };
        inputs.extend(assay_run(
            &format!("AS-{sample}"),
            &links,
            concentration,
            &mut clock,
            generator,
        ));
    }
    inputs
}

/// A weighing by difference on a 0.1 mg balance.
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
    weighing_shown(
        run,
        replicate,
        portion,
        balance,
        grams(before_tenth_mg),
        grams(before_tenth_mg - net_tenth_mg),
        clock,
        minutes,
    )
}

/// Three titrations of about 0.25 g sodium oxalate with the titrant weighed by difference.
fn standardization_run(
    run: &str,
    links: &RunLinks<'_>,
    concentration: f64,
    clock: &mut BenchTime,
    generator: &mut Generator,
) -> Vec<Input> {
    let mut inputs = vec![run_input(run, RunKind::Standardization, links, clock)];
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
        inputs.push(replicate_input(run, number, STANDARDIZATION_ENDPOINT));
        bottle -= portion;
    }
    inputs
}

/// Three titrations of about 0.15 g of a 29–31 % peroxide sample.
fn assay_run(
    run: &str,
    links: &RunLinks<'_>,
    concentration: f64,
    clock: &mut BenchTime,
    generator: &mut Generator,
) -> Vec<Input> {
    let mut inputs = vec![run_input(run, RunKind::Assay, links, clock)];
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
        inputs.push(replicate_input(run, number, ASSAY_ENDPOINT));
        vial -= portion;
    }
    inputs
}

// ---------------------------------------------------------------------------------------------
// Realistic style

/// The 360-day cycle of calibrations and reference lots that day `day` falls in.
fn cycle_of_day(day: u64) -> u64 {
    day / RECALIBRATION_DAYS
}

/// The date a cycle's calibrations were performed and its lots received: the day before the
/// first working day for the first cycle, the cycle's first day for the others.
fn cycle_start_date(cycle: u64) -> chrono::NaiveDate {
    if cycle == 0 {
        date_of_day(0) - chrono::Days::new(1)
    } else {
        date_of_day(cycle * RECALIBRATION_DAYS)
    }
}

fn realistic_lot_id(cycle: u64, lot: u64) -> String {
    format!("NOX-C{:02}-{:03}", cycle + 1, lot + 1)
}

/// The calibrations of both balances and the new reference lots of `cycle`.
fn cycle_inputs(cycle: u64) -> Vec<Input> {
    let performed = cycle_start_date(cycle);
    let due = performed + chrono::Days::new(CERTIFICATE_DAYS);
    let lots_until = performed + chrono::Days::new(LOT_VALID_DAYS);
    let mut inputs: Vec<Input> = [PORTION_BALANCE, TITRANT_BALANCE]
        .into_iter()
        .map(|balance| {
            calibration(
                balance,
                format!("QCAL-{balance}-C{:02}", cycle + 1),
                performed.to_string(),
                due.to_string(),
                &HUNDREDTH_MG_BALANCE,
            )
        })
        .collect();
    for lot in 0..LOTS {
        inputs.push(reference_lot(
            realistic_lot_id(cycle, lot),
            7001 + cycle * LOTS + lot,
            lots_until.to_string(),
        ));
    }
    inputs
}

/// The balances, their first calibrations and the first reference lots.
fn realistic_setup() -> Vec<Input> {
    let mut inputs = Vec::from(balances(&HUNDREDTH_MG_BALANCE));
    inputs.extend(cycle_inputs(0));
    inputs
}

/// The start of day `day`: the calibrations and new lots when a cycle begins, then a passing
/// routine check of each balance with a 50 g test weight before the day's first run.
fn day_opening(day: u64, generator: &mut Generator) -> Batch {
    let mut inputs = Vec::new();
    if day > 0 && day % RECALIBRATION_DAYS == 0 {
        inputs.extend(cycle_inputs(cycle_of_day(day)));
    }
    let first_run = FIRST_DAY_MICROS + day as i64 * DAY_MICROS;
    let mut last_observation = Timestamp(first_run);
    for (balance, lead) in [PORTION_BALANCE, TITRANT_BALANCE]
        .into_iter()
        .zip(CHECK_LEAD_MINUTES)
    {
        let at = Timestamp(first_run - lead * MINUTE_MICROS);
        // 50.00003 g conventional mass; the display within ±0.04 mg of it.
        let shown = 5_000_003u64.saturating_add_signed(generator.around_zero(4));
        inputs.push(Input::BalanceCheck {
            balance: balance.into(),
            test_weight: "50 g class E2, set W-12".into(),
            reference_mass: "50.00003 g".into(),
            reading: grams_5(shown),
            at: time_text(at),
        });
        last_observation = at;
    }
    Batch {
        inputs,
        last_observation,
    }
}

/// Relative deviations of a run's three replicates from the true value: one low and one high
/// by `spread_ppm` plus up to as much again (parts per million), one within three tenths of
/// that around the middle, in a random order. Such replicates meet any RSD limit above twice
/// the largest spread and never look like outliers to Grubbs or Dixon at n = 3.
fn scatter(generator: &mut Generator, spread_ppm: u64) -> [f64; 3] {
    let spread = (spread_ppm + generator.below(spread_ppm + 1)) as f64 / 1e6;
    let middle = generator.around_zero(3) as f64 / 10.0 * spread;
    let mut deviations = [-spread, middle, spread];
    deviations.rotate_left(generator.below(3) as usize);
    if generator.below(2) == 1 {
        deviations.reverse();
    }
    deviations
}

/// A titrant's work in the realistic style: one batch per replicate, the titrant (or the
/// sample) and the run entered with the first.
fn realistic_titrant(titrant: u64, generator: &mut Generator) -> Vec<Batch> {
    let (day, mut clock) = titrant_start(titrant);
    let titrant_id = format!("KMN-{:05}", titrant + 1);
    let titrant_entry = titrant_input(&titrant_id, &clock);
    let concentration = true_concentration(generator);
    let standardization = format!("STD-{titrant_id}");
    let lot = realistic_lot_id(cycle_of_day(day), titrant % LOTS);
    let links = RunLinks {
        titrant: &titrant_id,
        lot: Some(&lot),
        sample: None,
        standardization: None,
    };
    let mut batches = realistic_run(
        &standardization,
        RunKind::Standardization,
        &links,
        concentration,
        &mut clock,
        generator,
    );
    batches[0].inputs.insert(0, titrant_entry);
    for assay in 0..ASSAYS_PER_TITRANT {
        let (sample, sample_entry) = sample_input(titrant, assay, &mut clock);
        let links = RunLinks {
            titrant: &titrant_id,
            lot: None,
            sample: Some(&sample),
            standardization: Some(&standardization),
        };
        let mut run = realistic_run(
            &format!("AS-{sample}"),
            RunKind::Assay,
            &links,
            concentration,
            &mut clock,
            generator,
        );
        run[0].inputs.insert(0, sample_entry);
        batches.extend(run);
    }
    batches
}

/// One run on 0.01 mg balances, one batch per replicate (the run entry with the first):
/// about 0.25 g sodium oxalate titrated hot, or about 0.15 g of a 29.2–30.8 % peroxide sample
/// titrated cold, the titrant from a weighed dropping bottle.
fn realistic_run(
    run: &str,
    kind: RunKind,
    links: &RunLinks<'_>,
    concentration: f64,
    clock: &mut BenchTime,
    generator: &mut Generator,
) -> Vec<Batch> {
    let standardization = kind == RunKind::Standardization;
    let mut pending = vec![run_input(run, kind, links, clock)];
    // Peroxide mass fraction of the sample (a standardization needs none).
    let content = 0.30 + generator.around_zero(80) as f64 / 10_000.0;
    let deviations = if standardization {
        scatter(generator, 300)
    } else {
        scatter(generator, 500)
    };
    // A weighing bottle or vial of 10–90 g with what is left of the material.
    let mut vessel = 1_000_000 + generator.below(8_000_000);
    let mut batches = Vec::new();
    for (number, deviation) in (1..=REPLICATES).zip(deviations) {
        let (portion, portion_kind, moles_titrant, titration_minutes, endpoint) = if standardization
        {
            let portion = 23_500 + generator.below(3_000);
            let moles = portion as f64 / 100_000.0 * LOT_PURITY / OXALATE_MOLAR_MASS * 0.4;
            (
                portion,
                Portion::PrimaryStandard,
                moles,
                12,
                STANDARDIZATION_ENDPOINT,
            )
        } else {
            let portion = 14_000 + generator.below(2_000);
            let moles = portion as f64 / 100_000.0 * content / PEROXIDE_MOLAR_MASS * 0.4;
            (portion, Portion::Sample, moles, 7, ASSAY_ENDPOINT)
        };
        // Titrant mass giving this replicate's value `deviation` away from the true one.
        let titrant_mass =
            to_hundredth_mg(moles_titrant / concentration * 1000.0 / (1.0 + deviation));
        let dropping_bottle = 10_000_000 + generator.below(5_000_000);
        pending.push(weighing_shown(
            run,
            number,
            portion_kind,
            PORTION_BALANCE,
            grams_5(vessel),
            grams_5(vessel - portion),
            clock,
            1,
        ));
        pending.push(weighing_shown(
            run,
            number,
            Portion::Titrant,
            TITRANT_BALANCE,
            grams_5(dropping_bottle),
            grams_5(dropping_bottle - titrant_mass),
            clock,
            titration_minutes,
        ));
        pending.push(replicate_input(run, number, endpoint));
        vessel -= portion;
        batches.push(Batch {
            inputs: std::mem::take(&mut pending),
            last_observation: clock.at,
        });
    }
    batches
}
