//! Text views of the validator's results: the replay summary and findings, the code table,
//! the exception report and a recorded sign-off. Nothing here decides anything.

use assize_ledger::Entry;
use assize_verify::exceptions::ExceptionReport;
use assize_verify::explain::{Explanation, Provenance, RunExplained, SignatureState};
use assize_verify::findings::{Finding, Severity, RULES};
use assize_verify::history::History;
use assize_verify::records::SignOff;
use assize_verify::validate::{Scope, Validation};
use comfy_table::presets::UTF8_FULL_CONDENSED;
use comfy_table::{ContentArrangement, Table};
use std::collections::BTreeMap;

fn table(header: &[&str]) -> Table {
    let mut t = Table::new();
    t.load_style(UTF8_FULL_CONDENSED)
        .set_content_arrangement(ContentArrangement::Dynamic)
        .set_width(120)
        .set_header(header.iter().copied());
    t
}

fn entries_cell(finding: &Finding) -> String {
    let seqs: Vec<String> = finding.entries.iter().map(|e| e.seq.to_string()).collect();
    if seqs.len() > 6 {
        format!("{} … ({} entries)", seqs[..5].join(", "), seqs.len())
    } else {
        seqs.join(", ")
    }
}

/// The findings as a table, then what to do for each code present.
pub fn findings_text(findings: &[Finding]) -> String {
    if findings.is_empty() {
        return "no findings".into();
    }
    let mut t = table(&["code", "severity", "run", "entries", "finding"]);
    for f in findings {
        t.add_row(vec![
            f.code.text().to_string(),
            f.severity.name().to_string(),
            f.run.clone().unwrap_or_else(|| "-".into()),
            entries_cell(f),
            format!("{}\n({})", f.message, f.clause),
        ]);
    }
    let mut actions: BTreeMap<&str, &str> = BTreeMap::new();
    for f in findings {
        actions.insert(f.code.text(), f.action);
    }
    let mut text = t.to_string();
    text.push_str("\n\nwhat to do:\n");
    for (code, action) in actions {
        text.push_str(&format!("  {code}  {action}\n"));
    }
    text
}

/// `assize replay` for people.
pub fn validation_text(v: &Validation) -> String {
    let mut text = String::new();
    let scope = match &v.scope {
        Scope::Ledger => "every run".to_string(),
        Scope::Run(id) => format!("run {id}"),
        Scope::Sample(id) => format!("sample {id}"),
    };
    let head = v.head.map_or("empty".to_string(), |h| {
        format!("entry {} ({})", h.seq, &h.hash.to_hex()[..16])
    });
    text.push_str(&format!(
        "replayed {} entries up to {head}; chain {}; scope: {scope}\n\n",
        v.integrity.entries,
        if v.integrity.intact() {
            "intact"
        } else {
            "NOT INTACT"
        }
    ));
    let shown = match v.scope {
        Scope::Ledger => format!(
            "{} runs checked, {} with findings{}\n",
            v.runs_checked,
            v.runs.len(),
            if v.runs.is_empty() { "" } else { ":" }
        ),
        _ => format!("{} runs checked:\n", v.runs_checked),
    };
    text.push_str(&shown);
    if v.runs.is_empty() {
        text.push('\n');
    } else {
        let mut t = table(&[
            "run",
            "kind",
            "sample",
            "method",
            "recomputed result",
            "spec",
            "blocking",
            "review",
        ]);
        for r in &v.runs {
            t.add_row(vec![
                r.run.clone(),
                format!("{:?}", r.kind).to_lowercase(),
                r.sample.clone().unwrap_or_else(|| "-".into()),
                r.method.clone(),
                r.result
                    .clone()
                    .unwrap_or_else(|| "cannot recompute".into()),
                match r.conforms {
                    Some(true) => "conforms".into(),
                    Some(false) => "FAILS".into(),
                    None => "-".into(),
                },
                r.findings.blocking.to_string(),
                r.findings.review.to_string(),
            ]);
        }
        text.push_str(&t.to_string());
        text.push_str("\n\n");
    }
    text.push_str(&findings_text(&v.findings));
    text.push_str(&format!(
        "\n{} blocking, {} for review, {} periodic\n",
        v.tally.blocking, v.tally.review, v.tally.periodic
    ));
    text
}

