//! Text exports: delimited lines with a time column and a channel column.

use std::fmt;
use std::io::{self, BufRead, BufReader, Seek, Write};
use std::path::Path;
use std::str::FromStr;

use slotwise::TdcEvent;

use super::decimal::{parse_decimal, TimeUnit};
use super::text_fast::FastLines;
use super::{close_capture, file_to_file, open_capture, CaptureTdc, ImportError, ImportSummary};
use super::{MAX_CAPTURE_CHANNEL, MAX_LINE_BYTES, READ_BLOCK_BYTES};
use crate::capture::CaptureWriter;

/// A column of a text export: by its header name, or by its number counted from 1.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Column {
    /// The column whose header field is this name.
    Name(String),
    /// The column at this position, counted from 1.
    Number(usize),
}

impl FromStr for Column {
    type Err = String;

    fn from_str(s: &str) -> Result<Self, String> {
        match s.parse::<usize>() {
            Ok(0) => Err("columns are numbered from 1".into()),
            Ok(n) => Ok(Self::Number(n)),
            Err(_) if s.is_empty() => Err("empty column name".into()),
            Err(_) => Ok(Self::Name(s.to_owned())),
        }
    }
}

/// What separates the fields of a line.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Delimiter {
    /// One character (`,`, `;`, `\t` …).
    Char(char),
    /// Any run of spaces and tabs.
    Whitespace,
}

impl FromStr for Delimiter {
    type Err = String;

    fn from_str(s: &str) -> Result<Self, String> {
        match s {
            "whitespace" | "space" => Ok(Self::Whitespace),
            "tab" | "\\t" => Ok(Self::Char('\t')),
            _ => {
                let mut c = s.chars();
                match (c.next(), c.next()) {
                    (Some(ch), None) => Ok(Self::Char(ch)),
                    _ => Err(format!(
                        "expected one character, 'tab' or 'whitespace', got {s:?}"
                    )),
                }
            }
        }
    }
}

/// Input channel numbers mapped to capture channels (`1=0,2=1,5=2`).
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct ChannelMap(pub Vec<(i64, u8)>);

impl FromStr for ChannelMap {
    type Err = String;

    fn from_str(s: &str) -> Result<Self, String> {
        let mut pairs: Vec<(i64, u8)> = Vec::new();
        for item in s.split(',').map(str::trim).filter(|i| !i.is_empty()) {
            let (from, to) = item
                .split_once('=')
                .ok_or_else(|| format!("{item:?}: expected INPUT=CHANNEL"))?;
            let from: i64 = from
                .trim()
                .parse()
                .map_err(|_| format!("{item:?}: input channel is not an integer"))?;
            let to: u8 = to
                .trim()
                .parse()
                .ok()
                .filter(|c| *c <= MAX_CAPTURE_CHANNEL)
                .ok_or_else(|| {
                    format!("{item:?}: capture channel is not in 0..={MAX_CAPTURE_CHANNEL}")
                })?;
            if pairs.iter().any(|(f, _)| *f == from) {
                return Err(format!("input channel {from} is mapped twice"));
            }
            pairs.push((from, to));
        }
        if pairs.is_empty() {
            return Err("empty channel map".into());
        }
        Ok(Self(pairs))
    }
}

impl ChannelMap {
    fn get(&self, from: i64) -> Option<u8> {
        self.0.iter().find(|(f, _)| *f == from).map(|(_, t)| *t)
    }
}

/// A text import's options, as given.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct TextImport {
    /// Field separator.
    pub delimiter: Delimiter,
    /// The first line that is neither blank nor a comment names the columns.
    pub header: bool,
    /// Where the time is.
    pub time: Column,
    /// Where the channel is.
    pub channel: Column,
    /// Unit of the time column.
    pub unit: TimeUnit,
    /// Input channels to capture channels; without it the input channel is the capture channel.
    pub channel_map: Option<ChannelMap>,
    /// Lines starting with this (after leading spaces) are comments; empty: no comments.
    pub comment: String,
    /// The capture's counter width (bits), tick (ps) and highest channel.
    pub tdc: CaptureTdc,
}

