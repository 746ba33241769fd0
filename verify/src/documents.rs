//! Method definitions and the lab policy: TOML documents, checked on the way in and adopted into
//! the ledger by their SHA-256 so every run names the exact text that governed it.
//!
//! A method names the titrant, the primary standard and the analyte by formula and reacting
//! species, the balanced equations of the standardization and the assay (checked for atoms and
//! charge; the stoichiometric coefficients are read from them), whether the titrant is measured
//! by mass or by volume, the number of replicates, target portions and the specification with
//! its rounding rule. The lab policy holds intervals, tolerances and limits. This module parses
//! and checks; it never reads files or the ledger.

use crate::chem::{Equation, Formula};
use crate::rounding::{places_as_written, RoundingRule, UncertaintyRounding};
use rust_decimal::Decimal;
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};
use std::str::FromStr;

/// Why a method or policy document was refused.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct DocumentError {
    /// Which document (its id when known).
    pub document: String,
    /// What is wrong, naming the field.
    pub reason: String,
}

impl std::fmt::Display for DocumentError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}: {}", self.document, self.reason)
    }
}

impl std::error::Error for DocumentError {}

/// SHA-256 of a document's exact bytes, lowercase hex: the identity it is adopted under.
pub fn document_sha256(text: &str) -> String {
    hex::encode(Sha256::digest(text.as_bytes()))
}

/// How the titrant quantity is measured.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum MeasuredBy {
    /// Weighed: concentration in mol/kg of solution.
    Mass,
    /// Burette volume: concentration in mol/L.
    Volume,
}

/// A substance as a method names it.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Substance {
    /// Plain name.
    pub name: String,
    /// Formula of the material weighed or prepared (its molar mass is used).
    pub formula: String,
    /// The species that reacts in the equation.
    pub reacting_species: String,
}

/// The titrant.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TitrantSpec {
    /// Plain name.
    pub name: String,
    /// Formula of the reagent.
    pub formula: String,
    /// Species that reacts.
    pub reacting_species: String,
    /// Nominal concentration, mol/kg (by mass) or mol/L (by volume).
    pub nominal_concentration: String,
}

/// One titration step of a method.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct StandardizationSpec {
    /// The primary standard.
    pub primary_standard: Substance,
    /// Balanced equation.
    pub equation: String,
    /// Target portion of primary standard, grams.
    pub portion_g: String,
    /// Whether a blank titration is subtracted.
    pub blank: bool,
}

/// The assay step.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AssaySpec {
    /// The analyte.
    pub analyte: Substance,
    /// Balanced equation.
    pub equation: String,
    /// Target sample portion, grams.
    pub portion_g: String,
    /// Whether a blank titration is subtracted.
    pub blank: bool,
    /// Repeatability standard deviation of the assay, percent of the value (from the method's
    /// validation), for the ISO 5725-6 critical range; the check is skipped when not stated.
    #[serde(default)]
    pub repeatability_rsd_percent: Option<String>,
}

/// Rounding rules a specification can name.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum SpecRounding {
    /// USP General Notices 7.20: half up to the limit's decimal places.
    UspHalfUp,
    /// ASTM E29 rounding method: to the limit's places, exact 5 to even.
    AstmE29Rounding,
    /// ASTM E29 absolute method: no rounding.
    AstmE29Absolute,
    /// Half up to the significant figures of the limit as written (Ph. Eur. practice).
    SignificantFigures,
}

/// The specification a reported result is judged against.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Specification {
    /// What is specified.
    pub quantity: String,
    /// Unit of the reported result: `%` (mass fraction × 100) or `1` (mass fraction).
    pub unit: String,
    /// Lower limit as written.
    pub lower: Option<String>,
    /// Upper limit as written.
    pub upper: Option<String>,
    /// Rounding rule applied before comparing with the limits.
    pub rounding: SpecRounding,
}

