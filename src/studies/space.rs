//! The design space of a `search`: the `--vary KEY=SPEC` axes, the points a full grid or a seeded
//! Latin-hypercube sample takes from them, and which points a `--shard K/N` runs.
//!
//! Points are a pure function of the axes, the design and the seed, so every shard of a study
//! enumerates the same list and takes its own disjoint part of it.

use rand::rngs::StdRng;
use rand::seq::SliceRandom;
use rand::{RngExt, SeedableRng};
use serde::Serialize;

use super::montecarlo::splitmix64_mix;
use super::sweep::{parse_range, short_number, Grid};

/// Most points a grid may have (a larger space wants `--design lhs`).
pub const MAX_GRID_POINTS: usize = 10_000;
/// Most samples a Latin-hypercube design may take.
pub const MAX_SAMPLES: usize = 10_000;
/// Most axes one search may vary.
pub const MAX_AXES: usize = 12;
/// Continuous values are placed on a lattice of this fraction of their axis' range, so that
/// their text stays short and a value met twice is recognised (and not run twice).
pub const QUANTUM: f64 = 1e-5;
/// Mixed into the seed to seed the Latin-hypercube stream apart from the operators' streams.
const SAMPLE_STREAM: u64 = 0x6c68_735f_7370_6163;

/// What values an axis takes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum AxisKind {
    /// `A..B:N` on a real-valued field: N grid values, any value in [A, B] when sampled or refined.
    Continuous,
    /// `A..B:N` on a whole-number field: only its N grid values.
    Integer,
    /// A comma list of numbers: only those values.
    Numbers,
    /// A comma list of words (`nmc,lfp`, `buck,buck_boost`): only those values, plotted as categories.
    Categories,
}

/// One `--vary` axis.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Axis {
    /// Dotted path as for `--set` (`drive.stages.0.ratio`, `profile.cadence_scale`).
    pub key: String,
    /// The SPEC as given.
    pub spec: String,
    pub kind: AxisKind,
    /// The values of the grid (override text), in order.
    pub levels: Vec<String>,
    /// Ends of a range axis.
    pub range: Option<(f64, f64)>,
}

impl Axis {
    /// Whether refinement and Latin-hypercube sampling may move this axis between its levels.
    pub fn continuous(&self) -> bool {
        self.kind == AxisKind::Continuous
    }

    /// Whether the values are numbers (every kind but categories).
    pub fn numeric(&self) -> bool {
        self.kind != AxisKind::Categories
    }

    /// Override text of the value at fraction `u` of a continuous axis' range, on the lattice.
    pub fn value_at(&self, u: f64) -> String {
        let (a, b) = self.range.unwrap_or((0.0, 1.0));
        let q = (u.clamp(0.0, 1.0) / QUANTUM).round() * QUANTUM;
        if q >= 1.0 {
            return short_number(b);
        }
        short_number(a + (b - a) * q)
    }

    /// Fraction of the range of a value of a continuous axis (None if it is not a number).
    pub fn fraction_of(&self, value: &str) -> Option<f64> {
        let (a, b) = self.range?;
        let v: f64 = value.parse().ok()?;
        Some(if b == a { 0.0 } else { (v - a) / (b - a) })
    }
}

/// Parses one `--vary KEY=SPEC`: SPEC is `A..B:N` (N evenly spaced values including both ends) or
/// a comma list. The kind of a range axis is decided later (see [`Axis::kind`]); it starts
/// `Continuous`.
pub fn parse_axis(arg: &str) -> Result<Axis, String> {
    let (key, spec) = arg.split_once('=').ok_or_else(|| {
        format!(
            "--vary '{arg}': expected KEY=SPEC, SPEC a comma list (nmc,lfp) or A..B:N (2..8:13)"
        )
    })?;
    let (key, spec) = (key.trim(), spec.trim());
    if key.is_empty() || spec.is_empty() {
        return Err(format!("--vary '{arg}': expected KEY=SPEC with both parts"));
    }
    if let Some((from, rest)) = spec.split_once("..") {
        let (to, steps) = rest.split_once(':').ok_or_else(|| {
            format!("--vary {key}={spec}: a range is A..B:N, N values including both ends (e.g. 2..8:13)")
        })?;
        let grid: Grid = parse_range(&format!("{from}:{to}:{steps}")).map_err(|e| {
            format!(
                "--vary {key}={spec}: {}",
                e.replace("FROM:TO:STEPS", "A..B:N")
            )
        })?;
        if grid.to <= grid.from {
            return Err(format!(
                "--vary {key}={spec}: the range must rise (A < B), got {} .. {}",
                grid.from, grid.to
            ));
        }
        return Ok(Axis {
            key: key.to_string(),
            spec: spec.to_string(),
            kind: AxisKind::Continuous,
            levels: grid.values(),
            range: Some((grid.from, grid.to)),
        });
    }
    let levels: Vec<String> = spec.split(',').map(|v| v.trim().to_string()).collect();
    if levels.iter().any(String::is_empty) {
        return Err(format!(
            "--vary {key}={spec}: a list needs one or more values, none empty"
        ));
    }
    for (i, v) in levels.iter().enumerate() {
        if levels[..i].contains(v) {
            return Err(format!("--vary {key}={spec}: '{v}' is listed twice"));
        }
    }
    let numbers = levels
        .iter()
        .all(|v| v.parse::<f64>().is_ok_and(f64::is_finite));
    Ok(Axis {
        key: key.to_string(),
        spec: spec.to_string(),
        kind: if numbers {
            AxisKind::Numbers
        } else {
            AxisKind::Categories
        },
        levels,
        range: None,
    })
}

