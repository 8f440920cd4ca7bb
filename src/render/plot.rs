//! Figures as inline SVG: line plots through plotters' SVG backend (no font files: text is
//! left to the browser), heat maps as plotters axes around cells written as one compact path per
//! colour, since one `<rect>` per cell would make a 201 × 201 map weigh megabytes.

use std::fmt::Write as _;

use plotters::coord::ranged1d::ValueFormatter;
use plotters::coord::types::RangedCoordf64;
use plotters::element::DashedPathElement;
use plotters::prelude::*;

use super::units::{Scale, axis_title, scale_for, tick};
use crate::record::Column;

/// Figure size in CSS pixels; the style sheet lets it shrink to the page width.
const WIDTH: u32 = 720;
const HEIGHT: u32 = 420;
/// Heat maps are drawn with at most this many cells per axis (neighbouring points averaged).
const MAX_CELLS: usize = 120;
/// Curves longer than this are thinned to the minimum and maximum of each bucket, which keeps
/// every visible extreme.
const MAX_POINTS: usize = 2000;
/// Colour steps of the heat map and its colour bar.
const LEVELS: usize = 64;
/// Line colours, in order of the curves: dark, distinct in print and for common colour-vision
/// deficiencies, our own choice.
const PALETTE: [RGBColor; 6] = [
    RGBColor(0x27, 0x47, 0x6e),
    RGBColor(0xb0, 0x4a, 0x26),
    RGBColor(0x3b, 0x7a, 0x45),
    RGBColor(0x7a, 0x4d, 0x8c),
    RGBColor(0x9a, 0x7b, 0x10),
    RGBColor(0x40, 0x40, 0x40),
];
/// Heat-map colour stops from low to high: paper, straw, terracotta, mulberry, ink, so
/// lightness falls monotonically and the map still reads in grey print.
const STOPS: [(u8, u8, u8); 5] = [
    (0xfa, 0xf7, 0xec),
    (0xe8, 0xc5, 0x78),
    (0xcc, 0x78, 0x4a),
    (0x7a, 0x3c, 0x62),
    (0x21, 0x1d, 0x40),
];
/// Colour stops of a difference map, from negative through zero to positive: deep slate, sky,
/// paper, clay, deep brick; zero is the paper colour, and the two sides differ in hue as well
/// as in lightness.
const DIVERGING: [(u8, u8, u8); 5] = [
    (0x1d, 0x4e, 0x6b),
    (0x86, 0xaf, 0xc4),
    (0xf6, 0xf4, 0xee),
    (0xd9, 0x9a, 0x6c),
    (0x8c, 0x2d, 0x1a),
];
/// Cells without a finite value.
const MISSING: RGBColor = RGBColor(0xbb, 0xbb, 0xbb);
const FONT: &str = "sans-serif";
/// Font sizes as given to plotters, which writes them at 1/1.24 of that: tick labels, axis
/// titles, figure titles. Tick labels come out at about 11 px, the smallest
/// that stays legible at the figure's width.
const LABEL_SIZE: f64 = 14.0;
const TITLE_SIZE: f64 = 15.0;
const CAPTION_SIZE: f64 = 19.0;

/// Why a figure could not be drawn.
#[derive(Debug, thiserror::Error)]
pub enum PlotError {
    /// The columns do not fit together.
    #[error("{0}")]
    Shape(String),
    /// The drawing backend failed.
    #[error("drawing failed: {0}")]
    Draw(String),
}

fn draw_err<E: std::fmt::Debug>(e: E) -> PlotError {
    PlotError::Draw(format!("{e:?}"))
}

/// The colour of level `k` of [`LEVELS`] between `stops`.
fn colour(stops: &[(u8, u8, u8); 5], k: usize) -> RGBColor {
    let t = k as f64 / (LEVELS - 1) as f64 * (stops.len() - 1) as f64;
    let i = (t.floor() as usize).min(stops.len() - 2);
    let f = t - i as f64;
    let mix = |a: u8, b: u8| (f64::from(a) + (f64::from(b) - f64::from(a)) * f).round() as u8;
    let (a, b) = (stops[i], stops[i + 1]);
    RGBColor(mix(a.0, b.0), mix(a.1, b.1), mix(a.2, b.2))
}

/// Tick labels of an axis over `range`: [`tick`], with the rounding residue of a tick at zero
/// (such as 1.1e-16) shown as 0.
fn ticks((lo, hi): (f64, f64)) -> impl Fn(&f64) -> String {
    let zero = 1e-9 * (hi - lo).abs();
    move |v| tick(if v.abs() <= zero { 0.0 } else { *v })
}

/// Finite range of `values`, widened when it is empty or a single point so axes stay valid.
fn range(values: impl Iterator<Item = f64>, log: bool) -> (f64, f64) {
    let (lo, hi) = values
        .filter(|v| v.is_finite() && (!log || *v > 0.0))
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), v| {
            (l.min(v), h.max(v))
        });
    if !lo.is_finite() {
        return if log { (0.1, 10.0) } else { (0.0, 1.0) };
    }
    if hi > lo {
        (lo, hi)
    } else if log {
        (lo / 2.0, hi * 2.0)
    } else {
        let pad = if lo == 0.0 { 1.0 } else { lo.abs() * 0.05 };
        (lo - pad, hi + pad)
    }
}

