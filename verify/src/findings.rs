//! Findings as data: what a validation rule reports, with a stable code, a severity, the
//! entries involved, the policy clause it applied, and what the reviewer should do.
//!
//! Every code the validator can emit is listed once in [`RULES`], with its severity, a short
//! title, the published text or practice it rests on and the reviewer's action. The project's
//! reference page (`FINDINGS.md`) documents the same table, and a test keeps the two in step.
//! Codes never change meaning; a retired rule keeps its code unused.

use assize_ledger::EntryHash;
use serde::Serialize;
use std::fmt;

/// How a finding weighs on release.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Severity {
    /// Looked at in the periodic review of trends; never holds a result.
    Periodic,
    /// The reviewer dispositions it in the exception report.
    Review,
    /// No approval while it stands, short of a signed justification.
    Blocking,
}

impl Severity {
    /// The name used on the command line and in reports.
    pub fn name(self) -> &'static str {
        match self {
            Severity::Periodic => "periodic",
            Severity::Review => "review",
            Severity::Blocking => "blocking",
        }
    }

    /// Parses a name written by a user.
    pub fn parse(text: &str) -> Option<Severity> {
        match text.trim().to_ascii_lowercase().as_str() {
            "periodic" => Some(Severity::Periodic),
            "review" => Some(Severity::Review),
            "blocking" => Some(Severity::Blocking),
            _ => None,
        }
    }
}

impl fmt::Display for Severity {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// One rule the validator applies, as documented.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub struct Rule {
    /// Stable code, e.g. `BAL-01`.
    pub code: &'static str,
    /// How it weighs on release.
    pub severity: Severity,
    /// What it catches, in a few words.
    pub title: &'static str,
    /// The published text or practice it rests on.
    pub basis: &'static str,
    /// What the reviewer should do.
    pub action: &'static str,
}

macro_rules! rules {
    ($($name:ident = $code:literal, $severity:ident, $title:literal, $basis:literal, $action:literal;)*) => {
        /// Every finding code, by the name the code uses.
        #[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
        #[allow(missing_docs)]
        pub enum Code { $($name,)* }

        /// Every rule, in code order.
        pub const RULES: &[Rule] = &[$(Rule {
            code: $code,
            severity: Severity::$severity,
            title: $title,
            basis: $basis,
            action: $action,
        },)*];

        impl Code {
            /// Every code, in the order of [`RULES`].
            pub const ALL: &'static [Code] = &[$(Code::$name,)*];

            /// The documented rule behind the code.
            pub fn rule(self) -> &'static Rule {
                &RULES[self as usize]
            }
        }
    };
}

