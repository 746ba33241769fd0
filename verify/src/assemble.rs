//! From the catalog to the recompute engine's inputs: one run's method and policy (as adopted),
//! its valid replicates with their raw-reading net masses, the balances' uncertainty facts, the
//! reference lot and the standardization an assay relies on.
//!
//! Corrections are applied (the latest version of each entry counts) and invalidated replicates
//! are left out. Everything missing or inconsistent is an error naming the run and the entry.
//! One run at a time (`recompute_run`), or many: a `Recomputer` assembles what runs share once
//! (adopted documents, balance facts, the standardization several assays rely on), and
//! `recompute_every_run` spreads the runs of a catalog over the cores. This module never reads
//! the ledger (only the catalog) and never judges a result against limits.

use crate::catalog::{Catalog, CatalogEntry, LabBody};
use crate::chem::{atomic_weights::ciaaw_2021, molar_mass_of, MolarMass};
use crate::documents::{
    checked_decimal, CoverageChoice, LabPolicy, MeasuredBy, Method, Stoichiometry,
};
use crate::recompute::{
    assay_with_standardization, standardize, AssayData, AssayReplicate, BalanceFacts, MassPortion,
    Outcome, Settings, StandardizationData, StandardizationReplicate, TitrantAmount,
};
use crate::records::{Replicate, Run, RunKind, Weighing};
use crate::uncertainty::CoverageRule;
use assize_ledger::{EntryHash, Record};
use foldhash::{HashMap, HashMapExt};
use rust_decimal::prelude::ToPrimitive;
use rust_decimal::Decimal;
use serde::Serialize;
use std::borrow::Cow;
use std::collections::VecDeque;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Arc;

/// The documents and identity of one run.
#[derive(Clone, Debug, Serialize)]
pub struct RunContext {
    /// Run entry hash.
    pub run_hash: EntryHash,
    /// The run record in force.
    pub run: Run,
    /// The adopted method (shared by every run that names the same adoption).
    #[serde(skip)]
    pub method: Arc<Method>,
    /// SHA-256 of the adopted method text.
    pub method_sha256: String,
    /// The adopted policy (shared by every run that names the same adoption).
    #[serde(skip)]
    pub policy: Arc<LabPolicy>,
    /// SHA-256 of the adopted policy text.
    pub policy_sha256: String,
}

/// A run recomputed from its raw records.
#[derive(Clone, Debug, Serialize)]
pub struct Recomputed {
    /// Which run, under which documents.
    pub context: RunContext,
    /// The standardization an assay used (for an assay).
    pub standardization: Option<Arc<Outcome>>,
    /// The run's own outcome.
    pub outcome: Outcome,
}

fn fail(run: &str, reason: impl Into<String>) -> String {
    format!("run {run}: {}", reason.into())
}

/// Recomputes the run with this id.
pub fn recompute_run(catalog: &Catalog, run_id: &str) -> Result<Recomputed, String> {
    let run_hash = catalog
        .find_id(Run::KIND, run_id)
        .ok_or_else(|| format!("no run with id {run_id:?}"))?;
    recompute_run_entry(catalog, run_hash)
}

/// Recomputes the run recorded at `run_hash`.
pub fn recompute_run_entry(catalog: &Catalog, run_hash: EntryHash) -> Result<Recomputed, String> {
    Recomputer::new(catalog).run(run_hash)
}

/// The run, its adopted method and policy.
pub fn context(catalog: &Catalog, run_hash: EntryHash) -> Result<RunContext, String> {
    Recomputer::new(catalog).context(run_hash)
}

/// Runs a worker of [`recompute_every_run`] takes at a time: consecutive runs, so a
/// standardization and the assays entered after it mostly fall to the same worker.
const RUNS_PER_BLOCK: usize = 64;

