//! A standardization triplicate and an assay triplicate entered through the real `assize`
//! binary (the invented batch in samples/lab/), recomputed by `assize recompute --json`, and
//! checked against the same numbers worked out here by plain arithmetic.
//!
//! Formulas: DESIGN.md section 5. Atomic weights: CIAAW 2021 abridged values as listed in
//! REFERENCES.md section 6 [pub]. Stoichiometry 2 MnO4- : 5 C2O4^2- and 2 MnO4- : 5 H2O2
//! (REFERENCES.md section 7, USP) [pub].

mod common;

use common::{assize, lab_with_the_sample_week};
use std::path::Path;

fn number(value: &serde_json::Value) -> f64 {
    match value {
        serde_json::Value::String(s) => s.parse().expect("decimal text"),
        other => other.as_f64().expect("a number"),
    }
}

/// Net masses by difference of the raw readings in samples/lab/permanganate-week-48.toml.
const STANDARD: [(f64, f64); 3] = [
    (18.4127 - 18.1616, 112.5321 - 75.1201),
    (18.1616 - 17.9129, 75.1201 - 38.0350),
    (17.9129 - 17.6599, 114.0877 - 76.3859),
];
const ASSAY: [(f64, f64); 3] = [
    (9.8842 - 9.7340, 110.9410 - 84.6100),
    (9.7340 - 9.5843, 84.6100 - 58.3692),
    (9.5843 - 9.4332, 111.7725 - 85.2504),
];

#[test]
fn a_run_entered_through_the_cli_recomputes_to_plain_arithmetic() {
    let dir = tempfile::tempdir().expect("temp dir");
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let d = dir.path();
    lab_with_the_sample_week(d, root);
    let json = assize(
        d,
        &[
            "--json",
            "--ledger",
            "lab.ledger",
            "recompute",
            "AS-HP-26-0871-1",
        ],
    );
    let recomputed: serde_json::Value = serde_json::from_str(&json).expect("recompute --json");

    // Standardization: c = m·P/M(Na2C2O4)·(2/5)/(m_T/1000), mol/kg.
    let m_oxalate = 2.0 * 22.990 + 2.0 * 12.011 + 4.0 * 15.999;
    let purity = 0.99965;
    let c: Vec<f64> = STANDARD
        .iter()
        .map(|(m, t)| m * purity / m_oxalate * 0.4 / (t / 1000.0))
        .collect();
    let c_mean = c.iter().sum::<f64>() / 3.0;
    let std = &recomputed["standardization"];
    assert_eq!(std["unit"], "mol/kg");
    for (row, expected) in std["replicates"]
        .as_array()
        .expect("replicates")
        .iter()
        .zip(&c)
    {
        assert!(
            (number(&row["value"]) - expected).abs() < 1e-12,
            "{row} vs {expected}"
        );
    }
    assert!((number(&std["mean"]) - c_mean).abs() < 1e-12);

    // Assay: w = c·(m_T/1000)·(5/2)·M(H2O2)/m_S·100, %.
    let m_peroxide = 2.0 * 1.0080 + 2.0 * 15.999;
    let w: Vec<f64> = ASSAY
        .iter()
        .map(|(m, t)| c_mean * (t / 1000.0) * 2.5 * m_peroxide / m * 100.0)
        .collect();
    let w_mean = w.iter().sum::<f64>() / 3.0;
    let out = &recomputed["outcome"];
    assert_eq!(out["unit"], "%");
    for (row, expected) in out["replicates"]
        .as_array()
        .expect("replicates")
        .iter()
        .zip(&w)
    {
        assert!(
            (number(&row["value"]) - expected).abs() < 1e-9,
            "{row} vs {expected}"
        );
    }
    assert!((number(&out["mean"]) - w_mean).abs() < 1e-9);
    let sd = (w.iter().map(|v| (v - w_mean).powi(2)).sum::<f64>() / 2.0).sqrt();
    assert!((number(&out["standard_deviation"]) - sd).abs() < 1e-9);

    // GUM 7.2.6 presentation: U to two significant digits, the value to the same place.
    let u = number(&out["budget"]["expanded_uncertainty"]);
    assert!(u > 0.0 && u < 1.0, "U = {u}");
    let places = 1 - u.log10().floor() as i32;
    let scale = 10f64.powi(places);
    let reported = &out["reported"];
    assert!((number(&reported["value"]) - (w_mean * scale).round() / scale).abs() < 1e-9);
    assert!((number(&reported["expanded_uncertainty"]) - (u * scale).round() / scale).abs() < 1e-9);
    // One balance weighed every titrant: its sensitivity cancels (REFERENCES.md 7, [cp]).
    let cancelled = out["budget"]["cancelled"]
        .as_array()
        .expect("cancelled list");
    assert!(cancelled
        .iter()
        .any(|g| g.as_str().is_some_and(|s| s.contains("B2-AX"))));
}
