//! The sparse form: CSV text, one `slot,basis,bit,intensity` line per recorded slot, the header
//! fields on `# name = value` lines before the column line. Layout in
//! `docs/transmitter-record.md`; CSV itself is an open format (RFC 4180, here without quoting).

use super::error::{TxErrorKind, TxRecordError};
use super::{
    encode_choice, protocol_name, TxChoice, TxRecord, TxRecordHeader, FLAG_HELLO, FLAG_MARKER,
    FLAG_SIMULATED, FORMAT_VERSION, MARKER_VACUUM,
};
use crate::capture::ErrorKind;
use crate::scenario::Protocol;
use slotwise::Basis;
use std::io::{self, BufRead, Write};

/// The column line that starts the data.
pub const COLUMNS: &str = "slot,basis,bit,intensity";

fn invalid(msg: String) -> io::Error {
    io::Error::new(io::ErrorKind::InvalidInput, msg)
}

/// Writes the sparse form: the header lines, then one line per recorded slot in ascending order.
#[derive(Debug)]
pub struct SparseWriter<W: Write> {
    w: W,
    header: TxRecordHeader,
    last: Option<u64>,
    recorded: u64,
}

impl<W: Write> SparseWriter<W> {
    /// Check `header` and write its lines and the column line.
    pub fn new(mut w: W, header: TxRecordHeader) -> io::Result<Self> {
        if !(1..=3).contains(&header.intensity_classes) {
            return Err(invalid(format!(
                "transmitter record field 'intensity_classes': {} is outside 1..=3",
                header.intensity_classes
            )));
        }
        if header.first_slot.checked_add(header.slot_count).is_none() {
            return Err(invalid(
                "transmitter record field 'slot_count': the range runs past 2^64".into(),
            ));
        }
        writeln!(
            w,
            "# slotwise transmitter record {}.{}, sparse form (docs/transmitter-record.md)",
            FORMAT_VERSION >> 8,
            FORMAT_VERSION & 0xFF
        )?;
        writeln!(w, "# first_slot = {}", header.first_slot)?;
        writeln!(w, "# slot_count = {}", header.slot_count)?;
        writeln!(w, "# intensity_classes = {}", header.intensity_classes)?;
        if header.protocol.is_some() {
            writeln!(w, "# protocol = {}", protocol_name(header.protocol))?;
        }
        let marker = if header.marker() { "standard" } else { "none" };
        writeln!(w, "# marker = {marker}")?;
        if let Some((t, slot)) = header.hello {
            writeln!(w, "# hello_t_ps = {t}")?;
            writeln!(w, "# hello_slot = {slot}")?;
        }
        if header.flags & FLAG_SIMULATED != 0 {
            writeln!(w, "# simulated = yes")?;
        }
        Ok(Self {
            w,
            header,
            last: None,
            recorded: 0,
        })
    }

    /// Write a free comment line (`# ` and `text`) before the column line.
    pub fn comment(&mut self, text: &str) -> io::Result<()> {
        for line in text.lines() {
            writeln!(self.w, "# {line}")?;
        }
        Ok(())
    }

    /// Record what was sent in `slot`: above every slot before, inside the header's range.
    pub fn push(&mut self, slot: u64, c: TxChoice) -> io::Result<()> {
        if self.last.is_none() {
            writeln!(self.w, "{COLUMNS}")?;
        }
        if self.last.is_some_and(|l| slot <= l) || !self.header.range().contains(&slot) {
            return Err(invalid(format!(
                "slot {slot} is not above the last slot {:?} or outside {:?}",
                self.last,
                self.header.range()
            )));
        }
        if encode_choice(Some(c)).is_none()
            || (c.intensity != MARKER_VACUUM && c.intensity >= self.header.intensity_classes)
        {
            return Err(invalid(format!("slot {slot}: {c:?} cannot be recorded")));
        }
        if c.intensity == MARKER_VACUUM {
            writeln!(self.w, "{slot},-,-,vacuum")?;
        } else {
            writeln!(
                self.w,
                "{slot},{},{},{}",
                c.basis.name(),
                c.bit,
                c.intensity
            )?;
        }
        self.last = Some(slot);
        self.recorded += 1;
        Ok(())
    }

    /// The header as written.
    pub fn header(&self) -> &TxRecordHeader {
        &self.header
    }

    /// Slots written so far.
    pub fn recorded(&self) -> u64 {
        self.recorded
    }

    /// Write the column line if no slot came, flush, and hand back the sink.
    pub fn finish(mut self) -> io::Result<W> {
        if self.last.is_none() {
            writeln!(self.w, "{COLUMNS}")?;
        }
        self.w.flush()?;
        Ok(self.w)
    }
}

