//! Command-line grammar of `assize`: clap structs only, no behaviour.

use clap::{Args, Parser, Subcommand};
use std::path::PathBuf;

/// Append-only, signed lab ledger: record, list, verify and checkpoint.
#[derive(Debug, Parser)]
#[command(name = "assize", version, about, long_about = None)]
pub struct Cli {
    /// Ledger file to work on.
    #[arg(long, global = true, env = "ASSIZE_LEDGER", value_name = "FILE")]
    pub ledger: Option<PathBuf>,

    /// Print machine-readable JSON instead of tables.
    #[arg(long, global = true)]
    pub json: bool,

    /// Read the passphrase from the first line of this file.
    #[arg(
        long,
        global = true,
        value_name = "FILE",
        conflicts_with = "passphrase_env"
    )]
    pub passphrase_file: Option<PathBuf>,

    /// Read the passphrase from this environment variable.
    #[arg(long, global = true, value_name = "VAR")]
    pub passphrase_env: Option<String>,

    #[command(subcommand)]
    pub command: Command,
}

/// The verbs.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Make or inspect a personal key file.
    #[command(subcommand)]
    Key(KeyCommand),
    /// Start a new ledger for a lab; the key's owner becomes its first QA person.
    Create(CreateArgs),
    /// Enrol people, manage their keys and roles, list them.
    #[command(subcommand)]
    Person(PersonCommand),
    /// Append a signed free-text note.
    Note(NoteArgs),
    /// List or show entries.
    #[command(subcommand)]
    Entries(EntriesCommand),
    /// Replay the whole chain and report every integrity problem.
    Verify(VerifyArgs),
    /// Write or check a signed checkpoint of the head, kept outside the ledger.
    #[command(subcommand)]
    Checkpoint(CheckpointCommand),
    /// Adopt a method or the lab policy into the ledger, by its SHA-256 (QA).
    Adopt(AdoptArgs),
    /// Record one lab entry: `assize add KIND --field value ...` (`assize add --kinds` lists them).
    Add(AddArgs),
    /// Record every entry of a batch file (TOML) in one transaction: all or none.
    Import(ImportArgs),
    /// Pair a balance printout with a run's keyed weighings and record the captured readings.
    Capture(CaptureArgs),
    /// Correct values of an earlier lab entry, with a reason; the original stays in the ledger.
    Correct(CorrectArgs),
    /// Recompute a run from its raw records: each replicate, mean, RSD, uncertainty budget.
    Recompute(RecomputeArgs),
    /// Validate: replay the chain, recompute every run, apply every rule, list the findings.
    Replay(ReplayArgs),
    /// List every finding code with its severity, basis and what the reviewer does.
    Codes,
    /// Everything a reviewer must look at for one run's result, and the report's SHA-256.
    Exceptions(ExceptionsArgs),
    /// Where a run's result came from, down to every raw reading, with who, when and every change.
    Explain(ExplainArgs),
    /// Every version of one record (as written, then each correction) and every sign-off on it.
    History(HistoryArgs),
    /// Evidence bundles: one result's entries with proofs under a signed checkpoint, checked offline.
    #[command(subcommand)]
    Evidence(EvidenceCommand),
    /// Write one run's review dossier as a self-contained HTML page (prints, opens offline).
    Dossier(DossierArgs),
    /// Sign a run (or its result) as reviewed or approved (reviewer or QA).
    Sign(SignArgs),
    /// Summarize a period for the quality unit: rates, roles and keys, results to re-review.
    Periodic(PeriodicArgs),
    /// Build the demo lab's ledger from samples/demo/, validate it and write a review dossier.
    Demo(DemoArgs),
}

/// `assize replay`
#[derive(Debug, Args)]
pub struct ReplayArgs {
    /// Only this run (integrity findings are always shown).
    #[arg(long, value_name = "RUN", conflicts_with = "sample")]
    pub run: Option<String>,
    /// Only the runs on this sample.
    #[arg(long, value_name = "SAMPLE")]
    pub sample: Option<String>,
    /// Exit with 1 when a finding of this severity or above stands: blocking, review or periodic.
    #[arg(long, value_name = "SEVERITY", default_value = "review")]
    pub fail_on: String,
    /// Signature-checking threads (0: one per core).
    #[arg(long, default_value_t = 0)]
    pub threads: usize,
}

