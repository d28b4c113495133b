use crate::link::{AnnounceOut, AnswersIn};
use crate::setup::MAX_SETUP_LEN;
use crate::transport::{decode_event, encode_event, RecordReader, ANSWER_LEN, NOT_REVEALED};
use crate::*;
use slotwise::fixed::types::{U0F32, U32F32};
use slotwise::{
    Announcement, Basis, Gate, GateTable, OverflowPolicy, TdcEvent, Transmitter, UnwrapConfig,
};

fn setup() -> Setup {
    let g = |channel, a: f64, b: f64, basis, bit| Gate {
        channel,
        start: U0F32::from_num(a),
        end: U0F32::from_num(b),
        basis,
        bit,
    };
    Setup {
        tdc: UnwrapConfig::new(48, 4).unwrap(),
        gates: GateTable::new(
            &[0, -1230],
            &[
                g(0, 0.1, 0.2, Basis::Z, 0),
                g(0, 0.6, 0.7, Basis::Z, 1),
                g(1, 0.3, 0.4, Basis::X, 1),
            ],
        )
        .unwrap(),
        period_ps: U32F32::from_num(9999.63),
        origin_ps: 123_456_789,
        intensities: 3,
        answer_timeout_slots: 50_000,
        overflow: OverflowPolicy::DropNewest,
        squash_seed: 42,
    }
}

fn encoded() -> Vec<u8> {
    let mut b = vec![0u8; MAX_SETUP_LEN];
    let n = setup().encode(&mut b).unwrap();
    b.truncate(n);
    b
}

/// Recompute the CRC after editing a field (to reach the checks behind the CRC).
fn reseal(b: &mut [u8]) {
    let n = b.len() - 4;
    let crc = slotwise::formats::crc32c(&b[..n]).to_le_bytes();
    b[n..].copy_from_slice(&crc);
}

#[test]
fn setup_round_trip_and_documented_offsets() {
    let b = encoded();
    assert_eq!(b.len(), 46 + 8 * 2 + 11 * 3 + 4);
    assert_eq!(&b[0..4], b"SWHL");
    assert_eq!(b[5], 48);
    assert_eq!(u32::from_le_bytes(b[6..10].try_into().unwrap()), 4);
    assert_eq!(b[26], 3);
    assert_eq!(b[35], 0);
    assert_eq!(b[44], 2);
    assert_eq!(i64::from_le_bytes(b[53..61].try_into().unwrap()), -1230);
    assert_eq!(b[61], 3);
    assert_eq!(Setup::decode(&b), Ok(setup()));
}

#[test]
fn setup_errors_name_offset_and_field() {
    let b = encoded();
    assert_eq!(
        Setup::decode(&b[..30]),
        Err(SetupError::Truncated {
            offset: 27,
            field: "answer_timeout_slots"
        })
    );
    let mut bad = b.clone();
    bad[12] ^= 1;
    assert_eq!(
        Setup::decode(&bad),
        Err(SetupError::BadCrc {
            offset: b.len() - 4
        })
    );
    let mut bad = b.clone();
    bad[35] = 7;
    reseal(&mut bad);
    assert_eq!(
        Setup::decode(&bad),
        Err(SetupError::BadField {
            offset: 35,
            field: "overflow_policy"
        })
    );
    let mut bad = b.clone();
    bad[0] = b'X';
    assert!(matches!(
        Setup::decode(&bad),
        Err(SetupError::BadField {
            offset: 0,
            field: "magic"
        })
    ));
    // Gate 0's end before its start: refused by the core's gate table.
    let mut bad = b.clone();
    bad[67..71].copy_from_slice(&0u32.to_le_bytes());
    reseal(&mut bad);
    assert!(matches!(Setup::decode(&bad), Err(SetupError::Gates(_))));
    let mut long = b.clone();
    long.push(0);
    assert_eq!(
        Setup::decode(&long),
        Err(SetupError::TrailingBytes { offset: b.len() })
    );
}

#[test]
fn record_layouts_by_hand() {
    let ev = TdcEvent {
        count: 0x0102_0304_0506_0708,
        channel: 9,
    };
    assert_eq!(encode_event(&ev), [8, 7, 6, 5, 4, 3, 2, 1, 9]);
    assert_eq!(decode_event(&encode_event(&ev)), ev);
    let r = AnswerRecord {
        slot: 0x1122,
        basis: 1,
        intensity: 2,
        bit: NOT_REVEALED,
    };
    let b = r.encode();
    assert_eq!(b, [0x22, 0x11, 0, 0, 0, 0, 0, 0, 1, 2, 0xFF]);
    assert_eq!(AnswerRecord::decode(&b), r);
    let a = r.answer().unwrap();
    assert_eq!((a.basis, a.bit), (Basis::X, None));
    assert_eq!(AnswerRecord::of(&a), r);
    assert_eq!(AnswerRecord { basis: 2, ..r }.answer(), None);
}

