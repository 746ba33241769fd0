//! Tidy checks on the source tree (STYLE.md 3): every module opens with a `//!` header, libraries
//! never print, `verify` holds no SQL, and nothing outside the schema's guard triggers issues
//! UPDATE or DELETE against entries.

use std::path::{Path, PathBuf};

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for item in std::fs::read_dir(dir).expect("read dir") {
        let path = item.expect("dir entry").path();
        if path.is_dir() {
            rust_files(&path, out);
        } else if path.extension().is_some_and(|e| e == "rs") {
            out.push(path);
        }
    }
}

fn sources(crate_dir: &str) -> Vec<(PathBuf, String)> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join(crate_dir)
        .join("src");
    let mut files = Vec::new();
    rust_files(&root, &mut files);
    files.sort();
    files
        .into_iter()
        .map(|p| {
            let text = std::fs::read_to_string(&p).expect("read source");
            (p, text)
        })
        .collect()
}

#[test]
fn every_module_opens_with_a_doc_header() {
    let mut missing = Vec::new();
    for krate in ["ledger", "verify", "cli"] {
        for (path, text) in sources(krate) {
            if !text.trim_start().starts_with("//!") {
                missing.push(path.display().to_string());
            }
        }
    }
    assert!(
        missing.is_empty(),
        "modules without a //! header: {missing:?}"
    );
}

#[test]
fn libraries_never_print() {
    for krate in ["ledger", "verify"] {
        for (path, text) in sources(krate) {
            for word in ["println!", "print!(", "eprintln!", "eprint!(", "dbg!"] {
                assert!(!text.contains(word), "{} uses {word}", path.display());
            }
        }
    }
}

#[test]
fn verify_holds_no_sql() {
    for (path, text) in sources("verify") {
        let upper = text.to_uppercase();
        for word in ["SELECT ", "INSERT ", "UPDATE ", "DELETE ", "RUSQLITE"] {
            assert!(
                !upper.contains(word),
                "{} contains {word:?}",
                path.display()
            );
        }
    }
}

#[test]
fn nothing_updates_or_deletes_entries() {
    for krate in ["ledger", "verify", "cli"] {
        for (path, text) in sources(krate) {
            for line in text.lines().filter(|l| !l.trim_start().starts_with("//")) {
                let upper = line.to_uppercase();
                let writes = upper.contains("UPDATE ENTRIES")
                    || upper.contains("DELETE FROM ENTRIES")
                    || upper.contains("UPDATE ENTRY_REFS")
                    || upper.contains("DELETE FROM ENTRY_REFS")
                    || upper.contains("INSERT OR REPLACE");
                assert!(!writes, "{}: {line}", path.display());
            }
        }
    }
}
