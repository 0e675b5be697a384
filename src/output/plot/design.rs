//! Charts of the design studies: a search's points against each varied key, its Pareto front,
//! and `check`'s cadence operating map. A categorical axis is drawn as categories (one evenly
//! spaced slot per value, labelled with the value), never as numbers.

use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

use super::{
    bold_style, de, draw_title, render, tame, text_style, tick_format, Figure, Pen, PlotError,
    Rendered, Span, AMBER, AXIS, BRICK, COBALT, GRID_FINE, GRID_MAIN, INK, LEGEND_ROW, LEGEND_W,
    MUTED, OLIVE, PANEL_BG, PLUM, SLATE, TEAL, UMBER,
};

/// One varied key: x of every point, and its categories when it has no numbers.
#[derive(Debug, Clone)]
pub struct AxisPanel {
    pub key: String,
    /// x of every point (the category's slot number for categories; NaN: not drawn).
    pub xs: Vec<f64>,
    /// The categories, in slot order (None: numeric axis).
    pub categories: Option<Vec<String>>,
}

/// A search's points: the objective against each varied key.
#[derive(Debug, Clone, Copy)]
pub struct PointsData<'a> {
    /// `minimise FIGURE`: the y label.
    pub objective: &'a str,
    pub ys: &'a [f64],
    pub feasible: &'a [bool],
    pub refined: &'a [bool],
    pub best: Option<usize>,
    pub panels: &'a [AxisPanel],
}

/// Two objectives of a search's points, with the non-dominated ones marked.
#[derive(Debug, Clone, Copy)]
pub struct ParetoData<'a> {
    pub x_label: &'a str,
    pub y_label: &'a str,
    pub xs: &'a [f64],
    pub ys: &'a [f64],
    pub feasible: &'a [bool],
    pub front: &'a [bool],
    pub best: Option<usize>,
}

/// `check`'s operating map: the steady chain at each crank cadence.
#[derive(Debug, Clone, Copy)]
pub struct MapData<'a> {
    pub crank_rpm: &'a [f64],
    pub emf_v: &'a [f64],
    pub input_v: &'a [f64],
    pub charge_current_a: &'a [f64],
    /// The binding cause at each cadence (a word).
    pub limit: &'a [String],
    /// The profile's cadence range (low, high), drawn as a band.
    pub profile_range_rpm: Option<(f64, f64)>,
}

/// The objective against each varied key, one panel per key.
pub fn points_chart(data: &PointsData, title: &str) -> Result<Rendered, PlotError> {
    render(&PointsFig { data, title })
}

/// The second objective against the first; front points joined and ringed.
pub fn pareto_chart(data: &ParetoData, title: &str) -> Result<Rendered, PlotError> {
    render(&ParetoFig { data, title })
}

/// Voltages and achievable charge current against crank cadence, shaded by the limiting cause.
pub fn operating_map_chart(data: &MapData, title: &str) -> Result<Rendered, PlotError> {
    render(&MapFig { data, title })
}

pub(super) type Area<'a, DB> = DrawingArea<DB, plotters::coord::Shift>;
pub(super) type Plot<'a, DB> = ChartContext<
    'a,
    DB,
    Cartesian2d<plotters::coord::types::RangedCoordf64, plotters::coord::types::RangedCoordf64>,
>;

