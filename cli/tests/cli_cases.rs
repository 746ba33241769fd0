//! Command-line snapshot cases: each file in tests/cases/ names the arguments, the expected
//! exit status and the exact stdout/stderr of one invocation of the real `assize` binary,
//! run against a fresh copy of a fixture directory. A new case is a new file.
//!
//! Fixture (built once through the binary itself): `pass.txt`; key files `keys/qa.key`
//! (q.lindqvist, QA), `keys/analyst.key` (a.mensah), `keys/revoked.key` (r.vance, key revoked),
//! `keys/stranger.key` (x.stranger, never enrolled), `keys/loose.key` (mode 0644),
//! `keys/garbage.key` (not a key file); `fixture.ledger`; `newer.ledger` (schema version 2);
//! `notes.txt` (not a ledger); adopted `method.toml` (permanganate) and `policy.toml`, a balance
//! `B1`, reference lot `OX-1`, titrant `KMN-1` and standardization run `STD-1` (entries 5-10);
//! `unbalanced-method.toml` and `bad-batch.toml` (third record bad); balance printouts
//! `printout.txt` (two readings of `B1`), `bad-printout.txt` (a comma in line 3's digits) and
//! `foreign-printout.txt` (line 2 names a balance the ledger lacks). `{dir}` in a case stands for
//! the fixture directory.
//! Unless a case says `changes_ledger = true`, the ledger files must be byte-for-byte
//! unchanged afterwards.

use serde::Deserialize;
use std::collections::BTreeMap;
use std::os::unix::fs::PermissionsExt;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::sync::OnceLock;

const BIN: &str = env!("CARGO_BIN_EXE_assize");
const PASSPHRASE: &str = "fixture passphrase";

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct Case {
    /// What the case checks.
    about: String,
    args: Vec<String>,
    #[serde(default)]
    env: BTreeMap<String, String>,
    status: i32,
    #[serde(default)]
    stdout: Option<String>,
    #[serde(default)]
    stdout_contains: Vec<String>,
    #[serde(default)]
    stderr: Option<String>,
    #[serde(default)]
    stderr_contains: Vec<String>,
    #[serde(default)]
    changes_ledger: bool,
}

fn run_assize(dir: &Path, args: &[&str]) -> std::process::Output {
    Command::new(BIN)
        .args(args)
        .current_dir(dir)
        .env_remove("ASSIZE_LEDGER")
        .env_remove("ASSIZE_KEY")
        .stdin(Stdio::null())
        .output()
        .expect("run assize")
}

fn must(dir: &Path, args: &[&str]) {
    let out = run_assize(dir, args);
    assert!(
        out.status.success(),
        "fixture step {args:?} failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
}

fn public_key_of(dir: &Path, key: &str) -> String {
    let out = run_assize(dir, &["--json", "key", "show", key]);
    let info: serde_json::Value = serde_json::from_slice(&out.stdout).expect("key show --json");
    info["public_key"]
        .as_str()
        .expect("public key hex")
        .to_string()
}

struct Template {
    dir: tempfile::TempDir,
    /// Key file name (without `.key`) and its public key in hex, for `{key:NAME}` placeholders.
    public_keys: Vec<(String, String)>,
}

fn template() -> &'static Template {
    static TEMPLATE: OnceLock<Template> = OnceLock::new();
    TEMPLATE.get_or_init(|| {
        let dir = tempfile::tempdir().expect("template dir");
        build_fixture(dir.path());
        let public_keys = ["qa", "analyst", "revoked", "stranger"]
            .iter()
            .map(|n| {
                (
                    n.to_string(),
                    public_key_of(dir.path(), &format!("keys/{n}.key")),
                )
            })
            .collect();
        Template { dir, public_keys }
    })
}