impl Specification {
    /// The rounding rule for a limit written as `limit`.
    pub fn rule_for(&self, limit: &str) -> RoundingRule {
        let places = places_as_written(limit);
        match self.rounding {
            SpecRounding::UspHalfUp => RoundingRule::HalfUp { places },
            SpecRounding::AstmE29Rounding => RoundingRule::HalfEven { places },
            SpecRounding::AstmE29Absolute => RoundingRule::Absolute,
            SpecRounding::SignificantFigures => RoundingRule::SignificantFigures {
                figures: significant_figures_as_written(limit),
            },
        }
    }
}

/// Significant figures of a number as written: every digit after the leading zeros, so
/// `"29.0"` has 3 and `"0.050"` has 2 (trailing zeros of a whole number count).
pub fn significant_figures_as_written(text: &str) -> u32 {
    let digits: String = text.trim().chars().filter(char::is_ascii_digit).collect();
    let significant = digits.trim_start_matches('0').len() as u32;
    significant.max(1)
}

/// A titration method: standardization of the titrant and the assay that uses it.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Method {
    /// Document id.
    pub id: String,
    /// Title.
    pub title: String,
    /// Version label.
    pub version: String,
    /// Titrant measured by mass or volume.
    pub titrant_measured_by: MeasuredBy,
    /// Determinations per run.
    pub replicates: u32,
    /// The titrant.
    pub titrant: TitrantSpec,
    /// The standardization.
    pub standardization: StandardizationSpec,
    /// The assay.
    pub assay: AssaySpec,
    /// The specification.
    pub specification: Specification,
    /// Whether balance readings are expected to be captured from the instrument (a keyed
    /// reading is then flagged for the reviewer); false when not stated.
    #[serde(default)]
    pub readings_captured: bool,
}

/// Stoichiometric coefficients read from a method's balanced equations.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub struct Stoichiometry {
    /// ν of the titrant species in the standardization equation.
    pub titrant_in_standardization: u32,
    /// ν of the primary standard species.
    pub primary_standard: u32,
    /// ν of the titrant species in the assay equation.
    pub titrant_in_assay: u32,
    /// ν of the analyte species.
    pub analyte: u32,
}

impl Method {
    /// Parses and checks a method document.
    pub fn parse(text: &str) -> Result<Method, DocumentError> {
        let method: Method = toml::from_str(text).map_err(|e| DocumentError {
            document: "method".into(),
            reason: e.message().to_string(),
        })?;
        method.check()?;
        Ok(method)
    }

    fn error(&self, reason: String) -> DocumentError {
        DocumentError {
            document: format!("method {}", self.id),
            reason,
        }
    }

    fn check(&self) -> Result<(), DocumentError> {
        if self.id.trim().is_empty() {
            return Err(self.error("id is empty".into()));
        }
        if !(1..=20).contains(&self.replicates) {
            return Err(self.error(format!(
                "replicates must be 1 to 20, not {}",
                self.replicates
            )));
        }
        positive(
            &self.titrant.nominal_concentration,
            "titrant.nominal_concentration",
        )
        .map_err(|r| self.error(r))?;
        positive(&self.standardization.portion_g, "standardization.portion_g")
            .map_err(|r| self.error(r))?;
        positive(&self.assay.portion_g, "assay.portion_g").map_err(|r| self.error(r))?;
        for (field, formula) in [
            ("titrant.formula", &self.titrant.formula),
            ("titrant.reacting_species", &self.titrant.reacting_species),
            (
                "standardization.primary_standard.formula",
                &self.standardization.primary_standard.formula,
            ),
            ("assay.analyte.formula", &self.assay.analyte.formula),
        ] {
            Formula::parse(formula).map_err(|e| self.error(format!("{field}: {e}")))?;
        }
        self.stoichiometry()?;
        self.check_specification()
    }

