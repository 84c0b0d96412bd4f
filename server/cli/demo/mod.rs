//! The `demo` command's scenario: Quillfield Cycle Commons, an invented city bike-share
//! cooperative, as data (`scenario.rs`), its invented metric histories (`history.rs`) and the
//! seeding of an empty database with it through the operations (`seed.rs`).

mod history;
mod scenario;
mod seed;

pub use scenario::{DemoPerson, PEOPLE};
pub use seed::seed;
