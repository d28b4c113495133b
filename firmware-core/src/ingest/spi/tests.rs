//! The SPI FIFO source against `embedded-hal-mock`: the expected bus traffic is the two-command
//! protocol of the module doc, the words are those of the `words` module doc's 32-bit layout.

use super::*;
use crate::ingest::tests::{bytes, event, format, ROLLOVER};
use crate::ingest::IngestCounts;
use embedded_hal_mock::eh1::digital::{Mock as PinMock, State, Transaction as PinTx};
use embedded_hal_mock::eh1::spi::{Mock as SpiMock, Transaction as SpiTx};

/// The status transaction: command, then flags, dropped words and the big-endian byte level.
fn status(flags: u8, dropped: u8, level_bytes: u16) -> Vec<SpiTx<u8>> {
    let [hi, lo] = level_bytes.to_be_bytes();
    vec![
        SpiTx::transaction_start(),
        SpiTx::write_vec(vec![STATUS_COMMAND]),
        SpiTx::read_vec(vec![flags, dropped, hi, lo]),
        SpiTx::transaction_end(),
    ]
}

/// The data transaction returning `data`.
fn read(data: Vec<u8>) -> Vec<SpiTx<u8>> {
    vec![
        SpiTx::transaction_start(),
        SpiTx::write_vec(vec![READ_COMMAND]),
        SpiTx::read_vec(data),
        SpiTx::transaction_end(),
    ]
}

/// Both mocks saw every transaction they expected.
fn all_expected((mut spi, mut pin): (SpiMock<u8>, PinMock)) {
    spi.done();
    pin.done();
}

fn blank() -> [TdcEvent; 8] {
    [TdcEvent {
        count: 0,
        channel: 0,
    }; 8]
}

#[test]
fn an_overrun_fifo_reports_its_flag_and_dropped_words() {
    let words = [event(1, 100), event(2, 200)];
    let spi = SpiMock::new(&[status(FLAG_FIFO_FULL, 37, 8), read(bytes(&words))].concat());
    let pin = PinMock::new(&[PinTx::get(State::High)]);
    let mut src = SpiFifoSource::new(spi, pin);
    let mut ingest = Ingest::new(format());
    let (mut buf, mut out) = ([0u8; 32], blank());
    let got = src.poll(&mut ingest, &mut buf, &mut out);
    assert_eq!(
        got,
        Ok(Polled {
            bytes: 8,
            events: 2
        })
    );
    assert_eq!(
        out[1],
        TdcEvent {
            count: 200,
            channel: 2
        }
    );
    assert_eq!(
        ingest.counts(),
        IngestCounts {
            overrun_words: 37,
            fifo_full_flags: 1,
            rollover_gaps: 0,
            malformed_words: 0,
            blocks: 1,
        }
    );
    all_expected(src.release());
}

#[test]
fn a_rollover_between_two_reads_widens_the_counter() {
    // First read ends on a rollover record; the second read's event is one 2^24 wrap later.
    let first = bytes(&[event(0, 0xFF_FF00), ROLLOVER]);
    let second = bytes(&[event(0, 0x10)]);
    let spi = SpiMock::new(&[status(0, 0, 8), read(first), status(0, 0, 4), read(second)].concat());
    let pin = PinMock::new(&[PinTx::get(State::High), PinTx::get(State::High)]);
    let mut src = SpiFifoSource::new(spi, pin);
    let mut ingest = Ingest::new(format());
    let (mut buf, mut out) = ([0u8; 32], blank());
    assert_eq!(
        src.poll(&mut ingest, &mut buf, &mut out),
        Ok(Polled {
            bytes: 8,
            events: 1
        })
    );
    assert_eq!(
        src.poll(&mut ingest, &mut buf, &mut out),
        Ok(Polled {
            bytes: 4,
            events: 1
        })
    );
    assert_eq!(out[0].count, (1 << 24) | 0x10);
    assert_eq!(ingest.counts().rollover_gaps, 0);
    assert_eq!(ingest.word_counts().rollovers, 1);
    all_expected(src.release());
}

#[test]
fn a_rollover_lost_in_an_overrun_is_a_gap() {
    // The rollover record was among the dropped words: the counter falls, one gap is counted.
    let spi = SpiMock::new(
        &[
            status(0, 0, 4),
            read(bytes(&[event(0, 0xFF_FF00)])),
            status(FLAG_FIFO_FULL, 1, 4),
            read(bytes(&[event(0, 0x10)])),
        ]
        .concat(),
    );
    let pin = PinMock::new(&[PinTx::get(State::High), PinTx::get(State::High)]);
    let mut src = SpiFifoSource::new(spi, pin);
    let mut ingest = Ingest::new(format());
    let (mut buf, mut out) = ([0u8; 32], blank());
    for _ in 0..2 {
        assert!(src.poll(&mut ingest, &mut buf, &mut out).is_ok());
    }
    let c = ingest.counts();
    assert_eq!(
        (c.rollover_gaps, c.overrun_words, c.fifo_full_flags),
        (1, 1, 1)
    );
    all_expected(src.release());
}

