//! Uncertainty budgets (GUM, JCGM 100:2008) for results that are products of powers of inputs.
//!
//! Owns the product model `y = constant · Π x_i^{p_i}`, its evaluation into a [`Budget`] (value,
//! sensitivities, contributions ranked largest first, combined and expanded uncertainty,
//! Welch–Satterthwaite effective degrees of freedom) and the handling of correlation groups: terms
//! that are one physical relative error appearing several times (one balance's sensitivity error
//! on every mass weighed on it) are fully correlated, so their exponents add and a group whose
//! exponents sum to zero cancels and is listed as such. Products and quotients combine in relative
//! terms (GUM 5.1.6); full correlation is GUM 5.2.2 with r = +1. This module never rounds for
//! reporting, never reads records or policies, never judges a result against limits and never
//! prints; the budget it returns is data for others to show.

use std::collections::BTreeMap;
use std::fmt;
use std::sync::Arc;

use crate::stats::{self, StatsError};

/// One input quantity of a product model, entering as `value^exponent`.
#[derive(Debug, Clone, PartialEq)]
pub struct Term {
    /// Name shown in the budget (unique within a model), e.g. `m_KHP`.
    pub name: Arc<str>,
    /// Estimate of the input, in its own unit.
    pub value: f64,
    /// Standard uncertainty of the estimate, same unit as `value`.
    pub standard_uncertainty: f64,
    /// Exponent `p_i` in `y = constant · Π x_i^{p_i}` (1 for a factor, −1 for a divisor).
    pub exponent: f64,
    /// Degrees of freedom of the standard uncertainty; `None` means infinitely many (Type B).
    pub degrees_of_freedom: Option<f64>,
    /// Terms sharing a group are one fully correlated physical error appearing several times;
    /// members must agree in value, standard uncertainty and degrees of freedom.
    pub correlation_group: Option<Arc<str>>,
}

impl Term {
    /// An uncorrelated Type B term (infinite degrees of freedom).
    pub fn new(name: &str, value: f64, standard_uncertainty: f64, exponent: f64) -> Term {
        Term {
            name: Arc::from(name),
            value,
            standard_uncertainty,
            exponent,
            degrees_of_freedom: None,
            correlation_group: None,
        }
    }

    /// A relative error shared by several inputs, such as one balance's sensitivity error: value
    /// 1.0, standard uncertainty equal to the relative standard uncertainty, member of `group`.
    pub fn shared_relative_error(
        name: &str,
        group: &str,
        relative_standard_uncertainty: f64,
        exponent: f64,
    ) -> Term {
        Term::new(name, 1.0, relative_standard_uncertainty, exponent).in_correlation_group(group)
    }

    /// The same term with finite degrees of freedom (Type A, e.g. n − 1 for n replicates).
    pub fn with_degrees_of_freedom(mut self, degrees_of_freedom: f64) -> Term {
        self.degrees_of_freedom = Some(degrees_of_freedom);
        self
    }

    /// The same term as a member of correlation group `group`.
    pub fn in_correlation_group(mut self, group: &str) -> Term {
        self.correlation_group = Some(Arc::from(group));
        self
    }
}

/// The measurement model `y = constant · Π x_i^{p_i}`.
#[derive(Debug, Clone, PartialEq)]
pub struct ProductModel {
    /// Exact constant factor (unit conversions, stoichiometric ratios); carries no uncertainty.
    pub constant: f64,
    /// The input quantities.
    pub terms: Vec<Term>,
}

/// How the coverage factor `k` of the expanded uncertainty `U = k · u_c` is chosen.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum CoverageRule {
    /// A fixed `k` (e.g. 2); the budget then states no coverage probability.
    Fixed(f64),
    /// `k = t_{(1+p)/2}(ν_eff)` for coverage probability `p` (e.g. 0.95), GUM G.4.1 and G.6.4;
    /// the normal quantile when `ν_eff` is infinite.
    StudentT {
        /// Coverage probability, strictly between 0 and 1.
        probability: f64,
    },
}

/// One line of a budget: an uncorrelated term, or a correlation group counted once.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Contribution {
    /// The term's name, or the correlation group's name.
    pub name: Arc<str>,
    /// Names of the model terms this line stands for, sorted (one for an uncorrelated term).
    pub members: Vec<Arc<str>>,
    /// Estimate of the input.
    pub value: f64,
    /// Standard uncertainty of the input.
    pub standard_uncertainty: f64,
    /// `standard_uncertainty / |value|`.
    pub relative_uncertainty: f64,
    /// Exponent in the model; for a group, the sum of its members' exponents (0 when cancelled).
    pub exponent: f64,
    /// Sensitivity coefficient `c_i = ∂y/∂x_i = p_i · y / x_i`.
    pub sensitivity: f64,
    /// Contribution to the combined standard uncertainty, `|c_i| · u(x_i)`, in the unit of `y`.
    pub contribution: f64,
    /// Fraction of `u_c²` this line accounts for (the lines sum to 1 unless `u_c` is 0).
    pub share_of_variance: f64,
    /// Degrees of freedom of the input; `None` means infinitely many.
    pub degrees_of_freedom: Option<f64>,
}

/// The evaluated model: result, ranked contributions, combined and expanded uncertainty.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Budget {
    /// The model value `y`.
    pub value: f64,
    /// One line per uncorrelated term and per correlation group, largest contribution first,
    /// ties broken by name.
    pub contributions: Vec<Contribution>,
    /// Combined standard uncertainty `u_c(y)`, in the unit of `y`.
    pub combined_standard_uncertainty: f64,
    /// `u_c(y) / |y|`.
    pub relative_combined_uncertainty: f64,
    /// Welch–Satterthwaite effective degrees of freedom; `None` means infinitely many.
    pub effective_degrees_of_freedom: Option<f64>,
    /// Coverage factor `k`.
    pub coverage_factor: f64,
    /// Coverage probability the factor was chosen for; `None` for a fixed factor.
    pub coverage_probability: Option<f64>,
    /// Expanded uncertainty `U = k · u_c`.
    pub expanded_uncertainty: f64,
    /// Correlation groups whose exponents sum to zero and which therefore cancel, sorted.
    pub cancelled: Vec<Arc<str>>,
}