    fn check_specification(&self) -> Result<(), DocumentError> {
        let spec = &self.specification;
        if !matches!(spec.unit.as_str(), "%" | "1") {
            return Err(self.error(format!(
                "specification.unit must be \"%\" or \"1\", not {:?}",
                spec.unit
            )));
        }
        let lower = spec
            .lower
            .as_deref()
            .map(|t| decimal(t, "specification.lower"))
            .transpose();
        let upper = spec
            .upper
            .as_deref()
            .map(|t| decimal(t, "specification.upper"))
            .transpose();
        let (lower, upper) = (
            lower.map_err(|r| self.error(r))?,
            upper.map_err(|r| self.error(r))?,
        );
        match (lower, upper) {
            (None, None) => Err(self.error("specification needs a lower or an upper limit".into())),
            (Some(l), Some(u)) if l >= u => {
                Err(self.error(format!("specification.lower {l} is not below upper {u}")))
            }
            _ => Ok(()),
        }
    }

    /// Coefficients from the two equations, which must balance and contain the species named.
    pub fn stoichiometry(&self) -> Result<Stoichiometry, DocumentError> {
        let standardization =
            self.balanced("standardization.equation", &self.standardization.equation)?;
        let assay = self.balanced("assay.equation", &self.assay.equation)?;
        let coefficient = |equation: &Equation, field: &str, species: &str| {
            equation.coefficient_of(species).ok_or_else(|| {
                self.error(format!(
                    "{field}: species {species:?} does not appear in the equation"
                ))
            })
        };
        Ok(Stoichiometry {
            titrant_in_standardization: coefficient(
                &standardization,
                "standardization.equation",
                &self.titrant.reacting_species,
            )?,
            primary_standard: coefficient(
                &standardization,
                "standardization.equation",
                &self.standardization.primary_standard.reacting_species,
            )?,
            titrant_in_assay: coefficient(
                &assay,
                "assay.equation",
                &self.titrant.reacting_species,
            )?,
            analyte: coefficient(
                &assay,
                "assay.equation",
                &self.assay.analyte.reacting_species,
            )?,
        })
    }

    fn balanced(&self, field: &str, text: &str) -> Result<Equation, DocumentError> {
        let equation = Equation::parse(text).map_err(|e| self.error(format!("{field}: {e}")))?;
        equation
            .check_balanced()
            .map_err(|e| self.error(format!("{field} does not balance: {e}")))?;
        Ok(equation)
    }
}

/// How the coverage factor is chosen.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum CoverageChoice {
    /// k = 2.
    K2,
    /// k from Student t at the effective degrees of freedom (Welch–Satterthwaite).
    StudentT,
}

/// Balance rules of the policy.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BalancePolicy {
    /// Days between external calibrations.
    pub calibration_interval_days: u32,
    /// A passing routine check is needed earlier the same day.
    pub routine_check_each_day_of_use: bool,
    /// Routine check tolerance, percent of the test weight.
    pub routine_check_tolerance_percent: String,
    /// Factor applied to the USP <41> minimum weight.
    pub minimum_weight_safety_factor: String,
}

/// Titrant rules of the policy.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TitrantPolicy {
    /// Days a standardization stays valid.
    pub standardization_valid_days: u32,
    /// Largest RSD of a standardization, percent.
    pub standardization_max_rsd_percent: String,
    /// Strength must be within this percent of nominal.
    pub strength_within_percent_of_nominal: String,
    /// Fewest standardization titrations.
    pub standardization_min_replicates: u32,
}

/// Record-keeping rules.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RecordsPolicy {
    /// Largest delay between observing and recording, minutes.
    pub contemporaneous_window_minutes: u32,
    /// How far an observation may be timed after the entry recording it (instrument and
    /// computer clocks differ), seconds; 60 when not stated.
    #[serde(default = "default_clock_tolerance")]
    pub clock_tolerance_seconds: u32,
    /// Most readings of one run that may share one time stamp before it looks back-filled;
    /// 3 when not stated.
    #[serde(default = "default_readings_per_timestamp")]
    pub max_readings_per_timestamp: u32,
    /// How far apart in time a keyed reading and the balance's printed reading may be and
    /// still be taken for the same observation, seconds, either side; 120 when not stated
    /// (keyed times are often rounded to the minute, and the balance's clock is not the
    /// computer's).
    #[serde(default = "default_capture_pairing")]
    pub capture_pairing_seconds: u32,
}

fn default_clock_tolerance() -> u32 {
    60
}

