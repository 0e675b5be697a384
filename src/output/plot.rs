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

pub mod design;
use crate::analysis::events::{Event, EventKind};
use crate::analysis::trace::{Trace, TraceRow};

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

const TEAL: RGBColor = RGBColor(16, 100, 110);
const AMBER: RGBColor = RGBColor(204, 132, 10);
const SLATE: RGBColor = RGBColor(70, 84, 104);
const BRICK: RGBColor = RGBColor(160, 56, 40);
const OLIVE: RGBColor = RGBColor(104, 122, 34);
const PLUM: RGBColor = RGBColor(118, 68, 126);
const COBALT: RGBColor = RGBColor(42, 90, 158);
const UMBER: RGBColor = RGBColor(126, 86, 50);

/// Colours given to overlaid runs, in order.
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
    render(&SessionFig {
        trace,
        events,
        title,
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

/// One histogram per metric given as `(name, unit, samples)`; the bin count follows Sturges' rule.
pub fn histogram_chart(
    metrics: &[(&str, &str, &[f64])],
    title: &str,
) -> Result<Rendered, PlotError> {
    render(&HistogramFig { metrics, title })
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

fn render<F: Figure>(fig: &F) -> Result<Rendered, PlotError> {
    font::ensure_registered().map_err(PlotError::Font)?;
    let (w, h) = fig.size();
    let outcome = catch_unwind(AssertUnwindSafe(|| -> Result<Rendered, PlotError> {
        let mut buf = vec![0u8; w as usize * h as usize * 3];
        {
            let root = BitMapBackend::with_buffer(&mut buf, (w, h)).into_drawing_area();
            fig.draw(&root, Pen { raster: true })?;
            root.present().map_err(de)?;
        }
        let png = encode_png(&buf, w, h)?;
        let mut svg = String::new();
        {
            let root = SVGBackend::with_string(&mut svg, (w, h)).into_drawing_area();
            fig.draw(&root, Pen { raster: false })?;
            root.present().map_err(de)?;
        }
        Ok(Rendered { png, svg })
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
                    for w in piece.windows(2) {
                        px_area
                            .draw(&PathElement::new(vec![w[0], w[1]], style))
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
// Session chart.

struct SessionFig<'a> {
    trace: &'a Trace,
    events: &'a [Event],
    title: &'a str,
}

/// Panel (0-based, top to bottom) on whose top edge an alert kind is drawn.
fn alert_panel(kind: EventKind) -> Option<usize> {
    match kind {
        EventKind::Overcharge
        | EventKind::InputOvervoltage
        | EventKind::Lockout
        | EventKind::DeviceCutoff
        | EventKind::ModelRange
        | EventKind::ThermalFoldback
        | EventKind::MissedEndOfCharge => Some(1),
        EventKind::BatteryOvertemp | EventKind::ChargeTempWindow | EventKind::TemperatureRise => {
            Some(2)
        }
        EventKind::OperatorOverload => Some(3),
        EventKind::RegulationLoss | EventKind::ChargeComplete => None,
    }
}

fn alert_label(kind: EventKind) -> &'static str {
    match kind {
        EventKind::Overcharge => "overcharge",
        EventKind::InputOvervoltage => "input over-voltage",
        EventKind::Lockout => "UVLO lockout",
        EventKind::BatteryOvertemp => "battery too hot",
        EventKind::ChargeTempWindow => "temp. window hold",
        EventKind::OperatorOverload => "operator overload",
        EventKind::RegulationLoss => "regulation lost",
        EventKind::ChargeComplete => "charge complete",
        EventKind::DeviceCutoff => "device cut off",
        EventKind::ModelRange => "model range",
        EventKind::ThermalFoldback => "thermal foldback",
        EventKind::MissedEndOfCharge => "missed end of charge",
        EventKind::TemperatureRise => "battery heating fast",
    }
}

fn alert_color(kind: EventKind) -> RGBColor {
    match kind {
        EventKind::Overcharge => RGBColor(176, 34, 106),
        EventKind::InputOvervoltage => RGBColor(222, 104, 32),
        EventKind::Lockout => RGBColor(92, 58, 158),
        EventKind::BatteryOvertemp => RGBColor(196, 40, 36),
        EventKind::ChargeTempWindow => COBALT,
        EventKind::OperatorOverload => RGBColor(138, 30, 34),
        EventKind::RegulationLoss => BAND,
        EventKind::ChargeComplete => OLIVE,
        EventKind::DeviceCutoff => RGBColor(20, 140, 120),
        EventKind::ModelRange => RGBColor(120, 120, 120),
        EventKind::ThermalFoldback => RGBColor(168, 84, 20),
        EventKind::MissedEndOfCharge => RGBColor(150, 20, 60),
        EventKind::TemperatureRise => RGBColor(214, 70, 40),
    }
}

/// Time interval of an event in axis units, clipped to the x range and at least a sliver wide.
fn event_interval(e: &Event, div: f64, x: (f64, f64)) -> Option<(f64, f64)> {
    if !e.start_s.is_finite() {
        return None;
    }
    let mut s = tame(e.start_s) / div;
    // An open-ended period (end = +inf) lasts to the end of the trace; a bad end makes an instant.
    let mut t = if e.end_s == f64::INFINITY {
        x.1
    } else if e.end_s.is_finite() && e.end_s >= e.start_s {
        tame(e.end_s) / div
    } else {
        s
    };
    if t < x.0 || s > x.1 {
        return None;
    }
    let min_w = (x.1 - x.0) * 0.004;
    if t - s < min_w {
        let c = 0.5 * (s + t);
        s = c - 0.5 * min_w;
        t = c + 0.5 * min_w;
        if s < x.0 {
            (s, t) = (x.0, x.0 + min_w);
        } else if t > x.1 {
            (s, t) = (x.1 - min_w, x.1);
        }
    }
    Some((s.max(x.0), t.min(x.1)))
}

/// Extends a y range upwards to make room for `lanes` alert lanes; returns (range, lane height).
fn with_lanes(y: (f64, f64), lanes: usize) -> ((f64, f64), f64) {
    let w = y.1 - y.0;
    let lane_h = w * LANE_FRAC;
    if lanes == 0 {
        (y, lane_h)
    } else {
        ((y.0, y.1 + lane_h * lanes as f64 + w * 0.02), lane_h)
    }
}

/// The same fractional extension applied to a secondary range.
fn stretch(y2: (f64, f64), before: (f64, f64), after: (f64, f64)) -> (f64, f64) {
    let f = (after.1 - after.0) / (before.1 - before.0);
    (y2.0, y2.0 + (y2.1 - y2.0) * f)
}

impl Figure for SessionFig<'_> {
    fn size(&self) -> (u32, u32) {
        (1200, 1000)
    }

    fn draw<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
        pen: Pen,
    ) -> Result<(), PlotError> {
        root.fill(&WHITE).map_err(de)?;
        let body = draw_title(root, self.title)?;
        let rows = &self.trace.rows;
        let time = TimeAxis::of(rows.iter().map(|r| r.time_s));
        let (x, div, x_desc) = (time.range, time.div, time.desc);
        let t = |r: &TraceRow| r.time_s / div;

        // Alert lanes per panel.
        let mut lanes: [Vec<EventKind>; 4] = Default::default();
        let kinds: BTreeSet<EventKind> = self
            .events
            .iter()
            .filter(|e| event_interval(e, div, x).is_some())
            .map(|e| e.kind)
            .collect();
        for k in kinds {
            if let Some(p) = alert_panel(k) {
                lanes[p].push(k);
            }
        }
        let reg_bands: Vec<(f64, f64)> = self
            .events
            .iter()
            .filter(|e| e.kind == EventKind::RegulationLoss)
            .filter_map(|e| event_interval(e, div, x))
            .collect();
        let completes: Vec<f64> = self
            .events
            .iter()
            .filter(|e| e.kind == EventKind::ChargeComplete)
            .filter_map(|e| event_interval(e, div, x).map(|(a, _)| a))
            .collect();

        // Data ranges.
        let mut s_rpm = Span::of(rows.iter().flat_map(|r| [r.crank_rpm, r.target_rpm]));
        s_rpm.add(0.0);
        let s_volt = Span::of(
            rows.iter()
                .flat_map(|r| [r.emf_v, r.input_v, r.battery_v, r.charge_limit_v, r.bus_v]),
        );
        let mut s_amp = Span::of(rows.iter().map(|r| r.battery_current_a));
        s_amp.add(0.0);
        let mut s_soc = Span::of(rows.iter().map(|r| r.soc * 100.0));
        s_soc.add(0.0);
        s_soc.add(100.0);
        let mut s_pow = Span::of(rows.iter().map(|r| r.operator_power_w));
        s_pow.add(0.0);
        let base_y = [
            s_rpm.axis(0.06, (0.0, 1.0)),
            s_volt.axis(0.06, (0.0, 1.0)),
            s_amp.axis(0.08, (0.0, 1.0)),
            s_pow.axis(0.06, (0.0, 1.0)),
        ];
        let soc_base = s_soc.axis(0.0, (0.0, 100.0));

        let texts = [
            PanelText {
                caption: "Crank cadence",
                y_desc: "cadence [rpm]",
                x_desc: None,
                y2_desc: None,
            },
            PanelText {
                caption: "Voltages",
                y_desc: "voltage [V]",
                x_desc: None,
                y2_desc: None,
            },
            PanelText {
                caption: "Battery current and state of charge",
                y_desc: "current [A]",
                x_desc: None,
                y2_desc: Some("SOC [%]"),
            },
            PanelText {
                caption: "Operator power",
                y_desc: "power [W]",
                x_desc: Some(x_desc),
                y2_desc: None,
            },
        ];

        let (w, _) = body.dim_in_pixel();
        let panels = body.split_evenly((4, 1));
        for (p, panel) in panels.iter().enumerate() {
            let (plot_area, legend_area) = panel.split_horizontally(w - LEGEND_W);
            let (y, lane_h) = with_lanes(base_y[p], lanes[p].len());
            let y2 = if p == 2 {
                stretch(soc_base, base_y[p], y)
            } else {
                y
            };
            let ax = PanelAxes {
                x,
                y,
                y2,
                x_area: if p == 3 { 46 } else { 28 },
                right_area: 62,
                y_counts: false,
            };
            let chart = build_panel(&plot_area, &texts[p], &ax)?;
            let area = chart.plotting_area();
            let mut legend = Vec::new();

            // Lane `i` counted from the top edge: (bottom, top) in data units.
            let lane_box = |i: usize| {
                let top = y.1 - lane_h * i as f64;
                (top - lane_h * 0.85, top - lane_h * 0.15)
            };
            for i in 0..lanes[p].len() {
                let (lo, hi) = lane_box(i);
                area.draw(&Rectangle::new([(x.0, lo), (x.1, hi)], LANE_TRACK.filled()))
                    .map_err(de)?;
            }
            for &(a, b) in &reg_bands {
                area.draw(&Rectangle::new(
                    [(a, y.0), (b, y.1)],
                    BAND.mix(BAND_ALPHA).filled(),
                ))
                .map_err(de)?;
            }
            for (i, &k) in lanes[p].iter().enumerate() {
                let (lo, hi) = lane_box(i);
                for e in self.events.iter().filter(|e| e.kind == k) {
                    if let Some((a, b)) = event_interval(e, div, x) {
                        area.draw(&Rectangle::new([(a, lo), (b, hi)], alert_color(k).filled()))
                            .map_err(de)?;
                    }
                }
            }

            match p {
                0 => {
                    pen.line(area, rows.iter().map(|r| (t(r), r.crank_rpm)), TEAL, false)?;
                    pen.line(area, rows.iter().map(|r| (t(r), r.target_rpm)), AMBER, true)?;
                    legend.push(item("crank cadence", Glyph::Line(TEAL)));
                    legend.push(item("target cadence", Glyph::Dashed(AMBER)));
                    if !reg_bands.is_empty() {
                        legend.push(item("regulation lost", Glyph::Band(BAND, BAND_ALPHA)));
                    }
                    if rows.is_empty() {
                        draw_note(area, "no trace samples")?;
                    }
                }
                1 => {
                    pen.line(area, rows.iter().map(|r| (t(r), r.emf_v)), OLIVE, false)?;
                    pen.line(area, rows.iter().map(|r| (t(r), r.input_v)), TEAL, false)?;
                    pen.line(area, rows.iter().map(|r| (t(r), r.battery_v)), SLATE, false)?;
                    pen.line(
                        area,
                        rows.iter().map(|r| (t(r), r.charge_limit_v)),
                        BRICK,
                        true,
                    )?;
                    let usb = rows.iter().any(|r| (r.bus_v - r.battery_v).abs() > 1e-9);
                    if usb {
                        pen.line(area, rows.iter().map(|r| (t(r), r.bus_v)), UMBER, false)?;
                    }
                    legend.push(item("generator EMF", Glyph::Line(OLIVE)));
                    legend.push(item("converter input", Glyph::Line(TEAL)));
                    if usb {
                        legend.push(item("USB bus", Glyph::Line(UMBER)));
                    }
                    legend.push(item("battery terminal", Glyph::Line(SLATE)));
                    legend.push(item("charge limit", Glyph::Dashed(BRICK)));
                }
                2 => {
                    let zero = 0.0_f64.clamp(y.0, y.1);
                    area.draw(&PathElement::new(
                        vec![(x.0, zero), (x.1, zero)],
                        AXIS.stroke_width(1),
                    ))
                    .map_err(de)?;
                    pen.line(
                        chart.secondary_plotting_area(),
                        rows.iter().map(|r| (t(r), r.soc * 100.0)),
                        AMBER,
                        false,
                    )?;
                    pen.line(
                        area,
                        rows.iter().map(|r| (t(r), r.battery_current_a)),
                        TEAL,
                        false,
                    )?;
                    for &c in &completes {
                        area.draw(&DashedPathElement::new(
                            [(c, y.0), (c, y.1)],
                            5,
                            4,
                            alert_color(EventKind::ChargeComplete).stroke_width(2),
                        ))
                        .map_err(de)?;
                    }
                    legend.push(item("current (left axis)", Glyph::Line(TEAL)));
                    legend.push(item("SOC (right axis)", Glyph::Line(AMBER)));
                    if !completes.is_empty() {
                        legend.push(item(
                            "charge complete",
                            Glyph::Dashed(alert_color(EventKind::ChargeComplete)),
                        ));
                    }
                }
                _ => {
                    let base = 0.0_f64.clamp(y.0, y.1);
                    draw_fill(
                        area,
                        rows.iter().map(|r| (t(r), r.operator_power_w)),
                        base,
                        PLUM,
                    )?;
                    pen.line(
                        area,
                        rows.iter().map(|r| (t(r), r.operator_power_w)),
                        PLUM,
                        false,
                    )?;
                    legend.push(item("operator power", Glyph::Line(PLUM)));
                }
            }
            for &k in &lanes[p] {
                legend.push(item(alert_label(k), Glyph::Lane(alert_color(k))));
            }
            draw_legend(&legend_area, &legend, 26)?;
        }
        Ok(())
    }
}

// ---------------------------------------------------------------------------------------------
// Comparison chart.

struct CompareFig<'a> {
    runs: &'a [(String, &'a Trace)],
    title: &'a str,
}

impl Figure for CompareFig<'_> {
    fn size(&self) -> (u32, u32) {
        (1000, 700)
    }

    fn draw<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
        pen: Pen,
    ) -> Result<(), PlotError> {
        root.fill(&WHITE).map_err(de)?;
        let body = draw_title(root, self.title)?;
        let (w, _) = body.dim_in_pixel();
        let (charts, legend_area) = body.split_horizontally(w - LEGEND_W);

        let all_rows = || self.runs.iter().flat_map(|(_, tr)| tr.rows.iter());
        let time = TimeAxis::of(all_rows().map(|r| r.time_s));
        let (x, div, x_desc) = (time.range, time.div, time.desc);
        let mut s_soc = Span::of(all_rows().map(|r| r.soc * 100.0));
        s_soc.add(0.0);
        s_soc.add(100.0);
        let mut s_rpm = Span::of(all_rows().map(|r| r.crank_rpm));
        s_rpm.add(0.0);

        let panels = charts.split_evenly((2, 1));
        let specs = [
            (
                PanelText {
                    caption: "State of charge",
                    y_desc: "SOC [%]",
                    x_desc: None,
                    y2_desc: None,
                },
                s_soc.axis(0.0, (0.0, 100.0)),
            ),
            (
                PanelText {
                    caption: "Crank cadence",
                    y_desc: "cadence [rpm]",
                    x_desc: Some(x_desc),
                    y2_desc: None,
                },
                s_rpm.axis(0.06, (0.0, 1.0)),
            ),
        ];
        for (p, (panel, (text, y))) in panels.iter().zip(specs.iter()).enumerate() {
            let ax = PanelAxes {
                x,
                y: *y,
                y2: *y,
                x_area: if p == 1 { 46 } else { 28 },
                right_area: 16,
                y_counts: false,
            };
            let chart = build_panel(panel, text, &ax)?;
            let area = chart.plotting_area();
            for (i, (_, tr)) in self.runs.iter().enumerate() {
                let color = RUN_CYCLE[i % RUN_CYCLE.len()];
                let dashed = (i / RUN_CYCLE.len()) % 2 == 1;
                let value = |r: &TraceRow| if p == 0 { r.soc * 100.0 } else { r.crank_rpm };
                pen.line(
                    area,
                    tr.rows.iter().map(|r| (r.time_s / div, value(r))),
                    color,
                    dashed,
                )?;
            }
            if p == 0 && self.runs.iter().all(|(_, tr)| tr.rows.is_empty()) {
                draw_note(
                    area,
                    if self.runs.is_empty() {
                        "no runs"
                    } else {
                        "no trace samples"
                    },
                )?;
            }
        }

        let items: Vec<LegendItem> = self
            .runs
            .iter()
            .enumerate()
            .map(|(i, (label, _))| {
                let color = RUN_CYCLE[i % RUN_CYCLE.len()];
                let glyph = if (i / RUN_CYCLE.len()) % 2 == 1 {
                    Glyph::Dashed(color)
                } else {
                    Glyph::Line(color)
                };
                item(label.as_str(), glyph)
            })
            .collect();
        let heading = text_style(14.0)
            .color(&MUTED)
            .pos(Pos::new(HPos::Left, VPos::Center));
        legend_area
            .draw_text("runs", &heading, (12, 18))
            .map_err(de)?;
        draw_legend(&legend_area, &items, 30)
    }
}