/// Header fields gathered from the `#` lines.
#[derive(Default)]
struct Fields {
    first_slot: Option<u64>,
    slot_count: Option<u64>,
    classes: Option<u8>,
    protocol: Option<Protocol>,
    marker: bool,
    hello_t: Option<u64>,
    hello_slot: Option<u64>,
    simulated: bool,
}

/// One `# name = value` line: the field it sets, or an error naming line and column.
fn header_line(f: &mut Fields, text: &str, line: u64, name: &str) -> Result<(), TxRecordError> {
    let Some(body) = text.trim_start().strip_prefix('#') else {
        return Ok(());
    };
    let Some((key, value)) = body.split_once('=') else {
        return Ok(());
    };
    let key = key.trim();
    let column = (text.len() - value.trim_start().len() + 1) as u32;
    let value = value.trim();
    let bad = |field: &'static str, expected: &'static str| {
        TxRecordError::at_line(
            name,
            line,
            column,
            field,
            TxErrorKind::BadValue {
                found: value.to_owned(),
                expected,
            },
        )
    };
    let num = |field, expected| value.parse::<u64>().map_err(|_| bad(field, expected));
    match key {
        "first_slot" => f.first_slot = Some(num("first_slot", "a slot number 0..2^64")?),
        "slot_count" => f.slot_count = Some(num("slot_count", "a number of slots")?),
        "intensity_classes" => {
            f.classes = Some(match value {
                "1" => 1,
                "2" => 2,
                "3" => 3,
                _ => return Err(bad("intensity_classes", "1, 2 or 3")),
            })
        }
        "protocol" => {
            f.protocol = match value {
                "bb84" => Some(Protocol::Bb84),
                "efficient-bb84" => Some(Protocol::EfficientBb84),
                "three-state" => Some(Protocol::ThreeState),
                "unstated" => None,
                _ => return Err(bad("protocol", "bb84, efficient-bb84 or three-state")),
            }
        }
        "marker" => {
            f.marker = match value {
                "standard" => true,
                "none" => false,
                _ => return Err(bad("marker", "standard or none")),
            }
        }
        "hello_t_ps" => f.hello_t = Some(num("hello_t_ps", "a time in ps")?),
        "hello_slot" => f.hello_slot = Some(num("hello_slot", "a slot number")?),
        "simulated" => {
            f.simulated = match value {
                "yes" => true,
                "no" => false,
                _ => return Err(bad("simulated", "yes or no")),
            }
        }
        _ => {}
    }
    Ok(())
}

/// The header the fields make, checked at the column line `line`.
fn header_of(f: &Fields, line: u64, name: &str) -> Result<TxRecordHeader, TxRecordError> {
    let missing = |field| TxRecordError::at_line(name, line, 0, field, TxErrorKind::MissingField);
    let first_slot = f.first_slot.ok_or_else(|| missing("first_slot"))?;
    let slot_count = f.slot_count.ok_or_else(|| missing("slot_count"))?;
    if first_slot.checked_add(slot_count).is_none() {
        return Err(TxRecordError::at_line(
            name,
            line,
            0,
            "slot_count",
            TxErrorKind::Common(ErrorKind::OutOfRange {
                value: slot_count,
                min: 0,
                max: u64::MAX - first_slot,
            }),
        ));
    }
    let hello = match (f.hello_t, f.hello_slot) {
        (Some(t), Some(s)) => Some((t, s)),
        (None, None) => None,
        (None, Some(_)) => return Err(missing("hello_t_ps")),
        (Some(_), None) => return Err(missing("hello_slot")),
    };
    let mut flags = 0;
    if f.marker {
        flags |= FLAG_MARKER;
    }
    if hello.is_some() {
        flags |= FLAG_HELLO;
    }
    if f.simulated {
        flags |= FLAG_SIMULATED;
    }
    Ok(TxRecordHeader {
        version: FORMAT_VERSION,
        protocol: f.protocol,
        intensity_classes: f.classes.unwrap_or(3),
        flags,
        block_slots: super::DEFAULT_BLOCK_SLOTS,
        first_slot,
        slot_count,
        hello,
    })
}

