//! Validated domain types. Each is built by a parsing constructor that refuses bad input, so
//! the layers above never check the same thing twice.

pub mod access;
pub mod csv_out;
pub mod json_errors;
pub mod key;
pub mod metric;
pub mod number;
pub mod observations;
pub mod people;
pub mod problems;
pub mod proposal;
pub mod text;
pub mod thresholds;
pub mod time;
mod validated_text;

pub use key::MetricKey;
pub use metric::Metric;
pub use people::{Person, PersonRef, Role, Roles, User, Username};
pub use problems::{FieldProblem, Problems};
pub use thresholds::{CutSet, Direction, Shades};
pub use time::Timestamp;
