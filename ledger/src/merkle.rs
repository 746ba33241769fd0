//! RFC 9162 Merkle tree over the entries' hashes: tree heads, inclusion and consistency proofs.
//!
//! Owns the tree's hashing (RFC 9162 §2.1.1: leaf = SHA-256(0x00 ‖ leaf data), interior node =
//! SHA-256(0x01 ‖ left ‖ right), the empty tree = SHA-256 of nothing), the proofs (§2.1.3.1
//! PATH, §2.1.4.1 PROOF/SUBPROOF) and their offline verifiers (§2.1.3.2, §2.1.4.2). The leaf
//! data of entry `seq` is its 32-byte entry hash, at leaf index `seq - 1`. A tree of any size is
//! computed from O(log n) roots of *perfect* subtrees — `2^level` leaves starting at leaf
//! `index * 2^level` — which a [`SubtreeSource`] supplies: the ledger file stores them (see
//! `store`), [`MemoryTree`] keeps them in memory. Pure algorithms: this module never touches SQL
//! and never decides what the leaves are; the verifiers need nothing but the proof.

use crate::error::{LedgerError, Result};
use serde::Serialize;
use sha2::{Digest, Sha256};

/// Domain prefix of a leaf hash (RFC 9162 §2.1.1).
pub const LEAF_PREFIX: u8 = 0x00;
/// Domain prefix of an interior node hash (RFC 9162 §2.1.1).
pub const NODE_PREFIX: u8 = 0x01;

/// SHA-256(0x00 ‖ `data`): the hash of one leaf.
pub fn leaf_hash(data: &[u8]) -> [u8; 32] {
    let mut hasher = Sha256::new();
    hasher.update([LEAF_PREFIX]);
    hasher.update(data);
    hasher.finalize().into()
}

/// SHA-256(0x01 ‖ `left` ‖ `right`): the hash of an interior node.
pub fn node_hash(left: &[u8; 32], right: &[u8; 32]) -> [u8; 32] {
    let mut hasher = Sha256::new();
    hasher.update([NODE_PREFIX]);
    hasher.update(left);
    hasher.update(right);
    hasher.finalize().into()
}

/// The root of the empty tree: SHA-256 of the empty string.
pub fn empty_root() -> [u8; 32] {
    Sha256::digest([]).into()
}

/// The largest power of two smaller than `n` (`n >= 2`): where RFC 9162 splits a list of `n`.
pub fn split_point(n: u64) -> u64 {
    debug_assert!(n >= 2, "a list of {n} leaves is not split");
    1 << (63 - (n - 1).leading_zeros())
}

/// Where perfect subtree roots come from.
pub trait SubtreeSource {
    /// Root of the perfect subtree of `2^level` leaves covering leaf indices
    /// `[index * 2^level, (index + 1) * 2^level)`; level 0 gives leaf hashes.
    fn perfect_root(&self, level: u32, index: u64) -> Result<[u8; 32]>;
}

impl<S: SubtreeSource + ?Sized> SubtreeSource for &S {
    fn perfect_root(&self, level: u32, index: u64) -> Result<[u8; 32]> {
        (**self).perfect_root(level, index)
    }
}

/// A tree size and its root: what a later checkpoint or proof refers to.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub struct TreeHead {
    /// Number of leaves (entries 1 to `size`).
    pub size: u64,
    /// RFC 9162 root over those leaves; lowercase hex in JSON.
    #[serde(serialize_with = "hex_bytes")]
    pub root: [u8; 32],
}

fn hex_bytes<S: serde::Serializer>(v: &[u8; 32], s: S) -> std::result::Result<S::Ok, S::Error> {
    s.serialize_str(&hex::encode(v))
}

/// RFC 9162 MTH of leaves `[start, end)`. Ranges the tree operations ask for are built from
/// aligned perfect subtrees, so they cost O(log n) look-ups; any other range is still hashed
/// correctly by the same recursion, only with more look-ups.
pub fn range_root<S: SubtreeSource + ?Sized>(source: &S, start: u64, end: u64) -> Result<[u8; 32]> {
    if start > end {
        return Err(bad_range(
            "leaf range",
            format!("starts at {start} after its end {end}"),
        ));
    }
    if start == end {
        return Ok(empty_root());
    }
    subtree_root(source, start, end)
}

