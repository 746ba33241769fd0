//! Pairs a balance printout with the keyed weighings of one run and drafts the captured twin
//! of each weighing it pairs, for one all-or-nothing append.
//!
//! This module owns the pairing of whole weighings (both readings on one printed balance), the
//! import plan shown before anything is written, and the refusals of an import. It reads the
//! ledger through [`Catalog`] and writes it only through [`Ledger::append_batch`]; it never
//! reads files and never prints. The printout's own format and parser are in
//! [`crate::printout`]; the matching of one reading and the slip classes in [`crate::slips`].
//!
//! # Pairing
//!
//! The run is named by the person importing: a printout belongs to the run they say, so a
//! printout of another day pairs with nothing instead of quietly pairing with someone else's
//! run. Each keyed weighing of the run (its body in force, signed corrections applied) is
//! paired reading by reading with [`match_keyed`]: the keyed balance's printed line nearest in
//! time within the tolerance of the run's policy (`records.capture_pairing_seconds`, 120 s
//! when the policy does not say), a line showing exactly the keyed reading preferred to a
//! nearer one that does not. When the keyed balance printed nothing near those times but
//! another balance printed exactly a keyed reading, the weighing pairs with that balance's
//! lines (its other reading with that balance's nearest line): the twin names the printed
//! balance, and the CAP-01 rule names the keyed one a wrong balance.
//!
//! A weighing pairs only when both readings pair with two different lines of one balance and
//! the printed readings make a valid weighing in the keyed mode ([`LabRecord::check`]); a
//! weighing that shares its replicate and portion with another keyed weighing is not paired
//! either, since a captured twin is known by its replicate and portion alone. Anything not
//! paired is returned with the reason. One line may serve two weighings: in a chain of
//! weighings by difference, one displayed reading may end one portion and start the next.
//!
//! Each paired weighing gets one captured [`Weighing`]: the keyed one's run, replicate, portion
//! and mode; the printed balance, readings and times; `source: Captured`; stable only when
//! both lines carry `S`.
//!
//! # Refusals
//!
//! The whole import is refused, and nothing appended, when the run is unknown, when a line
//! names a balance id that no balance record of the ledger carries, when a weighing the
//! printout pairs with already has a captured twin (importing the same printout twice), or
//! when nothing pairs at all. The catalog is read before the append's transaction, as
//! [`crate::intake::record`] reads it; two imports of one printout at the same moment could
//! both pass the duplicate check.

use crate::catalog::{Catalog, CatalogEntry, LabBody};
use crate::documents::{LabPolicy, DEFAULT_CAPTURE_PAIRING_SECONDS};
use crate::printout::PrintedReading;
use crate::quantity::Reading;
use crate::records::{Balance, LabRecord, Portion, Run, Source, Weighing};
use crate::slips::{differ_in_value, match_keyed, Match, Slip, TimedReading};
use assize_ledger::{Draft, Entry, EntryHash, Ledger, LedgerError, Record, Signer, Timestamp};
use std::collections::{BTreeSet, HashMap};
use std::fmt;

/// Which reading of a weighing.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Which {
    /// The first reading (the vessel before delivering, or the tare).
    First,
    /// The second reading.
    Second,
}

impl Which {
    /// `first` or `second`.
    pub fn word(self) -> &'static str {
        match self {
            Which::First => "first",
            Which::Second => "second",
        }
    }
}

/// One keyed reading and the printed line it paired with.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct PairedReading {
    /// First or second.
    pub which: Which,
    /// The reading as keyed.
    pub keyed: Reading,
    /// When it was keyed as taken.
    pub keyed_at: Timestamp,
    /// The printed line.
    pub printed: PrintedReading,
    /// The likely keying slip when the keyed reading says something other than the printed
    /// one (see [`differ_in_value`]); `None` when they agree.
    pub slip: Option<Slip>,
}

/// A keyed weighing paired with its printed lines, and the captured twin drafted from them.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Pairing {
    /// Sequence number of the keyed weighing.
    pub keyed_seq: u64,
    /// Its entry hash.
    pub keyed_hash: EntryHash,
    /// The balance id the keyed weighing names.
    pub keyed_balance_id: String,
    /// The balance id the printout names for both readings.
    pub printed_balance_id: String,
    /// Replicate number.
    pub replicate: u32,
    /// What was weighed.
    pub portion: Portion,
    /// The first and the second reading.
    pub readings: [PairedReading; 2],
    /// The captured weighing to record.
    pub captured: Weighing,
}

impl Pairing {
    /// Whether the printout names another balance than the keyed weighing.
    pub fn balance_differs(&self) -> bool {
        self.keyed_balance_id != self.printed_balance_id
    }

    /// How many of the two readings differ from their printed line.
    pub fn readings_differing(&self) -> usize {
        self.readings.iter().filter(|r| r.slip.is_some()).count()
    }
}

/// Why a keyed weighing got no captured twin.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Unpaired {
    /// No line of the balance within the tolerance, and no other balance printed the reading.
    NoLine {
        /// The reading.
        which: Which,
        /// The balance looked at.
        balance_id: String,
        /// The keyed time.
        at: Timestamp,
        /// The tolerance, seconds either side.
        tolerance_seconds: u32,
    },
    /// The two readings pair with lines of two different balances.
    AcrossBalances {
        /// Balance of the first reading's line.
        first: String,
        /// Balance of the second reading's line.
        second: String,
    },
    /// Both readings pair with the same line.
    OneLine {
        /// The line (from 1).
        line: usize,
    },
    /// Other keyed weighings share the replicate and portion, so a twin could not tell them
    /// apart.
    SharedSlot {
        /// Sequence numbers of the other keyed weighings.
        others: Vec<u64>,
    },
    /// The printed readings do not make a weighing in the keyed mode.
    NotAWeighing {
        /// Why, as the weighing's own check says.
        reason: String,
    },
}

