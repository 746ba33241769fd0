//! Records as people enter them — ids instead of entry hashes, readings as `"12.3456 g"`, times
//! as RFC 3339 — and their conversion into checked ledger drafts.
//!
//! One [`Input`] per record, from command-line flags or from a batch file (TOML, one
//! `[[record]]` table per entry with a `kind` field, in the order they are to be entered). Ids
//! are resolved against the catalog, which includes entries appended earlier in the same batch.
//! A replicate or blank finds its own weighings and burette readings by run and number. Nothing
//! here reads files or writes the ledger.

use crate::catalog::{Catalog, LabBody};
use crate::quantity::Reading;
use crate::records::{
    Adoption, Balance, BalanceCheck, Blank, Calibration, DocumentKind, Invalidation, LabRecord,
    OosInvestigation, Portion, ReferenceLot, Replicate, ReportedResult, Run, RunKind, Sample,
    Source, StatedQuantity, StatedValue, Titrant, Titration, Weighing, WeighingMode,
};
use assize_ledger::{Draft, Entry, EntryHash, Ledger, LedgerError, Record, Signer, Timestamp};
use serde::Deserialize;

/// One record as entered.
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case", deny_unknown_fields)]
#[allow(missing_docs)]
pub enum Input {
    /// Adopt a method or the lab policy. `file` names the document (read by the caller, which
    /// puts its exact content in `text`).
    Adopt {
        document: DocumentKind,
        file: Option<String>,
        text: Option<String>,
    },
    Balance {
        id: String,
        description: String,
        readability: String,
        capacity: String,
        minimum_weight: String,
    },
    Calibration {
        balance: String,
        certificate: String,
        performed_on: String,
        due_on: String,
        #[serde(deserialize_with = "lenient::flag")]
        passed: bool,
        repeatability_sd: String,
        sensitivity_relative_u: Option<String>,
    },
    BalanceCheck {
        balance: String,
        test_weight: String,
        reference_mass: String,
        reading: String,
        at: String,
    },
    ReferenceLot {
        id: String,
        substance: String,
        formula: String,
        purity: String,
        purity_expanded_u: String,
        coverage_factor: String,
        certificate: String,
        valid_until: String,
        drying: String,
    },
    Titrant {
        id: String,
        formula: String,
        nominal_concentration: String,
        prepared_on: String,
        valid_until: String,
    },
    Sample {
        id: String,
        description: String,
        received_at: String,
    },
    Run {
        id: String,
        run_kind: RunKind,
        method: String,
        policy: String,
        titrant: String,
        reference_lot: Option<String>,
        sample: Option<String>,
        standardization: Option<String>,
        started_at: String,
    },
    Weighing {
        run: String,
        #[serde(deserialize_with = "lenient::number")]
        replicate: u32,
        portion: Portion,
        balance: String,
        mode: WeighingMode,
        first: String,
        first_at: String,
        second: String,
        second_at: String,
        #[serde(default, deserialize_with = "lenient::flag")]
        captured: bool,
        #[serde(default, deserialize_with = "lenient::flag")]
        unstable: bool,
    },
    Titration {
        run: String,
        #[serde(deserialize_with = "lenient::number")]
        replicate: u32,
        #[serde(default, deserialize_with = "lenient::flag")]
        blank: bool,
        burette: String,
        initial: String,
        #[serde(rename = "final")]
        final_reading: String,
        at: String,
        endpoint: String,
    },
    Replicate {
        run: String,
        #[serde(deserialize_with = "lenient::number")]
        number: u32,
        endpoint: String,
    },
    Blank {
        run: String,
    },
    Stated {
        run: String,
        #[serde(default, deserialize_with = "lenient::optional_number")]
        replicate: Option<u32>,
        quantity: StatedQuantity,
        value: String,
        unit: String,
    },
    Result {
        run: String,
        value: String,
        expanded_uncertainty: String,
        unit: String,
    },
    Invalidation {
        run: String,
        #[serde(deserialize_with = "lenient::number")]
        replicate: u32,
        cause: String,
    },
    Oos {
        id: String,
        run: String,
        description: String,
        opened_at: String,
    },
}

