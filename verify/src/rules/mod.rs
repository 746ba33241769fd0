//! The validation rules of DESIGN.md §6: each area is a small module that reads the
//! [`Evidence`] and pushes [`Finding`]s.
//!
//! [`Evidence`] is built once per validation: the catalog, every adopted method and policy
//! parsed once, and one [`RunView`] per run with its entries, its sample and its recomputed
//! outcome. A record is judged by the documents in force when it was recorded: a run by the
//! method and policy it names (and `ORD-06` checks those were the versions in force), any
//! other record by the policy adopted most recently before it.

pub mod arithmetic;
pub mod balances;
pub mod capture;
pub mod changes;
pub mod completeness;
pub mod duties;
pub mod integrity;
pub mod materials;
pub mod order;
pub mod out_of_spec;
pub mod patterns;
pub mod replicates;
pub mod timeliness;

use crate::assemble::{recompute_every_run, Recomputed};
use crate::catalog::{Catalog, CatalogEntry, LabBody};
use crate::documents::{LabPolicy, Method};
use crate::findings::{EntryRef, Finding};
use crate::records::{DocumentKind, Replicate, Run, RunKind, Sample, SignOff, Source, Weighing};
use assize_ledger::Record;
use assize_ledger::{EntryHash, Timestamp};
use foldhash::{HashMap, HashMapExt};
use rust_decimal::prelude::ToPrimitive;
use rust_decimal::Decimal;
use std::borrow::Cow;
use std::collections::BTreeSet;
use std::str::FromStr;
use std::sync::Arc;

/// An adopted method or policy, parsed once.
#[derive(Clone, Debug)]
pub struct Adopted {
    /// Adoption entry.
    pub at: EntryRef,
    /// Method or policy.
    pub document: DocumentKind,
    /// Document id.
    pub id: String,
    /// `id vVERSION`, as findings name it.
    pub label: String,
    /// The method, when it is one and parses.
    pub method: Option<Arc<Method>>,
    /// The policy, when it is one and parses.
    pub policy: Option<Arc<LabPolicy>>,
}

/// One run with everything the rules look at.
pub struct RunView<'a> {
    /// The run entry.
    pub entry: &'a CatalogEntry,
    /// The run record in force (borrowed from the catalog unless corrected).
    pub run: Cow<'a, Run>,
    /// The adopted method it names, if that parses.
    pub method: Option<Arc<Adopted>>,
    /// The adopted policy it names, if that parses.
    pub policy: Option<Arc<Adopted>>,
    /// The sample entry and record (assays).
    pub sample: Option<(&'a CatalogEntry, Cow<'a, Sample>)>,
    /// Entries that belong to the run, in sequence order.
    pub entries: Vec<&'a CatalogEntry>,
    /// The recomputed outcome, or why it cannot be recomputed.
    pub recomputed: Result<Recomputed, String>,
}

impl RunView<'_> {
    /// Run id.
    pub fn id(&self) -> &str {
        &self.run.id
    }

    /// Sample id (assays).
    pub fn sample_id(&self) -> Option<&str> {
        self.sample.as_ref().map(|(_, s)| s.id.as_str())
    }

    /// The method, if the run names a method that parses.
    pub fn method(&self) -> Option<&Method> {
        self.method.as_ref().and_then(|m| m.method.as_deref())
    }

    /// The policy, if the run names a policy that parses.
    pub fn policy(&self) -> Option<&LabPolicy> {
        self.policy.as_ref().and_then(|p| p.policy.as_deref())
    }

    /// `id vVERSION` of the policy, for clauses.
    pub fn policy_label(&self) -> &str {
        self.policy
            .as_ref()
            .map_or("the lab policy", |p| p.label.as_str())
    }

    /// `id vVERSION` of the method, for clauses.
    pub fn method_label(&self) -> &str {
        self.method
            .as_ref()
            .map_or("the method", |m| m.label.as_str())
    }

    /// A finding about this run.
    pub fn finding(&self, finding: Finding) -> Finding {
        finding
            .about_run(Some(self.id()), self.sample_id())
            .involving([entry_ref(self.entry)])
    }
}

