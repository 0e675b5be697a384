//! `check`'s cadence operating map: over the whole cadence range a profile produces, the steady
//! chain at each crank cadence (battery at its start state, winding at ambient): generator EMF,
//! converter input, the charge current the design achieves there, and what limits it.
//!
//! The range is the profile's planned targets (every segment and ramp, times `cadence_scale`),
//! widened by the cadence wander its jitter actually draws (the profile's seed, the whole
//! session), by ±2 standard deviations of the population's own cadence offsets
//! (`operator.spread.cadence_rpm`, as `montecarlo` and `search` draw them), and downwards to the
//! cadence a tired operator can hold: where the crank power the design takes falls to the
//! critical power of a weak member of the population (CP − 2σ), since with W′ spent an operator
//! holds no more than CP (Monod & Scherrer 1965).

use serde::Serialize;

use crate::analysis::summary::fmt;
use crate::model::battery::li_ion::TempBand;
use crate::model::battery::BatteryState;
use crate::model::jitter::JitterTrack;
use crate::model::network::Load;
use crate::output::plot::design::{operating_map_chart, MapData};
use crate::output::rundir::Staging;
use crate::scenario::profile::Profile;
use crate::scenario::setup::Topology;
use crate::scenario::Scenario;
use crate::simulate::plant::Plant;
use crate::units::rpm_to_rad_s;

use super::check_report::{CadenceRange, Report, CONDUCTION_A};
use super::check_usb::{self, UsbStatics};
use super::statics::Statics;

/// Standard deviations of the population taken into the range (≈ 95 % of operators inside).
const POPULATION_SIGMAS: f64 = 2.0;
/// Wander is sampled this often over the session, s.
const WANDER_SAMPLE_S: f64 = 0.25;
/// Step of the fatigue search, rpm.
const FATIGUE_STEP_RPM: f64 = 0.25;
/// Most rows of a map (the step grows for a wide range).
const MAX_ROWS: usize = 400;

/// One row of `operating_map.csv`.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct MapRow {
    pub crank_rpm: f64,
    pub emf_v: f64,
    pub input_v: f64,
    /// Current into the battery (the device's cell for a USB port) the design achieves, A.
    pub charge_current_a: f64,
    /// The binding cause: `uvlo`, `duty_limit`, `input_floor`, `current_limit`, `charge_limit`,
    /// `input_overvoltage`, `temperature`, `bus_band` (USB), `source` and `no_conduction` (direct).
    pub limit: &'static str,
    pub generator_current_a: f64,
    pub duty: f64,
    pub crank_power_w: f64,
}

/// Planned target at time t (segments played in order, linear ramps), rpm.
fn planned_rpm(p: &Profile, t: f64) -> f64 {
    let mut start = 0.0;
    for s in &p.segments {
        if t < start + s.duration_s {
            let end = s.end_cadence_rpm.unwrap_or(s.cadence_rpm);
            let f = ((t - start) / s.duration_s).clamp(0.0, 1.0);
            return (s.cadence_rpm + (end - s.cadence_rpm) * f) * p.cadence_scale;
        }
        start += s.duration_s;
    }
    p.segments.last().map_or(0.0, |s| {
        s.end_cadence_rpm.unwrap_or(s.cadence_rpm) * p.cadence_scale
    })
}