/// Summary row of events whose channel the map does not name.
pub(super) const DROP_UNMAPPED: &str = "channel not in map";
/// Summary row of events on a channel above the highest one.
pub(super) const DROP_RANGE: &str = "channel out of range";

/// Running counts of a text import.
#[derive(Default)]
struct Tally {
    lines: u64,
    header: u64,
    comment: u64,
    blank: u64,
    imported: u64,
    unmapped: u64,
    out_of_range: u64,
}

/// Column positions (from 0) and names for messages, known after the header.
struct Resolved {
    time: (usize, String),
    channel: (usize, String),
}

impl TextImport {
    /// The highest capture channel: `--max-channel`, else the map's highest target.
    pub fn max_channel(given: Option<u8>, map: Option<&ChannelMap>) -> Result<u8, ImportError> {
        let from_map = map.and_then(|m| m.0.iter().map(|(_, t)| *t).max());
        match (given, from_map) {
            (Some(g), Some(m)) if m > g => Err(ImportError::Options(format!(
                "--channel-map sends events to channel {m}, above --max-channel {g}"
            ))),
            (Some(g), _) => Ok(g),
            (None, Some(m)) => Ok(m),
            (None, None) => Err(ImportError::Options(
                "give --max-channel N (the capture holds channels 0..=N) or a --channel-map".into(),
            )),
        }
    }

    /// Import the file `input` into the capture `out`; `progress` gets the input bytes read.
    pub fn run_file(
        &self,
        input: &Path,
        out: &Path,
        progress: impl FnMut(u64),
    ) -> Result<ImportSummary, ImportError> {
        file_to_file(input, out, |file, name, w, out_name| {
            let r = BufReader::with_capacity(READ_BLOCK_BYTES, file);
            self.run(r, name, w, out_name, progress)
        })
    }

    fn check(&self) -> Result<(), ImportError> {
        self.tdc.validate()?;
        if [&self.time, &self.channel].contains(&&Column::Number(0)) {
            return Err(ImportError::Options("columns are numbered from 1".into()));
        }
        // The capture writer would refuse such an event mid-file, with no line to name.
        if let Some(m) = self
            .channel_map
            .as_ref()
            .and_then(|m| m.0.iter().map(|(_, t)| *t).max())
        {
            if m > self.tdc.max_channel {
                return Err(ImportError::Options(format!(
                    "--channel-map sends events to channel {m}, above the highest channel {}",
                    self.tdc.max_channel
                )));
            }
        }
        if !self.header {
            for (opt, col) in [
                ("--time-column", &self.time),
                ("--channel-column", &self.channel),
            ] {
                if let Column::Name(n) = col {
                    return Err(ImportError::Options(format!(
                        "{opt} {n:?} names a column, but --no-header says there is no header \
                         line: give its number (from 1)"
                    )));
                }
            }
        }
        Ok(())
    }