impl fmt::Display for Unpaired {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Unpaired::NoLine {
                which,
                balance_id,
                at,
                tolerance_seconds,
            } => write!(
                f,
                "{} reading: no printed line of {balance_id} within {tolerance_seconds} s of {at}",
                which.word()
            ),
            Unpaired::AcrossBalances { first, second } => write!(
                f,
                "the first reading pairs with a line of {first}, the second with a line of {second}"
            ),
            Unpaired::OneLine { line } => {
                write!(f, "both readings pair with the same line {line}")
            }
            Unpaired::SharedSlot { others } => write!(
                f,
                "entries {} are keyed weighings of the same replicate and portion; a captured twin cannot tell them apart",
                list(others)
            ),
            Unpaired::NotAWeighing { reason } => {
                write!(f, "the printed readings do not make this weighing: {reason}")
            }
        }
    }
}

/// A keyed weighing left without a captured twin.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct UnpairedWeighing {
    /// Sequence number of the keyed weighing.
    pub keyed_seq: u64,
    /// Replicate number.
    pub replicate: u32,
    /// What was weighed.
    pub portion: Portion,
    /// Why it was not paired.
    pub reason: Unpaired,
}

/// What an import of one printout for one run would record, and what it leaves aside.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct CapturePlan {
    /// Run id.
    pub run_id: String,
    /// Run entry.
    pub run: EntryHash,
    /// Seconds either side within which a printed reading pairs with a keyed one.
    pub tolerance_seconds: u32,
    /// Where the tolerance comes from (`QAL-POL-001 v4: records.capture_pairing_seconds = 120`).
    pub clause: String,
    /// Paired keyed weighings, in sequence order, each with its captured twin.
    pub pairings: Vec<Pairing>,
    /// Keyed weighings of the run left without a twin, in sequence order.
    pub unpaired_weighings: Vec<UnpairedWeighing>,
    /// Printed lines no pairing uses, in printout order.
    pub unpaired_lines: Vec<PrintedReading>,
}

impl CapturePlan {
    /// How many keyed readings differ from their printed line.
    pub fn readings_differing(&self) -> usize {
        self.pairings.iter().map(Pairing::readings_differing).sum()
    }

    /// How many paired weighings name another balance than the printout.
    pub fn balances_differing(&self) -> usize {
        self.pairings.iter().filter(|p| p.balance_differs()).count()
    }

    /// The captured weighings as drafts authored by `author`, in the order of the pairings.
    pub fn drafts(&self, author: &str) -> Result<Vec<Draft>, LedgerError> {
        self.pairings
            .iter()
            .map(|p| Draft::of_record(author, &p.captured))
            .collect()
    }
}

/// A keyed weighing that already has a captured twin.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct AlreadyCaptured {
    /// Sequence number of the keyed weighing.
    pub keyed_seq: u64,
    /// Replicate number.
    pub replicate: u32,
    /// What was weighed.
    pub portion: Portion,
    /// Sequence numbers of its captured twins already recorded.
    pub captured_seqs: Vec<u64>,
}

/// Why an import was refused as a whole; nothing was appended.
#[derive(Debug)]
pub enum CaptureError {
    /// The ledger has no run with this id.
    UnknownRun {
        /// The id given.
        run_id: String,
    },
    /// A line names a balance id no balance record carries.
    UnknownBalance {
        /// The first such line (from 1).
        line: usize,
        /// The id it names.
        balance_id: String,
        /// The balance ids the ledger knows, sorted.
        known: Vec<String>,
    },
    /// Weighings the printout pairs with already have captured twins.
    AlreadyCaptured {
        /// Run id.
        run_id: String,
        /// Each such weighing with its twins.
        weighings: Vec<AlreadyCaptured>,
    },
    /// No keyed weighing of the run pairs with the printout.
    NothingPaired {
        /// Run id.
        run_id: String,
        /// Keyed weighings of the run.
        keyed_weighings: usize,
        /// Readings in the printout.
        lines: usize,
    },
    /// The ledger could not be read or refused the append.
    Ledger(LedgerError),
}

impl From<LedgerError> for CaptureError {
    fn from(e: LedgerError) -> Self {
        CaptureError::Ledger(e)
    }
}

impl fmt::Display for CaptureError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            CaptureError::UnknownRun { run_id } => write!(f, "the ledger has no run {run_id:?}"),
            CaptureError::UnknownBalance {
                line,
                balance_id,
                known,
            } => {
                let known = if known.is_empty() {
                    "none".to_string()
                } else {
                    known.join(", ")
                };
                write!(
                    f,
                    "line {line} names balance {balance_id:?}, which no balance record of the ledger carries (known: {known})"
                )
            }
            CaptureError::AlreadyCaptured { run_id, weighings } => {
                let each: Vec<String> = weighings
                    .iter()
                    .map(|w| {
                        format!(
                            "entry {} (replicate {}, {}) has captured twin {}",
                            w.keyed_seq,
                            w.replicate,
                            w.portion.words(),
                            list(&w.captured_seqs)
                        )
                    })
                    .collect();
                write!(
                    f,
                    "run {run_id} already holds captured readings for what this printout pairs with: {}",
                    each.join("; ")
                )
            }
            CaptureError::NothingPaired {
                run_id,
                keyed_weighings: 0,
                lines,
            } => write!(
                f,
                "run {run_id} has no keyed weighing for the {lines} printed readings to pair with"
            ),
            CaptureError::NothingPaired {
                run_id,
                keyed_weighings,
                lines,
            } => write!(
                f,
                "none of the {keyed_weighings} keyed weighings of run {run_id} pairs with the {lines} printed readings"
            ),
            CaptureError::Ledger(e) => e.fmt(f),
        }
    }
}

impl std::error::Error for CaptureError {}

