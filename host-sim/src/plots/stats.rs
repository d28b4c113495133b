//! Pictures of the live statistics: window QBER per basis with the board's upper bound and the
//! exact Clopper-Pearson upper bound, detection rate per channel per block, and alarms on a time
//! axis (raised spans as bars, one row per alarm).

use super::{both, colour, legend, line, DynErr, Plot};
use crate::replay::SessionResult;
use crate::stats::{alarm_name, clopper_pearson, LiveLog, EPSILON};
use plotters::coord::Shift;
use plotters::prelude::*;
use slotwise::Transmitter;
use std::path::{Path, PathBuf};

/// Window QBER, board upper bound and Clopper-Pearson upper bound of one basis at one block.
type QberBounds = Option<(f64, f64, f64)>;

/// One raised span of one alarm: (row name, from s, to s).
type Span = (String, f64, f64);

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
    }
    impl Plot for Pic<'_> {
        fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), DynErr>
        where
            DB::ErrorType: 'static,
        {
            root.fill(&WHITE)?;
            let h = root.dim_in_pixel().1;
            let (top, rest) = root.split_vertically(h * 2 / 5);
            let (mid, bottom) = rest.split_vertically(h * 2 / 5);
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
                                clopper_pearson(e, n, 2.0 * EPSILON).1,
                            )
                        })
                    };
                    (p.t_s, [f(0), f(1)])
                })
                .collect();
            let qmax = q
                .iter()
                .flat_map(|(_, v)| v.iter().flatten().map(|x| x.1))
                .fold(self.ceiling * 1.2, f64::max)
                .min(1.0)
                * 100.0;
            let mut chart = ChartBuilder::on(&top)
                .caption(
                    format!(
                        "Window QBER, class {} (dashed: board upper bound; dotted: Clopper-Pearson, eps {EPSILON:e})",
                        self.intensity
                    ),
                    ("sans-serif", 16),
                )
                .margin(10)
                .x_label_area_size(30)
                .y_label_area_size(55)
                .build_cartesian_2d(0f64..t_end, 0f64..qmax)?;
            chart
                .configure_mesh()
                .x_desc("time (s)")
                .y_desc("QBER (%)")
                .draw()?;
            chart
                .draw_series(LineSeries::new(
                    [(0.0, 100.0 * self.ceiling), (t_end, 100.0 * self.ceiling)],
                    BLACK.stroke_width(1),
                ))?
                .label(format!("ceiling {:.4} %", 100.0 * self.ceiling))
                .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], BLACK));
            for (i, name) in [(0usize, "Z"), (1, "X")] {
                let c = colour(i);
                let pts = |k: usize| {
                    q.iter()
                        .filter_map(move |(t, v)| v[i].map(|x| (*t, 100.0 * [x.0, x.1, x.2][k])))
                        .collect::<Vec<_>>()
                };
                line(&mut chart, pts(0), c, format!("{name} basis"))?;
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
                * 1.15;
            let mut chart = ChartBuilder::on(&mid)
                .caption("Detection rate per channel, per block", ("sans-serif", 16))
                .margin(10)
                .x_label_area_size(30)
                .y_label_area_size(55)
                .build_cartesian_2d(0f64..t_end, 0f64..rmax / 1e3)?;
            chart
                .configure_mesh()
                .x_desc("time (s)")
                .y_desc("detections/s (thousands)")
                .draw()?;
            for ch in 0..self.channels {
                let pts = b.iter().filter_map(|p| {
                    let d = *p.block_detections.get(ch)?;
                    Some((p.t_s, d as f64 / p.block_s / 1e3))
                });
                line(&mut chart, pts, colour(ch), format!("channel {ch}"))?;
            }
            legend(&mut chart, SeriesLabelPosition::LowerRight)?;

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
                .caption(format!("Alarms ({} raised)", sp.len()), ("sans-serif", 16))
                .margin(10)
                .x_label_area_size(30)
                .y_label_area_size(110)
                .build_cartesian_2d(0f64..t_end, 0f64..rows.len() as f64)?;
            let names = rows.clone();
            chart
                .configure_mesh()
                .x_desc("time (s)")
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
    let pic = Pic {
        log: &res.live,
        first_t_ps: res.first_t_ps,
        channels: usize::from(res.rx.config().gates().channels()),
        intensity: usize::from(alarms.intensity()),
        ceiling: f64::from(alarms.qber_ceiling_ppm()) * 1e-6,
    };
    both(dir, "live_stats", (1000, 900), &pic)
}
