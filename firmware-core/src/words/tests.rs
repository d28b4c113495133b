//! Config errors by hand; decoding against a reference encoder and a reference model written
//! here from the layout's definition in the module doc, over random formats, streams and cuts.

use super::*;
use proptest::prelude::*;

const fn no_kind() -> Option<KindField> {
    None
}

fn layout(record_bytes: u8, time: BitField, channel: BitField) -> WordLayout {
    WordLayout {
        record_bytes,
        endian: Endian::Little,
        time,
        channel,
        kind: no_kind(),
        max_channel: 255,
    }
}

fn kinded(time: BitField, channel: BitField, kind: BitField, count: BitField) -> WordLayout {
    WordLayout {
        kind: Some(KindField {
            field: kind,
            event: 0,
            rollover: 1,
            rollover_count: count,
        }),
        ..layout(4, time, channel)
    }
}

#[test]
fn record_size_must_be_4_or_8() {
    for n in [0, 1, 2, 3, 5, 7, 16] {
        let l = layout(n, BitField::new(0, 8), BitField::new(8, 0));
        assert_eq!(WordFormat::new(l), Err(WordFormatError::RecordBytes(n)));
    }
    for n in [4, 8] {
        assert!(WordFormat::new(layout(n, BitField::new(0, 8), BitField::new(8, 0))).is_ok());
    }
}

#[test]
fn widths_outside_their_range_name_the_field() {
    let cases = [
        (
            layout(8, BitField::new(0, 0), BitField::new(0, 0)),
            WordField::Time,
            0,
        ),
        (
            layout(8, BitField::new(0, 64), BitField::new(0, 0)),
            WordField::Time,
            64,
        ),
        (
            layout(8, BitField::new(0, 8), BitField::new(8, 9)),
            WordField::Channel,
            9,
        ),
        (
            kinded(
                BitField::new(0, 8),
                BitField::new(8, 4),
                BitField::new(12, 0),
                BitField::new(0, 0),
            ),
            WordField::Kind,
            0,
        ),
        (
            kinded(
                BitField::new(0, 8),
                BitField::new(8, 4),
                BitField::new(12, 9),
                BitField::new(0, 0),
            ),
            WordField::Kind,
            9,
        ),
        (
            WordLayout {
                record_bytes: 8,
                ..kinded(
                    BitField::new(0, 8),
                    BitField::new(8, 4),
                    BitField::new(12, 2),
                    BitField::new(14, 33),
                )
            },
            WordField::RolloverCount,
            33,
        ),
    ];
    for (l, field, width) in cases {
        let e = WordFormat::new(l);
        assert_eq!(e, Err(WordFormatError::Width { field, width }));
        let (lo, hi) = field.widths();
        let msg = std::format!("{}", e.unwrap_err());
        assert!(
            msg.contains(field.name()) && msg.contains(&std::format!("{lo}..={hi}")),
            "{msg}"
        );
    }
}

#[test]
fn fields_must_fit_the_record() {
    // 24 + 9 bits > 32: too wide for a 4-byte record, fine in an 8-byte one.
    let l = layout(4, BitField::new(9, 24), BitField::new(0, 8));
    assert_eq!(
        WordFormat::new(l),
        Err(WordFormatError::OutsideRecord {
            field: WordField::Time,
            bits: BitField::new(9, 24),
            record_bits: 32
        })
    );
    assert!(WordFormat::new(WordLayout {
        record_bytes: 8,
        ..l
    })
    .is_ok());
    let l = kinded(
        BitField::new(0, 24),
        BitField::new(24, 6),
        BitField::new(31, 2),
        BitField::new(0, 0),
    );
    let e = WordFormat::new(l).unwrap_err();
    assert!(matches!(
        e,
        WordFormatError::OutsideRecord {
            field: WordField::Kind,
            ..
        }
    ));
    assert!(std::format!("{e}").contains("kind field (bits 31..33)"));
}

