//! Pure physics of the charging chain, SI units, no integrator and no I/O.

pub mod battery;
pub mod bridge;
pub mod circuit;
pub mod controller;
pub mod converter;
pub mod diode;
pub mod drive;
pub mod generator;
pub mod interp;
pub mod jitter;
pub mod network;
pub mod operator;
pub mod recording;
pub mod roots;
pub mod smooth;
pub mod thermal;
pub mod usb;
pub mod usb_network;