/// Why a budget could not be evaluated.
#[derive(Debug, Clone, PartialEq)]
pub enum UncertaintyError {
    /// The model constant is zero or not finite.
    InvalidConstant {
        /// The constant given.
        constant: f64,
    },
    /// A term has an empty name.
    EmptyTermName {
        /// Position of the term in the model.
        index: usize,
    },
    /// Two terms share a name.
    DuplicateTermName {
        /// The repeated name.
        term: String,
    },
    /// A term's value is not finite.
    NonFiniteValue {
        /// The term.
        term: String,
        /// Its value.
        value: f64,
    },
    /// A term's value is zero; sensitivities divide by it.
    ZeroValue {
        /// The term.
        term: String,
    },
    /// A term's exponent is not finite.
    InvalidExponent {
        /// The term.
        term: String,
        /// Its exponent.
        exponent: f64,
    },
    /// A negative value raised to a fractional power.
    NegativeValueWithFractionalExponent {
        /// The term.
        term: String,
        /// Its value.
        value: f64,
        /// Its exponent.
        exponent: f64,
    },
    /// A standard uncertainty that is negative or not finite.
    InvalidStandardUncertainty {
        /// The term.
        term: String,
        /// Its standard uncertainty.
        standard_uncertainty: f64,
    },
    /// Degrees of freedom that are not greater than zero.
    InvalidDegreesOfFreedom {
        /// The term.
        term: String,
        /// Its degrees of freedom.
        degrees_of_freedom: f64,
    },
    /// A term names an empty correlation group.
    EmptyCorrelationGroup {
        /// The term.
        term: String,
    },
    /// A correlation group has the name of a term outside it, so budget lines would collide.
    CorrelationGroupNameClash {
        /// The group (and term) name.
        group: String,
    },
    /// Two members of one correlation group disagree, so they cannot be one physical error.
    CorrelationGroupMismatch {
        /// The group.
        group: String,
        /// The member the others are compared with (first by name).
        first_term: String,
        /// The member that differs.
        term: String,
        /// Which quantity differs: `value`, `standard uncertainty` or `degrees of freedom`.
        quantity: &'static str,
        /// The first member's figure (infinite degrees of freedom shown as `inf`).
        first: f64,
        /// The differing member's figure.
        found: f64,
    },
    /// The model value overflowed, underflowed to zero or is otherwise not usable.
    ResultNotFinite {
        /// The value computed.
        value: f64,
    },
    /// A fixed coverage factor that is not finite and positive.
    InvalidCoverageFactor {
        /// The factor given.
        coverage_factor: f64,
    },
    /// The Student t coverage factor could not be computed.
    CoverageFactor {
        /// What the statistics module reported.
        source: StatsError,
    },
}

impl fmt::Display for UncertaintyError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        use UncertaintyError as E;
        match self {
            E::InvalidConstant { constant } => {
                write!(f, "model constant {constant} must be finite and non-zero")
            }
            E::EmptyTermName { index } => write!(f, "term at position {index} has an empty name"),
            E::DuplicateTermName { term } => write!(f, "term '{term}' appears more than once"),
            E::NonFiniteValue { term, value } => {
                write!(f, "term '{term}' has value {value}, which is not finite")
            }
            E::ZeroValue { term } => {
                write!(f, "term '{term}' has value 0, but its sensitivity divides by it")
            }
            E::InvalidExponent { term, exponent } => {
                write!(f, "term '{term}' has exponent {exponent}, which is not finite")
            }
            E::NegativeValueWithFractionalExponent {
                term,
                value,
                exponent,
            } => write!(
                f,
                "term '{term}' has negative value {value} with fractional exponent {exponent}"
            ),
            E::InvalidStandardUncertainty {
                term,
                standard_uncertainty,
            } => write!(
                f,
                "term '{term}' has standard uncertainty {standard_uncertainty}; it must be finite and at least 0"
            ),
            E::InvalidDegreesOfFreedom {
                term,
                degrees_of_freedom,
            } => write!(
                f,
                "term '{term}' has {degrees_of_freedom} degrees of freedom; they must be greater than 0"
            ),
            E::EmptyCorrelationGroup { term } => {
                write!(f, "term '{term}' names an empty correlation group")
            }
            E::CorrelationGroupNameClash { group } => write!(
                f,
                "correlation group '{group}' has the name of a term outside the group"
            ),
            E::CorrelationGroupMismatch {
                group,
                first_term,
                term,
                quantity,
                first,
                found,
            } => write!(
                f,
                "terms '{first_term}' and '{term}' in correlation group '{group}' differ in {quantity}: {first} vs {found}"
            ),
            E::ResultNotFinite { value } => {
                write!(f, "model value {value} is not a finite non-zero number")
            }
            E::InvalidCoverageFactor { coverage_factor } => write!(
                f,
                "coverage factor {coverage_factor} must be finite and greater than 0"
            ),
            E::CoverageFactor { source } => {
                write!(f, "cannot compute the coverage factor: {source}")
            }
        }
    }
}

impl std::error::Error for UncertaintyError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            UncertaintyError::CoverageFactor { source } => Some(source),
            _ => None,
        }
    }
}

/// Exponent sums within this fraction of the summed absolute exponents count as zero, so a group
/// entered as −1/3 and +1/3 still cancels despite floating-point rounding.
const CANCELLATION_TOLERANCE: f64 = 1e-12;

/// One budget line before the model value is known: an uncorrelated term or a whole group.
struct Source<'a> {
    /// The line's name: the term's, or its correlation group's.
    name: &'a Arc<str>,
    members: Vec<&'a Arc<str>>,
    value: f64,
    standard_uncertainty: f64,
    exponent: f64,
    absolute_exponents: f64,
    degrees_of_freedom: Option<f64>,
    grouped: bool,
}

impl Source<'_> {
    fn is_cancelled(&self) -> bool {
        self.grouped && self.exponent.abs() <= CANCELLATION_TOLERANCE * self.absolute_exponents
    }
}

