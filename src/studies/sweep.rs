//! `sweep`: one session per value of one setup or profile field, changed by the same mechanism as
//! `--set KEY=VALUE`. Cost: one session per value (run in parallel), then one chart.
//!
//! Every value is applied and validated before the first session runs, so a bad KEY or value
//! exits 2 at once. Rows go into `<out>/sweep.csv` (column KEY, then the summary scalars) as the
//! sessions finish, in value order, each flushed to disk: a late failure or an interrupted sweep
//! keeps every row already done. Because of that the sweep writes straight into its folder
//! (no staging folder): an earlier sweep's files there are replaced from the start. The chart
//! (`sweep.png`/`sweep.svg`: charge delivered, in-regulation fraction and mean operator power
//! against the parameter) is written at the end.

use std::collections::BTreeMap;
use std::fs;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::Mutex;

use anyhow::{anyhow, Context};
use clap::{ArgGroup, Args};
use rayon::prelude::*;

use super::outcome::{say, Failure, EXIT_OK, EXIT_SIM};
use crate::analysis::summary::{Summary, SCALAR_KEYS};
use crate::output::plot::{self, SweepSeries};
use crate::output::{report, rundir};
use crate::scenario::load::Override;
use crate::scenario::Scenario;

use super::args::{scenario_from, session_or_failure, settings_from, SessionArgs};
use super::check::build_plant;
use super::compare::aligned_table;
use super::digest::reruns_note;
use super::pages;
use super::session::Session;

/// Most values one sweep may have.
pub const MAX_POINTS: usize = 10_000;

/// Arguments of `sweep`.
#[derive(Debug, Clone, Args)]
#[command(group(ArgGroup::new("grid").required(true).args(["values", "range"])))]
pub struct SweepArgs {
    /// Setup file (.ron) or shipped name; none sweeps the embedded demo.
    pub setup: Option<String>,
    /// Field to vary, by its dotted path as for --set (e.g. drive.stages.0.ratio, profile.cadence_scale).
    #[arg(long, value_name = "KEY")]
    pub param: String,
    /// Values to try, comma-separated (e.g. 15,20,25,30).
    #[arg(
        long,
        value_delimiter = ',',
        allow_hyphen_values = true,
        value_name = "A,B,C"
    )]
    pub values: Vec<String>,
    /// Evenly spaced values FROM:TO:STEPS, STEPS values including both ends (12:24:4 gives 12, 16, 20, 24).
    #[arg(long, value_parser = parse_range, allow_hyphen_values = true, value_name = "FROM:TO:STEPS")]
    pub range: Option<Grid>,
    #[command(flatten)]
    pub session: SessionArgs,
    /// Output folder (default: outputs/sweep).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Skip the chart.
    #[arg(long)]
    pub no_plot: bool,
}

/// An evenly spaced grid from `--range`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Grid {
    pub from: f64,
    pub to: f64,
    pub steps: usize,
}

impl Grid {
    /// The grid values as override text (rounded to 12 significant digits, so 0.1 steps print
    /// as 0.3 and not 0.30000000000000004); the ends are exact.
    pub fn values(&self) -> Vec<String> {
        (0..self.steps)
            .map(|k| {
                let v = if k + 1 == self.steps {
                    self.to
                } else {
                    self.from + (self.to - self.from) * k as f64 / (self.steps - 1) as f64
                };
                short_number(v)
            })
            .collect()
    }
}

/// Shortest text of `v` rounded to 12 significant digits.
pub fn short_number(v: f64) -> String {
    let rounded: f64 = format!("{v:.11e}").parse().unwrap_or(v);
    let s = format!("{rounded}");
    if s == "-0" {
        "0".to_string()
    } else {
        s
    }
}

/// Parses `FROM:TO:STEPS`.
pub fn parse_range(s: &str) -> Result<Grid, String> {
    let parts: Vec<&str> = s.split(':').map(str::trim).collect();
    let [from, to, steps] = parts.as_slice() else {
        return Err(format!("expected FROM:TO:STEPS (e.g. 12:24:4), got '{s}'"));
    };
    let num = |t: &str, what: &str| -> Result<f64, String> {
        t.parse::<f64>()
            .ok()
            .filter(|v| v.is_finite())
            .ok_or_else(|| format!("{what} '{t}' in '{s}' is not a finite number"))
    };
    let from = num(from, "FROM")?;
    let to = num(to, "TO")?;
    let steps: usize = steps.parse().map_err(|_| {
        format!("STEPS '{steps}' in '{s}' must be a whole number of values, 2 ..= {MAX_POINTS}")
    })?;
    if !(2..=MAX_POINTS).contains(&steps) {
        return Err(format!(
            "STEPS = {steps} in '{s}' is out of range; allowed 2 ..= {MAX_POINTS} (use --values for a single value)"
        ));
    }
    Ok(Grid { from, to, steps })
}

