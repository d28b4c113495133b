use super::*;

#[test]
fn summary_words_sit_at_documented_offsets() {
    let mut words = 0u64..;
    let mut next = || words.next().unwrap_or(0) + 1;
    let mut t = Tally::new();
    t.counts[1][0][2][0][1] = 77;
    t.untested[2][1] = 88;
    let s = Summary {
        detections_in: next(),
        sifted_bits: next(),
        accounting: Accounting::from_words(&[(); Accounting::WORDS].map(|()| next())),
        multi: MultiClickEvents {
            sifted: next(),
            basis_mismatch: next(),
            queue_overflow: next(),
            unanswered: next(),
            cross_basis: next(),
        },
        answer_errors: AnswerErrors {
            unmatched: next(),
            malformed: next(),
        },
        tally: t,
        multi_tally: Tally::new(),
        key_blocks: 5,
        frame_errors: 6,
        ingest: IngestCounts::ZERO,
    };
    let mut p = [0u8; LEN];
    assert_eq!(s.emit(&mut p), Ok(LEN));
    let word = |k: usize| u64::from_le_bytes(p[8 * k..8 * k + 8].try_into().unwrap());
    // docs/frames.md: words 0..22 are the counters in declaration order.
    for k in 0..22 {
        assert_eq!(word(k), k as u64 + 1, "word {k}");
    }
    // The accounting words follow the counters' report order (docs/frames.md lists it).
    for (k, (name, v)) in s.accounting.fields().into_iter().enumerate() {
        assert_eq!(word(2 + k), v, "accounting word {name}");
    }
    // tally.counts[tx_basis][tx_bit][intensity][rx_basis][rx_bit], row-major, from word 22.
    let (tx_basis, tx_bit, intensity, rx_basis, rx_bit) = (1, 0, 2, 0, 1);
    let idx = (((tx_basis * 2 + tx_bit) * 3 + intensity) * 2 + rx_basis) * 2 + rx_bit;
    assert_eq!(word(22 + idx), 77);
    assert_eq!(word(22 + 48 + 2 * 2 + 1), 88);
    assert_eq!(word(V1_WORDS - 2), 5);
    assert_eq!(word(V1_WORDS - 1), 6);
    // docs/frames.md: word 132 the format (2), words 133 .. 137 the ingest counters.
    assert_eq!(word(132), 2);
    assert_eq!((133..138).map(word).collect::<Vec<_>>(), [0; 5]);
    assert_eq!(Summary::parse(&p), Ok(s));
    // A payload cut inside the format-1 words is truncated at its end, as before.
    assert_eq!(
        Summary::parse(&p[..V1_LEN - 1]),
        Err(FrameError::Truncated { offset: V1_LEN - 1 })
    );
    refuses_one_byte_too_many(&p);
    assert_eq!(
        s.emit(&mut p[..LEN - 1]),
        Err(FrameError::BufferTooSmall { needed: LEN })
    );
}

fn sample() -> Summary {
    Summary {
        detections_in: 1000,
        sifted_bits: 400,
        key_blocks: 2,
        ..Summary::default()
    }
    .with_ingest(IngestCounts {
        overrun_words: 17,
        fifo_full_flags: 2,
        rollover_gaps: 1,
        malformed_words: u64::MAX,
        blocks: 64,
    })
}

#[test]
fn ingest_counters_round_trip_at_their_offsets() {
    let s = sample();
    let mut p = [0u8; LEN];
    assert_eq!(s.emit(&mut p), Ok(LEN));
    let word = |k: usize| u64::from_le_bytes(p[8 * k..8 * k + 8].try_into().unwrap());
    // docs/frames.md: word 132 format, 133 overrun_words, 134 fifo_full_flags, 135 rollover_gaps,
    // 136 malformed_words, 137 blocks.
    assert_eq!(
        (132..138).map(word).collect::<Vec<_>>(),
        [2, 17, 2, 1, u64::MAX, 64]
    );
    assert_eq!(Summary::parse(&p), Ok(s));
}

#[test]
fn a_format_1_payload_reads_with_zero_ingest_counters() {
    let s = sample();
    let mut p = [0u8; LEN];
    assert_eq!(s.emit(&mut p), Ok(LEN));
    let old = Summary::parse(&p[..V1_LEN]).unwrap();
    assert_eq!(old.ingest, IngestCounts::ZERO);
    assert_eq!(old.with_ingest(s.ingest), s);
}

#[test]
fn a_truncated_format_2_payload_names_the_missing_field() {
    let mut p = [0u8; LEN];
    assert_eq!(sample().emit(&mut p), Ok(LEN));
    let cases = [
        (V1_LEN + 3, V1_LEN, "format"),
        (V1_LEN + 8, V1_LEN + 8, "ingest.overrun_words"),
        (
            V1_LEN + 8 + 8 * 3 + 5,
            V1_LEN + 32,
            "ingest.malformed_words",
        ),
        (LEN - 1, LEN - 8, "ingest.blocks"),
    ];
    for (cut, offset, field) in cases {
        let e = Summary::parse(&p[..cut]);
        assert_eq!(
            e,
            Err(FrameError::TruncatedField { offset, field }),
            "cut at {cut}"
        );
    }
    let msg = FrameError::TruncatedField {
        offset: LEN - 8,
        field: "ingest.blocks",
    }
    .to_string();
    assert!(
        msg.contains("ingest.blocks") && msg.contains("1096"),
        "{msg}"
    );
}

#[test]
fn an_unknown_format_word_or_extra_bytes_are_refused() {
    let mut p = [0u8; LEN];
    assert_eq!(sample().emit(&mut p), Ok(LEN));
    p[V1_LEN] = 3;
    assert_eq!(
        Summary::parse(&p),
        Err(FrameError::BadField {
            offset: V1_LEN,
            field: "format"
        })
    );
    p[V1_LEN] = 2;
    refuses_one_byte_too_many(&p);
}

/// A payload one byte longer than the format's is refused by its length.
fn refuses_one_byte_too_many(p: &[u8]) {
    let mut long = p.to_vec();
    long.push(0);
    assert_eq!(
        Summary::parse(&long),
        Err(FrameError::LengthMismatch {
            declared: LEN as u16,
            actual: LEN + 1
        })
    );
}
