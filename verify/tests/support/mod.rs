//! The clean scenario the rule tests start from, and the means to change one thing in it.
//!
//! A [`Plan`] is a list of labelled [`Step`]s, each an entry (or a small batch) recorded at a
//! given time by one of four invented people: a QA officer who opens the ledger and adopts the
//! shipped lab policy and permanganate method, two analysts and a reviewer. Most steps are
//! inputs as a person enters them, field by field, so a test changes one field by label
//! ([`Plan::set`]); values that must follow from the data (stated values, the reported result)
//! are derived at build time from the recompute; sign-offs and records the intake would refuse
//! are drafted by hand. [`build`] plays the plan into a fresh ledger with a fixed clock, so every
//! record time is exactly the time the plan gives (or one second after the entry before it).
//!
//! All people, ids, certificates and readings are invented. Readings are computed from chosen
//! portions and target strengths (or contents) so that the clean runs pass every limit.

use assize_ledger::records::{ChangeRole, Enrolment};
use assize_ledger::{
    codec, Draft, Entry, FixedClock, Ledger, Record, ReplayOptions, Role, Signer, Timestamp,
};
use assize_verify::assemble::{recompute_run, Recomputed};
use assize_verify::catalog::{Catalog, LabBody};
use assize_verify::correction::correction_draft;
use assize_verify::documents::{LabPolicy, Method};
use assize_verify::findings::Finding;
use assize_verify::intake::{self, Input};
use assize_verify::records::{
    Adoption, Correction, DocumentKind, LabRecord, Meaning, Replicate, ReportedResult, Run,
    RunKind, SignOff, StatedQuantity,
};
use assize_verify::rounding::{decimal_from_f64, Reported};
use assize_verify::stream::{validate_streaming, StreamOptions};
use assize_verify::validate::{validate, validate_in_memory, Scope, Validation};
use chrono::{NaiveDate, NaiveTime};
use rust_decimal::prelude::FromPrimitive;
use rust_decimal::{Decimal, RoundingStrategy};
use std::collections::{BTreeSet, HashMap};
use std::rc::Rc;
use std::sync::Arc;

/// The shipped permanganate / hydrogen peroxide method.
pub const METHOD_TEXT: &str = include_str!("../../../policies/permanganate-peroxide.toml");
/// The shipped lab policy.
pub const POLICY_TEXT: &str = include_str!("../../../policies/lab-policy.toml");

/// Molar mass of Na2C2O4, g/mol, from IUPAC standard atomic weights (CIAAW 2021, abridged):
/// 2 × 22.990 + 2 × 12.011 + 4 × 15.999. Used only to choose readings; the engine computes its
/// own value, and stated figures come from the recompute.
pub const M_SODIUM_OXALATE: f64 = 133.998;
/// Molar mass of H2O2, g/mol, from the same atomic weights (2 × 1.008 + 2 × 15.999).
pub const M_HYDROGEN_PEROXIDE: f64 = 34.014;
/// Certified purity of the invented sodium oxalate lot (mass fraction).
pub const OXALATE_PURITY: f64 = 0.99965;
/// MnO4- : C2O4^2- is 2 : 5 and MnO4- : H2O2 is 2 : 5 (the method's balanced equations).
pub const MNO4_PER_REACTANT: f64 = 2.0 / 5.0;

/// The balance (ids below are all invented).
pub const BALANCE: &str = "BAL-07";
/// Titrant preparation.
pub const TITRANT: &str = "KMN-T-01";
/// Sodium oxalate lot.
pub const REFERENCE_LOT: &str = "NOX-T-01";
/// The hydrogen peroxide sample.
pub const SAMPLE: &str = "HP-T-01";
/// The standardization run.
pub const STANDARDIZATION: &str = "STD-T-01";
/// The assay run.
pub const ASSAY: &str = "AS-T-01";

/// The four invented people of the test lab.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Who {
    /// Opens the ledger (first QA), adopts documents, changes roles.
    Qa,
    /// Sets up the balance and materials and standardizes the titrant.
    Analyst,
    /// Assays the sample.
    Analyst2,
    /// Reviews and approves.
    Reviewer,
}

impl Who {
    /// Person id.
    pub fn person(self) -> &'static str {
        match self {
            Who::Qa => "qa.lead",
            Who::Analyst => "analyst.a",
            Who::Analyst2 => "analyst.b",
            Who::Reviewer => "reviewer.r",
        }
    }

    /// The person's key, from a fixed test secret.
    pub fn signer(self) -> Signer {
        let secret = match self {
            Who::Qa => 11,
            Who::Analyst => 12,
            Who::Analyst2 => 13,
            Who::Reviewer => 14,
        };
        Signer::from_secret(self.person(), &[secret; 32])
    }
}

/// Inputs derived from the ledger as it stands when the step is played.
pub type Derive = Rc<dyn Fn(&Catalog) -> Vec<Input>>;
/// A draft made by hand from the ledger as it stands, for the given author.
pub type MakeDraft = Rc<dyn Fn(&Ledger, &Catalog, &str) -> Draft>;

/// What a step records.
#[derive(Clone)]
pub enum Act {
    /// One input as a person enters it: its kind word and text fields.
    Input {
        /// Kind word (`weighing`, `balance-check`, ...).
        kind: String,
        /// Field names and text values.
        fields: Vec<(String, String)>,
    },
    /// Inputs made at build time (stated values, reported results), entered as one batch.
    Derived(Derive),
    /// A hand-made draft, appended signed by its author.
    Draft(MakeDraft),
}

