//! The sections of the dossier page, each a piece of HTML made from one part of the
//! [`Dossier`]: header, findings, result, budget, standardization history, audit trail,
//! sign-off. Every ledger text goes through [`escape`]; every number through [`number`]. The
//! cells a reader (or a test) looks up carry stable ids (`result-mean`, `rep-2-value`,
//! `contribution-0`, `cc-mean`, `cc-point-SEQ`, ...).

use super::{escape, kind_word, maybe, number};
use assize_verify::dossier::{Dossier, Zone};
use assize_verify::explain::{CorrectionStep, SignatureState};
use assize_verify::findings::Finding;
use assize_verify::records::DocumentKind;
use std::fmt::Write;

/// One table row of header cells (`th`) or data cells (`td`), each already HTML.
fn row(cell: &str, cells: &[String]) -> String {
    let mut out = String::from("<tr>");
    for c in cells {
        let _ = write!(out, "<{cell}>{c}</{cell}>");
    }
    out.push_str("</tr>\n");
    out
}

/// A row of the two-column fact tables: a label and an HTML value.
fn fact(label: &str, value: String) -> String {
    format!("<tr><th>{label}</th><td>{value}</td></tr>\n")
}

/// A number cell with an id.
fn numeric(id: &str, value: Option<f64>) -> String {
    format!("<span class=\"num\" id=\"{id}\">{}</span>", maybe(value))
}

/// A unit after a number, escaped.
fn unit_of(unit: Option<&String>) -> String {
    unit.map_or(String::new(), |u| format!(" {}", escape(u)))
}

/// Ledger file, head, run, documents in force.
pub fn header(d: &Dossier) -> String {
    let run = &d.run;
    let mut facts = String::new();
    facts.push_str(&fact("Ledger file", escape(&d.ledger_file)));
    facts.push_str(&fact(
        "Ledger head",
        format!(
            "entry <span id=\"head-seq\">{}</span> <code class=\"hash\">{}</code>",
            d.head_seq,
            escape(&d.head_hash)
        ),
    ));
    facts.push_str(&fact(
        "Chain",
        if d.chain_intact {
            "replays intact".into()
        } else {
            "<strong class=\"alarm\">does not replay intact (see findings)</strong>".into()
        },
    ));
    facts.push_str(&fact(
        "Run",
        format!(
            "{} {}, entry {} <code class=\"hash\">{}</code>",
            kind_word(run.kind),
            escape(&run.id),
            run.seq,
            escape(&run.hash)
        ),
    ));
    facts.push_str(&fact("Bench work started", escape(&run.started_at)));
    if let Some(sample) = &run.sample {
        facts.push_str(&fact("Sample", escape(sample)));
    }
    if let Some(titrant) = &run.titrant {
        facts.push_str(&fact("Titrant", escape(titrant)));
    }
    if let Some(standardization) = &run.standardization {
        facts.push_str(&fact("Standardization used", escape(standardization)));
    }
    facts.push_str(&fact("Analysts", escape(&run.analysts.join(", "))));
    facts.push_str(&fact(
        "Exception report SHA-256",
        format!(
            "<code class=\"hash\">{}</code> (what a sign-off at this head records)",
            escape(&d.exception_report_sha256)
        ),
    ));
    let mut documents = String::new();
    for doc in &d.documents {
        let word = match doc.document {
            DocumentKind::Method => "method",
            DocumentKind::Policy => "policy",
        };
        documents.push_str(&row(
            "td",
            &[
                word.into(),
                escape(&doc.id),
                escape(&doc.version),
                format!("<code class=\"hash\">{}</code>", escape(&doc.sha256)),
                format!("entry {} by {}", doc.adopted_seq, escape(&doc.adopted_by)),
            ],
        ));
    }
    format!(
        "<section id=\"header\">\n<table class=\"facts\">\n{facts}</table>\n\
         <h2>Method and policy in force</h2>\n<table>\n<thead>{}</thead>\n<tbody>\n{documents}\
         </tbody>\n</table>\n</section>\n",
        row(
            "th",
            &[
                "document",
                "id",
                "version",
                "SHA-256 of the text",
                "adopted"
            ]
            .map(String::from)
        )
    )
}

