//! Errors as the user sees them: what went wrong, and a `hint:` line saying what to do next.

use assize_ledger::LedgerError;

/// A command that could not be carried out.
#[derive(Debug)]
pub struct Failure {
    message: String,
    hint: Option<String>,
    closed_pipe: bool,
}

impl Failure {
    /// A failure with a message and a hint.
    pub fn new(message: impl Into<String>, hint: impl Into<String>) -> Self {
        Failure {
            message: message.into(),
            hint: Some(hint.into()),
            closed_pipe: false,
        }
    }

    /// The same failure, its message prefixed with where it happened.
    pub fn within(mut self, place: &str) -> Self {
        self.message = format!("{place}: {}", self.message);
        self
    }

    /// Whether the failure is only stdout being closed (e.g. piped into `head`).
    pub fn is_closed_pipe(&self) -> bool {
        self.closed_pipe
    }

    /// `error: ...` and `hint: ...` lines.
    pub fn render(&self) -> String {
        let mut text = format!("error: {}\n", self.message);
        if let Some(hint) = &self.hint {
            text.push_str(&format!("hint: {hint}\n"));
        }
        text
    }
}

impl From<std::io::Error> for Failure {
    fn from(e: std::io::Error) -> Self {
        Failure {
            closed_pipe: e.kind() == std::io::ErrorKind::BrokenPipe,
            message: format!("cannot write output: {e}"),
            hint: None,
        }
    }
}

impl From<LedgerError> for Failure {
    fn from(e: LedgerError) -> Self {
        let hint = hint_for(&e);
        Failure {
            message: e.to_string(),
            hint: Some(hint.to_string()),
            closed_pipe: false,
        }
    }
}

fn hint_for(e: &LedgerError) -> &'static str {
    use LedgerError::*;
    match e {
        LedgerMissing { .. } => "check the --ledger path, or start one with `assize create`",
        AlreadyExists { .. } => "choose another path; assize never overwrites a ledger or key file",
        NotALedger { .. } => "check the --ledger path; the file was not created by assize",
        NewerSchema { .. } => "use the assize version that wrote this ledger, or a newer one",
        Empty => "the ledger holds nothing yet; it is opened by `assize create`",
        Storage { .. } => "nothing was written; check the file is readable and writable and not on a network share",
        StorageFull { .. } => "nothing was written; free disk space (or raise the file size limit) and try again",
        Io { .. } => "check the path exists and is readable",
        Codec { .. } => "the data may be damaged; run `assize verify`",
        KeyFile { .. } => "check the --key path points to a key file made by `assize key new`, with mode 0600",
        WrongPassphrase { .. } => "retype the passphrase; for scripts pass --passphrase-file FILE or --passphrase-env VAR",
        Refused { .. } => "nothing was written; `assize person list` shows who holds which role and key",
        BadInput { .. } => "nothing was written; correct the value and run the command again",
        ClockBehind { .. } => "nothing was written; correct the system clock (UTC) before recording",
        UnknownReference { .. } => "refer only to entries already in this ledger (`assize entries list`)",
        NoSuchEntry { .. } => "`assize entries list` shows the sequence numbers in use",
        HeadMoved { .. } => "nothing was written; someone recorded at the same time, so run the command again",
        TreeNotBuilt { .. } => {
            "open the ledger for writing once (any command that records, e.g. `assize note`) to build its tree, then try again"
        }
    }
}
