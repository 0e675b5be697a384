//! Session, comparison, sweep and Monte-Carlo charts, rendered in memory to PNG bytes and SVG text.

use std::collections::BTreeSet;
use std::panic::{catch_unwind, AssertUnwindSafe};

use plotters::chart::DualCoordChartContext;
use plotters::coord::types::RangedCoordf64;
use plotters::coord::Shift;
use plotters::element::DashedPathElement;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

use super::font;

mod compare;
pub mod design;
mod histogram;
pub mod measured;
mod session;
mod sweep;

use crate::analysis::events::{Event, EventKind};
use crate::analysis::trace::{Trace, TraceRow};
use compare::CompareFig;
use histogram::HistogramFig;
use session::SessionFig;
use sweep::SweepFig;

/// A chart in both output formats.
#[derive(Debug, Clone)]
pub struct Rendered {
    /// PNG file contents.
    pub png: Vec<u8>,
    /// SVG document text.
    pub svg: String,
}

/// Why a chart could not be produced.
#[derive(Debug, thiserror::Error)]
pub enum PlotError {
    /// The embedded font could not be registered.
    #[error("chart font setup failed: {0}")]
    Font(String),
    /// The drawing backend reported a failure (or the drawing code panicked).
    #[error("drawing the chart failed: {0}")]
    Draw(String),
    /// The pixel buffer could not be encoded as PNG.
    #[error("encoding the chart as PNG failed: {0}")]
    Encode(String),
}

/// Data of one parameter sweep: one entry per swept value in every slice.
///
/// Slices of different lengths are cut to the shortest one.
#[derive(Debug, Clone, Copy)]
pub struct SweepSeries<'a> {
    /// Name of the swept parameter (the x-axis label).
    pub param: &'a str,
    /// Swept parameter values.
    pub values: &'a [f64],
    /// Charge delivered to the battery per value, Ah.
    pub charge_ah: &'a [f64],
    /// Fraction of cranking time the converter stayed in regulation per value (0 … 1).
    pub in_regulation: &'a [f64],
    /// Mean operator power per value, W.
    pub mean_power_w: &'a [f64],
}

// ---------------------------------------------------------------------------------------------
// Palette (our own) and layout constants.

const INK: RGBColor = RGBColor(36, 40, 46);
const MUTED: RGBColor = RGBColor(110, 114, 120);
const PANEL_BG: RGBColor = RGBColor(251, 250, 246);
const GRID_FINE: RGBColor = RGBColor(238, 237, 232);
const GRID_MAIN: RGBColor = RGBColor(218, 217, 210);
const AXIS: RGBColor = RGBColor(120, 122, 126);
const LANE_TRACK: RGBColor = RGBColor(236, 235, 230);
const BAND: RGBColor = RGBColor(112, 112, 118);
const BAND_ALPHA: f64 = 0.20;

// Series colours: the Okabe–Ito palette ("Color Universal Design", Okabe & Ito 2008), chosen to
// stay apart for the common colour-vision deficiencies; yellow is left out (too pale on white).
const TEAL: RGBColor = RGBColor(0, 114, 178); // blue
const AMBER: RGBColor = RGBColor(230, 159, 0); // orange
const SLATE: RGBColor = RGBColor(40, 40, 40); // black
const BRICK: RGBColor = RGBColor(213, 94, 0); // vermillion
const OLIVE: RGBColor = RGBColor(0, 158, 115); // bluish green
const PLUM: RGBColor = RGBColor(204, 121, 167); // reddish purple
const COBALT: RGBColor = RGBColor(86, 180, 233); // sky blue
const UMBER: RGBColor = RGBColor(150, 120, 40); // dark yellow
const RUN_CYCLE: [RGBColor; 8] = [TEAL, BRICK, OLIVE, AMBER, PLUM, COBALT, SLATE, UMBER];

/// At most this many points are drawn per series (long traces are thinned).
const MAX_POINTS: usize = 4000;
/// Magnitudes beyond this are clamped before drawing so that axis arithmetic stays finite.
const MAG_LIMIT: f64 = 1e30;

const TITLE_H: u32 = 46;
const LEGEND_W: u32 = 200;
const LEGEND_ROW: i32 = 20;
const Y_AREA: u32 = 66;
const LANE_FRAC: f64 = 0.075;

type Cart = Cartesian2d<RangedCoordf64, RangedCoordf64>;
type Chart<'a, DB> = DualCoordChartContext<'a, DB, Cart, Cart>;

// ---------------------------------------------------------------------------------------------
// Public entry points.

/// Four stacked panels against time: crank and target cadence, voltages, battery current with
/// SOC on a right-hand axis, and operator power. Regulation-loss periods are shaded across all
/// panels; alerts are drawn as coloured lanes along the top of the panel they concern.
pub fn session_chart(trace: &Trace, events: &[Event], title: &str) -> Result<Rendered, PlotError> {
    session_chart_with(trace, events, title, &SessionMarks::default())
}

/// Reference lines of the session chart, where known.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct SessionMarks {
    /// The operator's critical power, W (a dashed line on the power panel).
    pub critical_power_w: Option<f64>,
    /// The operator's full W′, J (the W′ balance is drawn against it on the right axis).
    pub w_prime_j: Option<f64>,
}

/// As [`session_chart`], with the operator's critical power and W′ balance on the power panel.
pub fn session_chart_with(
    trace: &Trace,
    events: &[Event],
    title: &str,
    marks: &SessionMarks,
) -> Result<Rendered, PlotError> {
    render(&SessionFig {
        trace,
        events,
        title,
        marks: *marks,
    })
}

/// SOC and crank cadence against time for several runs overlaid, one colour per run.
pub fn compare_chart(runs: &[(String, &Trace)], title: &str) -> Result<Rendered, PlotError> {
    render(&CompareFig { runs, title })
}

/// Charge delivered, in-regulation fraction and mean operator power against a swept parameter.
pub fn sweep_chart(series: &SweepSeries, title: &str) -> Result<Rendered, PlotError> {
    render(&SweepFig {
        series,
        title,
        categories: None,
    })
}

/// As [`sweep_chart`] for a parameter whose values are words (a chemistry, a topology): the
/// values are drawn as categories, `series.values` holding each point's slot (0, 1, …).
pub fn sweep_chart_categories(
    series: &SweepSeries,
    categories: &[String],
    title: &str,
) -> Result<Rendered, PlotError> {
    render(&SweepFig {
        series,
        title,
        categories: Some(categories),
    })
}