fn build_fixture(dir: &Path) {
    std::fs::create_dir(dir.join("keys")).expect("keys dir");
    std::fs::write(dir.join("pass.txt"), format!("{PASSPHRASE}\n")).expect("pass file");
    let p = ["--passphrase-file", "pass.txt"];
    for (person, file) in [
        ("q.lindqvist", "keys/qa.key"),
        ("a.mensah", "keys/analyst.key"),
        ("r.vance", "keys/revoked.key"),
        ("x.stranger", "keys/stranger.key"),
    ] {
        must(
            dir,
            &[
                &p[..],
                &[
                    "key",
                    "new",
                    "--person",
                    person,
                    "--out",
                    file,
                    "--kdf-memory-mib",
                    "8",
                ],
            ]
            .concat(),
        );
    }
    let l = ["--ledger", "fixture.ledger"];
    must(
        dir,
        &[
            &l[..],
            &p,
            &[
                "create",
                "--lab",
                "Fixture Test Laboratory",
                "--name",
                "Quinn Lindqvist",
                "--key",
                "keys/qa.key",
            ],
        ]
        .concat(),
    );
    for (id, name, file) in [
        ("a.mensah", "Adjoa Mensah", "keys/analyst.key"),
        ("r.vance", "Rafe Vance", "keys/revoked.key"),
    ] {
        must(
            dir,
            &[
                &l[..],
                &p,
                &[
                    "person",
                    "enrol",
                    "--id",
                    id,
                    "--name",
                    name,
                    "--role",
                    "analyst",
                    "--from-key-file",
                    file,
                    "--key",
                    "keys/qa.key",
                ],
            ]
            .concat(),
        );
    }
    let revoked = public_key_of(dir, "keys/revoked.key");
    must(
        dir,
        &[
            &l[..],
            &p,
            &[
                "person",
                "revoke-key",
                "--id",
                "r.vance",
                "--public-key",
                &revoked,
                "--reason",
                "left the lab",
                "--key",
                "keys/qa.key",
            ],
        ]
        .concat(),
    );
    std::fs::copy(dir.join("keys/analyst.key"), dir.join("keys/loose.key")).expect("copy key");
    std::fs::set_permissions(
        dir.join("keys/loose.key"),
        std::fs::Permissions::from_mode(0o644),
    )
    .expect("chmod");
    std::fs::write(
        dir.join("keys/garbage.key"),
        b"this is not a key file at all",
    )
    .expect("garbage");
    std::fs::set_permissions(
        dir.join("keys/garbage.key"),
        std::fs::Permissions::from_mode(0o600),
    )
    .expect("chmod");
    std::fs::copy(dir.join("fixture.ledger"), dir.join("newer.ledger")).expect("copy ledger");
    let conn = rusqlite::Connection::open(dir.join("newer.ledger")).expect("open copy");
    conn.pragma_update(
        None,
        "user_version",
        assize_ledger::store::SCHEMA_VERSION + 1,
    )
    .expect("bump schema version");
    drop(conn);
    std::fs::write(
        dir.join("notes.txt"),
        "shopping list: pipette tips, weighing boats\n",
    )
    .expect("notes");
    lab_fixture(dir);
}

/// Adopted method and policy, a balance, a reference lot, a titrant and a standardization run,
/// plus a method file whose assay equation does not balance and a batch with a bad third record.
fn lab_fixture(dir: &Path) {
    let policies = Path::new(env!("CARGO_MANIFEST_DIR")).join("../policies");
    let method =
        std::fs::read_to_string(policies.join("permanganate-peroxide.toml")).expect("method");
    std::fs::write(dir.join("method.toml"), &method).expect("write method");
    std::fs::copy(policies.join("lab-policy.toml"), dir.join("policy.toml")).expect("copy policy");
    let unbalanced = method.replace("5 O2 + 8 H2O", "5 O2 + 6 H2O");
    std::fs::write(dir.join("unbalanced-method.toml"), unbalanced).expect("write bad method");
    let l = [
        "--ledger",
        "fixture.ledger",
        "--passphrase-file",
        "pass.txt",
    ];
    must(
        dir,
        &[
            &l[..],
            &["adopt", "--method", "method.toml", "--key", "keys/qa.key"],
        ]
        .concat(),
    );
    must(
        dir,
        &[
            &l[..],
            &["adopt", "--policy", "policy.toml", "--key", "keys/qa.key"],
        ]
        .concat(),
    );
    std::fs::write(dir.join("setup.toml"), LAB_SETUP).expect("write setup batch");
    must(
        dir,
        &[
            &l[..],
            &["import", "setup.toml", "--key", "keys/analyst.key"],
        ]
        .concat(),
    );
    std::fs::write(dir.join("bad-batch.toml"), BAD_BATCH).expect("write bad batch");
    for (name, text) in PRINTOUTS {
        std::fs::write(dir.join(name), text).expect("write printout");
    }
}

