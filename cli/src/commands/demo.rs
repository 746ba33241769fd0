//! `assize demo`: builds the invented demo lab's ledger from `samples/demo/` (embedded in the
//! binary) on the scenario's own clock, verifies it against the checkpoint written part-way,
//! validates it, writes the review dossier of one run and lists what to try next.
//!
//! `samples/demo/scenario.toml` names the people and the timed steps (enrolments, adoptions,
//! notes, a checkpoint, key and role changes, a batch import, single records, a correction, a
//! balance printout's capture, sign-offs) and the bench sheets in `samples/demo/runs/`, whose
//! records each carry the time the analyst entered them. Every step and sheet record is played
//! in order of its time, appended with a [`FixedClock`] set to that time, so the ledger's record
//! times are the scenario's and never the machine's. Everything goes through the same library
//! calls the other commands use; this module only reads the scenario and shows the outcome.

use crate::args::{Cli, DemoArgs};
use crate::failure::Failure;
use crate::html::dossier_page;
use crate::outfile::{write_whole, Existing};
use crate::output::{print_json, print_text};
use crate::render::{integrity_report, person_views, persons_table};
use crate::report::validation_text;
use crate::session::{kind_rules, role};
use crate::Outcome;
use assize_ledger::keyfile::{create_key_file, unlock_key_file};
use assize_ledger::records::{AddKey, ChangeRole, Enrolment, Note, RevokeKey};
use assize_ledger::replay::{Anchor, ReplayOptions};
use assize_ledger::{
    Checkpoint, Draft, EntryHash, FixedClock, KdfCost, Ledger, Record, Signer, Timestamp,
};
use assize_verify::capture_import::{self, CaptureError};
use assize_verify::catalog::{Catalog, LabBody};
use assize_verify::correction::correction_draft;
use assize_verify::dossier::{dossier, DossierError, DossierOptions, History};
use assize_verify::explain::Target;
use assize_verify::intake::{self, Batch, Input};
use assize_verify::printout::parse_printout;
use assize_verify::records::{
    DocumentKind, LabRecord, Meaning, Portion, Run, SignOff, Source, Weighing,
};
use assize_verify::signoff::{prepare, Request};
use assize_verify::validate::{replay, validate, Scope, ValidateError, Validation};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// The scenario and every file it names, by their paths in the repository.
const SCENARIO_PATH: &str = "samples/demo/scenario.toml";

macro_rules! embedded {
    ($($path:literal),* $(,)?) => {
        &[$(($path, include_str!(concat!("../../../", $path))),)*]
    };
}

/// Files the scenario names, embedded so the demo runs from the binary alone.
const EMBEDDED_FILES: &[(&str, &str)] = embedded![
    "samples/demo/scenario.toml",
    "policies/lab-policy.toml",
    "policies/permanganate-peroxide.toml",
    "policies/naoh-khp-acid.toml",
    "policies/edta-calcium.toml",
    "samples/demo/setup.toml",
    "samples/demo/printout-B2-AX-2026-11-17.txt",
    "samples/demo/runs/STD-KMN-2611-1-A.toml",
    "samples/demo/runs/AS-HP-26-1041-1.toml",
    "samples/demo/runs/STD-NAOH-2611-1-A.toml",
    "samples/demo/runs/AS-AA-26-0307-1.toml",
    "samples/demo/runs/STD-EDTA-2611-1-A.toml",
    "samples/demo/runs/AS-CC-26-0220-1.toml",
    "samples/demo/runs/STD-KMN-2611-1-B.toml",
    "samples/demo/runs/AS-HP-26-1058-1.toml",
    "samples/demo/runs/STD-NAOH-2611-1-B.toml",
    "samples/demo/runs/AS-AA-26-0315-1.toml",
    "samples/demo/runs/STD-EDTA-2611-1-B.toml",
    "samples/demo/runs/STD-KMN-2611-1-C.toml",
    "samples/demo/runs/AS-CC-26-0231-1.toml",
    "samples/demo/runs/STD-KMN-2611-1-D.toml",
    "samples/demo/runs/AS-HP-26-1072-1.toml",
    "samples/demo/runs/AS-HP-26-1077-1.toml",
    "samples/demo/runs/STD-EDTA-2611-1-C.toml",
    "samples/demo/runs/AS-CC-26-0240-1.toml",
];

