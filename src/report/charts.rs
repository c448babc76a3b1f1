//! SVG figures for the report, drawn with plotters' SVG backend (no font files needed).
//! Each function returns the SVG text; the caller writes it atomically.

use chrono::{Datelike, NaiveDate};
use plotters::prelude::*;

/// Colours for series, chosen to stay distinguishable in print.
const PALETTE: [RGBColor; 6] = [
    RGBColor(31, 119, 180),
    RGBColor(214, 39, 40),
    RGBColor(44, 160, 44),
    RGBColor(148, 103, 189),
    RGBColor(255, 127, 14),
    RGBColor(23, 190, 207),
];

/// A date as a decimal year, for time axes.
pub fn decimal_year(d: NaiveDate) -> f64 {
    let days = if crate::time::is_leap_year(d.year()) { 366.0 } else { 365.0 };
    d.year() as f64 + (d.ordinal0() as f64) / days
}

/// A decimal year back to an ISO date, for axis labels.
fn year_label(x: f64) -> String {
    let y = x.floor() as i32;
    let days = if crate::time::is_leap_year(y) { 366.0 } else { 365.0 };
    let ordinal = ((x - y as f64) * days).round() as u32 + 1;
    NaiveDate::from_yo_opt(y, ordinal.clamp(1, days as u32)).map_or_else(|| format!("{x:.2}"), |d| d.to_string())
}

fn pad(lo: f64, hi: f64) -> (f64, f64) {
    if !(hi > lo) {
        let c = if lo.is_finite() { lo } else { 0.0 };
        return (c - 1.0, c + 1.0);
    }
    let m = (hi - lo) * 0.05;
    (lo - m, hi + m)
}

fn err<E: std::fmt::Debug>(e: E) -> String {
    format!("{e:?}")
}

/// Piecewise-flat hazard term structures of one entity on several dates: x in years from the
/// curve date, y in % per year.
pub fn term_structure(title: &str, curves: &[(NaiveDate, Vec<(f64, f64)>)]) -> Result<String, String> {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (760, 420)).into_drawing_area();
        root.fill(&WHITE).map_err(err)?;
        let x_max = curves.iter().flat_map(|(_, v)| v.iter().map(|p| p.0)).fold(1.0, f64::max);
        let y_max = curves.iter().flat_map(|(_, v)| v.iter().map(|p| p.1 * 100.0)).fold(0.0, f64::max);
        let mut chart = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 18))
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(64)
            .build_cartesian_2d(0.0..x_max * 1.02, 0.0..(y_max * 1.1).max(0.01))
            .map_err(err)?;
        chart
            .configure_mesh()
            .x_desc("years from the curve date")
            .y_desc("hazard rate (% per year)")
            .light_line_style(RGBColor(235, 235, 235))
            .draw()
            .map_err(err)?;
        for (k, (date, nodes)) in curves.iter().enumerate() {
            let colour = PALETTE[k % PALETTE.len()];
            // Steps: flat hazard on each segment (previous node, node].
            let mut pts = Vec::with_capacity(nodes.len() * 2);
            let mut prev = 0.0;
            for &(t, h) in nodes {
                pts.push((prev, h * 100.0));
                pts.push((t, h * 100.0));
                prev = t;
            }
            chart
                .draw_series(LineSeries::new(pts, colour.stroke_width(2)))
                .map_err(err)?
                .label(date.to_string())
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], colour.stroke_width(2)));
        }
        chart
            .configure_series_labels()
            .background_style(WHITE.mix(0.9))
            .border_style(BLACK)
            .position(SeriesLabelPosition::UpperLeft)
            .draw()
            .map_err(err)?;
        root.present().map_err(err)?;
    }
    Ok(svg)
}

