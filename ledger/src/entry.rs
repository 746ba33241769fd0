//! The entry envelope and the one function that defines which bytes the chain hash covers.
//!
//! Hash framing (all integers big-endian, each variable field preceded by its length):
//!
//! ```text
//! "assize-entry-v1\0"          16 bytes  domain tag
//! format version               u16       = 1
//! seq                          u64
//! prev hash                    32 bytes  (zeros before the first entry)
//! record time                  i64       microseconds since the Unix epoch, UTC
//! author                       u16 length + UTF-8
//! kind                         u16 length + UTF-8
//! references                   u16 count  + 32 bytes each
//! signer present               u8        0 or 1
//! signer public key            32 bytes  (zeros when unsigned)
//! body                         u32 length + exact CBOR bytes
//! ```
//!
//! The signature is not hashed (it signs the hash, see [`crate::signing::signed_message`]),
//! but the signer's public key is, so stripping a signature leaves a claimed signer without
//! one, which replay reports.

use crate::{EntryHash, PublicKey, Timestamp};
use sha2::{Digest, Sha256};

/// Domain tag that opens the hashed framing of every entry.
pub const ENTRY_HASH_TAG: &[u8; 16] = b"assize-entry-v1\0";
/// Version of the framing above.
pub const ENTRY_FORMAT_VERSION: u16 = 1;
/// Longest author id or kind name, in bytes.
pub const MAX_NAME_BYTES: usize = 64;
/// Most references one entry may carry.
pub const MAX_REFERENCES: usize = 1024;

/// One stored entry, exactly as it is hashed and kept.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Entry {
    /// Position in the chain, from 1.
    pub seq: u64,
    /// Hash of the entry before (zeros for the first).
    pub prev_hash: EntryHash,
    /// When the entry was recorded (UTC).
    pub record_time: Timestamp,
    /// Person id of the author.
    pub author: String,
    /// Kind name of the body.
    pub kind: String,
    /// Hashes of entries this one refers to.
    pub references: Vec<EntryHash>,
    /// Exact CBOR bytes of the body.
    pub body: Vec<u8>,
    /// Public key that signed, if signed.
    pub signer: Option<PublicKey>,
    /// Ed25519 signature over [`crate::signing::signed_message`] of the hash.
    pub signature: Option<[u8; 64]>,
    /// The hash as stored. Replay recomputes it with [`Entry::compute_hash`].
    pub hash: EntryHash,
}

impl Entry {
    /// Recomputes the chain hash from the entry's fields.
    pub fn compute_hash(&self) -> EntryHash {
        chain_hash(&HashedFields {
            seq: self.seq,
            prev_hash: &self.prev_hash,
            record_time: self.record_time,
            author: &self.author,
            kind: &self.kind,
            references: &self.references,
            signer: self.signer.as_ref(),
            body: &self.body,
        })
    }
}

/// The fields the chain hash covers, borrowed.
pub struct HashedFields<'a> {
    /// Sequence number.
    pub seq: u64,
    /// Previous hash.
    pub prev_hash: &'a EntryHash,
    /// Record time.
    pub record_time: Timestamp,
    /// Author id.
    pub author: &'a str,
    /// Kind name.
    pub kind: &'a str,
    /// Referenced entry hashes.
    pub references: &'a [EntryHash],
    /// Signer's public key.
    pub signer: Option<&'a PublicKey>,
    /// Body bytes.
    pub body: &'a [u8],
}

/// SHA-256 over the framing documented at the top of this module.
///
/// Lengths are clamped by [`Draft::check`] before anything is stored, so the casts below
/// cannot truncate for stored entries; a tampered row with an oversize field still hashes
/// deterministically and simply fails to match.
pub fn chain_hash(fields: &HashedFields<'_>) -> EntryHash {
    let mut h = Sha256::new();
    h.update(ENTRY_HASH_TAG);
    h.update(ENTRY_FORMAT_VERSION.to_be_bytes());
    h.update(fields.seq.to_be_bytes());
    h.update(fields.prev_hash.0);
    h.update(fields.record_time.0.to_be_bytes());
    h.update((fields.author.len() as u16).to_be_bytes());
    h.update(fields.author.as_bytes());
    h.update((fields.kind.len() as u16).to_be_bytes());
    h.update(fields.kind.as_bytes());
    h.update((fields.references.len() as u16).to_be_bytes());
    for reference in fields.references {
        h.update(reference.0);
    }
    match fields.signer {
        Some(key) => {
            h.update([1u8]);
            h.update(key.0);
        }
        None => {
            h.update([0u8]);
            h.update([0u8; 32]);
        }
    }
    h.update((fields.body.len() as u32).to_be_bytes());
    h.update(fields.body);
    EntryHash(h.finalize().into())
}

