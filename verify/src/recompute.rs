//! The recompute engine: from net masses and titrant amounts (themselves exact differences of
//! raw readings) to each replicate's value, the run's mean, standard deviation and RSD, and a
//! GUM uncertainty budget with its expanded uncertainty and the rounded reported value.
//!
//! Standardization, per replicate (DESIGN.md 5): `c_T = (m_PS·P/M_PS)·(ν_T/ν_PS)/q_T`, with
//! `q_T` the titrant delivered less any blank, in kg (mol/kg) or L (mol/L). Assay, per replicate:
//! `w_A = c_T·q_T·(ν_A/ν_T)·M_A/m_S` (mass fraction, ×100 for %). The budget is one product
//! model over both steps, evaluated at the mean portion and titrant amounts, with a repeatability
//! factor per step (Type A, ν = n − 1) whose value makes the model equal the mean of the
//! replicates. Each mean net mass carries the rounding of its readings (two per replicate, each
//! rectangular over ±d/2, independent between replicates, so divided by √n for the mean; a blank's
//! readings are common to every replicate) and one sensitivity term shared by every mass its
//! balance weighed (a correlation group): exponents add, so the same balance weighing the titrant
//! in both steps cancels, two balances do not. The budget's u_c is checked against a Monte Carlo
//! propagation (JCGM 101) through this very code in the tests. This module computes; it never reads the ledger or judges.

use crate::chem::MolarMass;
use crate::documents::{MeasuredBy, Stoichiometry};
use crate::rounding::{report, Reported, UncertaintyRounding};
use crate::stats;
use crate::uncertainty::{evaluate, Budget, CoverageRule, ProductModel, Term};
use rust_decimal::prelude::ToPrimitive;
use rust_decimal::Decimal;
use serde::Serialize;
use std::sync::Arc;

/// What a balance contributes to the uncertainty of a net mass.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct BalanceFacts {
    /// Balance id.
    pub id: String,
    /// Scale interval d, grams.
    pub readability_g: f64,
    /// Relative standard uncertainty of the sensitivity.
    pub sensitivity_relative_u: f64,
}

/// A net mass and the balance that weighed it.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct MassPortion {
    /// Net mass, grams, exact.
    pub net_g: Decimal,
    /// The balance.
    pub balance: BalanceFacts,
}

/// Titrant delivered in one titration.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub enum TitrantAmount {
    /// Weighed (titrant by mass).
    Mass(MassPortion),
    /// From a burette (titrant by volume).
    Volume {
        /// Delivered volume, mL, exact.
        delivered_ml: Decimal,
        /// Smallest displayed burette step, mL.
        resolution_ml: f64,
    },
}

impl TitrantAmount {
    fn amount(&self) -> Decimal {
        match self {
            TitrantAmount::Mass(m) => m.net_g,
            TitrantAmount::Volume { delivered_ml, .. } => *delivered_ml,
        }
    }
}

/// One standardization titration.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct StandardizationReplicate {
    /// Replicate number.
    pub number: u32,
    /// The primary standard portion.
    pub standard: MassPortion,
    /// Titrant delivered.
    pub titrant: TitrantAmount,
}

/// One assay titration.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct AssayReplicate {
    /// Replicate number.
    pub number: u32,
    /// The sample portion.
    pub sample: MassPortion,
    /// Titrant delivered.
    pub titrant: TitrantAmount,
}

/// Everything needed to recompute a standardization.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct StandardizationData {
    /// Run id.
    pub run_id: String,
    /// Titrant by mass or by volume.
    pub measured_by: MeasuredBy,
    /// Coefficients from the method.
    pub stoichiometry: Stoichiometry,
    /// Certified purity, mass fraction.
    pub purity: f64,
    /// Standard uncertainty of the purity (the certificate's U divided by its k).
    pub purity_standard_u: f64,
    /// Molar mass of the primary standard.
    pub standard_molar_mass: MolarMass,
    /// Valid replicates.
    pub replicates: Vec<StandardizationReplicate>,
    /// Blank titrant amount, when the method uses one.
    pub blank: Option<TitrantAmount>,
    /// Burette maximum permissible error, mL (triangular), for titrant by volume.
    pub burette_max_error_ml: f64,
}

