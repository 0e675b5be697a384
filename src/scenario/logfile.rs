//! Reading a measured log (CSV): a time column and named channels whose unit is in the header,
//! every row checked (numbers, finite, in range, times increasing, no repeated time, no gap
//! longer than allowed). A problem is reported with the file, line, column name and the rule.
//!
//! A column names its quantity and unit either as a suffix (`crank_rpm`, `crank_rad_s`) or in
//! brackets (`crank (rpm)`, `crank [rad/s]`). A suffix that is not one of the channel's units
//! leaves the column to some other quantity (a trace's `battery_temp_c` is not a voltage); a
//! bracketed unit the channel does not take is refused. Other columns are ignored, lines starting
//! with `#` are comments, and times count from the first sample.

use crate::text::{excerpt, EXCERPT_CHARS};

use super::error::InputError;

/// A unit a channel takes: its spellings (after [`normalise_unit`]) and the factor to SI.
#[derive(Debug, Clone, Copy)]
pub struct Unit {
    pub names: &'static [&'static str],
    /// SI value = written value × factor.
    pub factor: f64,
    /// How messages write it.
    pub shown: &'static str,
}

/// One quantity a log may hold.
#[derive(Debug, Clone, Copy)]
pub struct Channel {
    /// The contract's column name (`crank_rpm`), used in messages.
    pub name: &'static str,
    /// What it is, in words.
    pub what: &'static str,
    /// Stems that name it (`crank`).
    pub stems: &'static [&'static str],
    pub units: &'static [Unit],
    pub required: bool,
    /// Allowed SI range, inclusive.
    pub min: f64,
    pub max: f64,
    /// Why a value outside the range is refused (appended to the message).
    pub why: &'static str,
}

/// The time column every log needs.
pub const TIME: Channel = Channel {
    name: "time_s",
    what: "time",
    stems: &["time", "t"],
    units: &[
        Unit {
            names: &["s", "sec"],
            factor: 1.0,
            shown: "s",
        },
        Unit {
            names: &["ms"],
            factor: 1e-3,
            shown: "ms",
        },
    ],
    required: true,
    // Wide enough for a logger's epoch seconds.
    min: -1e12,
    max: 1e12,
    why: "",
};

/// Limits of one read.
#[derive(Debug, Clone, Copy)]
pub struct Rules {
    /// Longest step between two samples, s.
    pub max_gap_s: f64,
    /// Shortest span from the first to the last sample, s.
    pub min_span_s: f64,
    /// What the log is for (messages): "a crank log".
    pub kind: &'static str,
}

/// A read log: times (s, as written, not shifted) and each channel's SI values (None: an
/// optional channel the log does not have), with the header names they came from.
#[derive(Debug, Clone, PartialEq)]
pub struct Table {
    pub time_s: Vec<f64>,
    pub values: Vec<Option<Vec<f64>>>,
    pub columns: Vec<Option<String>>,
    /// Line of each sample in the file (1-based).
    pub lines: Vec<usize>,
}

/// A unit as written, in the form the channels list: lower case, `/ · * . -` and spaces to `_`
/// (`rad/s` → `rad_s`, `N·m` → `n_m`).
pub fn normalise_unit(u: &str) -> String {
    let mut s: String = u
        .trim()
        .to_lowercase()
        .chars()
        .map(|c| match c {
            '/' | '·' | '*' | '.' | '-' | ' ' | '⋅' => '_',
            c => c,
        })
        .collect();
    while s.contains("__") {
        s = s.replace("__", "_");
    }
    s.trim_matches('_').to_string()
}

/// A header cell read as (stem, unit) in bracket form: `crank (rpm)`, `crank[rad/s]`.
fn bracketed(h: &str) -> Option<(String, String)> {
    let h = h.trim();
    let close = h.chars().last()?;
    let open = match close {
        ')' => '(',
        ']' => '[',
        _ => return None,
    };
    let at = h.rfind(open)?;
    let stem = h[..at].trim().to_lowercase().replace(' ', "_");
    let unit = h[at + open.len_utf8()..h.len() - close.len_utf8()].to_string();
    Some((stem, unit))
}

/// How a header cell relates to a channel.
enum Claim {
    /// The column holds the channel in this unit.
    Unit(Unit),
    /// The column names the channel with a unit it does not take (bracket form: refused).
    BadUnit(String),
    /// The column names the channel without a unit.
    NoUnit,
    /// A suffix that is not one of the channel's units (another quantity; remembered for hints).
    NearMiss,
    None,
}

