//! SVG figures for the report, drawn with plotters' SVG backend (no font files needed).
//! Each function returns the SVG text; the caller writes it atomically.
//!
//! Kept in one file on purpose: every figure shares the palette, the axis padding, the tick and
//! label helpers and the empty-figure fallback at the top, so the figures look alike; the file
//! is a list of figure kinds over those helpers, each short and independent.

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
/// `slots` gives each series its palette slot, so that one entity has one colour in every
/// figure of a report (empty: by position).
pub fn history_with_band(
    title: &str,
    y_desc: &str,
    series: &[(String, Vec<(f64, f64)>)],
    band: &[(f64, f64, f64, f64)],
    slots: &[usize],
) -> Result<String, String> {
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
            let colour = PALETTE[slots.get(k).copied().unwrap_or(k) % PALETTE.len()];
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
        let bins = bins.max(1);
        let (lo, hi, counts) = histogram_bins(values, bins);
        let w = (hi - lo) / bins as f64;
        let top = counts.iter().copied().max().unwrap_or(1).max(1) as f64;
        // Counts on a log scale: a bin of a few misfits beside bins of a million exact fits
        // still shows (a bar from 0.5 reaches 1 for a single value).
        let mut chart = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 18))
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(64)
            .build_cartesian_2d(lo..hi, (0.5..top * 2.0).log_scale())
            .map_err(err)?;
        chart
            .configure_mesh()
            .x_desc(x_desc)
            .y_desc("count (log scale)")
            .y_label_formatter(&|y| format!("{y:.0}"))
            .light_line_style(RGBColor(235, 235, 235))
            .draw()
            .map_err(err)?;
        let colour = PALETTE[0];
        chart
            .draw_series(counts.iter().enumerate().filter(|(_, &c)| c > 0).map(|(k, &c)| {
                let x0 = lo + k as f64 * w;
                Rectangle::new([(x0, 0.5), (x0 + w * 0.92, c as f64)], colour.mix(0.8).filled())
            }))
            .map_err(err)?;
        root.present().map_err(err)?;
    }
    Ok(svg)
}

/// The padded range of the finite values and their counts in `bins` equal bins over it: the
/// extremes and the counts on rayon's threads, pieces of the values each (minima, maxima and
/// counts add up to the same whatever the pieces).
fn histogram_bins(values: &[f64], bins: usize) -> (f64, f64, Vec<usize>) {
    use rayon::prelude::*;
    const PIECE: usize = 1 << 16;
    let (lo, hi) = values
        .par_chunks(PIECE)
        .map(|piece| {
            piece
                .iter()
                .filter(|v| v.is_finite())
                .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| (a.min(x), b.max(x)))
        })
        .reduce(|| (f64::INFINITY, f64::NEG_INFINITY), |(a, b), (c, d)| (a.min(c), b.max(d)));
    let (lo, hi) = pad(lo, hi);
    let w = (hi - lo) / bins as f64;
    let counts = values
        .par_chunks(PIECE)
        .map(|piece| {
            let mut counts = vec![0usize; bins];
            for v in piece.iter().filter(|v| v.is_finite()) {
                let k = (((v - lo) / w).floor() as usize).min(bins - 1);
                counts[k] += 1;
            }
            counts
        })
        .reduce(
            || vec![0usize; bins],
            |mut a, b| {
                a.iter_mut().zip(b).for_each(|(x, y)| *x += y);
                a
            },
        );
    (lo, hi, counts)
}

/// Values beyond this magnitude are treated like non-finite ones: their spans would overflow.
const USABLE: f64 = 1e300;

fn usable(v: f64) -> bool {
    v.is_finite() && v.abs() < USABLE
}

/// A linear axis whose ticks are given (plotters' own key-point binder leaves the axis without
/// a label formatter, so charts with chosen ticks use this instead).
struct Ticked {
    inner: plotters::coord::types::RangedCoordf64,
    ticks: Vec<f64>,
}

fn ticked(lo: f64, hi: f64, ticks: Vec<f64>) -> Ticked {
    Ticked { inner: (lo..hi).into(), ticks }
}

impl plotters::coord::ranged1d::Ranged for Ticked {
    type FormatOption = plotters::coord::ranged1d::DefaultFormatting;
    type ValueType = f64;

    fn map(&self, value: &f64, limit: (i32, i32)) -> i32 {
        self.inner.map(value, limit)
    }

    fn key_points<Hint: plotters::coord::ranged1d::KeyPointHint>(&self, hint: Hint) -> Vec<f64> {
        if hint.weight().allow_light_points() {
            Vec::new()
        } else {
            self.ticks.clone()
        }
    }

    fn range(&self) -> std::ops::Range<f64> {
        self.inner.range()
    }
}

fn centred(size: u32) -> TextStyle<'static> {
    use plotters::style::text_anchor::{HPos, Pos, VPos};
    TextStyle::from(("sans-serif", size).into_font()).pos(Pos::new(HPos::Center, VPos::Center))
}

/// A figure with only its title and the words "no data", for empty input.
fn no_data_svg(title: &str, size: (u32, u32)) -> Result<String, String> {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, size).into_drawing_area();
        root.fill(&WHITE).map_err(err)?;
        let area = root.titled(title, ("sans-serif", 18)).map_err(err)?;
        let (w, h) = area.dim_in_pixel();
        area.draw(&Text::new("no data", ((w / 2) as i32, (h / 2) as i32), centred(16))).map_err(err)?;
        root.present().map_err(err)?;
    }
    Ok(svg)
}

/// Tick positions for a linear axis: about six round steps (1, 2 or 5 times a power of ten)
/// inside [lo, hi], and the number of decimals their labels need.
fn linear_ticks(lo: f64, hi: f64) -> (Vec<f64>, usize) {
    let span = hi - lo;
    if !(span > 0.0) || !span.is_finite() {
        return (vec![lo], 2);
    }
    let raw = span / 6.0;
    let mag = 10f64.powf(raw.log10().floor());
    let step = [1.0, 2.0, 5.0, 10.0].iter().map(|m| m * mag).find(|s| *s >= raw).unwrap_or(10.0 * mag);
    let decimals = (-step.log10().floor()).max(0.0) as usize;
    let first = (lo / step).ceil();
    let ticks = (0..50).map(|k| (first + k as f64) * step).take_while(|t| *t <= hi + step * 1e-9).collect();
    (ticks, decimals.min(12))
}

/// Tick positions for an axis drawn in log10 units between `lo` and `hi`: every decade, plus
/// 2 and 5 times the decade when the axis spans fewer than three decades.
fn log_ticks(lo: f64, hi: f64) -> Vec<f64> {
    let fine = hi - lo < 3.0;
    let mut ticks = Vec::new();
    let mut k = lo.floor();
    while k <= hi && ticks.len() < 200 {
        for m in if fine { &[1.0, 2.0, 5.0][..] } else { &[1.0][..] } {
            let t = k + f64::log10(*m);
            if t >= lo - 1e-9 && t <= hi + 1e-9 {
                ticks.push(t);
            }
        }
        k += 1.0;
    }
    ticks
}