/// One data line's choice; errors name line, column and field.
fn data_line(
    text: &str,
    line: u64,
    h: &TxRecordHeader,
    name: &str,
) -> Result<(u64, TxChoice), TxRecordError> {
    let cols: Vec<&str> = text.split(',').map(str::trim).collect();
    let at = |column: u32, field, kind| TxRecordError::at_line(name, line, column, field, kind);
    let bad = |column: u32, field, found: &str, expected| {
        at(
            column,
            field,
            TxErrorKind::BadValue {
                found: found.to_owned(),
                expected,
            },
        )
    };
    let [slot, basis, bit, intensity] = cols.as_slice() else {
        return Err(bad(
            0,
            "columns",
            text,
            "four values: slot,basis,bit,intensity",
        ));
    };
    let slot_no = slot
        .parse::<u64>()
        .map_err(|_| bad(1, "slot", slot, "a slot number 0..2^64"))?;
    let vacuum = intensity.eq_ignore_ascii_case("vacuum");
    let basis_v = match *basis {
        "Z" | "z" => Some(Basis::Z),
        "X" | "x" => Some(Basis::X),
        "-" if vacuum => None,
        _ => return Err(bad(2, "basis", basis, "Z or X (or - for vacuum)")),
    };
    let bit_v = match *bit {
        "0" => Some(0),
        "1" => Some(1),
        "-" if vacuum => None,
        _ => return Err(bad(3, "bit", bit, "0 or 1 (or - for vacuum)")),
    };
    let c = if vacuum {
        if basis_v.is_some_and(|b| b != Basis::Z) || bit_v.is_some_and(|b| b != 0) {
            return Err(bad(
                2,
                "basis",
                basis,
                "- (or Z with bit 0) for a vacuum slot",
            ));
        }
        TxChoice {
            basis: Basis::Z,
            bit: 0,
            intensity: MARKER_VACUUM,
        }
    } else {
        let class = intensity
            .parse::<u8>()
            .ok()
            .filter(|&c| c < h.intensity_classes)
            .ok_or_else(|| {
                bad(
                    4,
                    "intensity",
                    intensity,
                    "an intensity class below intensity_classes, or vacuum",
                )
            })?;
        TxChoice {
            basis: basis_v.unwrap_or(Basis::Z),
            bit: bit_v.unwrap_or(0),
            intensity: class,
        }
    };
    if !h.range().contains(&slot_no) {
        let range = h.range();
        return Err(at(
            1,
            "slot",
            TxErrorKind::OutsideRange {
                slot: slot_no,
                range,
            },
        ));
    }
    Ok((slot_no, c))
}

/// Read the sparse form from `r` (file name `name`); the first fault is the error.
pub fn read_sparse<R: BufRead>(r: R, name: &str) -> Result<TxRecord, TxRecordError> {
    let mut fields = Fields::default();
    let mut header: Option<TxRecordHeader> = None;
    let (mut slots, mut codes) = (Vec::new(), Vec::new());
    let mut line_no = 0u64;
    for line in r.lines() {
        line_no += 1;
        let text = line.map_err(|e| {
            TxRecordError::at_line(
                name,
                line_no,
                0,
                "file",
                TxErrorKind::Common(ErrorKind::Io {
                    kind: e.kind(),
                    message: e.to_string(),
                }),
            )
        })?;
        let text = text.trim_end_matches('\r');
        let trimmed = text.trim();
        if trimmed.is_empty() {
            continue;
        }
        if trimmed.starts_with('#') {
            if header.is_none() {
                header_line(&mut fields, text, line_no, name)?;
            }
            continue;
        }
        let Some(h) = &header else {
            let normal: String = trimmed
                .split(',')
                .map(str::trim)
                .collect::<Vec<_>>()
                .join(",");
            if normal != COLUMNS {
                return Err(TxRecordError::at_line(
                    name,
                    line_no,
                    1,
                    "columns",
                    TxErrorKind::BadValue {
                        found: trimmed.to_owned(),
                        expected: "the column line slot,basis,bit,intensity",
                    },
                ));
            }
            header = Some(header_of(&fields, line_no, name)?);
            continue;
        };
        let (slot, c) = data_line(text, line_no, h, name)?;
        if let Some(&previous) = slots.last() {
            if slot <= previous {
                return Err(TxRecordError::at_line(
                    name,
                    line_no,
                    1,
                    "slot",
                    TxErrorKind::NotAscending { slot, previous },
                ));
            }
        }
        slots.push(slot);
        codes.push(encode_choice(Some(c)).unwrap_or(super::CODE_NOT_RECORDED));
    }
    let Some(h) = header else {
        return Err(TxRecordError::at_line(
            name,
            line_no + 1,
            0,
            "columns",
            TxErrorKind::MissingField,
        ));
    };
    Ok(TxRecord::sparse(h, slots, codes, name))
}