/// One histogram per metric given as `(name, unit, samples)`, with its mean (bins: see
/// `histogram::bin_samples`).
pub fn histogram_chart(
    metrics: &[(&str, &str, &[f64])],
    title: &str,
) -> Result<Rendered, PlotError> {
    histogram_chart_marked(metrics, &[], title)
}

/// As [`histogram_chart`], with a threshold marked on the metrics that have one (`thresholds[k]`
/// for metric k).
pub fn histogram_chart_marked(
    metrics: &[(&str, &str, &[f64])],
    thresholds: &[Option<f64>],
    title: &str,
) -> Result<Rendered, PlotError> {
    render(&HistogramFig {
        metrics,
        thresholds,
        title,
    })
}

// ---------------------------------------------------------------------------------------------
// Rendering to both backends.

trait Figure {
    fn size(&self) -> (u32, u32);
    fn draw<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
        pen: Pen,
    ) -> Result<(), PlotError>;
}

fn de<E: std::error::Error + Send + Sync>(e: DrawingAreaErrorKind<E>) -> PlotError {
    PlotError::Draw(e.to_string())
}

/// Draws the figure twice, as a PNG and as an SVG; the two are independent and drawn at once
/// (two threads), so the slower raster sets the time a user waits.
fn render<F: Figure + Sync>(fig: &F) -> Result<Rendered, PlotError> {
    font::ensure_registered().map_err(PlotError::Font)?;
    let (w, h) = fig.size();
    let outcome = catch_unwind(AssertUnwindSafe(|| -> Result<Rendered, PlotError> {
        let (png, svg) = rayon::join(
            || -> Result<Vec<u8>, PlotError> {
                let mut buf = vec![0u8; w as usize * h as usize * 3];
                {
                    let root = BitMapBackend::with_buffer(&mut buf, (w, h)).into_drawing_area();
                    fig.draw(&root, Pen { raster: true })?;
                    root.present().map_err(de)?;
                }
                encode_png(&buf, w, h)
            },
            || -> Result<String, PlotError> {
                let mut svg = String::new();
                {
                    let root = SVGBackend::with_string(&mut svg, (w, h)).into_drawing_area();
                    fig.draw(&root, Pen { raster: false })?;
                    root.present().map_err(de)?;
                }
                Ok(svg)
            },
        );
        Ok(Rendered {
            png: png?,
            svg: svg?,
        })
    }));
    match outcome {
        Ok(result) => result,
        Err(payload) => {
            let msg = payload
                .downcast_ref::<&str>()
                .map(|s| s.to_string())
                .or_else(|| payload.downcast_ref::<String>().cloned())
                .unwrap_or_else(|| "unknown panic".to_string());
            Err(PlotError::Draw(format!("plotting code panicked: {msg}")))
        }
    }
}

fn encode_png(buf: &[u8], w: u32, h: u32) -> Result<Vec<u8>, PlotError> {
    use image::ImageEncoder;
    let mut out = Vec::new();
    image::codecs::png::PngEncoder::new(&mut out)
        .write_image(buf, w, h, image::ColorType::Rgb8)
        .map_err(|e| PlotError::Encode(e.to_string()))?;
    Ok(out)
}

// ---------------------------------------------------------------------------------------------
// Numeric helpers: ranges, thinning, tick labels.

fn tame(v: f64) -> f64 {
    v.clamp(-MAG_LIMIT, MAG_LIMIT)
}

/// Running min/max of the finite values seen.
#[derive(Debug, Clone, Copy)]
struct Span {
    lo: f64,
    hi: f64,
}

impl Span {
    fn new() -> Self {
        Span {
            lo: f64::INFINITY,
            hi: f64::NEG_INFINITY,
        }
    }

    fn of(values: impl IntoIterator<Item = f64>) -> Self {
        let mut s = Span::new();
        for v in values {
            s.add(v);
        }
        s
    }

    fn add(&mut self, v: f64) {
        if v.is_finite() {
            let v = tame(v);
            self.lo = self.lo.min(v);
            self.hi = self.hi.max(v);
        }
    }

    fn is_empty(&self) -> bool {
        self.lo > self.hi
    }

    /// Axis range: `pad` of the width added on both sides; a constant range is widened and an
    /// empty one replaced by `fallback`. The result always has a positive, finite width.
    fn axis(self, pad: f64, fallback: (f64, f64)) -> (f64, f64) {
        if self.is_empty() {
            return fallback;
        }
        let (lo, hi) = (self.lo, self.hi);
        let width = hi - lo;
        let scale = lo.abs().max(hi.abs());
        if width <= scale * 1e-9 || width < 1e-12 {
            let half = if scale > 1e-6 { scale * 0.05 } else { 0.5 };
            return (lo - half, hi + half);
        }
        (lo - width * pad, hi + width * pad)
    }
}

/// Splits points into runs of finite points and thins each run (min and max per bucket) so
/// that about `budget` points are drawn in all.
fn polylines(points: impl Iterator<Item = (f64, f64)>, budget: usize) -> Vec<Vec<(f64, f64)>> {
    let mut segs: Vec<Vec<(f64, f64)>> = Vec::new();
    let mut cur = Vec::new();
    for (x, y) in points {
        if x.is_finite() && y.is_finite() {
            cur.push((tame(x), tame(y)));
        } else if !cur.is_empty() {
            segs.push(std::mem::take(&mut cur));
        }
    }
    if !cur.is_empty() {
        segs.push(cur);
    }
    // Badly fragmented data: join across the gaps rather than draw thousands of specks.
    if segs.len() > budget / 8 {
        segs = vec![segs.concat()];
    }
    let total: usize = segs.iter().map(Vec::len).sum();
    if total <= budget {
        return segs;
    }
    segs.into_iter()
        .map(|s| {
            let allowed = (budget * s.len() / total).max(2);
            thin(s, allowed)
        })
        .collect()
}

fn thin(seg: Vec<(f64, f64)>, allowed: usize) -> Vec<(f64, f64)> {
    if seg.len() <= allowed {
        return seg;
    }
    let buckets = (allowed / 2).max(1);
    let size = seg.len().div_ceil(buckets);
    let mut out = Vec::with_capacity(2 * buckets + 1);
    for chunk in seg.chunks(size) {
        let (mut imin, mut imax) = (0, 0);
        for (i, p) in chunk.iter().enumerate() {
            if p.1 < chunk[imin].1 {
                imin = i;
            }
            if p.1 > chunk[imax].1 {
                imax = i;
            }
        }
        let (a, b) = (imin.min(imax), imin.max(imax));
        out.push(chunk[a]);
        if b != a {
            out.push(chunk[b]);
        }
    }
    if let Some(&last) = seg.last() {
        if out.last() != Some(&last) {
            out.push(last);
        }
    }
    out
}