/// Recomputes every run in the catalog on `threads` worker threads (0: one per available
/// core) and returns, in sequence order, each run's entry with what `keep` made of its result.
///
/// Each worker takes blocks of consecutive runs and keeps its own [`Recomputer`], so shared
/// documents and standardizations are mostly assembled once per worker; every result is
/// exactly what [`recompute_run_entry`] gives for the run. `keep` runs on the workers, so what
/// it drops is freed there too.
pub fn recompute_every_run<T, F>(catalog: &Catalog, threads: usize, keep: F) -> Vec<(EntryHash, T)>
where
    T: Send,
    F: Fn(EntryHash, Result<Recomputed, String>) -> T + Sync,
{
    let runs: Vec<EntryHash> = catalog.of_kind(Run::KIND).map(|e| e.hash).collect();
    let threads = match threads {
        0 => std::thread::available_parallelism().map_or(1, |n| n.get()),
        n => n,
    }
    .min(runs.len().div_ceil(RUNS_PER_BLOCK))
    .max(1);
    let next_block = AtomicUsize::new(0);
    let work = || {
        let mut recomputer = Recomputer::new(catalog);
        let mut done = Vec::new();
        loop {
            let start = next_block.fetch_add(RUNS_PER_BLOCK, Ordering::Relaxed);
            if start >= runs.len() {
                return done;
            }
            for (offset, hash) in runs[start..].iter().take(RUNS_PER_BLOCK).enumerate() {
                done.push((start + offset, keep(*hash, recomputer.run(*hash))));
            }
        }
    };
    let mut kept: Vec<(usize, T)> = std::thread::scope(|scope| {
        let workers: Vec<_> = (1..threads).map(|_| scope.spawn(work)).collect();
        let mut kept = work();
        for worker in workers {
            match worker.join() {
                Ok(done) => kept.extend(done),
                Err(panic) => std::panic::resume_unwind(panic),
            }
        }
        kept
    });
    kept.sort_unstable_by_key(|(index, _)| *index);
    kept.into_iter()
        .map(|(index, value)| (runs[index], value))
        .collect()
}

/// Recomputes many runs of one catalog, remembering what runs share: each adopted document is
/// parsed once, each molar mass computed once, each balance's facts found once per policy, and
/// each standardization assembled and recomputed once however many assays rely on it.
///
/// Every result is exactly what [`recompute_run_entry`] gives for the same run: the catalog
/// cannot change while a `Recomputer` borrows it, and a remembered error names the entry it is
/// about, never the run that happened to ask first. What it remembers stays until it is
/// dropped (a few kilobytes per standardization).
pub struct Recomputer<'a> {
    catalog: &'a Catalog,
    /// Parsed method, by adoption entry (the error without the run's name).
    methods: HashMap<EntryHash, Result<Arc<Method>, String>>,
    /// Parsed policy, by adoption entry (the error without the run's name).
    policies: HashMap<EntryHash, Result<Arc<LabPolicy>, String>>,
    /// Coefficients of a method, by adoption entry (the error without the run's name).
    stoichiometries: HashMap<EntryHash, Result<Stoichiometry, String>>,
    /// By formula text, from CIAAW 2021 atomic weights (the error without the run's name).
    molar_masses: HashMap<String, Result<MolarMass, String>>,
    /// By (balance entry, policy adoption entry); only facts found, never errors.
    balances: HashMap<(EntryHash, EntryHash), BalanceFacts>,
    /// A run named as a standardization, by run entry.
    standardizations: HashMap<EntryHash, Arc<Standardization>>,
    /// A standardization's outcome, by (run entry, policy adoption entry of the settings).
    standardization_outcomes: HashMap<(EntryHash, EntryHash), Result<Arc<Outcome>, String>>,
    /// The last few standardizations worked out, with the very inputs they were worked out
    /// from (carried between recomputers in [`DocumentMemory`]).
    recent_standardizations: VecDeque<WorkedStandardization>,
}

/// How many worked-out standardizations a [`DocumentMemory`] keeps: enough for the assays of
/// the last few titrants, which is when a standardization is asked for again.
const RECENT_STANDARDIZATIONS: usize = 8;

/// A standardization's outcome and exactly what it was computed from: [`standardize`] is a
/// function of these two alone, so the same inputs may take the outcome without redoing it.
struct WorkedStandardization {
    settings: Settings,
    data: StandardizationData,
    outcome: Result<Arc<Outcome>, String>,
}

