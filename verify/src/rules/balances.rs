//! Balance findings (`BAL-*`, and `ORD-03`): fitness of the balance at the moment of each
//! weighing — inside its calibration interval, checked earlier that day, net mass not below its
//! minimum weight (USP <41>) — failed routine checks, and the results a failed check puts in
//! doubt.
//!
//! Days are UTC calendar days. Each weighing is judged by the policy its run names; each routine
//! check by the policy adopted most recently before it. A captured weighing that repeats its
//! keyed twin (`repeats_keyed_twin`) is the same observation and is judged once, on the keyed
//! weighing.

use super::{
    day_of, entry_ref, repeats_keyed_twin, setting, weighings_of, when, Evidence, RunView,
};
use crate::catalog::{CatalogEntry, LabBody};
use crate::findings::{Code, Finding};
use crate::records::{Balance, BalanceCheck, Calibration, Weighing};
use assize_ledger::Record;
use assize_ledger::{EntryHash, Timestamp};
use chrono::NaiveDate;
use foldhash::{HashMap, HashMapExt};
use rust_decimal::Decimal;
use std::borrow::Cow;
use std::collections::BTreeMap;

/// A routine check with its verdict.
struct Check<'a> {
    entry: &'a CatalogEntry,
    at: Timestamp,
    passed: bool,
    deviation_percent: Decimal,
    tolerance_percent: Decimal,
}

/// A calibration with its dates.
struct Certificate<'a> {
    entry: &'a CatalogEntry,
    calibration: Cow<'a, Calibration>,
    performed: NaiveDate,
    due: NaiveDate,
}

/// Everything recorded about the balances, indexed by balance entry.
struct Balances<'a> {
    balances: HashMap<EntryHash, Cow<'a, Balance>>,
    calibrations: HashMap<EntryHash, Vec<Certificate<'a>>>,
    checks: HashMap<EntryHash, Vec<Check<'a>>>,
}

impl<'a> Balances<'a> {
    fn gather(evidence: &Evidence<'a>) -> Balances<'a> {
        let catalog = evidence.catalog;
        let mut balances = HashMap::new();
        for e in catalog.of_kind(Balance::KIND) {
            match catalog.current_of(e) {
                Cow::Borrowed(LabBody::Balance(b)) => {
                    balances.insert(e.hash, Cow::Borrowed(b));
                }
                Cow::Owned(LabBody::Balance(b)) => {
                    balances.insert(e.hash, Cow::Owned(b));
                }
                _ => {}
            }
        }
        let mut calibrations: HashMap<EntryHash, Vec<Certificate<'a>>> = HashMap::new();
        for e in catalog.of_kind(Calibration::KIND) {
            let calibration = match catalog.current_of(e) {
                Cow::Borrowed(LabBody::Calibration(c)) => Some(Cow::Borrowed(c)),
                Cow::Owned(LabBody::Calibration(c)) => Some(Cow::Owned(c)),
                _ => None,
            };
            if let Some(c) = calibration {
                let date = |text: &str| NaiveDate::parse_from_str(text, "%Y-%m-%d").ok();
                if let (Some(performed), Some(due)) = (date(&c.performed_on), date(&c.due_on)) {
                    calibrations
                        .entry(c.balance)
                        .or_default()
                        .push(Certificate {
                            entry: e,
                            calibration: c,
                            performed,
                            due,
                        });
                }
            }
        }
        for list in calibrations.values_mut() {
            list.sort_by_key(|c| (c.performed, c.entry.seq));
        }
        let mut checks: HashMap<EntryHash, Vec<Check<'a>>> = HashMap::new();
        for e in catalog.of_kind(BalanceCheck::KIND) {
            let body = catalog.current_of(e);
            let LabBody::BalanceCheck(c) = body.as_ref() else {
                continue;
            };
            let tolerance = evidence
                .policy_before(e.seq)
                .and_then(|p| p.policy.as_ref())
                .and_then(|p| setting(&p.balances.routine_check_tolerance_percent))
                .unwrap_or(Decimal::new(10, 2));
            let (Ok(reference), Ok(reading)) = (c.reference_mass.grams(), c.reading.grams()) else {
                continue;
            };
            if reference <= Decimal::ZERO {
                continue;
            }
            let deviation = ((reading - reference) / reference * Decimal::ONE_HUNDRED).abs();
            checks.entry(c.balance).or_default().push(Check {
                entry: e,
                at: c.observed_at,
                passed: deviation <= tolerance,
                deviation_percent: deviation.round_dp(4),
                tolerance_percent: tolerance,
            });
        }
        for list in checks.values_mut() {
            list.sort_by_key(|c| (c.at, c.entry.seq));
        }
        Balances {
            balances,
            calibrations,
            checks,
        }
    }

    fn name(&self, balance: &EntryHash) -> String {
        self.named(balance).to_string()
    }

    /// The balance's name for a message, written only if a message is.
    fn named<'b>(&'b self, balance: &'b EntryHash) -> BalanceName<'b> {
        BalanceName {
            balance,
            record: self.balances.get(balance).map(|b| &**b),
        }
    }
}

/// "balance ID" (or the entry hash when the balance record is missing), as `Display`.
struct BalanceName<'a> {
    balance: &'a EntryHash,
    record: Option<&'a Balance>,
}

