//! A summary of a transmitter record: header, range, what was sent per basis and intensity,
//! marker slots against the marker contract, and every damaged block, with the capture's
//! verdict (good, damaged, incomplete) so that `slotwise inspect` can exit accordingly.

use super::error::TxRecordError;
use super::{
    is_sparse, protocol_name, read_dense, read_sparse, RecordDamage, TxRecord, TxRecordHeader,
    MARKER_VACUUM,
};
use crate::capture::Verdict;
use serde::Serialize;
use slotwise::frame::{MarkerSpec, MarkerState};
use slotwise::Basis;
use std::fmt;
use std::fs::File;
use std::io::{BufReader, Read};
use std::path::Path;

/// What [`inspect`] found in a record.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct RecordReport {
    /// File name as given.
    pub source: String,
    /// `dense` or `sparse`.
    pub form: &'static str,
    /// Bytes read.
    pub total_bytes: u64,
    /// The header as read.
    pub header: TxRecordHeader,
    /// Slots the record holds.
    pub recorded: u64,
    /// Slots of the range it does not hold.
    pub not_recorded: u64,
    /// Recorded non-marker slots by basis (Z, X) and intensity class.
    pub sent: [[u64; 3]; 2],
    /// Recorded slots without light (vacuum).
    pub vacuum: u64,
    /// Recorded marker slots (when the marker flag is set).
    pub marker_slots: u64,
    /// Recorded marker slots whose content differs from the marker contract.
    pub marker_mismatches: u64,
    /// Blocks that failed their checks (dense form).
    pub damage: Vec<RecordDamage>,
    /// Whether a verified end record closed the file (always true for the sparse form).
    pub end_record_ok: bool,
    /// A fault at the end, or why the end record did not verify.
    pub end_error: Option<String>,
    /// Good, damaged or incomplete.
    pub verdict: Verdict,
}

impl RecordReport {
    /// `None` for a good record; otherwise one line saying why not, naming the file.
    pub fn problem(&self) -> Option<String> {
        let why = self.verdict.problem()?;
        Some(format!(
            "{}: transmitter record {why}: {} damaged blocks",
            self.source,
            self.damage.len()
        ))
    }
}

fn tally(record: &TxRecord, report: &mut RecordReport) {
    let spec = MarkerSpec::standard();
    for (k, c) in record.iter() {
        report.recorded += 1;
        if record.is_marker_slot(k) {
            report.marker_slots += 1;
            let agrees = match spec.state(k) {
                Some(MarkerState::Vacuum) => c.intensity == MARKER_VACUUM,
                Some(MarkerState::Pulse { z_bit }) => {
                    (c.basis, c.bit, c.intensity) == (Basis::Z, z_bit, 0)
                }
                None => false,
            };
            report.marker_mismatches += u64::from(!agrees);
            continue;
        }
        if c.intensity == MARKER_VACUUM {
            report.vacuum += 1;
        } else if let Some(n) = report
            .sent
            .get_mut(usize::from(c.basis == Basis::X))
            .and_then(|row| row.get_mut(usize::from(c.intensity)))
        {
            *n += 1;
        }
    }
    report.not_recorded = record.slot_count().saturating_sub(report.recorded);
}

/// Read a record (either form) and summarise it. Header faults, I/O errors and any fault of the
/// sparse form are errors; damaged blocks and a missing end record of the dense form are listed.
pub fn inspect(path: impl AsRef<Path>) -> Result<RecordReport, TxRecordError> {
    let path = path.as_ref();
    let name = path.display().to_string();
    let mut file = File::open(path).map_err(|e| TxRecordError::io(&name, &e))?;
    let mut head = Vec::new();
    (&mut file)
        .take(8)
        .read_to_end(&mut head)
        .map_err(|e| TxRecordError::io(&name, &e))?;
    let rest = BufReader::new(std::io::Cursor::new(head.clone()).chain(file));
    let (record, total_bytes, damage, end_ok, end_error, form) = if is_sparse(path, &head) {
        let r = read_sparse(rest, &name)?;
        let size = std::fs::metadata(path).map(|m| m.len()).unwrap_or(0);
        (r, size, Vec::new(), true, None, "sparse")
    } else {
        let d = read_dense(rest, &name, true)?;
        let r = (d.total_bytes, d.damage, d.end_ok, d.end_error);
        (d.record, r.0, r.1, r.2, r.3, "dense")
    };
    let mut report = RecordReport {
        source: name,
        form,
        total_bytes,
        header: record.header().clone(),
        recorded: 0,
        not_recorded: 0,
        sent: [[0; 3]; 2],
        vacuum: 0,
        marker_slots: 0,
        marker_mismatches: 0,
        verdict: if !end_ok {
            Verdict::Incomplete
        } else if !damage.is_empty() || end_error.is_some() {
            Verdict::Damaged
        } else {
            Verdict::Good
        },
        damage,
        end_record_ok: end_ok,
        end_error,
    };
    tally(&record, &mut report);
    Ok(report)
}

impl fmt::Display for RecordReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let h = &self.header;
        let row = |f: &mut fmt::Formatter<'_>, k: &str, v: String| writeln!(f, "{k:<20} {v}");
        row(
            f,
            "transmitter record",
            format!(
                "{} ({}, {} bytes)",
                self.source, self.form, self.total_bytes
            ),
        )?;
        row(
            f,
            "format version",
            format!("{}.{}", h.version >> 8, h.version & 0xFF),
        )?;
        let r = h.range();
        row(
            f,
            "slots",
            format!("{}..{} ({} slots)", r.start, r.end, h.slot_count),
        )?;
        row(f, "protocol", protocol_name(h.protocol).to_owned())?;
        row(f, "intensity classes", h.intensity_classes.to_string())?;
        row(
            f,
            "marker",
            if h.marker() { "standard" } else { "none" }.to_owned(),
        )?;
        row(f, "flags", format!("0x{:08X}", h.flags))?;
        let hello = h.hello.map_or("none".to_owned(), |(t, s)| {
            format!("slot {s} at receiver time {t} ps")
        });
        row(f, "hello", hello)?;
        row(
            f,
            "recorded",
            format!(
                "{} slots ({} not recorded)",
                self.recorded, self.not_recorded
            ),
        )?;
        for (b, name) in [(0, "Z"), (1, "X")] {
            let per: Vec<String> = (0..usize::from(h.intensity_classes))
                .map(|i| format!("class {i} {}", self.sent[b][i]))
                .collect();
            row(f, &format!("sent {name}"), per.join(", "))?;
        }
        row(f, "vacuum", self.vacuum.to_string())?;
        row(
            f,
            "marker slots",
            format!(
                "{} ({} differ from the marker contract)",
                self.marker_slots, self.marker_mismatches
            ),
        )?;
        row(f, "damaged blocks", self.damage.len().to_string())?;
        for d in &self.damage {
            row(
                f,
                "",
                format!(
                    "block {} at byte {}: {} slots: {}",
                    d.block, d.offset, d.slots, d.reason
                ),
            )?;
        }
        row(
            f,
            "end record",
            if self.end_record_ok {
                "verified"
            } else {
                "missing or damaged"
            }
            .to_owned(),
        )?;
        if let Some(e) = &self.end_error {
            row(f, "end check", e.clone())?;
        }
        row(f, "verdict", self.verdict.as_str().to_owned())
    }
}
