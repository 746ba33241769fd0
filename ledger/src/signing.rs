//! Ed25519 signing and verification of entries (RFC 8032, ed25519-dalek 2).
//!
//! Exactly one message is signed per entry: [`signed_message`] = a 16-byte domain tag followed
//! by the 32-byte entry hash. Single checks use `verify_strict`; replay may verify many at
//! once with batch verification and falls back to `verify_strict` on any failure. Weak
//! (small-order) public keys are refused everywhere a key is accepted.

use crate::hash::FixedBytes;
use crate::EntryHash;
use ed25519_dalek::{Signature, SigningKey, VerifyingKey};
use serde::{Deserialize, Deserializer, Serialize, Serializer};
use zeroize::Zeroizing;

/// Domain tag that prefixes every signed entry message.
pub const ENTRY_SIGNATURE_TAG: &[u8; 16] = b"assize-sign-v1\0\0";

/// An Ed25519 public key as its 32-byte encoding.
#[derive(Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct PublicKey(pub [u8; 32]);

impl PublicKey {
    /// Lowercase hex form.
    pub fn to_hex(&self) -> String {
        hex::encode(self.0)
    }

    /// Parses 64 hex digits.
    pub fn from_hex(text: &str) -> Option<Self> {
        let bytes = hex::decode(text.trim()).ok()?;
        Some(PublicKey(bytes.try_into().ok()?))
    }

    /// Checks that the bytes are a valid curve point of large order; returns the key ready for use.
    pub fn to_verifying_key(&self) -> Result<VerifyingKey, String> {
        let key = VerifyingKey::from_bytes(&self.0)
            .map_err(|_| format!("{} is not a valid Ed25519 public key", self.to_hex()))?;
        if key.is_weak() {
            return Err(format!(
                "{} is a weak (small-order) Ed25519 public key",
                self.to_hex()
            ));
        }
        Ok(key)
    }

    /// A short fingerprint for tables: the first 8 hex digits.
    pub fn short(&self) -> String {
        self.to_hex()[..8].to_string()
    }
}

impl std::fmt::Display for PublicKey {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.to_hex())
    }
}

impl std::fmt::Debug for PublicKey {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "PublicKey({})", self.to_hex())
    }
}

/// Bytes in CBOR; lowercase hex in human-readable formats such as JSON.
impl Serialize for PublicKey {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        if s.is_human_readable() {
            s.serialize_str(&self.to_hex())
        } else {
            s.serialize_bytes(&self.0)
        }
    }
}

impl<'de> Deserialize<'de> for PublicKey {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        d.deserialize_bytes(FixedBytes::<32>).map(PublicKey)
    }
}

/// The bytes an entry signature covers: the domain tag, then the entry hash.
pub fn signed_message(hash: &EntryHash) -> [u8; 48] {
    let mut message = [0u8; 48];
    message[..16].copy_from_slice(ENTRY_SIGNATURE_TAG);
    message[16..].copy_from_slice(&hash.0);
    message
}

/// A person's unlocked private key, able to sign entries in their name.
pub struct Signer {
    person: String,
    key: SigningKey,
}

impl Signer {
    /// Wraps a 32-byte Ed25519 secret key for `person`.
    pub fn from_secret(person: &str, secret: &[u8; 32]) -> Self {
        Signer {
            person: person.to_string(),
            key: SigningKey::from_bytes(secret),
        }
    }

    /// A fresh key from the operating system's random source.
    pub fn generate(person: &str) -> std::io::Result<Self> {
        let mut secret = Zeroizing::new([0u8; 32]);
        getrandom::getrandom(secret.as_mut_slice()).map_err(std::io::Error::other)?;
        Ok(Self::from_secret(person, &secret))
    }

    /// The person this key belongs to.
    pub fn person(&self) -> &str {
        &self.person
    }

    /// The public half.
    pub fn public_key(&self) -> PublicKey {
        PublicKey(self.key.verifying_key().to_bytes())
    }

    /// The secret seed, for sealing into a key file.
    pub(crate) fn secret(&self) -> Zeroizing<[u8; 32]> {
        Zeroizing::new(self.key.to_bytes())
    }

    /// Signs arbitrary bytes (used for entries and checkpoints, each with its own domain tag).
    pub fn sign_bytes(&self, message: &[u8]) -> [u8; 64] {
        use ed25519_dalek::Signer as _;
        self.key.sign(message).to_bytes()
    }

    /// Signs an entry hash.
    pub fn sign_entry(&self, hash: &EntryHash) -> [u8; 64] {
        self.sign_bytes(&signed_message(hash))
    }
}

impl std::fmt::Debug for Signer {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "Signer({}, {})", self.person, self.public_key())
    }
}

/// Strict single verification of `signature` over `message` by `key`.
pub fn verify_strict(key: &PublicKey, message: &[u8], signature: &[u8; 64]) -> bool {
    let Ok(verifying_key) = key.to_verifying_key() else {
        return false;
    };
    let signature = Signature::from_bytes(signature);
    verifying_key.verify_strict(message, &signature).is_ok()
}

/// One signature to check: the entry it belongs to, the key, and the signature bytes.
#[derive(Clone, Debug)]
pub struct SignatureJob {
    /// Sequence number of the entry.
    pub seq: u64,
    /// The entry hash that was signed.
    pub hash: EntryHash,
    /// Claimed signer.
    pub key: PublicKey,
    /// Signature bytes.
    pub signature: [u8; 64],
}