impl Input {
    /// Builds an input of `kind` (e.g. `weighing`, `reference-lot`) from `name = value` text
    /// fields, as given by command-line flags (`--first-at` names the field `first_at`).
    pub fn from_fields(kind: &str, fields: &[(String, String)]) -> Result<Input, String> {
        let mut table = toml::Table::new();
        table.insert("kind".into(), toml::Value::String(kind.to_string()));
        for (name, value) in fields {
            let key = name.replace('-', "_");
            if key == "kind"
                || table
                    .insert(key, toml::Value::String(value.clone()))
                    .is_some()
            {
                return Err(format!("field {name} is given twice"));
            }
        }
        toml::Value::Table(table)
            .try_into::<Input>()
            .map_err(|e| format!("{kind}: {}", e.to_string().trim()))
    }
}

impl Input {
    /// The kind word used in batch files and on the command line.
    pub fn kind(&self) -> &'static str {
        match self {
            Input::Adopt { .. } => "adopt",
            Input::Balance { .. } => "balance",
            Input::Calibration { .. } => "calibration",
            Input::BalanceCheck { .. } => "balance-check",
            Input::ReferenceLot { .. } => "reference-lot",
            Input::Titrant { .. } => "titrant",
            Input::Sample { .. } => "sample",
            Input::Run { .. } => "run",
            Input::Weighing { .. } => "weighing",
            Input::Titration { .. } => "titration",
            Input::Replicate { .. } => "replicate",
            Input::Blank { .. } => "blank",
            Input::Stated { .. } => "stated",
            Input::Result { .. } => "result",
            Input::Invalidation { .. } => "invalidation",
            Input::Oos { .. } => "oos",
        }
    }
}

/// Kinds of record that can be entered, with their fields, for help texts.
pub const KINDS: [(&str, &str); 16] = [
    ("adopt", "document (method|policy), file"),
    ("balance", "id, description, readability, capacity, minimum-weight"),
    ("calibration", "balance, certificate, performed-on, due-on, passed, repeatability-sd, [sensitivity-relative-u]"),
    ("balance-check", "balance, test-weight, reference-mass, reading, at"),
    ("reference-lot", "id, substance, formula, purity, purity-expanded-u, coverage-factor, certificate, valid-until, drying"),
    ("titrant", "id, formula, nominal-concentration, prepared-on, valid-until"),
    ("sample", "id, description, received-at"),
    ("run", "id, run-kind (standardization|assay), method, policy, titrant, [reference-lot], [sample], [standardization], started-at"),
    ("weighing", "run, replicate, portion (primary-standard|sample|titrant|blank-titrant), balance, mode (by-difference|tared), first, first-at, second, second-at, [captured], [unstable]"),
    ("titration", "run, replicate, [blank], burette, initial, final, at, endpoint"),
    ("replicate", "run, number, endpoint"),
    ("blank", "run"),
    ("stated", "run, [replicate], quantity (portion-mass|titrant-amount|concentration|content), value, unit"),
    ("result", "run, value, expanded-uncertainty, unit"),
    ("invalidation", "run, replicate, cause"),
    ("oos", "id, run, description, opened-at"),
];

/// A batch file: records in the order they are entered.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Batch {
    /// The records.
    pub record: Vec<Input>,
}

impl Batch {
    /// Parses a batch file's text.
    pub fn parse(text: &str) -> Result<Batch, String> {
        toml::from_str(text).map_err(|e| format!("batch file: {}", e.message()))
    }
}

/// Records `inputs` signed by `signer`, in one transaction: all of them or none. Ids resolve
/// against the ledger's lab entries and against the earlier inputs of the same call. Refused
/// ([`LedgerError::HeadMoved`]) when someone appended while the ledger was read, since an id
/// found free (or a reference resolved) then may no longer be.
pub fn record(
    ledger: &mut Ledger,
    signer: &Signer,
    inputs: &[Input],
) -> Result<Vec<Entry>, LedgerError> {
    let read_at = ledger.head()?;
    let mut catalog = Catalog::load(ledger.store())?;
    let author = signer.person().to_string();
    ledger.append_batch_after(
        read_at.as_ref(),
        inputs.len(),
        Some(signer),
        |i, earlier| {
            if let Some(previous) = earlier.last() {
                catalog.add(previous);
            }
            draft(&inputs[i], &catalog, &author).map_err(|reason| LedgerError::BadInput {
                what: format!(
                    "record {} of {} ({})",
                    i + 1,
                    inputs.len(),
                    inputs[i].kind()
                ),
                reason,
            })
        },
    )
}