/// What a [`Recomputer`] remembers that does not depend on its catalog: parsed documents,
/// stoichiometries and molar masses, all keyed by adoption entry or formula, and the last few
/// standardizations worked out, each kept with the full inputs it came from (so an outcome is
/// reused only for identical inputs, whatever catalog they were assembled from). Carry it
/// from one recomputer to the next ([`Recomputer::with_memory`], [`Recomputer::into_memory`])
/// when many small catalogs share the same adoptions.
#[derive(Default)]
pub struct DocumentMemory {
    methods: HashMap<EntryHash, Result<Arc<Method>, String>>,
    policies: HashMap<EntryHash, Result<Arc<LabPolicy>, String>>,
    stoichiometries: HashMap<EntryHash, Result<Stoichiometry, String>>,
    molar_masses: HashMap<String, Result<MolarMass, String>>,
    recent_standardizations: VecDeque<WorkedStandardization>,
}

/// A run named as a standardization, as assembled once.
enum Standardization {
    /// Its context could not be built (the error names that run, or its entry).
    Unusable(String),
    /// It is not a standardization run.
    OtherKind,
    /// A standardization run's inputs, or why they could not be assembled.
    Data(Result<StandardizationData, String>),
}

impl<'a> Recomputer<'a> {
    /// A recomputer over `catalog`, remembering nothing yet.
    pub fn new(catalog: &'a Catalog) -> Self {
        Recomputer {
            catalog,
            methods: HashMap::new(),
            policies: HashMap::new(),
            stoichiometries: HashMap::new(),
            molar_masses: HashMap::new(),
            balances: HashMap::new(),
            standardizations: HashMap::new(),
            standardization_outcomes: HashMap::new(),
            recent_standardizations: VecDeque::new(),
        }
    }

    /// A recomputer over `catalog` that starts from what an earlier one remembered of the
    /// same adoptions.
    pub fn with_memory(catalog: &'a Catalog, memory: DocumentMemory) -> Self {
        Recomputer {
            methods: memory.methods,
            policies: memory.policies,
            stoichiometries: memory.stoichiometries,
            molar_masses: memory.molar_masses,
            recent_standardizations: memory.recent_standardizations,
            ..Recomputer::new(catalog)
        }
    }

    /// What this recomputer remembers of documents and formulas, for the next one.
    pub fn into_memory(self) -> DocumentMemory {
        DocumentMemory {
            methods: self.methods,
            policies: self.policies,
            stoichiometries: self.stoichiometries,
            molar_masses: self.molar_masses,
            recent_standardizations: self.recent_standardizations,
        }
    }

    /// Recomputes the run recorded at `run_hash` (see [`recompute_run_entry`]).
    pub fn run(&mut self, run_hash: EntryHash) -> Result<Recomputed, String> {
        let context = self.context(run_hash)?;
        let settings = settings(&context.policy, &context.run.id)?;
        match context.run.kind {
            RunKind::Standardization => {
                let standardization = self.standardization(run_hash);
                let Standardization::Data(data) = standardization.as_ref() else {
                    unreachable!("a run whose context is built is assembled as its kind says");
                };
                let data = data.as_ref().map_err(Clone::clone)?;
                let outcome =
                    self.standardization_outcome(run_hash, context.run.policy, data, settings)?;
                Ok(Recomputed {
                    context,
                    standardization: None,
                    outcome: Arc::unwrap_or_clone(outcome),
                })
            }
            RunKind::Assay => self.assay_run(context, settings),
        }
    }

    fn assay_run(&mut self, context: RunContext, settings: Settings) -> Result<Recomputed, String> {
        let std_hash = context
            .run
            .standardization
            .ok_or_else(|| fail(&context.run.id, "names no standardization"))?;
        let standardization = self.standardization(std_hash);
        let std_data = match standardization.as_ref() {
            Standardization::Unusable(reason) => return Err(reason.clone()),
            Standardization::OtherKind => {
                return Err(fail(
                    &context.run.id,
                    "its standardization entry is not a standardization run",
                ))
            }
            Standardization::Data(data) => data.as_ref().map_err(Clone::clone)?,
        };
        let data = self.assay_data(&context)?;
        let std_outcome =
            self.standardization_outcome(std_hash, context.run.policy, std_data, settings)?;
        let outcome = assay_with_standardization(std_data, &std_outcome, &data, settings)
            .map_err(|e| e.to_string())?;
        Ok(Recomputed {
            context,
            standardization: Some(std_outcome),
            outcome,
        })
    }

