//! Binary exports: fixed-width records decoded by the core's ingest stage (`slotwise::ingest`,
//! which wraps the `slotwise::words` decoder), so a replayed capture of raw words shows the
//! same rollover-gap and malformed-word counts a board would.

use std::io::{ErrorKind, Read, Seek, Write};
use std::path::Path;

use slotwise::words::{RecordFate, WordFormat, WordLayout};
use slotwise::{Ingest, TdcEvent};

use super::{close_capture, file_to_file, open_capture, CaptureTdc, ImportError, ImportSummary};
use super::{ChannelMap, TextImport};
use super::{EVENT_BATCH, READ_BLOCK_BYTES};

/// A checked binary import: the record layout and the capture's TDC description.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct BinaryImport {
    format: WordFormat,
    tdc: CaptureTdc,
    /// Decoded channel to capture channel (`None`: dropped as not in the map), when mapped.
    map: Option<[Option<u8>; 256]>,
}

impl BinaryImport {
    /// Check `layout` with the core's [`WordFormat::new`] and the capture's counter width.
    ///
    /// `counter_bits` defaults to 64 with rollover records and to the time field's width without
    /// them. Without rollover records the counter wraps at the time field's width, so the
    /// capture's counter must be exactly that wide (32..=64 bits).
    pub fn new(
        layout: WordLayout,
        counter_bits: Option<u8>,
        tick_ps: u32,
    ) -> Result<Self, ImportError> {
        let format = WordFormat::new(layout)
            .map_err(|e| ImportError::Options(format!("record layout: {e}")))?;
        let time_bits = layout.time.width;
        let counter_bits = match (layout.kind, counter_bits) {
            (Some(_), bits) => bits.unwrap_or(64),
            (None, None) => time_bits,
            (None, Some(b)) if b == time_bits => b,
            (None, Some(b)) => {
                return Err(ImportError::Options(format!(
                    "without rollover records (no --kind) the counter wraps at the {time_bits}-bit \
                     time field, so --counter-bits must be {time_bits}, not {b}"
                )))
            }
        };
        if layout.kind.is_none() && time_bits < 32 {
            return Err(ImportError::Options(format!(
                "a {time_bits}-bit time field without rollover records wraps too soon for a \
                 capture (32..=64 bits): describe the rollover records with --kind, \
                 --event-kind and --rollover-kind"
            )));
        }
        let tdc = CaptureTdc {
            counter_bits,
            tick_ps,
            max_channel: layout.max_channel,
        };
        tdc.validate()?;
        Ok(Self {
            format,
            tdc,
            map: None,
        })
    }

    /// Send decoded channels through `map` (`IN=OUT` pairs); events on other channels are
    /// dropped and counted, and the capture holds channels `0..=` the highest target.
    pub fn with_channel_map(mut self, map: &ChannelMap) -> Result<Self, ImportError> {
        let mut table = [None; 256];
        for &(from, to) in &map.0 {
            let Some(slot) = usize::try_from(from).ok().and_then(|i| table.get_mut(i)) else {
                return Err(ImportError::Options(format!(
                    "--channel-map {from}={to}: a binary channel field holds 0..=255"
                )));
            };
            *slot = Some(to);
        }
        self.tdc.max_channel = TextImport::max_channel(None, Some(map))?;
        self.tdc.validate()?;
        self.map = Some(table);
        Ok(self)
    }

    /// The capture's TDC description.
    pub fn tdc(&self) -> &CaptureTdc {
        &self.tdc
    }

    /// Import the file `input` into the capture `out`; `progress` gets the input bytes read.
    pub fn run_file(
        &self,
        input: &Path,
        out: &Path,
        progress: impl FnMut(u64),
    ) -> Result<ImportSummary, ImportError> {
        file_to_file(input, out, |file, name, w, out_name| {
            self.run(file, name, w, out_name, progress)
        })
    }

    /// Import the records read from `r` (named `source` in errors) into a capture on `w`.
    pub fn run<R: Read, W: Write + Seek>(
        &self,
        mut r: R,
        source: &str,
        w: W,
        out_name: &str,
        mut progress: impl FnMut(u64),
    ) -> Result<(ImportSummary, W), ImportError> {
        let mut writer = open_capture(w, &self.tdc, out_name)?;
        let mask = self.tdc.counter_mask();
        let mut ingest = Ingest::new(self.format);
        let mut buf = vec![0u8; READ_BLOCK_BYTES];
        let mut events = vec![
            TdcEvent {
                count: 0,
                channel: 0
            };
            EVENT_BATCH
        ];
        let mut read = 0u64;
        let mut unmapped = 0u64;
        loop {
            let n = match r.read(&mut buf) {
                Ok(0) => break,
                Ok(n) => n,
                Err(e) if e.kind() == ErrorKind::Interrupted => continue,
                Err(e) => return Err(ImportError::io(source, e)),
            };
            read += n as u64;
            let mut rest = buf.get(..n).unwrap_or_default();
            while !rest.is_empty() {
                let d = ingest.push(rest, &mut events);
                for ev in events.get(..d.events).unwrap_or_default() {
                    let channel = match &self.map {
                        None => ev.channel,
                        Some(m) => match m.get(usize::from(ev.channel)).copied().flatten() {
                            Some(c) => c,
                            None => {
                                unmapped += 1;
                                continue;
                            }
                        },
                    };
                    // The capture stores the counter modulo its width, as a TDC of that width would.
                    let ev = TdcEvent {
                        count: ev.count & mask,
                        channel,
                    };
                    writer.push(ev).map_err(|e| ImportError::io(out_name, e))?;
                }
                if d.consumed == 0 && d.events == 0 {
                    return Err(ImportError::Options(format!(
                        "{source}: the record decoder made no progress at byte {read}"
                    )));
                }
                rest = rest.get(d.consumed..).unwrap_or_default();
            }
            progress(read);
        }
        let counts = ingest.finish().map_err(|error| {
            let slotwise::words::WordError::PartialRecord { offset, .. } = error;
            ImportError::PartialRecord {
                source: source.to_owned(),
                record: offset / self.format.record_bytes() as u64,
                error,
            }
        })?;
        let (blocks, sink) = close_capture(writer, out_name)?;
        let mut summary = ImportSummary {
            source: source.to_owned(),
            unit: "record",
            total: counts.records,
            imported: counts.get(RecordFate::Event) - unmapped,
            other: vec![("rollover", counts.get(RecordFate::Rollover))],
            dropped: Vec::new(),
            blocks,
            counter_bits: self.tdc.counter_bits,
            tick_ps: self.tdc.tick_ps,
            channel_count: self.tdc.max_channel + 1,
            ingest: ingest.counts().fields().to_vec(),
        };
        for fate in [
            RecordFate::UnknownKind,
            RecordFate::ChannelAboveMax,
            RecordFate::CounterOverflow,
        ] {
            summary.dropped.push((fate.name(), counts.get(fate)));
        }
        if self.map.is_some() {
            summary.dropped.push((super::text::DROP_UNMAPPED, unmapped));
        }
        Ok((summary, sink))
    }
}
