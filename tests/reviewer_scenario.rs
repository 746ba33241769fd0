//! The reviewer scenario end to end through the real `assize` binary: a clean standardization
//! and assay pass replay and are reviewed and approved; the same work with one copying
//! slip, one expired reference standard, one unsigned correction and one self-review produces
//! exactly those four findings, and approval is refused until the approver records a
//! justification, which replay then shows as its own finding.
//!
//! Each case builds a fresh ledger in a temp dir through the command line, with observation
//! times a few minutes before now: the tool records entries with the system clock, and the lab
//! policy flags entries recorded more than 30 min after what they observe and wants a passing
//! balance check earlier the same UTC day. The two entries no honest use of the command line can
//! write are written the way another program would: the unsigned correction as a raw row through
//! the ledger's storage layer (chained and hashed, no signer, no signature), and the self-review
//! through the ledger library, because `assize sign` refuses it. Both bodies are the real
//! `assize_verify::records::{Correction, SignOff}` records.
//!
//! All data is invented. Stoichiometry 2 MnO4- : 5 C2O4^2- and 2 MnO4- : 5 H2O2: common practice
//! / REFERENCES.md §7. Atomic weights used to choose the readings: CIAAW 2021 abridged values as
//! listed in REFERENCES.md §6. Minimum weight: USP <41>, REFERENCES.md §2.

mod common;

use assize_ledger::keyfile::unlock_key_file;
use assize_ledger::store::{EntryFilter, Store};
use assize_ledger::{Clock, Draft, Entry, EntryHash, Ledger, OpenMode, SystemClock, Timestamp};
use assize_verify::records::{Correction, Meaning, SignOff};
use common::assize_binary;
use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::sync::Arc;
use tempfile::TempDir;

// ---------------------------------------------------------------------------------------------
// The invented lab: people, materials, documents.
// ---------------------------------------------------------------------------------------------

const PASSPHRASE: &str = "reviewer scenario passphrase";
const LEDGER: &str = "lab.ledger";

const QA: &str = "q.harrowby";
const ANALYST: &str = "t.brenneval";
const REVIEWER: &str = "r.castellane";
/// Does the third assay replicate, and is later moved to the reviewer role.
const SECOND_ANALYST: &str = "s.dunmore";

const BALANCE: &str = "B7-SMX";
const LOT: &str = "OXS-TEST-17";
const TITRANT: &str = "PMG-0042";
const SAMPLE: &str = "HPX-0917";
const STANDARDIZATION: &str = "STD-PMG-0042-A";
const ASSAY: &str = "AS-HPX-0917-1";

/// End point as the analyst writes it, and as the unsigned correction rewrites it (same length,
/// so the corrected copy of the replicate's body differs in those characters only).
const ENDPOINT: &str = "faint pink persisting 30 s, titrated cold";
const CORRECTED_ENDPOINT: &str = "faint pink persisting 20 s, titrated cold";

const JUSTIFICATION: &str =
    "released for the stability study only; findings referred to QA deviation DV-0311";

const MINUTE_MICROS: i64 = 60_000_000;
const DAY_MICROS: i64 = 86_400_000_000;

/// Masses in units of the balance's readability, 0.00001 g.
type Units = i64;

/// Sodium oxalate portions weighed by difference (≈ 0.25 g, the method's `portion_g`) and the
/// titrant delivered to each (≈ 37 g). The titrant masses were chosen for c = 0.020012,
/// 0.020016 and 0.020008 mol/kg from c = m·P/M(Na2C2O4)·(2/5)/(m_T/1000) with P = 0.99965 and
/// M(Na2C2O4) = 133.998 g/mol, then rounded to the readability: RSD ≈ 0.02 % (limit 0.2 %),
/// mean within 0.1 % of the nominal 0.02 (limit 10 %), Grubbs G = 1.0 (no outlier).
const STANDARD_NET: [(Units, Units); 3] = [
    (25_113, 3_744_706),
    (24_871, 3_707_879),
    (25_302, 3_773_643),
];
/// Peroxide portions (≈ 0.15 g) and titrant (≈ 26 g), chosen for w = 30.42, 30.44 and 30.40 %
/// from w = c·(m_T/1000)·(5/2)·M(H2O2)/m_S·100 with M(H2O2) = 34.0140 g/mol: RSD ≈ 0.07 %
/// (limit 0.5 %), mean inside the specification 29.0–32.0 %.
const ASSAY_NET: [(Units, Units); 3] = [
    (15_021, 2_685_158),
    (14_968, 2_677_443),
    (15_109, 2_699_113),
];