/// One labelled step of a plan.
#[derive(Clone)]
pub struct Step {
    /// Label tests use to find the step.
    pub label: String,
    /// Record time (the clock is set to it, or one second after the previous entry).
    pub at: Timestamp,
    /// Who records it.
    pub who: Who,
    /// What is recorded.
    pub act: Act,
}

/// Makes an input step.
pub fn input(label: &str, at: Timestamp, who: Who, kind: &str, fields: &[(&str, &str)]) -> Step {
    Step {
        label: label.to_string(),
        at,
        who,
        act: Act::Input {
            kind: kind.to_string(),
            fields: fields
                .iter()
                .map(|(k, v)| (k.to_string(), v.to_string()))
                .collect(),
        },
    }
}

/// Makes a derived step.
pub fn derived(label: &str, at: Timestamp, who: Who, derive: Derive) -> Step {
    Step {
        label: label.to_string(),
        at,
        who,
        act: Act::Derived(derive),
    }
}

/// Makes a hand-drafted step.
pub fn drafted(label: &str, at: Timestamp, who: Who, make: MakeDraft) -> Step {
    Step {
        label: label.to_string(),
        at,
        who,
        act: Act::Draft(make),
    }
}

/// A UTC time on a day, from `HH:MM:SS`.
pub fn at(day: NaiveDate, hms: &str) -> Timestamp {
    let time = NaiveTime::parse_from_str(hms, "%H:%M:%S").expect("HH:MM:SS");
    Timestamp::from_datetime(day.and_time(time).and_utc())
}

/// A time shifted by whole seconds.
pub fn plus(t: Timestamp, seconds: i64) -> Timestamp {
    Timestamp(t.0 + seconds * 1_000_000)
}

/// A calendar day.
pub fn day(text: &str) -> NaiveDate {
    NaiveDate::parse_from_str(text, "%Y-%m-%d").expect("YYYY-MM-DD")
}

/// A document text with one piece replaced (panics if the piece is not there, so a changed
/// shipped document cannot make a test silently test nothing).
pub fn variant(text: &str, from: &str, to: &str) -> String {
    assert_eq!(text.matches(from).count(), 1, "{from:?} must occur once");
    text.replacen(from, to, 1)
}

/// What one run of the plan does.
#[derive(Clone, Debug)]
pub struct RunSpec {
    /// Standardization or assay.
    pub kind: RunKind,
    /// Label prefix of its steps (`std`, `assay`, ...).
    pub prefix: String,
    /// Run id.
    pub id: String,
    /// Who does the bench work.
    pub who: Who,
    /// Day of the bench work.
    pub day: NaiveDate,
    /// Start time, `HH:MM:SS`.
    pub start: String,
    /// Net portion per replicate (primary standard or sample), g, as the balance shows it.
    pub portions_g: Vec<String>,
    /// Target per replicate: titrant strength (mol/kg) or H2O2 content (%).
    pub targets: Vec<f64>,
    /// First reading of the weighing bottle the portions are taken from (by difference).
    pub vessel_start_g: String,
    /// First reading of the titrant dropping bottle for replicate 1.
    pub bottle_start_g: String,
    /// Sample id (assay).
    pub sample: Option<String>,
    /// Standardization run id (assay).
    pub standardization: Option<String>,
    /// Titrant strength the readings are computed with (assay), mol/kg.
    pub strength: f64,
}

fn strings(items: &[&str]) -> Vec<String> {
    items.iter().map(|s| s.to_string()).collect()
}

/// The knobs of the clean scenario.
#[derive(Clone, Debug)]
pub struct Knobs {
    /// Day of the standardization.
    pub std_day: NaiveDate,
    /// Day of the assay.
    pub assay_day: NaiveDate,
    /// Sodium oxalate portions, g (the method says about 0.25 g).
    pub std_portions_g: Vec<String>,
    /// Titrant strength each standardization replicate is to show, mol/kg (nominal 0.02).
    pub std_strengths: Vec<f64>,
    /// Sample portions, g (the method says about 0.15 g).
    pub assay_portions_g: Vec<String>,
    /// H2O2 content each assay replicate is to show, % (specification 29.0–32.0 %).
    pub assay_contents: Vec<f64>,
}

impl Default for Knobs {
    fn default() -> Knobs {
        Knobs {
            std_day: day("2026-11-23"),
            assay_day: day("2026-11-24"),
            std_portions_g: strings(&["0.2511", "0.2487", "0.2530"]),
            // Scatter of a few parts in 10⁴: RSD about 0.04 %, well inside Ph. Eur. 4.2.2's 0.2 %.
            std_strengths: vec![0.019992, 0.020006, 0.020002],
            assay_portions_g: strings(&["0.1502", "0.1497", "0.1511"]),
            // RSD about 0.08 %, inside the policy's 0.5 %; mean inside 29.0–32.0 %.
            assay_contents: vec![30.42, 30.47, 30.44],
        }
    }
}

impl Knobs {
    /// The standardization the knobs describe.
    pub fn std_spec(&self) -> RunSpec {
        RunSpec {
            kind: RunKind::Standardization,
            prefix: "std".into(),
            id: STANDARDIZATION.into(),
            who: Who::Analyst,
            day: self.std_day,
            start: "08:10:00".into(),
            portions_g: self.std_portions_g.clone(),
            targets: self.std_strengths.clone(),
            vessel_start_g: "18.4127".into(),
            bottle_start_g: "112.5321".into(),
            sample: None,
            standardization: None,
            strength: 0.0,
        }
    }

