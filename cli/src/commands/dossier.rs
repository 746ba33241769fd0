//! `assize dossier RUN --out FILE` (or `--entry SEQ`): one run's review dossier gathered by
//! `verify::dossier`, rendered as a self-contained HTML page and written whole; `--json` also
//! prints the very struct the page was made from.

use crate::args::{Cli, DossierArgs};
use crate::failure::Failure;
use crate::html::dossier_page;
use crate::outfile::{write_whole, Existing};
use crate::output::print;
use crate::session::{ledger_path, open_ledger};
use crate::Outcome;
use assize_ledger::OpenMode;
use assize_verify::dossier::{dossier, DossierError, DossierOptions, History};
use assize_verify::explain::Target;

/// Runs `assize dossier`.
pub fn run(cli: &Cli, args: &DossierArgs) -> Result<Outcome, Failure> {
    let target = match (&args.run, args.entry) {
        (_, Some(seq)) => Target::Entry(seq),
        (Some(run), None) => Target::RunId(run.clone()),
        (None, None) => unreachable!("clap requires a run or --entry"),
    };
    let existing = if args.force {
        Existing::Replace
    } else {
        Existing::Keep
    };
    // Refuse an existing file before the work, as well as (atomically) when writing.
    if existing == Existing::Keep && std::fs::symlink_metadata(&args.out).is_ok() {
        return Err(Failure::new(
            format!("{} already exists", args.out.display()),
            "pass --force to replace it, or choose another --out",
        ));
    }
    let options = DossierOptions {
        ledger_file: ledger_path(cli)?
            .file_name()
            .map_or_else(String::new, |n| n.to_string_lossy().into_owned()),
        history: if args.history_to_head {
            History::ToHead
        } else {
            History::UpToRun
        },
    };
    let mut ledger = open_ledger(cli, OpenMode::ReadOnly)?;
    let gathered = dossier(&mut ledger, &target, &options).map_err(|e| match e {
        DossierError::Ledger(e) => Failure::from(e),
        DossierError::NotFound(what) => Failure::new(
            what,
            "`assize entries list --kind lab.run` lists the runs; `--entry SEQ` takes any entry of a run",
        ),
        kept_growing @ DossierError::KeptGrowing { .. } => Failure::new(
            kept_growing.to_string(),
            "run it again when fewer entries are being recorded",
        ),
    })?;
    let page = dossier_page(&gathered).map_err(|e| Failure::new(e, "report this as a bug"))?;
    write_whole(&args.out, page.as_bytes(), existing)?;
    print(cli.json, &gathered, || {
        format!(
            "wrote the review dossier of {} {} to {} ({} blocking, {} for review, {} periodic; \
             ledger head {})",
            crate::html::kind_word(gathered.run.kind),
            gathered.run.id,
            args.out.display(),
            gathered.tally.blocking,
            gathered.tally.review,
            gathered.tally.periodic,
            gathered.head_seq
        )
    })?;
    Ok(if gathered.chain_intact {
        Outcome::Clean
    } else {
        Outcome::IntegrityProblems
    })
}
