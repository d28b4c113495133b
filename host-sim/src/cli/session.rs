//! One receiver session of a command: built with the host transmitter, the live-statistics
//! monitor, the key tap and the classical-channel hint, and finished with the link's last frames
//! and the key file.

use super::AnyErr;
use crate::clocks::ClockStages;
use crate::link::keyfile::KeyTap;
use crate::link::report::link_summary;
use crate::link::tx::HostTransmitter;
use crate::link::{FramedLink, HostTx, LinkModel};
use crate::replay::{Session, SessionResult, TraceRequest};
use crate::setup::ReceiverSetup;
use crate::sim::{SimTransmitter, TxSource};
use crate::summary::Summary;
use slotwise::{ReceiverConfig, SiftedBit};
use std::path::Path;

/// A session of the core `cfg` on `clock` for the receiver `rs`, answered by `tx`: the monitor
/// with the receiver's alarms, a key tap, and the classical channel's hello when there is one.
/// `truth_checked` when the simulator's truth comes with the events.
pub(super) fn open_session(
    cfg: ReceiverConfig,
    stages: ClockStages,
    rs: &ReceiverSetup,
    tx: HostTx,
    hint: Option<(u64, u64)>,
    truth_checked: bool,
    trace: Option<TraceRequest>,
) -> Result<(Session<HostTx>, KeyTap), AnyErr> {
    let mut session = Session::new(cfg, stages, tx, rs.block_s(), truth_checked, trace)?
        .with_monitor(rs.checked.stats, rs.checked.alarms);
    let tap = KeyTap::new();
    session.set_key_tap(Box::new(tap.clone()));
    if let Some((t_ps, slot)) = hint {
        session.hint(t_ps, slot);
    }
    Ok((session, tap))
}

/// The host transmitter answering from `source`: over the framed link when `link` is given
/// (revealing the bits `reveal_seed` picks), else in memory.
pub(super) fn host_tx(
    source: TxSource,
    reveal_seed: u64,
    link: Option<LinkModel>,
) -> Result<HostTx, AnyErr> {
    Ok(match link {
        Some(m) => HostTx::Framed(Box::new(FramedLink::with_transmitter(
            HostTransmitter::with_source(source, reveal_seed, m.test_fraction),
            m,
        )?)),
        None => HostTx::Direct(Box::new(SimTransmitter::with_source(source))),
    })
}

/// A finished session, the receiver's sifted bits, and key blocks written (when a file was asked).
type Finished = (SessionResult<HostTx>, Vec<SiftedBit>, Option<u64>);

/// End a session: let the link's last frames arrive, finish the receiver, close the link,
/// write the key file. Returns the result and the receiver's sifted bits in emission order.
pub(super) fn finish_session(
    mut session: Session<HostTx>,
    tap: &KeyTap,
    key_out: Option<&Path>,
) -> Result<Finished, AnyErr> {
    if let Some(l) = session.tx_mut().framed_mut() {
        l.drain();
        session.service();
    }
    let mut res = session.finish()?;
    if let Some(l) = res.tx.framed_mut() {
        l.close();
    }
    let rounds = res.tx.framed().filter(|l| l.endpoint().rounds().is_some());
    let blocks = match (key_out, rounds) {
        // Round mode: the post-processing host keeps only the key of verified rounds.
        (Some(p), Some(l)) => Some(tap.write_kept(
            p,
            &slotwise::Summary::of(&res.rx),
            |s| l.keeps_slot(s),
            l.verdicts(),
        )?),
        (Some(p), None) => Some(tap.write(p, &slotwise::Summary::of(&res.rx))?),
        (None, _) => None,
    };
    let bits = std::mem::take(&mut tap.0.borrow_mut().bits);
    Ok((res, bits, blocks))
}

/// Fill the summary's `link` object (framed runs) and print where the key file went.
pub(super) fn add_link(
    summary: &mut Summary,
    res: &SessionResult<HostTx>,
    bits: &[SiftedBit],
    blocks: Option<u64>,
    key_out: Option<&Path>,
) {
    if let Some(l) = res.tx.framed() {
        let mut ls = link_summary(l, bits);
        ls.key_blocks_written = blocks;
        ls.key_file = key_out.map(|p| p.display().to_string());
        summary.link = Some(ls);
    } else if let (Some(n), Some(p)) = (blocks, key_out) {
        eprintln!("wrote {} ({n} key blocks)", p.display());
    }
}
