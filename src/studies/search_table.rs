//! The rows of a search (`points.csv`): one per evaluated point, written to disk as each point
//! finishes (so an interrupted study keeps them) and read back by `--resume` and `merge`.
//!
//! Columns: the varied keys, `point` (its number: design points first, refined ones after),
//! `origin` (`grid`, `sample` or `refine`), the figures ([`FIGURES`]), `pareto` when a second
//! objective is given, then `feasible`. Figures are written in their shortest round-trip form,
//! so a row read back gives the very numbers that were written.

use std::fs;
use std::io::Write;
use std::path::{Path, PathBuf};

use anyhow::{anyhow, Context};
use serde::Serialize;

use crate::analysis::summary::fmt;

use super::population::{Figures, FIGURES};

/// Where a point came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Origin {
    Grid,
    Sample,
    Refine,
}

impl Origin {
    pub fn word(self) -> &'static str {
        match self {
            Origin::Grid => "grid",
            Origin::Sample => "sample",
            Origin::Refine => "refine",
        }
    }

    fn parse(s: &str) -> Option<Self> {
        match s {
            "grid" => Some(Origin::Grid),
            "sample" => Some(Origin::Sample),
            "refine" => Some(Origin::Refine),
            _ => None,
        }
    }
}

/// One evaluated point.
#[derive(Debug, Clone, PartialEq)]
pub struct Row {
    pub point: usize,
    pub origin: Origin,
    /// One override text per axis.
    pub values: Vec<String>,
    pub figures: Figures,
}

/// The column names of `points.csv`.
pub fn header(keys: &[String], pareto: bool) -> Vec<String> {
    let mut h: Vec<String> = keys.to_vec();
    h.push("point".into());
    h.push("origin".into());
    h.extend(FIGURES.iter().map(|f| f.name.to_string()));
    if pareto {
        h.push("pareto".into());
    }
    h.push("feasible".into());
    h
}

/// The cells of a row (`pareto`: None leaves that cell empty while the study runs).
pub fn cells(row: &Row, pareto: Option<Option<bool>>, feasible: bool) -> Vec<String> {
    let mut c = row.values.clone();
    c.push(row.point.to_string());
    c.push(row.origin.word().to_string());
    c.extend(
        row.figures
            .0
            .iter()
            .map(|v| v.map_or_else(String::new, fmt)),
    );
    if let Some(p) = pareto {
        c.push(p.map_or_else(String::new, |b| b.to_string()));
    }
    c.push(feasible.to_string());
    c
}

fn writer<W: Write>(w: W) -> csv::Writer<W> {
    csv::WriterBuilder::new()
        .terminator(csv::Terminator::Any(b'\n'))
        .from_writer(w)
}

/// The whole table as CSV bytes.
pub fn table(header: &[String], rows: &[Vec<String>]) -> anyhow::Result<Vec<u8>> {
    let mut w = writer(Vec::new());
    w.write_record(header)?;
    for r in rows {
        w.write_record(r)?;
    }
    w.into_inner().map_err(|e| anyhow!("{e}"))
}

/// `points.csv` while the study runs: rows appended and flushed as points finish.
pub struct Journal {
    path: PathBuf,
    csv: csv::Writer<fs::File>,
}

impl Journal {
    /// Starts the file with its header and the rows already known (a resumed study's).
    pub fn create(path: &Path, header: &[String], rows: &[Vec<String>]) -> anyhow::Result<Self> {
        let file = fs::File::create(path)
            .with_context(|| format!("could not create '{}'", path.display()))?;
        let mut j = Self {
            path: path.to_path_buf(),
            csv: writer(file),
        };
        j.csv.write_record(header)?;
        for r in rows {
            j.csv.write_record(r)?;
        }
        j.csv
            .flush()
            .with_context(|| format!("could not write '{}'", path.display()))?;
        Ok(j)
    }

