//! Signed checkpoints of the head, kept outside the ledger file.
//!
//! Truncation or rollback of a file cannot be seen from inside it. A checkpoint records the
//! ledger id, a sequence number and the entry hash there, and (version 2) the root of the
//! ledger's RFC 9162 Merkle tree over the first `seq` entries, signed by an enrolled person; a
//! ledger that no longer holds that entry, holds a different one, or whose tree of that size
//! has another root, fails to extend it. The tree root is what lets an evidence bundle prove,
//! with a logarithmic inclusion proof per entry, that its entries are in the ledger the
//! checkpoint saw. The text form is a few `name value` lines; the short code
//! (`seq-xxxx-xxxx-xxxx-xxxx`, the first 64 bits of the hash) is for a paper logbook and checks
//! the head without a signature.
//!
//! Signed bytes, version 1: `"assize-checkpt1\0"` ‖ ledger id (16) ‖ seq (u64 BE) ‖ head hash
//! (32) ‖ made-at microseconds (i64 BE) ‖ signer id (u16 length + UTF-8) ‖ signer key (32).
//! Version 2: the same fields under the tag `"assize-checkpt2\0"`, then the tree root (32).
//! Version 1 checkpoints (no tree root) are still read and checked.

use crate::signing::verify_strict;
use crate::{EntryHash, PublicKey, Signer, Timestamp};
use serde::Serialize;

/// Domain tag of version-1 checkpoint signatures (no tree root).
pub const CHECKPOINT_TAG: &[u8; 16] = b"assize-checkpt1\0";
/// Domain tag of version-2 checkpoint signatures (with the tree root).
pub const CHECKPOINT_TAG_V2: &[u8; 16] = b"assize-checkpt2\0";
const TEXT_FIRST_LINE: &str = "assize checkpoint v1";
const TEXT_FIRST_LINE_V2: &str = "assize checkpoint v2";

/// A signed statement that the ledger held `head` at `seq`.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct Checkpoint {
    /// Id of the ledger (from its opening entry).
    #[serde(serialize_with = "hex_bytes")]
    pub ledger_id: [u8; 16],
    /// Sequence number of the head.
    pub seq: u64,
    /// Hash of the entry at `seq`.
    pub head: EntryHash,
    /// When the checkpoint was made.
    pub made_at: Timestamp,
    /// Person who signed it.
    pub by: String,
    /// Key that signed it.
    pub key: PublicKey,
    /// Root of the ledger's Merkle tree over entries 1..=seq (version 2; `None` in a
    /// version-1 checkpoint).
    #[serde(serialize_with = "hex_option")]
    pub tree_root: Option<[u8; 32]>,
    /// Signature over the bytes described in the module header.
    #[serde(serialize_with = "hex_bytes")]
    pub signature: [u8; 64],
}

fn hex_bytes<S: serde::Serializer, const N: usize>(v: &[u8; N], s: S) -> Result<S::Ok, S::Error> {
    s.serialize_str(&hex::encode(v))
}

fn hex_option<S: serde::Serializer>(v: &Option<[u8; 32]>, s: S) -> Result<S::Ok, S::Error> {
    match v {
        Some(root) => s.serialize_str(&hex::encode(root)),
        None => s.serialize_none(),
    }
}

impl Checkpoint {
    /// Signs a checkpoint of `head` at `seq`, with the tree root over entries 1..=seq when
    /// given (version 2) or without (version 1).
    pub fn sign(
        ledger_id: [u8; 16],
        seq: u64,
        head: EntryHash,
        tree_root: Option<[u8; 32]>,
        made_at: Timestamp,
        signer: &Signer,
    ) -> Checkpoint {
        let mut checkpoint = Checkpoint {
            ledger_id,
            seq,
            head,
            made_at,
            by: signer.person().to_string(),
            key: signer.public_key(),
            tree_root,
            signature: [0; 64],
        };
        checkpoint.signature = signer.sign_bytes(&checkpoint.signed_bytes());
        checkpoint
    }

    /// The exact bytes the signature covers.
    pub fn signed_bytes(&self) -> Vec<u8> {
        let mut bytes = Vec::with_capacity(16 + 16 + 8 + 32 + 8 + 2 + self.by.len() + 32 + 32);
        bytes.extend_from_slice(match self.tree_root {
            Some(_) => CHECKPOINT_TAG_V2,
            None => CHECKPOINT_TAG,
        });
        bytes.extend_from_slice(&self.ledger_id);
        bytes.extend_from_slice(&self.seq.to_be_bytes());
        bytes.extend_from_slice(&self.head.0);
        bytes.extend_from_slice(&self.made_at.0.to_be_bytes());
        bytes.extend_from_slice(&(self.by.len() as u16).to_be_bytes());
        bytes.extend_from_slice(self.by.as_bytes());
        bytes.extend_from_slice(&self.key.0);
        if let Some(root) = &self.tree_root {
            bytes.extend_from_slice(root);
        }
        bytes
    }