/// Tick label formatter suited to an axis range.
fn tick_format(lo: f64, hi: f64) -> impl Fn(&f64) -> String {
    let step = ((hi - lo).abs() / 10.0).max(f64::MIN_POSITIVE);
    let mag = lo.abs().max(hi.abs());
    let sci = mag >= 1e6 || (mag > 0.0 && mag < 1e-3);
    let decimals = (1.0 - step.log10().floor()).clamp(0.0, 8.0) as usize;
    move |v: &f64| {
        if v.abs() < step * 1e-3 {
            "0".to_string()
        } else if sci {
            format!("{v:.2e}")
        } else {
            trim_number(format!("{v:.decimals$}"))
        }
    }
}

fn trim_number(s: String) -> String {
    let t = if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    };
    if t == "-0" {
        "0".to_string()
    } else {
        t
    }
}

/// Value formatting for captions (three significant digits, plain or scientific).
fn fmt_value(v: f64) -> String {
    if !v.is_finite() {
        return "n/a".to_string();
    }
    let a = v.abs();
    if a == 0.0 {
        "0".to_string()
    } else if !(1e-3..1e6).contains(&a) {
        format!("{v:.2e}")
    } else {
        let decimals = (2.0 - a.log10().floor()).clamp(0.0, 6.0) as usize;
        trim_number(format!("{v:.decimals$}"))
    }
}

/// Time axis shared by stacked panels: unit divisor, description and range in that unit.
struct TimeAxis {
    div: f64,
    desc: &'static str,
    range: (f64, f64),
}

impl TimeAxis {
    /// Minutes for spans of five minutes or more, seconds otherwise.
    fn of(times: impl Iterator<Item = f64> + Clone) -> Self {
        let span = Span::of(times.clone());
        let width = if span.is_empty() {
            0.0
        } else {
            span.hi - span.lo
        };
        let (div, desc) = if width.is_finite() && width >= 300.0 {
            (60.0, "time [min]")
        } else {
            (1.0, "time [s]")
        };
        let range = Span::of(times.map(|t| t / div)).axis(0.0, (0.0, 1.0));
        TimeAxis { div, desc, range }
    }
}

/// Shortens `s` with an ellipsis until it is at most `max_px` wide in `style`.
fn fit_label<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    s: &str,
    style: &TextStyle,
    max_px: i32,
) -> String {
    let fits = |t: &str| {
        area.estimate_text_size(t, style)
            .map(|(w, _)| w as i32 <= max_px)
            .unwrap_or(true)
    };
    if fits(s) {
        return s.to_string();
    }
    let chars: Vec<char> = s.chars().collect();
    for keep in (1..chars.len()).rev() {
        let t: String = chars[..keep].iter().chain(std::iter::once(&'…')).collect();
        if fits(&t) {
            return t;
        }
    }
    "…".to_string()
}

fn with_unit(name: &str, unit: &str) -> String {
    if unit.trim().is_empty() {
        name.to_string()
    } else {
        format!("{name} [{unit}]")
    }
}

// ---------------------------------------------------------------------------------------------
// Drawing helpers.

fn text_style(size: f64) -> TextStyle<'static> {
    TextStyle::from(FontDesc::new(
        FontFamily::Name(font::FAMILY),
        size,
        FontStyle::Normal,
    ))
    .color(&INK)
}

fn bold_style(size: f64) -> TextStyle<'static> {
    TextStyle::from(FontDesc::new(
        FontFamily::Name(font::FAMILY),
        size,
        FontStyle::Bold,
    ))
    .color(&INK)
}

fn draw_title<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    title: &str,
) -> Result<DrawingArea<DB, Shift>, PlotError> {
    let (head, body) = root.split_vertically(TITLE_H);
    let (w, _) = head.dim_in_pixel();
    let style = bold_style(24.0).pos(Pos::new(HPos::Center, VPos::Center));
    head.draw_text(title, &style, (w as i32 / 2, TITLE_H as i32 / 2 + 2))
        .map_err(de)?;
    Ok(body)
}

/// Texts of one panel.
struct PanelText<'s> {
    caption: &'s str,
    y_desc: &'s str,
    x_desc: Option<&'s str>,
    /// Description of the right-hand axis; `None` leaves it undrawn.
    y2_desc: Option<&'s str>,
}

/// Geometry of one panel.
#[derive(Debug, Clone, Copy)]
struct PanelAxes {
    x: (f64, f64),
    y: (f64, f64),
    y2: (f64, f64),
    x_area: u32,
    right_area: u32,
    /// Label only whole-number ticks on the left axis (counts).
    y_counts: bool,
}

fn build_panel<'a, DB: DrawingBackend>(
    area: &'a DrawingArea<DB, Shift>,
    text: &PanelText,
    ax: &PanelAxes,
) -> Result<Chart<'a, DB>, PlotError> {
    let mut chart = ChartBuilder::on(area)
        .caption(text.caption, bold_style(15.0))
        .margin_top(4)
        .margin_right(6)
        .margin_left(4)
        .x_label_area_size(ax.x_area)
        .y_label_area_size(Y_AREA)
        .right_y_label_area_size(ax.right_area)
        .build_cartesian_2d(ax.x.0..ax.x.1, ax.y.0..ax.y.1)
        .map_err(de)?
        .set_secondary_coord(ax.x.0..ax.x.1, ax.y2.0..ax.y2.1);
    chart.plotting_area().fill(&PANEL_BG).map_err(de)?;
    let fx = tick_format(ax.x.0, ax.x.1);
    let fy_plain = tick_format(ax.y.0, ax.y.1);
    let fy = |v: &f64| {
        if ax.y_counts && (v - v.round()).abs() > 1e-9 {
            String::new()
        } else {
            fy_plain(v)
        }
    };
    let mut mesh = chart.configure_mesh();
    mesh.x_labels(12)
        .y_labels(6)
        .x_label_formatter(&fx)
        .y_label_formatter(&fy)
        .max_light_lines(2)
        .light_line_style(GRID_FINE)
        .bold_line_style(GRID_MAIN)
        .axis_style(AXIS)
        .label_style(text_style(13.0))
        .axis_desc_style(text_style(14.0))
        .y_desc(text.y_desc);
    if let Some(d) = text.x_desc {
        mesh.x_desc(d);
    }
    mesh.draw().map_err(de)?;
    if let Some(d) = text.y2_desc {
        let fy2 = tick_format(ax.y2.0, ax.y2.1);
        chart
            .configure_secondary_axes()
            .y_labels(6)
            .y_label_formatter(&fy2)
            .axis_style(AXIS)
            .label_style(text_style(13.0))
            .axis_desc_style(text_style(14.0))
            .y_desc(d)
            .draw()
            .map_err(de)?;
    }
    Ok(chart)
}