/// MTH of a non-empty range, splitting at the largest power of two below its length.
fn subtree_root<S: SubtreeSource + ?Sized>(source: &S, start: u64, end: u64) -> Result<[u8; 32]> {
    let n = end - start;
    if n.is_power_of_two() && start % n == 0 {
        return source.perfect_root(n.trailing_zeros(), start / n);
    }
    let k = split_point(n);
    let left = subtree_root(source, start, start + k)?;
    let right = subtree_root(source, start + k, end)?;
    Ok(node_hash(&left, &right))
}

/// Root of the tree of the first `size` leaves (RFC 9162 §2.1.1 MTH).
pub fn tree_root<S: SubtreeSource + ?Sized>(source: &S, size: u64) -> Result<[u8; 32]> {
    range_root(source, 0, size)
}

/// The inclusion proof of leaf `leaf_index` in the tree of `size` leaves (RFC 9162 §2.1.3.1
/// PATH), deepest sibling first.
pub fn inclusion_proof<S: SubtreeSource + ?Sized>(
    source: &S,
    leaf_index: u64,
    size: u64,
) -> Result<Vec<[u8; 32]>> {
    if leaf_index >= size {
        return Err(bad_range(
            "leaf index",
            format!("{leaf_index} is not within a tree of {size} leaves"),
        ));
    }
    let mut proof = Vec::new();
    path(source, leaf_index, 0, size, &mut proof)?;
    Ok(proof)
}

/// PATH(m, D[start:end]) with `m` counted from `start`, appended to `proof`.
fn path<S: SubtreeSource + ?Sized>(
    source: &S,
    m: u64,
    start: u64,
    end: u64,
    proof: &mut Vec<[u8; 32]>,
) -> Result<()> {
    let n = end - start;
    if n == 1 {
        return Ok(());
    }
    let k = split_point(n);
    if m < k {
        path(source, m, start, start + k, proof)?;
        proof.push(subtree_root(source, start + k, end)?);
    } else {
        path(source, m - k, start + k, end, proof)?;
        proof.push(subtree_root(source, start, start + k)?);
    }
    Ok(())
}

/// The consistency proof from the tree of `old_size` leaves to the tree of `new_size` leaves
/// (RFC 9162 §2.1.4.1 PROOF). Empty when `old_size` is 0 or equals `new_size` (nothing to
/// prove; the RFC defines proofs for `0 < old_size < new_size`).
pub fn consistency_proof<S: SubtreeSource + ?Sized>(
    source: &S,
    old_size: u64,
    new_size: u64,
) -> Result<Vec<[u8; 32]>> {
    if old_size > new_size {
        return Err(bad_range(
            "tree sizes",
            format!("the old size {old_size} is larger than the new size {new_size}"),
        ));
    }
    let mut proof = Vec::new();
    if old_size > 0 && old_size < new_size {
        subproof(source, old_size, 0, new_size, true, &mut proof)?;
    }
    Ok(proof)
}

/// SUBPROOF(m, D[start:end], complete) with `m` counted from `start`, appended to `proof`.
/// `complete` is the RFC's `b`: whether D[start:start+m] is a whole subtree of the old tree
/// whose root the verifier already holds.
fn subproof<S: SubtreeSource + ?Sized>(
    source: &S,
    m: u64,
    start: u64,
    end: u64,
    complete: bool,
    proof: &mut Vec<[u8; 32]>,
) -> Result<()> {
    let n = end - start;
    if m == n {
        if !complete {
            proof.push(subtree_root(source, start, end)?);
        }
        return Ok(());
    }
    let k = split_point(n);
    if m <= k {
        subproof(source, m, start, start + k, complete, proof)?;
        proof.push(subtree_root(source, start + k, end)?);
    } else {
        subproof(source, m - k, start + k, end, false, proof)?;
        proof.push(subtree_root(source, start, start + k)?);
    }
    Ok(())
}

