//! Evidence bundles: chosen entries of a ledger, each with its RFC 9162 inclusion proof under a
//! signed version-2 checkpoint, in one CBOR file that can be checked without the ledger.
//!
//! A bundle holds the checkpoint (ledger id, head, tree root over its entries, signer), the
//! entries asked for (the caller decides which: the ledger knows nothing of what they mean),
//! every registry entry up to the checkpoint (so whose key signed what can be worked out
//! offline), one inclusion proof per entry, the entry the bundle is about, a short note, and
//! the signer's signature over all of that. Opening a bundle checks, without the ledger: the
//! exact CBOR encoding, the bundle signature and the checkpoint signature (same key), that the
//! key was enrolled for the signer and not revoked by the checkpoint, that the registry entries
//! start at the ledger's opening entry of the checkpoint's ledger id and replay cleanly, and
//! that every entry's recomputed hash is a leaf of the checkpoint's tree at its sequence number.
//! Any changed byte therefore fails one of these. Each proof holds about log2(ledger size)
//! hashes, so a bundle grows with the entries chosen, not with the ledger.
//!
//! What a bundle cannot show: that nothing was left out (a later correction, say). It proves
//! that what it holds is in the ledger the checkpoint saw; the ledger itself (with the same
//! checkpoint) shows the rest.
//!
//! Signed bytes: `"assize-bundle1\0\0"` ‖ SHA-256(CBOR of the contents).

use crate::checkpoint::Checkpoint;
use crate::codec;
use crate::entry::Entry;
use crate::error::Result;
use crate::kinds::REGISTRY_KINDS;
use crate::ledger::{apply_stored_registry_entries, Ledger};
use crate::merkle::{leaf_hash, verify_inclusion};
use crate::registry::Registry;
use crate::signing::verify_strict;
use crate::{EntryHash, LedgerError, PublicKey, Signer, Timestamp};
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};
use std::collections::BTreeSet;

/// Format number written into every bundle.
pub const BUNDLE_FORMAT: u32 = 1;
/// Domain tag of bundle signatures.
pub const BUNDLE_TAG: &[u8; 16] = b"assize-bundle1\0\0";

/// 32 bytes written as a CBOR byte string.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
struct Bytes32(#[serde(with = "crate::hash::byte_array")] [u8; 32]);

/// 64 bytes written as a CBOR byte string.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
struct Bytes64(#[serde(with = "crate::hash::byte_array")] [u8; 64]);

/// The checkpoint as the bundle stores it.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
struct StoredCheckpoint {
    ledger_id: Bytes16,
    seq: u64,
    head: EntryHash,
    tree_root: Bytes32,
    made_at: i64,
    by: String,
    key: Bytes32,
    signature: Bytes64,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
struct Bytes16(#[serde(with = "crate::hash::byte_array")] [u8; 16]);

/// One entry as the bundle stores it: every hashed and signed field, and its proof. The hash
/// is not stored; it is recomputed.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
struct StoredEntry {
    seq: u64,
    prev_hash: EntryHash,
    record_time: i64,
    author: String,
    kind: String,
    references: Vec<EntryHash>,
    #[serde(with = "byte_vec")]
    body: Vec<u8>,
    signer: Option<Bytes32>,
    signature: Option<Bytes64>,
    proof: Vec<Bytes32>,
}

/// Everything the bundle signature covers.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
struct Contents {
    format: u32,
    subject: u64,
    note: String,
    checkpoint: StoredCheckpoint,
    entries: Vec<StoredEntry>,
}

/// The file.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
struct BundleFile {
    contents: Contents,
    signature: Bytes64,
}

/// A bundle that passed every check of [`open_bundle`].
#[derive(Clone, Debug)]
pub struct OpenedBundle {
    /// The entry the bundle is about.
    pub subject: u64,
    /// What the bundle is for, as its maker wrote it.
    pub note: String,
    /// The checkpoint the entries are proven under (version 2, signature checked).
    pub checkpoint: Checkpoint,
    /// The entries, in sequence order, with their recomputed hashes.
    pub entries: Vec<Entry>,
    /// People and keys as the bundled registry entries give them at the checkpoint.
    pub registry: Registry,
    /// The number of proof hashes of the longest proof (about log2 of the checkpoint's size).
    pub longest_proof: usize,
}

/// Why a bundle was refused.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum BundleError {
    /// The bytes are not a bundle in its one encoding.
    Malformed(String),
    /// A format this build does not read.
    Format(u32),
    /// The bundle's own signature does not verify with the checkpoint's key.
    BundleSignature,
    /// The checkpoint's signature does not verify.
    CheckpointSignature,
    /// The checkpoint's key was not an active key of its signer.
    CheckpointSigner(String),
    /// An entry is out of order, beyond the checkpoint, or its proof fails.
    Entry {
        /// Its sequence number.
        seq: u64,
        /// What is wrong.
        reason: String,
    },
    /// The registry entries do not replay into the checkpoint's ledger.
    Registry(String),
}

impl std::fmt::Display for BundleError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            BundleError::Malformed(why) => write!(f, "not an assize evidence bundle: {why}"),
            BundleError::Format(n) => write!(
                f,
                "bundle format {n} is not one this build reads (format {BUNDLE_FORMAT})"
            ),
            BundleError::BundleSignature => write!(
                f,
                "the bundle's signature does not verify: its contents were changed after it was made"
            ),
            BundleError::CheckpointSignature => {
                write!(f, "the bundle's checkpoint signature does not verify")
            }
            BundleError::CheckpointSigner(why) => write!(f, "the checkpoint's signer: {why}"),
            BundleError::Entry { seq, reason } => write!(f, "entry {seq}: {reason}"),
            BundleError::Registry(why) => write!(f, "the bundled registry entries: {why}"),
        }
    }
}