/// Marks a directory as made by the demo, so a later demo may clear it.
const MARKER: &str = ".assize-demo";
/// What the demo writes into its directory (besides `keys/` and the dossier page).
const WRITTEN: [&str; 5] = [
    "demo.ledger",
    "demo.ledger-wal",
    "demo.ledger-shm",
    "demo.checkpoint",
    "passphrase.txt",
];

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct Scenario {
    lab: String,
    demo_passphrase: String,
    opened_at: String,
    dossier: String,
    person: Vec<DemoPerson>,
    sheets: Vec<String>,
    step: Vec<toml::Table>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct DemoPerson {
    id: String,
    name: String,
    role: String,
}

/// One step of the scenario, without its time (`at`), which every step carries.
#[derive(Deserialize)]
#[serde(tag = "do", rename_all = "kebab-case", deny_unknown_fields)]
enum Step {
    Enrol {
        by: String,
        person: String,
    },
    Note {
        by: String,
        text: String,
    },
    RevokeKey {
        by: String,
        person: String,
        reason: String,
    },
    AddKey {
        by: String,
        person: String,
        reason: String,
    },
    ChangeRole {
        by: String,
        person: String,
        role: String,
        reason: String,
    },
    Checkpoint {
        by: String,
    },
    Adopt {
        by: String,
        document: DocumentKind,
        file: String,
    },
    /// A batch file, in one transaction (the records get one-second steps of the clock).
    Import {
        by: String,
        file: String,
    },
    /// One lab record.
    Add {
        by: String,
        record: Input,
    },
    /// A correction of the keyed weighing of `portion` in replicate `replicate` of `run`.
    Correct {
        by: String,
        run: String,
        replicate: u32,
        portion: Portion,
        changes: BTreeMap<String, String>,
        reason: String,
    },
    /// A balance printout imported as the captured twins of a run's keyed weighings.
    Capture {
        by: String,
        run: String,
        file: String,
    },
    /// A sign-off through the same checks as `assize sign`.
    Sign {
        by: String,
        run: String,
        meaning: Meaning,
        comment: String,
    },
    /// A sign-off appended without those checks, as a program other than assize could.
    SignUnchecked {
        by: String,
        run: String,
        meaning: Meaning,
        comment: String,
    },
}

/// What happens at one instant: a scenario step, or one record of a bench sheet.
enum Action {
    Step(Step),
    Record { by: String, input: Input },
}

/// An action with its record time and where it was written, for messages.
struct Timed {
    at: Timestamp,
    origin: String,
    action: Action,
}

/// What the demo produced, for `--json`.
#[derive(Serialize)]
struct DemoSummary {
    lab: String,
    ledger: PathBuf,
    checkpoint: PathBuf,
    passphrase_file: PathBuf,
    dossier_run: String,
    dossier: PathBuf,
    /// The first entry the scenario corrects, to show its history.
    first_corrected_entry: Option<u64>,
    entries: u64,
    /// RFC 3339.
    first_record_time: String,
    /// RFC 3339.
    last_record_time: String,
    intact: bool,
    report: assize_ledger::IntegrityReport,
    validation: Validation,
}

/// Runs `assize demo`.
pub fn run(cli: &Cli, args: &DemoArgs) -> Result<Outcome, Failure> {
    let scenario: Scenario = toml::from_str(embedded(SCENARIO_PATH)?)
        .map_err(|e| bug(format!("the embedded demo scenario is malformed: {e}")))?;
    let timeline = timeline(&scenario)?;
    let dir = &args.dir;
    prepare_dir(dir)?;
    let opened_at = time("opened_at", &scenario.opened_at)?;
    let mut demo = Demo::start(&scenario, dir, opened_at)?;
    for timed in timeline {
        demo.perform(&scenario, timed)?;
    }
    let checkpoint = demo
        .checkpoint
        .clone()
        .ok_or_else(|| bug("the demo scenario writes no checkpoint"))?;
    let options = ReplayOptions {
        anchors: vec![Anchor::Checkpoint(checkpoint)],
        ..ReplayOptions::default()
    };
    let validation = validate(&demo.ledger, &Scope::Ledger, &options, &mut |_| {})
        .map_err(validation_failure)?;
    let dossier_path = dir.join(format!("dossier-{}.html", scenario.dossier));
    write_dossier(&mut demo.ledger, &scenario.dossier, &dossier_path)?;
    let last = demo
        .ledger
        .head()?
        .ok_or_else(|| bug("the ledger is empty"))?;
    let report = validation.integrity.clone();
    let intact = report.intact();
    let people = person_views(demo.ledger.registry()?);
    let summary = DemoSummary {
        lab: scenario.lab.clone(),
        ledger: dir.join("demo.ledger"),
        checkpoint: dir.join("demo.checkpoint"),
        passphrase_file: dir.join("passphrase.txt"),
        dossier_run: scenario.dossier.clone(),
        dossier: dossier_path,
        first_corrected_entry: demo.corrected.first().copied(),
        entries: report.entries,
        first_record_time: opened_at.to_string(),
        last_record_time: last.record_time.to_string(),
        intact,
        report,
        validation,
    };
    if cli.json {
        print_json(&summary)?;
    } else {
        print_text(&demo_text(&summary, &persons_table(&people)))?;
    }
    Ok(if intact {
        Outcome::Clean
    } else {
        Outcome::IntegrityProblems
    })
}

/// A replay that could not run: the ledger could not be read, or (a bug) the scope is wrong.
fn validation_failure(e: ValidateError) -> Failure {
    match e {
        ValidateError::Ledger(e) => Failure::from(e),
        other => bug(other.to_string()),
    }
}

/// A failure that can only come from a broken embedded scenario.
fn bug(message: impl Into<String>) -> Failure {
    Failure::new(message, "report this as a bug")
}

fn time(field: &str, text: &str) -> Result<Timestamp, Failure> {
    intake::parse_time(field, text).map_err(|e| bug(format!("demo scenario: {e}")))
}

/// Every step and every bench sheet record, in order of record time (steps first, then the
/// sheets in the order listed, where times are equal).
fn timeline(scenario: &Scenario) -> Result<Vec<Timed>, Failure> {
    let mut timeline = Vec::new();
    for (index, table) in scenario.step.iter().enumerate() {
        let origin = format!("{SCENARIO_PATH}, step {}", index + 1);
        let mut table = table.clone();
        let at = take_time(&mut table, "at", &origin)?;
        let step: Step = toml::Value::Table(table)
            .try_into()
            .map_err(|e| bug(format!("{origin}: {e}")))?;
        timeline.push(Timed {
            at,
            origin,
            action: Action::Step(step),
        });
    }
    for path in &scenario.sheets {
        timeline.extend(sheet(path)?);
    }
    timeline.sort_by_key(|timed| timed.at);
    Ok(timeline)
}

/// Removes the time `field` from a step or record table of `origin` and reads it.
fn take_time(table: &mut toml::Table, field: &str, origin: &str) -> Result<Timestamp, Failure> {
    match table.remove(field) {
        Some(toml::Value::String(text)) => time(field, &text),
        _ => Err(bug(format!("{origin} has no `{field}` time"))),
    }
}

/// The records of one bench sheet: `by` (who enters them) and `[[record]]` tables in the batch
/// format, each with `entered_at`, the time it was entered.
fn sheet(path: &str) -> Result<Vec<Timed>, Failure> {
    let mut table: toml::Table =
        toml::from_str(embedded(path)?).map_err(|e| bug(format!("{path}: {e}")))?;
    let by = match table.remove("by") {
        Some(toml::Value::String(by)) => by,
        _ => return Err(bug(format!("{path} does not say who entered it (`by`)"))),
    };
    let records = match table.remove("record") {
        Some(toml::Value::Array(records)) => records,
        _ => return Err(bug(format!("{path} has no [[record]] tables"))),
    };
    if let Some(unknown) = table.keys().next() {
        return Err(bug(format!("{path}: unknown field {unknown}")));
    }
    let mut timed = Vec::new();
    for (index, record) in records.into_iter().enumerate() {
        let origin = format!("{path}, record {}", index + 1);
        let toml::Value::Table(mut record) = record else {
            return Err(bug(format!("{origin} is not a table")));
        };
        let at = take_time(&mut record, "entered_at", &origin)?;
        let input: Input = toml::Value::Table(record)
            .try_into()
            .map_err(|e| bug(format!("{origin}: {e}")))?;
        timed.push(Timed {
            at,
            origin,
            action: Action::Record {
                by: by.clone(),
                input,
            },
        });
    }
    Ok(timed)
}

fn write_dossier(ledger: &mut Ledger, run: &str, path: &Path) -> Result<(), Failure> {
    let options = DossierOptions {
        ledger_file: "demo.ledger".to_string(),
        history: History::UpToRun,
    };
    let gathered =
        dossier(ledger, &Target::RunId(run.to_string()), &options).map_err(|e| match e {
            DossierError::Ledger(e) => Failure::from(e),
            other => bug(format!("the dossier of {run}: {other}")),
        })?;
    let page = dossier_page(&gathered).map_err(bug)?;
    write_whole(path, page.as_bytes(), Existing::Replace)
}

fn demo_text(summary: &DemoSummary, people: &str) -> String {
    let program = invoked_program();
    let ledger = summary.ledger.display();
    let checkpoint = summary.checkpoint.display();
    let pass = summary.passphrase_file.display();
    let key = summary
        .ledger
        .with_file_name("keys")
        .join("i.kallstrom.key");
    let run = &summary.dossier_run;
    // The RFC 3339 times' dates.
    let day = |t: &str| t.get(..10).unwrap_or(t).to_string();
    let history = summary
        .first_corrected_entry
        .map_or_else(|| format!("--run {run}"), |seq| seq.to_string());
    format!(
        "Demo ledger built: {ledger} ({} entries), {}, recorded on the scenario's clock from {} \
         to {}\n\n{people}\n\n\
         Verified against checkpoint {checkpoint}:\n{}\n\n\
         Validated (integrity, recompute, every rule of the adopted policy and methods):\n{}\n\
         Review dossier of run {run} written to {} (one HTML page; open it in a browser)\n\n\
         Try next:\n  \
         {program} --ledger {ledger} exceptions {run}\n  \
         {program} --ledger {ledger} explain {run}\n  \
         {program} --ledger {ledger} history {history}\n  \
         {program} --ledger {ledger} dossier AS-HP-26-1077-1 --out AS-HP-26-1077-1.html\n  \
         {program} --ledger {ledger} recompute AS-HP-26-1077-1\n  \
         {program} --ledger {ledger} replay --run STD-KMN-2611-1-C\n  \
         {program} --ledger {ledger} periodic --from {} --to {}\n  \
         {program} --ledger {ledger} entries list\n  \
         {program} --ledger {ledger} verify --checkpoint {checkpoint}\n  \
         {program} --ledger {ledger} --passphrase-file {pass} evidence export {run} --out {run}.bundle --key {key}\n  \
         {program} evidence check {run}.bundle\n  \
         {program} codes\n  \
         {program} --ledger {ledger} --passphrase-file {pass} note --text \"my first note\" --key {key}\n",
        summary.entries,
        summary.lab,
        day(&summary.first_record_time),
        day(&summary.last_record_time),
        integrity_report(&summary.report),
        validation_text(&summary.validation),
        summary.dossier.display(),
        day(&summary.first_record_time),
        day(&summary.last_record_time),
        key = key.display(),
    )
}

/// How to call this binary again from the current directory: its relative path when it lives
/// below it (e.g. `target/debug/assize` after `cargo run`), else plain `assize`.
fn invoked_program() -> String {
    let relative = std::env::current_exe().ok().and_then(|exe| {
        let cwd = std::env::current_dir().ok()?;
        exe.strip_prefix(&cwd).ok().map(|p| p.display().to_string())
    });
    relative.unwrap_or_else(|| "assize".to_string())
}

/// Creates `dir`, or clears the files an earlier demo left there; refuses any other directory.
fn prepare_dir(dir: &Path) -> Result<(), Failure> {
    let io = |e: std::io::Error| {
        Failure::new(
            format!("cannot prepare demo directory {}: {e}", dir.display()),
            "pass --dir with a writable path",
        )
    };
    if dir.exists() {
        let empty = std::fs::read_dir(dir).map_err(io)?.next().is_none();
        if !empty && !dir.join(MARKER).exists() {
            return Err(Failure::new(
                format!("{} exists and was not made by `assize demo`", dir.display()),
                "pass --dir with a new or empty directory",
            ));
        }
        for entry in std::fs::read_dir(dir).map_err(io)? {
            let name = entry.map_err(io)?.file_name();
            let name = name.to_string_lossy();
            let dossier_page = name.starts_with("dossier-") && name.ends_with(".html");
            if WRITTEN.contains(&name.as_ref()) || dossier_page {
                std::fs::remove_file(dir.join(name.as_ref())).map_err(io)?;
            }
        }
        if dir.join("keys").exists() {
            std::fs::remove_dir_all(dir.join("keys")).map_err(io)?;
        }
    }
    std::fs::create_dir_all(dir.join("keys")).map_err(io)?;
    std::fs::write(dir.join(MARKER), "made by `assize demo`; safe to delete\n").map_err(io)?;
    Ok(())
}

struct Demo {
    dir: PathBuf,
    ledger: Ledger,
    clock: Arc<FixedClock>,
    signers: BTreeMap<String, Signer>,
    checkpoint: Option<Checkpoint>,
    /// Sequence numbers of the entries corrected, in order.
    corrected: Vec<u64>,
}

impl Demo {
    fn start(scenario: &Scenario, dir: &Path, opened_at: Timestamp) -> Result<Demo, Failure> {
        write_private(&dir.join("passphrase.txt"), &scenario.demo_passphrase)?;
        let mut signers = BTreeMap::new();
        for person in &scenario.person {
            let path = dir.join("keys").join(format!("{}.key", person.id));
            let signer = new_key(&path, &person.id, &scenario.demo_passphrase)?;
            signers.insert(person.id.clone(), signer);
        }
        let founder = scenario
            .person
            .first()
            .ok_or_else(|| bug("the demo scenario names nobody"))?;
        // One second a reading: the entries of one batch follow each other a second apart.
        let clock = Arc::new(FixedClock::new(opened_at, 1_000_000));
        let (ledger, _) = Ledger::create(
            &dir.join("demo.ledger"),
            &scenario.lab,
            &founder.name,
            &signers[&founder.id],
            kind_rules(),
            clock.clone(),
        )?;
        Ok(Demo {
            dir: dir.to_path_buf(),
            ledger,
            clock,
            signers,
            checkpoint: None,
            corrected: Vec::new(),
        })
    }

    /// Sets the clock to the action's time (refusing a time before the ledger's head) and
    /// performs it.
    fn perform(&mut self, scenario: &Scenario, timed: Timed) -> Result<(), Failure> {
        let head = self
            .ledger
            .head()?
            .ok_or_else(|| bug("the ledger is empty"))?;
        if timed.at < head.record_time {
            return Err(bug(format!(
                "{} is timed {}, before entry {} recorded at {}",
                timed.origin, timed.at, head.seq, head.record_time
            )));
        }
        self.clock.set(timed.at);
        let done = match timed.action {
            Action::Record { by, input } => self.record(&by, &[input]),
            Action::Step(step) => self.step(scenario, step),
        };
        done.map_err(|f| f.within(&timed.origin))
    }

    fn record(&mut self, by: &str, inputs: &[Input]) -> Result<(), Failure> {
        intake::record(&mut self.ledger, signer_of(&self.signers, by)?, inputs)?;
        Ok(())
    }

    fn step(&mut self, scenario: &Scenario, step: Step) -> Result<(), Failure> {
        match step {
            Step::Enrol { by, person } => {
                let who = scenario
                    .person
                    .iter()
                    .find(|p| p.id == person)
                    .ok_or_else(|| bug(format!("demo scenario enrols unknown {person}")))?;
                let record = Enrolment {
                    person: who.id.clone(),
                    name: who.name.clone(),
                    role: role(&who.role)?,
                    public_key: signer_of(&self.signers, &person)?.public_key(),
                };
                self.ledger
                    .append_record(&record, signer_of(&self.signers, &by)?)?;
            }
            Step::Note { by, text } => {
                self.ledger
                    .append_record(&Note { text }, signer_of(&self.signers, &by)?)?;
            }
            Step::RevokeKey { by, person, reason } => {
                let record = RevokeKey {
                    public_key: signer_of(&self.signers, &person)?.public_key(),
                    person,
                    reason,
                };
                self.ledger
                    .append_record(&record, signer_of(&self.signers, &by)?)?;
            }
            Step::AddKey { by, person, reason } => {
                let path = self.dir.join("keys").join(format!("{person}-2.key"));
                let new_signer = new_key(&path, &person, &scenario.demo_passphrase)?;
                let record = AddKey {
                    person: person.clone(),
                    public_key: new_signer.public_key(),
                    reason,
                };
                self.ledger
                    .append_record(&record, signer_of(&self.signers, &by)?)?;
                self.signers.insert(person, new_signer);
            }
            Step::ChangeRole {
                by,
                person,
                role: new_role,
                reason,
            } => {
                let record = ChangeRole {
                    person,
                    role: role(&new_role)?,
                    reason,
                };
                self.ledger
                    .append_record(&record, signer_of(&self.signers, &by)?)?;
            }
            Step::Checkpoint { by } => {
                let checkpoint = self.ledger.checkpoint(signer_of(&self.signers, &by)?)?;
                write_private(&self.dir.join("demo.checkpoint"), &checkpoint.to_text())?;
                self.checkpoint = Some(checkpoint);
            }
            Step::Adopt { by, document, file } => {
                let input = Input::Adopt {
                    document,
                    text: Some(embedded(&file)?.to_string()),
                    file: Some(file),
                };
                self.record(&by, &[input])?;
            }
            Step::Import { by, file } => {
                let batch = Batch::parse(embedded(&file)?).map_err(bug)?;
                self.record(&by, &batch.record)?;
            }
            Step::Add { by, record } => self.record(&by, &[record])?,
            Step::Correct {
                by,
                run,
                replicate,
                portion,
                changes,
                reason,
            } => self.correct(&by, &run, (replicate, portion), &changes, &reason)?,
            Step::Capture { by, run, file } => {
                let printout =
                    parse_printout(embedded(&file)?).map_err(|e| bug(format!("{file}: {e}")))?;
                let signer = signer_of(&self.signers, &by)?;
                capture_import::record(&mut self.ledger, signer, &printout, &run).map_err(|e| {
                    match e {
                        CaptureError::Ledger(e) => Failure::from(e),
                        other => bug(other.to_string()),
                    }
                })?;
            }
            Step::Sign {
                by,
                run,
                meaning,
                comment,
            } => self.sign(&by, &run, meaning, &comment)?,
            Step::SignUnchecked {
                by,
                run,
                meaning,
                comment,
            } => self.sign_unchecked(&by, &run, meaning, &comment)?,
        }
        Ok(())
    }

    /// Corrects the keyed weighing of `slot` (replicate, portion) in `run`.
    fn correct(
        &mut self,
        by: &str,
        run: &str,
        slot: (u32, Portion),
        changes: &BTreeMap<String, String>,
        reason: &str,
    ) -> Result<(), Failure> {
        let catalog = Catalog::load(self.ledger.store())?;
        let run_hash = run_hash(&catalog, run)?;
        let weighing = catalog
            .of_run(&run_hash)
            .into_iter()
            .rev()
            .filter(|e| e.kind == Weighing::KIND)
            .find(|e| match catalog.current_of(e).as_ref() {
                LabBody::Weighing(w) => {
                    (w.replicate, w.portion) == slot && w.source == Source::Keyed
                }
                _ => false,
            })
            .ok_or_else(|| bug(format!("run {run} has no keyed weighing {slot:?}")))?;
        let changes: Vec<(String, String)> = changes
            .iter()
            .map(|(k, v)| (k.clone(), v.clone()))
            .collect();
        let draft = correction_draft(&catalog, weighing.hash, &changes, reason, by).map_err(bug)?;
        self.ledger
            .append(draft, Some(signer_of(&self.signers, by)?))?;
        self.corrected.push(weighing.seq);
        Ok(())
    }

    /// A sign-off checked and drafted as `assize sign` does it.
    fn sign(
        &mut self,
        by: &str,
        run: &str,
        meaning: Meaning,
        comment: &str,
    ) -> Result<(), Failure> {
        let replayed = replay(&self.ledger, &ReplayOptions::default(), &mut |_| {})
            .map_err(validation_failure)?;
        let request = Request {
            run: run.to_string(),
            result: false,
            meaning,
            comment: comment.to_string(),
            justification: String::new(),
            report_sha256: None,
        };
        let prepared = prepare(&self.ledger, &replayed, by, &request).map_err(bug)?;
        self.ledger
            .append(prepared.draft, Some(signer_of(&self.signers, by)?))?;
        Ok(())
    }

    /// A sign-off of `run` drafted directly, without `prepare`'s checks (self-review among
    /// them): what another program holding the signer's key could append.
    fn sign_unchecked(
        &mut self,
        by: &str,
        run: &str,
        meaning: Meaning,
        comment: &str,
    ) -> Result<(), Failure> {
        let catalog = Catalog::load(self.ledger.store())?;
        let head = self
            .ledger
            .head()?
            .ok_or_else(|| bug("the ledger is empty"))?;
        let record = SignOff {
            subject: run_hash(&catalog, run)?,
            meaning,
            based_on_seq: head.seq,
            based_on: head.hash,
            report_sha256: None,
            comment: comment.to_string(),
            justification: String::new(),
        };
        record.check().map_err(bug)?;
        let draft = Draft::of_record(by, &record).map_err(|e| bug(e.to_string()))?;
        self.ledger
            .append(draft, Some(signer_of(&self.signers, by)?))?;
        Ok(())
    }
}

fn signer_of<'a>(signers: &'a BTreeMap<String, Signer>, id: &str) -> Result<&'a Signer, Failure> {
    signers
        .get(id)
        .ok_or_else(|| bug(format!("demo scenario names unknown person {id}")))
}

