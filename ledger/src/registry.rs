//! Who may sign what, rebuilt by replaying the ledger's own registry entries in order.
//!
//! The registry answers, for an entry at a given position: is the author enrolled, does the
//! signing key belong to the author and was it active then, and does the author's role at that
//! moment allow the entry's kind. It also checks registry entries themselves (a new person id
//! is unique, a key is used by one person only and is not weak, QA does not change their own
//! role, the ledger always keeps one QA person with an active key).

use crate::codec::decode_exact;
use crate::kinds::{
    KindRule, Role, SignatureRule, KIND_ADD_KEY, KIND_CHANGE_ROLE, KIND_ENROL, KIND_OPEN,
    KIND_REVOKE_KEY,
};
use crate::records::{AddKey, ChangeRole, Enrolment, OpenLedger, RevokeKey};
use crate::{PublicKey, Timestamp};
use serde::Serialize;
use std::collections::BTreeMap;

/// One key a person has held.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct KeyRecord {
    /// The public key.
    pub public_key: PublicKey,
    /// Entry that enrolled it.
    pub added_seq: u64,
    /// When it was enrolled.
    pub added_time: Timestamp,
    /// Entry that revoked it, and when.
    pub revoked: Option<(u64, Timestamp)>,
}

/// An enrolled person as the registry knows them now.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct Person {
    /// Short id used as author.
    pub id: String,
    /// Full name.
    pub name: String,
    /// Current role.
    pub role: Role,
    /// Every role held, with the entry and time it began.
    pub role_history: Vec<(u64, Timestamp, Role)>,
    /// Every key held.
    pub keys: Vec<KeyRecord>,
}

impl Person {
    /// Keys not revoked.
    pub fn active_keys(&self) -> impl Iterator<Item = &KeyRecord> {
        self.keys.iter().filter(|k| k.revoked.is_none())
    }
}

/// A reason an entry's author or signer lacks authority for it.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
#[serde(tag = "issue", rename_all = "snake_case")]
pub enum AuthorityIssue {
    /// No rule exists for the kind, so nobody may author it.
    KindUnknown {
        /// The kind.
        kind: String,
    },
    /// The author is not enrolled.
    AuthorUnknown {
        /// The author id.
        author: String,
    },
    /// The kind must be signed and the entry is not.
    SignatureMissing {
        /// The kind.
        kind: String,
    },
    /// The signing key was never enrolled.
    KeyUnknown {
        /// The key.
        key: PublicKey,
    },
    /// The signing key belongs to somebody other than the author.
    KeyOfAnotherPerson {
        /// The key.
        key: PublicKey,
        /// Its owner.
        owner: String,
    },
    /// The signing key had been revoked.
    KeyRevoked {
        /// The key.
        key: PublicKey,
        /// Entry that revoked it.
        revoked_at_seq: u64,
    },
    /// The author's role does not allow the kind.
    RoleNotAllowed {
        /// The author's role at the time.
        role: Role,
        /// The kind.
        kind: String,
    },
}

impl std::fmt::Display for AuthorityIssue {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        use AuthorityIssue::*;
        match self {
            KindUnknown { kind } => write!(f, "kind {kind:?} is not known, so no one may sign it"),
            AuthorUnknown { author } => write!(f, "author {author:?} is not enrolled"),
            SignatureMissing { kind } => write!(f, "a {kind} entry must be signed"),
            KeyUnknown { key } => write!(f, "signing key {} was never enrolled", key.short()),
            KeyOfAnotherPerson { key, owner } => {
                write!(f, "signing key {} belongs to {owner}", key.short())
            }
            KeyRevoked {
                key,
                revoked_at_seq,
            } => write!(
                f,
                "signing key {} was revoked by entry {revoked_at_seq}",
                key.short()
            ),
            RoleNotAllowed { role, kind } => {
                write!(f, "role {role} may not author a {kind} entry")
            }
        }
    }
}

/// The registry state after some prefix of the ledger.
#[derive(Clone, Debug, Default)]
pub struct Registry {
    ledger_id: Option<[u8; 16]>,
    lab_name: String,
    persons: BTreeMap<String, Person>,
    key_owner: BTreeMap<PublicKey, String>,
    last_seq: u64,
}

/// A registry entry's effect, decoded and checked, ready to apply.
#[derive(Clone, Debug)]
pub enum RegistryChange {
    /// The ledger is opened.
    Open(OpenLedger),
    /// A person is enrolled.
    Enrol(Enrolment),
    /// A key is added.
    AddKey(AddKey),
    /// A key is revoked.
    RevokeKey(RevokeKey),
    /// A role changes.
    ChangeRole(ChangeRole),
}