#[test]
fn overlapping_fields_are_refused() {
    let l = layout(4, BitField::new(0, 24), BitField::new(23, 6));
    assert_eq!(
        WordFormat::new(l),
        Err(WordFormatError::Overlap {
            first: WordField::Time,
            second: WordField::Channel
        })
    );
    // Touching is not overlapping.
    assert!(WordFormat::new(layout(4, BitField::new(0, 24), BitField::new(24, 6))).is_ok());
    let l = kinded(
        BitField::new(0, 20),
        BitField::new(20, 6),
        BitField::new(30, 2),
        BitField::new(25, 5),
    );
    assert_eq!(
        WordFormat::new(l),
        Err(WordFormatError::Overlap {
            first: WordField::Channel,
            second: WordField::RolloverCount
        })
    );
    // A rollover count reusing the time bits is an overlap too: every field has its own bits.
    let l = kinded(
        BitField::new(0, 24),
        BitField::new(24, 6),
        BitField::new(30, 2),
        BitField::new(0, 8),
    );
    assert!(matches!(
        WordFormat::new(l),
        Err(WordFormatError::Overlap { .. })
    ));
}

#[test]
fn kind_values_must_fit_and_differ() {
    let base = kinded(
        BitField::new(0, 24),
        BitField::new(24, 6),
        BitField::new(30, 2),
        BitField::new(0, 0),
    );
    let with = |event, rollover| {
        let mut l = base;
        l.kind = l.kind.map(|k| KindField {
            event,
            rollover,
            ..k
        });
        WordFormat::new(l)
    };
    assert_eq!(
        with(4, 1),
        Err(WordFormatError::KindValue { value: 4, width: 2 })
    );
    assert_eq!(
        with(0, 7),
        Err(WordFormatError::KindValue { value: 7, width: 2 })
    );
    assert_eq!(with(2, 2), Err(WordFormatError::SameKind(2)));
    assert!(with(3, 2).is_ok());
}

/// One record of a generated stream, as the layout defines it.
#[derive(Clone, Copy, Debug)]
enum Rec {
    Event { time: u64, channel: u8 },
    Rollover { wraps: u64 },
    Unknown { kind: u8 },
}

/// Reference encoder from the module doc's definition: each field's value shifted to its offset,
/// random junk in the bits outside every field, then the integer's bytes in the byte order
/// (`to_le_bytes` / `to_be_bytes`, not the decoder's byte fold).
fn encode(l: &WordLayout, recs: &[Rec], junk: u64) -> std::vec::Vec<u8> {
    let put = |v: u64, f: BitField| if f.width == 0 { 0 } else { v << f.offset };
    let bits = u32::from(l.record_bytes) * 8;
    let mut used = 0u64;
    let mut mark = |f: BitField| {
        if f.width > 0 {
            used |= (u64::MAX >> (64 - u32::from(f.width))) << f.offset;
        }
    };
    mark(l.time);
    mark(l.channel);
    if let Some(k) = l.kind {
        mark(k.field);
        mark(k.rollover_count);
    }
    let record_mask = if bits == 64 {
        u64::MAX
    } else {
        (1u64 << bits) - 1
    };
    let junk = junk & !used & record_mask;
    let mut out = std::vec::Vec::new();
    for (i, r) in recs.iter().enumerate() {
        let mut w = junk.rotate_left(i as u32 % 7) & !used & record_mask;
        match (*r, l.kind) {
            (Rec::Event { time, channel }, k) => {
                w |= put(time, l.time) | put(u64::from(channel), l.channel);
                if let Some(k) = k {
                    w |= put(u64::from(k.event), k.field);
                }
            }
            (Rec::Rollover { wraps }, Some(k)) => {
                w |= put(u64::from(k.rollover), k.field) | put(wraps, k.rollover_count);
            }
            (Rec::Unknown { kind }, Some(k)) => w |= put(u64::from(kind), k.field),
            _ => unreachable!("kindless layouts carry events only"),
        }
        if bits == 32 {
            let w = u32::try_from(w).unwrap();
            match l.endian {
                Endian::Little => out.extend_from_slice(&w.to_le_bytes()),
                Endian::Big => out.extend_from_slice(&w.to_be_bytes()),
            }
        } else {
            match l.endian {
                Endian::Little => out.extend_from_slice(&w.to_le_bytes()),
                Endian::Big => out.extend_from_slice(&w.to_be_bytes()),
            }
        }
    }
    out
}