/// What differs between the two ledgers.
#[derive(Clone, Copy, PartialEq, Eq, Debug)]
enum Case {
    /// Everything in order.
    Clean,
    /// A transposed stated value and a reference lot that expired yesterday (the unsigned
    /// correction and the self-review are added after the build).
    Problem,
}

// ---------------------------------------------------------------------------------------------
// Running the binary.
// ---------------------------------------------------------------------------------------------

/// A temp dir holding the ledger, the key files and the passphrase file.
struct Bench {
    dir: TempDir,
}

impl Bench {
    fn new() -> Self {
        let dir = tempfile::tempdir().expect("temp dir");
        std::fs::write(dir.path().join("pass.txt"), format!("{PASSPHRASE}\n"))
            .expect("passphrase file");
        Bench { dir }
    }

    fn path(&self, name: &str) -> PathBuf {
        self.dir.path().join(name)
    }

    fn key(person: &str) -> String {
        format!("{person}.key")
    }

    /// Runs `assize` on this bench's ledger with the passphrase file.
    fn run(&self, args: &[&str]) -> Output {
        Command::new(assize_binary())
            .current_dir(self.dir.path())
            .args(["--ledger", LEDGER, "--passphrase-file", "pass.txt"])
            .args(args)
            .output()
            .expect("run assize")
    }

    /// Runs `assize` and insists on exit status 0; returns stdout.
    fn ok(&self, args: &[&str]) -> String {
        let out = self.run(args);
        assert!(
            out.status.success(),
            "assize {args:?} exited {:?}: {}",
            out.status.code(),
            String::from_utf8_lossy(&out.stderr)
        );
        String::from_utf8(out.stdout).expect("utf-8 output")
    }

    /// Runs `assize --json …` and insists on exit status 0.
    fn json(&self, args: &[&str]) -> Value {
        let text = self.ok(&[&["--json"], args].concat());
        serde_json::from_str(&text).expect("JSON output")
    }

    /// Runs `assize --json replay` whatever its exit status; returns (status, report).
    fn replay(&self) -> (i32, Value) {
        let out = self.run(&["--json", "replay"]);
        let text = String::from_utf8(out.stdout).expect("utf-8 output");
        let report = serde_json::from_str(&text).unwrap_or_else(|e| {
            panic!(
                "replay --json printed no JSON ({e}): {text}\nstderr: {}",
                String::from_utf8_lossy(&out.stderr)
            )
        });
        (out.status.code().expect("exit status"), report)
    }

    fn import(&self, name: &str, batch: &str, person: &str) {
        std::fs::write(self.path(name), batch).expect("write batch file");
        self.ok(&["import", name, "--key", &Self::key(person)]);
    }
}

/// Exit status and stderr of a command expected to fail.
fn refused(out: &Output) -> (i32, String) {
    assert!(
        !out.status.success(),
        "expected a refusal, got success: {}",
        String::from_utf8_lossy(&out.stdout)
    );
    (
        out.status.code().expect("exit status"),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

/// The finding codes of a `replay --json` report, sorted (a multiset).
fn codes(report: &Value) -> Vec<String> {
    let mut codes: Vec<String> = findings(report)
        .iter()
        .map(|f| f["code"].as_str().expect("code text").to_string())
        .collect();
    codes.sort();
    codes
}

fn findings(report: &Value) -> &Vec<Value> {
    report["findings"].as_array().expect("findings array")
}

/// The one finding with `code`.
fn finding<'a>(report: &'a Value, code: &str) -> &'a Value {
    let matching: Vec<&Value> = findings(report)
        .iter()
        .filter(|f| f["code"] == code)
        .collect();
    assert_eq!(matching.len(), 1, "one {code} expected: {report:#}");
    matching[0]
}

fn message(finding: &Value) -> &str {
    finding["message"].as_str().expect("message text")
}

/// A JSON number, or a decimal written as a string.
fn number(value: &Value) -> f64 {
    match value {
        Value::String(s) => s.parse().expect("decimal text"),
        other => other.as_f64().expect("a number"),
    }
}