/// The label of a tick at `t` log10 units: the plain number near 1, powers of ten far from it.
fn log_label(t: f64) -> String {
    let v = 10f64.powf(t);
    if (-3.5..3.5).contains(&t) {
        let decimals = (-t.floor()).max(0.0) as usize;
        format!("{v:.decimals$}")
    } else {
        format!("{v:.0e}")
    }
}

/// Which categories get a label so that labels of `max_chars` characters do not overlap on an
/// axis `px` pixels long (about 7 pixels a character at the 12-pixel label size).
fn category_step(n: usize, max_chars: usize, px: f64) -> usize {
    let per = px / n.max(1) as f64;
    let need = max_chars as f64 * 7.0 + 8.0;
    ((need / per).ceil() as usize).max(1)
}

fn category_label(labels: &[String], x: f64) -> String {
    let i = x.round();
    if (x - i).abs() < 1e-6 && i >= 0.0 && (i as usize) < labels.len() {
        labels[i as usize].clone()
    } else {
        String::new()
    }
}

/// One category of an [`interval_chart`]: a point estimate with its interval and a value to
/// compare it with. `None` (or a non-finite value) means "not available" for that part.
#[derive(Debug, Clone, PartialEq)]
pub struct IntervalItem {
    /// The category's name on the x axis (a grade, a bucket).
    pub label: String,
    /// The point estimate, drawn as a filled circle.
    pub estimate: Option<f64>,
    /// Lower end of the interval; `None` draws the bar open to the bottom of the axis.
    pub lo: Option<f64>,
    /// Upper end of the interval; `None` or +infinity draws the bar to the top with an arrow.
    pub hi: Option<f64>,
    /// The value the estimate is compared with, drawn as a short red bar across the category.
    pub reference: Option<f64>,
}

/// Estimates with intervals per category against a reference value each.
///
/// With `log_y` the y axis is log10. The axis floor is the decade below the smallest positive
/// value; a zero (or negative) estimate is drawn there as an open circle, and an interval whose
/// lower end is zero runs to the floor without a cap. An upper end that is `None` or infinite
/// runs to the top edge and ends in an arrow. `hline` draws a dashed horizontal line (for
/// example a ratio of 1); `names` are the legend entries for the estimate and the reference.
pub fn interval_chart(
    title: &str,
    y_desc: &str,
    log_y: bool,
    items: &[IntervalItem],
    hline: Option<f64>,
    names: [&str; 2],
) -> Result<String, String> {
    const SIZE: (u32, u32) = (760, 420);
    if items.is_empty() {
        return no_data_svg(title, SIZE);
    }
    let present = |v: Option<f64>| v.filter(|x| usable(*x));
    let on_axis = |v: f64| !log_y || v > 0.0;
    let values: Vec<f64> = items
        .iter()
        .flat_map(|it| [it.estimate, it.lo, it.hi, it.reference])
        .chain(std::iter::once(hline))
        .filter_map(present)
        .filter(|v| on_axis(*v))
        .map(|v| if log_y { v.log10() } else { v })
        .collect();
    let (v_lo, v_hi) = values.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| (a.min(x), b.max(x)));
    let any_data = !values.is_empty();
    // Axis limits in drawing units (log10 units when log_y). Headroom at the top keeps the
    // legend clear of the bars and leaves room for arrows.
    let (y_lo, y_hi) = if log_y {
        let (a, b) = if any_data { (v_lo, v_hi) } else { (-3.0, 0.0) };
        let floor = (a - 0.25).floor();
        let top = b.max(floor + 1.0);
        (floor, top + (top - floor) * 0.25)
    } else {
        let (a, b) = if any_data { (v_lo.min(0.0), v_hi.max(0.0)) } else { (0.0, 1.0) };
        let (a, b) = pad(a, b);
        (if v_lo >= 0.0 || !any_data { a.max(0.0) } else { a }, b + (b - a) * 0.2)
    };
    let to_y = |v: f64| {
        if log_y {
            if v > 0.0 {
                v.log10().clamp(y_lo, y_hi)
            } else {
                y_lo
            }
        } else {
            v.clamp(y_lo, y_hi)
        }
    };
    let (ticks, decimals) = if log_y { (log_ticks(y_lo, y_hi), 0) } else { linear_ticks(y_lo, y_hi) };
    let n = items.len();
    let labels: Vec<String> = items.iter().map(|it| it.label.clone()).collect();
    let step = category_step(n, labels.iter().map(|l| l.chars().count()).max().unwrap_or(1), 660.0);
    let x_keys: Vec<f64> = (0..n).step_by(step).map(|i| i as f64).collect();

    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, SIZE).into_drawing_area();
        root.fill(&WHITE).map_err(err)?;
        let mut chart = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 18))
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(64)
            .build_cartesian_2d(ticked(-0.5, n as f64 - 0.5, x_keys), ticked(y_lo, y_hi, ticks))
            .map_err(err)?;
        chart
            .configure_mesh()
            .disable_x_mesh()
            .y_desc(y_desc)
            .x_label_formatter(&|x| category_label(&labels, *x))
            .y_label_formatter(&|y| if log_y { log_label(*y) } else { format!("{y:.decimals$}") })
            .bold_line_style(RGBColor(225, 225, 225))
            .draw()
            .map_err(err)?;
        if let Some(h) = present(hline).filter(|h| on_axis(*h)) {
            let grey = RGBColor(90, 90, 90);
            let y = to_y(h);
            chart
                .draw_series(DashedLineSeries::new(vec![(-0.5, y), (n as f64 - 0.5, y)], 6, 4, grey.stroke_width(1)))
                .map_err(err)?
                .label(format!("level {h}"))
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], grey.stroke_width(1)));
        }
        let blue = PALETTE[0];
        let red = PALETTE[1];
        let arrow_h = (y_hi - y_lo) * 0.035;
        let cap = 0.12;
        // Highest drawn point per category, to keep the legend off the data.
        let mut tops = vec![y_lo; n];
        for (i, it) in items.iter().enumerate() {
            let x = i as f64;
            let lo = present(it.lo).filter(|v| on_axis(*v)).map(to_y);
            let hi = present(it.hi).filter(|v| on_axis(*v)).map(to_y);
            let hi_open = it.hi.map_or(it.lo.is_some(), |v| v == f64::INFINITY);
            let lo_open =
                lo.is_none() && (it.lo.is_some() || hi.is_some() || hi_open) && !it.lo.is_some_and(|v| v.is_nan());
            if lo.is_none() && !lo_open || hi.is_none() && !hi_open {
                // Only one end is known and the other is not an open end: no bar.
            } else {
                let y0 = lo.unwrap_or(y_lo);
                let y1 = hi.unwrap_or(y_hi);
                tops[i] = tops[i].max(y0).max(y1);
                chart
                    .draw_series(std::iter::once(PathElement::new(vec![(x, y0), (x, y1)], blue.stroke_width(2))))
                    .map_err(err)?;
                if lo.is_some() {
                    chart
                        .draw_series(std::iter::once(PathElement::new(
                            vec![(x - cap, y0), (x + cap, y0)],
                            blue.stroke_width(2),
                        )))
                        .map_err(err)?;
                }
                if hi.is_some() {
                    chart
                        .draw_series(std::iter::once(PathElement::new(
                            vec![(x - cap, y1), (x + cap, y1)],
                            blue.stroke_width(2),
                        )))
                        .map_err(err)?;
                } else {
                    let tip = vec![(x - 0.08, y_hi - arrow_h), (x, y_hi), (x + 0.08, y_hi - arrow_h)];
                    chart.draw_series(std::iter::once(Polygon::new(tip, blue.filled()))).map_err(err)?;
                }
            }
            if let Some(r) = present(it.reference) {
                let y = to_y(r);
                tops[i] = tops[i].max(y);
                chart
                    .draw_series(std::iter::once(PathElement::new(
                        vec![(x - 0.3, y), (x + 0.3, y)],
                        red.stroke_width(3),
                    )))
                    .map_err(err)?;
            }
            if let Some(e) = present(it.estimate) {
                let style = if on_axis(e) { blue.filled() } else { blue.stroke_width(2) };
                tops[i] = tops[i].max(to_y(e));
                chart.draw_series(std::iter::once(Circle::new((x, to_y(e)), 5, style))).map_err(err)?;
            }
        }
        if !any_data {
            chart
                .draw_series(std::iter::once(Text::new(
                    "no data",
                    ((n as f64 - 1.0) / 2.0, (y_lo + y_hi) / 2.0),
                    centred(16),
                )))
                .map_err(err)?;
        }
        // Legend entries only for what was drawn; empty series carry just the label and glyph.
        let [est_name, ref_name] = names;
        if items.iter().any(|it| present(it.estimate).is_some()) {
            chart.draw_series(std::iter::empty::<PathElement<(f64, f64)>>()).map_err(err)?.label(est_name).legend(
                move |(x, y)| {
                    EmptyElement::at((x + 9, y))
                        + PathElement::new(vec![(0, -6), (0, 6)], blue.stroke_width(2))
                        + Circle::new((0, 0), 4, blue.filled())
                },
            );
        }
        if items.iter().any(|it| present(it.reference).is_some()) {
            chart
                .draw_series(std::iter::empty::<PathElement<(f64, f64)>>())
                .map_err(err)?
                .label(ref_name)
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], red.stroke_width(3)));
        }
        // The legend goes in the upper corner over the lower third of the categories.
        let third = n.div_ceil(3);
        let left = tops[..third].iter().copied().fold(f64::NEG_INFINITY, f64::max);
        let right = tops[n - third..].iter().copied().fold(f64::NEG_INFINITY, f64::max);
        let corner = if left <= right { SeriesLabelPosition::UpperLeft } else { SeriesLabelPosition::UpperRight };
        chart
            .configure_series_labels()
            .background_style(WHITE.mix(0.9))
            .border_style(BLACK)
            .position(corner)
            .draw()
            .map_err(err)?;
        root.present().map_err(err)?;
    }
    Ok(svg)
}