/// Checks many entry signatures; returns the sequence numbers of those that fail.
///
/// With `strict` every signature goes through `verify_strict`. Otherwise one batch check is
/// tried first and, only if it fails, each signature is checked with `verify_strict` to find
/// the bad ones.
pub fn failing_signatures(jobs: &[SignatureJob], strict: bool) -> Vec<u64> {
    if !strict && batch_passes(jobs) {
        return Vec::new();
    }
    jobs.iter()
        .filter(|job| !verify_strict(&job.key, &signed_message(&job.hash), &job.signature))
        .map(|job| job.seq)
        .collect()
}

fn batch_passes(jobs: &[SignatureJob]) -> bool {
    // A ledger has few signers: decompress and weak-check each distinct key once per batch.
    let mut decoded: Vec<(PublicKey, VerifyingKey)> = Vec::new();
    let mut keys = Vec::with_capacity(jobs.len());
    for job in jobs {
        if let Some((_, key)) = decoded.iter().find(|(k, _)| *k == job.key) {
            keys.push(*key);
            continue;
        }
        match job.key.to_verifying_key() {
            Ok(key) => {
                decoded.push((job.key, key));
                keys.push(key);
            }
            Err(_) => return false,
        }
    }
    let messages: Vec<[u8; 48]> = jobs.iter().map(|job| signed_message(&job.hash)).collect();
    let message_refs: Vec<&[u8]> = messages.iter().map(|m| m.as_slice()).collect();
    let signatures: Vec<Signature> = jobs
        .iter()
        .map(|job| Signature::from_bytes(&job.signature))
        .collect();
    ed25519_dalek::verify_batch(&message_refs, &signatures, &keys).is_ok()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn unhex<const N: usize>(text: &str) -> [u8; N] {
        hex::decode(text).unwrap().try_into().unwrap()
    }

    // RFC 8032 section 7.1, TEST 1..3 (secret, public, message, signature), as listed in
    // REFERENCES.md section 1. Signed and verified through Signer / verify_strict, the code
    // path the ledger uses.
    const RFC8032_VECTORS: [(&str, &str, &str, &str); 3] = [
        (
            "9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60",
            "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a",
            "",
            "e5564300c360ac729086e2cc806e828a84877f1eb8e5d974d873e065224901555fb8821590a33bacc61e39701cf9b46bd25bf5f0595bbe24655141438e7a100b",
        ),
        (
            "4ccd089b28ff96da9db6c346ec114e0f5b8a319f35aba624da8cf6ed4fb8a6fb",
            "3d4017c3e843895a92b70aa74d1b7ebc9c982ccf2ec4968cc0cd55f12af4660c",
            "72",
            "92a009a9f0d4cab8720e820b5f642540a2b27b5416503f8fb3762223ebdb69da085ac1e43e15996e458f3613d0f11d8c387b2eaeb4302aeeb00d291612bb0c00",
        ),
        (
            "c5aa8df43f9f837bedb7442f31dcb7b166d38535076f094b85ce3a2e0b4458f7",
            "fc51cd8e6218a1a38da47ed00230f0580816ed13ba3303ac5deb911548908025",
            "af82",
            "6291d657deec24024827e69c3abe01a30ce548a284743a445e3680d7db5ac3ac18ff9b538d16f290ae67f760984dc6594a7c15e9716ed28dc027beceea1ec40a",
        ),
    ];

    #[test]
    fn signs_and_verifies_rfc_8032_section_7_1_vectors() {
        for (secret, public, message, signature) in RFC8032_VECTORS {
            let signer = Signer::from_secret("rfc8032", &unhex::<32>(secret));
            assert_eq!(signer.public_key().to_hex(), public);
            let message = hex::decode(message).unwrap();
            let produced = signer.sign_bytes(&message);
            assert_eq!(hex::encode(produced), signature);
            assert!(verify_strict(&signer.public_key(), &message, &produced));
        }
    }

    #[test]
    fn flipping_any_signature_or_message_bit_fails() {
        let (secret, _, message, signature) = RFC8032_VECTORS[2];
        let key = Signer::from_secret("t", &unhex::<32>(secret)).public_key();
        let message = hex::decode(message).unwrap();
        let signature = unhex::<64>(signature);
        for byte in 0..64 {
            let mut bad = signature;
            bad[byte] ^= 0x01;
            assert!(!verify_strict(&key, &message, &bad), "byte {byte}");
        }
        let mut bad_message = message.clone();
        bad_message[0] ^= 0x80;
        assert!(!verify_strict(&key, &bad_message, &signature));
    }

    #[test]
    fn refuses_small_order_public_key() {
        // The identity point (y = 1) has order 1: a textbook small-order encoding
        // (RFC 8032 5.1.3 decoding; Chalkias et al. 2020 list it among the weak keys).
        let mut identity = [0u8; 32];
        identity[0] = 1;
        let err = PublicKey(identity).to_verifying_key().unwrap_err();
        assert!(err.contains("weak"), "{err}");
    }

    #[test]
    fn batch_check_locates_the_one_bad_signature() {
        let signer = Signer::from_secret("t", &[7u8; 32]);
        let mut jobs: Vec<SignatureJob> = (1..=40u64)
            .map(|seq| {
                let hash = EntryHash::digest(&seq.to_be_bytes());
                SignatureJob {
                    seq,
                    hash,
                    key: signer.public_key(),
                    signature: signer.sign_entry(&hash),
                }
            })
            .collect();
        assert!(failing_signatures(&jobs, false).is_empty());
        assert!(failing_signatures(&jobs, true).is_empty());
        jobs[17].signature[5] ^= 0x10;
        assert_eq!(failing_signatures(&jobs, false), vec![18]);
        assert_eq!(failing_signatures(&jobs, true), vec![18]);
    }
}
