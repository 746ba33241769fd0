//! What people state and decide about the data: adopted documents, values written on the
//! worksheet, reported results, corrections, invalidations and OOS investigations.

use super::{check_body, check_decimal, require_text, LabRecord};
use crate::documents::{document_sha256, LabPolicy, Method};
use assize_ledger::{EntryHash, Record, Timestamp};
use serde::{Deserialize, Serialize};

/// Which kind of document is adopted.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum DocumentKind {
    /// A titration method.
    Method,
    /// The lab policy.
    Policy,
}

/// A method or policy adopted into the ledger, with its full text and SHA-256.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Adoption {
    /// Method or policy.
    pub document: DocumentKind,
    /// Document id from the text.
    pub id: String,
    /// Version from the text.
    pub version: String,
    /// SHA-256 of the text, lowercase hex.
    pub sha256: String,
    /// The exact text.
    pub text: String,
}

impl Adoption {
    /// Builds an adoption from a document's text, checking it parses.
    pub fn of_text(document: DocumentKind, text: &str) -> Result<Adoption, String> {
        let (id, version) = match document {
            DocumentKind::Method => {
                let m = Method::parse(text).map_err(|e| e.to_string())?;
                (m.id, m.version)
            }
            DocumentKind::Policy => {
                let p = LabPolicy::parse(text).map_err(|e| e.to_string())?;
                (p.id, p.version)
            }
        };
        Ok(Adoption {
            document,
            id,
            version,
            sha256: document_sha256(text),
            text: text.to_string(),
        })
    }
}

impl Record for Adoption {
    const KIND: &'static str = "lab.adopt";
}

impl LabRecord for Adoption {
    fn check(&self) -> Result<(), String> {
        let again = Adoption::of_text(self.document, &self.text)?;
        if again != *self {
            return Err("id, version or sha256 do not match the adopted text".into());
        }
        Ok(())
    }
}

/// A quantity an analyst writes down.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum StatedQuantity {
    /// Net mass of the portion, g.
    PortionMass,
    /// Net titrant delivered, g or mL.
    TitrantAmount,
    /// Titrant concentration, mol/kg or mol/L.
    Concentration,
    /// Analyte content in the specification's unit.
    Content,
}

/// A value as written on the worksheet (per replicate, or the final value when `replicate` is
/// none), to be compared with the recomputed value at its stated precision.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct StatedValue {
    /// Run entry.
    pub run: EntryHash,
    /// Replicate number, or none for the run's final value.
    pub replicate: Option<u32>,
    /// What is stated.
    pub quantity: StatedQuantity,
    /// The digits as written.
    pub value: String,
    /// Unit as written.
    pub unit: String,
}

impl Record for StatedValue {
    const KIND: &'static str = "lab.stated";

    fn references(&self) -> Vec<EntryHash> {
        vec![self.run]
    }
}

impl LabRecord for StatedValue {
    fn check(&self) -> Result<(), String> {
        check_decimal("stated value", &self.value)?;
        require_text("unit", &self.unit)
    }
}

/// The result released for a sample.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct ReportedResult {
    /// Assay run entry.
    pub run: EntryHash,
    /// The value as reported.
    pub value: String,
    /// Its expanded uncertainty as reported.
    pub expanded_uncertainty: String,
    /// Unit (the specification's).
    pub unit: String,
}

impl Record for ReportedResult {
    const KIND: &'static str = "lab.result";

    fn references(&self) -> Vec<EntryHash> {
        vec![self.run]
    }
}

impl LabRecord for ReportedResult {
    fn check(&self) -> Result<(), String> {
        check_decimal("reported value", &self.value)?;
        check_decimal("expanded uncertainty", &self.expanded_uncertainty)?;
        require_text("unit", &self.unit)
    }
}

/// A new version of an earlier lab entry; the original stays, this one supersedes it.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Correction {
    /// The entry corrected.
    pub supersedes: EntryHash,
    /// Kind of the corrected entry (the replacement is of the same kind).
    pub kind: String,
    /// The replacement body, exact CBOR.
    #[serde(with = "serde_bytes_vec")]
    pub replacement: Vec<u8>,
    /// Why. The tool refuses a correction without one; the validator flags one that has none
    /// (CHG-02), so such an entry stays visible instead of being set aside.
    pub reason: String,
}

impl Record for Correction {
    const KIND: &'static str = "lab.correction";

    fn references(&self) -> Vec<EntryHash> {
        vec![self.supersedes]
    }
}

impl LabRecord for Correction {
    fn check(&self) -> Result<(), String> {
        check_body(&self.kind, &self.replacement)
            .map_err(|e| format!("replacement {}: {e}", self.kind))
    }
}

/// A replicate set aside, with the assignable cause.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Invalidation {
    /// Replicate entry.
    pub replicate: EntryHash,
    /// The assignable cause (what went wrong at the bench). The tool refuses an invalidation
    /// without one; the validator flags one that has none, or only a statistical flag (OOS-03).
    pub cause: String,
}

impl Record for Invalidation {
    const KIND: &'static str = "lab.invalidation";

    fn references(&self) -> Vec<EntryHash> {
        vec![self.replicate]
    }
}

impl LabRecord for Invalidation {
    fn check(&self) -> Result<(), String> {
        Ok(())
    }
}

/// An out-of-specification investigation opened for a result.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct OosInvestigation {
    /// Reported result (or run) entry.
    pub subject: EntryHash,
    /// Investigation id.
    pub id: String,
    /// What was observed.
    pub description: String,
    /// When it was opened.
    pub opened_at: Timestamp,
}

impl Record for OosInvestigation {
    const KIND: &'static str = "lab.oos";

    fn references(&self) -> Vec<EntryHash> {
        vec![self.subject]
    }
}

impl LabRecord for OosInvestigation {
    fn check(&self) -> Result<(), String> {
        require_text("investigation id", &self.id)?;
        require_text("description", &self.description)
    }
}

mod serde_bytes_vec {
    use serde::de::{self, Visitor};
    use serde::{Deserializer, Serializer};

    pub fn serialize<S: Serializer>(v: &[u8], s: S) -> Result<S::Ok, S::Error> {
        s.serialize_bytes(v)
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<u8>, D::Error> {
        struct Bytes;
        impl Visitor<'_> for Bytes {
            type Value = Vec<u8>;
            fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
                f.write_str("a byte string")
            }
            fn visit_bytes<E: de::Error>(self, v: &[u8]) -> Result<Vec<u8>, E> {
                Ok(v.to_vec())
            }
            fn visit_byte_buf<E: de::Error>(self, v: Vec<u8>) -> Result<Vec<u8>, E> {
                Ok(v)
            }
        }
        d.deserialize_byte_buf(Bytes)
    }
}
