//! Entry hashes: the 32-byte SHA-256 values that link the chain.

use serde::de::{self, Visitor};
use serde::{Deserialize, Deserializer, Serialize, Serializer};
use sha2::{Digest, Sha256};

/// A SHA-256 digest identifying one entry (or, for the first entry, 32 zero bytes as its
/// previous hash).
#[derive(Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Default)]
pub struct EntryHash(pub [u8; 32]);

/// Hash tables keyed by entry hashes see only the first eight bytes: equal hashes agree on
/// them, SHA-256 spreads them evenly, and finding many entries that share them would take
/// about 2^64 hashing work each. Hashing all 32 bytes costs the validation's tables several
/// times more for nothing.
impl std::hash::Hash for EntryHash {
    fn hash<H: std::hash::Hasher>(&self, state: &mut H) {
        let mut first = [0u8; 8];
        first.copy_from_slice(&self.0[..8]);
        state.write_u64(u64::from_le_bytes(first));
    }
}

impl EntryHash {
    /// The all-zero hash that precedes the first entry.
    pub const ZERO: EntryHash = EntryHash([0; 32]);

    /// SHA-256 of `bytes`.
    pub fn digest(bytes: &[u8]) -> Self {
        EntryHash(Sha256::digest(bytes).into())
    }

    /// Lowercase hex form.
    pub fn to_hex(&self) -> String {
        hex::encode(self.0)
    }

    /// Parses 64 hex digits.
    pub fn from_hex(text: &str) -> Option<Self> {
        let bytes = hex::decode(text.trim()).ok()?;
        Some(EntryHash(bytes.try_into().ok()?))
    }

    /// Builds from a slice that must be exactly 32 bytes.
    pub fn from_slice(bytes: &[u8]) -> Option<Self> {
        Some(EntryHash(bytes.try_into().ok()?))
    }
}

impl std::fmt::Display for EntryHash {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.to_hex())
    }
}

impl std::fmt::Debug for EntryHash {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "EntryHash({})", self.to_hex())
    }
}

/// Bytes in CBOR; lowercase hex in human-readable formats such as JSON.
impl Serialize for EntryHash {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        if s.is_human_readable() {
            s.serialize_str(&self.to_hex())
        } else {
            s.serialize_bytes(&self.0)
        }
    }
}

impl<'de> Deserialize<'de> for EntryHash {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        d.deserialize_bytes(FixedBytes::<32>).map(EntryHash)
    }
}

/// Serde visitor accepting exactly `N` bytes as a CBOR byte string.
pub(crate) struct FixedBytes<const N: usize>;

impl<const N: usize> Visitor<'_> for FixedBytes<N> {
    type Value = [u8; N];

    fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
        write!(f, "a byte string of {N} bytes")
    }

    fn visit_bytes<E: de::Error>(self, v: &[u8]) -> Result<Self::Value, E> {
        v.try_into().map_err(|_| E::invalid_length(v.len(), &self))
    }
}

/// Serde helpers storing a fixed-size byte array as one CBOR byte string.
pub(crate) mod byte_array {
    use serde::{Deserializer, Serializer};

    pub fn serialize<S: Serializer, const N: usize>(v: &[u8; N], s: S) -> Result<S::Ok, S::Error> {
        s.serialize_bytes(v)
    }

    pub fn deserialize<'de, D: Deserializer<'de>, const N: usize>(
        d: D,
    ) -> Result<[u8; N], D::Error> {
        d.deserialize_bytes(super::FixedBytes::<N>)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // NIST FIPS 180-4 examples (SHA256.pdf), as listed in REFERENCES.md section 1.
    #[test]
    fn sha256_matches_fips_180_4_examples() {
        assert_eq!(
            EntryHash::digest(b"abc").to_hex(),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
        assert_eq!(
            EntryHash::digest(b"abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq").to_hex(),
            "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1"
        );
        assert_eq!(
            EntryHash::digest(&vec![b'a'; 1_000_000]).to_hex(),
            "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0"
        );
    }

    #[test]
    fn hex_round_trip_and_rejects_wrong_length() {
        let h = EntryHash::digest(b"x");
        assert_eq!(EntryHash::from_hex(&h.to_hex()), Some(h));
        assert_eq!(EntryHash::from_hex("abcd"), None);
    }
}
