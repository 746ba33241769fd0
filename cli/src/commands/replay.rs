//! `assize replay`: integrity, recompute and every rule in one pass, with a summary and the
//! findings; `assize codes`: the table of finding codes.

use crate::args::{Cli, ReplayArgs};
use crate::failure::Failure;
use crate::output::print;
use crate::report::{codes_text, validation_text};
use crate::session::open_ledger;
use crate::Outcome;
use assize_ledger::{OpenMode, ReplayOptions};
use assize_verify::findings::{Severity, RULES};
use assize_verify::validate::{validate, Scope, ValidateError, Verdict};
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use std::io::IsTerminal;

/// Runs `assize replay`.
pub fn run(cli: &Cli, args: &ReplayArgs) -> Result<Outcome, Failure> {
    let threshold = Severity::parse(&args.fail_on).ok_or_else(|| {
        Failure::new(
            format!("--fail-on {:?} is not a severity", args.fail_on),
            "use blocking, review or periodic",
        )
    })?;
    let scope = match (&args.run, &args.sample) {
        (Some(run), _) => Scope::Run(run.clone()),
        (None, Some(sample)) => Scope::Sample(sample.clone()),
        (None, None) => Scope::Ledger,
    };
    let ledger = open_ledger(cli, OpenMode::ReadOnly)?;
    let options = ReplayOptions {
        threads: args.threads,
        ..ReplayOptions::default()
    };
    let bar = progress_bar(cli, ledger.head()?.map_or(0, |h| h.seq));
    let validation = validate(&ledger, &scope, &options, &mut |seq| bar.set_position(seq));
    bar.finish_and_clear();
    let validation = validation.map_err(|e| match e {
        ValidateError::UnknownScope(what) => Failure::new(
            what,
            "`assize entries list --kind lab.run` lists the runs and `--kind lab.sample` the samples",
        ),
        ValidateError::Ledger(e) => Failure::from(e),
    })?;
    print(cli.json, &validation, || validation_text(&validation))?;
    Ok(match validation.verdict(threshold) {
        Verdict::Clean => Outcome::Clean,
        Verdict::Findings => Outcome::Findings,
        Verdict::IntegrityFailure => Outcome::IntegrityProblems,
    })
}

/// A progress bar on stderr when it is a terminal and the output is for people; hidden
/// otherwise.
fn progress_bar(cli: &Cli, entries: u64) -> ProgressBar {
    if cli.json || !std::io::stderr().is_terminal() || entries < 10_000 {
        return ProgressBar::hidden();
    }
    let bar = ProgressBar::with_draw_target(Some(entries), ProgressDrawTarget::stderr());
    if let Ok(style) = ProgressStyle::with_template("replaying {bar:40} {pos}/{len} entries {eta}")
    {
        bar.set_style(style);
    }
    bar
}

/// Runs `assize codes`.
pub fn codes(cli: &Cli) -> Result<Outcome, Failure> {
    print(cli.json, &RULES, codes_text)?;
    Ok(Outcome::Clean)
}