fn entries_of(f: &Finding) -> String {
    f.entries
        .iter()
        .map(|e| e.seq.to_string())
        .collect::<Vec<_>>()
        .join(", ")
}

/// The exception report's findings with what the reviewer does about each.
pub fn findings(d: &Dossier) -> String {
    let tally = format!(
        "<p class=\"tally\">{} blocking, {} for review, {} periodic</p>\n",
        d.tally.blocking, d.tally.review, d.tally.periodic
    );
    if d.findings.is_empty() {
        return format!(
            "<section id=\"findings\">\n<h2>Findings</h2>\n{tally}\
             <p>No finding stands against this run at this head.</p>\n</section>\n"
        );
    }
    let mut rows = String::new();
    for f in &d.findings {
        let severity = f.severity.name();
        let _ = writeln!(
            rows,
            "<tr class=\"sev-{severity}\"><td><strong>{}</strong></td><td>{severity}</td>\
             <td>{}<br><small>{}</small></td><td>{}</td><td>{}</td><td>{}</td></tr>",
            escape(f.code.text()),
            escape(&f.message),
            escape(&f.clause),
            escape(f.run.as_deref().unwrap_or("ledger")),
            entries_of(f),
            escape(f.action)
        );
    }
    format!(
        "<section id=\"findings\">\n<h2>Findings</h2>\n{tally}<table class=\"findings\">\n\
         <thead>{}</thead>\n<tbody>\n{rows}</tbody>\n</table>\n</section>\n",
        row(
            "th",
            &[
                "code",
                "severity",
                "finding (clause applied)",
                "about",
                "entries",
                "what the reviewer does"
            ]
            .map(String::from)
        )
    )
}

/// Each replicate and the result with its expanded uncertainty.
pub fn result(d: &Dossier) -> String {
    let r = &d.result;
    let unit = unit_of(r.unit.as_ref());
    let titrant_unit = r.titrant_unit.as_deref().unwrap_or("g or mL");
    let mut out = String::from("<section id=\"result\">\n<h2>Replicates and result</h2>\n");
    let _ = writeln!(
        out,
        "<p class=\"formula\"><code>{}</code></p>",
        escape(&d.run.formula)
    );
    if let Some(reason) = &r.not_recomputed {
        let _ = writeln!(
            out,
            "<p class=\"alarm\">Cannot recompute: {}</p>",
            escape(reason)
        );
    }
    let mut rows = String::new();
    for line in &r.replicates {
        rows.push_str(&row(
            "td",
            &[
                line.number.to_string(),
                if line.counted { "yes" } else { "no" }.into(),
                escape(line.portion_g.as_deref().unwrap_or("—")),
                escape(line.titrant_net.as_deref().unwrap_or("—")),
                numeric(&format!("rep-{}-value", line.number), line.value),
                escape(line.worked.as_deref().unwrap_or("")),
            ],
        ));
    }
    let _ = write!(
        out,
        "<table class=\"replicates\">\n<thead>{}</thead>\n<tbody>\n{rows}</tbody>\n</table>\n",
        row(
            "th",
            &[
                "replicate".into(),
                "counts".into(),
                "portion (g)".into(),
                format!("titrant ({})", escape(titrant_unit)),
                format!("value{}", unit),
                "worked".into(),
            ]
        )
    );
    let budget = d.budget.as_ref();
    let mut facts = String::new();
    facts.push_str(&fact("Mean", numeric("result-mean", r.mean) + &unit));
    facts.push_str(&fact(
        "Standard deviation s",
        numeric("result-sd", r.standard_deviation) + &unit,
    ));
    facts.push_str(&fact(
        "Relative standard deviation",
        numeric("result-rsd", r.rsd_percent) + " %",
    ));
    facts.push_str(&fact(
        "Combined standard uncertainty u<sub>c</sub>",
        numeric("result-uc", budget.map(|b| b.combined_standard_uncertainty)) + &unit,
    ));
    facts.push_str(&fact(
        "Coverage factor k",
        numeric("result-k", budget.map(|b| b.coverage_factor)) + &coverage_note(d),
    ));
    facts.push_str(&fact(
        "Expanded uncertainty U = k·u<sub>c</sub>",
        numeric("result-expanded", budget.map(|b| b.expanded_uncertainty)) + &unit,
    ));
    let reported = r.reported.map_or("—".into(), |rep| {
        format!(
            "<strong><span id=\"reported-value\">{}</span> ± \
             <span id=\"reported-expanded\">{}</span>{unit}</strong>",
            rep.value, rep.expanded_uncertainty
        )
    });
    facts.push_str(&fact("Result, rounded for reporting", reported));
    facts.push_str(&fact(
        "Reported result as recorded",
        escape(r.as_recorded.as_deref().unwrap_or("none recorded")),
    ));
    if let Some(s) = &r.standardization {
        facts.push_str(&fact(
            "Titrant strength used",
            format!(
                "{} {} (standardization {})",
                numeric("standardization-mean", Some(s.mean)),
                escape(&s.unit),
                escape(&s.run)
            ),
        ));
    }
    let _ = write!(
        out,
        "<table class=\"facts\">\n{facts}</table>\n</section>\n"
    );
    out
}