impl Registry {
    /// The empty registry, before the first entry.
    pub fn new() -> Self {
        Self::default()
    }

    /// Id of the ledger, once opened.
    pub fn ledger_id(&self) -> Option<[u8; 16]> {
        self.ledger_id
    }

    /// Name of the lab, once opened.
    pub fn lab_name(&self) -> &str {
        &self.lab_name
    }

    /// Enrolled persons by id.
    pub fn persons(&self) -> &BTreeMap<String, Person> {
        &self.persons
    }

    /// One person.
    pub fn person(&self, id: &str) -> Option<&Person> {
        self.persons.get(id)
    }

    /// Owner of a key, if enrolled.
    pub fn owner_of(&self, key: &PublicKey) -> Option<&str> {
        self.key_owner.get(key).map(String::as_str)
    }

    /// Sequence number of the last registry entry applied.
    pub fn last_seq(&self) -> u64 {
        self.last_seq
    }

    /// Everything wrong with the authority of an entry of `kind` by `author`, signed by
    /// `signer`, judged against the registry as it stands before that entry.
    pub fn authority_issues(
        &self,
        author: &str,
        kind: &str,
        signer: Option<&PublicKey>,
        rule: Option<KindRule>,
    ) -> Vec<AuthorityIssue> {
        let Some(rule) = rule else {
            return vec![AuthorityIssue::KindUnknown { kind: kind.into() }];
        };
        if kind == KIND_OPEN {
            // The founder is enrolled by this very entry; `check_change` judges it.
            return match signer {
                None => vec![AuthorityIssue::SignatureMissing { kind: kind.into() }],
                Some(_) => Vec::new(),
            };
        }
        let mut issues = Vec::new();
        let Some(person) = self.persons.get(author) else {
            issues.push(AuthorityIssue::AuthorUnknown {
                author: author.into(),
            });
            return issues;
        };
        match signer {
            None if rule.signature == SignatureRule::Required => {
                issues.push(AuthorityIssue::SignatureMissing { kind: kind.into() })
            }
            None => {}
            Some(key) => issues.extend(self.key_issue(author, key)),
        }
        if !rule.roles.contains(person.role) {
            issues.push(AuthorityIssue::RoleNotAllowed {
                role: person.role,
                kind: kind.into(),
            });
        }
        issues
    }

    fn key_issue(&self, author: &str, key: &PublicKey) -> Option<AuthorityIssue> {
        let Some(owner) = self.key_owner.get(key) else {
            return Some(AuthorityIssue::KeyUnknown { key: *key });
        };
        if owner != author {
            return Some(AuthorityIssue::KeyOfAnotherPerson {
                key: *key,
                owner: owner.clone(),
            });
        }
        let record = self.persons[owner]
            .keys
            .iter()
            .find(|k| k.public_key == *key)?;
        record.revoked.map(|(seq, _)| AuthorityIssue::KeyRevoked {
            key: *key,
            revoked_at_seq: seq,
        })
    }

    /// Decodes a registry entry's body and checks it makes sense against the current state.
    /// Returns `Ok(None)` for kinds that are not registry kinds.
    pub fn check_change(
        &self,
        seq: u64,
        author: &str,
        kind: &str,
        signer: Option<&PublicKey>,
        body: &[u8],
    ) -> Result<Option<RegistryChange>, String> {
        if kind != KIND_OPEN && self.ledger_id.is_none() {
            return Err(format!(
                "the first entry must be {KIND_OPEN}, found {kind} at entry {seq}"
            ));
        }
        let change = match kind {
            KIND_OPEN => RegistryChange::Open(self.check_open(seq, author, signer, body)?),
            KIND_ENROL => RegistryChange::Enrol(self.check_enrol(body)?),
            KIND_ADD_KEY => RegistryChange::AddKey(self.check_add_key(body)?),
            KIND_REVOKE_KEY => RegistryChange::RevokeKey(self.check_revoke(author, body)?),
            KIND_CHANGE_ROLE => RegistryChange::ChangeRole(self.check_role(author, body)?),
            _ => return Ok(None),
        };
        Ok(Some(change))
    }