/// A decimal exactly as the tool wrote it.
fn decimal_text(value: &Value) -> String {
    match value {
        Value::String(s) => s.clone(),
        other => panic!("expected a decimal written as text, got {other}"),
    }
}

// ---------------------------------------------------------------------------------------------
// Times relative to now.
// ---------------------------------------------------------------------------------------------

/// `n` observation times in order, between max(now − 25 min, today 00:00 UTC) and now − 30 s,
/// to the millisecond; and now.
fn observation_times(n: usize) -> (Vec<Timestamp>, Timestamp) {
    loop {
        let now = SystemClock.now().0;
        let midnight = now - now.rem_euclid(DAY_MICROS);
        let start = (now - 25 * MINUTE_MICROS).max(midnight);
        let end = now - 30_000_000;
        if end - start < 60_000_000 {
            // Just after midnight UTC: wait until the day has room for the whole run.
            let wait = (midnight + 95_000_000 - now).max(1_000_000);
            std::thread::sleep(std::time::Duration::from_micros(wait as u64));
            continue;
        }
        let step = (end - start) / (n as i64 - 1);
        let times = (0..n as i64)
            .map(|i| Timestamp((start + i * step) / 1000 * 1000))
            .collect();
        return (times, Timestamp(now));
    }
}

/// RFC 3339 in UTC (the ledger's own text form: `…Z`, fractions when there are any).
fn rfc3339(at: Timestamp) -> String {
    at.to_string()
}

/// `YYYY-MM-DD` of the UTC day `days` after `at`.
fn date(at: Timestamp, days: i64) -> String {
    rfc3339(Timestamp(at.0 + days * DAY_MICROS))[..10].to_string()
}

// ---------------------------------------------------------------------------------------------
// Batch files.
// ---------------------------------------------------------------------------------------------

fn grams(units: Units) -> String {
    format!("{}.{:05} g", units / 100_000, units % 100_000)
}

fn quoted(text: &str) -> String {
    assert!(!text.contains(['"', '\\']), "plain text only: {text}");
    format!("\"{text}\"")
}

/// A batch file under construction: `[[record]]` tables in order.
#[derive(Default)]
struct Batch(String);

impl Batch {
    /// Appends one record; string values are quoted, `Raw` ones written as they are.
    fn record(&mut self, kind: &str, fields: &[(&str, Field)]) {
        self.0
            .push_str(&format!("[[record]]\nkind = {}\n", quoted(kind)));
        for (name, value) in fields {
            let value = match value {
                Field::Text(t) => quoted(t),
                Field::Raw(r) => r.clone(),
            };
            self.0.push_str(&format!("{name} = {value}\n"));
        }
        self.0.push('\n');
    }

    /// A weighing by difference on the lab's balance: `first` then `first − net`.
    fn weighing(
        &mut self,
        run: &str,
        replicate: u32,
        portion: &str,
        (first, net): (Units, Units),
        (first_at, second_at): (Timestamp, Timestamp),
    ) {
        self.record(
            "weighing",
            &[
                ("run", text(run)),
                ("replicate", Field::Raw(replicate.to_string())),
                ("portion", text(portion)),
                ("balance", text(BALANCE)),
                ("mode", text("by-difference")),
                ("first", text(&grams(first))),
                ("first_at", text(&rfc3339(first_at))),
                ("second", text(&grams(first - net))),
                ("second_at", text(&rfc3339(second_at))),
            ],
        );
    }

    fn replicate(&mut self, run: &str, number: u32) {
        self.record(
            "replicate",
            &[
                ("run", text(run)),
                ("number", Field::Raw(number.to_string())),
                ("endpoint", text(ENDPOINT)),
            ],
        );
    }
}

enum Field {
    Text(String),
    Raw(String),
}

fn text(value: &str) -> Field {
    Field::Text(value.to_string())
}