/// The steady point at one cadence (see [`MapRow::limit`]).
fn point(st: &Statics, report: &Report, bs: &BatteryState, crank_rpm: f64) -> MapRow {
    let plant = st.plant;
    let emf_v = st.emf_v(crank_rpm);
    let c = &plant.charger;
    let off = |limit| (st.solve(crank_rpm, Load::Off, bs), limit);
    let (p, limit) = if let Some(u) = &plant.usb {
        let us = UsbStatics {
            statics: st,
            plant,
            usb: u,
            cell: *bs,
        };
        let band = plant.band(bs.temp_c);
        let demand = check_usb::start_demand_a(plant, bs, band);
        if emf_v < c.uvlo_on_v {
            off("uvlo")
        } else {
            let (p, bus) = us.solve(crank_rpm, demand);
            let limit = if p.input_v < c.uvlo_off_v {
                "uvlo"
            } else if p.dropout {
                "duty_limit"
            } else if !u.in_band(bus.bus_v) {
                "bus_band"
            } else {
                "current_limit"
            };
            (p, limit)
        }
    } else if let Some(conv) = &report.converter {
        let band = plant.band(bs.temp_c);
        if matches!(band, TempBand::TooCold | TempBand::TooHot) {
            off("temperature")
        } else if emf_v < c.uvlo_on_v {
            off("uvlo")
        } else if c.overvoltage_shutdown && emf_v > c.input_overvoltage_v {
            off("input_overvoltage")
        } else {
            let target = conv.start_target_current_a;
            let p = st.solve(crank_rpm, st.buck(target), bs);
            let limit = if p.input_v < c.uvlo_off_v {
                "uvlo"
            } else if p.dropout {
                "duty_limit"
            } else if c.input_floor_v.is_some() && p.battery_current_a < target * (1.0 - 1e-9) {
                "input_floor"
            } else if target < conv.charge_current_a * (1.0 - 1e-9) {
                "charge_limit"
            } else {
                "current_limit"
            };
            (p, limit)
        }
    } else {
        let p = st.solve(crank_rpm, Load::Direct, bs);
        let limit = if p.generator_current_a < CONDUCTION_A {
            "no_conduction"
        } else if p.battery_v >= report.battery.charge_limit_at_ambient_v {
            "charge_limit"
        } else {
            "source"
        };
        (p, limit)
    };
    let locked = matches!(limit, "uvlo" | "temperature" | "input_overvoltage")
        && plant.charger.topology != Topology::Direct
        && p.battery_current_a <= 0.0;
    let torque = st.crank_torque_n_m(crank_rpm, p.generator_current_a);
    MapRow {
        crank_rpm,
        emf_v,
        input_v: p.input_v,
        charge_current_a: if locked {
            0.0
        } else {
            p.battery_current_a.max(0.0)
        },
        limit,
        generator_current_a: p.generator_current_a,
        duty: p.duty,
        crank_power_w: torque * rpm_to_rad_s(crank_rpm),
    }
}

/// The cadence range the scenario's profile produces (see the module notes).
pub(super) fn cadence_range(
    sc: &Scenario,
    st: &Statics,
    report: &Report,
    bs: &BatteryState,
) -> CadenceRange {
    let p = &sc.profile;
    let duration = p.total_duration_s();
    let track = JitterTrack::draw(&p.jitter, p.seed, duration);
    let (mut planned_low, mut planned_high) = (f64::INFINITY, f64::NEG_INFINITY);
    let (mut wander_low, mut wander_high) = (0.0_f64, 0.0_f64);
    let steps = (duration / WANDER_SAMPLE_S).ceil().max(1.0) as usize;
    for k in 0..=steps {
        let t = (k as f64 * WANDER_SAMPLE_S).min(duration);
        let target = planned_rpm(p, t);
        if target <= 0.0 || track.resting(t) {
            continue;
        }
        planned_low = planned_low.min(target);
        planned_high = planned_high.max(target);
        let w = track.wander_rpm(t);
        wander_low = wander_low.min(w);
        wander_high = wander_high.max(w);
    }
    if !planned_low.is_finite() {
        return CadenceRange {
            planned_low_rpm: 0.0,
            planned_high_rpm: 0.0,
            wander_low_rpm: 0.0,
            wander_high_rpm: 0.0,
            population_rpm: 0.0,
            fatigue_rpm: None,
            low_rpm: 0.0,
            high_rpm: 0.0,
        };
    }
    let o = &p.operator;
    let population = POPULATION_SIGMAS * o.spread.cadence_rpm;
    let weak_cp = (o.critical_power_w - POPULATION_SIGMAS * o.spread.critical_power_w).max(5.0);
    let cap = o.max_cadence_rpm;
    let mut low = (planned_low + wander_low - population).max(0.0);
    let high = (planned_high + wander_high + population).min(cap).max(low);
    // A tired operator holds no more than CP: the highest cadence below the planned low end at
    // which the design takes no more than the weak operator's CP.
    let fatigue = if point(st, report, bs, planned_low).crank_power_w > weak_cp {
        let mut c = planned_low;
        while c > 0.0 && point(st, report, bs, c).crank_power_w > weak_cp {
            c -= FATIGUE_STEP_RPM;
        }
        Some(c.max(0.0))
    } else {
        None
    };
    if let Some(f) = fatigue {
        low = low.min(f);
    }
    CadenceRange {
        planned_low_rpm: planned_low,
        planned_high_rpm: planned_high,
        wander_low_rpm: wander_low,
        wander_high_rpm: wander_high,
        population_rpm: population,
        fatigue_rpm: fatigue,
        low_rpm: low,
        high_rpm: high,
    }
}