/// Thins a long curve to the minimum and maximum of each of `MAX_POINTS / 2` buckets.
fn thin(points: Vec<(f64, f64)>) -> Vec<(f64, f64)> {
    if points.len() <= MAX_POINTS {
        return points;
    }
    let bucket = points.len().div_ceil(MAX_POINTS / 2);
    let mut out = Vec::with_capacity(MAX_POINTS + 2);
    for chunk in points.chunks(bucket) {
        let by_y = |a: &&(f64, f64), b: &&(f64, f64)| a.1.total_cmp(&b.1);
        let (Some(lo), Some(hi)) = (chunk.iter().min_by(by_y), chunk.iter().max_by(by_y)) else {
            continue;
        };
        if lo.0 <= hi.0 {
            out.extend([*lo, *hi]);
        } else {
            out.extend([*hi, *lo]);
        }
    }
    out
}

/// A column's name for a reader: its title, else its result path.
pub(crate) fn shown(c: &Column) -> &str {
    c.title.as_deref().unwrap_or(&c.label)
}

/// The y scale and title of a plot's curves: scaled by the first curve's unit when all share its
/// dimension, else in SI; titled `y_label` when given, else with the curves' name when they all
/// show one (one curve, or its old and new versions), else "value".
fn y_axis(curves: &[&Column], y_label: Option<&str>) -> (Scale, String) {
    let Some(first) = curves.first() else {
        return (scale_for([0; 5], &[]), String::new());
    };
    if curves.iter().any(|c| c.dim != first.dim) {
        let s = Scale {
            factor: 1.0,
            unit: "SI".into(),
            per_2pi: false,
        };
        return (s, "value (SI units)".into());
    }
    let all: Vec<f64> = curves
        .iter()
        .flat_map(|c| c.values.iter().copied())
        .collect();
    let s = scale_for(first.dim, &all);
    let one_quantity = curves.iter().all(|c| shown(c) == shown(first));
    let label = match y_label {
        Some(l) => l,
        None if one_quantity => shown(first),
        None => "value",
    };
    let title = axis_title(label, &s);
    (s, title)
}

/// One line of a plot: values of `y` over `x` (SI), named in the legend.
pub(crate) struct Trace<'a> {
    /// Horizontal values.
    pub x: &'a Column,
    /// Vertical values, as many as `x`.
    pub y: &'a Column,
    /// The legend entry.
    pub name: String,
    /// Index into the palette.
    pub colour: usize,
    /// Drawn dashed and lighter: the earlier version in a diff.
    pub old: bool,
}

/// Where a check sits on a line plot.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(crate) enum Place {
    /// A value of a curve at this x (SI): a bar over the accepted y range at x.
    At(f64),
    /// The curve's maximum or minimum: a horizontal band over the accepted y range.
    Level,
    /// The x of the curve's maximum or minimum: a vertical band over the accepted x range.
    Position,
}

/// A check drawn on a line plot: the accepted range on the axis its [`Place`] names (SI,
/// `None` for an open side) and the value aimed at.
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct Mark {
    /// Its number in the figure's caption.
    pub number: usize,
    /// Where it sits.
    pub place: Place,
    /// Lower end of the accepted range.
    pub lo: Option<f64>,
    /// Upper end of the accepted range.
    pub hi: Option<f64>,
    /// The value aimed at.
    pub near: Option<f64>,
    /// Whether the check held.
    pub passed: bool,
}

/// Mark colours: the style sheet's held green and failed red.
const HELD: RGBColor = RGBColor(0x2e, 0x6b, 0x3a);
const FAILED: RGBColor = RGBColor(0x9c, 0x2f, 0x1e);

/// The axes of a line plot: log scales and the names of the two axes (x's name, and y's when
/// the plot gives one).
#[derive(Clone, Copy, Debug, Default)]
pub(crate) struct Axes<'a> {
    /// Horizontal axis's name.
    pub x_label: &'a str,
    /// Vertical axis's name, if given.
    pub y_label: Option<&'a str>,
    /// Logarithmic x.
    pub log_x: bool,
    /// Logarithmic y.
    pub log_y: bool,
}

/// A line plot of `curves` over `x`, with a legend when there are several and `marks` on top.
pub(crate) fn curves(
    title: &str,
    x: &Column,
    curves: &[Column],
    axes: Axes<'_>,
    marks: &[Mark],
) -> Result<String, PlotError> {
    let traces: Vec<Trace> = curves
        .iter()
        .enumerate()
        .map(|(i, c)| Trace {
            x,
            y: c,
            name: shown(c).to_string(),
            colour: i,
            old: false,
        })
        .collect();
    line_plot(title, &traces, axes, marks)
}

