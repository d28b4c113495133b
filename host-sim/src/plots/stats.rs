//! Pictures of the live statistics: window QBER per basis with the board's upper bound and the
//! exact Clopper-Pearson upper bound, detection rate per channel per block, and alarms on a time
//! axis (raised spans as bars, one row per alarm).

use super::{both, colour, legend, line, DynErr, Plot};
use crate::replay::SessionResult;
use crate::stats::{alarm_name, bound_epsilon, clopper_pearson, LiveLog};
use plotters::coord::Shift;
use plotters::element::DashedPathElement;
use plotters::prelude::*;
use slotwise::alarms::BoundKind;
use slotwise::{Basis, Transmitter};
use std::path::{Path, PathBuf};

/// Window QBER, board upper bound and Clopper-Pearson upper bound of one basis at one block.
type QberBounds = Option<(f64, f64, f64)>;

/// One raised span of one alarm: (row name, from s, to s).
type Span = (String, f64, f64);

/// Width of the y-label area of every panel, px, so that the three time axes line up.
const Y_LABELS_PX: u32 = 110;

fn spans(log: &LiveLog, first_t_ps: u64, t_end: f64) -> Vec<Span> {
    let mut open: Vec<(String, f64)> = Vec::new();
    let mut out = Vec::new();
    for e in &log.events {
        let t = e.t_ps.saturating_sub(first_t_ps) as f64 * 1e-12;
        let name = alarm_name(e.kind);
        if e.raised {
            open.push((name, t));
        } else if let Some(i) = open.iter().position(|(n, _)| *n == name) {
            let (n, from) = open.remove(i);
            out.push((n, from, t));
        }
    }
    out.extend(open.into_iter().map(|(n, from)| (n, from, t_end)));
    out
}

