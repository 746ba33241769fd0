//! The Quick start demo end to end through the real `assize` binary: the findings of the
//! invented three weeks in `samples/demo/` are exactly the problems planted there, each in its
//! own run and saying what was planted; the clean runs carry the reviewer's review and approval
//! and nothing else; the record times are the scenario's own; the checkpoint written part-way
//! is checked; and the review dossier it announces is on disk.
//!
//! The planted problems are listed here beside their codes, with where each is planted (the
//! same table heads `samples/demo/scenario.toml`). A new finding anywhere, or a planted one
//! that stops firing, fails `the_findings_are_exactly_the_planted_problems`.

use serde_json::Value;
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::sync::OnceLock;

const BIN: &str = env!("CARGO_BIN_EXE_assize");

/// (code, run, what was planted and where).
const PLANTED: [(&str, &str, &str); 6] = [
    // samples/demo/runs/AS-HP-26-1058-1.toml, replicate 2's titrant weighing: the bottle keyed
    // 112.2046 g where the balance printed 112.2406 g; the printout
    // (samples/demo/printout-B2-AX-2026-11-17.txt) is imported by the scenario's capture step.
    ("CAP-01", "AS-HP-26-1058-1", "copying slip"),
    // samples/demo/runs/AS-AA-26-0315-1.toml, replicate 2's sample weighing: observed at 08:25,
    // entered at 15:40.
    ("TIM-01", "AS-AA-26-0315-1", "late entry"),
    // samples/demo/scenario.toml, the correct step of 2026-11-20: replicate 3's sample weighing
    // of AS-CC-26-0231-1 corrected with "n/a" as the reason.
    ("CHG-02", "AS-CC-26-0231-1", "correction without a reason"),
    // samples/demo/runs/STD-KMN-2611-1-C.toml, run record: reference lot NOX-25-031 (valid
    // until 2026-11-18, samples/demo/setup.toml) used on 2026-11-19.
    (
        "MAT-01",
        "STD-KMN-2611-1-C",
        "expired reference standard used",
    ),
    // samples/demo/runs/AS-HP-26-1072-1.toml: four determinations, no replicate entry for
    // replicate 2 and no invalidation, so its two weighings feed nothing.
    (
        "COMP-01",
        "AS-HP-26-1072-1",
        "replicate dropped without cause",
    ),
    // samples/demo/scenario.toml, the sign-unchecked step of 2026-11-24: s.obuya, by then a
    // reviewer, signs her own assay of 2026-11-11 (samples/demo/runs/AS-AA-26-0307-1.toml).
    ("SOD-01", "AS-AA-26-0307-1", "self-review"),
];

/// Runs without a planted problem: each reviewed and approved by i.kallstrom.
const CLEAN_RUNS: [&str; 12] = [
    "STD-KMN-2611-1-A",
    "AS-HP-26-1041-1",
    "STD-NAOH-2611-1-A",
    "STD-EDTA-2611-1-A",
    "AS-CC-26-0220-1",
    "STD-KMN-2611-1-B",
    "STD-NAOH-2611-1-B",
    "STD-EDTA-2611-1-B",
    "STD-KMN-2611-1-D",
    "AS-HP-26-1077-1",
    "STD-EDTA-2611-1-C",
    "AS-CC-26-0240-1",
];

fn assize(dir: &Path, args: &[&str]) -> Output {
    let out = Command::new(BIN)
        .args(args)
        .current_dir(dir)
        .env_remove("ASSIZE_LEDGER")
        .env_remove("ASSIZE_KEY")
        .stdin(Stdio::null())
        .output()
        .expect("run assize");
    assert!(
        out.status.success(),
        "{args:?} failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    out
}

fn json(out: &Output) -> Value {
    serde_json::from_slice(&out.stdout).expect("--json prints JSON")
}

/// The demo built once: its directory and what `--json demo` printed.
fn demo() -> &'static (tempfile::TempDir, Value) {
    static DEMO: OnceLock<(tempfile::TempDir, Value)> = OnceLock::new();
    DEMO.get_or_init(|| {
        let dir = tempfile::tempdir().expect("temp dir");
        let out = assize(dir.path(), &["--json", "demo", "--dir", "demo"]);
        (dir, json(&out))
    })
}

fn ledger() -> PathBuf {
    demo().0.path().join("demo/demo.ledger")
}

fn text<'a>(value: &'a Value, field: &str) -> &'a str {
    value[field]
        .as_str()
        .unwrap_or_else(|| panic!("{field} is not text in {value}"))
}

#[test]
fn the_findings_are_exactly_the_planted_problems() {
    let findings = demo().1["validation"]["findings"]
        .as_array()
        .expect("findings");
    let found: BTreeSet<(String, String)> = findings
        .iter()
        .map(|f| {
            let run = f["run"].as_str().unwrap_or("(no run)");
            (text(f, "code").to_string(), run.to_string())
        })
        .collect();
    let planted: BTreeSet<(String, String)> = PLANTED
        .iter()
        .map(|(code, run, _)| (code.to_string(), run.to_string()))
        .collect();
    let planted_list: Vec<String> = PLANTED
        .iter()
        .map(|(code, run, what)| format!("{code} {run}: {what}"))
        .collect();
    assert_eq!(
        found, planted,
        "planted: {planted_list:#?}\nfindings: {findings:#?}"
    );
    // Each planted problem in its own run.
    let runs: BTreeSet<&str> = PLANTED.iter().map(|(_, run, _)| *run).collect();
    assert_eq!(runs.len(), PLANTED.len());
}

