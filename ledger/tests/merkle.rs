//! The ledger's RFC 9162 Merkle tree, checked against things outside it: the Certificate
//! Transparency reference vectors, an independent implementation written here from the RFC's
//! recursive definitions, and the tree a real ledger file stores (schema upgrade, guards,
//! tampering seen by replay).
//!
//! Reference vectors: transparency-dev/merkle, `proof/verify_test.go` at commit
//! 02194e9afb6c1d95b5381350007963aa70fff472 (variables `leaves`, `roots`, `inclusionProofs`,
//! `consistencyProofs`), the data set the Certificate Transparency implementations share for
//! RFC 6962 / RFC 9162 trees. Leaf numbers in its `inclusionProofs` count from 1.

use assize_ledger::merkle::{
    consistency_proof, empty_root, inclusion_proof, leaf_hash, tree_root, verify_consistency,
    verify_inclusion,
};
use assize_ledger::records::Note;
use assize_ledger::{
    Draft, FixedClock, KindRules, Ledger, LedgerError, MemoryTree, OpenMode, Problem,
    ReplayOptions, Signer, Timestamp,
};
use rusqlite::{params, Connection};
use std::path::{Path, PathBuf};
use std::sync::Arc;

// ---------------------------------------------------------------------------------------------
// An independent implementation, straight from RFC 9162 §2.1.1, §2.1.3.1 and §2.1.4.1, on
// lists of byte strings. It shares nothing with the module but SHA-256.
// ---------------------------------------------------------------------------------------------

mod rfc {
    use sha2::{Digest, Sha256};

    /// HASH(a || b || ...).
    pub fn hash(parts: &[&[u8]]) -> Vec<u8> {
        let mut hasher = Sha256::new();
        for part in parts {
            hasher.update(part);
        }
        hasher.finalize().to_vec()
    }

    /// "k be the largest power of two smaller than n", found by counting up.
    fn largest_power_of_two_below(n: usize) -> usize {
        let mut k = 1;
        while k * 2 < n {
            k *= 2;
        }
        k
    }

    /// MTH({}) = HASH(); MTH({d0}) = HASH(0x00 || d0);
    /// MTH(D[n]) = HASH(0x01 || MTH(D[0:k]) || MTH(D[k:n])).
    pub fn mth(d: &[Vec<u8>]) -> Vec<u8> {
        match d.len() {
            0 => hash(&[]),
            1 => hash(&[&[0x00], &d[0]]),
            n => {
                let k = largest_power_of_two_below(n);
                hash(&[&[0x01], &mth(&d[..k]), &mth(&d[k..])])
            }
        }
    }

    /// PATH(0, {d0}) = {}; PATH(m, D[n]) = PATH(m, D[0:k]) : MTH(D[k:n]) for m < k, and
    /// PATH(m - k, D[k:n]) : MTH(D[0:k]) for m >= k.
    pub fn path(m: usize, d: &[Vec<u8>]) -> Vec<Vec<u8>> {
        let n = d.len();
        if n == 1 {
            return Vec::new();
        }
        let k = largest_power_of_two_below(n);
        let (mut rest, sibling) = if m < k {
            (path(m, &d[..k]), mth(&d[k..]))
        } else {
            (path(m - k, &d[k..]), mth(&d[..k]))
        };
        rest.push(sibling);
        rest
    }

    /// PROOF(m, D[n]) = SUBPROOF(m, D[n], true).
    pub fn proof(m: usize, d: &[Vec<u8>]) -> Vec<Vec<u8>> {
        subproof(m, d, true)
    }

    /// SUBPROOF(m, D[m], true) = {}; SUBPROOF(m, D[m], false) = {MTH(D[m])};
    /// for m < n: SUBPROOF(m, D[0:k], b) : MTH(D[k:n]) when m <= k, else
    /// SUBPROOF(m - k, D[k:n], false) : MTH(D[0:k]).
    fn subproof(m: usize, d: &[Vec<u8>], b: bool) -> Vec<Vec<u8>> {
        let n = d.len();
        if m == n {
            return if b { Vec::new() } else { vec![mth(d)] };
        }
        let k = largest_power_of_two_below(n);
        let (mut rest, sibling) = if m <= k {
            (subproof(m, &d[..k], b), mth(&d[k..]))
        } else {
            (subproof(m - k, &d[k..], false), mth(&d[..k]))
        };
        rest.push(sibling);
        rest
    }
}

fn hex32(text: &str) -> [u8; 32] {
    hex::decode(text)
        .expect("hex")
        .try_into()
        .expect("32 bytes")
}

fn to_arrays(proof: &[Vec<u8>]) -> Vec<[u8; 32]> {
    proof
        .iter()
        .map(|p| p.as_slice().try_into().expect("32 bytes"))
        .collect()
}

fn to_array(hash: &[u8]) -> [u8; 32] {
    hash.try_into().expect("32 bytes")
}

// ---------------------------------------------------------------------------------------------
// The published vectors.
// ---------------------------------------------------------------------------------------------

/// `leaves`, as hex inputs.
const CT_LEAVES: [&str; 8] = [
    "",
    "00",
    "10",
    "2021",
    "3031",
    "40414243",
    "5051525354555657",
    "606162636465666768696a6b6c6d6e6f",
];

/// `roots`: the tree roots of sizes 1 to 8.
const CT_ROOTS: [&str; 8] = [
    "6e340b9cffb37a989ca544e6bb780a2c78901d3fb33738768511a30617afa01d",
    "fac54203e7cc696cf0dfcb42c92a1d9dbaf70ad9e621f4bd8d98662f00e3c125",
    "aeb6bcfe274b70a14fb067a5e5578264db0fa9b51af5e0ba159158f329e06e77",
    "d37ee418976dd95753c1c73862b9398fa2a2cf9b4ff0fdfe8b30cd95209614b7",
    "4e3bbb1f7b478dcfe71fb631631519a3bca12c9aefca1612bfce4c13a86264d4",
    "76e67dadbcdf1e10e1b74ddc608abd2f98dfb16fbce75277b5232a127f2087ef",
    "ddb89be403809e325750d3d263cd78929c2942b7942a34b77e122c9594a74c8c",
    "5dc9da79a70659a9ad559cb701ded9a2ab9d823aad2f4960cfe370eff4604328",
];