    fn check_open(
        &self,
        seq: u64,
        author: &str,
        signer: Option<&PublicKey>,
        body: &[u8],
    ) -> Result<OpenLedger, String> {
        let open: OpenLedger = decode(body)?;
        if seq != 1 || self.ledger_id.is_some() {
            return Err(format!(
                "{KIND_OPEN} may only be the first entry, found at {seq}"
            ));
        }
        check_enrolment_fields(&open.founder)?;
        if open.founder.role != Role::Qa {
            return Err("the person who opens the ledger must have the qa role".into());
        }
        if open.founder.person != author {
            return Err(format!(
                "the opening entry is authored by {author} but enrols {}",
                open.founder.person
            ));
        }
        if signer != Some(&open.founder.public_key) {
            return Err("the opening entry must be signed by the founder's enrolled key".into());
        }
        if open.lab_name.trim().is_empty() {
            return Err("the lab name is empty".into());
        }
        Ok(open)
    }

    fn check_enrol(&self, body: &[u8]) -> Result<Enrolment, String> {
        let enrolment: Enrolment = decode(body)?;
        check_enrolment_fields(&enrolment)?;
        if self.persons.contains_key(&enrolment.person) {
            return Err(format!("person {} is already enrolled", enrolment.person));
        }
        self.check_key_unused(&enrolment.public_key)?;
        Ok(enrolment)
    }

    fn check_add_key(&self, body: &[u8]) -> Result<AddKey, String> {
        let add: AddKey = decode(body)?;
        if !self.persons.contains_key(&add.person) {
            return Err(format!("person {} is not enrolled", add.person));
        }
        require_reason(&add.reason)?;
        add.public_key.to_verifying_key()?;
        self.check_key_unused(&add.public_key)?;
        Ok(add)
    }

    fn check_revoke(&self, author: &str, body: &[u8]) -> Result<RevokeKey, String> {
        let revoke: RevokeKey = decode(body)?;
        require_reason(&revoke.reason)?;
        let Some(person) = self.persons.get(&revoke.person) else {
            return Err(format!("person {} is not enrolled", revoke.person));
        };
        let Some(key) = person
            .keys
            .iter()
            .find(|k| k.public_key == revoke.public_key)
        else {
            return Err(format!(
                "key {} does not belong to {}",
                revoke.public_key.short(),
                revoke.person
            ));
        };
        if key.revoked.is_some() {
            return Err(format!(
                "key {} is already revoked",
                revoke.public_key.short()
            ));
        }
        let author_role = self.persons.get(author).map(|p| p.role);
        if author != revoke.person && author_role != Some(Role::Qa) {
            return Err("only QA or the key's owner may revoke a key".into());
        }
        if person.role == Role::Qa && self.active_qa_keys_excluding(&revoke.public_key) == 0 {
            return Err("revoking this key would leave no QA person with an active key".into());
        }
        Ok(revoke)
    }

    fn check_role(&self, author: &str, body: &[u8]) -> Result<ChangeRole, String> {
        let change: ChangeRole = decode(body)?;
        require_reason(&change.reason)?;
        let Some(person) = self.persons.get(&change.person) else {
            return Err(format!("person {} is not enrolled", change.person));
        };
        if change.person == author {
            return Err("a person may not change their own role".into());
        }
        if person.role == change.role {
            return Err(format!(
                "{} already has the role {}",
                change.person, change.role
            ));
        }
        Ok(change)
    }

    fn check_key_unused(&self, key: &PublicKey) -> Result<(), String> {
        key.to_verifying_key()?;
        match self.key_owner.get(key) {
            Some(owner) => Err(format!(
                "key {} is already enrolled for {owner}",
                key.short()
            )),
            None => Ok(()),
        }
    }

    fn active_qa_keys_excluding(&self, excluded: &PublicKey) -> usize {
        self.persons
            .values()
            .filter(|p| p.role == Role::Qa)
            .flat_map(|p| p.active_keys())
            .filter(|k| k.public_key != *excluded)
            .count()
    }

    /// Applies a checked change made by the entry at `seq`, recorded at `time`.
    pub fn apply(&mut self, seq: u64, time: Timestamp, change: RegistryChange) {
        self.last_seq = seq;
        match change {
            RegistryChange::Open(open) => {
                self.ledger_id = Some(open.ledger_id);
                self.lab_name = open.lab_name;
                self.enrol(seq, time, open.founder);
            }
            RegistryChange::Enrol(enrolment) => self.enrol(seq, time, enrolment),
            RegistryChange::AddKey(add) => self.add_key(seq, time, &add.person, add.public_key),
            RegistryChange::RevokeKey(revoke) => {
                if let Some(person) = self.persons.get_mut(&revoke.person) {
                    for key in &mut person.keys {
                        if key.public_key == revoke.public_key {
                            key.revoked = Some((seq, time));
                        }
                    }
                }
            }
            RegistryChange::ChangeRole(change) => {
                if let Some(person) = self.persons.get_mut(&change.person) {
                    person.role = change.role;
                    person.role_history.push((seq, time, change.role));
                }
            }
        }
    }

