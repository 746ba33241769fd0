//! Descriptive statistics of replicate values and Student t quantiles for coverage factors.
//!
//! Owns the mean, the sample standard deviation (divisor n − 1), the relative standard deviation,
//! and the Student t quantile used for coverage factors and outlier tests, so no module carries a
//! hand-typed t table. Finite degrees of freedom up to [`STATRS_MAX_DEGREES_OF_FREEDOM`] use
//! statrs's `StudentsT`; above that, where statrs 0.18 loses accuracy, the quantile is the
//! asymptotic expansion about the normal quantile; infinite degrees of freedom use statrs's
//! `Normal` (available without default features); quantiles asked of `StudentsT` are remembered
//! per thread, since budgets ask for the same few again and again. This module never rounds for
//! reporting, never reads records and never prints.

use std::cell::RefCell;
use std::collections::HashMap;
use std::fmt;

use statrs::distribution::{ContinuousCDF, Normal, StudentsT};

/// Largest number of degrees of freedom for which [`student_t_quantile`] asks statrs's
/// `StudentsT::inverse_cdf`. Measured here against the expansion used above it: the two agree to
/// about 1e-12 from 300 to 1000 degrees of freedom, while statrs 0.18 drifts by 1e-8 at 3000, by
/// 7e-6 at 10⁵, returns values below the normal quantile at 10⁶ and does not return at 10⁸.
pub const STATRS_MAX_DEGREES_OF_FREEDOM: f64 = 1000.0;

/// Why a statistic could not be computed.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum StatsError {
    /// A cumulative probability outside the open interval (0, 1), or not a number.
    ProbabilityOutOfRange {
        /// The probability given.
        probability: f64,
    },
    /// Degrees of freedom that are not greater than zero (or not a number).
    InvalidDegreesOfFreedom {
        /// The degrees of freedom given.
        degrees_of_freedom: f64,
    },
}

impl fmt::Display for StatsError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            StatsError::ProbabilityOutOfRange { probability } => write!(
                f,
                "probability {probability} is outside the open interval (0, 1)"
            ),
            StatsError::InvalidDegreesOfFreedom { degrees_of_freedom } => write!(
                f,
                "degrees of freedom {degrees_of_freedom} must be greater than 0"
            ),
        }
    }
}

impl std::error::Error for StatsError {}

/// Arithmetic mean (computed about the first value); `None` when there are no values or any value is not finite.
pub fn mean(values: &[f64]) -> Option<f64> {
    if values.is_empty() || values.iter().any(|value| !value.is_finite()) {
        return None;
    }
    // Shifted by the first value: identical replicates give exactly that value, and
    // replicates agreeing to many digits lose fewer of them to rounding.
    let shift = values[0];
    let shifted_sum: f64 = values.iter().map(|value| value - shift).sum();
    Some(shift + shifted_sum / values.len() as f64)
}

/// Sample standard deviation with divisor n − 1 (two passes: mean first, then squared
/// deviations); `None` for fewer than two values or any value that is not finite.
pub fn sample_standard_deviation(values: &[f64]) -> Option<f64> {
    if values.len() < 2 {
        return None;
    }
    let center = mean(values)?;
    let sum_of_squares: f64 = values.iter().map(|value| (value - center).powi(2)).sum();
    Some((sum_of_squares / (values.len() - 1) as f64).sqrt())
}

/// Relative standard deviation in percent, `100 · s / |mean|`; `None` for fewer than two values,
/// a value that is not finite, or a mean of zero.
pub fn relative_standard_deviation_percent(values: &[f64]) -> Option<f64> {
    let standard_deviation = sample_standard_deviation(values)?;
    let center = mean(values)?;
    if center == 0.0 {
        return None;
    }
    Some(100.0 * standard_deviation / center.abs())
}