/// The bench work of both runs: everything the first analyst records, and the third assay
/// replicate, recorded by the second analyst.
fn bench_batches(case: Case) -> (String, String) {
    // Times: the balance check, the standardization's start and its 12 readings, the assay's
    // start and its 12 readings.
    let (t, now) = observation_times(27);
    let mut next = t.into_iter();
    let mut at = || next.next().expect("enough observation times");
    let mut main = Batch::default();
    main.record(
        "balance",
        &[
            ("id", text(BALANCE)),
            ("description", text("semi-micro balance, room 7, bench 2")),
            ("readability", text("0.00001 g")),
            ("capacity", text("220 g")),
            // USP <41> (REFERENCES.md §2): 2000 × max(s, 0.41 d) = 820 d = 8.2 mg for d = 0.01 mg,
            // s (repeatability_sd below) being under 0.41 d.
            ("minimum_weight", text("0.0082 g")),
        ],
    );
    main.record(
        "calibration",
        &[
            ("balance", text(BALANCE)),
            ("certificate", text("CAL-B7-0042")),
            ("performed_on", text(&date(now, -120))),
            ("due_on", text(&date(now, 245))),
            ("passed", Field::Raw("true".into())),
            ("repeatability_sd", text("0.000004 g")),
            ("sensitivity_relative_u", text("0.000005")),
        ],
    );
    main.record(
        "balance-check",
        &[
            ("balance", text(BALANCE)),
            ("test_weight", text("W-E2-200G-03")),
            ("reference_mass", text("200.00021 g")),
            ("reading", text("200.00029 g")),
            ("at", text(&rfc3339(at()))),
        ],
    );
    let valid_until = match case {
        Case::Clean => date(now, 400),
        // Expired at the time of use: the certificate ran out yesterday.
        Case::Problem => date(now, -1),
    };
    main.record(
        "reference-lot",
        &[
            ("id", text(LOT)),
            ("substance", text("sodium oxalate")),
            ("formula", text("Na2C2O4")),
            ("purity", text("0.99965")),
            ("purity_expanded_u", text("0.00024")),
            ("coverage_factor", text("2")),
            ("certificate", text("RMC-OX-3301")),
            ("valid_until", text(&valid_until)),
            ("drying", text("2 h at 110 C, cooled in desiccator")),
        ],
    );
    main.record(
        "titrant",
        &[
            ("id", text(TITRANT)),
            ("formula", text("KMnO4")),
            ("nominal_concentration", text("0.02")),
            ("prepared_on", text(&date(now, -2))),
            ("valid_until", text(&date(now, 60))),
        ],
    );
    main.record(
        "sample",
        &[
            ("id", text(SAMPLE)),
            (
                "description",
                text("hydrogen peroxide about 30 %, test drum 2"),
            ),
            (
                "received_at",
                text(&rfc3339(Timestamp(now.0 - 26 * 60 * MINUTE_MICROS))),
            ),
        ],
    );
    main.record(
        "run",
        &[
            ("id", text(STANDARDIZATION)),
            ("run_kind", text("standardization")),
            ("method", text("QAL-M-014")),
            ("policy", text("QAL-POL-001")),
            ("titrant", text(TITRANT)),
            ("reference_lot", text(LOT)),
            ("started_at", text(&rfc3339(at()))),
        ],
    );
    // One weighing bottle of oxalate weighed down replicate after replicate; the titrant bottle
    // refilled before the third replicate.
    let mut oxalate: Units = 1_841_273;
    let mut bottle: Units = 11_253_214;
    for (i, (standard, titrant)) in STANDARD_NET.into_iter().enumerate() {
        let number = i as u32 + 1;
        if number == 3 {
            bottle = 11_408_771;
        }
        main.weighing(
            STANDARDIZATION,
            number,
            "primary-standard",
            (oxalate, standard),
            (at(), at()),
        );
        main.weighing(
            STANDARDIZATION,
            number,
            "titrant",
            (bottle, titrant),
            (at(), at()),
        );
        main.replicate(STANDARDIZATION, number);
        oxalate -= standard;
        bottle -= titrant;
    }
    main.record(
        "run",
        &[
            ("id", text(ASSAY)),
            ("run_kind", text("assay")),
            ("method", text("QAL-M-014")),
            ("policy", text("QAL-POL-001")),
            ("titrant", text(TITRANT)),
            ("sample", text(SAMPLE)),
            ("standardization", text(STANDARDIZATION)),
            ("started_at", text(&rfc3339(at()))),
        ],
    );
    let mut third = Batch::default();
    let mut peroxide: Units = 988_417;
    let mut bottle: Units = 11_094_102;
    for (i, (portion, titrant)) in ASSAY_NET.into_iter().enumerate() {
        let number = i as u32 + 1;
        let batch = if number == 3 { &mut third } else { &mut main };
        if number == 3 {
            bottle = 11_177_253;
        }
        batch.weighing(ASSAY, number, "sample", (peroxide, portion), (at(), at()));
        batch.weighing(ASSAY, number, "titrant", (bottle, titrant), (at(), at()));
        batch.replicate(ASSAY, number);
        peroxide -= portion;
        bottle -= titrant;
    }
    (main.0, third.0)
}

