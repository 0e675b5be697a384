//! Reading setup and profile text, applying `--set` overrides by dotted path, typed parsing with
//! positions, and range validation. One mechanism for setup and `profile.` keys alike.

use serde::de::DeserializeOwned;

use crate::text::excerpt;

use super::error::{InputError, Place};
use super::profile::{Follow, Profile};
use super::quantity;
use super::replay;
use super::ronpath::{self, Segment};
use super::setup::Setup;
pub use super::source::{InputKind, SourceText};
use super::suggest;
use super::validate::{self, Violation};

/// Longest parser message quoted (it may echo the input, e.g. an unknown field's name).
const MESSAGE_CHARS: usize = 4 * crate::text::EXCERPT_CHARS;

/// Prefix that routes an override to the profile file.
pub const PROFILE_PREFIX: &str = "profile.";

/// A `--set KEY=VALUE` pair.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Override {
    pub key: String,
    pub value: String,
}

impl std::str::FromStr for Override {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let (k, v) = s
            .split_once('=')
            .ok_or_else(|| format!("expected KEY=VALUE (e.g. battery.soc_start=0.5), got '{s}'"))?;
        let key = k.trim();
        if key.is_empty() || v.trim().is_empty() {
            return Err(format!("expected KEY=VALUE with both parts, got '{s}'"));
        }
        Ok(Self {
            key: key.to_string(),
            value: v.trim().to_string(),
        })
    }
}

/// A parsed, validated pair of setup and profile.
#[derive(Debug, Clone, PartialEq)]
pub struct Scenario {
    pub setup: Setup,
    pub profile: Profile,
    pub setup_source: SourceText,
    pub profile_source: SourceText,
    pub overrides: Vec<Override>,
    /// The setup and profile texts as run: the files with the overrides written into them.
    pub setup_text: String,
    pub profile_text: String,
}

/// Parses, overrides and validates a setup and a profile.
pub fn load_scenario(
    setup: &SourceText,
    profile: &SourceText,
    overrides: &[Override],
) -> Result<Scenario, InputError> {
    let (mut setup_ov, mut profile_ov) = (Vec::new(), Vec::new());
    for o in overrides {
        if let Some(rest) = o.key.strip_prefix(PROFILE_PREFIX) {
            profile_ov.push((o, rest));
        } else {
            setup_ov.push((o, o.key.strip_prefix("setup.").unwrap_or(&o.key)));
        }
    }
    let (s, s_text) = parse_with::<Setup>(setup, &setup_ov)?;
    let (p, p_text) = if replay::is_log(profile) {
        replay_profile(profile, &profile_ov)?
    } else {
        parse_with::<Profile>(profile, &profile_ov)?
    };
    report(validate::setup(&s), setup, &s_text, &setup_ov, "")?;
    report(
        validate::profile(&p),
        profile,
        &p_text,
        &profile_ov,
        PROFILE_PREFIX,
    )?;
    Ok(Scenario {
        setup: s,
        profile: p,
        setup_source: setup.clone(),
        profile_source: profile.clone(),
        overrides: overrides.to_vec(),
        setup_text: s_text,
        profile_text: p_text,
    })
}

/// A crank log as a profile: the log read and checked, its outline written as profile text (see
/// `replay`), the overrides applied to that text, and the recording attached.
fn replay_profile(
    src: &SourceText,
    ovs: &[(&Override, &str)],
) -> Result<(Profile, String), InputError> {
    let rec = replay::read(src)?;
    let outline = SourceText {
        name: src.name.clone(),
        text: replay::profile_text(&rec, &src.stem()),
        built_in: src.built_in,
    };
    let (mut p, text) = parse_with::<Profile>(&outline, ovs)?;
    if p.replay.follow == Follow::Torque && rec.torque_n_m.is_none() {
        let place = ovs.iter().find(|(_, k)| k.starts_with("replay")).map_or(
            Place::FileOnly {
                file: src.name.clone(),
            },
            |(o, _)| Place::Override {
                key: o.key.clone(),
                value: o.value.clone(),
            },
        );
        return Err(InputError::Range {
            place,
            path: format!("{PROFILE_PREFIX}replay.follow"),
            value: "torque".into(),
            allowed: format!(
                "auto or cadence: the log has no `{}` column",
                replay::TORQUE.name
            ),
        });
    }
    p.recording = Some(std::sync::Arc::new(rec));
    Ok((p, text))
}

