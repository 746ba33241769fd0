//! `assize dossier` end to end on the demo ledger, with one more invented standardization of
//! the demo titrant imported through the binary: the page shows exactly the numbers `--json`
//! prints (each found in the HTML by its cell id and read back), names no outside address,
//! escapes ledger text, never replaces a file without `--force`, and renders in a real
//! headless browser (Debian's chromium) without console errors; that test says it is skipped
//! when no chromium is installed.

use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::sync::OnceLock;
use std::time::{Duration, Instant};

const BIN: &str = env!("CARGO_BIN_EXE_assize");
/// The demo's copying-slip assay (it has findings, and its titrant a standardization history).
const ASSAY: &str = "AS-HP-26-1058-1";
/// The standardization imported after the demo.
const EXTRA: &str = "STD-KMN-2611-1-E";

/// One more standardization of the demo titrant, on the Monday after the demo's three weeks,
/// after that day's balance check. All readings are invented; an end-point note carries
/// markup characters.
const EXTRA_STANDARDIZATION: &str = r#"
[[record]]
kind = "balance-check"
balance = "B2-AX"
test_weight = "W200-F1-0311"
reference_mass = "200.0002 g"
reading = "200.0002 g"
at = "2026-11-30T07:50:00Z"

[[record]]
kind = "run"
id = "STD-KMN-2611-1-E"
run_kind = "standardization"
method = "QAL-M-014"
policy = "QAL-POL-001"
titrant = "KMN-2611-1"
reference_lot = "NOX-26-007"
started_at = "2026-11-30T08:05:00Z"

[[record]]
kind = "weighing"
run = "STD-KMN-2611-1-E"
replicate = 1
portion = "primary-standard"
balance = "B2-AX"
mode = "by-difference"
first = "16.8420 g"
first_at = "2026-11-30T08:09:10Z"
second = "16.5922 g"
second_at = "2026-11-30T08:09:55Z"

[[record]]
kind = "weighing"
run = "STD-KMN-2611-1-E"
replicate = 1
portion = "titrant"
balance = "B2-AX"
mode = "by-difference"
first = "113.0104 g"
first_at = "2026-11-30T08:25:00Z"
second = "75.7395 g"
second_at = "2026-11-30T08:37:40Z"

[[record]]
kind = "replicate"
run = "STD-KMN-2611-1-E"
number = 1
endpoint = "faint pink <persisting> 30 s & stable"

[[record]]
kind = "weighing"
run = "STD-KMN-2611-1-E"
replicate = 2
portion = "primary-standard"
balance = "B2-AX"
mode = "by-difference"
first = "16.5922 g"
first_at = "2026-11-30T08:41:00Z"
second = "16.3401 g"
second_at = "2026-11-30T08:41:47Z"

[[record]]
kind = "weighing"
run = "STD-KMN-2611-1-E"
replicate = 2
portion = "titrant"
balance = "B2-AX"
mode = "by-difference"
first = "113.2046 g"
first_at = "2026-11-30T08:56:10Z"
second = "75.5787 g"
second_at = "2026-11-30T09:08:31Z"

[[record]]
kind = "replicate"
run = "STD-KMN-2611-1-E"
number = 2
endpoint = "faint pink persisting 30 s"

[[record]]
kind = "weighing"
run = "STD-KMN-2611-1-E"
replicate = 3
portion = "primary-standard"
balance = "B2-AX"
mode = "by-difference"
first = "16.3401 g"
first_at = "2026-11-30T09:12:02Z"
second = "16.0892 g"
second_at = "2026-11-30T09:12:44Z"

[[record]]
kind = "weighing"
run = "STD-KMN-2611-1-E"
replicate = 3
portion = "titrant"
balance = "B2-AX"
mode = "by-difference"
first = "114.1133 g"
first_at = "2026-11-30T09:27:15Z"
second = "76.6587 g"
second_at = "2026-11-30T09:39:50Z"

[[record]]
kind = "replicate"
run = "STD-KMN-2611-1-E"
number = 3
endpoint = "faint pink persisting 30 s"
"#;