    /// Whether the signature is valid for the stated key (who the key belongs to is checked
    /// against the ledger's registry during replay).
    pub fn signature_valid(&self) -> bool {
        verify_strict(&self.key, &self.signed_bytes(), &self.signature)
    }

    /// The short code for a paper logbook.
    pub fn code(&self) -> CheckpointCode {
        CheckpointCode::of(self.seq, &self.head)
    }

    /// The text file form.
    pub fn to_text(&self) -> String {
        let (first_line, tree) = match &self.tree_root {
            Some(root) => (TEXT_FIRST_LINE_V2, format!("tree {}\n", hex::encode(root))),
            None => (TEXT_FIRST_LINE, String::new()),
        };
        format!(
            "{first_line}\nledger {}\nseq {}\nhead {}\n{tree}made {}\nby {}\nkey {}\nsignature {}\ncode {}\n",
            hex::encode(self.ledger_id),
            self.seq,
            self.head,
            self.made_at,
            self.by,
            self.key,
            hex::encode(self.signature),
            self.code()
        )
    }

    /// Parses the text file form.
    pub fn parse_text(text: &str) -> Result<Checkpoint, String> {
        let mut lines = text.lines().map(str::trim).filter(|l| !l.is_empty());
        let version_2 = match lines.next() {
            Some(TEXT_FIRST_LINE) => false,
            Some(TEXT_FIRST_LINE_V2) => true,
            _ => {
                return Err(format!(
                    "does not start with {TEXT_FIRST_LINE_V2:?} (or {TEXT_FIRST_LINE:?})"
                ))
            }
        };
        let mut fields = std::collections::BTreeMap::new();
        for line in lines {
            let (name, value) = line
                .split_once(' ')
                .ok_or_else(|| format!("line {line:?} is not `name value`"))?;
            if fields.insert(name, value.trim()).is_some() {
                return Err(format!("field {name} appears twice"));
            }
        }
        let field = |name: &str| {
            fields
                .get(name)
                .copied()
                .ok_or_else(|| format!("field {name} is missing"))
        };
        let bad = |name: &str| format!("field {name} is malformed");
        let checkpoint = Checkpoint {
            ledger_id: hex_array(field("ledger")?).ok_or_else(|| bad("ledger"))?,
            seq: field("seq")?.parse().map_err(|_| bad("seq"))?,
            head: EntryHash::from_hex(field("head")?).ok_or_else(|| bad("head"))?,
            made_at: Timestamp::parse_rfc3339(field("made")?).ok_or_else(|| bad("made"))?,
            by: field("by")?.to_string(),
            key: PublicKey::from_hex(field("key")?).ok_or_else(|| bad("key"))?,
            tree_root: if version_2 {
                Some(hex_array(field("tree")?).ok_or_else(|| bad("tree"))?)
            } else if fields.contains_key("tree") {
                return Err("field tree belongs to a version 2 checkpoint".into());
            } else {
                None
            },
            signature: hex_array(field("signature")?).ok_or_else(|| bad("signature"))?,
        };
        if checkpoint.seq == 0 {
            return Err("field seq must be 1 or more".into());
        }
        if let Ok(code) = field("code") {
            if code != checkpoint.code().to_string() {
                return Err("field code does not match seq and head".into());
            }
        }
        Ok(checkpoint)
    }
}

/// Checks, without the ledger, that the tree `later` signed extends the tree `earlier` signed
/// (RFC 9162 §2.1.4.2 consistency proof between their tree roots): the entries `earlier` saw
/// are the first entries of what `later` saw, unchanged. Both must be version 2 checkpoints of
/// the same ledger with valid signatures (who signed them is for the caller to judge).
pub fn extends(earlier: &Checkpoint, later: &Checkpoint, proof: &[[u8; 32]]) -> Result<(), String> {
    let (Some(old_root), Some(new_root)) = (earlier.tree_root, later.tree_root) else {
        return Err("both checkpoints must be version 2 (with a tree root)".into());
    };
    if earlier.ledger_id != later.ledger_id {
        return Err("the checkpoints are of two different ledgers".into());
    }
    if !earlier.signature_valid() || !later.signature_valid() {
        return Err("a checkpoint's signature does not verify".into());
    }
    if earlier.seq > later.seq {
        return Err(format!(
            "the earlier checkpoint (entry {}) is beyond the later one (entry {})",
            earlier.seq, later.seq
        ));
    }
    if crate::merkle::verify_consistency(earlier.seq, later.seq, &old_root, &new_root, proof) {
        Ok(())
    } else {
        Err(format!(
            "the tree of {} entries signed later does not extend the tree of {} entries signed earlier: one of them was signed on a rewritten, rolled-back or forked copy",
            later.seq, earlier.seq
        ))
    }
}

fn hex_array<const N: usize>(text: &str) -> Option<[u8; N]> {
    hex::decode(text).ok()?.try_into().ok()
}

/// The short printable form of a checkpoint: sequence number and the first 8 bytes of the hash.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub struct CheckpointCode {
    /// Sequence number.
    pub seq: u64,
    /// First 8 bytes of the entry hash.
    pub head_prefix: [u8; 8],
}