/// `live_stats.svg` (and `.png`) of a finished session: window QBER of the class the QBER alarm
/// watches with both upper bounds and the alarm's ceiling, rate per channel, alarms.
pub fn live_stats<T: Transmitter>(
    dir: &Path,
    res: &SessionResult<T>,
) -> Result<Vec<PathBuf>, DynErr> {
    struct Pic<'a> {
        log: &'a LiveLog,
        first_t_ps: u64,
        channels: usize,
        intensity: usize,
        ceiling: f64,
        /// Top of the QBER axis, fraction.
        q_top: f64,
        /// One-sided ε of the bounds drawn.
        epsilon: f64,
        /// Name of the board's bound, for the legend.
        bound: String,
    }
    impl Plot for Pic<'_> {
        fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), DynErr>
        where
            DB::ErrorType: 'static,
        {
            root.fill(&WHITE)?;
            let h = root.dim_in_pixel().1;
            let (top, rest) = root.split_vertically(h * 9 / 20);
            let (mid, bottom) = rest.split_vertically(h * 3 / 10);
            let b = &self.log.blocks;
            let t_end = b.last().map(|p| p.t_s).unwrap_or(1.0).max(1e-9) * 1.02;
            // Per block, per basis: (QBER, board upper, Clopper-Pearson upper) of the window.
            let q: Vec<(f64, [QberBounds; 2])> = b
                .iter()
                .map(|p| {
                    let f = |basis: usize| {
                        let (e, n) = p.snapshot.tested.get(basis)?.get(self.intensity)?;
                        let (e, n) = (u64::from(*e), u64::from(*n));
                        (n > 0).then(|| {
                            let ub = p.snapshot.upper_ppm[basis];
                            (
                                e as f64 / n as f64,
                                f64::from(ub) * 1e-6,
                                clopper_pearson(e, n, 2.0 * self.epsilon).1,
                            )
                        })
                    };
                    (p.t_s, [f(0), f(1)])
                })
                .collect();
            let qmax = 100.0 * self.q_top;
            let clipped = q
                .iter()
                .flat_map(|(_, v)| v.iter().flatten())
                .any(|x| x.1.max(x.2) > self.q_top);
            let mut chart = ChartBuilder::on(&top)
                .caption(
                    format!(
                        "Window QBER per basis, intensity class {}, with upper bounds (one-sided ε {:e}){}",
                        self.intensity,
                        self.epsilon,
                        if clipped { "; axis clipped" } else { "" }
                    ),
                    ("sans-serif", 16),
                )
                .margin(10)
                .x_label_area_size(30)
                .y_label_area_size(Y_LABELS_PX)
                .build_cartesian_2d(0f64..t_end, 0f64..qmax)?;
            chart
                .configure_mesh()
                .x_desc("time since the first detection (s)")
                .y_desc("QBER (%)")
                .draw()?;
            let alarm_red = RGBColor(120, 0, 0);
            chart
                .draw_series(DashedLineSeries::new(
                    [(0.0, 100.0 * self.ceiling), (t_end, 100.0 * self.ceiling)],
                    10,
                    5,
                    alarm_red.stroke_width(2),
                ))?
                .label(format!("alarm ceiling {:.4} %", 100.0 * self.ceiling))
                .legend(move |(x, y)| {
                    PathElement::new([(x, y), (x + 18, y)], alarm_red.stroke_width(2))
                });
            let grey = RGBColor(90, 90, 90);
            chart
                .draw_series(DashedLineSeries::new(
                    std::iter::empty::<(f64, f64)>(),
                    6,
                    4,
                    grey.stroke_width(1),
                ))?
                .label(format!("board upper bound ({})", self.bound))
                .legend(move |(x, y)| {
                    DashedPathElement::new([(x, y), (x + 18, y)], 6, 4, grey.stroke_width(1))
                });
            chart
                .draw_series(DashedLineSeries::new(
                    std::iter::empty::<(f64, f64)>(),
                    2,
                    3,
                    grey.stroke_width(1),
                ))?
                .label("Clopper-Pearson upper bound (exact, host)")
                .legend(move |(x, y)| {
                    DashedPathElement::new([(x, y), (x + 18, y)], 2, 3, grey.stroke_width(1))
                });
            for (i, name) in [(0usize, "Z"), (1, "X")] {
                let c = colour(i);
                let pts = |k: usize| {
                    q.iter()
                        .filter_map(move |(t, v)| v[i].map(|x| (*t, 100.0 * [x.0, x.1, x.2][k])))
                        .collect::<Vec<_>>()
                };
                line(&mut chart, pts(0), c, format!("{name} basis, window QBER"))?;
                chart.draw_series(DashedLineSeries::new(pts(1), 6, 4, c.stroke_width(1)))?;
                chart.draw_series(DashedLineSeries::new(pts(2), 2, 3, c.stroke_width(1)))?;
            }
            legend(&mut chart, SeriesLabelPosition::UpperRight)?;

            let rmax = b
                .iter()
                .flat_map(|p| {
                    p.block_detections
                        .iter()
                        .map(move |&d| d as f64 / p.block_s)
                })
                .fold(1.0, f64::max)
                * 1.0;
            // Channels differ by an order of magnitude or more (arrival-time port against the
            // interferometer outputs), so the rate axis is logarithmic.
            let rmin = b
                .iter()
                .flat_map(|p| {
                    p.block_detections
                        .iter()
                        .filter(|&&d| d > 0)
                        .map(move |&d| d as f64 / p.block_s)
                })
                .fold(rmax, f64::min);
            // Whole decades, so the axis starts and ends on a labelled power of ten.
            let (rmin, rmax) = (
                10f64.powf((rmin * 0.7).log10().floor()),
                10f64.powf(rmax.log10().ceil()),
            );
            let mut chart = ChartBuilder::on(&mid)
                .caption(
                    "Detection rate per channel, per block (log scale)",
                    ("sans-serif", 16),
                )
                .margin(10)
                .x_label_area_size(30)
                .y_label_area_size(Y_LABELS_PX)
                .build_cartesian_2d(0f64..t_end, (rmin / 1e3..rmax / 1e3).log_scale())?;
            chart
                .configure_mesh()
                .x_desc("time since the first detection (s)")
                .y_desc("detection rate (kHz)")
                .y_max_light_lines(1)
                .y_label_formatter(&|v| {
                    // Label 1, 2 and 5 of each decade only; the others crowd the axis.
                    let m = v / 10f64.powf(v.log10().floor());
                    let keep = [1.0, 2.0, 5.0].iter().any(|k| (m - k).abs() < 1e-6);
                    if keep {
                        format!("{v}")
                    } else {
                        String::new()
                    }
                })
                .draw()?;
            for ch in 0..self.channels {
                let pts = b.iter().filter_map(|p| {
                    let d = *p.block_detections.get(ch).filter(|&&d| d > 0)?;
                    Some((p.t_s, d as f64 / p.block_s / 1e3))
                });
                line(&mut chart, pts, colour(ch), format!("channel {ch}"))?;
            }
            legend(&mut chart, SeriesLabelPosition::MiddleRight)?;

            let sp = spans(self.log, self.first_t_ps, t_end);
            let mut rows: Vec<String> = ["qber_z", "qber_x", "lock_lost", "rate_collapse"]
                .iter()
                .map(|s| s.to_string())
                .collect();
            for (n, _, _) in &sp {
                if !rows.contains(n) {
                    rows.push(n.clone());
                }
            }
            let mut chart = ChartBuilder::on(&bottom)
                .caption(
                    format!("Alarms raised ({}), red while active", sp.len()),
                    ("sans-serif", 16),
                )
                .margin(10)
                .x_label_area_size(30)
                .y_label_area_size(Y_LABELS_PX)
                .build_cartesian_2d(0f64..t_end, 0f64..rows.len() as f64)?;
            let names = rows.clone();
            chart
                .configure_mesh()
                .x_desc("time since the first detection (s)")
                .y_labels(rows.len() * 2 + 1)
                .y_label_formatter(&move |y| {
                    let i = y.floor() as usize;
                    if (y - y.floor() - 0.5).abs() < 0.26 {
                        names.get(i).cloned().unwrap_or_default()
                    } else {
                        String::new()
                    }
                })
                .disable_y_mesh()
                .draw()?;
            chart.draw_series(sp.iter().filter_map(|(n, from, to)| {
                let row = rows.iter().position(|r| r == n)? as f64;
                let w = (to - from).max(t_end * 0.003);
                Some(Rectangle::new(
                    [(*from, row + 0.2), (from + w, row + 0.8)],
                    RGBColor(214, 39, 40).filled(),
                ))
            }))?;
            Ok(())
        }
    }
    let alarms = res.monitor.alarms().config();
    let ceiling = f64::from(alarms.qber_ceiling_ppm()) * 1e-6;
    // Early windows hold few tested bits and their bounds run towards 50 %; scale the axis to
    // what matters once the run has data: the ceiling, or three times the since-start bound.
    let since = res.monitor.since_start();
    let since_upper = Basis::ALL
        .iter()
        .filter_map(|&b| {
            let (e, n) = since.errors(b, Some(alarms.intensity()));
            (n > 0).then(|| f64::from(alarms.upper_ppm(e, n)) * 1e-6)
        })
        .fold(0.0, f64::max);
    let pic = Pic {
        log: &res.live,
        first_t_ps: res.first_t_ps,
        channels: usize::from(res.rx.config().gates().channels()),
        intensity: usize::from(alarms.intensity()),
        ceiling,
        // Headroom above the ceiling keeps the legend clear of the curves.
        q_top: (ceiling.max(3.0 * since_upper) * 1.6).min(1.0),
        epsilon: bound_epsilon(alarms.bound()),
        bound: match alarms.bound() {
            BoundKind::Wilson { z_q16 } => format!("Wilson, z = {:.2}", f64::from(z_q16) / 65536.0),
            BoundKind::Hoeffding(_) => "Hoeffding".into(),
        },
    };
    both(dir, "live_stats", (1000, 900), &pic)
}
