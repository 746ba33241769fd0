//! Findings about how readings were taken (`CAP-*`): a keyed reading that differs from the
//! instrument's captured reading of the same weighing, a keyed reading where the method expects
//! capture, a reading without the stability indicator, and a portion outside "about" the
//! method's target mass (USP General Notices 8.20: within 10 %).
//!
//! A keyed weighing and its captured twin (same run, replicate and portion) are compared
//! reading by reading; each reading that says another value or unit is named with its likely
//! keying slip ([`crate::slips::classify`]), and a twin on another balance is named a wrong
//! balance. A difference no digit slip explains becomes a wrong balance when another captured
//! weighing of the same run shows exactly the keyed reading on another balance within the
//! policy's `records.capture_pairing_seconds`; captured readings of other runs are not looked
//! at, so the judgement of a run depends on its own entries only. A captured weighing that
//! repeats its keyed twin is not judged again for its portion's size, nor for an unstable
//! reading the keyed twin already shows.

use super::{entry_ref, repeats_keyed_twin, setting, weighings_of, Evidence, RunView};
use crate::catalog::{CatalogEntry, LabBody};
use crate::documents::DEFAULT_CAPTURE_PAIRING_SECONDS;
use crate::findings::{Code, Finding};
use crate::records::{Portion, RunKind, Source, Weighing};
use crate::slips::{classify, differ_in_value, other_balances_within, Slip, TimedReading};
use assize_ledger::EntryHash;
use rust_decimal::Decimal;
use std::borrow::Cow;

/// Pushes the capture findings.
pub fn check(evidence: &Evidence<'_>, out: &mut Vec<Finding>) {
    for run in evidence.judged_runs() {
        let weighings = weighings_of(evidence.catalog, run);
        keyed_against_captured(evidence, run, &weighings, out);
        let capture_expected = run.method().is_some_and(|m| m.readings_captured);
        for (entry, w) in &weighings {
            if capture_expected && w.source == Source::Keyed {
                let twin = weighings.iter().any(|(_, other)| {
                    other.source == Source::Captured
                        && other.replicate == w.replicate
                        && other.portion == w.portion
                });
                if !twin {
                    out.push(
                        run.finding(Finding::new(
                            Code::KeyedWhereCaptureExpected,
                            format!(
                                "entry {} (replicate {}) was keyed by hand; {} expects readings captured from the balance",
                                entry.seq, w.replicate, run.method_label()
                            ),
                            format!("{}: readings_captured = true", run.method_label()),
                        ))
                        .involving([entry_ref(entry)]),
                    );
                }
            }
            let repeats = repeats_keyed_twin(w, &weighings);
            // An unstable twin of a weighing keyed as unstable too is flagged on the keyed one.
            let flagged_on_keyed_twin = repeats && twin_also_unstable(w, &weighings);
            if !(w.stable || flagged_on_keyed_twin) {
                out.push(
                    run.finding(Finding::new(
                        Code::UnstableReading,
                        format!(
                            "entry {} (replicate {}) was read without the stability indicator",
                            entry.seq, w.replicate
                        ),
                        "USP <41>: read a stable display",
                    ))
                    .involving([entry_ref(entry)]),
                );
            }
            if !repeats {
                portion_target(run, entry, w, out);
            }
        }
    }
}