/// `assize exceptions`
#[derive(Debug, Args)]
pub struct ExceptionsArgs {
    /// Run id.
    pub run: String,
}

/// `assize history`
#[derive(Debug, Args)]
pub struct HistoryArgs {
    /// Sequence number of the entry (or, with --run, leave out).
    #[arg(required_unless_present = "run", conflicts_with = "run")]
    pub entry: Option<u64>,
    /// The run with this id (its run entry).
    #[arg(long, value_name = "RUN")]
    pub run: Option<String>,
}

/// `assize evidence ...`
#[derive(Debug, Subcommand)]
pub enum EvidenceCommand {
    /// Write the evidence bundle of one run's result (CBOR, signed by you, never overwritten
    /// without --force).
    Export(EvidenceExportArgs),
    /// Check a bundle without the ledger and explain its result from it.
    Check(EvidenceCheckArgs),
}

/// `assize evidence export`
#[derive(Debug, Args)]
pub struct EvidenceExportArgs {
    /// Run id (or, with --entry, leave out).
    #[arg(required_unless_present = "entry", conflicts_with = "entry")]
    pub run: Option<String>,
    /// The run this entry belongs to (its result, a weighing, the run entry itself).
    #[arg(long, value_name = "SEQ")]
    pub entry: Option<u64>,
    /// Bundle file to write (written whole or not at all).
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
    /// Replace FILE if it exists.
    #[arg(long)]
    pub force: bool,
    /// Key file of the person signing the bundle and its checkpoint.
    #[arg(long, env = "ASSIZE_KEY", value_name = "FILE")]
    pub key: PathBuf,
}

/// `assize evidence check`
#[derive(Debug, Args)]
pub struct EvidenceCheckArgs {
    /// The bundle file.
    pub file: PathBuf,
}

/// `assize explain`
#[derive(Debug, Args)]
pub struct ExplainArgs {
    /// Run id (or, with --entry, leave out).
    #[arg(required_unless_present = "entry", conflicts_with = "entry")]
    pub run: Option<String>,
    /// Explain the run this entry belongs to (its result, a weighing, the run entry itself).
    #[arg(long, value_name = "SEQ")]
    pub entry: Option<u64>,
}

/// `assize dossier`
#[derive(Debug, Args)]
pub struct DossierArgs {
    /// Run id (or, with --entry, leave out).
    #[arg(required_unless_present = "entry", conflicts_with = "entry")]
    pub run: Option<String>,
    /// The run this entry belongs to (its result, a weighing, the run entry itself).
    #[arg(long, value_name = "SEQ")]
    pub entry: Option<u64>,
    /// HTML file to write (written whole or not at all).
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
    /// Replace FILE if it exists.
    #[arg(long)]
    pub force: bool,
    /// Chart every standardization of the titrant up to the ledger head, not only up to the run.
    #[arg(long)]
    pub history_to_head: bool,
}

/// `assize sign`
#[derive(Debug, Args)]
pub struct SignArgs {
    /// Run id.
    pub run: String,
    /// What the signature means: reviewed or approved.
    #[arg(long, value_name = "MEANING")]
    pub meaning: String,
    /// Sign the run's reported result rather than the run.
    #[arg(long)]
    pub result: bool,
    /// A comment kept with the signature.
    #[arg(long, default_value = "")]
    pub comment: String,
    /// Why approval is given while blocking findings stand (approval only).
    #[arg(long, default_value = "")]
    pub justification: String,
    /// SHA-256 of the exception report you read (`assize exceptions` prints it); refused if
    /// the report has changed since.
    #[arg(long, value_name = "HEX")]
    pub report_sha256: Option<String>,
    /// Key file of the person signing.
    #[arg(long, env = "ASSIZE_KEY", value_name = "FILE")]
    pub key: PathBuf,
}

