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
/// Rounds v·10^d to an integer and prints it with itoa (several times faster than `format!`).
fn f(v: f64, decimals: usize) -> String {
    const POW10: [f64; 10] = [1.0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9];
    let d = decimals.min(POW10.len() - 1);
    let scaled = (v * POW10[d]).round();
    if !scaled.is_finite() || scaled.abs() >= 9.0e15 {
        let s = format!("{v:.d$}");
        return if s.starts_with('-') && s[1..].chars().all(|c| c == '0' || c == '.') {
            s[1..].to_string()
        } else {
            s
        };
    }
    let n = scaled as i64;
    let mut buf = itoa::Buffer::new();
    let digits = buf.format(n.unsigned_abs());
    let mut out = String::with_capacity(digits.len() + 3);
    if n < 0 {
        out.push('-');
    }
    if d == 0 {
        out.push_str(digits);
        return out;
    }
    if digits.len() <= d {
        out.push_str("0.");
        out.extend(std::iter::repeat_n('0', d - digits.len()));
        out.push_str(digits);
    } else {
        let (int, frac) = digits.split_at(digits.len() - d);
        out.push_str(int);
        out.push('.');
        out.push_str(frac);
    }
    out
}

fn trace_record(r: &TraceRow) -> [String; TRACE_COLUMNS.len()] {
    [
        f(r.time_s, 3),
        f(r.crank_rpm, 3),
        f(r.target_rpm, 3),
        f(r.generator_rpm, 2),
        f(r.emf_v, 5),
        f(r.generator_current_a, 6),
        f(r.input_v, 5),
        f(r.duty, 5),
        f(r.output_v, 6),
        f(r.battery_v, 6),
        f(r.battery_current_a, 6),
        f(r.soc, 7),
        f(r.battery_temp_c, 4),
        f(r.operator_power_w, 4),
        r.mode.as_str().to_string(),
        f(r.charge_limit_v, 6),
        f(r.operator_torque_n_m, 5),
        f(r.w_prime_balance_j, 2),
        f(r.winding_temp_c, 4),
        u8::from(r.in_regulation).to_string(),
        f(r.bus_v, 6),
        f(r.bus_current_a, 6),
    ]
}

/// `trace.csv` bytes: header then one row per sample.
pub fn trace_csv(trace: &Trace) -> Result<Vec<u8>, CsvError> {
    let mut w = writer();
    w.write_record(TRACE_COLUMNS)?;
    for r in &trace.rows {
        w.write_record(trace_record(r))?;
    }
    finish(w)
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
            f(e.peak, 5),
            e.unit.clone(),
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