rules! {
    EntryAltered = "INT-01", Blocking, "entry altered or chain broken",
        "21 CFR 11.10(e); EU GMP Annex 11 §9",
        "Stop: restore the ledger from a verified copy and open an investigation; no result that depends on it can be released.";
    EntriesMissing = "INT-02", Blocking, "entries missing, malformed or out of sequence",
        "21 CFR 11.10(e); ALCOA+ complete, enduring",
        "Stop: find the missing or damaged rows from a verified copy or a checkpoint, and investigate.";
    SignatureProblem = "INT-03", Blocking, "signature invalid or missing where required",
        "21 CFR 11.70, 11.200; EU GMP Annex 11 §14",
        "Treat the entry as unattributable: have the author re-enter the change under their own signature, and investigate how an unsigned entry got in.";
    NotAuthorised = "INT-04", Blocking, "author or key not authorised for the entry",
        "21 CFR 11.10(d), 11.10(g)",
        "Establish who made the entry and with which authority; re-enter it under an authorised person if it stands.";
    ReferenceBroken = "INT-05", Blocking, "entry refers to an unknown or later entry",
        "ALCOA+ original, consistent",
        "Find the entry the reference should name; a reference forward in time means the chain was rebuilt.";
    CheckpointNotExtended = "INT-06", Blocking, "ledger does not extend a signed checkpoint",
        "21 CFR 11.10(c); EU GMP Annex 11 §7",
        "The file was truncated, rolled back or forked after the checkpoint: restore the checkpointed copy and investigate.";
    RecordTimeBack = "INT-07", Blocking, "record time goes backwards",
        "21 CFR 11.10(e) time-stamped audit trail",
        "Check the recording computer's clock and how the entry was written.";
    RecordDefective = "INT-08", Blocking, "lab record fails its own checks",
        "ALCOA+ accurate; 21 CFR 211.194(a)",
        "The entry cannot be used: have the author enter a correction with the intended values and a reason.";
    StatedDiffers = "CALC-01", Blocking, "stated value differs from the recomputed value",
        "21 CFR 211.194(a)(5); ALCOA+ accurate",
        "Compare the worksheet with the raw readings; correct the stated value (with a reason) or find the raw reading that was mis-keyed.";
    ReportedWrong = "CALC-02", Blocking, "reported value or uncertainty does not follow from the data and rounding rules",
        "JCGM 100:2008 §7.2.6; USP General Notices 7.20",
        "Recompute the reported figures from the raw data and correct the reported result with a reason.";
    NotRecomputable = "CALC-03", Blocking, "run cannot be recomputed from its records",
        "21 CFR 211.194(a); ALCOA+ complete",
        "Enter the missing or inconsistent records (or correct them) so that the result follows from raw data alone.";
    OrphanData = "COMP-01", Blocking, "weighing or titration feeds no result and is not invalidated",
        "21 CFR 211.194(a) complete data; FDA Data Integrity Q&A (2018)",
        "Find why the data was left out: link it to its replicate, or invalidate the replicate with its assignable cause.";
    DeterminationCount = "COMP-02", Blocking, "fewer or more determinations than the method requires",
        "method; Ph. Eur. 4.2.2 (at least three titrations)",
        "Complete the run as the method requires, or document why the count differs and invalidate with cause.";
    OosWithoutInvestigation = "OOS-01", Blocking, "out-of-specification result with no investigation",
        "21 CFR 211.192; FDA OOS guidance (2006, rev. 2022)",
        "Open an OOS investigation for the result before anything else is done with the sample.";
    RetestBeforeInvestigation = "OOS-02", Blocking, "sample retested after an OOS result before an investigation was opened",
        "FDA OOS guidance (2006, rev. 2022): no testing into compliance",
        "Open the investigation and decide, under it, whether the retest may stand.";
    NoAssignableCause = "OOS-03", Blocking, "replicate invalidated without an assignable cause",
        "FDA OOS guidance: invalidation only with an assignable laboratory cause",
        "State the cause observed at the bench (a statistical outlier alone is not a cause), or reinstate the replicate.";
    SelfInvalidation = "OOS-04", Blocking, "invalidation not approved by someone other than the analyst who did the work",
        "FDA OOS guidance; 21 CFR 211.192",
        "Have a reviewer or QA approve the invalidation, or reinstate the replicate.";
    BalanceOutOfCalibration = "BAL-01", Blocking, "balance used outside its calibration interval",
        "USP <41>; 21 CFR 211.160(b)(4); ISO/IEC 17025 6.4",
        "Results weighed on it cannot be released as they are: assess the balance's later calibration and the impact on each result.";
    BalanceNotChecked = "BAL-02", Blocking, "no passing routine check of the balance earlier that day",
        "lab policy (routine check each day of use); USP <41>",
        "Assess the next passing check and decide, with QA, whether the weighing stands.";
    BelowMinimumWeight = "BAL-03", Blocking, "net mass below the balance's minimum weight",
        "USP <41> (repeatability, minimum weight) with the policy's safety factor",
        "Repeat the determination with a larger portion or on a balance whose minimum weight allows it.";
    BalanceCheckFailed = "BAL-04", Review, "routine balance check outside tolerance",
        "USP <41> accuracy (0.10 %); lab policy tolerance",
        "Take the balance out of use until it passes; see BAL-05 for the results it may have affected.";
    WeighedBeforeFailedCheck = "BAL-05", Review, "result weighed on a balance that later failed a check",
        "USP <41>; 21 CFR 211.160(b)(4)",
        "Assess whether the fault could have been present when this result was weighed, and record the decision.";
    KeyedDiffersFromCaptured = "CAP-01", Blocking, "keyed reading differs from the captured instrument reading",
        "FDA Data Integrity Q&A (2018): the printout is the original record",
        "The captured reading is the original: correct the keyed value with a reason, and recompute; the message names the likely keying slip to look for.";
    KeyedWhereCaptureExpected = "CAP-02", Review, "hand-keyed reading where the method expects instrument capture",
        "method; ALCOA+ original",
        "Check the keyed reading against the balance printout and note the check.";
    UnstableReading = "CAP-03", Review, "reading taken without the balance's stability indicator",
        "USP <41>; common practice",
        "Judge whether the unstable reading can stand; repeat the determination if not.";
    PortionOffTarget = "CAP-04", Review, "portion outside \"about\" (±10 %) the method's target mass",
        "USP General Notices 8.20 (\"about\" means within 10 %)",
        "Check the calculation used the actual mass and that the method allows the deviation.";
    ReferenceExpired = "MAT-01", Blocking, "reference standard used past its expiry or retest date",
        "21 CFR 211.194(c); ISO/IEC 17025 6.6",
        "The standardization cannot stand: repeat it with an in-date lot, and assess every result that used it.";
    TitrantExpired = "MAT-02", Blocking, "titrant used past its preparation's use-by date",
        "21 CFR 211.194(c); lab policy",
        "Prepare and standardize fresh titrant; assess every result that used the expired one.";
    StandardizationLapsed = "MAT-03", Blocking, "titrant used beyond its standardization validity",
        "lab policy (standardization validity); Ph. Eur. 4.2.2",
        "Re-standardize the titrant and repeat the assay, or document why the old value still holds.";
    StandardizationFailed = "MAT-04", Blocking, "standardization fails its limits (RSD, count or strength)",
        "Ph. Eur. 4.2.2: at least 3 titrations, RSD ≤ 0.2 %, within 10 % of nominal",
        "The titrant's concentration is not established: repeat the standardization; results that used it cannot be released.";
    WrongStandardization = "MAT-05", Blocking, "assay relies on a standardization of another titrant or method",
        "method",
        "Link the assay to the standardization of the titrant actually used.";
    SelfReview = "SOD-01", Blocking, "reviewer or approver did the work under review",
        "21 CFR 211.194(a)(8) second-person review; EU GMP Annex 11 §14",
        "A second person must review and approve; the self-review does not count.";
    ReviewStale = "SOD-02", Blocking, "review or approval made before the last change to what it covers",
        "EU GMP Annex 11 §9; FDA Data Integrity Q&A (2018)",
        "Review the changes made since, and sign again.";
    ApprovedOverFindings = "SOD-03", Review, "approved while blocking findings stood, with a justification",
        "21 CFR 11.50 (meaning of a signature); ISO/IEC 17025 7.8.6",
        "Read the justification; QA confirms or withdraws the approval.";
    BeforeSampleReceipt = "ORD-01", Blocking, "data recorded before the sample was received",
        "ALCOA+ contemporaneous, consistent",
        "Establish the real order of events; a sample cannot be weighed before it arrives.";
    TitrantUsedBeforeStandardization = "ORD-02", Blocking, "titrant used before its standardization was done",
        "Ph. Eur. 4.2.2; ALCOA+ consistent",
        "Establish the real order of events; the assay cannot use a concentration not yet determined.";
    CheckRecordedLate = "ORD-03", Blocking, "routine check recorded after the weighing it should cover",
        "ALCOA+ contemporaneous; lab policy",
        "Establish whether the check was really done before the weighing (printout, logbook); treat it as missing if not.";
    SignOffBeforeData = "ORD-04", Blocking, "sign-off dated before data it covers",
        "21 CFR 11.50, 11.70",
        "A signature cannot cover data that did not exist yet: review and sign again.";
    EventAfterRecord = "ORD-05", Blocking, "observation timed after the entry that records it",
        "ALCOA+ contemporaneous; 21 CFR 11.10(e)",
        "Find which time is wrong (balance clock or entry) and correct it with a reason.";
    SupersededDocument = "ORD-06", Blocking, "run recorded under a method or policy version already superseded",
        "ISO/IEC 17025 8.3 control of documents",
        "Decide under the version in force whether the run stands; correct the run's document references if needed.";
    ReplicateRsd = "REP-01", Review, "replicate RSD above the policy limit",
        "lab policy (replicate RSD)",
        "Look for an assignable cause; repeat or invalidate with cause, never just drop a replicate.";
    ReplicateRange = "REP-02", Review, "replicate range beyond the ISO 5725-6 critical range",
        "ISO 5725-6:1994 §5.2 (critical range f(n)·σr)",
        "Follow ISO 5725-6: investigate, then take further determinations or the median as the standard prescribes.";
    GrubbsOutlier = "REP-03", Review, "Grubbs test flags a replicate as an outlier",
        "ISO 5725-2:1994 §7.3.4",
        "Look for an assignable cause at the bench; a statistical flag alone is not a reason to invalidate.";
    DixonOutlier = "REP-04", Review, "Dixon test flags a replicate as an outlier",
        "Dixon r10 with Rorabacher (1991) critical values",
        "Look for an assignable cause at the bench; a statistical flag alone is not a reason to invalidate.";
    LateEntry = "TIM-01", Review, "entry recorded later than the contemporaneous window after the event",
        "ALCOA+ contemporaneous; lab policy window",
        "Ask the analyst what the entry was copied from and check it against that original.";
    SharedTimestamp = "TIM-02", Review, "many observations carry one time stamp",
        "ALCOA+ contemporaneous",
        "Observations at one instant suggest back-filling: compare with the instrument's own records.";
    CorrectionFlipsConformance = "CHG-01", Review, "a correction changes the result's conformance",
        "EU GMP Annex 11 §9; 21 CFR 58.130(e)",
        "Read the reason critically: a change that turns a failure into a pass needs evidence beyond the reason.";
    CorrectionWithoutReason = "CHG-02", Blocking, "correction without a reason",
        "21 CFR 58.130(e); EU GMP Annex 11 §9",
        "Have the person who made the change record why, in a new correction.";
    IdenticalReplicates = "PAT-01", Review, "replicates with identical raw readings",
        "MHRA GXP Data Integrity Guidance (2018); common practice",
        "Identical readings across independent portions are unlikely: compare with the balance printout.";
    ReadingReused = "PAT-02", Review, "a raw reading reused in another run",
        "MHRA GXP Data Integrity Guidance (2018); common practice",
        "Find the original observation: one weighing cannot belong to two samples.";
    CorrectionRate = "PER-01", Periodic, "corrections, invalidations, late entries or retests above the period's usual rate",
        "EU GMP Annex 11 §9 (audit trail regularly reviewed); PIC/S PI 041-1",
        "Discuss the trend with the analyst, method owner or balance owner, and record the outcome.";
}