/// How lines are stroked on the current backend.
///
/// The raster backend turns a wide polyline into one polygon whose inner corners shoot far out at
/// sharp turns (common in noisy or thinned data), so on bitmaps each segment is stroked on its own.
#[derive(Debug, Clone, Copy)]
struct Pen {
    raster: bool,
}

impl Pen {
    /// Draws a line (solid or dashed) through the finite points, thinned, with gaps at non-finite ones.
    fn line<DB: DrawingBackend>(
        self,
        area: &DrawingArea<DB, Cart>,
        points: impl Iterator<Item = (f64, f64)>,
        color: RGBColor,
        dashed: bool,
    ) -> Result<(), PlotError> {
        let style = color.stroke_width(2);
        let base = area.get_base_pixel();
        let px_area = area.strip_coord_spec();
        for seg in polylines(points, MAX_POINTS) {
            let mut px: Vec<(i32, i32)> = seg
                .iter()
                .map(|p| {
                    let q = area.map_coordinate(p);
                    (q.0 - base.0, q.1 - base.1)
                })
                .collect();
            px.dedup();
            if px.len() == 1 {
                px_area
                    .draw(&Circle::new(px[0], 2, color.filled()))
                    .map_err(de)?;
                continue;
            }
            let pieces = if dashed {
                dash_pieces(&px, 9.0, 6.0)
            } else {
                vec![px]
            };
            for piece in pieces {
                if self.raster {
                    // A 2×2 square pen: the piece drawn as a one-pixel polyline at the four
                    // offsets. One-pixel lines are plain line drawing, with no corner joins to
                    // spike; stroking each segment as its own wide polygon cost more than the
                    // whole simulation.
                    let thin = color.stroke_width(1);
                    let mut shifted = piece.clone();
                    for (dx, dy) in [(0, 0), (1, 0), (0, 1), (1, 1)] {
                        for (q, p) in shifted.iter_mut().zip(&piece) {
                            *q = (p.0 + dx, p.1 + dy);
                        }
                        px_area
                            .draw(&PathElement::new(shifted.clone(), thin))
                            .map_err(de)?;
                    }
                } else {
                    px_area.draw(&PathElement::new(piece, style)).map_err(de)?;
                }
            }
        }
        Ok(())
    }
}

/// Cuts a pixel polyline into dashes `on` px long separated by `off` px gaps.
fn dash_pieces(px: &[(i32, i32)], on: f64, off: f64) -> Vec<Vec<(i32, i32)>> {
    let mut out = Vec::new();
    let mut cur = vec![px[0]];
    let mut solid = true;
    let mut left = on;
    let round = |p: (f64, f64)| (p.0.round() as i32, p.1.round() as i32);
    for w in px.windows(2) {
        let a = (f64::from(w[0].0), f64::from(w[0].1));
        let b = (f64::from(w[1].0), f64::from(w[1].1));
        let len = (b.0 - a.0).hypot(b.1 - a.1);
        let mut pos = 0.0;
        while len - pos > left {
            pos += left;
            let f = pos / len;
            let p = round((a.0 + (b.0 - a.0) * f, a.1 + (b.1 - a.1) * f));
            if solid {
                cur.push(p);
                out.push(std::mem::take(&mut cur));
            } else {
                cur = vec![p];
            }
            solid = !solid;
            left = if solid { on } else { off };
        }
        left -= len - pos;
        if solid {
            cur.push(w[1]);
        }
    }
    if solid && cur.len() > 1 {
        out.push(cur);
    }
    out
}

/// Fills the area between a series and `base` with a light tint.
fn draw_fill<DB: DrawingBackend>(
    area: &DrawingArea<DB, Cart>,
    points: impl Iterator<Item = (f64, f64)>,
    base: f64,
    color: RGBColor,
) -> Result<(), PlotError> {
    for seg in polylines(points, MAX_POINTS) {
        if seg.len() < 2 {
            continue;
        }
        let (first, last) = (seg[0].0, seg[seg.len() - 1].0);
        let mut poly = seg;
        poly.push((last, base));
        poly.push((first, base));
        area.draw(&Polygon::new(poly, color.mix(0.16).filled()))
            .map_err(de)?;
    }
    Ok(())
}

fn draw_note<DB: DrawingBackend>(
    area: &DrawingArea<DB, Cart>,
    note: &str,
) -> Result<(), PlotError> {
    let px = area.strip_coord_spec();
    let (w, h) = px.dim_in_pixel();
    let style = text_style(16.0)
        .color(&MUTED)
        .pos(Pos::new(HPos::Center, VPos::Center));
    px.draw_text(note, &style, (w as i32 / 2, h as i32 / 2))
        .map_err(de)
}

/// How a legend entry is drawn.
#[derive(Debug, Clone, Copy)]
enum Glyph {
    Line(RGBColor),
    Dashed(RGBColor),
    Marker(RGBColor),
    Band(RGBColor, f64),
    Lane(RGBColor),
}

struct LegendItem {
    label: String,
    glyph: Glyph,
}

fn item(label: impl Into<String>, glyph: Glyph) -> LegendItem {
    LegendItem {
        label: label.into(),
        glyph,
    }
}