// ---------------------------------------------------------------------------------------------
// Sweep chart.

/// One panel of the sweep chart.
struct SweepPanel<'a> {
    ys: &'a [f64],
    color: RGBColor,
    caption: &'a str,
    y_desc: &'a str,
    /// A 0 … 1 quantity: the axis always shows the whole unit interval.
    fraction: bool,
}

struct SweepFig<'a> {
    series: &'a SweepSeries<'a>,
    title: &'a str,
    /// The swept values when they are words: `values` are then their slot numbers 0, 1, …
    categories: Option<&'a [String]>,
}

impl Figure for SweepFig<'_> {
    fn size(&self) -> (u32, u32) {
        (1000, 700)
    }

    fn draw<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
        pen: Pen,
    ) -> Result<(), PlotError> {
        root.fill(&WHITE).map_err(de)?;
        let body = draw_title(root, self.title)?;
        let (w, _) = body.dim_in_pixel();
        let (charts, legend_area) = body.split_horizontally(w - LEGEND_W);
        let s = self.series;
        let n = s
            .values
            .len()
            .min(s.charge_ah.len())
            .min(s.in_regulation.len())
            .min(s.mean_power_w.len());
        let mut order: Vec<usize> = (0..n).filter(|&i| s.values[i].is_finite()).collect();
        order.sort_by(|&a, &b| s.values[a].total_cmp(&s.values[b]));
        let x = match self.categories {
            Some(c) => (-0.5, c.len().max(1) as f64 - 0.5),
            None => Span::of(order.iter().map(|&i| s.values[i])).axis(0.03, (0.0, 1.0)),
        };
        let param = if s.param.trim().is_empty() {
            "parameter"
        } else {
            s.param
        };

        let columns = [
            SweepPanel {
                ys: s.charge_ah,
                color: TEAL,
                caption: "Charge delivered",
                y_desc: "charge [Ah]",
                fraction: false,
            },
            SweepPanel {
                ys: s.in_regulation,
                color: OLIVE,
                caption: "Time in regulation",
                y_desc: "fraction [-]",
                fraction: true,
            },
            SweepPanel {
                ys: s.mean_power_w,
                color: PLUM,
                caption: "Mean operator power",
                y_desc: "power [W]",
                fraction: false,
            },
        ];
        let panels = charts.split_evenly((3, 1));
        for (p, (panel, col)) in panels.iter().zip(columns.iter()).enumerate() {
            let (ys, color) = (col.ys, col.color);
            let mut span = Span::of(order.iter().map(|&i| ys[i]));
            span.add(0.0);
            if col.fraction {
                span.add(1.0);
            }
            let y = span.axis(0.06, (0.0, 1.0));
            let ax = PanelAxes {
                x,
                y,
                y2: y,
                x_area: if p == 2 { 46 } else { 28 },
                right_area: 16,
                y_counts: false,
            };
            let text = PanelText {
                caption: col.caption,
                y_desc: col.y_desc,
                x_desc: if p == 2 { Some(param) } else { None },
                y2_desc: None,
            };
            let area = match self.categories {
                Some(c) => {
                    let chart = design::panel(
                        panel,
                        col.caption,
                        x,
                        y,
                        text.x_desc.unwrap_or(""),
                        col.y_desc,
                        true,
                    )?;
                    design::label_categories(root, &chart, c, y)?;
                    chart.plotting_area().clone()
                }
                None => build_panel(panel, &text, &ax)?.plotting_area().clone(),
            };
            let area = &area;
            let pts: Vec<(f64, f64)> = order
                .iter()
                .map(|&i| (s.values[i], ys[i]))
                .filter(|&(a, b)| a.is_finite() && b.is_finite())
                .map(|(a, b)| (tame(a), tame(b)))
                .collect();
            pen.line(area, pts.iter().copied(), color, false)?;
            let step = pts.len().div_ceil(400).max(1);
            for &pt in pts.iter().step_by(step) {
                area.draw(&Circle::new(pt, 4, color.filled())).map_err(de)?;
                area.draw(&Circle::new(pt, 4, WHITE.stroke_width(1)))
                    .map_err(de)?;
            }
            if p == 0 && pts.is_empty() {
                draw_note(area, "no sweep points")?;
            } else if col.fraction && pts.is_empty() {
                // Every point has a null fraction: a direct design regulates nothing.
                draw_note(area, "n/a: no converter regulates (direct)")?;
            }
        }
        let items = [
            item("charge delivered", Glyph::Marker(TEAL)),
            item("in-regulation fraction", Glyph::Marker(OLIVE)),
            item("mean operator power", Glyph::Marker(PLUM)),
        ];
        draw_legend(&legend_area, &items, 26)
    }
}

