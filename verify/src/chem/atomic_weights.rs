//! Atomic-weight tables: the standard atomic weights molar masses are computed from, each value
//! with the ± it is tabulated with.
//!
//! Owns the built-in tables (CIAAW 2021, the default, and the values the EURACHEM/CITAC QUAM
//! 2012 example A2 used) and their names, so a calculation can record which table it used. It
//! never computes molar masses (that is `molar_mass`) and never changes a table at run time:
//! a new table is a new name.
//!
//! A tabulated ± is treated as the half-width of a rectangular distribution, so the standard
//! uncertainty of one atomic weight is `half_width / √3` (van der Veen et al., Pure Appl. Chem.
//! 2021, 93, 629; the convention of QUAM example A2).

/// One element's atomic weight as tabulated.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct AtomicWeight {
    /// Element symbol, such as `"Na"`.
    pub symbol: &'static str,
    /// Atomic weight (relative atomic mass; numerically g/mol).
    pub value: f64,
    /// The ± of the tabulated value, read as the half-width of a rectangular distribution.
    pub half_width: f64,
}

impl AtomicWeight {
    /// Standard uncertainty of the value: `half_width / √3`.
    pub fn standard_uncertainty(&self) -> f64 {
        self.half_width / 3_f64.sqrt()
    }
}

/// A named, fixed set of atomic weights.
#[derive(Debug)]
pub struct AtomicWeightTable {
    /// Short stable name recorded with every molar mass computed from the table, such as
    /// `"ciaaw-2021"`.
    pub name: &'static str,
    /// Where the values come from.
    pub source: &'static str,
    entries: &'static [AtomicWeight],
}

impl AtomicWeightTable {
    /// The atomic weight of one element, if the table holds it.
    pub fn get(&self, symbol: &str) -> Option<AtomicWeight> {
        self.entries.iter().find(|w| w.symbol == symbol).copied()
    }

    /// Every entry of the table.
    pub fn entries(&self) -> &'static [AtomicWeight] {
        self.entries
    }
}

const fn weight(symbol: &'static str, value: f64, half_width: f64) -> AtomicWeight {
    AtomicWeight {
        symbol,
        value,
        half_width,
    }
}

static CIAAW_2021_ENTRIES: [AtomicWeight; 34] = [
    // CIAAW 2021 standard atomic weights abridged to five significant figures, with their ±,
    // as given in REFERENCES.md section 6 (Prohaska et al., Pure Appl. Chem. 2022, 94, 573–600)
    // [pub]. Interval elements (H, C, N, O, Mg, S, Cl) take the abridged value and its ±.
    weight("H", 1.0080, 0.0002),
    weight("C", 12.011, 0.002),
    weight("N", 14.007, 0.001),
    weight("O", 15.999, 0.001),
    weight("Na", 22.990, 0.001),
    weight("Mg", 24.305, 0.002),
    weight("S", 32.06, 0.02),
    weight("Cl", 35.45, 0.01),
    weight("K", 39.098, 0.001),
    weight("Ca", 40.078, 0.004),
    weight("Mn", 54.938, 0.001),
    weight("Fe", 55.845, 0.002),
    weight("I", 126.90, 0.01),
    // From memory, not checked against the publication here: abridged five-figure CIAAW values
    // as remembered. Never use them in a hard test.
    weight("Li", 6.94, 0.06),
    weight("B", 10.81, 0.02),
    weight("F", 18.998, 0.001),
    weight("Al", 26.982, 0.001),
    weight("Si", 28.085, 0.001),
    weight("P", 30.974, 0.001),
    weight("Cr", 51.996, 0.001),
    weight("Co", 58.933, 0.001),
    weight("Ni", 58.693, 0.001),
    weight("Cu", 63.546, 0.003),
    weight("Zn", 65.38, 0.02),
    weight("As", 74.922, 0.001),
    weight("Br", 79.904, 0.003),
    weight("Sr", 87.62, 0.01),
    weight("Ag", 107.87, 0.01),
    weight("Sn", 118.71, 0.01),
    weight("Ba", 137.33, 0.01),
    weight("Ce", 140.12, 0.01),
    weight("Hg", 200.59, 0.01),
    weight("Pb", 207.2, 1.1),
    weight("Bi", 208.98, 0.01),
];

static CIAAW_2021: AtomicWeightTable = AtomicWeightTable {
    name: "ciaaw-2021",
    source: "CIAAW standard atomic weights 2021, abridged to five significant figures \
             (Prohaska et al., Pure Appl. Chem. 2022, 94, 573-600)",
    entries: &CIAAW_2021_ENTRIES,
};

