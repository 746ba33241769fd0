//! Shows a capture plan: the table of keyed readings beside the printed ones with the likely
//! keying slip of each difference, the lines and weighings left unpaired, and what was
//! recorded; the same as a JSON view for scripts.
//!
//! Nothing here pairs or judges; the plan comes whole from `assize_verify::capture_import`.

use crate::render::EntryView;
use assize_ledger::Entry;
use assize_verify::capture_import::{CapturePlan, PairedReading, Pairing};
use assize_verify::printout::PrintedReading;
use assize_verify::records::Portion;
use comfy_table::presets::UTF8_FULL_CONDENSED;
use comfy_table::Table;
use serde::Serialize;

/// What `assize capture` shows, as scripts read it.
#[derive(Serialize)]
pub struct CaptureView {
    run: String,
    dry_run: bool,
    printed_readings: usize,
    tolerance_seconds: u32,
    clause: String,
    pairings: Vec<PairingView>,
    unpaired_lines: Vec<LineView>,
    unpaired_weighings: Vec<UnpairedView>,
    recorded: Vec<EntryView>,
    #[serde(skip)]
    recorded_seqs: Vec<u64>,
    #[serde(skip)]
    signed_by: Option<String>,
    #[serde(skip)]
    readings_differing: usize,
    #[serde(skip)]
    balances_differing: usize,
}

#[derive(Serialize)]
struct PairingView {
    keyed_entry: u64,
    replicate: u32,
    portion: Portion,
    keyed_balance: String,
    printed_balance: String,
    balance_differs: bool,
    readings: Vec<ReadingView>,
}

#[derive(Serialize)]
struct ReadingView {
    reading: &'static str,
    keyed: String,
    keyed_at: String,
    printed: String,
    printed_at: String,
    printed_stable: bool,
    line: usize,
    slip: Option<SlipView>,
}

#[derive(Serialize)]
struct SlipView {
    class: &'static str,
    evidence: String,
}

#[derive(Serialize)]
struct LineView {
    line: usize,
    at: String,
    balance: String,
    reading: String,
    stable: bool,
}

#[derive(Serialize)]
struct UnpairedView {
    keyed_entry: u64,
    replicate: u32,
    portion: Portion,
    reason: String,
}

impl CaptureView {
    /// The view of a plan, of the printout it came from, and of the entries recorded (none
    /// for a dry run).
    pub fn of(
        plan: &CapturePlan,
        printout: &[PrintedReading],
        recorded: &[Entry],
        dry_run: bool,
    ) -> CaptureView {
        CaptureView {
            run: plan.run_id.clone(),
            dry_run,
            printed_readings: printout.len(),
            tolerance_seconds: plan.tolerance_seconds,
            clause: plan.clause.clone(),
            pairings: plan.pairings.iter().map(pairing_view).collect(),
            unpaired_lines: plan.unpaired_lines.iter().map(line_view).collect(),
            unpaired_weighings: plan
                .unpaired_weighings
                .iter()
                .map(|u| UnpairedView {
                    keyed_entry: u.keyed_seq,
                    replicate: u.replicate,
                    portion: u.portion,
                    reason: u.reason.to_string(),
                })
                .collect(),
            recorded: recorded.iter().map(EntryView::of).collect(),
            recorded_seqs: recorded.iter().map(|e| e.seq).collect(),
            signed_by: recorded.first().map(|e| e.author.clone()),
            readings_differing: plan.readings_differing(),
            balances_differing: plan.balances_differing(),
        }
    }

    /// The plan as people read it.
    pub fn text(&self) -> String {
        let mut out = vec![format!(
            "run {}: {} printed readings; a printed reading pairs with a keyed one within {} s ({})",
            self.run, self.printed_readings, self.tolerance_seconds, self.clause
        )];
        if !self.pairings.is_empty() {
            out.push(self.pairings_table());
        }
        let moved: Vec<String> = self
            .pairings
            .iter()
            .filter(|p| p.balance_differs)
            .map(|p| {
                format!(
                    "  entry {} (replicate {}, {}): keyed on balance {}, printed by balance {}: wrong balance",
                    p.keyed_entry,
                    p.replicate,
                    p.portion.words(),
                    p.keyed_balance,
                    p.printed_balance
                )
            })
            .collect();
        section(
            &mut out,
            "weighings keyed on another balance than printed:",
            moved,
        );
        let lines = self
            .unpaired_lines
            .iter()
            .map(|l| {
                let flag = if l.stable { "S" } else { "U" };
                format!(
                    "  line {}: {}  {}  {}  {flag}",
                    l.line, l.at, l.balance, l.reading
                )
            })
            .collect();
        section(
            &mut out,
            "printed lines paired with no keyed reading:",
            lines,
        );
        let weighings = self
            .unpaired_weighings
            .iter()
            .map(|u| {
                format!(
                    "  entry {} (replicate {}, {}): {}",
                    u.keyed_entry,
                    u.replicate,
                    u.portion.words(),
                    u.reason
                )
            })
            .collect();
        section(
            &mut out,
            "keyed weighings left without a captured twin:",
            weighings,
        );
        out.push(self.outcome());
        out.join("\n")
    }

