//! From the catalog to the recompute engine's inputs: one run's method and policy (as adopted),
//! its valid replicates with their raw-reading net masses, the balances' uncertainty facts, the
//! reference lot and the standardization an assay relies on.
//!
//! Corrections are applied (the latest version of each entry counts) and invalidated replicates
//! are left out. Everything missing or inconsistent is an error naming the run and the entry.

use crate::catalog::{Catalog, LabBody};
use crate::chem::{atomic_weights::ciaaw_2021, molar_mass_of};
use crate::documents::{checked_decimal, CoverageChoice, LabPolicy, MeasuredBy, Method};
use crate::recompute::{
    assay, standardize, AssayData, AssayReplicate, BalanceFacts, MassPortion, Outcome, Settings,
    StandardizationData, StandardizationReplicate, TitrantAmount,
};
use crate::records::{Replicate, Run, RunKind, Weighing};
use crate::uncertainty::CoverageRule;
use assize_ledger::{EntryHash, Record};
use rust_decimal::prelude::ToPrimitive;
use rust_decimal::Decimal;
use serde::Serialize;

/// The documents and identity of one run.
#[derive(Clone, Debug, Serialize)]
pub struct RunContext {
    /// Run entry hash.
    pub run_hash: EntryHash,
    /// The run record in force.
    #[serde(skip)]
    pub run: Run,
    /// The adopted method.
    #[serde(skip)]
    pub method: Method,
    /// SHA-256 of the adopted method text.
    pub method_sha256: String,
    /// The adopted policy.
    #[serde(skip)]
    pub policy: LabPolicy,
    /// SHA-256 of the adopted policy text.
    pub policy_sha256: String,
}

/// A run recomputed from its raw records.
#[derive(Clone, Debug, Serialize)]
pub struct Recomputed {
    /// Which run, under which documents.
    pub context: RunContext,
    /// The standardization an assay used (for an assay).
    pub standardization: Option<Outcome>,
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
    let context = context(catalog, run_hash)?;
    let settings = settings(&context.policy, &context.run.id)?;
    match context.run.kind {
        RunKind::Standardization => {
            let data = standardization_data(catalog, &context)?;
            let outcome = standardize(&data, settings).map_err(|e| e.to_string())?;
            Ok(Recomputed {
                context,
                standardization: None,
                outcome,
            })
        }
        RunKind::Assay => {
            let std_hash = context
                .run
                .standardization
                .ok_or_else(|| fail(&context.run.id, "names no standardization"))?;
            let std_context = self::context(catalog, std_hash)?;
            if std_context.run.kind != RunKind::Standardization {
                return Err(fail(
                    &context.run.id,
                    "its standardization entry is not a standardization run",
                ));
            }
            let std_data = standardization_data(catalog, &std_context)?;
            let data = assay_data(catalog, &context)?;
            let std_outcome = standardize(&std_data, settings).map_err(|e| e.to_string())?;
            let outcome = assay(&std_data, &data, settings).map_err(|e| e.to_string())?;
            Ok(Recomputed {
                context,
                standardization: Some(std_outcome),
                outcome,
            })
        }
    }
}

/// The run, its adopted method and policy.
pub fn context(catalog: &Catalog, run_hash: EntryHash) -> Result<RunContext, String> {
    let Some(LabBody::Run(run)) = catalog.current(&run_hash) else {
        return Err(format!("entry {run_hash} is not a run"));
    };
    let adopted = |hash: &EntryHash, what: &str| match catalog.current(hash) {
        Some(LabBody::Adoption(a)) => Ok(a),
        _ => Err(fail(
            &run.id,
            format!("its {what} entry is not an adopted document"),
        )),
    };
    let method_doc = adopted(&run.method, "method")?;
    let policy_doc = adopted(&run.policy, "policy")?;
    let method = Method::parse(&method_doc.text).map_err(|e| fail(&run.id, e.to_string()))?;
    let policy = LabPolicy::parse(&policy_doc.text).map_err(|e| fail(&run.id, e.to_string()))?;
    Ok(RunContext {
        run_hash,
        run,
        method,
        method_sha256: method_doc.sha256,
        policy,
        policy_sha256: policy_doc.sha256,
    })
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
    let mut replicates: Vec<(EntryHash, Replicate)> = Vec::new();
    for entry in catalog.of_run(&run.run_hash) {
        if entry.kind != Replicate::KIND || !catalog.invalidations_of(&entry.hash).is_empty() {
            continue;
        }
        if let Some(LabBody::Replicate(r)) = catalog.current(&entry.hash) {
            if replicates.iter().any(|(_, other)| other.number == r.number) {
                return Err(fail(
                    &run.run.id,
                    format!("two valid replicates are numbered {}", r.number),
                ));
            }
            replicates.push((entry.hash, r));
        }
    }
    replicates.sort_by_key(|(_, r)| r.number);
    Ok(replicates)
}

fn weighing(catalog: &Catalog, run: &RunContext, hash: &EntryHash) -> Result<Weighing, String> {
    match catalog.current(hash) {
        Some(LabBody::Weighing(w)) if w.run == run.run_hash => Ok(w),
        Some(LabBody::Weighing(_)) => Err(fail(
            &run.run.id,
            format!("weighing {hash} belongs to another run"),
        )),
        _ => Err(fail(&run.run.id, format!("entry {hash} is not a weighing"))),
    }
}