    /// The assay the knobs describe.
    pub fn assay_spec(&self) -> RunSpec {
        let strength = self.std_strengths.iter().sum::<f64>() / self.std_strengths.len() as f64;
        RunSpec {
            kind: RunKind::Assay,
            prefix: "assay".into(),
            id: ASSAY.into(),
            who: Who::Analyst2,
            day: self.assay_day,
            start: "10:05:00".into(),
            portions_g: self.assay_portions_g.clone(),
            targets: self.assay_contents.clone(),
            vessel_start_g: "9.8842".into(),
            bottle_start_g: "110.9410".into(),
            sample: Some(SAMPLE.into()),
            standardization: Some(STANDARDIZATION.into()),
            strength,
        }
    }
}

/// The ids the shipped method and policy give themselves.
pub fn document_ids() -> (String, String) {
    let method = Method::parse(METHOD_TEXT).expect("shipped method parses");
    let policy = LabPolicy::parse(POLICY_TEXT).expect("shipped policy parses");
    (method.id, policy.id)
}

fn decimal(text: &str) -> Decimal {
    text.parse().expect("a decimal")
}

fn grams(value: Decimal) -> String {
    format!("{value} g")
}

/// Titrant solution (g) that a replicate needs to show `target` under `spec` (strengths are
/// mol per kg of solution, hence the 1000 g/kg).
fn titrant_mass_g(spec: &RunSpec, portion_g: f64, target: f64) -> f64 {
    1000.0
        * match spec.kind {
            // c_T = (m_PS · P / M_PS) · (ν_T / ν_PS) / m_T  (DESIGN.md §5)
            RunKind::Standardization => {
                portion_g * OXALATE_PURITY / M_SODIUM_OXALATE * MNO4_PER_REACTANT / target
            }
            // w_A = c_T · m_T · (ν_A / ν_T) · M_A / m_S, with w in %
            RunKind::Assay => {
                target / 100.0 * portion_g / M_HYDROGEN_PEROXIDE * MNO4_PER_REACTANT / spec.strength
            }
        }
}

/// The steps of one run: the run, per replicate the portion weighing, the titrant weighing and
/// the replicate, then the stated values (and, for an assay, the reported result).
pub fn run_steps(spec: &RunSpec) -> Vec<Step> {
    let (method, policy) = document_ids();
    let p = &spec.prefix;
    let started = at(spec.day, &spec.start);
    let started_text = started.to_string();
    let mut fields: Vec<(&str, &str)> = vec![
        ("id", spec.id.as_str()),
        ("method", method.as_str()),
        ("policy", policy.as_str()),
        ("titrant", TITRANT),
        ("started_at", started_text.as_str()),
    ];
    // Bench timing, in seconds: the first portion after the start, then one replicate every
    // `spacing`; each titrant weighing's two readings after its replicate's portion. A
    // standardization is titrated hot and slowly, an assay cold and faster.
    let (kind_word, portion_word, first_offset, spacing, titrant_from, titrant_to) = match spec.kind
    {
        RunKind::Standardization => ("standardization", "primary-standard", 250, 1980, 1050, 1795),
        RunKind::Assay => ("assay", "sample", 192, 840, 230, 670),
    };
    fields.push(("run_kind", kind_word));
    if spec.kind == RunKind::Standardization {
        fields.push(("reference_lot", REFERENCE_LOT));
    }
    let sample = spec.sample.clone().unwrap_or_default();
    let standardization = spec.standardization.clone().unwrap_or_default();
    if spec.kind == RunKind::Assay {
        fields.push(("sample", sample.as_str()));
        fields.push(("standardization", standardization.as_str()));
    }
    let mut steps = vec![input(
        &format!("{p}-run"),
        plus(started, 40),
        spec.who,
        "run",
        &fields,
    )];
    let mut vessel = decimal(&spec.vessel_start_g);
    let bottle_start = decimal(&spec.bottle_start_g);
    assert_eq!(spec.portions_g.len(), spec.targets.len());
    for (index, (portion, target)) in spec.portions_g.iter().zip(&spec.targets).enumerate() {
        let n = index + 1;
        let number = n.to_string();
        let base = plus(started, first_offset + index as i64 * spacing);
        // Portion by difference from the weighing bottle.
        let net = decimal(portion);
        let (first, second) = (vessel, vessel - net);
        vessel = second;
        let (first_at, second_at) = (base, plus(base, 40));
        steps.push(input(
            &format!("{p}-{n}-portion"),
            plus(second_at, 30),
            spec.who,
            "weighing",
            &[
                ("run", spec.id.as_str()),
                ("replicate", number.as_str()),
                ("portion", portion_word),
                ("balance", BALANCE),
                ("mode", "by-difference"),
                ("first", grams(first).as_str()),
                ("first_at", first_at.to_string().as_str()),
                ("second", grams(second).as_str()),
                ("second_at", second_at.to_string().as_str()),
            ],
        ));
        // Titrant delivered from the dropping bottle, refilled before each replicate.
        let portion_f = net.to_string().parse::<f64>().expect("portion");
        let titrant = Decimal::from_f64(titrant_mass_g(spec, portion_f, *target))
            .expect("finite")
            .round_dp(4);
        let bottle = bottle_start + Decimal::new(10_371, 4) * Decimal::from(index as u32);
        let (t_first_at, t_second_at) = (plus(base, titrant_from), plus(base, titrant_to));
        steps.push(input(
            &format!("{p}-{n}-titrant"),
            plus(t_second_at, 30),
            spec.who,
            "weighing",
            &[
                ("run", spec.id.as_str()),
                ("replicate", number.as_str()),
                ("portion", "titrant"),
                ("balance", BALANCE),
                ("mode", "by-difference"),
                ("first", grams(bottle).as_str()),
                ("first_at", t_first_at.to_string().as_str()),
                ("second", grams(bottle - titrant).as_str()),
                ("second_at", t_second_at.to_string().as_str()),
            ],
        ));
        steps.push(input(
            &format!("{p}-{n}-replicate"),
            plus(t_second_at, 60),
            spec.who,
            "replicate",
            &[
                ("run", spec.id.as_str()),
                ("number", number.as_str()),
                ("endpoint", "faint pink persisting 30 s"),
            ],
        ));
    }
    let last = steps.last().expect("a replicate").at;
    steps.push(derived(
        &format!("{p}-stated"),
        plus(last, 60),
        spec.who,
        stated_values(&spec.id, Stating::default()),
    ));
    if spec.kind == RunKind::Assay {
        steps.push(derived(
            &format!("{p}-result"),
            plus(last, 120),
            spec.who,
            reported_result(&spec.id, as_reported),
        ));
    }
    steps
}