/// Verifies an inclusion proof exactly as RFC 9162 §2.1.3.2 describes: `leaf_hash` (already
/// hashed with [`leaf_hash`]) is leaf `leaf_index` of the tree of `size` leaves whose root is
/// `root`.
pub fn verify_inclusion(
    leaf_index: u64,
    size: u64,
    leaf_hash: &[u8; 32],
    proof: &[[u8; 32]],
    root: &[u8; 32],
) -> bool {
    // 1. leaf_index must be within the tree.
    if leaf_index >= size {
        return false;
    }
    // 2-3. fn, sn and r.
    let (mut fnode, mut snode) = (leaf_index, size - 1);
    let mut r = *leaf_hash;
    // 4. Each value p of the path.
    for p in proof {
        if snode == 0 {
            return false;
        }
        if fnode & 1 == 1 || fnode == snode {
            r = node_hash(p, &r);
            while fnode & 1 == 0 && fnode != 0 {
                fnode >>= 1;
                snode >>= 1;
            }
        } else {
            r = node_hash(&r, p);
        }
        fnode >>= 1;
        snode >>= 1;
    }
    // 5. sn is 0 and r is the root.
    snode == 0 && r == *root
}

/// Verifies a consistency proof: the tree of `old_size` leaves with root `old_root` is a prefix
/// of the tree of `new_size` leaves with root `new_root`.
///
/// For `0 < old_size < new_size` this is exactly RFC 9162 §2.1.4.2. The RFC leaves the other
/// sizes out; here (our own choice) a proof from the empty tree holds when it is empty and
/// `old_root` is the empty tree's root, a proof between equal sizes holds when it is empty and
/// the roots are equal, and a proof to a smaller tree never holds.
pub fn verify_consistency(
    old_size: u64,
    new_size: u64,
    old_root: &[u8; 32],
    new_root: &[u8; 32],
    proof: &[[u8; 32]],
) -> bool {
    if old_size > new_size {
        return false;
    }
    if old_size == 0 {
        return proof.is_empty()
            && *old_root == empty_root()
            && (new_size > 0 || new_root == old_root);
    }
    if old_size == new_size {
        return proof.is_empty() && old_root == new_root;
    }
    verify_consistency_rfc(old_size, new_size, old_root, new_root, proof)
}

/// RFC 9162 §2.1.4.2, steps 1 to 7, for `0 < first < second`.
fn verify_consistency_rfc(
    first: u64,
    second: u64,
    first_hash: &[u8; 32],
    second_hash: &[u8; 32],
    consistency_path: &[[u8; 32]],
) -> bool {
    // 1. An empty path fails.
    if consistency_path.is_empty() {
        return false;
    }
    // 2. When first is an exact power of two, first_hash is prepended to the path.
    let prepended = first.is_power_of_two().then_some(first_hash);
    let mut path = prepended.into_iter().chain(consistency_path.iter());
    // 3-4. fn and sn, shifted right while LSB(fn) is set.
    let (mut fnode, mut snode) = (first - 1, second - 1);
    while fnode & 1 == 1 {
        fnode >>= 1;
        snode >>= 1;
    }
    // 5. fr and sr start at the first value.
    let Some(start) = path.next() else {
        return false;
    };
    let (mut fr, mut sr) = (*start, *start);
    // 6. Each subsequent value c.
    for c in path {
        if snode == 0 {
            return false;
        }
        if fnode & 1 == 1 || fnode == snode {
            fr = node_hash(c, &fr);
            sr = node_hash(c, &sr);
            while fnode & 1 == 0 && fnode != 0 {
                fnode >>= 1;
                snode >>= 1;
            }
        } else {
            sr = node_hash(&sr, c);
        }
        fnode >>= 1;
        snode >>= 1;
    }
    // 7. Both roots reached and sn is 0.
    fr == *first_hash && sr == *second_hash && snode == 0
}