/// What the balance at `balance` contributes: readability, and the sensitivity uncertainty
/// from its latest calibration certificate (or the policy's default).
pub fn balance_facts(
    catalog: &Catalog,
    run: &RunContext,
    balance: &EntryHash,
) -> Result<BalanceFacts, String> {
    let Some(LabBody::Balance(b)) = catalog.current(balance) else {
        return Err(fail(
            &run.run.id,
            format!("entry {balance} is not a balance"),
        ));
    };
    let certified = catalog
        .of_kind("lab.calibration")
        .filter_map(|e| match catalog.current(&e.hash) {
            Some(LabBody::Calibration(c)) if c.balance == *balance => c.sensitivity_relative_u,
            _ => None,
        })
        .last();
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

fn portion(catalog: &Catalog, run: &RunContext, hash: &EntryHash) -> Result<MassPortion, String> {
    let w = weighing(catalog, run, hash)?;
    Ok(MassPortion {
        net_g: w.net_grams(),
        balance: balance_facts(catalog, run, &w.balance)?,
    })
}

fn titrant_amount(
    catalog: &Catalog,
    run: &RunContext,
    titrant_weighing: Option<EntryHash>,
    titration: Option<EntryHash>,
) -> Result<TitrantAmount, String> {
    match (run.method.titrant_measured_by, titrant_weighing, titration) {
        (MeasuredBy::Mass, Some(hash), None) => {
            Ok(TitrantAmount::Mass(portion(catalog, run, &hash)?))
        }
        (MeasuredBy::Volume, None, Some(hash)) => match catalog.current(&hash) {
            Some(LabBody::Titration(t)) if t.run == run.run_hash => Ok(TitrantAmount::Volume {
                delivered_ml: t.delivered_ml(),
                resolution_ml: 10f64.powi(-(t.final_reading.decimals() as i32)),
            }),
            _ => Err(fail(
                &run.run.id,
                format!("entry {hash} is not a titration of this run"),
            )),
        },
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
    catalog: &Catalog,
    run: &RunContext,
    required: bool,
) -> Result<Option<TitrantAmount>, String> {
    let blanks: Vec<_> = catalog
        .of_run(&run.run_hash)
        .into_iter()
        .filter_map(|e| match catalog.current(&e.hash) {
            Some(LabBody::Blank(b)) => Some(b),
            _ => None,
        })
        .collect();
    match (required, blanks.last()) {
        (false, None) => Ok(None),
        (false, Some(_)) => Err(fail(
            &run.run.id,
            "the method uses no blank, but one is recorded",
        )),
        (true, None) => Err(fail(
            &run.run.id,
            "the method needs a blank determination; none is recorded",
        )),
        (true, Some(b)) => Ok(Some(titrant_amount(
            catalog,
            run,
            b.titrant_weighing,
            b.titration,
        )?)),
    }
}

/// Inputs of a standardization run.
pub fn standardization_data(
    catalog: &Catalog,
    run: &RunContext,
) -> Result<StandardizationData, String> {
    let id = &run.run.id;
    let lot_hash = run
        .run
        .reference_lot
        .ok_or_else(|| fail(id, "names no reference lot"))?;
    let Some(LabBody::ReferenceLot(lot)) = catalog.current(&lot_hash) else {
        return Err(fail(id, "its reference lot entry is not a reference lot"));
    };
    let method = &run.method;
    let formula = &method.standardization.primary_standard.formula;
    let molar_mass = molar_mass_of(formula, ciaaw_2021()).map_err(|e| fail(id, e.to_string()))?;
    let lot_mass =
        molar_mass_of(&lot.formula, ciaaw_2021()).map_err(|e| fail(id, e.to_string()))?;
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
    let u = to_f64(checked_decimal(&lot.purity_expanded_u) / checked_decimal(&lot.coverage_factor))
        .unwrap_or(f64::NAN);
    let mut replicates = Vec::new();
    for (_, r) in valid_replicates(catalog, run)? {
        replicates.push(StandardizationReplicate {
            number: r.number,
            standard: portion(catalog, run, &r.portion_weighing)?,
            titrant: titrant_amount(catalog, run, r.titrant_weighing, r.titration)?,
        });
    }
    Ok(StandardizationData {
        run_id: id.clone(),
        measured_by: method.titrant_measured_by,
        stoichiometry: method
            .stoichiometry()
            .map_err(|e| fail(id, e.to_string()))?,
        purity,
        purity_standard_u: u,
        standard_molar_mass: molar_mass,
        replicates,
        blank: blank(catalog, run, method.standardization.blank)?,
        burette_max_error_ml: to_f64(checked_decimal(
            &run.policy.uncertainty.burette_max_error_ml,
        ))
        .unwrap_or(f64::NAN),
    })
}

/// Inputs of an assay run (its standardization is assembled separately).
pub fn assay_data(catalog: &Catalog, run: &RunContext) -> Result<AssayData, String> {
    let id = &run.run.id;
    let method = &run.method;
    let analyte = molar_mass_of(&method.assay.analyte.formula, ciaaw_2021())
        .map_err(|e| fail(id, e.to_string()))?;
    let mut replicates = Vec::new();
    for (_, r) in valid_replicates(catalog, run)? {
        replicates.push(AssayReplicate {
            number: r.number,
            sample: portion(catalog, run, &r.portion_weighing)?,
            titrant: titrant_amount(catalog, run, r.titrant_weighing, r.titration)?,
        });
    }
    Ok(AssayData {
        run_id: id.clone(),
        analyte_molar_mass: analyte,
        replicates,
        blank: blank(catalog, run, method.assay.blank)?,
        percent: method.specification.unit == "%",
    })
}
