//! CSV in and out: `t_ps,channel` lines, so captures from any time tagger can be replayed and
//! ours can be read by any tool.
//!
//! Import: a required header line exactly `t_ps,channel`, then one `t_ps,channel` pair per line
//! (decimal, spaces around values allowed); lines starting with `#` are comments; blank lines
//! may only close the file. Each line becomes a `TdcEvent` with `count = t_ps`, i.e. a 64-bit
//! counter ticking in 1 ps ([`csv_header`]). Export writes raw `count × resolution` or, with
//! [`CsvTime::Unwrapped`], the time from the core's `slotwise::Unwrapper` so `t_ps` does not
//! jump back at a counter wrap.
#![warn(missing_docs)]

use std::fmt;
use std::io::{self, BufRead, Read, Write};

use slotwise::timestamps::UnwrapError;
use slotwise::{TdcEvent, UnwrapConfig, Unwrapper};

use crate::capture::{CaptureError, CaptureHeader, CaptureReader, CaptureWriter, FLAG_IMPORTED};

/// The header line every CSV capture starts with.
pub const CSV_HEADER: &str = "t_ps,channel";

/// Whether `slotwise replay` reads `path` as CSV rather than as a capture: by its `.csv`
/// extension, as `slotwise inspect` picks key files by `.swkey`.
pub fn is_csv_path(path: &std::path::Path) -> bool {
    path.extension().is_some_and(|e| e == "csv")
}

/// What was wrong with a CSV line.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum CsvErrorKind {
    /// The input has no header line.
    MissingHeader,
    /// The first line is not exactly `t_ps,channel`.
    BadHeader,
    /// The field is not a decimal number in range (`t_ps`: u64, `channel`: 0..=255).
    BadNumber,
    /// The line has fewer than two fields.
    MissingField,
    /// The line has more than two fields.
    ExtraField,
    /// A blank line followed by more data.
    BlankLine,
    /// The line is not UTF-8.
    NotUtf8,
    /// The event's channel is not below the capture's channel count.
    ChannelOutOfRange {
        /// Channel count of the capture being written.
        channel_count: u8,
    },
    /// The underlying reader failed.
    Io {
        /// The I/O error's kind.
        kind: io::ErrorKind,
        /// The I/O error's message.
        message: String,
    },
}

/// A CSV line could not be read: file, 1-based line number, field and the offending text.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct CsvError {
    /// Name of the file as given to the reader.
    pub source: String,
    /// Line number, counting from 1.
    pub line: u64,
    /// `header`, `t_ps`, `channel` or `line`.
    pub field: &'static str,
    /// The offending text (the field, or the whole line).
    pub text: String,
    /// What was wrong.
    pub kind: CsvErrorKind,
}

impl fmt::Display for CsvErrorKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::MissingHeader => write!(f, "no header line; expected \"{CSV_HEADER}\""),
            Self::BadHeader => write!(
                f,
                "header must be exactly \"{CSV_HEADER}\" (no other columns)"
            ),
            Self::BadNumber => write!(f, "not a decimal number in range"),
            Self::MissingField => write!(f, "missing field; expected \"t_ps,channel\""),
            Self::ExtraField => write!(f, "more than two fields; expected \"t_ps,channel\""),
            Self::BlankLine => write!(f, "blank line before more data"),
            Self::NotUtf8 => write!(f, "line is not UTF-8"),
            Self::ChannelOutOfRange { channel_count } => {
                write!(f, "channel is not below the channel count {channel_count}")
            }
            Self::Io { kind, message } => write!(f, "I/O error ({kind:?}): {message}"),
        }
    }
}

impl fmt::Display for CsvError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "{}: line {}, field '{}': {} (text \"{}\")",
            self.source, self.line, self.field, self.kind, self.text
        )
    }
}

impl std::error::Error for CsvError {}

/// Streams events out of CSV text, one line at a time.
#[derive(Debug)]
pub struct CsvReader<R> {
    r: R,
    source: String,
    line: u64,
    event_line: u64,
    blank_line: Option<u64>,
    buf: Vec<u8>,
    done: bool,
}

impl<R: BufRead> CsvReader<R> {
    /// Read up to and including the header line; `source_name` names the file in errors.
    pub fn new(r: R, source_name: &str) -> Result<Self, CsvError> {
        let mut reader = Self {
            r,
            source: source_name.to_owned(),
            line: 0,
            event_line: 0,
            blank_line: None,
            buf: Vec::new(),
            done: false,
        };
        loop {
            let Some(text) = reader.next_line()? else {
                return Err(reader.error("header", String::new(), CsvErrorKind::MissingHeader));
            };
            let t = text.trim();
            if t.starts_with('#') {
                continue;
            }
            if t != CSV_HEADER {
                return Err(reader.error("header", t.to_owned(), CsvErrorKind::BadHeader));
            }
            return Ok(reader);
        }
    }

