//! The page templates, compiled into the binary and parsed once.

use std::collections::BTreeSet;
use std::sync::LazyLock;

use tera::{Context, Kwargs, State, Tera};

/// `(name, text)` of templates in `templates/`, compiled into the binary.
macro_rules! embed {
    ($($name:literal),* $(,)?) => {
        &[$(($name, include_str!(concat!("../../templates/", $name)))),*]
    };
}

/// Every template, by name. They live in `templates/` at the top of the repository.
const TEMPLATES: &[(&str, &str)] = embed![
    "base.html",
    "error.html",
    "signin.html",
    "metrics_list.html",
    "metric_detail.html",
    "metric_form.html",
    "admin_users.html",
    "admin_user.html",
    "admin_user_new.html",
    "admin_tokens.html",
    "proposal.html",
    "proposal_form.html",
    "inbox.html",
    "audit_index.html",
    "audit_timeline.html",
    "audit_as_of.html",
    "audit_exceptions.html",
    "audit_events.html",
    "published.html",
    "published_changes.html",
    "evidence.html",
    "observations_refused.html",
    "signoff.html",
];

/// The style sheet, served at `/static/style.css`.
pub const STYLE_CSS: &str = include_str!("../../templates/style.css");

static TERA: LazyLock<Tera> = LazyLock::new(|| {
    let mut tera = Tera::new();
    tera.register_filter("urlencode", |s: &str, _: Kwargs, _: &State| {
        serde_urlencoded::to_string([("", s)])
            .map(|e| e.trim_start_matches('=').to_string())
            .unwrap_or_default()
    });
    // Numbers in the shortest form that reads back as the same value: 75, 0.1, 1e-7.
    tera.register_filter("num", |v: f64, _: Kwargs, _: &State| {
        crate::domain::number::format(v)
    });
    // A unified diff as HTML (web/diff_html.rs).
    tera.register_filter("diff", |s: &str, _: Kwargs, _: &State| {
        tera::Value::safe_string(&super::diff_html::diff_html(s))
    });
    tera.add_raw_templates(TEMPLATES.iter().copied())
        .expect("the page templates parse");
    tera
});

/// Parses the templates now, so a broken one stops the server at start-up, not at a request.
pub fn load() {
    LazyLock::force(&TERA);
}

/// The names of every template, in the order they are listed above.
pub fn names() -> impl Iterator<Item = &'static str> {
    TEMPLATES.iter().map(|(name, _)| *name)
}

/// The names a template reads from its context, with those of the layout it extends and the
/// templates it includes, whatever branch they sit in (loop and `set` variables are not
/// counted): for checking its data supplies each one (tests/suite/page_templates.rs).
pub fn variables(name: &str) -> Result<BTreeSet<String>, tera::Error> {
    Ok(TERA
        .get_template_variables(name)?
        .into_iter()
        .map(str::to_string)
        .collect())
}

/// Renders a template; a failure here is a bug in a template and is logged.
pub fn render(name: &str, context: &Context) -> Result<String, tera::Error> {
    TERA.render(name, context).inspect_err(|e| {
        tracing::error!(template = name, error = %e, "template failed to render");
    })
}
