//! The gate layout of a profile, per channel: a text ruler for the terminal and an SVG picture,
//! so a person sees at a glance where each window sits in the slot.

use super::{Checked, Profile};
use std::fmt::Write;

/// Columns of the text ruler for one slot.
const COLUMNS: usize = 64;

/// The layout as text: one ruler line per channel (`Z0`, `X1`... where a window is, `.` where
/// none is), then one line per gate with its window in ps and slot fractions.
pub fn gate_layout_text(p: &Profile, c: &Checked) -> String {
    let period = p.period_ps();
    let mut out = String::new();
    let _ = writeln!(
        out,
        "slot {period:.1} ps, {} channels, {} gates ({} columns of {:.1} ps)",
        p.channels.len(),
        p.gates.len(),
        COLUMNS,
        period / COLUMNS as f64
    );
    let name_w = p.channels.iter().map(|ch| ch.name.len()).max().unwrap_or(0);
    for ch in &p.channels {
        let mut row = vec!['.'; COLUMNS];
        for (g, &(lo, hi)) in p.gates.iter().zip(&c.windows) {
            if g.channel != ch.channel {
                continue;
            }
            let a = (lo * COLUMNS as f64).floor() as usize;
            let b = ((hi * COLUMNS as f64).ceil() as usize).clamp(a + 1, COLUMNS);
            let label = [basis_char(g), char::from(b'0' + g.bit)];
            for (k, cell) in row.iter_mut().enumerate().take(b).skip(a) {
                *cell = label[(k - a) % 2];
            }
        }
        let _ = writeln!(
            out,
            "ch{:<2} {:<name_w$} |{}|  delay {} ps",
            ch.channel,
            ch.name,
            row.iter().collect::<String>(),
            ch.delay_ps
        );
    }
    let _ = writeln!(
        out,
        "gate  ch  basis bit  window (ps)           window (slot)"
    );
    for (i, (g, &(lo, hi))) in p.gates.iter().zip(&c.windows).enumerate() {
        let _ = writeln!(
            out,
            "{i:>4}  {:>2}  {:>5} {:>3}  {:>8.1} .. {:>8.1}  {:.4} .. {:.4}",
            g.channel,
            basis_char(g),
            g.bit,
            lo * period,
            hi * period,
            lo,
            hi
        );
    }
    out
}

fn basis_char(g: &super::GateToml) -> char {
    match g.basis {
        super::BasisToml::Z => 'Z',
        super::BasisToml::X => 'X',
    }
}

/// The layout as an SVG picture: one lane per channel across one slot, each window a box
/// labelled with basis and bit (Z blue, X orange), and a ps axis.
pub fn gate_layout_svg(p: &Profile, c: &Checked) -> String {
    let period = p.period_ps();
    let (left, width, lane, top) = (140.0, 720.0, 40.0, 40.0);
    let height = top + lane * p.channels.len() as f64 + 50.0;
    let x = |f: f64| left + f * width;
    let mut s = String::new();
    let _ = writeln!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{}" height="{height}" font-family="sans-serif" font-size="12">"#,
        left + width + 30.0
    );
    let _ = writeln!(
        s,
        r#"<text x="{left}" y="22" font-size="14">Gate layout — {} (slot {period:.1} ps)</text>"#,
        escape(&p.name)
    );
    for (row, ch) in p.channels.iter().enumerate() {
        let y = top + lane * row as f64;
        let _ = writeln!(
            s,
            r##"<rect x="{left}" y="{y}" width="{width}" height="{}" fill="#f4f4f4" stroke="#999"/>"##,
            lane - 8.0
        );
        let _ = writeln!(
            s,
            r#"<text x="8" y="{}">ch{} {}</text>"#,
            y + lane / 2.0,
            ch.channel,
            escape(&ch.name)
        );
        for (g, &(lo, hi)) in p.gates.iter().zip(&c.windows) {
            if g.channel != ch.channel {
                continue;
            }
            let fill = match g.basis {
                super::BasisToml::Z => "#4a7fd0",
                super::BasisToml::X => "#e08a2c",
            };
            let _ = writeln!(
                s,
                r#"<rect x="{:.1}" y="{}" width="{:.1}" height="{}" fill="{fill}" opacity="0.8"/>"#,
                x(lo),
                y + 2.0,
                (x(hi) - x(lo)).max(1.0),
                lane - 12.0
            );
            let _ = writeln!(
                s,
                r#"<text x="{:.1}" y="{}" fill="white">{}{}</text>"#,
                x(lo) + 3.0,
                y + lane / 2.0,
                basis_char(g),
                g.bit
            );
        }
    }
    let axis_y = top + lane * p.channels.len() as f64 + 4.0;
    for k in 0..=4 {
        let f = f64::from(k) / 4.0;
        let _ = writeln!(
            s,
            r#"<text x="{:.1}" y="{}" text-anchor="middle">{:.0} ps</text>"#,
            x(f),
            axis_y + 14.0,
            f * period
        );
    }
    s.push_str("</svg>\n");
    s
}

fn escape(t: &str) -> String {
    t.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
}