/// Applies overrides to the text, then parses it with positions and field paths.
fn parse_with<T: DeserializeOwned>(
    src: &SourceText,
    ovs: &[(&Override, &str)],
) -> Result<(T, String), InputError> {
    let mut text = src.text.clone();
    let mut paths = Vec::with_capacity(ovs.len());
    let mut unit_error = None;
    for (o, key) in ovs {
        let path = ronpath::parse_path(key).map_err(|e| InputError::Override {
            key: o.key.clone(),
            message: e.to_string(),
        })?;
        // A unit the field does not take is reported once the field itself is known to exist
        // (an unknown field is the first thing to fix): meanwhile its number stands in.
        let value = match quantity::normalise(key, &o.value) {
            Ok(v) => v,
            Err(message) => {
                unit_error.get_or_insert(InputError::Override {
                    key: o.key.clone(),
                    message,
                });
                quantity::number_part(&o.value).unwrap_or_else(|| o.value.clone())
            }
        };
        let edited = ronpath::set(&text, &path, &value).map_err(|e| InputError::Override {
            key: o.key.clone(),
            message: e.to_string(),
        })?;
        text = edited.text;
        paths.push(((*o).clone(), path));
    }
    let opts =
        ron::Options::default().with_default_extension(ron::extensions::Extensions::IMPLICIT_SOME);
    let mut de =
        ron::Deserializer::from_str_with_options(&text, opts).map_err(|e| InputError::Syntax {
            place: place_at(src, &text, &paths, e.position.line, e.position.col),
            message: excerpt(&e.code.to_string(), MESSAGE_CHARS),
        })?;
    let parsed: Result<T, _> = serde_path_to_error::deserialize(&mut de);
    match parsed {
        Ok(v) => {
            if let Err(e) = de.end() {
                let se = de.span_error(e);
                return Err(InputError::Syntax {
                    place: place_at(src, &text, &paths, se.position.line, se.position.col),
                    message: format!(
                        "{} (text after the end of the value)",
                        excerpt(&se.code.to_string(), MESSAGE_CHARS)
                    ),
                });
            }
            match unit_error {
                Some(e) => Err(e),
                None => Ok((v, text)),
            }
        }
        Err(e) => {
            let path = dotted(&e.path().to_string());
            let inner = e.into_inner();
            let se = de.span_error(inner.clone());
            // The parser stops after an unknown name: point at its first character instead.
            let back = match &inner {
                ron::Error::NoSuchStructField { found, .. }
                | ron::Error::NoSuchEnumVariant { found, .. } => found.chars().count(),
                _ => 0,
            };
            let col = if se.position.col > back {
                se.position.col - back
            } else {
                se.position.col
            };
            let place = place_at(src, &text, &paths, se.position.line, col);
            // Our wording names our own fields in full; the parser's own text may echo the input
            // at any length, so it is cut.
            let message = suggest::describe(&inner)
                .unwrap_or_else(|| excerpt(&inner.to_string(), MESSAGE_CHARS));
            if matches!(inner, ron::Error::ExpectedDifferentStructName { .. })
                || path.is_empty()
                || path == "?"
            {
                Err(InputError::Syntax { place, message })
            } else {
                Err(InputError::Field {
                    place,
                    path,
                    message,
                })
            }
        }
    }
}

/// Converts serde_path_to_error's `a.b[0].c` to our dotted form `a.b.0.c`.
fn dotted(p: &str) -> String {
    p.replace('[', ".").replace(']', "")
}

/// Maps a position in the edited text to the override that produced it, or to the file.
fn place_at(
    src: &SourceText,
    text: &str,
    paths: &[(Override, Vec<Segment>)],
    line: usize,
    col: usize,
) -> Place {
    for (o, path) in paths {
        // The value, and the key of every level (an inserted `a: (b: (c: v))` may be blamed at `a`).
        let spans = std::iter::once(ronpath::locate(text, path))
            .chain((1..=path.len()).map(|k| ronpath::locate_key(text, &path[..k])));
        for s in spans.flatten() {
            let (end_line, end_col) = ronpath::line_col(text, s.end);
            let after_start = (line, col) >= (s.line, s.col);
            let before_end = (line, col) <= (end_line, end_col);
            if after_start && before_end {
                return Place::Override {
                    key: o.key.clone(),
                    value: o.value.clone(),
                };
            }
        }
    }
    Place::File {
        file: src.name.clone(),
        line,
        col,
    }
}

/// Turns the first range violation into an error with its place.
fn report(
    violations: Vec<Violation>,
    src: &SourceText,
    text: &str,
    ovs: &[(&Override, &str)],
    prefix: &str,
) -> Result<(), InputError> {
    let Some(v) = violations.into_iter().next() else {
        return Ok(());
    };
    let place = if let Some((o, _)) = ovs
        .iter()
        .find(|(_, k)| *k == v.path || v.path.starts_with(&format!("{k}.")))
    {
        Place::Override {
            key: o.key.clone(),
            value: o.value.clone(),
        }
    } else {
        let span = ronpath::parse_path(&v.path)
            .ok()
            .and_then(|p| ronpath::locate(text, &p).or_else(|| parent_span(text, &p)));
        match span {
            Some(s) => Place::File {
                file: src.name.clone(),
                line: s.line,
                col: s.col,
            },
            None => Place::FileOnly {
                file: src.name.clone(),
            },
        }
    };
    Err(InputError::Range {
        place,
        path: format!("{prefix}{}", v.path),
        value: v.value,
        allowed: v.allowed,
    })
}

/// Span of the nearest present ancestor (for a field left at its default).
fn parent_span(text: &str, path: &[Segment]) -> Option<ronpath::Span> {
    (0..path.len())
        .rev()
        .find_map(|n| ronpath::locate(text, &path[..n]))
}