fn assize(dir: &Path, args: &[&str]) -> Output {
    Command::new(BIN)
        .args(args)
        .current_dir(dir)
        .env_remove("ASSIZE_LEDGER")
        .env_remove("ASSIZE_KEY")
        .stdin(Stdio::null())
        .output()
        .expect("run assize")
}

fn must(dir: &Path, args: &[&str]) -> Output {
    let out = assize(dir, args);
    assert!(
        out.status.success(),
        "{args:?} failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    out
}

/// The demo ledger with the extra standardization, built once.
fn demo() -> &'static Path {
    static DEMO: OnceLock<tempfile::TempDir> = OnceLock::new();
    DEMO.get_or_init(|| {
        let dir = tempfile::tempdir().expect("demo dir");
        must(dir.path(), &["demo", "--dir", "demo"]);
        std::fs::write(dir.path().join("extra.toml"), EXTRA_STANDARDIZATION).expect("batch");
        must(
            dir.path(),
            &[
                "--ledger",
                "demo/demo.ledger",
                "--passphrase-file",
                "demo/passphrase.txt",
                "import",
                "extra.toml",
                "--key",
                "demo/keys/t.rasmilov-2.key",
            ],
        );
        dir
    })
    .path()
}

/// Writes the assay's dossier (history to the head) into a fresh directory: the page and the
/// JSON printed with it.
fn written() -> (tempfile::TempDir, PathBuf, String, Value) {
    written_for(ASSAY)
}

/// Writes the dossier of `run` (history to the head) into a fresh directory.
fn written_for(run: &str) -> (tempfile::TempDir, PathBuf, String, Value) {
    let out_dir = tempfile::tempdir().expect("out dir");
    let page = out_dir.path().join("dossier.html");
    let ledger = demo().join("demo/demo.ledger");
    let out = must(
        demo(),
        &[
            "--ledger",
            ledger.to_str().expect("utf-8"),
            "--json",
            "dossier",
            run,
            "--history-to-head",
            "--out",
            page.to_str().expect("utf-8"),
        ],
    );
    let json: Value = serde_json::from_slice(&out.stdout).expect("--json prints JSON");
    let html = std::fs::read_to_string(&page).expect("the page");
    (out_dir, page, html, json)
}

/// The text of the element with this id, read back as a number.
fn shown(html: &str, id: &str) -> f64 {
    let marker = format!("id=\"{id}\">");
    let start = html
        .find(&marker)
        .unwrap_or_else(|| panic!("no element {id:?} on the page"))
        + marker.len();
    let text = &html[start..start + html[start..].find('<').expect("closing tag")];
    text.parse()
        .unwrap_or_else(|_| panic!("element {id:?} holds {text:?}, not a number"))
}

/// The page shows six significant digits: within half a unit of the sixth.
fn same_number(html: &str, id: &str, json: &Value) {
    let expected = json
        .as_f64()
        .unwrap_or_else(|| panic!("JSON for {id} is {json}, not a number"));
    let on_page = shown(html, id);
    let tolerance = 5.000_001e-6 * expected.abs();
    assert!(
        (on_page - expected).abs() <= tolerance,
        "{id}: page shows {on_page}, JSON has {expected}"
    );
}