    /// One row per keyed reading.
    fn pairings_table(&self) -> String {
        let mut t = Table::new();
        t.load_style(UTF8_FULL_CONDENSED).set_header([
            "entry",
            "replicate",
            "portion",
            "reading",
            "keyed",
            "keyed at",
            "printed",
            "printed at",
            "line",
            "compared",
        ]);
        for p in &self.pairings {
            for r in &p.readings {
                let flag = if r.printed_stable { "S" } else { "U" };
                t.add_row(vec![
                    p.keyed_entry.to_string(),
                    p.replicate.to_string(),
                    p.portion.words().to_string(),
                    r.reading.to_string(),
                    r.keyed.clone(),
                    r.keyed_at.clone(),
                    format!("{} {flag}", r.printed),
                    r.printed_at.clone(),
                    r.line.to_string(),
                    r.slip
                        .as_ref()
                        .map_or_else(|| "agrees".to_string(), |s| s.evidence.clone()),
                ]);
            }
        }
        t.to_string()
    }

    /// What was (or would be) recorded, and where the differences will show.
    fn outcome(&self) -> String {
        let count = self.pairings.len();
        let weighings = if count == 1 { "weighing" } else { "weighings" };
        let mut text = match (self.dry_run, self.recorded_seqs.as_slice()) {
            (true, _) => format!(
                "dry run: {count} captured {weighings} of run {} would be recorded; nothing was written",
                self.run
            ),
            (false, []) => "nothing was recorded".to_string(),
            (false, seqs) => format!(
                "{} recorded: {count} captured {weighings} of run {}, signed by {}",
                span(seqs),
                self.run,
                self.signed_by.as_deref().unwrap_or("nobody")
            ),
        };
        let mut differences = Vec::new();
        if self.readings_differing > 0 {
            differences.push(counted(
                self.readings_differing,
                "keyed reading differs from its printed line",
                "keyed readings differ from their printed lines",
            ));
        }
        if self.balances_differing > 0 {
            differences.push(counted(
                self.balances_differing,
                "weighing was keyed on another balance than printed",
                "weighings were keyed on another balance than printed",
            ));
        }
        if !differences.is_empty() && count > 0 {
            let when = if self.dry_run {
                " once the captured weighings are recorded"
            } else {
                ""
            };
            text.push_str(&format!(
                "\n{}: `assize replay --run {}` reports each as CAP-01{when}",
                differences.join("; "),
                self.run
            ));
        }
        text
    }
}

fn pairing_view(p: &Pairing) -> PairingView {
    PairingView {
        keyed_entry: p.keyed_seq,
        replicate: p.replicate,
        portion: p.portion,
        keyed_balance: p.keyed_balance_id.clone(),
        printed_balance: p.printed_balance_id.clone(),
        balance_differs: p.balance_differs(),
        readings: p.readings.iter().map(reading_view).collect(),
    }
}

fn reading_view(r: &PairedReading) -> ReadingView {
    ReadingView {
        reading: r.which.word(),
        keyed: r.keyed.to_string(),
        keyed_at: r.keyed_at.to_string(),
        printed: r.printed.reading.to_string(),
        printed_at: r.printed.at.to_string(),
        printed_stable: r.printed.stable,
        line: r.printed.line,
        slip: r.slip.as_ref().map(|s| SlipView {
            class: s.class(),
            evidence: s.describe(r.keyed.unit.dimension()),
        }),
    }
}

fn line_view(l: &PrintedReading) -> LineView {
    LineView {
        line: l.line,
        at: l.at.to_string(),
        balance: l.balance_id.clone(),
        reading: l.reading.to_string(),
        stable: l.stable,
    }
}

/// `1 thing` or `3 things`.
fn counted(n: usize, one: &str, many: &str) -> String {
    if n == 1 {
        format!("1 {one}")
    } else {
        format!("{n} {many}")
    }
}

/// A heading and its indented lines, when there are any.
fn section(out: &mut Vec<String>, heading: &str, lines: Vec<String>) {
    if lines.is_empty() {
        return;
    }
    out.push(heading.to_string());
    out.extend(lines);
}

/// `entry 12` or `entries 12-17` (appended in one transaction, so consecutive).
fn span(seqs: &[u64]) -> String {
    match seqs {
        [one] => format!("entry {one}"),
        [first, .., last] => format!("entries {first}-{last}"),
        [] => "no entry".to_string(),
    }
}
