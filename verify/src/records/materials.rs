//! Reference-standard lots, titrant preparations and samples.

use super::{check_date, check_positive, require_text, LabRecord};
use crate::chem::Formula;
use assize_ledger::{Record, Timestamp};
use rust_decimal::Decimal;
use serde::{Deserialize, Serialize};

/// A lot of a reference standard with its certificate.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct ReferenceLot {
    /// Lot id.
    pub id: String,
    /// Substance name.
    pub substance: String,
    /// Formula.
    pub formula: String,
    /// Certified purity as a mass fraction, e.g. `0.99965`.
    pub purity: String,
    /// Expanded uncertainty of the purity (mass fraction).
    pub purity_expanded_u: String,
    /// Coverage factor of that expanded uncertainty.
    pub coverage_factor: String,
    /// Certificate id.
    pub certificate: String,
    /// Expiry or retest date.
    pub valid_until: String,
    /// Drying done before use, as recorded.
    pub drying: String,
}

impl Record for ReferenceLot {
    const KIND: &'static str = "lab.reference-lot";
}

impl LabRecord for ReferenceLot {
    fn check(&self) -> Result<(), String> {
        require_text("lot id", &self.id)?;
        require_text("certificate", &self.certificate)?;
        Formula::parse(&self.formula).map_err(|e| format!("formula: {e}"))?;
        let purity = check_positive("purity", &self.purity)?;
        if purity > Decimal::ONE {
            return Err(format!(
                "purity {purity} is above 1; give it as a mass fraction (99.965 % is 0.99965)"
            ));
        }
        check_positive("purity_expanded_u", &self.purity_expanded_u)?;
        check_positive("coverage_factor", &self.coverage_factor)?;
        check_date("valid_until", &self.valid_until)?;
        Ok(())
    }
}

/// A titrant solution as prepared.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Titrant {
    /// Preparation id (bottle label).
    pub id: String,
    /// Reagent formula.
    pub formula: String,
    /// Nominal concentration (mol/kg or mol/L per the method).
    pub nominal_concentration: String,
    /// Date prepared.
    pub prepared_on: String,
    /// Expiry date of the solution.
    pub valid_until: String,
}

impl Record for Titrant {
    const KIND: &'static str = "lab.titrant";
}

impl LabRecord for Titrant {
    fn check(&self) -> Result<(), String> {
        require_text("titrant id", &self.id)?;
        Formula::parse(&self.formula).map_err(|e| format!("formula: {e}"))?;
        check_positive("nominal_concentration", &self.nominal_concentration)?;
        let prepared = check_date("prepared_on", &self.prepared_on)?;
        let until = check_date("valid_until", &self.valid_until)?;
        if until < prepared {
            return Err(format!(
                "valid_until {until} is before prepared_on {prepared}"
            ));
        }
        Ok(())
    }
}

/// A sample received for testing.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Sample {
    /// Sample id.
    pub id: String,
    /// What it is.
    pub description: String,
    /// When it was received.
    pub received_at: Timestamp,
}

impl Record for Sample {
    const KIND: &'static str = "lab.sample";
}

impl LabRecord for Sample {
    fn check(&self) -> Result<(), String> {
        require_text("sample id", &self.id)?;
        require_text("description", &self.description)
    }
}
