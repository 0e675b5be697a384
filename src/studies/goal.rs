//! What a `search` looks for: `--require` constraints on the figures, the objective
//! (`--minimise`/`--maximise`), an optional second objective for a Pareto view, and which
//! constraint binds at the best point.

use serde::{Deserialize, Serialize};

/// Which way a figure is better.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Sense {
    Min,
    Max,
}

impl Sense {
    /// The value to minimise for this sense.
    pub fn cost(self, v: f64) -> f64 {
        match self {
            Sense::Min => v,
            Sense::Max => -v,
        }
    }

    pub fn word(self) -> &'static str {
        match self {
            Sense::Min => "minimise",
            Sense::Max => "maximise",
        }
    }
}

/// A comparison in a constraint.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum Cmp {
    #[serde(rename = "<=")]
    Le,
    #[serde(rename = "<")]
    Lt,
    #[serde(rename = ">=")]
    Ge,
    #[serde(rename = ">")]
    Gt,
}

impl Cmp {
    fn text(self) -> &'static str {
        match self {
            Cmp::Le => "<=",
            Cmp::Lt => "<",
            Cmp::Ge => ">=",
            Cmp::Gt => ">",
        }
    }
}

/// One `--require FIGURE<=VALUE` (or `<`, `>=`, `>`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Constraint {
    pub figure: String,
    pub cmp: Cmp,
    pub bound: f64,
}

impl Constraint {
    /// The constraint as written (`p_overcharge<=0.01`).
    pub fn text(&self) -> String {
        format!("{}{}{}", self.figure, self.cmp.text(), self.bound)
    }

    /// Slack: how far inside the bound the value lies (negative: violated, by that much).
    /// None when the figure does not apply (a direct design's regulation), which never counts as met.
    pub fn slack(&self, v: Option<f64>) -> Option<f64> {
        let v = v.filter(|v| v.is_finite())?;
        Some(match self.cmp {
            Cmp::Le | Cmp::Lt => self.bound - v,
            Cmp::Ge | Cmp::Gt => v - self.bound,
        })
    }

    /// Whether the value meets the constraint.
    pub fn met(&self, v: Option<f64>) -> bool {
        match (self.slack(v), self.cmp) {
            (Some(s), Cmp::Le | Cmp::Ge) => s >= 0.0,
            (Some(s), Cmp::Lt | Cmp::Gt) => s > 0.0,
            (None, _) => false,
        }
    }

    /// Size of a violation relative to the bound (0 when met); a figure that does not apply
    /// counts as [`UNDEFINED_VIOLATION`]. Used to rank infeasible points.
    pub fn violation(&self, v: Option<f64>) -> f64 {
        if self.met(v) {
            return 0.0;
        }
        match self.slack(v) {
            Some(s) => (-s).max(0.0) / self.bound.abs().max(1e-3) + 1e-9,
            None => UNDEFINED_VIOLATION,
        }
    }
}

/// Violation counted for a figure that does not apply at a point.
pub const UNDEFINED_VIOLATION: f64 = 1e3;

/// Parses `FIGURE<=VALUE`, `FIGURE<VALUE`, `FIGURE>=VALUE` or `FIGURE>VALUE`; `known` says
/// whether a name is a figure or a numeric varied key.
pub fn parse_constraint(s: &str, known: &dyn Fn(&str) -> bool) -> Result<Constraint, String> {
    let t = s.trim();
    let (at, cmp, len) = ["<=", ">=", "<", ">"]
        .iter()
        .find_map(|op| {
            t.find(op).map(|i| {
                let cmp = match *op {
                    "<=" => Cmp::Le,
                    ">=" => Cmp::Ge,
                    "<" => Cmp::Lt,
                    _ => Cmp::Gt,
                };
                (i, cmp, op.len())
            })
        })
        .ok_or_else(|| {
            format!("--require '{s}': expected FIGURE<=VALUE or FIGURE>=VALUE (e.g. p_overcharge<=0.01)")
        })?;
    let figure = t[..at].trim();
    let value = t[at + len..].trim();
    if !known(figure) {
        return Err(format!(
            "--require '{s}': '{figure}' is neither a figure of points.csv nor a numeric --vary key"
        ));
    }
    let bound: f64 = value
        .parse()
        .ok()
        .filter(|v: &f64| v.is_finite())
        .ok_or_else(|| format!("--require '{s}': '{value}' is not a finite number"))?;
    Ok(Constraint {
        figure: figure.to_string(),
        cmp,
        bound,
    })
}

