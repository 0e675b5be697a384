//! `fit-generator`: back-EMF constant and armature resistance of a PMDC generator from measured
//! points, by least squares on V = k_e·ω − R·I; with `--kind three_phase_pm`, a three-phase
//! alternator on its bridge (`fit_alternator`). Cost: reading one CSV file; no simulation.
//!
//! The file has a header with at least the columns `rpm`, `voltage_v` and `current_a` (any order,
//! more columns are ignored; lines starting with `#` are comments). Open-circuit points have
//! current 0; loaded points give the current the generator delivered. Prints k_e (V/krpm) and R
//! (Ω) with their standard errors, the residual of each point and a RON fragment for the setup's
//! `generator` section; `--json` prints the same as JSON.

use std::path::PathBuf;

use anyhow::anyhow;
use clap::Args;
use serde::Serialize;

use super::fit_print::{residual_table, sig};
use super::outcome::{say, Failure, EXIT_OK};
use crate::analysis::fit::{fit_generator, GeneratorFit, Measurement};
use crate::model::generator::COPPER_ALPHA_PER_K;
use crate::text::{excerpt, EXCERPT_CHARS};

/// Column names the file must have.
pub const COLUMNS: [&str; 3] = ["rpm", "voltage_v", "current_a"];

/// Arguments of `fit-generator`.
#[derive(Debug, Clone, Args)]
pub struct FitArgs {
    /// CSV file with columns rpm, voltage_v, current_a (current 0 for open-circuit points).
    pub measurements: PathBuf,
    /// Winding temperature during the measurements, °C; the resistance is reported at 20 °C
    /// (copper, 0.393 %/K) as the setup expects (default 20: no correction).
    #[arg(long, default_value_t = 20.0, allow_hyphen_values = true, value_parser = parse_winding_c)]
    pub winding_c: f64,
    /// Print the fit as JSON.
    #[arg(long)]
    pub json: bool,
    /// The generator: brushed_dc (default) or three_phase_pm (voltages and currents measured on
    /// the DC side of its six-diode bridge; open-circuit points are the no-load average, 1.35 ×
    /// the line-to-line RMS voltage).
    #[arg(long, value_enum, default_value = "brushed_dc")]
    pub kind: FitKind,
    /// three_phase_pm: the alternator's pole pairs (sets the electrical frequency, for its
    /// inductance).
    #[arg(long)]
    pub pole_pairs: Option<u32>,
    /// three_phase_pm: forward drop of each bridge diode at the loaded points, V (two conduct);
    /// default 0 (voltages taken before the diodes' drop).
    #[arg(long, default_value_t = 0.0, value_parser = parse_diode_drop)]
    pub diode_drop_v: f64,
}

/// Which machine `fit-generator` fits.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum FitKind {
    #[value(name = "brushed_dc")]
    BrushedDc,
    #[value(name = "three_phase_pm")]
    ThreePhasePm,
}

fn parse_diode_drop(s: &str) -> Result<f64, String> {
    let v: f64 = s
        .trim()
        .parse()
        .map_err(|_| format!("'{s}' is not a voltage in V"))?;
    if (0.0..=2.0).contains(&v) {
        Ok(v)
    } else {
        Err(format!("{v} V is out of range; allowed 0 ..= 2"))
    }
}

fn parse_winding_c(s: &str) -> Result<f64, String> {
    let v: f64 = s
        .trim()
        .parse()
        .map_err(|_| format!("'{s}' is not a temperature in °C"))?;
    if (-40.0..=200.0).contains(&v) {
        Ok(v)
    } else {
        Err(format!("{v} °C is out of range; allowed -40 ..= 200"))
    }
}

/// The JSON form of a fit.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct FitReport {
    pub file: String,
    pub n: usize,
    pub back_emf_v_per_krpm: f64,
    pub back_emf_se_v_per_krpm: f64,
    /// k_e in SI (equal to the torque constant), V·s/rad.
    pub back_emf_v_s_per_rad: f64,
    /// Resistance referred to 20 °C, Ω.
    pub resistance_ohm: f64,
    pub resistance_se_ohm: f64,
    /// Resistance at the measurement temperature, Ω.
    pub resistance_at_measurement_ohm: f64,
    pub winding_c: f64,
    pub correlation: f64,
    pub rms_residual_v: f64,
    pub max_abs_residual_v: f64,
    pub residuals_v: Vec<f64>,
}

