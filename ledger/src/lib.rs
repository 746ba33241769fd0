//! Append-only, hash-chained, Ed25519-signed ledger stored in one SQLite file.
//!
//! This crate owns the entry envelope and its exact body bytes, the chain hash, signatures,
//! encrypted key files, the registry of persons and keys (itself kept as ledger entries),
//! SQLite storage with atomic durable appends, an RFC 9162 Merkle tree over the entry hashes
//! kept beside the chain (tree heads, inclusion and consistency proofs), streaming integrity
//! replay and signed checkpoints of the head. It knows nothing of chemistry: entry kinds other
//! than its own are opaque strings whose signing rules the caller supplies through
//! [`KindRules`]. It never prints and never issues UPDATE or DELETE against stored entries or
//! tree nodes.
#![forbid(unsafe_code)]
#![deny(missing_docs)]

pub mod bundle;
pub mod checkpoint;
pub mod clock;
pub mod codec;
pub mod entry;
pub mod error;
pub mod hash;
pub mod keyfile;
pub mod kinds;
pub mod ledger;
pub mod merkle;
pub mod records;
pub mod registry;
pub mod replay;
pub mod signing;
pub mod store;
pub mod time;

pub use checkpoint::Checkpoint;
pub use clock::{Clock, FixedClock, SystemClock};
pub use entry::{Draft, Entry};
pub use error::LedgerError;
pub use hash::EntryHash;
pub use keyfile::{KdfCost, KeyFileInfo};
pub use kinds::{KindRule, KindRules, Labeller, Role, RoleSet, SignatureRule};
pub use ledger::{Ledger, OpenMode};
pub use merkle::{MemoryTree, SubtreeSource, TreeHead};
pub use records::Record;
pub use registry::{AuthorityIssue, Person, Registry};
pub use replay::{IntegrityReport, Problem, ReplayOptions};
pub use signing::{PublicKey, Signer};
pub use time::Timestamp;