    /// Line number of the last event returned (0 before the first).
    pub fn event_line(&self) -> u64 {
        self.event_line
    }

    fn error(&self, field: &'static str, text: String, kind: CsvErrorKind) -> CsvError {
        CsvError {
            source: self.source.clone(),
            line: self.line,
            field,
            text,
            kind,
        }
    }

    /// The next line without its line ending, or `None` at the end of the input.
    fn next_line(&mut self) -> Result<Option<String>, CsvError> {
        self.buf.clear();
        let n = self.r.read_until(b'\n', &mut self.buf).map_err(|e| {
            self.error(
                "line",
                String::new(),
                CsvErrorKind::Io {
                    kind: e.kind(),
                    message: e.to_string(),
                },
            )
        })?;
        if n == 0 {
            return Ok(None);
        }
        self.line += 1;
        let mut bytes = self.buf.as_slice();
        for end in [b'\n', b'\r'] {
            if let Some(rest) = bytes.strip_suffix(&[end]) {
                bytes = rest;
            }
        }
        match std::str::from_utf8(bytes) {
            Ok(s) => Ok(Some(s.to_owned())),
            Err(_) => Err(self.error(
                "line",
                String::from_utf8_lossy(bytes).into_owned(),
                CsvErrorKind::NotUtf8,
            )),
        }
    }

    fn parse(&self, text: &str) -> Result<TdcEvent, CsvError> {
        let mut fields = text.split(',');
        let t = fields.next().unwrap_or_default().trim();
        let Some(c) = fields.next().map(str::trim) else {
            return Err(self.error("channel", text.to_owned(), CsvErrorKind::MissingField));
        };
        if fields.next().is_some() {
            return Err(self.error("line", text.to_owned(), CsvErrorKind::ExtraField));
        }
        let digits = |s: &str| !s.is_empty() && s.bytes().all(|b| b.is_ascii_digit());
        let count = digits(t)
            .then(|| t.parse::<u64>().ok())
            .flatten()
            .ok_or_else(|| self.error("t_ps", t.to_owned(), CsvErrorKind::BadNumber))?;
        let channel = digits(c)
            .then(|| c.parse::<u8>().ok())
            .flatten()
            .ok_or_else(|| self.error("channel", c.to_owned(), CsvErrorKind::BadNumber))?;
        Ok(TdcEvent { count, channel })
    }

    fn next_event(&mut self) -> Result<Option<TdcEvent>, CsvError> {
        while let Some(text) = self.next_line()? {
            let t = text.trim();
            if t.is_empty() {
                self.blank_line.get_or_insert(self.line);
                continue;
            }
            if t.starts_with('#') {
                continue;
            }
            if let Some(blank) = self.blank_line {
                let mut e = self.error("line", String::new(), CsvErrorKind::BlankLine);
                e.line = blank;
                return Err(e);
            }
            let ev = self.parse(&text)?;
            self.event_line = self.line;
            return Ok(Some(ev));
        }
        Ok(None)
    }
}

impl<R: BufRead> Iterator for CsvReader<R> {
    type Item = Result<TdcEvent, CsvError>;

    /// The next event; after an error the iterator ends.
    fn next(&mut self) -> Option<Self::Item> {
        if self.done {
            return None;
        }
        let item = self.next_event().transpose();
        if !matches!(item, Some(Ok(_))) {
            self.done = true;
        }
        item
    }
}

/// Read every event of a CSV capture.
pub fn read_csv<R: BufRead>(r: R, source_name: &str) -> Result<Vec<TdcEvent>, CsvError> {
    CsvReader::new(r, source_name)?.collect()
}

/// A capture header for CSV events: 64-bit counter at 1 ps, [`FLAG_IMPORTED`] set.
pub fn csv_header(channel_count: u8) -> CaptureHeader {
    CaptureHeader {
        version: crate::capture::FORMAT_VERSION,
        counter_bits: 64,
        channel_count,
        resolution_ps: 1,
        flags: FLAG_IMPORTED,
        max_block_events: crate::capture::DEFAULT_BLOCK_EVENTS,
        block_count: 0,
        metadata: String::new(),
    }
}

/// How exported `t_ps` values are made from raw counter values.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum CsvTime {
    /// `t_ps = count × resolution_ps`; a wrapping counter makes `t_ps` jump back at each wrap.
    Raw {
        /// Tick length in picoseconds.
        resolution_ps: u32,
    },
    /// `t_ps` from the core's unwrapper: no jumps at wraps (reordered neighbours stay reordered).
    Unwrapped(UnwrapConfig),
}