/// Executes `fit-generator`.
pub fn run(a: &FitArgs) -> Result<i32, Failure> {
    let name = a.measurements.display().to_string();
    let text = std::fs::read_to_string(&a.measurements)
        .map_err(|e| Failure::Input(anyhow!("could not read '{name}': {e}")))?;
    let points = parse_measurements(&name, &text).map_err(Failure::Input)?;
    if a.kind == FitKind::ThreePhasePm {
        return run_alternator(a, &name, &points);
    }
    if a.pole_pairs.is_some() {
        return Err(Failure::Input(anyhow!(
            "--pole-pairs: only with --kind three_phase_pm"
        )));
    }
    let fit = fit_generator(&points).map_err(|e| Failure::Input(anyhow!("{name}: {e}")))?;
    let report = report(&name, &fit, a.winding_c);
    if a.json {
        let s = serde_json::to_string_pretty(&report)
            .map_err(|e| Failure::Other(anyhow!("could not format JSON: {e}")))?;
        say(&s);
    } else {
        print_fit(&report, &points);
    }
    Ok(EXIT_OK)
}

/// `fit-generator --kind three_phase_pm`.
fn run_alternator(a: &FitArgs, name: &str, points: &[Measurement]) -> Result<i32, Failure> {
    let Some(pole_pairs) = a.pole_pairs else {
        return Err(Failure::Input(anyhow!(
            "--pole-pairs: required with --kind three_phase_pm (1 ..= 100)"
        )));
    };
    if !(1..=100).contains(&pole_pairs) {
        return Err(Failure::Input(anyhow!(
            "--pole-pairs {pole_pairs} is out of range; allowed 1 ..= 100"
        )));
    }
    let fit = crate::studies::fit_alternator::fit_alternator(points, pole_pairs, a.diode_drop_v)
        .map_err(|e| Failure::Input(anyhow!("{name}: {e}")))?;
    let r =
        crate::studies::fit_alternator::report(name, &fit, pole_pairs, a.diode_drop_v, a.winding_c);
    if a.json {
        let s = serde_json::to_string_pretty(&r)
            .map_err(|e| Failure::Other(anyhow!("could not format JSON: {e}")))?;
        say(&s);
    } else {
        crate::studies::fit_alternator::print(&r, points);
    }
    Ok(EXIT_OK)
}

fn report(name: &str, f: &GeneratorFit, winding_c: f64) -> FitReport {
    let to20 = 1.0 / (1.0 + COPPER_ALPHA_PER_K * (winding_c - 20.0));
    FitReport {
        file: name.to_string(),
        n: f.n,
        back_emf_v_per_krpm: f.ke_v_per_krpm(),
        back_emf_se_v_per_krpm: f.ke_se_v_per_krpm(),
        back_emf_v_s_per_rad: f.ke_v_s_per_rad,
        resistance_ohm: f.resistance_ohm * to20,
        resistance_se_ohm: f.resistance_se_ohm * to20,
        resistance_at_measurement_ohm: f.resistance_ohm,
        winding_c,
        correlation: f.correlation,
        rms_residual_v: f.rms_residual_v,
        max_abs_residual_v: f.residuals_v.iter().fold(0.0, |m, r| m.max(r.abs())),
        residuals_v: f.residuals_v.clone(),
    }
}

/// The header's column names for a message: each cut to a short excerpt, at most eight of them.
fn found_columns(headers: &csv::StringRecord) -> String {
    let mut names: Vec<String> = headers.iter().take(8).map(|h| excerpt(h, 24)).collect();
    if headers.len() > 8 {
        names.push(format!("… {} columns in all", headers.len()));
    }
    excerpt(&names.join(", "), 2 * EXCERPT_CHARS)
}