/// A plain panel; for categories the x labels are left to [`label_categories`].
pub(super) fn panel<'a, DB: DrawingBackend>(
    area: &'a Area<'a, DB>,
    caption: &str,
    x: (f64, f64),
    y: (f64, f64),
    x_desc: &str,
    y_desc: &str,
    categorical: bool,
) -> Result<Plot<'a, DB>, PlotError> {
    let mut chart = ChartBuilder::on(area)
        .caption(caption, bold_style(15.0))
        .margin_top(4)
        .margin_right(14)
        .margin_left(4)
        .x_label_area_size(if categorical { 52 } else { 46 })
        .y_label_area_size(70)
        .build_cartesian_2d(x.0..x.1, y.0..y.1)
        .map_err(de)?;
    chart.plotting_area().fill(&PANEL_BG).map_err(de)?;
    let fx = tick_format(x.0, x.1);
    let fy = tick_format(y.0, y.1);
    let mut mesh = chart.configure_mesh();
    mesh.x_labels(if categorical { 0 } else { 10 })
        .y_labels(6)
        .x_label_formatter(&fx)
        .y_label_formatter(&fy)
        .max_light_lines(2)
        .light_line_style(GRID_FINE)
        .bold_line_style(GRID_MAIN)
        .axis_style(AXIS)
        .label_style(text_style(13.0))
        .axis_desc_style(text_style(14.0))
        .y_desc(y_desc)
        .x_desc(x_desc);
    if categorical {
        mesh.disable_x_mesh();
    }
    mesh.draw().map_err(de)?;
    Ok(chart)
}

/// Writes each category under its slot (slot k at x = k) and draws a faint line through it.
pub(super) fn label_categories<DB: DrawingBackend>(
    root: &Area<DB>,
    chart: &Plot<DB>,
    categories: &[String],
    y: (f64, f64),
) -> Result<(), PlotError> {
    let style = text_style(13.0).pos(Pos::new(HPos::Center, VPos::Top));
    let (_, y_px) = chart.backend_coord(&(0.0, y.0));
    for (k, c) in categories.iter().enumerate() {
        let x = k as f64;
        chart
            .plotting_area()
            .draw(&PathElement::new(vec![(x, y.0), (x, y.1)], GRID_MAIN))
            .map_err(de)?;
        let (x_px, _) = chart.backend_coord(&(x, y.0));
        root.draw_text(c, &style, (x_px, y_px + 6)).map_err(de)?;
    }
    Ok(())
}

/// A filled or hollow marker.
fn marker<DB: DrawingBackend>(
    chart: &Plot<DB>,
    p: (f64, f64),
    color: RGBColor,
    filled: bool,
    size: i32,
) -> Result<(), PlotError> {
    let area = chart.plotting_area();
    if filled {
        area.draw(&Circle::new(p, size, color.filled()))
            .map_err(de)?;
        area.draw(&Circle::new(p, size, WHITE.stroke_width(1)))
            .map_err(de)
    } else {
        area.draw(&Circle::new(p, size, color.stroke_width(2)))
            .map_err(de)
    }
}

/// A legend of markers (and one band swatch kind) in the right-hand column.
fn legend<DB: DrawingBackend>(
    area: &Area<DB>,
    items: &[(String, RGBColor, bool)],
    top: i32,
) -> Result<(), PlotError> {
    let style = text_style(13.0).pos(Pos::new(HPos::Left, VPos::Center));
    for (i, (label, color, filled)) in items.iter().enumerate() {
        let y = top + i as i32 * LEGEND_ROW + LEGEND_ROW / 2;
        if *filled {
            area.draw(&Circle::new((24, y), 5, color.filled()))
                .map_err(de)?;
        } else {
            area.draw(&Circle::new((24, y), 5, color.stroke_width(2)))
                .map_err(de)?;
        }
        area.draw_text(label, &style, (38, y)).map_err(de)?;
    }
    Ok(())
}

fn finite_range(v: impl Iterator<Item = f64>, pad: f64) -> (f64, f64) {
    Span::of(v).axis(pad, (0.0, 1.0))
}

struct PointsFig<'a> {
    data: &'a PointsData<'a>,
    title: &'a str,
}