/// `(95 % coverage, ν_eff = 12.3)` or `(fixed)`.
fn coverage_note(d: &Dossier) -> String {
    let Some(b) = &d.budget else {
        return String::new();
    };
    let dof = b.effective_degrees_of_freedom.map_or("∞".into(), number);
    match b.coverage_probability {
        Some(p) => format!(
            " (coverage {} %, ν<sub>eff</sub> = {dof})",
            number(p * 100.0)
        ),
        None => format!(" (fixed by the policy; ν<sub>eff</sub> = {dof})"),
    }
}

/// The budget: the bar chart and every line with its numbers.
pub fn budget(d: &Dossier, chart: Option<String>) -> String {
    let mut out = String::from("<section id=\"budget\">\n<h2>Uncertainty budget</h2>\n");
    let Some(b) = &d.budget else {
        out.push_str("<p>No budget: the run cannot be recomputed.</p>\n</section>\n");
        return out;
    };
    let unit = unit_of(d.result.unit.as_ref());
    if let Some(svg) = chart {
        let _ = writeln!(
            out,
            "<figure>{svg}<figcaption>Contribution of each input to the combined standard \
             uncertainty, |c<sub>i</sub>|·u(x<sub>i</sub>){unit}, largest first.</figcaption></figure>"
        );
    }
    let mut rows = String::new();
    for (i, c) in b.contributions.iter().enumerate() {
        rows.push_str(&row(
            "td",
            &[
                escape(&c.name),
                number(c.value),
                number(c.standard_uncertainty),
                number(c.relative_uncertainty),
                number(c.exponent),
                numeric(&format!("contribution-{i}"), Some(c.contribution)),
                format!("{} %", number(c.share_of_variance * 100.0)),
                c.degrees_of_freedom.map_or("∞".into(), number),
            ],
        ));
    }
    let _ = write!(
        out,
        "<table class=\"budget\">\n<thead>{}</thead>\n<tbody>\n{rows}</tbody>\n</table>\n",
        row(
            "th",
            &[
                "input".into(),
                "value x".into(),
                "u(x)".into(),
                "u(x)/|x|".into(),
                "exponent".into(),
                format!("contribution{unit}"),
                "share of u<sub>c</sub>²".into(),
                "ν".into(),
            ]
        )
    );
    if !b.cancelled.is_empty() {
        let _ = writeln!(
            out,
            "<p>Cancelled (fully correlated terms whose exponents add up to zero): {}.</p>",
            escape(&b.cancelled.join(", "))
        );
    }
    out.push_str("</section>\n");
    out
}