/// Why an event could not be exported.
#[derive(Debug)]
pub enum CsvWriteErrorKind {
    /// Writing failed.
    Io(io::Error),
    /// The core's unwrapper refused the event.
    Unwrap(UnwrapError),
    /// `count × resolution_ps` does not fit 64 bits.
    Overflow,
}

/// An event could not be exported: which one (0-based) and why.
#[derive(Debug)]
pub struct CsvWriteError {
    /// Index of the event in the exported stream, from 0.
    pub event: u64,
    /// What went wrong.
    pub kind: CsvWriteErrorKind,
}

impl fmt::Display for CsvWriteError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "CSV export, event {}: ", self.event)?;
        match &self.kind {
            CsvWriteErrorKind::Io(e) => write!(f, "I/O error: {e}"),
            CsvWriteErrorKind::Unwrap(e) => write!(f, "{e}"),
            CsvWriteErrorKind::Overflow => write!(f, "t_ps overflows 64 bits"),
        }
    }
}

impl std::error::Error for CsvWriteError {}

#[derive(Debug)]
enum TimeBase {
    Raw(u64),
    Unwrapped(Unwrapper),
}

/// Writes `t_ps,channel` lines, header first.
#[derive(Debug)]
pub struct CsvWriter<W: Write> {
    w: W,
    time: TimeBase,
    events: u64,
}

impl<W: Write> CsvWriter<W> {
    /// Write the header line; times are made as `time` says.
    pub fn new(mut w: W, time: CsvTime) -> io::Result<Self> {
        writeln!(w, "{CSV_HEADER}")?;
        let time = match time {
            CsvTime::Raw { resolution_ps } => TimeBase::Raw(resolution_ps.into()),
            CsvTime::Unwrapped(cfg) => TimeBase::Unwrapped(Unwrapper::new(cfg)),
        };
        Ok(Self { w, time, events: 0 })
    }

    /// Write one event's line.
    pub fn push(&mut self, ev: TdcEvent) -> Result<(), CsvWriteError> {
        let fail = |kind| CsvWriteError {
            event: self.events,
            kind,
        };
        let t_ps = match &mut self.time {
            TimeBase::Raw(res) => ev
                .count
                .checked_mul(*res)
                .ok_or_else(|| fail(CsvWriteErrorKind::Overflow))?,
            TimeBase::Unwrapped(u) => {
                u.unwrap(ev)
                    .map_err(|e| fail(CsvWriteErrorKind::Unwrap(e)))?
                    .t_ps
            }
        };
        writeln!(self.w, "{t_ps},{}", ev.channel).map_err(|e| fail(CsvWriteErrorKind::Io(e)))?;
        self.events += 1;
        Ok(())
    }

    /// Flush and hand back the sink.
    pub fn finish(mut self) -> io::Result<W> {
        self.w.flush()?;
        Ok(self.w)
    }
}

/// Write `events` as CSV with a header line.
pub fn write_csv<W: Write>(w: W, events: &[TdcEvent], time: CsvTime) -> Result<W, CsvWriteError> {
    let io_err = |event, e| CsvWriteError {
        event,
        kind: CsvWriteErrorKind::Io(e),
    };
    let mut writer = CsvWriter::new(w, time).map_err(|e| io_err(0, e))?;
    events.iter().try_for_each(|&ev| writer.push(ev))?;
    let n = writer.events;
    writer.finish().map_err(|e| io_err(n, e))
}

/// Why a conversion between capture and CSV stopped.
#[derive(Debug)]
pub enum ConvertError {
    /// The capture could not be read.
    Capture(CaptureError),
    /// The CSV input could not be read.
    Csv(CsvError),
    /// The CSV output could not be written.
    CsvWrite(CsvWriteError),
    /// The capture output could not be written.
    Io(io::Error),
}

impl fmt::Display for ConvertError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Capture(e) => e.fmt(f),
            Self::Csv(e) => e.fmt(f),
            Self::CsvWrite(e) => e.fmt(f),
            Self::Io(e) => write!(f, "writing the capture: {e}"),
        }
    }
}

impl std::error::Error for ConvertError {}

/// Stream every event of a capture (strict reader) into CSV; returns the sink and the events
/// written. `unwrap` exports unwrapped times via the core's unwrapper, else raw counts × tick.
pub fn capture_to_csv<R: Read, W: Write>(
    reader: &mut CaptureReader<R>,
    w: W,
    unwrap: bool,
) -> Result<(W, u64), ConvertError> {
    let h = reader.header();
    let time = match (unwrap, h.unwrap_config()) {
        (true, Some(cfg)) => CsvTime::Unwrapped(cfg),
        _ => CsvTime::Raw {
            resolution_ps: h.resolution_ps,
        },
    };
    let mut csv = CsvWriter::new(w, time).map_err(ConvertError::Io)?;
    let mut block = Vec::new();
    while reader
        .next_block(&mut block)
        .map_err(ConvertError::Capture)?
        .is_some()
    {
        for &ev in &block {
            csv.push(ev).map_err(ConvertError::CsvWrite)?;
        }
    }
    let n = csv.events;
    let w = csv.finish().map_err(ConvertError::Io)?;
    Ok((w, n))
}