impl Figure for PointsFig<'_> {
    fn size(&self) -> (u32, u32) {
        let n = self.data.panels.len().max(1) as u32;
        (1000, 60 + 250 * n.min(6))
    }

    fn draw<DB: DrawingBackend>(&self, root: &Area<DB>, _pen: Pen) -> Result<(), PlotError> {
        root.fill(&WHITE).map_err(de)?;
        let body = draw_title(root, self.title)?;
        let (w, _) = body.dim_in_pixel();
        let (charts, legend_area) = body.split_horizontally(w - LEGEND_W);
        let d = self.data;
        let shown = d.panels.len().min(6);
        let y = finite_range(d.ys.iter().copied().map(tame), 0.06);
        let areas = charts.split_evenly((shown.max(1), 1));
        for (panel_data, area) in d.panels.iter().take(shown).zip(areas.iter()) {
            let cats = panel_data.categories.as_deref();
            let x = match cats {
                Some(c) => (-0.5, c.len() as f64 - 0.5),
                None => finite_range(panel_data.xs.iter().copied().map(tame), 0.04),
            };
            let chart = panel(
                area,
                &format!("{} against {}", d.objective, panel_data.key),
                x,
                y,
                &panel_data.key,
                d.objective,
                cats.is_some(),
            )?;
            if let Some(c) = cats {
                label_categories(root, &chart, c, y)?;
            }
            // Infeasible first, so feasible points sit on top; the best last, ringed.
            for pass in [false, true] {
                for i in 0..d.ys.len().min(panel_data.xs.len()) {
                    let (px, py) = (panel_data.xs[i], d.ys[i]);
                    if d.feasible[i] != pass || !px.is_finite() || !py.is_finite() {
                        continue;
                    }
                    let p = (tame(px), tame(py));
                    match (d.feasible[i], d.refined[i]) {
                        (false, _) => marker(&chart, p, MUTED, false, 4)?,
                        (true, false) => marker(&chart, p, TEAL, true, 4)?,
                        (true, true) => marker(&chart, p, AMBER, true, 4)?,
                    }
                }
            }
            if let Some(b) = d.best {
                let (px, py) = (panel_data.xs[b], d.ys[b]);
                if px.is_finite() && py.is_finite() {
                    marker(&chart, (tame(px), tame(py)), BRICK, false, 9)?;
                }
            }
        }
        if d.panels.len() > shown {
            let style = text_style(13.0).color(&MUTED);
            legend_area
                .draw_text(
                    &format!("{} more key(s) not drawn", d.panels.len() - shown),
                    &style,
                    (12, 200),
                )
                .map_err(de)?;
        }
        legend(
            &legend_area,
            &[
                ("feasible".into(), TEAL, true),
                ("feasible, refined".into(), AMBER, true),
                ("infeasible".into(), MUTED, false),
                ("best".into(), BRICK, false),
            ],
            26,
        )
    }
}

struct ParetoFig<'a> {
    data: &'a ParetoData<'a>,
    title: &'a str,
}

impl Figure for ParetoFig<'_> {
    fn size(&self) -> (u32, u32) {
        (1000, 650)
    }

    fn draw<DB: DrawingBackend>(&self, root: &Area<DB>, pen: Pen) -> Result<(), PlotError> {
        root.fill(&WHITE).map_err(de)?;
        let body = draw_title(root, self.title)?;
        let (w, _) = body.dim_in_pixel();
        let (area, legend_area) = body.split_horizontally(w - LEGEND_W);
        let d = self.data;
        let n = d.xs.len().min(d.ys.len());
        let x = finite_range((0..n).map(|i| tame(d.xs[i])), 0.05);
        let y = finite_range((0..n).map(|i| tame(d.ys[i])), 0.06);
        let chart = panel(
            &area,
            "Feasible points and the front",
            x,
            y,
            d.x_label,
            d.y_label,
            false,
        )?;
        let mut front: Vec<(f64, f64)> = (0..n)
            .filter(|&i| d.front[i] && d.xs[i].is_finite() && d.ys[i].is_finite())
            .map(|i| (tame(d.xs[i]), tame(d.ys[i])))
            .collect();
        front.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.total_cmp(&b.1)));
        pen.line(chart.plotting_area(), front.iter().copied(), COBALT, false)?;
        for i in 0..n {
            if !(d.xs[i].is_finite() && d.ys[i].is_finite()) {
                continue;
            }
            let p = (tame(d.xs[i]), tame(d.ys[i]));
            if d.front[i] {
                marker(&chart, p, COBALT, true, 5)?;
            } else if d.feasible[i] {
                marker(&chart, p, TEAL, true, 3)?;
            } else {
                marker(&chart, p, MUTED, false, 3)?;
            }
        }
        if let Some(b) = d
            .best
            .filter(|&b| b < n && d.xs[b].is_finite() && d.ys[b].is_finite())
        {
            marker(&chart, (tame(d.xs[b]), tame(d.ys[b])), BRICK, false, 9)?;
        }
        legend(
            &legend_area,
            &[
                ("on the front".into(), COBALT, true),
                ("feasible".into(), TEAL, true),
                ("infeasible".into(), MUTED, false),
                ("best".into(), BRICK, false),
            ],
            26,
        )
    }
}