/// How the analyst writes stated values.
#[derive(Clone, Copy, Debug)]
pub struct Stating {
    /// Decimals of concentrations (mol/kg).
    pub concentration_places: u32,
    /// Decimals of contents (%).
    pub content_places: u32,
    /// Units in the last place the final value is written away from the recomputed value.
    pub final_off_by: i64,
}

impl Default for Stating {
    fn default() -> Stating {
        Stating {
            concentration_places: 6,
            content_places: 2,
            final_off_by: 0,
        }
    }
}

/// `value` rounded half up to `places`, moved `off_by` units of the last place away from the
/// exact value, written with exactly `places` decimals.
pub fn written(value: f64, places: u32, off_by: i64) -> String {
    let exact = decimal_from_f64(value).expect("finite");
    let rounded = exact.round_dp_with_strategy(places, RoundingStrategy::MidpointAwayFromZero);
    let away = if rounded >= exact { off_by } else { -off_by };
    let shown = rounded + Decimal::new(away, places);
    format!("{shown:.*}", places as usize)
}

/// Recomputes a run from the catalog (panics with the reason if it cannot).
pub fn recomputed(catalog: &Catalog, run: &str) -> Recomputed {
    recompute_run(catalog, run).unwrap_or_else(|e| panic!("recompute {run}: {e}"))
}

/// The worksheet values of a run, stated from its recompute: per valid replicate the portion,
/// the titrant and the concentration or content; then the final value.
pub fn stated_values(run: &str, how: Stating) -> Derive {
    let run = run.to_string();
    Rc::new(move |catalog: &Catalog| {
        let recomputed = recomputed(catalog, &run);
        let outcome = &recomputed.outcome;
        let (quantity, places) = match recomputed.standardization {
            Some(_) => (StatedQuantity::Content, how.content_places),
            None => (StatedQuantity::Concentration, how.concentration_places),
        };
        let stated = |replicate: Option<u32>, quantity, value: String, unit: &str| Input::Stated {
            run: run.clone(),
            replicate,
            quantity,
            value,
            unit: unit.to_string(),
        };
        let mut inputs = Vec::new();
        for r in &outcome.replicates {
            let n = Some(r.number);
            inputs.push(stated(
                n,
                StatedQuantity::PortionMass,
                r.portion_g.to_string(),
                "g",
            ));
            inputs.push(stated(
                n,
                StatedQuantity::TitrantAmount,
                r.titrant_net.to_string(),
                "g",
            ));
            inputs.push(stated(
                n,
                quantity,
                written(r.value, places, 0),
                &outcome.unit,
            ));
        }
        let final_value = written(outcome.mean, places, how.final_off_by);
        inputs.push(stated(None, quantity, final_value, &outcome.unit));
        inputs
    })
}

/// Value and U as GUM 7.2.6 rounding gives them, each with the decimals of the rounding place.
pub fn as_reported(r: &Reported) -> (String, String) {
    let places = r.places.max(0) as usize;
    (
        format!("{:.*}", places, r.value),
        format!("{:.*}", places, r.expanded_uncertainty),
    )
}

/// The reported result of an assay, written by `write` from the recomputed rounding.
pub fn reported_result(run: &str, write: fn(&Reported) -> (String, String)) -> Derive {
    let run = run.to_string();
    Rc::new(move |catalog: &Catalog| {
        let outcome = recomputed(catalog, &run).outcome;
        let reported = outcome
            .reported
            .expect("the assay has an expanded uncertainty");
        let (value, expanded_uncertainty) = write(&reported);
        vec![Input::Result {
            run: run.clone(),
            value,
            expanded_uncertainty,
            unit: outcome.unit.clone(),
        }]
    })
}

/// The entry hash of a run by id.
pub fn run_hash(catalog: &Catalog, run: &str) -> assize_ledger::EntryHash {
    catalog
        .find_id(Run::KIND, run)
        .unwrap_or_else(|| panic!("no run {run}"))
}

/// A sign-off of a run by its author, based on the head at signing time.
pub fn sign_off(run: &str, meaning: Meaning, justification: &str) -> MakeDraft {
    let run = run.to_string();
    let justification = justification.to_string();
    Rc::new(move |ledger: &Ledger, catalog: &Catalog, author: &str| {
        let head = ledger.head().expect("head").expect("not empty");
        let record = SignOff {
            subject: run_hash(catalog, &run),
            meaning,
            based_on_seq: head.seq,
            based_on: head.hash,
            report_sha256: None,
            comment: format!("{} after reading the exception report", meaning.name()),
            justification: justification.clone(),
        };
        record.check().expect("a well-formed sign-off");
        Draft::of_record(author, &record).expect("draft")
    })
}

