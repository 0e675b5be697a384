//! Setups and crank profiles shipped inside the binary (the same files as in `profiles/`).

/// An embedded file: short name, repository path and text.
#[derive(Debug, Clone, Copy)]
pub struct Embedded {
    pub name: &'static str,
    pub path: &'static str,
    pub text: &'static str,
}

macro_rules! embed {
    ($name:literal, $dir:literal) => {
        Embedded {
            name: $name,
            path: concat!("profiles/", $dir, "/", $name, ".ron"),
            text: include_str!(concat!("../../profiles/", $dir, "/", $name, ".ron")),
        }
    };
}

/// Shipped setups; the first is the demo.
pub const SETUPS: &[Embedded] = &[
    embed!("demo", "setups"),
    embed!("lead-acid-direct", "setups"),
    embed!("demo-buck-boost", "setups"),
    embed!("lfp-linear", "setups"),
    embed!("lead-acid-buck", "setups"),
    embed!("usb-phone", "setups"),
    embed!("alternator-hub", "setups"),
    embed!("nimh-aa-pack", "setups"),
    embed!("supercap-bank", "setups"),
];

/// Shipped crank profiles; the first is the default.
pub const PROFILES: &[Embedded] = &[
    embed!("steady", "cranking"),
    embed!("tiring", "cranking"),
    embed!("sprint-and-rest", "cranking"),
    embed!("uneven", "cranking"),
    embed!("overreach", "cranking"),
];
