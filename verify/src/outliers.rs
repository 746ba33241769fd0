//! Agreement of replicate values: the ISO 5725-6 critical range, Grubbs's single-outlier test
//! and Dixon's Q test (r10).
//!
//! Owns the critical range factor f(n) (the upper quantile of the range of n standard normal
//! values, computed here by quadrature and root finding, not read from a table), the Grubbs
//! critical value (from the Student t quantile of [`crate::stats`]), the Dixon r10 critical values
//! (a published table with no crate equivalent, 3 to 10 values at 95 % and 99 %), the two test
//! statistics, and [`evaluate_agreement`], which gathers them for one set of replicates as plain
//! data. Statistics that cannot be computed (too few values, no spread) are `None` and
//! parameters outside their domain are an [`OutlierError`]; nothing here returns NaN. This module
//! never rounds for reporting, never decides conformance to an RSD limit (that comparison rounds
//! in decimal elsewhere), never reads records and never prints.

use std::fmt;

use serde::Serialize;
use statrs::distribution::{Continuous, ContinuousCDF, Normal};

use crate::stats::{self, StatsError};

/// Fewest values for which [`critical_range_factor`] is computed.
pub const CRITICAL_RANGE_MIN_VALUES: usize = 2;
/// Most values for which [`critical_range_factor`] is computed.
pub const CRITICAL_RANGE_MAX_VALUES: usize = 50;
/// Smallest probability [`critical_range_factor`] accepts.
pub const CRITICAL_RANGE_MIN_PROBABILITY: f64 = 0.5;
/// Largest probability [`critical_range_factor`] accepts: beyond it the fixed absolute accuracy
/// of the quadrature (about 1e-12) would no longer be small beside the upper tail.
pub const CRITICAL_RANGE_MAX_PROBABILITY: f64 = 0.9999;
/// Fewest values for Grubbs's test.
pub const GRUBBS_MIN_VALUES: usize = 3;
/// Fewest values in the Dixon r10 table.
pub const DIXON_MIN_VALUES: usize = 3;
/// Most values in the Dixon r10 table.
pub const DIXON_MAX_VALUES: usize = 10;

/// Dixon r10 critical values at 95 % confidence for n = 3..=10 values.
// Rorabacher, Anal. Chem. 1991, 63, 139–146, r10 at 95 % confidence, the more extreme end
// tested [pub]; no crate provides these, so they are typed here and checked against their
// definition by Monte Carlo in the tests.
const DIXON_R10_95: [f64; 8] = [0.970, 0.829, 0.710, 0.625, 0.568, 0.526, 0.493, 0.466];
/// Dixon r10 critical values at 99 % confidence for n = 3..=10 values.
// Rorabacher, Anal. Chem. 1991, 63, 139–146, r10 at 99 % confidence [pub].
const DIXON_R10_99: [f64; 8] = [0.994, 0.926, 0.821, 0.740, 0.680, 0.634, 0.598, 0.568];

/// Half-width of the integration interval for the range distribution: the standard normal mass
/// beyond ±8 is about 1.2e-15.
const RANGE_INTEGRATION_HALF_WIDTH: f64 = 8.0;
/// Simpson panels over [−8, 8] (step 0.01).
const RANGE_INTEGRATION_PANELS: usize = 1600;
/// Upper end of the bracket searched for a range quantile: P(W > 16) ≤ 2n·Φ(−8) < 1e-13 for
/// n ≤ 50, far below 1 − [`CRITICAL_RANGE_MAX_PROBABILITY`].
const RANGE_QUANTILE_BRACKET_TOP: f64 = 16.0;
/// Bisection halvings of the bracket: 16 / 2⁵⁶ ≈ 2e-16, below the spacing of doubles there.
const RANGE_QUANTILE_HALVINGS: usize = 56;

/// Why an agreement statistic could not be computed.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum OutlierError {
    /// A number of values outside what the statistic is defined or tabulated for.
    SampleSizeOutOfRange {
        /// The statistic asked for.
        statistic: &'static str,
        /// The number of values given.
        n_values: usize,
        /// Fewest values accepted.
        smallest: usize,
        /// Most values accepted (`None`: no upper limit).
        largest: Option<usize>,
    },
    /// A critical-range probability outside the accepted interval (or not a number).
    ProbabilityOutOfRange {
        /// The probability given.
        probability: f64,
        /// Smallest accepted.
        lowest: f64,
        /// Largest accepted.
        highest: f64,
    },
    /// A significance level outside the open interval (0, 1) (or not a number).
    SignificanceOutOfRange {
        /// The significance level given.
        significance: f64,
    },
    /// A repeatability standard deviation that is not a positive finite number.
    InvalidStandardDeviation {
        /// The standard deviation given.
        standard_deviation: f64,
    },
    /// An RSD limit that is not a positive finite number of percent.
    InvalidRsdLimit {
        /// The limit given, percent.
        rsd_limit_percent: f64,
    },
    /// A replicate value that is not finite.
    NonFiniteValue {
        /// Position of the value among those given.
        index: usize,
        /// The value.
        value: f64,
    },
    /// The Student t quantile could not be computed.
    Stats(StatsError),
}

impl fmt::Display for OutlierError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            OutlierError::SampleSizeOutOfRange {
                statistic,
                n_values,
                smallest,
                largest: Some(largest),
            } => write!(
                f,
                "{statistic} needs {smallest} to {largest} values, got {n_values}"
            ),
            OutlierError::SampleSizeOutOfRange {
                statistic,
                n_values,
                smallest,
                largest: None,
            } => write!(
                f,
                "{statistic} needs at least {smallest} values, got {n_values}"
            ),
            OutlierError::ProbabilityOutOfRange {
                probability,
                lowest,
                highest,
            } => write!(
                f,
                "critical range probability {probability} is outside {lowest} to {highest}"
            ),
            OutlierError::SignificanceOutOfRange { significance } => write!(
                f,
                "significance level {significance} is outside the open interval (0, 1)"
            ),
            OutlierError::InvalidStandardDeviation { standard_deviation } => write!(
                f,
                "repeatability standard deviation {standard_deviation} must be a positive finite number"
            ),
            OutlierError::InvalidRsdLimit { rsd_limit_percent } => write!(
                f,
                "RSD limit {rsd_limit_percent} % must be a positive finite number"
            ),
            OutlierError::NonFiniteValue { index, value } => {
                write!(f, "replicate value {index} is {value}, not a finite number")
            }
            OutlierError::Stats(error) => error.fmt(f),
        }
    }
}