/// Marker outline in pixels around the point: an octagon (reads as a dot), a triangle or a
/// diamond, so that series stay apart once the palette repeats. One element type for all
/// three keeps series and legend code simple.
fn marker_outline(k: usize) -> Vec<(i32, i32)> {
    match (k / PALETTE.len()) % 3 {
        0 => vec![(-1, -3), (1, -3), (3, -1), (3, 1), (1, 3), (-1, 3), (-3, 1), (-3, -1)],
        1 => vec![(0, -4), (4, 3), (-4, 3)],
        _ => vec![(0, -4), (4, 0), (0, 4), (-4, 0)],
    }
}

/// Several named series through time (x a decimal year, see [`decimal_year`]) with dashed
/// horizontal threshold lines `hlines` (value, legend text). A non-finite point breaks its line.
/// The y axis starts at 0 when no value is negative.
pub fn multi_line_chart(
    title: &str,
    y_desc: &str,
    series: &[(String, Vec<(f64, f64)>)],
    hlines: &[(f64, &str)],
) -> Result<String, String> {
    lines_through_time(title, y_desc, false, series, &[], hlines)
}

/// [`multi_line_chart`] on a log10 y axis, for quantities that span decades (mean implied PD
/// per grade). Zero and negative values cannot be placed and break their line like non-finite
/// ones; so are threshold lines at or below 0 left out.
pub fn multi_line_chart_log(
    title: &str,
    y_desc: &str,
    series: &[(String, Vec<(f64, f64)>)],
    hlines: &[(f64, &str)],
) -> Result<String, String> {
    lines_through_time(title, y_desc, true, series, &[], hlines)
}

/// [`multi_line_chart_log`] with an interval at each point: `intervals[k]` holds (x, lower,
/// upper) for series `k`, drawn as a whisker in the series' colour (shifted a little per series
/// so that whiskers at one date do not hide each other). A missing or zero lower end runs to
/// the bottom of the chart, a missing upper end (unbounded) to the top.
pub fn multi_line_chart_log_with_intervals(
    title: &str,
    y_desc: &str,
    series: &[(String, Vec<(f64, f64)>)],
    intervals: &[Vec<(f64, Option<f64>, Option<f64>)>],
    hlines: &[(f64, &str)],
) -> Result<String, String> {
    lines_through_time(title, y_desc, true, series, intervals, hlines)
}

