//! The dossier's charts as SVG text, drawn with plotters' SVG backend: the uncertainty budget
//! as horizontal bars, the titrant's control chart (points, mean, ±2s and ±3s lines) and the
//! replicate scatter with its mean. Each draws only numbers already in the [`Dossier`]; none
//! computes a statistic. A chart with nothing to draw is `None`.
//!
//! plotters escapes the text it writes; the SVG namespace attribute is dropped, since SVG
//! inside HTML needs none and the page names no outside address.

use super::number;
use assize_verify::dossier::{ControlChart, Dossier, ReplicateChart, Zone};
use plotters::prelude::*;

const WIDTH: u32 = 760;
const HEIGHT: u32 = 320;
const INK: RGBColor = RGBColor(0x22, 0x2a, 0x33);
const BAR: RGBColor = RGBColor(0x4d, 0x6b, 0x86);
const POINT: RGBColor = RGBColor(0x2e, 0x6f, 0x62);
const MARKED: RGBColor = RGBColor(0x6a, 0x3d, 0x9a);
const WARN: RGBColor = RGBColor(0xc0, 0x7f, 0x12);
const ALARM: RGBColor = RGBColor(0xa8, 0x2f, 0x2f);
const FONT: &str = "sans-serif";

/// A chart that could not be drawn, as text for the error message.
fn drawing_error(e: impl std::fmt::Display) -> String {
    format!("cannot draw a chart: {e}")
}

/// The frame of a chart over numbered items 1..=`count` (x) and values `lo..hi` (y): axes,
/// labels on the items only, light grid off. Shared by the control chart and the scatter.
fn numbered_frame<'a, DB: DrawingBackend + 'a>(
    root: &DrawingArea<DB, plotters::coord::Shift>,
    count: i32,
    (lo, hi): (f64, f64),
    x_desc: &str,
    y_desc: &str,
) -> Result<
    ChartContext<
        'a,
        DB,
        Cartesian2d<plotters::coord::types::RangedCoordi32, plotters::coord::types::RangedCoordf64>,
    >,
    String,
> {
    let mut chart = ChartBuilder::on(root)
        .margin(12)
        .x_label_area_size(40)
        .y_label_area_size(84)
        .build_cartesian_2d(0..count + 1, lo..hi)
        .map_err(drawing_error)?;
    chart
        .configure_mesh()
        .x_labels((count + 2) as usize)
        .x_label_formatter(&|x| {
            if (1..=count).contains(x) {
                x.to_string()
            } else {
                String::new()
            }
        })
        .y_labels(6)
        .y_label_formatter(&|y| tick(*y, hi - lo))
        .x_desc(x_desc)
        .y_desc(y_desc)
        .axis_desc_style((FONT, 13))
        .label_style((FONT, 12))
        .light_line_style(WHITE)
        .draw()
        .map_err(drawing_error)?;
    Ok(chart)
}

/// SVG as it goes inside the page.
fn inline(svg: String) -> String {
    svg.replacen(" xmlns=\"http://www.w3.org/2000/svg\"", "", 1)
}

/// An axis label with enough decimals to tell ticks over `span` apart, trailing zeros dropped.
fn tick(value: f64, span: f64) -> String {
    if span <= 0.0 || !span.is_finite() {
        return number(value);
    }
    let decimals = (2 - span.log10().floor() as i32).max(0) as usize;
    let text = format!("{value:.decimals$}");
    if text.contains('.') {
        text.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        text
    }
}

/// A value range around `values`, padded by a tenth (never empty).
fn padded(values: impl Iterator<Item = f64>) -> (f64, f64) {
    let (lo, hi) = values.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
        (lo.min(v), hi.max(v))
    });
    let span = hi - lo;
    let pad = if span > 0.0 {
        span * 0.1
    } else {
        (hi.abs() * 1e-3).max(1e-12)
    };
    (lo - pad, hi + pad)
}