    /// The run at `std_hash` as a standardization, assembled once.
    fn standardization(&mut self, std_hash: EntryHash) -> Arc<Standardization> {
        if let Some(found) = self.standardizations.get(&std_hash) {
            return Arc::clone(found);
        }
        let assembled = Arc::new(match self.context(std_hash) {
            Err(reason) => Standardization::Unusable(reason),
            Ok(c) if c.run.kind != RunKind::Standardization => Standardization::OtherKind,
            Ok(c) => Standardization::Data(self.standardization_data(&c)),
        });
        self.standardizations
            .insert(std_hash, Arc::clone(&assembled));
        assembled
    }

    /// What [`standardize`] gives for the standardization at `std_hash` under the settings of
    /// the policy adopted at `policy`, computed once (or taken from a recent recomputer that
    /// worked it out from identical inputs).
    fn standardization_outcome(
        &mut self,
        std_hash: EntryHash,
        policy: EntryHash,
        data: &StandardizationData,
        settings: Settings,
    ) -> Result<Arc<Outcome>, String> {
        if let Some(known) = self.standardization_outcomes.get(&(std_hash, policy)) {
            return known.clone();
        }
        if let Some(worked) = self
            .recent_standardizations
            .iter()
            .find(|w| w.settings == settings && w.data == *data)
        {
            return worked.outcome.clone();
        }
        let outcome = standardize(data, settings)
            .map(Arc::new)
            .map_err(|e| e.to_string());
        if self.recent_standardizations.len() == RECENT_STANDARDIZATIONS {
            self.recent_standardizations.pop_front();
        }
        self.recent_standardizations
            .push_back(WorkedStandardization {
                settings,
                data: data.clone(),
                outcome: outcome.clone(),
            });
        self.standardization_outcomes
            .insert((std_hash, policy), outcome.clone());
        outcome
    }

    /// The run, its adopted method and policy (see [`context`]).
    pub fn context(&mut self, run_hash: EntryHash) -> Result<RunContext, String> {
        let catalog = self.catalog;
        let run = match catalog.current_ref(&run_hash).as_deref() {
            Some(LabBody::Run(run)) => run.clone(),
            _ => return Err(format!("entry {run_hash} is not a run")),
        };
        let adopted = |hash: &EntryHash, what: &str| match catalog.current_ref(hash).as_deref() {
            Some(LabBody::Adoption(a)) => Ok(a.sha256.clone()),
            _ => Err(fail(
                &run.id,
                format!("its {what} entry is not an adopted document"),
            )),
        };
        let method_sha256 = adopted(&run.method, "method")?;
        let policy_sha256 = adopted(&run.policy, "policy")?;
        let method = self.method(&run.method).map_err(|e| fail(&run.id, e))?;
        let policy = self.policy(&run.policy).map_err(|e| fail(&run.id, e))?;
        Ok(RunContext {
            run_hash,
            run,
            method,
            method_sha256,
            policy,
            policy_sha256,
        })
    }

    fn method(&mut self, adoption: &EntryHash) -> Result<Arc<Method>, String> {
        let catalog = self.catalog;
        self.methods
            .entry(*adoption)
            .or_insert_with(|| match catalog.current_ref(adoption).as_deref() {
                Some(LabBody::Adoption(a)) => Method::parse(&a.text)
                    .map(Arc::new)
                    .map_err(|e| e.to_string()),
                _ => Err("not an adopted document".into()),
            })
            .clone()
    }

    fn policy(&mut self, adoption: &EntryHash) -> Result<Arc<LabPolicy>, String> {
        let catalog = self.catalog;
        self.policies
            .entry(*adoption)
            .or_insert_with(|| match catalog.current_ref(adoption).as_deref() {
                Some(LabBody::Adoption(a)) => LabPolicy::parse(&a.text)
                    .map(Arc::new)
                    .map_err(|e| e.to_string()),
                _ => Err("not an adopted document".into()),
            })
            .clone()
    }

    /// The method's coefficients, read from its equations once per adopted method.
    fn stoichiometry(&mut self, run: &RunContext) -> Result<Stoichiometry, String> {
        self.stoichiometries
            .entry(run.run.method)
            .or_insert_with(|| run.method.stoichiometry().map_err(|e| e.to_string()))
            .clone()
            .map_err(|e| fail(&run.run.id, e))
    }

