//! Numbers with a unit in `--set` values: every field carries its unit in its name
//! (`capacity_ah`, `inductance_h`), so `--set battery.capacity_ah=2500mAh` is converted to the
//! field's unit (2.5) and `--set battery.capacity_ah=20C` is refused with the units accepted.

/// A unit a field accepts: its spellings and its size in the field's unit.
struct Unit {
    names: &'static [&'static str],
    factor: f64,
}

const fn u(names: &'static [&'static str], factor: f64) -> Unit {
    Unit { names, factor }
}

/// The units of a field, from its name's suffix (longest suffix first); None for a field whose
/// name carries no unit (a ratio, a fraction, a count, a word).
fn units_of(field: &str) -> Option<&'static [Unit]> {
    const TABLE: &[(&str, &[Unit])] = &[
        ("_v_per_krpm", &[u(&["V/krpm"], 1.0), u(&["mV/rpm"], 1.0)]),
        ("_kg_m2", &[u(&["kg·m²", "kg*m^2", "kgm2", "kg_m2"], 1.0)]),
        ("_n_m_s", &[u(&["N·m·s", "Nms", "N*m*s"], 1.0)]),
        (
            "_n_m",
            &[u(&["N·m", "Nm", "N*m"], 1.0), u(&["mN·m", "mNm"], 1e-3)],
        ),
        ("_v_per_cell", &[u(&["V"], 1.0), u(&["mV"], 1e-3)]),
        ("_ah", &[u(&["Ah"], 1.0), u(&["mAh"], 1e-3)]),
        (
            "_ohm",
            &[
                u(&["Ω", "ohm"], 1.0),
                u(&["mΩ", "mohm"], 1e-3),
                u(&["kΩ", "kohm"], 1e3),
            ],
        ),
        ("_rpm", &[u(&["rpm"], 1.0)]),
        (
            "_hz",
            &[u(&["Hz"], 1.0), u(&["kHz"], 1e3), u(&["MHz"], 1e6)],
        ),
        ("_kg", &[u(&["kg"], 1.0), u(&["g"], 1e-3)]),
        (
            "_m2",
            &[
                u(&["m²", "m2", "m^2"], 1.0),
                u(&["cm²", "cm2", "cm^2"], 1e-4),
            ],
        ),
        (
            "_rad",
            &[
                u(&["rad"], 1.0),
                u(&["deg", "°"], std::f64::consts::PI / 180.0),
            ],
        ),
        ("_v", &[u(&["V"], 1.0), u(&["mV"], 1e-3), u(&["kV"], 1e3)]),
        (
            "_a",
            &[u(&["A"], 1.0), u(&["mA"], 1e-3), u(&["µA", "uA"], 1e-6)],
        ),
        (
            "_s",
            &[
                u(&["s"], 1.0),
                u(&["ms"], 1e-3),
                u(&["µs", "us"], 1e-6),
                u(&["min"], 60.0),
                u(&["h"], 3600.0),
            ],
        ),
        ("_c", &[u(&["°C", "degC", "C"], 1.0)]),
        ("_k", &[u(&["K"], 1.0)]),
        (
            "_h",
            &[u(&["H"], 1.0), u(&["mH"], 1e-3), u(&["µH", "uH"], 1e-6)],
        ),
        (
            "_f",
            &[
                u(&["F"], 1.0),
                u(&["mF"], 1e-3),
                u(&["µF", "uF"], 1e-6),
                u(&["nF"], 1e-9),
            ],
        ),
        ("_w", &[u(&["W"], 1.0), u(&["mW"], 1e-3), u(&["kW"], 1e3)]),
        ("_j", &[u(&["J"], 1.0), u(&["kJ"], 1e3), u(&["Wh"], 3600.0)]),
    ];
    let found = TABLE.iter().find(|(suffix, _)| field.ends_with(suffix));
    match found {
        // Other compound units (W/(m²·K), J/K…) take plain numbers.
        Some((suffix, _)) if field.contains("_per_") && !suffix.contains("_per_") => None,
        f => f.map(|(_, units)| *units),
    }
}

