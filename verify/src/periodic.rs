//! The periodic review of a period for the quality unit (EU GMP Annex 11 §9: audit trails
//! regularly reviewed): rates of corrections, invalidations, late entries and retests per
//! analyst, method and balance; who held which role and key; and results to re-review — a
//! random sample that anyone can reproduce from the seed, and a targeted one.
//!
//! The random sample takes the runs whose SHA-256 of (seed, run entry hash) is smallest: the
//! same seed and ledger always give the same runs, with no generator whose output could change
//! between library versions. A group's rate is flagged (`PER-01`) when it is more than twice the
//! lab's rate for the period and rests on at least two events.

use crate::catalog::LabBody;
use crate::findings::{Code, Finding};
use crate::records::{Correction, Invalidation, RunKind, Weighing};
use crate::rules::{day_of, Evidence, RunView};
use crate::validate::Validation;
use assize_ledger::{Record, Registry, Timestamp};
use chrono::NaiveDate;
use serde::Serialize;
use sha2::{Digest, Sha256};
use std::collections::{BTreeMap, HashSet};

/// The period and the sampling asked for.
#[derive(Clone, Debug)]
pub struct Request {
    /// First day (UTC), included.
    pub from: NaiveDate,
    /// Last day (UTC), included.
    pub to: NaiveDate,
    /// Seed of the random sample.
    pub seed: u64,
    /// Size of the random sample.
    pub random: usize,
}

/// Counts for one analyst, method or balance.
#[derive(Clone, Debug, Default, PartialEq, Eq, Serialize)]
pub struct Rates {
    /// Who or what.
    pub name: String,
    /// Runs (for a balance: runs weighed on it).
    pub runs: usize,
    /// Corrections of the runs' data.
    pub corrections: usize,
    /// Invalidated replicates.
    pub invalidations: usize,
    /// Late entries (`TIM-01`).
    pub late_entries: usize,
    /// Assays of a sample that had been assayed before.
    pub retests: usize,
}

/// A role or key held during the period.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct Holding {
    /// Person id.
    pub person: String,
    /// Full name.
    pub name: String,
    /// Roles held during the period, with the day each began.
    pub roles: Vec<String>,
    /// Keys usable during the period: short key, enrolled, revoked.
    pub keys: Vec<String>,
}

/// A run picked for re-review, and why.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct Pick {
    /// Run id.
    pub run: String,
    /// Why it was picked.
    pub reason: String,
}

/// The periodic review.
#[derive(Clone, Debug, Serialize)]
pub struct PeriodicReview {
    /// First day.
    pub from: String,
    /// Last day.
    pub to: String,
    /// Runs started in the period.
    pub runs: usize,
    /// The lab as a whole.
    pub lab: Rates,
    /// Per analyst (author of the run entry).
    pub by_analyst: Vec<Rates>,
    /// Per method.
    pub by_method: Vec<Rates>,
    /// Per balance.
    pub by_balance: Vec<Rates>,
    /// Roles and keys held.
    pub people: Vec<Holding>,
    /// Seed of the random sample.
    pub seed: u64,
    /// The random sample.
    pub random_sample: Vec<Pick>,
    /// The targeted sample: runs with corrections, invalidations, late entries, justified
    /// approvals or blocking findings.
    pub targeted_sample: Vec<Pick>,
    /// Rates well above the lab's (`PER-01`).
    pub findings: Vec<Finding>,
}

/// What one run contributes.
struct RunCounts {
    corrections: usize,
    invalidations: usize,
    late_entries: usize,
    retest: bool,
}