impl CheckpointCode {
    /// The code of `head` at `seq`.
    pub fn of(seq: u64, head: &EntryHash) -> Self {
        let mut head_prefix = [0u8; 8];
        head_prefix.copy_from_slice(&head.0[..8]);
        CheckpointCode { seq, head_prefix }
    }

    /// Whether `hash` starts with this code's prefix.
    pub fn matches(&self, hash: &EntryHash) -> bool {
        hash.0[..8] == self.head_prefix
    }

    /// Parses `seq-xxxx-xxxx-xxxx-xxxx` (hex digits, dashes optional, any case).
    pub fn parse(text: &str) -> Result<Self, String> {
        let text = text.trim();
        let (seq, rest) = text
            .split_once('-')
            .ok_or("expected SEQ-XXXX-XXXX-XXXX-XXXX")?;
        let seq: u64 = seq
            .parse()
            .ok()
            .filter(|s| *s > 0)
            .ok_or_else(|| format!("{seq:?} is not a sequence number (1 or more)"))?;
        let digits: String = rest.chars().filter(|c| *c != '-').collect();
        let head_prefix: [u8; 8] = hex_array(&digits.to_ascii_lowercase())
            .ok_or("expected 16 hex digits after the sequence number")?;
        Ok(CheckpointCode { seq, head_prefix })
    }
}

impl std::fmt::Display for CheckpointCode {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let h = hex::encode(self.head_prefix);
        write!(
            f,
            "{}-{}-{}-{}-{}",
            self.seq,
            &h[0..4],
            &h[4..8],
            &h[8..12],
            &h[12..16]
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> Checkpoint {
        let signer = Signer::from_secret("q.adeyemi", &[5; 32]);
        Checkpoint::sign(
            [1; 16],
            42,
            EntryHash::digest(b"head"),
            Some([9; 32]),
            Timestamp(1_795_000_000_123_456),
            &signer,
        )
    }

    #[test]
    fn version_1_still_reads_and_verifies_and_the_versions_do_not_mix() {
        let signer = Signer::from_secret("q.adeyemi", &[5; 32]);
        let v1 = Checkpoint::sign(
            [1; 16],
            42,
            EntryHash::digest(b"head"),
            None,
            Timestamp(1_795_000_000_123_456),
            &signer,
        );
        let text = v1.to_text();
        assert!(text.starts_with("assize checkpoint v1\n"));
        assert!(!text.contains("\ntree "));
        let parsed = Checkpoint::parse_text(&text).unwrap();
        assert_eq!(parsed, v1);
        assert!(parsed.signature_valid());
        // A tree root added to a version-1 signature does not verify, and a version-1 text
        // with a tree line does not parse.
        let mut grafted = v1.clone();
        grafted.tree_root = Some([9; 32]);
        assert!(!grafted.signature_valid());
        let with_tree = text.replace("made ", &format!("tree {}\nmade ", hex::encode([9u8; 32])));
        assert!(Checkpoint::parse_text(&with_tree).is_err());
        // Stripping the root from a version-2 checkpoint does not verify either.
        let mut stripped = sample();
        stripped.tree_root = None;
        assert!(!stripped.signature_valid());
    }

    #[test]
    fn version_2_binds_the_tree_root() {
        let c = sample();
        assert!(c.to_text().starts_with("assize checkpoint v2\n"));
        let mut other_root = c.clone();
        other_root.tree_root = Some([8; 32]);
        assert!(!other_root.signature_valid());
        let text = c
            .to_text()
            .replace(&hex::encode([9u8; 32]), &hex::encode([8u8; 32]));
        assert!(!Checkpoint::parse_text(&text).unwrap().signature_valid());
        let no_tree_line: String = c
            .to_text()
            .lines()
            .filter(|l| !l.starts_with("tree "))
            .map(|l| format!("{l}\n"))
            .collect();
        assert!(Checkpoint::parse_text(&no_tree_line).is_err());
    }

    #[test]
    fn text_form_round_trips_and_verifies() {
        let c = sample();
        let parsed = Checkpoint::parse_text(&c.to_text()).unwrap();
        assert_eq!(parsed, c);
        assert!(parsed.signature_valid());
    }

    #[test]
    fn altered_text_fails_signature_or_parse() {
        let c = sample();
        let text = c.to_text().replace("seq 42", "seq 41");
        // The code line no longer matches the sequence number.
        assert!(Checkpoint::parse_text(&text).is_err());
        let mut moved = c.clone();
        moved.seq = 41;
        assert!(!moved.signature_valid());
    }

    #[test]
    fn code_parses_with_or_without_dashes() {
        let c = sample();
        let code = c.code();
        assert_eq!(CheckpointCode::parse(&code.to_string()).unwrap(), code);
        let compact = format!("42-{}", hex::encode(code.head_prefix).to_uppercase());
        assert_eq!(CheckpointCode::parse(&compact).unwrap(), code);
        assert!(code.matches(&c.head));
        assert!(CheckpointCode::parse("42").is_err());
        assert!(CheckpointCode::parse("0-0000-0000-0000-0000").is_err());
    }
}