impl std::error::Error for BundleError {}

impl Ledger {
    /// Makes an evidence bundle of the entries `seqs` (and every registry entry), about the
    /// entry `subject`, under a new version-2 checkpoint signed by `signer`, who also signs the
    /// bundle. Refused on a file without its tree (open it read-write once).
    pub fn export_bundle(
        &mut self,
        seqs: &BTreeSet<u64>,
        subject: u64,
        note: &str,
        signer: &Signer,
    ) -> Result<Vec<u8>> {
        self.store().require_tree()?;
        let checkpoint = self.checkpoint(signer)?;
        let tree_root = checkpoint.tree_root.ok_or(LedgerError::TreeNotBuilt {
            path: self.store().path().to_path_buf(),
        })?;
        let mut chosen: BTreeSet<u64> = seqs.clone();
        chosen.insert(subject);
        for entry in self.store().entries_of_kinds_after(&REGISTRY_KINDS, 0)? {
            if entry.seq <= checkpoint.seq {
                chosen.insert(entry.seq);
            }
        }
        let mut entries = Vec::with_capacity(chosen.len());
        for seq in chosen {
            if seq == 0 || seq > checkpoint.seq {
                return Err(LedgerError::BadInput {
                    what: "bundle entries".into(),
                    reason: format!(
                        "entry {seq} is not in the ledger (its entries are 1 to {})",
                        checkpoint.seq
                    ),
                });
            }
            let entry = self.entry(seq)?;
            let proof = self.inclusion_proof(seq, checkpoint.seq)?;
            entries.push(StoredEntry {
                seq,
                prev_hash: entry.prev_hash,
                record_time: entry.record_time.0,
                author: entry.author,
                kind: entry.kind,
                references: entry.references,
                body: entry.body,
                signer: entry.signer.map(|k| Bytes32(k.0)),
                signature: entry.signature.map(Bytes64),
                proof: proof.into_iter().map(Bytes32).collect(),
            });
        }
        let contents = Contents {
            format: BUNDLE_FORMAT,
            subject,
            note: note.to_string(),
            checkpoint: StoredCheckpoint {
                ledger_id: Bytes16(checkpoint.ledger_id),
                seq: checkpoint.seq,
                head: checkpoint.head,
                tree_root: Bytes32(tree_root),
                made_at: checkpoint.made_at.0,
                by: checkpoint.by.clone(),
                key: Bytes32(checkpoint.key.0),
                signature: Bytes64(checkpoint.signature),
            },
            entries,
        };
        let signature = Bytes64(signer.sign_bytes(&signed_bytes(&contents)?));
        codec::encode(&BundleFile {
            contents,
            signature,
        })
        .map_err(|e| LedgerError::Codec {
            what: "evidence bundle".into(),
            reason: e.0,
        })
    }
}

fn signed_bytes(contents: &Contents) -> Result<Vec<u8>> {
    let encoded = codec::encode(contents).map_err(|e| LedgerError::Codec {
        what: "evidence bundle".into(),
        reason: e.0,
    })?;
    let mut bytes = BUNDLE_TAG.to_vec();
    bytes.extend_from_slice(&Sha256::digest(&encoded));
    Ok(bytes)
}