/// One perfect subtree root: where it sits and its hash.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct PerfectNode {
    /// Height above the leaves (0 for a leaf).
    pub level: u32,
    /// Position among the subtrees of its level, from the left.
    pub index: u64,
    /// Its hash.
    pub hash: [u8; 32],
}

/// The perfect subtree roots that appending leaf `leaf_index` (hash `leaf`) makes known: the
/// leaf itself, then every subtree it completes, lowest first (two per leaf on average). The
/// left siblings come from `source`, which must already hold the tree of the first
/// `leaf_index` leaves.
pub fn nodes_completed_by<S: SubtreeSource + ?Sized>(
    source: &S,
    leaf_index: u64,
    leaf: [u8; 32],
) -> Result<Vec<PerfectNode>> {
    let mut node = PerfectNode {
        level: 0,
        index: leaf_index,
        hash: leaf,
    };
    let mut nodes = vec![node];
    while node.index % 2 == 1 {
        let left = source.perfect_root(node.level, node.index - 1)?;
        node = PerfectNode {
            level: node.level + 1,
            index: node.index / 2,
            hash: node_hash(&left, &node.hash),
        };
        nodes.push(node);
    }
    Ok(nodes)
}

/// Every perfect subtree root of a tree kept in memory (for tests and small uses).
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct MemoryTree {
    /// `levels[l][i]`: root of the perfect subtree at level `l`, index `i`.
    levels: Vec<Vec<[u8; 32]>>,
}

impl MemoryTree {
    /// An empty tree.
    pub fn new() -> Self {
        MemoryTree::default()
    }

    /// A tree over leaves already hashed with [`leaf_hash`].
    pub fn from_leaf_hashes(leaves: impl IntoIterator<Item = [u8; 32]>) -> Self {
        let mut tree = MemoryTree::new();
        for leaf in leaves {
            tree.push_leaf_hash(leaf);
        }
        tree
    }

    /// A tree over raw leaf data, each hashed with [`leaf_hash`].
    pub fn from_leaf_data<D: AsRef<[u8]>>(data: &[D]) -> Self {
        MemoryTree::from_leaf_hashes(data.iter().map(|d| leaf_hash(d.as_ref())))
    }

    /// Appends a leaf already hashed with [`leaf_hash`]; returns the nodes it made known.
    pub fn push_leaf_hash(&mut self, leaf: [u8; 32]) -> Vec<PerfectNode> {
        let nodes = nodes_completed_by(self, self.len(), leaf)
            .expect("a memory tree holds every left sibling");
        for node in &nodes {
            let level = node.level as usize;
            if self.levels.len() <= level {
                self.levels.push(Vec::new());
            }
            self.levels[level].push(node.hash);
        }
        nodes
    }

    /// Number of leaves.
    pub fn len(&self) -> u64 {
        self.levels.first().map_or(0, |leaves| leaves.len() as u64)
    }

    /// Whether the tree has no leaves.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// The stored root at `level`, `index`, if that subtree is complete.
    pub fn node(&self, level: u32, index: u64) -> Option<[u8; 32]> {
        let nodes = self.levels.get(level as usize)?;
        nodes.get(usize::try_from(index).ok()?).copied()
    }

    /// Every perfect subtree root, level by level, left to right.
    pub fn nodes(&self) -> impl Iterator<Item = PerfectNode> + '_ {
        self.levels.iter().zip(0u32..).flat_map(|(nodes, level)| {
            nodes
                .iter()
                .zip(0u64..)
                .map(move |(hash, index)| PerfectNode {
                    level,
                    index,
                    hash: *hash,
                })
        })
    }
}

impl SubtreeSource for MemoryTree {
    fn perfect_root(&self, level: u32, index: u64) -> Result<[u8; 32]> {
        self.node(level, index)
            .ok_or_else(|| missing_node(level, index))
    }
}