    fn molar_mass(&mut self, run_id: &str, formula: &str) -> Result<MolarMass, String> {
        if let Some(known) = self.molar_masses.get(formula) {
            return known.clone().map_err(|e| fail(run_id, e));
        }
        let computed = molar_mass_of(formula, ciaaw_2021()).map_err(|e| e.to_string());
        self.molar_masses
            .insert(formula.to_string(), computed.clone());
        computed.map_err(|e| fail(run_id, e))
    }

    /// What a balance contributes (see [`balance_facts`]).
    fn balance_facts(
        &mut self,
        run: &RunContext,
        balance: &EntryHash,
    ) -> Result<BalanceFacts, String> {
        let key = (*balance, run.run.policy);
        if let Some(known) = self.balances.get(&key) {
            return Ok(known.clone());
        }
        let facts = find_balance_facts(self.catalog, run, balance)?;
        self.balances.insert(key, facts.clone());
        Ok(facts)
    }

    fn portion(
        &mut self,
        run: &RunContext,
        run_entries: &[&CatalogEntry],
        hash: &EntryHash,
    ) -> Result<MassPortion, String> {
        let (net_g, balance) = {
            let w = weighing(self.catalog, run, run_entries, hash)?;
            (w.net_grams(), w.balance)
        };
        Ok(MassPortion {
            net_g,
            balance: self.balance_facts(run, &balance)?,
        })
    }

    fn titrant_amount(
        &mut self,
        run: &RunContext,
        run_entries: &[&CatalogEntry],
        titrant_weighing: Option<EntryHash>,
        titration: Option<EntryHash>,
    ) -> Result<TitrantAmount, String> {
        match (run.method.titrant_measured_by, titrant_weighing, titration) {
            (MeasuredBy::Mass, Some(hash), None) => Ok(TitrantAmount::Mass(self.portion(
                run,
                run_entries,
                &hash,
            )?)),
            (MeasuredBy::Volume, None, Some(hash)) => {
                match body_in_run(self.catalog, run_entries, &hash).as_deref() {
                    Some(LabBody::Titration(t)) if t.run == run.run_hash => {
                        Ok(TitrantAmount::Volume {
                            delivered_ml: t.delivered_ml(),
                            resolution_ml: 10f64.powi(-(t.final_reading.decimals() as i32)),
                        })
                    }
                    _ => Err(fail(
                        &run.run.id,
                        format!("entry {hash} is not a titration of this run"),
                    )),
                }
            }
            (MeasuredBy::Mass, ..) => Err(fail(
                &run.run.id,
                "the method weighs the titrant; give a titrant weighing",
            )),
            (MeasuredBy::Volume, ..) => Err(fail(
                &run.run.id,
                "the method measures titrant by burette; give a titration",
            )),
        }
    }

    fn blank(
        &mut self,
        run: &RunContext,
        run_entries: &[&CatalogEntry],
        required: bool,
    ) -> Result<Option<TitrantAmount>, String> {
        let catalog = self.catalog;
        let last_blank =
            run_entries
                .iter()
                .rev()
                .find_map(|e| match catalog.current_of(e).as_ref() {
                    LabBody::Blank(b) => Some((b.titrant_weighing, b.titration)),
                    _ => None,
                });
        match (required, last_blank) {
            (false, None) => Ok(None),
            (false, Some(_)) => Err(fail(
                &run.run.id,
                "the method uses no blank, but one is recorded",
            )),
            (true, None) => Err(fail(
                &run.run.id,
                "the method needs a blank determination; none is recorded",
            )),
            (true, Some((titrant_weighing, titration))) => Ok(Some(self.titrant_amount(
                run,
                run_entries,
                titrant_weighing,
                titration,
            )?)),
        }
    }

