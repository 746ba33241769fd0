//! Private keys at rest: one passphrase-encrypted file per person.
//!
//! The secret key is sealed with ChaCha20-Poly1305 (RFC 8439) under a key derived from the
//! passphrase with Argon2id (RFC 9106). The clear header (format, person id, public key, KDF
//! parameters, salt, nonce) is the AEAD's associated data, so it cannot be altered without the
//! file failing to open. Files are created with mode 0600 and never overwritten; a key file
//! readable by group or others is refused. Private keys never enter the ledger.

use crate::codec::{decode_exact, encode};
use crate::error::Result;
use crate::{LedgerError, PublicKey, Signer};
use argon2::{Algorithm, Argon2, Params, Version};
use chacha20poly1305::aead::{Aead, KeyInit, Payload};
use chacha20poly1305::{ChaCha20Poly1305, Key, Nonce};
use serde::{Deserialize, Serialize};
use std::io::Write;
use std::os::unix::fs::{OpenOptionsExt, PermissionsExt};
use std::path::Path;
use zeroize::Zeroizing;

const FORMAT: &str = "assize-key-v1";
const MIN_PASSPHRASE_CHARS: usize = 8;

/// Cost of the passphrase key derivation.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct KdfCost {
    /// Memory in KiB.
    pub memory_kib: u32,
    /// Passes over memory.
    pub iterations: u32,
    /// Lanes.
    pub lanes: u32,
}

impl KdfCost {
    /// The default: 64 MiB, 3 passes, 1 lane (above the RFC 9106 section 4 second
    /// recommended option's 64 MiB with t = 3).
    pub const DEFAULT: KdfCost = KdfCost {
        memory_kib: 64 * 1024,
        iterations: 3,
        lanes: 1,
    };

    /// The least this tool accepts (8 MiB, 2 passes); for tests and scripted demos only.
    pub const MINIMUM: KdfCost = KdfCost {
        memory_kib: 8 * 1024,
        iterations: 2,
        lanes: 1,
    };

    fn check(&self) -> std::result::Result<Params, String> {
        if self.memory_kib < Self::MINIMUM.memory_kib || self.iterations < Self::MINIMUM.iterations
        {
            return Err(format!(
                "key derivation cost below the minimum ({} KiB, {} passes)",
                Self::MINIMUM.memory_kib,
                Self::MINIMUM.iterations
            ));
        }
        if self.memory_kib > 4 * 1024 * 1024 {
            return Err("key derivation memory above 4 GiB".into());
        }
        Params::new(self.memory_kib, self.iterations, self.lanes, Some(32))
            .map_err(|e| format!("bad key derivation parameters: {e}"))
    }
}

/// The clear part of a key file: who it belongs to and how it is sealed.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
struct Header {
    format: String,
    person: String,
    public_key: PublicKey,
    kdf: KdfCost,
    #[serde(with = "crate::hash::byte_array")]
    salt: [u8; 16],
    #[serde(with = "crate::hash::byte_array")]
    nonce: [u8; 12],
}

#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
struct Stored {
    header: Header,
    #[serde(with = "crate::hash::byte_array")]
    sealed: [u8; 48],
}

/// What can be read from a key file without its passphrase.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct KeyFileInfo {
    /// Person the key belongs to.
    pub person: String,
    /// Public key.
    pub public_key: PublicKey,
    /// Key derivation cost.
    pub kdf: KdfCost,
}

/// Generates a key for `person`, seals it with `passphrase` and writes it to `path` (0600).
pub fn create_key_file(
    path: &Path,
    person: &str,
    passphrase: &str,
    cost: KdfCost,
) -> Result<KeyFileInfo> {
    crate::entry::check_name("person id", person)?;
    if passphrase.chars().count() < MIN_PASSPHRASE_CHARS {
        return Err(LedgerError::BadInput {
            what: "passphrase".into(),
            reason: format!("use at least {MIN_PASSPHRASE_CHARS} characters"),
        });
    }
    let signer = Signer::generate(person).map_err(|e| io(path, e))?;
    let mut salt = [0u8; 16];
    let mut nonce = [0u8; 12];
    getrandom::getrandom(&mut salt).map_err(|e| io(path, std::io::Error::other(e)))?;
    getrandom::getrandom(&mut nonce).map_err(|e| io(path, std::io::Error::other(e)))?;
    let header = Header {
        format: FORMAT.into(),
        person: person.into(),
        public_key: signer.public_key(),
        kdf: cost,
        salt,
        nonce,
    };
    let cipher = cipher_for(path, passphrase, &header)?;
    let aad = encode(&header).map_err(|e| key_error(path, e.0))?;
    let secret = signer.secret();
    let sealed = cipher
        .encrypt(
            Nonce::from_slice(&nonce),
            Payload {
                msg: secret.as_slice(),
                aad: &aad,
            },
        )
        .map_err(|_| key_error(path, "encryption failed".into()))?;
    let sealed: [u8; 48] = sealed
        .try_into()
        .map_err(|_| key_error(path, "unexpected sealed length".into()))?;
    let bytes = encode(&Stored { header, sealed }).map_err(|e| key_error(path, e.0))?;
    write_new_private_file(path, &bytes)?;
    Ok(KeyFileInfo {
        person: person.into(),
        public_key: signer.public_key(),
        kdf: cost,
    })
}

/// Reads the clear header of a key file (no passphrase needed).
pub fn read_key_file_info(path: &Path) -> Result<KeyFileInfo> {
    let stored = read_stored(path)?;
    Ok(KeyFileInfo {
        person: stored.header.person,
        public_key: stored.header.public_key,
        kdf: stored.header.kdf,
    })
}

