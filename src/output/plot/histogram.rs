//! Histograms of Monte Carlo figures.

use super::*;

// ---------------------------------------------------------------------------------------------
// Histogram chart.

pub(super) struct HistogramFig<'a> {
    pub(super) metrics: &'a [(&'a str, &'a str, &'a [f64])],
    /// A threshold to mark on each metric's histogram (e.g. the regulation the verdict asks for).
    pub(super) thresholds: &'a [Option<f64>],
    pub(super) title: &'a str,
}

/// Whether a unit word means "no unit" (a fraction, a count).
fn dimensionless(unit: &str) -> bool {
    matches!(unit.trim(), "" | "-" | "1")
}

/// Histogram of the finite samples: (x range of the bins, bin counts). The bin width follows
/// Freedman and Diaconis (1981), 2·IQR·n^(−1/3), which adapts to skewed Monte Carlo figures;
/// never fewer bins than Sturges' rule, log2(n) + 1, nor more than 60.
pub(super) fn bin_samples(finite: &[f64]) -> Option<((f64, f64), Vec<u32>)> {
    if finite.is_empty() {
        return None;
    }
    let span = Span::of(finite.iter().copied());
    let n = finite.len();
    let sturges = (n as f64).log2().ceil() as usize + 1;
    let iqr = match (
        crate::analysis::stats::percentile(finite, 75.0),
        crate::analysis::stats::percentile(finite, 25.0),
    ) {
        (Some(q3), Some(q1)) => q3 - q1,
        _ => 0.0,
    };
    let fd_width = 2.0 * iqr / (n as f64).cbrt();
    let fd = if fd_width > 0.0 && fd_width.is_finite() {
        ((span.hi - span.lo) / fd_width).ceil() as usize
    } else {
        0
    };
    let mut k = fd.max(sturges).clamp(1, 60);
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
        let mut any_threshold = false;
        for (k, (cell, &(name, unit, samples))) in cells.iter().zip(self.metrics.iter()).enumerate()
        {
            let threshold = self.thresholds.get(k).copied().flatten();
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
                if !dimensionless(unit) {
                    caption.push_str(&format!(" {unit}"));
                }
            }
            if skipped > 0 {
                caption.push_str(&format!(" ({skipped} non-finite skipped)"));
            }
            let x_desc = with_unit(name, unit);
            let (x, max_count) = match &bins {
                Some(((lo, hi), counts)) => {
                    // The threshold stays in view even when every run lies on one side of it.
                    let (lo, hi) = match threshold {
                        Some(t) if t.is_finite() => (lo.min(t), hi.max(t)),
                        _ => (*lo, *hi),
                    };
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
                    if let Some(t) = threshold.filter(|t| t.is_finite()) {
                        area.draw(&PathElement::new(
                            vec![(t, 0.0), (t, y.1)],
                            SLATE.stroke_width(2),
                        ))
                        .map_err(de)?;
                        any_threshold = true;
                    }
                }
                None => draw_note(area, "no finite samples")?,
            }
        }
        let mut items = vec![
            item("runs per bin", Glyph::Band(TEAL, 0.78)),
            item("mean", Glyph::Dashed(BRICK)),
        ];
        if any_threshold {
            items.push(item("threshold", Glyph::Line(SLATE)));
        }
        draw_legend(&legend_area, &items, 26)
    }
}