/// The replicate entry of a run by number.
pub fn replicate_entry(
    catalog: &Catalog,
    run: &str,
    number: u32,
) -> (assize_ledger::EntryHash, Replicate) {
    let run_hash = run_hash(catalog, run);
    catalog
        .of_run(&run_hash)
        .into_iter()
        .find_map(|e| match catalog.current_of(e).as_ref() {
            LabBody::Replicate(r) if r.number == number => Some((e.hash, r.clone())),
            _ => None,
        })
        .unwrap_or_else(|| panic!("run {run} has no replicate {number}"))
}

/// The reported result entry of a run.
pub fn result_entry(catalog: &Catalog, run: &str) -> (assize_ledger::EntryHash, ReportedResult) {
    let run_hash = run_hash(catalog, run);
    catalog
        .of_run(&run_hash)
        .into_iter()
        .find_map(|e| match catalog.current_of(e).as_ref() {
            LabBody::Result(r) => Some((e.hash, r.clone())),
            _ => None,
        })
        .unwrap_or_else(|| panic!("run {run} has no reported result"))
}

/// A correction of replicate `number`'s endpoint note, with `reason` (which may be empty: the
/// correction record is then drafted directly, as the tool would refuse it).
pub fn correct_endpoint(run: &str, number: u32, reason: &str) -> MakeDraft {
    let run = run.to_string();
    let reason = reason.to_string();
    Rc::new(move |_: &Ledger, catalog: &Catalog, author: &str| {
        let (hash, mut replicate) = replicate_entry(catalog, &run, number);
        replicate.endpoint = "faint pink persisting 30 s (read against a white tile)".into();
        let correction = Correction {
            supersedes: hash,
            kind: Replicate::KIND.into(),
            replacement: codec::encode(&replicate).expect("encode"),
            reason: reason.clone(),
        };
        correction.check().expect("a valid replacement");
        Draft::of_record(author, &correction).expect("draft")
    })
}

/// A correction of a run's reported value to the GUM-rounded recomputed value, with `reason`.
pub fn correct_result_value(run: &str, reason: &str) -> MakeDraft {
    let run = run.to_string();
    let reason = reason.to_string();
    Rc::new(move |_: &Ledger, catalog: &Catalog, author: &str| {
        let (hash, _) = result_entry(catalog, &run);
        let reported = recomputed(catalog, &run)
            .outcome
            .reported
            .expect("reported");
        let (value, _) = as_reported(&reported);
        let changes = [("value".to_string(), value)];
        correction_draft(catalog, hash, &changes, &reason, author).expect("correction accepted")
    })
}

/// A registry entry: QA changes `person`'s role.
pub fn change_role(person: &'static str, role: Role) -> MakeDraft {
    Rc::new(move |_: &Ledger, _: &Catalog, author: &str| {
        let record = ChangeRole {
            person: person.into(),
            role,
            reason: "moved to the review team".into(),
        };
        Draft::of_record(author, &record).expect("draft")
    })
}

/// An input as entered, turned into its record and changed by `alter` before it is drafted:
/// for records the intake cannot express or would refuse.
pub fn entered_then<R, F>(entered: (String, Vec<(String, String)>), alter: F) -> MakeDraft
where
    R: Record + LabRecord + 'static,
    F: Fn(&mut R, &Catalog) + 'static,
{
    let (kind, fields) = entered;
    Rc::new(move |_: &Ledger, catalog: &Catalog, author: &str| {
        let entered = Input::from_fields(&kind, &fields).expect("fields make an input");
        let draft = intake::draft(&entered, catalog, author).expect("the input is accepted");
        let mut record: R = codec::decode_exact(&draft.body).expect("decodes");
        alter(&mut record, catalog);
        Draft::of_record(author, &record).expect("draft")
    })
}

/// A plan: the clean scenario, or the clean scenario with one thing changed.
#[derive(Clone)]
pub struct Plan {
    /// The steps, in the order they are recorded.
    pub steps: Vec<Step>,
    /// The knobs the plan was made from.
    pub knobs: Knobs,
}

impl Plan {
    /// The clean scenario.
    pub fn clean() -> Plan {
        Plan::from_knobs(Knobs::default())
    }

    /// The scenario with these knobs.
    pub fn from_knobs(knobs: Knobs) -> Plan {
        let setup = day("2026-11-20");
        let adopt = |label: &str, hms: &str, document: &str, text: &str| {
            input(
                label,
                at(setup, hms),
                Who::Qa,
                "adopt",
                &[("document", document), ("text", text)],
            )
        };
        let mut steps = vec![
            adopt("adopt-policy", "08:05:00", "policy", POLICY_TEXT),
            adopt("adopt-method", "08:06:00", "method", METHOD_TEXT),
            input(
                "balance",
                at(setup, "09:00:00"),
                Who::Analyst,
                "balance",
                &[
                    ("id", BALANCE),
                    (
                        "description",
                        "analytical balance, weighing room 2, bench 3",
                    ),
                    ("readability", "0.0001 g"),
                    ("capacity", "220 g"),
                    // USP <41>: minimum weight from the repeatability assessment (invented).
                    ("minimum_weight", "0.0082 g"),
                ],
            ),
            input(
                "calibration",
                at(setup, "09:02:00"),
                Who::Analyst,
                "calibration",
                &[
                    ("balance", BALANCE),
                    ("certificate", "CAL-T-0412"),
                    ("performed_on", "2026-03-02"),
                    ("due_on", "2027-03-02"),
                    ("passed", "true"),
                    ("repeatability_sd", "0.00004 g"),
                    ("sensitivity_relative_u", "0.000005"),
                ],
            ),
            input(
                "reference-lot",
                at(setup, "09:04:00"),
                Who::Analyst,
                "reference-lot",
                &[
                    ("id", REFERENCE_LOT),
                    ("substance", "sodium oxalate"),
                    ("formula", "Na2C2O4"),
                    ("purity", "0.99965"),
                    ("purity_expanded_u", "0.00024"),
                    ("coverage_factor", "2"),
                    ("certificate", "RM-T-5521"),
                    ("valid_until", "2027-06-30"),
                    ("drying", "2 h at 110 C, cooled in a desiccator"),
                ],
            ),
            titrant_step("titrant", TITRANT, at(setup, "09:06:00")),
            sample_step(
                "sample",
                SAMPLE,
                at(setup, "14:06:00"),
                "2026-11-20T14:05:00Z",
            ),
            balance_check(
                "check-std-day",
                Who::Analyst,
                at(knobs.std_day, "07:52:00"),
                "200.0003 g",
            ),
        ];
        steps.extend(run_steps(&knobs.std_spec()));
        steps.push(balance_check(
            "check-assay-day",
            Who::Analyst2,
            at(knobs.assay_day, "07:50:30"),
            "200.0001 g",
        ));
        steps.extend(run_steps(&knobs.assay_spec()));
        let last = steps.last().expect("steps").at;
        steps.push(drafted(
            "review",
            plus(last, 45 * 60),
            Who::Reviewer,
            sign_off(ASSAY, Meaning::Reviewed, ""),
        ));
        steps.push(drafted(
            "approval",
            plus(last, 55 * 60),
            Who::Reviewer,
            sign_off(ASSAY, Meaning::Approved, ""),
        ));
        Plan { steps, knobs }
    }