/// Draws a legend column: sample glyph then label, one entry per row, starting `top` px down.
fn draw_legend<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    items: &[LegendItem],
    top: i32,
) -> Result<(), PlotError> {
    let (w, h) = area.dim_in_pixel();
    let rows = ((h as i32 - top) / LEGEND_ROW).max(1) as usize;
    let max_px = w as i32 - 56;
    let label_style = text_style(13.0).pos(Pos::new(HPos::Left, VPos::Center));
    let shown = if items.len() > rows {
        rows - 1
    } else {
        items.len()
    };
    for (i, it) in items.iter().take(shown).enumerate() {
        let y = top + i as i32 * LEGEND_ROW + LEGEND_ROW / 2;
        let (x0, x1) = (12, 40);
        match it.glyph {
            Glyph::Line(c) => {
                area.draw(&PathElement::new(vec![(x0, y), (x1, y)], c.stroke_width(2)))
                    .map_err(de)?;
            }
            Glyph::Dashed(c) => {
                for k in 0..3 {
                    let a = x0 + k * 11;
                    area.draw(&PathElement::new(
                        vec![(a, y), ((a + 6).min(x1), y)],
                        c.stroke_width(2),
                    ))
                    .map_err(de)?;
                }
            }
            Glyph::Marker(c) => {
                area.draw(&PathElement::new(vec![(x0, y), (x1, y)], c.stroke_width(2)))
                    .map_err(de)?;
                area.draw(&Circle::new(((x0 + x1) / 2, y), 4, c.filled()))
                    .map_err(de)?;
            }
            Glyph::Band(c, alpha) => {
                area.draw(&Rectangle::new(
                    [(x0, y - 7), (x1, y + 7)],
                    c.mix(alpha).filled(),
                ))
                .map_err(de)?;
            }
            Glyph::Lane(c) => {
                area.draw(&Rectangle::new([(x0, y - 4), (x1, y + 4)], c.filled()))
                    .map_err(de)?;
            }
        }
        let label = fit_label(area, &it.label, &label_style, max_px);
        area.draw_text(&label, &label_style, (x1 + 8, y))
            .map_err(de)?;
    }
    if shown < items.len() {
        let y = top + shown as i32 * LEGEND_ROW + LEGEND_ROW / 2;
        let more = format!("… and {} more", items.len() - shown);
        area.draw_text(&more, &label_style.color(&MUTED), (12, y))
            .map_err(de)?;
    }
    Ok(())
}

// ---------------------------------------------------------------------------------------------

#[cfg(test)]
mod tests {
    use super::histogram::bin_samples;
    use super::session::{alert_color, event_interval};
    use super::*;
    use crate::analysis::trace::Mode;

    const PNG_SIG: [u8; 8] = [0x89, b'P', b'N', b'G', 0x0D, 0x0A, 0x1A, 0x0A];

    fn row(t: f64) -> TraceRow {
        let rpm = 70.0 + 8.0 * (t / 40.0).sin();
        let emf = rpm * 0.25;
        TraceRow {
            time_s: t,
            crank_rpm: rpm,
            target_rpm: 70.0,
            generator_rpm: rpm * 20.0,
            emf_v: emf,
            generator_current_a: 1.2,
            input_v: emf - 1.5,
            duty: 0.6,
            output_v: 14.1,
            battery_v: 12.6 + t / 2000.0,
            battery_current_a: 1.5 + 0.3 * (t / 25.0).cos(),
            soc: (0.3 + t / 4000.0).min(1.0),
            battery_temp_c: 25.0,
            operator_power_w: 45.0 + 10.0 * (t / 30.0).sin(),
            mode: Mode::Cc,
            charge_limit_v: 14.4,
            operator_torque_n_m: 5.0,
            w_prime_balance_j: 15000.0,
            winding_temp_c: 30.0,
            in_regulation: true,
            bus_v: 12.6 + t / 2000.0,
            bus_current_a: 1.5 + 0.3 * (t / 25.0).cos(),
            operator_mean_power_w: 45.0,
            junction_temp_c: 20.0,
        }
    }

    fn trace(n: usize, dt: f64) -> Trace {
        Trace {
            rows: (0..n).map(|i| row(i as f64 * dt)).collect(),
        }
    }

    fn event(kind: EventKind, start_s: f64, end_s: f64) -> Event {
        Event {
            kind,
            start_s,
            end_s,
            duration_s: end_s - start_s,
            quantity: "battery_v",
            unit: "V",
            threshold: 1.0,
            worst: 1.0,
            affects_verdict: false,
            detail: String::new(),
            cause: 1,
            above: true,
        }
    }

    fn all_events() -> Vec<Event> {
        vec![
            event(EventKind::RegulationLoss, 300.0, 420.0),
            event(EventKind::RegulationLoss, 900.0, 960.0),
            event(EventKind::Overcharge, 1000.0, 1100.0),
            event(EventKind::InputOvervoltage, 500.0, 500.0),
            event(EventKind::Lockout, 310.0, 400.0),
            event(EventKind::BatteryOvertemp, 1200.0, 1300.0),
            event(EventKind::ChargeTempWindow, 100.0, 200.0),
            event(EventKind::OperatorOverload, 700.0, 760.0),
            event(EventKind::ChargeComplete, 1500.0, 1500.0),
        ]
    }

    fn check(r: &Rendered, w: u32, h: u32, title: &str) {
        assert!(r.png.len() > 1000, "PNG suspiciously small");
        assert_eq!(&r.png[..8], &PNG_SIG);
        let img = image::load_from_memory(&r.png).expect("PNG decodes");
        assert_eq!((img.width(), img.height()), (w, h));
        assert!(r.svg.contains("<svg"));
        assert!(r.svg.contains(title), "SVG lacks the title {title:?}");
    }

    /// Number of pixels whose colour is close to `c`.
    fn count_near(png: &[u8], c: RGBColor, tol: i32) -> usize {
        let img = image::load_from_memory(png).unwrap().to_rgb8();
        img.pixels()
            .filter(|p| {
                (p[0] as i32 - c.0 as i32).abs() <= tol
                    && (p[1] as i32 - c.1 as i32).abs() <= tol
                    && (p[2] as i32 - c.2 as i32).abs() <= tol
            })
            .count()
    }

    #[test]
    fn session_chart_renders() {
        let tr = trace(1801, 1.0);
        let r = session_chart(&tr, &all_events(), "Session alpha").unwrap();
        check(&r, 1200, 1000, "Session alpha");
        let texts = svg_texts(&r.svg);
        for want in [
            "time [min]",
            "SOC [%]",
            "cadence [rpm]",
            "voltage [V]",
            "power [W]",
        ] {
            assert!(texts.iter().any(|t| t == want), "missing {want:?}");
        }
        assert!(r.svg.contains("overcharge"));
        assert!(r.svg.contains("regulation lost"));
        // Lines in their palette colours and alert lanes are actually painted.
        assert!(count_near(&r.png, TEAL, 12) > 500);
        assert!(count_near(&r.png, PLUM, 12) > 200);
        assert!(count_near(&r.png, alert_color(EventKind::Overcharge), 4) > 50);
        assert!(count_near(&r.png, alert_color(EventKind::OperatorOverload), 4) > 50);
    }