    /// Appends one row and flushes it to disk.
    pub fn add(&mut self, cells: &[String]) -> anyhow::Result<()> {
        self.csv
            .write_record(cells)
            .and_then(|_| Ok(self.csv.flush()?))
            .with_context(|| format!("could not write '{}'", self.path.display()))
    }
}

/// Reads the rows of a `points.csv` written with `header`. A last line cut short (a study
/// stopped while writing it) is ignored; any other mismatch is an error.
pub fn read_rows(path: &Path, header: &[String], axes: usize) -> anyhow::Result<Vec<Row>> {
    let text =
        fs::read_to_string(path).with_context(|| format!("could not read '{}'", path.display()))?;
    let mut r = csv::ReaderBuilder::new()
        .flexible(true)
        .from_reader(text.as_bytes());
    let found: Vec<String> = r
        .headers()
        .with_context(|| format!("'{}' has no header", path.display()))?
        .iter()
        .map(String::from)
        .collect();
    if found != header {
        return Err(anyhow!(
            "'{}' has columns {} but this study writes {}",
            path.display(),
            found.join(","),
            header.join(",")
        ));
    }
    let records: Vec<csv::StringRecord> = r
        .records()
        .collect::<Result<_, _>>()
        .with_context(|| format!("could not read '{}'", path.display()))?;
    let mut rows = Vec::with_capacity(records.len());
    let last = records.len().saturating_sub(1);
    for (n, rec) in records.iter().enumerate() {
        match parse_row(rec, header.len(), axes) {
            Some(row) => rows.push(row),
            None if n == last && !text.ends_with('\n') => {}
            None => {
                return Err(anyhow!(
                    "'{}' line {}: not a row of this study",
                    path.display(),
                    n + 2
                ))
            }
        }
    }
    Ok(rows)
}

fn parse_row(rec: &csv::StringRecord, width: usize, axes: usize) -> Option<Row> {
    // A row cut short loses at least part of its last cell, `feasible`.
    if rec.len() != width || !matches!(&rec[width - 1], "true" | "false") {
        return None;
    }
    let values: Vec<String> = (0..axes).map(|i| rec[i].to_string()).collect();
    let point: usize = rec[axes].parse().ok()?;
    let origin = Origin::parse(&rec[axes + 1])?;
    let mut figures = Vec::with_capacity(FIGURES.len());
    for i in 0..FIGURES.len() {
        let cell = &rec[axes + 2 + i];
        figures.push(if cell.is_empty() {
            None
        } else {
            Some(cell.parse::<f64>().ok()?)
        });
    }
    Some(Row {
        point,
        origin,
        values,
        figures: Figures(figures),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(point: usize, v: &str, x: f64) -> Row {
        let mut f = vec![None; FIGURES.len()];
        f[0] = Some(20.0);
        f[11] = Some(x);
        Row {
            point,
            origin: Origin::Grid,
            values: vec![v.to_string()],
            figures: Figures(f),
        }
    }

    #[test]
    fn rows_read_back_exactly_and_a_cut_last_line_is_ignored() {
        let dir = tempfile::tempdir().expect("dir");
        let path = dir.path().join("points.csv");
        let h = header(&["k".to_string()], false);
        let a = row(0, "nmc", 0.1 + 0.2);
        let b = row(1, "lfp", 1.0 / 3.0);
        let mut j = Journal::create(&path, &h, &[cells(&a, None, true)]).expect("create");
        j.add(&cells(&b, None, false)).expect("add");
        drop(j);
        assert_eq!(read_rows(&path, &h, 1).expect("read"), vec![a.clone(), b]);
        // A row cut short by an interrupted write.
        let text = fs::read_to_string(&path).expect("read");
        let cut = &text[..text.len() - 9];
        fs::write(&path, cut).expect("write");
        assert_eq!(read_rows(&path, &h, 1).expect("read"), vec![a]);
        // Another study's file.
        let other = header(&["x".to_string()], false);
        assert!(read_rows(&path, &other, 1)
            .unwrap_err()
            .to_string()
            .contains("columns"));
    }
}
