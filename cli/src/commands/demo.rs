//! `assize demo`: builds the invented demo ledger described in samples/demo/scenario.toml
//! (embedded in the binary), writes a checkpoint part-way, and verifies the result against it.
//!
//! Everything is done through the same library calls the other commands use; the scenario file
//! only says who does what, in which order.

use crate::args::{Cli, DemoArgs};
use crate::failure::Failure;
use crate::output::{print_json, print_text};
use crate::render::{integrity_report, person_views, persons_table, recomputed_text};
use crate::report::validation_text;
use crate::session::{kind_rules, role};
use crate::Outcome;
use assize_ledger::keyfile::{create_key_file, unlock_key_file};
use assize_ledger::records::{AddKey, ChangeRole, Enrolment, Note, RevokeKey};
use assize_ledger::replay::{Anchor, ReplayOptions};
use assize_ledger::{Checkpoint, KdfCost, Ledger, Signer, SystemClock};
use assize_verify::assemble::{recompute_run, Recomputed};
use assize_verify::catalog::Catalog;
use assize_verify::intake::{self, Batch, Input};
use assize_verify::records::DocumentKind;
use assize_verify::validate::{validate, Scope, Validation};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::Arc;

const SCENARIO: &str = include_str!("../../../samples/demo/scenario.toml");

/// Files the scenario names, embedded so the demo runs from the binary alone.
const EMBEDDED_FILES: [(&str, &str); 3] = [
    (
        "lab-policy.toml",
        include_str!("../../../policies/lab-policy.toml"),
    ),
    (
        "permanganate-peroxide.toml",
        include_str!("../../../policies/permanganate-peroxide.toml"),
    ),
    (
        "permanganate-week-48.toml",
        include_str!("../../../samples/lab/permanganate-week-48.toml"),
    ),
];
const MARKER: &str = ".assize-demo";

#[derive(Deserialize)]
struct Scenario {
    lab: String,
    demo_passphrase: String,
    person: Vec<DemoPerson>,
    step: Vec<Step>,
}

#[derive(Deserialize)]
struct DemoPerson {
    id: String,
    name: String,
    role: String,
}

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
    Import {
        by: String,
        file: String,
    },
    Recompute {
        run: String,
    },
}

/// What the demo produced, for `--json`.
#[derive(Serialize)]
struct DemoSummary {
    ledger: PathBuf,
    checkpoint: PathBuf,
    passphrase_file: PathBuf,
    entries: u64,
    intact: bool,
    report: assize_ledger::IntegrityReport,
    recomputed: Vec<Recomputed>,
    validation: Validation,
}