    #[test]
    fn session_chart_without_events_has_no_alert_legend() {
        let r = session_chart(&trace(100, 1.0), &[], "Quiet").unwrap();
        check(&r, 1200, 1000, "Quiet");
        assert!(r.svg.contains("time [s]"));
        assert!(!r.svg.contains("regulation lost"));
        assert!(!r.svg.contains("overcharge"));
        assert_eq!(count_near(&r.png, alert_color(EventKind::Overcharge), 4), 0);
    }

    #[test]
    fn session_chart_edge_cases() {
        let empty = Trace::default();
        let r = session_chart(&empty, &all_events(), "Empty").unwrap();
        check(&r, 1200, 1000, "Empty");
        assert!(r.svg.contains("no trace samples"));

        check(
            &session_chart(&trace(1, 1.0), &[], "One").unwrap(),
            1200,
            1000,
            "One",
        );

        let mut flat = trace(50, 1.0);
        for r in &mut flat.rows {
            *r = row(0.0);
            r.battery_current_a = 0.0;
            r.operator_power_w = 0.0;
        }
        for (i, r) in flat.rows.iter_mut().enumerate() {
            r.time_s = i as f64;
        }
        check(
            &session_chart(&flat, &[], "Flat").unwrap(),
            1200,
            1000,
            "Flat",
        );

        let mut wild = trace(200, 1.0);
        wild.rows[3].crank_rpm = f64::NAN;
        wild.rows[4].emf_v = f64::INFINITY;
        wild.rows[5].battery_v = f64::NEG_INFINITY;
        wild.rows[6].time_s = f64::NAN;
        wild.rows[7].operator_power_w = 1e300;
        wild.rows[8].battery_current_a = -1e250;
        wild.rows[9].soc = f64::NAN;
        let weird_events = vec![
            event(EventKind::Overcharge, f64::NAN, 10.0),
            event(EventKind::Lockout, 50.0, f64::INFINITY),
            event(EventKind::RegulationLoss, -100.0, 1e9),
            event(EventKind::OperatorOverload, 1e6, 2e6),
            event(EventKind::BatteryOvertemp, 199.0, 150.0),
        ];
        check(
            &session_chart(&wild, &weird_events, "Wild").unwrap(),
            1200,
            1000,
            "Wild",
        );

        let mut all_nan = trace(20, 1.0);
        for r in &mut all_nan.rows {
            r.time_s = f64::NAN;
        }
        check(
            &session_chart(&all_nan, &[], "Nan").unwrap(),
            1200,
            1000,
            "Nan",
        );
    }

    #[test]
    fn long_trace_is_thinned_and_quick() {
        let tr = trace(8 * 3600 * 2, 0.5);
        let start = std::time::Instant::now();
        let r = session_chart(&tr, &all_events(), "Eight hours").unwrap();
        check(&r, 1200, 1000, "Eight hours");
        assert!(r.svg.len() < 4_000_000, "SVG too big: {}", r.svg.len());
        assert!(start.elapsed().as_secs() < 20);
    }

    #[test]
    fn thinning_keeps_extremes_and_budget() {
        let pts = (0..100_000).map(|i| (i as f64, if i == 54_321 { 99.0 } else { (i % 7) as f64 }));
        let segs = polylines(pts, MAX_POINTS);
        let total: usize = segs.iter().map(Vec::len).sum();
        assert!(total <= MAX_POINTS + 2, "{total}");
        assert!(segs.iter().flatten().any(|p| p.1 == 99.0));
        // Gaps at non-finite values.
        let pts = [(0.0, 1.0), (1.0, f64::NAN), (2.0, 2.0), (3.0, 3.0)];
        let segs = polylines(pts.into_iter(), MAX_POINTS);
        assert_eq!(segs, vec![vec![(0.0, 1.0)], vec![(2.0, 2.0), (3.0, 3.0)]]);
    }

    #[test]
    fn axis_ranges_are_never_empty() {
        for s in [
            Span::new(),
            Span::of([5.0]),
            Span::of([0.0, 0.0]),
            Span::of([1e300, -1e300]),
            Span::of([1e-300]),
            Span::of([f64::NAN, f64::INFINITY]),
        ] {
            let (a, b) = s.axis(0.05, (0.0, 1.0));
            assert!(a.is_finite() && b.is_finite() && b > a, "{a} {b}");
        }
        let f = tick_format(0.0, 1.0);
        assert_eq!(f(&0.25), "0.25");
        assert_eq!(f(&1e-17), "0");
        assert_eq!(tick_format(0.0, 500.0)(&200.0), "200");
        assert_eq!(tick_format(0.0, 5e7)(&2e7), "2.00e7");
    }

    /// Text contents of all `<text>` elements of an SVG document.
    fn svg_texts(svg: &str) -> Vec<String> {
        svg.split("<text")
            .skip(1)
            .filter_map(|chunk| {
                let body = chunk.split_once('>')?.1;
                Some(body.split_once("</text>")?.0.trim().to_string())
            })
            .collect()
    }

    #[test]
    fn raster_lines_have_no_corner_spikes() {
        // A big jump followed by a one-pixel step back: stroking this as one wide polyline makes
        // a long spike at the inner corner. Every painted pixel must stay near the path.
        let (w, h) = (400u32, 300u32);
        let mut buf = vec![255u8; (w * h * 3) as usize];
        let path = [
            (200.0, 179.0),
            (276.0, 179.0),
            (277.0, 117.0),
            (277.0, 118.0),
            (350.0, 118.0),
        ];
        let mapped: Vec<(i32, i32)> = {
            let root = BitMapBackend::with_buffer(&mut buf, (w, h)).into_drawing_area();
            let area = root.apply_coord_spec(Cart::new(0.0..400.0, 0.0..300.0, (0..400, 0..300)));
            Pen { raster: true }
                .line(&area, path.iter().copied(), RGBColor(255, 0, 0), false)
                .unwrap();
            root.present().unwrap();
            path.iter().map(|p| area.map_coordinate(p)).collect()
        };
        let (lo, hi) = mapped
            .iter()
            .fold((i32::MAX, i32::MIN), |(a, b), p| (a.min(p.1), b.max(p.1)));
        assert!(hi - lo > 50, "the test path must contain the jump");
        for (i, px) in buf.chunks(3).enumerate() {
            let y = (i as u32 / w) as i32;
            if px[0] > 200 && px[1] < 80 {
                assert!(y >= lo - 3 && y <= hi + 3, "stray line pixel at row {y}");
            }
        }
        assert!(buf.chunks(3).filter(|p| p[0] > 200 && p[1] < 80).count() > 100);
    }