/// Evaluates `model` into a budget, choosing the coverage factor by `rule`.
///
/// Every line's contribution is `|p_i · y / x_i| · u(x_i)` and `u_c` is their root sum of
/// squares, which is GUM Eq. 10 for uncorrelated inputs and, for a correlation group counted once
/// with its summed exponent, GUM Eq. 13 with r = +1. The result does not depend on the order of
/// the terms: everything is computed from name-sorted inputs.
pub fn evaluate(model: &ProductModel, rule: CoverageRule) -> Result<Budget, UncertaintyError> {
    validate_constant(model.constant)?;
    let mut terms: Vec<&Term> = model.terms.iter().collect();
    for (index, term) in terms.iter().enumerate() {
        validate_term(index, term)?;
    }
    terms.sort_by(|a, b| a.name.cmp(&b.name));
    check_unique_names(&terms)?;
    let sources = collect_sources(&terms)?;
    let value = model_value(model.constant, &sources)?;

    let mut contributions: Vec<Contribution> = sources
        .values()
        .map(|source| contribution_line(source, value))
        .collect();
    contributions.sort_by(|a, b| {
        b.contribution
            .total_cmp(&a.contribution)
            .then_with(|| a.name.cmp(&b.name))
    });
    let combined = contributions
        .iter()
        .map(|line| line.contribution.powi(2))
        .sum::<f64>()
        .sqrt();
    for line in &mut contributions {
        line.share_of_variance = if combined > 0.0 {
            (line.contribution / combined).powi(2)
        } else {
            0.0
        };
    }
    let pairs: Vec<(f64, Option<f64>)> = contributions
        .iter()
        .map(|line| (line.contribution, line.degrees_of_freedom))
        .collect();
    let effective_degrees_of_freedom = welch_satterthwaite(&pairs, combined);
    let (coverage_factor, coverage_probability) =
        coverage_factor(rule, effective_degrees_of_freedom)?;
    let cancelled = sources
        .values()
        .filter(|source| source.is_cancelled())
        .map(|source| Arc::clone(source.name))
        .collect();

    Ok(Budget {
        value,
        contributions,
        combined_standard_uncertainty: combined,
        relative_combined_uncertainty: combined / value.abs(),
        effective_degrees_of_freedom,
        coverage_factor,
        coverage_probability,
        expanded_uncertainty: coverage_factor * combined,
        cancelled,
    })
}

/// Welch–Satterthwaite effective degrees of freedom, GUM G.4.1 Eq. G.2b:
/// `ν_eff = u_c⁴ / Σ (u_i⁴ / ν_i)` over the contributions `u_i(y)` with their `ν_i` (`None` =
/// infinite, contributing nothing to the sum), truncated down to an integer (GUM G.4.1).
///
/// Returns `None` (infinitely many) when no contribution has both finite degrees of freedom and a
/// non-zero size. A value within 1e-9 (relative) of an integer is taken as that integer, so
/// rounding in `u⁴` does not cost a whole degree of freedom; a value below 1, possible only when
/// some `ν_i` is below 1, is returned untruncated so it stays a usable positive number.
/// `combined` must be the combined standard uncertainty of the same contributions.
pub fn welch_satterthwaite(contributions: &[(f64, Option<f64>)], combined: f64) -> Option<f64> {
    let denominator: f64 = contributions
        .iter()
        .filter_map(|&(u, dof)| match dof {
            Some(nu) if nu.is_finite() && u != 0.0 => Some(u.powi(4) / nu),
            _ => None,
        })
        .sum();
    if denominator == 0.0 {
        return None;
    }
    let raw = combined.powi(4) / denominator;
    Some(truncate_degrees_of_freedom(raw))
}

fn truncate_degrees_of_freedom(raw: f64) -> f64 {
    if raw < 1.0 || !raw.is_finite() {
        return raw;
    }
    let nearest = raw.round();
    if (raw - nearest).abs() <= 1e-9 * raw {
        nearest
    } else {
        raw.floor()
    }
}

fn validate_constant(constant: f64) -> Result<(), UncertaintyError> {
    if constant.is_finite() && constant != 0.0 {
        Ok(())
    } else {
        Err(UncertaintyError::InvalidConstant { constant })
    }
}

fn validate_term(index: usize, term: &Term) -> Result<(), UncertaintyError> {
    use UncertaintyError as E;
    let name = || term.name.to_string();
    if term.name.is_empty() {
        return Err(E::EmptyTermName { index });
    }
    if !term.value.is_finite() {
        return Err(E::NonFiniteValue {
            term: name(),
            value: term.value,
        });
    }
    if term.value == 0.0 {
        return Err(E::ZeroValue { term: name() });
    }
    if !term.exponent.is_finite() {
        return Err(E::InvalidExponent {
            term: name(),
            exponent: term.exponent,
        });
    }
    if term.value < 0.0 && term.exponent.fract() != 0.0 {
        return Err(E::NegativeValueWithFractionalExponent {
            term: name(),
            value: term.value,
            exponent: term.exponent,
        });
    }
    let u = term.standard_uncertainty;
    if !(u.is_finite() && u >= 0.0) {
        return Err(E::InvalidStandardUncertainty {
            term: name(),
            standard_uncertainty: u,
        });
    }
    if let Some(nu) = term.degrees_of_freedom {
        if nu.is_nan() || nu <= 0.0 {
            return Err(E::InvalidDegreesOfFreedom {
                term: name(),
                degrees_of_freedom: nu,
            });
        }
    }
    if term.correlation_group.as_deref() == Some("") {
        return Err(E::EmptyCorrelationGroup { term: name() });
    }
    Ok(())
}

/// `terms` are sorted by name, so duplicates are neighbours.
fn check_unique_names(terms: &[&Term]) -> Result<(), UncertaintyError> {
    match terms.windows(2).find(|pair| pair[0].name == pair[1].name) {
        Some(pair) => Err(UncertaintyError::DuplicateTermName {
            term: pair[0].name.to_string(),
        }),
        None => Ok(()),
    }
}

/// Budget lines keyed by name: uncorrelated terms as they are, groups merged (exponents added).
fn collect_sources<'a>(
    terms: &[&'a Term],
) -> Result<BTreeMap<&'a str, Source<'a>>, UncertaintyError> {
    let is_ungrouped_name = |name: &str| {
        // `terms` are sorted by name.
        terms
            .binary_search_by(|term| term.name.as_ref().cmp(name))
            .is_ok_and(|at| terms[at].correlation_group.is_none())
    };
    let mut sources: BTreeMap<&'a str, Source<'a>> = BTreeMap::new();
    for term in terms {
        let Some(group_name) = term.correlation_group.as_ref() else {
            sources.insert(&term.name, source_of(&term.name, term, false));
            continue;
        };
        let group: &str = group_name;
        if is_ungrouped_name(group) {
            return Err(UncertaintyError::CorrelationGroupNameClash {
                group: group.to_string(),
            });
        }
        match sources.get_mut(group) {
            None => {
                sources.insert(group, source_of(group_name, term, true));
            }
            Some(source) => {
                check_same_error(group, source, term)?;
                source.exponent += term.exponent;
                source.absolute_exponents += term.exponent.abs();
                source.members.push(&term.name);
            }
        }
    }
    Ok(sources)
}

fn source_of<'a>(name: &'a Arc<str>, term: &'a Term, grouped: bool) -> Source<'a> {
    Source {
        name,
        members: vec![&term.name],
        value: term.value,
        standard_uncertainty: term.standard_uncertainty,
        exponent: term.exponent,
        absolute_exponents: term.exponent.abs(),
        degrees_of_freedom: term.degrees_of_freedom,
        grouped,
    }
}

