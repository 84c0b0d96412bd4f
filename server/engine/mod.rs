//! The threshold engine and the workflow rules: plain Rust over domain types, with no web or
//! database types, so they can be tested on their own.

pub mod backtest;
pub mod canonical;
pub mod changes;
pub mod classify;
pub mod stats;
pub mod warnings;
pub mod workflow;

pub use classify::{
    Classification, Grades, Instructions, Side, Zone, classify, classify_all, grade_all,
    grade_all_with,
};
