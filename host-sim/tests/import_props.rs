//! Property tests of the importers, the proptest forms of the `import_text` and `import_binary`
//! fuzz targets (both run the checks of `slotwise_sim::import::checks`): arbitrary lines and records never panic and every one of them ends in exactly
//! one summary row (or the import stops naming it, and everything before it imports); a generated
//! valid text export imports to exactly the expected ticks and channels.

use std::io::Cursor;

use proptest::prelude::*;
use slotwise::TdcEvent;
use slotwise_sim::import::checks::{
    check_binary, check_text, line_count, read_back, text_description,
};
use slotwise_sim::import::{
    CaptureTdc, ChannelMap, Column, Delimiter, ImportError, ImportSummary, TextImport, TimeUnit,
};

const UNITS: [TimeUnit; 5] = [
    TimeUnit::Ps,
    TimeUnit::Ns,
    TimeUnit::Us,
    TimeUnit::S,
    TimeUnit::Ticks,
];

fn run_text(import: &TextImport, text: &[u8]) -> Result<(ImportSummary, Vec<u8>), ImportError> {
    let sink = Cursor::new(Vec::new());
    let (sum, sink) = import.run(text, "mem.txt", sink, "mem.swcap", |_| {})?;
    Ok((sum, sink.into_inner()))
}

/// A description's bytes and lines that are often valid under it: small integers (a time and a
/// channel both), decimals, header names, comments, blanks, some junk, joined by its delimiter.
fn text_case() -> impl Strategy<Value = ([u8; 8], Vec<u8>)> {
    any::<[u8; 8]>()
        .prop_flat_map(|head| {
            let delim = [",", ";", "\t", " ", "|", " \t "][usize::from(head[0] % 6)];
            let field = prop_oneof![
                40 => "[0-9]",
                4 => "[0-9]{1,5}\\.[0-9]{1,3}(e-?[0-9])?",
                1 => Just("-1".to_owned()),
                3 => "\"[0-9]\"",
                1 => "[ -~]{0,4}",
            ];
            let names = Just(vec!["t", "ch", "x", "y"]).prop_shuffle();
            let line = prop_oneof![
                40 => prop::collection::vec(field, 4).prop_map(move |f| f.join(delim).into_bytes()),
                1 => names.prop_map(move |n| n.join(delim).into_bytes()),
                3 => "(#|//|%)[ -~]{0,8}".prop_map(String::into_bytes),
                3 => Just(Vec::new()),
                1 => prop::collection::vec(any::<u8>(), 0..12),
            ];
            let header = Just(vec!["t", "ch", "x", "y"])
                .prop_shuffle()
                .prop_map(move |n| n.join(delim).into_bytes());
            (
                Just(head),
                prop::option::weighted(if head[0] & 0x40 != 0 { 0.9 } else { 0.1 }, header),
                prop::collection::vec(line, 0..10),
                prop::sample::select(vec!["\n", "\r\n"]),
                any::<bool>(),
            )
        })
        .prop_map(|(head, header, mut lines, end, last_end)| {
            if let Some(h) = header {
                lines.insert(0, h);
            }
            let mut text = lines.join(end.as_bytes());
            if last_end && !text.is_empty() {
                text.extend_from_slice(end.as_bytes());
            }
            (head, text)
        })
}

/// Layout bytes the importer accepts (the fuzz seeds): 32-bit little-endian words with kind and
/// wrap count, and 64-bit big-endian words without rollover records.
const GOOD_HEADS: [[u8; 11]; 2] = [
    [4, 0, 20, 20, 4, 30, 1, 9, 24, 6, 0x70],
    [3, 0, 40, 56, 8, 0, 0, 0, 0, 2, 0],
];