/// The worksheet: each replicate's value and the final value as recomputed, correctly rounded,
/// and the reported result as the tool rounds it. In the problem case the first assay
/// replicate's content is written with its last two digits swapped.
fn worksheet_batch(bench: &Bench, case: Case) -> String {
    let standardization = bench.json(&["recompute", STANDARDIZATION]);
    let assay = bench.json(&["recompute", ASSAY]);
    let mut batch = Batch::default();
    let stated = |batch: &mut Batch, run: &str, replicate: Option<u64>, q: &str, v: &str, u| {
        let mut fields = vec![("run", text(run))];
        if let Some(n) = replicate {
            fields.push(("replicate", Field::Raw(n.to_string())));
        }
        fields.extend([("quantity", text(q)), ("value", text(v)), ("unit", text(u))]);
        batch.record("stated", &fields);
    };
    let outcome = &standardization["outcome"];
    assert_eq!(outcome["unit"], "mol/kg", "{standardization:#}");
    for row in outcome["replicates"].as_array().expect("replicates") {
        let value = format!("{:.6}", number(&row["value"]));
        let n = row["number"].as_u64().expect("replicate number");
        stated(
            &mut batch,
            STANDARDIZATION,
            Some(n),
            "concentration",
            &value,
            "mol/kg",
        );
    }
    let mean = format!("{:.6}", number(&outcome["mean"]));
    stated(
        &mut batch,
        STANDARDIZATION,
        None,
        "concentration",
        &mean,
        "mol/kg",
    );

    let outcome = &assay["outcome"];
    assert_eq!(outcome["unit"], "%", "{assay:#}");
    for row in outcome["replicates"].as_array().expect("replicates") {
        let mut value = format!("{:.2}", number(&row["value"]));
        let n = row["number"].as_u64().expect("replicate number");
        if case == Case::Problem && n == 1 {
            value = transposed(&value);
        }
        stated(&mut batch, ASSAY, Some(n), "content", &value, "%");
    }
    let mean = format!("{:.2}", number(&outcome["mean"]));
    stated(&mut batch, ASSAY, None, "content", &mean, "%");
    let reported = &outcome["reported"];
    batch.record(
        "result",
        &[
            ("run", text(ASSAY)),
            ("value", text(&decimal_text(&reported["value"]))),
            (
                "expanded_uncertainty",
                text(&decimal_text(&reported["expanded_uncertainty"])),
            ),
            ("unit", text("%")),
        ],
    );
    batch.0
}

/// The last two digits swapped: the copying slip (they must differ, or nothing slipped).
fn transposed(value: &str) -> String {
    let mut chars: Vec<char> = value.chars().collect();
    let n = chars.len();
    assert_ne!(chars[n - 1], chars[n - 2], "{value}: no slip to make");
    chars.swap(n - 1, n - 2);
    chars.into_iter().collect()
}

/// A ledger with both runs, their worksheet values and the result, entered through the CLI;
/// the second analyst moved to the reviewer role afterwards.
fn build(case: Case) -> Bench {
    let bench = Bench::new();
    for person in [QA, ANALYST, REVIEWER, SECOND_ANALYST] {
        bench.ok(&[
            "key",
            "new",
            "--person",
            person,
            "--out",
            &Bench::key(person),
            "--kdf-memory-mib",
            "8",
        ]);
    }
    let qa_key = Bench::key(QA);
    bench.ok(&[
        "create",
        "--lab",
        "Fenwhistle Assay Laboratory",
        "--name",
        "Quilla Harrowby",
        "--key",
        &qa_key,
    ]);
    for (person, name, role) in [
        (ANALYST, "Tamsin Brenneval", "analyst"),
        (REVIEWER, "Renske Castellane", "reviewer"),
        (SECOND_ANALYST, "Sefa Dunmore", "analyst"),
    ] {
        bench.ok(&[
            "person",
            "enrol",
            "--id",
            person,
            "--name",
            name,
            "--role",
            role,
            "--from-key-file",
            &Bench::key(person),
            "--key",
            &qa_key,
        ]);
    }
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let method = root.join("policies/permanganate-peroxide.toml");
    let policy = root.join("policies/lab-policy.toml");
    for (flag, file) in [("--method", &method), ("--policy", &policy)] {
        let file = file.to_str().expect("utf-8 path");
        bench.ok(&["adopt", flag, file, "--key", &qa_key]);
    }
    let (main, third) = bench_batches(case);
    bench.import("bench.toml", &main, ANALYST);
    bench.import("third-replicate.toml", &third, SECOND_ANALYST);
    let worksheet = worksheet_batch(&bench, case);
    bench.import("worksheet.toml", &worksheet, ANALYST);
    bench.ok(&[
        "person",
        "change-role",
        "--id",
        SECOND_ANALYST,
        "--role",
        "reviewer",
        "--reason",
        "completed reviewer training",
        "--key",
        &qa_key,
    ]);
    bench
}