/// Everything a validation looks at.
pub struct Evidence<'a> {
    /// The lab entries.
    pub catalog: &'a Catalog,
    /// Adopted documents by adoption entry.
    pub adopted: HashMap<EntryHash, Arc<Adopted>>,
    /// Policy adoptions in sequence order.
    pub policies: Vec<EntryHash>,
    /// One view per run, in sequence order.
    pub runs: Vec<RunView<'a>>,
    run_index: HashMap<EntryHash, usize>,
    /// When set, the per-run rules judge only these runs (the others are there to be looked
    /// at, e.g. the standardization an assay relies on).
    focus: Option<Vec<EntryHash>>,
}

impl<'a> Evidence<'a> {
    /// Parses the adopted documents and recomputes every run (on all cores).
    pub fn gather(catalog: &'a Catalog) -> Evidence<'a> {
        let recomputed = recompute_every_run(catalog, 0, |_, result| result);
        Evidence::with_recomputed(catalog, recomputed)
    }

    /// Builds the evidence from runs already recomputed (each run's entry with its result).
    pub fn with_recomputed(
        catalog: &'a Catalog,
        recomputed: Vec<(EntryHash, Result<Recomputed, String>)>,
    ) -> Evidence<'a> {
        let adopted = adopted_documents(catalog);
        Evidence::with_documents(catalog, adopted, recomputed)
    }