impl Code {
    /// The stable code text.
    pub fn text(self) -> &'static str {
        self.rule().code
    }

    /// The severity the rule carries.
    pub fn severity(self) -> Severity {
        self.rule().severity
    }

    /// Finds a code by its text.
    pub fn parse(text: &str) -> Option<Code> {
        let text = text.trim();
        Code::ALL
            .iter()
            .copied()
            .find(|code| code.text().eq_ignore_ascii_case(text))
    }
}

impl fmt::Display for Code {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.text())
    }
}

impl Serialize for Code {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(self.text())
    }
}

/// An entry a finding involves.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize)]
pub struct EntryRef {
    /// Sequence number.
    pub seq: u64,
    /// Entry hash.
    pub hash: EntryHash,
}

/// One thing a rule found.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct Finding {
    /// Stable code.
    pub code: Code,
    /// Severity of the code.
    pub severity: Severity,
    /// One plain sentence about this case.
    pub message: String,
    /// Entries involved, in sequence order.
    pub entries: Vec<EntryRef>,
    /// Id of the run the finding is about, if any.
    pub run: Option<String>,
    /// Id of the sample the finding is about, if any.
    pub sample: Option<String>,
    /// The clause applied: the policy or method version and setting, or the published rule.
    pub clause: String,
    /// What the reviewer should do.
    pub action: &'static str,
}