/// A valid export as the test writes it, and what must come out.
#[derive(Debug)]
struct Export {
    import: TextImport,
    text: String,
    expected: Vec<TdcEvent>,
    rows: [(&'static str, u64); 3],
}

/// `m × 10^-k` written as a plain decimal or with an exponent, as §10.2 of the capture format
/// allows.
fn decimal_text(m: u64, k: u32, exponent: bool) -> String {
    let pow = 10u64.pow(k);
    match (exponent, k) {
        (true, _) => format!("{m}e-{k}"),
        (false, 0) => m.to_string(),
        (false, _) => format!("{}.{:0w$}", m / pow, m % pow, w = k as usize),
    }
}

/// How a generated export is written: unit, tick, digits after the point, counter width, highest
/// channel, delimiter, header (by name or not), channel map, column order.
#[derive(Clone, Copy, Debug)]
struct Shape {
    unit: TimeUnit,
    tick_ps: u32,
    k: u32,
    counter_bits: u8,
    max_channel: u8,
    delim_i: usize,
    header: bool,
    by_name: bool,
    with_map: bool,
    channel_first: bool,
}

fn valid_export() -> impl Strategy<Value = Export> {
    let numbers = (0usize..5, 1u32..=64, 0u32..=6, 32u8..=64, 0u8..=7);
    let flags = (0usize..4, any::<[bool; 5]>());
    let lines = prop::collection::vec((any::<u64>(), any::<u8>(), 0u8..8), 0..40);
    (numbers, flags, lines).prop_map(
        |((u, tick_ps, k, counter_bits, max_channel), (d, f), lines)| {
            let shape = Shape {
                unit: UNITS[u],
                tick_ps,
                k,
                counter_bits,
                max_channel,
                delim_i: d,
                header: f[0],
                by_name: f[1],
                with_map: f[2],
                channel_first: f[3] ^ f[4],
            };
            export(shape, &lines)
        },
    )
}

/// The export text for `lines` (time step, style bits, channel) and the events it must become.
fn export(shape: Shape, lines: &[(u64, u8, u8)]) -> Export {
    let Shape {
        unit,
        tick_ps,
        k,
        counter_bits,
        max_channel,
        delim_i,
        header,
        by_name,
        with_map,
        channel_first,
    } = shape;
    // SI prefixes (common practice): 1 ns = 10^3 ps, 1 us = 10^6 ps, 1 s = 10^12 ps; a tick is
    // tick_ps by definition.
    let unit_ps: u128 = match unit {
        TimeUnit::Ps => 1,
        TimeUnit::Ns => 1_000,
        TimeUnit::Us => 1_000_000,
        TimeUnit::S => 1_000_000_000_000,
        TimeUnit::Ticks => u128::from(tick_ps),
    };
    let den = 10u128.pow(k) * u128::from(tick_ps);
    // Mantissas stay at or below this, so every time in ticks fits 64 bits even rounded up.
    let max_m = (u128::from(u64::MAX - 1) * den / unit_ps).min(u128::from(u64::MAX)) as u64;
    let step_max = max_m / 64;
    let (sep, joiner) = [(',', ","), (';', ";"), ('\t', "\t"), (' ', " \t ")][delim_i];
    let delimiter = match delim_i {
        3 => Delimiter::Whitespace,
        _ => Delimiter::Char(sep),
    };
    let input_channel = |c: u8| {
        if with_map {
            10 + i64::from(c)
        } else {
            i64::from(c)
        }
    };
    let mask = u64::MAX >> (64 - u32::from(counter_bits));
    let row = |time: String, chan: String| match channel_first {
        true => format!("{chan}{joiner}{time}"),
        false => format!("{time}{joiner}{chan}"),
    };
    let mut text = String::from("# invented export\n");
    let mut rows = [("header", 0), ("comment", 1), ("blank", 0)];
    if header {
        text += &row("time".into(), "\"chan\"".into());
        text += "\n";
        rows[0].1 = 1;
    }
    let (mut m, mut expected) = (0u64, Vec::new());
    for &(step, style, channel) in lines {
        let channel = channel.min(max_channel);
        m = m.saturating_add(step % (step_max + 1)).min(max_m);
        let n = u128::from(m) * unit_ps;
        // Nearest tick, halves up (docs/capture-format.md §10.2):
        // floor(n/den + 1/2) = floor((2n + den) / 2den).
        let ticks = ((2 * n + den) / (2 * den)) as u64;
        expected.push(TdcEvent {
            count: ticks & mask,
            channel,
        });
        text += &row(
            decimal_text(m, k, style & 1 != 0),
            input_channel(channel).to_string(),
        );
        text += if style & 2 != 0 { "\r\n" } else { "\n" };
        if style & 4 != 0 {
            text += "\n";
            rows[2].1 += 1;
        }
    }
    let (time_col, chan_col) = if channel_first { (2, 1) } else { (1, 2) };
    let column = |n: usize, name: &str| match header && by_name {
        true => Column::Name(name.into()),
        false => Column::Number(n),
    };
    let import = TextImport {
        delimiter,
        header,
        time: column(time_col, "time"),
        channel: column(chan_col, "chan"),
        unit,
        channel_map: with_map
            .then(|| ChannelMap((0..=max_channel).map(|c| (10 + i64::from(c), c)).collect())),
        comment: "#".into(),
        tdc: CaptureTdc {
            counter_bits,
            tick_ps,
            max_channel,
        },
    };
    Export {
        import,
        text,
        expected,
        rows,
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(256))]

    #[test]
    fn arbitrary_text_lines_end_in_one_row_or_a_named_line((head, text) in text_case()) {
        check_text(&head, &text).map_err(TestCaseError::fail)?;
    }

    #[test]
    fn arbitrary_text_bytes_end_in_one_row_or_a_named_line(
        head in any::<[u8; 8]>(),
        text in prop::collection::vec(any::<u8>(), 0..200),
    ) {
        check_text(&head, &text).map_err(TestCaseError::fail)?;
    }

    #[test]
    fn arbitrary_records_end_in_one_row_or_a_named_partial_record(
        head in prop_oneof![
            2 => prop::sample::select(GOOD_HEADS.to_vec()),
            1 => any::<[u8; 11]>(),
        ],
        file in prop::collection::vec(any::<u8>(), 0..160),
        whole_records in any::<bool>(),
    ) {
        let keep = if whole_records { file.len() / 8 * 8 } else { file.len() };
        check_binary(&head, &file[..keep]).map_err(TestCaseError::fail)?;
    }

    #[test]
    fn valid_text_export_imports_to_the_exact_ticks(ex in valid_export()) {
        let (sum, bytes) = run_text(&ex.import, ex.text.as_bytes())
            .map_err(|e| TestCaseError::fail(format!("{e}\n{}", ex.text)))?;
        prop_assert_eq!(read_back(&bytes).unwrap(), ex.expected.clone(), "{}", ex.text);
        prop_assert_eq!(sum.imported, ex.expected.len() as u64);
        for (name, n) in ex.rows {
            prop_assert_eq!(sum.row(name), n, "row {}", name);
        }
        prop_assert_eq!(sum.total, line_count(ex.text.as_bytes()));
        prop_assert_eq!(sum.settled(), sum.total);
    }
}

#[test]
fn a_channel_map_above_the_highest_channel_is_refused_before_reading() {
    let mut import = text_description(&[0x40, 0, 1, 0, 0, 0, 1, 32]);
    import.channel_map = Some(ChannelMap(vec![(1, 0), (2, 5)]));
    import.tdc.max_channel = 3;
    let err = run_text(&import, b"t,ch\n1,2\n").unwrap_err();
    assert!(matches!(err, ImportError::Options(_)), "{err}");
    assert!(err.to_string().contains("channel 5"), "{err}");
}

#[test]
fn an_exponent_at_the_edge_of_i64_is_a_line_error() {
    let import = text_description(&[0x00, 0, 1, 1, 0, 2, 1, 32]);
    let err = run_text(&import, b"1.5e-9223372036854775807,0\n").unwrap_err();
    assert!(
        err.to_string().starts_with("mem.txt: line 1, field "),
        "{err}"
    );
}