/// A quantity through time for a few entities, over the universe's 10%-90% band and median.
/// `band` holds (x, p10, p50, p90) per date; `series` (name, points); values in % per year.
pub fn history_with_band(title: &str, y_desc: &str, series: &[(String, Vec<(f64, f64)>)], band: &[(f64, f64, f64, f64)]) -> Result<String, String> {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (760, 420)).into_drawing_area();
        root.fill(&WHITE).map_err(err)?;
        let xs = series.iter().flat_map(|(_, v)| v.iter().map(|p| p.0)).chain(band.iter().map(|b| b.0));
        let (x_lo, x_hi) = xs.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), x| (a.min(x), b.max(x)));
        let ys = series.iter().flat_map(|(_, v)| v.iter().map(|p| p.1)).chain(band.iter().flat_map(|b| [b.1, b.3]));
        let y_hi = ys.fold(0.0, f64::max);
        let (x_lo, x_hi) = pad(x_lo, x_hi);
        let mut chart = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 18))
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(64)
            .build_cartesian_2d(x_lo..x_hi, 0.0..(y_hi * 1.1).max(0.01))
            .map_err(err)?;
        chart
            .configure_mesh()
            .x_desc("date")
            .y_desc(y_desc)
            .x_label_formatter(&|x| year_label(*x))
            .x_labels(6)
            .light_line_style(RGBColor(235, 235, 235))
            .draw()
            .map_err(err)?;
        if band.len() >= 2 {
            let mut poly: Vec<(f64, f64)> = band.iter().map(|b| (b.0, b.3)).collect();
            poly.extend(band.iter().rev().map(|b| (b.0, b.1)));
            let grey = RGBColor(160, 160, 160);
            chart
                .draw_series(std::iter::once(Polygon::new(poly, grey.mix(0.25).filled())))
                .map_err(err)?
                .label("universe 10%-90%")
                .legend(move |(x, y)| Rectangle::new([(x, y - 5), (x + 18, y + 5)], grey.mix(0.25).filled()));
            chart
                .draw_series(LineSeries::new(band.iter().map(|b| (b.0, b.2)), grey.stroke_width(1)))
                .map_err(err)?
                .label("universe median")
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], grey.stroke_width(1)));
        }
        for (k, (name, pts)) in series.iter().enumerate() {
            let colour = PALETTE[k % PALETTE.len()];
            chart
                .draw_series(LineSeries::new(pts.iter().copied(), colour.stroke_width(2)))
                .map_err(err)?
                .label(name.clone())
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], colour.stroke_width(2)));
        }
        chart
            .configure_series_labels()
            .background_style(WHITE.mix(0.9))
            .border_style(BLACK)
            .position(SeriesLabelPosition::UpperLeft)
            .draw()
            .map_err(err)?;
        root.present().map_err(err)?;
    }
    Ok(svg)
}

/// A histogram of `values` in `bins` equal bins between their min and max.
pub fn histogram(title: &str, x_desc: &str, values: &[f64], bins: usize) -> Result<String, String> {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (760, 380)).into_drawing_area();
        root.fill(&WHITE).map_err(err)?;
        let finite: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
        let (lo, hi) = finite.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| (a.min(x), b.max(x)));
        let (lo, hi) = pad(lo, hi);
        let bins = bins.max(1);
        let w = (hi - lo) / bins as f64;
        let mut counts = vec![0usize; bins];
        for v in &finite {
            let k = (((v - lo) / w).floor() as usize).min(bins - 1);
            counts[k] += 1;
        }
        let top = counts.iter().copied().max().unwrap_or(1).max(1) as f64;
        let mut chart = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 18))
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(64)
            .build_cartesian_2d(lo..hi, 0.0..top * 1.1)
            .map_err(err)?;
        chart
            .configure_mesh()
            .x_desc(x_desc)
            .y_desc("count")
            .light_line_style(RGBColor(235, 235, 235))
            .draw()
            .map_err(err)?;
        let colour = PALETTE[0];
        chart
            .draw_series(counts.iter().enumerate().filter(|(_, &c)| c > 0).map(|(k, &c)| {
                let x0 = lo + k as f64 * w;
                Rectangle::new([(x0, 0.0), (x0 + w * 0.92, c as f64)], colour.mix(0.8).filled())
            }))
            .map_err(err)?;
        root.present().map_err(err)?;
    }
    Ok(svg)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn figures_are_svg_with_their_labels() {
        let d = NaiveDate::from_ymd_opt(2024, 3, 20).unwrap();
        let s = term_structure("Test entity", &[(d, vec![(0.5, 0.01), (1.0, 0.012), (5.0, 0.02)])]).unwrap();
        assert!(s.starts_with("<svg") && s.contains("Test entity") && s.contains("2024-03-20"));
        let h = history_with_band("5Y", "%", &[("A".into(), vec![(2024.0, 1.0), (2024.5, 2.0)])], &[(2024.0, 0.5, 1.0, 2.0), (2024.5, 0.6, 1.1, 2.1)]).unwrap();
        assert!(h.contains("universe 10%-90%") && h.contains("<polygon"));
        let g = histogram("res", "bp", &[1.0, 2.0, 2.5, f64::NAN], 10).unwrap();
        assert!(g.contains("<rect"));
    }
}