/// Reference model of the semantics in wide arithmetic: the events handed out and the counters.
fn model(l: &WordLayout, recs: &[Rec]) -> (std::vec::Vec<TdcEvent>, WordCounts) {
    let mut events = std::vec::Vec::new();
    let mut c = WordCounts::default();
    let mut wraps: u128 = 0;
    let fate = |c: &mut WordCounts, f: RecordFate| {
        c.by_fate[RecordFate::ALL.iter().position(|g| *g == f).unwrap()] += 1;
    };
    for r in recs {
        c.records += 1;
        match *r {
            Rec::Rollover { wraps: n } => {
                let n = if l.kind.unwrap().rollover_count.width == 0 {
                    1
                } else {
                    n
                };
                wraps += u128::from(n);
                fate(&mut c, RecordFate::Rollover);
            }
            Rec::Unknown { .. } => fate(&mut c, RecordFate::UnknownKind),
            Rec::Event { time, channel } => {
                let count = (wraps << l.time.width) | u128::from(time);
                if channel > l.max_channel {
                    fate(&mut c, RecordFate::ChannelAboveMax);
                } else if count > u128::from(u64::MAX) {
                    fate(&mut c, RecordFate::CounterOverflow);
                } else {
                    events.push(TdcEvent {
                        count: count as u64,
                        channel,
                    });
                    fate(&mut c, RecordFate::Event);
                }
            }
        }
    }
    c.rollovers = u64::try_from(wraps).unwrap_or(u64::MAX);
    (events, c)
}

/// Feed `bytes` cut at `cuts`, draining into an output of `out_len` events at a time.
fn decode_cut(
    d: &mut WordDecoder,
    bytes: &[u8],
    cuts: &[usize],
    out_len: usize,
) -> std::vec::Vec<TdcEvent> {
    let mut got = std::vec::Vec::new();
    let mut out = std::vec![TdcEvent { count: 0, channel: 0 }; out_len];
    let mut bounds: std::vec::Vec<usize> = cuts.iter().map(|c| c % (bytes.len() + 1)).collect();
    bounds.push(0);
    bounds.push(bytes.len());
    bounds.sort_unstable();
    for w in bounds.windows(2) {
        let mut block = &bytes[w[0]..w[1]];
        loop {
            let r = d.decode(block, &mut out);
            got.extend_from_slice(&out[..r.events]);
            block = &block[r.consumed..];
            if block.is_empty() {
                break;
            }
            assert!(
                r.events == out_len,
                "stopped early without a full output: {r:?}"
            );
        }
    }
    got
}

fn field_strategy() -> impl Strategy<Value = (WordLayout, u64)> {
    (
        any::<bool>(),                          // 8-byte records
        any::<bool>(),                          // big endian
        0u8..=3,                                // kind width (0: no kind field)
        0u8..=6,                                // rollover-count width
        0u8..=8,                                // channel width
        any::<u8>(),                            // time width, reduced below
        Just([0usize, 1, 2, 3]).prop_shuffle(), // field order
        proptest::array::uniform5(any::<u8>()), // gaps
        any::<u8>(),                            // max channel
        (any::<u8>(), any::<u8>()),             // kind values, reduced below
        any::<u64>(),                           // junk in unused bits
    )
        .prop_map(
            |(wide, big, kw, cw, chw, tw, order, gaps, max_channel, (ev, ro), junk)| {
                let bits: u8 = if wide { 64 } else { 32 };
                let cw = if kw == 0 { 0 } else { cw };
                let room = (bits - kw - cw - chw).min(63);
                // Half the formats take all the room left, so wide time fields (and counters past
                // 64 bits) come up often.
                let tw = if tw & 1 == 0 {
                    room
                } else {
                    1 + (tw >> 1) % room
                };
                let widths = [tw, chw, kw, cw];
                let mut slack = bits - widths.iter().sum::<u8>();
                let mut offsets = [0u8; 4];
                let mut at = 0u8;
                for (k, field) in order.iter().enumerate() {
                    let gap = gaps[k] % (slack + 1);
                    slack -= gap;
                    at += gap;
                    offsets[*field] = at;
                    at += widths[*field];
                }
                let f = |i: usize| BitField::new(offsets[i], widths[i]);
                let kinds = 1u16 << kw;
                let event = (u16::from(ev) % kinds) as u8;
                let rollover =
                    ((u16::from(event) + 1 + u16::from(ro) % (kinds - 1).max(1)) % kinds) as u8;
                let layout = WordLayout {
                    record_bytes: bits / 8,
                    endian: if big { Endian::Big } else { Endian::Little },
                    time: f(0),
                    channel: f(1),
                    kind: (kw > 0).then_some(KindField {
                        field: f(2),
                        event,
                        rollover,
                        rollover_count: f(3),
                    }),
                    max_channel,
                };
                (layout, junk)
            },
        )
}

