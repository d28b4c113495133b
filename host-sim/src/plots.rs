//! Pictures of a run: the fold profile with the gate windows over it, and QBER and detection
//! rate over time. Every plot is written as SVG; a PNG is added when a TrueType font is found on
//! the machine (bitmap text needs one; SVG text does not).

pub mod stats;

use crate::replay::{Bucket, ClockEvent, ClockEventKind, FOLD_BINS};
use plotters::coord::Shift;
use plotters::prelude::*;
use slotwise::{Basis, GateTable};
use std::path::{Path, PathBuf};
use std::sync::OnceLock;

type DynErr = Box<dyn std::error::Error>;

/// A QBER estimate and its 2σ half-width, when the bucket tested anything.
type QberPoint = Option<(f64, f64)>;

const FONT_PATHS: &[&str] = &[
    "/usr/share/fonts/truetype/dejavu/DejaVuSans.ttf",
    "/usr/share/fonts/TTF/DejaVuSans.ttf",
    "/usr/share/fonts/dejavu/DejaVuSans.ttf",
    "/usr/share/fonts/truetype/liberation/LiberationSans-Regular.ttf",
    "/System/Library/Fonts/Supplemental/Arial.ttf",
];

/// Register a system font for text, once; `false` when none was found.
pub(crate) fn font_ready() -> bool {
    static READY: OnceLock<bool> = OnceLock::new();
    *READY.get_or_init(|| {
        let env = std::env::var("SLOTWISE_FONT").ok();
        let candidates = env
            .iter()
            .map(String::as_str)
            .chain(FONT_PATHS.iter().copied());
        for p in candidates {
            if let Ok(bytes) = std::fs::read(p) {
                let bytes: &'static [u8] = Box::leak(bytes.into_boxed_slice());
                if plotters::style::register_font("sans-serif", FontStyle::Normal, bytes).is_ok() {
                    return true;
                }
            }
        }
        false
    })
}

const CHANNEL_COLOURS: [RGBColor; 4] = [
    RGBColor(31, 119, 180),
    RGBColor(214, 39, 40),
    RGBColor(44, 160, 44),
    RGBColor(148, 103, 189),
];

fn colour(i: usize) -> RGBColor {
    CHANNEL_COLOURS[i % CHANNEL_COLOURS.len()]
}

/// Draw one labelled line (2 px, with a legend entry).
fn line<DB, X, Y>(
    chart: &mut ChartContext<'_, DB, Cartesian2d<X, Y>>,
    points: impl IntoIterator<Item = (f64, f64)>,
    c: RGBColor,
    label: String,
) -> Result<(), DynErr>
where
    DB: DrawingBackend,
    DB::ErrorType: 'static,
    X: Ranged<ValueType = f64>,
    Y: Ranged<ValueType = f64>,
{
    chart
        .draw_series(LineSeries::new(points, c.stroke_width(2)))?
        .label(label)
        .legend(move |(x, y)| PathElement::new([(x, y), (x + 18, y)], c.stroke_width(2)));
    Ok(())
}

/// Vertical lines at the clock events, one legend entry per kind that occurs: lock losses red,
/// relocks green, alignments blue, alignment losses orange.
fn clock_markers<DB>(
    chart: &mut ChartContext<
        '_,
        DB,
        Cartesian2d<plotters::coord::types::RangedCoordf64, plotters::coord::types::RangedCoordf64>,
    >,
    events: &[ClockEvent],
    y: (f64, f64),
) -> Result<(), DynErr>
where
    DB: DrawingBackend,
    DB::ErrorType: 'static,
{
    let kinds = [
        (ClockEventKind::LockLost, RGBColor(200, 30, 30), "lock lost"),
        (ClockEventKind::Locked, RGBColor(30, 150, 60), "locked"),
        (
            ClockEventKind::AlignmentLost,
            RGBColor(230, 130, 20),
            "numbering lost",
        ),
        (
            ClockEventKind::Aligned,
            RGBColor(40, 90, 200),
            "numbering aligned",
        ),
        (
            ClockEventKind::HoldoverStarted,
            RGBColor(150, 150, 150),
            "holdover",
        ),
        (
            ClockEventKind::HoldoverBridged,
            RGBColor(120, 60, 170),
            "holdover bridged",
        ),
        (
            ClockEventKind::PhaseJump,
            RGBColor(200, 40, 160),
            "phase jump taken",
        ),
    ];
    for (kind, c, label) in kinds {
        let at: Vec<f64> = events
            .iter()
            .filter(|e| e.kind == kind)
            .map(|e| e.t_s)
            .collect();
        if at.is_empty() {
            continue;
        }
        let style = c.stroke_width(1);
        chart
            .draw_series(
                at.into_iter()
                    .map(move |t| PathElement::new(vec![(t, y.0), (t, y.1)], style)),
            )?
            .label(label)
            .legend(move |(x, yy)| PathElement::new([(x, yy), (x + 18, yy)], style));
    }
    Ok(())
}