/// `assize codes` for people.
pub fn codes_text() -> String {
    let mut t = table(&["code", "severity", "what it catches", "basis"]);
    for rule in RULES {
        t.add_row(vec![
            rule.code,
            rule.severity.name(),
            rule.title,
            rule.basis,
        ]);
    }
    format!("{t}\n\nFINDINGS.md in the project documents each code with what the reviewer does.")
}

/// `assize exceptions` for people.
pub fn exceptions_text(r: &ExceptionReport) -> String {
    let mut text = format!(
        "exception report: run {}{}\nmethod {} · policy {} · ledger head entry {} ({}) · chain {}\nanalysts: {}\nrecomputed: {} · reported: {}\n\n",
        r.run,
        r.sample.as_ref().map_or(String::new(), |s| format!(" (sample {s})")),
        r.method,
        r.policy,
        r.head_seq,
        &r.head_hash[..16.min(r.head_hash.len())],
        if r.chain_intact { "intact" } else { "NOT INTACT" },
        r.analysts.join(", "),
        r.recomputed.as_deref().unwrap_or("cannot recompute"),
        r.reported.as_deref().unwrap_or("not reported"),
    );
    text.push_str("findings\n");
    text.push_str(&findings_text(&r.findings));
    text.push('\n');
    text.push_str("corrections\n");
    if r.corrections.is_empty() {
        text.push_str("none\n");
    } else {
        let mut t = table(&[
            "entry", "corrects", "kind", "by", "signed", "reason", "changes",
        ]);
        for c in &r.corrections {
            let changes: Vec<String> = c
                .changes
                .iter()
                .map(|f| format!("{}: {} → {}", f.field, f.old, f.new))
                .collect();
            t.add_row(vec![
                c.entry.seq.to_string(),
                c.corrects.to_string(),
                c.kind.clone(),
                c.author.clone(),
                if c.signed { "yes".into() } else { "NO".into() },
                if c.reason.trim().is_empty() {
                    "(none given)".into()
                } else {
                    c.reason.clone()
                },
                changes.join("\n"),
            ]);
        }
        text.push_str(&t.to_string());
        text.push('\n');
    }
    text.push_str("\nreadings keyed by hand\n");
    if r.manual_entries.is_empty() {
        text.push_str("none\n");
    } else {
        let mut t = table(&["entry", "replicate", "portion", "readings", "by"]);
        for m in &r.manual_entries {
            t.add_row(vec![
                m.entry.seq.to_string(),
                m.replicate.to_string(),
                m.portion.clone(),
                m.readings.clone(),
                m.author.clone(),
            ]);
        }
        text.push_str(&t.to_string());
        text.push('\n');
    }
    let late: Vec<String> = r.late_entries.iter().map(|e| e.seq.to_string()).collect();
    text.push_str(&format!(
        "\nlate entries: {}\n",
        if late.is_empty() {
            "none".into()
        } else {
            late.join(", ")
        }
    ));
    text.push_str("\ninvalidated replicates\n");
    if r.invalidations.is_empty() {
        text.push_str("none\n");
    } else {
        for i in &r.invalidations {
            text.push_str(&format!(
                "  replicate {} (entry {}) by {}: {}\n",
                i.replicate, i.entry.seq, i.author, i.cause
            ));
        }
    }
    text.push_str("\nsign-offs\n");
    if r.sign_offs.is_empty() {
        text.push_str("none yet\n");
    } else {
        for s in &r.sign_offs {
            text.push_str(&format!(
                "  {} by {} at {} (entry {}, based on entry {}){}{}\n",
                s.meaning,
                s.signer,
                s.recorded,
                s.entry.seq,
                s.based_on_seq,
                if s.comment.is_empty() {
                    String::new()
                } else {
                    format!(": {}", s.comment)
                },
                if s.justification.is_empty() {
                    String::new()
                } else {
                    format!(" — justification: {}", s.justification)
                },
            ));
        }
    }
    let blocking = r
        .findings
        .iter()
        .filter(|f| f.severity == Severity::Blocking)
        .count();
    text.push_str(&format!(
        "\nreport SHA-256 {}\n{}\n",
        r.sha256(),
        if blocking > 0 {
            format!("{blocking} blocking finding(s): approval needs them resolved or a recorded justification")
        } else {
            "no blocking findings".to_string()
        }
    ));
    text
}

