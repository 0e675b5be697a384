//! The overlay chart of `compare-measured`: each battery channel simulated and measured against
//! time, one panel a channel.

use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

use super::{
    build_panel, de, draw_legend, draw_note, draw_title, item, render, text_style, Figure, Glyph,
    LegendItem, PanelAxes, PanelText, Pen, PlotError, Rendered, Span, TimeAxis, BRICK, LEGEND_W,
    MUTED, TEAL,
};

/// One channel: its caption and axis label, and the two series as (time s, value).
#[derive(Debug, Clone)]
pub struct OverlayPanel {
    pub caption: String,
    pub y_desc: String,
    pub simulated: Vec<(f64, f64)>,
    pub measured: Vec<(f64, f64)>,
}

/// Simulated (solid) and measured (dashed) series of each channel, stacked against time.
pub fn overlay_chart(panels: &[OverlayPanel], title: &str) -> Result<Rendered, PlotError> {
    render(&OverlayFig { panels, title })
}

struct OverlayFig<'a> {
    panels: &'a [OverlayPanel],
    title: &'a str,
}

impl Figure for OverlayFig<'_> {
    fn size(&self) -> (u32, u32) {
        (1000, 260 + 240 * self.panels.len().max(1) as u32)
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
        let times = self
            .panels
            .iter()
            .flat_map(|p| p.simulated.iter().chain(&p.measured).map(|q| q.0));
        let time = TimeAxis::of(times.collect::<Vec<_>>().into_iter());
        let n = self.panels.len().max(1);
        let areas = charts.split_evenly((n, 1));
        for (i, (area, p)) in areas.iter().zip(self.panels).enumerate() {
            let y =
                Span::of(p.simulated.iter().chain(&p.measured).map(|q| q.1)).axis(0.06, (0.0, 1.0));
            let last = i + 1 == n;
            let text = PanelText {
                caption: &p.caption,
                y_desc: &p.y_desc,
                x_desc: last.then_some(time.desc),
                y2_desc: None,
            };
            let ax = PanelAxes {
                x: time.range,
                y,
                y2: y,
                x_area: if last { 46 } else { 28 },
                right_area: 16,
                y_counts: false,
            };
            let chart = build_panel(area, &text, &ax)?;
            let plot = chart.plotting_area();
            pen.line(
                plot,
                p.measured.iter().map(|q| (q.0 / time.div, q.1)),
                BRICK,
                true,
            )?;
            pen.line(
                plot,
                p.simulated.iter().map(|q| (q.0 / time.div, q.1)),
                TEAL,
                false,
            )?;
            if p.simulated.is_empty() && p.measured.is_empty() {
                draw_note(plot, "no samples")?;
            }
        }
        let items: Vec<LegendItem> = vec![
            item("simulated", Glyph::Line(TEAL)),
            item("measured", Glyph::Dashed(BRICK)),
        ];
        let heading = text_style(14.0)
            .color(&MUTED)
            .pos(Pos::new(HPos::Left, VPos::Center));
        legend_area
            .draw_text("series", &heading, (12, 18))
            .map_err(de)?;
        draw_legend(&legend_area, &items, 30)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn renders_both_formats_with_and_without_samples() {
        let p = OverlayPanel {
            caption: "Battery voltage".into(),
            y_desc: "V".into(),
            simulated: (0..100)
                .map(|k| (f64::from(k), 12.0 + 0.01 * f64::from(k)))
                .collect(),
            measured: (0..100)
                .map(|k| (f64::from(k), 12.02 + 0.01 * f64::from(k)))
                .collect(),
        };
        let r = overlay_chart(&[p.clone(), p], "test").expect("drawn");
        assert!(r.png.starts_with(&[0x89, b'P', b'N', b'G']));
        assert!(r.svg.contains("measured"));
        let empty = OverlayPanel {
            caption: "SOC".into(),
            y_desc: "".into(),
            simulated: Vec::new(),
            measured: Vec::new(),
        };
        assert!(overlay_chart(&[empty], "empty").is_ok());
    }
}