/// A line plot of `traces`, whose x columns share a dimension, on `axes`.
pub(crate) fn line_plot(
    title: &str,
    traces: &[Trace<'_>],
    axes: Axes<'_>,
    marks: &[Mark],
) -> Result<String, PlotError> {
    let Axes {
        x_label,
        y_label,
        log_x,
        log_y,
    } = axes;
    if let Some(t) = traces.iter().find(|t| t.y.values.len() != t.x.values.len()) {
        return Err(PlotError::Shape(format!(
            "curve `{}` has {} values for {} x values",
            t.y.label,
            t.y.values.len(),
            t.x.values.len()
        )));
    }
    let all_x: Vec<f64> = traces
        .iter()
        .flat_map(|t| t.x.values.iter().copied())
        .collect();
    let sx = scale_for(traces.first().map_or([0; 5], |t| t.x.dim), &all_x);
    let (sy, y_title) = y_axis(&traces.iter().map(|t| t.y).collect::<Vec<_>>(), y_label);
    let keep = |v: f64, log: bool| v.is_finite() && (!log || v > 0.0);
    let series: Vec<Vec<(f64, f64)>> = traces
        .iter()
        .map(|t| {
            thin(
                t.x.values
                    .iter()
                    .zip(&t.y.values)
                    .map(|(a, b)| (a * sx.factor, b * sy.factor))
                    .filter(|(a, b)| keep(*a, log_x) && keep(*b, log_y))
                    .collect(),
            )
        })
        .collect();
    // Marks in the plot's units; the axes widen to show what each aims at (or its bounds).
    let marks: Vec<Mark> = marks
        .iter()
        .map(|m| {
            let f = if m.place == Place::Position {
                sx.factor
            } else {
                sy.factor
            };
            Mark {
                place: match m.place {
                    Place::At(x) => Place::At(x * sx.factor),
                    other => other,
                },
                lo: m.lo.map(|v| v * f),
                hi: m.hi.map(|v| v * f),
                near: m.near.map(|v| v * f),
                ..m.clone()
            }
        })
        .collect();
    let aims = |m: &Mark| match m.near {
        Some(n) => vec![n],
        None => m.lo.into_iter().chain(m.hi).collect(),
    };
    let mark_x = marks.iter().flat_map(|m| match m.place {
        Place::At(x) => vec![x],
        Place::Position => aims(m),
        Place::Level => vec![],
    });
    let mark_y = marks
        .iter()
        .filter(|m| m.place != Place::Position)
        .flat_map(aims);
    let (x0, x1) = range(series.iter().flatten().map(|p| p.0).chain(mark_x), log_x);
    let (y0, y1) = range(series.iter().flatten().map(|p| p.1).chain(mark_y), log_y);
    // A little room above and below so curves do not run along the frame.
    let (y0, y1) = if log_y {
        (y0, y1)
    } else {
        let pad = (y1 - y0) * 0.04;
        (y0 - pad, y1 + pad)
    };
    let frame = Frame {
        x_title: axis_title(x_label, &sx),
        y_title,
        legend: traces.len() > 1,
        log: (log_x, log_y),
        x_range: (x0, x1),
        y_range: (y0, y1),
    };
    let mut svg = String::new();
    let overlay;
    {
        let root = SVGBackend::with_string(&mut svg, (WIDTH, HEIGHT)).into_drawing_area();
        let mut builder = ChartBuilder::on(&root);
        builder
            .caption(title, (FONT, CAPTION_SIZE))
            .margin(12)
            .x_label_area_size(44)
            .y_label_area_size(64);
        overlay = match (log_x, log_y) {
            (false, false) => {
                let c = builder
                    .build_cartesian_2d(x0..x1, y0..y1)
                    .map_err(draw_err)?;
                lines(c, &frame, &series, traces, &marks)?
            }
            (true, false) => {
                let c = builder
                    .build_cartesian_2d((x0..x1).log_scale(), y0..y1)
                    .map_err(draw_err)?;
                lines(c, &frame, &series, traces, &marks)?
            }
            (false, true) => {
                let c = builder
                    .build_cartesian_2d(x0..x1, (y0..y1).log_scale())
                    .map_err(draw_err)?;
                lines(c, &frame, &series, traces, &marks)?
            }
            (true, true) => {
                let c = builder
                    .build_cartesian_2d((x0..x1).log_scale(), (y0..y1).log_scale())
                    .map_err(draw_err)?;
                lines(c, &frame, &series, traces, &marks)?
            }
        };
        root.present().map_err(draw_err)?;
    }
    let at = svg
        .rfind("</svg>")
        .ok_or_else(|| PlotError::Draw("the backend wrote no </svg>".into()))?;
    svg.insert_str(at, &overlay);
    Ok(inline(svg))
}

/// Drops the SVG namespace declaration, which inline SVG in HTML does not need, so the page
/// names no outside address at all.
fn inline(svg: String) -> String {
    svg.replacen(" xmlns=\"http://www.w3.org/2000/svg\"", "", 1)
}

/// Titles of a figure's axes, whether it has a legend, and which axes are logarithmic.
struct Frame {
    x_title: String,
    y_title: String,
    legend: bool,
    log: (bool, bool),
    /// The data ranges the chart is built on.
    x_range: (f64, f64),
    y_range: (f64, f64),
}

/// `colour` mixed halfway to white: the lighter tone of an earlier version's curve.
fn lighter(colour: RGBColor) -> RGBColor {
    let mix = |c: u8| ((u16::from(c) + 255) / 2) as u8;
    RGBColor(mix(colour.0), mix(colour.1), mix(colour.2))
}

/// Data to pixels on a chart, in floating point: plotters places its own marks on whole pixels,
/// which turns a smooth curve into a staircase on a sharp screen, so curves and checks are
/// written by hand with this mapping (plotters' own, without its rounding).
struct Pixels {
    /// Data range of each axis, as given to the chart.
    x: (f64, f64),
    y: (f64, f64),
    /// Which axes are logarithmic.
    log: (bool, bool),
    /// Pixels of the ends of each axis (the y axis runs downwards).
    px: (f64, f64),
    py: (f64, f64),
}

impl Pixels {
    fn new<'a, X, Y>(
        chart: &ChartContext<'a, SVGBackend<'a>, Cartesian2d<X, Y>>,
        frame: &Frame,
    ) -> Self
    where
        X: Ranged<ValueType = f64> + ValueFormatter<f64>,
        Y: Ranged<ValueType = f64> + ValueFormatter<f64>,
    {
        let (xs, ys) = chart.plotting_area().get_pixel_range();
        Self {
            x: frame.x_range,
            y: frame.y_range,
            log: frame.log,
            px: (f64::from(xs.start), f64::from(xs.end - 1)),
            py: (f64::from(ys.end - 1), f64::from(ys.start)),
        }
    }

    /// Where `v` falls between `ends` (0 to 1), on a linear or logarithmic scale.
    fn fraction(v: f64, (lo, hi): (f64, f64), log: bool) -> f64 {
        if log {
            (v.ln() - lo.ln()) / (hi.ln() - lo.ln())
        } else {
            (v - lo) / (hi - lo)
        }
    }

    /// The horizontal pixel of `v`, or `open` when it is missing or off the axis's domain.
    fn x(&self, v: Option<f64>, open: f64) -> f64 {
        self.along(v, self.x, self.log.0, self.px, open)
    }

    /// The vertical pixel of `v`, or `open` when it is missing or off the axis's domain.
    fn y(&self, v: Option<f64>, open: f64) -> f64 {
        self.along(v, self.y, self.log.1, self.py, open)
    }

    fn along(
        &self,
        v: Option<f64>,
        range: (f64, f64),
        log: bool,
        ends: (f64, f64),
        open: f64,
    ) -> f64 {
        match v {
            Some(v) if v.is_finite() && (!log || v > 0.0) => {
                let t = Self::fraction(v, range, log).clamp(0.0, 1.0);
                ends.0 + (ends.1 - ends.0) * t
            }
            _ => open,
        }
    }

    /// The plotting area's edges: left, right, top, bottom.
    fn edges(&self) -> (f64, f64, f64, f64) {
        (self.px.0, self.px.1, self.py.1, self.py.0)
    }
}