// ---------------------------------------------------------------------------------------------
// What another program writes: a raw row, a library append.
// ---------------------------------------------------------------------------------------------

/// The `lab.run` entry of `run_id`.
fn run_entry(store: &Store, run_id: &str) -> Entry {
    let filter = EntryFilter {
        kind: Some("lab.run".into()),
        ..EntryFilter::default()
    };
    let mut runs: Vec<Entry> = store
        .find(&filter, 100)
        .expect("list runs")
        .into_iter()
        .filter(|e| contains(&e.body, run_id.as_bytes()))
        .collect();
    assert_eq!(runs.len(), 1, "one run {run_id}");
    runs.remove(0)
}

fn contains(haystack: &[u8], needle: &[u8]) -> bool {
    haystack.windows(needle.len()).any(|w| w == needle)
}

/// Appends, as the next row, a `lab.correction` of the first assay replicate's end point note
/// claiming the analyst as author, correctly chained and hashed but with no signer and no
/// signature: what a program writing the file without the author's key leaves behind.
/// Returns its sequence number.
fn forge_unsigned_correction(bench: &Bench) -> u64 {
    let mut store = Store::open(&bench.path(LEDGER), OpenMode::ReadWrite).expect("open store");
    let assay = run_entry(&store, ASSAY);
    let filter = EntryFilter {
        kind: Some("lab.replicate".into()),
        after_seq: assay.seq,
        ..EntryFilter::default()
    };
    let target = store
        .find(&filter, 100)
        .expect("list replicates")
        .into_iter()
        .find(|e| e.references.first() == Some(&assay.hash))
        .expect("first assay replicate");
    assert_eq!(target.author, ANALYST);
    // The corrected copy: the same record with only the end point text changed.
    let at = target
        .body
        .windows(ENDPOINT.len())
        .position(|w| w == ENDPOINT.as_bytes())
        .expect("end point text in the replicate's body");
    let mut replacement = target.body.clone();
    replacement[at..at + ENDPOINT.len()].copy_from_slice(CORRECTED_ENDPOINT.as_bytes());
    let draft = Draft::of_record(
        ANALYST,
        &Correction {
            supersedes: target.hash,
            kind: "lab.replicate".into(),
            replacement,
            reason: "end point held 20 s, misread from the bench timer".into(),
        },
    )
    .expect("encode the correction");
    let tx = store.begin_append().expect("write lock");
    let head = tx.head().expect("head").expect("a head");
    let mut entry = Entry {
        seq: head.seq + 1,
        prev_hash: head.hash,
        record_time: SystemClock.now().max(head.record_time),
        author: draft.author,
        kind: draft.kind,
        references: draft.references,
        body: draft.body,
        signer: None,
        signature: None,
        hash: EntryHash::ZERO,
    };
    entry.hash = entry.compute_hash();
    tx.insert(&entry).expect("insert the unsigned row");
    tx.commit().expect("commit");
    entry.seq
}