#[test]
fn a_short_read_cut_inside_a_record_is_completed_by_the_next() {
    // The FIFO holds 6 bytes: one record and half of the next; the rest arrives later.
    let all = bytes(&[event(3, 0x1234), event(4, 0x5678)]);
    let spi = SpiMock::new(
        &[
            status(0, 0, 6),
            read(all[..6].to_vec()),
            status(0, 0, 2),
            read(all[6..].to_vec()),
        ]
        .concat(),
    );
    let pin = PinMock::new(&[
        PinTx::get(State::High),
        PinTx::get(State::Low),
        PinTx::get(State::High),
    ]);
    let mut src = SpiFifoSource::new(spi, pin);
    let mut ingest = Ingest::new(format());
    let (mut buf, mut out) = ([0u8; 32], blank());
    assert_eq!(
        src.poll(&mut ingest, &mut buf, &mut out),
        Ok(Polled {
            bytes: 6,
            events: 1
        })
    );
    // Pin low: no bus traffic at all.
    assert_eq!(
        src.poll(&mut ingest, &mut buf, &mut out),
        Ok(Polled::default())
    );
    assert_eq!(
        src.poll(&mut ingest, &mut buf, &mut out),
        Ok(Polled {
            bytes: 2,
            events: 1
        })
    );
    assert_eq!(
        out[0],
        TdcEvent {
            count: 0x5678,
            channel: 4
        }
    );
    assert_eq!(ingest.finish().map(|w| w.records), Ok(2));
    all_expected(src.release());
}

#[test]
fn a_read_is_limited_to_what_the_buffers_hold() {
    // 40 bytes wait; a 12-byte buffer takes 3 records now, the rest stays in the FIFO.
    let words: Vec<u32> = (0..10).map(|t| event(1, t)).collect();
    let spi = SpiMock::new(&[status(0, 0, 40), read(bytes(&words[..3]))].concat());
    let pin = PinMock::new(&[PinTx::get(State::High)]);
    let mut src = SpiFifoSource::new(spi, pin);
    let mut ingest = Ingest::new(format());
    let (mut buf, mut out) = ([0u8; 12], blank());
    assert_eq!(
        src.poll(&mut ingest, &mut buf, &mut out),
        Ok(Polled {
            bytes: 12,
            events: 3
        })
    );
    all_expected(src.release());
}

#[test]
fn a_failed_pin_read_is_an_error_not_a_panic() {
    use embedded_hal_mock::eh1::MockError;
    use std::io::ErrorKind;
    let spi = SpiMock::new(&[]);
    let err = MockError::Io(ErrorKind::NotConnected);
    let pin = PinMock::new(&[PinTx::get(State::High).with_error(err.clone())]);
    let mut src = SpiFifoSource::new(spi, pin);
    let mut ingest = Ingest::new(format());
    let (mut buf, mut out) = ([0u8; 12], blank());
    let got = src.poll(&mut ingest, &mut buf, &mut out);
    assert!(matches!(
        got,
        Err(SourceError::Pin(MockError::Io(ErrorKind::NotConnected)))
    ));
    assert_eq!(ingest.counts(), IngestCounts::default());
    all_expected(src.release());
}

/// The async source against `embedded-hal-mock`'s async implementations: the same bus traffic,
/// the data-ready line awaited.
#[cfg(feature = "embedded-hal-async")]
mod asynch {
    use super::super::asynch::SpiFifoSourceAsync;
    use super::*;
    use crate::ingest::tests::ROLLOVER;
    use core::future::Future;
    use core::pin::pin;
    use core::task::{Context, Poll, Waker};
    use embedded_hal_mock::eh1::MockError;
    use std::io::ErrorKind;

    /// Run a future that never waits on anything outside it (the mocks answer at once).
    fn block_on<F: Future>(f: F) -> F::Output {
        let mut f = pin!(f);
        let mut cx = Context::from_waker(Waker::noop());
        loop {
            if let Poll::Ready(v) = f.as_mut().poll(&mut cx) {
                return v;
            }
        }
    }

    #[test]
    fn the_async_source_counts_an_overrun_and_carries_a_record_cut_by_a_short_read() {
        let all = bytes(&[event(3, 0x1234), ROLLOVER, event(4, 0x10)]);
        let spi = SpiMock::new(
            &[
                status(FLAG_FIFO_FULL, 5, 6),
                read(all[..6].to_vec()),
                status(0, 0, 6),
                read(all[6..].to_vec()),
            ]
            .concat(),
        );
        let high = PinTx::wait_for_state(State::High);
        let pin = PinMock::new(&[high.clone(), high]);
        let mut src = SpiFifoSourceAsync::new(spi, pin);
        let mut ingest = Ingest::new(format());
        let (mut buf, mut out) = ([0u8; 32], blank());
        let first = block_on(src.next(&mut ingest, &mut buf, &mut out));
        assert_eq!(
            first,
            Ok(Polled {
                bytes: 6,
                events: 1
            })
        );
        let second = block_on(src.next(&mut ingest, &mut buf, &mut out));
        assert_eq!(
            second,
            Ok(Polled {
                bytes: 6,
                events: 1
            })
        );
        // After the rollover record the 24-bit time field has wrapped once.
        assert_eq!(
            out[0],
            TdcEvent {
                count: (1 << 24) | 0x10,
                channel: 4
            }
        );
        let c = ingest.counts();
        assert_eq!(
            (c.overrun_words, c.fifo_full_flags, c.rollover_gaps),
            (5, 1, 0)
        );
        all_expected(src.release());
    }

    #[test]
    fn a_failing_data_ready_line_is_an_error_and_no_bus_traffic() {
        let spi = SpiMock::new(&[]);
        let err = MockError::Io(ErrorKind::Other);
        let pin = PinMock::new(&[PinTx::wait_for_state(State::High).with_error(err)]);
        let mut src = SpiFifoSourceAsync::new(spi, pin);
        let mut ingest = Ingest::new(format());
        let (mut buf, mut out) = ([0u8; 32], blank());
        let got = block_on(src.next(&mut ingest, &mut buf, &mut out));
        assert!(matches!(got, Err(SourceError::Pin(_))));
        assert_eq!(ingest.counts().blocks, 0);
        all_expected(src.release());
    }
}
