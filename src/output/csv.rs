//! CSV formatters for the trace and the events; they return bytes and never open files.

use crate::analysis::events::{Event, EVENT_COLUMNS};
use crate::analysis::trace::{Trace, TraceRow, TRACE_COLUMNS};

/// Why a CSV could not be formed.
#[derive(Debug, thiserror::Error)]
#[error("could not format CSV: {0}")]
pub struct CsvError(#[from] ::csv::Error);

fn writer() -> ::csv::Writer<Vec<u8>> {
    ::csv::WriterBuilder::new()
        .terminator(::csv::Terminator::Any(b'\n'))
        .from_writer(Vec::new())
}

fn finish(w: ::csv::Writer<Vec<u8>>) -> Result<Vec<u8>, CsvError> {
    w.into_inner().map_err(|e| CsvError(e.into_error().into()))
}

/// Fixed-decimal formatting; `-0` printed as `0` so identical runs give identical bytes.
fn f(v: f64, decimals: usize) -> String {
    let mut out = Vec::with_capacity(24);
    push_fixed(&mut out, v, decimals);
    String::from_utf8(out).expect("ASCII digits")
}

/// Appends `v` with `decimals` fixed decimals to `out` (`-0` as `0`). Rounds v·10^d to an integer
/// and prints it with itoa, several times faster than `format!` and without an allocation.
fn push_fixed(out: &mut Vec<u8>, v: f64, decimals: usize) {
    const POW10: [f64; 10] = [1.0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9];
    let d = decimals.min(POW10.len() - 1);
    let scaled = (v * POW10[d]).round();
    if !scaled.is_finite() || scaled.abs() >= 9.0e15 {
        let s = format!("{v:.d$}");
        let negative_zero = s.starts_with('-') && s[1..].chars().all(|c| c == '0' || c == '.');
        out.extend_from_slice(if negative_zero {
            &s.as_bytes()[1..]
        } else {
            s.as_bytes()
        });
        return;
    }
    let n = scaled as i64;
    let mut buf = itoa::Buffer::new();
    let digits = buf.format(n.unsigned_abs()).as_bytes();
    if n < 0 {
        out.push(b'-');
    }
    if d == 0 {
        out.extend_from_slice(digits);
    } else if digits.len() <= d {
        out.extend_from_slice(b"0.");
        out.extend(std::iter::repeat_n(b'0', d - digits.len()));
        out.extend_from_slice(digits);
    } else {
        let (int, frac) = digits.split_at(digits.len() - d);
        out.extend_from_slice(int);
        out.push(b'.');
        out.extend_from_slice(frac);
    }
}

/// One cell of a trace row: a number with its fixed decimals, or a word.
enum Cell {
    Num(f64, usize),
    Word(&'static str),
}

fn trace_record(r: &TraceRow) -> [Cell; TRACE_COLUMNS.len()] {
    use Cell::{Num, Word};
    [
        Num(r.time_s, 3),
        Num(r.crank_rpm, 3),
        Num(r.target_rpm, 3),
        Num(r.generator_rpm, 2),
        Num(r.emf_v, 5),
        Num(r.generator_current_a, 6),
        Num(r.input_v, 5),
        Num(r.duty, 5),
        Num(r.output_v, 6),
        Num(r.battery_v, 6),
        Num(r.battery_current_a, 6),
        Num(r.soc, 7),
        Num(r.battery_temp_c, 4),
        Num(r.operator_power_w, 4),
        Word(r.mode.as_str()),
        Num(r.charge_limit_v, 6),
        Num(r.operator_torque_n_m, 5),
        Num(r.w_prime_balance_j, 2),
        Num(r.winding_temp_c, 4),
        Word(if r.in_regulation { "1" } else { "0" }),
        Num(r.bus_v, 6),
        Num(r.bus_current_a, 6),
        Num(r.operator_mean_power_w, 4),
        Num(r.junction_temp_c, 4),
    ]
}

/// `trace.csv` bytes: header then one row per sample. Every cell is a number or one of the fixed
/// mode words, none of which needs CSV quoting, so the rows are written straight into the buffer
/// (a trace has tens of thousands of rows and this is on the path of every run); the header goes
/// through the csv writer like every other table.
pub fn trace_csv(trace: &Trace) -> Result<Vec<u8>, CsvError> {
    let mut w = writer();
    w.write_record(TRACE_COLUMNS)?;
    let mut out = finish(w)?;
    out.reserve(trace.rows.len() * 160);
    for r in &trace.rows {
        for (k, c) in trace_record(r).into_iter().enumerate() {
            if k > 0 {
                out.push(b',');
            }
            match c {
                Cell::Num(v, d) => push_fixed(&mut out, v, d),
                Cell::Word(s) => {
                    debug_assert!(!s.bytes().any(|b| matches!(b, b',' | b'"' | b'\n' | b'\r')));
                    out.extend_from_slice(s.as_bytes());
                }
            }
        }
        out.push(b'\n');
    }
    Ok(out)
}

/// `events.csv` bytes.
pub fn events_csv(events: &[Event]) -> Result<Vec<u8>, CsvError> {
    let mut w = writer();
    w.write_record(EVENT_COLUMNS)?;
    for e in events {
        w.write_record([
            e.kind.as_str().to_string(),
            f(e.start_s, 4),
            f(e.end_s, 4),
            f(e.duration_s, 4),
            e.quantity.to_string(),
            e.unit.to_string(),
            f(e.threshold, 5),
            f(e.worst, 5),
            e.affects_verdict.to_string(),
            e.detail.clone(),
        ])?;
    }
    finish(w)
}

/// A table with a header and string rows, as CSV bytes (studies).
pub fn table_csv(header: &[String], rows: &[Vec<String>]) -> Result<Vec<u8>, CsvError> {
    let mut w = writer();
    w.write_record(header)?;
    for r in rows {
        w.write_record(r)?;
    }
    finish(w)
}

#[cfg(test)]
mod tests {
    use super::f;

    #[test]
    fn fixed_formatting_matches_std_formatting() {
        for &v in &[
            0.0,
            -0.0,
            1.5,
            -1.5,
            0.000_4,
            -0.000_4,
            12.345_678_9,
            1e-9,
            -3.0,
            600.0,
            0.1 + 0.2,
        ] {
            for d in [0usize, 3, 6] {
                let ours = f(v, d);
                let std = format!("{v:.d$}");
                let std = if std.starts_with('-') && std[1..].chars().all(|c| c == '0' || c == '.')
                {
                    std[1..].to_string()
                } else {
                    std
                };
                assert_eq!(ours, std, "v = {v}, d = {d}");
            }
        }
    }
}