impl std::error::Error for OutlierError {}

impl From<StatsError> for OutlierError {
    fn from(error: StatsError) -> Self {
        OutlierError::Stats(error)
    }
}

/// ISO 5725-6 critical range factor f(n): the `probability` quantile (e.g. 0.95) of the range of
/// `n` independent standard normal values, i.e. the studentized range q(p; n, ∞).
///
/// The range W has `P(W ≤ w) = n ∫ φ(x) [Φ(x + w) − Φ(x)]^(n−1) dx`; the integral is taken by
/// composite Simpson over x in [−8, 8] and the quantile found by bisection. Accepts
/// 2..=50 values and probabilities from 0.5 to 0.9999. Each (n, probability) is computed once
/// per thread and remembered: a validation asks the same few factors for every run.
pub fn critical_range_factor(n: usize, probability: f64) -> Result<f64, OutlierError> {
    check_sample_size(
        "the critical range factor",
        n,
        CRITICAL_RANGE_MIN_VALUES,
        Some(CRITICAL_RANGE_MAX_VALUES),
    )?;
    let accepted = CRITICAL_RANGE_MIN_PROBABILITY..=CRITICAL_RANGE_MAX_PROBABILITY;
    if !accepted.contains(&probability) {
        return Err(OutlierError::ProbabilityOutOfRange {
            probability,
            lowest: CRITICAL_RANGE_MIN_PROBABILITY,
            highest: CRITICAL_RANGE_MAX_PROBABILITY,
        });
    }
    thread_local! {
        static FACTORS: std::cell::RefCell<std::collections::HashMap<(usize, u64), f64>> =
            std::cell::RefCell::new(std::collections::HashMap::new());
    }
    Ok(FACTORS.with(|factors| {
        *factors
            .borrow_mut()
            .entry((n, probability.to_bits()))
            .or_insert_with(|| range_quantile(n, probability))
    }))
}

/// ISO 5725-6 critical range CR = f(n)·σr for `n` values, where `repeatability_sd` (σr) is the
/// known repeatability standard deviation of the method; a range of `n` replicates above it
/// disagrees at the given `probability`.
pub fn critical_range(
    n: usize,
    probability: f64,
    repeatability_sd: f64,
) -> Result<f64, OutlierError> {
    if !(repeatability_sd.is_finite() && repeatability_sd > 0.0) {
        return Err(OutlierError::InvalidStandardDeviation {
            standard_deviation: repeatability_sd,
        });
    }
    Ok(critical_range_factor(n, probability)? * repeatability_sd)
}

/// Two-sided Grubbs critical value for one outlier among `n` values at significance `alpha`
/// (e.g. 0.05): `G = ((n−1)/√n)·√(t²/(n−2+t²))`, with t the upper α/(2n) quantile of Student t
/// with n−2 degrees of freedom (ISO 5725-2:1994 Table 5 lists these values).
pub fn grubbs_critical(n: usize, alpha: f64) -> Result<f64, OutlierError> {
    check_sample_size("Grubbs's test", n, GRUBBS_MIN_VALUES, None)?;
    check_significance(alpha)?;
    let n_f = n as f64;
    let degrees_of_freedom = n_f - 2.0;
    let t = stats::student_t_quantile(1.0 - alpha / (2.0 * n_f), degrees_of_freedom)?;
    let t2 = t * t;
    Ok((n_f - 1.0) / n_f.sqrt() * (t2 / (degrees_of_freedom + t2)).sqrt())
}

/// Grubbs statistic `G = max |xᵢ − x̄| / s` (s with divisor n − 1) and the index of the value
/// that attains it (the first such value on a tie). `None` for fewer than 3 values, a value that
/// is not finite, or values without spread (s = 0: nothing stands out).
pub fn grubbs_statistic(values: &[f64]) -> Option<(usize, f64)> {
    if values.len() < GRUBBS_MIN_VALUES {
        return None;
    }
    let center = stats::mean(values)?;
    let standard_deviation = stats::sample_standard_deviation(values)?;
    if !(standard_deviation.is_finite() && standard_deviation > 0.0) {
        return None;
    }
    let mut suspect = 0;
    let mut largest_deviation = -1.0;
    for (index, value) in values.iter().enumerate() {
        let deviation = (value - center).abs();
        if deviation > largest_deviation {
            suspect = index;
            largest_deviation = deviation;
        }
    }
    let statistic = largest_deviation / standard_deviation;
    statistic.is_finite().then_some((suspect, statistic))
}

/// Confidence levels at which the Dixon r10 table is published.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum DixonConfidence {
    /// 95 % confidence (significance 0.05).
    Percent95,
    /// 99 % confidence (significance 0.01).
    Percent99,
}

impl DixonConfidence {
    /// The tabulated level for a significance of exactly 0.05 or 0.01; `None` for any other,
    /// since the table gives nothing between or beyond them.
    pub fn from_significance(alpha: f64) -> Option<DixonConfidence> {
        if alpha == 0.05 {
            Some(DixonConfidence::Percent95)
        } else if alpha == 0.01 {
            Some(DixonConfidence::Percent99)
        } else {
            None
        }
    }