/// Splits `20mAh` into its number and unit; None when the value is not a number followed by
/// letters (a plain number, a word, a list…).
fn split(value: &str) -> Option<(f64, &str)> {
    let v = value.trim();
    let end = v
        .char_indices()
        .find(|&(k, c)| {
            !(c.is_ascii_digit()
                || c == '.'
                || ((c == '-' || c == '+') && (k == 0 || matches!(&v[k - 1..k], "e" | "E")))
                || ((c == 'e' || c == 'E')
                    && k > 0
                    && v[k + 1..]
                        .starts_with(|d: char| d.is_ascii_digit() || d == '-' || d == '+')))
        })
        .map_or(v.len(), |(k, _)| k);
    if end == 0 || end == v.len() {
        return None;
    }
    let number: f64 = v[..end].parse().ok()?;
    Some((number, v[end..].trim()))
}

/// The number of a number-with-unit value (`20` of `20C`), as written.
pub fn number_part(value: &str) -> Option<String> {
    split(value).map(|(n, _)| format!("{n}"))
}

/// The value to write into the field: a number with a unit converted to the field's unit, any
/// other value unchanged. Err names the units the field accepts.
pub fn normalise(key: &str, value: &str) -> Result<String, String> {
    let Some((number, unit)) = split(value) else {
        return Ok(value.to_string());
    };
    let field = key.rsplit('.').next().unwrap_or(key);
    let Some(units) = units_of(field) else {
        return Err(format!(
            "`{value}`: `{field}` takes a plain number (no unit)"
        ));
    };
    let accepted: Vec<&str> = units.iter().flat_map(|u| u.names.iter().copied()).collect();
    match units.iter().find(|u| u.names.contains(&unit)) {
        Some(u) => Ok(format!("{}", number * u.factor)),
        None => Err(format!(
            "`{value}`: unit `{unit}` is not one `{field}` takes; accepted: {} (or a plain number in {})",
            accepted.join(", "),
            units[0].names[0]
        )),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn numbers_with_units_convert_to_the_fields_unit() {
        assert_eq!(normalise("battery.capacity_ah", "2500mAh").unwrap(), "2.5");
        assert_eq!(normalise("battery.capacity_ah", "20 Ah").unwrap(), "20");
        assert_eq!(
            normalise("generator.inductance_h", "1.2mH").unwrap(),
            "0.0012"
        );
        assert_eq!(
            normalise("converter.switching_frequency_hz", "150kHz").unwrap(),
            "150000"
        );
        assert_eq!(normalise("converter.soft_start_s", "50ms").unwrap(), "0.05");
        assert_eq!(normalise("ambient_c", "-5°C").unwrap(), "-5");
        assert_eq!(
            normalise("generator.resistance_ohm", "150mohm").unwrap(),
            "0.15"
        );
    }

    #[test]
    fn plain_values_pass_unchanged() {
        for v in [
            "0.5",
            "-3",
            "1e-3",
            "2.5E+2",
            "nmc",
            "true",
            "(ratio: 3.0, efficiency: 0.9)",
        ] {
            assert_eq!(normalise("battery.capacity_ah", v).unwrap(), v);
        }
    }

    #[test]
    fn a_unit_the_field_does_not_take_is_refused_with_the_list() {
        let e = normalise("battery.capacity_ah", "20C").unwrap_err();
        assert_eq!(
            e,
            "`20C`: unit `C` is not one `capacity_ah` takes; accepted: Ah, mAh (or a plain number in Ah)"
        );
        let e = normalise("drive.stages.0.ratio", "5x").unwrap_err();
        assert!(e.contains("takes a plain number"), "{e}");
        // A compound unit is not mistaken for its last factor.
        let e = normalise("battery.specific_heat_j_per_kg_k", "900K").unwrap_err();
        assert!(e.contains("takes a plain number"), "{e}");
        let e = normalise("drive.viscous_friction_n_m_s", "2ms").unwrap_err();
        assert!(e.contains("N·m·s"), "{e}");
    }
}
