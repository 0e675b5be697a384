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
/// (half away from zero) and writes its digits two at a time into a stack buffer, copied in one
/// piece: several times faster than `format!` and without an allocation.
fn push_fixed(out: &mut Vec<u8>, v: f64, decimals: usize) {
    const POW10: [f64; 10] = [1.0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9];
    let d = decimals.min(POW10.len() - 1);
    let x = v * POW10[d];
    // x.round() (half away from zero) for |x| < 9e15 < 2^53: truncation is exact there, and so
    // is the remainder.
    let n = if x.abs() < 9.0e15 {
        let t = x as i64;
        let frac = x - t as f64;
        if frac >= 0.5 {
            t + 1
        } else if frac <= -0.5 {
            t - 1
        } else {
            t
        }
    } else {
        i64::MAX
    };
    if n.unsigned_abs() >= 9_000_000_000_000_000 {
        // Huge or not finite: the standard formatting.
        let s = format!("{v:.d$}");
        let negative_zero = s.starts_with('-') && s[1..].chars().all(|c| c == '0' || c == '.');
        out.extend_from_slice(if negative_zero {
            &s.as_bytes()[1..]
        } else {
            s.as_bytes()
        });
        return;
    }
    // Digits from the right: the decimals, the point, then at least one integer digit.
    let mut buf = [0u8; 32];
    let mut pos = buf.len();
    let mut m = n.unsigned_abs();
    let mut written = 0usize;
    while m >= 100 && written + 2 <= d {
        let k = (m % 100) as usize * 2;
        m /= 100;
        pos -= 2;
        buf[pos..pos + 2].copy_from_slice(&DIGIT_PAIRS[k..k + 2]);
        written += 2;
    }
    while written < d {
        pos -= 1;
        buf[pos] = b'0' + (m % 10) as u8;
        m /= 10;
        written += 1;
    }
    if d > 0 {
        pos -= 1;
        buf[pos] = b'.';
    }
    while m >= 100 {
        let k = (m % 100) as usize * 2;
        m /= 100;
        pos -= 2;
        buf[pos..pos + 2].copy_from_slice(&DIGIT_PAIRS[k..k + 2]);
    }
    if m >= 10 {
        let k = m as usize * 2;
        pos -= 2;
        buf[pos..pos + 2].copy_from_slice(&DIGIT_PAIRS[k..k + 2]);
    } else {
        pos -= 1;
        buf[pos] = b'0' + m as u8;
    }
    if n < 0 {
        pos -= 1;
        buf[pos] = b'-';
    }
    out.extend_from_slice(&buf[pos..]);
}

/// "00" … "99".
const DIGIT_PAIRS: [u8; 200] = {
    let mut t = [0u8; 200];
    let mut k = 0;
    while k < 100 {
        t[2 * k] = b'0' + (k / 10) as u8;
        t[2 * k + 1] = b'0' + (k % 10) as u8;
        k += 1;
    }
    t
};

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

    /// The rule the digits follow, written with the standard library: v·10^d rounded half away
    /// from zero (`f64::round`), its integer printed by `Display`, the point put d digits in.
    fn by_std_round(v: f64, d: usize) -> String {
        let r = (v * 10f64.powi(d as i32)).round() as i64;
        let digits = format!("{:0>width$}", r.unsigned_abs(), width = d + 1);
        let (int, frac) = digits.split_at(digits.len() - d);
        let sign = if r < 0 { "-" } else { "" };
        if d == 0 {
            format!("{sign}{int}")
        } else {
            format!("{sign}{int}.{frac}")
        }
    }

    // Common practice: fixed-decimal cells must not depend on the formatting path taken;
    // the ties (…5 exactly at the rounding digit) round away from zero.
    #[test]
    fn digits_follow_the_half_away_from_zero_rule() {
        let mut x: u64 = 0x9E37_79B9_7F4A_7C15;
        let mut values = vec![
            0.5, -0.5, 2.5, -2.5, 0.125, 99.995, 1234567.0, 8.99e14, -7.0e13,
        ];
        for _ in 0..20_000 {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            let mant = (x >> 11) as f64 / (1u64 << 53) as f64;
            let exp = (x % 17) as i32 - 8;
            let sign = if x & 1 == 0 { 1.0 } else { -1.0 };
            values.push(sign * mant * 10f64.powi(exp));
        }
        for &v in &values {
            for d in 0..=9 {
                if (v * 10f64.powi(d as i32)).abs() >= 8.0e15 {
                    continue;
                }
                let want = by_std_round(v, d);
                let want =
                    if want.starts_with('-') && want[1..].chars().all(|c| c == '0' || c == '.') {
                        want[1..].to_string()
                    } else {
                        want
                    };
                assert_eq!(f(v, d), want, "v = {v:e}, d = {d}");
            }
        }
        assert_eq!(f(f64::NAN, 3), "NaN");
        assert_eq!(f(1e300, 2).len(), 304);
    }

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
