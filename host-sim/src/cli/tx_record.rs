//! `slotwise simulate` writes what its transmitter sent beside the capture: the dense record of
//! every slot of the run, or — when that would be too large — the sparse record of the slots
//! around each detection (`docs/transmitter-record.md`).

use super::AnyErr;
use crate::clocks;
use crate::scenario::Scenario;
use crate::sim::{SimEvent, TxChoices, TxClock};
use crate::txrecord::{
    dense_size, DenseWriter, SparseWriter, TxRecordHeader, DEFAULT_BLOCK_SLOTS, FLAG_SIMULATED,
};
use clap::Args;
use std::collections::BTreeSet;
use std::fs::File;
use std::io::BufWriter;
use std::path::{Path, PathBuf};

/// Largest dense record `simulate` writes, in bytes (64 MiB); above it the sparse form is used.
pub const MAX_DENSE_BYTES: u64 = 64 << 20;
/// Slots recorded past the last slot of the run, in slots: noise after the last pulse still
/// falls into slots the receiver may announce.
pub const MARGIN_SLOTS: u64 = 4096;
/// How far behind the newest detection a sparse slot is written out, in slots (the simulator's
/// events are in time order up to small reorderings).
const WINDOW_SLOTS: u64 = 1 << 20;

/// Where `simulate` writes its transmitter record.
#[derive(Args, Debug, Clone)]
pub struct TxRecordArgs {
    /// Write the transmitter record here (default: the output with extension `.swtx`, or
    /// `.swtx.csv` when the sparse form is written).
    #[arg(long, value_name = "PATH", conflicts_with = "no_tx_record")]
    pub tx_record: Option<PathBuf>,
    /// Do not write the transmitter record.
    #[arg(long)]
    pub no_tx_record: bool,
}

struct Sparse {
    w: SparseWriter<BufWriter<File>>,
    pending: BTreeSet<u64>,
    next: u64,
    end: u64,
    choices: TxChoices,
    clock: TxClock,
    detections: u64,
}

impl Sparse {
    fn observe(&mut self, e: &SimEvent) -> Result<(), AnyErr> {
        let k = match e.truth.slot {
            Some(k) => k,
            None => {
                let phase = self.clock.phase_slots(e.truth.true_t_ps).floor();
                if phase < 0.0 {
                    return Ok(());
                }
                phase as u64
            }
        };
        self.detections += 1;
        for j in k.saturating_sub(1)..=k.saturating_add(1) {
            if j >= self.next && j < self.end {
                self.pending.insert(j);
            }
        }
        let horizon = k.saturating_sub(WINDOW_SLOTS);
        while let Some(first) = self.pending.first().copied().filter(|&f| f < horizon) {
            self.pending.pop_first();
            self.write(first)?;
        }
        Ok(())
    }

    fn write(&mut self, slot: u64) -> Result<(), AnyErr> {
        self.w.push(slot, self.choices.choice(slot))?;
        self.next = slot + 1;
        Ok(())
    }
}

enum Form {
    Dense(DenseWriter<BufWriter<File>>),
    Sparse(Box<Sparse>),
}

/// The record being written during a `simulate` run (its file is created before the run, so a
/// path that cannot be written fails at once).
pub(super) struct RecordOut {
    path: PathBuf,
    form: Form,
    choices: TxChoices,
    dense_bytes: u64,
}

impl RecordOut {
    /// Plan the record of scenario `s` beside `out`; `None` with `--no-tx-record`.
    pub(super) fn open(
        args: &TxRecordArgs,
        out: &Path,
        s: &Scenario,
    ) -> Result<Option<Self>, AnyErr> {
        if args.no_tx_record {
            return Ok(None);
        }
        let end = s.slots().saturating_add(MARGIN_SLOTS);
        let (hello_t, hello_slot) = clocks::simulated_hint(s)?;
        let header = TxRecordHeader::new(0..end, s.intensities.len() as u8)
            .with_protocol(s.protocol)
            .with_marker(s.marker)
            .with_hello(hello_t, hello_slot)
            .with_flags(FLAG_SIMULATED);
        let dense_bytes = dense_size(end, DEFAULT_BLOCK_SLOTS);
        let sparse = dense_bytes > MAX_DENSE_BYTES;
        let path = match &args.tx_record {
            Some(p) => p.clone(),
            None if sparse => out.with_extension("swtx.csv"),
            None => out.with_extension("swtx"),
        };
        if path == out {
            return Err(format!(
                "{}: the transmitter record would overwrite the output; give --tx-record PATH",
                path.display()
            )
            .into());
        }
        let file = File::create(&path).map_err(|e| format!("{}: {e}", path.display()))?;
        let file = BufWriter::new(file);
        let form = if sparse {
            let mut w = SparseWriter::new(file, header)?;
            w.comment(
                "sparse: holds the slots k-1, k, k+1 around each simulated detection, k its true \
                 slot (for noise clicks, the slot at the click's true time); every other slot is \
                 not recorded",
            )?;
            Form::Sparse(Box::new(Sparse {
                w,
                pending: BTreeSet::new(),
                next: 0,
                end,
                choices: TxChoices::new(s),
                clock: TxClock::from_scenario(s),
                detections: 0,
            }))
        } else {
            Form::Dense(DenseWriter::new(file, header)?)
        };
        Ok(Some(Self {
            path,
            form,
            choices: TxChoices::new(s),
            dense_bytes,
        }))
    }

    /// Take one simulated detection (the sparse form records the slots around it).
    pub(super) fn observe(&mut self, e: &SimEvent) -> Result<(), AnyErr> {
        match &mut self.form {
            Form::Sparse(sp) => sp.observe(e),
            Form::Dense(_) => Ok(()),
        }
    }

    /// Write the record out (the dense form all at once, in constant memory); returns the line
    /// that says what was written.
    pub(super) fn finish(self) -> Result<String, AnyErr> {
        let name = self.path.display();
        match self.form {
            Form::Sparse(mut sp) => {
                let r = sp.w.header().range();
                while let Some(k) = sp.pending.pop_first() {
                    sp.write(k)?;
                }
                let slots = sp.w.recorded();
                sp.w.finish()?;
                Ok(format!(
                    "{name}: transmitter record, sparse: {slots} of slots {}..{} (k-1, k, k+1 around \
                     each of {} detections; the dense form would take {} MiB)",
                    r.start,
                    r.end,
                    sp.detections,
                    self.dense_bytes >> 20
                ))
            }
            Form::Dense(mut w) => {
                let r = w.header().range();
                for k in r.clone() {
                    w.push(Some(self.choices.choice(k)))?;
                }
                w.finish()?;
                Ok(format!(
                    "{name}: transmitter record, dense: slots {}..{} ({} bytes)",
                    r.start, r.end, self.dense_bytes
                ))
            }
        }
    }
}