/// A recorded sign-off for people.
pub fn signed_text(entry: &Entry, s: &SignOff, report: &ExceptionReport) -> String {
    format!(
        "entry {} recorded: run {} {} by {} at {}\nbased on ledger entry {} ({}); exception report SHA-256 {}{}",
        entry.seq,
        report.run,
        s.meaning.name(),
        entry.author,
        entry.record_time,
        s.based_on_seq,
        &s.based_on.to_hex()[..16],
        s.report_sha256.as_deref().unwrap_or("-"),
        if s.justification.is_empty() {
            String::new()
        } else {
            format!("\njustification recorded: {}", s.justification)
        }
    )
}

/// `assize periodic` for people.
pub fn periodic_text(p: &assize_verify::periodic::PeriodicReview) -> String {
    let mut text = format!(
        "periodic review {} to {}: {} runs\n\n",
        p.from, p.to, p.runs
    );
    for (title, rows) in [
        ("per analyst", &p.by_analyst),
        ("per method", &p.by_method),
        ("per balance", &p.by_balance),
    ] {
        let mut t = table(&[
            title,
            "runs",
            "corrections",
            "invalidations",
            "late entries",
            "retests",
        ]);
        for r in rows.iter().chain(std::iter::once(&p.lab)) {
            t.add_row(vec![
                r.name.clone(),
                r.runs.to_string(),
                r.corrections.to_string(),
                r.invalidations.to_string(),
                r.late_entries.to_string(),
                r.retests.to_string(),
            ]);
        }
        text.push_str(&t.to_string());
        text.push_str("\n\n");
    }
    let mut t = table(&["person", "name", "roles held", "keys usable"]);
    for h in &p.people {
        t.add_row(vec![
            h.person.clone(),
            h.name.clone(),
            h.roles.join("\n"),
            h.keys.join("\n"),
        ]);
    }
    text.push_str(&t.to_string());
    text.push_str("\n\nto re-review\n");
    for pick in p.random_sample.iter().chain(&p.targeted_sample) {
        text.push_str(&format!("  {}: {}\n", pick.run, pick.reason));
    }
    if p.random_sample.is_empty() && p.targeted_sample.is_empty() {
        text.push_str("  no runs in the period\n");
    }
    text.push('\n');
    text.push_str(&findings_text(&p.findings));
    text
}

/// One line of a printed tree and the lines under it.
struct TreeNode {
    line: String,
    children: Vec<TreeNode>,
}

impl TreeNode {
    fn leaf(line: impl Into<String>) -> TreeNode {
        TreeNode {
            line: line.into(),
            children: Vec::new(),
        }
    }

    fn with(line: impl Into<String>, children: Vec<TreeNode>) -> TreeNode {
        TreeNode {
            line: line.into(),
            children,
        }
    }

    /// Writes the children under `prefix`, with box-drawing branches.
    fn write_children(&self, prefix: &str, out: &mut String) {
        for (i, child) in self.children.iter().enumerate() {
            let last = i + 1 == self.children.len();
            out.push_str(prefix);
            out.push_str(if last { "└─ " } else { "├─ " });
            out.push_str(&child.line);
            out.push('\n');
            let deeper = format!("{prefix}{}", if last { "   " } else { "│  " });
            child.write_children(&deeper, out);
        }
    }
}

