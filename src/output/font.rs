//! Embedded DejaVu Sans faces registered with the plotting library once per process.

use std::sync::OnceLock;

use plotters::style::{register_font, FontStyle};

/// Family name under which the embedded faces are registered (and which the charts ask for).
pub const FAMILY: &str = "sans-serif";

static REGISTERED: OnceLock<Result<(), String>> = OnceLock::new();

/// Registers DejaVu Sans (regular and bold) as [`FAMILY`]; later calls only return the first outcome.
///
/// Text cannot be measured or drawn before this has succeeded, so every chart calls it first.
pub fn ensure_registered() -> Result<(), String> {
    REGISTERED
        .get_or_init(|| {
            register_font(FAMILY, FontStyle::Normal, dejavu::sans::regular())
                .map_err(|_| "embedded DejaVu Sans regular face could not be parsed".to_string())?;
            register_font(FAMILY, FontStyle::Bold, dejavu::sans::bold())
                .map_err(|_| "embedded DejaVu Sans bold face could not be parsed".to_string())
        })
        .clone()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn registration_is_idempotent() {
        assert_eq!(ensure_registered(), Ok(()));
        assert_eq!(ensure_registered(), Ok(()));
    }
}
