//! Writing SVG: the picture width, the ink colours, coordinates as attribute text, escaping,
//! and the `<text>` and `<line>` elements every picture is made of.

use std::fmt::Write as _;

/// Width of every picture in viewBox units; the height grows with the rows.
pub(crate) const WIDTH: f64 = 720.0;
/// Near-black for text on light fills and for lines.
pub(crate) const INK: &str = "#1a1a1a";
pub(crate) const WHITE: &str = "#ffffff";
/// Light grey for the tick lines behind the strips.
pub(crate) const GRID: &str = "#d9d9d9";

/// A coordinate as attribute text; a tenth of a unit is finer than any screen shows.
pub(crate) fn at(v: f64) -> String {
    format!("{v:.1}")
}

/// Escapes text for XML content and attribute values (& < > " '), and replaces the characters
/// XML 1.0 cannot carry at all, even escaped (most C0 controls, U+FFFE, U+FFFF), with U+FFFD.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            '\u{0}'..='\u{8}'
            | '\u{B}'
            | '\u{C}'
            | '\u{E}'..='\u{1F}'
            | '\u{FFFE}'
            | '\u{FFFF}' => out.push('\u{FFFD}'),
            c => out.push(c),
        }
    }
    out
}

/// Writes a `<text>` element; the content is escaped here so that no caller can forget it.
pub(crate) fn text(out: &mut String, x: f64, y: f64, attributes: &str, content: &str) {
    let _ = writeln!(
        out,
        r#"<text x="{}" y="{}" {attributes}>{}</text>"#,
        at(x),
        at(y),
        escape(content)
    );
}

pub(crate) fn line(out: &mut String, (x1, y1): (f64, f64), (x2, y2): (f64, f64), attributes: &str) {
    let _ = writeln!(
        out,
        r#"<line x1="{}" y1="{}" x2="{}" y2="{}" {attributes}/>"#,
        at(x1),
        at(y1),
        at(x2),
        at(y2)
    );
}

/// Width of `text` at `size`, estimated: SVG text cannot be measured on the server, and most
/// sans-serif characters are narrower than 0.6 em.
pub(crate) fn text_width(text: &str, size: f64) -> f64 {
    text.chars().count() as f64 * size * 0.6
}