/// Parses an RFC 3339 time with its offset, e.g. `2026-11-03T09:15:00Z`.
pub fn parse_time(field: &str, text: &str) -> Result<Timestamp, String> {
    Timestamp::parse_rfc3339(text)
        .ok_or_else(|| format!("{field} {text:?} is not a time like 2026-11-03T09:15:00Z"))
}

fn reading(field: &str, text: &str) -> Result<Reading, String> {
    Reading::parse_with_unit(text).map_err(|e| format!("{field}: {e}"))
}

fn find(catalog: &Catalog, kind: &str, what: &str, id: &str) -> Result<EntryHash, String> {
    catalog
        .find_id(kind, id)
        .ok_or_else(|| format!("no {what} with id {id:?} has been recorded"))
}

fn adopted(catalog: &Catalog, document: DocumentKind, id: &str) -> Result<EntryHash, String> {
    let latest = catalog
        .of_kind(Adoption::KIND)
        .filter(|e| matches!(&e.body, LabBody::Adoption(a) if a.document == document && a.id == id))
        .last()
        .map(|e| e.hash);
    latest.ok_or_else(|| format!("no {document:?} with id {id:?} has been adopted").to_lowercase())
}

/// The entries of a run that match, in order.
fn run_entries<'a>(
    catalog: &'a Catalog,
    run: &EntryHash,
) -> impl Iterator<Item = (EntryHash, LabBody)> + 'a {
    catalog
        .of_run(run)
        .into_iter()
        .filter_map(|e| catalog.current(&e.hash).map(|b| (e.hash, b)))
}

fn latest_weighing(
    catalog: &Catalog,
    run: &EntryHash,
    replicate: u32,
    portions: &[Portion],
) -> Option<EntryHash> {
    run_entries(catalog, run)
        .filter(|(_, b)| matches!(b, LabBody::Weighing(w) if w.replicate == replicate && portions.contains(&w.portion)))
        .map(|(h, _)| h)
        .last()
}

fn latest_titration(
    catalog: &Catalog,
    run: &EntryHash,
    replicate: u32,
    blank: bool,
) -> Option<EntryHash> {
    run_entries(catalog, run)
        .filter(|(_, b)| matches!(b, LabBody::Titration(t) if t.replicate == replicate && t.blank == blank))
        .map(|(h, _)| h)
        .last()
}