impl Finding {
    /// A finding of `code` with its message and the clause applied.
    pub fn new(code: Code, message: impl Into<String>, clause: impl Into<String>) -> Finding {
        Finding {
            code,
            severity: code.severity(),
            message: message.into(),
            entries: Vec::new(),
            run: None,
            sample: None,
            clause: clause.into(),
            action: code.rule().action,
        }
    }

    /// Adds the entries involved (kept sorted, without repeats).
    pub fn involving(mut self, entries: impl IntoIterator<Item = EntryRef>) -> Finding {
        self.entries.extend(entries);
        self.entries.sort();
        self.entries.dedup();
        self
    }

    /// Names the run (and its sample) the finding is about.
    pub fn about_run(mut self, run: Option<&str>, sample: Option<&str>) -> Finding {
        self.run = run.map(str::to_string);
        self.sample = sample.map(str::to_string);
        self
    }

    /// Sequence number of the first entry involved (findings sort by it).
    pub fn first_seq(&self) -> u64 {
        self.entries.first().map_or(0, |e| e.seq)
    }
}

/// Sorts findings for display: by first entry, then code, then message.
pub fn sort(findings: &mut [Finding]) {
    findings.sort_by(|a, b| {
        (a.first_seq(), a.code, &a.message).cmp(&(b.first_seq(), b.code, &b.message))
    });
}

