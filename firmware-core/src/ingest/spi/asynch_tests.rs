//! The async SPI FIFO source against `embedded-hal-mock`'s async implementations: the same bus
//! traffic as the blocking source's tests, the data-ready line awaited.

use super::asynch::SpiFifoSourceAsync;
use super::tests::{blank, read, status};
use super::*;
use crate::ingest::tests::{bytes, event, format, ROLLOVER};
use core::future::Future;
use core::pin::pin;
use core::task::{Context, Poll, Waker};
use embedded_hal_mock::eh1::digital::{Mock as PinMock, State, Transaction as PinTx};
use embedded_hal_mock::eh1::spi::Mock as SpiMock;
use embedded_hal_mock::eh1::MockError;

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
    let (mut spi, mut pin) = src.release();
    spi.done();
    pin.done();
}

#[test]
fn a_failing_data_ready_line_is_an_error_and_no_bus_traffic() {
    let spi = SpiMock::new(&[]);
    let err = MockError::Io(std::io::ErrorKind::Other);
    let pin = PinMock::new(&[PinTx::wait_for_state(State::High).with_error(err)]);
    let mut src = SpiFifoSourceAsync::new(spi, pin);
    let mut ingest = Ingest::new(format());
    let (mut buf, mut out) = ([0u8; 32], blank());
    let got = block_on(src.next(&mut ingest, &mut buf, &mut out));
    assert!(matches!(got, Err(SourceError::Pin(_))));
    assert_eq!(ingest.counts().blocks, 0);
    let (mut spi, mut pin) = src.release();
    spi.done();
    pin.done();
}