/// The limiting causes in legend order, with their colours.
const LIMIT_COLOURS: [(&str, RGBColor); 10] = [
    ("uvlo", SLATE),
    ("duty_limit", BRICK),
    ("input_floor", AMBER),
    ("current_limit", TEAL),
    ("charge_limit", PLUM),
    ("input_overvoltage", UMBER),
    ("source", OLIVE),
    ("no_conduction", MUTED),
    ("temperature", COBALT),
    ("bus_band", INK),
];

fn limit_colour(word: &str) -> RGBColor {
    LIMIT_COLOURS
        .iter()
        .find(|(w, _)| *w == word)
        .map_or(MUTED, |(_, c)| *c)
}

struct MapFig<'a> {
    data: &'a MapData<'a>,
    title: &'a str,
}

impl Figure for MapFig<'_> {
    fn size(&self) -> (u32, u32) {
        (1000, 700)
    }

    fn draw<DB: DrawingBackend>(&self, root: &Area<DB>, pen: Pen) -> Result<(), PlotError> {
        root.fill(&WHITE).map_err(de)?;
        let body = draw_title(root, self.title)?;
        let (w, _) = body.dim_in_pixel();
        let (charts, legend_area) = body.split_horizontally(w - LEGEND_W);
        let d = self.data;
        let n = d
            .crank_rpm
            .len()
            .min(d.emf_v.len())
            .min(d.input_v.len())
            .min(d.charge_current_a.len())
            .min(d.limit.len());
        let x = finite_range(d.crank_rpm[..n].iter().copied(), 0.0);
        let mut vs = Span::of(d.emf_v[..n].iter().chain(&d.input_v[..n]).copied());
        vs.add(0.0);
        let yv = vs.axis(0.06, (0.0, 1.0));
        let mut cs = Span::of(d.charge_current_a[..n].iter().copied());
        cs.add(0.0);
        let yc = cs.axis(0.08, (0.0, 1.0));
        let areas = charts.split_evenly((2, 1));
        let panels = [
            ("Generator EMF and converter input", yv, "voltage [V]"),
            ("Achievable charge current", yc, "current [A]"),
        ];
        for (p, (area, (caption, y, y_desc))) in areas.iter().zip(panels).enumerate() {
            let chart = panel(area, caption, x, y, "crank cadence [rpm]", y_desc, false)?;
            let plot = chart.plotting_area();
            // Bands of the limiting cause: each sample owns the half-steps around it.
            for i in 0..n {
                let lo = if i == 0 {
                    d.crank_rpm[0]
                } else {
                    0.5 * (d.crank_rpm[i - 1] + d.crank_rpm[i])
                };
                let hi = if i + 1 == n {
                    d.crank_rpm[i]
                } else {
                    0.5 * (d.crank_rpm[i] + d.crank_rpm[i + 1])
                };
                let c = limit_colour(&d.limit[i]);
                plot.draw(&Rectangle::new(
                    [(lo, y.0), (hi, y.1)],
                    c.mix(0.12).filled(),
                ))
                .map_err(de)?;
            }
            if let Some((lo, hi)) = d.profile_range_rpm {
                for edge in [lo, hi] {
                    plot.draw(&PathElement::new(
                        vec![(edge, y.0), (edge, y.1)],
                        INK.stroke_width(1),
                    ))
                    .map_err(de)?;
                }
            }
            let pts = |ys: &[f64]| -> Vec<(f64, f64)> {
                (0..n).map(|i| (d.crank_rpm[i], tame(ys[i]))).collect()
            };
            if p == 0 {
                pen.line(plot, pts(d.emf_v).into_iter(), TEAL, true)?;
                pen.line(plot, pts(d.input_v).into_iter(), COBALT, false)?;
            } else {
                pen.line(plot, pts(d.charge_current_a).into_iter(), BRICK, false)?;
            }
        }
        let mut items: Vec<(String, RGBColor, bool)> = vec![
            ("EMF (dashed)".into(), TEAL, true),
            ("input voltage".into(), COBALT, true),
            ("charge current".into(), BRICK, true),
        ];
        let mut seen: Vec<&str> = Vec::new();
        for l in &d.limit[..n] {
            if !seen.contains(&l.as_str()) {
                seen.push(l);
            }
        }
        for (word, c) in LIMIT_COLOURS {
            if seen.contains(&word) {
                items.push((format!("limit: {word}"), c, false));
            }
        }
        if d.profile_range_rpm.is_some() {
            items.push(("profile's range (lines)".into(), INK, false));
        }
        legend(&legend_area, &items, 26)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn png_ok(r: &Rendered) {
        assert!(r.png.starts_with(&[0x89, b'P', b'N', b'G']));
        assert!(r.svg.starts_with("<svg"));
    }

    #[test]
    fn categorical_axes_are_labelled_with_their_categories() {
        let panels = vec![
            AxisPanel {
                key: "battery.chemistry".into(),
                xs: vec![0.0, 1.0, 0.0, 1.0],
                categories: Some(vec!["nmc".into(), "lfp".into()]),
            },
            AxisPanel {
                key: "drive.stages.0.ratio".into(),
                xs: vec![3.0, 3.0, 5.0, 5.0],
                categories: None,
            },
        ];
        let data = PointsData {
            objective: "maximise charge_mean_ah",
            ys: &[0.1, 0.2, f64::NAN, 0.4],
            feasible: &[true, false, true, true],
            refined: &[false, false, false, true],
            best: Some(3),
            panels: &panels,
        };
        let r = points_chart(&data, "test").expect("chart");
        png_ok(&r);
        let texts: Vec<&str> = r.svg.lines().map(str::trim).collect();
        for word in ["nmc", "lfp", "drive.stages.0.ratio"] {
            assert!(texts.contains(&word), "{word} missing from the SVG");
        }
    }

    #[test]
    fn pareto_and_map_render() {
        let data = ParetoData {
            x_label: "a",
            y_label: "b",
            xs: &[1.0, 2.0, 3.0],
            ys: &[3.0, 1.0, 2.0],
            feasible: &[true, true, false],
            front: &[true, true, false],
            best: Some(0),
        };
        png_ok(&pareto_chart(&data, "p").expect("chart"));
        let limit: Vec<String> = ["uvlo", "duty_limit", "current_limit"]
            .iter()
            .map(|s| s.to_string())
            .collect();
        let map = MapData {
            crank_rpm: &[30.0, 50.0, 70.0],
            emf_v: &[9.0, 15.0, 21.0],
            input_v: &[9.0, 12.0, 18.0],
            charge_current_a: &[0.0, 1.2, 2.0],
            limit: &limit,
            profile_range_rpm: Some((45.0, 75.0)),
        };
        let r = operating_map_chart(&map, "m").expect("chart");
        png_ok(&r);
        assert!(r.svg.lines().any(|l| l.trim() == "limit: duty_limit"));
    }
}
