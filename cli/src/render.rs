//! Turns library results into what people and scripts read: tables (comfy-table) and JSON views.
//!
//! Views are plain serializable structs; nothing here decides anything about the ledger.

use assize_ledger::codec;
use assize_ledger::replay::{IntegrityReport, Problem};
use assize_ledger::{Entry, Registry};
use comfy_table::presets::UTF8_FULL_CONDENSED;
use comfy_table::Table;
use serde::Serialize;

fn table(header: &[&str]) -> Table {
    let mut t = Table::new();
    t.load_style(UTF8_FULL_CONDENSED)
        .set_header(header.iter().copied());
    t
}

/// An entry as shown to people and scripts.
#[derive(Serialize)]
pub struct EntryView {
    seq: u64,
    hash: String,
    prev_hash: String,
    record_time: String,
    author: String,
    kind: String,
    references: Vec<String>,
    signer: Option<String>,
    signature: Option<String>,
    body: String,
    body_cbor_hex: String,
}

impl EntryView {
    /// The view of one entry.
    pub fn of(entry: &Entry) -> Self {
        EntryView {
            seq: entry.seq,
            hash: entry.hash.to_hex(),
            prev_hash: entry.prev_hash.to_hex(),
            record_time: entry.record_time.to_string(),
            author: entry.author.clone(),
            kind: entry.kind.clone(),
            references: entry.references.iter().map(|r| r.to_hex()).collect(),
            signer: entry.signer.map(|k| k.to_hex()),
            signature: entry.signature.map(hex::encode),
            body: codec::diagnostic(&entry.body).unwrap_or_else(|e| format!("(not CBOR: {e})")),
            body_cbor_hex: hex::encode(&entry.body),
        }
    }
}

/// Entry list as a table.
pub fn entries_table(entries: &[Entry]) -> String {
    if entries.is_empty() {
        return "no entries match".into();
    }
    let mut t = table(&["seq", "recorded (UTC)", "author", "kind", "signed", "hash"]);
    for e in entries {
        t.add_row(vec![
            e.seq.to_string(),
            e.record_time.to_string(),
            e.author.clone(),
            e.kind.clone(),
            if e.signature.is_some() { "yes" } else { "no" }.to_string(),
            e.hash.to_hex()[..16].to_string(),
        ]);
    }
    t.to_string()
}

/// One entry as a two-column table.
pub fn entry_detail(view: &EntryView) -> String {
    let mut t = table(&["field", "value"]);
    let references = if view.references.is_empty() {
        "none".to_string()
    } else {
        view.references.join("\n")
    };
    let rows: Vec<(&str, String)> = vec![
        ("seq", view.seq.to_string()),
        ("kind", view.kind.clone()),
        ("author", view.author.clone()),
        ("recorded (UTC)", view.record_time.clone()),
        ("hash", view.hash.clone()),
        ("previous hash", view.prev_hash.clone()),
        ("references", references),
        (
            "signer key",
            view.signer.clone().unwrap_or_else(|| "unsigned".into()),
        ),
        (
            "signature",
            view.signature.clone().unwrap_or_else(|| "none".into()),
        ),
        ("body", view.body.clone()),
    ];
    for (field, value) in rows {
        t.add_row(vec![field.to_string(), value]);
    }
    t.to_string()
}

/// A person as shown in lists.
#[derive(Serialize)]
pub struct PersonView {
    id: String,
    name: String,
    role: String,
    roles_held: Vec<RoleSpan>,
    keys: Vec<KeyView>,
}

#[derive(Serialize)]
struct RoleSpan {
    role: String,
    from_seq: u64,
    from_time: String,
}

#[derive(Serialize)]
struct KeyView {
    public_key: String,
    enrolled_seq: u64,
    enrolled_time: String,
    revoked_seq: Option<u64>,
    revoked_time: Option<String>,
}

/// Everyone in the registry.
pub fn person_views(registry: &Registry) -> Vec<PersonView> {
    registry
        .persons()
        .values()
        .map(|p| PersonView {
            id: p.id.clone(),
            name: p.name.clone(),
            role: p.role.to_string(),
            roles_held: p
                .role_history
                .iter()
                .map(|(seq, time, role)| RoleSpan {
                    role: role.to_string(),
                    from_seq: *seq,
                    from_time: time.to_string(),
                })
                .collect(),
            keys: p
                .keys
                .iter()
                .map(|k| KeyView {
                    public_key: k.public_key.to_hex(),
                    enrolled_seq: k.added_seq,
                    enrolled_time: k.added_time.to_string(),
                    revoked_seq: k.revoked.map(|(s, _)| s),
                    revoked_time: k.revoked.map(|(_, t)| t.to_string()),
                })
                .collect(),
        })
        .collect()
}

/// People as a table.
pub fn persons_table(people: &[PersonView]) -> String {
    let mut t = table(&["person", "name", "role", "role history", "keys"]);
    for p in people {
        let roles = p
            .roles_held
            .iter()
            .map(|r| format!("{} from #{}", r.role, r.from_seq))
            .collect::<Vec<_>>()
            .join("\n");
        let keys = p
            .keys
            .iter()
            .map(|k| match k.revoked_seq {
                Some(seq) => format!(
                    "{} (#{}, revoked #{seq})",
                    &k.public_key[..16],
                    k.enrolled_seq
                ),
                None => format!("{} (#{}, active)", &k.public_key[..16], k.enrolled_seq),
            })
            .collect::<Vec<_>>()
            .join("\n");
        t.add_row(vec![
            p.id.clone(),
            p.name.clone(),
            p.role.clone(),
            roles,
            keys,
        ]);
    }
    t.to_string()
}