    fn index(&self, label: &str) -> usize {
        self.steps
            .iter()
            .position(|s| s.label == label)
            .unwrap_or_else(|| panic!("the plan has no step {label:?}"))
    }

    /// The step with this label.
    pub fn step(&self, label: &str) -> &Step {
        &self.steps[self.index(label)]
    }

    /// The step with this label, to change.
    pub fn step_mut(&mut self, label: &str) -> &mut Step {
        let i = self.index(label);
        &mut self.steps[i]
    }

    /// Sets (or adds) a field of an input step.
    pub fn set(&mut self, label: &str, field: &str, value: &str) -> &mut Plan {
        let Act::Input { fields, .. } = &mut self.step_mut(label).act else {
            panic!("step {label:?} is not an input");
        };
        match fields.iter_mut().find(|(name, _)| name == field) {
            Some((_, old)) => *old = value.to_string(),
            None => fields.push((field.to_string(), value.to_string())),
        }
        self
    }

    /// A field of an input step.
    pub fn get(&self, label: &str, field: &str) -> String {
        let Act::Input { fields, .. } = &self.step(label).act else {
            panic!("step {label:?} is not an input");
        };
        fields
            .iter()
            .find(|(name, _)| name == field)
            .map(|(_, v)| v.clone())
            .unwrap_or_else(|| panic!("step {label:?} has no field {field}"))
    }

    /// The kind word and fields of an input step.
    pub fn input_of(&self, label: &str) -> (String, Vec<(String, String)>) {
        match &self.step(label).act {
            Act::Input { kind, fields } => (kind.clone(), fields.clone()),
            _ => panic!("step {label:?} is not an input"),
        }
    }

    /// A copy of an input step under a new label, recorded at `time`, with fields changed.
    pub fn copy(
        &self,
        label: &str,
        new_label: &str,
        time: Timestamp,
        changes: &[(&str, &str)],
    ) -> Step {
        let mut step = self.step(label).clone();
        step.label = new_label.to_string();
        step.at = time;
        let Act::Input { fields, .. } = &mut step.act else {
            panic!("step {label:?} is not an input");
        };
        for (field, value) in changes {
            match fields.iter_mut().find(|(name, _)| name == field) {
                Some((_, old)) => *old = value.to_string(),
                None => fields.push((field.to_string(), value.to_string())),
            }
        }
        step
    }

    /// Gives every step after `label` the record time of `label`, so they follow it one
    /// second apart.
    pub fn follow_closely(&mut self, label: &str) -> &mut Plan {
        let i = self.index(label);
        let time = self.steps[i].at;
        for step in &mut self.steps[i + 1..] {
            step.at = time;
        }
        self
    }

    /// A time field of an input step.
    pub fn time_of(&self, label: &str, field: &str) -> Timestamp {
        Timestamp::parse_rfc3339(&self.get(label, field)).expect("an RFC 3339 time")
    }

    /// Removes a step.
    pub fn remove(&mut self, label: &str) -> &mut Plan {
        let i = self.index(label);
        self.steps.remove(i);
        self
    }

    /// Inserts a step right after the one labelled `after`.
    pub fn insert_after(&mut self, after: &str, step: Step) -> &mut Plan {
        let i = self.index(after);
        self.steps.insert(i + 1, step);
        self
    }

    /// Inserts a step right before the one labelled `before`.
    pub fn insert_before(&mut self, before: &str, step: Step) -> &mut Plan {
        let i = self.index(before);
        self.steps.insert(i, step);
        self
    }

    /// Moves a step to right after the one labelled `after`.
    pub fn move_after(&mut self, label: &str, after: &str) -> &mut Plan {
        let step = self.steps.remove(self.index(label));
        self.insert_after(after, step)
    }

    /// Sets the record time of a step.
    pub fn record_at(&mut self, label: &str, time: Timestamp) -> &mut Plan {
        self.step_mut(label).at = time;
        self
    }

    /// Replaces what a step records.
    pub fn replace(&mut self, label: &str, act: Act) -> &mut Plan {
        self.step_mut(label).act = act;
        self
    }
}