/// Members of a group must be the same physical error: same value, uncertainty and dof.
fn check_same_error(group: &str, source: &Source, term: &Term) -> Result<(), UncertaintyError> {
    let infinite_if_none = |dof: Option<f64>| dof.unwrap_or(f64::INFINITY);
    let comparisons = [
        ("value", source.value, term.value),
        (
            "standard uncertainty",
            source.standard_uncertainty,
            term.standard_uncertainty,
        ),
        (
            "degrees of freedom",
            infinite_if_none(source.degrees_of_freedom),
            infinite_if_none(term.degrees_of_freedom),
        ),
    ];
    for (quantity, first, found) in comparisons {
        if first != found {
            return Err(UncertaintyError::CorrelationGroupMismatch {
                group: group.to_string(),
                first_term: source.members[0].to_string(),
                term: term.name.to_string(),
                quantity,
                first,
                found,
            });
        }
    }
    Ok(())
}

/// `constant · Π x^p` over the lines; a cancelled group contributes exactly 1.
fn model_value(constant: f64, sources: &BTreeMap<&str, Source>) -> Result<f64, UncertaintyError> {
    let value = sources
        .values()
        .filter(|source| !source.is_cancelled())
        .fold(constant, |product, source| {
            product * source.value.powf(source.exponent)
        });
    if value.is_finite() && value != 0.0 {
        Ok(value)
    } else {
        Err(UncertaintyError::ResultNotFinite { value })
    }
}

fn contribution_line(source: &Source, model_value: f64) -> Contribution {
    let exponent = if source.is_cancelled() {
        0.0
    } else {
        source.exponent
    };
    let sensitivity = exponent * model_value / source.value;
    Contribution {
        name: Arc::clone(source.name),
        members: source
            .members
            .iter()
            .map(|member| Arc::clone(member))
            .collect(),
        value: source.value,
        standard_uncertainty: source.standard_uncertainty,
        relative_uncertainty: source.standard_uncertainty / source.value.abs(),
        exponent,
        sensitivity,
        contribution: sensitivity.abs() * source.standard_uncertainty,
        share_of_variance: 0.0,
        degrees_of_freedom: source.degrees_of_freedom,
    }
}