// ---------------------------------------------------------------------------------------------
// Histogram chart.

struct HistogramFig<'a> {
    metrics: &'a [(&'a str, &'a str, &'a [f64])],
    title: &'a str,
}

/// Histogram of the finite samples: (x range of the bins, bin counts).
fn bin_samples(finite: &[f64]) -> Option<((f64, f64), Vec<u32>)> {
    if finite.is_empty() {
        return None;
    }
    let span = Span::of(finite.iter().copied());
    let n = finite.len();
    let mut k = ((n as f64).log2().ceil() as usize + 1).clamp(1, 50);
    let degenerate = span.hi - span.lo <= span.lo.abs().max(span.hi.abs()) * 1e-9;
    if degenerate {
        k = k.max(5) | 1; // odd, so the single value sits in a narrow middle bin
    }
    let (lo, hi) = span.axis(0.0, (0.0, 1.0));
    let width = (hi - lo) / k as f64;
    let mut counts = vec![0u32; k];
    for &v in finite {
        let idx = (((v - lo) / width).floor().max(0.0) as usize).min(k - 1);
        counts[idx] += 1;
    }
    Some(((lo, hi), counts))
}

impl Figure for HistogramFig<'_> {
    fn size(&self) -> (u32, u32) {
        (1000, 700)
    }

    fn draw<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
        _pen: Pen,
    ) -> Result<(), PlotError> {
        root.fill(&WHITE).map_err(de)?;
        let body = draw_title(root, self.title)?;
        let (w, _) = body.dim_in_pixel();
        let (charts, legend_area) = body.split_horizontally(w - LEGEND_W);
        let m = self.metrics.len();
        let (rows, cols) = if m <= 3 {
            (m.max(1), 1)
        } else {
            let cols = ((m as f64).sqrt().ceil() as usize).max(2);
            (m.div_ceil(cols), cols)
        };
        let cells = charts.split_evenly((rows, cols));
        if m == 0 {
            let text = PanelText {
                caption: "No metrics",
                y_desc: "runs",
                x_desc: Some("value"),
                y2_desc: None,
            };
            let ax = PanelAxes {
                x: (0.0, 1.0),
                y: (0.0, 1.0),
                y2: (0.0, 1.0),
                x_area: 46,
                right_area: 16,
                y_counts: true,
            };
            let chart = build_panel(&cells[0], &text, &ax)?;
            draw_note(chart.plotting_area(), "nothing to show")?;
        }
        for (cell, &(name, unit, samples)) in cells.iter().zip(self.metrics.iter()) {
            let finite: Vec<f64> = samples
                .iter()
                .copied()
                .filter(|v| v.is_finite())
                .map(tame)
                .collect();
            let skipped = samples.len() - finite.len();
            let bins = bin_samples(&finite);
            let mean = if finite.is_empty() {
                f64::NAN
            } else {
                finite.iter().map(|v| v / finite.len() as f64).sum::<f64>()
            };
            let mut caption = format!("{name}: n = {}", finite.len());
            if mean.is_finite() {
                caption.push_str(&format!(", mean {}", fmt_value(mean)));
                if !unit.trim().is_empty() && unit != "-" {
                    caption.push_str(&format!(" {unit}"));
                }
            }
            if skipped > 0 {
                caption.push_str(&format!(" ({skipped} non-finite skipped)"));
            }
            let x_desc = with_unit(name, unit);
            let (x, max_count) = match &bins {
                Some(((lo, hi), counts)) => {
                    let pad = (hi - lo) * 0.03;
                    ((lo - pad, hi + pad), *counts.iter().max().unwrap_or(&1))
                }
                None => ((0.0, 1.0), 1),
            };
            let y = (0.0, (max_count.max(1) as f64) * 1.12);
            let ax = PanelAxes {
                x,
                y,
                y2: y,
                x_area: 46,
                right_area: 16,
                y_counts: true,
            };
            let text = PanelText {
                caption: &caption,
                y_desc: "runs",
                x_desc: Some(&x_desc),
                y2_desc: None,
            };
            let chart = build_panel(cell, &text, &ax)?;
            let area = chart.plotting_area();
            match &bins {
                Some(((lo, hi), counts)) => {
                    let bw = (hi - lo) / counts.len() as f64;
                    for (i, &c) in counts.iter().enumerate() {
                        if c == 0 {
                            continue;
                        }
                        let a = lo + bw * i as f64;
                        let rect = [(a, 0.0), (a + bw, c as f64)];
                        area.draw(&Rectangle::new(rect, TEAL.mix(0.78).filled()))
                            .map_err(de)?;
                        area.draw(&Rectangle::new(rect, WHITE.stroke_width(1)))
                            .map_err(de)?;
                    }
                    if mean.is_finite() {
                        area.draw(&DashedPathElement::new(
                            [(mean, 0.0), (mean, y.1)],
                            7,
                            5,
                            BRICK.stroke_width(2),
                        ))
                        .map_err(de)?;
                    }
                }
                None => draw_note(area, "no finite samples")?,
            }
        }
        let items = [
            item("runs per bin", Glyph::Band(TEAL, 0.78)),
            item("mean", Glyph::Dashed(BRICK)),
        ];
        draw_legend(&legend_area, &items, 26)
    }
}