/// The titrant preparation step.
pub fn titrant_step(label: &str, id: &str, time: Timestamp) -> Step {
    input(
        label,
        time,
        Who::Analyst,
        "titrant",
        &[
            ("id", id),
            ("formula", "KMnO4"),
            ("nominal_concentration", "0.02"),
            ("prepared_on", "2026-11-16"),
            ("valid_until", "2027-02-16"),
        ],
    )
}

/// A sample received at `received_at`.
pub fn sample_step(label: &str, id: &str, time: Timestamp, received_at: &str) -> Step {
    input(
        label,
        time,
        Who::Analyst,
        "sample",
        &[
            ("id", id),
            (
                "description",
                "hydrogen peroxide about 30 %, drum 2 of an invented lot",
            ),
            ("received_at", received_at),
        ],
    )
}

/// A routine check of the balance with a 200 g test weight observed at `observed`, recorded
/// 70 s later.
pub fn balance_check(label: &str, who: Who, observed: Timestamp, reading: &str) -> Step {
    input(
        label,
        plus(observed, 70),
        who,
        "balance-check",
        &[
            ("balance", BALANCE),
            ("test_weight", "TW-F1-200G-03"),
            ("reference_mass", "200.0002 g"),
            ("reading", reading),
            ("at", observed.to_string().as_str()),
        ],
    )
}

/// A ledger played from a plan.
pub struct Built {
    /// Holds the ledger file (removed when dropped).
    pub _dir: tempfile::TempDir,
    /// The ledger.
    pub ledger: Ledger,
    /// The entries each step wrote, by label.
    pub written: HashMap<String, Vec<Entry>>,
}

impl Built {
    /// The entries a step wrote.
    pub fn entries(&self, label: &str) -> &[Entry] {
        self.written
            .get(label)
            .unwrap_or_else(|| panic!("no step {label:?} was played"))
    }

    /// Sequence number of the single entry a step wrote.
    pub fn seq(&self, label: &str) -> u64 {
        let entries = self.entries(label);
        assert_eq!(
            entries.len(),
            1,
            "step {label:?} wrote {} entries",
            entries.len()
        );
        entries[0].seq
    }
}

/// Plays a plan into a fresh ledger: the QA officer opens it and enrols the others, then every
/// step is recorded at its time.
pub fn build(plan: &Plan) -> Built {
    // A memory-backed directory where the system has one: every append is a durable
    // transaction, and the tests need the rules, not the disk.
    let shm = std::path::Path::new("/dev/shm");
    let dir = if shm.is_dir() {
        tempfile::tempdir_in(shm).or_else(|_| tempfile::tempdir())
    } else {
        tempfile::tempdir()
    }
    .expect("temp dir");
    let start = at(day("2026-11-20"), "08:00:00");
    let clock = Arc::new(FixedClock::new(start, 1_000_000));
    let qa = Who::Qa.signer();
    let (mut ledger, _) = Ledger::create(
        &dir.path().join("lab.ledger"),
        "Rule Test Laboratory (invented)",
        "QA Lead (test person)",
        &qa,
        assize_verify::kind_rules(),
        clock.clone(),
    )
    .expect("ledger created");
    for (who, name, role) in [
        (Who::Analyst, "Analyst A (test person)", Role::Analyst),
        (Who::Analyst2, "Analyst B (test person)", Role::Analyst),
        (Who::Reviewer, "Reviewer R (test person)", Role::Reviewer),
    ] {
        let enrolment = Enrolment {
            person: who.person().into(),
            name: name.into(),
            role,
            public_key: who.signer().public_key(),
        };
        ledger.append_record(&enrolment, &qa).expect("enrolment");
    }
    let mut written = HashMap::new();
    // One catalog kept up to date entry by entry (what `intake::record` would load afresh for
    // every step); inputs are resolved against it exactly as `intake::record` resolves them.
    let mut catalog = Catalog::load(ledger.store()).expect("catalog");
    for step in &plan.steps {
        let head = ledger.head().expect("head").expect("opened");
        clock.set(step.at.max(plus(head.record_time, 1)));
        let signer = step.who.signer();
        let fail = |e: &dyn std::fmt::Display| -> ! { panic!("step {:?}: {e}", step.label) };
        let inputs = match &step.act {
            Act::Input { kind, fields } => {
                vec![Input::from_fields(kind, fields).unwrap_or_else(|e| fail(&e))]
            }
            Act::Derived(derive) => derive(&catalog),
            Act::Draft(_) => Vec::new(),
        };
        let entries = match &step.act {
            Act::Draft(make) => {
                let draft = make(&ledger, &catalog, signer.person());
                vec![ledger
                    .append(draft, Some(&signer))
                    .unwrap_or_else(|e| fail(&e))]
            }
            _ => record_inputs(&mut ledger, &mut catalog, &signer, &inputs)
                .unwrap_or_else(|e| fail(&e)),
        };
        if matches!(step.act, Act::Draft(_)) {
            catalog.add(&entries[0]);
        }
        written.insert(step.label.clone(), entries);
    }
    Built {
        _dir: dir,
        ledger,
        written,
    }
}

/// Records `inputs` signed by `signer` in one transaction, as `intake::record` does, resolving
/// ids against `catalog` (which is brought up to date with every entry written).
fn record_inputs(
    ledger: &mut Ledger,
    catalog: &mut Catalog,
    signer: &Signer,
    inputs: &[Input],
) -> Result<Vec<Entry>, assize_ledger::LedgerError> {
    let author = signer.person().to_string();
    let mut added = 0;
    let entries = ledger.append_batch(inputs.len(), Some(signer), |i, earlier| {
        for entry in &earlier[added..] {
            catalog.add(entry);
        }
        added = earlier.len();
        intake::draft(&inputs[i], catalog, &author).map_err(|reason| {
            assize_ledger::LedgerError::BadInput {
                what: inputs[i].kind().to_string(),
                reason,
            }
        })
    })?;
    for entry in &entries[added..] {
        catalog.add(entry);
    }
    Ok(entries)
}