/// How the points are chosen.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case", tag = "kind")]
pub enum Design {
    /// Every combination of the axes' levels (the first axis varies slowest).
    Grid,
    /// A Latin-hypercube sample of `samples` points (McKay, Beckman & Conover 1979).
    Lhs { samples: usize },
}

/// Number of points of a full grid (saturating).
pub fn grid_size(axes: &[Axis]) -> usize {
    axes.iter()
        .fold(1usize, |n, a| n.saturating_mul(a.levels.len()))
}

/// The points of a design: one value text per axis each, in a fixed order.
pub fn points(axes: &[Axis], design: Design, seed: u64) -> Vec<Vec<String>> {
    match design {
        Design::Grid => grid(axes),
        Design::Lhs { samples } => latin_hypercube(axes, samples, seed),
    }
}

fn grid(axes: &[Axis]) -> Vec<Vec<String>> {
    let mut out: Vec<Vec<String>> = vec![Vec::new()];
    for a in axes {
        out = out
            .into_iter()
            .flat_map(|p| {
                a.levels.iter().map(move |v| {
                    let mut q = p.clone();
                    q.push(v.clone());
                    q
                })
            })
            .collect();
    }
    out
}

/// Latin hypercube: each axis is cut into `n` equal strata and every stratum is used exactly once,
/// the strata of different axes paired by independent random permutations; a continuous axis
/// takes a uniform point inside its stratum, a discrete one (integer, list, categories) the level
/// the stratum falls on, so each level is used about equally often.
fn latin_hypercube(axes: &[Axis], n: usize, seed: u64) -> Vec<Vec<String>> {
    let mut rng = StdRng::seed_from_u64(splitmix64_mix(seed ^ SAMPLE_STREAM));
    let mut columns: Vec<Vec<String>> = Vec::with_capacity(axes.len());
    for a in axes {
        let mut strata: Vec<usize> = (0..n).collect();
        strata.shuffle(&mut rng);
        let col = strata
            .iter()
            .map(|&s| {
                let jitter: f64 = rng.random();
                let u = (s as f64 + jitter) / n as f64;
                if a.continuous() {
                    a.value_at(u)
                } else {
                    let k = ((u * a.levels.len() as f64) as usize).min(a.levels.len() - 1);
                    a.levels[k].clone()
                }
            })
            .collect();
        columns.push(col);
    }
    (0..n)
        .map(|i| columns.iter().map(|c| c[i].clone()).collect())
        .collect()
}

/// `--shard K/N`: the K-th of N disjoint parts; it runs the points whose index i has
/// i mod N = K − 1 (interleaved, so each part gets a like mix of cheap and costly points).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct Shard {
    pub k: usize,
    pub n: usize,
}

impl Shard {
    /// Whether point `index` belongs to this part.
    pub fn owns(&self, index: usize) -> bool {
        index % self.n == self.k - 1
    }
}

impl std::fmt::Display for Shard {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}/{}", self.k, self.n)
    }
}

/// Most parts a study may be cut into.
pub const MAX_SHARDS: usize = 10_000;