/// The error for a perfect subtree root that a source does not hold.
pub(crate) fn missing_node(level: u32, index: u64) -> LedgerError {
    LedgerError::Codec {
        what: format!("merkle tree node at level {level}, index {index}"),
        reason: "it is missing".into(),
    }
}

fn bad_range(what: &str, reason: String) -> LedgerError {
    LedgerError::BadInput {
        what: what.into(),
        reason,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn hex32(text: &str) -> [u8; 32] {
        hex::decode(text)
            .expect("hex")
            .try_into()
            .expect("32 bytes")
    }

    /// The eight leaves of the Certificate Transparency reference vectors, as hex inputs
    /// (transparency-dev/merkle, proof/verify_test.go, `leaves`).
    fn reference_tree() -> MemoryTree {
        let leaves = [
            "",
            "00",
            "10",
            "2021",
            "3031",
            "40414243",
            "5051525354555657",
            "606162636465666768696a6b6c6d6e6f",
        ]
        .map(|h| hex::decode(h).expect("hex"));
        MemoryTree::from_leaf_data(&leaves)
    }

    #[test]
    fn empty_root_is_sha256_of_the_empty_string() {
        // FIPS 180-4 SHA-256 of "" (also `sha256EmptyTreeHash` in transparency-dev/merkle,
        // proof/verify_test.go); RFC 9162 §2.1.1 MTH({}) = HASH().
        assert_eq!(
            hex::encode(empty_root()),
            "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"
        );
        assert_eq!(
            tree_root(&MemoryTree::new(), 0).expect("root"),
            empty_root()
        );
    }

    #[test]
    fn leaf_and_node_hashes_use_the_rfc_prefixes() {
        // RFC 9162 §2.1.1: the one-leaf tree's root is the leaf hash of "" — the first root of
        // the reference vectors (transparency-dev/merkle, proof/verify_test.go, `roots[0]`).
        assert_eq!(
            hex::encode(leaf_hash(b"")),
            "6e340b9cffb37a989ca544e6bb780a2c78901d3fb33738768511a30617afa01d"
        );
        // `roots[1]`: the two-leaf tree, HASH(0x01 || leaf("") || leaf(0x00)).
        let two = node_hash(&leaf_hash(b""), &leaf_hash(&[0]));
        assert_eq!(
            hex::encode(two),
            "fac54203e7cc696cf0dfcb42c92a1d9dbaf70ad9e621f4bd8d98662f00e3c125"
        );
    }

    #[test]
    fn eight_leaf_root_matches_the_reference_vector() {
        // transparency-dev/merkle, proof/verify_test.go, `roots[7]` (size 8).
        let tree = reference_tree();
        assert_eq!(
            hex::encode(tree_root(&tree, 8).expect("root")),
            "5dc9da79a70659a9ad559cb701ded9a2ab9d823aad2f4960cfe370eff4604328"
        );
    }

    #[test]
    fn verifiers_accept_the_reference_proofs_and_reject_a_flipped_bit() {
        // transparency-dev/merkle, proof/verify_test.go: `inclusionProofs` {6, 8} (leaf numbers
        // there count from 1, so leaf index 5) and `consistencyProofs` {6, 8}.
        let tree = reference_tree();
        let root8 = tree_root(&tree, 8).expect("root");
        let root6 = tree_root(&tree, 6).expect("root");
        let inclusion = [
            "bc1a0643b12e4d2d7c77918f44e0f4f79a838b6cf9ec5b5c283e1f4d88599e6b",
            "ca854ea128ed050b41b35ffc1b87b8eb2bde461e9e3b5596ece6b9d5975a0ae0",
            "d37ee418976dd95753c1c73862b9398fa2a2cf9b4ff0fdfe8b30cd95209614b7",
        ]
        .map(hex32);
        let leaf5 = tree.node(0, 5).expect("leaf");
        assert!(verify_inclusion(5, 8, &leaf5, &inclusion, &root8));
        assert_eq!(inclusion_proof(&tree, 5, 8).expect("proof"), inclusion);
        let consistency = [
            "0ebc5d3437fbe2db158b9f126a1d118e308181031d0a949f8dededebc558ef6a",
            "ca854ea128ed050b41b35ffc1b87b8eb2bde461e9e3b5596ece6b9d5975a0ae0",
            "d37ee418976dd95753c1c73862b9398fa2a2cf9b4ff0fdfe8b30cd95209614b7",
        ]
        .map(hex32);
        assert!(verify_consistency(6, 8, &root6, &root8, &consistency));
        assert_eq!(consistency_proof(&tree, 6, 8).expect("proof"), consistency);
        let mut flipped = consistency;
        flipped[1][0] ^= 0x10;
        assert!(!verify_consistency(6, 8, &root6, &root8, &flipped));
        let mut flipped = inclusion;
        flipped[2][31] ^= 0x01;
        assert!(!verify_inclusion(5, 8, &leaf5, &flipped, &root8));
    }

    #[test]
    fn split_point_is_the_largest_power_of_two_below_n() {
        // RFC 9162 §2.1.1: "k be the largest power of two smaller than n".
        for n in 2u64..=1025 {
            let k = split_point(n);
            assert!(
                k.is_power_of_two() && k < n && 2 * k >= n,
                "n = {n}, k = {k}"
            );
        }
        assert_eq!(split_point(u64::MAX), 1 << 63);
    }

    #[test]
    fn completed_nodes_are_the_subtrees_a_leaf_closes() {
        // Leaf index 7 closes [6,8), [4,8) and [0,8): levels 1, 2, 3 (RFC 9162 §2.1.1 tree
        // shape); leaf index 8 closes nothing above itself.
        let tree = reference_tree();
        let first_seven = MemoryTree::from_leaf_hashes((0..7).map(|i| tree.node(0, i).unwrap()));
        let leaf7 = tree.node(0, 7).expect("leaf");
        let made = nodes_completed_by(&first_seven, 7, leaf7).expect("nodes");
        let places: Vec<(u32, u64)> = made.iter().map(|n| (n.level, n.index)).collect();
        assert_eq!(places, [(0, 7), (1, 3), (2, 1), (3, 0)]);
        assert_eq!(made[3].hash, tree_root(&tree, 8).expect("root"));
        let made = nodes_completed_by(&tree, 8, leaf_hash(b"ninth")).expect("nodes");
        assert_eq!(made.len(), 1);
    }

    #[test]
    fn out_of_range_requests_are_errors_with_facts() {
        let tree = reference_tree();
        let err = inclusion_proof(&tree, 8, 8).expect_err("leaf beyond the tree");
        assert_eq!(
            err.to_string(),
            "bad leaf index: 8 is not within a tree of 8 leaves"
        );
        let err = consistency_proof(&tree, 5, 4).expect_err("old size beyond new size");
        assert!(
            err.to_string().contains("the old size 5 is larger"),
            "{err}"
        );
        let err = tree_root(&tree, 9).expect_err("a ninth leaf is missing");
        assert!(err.to_string().contains("level 0, index 8"), "{err}");
    }

    #[test]
    fn edge_sizes_of_consistency_follow_the_stated_choice() {
        // Outside RFC 9162 §2.1.4.2 (0 < first < second): our own rule, stated on the function.
        let tree = reference_tree();
        let root3 = tree_root(&tree, 3).expect("root");
        let root5 = tree_root(&tree, 5).expect("root");
        assert!(consistency_proof(&tree, 0, 5).expect("proof").is_empty());
        assert!(consistency_proof(&tree, 5, 5).expect("proof").is_empty());
        assert!(verify_consistency(0, 5, &empty_root(), &root5, &[]));
        assert!(!verify_consistency(0, 5, &root3, &root5, &[]));
        assert!(verify_consistency(5, 5, &root5, &root5, &[]));
        assert!(!verify_consistency(5, 5, &root3, &root5, &[]));
        assert!(!verify_consistency(5, 3, &root5, &root3, &[]));
        assert!(!verify_consistency(3, 5, &root3, &root5, &[]));
    }
}