/// `inclusionProofs`: (leaf number counted from 1, tree size, path).
const CT_INCLUSION: [(u64, u64, &[&str]); 5] = [
    (1, 1, &[]),
    (
        1,
        8,
        &[
            "96a296d224f285c67bee93c30f8a309157f0daa35dc5b87e410b78630a09cfc7",
            "5f083f0a1a33ca076a95279832580db3e0ef4584bdff1f54c8a360f50de3031e",
            "6b47aaf29ee3c2af9af889bc1fb9254dabd31177f16232dd6aab035ca39bf6e4",
        ],
    ),
    (
        6,
        8,
        &[
            "bc1a0643b12e4d2d7c77918f44e0f4f79a838b6cf9ec5b5c283e1f4d88599e6b",
            "ca854ea128ed050b41b35ffc1b87b8eb2bde461e9e3b5596ece6b9d5975a0ae0",
            "d37ee418976dd95753c1c73862b9398fa2a2cf9b4ff0fdfe8b30cd95209614b7",
        ],
    ),
    (
        3,
        3,
        &["fac54203e7cc696cf0dfcb42c92a1d9dbaf70ad9e621f4bd8d98662f00e3c125"],
    ),
    (
        2,
        5,
        &[
            "6e340b9cffb37a989ca544e6bb780a2c78901d3fb33738768511a30617afa01d",
            "5f083f0a1a33ca076a95279832580db3e0ef4584bdff1f54c8a360f50de3031e",
            "bc1a0643b12e4d2d7c77918f44e0f4f79a838b6cf9ec5b5c283e1f4d88599e6b",
        ],
    ),
];

/// `consistencyProofs`: (old size, new size, proof).
const CT_CONSISTENCY: [(u64, u64, &[&str]); 5] = [
    (1, 1, &[]),
    (
        1,
        8,
        &[
            "96a296d224f285c67bee93c30f8a309157f0daa35dc5b87e410b78630a09cfc7",
            "5f083f0a1a33ca076a95279832580db3e0ef4584bdff1f54c8a360f50de3031e",
            "6b47aaf29ee3c2af9af889bc1fb9254dabd31177f16232dd6aab035ca39bf6e4",
        ],
    ),
    (
        6,
        8,
        &[
            "0ebc5d3437fbe2db158b9f126a1d118e308181031d0a949f8dededebc558ef6a",
            "ca854ea128ed050b41b35ffc1b87b8eb2bde461e9e3b5596ece6b9d5975a0ae0",
            "d37ee418976dd95753c1c73862b9398fa2a2cf9b4ff0fdfe8b30cd95209614b7",
        ],
    ),
    (
        2,
        5,
        &[
            "5f083f0a1a33ca076a95279832580db3e0ef4584bdff1f54c8a360f50de3031e",
            "bc1a0643b12e4d2d7c77918f44e0f4f79a838b6cf9ec5b5c283e1f4d88599e6b",
        ],
    ),
    (
        6,
        7,
        &[
            "0ebc5d3437fbe2db158b9f126a1d118e308181031d0a949f8dededebc558ef6a",
            "b08693ec2e721597130641e8211e7eedccb4c26413963eee6c1e2ed16ffb1a5f",
            "d37ee418976dd95753c1c73862b9398fa2a2cf9b4ff0fdfe8b30cd95209614b7",
        ],
    ),
];

fn ct_leaf_data() -> Vec<Vec<u8>> {
    CT_LEAVES
        .iter()
        .map(|h| hex::decode(h).expect("hex"))
        .collect()
}

#[test]
fn tree_roots_match_the_ct_reference_roots_for_sizes_1_to_8() {
    let data = ct_leaf_data();
    let tree = MemoryTree::from_leaf_data(&data);
    for (size, root) in (1u64..).zip(CT_ROOTS) {
        let size_usize = size as usize;
        // transparency-dev/merkle proof/verify_test.go `roots[size - 1]`.
        assert_eq!(
            tree_root(&tree, size).expect("root"),
            hex32(root),
            "size {size}"
        );
        // The independent RFC 9162 §2.1.1 MTH agrees with the published root too.
        assert_eq!(
            rfc::mth(&data[..size_usize]),
            hex32(root).to_vec(),
            "size {size}"
        );
    }
    // RFC 9162 §2.1.1: MTH({}) = SHA-256() (FIPS 180-4 value of the empty string).
    assert_eq!(tree_root(&tree, 0).expect("root"), empty_root());
    assert_eq!(rfc::mth(&[]), empty_root().to_vec());
}

#[test]
fn inclusion_proofs_match_the_ct_reference_paths_and_verify() {
    let data = ct_leaf_data();
    let tree = MemoryTree::from_leaf_data(&data);
    for (leaf_number, size, path) in CT_INCLUSION {
        // transparency-dev/merkle proof/verify_test.go `inclusionProofs` (1-based leaf).
        let expected: Vec<[u8; 32]> = path.iter().map(|h| hex32(h)).collect();
        let index = leaf_number - 1;
        let proof = inclusion_proof(&tree, index, size).expect("proof");
        assert_eq!(proof, expected, "leaf {leaf_number} of {size}");
        let independent = rfc::path(index as usize, &data[..size as usize]);
        assert_eq!(
            to_arrays(&independent),
            expected,
            "RFC PATH, leaf {leaf_number}"
        );
        let root = hex32(CT_ROOTS[size as usize - 1]);
        let leaf = leaf_hash(&data[index as usize]);
        // RFC 9162 §2.1.3.2 accepts the published path.
        assert!(verify_inclusion(index, size, &leaf, &expected, &root));
    }
}