/// Appends through the ledger library a `lab.sign-off` (reviewed) of the assay run by the second
/// analyst, now a reviewer, who recorded its third replicate. Returns its sequence number.
fn append_self_review(bench: &Bench, report_sha256: &str) -> u64 {
    let path = bench.path(LEDGER);
    let mut ledger = Ledger::open(
        &path,
        OpenMode::ReadWrite,
        assize_verify::kind_rules(),
        Arc::new(SystemClock),
    )
    .expect("open ledger");
    let signer = unlock_key_file(&bench.path(&Bench::key(SECOND_ANALYST)), PASSPHRASE)
        .expect("unlock the second analyst's key file");
    let assay = run_entry(ledger.store(), ASSAY);
    let head = ledger.head().expect("head").expect("a head");
    // Built directly: `assize_verify::signoff::prepare`, which the CLI uses, refuses it.
    let draft = Draft::of_record(
        SECOND_ANALYST,
        &SignOff {
            subject: assay.hash,
            meaning: Meaning::Reviewed,
            based_on_seq: head.seq,
            based_on: head.hash,
            report_sha256: Some(report_sha256.to_string()),
            comment: "checked against the worksheet".into(),
            justification: String::new(),
        },
    )
    .expect("encode the sign-off");
    let entry = ledger
        .append(draft, Some(&signer))
        .expect("the library appends what the CLI refuses");
    assert!(entry.signature.is_some());
    entry.seq
}

/// `assize --json exceptions ASSAY`: the report and its SHA-256 (whatever the exit status; it is
/// 2 while the chain has an integrity problem).
fn exceptions(bench: &Bench) -> (String, Value) {
    let out = bench.run(&["--json", "exceptions", ASSAY]);
    let text = String::from_utf8(out.stdout).expect("utf-8 output");
    let printed: Value = serde_json::from_str(&text).unwrap_or_else(|e| {
        panic!(
            "exceptions --json printed no JSON ({e}): {text}\nstderr: {}",
            String::from_utf8_lossy(&out.stderr)
        )
    });
    let sha = printed["report_sha256"]
        .as_str()
        .expect("report_sha256")
        .to_string();
    assert_eq!(sha.len(), 64, "{sha}");
    assert!(sha.chars().all(|c| c.is_ascii_hexdigit()), "{sha}");
    (sha, printed["report"].clone())
}

// ---------------------------------------------------------------------------------------------
// The scenario.
// ---------------------------------------------------------------------------------------------

#[test]
fn a_clean_run_passes_replay_and_is_reviewed_and_approved() {
    let bench = build(Case::Clean);
    let (status, report) = bench.replay();
    assert_eq!(findings(&report), &Vec::<Value>::new(), "{report:#}");
    assert_eq!(status, 0, "{report:#}");

    // Whoever did work on the run cannot sign it.
    for person in [ANALYST, SECOND_ANALYST] {
        let out = bench.run(&[
            "sign",
            ASSAY,
            "--meaning",
            "reviewed",
            "--key",
            &Bench::key(person),
        ]);
        let (status, stderr) = refused(&out);
        assert_eq!(status, 4, "{stderr}");
        assert!(
            stderr.contains(person) && stderr.contains("did work on run"),
            "{stderr}"
        );
    }

    let (sha, exceptions) = exceptions(&bench);
    assert_eq!(exceptions["chain_intact"], true, "{exceptions:#}");
    assert_eq!(exceptions["tally"]["blocking"], 0, "{exceptions:#}");
    let reviewer_key = Bench::key(REVIEWER);
    let reviewed = bench.json(&[
        "sign",
        ASSAY,
        "--meaning",
        "reviewed",
        "--report-sha256",
        &sha,
        "--key",
        &reviewer_key,
    ]);
    assert_eq!(reviewed["meaning"], "reviewed", "{reviewed:#}");
    assert_eq!(reviewed["report_sha256"], sha.as_str(), "{reviewed:#}");
    let approved = bench.json(&[
        "sign",
        ASSAY,
        "--meaning",
        "approved",
        "--key",
        &reviewer_key,
    ]);
    assert_eq!(approved["meaning"], "approved", "{approved:#}");
    assert_eq!(approved["justification"], "", "{approved:#}");

    let (status, report) = bench.replay();
    assert_eq!(findings(&report), &Vec::<Value>::new(), "{report:#}");
    assert_eq!(status, 0, "{report:#}");
}