    /// Import the lines read from `r` (named `source` in errors) into a capture on `w`.
    pub fn run<R: BufRead, W: Write + Seek>(
        &self,
        mut r: R,
        source: &str,
        w: W,
        out_name: &str,
        mut progress: impl FnMut(u64),
    ) -> Result<(ImportSummary, W), ImportError> {
        self.check()?;
        let mut writer = open_capture(w, &self.tdc, out_name)?;
        let mask = self.tdc.counter_mask();
        let mut t = Tally::default();
        let mut resolved = match self.header {
            true => None,
            false => Some(
                self.resolve(None)
                    .map_err(|(_, reason)| ImportError::Options(reason))?,
            ),
        };
        let mut fast = resolved.as_ref().and_then(|c| self.fast(c));
        let mut read = 0u64;
        // A line cut by the end of the reader's buffer, completed from the next one.
        let mut carry: Vec<u8> = Vec::new();
        let mut lines = Lines {
            source,
            out_name,
            mask,
            writer: &mut writer,
            t: &mut t,
        };
        loop {
            let buf = match r.fill_buf() {
                Ok(b) => b,
                Err(e) if e.kind() == io::ErrorKind::Interrupted => continue,
                Err(e) => return Err(ImportError::io(source, e)),
            };
            if buf.is_empty() {
                if !carry.is_empty() {
                    read += carry.len() as u64;
                    self.line(&carry, &mut lines, &mut resolved, &mut fast)?;
                    if lines.t.lines.is_multiple_of(4096) {
                        progress(read);
                    }
                }
                break;
            }
            let len = buf.len();
            let mut start = 0;
            for end in memchr::memchr_iter(b'\n', buf) {
                let head = buf.get(start..=end).unwrap_or_default();
                start = end + 1;
                let raw = if carry.is_empty() {
                    head
                } else {
                    carry.extend_from_slice(head);
                    &carry
                };
                read += raw.len() as u64;
                self.line(raw, &mut lines, &mut resolved, &mut fast)?;
                carry.clear();
                if lines.t.lines.is_multiple_of(4096) {
                    progress(read);
                }
            }
            carry.extend_from_slice(buf.get(start..).unwrap_or_default());
            if carry.len() > MAX_LINE_BYTES {
                lines.t.lines += 1;
                return Err(lines.error(lines.t.lines, "line", "", too_long()));
            }
            r.consume(len);
        }
        progress(read);
        let (blocks, sink) = close_capture(writer, out_name)?;
        let summary = ImportSummary {
            source: source.to_owned(),
            unit: "line",
            total: t.lines,
            imported: t.imported,
            other: vec![
                ("header", t.header),
                ("comment", t.comment),
                ("blank", t.blank),
            ],
            dropped: vec![(DROP_UNMAPPED, t.unmapped), (DROP_RANGE, t.out_of_range)],
            blocks,
            counter_bits: self.tdc.counter_bits,
            tick_ps: self.tdc.tick_ps,
            channel_count: self.tdc.max_channel + 1,
            ingest: Vec::new(),
        };
        Ok((summary, sink))
    }

    /// The fast path for data lines under the columns `cols`, if these options allow one.
    fn fast(&self, cols: &Resolved) -> Option<FastLines> {
        FastLines::new(
            self.delimiter,
            &self.comment,
            (cols.time.0, cols.channel.0),
            self.unit,
            self.channel_map.as_ref(),
            self.tdc.tick_ps,
            self.tdc.max_channel,
        )
    }

    /// One line as read, its `\n` included (absent only at the end of the input).
    fn line<W: Write>(
        &self,
        raw: &[u8],
        l: &mut Lines<'_, W>,
        resolved: &mut Option<Resolved>,
        fast: &mut Option<FastLines>,
    ) -> Result<(), ImportError> {
        l.t.lines += 1;
        let line_no = l.t.lines;
        let content = raw.strip_suffix(b"\n").unwrap_or(raw);
        if content.len() <= MAX_LINE_BYTES {
            if let Some(ev) = fast.as_ref().and_then(|f| f.event(content)) {
                return l.push(ev);
            }
        }
        let source = l.source;
        let err = move |field: &str, text: &str, reason: String| {
            line_error(source, line_no, field, text, reason)
        };
        if content.len() > MAX_LINE_BYTES {
            return Err(err("line", "", too_long()));
        }
        let line = std::str::from_utf8(raw)
            .map_err(|_| err("line", &String::from_utf8_lossy(raw), "not UTF-8".into()))?;
        let line = line.trim_end_matches(['\n', '\r']);
        let trimmed = line.trim_start();
        if trimmed.trim_end().is_empty() {
            l.t.blank += 1;
        } else if !self.comment.is_empty() && trimmed.starts_with(self.comment.as_str()) {
            l.t.comment += 1;
        } else if let Some(cols) = resolved {
            let ev = self.event(line, cols, &err)?;
            l.push(ev)?;
        } else {
            l.t.header += 1;
            let names: Vec<&str> = self.fields(line).collect();
            let cols = self
                .resolve(Some(&names))
                .map_err(|(field, reason)| err(&field, line, reason))?;
            *fast = self.fast(&cols);
            *resolved = Some(cols);
        }
        Ok(())
    }