/// Everything needed to recompute an assay (besides its standardization).
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct AssayData {
    /// Run id.
    pub run_id: String,
    /// Molar mass of the analyte.
    pub analyte_molar_mass: MolarMass,
    /// Valid replicates.
    pub replicates: Vec<AssayReplicate>,
    /// Blank titrant amount, when the method uses one.
    pub blank: Option<TitrantAmount>,
    /// Report in percent (mass fraction × 100) instead of a plain mass fraction.
    pub percent: bool,
}

/// How budgets are finished.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Settings {
    /// Coverage factor rule.
    pub coverage: CoverageRule,
    /// Rounding of U.
    pub uncertainty_rounding: UncertaintyRounding,
}

/// One replicate's recomputed value.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ReplicateValue {
    /// Replicate number.
    pub number: u32,
    /// Net portion mass, g.
    pub portion_g: Decimal,
    /// Titrant amount less blank, g or mL.
    pub titrant_net: Decimal,
    /// The value (concentration, or content in the reporting unit).
    pub value: f64,
}

/// A recomputed run.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Outcome {
    /// Run id.
    pub run_id: String,
    /// Unit of the values.
    pub unit: String,
    /// Per replicate.
    pub replicates: Vec<ReplicateValue>,
    /// Mean of the replicate values.
    pub mean: f64,
    /// Sample standard deviation (None with one replicate).
    pub standard_deviation: Option<f64>,
    /// Relative standard deviation, percent.
    pub rsd_percent: Option<f64>,
    /// The uncertainty budget of the mean.
    pub budget: Budget,
    /// Mean and U rounded for reporting.
    pub reported: Option<Reported>,
}

/// Why a run could not be recomputed.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct RecomputeError {
    /// Run id.
    pub run_id: String,
    /// What is missing or impossible.
    pub reason: String,
}

impl std::fmt::Display for RecomputeError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "run {}: {}", self.run_id, self.reason)
    }
}

impl std::error::Error for RecomputeError {}

/// Recomputes a standardization.
pub fn standardize(
    data: &StandardizationData,
    settings: Settings,
) -> Result<Outcome, RecomputeError> {
    let fail = |reason: String| RecomputeError {
        run_id: data.run_id.clone(),
        reason,
    };
    if data.replicates.is_empty() {
        return Err(fail("no valid replicates".into()));
    }
    let s = data.stoichiometry;
    let ratio = f64::from(s.titrant_in_standardization) / f64::from(s.primary_standard);
    let blank = data
        .blank
        .as_ref()
        .map_or(Decimal::ZERO, TitrantAmount::amount);
    let mut values = Vec::new();
    for r in &data.replicates {
        let titrant_net = r.titrant.amount() - blank;
        if titrant_net <= Decimal::ZERO {
            return Err(fail(format!(
                "replicate {}: titrant less blank is not positive",
                r.number
            )));
        }
        let moles = to_f64(r.standard.net_g) * data.purity / data.standard_molar_mass.value * ratio;
        values.push(ReplicateValue {
            number: r.number,
            portion_g: r.standard.net_g,
            titrant_net,
            value: moles / (to_f64(titrant_net) / 1000.0),
        });
    }
    let mut model = ProductModel {
        constant: 1000.0 * ratio,
        terms: Vec::new(),
    };
    model.terms.extend(standardization_terms(data, &values));
    let outcome = finish(
        &data.run_id,
        unit_of(data.measured_by),
        values,
        model,
        settings,
    );
    outcome.map_err(fail)
}

/// Recomputes an assay with the standardization it relies on, in one budget.
pub fn assay(
    standardization: &StandardizationData,
    data: &AssayData,
    settings: Settings,
) -> Result<Outcome, RecomputeError> {
    let std_outcome = standardize(standardization, settings).map_err(|e| RecomputeError {
        run_id: data.run_id.clone(),
        reason: format!("its standardization: {e}"),
    })?;
    assay_with_standardization(standardization, &std_outcome, data, settings)
}

