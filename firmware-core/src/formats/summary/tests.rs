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
    assert_eq!(word(WORDS - 2), 5);
    assert_eq!(word(WORDS - 1), 6);
    assert_eq!(Summary::parse(&p), Ok(s));
    assert_eq!(
        Summary::parse(&p[1..]),
        Err(FrameError::Truncated { offset: LEN - 1 })
    );
    let mut long = p.to_vec();
    long.push(0);
    assert_eq!(
        Summary::parse(&long),
        Err(FrameError::LengthMismatch {
            declared: LEN as u16,
            actual: LEN + 1
        })
    );
    assert_eq!(
        s.emit(&mut p[..LEN - 1]),
        Err(FrameError::BufferTooSmall { needed: LEN })
    );
}