    /// The significance level, 0.05 or 0.01.
    pub fn significance(self) -> f64 {
        match self {
            DixonConfidence::Percent95 => 0.05,
            DixonConfidence::Percent99 => 0.01,
        }
    }
}

/// Dixon r10 critical value for `n` values (3..=10) at the given confidence (Rorabacher 1991):
/// a suspect value whose r10 exceeds it is an outlier.
pub fn dixon_critical(n: usize, confidence: DixonConfidence) -> Result<f64, OutlierError> {
    check_sample_size(
        "the Dixon r10 table",
        n,
        DIXON_MIN_VALUES,
        Some(DIXON_MAX_VALUES),
    )?;
    let table = match confidence {
        DixonConfidence::Percent95 => &DIXON_R10_95,
        DixonConfidence::Percent99 => &DIXON_R10_99,
    };
    Ok(table[n - DIXON_MIN_VALUES])
}

/// Dixon r10 statistic `gap / range` for whichever end (lowest or highest value) stands farther
/// from its neighbour, with the index of that suspect value (the lowest on a tie between ends).
/// `None` for fewer than 3 values, a value that is not finite, or values without spread.
pub fn dixon_statistic(values: &[f64]) -> Option<(usize, f64)> {
    if values.len() < DIXON_MIN_VALUES || values.iter().any(|value| !value.is_finite()) {
        return None;
    }
    let mut order: Vec<usize> = (0..values.len()).collect();
    order.sort_by(|&a, &b| values[a].total_cmp(&values[b]));
    let last = order.len() - 1;
    let (lowest, highest) = (values[order[0]], values[order[last]]);
    let range = highest - lowest;
    if !(range.is_finite() && range > 0.0) {
        return None;
    }
    let low_gap = values[order[1]] - lowest;
    let high_gap = highest - values[order[last - 1]];
    if high_gap > low_gap {
        Some((order[last], high_gap / range))
    } else {
        Some((order[0], low_gap / range))
    }
}

/// What the lab policy asks of replicate agreement, plus the method's repeatability if known.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct AgreementSettings {
    /// Largest RSD of the replicates, percent (reported beside the RSD, not judged here).
    pub rsd_limit_percent: f64,
    /// Probability for the ISO 5725-6 critical range (e.g. 0.95).
    pub critical_range_probability: f64,
    /// Significance level for Grubbs and Dixon (e.g. 0.05).
    pub outlier_significance: f64,
    /// Repeatability standard deviation σr of the method, in the unit of the values; `None` when
    /// it is not known, and then no critical range is given.
    pub repeatability_sd: Option<f64>,
}

/// One outlier test applied to a set of replicates.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct OutlierCheck {
    /// Index of the most suspect value among those given.
    pub suspect_index: usize,
    /// The test statistic.
    pub statistic: f64,
    /// The critical value at `significance`.
    pub critical: f64,
    /// Significance level of the test.
    pub significance: f64,
    /// Whether the statistic exceeds the critical value.
    pub is_outlier: bool,
}

/// Agreement statistics of one set of replicates.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Agreement {
    /// Number of replicate values.
    pub n_replicates: usize,
    /// Mean of the values.
    pub mean: f64,
    /// Sample standard deviation (divisor n − 1).
    pub standard_deviation: f64,
    /// Relative standard deviation, percent; `None` when the mean is zero.
    pub rsd_percent: Option<f64>,
    /// The policy's RSD limit, percent, carried beside the RSD; conformance is judged by the
    /// caller after decimal rounding.
    pub rsd_limit_percent: f64,
    /// Largest value minus smallest.
    pub range: f64,
    /// ISO 5725-6 critical range f(n)·σr; `None` when σr was not supplied.
    pub critical_range: Option<f64>,
    /// Whether the range exceeds the critical range; `None` without a critical range.
    pub range_exceeds_critical: Option<bool>,
    /// Grubbs's test; `None` for fewer than 3 values or values without spread.
    pub grubbs: Option<OutlierCheck>,
    /// Dixon's r10 test; `None` unless there are 3 to 10 values with some spread and the
    /// significance is exactly 0.05 or 0.01 (the published table has no other levels).
    pub dixon: Option<OutlierCheck>,
}

/// Gathers the agreement statistics of `values` under `settings`. Needs at least two finite
/// values; every setting is checked whether or not it ends up being used, so a bad policy shows
/// on the first run.
pub fn evaluate_agreement(
    values: &[f64],
    settings: &AgreementSettings,
) -> Result<Agreement, OutlierError> {
    check_values(values)?;
    check_settings(settings)?;
    let n = values.len();
    let mean = stats::mean(values).expect("two or more finite values have a mean");
    let standard_deviation = stats::sample_standard_deviation(values)
        .expect("two or more finite values have a standard deviation");
    let range = value_range(values);
    let critical_range = match settings.repeatability_sd {
        Some(sigma) => Some(critical_range(
            n,
            settings.critical_range_probability,
            sigma,
        )?),
        None => None,
    };
    Ok(Agreement {
        n_replicates: n,
        mean,
        standard_deviation,
        rsd_percent: stats::relative_standard_deviation_percent(values),
        rsd_limit_percent: settings.rsd_limit_percent,
        range,
        critical_range,
        range_exceeds_critical: critical_range.map(|critical| range > critical),
        grubbs: grubbs_check(values, settings.outlier_significance)?,
        dixon: dixon_check(values, settings.outlier_significance)?,
    })
}

/// Grubbs's test of `values`, when it applies.
fn grubbs_check(values: &[f64], alpha: f64) -> Result<Option<OutlierCheck>, OutlierError> {
    let Some((suspect_index, statistic)) = grubbs_statistic(values) else {
        return Ok(None);
    };
    let critical = grubbs_critical(values.len(), alpha)?;
    Ok(Some(OutlierCheck {
        suspect_index,
        statistic,
        critical,
        significance: alpha,
        is_outlier: statistic > critical,
    }))
}

