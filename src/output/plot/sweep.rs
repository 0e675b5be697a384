//! The sweep chart: charge, time in regulation and operator power against the swept value.

use super::*;

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

pub(super) struct SweepFig<'a> {
    pub(super) series: &'a SweepSeries<'a>,
    pub(super) title: &'a str,
    /// The swept values when they are words: `values` are then their slot numbers 0, 1, …
    pub(super) categories: Option<&'a [String]>,
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