    fn enrol(&mut self, seq: u64, time: Timestamp, enrolment: Enrolment) {
        let person = Person {
            id: enrolment.person.clone(),
            name: enrolment.name,
            role: enrolment.role,
            role_history: vec![(seq, time, enrolment.role)],
            keys: Vec::new(),
        };
        self.persons.insert(enrolment.person.clone(), person);
        self.add_key(seq, time, &enrolment.person, enrolment.public_key);
    }

    fn add_key(&mut self, seq: u64, time: Timestamp, person: &str, public_key: PublicKey) {
        if let Some(p) = self.persons.get_mut(person) {
            p.keys.push(KeyRecord {
                public_key,
                added_seq: seq,
                added_time: time,
                revoked: None,
            });
            self.key_owner.insert(public_key, person.to_string());
        }
    }
}

fn decode<T: Serialize + serde::de::DeserializeOwned>(body: &[u8]) -> Result<T, String> {
    decode_exact(body).map_err(|e| format!("body does not decode: {e}"))
}

fn check_enrolment_fields(enrolment: &Enrolment) -> Result<(), String> {
    crate::entry::check_name("person id", &enrolment.person).map_err(|e| e.to_string())?;
    if enrolment.name.trim().is_empty() {
        return Err("the person's full name is empty".into());
    }
    enrolment.public_key.to_verifying_key()?;
    Ok(())
}

