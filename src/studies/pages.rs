//! The `report.html` pages of a run and of each study: the figures, the verdict and its reasons,
//! the rows with their thresholds, the charts, the setup as run and the cautions, composed from
//! the blocks of `output::report`.

use crate::analysis::summary::{percent_or_na, Summary};
use crate::output::report::{Block, Page};
use crate::scenario::Scenario;

use super::cautions::cautions;

/// The line under every page's title: what made it.
fn made_by(what: &str) -> String {
    format!(
        "{what} · crankcharge {} · a simulation, not a measurement: see the cautions at the end",
        env!("CARGO_PKG_VERSION")
    )
}

/// Where the setup and profile came from, with the overrides.
fn provenance(sc: &Scenario) -> Vec<(String, String)> {
    let overrides = if sc.overrides.is_empty() {
        "none".to_string()
    } else {
        sc.overrides
            .iter()
            .map(|o| format!("{}={}", o.key, o.value))
            .collect::<Vec<_>>()
            .join(", ")
    };
    vec![
        (
            "setup file".into(),
            format!(
                "{} (sha256 {})",
                sc.setup_source.name,
                sc.setup_source.hash()
            ),
        ),
        (
            "profile file".into(),
            format!(
                "{} (sha256 {})",
                sc.profile_source.name,
                sc.profile_source.hash()
            ),
        ),
        ("overrides".into(), overrides),
    ]
}

/// The closing blocks of every page: the setup and profile as run, and the cautions.
fn as_run_and_cautions(sc: &Scenario, blocks: &mut Vec<Block>) {
    blocks.push(Block::Heading("Setup as run".into()));
    blocks.push(Block::Paragraph(
        "The setup file with every override written into it: `crankcharge run` accepts it as it is."
            .into(),
    ));
    blocks.push(Block::Code(sc.setup_text.clone()));
    blocks.push(Block::Heading("Crank profile as run".into()));
    blocks.push(Block::Code(sc.profile_text.clone()));
    blocks.push(Block::Heading("Cautions".into()));
    blocks.push(Block::List(cautions(sc)));
}

fn verdict_block(m: &Summary) -> Block {
    Block::Verdict {
        word: m.verdict.words().join(", "),
        reasons: m.verdict_reasons.clone(),
    }
}

/// The page of one run: `svg` is the session chart (None with `--no-plot`).
pub fn run_page(sc: &Scenario, m: &Summary, svg: Option<&str>) -> Page {
    let mut b = vec![verdict_block(m)];
    let mut facts = vec![
        ("setup".to_string(), m.setup.clone()),
        ("profile".into(), m.profile.clone()),
        ("seed".into(), m.seed.to_string()),
        ("fidelity".into(), m.fidelity.clone()),
    ];
    facts.extend(provenance(sc));
    if let Some(r) = &m.replay {
        facts.push((
            "replay".into(),
            format!("{}; {}", super::digest::replay_line(r), r.resampling),
        ));
    }
    facts.extend([
        ("session".into(), format!("{:.0} s", m.duration_s)),
        (
            "state of charge".into(),
            format!("{:.3} → {:.3}", m.soc_start, m.soc_end),
        ),
        (
            "charge into the battery".into(),
            format!(
                "{:.4} Ah ({:.2} Wh)",
                m.charge_delivered_ah, m.energy_to_battery_wh
            ),
        ),
        (
            "operator".into(),
            format!(
                "{:.0} J, mean {:.1} W, peak {:.1} W",
                m.operator_work_j, m.mean_operator_power_w, m.peak_operator_power_w
            ),
        ),
        (
            "crank-to-battery efficiency".into(),
            format!("{:.1} %", 100.0 * m.efficiency_crank_to_battery),
        ),
        (
            "time in regulation".into(),
            match m.regulation_loss_s {
                Some(lost) => format!(
                    "{} % of cranking time ({lost:.1} s lost)",
                    percent_or_na(m.in_regulation_fraction)
                ),
                None => "n/a (direct: no converter)".into(),
            },
        ),
        (
            "highest battery voltage".into(),
            format!(
                "{:.3} V against a limit of {:.3} V (margin {:+.3} V)",
                m.max_battery_v, m.charge_limit_v, m.overcharge_margin_v
            ),
        ),
        (
            "cadence margin".into(),
            match (m.lowest_sustained_cadence_rpm, m.regulation_cadence_rpm) {
                (Some(low), Some(need)) => format!(
                    "lowest sustained {low:.1} rpm against {need:.1} rpm that regulation needs ({:+.1} rpm)",
                    low - need
                ),
                _ => "n/a".into(),
            },
        ),
        (
            "energy ledger".into(),
            super::digest::ledger_digest(m),
        ),
    ]);
    if let Some(u) = &m.usb {
        facts.push((
            "USB bus".into(),
            format!(
                "{:.2} V set point; lowest {:.3} V while cranking with the device drawing; {:.1} s outside {:.2}–{:.2} V; {} device cut-off(s)",
                u.bus_setpoint_v, u.min_bus_v, u.out_of_band_s, u.band_low_v, u.band_high_v, u.device_cutoffs
            ),
        ));
    }
    b.push(Block::Heading("Figures".into()));
    b.push(Block::Facts(facts));
    if let Some(svg) = svg {
        b.push(Block::Chart {
            svg: svg.to_string(),
            caption: "The session: cadence against its target, voltages and the charge limit, battery current and state of charge, operator power. Bands mark the rows below.".into(),
        });
    }
    b.push(Block::Heading("Alerts and episodes".into()));
    let rows = m.events();
    if rows.is_empty() {
        b.push(Block::Paragraph("No alert and no episode.".into()));
    } else {
        b.push(Block::Table {
            header: [
                "kind",
                "start [s]",
                "end [s]",
                "duration [s]",
                "quantity",
                "threshold",
                "worst",
                "verdict",
                "detail",
            ]
            .map(String::from)
            .to_vec(),
            rows: rows
                .iter()
                .map(|e| {
                    vec![
                        e.kind.as_str().to_string(),
                        format!("{:.2}", e.start_s),
                        format!("{:.2}", e.end_s),
                        format!("{:.2}", e.duration_s),
                        format!("{} [{}]", e.quantity, e.unit),
                        format!("{:.3}", e.threshold),
                        format!("{:.3}", e.worst),
                        if e.affects_verdict { "yes" } else { "no" }.to_string(),
                        e.detail.clone(),
                    ]
                })
                .collect(),
        });
    }
    b.push(Block::Paragraph(format!(
        "Thresholds: {}. A row is a quantity past its threshold for at least the dwell of its kind; rows of one kind closer than the merge gap are one (the setup's alerts section, echoed in summary.json as alert_rules).",
        super::digest::thresholds_digest(m)
    )));
    as_run_and_cautions(sc, &mut b);
    Page {
        title: format!("{} / {}", m.setup, m.profile),
        subtitle: made_by("crankcharge run"),
        blocks: b,
    }
}

