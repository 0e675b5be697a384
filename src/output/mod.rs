//! Writing results: CSV and JSON formatters (bytes in memory), charts, and the run folder that is
//! filled in a temporary place and renamed into position.

pub mod csv;
pub mod font;
pub mod json;
pub mod plot;
pub mod report;
pub mod rundir;
