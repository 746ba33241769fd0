//! Roles, and which roles may author each kind of entry and whether it must be signed.
//!
//! The ledger knows the rules for its own kinds (opening the ledger, the person and key
//! registry, notes). Crates that add kinds of their own extend [`KindRules`]; the ledger never
//! needs to understand their bodies to enforce who may sign them.

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// What a person is allowed to do in the lab.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Role {
    /// Does the bench work and records it.
    Analyst,
    /// Second-person review of data and results.
    Reviewer,
    /// Quality assurance: manages people and keys, approves.
    Qa,
}

impl Role {
    /// Every role, in order.
    pub const ALL: [Role; 3] = [Role::Analyst, Role::Reviewer, Role::Qa];

    /// The word used on the command line and in reports.
    pub fn as_str(self) -> &'static str {
        match self {
            Role::Analyst => "analyst",
            Role::Reviewer => "reviewer",
            Role::Qa => "qa",
        }
    }

    /// Parses the word used on the command line.
    pub fn parse(text: &str) -> Option<Role> {
        Role::ALL
            .into_iter()
            .find(|r| r.as_str().eq_ignore_ascii_case(text.trim()))
    }

    fn bit(self) -> u8 {
        match self {
            Role::Analyst => 1,
            Role::Reviewer => 2,
            Role::Qa => 4,
        }
    }
}

impl std::fmt::Display for Role {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// A set of roles.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub struct RoleSet(u8);

impl RoleSet {
    /// Every role.
    pub const ANY: RoleSet = RoleSet(7);

    /// The set holding exactly these roles.
    pub fn of(roles: &[Role]) -> Self {
        RoleSet(roles.iter().fold(0, |bits, r| bits | r.bit()))
    }

    /// Whether `role` is in the set.
    pub fn contains(self, role: Role) -> bool {
        self.0 & role.bit() != 0
    }

    /// The roles in the set, in order.
    pub fn roles(self) -> Vec<Role> {
        Role::ALL
            .into_iter()
            .filter(|r| self.contains(*r))
            .collect()
    }
}

/// Whether an entry kind must carry a signature.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum SignatureRule {
    /// Every entry of the kind is signed by its author.
    Required,
    /// Entries may be unsigned (e.g. captured from an instrument); rules downstream treat
    /// unsigned entries as not attributable to a person.
    Optional,
}

/// Who may author one kind of entry.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct KindRule {
    /// Roles allowed to author the kind.
    pub roles: RoleSet,
    /// Whether a signature is required.
    pub signature: SignatureRule,
}

/// Kind name of the first entry, which opens the ledger.
pub const KIND_OPEN: &str = "ledger.open";
/// Kind name of a person's enrolment with their first key.
pub const KIND_ENROL: &str = "person.enrol";
/// Kind name of an additional key for an enrolled person.
pub const KIND_ADD_KEY: &str = "person.add-key";
/// Kind name of a key revocation.
pub const KIND_REVOKE_KEY: &str = "person.revoke-key";
/// Kind name of a role change.
pub const KIND_CHANGE_ROLE: &str = "person.change-role";
/// Kind name of a free-text note.
pub const KIND_NOTE: &str = "note";

/// The kinds that change who may sign what; they are checked one by one, never in a batch.
pub const REGISTRY_KINDS: [&str; 5] = [
    KIND_OPEN,
    KIND_ENROL,
    KIND_ADD_KEY,
    KIND_REVOKE_KEY,
    KIND_CHANGE_ROLE,
];

/// The table of kind rules a ledger is replayed against.
#[derive(Clone, Debug)]
pub struct KindRules {
    rules: BTreeMap<String, KindRule>,
    labeller: Option<Labeller>,
}

/// Gives the labels an entry of `kind` with `body` is looked up by in the label index (e.g. a
/// record's own id); an empty list for entries without any. Must not fail: a body it cannot
/// read simply has no labels.
pub type Labeller = fn(kind: &str, body: &[u8]) -> Vec<String>;

impl KindRules {
    /// Rules for the ledger's own kinds: registry changes by QA (key revocation also by the
    /// key's owner, checked by the registry), notes by anyone, all signed.
    pub fn core() -> Self {
        let qa_signed = KindRule {
            roles: RoleSet::of(&[Role::Qa]),
            signature: SignatureRule::Required,
        };
        let mut rules = BTreeMap::new();
        for kind in [KIND_OPEN, KIND_ENROL, KIND_ADD_KEY, KIND_CHANGE_ROLE] {
            rules.insert(kind.to_string(), qa_signed);
        }
        let anyone_signed = KindRule {
            roles: RoleSet::ANY,
            signature: SignatureRule::Required,
        };
        rules.insert(KIND_REVOKE_KEY.to_string(), anyone_signed);
        rules.insert(KIND_NOTE.to_string(), anyone_signed);
        KindRules {
            rules,
            labeller: None,
        }
    }

    /// The same rules, labelling appended entries with `labeller`.
    pub fn with_labeller(mut self, labeller: Labeller) -> Self {
        self.labeller = Some(labeller);
        self
    }

    /// The labels of an entry of `kind` with `body` (none without a labeller).
    pub fn labels_of(&self, kind: &str, body: &[u8]) -> Vec<String> {
        self.labeller
            .map_or_else(Vec::new, |label| label(kind, body))
    }

    /// Adds or replaces the rule for `kind`.
    pub fn with(mut self, kind: &str, rule: KindRule) -> Self {
        self.rules.insert(kind.to_string(), rule);
        self
    }

    /// The rule for `kind`, if the kind is known.
    pub fn get(&self, kind: &str) -> Option<KindRule> {
        self.rules.get(kind).copied()
    }
}

impl Default for KindRules {
    fn default() -> Self {
        Self::core()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn core_rules_let_only_qa_enrol_people() {
        let rules = KindRules::core();
        let enrol = rules.get(KIND_ENROL).unwrap();
        assert!(enrol.roles.contains(Role::Qa));
        assert!(!enrol.roles.contains(Role::Analyst));
        assert!(rules.get(KIND_NOTE).unwrap().roles.contains(Role::Analyst));
        assert!(rules.get("lab.weighing").is_none());
    }

    #[test]
    fn parses_role_words() {
        assert_eq!(Role::parse("QA"), Some(Role::Qa));
        assert_eq!(Role::parse("reviewer"), Some(Role::Reviewer));
        assert_eq!(Role::parse("boss"), None);
    }
}
