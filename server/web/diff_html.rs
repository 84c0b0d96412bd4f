//! Unified diffs as HTML, for the `diff` filter the page templates call.

/// A unified diff as HTML: every line keeps its `+`/`-`, added lines are `<ins>` and removed
/// lines `<del>`, each with words for screen readers, so they differ in more than colour.
pub fn diff_html(diff: &str) -> String {
    if diff.is_empty() {
        return String::new();
    }
    let mut out = String::from("<pre class=\"diff\">");
    for line in diff.lines() {
        let text = crate::charts::svg::escape(line);
        let html = if line.starts_with("+++") || line.starts_with("---") {
            format!("<span class=\"file\">{text}</span>")
        } else if line.starts_with("@@") {
            format!("<span class=\"hunk\">{text}</span>")
        } else if line.starts_with('+') {
            format!("<ins><span class=\"visually-hidden\">added: </span>{text}</ins>")
        } else if line.starts_with('-') {
            format!("<del><span class=\"visually-hidden\">removed: </span>{text}</del>")
        } else {
            format!("<span>{text}</span>")
        };
        out.push_str(&html);
        out.push('\n');
    }
    out.push_str("</pre>");
    out
}