/// An objective: a figure (or numeric varied key) and its sense.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Objective {
    pub figure: String,
    pub sense: Sense,
}

impl Objective {
    /// `minimise FIGURE`.
    pub fn text(&self) -> String {
        format!("{} {}", self.sense.word(), self.figure)
    }
}

/// Parses `--pareto [min:|max:]FIGURE`; without a prefix the figure's natural sense is used
/// (`natural` returns None for a name without one, e.g. a varied key).
pub fn parse_pareto(
    s: &str,
    known: &dyn Fn(&str) -> bool,
    natural: &dyn Fn(&str) -> Option<Sense>,
) -> Result<Objective, String> {
    let t = s.trim();
    let (sense, figure) = match t.split_once(':') {
        Some(("min", f)) => (Some(Sense::Min), f.trim()),
        Some(("max", f)) => (Some(Sense::Max), f.trim()),
        Some((p, _)) => {
            return Err(format!(
                "--pareto '{s}': '{p}' is not a sense; use min:FIGURE or max:FIGURE"
            ))
        }
        None => (None, t),
    };
    if !known(figure) {
        return Err(format!(
            "--pareto '{s}': '{figure}' is neither a figure of points.csv nor a numeric --vary key"
        ));
    }
    let sense = sense.or_else(|| natural(figure)).ok_or_else(|| {
        format!("--pareto '{s}': say which way is better: min:{figure} or max:{figure}")
    })?;
    Ok(Objective {
        figure: figure.to_string(),
        sense,
    })
}

/// Why the best point is where it is.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Binding {
    /// The constraint that stops the objective from improving (None: no evaluated point does better).
    pub constraint: Option<String>,
    /// The nearest evaluated point that does better on the objective (its `point` number), whose
    /// failed constraints name the binding one.
    pub nearest_better_point: Option<usize>,
    /// How many evaluated points do better on the objective, and how many of them fail each
    /// constraint (in `--require` order).
    pub better_points: usize,
    pub better_points_failing: Vec<usize>,
    /// A varied key sitting at an end of its range at the best point (the range, not a
    /// constraint, may be what stops it).
    pub at_range_end: Vec<String>,
    /// One sentence.
    pub note: String,
}

#[cfg(test)]
mod tests {
    use super::*;

    fn known(s: &str) -> bool {
        ["p_overcharge", "charge_p10_ah", "drive.stages.0.ratio"].contains(&s)
    }

    #[test]
    fn constraints_parse_and_judge() {
        let c = parse_constraint("p_overcharge<=0.01", &known).expect("parse");
        assert_eq!(c.cmp, Cmp::Le);
        assert_eq!(c.bound, 0.01);
        assert!(c.met(Some(0.01)));
        assert!(!c.met(Some(0.011)));
        assert!(!c.met(None), "a figure that does not apply is not met");
        assert!(c.violation(Some(0.02)) > c.violation(Some(0.015)));
        assert_eq!(c.violation(Some(0.0)), 0.0);
        let g = parse_constraint(" charge_p10_ah > 0.3 ", &known).expect("parse");
        assert!(!g.met(Some(0.3)));
        assert!(g.met(Some(0.31)));
        assert_eq!(g.text(), "charge_p10_ah>0.3");
        assert!(parse_constraint("p_overcharge=0.1", &known)
            .unwrap_err()
            .contains("FIGURE<=VALUE"));
        assert!(parse_constraint("p_nothing<=0.1", &known)
            .unwrap_err()
            .contains("neither a figure"));
        assert!(parse_constraint("p_overcharge<=x", &known)
            .unwrap_err()
            .contains("not a finite number"));
    }

    #[test]
    fn pareto_objective_takes_a_sense_or_the_natural_one() {
        let natural = |s: &str| (s == "charge_p10_ah").then_some(Sense::Max);
        let o = parse_pareto("charge_p10_ah", &known, &natural).expect("parse");
        assert_eq!(o.sense, Sense::Max);
        let o = parse_pareto("min:drive.stages.0.ratio", &known, &natural).expect("parse");
        assert_eq!(o.sense, Sense::Min);
        assert!(parse_pareto("drive.stages.0.ratio", &known, &natural)
            .unwrap_err()
            .contains("which way"));
        assert!(parse_pareto("up:charge_p10_ah", &known, &natural).is_err());
    }
}