    /// Inputs of a standardization run (see [`standardization_data`]).
    fn standardization_data(&mut self, run: &RunContext) -> Result<StandardizationData, String> {
        let id = &run.run.id;
        let lot_hash = run
            .run
            .reference_lot
            .ok_or_else(|| fail(id, "names no reference lot"))?;
        let lot = match self.catalog.current_ref(&lot_hash).as_deref() {
            Some(LabBody::ReferenceLot(lot)) => lot.clone(),
            _ => return Err(fail(id, "its reference lot entry is not a reference lot")),
        };
        let method = &run.method;
        let formula = &method.standardization.primary_standard.formula;
        let molar_mass = self.molar_mass(id, formula)?;
        let lot_mass = self.molar_mass(id, &lot.formula)?;
        if (lot_mass.value - molar_mass.value).abs() > 1e-9 {
            return Err(fail(
                id,
                format!(
                    "lot {} is {} but the method needs {formula}",
                    lot.id, lot.formula
                ),
            ));
        }
        let purity = to_f64(checked_decimal(&lot.purity)).unwrap_or(f64::NAN);
        let u =
            to_f64(checked_decimal(&lot.purity_expanded_u) / checked_decimal(&lot.coverage_factor))
                .unwrap_or(f64::NAN);
        let run_entries = self.catalog.of_run(&run.run_hash);
        let mut replicates = Vec::new();
        for (_, r) in valid_replicates_among(self.catalog, run, &run_entries)? {
            replicates.push(StandardizationReplicate {
                number: r.number,
                standard: self.portion(run, &run_entries, &r.portion_weighing)?,
                titrant: self.titrant_amount(run, &run_entries, r.titrant_weighing, r.titration)?,
            });
        }
        Ok(StandardizationData {
            run_id: id.clone(),
            measured_by: method.titrant_measured_by,
            stoichiometry: self.stoichiometry(run)?,
            purity,
            purity_standard_u: u,
            standard_molar_mass: molar_mass,
            replicates,
            blank: self.blank(run, &run_entries, method.standardization.blank)?,
            burette_max_error_ml: to_f64(checked_decimal(
                &run.policy.uncertainty.burette_max_error_ml,
            ))
            .unwrap_or(f64::NAN),
        })
    }

    /// Inputs of an assay run (see [`assay_data`]).
    fn assay_data(&mut self, run: &RunContext) -> Result<AssayData, String> {
        let id = &run.run.id;
        let method = &run.method;
        let analyte = self.molar_mass(id, &method.assay.analyte.formula)?;
        let run_entries = self.catalog.of_run(&run.run_hash);
        let mut replicates = Vec::new();
        for (_, r) in valid_replicates_among(self.catalog, run, &run_entries)? {
            replicates.push(AssayReplicate {
                number: r.number,
                sample: self.portion(run, &run_entries, &r.portion_weighing)?,
                titrant: self.titrant_amount(run, &run_entries, r.titrant_weighing, r.titration)?,
            });
        }
        Ok(AssayData {
            run_id: id.clone(),
            analyte_molar_mass: analyte,
            replicates,
            blank: self.blank(run, &run_entries, method.assay.blank)?,
            percent: method.specification.unit == "%",
        })
    }
}

/// Coverage and rounding from the policy.
pub fn settings(policy: &LabPolicy, run_id: &str) -> Result<Settings, String> {
    let coverage = match policy.uncertainty.coverage {
        CoverageChoice::K2 => CoverageRule::Fixed(2.0),
        CoverageChoice::StudentT => CoverageRule::StudentT {
            probability: to_f64(checked_decimal(&policy.uncertainty.coverage_probability))
                .ok_or_else(|| fail(run_id, "coverage probability out of range"))?,
        },
    };
    Ok(Settings {
        coverage,
        uncertainty_rounding: policy.uncertainty.expanded_uncertainty_rounding,
    })
}

fn to_f64(value: Decimal) -> Option<f64> {
    value.to_f64()
}

/// Valid replicates of a run: current versions, not invalidated, ordered by number.
pub fn valid_replicates(
    catalog: &Catalog,
    run: &RunContext,
) -> Result<Vec<(EntryHash, Replicate)>, String> {
    valid_replicates_among(catalog, run, &catalog.of_run(&run.run_hash))
}

/// [`valid_replicates`] among `run_entries`, the catalog's entries of the run.
fn valid_replicates_among(
    catalog: &Catalog,
    run: &RunContext,
    run_entries: &[&CatalogEntry],
) -> Result<Vec<(EntryHash, Replicate)>, String> {
    let mut replicates: Vec<(EntryHash, Replicate)> = Vec::new();
    for entry in run_entries {
        if entry.kind != Replicate::KIND || !catalog.invalidations_of(&entry.hash).is_empty() {
            continue;
        }
        if let LabBody::Replicate(r) = catalog.current_of(entry).as_ref() {
            if replicates.iter().any(|(_, other)| other.number == r.number) {
                return Err(fail(
                    &run.run.id,
                    format!("two valid replicates are numbered {}", r.number),
                ));
            }
            replicates.push((entry.hash, r.clone()));
        }
    }
    replicates.sort_by_key(|(_, r)| r.number);
    Ok(replicates)
}