// ---------------------------------------------------------------------------------------------

#[cfg(test)]
mod tests {
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
    fn event_intervals_are_clipped_and_visible() {
        let x = (0.0, 100.0);
        let iv = |s, e| event_interval(&event(EventKind::Overcharge, s, e), 1.0, x);
        assert_eq!(iv(10.0, 20.0), Some((10.0, 20.0)));
        assert_eq!(iv(50.0, f64::INFINITY), Some((50.0, 100.0)));
        assert_eq!(iv(f64::NAN, 5.0), None);
        assert_eq!(iv(200.0, 300.0), None);
        assert_eq!(iv(-50.0, 1e9), Some((0.0, 100.0)));
        let (a, b) = iv(100.0, 100.0).unwrap();
        assert!(b - a > 0.3 && b <= 100.0);
        let (a, b) = iv(30.0, f64::NAN).unwrap();
        assert!(a < 30.0 && b > 30.0);
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
        check(&r, 1000, 700, "Cadence plans");
        assert!(r.svg.contains("steady 70 rpm") && r.svg.contains("sprint"));
        assert!(
            count_near(&r.png, BRICK, 12) > 200,
            "second run colour missing"
        );

        let empty = Trace::default();
        check(&compare_chart(&[], "None").unwrap(), 1000, 700, "None");
        let runs = vec![("void".to_string(), &empty)];
        check(&compare_chart(&runs, "Void").unwrap(), 1000, 700, "Void");
        let many: Vec<(String, &Trace)> = (0..40).map(|i| (format!("run {i}"), &a)).collect();
        let r = compare_chart(&many, "Many").unwrap();
        check(&r, 1000, 700, "Many");
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
