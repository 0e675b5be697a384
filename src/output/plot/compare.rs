//! The comparison chart: SOC and crank cadence of several runs overlaid. SOC is drawn as the
//! points gained since each run's start, so runs of batteries at different charge levels still
//! show their slopes side by side rather than flat lines far apart.

use super::*;

// ---------------------------------------------------------------------------------------------
// Comparison chart.

/// Width of the comparison's legend, px.
const COMPARE_LEGEND_W: u32 = 300;

pub(super) struct CompareFig<'a> {
    pub(super) runs: &'a [(String, &'a Trace)],
    pub(super) title: &'a str,
}

impl Figure for CompareFig<'_> {
    fn size(&self) -> (u32, u32) {
        (1200, 760)
    }

    fn draw<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
        pen: Pen,
    ) -> Result<(), PlotError> {
        root.fill(&WHITE).map_err(de)?;
        let body = draw_title(root, self.title)?;
        let (w, _) = body.dim_in_pixel();
        // A wide legend: run labels name a setup and a profile.
        let (charts, legend_area) = body.split_horizontally(w - COMPARE_LEGEND_W);

        let all_rows = || self.runs.iter().flat_map(|(_, tr)| tr.rows.iter());
        let time = TimeAxis::of(all_rows().map(|r| r.time_s));
        let (x, div, x_desc) = (time.range, time.div, time.desc);
        let gained =
            |tr: &Trace, r: &TraceRow| 100.0 * (r.soc - tr.rows.first().map_or(r.soc, |f| f.soc));
        let mut s_soc = Span::of(
            self.runs
                .iter()
                .flat_map(|(_, tr)| tr.rows.iter().map(move |r| gained(tr, r))),
        );
        s_soc.add(0.0);
        // At least a one-point span, so a run that barely charges is not a flat line at an edge.
        s_soc.add(1.0);
        let mut s_rpm = Span::of(all_rows().map(|r| r.crank_rpm));
        s_rpm.add(0.0);

        let panels = charts.split_evenly((2, 1));
        let specs = [
            (
                PanelText {
                    caption: "State of charge gained since the start",
                    y_desc: "SOC gained [%-points]",
                    x_desc: None,
                    y2_desc: None,
                },
                s_soc.axis(0.06, (0.0, 1.0)),
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
                let value = |r: &TraceRow| {
                    if p == 0 {
                        gained(tr, r)
                    } else {
                        r.crank_rpm
                    }
                };
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