impl std::fmt::Display for BalanceName<'_> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self.record {
            Some(b) => write!(f, "balance {}", b.id),
            None => write!(f, "balance {}", self.balance),
        }
    }
}

/// Pushes the balance findings.
pub fn check(evidence: &Evidence<'_>, out: &mut Vec<Finding>) {
    let balances = Balances::gather(evidence);
    for run in evidence.judged_runs() {
        let weighings = weighings_of(evidence.catalog, run);
        for (entry, weighing) in &weighings {
            if !repeats_keyed_twin(weighing, &weighings) {
                fitness(&balances, run, entry, weighing, out);
            }
        }
    }
    if !evidence.focused() {
        failed_checks(evidence, &balances, out);
    }
}

fn fitness(
    balances: &Balances<'_>,
    run: &RunView<'_>,
    entry: &CatalogEntry,
    weighing: &Weighing,
    out: &mut Vec<Finding>,
) {
    let Some(policy) = run.policy() else { return };
    let name = balances.named(&weighing.balance);
    let day = day_of(weighing.first_at);
    let finding = |code: Code, message: String, clause: String| {
        run.finding(Finding::new(code, message, clause))
            .involving([entry_ref(entry)])
    };
    // Calibration in force on the day of the weighing.
    let interval = policy.balances.calibration_interval_days;
    let in_force = balances
        .calibrations
        .get(&weighing.balance)
        .and_then(|list| list.iter().rev().find(|c| c.performed <= day));
    let clause = || {
        format!(
            "{}: balances.calibration_interval_days = {interval}",
            run.policy_label()
        )
    };
    match in_force {
        None => out.push(finding(
            Code::BalanceOutOfCalibration,
            format!(
                "{name} has no calibration recorded on or before {day}, when entry {} was weighed",
                entry.seq
            ),
            clause(),
        )),
        Some(c) => {
            let problem = if !c.calibration.passed {
                Some(format!(
                    "its calibration of {} (certificate {}) failed",
                    c.performed, c.calibration.certificate
                ))
            } else if c.due < day {
                Some(format!(
                    "its calibration (certificate {}) was due on {}",
                    c.calibration.certificate, c.due
                ))
            } else if (day - c.performed).num_days() > i64::from(interval) {
                Some(format!(
                    "its calibration of {} (certificate {}) is {} days old",
                    c.performed,
                    c.calibration.certificate,
                    (day - c.performed).num_days()
                ))
            } else {
                None
            };
            if let Some(problem) = problem {
                out.push(
                    finding(
                        Code::BalanceOutOfCalibration,
                        format!("{name} weighed entry {} on {day}, but {problem}", entry.seq),
                        clause(),
                    )
                    .involving([entry_ref(c.entry)]),
                );
            }
        }
    }
    // Routine check earlier the same day.
    if policy.balances.routine_check_each_day_of_use {
        let clause = || {
            format!(
                "{}: balances.routine_check_each_day_of_use = true",
                run.policy_label()
            )
        };
        let last = balances.checks.get(&weighing.balance).and_then(|list| {
            list.iter()
                .rev()
                .find(|c| c.at <= weighing.first_at && day_of(c.at) == day)
        });
        match last {
            None => out.push(finding(
                Code::BalanceNotChecked,
                format!(
                    "{name} has no routine check on {day} before entry {} was weighed at {}",
                    entry.seq,
                    when(weighing.first_at)
                ),
                clause(),
            )),
            Some(c) if !c.passed => out.push(
                finding(
                    Code::BalanceNotChecked,
                    format!(
                        "{name}'s last check before entry {} failed ({} % off, tolerance {} %)",
                        entry.seq, c.deviation_percent, c.tolerance_percent
                    ),
                    clause(),
                )
                .involving([entry_ref(c.entry)]),
            ),
            Some(c) if c.entry.seq > entry.seq => out.push(
                run.finding(Finding::new(
                    Code::CheckRecordedLate,
                    format!(
                        "{name}'s check timed {} was recorded (entry {}) after the weighing it covers (entry {})",
                        when(c.at),
                        c.entry.seq,
                        entry.seq
                    ),
                    "a check is recorded before the weighings that rely on it",
                ))
                .involving([entry_ref(entry), entry_ref(c.entry)]),
            ),
            Some(_) => {}
        }
    }
    // Minimum weight (USP <41>) with the policy's safety factor.
    if let (Some(balance), Some(factor)) = (
        balances.balances.get(&weighing.balance),
        setting(&policy.balances.minimum_weight_safety_factor),
    ) {
        if let Ok(minimum) = balance.minimum_weight.grams() {
            let required = minimum * factor;
            let net = weighing.net_grams();
            if net < required {
                out.push(finding(
                    Code::BelowMinimumWeight,
                    format!(
                        "net mass {} g (entry {}) is below {name}'s minimum weight {} g × {} = {} g",
                        net.normalize(),
                        entry.seq,
                        minimum.normalize(),
                        factor.normalize(),
                        required.normalize()
                    ),
                    format!(
                        "USP <41>; {}: balances.minimum_weight_safety_factor = {}",
                        run.policy_label(),
                        policy.balances.minimum_weight_safety_factor
                    ),
                ));
            }
        }
    }
}

