//! Laws every result must keep before any file is written: SOC within [0, 1], the energy ledger
//! closed within its bound, every figure finite. A session that breaks one fails (exit 3) with
//! the reason and writes nothing.

use serde::Serialize;

use super::trace::Trace;

/// Largest relative closure error of the energy ledger a published result may have
/// (DESIGN.md §3: tests hold it under 0.1 %).
pub const LEDGER_BOUND: f64 = 1e-3;

/// How far SOC may pass 0 or 1 at integration tolerance `rtol`: by that tolerance (SOC is
/// integrated to it on a value near 1), at least 1e-9 (rounding). An explicit step approaching
/// the fixed point at full, where a charger keeps pushing current into a full cell whose charge
/// acceptance ends steeply (a supercapacitor's, within 1e-4 of full), can overshoot it by that
/// much: up to 5e-5 seen at rtol 1e-4 before the exact solution, which never passes 1, pulls it
/// back. Past the tolerance it is a fault. Results are then written with SOC put back into
/// [0, 1] ([`clamp_soc`]).
pub fn soc_slack(rtol: f64) -> f64 {
    rtol.max(1e-9)
}

/// SOC put back into [0, 1] once [`check`] has found it within [`soc_slack`] of it.
pub fn clamp_soc(soc: f64) -> f64 {
    soc.clamp(0.0, 1.0)
}

/// A broken law.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum Broken {
    #[error(
        "the state of charge left [0, 1]: {soc} at t = {t_s} s (a modelling or integration fault; \
         no result written)"
    )]
    Soc { soc: f64, t_s: f64 },
    #[error(
        "the energy ledger closes only to {error:.2e}, past its bound {bound:e} (tighten \
         solver.rtol or solver.max_step_s; no result written)"
    )]
    Ledger { error: f64, bound: f64 },
    #[error("the figure `{figure}` is not finite ({value}); no result written")]
    NonFinite { figure: String, value: String },
    /// The ledger stayed open when the session was run again once at a tighter tolerance.
    #[error(
        "the energy ledger closes only to {:.2e} at solver.rtol {:e} and solver.max_step_s {} s, \
         and only to {:.2e} when run again at {:e} and {} s, past its bound {bound:e} (a closure \
         that falls with the tolerance may close at a tighter one still; one that does not points \
         at an energy flow the ledger misses; no result written)",
        first.energy_balance_error,
        first.rtol,
        first.max_step_s,
        rerun.energy_balance_error,
        rerun.rtol,
        rerun.max_step_s
    )]
    LedgerAfterRerun {
        first: Attempt,
        rerun: Attempt,
        bound: f64,
    },
}

/// One integration of a session whose ledger did not close: its tolerance and its closure.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Attempt {
    /// Relative tolerance, and the largest step, s.
    pub rtol: f64,
    pub max_step_s: f64,
    /// Relative closure error of the energy ledger.
    pub energy_balance_error: f64,
}

/// Checks a session's trace, final SOC, figures (any serialisable summary: every number in it
/// must be finite) and ledger closure, in that order: a [`Broken::Ledger`] means the closure is
/// the only law the result breaks (integration error, which a tighter tolerance reduces).
pub fn check<S: Serialize>(
    trace: &Trace,
    soc_end: f64,
    duration_s: f64,
    ledger_error: f64,
    figures: &S,
    soc_slack: f64,
) -> Result<(), Broken> {
    let outside = |soc: f64| !(-soc_slack..=1.0 + soc_slack).contains(&soc);
    if let Some(row) = trace.rows.iter().find(|r| outside(r.soc)) {
        return Err(Broken::Soc {
            soc: row.soc,
            t_s: row.time_s,
        });
    }
    if outside(soc_end) {
        return Err(Broken::Soc {
            soc: soc_end,
            t_s: duration_s,
        });
    }
    if let Some((figure, value)) = non_finite(figures) {
        return Err(Broken::NonFinite { figure, value });
    }
    if ledger_error.is_nan() || ledger_error > LEDGER_BOUND {
        return Err(Broken::Ledger {
            error: ledger_error,
            bound: LEDGER_BOUND,
        });
    }
    Ok(())
}