/// The messages of the findings of `code`.
fn messages(code: &str) -> Vec<String> {
    demo().1["validation"]["findings"]
        .as_array()
        .expect("findings")
        .iter()
        .filter(|f| f["code"] == code)
        .map(|f| text(f, "message").to_string())
        .collect()
}

#[test]
fn each_finding_says_what_was_planted() {
    let one = |code: &str| -> String {
        let found = messages(code);
        assert_eq!(found.len(), 1, "{code}: {found:?}");
        found[0].clone()
    };
    let slip = one("CAP-01");
    assert!(
        slip.contains("first reading keyed 112.2046 g, captured 112.2406 g: transposed digits"),
        "{slip}"
    );
    let late = one("TIM-01");
    assert!(
        late.contains("recorded at 2026-11-18 15:40 UTC, 434 min after")
            && late.contains("the observation at 2026-11-18 08:25 UTC"),
        "{late}"
    );
    let reasonless = one("CHG-02");
    assert!(
        reasonless.contains("with \"n/a\" as its reason"),
        "{reasonless}"
    );
    let expired = one("MAT-01");
    assert!(
        expired.contains("used reference lot NOX-25-031 on 2026-11-19")
            && expired.contains("valid until 2026-11-18"),
        "{expired}"
    );
    let own = one("SOD-01");
    assert!(
        own.starts_with("s.obuya signed run AS-AA-26-0307-1 as reviewed"),
        "{own}"
    );
    // The dropped replicate leaves both of its weighings orphan: one finding each.
    let dropped = messages("COMP-01");
    assert_eq!(dropped.len(), 2, "{dropped:?}");
    for portion in ["Sample", "Titrant"] {
        assert!(
            dropped
                .iter()
                .any(|m| m.contains(&format!("replicate 2, {portion} portion"))),
            "{dropped:?}"
        );
    }
}

#[test]
fn clean_runs_are_reviewed_and_approved_by_the_reviewer_and_the_self_review_is_the_analysts() {
    let dir = demo().0.path();
    let ledger = ledger();
    let ledger = ledger.to_str().expect("utf-8");
    let sign_offs = |run: &str| -> (Value, Vec<(String, String)>) {
        let report = json(&assize(
            dir,
            &["--ledger", ledger, "--json", "exceptions", run],
        ));
        let signed = report["report"]["sign_offs"]
            .as_array()
            .expect("sign-offs")
            .iter()
            .map(|s| {
                (
                    text(s, "signer").to_string(),
                    text(s, "meaning").to_string(),
                )
            })
            .collect();
        (report, signed)
    };
    let reviewer = |meaning: &str| ("i.kallstrom".to_string(), meaning.to_string());
    for run in CLEAN_RUNS {
        let (report, signed) = sign_offs(run);
        assert_eq!(
            signed,
            [reviewer("reviewed"), reviewer("approved")],
            "{run}"
        );
        assert_eq!(
            report["report"]["findings"],
            Value::Array(Vec::new()),
            "{run}"
        );
    }
    let (report, signed) = sign_offs("AS-AA-26-0307-1");
    assert_eq!(signed, [("s.obuya".to_string(), "reviewed".to_string())]);
    let analysts = report["report"]["analysts"].as_array().expect("analysts");
    assert_eq!(analysts, &[Value::from("s.obuya")]);
    // The other planted runs wait for the reviewer.
    for (_, run, _) in PLANTED.iter().filter(|(code, ..)| *code != "SOD-01") {
        assert!(sign_offs(run).1.is_empty(), "{run}");
    }
    // Every run of the ledger is one of the above.
    let checked = demo().1["validation"]["runs_checked"]
        .as_u64()
        .expect("runs checked");
    assert_eq!(checked as usize, CLEAN_RUNS.len() + PLANTED.len());
}

#[test]
fn record_times_are_the_scenarios_and_the_checkpoint_is_checked() {
    let summary = &demo().1;
    assert_eq!(text(summary, "first_record_time"), "2026-11-06T08:00:00Z");
    assert_eq!(text(summary, "last_record_time"), "2026-11-27T16:00:00Z");
    assert_eq!(summary["intact"], true);
    assert_eq!(summary["report"]["anchors_checked"], 1);
    let entries = summary["entries"].as_u64().expect("entries");
    assert!((250..=400).contains(&entries), "{entries} entries");
    // Entry 1 is the opening at the scenario's first instant, whatever the computer's clock.
    let dir = demo().0.path();
    let ledger = ledger();
    let first = json(&assize(
        dir,
        &[
            "--ledger",
            ledger.to_str().expect("utf-8"),
            "--json",
            "entries",
            "show",
            "1",
        ],
    ));
    assert!(
        first.to_string().contains("2026-11-06T08:00:00Z"),
        "{first}"
    );
}

#[test]
fn the_review_dossier_of_the_copying_slip_is_written() {
    let summary = &demo().1;
    assert_eq!(text(summary, "dossier_run"), "AS-HP-26-1058-1");
    let page = std::fs::read_to_string(demo().0.path().join(text(summary, "dossier")))
        .expect("the dossier page");
    assert!(page.contains("Review dossier: assay AS-HP-26-1058-1"));
    assert!(page.contains("<strong>CAP-01</strong>"));
}