/// The `probability` quantile (lower tail, e.g. 0.975 → 2.093 for 19 degrees of freedom) of
/// Student's t distribution. `f64::INFINITY` degrees of freedom give the standard normal quantile
/// (statrs `Normal`); finite values up to [`STATRS_MAX_DEGREES_OF_FREEDOM`] use statrs
/// `StudentsT`; larger finite values use [`large_dof_t_quantile`].
pub fn student_t_quantile(probability: f64, degrees_of_freedom: f64) -> Result<f64, StatsError> {
    if !(probability > 0.0 && probability < 1.0) {
        return Err(StatsError::ProbabilityOutOfRange { probability });
    }
    if degrees_of_freedom.is_nan() || degrees_of_freedom <= 0.0 {
        return Err(StatsError::InvalidDegreesOfFreedom { degrees_of_freedom });
    }
    if degrees_of_freedom == f64::INFINITY {
        return Ok(standard_normal_quantile(probability));
    }
    if degrees_of_freedom > STATRS_MAX_DEGREES_OF_FREEDOM {
        return Ok(large_dof_t_quantile(probability, degrees_of_freedom));
    }
    let key = (probability.to_bits(), degrees_of_freedom.to_bits());
    if let Some(known) = KNOWN_QUANTILES.with(|known| known.borrow().get(&key).copied()) {
        return Ok(known);
    }
    let distribution = StudentsT::new(0.0, 1.0, degrees_of_freedom)
        .map_err(|_| StatsError::InvalidDegreesOfFreedom { degrees_of_freedom })?;
    let quantile = distribution.inverse_cdf(probability);
    KNOWN_QUANTILES.with(|known| {
        let mut known = known.borrow_mut();
        if known.len() >= MAX_KNOWN_QUANTILES {
            known.clear();
        }
        known.insert(key, quantile);
    });
    Ok(quantile)
}

/// Most Student t quantiles remembered per thread.
const MAX_KNOWN_QUANTILES: usize = 4096;

thread_local! {
    /// Student t quantiles already asked of statrs on this thread, by the exact bits of
    /// (probability, degrees of freedom). statrs inverts the regularized incomplete beta
    /// function iteratively (microseconds per call), while budgets ask again and again for the
    /// same few points: Welch–Satterthwaite degrees of freedom are whole numbers. Remembering
    /// a pure function's result changes no value.
    static KNOWN_QUANTILES: RefCell<HashMap<(u64, u64), f64>> = RefCell::new(HashMap::new());
}

/// Two-sided coverage factor `k = t_{(1+p)/2}(ν)` for a coverage probability `p` (e.g. 0.95)
/// and `ν` degrees of freedom, `None` meaning infinitely many (GUM G.3.4, G.6.4).
pub fn student_t_coverage_factor(
    coverage_probability: f64,
    degrees_of_freedom: Option<f64>,
) -> Result<f64, StatsError> {
    if !(coverage_probability > 0.0 && coverage_probability < 1.0) {
        return Err(StatsError::ProbabilityOutOfRange {
            probability: coverage_probability,
        });
    }
    let upper_tail_point = (1.0 + coverage_probability) / 2.0;
    student_t_quantile(
        upper_tail_point,
        degrees_of_freedom.unwrap_or(f64::INFINITY),
    )
}

/// Standard normal quantile from statrs `Normal` (the caller has checked 0 < p < 1).
fn standard_normal_quantile(probability: f64) -> f64 {
    let normal = Normal::new(0.0, 1.0).expect("mean 0 and standard deviation 1 are valid");
    normal.inverse_cdf(probability)
}