fn default_readings_per_timestamp() -> u32 {
    3
}

/// Seconds either side within which a printed reading pairs with a keyed one, when a policy
/// does not say.
pub const DEFAULT_CAPTURE_PAIRING_SECONDS: u32 = 120;

fn default_capture_pairing() -> u32 {
    DEFAULT_CAPTURE_PAIRING_SECONDS
}

/// Replicate agreement rules.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ReplicatePolicy {
    /// Largest RSD of assay replicates, percent.
    pub assay_max_rsd_percent: String,
    /// Probability for the ISO 5725-6 critical range.
    pub critical_range_probability: String,
    /// Significance level for Grubbs and Dixon.
    pub outlier_significance: String,
}

/// Uncertainty evaluation rules.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct UncertaintyPolicy {
    /// k = 2 or Student t.
    pub coverage: CoverageChoice,
    /// Coverage probability for Student t.
    pub coverage_probability: String,
    /// Rounding of U to two significant digits.
    pub expanded_uncertainty_rounding: UncertaintyRounding,
    /// Relative standard uncertainty of a balance's sensitivity when no certificate gives one.
    pub balance_sensitivity_relative_u: String,
    /// Maximum permissible error of the burettes, mL (treated as triangular).
    pub burette_max_error_ml: String,
}

/// The lab policy.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LabPolicy {
    /// Document id.
    pub id: String,
    /// Title.
    pub title: String,
    /// Version label.
    pub version: String,
    /// Balances.
    pub balances: BalancePolicy,
    /// Titrants.
    pub titrants: TitrantPolicy,
    /// Records.
    pub records: RecordsPolicy,
    /// Replicates.
    pub replicates: ReplicatePolicy,
    /// Uncertainty.
    pub uncertainty: UncertaintyPolicy,
}

impl LabPolicy {
    /// Parses and checks a lab policy document.
    pub fn parse(text: &str) -> Result<LabPolicy, DocumentError> {
        let policy: LabPolicy = toml::from_str(text).map_err(|e| DocumentError {
            document: "lab policy".into(),
            reason: e.message().to_string(),
        })?;
        let error = |reason: String| DocumentError {
            document: format!("lab policy {}", policy.id),
            reason,
        };
        for (field, value) in [
            (
                "balances.routine_check_tolerance_percent",
                &policy.balances.routine_check_tolerance_percent,
            ),
            (
                "balances.minimum_weight_safety_factor",
                &policy.balances.minimum_weight_safety_factor,
            ),
            (
                "titrants.standardization_max_rsd_percent",
                &policy.titrants.standardization_max_rsd_percent,
            ),
            (
                "titrants.strength_within_percent_of_nominal",
                &policy.titrants.strength_within_percent_of_nominal,
            ),
            (
                "replicates.assay_max_rsd_percent",
                &policy.replicates.assay_max_rsd_percent,
            ),
            (
                "uncertainty.balance_sensitivity_relative_u",
                &policy.uncertainty.balance_sensitivity_relative_u,
            ),
        ] {
            positive(value, field).map_err(error)?;
        }
        for (field, value) in [
            (
                "replicates.critical_range_probability",
                &policy.replicates.critical_range_probability,
            ),
            (
                "replicates.outlier_significance",
                &policy.replicates.outlier_significance,
            ),
            (
                "uncertainty.coverage_probability",
                &policy.uncertainty.coverage_probability,
            ),
        ] {
            let p = positive(value, field).map_err(error)?;
            if p >= Decimal::ONE {
                return Err(error(format!("{field} must be below 1, not {p}")));
            }
        }
        Ok(policy)
    }
}

fn decimal(text: &str, field: &str) -> Result<Decimal, String> {
    Decimal::from_str_exact(text.trim())
        .map_err(|_| format!("{field} {text:?} is not a decimal number (use '.' as separator)"))
}

fn positive(text: &str, field: &str) -> Result<Decimal, String> {
    let value = decimal(text, field)?;
    if value <= Decimal::ZERO {
        return Err(format!("{field} must be positive, not {value}"));
    }
    Ok(value)
}