/// Parses `K/N` (1 ≤ K ≤ N ≤ 10000).
pub fn parse_shard(s: &str) -> Result<Shard, String> {
    let (k, n) = s
        .split_once('/')
        .ok_or_else(|| format!("expected K/N (e.g. 2/8), got '{s}'"))?;
    let num = |t: &str| t.trim().parse::<usize>().ok();
    match (num(k), num(n)) {
        (Some(k), Some(n)) if (1..=MAX_SHARDS).contains(&n) && (1..=n).contains(&k) => {
            Ok(Shard { k, n })
        }
        _ => Err(format!(
            "'{s}' is not a part: K/N needs whole numbers 1 <= K <= N <= {MAX_SHARDS}"
        )),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn axis(s: &str) -> Axis {
        parse_axis(s).expect("axis")
    }

    #[test]
    fn specs_give_ranges_numbers_and_categories() {
        let r = axis("drive.stages.0.ratio=2..8:13");
        assert_eq!(r.kind, AxisKind::Continuous);
        assert_eq!(r.levels.len(), 13);
        assert_eq!(r.levels[1], "2.5");
        assert_eq!(r.levels[12], "8");
        assert_eq!(r.range, Some((2.0, 8.0)));
        let n = axis("battery.cells_parallel=1,2,4");
        assert_eq!(n.kind, AxisKind::Numbers);
        let c = axis("battery.chemistry= nmc , lfp");
        assert_eq!(c.kind, AxisKind::Categories);
        assert_eq!(c.levels, ["nmc", "lfp"]);
        let neg = axis("ambient_c=-10..30:5");
        assert_eq!(neg.levels, ["-10", "0", "10", "20", "30"]);
    }

    #[test]
    fn bad_specs_say_what_is_wrong() {
        assert!(parse_axis("ratio").unwrap_err().contains("KEY=SPEC"));
        assert!(parse_axis("ratio=2..8").unwrap_err().contains("A..B:N"));
        assert!(parse_axis("ratio=2..8:1").unwrap_err().contains("2 ..="));
        assert!(parse_axis("ratio=8..2:3").unwrap_err().contains("rise"));
        assert!(parse_axis("ratio=1,,2").unwrap_err().contains("none empty"));
        assert!(parse_axis("ratio=1,2,1").unwrap_err().contains("twice"));
    }

    #[test]
    fn grid_takes_every_combination_first_axis_slowest() {
        let axes = [axis("a=1,2"), axis("b=x,y,z")];
        let p = points(&axes, Design::Grid, 0);
        assert_eq!(p.len(), 6);
        assert_eq!(grid_size(&axes), 6);
        assert_eq!(p[0], ["1", "x"]);
        assert_eq!(p[1], ["1", "y"]);
        assert_eq!(p[3], ["2", "x"]);
    }

    #[test]
    fn latin_hypercube_uses_every_stratum_once_and_is_seeded() {
        let axes = [axis("a=0..1:2"), axis("b=10..20:2"), axis("c=p,q")];
        let n = 40;
        let p = points(&axes, Design::Lhs { samples: n }, 9);
        assert_eq!(p.len(), n);
        // Source: McKay, Beckman & Conover, Technometrics 21(2), 1979: each of the n equal-probability
        // strata of every input holds exactly one sample.
        for (k, (lo, hi)) in [(0.0, 1.0), (10.0, 20.0)].into_iter().enumerate() {
            let mut hit = vec![0; n];
            for row in &p {
                let v: f64 = row[k].parse().expect("number");
                assert!((lo..=hi).contains(&v), "{v}");
                let s = (((v - lo) / (hi - lo)) * n as f64).floor() as usize;
                hit[s.min(n - 1)] += 1;
            }
            // A value on a stratum edge (lattice rounding) may land in the next one; at most one.
            let empty = hit.iter().filter(|&&h| h == 0).count();
            assert!(empty <= 1, "axis {k}: strata {hit:?}");
        }
        let qs = p.iter().filter(|r| r[2] == "q").count();
        assert_eq!(qs, n / 2, "each level of a discrete axis equally often");
        assert_eq!(p, points(&axes, Design::Lhs { samples: n }, 9));
        assert_ne!(p, points(&axes, Design::Lhs { samples: n }, 10));
    }

    #[test]
    fn shards_are_disjoint_and_cover_every_point() {
        let parts: Vec<Shard> = (1..=3).map(|k| Shard { k, n: 3 }).collect();
        for i in 0..20 {
            assert_eq!(parts.iter().filter(|s| s.owns(i)).count(), 1, "point {i}");
        }
        assert_eq!(parse_shard("2/3"), Ok(Shard { k: 2, n: 3 }));
        for bad in ["0/3", "4/3", "1", "a/b", "1/0"] {
            assert!(parse_shard(bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn continuous_values_sit_on_a_short_lattice() {
        let a = axis("r=2..8:3");
        assert_eq!(a.value_at(0.0), "2");
        assert_eq!(a.value_at(1.0), "8");
        assert_eq!(a.value_at(0.123456789), "2.74076");
        assert_eq!(a.fraction_of("5"), Some(0.5));
    }
}