/// The map over a range: whole-rpm steps (wider for a very wide range), both ends included.
pub(super) fn operating_map(
    st: &Statics,
    report: &Report,
    bs: &BatteryState,
    range: &CadenceRange,
) -> Vec<MapRow> {
    let (lo, hi) = (range.low_rpm.floor(), range.high_rpm.ceil());
    let step = ((hi - lo) / (MAX_ROWS - 1) as f64).ceil().max(1.0);
    let n = ((hi - lo) / step).floor() as usize + 1;
    (0..n.max(2))
        .map(|k| point(st, report, bs, lo + step * k as f64))
        .collect()
}

/// Notes on the range against the design's figures.
pub fn range_notes(report: &Report, range: &CadenceRange, map: &[MapRow]) -> Vec<String> {
    let mut notes = Vec::new();
    if range.high_rpm <= 0.0 {
        return notes;
    }
    let source = format!(
        "the cadence range the profile produces ({:.1}–{:.1} rpm: planned {:.1}–{:.1}, wander {:+.1}/{:+.1}, population ±{:.1}{})",
        range.low_rpm,
        range.high_rpm,
        range.planned_low_rpm,
        range.planned_high_rpm,
        range.wander_low_rpm,
        range.wander_high_rpm,
        range.population_rpm,
        range
            .fatigue_rpm
            .map_or_else(String::new, |f| format!(", a tired weak operator {f:.1}"))
    );
    if let Some(need) = report.regulation_cadence_rpm() {
        if range.low_rpm < need {
            notes.push(format!(
                "Across {source}, the converter does not hold its current below {need:.1} rpm: the low end is {:.1} rpm short.",
                need - range.low_rpm
            ));
        }
    }
    let mut causes: Vec<&str> = Vec::new();
    for r in map {
        if !causes.contains(&r.limit) {
            causes.push(r.limit);
        }
    }
    if causes.len() > 1 {
        notes.push(format!(
            "Over that range the limiting cause changes: {} (operating_map.csv with --out).",
            causes.join(" → ")
        ));
    }
    if let Some(c) = &report.converter {
        if range.high_rpm >= c.input_limit_cadence_rpm {
            notes.push(format!(
                "The high end of {source} reaches the {:.1} V input limit (from {:.1} rpm).",
                c.input_limit_v, c.input_limit_cadence_rpm
            ));
        }
    }
    if let Some(d) = &report.direct {
        if let Some(l) = d.charge_limit_cadence_rpm {
            if range.high_rpm >= l {
                notes.push(format!(
                    "The high end of {source} pushes the battery past its charge limit (from {l:.1} rpm)."
                ));
            }
        }
    }
    notes
}

/// The battery state `check` uses: the start SOC at the start temperature.
pub fn start_state(sc: &Scenario) -> BatteryState {
    BatteryState::rested(
        sc.setup.battery.soc_start,
        sc.setup.battery.temp_start_c.unwrap_or(sc.setup.ambient_c),
    )
}

/// The statics of a plant as `check` builds them (winding at ambient).
pub(super) fn statics<'a>(sc: &Scenario, plant: &'a Plant) -> Statics<'a> {
    Statics {
        plant,
        resistance_ohm: plant.generator.resistance_ohm(sc.setup.ambient_c),
        ke_v_s_per_rad: plant.generator.ke_at(sc.setup.ambient_c),
    }
}