/// Works out what importing `printout` for run `run_id` would record; refuses an unknown run,
/// an unknown balance id and weighings already captured.
pub fn plan(
    catalog: &Catalog,
    printout: &[PrintedReading],
    run_id: &str,
) -> Result<CapturePlan, CaptureError> {
    let run = catalog
        .find_id(Run::KIND, run_id)
        .ok_or_else(|| CaptureError::UnknownRun {
            run_id: run_id.to_string(),
        })?;
    let balances = Balances::of(catalog);
    balances.know_every_line(printout)?;
    let (tolerance_seconds, clause) = tolerance(catalog, &run);
    let keyed = weighings_of(catalog, &run, Source::Keyed);
    let printed: Vec<TimedReading> = printout.iter().map(TimedReading::from).collect();
    let pairer = Pairer {
        printout,
        printed: &printed,
        tolerance_seconds,
    };
    let (pairings, unpaired_weighings) = pairer.pair_each(&keyed, &balances);
    refuse_already_captured(catalog, &run, run_id, &pairings)?;
    let unpaired_lines = lines_left_over(printout, &pairings);
    Ok(CapturePlan {
        run_id: run_id.to_string(),
        run,
        tolerance_seconds,
        clause,
        pairings,
        unpaired_weighings,
        unpaired_lines,
    })
}

/// Plans the import against the ledger as it stands and appends every captured weighing,
/// signed by `signer`, in one transaction: all of them or none. Refused
/// ([`LedgerError::HeadMoved`]) when someone appended while the plan was made, since the
/// plan's check that no weighing is captured yet may no longer hold.
pub fn record(
    ledger: &mut Ledger,
    signer: &Signer,
    printout: &[PrintedReading],
    run_id: &str,
) -> Result<(CapturePlan, Vec<Entry>), CaptureError> {
    // The head before the read: if anything is appended after it, the batch is refused.
    let planned_at = ledger.head()?;
    let catalog = Catalog::load(ledger.store())?;
    let plan = plan(&catalog, printout, run_id)?;
    if plan.pairings.is_empty() {
        return Err(CaptureError::NothingPaired {
            run_id: run_id.to_string(),
            keyed_weighings: plan.unpaired_weighings.len(),
            lines: printout.len(),
        });
    }
    let drafts = plan.drafts(signer.person())?;
    let entries =
        ledger.append_batch_after(planned_at.as_ref(), drafts.len(), Some(signer), |i, _| {
            Ok(drafts[i].clone())
        })?;
    Ok((plan, entries))
}

/// The printed lines no pairing uses, in printout order.
fn lines_left_over(printout: &[PrintedReading], pairings: &[Pairing]) -> Vec<PrintedReading> {
    let used: BTreeSet<usize> = pairings
        .iter()
        .flat_map(|p| p.readings.iter().map(|r| r.printed.line))
        .collect();
    printout
        .iter()
        .filter(|line| !used.contains(&line.line))
        .cloned()
        .collect()
}

/// Balance ids and entry hashes, both ways, from the balance records in force.
struct Balances {
    by_id: HashMap<String, EntryHash>,
    by_hash: HashMap<EntryHash, String>,
}

impl Balances {
    fn of(catalog: &Catalog) -> Balances {
        let mut balances = Balances {
            by_id: HashMap::new(),
            by_hash: HashMap::new(),
        };
        for entry in catalog.of_kind(Balance::KIND) {
            if let LabBody::Balance(b) = catalog.current_of(entry).as_ref() {
                balances.by_id.entry(b.id.clone()).or_insert(entry.hash);
                balances.by_hash.insert(entry.hash, b.id.clone());
            }
        }
        balances
    }

    /// Refuses the first line naming a balance id no balance record carries.
    fn know_every_line(&self, printout: &[PrintedReading]) -> Result<(), CaptureError> {
        let Some(unknown) = printout
            .iter()
            .find(|line| !self.by_id.contains_key(&line.balance_id))
        else {
            return Ok(());
        };
        let mut known: Vec<String> = self.by_id.keys().cloned().collect();
        known.sort();
        Err(CaptureError::UnknownBalance {
            line: unknown.line,
            balance_id: unknown.balance_id.clone(),
            known,
        })
    }

    /// The lab's id of a balance entry (its hash when no balance record is found, which the
    /// printout can then never name).
    fn id_of(&self, balance: &EntryHash) -> String {
        self.by_hash
            .get(balance)
            .cloned()
            .unwrap_or_else(|| balance.to_hex())
    }

    fn hash_of(&self, id: &str) -> EntryHash {
        *self
            .by_id
            .get(id)
            .expect("every line's balance was checked to be known")
    }
}

/// The run policy's pairing tolerance and the clause naming it.
fn tolerance(catalog: &Catalog, run: &EntryHash) -> (u32, String) {
    let policy = catalog
        .current(run)
        .and_then(|body| match body {
            LabBody::Run(r) => catalog.current(&r.policy),
            _ => None,
        })
        .and_then(|body| match body {
            LabBody::Adoption(a) => LabPolicy::parse(&a.text)
                .ok()
                .map(|p| (format!("{} v{}", a.id, a.version), p)),
            _ => None,
        });
    match policy {
        Some((label, p)) => {
            let seconds = p.records.capture_pairing_seconds;
            (
                seconds,
                format!("{label}: records.capture_pairing_seconds = {seconds}"),
            )
        }
        None => (
            DEFAULT_CAPTURE_PAIRING_SECONDS,
            format!(
                "the run's policy cannot be read; default records.capture_pairing_seconds = {DEFAULT_CAPTURE_PAIRING_SECONDS}"
            ),
        ),
    }
}

/// The weighings of a run from one source, with their bodies in force, in sequence order.
fn weighings_of<'a>(
    catalog: &'a Catalog,
    run: &EntryHash,
    source: Source,
) -> Vec<(&'a CatalogEntry, Weighing)> {
    catalog
        .of_run(run)
        .into_iter()
        .filter(|e| e.kind == Weighing::KIND)
        .filter_map(|e| match catalog.current_of(e).into_owned() {
            LabBody::Weighing(w) if w.source == source => Some((e, w)),
            _ => None,
        })
        .collect()
}

