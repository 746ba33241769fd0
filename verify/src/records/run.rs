//! Runs and the raw data of their determinations: weighings, burette readings, replicates and
//! blanks.

use super::equipment::mass_positive;
use super::{require_text, LabRecord};
use crate::quantity::{Dimension, Reading};
use assize_ledger::{EntryHash, Record, Timestamp};
use rust_decimal::Decimal;
use serde::{Deserialize, Serialize};

/// What a run does.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum RunKind {
    /// Titrant against a primary standard.
    Standardization,
    /// Sample against the standardized titrant.
    Assay,
}

/// A run under a method: a standardization or an assay.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Run {
    /// Run id.
    pub id: String,
    /// Standardization or assay.
    pub kind: RunKind,
    /// Adoption entry of the method.
    pub method: EntryHash,
    /// Adoption entry of the lab policy.
    pub policy: EntryHash,
    /// Titrant preparation entry.
    pub titrant: EntryHash,
    /// Reference-standard lot entry (standardization).
    pub reference_lot: Option<EntryHash>,
    /// Sample entry (assay).
    pub sample: Option<EntryHash>,
    /// Standardization run entry whose concentration the assay uses.
    pub standardization: Option<EntryHash>,
    /// When the bench work started.
    pub started_at: Timestamp,
}

impl Record for Run {
    const KIND: &'static str = "lab.run";

    fn references(&self) -> Vec<EntryHash> {
        let mut refs = vec![self.method, self.policy, self.titrant];
        refs.extend(self.reference_lot);
        refs.extend(self.sample);
        refs.extend(self.standardization);
        refs
    }
}

impl LabRecord for Run {
    fn check(&self) -> Result<(), String> {
        require_text("run id", &self.id)?;
        match self.kind {
            RunKind::Standardization => {
                if self.reference_lot.is_none()
                    || self.sample.is_some()
                    || self.standardization.is_some()
                {
                    return Err(
                        "a standardization names a reference lot, and no sample or standardization"
                            .into(),
                    );
                }
            }
            RunKind::Assay => {
                if self.sample.is_none()
                    || self.standardization.is_none()
                    || self.reference_lot.is_some()
                {
                    return Err("an assay names a sample and the standardization it relies on, and no reference lot".into());
                }
            }
        }
        Ok(())
    }
}

/// What was weighed.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Portion {
    /// Primary standard (standardization).
    PrimaryStandard,
    /// Sample (assay).
    Sample,
    /// Titrant delivered (titrant measured by mass).
    Titrant,
    /// Titrant delivered in a blank titration.
    BlankTitrant,
}

impl Portion {
    /// What was weighed, in plain words for messages: `primary standard`, `sample`,
    /// `titrant` or `blank titrant`.
    pub fn words(self) -> &'static str {
        match self {
            Portion::PrimaryStandard => "primary standard",
            Portion::Sample => "sample",
            Portion::Titrant => "titrant",
            Portion::BlankTitrant => "blank titrant",
        }
    }
}

/// How two readings give a net mass.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum WeighingMode {
    /// Vessel weighed before and after delivering: net = first − second, second smaller.
    ByDifference,
    /// Empty vessel (tare) then vessel with portion (gross): net = second − first, second larger.
    Tared,
}

/// Where a reading came from.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Source {
    /// Typed by a person from the display or a printout.
    Keyed,
    /// Taken from the instrument's own output.
    Captured,
}

/// One net mass from two raw balance readings.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Weighing {
    /// Run entry.
    pub run: EntryHash,
    /// Replicate number (from 1; blanks number their own).
    pub replicate: u32,
    /// What was weighed.
    pub portion: Portion,
    /// Balance entry.
    pub balance: EntryHash,
    /// By difference or tared.
    pub mode: WeighingMode,
    /// First reading as displayed.
    pub first: Reading,
    /// When the first reading was taken.
    pub first_at: Timestamp,
    /// Second reading as displayed.
    pub second: Reading,
    /// When the second reading was taken.
    pub second_at: Timestamp,
    /// Keyed or captured.
    pub source: Source,
    /// Whether the balance showed its stability indicator for both readings.
    pub stable: bool,
}

impl Weighing {
    /// Net mass in grams, exact.
    pub fn net_grams(&self) -> Decimal {
        let (first, second) = (self.first.in_base_unit(), self.second.in_base_unit());
        match self.mode {
            WeighingMode::ByDifference => first - second,
            WeighingMode::Tared => second - first,
        }
    }
}

impl Record for Weighing {
    const KIND: &'static str = "lab.weighing";

    fn references(&self) -> Vec<EntryHash> {
        vec![self.run, self.balance]
    }
}