/// The corner of the plot where the legend hides the fewest points: the one whose quarter-width,
/// third-height box holds fewest, the upper right on a tie.
fn legend_corner(p: &Pixels, series: &[Vec<(f64, f64)>]) -> SeriesLabelPosition {
    let (left, right, top, bottom) = p.edges();
    let (w, h) = ((right - left) * 0.45, (bottom - top) / 3.0);
    let points: Vec<(f64, f64)> = series
        .iter()
        .flatten()
        .map(|&(x, y)| (p.x(Some(x), left), p.y(Some(y), bottom)))
        .collect();
    let count = |x0: f64, y0: f64| {
        points
            .iter()
            .filter(|(x, y)| (x0..=x0 + w).contains(x) && (y0..=y0 + h).contains(y))
            .count()
    };
    [
        (SeriesLabelPosition::UpperRight, count(right - w, top)),
        (SeriesLabelPosition::UpperLeft, count(left, top)),
        (
            SeriesLabelPosition::LowerRight,
            count(right - w, bottom - h),
        ),
        (SeriesLabelPosition::LowerLeft, count(left, bottom - h)),
    ]
    .into_iter()
    .min_by_key(|(_, n)| *n)
    .map_or(SeriesLabelPosition::UpperRight, |(corner, _)| corner)
}

/// A pixel coordinate with one decimal, without a trailing `.0`.
fn px(v: f64) -> String {
    let r = (v * 10.0).round() / 10.0;
    if r.fract() == 0.0 {
        format!("{r:.0}")
    } else {
        format!("{r:.1}")
    }
}

/// An `RGBColor` as `#rrggbb`.
fn hex(c: RGBColor) -> String {
    format!("#{:02x}{:02x}{:02x}", c.0, c.1, c.2)
}

/// Axes and legend on a built chart, for any pair of linear or logarithmic axes; returns the
/// curves and the marks as SVG, drawn by hand (see [`Pixels`]).
fn lines<'a, X, Y>(
    mut chart: ChartContext<'a, SVGBackend<'a>, Cartesian2d<X, Y>>,
    frame: &Frame,
    series: &[Vec<(f64, f64)>],
    traces: &[Trace<'_>],
    marks: &[Mark],
) -> Result<String, PlotError>
where
    X: Ranged<ValueType = f64> + ValueFormatter<f64>,
    Y: Ranged<ValueType = f64> + ValueFormatter<f64>,
{
    chart
        .configure_mesh()
        .x_desc(frame.x_title.as_str())
        .y_desc(frame.y_title.as_str())
        .x_label_formatter(&ticks(frame.x_range))
        .y_label_formatter(&ticks(frame.y_range))
        .label_style((FONT, LABEL_SIZE))
        .axis_desc_style((FONT, TITLE_SIZE))
        .bold_line_style(RGBColor(0xe4, 0xe1, 0xd8))
        .light_line_style(RGBColor(0xf3, 0xf1, 0xea))
        .draw()
        .map_err(draw_err)?;
    let pixels = Pixels::new(&chart, frame);
    let mut out = String::from("<g fill=\"none\" stroke-width=\"2\" stroke-linejoin=\"round\">");
    // Earlier versions first, so that the current curves lie on top.
    let mut order: Vec<usize> = (0..traces.len()).collect();
    order.sort_by_key(|&i| !traces[i].old);
    for i in order {
        let trace = &traces[i];
        let base = PALETTE[trace.colour % PALETTE.len()];
        let (colour, dash) = if trace.old {
            (lighter(base), " stroke-dasharray=\"7 5\"")
        } else {
            (base, "")
        };
        let points: Vec<String> = series[i]
            .iter()
            .map(|&(x, y)| {
                format!(
                    "{},{}",
                    px(pixels.x(Some(x), 0.0)),
                    px(pixels.y(Some(y), 0.0))
                )
            })
            .collect();
        let _ = write!(
            out,
            "<polyline stroke=\"{}\"{dash} points=\"{}\"/>",
            hex(colour),
            points.join(" ")
        );
        // An empty series carries the legend entry: plotters draws the legend, not the curve.
        let style = ShapeStyle::from(&colour).stroke_width(2);
        let entry = chart
            .draw_series(LineSeries::new(std::iter::empty(), style))
            .map_err(draw_err)?
            .label(trace.name.as_str());
        if trace.old {
            entry.legend(move |(x, y)| {
                DashedPathElement::new(vec![(x, y), (x + 18, y)], 5, 3, style)
            });
        } else {
            entry.legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], style));
        }
    }
    out.push_str("</g>");
    out.push_str(&marks_svg(&pixels, marks));
    if frame.legend {
        chart
            .configure_series_labels()
            .position(legend_corner(&pixels, series))
            .label_font((FONT, LABEL_SIZE))
            .background_style(WHITE.mix(0.85))
            .border_style(RGBColor(0xd5, 0xd2, 0xc8))
            .draw()
            .map_err(draw_err)?;
    }
    Ok(out)
}

