//! Balances, their external calibrations and their routine checks.

use super::{check_date, check_positive, require_text, LabRecord};
use crate::quantity::{Dimension, Reading};
use assize_ledger::{EntryHash, Record, Timestamp};
use serde::{Deserialize, Serialize};

/// A balance put into service.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Balance {
    /// Lab's id, e.g. `B2-AX`.
    pub id: String,
    /// Make-neutral description and location.
    pub description: String,
    /// Scale interval d as displayed, e.g. `0.0001 g`.
    pub readability: Reading,
    /// Maximum capacity.
    pub capacity: Reading,
    /// Minimum weight from its USP <41> repeatability assessment.
    pub minimum_weight: Reading,
}

impl Record for Balance {
    const KIND: &'static str = "lab.balance";
}

impl LabRecord for Balance {
    fn check(&self) -> Result<(), String> {
        require_text("balance id", &self.id)?;
        for (field, reading) in [
            ("readability", &self.readability),
            ("capacity", &self.capacity),
            ("minimum weight", &self.minimum_weight),
        ] {
            mass_positive(field, reading)?;
        }
        let grams = |r: &Reading| r.grams().expect("checked as a mass");
        if grams(&self.readability) >= grams(&self.capacity) {
            return Err("readability must be smaller than capacity".into());
        }
        if grams(&self.minimum_weight) < grams(&self.readability) {
            return Err("minimum weight cannot be below the readability".into());
        }
        Ok(())
    }
}

/// An external calibration of a balance, from its certificate.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Calibration {
    /// The balance entry.
    pub balance: EntryHash,
    /// Certificate number.
    pub certificate: String,
    /// Date performed.
    pub performed_on: String,
    /// Date the next calibration is due.
    pub due_on: String,
    /// Whether the balance passed.
    pub passed: bool,
    /// Repeatability standard deviation found (USP <41>), as displayed.
    pub repeatability_sd: Reading,
    /// Relative standard uncertainty of the sensitivity, if the certificate states it.
    pub sensitivity_relative_u: Option<String>,
}

impl Record for Calibration {
    const KIND: &'static str = "lab.calibration";

    fn references(&self) -> Vec<EntryHash> {
        vec![self.balance]
    }
}

impl LabRecord for Calibration {
    fn check(&self) -> Result<(), String> {
        require_text("certificate", &self.certificate)?;
        let performed = check_date("performed_on", &self.performed_on)?;
        let due = check_date("due_on", &self.due_on)?;
        if due <= performed {
            return Err(format!(
                "due_on {due} must be after performed_on {performed}"
            ));
        }
        mass_positive("repeatability sd", &self.repeatability_sd)?;
        if let Some(u) = &self.sensitivity_relative_u {
            check_positive("sensitivity_relative_u", u)?;
        }
        Ok(())
    }
}

/// A routine check of a balance with a test weight.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct BalanceCheck {
    /// The balance entry.
    pub balance: EntryHash,
    /// The test weight's id.
    pub test_weight: String,
    /// Conventional mass of the test weight from its certificate.
    pub reference_mass: Reading,
    /// What the balance displayed.
    pub reading: Reading,
    /// When the reading was taken.
    pub observed_at: Timestamp,
}

impl Record for BalanceCheck {
    const KIND: &'static str = "lab.balance-check";

    fn references(&self) -> Vec<EntryHash> {
        vec![self.balance]
    }
}

impl LabRecord for BalanceCheck {
    fn check(&self) -> Result<(), String> {
        require_text("test weight", &self.test_weight)?;
        mass_positive("reference mass", &self.reference_mass)?;
        mass_positive("reading", &self.reading)
    }
}

/// Checks a reading is a positive mass.
pub(crate) fn mass_positive(field: &str, reading: &Reading) -> Result<(), String> {
    reading.check().map_err(|e| format!("{field}: {e}"))?;
    if reading.unit.dimension() != Dimension::Mass {
        return Err(format!("{field} {reading} is not a mass"));
    }
    if reading.number() <= rust_decimal::Decimal::ZERO {
        return Err(format!("{field} {reading} must be positive"));
    }
    Ok(())
}