/// Draw the legend box at `pos`.
fn legend<'a, DB, X, Y>(
    chart: &mut ChartContext<'a, DB, Cartesian2d<X, Y>>,
    pos: SeriesLabelPosition,
) -> Result<(), DynErr>
where
    DB: DrawingBackend + 'a,
    DB::ErrorType: 'static,
    X: Ranged<ValueType = f64>,
    Y: Ranged<ValueType = f64>,
{
    chart
        .configure_series_labels()
        .background_style(WHITE.mix(0.85))
        .border_style(BLACK)
        .position(pos)
        .draw()?;
    Ok(())
}

/// A picture that can be drawn on any backend.
trait Plot {
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), DynErr>
    where
        DB::ErrorType: 'static;
}

/// Write `stem.svg` (and `stem.png` when a font is available); returns the files written.
fn both(
    dir: &Path,
    stem: &str,
    size: (u32, u32),
    plot: &impl Plot,
) -> Result<Vec<PathBuf>, DynErr> {
    let mut out = Vec::new();
    if font_ready() {
        let png = dir.join(format!("{stem}.png"));
        {
            let root = BitMapBackend::new(&png, size).into_drawing_area();
            plot.draw(&root)?;
            root.present()?;
        }
        out.push(png);
    }
    let svg = dir.join(format!("{stem}.svg"));
    {
        let root = SVGBackend::new(&svg, size).into_drawing_area();
        plot.draw(&root)?;
        root.present()?;
    }
    out.push(svg);
    Ok(out)
}

/// Fold profile: detections per position in the slot, one line per channel, gate windows shaded.
pub fn fold_profile(
    dir: &Path,
    fold: &[[u64; FOLD_BINS]],
    gates: &GateTable,
    title: &str,
) -> Result<Vec<PathBuf>, DynErr> {
    struct Fold<'a> {
        fold: &'a [[u64; FOLD_BINS]],
        gates: &'a GateTable,
        title: &'a str,
    }
    impl Plot for Fold<'_> {
        fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), DynErr>
        where
            DB::ErrorType: 'static,
        {
            root.fill(&WHITE)?;
            let ymax = self
                .fold
                .iter()
                .flat_map(|f| f.iter().copied())
                .max()
                .unwrap_or(1)
                .max(1) as f64;
            let ytop = (ymax * 1.15).log10().ceil();
            let mut chart = ChartBuilder::on(root)
                .caption(self.title, ("sans-serif", 22))
                .margin(12)
                .x_label_area_size(40)
                .y_label_area_size(60)
                .build_cartesian_2d(0f64..1f64, (0.5f64..10f64.powf(ytop)).log_scale())?;
            chart
                .configure_mesh()
                .x_desc("position in the slot (fraction of the period)")
                .y_desc("detections per bin")
                .draw()?;
            for g in self.gates.gates() {
                let c = colour(usize::from(g.channel)).mix(0.12);
                let (a, b) = (g.start.to_num::<f64>(), g.end.to_num::<f64>());
                chart.draw_series(std::iter::once(Rectangle::new(
                    [(a, 0.5), (b, 10f64.powf(ytop))],
                    c.filled(),
                )))?;
                let label = format!(
                    "{}{}",
                    g.basis.name(),
                    if g.basis == Basis::X {
                        if g.bit == 0 {
                            "+"
                        } else {
                            "-"
                        }
                    } else if g.bit == 0 {
                        "0"
                    } else {
                        "1"
                    }
                );
                let y = 10f64.powf(ytop) / (1.6 + 0.9 * f64::from(g.channel));
                chart.draw_series(std::iter::once(Text::new(
                    label,
                    ((a + b) / 2.0 - 0.01, y),
                    ("sans-serif", 13)
                        .into_font()
                        .color(&colour(usize::from(g.channel))),
                )))?;
            }
            for (ch, f) in self.fold.iter().enumerate() {
                let c = colour(ch);
                line(
                    &mut chart,
                    f.iter()
                        .enumerate()
                        .map(|(i, &n)| ((i as f64 + 0.5) / FOLD_BINS as f64, (n as f64).max(0.5))),
                    c,
                    format!("channel {ch}"),
                )?;
            }
            legend(&mut chart, SeriesLabelPosition::UpperRight)?;
            Ok(())
        }
    }
    let f = Fold { fold, gates, title };
    both(dir, "fold", (960, 540), &f)
}

