//! `slotwise profile`: check a receiver profile and draw its gate layout, or write the profile of
//! the simulator's receiver for a scenario.

use crate::board_blob;
use crate::profile::{gate_layout_svg, gate_layout_text, Profile};
use crate::scenario::Scenario;
use clap::{Args, Subcommand};
use std::io::Write;
use std::path::PathBuf;

/// Long help of `slotwise profile`.
pub const LONG_ABOUT: &str = "\
A receiver profile (TOML, docs/receiver-profile.md) describes a real receiver: its TDC (counter
width, tick), the transmitter's nominal clock and the prior on it, protocol and intensity
classes, channels with their skews and dead times, the gate windows (centre and half-width in ps
or in slot fractions, basis, bit), the marker, sifting and alarms. `slotwise replay --profile`
replays a capture through the receiver it describes; no scenario is needed.

  slotwise profile check my-receiver.toml              # check it; draw the gate layout
  slotwise profile check my-receiver.toml --svg g.svg  # ...and as a picture
  slotwise profile from-scenario scenarios/bench-100mhz-30km.toml -o bench.toml
  slotwise profile compile bench.toml -o bench.swblob     # the bytes a board reads (C or Rust)

Every value is checked by the core's own configuration constructors; an error names the file,
the line and the key (e.g. gates[2].half_width_ps) and the range that was expected.";

/// `slotwise profile`: what to do.
#[derive(Args, Debug)]
#[command(
    about = "Check a receiver profile and draw its gate layout, or write one for a scenario.",
    long_about = LONG_ABOUT
)]
pub struct ProfileArgs {
    /// The action.
    #[command(subcommand)]
    pub action: ProfileAction,
}

/// The actions of `slotwise profile`.
#[derive(Subcommand, Debug)]
pub enum ProfileAction {
    /// Check a profile; print its gate layout per channel (and draw it with --svg).
    #[command(long_about = "\
Check a receiver profile with the core's configuration constructors and print its gate layout:
one ruler per channel across one slot (Z0, X1... where a window is), then every gate's window in
ps and in slot fractions. Exit status 0 when the profile is good; 1 with an error naming the file,
line and key otherwise.")]
    Check {
        /// The profile (TOML).
        profile: PathBuf,
        /// Also draw the layout as an SVG picture here.
        #[arg(long, value_name = "FILE.svg")]
        svg: Option<PathBuf>,
    },
    /// Write the profile of the simulator's receiver for a scenario.
    #[command(long_about = "\
Write the profile of the receiver the simulator builds for a scenario: its optics' gate windows,
channel skews, TDC, the channel model's expected signal rate, and the scenario's true slot grid as
[clock.reference]. Replaying the scenario's capture with this profile and the transmitter record
gives the same counters as replaying it with the scenario.")]
    FromScenario {
        /// The scenario (TOML, docs/scenario.md).
        scenario: PathBuf,
        /// Where to write the profile (default: standard output).
        #[arg(short, long)]
        out: Option<PathBuf>,
    },
    /// Compile a profile to the blob a board reads (docs/board-integration.md).
    #[command(long_about = "\
Compile a receiver profile to the profile blob a board's firmware reads (Rust: Station::new; C:
sw_station_init), so board code never builds gate tables or clock settings by hand. The blob
holds the setup (TDC, gates, sifting), the board settings (recovered clock from [clock], marker
numbering, link timeouts, monitor, alarms) and, with --words, the TDC's raw-word layout; each
section has its own CRC-32/ISCSI. Layout: docs/board-integration.md.

  slotwise profile compile rx.toml -o rx.swblob
  slotwise profile compile rx.toml -o rx.swblob \\
      --words bytes=8,time=0:32,channel=32:8,kind=40:8,event=1,rollover=2,max-channel=7

The profile must enable the public marker: the board numbers slots through it.")]
    Compile {
        /// The profile (TOML).
        profile: PathBuf,
        /// Where to write the blob.
        #[arg(short, long)]
        out: PathBuf,
        /// The TDC's raw-word layout, as comma-separated KEY=VALUE items: bytes (4|8), endian
        /// (little|big), time, channel, kind and count as OFFSET:WIDTH in bits, event and
        /// rollover (kind values), max-channel.
        #[arg(long, value_name = "LAYOUT")]
        words: Option<String>,
        /// The classical channel's hint, when known when compiling: receiver time in ps and the
        /// transmitter's slot counter then (default: none; the firmware gives it at run time).
        #[arg(long, value_name = "T_PS:TX_SLOT")]
        hint: Option<String>,
    },
}

/// Run `slotwise profile`.
pub fn run(a: &ProfileArgs) -> Result<(), Box<dyn std::error::Error>> {
    match &a.action {
        ProfileAction::Check { profile, svg } => {
            let (p, c) = Profile::load(profile)?;
            let mut out = std::io::stdout().lock();
            writeln!(out, "{}: profile '{}' is good", profile.display(), p.name)?;
            write!(out, "{}", gate_layout_text(&p, &c))?;
            if p.sifting.pending_capacity != crate::profile::HOST_PENDING {
                writeln!(
                    out,
                    "note: the board's pending queue holds {} slots; the host replays with {}, so \
                     queue_overflow counts can differ from the board's",
                    p.sifting.pending_capacity,
                    crate::profile::HOST_PENDING
                )?;
            }
            if let Some(path) = svg {
                std::fs::write(path, gate_layout_svg(&p, &c))
                    .map_err(|e| format!("{}: {e}", path.display()))?;
                writeln!(out, "wrote {}", path.display())?;
            }
            Ok(())
        }
        ProfileAction::Compile {
            profile,
            out,
            words,
            hint,
        } => {
            let source = profile.display().to_string();
            let (p, c) = Profile::load(profile)?;
            let words = words.as_deref().map(board_blob::parse_words).transpose()?;
            let hint = hint.as_deref().map(parse_hint).transpose()?;
            let blob = board_blob::compile(&p, &c, hint, words, &source)?;
            std::fs::write(out, &blob).map_err(|e| format!("{}: {e}", out.display()))?;
            println!(
                "wrote {} ({} bytes: setup, board settings{})",
                out.display(),
                blob.len(),
                if words.is_some() { ", word layout" } else { "" }
            );
            Ok(())
        }
        ProfileAction::FromScenario { scenario, out } => {
            let s = Scenario::load(scenario)?;
            let p = Profile::from_scenario(&s);
            p.check(&scenario.display().to_string())?;
            let text = format!(
                "# Receiver profile of the simulator's receiver for scenario '{}'\n\
                 # (docs/receiver-profile.md).\n{}",
                s.name,
                p.to_toml_string()
            );
            match out {
                Some(path) => {
                    std::fs::write(path, text).map_err(|e| format!("{}: {e}", path.display()))?;
                    eprintln!("wrote {}", path.display());
                }
                None => std::io::stdout().lock().write_all(text.as_bytes())?,
            }
            Ok(())
        }
    }
}

/// `T_PS:TX_SLOT` of `--hint`.
fn parse_hint(s: &str) -> Result<(u64, u64), String> {
    let (t, k) = s
        .split_once(':')
        .ok_or_else(|| format!("--hint {s:?}: expected T_PS:TX_SLOT"))?;
    let n = |v: &str| {
        v.trim()
            .parse::<u64>()
            .map_err(|_| format!("--hint {s:?}: {v:?} is not a whole number"))
    };
    Ok((n(t)?, n(k)?))
}