fn claim(header: &str, ch: &Channel) -> Claim {
    let find = |token: &str| {
        let t = normalise_unit(token);
        ch.units
            .iter()
            .find(|u| u.names.contains(&t.as_str()))
            .copied()
    };
    if let Some((stem, unit)) = bracketed(header) {
        if ch.stems.contains(&stem.as_str()) {
            return match find(&unit) {
                Some(u) => Claim::Unit(u),
                None => Claim::BadUnit(unit),
            };
        }
        return Claim::None;
    }
    let h = header.trim().to_lowercase();
    let mut best: Option<(usize, Claim)> = None;
    for stem in ch.stems {
        let c = if h == *stem {
            match find("") {
                Some(u) => Claim::Unit(u),
                None => Claim::NoUnit,
            }
        } else if let Some(token) = h.strip_prefix(stem).and_then(|rest| rest.strip_prefix('_')) {
            match find(token) {
                Some(u) => Claim::Unit(u),
                None => Claim::NearMiss,
            }
        } else {
            continue;
        };
        if best.as_ref().is_none_or(|(len, _)| stem.len() > *len) {
            best = Some((stem.len(), c));
        }
    }
    best.map_or(Claim::None, |(_, c)| c)
}

fn units_list(ch: &Channel) -> String {
    ch.units
        .iter()
        .map(|u| {
            if u.shown.is_empty() {
                "no unit".to_string()
            } else {
                u.shown.to_string()
            }
        })
        .collect::<Vec<_>>()
        .join(", ")
}

/// Ways to name a channel, for messages: `crank_rpm`, `crank_rad_s`, `crank (rpm)`.
fn spellings(ch: &Channel) -> String {
    let stem = ch.stems[0];
    let mut v: Vec<String> = ch
        .units
        .iter()
        .map(|u| {
            if u.names[0].is_empty() {
                stem.to_string()
            } else {
                format!("{stem}_{}", u.names[0])
            }
        })
        .collect();
    if let Some(u) = ch.units.iter().find(|u| !u.shown.is_empty()) {
        v.push(format!("{stem} ({})", u.shown));
    }
    v.iter()
        .map(|s| format!("`{s}`"))
        .collect::<Vec<_>>()
        .join(", ")
}

fn err(file: &str, line: usize, column: Option<&str>, rule: String) -> InputError {
    InputError::Log {
        file: file.to_string(),
        line,
        column: column.map(|c| excerpt(c, 40)),
        rule,
    }
}

/// Finds each channel's column (index and unit) in the header.
fn map_header(
    file: &str,
    line: usize,
    headers: &csv::StringRecord,
    channels: &[Channel],
    rules: &Rules,
) -> Result<Vec<Option<(usize, Unit)>>, InputError> {
    let mut found: Vec<Option<(usize, Unit)>> = vec![None; channels.len()];
    let mut near: Vec<Vec<usize>> = vec![Vec::new(); channels.len()];
    for (i, h) in headers.iter().enumerate() {
        for (c, ch) in channels.iter().enumerate() {
            match claim(h, ch) {
                Claim::Unit(u) => {
                    if let Some((j, _)) = found[c] {
                        return Err(err(
                            file,
                            line,
                            Some(h),
                            format!(
                                "columns {} `{}` and {} `{}` both give the {}; keep one",
                                j + 1,
                                excerpt(&headers[j], 40),
                                i + 1,
                                excerpt(h, 40),
                                ch.what
                            ),
                        ));
                    }
                    found[c] = Some((i, u));
                }
                Claim::BadUnit(u) => {
                    return Err(err(
                        file,
                        line,
                        Some(h),
                        format!(
                            "unit `{}` is not one the {} takes; allowed: {}",
                            excerpt(&u, 20),
                            ch.what,
                            units_list(ch)
                        ),
                    ))
                }
                Claim::NoUnit => {
                    return Err(err(
                        file,
                        line,
                        Some(h),
                        format!(
                            "the {} needs its unit in the header: name the column {}",
                            ch.what,
                            spellings(ch)
                        ),
                    ))
                }
                Claim::NearMiss => near[c].push(i),
                Claim::None => {}
            }
        }
    }
    for (c, ch) in channels.iter().enumerate() {
        if found[c].is_some() || !ch.required {
            continue;
        }
        let hint = match near[c].first() {
            Some(&i) => format!(
                "; column {} `{}` may be meant, but its unit is not one of {}",
                i + 1,
                excerpt(&headers[i], 40),
                units_list(ch)
            ),
            None => String::new(),
        };
        let mut names: Vec<String> = headers.iter().take(8).map(|h| excerpt(h, 24)).collect();
        if headers.len() > 8 {
            names.push(format!("… {} columns in all", headers.len()));
        }
        return Err(err(
            file,
            line,
            Some(ch.name),
            format!(
                "no {} column in the header (found: {}); {} needs {}{hint}",
                ch.what,
                excerpt(&names.join(", "), 2 * EXCERPT_CHARS),
                rules.kind,
                spellings(ch)
            ),
        ));
    }
    Ok(found)
}