fn copy_dir(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).expect("mkdir");
    for item in std::fs::read_dir(from).expect("read dir") {
        let item = item.expect("dir entry");
        let target = to.join(item.file_name());
        if item.file_type().expect("type").is_dir() {
            copy_dir(&item.path(), &target);
        } else {
            std::fs::copy(item.path(), &target).expect("copy file");
        }
    }
}

fn ledger_bytes(dir: &Path) -> Vec<(PathBuf, Vec<u8>)> {
    ["fixture.ledger", "newer.ledger"]
        .iter()
        .map(|n| {
            (
                dir.join(n),
                std::fs::read(dir.join(n)).expect("read ledger"),
            )
        })
        .collect()
}

fn check_case(name: &str, case: &Case) -> Vec<String> {
    let work = tempfile::tempdir().expect("case dir");
    let dir = work.path().join("fx");
    let template = template();
    copy_dir(template.dir.path(), &dir);
    let before = ledger_bytes(&dir);
    let args: Vec<String> = case
        .args
        .iter()
        .map(|a| a.replace("{dir}", dir.to_str().expect("utf-8")))
        .collect();
    let mut command = Command::new(BIN);
    command
        .args(&args)
        .current_dir(&dir)
        .env_remove("ASSIZE_LEDGER")
        .env_remove("ASSIZE_KEY")
        .stdin(Stdio::null());
    for (k, v) in &case.env {
        command.env(k, v);
    }
    let out = command.output().expect("run assize");
    let clean = |bytes: &[u8]| {
        let mut text =
            String::from_utf8_lossy(bytes).replace(dir.to_str().expect("utf-8"), "{dir}");
        for (name, key) in &template.public_keys {
            text = text.replace(key.as_str(), &format!("{{key:{name}}}"));
            text = text.replace(&key[..8], &format!("{{key:{name}}}"));
        }
        text
    };
    let (stdout, stderr) = (clean(&out.stdout), clean(&out.stderr));
    let mut errors = Vec::new();
    if out.status.code() != Some(case.status) {
        errors.push(format!(
            "status {:?}, expected {}",
            out.status.code(),
            case.status
        ));
    }
    if let Some(expected) = &case.stdout {
        if &stdout != expected {
            errors.push(format!(
                "stdout differs:\n--- got\n{stdout}--- expected\n{expected}"
            ));
        }
    }
    if let Some(expected) = &case.stderr {
        if &stderr != expected {
            errors.push(format!(
                "stderr differs:\n--- got\n{stderr}--- expected\n{expected}"
            ));
        }
    }
    for part in &case.stdout_contains {
        if !stdout.contains(part.as_str()) {
            errors.push(format!("stdout lacks {part:?}:\n{stdout}"));
        }
    }
    for part in &case.stderr_contains {
        if !stderr.contains(part.as_str()) {
            errors.push(format!("stderr lacks {part:?}:\n{stderr}"));
        }
    }
    if case.status != 0 && case.stderr.is_none() {
        errors.push(format!("an error case must pin its stderr; got:\n{stderr}"));
        bless(name, &stderr);
    }
    if !case.changes_ledger && ledger_bytes(&dir) != before {
        errors.push("a ledger file changed".into());
    }
    errors
        .into_iter()
        .map(|e| format!("case {name} ({}): {e}", case.about))
        .collect()
}