fn zone_word(zone: Option<Zone>) -> &'static str {
    match zone {
        None => "—",
        Some(Zone::Within2s) => "within 2s",
        Some(Zone::Beyond2s) => "beyond 2s",
        Some(Zone::Beyond3s) => "beyond 3s",
    }
}

/// The titrant's control chart with its points and limits, then the replicate scatter.
pub fn history(d: &Dossier, control: Option<String>, scatter: Option<String>) -> String {
    let c = &d.control_chart;
    let unit = unit_of(c.unit.as_ref());
    let reach = match c.history {
        assize_verify::dossier::History::UpToRun => "up to this run",
        assize_verify::dossier::History::ToHead => "up to the ledger head",
    };
    let mut out = format!(
        "<section id=\"charts\">\n<h2>Standardizations of titrant {}</h2>\n\
         <p>Every standardization of the titrant recorded {reach} (entry {}), in ledger order, \
         at its recomputed mean.</p>\n",
        escape(&c.titrant),
        c.up_to_seq
    );
    match control {
        Some(svg) => {
            let _ = writeln!(
                out,
                "<figure>{svg}<figcaption>Control chart: each standardization's mean{unit}; the \
                 line of their mean and the lines at ±2s and ±3s. The marked point is this run \
                 or the standardization it used.</figcaption></figure>"
            );
        }
        None => out.push_str("<p>No standardization of this titrant recomputes.</p>\n"),
    }
    let mut rows = String::new();
    for (i, p) in c.points.iter().enumerate() {
        rows.push_str(&row(
            "td",
            &[
                (i + 1).to_string(),
                escape(&p.run) + if p.this_run { " (this run's)" } else { "" },
                escape(&p.started_at),
                p.seq.to_string(),
                numeric(&format!("cc-point-{}", p.seq), Some(p.value)),
                zone_word(p.zone).into(),
            ],
        ));
    }
    let _ = write!(
        out,
        "<table>\n<thead>{}</thead>\n<tbody>\n{rows}</tbody>\n</table>\n",
        row(
            "th",
            &[
                "#".into(),
                "run".into(),
                "started".into(),
                "entry".into(),
                format!("mean{unit}"),
                "against the limits".into(),
            ]
        )
    );
    match &c.limits {
        Some(l) => {
            let mut facts = fact("Points", l.n.to_string());
            facts.push_str(&fact("Mean", numeric("cc-mean", Some(l.mean)) + &unit));
            facts.push_str(&fact(
                "Standard deviation s",
                numeric("cc-sd", Some(l.standard_deviation)) + &unit,
            ));
            facts.push_str(&fact(
                "Mean ± 2s",
                format!(
                    "{} to {}",
                    numeric("cc-lower-2s", Some(l.lower_2s)),
                    numeric("cc-upper-2s", Some(l.upper_2s))
                ),
            ));
            facts.push_str(&fact(
                "Mean ± 3s",
                format!(
                    "{} to {}",
                    numeric("cc-lower-3s", Some(l.lower_3s)),
                    numeric("cc-upper-3s", Some(l.upper_3s))
                ),
            ));
            let _ = writeln!(out, "<table class=\"facts\">\n{facts}</table>");
        }
        None => out.push_str("<p>Limits need two points or more.</p>\n"),
    }
    for left in &c.left_out {
        let _ = writeln!(
            out,
            "<p>Not plotted: {} (entry {}): {}</p>",
            escape(&left.run),
            left.seq,
            escape(&left.reason)
        );
    }
    out.push_str("<h2>Replicate scatter</h2>\n");
    match scatter {
        Some(svg) => {
            let _ = writeln!(
                out,
                "<figure>{svg}<figcaption>Each counted replicate's value{} and their \
                 mean.</figcaption></figure>",
                unit_of(d.replicate_chart.unit.as_ref())
            );
        }
        None => out.push_str("<p>No replicate value to plot.</p>\n"),
    }
    out.push_str("</section>\n");
    out
}