/// Parses a decimal field that [`Method::parse`] or [`LabPolicy::parse`] already checked.
pub fn checked_decimal(text: &str) -> Decimal {
    Decimal::from_str(text.trim()).expect("checked when the document was parsed")
}

#[cfg(test)]
mod tests {
    use super::*;

    const SHIPPED_METHODS: [(&str, &str); 3] = [
        (
            "permanganate-peroxide",
            include_str!("../../policies/permanganate-peroxide.toml"),
        ),
        (
            "naoh-khp-acid",
            include_str!("../../policies/naoh-khp-acid.toml"),
        ),
        (
            "edta-calcium",
            include_str!("../../policies/edta-calcium.toml"),
        ),
    ];

    // Stoichiometry as REFERENCES.md section 7 gives it: permanganate 2:5 with oxalate and with
    // peroxide [pub, USP]; KHP + NaOH 1:1 [pub, Ph. Eur./BP]; Ca + EDTA 1:1 [pub, WHO]; the
    // acetic acid + hydroxide 1:1 neutralisation is common practice [cp].
    #[test]
    fn shipped_methods_parse_and_give_the_trade_stoichiometry() {
        let expected = [(2, 5, 2, 5), (1, 1, 1, 1), (1, 1, 1, 1)];
        for ((name, text), (t_std, ps, t_assay, analyte)) in SHIPPED_METHODS.iter().zip(expected) {
            let method = Method::parse(text).unwrap_or_else(|e| panic!("{name}: {e}"));
            let s = method.stoichiometry().unwrap();
            assert_eq!(
                (
                    s.titrant_in_standardization,
                    s.primary_standard,
                    s.titrant_in_assay,
                    s.analyte
                ),
                (t_std, ps, t_assay, analyte),
                "{name}"
            );
        }
    }

    #[test]
    fn shipped_policy_parses() {
        let policy = LabPolicy::parse(include_str!("../../policies/lab-policy.toml")).unwrap();
        assert_eq!(policy.titrants.standardization_max_rsd_percent, "0.2");
        assert_eq!(policy.uncertainty.coverage, CoverageChoice::StudentT);
    }

    #[test]
    fn refuses_a_method_whose_equation_does_not_balance() {
        let text = SHIPPED_METHODS[0].1.replace(
            "2 MnO4- + 5 H2O2 + 6 H+ -> 2 Mn^2+ + 5 O2 + 8 H2O",
            "2 MnO4- + 5 H2O2 + 6 H+ -> 2 Mn^2+ + 5 O2 + 6 H2O",
        );
        let err = Method::parse(&text).unwrap_err();
        assert!(
            err.reason.contains("assay.equation does not balance"),
            "{err}"
        );
    }

    #[test]
    fn refuses_a_species_missing_from_its_equation_and_unknown_fields() {
        let text = SHIPPED_METHODS[1]
            .1
            .replace("reacting_species = \"OH-\"", "reacting_species = \"NH3\"");
        assert!(Method::parse(&text)
            .unwrap_err()
            .reason
            .contains("does not appear"));
        let text = format!("{}\nsurprise = 1\n", SHIPPED_METHODS[1].1);
        assert!(Method::parse(&text).is_err());
    }

    #[test]
    fn refuses_comma_decimals_and_inverted_limits() {
        let text = SHIPPED_METHODS[0]
            .1
            .replace("portion_g = \"0.25\"", "portion_g = \"0,25\"");
        assert!(Method::parse(&text)
            .unwrap_err()
            .reason
            .contains("'.' as separator"));
        let text = SHIPPED_METHODS[0]
            .1
            .replace("lower = \"29.0\"", "lower = \"33.0\"");
        assert!(Method::parse(&text)
            .unwrap_err()
            .reason
            .contains("not below upper"));
    }

    #[test]
    fn the_adoption_hash_is_sha256_of_the_exact_text() {
        // FIPS 180-4 example (REFERENCES.md section 1): SHA-256("abc").
        assert_eq!(
            document_sha256("abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
    }
}