fn signature_text(state: &SignatureState) -> &'static str {
    match state {
        SignatureState::Verified => "signature verified",
        SignatureState::Unsigned => "UNSIGNED",
        SignatureState::Broken => "SIGNATURE DOES NOT VERIFY",
        SignatureState::NotTheAuthorsKey => "SIGNED WITH ANOTHER PERSON'S KEY",
    }
}

/// An entry as a tree node: what it says, who, when, signature, then each correction.
fn provenance_node(label: &str, p: &Provenance, mut children: Vec<TreeNode>) -> TreeNode {
    let line = format!(
        "{label} #{}: {} · {} · {} · {}",
        p.seq,
        p.says,
        p.author,
        p.recorded_at,
        signature_text(&p.signature)
    );
    for c in &p.corrections {
        let changed: Vec<String> = c
            .changes
            .iter()
            .map(|f| format!("{}: {} → {}", f.field, f.old, f.new))
            .collect();
        children.push(TreeNode::leaf(format!(
            "corrected by #{} · {} · {}{} · reason: {} · {}",
            c.seq,
            c.author,
            c.recorded_at,
            if c.signed {
                ""
            } else {
                " · UNSIGNED, not in force"
            },
            if c.reason.trim().is_empty() {
                "(none given)"
            } else {
                &c.reason
            },
            changed.join("; ")
        )));
    }
    TreeNode::with(line, children)
}

fn run_node(run: &RunExplained) -> TreeNode {
    let mut children = vec![provenance_node("run", &run.run, Vec::new())];
    children.push(TreeNode::leaf(format!("formula: {}", run.formula)));
    children.push(TreeNode::leaf(match &run.recomputed {
        Ok(o) => format!(
            "recomputed: mean {:.6} {}{}{}",
            o.mean,
            o.unit,
            o.rsd_percent
                .map_or(String::new(), |r| format!(", RSD {r:.3} %")),
            o.reported.as_ref().map_or(String::new(), |r| format!(
                ", reported as {} ± {} {} (k = {:.2})",
                r.value, r.expanded_uncertainty, o.unit, o.budget.coverage_factor
            ))
        ),
        Err(why) => format!("cannot recompute: {why}"),
    }));
    for r in &run.results {
        children.push(provenance_node("result", r, Vec::new()));
    }
    for rep in &run.replicates {
        let mut under = Vec::new();
        for w in &rep.weighings {
            let b = &w.balance;
            let mut balance = Vec::new();
            match &b.calibration {
                Some(c) => balance.push(provenance_node(
                    if b.calibration_valid_then {
                        "calibration in force"
                    } else {
                        "calibration NOT VALID on the day"
                    },
                    c,
                    Vec::new(),
                )),
                None => balance.push(TreeNode::leaf("NO CALIBRATION on or before the day")),
            }
            if b.checks.is_empty() {
                balance.push(TreeNode::leaf("NO ROUTINE CHECK earlier that day"));
            }
            for c in &b.checks {
                balance.push(provenance_node("check", c, Vec::new()));
            }
            let net = TreeNode::leaf(format!("net {} g", w.net_g));
            let balance = provenance_node("balance", &b.balance, balance);
            under.push(provenance_node("weighing", &w.entry, vec![net, balance]));
        }
        for e in &rep.entries {
            under.push(provenance_node(&e.kind.replace("lab.", ""), e, Vec::new()));
        }
        let line = match (&rep.value, &rep.substituted) {
            (Some(_), Some(s)) => format!("replicate {}: {s}", rep.number),
            _ => format!("replicate {} (not counted)", rep.number),
        };
        children.push(TreeNode::with(line, under));
    }
    for m in &run.materials {
        children.push(provenance_node("material", m, Vec::new()));
    }
    for d in &run.documents {
        children.push(provenance_node("document", d, Vec::new()));
    }
    for s in &run.statements {
        children.push(provenance_node(&s.kind.replace("lab.", ""), s, Vec::new()));
    }
    if let Some(std) = &run.standardization {
        children.push(run_node(std));
    }
    TreeNode::with(
        format!("{:?} {}", run.kind, run.id).to_lowercase(),
        children,
    )
}