fn lines_through_time(
    title: &str,
    y_desc: &str,
    log_y: bool,
    series: &[(String, Vec<(f64, f64)>)],
    intervals: &[Vec<(f64, Option<f64>, Option<f64>)>],
    hlines: &[(f64, &str)],
) -> Result<String, String> {
    const SIZE: (u32, u32) = (760, 420);
    // Everything below is in drawing units: log10 of the value when log_y. A point that cannot
    // be drawn becomes NaN, which breaks the line there.
    let to_y = |v: f64| {
        if !usable(v) || log_y && v <= 0.0 {
            f64::NAN
        } else if log_y {
            v.log10()
        } else {
            v
        }
    };
    // With intervals, each series sits a little to the side of the date (its whiskers with it),
    // so that the intervals of several series at one date do not hide each other.
    let (x0, x1) = series
        .iter()
        .flat_map(|(_, v)| v.iter().map(|p| p.0))
        .filter(|x| usable(*x))
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), x| (a.min(x), b.max(x)));
    let n_series = series.len() as f64;
    let shift = |k: usize| {
        if intervals.is_empty() || !(x1 > x0) {
            0.0
        } else {
            (k as f64 - (n_series - 1.0) / 2.0) * 0.012 * (x1 - x0)
        }
    };
    let series: Vec<(String, Vec<(f64, f64)>)> = series
        .iter()
        .enumerate()
        .map(|(k, (n, v))| (n.clone(), v.iter().map(|p| (p.0 + shift(k), to_y(p.1))).collect()))
        .collect();
    let ok = |p: &(f64, f64)| usable(p.0) && usable(p.1);
    let points: Vec<(f64, f64)> = series.iter().flat_map(|(_, v)| v.iter().copied().filter(ok)).collect();
    if points.is_empty() {
        return no_data_svg(title, SIZE);
    }
    let levels: Vec<(f64, &str)> =
        hlines.iter().map(|&(h, name)| (to_y(h), name)).filter(|(h, _)| usable(*h)).collect();
    let (x_lo, x_hi) = points.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), p| (a.min(p.0), b.max(p.0)));
    // Finite interval ends count in the y range.
    let ends: Vec<f64> = intervals
        .iter()
        .flatten()
        .flat_map(|(_, lo, hi)| [lo.map(to_y), hi.map(to_y)])
        .flatten()
        .filter(|y| usable(*y))
        .collect();
    let ys = points.iter().map(|p| p.1).chain(levels.iter().map(|l| l.0)).chain(ends.iter().copied());
    let (y_min, y_max) = ys.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), y| (a.min(y), b.max(y)));
    let (x_lo, x_hi) = pad(x_lo, x_hi);
    let (y_lo, y_hi) = if log_y {
        pad(y_min, y_max)
    } else {
        let (lo, hi) = pad(y_min.min(0.0), y_max);
        (if y_min >= 0.0 { 0.0 } else { lo }, hi)
    };
    // Headroom for the legend in the upper left.
    let legend_rows = series.len() + levels.len();
    let y_hi = y_hi + (y_hi - y_lo) * (0.075 * legend_rows as f64).min(0.75);
    let (ticks, decimals) = if log_y { (log_ticks(y_lo, y_hi), 0) } else { linear_ticks(y_lo, y_hi) };

    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, SIZE).into_drawing_area();
        root.fill(&WHITE).map_err(err)?;
        let mut chart = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 18))
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(64)
            .build_cartesian_2d(x_lo..x_hi, ticked(y_lo, y_hi, ticks))
            .map_err(err)?;
        chart
            .configure_mesh()
            .x_desc("date")
            .y_desc(y_desc)
            .x_label_formatter(&|x| year_label(*x))
            .y_label_formatter(&|y| if log_y { log_label(*y) } else { format!("{y:.decimals$}") })
            .x_labels(6)
            .light_line_style(RGBColor(235, 235, 235))
            .bold_line_style(RGBColor(225, 225, 225))
            .draw()
            .map_err(err)?;
        let greys = [RGBColor(60, 60, 60), RGBColor(140, 140, 140)];
        for (k, &(h, name)) in levels.iter().enumerate() {
            let grey = greys[k % greys.len()];
            chart
                .draw_series(DashedLineSeries::new(vec![(x_lo, h), (x_hi, h)], 6, 4, grey.stroke_width(1)))
                .map_err(err)?
                .label(name)
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], grey.stroke_width(1)));
        }
        for (k, whiskers) in intervals.iter().enumerate() {
            let colour = PALETTE[k % PALETTE.len()];
            let dx = shift(k);
            let clamp =
                |y: Option<f64>, edge: f64| y.map(to_y).filter(|v| usable(*v)).unwrap_or(edge).clamp(y_lo, y_hi);
            chart
                .draw_series(whiskers.iter().filter(|w| usable(w.0)).map(|&(x, lo, hi)| {
                    let (a, b) = (clamp(lo, y_lo), clamp(hi, y_hi));
                    PathElement::new(vec![(x + dx, a), (x + dx, b)], colour.mix(0.85).stroke_width(2))
                }))
                .map_err(err)?;
        }
        for (k, (name, pts)) in series.iter().enumerate() {
            let colour = PALETTE[k % PALETTE.len()];
            // Runs of usable points; a gap in the data is a gap in the line.
            let mut runs: Vec<Vec<(f64, f64)>> = vec![Vec::new()];
            for p in pts {
                if ok(p) {
                    if let Some(r) = runs.last_mut() {
                        r.push(*p)
                    }
                } else if runs.last().is_some_and(|r| !r.is_empty()) {
                    runs.push(Vec::new());
                }
            }
            for run in runs.iter().filter(|r| r.len() >= 2) {
                chart.draw_series(LineSeries::new(run.iter().copied(), colour.stroke_width(2))).map_err(err)?;
            }
            let label = if runs.iter().all(|r| r.is_empty()) { format!("{name} (no data)") } else { name.clone() };
            chart
                .draw_series(
                    runs.iter()
                        .flatten()
                        .map(|p| EmptyElement::at(*p) + Polygon::new(marker_outline(k), colour.filled())),
                )
                .map_err(err)?
                .label(label)
                .legend(move |(x, y)| {
                    EmptyElement::at((x, y))
                        + PathElement::new(vec![(0, 0), (18, 0)], colour.stroke_width(2))
                        + Polygon::new(
                            marker_outline(k).into_iter().map(|(a, b)| (a + 9, b)).collect::<Vec<_>>(),
                            colour.filled(),
                        )
                });
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

/// Diverging colour for `t` in [-1, 1]: blue below 0, white at 0, red above.
fn diverging(t: f64) -> RGBColor {
    let t = if t.is_nan() { 0.0 } else { t.clamp(-1.0, 1.0) };
    let (end, s) = if t < 0.0 { ((33.0, 102.0, 172.0), -t) } else { ((178.0, 24.0, 43.0), t) };
    let mix = |e: f64| (255.0 + (e - 255.0) * s).round() as u8;
    RGBColor(mix(end.0), mix(end.1), mix(end.2))
}

const NO_VALUE: RGBColor = RGBColor(190, 190, 190);

/// A value with about two significant digits and its sign, for cell text.
fn signed_short(v: f64) -> String {
    if v == 0.0 {
        return "0".to_string();
    }
    if !v.is_finite() {
        return if v > 0.0 { "+inf".into() } else { "-inf".into() };
    }
    let a = v.abs();
    if !a.is_nan() && !(1e-3..1e4).contains(&a) {
        return format!("{v:+.1e}");
    }
    let decimals = (1.0 - a.log10().floor()).max(0.0) as usize;
    format!("{v:+.decimals$}")
}

/// A grid of cells coloured on a diverging scale centred at 0 (blue negative, white 0, red
/// positive, saturating at the largest finite magnitude; grey where the value is `None` or NaN;
/// an infinite value takes the saturated colour). `values[i][j]` is row `i` (drawn top-down),
/// column `j`. The value is written in each cell when the cells are wide enough.
pub fn heat_map(title: &str, rows: &[String], cols: &[String], values: &[Vec<Option<f64>>]) -> Result<String, String> {
    if values.len() != rows.len() {
        return Err(format!("heat map '{title}': {} rows of values for {} row labels", values.len(), rows.len()));
    }
    if let Some((i, r)) = values.iter().enumerate().find(|(_, r)| r.len() != cols.len()) {
        return Err(format!(
            "heat map '{title}': row {} ('{}') has {} values for {} column labels",
            i + 1,
            rows[i],
            r.len(),
            cols.len()
        ));
    }
    let (nr, nc) = (rows.len(), cols.len());
    let height = (110 + 30 * nr as u32).clamp(300, 1200);
    let size = (760u32, height);
    if nr == 0 || nc == 0 {
        return no_data_svg(title, size);
    }
    let scale =
        values.iter().flatten().filter_map(|v| v.filter(|x| x.is_finite())).fold(0.0, |m: f64, v| m.max(v.abs()));
    let scale = if scale > 0.0 { scale } else { 1.0 };
    let plot_w = 760.0 - 120.0 - 64.0 - 24.0;
    let plot_h = height as f64 - 110.0;
    let col_chars = cols.iter().map(|c| c.chars().count()).max().unwrap_or(1);
    let x_keys: Vec<f64> = (0..nc).step_by(category_step(nc, col_chars, plot_w)).map(|j| j as f64).collect();
    let row_step = ((16.0 / (plot_h / nr as f64)).ceil() as usize).max(1);
    let y_keys: Vec<f64> = (0..nr).step_by(row_step).map(|i| (nr - 1 - i) as f64).collect();
    // The y axis runs bottom-up, so row i sits at nr - 1 - i.
    let row_labels: Vec<String> = rows.iter().rev().cloned().collect();
    let cell_px = plot_w / nc as f64;
    let write_values = cell_px >= 42.0 && plot_h / nr as f64 >= 14.0;

    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, size).into_drawing_area();
        root.fill(&WHITE).map_err(err)?;
        let root = root.titled(title, ("sans-serif", 18)).map_err(err)?;
        let (main, side) = root.split_horizontally(760 - 120);
        let mut chart = ChartBuilder::on(&main)
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(64)
            .build_cartesian_2d(ticked(-0.5, nc as f64 - 0.5, x_keys), ticked(-0.5, nr as f64 - 0.5, y_keys))
            .map_err(err)?;
        chart
            .configure_mesh()
            .disable_mesh()
            .x_label_formatter(&|x| category_label(cols, *x))
            .y_label_formatter(&|y| category_label(&row_labels, *y))
            .draw()
            .map_err(err)?;
        for (i, row) in values.iter().enumerate() {
            let y = (nr - 1 - i) as f64;
            for (j, v) in row.iter().enumerate() {
                let x = j as f64;
                let v = v.filter(|v| !v.is_nan());
                let fill = v.map_or(NO_VALUE, |v| diverging(v / scale));
                let corners = [(x - 0.5, y - 0.5), (x + 0.5, y + 0.5)];
                chart.draw_series(std::iter::once(Rectangle::new(corners, fill.filled()))).map_err(err)?;
                chart.draw_series(std::iter::once(Rectangle::new(corners, WHITE.stroke_width(1)))).map_err(err)?;
                if let (Some(v), true) = (v, write_values) {
                    let ink = if (v / scale).abs() > 0.6 { WHITE } else { BLACK };
                    let style = centred(13).color(&ink);
                    chart.draw_series(std::iter::once(Text::new(signed_short(v), (x, y), style))).map_err(err)?;
                }
            }
        }
        // Colour key: the scale from -max to +max, and the grey of a missing value.
        let mut key = ChartBuilder::on(&side)
            .margin_top(12)
            .margin_bottom(52)
            .margin_left(4)
            .margin_right(36)
            .y_label_area_size(60)
            .build_cartesian_2d(0.0..1.0, ticked(-scale, scale, vec![-scale, -scale / 2.0, 0.0, scale / 2.0, scale]))
            .map_err(err)?;
        key.configure_mesh()
            .disable_mesh()
            .disable_x_axis()
            .y_label_style(("sans-serif", 12))
            .y_label_formatter(&|y| signed_short(*y))
            .draw()
            .map_err(err)?;
        let steps = 40;
        key.draw_series((0..steps).map(|k| {
            let a = -scale + 2.0 * scale * k as f64 / steps as f64;
            let b = a + 2.0 * scale / steps as f64;
            Rectangle::new([(0.0, a), (1.0, b)], diverging((a + b) / 2.0 / scale).filled())
        }))
        .map_err(err)?;
        let (_, side_h) = side.dim_in_pixel();
        let any_missing = values.iter().flatten().any(|v| v.is_none_or(|v| v.is_nan()));
        if any_missing {
            side.draw(&Rectangle::new([(12, side_h as i32 - 36), (26, side_h as i32 - 22)], NO_VALUE.filled()))
                .map_err(err)?;
            side.draw(&Text::new("none", (30, side_h as i32 - 36), ("sans-serif", 12))).map_err(err)?;
        }
        main.present().map_err(err)?;
    }
    Ok(svg)
}