fn signature_word(state: &SignatureState) -> &'static str {
    match state {
        SignatureState::Verified => "verified",
        SignatureState::Unsigned => "unsigned",
        SignatureState::Broken => "BROKEN",
        SignatureState::NotTheAuthorsKey => "not the author's key",
    }
}

fn correction_row(c: &CorrectionStep) -> String {
    let mut changes = String::new();
    for change in &c.changes {
        let _ = write!(
            changes,
            "<li><code>{}</code>: {} → {}</li>",
            escape(&change.field),
            escape(&change.old),
            escape(&change.new)
        );
    }
    let state = if c.signed {
        "signed"
    } else {
        "<strong class=\"alarm\">unsigned, not in force</strong>"
    };
    format!(
        "<tr class=\"correction\"><td>{}</td><td colspan=\"6\">corrected by {} at {} ({state}); \
         reason: “{}”<ul>{changes}</ul></td></tr>\n",
        c.seq,
        escape(&c.author),
        escape(&c.recorded_at),
        escape(&c.reason)
    )
}

/// Every entry involved: who, when, signature, what it says, and its corrections.
pub fn audit_trail(d: &Dossier) -> String {
    let mut rows = String::new();
    for line in &d.audit_trail {
        let e = &line.entry;
        let signature = signature_word(&e.signature);
        let class = if e.signature == SignatureState::Verified {
            ""
        } else {
            " class=\"alarm\""
        };
        let _ = writeln!(
            rows,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td{class}>{signature}</td>\
             <td>{}</td></tr>",
            e.seq,
            escape(&e.kind),
            escape(&line.context),
            escape(&e.author),
            escape(&e.recorded_at),
            escape(&e.says)
        );
        for c in &e.corrections {
            rows.push_str(&correction_row(c));
        }
    }
    format!(
        "<section id=\"audit\">\n<h2>Audit trail</h2>\n<table class=\"audit\">\n<thead>{}</thead>\n\
         <tbody>\n{rows}</tbody>\n</table>\n</section>\n",
        row(
            "th",
            &[
                "entry",
                "kind",
                "where",
                "author",
                "recorded (UTC)",
                "signature",
                "what it says now"
            ]
            .map(String::from)
        )
    )
}

/// The sign-offs given, or lines to sign on paper.
pub fn sign_off(d: &Dossier) -> String {
    let mut out = String::from("<section id=\"sign-off\">\n<h2>Sign-off</h2>\n");
    if d.sign_offs.is_empty() {
        out.push_str(
            "<p>No sign-off is recorded for this run or its result at this head. \
             To sign on paper:</p>\n<div class=\"paper\">\n",
        );
        for meaning in ["Reviewed", "Approved"] {
            let _ = writeln!(
                out,
                "<div class=\"paper-block\"><h3>{meaning} by</h3>\
                 <p><span class=\"label\">Name</span><span class=\"blank\"></span></p>\
                 <p><span class=\"label\">Signature</span><span class=\"blank\"></span></p>\
                 <p><span class=\"label\">Date</span><span class=\"blank\"></span></p>\
                 <p><span class=\"label\">Comment</span><span class=\"blank\"></span></p></div>"
            );
        }
        out.push_str("</div>\n</section>\n");
        return out;
    }
    let mut rows = String::new();
    for s in &d.sign_offs {
        rows.push_str(&row(
            "td",
            &[
                s.entry.seq.to_string(),
                escape(&s.signer),
                escape(&s.meaning),
                escape(&s.recorded),
                s.based_on_seq.to_string(),
                escape(&s.comment),
                escape(if s.justification.is_empty() {
                    "—"
                } else {
                    &s.justification
                }),
            ],
        ));
    }
    let _ = write!(
        out,
        "<table>\n<thead>{}</thead>\n<tbody>\n{rows}</tbody>\n</table>\n</section>\n",
        row(
            "th",
            &[
                "entry",
                "who",
                "meaning",
                "when (UTC)",
                "head seen",
                "comment",
                "justification"
            ]
            .map(String::from)
        )
    );
    out
}