/// Refuses pairings whose keyed weighing already has a captured twin of the same replicate
/// and portion.
fn refuse_already_captured(
    catalog: &Catalog,
    run: &EntryHash,
    run_id: &str,
    pairings: &[Pairing],
) -> Result<(), CaptureError> {
    let mut captured: HashMap<(u32, Portion), Vec<u64>> = HashMap::new();
    for (entry, w) in weighings_of(catalog, run, Source::Captured) {
        captured
            .entry((w.replicate, w.portion))
            .or_default()
            .push(entry.seq);
    }
    let weighings: Vec<AlreadyCaptured> = pairings
        .iter()
        .filter_map(|p| {
            let seqs = captured.get(&(p.replicate, p.portion))?;
            Some(AlreadyCaptured {
                keyed_seq: p.keyed_seq,
                replicate: p.replicate,
                portion: p.portion,
                captured_seqs: seqs.clone(),
            })
        })
        .collect();
    if weighings.is_empty() {
        return Ok(());
    }
    Err(CaptureError::AlreadyCaptured {
        run_id: run_id.to_string(),
        weighings,
    })
}

/// What one keyed reading found on one balance.
enum Found {
    /// A line of the balance looked at (the keyed one, or the one the weighing moved to).
    Line { index: usize, slip: Option<Slip> },
    /// No line of that balance, but another balance printed exactly the keyed reading.
    Elsewhere { index: usize },
    /// Nothing within the tolerance.
    Nothing,
}

/// Pairs keyed weighings with the lines of one printout.
struct Pairer<'a> {
    printout: &'a [PrintedReading],
    printed: &'a [TimedReading],
    tolerance_seconds: u32,
}

impl Pairer<'_> {
    /// Pairs each keyed weighing (in the order given), or says why it cannot be paired; a
    /// weighing sharing its replicate and portion with another keyed one is not tried.
    fn pair_each(
        &self,
        keyed: &[(&CatalogEntry, Weighing)],
        balances: &Balances,
    ) -> (Vec<Pairing>, Vec<UnpairedWeighing>) {
        let mut slots: HashMap<(u32, Portion), Vec<u64>> = HashMap::new();
        for (entry, w) in keyed {
            let slot = slots.entry((w.replicate, w.portion)).or_default();
            slot.push(entry.seq);
        }
        let mut pairings = Vec::new();
        let mut unpaired = Vec::new();
        for (entry, w) in keyed {
            let others: Vec<u64> = slots[&(w.replicate, w.portion)]
                .iter()
                .copied()
                .filter(|seq| *seq != entry.seq)
                .collect();
            let outcome = if others.is_empty() {
                self.pair(entry, w, &balances.id_of(&w.balance), balances)
            } else {
                Err(Unpaired::SharedSlot { others })
            };
            match outcome {
                Ok(pairing) => pairings.push(pairing),
                Err(reason) => unpaired.push(UnpairedWeighing {
                    keyed_seq: entry.seq,
                    replicate: w.replicate,
                    portion: w.portion,
                    reason,
                }),
            }
        }
        (pairings, unpaired)
    }

    /// One keyed reading against the lines, as if taken on `balance_id`.
    fn find(&self, reading: &Reading, at: Timestamp, balance_id: &str) -> Found {
        let keyed = TimedReading {
            balance_id: balance_id.to_string(),
            at,
            reading: reading.clone(),
        };
        match match_keyed(&keyed, self.printed, self.tolerance_seconds) {
            Match::Exact { captured } => Found::Line {
                index: captured,
                slip: None,
            },
            Match::Mismatch { captured, slip } => Found::Line {
                index: captured,
                slip: differ_in_value(reading, &self.printed[captured].reading).then_some(slip),
            },
            Match::Unmatched {
                same_reading_on_other_balance: Some(index),
            } => Found::Elsewhere { index },
            Match::Unmatched {
                same_reading_on_other_balance: None,
            } => Found::Nothing,
        }
    }

    /// Both readings of a keyed weighing paired with lines of one balance, and its twin.
    fn pair(
        &self,
        entry: &CatalogEntry,
        keyed: &Weighing,
        keyed_balance: &str,
        balances: &Balances,
    ) -> Result<Pairing, Unpaired> {
        let readings = [
            (Which::First, &keyed.first, keyed.first_at),
            (Which::Second, &keyed.second, keyed.second_at),
        ];
        let found = readings.map(|(_, reading, at)| self.find(reading, at, keyed_balance));
        let balance = self.printed_balance(&found, keyed_balance);
        let mut paired = Vec::with_capacity(2);
        for ((which, reading, at), found) in readings.into_iter().zip(found) {
            let (index, slip) = self.line_on(&balance, which, reading, at, found)?;
            paired.push(PairedReading {
                which,
                keyed: reading.clone(),
                keyed_at: at,
                printed: self.printout[index].clone(),
                slip,
            });
        }
        let readings: [PairedReading; 2] = paired.try_into().expect("one line for each reading");
        let [first, second] = [&readings[0].printed, &readings[1].printed];
        if first.line == second.line {
            return Err(Unpaired::OneLine { line: first.line });
        }
        let captured = twin(keyed, balances.hash_of(&balance), first, second);
        captured
            .check()
            .map_err(|reason| Unpaired::NotAWeighing { reason })?;
        Ok(Pairing {
            keyed_seq: entry.seq,
            keyed_hash: entry.hash,
            keyed_balance_id: keyed_balance.to_string(),
            printed_balance_id: balance,
            replicate: keyed.replicate,
            portion: keyed.portion,
            readings,
            captured,
        })
    }

    /// The balance the weighing pairs on: the keyed one when it printed a line near either
    /// reading, else the balance that printed exactly a keyed reading.
    fn printed_balance(&self, found: &[Found; 2], keyed_balance: &str) -> String {
        if found.iter().any(|f| matches!(f, Found::Line { .. })) {
            return keyed_balance.to_string();
        }
        found
            .iter()
            .find_map(|f| match f {
                Found::Elsewhere { index } => Some(self.printed[*index].balance_id.clone()),
                _ => None,
            })
            .unwrap_or_else(|| keyed_balance.to_string())
    }

    /// The line of `balance` one reading pairs with, and its slip.
    fn line_on(
        &self,
        balance: &str,
        which: Which,
        reading: &Reading,
        at: Timestamp,
        found: Found,
    ) -> Result<(usize, Option<Slip>), Unpaired> {
        let on_balance = |index: usize| self.printed[index].balance_id == balance;
        match found {
            Found::Line { index, slip } if on_balance(index) => Ok((index, slip)),
            Found::Elsewhere { index } if on_balance(index) => Ok((index, None)),
            Found::Line { index, .. } | Found::Elsewhere { index } => {
                let (first, second) = match which {
                    Which::First => (self.printed[index].balance_id.clone(), balance.to_string()),
                    Which::Second => (balance.to_string(), self.printed[index].balance_id.clone()),
                };
                Err(Unpaired::AcrossBalances { first, second })
            }
            Found::Nothing => match self.find(reading, at, balance) {
                Found::Line { index, slip } => Ok((index, slip)),
                _ => Err(Unpaired::NoLine {
                    which,
                    balance_id: balance.to_string(),
                    at,
                    tolerance_seconds: self.tolerance_seconds,
                }),
            },
        }
    }
}

