//! `compare-measured`: a simulated run set against a measured battery log (a bench run): the
//! simulated battery voltage, current and SOC read at the measured sample times, the rms, worst
//! and mean error of each, and the charge and energy into the battery over the time both cover.
//! Writes `comparison.json`, `comparison.png`/`.svg` (the overlay) and `report.html`. Cost:
//! reading two CSV files; no simulation.
//!
//! The bench log has `time_s`, `battery_v`, `battery_current_a` and optionally `soc` (a fraction,
//! or `soc_pct`); units may be given in the header as for a crank log (`battery (mV)`). Its times
//! count from its first sample, plus `--offset` (the simulated time of that first sample).

use std::path::{Path, PathBuf};

use anyhow::anyhow;
use clap::Args;
use serde::Serialize;

use super::outcome::{say, Failure, EXIT_OK};
use crate::analysis::measured::{channel_error, percent_error, ChannelError, Series};
use crate::output::json::to_json;
use crate::output::plot::measured::{overlay_chart, OverlayPanel};
use crate::output::report;
use crate::output::rundir::Staging;
use crate::scenario::logfile::{self, Channel, Rules, Table, Unit};

use super::pages;

/// Longest gap between two samples of a bench log (or a trace), s.
pub const MAX_GAP_S: f64 = 60.0;
/// Charge below which no percentage is formed, A·s.
const CHARGE_FLOOR_AS: f64 = 1e-6;

/// Battery terminal voltage.
pub const BATTERY_V: Channel = Channel {
    name: "battery_v",
    what: "battery voltage",
    stems: &["battery", "battery_voltage"],
    units: &[
        Unit {
            names: &["v"],
            factor: 1.0,
            shown: "V",
        },
        Unit {
            names: &["mv"],
            factor: 1e-3,
            shown: "mV",
        },
    ],
    required: true,
    min: 0.0,
    max: 1000.0,
    why: "",
};

/// Current into the battery (charging positive).
pub const BATTERY_I: Channel = Channel {
    name: "battery_current_a",
    what: "battery current",
    stems: &["battery_current"],
    units: &[
        Unit {
            names: &["a"],
            factor: 1.0,
            shown: "A",
        },
        Unit {
            names: &["ma"],
            factor: 1e-3,
            shown: "mA",
        },
    ],
    required: true,
    min: -1000.0,
    max: 1000.0,
    why: " (charging current positive)",
};

/// State of charge, optional.
pub const SOC: Channel = Channel {
    name: "soc",
    what: "state of charge",
    stems: &["soc"],
    units: &[
        Unit {
            names: &["", "fraction"],
            factor: 1.0,
            shown: "",
        },
        Unit {
            names: &["pct", "%", "percent"],
            factor: 0.01,
            shown: "%",
        },
    ],
    required: false,
    min: 0.0,
    max: 1.0,
    why: " (a fraction; name the column soc_pct for per cent)",
};

/// Arguments of `compare-measured`.
#[derive(Debug, Clone, Args)]
pub struct CompareMeasuredArgs {
    /// A folder written by `crankcharge run` (its trace.csv is read).
    pub run_dir: PathBuf,
    /// The measured battery log (CSV: time_s, battery_v, battery_current_a, optional soc).
    pub bench: PathBuf,
    /// Simulated time of the bench log's first sample, e.g. 0, -30, 2min (default 0).
    #[arg(long, default_value = "0", allow_hyphen_values = true, value_parser = parse_offset)]
    pub offset: f64,
    /// Output folder (default: outputs/compare-measured).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Skip the chart.
    #[arg(long)]
    pub no_plot: bool,
    /// Replace the output folder even if crankcharge did not write it (its files are lost).
    #[arg(long)]
    pub force: bool,
}

fn parse_offset(s: &str) -> Result<f64, String> {
    let t = s.trim();
    let limit = crate::scenario::limits::MAX_SESSION_S;
    if let Ok(v) = t.parse::<f64>() {
        return if v.is_finite() && v.abs() <= limit {
            Ok(v)
        } else {
            Err(format!(
                "offset '{s}' out of range; allowed -7 days ..= 7 days"
            ))
        };
    }
    let (sign, rest) = match t.strip_prefix('-') {
        Some(r) => (-1.0, r),
        None => (1.0, t),
    };
    super::outcome::parse_duration(rest).map(|v| sign * v)
}