static QUAM_2012_ENTRIES: [AtomicWeight; 4] = [
    // The atomic weights and ± of EURACHEM/CITAC QUAM 3rd ed. (2012) example A2, from memory of
    // the example [mem]; they reproduce its M(KHC8H4O4) = 204.2212 g/mol, u = 0.0038 g/mol
    // [pub], which the molar-mass tests check.
    weight("C", 12.0107, 0.0008),
    weight("H", 1.00794, 0.00007),
    weight("O", 15.9994, 0.0003),
    weight("K", 39.0983, 0.0001),
];

static QUAM_2012: AtomicWeightTable = AtomicWeightTable {
    name: "quam-2012",
    source: "atomic weights used by EURACHEM/CITAC QUAM 3rd ed. (2012) example A2 \
             (C, H, O, K only; for reproducing that example)",
    entries: &QUAM_2012_ENTRIES,
};

/// The CIAAW 2021 standard atomic weights, abridged to five significant figures: the default
/// table.
pub fn ciaaw_2021() -> &'static AtomicWeightTable {
    &CIAAW_2021
}

/// Only the atomic weights EURACHEM/CITAC QUAM 2012 example A2 used (C, H, O, K), for
/// reproducing that example; not for lab results.
pub fn quam_2012() -> &'static AtomicWeightTable {
    &QUAM_2012
}

/// Every built-in table.
pub fn tables() -> [&'static AtomicWeightTable; 2] {
    [ciaaw_2021(), quam_2012()]
}

/// The built-in table with this name (as recorded in [`AtomicWeightTable::name`]).
pub fn table_named(name: &str) -> Option<&'static AtomicWeightTable> {
    tables().into_iter().find(|table| table.name == name)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::chem::formula::is_element_symbol;

    #[test]
    fn holds_the_checked_ciaaw_2021_values() {
        // REFERENCES.md section 6: CIAAW 2021 abridged (Prohaska et al. 2022) [pub].
        let expected = [
            ("H", 1.0080, 0.0002),
            ("C", 12.011, 0.002),
            ("N", 14.007, 0.001),
            ("O", 15.999, 0.001),
            ("Na", 22.990, 0.001),
            ("Mg", 24.305, 0.002),
            ("S", 32.06, 0.02),
            ("Cl", 35.45, 0.01),
            ("K", 39.098, 0.001),
            ("Ca", 40.078, 0.004),
            ("Mn", 54.938, 0.001),
            ("Fe", 55.845, 0.002),
            ("I", 126.90, 0.01),
        ];
        for (symbol, value, half_width) in expected {
            let found = ciaaw_2021().get(symbol).expect("element in table");
            assert_eq!(found.value, value, "{symbol}");
            assert_eq!(found.half_width, half_width, "{symbol}");
        }
    }

    #[test]
    fn holds_every_element_the_lab_needs() {
        for symbol in [
            "H", "B", "C", "N", "O", "F", "Na", "Mg", "Al", "Si", "P", "S", "Cl", "K", "Ca", "Mn",
            "Fe", "Cu", "Zn", "Br", "Ag", "I", "Ba",
        ] {
            assert!(ciaaw_2021().get(symbol).is_some(), "{symbol} missing");
        }
    }

    #[test]
    fn every_entry_is_a_real_element_listed_once_with_positive_values() {
        for table in tables() {
            let mut seen = Vec::new();
            for entry in table.entries() {
                assert!(is_element_symbol(entry.symbol), "{}", entry.symbol);
                assert!(!seen.contains(&entry.symbol), "{} twice", entry.symbol);
                assert!(entry.value > 0.0 && entry.half_width > 0.0);
                assert!(entry.half_width < entry.value / 100.0);
                seen.push(entry.symbol);
            }
        }
    }

    #[test]
    fn quam_table_holds_only_the_example_elements() {
        let mut symbols: Vec<_> = quam_2012().entries().iter().map(|w| w.symbol).collect();
        symbols.sort_unstable();
        assert_eq!(symbols, ["C", "H", "K", "O"]);
        assert!(quam_2012().get("Na").is_none());
    }

    #[test]
    fn standard_uncertainty_is_half_width_over_root_three() {
        // QUAM 2012 A2 treats the IUPAC ± as rectangular: u(C) = 0.0008/√3 ≈ 0.00046 [calc].
        let carbon = quam_2012().get("C").unwrap();
        assert!((carbon.standard_uncertainty() - 0.000_461_88).abs() < 1e-8);
    }

    #[test]
    fn finds_tables_by_name() {
        assert_eq!(table_named("ciaaw-2021").unwrap().name, "ciaaw-2021");
        assert_eq!(table_named("quam-2012").unwrap().name, "quam-2012");
        assert!(table_named("ciaaw-2019").is_none());
    }
}