/// The checks drawn on a chart: a bar with end caps at a point, a band across the plot for an
/// extremum's value or position, a diamond where a `near` check aims, and the check's number.
/// Ranges are clipped to the plotting area; an open side runs to its edge.
fn marks_svg(p: &Pixels, marks: &[Mark]) -> String {
    if marks.is_empty() {
        return String::new();
    }
    let (left, right, top, bottom) = p.edges();
    let mut out = format!(
        "<g class=\"fb-marks\" font-family=\"{FONT}\" font-size=\"12\" font-weight=\"bold\">"
    );
    for m in marks {
        let colour = hex(if m.passed { HELD } else { FAILED });
        let (label_at, aim) = match m.place {
            Place::At(x) => {
                let x = p.x(Some(x), left);
                let (hi, lo) = (p.y(m.hi, top), p.y(m.lo, bottom));
                let _ = write!(
                    out,
                    "<path d=\"M{} {}V{}\" stroke=\"{colour}\" stroke-width=\"2\"/>",
                    px(x),
                    px(hi),
                    px(lo)
                );
                for (end, y) in [(m.hi, hi), (m.lo, lo)].into_iter().take(ends(hi, lo)) {
                    if end.is_some() {
                        let _ = write!(
                            out,
                            "<path d=\"M{} {}h12\" stroke=\"{colour}\" stroke-width=\"2\"/>",
                            px(x - 6.0),
                            px(y)
                        );
                    }
                }
                let aim = m.near.map(|n| (x, p.y(Some(n), (hi + lo) / 2.0)));
                ((x + 8.0, aim.map_or(hi, |a| a.1) - 7.0), aim)
            }
            Place::Level => {
                let (hi, lo) = (p.y(m.hi, top), p.y(m.lo, bottom));
                band(&mut out, &colour, (left, right), (hi, lo));
                for (end, y) in [(m.hi, hi), (m.lo, lo)].into_iter().take(ends(hi, lo)) {
                    if end.is_some() {
                        line(&mut out, &colour, (left, y), (right, y));
                    }
                }
                ((left + 6.0, hi.min(lo) - 5.0), None)
            }
            Place::Position => {
                let (lo, hi) = (p.x(m.lo, left), p.x(m.hi, right));
                band(&mut out, &colour, (lo, hi), (top, bottom));
                for (end, x) in [(m.lo, lo), (m.hi, hi)].into_iter().take(ends(lo, hi)) {
                    if end.is_some() {
                        line(&mut out, &colour, (x, top), (x, bottom));
                    }
                }
                // Low down: extrema are usually peaks, where the other marks sit.
                ((hi.max(lo) + 5.0, bottom - 8.0), None)
            }
        };
        if let Some((x, y)) = aim {
            let _ = write!(
                out,
                "<path d=\"M{} {}l5 5l-5 5l-5 -5z\" fill=\"#fff\" stroke=\"{colour}\" stroke-width=\"2\"/>",
                px(x),
                px(y - 5.0)
            );
        }
        let _ = write!(
            out,
            "<text x=\"{}\" y=\"{}\" fill=\"{colour}\">{}</text>",
            px(label_at.0),
            px(label_at.1),
            m.number
        );
    }
    out.push_str("</g>");
    out
}

/// How many ends of a range to draw: one when both fall within half a pixel.
fn ends(a: f64, b: f64) -> usize {
    if (a - b).abs() < 0.5 { 1 } else { 2 }
}

/// A translucent rectangle between pixel columns `xs` and rows `ys`; nothing when it is thinner
/// than a pixel (its edge lines show it).
fn band(out: &mut String, colour: &str, xs: (f64, f64), ys: (f64, f64)) {
    let (x, w) = (xs.0.min(xs.1), (xs.1 - xs.0).abs());
    let (y, h) = (ys.0.min(ys.1), (ys.1 - ys.0).abs());
    if w < 1.0 || h < 1.0 {
        return;
    }
    let _ = write!(
        out,
        "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" fill=\"{colour}\" fill-opacity=\"0.12\"/>",
        px(x),
        px(y),
        px(w),
        px(h)
    );
}

/// A thin dashed line between two pixels: the edge of an accepted range.
fn line(out: &mut String, colour: &str, a: (f64, f64), b: (f64, f64)) {
    let _ = write!(
        out,
        "<path d=\"M{} {}L{} {}\" stroke=\"{colour}\" stroke-dasharray=\"4 3\"/>",
        px(a.0),
        px(a.1),
        px(b.0),
        px(b.1)
    );
}