#[test]
fn the_pages_numbers_are_the_json_numbers() {
    let (_dir, _page, html, d) = written();
    let result = &d["result"];
    same_number(&html, "result-mean", &result["mean"]);
    same_number(&html, "result-sd", &result["standard_deviation"]);
    same_number(&html, "result-rsd", &result["rsd_percent"]);
    same_number(
        &html,
        "standardization-mean",
        &result["standardization"]["mean"],
    );
    let replicates = result["replicates"].as_array().expect("replicates");
    assert_eq!(replicates.len(), 3);
    for r in replicates {
        let id = format!("rep-{}-value", r["number"]);
        same_number(&html, &id, &r["value"]);
    }
    let reported = &result["reported"];
    for (id, field) in [
        ("reported-value", "value"),
        ("reported-expanded", "expanded_uncertainty"),
    ] {
        let text = reported[field].as_str().expect("a decimal as text");
        assert!(
            html.contains(&format!("id=\"{id}\">{text}<")),
            "{id} is not {text} on the page"
        );
    }
    let budget = &d["budget"];
    same_number(&html, "result-uc", &budget["combined_standard_uncertainty"]);
    same_number(&html, "result-k", &budget["coverage_factor"]);
    same_number(&html, "result-expanded", &budget["expanded_uncertainty"]);
    let contributions = budget["contributions"].as_array().expect("contributions");
    assert!(contributions.len() >= 5);
    assert_eq!(
        html.matches("id=\"contribution-").count(),
        contributions.len()
    );
    for (i, c) in contributions.iter().enumerate() {
        same_number(&html, &format!("contribution-{i}"), &c["contribution"]);
    }
    let chart = &d["control_chart"];
    let points = chart["points"].as_array().expect("points");
    let runs: Vec<&str> = points
        .iter()
        .map(|p| p["run"].as_str().expect("id"))
        .collect();
    assert_eq!(
        runs,
        [
            "STD-KMN-2611-1-A",
            "STD-KMN-2611-1-B",
            "STD-KMN-2611-1-C",
            "STD-KMN-2611-1-D",
            EXTRA
        ]
    );
    for p in points {
        same_number(&html, &format!("cc-point-{}", p["seq"]), &p["value"]);
    }
    let limits = &chart["limits"];
    for (id, field) in [
        ("cc-mean", "mean"),
        ("cc-sd", "standard_deviation"),
        ("cc-lower-2s", "lower_2s"),
        ("cc-upper-2s", "upper_2s"),
        ("cc-lower-3s", "lower_3s"),
        ("cc-upper-3s", "upper_3s"),
    ] {
        same_number(&html, id, &limits[field]);
    }
    same_number(&html, "head-seq", &d["head_seq"]);
    for field in ["head_hash", "exception_report_sha256"] {
        let text = d[field].as_str().expect("hex");
        assert!(html.contains(text), "{field} {text} is not on the page");
    }
}

#[test]
fn the_page_is_self_contained_and_escapes_ledger_text() {
    let (_dir, _page, html, d) = written();
    for outside in [
        "http://", "https://", "<script", "<link", "src=", "@import", "url(",
    ] {
        assert!(!html.contains(outside), "the page holds {outside:?}");
    }
    assert!(html.contains("<style>") && html.contains("@media print"));
    assert_eq!(
        html.matches("<svg").count(),
        3,
        "budget, control chart, scatter"
    );
    // Every finding's code is on the page.
    let findings = d["findings"].as_array().expect("findings");
    assert!(!findings.is_empty(), "the demo's assay has findings");
    for f in findings {
        let code = f["code"].as_str().expect("code");
        assert!(html.contains(&format!("<strong>{code}</strong>")), "{code}");
    }
    // The end-point note typed with markup characters is shown as text, never as markup.
    let (_dir, _page, html, _) = written_for(EXTRA);
    assert!(html.contains("faint pink &lt;persisting&gt; 30 s &amp; stable"));
    assert!(!html.contains("<persisting>"));
}

#[test]
fn never_replaces_a_file_without_force_and_leaves_nothing_partial() {
    let (dir, page, html, _) = written();
    let ledger = demo().join("demo/demo.ledger");
    let args = |extra: &[&'static str]| -> Vec<String> {
        let mut args: Vec<String> = [
            "--ledger",
            ledger.to_str().expect("utf-8"),
            "dossier",
            EXTRA,
            "--out",
            page.to_str().expect("utf-8"),
        ]
        .map(String::from)
        .to_vec();
        args.extend(extra.iter().map(|a| a.to_string()));
        args
    };
    let refused = assize(
        demo(),
        &args(&[]).iter().map(String::as_str).collect::<Vec<_>>(),
    );
    assert_eq!(refused.status.code(), Some(4));
    assert!(String::from_utf8_lossy(&refused.stderr).contains("already exists"));
    assert_eq!(std::fs::read_to_string(&page).expect("page"), html);
    must(
        demo(),
        &args(&["--force"])
            .iter()
            .map(String::as_str)
            .collect::<Vec<_>>(),
    );
    let replaced = std::fs::read_to_string(&page).expect("page");
    assert!(replaced.contains(&format!("Review dossier: standardization {EXTRA}")));
    let names: Vec<String> = std::fs::read_dir(dir.path())
        .expect("dir")
        .map(|e| e.expect("entry").file_name().to_string_lossy().into_owned())
        .collect();
    assert_eq!(names, ["dossier.html"], "no temporary file is left");
}