fn require_reason(reason: &str) -> Result<(), String> {
    if reason.trim().is_empty() {
        return Err("a reason is required".into());
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::codec::encode;
    use crate::kinds::KindRules;
    use crate::Signer;

    const T: Timestamp = Timestamp(1_800_000_000_000_000);

    fn signer(person: &str, seed: u8) -> Signer {
        Signer::from_secret(person, &[seed; 32])
    }

    fn enrolment(person: &str, role: Role, key: PublicKey) -> Enrolment {
        Enrolment {
            person: person.into(),
            name: format!("{person} full name"),
            role,
            public_key: key,
        }
    }

    /// A registry after opening by `q.ito` (QA) and enrolling `a.ruz` (analyst).
    fn opened() -> Registry {
        let qa = signer("q.ito", 1);
        let mut registry = Registry::new();
        let open = OpenLedger {
            ledger_id: [7; 16],
            lab_name: "Unit Lab".into(),
            founder: enrolment("q.ito", Role::Qa, qa.public_key()),
        };
        let change = registry
            .check_change(
                1,
                "q.ito",
                KIND_OPEN,
                Some(&qa.public_key()),
                &encode(&open).unwrap(),
            )
            .unwrap()
            .unwrap();
        registry.apply(1, T, change);
        let analyst = enrolment("a.ruz", Role::Analyst, signer("a.ruz", 2).public_key());
        let change = registry
            .check_change(
                2,
                "q.ito",
                KIND_ENROL,
                Some(&qa.public_key()),
                &encode(&analyst).unwrap(),
            )
            .unwrap()
            .unwrap();
        registry.apply(2, T, change);
        registry
    }

    fn refusal<R: serde::Serialize>(
        registry: &Registry,
        author: &str,
        kind: &str,
        body: &R,
    ) -> String {
        registry
            .check_change(9, author, kind, None, &encode(body).unwrap())
            .expect_err("change refused")
    }

    #[test]
    fn refuses_enrolment_with_a_small_order_key() {
        // The identity point encoding (y = 1) has order 1 (RFC 8032 5.1.3 decoding).
        let mut identity = [0u8; 32];
        identity[0] = 1;
        let weak = enrolment("w.eak", Role::Analyst, PublicKey(identity));
        let reason = refusal(&opened(), "q.ito", KIND_ENROL, &weak);
        assert!(reason.contains("weak"), "{reason}");
    }

    #[test]
    fn refuses_a_second_enrolment_of_a_person_or_a_key() {
        let registry = opened();
        let again = enrolment("a.ruz", Role::Analyst, signer("x", 3).public_key());
        assert!(refusal(&registry, "q.ito", KIND_ENROL, &again).contains("already enrolled"));
        let reused = enrolment("n.ew", Role::Analyst, signer("a.ruz", 2).public_key());
        assert!(
            refusal(&registry, "q.ito", KIND_ENROL, &reused).contains("already enrolled for a.ruz")
        );
    }

    #[test]
    fn refuses_to_revoke_the_last_active_qa_key() {
        let revoke = RevokeKey {
            person: "q.ito".into(),
            public_key: signer("q.ito", 1).public_key(),
            reason: "leaving".into(),
        };
        let reason = refusal(&opened(), "q.ito", KIND_REVOKE_KEY, &revoke);
        assert!(reason.contains("no QA person"), "{reason}");
    }

    #[test]
    fn lets_owner_but_not_another_analyst_revoke_a_key() {
        let mut registry = opened();
        let other = enrolment("b.oss", Role::Analyst, signer("b.oss", 4).public_key());
        let change = registry
            .check_change(3, "q.ito", KIND_ENROL, None, &encode(&other).unwrap())
            .unwrap()
            .unwrap();
        registry.apply(3, T, change);
        let revoke = RevokeKey {
            person: "a.ruz".into(),
            public_key: signer("a.ruz", 2).public_key(),
            reason: "lost".into(),
        };
        assert!(refusal(&registry, "b.oss", KIND_REVOKE_KEY, &revoke)
            .contains("only QA or the key's owner"));
        let body = encode(&revoke).unwrap();
        assert!(registry
            .check_change(4, "a.ruz", KIND_REVOKE_KEY, None, &body)
            .is_ok());
    }

    #[test]
    fn refuses_own_role_change_and_a_reasonless_one() {
        let registry = opened();
        let own = ChangeRole {
            person: "q.ito".into(),
            role: Role::Analyst,
            reason: "x".into(),
        };
        assert!(refusal(&registry, "q.ito", KIND_CHANGE_ROLE, &own).contains("own role"));
        let blank = ChangeRole {
            person: "a.ruz".into(),
            role: Role::Reviewer,
            reason: "  ".into(),
        };
        assert!(refusal(&registry, "q.ito", KIND_CHANGE_ROLE, &blank).contains("reason"));
    }

    #[test]
    fn judges_authority_by_role_key_and_revocation() {
        let mut registry = opened();
        let rules = KindRules::core();
        let analyst_key = signer("a.ruz", 2).public_key();
        assert!(registry
            .authority_issues("a.ruz", "note", Some(&analyst_key), rules.get("note"))
            .is_empty());
        let issues = registry.authority_issues(
            "a.ruz",
            KIND_ENROL,
            Some(&analyst_key),
            rules.get(KIND_ENROL),
        );
        assert!(matches!(
            issues.as_slice(),
            [AuthorityIssue::RoleNotAllowed {
                role: Role::Analyst,
                ..
            }]
        ));
        let issues =
            registry.authority_issues("q.ito", "note", Some(&analyst_key), rules.get("note"));
        assert!(matches!(
            issues.as_slice(),
            [AuthorityIssue::KeyOfAnotherPerson { .. }]
        ));
        let issues = registry.authority_issues("a.ruz", "note", None, rules.get("note"));
        assert!(matches!(
            issues.as_slice(),
            [AuthorityIssue::SignatureMissing { .. }]
        ));
        let issues = registry.authority_issues(
            "a.ruz",
            "lab.unknown",
            Some(&analyst_key),
            rules.get("lab.unknown"),
        );
        assert!(matches!(
            issues.as_slice(),
            [AuthorityIssue::KindUnknown { .. }]
        ));
        let revoke = RevokeKey {
            person: "a.ruz".into(),
            public_key: analyst_key,
            reason: "lost".into(),
        };
        let change = registry
            .check_change(3, "a.ruz", KIND_REVOKE_KEY, None, &encode(&revoke).unwrap())
            .unwrap()
            .unwrap();
        registry.apply(3, T, change);
        let issues =
            registry.authority_issues("a.ruz", "note", Some(&analyst_key), rules.get("note"));
        assert!(matches!(
            issues.as_slice(),
            [AuthorityIssue::KeyRevoked {
                revoked_at_seq: 3,
                ..
            }]
        ));
    }

    #[test]
    fn refuses_a_second_opening_and_data_before_the_opening() {
        let registry = opened();
        let qa = signer("q.ito", 1);
        let open = OpenLedger {
            ledger_id: [8; 16],
            lab_name: "Again".into(),
            founder: enrolment("q.ito", Role::Qa, qa.public_key()),
        };
        let reason = registry
            .check_change(
                5,
                "q.ito",
                KIND_OPEN,
                Some(&qa.public_key()),
                &encode(&open).unwrap(),
            )
            .unwrap_err();
        assert!(reason.contains("only be the first entry"), "{reason}");
        let empty = Registry::new();
        let note = crate::records::Note {
            text: "early".into(),
        };
        let reason = empty
            .check_change(1, "q.ito", "note", None, &encode(&note).unwrap())
            .unwrap_err();
        assert!(reason.contains("first entry must be"), "{reason}");
    }
}
