//! The session chart: cadence, voltages with the charge limit, battery current and SOC, operator
//! power, with the alert lanes and the regulation-loss bands.

use super::*;
use crate::analysis::trace::Mode;

// ---------------------------------------------------------------------------------------------
// Session chart.

pub(super) struct SessionFig<'a> {
    pub(super) trace: &'a Trace,
    pub(super) events: &'a [Event],
    pub(super) title: &'a str,
    pub(super) marks: SessionMarks,
}

/// Least span of the SOC axis, percentage points: a short session's few points of charge still
/// show as a slope, not a step.
const SOC_MIN_SPAN: f64 = 5.0;

/// Colour and label of a charger state in the state strip.
fn mode_style(m: Mode) -> (RGBColor, &'static str) {
    match m {
        Mode::Lockout => (RGBColor(90, 90, 90), "locked out"),
        Mode::SoftStart => (COBALT, "soft-start"),
        Mode::Cc => (TEAL, "CC"),
        Mode::Cv => (OLIVE, "CV / absorption"),
        Mode::Float => (PLUM, "float"),
        Mode::Dropout => (BRICK, "dropout"),
        Mode::InputFloor => (RGBColor(205, 120, 90), "input floor"),
        Mode::Done => (AMBER, "done"),
        Mode::Trickle => (RGBColor(200, 170, 90), "trickle"),
        Mode::TempHold => (UMBER, "temperature hold"),
        Mode::Direct => (SLATE, "direct"),
        Mode::DeviceOff => (RGBColor(170, 170, 170), "device off"),
    }
}