/// Records drawn to fit `l`: events (some on high channels), rollovers, unknown kinds.
fn recs_for(l: &WordLayout, raw: &[(u8, u64, u64)]) -> std::vec::Vec<Rec> {
    let mask = |w: u8| {
        if w == 0 {
            0
        } else {
            u64::MAX >> (64 - u32::from(w))
        }
    };
    raw.iter()
        .map(|&(sel, a, b)| {
            let event = Rec::Event {
                time: a & mask(l.time.width),
                channel: (b & mask(l.channel.width)) as u8,
            };
            let Some(k) = l.kind else { return event };
            match sel % 8 {
                0 | 1 => Rec::Rollover {
                    wraps: a & mask(k.rollover_count.width),
                },
                2 => {
                    let kinds = 1u64 << k.field.width;
                    let kind = (b % kinds) as u8;
                    if kind == k.event || kind == k.rollover {
                        event
                    } else {
                        Rec::Unknown { kind }
                    }
                }
                _ => event,
            }
        })
        .collect()
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(400))]

    #[test]
    fn random_formats_and_cuts_decode_to_the_model(
        (l, junk) in field_strategy(),
        raw in proptest::collection::vec((any::<u8>(), any::<u64>(), any::<u64>()), 0..120),
        cuts in proptest::collection::vec(any::<usize>(), 0..12),
        out_len in 1usize..6,
    ) {
        let fmt = WordFormat::new(l).unwrap();
        let recs = recs_for(&l, &raw);
        let bytes = encode(&l, &recs, junk);
        prop_assert_eq!(bytes.len(), recs.len() * usize::from(l.record_bytes));
        let (want, want_counts) = model(&l, &recs);

        let mut d = WordDecoder::new(fmt);
        let got = decode_cut(&mut d, &bytes, &cuts, out_len);
        prop_assert_eq!(&got, &want);
        let counts = d.finish().unwrap();
        prop_assert_eq!(counts, want_counts);
        // Every record ends in exactly one counter.
        prop_assert_eq!(counts.records, recs.len() as u64);
        prop_assert_eq!(counts.settled(), counts.records);

        // Cut one byte short: the partial record is reported where it starts.
        if let Some(short) = bytes.len().checked_sub(1).filter(|n| *n > 0) {
            let mut d = WordDecoder::new(fmt);
            decode_cut(&mut d, &bytes[..short], &cuts, out_len);
            let size = u64::from(l.record_bytes);
            prop_assert_eq!(
                d.finish(),
                Err(WordError::PartialRecord {
                    offset: (recs.len() as u64 - 1) * size,
                    have: l.record_bytes - 1,
                    need: l.record_bytes,
                })
            );
        }
    }
}

/// The doc example's layout: kind 30..32, channel 24..30, time 0..24.
fn layout_2_6_24(endian: Endian) -> WordFormat {
    let mut l = kinded(
        BitField::new(0, 24),
        BitField::new(24, 6),
        BitField::new(30, 2),
        BitField::new(0, 0),
    );
    l.endian = endian;
    l.max_channel = 7;
    WordFormat::new(l).unwrap()
}

#[test]
fn byte_order_both_ways_by_hand() {
    // Event on channel 5 at time 0x123456: 0b00_000101 << 24 | 0x123456 = 0x0512_3456, whose
    // bytes are 56 34 12 05 little endian and 05 12 34 56 big endian (worked by hand).
    let want = [TdcEvent {
        count: 0x12_3456,
        channel: 5,
    }];
    for (endian, bytes) in [
        (Endian::Little, [0x56, 0x34, 0x12, 0x05]),
        (Endian::Big, [0x05, 0x12, 0x34, 0x56]),
    ] {
        let mut d = WordDecoder::new(layout_2_6_24(endian));
        let mut out = [TdcEvent {
            count: 0,
            channel: 0,
        }; 2];
        let r = d.decode(&bytes, &mut out);
        assert_eq!((r.events, r.consumed), (1, 4), "{endian:?}");
        assert_eq!(out[..1], want, "{endian:?}");
    }
}