/// The budget's contributions as horizontal bars, largest at the top.
pub fn budget_bars(d: &Dossier) -> Result<Option<String>, String> {
    let Some(budget) = &d.budget else {
        return Ok(None);
    };
    let lines = &budget.contributions;
    if lines.is_empty() {
        return Ok(None);
    }
    let n = lines.len() as i32;
    let longest = lines
        .iter()
        .map(|c| c.name.chars().count())
        .max()
        .unwrap_or(8) as u32;
    let label_width = (longest * 7 + 16).clamp(90, 300);
    let height = 70 + 26 * lines.len() as u32;
    let top = lines.iter().map(|c| c.contribution).fold(0.0, f64::max);
    let x_max = if top > 0.0 { top * 1.08 } else { 1.0 };
    let unit = d.result.unit.clone().unwrap_or_default();
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (WIDTH, height)).into_drawing_area();
        root.fill(&WHITE).map_err(drawing_error)?;
        let mut chart = ChartBuilder::on(&root)
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(label_width)
            .build_cartesian_2d(0.0..x_max, (0..n).into_segmented())
            .map_err(drawing_error)?;
        let name_of = |v: &SegmentValue<i32>| match v {
            SegmentValue::CenterOf(row) if (0..n).contains(row) => {
                lines[(n - 1 - row) as usize].name.to_string()
            }
            _ => String::new(),
        };
        chart
            .configure_mesh()
            .disable_y_mesh()
            .y_labels(lines.len())
            .y_label_formatter(&name_of)
            .x_labels(6)
            .x_label_formatter(&|x| tick(*x, x_max))
            .x_desc(format!("|c·u(x)| / {unit}"))
            .axis_desc_style((FONT, 13))
            .label_style((FONT, 12))
            .light_line_style(WHITE)
            .draw()
            .map_err(drawing_error)?;
        chart
            .draw_series(lines.iter().enumerate().map(|(i, c)| {
                let row = n - 1 - i as i32;
                let mut bar = Rectangle::new(
                    [
                        (0.0, SegmentValue::Exact(row)),
                        (c.contribution, SegmentValue::Exact(row + 1)),
                    ],
                    BAR.filled(),
                );
                bar.set_margin(4, 4, 0, 0);
                bar
            }))
            .map_err(drawing_error)?;
        root.present().map_err(drawing_error)?;
    }
    Ok(Some(inline(svg)))
}

fn zone_colour(zone: Option<Zone>) -> RGBColor {
    match zone {
        Some(Zone::Beyond3s) => ALARM,
        Some(Zone::Beyond2s) => WARN,
        _ => POINT,
    }
}

/// The titrant's standardizations in ledger order, with the mean and the ±2s, ±3s lines.
pub fn control_chart(c: &ControlChart) -> Result<Option<String>, String> {
    if c.points.is_empty() {
        return Ok(None);
    }
    let n = c.points.len() as i32;
    let mut range_values: Vec<f64> = c.points.iter().map(|p| p.value).collect();
    if let Some(l) = &c.limits {
        range_values.extend([l.lower_3s, l.upper_3s]);
    }
    let (lo, hi) = padded(range_values.into_iter());
    let unit = c.unit.clone().unwrap_or_default();
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (WIDTH, HEIGHT)).into_drawing_area();
        root.fill(&WHITE).map_err(drawing_error)?;
        let mut chart = numbered_frame(
            &root,
            n,
            (lo, hi),
            "standardization, in ledger order (see the table)",
            &format!("mean / {unit}"),
        )?;
        if let Some(l) = &c.limits {
            let across = |y: f64| vec![(0, y), (n + 1, y)];
            chart
                .draw_series(LineSeries::new(across(l.mean), INK.stroke_width(2)))
                .map_err(drawing_error)?;
            for (y, colour) in [
                (l.upper_2s, WARN),
                (l.lower_2s, WARN),
                (l.upper_3s, ALARM),
                (l.lower_3s, ALARM),
            ] {
                chart
                    .draw_series(DashedLineSeries::new(
                        across(y),
                        6,
                        4,
                        colour.stroke_width(1),
                    ))
                    .map_err(drawing_error)?;
            }
        }
        let at = |i: usize, v: f64| (i as i32 + 1, v);
        chart
            .draw_series(LineSeries::new(
                c.points.iter().enumerate().map(|(i, p)| at(i, p.value)),
                POINT.mix(0.5).stroke_width(1),
            ))
            .map_err(drawing_error)?;
        chart
            .draw_series(c.points.iter().enumerate().map(|(i, p)| {
                let (size, colour) = if p.this_run {
                    (7, MARKED)
                } else {
                    (4, zone_colour(p.zone))
                };
                Circle::new(at(i, p.value), size, colour.filled())
            }))
            .map_err(drawing_error)?;
        root.present().map_err(drawing_error)?;
    }
    Ok(Some(inline(svg)))
}

/// Each counted replicate's value and the line of their mean.
pub fn replicate_scatter(r: &ReplicateChart) -> Result<Option<String>, String> {
    if r.points.is_empty() {
        return Ok(None);
    }
    let last = r.points.iter().map(|p| p.number).max().unwrap_or(1) as i32;
    let values = r.points.iter().map(|p| p.value).chain(r.mean);
    let (lo, hi) = padded(values);
    let unit = r.unit.clone().unwrap_or_default();
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (WIDTH, HEIGHT)).into_drawing_area();
        root.fill(&WHITE).map_err(drawing_error)?;
        let mut chart = numbered_frame(
            &root,
            last,
            (lo, hi),
            "replicate",
            &format!("value / {unit}"),
        )?;
        if let Some(mean) = r.mean {
            chart
                .draw_series(LineSeries::new(
                    vec![(0, mean), (last + 1, mean)],
                    INK.stroke_width(2),
                ))
                .map_err(drawing_error)?;
        }
        chart
            .draw_series(
                r.points
                    .iter()
                    .map(|p| Circle::new((p.number as i32, p.value), 5, POINT.filled())),
            )
            .map_err(drawing_error)?;
        root.present().map_err(drawing_error)?;
    }
    Ok(Some(inline(svg)))
}