/// For each category a box from five quantiles (1%, 5%, 50%, 95%, 99%): whiskers from the 1%
/// to the 99% quantile, a box from 5% to 95%, a line at the median, on a linear axis. Parts
/// whose ends are not finite are left out. Quantities spanning many decades (repricing
/// residuals run from 1e-12 to tens of bp) should be passed as quantiles of
/// log10(|value| + 1e-16), with `y_desc` saying so; the transform is monotone, so the
/// quantiles of the logs are the logs of the quantiles.
pub fn quantile_bands_by_category(title: &str, y_desc: &str, items: &[(String, [f64; 5])]) -> Result<String, String> {
    const SIZE: (u32, u32) = (760, 420);
    if items.is_empty() {
        return no_data_svg(title, SIZE);
    }
    let finite: Vec<f64> = items.iter().flat_map(|(_, q)| q.iter().copied()).filter(|v| usable(*v)).collect();
    let any_data = !finite.is_empty();
    let (lo, hi) = finite.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| (a.min(x), b.max(x)));
    let (y_lo, y_hi) = pad(lo, hi);
    let y_hi = y_hi + (y_hi - y_lo) * 0.25;
    let (ticks, decimals) = linear_ticks(y_lo, y_hi);
    // Values of machine-precision size (or very large) print in scientific notation, so a tick
    // label never runs out of its margin.
    let top = ticks.iter().fold(0.0f64, |m, t| m.max(t.abs()));
    let scientific = top > 0.0 && !(1e-3..1e5).contains(&top);
    let n = items.len();
    let labels: Vec<String> = items.iter().map(|(l, _)| l.clone()).collect();
    let step = category_step(n, labels.iter().map(|l| l.chars().count()).max().unwrap_or(1), 660.0);
    let x_keys: Vec<f64> = (0..n).step_by(step).map(|i| i as f64).collect();

    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, SIZE).into_drawing_area();
        root.fill(&WHITE).map_err(err)?;
        let mut chart = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 18))
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(64)
            .build_cartesian_2d(ticked(-0.5, n as f64 - 0.5, x_keys), ticked(y_lo, y_hi, ticks))
            .map_err(err)?;
        chart
            .configure_mesh()
            .disable_x_mesh()
            .y_desc(y_desc)
            .x_label_formatter(&|x| category_label(&labels, *x))
            .y_label_formatter(&|y| if scientific { format!("{y:.1e}") } else { format!("{y:.decimals$}") })
            .bold_line_style(RGBColor(225, 225, 225))
            .draw()
            .map_err(err)?;
        let blue = PALETTE[0];
        let dark = RGBColor(20, 20, 20);
        let f = |v: f64| usable(v).then_some(v);
        for (i, (_, q)) in items.iter().enumerate() {
            let x = i as f64;
            let [q1, q5, q50, q95, q99] = q.map(f);
            for (end, inner) in [(q1, q5.or(q50)), (q99, q95.or(q50))] {
                if let Some(e) = end {
                    if let Some(b) = inner {
                        chart
                            .draw_series(std::iter::once(PathElement::new(vec![(x, e), (x, b)], blue.stroke_width(1))))
                            .map_err(err)?;
                    }
                    chart
                        .draw_series(std::iter::once(PathElement::new(
                            vec![(x - 0.1, e), (x + 0.1, e)],
                            blue.stroke_width(1),
                        )))
                        .map_err(err)?;
                }
            }
            if let (Some(a), Some(b)) = (q5, q95) {
                let corners = [(x - 0.25, a), (x + 0.25, b)];
                chart.draw_series(std::iter::once(Rectangle::new(corners, blue.mix(0.25).filled()))).map_err(err)?;
                chart.draw_series(std::iter::once(Rectangle::new(corners, blue.stroke_width(1)))).map_err(err)?;
            }
            if let Some(m) = q50 {
                chart
                    .draw_series(std::iter::once(PathElement::new(
                        vec![(x - 0.25, m), (x + 0.25, m)],
                        dark.stroke_width(3),
                    )))
                    .map_err(err)?;
            }
        }
        if !any_data {
            chart
                .draw_series(std::iter::once(Text::new(
                    "no data",
                    ((n as f64 - 1.0) / 2.0, (y_lo + y_hi) / 2.0),
                    centred(16),
                )))
                .map_err(err)?;
        }
        // Legend entries only: empty series carry just the label and glyph.
        chart
            .draw_series(std::iter::empty::<PathElement<(f64, f64)>>())
            .map_err(err)?
            .label("5%-95% (box), 1%-99% (whiskers)")
            .legend(move |(x, y)| Rectangle::new([(x, y - 5), (x + 18, y + 5)], blue.mix(0.25).filled()));
        chart
            .draw_series(std::iter::empty::<PathElement<(f64, f64)>>())
            .map_err(err)?
            .label("median")
            .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], dark.stroke_width(3)));
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