/// Like [`assay`], for a caller that already holds `std_outcome`, the outcome of
/// [`standardize`] for `standardization` with the same `settings` (several assays relying on
/// one standardization need it only once). Given any other outcome the result is meaningless.
pub fn assay_with_standardization(
    standardization: &StandardizationData,
    std_outcome: &Outcome,
    data: &AssayData,
    settings: Settings,
) -> Result<Outcome, RecomputeError> {
    let fail = |reason: String| RecomputeError {
        run_id: data.run_id.clone(),
        reason,
    };
    if data.replicates.is_empty() {
        return Err(fail("no valid replicates".into()));
    }
    let s = standardization.stoichiometry;
    let analyte_ratio = f64::from(s.analyte) / f64::from(s.titrant_in_assay);
    let scale = if data.percent { 100.0 } else { 1.0 };
    let blank = data
        .blank
        .as_ref()
        .map_or(Decimal::ZERO, TitrantAmount::amount);
    let mut values = Vec::new();
    for r in &data.replicates {
        let titrant_net = r.titrant.amount() - blank;
        if titrant_net <= Decimal::ZERO {
            return Err(fail(format!(
                "replicate {}: titrant less blank is not positive",
                r.number
            )));
        }
        let moles_titrant = std_outcome.mean * to_f64(titrant_net) / 1000.0;
        let analyte_g = moles_titrant * analyte_ratio * data.analyte_molar_mass.value;
        values.push(ReplicateValue {
            number: r.number,
            portion_g: r.sample.net_g,
            titrant_net,
            value: analyte_g / to_f64(r.sample.net_g) * scale,
        });
    }
    let std_ratio = f64::from(s.titrant_in_standardization) / f64::from(s.primary_standard);
    let mut model = ProductModel {
        constant: std_ratio * analyte_ratio * scale,
        terms: standardization_terms(standardization, &std_outcome.replicates),
    };
    model
        .terms
        .extend(assay_terms(standardization, data, &values));
    let unit = if data.percent { "%" } else { "g/g" };
    finish(&data.run_id, unit, values, model, settings).map_err(fail)
}

fn unit_of(measured_by: MeasuredBy) -> &'static str {
    match measured_by {
        MeasuredBy::Mass => "mol/kg",
        MeasuredBy::Volume => "mol/L",
    }
}

fn to_f64(value: Decimal) -> f64 {
    value.to_f64().unwrap_or(f64::NAN)
}

fn mean_of(values: impl Iterator<Item = Decimal>) -> f64 {
    let all: Vec<f64> = values.map(to_f64).collect();
    stats::mean(&all).unwrap_or(f64::NAN)
}

/// Terms of the standardization, evaluated at the mean portion and titrant amount.
fn standardization_terms(data: &StandardizationData, values: &[ReplicateValue]) -> Vec<Term> {
    let mut terms = Vec::new();
    let first = &data.replicates[0];
    let standard_balance = &first.standard.balance;
    let mean_portion = mean_of(values.iter().map(|v| v.portion_g));
    let n = values.len();
    terms.extend(mass_terms(
        "primary standard mass",
        mean_portion,
        standard_balance,
        1.0,
        rounding_of_mean(standard_balance.readability_g, n, false),
    ));
    terms.push(plain(
        "purity of the primary standard",
        data.purity,
        data.purity_standard_u,
        1.0,
    ));
    terms.push(plain(
        "molar mass of the primary standard",
        data.standard_molar_mass.value,
        data.standard_molar_mass.standard_uncertainty,
        -1.0,
    ));
    let mean_titrant = mean_of(values.iter().map(|v| v.titrant_net));
    terms.extend(titrant_terms(
        "titrant in standardization",
        &first.titrant,
        data.blank.as_ref(),
        mean_titrant,
        n,
        data.burette_max_error_ml,
        -1.0,
    ));
    terms.push(repeatability(
        "repeatability of standardization",
        values,
        data,
    ));
    terms
}

fn assay_terms(
    standardization: &StandardizationData,
    data: &AssayData,
    values: &[ReplicateValue],
) -> Vec<Term> {
    let mut terms = Vec::new();
    let first = &data.replicates[0];
    let n = values.len();
    let mean_titrant = mean_of(values.iter().map(|v| v.titrant_net));
    terms.extend(titrant_terms(
        "titrant in assay",
        &first.titrant,
        data.blank.as_ref(),
        mean_titrant,
        n,
        standardization.burette_max_error_ml,
        1.0,
    ));
    terms.push(plain(
        "molar mass of the analyte",
        data.analyte_molar_mass.value,
        data.analyte_molar_mass.standard_uncertainty,
        1.0,
    ));
    let mean_sample = mean_of(values.iter().map(|v| v.portion_g));
    terms.extend(mass_terms(
        "sample mass",
        mean_sample,
        &first.sample.balance,
        -1.0,
        rounding_of_mean(first.sample.balance.readability_g, n, false),
    ));
    terms.push(repeatability_of("repeatability of assay", values));
    terms
}