#[test]
fn a_stream_ending_inside_a_record_is_an_error() {
    let bytes = [0u8; ANSWER_LEN + 5];
    let mut rd = RecordReader::<&[u8], 16>::new(&bytes[..]);
    assert!(matches!(rd.record::<ANSWER_LEN>(), Ok(Some(_))));
    assert_eq!(
        rd.record::<ANSWER_LEN>(),
        Err(StreamError::PartialRecord {
            offset: ANSWER_LEN as u64
        })
    );
    let mut empty = RecordReader::<&[u8], 16>::new(&[][..]);
    assert_eq!(empty.record::<ANSWER_LEN>(), Ok(None));
}

#[test]
fn replay_counts_a_slot_mismatch_and_withholds_the_answer() {
    let recs: Vec<u8> = [5u64, 9]
        .iter()
        .flat_map(|&slot| {
            AnswerRecord {
                slot,
                basis: 0,
                intensity: 0,
                bit: 1,
            }
            .encode()
        })
        .collect();
    let mut tx = ReplayTx::new(IoAnswers::new(&recs[..]));
    tx.announce(Announcement {
        slot: 5,
        basis: Basis::Z,
    });
    assert_eq!(
        tx.poll_answer().map(|a| (a.slot, a.bit)),
        Some((5, Some(1)))
    );
    tx.announce(Announcement {
        slot: 8,
        basis: Basis::Z,
    });
    assert_eq!(tx.poll_answer(), None);
    tx.announce(Announcement {
        slot: 10,
        basis: Basis::Z,
    });
    let s = *tx.stats();
    assert_eq!((s.announced, s.mismatched, s.missing), (3, 1, 1));
}

fn board() -> BoardSettings {
    use slotwise::{AcquireParams, AlarmConfig, LinkConfig, TrackParams};
    let mut acquire = AcquireParams::new(U32F32::from_num(9999.63), 500);
    acquire.work_per_call = 4096;
    BoardSettings {
        acquire,
        track: TrackParams::new(2_000, 80_000, 1_000_000_000),
        reacquire_ppm: 20,
        hint_t_ps: 1_000_000_000,
        hint_tx_slot: 130_000,
        link: LinkConfig::new(1_000_000, 5_000).unwrap(),
        block_ps: 2_000_000_000,
        dead_time_ps: 40_000,
        alarms: AlarmConfig::DEFAULT,
    }
}

#[test]
fn board_file_round_trip_and_refusals() {
    use crate::board::{BOARD_LEN, BOARD_MAGIC};
    let mut b = [0u8; BOARD_LEN];
    assert_eq!(board().encode(&mut b), Ok(BOARD_LEN));
    assert_eq!(&b[..4], &BOARD_MAGIC);
    // Offsets from the layout table in board.rs.
    assert_eq!(
        u64::from_le_bytes(b[87..95].try_into().unwrap()),
        1_000_000_000
    );
    assert_eq!(u64::from_le_bytes(b[127..135].try_into().unwrap()), 40_000);
    assert_eq!(BoardSettings::decode(&b), Ok(board()));
    let mut bad = b;
    bad[20] ^= 1;
    assert!(matches!(
        BoardSettings::decode(&bad),
        Err(BoardError::Layout(SetupError::BadCrc { offset: 165 }))
    ));
    // A zero answer timeout is refused by the core's link configuration.
    let mut bad = b;
    bad[103..111].copy_from_slice(&0u64.to_le_bytes());
    reseal(&mut bad);
    assert!(matches!(
        BoardSettings::decode(&bad),
        Err(BoardError::Link(_))
    ));
    assert!(BoardSettings::decode(&b[..100]).is_err());
}

fn answers_record(index: u32, frame: &[u8]) -> Vec<u8> {
    let mut r = index.to_le_bytes().to_vec();
    r.extend_from_slice(frame);
    r
}