/// How many findings of each severity.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize)]
pub struct Tally {
    /// Blocking findings.
    pub blocking: usize,
    /// Findings for the reviewer.
    pub review: usize,
    /// Findings for the periodic review.
    pub periodic: usize,
}

impl Tally {
    /// Counts findings by severity.
    pub fn of(findings: &[Finding]) -> Tally {
        let mut tally = Tally::default();
        for finding in findings {
            match finding.severity {
                Severity::Blocking => tally.blocking += 1,
                Severity::Review => tally.review += 1,
                Severity::Periodic => tally.periodic += 1,
            }
        }
        tally
    }

    /// Whether any finding is at or above `severity`.
    pub fn any_at_or_above(&self, severity: Severity) -> bool {
        match severity {
            Severity::Blocking => self.blocking > 0,
            Severity::Review => self.blocking + self.review > 0,
            Severity::Periodic => self.blocking + self.review + self.periodic > 0,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::collections::HashSet;

    #[test]
    fn codes_are_unique_and_follow_the_table_order() {
        let texts: HashSet<&str> = RULES.iter().map(|r| r.code).collect();
        assert_eq!(texts.len(), RULES.len());
        for (index, code) in Code::ALL.iter().enumerate() {
            assert_eq!(*code as usize, index);
            assert_eq!(Code::parse(code.text()), Some(*code));
            assert_eq!(Code::parse(&code.text().to_lowercase()), Some(*code));
        }
        assert_eq!(Code::parse("NOPE-99"), None);
    }

    #[test]
    fn every_rule_is_documented_in_full() {
        for rule in RULES {
            let (area, number) = rule.code.split_once('-').expect("AREA-NN");
            assert!(
                area.chars().all(|c| c.is_ascii_uppercase()),
                "{}",
                rule.code
            );
            assert!(number.len() == 2 && number.chars().all(|c| c.is_ascii_digit()));
            for text in [rule.title, rule.basis, rule.action] {
                assert!(!text.trim().is_empty(), "{}", rule.code);
            }
            assert!(
                rule.action.ends_with('.'),
                "{}: action is a sentence",
                rule.code
            );
        }
    }

    #[test]
    fn reference_page_lists_every_code_with_its_severity_and_title() {
        let page = include_str!("../../FINDINGS.md");
        for rule in RULES {
            let row = page
                .lines()
                .find(|line| line.starts_with(&format!("| `{}` |", rule.code)))
                .unwrap_or_else(|| panic!("FINDINGS.md has no row for {}", rule.code));
            assert!(row.contains(rule.severity.name()), "{row}");
            assert!(row.contains(rule.title), "{row}");
        }
        let documented = page.lines().filter(|l| l.starts_with("| `")).count();
        assert_eq!(
            documented,
            RULES.len(),
            "FINDINGS.md documents codes that do not exist"
        );
    }

    #[test]
    fn tally_and_thresholds() {
        let findings = vec![
            Finding::new(Code::LateEntry, "late", "policy"),
            Finding::new(Code::EntryAltered, "altered", "chain"),
        ];
        let tally = Tally::of(&findings);
        assert_eq!((tally.blocking, tally.review, tally.periodic), (1, 1, 0));
        assert!(tally.any_at_or_above(Severity::Blocking));
        let only_review = Tally::of(&findings[..1]);
        assert!(!only_review.any_at_or_above(Severity::Blocking));
        assert!(only_review.any_at_or_above(Severity::Review));
        assert!(Severity::Blocking > Severity::Review && Severity::Review > Severity::Periodic);
    }
}