fn plain(name: &str, value: f64, u: f64, exponent: f64) -> Term {
    Term {
        name: Arc::from(name),
        value,
        standard_uncertainty: u,
        exponent,
        degrees_of_freedom: None,
        correlation_group: None,
    }
}

/// Standard uncertainty of one displayed reading from its rounding (rectangular over ±d/2).
fn reading_u(resolution: f64) -> f64 {
    resolution / (2.0 * 3.0f64.sqrt())
}

/// Uncertainty of a mean net amount over `n` replicates from the rounding of its readings: two
/// readings per replicate, independent between replicates (so the mean divides by √n), plus,
/// when a blank is subtracted from every replicate, the blank's two readings, common to all.
fn rounding_of_mean(resolution: f64, n: usize, blank: bool) -> f64 {
    let per_replicate = 2.0 * reading_u(resolution).powi(2) / n.max(1) as f64;
    let common = if blank {
        2.0 * reading_u(resolution).powi(2)
    } else {
        0.0
    };
    (per_replicate + common).sqrt()
}

/// Rounding of the readings behind a mean net mass, and the balance's sensitivity (systematic,
/// shared by every mass that balance weighed).
fn mass_terms(
    name: &str,
    mean_net_g: f64,
    balance: &BalanceFacts,
    exponent: f64,
    rounding_u: f64,
) -> Vec<Term> {
    vec![
        plain(
            &format!("{name} (readings on {})", balance.id),
            mean_net_g,
            rounding_u,
            exponent,
        ),
        Term::shared_relative_error(
            &format!("{name} (sensitivity of {})", balance.id),
            &format!("sensitivity of balance {}", balance.id),
            balance.sensitivity_relative_u,
            exponent,
        ),
    ]
}

/// Titrant amount of a step: by mass like any net mass; by burette, reading resolution plus the
/// burette's maximum permissible error (triangular, systematic: the same burette throughout).
fn titrant_terms(
    name: &str,
    amount: &TitrantAmount,
    blank: Option<&TitrantAmount>,
    mean_net: f64,
    n: usize,
    burette_max_error_ml: f64,
    exponent: f64,
) -> Vec<Term> {
    match amount {
        TitrantAmount::Mass(portion) => {
            let rounding = rounding_of_mean(portion.balance.readability_g, n, blank.is_some());
            mass_terms(name, mean_net, &portion.balance, exponent, rounding)
        }
        TitrantAmount::Volume { resolution_ml, .. } => {
            let reading = rounding_of_mean(*resolution_ml, n, blank.is_some());
            let calibration = burette_max_error_ml / 6.0f64.sqrt();
            vec![plain(
                &format!("{name} (burette)"),
                mean_net,
                (reading.powi(2) + calibration.powi(2)).sqrt(),
                exponent,
            )]
        }
    }
}

/// Repeatability of the standardization: its value makes the model equal the replicate mean.
fn repeatability(name: &str, values: &[ReplicateValue], data: &StandardizationData) -> Term {
    let ratio = f64::from(data.stoichiometry.titrant_in_standardization)
        / f64::from(data.stoichiometry.primary_standard);
    let mean_portion = mean_of(values.iter().map(|v| v.portion_g));
    let mean_titrant = mean_of(values.iter().map(|v| v.titrant_net));
    let at_means = 1000.0 * ratio * mean_portion * data.purity
        / (data.standard_molar_mass.value * mean_titrant);
    let mut term = repeatability_of(name, values);
    term.value = stats::mean(&values.iter().map(|v| v.value).collect::<Vec<_>>())
        .unwrap_or(f64::NAN)
        / at_means;
    term
}

/// Relative scatter of the replicate values as a Type A factor of value 1 (ν = n − 1).
fn repeatability_of(name: &str, values: &[ReplicateValue]) -> Term {
    let v: Vec<f64> = values.iter().map(|r| r.value).collect();
    let n = v.len() as f64;
    let relative = match (stats::mean(&v), stats::sample_standard_deviation(&v)) {
        (Some(mean), Some(sd)) if mean != 0.0 => sd / (mean.abs() * n.sqrt()),
        _ => 0.0,
    };
    Term {
        name: Arc::from(format!("{name} (n = {})", v.len())),
        value: 1.0,
        standard_uncertainty: relative,
        exponent: 1.0,
        degrees_of_freedom: (v.len() > 1).then_some(n - 1.0),
        correlation_group: None,
    }
}