/// Runs of one charger state on the trace: (start, end, state), in axis units.
fn mode_runs(rows: &[TraceRow], div: f64, dt: f64) -> Vec<(f64, f64, Mode)> {
    let mut out: Vec<(f64, f64, Mode)> = Vec::new();
    for r in rows {
        let t = r.time_s / div;
        match out.last_mut() {
            Some(last) if last.2 == r.mode => last.1 = t + dt / div,
            _ => out.push((t, t + dt / div, r.mode)),
        }
    }
    out
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

pub(super) fn alert_color(kind: EventKind) -> RGBColor {
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

/// Time interval of an event in axis units, clipped to the x range and at least `min_w` wide
/// (one trace interval: a band is never wider than its event by more than the trace's own
/// resolution).
pub(super) fn event_interval(e: &Event, div: f64, x: (f64, f64), min_w: f64) -> Option<(f64, f64)> {
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
        // The trace's grid, s (the narrowest a band is drawn).
        let dt = rows
            .windows(2)
            .map(|w| w[1].time_s - w[0].time_s)
            .find(|d| d.is_finite() && *d > 0.0)
            .unwrap_or(0.1);
        let min_w = dt / div;
        let interval = |e: &Event| event_interval(e, div, x, min_w);
        let states = mode_runs(rows, div, dt);

        // Alert lanes per panel.
        let mut lanes: [Vec<EventKind>; 4] = Default::default();
        let kinds: BTreeSet<EventKind> = self
            .events
            .iter()
            .filter(|e| interval(e).is_some())
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
            .filter_map(interval)
            .collect();
        let completes: Vec<f64> = self
            .events
            .iter()
            .filter(|e| e.kind == EventKind::ChargeComplete)
            .filter_map(|e| interval(e).map(|(a, _)| a))
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
        // SOC: the data's own range, at least SOC_MIN_SPAN wide, inside 0 … 100 %.
        let s_soc = Span::of(rows.iter().map(|r| r.soc * 100.0));
        let mut s_pow = Span::of(rows.iter().map(|r| r.operator_power_w));
        s_pow.add(0.0);
        if let Some(cp) = self.marks.critical_power_w {
            s_pow.add(cp);
        }
        let base_y = [
            s_rpm.axis(0.06, (0.0, 1.0)),
            s_volt.axis(0.06, (0.0, 1.0)),
            s_amp.axis(0.08, (0.0, 1.0)),
            s_pow.axis(0.06, (0.0, 1.0)),
        ];
        let soc_base = {
            let (lo, hi) = if s_soc.is_empty() {
                (0.0, 100.0)
            } else {
                (s_soc.lo, s_soc.hi)
            };
            let mid = 0.5 * (lo + hi);
            let half = (0.5 * (hi - lo) * 1.1).max(0.5 * SOC_MIN_SPAN);
            let (a, b) = (mid - half, mid + half);
            // Slide the window inside 0 … 100 rather than cut it.
            let shift = (-a).max(0.0) - (b - 100.0).max(0.0);
            ((a + shift).max(0.0), (b + shift).min(100.0))
        };
        let w_prime_kj = self.marks.w_prime_j.map(|w| w / 1000.0);

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
                y2_desc: w_prime_kj.map(|_| "W′ balance [kJ]"),
            },
        ];

        let (w, _) = body.dim_in_pixel();
        let panels = body.split_evenly((4, 1));
        for (p, panel) in panels.iter().enumerate() {
            let (plot_area, legend_area) = panel.split_horizontally(w - LEGEND_W);
            // The current panel carries the charger-state strip as its first lane.
            let strip = usize::from(p == 2 && !states.is_empty());
            let (y, lane_h) = with_lanes(base_y[p], lanes[p].len() + strip);
            let y2 = match (p, w_prime_kj) {
                (2, _) => stretch(soc_base, base_y[p], y),
                (3, Some(w)) => stretch((0.0, w * 1.05), base_y[p], y),
                _ => y,
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
            for i in 0..lanes[p].len() + strip {
                let (lo, hi) = lane_box(i);
                area.draw(&Rectangle::new([(x.0, lo), (x.1, hi)], LANE_TRACK.filled()))
                    .map_err(de)?;
            }
            let mut shown_states: Vec<Mode> = Vec::new();
            if strip == 1 {
                let (lo, hi) = lane_box(0);
                for &(a, b, m) in &states {
                    let (a, b) = (a.max(x.0), b.min(x.1));
                    if b > a {
                        area.draw(&Rectangle::new(
                            [(a, lo), (b, hi)],
                            mode_style(m).0.filled(),
                        ))
                        .map_err(de)?;
                    }
                    if !shown_states.contains(&m) {
                        shown_states.push(m);
                    }
                }
            }
            for &(a, b) in &reg_bands {
                area.draw(&Rectangle::new(
                    [(a, y.0), (b, y.1)],
                    BAND.mix(BAND_ALPHA).filled(),
                ))
                .map_err(de)?;
            }
            for (i, &k) in lanes[p].iter().enumerate() {
                let (lo, hi) = lane_box(i + strip);
                for e in self.events.iter().filter(|e| e.kind == k) {
                    if let Some((a, b)) = interval(e) {
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
                    for &m in &shown_states {
                        let (c, label) = mode_style(m);
                        legend.push(item(format!("state: {label}"), Glyph::Lane(c)));
                    }
                    if !completes.is_empty() {
                        legend.push(item(
                            "charge complete",
                            Glyph::Dashed(alert_color(EventKind::ChargeComplete)),
                        ));
                    }
                }
                _ => {
                    // The instantaneous power (the per-turn ripple) as a light fill, the power
                    // averaged over a revolution (what W′ and the power cap act on) as the line.
                    let base = 0.0_f64.clamp(y.0, y.1);
                    draw_fill(
                        area,
                        rows.iter().map(|r| (t(r), r.operator_power_w)),
                        base,
                        PLUM,
                    )?;
                    pen.line(
                        area,
                        rows.iter().map(|r| (t(r), r.operator_mean_power_w)),
                        PLUM,
                        false,
                    )?;
                    legend.push(item("power, per turn", Glyph::Line(PLUM)));
                    legend.push(item("power, instant", Glyph::Band(PLUM, 0.25)));
                    if let Some(cp) = self.marks.critical_power_w {
                        area.draw(&DashedPathElement::new(
                            [(x.0, cp), (x.1, cp)],
                            6,
                            4,
                            BRICK.stroke_width(2),
                        ))
                        .map_err(de)?;
                        legend.push(item(
                            format!("critical power {cp:.0} W"),
                            Glyph::Dashed(BRICK),
                        ));
                    }
                    if w_prime_kj.is_some() {
                        pen.line(
                            chart.secondary_plotting_area(),
                            rows.iter().map(|r| (t(r), r.w_prime_balance_j / 1000.0)),
                            SLATE,
                            false,
                        )?;
                        legend.push(item("W′ balance (right axis)", Glyph::Line(SLATE)));
                    }
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