#[test]
fn an_answers_frame_is_readable_after_its_announce_frame_and_the_lag() {
    use embedded_io::{Read, ReadReady, Write};
    let shared = LinkShared::new(Probe::NONE);
    let mut stream = answers_record(0, &[5, 6, 7, 0]);
    stream.extend(answers_record(1, &[8, 0]));
    let mut rd = AnswersIn::new(&stream[..], &shared);
    let mut sink = [0u8; 64];
    let mut wr = AnnounceOut::new(&mut sink[..], &shared);
    let mut buf = [0u8; 16];
    for written in 0..=ANSWER_LAG_FRAMES {
        assert!(!rd.read_ready().unwrap(), "after {written} announce frames");
        assert_eq!(rd.read(&mut buf).unwrap(), 0);
        // One announce frame, written in two pieces: counted once, at its delimiter.
        wr.write_all(&[1, 2]).unwrap();
        wr.write_all(&[3, 0]).unwrap();
    }
    assert_eq!(shared.announce_frames(), ANSWER_LAG_FRAMES + 1);
    assert!(rd.read_ready().unwrap());
    // Never past the frame's delimiter, even with room for more.
    assert_eq!(rd.read(&mut buf).unwrap(), 4);
    assert_eq!(&buf[..4], &[5, 6, 7, 0]);
    assert!(!rd.read_ready().unwrap());
    // At the end of input the rest arrives at once.
    shared.end_of_input();
    assert_eq!(rd.read(&mut buf).unwrap(), 2);
    assert_eq!(rd.read(&mut buf).unwrap(), 0);
    assert!(rd.idle());
}

#[test]
fn end_of_input_never_releases_answers_to_an_announce_frame_not_yet_written() {
    let shared = LinkShared::new(Probe::NONE);
    shared.end_of_input();
    assert!(!shared.released(0));
}

fn blob(words: Option<slotwise::words::WordFormat>) -> Vec<u8> {
    let p = blob::ProfileBlob {
        setup: setup(),
        board: board(),
        words,
    };
    let mut b = vec![0u8; blob::MAX_BLOB_LEN];
    let n = p.encode(&mut b).unwrap();
    b.truncate(n);
    b
}

fn layout() -> slotwise::words::WordFormat {
    use slotwise::words::{BitField, Endian, KindField, WordFormat, WordLayout};
    WordFormat::new(WordLayout {
        record_bytes: 4,
        endian: Endian::Big,
        time: BitField::new(0, 16),
        channel: BitField::new(24, 4),
        kind: Some(KindField {
            field: BitField::new(28, 4),
            event: 3,
            rollover: 9,
            rollover_count: BitField::new(16, 8),
        }),
        max_channel: 1,
    })
    .unwrap()
}

#[test]
fn profile_blob_round_trip_with_and_without_a_word_layout() {
    for words in [None, Some(layout())] {
        let b = blob(words);
        let back = blob::ProfileBlob::decode(&b).unwrap();
        assert_eq!(
            (back.setup, back.board, back.words),
            (setup(), board(), words)
        );
    }
    assert_eq!(
        blob(Some(layout())).len(),
        blob(None).len() + blob::WORDS_LEN
    );
}

#[test]
fn profile_blob_errors_name_the_field_at_its_offset_in_the_blob() {
    let plain = blob(None).len();
    let mut b = blob(Some(layout()));
    // Byte order field of the word section: offset 6 of the section.
    b[plain + 6] = 7;
    reseal(&mut b);
    let e = blob::ProfileBlob::decode(&b).unwrap_err();
    assert_eq!(
        e,
        BoardError::Layout(SetupError::BadField {
            offset: plain + 6,
            field: "words.endian"
        })
    );
    // A blob cut inside the board section names the board field and its blob offset.
    let cut = &blob(None)[..plain - 10];
    let e = blob::ProfileBlob::decode(cut).unwrap_err();
    assert!(matches!(
        e,
        BoardError::Layout(SetupError::Truncated { offset, .. }) if offset > encoded().len()
    ));
}

#[test]
fn a_station_refuses_calls_out_of_phase_and_words_without_a_layout() {
    let mut st = Box::new(Station::new(&blob(None)).unwrap());
    assert_eq!(st.push_words(&[0; 8]), Err(StationError::NoWordLayout));
    st.push_events(&[TdcEvent {
        count: 5,
        channel: 0,
    }])
    .unwrap();
    st.end_input().unwrap();
    assert_eq!(st.push_events(&[]), Err(StationError::Phase(Phase::Ending)));
    st.finish().unwrap();
    assert_eq!(st.finish(), Err(StationError::Phase(Phase::Finished)));
    // The summary record is the last frame out; every detection is accounted for.
    let mut out = vec![0u8; 4096];
    let n = st.drain_frames(&mut out);
    assert!(n > 0 && out[n - 1] == 0);
    let s = st.summary();
    assert_eq!((s.detections_in, s.accounting.total()), (1, 1));
    assert!(Station::new(&blob(None)[1..]).is_err());
}