/// Stream every CSV event into a capture writer; returns the events written. A channel the
/// capture's header does not allow is reported with its CSV line.
pub fn csv_to_capture<R: BufRead, W: Write>(
    csv: &mut CsvReader<R>,
    writer: &mut CaptureWriter<W>,
) -> Result<u64, ConvertError> {
    let channel_count = writer.header().channel_count;
    let mut n = 0;
    while let Some(ev) = csv.next() {
        let ev = ev.map_err(ConvertError::Csv)?;
        if ev.channel >= channel_count {
            return Err(ConvertError::Csv(CsvError {
                source: csv.source.clone(),
                line: csv.event_line(),
                field: "channel",
                text: ev.channel.to_string(),
                kind: CsvErrorKind::ChannelOutOfRange { channel_count },
            }));
        }
        writer.push(ev).map_err(ConvertError::Io)?;
        n += 1;
    }
    Ok(n)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn parse(text: &str) -> Result<Vec<TdcEvent>, CsvError> {
        read_csv(text.as_bytes(), "t.csv")
    }

    #[test]
    fn reads_comments_crlf_and_trailing_blank_lines() {
        let got =
            parse("# from a bench\r\nt_ps,channel\r\n10,0\r\n# mid\r\n 25 , 3\r\n\r\n\n").unwrap();
        assert_eq!(
            got,
            [
                TdcEvent {
                    count: 10,
                    channel: 0
                },
                TdcEvent {
                    count: 25,
                    channel: 3
                }
            ]
        );
    }

    #[test]
    fn errors_name_line_field_and_text() {
        let e = parse("t_ps,channel,gate\n1,0\n").unwrap_err();
        assert_eq!(
            (e.line, e.field, e.kind),
            (1, "header", CsvErrorKind::BadHeader)
        );
        let e = parse("t_ps,channel\n1,0\n-5,1\n").unwrap_err();
        assert_eq!((e.line, e.field, e.text.as_str()), (3, "t_ps", "-5"));
        let e = parse("t_ps,channel\n1,256\n").unwrap_err();
        assert_eq!((e.line, e.field, e.text.as_str()), (2, "channel", "256"));
        let e = parse("t_ps,channel\n1\n").unwrap_err();
        assert_eq!(
            (e.line, e.field, e.kind),
            (2, "channel", CsvErrorKind::MissingField)
        );
        let e = parse("t_ps,channel\n1,2,3\n").unwrap_err();
        assert_eq!(
            (e.line, e.field, e.kind),
            (2, "line", CsvErrorKind::ExtraField)
        );
        let e = parse("t_ps,channel\n1,2\n\n3,4\n").unwrap_err();
        assert_eq!((e.line, e.kind), (3, CsvErrorKind::BlankLine));
        let e = parse("# only a comment\n").unwrap_err();
        assert_eq!(e.kind, CsvErrorKind::MissingHeader);
        let e = parse("t_ps,channel\n18446744073709551616,0\n").unwrap_err();
        assert_eq!((e.field, e.kind.clone()), ("t_ps", CsvErrorKind::BadNumber));
        assert!(e.to_string().starts_with("t.csv: line 2, field 't_ps'"));
    }

    #[test]
    fn unwrapped_export_is_monotonic_across_a_wrap() {
        let cfg = UnwrapConfig::new(32, 2).unwrap();
        let events =
            [0xFFFF_FFF0u64, 0xFFFF_FFFF, 0x5, 0x40].map(|count| TdcEvent { count, channel: 0 });
        let raw = write_csv(Vec::new(), &events, CsvTime::Raw { resolution_ps: 2 }).unwrap();
        let raw = String::from_utf8(raw).unwrap();
        assert!(raw.contains("\n10,0\n"), "raw export jumps back: {raw}");
        let un = write_csv(Vec::new(), &events, CsvTime::Unwrapped(cfg)).unwrap();
        let t: Vec<u64> = String::from_utf8(un)
            .unwrap()
            .lines()
            .skip(1)
            .map(|l| l.split(',').next().unwrap().parse().unwrap())
            .collect();
        let base = 0xFFFF_FFF0u64 * 2;
        assert_eq!(t, [base, base + 30, base + 42, base + 160]);
    }
}