/// What a caller asks to append; the ledger adds seq, prev hash, time, hash and signature.
#[derive(Clone, Debug)]
pub struct Draft {
    /// Kind name.
    pub kind: String,
    /// Author id; for signed entries it must be the signer's person.
    pub author: String,
    /// Referenced entry hashes.
    pub references: Vec<EntryHash>,
    /// Exact body bytes.
    pub body: Vec<u8>,
}

impl Draft {
    /// Encodes a typed record as a draft by `author`.
    pub fn of_record<R: crate::Record>(author: &str, record: &R) -> crate::error::Result<Self> {
        let body = crate::codec::encode(record).map_err(|e| crate::LedgerError::Codec {
            what: format!("{} body", R::KIND),
            reason: e.0,
        })?;
        Ok(Draft {
            kind: R::KIND.to_string(),
            author: author.to_string(),
            references: record.references(),
            body,
        })
    }

    /// Checks the sizes and characters the framing relies on.
    pub fn check(&self) -> crate::error::Result<()> {
        check_name("author", &self.author)?;
        check_name("kind", &self.kind)?;
        if self.references.len() > MAX_REFERENCES {
            return Err(bad("references", format!("more than {MAX_REFERENCES}")));
        }
        if self.body.len() > u32::MAX as usize {
            return Err(bad("body", "larger than 4 GiB".into()));
        }
        Ok(())
    }
}

/// Checks a person id or kind name: 1..=64 bytes of lowercase ASCII letters, digits, `.`, `-`, `_`.
pub fn check_name(what: &str, name: &str) -> crate::error::Result<()> {
    if name.is_empty() || name.len() > MAX_NAME_BYTES {
        return Err(bad(
            what,
            format!("{name:?} must be 1 to {MAX_NAME_BYTES} characters"),
        ));
    }
    let allowed = |c: char| c.is_ascii_lowercase() || c.is_ascii_digit() || ".-_".contains(c);
    if !name.chars().all(allowed) {
        return Err(bad(
            what,
            format!("{name:?} may hold only lowercase letters, digits, '.', '-' and '_'"),
        ));
    }
    Ok(())
}

fn bad(what: &str, reason: String) -> crate::LedgerError {
    crate::LedgerError::BadInput {
        what: what.to_string(),
        reason,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> Entry {
        let mut e = Entry {
            seq: 7,
            prev_hash: EntryHash::digest(b"prev"),
            record_time: Timestamp(1_790_000_000_000_000),
            author: "a.ng".into(),
            kind: "note".into(),
            references: vec![EntryHash::digest(b"r")],
            body: vec![0xa1, 0x61, 0x74, 0x61, 0x78],
            signer: Some(PublicKey([3; 32])),
            signature: None,
            hash: EntryHash::ZERO,
        };
        e.hash = e.compute_hash();
        e
    }

    #[test]
    fn every_hashed_field_changes_the_hash() {
        let base = sample();
        let mut variants = vec![];
        let mut e = base.clone();
        e.seq += 1;
        variants.push(e);
        let mut e = base.clone();
        e.prev_hash.0[31] ^= 1;
        variants.push(e);
        let mut e = base.clone();
        e.record_time.0 -= 1;
        variants.push(e);
        let mut e = base.clone();
        e.author = "a.nh".into();
        variants.push(e);
        let mut e = base.clone();
        e.kind = "notf".into();
        variants.push(e);
        let mut e = base.clone();
        e.references.clear();
        variants.push(e);
        let mut e = base.clone();
        e.signer = None;
        variants.push(e);
        let mut e = base.clone();
        e.body[4] ^= 1;
        variants.push(e);
        for v in variants {
            assert_ne!(v.compute_hash(), base.hash, "{v:?}");
        }
    }

    #[test]
    fn framing_keeps_author_and_kind_apart() {
        // Moving a byte between two adjacent variable fields must change the hash.
        let mut a = sample();
        a.author = "ab".into();
        a.kind = "c".into();
        let mut b = sample();
        b.author = "a".into();
        b.kind = "bc".into();
        assert_ne!(a.compute_hash(), b.compute_hash());
    }

    #[test]
    fn rejects_uppercase_and_overlong_names() {
        assert!(check_name("author", "Ann").is_err());
        assert!(check_name("author", &"a".repeat(65)).is_err());
        assert!(check_name("author", "ann.lee-2").is_ok());
    }
}
