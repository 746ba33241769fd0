//! The one error type of the ledger crate: every way an operation can fail to run.
//!
//! Each variant carries the facts a caller needs to explain the failure (paths, sequence
//! numbers, values). Problems found *in* a ledger during replay are not errors; they are
//! [`crate::Problem`] values in a report.

use std::path::PathBuf;

/// Why a ledger operation could not be carried out.
#[derive(Debug)]
pub enum LedgerError {
    /// No file exists at the path given as a ledger.
    LedgerMissing {
        /// Path that was looked at.
        path: PathBuf,
    },
    /// A file already exists where a new ledger or key file was to be created.
    AlreadyExists {
        /// Path that is taken.
        path: PathBuf,
    },
    /// The file exists but is not an assize ledger.
    NotALedger {
        /// Path of the file.
        path: PathBuf,
        /// What was found instead.
        detail: String,
    },
    /// The ledger was written by a newer version of assize.
    NewerSchema {
        /// Schema version stored in the file.
        found: i64,
        /// Highest schema version this build understands.
        supported: i64,
    },
    /// The ledger has no entries, so it was never opened.
    Empty,
    /// SQLite reported an error.
    Storage {
        /// What was being done.
        action: &'static str,
        /// The SQLite error.
        source: rusqlite::Error,
    },
    /// The disk is full, or the file may not grow.
    StorageFull {
        /// What was being done.
        action: &'static str,
    },
    /// Reading or writing a file failed.
    Io {
        /// Path involved.
        path: PathBuf,
        /// The I/O error.
        source: std::io::Error,
    },
    /// A body or key file could not be encoded or decoded.
    Codec {
        /// What was being encoded or decoded.
        what: String,
        /// Why it failed.
        reason: String,
    },
    /// A key file could not be used.
    KeyFile {
        /// Path of the key file.
        path: PathBuf,
        /// What is wrong with it.
        reason: String,
    },
    /// The passphrase does not open the key file.
    WrongPassphrase {
        /// Path of the key file.
        path: PathBuf,
    },
    /// The entry may not be appended: the registry or the kind rules refuse it.
    Refused {
        /// Plain-language reason.
        reason: String,
    },
    /// An input value is malformed.
    BadInput {
        /// Which input.
        what: String,
        /// What is wrong with it.
        reason: String,
    },
    /// The system clock reads earlier than the last entry's record time.
    ClockBehind {
        /// Record time of the current head.
        head_time: crate::Timestamp,
        /// What the clock reads now.
        now: crate::Timestamp,
    },
    /// A referenced entry hash is not in the ledger.
    UnknownReference {
        /// The missing hash.
        hash: crate::EntryHash,
    },
    /// No entry has this sequence number.
    NoSuchEntry {
        /// The sequence number asked for.
        seq: u64,
    },
    /// Another writer appended after the caller prepared its entries from the ledger as it
    /// stood (see [`crate::Ledger::append_batch_after`]); nothing was appended.
    HeadMoved {
        /// The last entry the caller prepared against (0: an empty ledger).
        expected_seq: u64,
        /// The last entry found under the write lock.
        found_seq: u64,
    },
    /// The ledger file predates the merkle tree (schema version 1) and was opened read-only,
    /// so its tree has not been built yet.
    TreeNotBuilt {
        /// Path of the ledger file.
        path: PathBuf,
    },
}

impl std::fmt::Display for LedgerError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        use LedgerError::*;
        match self {
            LedgerMissing { path } => write!(f, "no ledger at {}", path.display()),
            AlreadyExists { path } => write!(f, "{} already exists", path.display()),
            NotALedger { path, detail } => {
                write!(f, "{} is not an assize ledger ({detail})", path.display())
            }
            NewerSchema { found, supported } => write!(
                f,
                "ledger schema version {found} is newer than this build supports (up to {supported})"
            ),
            Empty => write!(f, "the ledger has no entries"),
            Storage { action, source } => write!(f, "storage error while {action}: {source}"),
            StorageFull { action } => {
                write!(f, "could not write while {action}: disk full or file size limit reached")
            }
            Io { path, source } => write!(f, "{}: {source}", path.display()),
            Codec { what, reason } => write!(f, "cannot encode or decode {what}: {reason}"),
            KeyFile { path, reason } => write!(f, "key file {}: {reason}", path.display()),
            WrongPassphrase { path } => {
                write!(f, "wrong passphrase for key file {}", path.display())
            }
            Refused { reason } => write!(f, "refused: {reason}"),
            BadInput { what, reason } => write!(f, "bad {what}: {reason}"),
            ClockBehind { head_time, now } => write!(
                f,
                "system clock reads {now}, earlier than the last entry's record time {head_time}"
            ),
            UnknownReference { hash } => write!(f, "referenced entry {hash} is not in the ledger"),
            NoSuchEntry { seq } => write!(f, "no entry with sequence number {seq}"),
            HeadMoved {
                expected_seq,
                found_seq,
            } => write!(
                f,
                "the ledger changed while this was prepared: its last entry was {expected_seq}, and is now {found_seq}"
            ),
            TreeNotBuilt { path } => write!(
                f,
                "{} has no merkle tree yet (schema version 1): open it read-write once, for example with any append, to build it",
                path.display()
            ),
        }
    }
}

impl std::error::Error for LedgerError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            LedgerError::Storage { source, .. } => Some(source),
            LedgerError::Io { source, .. } => Some(source),
            _ => None,
        }
    }
}

/// Result alias used throughout the crate.
pub type Result<T> = std::result::Result<T, LedgerError>;

/// Wraps a SQLite error with what was being done, recognising a full disk.
pub(crate) fn storage(action: &'static str) -> impl FnOnce(rusqlite::Error) -> LedgerError {
    move |source| {
        use rusqlite::ffi::ErrorCode;
        let full = matches!(
            source.sqlite_error_code(),
            Some(ErrorCode::DiskFull) | Some(ErrorCode::SystemIoFailure)
        ) && is_full_io(&source);
        if full {
            LedgerError::StorageFull { action }
        } else {
            LedgerError::Storage { action, source }
        }
    }
}

fn is_full_io(source: &rusqlite::Error) -> bool {
    match source {
        rusqlite::Error::SqliteFailure(e, _) => {
            e.code == rusqlite::ffi::ErrorCode::DiskFull
                || e.extended_code == rusqlite::ffi::SQLITE_IOERR_WRITE
                || e.extended_code == rusqlite::ffi::SQLITE_IOERR_TRUNCATE
                || e.extended_code == rusqlite::ffi::SQLITE_IOERR_SHMSIZE
        }
        _ => false,
    }
}