    /// Like [`Evidence::with_recomputed`], with the catalog's adopted documents already
    /// parsed (by [`adopted_documents`], here or on a larger catalog that holds the same
    /// adoptions).
    pub fn with_documents(
        catalog: &'a Catalog,
        adopted: HashMap<EntryHash, Arc<Adopted>>,
        recomputed: Vec<(EntryHash, Result<Recomputed, String>)>,
    ) -> Evidence<'a> {
        let mut policies: Vec<(u64, EntryHash)> = adopted
            .iter()
            .filter(|(_, a)| a.document == DocumentKind::Policy)
            .map(|(hash, a)| (a.at.seq, *hash))
            .collect();
        policies.sort();
        let policies = policies.into_iter().map(|(_, hash)| hash).collect();
        let mut evidence = Evidence {
            catalog,
            adopted,
            policies,
            runs: Vec::new(),
            run_index: HashMap::new(),
            focus: None,
        };
        let mut results: HashMap<EntryHash, Result<Recomputed, String>> =
            recomputed.into_iter().collect();
        let mut runs = Vec::new();
        for entry in catalog.of_kind(Run::KIND) {
            let Some(run) = run_record(catalog.current_of(entry)) else {
                continue;
            };
            let sample = run.sample.and_then(|hash| {
                let entry = catalog.entry(&hash)?;
                Some((entry, sample_record(catalog.current_of(entry))?))
            });
            let recomputed = results
                .remove(&entry.hash)
                .unwrap_or_else(|| Err(format!("run {} was not recomputed", run.id)));
            runs.push((entry, run, sample, recomputed));
        }
        for (entry, run, sample, recomputed) in runs {
            let view = RunView {
                entry,
                method: evidence
                    .adopted
                    .get(&run.method)
                    .filter(|a| a.method.is_some())
                    .cloned(),
                policy: evidence
                    .adopted
                    .get(&run.policy)
                    .filter(|a| a.policy.is_some())
                    .cloned(),
                sample,
                entries: catalog.of_run(&entry.hash),
                recomputed,
                run,
            };
            evidence.run_index.insert(entry.hash, evidence.runs.len());
            evidence.runs.push(view);
        }
        evidence
    }

    /// The same evidence, with the per-run rules judging only the run at `run`.
    pub fn focused_on(self, run: EntryHash) -> Evidence<'a> {
        self.focused_on_runs(vec![run])
    }

    /// The same evidence, with the per-run rules judging only the runs at `runs`.
    pub fn focused_on_runs(mut self, runs: Vec<EntryHash>) -> Evidence<'a> {
        self.focus = Some(runs);
        self
    }

    /// Whether the evidence is focused on some runs (the rules that compare runs with each
    /// other then stay silent: the streaming validation applies them on its own).
    pub fn focused(&self) -> bool {
        self.focus.is_some()
    }

    /// Whether the per-run rules judge `run`.
    pub fn judges(&self, run: &RunView<'_>) -> bool {
        self.focus
            .as_ref()
            .is_none_or(|f| f.contains(&run.entry.hash))
    }

    /// The runs the per-run rules judge: every run, or the one in focus.
    pub fn judged_runs(&self) -> impl Iterator<Item = &RunView<'a>> + '_ {
        self.runs.iter().filter(move |r| self.judges(r))
    }

    /// The view of the run recorded at `hash`.
    pub fn run(&self, hash: &EntryHash) -> Option<&RunView<'a>> {
        self.run_index.get(hash).map(|i| &self.runs[*i])
    }

    /// The policy adopted most recently before entry `seq`.
    pub fn policy_before(&self, seq: u64) -> Option<&Adopted> {
        self.policies
            .iter()
            .rev()
            .filter_map(|h| self.adopted.get(h))
            .find(|a| a.at.seq < seq && a.policy.is_some())
            .map(|a| a.as_ref())
    }

    /// A reference to the entry stored under `hash`, if the catalog has it.
    pub fn entry_ref(&self, hash: &EntryHash) -> Option<EntryRef> {
        self.catalog.entry(hash).map(entry_ref)
    }

    /// The run an entry belongs to, directly or through what it supersedes or invalidates.
    pub fn run_of_entry(&self, entry: &CatalogEntry) -> Option<&RunView<'a>> {
        let body = self.catalog.current_of(entry);
        if let Some(run) = body.run() {
            return self.run(&run);
        }
        match body.as_ref() {
            LabBody::Run(_) => self.run(&entry.hash),
            LabBody::Correction(c) => self
                .catalog
                .entry(&c.supersedes)
                .and_then(|e| self.run_of_entry(e)),
            LabBody::Invalidation(i) => self
                .catalog
                .entry(&i.replicate)
                .and_then(|e| self.run_of_entry(e)),
            _ => None,
        }
    }

    /// The data entries a sign-off on `subject` covers: for a run, the run, its entries,
    /// their corrections and the invalidations of its replicates; for a result, the same for
    /// its run plus the result; for anything else, the entry and its corrections.
    pub fn covered_by(&self, subject: &EntryHash) -> Vec<&'a CatalogEntry> {
        let catalog = self.catalog;
        let Some(entry) = catalog.entry(subject) else {
            return Vec::new();
        };
        let mut covered: Vec<&'a CatalogEntry> = vec![entry];
        let run = match catalog.current_of(entry).as_ref() {
            LabBody::Run(_) => Some(entry.hash),
            LabBody::Result(r) => Some(r.run),
            _ => None,
        };
        if let Some(run) = run.and_then(|h| self.run(&h)) {
            covered.push(run.entry);
            for e in &run.entries {
                if e.kind != SignOff::KIND {
                    covered.push(e);
                }
                if e.kind == Replicate::KIND {
                    covered.extend(catalog.invalidations_of(&e.hash));
                }
            }
        }
        let mut with_corrections = covered.clone();
        for e in &covered {
            with_corrections.extend(catalog.corrections_of(&e.hash));
        }
        with_corrections.sort_by_key(|e| e.seq);
        with_corrections.dedup_by_key(|e| e.seq);
        with_corrections
    }

    /// Who authored the data of a run: the run entry, its weighings, titrations, replicates,
    /// blanks, stated values and results, and corrections of any of them.
    pub fn analysts_of(&self, run: &RunView<'_>) -> BTreeSet<String> {
        let mut authors = BTreeSet::from([run.entry.author.clone()]);
        for e in run.entries.iter().chain(std::iter::once(&run.entry)) {
            authors.insert(e.author.clone());
            for c in self.catalog.corrections_of(&e.hash) {
                authors.insert(c.author.clone());
            }
        }
        authors
    }
}