/// Cell edges of an axis: midpoints between neighbours, extended by half a step at the ends.
fn edges(v: &[f64]) -> Vec<f64> {
    match v {
        [] => vec![],
        [a] => {
            let pad = if *a == 0.0 { 0.5 } else { a.abs() * 0.05 };
            vec![a - pad, a + pad]
        }
        _ => {
            let n = v.len();
            let mut e = Vec::with_capacity(n + 1);
            e.push(v[0] - (v[1] - v[0]) / 2.0);
            e.extend(v.windows(2).map(|w| (w[0] + w[1]) / 2.0));
            e.push(v[n - 1] + (v[n - 1] - v[n - 2]) / 2.0);
            e
        }
    }
}

/// Blocks of at most `MAX_CELLS` groups over `n` points: (first, one past last).
fn blocks(n: usize) -> Vec<(usize, usize)> {
    let stride = n.div_ceil(MAX_CELLS).max(1);
    (0..n)
        .step_by(stride)
        .map(|i| (i, (i + stride).min(n)))
        .collect()
}

/// How a heat map is drawn: its colours over a range (SI) shared with another map, else over
/// its own; on the sequential scale, or the diverging one for differences; at full width, or
/// narrower to stand beside another map without shrinking its text.
#[derive(Clone, Copy, Debug)]
pub(crate) struct MapStyle {
    /// The values at the two ends of the colour bar (SI).
    pub range: Option<(f64, f64)>,
    /// Diverging colours, zero in the middle.
    pub diverging: bool,
    /// Width in CSS pixels.
    pub width: u32,
}

impl Default for MapStyle {
    fn default() -> Self {
        Self {
            range: None,
            diverging: false,
            width: WIDTH,
        }
    }
}

/// The width of a heat map that stands beside another.
pub(crate) const PAIR_WIDTH: u32 = 540;

/// A heat map of `z` over `x` (horizontal) and `y` (vertical) with a colour bar.
pub(crate) fn heat_map(
    title: &str,
    x: &Column,
    y: &Column,
    z: &Column,
    style: MapStyle,
) -> Result<String, PlotError> {
    let (nx, ny) = (x.values.len(), y.values.len());
    if nx == 0 || ny == 0 || z.values.len() != nx * ny {
        return Err(PlotError::Shape(format!(
            "map `{}` has {} values for a {nx} × {ny} grid",
            z.label,
            z.values.len()
        )));
    }
    let ends: Vec<f64> = style.range.map_or(vec![], |(a, b)| vec![a, b]);
    let (sx, sy, sz) = (
        scale_for(x.dim, &x.values),
        scale_for(y.dim, &y.values),
        scale_for(
            z.dim,
            ends.as_slice()
                .iter()
                .chain(&z.values)
                .copied()
                .collect::<Vec<_>>()
                .as_slice(),
        ),
    );
    let stops = if style.diverging { &DIVERGING } else { &STOPS };
    let ex: Vec<f64> = edges(&x.values).iter().map(|v| v * sx.factor).collect();
    let ey: Vec<f64> = edges(&y.values).iter().map(|v| v * sy.factor).collect();
    if ex.iter().chain(&ey).any(|v| !v.is_finite()) {
        return Err(PlotError::Shape(format!(
            "map `{}` has an axis value that is not finite",
            z.label
        )));
    }
    let (z0, z1) = match style.range {
        Some((a, b)) if a.is_finite() && b.is_finite() && b > a => (a * sz.factor, b * sz.factor),
        _ => range(z.values.iter().map(|v| v * sz.factor), false),
    };
    let (bx, by) = (blocks(nx), blocks(ny));
    // Mean of each block of points, row by row (y outer) so runs along x can be merged.
    let level = |(i0, i1): (usize, usize), (j0, j1): (usize, usize)| -> Option<usize> {
        let (mut sum, mut count) = (0.0, 0usize);
        for i in i0..i1 {
            for j in j0..j1 {
                let v = z.values[i * ny + j] * sz.factor;
                if v.is_finite() {
                    sum += v;
                    count += 1;
                }
            }
        }
        (count > 0).then(|| {
            let t = ((sum / count as f64 - z0) / (z1 - z0)).clamp(0.0, 1.0);
            (t * (LEVELS - 1) as f64).round() as usize
        })
    };
    let mut paths: Vec<String> = vec![String::new(); LEVELS + 1];
    let mut svg = String::new();
    let bar_levels;
    {
        let root = SVGBackend::with_string(&mut svg, (style.width, HEIGHT)).into_drawing_area();
        let root = root.titled(title, (FONT, CAPTION_SIZE)).map_err(draw_err)?;
        let (main, bar) = root.split_horizontally(style.width.saturating_sub(110));
        let (lo_x, hi_x) = range(ex.iter().copied(), false);
        let (lo_y, hi_y) = range(ey.iter().copied(), false);
        let mut chart = ChartBuilder::on(&main)
            .margin(12)
            .x_label_area_size(44)
            .y_label_area_size(64)
            .build_cartesian_2d(lo_x..hi_x, lo_y..hi_y)
            .map_err(draw_err)?;
        chart
            .configure_mesh()
            .disable_mesh()
            .x_desc(axis_title(shown(x), &sx))
            .y_desc(axis_title(shown(y), &sy))
            .x_label_formatter(&ticks((lo_x, hi_x)))
            .y_label_formatter(&ticks((lo_y, hi_y)))
            .label_style((FONT, LABEL_SIZE))
            .axis_desc_style((FONT, TITLE_SIZE))
            .draw()
            .map_err(draw_err)?;
        for &(j0, j1) in &by {
            let (top, bottom) = (ey[j0].max(ey[j1]), ey[j0].min(ey[j1]));
            let mut run: Option<(usize, i32, i32, i32, i32)> = None;
            for &(i0, i1) in &bx {
                let k = level((i0, i1), (j0, j1)).unwrap_or(LEVELS);
                let (left, right) = (ex[i0].min(ex[i1]), ex[i0].max(ex[i1]));
                let (px0, py0) = chart.backend_coord(&(left, top));
                let (px1, py1) = chart.backend_coord(&(right, bottom));
                run = match run {
                    Some((rk, rx0, _, ry0, ry1)) if rk == k => Some((rk, rx0, px1, ry0, ry1)),
                    other => {
                        if let Some(r) = other {
                            push_cell(&mut paths, r);
                        }
                        Some((k, px0, px1, py0, py1))
                    }
                };
            }
            if let Some(r) = run {
                push_cell(&mut paths, r);
            }
        }
        bar_levels = colour_bar(&bar, (z0, z1), stops, &axis_title(shown(z), &sz))?;
        root.present().map_err(draw_err)?;
    }
    let mut cells = String::from("<g shape-rendering=\"crispEdges\">");
    cells.push_str(&bar_levels);
    for (k, d) in paths.iter().enumerate().filter(|(_, d)| !d.is_empty()) {
        let c = if k == LEVELS {
            MISSING
        } else {
            colour(stops, k)
        };
        let _ = write!(cells, "<path fill=\"{}\" d=\"{d}\"/>", hex(c));
    }
    cells.push_str("</g>");
    // Cells go first so that the axes plotters drew stay on top of them.
    let at = svg
        .find("<svg")
        .and_then(|s| svg[s..].find('>').map(|e| s + e + 1))
        .ok_or_else(|| PlotError::Draw("the backend wrote no <svg> element".into()))?;
    svg.insert_str(at, &cells);
    Ok(inline(svg))
}