/// Computes the profile's cadence range and the map over it, puts the range and its notes in the
/// report, and returns the map.
pub fn attach(sc: &Scenario, plant: &Plant, report: &mut Report) -> Vec<MapRow> {
    let st = statics(sc, plant);
    let bs = start_state(sc);
    let range = cadence_range(sc, &st, report, &bs);
    let map = operating_map(&st, report, &bs, &range);
    report.notes.extend(range_notes(report, &range, &map));
    report.cadence_range = Some(range);
    map
}

/// `operating_map.csv` as bytes.
pub fn map_csv(map: &[MapRow]) -> anyhow::Result<Vec<u8>> {
    let (header, rows) = map_table(map);
    Ok(crate::output::csv::table_csv(&header, &rows)?)
}

/// The operating map as a header and rows of text (its CSV and its report table).
fn map_table(map: &[MapRow]) -> (Vec<String>, Vec<Vec<String>>) {
    let header: Vec<String> = [
        "crank_rpm",
        "emf_v",
        "input_v",
        "charge_current_a",
        "limit",
        "generator_current_a",
        "duty",
        "crank_power_w",
    ]
    .map(String::from)
    .to_vec();
    let rows: Vec<Vec<String>> = map
        .iter()
        .map(|r| {
            vec![
                fmt(r.crank_rpm),
                fmt(r.emf_v),
                fmt(r.input_v),
                fmt(r.charge_current_a),
                r.limit.to_string(),
                fmt(r.generator_current_a),
                fmt(r.duty),
                fmt(r.crank_power_w),
            ]
        })
        .collect();
    (header, rows)
}

/// Writes `operating_map.csv` (and `operating_map.png`/`.svg`) into the staging folder and
/// moves it into place.
pub fn write(
    staging: Staging,
    sc: &Scenario,
    report: &Report,
    map: &[MapRow],
    plots: bool,
) -> anyhow::Result<std::path::PathBuf> {
    staging.write("operating_map.csv", &map_csv(map)?)?;
    let mut charts = Vec::new();
    if plots {
        let rpm: Vec<f64> = map.iter().map(|r| r.crank_rpm).collect();
        let emf: Vec<f64> = map.iter().map(|r| r.emf_v).collect();
        let input: Vec<f64> = map.iter().map(|r| r.input_v).collect();
        let current: Vec<f64> = map.iter().map(|r| r.charge_current_a).collect();
        let limit: Vec<String> = map.iter().map(|r| r.limit.to_string()).collect();
        let range = report.cadence_range.as_ref();
        let chart = operating_map_chart(
            &MapData {
                crank_rpm: &rpm,
                emf_v: &emf,
                input_v: &input,
                charge_current_a: &current,
                limit: &limit,
                profile_range_rpm: range.map(|r| (r.planned_low_rpm, r.planned_high_rpm)),
            },
            &format!("Operating map: {} / {}", report.setup, report.profile),
        )?;
        staging.write("operating_map.png", &chart.png)?;
        staging.write("operating_map.svg", chart.svg.as_bytes())?;
        charts.push((
            chart.svg,
            "Generator EMF, converter input and the charge current across the cadence range, and what limits the charge at each cadence.".to_string(),
        ));
    }
    let mut page = super::pages::study_page(
        &[sc],
        "crankcharge check",
        &format!("Design check: {} / {}", report.setup, report.profile),
        map_table(map),
        charts,
        report.notes.clone(),
    );
    // The static figures, as `check --json` gives them, ahead of the map.
    let figures = serde_json::to_string_pretty(report)?;
    page.blocks.splice(
        1..1,
        [
            crate::output::report::Block::Heading("Static design figures".into()),
            crate::output::report::Block::Code(figures),
        ],
    );
    staging.write(
        "report.html",
        crate::output::report::render(&page).as_bytes(),
    )?;
    Ok(staging.commit()?)
}