/// The verification summary and problem list.
pub fn integrity_report(report: &IntegrityReport) -> String {
    let mut summary = table(&["ledger", "value"]);
    let head = report
        .head
        .map(|h| format!("#{} {} ({})", h.seq, &h.hash.to_hex()[..16], h.record_time))
        .unwrap_or_else(|| "none".into());
    let verdict = if report.intact() {
        "INTACT".to_string()
    } else {
        format!(
            "NOT INTACT: {} problem(s), first at entry {}",
            report.problems.len() as u64 + report.problems_not_listed,
            report
                .first_broken_seq()
                .map_or("-".to_string(), |s| s.to_string())
        )
    };
    let rows = vec![
        ("lab", report.lab_name.clone()),
        (
            "ledger id",
            report.ledger_id.clone().unwrap_or_else(|| "-".into()),
        ),
        ("entries", report.entries.to_string()),
        ("signed entries", report.signed.to_string()),
        ("head", head),
        ("checkpoints checked", report.anchors_checked.to_string()),
        ("result", verdict),
    ];
    for (k, v) in rows {
        summary.add_row(vec![k.to_string(), v]);
    }
    let mut text = summary.to_string();
    if !report.problems.is_empty() {
        text.push('\n');
        text.push_str(&problems_table(&report.problems));
        if report.problems_not_listed > 0 {
            text.push_str(&format!(
                "\n... and {} more problems not listed",
                report.problems_not_listed
            ));
        }
    }
    text
}

fn problems_table(problems: &[Problem]) -> String {
    let mut t = table(&["entry", "problem"]);
    for p in problems {
        t.add_row(vec![
            p.seq().map_or("-".into(), |s| s.to_string()),
            p.to_string(),
        ]);
    }
    t.to_string()
}

/// A recomputed run: replicates, summary and the uncertainty budget of each step.
pub fn recomputed_text(r: &assize_verify::assemble::Recomputed) -> String {
    let c = &r.context;
    let mut text = format!(
        "run {} ({:?}) under method {} v{} [{}], policy {} v{} [{}]\n",
        c.run.id,
        c.run.kind,
        c.method.id,
        c.method.version,
        &c.method_sha256[..12],
        c.policy.id,
        c.policy.version,
        &c.policy_sha256[..12],
    );
    if let Some(std) = &r.standardization {
        text.push_str(&format!(
            "\nstandardization {} used by this assay:\n",
            std.run_id
        ));
        text.push_str(&outcome_text(std));
    }
    text.push('\n');
    text.push_str(&outcome_text(&r.outcome));
    text
}

fn outcome_text(o: &assize_verify::recompute::Outcome) -> String {
    let mut replicates = table(&[
        "replicate",
        "portion (g)",
        "titrant net",
        &format!("value ({})", o.unit),
    ]);
    for v in &o.replicates {
        replicates.add_row(vec![
            v.number.to_string(),
            v.portion_g.to_string(),
            v.titrant_net.to_string(),
            format!("{:.6}", v.value),
        ]);
    }
    let b = &o.budget;
    let mut summary = table(&["summary", "value"]);
    let optional =
        |x: Option<f64>, digits: usize| x.map_or("-".to_string(), |v| format!("{v:.digits$}"));
    let reported = o.reported.map_or("-".to_string(), |r| {
        format!(
            "{} ± {} {} (k = {:.2})",
            r.value, r.expanded_uncertainty, o.unit, b.coverage_factor
        )
    });
    for (name, value) in [
        ("mean", format!("{:.6} {}", o.mean, o.unit)),
        ("standard deviation", optional(o.standard_deviation, 6)),
        ("RSD (%)", optional(o.rsd_percent, 3)),
        (
            "combined standard uncertainty u_c",
            format!("{:.3e}", b.combined_standard_uncertainty),
        ),
        (
            "effective degrees of freedom",
            optional(b.effective_degrees_of_freedom, 0),
        ),
        ("coverage factor k", format!("{:.3}", b.coverage_factor)),
        (
            "expanded uncertainty U",
            format!("{:.3e}", b.expanded_uncertainty),
        ),
        ("reported", reported),
    ] {
        summary.add_row(vec![name.to_string(), value]);
    }
    let mut budget = table(&[
        "input",
        "value",
        "u",
        "relative u",
        "contribution",
        "share (%)",
    ]);
    for t in &b.contributions {
        budget.add_row(vec![
            t.name.to_string(),
            format!("{:.6}", t.value),
            format!("{:.2e}", t.standard_uncertainty),
            format!("{:.2e}", t.relative_uncertainty),
            format!("{:.2e}", t.contribution),
            format!("{:.1}", 100.0 * t.share_of_variance),
        ]);
    }
    let mut text = format!("{replicates}\n{summary}\n{budget}\n");
    for group in &b.cancelled {
        text.push_str(&format!(
            "cancelled: {group} (the same balance appears with opposite exponents)\n"
        ));
    }
    text
}