/// The body in force at `hash`, looked for among `run_entries` (the catalog's entries of one
/// run, which sit together) before the whole catalog.
fn body_in_run<'c>(
    catalog: &'c Catalog,
    run_entries: &[&'c CatalogEntry],
    hash: &EntryHash,
) -> Option<Cow<'c, LabBody>> {
    match run_entries.iter().find(|e| e.hash == *hash) {
        Some(entry) => Some(catalog.current_of(entry)),
        None => catalog.current_ref(hash),
    }
}

/// A weighing of this run, borrowed from the catalog unless a correction replaced it.
fn weighing<'c>(
    catalog: &'c Catalog,
    run: &RunContext,
    run_entries: &[&'c CatalogEntry],
    hash: &EntryHash,
) -> Result<Cow<'c, Weighing>, String> {
    let weighing = match body_in_run(catalog, run_entries, hash) {
        Some(Cow::Borrowed(LabBody::Weighing(w))) => Cow::Borrowed(w),
        Some(Cow::Owned(LabBody::Weighing(w))) => Cow::Owned(w),
        _ => return Err(fail(&run.run.id, format!("entry {hash} is not a weighing"))),
    };
    if weighing.run != run.run_hash {
        return Err(fail(
            &run.run.id,
            format!("weighing {hash} belongs to another run"),
        ));
    }
    Ok(weighing)
}

/// What the balance at `balance` contributes: readability, and the sensitivity uncertainty
/// from the calibration certificate in force when the run started (or the policy's default).
pub fn balance_facts(
    catalog: &Catalog,
    run: &RunContext,
    balance: &EntryHash,
) -> Result<BalanceFacts, String> {
    find_balance_facts(catalog, run, balance)
}

fn find_balance_facts(
    catalog: &Catalog,
    run: &RunContext,
    balance: &EntryHash,
) -> Result<BalanceFacts, String> {
    let body = catalog.current_ref(balance);
    let Some(LabBody::Balance(b)) = body.as_deref() else {
        return Err(fail(
            &run.run.id,
            format!("entry {balance} is not a balance"),
        ));
    };
    // The certificate in force when the run started: the latest calibration performed on or
    // before that day (a later certificate says nothing about this run).
    let run_day = run.run.started_at.to_datetime().date_naive();
    let certified = catalog
        .of_kind("lab.calibration")
        .filter_map(|e| match catalog.current_of(e).as_ref() {
            LabBody::Calibration(c) if c.balance == *balance => {
                let performed =
                    chrono::NaiveDate::parse_from_str(&c.performed_on, "%Y-%m-%d").ok()?;
                (performed <= run_day).then(|| (performed, e.seq, c.sensitivity_relative_u.clone()))
            }
            _ => None,
        })
        .max_by_key(|(performed, seq, _)| (*performed, *seq))
        .and_then(|(_, _, relative)| relative);
    let relative = certified.unwrap_or_else(|| {
        run.policy
            .uncertainty
            .balance_sensitivity_relative_u
            .clone()
    });
    Ok(BalanceFacts {
        id: b.id.clone(),
        readability_g: b
            .readability
            .grams()
            .ok()
            .and_then(to_f64)
            .unwrap_or(f64::NAN),
        sensitivity_relative_u: to_f64(checked_decimal(&relative)).unwrap_or(f64::NAN),
    })
}

/// Inputs of a standardization run.
pub fn standardization_data(
    catalog: &Catalog,
    run: &RunContext,
) -> Result<StandardizationData, String> {
    Recomputer::new(catalog).standardization_data(run)
}