/// The page of a study: its table (header, rows), its charts (SVG, caption), a few lines of
/// notes, and the scenarios it ran (each distinct setup and profile is shown as run, once).
pub fn study_page(
    scenarios: &[&Scenario],
    what: &str,
    title: &str,
    table: (Vec<String>, Vec<Vec<String>>),
    charts: Vec<(String, String)>,
    notes: Vec<String>,
) -> Page {
    let mut b = Vec::new();
    let mut seen_setups: Vec<&str> = Vec::new();
    let mut seen_profiles: Vec<&str> = Vec::new();
    let mut facts = Vec::new();
    for sc in scenarios {
        if !seen_setups.contains(&sc.setup_text.as_str()) {
            seen_setups.push(&sc.setup_text);
            facts.push(("setup file".to_string(), sc.setup_source.name.clone()));
        }
        if !seen_profiles.contains(&sc.profile_text.as_str()) {
            seen_profiles.push(&sc.profile_text);
            facts.push(("profile file".to_string(), sc.profile_source.name.clone()));
        }
    }
    if let Some(sc) = scenarios.first() {
        facts.push(provenance(sc).remove(2));
    }
    b.push(Block::Facts(facts));
    for n in notes {
        b.push(Block::Paragraph(n));
    }
    b.push(Block::Heading("Results".into()));
    b.push(Block::Table {
        header: table.0,
        rows: table.1,
    });
    for (svg, caption) in charts {
        b.push(Block::Chart { svg, caption });
    }
    let mut shown_setups: Vec<&str> = Vec::new();
    let mut shown_profiles: Vec<&str> = Vec::new();
    let mut all_cautions: Vec<String> = Vec::new();
    for sc in scenarios {
        if !shown_setups.contains(&sc.setup_text.as_str()) {
            shown_setups.push(&sc.setup_text);
            b.push(Block::Heading(format!("Setup as run: {}", sc.setup.name)));
            b.push(Block::Code(sc.setup_text.clone()));
        }
        if !shown_profiles.contains(&sc.profile_text.as_str()) {
            shown_profiles.push(&sc.profile_text);
            b.push(Block::Heading(format!(
                "Crank profile as run: {}",
                sc.profile.name
            )));
            b.push(Block::Code(sc.profile_text.clone()));
        }
        for c in cautions(sc) {
            if !all_cautions.contains(&c) {
                all_cautions.push(c);
            }
        }
    }
    b.push(Block::Heading("Cautions".into()));
    b.push(Block::List(all_cautions));
    Page {
        title: title.to_string(),
        subtitle: made_by(what),
        blocks: b,
    }
}

/// The page of a study on measured data (`fit-operator`, `compare-measured`): facts, notes, a
/// table, charts, preformatted texts (heading, text) and the general cautions.
pub fn data_page(
    what: &str,
    title: &str,
    facts: Vec<(String, String)>,
    notes: Vec<String>,
    table: (Vec<String>, Vec<Vec<String>>),
    charts: Vec<(String, String)>,
    texts: Vec<(String, String)>,
) -> Page {
    let mut b = vec![Block::Facts(facts)];
    for n in notes {
        b.push(Block::Paragraph(n));
    }
    b.push(Block::Heading("Results".into()));
    b.push(Block::Table {
        header: table.0,
        rows: table.1,
    });
    for (svg, caption) in charts {
        b.push(Block::Chart { svg, caption });
    }
    for (heading, text) in texts {
        b.push(Block::Heading(heading));
        b.push(Block::Code(text));
    }
    b.push(Block::Heading("Cautions".into()));
    b.push(Block::List(vec![
        "Cranks, belts, pulleys and flywheels trap fingers, hair and clothing: guard the pinch points and every moving part.".to_string(),
        "Lithium cells can vent hot gas or catch fire when overcharged, charged outside their temperature window or short-circuited; lead-acid batteries give off hydrogen when they gas. Measure on the bench with a fused, current-limited supply and a battery management system.".to_string(),
        "A simulation is no substitute for a certified charge controller, a battery management system, local electrical codes or licensed practice; follow the battery maker's limits.".to_string(),
    ]));
    Page {
        title: title.to_string(),
        subtitle: format!(
            "{what} · crankcharge {} · measured data set against the model: see the cautions at the end",
            env!("CARGO_PKG_VERSION")
        ),
        blocks: b,
    }
}