/// Checks a bundle without the ledger (see the module notes) and returns what it holds.
pub fn open_bundle(bytes: &[u8]) -> std::result::Result<OpenedBundle, BundleError> {
    let file: BundleFile = codec::decode_exact(bytes).map_err(|_| {
        BundleError::Malformed(format!(
            "its {} bytes do not decode as one, in its one encoding",
            bytes.len()
        ))
    })?;
    let contents = file.contents;
    if contents.format != BUNDLE_FORMAT {
        return Err(BundleError::Format(contents.format));
    }
    let stored = &contents.checkpoint;
    let checkpoint = Checkpoint {
        ledger_id: stored.ledger_id.0,
        seq: stored.seq,
        head: stored.head,
        made_at: Timestamp(stored.made_at),
        by: stored.by.clone(),
        key: PublicKey(stored.key.0),
        tree_root: Some(stored.tree_root.0),
        signature: stored.signature.0,
    };
    let message = signed_bytes(&contents).map_err(|e| BundleError::Malformed(e.to_string()))?;
    if !verify_strict(&checkpoint.key, &message, &file.signature.0) {
        return Err(BundleError::BundleSignature);
    }
    if !checkpoint.signature_valid() {
        return Err(BundleError::CheckpointSignature);
    }
    let size = checkpoint.seq;
    let root = stored.tree_root.0;
    let mut entries = Vec::with_capacity(contents.entries.len());
    let mut longest_proof = 0;
    let mut previous = 0;
    for stored in contents.entries {
        let seq = stored.seq;
        let fail = |reason: String| BundleError::Entry { seq, reason };
        if seq <= previous {
            return Err(fail(format!("comes after entry {previous}")));
        }
        if seq > size {
            return Err(fail(format!("is beyond the checkpoint at {size}")));
        }
        previous = seq;
        let mut entry = Entry {
            seq,
            prev_hash: stored.prev_hash,
            record_time: Timestamp(stored.record_time),
            author: stored.author,
            kind: stored.kind,
            references: stored.references,
            body: stored.body,
            signer: stored.signer.map(|k| PublicKey(k.0)),
            signature: stored.signature.map(|s| s.0),
            hash: EntryHash([0; 32]),
        };
        entry.hash = entry.compute_hash();
        let proof: Vec<[u8; 32]> = stored.proof.iter().map(|p| p.0).collect();
        longest_proof = longest_proof.max(proof.len());
        if !verify_inclusion(seq - 1, size, &leaf_hash(&entry.hash.0), &proof, &root) {
            return Err(fail(format!(
                "is not in the tree the checkpoint at {size} signed (its proof fails)"
            )));
        }
        if seq == size && entry.hash != checkpoint.head {
            return Err(fail("is not the head the checkpoint signed".into()));
        }
        entries.push(entry);
    }
    if !entries.iter().any(|e| e.seq == contents.subject) {
        return Err(BundleError::Malformed(format!(
            "the entry it is about ({}) is not in it",
            contents.subject
        )));
    }
    let registry = bundled_registry(&entries, &checkpoint)?;
    Ok(OpenedBundle {
        subject: contents.subject,
        note: contents.note,
        checkpoint,
        entries,
        registry,
        longest_proof,
    })
}

/// Replays the bundled registry entries and checks the checkpoint's signer against them.
fn bundled_registry(
    entries: &[Entry],
    checkpoint: &Checkpoint,
) -> std::result::Result<Registry, BundleError> {
    let registry_entries: Vec<Entry> = entries
        .iter()
        .filter(|e| REGISTRY_KINDS.contains(&e.kind.as_str()))
        .cloned()
        .collect();
    if registry_entries.first().map(|e| e.seq) != Some(1) {
        return Err(BundleError::Registry(
            "the ledger's opening entry (1) is missing".into(),
        ));
    }
    let mut registry = Registry::new();
    apply_stored_registry_entries(&mut registry, &registry_entries)
        .map_err(|e| BundleError::Registry(e.to_string()))?;
    if registry.ledger_id() != Some(checkpoint.ledger_id) {
        return Err(BundleError::Registry(
            "they open another ledger than the checkpoint's".into(),
        ));
    }
    let enrolled = registry
        .person(&checkpoint.by)
        .is_some_and(|p| p.active_keys().any(|k| k.public_key == checkpoint.key));
    if !enrolled {
        return Err(BundleError::CheckpointSigner(format!(
            "key {} is not an active key of {} at entry {}",
            checkpoint.key.short(),
            checkpoint.by,
            checkpoint.seq
        )));
    }
    Ok(registry)
}

/// A `Vec<u8>` written as a CBOR byte string.
mod byte_vec {
    use serde::de::{Error, Visitor};
    use serde::{Deserializer, Serializer};

    pub fn serialize<S: Serializer>(v: &[u8], s: S) -> Result<S::Ok, S::Error> {
        s.serialize_bytes(v)
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<u8>, D::Error> {
        struct Bytes;
        impl Visitor<'_> for Bytes {
            type Value = Vec<u8>;
            fn expecting(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
                f.write_str("a byte string")
            }
            fn visit_bytes<E: Error>(self, v: &[u8]) -> Result<Vec<u8>, E> {
                Ok(v.to_vec())
            }
            fn visit_byte_buf<E: Error>(self, v: Vec<u8>) -> Result<Vec<u8>, E> {
                Ok(v)
            }
        }
        d.deserialize_byte_buf(Bytes)
    }
}