/// A finished or failed point.
type Outcome = Result<Session, Failure>;

/// Rows waiting for the ones before them; writes the longest finished prefix.
struct OrderedWriter {
    csv: csv::Writer<fs::File>,
    next: usize,
    pending: BTreeMap<usize, Option<Vec<String>>>,
    error: Option<String>,
}

impl OrderedWriter {
    /// Adds the row of point `k` (None: that point failed) and writes what is now in order.
    fn add(&mut self, k: usize, row: Option<Vec<String>>) {
        self.pending.insert(k, row);
        while let Some(row) = self.pending.remove(&self.next) {
            if let Some(row) = row {
                let r = self.csv.write_record(&row).and_then(|_| {
                    self.csv.flush()?;
                    Ok(())
                });
                if let Err(e) = r {
                    self.error.get_or_insert_with(|| e.to_string());
                }
            }
            self.next += 1;
        }
    }
}

/// Executes `sweep`.
pub fn run(a: &SweepArgs) -> Result<i32, Failure> {
    let values = match &a.range {
        Some(g) => g.values(),
        None => a.values.iter().map(|v| v.trim().to_string()).collect(),
    };
    if values.is_empty() || values.iter().any(String::is_empty) {
        return Err(Failure::Input(anyhow!(
            "--values: give one or more comma-separated values, none empty (e.g. --values 15,20,25)"
        )));
    }
    if values.len() > MAX_POINTS {
        return Err(Failure::Input(anyhow!(
            "--values: {} values; allowed at most {MAX_POINTS}",
            values.len()
        )));
    }
    let key = a.param.trim().to_string();
    // The base inputs first, so their errors are reported as such.
    scenario_from(a.setup.as_deref(), &a.session)?;
    let mut scenarios: Vec<Scenario> = Vec::with_capacity(values.len());
    for v in &values {
        let mut sa = a.session.clone();
        sa.set.push(Override {
            key: key.clone(),
            value: v.clone(),
        });
        let sc = scenario_from(a.setup.as_deref(), &sa).map_err(|f| match f {
            Failure::Input(e) => Failure::Input(anyhow!("--param {key} = {v}: {e:#}")),
            other => other,
        })?;
        build_plant(&sc).map_err(|f| match f {
            Failure::Input(e) => Failure::Input(anyhow!("--param {key} = {v}: {e:#}")),
            other => other,
        })?;
        scenarios.push(sc);
    }
    let out = a
        .out
        .clone()
        .unwrap_or_else(|| PathBuf::from("outputs").join("sweep"));
    rundir::claim(&out, a.session.force).map_err(|e| Failure::Input(e.into()))?;
    let csv_path = out.join("sweep.csv");
    let writer = open_sweep_csv(&out, &key).map_err(Failure::Input)?;
    let writer = Mutex::new(writer);

    let settings = settings_from(&a.session);
    let bar =
        super::progress::CountBar::new(scenarios.len() as u64, "sweep", "values", a.session.quiet);
    let results: Vec<Outcome> = scenarios
        .par_iter()
        .enumerate()
        .map(|(k, sc)| {
            let r = session_or_failure(sc, &settings);
            let row = r.as_ref().ok().map(|s| {
                let mut row = vec![values[k].clone()];
                row.extend(s.summary.scalar_values());
                row.extend([
                    s.summary.setup.clone(),
                    s.summary.profile.clone(),
                    s.summary.seed.to_string(),
                ]);
                row
            });
            writer
                .lock()
                .unwrap_or_else(std::sync::PoisonError::into_inner)
                .add(k, row);
            bar.inc();
            r
        })
        .collect();
    bar.finish();
    let writer = writer
        .into_inner()
        .unwrap_or_else(std::sync::PoisonError::into_inner);
    if let Some(e) = &writer.error {
        return Err(Failure::Other(anyhow!(
            "could not write '{}': {e}",
            csv_path.display()
        )));
    }
    drop(writer);

    let mut done: Vec<(usize, Session)> = Vec::new();
    let mut failed: Vec<String> = Vec::new();
    for (k, r) in results.into_iter().enumerate() {
        match r {
            Ok(s) => done.push((k, s)),
            Err(e) => failed.push(format!("{key} = {}: {e}", values[k])),
        }
    }
    let mut charts = Vec::new();
    if !a.no_plot && !done.is_empty() {
        let svg = write_chart(&out, &key, &values, &done).map_err(Failure::Other)?;
        charts.push((
            svg,
            format!("Charge, time in regulation and mean operator power against {key}."),
        ));
    }
    let rows: Vec<Vec<String>> = done
        .iter()
        .map(|(k, s)| table_row(&values[*k], &s.summary))
        .collect();
    let reruns = done
        .iter()
        .filter(|(_, s)| s.summary.solver.tolerance_reruns > 0)
        .count();
    let rerun_note = reruns_note(reruns, done.len(), "sweep.csv");
    if let Some((k0, _)) = done.first() {
        let page = pages::study_page(
            &scenarios.iter().collect::<Vec<_>>()[*k0..=*k0],
            "crankcharge sweep",
            &format!("Sweep of {key}"),
            (table_header(&key), rows.clone()),
            charts,
            failed
                .iter()
                .map(|f| format!("Failed and left out: {f}"))
                .chain(rerun_note.iter().map(|n| format!("Note: {n}.")))
                .collect(),
        );
        write_renamed(&out, "report.html", report::render(&page).as_bytes())
            .map_err(Failure::Other)?;
    }
    let header = table_header(&key);
    let header: Vec<&str> = header.iter().map(String::as_str).collect();
    let right = [true, true, true, true, true, true, true, false];
    for line in aligned_table(&header, &rows, &right) {
        say(&line);
    }
    say(&format!(
        "{} of {} value(s) done; wrote {}",
        done.len(),
        values.len(),
        out.display()
    ));
    super::progress::note(rerun_note);
    if failed.is_empty() {
        return Ok(EXIT_OK);
    }
    let mut err = std::io::stderr().lock();
    let _ = writeln!(
        err,
        "crankcharge: {} sweep value(s) failed (their rows are missing from sweep.csv):",
        failed.len()
    );
    for f in &failed {
        let _ = writeln!(err, "  {f}");
    }
    if done.is_empty() {
        return Err(Failure::Sim(anyhow!("every value of the sweep failed")));
    }
    Ok(EXIT_SIM)
}