/// Appends one run of equal-colour cells (level, x0, x1, y0, y1 in pixels) to its level's path.
fn push_cell(paths: &mut [String], (k, x0, x1, y0, y1): (usize, i32, i32, i32, i32)) {
    if let Some(d) = paths.get_mut(k) {
        let _ = write!(d, "M{x0} {y0}h{}v{}h{}z", x1 - x0, y1 - y0, x0 - x1);
    }
}

/// The colour bar beside a heat map: the levels from `z0` (bottom) to `z1` (top), labelled.
/// Plotters draws the axis; the levels come back as SVG rectangles.
fn colour_bar(
    area: &DrawingArea<SVGBackend<'_>, plotters::coord::Shift>,
    (z0, z1): (f64, f64),
    stops: &[(u8, u8, u8); 5],
    title: &str,
) -> Result<String, PlotError> {
    let mut chart: ChartContext<'_, _, Cartesian2d<RangedCoordf64, RangedCoordf64>> =
        ChartBuilder::on(area)
            .margin_top(12)
            .margin_bottom(12)
            .x_label_area_size(44)
            .set_label_area_size(LabelAreaPosition::Right, 80)
            .build_cartesian_2d(0.0..1.0, z0..z1)
            .map_err(draw_err)?;
    chart
        .configure_mesh()
        .disable_mesh()
        .disable_x_axis()
        .y_desc(title)
        .y_label_formatter(&ticks((z0, z1)))
        .label_style((FONT, LABEL_SIZE))
        .axis_desc_style((FONT, TITLE_SIZE))
        .draw()
        .map_err(draw_err)?;
    // Written by hand into the cells' crisp-edged group: plotters' anti-aliased rectangles
    // leave light seams between the levels.
    let step = (z1 - z0) / LEVELS as f64;
    let mut out = String::new();
    for k in 0..LEVELS {
        let lo = z0 + step * k as f64;
        let (x0, y0) = chart.backend_coord(&(0.0, lo + step));
        let (x1, y1) = chart.backend_coord(&(1.0, lo));
        let _ = write!(
            out,
            "<rect x=\"{x0}\" y=\"{y0}\" width=\"{}\" height=\"{}\" fill=\"{}\"/>",
            x1 - x0,
            y1 - y0,
            hex(colour(stops, k))
        );
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn axes(log_x: bool, log_y: bool) -> Axes<'static> {
        Axes {
            x_label: "x",
            y_label: None,
            log_x,
            log_y,
        }
    }

    fn col(label: &str, dim: [i8; 5], values: Vec<f64>) -> Column {
        Column {
            label: label.into(),
            title: None,
            dim,
            values,
        }
    }

    #[test]
    fn line_plots_have_size_legend_and_units() {
        let x = col(
            "time",
            [1, 0, 0, 0, 0],
            (0..50).map(|i| i as f64 * 1e-7).collect(),
        );
        let a = col(
            "p(e)",
            [0; 5],
            (0..50).map(|i| (i as f64 * 0.1).sin()).collect(),
        );
        let b = col(
            "p(g)",
            [0; 5],
            (0..50).map(|i| (i as f64 * 0.1).cos()).collect(),
        );
        let axes = Axes {
            x_label: shown(&x),
            ..axes(false, false)
        };
        let svg = curves("t", &x, &[a, b], axes, &[]).expect("drawn");
        assert!(svg.contains("width=\"720\"") && svg.contains("height=\"420\""));
        assert!(svg.contains("time (µs)"), "{svg}");
        assert!(svg.contains("p(g)"));
    }

    #[test]
    fn log_axes_skip_non_positive_values() {
        let x = col("rabi", [-1, 0, 0, 0, 0], vec![0.0, 1e3, 1e4, 1e5]);
        let y = col("rate", [-1, 0, 0, 0, 0], vec![-1.0, 1.0, 10.0, 100.0]);
        assert!(curves("l", &x, std::slice::from_ref(&y), axes(true, true), &[]).is_ok());
        // A mark whose range is open or non-positive on a log axis is clipped, not lost.
        let m = Mark {
            number: 1,
            place: Place::At(1e4),
            lo: Some(-1.0),
            hi: None,
            near: None,
            passed: true,
        };
        let svg = curves("l", &x, &[y], axes(true, true), &[m]).unwrap();
        assert!(svg.contains("class=\"fb-marks\""), "{svg}");
    }

    #[test]
    fn checks_are_drawn_where_they_aim_and_widen_the_axes() {
        let x = col("d", [-1, 0, 0, 0, 0], (0..11).map(|i| i as f64).collect());
        let y = col("p", [0; 5], (0..11).map(|i| 0.1 * i as f64).collect());
        let aim = |place, lo, hi, near, passed| Mark {
            number: 1,
            place,
            lo,
            hi,
            near,
            passed,
        };
        let marks = [
            aim(Place::At(5.0), Some(0.4), Some(0.6), Some(0.5), true),
            // Far above the curve: the y axis must reach it.
            aim(Place::Level, None, Some(3.0), None, false),
            aim(Place::Position, Some(9.0), Some(10.0), None, true),
        ];
        let svg = curves(
            "c",
            &x,
            std::slice::from_ref(&y),
            axes(false, false),
            &marks,
        )
        .unwrap();
        let g = &svg[svg.find("<g class=\"fb-marks\"").expect("marks")..];
        assert_eq!(g.matches("<text").count(), 3);
        assert_eq!(g.matches("<rect").count(), 2, "two bands");
        assert!(
            g.contains("#9c2f1e") && g.contains("#2e6b3a"),
            "failed and held colours"
        );
        assert_eq!(g.matches("l5 5l-5 5l-5 -5z").count(), 1, "one aim");
        // The y ticks now run past 3 (the level), though the curve stops at 1.
        let plain = curves("c", &x, std::slice::from_ref(&y), axes(false, false), &[]).unwrap();
        let tick_3 = "\n3\n</text>";
        assert!(!plain.contains(tick_3) && svg.contains(tick_3), "{svg}");
    }

    #[test]
    fn the_legend_goes_where_the_curves_are_not() {
        let p = Pixels {
            x: (0.0, 1.0),
            y: (0.0, 1.0),
            log: (false, false),
            px: (0.0, 100.0),
            py: (100.0, 0.0),
        };
        let rising: Vec<(f64, f64)> = (0..=100)
            .map(|i| (i as f64 / 100.0, (i as f64 / 100.0).powi(4)))
            .collect();
        let corner = legend_corner(&p, std::slice::from_ref(&rising));
        assert!(
            matches!(corner, SeriesLabelPosition::UpperLeft),
            "{corner:?}"
        );
        let flat: Vec<(f64, f64)> = rising.iter().map(|&(x, _)| (x, 0.5)).collect();
        let corner = legend_corner(&p, &[flat]);
        assert!(
            matches!(corner, SeriesLabelPosition::UpperRight),
            "{corner:?}"
        );
    }

    #[test]
    fn an_earlier_version_is_dashed_and_lighter() {
        let x = col(
            "t",
            [1, 0, 0, 0, 0],
            (0..20).map(|i| i as f64 * 1e-6).collect(),
        );
        let a = col(
            "p",
            [0; 5],
            (0..20).map(|i| (i as f64 * 0.3).sin()).collect(),
        );
        let b = col(
            "p",
            [0; 5],
            (0..20).map(|i| (i as f64 * 0.3).cos()).collect(),
        );
        let trace = |y, old| Trace {
            x: &x,
            y,
            name: if old { "p · old" } else { "p · new" }.into(),
            colour: 0,
            old,
        };
        let svg = line_plot(
            "o",
            &[trace(&a, true), trace(&b, false)],
            Axes {
                x_label: "t",
                ..Axes::default()
            },
            &[],
        )
        .unwrap();
        assert!(svg.contains("p · old") && svg.contains("p · new"));
        // The lighter tone of the first palette colour, and the full one.
        let old = lighter(PALETTE[0]);
        assert!(
            svg.contains(&format!("#{:02X}{:02X}{:02X}", old.0, old.1, old.2)),
            "{svg}"
        );
        assert!(svg.contains("#27476E"), "{svg}");
        let dashed = format!("stroke=\"{}\" stroke-dasharray=\"7 5\"", hex(old));
        assert!(svg.contains(&dashed), "the old curve is dashed and lighter");
        assert!(
            svg.contains("<polyline stroke=\"#27476e\" points="),
            "the new one solid"
        );
    }

    #[test]
    fn heat_maps_are_downsampled_and_refuse_bad_shapes() {
        let n = 201;
        let x = col("d", [-1, 0, 0, 0, 0], (0..n).map(|i| i as f64).collect());
        let y = col(
            "len",
            [1, 0, 0, 0, 0],
            (0..n).map(|i| i as f64 * 1e-6).collect(),
        );
        let z = col("p", [0; 5], (0..n * n).map(|k| (k % 7) as f64).collect());
        let svg = heat_map("m", &x, &y, &z, MapStyle::default()).expect("drawn");
        assert!(svg.matches('M').count() <= 101 * 101 + 200);
        let short = col("p", [0; 5], vec![1.0; 5]);
        assert!(heat_map("m", &x, &y, &short, MapStyle::default()).is_err());
    }
}