#[test]
fn a_slip_an_expired_standard_an_unsigned_correction_and_a_self_review_are_found_and_block_approval(
) {
    let bench = build(Case::Problem);
    // The slip and the expired lot are in the data as entered.
    let (status, report) = bench.replay();
    assert_eq!(codes(&report), ["CALC-01", "MAT-01"], "{report:#}");
    assert_eq!(status, 1, "blocking findings, chain intact: {report:#}");

    let correction_seq = forge_unsigned_correction(&bench);

    // The second analyst, now a reviewer, recorded the third replicate: the CLI refuses.
    let out = bench.run(&[
        "sign",
        ASSAY,
        "--meaning",
        "reviewed",
        "--key",
        &Bench::key(SECOND_ANALYST),
    ]);
    let (status, stderr) = refused(&out);
    assert_eq!(status, 4, "{stderr}");
    assert!(
        stderr.contains(SECOND_ANALYST) && stderr.contains("did work on run"),
        "{stderr}"
    );
    // The reviewer's exception report shows the correction, unsigned, with what it changed.
    let (sha, exceptions) = exceptions(&bench);
    assert_eq!(exceptions["chain_intact"], false, "{exceptions:#}");
    let corrections = exceptions["corrections"].as_array().expect("corrections");
    assert_eq!(corrections.len(), 1, "{exceptions:#}");
    let correction = &corrections[0];
    assert_eq!(correction["entry"]["seq"].as_u64(), Some(correction_seq));
    assert_eq!(correction["signed"], false, "{correction:#}");
    assert_eq!(correction["kind"], "lab.replicate", "{correction:#}");
    let changed: Vec<&str> = correction["changes"]
        .as_array()
        .expect("changes")
        .iter()
        .map(|c| c["field"].as_str().expect("field name"))
        .collect();
    assert_eq!(changed, ["endpoint"], "{correction:#}");
    let self_review_seq = append_self_review(&bench, &sha);

    let (status, report) = bench.replay();
    assert_eq!(
        codes(&report),
        ["CALC-01", "INT-03", "MAT-01", "SOD-01"],
        "{report:#}"
    );
    assert_eq!(
        status, 2,
        "the unsigned entry is an integrity failure: {report:#}"
    );
    let slip = finding(&report, "CALC-01");
    assert_eq!(slip["run"], ASSAY, "{slip:#}");
    assert!(message(slip).contains("replicate 1"), "{slip:#}");
    let expired = finding(&report, "MAT-01");
    assert_eq!(expired["run"], STANDARDIZATION, "{expired:#}");
    assert!(message(expired).contains(LOT), "{expired:#}");
    let unsigned = finding(&report, "INT-03");
    let involved: Vec<u64> = unsigned["entries"]
        .as_array()
        .expect("entries")
        .iter()
        .map(|e| e["seq"].as_u64().expect("seq"))
        .collect();
    assert_eq!(involved, [correction_seq], "{unsigned:#}");
    let self_review = finding(&report, "SOD-01");
    assert_eq!(self_review["run"], ASSAY, "{self_review:#}");
    assert!(
        message(self_review).contains(SECOND_ANALYST),
        "{self_review:#}"
    );
    // It names the sign-off, and the three entries of the third replicate its signer recorded.
    assert!(
        message(self_review).contains("authored 3 "),
        "{self_review:#}"
    );
    let involved = self_review["entries"].as_array().expect("entries");
    assert!(
        involved
            .iter()
            .any(|e| e["seq"].as_u64() == Some(self_review_seq)),
        "{self_review:#}"
    );

    // Approval is refused while blocking findings stand, unless justified.
    let reviewer_key = Bench::key(REVIEWER);
    let out = bench.run(&[
        "sign",
        ASSAY,
        "--meaning",
        "approved",
        "--key",
        &reviewer_key,
    ]);
    let (status, stderr) = refused(&out);
    assert_eq!(status, 4, "{stderr}");
    assert!(
        stderr.contains("blocking finding") && stderr.contains("justification"),
        "{stderr}"
    );
    let approved = bench.json(&[
        "sign",
        ASSAY,
        "--meaning",
        "approved",
        "--justification",
        JUSTIFICATION,
        "--key",
        &reviewer_key,
    ]);
    assert_eq!(approved["justification"], JUSTIFICATION, "{approved:#}");

    let (status, report) = bench.replay();
    assert_eq!(
        codes(&report),
        ["CALC-01", "INT-03", "MAT-01", "SOD-01", "SOD-03"],
        "{report:#}"
    );
    assert_eq!(status, 2, "{report:#}");
    let over = finding(&report, "SOD-03");
    assert!(message(over).contains(REVIEWER), "{over:#}");
    assert!(message(over).contains(JUSTIFICATION), "{over:#}");
}