    fn fields<'a>(&self, line: &'a str) -> impl Iterator<Item = &'a str> + 'a {
        let parts: Box<dyn Iterator<Item = &'a str>> = match self.delimiter {
            Delimiter::Char(c) => Box::new(line.split(c)),
            Delimiter::Whitespace => Box::new(line.split_whitespace()),
        };
        parts.map(|f| {
            let f = f.trim();
            f.strip_prefix('"')
                .and_then(|g| g.strip_suffix('"'))
                .unwrap_or(f)
        })
    }

    /// Column positions from the header's names (or from the numbers given, without a header).
    fn resolve(&self, names: Option<&[&str]>) -> Result<Resolved, (String, String)> {
        let find = |col: &Column, role: &str| -> Result<(usize, String), (String, String)> {
            match (col, names) {
                (Column::Number(n), Some(names)) => Ok((
                    n - 1,
                    names
                        .get(n - 1)
                        .map_or_else(|| format!("column {n}"), |s| s.to_string()),
                )),
                (Column::Number(n), None) => Ok((n - 1, format!("{role} (column {n})"))),
                (Column::Name(want), Some(names)) => names
                    .iter()
                    .position(|h| h == want)
                    .map(|i| (i, want.clone()))
                    .ok_or_else(|| {
                        (
                            "header".to_owned(),
                            format!("no column named {want:?} for the {role}"),
                        )
                    }),
                (Column::Name(want), None) => {
                    Err(("header".into(), format!("no header for {want:?}")))
                }
            }
        };
        Ok(Resolved {
            time: find(&self.time, "time")?,
            channel: find(&self.channel, "channel")?,
        })
    }

    /// One data line: an event, a reason to drop it, or an error naming the field.
    fn event(
        &self,
        line: &str,
        cols: &Resolved,
        err: &dyn Fn(&str, &str, String) -> ImportError,
    ) -> Result<Result<TdcEvent, &'static str>, ImportError> {
        let get = |(i, name): &(usize, String)| {
            self.fields(line).nth(*i).ok_or_else(|| {
                let n = self.fields(line).count();
                err(
                    name,
                    line,
                    format!("the line has {n} fields, column {} is missing", i + 1),
                )
            })
        };
        let time_text = get(&cols.time)?;
        let chan_text = get(&cols.channel)?;
        let count = parse_decimal(time_text)
            .and_then(|d| d.to_ticks(self.unit, self.tdc.tick_ps))
            .map_err(|e| err(&cols.time.1, time_text, format!("time: {e}")))?;
        let input: i64 = chan_text.parse().map_err(|_| {
            err(
                &cols.channel.1,
                chan_text,
                "channel: not an integer".to_owned(),
            )
        })?;
        let channel = match &self.channel_map {
            Some(map) => match map.get(input) {
                Some(c) => c,
                None => return Ok(Err(DROP_UNMAPPED)),
            },
            None => match u8::try_from(input) {
                Ok(c) if c <= self.tdc.max_channel => c,
                _ => return Ok(Err(DROP_RANGE)),
            },
        };
        Ok(Ok(TdcEvent { count, channel }))
    }
}

/// The state a line updates: the capture being written and the running counts.
struct Lines<'a, W: Write> {
    source: &'a str,
    out_name: &'a str,
    mask: u64,
    writer: &'a mut CaptureWriter<W>,
    t: &'a mut Tally,
}

impl<W: Write> Lines<'_, W> {
    /// Write a data line's event, or count why it was dropped.
    #[inline]
    fn push(&mut self, ev: Result<TdcEvent, &'static str>) -> Result<(), ImportError> {
        match ev {
            Ok(ev) => {
                let ev = TdcEvent {
                    count: ev.count & self.mask,
                    channel: ev.channel,
                };
                self.writer
                    .push(ev)
                    .map_err(|e| ImportError::io(self.out_name, e))?;
                self.t.imported += 1;
            }
            Err(DROP_UNMAPPED) => self.t.unmapped += 1,
            Err(_) => self.t.out_of_range += 1,
        }
        Ok(())
    }

    fn error(&self, line: u64, field: &str, text: &str, reason: String) -> ImportError {
        line_error(self.source, line, field, text, reason)
    }
}

/// A line error; the text is cut to 120 characters.
fn line_error(source: &str, line: u64, field: &str, text: &str, reason: String) -> ImportError {
    ImportError::Line {
        source: source.to_owned(),
        line,
        field: field.to_owned(),
        text: text.chars().take(120).collect(),
        reason,
    }
}

fn too_long() -> String {
    format!("longer than {MAX_LINE_BYTES} bytes")
}