/// Columns after the scalars of `sweep.csv`: which setup, profile and seed each row ran.
const TRACE_KEYS: [&str; 3] = ["setup", "profile", "seed"];

/// The columns of the sweep's table (terminal and report).
fn table_header(key: &str) -> Vec<String> {
    [
        key,
        "charge [Ah]",
        "SOC end",
        "in-regulation [%]",
        "mean [W]",
        "peak [W]",
        "max battery [V]",
        "verdict",
    ]
    .map(String::from)
    .to_vec()
}

fn table_row(value: &str, m: &Summary) -> Vec<String> {
    vec![
        value.to_string(),
        format!("{:.4}", m.charge_delivered_ah),
        format!("{:.3}", m.soc_end),
        crate::analysis::summary::percent_or_na(m.in_regulation_fraction),
        format!("{:.1}", m.mean_operator_power_w),
        format!("{:.1}", m.peak_operator_power_w),
        format!("{:.3}", m.max_battery_v),
        m.verdict.words().join("+"),
    ]
}

/// Creates the folder, removes an earlier sweep's chart and starts `sweep.csv` with its header.
fn open_sweep_csv(out: &Path, key: &str) -> anyhow::Result<OrderedWriter> {
    if out.exists() && !out.is_dir() {
        return Err(anyhow!(
            "cannot write to '{}': it exists and is not a folder",
            out.display()
        ));
    }
    fs::create_dir_all(out).with_context(|| format!("could not create '{}'", out.display()))?;
    let marker = out.join(rundir::MARKER);
    fs::write(&marker, rundir::marker_text("sweep"))
        .with_context(|| format!("could not write '{}'", marker.display()))?;
    for stale in ["sweep.png", "sweep.svg"] {
        let p = out.join(stale);
        if p.exists() {
            fs::remove_file(&p).with_context(|| format!("could not remove '{}'", p.display()))?;
        }
    }
    let path = out.join("sweep.csv");
    let file = fs::File::create(&path)
        .with_context(|| format!("could not create '{}'", path.display()))?;
    let mut csv = csv::WriterBuilder::new()
        .terminator(csv::Terminator::Any(b'\n'))
        .from_writer(file);
    let mut header = vec![key.to_string()];
    header.extend(SCALAR_KEYS.iter().map(|k| k.to_string()));
    header.extend(TRACE_KEYS.map(String::from));
    csv.write_record(&header)
        .and_then(|_| Ok(csv.flush()?))
        .with_context(|| format!("could not write '{}'", path.display()))?;
    Ok(OrderedWriter {
        csv,
        next: 0,
        pending: BTreeMap::new(),
        error: None,
    })
}

