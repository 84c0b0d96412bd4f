//! Pictures of thresholds and histories, drawn as SVG text: pure geometry and markup over the
//! domain types, with no HTTP, no templates and no database. The pages embed what these
//! functions return.
//!
//! The zone strip ([`zone_strip`]) shows cut sets as coloured zones on one value axis, so
//! people can compare the thresholds in force with a proposal at a glance; the history chart
//! ([`history`]) draws a metric's values over time on the zones. The page CSP forbids inline
//! styles and scripts, so the pictures use SVG presentation attributes only, and every piece of
//! text from outside goes through [`svg::escape`].

pub mod history;
pub mod scale;
pub mod svg;
pub mod zone_strip;
mod zones;