    #[test]
    fn dashes_alternate_along_the_path() {
        let pieces = dash_pieces(&[(0, 0), (100, 0)], 9.0, 6.0);
        assert_eq!(pieces.len(), 7);
        for piece in &pieces {
            let len = piece.last().unwrap().0 - piece[0].0;
            assert!((1..=9).contains(&len), "{piece:?}");
        }
        assert_eq!(pieces[1][0], (15, 0));
        // Dashes follow corners.
        let pieces = dash_pieces(&[(0, 0), (5, 0), (5, 20)], 9.0, 6.0);
        assert_eq!(pieces[0], vec![(0, 0), (5, 0), (5, 4)]);
    }

    #[test]
    fn event_intervals_are_clipped_and_at_least_one_trace_interval_wide() {
        let x = (0.0, 100.0);
        let iv = |s, e| event_interval(&event(EventKind::Overcharge, s, e), 1.0, x, 0.1);
        assert_eq!(iv(10.0, 20.0), Some((10.0, 20.0)));
        assert_eq!(iv(50.0, f64::INFINITY), Some((50.0, 100.0)));
        assert_eq!(iv(f64::NAN, 5.0), None);
        assert_eq!(iv(200.0, 300.0), None);
        assert_eq!(iv(-50.0, 1e9), Some((0.0, 100.0)));
        let (a, b) = iv(100.0, 100.0).unwrap();
        assert!((b - a - 0.1).abs() < 1e-12 && b <= 100.0);
        let (a, b) = iv(30.0, f64::NAN).unwrap();
        assert!(a < 30.0 && b > 30.0 && b - a <= 0.1 + 1e-12);
    }

    /// x-extents, px, of the SVG rectangles filled with `fill` (e.g. `#707076`).
    fn svg_rects(svg: &str, fill: &str) -> Vec<(f64, f64)> {
        let attr = |r: &str, name: &str| -> f64 {
            let k = r.find(&format!(" {name}=\"")).expect("attribute") + name.len() + 3;
            r[k..].split('"').next().unwrap().parse().expect("number")
        };
        svg.split("<rect")
            .skip(1)
            .map(|r| r.split('>').next().unwrap_or(""))
            .filter(|r| r.contains(&format!("fill=\"{fill}\"")))
            .map(|r| (attr(r, "x"), attr(r, "x") + attr(r, "width")))
            .collect()
    }

    #[test]
    fn regulation_bands_cover_their_periods_within_one_trace_interval() {
        // A one-minute trace on a 0.1-s grid, a 50-ms dropout and a 15-s one.
        let tr = trace(601, 0.1);
        let events = [
            event(EventKind::RegulationLoss, 10.0, 10.05),
            event(EventKind::RegulationLoss, 20.0, 35.0),
        ];
        let r = session_chart(&tr, &events, "Bands").unwrap();
        // The top panel's plotting area maps 0 … 60 s onto its background rectangle.
        let bg = svg_rects(&r.svg, "#FBFAF6")[0];
        let px = |t: f64| bg.0 + t / 60.0 * (bg.1 - bg.0);
        let per_interval = px(0.1) - px(0.0);
        let bands: Vec<(f64, f64)> = svg_rects(&r.svg, "#707076")
            .into_iter()
            .filter(|&(a, b)| a >= bg.0 - 0.5 && b <= bg.1 + 0.5)
            .collect();
        for (start, end) in [(10.0_f64, 10.05_f64), (20.0, 35.0)] {
            // Each panel draws it; every copy within a trace interval (and the SVG's whole-pixel
            // rounding) of the period, never the old fixed sliver of the axis.
            let copies: Vec<&(f64, f64)> = bands
                .iter()
                .filter(|(a, b)| (a - px(start)).abs() <= per_interval + 1.0 && *b > *a)
                .collect();
            assert_eq!(copies.len(), 4, "{start} … {end} s: {bands:?}");
            for (a, b) in copies {
                assert!(
                    (a - px(start)).abs() <= per_interval + 1.0,
                    "{a} vs {}",
                    px(start)
                );
                assert!(
                    (b - px(end.max(start + 0.1))).abs() <= per_interval + 1.0,
                    "{b} vs {}",
                    px(end)
                );
            }
        }
    }

    #[test]
    fn the_session_chart_shows_the_charger_state_critical_power_and_w_prime() {
        let mut tr = trace(600, 1.0);
        for r in tr.rows.iter_mut().skip(300) {
            r.mode = Mode::Cv;
        }
        let marks = SessionMarks {
            critical_power_w: Some(48.0),
            w_prime_j: Some(15000.0),
        };
        let r = session_chart_with(&tr, &[], "Marks", &marks).unwrap();
        let texts = svg_texts(&r.svg);
        for want in [
            "state: CC",
            "state: CV / absorption",
            "critical power 48 W",
            "W′ balance [kJ]",
            "W′ balance (right axis)",
        ] {
            assert!(texts.iter().any(|t| t == want), "{want} missing: {texts:?}");
        }
        // The state strip: both states' colours on the bitmap.
        assert!(count_near(&r.png, OLIVE, 2) > 100);
        // Without marks: no line and no right axis for them.
        let plain = session_chart(&tr, &[], "Plain").unwrap();
        assert!(!plain.svg.contains("critical power") && !plain.svg.contains("W′"));
    }

    #[test]
    fn histograms_use_enough_bins_and_mark_their_threshold() {
        // A Monte Carlo figure's usual shape: most runs in a narrow cluster, a few far below it.
        // Freedman–Diaconis bins follow the cluster's width (Sturges' rule would give 9 bins
        // over the whole range, all the cluster in one).
        let v: Vec<f64> = (0..200)
            .map(|i| {
                if i < 190 {
                    0.95 + 0.01 * (i as f64).sin()
                } else {
                    0.1 + 0.07 * (i - 190) as f64
                }
            })
            .collect();
        let (_, counts) = bin_samples(&v).unwrap();
        assert!(counts.len() > 9, "{} bins", counts.len());
        assert_eq!(counts.iter().sum::<u32>(), 200);
        let m: Vec<(&str, &str, &[f64])> = vec![("in-regulation fraction", "1", &v)];
        let r = histogram_chart_marked(&m, &[Some(0.9)], "Marked").unwrap();
        let texts = svg_texts(&r.svg);
        assert!(texts.iter().any(|t| t == "threshold"), "{texts:?}");
        // A fraction has no unit: the caption does not end in "1".
        assert!(
            texts
                .iter()
                .any(|t| t.starts_with("in-regulation fraction: n = 200, mean")
                    && !t.ends_with(" 1")),
            "{texts:?}"
        );
    }