/// Debian's chromium, where installed.
fn chromium() -> Option<PathBuf> {
    let fixed = PathBuf::from("/usr/bin/chromium");
    if fixed.is_file() {
        return Some(fixed);
    }
    let path = std::env::var_os("PATH")?;
    std::env::split_paths(&path)
        .flat_map(|dir| ["chromium", "chromium-browser"].map(|name| dir.join(name)))
        .find(|candidate| candidate.is_file())
}

/// Runs the browser, killing it if it takes longer than two minutes.
fn run_browser(browser: &Path, args: &[String]) -> Output {
    let child = Command::new(browser)
        .args(args)
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("start chromium");
    let id = child.id();
    let deadline = Instant::now() + Duration::from_secs(120);
    let watcher = std::thread::spawn(move || child.wait_with_output().expect("chromium output"));
    while !watcher.is_finished() {
        if Instant::now() > deadline {
            let _ = Command::new("kill").args(["-9", &id.to_string()]).status();
            panic!("chromium did not finish within two minutes");
        }
        std::thread::sleep(Duration::from_millis(100));
    }
    watcher.join().expect("watcher")
}

/// Console messages and uncaught errors in chromium's log (its own start-up noise, e.g.
/// about a missing system bus, is not about the page).
fn page_errors(log: &str) -> Vec<&str> {
    log.lines()
        .filter(|l| {
            l.contains("CONSOLE")
                || l.contains("Uncaught")
                || l.contains("Failed to load resource")
                || l.contains("Refused to")
        })
        .collect()
}

#[test]
fn chromium_renders_the_page_and_prints_it() {
    let Some(browser) = chromium() else {
        eprintln!("skipped: no chromium installed (apt-get install chromium)");
        return;
    };
    let (dir, page, _, d) = written();
    let profile = dir.path().join("browser-profile");
    let common = [
        "--headless".to_string(),
        "--no-sandbox".into(),
        "--disable-gpu".into(),
        "--no-first-run".into(),
        "--enable-logging=stderr".into(),
        "--v=0".into(),
        format!("--user-data-dir={}", profile.display()),
    ];
    let url = format!("file://{}", page.display());
    let mut dump = common.to_vec();
    dump.extend(["--dump-dom".to_string(), url.clone()]);
    let out = run_browser(&browser, &dump);
    let dom = String::from_utf8_lossy(&out.stdout);
    let log = String::from_utf8_lossy(&out.stderr);
    assert!(out.status.success(), "chromium failed:\n{log}");
    let errors = page_errors(&log);
    assert!(errors.is_empty(), "the page logged errors: {errors:#?}");
    let title = format!(
        "<h1>Review dossier: assay {}</h1>",
        d["run"]["id"].as_str().expect("run id")
    );
    for heading in [
        title.as_str(),
        "<h2>Findings</h2>",
        "<h2>Replicates and result</h2>",
        "<h2>Uncertainty budget</h2>",
        "<h2>Replicate scatter</h2>",
        "<h2>Audit trail</h2>",
        "<h2>Sign-off</h2>",
    ] {
        assert!(dom.contains(heading), "the rendered page lacks {heading}");
    }
    assert_eq!(dom.matches("<svg").count(), 3, "three charts rendered");
    assert!(
        dom.contains("<rect") && dom.contains("<circle"),
        "bars and points"
    );
    // The print layout: a PDF of at least one page.
    let pdf = dir.path().join("dossier.pdf");
    let mut print = common.to_vec();
    print.extend([format!("--print-to-pdf={}", pdf.display()), url]);
    let printed = run_browser(&browser, &print);
    assert!(
        printed.status.success(),
        "{}",
        String::from_utf8_lossy(&printed.stderr)
    );
    let bytes = std::fs::read(&pdf).expect("the PDF");
    assert!(bytes.starts_with(b"%PDF"), "chromium printed a PDF");
    assert!(bytes.windows(10).any(|w| w == b"/Type /Pag"), "with pages");
}