/// Builds the periodic review from the evidence, a validation of the whole ledger and the
/// registry.
pub fn review(
    evidence: &Evidence<'_>,
    validation: &Validation,
    registry: &Registry,
    request: &Request,
) -> PeriodicReview {
    let catalog = evidence.catalog;
    let in_period = |at: Timestamp| {
        let day = day_of(at);
        day >= request.from && day <= request.to
    };
    let runs: Vec<&RunView<'_>> = evidence
        .runs
        .iter()
        .filter(|r| in_period(r.run.started_at))
        .collect();
    let mut seen_samples: HashSet<assize_ledger::EntryHash> = HashSet::new();
    // Samples assayed before the period count towards retests too.
    for run in evidence
        .runs
        .iter()
        .filter(|r| day_of(r.run.started_at) < request.from)
    {
        if run.run.kind == RunKind::Assay {
            seen_samples.extend(run.run.sample);
        }
    }
    let mut lab = Rates {
        name: "the lab".into(),
        ..Rates::default()
    };
    let mut by_analyst: BTreeMap<String, Rates> = BTreeMap::new();
    let mut by_method: BTreeMap<String, Rates> = BTreeMap::new();
    let mut by_balance: BTreeMap<String, Rates> = BTreeMap::new();
    let mut targeted = Vec::new();
    let mut ordered = runs.clone();
    ordered.sort_by_key(|r| (r.run.started_at, r.entry.seq));
    for run in &ordered {
        let covered = evidence.covered_by(&run.entry.hash);
        let counts = RunCounts {
            corrections: covered
                .iter()
                .filter(|e| e.kind == Correction::KIND)
                .count(),
            invalidations: covered
                .iter()
                .filter(|e| e.kind == Invalidation::KIND)
                .count(),
            late_entries: validation
                .findings
                .iter()
                .filter(|f| f.code == Code::LateEntry && f.run.as_deref() == Some(run.id()))
                .count(),
            retest: run.run.kind == RunKind::Assay
                && run.run.sample.is_some_and(|s| !seen_samples.insert(s)),
        };
        let balances: Vec<String> = {
            let mut names: Vec<String> = run
                .entries
                .iter()
                .filter(|e| e.kind == Weighing::KIND)
                .filter_map(|e| match catalog.current_of(e).as_ref() {
                    LabBody::Weighing(w) => match catalog.current_ref(&w.balance).as_deref() {
                        Some(LabBody::Balance(b)) => Some(b.id.clone()),
                        _ => None,
                    },
                    _ => None,
                })
                .collect();
            names.sort();
            names.dedup();
            names
        };
        let groups = [
            (&mut by_analyst, vec![run.entry.author.clone()]),
            (&mut by_method, vec![run.method_label().to_string()]),
            (&mut by_balance, balances),
        ];
        add(&mut lab, &counts);
        for (map, names) in groups {
            for name in names {
                let rates = map.entry(name.clone()).or_insert_with(|| Rates {
                    name,
                    ..Rates::default()
                });
                add(rates, &counts);
            }
        }
        let mut reasons = Vec::new();
        if counts.corrections > 0 {
            reasons.push(format!("{} correction(s)", counts.corrections));
        }
        if counts.invalidations > 0 {
            reasons.push(format!("{} invalidation(s)", counts.invalidations));
        }
        if counts.late_entries > 0 {
            reasons.push(format!("{} late entr(ies)", counts.late_entries));
        }
        if counts.retest {
            reasons.push("a retest".into());
        }
        let own = validation
            .findings
            .iter()
            .filter(|f| f.run.as_deref() == Some(run.id()));
        let mut justified = false;
        let mut blocking = 0;
        for f in own {
            justified |= f.code == Code::ApprovedOverFindings;
            blocking += usize::from(f.severity == crate::findings::Severity::Blocking);
        }
        if justified {
            reasons.push("approved over blocking findings".into());
        }
        if blocking > 0 {
            reasons.push(format!("{blocking} blocking finding(s)"));
        }
        if !reasons.is_empty() {
            targeted.push(Pick {
                run: run.id().to_string(),
                reason: reasons.join(", "),
            });
        }
    }
    let mut findings = Vec::new();
    for (what, map) in [
        ("analyst", &by_analyst),
        ("method", &by_method),
        ("balance", &by_balance),
    ] {
        for rates in map.values() {
            flag(what, rates, &lab, request, &mut findings);
        }
    }
    let random_sample = random_sample(&runs, request);
    PeriodicReview {
        from: request.from.to_string(),
        to: request.to.to_string(),
        runs: runs.len(),
        lab,
        by_analyst: by_analyst.into_values().collect(),
        by_method: by_method.into_values().collect(),
        by_balance: by_balance.into_values().collect(),
        people: holdings(registry, request),
        seed: request.seed,
        random_sample,
        targeted_sample: targeted,
        findings,
    }
}