#[test]
fn raw_words_cut_anywhere_give_the_events_and_the_ingest_counts() {
    // Big-endian 4-byte records: kind 3 = event, 9 = rollover with an 8-bit wrap count.
    let rec = |kind: u32, ch: u32, low: u32| ((kind << 28) | (ch << 24) | low).to_be_bytes();
    let mut bytes = Vec::new();
    bytes.extend(rec(3, 0, 100));
    bytes.extend(rec(9, 0, 2 << 16)); // two wraps of 2^16 ticks
    bytes.extend(rec(3, 1, 7));
    bytes.extend(rec(5, 0, 0)); // unknown kind: malformed
    bytes.extend(rec(3, 0, 50)); // later in the same wrap: no gap
    let mut st = Box::new(Station::new(&blob(Some(layout()))).unwrap());
    for piece in bytes.chunks(3) {
        st.push_words(piece).unwrap();
    }
    let c = st.counts();
    assert_eq!(c.totals.detections, 3);
    assert_eq!((c.ingest.malformed_words, c.ingest.rollover_gaps), (1, 0));
    st.report_overrun(12);
    st.report_fifo_full();
    let c = st.counts();
    assert_eq!((c.ingest.overrun_words, c.ingest.fifo_full_flags), (12, 1));
}

#[test]
fn authentication_is_refused_with_the_core_reason_and_only_before_the_first_detection() {
    use slotwise::wire::{AuthConfigError, RefillFrameError, RoundConfigError};
    let key: [u8; 16] = core::array::from_fn(|i| i as u8 + 1);
    let pad: Vec<u8> = (0..8 * 16).map(|i| (i * 7 + 3) as u8).collect();
    let mut st = Box::new(Station::new(&blob(None)).unwrap());
    assert!(matches!(
        st.push_refill(&[1, 2, 3, 0]),
        Err(StationError::Refill(_))
    ));
    assert_eq!(
        st.authenticate([0; 16], &pad, 4),
        Err(StationError::AuthKey(AuthConfigError::ZeroHashKey))
    );
    assert!(matches!(
        st.authenticate(key, &pad[..7], 4),
        Err(StationError::AuthKey(AuthConfigError::Preshared(_)))
    ));
    assert_eq!(
        st.authenticate(key, &pad, 0),
        Err(StationError::AuthRounds(RoundConfigError::ZeroFrames))
    );
    assert_eq!(
        st.authenticate(key, &[0; 32], 4),
        Err(StationError::AuthRounds(RoundConfigError::NoRoundKey))
    );
    assert!(st.counts().auth.is_none(), "a refusal changes nothing");
    st.authenticate(key, &pad, 4).unwrap();
    assert_eq!(
        st.authenticate(key, &pad, 4),
        Err(StationError::Authenticated)
    );
    let a = st.counts().auth.unwrap();
    // 16 words loaded, the 2 of the round outcome key taken: 14 left, 64 bits each.
    assert_eq!(a.counters.key_bits_loaded, 16 * 64);
    assert_eq!(a.key_bits_left, 14 * 64);
    assert!(
        a.low_key_alarm,
        "16 words are below the default low-water mark of 64"
    );
    // A refill record that is no refill is refused by the core, naming why.
    assert!(matches!(
        st.push_refill(&[0]),
        Err(StationError::Refill(RefillFrameError::Frame(_)))
    ));

    let mut late = Box::new(Station::new(&blob(None)).unwrap());
    late.push_events(&[TdcEvent {
        count: 5,
        channel: 0,
    }])
    .unwrap();
    assert_eq!(late.authenticate(key, &pad, 4), Err(StationError::Started));
}

#[test]
fn a_round_authenticated_station_finishes_in_two_calls_with_the_summary_last() {
    let key: [u8; 16] = core::array::from_fn(|i| i as u8 + 1);
    let pad: Vec<u8> = (0..8 * 16).map(|i| (i * 7 + 3) as u8).collect();
    let mut st = Box::new(Station::new(&blob(None)).unwrap());
    st.authenticate(key, &pad, 4).unwrap();
    st.push_events(&[TdcEvent {
        count: 5,
        channel: 0,
    }])
    .unwrap();
    st.end_input().unwrap();
    st.finish().unwrap();
    assert_eq!(st.phase(), Phase::Closing);
    assert_eq!(
        st.push_events(&[]),
        Err(StationError::Phase(Phase::Closing))
    );
    st.finish().unwrap();
    assert_eq!(st.phase(), Phase::Finished);
    let mut out = vec![0u8; 8192];
    let n = st.drain_frames(&mut out);
    let frames: Vec<&[u8]> = out[..n]
        .split(|&b| b == 0)
        .filter(|f| !f.is_empty())
        .collect();
    let mut scratch = vec![0u8; slotwise::formats::MAX_RAW + 8];
    let last = slotwise::formats::decode_frame(frames[frames.len() - 1], &mut scratch).unwrap();
    assert_eq!(last.record, slotwise::RecordType::Summary);
}
