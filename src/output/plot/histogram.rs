//! Histograms of Monte Carlo figures.

use super::*;

// ---------------------------------------------------------------------------------------------
// Histogram chart.

pub(super) struct HistogramFig<'a> {
    pub(super) metrics: &'a [(&'a str, &'a str, &'a [f64])],
    pub(super) title: &'a str,
}

/// Histogram of the finite samples: (x range of the bins, bin counts).
pub(super) fn bin_samples(finite: &[f64]) -> Option<((f64, f64), Vec<u32>)> {
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