fn add(rates: &mut Rates, counts: &RunCounts) {
    rates.runs += 1;
    rates.corrections += counts.corrections;
    rates.invalidations += counts.invalidations;
    rates.late_entries += counts.late_entries;
    rates.retests += usize::from(counts.retest);
}

/// `PER-01` for each count of `rates` more than twice the lab's rate, on two events or more.
fn flag(what: &str, rates: &Rates, lab: &Rates, request: &Request, out: &mut Vec<Finding>) {
    if rates.runs == 0 || lab.runs == 0 {
        return;
    }
    for (label, mine, all) in [
        ("corrections", rates.corrections, lab.corrections),
        ("invalidations", rates.invalidations, lab.invalidations),
        ("late entries", rates.late_entries, lab.late_entries),
        ("retests", rates.retests, lab.retests),
    ] {
        let own_rate = mine as f64 / rates.runs as f64;
        let lab_rate = all as f64 / lab.runs as f64;
        if mine >= 2 && own_rate > 2.0 * lab_rate {
            out.push(Finding::new(
                Code::CorrectionRate,
                format!(
                    "{what} {}: {mine} {label} in {} runs ({own_rate:.2} per run) against {lab_rate:.2} per run for the lab, {} to {}",
                    rates.name, rates.runs, request.from, request.to
                ),
                "periodic review: more than twice the lab's rate, on two events or more",
            ));
        }
    }
}

/// The runs whose SHA-256 of the seed and their entry hash is smallest.
fn random_sample(runs: &[&RunView<'_>], request: &Request) -> Vec<Pick> {
    let mut keyed: Vec<([u8; 32], &RunView<'_>)> = runs
        .iter()
        .map(|run| {
            let mut hasher = Sha256::new();
            hasher.update(b"assize periodic sample v1");
            hasher.update(request.seed.to_be_bytes());
            hasher.update(run.entry.hash.0);
            (hasher.finalize().into(), *run)
        })
        .collect();
    keyed.sort_by_key(|(key, _)| *key);
    keyed
        .into_iter()
        .take(request.random)
        .map(|(_, run)| Pick {
            run: run.id().to_string(),
            reason: format!("random (seed {})", request.seed),
        })
        .collect()
}

/// Roles and keys each person held at some time in the period.
fn holdings(registry: &Registry, request: &Request) -> Vec<Holding> {
    let end = request.to;
    let start = request.from;
    registry
        .persons()
        .values()
        .filter_map(|person| {
            let mut roles = Vec::new();
            for (i, (_, began, role)) in person.role_history.iter().enumerate() {
                let ended = person.role_history.get(i + 1).map(|(_, t, _)| day_of(*t));
                if day_of(*began) <= end && ended.is_none_or(|e| e >= start) {
                    roles.push(format!("{} from {}", role_name(*role), day_of(*began)));
                }
            }
            let keys: Vec<String> = person
                .keys
                .iter()
                .filter(|k| {
                    day_of(k.added_time) <= end
                        && k.revoked.is_none_or(|(_, at)| day_of(at) >= start)
                })
                .map(|k| {
                    format!(
                        "{} enrolled {}{}",
                        k.public_key.short(),
                        day_of(k.added_time),
                        k.revoked
                            .map_or(String::new(), |(_, at)| format!(", revoked {}", day_of(at)))
                    )
                })
                .collect();
            (!roles.is_empty() || !keys.is_empty()).then(|| Holding {
                person: person.id.clone(),
                name: person.name.clone(),
                roles,
                keys,
            })
        })
        .collect()
}

fn role_name(role: assize_ledger::Role) -> String {
    format!("{role:?}").to_lowercase()
}
