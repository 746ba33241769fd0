//! Typed bodies of the ledger's own entry kinds, and the [`Record`] trait every body implements.
//!
//! A body is a plain struct encoded by [`crate::codec`]; its kind name is fixed by the type.
//! Other crates define their own bodies the same way.

use crate::kinds::{
    Role, KIND_ADD_KEY, KIND_CHANGE_ROLE, KIND_ENROL, KIND_NOTE, KIND_OPEN, KIND_REVOKE_KEY,
};
use crate::{EntryHash, PublicKey};
use serde::de::DeserializeOwned;
use serde::{Deserialize, Serialize};

/// A typed entry body with a fixed kind name.
pub trait Record: Serialize + DeserializeOwned {
    /// The kind name stored with (and hashed into) the entry.
    const KIND: &'static str;

    /// Entries this one refers to by hash (e.g. the entry it corrects). Stored in the
    /// envelope, covered by the hash, and indexed for lookups.
    fn references(&self) -> Vec<EntryHash> {
        Vec::new()
    }
}

/// First entry: opens the ledger for a lab and enrols its first QA person.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct OpenLedger {
    /// Random identifier of this ledger, so checkpoints and copies can be told apart.
    #[serde(with = "crate::hash::byte_array")]
    pub ledger_id: [u8; 16],
    /// Name of the lab the ledger belongs to.
    pub lab_name: String,
    /// The first QA person, who signs this entry.
    pub founder: Enrolment,
}

impl Record for OpenLedger {
    const KIND: &'static str = KIND_OPEN;
}

/// A person joining, with a role and a first public key.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Enrolment {
    /// Short unique identifier (lowercase letters, digits, `.`, `-`, `_`).
    pub person: String,
    /// Full name as it should appear on signatures.
    pub name: String,
    /// Role granted.
    pub role: Role,
    /// Public key the person signs with.
    pub public_key: PublicKey,
}

impl Record for Enrolment {
    const KIND: &'static str = KIND_ENROL;
}

/// A further key for an enrolled person (e.g. after a revocation).
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct AddKey {
    /// Whose key.
    pub person: String,
    /// The new public key.
    pub public_key: PublicKey,
    /// Why it is added.
    pub reason: String,
}

impl Record for AddKey {
    const KIND: &'static str = KIND_ADD_KEY;
}

/// A key that may sign nothing from this entry on.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct RevokeKey {
    /// Whose key.
    pub person: String,
    /// The key revoked.
    pub public_key: PublicKey,
    /// Why (lost, compromised, person left).
    pub reason: String,
}

impl Record for RevokeKey {
    const KIND: &'static str = KIND_REVOKE_KEY;
}

/// A person's role changes from this entry on.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct ChangeRole {
    /// Whose role.
    pub person: String,
    /// The new role.
    pub role: Role,
    /// Why.
    pub reason: String,
}

impl Record for ChangeRole {
    const KIND: &'static str = KIND_CHANGE_ROLE;
}

/// A free-text signed note.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Note {
    /// The text.
    pub text: String,
}

impl Record for Note {
    const KIND: &'static str = KIND_NOTE;
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::codec::{decode_exact, encode};

    #[test]
    fn enrolment_round_trips_exactly() {
        let e = Enrolment {
            person: "v.orlov".into(),
            name: "Vera Orlov".into(),
            role: Role::Analyst,
            public_key: PublicKey([9; 32]),
        };
        let bytes = encode(&e).unwrap();
        assert_eq!(decode_exact::<Enrolment>(&bytes).unwrap(), e);
    }
}