/// Parses one cell to an SI value, with the rules of its channel.
fn cell_value(
    file: &str,
    line: usize,
    header: &str,
    cell: &str,
    ch: &Channel,
    unit: &Unit,
) -> Result<f64, InputError> {
    let bad = |rule: String| err(file, line, Some(header), rule);
    if cell.is_empty() {
        return Err(bad(
            "empty cell: every sample needs a value (leave out a row that has none)".into(),
        ));
    }
    let v: f64 = cell.parse().map_err(|_| {
        bad(format!(
            "'{}' is not a number",
            excerpt(cell, EXCERPT_CHARS)
        ))
    })?;
    if v.is_nan() {
        return Err(bad(format!(
            "'{}' is not a value: every sample needs a number (leave out a row that has none)",
            excerpt(cell, EXCERPT_CHARS)
        )));
    }
    if !v.is_finite() {
        return Err(bad(format!(
            "'{}' is not a finite number",
            excerpt(cell, EXCERPT_CHARS)
        )));
    }
    let si = v * unit.factor;
    if si < ch.min || si > ch.max {
        let u = if unit.shown.is_empty() {
            String::new()
        } else {
            format!(" {}", unit.shown)
        };
        return Err(bad(format!(
            "{v}{u} is out of range; allowed {} ..= {}{u}{}",
            trim(ch.min / unit.factor),
            trim(ch.max / unit.factor),
            ch.why
        )));
    }
    Ok(si)
}

/// A bound in a message: up to six significant digits, no trailing zeros.
fn trim(v: f64) -> String {
    let s = format!("{v:.6}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s == "-0" {
        "0".into()
    } else {
        s.to_string()
    }
}

