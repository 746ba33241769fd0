//! `assize adopt | add | import`: lab records entered by hand, by flags or from a batch file,
//! each signed by the person whose key is used; a batch is written all or nothing.

use crate::args::{AddArgs, AdoptArgs, Cli, CorrectArgs, ImportArgs};
use crate::failure::Failure;
use crate::output::print;
use crate::render::EntryView;
use crate::session::{open_ledger, unlock};
use crate::Outcome;
use assize_ledger::{LedgerError, OpenMode};
use assize_verify::catalog::Catalog;
use assize_verify::correction::correction_draft;
use assize_verify::intake::{self, Batch, Input, KINDS};
use assize_verify::records::DocumentKind;
use std::path::{Path, PathBuf};

/// Runs `assize adopt`.
pub fn adopt(cli: &Cli, args: &AdoptArgs) -> Result<Outcome, Failure> {
    let (document, path) = match (&args.method, &args.policy) {
        (Some(p), _) => (DocumentKind::Method, p),
        (None, Some(p)) => (DocumentKind::Policy, p),
        (None, None) => unreachable!("clap requires --method or --policy"),
    };
    let input = Input::Adopt {
        document,
        file: Some(path.display().to_string()),
        text: Some(read_text(path)?),
    };
    record(cli, &args.key, vec![input])
}

/// Runs `assize add`.
pub fn add(cli: &Cli, args: &AddArgs) -> Result<Outcome, Failure> {
    if args.kinds {
        let lines: Vec<String> = KINDS.iter().map(|(k, f)| format!("{k:<14} {f}")).collect();
        return print(cli.json, &KINDS, || lines.join("\n")).map(|_| Outcome::Clean);
    }
    let kind = args
        .kind
        .as_deref()
        .expect("clap requires a kind unless --kinds");
    let (fields, key_in_fields) = split_fields(&args.fields)?;
    let key = key_in_fields
        .or_else(|| args.key.clone())
        .ok_or_else(|| Failure::new("no key file given", "pass --key FILE (or set ASSIZE_KEY)"))?;
    let mut input = Input::from_fields(kind, &fields)
        .map_err(|e| Failure::new(e, "`assize add --kinds` lists every kind and its fields"))?;
    if let Input::Adopt {
        file: Some(file),
        text,
        ..
    } = &mut input
    {
        *text = Some(read_text(Path::new(file))?);
    }
    record(cli, &key, vec![input])
}

/// Runs `assize import`.
pub fn import(cli: &Cli, args: &ImportArgs) -> Result<Outcome, Failure> {
    let text = read_text(&args.file)?;
    let mut batch = Batch::parse(&text).map_err(|e| {
        Failure::new(
            e,
            "see the batch file format in the README (one [[record]] table per entry)",
        )
    })?;
    let base = args.file.parent().unwrap_or(Path::new("."));
    for input in &mut batch.record {
        if let Input::Adopt {
            file: Some(file),
            text,
            ..
        } = input
        {
            *text = Some(read_text(&base.join(file.as_str()))?);
        }
    }
    record(cli, &args.key, batch.record)
}

/// Field pairs from the command line, and the key file if it was given among them.
type Fields = (Vec<(String, String)>, Option<PathBuf>);

/// Runs `assize correct`.
pub fn correct(cli: &Cli, args: &CorrectArgs) -> Result<Outcome, Failure> {
    let (fields, key_in_fields) = split_fields(&args.fields)?;
    let key = key_in_fields
        .or_else(|| args.key.clone())
        .ok_or_else(|| Failure::new("no key file given", "pass --key FILE (or set ASSIZE_KEY)"))?;
    let mut ledger = open_ledger(cli, OpenMode::ReadWrite)?;
    let original = ledger.entry(args.seq)?.hash;
    let signer = unlock(cli, &key)?;
    // The correction is drafted from the version in force at this head; if anyone appends
    // meanwhile (another correction, say), it is refused and nothing is written.
    let read_at = ledger.head()?;
    let catalog = Catalog::load(ledger.store())?;
    let author = signer.person().to_string();
    let entry = ledger.append_batch_after(read_at.as_ref(), 1, Some(&signer), |_, _| {
        correction_draft(&catalog, original, &fields, &args.reason, &author).map_err(|reason| {
            LedgerError::BadInput {
                what: format!("correction of entry {}", args.seq),
                reason,
            }
        })
    })?;
    let views: Vec<EntryView> = entry.iter().map(EntryView::of).collect();
    print(cli.json, &views, || {
        format!(
            "entry {} recorded: correction of entry {} by {}",
            entry[0].seq, args.seq, entry[0].author
        )
    })?;
    Ok(Outcome::Clean)
}

/// Turns `--name value` / `--name=value` / `--flag` into pairs; pulls out `--key FILE`.
fn split_fields(raw: &[String]) -> Result<Fields, Failure> {
    let mut fields = Vec::new();
    let mut key = None;
    let mut i = 0;
    while i < raw.len() {
        let Some(name) = raw[i].strip_prefix("--") else {
            return Err(Failure::new(
                format!(
                    "{:?} is not a field; fields are given as --name value",
                    raw[i]
                ),
                "`assize add --kinds` lists every kind and its fields",
            ));
        };
        let (name, value) = match name.split_once('=') {
            Some((n, v)) => (n.to_string(), v.to_string()),
            None if raw.get(i + 1).is_some_and(|v| !v.starts_with("--")) => {
                i += 1;
                (name.to_string(), raw[i].clone())
            }
            None => (name.to_string(), "true".to_string()),
        };
        if name == "key" {
            key = Some(PathBuf::from(value));
        } else {
            fields.push((name, value));
        }
        i += 1;
    }
    Ok((fields, key))
}

fn read_text(path: &Path) -> Result<String, Failure> {
    std::fs::read_to_string(path).map_err(|e| {
        Failure::new(
            format!("cannot read {}: {e}", path.display()),
            "check the path of the file",
        )
    })
}

/// Resolves and appends the inputs in one transaction, signed with `key`.
fn record(cli: &Cli, key: &Path, inputs: Vec<Input>) -> Result<Outcome, Failure> {
    let mut ledger = open_ledger(cli, OpenMode::ReadWrite)?;
    let signer = unlock(cli, key)?;
    let entries = intake::record(&mut ledger, &signer, &inputs)?;
    let views: Vec<EntryView> = entries.iter().map(EntryView::of).collect();
    print(cli.json, &views, || {
        entries
            .iter()
            .map(|e| format!("entry {} recorded: {} by {}", e.seq, e.kind, e.author))
            .collect::<Vec<_>>()
            .join("\n")
    })?;
    Ok(Outcome::Clean)
}