/// Every adopted method and policy of the catalog, parsed once.
pub fn adopted_documents(catalog: &Catalog) -> HashMap<EntryHash, Arc<Adopted>> {
    let mut adopted = HashMap::new();
    for entry in catalog.of_kind("lab.adopt") {
        let LabBody::Adoption(a) = catalog.current_of(entry).into_owned() else {
            continue;
        };
        let (method, policy) = match a.document {
            DocumentKind::Method => (Method::parse(&a.text).ok().map(Arc::new), None),
            DocumentKind::Policy => (None, LabPolicy::parse(&a.text).ok().map(Arc::new)),
        };
        adopted.insert(
            entry.hash,
            Arc::new(Adopted {
                at: entry_ref(entry),
                document: a.document,
                label: format!("{} v{}", a.id, a.version),
                id: a.id,
                method,
                policy,
            }),
        );
    }
    adopted
}

/// The run record in a body, borrowed when the body is.
fn run_record(body: Cow<'_, LabBody>) -> Option<Cow<'_, Run>> {
    match body {
        Cow::Borrowed(LabBody::Run(run)) => Some(Cow::Borrowed(run)),
        Cow::Owned(LabBody::Run(run)) => Some(Cow::Owned(run)),
        _ => None,
    }
}

/// The sample record in a body, borrowed when the body is.
fn sample_record(body: Cow<'_, LabBody>) -> Option<Cow<'_, Sample>> {
    match body {
        Cow::Borrowed(LabBody::Sample(sample)) => Some(Cow::Borrowed(sample)),
        Cow::Owned(LabBody::Sample(sample)) => Some(Cow::Owned(sample)),
        _ => None,
    }
}

/// A reference to a catalog entry.
pub fn entry_ref(entry: &CatalogEntry) -> EntryRef {
    EntryRef {
        seq: entry.seq,
        hash: entry.hash,
    }
}

/// Parses a decimal setting of a policy or method (already checked when it was adopted).
pub fn setting(text: &str) -> Option<Decimal> {
    Decimal::from_str(text.trim()).ok()
}

/// A decimal setting as `f64`.
pub fn setting_f64(text: &str) -> Option<f64> {
    setting(text).and_then(|d| d.to_f64())
}

/// The UTC calendar day of a time stamp.
pub fn day_of(at: Timestamp) -> chrono::NaiveDate {
    at.to_datetime().date_naive()
}

/// A time stamp as shown in findings.
pub fn when(at: Timestamp) -> String {
    at.to_datetime().format("%Y-%m-%d %H:%M UTC").to_string()
}

/// Weighings of a run, current bodies (borrowed unless a correction replaced one), with their
/// entries.
pub fn weighings_of<'a>(
    catalog: &'a Catalog,
    run: &RunView<'a>,
) -> Vec<(&'a CatalogEntry, Cow<'a, Weighing>)> {
    run.entries
        .iter()
        .filter(|e| e.kind == Weighing::KIND)
        .filter_map(|e| match catalog.current_of(e) {
            Cow::Borrowed(LabBody::Weighing(w)) => Some((*e, Cow::Borrowed(w))),
            Cow::Owned(LabBody::Weighing(w)) => Some((*e, Cow::Owned(w))),
            _ => None,
        })
        .collect()
}

/// Whether a captured weighing repeats a keyed twin among `weighings` (same replicate, portion
/// and balance, the same net mass, first read the same day): it is then the original of the
/// same observation, and a rule that judges the observation (the balance's fitness, the
/// portion's size) judges it once, on the keyed weighing. A captured weighing that differs
/// from every keyed twin is judged on its own, as the original it is.
pub fn repeats_keyed_twin(
    weighing: &Weighing,
    weighings: &[(&CatalogEntry, Cow<'_, Weighing>)],
) -> bool {
    weighing.source == Source::Captured
        && weighings.iter().any(|(_, keyed)| {
            keyed.source == Source::Keyed
                && keyed.replicate == weighing.replicate
                && keyed.portion == weighing.portion
                && keyed.balance == weighing.balance
                && keyed.net_grams() == weighing.net_grams()
                && day_of(keyed.first_at) == day_of(weighing.first_at)
        })
}

/// Whether a run is an assay.
pub fn is_assay(run: &RunView<'_>) -> bool {
    run.run.kind == RunKind::Assay
}

/// Applies every rule and returns the findings, sorted.
pub fn evaluate(evidence: &Evidence<'_>) -> Vec<Finding> {
    let mut findings = Vec::new();
    arithmetic::check(evidence, &mut findings);
    completeness::check(evidence, &mut findings);
    out_of_spec::check(evidence, &mut findings);
    balances::check(evidence, &mut findings);
    capture::check(evidence, &mut findings);
    materials::check(evidence, &mut findings);
    duties::check(evidence, &mut findings);
    order::check(evidence, &mut findings);
    replicates::check(evidence, &mut findings);
    timeliness::check(evidence, &mut findings);
    changes::check(evidence, &mut findings);
    patterns::check(evidence, &mut findings);
    crate::findings::sort(&mut findings);
    findings
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::catalog::tests::{record, signers, METHOD_TEXT, POLICY_TEXT};
    use crate::findings::Code;
    use crate::intake::Input;
    use crate::records::{Adoption, DocumentKind, RunKind};
    use assize_ledger::records::Enrolment;
    use assize_ledger::{Draft, FixedClock, Ledger, Role};

    const MINUTE: i64 = 60_000_000;
    /// 2026-11-23T08:00:00Z.
    const MORNING: i64 = 1_795_420_800_000_000;

    fn at(minutes: i64) -> Timestamp {
        Timestamp(MORNING + minutes * MINUTE)
    }

    fn text(minutes: i64) -> String {
        at(minutes).to_string()
    }

    /// A standardization run named `id` under the latest adoptions, whose one weighing is
    /// observed at minute `observed` and recorded at minute `recorded`.
    fn run_with_late_weighing(
        ledger: &mut Ledger,
        clock: &FixedClock,
        id: &str,
        observed: i64,
        recorded: i64,
    ) {
        let (_, analyst) = signers();
        clock.set(at(observed));
        record(
            ledger,
            &analyst,
            &[Input::Run {
                id: id.into(),
                run_kind: RunKind::Standardization,
                method: "QAL-M-014".into(),
                policy: "QAL-POL-001".into(),
                titrant: "KMN-V-1".into(),
                reference_lot: Some("NOX-V-1".into()),
                sample: None,
                standardization: None,
                started_at: text(observed - 1),
            }],
        );
        clock.set(at(recorded));
        record(
            ledger,
            &analyst,
            &[Input::Weighing {
                run: id.into(),
                replicate: 1,
                portion: crate::records::Portion::PrimaryStandard,
                balance: "BV-1".into(),
                mode: crate::records::WeighingMode::ByDifference,
                first: "18.4127 g".into(),
                first_at: text(observed),
                second: "18.1616 g".into(),
                second_at: text(observed),
                captured: false,
                unstable: false,
            }],
        );
    }

    fn codes_of(findings: &[Finding], run: &str) -> Vec<Code> {
        findings
            .iter()
            .filter(|f| f.run.as_deref() == Some(run))
            .map(|f| f.code)
            .collect()
    }

    #[test]
    fn a_record_is_judged_by_the_policy_in_force_when_it_was_made() {
        let dir = tempfile::tempdir().expect("temp dir");
        let (qa, analyst) = signers();
        let clock = Arc::new(FixedClock::new(at(-120), 1_000));
        let (mut ledger, _) = Ledger::create(
            &dir.path().join("versions.ledger"),
            "Policy Version Test Lab",
            "QA Officer One",
            &qa,
            crate::kind_rules(),
            clock.clone(),
        )
        .expect("create");
        ledger
            .append_record(
                &Enrolment {
                    person: analyst.person().into(),
                    name: "Analyst One".into(),
                    role: Role::Analyst,
                    public_key: analyst.public_key(),
                },
                &qa,
            )
            .expect("enrol");
        let adopt = |document, text: &str| Input::Adopt {
            document,
            file: None,
            text: Some(text.into()),
        };
        record(
            &mut ledger,
            &qa,
            &[
                adopt(DocumentKind::Method, METHOD_TEXT),
                adopt(DocumentKind::Policy, POLICY_TEXT),
            ],
        );
        record(
            &mut ledger,
            &analyst,
            &[
                Input::Balance {
                    id: "BV-1".into(),
                    description: "test balance".into(),
                    readability: "0.0001 g".into(),
                    capacity: "220 g".into(),
                    minimum_weight: "0.0820 g".into(),
                },
                Input::ReferenceLot {
                    id: "NOX-V-1".into(),
                    substance: "sodium oxalate".into(),
                    formula: "Na2C2O4".into(),
                    purity: "0.99965".into(),
                    purity_expanded_u: "0.00024".into(),
                    coverage_factor: "2".into(),
                    certificate: "RM-V-1".into(),
                    valid_until: "2027-06-30".into(),
                    drying: "2 h at 110 C".into(),
                },
                Input::Titrant {
                    id: "KMN-V-1".into(),
                    formula: "KMnO4".into(),
                    nominal_concentration: "0.02".into(),
                    prepared_on: "2026-11-16".into(),
                    valid_until: "2027-02-16".into(),
                },
            ],
        );
        let v4 = crate::documents::LabPolicy::parse(POLICY_TEXT).expect("shipped policy");
        assert_eq!(v4.records.contemporaneous_window_minutes, 30);
        // Recorded 20 minutes after the observation: inside version 4's 30-minute window.
        run_with_late_weighing(&mut ledger, &clock, "STD-V4", 0, 20);
        // QA tightens the window to 10 minutes in version 5.
        let v5_text = POLICY_TEXT
            .replace("version = \"4\"", "version = \"5\"")
            .replace(
                "contemporaneous_window_minutes = 30",
                "contemporaneous_window_minutes = 10",
            );
        assert_ne!(v5_text, POLICY_TEXT, "the policy text changed");
        clock.set(at(60));
        record(&mut ledger, &qa, &[adopt(DocumentKind::Policy, &v5_text)]);
        // The same 20-minute delay under version 5 is late.
        run_with_late_weighing(&mut ledger, &clock, "STD-V5", 120, 140);
        // A run recorded after version 5 that still names version 4.
        let catalog = Catalog::load(ledger.store()).expect("catalog");
        let v4_hash = catalog
            .of_kind(Adoption::KIND)
            .find(|e| matches!(&e.body, LabBody::Adoption(a) if a.version == "4"))
            .map(|e| e.hash)
            .expect("version 4 adopted");
        let titrant = catalog.find_id("lab.titrant", "KMN-V-1").expect("titrant");
        let lot = catalog
            .find_id("lab.reference-lot", "NOX-V-1")
            .expect("lot");
        let method = catalog
            .of_kind(Adoption::KIND)
            .find(|e| matches!(&e.body, LabBody::Adoption(a) if a.document == DocumentKind::Method))
            .map(|e| e.hash)
            .expect("method");
        clock.set(at(200));
        let stale = Run {
            id: "STD-STALE".into(),
            kind: RunKind::Standardization,
            method,
            policy: v4_hash,
            titrant,
            reference_lot: Some(lot),
            sample: None,
            standardization: None,
            started_at: at(199),
        };
        ledger
            .append(
                Draft::of_record(analyst.person(), &stale).expect("draft"),
                Some(&analyst),
            )
            .expect("append");

        let catalog = Catalog::load(ledger.store()).expect("catalog");
        let evidence = Evidence::gather(&catalog);
        let findings = evaluate(&evidence);
        let v4_codes = codes_of(&findings, "STD-V4");
        let v5_codes = codes_of(&findings, "STD-V5");
        assert!(!v4_codes.contains(&Code::LateEntry), "{v4_codes:?}");
        assert!(v5_codes.contains(&Code::LateEntry), "{v5_codes:?}");
        let late = findings
            .iter()
            .find(|f| f.code == Code::LateEntry && f.run.as_deref() == Some("STD-V5"))
            .expect("late entry under version 5");
        assert!(late.clause.contains("QAL-POL-001 v5"), "{}", late.clause);
        assert!(late.clause.contains("= 10"), "{}", late.clause);
        assert!(!v4_codes.contains(&Code::SupersededDocument));
        assert!(!v5_codes.contains(&Code::SupersededDocument));
        let stale_codes = codes_of(&findings, "STD-STALE");
        assert!(
            stale_codes.contains(&Code::SupersededDocument),
            "{stale_codes:?}"
        );
    }
}