/// `assize periodic`
#[derive(Debug, Args)]
pub struct PeriodicArgs {
    /// First day of the period (YYYY-MM-DD, UTC).
    #[arg(long, value_name = "DATE")]
    pub from: String,
    /// Last day of the period (YYYY-MM-DD, UTC), included.
    #[arg(long, value_name = "DATE")]
    pub to: String,
    /// Seed of the random choice of results to re-review (the same seed picks the same results).
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// How many results to pick at random.
    #[arg(long, default_value_t = 3)]
    pub random: usize,
}

/// `assize adopt`
#[derive(Debug, Args)]
pub struct AdoptArgs {
    /// A method definition (TOML).
    #[arg(
        long,
        value_name = "FILE",
        required_unless_present = "policy",
        conflicts_with = "policy"
    )]
    pub method: Option<PathBuf>,
    /// The lab policy (TOML).
    #[arg(long, value_name = "FILE")]
    pub policy: Option<PathBuf>,
    /// Key file of the QA person adopting it.
    #[arg(long, env = "ASSIZE_KEY", value_name = "FILE")]
    pub key: PathBuf,
}

/// `assize add`
#[derive(Debug, Args)]
pub struct AddArgs {
    /// List the kinds of record and their fields.
    #[arg(long)]
    pub kinds: bool,
    /// Key file of the person recording the entry (may also be given among the fields).
    #[arg(long, env = "ASSIZE_KEY", value_name = "FILE")]
    pub key: Option<PathBuf>,
    /// Kind of record, e.g. weighing, reference-lot, run.
    #[arg(required_unless_present = "kinds")]
    pub kind: Option<String>,
    /// The record's fields as `--name value` (a flag with no value means true).
    #[arg(
        trailing_var_arg = true,
        allow_hyphen_values = true,
        value_name = "FIELDS"
    )]
    pub fields: Vec<String>,
}

/// `assize correct`
#[derive(Debug, Args)]
pub struct CorrectArgs {
    /// Sequence number of the entry to correct.
    pub seq: u64,
    /// Why the value changes (mandatory).
    #[arg(long)]
    pub reason: String,
    /// Key file of the person correcting.
    #[arg(long, env = "ASSIZE_KEY", value_name = "FILE")]
    pub key: Option<PathBuf>,
    /// The fields to change, as `--name value`.
    #[arg(
        trailing_var_arg = true,
        allow_hyphen_values = true,
        value_name = "FIELDS"
    )]
    pub fields: Vec<String>,
}

/// `assize import`
#[derive(Debug, Args)]
pub struct ImportArgs {
    /// Batch file: `[[record]]` tables with a `kind` field, in the order to enter them.
    pub file: PathBuf,
    /// Key file of the person recording the entries.
    #[arg(long, env = "ASSIZE_KEY", value_name = "FILE")]
    pub key: PathBuf,
}

/// `assize capture`
#[derive(Debug, Args)]
pub struct CaptureArgs {
    /// Balance printout: one reading a line (UTC time, balance id, digits, unit, S or U).
    pub file: PathBuf,
    /// The run whose keyed weighings the printed readings belong to.
    #[arg(long, value_name = "RUN")]
    pub run: String,
    /// Show the pairing and record nothing (no key needed).
    #[arg(long)]
    pub dry_run: bool,
    /// Key file of the analyst importing the printout, who signs every captured weighing.
    #[arg(
        long,
        env = "ASSIZE_KEY",
        value_name = "FILE",
        required_unless_present = "dry_run"
    )]
    pub key: Option<PathBuf>,
}

/// `assize recompute`
#[derive(Debug, Args)]
pub struct RecomputeArgs {
    /// Run id.
    pub run: String,
}

/// `assize key ...`
#[derive(Debug, Subcommand)]
pub enum KeyCommand {
    /// Generate a key pair and seal the private key in a passphrase-protected file (mode 0600).
    New(KeyNewArgs),
    /// Show whose key a file holds and its public key (no passphrase needed).
    Show(KeyShowArgs),
}

