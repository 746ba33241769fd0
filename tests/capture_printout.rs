//! The invented week in samples/lab/ entered through the real `assize` binary, then the
//! invented balance printout of the assay's morning (samples/lab/b2-ax-printout-2026-11-23.txt)
//! imported with `assize capture`: the dry run pairs every keyed weighing and writes nothing,
//! the import records one captured twin per weighing, a second import is refused without
//! writing, and `assize replay` names the one keying slip the printout reveals.
//!
//! Expected values are read off the two sample files, as each comment says.

mod common;

use common::{assize, head, json, lab_with_the_sample_week, run_assize};
use std::path::Path;
use std::process::Output;

const RUN: &str = "AS-HP-26-0871-1";

#[test]
fn the_sample_printout_pairs_records_once_and_names_its_keying_slip() {
    let dir = tempfile::tempdir().expect("temp dir");
    let d = dir.path();
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    lab_with_the_sample_week(d, root);
    let printout = root.join("samples/lab/b2-ax-printout-2026-11-23.txt");
    let printout = printout.to_str().expect("path");
    let capture = [
        "--ledger",
        "lab.ledger",
        "--passphrase-file",
        "pass.txt",
        "capture",
        printout,
        "--run",
        RUN,
    ];
    let before = head(d);

    // Dry run: nothing written.
    let plan = json(&assize(
        d,
        &[&["--json"][..], &capture, &["--dry-run"]].concat(),
    ));
    assert_eq!(head(d), before);
    // The assay has three replicates, each a sample and a titrant weighing: six keyed
    // weighings, every reading printed two seconds after its keyed time.
    let pairings = plan["pairings"].as_array().expect("pairings");
    assert_eq!(pairings.len(), 6);
    // Line 5, the zero printed before the first weighing, pairs with nothing.
    let unpaired: Vec<u64> = plan["unpaired_lines"]
        .as_array()
        .expect("lines")
        .iter()
        .map(|l| l["line"].as_u64().expect("line"))
        .collect();
    assert_eq!(unpaired, [5]);
    assert_eq!(plan["unpaired_weighings"].as_array().map(Vec::len), Some(0));
    // One slip: replicate 1's titrant was keyed 110.9410 g (the batch file) where the balance
    // printed 110.9140 g (line 8): digits 5 and 6 (1, 4) swapped.
    let slips: Vec<(&serde_json::Value, &serde_json::Value)> = pairings
        .iter()
        .flat_map(|p| {
            p["readings"]
                .as_array()
                .expect("readings")
                .iter()
                .filter(|r| !r["slip"].is_null())
                .map(move |r| (p, r))
        })
        .collect();
    assert_eq!(slips.len(), 1);
    let (pairing, reading) = slips[0];
    assert_eq!(pairing["replicate"], 1);
    assert_eq!(pairing["portion"], "titrant");
    assert_eq!(reading["reading"], "first");
    assert_eq!(reading["keyed"], "110.9410 g");
    assert_eq!(reading["printed"], "110.9140 g");
    assert_eq!(reading["line"], 8);
    assert_eq!(reading["slip"]["class"], "transposed-digits");
    assert_eq!(
        reading["slip"]["evidence"],
        "transposed digits: 14 keyed as 41 (digit places 5 and 6)"
    );
    let keyed_titrant = pairing["keyed_entry"].as_u64().expect("entry");

    // Before the import the replay has no CAP-01.
    let codes_before = replay_codes(d);
    assert!(
        !codes_before.iter().any(|c| c == "CAP-01"),
        "{codes_before:?}"
    );

    // The import: six captured weighings, one transaction, signed by the analyst.
    let text = assize(d, &[&capture[..], &["--key", "analyst.key"]].concat());
    assert_eq!(head(d), before + 6);
    assert!(
        text.contains(&format!(
            "entries {}-{} recorded: 6 captured weighings of run {RUN}, signed by t.rasmilov",
            before + 1,
            before + 6
        )),
        "{text}"
    );
    // Keyed weighings are paired in entry order; the titrant weighing of replicate 1 is the
    // second, so its twin is the second entry recorded.
    let twin = before + 2;

    // The same printout again: refused, naming the weighings already captured.
    let again = run_assize(d, &[&capture[..], &["--key", "analyst.key"]].concat());
    assert_eq!(again.status.code(), Some(4));
    let stderr = String::from_utf8_lossy(&again.stderr);
    assert!(
        stderr.contains(&format!(
            "entry {keyed_titrant} (replicate 1, titrant) has captured twin {twin}"
        )),
        "{stderr}"
    );
    assert_eq!(head(d), before + 6);

    // The replay now names the slip, and nothing else changed.
    let replay = json(&String::from_utf8(replay_output(d).stdout).expect("utf-8"));
    let cap: Vec<&serde_json::Value> = replay["findings"]
        .as_array()
        .expect("findings")
        .iter()
        .filter(|f| f["code"] == "CAP-01")
        .collect();
    assert_eq!(cap.len(), 1);
    assert_eq!(
        cap[0]["message"],
        format!(
            "replicate 1 of run {RUN}, titrant weighing (entry {keyed_titrant}, captured entry {twin}): \
             first reading keyed 110.9410 g, captured 110.9140 g: transposed digits: 14 keyed as 41 (digit places 5 and 6)"
        )
    );
    let mut codes_after = replay_codes(d);
    codes_after.retain(|c| c != "CAP-01");
    assert_eq!(codes_after, codes_before);
}

fn replay_output(dir: &Path) -> Output {
    // Exit 1 when findings stand, which the sample week has.
    let out = run_assize(
        dir,
        &["--json", "--ledger", "lab.ledger", "replay", "--run", RUN],
    );
    assert!(
        matches!(out.status.code(), Some(0 | 1)),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    out
}

/// The finding codes of the assay's replay, in the order reported.
fn replay_codes(dir: &Path) -> Vec<String> {
    let replay = json(&String::from_utf8(replay_output(dir).stdout).expect("utf-8"));
    replay["findings"]
        .as_array()
        .expect("findings")
        .iter()
        .map(|f| f["code"].as_str().expect("code").to_string())
        .collect()
}