/// The errors of every channel (`comparison.json` keys `rms` and `worst` repeat them by channel).
#[derive(Debug, Clone, Serialize)]
struct Channels {
    battery_v: ChannelError,
    battery_current_a: ChannelError,
    #[serde(skip_serializing_if = "Option::is_none")]
    soc: Option<ChannelError>,
}

/// `comparison.json`.
#[derive(Debug, Clone, Serialize)]
struct Comparison {
    run_dir: String,
    bench_log: String,
    setup: Option<String>,
    profile: Option<String>,
    offset_s: f64,
    /// Simulated time both logs cover, s.
    window_start_s: f64,
    window_end_s: f64,
    bench_samples: usize,
    trace_rows: usize,
    channels: Channels,
    rms: std::collections::BTreeMap<&'static str, f64>,
    worst: std::collections::BTreeMap<&'static str, f64>,
    charge_measured_ah: f64,
    charge_simulated_ah: f64,
    /// (simulated − measured)/|measured|·100 over the window; null when nothing was measured.
    charge_error_pct: Option<f64>,
    energy_measured_wh: f64,
    energy_simulated_wh: f64,
    energy_error_pct: Option<f64>,
    method: &'static str,
    notes: Vec<String>,
}

fn read_table(path: &Path, channels: &[Channel], kind: &'static str) -> Result<Table, Failure> {
    let name = path.display().to_string();
    let text = std::fs::read_to_string(path)
        .map_err(|e| Failure::Input(anyhow!("could not read '{name}': {e}")))?;
    logfile::read(
        &name,
        &text,
        channels,
        &Rules {
            max_gap_s: MAX_GAP_S,
            min_span_s: 0.0,
            kind,
        },
    )
    .map_err(|e| Failure::Input(e.into()))
}

/// The run's names from its summary.json (None when it has none).
fn run_names(dir: &Path) -> (Option<String>, Option<String>) {
    let v: Option<serde_json::Value> = std::fs::read_to_string(dir.join("summary.json"))
        .ok()
        .and_then(|t| serde_json::from_str(&t).ok());
    let get = |k: &str| {
        v.as_ref()
            .and_then(|v| v.get(k))
            .and_then(|s| s.as_str())
            .map(String::from)
    };
    (get("setup"), get("profile"))
}

