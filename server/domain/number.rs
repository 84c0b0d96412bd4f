//! Numbers as people and hashes see them: the shortest text that reads back as the same f64,
//! in the form ECMAScript and RFC 8785 use (`75`, `0.1`, `1e-7`, `1e+21`).

use std::fmt;

/// Formats a finite number in shortest round-trip form; non-finite numbers never reach here
/// (the domain refuses them), but print as `NaN`/`Infinity` rather than panic.
pub fn format(value: f64) -> String {
    if value.is_finite() {
        ryu_js::Buffer::new().format_finite(value).to_string()
    } else {
        ryu_js::Buffer::new().format(value).to_string()
    }
}

/// A number that displays in shortest round-trip form.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Num(pub f64);

impl fmt::Display for Num {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&format(self.0))
    }
}
