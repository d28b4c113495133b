use super::*;
use crate::scenario::Scenario;

fn scenario(name: &str) -> Scenario {
    Scenario::load(format!(
        "{}/../scenarios/{name}.toml",
        env!("CARGO_MANIFEST_DIR")
    ))
    .unwrap()
}

#[test]
fn every_committed_scenario_gives_a_profile_that_round_trips() {
    let dir = format!("{}/../scenarios", env!("CARGO_MANIFEST_DIR"));
    for entry in std::fs::read_dir(dir).unwrap() {
        let path = entry.unwrap().path();
        let s = Scenario::load(&path).unwrap();
        let p = Profile::from_scenario(&s);
        let checked = p.check("from-scenario").unwrap();
        let text = p.to_toml_string();
        let (back, checked_back) = Profile::from_toml_str(&text, "written").unwrap();
        assert_eq!(back, p, "{}", path.display());
        assert_eq!(checked_back, checked, "{}", path.display());
    }
}

#[test]
fn the_default_marker_is_the_standard_one() {
    let p = Profile::from_scenario(&scenario("bench-100mhz-30km"));
    let c = p.check("p").unwrap();
    assert_eq!(c.marker, Some(MarkerSpec::standard()));
    // The scenario's simulated hello is off by 300 µs, stated as its bound: 30 000 slots.
    assert_eq!(
        c.frame,
        Some(FrameConfig::standard().with_hint_error_slots(Some(30_000)))
    );
}

#[test]
fn hint_error_bound_converts_to_slots_and_is_checked() {
    let mut p = Profile::from_scenario(&scenario("bench-100mhz-30km"));
    p.marker.hint_error_us = Some(10.0);
    let c = p.check("p").unwrap();
    assert_eq!(c.frame.unwrap().hint_error_slots(), Some(1_000));
    p.marker.hint_error_us = None;
    assert_eq!(
        p.check("p").unwrap().frame.unwrap().hint_error_slots(),
        None
    );
    p.marker.hint_error_us = Some(-1.0);
    let e = p.check("p").unwrap_err().to_string();
    assert!(e.contains("marker.hint_error_us"), "{e}");
}

#[test]
fn the_reference_is_the_simulators_true_grid() {
    let s = scenario("bench-100mhz-30km");
    let c = Profile::from_scenario(&s).check("p").unwrap();
    assert_eq!(
        c.reference,
        Some(crate::sim::clock_truth(&s).unwrap().fixed_clock())
    );
}

/// A hand-written profile: four detectors at 0.55 of the slot with skews, no marker.
const HAND: &str = r#"
name = "four-detector bench"

[tdc]
counter_bits = 48
tick_ps = 1

[clock]
rep_rate_hz = 250e6
signal_rate_hz = 5000

[protocol]
kind = "bb84"
intensities = [0.5]

[marker]
enabled = false

[[channels]]
channel = 0
name = "H"
delay_ps = 310

[[channels]]
channel = 1
name = "V"
delay_ps = -120

[[gates]]
channel = 0
centre_slot = 0.55
half_width_ps = 400
basis = "Z"
bit = 0

[[gates]]
channel = 1
centre_ps = 2200
half_width_slot = 0.1
basis = "Z"
bit = 1
"#;

fn err(text: &str) -> TomlError {
    Profile::from_toml_str(text, "p.toml").unwrap_err()
}

fn line_of(text: &str, needle: &str, nth: usize) -> usize {
    text.lines()
        .enumerate()
        .filter(|(_, l)| l.trim() == needle)
        .nth(nth)
        .unwrap()
        .0
        + 1
}

#[test]
fn a_hand_written_profile_checks_and_places_its_windows() {
    let (p, c) = Profile::from_toml_str(HAND, "p.toml").unwrap();
    assert_eq!(p.period_ps(), 4000.0);
    // 0.55 ± 400/4000 and 2200/4000 ± 0.1 of the slot.
    assert!((c.windows[0].0 - 0.45).abs() < 1e-12 && (c.windows[0].1 - 0.65).abs() < 1e-12);
    assert!((c.windows[1].0 - 0.45).abs() < 1e-12 && (c.windows[1].1 - 0.65).abs() < 1e-12);
    assert_eq!(c.receiver.gates().channels(), 2);
    assert_eq!(c.receiver.answer_timeout_slots(), 2_500_000);
    assert!(c.marker.is_none());
    let text = gate_layout_text(&p, &c);
    assert!(text.contains("ch0  H |"), "{text}");
    assert!(gate_layout_svg(&p, &c).starts_with("<svg"));
}

#[test]
fn overlapping_gates_are_named_with_their_line() {
    let text = HAND.replace("channel = 1\ncentre_ps", "channel = 0\ncentre_ps");
    let e = err(&text);
    assert_eq!(e.key.as_deref(), Some("gates[1]"), "{e}");
    assert_eq!(e.line, Some(line_of(&text, "[[gates]]", 1)), "{e}");
    assert!(e.message.contains("overlaps gates[0] on channel 0"), "{e}");
}