/// Dixon's r10 test of `values`, when the table covers their number and the significance.
fn dixon_check(values: &[f64], alpha: f64) -> Result<Option<OutlierCheck>, OutlierError> {
    let Some(confidence) = DixonConfidence::from_significance(alpha) else {
        return Ok(None);
    };
    if !(DIXON_MIN_VALUES..=DIXON_MAX_VALUES).contains(&values.len()) {
        return Ok(None);
    }
    let Some((suspect_index, statistic)) = dixon_statistic(values) else {
        return Ok(None);
    };
    let critical = dixon_critical(values.len(), confidence)?;
    Ok(Some(OutlierCheck {
        suspect_index,
        statistic,
        critical,
        significance: alpha,
        is_outlier: statistic > critical,
    }))
}

/// At least two values, all finite.
fn check_values(values: &[f64]) -> Result<(), OutlierError> {
    check_sample_size("replicate agreement", values.len(), 2, None)?;
    match values.iter().position(|value| !value.is_finite()) {
        Some(index) => Err(OutlierError::NonFiniteValue {
            index,
            value: values[index],
        }),
        None => Ok(()),
    }
}

/// Every setting within its domain.
fn check_settings(settings: &AgreementSettings) -> Result<(), OutlierError> {
    let limit = settings.rsd_limit_percent;
    if !(limit.is_finite() && limit > 0.0) {
        return Err(OutlierError::InvalidRsdLimit {
            rsd_limit_percent: limit,
        });
    }
    // The factor for two values checks the probability without depending on n.
    critical_range_factor(2, settings.critical_range_probability)?;
    check_significance(settings.outlier_significance)?;
    if let Some(sigma) = settings.repeatability_sd {
        critical_range(2, settings.critical_range_probability, sigma)?;
    }
    Ok(())
}

/// Largest minus smallest of finite values.
fn value_range(values: &[f64]) -> f64 {
    let lowest = values.iter().copied().fold(f64::INFINITY, f64::min);
    let highest = values.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    highest - lowest
}

fn check_sample_size(
    statistic: &'static str,
    n_values: usize,
    smallest: usize,
    largest: Option<usize>,
) -> Result<(), OutlierError> {
    let too_many = largest.is_some_and(|largest| n_values > largest);
    if n_values < smallest || too_many {
        return Err(OutlierError::SampleSizeOutOfRange {
            statistic,
            n_values,
            smallest,
            largest,
        });
    }
    Ok(())
}

fn check_significance(alpha: f64) -> Result<(), OutlierError> {
    if !(alpha > 0.0 && alpha < 1.0) {
        return Err(OutlierError::SignificanceOutOfRange {
            significance: alpha,
        });
    }
    Ok(())
}

/// The `probability` quantile of the range of `n` standard normal values, by bisection on
/// [0, 16] (the caller has checked n and the probability).
fn range_quantile(n: usize, probability: f64) -> f64 {
    let (mut low, mut high) = (0.0, RANGE_QUANTILE_BRACKET_TOP);
    for _ in 0..RANGE_QUANTILE_HALVINGS {
        let middle = 0.5 * (low + high);
        if range_cdf(n, middle) < probability {
            low = middle;
        } else {
            high = middle;
        }
    }
    0.5 * (low + high)
}

