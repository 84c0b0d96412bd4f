//! Redirects to a path the client named (`next` after sign-in, `back` after revoking a
//! token): only ever to a path on this site.

use axum::response::Redirect;

/// `candidate` when it can only mean a path on this site, `None` otherwise.
///
/// A browser reads a `Location` by the WHATWG URL Standard: it removes tabs and line breaks
/// anywhere, trims control characters and spaces at both ends, and for http and https reads
/// `\` as `/`. So `/\t/evil.example` and `/\evil.example` both become `//evil.example`, which
/// names another site. Accepted here: visible ASCII only (no control character, no space, no
/// backslash, nothing a header value could not carry), starting with exactly one `/`.
pub fn same_site_path(candidate: &str) -> Option<&str> {
    let visible = candidate
        .bytes()
        .all(|b| b.is_ascii_graphic() && b != b'\\');
    (visible && candidate.starts_with('/') && !candidate.starts_with("//")).then_some(candidate)
}

/// A 303 to `candidate` when it is a path on this site, else to `fallback`.
pub fn to_same_site(candidate: &str, fallback: &'static str) -> Redirect {
    Redirect::to(same_site_path(candidate).unwrap_or(fallback))
}