/// Failed checks, and every run weighed on that balance since its last passing check.
fn failed_checks(evidence: &Evidence<'_>, balances: &Balances<'_>, out: &mut Vec<Finding>) {
    // Weighings per balance, by first reading time.
    let mut weighed: HashMap<EntryHash, BTreeMap<(Timestamp, u64), usize>> = HashMap::new();
    let mut weighing_entries: Vec<(&CatalogEntry, usize)> = Vec::new();
    for (index, run) in evidence.runs.iter().enumerate() {
        for (entry, w) in weighings_of(evidence.catalog, run) {
            weighed
                .entry(w.balance)
                .or_default()
                .insert((w.first_at, entry.seq), weighing_entries.len());
            weighing_entries.push((entry, index));
        }
    }
    for (balance, checks) in &balances.checks {
        let name = balances.name(balance);
        for (i, check) in checks.iter().enumerate() {
            if check.passed {
                continue;
            }
            out.push(
                Finding::new(
                    Code::BalanceCheckFailed,
                    format!(
                        "{name} read {} % off its test weight at {} (tolerance {} %)",
                        check.deviation_percent,
                        when(check.at),
                        check.tolerance_percent
                    ),
                    "USP <41> accuracy; the policy's routine check tolerance",
                )
                .involving([entry_ref(check.entry)]),
            );
            let since = checks[..i]
                .iter()
                .rev()
                .find(|c| c.passed)
                .map(|c| c.at)
                .unwrap_or(Timestamp(i64::MIN));
            let Some(list) = weighed.get(balance) else {
                continue;
            };
            let mut affected: BTreeMap<usize, Vec<&CatalogEntry>> = BTreeMap::new();
            for (_, index) in list.range((since, 0)..(check.at, 0)) {
                let (entry, run) = weighing_entries[*index];
                affected.entry(run).or_default().push(entry);
            }
            for (run, entries) in affected {
                let run = &evidence.runs[run];
                out.push(
                    run.finding(Finding::new(
                        Code::WeighedBeforeFailedCheck,
                        format!(
                            "run {} was weighed on {name} after its last passing check and before the check that failed at {}",
                            run.id(),
                            when(check.at)
                        ),
                        "USP <41>; impact assessment of a failed check",
                    ))
                    .involving(entries.into_iter().map(entry_ref))
                    .involving([entry_ref(check.entry)]),
                );
            }
        }
    }
}
