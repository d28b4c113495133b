//! The frame-mode tag check of an incoming answers frame (`docs/wire-protocol.md` §9.2).

use super::{OpenFrame, MAX_OPEN_FRAMES};
use crate::formats::tag::Direction;
use crate::wire::auth::{check_frame, LinkAuth};
use crate::wire::Reject;
use heapless::Deque;

/// Authenticate an answers frame before anything reads it: its pad word follows from the
/// announce frame it answers (`ann_seq`, widened against the frames sent).
pub(super) fn check_tag<const KEYW: usize>(
    auth: Option<&mut LinkAuth<KEYW>>,
    open: &Deque<OpenFrame, MAX_OPEN_FRAMES>,
    next_num: u64,
    f: &crate::formats::Frame<'_>,
    ann_seq: u16,
) -> Result<(), Reject> {
    let num = open
        .iter()
        .find(|o| o.seq == ann_seq)
        .map(|o| o.num)
        .unwrap_or_else(|| {
            next_num.wrapping_sub(u64::from((next_num as u16).wrapping_sub(ann_seq)))
        });
    check_frame(auth, Direction::ToReceiver, num, f)
}