    #[test]
    fn the_soc_axis_follows_the_data() {
        // 30 % → 36 % (the row helper's SOC rises 1 % every 40 s): the axis spans about those
        // 6 points, not 0 … 100 %.
        let tr = trace(2401, 0.1);
        let r = session_chart(&tr, &[], "SOC").unwrap();
        let texts = svg_texts(&r.svg);
        let ticks: Vec<f64> = texts.iter().filter_map(|t| t.parse::<f64>().ok()).collect();
        // The right axis's ticks, in order: 30, 32, 34, 36 (a 0 … 100 % axis would tick 0, 20,
        // 40 …).
        assert!(
            ticks.windows(4).any(|w| w == [30.0, 32.0, 34.0, 36.0]),
            "{ticks:?}"
        );
        // A flat SOC still gets a readable span (at least 5 points around it).
        let mut flat = trace(100, 1.0);
        for r in &mut flat.rows {
            r.soc = 0.5;
        }
        let r = session_chart(&flat, &[], "Flat SOC").unwrap();
        let ticks: Vec<f64> = svg_texts(&r.svg)
            .iter()
            .filter_map(|t| t.parse::<f64>().ok())
            .collect();
        assert!(
            ticks
                .windows(3)
                .any(|w| w[0] < w[1] && w[1] < w[2] && w[0] >= 47.0 && w[2] <= 53.0),
            "{ticks:?}"
        );
    }

    #[test]
    fn compare_chart_renders() {
        let a = trace(600, 1.0);
        let b = trace(900, 1.0);
        let runs = vec![
            ("steady 70 rpm".to_string(), &a),
            ("sprint".to_string(), &b),
        ];
        let r = compare_chart(&runs, "Cadence plans").unwrap();
        check(&r, 1200, 760, "Cadence plans");
        assert!(r.svg.contains("steady 70 rpm") && r.svg.contains("sprint"));
        assert!(
            count_near(&r.png, BRICK, 12) > 200,
            "second run colour missing"
        );

        let empty = Trace::default();
        check(&compare_chart(&[], "None").unwrap(), 1200, 760, "None");
        let runs = vec![("void".to_string(), &empty)];
        check(&compare_chart(&runs, "Void").unwrap(), 1200, 760, "Void");
        let many: Vec<(String, &Trace)> = (0..40).map(|i| (format!("run {i}"), &a)).collect();
        let r = compare_chart(&many, "Many").unwrap();
        check(&r, 1200, 760, "Many");
        assert!(r.svg.contains("more"));
    }

    #[test]
    fn sweep_chart_renders() {
        let values = [40.0, 50.0, 60.0, 70.0, 80.0];
        let charge = [0.2, 0.35, 0.5, 0.55, 0.52];
        let inreg = [0.1, 0.6, 0.9, 1.0, 1.0];
        let power = [20.0, 32.0, 45.0, 58.0, 75.0];
        let s = SweepSeries {
            param: "cadence_rpm",
            values: &values,
            charge_ah: &charge,
            in_regulation: &inreg,
            mean_power_w: &power,
        };
        let r = sweep_chart(&s, "Cadence sweep").unwrap();
        check(&r, 1000, 700, "Cadence sweep");
        assert!(r.svg.contains("cadence_rpm"));
        assert!(count_near(&r.png, OLIVE, 10) > 100);

        let none = SweepSeries {
            param: "",
            values: &[],
            charge_ah: &[],
            in_regulation: &[],
            mean_power_w: &[],
        };
        check(
            &sweep_chart(&none, "Empty sweep").unwrap(),
            1000,
            700,
            "Empty sweep",
        );
        let odd = SweepSeries {
            param: "gear",
            values: &[3.0, f64::NAN, 1.0, 2.0],
            charge_ah: &[1.0, 1.0, f64::INFINITY],
            in_regulation: &[0.5, 0.5, 0.5, 0.5],
            mean_power_w: &[1e200, 2.0, 3.0, 4.0],
        };
        check(
            &sweep_chart(&odd, "Odd sweep").unwrap(),
            1000,
            700,
            "Odd sweep",
        );
        let one = SweepSeries {
            param: "x",
            values: &[1.0],
            charge_ah: &[1.0],
            in_regulation: &[1.0],
            mean_power_w: &[1.0],
        };
        check(
            &sweep_chart(&one, "One point").unwrap(),
            1000,
            700,
            "One point",
        );
    }

    #[test]
    fn histogram_chart_renders() {
        let charge: Vec<f64> = (0..200)
            .map(|i| 1.0 + ((i * 37) % 101) as f64 / 100.0)
            .collect();
        let inreg: Vec<f64> = (0..200).map(|i| ((i * 13) % 50) as f64 / 50.0).collect();
        let work: Vec<f64> = (0..200)
            .map(|i| 50_000.0 + (i * 91 % 200) as f64 * 100.0)
            .collect();
        let metrics: Vec<(&str, &str, &[f64])> = vec![
            ("charge delivered", "Ah", &charge),
            ("in-regulation fraction", "-", &inreg),
            ("operator work", "J", &work),
        ];
        let r = histogram_chart(&metrics, "Monte Carlo").unwrap();
        check(&r, 1000, 700, "Monte Carlo");
        assert!(r.svg.contains("operator work [J]"));
        assert!(r.svg.contains("n = 200"));

        let same = [2.5; 30];
        let odd = [f64::NAN, 1.0, f64::INFINITY, -1e300, 1e300];
        let metrics: Vec<(&str, &str, &[f64])> = vec![
            ("constant", "V", &same),
            ("empty", "A", &[]),
            ("odd", "", &odd),
            ("single", "W", &[3.0]),
        ];
        check(
            &histogram_chart(&metrics, "Edges").unwrap(),
            1000,
            700,
            "Edges",
        );
        check(
            &histogram_chart(&[], "Nothing").unwrap(),
            1000,
            700,
            "Nothing",
        );
    }

    #[test]
    fn binning_follows_sturges_and_handles_constants() {
        let v: Vec<f64> = (0..100).map(f64::from).collect();
        let (_, counts) = bin_samples(&v).unwrap();
        assert_eq!(counts.len(), 8);
        assert_eq!(counts.iter().sum::<u32>(), 100);
        let (range, counts) = bin_samples(&[4.0; 16]).unwrap();
        assert!(range.0 < 4.0 && range.1 > 4.0);
        assert_eq!(counts.len() % 2, 1);
        assert_eq!(counts[counts.len() / 2], 16);
        assert!(bin_samples(&[]).is_none());
    }
}