/// `assize explain` as a tree.
pub fn explanation_text(e: &Explanation) -> String {
    let mut out = format!(
        "where the result of run {} comes from · ledger head entry {} ({}) · {} entries\n",
        e.run.id,
        e.head_seq,
        &e.head_hash[..16.min(e.head_hash.len())],
        e.entries.len()
    );
    let root = TreeNode::with(String::new(), vec![run_node(&e.run)]);
    root.write_children("", &mut out);
    out
}

/// `assize history` for people: the versions as a tree (each correction under the version
/// it replaced), then invalidations and sign-offs.
pub fn history_text(h: &History) -> String {
    let first = &h.versions[0];
    let mut out = format!(
        "history of entry {} ({}) · ledger head entry {} ({})\n",
        first.written.seq,
        h.kind,
        h.head_seq,
        &h.head_hash[..16.min(h.head_hash.len())]
    );
    let mut versions = Vec::new();
    for v in &h.versions {
        let state = if v.in_force {
            "IN FORCE"
        } else if v.number == 1 || v.written.signature == SignatureState::Verified {
            "replaced"
        } else {
            "not in force"
        };
        let mut children = vec![TreeNode::leaf(format!("says: {}", v.says))];
        if let Some(reason) = &v.reason {
            children.push(TreeNode::leaf(format!(
                "reason: {}",
                if reason.trim().is_empty() {
                    "(none given)"
                } else {
                    reason
                }
            )));
        }
        children.extend(
            v.changes
                .iter()
                .map(|f| TreeNode::leaf(format!("{}: {} → {}", f.field, f.old, f.new))),
        );
        let what = if v.number == 1 {
            "as written"
        } else {
            "correction"
        };
        versions.push(TreeNode::with(
            format!(
                "version {} · {what} by #{} · {} · {} · {} · {state}",
                v.number,
                v.written.seq,
                v.written.author,
                v.written.recorded_at,
                signature_text(&v.written.signature)
            ),
            children,
        ));
    }
    TreeNode::with(String::new(), versions).write_children("", &mut out);
    if !h.invalidations.is_empty() {
        out.push_str("invalidations:\n");
        let lines = h
            .invalidations
            .iter()
            .map(|i| {
                TreeNode::leaf(format!(
                    "#{} · {} · {} · {} · cause: {}",
                    i.written.seq,
                    i.written.author,
                    i.written.recorded_at,
                    signature_text(&i.written.signature),
                    i.cause
                ))
            })
            .collect();
        TreeNode::with(String::new(), lines).write_children("", &mut out);
    }
    if h.sign_offs.is_empty() {
        out.push_str("sign-offs: none\n");
    } else {
        out.push_str("sign-offs:\n");
        let lines = h
            .sign_offs
            .iter()
            .map(|s| {
                let mut children = Vec::new();
                if !s.comment.trim().is_empty() {
                    children.push(TreeNode::leaf(format!("comment: {}", s.comment)));
                }
                if !s.justification.trim().is_empty() {
                    children.push(TreeNode::leaf(format!(
                        "justification (blocking findings stood): {}",
                        s.justification
                    )));
                }
                if let Some(sha) = &s.report_sha256 {
                    children.push(TreeNode::leaf(format!("exception report sha256 {sha}")));
                }
                TreeNode::with(
                    format!(
                        "{} by {} · #{} · {} · {} · saw the ledger up to entry {}",
                        s.meaning,
                        s.written.author,
                        s.written.seq,
                        s.written.recorded_at,
                        signature_text(&s.written.signature),
                        s.based_on_seq
                    ),
                    children,
                )
            })
            .collect();
        TreeNode::with(String::new(), lines).write_children("", &mut out);
    }
    out
}