/// Runs `assize demo`.
pub fn run(cli: &Cli, args: &DemoArgs) -> Result<Outcome, Failure> {
    let scenario: Scenario = toml::from_str(SCENARIO).map_err(|e| {
        Failure::new(
            format!("the embedded demo scenario is malformed: {e}"),
            "report this as a bug",
        )
    })?;
    let dir = &args.dir;
    prepare_dir(dir)?;
    let mut demo = Demo::start(&scenario, dir)?;
    for step in &scenario.step {
        demo.perform(&scenario, step)?;
    }
    let checkpoint = demo.checkpoint.clone().ok_or_else(|| {
        Failure::new(
            "the demo scenario writes no checkpoint",
            "report this as a bug",
        )
    })?;
    let options = ReplayOptions {
        anchors: vec![Anchor::Checkpoint(checkpoint)],
        ..ReplayOptions::default()
    };
    let validation = validate(&demo.ledger, &Scope::Ledger, &options, &mut |_| {})
        .map_err(|e| Failure::new(e.to_string(), "report this as a bug"))?;
    let report = validation.integrity.clone();
    let intact = report.intact();
    let people = person_views(demo.ledger.registry()?);
    let summary = DemoSummary {
        ledger: dir.join("demo.ledger"),
        checkpoint: dir.join("demo.checkpoint"),
        passphrase_file: dir.join("passphrase.txt"),
        entries: report.entries,
        intact,
        report,
        recomputed: std::mem::take(&mut demo.recomputed),
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

fn demo_text(summary: &DemoSummary, people: &str) -> String {
    let program = invoked_program();
    let ledger = summary.ledger.display();
    let checkpoint = summary.checkpoint.display();
    let pass = summary.passphrase_file.display();
    let key = summary.ledger.with_file_name("keys").join("s.obuya.key");
    format!(
        "Demo ledger built: {ledger} ({} entries)\n\n{people}\n\n{}\n\
         Verified against checkpoint {checkpoint}:\n{}\n\n\
         Validated (integrity, recompute, every rule of the adopted policy and method):\n{}\n\
         Try next:\n  {program} --ledger {ledger} replay --run AS-HP-26-0871-1\n  \
         {program} --ledger {ledger} exceptions AS-HP-26-0871-1\n  \
         {program} --ledger {ledger} explain AS-HP-26-0871-1\n  \
         {program} --ledger {ledger} codes\n  \
         {program} --ledger {ledger} entries list\n  \
         {program} --ledger {ledger} entries show 1\n  \
         {program} --ledger {ledger} verify --checkpoint {checkpoint}\n  \
         {program} --ledger {ledger} recompute STD-KMN-2611-3-A\n  \
         {program} --ledger {ledger} --passphrase-file {pass} note --text \"my first note\" --key {}\n",
        summary.entries,
        summary
            .recomputed
            .iter()
            .map(|r| format!("Recomputed from the raw readings:\n{}", recomputed_text(r)))
            .collect::<Vec<_>>()
            .join("\n"),
        integrity_report(&summary.report),
        validation_text(&summary.validation),
        key.display(),
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
        for name in [
            "demo.ledger",
            "demo.ledger-wal",
            "demo.ledger-shm",
            "demo.checkpoint",
            "passphrase.txt",
        ] {
            let path = dir.join(name);
            if path.exists() {
                std::fs::remove_file(path).map_err(io)?;
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
    signers: BTreeMap<String, Signer>,
    checkpoint: Option<Checkpoint>,
    recomputed: Vec<Recomputed>,
}

impl Demo {
    fn start(scenario: &Scenario, dir: &Path) -> Result<Demo, Failure> {
        write_private(&dir.join("passphrase.txt"), &scenario.demo_passphrase)?;
        let mut signers = BTreeMap::new();
        for person in &scenario.person {
            let path = dir.join("keys").join(format!("{}.key", person.id));
            let signer = new_key(&path, &person.id, &scenario.demo_passphrase)?;
            signers.insert(person.id.clone(), signer);
        }
        let founder = scenario.person.first().ok_or_else(|| {
            Failure::new("the demo scenario names nobody", "report this as a bug")
        })?;
        let (ledger, _) = Ledger::create(
            &dir.join("demo.ledger"),
            &scenario.lab,
            &founder.name,
            &signers[&founder.id],
            kind_rules(),
            Arc::new(SystemClock),
        )?;
        Ok(Demo {
            dir: dir.to_path_buf(),
            ledger,
            signers,
            checkpoint: None,
            recomputed: Vec::new(),
        })
    }

    fn perform(&mut self, scenario: &Scenario, step: &Step) -> Result<(), Failure> {
        match step {
            Step::Enrol { by, person } => {
                let who = scenario
                    .person
                    .iter()
                    .find(|p| &p.id == person)
                    .ok_or_else(|| {
                        Failure::new(
                            format!("demo scenario enrols unknown {person}"),
                            "report this as a bug",
                        )
                    })?;
                let record = Enrolment {
                    person: who.id.clone(),
                    name: who.name.clone(),
                    role: role(&who.role)?,
                    public_key: signer_of(&self.signers, person)?.public_key(),
                };
                let signer = signer_of(&self.signers, by)?;
                self.ledger.append_record(&record, signer)?;
            }
            Step::Note { by, text } => {
                let signer = signer_of(&self.signers, by)?;
                self.ledger
                    .append_record(&Note { text: text.clone() }, signer)?;
            }
            Step::RevokeKey { by, person, reason } => {
                let record = RevokeKey {
                    person: person.clone(),
                    public_key: signer_of(&self.signers, person)?.public_key(),
                    reason: reason.clone(),
                };
                let signer = signer_of(&self.signers, by)?;
                self.ledger.append_record(&record, signer)?;
            }
            Step::AddKey { by, person, reason } => {
                let path = self.dir.join("keys").join(format!("{person}-2.key"));
                let new_signer = new_key(&path, person, &scenario.demo_passphrase)?;
                let record = AddKey {
                    person: person.clone(),
                    public_key: new_signer.public_key(),
                    reason: reason.clone(),
                };
                self.ledger
                    .append_record(&record, signer_of(&self.signers, by)?)?;
                self.signers.insert(person.clone(), new_signer);
            }
            Step::ChangeRole {
                by,
                person,
                role: new_role,
                reason,
            } => {
                let record = ChangeRole {
                    person: person.clone(),
                    role: role(new_role)?,
                    reason: reason.clone(),
                };
                self.ledger
                    .append_record(&record, signer_of(&self.signers, by)?)?;
            }
            Step::Adopt { by, document, file } => {
                let input = Input::Adopt {
                    document: *document,
                    file: Some(file.clone()),
                    text: Some(embedded(file)?.to_string()),
                };
                intake::record(&mut self.ledger, signer_of(&self.signers, by)?, &[input])?;
            }
            Step::Import { by, file } => {
                let batch = Batch::parse(embedded(file)?)
                    .map_err(|e| Failure::new(e, "report this as a bug"))?;
                intake::record(
                    &mut self.ledger,
                    signer_of(&self.signers, by)?,
                    &batch.record,
                )?;
            }
            Step::Recompute { run } => {
                let catalog = Catalog::load(self.ledger.store())?;
                let recomputed = recompute_run(&catalog, run)
                    .map_err(|e| Failure::new(e, "report this as a bug"))?;
                self.recomputed.push(recomputed);
            }
            Step::Checkpoint { by } => {
                let signer = signer_of(&self.signers, by)?;
                let checkpoint = self.ledger.checkpoint(signer)?;
                write_private(&self.dir.join("demo.checkpoint"), &checkpoint.to_text())?;
                self.checkpoint = Some(checkpoint);
            }
        }
        Ok(())
    }
}

fn embedded(name: &str) -> Result<&'static str, Failure> {
    EMBEDDED_FILES
        .iter()
        .find(|(n, _)| *n == name)
        .map(|(_, text)| *text)
        .ok_or_else(|| {
            Failure::new(
                format!("the demo scenario names unknown file {name}"),
                "report this as a bug",
            )
        })
}

fn signer_of<'a>(signers: &'a BTreeMap<String, Signer>, id: &str) -> Result<&'a Signer, Failure> {
    signers.get(id).ok_or_else(|| {
        Failure::new(
            format!("demo scenario names unknown person {id}"),
            "report this as a bug",
        )
    })
}

fn new_key(path: &Path, person: &str, passphrase: &str) -> Result<Signer, Failure> {
    create_key_file(path, person, passphrase, KdfCost::DEFAULT)?;
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