#[test]
fn an_unknown_channel_is_named() {
    let text = HAND.replace("channel = 1\ncentre_ps", "channel = 5\ncentre_ps");
    let e = err(&text);
    assert_eq!(e.key.as_deref(), Some("gates[1].channel"), "{e}");
    assert!(e.message.contains("channel 5 is not described"), "{e}");
    assert_eq!(e.line, Some(line_of(&text, "channel = 5", 0)), "{e}");
}

#[test]
fn a_window_wider_than_the_slot_is_refused() {
    let e = err(&HAND.replace("half_width_ps = 400", "half_width_ps = 2500"));
    assert_eq!(e.key.as_deref(), Some("gates[0].half_width_ps"), "{e}");
    assert!(e.message.contains("wider than the 4000.0 ps slot"), "{e}");
}

#[test]
fn ranges_and_unknown_keys_are_named() {
    let e = err(&HAND.replace("counter_bits = 48", "counter_bits = 20"));
    assert_eq!(e.key.as_deref(), Some("tdc.counter_bits"), "{e}");
    assert!(e.message.contains("32..=64"), "{e}");
    let e = err(&HAND.replace("rep_rate_hz = 250e6", "rep_rate_hz = 250e6\nspeed = 3"));
    assert!(e.message.contains("unknown field `speed`"), "{e}");
    assert!(e.line.is_some(), "{e}");
    let e = err(&HAND.replace("channel = 1\nname", "channel = 2\nname"));
    assert_eq!(e.key.as_deref(), Some("channels[1].channel"), "{e}");
    assert!(e.message.contains("--channel-map"), "{e}");
    let e = err(&HAND.replace("intensities = [0.5]", "intensities = [0.5, 0.1, 0.0, 0.2]"));
    assert_eq!(e.key.as_deref(), Some("protocol.intensities"), "{e}");
}

#[test]
fn default_gates_form_a_valid_table() {
    let s = Scenario::default_bench();
    assert_eq!(crate::scenario::layout::channels(&s), 3);
    // 100 MHz, 35 ps: w = min(0.45·2500, max(140, 200)) = 200 ps.
    assert!((crate::scenario::layout::gate_half_width_ps(&s) - 200.0).abs() < 1e-9);
    let t = *Profile::from_scenario(&s)
        .check("bench")
        .unwrap()
        .receiver
        .gates();
    assert_eq!(t.gates().len(), 8);
    let lookup = |ch, x: f64| match t.lookup(ch, slotwise::fixed::types::U0F32::from_num(x)) {
        slotwise::Lookup::Gate(i) => t.gate(i).map(|g| (g.basis, g.bit)),
        slotwise::Lookup::Outside => None,
    };
    assert_eq!(lookup(0, 0.2), Some((slotwise::Basis::Z, 0)));
    assert_eq!(lookup(0, 0.45), Some((slotwise::Basis::Z, 1)));
    assert_eq!(lookup(0, 0.7), None);
    assert_eq!(lookup(1, 0.45), Some((slotwise::Basis::X, 0)));
    assert_eq!(lookup(2, 0.45), Some((slotwise::Basis::X, 1)));
    assert_eq!(lookup(2, 0.7), Some((slotwise::Basis::Z, 1)));
    assert_eq!(lookup(1, 0.2 + 0.021), None);
}

mod props {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(256))]

        /// A hand-written profile with one line dropped or one value replaced: the parser never
        /// panics, an error names the file, and whatever parses round-trips to the same
        /// configurations (the proptest form of the `profile_toml` fuzz target).
        #[test]
        fn edited_profiles_fail_cleanly_or_round_trip(
            line in 0usize..60,
            value in prop_oneof![
                Just(String::new()),
                (-1e12f64..1e12).prop_map(|v| v.to_string()),
                (0u64..1 << 40).prop_map(|v| v.to_string()),
                Just("\"Z\"".to_string()),
                Just("[1, 2".to_string()),
                Just("nan".to_string()),
            ],
            drop in any::<bool>(),
        ) {
            let edited: Vec<String> = HAND
                .lines()
                .enumerate()
                .filter(|&(i, _)| !(drop && i == line))
                .map(|(i, l)| match l.split_once(" = ") {
                    Some((k, _)) if !drop && i == line => format!("{k} = {value}"),
                    _ => l.to_string(),
                })
                .collect();
            let text = edited.join("\n");
            match Profile::from_toml_str(&text, "edit.toml") {
                Err(e) => prop_assert!(e.to_string().starts_with("edit.toml:"), "{}", e),
                Ok((p, c)) => {
                    let (back, again) =
                        Profile::from_toml_str(&p.to_toml_string(), "rt").unwrap();
                    prop_assert_eq!(back, p);
                    prop_assert_eq!(again, c);
                }
            }
        }
    }
}