/// `assize key new`
#[derive(Debug, Args)]
pub struct KeyNewArgs {
    /// Person id the key is for (lowercase letters, digits, '.', '-', '_').
    #[arg(long)]
    pub person: String,
    /// Where to write the key file; an existing file is never overwritten.
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
    /// Memory for the passphrase key derivation, in MiB (at least 8).
    #[arg(long, default_value_t = 64, value_name = "MIB")]
    pub kdf_memory_mib: u32,
}

/// `assize key show`
#[derive(Debug, Args)]
pub struct KeyShowArgs {
    /// The key file.
    pub file: PathBuf,
}

/// `assize create`
#[derive(Debug, Args)]
pub struct CreateArgs {
    /// Name of the lab.
    #[arg(long)]
    pub lab: String,
    /// Full name of the first QA person (the key's owner).
    #[arg(long)]
    pub name: String,
    /// That person's key file.
    #[arg(long, env = "ASSIZE_KEY", value_name = "FILE")]
    pub key: PathBuf,
}

/// `assize person ...`
#[derive(Debug, Subcommand)]
pub enum PersonCommand {
    /// Enrol a person with a role and a first public key (signed by QA).
    Enrol(EnrolArgs),
    /// Enrol a further key for a person (signed by QA).
    AddKey(AddKeyArgs),
    /// Revoke a key from now on (signed by QA or the key's owner).
    RevokeKey(RevokeKeyArgs),
    /// Change a person's role from now on (signed by QA, not for oneself).
    ChangeRole(ChangeRoleArgs),
    /// List enrolled people, their roles and keys.
    List,
}

/// Where a public key comes from.
#[derive(Debug, Args)]
#[group(required = true, multiple = false)]
pub struct PublicKeySource {
    /// The public key as 64 hex digits.
    #[arg(long, value_name = "HEX")]
    pub public_key: Option<String>,
    /// Read the public key from the person's key file (no passphrase needed).
    #[arg(long, value_name = "FILE")]
    pub from_key_file: Option<PathBuf>,
}

/// `assize person enrol`
#[derive(Debug, Args)]
pub struct EnrolArgs {
    /// Person id to enrol.
    #[arg(long)]
    pub id: String,
    /// Full name.
    #[arg(long)]
    pub name: String,
    /// analyst, reviewer or qa.
    #[arg(long)]
    pub role: String,
    #[command(flatten)]
    pub public_key: PublicKeySource,
    /// Key file of the QA person signing the enrolment.
    #[arg(long, env = "ASSIZE_KEY", value_name = "FILE")]
    pub key: PathBuf,
}

/// `assize person add-key`
#[derive(Debug, Args)]
pub struct AddKeyArgs {
    /// Person id.
    #[arg(long)]
    pub id: String,
    #[command(flatten)]
    pub public_key: PublicKeySource,
    /// Why the key is added.
    #[arg(long)]
    pub reason: String,
    /// Key file of the QA person signing.
    #[arg(long, env = "ASSIZE_KEY", value_name = "FILE")]
    pub key: PathBuf,
}

/// `assize person revoke-key`
#[derive(Debug, Args)]
pub struct RevokeKeyArgs {
    /// Person id whose key is revoked.
    #[arg(long)]
    pub id: String,
    /// The key to revoke, 64 hex digits.
    #[arg(long, value_name = "HEX")]
    pub public_key: String,
    /// Why (lost, compromised, left the lab).
    #[arg(long)]
    pub reason: String,
    /// Key file of the person signing (QA or the key's owner).
    #[arg(long, env = "ASSIZE_KEY", value_name = "FILE")]
    pub key: PathBuf,
}

/// `assize person change-role`
#[derive(Debug, Args)]
pub struct ChangeRoleArgs {
    /// Person id.
    #[arg(long)]
    pub id: String,
    /// New role: analyst, reviewer or qa.
    #[arg(long)]
    pub role: String,
    /// Why.
    #[arg(long)]
    pub reason: String,
    /// Key file of the QA person signing.
    #[arg(long, env = "ASSIZE_KEY", value_name = "FILE")]
    pub key: PathBuf,
}