/// The captured twin of a keyed weighing from its two printed lines on `balance`.
fn twin(
    keyed: &Weighing,
    balance: EntryHash,
    first: &PrintedReading,
    second: &PrintedReading,
) -> Weighing {
    Weighing {
        run: keyed.run,
        replicate: keyed.replicate,
        portion: keyed.portion,
        balance,
        mode: keyed.mode,
        first: first.reading.clone(),
        first_at: first.at,
        second: second.reading.clone(),
        second_at: second.at,
        source: Source::Captured,
        stable: first.stable && second.stable,
    }
}

/// `12, 13 and 14`.
fn list(seqs: &[u64]) -> String {
    let words: Vec<String> = seqs.iter().map(u64::to_string).collect();
    match words.split_last() {
        Some((last, rest)) if !rest.is_empty() => format!("{} and {last}", rest.join(", ")),
        _ => words.join(""),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::printout::parse_printout;
    use crate::records::{Adoption, DocumentKind, WeighingMode};
    use crate::test_records::{at, balance, entry, h, reading, run_record};

    // Every balance, run, reading and time below is invented for the tests. Times are seconds
    // after 2026-11-16T08:00:00Z; the printouts write the same instants as text.

    fn run(seq: u64, id: &str, policy: &str) -> CatalogEntry {
        entry(seq, id, Run::KIND, LabBody::Run(run_record(id, policy)))
    }

    /// A weighing of run RUN-1 by difference: (replicate, portion, balance, first reading and
    /// its second, second reading and its second, source).
    struct W<'a>(u32, Portion, &'a str, &'a str, i64, &'a str, i64, Source);

    fn weighing(seq: u64, w: W<'_>) -> CatalogEntry {
        let W(replicate, portion, balance, first, first_s, second, second_s, source) = w;
        let body = Weighing {
            run: h("RUN-1"),
            replicate,
            portion,
            balance: h(balance),
            mode: WeighingMode::ByDifference,
            first: reading(first),
            first_at: at(first_s),
            second: reading(second),
            second_at: at(second_s),
            source,
            stable: true,
        };
        entry(
            seq,
            &format!("weighing-{seq}"),
            Weighing::KIND,
            LabBody::Weighing(body),
        )
    }

    fn keyed(
        seq: u64,
        replicate: u32,
        portion: Portion,
        balance: &str,
        readings: [(&str, i64); 2],
    ) -> CatalogEntry {
        let [(first, first_s), (second, second_s)] = readings;
        weighing(
            seq,
            W(
                replicate,
                portion,
                balance,
                first,
                first_s,
                second,
                second_s,
                Source::Keyed,
            ),
        )
    }

    /// Two balances, the run, and the given weighings.
    fn catalog(weighings: Vec<CatalogEntry>) -> Catalog {
        let mut entries = vec![
            balance(1, "BAL-A"),
            balance(2, "BAL-B"),
            run(3, "RUN-1", "policy"),
        ];
        entries.extend(weighings);
        Catalog::from_entries(entries)
    }

    /// The keyed weighing most tests pair: 18.4127 g at 0 s, then 18.1616 g at 40 s on BAL-A.
    fn standard_portion() -> CatalogEntry {
        keyed(
            10,
            1,
            Portion::PrimaryStandard,
            "BAL-A",
            [("18.4127 g", 0), ("18.1616 g", 40)],
        )
    }

    fn printout(text: &str) -> Vec<PrintedReading> {
        parse_printout(text).unwrap()
    }

    fn one_pairing(plan: &CapturePlan) -> &Pairing {
        assert_eq!(plan.pairings.len(), 1, "{:?}", plan.unpaired_weighings);
        &plan.pairings[0]
    }

    fn only_reason(plan: &CapturePlan) -> &Unpaired {
        assert!(plan.pairings.is_empty(), "{:?}", plan.pairings);
        assert_eq!(plan.unpaired_weighings.len(), 1);
        &plan.unpaired_weighings[0].reason
    }

    #[test]
    fn pairs_a_keyed_weighing_with_its_printed_lines_and_drafts_its_twin() {
        // Line 2 is a tare printed at the keyed first time itself; line 3 shows the keyed first
        // reading 2 s later and wins as the equal reading; line 4 shows the second reading 2 s
        // after its keyed time.
        let lines = printout(
            "# bench 1\n\
             2026-11-16T08:00:00Z BAL-A 0.0000 g S\n\
             2026-11-16T08:00:02Z BAL-A 18.4127 g S\n\
             2026-11-16T08:00:42Z BAL-A 18.1616 g S\n",
        );
        let plan = plan(&catalog(vec![standard_portion()]), &lines, "RUN-1").unwrap();
        let pairing = one_pairing(&plan);
        assert_eq!(
            pairing.captured,
            Weighing {
                run: h("RUN-1"),
                replicate: 1,
                portion: Portion::PrimaryStandard,
                balance: h("BAL-A"),
                mode: WeighingMode::ByDifference,
                first: reading("18.4127 g"),
                first_at: at(2),
                second: reading("18.1616 g"),
                second_at: at(42),
                source: Source::Captured,
                stable: true,
            }
        );
        assert_eq!(
            (pairing.keyed_seq, pairing.keyed_hash),
            (10, h("weighing-10"))
        );
        assert_eq!(pairing.readings[0].printed.line, 3);
        assert_eq!(pairing.readings[1].printed.line, 4);
        assert!(pairing.readings.iter().all(|r| r.slip.is_none()));
        assert!(!pairing.balance_differs());
        assert_eq!(plan.unpaired_lines.len(), 1);
        assert_eq!(plan.unpaired_lines[0].line, 2);
        assert!(plan.unpaired_weighings.is_empty());
        // The run names a policy the catalog does not hold: the documented default.
        assert_eq!(plan.tolerance_seconds, 120);
        assert!(plan
            .clause
            .contains("default records.capture_pairing_seconds = 120"));
        assert_eq!(
            (plan.readings_differing(), plan.balances_differing()),
            (0, 0)
        );
    }

    #[test]
    fn names_the_slip_of_a_reading_that_differs_from_its_line() {
        // Keyed 18.4172 for the printed 18.4127: digits 5 and 6 (2, 7) swapped.
        let weighing = keyed(
            10,
            1,
            Portion::PrimaryStandard,
            "BAL-A",
            [("18.4172 g", 0), ("18.1616 g", 40)],
        );
        let lines = printout(
            "2026-11-16T08:00:01Z BAL-A 18.4127 g S\n2026-11-16T08:00:41Z BAL-A 18.1616 g S\n",
        );
        let plan = plan(&catalog(vec![weighing]), &lines, "RUN-1").unwrap();
        let pairing = one_pairing(&plan);
        assert_eq!(
            pairing.readings[0].slip,
            Some(Slip::TransposedDigits {
                positions: [5, 6],
                captured_digits: ['2', '7'],
            })
        );
        assert_eq!(pairing.readings[1].slip, None);
        // The twin holds what the balance printed, not what was keyed.
        assert_eq!(pairing.captured.first, reading("18.4127 g"));
        assert_eq!(plan.readings_differing(), 1);
    }

    #[test]
    fn a_trailing_zero_left_out_is_no_difference() {
        // 18.1616 and 18.16160 are the same mass: the pair agrees (see slips::differ_in_value).
        let weighing = keyed(
            10,
            1,
            Portion::PrimaryStandard,
            "BAL-A",
            [("18.4127 g", 0), ("18.1616 g", 40)],
        );
        let lines = printout(
            "2026-11-16T08:00:01Z BAL-A 18.4127 g S\n2026-11-16T08:00:41Z BAL-A 18.16160 g S\n",
        );
        let plan = plan(&catalog(vec![weighing]), &lines, "RUN-1").unwrap();
        assert!(one_pairing(&plan).readings.iter().all(|r| r.slip.is_none()));
    }

    #[test]
    fn pairs_with_another_balance_that_printed_the_keyed_readings() {
        // Keyed on BAL-A; BAL-A printed nothing, BAL-B printed both keyed readings.
        let lines = printout(
            "2026-11-16T08:00:03Z BAL-B 18.4127 g S\n2026-11-16T08:00:43Z BAL-B 18.1616 g S\n",
        );
        let plan = plan(&catalog(vec![standard_portion()]), &lines, "RUN-1").unwrap();
        let pairing = one_pairing(&plan);
        assert_eq!(pairing.keyed_balance_id, "BAL-A");
        assert_eq!(pairing.printed_balance_id, "BAL-B");
        assert_eq!(pairing.captured.balance, h("BAL-B"));
        assert!(pairing.balance_differs());
        assert!(pairing.readings.iter().all(|r| r.slip.is_none()));
        assert_eq!(plan.balances_differing(), 1);
    }

    #[test]
    fn pairs_the_other_reading_on_that_balance_even_when_it_differs() {
        // BAL-B printed the keyed first reading exactly and 18.16116 near the second: keyed
        // 18.1616 is 18.16116 without its 5th digit (1).
        let lines = printout(
            "2026-11-16T08:00:03Z BAL-B 18.4127 g S\n2026-11-16T08:00:43Z BAL-B 18.16116 g S\n",
        );
        let plan = plan(&catalog(vec![standard_portion()]), &lines, "RUN-1").unwrap();
        let pairing = one_pairing(&plan);
        assert_eq!(pairing.printed_balance_id, "BAL-B");
        assert_eq!(pairing.readings[0].slip, None);
        assert_eq!(
            pairing.readings[1].slip,
            Some(Slip::DroppedDigit {
                position: 5,
                digit: '1'
            })
        );
    }

    #[test]
    fn names_another_balance_whose_line_shows_the_keyed_reading() {
        // BAL-A printed 25.4312 near the keyed first reading; BAL-B printed exactly the keyed
        // 18.4127 five seconds away: slips::match_keyed calls that a wrong balance.
        let lines = printout(
            "2026-11-16T08:00:01Z BAL-A 25.4312 g S\n\
             2026-11-16T08:00:05Z BAL-B 18.4127 g S\n\
             2026-11-16T08:00:41Z BAL-A 18.1616 g S\n",
        );
        let plan = plan(&catalog(vec![standard_portion()]), &lines, "RUN-1").unwrap();
        let pairing = one_pairing(&plan);
        assert_eq!(pairing.printed_balance_id, "BAL-A");
        assert_eq!(pairing.captured.first, reading("25.4312 g"));
        assert_eq!(
            pairing.readings[0].slip,
            Some(Slip::WrongBalance {
                other: 1,
                balance_id: "BAL-B".into()
            })
        );
        assert_eq!(
            plan.unpaired_lines
                .iter()
                .map(|l| l.line)
                .collect::<Vec<_>>(),
            [2]
        );
    }

    /// A keyed weighing whose readings are 300 s apart (a titrant delivered slowly), so a
    /// line near one reading is beyond the tolerance of the other.
    fn slow_delivery() -> CatalogEntry {
        keyed(
            10,
            1,
            Portion::Titrant,
            "BAL-A",
            [("112.5321 g", 0), ("75.1201 g", 300)],
        )
    }

    #[test]
    fn pairs_within_the_tolerance_inclusively_and_no_further() {
        // Keyed second reading at 300 s; a line at 420 s is 120 s away (paired), at 421 s
        // 121 s away; the line at 0 s is 300 s away from it.
        let at_the_edge = printout(
            "2026-11-16T08:00:00Z BAL-A 112.5321 g S\n2026-11-16T08:07:00Z BAL-A 75.1201 g S\n",
        );
        let plan_at_edge = plan(&catalog(vec![slow_delivery()]), &at_the_edge, "RUN-1").unwrap();
        assert_eq!(one_pairing(&plan_at_edge).captured.second_at, at(420));
        let beyond = printout(
            "2026-11-16T08:00:00Z BAL-A 112.5321 g S\n2026-11-16T08:07:01Z BAL-A 75.1201 g S\n",
        );
        let plan = plan(&catalog(vec![slow_delivery()]), &beyond, "RUN-1").unwrap();
        assert_eq!(
            only_reason(&plan),
            &Unpaired::NoLine {
                which: Which::Second,
                balance_id: "BAL-A".into(),
                at: at(300),
                tolerance_seconds: 120,
            }
        );
        // Nothing paired, so both lines are left over.
        assert_eq!(plan.unpaired_lines.len(), 2);
    }

    #[test]
    fn leaves_readings_printed_by_two_balances_unpaired() {
        // The first reading is on BAL-A's line; the second only on BAL-B's, and BAL-A's line
        // is 299 s from it.
        let lines = printout(
            "2026-11-16T08:00:01Z BAL-A 112.5321 g S\n2026-11-16T08:05:01Z BAL-B 75.1201 g S\n",
        );
        let plan = plan(&catalog(vec![slow_delivery()]), &lines, "RUN-1").unwrap();
        assert_eq!(
            only_reason(&plan),
            &Unpaired::AcrossBalances {
                first: "BAL-A".into(),
                second: "BAL-B".into()
            }
        );
    }

    #[test]
    fn leaves_both_readings_on_one_line_unpaired() {
        // Keyed 10 s apart; the only line, at 5 s, is the nearest for both.
        let weighing = keyed(
            10,
            1,
            Portion::PrimaryStandard,
            "BAL-A",
            [("18.4127 g", 0), ("18.1616 g", 10)],
        );
        let lines = printout("2026-11-16T08:00:05Z BAL-A 18.4127 g S\n");
        let plan = plan(&catalog(vec![weighing]), &lines, "RUN-1").unwrap();
        assert_eq!(only_reason(&plan), &Unpaired::OneLine { line: 1 });
    }

    #[test]
    fn leaves_printed_readings_that_make_no_weighing_unpaired() {
        // By difference, the printed second reading 18.6161 is larger than the first.
        let lines = printout(
            "2026-11-16T08:00:01Z BAL-A 18.4127 g S\n2026-11-16T08:00:41Z BAL-A 18.6161 g S\n",
        );
        let plan = plan(&catalog(vec![standard_portion()]), &lines, "RUN-1").unwrap();
        let Unpaired::NotAWeighing { reason } = only_reason(&plan) else {
            panic!("{:?}", plan.unpaired_weighings);
        };
        assert!(
            reason.contains("by difference the second reading must be smaller than the first"),
            "{reason}"
        );
    }

    #[test]
    fn leaves_two_keyed_weighings_of_one_replicate_and_portion_unpaired() {
        let again = keyed(
            11,
            1,
            Portion::PrimaryStandard,
            "BAL-A",
            [("18.4127 g", 0), ("18.1616 g", 40)],
        );
        let lines = printout(
            "2026-11-16T08:00:01Z BAL-A 18.4127 g S\n2026-11-16T08:00:41Z BAL-A 18.1616 g S\n",
        );
        let plan = plan(&catalog(vec![standard_portion(), again]), &lines, "RUN-1").unwrap();
        assert!(plan.pairings.is_empty());
        let reasons: Vec<&Unpaired> = plan.unpaired_weighings.iter().map(|u| &u.reason).collect();
        assert_eq!(
            reasons,
            [
                &Unpaired::SharedSlot { others: vec![11] },
                &Unpaired::SharedSlot { others: vec![10] }
            ]
        );
    }

    #[test]
    fn lets_one_line_serve_two_weighings_of_a_chain() {
        // Replicate 1 ends at 18.1616 g (40 s) and replicate 2 starts from it (50 s): the
        // balance printed it once, at 45 s.
        let next = keyed(
            11,
            2,
            Portion::PrimaryStandard,
            "BAL-A",
            [("18.1616 g", 50), ("17.9129 g", 90)],
        );
        let lines = printout(
            "2026-11-16T08:00:01Z BAL-A 18.4127 g S\n\
             2026-11-16T08:00:45Z BAL-A 18.1616 g S\n\
             2026-11-16T08:01:31Z BAL-A 17.9129 g S\n",
        );
        let plan = plan(&catalog(vec![standard_portion(), next]), &lines, "RUN-1").unwrap();
        assert_eq!(plan.pairings.len(), 2);
        assert_eq!(plan.pairings[0].readings[1].printed.line, 2);
        assert_eq!(plan.pairings[1].readings[0].printed.line, 2);
        assert!(plan.unpaired_lines.is_empty());
    }

    #[test]
    fn marks_the_twin_unstable_when_a_line_is_unstable() {
        let lines = printout(
            "2026-11-16T08:00:01Z BAL-A 18.4127 g S\n2026-11-16T08:00:41Z BAL-A 18.1616 g U\n",
        );
        let plan = plan(&catalog(vec![standard_portion()]), &lines, "RUN-1").unwrap();
        assert!(!one_pairing(&plan).captured.stable);
    }

    #[test]
    fn pairs_only_keyed_weighings_of_the_named_run() {
        // The captured weighing already in the run is not paired again, and it is another
        // replicate, so nothing is refused.
        let captured = weighing(
            12,
            W(
                2,
                Portion::PrimaryStandard,
                "BAL-A",
                "18.1616 g",
                50,
                "17.9129 g",
                90,
                Source::Captured,
            ),
        );
        let lines = printout(
            "2026-11-16T08:00:01Z BAL-A 18.4127 g S\n2026-11-16T08:00:41Z BAL-A 18.1616 g S\n",
        );
        let plan = plan(
            &catalog(vec![standard_portion(), captured]),
            &lines,
            "RUN-1",
        )
        .unwrap();
        assert_eq!(one_pairing(&plan).keyed_seq, 10);
    }

    #[test]
    fn refuses_a_printout_naming_a_balance_the_ledger_does_not_know() {
        let lines = printout(
            "2026-11-16T08:00:01Z BAL-A 18.4127 g S\n\
             2026-11-16T08:00:20Z BAL-A 18.4127 g S\n\
             2026-11-16T08:00:41Z BAL-Z 18.1616 g S\n",
        );
        let err = plan(&catalog(vec![standard_portion()]), &lines, "RUN-1").unwrap_err();
        let CaptureError::UnknownBalance {
            line,
            balance_id,
            known,
        } = &err
        else {
            panic!("{err:?}");
        };
        assert_eq!((*line, balance_id.as_str()), (3, "BAL-Z"));
        assert_eq!(known, &["BAL-A", "BAL-B"]);
        assert_eq!(
            err.to_string(),
            "line 3 names balance \"BAL-Z\", which no balance record of the ledger carries (known: BAL-A, BAL-B)"
        );
    }

    #[test]
    fn refuses_a_run_the_ledger_does_not_have() {
        let lines = printout("2026-11-16T08:00:01Z BAL-A 18.4127 g S\n");
        let err = plan(&catalog(vec![]), &lines, "RUN-404").unwrap_err();
        assert!(matches!(&err, CaptureError::UnknownRun { run_id } if run_id == "RUN-404"));
        assert_eq!(err.to_string(), "the ledger has no run \"RUN-404\"");
    }

    #[test]
    fn refuses_weighings_that_already_have_their_captured_twin() {
        // Entry 20 is the twin an earlier import recorded for entry 10.
        let twin = weighing(
            20,
            W(
                1,
                Portion::PrimaryStandard,
                "BAL-A",
                "18.4127 g",
                1,
                "18.1616 g",
                41,
                Source::Captured,
            ),
        );
        let lines = printout(
            "2026-11-16T08:00:01Z BAL-A 18.4127 g S\n2026-11-16T08:00:41Z BAL-A 18.1616 g S\n",
        );
        let err = plan(&catalog(vec![standard_portion(), twin]), &lines, "RUN-1").unwrap_err();
        let CaptureError::AlreadyCaptured { run_id, weighings } = &err else {
            panic!("{err:?}");
        };
        assert_eq!(run_id, "RUN-1");
        assert_eq!(
            weighings,
            &[AlreadyCaptured {
                keyed_seq: 10,
                replicate: 1,
                portion: Portion::PrimaryStandard,
                captured_seqs: vec![20],
            }]
        );
        assert_eq!(
            err.to_string(),
            "run RUN-1 already holds captured readings for what this printout pairs with: entry 10 (replicate 1, primary standard) has captured twin 20"
        );
    }

    #[test]
    fn takes_the_tolerance_from_the_runs_policy() {
        // The shipped policy with records.capture_pairing_seconds = 30: the printed second
        // reading 35 s after the keyed one no longer pairs.
        let text = include_str!("../../policies/lab-policy.toml").replace(
            "contemporaneous_window_minutes = 30",
            "contemporaneous_window_minutes = 30\ncapture_pairing_seconds = 30",
        );
        let adoption = Adoption::of_text(DocumentKind::Policy, &text).unwrap();
        let label = format!("{} v{}", adoption.id, adoption.version);
        let mut entries = vec![
            balance(1, "BAL-A"),
            entry(
                2,
                "strict-policy",
                Adoption::KIND,
                LabBody::Adoption(adoption),
            ),
            run(3, "RUN-1", "strict-policy"),
            standard_portion(),
        ];
        entries.push(balance(4, "BAL-B"));
        let lines = printout(
            "2026-11-16T08:00:01Z BAL-A 18.4127 g S\n2026-11-16T08:01:15Z BAL-A 18.1616 g S\n",
        );
        let plan = plan(&Catalog::from_entries(entries), &lines, "RUN-1").unwrap();
        assert_eq!(plan.tolerance_seconds, 30);
        assert_eq!(
            plan.clause,
            format!("{label}: records.capture_pairing_seconds = 30")
        );
        assert!(matches!(
            only_reason(&plan),
            Unpaired::NoLine {
                which: Which::Second,
                tolerance_seconds: 30,
                ..
            }
        ));
    }

    #[test]
    fn drafts_each_twin_as_a_weighing_naming_its_run_and_balance() {
        let lines = printout(
            "2026-11-16T08:00:01Z BAL-B 18.4127 g S\n2026-11-16T08:00:41Z BAL-B 18.1616 g S\n",
        );
        let plan = plan(&catalog(vec![standard_portion()]), &lines, "RUN-1").unwrap();
        let drafts = plan.drafts("analyst.a").unwrap();
        assert_eq!(drafts.len(), 1);
        assert_eq!(drafts[0].kind, Weighing::KIND);
        assert_eq!(drafts[0].author, "analyst.a");
        // Weighing::references: the run, then the (printed) balance.
        assert_eq!(drafts[0].references, [h("RUN-1"), h("BAL-B")]);
    }

    #[test]
    fn says_why_a_weighing_was_left_unpaired_in_plain_words() {
        let reasons = [
            (
                Unpaired::NoLine {
                    which: Which::First,
                    balance_id: "BAL-A".into(),
                    at: at(0),
                    tolerance_seconds: 120,
                },
                "first reading: no printed line of BAL-A within 120 s of 2026-11-16T08:00:00Z",
            ),
            (
                Unpaired::SharedSlot { others: vec![11, 12, 14] },
                "entries 11, 12 and 14 are keyed weighings of the same replicate and portion; a captured twin cannot tell them apart",
            ),
            (
                Unpaired::OneLine { line: 7 },
                "both readings pair with the same line 7",
            ),
        ];
        for (reason, text) in reasons {
            assert_eq!(reason.to_string(), text);
        }
    }
}
