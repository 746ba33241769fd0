//! `assize periodic`: the quality unit's summary of a period — rates per analyst, method and
//! balance, roles and keys held, and results to re-review.

use crate::args::{Cli, PeriodicArgs};
use crate::failure::Failure;
use crate::output::print;
use crate::report::periodic_text;
use crate::session::open_ledger;
use crate::Outcome;
use assize_ledger::{OpenMode, ReplayOptions};
use assize_verify::periodic::{review, Request};
use assize_verify::rules::Evidence;
use assize_verify::validate::{judge, replay, Scope};
use chrono::NaiveDate;

fn day(flag: &str, text: &str) -> Result<NaiveDate, Failure> {
    NaiveDate::parse_from_str(text.trim(), "%Y-%m-%d").map_err(|_| {
        Failure::new(
            format!("{flag} {text:?} is not a date"),
            "write dates as YYYY-MM-DD, e.g. --from 2026-11-01 --to 2026-11-30",
        )
    })
}

/// Runs `assize periodic`.
pub fn run(cli: &Cli, args: &PeriodicArgs) -> Result<Outcome, Failure> {
    let request = Request {
        from: day("--from", &args.from)?,
        to: day("--to", &args.to)?,
        seed: args.seed,
        random: args.random,
    };
    if request.to < request.from {
        return Err(Failure::new(
            format!(
                "the period ends ({}) before it begins ({})",
                request.to, request.from
            ),
            "give --from before --to",
        ));
    }
    let mut ledger = open_ledger(cli, OpenMode::ReadOnly)?;
    let replayed = replay(&ledger, &ReplayOptions::default(), &mut |_| {})
        .map_err(|e| Failure::new(e.to_string(), "run `assize verify` to see what is wrong"))?;
    let evidence = Evidence::gather(&replayed.catalog);
    let hash_of = |seq: u64| ledger.entry(seq).ok().map(|e| e.hash);
    let validation = judge(&replayed, &evidence, &Scope::Ledger, &hash_of)
        .map_err(|e| Failure::new(e.to_string(), "run `assize verify` to see what is wrong"))?;
    let registry = ledger.registry()?;
    let periodic = review(&evidence, &validation, registry, &request);
    print(cli.json, &periodic, || periodic_text(&periodic))?;
    Ok(if replayed.integrity.intact() {
        Outcome::Clean
    } else {
        Outcome::IntegrityProblems
    })
}