fn finish(
    run_id: &str,
    unit: &str,
    values: Vec<ReplicateValue>,
    mut model: ProductModel,
    settings: Settings,
) -> Result<Outcome, String> {
    let v: Vec<f64> = values.iter().map(|r| r.value).collect();
    let mean = stats::mean(&v).ok_or("no values")?;
    // Make the model's value the replicate mean: the assay's own repeatability factor (last
    // term) absorbs the small difference between the mean of ratios and the ratio of means.
    let at_means: f64 = model.constant
        * model
            .terms
            .iter()
            .map(|t| t.value.powf(t.exponent))
            .product::<f64>();
    if let Some(last) = model.terms.last_mut() {
        last.value *= mean / at_means;
    }
    let budget = evaluate(&model, settings.coverage).map_err(|e| e.to_string())?;
    let reported = report(
        mean,
        budget.expanded_uncertainty,
        settings.uncertainty_rounding,
    );
    Ok(Outcome {
        run_id: run_id.to_string(),
        unit: unit.to_string(),
        standard_deviation: stats::sample_standard_deviation(&v),
        rsd_percent: stats::relative_standard_deviation_percent(&v),
        replicates: values,
        mean,
        budget,
        reported,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::chem::{atomic_weights::ciaaw_2021, molar_mass_of};
    use std::str::FromStr;

    fn d(text: &str) -> Decimal {
        Decimal::from_str(text).unwrap()
    }

    fn balance(id: &str) -> BalanceFacts {
        BalanceFacts {
            id: id.into(),
            readability_g: 0.0001,
            sensitivity_relative_u: 2e-5,
        }
    }

    fn portion(net: &str, on: &str) -> MassPortion {
        MassPortion {
            net_g: d(net),
            balance: balance(on),
        }
    }

    const SETTINGS: Settings = Settings {
        coverage: CoverageRule::StudentT { probability: 0.95 },
        uncertainty_rounding: UncertaintyRounding::Nearest,
    };

    /// Invented permanganate standardization (titrant weighed on `titrant_balance`).
    fn standardization(titrant_balance: &str) -> StandardizationData {
        let rows = [
            ("0.2511", "37.4120"),
            ("0.2487", "37.0551"),
            ("0.2530", "37.7018"),
        ];
        StandardizationData {
            run_id: "STD-DEMO".into(),
            measured_by: MeasuredBy::Mass,
            stoichiometry: Stoichiometry {
                titrant_in_standardization: 2,
                primary_standard: 5,
                titrant_in_assay: 2,
                analyte: 5,
            },
            purity: 0.99965,
            purity_standard_u: 0.00012,
            standard_molar_mass: molar_mass_of("Na2C2O4", ciaaw_2021()).unwrap(),
            replicates: rows
                .iter()
                .enumerate()
                .map(|(i, (m, t))| StandardizationReplicate {
                    number: i as u32 + 1,
                    standard: portion(m, "B1"),
                    titrant: TitrantAmount::Mass(portion(t, titrant_balance)),
                })
                .collect(),
            blank: None,
            burette_max_error_ml: 0.03,
        }
    }

    fn peroxide_assay(titrant_balance: &str) -> AssayData {
        let rows = [
            ("0.1502", "26.3310"),
            ("0.1497", "26.2408"),
            ("0.1511", "26.4921"),
        ];
        AssayData {
            run_id: "ASSAY-DEMO".into(),
            analyte_molar_mass: molar_mass_of("H2O2", ciaaw_2021()).unwrap(),
            replicates: rows
                .iter()
                .enumerate()
                .map(|(i, (m, t))| AssayReplicate {
                    number: i as u32 + 1,
                    sample: portion(m, "B1"),
                    titrant: TitrantAmount::Mass(portion(t, titrant_balance)),
                })
                .collect(),
            blank: None,
            percent: true,
        }
    }

    // The values below are recomputed by plain arithmetic from DESIGN.md section 5 with the
    // CIAAW 2021 abridged atomic weights (REFERENCES.md section 6): M(Na2C2O4) =
    // 2·22.990 + 2·12.011 + 4·15.999 and M(H2O2) = 2·1.0080 + 2·15.999; 2:5 stoichiometry
    // (REFERENCES.md section 7, USP, [pub]).
    #[test]
    fn standardization_values_match_plain_arithmetic() {
        let m_ox = 2.0 * 22.990 + 2.0 * 12.011 + 4.0 * 15.999;
        let by_hand: Vec<f64> = [(0.2511, 37.4120), (0.2487, 37.0551), (0.2530, 37.7018)]
            .iter()
            .map(|(m, t)| m * 0.99965 / m_ox * (2.0 / 5.0) / (t / 1000.0))
            .collect();
        let outcome = standardize(&standardization("B2"), SETTINGS).unwrap();
        assert_eq!(outcome.unit, "mol/kg");
        for (r, expected) in outcome.replicates.iter().zip(&by_hand) {
            assert!(
                (r.value - expected).abs() < 1e-12,
                "{} vs {expected}",
                r.value
            );
        }
        let mean = by_hand.iter().sum::<f64>() / 3.0;
        assert!((outcome.mean - mean).abs() < 1e-12);
        let sd = (by_hand.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / 2.0).sqrt();
        assert!((outcome.standard_deviation.unwrap() - sd).abs() < 1e-12);
        assert!((outcome.rsd_percent.unwrap() - 100.0 * sd / mean).abs() < 1e-9);
        assert!(
            (outcome.budget.value - mean).abs() < 1e-12,
            "the budget is of the mean"
        );
    }

    #[test]
    fn assay_values_match_plain_arithmetic() {
        let std = standardization("B2");
        let c = standardize(&std, SETTINGS).unwrap().mean;
        let m_h2o2 = 2.0 * 1.0080 + 2.0 * 15.999;
        let by_hand: Vec<f64> = [(0.1502, 26.3310), (0.1497, 26.2408), (0.1511, 26.4921)]
            .iter()
            .map(|(m, t)| c * (t / 1000.0) * (5.0 / 2.0) * m_h2o2 / m * 100.0)
            .collect();
        let outcome = assay(&std, &peroxide_assay("B2"), SETTINGS).unwrap();
        assert_eq!(outcome.unit, "%");
        for (r, expected) in outcome.replicates.iter().zip(&by_hand) {
            assert!(
                (r.value - expected).abs() < 1e-10,
                "{} vs {expected}",
                r.value
            );
        }
        let mean = by_hand.iter().sum::<f64>() / 3.0;
        assert!((outcome.budget.value - mean).abs() < 1e-10);
        let reported = outcome.reported.unwrap();
        assert!(reported.expanded_uncertainty > Decimal::ZERO);
    }

    #[test]
    fn assay_with_a_held_standardization_outcome_equals_assay() {
        let std = standardization("B2");
        let held = standardize(&std, SETTINGS).unwrap();
        let data = peroxide_assay("B2");
        assert_eq!(
            assay_with_standardization(&std, &held, &data, SETTINGS).unwrap(),
            assay(&std, &data, SETTINGS).unwrap()
        );
        let mut empty = data.clone();
        empty.replicates.clear();
        assert_eq!(
            assay_with_standardization(&std, &held, &empty, SETTINGS).unwrap_err(),
            assay(&std, &empty, SETTINGS).unwrap_err()
        );
    }

    // Common practice (REFERENCES.md section 7, [cp]): a sensitivity error of the balance that
    // weighs the titrant cancels between standardization and assay when it is the same
    // balance, and does not when two balances are used.
    #[test]
    fn same_balance_cancels_its_sensitivity_term_and_two_balances_do_not() {
        let same = assay(&standardization("B1"), &peroxide_assay("B1"), SETTINGS).unwrap();
        assert!(
            same.budget
                .cancelled
                .iter()
                .any(|g| g.contains("balance B1")),
            "{:?}",
            same.budget.cancelled
        );
        let mixed = assay(&standardization("B2"), &peroxide_assay("B3"), SETTINGS).unwrap();
        let names: Vec<&str> = mixed
            .budget
            .contributions
            .iter()
            .map(|c| &*c.name)
            .collect();
        assert!(names.iter().any(|n| n.contains("balance B2")), "{names:?}");
        assert!(names.iter().any(|n| n.contains("balance B3")), "{names:?}");
        assert!(
            mixed.budget.combined_standard_uncertainty > same.budget.combined_standard_uncertainty
        );
    }

    #[test]
    fn blank_is_subtracted_from_every_titration() {
        let mut std = standardization("B2");
        let plain = standardize(&std, SETTINGS).unwrap();
        std.blank = Some(TitrantAmount::Mass(portion("0.0500", "B2")));
        let blanked = standardize(&std, SETTINGS).unwrap();
        assert_eq!(blanked.replicates[0].titrant_net, d("37.3620"));
        assert!(blanked.mean > plain.mean);
    }

    #[test]
    fn refuses_a_run_without_replicates_or_with_blank_above_titrant() {
        let mut std = standardization("B2");
        std.blank = Some(TitrantAmount::Mass(portion("40.0000", "B2")));
        assert!(standardize(&std, SETTINGS)
            .unwrap_err()
            .reason
            .contains("not positive"));
        std.replicates.clear();
        assert!(standardize(&std, SETTINGS)
            .unwrap_err()
            .reason
            .contains("no valid replicates"));
    }

    fn burette(delivered: &str) -> TitrantAmount {
        TitrantAmount::Volume {
            delivered_ml: d(delivered),
            resolution_ml: 0.01,
        }
    }

    // EURACHEM/CITAC QUAM 3rd ed. (2012) Example A2, REFERENCES.md section 5 [pub]: KHP
    // 0.3888 g, purity 1.0, M = 204.2212 g/mol (the example's atomic weights), 18.64 mL of NaOH,
    // 1:1 (Ph. Eur./BP, REFERENCES.md section 7) -> c = 0.10214 mol/L (0.102136 unrounded).
    // The engine derives its own input uncertainties from the burette and balance, so only the
    // value is compared with the example here; the propagation itself is checked against the
    // example in the uncertainty module.
    #[test]
    fn volumetric_standardization_reproduces_the_quam_a2_concentration() {
        use crate::chem::atomic_weights::quam_2012;
        let data = StandardizationData {
            run_id: "QUAM-A2".into(),
            measured_by: MeasuredBy::Volume,
            stoichiometry: Stoichiometry {
                titrant_in_standardization: 1,
                primary_standard: 1,
                titrant_in_assay: 1,
                analyte: 1,
            },
            purity: 1.0,
            purity_standard_u: 0.00029,
            standard_molar_mass: molar_mass_of("KHC8H4O4", quam_2012()).unwrap(),
            replicates: vec![StandardizationReplicate {
                number: 1,
                standard: portion("0.3888", "B1"),
                titrant: burette("18.64"),
            }],
            blank: None,
            burette_max_error_ml: 0.03,
        };
        let outcome = standardize(&data, SETTINGS).unwrap();
        assert_eq!(outcome.unit, "mol/L");
        assert!((outcome.mean - 0.102136).abs() < 5e-7, "{}", outcome.mean);
        assert!(
            outcome.standard_deviation.is_none(),
            "one titration has no SD"
        );
    }

    #[test]
    fn volumetric_blank_is_subtracted_and_widens_the_burette_term() {
        let mut data = StandardizationData {
            run_id: "KHP-BLANK".into(),
            measured_by: MeasuredBy::Volume,
            stoichiometry: Stoichiometry {
                titrant_in_standardization: 1,
                primary_standard: 1,
                titrant_in_assay: 1,
                analyte: 1,
            },
            purity: 0.9997,
            purity_standard_u: 0.00035,
            standard_molar_mass: molar_mass_of("KHC8H4O4", ciaaw_2021()).unwrap(),
            replicates: [
                ("0.4012", "19.71"),
                ("0.3987", "19.58"),
                ("0.4040", "19.85"),
            ]
            .iter()
            .enumerate()
            .map(|(i, (m, v))| StandardizationReplicate {
                number: i as u32 + 1,
                standard: portion(m, "B1"),
                titrant: burette(v),
            })
            .collect(),
            blank: None,
            burette_max_error_ml: 0.03,
        };
        let without = standardize(&data, SETTINGS).unwrap();
        data.blank = Some(burette("0.04"));
        let with = standardize(&data, SETTINGS).unwrap();
        assert_eq!(with.replicates[0].titrant_net, d("19.67"));
        // c = m·P/M / (V/1000): plain arithmetic for replicate 1 with the blank subtracted.
        let m_khp = 39.098 + 5.0 * 1.0080 + 8.0 * 12.011 + 4.0 * 15.999;
        let expected = 0.4012 * 0.9997 / m_khp / (19.67 / 1000.0);
        assert!((with.replicates[0].value - expected).abs() < 1e-12);
        let burette_u = |o: &Outcome| {
            o.budget
                .contributions
                .iter()
                .find(|c| c.name.contains("burette"))
                .map(|c| c.standard_uncertainty)
                .unwrap()
        };
        assert!(burette_u(&with) > burette_u(&without));
    }

    /// Readings of identical replicates (no scatter, so no Type A term) for the Monte Carlo check.
    fn flat_runs(titrant_balance: &str) -> (StandardizationData, AssayData) {
        let mut std = standardization(titrant_balance);
        for r in &mut std.replicates {
            r.standard.net_g = d("0.2511");
            r.titrant = TitrantAmount::Mass(portion("37.4120", titrant_balance));
        }
        let mut assay = peroxide_assay(titrant_balance);
        for r in &mut assay.replicates {
            r.sample.net_g = d("0.1502");
            r.titrant = TitrantAmount::Mass(portion("26.3310", titrant_balance));
        }
        (std, assay)
    }

    // JCGM 101:2008 (REFERENCES.md section 4) [pub]: propagate the distributions themselves and
    // compare the standard deviation of the output with the GUM u_c. Here the propagation runs
    // through the engine's own code path on perturbed raw data: every reading gets a rectangular
    // rounding error of ±d/2, each balance one normal sensitivity factor shared by all masses it
    // weighed, the purity and both molar masses normal errors with their standard uncertainties
    // (sampled independently, as the budget assumes). M = 20,000 trials (at least the 10^4
    // JCGM 101 asks for p = 0.95); the standard error of a sample SD is then about 0.5 %, so 3 %
    // is a comfortable tolerance that still catches a wrong sensitivity or a missed factor.
    #[test]
    fn assay_budget_agrees_with_a_monte_carlo_run_through_the_engine() {
        use rand::rngs::StdRng;
        use rand::{Rng, SeedableRng};
        use rand_distr::{Distribution, Normal};
        for titrant_balance in ["B1", "B2"] {
            let (std, assay_data) = flat_runs(titrant_balance);
            let gum = assay(&std, &assay_data, SETTINGS).unwrap();
            let mut rng = StdRng::seed_from_u64(0x4a43_474d_2026);
            let unit = Normal::new(0.0, 1.0).unwrap();
            let mut outputs = Vec::new();
            for _ in 0..20_000 {
                let sensitivity: Vec<(String, f64)> = ["B1", "B2"]
                    .iter()
                    .map(|b| (b.to_string(), 1.0 + 2e-5 * unit.sample(&mut rng)))
                    .collect();
                let factor = |b: &str| sensitivity.iter().find(|(id, _)| id == b).unwrap().1;
                let mut perturb = |p: &MassPortion| {
                    let rounding: f64 = (0..2).map(|_| rng.gen_range(-0.00005..0.00005)).sum();
                    let net = (to_f64(p.net_g) + rounding) * factor(&p.balance.id);
                    MassPortion {
                        net_g: Decimal::from_f64_retain(net).unwrap(),
                        balance: p.balance.clone(),
                    }
                };
                let mut s = std.clone();
                for r in &mut s.replicates {
                    r.standard = perturb(&r.standard);
                    if let TitrantAmount::Mass(t) = &r.titrant {
                        r.titrant = TitrantAmount::Mass(perturb(t));
                    }
                }
                let mut a = assay_data.clone();
                for r in &mut a.replicates {
                    r.sample = perturb(&r.sample);
                    if let TitrantAmount::Mass(t) = &r.titrant {
                        r.titrant = TitrantAmount::Mass(perturb(t));
                    }
                }
                s.purity += std.purity_standard_u * unit.sample(&mut rng);
                s.standard_molar_mass.value +=
                    std.standard_molar_mass.standard_uncertainty * unit.sample(&mut rng);
                a.analyte_molar_mass.value +=
                    assay_data.analyte_molar_mass.standard_uncertainty * unit.sample(&mut rng);
                outputs.push(assay(&s, &a, SETTINGS).unwrap().mean);
            }
            let mc_sd = stats::sample_standard_deviation(&outputs).unwrap();
            let u_c = gum.budget.combined_standard_uncertainty;
            assert!(
                (mc_sd / u_c - 1.0).abs() < 0.03,
                "titrant on {titrant_balance}: Monte Carlo SD {mc_sd:.4e} vs GUM u_c {u_c:.4e}"
            );
        }
    }
}