/// `P(W ≤ w)` for the range W of `n` standard normal values:
/// `n ∫ φ(x) [Φ(x + w) − Φ(x)]^(n−1) dx` over [−8, 8] by composite Simpson.
fn range_cdf(n: usize, w: f64) -> f64 {
    if w <= 0.0 {
        return 0.0;
    }
    let normal = Normal::standard();
    let exponent = i32::try_from(n - 1).expect("n is at most 50");
    let integrand = |x: f64| {
        // Both tails kept with full relative precision: upper-tail masses above the mean.
        let inside = if x >= 0.0 {
            normal.sf(x) - normal.sf(x + w)
        } else {
            normal.cdf(x + w) - normal.cdf(x)
        };
        normal.pdf(x) * inside.powi(exponent)
    };
    let a = -RANGE_INTEGRATION_HALF_WIDTH;
    let step = 2.0 * RANGE_INTEGRATION_HALF_WIDTH / RANGE_INTEGRATION_PANELS as f64;
    let mut sum = integrand(a) + integrand(-a);
    for i in 1..RANGE_INTEGRATION_PANELS {
        let weight = if i % 2 == 1 { 4.0 } else { 2.0 };
        sum += weight * integrand(a + i as f64 * step);
    }
    (n as f64 * sum * step / 3.0).min(1.0)
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::rngs::StdRng;
    use rand::seq::SliceRandom;
    use rand::{Rng, SeedableRng};
    use rand_distr::StandardNormal;

    fn assert_close(actual: f64, expected: f64, tolerance: f64) {
        assert!(
            (actual - expected).abs() <= tolerance,
            "{actual} differs from {expected} by more than {tolerance}"
        );
    }

    fn standard_normal_quantile(probability: f64) -> f64 {
        Normal::standard().inverse_cdf(probability)
    }

    /// For each threshold, the fraction of `samples` sets of `n` standard normal values whose
    /// `statistic` exceeds it.
    fn simulated_exceedance_rates(
        seed: u64,
        n: usize,
        samples: usize,
        statistic: impl Fn(&[f64]) -> f64,
        thresholds: &[f64],
    ) -> Vec<f64> {
        let mut rng = StdRng::seed_from_u64(seed);
        let mut values = vec![0.0; n];
        let mut hits = vec![0usize; thresholds.len()];
        for _ in 0..samples {
            for value in values.iter_mut() {
                *value = rng.sample(StandardNormal);
            }
            let observed = statistic(&values);
            for (hit, threshold) in hits.iter_mut().zip(thresholds) {
                if observed > *threshold {
                    *hit += 1;
                }
            }
        }
        hits.iter()
            .map(|&hit| hit as f64 / samples as f64)
            .collect()
    }

    #[test]
    fn critical_range_factor_matches_studentized_range_quantiles() {
        // q(0.95; n, ∞) for n = 2..10, REFERENCES.md §3 [calc]
        let expected = [
            2.7718, 3.3145, 3.6332, 3.8577, 4.0301, 4.1696, 4.2863, 4.3865, 4.4741,
        ];
        for (n, expected) in (2..=10).zip(expected) {
            let factor = critical_range_factor(n, 0.95).unwrap();
            assert_close(factor, expected, 0.0005); // REFERENCES.md §3 q(0.95; n, ∞) [calc]
        }
    }

    #[test]
    fn critical_range_factor_rounds_to_iso_5725_6_table_1() {
        // ISO 5725-6:1994 Table 1 [pub n=2,3; calc others], one decimal
        let table = [2.8, 3.3, 3.6, 3.9, 4.0, 4.2, 4.3, 4.4, 4.5];
        for (n, published) in (2..=10).zip(table) {
            let factor = critical_range_factor(n, 0.95).unwrap();
            let one_decimal = (factor * 10.0).round() / 10.0;
            assert_close(one_decimal, published, 1e-9); // ISO 5725-6:1994 Table 1 [pub n=2,3; calc others]
        }
    }

    #[test]
    fn critical_range_factor_for_two_values_is_root_two_times_normal_quantile() {
        // The range of two normals is √2·|Z|, so f(2) = √2·Φ⁻¹((1 + p)/2) [calc]
        for probability in [0.5, 0.9, 0.95, 0.99, 0.9999] {
            let by_definition =
                std::f64::consts::SQRT_2 * standard_normal_quantile((1.0 + probability) / 2.0);
            let factor = critical_range_factor(2, probability).unwrap();
            assert_close(factor, by_definition, 1e-9); // √2·Φ⁻¹((1+p)/2) [calc]
        }
        let f2 = critical_range_factor(2, 0.95).unwrap();
        assert_close(f2, 2.7718, 0.00005); // √2·Φ⁻¹(0.975) = 2.77180 [calc]
    }

    #[test]
    fn range_cdf_for_two_values_matches_closed_form() {
        // P(√2·|Z| ≤ w) = 2Φ(w/√2) − 1 [calc]
        let normal = Normal::standard();
        for w in [0.1, 0.5, 1.0, 2.0, 2.7718, 4.0, 6.0] {
            let closed_form = 2.0 * normal.cdf(w / std::f64::consts::SQRT_2) - 1.0;
            assert_close(range_cdf(2, w), closed_form, 1e-11); // 2Φ(w/√2) − 1 [calc]
        }
        assert_eq!(range_cdf(5, 0.0), 0.0);
        assert!(range_cdf(CRITICAL_RANGE_MAX_VALUES, RANGE_QUANTILE_BRACKET_TOP) > 1.0 - 1e-12);
    }

    #[test]
    fn critical_range_factor_agrees_with_simulated_ranges() {
        // Seeded Monte Carlo of the definition [calc]: P(range of n normals > f(n)) = 0.05
        for (seed, n) in [(51_u64, 4_usize), (52, 7), (53, 10)] {
            let factor = critical_range_factor(n, 0.95).unwrap();
            let rates = simulated_exceedance_rates(seed, n, 200_000, value_range, &[factor]);
            assert_close(rates[0], 0.05, 0.003); // definition of f(n), simulated [calc]
        }
    }

    #[test]
    fn critical_range_factor_grows_with_n_and_probability() {
        let mut previous = 0.0;
        for n in [
            2,
            3,
            4,
            5,
            6,
            8,
            10,
            15,
            20,
            30,
            40,
            CRITICAL_RANGE_MAX_VALUES,
        ] {
            let factor = critical_range_factor(n, 0.95).unwrap();
            assert!(
                factor > previous,
                "f({n}) = {factor} is not above {previous}"
            );
            assert!(factor < critical_range_factor(n, 0.99).unwrap());
            previous = factor;
        }
    }

    #[test]
    fn critical_range_is_factor_times_repeatability_sd() {
        let factor = critical_range_factor(4, 0.95).unwrap();
        assert_eq!(critical_range(4, 0.95, 0.12).unwrap(), factor * 0.12);
        for sigma in [0.0, -0.1, f64::NAN, f64::INFINITY] {
            assert!(matches!(
                critical_range(4, 0.95, sigma),
                Err(OutlierError::InvalidStandardDeviation { .. })
            ));
        }
        assert_eq!(
            critical_range(4, 0.95, 0.0).unwrap_err().to_string(),
            "repeatability standard deviation 0 must be a positive finite number"
        );
    }

    #[test]
    fn critical_range_factor_rejects_sizes_and_probabilities_outside_its_domain() {
        for n in [0, 1, 51] {
            assert_eq!(
                critical_range_factor(n, 0.95),
                Err(OutlierError::SampleSizeOutOfRange {
                    statistic: "the critical range factor",
                    n_values: n,
                    smallest: 2,
                    largest: Some(50),
                })
            );
        }
        assert_eq!(
            critical_range_factor(1, 0.95).unwrap_err().to_string(),
            "the critical range factor needs 2 to 50 values, got 1"
        );
        for probability in [0.0, 0.4, 0.99991, 1.0, f64::NAN] {
            assert!(matches!(
                critical_range_factor(5, probability),
                Err(OutlierError::ProbabilityOutOfRange { .. })
            ));
        }
        assert_eq!(
            critical_range_factor(5, 1.0).unwrap_err().to_string(),
            "critical range probability 1 is outside 0.5 to 0.9999"
        );
    }

    #[test]
    fn grubbs_critical_matches_iso_5725_2_table_5() {
        // ISO 5725-2:1994 Table 5, n = 3..10 [pub]. One widely copied textbook table prints
        // 2.202 for n = 7 at 5 %: a typo for 2.020, which is what the formula gives.
        let five_percent = [1.155, 1.481, 1.715, 1.887, 2.020, 2.126, 2.215, 2.290];
        let one_percent = [1.155, 1.496, 1.764, 1.973, 2.139, 2.274, 2.387, 2.482];
        for (n, (g5, g1)) in (3..=10).zip(five_percent.into_iter().zip(one_percent)) {
            assert_close(grubbs_critical(n, 0.05).unwrap(), g5, 0.001); // ISO 5725-2:1994 Table 5 [pub]
            assert_close(grubbs_critical(n, 0.01).unwrap(), g1, 0.001); // ISO 5725-2:1994 Table 5 [pub]
        }
    }

    #[test]
    fn grubbs_critical_uses_student_t_with_n_minus_two_degrees_of_freedom() {
        // Formula of REFERENCES.md §3, written out with the t quantile from stats [calc]
        let n = 6.0_f64;
        let t = stats::student_t_quantile(1.0 - 0.05 / 12.0, 4.0).unwrap();
        let by_formula = (n - 1.0) / n.sqrt() * (t * t / (n - 2.0 + t * t)).sqrt();
        assert_eq!(grubbs_critical(6, 0.05).unwrap(), by_formula); // G formula [calc]
    }

    #[test]
    fn grubbs_critical_stays_below_the_largest_possible_statistic() {
        // No G can exceed (n − 1)/√n [calc], so a critical value at or above it could never fire.
        for n in 3..=60 {
            let ceiling = (n as f64 - 1.0) / (n as f64).sqrt();
            for alpha in [0.1, 0.05, 0.01] {
                let critical = grubbs_critical(n, alpha).unwrap();
                assert!(critical < ceiling, "n = {n}, alpha = {alpha}");
            }
            assert!(grubbs_critical(n, 0.01).unwrap() > grubbs_critical(n, 0.05).unwrap());
        }
    }

    #[test]
    fn grubbs_critical_rejects_too_few_values_and_bad_significance() {
        assert_eq!(
            grubbs_critical(2, 0.05).unwrap_err().to_string(),
            "Grubbs's test needs at least 3 values, got 2"
        );
        for alpha in [0.0, 1.0, -0.05, f64::NAN] {
            assert!(matches!(
                grubbs_critical(5, alpha),
                Err(OutlierError::SignificanceOutOfRange { .. })
            ));
        }
        assert_eq!(
            grubbs_critical(5, 0.0).unwrap_err().to_string(),
            "significance level 0 is outside the open interval (0, 1)"
        );
    }

    #[test]
    fn grubbs_statistic_of_small_set_matches_hand_arithmetic() {
        // hand arithmetic [calc]: values 10.0, 10.2, 10.1, 10.1, 10.6; mean 51.0 / 5 = 10.2;
        // deviations −0.2, 0, −0.1, −0.1, 0.4; squares sum to 0.22; s = √(0.22 / 4) = 0.234521;
        // G = 0.4 / 0.234521 = 1.705606, at index 4.
        let values = [10.0, 10.2, 10.1, 10.1, 10.6];
        let by_hand = 0.4 / (0.22_f64 / 4.0).sqrt();
        let (index, g) = grubbs_statistic(&values).unwrap();
        assert_eq!(index, 4);
        assert_close(g, by_hand, 1e-9); // hand arithmetic [calc]
        assert_close(g, 1.705_606, 1e-6); // hand arithmetic [calc]
    }

    #[test]
    fn grubbs_statistic_points_at_a_low_suspect() {
        // hand arithmetic [calc]: 5.0, 5.1, 5.2, 4.3; mean 19.6 / 4 = 4.9; deviations 0.1, 0.2,
        // 0.3, −0.6; squares sum to 0.50; s = √(0.5 / 3); G = 0.6 / s = 1.469694.
        let values = [5.0, 5.1, 5.2, 4.3];
        let (index, g) = grubbs_statistic(&values).unwrap();
        assert_eq!(index, 3);
        assert_close(g, 0.6 / (0.5_f64 / 3.0).sqrt(), 1e-9); // hand arithmetic [calc]
    }

    #[test]
    fn grubbs_statistic_is_none_without_enough_values_or_spread() {
        assert_eq!(grubbs_statistic(&[]), None);
        assert_eq!(grubbs_statistic(&[1.0, 2.0]), None);
        assert_eq!(grubbs_statistic(&[0.1, 0.1, 0.1, 0.1]), None);
        assert_eq!(grubbs_statistic(&[1.0, f64::NAN, 2.0]), None);
        assert_eq!(grubbs_statistic(&[1.0, f64::INFINITY, 2.0]), None);
    }

    #[test]
    fn dixon_critical_gives_the_published_table() {
        // Rorabacher, Anal. Chem. 1991, 63, 139–146, r10 [pub]
        let q95 = [0.970, 0.829, 0.710, 0.625, 0.568, 0.526, 0.493, 0.466];
        let q99 = [0.994, 0.926, 0.821, 0.740, 0.680, 0.634, 0.598, 0.568];
        for (n, (q95, q99)) in (3..=10).zip(q95.into_iter().zip(q99)) {
            assert_eq!(dixon_critical(n, DixonConfidence::Percent95).unwrap(), q95); // Rorabacher 1991 [pub]
            assert_eq!(dixon_critical(n, DixonConfidence::Percent99).unwrap(), q99);
            // Rorabacher 1991 [pub]
        }
    }

    #[test]
    fn dixon_critical_values_reject_at_their_stated_rate() {
        // Seeded Monte Carlo of the table's definition [calc]: with normal values, r10 exceeds
        // the 95 % value in 5 % of sets and the 99 % value in 1 %.
        for (seed, n) in [(3_u64, 3_usize), (5, 5), (8, 8)] {
            let q95 = dixon_critical(n, DixonConfidence::Percent95).unwrap();
            let q99 = dixon_critical(n, DixonConfidence::Percent99).unwrap();
            let r10 = |values: &[f64]| dixon_statistic(values).unwrap().1;
            let rates = simulated_exceedance_rates(seed, n, 200_000, r10, &[q95, q99]);
            assert_close(rates[0], 0.05, 0.005); // Rorabacher 1991 Q95 vs definition [calc]
            assert_close(rates[1], 0.01, 0.002); // Rorabacher 1991 Q99 vs definition [calc]
        }
    }

    #[test]
    fn dixon_critical_rejects_sizes_outside_the_table() {
        for n in [0, 2, 11] {
            assert!(matches!(
                dixon_critical(n, DixonConfidence::Percent95),
                Err(OutlierError::SampleSizeOutOfRange { .. })
            ));
        }
        assert_eq!(
            dixon_critical(11, DixonConfidence::Percent99)
                .unwrap_err()
                .to_string(),
            "the Dixon r10 table needs 3 to 10 values, got 11"
        );
    }

    #[test]
    fn dixon_confidence_comes_only_from_tabulated_significance() {
        assert_eq!(
            DixonConfidence::from_significance(0.05),
            Some(DixonConfidence::Percent95)
        );
        assert_eq!(
            DixonConfidence::from_significance(0.01),
            Some(DixonConfidence::Percent99)
        );
        for alpha in [0.1, 0.025, 0.050_000_1, f64::NAN] {
            assert_eq!(DixonConfidence::from_significance(alpha), None);
        }
        assert_eq!(DixonConfidence::Percent99.significance(), 0.01);
    }

    #[test]
    fn dixon_statistic_of_small_sets_matches_hand_arithmetic() {
        // hand arithmetic [calc]: sorted 10.0, 10.1, 10.1, 10.2, 10.6; high gap 0.4, low gap
        // 0.1, range 0.6; r10 = 0.4 / 0.6 = 0.666667 for the value at index 4.
        let (index, q) = dixon_statistic(&[10.0, 10.2, 10.1, 10.1, 10.6]).unwrap();
        assert_eq!(index, 4);
        assert_close(q, (10.6 - 10.2) / (10.6 - 10.0), 1e-12); // hand arithmetic [calc]
        assert_close(q, 0.666_667, 1e-6); // hand arithmetic [calc]
                                          // hand arithmetic [calc]: sorted 4.3, 5.0, 5.1, 5.2; low gap 0.7, range 0.9; r10 = 0.777778
        let (index, q) = dixon_statistic(&[5.0, 5.1, 5.2, 4.3]).unwrap();
        assert_eq!(index, 3);
        assert_close(q, 0.7 / 0.9, 1e-9); // hand arithmetic [calc]
                                          // equal gaps at both ends: the low end is named
        let (index, q) = dixon_statistic(&[3.0, 1.0, 2.0]).unwrap();
        assert_eq!((index, q), (1, 0.5));
    }

    #[test]
    fn dixon_statistic_is_none_without_enough_values_or_spread() {
        assert_eq!(dixon_statistic(&[1.0, 2.0]), None);
        assert_eq!(dixon_statistic(&[7.5, 7.5, 7.5]), None);
        assert_eq!(dixon_statistic(&[1.0, f64::NAN, 2.0]), None);
        assert_eq!(dixon_statistic(&[1.0, f64::NEG_INFINITY, 2.0]), None);
    }

    #[test]
    fn statistics_do_not_depend_on_order_location_or_scale() {
        let mut rng = StdRng::seed_from_u64(5725);
        for _ in 0..200 {
            let n = rng.gen_range(3..=12);
            let values: Vec<f64> = (0..n).map(|_| rng.sample(StandardNormal)).collect();
            let (grubbs_index, g) = grubbs_statistic(&values).unwrap();
            let (dixon_index, q) = dixon_statistic(&values).unwrap();
            assert!(g <= (n as f64 - 1.0) / (n as f64).sqrt() + 1e-12);
            assert!((0.0..=1.0).contains(&q));

            let moved: Vec<f64> = values.iter().map(|x| 100.0 + 0.25 * x).collect();
            let (moved_index, moved_g) = grubbs_statistic(&moved).unwrap();
            assert_eq!(moved_index, grubbs_index);
            assert_close(moved_g, g, 1e-9);
            let (moved_index, moved_q) = dixon_statistic(&moved).unwrap();
            assert_eq!(moved_index, dixon_index);
            assert_close(moved_q, q, 1e-9);

            let mut shuffled = values.clone();
            shuffled.shuffle(&mut rng);
            assert_close(grubbs_statistic(&shuffled).unwrap().1, g, 1e-12);
            assert_close(dixon_statistic(&shuffled).unwrap().1, q, 1e-12);
        }
    }

    fn policy_settings(repeatability_sd: Option<f64>) -> AgreementSettings {
        AgreementSettings {
            rsd_limit_percent: 0.5,
            critical_range_probability: 0.95,
            outlier_significance: 0.05,
            repeatability_sd,
        }
    }

    #[test]
    fn agreement_gathers_every_statistic_of_five_replicates() {
        let values = [10.0, 10.2, 10.1, 10.1, 10.6];
        let agreement = evaluate_agreement(&values, &policy_settings(Some(0.15))).unwrap();
        assert_eq!(agreement.n_replicates, 5);
        assert_close(agreement.mean, 10.2, 1e-12); // hand arithmetic [calc]
        assert_close(agreement.standard_deviation, (0.055_f64).sqrt(), 1e-12); // [calc]
        let rsd = agreement.rsd_percent.unwrap();
        assert_close(rsd, 100.0 * (0.055_f64).sqrt() / 10.2, 1e-9); // hand arithmetic [calc]
        assert_eq!(agreement.rsd_limit_percent, 0.5);
        assert_close(agreement.range, 0.6, 1e-12); // hand arithmetic [calc]
                                                   // CR = f(5)·σr = 3.8577 · 0.15 = 0.5787 < 0.6 [calc]
        assert_close(agreement.critical_range.unwrap(), 3.8577 * 0.15, 0.0001);
        assert_eq!(agreement.range_exceeds_critical, Some(true));

        let grubbs = agreement.grubbs.unwrap();
        assert_eq!(grubbs.suspect_index, 4);
        assert_close(grubbs.statistic, 1.705_606, 1e-6); // hand arithmetic [calc]
        assert_close(grubbs.critical, 1.715, 0.001); // ISO 5725-2:1994 Table 5 [pub]
        assert!(!grubbs.is_outlier);
        let dixon = agreement.dixon.unwrap();
        assert_eq!(dixon.suspect_index, 4);
        assert_close(dixon.statistic, 0.666_667, 1e-6); // hand arithmetic [calc]
        assert_eq!(dixon.critical, 0.710); // Rorabacher 1991 Q95 n=5 [pub]
        assert!(!dixon.is_outlier);
    }

    #[test]
    fn agreement_flags_a_clear_outlier_in_both_tests() {
        // hand arithmetic [calc]: 10.0, 10.1, 10.0, 10.1, 11.0; r10 = 0.9 / 1.0 = 0.9 > 0.710;
        // mean 10.24, deviations −0.24, −0.14, −0.24, −0.14, 0.76, squares sum to 0.732,
        // s = √0.183, G = 0.76 / √0.183 = 1.776593 > 1.715.
        let values = [10.0, 10.1, 10.0, 10.1, 11.0];
        let agreement = evaluate_agreement(&values, &policy_settings(None)).unwrap();
        let grubbs = agreement.grubbs.unwrap();
        assert_eq!(grubbs.suspect_index, 4);
        assert_close(grubbs.statistic, 0.76 / (0.183_f64).sqrt(), 1e-9); // [calc]
        assert!(grubbs.is_outlier);
        let dixon = agreement.dixon.unwrap();
        assert_eq!(dixon.suspect_index, 4);
        assert_close(dixon.statistic, 0.9, 1e-9); // hand arithmetic [calc]
        assert!(dixon.is_outlier);
        assert_eq!(agreement.critical_range, None);
        assert_eq!(agreement.range_exceeds_critical, None);
    }

    #[test]
    fn agreement_leaves_out_tests_that_do_not_apply() {
        let two = evaluate_agreement(&[10.0, 10.3], &policy_settings(Some(0.1))).unwrap();
        assert_eq!(two.grubbs, None);
        assert_eq!(two.dixon, None);
        // CR = f(2)·σr = 2.7718 · 0.1 = 0.27718 < 0.3 [calc]
        assert_eq!(two.range_exceeds_critical, Some(true));

        let eleven: Vec<f64> = (0..11).map(|i| 10.0 + 0.01 * f64::from(i)).collect();
        let many = evaluate_agreement(&eleven, &policy_settings(None)).unwrap();
        assert!(many.grubbs.is_some());
        assert_eq!(many.dixon, None);

        let mut settings = policy_settings(None);
        settings.outlier_significance = 0.10;
        let untabulated = evaluate_agreement(&[10.0, 10.1, 10.5], &settings).unwrap();
        assert!(untabulated.grubbs.is_some());
        assert_eq!(untabulated.dixon, None);
    }

    #[test]
    fn agreement_of_identical_values_has_no_suspect_and_no_nan() {
        let agreement =
            evaluate_agreement(&[0.1, 0.1, 0.1, 0.1], &policy_settings(Some(0.01))).unwrap();
        assert_eq!(agreement.standard_deviation, 0.0);
        assert_eq!(agreement.rsd_percent, Some(0.0));
        assert_eq!(agreement.range, 0.0);
        assert_eq!(agreement.range_exceeds_critical, Some(false));
        assert_eq!(agreement.grubbs, None);
        assert_eq!(agreement.dixon, None);
        let zero_mean = evaluate_agreement(&[-1.0, 1.0, 0.0], &policy_settings(None)).unwrap();
        assert_eq!(zero_mean.rsd_percent, None);
    }

    #[test]
    fn agreement_refuses_bad_values_and_settings() {
        let settings = policy_settings(None);
        assert_eq!(
            evaluate_agreement(&[10.0], &settings)
                .unwrap_err()
                .to_string(),
            "replicate agreement needs at least 2 values, got 1"
        );
        // NaN is not equal to itself, so the variant is matched and the message compared.
        let error = evaluate_agreement(&[10.0, f64::NAN], &settings).unwrap_err();
        assert!(matches!(
            error,
            OutlierError::NonFiniteValue { index: 1, .. }
        ));
        assert_eq!(
            error.to_string(),
            "replicate value 1 is NaN, not a finite number"
        );
        let bad_settings = [
            AgreementSettings {
                rsd_limit_percent: 0.0,
                ..settings
            },
            AgreementSettings {
                critical_range_probability: 95.0,
                ..settings
            },
            AgreementSettings {
                outlier_significance: 5.0,
                ..settings
            },
            AgreementSettings {
                repeatability_sd: Some(-0.1),
                ..settings
            },
        ];
        let expected = [
            "RSD limit 0 % must be a positive finite number",
            "critical range probability 95 is outside 0.5 to 0.9999",
            "significance level 5 is outside the open interval (0, 1)",
            "repeatability standard deviation -0.1 must be a positive finite number",
        ];
        for (bad, message) in bad_settings.iter().zip(expected) {
            // Two values: none of the outlier tests would run, yet the settings are checked.
            let error = evaluate_agreement(&[10.0, 10.1], bad).unwrap_err();
            assert_eq!(error.to_string(), message);
        }
    }
}