/// Curves on the unit square (ROC and CAP curves): each series a polyline of (x, y) in
/// [0, 1]^2, drawn without markers, with the dashed diagonal of a score that ranks at random
/// and, when given, a grey reference polyline (the perfect ranking of a CAP curve).
pub fn unit_square_curves(
    title: &str,
    x_desc: &str,
    y_desc: &str,
    series: &[(String, Vec<(f64, f64)>)],
    reference: Option<(&str, Vec<(f64, f64)>)>,
) -> Result<String, String> {
    const SIZE: (u32, u32) = (520, 480);
    if series.iter().all(|(_, p)| p.len() < 2) {
        return no_data_svg(title, SIZE);
    }
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, SIZE).into_drawing_area();
        root.fill(&WHITE).map_err(err)?;
        let mut chart = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 16))
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(52)
            .build_cartesian_2d(0.0..1.0, 0.0..1.0)
            .map_err(err)?;
        chart
            .configure_mesh()
            .x_desc(x_desc)
            .y_desc(y_desc)
            .x_label_formatter(&|x| format!("{x:.1}"))
            .y_label_formatter(&|y| format!("{y:.1}"))
            .light_line_style(RGBColor(235, 235, 235))
            .bold_line_style(RGBColor(225, 225, 225))
            .draw()
            .map_err(err)?;
        let grey = RGBColor(120, 120, 120);
        chart
            .draw_series(DashedLineSeries::new(vec![(0.0, 0.0), (1.0, 1.0)], 6, 4, grey.stroke_width(1)))
            .map_err(err)?
            .label("random ranking")
            .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], grey.stroke_width(1)));
        if let Some((name, pts)) = reference {
            let light = RGBColor(170, 170, 170);
            chart
                .draw_series(LineSeries::new(pts, light.stroke_width(1)))
                .map_err(err)?
                .label(name)
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], light.stroke_width(1)));
        }
        for (k, (name, pts)) in series.iter().enumerate() {
            let colour = PALETTE[k % PALETTE.len()];
            let pts: Vec<(f64, f64)> = pts.iter().copied().filter(|p| usable(p.0) && usable(p.1)).collect();
            chart
                .draw_series(LineSeries::new(pts, colour.stroke_width(2)))
                .map_err(err)?
                .label(name.clone())
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], colour.stroke_width(2)));
        }
        chart
            .configure_series_labels()
            .background_style(WHITE.mix(0.9))
            .border_style(BLACK)
            .position(SeriesLabelPosition::LowerRight)
            .draw()
            .map_err(err)?;
        root.present().map_err(err)?;
    }
    Ok(svg)
}

/// Cumulative default rates against years since the cohort date: per series a step polyline
/// (the realised Kaplan-Meier rate), in the same colour hollow markers at the implied PDs of
/// each year, and, where `intervals[k]` gives them, (x, lo, hi) whiskers of the realised rate.
pub fn cumulative_rates(
    title: &str,
    series: &[(String, Vec<(f64, f64)>, Vec<(f64, f64)>)],
    intervals: &[Vec<(f64, f64, f64)>],
) -> Result<String, String> {
    const SIZE: (u32, u32) = (760, 440);
    let pts = || series.iter().flat_map(|(_, a, b)| a.iter().chain(b.iter())).filter(|p| usable(p.0) && usable(p.1));
    if pts().next().is_none() {
        return no_data_svg(title, SIZE);
    }
    let x_hi = pts().map(|p| p.0).fold(0.0, f64::max).max(1.0) * 1.04;
    let whisker_top = intervals.iter().flatten().map(|w| w.2).filter(|v| usable(*v)).fold(0.0, f64::max);
    let y_top = pts().map(|p| p.1).fold(whisker_top, f64::max).max(1e-3);
    let y_hi = y_top * (1.1 + 0.06 * series.len() as f64);
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, SIZE).into_drawing_area();
        root.fill(&WHITE).map_err(err)?;
        let mut chart = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 16))
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(60)
            .build_cartesian_2d(0.0..x_hi, 0.0..y_hi)
            .map_err(err)?;
        chart
            .configure_mesh()
            .x_desc("years since the cohort date")
            .y_desc("cumulative default rate")
            .x_label_formatter(&|x| format!("{x:.1}"))
            .y_label_formatter(&|y| format!("{:.0}%", y * 100.0))
            .light_line_style(RGBColor(240, 240, 240))
            .bold_line_style(RGBColor(225, 225, 225))
            .draw()
            .map_err(err)?;
        for (k, (name, steps, implied)) in series.iter().enumerate() {
            let colour = PALETTE[k % PALETTE.len()];
            chart
                .draw_series(LineSeries::new(steps.iter().copied(), colour.stroke_width(2)))
                .map_err(err)?
                .label(name.clone())
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], colour.stroke_width(2)));
            chart.draw_series(implied.iter().map(|p| Circle::new(*p, 5, colour.stroke_width(2)))).map_err(err)?;
            if let Some(ws) = intervals.get(k) {
                let bars = ws.iter().filter(|w| usable(w.1) && usable(w.2)).map(|&(x, lo, hi)| {
                    PathElement::new(vec![(x - 0.03, lo), (x - 0.03, hi)], colour.mix(0.6).stroke_width(3))
                });
                chart.draw_series(bars).map_err(err)?;
            }
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