#[test]
fn consistency_proofs_match_the_ct_reference_proofs_and_verify() {
    let data = ct_leaf_data();
    let tree = MemoryTree::from_leaf_data(&data);
    for (old_size, new_size, path) in CT_CONSISTENCY {
        // transparency-dev/merkle proof/verify_test.go `consistencyProofs`.
        let expected: Vec<[u8; 32]> = path.iter().map(|h| hex32(h)).collect();
        let proof = consistency_proof(&tree, old_size, new_size).expect("proof");
        assert_eq!(proof, expected, "{old_size} to {new_size}");
        if old_size < new_size {
            let independent = rfc::proof(old_size as usize, &data[..new_size as usize]);
            assert_eq!(to_arrays(&independent), expected, "RFC PROOF {old_size}");
        }
        let old_root = hex32(CT_ROOTS[old_size as usize - 1]);
        let new_root = hex32(CT_ROOTS[new_size as usize - 1]);
        // RFC 9162 §2.1.4.2 accepts the published proof (1 to 1: equal sizes, our stated rule).
        assert!(verify_consistency(
            old_size, new_size, &old_root, &new_root, &expected
        ));
    }
}

/// `sha256SomeHash` of the reference file: a 32-byte value that is no root of these trees.
const SOME_HASH: &str = "abacaba000000000000000000000000000000000000000000060061e00123456";

/// One claimed inclusion: leaf `index` with hash `leaf` in the tree of `size` leaves whose root
/// is `root`, by `proof`.
struct InclusionClaim {
    what: &'static str,
    index: u64,
    size: u64,
    root: [u8; 32],
    leaf: [u8; 32],
    proof: Vec<[u8; 32]>,
}

impl InclusionClaim {
    fn holds(&self) -> bool {
        verify_inclusion(self.index, self.size, &self.leaf, &self.proof, &self.root)
    }
}

/// The reference file's `corruptInclusionProof` probes that fit 32-byte proof elements, each
/// of which its `verifierCheck` requires the verifier to refuse.
#[test]
fn verify_inclusion_refuses_the_ct_reference_corruptions() {
    let data = ct_leaf_data();
    let some = hex32(SOME_HASH);
    for (leaf_number, size, path) in CT_INCLUSION {
        let proof: Vec<[u8; 32]> = path.iter().map(|h| hex32(h)).collect();
        let genuine = InclusionClaim {
            what: "genuine",
            index: leaf_number - 1,
            size,
            root: hex32(CT_ROOTS[size as usize - 1]),
            leaf: leaf_hash(&data[leaf_number as usize - 1]),
            proof: proof.clone(),
        };
        assert!(genuine.holds());
        let (index, root) = (genuine.index, genuine.root);
        let with = |what, change: &dyn Fn(&mut InclusionClaim)| {
            let mut claim = InclusionClaim {
                what,
                proof: proof.clone(),
                ..genuine
            };
            change(&mut claim);
            claim
        };
        let mut probes = vec![
            with("leafIndex - 1", &|c| c.index = index.wrapping_sub(1)),
            with("leafIndex + 1", &|c| c.index = index + 1),
            with("leafIndex ^ 2", &|c| c.index = index ^ 2),
            with("treeSize * 2", &|c| c.size = size * 2),
            with("treeSize / 2", &|c| c.size = size / 2),
            with("wrong leaf", &|c| c.leaf = leaf_hash(b"WrongLeaf")),
            with("empty root", &|c| c.root = empty_root()),
            with("random root", &|c| c.root = some),
            with("trailing root", &|c| c.proof.push(root)),
            with("preceding root", &|c| c.proof.insert(0, root)),
            with("removed component", &|c| {
                c.proof.pop();
            }),
        ];
        if proof.is_empty() {
            probes.pop(); // nothing to remove from an empty path
        }
        if proof.len() > 1 {
            probes.push(with("inserted component", &|c| c.proof.insert(1, some)));
        }
        for i in 0..proof.len() {
            // "modified proof[i] bit 3"
            probes.push(with("modified bit", &|c| c.proof[i][0] ^= 8));
        }
        for probe in probes {
            assert!(
                !probe.holds(),
                "{}: leaf {leaf_number} of {size}",
                probe.what
            );
        }
    }
}

/// One claimed consistency: the tree of `old` leaves with root `old_root` is a prefix of the
/// tree of `new` leaves with root `new_root`, by `proof`.
struct ConsistencyClaim {
    what: &'static str,
    old: u64,
    new: u64,
    old_root: [u8; 32],
    new_root: [u8; 32],
    proof: Vec<[u8; 32]>,
}

impl ConsistencyClaim {
    fn holds(&self) -> bool {
        verify_consistency(
            self.old,
            self.new,
            &self.old_root,
            &self.new_root,
            &self.proof,
        )
    }
}