/// Student t quantile for many degrees of freedom: the asymptotic expansion about the normal
/// quantile z, `t = z + g1/ν + g2/ν² + g3/ν³ + g4/ν⁴` (Abramowitz & Stegun 26.7.5). Its first
/// omitted term is of order ν⁻⁵, below 1e-12 for ν > 1000 and ordinary probabilities; the tests
/// check it against statrs where statrs is accurate.
pub fn large_dof_t_quantile(probability: f64, degrees_of_freedom: f64) -> f64 {
    let z = standard_normal_quantile(probability);
    let z2 = z * z;
    let g1 = z * (z2 + 1.0) / 4.0;
    let g2 = z * ((5.0 * z2 + 16.0) * z2 + 3.0) / 96.0;
    let g3 = z * (((3.0 * z2 + 19.0) * z2 + 17.0) * z2 - 15.0) / 384.0;
    let g4 = z * ((((79.0 * z2 + 776.0) * z2 + 1482.0) * z2 - 1920.0) * z2 - 945.0) / 92160.0;
    let v = degrees_of_freedom;
    z + (g1 + (g2 + (g3 + g4 / v) / v) / v) / v
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Textbook replicate set worked by hand: 10.1, 10.3, 9.9, 10.0, 10.2.
    const REPLICATES: [f64; 5] = [10.1, 10.3, 9.9, 10.0, 10.2];

    fn assert_close(actual: f64, expected: f64, tolerance: f64) {
        assert!(
            (actual - expected).abs() <= tolerance,
            "{actual} differs from {expected} by more than {tolerance}"
        );
    }

    #[test]
    fn a_remembered_quantile_is_exactly_what_statrs_gives() {
        let direct = |p: f64, dof: f64| StudentsT::new(0.0, 1.0, dof).unwrap().inverse_cdf(p);
        for round in 0..2 {
            for dof in [1.0, 2.0, 4.0, 17.0, 7.5, 999.0] {
                let quantile = student_t_quantile(0.975, dof).unwrap();
                assert_eq!(
                    quantile.to_bits(),
                    direct(0.975, dof).to_bits(),
                    "{dof} ({round})"
                );
            }
        }
        // More points than are remembered: the memory starts over, values stay exact.
        for i in 0..(MAX_KNOWN_QUANTILES + 10) {
            let dof = 1.0 + i as f64 / 8.0;
            if i % 997 == 0 {
                assert_eq!(student_t_quantile(0.9, dof).unwrap(), direct(0.9, dof));
            } else {
                student_t_quantile(0.9, dof).unwrap();
            }
        }
        assert!(KNOWN_QUANTILES.with(|known| known.borrow().len()) <= MAX_KNOWN_QUANTILES);
        assert_eq!(student_t_quantile(0.975, 4.0).unwrap(), direct(0.975, 4.0));
    }

    #[test]
    fn mean_of_small_set_matches_hand_arithmetic() {
        // hand arithmetic [calc]: (10.1 + 10.3 + 9.9 + 10.0 + 10.2) / 5 = 50.5 / 5 = 10.1
        let by_hand = (10.1 + 10.3 + 9.9 + 10.0 + 10.2) / 5.0;
        assert_close(mean(&REPLICATES).unwrap(), by_hand, 1e-12);
        assert_close(mean(&REPLICATES).unwrap(), 10.1, 1e-12);
    }

    #[test]
    fn standard_deviation_uses_n_minus_one() {
        // hand arithmetic [calc]: deviations 0, 0.2, -0.2, -0.1, 0.1; squares sum to 0.10;
        // s = sqrt(0.10 / 4) = sqrt(0.025) = 0.158113883...
        let squares = 0.0_f64 + 0.04 + 0.04 + 0.01 + 0.01;
        let by_hand = (squares / 4.0).sqrt();
        let s = sample_standard_deviation(&REPLICATES).unwrap();
        assert_close(s, by_hand, 1e-12);
        assert_close(s, 0.158_113_883_008_419, 1e-12);
    }

    #[test]
    fn relative_standard_deviation_is_percent_of_mean() {
        // hand arithmetic [calc]: 100 · 0.158113883 / 10.1 = 1.565484...
        let by_hand = 100.0 * (0.025_f64).sqrt() / 10.1;
        let rsd = relative_standard_deviation_percent(&REPLICATES).unwrap();
        assert_close(rsd, by_hand, 1e-10);
        assert_close(rsd, 1.565_484, 1e-6);
    }

    #[test]
    fn too_few_values_give_none() {
        assert_eq!(mean(&[]), None);
        assert_eq!(sample_standard_deviation(&[]), None);
        assert_eq!(sample_standard_deviation(&[10.1]), None);
        assert_eq!(relative_standard_deviation_percent(&[10.1]), None);
    }

    #[test]
    fn non_finite_values_and_zero_mean_give_none() {
        assert_eq!(mean(&[1.0, f64::NAN]), None);
        assert_eq!(sample_standard_deviation(&[1.0, f64::INFINITY]), None);
        assert_eq!(relative_standard_deviation_percent(&[-1.0, 1.0]), None);
    }

    #[test]
    fn identical_values_have_zero_spread() {
        assert_eq!(sample_standard_deviation(&[0.1, 0.1, 0.1]), Some(0.0));
        assert_eq!(relative_standard_deviation_percent(&[0.1, 0.1]), Some(0.0));
    }

    #[test]
    fn t_quantile_for_nineteen_degrees_of_freedom_matches_table() {
        // Student t table, t_0.975(19) = 2.093 [pub tables, from memory: mem] — hard check only at
        // the table's three decimals, backed by the independent integral below [calc].
        let t = student_t_quantile(0.975, 19.0).unwrap();
        assert_close(t, 2.093, 0.0005);
        // [calc] integrate the t density with 19 d.f. from 0 to t by Simpson's rule: 0.475
        let upper_half_mass = integrate_t_density_19(t);
        assert_close(upper_half_mass, 0.475, 1e-9);
    }

    #[test]
    fn t_quantile_for_infinite_degrees_of_freedom_is_normal_quantile() {
        // Student t table, t_0.975(∞) ≈ 1.960 [pub tables, from memory: mem] — checked at the
        // table's three decimals, backed by the normal integral below [calc].
        let z = student_t_quantile(0.975, f64::INFINITY).unwrap();
        assert_close(z, 1.960, 0.0005);
        // [calc] integrate the standard normal density from 0 to z: 0.475
        let upper_half_mass = simpson(
            |x| (-x * x / 2.0).exp() / (2.0 * std::f64::consts::PI).sqrt(),
            0.0,
            z,
        );
        assert_close(upper_half_mass, 0.475, 1e-10);
    }

    #[test]
    fn coverage_factor_for_95_percent_uses_upper_0975_point() {
        let k = student_t_coverage_factor(0.95, Some(19.0)).unwrap();
        assert_eq!(k, student_t_quantile(0.975, 19.0).unwrap());
        let k_normal = student_t_coverage_factor(0.95, None).unwrap();
        assert_eq!(k_normal, student_t_quantile(0.975, f64::INFINITY).unwrap());
    }

    #[test]
    fn large_dof_expansion_agrees_with_statrs_where_statrs_is_accurate() {
        for probability in [0.6, 0.9, 0.975, 0.995, 0.9995] {
            for dof in [300.0, 500.0, STATRS_MAX_DEGREES_OF_FREEDOM] {
                let statrs_value = StudentsT::new(0.0, 1.0, dof)
                    .unwrap()
                    .inverse_cdf(probability);
                let expansion = large_dof_t_quantile(probability, dof);
                assert_close(expansion, statrs_value, 1e-10);
            }
        }
    }

    #[test]
    fn t_quantile_decreases_toward_normal_for_many_degrees_of_freedom() {
        let z = student_t_quantile(0.975, f64::INFINITY).unwrap();
        let mut previous = student_t_quantile(0.975, 100.0).unwrap();
        for dof in [1e3, 1e3 + 1.0, 1e4, 1e5, 1e6, 1e8, 1e12, 1e300] {
            let t = student_t_quantile(0.975, dof).unwrap();
            assert!(t < previous, "t({dof}) = {t} is not below {previous}");
            assert!(t >= z, "t({dof}) = {t} is below the normal quantile {z}");
            previous = t;
        }
    }

    #[test]
    fn lower_tail_quantile_is_negative_of_upper() {
        let upper = student_t_quantile(0.975, 4.0).unwrap();
        let lower = student_t_quantile(0.025, 4.0).unwrap();
        assert_close(lower, -upper, 1e-9);
        assert_close(student_t_quantile(0.5, 4.0).unwrap(), 0.0, 1e-12);
    }

    #[test]
    fn rejects_probability_outside_open_unit_interval() {
        for probability in [0.0, 1.0, -0.1, 1.5, f64::NAN] {
            let error = student_t_quantile(probability, 10.0).unwrap_err();
            assert!(matches!(error, StatsError::ProbabilityOutOfRange { .. }));
        }
        assert_eq!(
            student_t_quantile(1.0, 10.0).unwrap_err().to_string(),
            "probability 1 is outside the open interval (0, 1)"
        );
        assert!(matches!(
            student_t_coverage_factor(1.0, None),
            Err(StatsError::ProbabilityOutOfRange { probability }) if probability == 1.0
        ));
    }

    #[test]
    fn rejects_degrees_of_freedom_not_above_zero() {
        for dof in [0.0, -3.0, f64::NAN, f64::NEG_INFINITY] {
            let error = student_t_quantile(0.975, dof).unwrap_err();
            assert!(matches!(error, StatsError::InvalidDegreesOfFreedom { .. }));
        }
        assert_eq!(
            student_t_quantile(0.975, 0.0).unwrap_err().to_string(),
            "degrees of freedom 0 must be greater than 0"
        );
    }

    /// Composite Simpson's rule with 20 000 panels.
    fn simpson(f: impl Fn(f64) -> f64, a: f64, b: f64) -> f64 {
        let panels = 20_000;
        let h = (b - a) / panels as f64;
        let mut sum = f(a) + f(b);
        for i in 1..panels {
            let weight = if i % 2 == 1 { 4.0 } else { 2.0 };
            sum += weight * f(a + i as f64 * h);
        }
        sum * h / 3.0
    }

    /// ∫₀ᵗ of the Student t density with 19 degrees of freedom, written out by hand:
    /// Γ(10) / (√(19π) Γ(9.5)) · (1 + x²/19)^(−10), with Γ(10) = 9! and
    /// Γ(9.5) = 8.5 · 7.5 · … · 0.5 · √π.
    fn integrate_t_density_19(t: f64) -> f64 {
        let pi = std::f64::consts::PI;
        let gamma_10: f64 = (1..=9).map(f64::from).product();
        let gamma_9_5: f64 = (0..9).map(|i| 0.5 + f64::from(i)).product::<f64>() * pi.sqrt();
        let constant = gamma_10 / ((19.0 * pi).sqrt() * gamma_9_5);
        simpson(|x| constant * (1.0 + x * x / 19.0).powi(-10), 0.0, t)
    }
}