/// Validates the whole ledger, and checks that every way of validating agrees: the streaming
/// validation with its default window, with windows so small that some of what a run depends
/// on (its own entries, a later check, calibration or correction) arrives after it was first
/// judged (so it is judged again from the indexes), and the validation over a catalog of the
/// whole ledger held in memory.
pub fn validation(built: &Built) -> Validation {
    let options = ReplayOptions::default();
    let streamed =
        validate(&built.ledger, &Scope::Ledger, &options, &mut |_| {}).expect("validation runs");
    let expected = comparable(&streamed);
    let in_memory = validate_in_memory(&built.ledger, &Scope::Ledger, &options, &mut |_| {})
        .expect("in-memory validation runs");
    assert_eq!(
        comparable(&in_memory),
        expected,
        "in memory and streaming differ"
    );
    assert_eq!(in_memory.runs_checked, streamed.runs_checked);
    assert_eq!(
        summaries(&in_memory),
        summaries(&streamed),
        "the run summaries differ"
    );
    // Each run judged on its own at narrow windows, then runs judged a few at a time.
    let narrow_windows = [1, 3, 8, 21, 55].map(|window| (window, 1));
    for (window, runs_per_judgement) in narrow_windows.into_iter().chain([(1, 2), (5, 3), (13, 4)])
    {
        let narrow = StreamOptions {
            window,
            runs_per_judgement,
            ..StreamOptions::default()
        };
        let late = validate_streaming(
            &built.ledger,
            &Scope::Ledger,
            &options,
            &narrow,
            &mut |_| {},
        )
        .expect("narrow streaming validation runs");
        assert_eq!(
            comparable(&late),
            expected,
            "window {window}, {runs_per_judgement} runs per judgement differs"
        );
    }
    streamed
}

/// Checks that the streaming validation agrees with the in-memory one at every window from
/// one entry to the whole ledger: each run is then judged at every possible point of the walk,
/// before and after each record that arrives late for it.
pub fn agree_at_every_window(built: &Built) {
    let options = ReplayOptions::default();
    let expected = comparable(
        &validate_in_memory(&built.ledger, &Scope::Ledger, &options, &mut |_| {})
            .expect("in-memory validation runs"),
    );
    let head = built.ledger.head().expect("head").map_or(0, |h| h.seq);
    for window in 1..=head {
        let narrow = StreamOptions {
            window,
            runs_per_judgement: 1 + (window as usize % 3),
            ..StreamOptions::default()
        };
        let streamed = validate_streaming(
            &built.ledger,
            &Scope::Ledger,
            &options,
            &narrow,
            &mut |_| {},
        )
        .expect("streaming validation runs");
        assert_eq!(comparable(&streamed), expected, "window {window} differs");
    }
}

/// Each summarized run with its result, conformance and counts of findings.
fn summaries(v: &Validation) -> Vec<String> {
    let mut rows: Vec<String> = v
        .runs
        .iter()
        .map(|r| format!("{} {:?} {:?} {:?}", r.run, r.result, r.conforms, r.findings))
        .collect();
    rows.sort();
    rows
}

/// What two validations must agree on: every finding's code, run, message and entries.
fn comparable(v: &Validation) -> Vec<String> {
    v.findings
        .iter()
        .map(|f| {
            let entries: Vec<u64> = f.entries.iter().map(|e| e.seq).collect();
            format!("{} {:?} {} {entries:?}", f.code.text(), f.run, f.message)
        })
        .collect()
}

/// The codes among findings.
pub fn codes(findings: &[Finding]) -> BTreeSet<&'static str> {
    findings.iter().map(|f| f.code.text()).collect()
}

/// Findings as lines, for assertion messages.
pub fn listing(findings: &[Finding]) -> String {
    findings
        .iter()
        .map(|f| {
            format!(
                "  {} {} (entries {:?})",
                f.code,
                f.message,
                f.entries.iter().map(|e| e.seq).collect::<Vec<_>>()
            )
        })
        .collect::<Vec<_>>()
        .join("\n")
}

/// Asserts that the codes found are exactly `expected` (the clean scenario has none).
pub fn assert_codes(built: &Built, expected: &[&str]) -> Vec<Finding> {
    let findings = validation(built).findings;
    let want: BTreeSet<&str> = expected.iter().copied().collect();
    assert_eq!(
        codes(&findings),
        want,
        "expected exactly {want:?}; found:\n{}",
        listing(&findings)
    );
    findings
}

/// Builds the plan and asserts the codes found are exactly `expected`.
pub fn expect_codes(plan: &Plan, expected: &[&str]) -> (Built, Vec<Finding>) {
    let built = build(plan);
    let findings = assert_codes(&built, expected);
    (built, findings)
}

/// The findings of one code.
pub fn of_code<'a>(findings: &'a [Finding], code: &str) -> Vec<&'a Finding> {
    findings.iter().filter(|f| f.code.text() == code).collect()
}

/// Whether a finding involves the entry at `seq`.
pub fn involves(finding: &Finding, seq: u64) -> bool {
    finding.entries.iter().any(|e| e.seq == seq)
}

/// The document adoptions of a catalog, oldest first.
pub fn adoptions(catalog: &Catalog, document: DocumentKind) -> Vec<assize_ledger::EntryHash> {
    catalog
        .of_kind(Adoption::KIND)
        .filter(|e| matches!(&e.body, LabBody::Adoption(a) if a.document == document))
        .map(|e| e.hash)
        .collect()
}