fn run_hash(catalog: &Catalog, run: &str) -> Result<EntryHash, Failure> {
    catalog
        .find_id(Run::KIND, run)
        .ok_or_else(|| bug(format!("the demo ledger has no run {run}")))
}

fn embedded(path: &str) -> Result<&'static str, Failure> {
    EMBEDDED_FILES
        .iter()
        .find(|(p, _)| *p == path)
        .map(|(_, text)| *text)
        .ok_or_else(|| bug(format!("the demo scenario names unknown file {path}")))
}

/// A demo key file. Its passphrase is printed in the scenario, so a costly key derivation would
/// protect nothing; the least cost the tool accepts keeps the demo quick.
fn new_key(path: &Path, person: &str, passphrase: &str) -> Result<Signer, Failure> {
    create_key_file(path, person, passphrase, KdfCost::MINIMUM)?;
    Ok(unlock_key_file(path, passphrase)?)
}

fn write_private(path: &Path, text: &str) -> Result<(), Failure> {
    use std::io::Write;
    use std::os::unix::fs::OpenOptionsExt;
    std::fs::OpenOptions::new()
        .write(true)
        .create_new(true)
        .mode(0o600)
        .open(path)
        .and_then(|mut f| f.write_all(text.as_bytes()))
        .map_err(|e| {
            Failure::new(
                format!("cannot write {}: {e}", path.display()),
                "pass --dir with a writable path",
            )
        })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scenario() -> Scenario {
        toml::from_str(embedded(SCENARIO_PATH).expect("embedded")).expect("the scenario parses")
    }

    #[test]
    fn every_step_and_sheet_record_parses_with_its_time() {
        let scenario = scenario();
        let timeline = timeline(&scenario).unwrap_or_else(|f| panic!("{}", f.render()));
        let records = timeline
            .iter()
            .filter(|t| matches!(t.action, Action::Record { .. }))
            .count();
        assert_eq!(timeline.len(), scenario.step.len() + records);
        assert!(records > 100, "the sheets hold the bench work");
        assert!(timeline.windows(2).all(|w| w[0].at <= w[1].at));
    }

    #[test]
    fn every_file_in_samples_demo_is_embedded_and_every_sheet_is_played() {
        let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("..");
        let scenario = scenario();
        let mut on_disk = Vec::new();
        for folder in ["samples/demo", "samples/demo/runs"] {
            for entry in std::fs::read_dir(root.join(folder)).expect("folder") {
                let entry = entry.expect("entry");
                let name = entry.file_name().to_string_lossy().into_owned();
                if entry.path().is_file() && !name.ends_with(".md") {
                    on_disk.push(format!("{folder}/{name}"));
                }
            }
        }
        for path in &on_disk {
            assert!(embedded(path).is_ok(), "{path} is not embedded");
            if path.starts_with("samples/demo/runs/") {
                assert!(scenario.sheets.contains(path), "{path} is not played");
            }
        }
        for (path, text) in EMBEDDED_FILES {
            let on_disk = std::fs::read_to_string(root.join(path)).expect("embedded file");
            assert_eq!(&on_disk, text, "{path}");
        }
    }
}