fn coverage_factor(
    rule: CoverageRule,
    effective_degrees_of_freedom: Option<f64>,
) -> Result<(f64, Option<f64>), UncertaintyError> {
    match rule {
        CoverageRule::Fixed(k) if k.is_finite() && k > 0.0 => Ok((k, None)),
        CoverageRule::Fixed(k) => {
            Err(UncertaintyError::InvalidCoverageFactor { coverage_factor: k })
        }
        CoverageRule::StudentT { probability } => {
            let k = stats::student_t_coverage_factor(probability, effective_degrees_of_freedom)
                .map_err(|source| UncertaintyError::CoverageFactor { source })?;
            Ok((k, Some(probability)))
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::rngs::StdRng;
    use rand::seq::SliceRandom;
    use rand::{Rng, SeedableRng};
    use rand_distr::{Distribution, Normal};
    use std::collections::HashMap;

    fn assert_close(actual: f64, expected: f64, tolerance: f64, what: &str) {
        assert!(
            (actual - expected).abs() <= tolerance,
            "{what}: {actual} differs from {expected} by more than {tolerance}"
        );
    }

    fn assert_relative(actual: f64, expected: f64, relative: f64, what: &str) {
        assert_close(actual, expected, relative * expected.abs(), what);
    }

    fn names(list: &[Arc<str>]) -> Vec<&str> {
        list.iter().map(|name| &**name).collect()
    }

    fn line<'a>(budget: &'a Budget, name: &str) -> &'a Contribution {
        budget
            .contributions
            .iter()
            .find(|line| &*line.name == name)
            .unwrap_or_else(|| panic!("no budget line named {name}"))
    }

    /// EURACHEM/CITAC QUAM (3rd ed., 2012), Example A2: c = 1000·m·P/(M·V)·R, with M = 204.2212
    /// (the atomic weights of that edition, not today's).
    fn quam_a2() -> ProductModel {
        ProductModel {
            constant: 1000.0,
            terms: vec![
                Term::new("m_KHP", 0.3888, 0.00013, 1.0),
                Term::new("P_KHP", 1.0, 0.00029, 1.0),
                Term::new("M_KHP", 204.2212, 0.0038, -1.0),
                Term::new("V_T", 18.64, 0.013, -1.0),
                Term::new("R", 1.0, 0.0005, 1.0),
            ],
        }
    }

    /// DESIGN.md §5 chain, invented figures: titrant standardized against a primary standard,
    /// then used in an assay; `w = m_PS·P/M_PS · m_T,assay/m_T,std · M_A/m_S · R`. The titrant
    /// masses carry the titrant balance's sensitivity error: `same_balance` puts both weighings
    /// on one balance (one group, exponents −1 and +1), otherwise on two balances.
    fn standardization_then_assay(same_balance: bool) -> ProductModel {
        let relative_sensitivity_u = 5e-5;
        let (std_balance, assay_balance) = if same_balance {
            ("balance T1 sensitivity", "balance T1 sensitivity")
        } else {
            ("balance T1 sensitivity", "balance T2 sensitivity")
        };
        ProductModel {
            constant: 100.0,
            terms: vec![
                Term::new("m_PS", 0.2500, 0.00006, 1.0),
                Term::new("P_PS", 0.99965, 0.00012, 1.0),
                Term::new("M_PS", 133.9985, 0.0005, -1.0),
                Term::new("m_T_std", 37.30, 0.002, -1.0),
                Term::new("m_T_assay", 17.05, 0.002, 1.0),
                Term::new("M_A", 34.0147, 0.0004, 1.0),
                Term::new("m_S", 1.5000, 0.0001, -1.0),
                Term::new("R", 1.0, 0.0008, 1.0).with_degrees_of_freedom(5.0),
                Term::shared_relative_error("s_T_std", std_balance, relative_sensitivity_u, -1.0),
                Term::shared_relative_error(
                    "s_T_assay",
                    assay_balance,
                    relative_sensitivity_u,
                    1.0,
                ),
            ],
        }
    }

    #[test]
    fn quam_a2_naoh_standardization_matches_published_budget() {
        let budget = evaluate(&quam_a2(), CoverageRule::Fixed(2.0)).unwrap();

        // [calc] the model by hand
        let by_hand = 1000.0 * 0.3888 * 1.0 / (204.2212 * 18.64) * 1.0;
        assert_close(budget.value, by_hand, 1e-15, "c");
        // EURACHEM/CITAC QUAM (3rd ed., 2012), Example A2 [pub]: c = 0.10214 mol/L (0.102136)
        assert_close(budget.value, 0.102136, 5e-7, "c unrounded");
        assert_close(
            (budget.value * 1e5).round() / 1e5,
            0.10214,
            1e-12,
            "c rounded",
        );

        // [calc] GUM 5.1.6 by hand: relative u_c is the root sum of squared relative u's
        let relative = ((0.00013_f64 / 0.3888).powi(2)
            + (0.00029_f64 / 1.0).powi(2)
            + (0.0038_f64 / 204.2212).powi(2)
            + (0.013_f64 / 18.64).powi(2)
            + (0.0005_f64 / 1.0).powi(2))
        .sqrt();
        assert_relative(
            budget.relative_combined_uncertainty,
            relative,
            1e-12,
            "u_c/c",
        );
        // EURACHEM/CITAC QUAM (3rd ed., 2012), Example A2 [pub]: u_c = 0.00010 mol/L, quoted
        // at the fifth decimal place like c. Its unrounded 1.005e-4 comes from component
        // uncertainties carried with more digits than the table prints; the two-digit inputs used
        // here give 9.86e-5 by the same law (REFERENCES §5 allows both). So: assert the value these
        // inputs give, that it lies within 2 % of the published unrounded figure, and that it
        // reads 0.00010 at the published decimal place.
        let u_c = budget.combined_standard_uncertainty;
        assert_close(u_c, 9.86e-5, 0.005e-5, "u_c with the rounded inputs");
        assert_relative(
            u_c,
            1.005e-4,
            0.02,
            "u_c against the unrounded published value",
        );
        assert_close(
            (u_c * 1e5).round() / 1e5,
            0.00010,
            1e-12,
            "u_c at five decimals",
        );
        assert_eq!(budget.expanded_uncertainty, 2.0 * u_c);
        assert_eq!(budget.coverage_probability, None);
        assert_eq!(budget.effective_degrees_of_freedom, None);

        // EURACHEM/CITAC QUAM (3rd ed., 2012), Example A2 [pub]: ranked V_T, R, m, P, M
        let ranked: Vec<&str> = budget
            .contributions
            .iter()
            .map(|line| &*line.name)
            .collect();
        assert_eq!(ranked, ["V_T", "R", "m_KHP", "P_KHP", "M_KHP"]);
        assert!(budget.cancelled.is_empty());
    }

    #[test]
    fn quam_a2_sensitivities_are_partial_derivatives() {
        let budget = evaluate(&quam_a2(), CoverageRule::Fixed(2.0)).unwrap();
        let c = budget.value;
        // [calc] ∂c/∂V = −c/V and ∂c/∂m = c/m for c = 1000·m·P/(M·V)·R
        assert_relative(line(&budget, "V_T").sensitivity, -c / 18.64, 1e-12, "c_V");
        assert_relative(line(&budget, "m_KHP").sensitivity, c / 0.3888, 1e-12, "c_m");
        let shares: f64 = budget
            .contributions
            .iter()
            .map(|l| l.share_of_variance)
            .sum();
        assert_close(shares, 1.0, 1e-12, "shares of variance");
    }

    #[test]
    fn welch_satterthwaite_reproduces_gum_check_value() {
        // GUM, JCGM 100:2008, G.4.1 Eq. G.2b [pub example as quoted]: u = 0.25 (ν 9),
        // 0.57 (ν 4), 0.82 (ν 14), u_c = 1.03 → ν_eff = 19
        let contributions = [(0.25, Some(9.0)), (0.57, Some(4.0)), (0.82, Some(14.0))];
        assert_eq!(welch_satterthwaite(&contributions, 1.03), Some(19.0));
        // [calc] untruncated: 1.03⁴ / (0.25⁴/9 + 0.57⁴/4 + 0.82⁴/14) = 19.04
        let raw = 1.03_f64.powi(4)
            / (0.25_f64.powi(4) / 9.0 + 0.57_f64.powi(4) / 4.0 + 0.82_f64.powi(4) / 14.0);
        assert_close(raw, 19.04, 0.005, "raw ν_eff");
    }

    #[test]
    fn welch_satterthwaite_ignores_infinite_and_zero_contributions() {
        assert_eq!(welch_satterthwaite(&[(0.3, None), (0.4, None)], 0.5), None);
        assert_eq!(welch_satterthwaite(&[(0.0, Some(3.0))], 0.0), None);
        assert_eq!(welch_satterthwaite(&[], 0.0), None);
        // one Type A contribution alone keeps its own degrees of freedom exactly
        assert_eq!(welch_satterthwaite(&[(0.7, Some(4.0))], 0.7), Some(4.0));
        assert_eq!(
            welch_satterthwaite(&[(0.1, Some(4.0)), (0.0, Some(1.0)), (0.0, None)], 0.1),
            Some(4.0)
        );
    }

    #[test]
    fn student_t_rule_uses_effective_degrees_of_freedom() {
        let model = ProductModel {
            constant: 1.0,
            terms: vec![
                Term::new("a", 10.0, 0.02, 1.0).with_degrees_of_freedom(4.0),
                Term::new("b", 2.0, 0.002, -1.0),
            ],
        };
        let budget = evaluate(&model, CoverageRule::StudentT { probability: 0.95 }).unwrap();
        let pairs: Vec<(f64, Option<f64>)> = budget
            .contributions
            .iter()
            .map(|l| (l.contribution, l.degrees_of_freedom))
            .collect();
        let nu = welch_satterthwaite(&pairs, budget.combined_standard_uncertainty);
        assert_eq!(budget.effective_degrees_of_freedom, nu);
        // [calc] u_rel = sqrt(0.002² + 0.001²); ν = 4·(5e-6)²/(4e-6)² = 6.25 → 6
        assert_eq!(nu, Some(6.0));
        let k = stats::student_t_quantile(0.975, 6.0).unwrap();
        assert_eq!(budget.coverage_factor, k);
        assert_eq!(budget.coverage_probability, Some(0.95));
        assert_relative(
            budget.expanded_uncertainty,
            k * budget.combined_standard_uncertainty,
            1e-15,
            "U",
        );
    }

    #[test]
    fn student_t_rule_with_only_type_b_inputs_uses_normal_quantile() {
        let budget = evaluate(&quam_a2(), CoverageRule::StudentT { probability: 0.95 }).unwrap();
        assert_eq!(budget.effective_degrees_of_freedom, None);
        let z = stats::student_t_quantile(0.975, f64::INFINITY).unwrap();
        assert_eq!(budget.coverage_factor, z);
    }

    #[test]
    fn same_balance_cancels_sensitivity_term() {
        let same = evaluate(&standardization_then_assay(true), CoverageRule::Fixed(2.0)).unwrap();
        // common practice (REFERENCES §7) [cp]: one balance weighing the titrant in both steps
        // cancels; GUM 5.2.2 with r = +1 [pub]: the exponents −1 and +1 add to 0
        assert_eq!(names(&same.cancelled), ["balance T1 sensitivity"]);
        let group = line(&same, "balance T1 sensitivity");
        assert_eq!(names(&group.members), ["s_T_assay", "s_T_std"]);
        assert_eq!(group.exponent, 0.0);
        assert_eq!(group.sensitivity, 0.0);
        assert_eq!(group.contribution, 0.0);
        assert_eq!(group.share_of_variance, 0.0);
    }

    #[test]
    fn two_balances_both_contribute_sensitivity_terms() {
        let same = evaluate(&standardization_then_assay(true), CoverageRule::Fixed(2.0)).unwrap();
        let two = evaluate(&standardization_then_assay(false), CoverageRule::Fixed(2.0)).unwrap();
        // common practice (REFERENCES §7) [cp]: with different balances it does not cancel
        assert!(two.cancelled.is_empty());
        let first = line(&two, "balance T1 sensitivity");
        let second = line(&two, "balance T2 sensitivity");
        assert_eq!(first.exponent, -1.0);
        assert_eq!(second.exponent, 1.0);
        // [calc] each adds |y|·5e-5 in quadrature
        assert_relative(first.contribution, two.value * 5e-5, 1e-12, "T1 line");
        assert_relative(second.contribution, two.value * 5e-5, 1e-12, "T2 line");
        assert_eq!(same.value, two.value);
        assert!(same.combined_standard_uncertainty < two.combined_standard_uncertainty);
        let expected_two =
            (same.combined_standard_uncertainty.powi(2) + 2.0 * (two.value * 5e-5).powi(2)).sqrt();
        assert_relative(
            two.combined_standard_uncertainty,
            expected_two,
            1e-12,
            "u_c",
        );
    }

    #[test]
    fn cancelled_group_adds_nothing_to_budget() {
        let with_group =
            evaluate(&standardization_then_assay(true), CoverageRule::Fixed(2.0)).unwrap();
        let mut without = standardization_then_assay(true);
        without
            .terms
            .retain(|term| term.correlation_group.is_none());
        let without = evaluate(&without, CoverageRule::Fixed(2.0)).unwrap();
        assert_eq!(with_group.value, without.value);
        assert_eq!(
            with_group.combined_standard_uncertainty,
            without.combined_standard_uncertainty
        );
        assert_eq!(
            with_group.effective_degrees_of_freedom,
            without.effective_degrees_of_freedom
        );
    }

    #[test]
    fn group_with_same_sign_exponents_adds_linearly() {
        // GUM 5.2.2 with r = +1 [pub]: two occurrences with exponent +1 act as one with exponent 2
        let model = ProductModel {
            constant: 1.0,
            terms: vec![
                Term::new("m1", 2.0, 0.0, 1.0),
                Term::new("m2", 3.0, 0.0, 1.0),
                Term::shared_relative_error("s1", "balance A", 1e-4, 1.0),
                Term::shared_relative_error("s2", "balance A", 1e-4, 1.0),
            ],
        };
        let budget = evaluate(&model, CoverageRule::Fixed(2.0)).unwrap();
        let group = line(&budget, "balance A");
        assert_eq!(group.exponent, 2.0);
        assert_relative(budget.relative_combined_uncertainty, 2e-4, 1e-12, "2·u_rel");
    }

    /// JCGM 101 7.9.4 [pub]: M = max(J, 10⁴) trials with J = ⌈100/(1−p)⌉.
    fn minimum_trials(coverage_probability: f64) -> usize {
        let j = (100.0 / (1.0 - coverage_probability)).ceil() as usize;
        j.max(10_000)
    }

    /// Propagation of distributions (JCGM 101): each uncorrelated term drawn from N(x, u) on one
    /// stream; each correlation group drawn once per trial on its own stream and used for every
    /// occurrence. Returns the mean and the sample standard deviation (divisor M − 1).
    fn monte_carlo(model: &ProductModel, trials: usize, seed: u64) -> (f64, f64) {
        let mut term_rng = StdRng::seed_from_u64(seed);
        let mut group_rng = StdRng::seed_from_u64(seed ^ 0x9e37_79b9_7f4a_7c15);
        let mut outputs = Vec::with_capacity(trials);
        for _ in 0..trials {
            let mut group_draws: HashMap<&str, f64> = HashMap::new();
            let mut y = model.constant;
            for term in &model.terms {
                let normal = Normal::new(term.value, term.standard_uncertainty).unwrap();
                let x = match term.correlation_group.as_deref() {
                    None => normal.sample(&mut term_rng),
                    Some(group) => *group_draws
                        .entry(group)
                        .or_insert_with(|| normal.sample(&mut group_rng)),
                };
                y *= x.powf(term.exponent);
            }
            outputs.push(y);
        }
        let m = outputs.len() as f64;
        let mean = outputs.iter().sum::<f64>() / m;
        let variance = outputs.iter().map(|y| (y - mean).powi(2)).sum::<f64>() / (m - 1.0);
        (mean, variance.sqrt())
    }

    /// 200 000 trials: the relative standard error of a sample standard deviation is about
    /// 1/√(2(M−1)) = 0.16 %, and the inputs' relative uncertainties (≤ 0.2 %) make the
    /// linearisation error of the GUM law of order 1e-6. A 1 % tolerance is six standard errors
    /// and still fails for a missing factor √2 or a dropped dominant term.
    const TRIALS: usize = 200_000;
    const MONTE_CARLO_TOLERANCE: f64 = 0.01;

    #[test]
    fn monte_carlo_agrees_with_quam_a2_budget() {
        assert!(TRIALS >= minimum_trials(0.95)); // JCGM 101 7.9.4 [pub]: at least 10⁴ for p = 0.95
        assert_eq!(minimum_trials(0.95), 10_000);
        let model = quam_a2();
        let budget = evaluate(&model, CoverageRule::Fixed(2.0)).unwrap();
        let (mean, sd) = monte_carlo(&model, TRIALS, 20_120_002);
        assert_relative(
            sd,
            budget.combined_standard_uncertainty,
            MONTE_CARLO_TOLERANCE,
            "sd",
        );
        assert_relative(mean, budget.value, 1e-5, "mean");
    }

    #[test]
    fn monte_carlo_agrees_with_budget_for_correlated_group() {
        // the shared error dominates, so counting it √2 instead of 2 times would fail by ~25 %
        let model = ProductModel {
            constant: 1.0,
            terms: vec![
                Term::new("m1", 2.0, 0.0002, 1.0),
                Term::new("m2", 3.0, 0.0003, 1.0),
                Term::new("V", 25.0, 0.005, -1.0),
                Term::shared_relative_error("s1", "balance A", 1e-3, 1.0),
                Term::shared_relative_error("s2", "balance A", 1e-3, 1.0),
            ],
        };
        let budget = evaluate(&model, CoverageRule::Fixed(2.0)).unwrap();
        let (mean, sd) = monte_carlo(&model, TRIALS, 7);
        assert_relative(
            sd,
            budget.combined_standard_uncertainty,
            MONTE_CARLO_TOLERANCE,
            "sd",
        );
        assert_relative(mean, budget.value, 1e-4, "mean");

        for same_balance in [true, false] {
            let model = standardization_then_assay(same_balance);
            let budget = evaluate(&model, CoverageRule::Fixed(2.0)).unwrap();
            let (_, sd) = monte_carlo(&model, TRIALS, 11);
            assert_relative(
                sd,
                budget.combined_standard_uncertainty,
                MONTE_CARLO_TOLERANCE,
                "sd",
            );
        }
    }

    #[test]
    fn monte_carlo_shows_cancelled_group_adds_nothing() {
        // same seeds: the group has its own stream, so the other draws are identical and the
        // group's factor b enters as b⁻¹·b, equal to 1 up to rounding
        let with_group = standardization_then_assay(true);
        let mut without = with_group.clone();
        without
            .terms
            .retain(|term| term.correlation_group.is_none());
        let (_, sd_with) = monte_carlo(&with_group, TRIALS, 3);
        let (_, sd_without) = monte_carlo(&without, TRIALS, 3);
        assert_relative(sd_with, sd_without, 1e-9, "sd with a cancelled group");
    }

    /// Seeded random product models, some with correlation groups, for the property checks.
    fn random_model(rng: &mut StdRng) -> ProductModel {
        let exponents = [-2.0, -1.0, -0.5, 0.5, 1.0, 2.0, 3.0];
        let mut terms = Vec::new();
        for index in 0..rng.gen_range(1..8) {
            let value = rng.gen_range(0.1..1000.0);
            let mut term = Term::new(
                &format!("x{index}"),
                value,
                value * rng.gen_range(0.0..0.01),
                exponents[rng.gen_range(0..exponents.len())],
            );
            if rng.gen_bool(0.4) {
                term = term.with_degrees_of_freedom(rng.gen_range(1..30) as f64);
            }
            terms.push(term);
        }
        for (group, occurrences) in [("g0", rng.gen_range(0..3)), ("g1", rng.gen_range(0..4))] {
            let relative_u = rng.gen_range(0.0..1e-3);
            for occurrence in 0..occurrences {
                let exponent = exponents[rng.gen_range(0..exponents.len())];
                let name = format!("{group}_{occurrence}");
                terms.push(Term::shared_relative_error(
                    &name, group, relative_u, exponent,
                ));
            }
        }
        ProductModel {
            constant: rng.gen_range(0.5..2000.0),
            terms,
        }
    }

    #[test]
    fn combined_uncertainty_is_never_negative() {
        let mut rng = StdRng::seed_from_u64(41);
        for _ in 0..300 {
            let budget = evaluate(&random_model(&mut rng), CoverageRule::Fixed(2.0)).unwrap();
            assert!(budget.combined_standard_uncertainty >= 0.0);
            assert!(budget.expanded_uncertainty >= 0.0);
            assert!(budget.contributions.iter().all(|l| l.contribution >= 0.0));
        }
    }

    #[test]
    fn reordering_terms_changes_nothing() {
        let mut rng = StdRng::seed_from_u64(42);
        for _ in 0..300 {
            let model = random_model(&mut rng);
            let rule = CoverageRule::StudentT { probability: 0.95 };
            let budget = evaluate(&model, rule).unwrap();
            let mut shuffled = model.clone();
            shuffled.terms.shuffle(&mut rng);
            assert_eq!(evaluate(&shuffled, rule).unwrap(), budget);
            shuffled.terms.reverse();
            assert_eq!(evaluate(&shuffled, rule).unwrap(), budget);
        }
    }

    #[test]
    fn scaling_a_value_scales_result_and_uncertainty_consistently() {
        let mut rng = StdRng::seed_from_u64(43);
        for _ in 0..300 {
            let model = random_model(&mut rng);
            let budget = evaluate(&model, CoverageRule::Fixed(2.0)).unwrap();
            let factor = rng.gen_range(0.01..100.0);
            // a value and its uncertainty in another unit: y and u_c scale by factor^p
            let mut scaled = model.clone();
            let term = &mut scaled.terms[0];
            term.value *= factor;
            term.standard_uncertainty *= factor;
            let expected = factor.powf(term.exponent);
            let scaled = evaluate(&scaled, CoverageRule::Fixed(2.0)).unwrap();
            assert_relative(scaled.value, budget.value * expected, 1e-12, "y");
            assert_relative(
                scaled.combined_standard_uncertainty,
                budget.combined_standard_uncertainty * expected,
                1e-12,
                "u_c",
            );
            assert_relative(
                scaled.relative_combined_uncertainty,
                budget.relative_combined_uncertainty,
                1e-12,
                "u_c/y",
            );
            // the constant scales both linearly
            let mut scaled_constant = model.clone();
            scaled_constant.constant *= factor;
            let scaled_constant = evaluate(&scaled_constant, CoverageRule::Fixed(2.0)).unwrap();
            assert_relative(scaled_constant.value, budget.value * factor, 1e-12, "y");
            assert_relative(
                scaled_constant.combined_standard_uncertainty,
                budget.combined_standard_uncertainty * factor,
                1e-12,
                "u_c",
            );
        }
    }

    #[test]
    fn zero_uncertainty_term_contributes_nothing() {
        let mut model = quam_a2();
        model.terms.push(Term::new("F", 0.5, 0.0, -1.0));
        let with_exact = evaluate(&model, CoverageRule::Fixed(2.0)).unwrap();
        let base = evaluate(&quam_a2(), CoverageRule::Fixed(2.0)).unwrap();
        let exact = line(&with_exact, "F");
        assert_eq!(exact.contribution, 0.0);
        assert_eq!(exact.share_of_variance, 0.0);
        assert_relative(with_exact.value, 2.0 * base.value, 1e-15, "y");
        assert_relative(
            with_exact.relative_combined_uncertainty,
            base.relative_combined_uncertainty,
            1e-15,
            "u_c/y",
        );
        assert_eq!(&*with_exact.contributions.last().unwrap().name, "F");
    }

    #[test]
    fn model_without_uncertainty_has_zero_budget() {
        let model = ProductModel {
            constant: 3.0,
            terms: vec![Term::new("a", 2.0, 0.0, 1.0)],
        };
        let budget = evaluate(&model, CoverageRule::StudentT { probability: 0.95 }).unwrap();
        assert_eq!(budget.value, 6.0);
        assert_eq!(budget.combined_standard_uncertainty, 0.0);
        assert_eq!(budget.expanded_uncertainty, 0.0);
        assert_eq!(budget.contributions[0].share_of_variance, 0.0);
    }

    #[test]
    fn equal_contributions_are_ranked_by_name() {
        let model = ProductModel {
            constant: 1.0,
            terms: vec![
                Term::new("b", 1.0, 0.001, 1.0),
                Term::new("c", 2.0, 0.002, 1.0),
                Term::new("a", 4.0, 0.004, -1.0),
            ],
        };
        let budget = evaluate(&model, CoverageRule::Fixed(2.0)).unwrap();
        let names: Vec<&str> = budget.contributions.iter().map(|l| &*l.name).collect();
        assert_eq!(names, ["a", "b", "c"]);
    }

    fn model_with(term: Term) -> ProductModel {
        ProductModel {
            constant: 1.0,
            terms: vec![Term::new("ok", 1.0, 0.1, 1.0), term],
        }
    }

    fn error_of(model: &ProductModel) -> UncertaintyError {
        evaluate(model, CoverageRule::Fixed(2.0)).unwrap_err()
    }

    #[test]
    fn rejects_invalid_term_inputs_naming_the_term() {
        let zero = error_of(&model_with(Term::new("m_S", 0.0, 0.1, -1.0)));
        assert_eq!(zero, UncertaintyError::ZeroValue { term: "m_S".into() });
        assert_eq!(
            zero.to_string(),
            "term 'm_S' has value 0, but its sensitivity divides by it"
        );
        let infinite = error_of(&model_with(Term::new("V", f64::INFINITY, 0.1, 1.0)));
        assert_eq!(
            infinite.to_string(),
            "term 'V' has value inf, which is not finite"
        );
        let negative_u = error_of(&model_with(Term::new("P", 1.0, -0.1, 1.0)));
        assert_eq!(
            negative_u.to_string(),
            "term 'P' has standard uncertainty -0.1; it must be finite and at least 0"
        );
        let nan_u = error_of(&model_with(Term::new("P", 1.0, f64::NAN, 1.0)));
        assert!(
            matches!(nan_u, UncertaintyError::InvalidStandardUncertainty { ref term, .. } if term == "P")
        );
        let bad_dof = error_of(&model_with(
            Term::new("R", 1.0, 0.1, 1.0).with_degrees_of_freedom(0.0),
        ));
        assert_eq!(
            bad_dof.to_string(),
            "term 'R' has 0 degrees of freedom; they must be greater than 0"
        );
        let exponent = error_of(&model_with(Term::new("x", 1.0, 0.1, f64::NAN)));
        assert_eq!(
            exponent.to_string(),
            "term 'x' has exponent NaN, which is not finite"
        );
        let root = error_of(&model_with(Term::new("x", -4.0, 0.1, 0.5)));
        assert_eq!(
            root.to_string(),
            "term 'x' has negative value -4 with fractional exponent 0.5"
        );
        let unnamed = error_of(&model_with(Term::new("", 1.0, 0.1, 1.0)));
        assert_eq!(unnamed.to_string(), "term at position 1 has an empty name");
    }

    #[test]
    fn rejects_duplicate_names_and_bad_constant() {
        let duplicate = error_of(&model_with(Term::new("ok", 2.0, 0.1, 1.0)));
        assert_eq!(duplicate.to_string(), "term 'ok' appears more than once");
        let mut model = quam_a2();
        model.constant = 0.0;
        assert_eq!(
            error_of(&model).to_string(),
            "model constant 0 must be finite and non-zero"
        );
        let overflow = ProductModel {
            constant: 1e300,
            terms: vec![Term::new("big", 1e300, 0.0, 1.0)],
        };
        assert_eq!(
            error_of(&overflow),
            UncertaintyError::ResultNotFinite {
                value: f64::INFINITY
            }
        );
    }

    #[test]
    fn rejects_correlation_group_members_that_differ() {
        let model = ProductModel {
            constant: 1.0,
            terms: vec![
                Term::shared_relative_error("s_a", "balance A", 1e-4, 1.0),
                Term::shared_relative_error("s_b", "balance A", 2e-4, -1.0),
            ],
        };
        assert_eq!(
            error_of(&model).to_string(),
            "terms 's_a' and 's_b' in correlation group 'balance A' differ in standard uncertainty: 0.0001 vs 0.0002"
        );
        let dof = ProductModel {
            constant: 1.0,
            terms: vec![
                Term::shared_relative_error("s_a", "g", 1e-4, 1.0),
                Term::shared_relative_error("s_b", "g", 1e-4, 1.0).with_degrees_of_freedom(3.0),
            ],
        };
        assert_eq!(
            error_of(&dof).to_string(),
            "terms 's_a' and 's_b' in correlation group 'g' differ in degrees of freedom: inf vs 3"
        );
    }

    #[test]
    fn rejects_group_named_like_an_outside_term() {
        let clash = error_of(&model_with(Term::shared_relative_error(
            "s", "ok", 1e-4, 1.0,
        )));
        assert_eq!(
            clash.to_string(),
            "correlation group 'ok' has the name of a term outside the group"
        );
        let empty = error_of(&model_with(Term::shared_relative_error("s", "", 1e-4, 1.0)));
        assert_eq!(
            empty.to_string(),
            "term 's' names an empty correlation group"
        );
    }

    #[test]
    fn rejects_invalid_coverage_rules() {
        let fixed = evaluate(&quam_a2(), CoverageRule::Fixed(0.0)).unwrap_err();
        assert_eq!(
            fixed.to_string(),
            "coverage factor 0 must be finite and greater than 0"
        );
        let student =
            evaluate(&quam_a2(), CoverageRule::StudentT { probability: 1.0 }).unwrap_err();
        assert_eq!(
            student.to_string(),
            "cannot compute the coverage factor: probability 1 is outside the open interval (0, 1)"
        );
        assert!(std::error::Error::source(&student).is_some());
    }
}
