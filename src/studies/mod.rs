//! Studies built on the one session engine: run, compare, sweep, Monte Carlo, search (and merge); and the two that
//! run no session: check (static design figures) and fit (generator constants from measurements).

pub mod args;
pub mod cautions;
pub mod check;
pub mod check_kinds;
pub mod check_report;
pub mod check_usb;
pub mod compare;
pub mod compare_measured;
pub mod digest;
pub mod fit;
pub mod fit_alternator;
pub mod fit_operator;
pub mod fit_print;
pub mod goal;
pub mod merge;
pub mod montecarlo;
pub mod operating_map;
pub mod outcome;
pub mod pages;
pub mod population;
pub mod progress;
pub mod refine;
pub mod run;
pub mod search;
pub mod search_finish;
pub mod search_study;
pub mod search_table;
pub mod session;
pub mod space;
pub mod statics;
pub mod sweep;