/// QBER per basis over time, with a ±2σ binomial band per bucket, and detection rate per channel.
pub fn qber_and_rate(
    dir: &Path,
    buckets: &[Bucket],
    channels: usize,
) -> Result<Vec<PathBuf>, DynErr> {
    struct Series<'a> {
        b: &'a [Bucket],
        channels: usize,
    }
    impl Plot for Series<'_> {
        fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), DynErr>
        where
            DB::ErrorType: 'static,
        {
            root.fill(&WHITE)?;
            let (top, bottom) = root.split_vertically(root.dim_in_pixel().1 / 2);
            let t_end = self.b.last().map(|b| b.t_s).unwrap_or(1.0).max(1e-9) * 1.02
                + self.b.get(1).map(|b| b.t_s).unwrap_or(0.0);
            let q: Vec<(f64, [QberPoint; 2])> = self
                .b
                .iter()
                .map(|b| {
                    let f = |i: usize| {
                        let (e, n) = b.tested[i];
                        (n > 0).then(|| {
                            let p = e as f64 / n as f64;
                            (
                                p,
                                2.0 * (p.max(0.5 / n as f64) * (1.0 - p) / n as f64).sqrt(),
                            )
                        })
                    };
                    (b.t_s, [f(0), f(1)])
                })
                .collect();
            let qmax = q
                .iter()
                .flat_map(|(_, v)| v.iter().flatten().map(|(p, s)| p + s))
                .fold(0.02f64, f64::max)
                .min(0.5)
                * 100.0
                * 1.1;
            let mut chart = ChartBuilder::on(&top)
                .caption("QBER over time (band: ±2σ binomial)", ("sans-serif", 20))
                .margin(10)
                .x_label_area_size(35)
                .y_label_area_size(55)
                .build_cartesian_2d(0f64..t_end, 0f64..qmax)?;
            chart
                .configure_mesh()
                .x_desc("time (s)")
                .y_desc("QBER (%)")
                .draw()?;
            for (i, name) in [(0usize, "Z"), (1, "X")] {
                let c = colour(i);
                chart.draw_series(q.iter().filter_map(|(t, v)| {
                    v[i].map(|(p, s)| {
                        Rectangle::new(
                            [(*t, 100.0 * (p - s).max(0.0)), (*t + 0.0, 100.0 * (p + s))],
                            c.mix(0.5).stroke_width(3),
                        )
                    })
                }))?;
                line(
                    &mut chart,
                    q.iter()
                        .filter_map(|(t, v)| v[i].map(|(p, _)| (*t, 100.0 * p))),
                    c,
                    format!("{name} basis"),
                )?;
            }
            legend(&mut chart, SeriesLabelPosition::UpperRight)?;
            let dt = self.b.get(1).map(|b| b.t_s).unwrap_or(1.0).max(1e-12);
            let rmax = self
                .b
                .iter()
                .flat_map(|b| b.detections.iter().take(self.channels))
                .copied()
                .max()
                .unwrap_or(1)
                .max(1) as f64
                / dt
                * 1.15;
            let mut chart = ChartBuilder::on(&bottom)
                .caption("Detection rate per channel", ("sans-serif", 20))
                .margin(10)
                .x_label_area_size(35)
                .y_label_area_size(55)
                .build_cartesian_2d(0f64..t_end, 0f64..rmax / 1e3)?;
            chart
                .configure_mesh()
                .x_desc("time (s)")
                .y_desc("detections per second (thousands)")
                .draw()?;
            for ch in 0..self.channels.min(8) {
                let c = colour(ch);
                line(
                    &mut chart,
                    self.b
                        .iter()
                        .map(|b| (b.t_s, b.detections[ch] as f64 / dt / 1e3)),
                    c,
                    format!("channel {ch}"),
                )?;
            }
            legend(&mut chart, SeriesLabelPosition::LowerRight)?;
            Ok(())
        }
    }
    let s = Series {
        b: buckets,
        channels,
    };
    both(dir, "qber_rate", (960, 760), &s)
}

