//! Our own wording of the RON parser's complaints about names: an unknown field or value gets the
//! nearest valid name ("did you mean") and the list it was looked for in.

use crate::text::{excerpt, EXCERPT_CHARS};

/// The valid name nearest to `found`, if one is close enough to be a likely slip: within a third
/// of its length in edits (at least two), or one that starts with what was typed
/// (`capacity` → `capacity_ah`).
pub fn nearest<'a>(found: &str, valid: &[&'a str]) -> Option<&'a str> {
    let f = found.to_lowercase();
    if let Some(p) = valid
        .iter()
        .filter(|v| v.starts_with(f.as_str()) && !f.is_empty())
        .min_by_key(|v| v.len())
    {
        return Some(p);
    }
    let limit = (f.chars().count() / 3).max(2);
    valid
        .iter()
        .map(|v| (strsim::damerau_levenshtein(&f, &v.to_lowercase()), *v))
        .filter(|&(d, _)| d <= limit)
        .min_by_key(|&(d, _)| d)
        .map(|(_, v)| v)
}

/// The list of valid names in a message: `a`, `b` or `c`.
fn listed(valid: &[&str]) -> String {
    let quoted: Vec<String> = valid.iter().map(|v| format!("`{v}`")).collect();
    match quoted.len() {
        0 => "none".to_string(),
        1 => quoted[0].clone(),
        n => format!("{} or {}", quoted[..n - 1].join(", "), quoted[n - 1]),
    }
}

/// A name-related parser error in our words, or None for the others (their own text stands).
/// The name as typed is quoted in short; the valid names in full.
pub fn describe(e: &ron::Error) -> Option<String> {
    let short = |s: &str| excerpt(s, EXCERPT_CHARS);
    match e {
        ron::Error::NoSuchStructField {
            expected, found, ..
        } => Some(match nearest(found, expected) {
            Some(n) => format!(
                "unknown field `{}`: did you mean `{n}`? (fields here: {})",
                short(found),
                listed(expected)
            ),
            None => format!(
                "unknown field `{}` (fields here: {})",
                short(found),
                listed(expected)
            ),
        }),
        ron::Error::NoSuchEnumVariant {
            expected, found, ..
        } => Some(match nearest(found, expected) {
            Some(n) => format!(
                "unknown value `{}`: did you mean `{n}`? (allowed: {})",
                short(found),
                listed(expected)
            ),
            None => format!(
                "unknown value `{}` (allowed: {})",
                short(found),
                listed(expected)
            ),
        }),
        ron::Error::MissingStructField { field, .. } => {
            Some(format!("the required field `{field}` is missing"))
        }
        ron::Error::DuplicateStructField { field, .. } => {
            Some(format!("the field `{field}` is given twice"))
        }
        _ => None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const BATTERY: [&str; 5] = [
        "chemistry",
        "capacity_ah",
        "soc_start",
        "cells_series",
        "cells_parallel",
    ];

    #[test]
    fn slips_and_prefixes_find_the_field() {
        assert_eq!(nearest("soc_strat", &BATTERY), Some("soc_start"));
        assert_eq!(nearest("capacity", &BATTERY), Some("capacity_ah"));
        assert_eq!(nearest("Chemistry", &BATTERY), Some("chemistry"));
        assert_eq!(nearest("cells_seris", &BATTERY), Some("cells_series"));
        assert_eq!(nearest("nmcc", &["nmc", "lco", "nca", "lfp"]), Some("nmc"));
    }

    #[test]
    fn unrelated_names_find_nothing() {
        assert_eq!(nearest("flywheel", &BATTERY), None);
        assert_eq!(nearest("zz", &["nmc", "lco"]), None);
    }

    #[test]
    fn the_message_names_the_suggestion_and_the_list() {
        let e = ron::Error::NoSuchStructField {
            expected: &["ratio", "efficiency"],
            found: "ratioo".into(),
            outer: Some("Stage".into()),
        };
        assert_eq!(
            describe(&e).as_deref(),
            Some("unknown field `ratioo`: did you mean `ratio`? (fields here: `ratio` or `efficiency`)")
        );
    }
}