/// Reads the measurement CSV; errors name the file, line and column.
pub fn parse_measurements(name: &str, text: &str) -> anyhow::Result<Vec<Measurement>> {
    let mut rdr = csv::ReaderBuilder::new()
        .comment(Some(b'#'))
        .trim(csv::Trim::All)
        .from_reader(text.as_bytes());
    let headers = rdr
        .headers()
        .map_err(|e| anyhow!("{name}: could not read the header line: {e}"))?
        .clone();
    let find = |col: &str| headers.iter().position(|h| h == col);
    let idx: Vec<usize> = COLUMNS
        .iter()
        .map(|c| {
            find(c).ok_or_else(|| {
                anyhow!(
                    "{name}: no column `{c}` in the header (found: {}); the file needs columns {}",
                    found_columns(&headers),
                    COLUMNS.join(", ")
                )
            })
        })
        .collect::<anyhow::Result<_>>()?;
    let mut points = Vec::new();
    for rec in rdr.records() {
        let rec = rec.map_err(|e| {
            let line = e.position().map_or(0, |p| p.line());
            anyhow!("{name}:{line}: {e}")
        })?;
        let line = rec.position().map_or(0, |p| p.line());
        let mut vals = [0.0; 3];
        for (k, &i) in idx.iter().enumerate() {
            let cell = rec.get(i).unwrap_or("");
            let v: f64 = cell.parse().map_err(|_| {
                anyhow!(
                    "{name}:{line}: column {} (`{}`): '{}' is not a number",
                    i + 1,
                    COLUMNS[k],
                    excerpt(cell, EXCERPT_CHARS)
                )
            })?;
            if !v.is_finite() {
                return Err(anyhow!(
                    "{name}:{line}: column {} (`{}`): '{}' is not a finite number",
                    i + 1,
                    COLUMNS[k],
                    excerpt(cell, EXCERPT_CHARS)
                ));
            }
            vals[k] = v;
        }
        if vals[0] < 0.0 {
            return Err(anyhow!(
                "{name}:{line}: column {} (`rpm`) = {} is negative; allowed >= 0 (give the speed's size; the model assumes the generator turns forward)",
                idx[0] + 1,
                vals[0]
            ));
        }
        points.push(Measurement {
            rpm: vals[0],
            voltage_v: vals[1],
            current_a: vals[2],
        });
    }
    Ok(points)
}

fn print_fit(r: &FitReport, points: &[Measurement]) {
    say(&format!(
        "fit-generator: {} points from {} (model V = k_e·ω − R·I)",
        r.n, r.file
    ));
    say(&format!(
        "  back-EMF constant k_e = {} ± {:.2e} V/krpm  ({:.6} V·s/rad)",
        sig(r.back_emf_v_per_krpm),
        r.back_emf_se_v_per_krpm,
        r.back_emf_v_s_per_rad
    ));
    if (r.winding_c - 20.0).abs() > 0.0 {
        say(&format!(
            "  resistance R = {} ± {:.2e} Ω at 20 °C  ({} Ω at {} °C)",
            sig(r.resistance_ohm),
            r.resistance_se_ohm,
            sig(r.resistance_at_measurement_ohm),
            r.winding_c
        ));
    } else {
        say(&format!(
            "  resistance R = {} ± {:.2e} Ω (taken as 20 °C; see --winding-c)",
            sig(r.resistance_ohm),
            r.resistance_se_ohm
        ));
    }
    say(&format!(
        "  correlation of the two estimates {:.3}; rms residual {:.3e} V, largest {:.3e} V",
        r.correlation, r.rms_residual_v, r.max_abs_residual_v
    ));
    say("");
    residual_table(points, &r.residuals_v);
    say("");
    say("  RON fragment for the setup's generator section:");
    say("    generator: (");
    say(&format!(
        "        back_emf_v_per_krpm: {},",
        sig(r.back_emf_v_per_krpm)
    ));
    say(&format!(
        "        resistance_ohm: {},",
        sig(r.resistance_ohm)
    ));
    say("        // keep inductance_h, inertia_kg_m2 and the rest of the section as they are");
    say("    ),");
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reads_columns_in_any_order_and_skips_comments() {
        let text = "# bench run\ncurrent_a, note, rpm, voltage_v\n0, open, 1000, 12\n1.5, loaded, 1200, 12.1\n";
        let p = parse_measurements("m.csv", text).expect("parsed");
        assert_eq!(p.len(), 2);
        assert_eq!(p[1].rpm, 1200.0);
        assert_eq!(p[1].voltage_v, 12.1);
        assert_eq!(p[1].current_a, 1.5);
    }

    #[test]
    fn errors_name_line_and_column() {
        let e = parse_measurements("m.csv", "rpm,voltage_v,current_a\n100,1,0\n200,x,0\n")
            .unwrap_err()
            .to_string();
        assert!(e.contains("m.csv:3"), "{e}");
        assert!(e.contains("column 2 (`voltage_v`)"), "{e}");
        let e = parse_measurements("m.csv", "rpm,volts,current_a\n")
            .unwrap_err()
            .to_string();
        assert!(e.contains("no column `voltage_v`"), "{e}");
        let e = parse_measurements("m.csv", "rpm,voltage_v,current_a\n-5,1,0\n")
            .unwrap_err()
            .to_string();
        assert!(e.contains("negative"), "{e}");
    }

    #[test]
    fn six_significant_digits() {
        assert_eq!(sig(12.034567), "12.0346");
        assert_eq!(sig(1.5), "1.50000");
        assert_eq!(sig(0.0123456789), "0.0123457");
    }
}