/// Whether a keyed twin of a captured weighing was keyed as unstable too (CAP-03 then names
/// the keyed one only).
fn twin_also_unstable(
    captured: &Weighing,
    weighings: &[(&CatalogEntry, Cow<'_, Weighing>)],
) -> bool {
    weighings.iter().any(|(_, w)| {
        w.source == Source::Keyed
            && w.replicate == captured.replicate
            && w.portion == captured.portion
            && !w.stable
    })
}

/// Keyed and captured weighings of the same replicate and portion must show the same readings
/// on the same balance; each difference is named with its likely keying slip.
fn keyed_against_captured(
    evidence: &Evidence<'_>,
    run: &RunView<'_>,
    weighings: &[(&CatalogEntry, Cow<'_, Weighing>)],
    out: &mut Vec<Finding>,
) {
    let captured: Vec<(&CatalogEntry, &Weighing)> = weighings
        .iter()
        .filter(|(_, w)| w.source == Source::Captured)
        .map(|(entry, w)| (*entry, w.as_ref()))
        .collect();
    if captured.is_empty() {
        return;
    }
    let tolerance_seconds = run.policy().map_or(DEFAULT_CAPTURE_PAIRING_SECONDS, |p| {
        p.records.capture_pairing_seconds
    });
    let twins = Twins {
        evidence,
        captured: &captured,
        tolerance_seconds,
    };
    for (keyed_entry, keyed) in weighings.iter().filter(|(_, w)| w.source == Source::Keyed) {
        for (captured_entry, twin) in captured
            .iter()
            .filter(|(_, w)| w.replicate == keyed.replicate && w.portion == keyed.portion)
        {
            let differences = twins.differences(keyed, captured_entry, twin);
            if differences.is_empty() {
                continue;
            }
            out.push(
                run.finding(Finding::new(
                    Code::KeyedDiffersFromCaptured,
                    format!(
                        "replicate {} of run {}, {} weighing (entry {}, captured entry {}): {}",
                        keyed.replicate,
                        run.id(),
                        keyed.portion.words(),
                        keyed_entry.seq,
                        captured_entry.seq,
                        differences.join("; ")
                    ),
                    "the captured instrument reading is the original record",
                ))
                .involving([entry_ref(keyed_entry), entry_ref(captured_entry)]),
            );
        }
    }
}

/// The captured weighings of one run, to compare keyed weighings with.
struct Twins<'a> {
    evidence: &'a Evidence<'a>,
    captured: &'a [(&'a CatalogEntry, &'a Weighing)],
    /// The run policy's `records.capture_pairing_seconds`.
    tolerance_seconds: u32,
}

impl Twins<'_> {
    /// Each way a keyed weighing differs from its captured twin, in words: the balance, then
    /// each reading with its likely slip.
    fn differences(
        &self,
        keyed: &Weighing,
        twin_entry: &CatalogEntry,
        twin: &Weighing,
    ) -> Vec<String> {
        let keyed_balance = self.balance_id(&keyed.balance);
        let mut differences = Vec::new();
        if keyed.balance != twin.balance {
            differences.push(format!(
                "keyed on balance {keyed_balance}, captured on balance {}: wrong balance",
                self.balance_id(&twin.balance)
            ));
        }
        for (label, k, k_at, c) in [
            ("first", &keyed.first, keyed.first_at, &twin.first),
            ("second", &keyed.second, keyed.second_at, &twin.second),
        ] {
            if !differ_in_value(k, c) {
                continue;
            }
            let keyed_reading = TimedReading {
                balance_id: keyed_balance.clone(),
                at: k_at,
                reading: k.clone(),
            };
            let slip = classify(k, c).expect("readings that differ in value have a slip");
            let slip = self.or_wrong_balance(slip, &keyed_reading, twin_entry);
            differences.push(format!(
                "{label} reading keyed {k}, captured {c}: {}",
                slip.describe(k.unit.dimension())
            ));
        }
        differences
    }

    /// An unexplained difference becomes a wrong balance when another captured weighing of
    /// the run shows exactly the keyed reading on another balance within the tolerance.
    fn or_wrong_balance(
        &self,
        slip: Slip,
        keyed: &TimedReading,
        twin_entry: &CatalogEntry,
    ) -> Slip {
        if !matches!(slip, Slip::UnexplainedDifference { .. }) {
            return slip;
        }
        let others: Vec<TimedReading> = self
            .captured
            .iter()
            .filter(|(entry, _)| entry.seq != twin_entry.seq)
            .flat_map(|(_, w)| {
                let balance_id = self.balance_id(&w.balance);
                [(&w.first, w.first_at), (&w.second, w.second_at)].map(|(reading, at)| {
                    TimedReading {
                        balance_id: balance_id.clone(),
                        at,
                        reading: reading.clone(),
                    }
                })
            })
            .collect();
        other_balances_within(keyed, &others, self.tolerance_seconds)
            .into_iter()
            .find(|&i| others[i].reading == keyed.reading)
            .map_or(slip, |other| Slip::WrongBalance {
                other,
                balance_id: others[other].balance_id.clone(),
            })
    }

    /// The lab's id of a balance entry, or its hash when the record is missing.
    fn balance_id(&self, balance: &EntryHash) -> String {
        let catalog = self.evidence.catalog;
        match catalog.entry(balance).map(|e| catalog.current_of(e)) {
            Some(body) => match body.as_ref() {
                LabBody::Balance(b) => b.id.clone(),
                _ => balance.to_hex(),
            },
            None => balance.to_hex(),
        }
    }
}

/// A portion of primary standard or sample outside ±10 % of the method's target.
fn portion_target(run: &RunView<'_>, entry: &CatalogEntry, w: &Weighing, out: &mut Vec<Finding>) {
    let Some(method) = run.method() else { return };
    let target_text = match (run.run.kind, w.portion) {
        (RunKind::Standardization, Portion::PrimaryStandard) => &method.standardization.portion_g,
        (RunKind::Assay, Portion::Sample) => &method.assay.portion_g,
        _ => return,
    };
    let Some(target) = setting(target_text) else {
        return;
    };
    let net = w.net_grams();
    let tenth = target / Decimal::TEN;
    if (net - target).abs() > tenth {
        out.push(
            run.finding(Finding::new(
                Code::PortionOffTarget,
                format!(
                    "portion of replicate {} is {} g; the method says about {} g (±10 %: {}–{} g)",
                    w.replicate,
                    net.normalize(),
                    target.normalize(),
                    (target - tenth).normalize(),
                    (target + tenth).normalize()
                ),
                format!("{}: portion_g = {target_text}", run.method_label()),
            ))
            .involving([entry_ref(entry)]),
        );
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::catalog::Catalog;
    use crate::records::{Run, WeighingMode};
    use crate::test_records::{at, balance, entry, h, reading, run_record};
    use assize_ledger::Record;

    // Invented balances, run and readings; times in seconds after 2026-11-16T08:00:00Z (20_773
    // days after 1970-01-01, Gregorian leap-year rule of RFC 3339 Appendix C, plus 8 h).

    /// A titrant weighing of RUN-1 by difference.
    fn titrant(
        seq: u64,
        replicate: u32,
        balance: &str,
        [(first, first_s), (second, second_s)]: [(&str, i64); 2],
        source: Source,
    ) -> CatalogEntry {
        let body = Weighing {
            run: h("RUN-1"),
            replicate,
            portion: Portion::Titrant,
            balance: h(balance),
            mode: WeighingMode::ByDifference,
            first: reading(first),
            first_at: at(first_s),
            second: reading(second),
            second_at: at(second_s),
            source,
            stable: true,
        };
        entry(
            seq,
            &format!("w{seq}"),
            Weighing::KIND,
            LabBody::Weighing(body),
        )
    }

    /// CAP-01 messages for a run whose policy is not in the catalog (default tolerance
    /// 120 s) holding these weighings.
    fn cap_01(weighings: Vec<CatalogEntry>) -> Vec<String> {
        let run = run_record("RUN-1", "policy");
        let mut entries = vec![
            balance(1, "BAL-A"),
            balance(2, "BAL-B"),
            entry(3, "RUN-1", Run::KIND, LabBody::Run(run)),
        ];
        entries.extend(weighings);
        let catalog = Catalog::from_entries(entries);
        let evidence = Evidence::gather(&catalog);
        let mut out = Vec::new();
        check(&evidence, &mut out);
        out.into_iter()
            .filter(|f| f.code == Code::KeyedDiffersFromCaptured)
            .map(|f| f.message)
            .collect()
    }

    #[test]
    fn names_another_balance_whose_captured_reading_the_keyed_one_shows() {
        // Keyed 110.0001 g where BAL-A's twin shows 112.5321 g: no digit slip fits, and 30 s
        // later BAL-B's captured weighing of replicate 2 shows exactly 110.0001 g.
        let messages = cap_01(vec![
            titrant(
                10,
                1,
                "BAL-A",
                [("110.0001 g", 0), ("75.1201 g", 300)],
                Source::Keyed,
            ),
            titrant(
                11,
                1,
                "BAL-A",
                [("112.5321 g", 2), ("75.1201 g", 302)],
                Source::Captured,
            ),
            titrant(
                12,
                2,
                "BAL-B",
                [("110.0001 g", 30), ("72.0000 g", 330)],
                Source::Captured,
            ),
        ]);
        assert_eq!(
            messages,
            ["replicate 1 of run RUN-1, titrant weighing (entry 10, captured entry 11): first reading keyed 110.0001 g, captured 112.5321 g: wrong balance: the keyed reading is what balance BAL-B printed"]
        );
    }

    #[test]
    fn leaves_the_difference_unexplained_when_the_other_balance_is_beyond_the_tolerance() {
        // Near miss: BAL-B's reading 121 s after the keyed one (tolerance 120 s); the
        // difference is 112.5321 − 110.0001 = 2.532 g.
        let messages = cap_01(vec![
            titrant(
                10,
                1,
                "BAL-A",
                [("110.0001 g", 0), ("75.1201 g", 300)],
                Source::Keyed,
            ),
            titrant(
                11,
                1,
                "BAL-A",
                [("112.5321 g", 2), ("75.1201 g", 302)],
                Source::Captured,
            ),
            titrant(
                12,
                2,
                "BAL-B",
                [("110.0001 g", 121), ("72.0000 g", 330)],
                Source::Captured,
            ),
        ]);
        assert_eq!(
            messages,
            ["replicate 1 of run RUN-1, titrant weighing (entry 10, captured entry 11): first reading keyed 110.0001 g, captured 112.5321 g: no common keying slip explains it (they differ by 2.532 g)"]
        );
    }

    #[test]
    fn a_trailing_zero_or_another_replicate_gives_no_cap_01() {
        // 75.12010 is the same mass as 75.1201; replicate 2's captured weighing has no keyed
        // twin to compare with.
        let messages = cap_01(vec![
            titrant(
                10,
                1,
                "BAL-A",
                [("112.5321 g", 0), ("75.1201 g", 300)],
                Source::Keyed,
            ),
            titrant(
                11,
                1,
                "BAL-A",
                [("112.5321 g", 2), ("75.12010 g", 302)],
                Source::Captured,
            ),
            titrant(
                12,
                2,
                "BAL-B",
                [("110.0001 g", 30), ("72.0000 g", 330)],
                Source::Captured,
            ),
        ]);
        assert!(messages.is_empty(), "{messages:?}");
    }
}