/// The first non-finite number of a serialisable value, with its field name: the value is written
/// as RON, which spells non-finite floats `NaN`, `inf` and `-inf` (JSON would hide them as null).
pub fn non_finite<S: Serialize>(figures: &S) -> Option<(String, String)> {
    let text = match ron::to_string(figures) {
        Ok(t) => t,
        Err(e) => return Some(("(unserialisable)".into(), e.to_string())),
    };
    let b = text.as_bytes();
    let mut i = 0;
    let mut field = String::new();
    while i < b.len() {
        match b[i] {
            b'"' => {
                // Skip a string, with its escapes.
                i += 1;
                while i < b.len() && b[i] != b'"' {
                    i += if b[i] == b'\\' { 2 } else { 1 };
                }
                i += 1;
            }
            c if c.is_ascii_alphabetic() || c == b'_' => {
                let start = i;
                while i < b.len() && (b[i].is_ascii_alphanumeric() || b[i] == b'_') {
                    i += 1;
                }
                let word = &text[start..i];
                if i < b.len() && b[i] == b':' {
                    field = word.to_string();
                } else if matches!(word, "NaN" | "inf") {
                    let neg = start > 0 && b[start - 1] == b'-';
                    let value = if neg { format!("-{word}") } else { word.into() };
                    return Some((field, value));
                }
            }
            _ => i += 1,
        }
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;

    #[derive(Serialize)]
    struct Figures {
        name: String,
        ok_value: f64,
        inner: Inner,
    }
    #[derive(Serialize)]
    struct Inner {
        bad_value: f64,
    }

    #[test]
    fn a_non_finite_figure_is_found_by_name_and_text_is_not_mistaken_for_one() {
        let f = Figures {
            name: "NaN inf".into(),
            ok_value: 1.5,
            inner: Inner {
                bad_value: f64::NEG_INFINITY,
            },
        };
        assert_eq!(
            non_finite(&f),
            Some(("bad_value".to_string(), "-inf".to_string()))
        );
        let g = Figures {
            name: "NaN".into(),
            ok_value: 2.0,
            inner: Inner { bad_value: 0.0 },
        };
        assert_eq!(non_finite(&g), None);
        let h = Inner {
            bad_value: f64::NAN,
        };
        assert_eq!(non_finite(&h).map(|x| x.1), Some("NaN".into()));
    }

    #[test]
    fn soc_past_full_and_an_open_ledger_are_refused() {
        let trace = Trace { rows: Vec::new() };
        assert!(matches!(
            check(&trace, 1.015, 600.0, 1e-5, &0.0, 1e-9),
            Err(Broken::Soc { .. })
        ));
        assert!(matches!(
            check(&trace, 0.5, 600.0, 7e-3, &0.0, 1e-9),
            Err(Broken::Ledger { .. })
        ));
        assert!(matches!(
            check(&trace, 0.5, 600.0, f64::NAN, &0.0, 1e-9),
            Err(Broken::Ledger { .. })
        ));
        assert_eq!(check(&trace, 1.0, 600.0, 9e-4, &0.0, 1e-9), Ok(()));
        // Within the integration tolerance past full, but not beyond it.
        assert_eq!(
            check(&trace, 1.0 + 5e-5, 600.0, 9e-4, &0.0, soc_slack(1e-4)),
            Ok(())
        );
        assert!(matches!(
            check(&trace, 1.0 + 2e-4, 600.0, 9e-4, &0.0, soc_slack(1e-4)),
            Err(Broken::Soc { .. })
        ));
    }

    #[test]
    fn an_open_ledger_is_reported_as_such_only_when_every_figure_is_finite() {
        // The session reruns a `Ledger` result at a tighter tolerance: it must mean that the
        // closure is the one law broken.
        let trace = Trace { rows: Vec::new() };
        let bad = Inner {
            bad_value: f64::NAN,
        };
        assert!(matches!(
            check(&trace, 0.5, 600.0, 7e-3, &bad, 1e-9),
            Err(Broken::NonFinite { .. })
        ));
        assert!(matches!(
            check(&trace, 0.5, 600.0, 7e-3, &Inner { bad_value: 1.0 }, 1e-9),
            Err(Broken::Ledger { .. })
        ));
    }
}