/// Inputs of an assay run (its standardization is assembled separately).
pub fn assay_data(catalog: &Catalog, run: &RunContext) -> Result<AssayData, String> {
    Recomputer::new(catalog).assay_data(run)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::catalog::tests::{
        document_ids, record, sample_ledger, signers, ASSAY_ID, SAMPLE_ID, STANDARDIZATION_ID,
        TITRANT_ID,
    };
    use crate::intake::Input;
    use crate::records::RunKind;

    fn runs(catalog: &Catalog) -> Vec<EntryHash> {
        catalog.of_kind(Run::KIND).map(|e| e.hash).collect()
    }

    fn same(a: &Result<Recomputed, String>, b: &Result<Recomputed, String>) -> bool {
        match (a, b) {
            (Ok(a), Ok(b)) => {
                a.outcome == b.outcome
                    && a.standardization == b.standardization
                    && a.context.run_hash == b.context.run_hash
                    && a.context.method_sha256 == b.context.method_sha256
                    && a.context.policy_sha256 == b.context.policy_sha256
            }
            (Err(a), Err(b)) => a == b,
            _ => false,
        }
    }

    /// The sample ledger plus an assay that names another assay as its standardization and an
    /// assay whose standardization is fine but that has no replicates.
    fn ledger_with_faulty_assays() -> (tempfile::TempDir, Catalog) {
        let (dir, mut ledger) = sample_ledger();
        let (_, analyst) = signers();
        let (method, policy) = document_ids();
        let assay = |id: &str, standardization: &str| Input::Run {
            id: id.into(),
            run_kind: RunKind::Assay,
            method: method.clone(),
            policy: policy.clone(),
            titrant: TITRANT_ID.into(),
            reference_lot: None,
            sample: Some(SAMPLE_ID.into()),
            standardization: Some(standardization.into()),
            started_at: "2026-11-23T11:00:00Z".into(),
        };
        record(
            &mut ledger,
            &analyst,
            &[
                assay("AS-ON-AN-ASSAY", ASSAY_ID),
                assay("AS-WITHOUT-DATA", STANDARDIZATION_ID),
            ],
        );
        let catalog = Catalog::load(ledger.store()).expect("load");
        (dir, catalog)
    }

    #[test]
    fn the_recomputer_gives_what_recompute_run_entry_gives_for_every_run() {
        let (_dir, catalog) = ledger_with_faulty_assays();
        let mut recomputer = Recomputer::new(&catalog);
        for _pass in 0..2 {
            for run in runs(&catalog) {
                let alone = recompute_run_entry(&catalog, run);
                assert!(same(&recomputer.run(run), &alone), "{run}: {alone:?}");
            }
        }
        let by_id = |id: &str| recompute_run(&catalog, id);
        assert!(by_id(ASSAY_ID).is_ok());
        assert_eq!(
            by_id("AS-ON-AN-ASSAY").err().as_deref(),
            Some("run AS-ON-AN-ASSAY: its standardization entry is not a standardization run")
        );
        let err = by_id("AS-WITHOUT-DATA").expect_err("an error");
        assert!(
            err.contains("AS-WITHOUT-DATA") && err.contains("no valid replicates"),
            "{err}"
        );
    }

    #[test]
    fn recompute_every_run_keeps_sequence_order_on_any_number_of_threads() {
        let (_dir, catalog) = ledger_with_faulty_assays();
        let expected: Vec<(EntryHash, Result<Recomputed, String>)> = runs(&catalog)
            .into_iter()
            .map(|run| (run, recompute_run_entry(&catalog, run)))
            .collect();
        assert_eq!(expected.len(), 4);
        for threads in [0, 1, 2, 7] {
            let results = recompute_every_run(&catalog, threads, |_, result| result);
            assert_eq!(results.len(), expected.len(), "{threads} threads");
            for ((run, result), (expected_run, expected_result)) in results.iter().zip(&expected) {
                assert_eq!(run, expected_run);
                assert!(same(result, expected_result), "{threads} threads, {run}");
            }
        }
    }

    #[test]
    fn context_shares_the_parsed_documents_between_runs() {
        let (_dir, catalog) = ledger_with_faulty_assays();
        let mut recomputer = Recomputer::new(&catalog);
        let contexts: Vec<RunContext> = runs(&catalog)
            .into_iter()
            .map(|run| recomputer.context(run).expect("context"))
            .collect();
        assert!(Arc::ptr_eq(&contexts[0].method, &contexts[1].method));
        assert!(Arc::ptr_eq(&contexts[0].policy, &contexts[3].policy));
        assert_eq!(contexts[0].method.id, document_ids().0);
        let alone = context(&catalog, contexts[2].run_hash).expect("context");
        assert_eq!(alone.run, contexts[2].run);
        assert_eq!(*alone.method, *contexts[2].method);
    }
}
