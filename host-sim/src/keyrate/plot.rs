//! The rate-versus-fibre-length picture with the measured operating point marked.

use super::report::{CurvePoint, Estimate, Estimator};
use plotters::coord::Shift;
use plotters::prelude::*;
use std::path::Path;

type DynErr = Box<dyn std::error::Error>;

fn draw<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    curve: &[CurvePoint],
    est: &Estimate,
    title: &str,
    labels: &CurveLabels,
) -> Result<(), DynErr>
where
    DB::ErrorType: 'static,
{
    root.fill(&WHITE)?;
    let vals = curve
        .iter()
        .flat_map(|p| [p.bits_per_pulse, p.infinite_decoy_bits_per_pulse])
        .flatten()
        .chain((est.bits_per_pulse > 0.0).then_some(est.bits_per_pulse));
    let (lo, hi) = vals.fold((f64::INFINITY, 0f64), |(lo, hi), v| (lo.min(v), hi.max(v)));
    let (lo, hi) = if hi > 0.0 {
        (lo.max(hi * 1e-9) / 2.0, hi * 2.0)
    } else {
        (1e-9, 1e-1)
    };
    let l_end = curve.last().map_or(1.0, |p| p.fiber_km).max(est.fiber_km) * 1.05 + 1.0;
    let mut chart = ChartBuilder::on(root)
        .caption(title, ("sans-serif", 20))
        .margin(12)
        .x_label_area_size(40)
        .y_label_area_size(70)
        .build_cartesian_2d(0f64..l_end, (lo..hi).log_scale())?;
    chart
        .configure_mesh()
        .x_desc("fibre length (km)")
        .y_desc("secret key (bit/pulse)")
        .y_label_formatter(&|v| format!("{v:.0e}"))
        .draw()?;
    let blue = RGBColor(31, 119, 180);
    let grey = RGBColor(120, 120, 120);
    let series = |f: fn(&CurvePoint) -> Option<f64>| -> Vec<(f64, f64)> {
        curve
            .iter()
            .filter_map(|p| f(p).map(|v| (p.fiber_km, v)))
            .collect()
    };
    chart
        .draw_series(LineSeries::new(
            series(|p| p.infinite_decoy_bits_per_pulse),
            grey.stroke_width(2),
        ))?
        .label(labels.asymptote.as_str())
        .legend(move |(x, y)| PathElement::new([(x, y), (x + 18, y)], grey.stroke_width(2)));
    chart
        .draw_series(LineSeries::new(
            series(|p| p.bits_per_pulse),
            blue.stroke_width(2),
        ))?
        .label(labels.bound.as_str())
        .legend(move |(x, y)| PathElement::new([(x, y), (x + 18, y)], blue.stroke_width(2)));
    if est.bits_per_pulse > 0.0 {
        let red = RGBColor(214, 39, 40);
        chart
            .draw_series(std::iter::once(Circle::new(
                (est.fiber_km, est.bits_per_pulse),
                6,
                red.filled(),
            )))?
            .label("measured operating point")
            .legend(move |(x, y)| Circle::new((x + 9, y), 5, red.filled()));
    }
    chart
        .configure_series_labels()
        .background_style(WHITE.mix(0.85))
        .border_style(BLACK)
        .position(SeriesLabelPosition::UpperRight)
        .draw()?;
    Ok(())
}

/// Legend of the two curves.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct CurveLabels {
    /// The finite (or asymptotic) bound on model counts.
    pub bound: String,
    /// The infinite-decoy rate of the same model.
    pub asymptote: String,
}

impl CurveLabels {
    /// The legend of a curve on the scenario's channel model for the run's estimator.
    pub fn channel_model(est: &Estimate) -> Self {
        let bound = match est.estimator {
            Estimator::FiniteLim | Estimator::OneDecoy => format!(
                "{} on model counts, N = {:.1e}",
                est.estimator.name(),
                est.pulses
            ),
            _ => format!("{} on model counts", est.estimator.name()),
        };
        Self {
            bound,
            asymptote: "infinite decoys (channel model)".to_string(),
        }
    }
}

/// Draw the curve into `path`: PNG when it ends in `.png` (needs a system font), else SVG.
pub fn rate_vs_distance(
    path: &Path,
    curve: &[CurvePoint],
    est: &Estimate,
    title: &str,
    labels: &CurveLabels,
) -> Result<(), DynErr> {
    let size = (900, 600);
    // Text layout needs the registered font on either backend.
    let font = crate::plots::font_ready();
    if path
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("png"))
    {
        if !font {
            return Err(format!(
                "{}: PNG text needs a TrueType font (set SLOTWISE_FONT) — or ask for .svg",
                path.display()
            )
            .into());
        }
        let root = BitMapBackend::new(path, size).into_drawing_area();
        draw(&root, curve, est, title, labels)?;
        root.present()?;
    } else {
        let root = SVGBackend::new(path, size).into_drawing_area();
        draw(&root, curve, est, title, labels)?;
        root.present()?;
    }
    Ok(())
}