/// Converts an input into a checked draft authored by `author`.
pub fn draft(input: &Input, catalog: &Catalog, author: &str) -> Result<Draft, String> {
    fn done<R: LabRecord>(author: &str, record: R) -> Result<Draft, String> {
        record.check()?;
        Draft::of_record(author, &record).map_err(|e| e.to_string())
    }
    let run_of = |id: &str| find(catalog, Run::KIND, "run", id);
    match input.clone() {
        Input::Adopt {
            document,
            text,
            file,
        } => {
            let text = text.ok_or_else(|| match file {
                Some(f) => format!("the text of {f} was not read"),
                None => "an adoption needs the document's file".to_string(),
            })?;
            done(author, Adoption::of_text(document, &text)?)
        }
        Input::Balance {
            id,
            description,
            readability,
            capacity,
            minimum_weight,
        } => {
            unique(catalog, Balance::KIND, "balance", &id)?;
            done(
                author,
                Balance {
                    id,
                    description,
                    readability: reading("readability", &readability)?,
                    capacity: reading("capacity", &capacity)?,
                    minimum_weight: reading("minimum weight", &minimum_weight)?,
                },
            )
        }
        Input::Calibration {
            balance,
            certificate,
            performed_on,
            due_on,
            passed,
            repeatability_sd,
            sensitivity_relative_u,
        } => done(
            author,
            Calibration {
                balance: find(catalog, Balance::KIND, "balance", &balance)?,
                certificate,
                performed_on,
                due_on,
                passed,
                repeatability_sd: reading("repeatability sd", &repeatability_sd)?,
                sensitivity_relative_u,
            },
        ),
        Input::BalanceCheck {
            balance,
            test_weight,
            reference_mass,
            reading: shown,
            at,
        } => done(
            author,
            BalanceCheck {
                balance: find(catalog, Balance::KIND, "balance", &balance)?,
                test_weight,
                reference_mass: reading("reference mass", &reference_mass)?,
                reading: reading("reading", &shown)?,
                observed_at: parse_time("at", &at)?,
            },
        ),
        Input::ReferenceLot {
            id,
            substance,
            formula,
            purity,
            purity_expanded_u,
            coverage_factor,
            certificate,
            valid_until,
            drying,
        } => {
            unique(catalog, ReferenceLot::KIND, "reference lot", &id)?;
            done(
                author,
                ReferenceLot {
                    id,
                    substance,
                    formula,
                    purity,
                    purity_expanded_u,
                    coverage_factor,
                    certificate,
                    valid_until,
                    drying,
                },
            )
        }
        Input::Titrant {
            id,
            formula,
            nominal_concentration,
            prepared_on,
            valid_until,
        } => {
            unique(catalog, Titrant::KIND, "titrant", &id)?;
            done(
                author,
                Titrant {
                    id,
                    formula,
                    nominal_concentration,
                    prepared_on,
                    valid_until,
                },
            )
        }
        Input::Sample {
            id,
            description,
            received_at,
        } => {
            unique(catalog, Sample::KIND, "sample", &id)?;
            done(
                author,
                Sample {
                    id,
                    description,
                    received_at: parse_time("received_at", &received_at)?,
                },
            )
        }
        Input::Run {
            id,
            run_kind,
            method,
            policy,
            titrant,
            reference_lot,
            sample,
            standardization,
            started_at,
        } => {
            unique(catalog, Run::KIND, "run", &id)?;
            done(
                author,
                Run {
                    id,
                    kind: run_kind,
                    method: adopted(catalog, DocumentKind::Method, &method)?,
                    policy: adopted(catalog, DocumentKind::Policy, &policy)?,
                    titrant: find(catalog, Titrant::KIND, "titrant", &titrant)?,
                    reference_lot: reference_lot
                        .map(|l| find(catalog, ReferenceLot::KIND, "reference lot", &l))
                        .transpose()?,
                    sample: sample
                        .map(|s| find(catalog, Sample::KIND, "sample", &s))
                        .transpose()?,
                    standardization: standardization.map(|r| run_of(&r)).transpose()?,
                    started_at: parse_time("started_at", &started_at)?,
                },
            )
        }
        Input::Weighing {
            run,
            replicate,
            portion,
            balance,
            mode,
            first,
            first_at,
            second,
            second_at,
            captured,
            unstable,
        } => done(
            author,
            Weighing {
                run: run_of(&run)?,
                replicate,
                portion,
                balance: find(catalog, Balance::KIND, "balance", &balance)?,
                mode,
                first: reading("first reading", &first)?,
                first_at: parse_time("first_at", &first_at)?,
                second: reading("second reading", &second)?,
                second_at: parse_time("second_at", &second_at)?,
                source: if captured {
                    Source::Captured
                } else {
                    Source::Keyed
                },
                stable: !unstable,
            },
        ),
        Input::Titration {
            run,
            replicate,
            blank,
            burette,
            initial,
            final_reading,
            at,
            endpoint,
        } => done(
            author,
            Titration {
                run: run_of(&run)?,
                replicate,
                blank,
                burette,
                initial: reading("initial reading", &initial)?,
                final_reading: reading("final reading", &final_reading)?,
                read_at: parse_time("at", &at)?,
                endpoint,
            },
        ),
        Input::Replicate {
            run,
            number,
            endpoint,
        } => {
            let run_hash = run_of(&run)?;
            let portion = latest_weighing(catalog, &run_hash, number, &[Portion::PrimaryStandard, Portion::Sample])
                .ok_or_else(|| format!("run {run} has no standard or sample weighing for replicate {number}; record it first"))?;
            let titrant_weighing = latest_weighing(catalog, &run_hash, number, &[Portion::Titrant]);
            let titration = latest_titration(catalog, &run_hash, number, false);
            if titrant_weighing.is_none() && titration.is_none() {
                return Err(format!("run {run} has no titrant weighing or titration for replicate {number}; record it first"));
            }
            done(
                author,
                Replicate {
                    run: run_hash,
                    number,
                    portion_weighing: portion,
                    titrant_weighing,
                    titration,
                    endpoint,
                },
            )
        }
        Input::Blank { run } => {
            let run_hash = run_of(&run)?;
            let titrant_weighing = latest_weighing(catalog, &run_hash, 1, &[Portion::BlankTitrant]);
            let titration = latest_titration(catalog, &run_hash, 1, true);
            if titrant_weighing.is_none() && titration.is_none() {
                return Err(format!(
                    "run {run} has no blank titrant weighing or blank titration; record it first"
                ));
            }
            done(
                author,
                Blank {
                    run: run_hash,
                    titrant_weighing,
                    titration,
                },
            )
        }
        Input::Stated {
            run,
            replicate,
            quantity,
            value,
            unit,
        } => done(
            author,
            StatedValue {
                run: run_of(&run)?,
                replicate,
                quantity,
                value,
                unit,
            },
        ),
        Input::Result {
            run,
            value,
            expanded_uncertainty,
            unit,
        } => done(
            author,
            ReportedResult {
                run: run_of(&run)?,
                value,
                expanded_uncertainty,
                unit,
            },
        ),
        Input::Invalidation {
            run,
            replicate,
            cause,
        } => {
            if cause.trim().is_empty() {
                return Err(
                    "an invalidation needs its assignable cause: what went wrong at the bench"
                        .into(),
                );
            }
            let run_hash = run_of(&run)?;
            let found = run_entries(catalog, &run_hash)
                .filter(|(_, b)| matches!(b, LabBody::Replicate(r) if r.number == replicate))
                .map(|(h, _)| h)
                .last()
                .ok_or_else(|| format!("run {run} has no replicate {replicate}"))?;
            done(
                author,
                Invalidation {
                    replicate: found,
                    cause,
                },
            )
        }
        Input::Oos {
            id,
            run,
            description,
            opened_at,
        } => done(
            author,
            OosInvestigation {
                subject: run_of(&run)?,
                id,
                description,
                opened_at: parse_time("opened_at", &opened_at)?,
            },
        ),
    }
}