#[cfg(test)]
mod tests {
    use super::*;

    /// Whiskers: one path per interval, an unbounded upper end or a zero lower end included
    /// (drawn to the chart's edge), and the interval ends widen the axis (a tick at 100 appears
    /// only because an interval reaches past it).
    #[test]
    fn ratio_intervals_are_drawn_and_widen_the_axis() {
        let series = vec![("grade 5".to_string(), vec![(2016.0, 2.0), (2017.0, 3.0)])];
        let intervals = vec![vec![(2016.0, Some(0.5), Some(150.0)), (2017.0, Some(0.0), None)]];
        let with = multi_line_chart_log_with_intervals("Q/P", "ratio", &series, &intervals, &[(1.0, "1")]).unwrap();
        let without = multi_line_chart_log("Q/P", "ratio", &series, &[(1.0, "1")]).unwrap();
        assert!(with.starts_with("<svg") && with.contains("grade 5"));
        // The whiskers are the only elements drawn at opacity 0.85.
        assert_eq!(with.matches("opacity=\"0.85\"").count(), 2, "{with}");
        assert_eq!(without.matches("opacity=\"0.85\"").count(), 0);
        assert!(with.contains("\n100\n") && !without.contains("\n100\n"));
    }

    /// The bins counted in pieces on rayon's threads are the one pass over the finite values:
    /// the same range and counts, on more values than one piece holds, with non-finite ones.
    #[test]
    fn bins_in_pieces_are_the_one_pass() {
        let mut rng = crate::sim::rng::Rng::new(11);
        let values: Vec<f64> = (0..300_000)
            .map(|i| match i % 9_973 {
                0 => f64::NAN,
                1 => f64::INFINITY,
                _ => -16.0 + 18.0 * rng.uniform() * rng.uniform(),
            })
            .collect();
        let finite: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
        let (lo, hi) = finite.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| (a.min(x), b.max(x)));
        let (lo, hi) = pad(lo, hi);
        let w = (hi - lo) / 30.0;
        let mut counts = vec![0usize; 30];
        for v in &finite {
            counts[(((v - lo) / w).floor() as usize).min(29)] += 1;
        }
        let (glo, ghi, got) = histogram_bins(&values, 30);
        assert_eq!((glo.to_bits(), ghi.to_bits()), (lo.to_bits(), hi.to_bits()));
        assert_eq!(got, counts);
        assert_eq!(got.iter().sum::<usize>(), finite.len());
    }

    #[test]
    fn figures_are_svg_with_their_labels() {
        let d = NaiveDate::from_ymd_opt(2024, 3, 20).unwrap();
        let s = term_structure("Test entity", &[(d, vec![(0.5, 0.01), (1.0, 0.012), (5.0, 0.02)])]).unwrap();
        assert!(s.starts_with("<svg") && s.contains("Test entity") && s.contains("2024-03-20"));
        let h = history_with_band(
            "5Y",
            "%",
            &[("A".into(), vec![(2024.0, 1.0), (2024.5, 2.0)])],
            &[(2024.0, 0.5, 1.0, 2.0), (2024.5, 0.6, 1.1, 2.1)],
            &[],
        )
        .unwrap();
        assert!(h.contains("universe 10%-90%") && h.contains("<polygon"));
        let g = histogram("res", "bp", &[1.0, 2.0, 2.5, f64::NAN], 10).unwrap();
        assert!(g.contains("<rect"));
    }

    fn is_svg(s: &str) -> bool {
        let t = s.trim();
        t.starts_with("<svg") && t.ends_with("</svg>")
    }

    fn item(
        label: &str,
        estimate: Option<f64>,
        lo: Option<f64>,
        hi: Option<f64>,
        reference: Option<f64>,
    ) -> IntervalItem {
        IntervalItem { label: label.into(), estimate, lo, hi, reference }
    }

    #[test]
    fn interval_chart_draws_a_point_per_estimate_and_open_markers_for_zeros_on_log_axes() {
        let items = vec![
            item("1", Some(0.0), Some(0.0), Some(0.004), Some(0.0005)),
            item("2", Some(0.002), Some(0.0005), Some(0.006), Some(0.0015)),
            item("3", Some(0.01), Some(0.006), Some(0.02), Some(0.009)),
            item("4", Some(0.05), Some(0.03), None, Some(0.04)),
        ];
        let s = interval_chart("Default rate by grade", "rate", true, &items, None, ["realised", "implied"]).unwrap();
        assert!(is_svg(&s));
        // One circle per estimate plus one in the legend; the zero estimate is the only open one.
        assert_eq!(s.matches("<circle").count(), items.len() + 1);
        let open =
            s.split("<circle").skip(1).filter(|c| c.split('>').next().unwrap_or("").contains(r#"fill="none""#)).count();
        assert_eq!(open, 1);
        // The open-ended upper bound of grade 4 ends in an arrow.
        assert_eq!(s.matches("<polygon").count(), 1);
        assert!(s.contains("realised") && s.contains("implied"));
        // On a linear axis the zero estimate is an ordinary filled point.
        let lin = interval_chart("linear", "rate", false, &items, Some(0.01), ["realised", "implied"]).unwrap();
        let open = lin
            .split("<circle")
            .skip(1)
            .filter(|c| c.split('>').next().unwrap_or("").contains(r#"fill="none""#))
            .count();
        assert_eq!(open, 0);
    }

    #[test]
    fn interval_chart_survives_empty_and_non_finite_input() {
        let e = interval_chart("nothing", "rate", true, &[], Some(1.0), ["a", "b"]).unwrap();
        assert!(is_svg(&e) && e.contains("no data"));
        let odd = vec![
            item("x", Some(f64::NAN), Some(f64::NEG_INFINITY), Some(f64::INFINITY), Some(f64::NAN)),
            item("y", None, None, None, None),
            item("z", Some(-1.0), Some(-2.0), Some(f64::MAX), Some(0.0)),
        ];
        for log_y in [true, false] {
            let s = interval_chart("odd", "rate", log_y, &odd, Some(f64::NAN), ["a", "b"]).unwrap();
            assert!(is_svg(&s));
        }
        let none = interval_chart("all missing", "rate", true, &odd[1..2], None, ["a", "b"]).unwrap();
        assert!(is_svg(&none) && none.contains("no data"));
    }

    #[test]
    fn multi_line_chart_draws_each_series_and_threshold() {
        let series: Vec<(String, Vec<(f64, f64)>)> = (0..3)
            .map(|k| {
                (
                    format!("grade {}", k + 1),
                    (0..5).map(|t| (2022.0 + t as f64 * 0.25, 0.01 * (k + 1) as f64 + 0.002 * t as f64)).collect(),
                )
            })
            .collect();
        let s = multi_line_chart("PSI", "PSI", &series, &[(0.10, "PSI 0.10"), (0.25, "PSI 0.25")]).unwrap();
        assert!(is_svg(&s));
        for (name, _) in &series {
            assert!(s.contains(name.as_str()));
        }
        assert!(s.contains("PSI 0.10") && s.contains("PSI 0.25"));
        // A marker per point and one per legend entry.
        assert_eq!(s.matches("<polygon").count(), 3 * 5 + 3);
        let l = multi_line_chart_log("PD", "PD", &series, &[(0.0, "ignored on a log axis")]).unwrap();
        assert!(is_svg(&l) && !l.contains("ignored on a log axis"));
    }

    #[test]
    fn multi_line_chart_breaks_lines_at_gaps_and_handles_empty_input() {
        let gap = vec![(
            "a".to_string(),
            vec![(2022.0, 1.0), (2022.5, f64::NAN), (2023.0, 2.0), (2023.5, 2.5), (f64::INFINITY, 1.0)],
        )];
        let s = multi_line_chart("gap", "x", &gap, &[(f64::NAN, "bad level")]).unwrap();
        assert!(is_svg(&s));
        // Only the run 2023.0-2023.5 has two points: one line, three markers.
        assert_eq!(s.matches("<polygon").count(), 3 + 1);
        for empty in [
            multi_line_chart("e", "x", &[], &[(0.1, "t")]),
            multi_line_chart("e", "x", &[("a".into(), vec![(f64::NAN, 1.0)])], &[]),
        ] {
            let e = empty.unwrap();
            assert!(is_svg(&e) && e.contains("no data"));
        }
        let neg = multi_line_chart_log("neg", "x", &[("a".into(), vec![(2022.0, -1.0), (2023.0, 0.0)])], &[]).unwrap();
        assert!(neg.contains("no data"));
    }

    #[test]
    fn heat_map_colours_a_cell_per_value_on_a_diverging_scale() {
        let rows: Vec<String> = ["1", "2"].iter().map(|s| s.to_string()).collect();
        let cols: Vec<String> = ["P1", "P2", "P3"].iter().map(|s| s.to_string()).collect();
        let values = vec![vec![None, Some(0.2), Some(-0.1)], vec![Some(f64::NAN), Some(0.0), Some(f64::INFINITY)]];
        let s = heat_map("change", &rows, &cols, &values).unwrap();
        assert!(is_svg(&s));
        // Each cell is a filled rectangle and a white outline.
        let cell_fill = |c: RGBColor| format!(r##"fill="#{:02X}{:02X}{:02X}""##, c.0, c.1, c.2);
        assert!(s.matches(&cell_fill(NO_VALUE)).count() >= 2, "None and NaN are grey");
        assert!(
            s.contains(&cell_fill(diverging(1.0)))
                && s.contains(&cell_fill(diverging(-0.5)))
                && s.contains(&cell_fill(WHITE))
        );
        assert!(s.matches("<rect").count() >= rows.len() * cols.len() * 2);
        assert!(s.contains("+0.20") && s.contains("+inf") && s.contains("P3"));
    }

    #[test]
    fn heat_map_rejects_ragged_values_and_draws_empty_grids() {
        let rows = vec!["1".to_string()];
        let cols = vec!["P1".to_string(), "P2".to_string()];
        let e = heat_map("ragged", &rows, &cols, &[vec![Some(1.0)]]).unwrap_err();
        assert!(e.contains("row 1") && e.contains("1 values for 2"), "{e}");
        assert!(heat_map("rows", &rows, &cols, &[]).is_err());
        let empty = heat_map("empty", &[], &cols, &[]).unwrap();
        assert!(is_svg(&empty) && empty.contains("no data"));
    }

    #[test]
    fn diverging_scale_is_blue_white_red() {
        assert_eq!(diverging(0.0), WHITE);
        assert_eq!(diverging(-1.0), RGBColor(33, 102, 172));
        assert_eq!(diverging(1.0), RGBColor(178, 24, 43));
        assert_eq!(diverging(f64::NAN), WHITE);
        assert_eq!(diverging(7.0), diverging(1.0));
    }

    #[test]
    fn quantile_bands_draw_a_box_and_median_per_category() {
        let items: Vec<(String, [f64; 5])> = ["1Y", "3Y", "5Y"]
            .iter()
            .enumerate()
            .map(|(k, l)| (l.to_string(), [-12.0, -9.0, -6.0 + k as f64, -2.0, 1.0]))
            .collect();
        let s = quantile_bands_by_category("Residuals", "log10(|r| + 1e-16), bp", &items).unwrap();
        assert!(is_svg(&s));
        // Per category: a filled box and its outline.
        let boxes = s.matches("<rect").count();
        assert!(boxes >= 2 * items.len(), "{boxes}");
        // Per category: two whiskers and two caps in the series colour, a thick median line;
        // the legend adds one median line.
        let whiskers = s.matches(r##"stroke="#1F77B4" stroke-width="1""##).count();
        let medians = s.matches(r##"stroke="#141414" stroke-width="3""##).count();
        assert_eq!((whiskers, medians), (4 * items.len(), items.len() + 1));
        assert!(s.contains("5Y") && s.contains("median"));
    }

    #[test]
    fn quantile_bands_survive_empty_and_non_finite_input() {
        let e = quantile_bands_by_category("none", "bp", &[]).unwrap();
        assert!(is_svg(&e) && e.contains("no data"));
        let nan = quantile_bands_by_category("nan", "bp", &[("1Y".into(), [f64::NAN; 5])]).unwrap();
        assert!(is_svg(&nan) && nan.contains("no data"));
        let partial =
            quantile_bands_by_category("partial", "bp", &[("1Y".into(), [f64::NEG_INFINITY, 1.0, 2.0, f64::NAN, 4.0])])
                .unwrap();
        assert!(is_svg(&partial) && !partial.contains("no data"));
    }

    #[test]
    fn tick_helpers_give_round_values() {
        let (t, d) = linear_ticks(0.0, 0.3);
        assert_eq!(d, 2);
        assert!((t[1] - 0.05).abs() < 1e-12 && t.len() == 7, "{t:?}");
        assert_eq!(log_ticks(-2.0, 0.0).len(), 7);
        assert_eq!(log_label(-3.0), "0.001");
        assert_eq!(log_label(-5.0), "1e-5");
        assert_eq!(category_step(40, 10, 526.0), 6);
        assert_eq!(category_label(&["a".into(), "b".into()], 1.0), "b");
        assert_eq!(category_label(&["a".into()], 0.5), "");
    }
}