/// Opens a key file with its passphrase.
pub fn unlock_key_file(path: &Path, passphrase: &str) -> Result<Signer> {
    let stored = read_stored(path)?;
    let cipher = cipher_for(path, passphrase, &stored.header)?;
    let aad = encode(&stored.header).map_err(|e| key_error(path, e.0))?;
    let secret = cipher
        .decrypt(
            Nonce::from_slice(&stored.header.nonce),
            Payload {
                msg: &stored.sealed,
                aad: &aad,
            },
        )
        .map_err(|_| LedgerError::WrongPassphrase { path: path.into() })?;
    let secret = Zeroizing::new(secret);
    let secret: &[u8; 32] = secret
        .as_slice()
        .try_into()
        .map_err(|_| key_error(path, "sealed secret has the wrong length".into()))?;
    let signer = Signer::from_secret(&stored.header.person, secret);
    if signer.public_key() != stored.header.public_key {
        return Err(key_error(
            path,
            "secret does not match the public key".into(),
        ));
    }
    Ok(signer)
}

fn cipher_for(path: &Path, passphrase: &str, header: &Header) -> Result<ChaCha20Poly1305> {
    let params = header.kdf.check().map_err(|e| key_error(path, e))?;
    let mut key = Zeroizing::new([0u8; 32]);
    Argon2::new(Algorithm::Argon2id, Version::V0x13, params)
        .hash_password_into(passphrase.as_bytes(), &header.salt, key.as_mut_slice())
        .map_err(|e| key_error(path, format!("key derivation failed: {e}")))?;
    Ok(ChaCha20Poly1305::new(Key::from_slice(key.as_slice())))
}

fn read_stored(path: &Path) -> Result<Stored> {
    let unreadable = |e: std::io::Error| key_error(path, format!("cannot read it: {e}"));
    let metadata = std::fs::metadata(path).map_err(unreadable)?;
    if metadata.permissions().mode() & 0o077 != 0 {
        return Err(key_error(
            path,
            format!(
                "readable by others (mode {:o}); private key files must be 0600",
                metadata.permissions().mode() & 0o777
            ),
        ));
    }
    let bytes = std::fs::read(path).map_err(unreadable)?;
    let stored: Stored =
        decode_exact(&bytes).map_err(|_| key_error(path, "not an assize key file".into()))?;
    if stored.header.format != FORMAT {
        return Err(key_error(
            path,
            format!("unknown key file format {:?}", stored.header.format),
        ));
    }
    Ok(stored)
}

fn write_new_private_file(path: &Path, bytes: &[u8]) -> Result<()> {
    let mut file = std::fs::OpenOptions::new()
        .write(true)
        .create_new(true)
        .mode(0o600)
        .open(path)
        .map_err(|e| match e.kind() {
            std::io::ErrorKind::AlreadyExists => LedgerError::AlreadyExists { path: path.into() },
            _ => io(path, e),
        })?;
    let written = file.write_all(bytes).and_then(|_| file.sync_all());
    if let Err(e) = written {
        let _ = std::fs::remove_file(path);
        return Err(io(path, e));
    }
    Ok(())
}

fn io(path: &Path, source: std::io::Error) -> LedgerError {
    LedgerError::Io {
        path: path.into(),
        source,
    }
}

fn key_error(path: &Path, reason: String) -> LedgerError {
    LedgerError::KeyFile {
        path: path.into(),
        reason,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sealed_key_opens_with_its_passphrase_only() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("k.key");
        let info = create_key_file(&path, "r.osei", "correct horse", KdfCost::MINIMUM).unwrap();
        let mode = std::fs::metadata(&path).unwrap().permissions().mode() & 0o777;
        assert_eq!(mode, 0o600);
        let signer = unlock_key_file(&path, "correct horse").unwrap();
        assert_eq!(signer.public_key(), info.public_key);
        assert_eq!(signer.person(), "r.osei");
        assert!(matches!(
            unlock_key_file(&path, "wrong horse"),
            Err(LedgerError::WrongPassphrase { .. })
        ));
    }

    #[test]
    fn refuses_to_overwrite_and_to_read_loose_permissions() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("k.key");
        create_key_file(&path, "r.osei", "correct horse", KdfCost::MINIMUM).unwrap();
        assert!(matches!(
            create_key_file(&path, "r.osei", "correct horse", KdfCost::MINIMUM),
            Err(LedgerError::AlreadyExists { .. })
        ));
        std::fs::set_permissions(&path, std::fs::Permissions::from_mode(0o644)).unwrap();
        let err = read_key_file_info(&path).unwrap_err().to_string();
        assert!(err.contains("0600"), "{err}");
    }

    #[test]
    fn altered_header_makes_the_file_fail_to_open() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("k.key");
        create_key_file(&path, "r.osei", "correct horse", KdfCost::MINIMUM).unwrap();
        let mut stored: Stored = decode_exact(&std::fs::read(&path).unwrap()).unwrap();
        stored.header.person = "m.ilic".into();
        std::fs::remove_file(&path).unwrap();
        write_new_private_file(&path, &encode(&stored).unwrap()).unwrap();
        assert!(matches!(
            unlock_key_file(&path, "correct horse"),
            Err(LedgerError::WrongPassphrase { .. })
        ));
    }

    #[test]
    fn refuses_short_passphrase_and_cheap_kdf() {
        let dir = tempfile::tempdir().unwrap();
        let short = create_key_file(&dir.path().join("a"), "x", "short", KdfCost::MINIMUM);
        assert!(matches!(short, Err(LedgerError::BadInput { .. })));
        let cheap = KdfCost {
            memory_kib: 1024,
            iterations: 1,
            lanes: 1,
        };
        let err = create_key_file(&dir.path().join("b"), "x", "long enough", cheap);
        assert!(matches!(err, Err(LedgerError::KeyFile { .. })));
    }
}