/// Executes `compare-measured`.
pub fn run(a: &CompareMeasuredArgs) -> Result<i32, Failure> {
    let trace_path = a.run_dir.join("trace.csv");
    if !trace_path.is_file() {
        return Err(Failure::Input(anyhow!(
            "'{}' holds no trace.csv: give a folder written by `crankcharge run`",
            crate::text::excerpt(
                &a.run_dir.display().to_string(),
                2 * crate::text::EXCERPT_CHARS
            )
        )));
    }
    let sim = read_table(&trace_path, &[BATTERY_V, BATTERY_I, SOC], "a run's trace")?;
    let bench = read_table(&a.bench, &[BATTERY_V, BATTERY_I, SOC], "a bench log")?;
    let out = a
        .out
        .clone()
        .unwrap_or_else(|| PathBuf::from("outputs").join("compare-measured"));
    let staging = Staging::prepare(&out, "compare-measured", a.force)
        .map_err(|e| Failure::Input(e.into()))?;

    let t0 = bench.time_s[0];
    let mt: Vec<f64> = bench.time_s.iter().map(|t| t - t0 + a.offset).collect();
    let st = &sim.time_s;
    let (w0, w1) = (mt[0].max(st[0]), mt[mt.len() - 1].min(st[st.len() - 1]));
    let inside = mt.iter().filter(|&&t| t >= w0 && t <= w1).count();
    if w1 <= w0 || inside == 0 {
        return Err(Failure::Input(anyhow!(
            "{}: the bench log covers {:.1} … {:.1} s of simulated time (with --offset {}), the run {:.1} … {:.1} s: they do not overlap; set --offset to the simulated time of the bench log's first sample",
            a.bench.display(),
            mt[0],
            mt[mt.len() - 1],
            a.offset,
            st[0],
            st[st.len() - 1]
        )));
    }
    let col = |t: &Table, k: usize| t.values[k].clone().unwrap_or_default();
    let (sv, si, ss) = (col(&sim, 0), col(&sim, 1), sim.values[2].clone());
    let (mv, mi, ms) = (col(&bench, 0), col(&bench, 1), bench.values[2].clone());
    let series = |v: &'_ [f64]| -> Vec<f64> { v.to_vec() };
    let sim_v = series(&sv);
    let sim_i = series(&si);
    let s_v = Series {
        time_s: st,
        values: &sim_v,
    };
    let s_i = Series {
        time_s: st,
        values: &sim_i,
    };
    let none = || Failure::Other(anyhow!("no bench sample inside the window"));
    let e_v = channel_error(&s_v, &mt, &mv, w0, w1, "V").ok_or_else(none)?;
    let e_i = channel_error(&s_i, &mt, &mi, w0, w1, "A").ok_or_else(none)?;
    let mut notes = Vec::new();
    let e_soc = match (&ss, &ms) {
        (Some(s), Some(m)) => channel_error(
            &Series {
                time_s: st,
                values: s,
            },
            &mt,
            m,
            w0,
            w1,
            "",
        ),
        (None, Some(_)) => {
            notes.push("the run's trace has no soc column: SOC not compared".into());
            None
        }
        _ => None,
    };
    // Charge and energy over the window, each series integrated as the piecewise-linear curve
    // through its own samples.
    let m_i = Series {
        time_s: &mt,
        values: &mi,
    };
    let q_meas = m_i.integral(w0, w1);
    let q_sim = s_i.integral(w0, w1);
    let p_meas: Vec<f64> = mv.iter().zip(&mi).map(|(v, i)| v * i).collect();
    let p_sim: Vec<f64> = sim_v.iter().zip(&sim_i).map(|(v, i)| v * i).collect();
    let e_meas = Series {
        time_s: &mt,
        values: &p_meas,
    }
    .integral(w0, w1);
    let e_sim = Series {
        time_s: st,
        values: &p_sim,
    }
    .integral(w0, w1);
    let charge_error_pct = percent_error(q_sim, q_meas, CHARGE_FLOOR_AS);
    if charge_error_pct.is_none() {
        notes.push(
            "the bench log shows no charge over the window: no charge error in per cent".into(),
        );
    }
    let (setup, profile) = run_names(&a.run_dir);
    let mut rms = std::collections::BTreeMap::new();
    let mut worst = std::collections::BTreeMap::new();
    for (k, e) in [
        ("battery_v", Some(e_v)),
        ("battery_current_a", Some(e_i)),
        ("soc", e_soc),
    ] {
        if let Some(e) = e {
            rms.insert(k, e.rms);
            worst.insert(k, e.worst);
        }
    }
    let report_json = Comparison {
        run_dir: a.run_dir.display().to_string(),
        bench_log: a.bench.display().to_string(),
        setup: setup.clone(),
        profile: profile.clone(),
        offset_s: a.offset,
        window_start_s: w0,
        window_end_s: w1,
        bench_samples: inside,
        trace_rows: st.len(),
        channels: Channels {
            battery_v: e_v,
            battery_current_a: e_i,
            soc: e_soc,
        },
        rms,
        worst,
        charge_measured_ah: q_meas / 3600.0,
        charge_simulated_ah: q_sim / 3600.0,
        charge_error_pct,
        energy_measured_wh: e_meas / 3600.0,
        energy_simulated_wh: e_sim / 3600.0,
        energy_error_pct: percent_error(e_sim, e_meas, CHARGE_FLOOR_AS),
        method: "errors are simulated minus measured at each bench sample inside the window, the simulated value by linear interpolation of the trace; charge and energy integrate each series as the piecewise-linear curve through its own samples over the window",
        notes: notes.clone(),
    };
    staging
        .write(
            "comparison.json",
            &to_json(&report_json).map_err(|e| Failure::Other(e.into()))?,
        )
        .map_err(|e| Failure::Other(e.into()))?;

    let title = match (&setup, &profile) {
        (Some(s), Some(p)) => format!("{s} / {p} against {}", file_name(&a.bench)),
        _ => format!("Run against {}", file_name(&a.bench)),
    };
    let mut charts = Vec::new();
    if !a.no_plot {
        let pts = |t: &[f64], v: &[f64]| -> Vec<(f64, f64)> {
            t.iter()
                .zip(v)
                .filter(|(t, _)| **t >= w0 && **t <= w1)
                .map(|(t, v)| (*t, *v))
                .collect()
        };
        let mut panels = vec![
            OverlayPanel {
                caption: "Battery voltage".into(),
                y_desc: "battery_v [V]".into(),
                simulated: pts(st, &sim_v),
                measured: pts(&mt, &mv),
            },
            OverlayPanel {
                caption: "Battery current".into(),
                y_desc: "battery_current_a [A]".into(),
                simulated: pts(st, &sim_i),
                measured: pts(&mt, &mi),
            },
        ];
        if let (Some(s), Some(m), Some(_)) = (&ss, &ms, e_soc) {
            panels.push(OverlayPanel {
                caption: "State of charge".into(),
                y_desc: "soc".into(),
                simulated: pts(st, s),
                measured: pts(&mt, m),
            });
        }
        let chart = overlay_chart(&panels, &title).map_err(|e| Failure::Other(e.into()))?;
        staging
            .write("comparison.png", &chart.png)
            .map_err(|e| Failure::Other(e.into()))?;
        staging
            .write("comparison.svg", chart.svg.as_bytes())
            .map_err(|e| Failure::Other(e.into()))?;
        charts.push((
            chart.svg,
            "Simulated (solid) and measured (dashed) battery channels over the time both logs cover."
                .to_string(),
        ));
    }
    let mut rows: Vec<Vec<String>> = Vec::new();
    for (name, e) in [
        ("battery_v", Some(e_v)),
        ("battery_current_a", Some(e_i)),
        ("soc", e_soc),
    ] {
        if let Some(e) = e {
            rows.push(vec![
                name.to_string(),
                format!("{:.4}", e.rms),
                format!("{:.4}", e.worst),
                format!("{:.1}", e.worst_at_s),
                format!("{:+.4}", e.mean),
                e.unit.to_string(),
            ]);
        }
    }
    let pct = |p: Option<f64>| p.map_or_else(|| "n/a".to_string(), |p| format!("{p:+.2} %"));
    let facts = vec![
        ("run".to_string(), a.run_dir.display().to_string()),
        ("bench log".into(), a.bench.display().to_string()),
        (
            "window".into(),
            format!(
                "{w0:.1} … {w1:.1} s of simulated time ({inside} bench samples, offset {} s)",
                a.offset
            ),
        ),
        (
            "charge into the battery".into(),
            format!(
                "simulated {:.4} Ah, measured {:.4} Ah ({})",
                q_sim / 3600.0,
                q_meas / 3600.0,
                pct(charge_error_pct)
            ),
        ),
        (
            "energy into the battery".into(),
            format!(
                "simulated {:.3} Wh, measured {:.3} Wh ({})",
                e_sim / 3600.0,
                e_meas / 3600.0,
                pct(report_json.energy_error_pct)
            ),
        ),
    ];
    let page = pages::data_page(
        "crankcharge compare-measured",
        &title,
        facts,
        notes.clone(),
        (
            ["channel", "rms", "worst", "worst at [s]", "mean", "unit"]
                .map(String::from)
                .to_vec(),
            rows.clone(),
        ),
        charts,
        Vec::new(),
    );
    staging
        .write("report.html", report::render(&page).as_bytes())
        .map_err(|e| Failure::Other(e.into()))?;
    let dir = staging.commit().map_err(|e| Failure::Other(e.into()))?;

    say(&format!(
        "compare-measured: {} against {}, {w0:.1} … {w1:.1} s ({inside} bench samples)",
        a.run_dir.display(),
        a.bench.display()
    ));
    say("  channel             rms        worst      at [s]     mean (sim - meas)");
    for r in &rows {
        say(&format!(
            "  {:<18} {:>10} {:>10} {:>9} {:>10} {}",
            r[0], r[1], r[2], r[3], r[4], r[5]
        ));
    }
    say(&format!(
        "  charge: simulated {:.4} Ah, measured {:.4} Ah, error {}",
        q_sim / 3600.0,
        q_meas / 3600.0,
        pct(charge_error_pct)
    ));
    for n in &notes {
        say(&format!("  note: {n}"));
    }
    say(&format!("  wrote {}", dir.display()));
    Ok(EXIT_OK)
}

fn file_name(p: &Path) -> String {
    p.file_name().map_or_else(
        || p.display().to_string(),
        |n| n.to_string_lossy().into_owned(),
    )
}