/// The reference file's `corruptConsistencyProof` probes that fit 32-byte proof elements, each
/// of which its `verifierConsistencyCheck` requires the verifier to refuse (it probes only
/// non-empty proofs).
#[test]
fn verify_consistency_refuses_the_ct_reference_corruptions() {
    let wrong = hex32(SOME_HASH);
    for (old, new, path) in CT_CONSISTENCY.iter().filter(|(_, _, p)| !p.is_empty()) {
        let (old, new) = (*old, *new);
        let proof: Vec<[u8; 32]> = path.iter().map(|h| hex32(h)).collect();
        let genuine = ConsistencyClaim {
            what: "genuine",
            old,
            new,
            old_root: hex32(CT_ROOTS[old as usize - 1]),
            new_root: hex32(CT_ROOTS[new as usize - 1]),
            proof: proof.clone(),
        };
        assert!(genuine.holds());
        let (root1, root2) = (genuine.old_root, genuine.new_root);
        let with = |what, change: &dyn Fn(&mut ConsistencyClaim)| {
            let mut claim = ConsistencyClaim {
                what,
                proof: proof.clone(),
                ..genuine
            };
            change(&mut claim);
            claim
        };
        let mut probes = vec![
            with("size1 - 1", &|c| c.old = old - 1),
            with("size1 + 1", &|c| c.old = old + 1),
            with("size1 ^ 2", &|c| c.old = old ^ 2),
            with("size2 * 2", &|c| c.new = new * 2),
            with("size2 / 2", &|c| c.new = new / 2),
            with("wrong root1", &|c| c.old_root = wrong),
            with("wrong root2", &|c| c.new_root = wrong),
            with("swapped roots", &|c| {
                (c.old_root, c.new_root) = (root2, root1)
            }),
            with("empty proof", &|c| c.proof.clear()),
            with("trailing root1", &|c| c.proof.push(root1)),
            with("trailing root2", &|c| c.proof.push(root2)),
            with("preceding root1", &|c| c.proof.insert(0, root1)),
            with("preceding root2", &|c| c.proof.insert(0, root2)),
            with("preceding proof[0]", &|c| c.proof.insert(0, proof[0])),
            with("truncated proof", &|c| {
                c.proof.pop();
            }),
        ];
        for i in 0..proof.len() {
            // "modified proof[i] bit 4"
            probes.push(with("modified bit", &|c| c.proof[i][0] ^= 16));
        }
        for probe in probes {
            assert!(!probe.holds(), "{}: {old} to {new}", probe.what);
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Every size 1..=70 against the independent implementation, and the verifiers against
// corrupted proofs.
// ---------------------------------------------------------------------------------------------

/// Invented leaf data of varied lengths (0 to 40 bytes).
fn sweep_data(count: usize) -> Vec<Vec<u8>> {
    (0..count)
        .map(|i| (0..(i * 7) % 41).map(|j| (i * 31 + j * 17) as u8).collect())
        .collect()
}

/// The proof with bit `bit` of element `element` flipped.
fn flipped(proof: &[[u8; 32]], element: usize, bit: usize) -> Vec<[u8; 32]> {
    let mut changed = proof.to_vec();
    changed[element][bit / 8] ^= 1 << (bit % 8);
    changed
}

#[test]
fn every_root_and_inclusion_proof_up_to_70_leaves_matches_the_rfc_definitions() {
    const MAX: usize = 70;
    let data = sweep_data(MAX + 1);
    let tree = MemoryTree::from_leaf_data(&data);
    let roots: Vec<[u8; 32]> = (0..=MAX + 1)
        .map(|n| to_array(&rfc::mth(&data[..n])))
        .collect();
    for n in 1..=MAX {
        let size = n as u64;
        // RFC 9162 §2.1.1 MTH, written independently above.
        assert_eq!(tree_root(&tree, size).expect("root"), roots[n], "size {n}");
        for m in 0..n {
            let index = m as u64;
            let proof = inclusion_proof(&tree, index, size).expect("proof");
            // RFC 9162 §2.1.3.1 PATH, written independently above.
            assert_eq!(
                proof,
                to_arrays(&rfc::path(m, &data[..n])),
                "leaf {m} of {n}"
            );
            let leaf = leaf_hash(&data[m]);
            // RFC 9162 §2.1.3.2 accepts the genuine proof...
            assert!(verify_inclusion(index, size, &leaf, &proof, &roots[n]));
            // ...and rejects every corruption of it.
            assert_inclusion_rejects_corruptions(&data, &roots, m, n, &proof);
        }
    }
}

/// Every way of getting an inclusion proof wrong, each of which RFC 9162 §2.1.3.2 must refuse.
fn assert_inclusion_rejects_corruptions(
    data: &[Vec<u8>],
    roots: &[[u8; 32]],
    m: usize,
    n: usize,
    proof: &[[u8; 32]],
) {
    let (index, size) = (m as u64, n as u64);
    let leaf = leaf_hash(&data[m]);
    let context = format!("leaf {m} of {n}");
    for element in 0..proof.len() {
        let bit = (m * 37 + element * 101 + n) % 256;
        let bad = flipped(proof, element, bit);
        assert!(
            !verify_inclusion(index, size, &leaf, &bad, &roots[n]),
            "{context}: bit"
        );
    }
    // A wrong size, judged against that size's own root.
    assert!(
        !verify_inclusion(index, size + 1, &leaf, proof, &roots[n + 1]),
        "{context}: +1"
    );
    if m + 1 < n {
        assert!(
            !verify_inclusion(index, size - 1, &leaf, proof, &roots[n - 1]),
            "{context}: -1"
        );
    }
    // A wrong leaf: another index, other data.
    if m + 1 < n {
        assert!(
            !verify_inclusion(index + 1, size, &leaf, proof, &roots[n]),
            "{context}: index"
        );
    }
    if m > 0 {
        assert!(
            !verify_inclusion(index - 1, size, &leaf, proof, &roots[n]),
            "{context}: index"
        );
    }
    let other = leaf_hash(&data[(m + 1) % data.len()]);
    assert!(
        !verify_inclusion(index, size, &other, proof, &roots[n]),
        "{context}: leaf"
    );
    assert!(
        !verify_inclusion(size, size, &leaf, proof, &roots[n]),
        "{context}: beyond"
    );
    // A proof cut short or run long.
    if let Some((_, shorter)) = proof.split_last() {
        assert!(
            !verify_inclusion(index, size, &leaf, shorter, &roots[n]),
            "{context}: cut"
        );
    }
    let mut longer = proof.to_vec();
    longer.push(roots[n]);
    assert!(
        !verify_inclusion(index, size, &leaf, &longer, &roots[n]),
        "{context}: long"
    );
}

#[test]
fn every_consistency_proof_up_to_70_leaves_matches_the_rfc_definitions() {
    const MAX: usize = 70;
    let data = sweep_data(MAX + 1);
    let tree = MemoryTree::from_leaf_data(&data);
    let roots: Vec<[u8; 32]> = (0..=MAX + 1)
        .map(|n| to_array(&rfc::mth(&data[..n])))
        .collect();
    for n in 1..=MAX {
        for m in 0..=n {
            let (old_size, new_size) = (m as u64, n as u64);
            let proof = consistency_proof(&tree, old_size, new_size).expect("proof");
            if 0 < m && m < n {
                // RFC 9162 §2.1.4.1 PROOF, written independently above.
                assert_eq!(proof, to_arrays(&rfc::proof(m, &data[..n])), "{m} to {n}");
            } else {
                // Nothing to prove for an empty old tree or equal sizes (our stated rule).
                assert!(proof.is_empty(), "{m} to {n}");
            }
            // RFC 9162 §2.1.4.2 accepts the genuine proof...
            assert!(verify_consistency(
                old_size, new_size, &roots[m], &roots[n], &proof
            ));
            // ...and rejects every corruption of it.
            if 0 < m && m < n {
                assert_consistency_rejects_corruptions(&roots, m, n, &proof);
            }
        }
    }
}

/// Every way of getting a consistency proof wrong, each of which RFC 9162 §2.1.4.2 must refuse.
fn assert_consistency_rejects_corruptions(
    roots: &[[u8; 32]],
    m: usize,
    n: usize,
    proof: &[[u8; 32]],
) {
    let (old, new) = (m as u64, n as u64);
    let context = format!("{m} to {n}");
    let check = |o: usize, nn: usize, p: &[[u8; 32]]| {
        verify_consistency(o as u64, nn as u64, &roots[o], &roots[nn], p)
    };
    for element in 0..proof.len() {
        let bit = (m * 53 + element * 89 + n) % 256;
        assert!(
            !check(m, n, &flipped(proof, element, bit)),
            "{context}: bit"
        );
    }
    // Wrong sizes, each judged against that size's own root.
    assert!(!check(m + 1, n, proof), "{context}: old+1");
    if m > 1 {
        assert!(!check(m - 1, n, proof), "{context}: old-1");
    }
    assert!(!check(m, n + 1, proof), "{context}: new+1");
    if m + 1 < n {
        assert!(!check(m, n - 1, proof), "{context}: new-1");
    }
    // Roots swapped, a proof cut short or run long, no proof at all.
    assert!(
        !verify_consistency(old, new, &roots[n], &roots[m], proof),
        "{context}: swap"
    );
    if let Some((_, shorter)) = proof.split_last() {
        assert!(!check(m, n, shorter), "{context}: cut");
    }
    let mut longer = proof.to_vec();
    longer.push(roots[n]);
    assert!(!check(m, n, &longer), "{context}: long");
    assert!(!check(m, n, &[]), "{context}: empty");
}

// ---------------------------------------------------------------------------------------------
// The tree stored in a ledger file.
// ---------------------------------------------------------------------------------------------

const START: Timestamp = Timestamp(1_802_000_000_000_000);

fn founder() -> Signer {
    Signer::from_secret("w.halloran", &[61; 32])
}

/// A fresh ledger with `notes` notes after the opening entry: single appends and batches, so
/// nodes are written both ways. Head = `notes + 1`.
fn ledger_with_notes(dir: &Path, notes: usize) -> (PathBuf, Ledger) {
    let path = dir.join("tree.assize");
    let clock = Arc::new(FixedClock::new(START, 1_000));
    let signer = founder();
    let (mut ledger, _) = Ledger::create(
        &path,
        "Tree Test Lab",
        "Wynn Halloran",
        &signer,
        KindRules::core(),
        clock,
    )
    .expect("create ledger");
    let singles = notes.min(40);
    for i in 0..singles {
        let note = Note {
            text: format!("single note {i}"),
        };
        ledger.append_record(&note, &signer).expect("append");
    }
    let mut left = notes - singles;
    while left > 0 {
        let count = left.min(37);
        ledger
            .append_batch(count, Some(&signer), |i, _| {
                let text = format!("batch note {left}-{i}");
                Draft::of_record("w.halloran", &Note { text })
            })
            .expect("batch");
        left -= count;
    }
    (path, ledger)
}

/// The stored entry hashes, in order, as the leaf data of the tree.
fn entry_hashes(ledger: &Ledger) -> Vec<Vec<u8>> {
    let mut hashes = Vec::new();
    ledger
        .store()
        .for_each_entry(1, |entry| {
            hashes.push(entry.hash.0.to_vec());
            Ok(true)
        })
        .expect("read entries");
    hashes
}

/// Every row of the node table, ordered.
fn node_rows(path: &Path) -> Vec<(i64, i64, Vec<u8>)> {
    let conn = Connection::open(path).expect("open ledger file with SQLite");
    let mut statement = conn
        .prepare("SELECT level, idx, hash FROM merkle_nodes ORDER BY level, idx")
        .expect("prepare");
    let rows = statement
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))
        .expect("query");
    rows.collect::<rusqlite::Result<_>>().expect("rows")
}

fn open(path: &Path, mode: OpenMode) -> Ledger {
    let clock = Arc::new(FixedClock::new(Timestamp(START.0 + 86_400_000_000), 1_000));
    Ledger::open(path, mode, KindRules::core(), clock).expect("open ledger")
}

fn replay(ledger: &Ledger) -> assize_ledger::IntegrityReport {
    ledger
        .replay(&ReplayOptions::default())
        .expect("replay runs")
}

#[test]
fn stored_tree_gives_the_rfc_roots_and_proofs_of_the_entry_hashes() {
    let dir = tempfile::tempdir().expect("temp dir");
    let (path, ledger) = ledger_with_notes(dir.path(), 299);
    let head = ledger.head().expect("head").expect("some head").seq;
    assert_eq!(head, 300);
    let data = entry_hashes(&ledger);
    // Every tree head, against RFC 9162 §2.1.1 MTH over the entry hashes as leaf data.
    for size in 0..=head {
        let tree_head = ledger.tree_head(size).expect("tree head");
        assert_eq!(tree_head.size, size);
        assert_eq!(tree_head.root.to_vec(), rfc::mth(&data[..size as usize]));
    }
    // Inclusion proofs of every entry in trees of several sizes (RFC 9162 §2.1.3.1 PATH), each
    // accepted by the §2.1.3.2 verifier with the leaf hash of the entry hash.
    for size in [1, 2, 99, 128, 129, 255, 256, 257, 300] {
        let root = ledger.tree_head(size).expect("tree head").root;
        for seq in 1..=size {
            let proof = ledger.inclusion_proof(seq, size).expect("proof");
            let index = (seq - 1) as usize;
            assert_eq!(proof, to_arrays(&rfc::path(index, &data[..size as usize])));
            let leaf = leaf_hash(&data[index]);
            assert!(verify_inclusion(seq - 1, size, &leaf, &proof, &root));
        }
    }
    // Consistency from every earlier size to the head, and between a few earlier sizes
    // (RFC 9162 §2.1.4.1 PROOF, accepted by the §2.1.4.2 verifier).
    let pairs = (1..head)
        .map(|old| (old, head))
        .chain([(3, 7), (64, 65), (100, 200)]);
    for (old, new) in pairs {
        let proof = ledger.consistency_proof(old, new).expect("proof");
        let expected = rfc::proof(old as usize, &data[..new as usize]);
        assert_eq!(proof, to_arrays(&expected), "{old} to {new}");
        let old_root = ledger.tree_head(old).expect("old head").root;
        let new_root = ledger.tree_head(new).expect("new head").root;
        assert!(verify_consistency(old, new, &old_root, &new_root, &proof));
    }
    // The node table holds exactly the perfect subtrees of the entries' leaves, no more.
    let expected_rows: Vec<(i64, i64, Vec<u8>)> = MemoryTree::from_leaf_data(&data)
        .nodes()
        .map(|n| (i64::from(n.level), n.index as i64, n.hash.to_vec()))
        .collect();
    let mut sorted = expected_rows.clone();
    sorted.sort();
    assert_eq!(node_rows(&path), sorted);
    // Perfect subtrees of 300 leaves: 300 + 150 + 75 + 37 + 18 + 9 + 4 + 2 + 1.
    assert_eq!(sorted.len(), 596);
    assert!(replay(&ledger).intact());
}

#[test]
fn tree_requests_beyond_the_head_or_out_of_order_are_refused_with_facts() {
    let dir = tempfile::tempdir().expect("temp dir");
    let (_path, ledger) = ledger_with_notes(dir.path(), 9);
    let message = |e: LedgerError| e.to_string();
    let err = ledger.tree_head(11).expect_err("beyond the head");
    assert_eq!(
        message(err),
        "bad tree size: 11 is beyond the last entry 10"
    );
    let err = ledger.inclusion_proof(0, 5).expect_err("seq 0");
    assert_eq!(
        message(err),
        "bad entry for an inclusion proof: entry 0 is not among entries 1 to 5"
    );
    let err = ledger.inclusion_proof(6, 5).expect_err("seq beyond size");
    assert!(message(err).contains("entry 6 is not among entries 1 to 5"));
    let err = ledger.consistency_proof(6, 5).expect_err("old beyond new");
    assert!(message(err).contains("the old size 6 is larger than the new size 5"));
    let err = ledger
        .consistency_proof(2, 12)
        .expect_err("new beyond head");
    assert!(message(err).contains("12 is beyond the last entry 10"));
    // The empty tree is a tree head too (RFC 9162 §2.1.1 MTH({})).
    assert_eq!(ledger.tree_head(0).expect("empty head").root, empty_root());
}

// ---------------------------------------------------------------------------------------------
// Schema 1 files: read-only they replay without a tree; read-write they get one.
// ---------------------------------------------------------------------------------------------

const TREE_TRIGGERS: [&str; 3] = [
    "merkle_nodes_refuse_update",
    "merkle_nodes_refuse_delete",
    "merkle_nodes_refuse_replace",
];

/// Turns a closed ledger file back into what schema version 1 wrote: no tree table.
fn make_schema_1(path: &Path) {
    let conn = Connection::open(path).expect("open ledger file with SQLite");
    for trigger in TREE_TRIGGERS {
        conn.execute_batch(&format!("DROP TRIGGER {trigger}"))
            .expect("drop trigger");
    }
    conn.execute_batch(
        "DROP TRIGGER entry_labels_refuse_update; DROP TRIGGER entry_labels_refuse_delete;
         DROP TABLE entry_labels; DROP TABLE merkle_nodes; PRAGMA user_version = 1;",
    )
    .expect("drop tree and labels");
}

fn schema_version(path: &Path) -> i64 {
    let conn = Connection::open(path).expect("open ledger file with SQLite");
    conn.query_row("PRAGMA user_version", [], |r| r.get(0))
        .expect("user_version")
}

fn trigger_names(path: &Path) -> Vec<String> {
    let conn = Connection::open(path).expect("open ledger file with SQLite");
    let mut statement = conn
        .prepare("SELECT name FROM sqlite_master WHERE type = 'trigger' AND tbl_name = 'merkle_nodes' ORDER BY name")
        .expect("prepare");
    let names = statement
        .query_map([], |r| r.get(0))
        .expect("query")
        .collect::<rusqlite::Result<_>>()
        .expect("names");
    names
}

#[test]
fn a_schema_1_file_replays_read_only_and_gets_its_tree_when_opened_read_write() {
    let dir = tempfile::tempdir().expect("temp dir");
    let (path, ledger) = ledger_with_notes(dir.path(), 60);
    let rows_before = node_rows(&path);
    let data = entry_hashes(&ledger);
    drop(ledger);
    make_schema_1(&path);

    let read_only = open(&path, OpenMode::ReadOnly);
    assert!(!read_only.store().has_tree());
    let report = replay(&read_only);
    assert!(report.intact(), "{:#?}", report.problems);
    assert_eq!(report.entries, 61);
    for refused in [
        read_only.tree_head(10).map(|_| ()),
        read_only.inclusion_proof(3, 10).map(|_| ()),
        read_only.consistency_proof(3, 10).map(|_| ()),
    ] {
        let err = refused.expect_err("no tree to read");
        assert!(
            matches!(&err, LedgerError::TreeNotBuilt { path: p } if *p == path),
            "{err}"
        );
        assert!(err.to_string().contains("open it read-write once"), "{err}");
    }
    drop(read_only);
    assert_eq!(schema_version(&path), 1, "a read-only open never writes");

    let mut read_write = open(&path, OpenMode::ReadWrite);
    assert!(read_write.store().has_tree());
    assert_eq!(
        schema_version(&path),
        3,
        "tree (2) and label index (3) both built"
    );
    assert_eq!(
        node_rows(&path),
        rows_before,
        "rebuilt exactly as appends wrote it"
    );
    assert_eq!(trigger_names(&path), {
        let mut names = TREE_TRIGGERS.map(String::from).to_vec();
        names.sort();
        names
    });
    // RFC 9162 §2.1.1 MTH over the entry hashes, written independently above.
    let head = read_write.tree_head(61).expect("tree head");
    assert_eq!(head.root.to_vec(), rfc::mth(&data));
    let note = Note {
        text: "after the upgrade".into(),
    };
    let appended = read_write
        .append_record(&note, &founder())
        .expect("append after the upgrade");
    let mut grown = data.clone();
    grown.push(appended.hash.0.to_vec());
    assert_eq!(
        read_write.tree_head(62).expect("tree head").root.to_vec(),
        rfc::mth(&grown)
    );
    assert!(replay(&read_write).intact());
}

#[test]
fn a_schema_1_file_with_a_missing_entry_is_not_given_a_tree() {
    let dir = tempfile::tempdir().expect("temp dir");
    let (path, ledger) = ledger_with_notes(dir.path(), 8);
    drop(ledger);
    make_schema_1(&path);
    let conn = Connection::open(&path).expect("open ledger file with SQLite");
    conn.execute_batch("DROP TRIGGER entries_refuse_delete; DELETE FROM entries WHERE seq = 4;")
        .expect("remove an entry");
    drop(conn);
    let clock = Arc::new(FixedClock::new(START, 1_000));
    let refused = Ledger::open(&path, OpenMode::ReadWrite, KindRules::core(), clock)
        .map(|_| ())
        .expect_err("no tree over a gap");
    assert!(
        refused
            .to_string()
            .contains("entry 4 is missing (the next stored entry is 5)"),
        "{refused}"
    );
    assert_eq!(schema_version(&path), 1, "nothing was written");
}

// ---------------------------------------------------------------------------------------------
// Guards and tampering.
// ---------------------------------------------------------------------------------------------

/// Runs `sql` on the closed ledger file with its triggers in place; returns SQLite's error text.
fn refusal(path: &Path, sql: &str) -> Option<String> {
    let conn = Connection::open(path).expect("open ledger file with SQLite");
    conn.execute(sql, []).err().map(|e| e.to_string())
}

#[test]
fn guards_refuse_changing_deleting_or_replacing_a_tree_node() {
    let dir = tempfile::tempdir().expect("temp dir");
    let (path, ledger) = ledger_with_notes(dir.path(), 7);
    drop(ledger);
    let cases = [
        (
            "UPDATE merkle_nodes SET hash = zeroblob(32) WHERE level = 1 AND idx = 0",
            "assize tree nodes are append-only: UPDATE refused",
        ),
        (
            "DELETE FROM merkle_nodes WHERE level = 0",
            "assize tree nodes are append-only: DELETE refused",
        ),
        (
            "INSERT OR REPLACE INTO merkle_nodes (level, idx, hash) VALUES (0, 3, zeroblob(32))",
            "assize tree nodes are append-only: a stored node may not be replaced",
        ),
    ];
    for (sql, message) in cases {
        let refused = refusal(&path, sql);
        assert!(
            refused.as_deref().is_some_and(|m| m.contains(message)),
            "{sql:?} was not refused with {message:?}: {refused:?}"
        );
    }
    assert!(replay(&open(&path, OpenMode::ReadOnly)).intact());
}

/// Drops the tree's guard triggers, runs `sql`, and puts the triggers back as they were.
fn tamper_tree(path: &Path, sql: &str, values: impl rusqlite::Params) {
    let conn = Connection::open(path).expect("open ledger file with SQLite");
    let triggers: Vec<(String, String)> = conn
        .prepare("SELECT name, sql FROM sqlite_master WHERE type = 'trigger' AND tbl_name = 'merkle_nodes'")
        .and_then(|mut s| {
            s.query_map([], |r| Ok((r.get(0)?, r.get(1)?)))?
                .collect::<rusqlite::Result<_>>()
        })
        .expect("list triggers");
    assert_eq!(triggers.len(), 3, "{triggers:?}");
    for (name, _) in &triggers {
        conn.execute_batch(&format!("DROP TRIGGER {name}"))
            .expect("drop trigger");
    }
    conn.execute(sql, values).expect("tamper");
    for (_, sql) in &triggers {
        conn.execute_batch(sql).expect("recreate trigger");
    }
}

/// A ledger of 100 entries, closed, with its entry hashes and in-memory tree.
fn closed_ledger(dir: &Path) -> (PathBuf, Vec<Vec<u8>>, MemoryTree) {
    let (path, ledger) = ledger_with_notes(dir, 99);
    let data = entry_hashes(&ledger);
    drop(ledger);
    let tree = MemoryTree::from_leaf_data(&data);
    (path, data, tree)
}

fn tree_problems(path: &Path) -> Vec<Problem> {
    replay(&open(path, OpenMode::ReadOnly)).problems
}

fn mismatch(
    level: u32,
    index: u64,
    expected: Option<[u8; 32]>,
    found: Option<[u8; 32]>,
) -> Problem {
    Problem::TreeNodeMismatch {
        level,
        index,
        expected: expected.map(hex::encode),
        found: found.map(hex::encode),
    }
}

#[test]
fn replay_reports_an_altered_leaf_row_once_with_its_facts() {
    let dir = tempfile::tempdir().expect("temp dir");
    let (path, data, tree) = closed_ledger(dir.path());
    let altered = [0x5a; 32];
    tamper_tree(
        &path,
        "UPDATE merkle_nodes SET hash = ?1 WHERE level = 0 AND idx = 41",
        params![altered.as_slice()],
    );
    // Expected: RFC 9162 §2.1.1 leaf hash of entry 42's hash, from the independent code.
    let expected = to_array(&rfc::hash(&[&[0x00], &data[41]]));
    let problems = tree_problems(&path);
    assert_eq!(
        problems,
        vec![mismatch(0, 41, Some(expected), Some(altered))]
    );
    assert_eq!(problems[0].seq(), Some(42));
    assert_eq!(tree.node(0, 41), Some(expected));
}

#[test]
fn replay_reports_an_altered_interior_node_once_with_its_facts() {
    let dir = tempfile::tempdir().expect("temp dir");
    let (path, data, _tree) = closed_ledger(dir.path());
    let altered = [0xc3; 32];
    // Level 3, index 5: the subtree of entries 41 to 48.
    tamper_tree(
        &path,
        "UPDATE merkle_nodes SET hash = ?1 WHERE level = 3 AND idx = 5",
        params![altered.as_slice()],
    );
    // Expected: RFC 9162 §2.1.1 MTH(D[40:48]), from the independent code.
    let expected = to_array(&rfc::mth(&data[40..48]));
    let problems = tree_problems(&path);
    assert_eq!(
        problems,
        vec![mismatch(3, 5, Some(expected), Some(altered))]
    );
    assert_eq!(problems[0].seq(), Some(41));
    let shown = format!(
        "merkle tree node at level 3, index 5: stored c3c3c3c3c3c3c3c3 but the chain gives {}",
        &hex::encode(expected)[..16]
    );
    assert_eq!(problems[0].to_string(), shown);
}

#[test]
fn replay_reports_a_missing_node_and_a_node_beyond_the_last_entry() {
    let dir = tempfile::tempdir().expect("temp dir");
    let (path, data, tree) = closed_ledger(dir.path());
    tamper_tree(
        &path,
        "DELETE FROM merkle_nodes WHERE level = 2 AND idx = 7",
        params![],
    );
    let expected = to_array(&rfc::mth(&data[28..32]));
    assert_eq!(
        tree_problems(&path),
        vec![mismatch(2, 7, Some(expected), None)]
    );
    // Put it back, then cut the last two entries off but leave the tree as it was.
    tamper_tree(
        &path,
        "INSERT INTO merkle_nodes (level, idx, hash) VALUES (2, 7, ?1)",
        params![expected.as_slice()],
    );
    let conn = Connection::open(&path).expect("open ledger file with SQLite");
    conn.execute_batch("DROP TRIGGER entries_refuse_delete; DELETE FROM entries WHERE seq > 98;")
        .expect("truncate");
    drop(conn);
    let problems = tree_problems(&path);
    // The first node past entry 98 is leaf index 98 (entry 99's leaf); one is reported.
    assert_eq!(problems, vec![mismatch(0, 98, None, tree.node(0, 98))]);
    assert!(problems[0].to_string().contains("beyond the last entry"));
}

#[test]
fn a_rewritten_entry_hash_is_reported_at_its_leaf_only() {
    // An entry whose stored hash was rewritten while the tree was left alone: the chain
    // reports the entry, the tree check its leaf, once, not every node above it.
    let dir = tempfile::tempdir().expect("temp dir");
    let (path, data, _tree) = closed_ledger(dir.path());
    let conn = Connection::open(&path).expect("open ledger file with SQLite");
    let rewritten = [0x77; 32];
    conn.execute_batch("DROP TRIGGER entries_refuse_update")
        .expect("drop trigger");
    conn.execute(
        "UPDATE entries SET hash = ?1 WHERE seq = 30",
        params![rewritten.as_slice()],
    )
    .expect("rewrite");
    drop(conn);
    let leaf_of = |bytes: &[u8]| to_array(&rfc::hash(&[&[0x00], bytes]));
    let tree = tree_problems(&path)
        .into_iter()
        .filter(|p| matches!(p, Problem::TreeNodeMismatch { .. }))
        .collect::<Vec<_>>();
    assert_eq!(
        tree,
        vec![mismatch(
            0,
            29,
            Some(leaf_of(&rewritten)),
            Some(leaf_of(&data[29]))
        )]
    );
}

#[test]
fn a_gap_in_the_entries_is_the_chains_problem_not_the_trees() {
    // An entry removed from the middle while the tree was left whole: its leaf cannot be
    // judged (no entry), so it is taken as stored and every node above is still checked; the
    // chain reports the gap, the tree nothing.
    let dir = tempfile::tempdir().expect("temp dir");
    let (path, _data, _tree) = closed_ledger(dir.path());
    let conn = Connection::open(&path).expect("open ledger file with SQLite");
    conn.execute_batch("DROP TRIGGER entries_refuse_delete; DELETE FROM entries WHERE seq = 37;")
        .expect("remove an entry");
    drop(conn);
    let problems = tree_problems(&path);
    assert!(
        matches!(
            problems.as_slice(),
            [
                Problem::SequenceGap {
                    expected: 37,
                    found: 38
                },
                Problem::BrokenLink { seq: 38, .. },
            ]
        ),
        "{problems:#?}"
    );
}