/// With `ASSIZE_BLESS=1`, writes the observed stderr into a case file that lacks one, for a
/// person to review before committing.
fn bless(name: &str, stderr: &str) {
    if std::env::var_os("ASSIZE_BLESS").is_none() {
        return;
    }
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join(format!("tests/cases/{name}.toml"));
    let mut text = std::fs::read_to_string(&path).expect("read case");
    text.push_str(&format!("stderr = \"\"\"\n{stderr}\"\"\"\n"));
    std::fs::write(&path, text).expect("write case");
}

#[test]
fn every_case_in_tests_cases_holds() {
    let folder = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/cases");
    let mut names: Vec<PathBuf> = std::fs::read_dir(&folder)
        .expect("cases folder")
        .map(|e| e.expect("entry").path())
        .filter(|p| p.extension().is_some_and(|e| e == "toml"))
        .collect();
    names.sort();
    assert!(
        names.len() >= 10,
        "expected the case files in {}",
        folder.display()
    );
    let mut failures = Vec::new();
    for path in &names {
        let text = std::fs::read_to_string(path).expect("read case");
        let case: Case =
            toml::from_str(&text).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
        let name = path
            .file_stem()
            .expect("stem")
            .to_string_lossy()
            .to_string();
        failures.extend(check_case(&name, &case));
    }
    assert!(
        failures.is_empty(),
        "{} failing case(s):\n\n{}",
        failures.len(),
        failures.join("\n\n")
    );
}

const LAB_SETUP: &str = r#"
[[record]]
kind = "balance"
id = "B1"
description = "analytical balance, fixture bench"
readability = "0.0001 g"
capacity = "220 g"
minimum_weight = "0.0820 g"

[[record]]
kind = "reference-lot"
id = "OX-1"
substance = "sodium oxalate"
formula = "Na2C2O4"
purity = "0.99965"
purity_expanded_u = "0.00024"
coverage_factor = "2"
certificate = "FX-CERT-1"
valid_until = "2027-06-30"
drying = "2 h at 110 C"

[[record]]
kind = "titrant"
id = "KMN-1"
formula = "KMnO4"
nominal_concentration = "0.02"
prepared_on = "2026-11-16"
valid_until = "2027-02-16"

[[record]]
kind = "run"
id = "STD-1"
run_kind = "standardization"
method = "QAL-M-014"
policy = "QAL-POL-001"
titrant = "KMN-1"
reference_lot = "OX-1"
started_at = "2026-11-23T08:10:00Z"
"#;

const BAD_BATCH: &str = r#"
[[record]]
kind = "sample"
id = "S-OK-1"
description = "first sample, fine"
received_at = "2026-11-20T14:05:00Z"

[[record]]
kind = "sample"
id = "S-OK-2"
description = "second sample, fine"
received_at = "2026-11-20T14:06:00Z"

[[record]]
kind = "weighing"
run = "STD-1"
replicate = 1
portion = "primary-standard"
balance = "B1"
mode = "by-difference"
first = "18,4127 g"
first_at = "2026-11-23T08:14:10Z"
second = "18.1616 g"
second_at = "2026-11-23T08:15:02Z"
"#;

/// Balance printouts (invented readings of the fixture's balance `B1`, and of `B9`, which the
/// ledger does not have).
const PRINTOUTS: [(&str, &str); 3] = [
    (
        "printout.txt",
        "# invented printout of balance B1\n\
         2026-11-23T08:14:12Z  B1  18.4127  g  S\n\
         2026-11-23T08:15:04Z  B1  18.1616  g  S\n",
    ),
    (
        "bad-printout.txt",
        "# invented printout of balance B1\n\
         2026-11-23T08:14:12Z  B1  18.4127  g  S\n\
         2026-11-23T08:15:04Z  B1  18,1616  g  S\n",
    ),
    (
        "foreign-printout.txt",
        "2026-11-23T08:14:12Z  B1  18.4127  g  S\n\
         2026-11-23T08:15:04Z  B9  18.1616  g  S\n",
    ),
];