#[test]
fn each_fate_by_hand() {
    let fmt = layout_2_6_24(Endian::Little);
    let words: [u32; 6] = [
        0x0000_0001,           // event ch 0, time 1
        0x4000_0000,           // rollover
        0x4000_0000,           // rollover
        0x8000_0000,           // kind 2: unknown
        (9 << 24) | 2,         // channel 9 > max 7
        (7 << 24) | 0xFF_FFFF, // event ch 7, time 2^24 - 1, after 2 wraps
    ];
    let bytes: std::vec::Vec<u8> = words.iter().flat_map(|w| w.to_le_bytes()).collect();
    let mut d = WordDecoder::new(fmt);
    let mut out = [TdcEvent {
        count: 0,
        channel: 0,
    }; 8];
    let r = d.decode(&bytes, &mut out);
    assert_eq!((r.events, r.consumed), (2, 24));
    assert_eq!(
        out[0],
        TdcEvent {
            count: 1,
            channel: 0
        }
    );
    assert_eq!(
        out[1],
        TdcEvent {
            count: (2 << 24) | 0xFF_FFFF,
            channel: 7
        }
    );
    let c = d.finish().unwrap();
    let per: std::vec::Vec<(&str, u64)> = RecordFate::ALL
        .iter()
        .map(|f| (f.name(), c.get(*f)))
        .collect();
    assert_eq!(
        per,
        [
            ("event", 2),
            ("rollover", 2),
            ("unknown kind", 1),
            ("channel above max", 1),
            ("counter overflow", 0)
        ]
    );
    assert_eq!((c.records, c.rollovers), (6, 2));
}

#[test]
fn counter_past_64_bits_is_counted_not_wrapped() {
    // 63-bit time, 1-bit kind in an 8-byte record: one wrap still fits (2^63 + t), two do not.
    let l = WordLayout {
        record_bytes: 8,
        endian: Endian::Big,
        time: BitField::new(0, 63),
        channel: BitField::new(0, 0),
        kind: Some(KindField {
            field: BitField::new(63, 1),
            event: 0,
            rollover: 1,
            rollover_count: BitField::new(0, 0),
        }),
        max_channel: 0,
    };
    let fmt = WordFormat::new(l).unwrap();
    let roll = 1u64 << 63;
    let words = [roll, 5, roll, 6];
    let bytes: std::vec::Vec<u8> = words.iter().flat_map(|w| w.to_be_bytes()).collect();
    let mut d = WordDecoder::new(fmt);
    let mut out = [TdcEvent {
        count: 0,
        channel: 0,
    }; 4];
    let r = d.decode(&bytes, &mut out);
    assert_eq!(r.events, 1);
    assert_eq!(out[0].count, (1 << 63) | 5);
    let c = d.finish().unwrap();
    assert_eq!(c.get(RecordFate::CounterOverflow), 1);
    assert_eq!(c.settled(), 4);
}

#[test]
fn full_output_stops_before_an_event_but_takes_rollovers() {
    let fmt = layout_2_6_24(Endian::Little);
    let words: [u32; 3] = [1, 0x4000_0000, 2];
    let bytes: std::vec::Vec<u8> = words.iter().flat_map(|w| w.to_le_bytes()).collect();
    let mut d = WordDecoder::new(fmt);
    let mut out = [TdcEvent {
        count: 0,
        channel: 0,
    }; 1];
    let r = d.decode(&bytes, &mut out);
    // The event and the rollover are taken; the second event waits for room.
    assert_eq!((r.events, r.consumed), (1, 8));
    let r = d.decode(&bytes[8..], &mut []);
    assert_eq!((r.events, r.consumed), (0, 0));
    let r = d.decode(&bytes[8..], &mut out);
    assert_eq!((r.events, r.consumed), (1, 4));
    assert_eq!(out[0].count, (1 << 24) | 2);
}

#[test]
fn partial_record_message_names_offset_and_record() {
    let mut d = WordDecoder::new(layout_2_6_24(Endian::Little));
    let mut out = [TdcEvent {
        count: 0,
        channel: 0,
    }; 4];
    d.decode(&[1, 0, 0, 0, 2, 0], &mut out);
    let e = d.finish().unwrap_err();
    assert_eq!(
        e,
        WordError::PartialRecord {
            offset: 4,
            have: 2,
            need: 4
        }
    );
    let msg = std::format!("{e}");
    assert!(msg.contains("record") && msg.contains("offset 4"), "{msg}");
    d.reset();
    assert_eq!(d.finish().map(|c| c.records), Ok(0));
}