/// Clock quality over time: RMS distance of gated detections from their gate centres, and the
/// period error against `truth_period_ps(t_s)` (when known) in parts per billion.
pub fn clock_series(
    dir: &Path,
    buckets: &[Bucket],
    truth_period_ps: Option<&dyn Fn(f64) -> f64>,
    events: &[ClockEvent],
) -> Result<Vec<PathBuf>, DynErr> {
    struct Clk<'a> {
        b: &'a [Bucket],
        truth: Option<&'a dyn Fn(f64) -> f64>,
        events: &'a [ClockEvent],
    }
    impl Plot for Clk<'_> {
        fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), DynErr>
        where
            DB::ErrorType: 'static,
        {
            root.fill(&WHITE)?;
            let (top, bottom) = root.split_vertically(root.dim_in_pixel().1 / 2);
            let t_end = self.b.last().map(|b| b.t_s).unwrap_or(0.0).max(1e-9) * 1.05;
            let rms: Vec<(f64, f64)> = self
                .b
                .iter()
                .filter(|b| b.residual.0 > 0)
                .map(|b| (b.t_s, (b.residual.1 / b.residual.0 as f64).sqrt()))
                .collect();
            let rmax = rms.iter().map(|p| p.1).fold(1.0, f64::max) * 1.2;
            let mut chart = ChartBuilder::on(&top)
                .caption("Phase residual of gated detections", ("sans-serif", 20))
                .margin(10)
                .x_label_area_size(35)
                .y_label_area_size(55)
                .build_cartesian_2d(0f64..t_end, 0f64..rmax)?;
            chart
                .configure_mesh()
                .x_desc("time (s)")
                .y_desc("RMS distance to gate centre (ps)")
                .draw()?;
            line(&mut chart, rms, colour(0), "residual rms".into())?;
            clock_markers(&mut chart, self.events, (0.0, rmax))?;
            legend(&mut chart, SeriesLabelPosition::UpperRight)?;
            // Without a true clock (a capture from real hardware) the estimate is drawn against
            // its own first value: the transmitter's drift as the receiver saw it.
            let first = self.b.iter().find_map(|b| b.period_ps);
            let err: Vec<(f64, f64)> = self
                .b
                .iter()
                .filter_map(|b| {
                    let p = b.period_ps?;
                    let reference = match self.truth {
                        Some(f) => f(b.t_s),
                        None => first?,
                    };
                    Some((b.t_s, (p - reference) / reference * 1e9))
                })
                .collect();
            let emax = err.iter().map(|p| p.1.abs()).fold(1.0, f64::max) * 1.2;
            let (caption, label) = if self.truth.is_some() {
                (
                    "Period error against the scenario's clock",
                    "estimate − truth",
                )
            } else {
                (
                    "Period estimate since the first lock (no true clock known)",
                    "estimate − first estimate",
                )
            };
            let mut chart = ChartBuilder::on(&bottom)
                .caption(caption, ("sans-serif", 20))
                .margin(10)
                .x_label_area_size(35)
                .y_label_area_size(55)
                .build_cartesian_2d(0f64..t_end, -emax..emax)?;
            chart
                .configure_mesh()
                .x_desc("time (s)")
                .y_desc("period (ppb)")
                .draw()?;
            line(&mut chart, err, colour(1), label.into())?;
            clock_markers(&mut chart, self.events, (-emax, emax))?;
            legend(&mut chart, SeriesLabelPosition::UpperRight)?;
            Ok(())
        }
    }
    let c = Clk {
        b: buckets,
        truth: truth_period_ps,
        events,
    };
    both(dir, "clock", (960, 700), &c)
}