/// Writes one file of the sweep folder under a temporary name, then renames it into place; the
/// temporary file is registered so an interrupt removes it.
fn write_renamed(out: &Path, name: &str, bytes: &[u8]) -> anyhow::Result<()> {
    let tmp = out.join(format!(".{name}.partial"));
    let dst = out.join(name);
    rundir::register(&tmp);
    let written = fs::write(&tmp, bytes)
        .with_context(|| format!("could not write '{}'", tmp.display()))
        .and_then(|()| {
            fs::rename(&tmp, &dst).with_context(|| format!("could not write '{}'", dst.display()))
        });
    if written.is_err() {
        let _ = fs::remove_file(&tmp);
    }
    rundir::unregister(&tmp);
    written
}

/// Writes `sweep.png`/`.svg` and returns the SVG text.
fn write_chart(
    out: &Path,
    key: &str,
    values: &[String],
    done: &[(usize, Session)],
) -> anyhow::Result<String> {
    let numeric: Option<Vec<f64>> = done
        .iter()
        .map(|(k, _)| values[*k].parse::<f64>().ok().filter(|v| v.is_finite()))
        .collect();
    // Words (a chemistry, a topology) are drawn as categories, each in its own slot.
    let categorical = numeric.is_none();
    let xs = numeric.unwrap_or_else(|| done.iter().map(|(k, _)| *k as f64).collect());
    let label = key.to_string();
    let pick =
        |f: fn(&Summary) -> f64| -> Vec<f64> { done.iter().map(|(_, s)| f(&s.summary)).collect() };
    let charge = pick(|m| m.charge_delivered_ah);
    let reg = pick(|m| m.in_regulation_fraction.unwrap_or(f64::NAN));
    let power = pick(|m| m.mean_operator_power_w);
    let first = &done[0].1.summary;
    let series = SweepSeries {
        param: &label,
        values: &xs,
        charge_ah: &charge,
        in_regulation: &reg,
        mean_power_w: &power,
    };
    let title = format!("Sweep of {key}: {} / {}", first.setup, first.profile);
    let chart = if categorical {
        plot::sweep_chart_categories(&series, values, &title)?
    } else {
        plot::sweep_chart(&series, &title)?
    };
    write_renamed(out, "sweep.png", &chart.png)?;
    write_renamed(out, "sweep.svg", chart.svg.as_bytes())?;
    Ok(chart.svg)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn range_gives_both_ends_and_clean_steps() {
        let g = parse_range("0.1:0.5:5").expect("grid");
        assert_eq!(g.values(), ["0.1", "0.2", "0.3", "0.4", "0.5"]);
        let g = parse_range("12:24:4").expect("grid");
        assert_eq!(g.values(), ["12", "16", "20", "24"]);
        let g = parse_range("-1:1:3").expect("grid");
        assert_eq!(g.values(), ["-1", "0", "1"]);
    }

    #[test]
    fn rows_reach_the_file_in_value_order_as_soon_as_their_turn_comes() {
        let dir = tempfile::tempdir().expect("temp dir");
        let mut w = open_sweep_csv(dir.path(), "k").expect("open");
        let path = dir.path().join("sweep.csv");
        let lines = || {
            std::fs::read_to_string(&path)
                .expect("read")
                .lines()
                .count()
        };
        let row = |first: &str| {
            let mut r = vec![first.to_string()];
            r.extend(SCALAR_KEYS.iter().map(|_| "0".to_string()));
            r.extend(TRACE_KEYS.map(|_| "x".to_string()));
            Some(r)
        };
        assert_eq!(lines(), 1, "header written and flushed at once");
        w.add(1, row("b"));
        assert_eq!(lines(), 1, "row 1 waits for row 0");
        w.add(0, row("a"));
        assert_eq!(lines(), 3, "rows 0 and 1 on disk");
        w.add(2, None);
        w.add(3, row("d"));
        let text = std::fs::read_to_string(&path).expect("read");
        let firsts: Vec<&str> = text
            .lines()
            .map(|l| l.split(',').next().unwrap_or(""))
            .collect();
        assert_eq!(
            firsts,
            ["k", "a", "b", "d"],
            "a failed point leaves no row and blocks nothing"
        );
        assert!(w.error.is_none(), "{:?}", w.error);
    }

    #[test]
    fn bad_ranges_say_what_is_wrong() {
        assert!(parse_range("1:2").unwrap_err().contains("FROM:TO:STEPS"));
        assert!(parse_range("a:2:3").unwrap_err().contains("FROM 'a'"));
        assert!(parse_range("1:2:1").unwrap_err().contains("2 ..="));
        assert!(parse_range("1:2:x").unwrap_err().contains("whole number"));
        assert!(parse_range("1:inf:3").unwrap_err().contains("TO"));
    }
}