impl LabRecord for Weighing {
    fn check(&self) -> Result<(), String> {
        if self.replicate == 0 {
            return Err("replicate numbers start at 1".into());
        }
        mass_positive("first reading", &self.first)?;
        mass_positive("second reading", &self.second)?;
        if self.first.unit != self.second.unit {
            return Err(format!(
                "the readings are in {} and {}; a balance displays one unit, so one of them was mis-keyed",
                self.first.unit, self.second.unit
            ));
        }
        if self.second_at < self.first_at {
            return Err("the second reading is timed before the first".into());
        }
        let net = self.net_grams();
        if net <= Decimal::ZERO {
            let rule = match self.mode {
                WeighingMode::ByDifference => {
                    "by difference the second reading must be smaller than the first"
                }
                WeighingMode::Tared => {
                    "tared, the gross (second) reading must be larger than the tare (first)"
                }
            };
            return Err(format!("net mass {net} g is not positive: {rule}"));
        }
        Ok(())
    }
}

/// Titrant delivered from a burette (titrant measured by volume).
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Titration {
    /// Run entry.
    pub run: EntryHash,
    /// Replicate number (blanks number their own).
    pub replicate: u32,
    /// Whether this delivery is a blank.
    pub blank: bool,
    /// Burette id.
    pub burette: String,
    /// Initial burette reading.
    pub initial: Reading,
    /// Final burette reading at the end point.
    pub final_reading: Reading,
    /// When the end point was read.
    pub read_at: Timestamp,
    /// End point as observed.
    pub endpoint: String,
}

impl Titration {
    /// Volume delivered in millilitres, exact.
    pub fn delivered_ml(&self) -> Decimal {
        self.final_reading.in_base_unit() - self.initial.in_base_unit()
    }
}

impl Record for Titration {
    const KIND: &'static str = "lab.titration";

    fn references(&self) -> Vec<EntryHash> {
        vec![self.run]
    }
}

impl LabRecord for Titration {
    fn check(&self) -> Result<(), String> {
        require_text("burette", &self.burette)?;
        for (field, r) in [("initial", &self.initial), ("final", &self.final_reading)] {
            r.check().map_err(|e| format!("{field} reading: {e}"))?;
            if r.unit.dimension() != Dimension::Volume {
                return Err(format!("{field} reading {r} is not a volume"));
            }
            if r.number() < Decimal::ZERO {
                return Err(format!("{field} reading {r} is negative"));
            }
        }
        if self.delivered_ml() <= Decimal::ZERO {
            return Err(format!(
                "final reading {} must be larger than initial reading {}",
                self.final_reading, self.initial
            ));
        }
        Ok(())
    }
}

/// One determination: which raw data it uses.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Replicate {
    /// Run entry.
    pub run: EntryHash,
    /// Replicate number.
    pub number: u32,
    /// Weighing of the primary standard or sample portion.
    pub portion_weighing: EntryHash,
    /// Weighing of the titrant delivered (titrant by mass).
    pub titrant_weighing: Option<EntryHash>,
    /// Burette delivery (titrant by volume).
    pub titration: Option<EntryHash>,
    /// End point as observed.
    pub endpoint: String,
}

impl Record for Replicate {
    const KIND: &'static str = "lab.replicate";

    fn references(&self) -> Vec<EntryHash> {
        let mut refs = vec![self.run, self.portion_weighing];
        refs.extend(self.titrant_weighing);
        refs.extend(self.titration);
        refs
    }
}

impl LabRecord for Replicate {
    fn check(&self) -> Result<(), String> {
        if self.number == 0 {
            return Err("replicate numbers start at 1".into());
        }
        if self.titrant_weighing.is_some() == self.titration.is_some() {
            return Err(
                "a replicate names either a titrant weighing or a burette titration".into(),
            );
        }
        require_text("endpoint", &self.endpoint)
    }
}

/// A blank determination: titrant consumed without the standard or sample.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Blank {
    /// Run entry.
    pub run: EntryHash,
    /// Titrant weighing (by mass) of the blank.
    pub titrant_weighing: Option<EntryHash>,
    /// Burette delivery (by volume) of the blank.
    pub titration: Option<EntryHash>,
}

impl Record for Blank {
    const KIND: &'static str = "lab.blank";

    fn references(&self) -> Vec<EntryHash> {
        let mut refs = vec![self.run];
        refs.extend(self.titrant_weighing);
        refs.extend(self.titration);
        refs
    }
}

impl LabRecord for Blank {
    fn check(&self) -> Result<(), String> {
        if self.titrant_weighing.is_some() == self.titration.is_some() {
            return Err("a blank names either a titrant weighing or a burette titration".into());
        }
        Ok(())
    }
}