/// `assize note`
#[derive(Debug, Args)]
pub struct NoteArgs {
    /// The note text.
    #[arg(long)]
    pub text: String,
    /// Sequence numbers of entries the note refers to.
    #[arg(long = "refers-to", value_name = "SEQ")]
    pub refers_to: Vec<u64>,
    /// Key file of the author.
    #[arg(long, env = "ASSIZE_KEY", value_name = "FILE")]
    pub key: PathBuf,
}

/// `assize entries ...`
#[derive(Debug, Subcommand)]
pub enum EntriesCommand {
    /// List entries, oldest first.
    List(ListArgs),
    /// Show one entry in full, with its decoded body.
    Show(ShowArgs),
}

/// `assize entries list`
#[derive(Debug, Args)]
pub struct ListArgs {
    /// Only this kind.
    #[arg(long)]
    pub kind: Option<String>,
    /// Only this author.
    #[arg(long)]
    pub author: Option<String>,
    /// Only entries after this sequence number.
    #[arg(long, default_value_t = 0, value_name = "SEQ")]
    pub after: u64,
    /// At most this many entries.
    #[arg(long, default_value_t = 100)]
    pub limit: usize,
}

/// `assize entries show`
#[derive(Debug, Args)]
pub struct ShowArgs {
    /// Sequence number.
    pub seq: u64,
}

/// `assize verify`
#[derive(Debug, Args)]
pub struct VerifyArgs {
    /// A checkpoint file the ledger must still extend (repeatable).
    #[arg(long = "checkpoint", value_name = "FILE")]
    pub checkpoints: Vec<PathBuf>,
    /// A checkpoint code from the logbook the ledger must still extend (repeatable).
    #[arg(long = "code", value_name = "CODE")]
    pub codes: Vec<String>,
    /// Check every signature singly with strict verification instead of in batches.
    #[arg(long)]
    pub strict: bool,
    /// Signature-checking threads (0: one per core).
    #[arg(long, default_value_t = 0)]
    pub threads: usize,
}

/// `assize checkpoint ...`
#[derive(Debug, Subcommand)]
pub enum CheckpointCommand {
    /// Sign a checkpoint of the current head and write it to a file.
    Write(CheckpointWriteArgs),
    /// Check that the ledger still extends a checkpoint file or code.
    Check(CheckpointCheckArgs),
    /// Prove that a later checkpoint extends an earlier one (RFC 9162 consistency proof).
    Extends(CheckpointExtendsArgs),
}

/// `assize checkpoint extends`
#[derive(Debug, Args)]
pub struct CheckpointExtendsArgs {
    /// The earlier checkpoint file (version 2).
    pub earlier: PathBuf,
    /// The later checkpoint file (version 2).
    pub later: PathBuf,
}

/// `assize checkpoint write`
#[derive(Debug, Args)]
pub struct CheckpointWriteArgs {
    /// File to write (never overwritten).
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
    /// Key file of the person signing the checkpoint.
    #[arg(long, env = "ASSIZE_KEY", value_name = "FILE")]
    pub key: PathBuf,
}

/// `assize checkpoint check`
#[derive(Debug, Args)]
#[group(required = true, multiple = false)]
pub struct CheckpointCheckArgs {
    /// A checkpoint file.
    #[arg(value_name = "FILE")]
    pub file: Option<PathBuf>,
    /// A checkpoint code, e.g. 42-9f86-d081-884c-7d65.
    #[arg(long, value_name = "CODE")]
    pub code: Option<String>,
}

/// `assize demo`
#[derive(Debug, Args)]
pub struct DemoArgs {
    /// Directory for the demo ledger, keys, checkpoint and dossier (cleared of an earlier demo).
    #[arg(long, default_value = "assize-demo", value_name = "DIR")]
    pub dir: PathBuf,
}