fn unique(catalog: &Catalog, kind: &str, what: &str, id: &str) -> Result<(), String> {
    match catalog.find_id(kind, id) {
        Some(_) => Err(format!("a {what} with id {id:?} is already recorded")),
        None => Ok(()),
    }
}

/// Numbers and yes/no fields given either typed (batch files) or as text (command-line flags).
mod lenient {
    use serde::de::{self, Deserializer, Visitor};

    struct Number;

    impl Visitor<'_> for Number {
        type Value = u32;
        fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
            f.write_str("a whole number")
        }
        fn visit_i64<E: de::Error>(self, v: i64) -> Result<u32, E> {
            u32::try_from(v).map_err(|_| E::custom(format!("{v} is not a whole number from 0")))
        }
        fn visit_u64<E: de::Error>(self, v: u64) -> Result<u32, E> {
            u32::try_from(v).map_err(|_| E::custom(format!("{v} is too large")))
        }
        fn visit_str<E: de::Error>(self, v: &str) -> Result<u32, E> {
            v.trim()
                .parse()
                .map_err(|_| E::custom(format!("{v:?} is not a whole number")))
        }
    }

    pub fn number<'de, D: Deserializer<'de>>(d: D) -> Result<u32, D::Error> {
        d.deserialize_any(Number)
    }

    pub fn optional_number<'de, D: Deserializer<'de>>(d: D) -> Result<Option<u32>, D::Error> {
        d.deserialize_any(Number).map(Some)
    }

    struct Flag;

    impl Visitor<'_> for Flag {
        type Value = bool;
        fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
            f.write_str("true or false")
        }
        fn visit_bool<E: de::Error>(self, v: bool) -> Result<bool, E> {
            Ok(v)
        }
        fn visit_str<E: de::Error>(self, v: &str) -> Result<bool, E> {
            match v.trim() {
                "true" | "yes" => Ok(true),
                "false" | "no" => Ok(false),
                other => Err(E::custom(format!("{other:?} is not true or false"))),
            }
        }
    }

    pub fn flag<'de, D: Deserializer<'de>>(d: D) -> Result<bool, D::Error> {
        d.deserialize_any(Flag)
    }
}