impl fmt::Display for Column {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Name(n) => f.write_str(n),
            Self::Number(n) => write!(f, "{n}"),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    const UNITS: [TimeUnit; 5] = [
        TimeUnit::Ps,
        TimeUnit::Ns,
        TimeUnit::Us,
        TimeUnit::S,
        TimeUnit::Ticks,
    ];

    fn import(delimiter: Delimiter, unit: TimeUnit, tick_ps: u32, map: bool) -> TextImport {
        TextImport {
            delimiter,
            header: false,
            time: Column::Number(1),
            channel: Column::Number(2),
            unit,
            channel_map: map.then(|| ChannelMap(vec![(1, 0), (2, 1), (300, 2), (-1, 3)])),
            comment: "#".into(),
            tdc: CaptureTdc {
                counter_bits: 64,
                tick_ps,
                max_channel: 3,
            },
        }
    }

    /// The fast path's answer, if it gives one, and the general path's, for one line.
    type Answers = (
        Option<Result<TdcEvent, &'static str>>,
        Result<Result<TdcEvent, &'static str>, String>,
    );

    fn both(imp: &TextImport, cols: (usize, usize), line: &str) -> Answers {
        let mut imp = imp.clone();
        imp.time = Column::Number(cols.0 + 1);
        imp.channel = Column::Number(cols.1 + 1);
        let resolved = imp.resolve(None).unwrap();
        let fast = imp.fast(&resolved).expect("these options have a fast path");
        let err =
            |field: &str, text: &str, reason: String| line_error("mem.txt", 1, field, text, reason);
        let general = imp
            .event(line.trim_end_matches(['\n', '\r']), &resolved, &err)
            .map_err(|e| e.to_string());
        (fast.event(line.as_bytes()), general)
    }

    #[test]
    fn plain_lines_take_the_fast_path() {
        let imp = import(Delimiter::Char(';'), TimeUnit::Ns, 1, true);
        let ev = |count, channel| Some(Ok(TdcEvent { count, channel }));
        // 12.345 ns = 12 345 ps (SI prefix, common practice).
        assert_eq!(both(&imp, (0, 1), "12.345;2\r").0, ev(12_345, 1));
        assert_eq!(both(&imp, (1, 0), "300;7.5").0, ev(7_500, 2));
        assert_eq!(both(&imp, (0, 1), "5;9").0, Some(Err(DROP_UNMAPPED)));
        // Quotes, padding, signs and exponents are the general path's.
        for line in ["\"5\";1", "5 ;1", "+5;1", "5e1;1", "5;-1", ".5;1"] {
            assert_eq!(both(&imp, (0, 1), line).0, None, "{line}");
        }
    }

    fn field() -> impl Strategy<Value = String> {
        prop_oneof![
            4 => "[0-9]{1,21}(\\.[0-9]{0,21})?",
            4 => "[0-9]{1,4}",
            1 => "[0-9 .+\"e-]{0,6}",
            1 => "[0-9]{1,3}\\.[0-9]{1,3}e-?[0-9]",
        ]
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(3000))]

        /// Whenever the fast path decides a line, the general path decides it the same way.
        #[test]
        fn the_fast_path_agrees_with_the_general_path(
            delim in 0usize..6,
            unit in 0usize..5,
            tick_ps in prop_oneof![Just(1u32), 1u32..=20, Just(1000), Just(u32::MAX)],
            map in any::<bool>(),
            cols in (0usize..3, 0usize..3),
            fields in prop::collection::vec(field(), 1..5),
            cr in any::<bool>(),
        ) {
            let (delimiter, sep) = [
                (Delimiter::Char(','), ","),
                (Delimiter::Char(';'), ";"),
                (Delimiter::Char('\t'), "\t"),
                (Delimiter::Char(' '), " "),
                (Delimiter::Char('|'), "|"),
                (Delimiter::Whitespace, " \t "),
            ][delim];
            let imp = import(delimiter, UNITS[unit], tick_ps, map);
            let line = fields.join(sep) + if cr { "\r" } else { "" };
            if let (Some(fast), general) = both(&imp, cols, &line) {
                prop_assert_eq!(Ok(fast), general, "{:?}", line);
            }
        }
    }
}