/// Reads a log with the time column and `channels`.
pub fn read(
    file: &str,
    text: &str,
    channels: &[Channel],
    rules: &Rules,
) -> Result<Table, InputError> {
    let mut rdr = csv::ReaderBuilder::new()
        .comment(Some(b'#'))
        .trim(csv::Trim::All)
        .from_reader(text.strip_prefix('\u{feff}').unwrap_or(text).as_bytes());
    let headers = rdr
        .headers()
        .map_err(|e| {
            let line = e.position().map_or(1, |p| p.line() as usize);
            err(
                file,
                line,
                None,
                format!("could not read the header line: {e}"),
            )
        })?
        .clone();
    let header_line = headers.position().map_or(1, |p| p.line() as usize);
    let mut all = vec![TIME];
    all.extend_from_slice(channels);
    let found = map_header(file, header_line, &headers, &all, rules)?;
    let Some((time_col, time_unit)) = found[0] else {
        unreachable!("the time column is required")
    };
    let mut time_s = Vec::new();
    let mut lines = Vec::new();
    let mut values: Vec<Option<Vec<f64>>> =
        found[1..].iter().map(|f| f.map(|_| Vec::new())).collect();
    for rec in rdr.records() {
        let rec = rec.map_err(|e| {
            let line = e.position().map_or(0, |p| p.line() as usize);
            let message = match e.kind() {
                csv::ErrorKind::UnequalLengths {
                    expected_len, len, ..
                } => format!(
                    "{len} cells where the header has {expected_len}: every row needs a cell for every column"
                ),
                csv::ErrorKind::Utf8 { .. } => "the line is not UTF-8 text".to_string(),
                _ => excerpt(&e.to_string(), 2 * EXCERPT_CHARS),
            };
            err(file, line, None, message)
        })?;
        let line = rec.position().map_or(0, |p| p.line() as usize);
        let t = cell_value(
            file,
            line,
            &headers[time_col],
            rec.get(time_col).unwrap_or(""),
            &TIME,
            &time_unit,
        )?;
        if let (Some(&prev), Some(&prev_line)) = (time_s.last(), lines.last()) {
            let bad = |rule: String| err(file, line, Some(&headers[time_col]), rule);
            if t < prev {
                return Err(bad(format!(
                    "{t} s comes after {prev} s (line {prev_line}); times must increase: sort the log by time"
                )));
            }
            if t == prev {
                return Err(bad(format!(
                    "{t} s repeats the time of line {prev_line}; each time must appear once (drop or average the repeated rows)"
                )));
            }
            if t - prev > rules.max_gap_s {
                return Err(bad(format!(
                    "a gap of {} s after {prev} s (line {prev_line}); {} bridges at most {} s between samples: split the log at the gap or fill it",
                    trim(t - prev),
                    rules.kind,
                    trim(rules.max_gap_s)
                )));
            }
        }
        for (c, f) in found[1..].iter().enumerate() {
            if let (Some((i, unit)), Some(col)) = (f, values[c].as_mut()) {
                col.push(cell_value(
                    file,
                    line,
                    &headers[*i],
                    rec.get(*i).unwrap_or(""),
                    &channels[c],
                    unit,
                )?);
            }
        }
        time_s.push(t);
        lines.push(line);
    }
    let span = match (time_s.first(), time_s.last()) {
        (Some(a), Some(b)) if time_s.len() >= 2 => b - a,
        _ => {
            return Err(err(
                file,
                header_line,
                None,
                format!(
                    "{} sample(s); {} needs at least two, spanning at least {} s",
                    time_s.len(),
                    rules.kind,
                    trim(rules.min_span_s)
                ),
            ))
        }
    };
    if span < rules.min_span_s {
        return Err(err(
            file,
            lines[lines.len() - 1],
            Some(&headers[time_col]),
            format!(
                "the samples span {} s; {} needs at least {} s",
                trim(span),
                rules.kind,
                trim(rules.min_span_s)
            ),
        ));
    }
    Ok(Table {
        time_s,
        values,
        columns: found[1..]
            .iter()
            .map(|f| f.map(|(i, _)| headers[i].to_string()))
            .collect(),
        lines,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    const V: Channel = Channel {
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
        max: 100.0,
        why: "",
    };
    const RULES: Rules = Rules {
        max_gap_s: 10.0,
        min_span_s: 0.0,
        kind: "a test log",
    };

    fn read_v(text: &str) -> Result<Table, String> {
        read("b.csv", text, &[V], &RULES).map_err(|e| e.to_string())
    }

    #[test]
    fn units_in_either_form_convert_to_si_and_other_columns_are_ignored() {
        let t = read_v(
            "# made up\ntime (ms), battery_temp_c, battery [mV]\n0, 20, 12000\n500, 21, 12500\n",
        )
        .expect("read");
        assert_eq!(t.time_s, vec![0.0, 0.5]);
        assert_eq!(t.values[0].as_deref(), Some(&[12.0, 12.5][..]));
        assert_eq!(t.columns[0].as_deref(), Some("battery [mV]"));
        assert_eq!(t.lines, vec![3, 4]);
        assert_eq!(normalise_unit("N·m"), "n_m");
        // A byte-order mark and epoch seconds are read as well.
        let t =
            read_v("\u{feff}time_s,battery_v\n1733212800.0,12\n1733212800.5,12\n").expect("read");
        assert_eq!(t.time_s[1] - t.time_s[0], 0.5);
        assert_eq!(normalise_unit(" rad / s "), "rad_s");
    }

    #[test]
    fn each_bad_case_names_line_column_and_rule() {
        let e = read_v("time_s,battery_v\n0,12\n1,NaN\n").unwrap_err();
        assert!(
            e.starts_with("b.csv:3: column `battery_v`: 'NaN' is not a value"),
            "{e}"
        );
        let e = read_v("time_s,battery_v\n0,12\n2,12\n1,12\n").unwrap_err();
        assert!(
            e.contains("b.csv:4: column `time_s`: 1 s comes after 2 s (line 3)"),
            "{e}"
        );
        let e = read_v("time_s,battery_v\n0,12\n0,12\n").unwrap_err();
        assert!(
            e.contains("b.csv:3: column `time_s`: 0 s repeats the time of line 2"),
            "{e}"
        );
        let e = read_v("time_s,battery_v\n0,12\n30,12\n").unwrap_err();
        assert!(e.contains("a gap of 30 s after 0 s (line 2)"), "{e}");
        let e = read_v("time_s,battery (kV)\n0,12\n").unwrap_err();
        assert!(e.contains("column `battery (kV)`: unit `kV` is not one the battery voltage takes; allowed: V, mV"), "{e}");
        let e = read_v("time_s,battery\n0,12\n").unwrap_err();
        assert!(e.contains("needs its unit in the header"), "{e}");
        let e = read_v("time_s,battery_kv\n0,12\n").unwrap_err();
        assert!(
            e.contains("no battery voltage column") && e.contains("`battery_kv` may be meant"),
            "{e}"
        );
        let e = read_v("time_s,battery_v\n0,12\n1\n").unwrap_err();
        assert!(e.contains("b.csv:3: 1 cells where the header has 2"), "{e}");
        let e = read_v("time_s,battery_v\n0,-3\n").unwrap_err();
        assert!(
            e.contains("-3 V is out of range; allowed 0 ..= 100 V"),
            "{e}"
        );
        let e = read_v("time_s,battery_v\n0,12\n").unwrap_err();
        assert!(e.contains("1 sample(s)"), "{e}");
        let e = read_v("time_s,battery_v,battery_voltage (V)\n0,12,12\n").unwrap_err();
        assert!(e.contains("both give the battery voltage"), "{e}");
    }
}
